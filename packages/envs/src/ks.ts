/**
 * The Kuramoto-Sivashinsky (KS) tiled surrogate.
 *
 * Equation (derivative form, as in Cvitanovic, Davidchack & Siminos 2010, SIAM J. Appl.
 * Dyn. Syst. 9, 1-33), on the periodic domain [0, L):
 *
 *     u_t + u u_x + u_xx + u_xxxx = f(x, t),
 *
 * nondimensional (unit coefficients; the domain length L is the only parameter).
 * Solved pseudo-spectrally on n equispaced points x_j = j L / n for the unnormalised half
 * spectrum v = FFT(u) (fft.ts conventions; wavenumbers k = 2 pi j / L, j = 0..n/2):
 *
 *     v_t = L v + N(v),    L_j = k_j^2 - k_j^4,    N(v) = -(i k / 2) FFT(u^2) + FFT(f),
 *
 * stepped with ETDRK4 (etdrk4.ts). The mean mode (j = 0) is kept at zero (it is
 * conserved and the forcing has zero mean) and the Nyquist mode (j = n/2) is held at
 * zero. Optional 2/3-rule dealiasing of the product u^2 (spectral.ts). No dealiasing is
 * the default, as in Kassam & Trefethen's program: at the default resolution the
 * spectrum has decayed to round-off long before the aliased band (checked by the energy
 * identity test).
 *
 * State layout: every batched field is [points or modes, copies] with the copy index
 * fastest (the `fft.ts` batch-inner layout): u at grid point j of copy b is u[j*B + b].
 *
 * Tiling, actuation, sensing, drag analogue and reward are documented on `KsEnv` and in
 * docs/ks.md. This surrogate is not a channel flow; its "drag" is an analogue.
 */
import { z } from 'zod';
import type { EnvEvent, EnvSpec, EnvState, ObsLayoutEntry, StepOut, TiledEnv } from './contract';
import { parseConfig } from './config';
import { Etdrk4Stepper, etdrk4Coefficients, type NonlinearTerm } from './etdrk4';
import { RealFft } from './fft';
import { Rng } from './random';
import { cachedReference, referenceFromBlocks, type ReferenceValue } from './reference';
import type { EnvKind } from './registry';
import { differentiateSpectrum, halfSpectrumWavenumbers, twoThirdsMask } from './spectral';
import { checkCopy, checkSeed, checkStateMeta, clipActions, referenceSchema, restoreStateArray, rewardSchema, TiledStepBuffers } from './tiled';

// ---------------------------------------------------------------------------------------
// Configuration
// ---------------------------------------------------------------------------------------

const isPowerOfTwo = (n: number): boolean => Number.isInteger(n) && n > 0 && (n & (n - 1)) === 0;

/** The `env:` section for `kind: ks`. Every field has its default and a one-line doc. */
export const ksConfigSchema = z
  .strictObject({
    kind: z.literal('ks').describe('Surrogate kind: the Kuramoto-Sivashinsky tiled surrogate.'),
    length: z.number().positive().finite().default(22).describe('Domain length L (default 22).'),
    points: z
      .number()
      .int()
      .refine(isPowerOfTwo, 'expected a power of two')
      .refine((n) => n >= 8 && n <= 65536, 'expected 8 <= points <= 65536')
      .default(64)
      .describe('Grid points n, a power of two (default 64).'),
    dt: z.number().positive().finite().default(0.05).describe('Solver time step (default 0.05).'),
    dealias: z.boolean().default(false).describe('Truncate the product u^2 by the 2/3 rule (default false).'),
    tiles: z.number().int().positive().default(4).describe('Tiles T per domain; must divide points and actuators (default 4).'),
    actuators: z.number().int().positive().default(4).describe('Actuators A per domain, evenly spaced; a multiple of tiles (default 4).'),
    actuatorWidth: z
      .number()
      .positive()
      .finite()
      .default(1)
      .describe('Standard deviation sigma of each periodised-Gaussian actuator bump (default 1).'),
    actionBound: z.number().positive().finite().default(0.5).describe('Bound a_max on each actuator amplitude (default 0.5).'),
    controlSteps: z.number().int().positive().default(5).describe('Solver steps m an action is held: one decision per m*dt (default 5).'),
    sensorsPerTile: z
      .number()
      .int()
      .positive()
      .default(8)
      .describe('Sensors S per tile window, evenly spaced on grid points; must divide points/tiles (default 8).'),
    haloTiles: z.number().int().nonnegative().default(1).describe('Neighbouring tiles sensed on each side (default 1).'),
    senseGradient: z.boolean().default(false).describe('Also sense u_x at the same positions (default false).'),
    oppositionOffset: z
      .number()
      .finite()
      .default(0)
      .describe('Offset in x (length units, signed) from each actuator centre to the point opposition control senses (default 0).'),
    episodeLength: z.number().int().positive().default(400).describe('Decisions per episode (default 400, i.e. 100 time units at the defaults).'),
    spinUpTime: z
      .number()
      .nonnegative()
      .finite()
      .default(100)
      .describe('Uncontrolled time integrated from seeded noise before an episode starts (default 100).'),
    initialNoise: z
      .number()
      .positive()
      .finite()
      .default(0.1)
      .describe('Standard deviation of the seeded grid noise that starts the spin-up (default 0.1).'),
    blowUpAmplitude: z
      .number()
      .positive()
      .default(100)
      .describe('A copy whose max |u| exceeds this (or is not finite) has diverged (default 100; the attractor stays below ~5).'),
    reward: rewardSchema('s = 1 - (P + c Pi+)/P0', {}),
    reference: referenceSchema('P0', { time: 2000, copies: 8 }),
  })
  .superRefine((c, ctx) => {
    const bad = (path: string[], message: string, input: unknown): void => {
      ctx.addIssue({ code: 'custom', path, message, input });
    };
    if (c.points % c.tiles !== 0) bad(['tiles'], `expected a divisor of points (${c.points})`, c.tiles);
    if (c.actuators % c.tiles !== 0) bad(['actuators'], `expected a multiple of tiles (${c.tiles})`, c.actuators);
    const perTile = c.points / c.tiles;
    if (Number.isInteger(perTile) && perTile % c.sensorsPerTile !== 0) {
      bad(['sensorsPerTile'], `expected a divisor of points/tiles (${perTile}) so sensors sit on grid points`, c.sensorsPerTile);
    }
    if (2 * c.haloTiles + 1 > c.tiles) {
      bad(['haloTiles'], `expected 2*haloTiles + 1 <= tiles (${c.tiles}) so a tile does not sense itself twice`, c.haloTiles);
    }
    if (c.actuatorWidth >= c.length / 2) bad(['actuatorWidth'], `expected less than half the domain length (${c.length / 2})`, c.actuatorWidth);
    if (c.reference.blockTime > c.reference.time) {
      bad(['reference', 'blockTime'], `expected at most reference.time (${c.reference.time})`, c.reference.blockTime);
    }
    if (c.reference.blockTime < c.dt) bad(['reference', 'blockTime'], `expected at least dt (${c.dt})`, c.reference.blockTime);
  });

