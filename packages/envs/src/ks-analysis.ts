/**
 * Dynamical-systems measurements of the uncontrolled KS solver, used to check it against
 * published values (Cvitanovic, Davidchack & Siminos 2010, SIAM J. Appl. Dyn. Syst. 9, 1-33).
 */
import { KsSolver, seedKsNoise, spinUpSteps } from './ks';
import { Rng } from './random';

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

export interface EquilibriumSearchOptions {
  readonly length: number;
  readonly points: number;
  /** Newton starts (each from a seeded antisymmetric state integrated for a while). */
  readonly starts: number;
  readonly seed: number;
}

export interface Equilibrium {
  /** E = <u^2>/2 (Cvitanovic, Davidchack & Siminos 2010). */
  readonly energy: number;
  /** Euclidean norm of Im F over the coefficients at convergence, divided by n. */
  readonly residual: number;
  /** b_k with v_k = FFT(u)_k = i b_k, k = 1..n/2-1 (unnormalised, as in fft.ts). */
  readonly coefficients: Float64Array;
}

/**
 * Equilibria F(u) = -u u_x - u_xx - u_xxxx = 0 in the antisymmetric subspace u(-x) = -u(x)
 * (pure sine series, v_k = i b_k), where the translation symmetry is broken so the Jacobian
 * is regular. Damped Newton (finite-difference Jacobian, Gaussian elimination with partial
 * pivoting, step halving) from `starts` seeded antisymmetric states advanced in time (the
 * flow keeps the subspace). Converged solutions are returned, duplicates (same energy to
 * 1e-8) removed, sorted by energy. The published L = 22 equilibria E1, E2, E3 lie in this
 * subspace (Cvitanovic, Davidchack & Siminos 2010, sec. 4).
 */
export function antisymmetricEquilibria(o: EquilibriumSearchOptions): Equilibrium[] {
  const { length: L, points: n } = o;
  const K = n / 2;
  const m = K - 1;
  const sim = new KsSolver({ length: L, points: n, dt: 0.05, copies: 1 });
  const k = sim.k;
  const vr = new Float64Array(K + 1);
  const vi = new Float64Array(K + 1);
  const wr = new Float64Array(K + 1);
  const wi = new Float64Array(K + 1);
  // G(b)_k = Im F_k for v = i b: L_k b_k - (k/2) Re FFT(u^2)_k.
  const G = (b: Float64Array, out: Float64Array): void => {
    vr.fill(0);
    vi.fill(0);
    for (let j = 1; j < K; j++) vi[j] = b[j - 1]!;
    sim.fft.squareOfSignal(vr, vi, wr, wi);
    for (let j = 1; j < K; j++) out[j - 1] = sim.linear[j]! * vi[j]! - 0.5 * k[j]! * wr[j]!;
  };
  const rng = new Rng(`ks-equilibria/${o.seed}`);
  const found: Equilibrium[] = [];
  for (let start = 0; start < o.starts; start++) {
    sim.vRe.fill(0);
    sim.vIm.fill(0);
    for (let j = 1; j <= 4; j++) sim.vIm[j] = 0.5 * n * rng.normal();
    const steps = 20 * (1 + (start % 10));
    for (let i = 0; i < steps; i++) sim.step();
    const b0 = new Float64Array(m);
    for (let j = 1; j < K; j++) b0[j - 1] = sim.vIm[j]!;
    const { x: b, residual: r, converged } = dampedNewton(G, b0, 1e-9 * n, 50);
    if (!converged) continue;
    let e = 0;
    for (let j = 0; j < m; j++) e += 2 * b[j]! ** 2; // Parseval over +-k
    const energy = e / (n * n) / 2;
    if (!found.some((f) => Math.abs(f.energy - energy) < 1e-8)) found.push({ energy, residual: r / n, coefficients: b });
  }
  return found.sort((a, b) => a.energy - b.energy);
}

/**
 * Damped Newton for F(x) = 0 (F maps R^m to R^m): finite-difference Jacobian (forward
 * differences, step 1e-7 max(1, |x_c|)), Gaussian elimination, the step halved up to 30 times
 * until |F| decreases. Stops when |F| < tol (converged), after maxIterations, or when no halved
 * step decreases |F| (a stalled start: it would repeat the same failed step).
 */
