import { describe, expect, it } from 'vitest';
import { Rng } from '../src/random';

describe('Rng', () => {
  it('same seed gives the same stream, exactly', () => {
    const a = new Rng(42);
    const b = new Rng(42);
    for (let i = 0; i < 1000; i++) expect(a.uniform()).toBe(b.uniform());
  });

  it('saved state resumes the stream exactly, spare normal included', () => {
    const a = new Rng('run-7');
    for (let i = 0; i < 37; i++) a.normal(); // odd count leaves a spare deviate
    const state = JSON.parse(JSON.stringify(a.getState()));
    const b = Rng.fromState(state);
    for (let i = 0; i < 500; i++) expect(b.normal()).toBe(a.normal());
    for (let i = 0; i < 500; i++) expect(b.uniform()).toBe(a.uniform());
  });

  it('derived streams differ from each other', () => {
    const x = Rng.derive(1, 'replay').uniform();
    const y = Rng.derive(1, 'noise').uniform();
    expect(x).not.toBe(y);
  });

  it('normal deviates have the moments of N(0,1) (CLT-sized tolerance)', () => {
    const r = new Rng(3);
    const n = 200_000;
    let s1 = 0, s2 = 0, s4 = 0;
    for (let i = 0; i < n; i++) {
      const z = r.normal();
      s1 += z; s2 += z * z; s4 += z ** 4;
    }
    // Standard errors: mean 1/sqrt(n) = 0.0022, variance sqrt(2/n) = 0.0032, 4th moment sqrt(96/n) = 0.022.
    expect(Math.abs(s1 / n)).toBeLessThan(5 * 0.0022);
    expect(Math.abs(s2 / n - 1)).toBeLessThan(5 * 0.0032);
    expect(Math.abs(s4 / n - 3)).toBeLessThan(5 * 0.022);
  });

  it('int(n) is uniform over [0, n) (chi-square, 9 dof, 99.9% quantile 27.88)', () => {
    const r = new Rng(11);
    const n = 10, draws = 100_000;
    const counts = new Array<number>(n).fill(0);
    for (let i = 0; i < draws; i++) counts[r.int(n)]!++;
    const e = draws / n;
    const chi2 = counts.reduce((s, c) => s + (c - e) ** 2 / e, 0);
    expect(chi2).toBeLessThan(27.88); // chi-square table value (e.g. NIST/SEMATECH e-Handbook, Table 1.3.6.7.4)
  });

  it('rejects a bad saved state and a bad seed', () => {
    expect(() => Rng.fromState({ algorithm: 'xor4096', core: { X: [1, 2], w: 0, i: 0 }, spare: null })).toThrow(/128 state words/);
    expect(() => new Rng(Number.NaN)).toThrow(/seed/);
  });
});