export type KsConfig = z.output<typeof ksConfigSchema>;

/** Parse and validate an `env:` section for the KS surrogate (defaults filled in). */
export function parseKsConfig(raw: unknown, root = 'env'): KsConfig {
  return parseConfig(ksConfigSchema, raw, root);
}

// ---------------------------------------------------------------------------------------
// The PDE: batched pseudo-spectral ETDRK4 solver
// ---------------------------------------------------------------------------------------

export interface KsSolverOptions {
  /** Domain length L. */
  readonly length: number;
  /** Grid points n (power of two). */
  readonly points: number;
  /** Time step. */
  readonly dt: number;
  /** Copies B stepped together. */
  readonly copies: number;
  /** 2/3-rule dealiasing of u^2. */
  readonly dealias?: boolean;
}

/**
 * B copies of the forced KS equation stepped together. Layout is copy-major: copy b's
 * half spectrum occupies [b*(n/2+1), (b+1)*(n/2+1)) and its grid values [b*n, (b+1)*n).
 * Public arrays:
 * - vRe, vIm [B, n/2+1]: the state v = FFT(u), unnormalised (mean and Nyquist entries zero).
 * - fRe, fIm [B, n/2+1]: the forcing spectrum, set in physical space by `setForcing`.
 *
 * Copies are stepped one after another through the same one-copy ETDRK4 stepper (views
 * into the batched arrays): the working set of one copy stays in the L1 cache, which
 * measured faster than interleaving the copies (scripts/bench-envs.ts), and a copy's
 * arithmetic is the same whatever B is, so results do not depend on the batch size.
 */
export class KsSolver {
  readonly length: number;
  readonly points: number;
  readonly nSpec: number;
  readonly dt: number;
  readonly copies: number;
  readonly dealias: boolean;
  /** Wavenumbers k_j = 2 pi j / L, j = 0..n/2. */
  readonly k: Float64Array;
  /** Linear operator L_j = k_j^2 - k_j^4. */
  readonly linear: Float64Array;
  readonly vRe: Float64Array;
  readonly vIm: Float64Array;
  readonly fRe: Float64Array;
  readonly fIm: Float64Array;
  readonly fft: RealFft;
  private readonly stepper: Etdrk4Stepper;
  private readonly nonlinear: NonlinearTerm;
  private readonly vReCopy: Float64Array[];
  private readonly vImCopy: Float64Array[];
  /** The copy the nonlinear term is being evaluated for. */
  private current = 0;
  private readonly wRe: Float64Array;
  private readonly wIm: Float64Array;
  /** 0.5 k_j times the dealiasing mask, zero at Nyquist. */
  private readonly halfK: Float64Array;