function dampedNewton(F: (x: Float64Array, out: Float64Array) => void, x0: Float64Array, tol: number, maxIterations: number): { x: Float64Array; residual: number; converged: boolean } {
  const m = x0.length;
  const norm = (v: Float64Array): number => Math.sqrt(v.reduce((s, e) => s + e * e, 0));
  const g = new Float64Array(m);
  const g2 = new Float64Array(m);
  const J = new Float64Array(m * m);
  let x = x0;
  let r = Infinity;
  for (let it = 0; it < maxIterations; it++) {
    F(x, g);
    r = norm(g);
    if (r < tol) return { x, residual: r, converged: true };
    for (let col = 0; col < m; col++) {
      const h = 1e-7 * Math.max(1, Math.abs(x[col]!));
      const xp = x.slice();
      xp[col]! += h;
      F(xp, g2);
      for (let row = 0; row < m; row++) J[row * m + col] = (g2[row]! - g[row]!) / h;
    }
    const d = solveDense(J, g, m);
    let t = 1;
    let moved = false;
    for (let ls = 0; ls < 30; ls++) {
      const xn = x.map((v, i) => v - t * d[i]!);
      F(xn, g2);
      if (norm(g2) < r) {
        x = xn;
        moved = true;
        break;
      }
      t /= 2;
    }
    if (!moved) break;
  }
  return { x, residual: r, converged: false };
}

/** Solve A x = rhs (A dense row-major m x m, copied) by Gaussian elimination with partial pivoting. */
function solveDense(A: Float64Array, rhs: Float64Array, m: number): Float64Array {
  const M = new Float64Array(m * (m + 1));
  for (let r = 0; r < m; r++) {
    for (let c = 0; c < m; c++) M[r * (m + 1) + c] = A[r * m + c]!;
    M[r * (m + 1) + m] = rhs[r]!;
  }
  const w = m + 1;
  for (let c = 0; c < m; c++) {
    let p = c;
    for (let r = c + 1; r < m; r++) if (Math.abs(M[r * w + c]!) > Math.abs(M[p * w + c]!)) p = r;
    if (p !== c) {
      for (let j = 0; j < w; j++) {
        const t = M[c * w + j]!;
        M[c * w + j] = M[p * w + j]!;
        M[p * w + j] = t;
      }
    }
    const piv = M[c * w + c]!;
    for (let r = c + 1; r < m; r++) {
      const f = M[r * w + c]! / piv;
      if (f === 0) continue;
      for (let j = c; j < w; j++) M[r * w + j]! -= f * M[c * w + j]!;
    }
  }
  const x = new Float64Array(m);
  for (let r = m - 1; r >= 0; r--) {
    let s = M[r * w + m]!;
    for (let j = r + 1; j < m; j++) s -= M[r * w + j]! * x[j]!;
    x[r] = s / M[r * w + r]!;
  }
  return x;
}

export interface TravellingWaveSearchOptions {
  readonly length: number;
  readonly points: number;
  /** Newton starts (each from a seeded random low-mode state integrated for a while). */
  readonly starts: number;
  readonly seed: number;
}

export interface TravellingWave {
  /** Phase speed c > 0 (the mirror image x -> -x travels with -c). */
  readonly speed: number;
  /** E = <u^2>/2 (Cvitanovic, Davidchack & Siminos 2010). */
  readonly energy: number;
  /** Euclidean norm of the residual F(u) - c u_x at convergence, divided by n. */
  readonly residual: number;
}

/**
 * Relative equilibria (travelling waves) u(x, t) = U(x - c t), i.e. F(U) + c U_x = 0 with
 * F(u) = -u u_x - u_xx - u_xxxx, c unknown. The translation symmetry is removed by the phase
 * condition Im V_1 = 0 (V = FFT(U)); the unknowns are Re V_1..V_m, Im V_2..V_m and c (2m, with
 * m = n/2 - 1), the equations Re and Im of F_k + i c q_k V_k, k = 1..m. Starting points: seeded
 * random states in modes 1-4 advanced for 1-10 time units, each with c from the least-squares
 * fit min_c |F + i c q V|, rotated to meet the phase condition. (Snapshots of the chaotic
 * attractor were tried first: at L = 22 none came closer than a relative residual of 0.5, and
 * the damped Newton stalled from all of them.) Then damped Newton with a finite-difference
 * Jacobian, as for the equilibria. Converged non-trivial solutions with |c| > 1e-6 are
 * returned, mirror images folded together (|c|), duplicates (same |c| to 1e-7) removed, sorted
 * by speed. Published speeds at L = 22: TW1 0.73699 and TW2 0.34954
 * (Cvitanovic, Davidchack & Siminos 2010).
 */
