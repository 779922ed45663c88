import { Rng } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { ExplorationNoise } from '../src/noise';

/** Sample mean, variance and lag-one autocorrelation of component 0 over `steps` steps. */
function moments(noise: ExplorationNoise, steps: number, width: number, burn = 200) {
  const rng = new Rng('noise-test');
  const out = new Float32Array(width);
  const xs = new Float64Array(steps * width);
  for (let k = 0; k < burn; k++) noise.sample(rng, out, width);
  for (let k = 0; k < steps; k++) {
    noise.sample(rng, out, width);
    for (let c = 0; c < width; c++) xs[c * steps + k] = out[c]!;
  }
  let m = 0;
  for (const x of xs) m += x / xs.length;
  let v = 0;
  let c1 = 0;
  for (let c = 0; c < width; c++) {
    for (let k = 0; k < steps; k++) {
      const d = xs[c * steps + k]! - m;
      v += (d * d) / xs.length;
      if (k > 0) c1 += (d * (xs[c * steps + k - 1]! - m)) / (xs.length - width);
    }
  }
  return { m, v, rho: c1 / v };
}

describe('exploration noise', () => {
  it('Ornstein-Uhlenbeck: stationary variance sigma^2/(2 theta) and lag-one correlation exp(-theta dt)', () => {
    // Exact-discretisation properties (Gillespie 1996); 64 independent processes x 4000 steps.
    for (const dt of [1, 0.25]) {
      const theta = 0.15;
      const sigma = 0.2;
      const s = moments(new ExplorationNoise({ kind: 'ou', theta, sigma, dt }), 4000, 64);
      const v = (sigma * sigma) / (2 * theta);
      const rho = Math.exp(-theta * dt);
      // Effective sample size of a correlated series ~ N (1 - rho) / (1 + rho); tolerances are a
      // few standard errors of the variance estimate (2 v^2 / N_eff) and of rho.
      const nEff = (64 * 4000 * (1 - rho)) / (1 + rho);
      expect(Math.abs(s.v - v)).toBeLessThan(4 * v * Math.sqrt(2 / nEff));
      expect(Math.abs(s.rho - rho)).toBeLessThan(4 * Math.sqrt((1 - rho * rho) / (64 * 4000)) + 1e-3);
      expect(Math.abs(s.m)).toBeLessThan(4 * Math.sqrt(v / nEff));
    }
  });

  it('Gaussian: independent N(0, std^2) draws', () => {
    const s = moments(new ExplorationNoise({ kind: 'gaussian', std: 0.3 }), 2000, 32, 0);
    const n = 2000 * 32;
    expect(Math.abs(s.v - 0.09)).toBeLessThan(4 * 0.09 * Math.sqrt(2 / n));
    expect(Math.abs(s.rho)).toBeLessThan(4 / Math.sqrt(n));
  });

  it('reset zeroes a range of processes; state round-trips', () => {
    const noise = new ExplorationNoise({ kind: 'ou', theta: 0.15, sigma: 0.2, dt: 1 });
    const out = new Float32Array(6);
    const rng = new Rng(3);
    for (let k = 0; k < 5; k++) noise.sample(rng, out, 6);
    const saved = noise.getState();
    noise.reset(2, 2);
    const x = noise.getState().x;
    expect([x[2], x[3]]).toEqual([0, 0]);
    expect(x[1]).toBe(saved.x[1]);
    expect(x[4]).toBe(saved.x[4]);
    const copy = new ExplorationNoise({ kind: 'ou', theta: 0.15, sigma: 0.2, dt: 1 });
    copy.setState(saved);
    noise.setState(saved);
    const a = new Float32Array(6);
    const b = new Float32Array(6);
    const r = rng.getState();
    noise.sample(Rng.fromState(r), a, 6);
    copy.sample(Rng.fromState(r), b, 6);
    expect(b).toEqual(a);
  });
});