  constructor(o: KsSolverOptions) {
    if (!isPowerOfTwo(o.points) || o.points < 4) throw new Error(`KsSolver: points must be a power of two >= 4, got ${o.points}`);
    if (!(o.length > 0 && Number.isFinite(o.length))) throw new Error(`KsSolver: length must be positive and finite, got ${o.length}`);
    if (!(o.dt > 0 && Number.isFinite(o.dt))) throw new Error(`KsSolver: dt must be positive and finite, got ${o.dt}`);
    if (!Number.isInteger(o.copies) || o.copies < 1) throw new Error(`KsSolver: copies must be an integer >= 1, got ${o.copies}`);
    this.length = o.length;
    this.points = o.points;
    const nSpec = (this.nSpec = o.points / 2 + 1);
    this.dt = o.dt;
    this.copies = o.copies;
    this.dealias = o.dealias ?? false;
    this.k = halfSpectrumWavenumbers(o.points, o.length);
    this.linear = new Float64Array(nSpec);
    for (let j = 0; j < nSpec; j++) {
      const k2 = this.k[j]! * this.k[j]!;
      this.linear[j] = k2 - k2 * k2;
    }
    const mask = this.dealias ? twoThirdsMask(o.points) : new Float64Array(nSpec).fill(1);
    this.halfK = new Float64Array(nSpec);
    for (let j = 0; j < nSpec - 1; j++) this.halfK[j] = 0.5 * this.k[j]! * mask[j]!;
    const size = nSpec * o.copies;
    this.vRe = new Float64Array(size);
    this.vIm = new Float64Array(size);
    this.fRe = new Float64Array(size);
    this.fIm = new Float64Array(size);
    this.vReCopy = [];
    this.vImCopy = [];
    for (let b = 0; b < o.copies; b++) {
      this.vReCopy.push(this.vRe.subarray(b * nSpec, (b + 1) * nSpec));
      this.vImCopy.push(this.vIm.subarray(b * nSpec, (b + 1) * nSpec));
    }
    this.wRe = new Float64Array(size);
    this.wIm = new Float64Array(size);
    this.fft = new RealFft(o.points);
    this.stepper = new Etdrk4Stepper(etdrk4Coefficients(this.linear, o.dt), 1);
    const fft = this.fft;
    const wRe = this.wRe;
    const wIm = this.wIm;
    const halfK = this.halfK;
    const fRe = this.fRe;
    const fIm = this.fIm;
    const self = this;
    this.nonlinear = {
      // N(v) = -(i k/2) FFT(u^2) + FFT(f): re = (k/2) Im w + Re F, im = -(k/2) Re w + Im F.
      evaluate(aRe, aIm, oRe, oIm) {
        fft.squareOfSignal(aRe, aIm, wRe, wIm);
        const off = self.current * nSpec;
        for (let j = 0; j < nSpec; j++) {
          const c = halfK[j]!;
          oRe[j] = c * wIm[j]! + fRe[off + j]!;
          oIm[j] = fIm[off + j]! - c * wRe[j]!;
        }
      },
    };
  }

  /** Advance every copy by one time step dt. */
  step(): void {
    for (let b = 0; b < this.copies; b++) {
      this.current = b;
      this.stepper.step(this.vReCopy[b]!, this.vImCopy[b]!, this.nonlinear);
    }
  }

  /** Set copy `copy` from grid values u[j] (j = 0..n-1); the mean and Nyquist parts are removed. */
  setPhysical(copy: number, u: ArrayLike<number>): void {
    this.checkCopy(copy);
    const n = this.points;
    if (u.length !== n) throw new Error(`KsSolver.setPhysical: expected ${n} grid values, got ${u.length}`);
    const x = new Float64Array(n);
    for (let j = 0; j < n; j++) x[j] = u[j]!;
    const off = copy * this.nSpec;
    this.fft.forward(x, this.vRe, this.vIm, 1, 0, off);
    this.vRe[off] = 0;
    this.vIm[off] = 0;
    this.vRe[off + this.nSpec - 1] = 0;
    this.vIm[off + this.nSpec - 1] = 0;
  }

  /** Copy the spectral state of one copy from another solver (same grid), bit for bit. */
  copyStateFrom(src: KsSolver, srcCopy: number, dstCopy: number): void {
    if (src.points !== this.points || src.length !== this.length) throw new Error('KsSolver.copyStateFrom: grids differ');
    src.checkCopy(srcCopy);
    this.checkCopy(dstCopy);
    const m = this.nSpec;
    this.vRe.set(src.vRe.subarray(srcCopy * m, (srcCopy + 1) * m), dstCopy * m);
    this.vIm.set(src.vIm.subarray(srcCopy * m, (srcCopy + 1) * m), dstCopy * m);
  }

  /** Set one copy's state to zero (the trivial equilibrium). */
  zeroCopy(copy: number): void {
    this.checkCopy(copy);
    this.vRe.fill(0, copy * this.nSpec, (copy + 1) * this.nSpec);
    this.vIm.fill(0, copy * this.nSpec, (copy + 1) * this.nSpec);
  }

  /**
   * Forcing f on the grid for every copy, f [B, n]; held until changed. Its mean and
   * Nyquist parts are removed (the equation keeps the mean of u fixed at zero).
   */
  setForcing(f: Float64Array): void {
    const n = this.points;
    if (f.length !== n * this.copies) {
      throw new Error(`KsSolver.setForcing: expected [B, n] = ${n * this.copies} values, got ${f.length}`);
    }
    const m = this.nSpec;
    for (let b = 0; b < this.copies; b++) {
      this.fft.forward(f, this.fRe, this.fIm, 1, b * n, b * m);
      this.fRe[b * m] = 0;
      this.fIm[b * m] = 0;
      this.fRe[b * m + m - 1] = 0;
      this.fIm[b * m + m - 1] = 0;
    }
  }

  /** d^order u/dx^order on the grid for every copy, written to out [B, n] (order 0 = u). */
  physical(out: Float64Array, order = 0): void {
    const n = this.points;
    const m = this.nSpec;
    if (out.length !== n * this.copies) {
      throw new Error(`KsSolver.physical: expected out of length ${n * this.copies}, got ${out.length}`);
    }
    if (order === 0) {
      for (let b = 0; b < this.copies; b++) this.fft.inverse(this.vRe, this.vIm, out, 1, b * m, b * n);
      return;
    }
    differentiateSpectrum(this.k, order, this.vRe, this.vIm, this.wRe, this.wIm, 1, this.copies);
    for (let b = 0; b < this.copies; b++) this.fft.inverse(this.wRe, this.wIm, out, 1, b * m, b * n);
  }

