/**
 * Dynamical-systems measurements of the uncontrolled KS solver, used to check it against
 * published values (Cvitanovic, Davidchack & Siminos 2010, SIAM J. Appl. Dyn. Syst. 9, 1-33).
 */
import { KsSolver, seedKsNoise, spinUpSteps } from './ks';

export interface LyapunovOptions {
  readonly length: number;
  readonly points: number;
  readonly dt: number;
  /** Independent trajectory pairs (each from its own seeded attractor state). */
  readonly pairs: number;
  /** Averaging time per pair. */
  readonly time: number;
  readonly seed: number;
  /** Spin-up before measuring (default 100). */
  readonly spinUp?: number;
  /** Time between renormalisations (default 1). */
  readonly renormEvery?: number;
  /** Initial and renormalised separation relative to the state norm (default 1e-7). */
  readonly separation?: number;
}

export interface LyapunovEstimate {
  /** Mean over pairs of the finite-time exponent. */
  readonly mean: number;
  /** Standard error of the mean over pairs (sample standard deviation / sqrt(pairs)). */
  readonly stdErr: number;
  /** Each pair's exponent. */
  readonly perPair: readonly number[];
}

/**
 * Leading Lyapunov exponent by the two-trajectory method with periodic renormalisation
 * (Benettin, Galgani, Giorgilli & Strelcyn 1980, Meccanica 15, 9-20): a reference and a
 * perturbed copy are stepped together; every `renormEvery` the spectral-space distance d is
 * logged as ln(d/d0) and the perturbed copy is pulled back to distance d0 along the
 * separation. The exponent is the sum of the logs over the total time.
 */
export function estimateLyapunov(o: LyapunovOptions): LyapunovEstimate {
  const pairs = o.pairs;
  if (!Number.isInteger(pairs) || pairs < 2) throw new Error(`estimateLyapunov: pairs must be an integer >= 2, got ${pairs}`);
  const s = new KsSolver({ length: o.length, points: o.points, dt: o.dt, copies: 2 * pairs });
  for (let p = 0; p < pairs; p++) {
    seedKsNoise(s, 2 * p, o.seed * 1000 + p, 0.1);
    seedKsNoise(s, 2 * p + 1, o.seed * 1000 + p, 0.1);
  }
  const spin = spinUpSteps(o.spinUp ?? 100, o.dt);
  for (let i = 0; i < spin; i++) s.step();
  const m = s.nSpec;
  const rel = o.separation ?? 1e-7;
  const d0 = new Float64Array(pairs);
  for (let p = 0; p < pairs; p++) {
    let norm = 0;
    for (let j = 0; j < m; j++) norm += s.vRe[2 * p * m + j]! ** 2 + s.vIm[2 * p * m + j]! ** 2;
    // Perturb mode 1 of the partner copy (the pair starts identical).
    d0[p] = rel * Math.sqrt(norm);
    s.vRe[(2 * p + 1) * m + 1]! += d0[p]!;
  }
  const every = spinUpSteps(o.renormEvery ?? 1, o.dt);
  const rounds = Math.round(o.time / (every * o.dt));
  const sums = new Float64Array(pairs);
  for (let r = 0; r < rounds; r++) {
    for (let i = 0; i < every; i++) s.step();
    for (let p = 0; p < pairs; p++) {
      const a = 2 * p * m;
      const b = (2 * p + 1) * m;
      let d = 0;
      for (let j = 0; j < m; j++) d += (s.vRe[b + j]! - s.vRe[a + j]!) ** 2 + (s.vIm[b + j]! - s.vIm[a + j]!) ** 2;
      d = Math.sqrt(d);
      sums[p]! += Math.log(d / d0[p]!);
      const f = d0[p]! / d;
      for (let j = 0; j < m; j++) {
        s.vRe[b + j] = s.vRe[a + j]! + f * (s.vRe[b + j]! - s.vRe[a + j]!);
        s.vIm[b + j] = s.vIm[a + j]! + f * (s.vIm[b + j]! - s.vIm[a + j]!);
      }
    }
  }
  const total = rounds * every * o.dt;
  const perPair = Array.from(sums, (x) => x / total);
  const mean = perPair.reduce((x, y) => x + y, 0) / pairs;
  const sd = Math.sqrt(perPair.reduce((x, y) => x + (y - mean) ** 2, 0) / (pairs - 1));
  return { mean, stdErr: sd / Math.sqrt(pairs), perPair };
}
