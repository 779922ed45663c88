import { mkdtempSync, readdirSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { EigenvalueDecomposition, Matrix } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import {
  fluctuationStats,
  KolmogorovEnv,
  type KolmogorovPhysics,
  KolmogorovSolver,
  laminarAmplitude,
  parseKolmogorovConfig,
  sensorSamples,
} from '../src/kolmogorov';
import { exerciseEnv } from '../src/checker';
import { Rng } from '../src/random';
import { createEnv, envKinds } from '../src/registry';

const TWO_PI = 2 * Math.PI;

function physics(over: Partial<KolmogorovPhysics> = {}): KolmogorovPhysics {
  return { re: 40, forcingWavenumber: 4, aspect: 1, grid: [64, 64], dt: 0.01, linearDrag: 0, ...over };
}

/** Vorticity field [ny][nx] from a function of (x, y). */
function field(s: KolmogorovSolver, f: (x: number, y: number) => number): Float64Array {
  const w = new Float64Array(s.nx * s.ny);
  for (let j = 0; j < s.ny; j++) for (let i = 0; i < s.nx; i++) w[j * s.nx + i] = f((i * s.lx) / s.nx, (j * s.ly) / s.ny);
  return w;
}

function maxAbsDiff(a: ArrayLike<number>, b: ArrayLike<number>): number {
  let m = 0;
  for (let i = 0; i < a.length; i++) m = Math.max(m, Math.abs(a[i]! - b[i]!));
  return m;
}

function maxAbs(a: ArrayLike<number>): number {
  let m = 0;
  for (let i = 0; i < a.length; i++) m = Math.max(m, Math.abs(a[i]!));
  return m;
}

/**
 * Independent reference for the linear stability of the laminar state U0 sin(n y) (U0 =
 * Re/n^2): the Galerkin matrix of the linearised vorticity equation on the Fourier modes
 * exp(i(alpha x + (beta + j n) y)), |j| <= J (derived in docs/kolmogorov.md):
 *   dc_j/dt = -(U0 alpha/2)(1 - n^2/K_{j-1}^2) c_{j-1} + (U0 alpha/2)(1 - n^2/K_{j+1}^2) c_{j+1}
 *             - (K_j^2/Re + mu) c_j,     K_j^2 = alpha^2 + (beta + j n)^2,
 * whose eigenvalues come from a general-purpose library (ml-matrix's real nonsymmetric
 * eigenvalue decomposition). Returns the eigenvalue with the largest real part.
 */
function galerkinLeading(re: number, n: number, alpha: number, beta: number, J = 20, mu = 0): { re: number; im: number } {
  const U0 = re / (n * n);
  const M = 2 * J + 1;
  const A = Matrix.zeros(M, M);
  const K2 = (j: number) => alpha * alpha + (beta + (j - J) * n) ** 2;
  for (let j = 0; j < M; j++) {
    A.set(j, j, -K2(j) / re - mu);
    if (j > 0) A.set(j, j - 1, -(U0 * alpha / 2) * (1 - (n * n) / K2(j - 1)));
    if (j + 1 < M) A.set(j, j + 1, (U0 * alpha / 2) * (1 - (n * n) / K2(j + 1)));
  }
  const e = new EigenvalueDecomposition(A);
  let best = { re: -Infinity, im: 0 };
  e.realEigenvalues.forEach((r, i) => {
    if (r > best.re) best = { re: r, im: e.imaginaryEigenvalues[i]! };
  });
  return best;
}

/** Norm of the modes with kx != 0 of copy 0 (the perturbation of an x-independent state). */
function perturbationNorm(s: KolmogorovSolver): number {
  let e = 0;
  for (let k = 0; k < s.modes; k++) if (s.kx[k] !== 0) e += s.omRe[k * s.copies]! ** 2 + s.omIm[k * s.copies]! ** 2;
  return Math.sqrt(e);
}

/** Growth rate of a small cos(alpha x) vorticity perturbation of the laminar state, fitted over [t1, t2]. */
function measuredGrowth(p: KolmogorovPhysics, alpha: number, t1: number, t2: number, eps = 1e-9): number {
  const s = new KolmogorovSolver(p, 1);
  const n = p.forcingWavenumber;
  const U = laminarAmplitude(p.re, n);
  s.setVorticity(0, field(s, (x, y) => -U * n * Math.cos(n * y) + eps * Math.cos(alpha * x)));
  s.advance(Math.round(t1 / p.dt));
  const a = perturbationNorm(s);
  s.advance(Math.round((t2 - t1) / p.dt));
  return Math.log(perturbationNorm(s) / a) / (t2 - t1);
}

describe('KolmogorovSolver: exact solutions and published values', () => {
  it.each([
    { aspect: 1, linearDrag: 0 },
    { aspect: 2, linearDrag: 0.1 },
  ])('Taylor-Green-type vortex decays exactly as exp(-(|k|^2/Re + mu) t) (aspect $aspect, mu $linearDrag)', ({ aspect, linearDrag }) => {
    // A sum of Fourier modes with one |k|^2 = 25 has omega = |k|^2 psi, so u.grad omega = 0
    // and the unforced Navier-Stokes solution is omega(0) exp(-(nu |k|^2 + mu) t) exactly
    // (Taylor & Green 1937, Proc. R. Soc. A 158; generalisation e.g. Majda & Bertozzi 2002,
    // Vorticity and Incompressible Flow, sec. 2.1). With aspect 2, kx = mx/2.
    const p = physics({ aspect, linearDrag, grid: [32 * aspect, 32], forcingAmplitude: 0, dt: 0.05 });
    const s = new KolmogorovSolver(p, 1);
    const w0 = field(s, (x, y) => Math.sin(3 * x) * Math.sin(4 * y) + 0.7 * Math.cos(5 * x + 0.3) + 0.4 * Math.cos(4 * x - 3 * y));
    s.setVorticity(0, w0);
    s.advance(40); // t = 2
    const decay = Math.exp(-(25 / p.re + linearDrag) * 2);
    const ref = w0.map((w) => w * decay);
    expect(maxAbsDiff(s.vorticity(0), ref)).toBeLessThan(1e-12 * maxAbs(ref));
  });

  it('laminar state u = (Re/n^2) sin(n y) is steady, with D_lam = I_lam = Re/(2 n^2) = 1.25 at Re 40, n 4', () => {
    // Chandler & Kerswell (2013, J. Fluid Mech. 722, sec. 2): u_lam = (Re/n^2) sin(n y) e_x,
    // I_lam = D_lam = Re/(2 n^2); E_lam = U^2/4 follows from <sin^2> = 1/2.
    const p = physics();
    const s = new KolmogorovSolver(p, 1);
    const U = laminarAmplitude(40, 4);
    const w0 = field(s, (_x, y) => -U * 4 * Math.cos(4 * y));
    s.setVorticity(0, w0);
    const b0 = s.budget(0);
    expect(b0.input).toBeCloseTo(1.25, 13);
    expect(b0.dissipation).toBeCloseTo(1.25, 13);
    expect(b0.energy).toBeCloseTo((U * U) / 4, 13);
    expect(b0.meanFlow).toBeCloseTo(2.5, 13);
    s.advance(200);
    expect(maxAbsDiff(s.vorticity(0), w0)).toBeLessThan(1e-12 * maxAbs(w0));
  });

  it('leading eigenvalue of the laminar state at Re 40, n 4 is real, 2.35340 (Farazmand 2016), measured from a small perturbation', () => {
    // Farazmand (2016, J. Fluid Mech. 795) reports the leading eigenvalue of the laminar state
    // at Re = 40, n = 4 on [0, 2pi]^2 as real, 2.35340: a growth rate of the perturbation
    // amplitude (vorticity or velocity), not of its energy (which grows at twice that).
    // Our Galerkin reference (ml-matrix) locates it in the alpha = 2 (kx = 2), beta = 0
    // family: 2.3534464 converged (J = 20); alpha = 1 gives only 1.438. So the perturbation
    // must contain kx = 2: we seed cos(2x). The next eigenvalue of that family is -1.00,
    // so after t = 4 the fit over [4, 6] sees the leading mode alone (gap e^{-3.4*4}).
    const ref = galerkinLeading(40, 4, 2, 0);
    expect(ref.im).toBe(0);
    expect(Math.abs(ref.re - 2.3534464)).toBeLessThan(1e-7);
    for (let a = 1; a <= 4; a++) for (let b = 0; b < 4; b++) expect(galerkinLeading(40, 4, a, b).re).toBeLessThanOrEqual(ref.re);
    // 64^2 with the 2/3 rule keeps |my| <= 21, i.e. the Galerkin modes |j| <= 5 of this family.
    const measured = measuredGrowth(physics(), 2, 4, 6);
    expect(Math.abs(measured - galerkinLeading(40, 4, 2, 0, 5).re)).toBeLessThan(1e-6); // same truncation
    // Published value: agreement to 1e-4 (it differs from the converged 2.3534464 by 5e-5,
    // about what a truncation at |j| <= 4 gives (2.353393); we do not know Farazmand's).
    expect(Math.abs(measured - 2.3534)).toBeLessThan(1e-4);
  });

  it('neutral Reynolds number for n = 4 on the square torus is about 9.97 (computed here, not published)', () => {
    // Bisection on the Galerkin growth rate (max over alpha, beta); the critical mode is
    // alpha = 1, beta = 0, real. Then the solver's measured growth rates at Re 9.5 and 10.5
    // match the Galerkin ones, and their zero crossing brackets the same neutral Re.
    const maxGrowth = (re: number): number => {
      let m = -Infinity;
      for (let a = 1; a <= 4; a++) for (let b = 0; b < 4; b++) m = Math.max(m, galerkinLeading(re, 4, a, b, 10).re);
      return m;
    };
    let lo = 5;
    let hi = 20;
    for (let i = 0; i < 40; i++) {
      const mid = (lo + hi) / 2;
      if (maxGrowth(mid) > 0) hi = mid;
      else lo = mid;
    }
    expect(Math.abs(lo - 9.97)).toBeLessThan(0.005); // 9.96692 (value of this computation)
    const gLo = measuredGrowth(physics({ re: 9.5, dt: 0.05, grid: [32, 32] }), 1, 10, 20);
    const gHi = measuredGrowth(physics({ re: 10.5, dt: 0.05, grid: [32, 32] }), 1, 10, 20);
    expect(Math.abs(gLo - galerkinLeading(9.5, 4, 1, 0).re)).toBeLessThan(1e-5);
    expect(Math.abs(gHi - galerkinLeading(10.5, 4, 1, 0).re)).toBeLessThan(1e-5);
    expect(gLo).toBeLessThan(0);
    expect(gHi).toBeGreaterThan(0);
  });

  it('Meshalkin & Sinai (1961): neutral amplitude Reynolds number -> sqrt(2) for n = 1 in a long box', () => {
    // R = U0/(nu n) = Re^2/n^3 (= Re^2 for n = 1). The long-wave limit alpha -> 0 of the
    // neutral curve is R = sqrt(2) (Meshalkin & Sinai 1961, J. Appl. Math. Mech. 25), with an
    // O(alpha^2) correction; boxes of aspect 10, 30, 100 (alpha = 1/aspect) approach it.
    const neutralR = (aspect: number): number => {
      let lo = 0.5;
      let hi = 5;
      for (let i = 0; i < 50; i++) {
        const mid = (lo + hi) / 2;
        if (galerkinLeading(mid, 1, 1 / aspect, 0, 10).re > 0) hi = mid;
        else lo = mid;
      }
      return lo * lo;
    };
    const r = [10, 30, 100].map(neutralR);
    expect(r[0]!).toBeGreaterThan(r[1]!);
    expect(r[1]!).toBeGreaterThan(r[2]!);
    expect(Math.abs(r[2]! - Math.SQRT2)).toBeLessThan(1e-3);
    // The solver agrees with the Galerkin growth rate in a long box (aspect 10, alpha = 0.1).
    const g = measuredGrowth(physics({ re: 1.5, forcingWavenumber: 1, aspect: 10, grid: [256, 16], dt: 0.1 }), 0.1, 20, 40);
    expect(Math.abs(g - galerkinLeading(1.5, 1, 0.1, 0).re)).toBeLessThan(1e-5);
  });
});

describe('KolmogorovSolver: diagnostics', () => {
  it('dissipationAll equals budget().dissipation for every copy of a batch', () => {
    const s = new KolmogorovSolver(physics({ grid: [32, 32] }), 3);
    const rng = new Rng('diss');
    for (let b = 0; b < 3; b++) s.setVorticity(b, field(s, () => rng.normal()));
    const d = new Float64Array(3);
    s.dissipationAll(d);
    for (let b = 0; b < 3; b++) expect(Math.abs(d[b]! - s.budget(b).dissipation)).toBeLessThan(1e-12 * d[b]!);
  });
});

describe('KolmogorovSolver: energy budget', () => {
  it('dE/dt = I - D - 2 mu E + <u . f_jets>, instantaneously to round-off and integrated over time', () => {
    // The energy equation of the forced Navier-Stokes equations; with the 2/3 rule the
    // truncated advection term conserves energy exactly (Galerkin truncation), so the
    // identity holds for the discrete system to round-off (conservation law check).
    const p = physics({ grid: [32, 32], linearDrag: 0.05, dt: 0.005 });
    const s = new KolmogorovSolver(p, 1);
    const rng = new Rng('budget');
    s.setVorticity(0, field(s, (x, y) => -10 * Math.cos(4 * y) + 2 * Math.sin(x + 2 * y) + Math.cos(3 * x - y) + 0.1 * rng.normal()));
    // A jet force f_y on the grid, zero mean.
    const fy = field(s, (x, y) => Math.exp(-((x - 2) ** 2 + (y - 3) ** 2) / 0.5) - Math.exp(-((x - 4) ** 2 + (y - 1) ** 2) / 0.5));
    let mean = 0;
    for (const f of fy) mean += f / fy.length;
    for (let i = 0; i < fy.length; i++) fy[i]! -= mean;
    s.setJetForce(fy);
    const rhs = (): number => {
      const b = s.budget(0);
      s.computeVelocity();
      let pw = 0;
      for (let q = 0; q < fy.length; q++) pw += s.velocity[q * 2 + 1]! * fy[q]!;
      return b.input - b.dissipation - 2 * p.linearDrag * b.energy + pw / fy.length;
    };
    // Instantaneous: dE/dt = sum over modes of psi* omega_t (Parseval), omega_t = L omega + N.
    const M = s.modes;
    const nRe = new Float64Array(M);
    const nIm = new Float64Array(M);
    s.evaluate(s.omRe, s.omIm, nRe, nIm);
    let dEdt = 0;
    for (let k = 0; k < M; k++) {
      const w = k < s.nx ? 1 : 2; // my = 0 row counts once
      const L = -(s.kx[k]! ** 2 + s.ky[k]! ** 2) / p.re - p.linearDrag;
      const tr = L * s.omRe[k]! + nRe[k]! * s.mask[k]!;
      const ti = L * s.omIm[k]! + nIm[k]! * s.mask[k]!;
      dEdt += (w * s.invK2[k]! * (s.omRe[k]! * tr + s.omIm[k]! * ti)) / (s.nx * s.ny) ** 2;
    }
    const r0 = rhs();
    expect(Math.abs(dEdt - r0)).toBeLessThan(1e-12 * Math.abs(s.budget(0).dissipation));
    // Integrated: E(T) - E(0) = int_0^T RHS dt by Simpson's rule on the step samples.
    const E0 = s.budget(0).energy;
    const steps = 200;
    let simpson = r0;
    for (let i = 1; i <= steps; i++) {
      s.advance(1);
      simpson += (i === steps ? 1 : i % 2 === 1 ? 4 : 2) * rhs();
    }
    simpson *= p.dt / 3;
    const dE = s.budget(0).energy - E0;
    expect(Math.abs(dE - simpson)).toBeLessThan(1e-6 * Math.abs(dE));
  });
});

// --------------------------------------------------------------------------------------
// The tiled environment
// --------------------------------------------------------------------------------------

/** A small env config (32^2, short spin-up) for contract tests; not resolved physics. */
function smallConfig(over: Record<string, unknown> = {}) {
  return parseKolmogorovConfig({
    kind: 'kolmogorov',
    points: [32, 32],
    tiles: [4, 2],
    sensorsPerTile: [2, 2],
    spinUpTime: 4,
    controlSteps: 5,
    episodeLength: 3,
    actuatorWidth: 0.3,
    ...over,
  });
}

/** Shift copy `from` of the solver by (sx, sy) grid cells into copy `to` via exact spectral phases. */
function shiftCopy(s: KolmogorovSolver, from: number, to: number, cellsX: number, cellsY: number): void {
  const B = s.copies;
  for (let ix = 0; ix < s.nx; ix++) {
    const mx = ix <= s.nx / 2 ? ix : ix - s.nx;
    for (let my = 0; my < s.nky; my++) {
      const k = my * s.nx + ix;
      // f(x - d) <-> F e^{-i k d}; the phase is a multiple of a quarter turn here, so exact.
      const turns = (((mx * cellsX) / s.nx + (my * cellsY) / s.ny) % 1 + 1) % 1;
      const [c, sn] = turns === 0 ? [1, 0] : turns === 0.25 ? [0, -1] : turns === 0.5 ? [-1, 0] : turns === 0.75 ? [0, 1] : [NaN, NaN];
      const r = s.omRe[k * B + from]!;
      const i = s.omIm[k * B + from]!;
      s.omRe[k * B + to] = r * c - i * sn;
      s.omIm[k * B + to] = r * sn + i * c;
    }
  }
}

describe('KolmogorovEnv', () => {
  it('passes the environment-contract checker (shapes, bounds, finiteness, flags) with overdriven actions', () => {
    const env = new KolmogorovEnv(smallConfig({ haloTiles: [1, 1], tiles: [4, 4], reynolds: 20 }), { copies: 2, cf0: 20, i0: 0.15 });
    expect(exerciseEnv(env, { steps: 7, seed: 1, overdrive: 2 })).toEqual([]);
    expect(env.spec.obsDim).toBe(2 * 6 * 6); // u and v at (3 tiles x 2 sensors)^2 points
  });

  it('is registered as kind "kolmogorov" and built from a raw env section with an explicit reference', () => {
    expect(envKinds()).toContain('kolmogorov');
    const cacheDir = mkdtempSync(join(tmpdir(), 'tilewise-kolmogorov-ref-'));
    const env = createEnv({ kind: 'kolmogorov', points: [32, 32], spinUpTime: 1, reference: { time: 1, blockTime: 1, copies: 1 } }, { copies: 1, reference: 20, cacheDir });
    expect(env.spec.kind).toBe('kolmogorov');
    expect(env.spec.tileGrid).toEqual([4, 2]);
    // The explicit reference replaces Cf0; I0 is measured once and cached beside it.
    expect((env as KolmogorovEnv).cf0).toBe(20);
    expect(readdirSync(cacheDir).some((f) => f.startsWith('kolmogorov-i0-'))).toBe(true);
    rmSync(cacheDir, { recursive: true });
  });

  it('shifting the flow by one tile in x or in y permutes observations, opposition signals and rewards', () => {
    // Index permutation is exact; the arithmetic through the FFTs is the same up to
    // round-off (an FFT is not bitwise shift-equivariant), hence the tolerances.
    const cfg = smallConfig({ reward: { beta: 0.3, actuationPenalty: 0.5 } });
    const env = new KolmogorovEnv(cfg, { copies: 3, cf0: 20, i0: 0.15 });
    env.reset([11, 12, 13]);
    const s = env.solver;
    const [Tx, Ty] = cfg.tiles;
    shiftCopy(s, 0, 1, 32 / Tx, 0);
    shiftCopy(s, 0, 2, 0, 32 / Ty);
    s.computeVelocity();
    const T = Tx * Ty;
    const perm = (copy: number, t: number): number => {
      const tx = t % Tx;
      const ty = Math.floor(t / Tx);
      return copy === 1 ? ty * Tx + ((tx + 1) % Tx) : ((ty + 1) % Ty) * Tx + tx;
    };
    const D = env.spec.obsDim;
    const check = (obs: Float32Array, vals: ArrayLike<number>, per: number, tol: number): void => {
      for (const copy of [1, 2]) {
        for (let t = 0; t < T; t++) {
          for (let d = 0; d < per; d++) {
            const a = vals[(copy * T + perm(copy, t)) * per + d]!;
            const b = vals[t * per + d]!;
            expect(Math.abs(a - b)).toBeLessThanOrEqual(tol * (1 + Math.abs(b)));
          }
        }
      }
      void obs;
    };
    const obs0 = env.observe().slice();
    check(obs0, obs0, D, 1e-6); // float32 observations of fields equal to 1e-13
    check(obs0, env.oppositionSignal().slice(), 1, 1e-12);
    const rng = new Rng('equivariance-actions');
    const act = new Float32Array(3 * T);
    for (let t = 0; t < T; t++) act[t] = rng.uniformIn(-1, 1);
    for (const copy of [1, 2]) for (let t = 0; t < T; t++) act[copy * T + perm(copy, t)] = act[t]!;
    const out = env.step(act);
    check(out.obs, out.obs, D, 1e-5);
    check(out.obs, out.reward, 1, 1e-6);
    check(out.obs, out.drag, 1, 1e-9);
    check(out.obs, out.actuationPower, 1, 1e-9);
  });

  it('same seeds give bit-identical episodes; a copy reset alone equals the batched reset', () => {
    const cfg = smallConfig();
    const a = new KolmogorovEnv(cfg, { copies: 2, cf0: 20, i0: 0.15 });
    const b = new KolmogorovEnv(cfg, { copies: 2, cf0: 20, i0: 0.15 });
    const oa = a.reset([5, 6]).slice();
    const ob = b.reset([5, 6]).slice();
    expect(oa).toEqual(ob);
    const act = new Float32Array(2 * 8).map((_, i) => Math.sin(i));
    const ra = a.step(act);
    const rewardA = ra.reward.slice();
    const obsA = ra.obs.slice();
    const rb = b.step(act);
    expect(rb.reward).toEqual(rewardA);
    expect(rb.obs).toEqual(obsA);
    // resetCopy(1, 5) runs a one-copy solver: copy 1 must equal copy 0 of a fresh batched reset.
    const c = new KolmogorovEnv(cfg, { copies: 2, cf0: 20, i0: 0.15 });
    c.reset([9, 9]);
    c.resetCopy(1, 5);
    const D = c.spec.obsDim * c.spec.tiles;
    expect(c.observe().slice(D, 2 * D)).toEqual(oa.slice(0, D));
    // Different seeds differ.
    expect(oa.slice(0, D)).not.toEqual(oa.slice(D, 2 * D));
  });

  it('getState/setState: a restored env continues bit for bit; the decision counter is kept; mismatches are named', () => {
    const cfg = smallConfig({ episodeLength: 6 });
    const a = new KolmogorovEnv(cfg, { copies: 2, cf0: 20, i0: 0.15 });
    a.reset([5, 6]);
    const act = (k: number) => new Float32Array(16).map((_, i) => 1.3 * Math.sin(3 * i + k)); // beyond the bound: clipping exercised
    for (let k = 0; k < 3; k++) a.step(act(k));
    const saved = a.getState();
    const b = new KolmogorovEnv(cfg, { copies: 2, cf0: 20, i0: 0.15 });
    b.reset([1, 2]);
    b.setState(saved);
    expect(b.observe()).toEqual(a.observe());
    for (let k = 3; k < 6; k++) {
      const oa = a.step(act(k));
      const ra = { obs: oa.obs.slice(), reward: oa.reward.slice(), drag: oa.drag.slice(), done: oa.done.slice() };
      const ob = b.step(act(k));
      expect(ob.obs).toEqual(ra.obs);
      expect(ob.reward).toEqual(ra.reward);
      expect(ob.drag).toEqual(ra.drag);
      expect(ob.done).toEqual(ra.done);
      expect(ob.done[0]).toBe(k === 5 ? 1 : 0); // the restored counter ends the episode at decision 6
    }
    expect(b.snapshot(1)).toEqual(a.snapshot(1));
    expect(() => new KolmogorovEnv(cfg, { copies: 3, cf0: 20, i0: 0.15 }).setState(saved)).toThrow(/saved copies 2 differs from this env's 3/);
    expect(() => new KolmogorovEnv(smallConfig({ tiles: [2, 2] }), { copies: 2, cf0: 20, i0: 0.15 }).setState(saved)).toThrow(/saved tilesX 4 differs/);
    const broken = { meta: saved.meta, arrays: { ...saved.arrays, amp: new Float64Array(3) } };
    expect(() => b.setState(broken)).toThrow(/array "amp" must be a Float64Array of length 16, got Float64Array of length 3/);
  });

  it('a blow-up ends the episode with the diverged flag, an event and finite outputs, never a throw', () => {
    const events: string[] = [];
    const cfg = smallConfig({ dt: 0.6, controlSteps: 20, actionBound: 50, spinUpTime: 0 });
    const env = new KolmogorovEnv(cfg, { copies: 2, cf0: 20, i0: 0.15, onEvent: (e) => events.push(`${e.kind}:${e.copy}`) });
    env.reset([1, 2]);
    let out = env.step(new Float32Array(16).fill(50));
    for (let k = 0; k < 5 && !out.diverged[0]; k++) out = env.step(new Float32Array(16).fill(50));
    expect(out.diverged[0]).toBe(1);
    expect(out.done[0]).toBe(1);
    expect(out.truncated[0]).toBe(0);
    expect(events).toContain('diverged:0');
    expect(Array.from(out.obs).every(Number.isFinite)).toBe(true);
    expect(out.reward[0]).toBe(-10);
    expect(Number.isNaN(out.drag[0]!)).toBe(true);
    // After a reset of that copy it runs again.
    env.resetCopy(0, 3);
    expect(Array.from(env.observe()).every(Number.isFinite)).toBe(true);
  });

  it('ends episodes by the time limit with truncated set', () => {
    const env = new KolmogorovEnv(smallConfig(), { copies: 1, cf0: 20, i0: 0.15 });
    env.reset([1]);
    const a = new Float32Array(8);
    expect(env.step(a).done[0]).toBe(0);
    expect(env.step(a).done[0]).toBe(0);
    const out = env.step(a);
    expect(out.done[0]).toBe(1);
    expect(out.truncated[0]).toBe(1);
    expect(out.diverged[0]).toBe(0);
  });

  it('uncontrolled laminar state gives Cf = Cf_lam = 2/(n U_lam^2) in every tile, I/I_lam = D/D_lam = 1 and zero actuation power', () => {
    const cfg = smallConfig({ reynolds: 5 }); // below the neutral Re 9.97: the laminar state is stable
    const cf0 = 3;
    const env = new KolmogorovEnv(cfg, { copies: 1, cf0, i0: 0.15 });
    env.reset([1]);
    const s = env.solver;
    const U = laminarAmplitude(5, 4);
    s.setVorticity(0, field(s, (_x, y) => -U * 4 * Math.cos(4 * y)));
    s.computeVelocity();
    const out = env.step(new Float32Array(8));
    for (let t = 0; t < 8; t++) {
      expect(out.drag[t]).toBeCloseTo(2 / (4 * U * U) / cf0, 12);
      expect(out.actuationPower[t]).toBe(0);
      expect(env.tileMeanFlow[t]).toBeCloseTo(U, 12);
    }
    expect(out.inputRatio[0]).toBeCloseTo(1, 12);
    expect(out.dissipationRatio[0]).toBeCloseTo(1, 12);
    // Sensors sit where the laminar profile says (u = U sin(n y), v = 0).
    const S = env.spec.obsDim / 2;
    const pos = env.spec.obsLayout[0]!.positions;
    for (let k = 0; k < S; k++) {
      const y = ((pos[k]![1]! * TWO_PI) / 2) % TWO_PI; // tile 0, Ty = 2: tile height pi
      expect(out.obs[k]).toBeCloseTo(U * Math.sin(4 * y), 5);
      expect(out.obs[S + k]).toBeCloseTo(0, 6);
    }
  });

  it('a jet pushing against the sensed cross-stream velocity does negative work; pushing with it costs power', () => {
    const cfg = smallConfig();
    const env = new KolmogorovEnv(cfg, { copies: 2, cf0: 20, i0: 0.15 });
    env.reset([4, 4]);
    const s = env.oppositionSignal().slice();
    const act = new Float32Array(16);
    for (let t = 0; t < 8; t++) {
      act[t] = -Math.sign(s[t]!); // copy 0 opposes v at the jet
      act[8 + t] = Math.sign(s[t]!); // copy 1 reinforces it
    }
    const out = env.step(act);
    let w0 = 0;
    let w1 = 0;
    for (let t = 0; t < 8; t++) {
      w0 += env.forcingWork[t]!;
      w1 += env.forcingWork[8 + t]!;
      expect(out.actuationPower[t]).toBeGreaterThanOrEqual(0);
    }
    expect(w0).toBeLessThan(0);
    expect(w1).toBeGreaterThan(0);
  });

  it('rejects bad configs naming the field path and the value', () => {
    expect(() => parseKolmogorovConfig({ kind: 'kolmogorov', tiles: [4, 3] })).toThrow(/env\.tiles\[1\].*divisor of forcingWavenumber.*got 3/);
    expect(() => parseKolmogorovConfig({ kind: 'kolmogorov', points: [64, 48] })).toThrow(/env\.points\[1\].*power of two.*got 48/);
    expect(() => parseKolmogorovConfig({ kind: 'kolmogorov', oppositionOffset: [0, 0.05] })).toThrow(/env\.oppositionOffset\[1\].*grid spacings.*got 0\.05/);
    expect(() => parseKolmogorovConfig({ kind: 'kolmogorov', viscosity: 1 })).toThrow(/unknown key env\.viscosity/);
    expect(() => parseKolmogorovConfig({ kind: 'kolmogorov', reward: { beta: 2 } })).toThrow(/env\.reward\.beta.*got 2/);
    expect(() => new KolmogorovEnv(smallConfig(), { copies: 1, cf0: -1, i0: 1 })).toThrow(/cf0.*got -1/);
    expect(() => new KolmogorovSolver(physics({ grid: [64, 48] }), 1)).toThrow(/grid\[1\] must be a power of two.*got 48/);
    expect(() => new KolmogorovSolver(physics({ forcingWavenumber: 11, grid: [32, 32] }), 1)).toThrow(/forcingWavenumber.*got 11/);
    expect(() => new KolmogorovSolver(physics(), 0)).toThrow(/copies.*got 0/);
  });
});

describe('fluctuationStats', () => {
  it("quadrant fractions of a bivariate normal follow Sheppard's formula 1/4 +- asin(rho)/(2 pi)", () => {
    // Orthant probability of a centred bivariate normal (Sheppard 1899, Phil. Trans. R. Soc.
    // A 192): P(X > 0, Y > 0) = 1/4 + asin(rho)/(2 pi). Class means (here offsets per class)
    // must be removed first.
    const rng = new Rng('sheppard');
    const N = 200_000;
    const rho = -0.5;
    const u = new Float64Array(N);
    const v = new Float64Array(N);
    const cls = new Int32Array(N);
    for (let k = 0; k < N; k++) {
      const a = rng.normal();
      const b = rng.normal();
      cls[k] = k % 3;
      u[k] = 2 * a + cls[k]! * 5;
      v[k] = rho * a + Math.sqrt(1 - rho * rho) * b - cls[k]! * 2;
    }
    const st = fluctuationStats(u, v, cls, 3);
    const same = 0.25 + Math.asin(rho) / TWO_PI;
    const tol = 4 * Math.sqrt(0.25 / N); // 4 binomial standard deviations
    expect(Math.abs(st.fractions[0] - same)).toBeLessThan(tol);
    expect(Math.abs(st.fractions[2] - same)).toBeLessThan(tol);
    expect(Math.abs(st.fractions[1] - (0.5 - same))).toBeLessThan(tol);
    expect(Math.abs(st.fractions[3] - (0.5 - same))).toBeLessThan(tol);
    expect(Math.abs(st.correlation - rho)).toBeLessThan(0.01);
    expect(Math.abs(st.stdU - 2)).toBeLessThan(0.02);
    for (let c = 0; c < 3; c++) {
      expect(Math.abs(st.classFractions[c * 4]! - same)).toBeLessThan(tol * Math.sqrt(3));
      expect(Math.abs(st.classStress[c]! - rho * 2)).toBeLessThan(0.03); // <u'v'> = 2 rho per class
    }
    const sumStress = st.stress.reduce((x, y) => x + y, 0);
    expect(Math.abs(sumStress - st.correlation * st.stdU * st.stdV)).toBeLessThan(1e-12);
    // The histogram is a density: it integrates to the fraction inside the range.
    const cell = (2 * st.histogram.range) / st.histogram.bins;
    const mass = st.histogram.density.reduce((x, y) => x + y, 0) * cell * cell;
    expect(mass).toBeGreaterThan(0.99);
    expect(mass).toBeLessThanOrEqual(1 + 1e-12);
  });

  it('sensorSamples returns every tile sensor with its row class', () => {
    const env = new KolmogorovEnv(smallConfig({ haloTiles: [1, 0] }), { copies: 2, cf0: 20, i0: 0.15 });
    env.reset([1, 2]);
    const s = sensorSamples(env);
    expect(s.u.length).toBe(2 * 8 * 4);
    expect(s.classes).toBe(2);
    expect(Array.from(new Set(s.cls)).sort()).toEqual([0, 1]);
    const st = fluctuationStats(s.u, s.v, s.cls, s.classes);
    expect(st.samples).toBe(64);
    expect(st.fractions.reduce((x, y) => x + y, 0)).toBeCloseTo(1, 12);
  });
});