  /**
   * Spatial mean of (d^order u/dx^order)^2 for one copy by Parseval's identity:
   * <g^2> = (1/n^2) (|G_0|^2 + 2 sum_{0<j<n/2} |G_j|^2 + |G_{n/2}|^2), G = (ik)^order v.
   * E = meanSquare(b, 0)/2 is the energy of Cvitanovic et al. (2010).
   */
  meanSquare(copy: number, order = 0): number {
    this.checkCopy(copy);
    const n = this.points;
    const off = copy * this.nSpec;
    let s = 0;
    for (let j = 0; j < this.nSpec; j++) {
      const w = j === 0 || j === this.nSpec - 1 ? 1 : 2;
      const kp = this.k[j]! ** (2 * order);
      const r = this.vRe[off + j]!;
      const i = this.vIm[off + j]!;
      s += w * kp * (r * r + i * i);
    }
    return s / (n * n);
  }

  private checkCopy(copy: number): void {
    if (!Number.isInteger(copy) || copy < 0 || copy >= this.copies) {
      throw new Error(`KsSolver: copy must be an integer in [0, ${this.copies}), got ${copy}`);
    }
  }
}

/**
 * Seeded initial state on the attractor: grid noise of standard deviation `noise`, drawn
 * by global grid index j = 0..n-1 from Rng.derive(seed, "ks-init") (so tiling does not
 * change it), integrated uncontrolled for `spinUpTime`. Writes copy `copy` of `solver`
 * (whose forcing must be zero for that copy). All copies of `solver` are stepped; use
 * `spinUpBatch` to start many copies at once.
 */
export function seedKsNoise(solver: KsSolver, copy: number, seed: number, noise: number): void {
  const rng = Rng.derive(seed, 'ks-init');
  const u = new Float64Array(solver.points);
  for (let j = 0; j < u.length; j++) u[j] = noise * rng.normal();
  solver.setPhysical(copy, u);
}

/** Number of solver steps that a spin-up of `time` takes (rounded to the nearest step). */
export function spinUpSteps(time: number, dt: number): number {
  return Math.round(time / dt);
}

// ---------------------------------------------------------------------------------------
// The tiled environment
// ---------------------------------------------------------------------------------------

/** What KsEnv needs beyond its config. */
export interface KsEnvOptions {
  /** Copies B stepped together. */
  readonly copies: number;
  /** The long-time uncontrolled mean P0 of P = <u_x^2> for this (L, n, dt, dealias). */
  readonly p0: number;
  /** Receives events worth logging (a copy diverged). */
  readonly onEvent?: (e: EnvEvent) => void;
}

/**
 * Kuramoto-Sivashinsky cut into tiles (implements `TiledEnv`).
 *
 * Actuation: A actuators centred at x_a = (a + 1/2) L/A. Actuator a forces with the
 * zero-mean profile h_a(x) = g(x - x_a) - mean(g), g the periodised Gaussian
 * g(d) = sum_m exp(-(d + mL)^2 / (2 sigma^2)), so f(x) = sum_a a_a h_a(x) has zero mean
 * and peak ~ a_a. Amplitudes are clipped to [-a_max, a_max] and held for m solver steps.
 * Tile t (x in [t l, (t+1) l), l = L/T) owns actuators t*A/T .. (t+1)*A/T - 1; its action
 * vector lists them left to right.
 *
 * Sensing: S sensors per tile window on grid points, at offsets (s*stride + floor(stride/2))
 * grid spacings from the window start, stride = n/(T S). Tile t observes the windows of
 * tiles t-H .. t+H (periodic), left to right, then, if senseGradient, u_x at the same points.
 * Positions are in the tile's own frame, so a translation by one tile permutes tiles exactly.
 *
 * Drag analogue: P = <u_x^2>, the energy input rate of the instability term. Per tile,
 * P_t = (1/l) int_tile u_x^2 dx (grid sum), averaged over the control interval by the
 * trapezoid rule over the m+1 solver-step samples. drag = P_t / P0.
 *
 * Actuation power: actuator a exchanges power p_a = a_a int u h_a dx with the field (the
 * forcing term of dE/dt). Its cost Pi+_t = (1/l) sum over the tile's actuators of
 * max(p_a, 0) (power an actuator must supply; energy it absorbs is not credited),
 * interval-averaged like P. actuationPower = Pi+_t / P0. The signed work rate
 * <u f>_t = (1/l) sum p_a is exposed as `forcingWork` (same normalisation).
 *
 * Reward: score s_t = 1 - (P_t + c Pi+_t) / P0, domain score s_D = mean_t s_t, tile reward
 * r_t = (1 - beta) s_t + beta s_D. A diverged copy gets `reward.onDivergence` on every tile,
 * zero observations, NaN drag, and its state is zeroed until the caller resets it.
 * Net saving (tables): 1 - (P + Pi+)/P0 over the domain.
 */
export class KsEnv implements TiledEnv {
  readonly spec: EnvSpec;
  readonly config: KsConfig;
  readonly p0: number;
  readonly solver: KsSolver;
  /** Signed work rate of the forcing <u f> per tile over the last interval, / P0, [B, T]. */
  readonly forcingWork: Float64Array;