export function travellingWaves(o: TravellingWaveSearchOptions): TravellingWave[] {
  const { length: L, points: n } = o;
  const K = n / 2;
  const m = K - 1;
  const dt = 0.05;
  const sim = new KsSolver({ length: L, points: n, dt, copies: 1 });
  const q = sim.k;
  const wr = new Float64Array(K + 1);
  const wi = new Float64Array(K + 1);
  // F_k for the spectrum (vr, vi), k = 1..m, into (fr, fi).
  const fr = new Float64Array(K + 1);
  const fi = new Float64Array(K + 1);
  const evalF = (vr: Float64Array, vi: Float64Array): void => {
    sim.fft.squareOfSignal(vr, vi, wr, wi);
    for (let j = 1; j <= m; j++) {
      // F = lin V - (i q / 2) W
      fr[j] = sim.linear[j]! * vr[j]! + 0.5 * q[j]! * wi[j]!;
      fi[j] = sim.linear[j]! * vi[j]! - 0.5 * q[j]! * wr[j]!;
    }
  };
  const vr = new Float64Array(K + 1);
  const vi = new Float64Array(K + 1);
  // x = [Re V_1..V_m, Im V_2..V_m, c]; residual: Re (F_k - c q_k Im V_k), Im (F_k + c q_k Re V_k).
  const unpack = (x: Float64Array): number => {
    vr.fill(0);
    vi.fill(0);
    for (let j = 1; j <= m; j++) vr[j] = x[j - 1]!;
    for (let j = 2; j <= m; j++) vi[j] = x[m + j - 2]!;
    return x[2 * m - 1]!;
  };
  const R = (x: Float64Array, out: Float64Array): void => {
    const c = unpack(x);
    evalF(vr, vi);
    for (let j = 1; j <= m; j++) {
      out[j - 1] = fr[j]! - c * q[j]! * vi[j]!;
      out[m + j - 1] = fi[j]! + c * q[j]! * vr[j]!;
    }
  };
  // Starting states: seeded random low-mode states advanced briefly in time, as for the equilibria.
  const rng = new Rng(`ks-travelling-waves/${o.seed}`);
  const candidates: Float64Array[] = [];
  for (let start = 0; start < o.starts; start++) {
    sim.vRe.fill(0);
    sim.vIm.fill(0);
    for (let j = 1; j <= 4; j++) {
      sim.vRe[j] = 0.5 * n * rng.normal();
      sim.vIm[j] = 0.5 * n * rng.normal();
    }
    const steps = 20 * (1 + (start % 10));
    for (let i = 0; i < steps; i++) sim.step();
    for (let j = 0; j <= K; j++) {
      vr[j] = j <= m ? sim.vRe[j]! : 0;
      vi[j] = j <= m ? sim.vIm[j]! : 0;
    }
    evalF(vr, vi);
    // c minimising |F + i c q V|^2: c = -sum Re(conj(i q V) F) / sum |q V|^2.
    let num = 0;
    let den = 0;
    for (let j = 1; j <= m; j++) {
      num += q[j]! * (vr[j]! * fi[j]! - vi[j]! * fr[j]!);
      den += q[j]! ** 2 * (vr[j]! ** 2 + vi[j]! ** 2);
    }
    const c = -num / den;
    // Rotate so that V_1 is real and positive (the phase condition), then pack.
    const phi = Math.atan2(vi[1]!, vr[1]!);
    const x = new Float64Array(2 * m);
    for (let j = 1; j <= m; j++) {
      const cs = Math.cos(-j * phi);
      const sn = Math.sin(-j * phi);
      const re = vr[j]! * cs - vi[j]! * sn;
      const im = vr[j]! * sn + vi[j]! * cs;
      x[j - 1] = re;
      if (j >= 2) x[m + j - 2] = im;
    }
    x[2 * m - 1] = c;
    candidates.push(x);
  }

  const found: TravellingWave[] = [];
  for (const start of candidates) {
    const { x, residual: r, converged } = dampedNewton(R, start, 1e-9 * n, 60);
    const c = x[2 * m - 1]!;
    if (!converged || !(Math.abs(c) > 1e-6)) continue;
    unpack(x);
    let e = 0;
    for (let j = 1; j <= m; j++) e += 2 * (vr[j]! ** 2 + vi[j]! ** 2); // Parseval over +-k
    const energy = e / (n * n) / 2;
    const speed = Math.abs(c);
    if (energy < 1e-10) continue; // u = 0 solves F(U) + c U_x = 0 for every c
    if (!found.some((f) => Math.abs(f.speed - speed) < 1e-7)) found.push({ speed, energy, residual: r / n });
  }
  return found.sort((a, b) => a.speed - b.speed);
}