  private readonly B: number;
  private readonly n: number;
  private readonly T: number;
  private readonly A: number;
  private readonly actDim: number;
  private readonly perTile: number;
  private readonly dx: number;
  private readonly onEvent: ((e: EnvEvent) => void) | undefined;
  /** Actuator profiles h_a on the grid, [A, n]. */
  readonly profiles: Float64Array;
  /** Global grid index of observation component s of tile t (u part), [T, sensors]. */
  private readonly sensorIndex: Int32Array;
  private readonly sensorsPerObs: number;
  /** cos/sin(k_j xs_a), xs_a the opposition sensing point of actuator a, [A, n/2+1]. */
  private readonly oppCos: Float64Array;
  private readonly oppSin: Float64Array;

  private readonly u: Float64Array;
  private readonly ux: Float64Array;
  private readonly force: Float64Array;
  private readonly amp: Float64Array;
  private readonly pLast: Float64Array;
  private readonly projLast: Float64Array;
  private readonly pAcc: Float64Array;
  private readonly costAcc: Float64Array;
  private readonly workAcc: Float64Array;
  private readonly divergedNow: Uint8Array;
  private spinSolver: KsSolver | null = null;

  /** Step outputs, decision counters and end-of-decision flags (tiled.ts). */
  private readonly buf: TiledStepBuffers;
  private readonly opp: Float64Array;

  constructor(config: KsConfig, options: KsEnvOptions) {
    // Re-validate: a hand-built object must satisfy the same rules as a parsed one.
    this.config = parseKsConfig(config);
    const c = this.config;
    if (!Number.isInteger(options.copies) || options.copies < 1) {
      throw new Error(`KsEnv: copies must be an integer >= 1, got ${options.copies}`);
    }
    if (!(options.p0 > 0 && Number.isFinite(options.p0))) throw new Error(`KsEnv: p0 must be positive and finite, got ${options.p0}`);
    this.p0 = options.p0;
    this.onEvent = options.onEvent;
    const B = (this.B = options.copies);
    const n = (this.n = c.points);
    const T = (this.T = c.tiles);
    const A = (this.A = c.actuators);
    this.actDim = A / T;
    this.perTile = n / T;
    this.dx = c.length / n;
    this.solver = new KsSolver({ length: c.length, points: n, dt: c.dt, copies: B, dealias: c.dealias });

    // Actuator profiles, built per local actuator in the tile frame so tiles are exact shifts.
    this.profiles = new Float64Array(A * n);
    const sigma = c.actuatorWidth;
    const images = Math.ceil((12 * sigma) / c.length) + 1;
    const relCentre = (i: number): number => ((i + 0.5) * n) / A; // grid units from tile origin
    for (let i = 0; i < this.actDim; i++) {
      const prof = new Float64Array(n); // prof[r]: value at r grid points right of the tile origin
      for (let r = 0; r < n; r++) {
        const d = (r - relCentre(i)) * this.dx;
        let g = 0;
        for (let m = -images; m <= images; m++) {
          const e = d + m * c.length;
          g += Math.exp(-(e * e) / (2 * sigma * sigma));
        }
        prof[r] = g;
      }
      let mean = 0;
      for (let r = 0; r < n; r++) mean += prof[r]!;
      mean /= n;
      for (let r = 0; r < n; r++) prof[r]! -= mean;
      for (let t = 0; t < T; t++) {
        const a = t * this.actDim + i;
        for (let j = 0; j < n; j++) this.profiles[a * n + j] = prof[(j - t * this.perTile + n) % n]!;
      }
    }

    // Sensors.
    const S = c.sensorsPerTile;
    const stride = this.perTile / S;
    const first = Math.floor(stride / 2);
    const windows = 2 * c.haloTiles + 1;
    this.sensorsPerObs = windows * S;
    this.sensorIndex = new Int32Array(T * this.sensorsPerObs);
    const positions: number[][] = [];
    for (let w = 0; w < windows; w++) {
      const d = w - c.haloTiles;
      for (let s = 0; s < S; s++) positions.push([d + (first + s * stride) / this.perTile]);
    }
    for (let t = 0; t < T; t++) {
      for (let w = 0; w < windows; w++) {
        const tile = (((t + w - c.haloTiles) % T) + T) % T;
        for (let s = 0; s < S; s++) this.sensorIndex[t * this.sensorsPerObs + w * S + s] = tile * this.perTile + first + s * stride;
      }
    }
    const obsLayout: ObsLayoutEntry[] = [{ quantity: 'u', count: this.sensorsPerObs, positions }];
    if (c.senseGradient) obsLayout.push({ quantity: 'u_x', count: this.sensorsPerObs, positions });
    const obsDim = this.sensorsPerObs * (c.senseGradient ? 2 : 1);

    // Opposition sensing points.
    const nSpec = this.solver.nSpec;
    this.oppCos = new Float64Array(A * nSpec);
    this.oppSin = new Float64Array(A * nSpec);
    for (let a = 0; a < A; a++) {
      const xs = (a + 0.5) * (c.length / A) + c.oppositionOffset;
      for (let j = 0; j < nSpec; j++) {
        const ph = this.solver.k[j]! * xs;
        this.oppCos[a * nSpec + j] = Math.cos(ph);
        this.oppSin[a * nSpec + j] = Math.sin(ph);
      }
    }

    this.spec = {
      kind: 'ks',
      copies: B,
      tileGrid: [T, 1],
      tiles: T,
      obsDim,
      actDim: this.actDim,
      actionBound: c.actionBound,
      controlInterval: c.controlSteps * c.dt,
      episodeLength: c.episodeLength,
      obsLayout,
      dragName: 'P/P0',
    };

    this.u = new Float64Array(n * B);
    this.ux = new Float64Array(n * B);
    this.force = new Float64Array(n * B);
    this.amp = new Float64Array(B * A);
    this.pLast = new Float64Array(B * T);
    this.projLast = new Float64Array(B * A);
    this.pAcc = new Float64Array(B * T);
    this.costAcc = new Float64Array(B * T);
    this.workAcc = new Float64Array(B * T);
    this.forcingWork = new Float64Array(B * T);
    this.divergedNow = new Uint8Array(B);
    this.buf = new TiledStepBuffers(B, T, obsDim);
    this.opp = new Float64Array(B * A);
  }

  // --- TiledEnv -------------------------------------------------------------------------

  reset(seeds: ArrayLike<number>): Float32Array {
    if (seeds.length !== this.B) throw new Error(`KsEnv.reset: expected ${this.B} seeds (one per copy), got ${seeds.length}`);
    for (let b = 0; b < this.B; b++) checkSeed('KsEnv', seeds[b]!, `seeds[${b}]`);
    const s = this.solver;
    s.fRe.fill(0);
    s.fIm.fill(0);
    for (let b = 0; b < this.B; b++) seedKsNoise(s, b, seeds[b]!, this.config.initialNoise);
    const steps = spinUpSteps(this.config.spinUpTime, this.config.dt);
    for (let i = 0; i < steps; i++) s.step();
    this.amp.fill(0);
    this.buf.decisions.fill(0);
    this.divergedNow.fill(0);
    this.sample();
    for (let b = 0; b < this.B; b++) this.afterSampleCheck(b, 'spin-up');
    return this.observe();
  }

  resetCopy(copy: number, seed: number): void {
    checkCopy('KsEnv.resetCopy', copy, this.B);
    checkSeed('KsEnv', seed, 'seed');
    // Spin up alone in a one-copy solver: the batch-inner arithmetic is identical per copy,
    // so the result equals the batched reset bit for bit.
    if (!this.spinSolver) {
      const c = this.config;
      this.spinSolver = new KsSolver({ length: c.length, points: c.points, dt: c.dt, copies: 1, dealias: c.dealias });
    }
    const one = this.spinSolver;
    seedKsNoise(one, 0, seed, this.config.initialNoise);
    const steps = spinUpSteps(this.config.spinUpTime, this.config.dt);
    for (let i = 0; i < steps; i++) one.step();
    this.solver.copyStateFrom(one, 0, copy);
    for (let a = 0; a < this.A; a++) this.amp[copy * this.A + a] = 0;
    this.buf.decisions[copy] = 0;
    this.divergedNow[copy] = 0;
    this.sample();
    this.afterSampleCheck(copy, 'spin-up');
    this.writeObs();
  }

  /** Observation of the current state (re-sampled, so it also reflects direct edits of `solver`). */
  observe(): Float32Array {
    this.sample();
    for (let b = 0; b < this.B; b++) if (this.divergedNow[b]) this.afterSampleCheck(b, 'observe');
    this.writeObs();
    return this.buf.obs;
  }

  step(actions: Float32Array): StepOut {
    const { B, T, A, n } = this;
    const c = this.config;
    if (actions.length !== B * A) {
      throw new Error(`KsEnv.step: actions must have shape [B, T, actDim] = [${B}, ${T}, ${this.actDim}] (${B * A} values), got ${actions.length}`);
    }
    clipActions('KsEnv', actions, this.amp, c.actionBound, A, 'actuator');
    // f [B, n] = sum_a amp_a h_a.
    const f = this.force;
    f.fill(0);
    const prof = this.profiles;
    for (let b = 0; b < B; b++) {
      for (let a = 0; a < A; a++) {
        const amp = this.amp[b * A + a]!;
        if (amp === 0) continue;
        for (let j = 0, p = a * n, q = b * n; j < n; j++, p++, q++) f[q]! += amp * prof[p]!;
      }
    }
    this.solver.setForcing(f);

    const m = c.controlSteps;
    this.pAcc.fill(0);
    this.costAcc.fill(0);
    this.workAcc.fill(0);
    this.accumulate(0.5); // the sample at the interval start, with the new amplitudes
    for (let s = 1; s <= m; s++) {
      this.solver.step();
      this.sample();
      for (let b = 0; b < B; b++) this.afterSampleCheck(b, 'step');
      this.accumulate(s === m ? 0.5 : 1);
    }

    const invM = 1 / m;
    const invP0 = 1 / this.p0;
    const beta = c.reward.beta;
    const pen = c.reward.actuationPenalty;
    const { drag, actuationPower: power, reward } = this.buf;
    this.buf.beginDecision();
    for (let b = 0; b < B; b++) {
      if (this.divergedNow[b]) {
        this.buf.markDiverged(b, c.reward.onDivergence);
        for (let t = 0; t < T; t++) this.forcingWork[b * T + t] = NaN;
        continue;
      }
      let sDomain = 0;
      for (let t = 0; t < T; t++) {
        const i = b * T + t;
        drag[i] = this.pAcc[i]! * invM * invP0;
        power[i] = this.costAcc[i]! * invM * invP0;
        this.forcingWork[i] = this.workAcc[i]! * invM * invP0;
        sDomain += 1 - drag[i]! - pen * power[i]!;
      }
      sDomain /= T;
      for (let t = 0; t < T; t++) {
        const i = b * T + t;
        const sTile = 1 - drag[i]! - pen * power[i]!;
        reward[i] = (1 - beta) * sTile + beta * sDomain;
      }
      this.buf.countDecision(b, c.episodeLength);
    }
    // A divergence during reset is reported by the first step after it; cleared once reported.
    this.divergedNow.fill(0);
    this.writeObs();
    return this.buf.out;
  }

  oppositionSignal(): Float64Array {
    // u(x) = (1/n) (v_0 + 2 sum_{0<j<n/2} (Re v_j cos(k_j x) - Im v_j sin(k_j x))), Nyquist zero.
    const { B, A } = this;
    const nSpec = this.solver.nSpec;
    const vRe = this.solver.vRe;
    const vIm = this.solver.vIm;
    const inv = 1 / this.n;
    for (let b = 0; b < B; b++) {
      const off = b * nSpec;
      for (let a = 0; a < A; a++) {
        let s = vRe[off]!;
        for (let j = 1; j < nSpec - 1; j++) {
          s += 2 * (vRe[off + j]! * this.oppCos[a * nSpec + j]! - vIm[off + j]! * this.oppSin[a * nSpec + j]!);
        }
        this.opp[b * A + a] = s * inv;
      }
    }
    return this.opp;
  }

  /** u on the grid of one copy, [n] (a new array), x_j = j L / n. */
  snapshot(copy: number): Float64Array {
    if (!Number.isInteger(copy) || copy < 0 || copy >= this.B) {
      throw new Error(`KsEnv.snapshot: copy must be an integer in [0, ${this.B}), got ${copy}`);
    }
    this.solver.physical(this.u);
    return this.u.slice(copy * this.n, (copy + 1) * this.n);
  }

  /** Clipped amplitudes applied in the last step, [B, A] (= [B, T, actDim]). */
  appliedActions(): Float64Array {
    return this.amp;
  }

  /**
   * The dynamic state at a decision boundary (copies): spectra vRe, vIm [B, n/2+1], forcing
   * spectra fRe, fIm [B, n/2+1], applied amplitudes amp [B, A], decisions [B] and the pending
   * divergence flags [B]. Everything else (sampled fields, P and projections of the last
   * sample, observations) is a function of these and is recomputed by `setState`.
   */
  getState(): EnvState {
    const s = this.solver;
    return {
      meta: { format: KS_STATE_FORMAT, kind: 'ks', copies: this.B, points: this.n, length: this.config.length, actuators: this.A },
      arrays: {
        vRe: s.vRe.slice(),
        vIm: s.vIm.slice(),
        fRe: s.fRe.slice(),
        fIm: s.fIm.slice(),
        amp: this.amp.slice(),
        decisions: this.buf.decisions.slice(),
        divergedNow: this.divergedNow.slice(),
      },
    };
  }

  /** Restore a state from `getState` of a KsEnv with the same config and copies (else throws naming the field). */
  setState(state: EnvState): void {
    const who = 'KsEnv.setState';
    checkStateMeta(who, state, {
      format: KS_STATE_FORMAT,
      kind: 'ks',
      copies: this.B,
      points: this.n,
      length: this.config.length,
      actuators: this.A,
    });
    const s = this.solver;
    const put = (name: string, dst: Float64Array | Int32Array | Uint8Array): void => restoreStateArray(who, state, name, dst);
    put('vRe', s.vRe);
    put('vIm', s.vIm);
    put('fRe', s.fRe);
    put('fIm', s.fIm);
    put('amp', this.amp);
    put('decisions', this.buf.decisions);
    put('divergedNow', this.divergedNow);
    // A copy flagged as diverged was zeroed when flagged; sampling it gives the zeros it had.
    this.sample();
    this.writeObs();
  }

  // --- internals ------------------------------------------------------------------------

  /**
   * u and u_x at the current time for every copy; per tile P = mean of u_x^2 over the
   * tile's grid points; per actuator the projection int u h_a dx (grid sum times dx).
   */
  private sample(): void {
    const { B, T, A, n } = this;
    this.solver.physical(this.u, 0);
    this.solver.physical(this.ux, 1);
    const u = this.u;
    const ux = this.ux;
    const per = this.perTile;
    for (let b = 0; b < B; b++) {
      for (let t = 0; t < T; t++) {
        let s = 0;
        for (let p = b * n + t * per, e = p + per; p < e; p++) s += ux[p]! * ux[p]!;
        this.pLast[b * T + t] = s / per;
      }
      for (let a = 0; a < A; a++) {
        let s = 0;
        for (let j = 0, p = b * n, q = a * n; j < n; j++, p++, q++) s += u[p]! * this.profiles[q]!;
        this.projLast[b * A + a] = s * this.dx;
      }
    }
  }

  /** Add weight * (P, Pi+, <u f>) of the latest sample to the interval accumulators. */
  private accumulate(weight: number): void {
    const { B, T, A } = this;
    const per = this.actDim;
    const invLen = T / this.config.length; // 1 / tile length
    for (let b = 0; b < B; b++) {
      for (let t = 0; t < T; t++) {
        let cost = 0;
        let work = 0;
        for (let i = 0; i < per; i++) {
          const a = b * A + t * per + i;
          const p = this.amp[a]! * this.projLast[a]!;
          work += p;
          if (p > 0) cost += p;
        }
        const k = b * T + t;
        this.pAcc[k]! += weight * this.pLast[k]!;
        this.costAcc[k]! += weight * cost * invLen;
        this.workAcc[k]! += weight * work * invLen;
      }
    }
  }

  /**
   * Flag a copy whose field is not finite or exceeds the blow-up amplitude. A flagged copy
   * is kept quiescent until reset: its state, forcing and sampled fields are zeroed (again
   * after every later solver step of the interval), so nothing non-finite leaves the env.
   */
  private afterSampleCheck(b: number, phase: string): void {
    const n = this.n;
    if (!this.divergedNow[b]) {
      const bound = this.config.blowUpAmplitude;
      let maxAbs = 0;
      let finite = true;
      for (let p = b * n; p < (b + 1) * n; p++) {
        const v = this.u[p]!;
        if (!Number.isFinite(v)) {
          finite = false;
          break;
        }
        const a = Math.abs(v);
        if (a > maxAbs) maxAbs = a;
      }
      if (finite && maxAbs <= bound) return;
      this.divergedNow[b] = 1;
      this.onEvent?.({
        kind: 'diverged',
        copy: b,
        message: `ks copy ${b} diverged during ${phase} after ${this.buf.decisions[b]} decisions: ${finite ? `max |u| = ${maxAbs.toPrecision(4)} > ${bound}` : 'non-finite u'}`,
      });
    }
    const m = this.solver.nSpec;
    this.solver.zeroCopy(b);
    this.solver.fRe.fill(0, b * m, (b + 1) * m);
    this.solver.fIm.fill(0, b * m, (b + 1) * m);
    this.u.fill(0, b * n, (b + 1) * n);
    this.ux.fill(0, b * n, (b + 1) * n);
    this.pLast.fill(0, b * this.T, (b + 1) * this.T);
    this.projLast.fill(0, b * this.A, (b + 1) * this.A);
  }

  /** Observations from the u, u_x fields of the latest sample. */
  private writeObs(): void {
    const { B, T } = this;
    const S = this.sensorsPerObs;
    const obsDim = this.spec.obsDim;
    const grad = this.config.senseGradient;
    const obs = this.buf.obs;
    for (let b = 0; b < B; b++) {
      for (let t = 0; t < T; t++) {
        const o = (b * T + t) * obsDim;
        for (let s = 0; s < S; s++) {
          const p = b * this.n + this.sensorIndex[t * S + s]!;
          obs[o + s] = this.u[p]!;
          if (grad) obs[o + S + s] = this.ux[p]!;
        }
      }
    }
  }
}

/** Format of `KsEnv.getState`. */
const KS_STATE_FORMAT = 1;


// ---------------------------------------------------------------------------------------
// P0 and the registry entry
// ---------------------------------------------------------------------------------------

/** The physics and protocol P0 depends on: its cache key. */
export function ksReferenceKey(c: KsConfig): Record<string, unknown> {
  return {
    kind: 'ks',
    quantity: 'P0',
    length: c.length,
    points: c.points,
    dt: c.dt,
    dealias: c.dealias,
    spinUpTime: c.spinUpTime,
    initialNoise: c.initialNoise,
    ...c.reference,
  };
}

/**
 * Measure P0 = long-time mean of the domain-averaged P = <u_x^2> without control:
 * `reference.copies` runs from seeded attractor states (seeds derived from reference.seed),
 * each averaged over `reference.time` in blocks of `reference.blockTime` (every solver step
 * sampled, by Parseval's identity). Uncertainty by batch means (reference.ts).
 */
export function measureKsP0(c: KsConfig): ReferenceValue {
  const r = c.reference;
  const s = new KsSolver({ length: c.length, points: c.points, dt: c.dt, copies: r.copies, dealias: c.dealias });
  const seeds = Rng.derive(r.seed, 'ks-p0');
  for (let b = 0; b < r.copies; b++) seedKsNoise(s, b, seeds.uint32(), c.initialNoise);
  const spin = spinUpSteps(c.spinUpTime, c.dt);
  for (let i = 0; i < spin; i++) s.step();
  const perBlock = Math.max(1, Math.round(r.blockTime / c.dt));
  const blocks = Math.max(1, Math.floor(r.time / (perBlock * c.dt)));
  const means: number[] = [];
  const acc = new Float64Array(r.copies);
  for (let k = 0; k < blocks; k++) {
    acc.fill(0);
    for (let i = 0; i < perBlock; i++) {
      s.step();
      for (let b = 0; b < r.copies; b++) acc[b]! += s.meanSquare(b, 1);
    }
    for (let b = 0; b < r.copies; b++) means.push(acc[b]! / perBlock);
  }
  for (const m of means) {
    if (!Number.isFinite(m)) throw new Error(`measureKsP0: the uncontrolled run diverged (dt = ${c.dt} too large for points = ${c.points}?)`);
  }
  return referenceFromBlocks('ks P0 = <u_x^2>', ksReferenceKey(c), means, perBlock * c.dt);
}

/** Registry entry: `kind: ks`. */
export const ksEnvKind: EnvKind<KsConfig> = {
  kind: 'ks',
  summary: 'Kuramoto-Sivashinsky u_t + u u_x + u_xx + u_xxxx = f on [0, L), cut into tiles (1-D)',
  schema: ksConfigSchema,
  reference(config, options) {
    return cachedReference('ks-p0', ksReferenceKey(config), () => measureKsP0(config), options);
  },
  create(config, options) {
    const p0 = options.reference ?? ksEnvKind.reference(config, options).mean;
    return new KsEnv(config, { copies: options.copies, p0, onEvent: options.onEvent });
  },
};
