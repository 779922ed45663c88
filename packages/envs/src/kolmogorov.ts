/**
 * Kolmogorov flow: 2-D incompressible Navier-Stokes on a doubly periodic box with the
 * sinusoidal body force sin(n y) e_x, cut into a Tx x Ty grid of tiles, each with its own
 * localized body-force jet, sensors and reward. See docs/kolmogorov.md for the physics,
 * the drag analogue and why it is built the way it is.
 *
 * Equation (the convention of Chandler & Kerswell 2013, J. Fluid Mech. 722, 554-595, and
 * Farazmand 2016, J. Fluid Mech. 795, 278-312), nondimensional, forcing amplitude 1:
 *     u_t + u.grad u = -grad p + Re^-1 lap u + sin(n y) e_x - mu u + f_jets,   div u = 0,
 * on [0, 2 pi a) x [0, 2 pi). Laminar state u = (Re/n^2) sin(n y) e_x.
 *
 * Solved in vorticity form, omega = v_x - u_y, streamfunction psi with u = psi_y,
 * v = -psi_x, so omega = -lap psi:
 *     omega_t = L omega + N(omega),   L = -Re^-1 |k|^2 - mu   (diagonal in Fourier space),
 *     N(omega) = -(u omega_x + v omega_y) - n cos(n y) + curl f_jets.
 * The mean velocity (k = 0) is not represented; it is zero initially and every force has
 * zero mean (the jets' total force is made zero-mean explicitly), so it stays zero.
 *
 * Discretisation: Fourier pseudo-spectral on nx x ny points (powers of two), real 2-D FFT
 * (`fft2.ts` on `fft.ts`); products in physical space with the 2/3 rule (Orszag 1971,
 * J. Atmos. Sci. 28, 1074): modes with |mx| > (nx-1)/3 or |my| > (ny-1)/3 are zeroed in
 * every nonlinear term, the forcing and the initial state, so the state stays in the
 * retained band and quadratic products are alias-free. Time stepping: ETDRK4 (Cox &
 * Matthews 2002) with coefficients from `etdrk4.ts` (the one place they are computed) and
 * its generic stepper. Forcing held constant over a step is integrated exactly by ETDRK4.
 *
 * Arrays (B copies, batch fastest, as the stepper and `Fft2` expect):
 *   spectral state omega  Float64Array re/im [modes][B], modes = nx * nky, nky = ny/2+1,
 *                         mode k = my*nx + ix (layout and FFT conventions of fft2.ts)
 *   physical fields       Float64Array [ny][nx][C]; grid point (i, j) at x = i Lx/nx, y = j Ly/ny
 * Volumes and pages of the references cited in this file and its tests are recalled from
 * memory; the values checked against them are stated with each check.
 *
 * Diagnostics are area means <.> = (1/(Lx Ly)) integral over the box:
 *   E = <|u|^2>/2, I = <u . sin(n y) e_x> (energy input), D = Re^-1 <|grad u|^2> = Re^-1 <omega^2>,
 *   laminar I_lam = D_lam = Re/(2 n^2), E_lam = Re^2/(4 n^4).
 */
import { z } from 'zod';
import type { EnvEvent, EnvSpec, EnvState, ObsLayoutEntry, StepOut, TiledEnv } from './contract';
import { parseConfig } from './config';
import { cachedReference, referenceFromBlocks, type ReferenceValue } from './reference';
import type { EnvKind } from './registry';
import { etdrk4Coefficients, Etdrk4Stepper, type NonlinearTerm } from './etdrk4';
import { Fft2 } from './fft2';
import { Rng } from './random';
import { twoThirdsMask } from './spectral';
import { checkCopy, checkSeed, checkStateMeta, clipActions, mod, referenceSchema, restoreStateArray, rewardSchema, TiledStepBuffers } from './tiled';

/** Format of `KolmogorovEnv.getState` (bumped when its arrays change). */
const KOLMOGOROV_STATE_FORMAT = 1;

// ---------------------------------------------------------------------------------------
// Physics parameters and the batched solver
// ---------------------------------------------------------------------------------------

/** Parameters of the PDE and its discretisation. */
export interface KolmogorovPhysics {
  /** Reynolds number Re: viscosity 1/Re with forcing amplitude 1. */
  readonly re: number;
  /** Forcing wavenumber n: body force sin(n y) e_x. */
  readonly forcingWavenumber: number;
  /** Aspect ratio a: the box is [0, 2 pi a) x [0, 2 pi). */
  readonly aspect: number;
  /** Grid points [nx, ny], powers of two. */
  readonly grid: readonly [number, number];
  /** Solver time step. */
  readonly dt: number;
  /** Linear (Rayleigh) drag coefficient mu >= 0; 0 for the classical problem. */
  readonly linearDrag: number;
  /** Amplitude of sin(n y) e_x; 1 in this convention (default), 0 for unforced checks. */
  readonly forcingAmplitude?: number;
}

/** Laminar mean-flow amplitude U_lam = Re/n^2 (u = U_lam sin(n y)). */
export function laminarAmplitude(re: number, n: number): number {
  return re / (n * n);
}

function checkPhysics(p: KolmogorovPhysics): void {
  const bad = (what: string, v: unknown): never => {
    throw new Error(`KolmogorovSolver: ${what}, got ${JSON.stringify(v)}`);
  };
  const [nx, ny] = p.grid;
  for (const [name, v] of [['grid[0]', nx], ['grid[1]', ny]] as const) {
    if (!Number.isInteger(v) || v < 8 || (v & (v - 1)) !== 0) bad(`${name} must be a power of two >= 8`, v);
  }
  if (!(p.re > 0 && Number.isFinite(p.re))) bad('re must be positive and finite', p.re);
  if (!Number.isInteger(p.forcingWavenumber) || p.forcingWavenumber < 1 || 3 * p.forcingWavenumber >= ny) {
    bad(`forcingWavenumber must be an integer with 1 <= n and 3n < grid[1] (${ny})`, p.forcingWavenumber);
  }
  if (!(p.aspect > 0 && Number.isFinite(p.aspect))) bad('aspect must be positive and finite', p.aspect);
  if (!(p.dt > 0 && Number.isFinite(p.dt))) bad('dt must be positive and finite', p.dt);
  if (!(p.linearDrag >= 0 && Number.isFinite(p.linearDrag))) bad('linearDrag must be >= 0 and finite', p.linearDrag);
  const f = p.forcingAmplitude ?? 1;
  if (!Number.isFinite(f)) bad('forcingAmplitude must be finite', f);
}

/** Domain diagnostics of one copy (area means). */
export interface FlowBudget {
  /** Kinetic energy E = <|u|^2>/2. */
  readonly energy: number;
  /** Energy input rate of the Kolmogorov force I = <u sin(n y)>. */
  readonly input: number;
  /** Viscous dissipation rate D = Re^-1 <omega^2>. */
  readonly dissipation: number;
  /** Mean-flow amplitude U = 2 <u sin(n y)> (the projection of u on sin(n y)); U = 2 I. */
  readonly meanFlow: number;
  /** Enstrophy <omega^2>/2. */
  readonly enstrophy: number;
}

/** Called at stage 1 of every step with the velocity of the state at the start of the step. */
export type StepSampler = (velocity: Float64Array, fields: number) => void;

/**
 * B copies of the Kolmogorov-flow vorticity equation stepped together.
 *
 * After `computeVelocity()` or during a `sampler` call, `velocity` holds the physical
 * fields [ny][nx][2B]: u of copy b at field b, v at field B + b.
 */
export class KolmogorovSolver implements NonlinearTerm {
  readonly physics: KolmogorovPhysics;
  readonly copies: number;
  readonly nx: number;
  readonly ny: number;
  readonly nky: number;
  readonly modes: number;
  readonly lx: number;
  readonly ly: number;
  readonly fft: Fft2;
  /** Spectral vorticity, re/im [modes][B]. */
  readonly omRe: Float64Array;
  readonly omIm: Float64Array;
  /** Physical wavenumbers per mode. */
  readonly kx: Float64Array;
  readonly ky: Float64Array;
  /** 1/|k|^2 per mode (0 at k = 0). */
  readonly invK2: Float64Array;
  /** 1 for retained modes (2/3 rule, k != 0), 0 otherwise. */
  readonly mask: Float64Array;
  /** Physical velocity [ny][nx][2B] (see class comment). */
  readonly velocity: Float64Array;
  /** Curl of the jet force per copy, re/im [modes][B]; held constant over steps. */
  readonly jetRe: Float64Array;
  readonly jetIm: Float64Array;
  /** Called at stage 1 of each step with `velocity` filled for the start-of-step state. */
  sampler: StepSampler | null = null;

  private readonly stepper: Etdrk4Stepper;
  /** Curl of the Kolmogorov force, -n cos(n y), spectral [modes]. */
  private readonly kolRe: Float64Array;
  private readonly kolIm: Float64Array;
  private readonly wRe: Float64Array;
  private readonly wIm: Float64Array;
  private readonly prod: Float64Array;
  /** Index of the (mx = 0, my = n) mode. */
  private readonly forcedMode: number;

  constructor(physics: KolmogorovPhysics, copies: number) {
    checkPhysics(physics);
    if (!Number.isInteger(copies) || copies < 1) throw new Error(`KolmogorovSolver: copies must be an integer >= 1, got ${copies}`);
    const [nx, ny] = physics.grid;
    const n = physics.forcingWavenumber;
    this.physics = physics;
    this.copies = copies;
    this.nx = nx;
    this.ny = ny;
    const maskX = twoThirdsMask(nx);
    const maskY = twoThirdsMask(ny);
    let myKeep = 0;
    while (myKeep < maskY.length && maskY[myKeep] === 1) myKeep++;
    this.fft = new Fft2(nx, ny, myKeep);
    this.nky = this.fft.nky;
    this.modes = nx * this.nky;
    this.lx = 2 * Math.PI * physics.aspect;
    this.ly = 2 * Math.PI;
    const M = this.modes;
    const B = copies;
    this.kx = new Float64Array(M);
    this.ky = new Float64Array(M);
    this.invK2 = new Float64Array(M);
    this.mask = new Float64Array(M);
    const L = new Float64Array(M);
    const nu = 1 / physics.re;
    for (let ix = 0; ix < nx; ix++) {
      const mx = ix <= nx / 2 ? ix : ix - nx;
      for (let my = 0; my < this.nky; my++) {
        const k = my * nx + ix;
        const kx = (2 * Math.PI * mx) / this.lx;
        const ky = (2 * Math.PI * my) / this.ly;
        const k2 = kx * kx + ky * ky;
        this.kx[k] = kx;
        this.ky[k] = ky;
        this.invK2[k] = k2 > 0 ? 1 / k2 : 0;
        this.mask[k] = k2 > 0 ? maskX[Math.abs(mx)]! * maskY[my]! : 0;
        L[k] = -nu * k2 - physics.linearDrag;
      }
    }
    this.stepper = new Etdrk4Stepper(etdrk4Coefficients(L, physics.dt), B);
    this.omRe = new Float64Array(M * B);
    this.omIm = new Float64Array(M * B);
    this.jetRe = new Float64Array(M * B);
    this.jetIm = new Float64Array(M * B);
    this.wRe = new Float64Array(M * 2 * B);
    this.wIm = new Float64Array(M * 2 * B);
    this.velocity = new Float64Array(nx * ny * 2 * B);
    this.prod = new Float64Array(nx * ny * 2 * B);
    // Curl of sin(n y) e_x is -n cos(n y): computed on the grid and transformed, so its
    // spectral normalisation is that of every other field.
    const f = new Float64Array(nx * ny);
    for (let j = 0; j < ny; j++) {
      const c = -(physics.forcingAmplitude ?? 1) * n * Math.cos((n * 2 * Math.PI * j) / ny);
      for (let i = 0; i < nx; i++) f[j * nx + i] = c;
    }
    this.kolRe = new Float64Array(M);
    this.kolIm = new Float64Array(M);
    this.fft.forward(f, this.kolRe, this.kolIm, 1);
    for (let k = 0; k < M; k++) {
      this.kolRe[k]! *= this.mask[k]!;
      this.kolIm[k]! *= this.mask[k]!;
    }
    this.forcedMode = n * nx; // my = n, ix = 0
  }

  /**
   * ETDRK4 nonlinear term (NonlinearTerm of etdrk4.ts); also feeds the stage-1 sampler.
   * The advection term uses the form of Basdevant (1983, J. Comput. Phys. 50, 209-214),
   * curl div(u u) = (d_xx - d_yy)(u v) + d_xy (v^2 - u^2), which needs two inverse and two
   * forward transforms instead of four and one:
   *     N_hat = (kx^2 - ky^2) F[u v] + kx ky F[v^2 - u^2]   (masked) + forcing.
   */
  evaluate(vRe: Float64Array, vIm: Float64Array, outRe: Float64Array, outIm: Float64Array): void {
    this.velocityOf(vRe, vIm);
    // The stepper passes the state arrays themselves only for N(v) at the start of a step.
    if (vRe === this.omRe && this.sampler) this.sampler(this.velocity, 2 * this.copies);
    const B = this.copies;
    const C = 2 * B;
    const V = this.velocity;
    const prod = this.prod;
    const npts = this.nx * this.ny;
    for (let p = 0, q = 0; p < npts; p++, q += C) {
      for (let b = 0; b < B; b++) {
        const u = V[q + b]!;
        const v = V[q + B + b]!;
        prod[q + b] = u * v;
        prod[q + B + b] = v * v - u * u;
      }
    }
    const { wRe, wIm } = this;
    this.fft.forward(prod, wRe, wIm, C);
    const { mask, kx, ky, kolRe, kolIm, jetRe, jetIm } = this;
    for (let k = 0, i = 0; k < this.modes; k++) {
      const m = mask[k]!;
      const a = m * (kx[k]! * kx[k]! - ky[k]! * ky[k]!);
      const c = m * kx[k]! * ky[k]!;
      const fr = kolRe[k]!;
      const fi = kolIm[k]!;
      const o = k * C;
      for (let b = 0; b < B; b++, i++) {
        outRe[i] = a * wRe[o + b]! + c * wRe[o + B + b]! + fr + jetRe[i]!;
        outIm[i] = a * wIm[o + b]! + c * wIm[o + B + b]! + fi + jetIm[i]!;
      }
    }
  }

  /** Fill `velocity` with u (field b) and v (field B + b) of the spectral field (vRe, vIm). */
  private velocityOf(vRe: Float64Array, vIm: Float64Array): void {
    const B = this.copies;
    const C = 2 * B;
    const { wRe, wIm, kx, ky, invK2, mask } = this;
    for (let k = 0, i = 0; k < this.modes; k++) {
      const s = invK2[k]! * mask[k]!;
      const a = kx[k]! * s;
      const c = ky[k]! * s;
      const o = k * C;
      for (let b = 0; b < B; b++, i++) {
        const wr = vRe[i]!;
        const wi = vIm[i]!;
        // u = i ky psi, v = -i kx psi, psi = omega/|k|^2.
        wRe[o + b] = -c * wi;
        wIm[o + b] = c * wr;
        wRe[o + B + b] = a * wi;
        wIm[o + B + b] = -a * wr;
      }
    }
    this.fft.inverseInPlace(wRe, wIm, this.velocity, C);
  }

  /** Advance every copy by `steps` solver steps. */
  advance(steps: number): void {
    for (let s = 0; s < steps; s++) this.stepper.step(this.omRe, this.omIm, this);
  }

  /** Fill `velocity` (u at field b, v at field B + b) for the current state. */
  computeVelocity(): void {
    this.velocityOf(this.omRe, this.omIm);
  }

  /** Set copy b's vorticity from a physical field [ny][nx] (dealiased on the way in). */
  setVorticity(copy: number, omega: Float64Array): void {
    const M = this.modes;
    const re = new Float64Array(M);
    const im = new Float64Array(M);
    this.fft.forward(omega, re, im, 1);
    const B = this.copies;
    for (let k = 0; k < M; k++) {
      this.omRe[k * B + copy] = re[k]! * this.mask[k]!;
      this.omIm[k * B + copy] = im[k]! * this.mask[k]!;
    }
  }

  /** Copy b's vorticity on the grid, [ny][nx] (allocates; for plots and tests). */
  vorticity(copy: number): Float64Array {
    const M = this.modes;
    const re = new Float64Array(M);
    const im = new Float64Array(M);
    for (let k = 0; k < M; k++) {
      re[k] = this.omRe[k * this.copies + copy]!;
      im[k] = this.omIm[k * this.copies + copy]!;
    }
    const out = new Float64Array(this.nx * this.ny);
    this.fft.inverseInPlace(re, im, out, 1);
    return out;
  }

  /** Copy the spectral state of copy `from` of `src` into copy `to` of this solver. */
  copyStateFrom(src: KolmogorovSolver, from: number, to: number): void {
    for (let k = 0; k < this.modes; k++) {
      this.omRe[k * this.copies + to] = src.omRe[k * src.copies + from]!;
      this.omIm[k * this.copies + to] = src.omIm[k * src.copies + from]!;
    }
  }

  /** Zero copy b's state. */
  clearCopy(copy: number): void {
    for (let k = 0; k < this.modes; k++) {
      this.omRe[k * this.copies + copy] = 0;
      this.omIm[k * this.copies + copy] = 0;
    }
  }

  /** True when every spectral coefficient of copy b is finite. */
  isFinite(copy: number): boolean {
    const B = this.copies;
    for (let i = copy; i < this.omRe.length; i += B) {
      if (!Number.isFinite(this.omRe[i]!) || !Number.isFinite(this.omIm[i]!)) return false;
    }
    return true;
  }

  /** Energy, input, dissipation and mean flow of copy b, from the spectral state by Parseval. */
  budget(copy: number): FlowBudget {
    const { nx, ny, nky, copies: B } = this;
    const norm = 1 / (nx * ny * nx * ny);
    let e = 0;
    let z2 = 0;
    for (let ix = 0; ix < nx; ix++) {
      for (let my = 0; my < nky; my++) {
        const k = my * nx + ix;
        const w = my === 0 || 2 * my === ny ? 1 : 2;
        const r = this.omRe[k * B + copy]!;
        const i = this.omIm[k * B + copy]!;
        const a2 = r * r + i * i;
        z2 += w * a2;
        e += w * a2 * this.invK2[k]!;
      }
    }
    const n = this.physics.forcingWavenumber;
    // <u sin(n y)> = -Re(omega_hat(0, n)) / (n nx ny) for the unnormalised transform.
    const input = -this.omRe[this.forcedMode * B + copy]! / (n * nx * ny);
    return {
      energy: 0.5 * e * norm,
      input,
      dissipation: (z2 * norm) / this.physics.re,
      meanFlow: 2 * input,
      enstrophy: 0.5 * z2 * norm,
    };
  }

  /**
   * Viscous dissipation D = Re^-1 <omega^2> of every copy into out [B] (Parseval; no allocation).
   */
  dissipationAll(out: Float64Array): void {
    const { nx, ny, copies: B } = this;
    out.fill(0, 0, B);
    for (let k = 0, i = 0; k < this.modes; k++) {
      const my = Math.floor(k / nx);
      const w = my === 0 || 2 * my === ny ? 1 : 2;
      for (let b = 0; b < B; b++, i++) out[b]! += w * (this.omRe[i]! * this.omRe[i]! + this.omIm[i]! * this.omIm[i]!);
    }
    const norm = 1 / (nx * ny * nx * ny * this.physics.re);
    for (let b = 0; b < B; b++) out[b]! *= norm;
  }

  /**
   * Set the jet forcing of every copy from the physical y-force f_y [ny][nx][B]
   * (held until the next call): stores the dealiased curl i kx f_y_hat. `fy` is not modified.
   */
  setJetForce(fy: Float64Array): void {
    const { jetRe, jetIm, kx, mask } = this;
    const B = this.copies;
    this.fft.forward(fy, jetRe, jetIm, B);
    for (let k = 0, i = 0; k < this.modes; k++) {
      const a = kx[k]! * mask[k]!;
      for (let b = 0; b < B; b++, i++) {
        const r = jetRe[i]!;
        jetRe[i] = -a * jetIm[i]!;
        jetIm[i] = a * r;
      }
    }
  }
}

// ---------------------------------------------------------------------------------------
// Configuration
// ---------------------------------------------------------------------------------------

const isPowerOfTwo = (n: number): boolean => Number.isInteger(n) && n > 0 && (n & (n - 1)) === 0;
const gridSize = z
  .number()
  .int()
  .refine(isPowerOfTwo, 'expected a power of two')
  .refine((n) => n >= 16 && n <= 4096, 'expected 16 <= points <= 4096');
const pair = <T extends z.ZodType>(t: T) => z.tuple([t, t]);

/** The `env:` section for `kind: kolmogorov`. Every field has its default and a one-line doc. */
export const kolmogorovConfigSchema = z
  .strictObject({
    kind: z.literal('kolmogorov').describe('Surrogate kind: 2-D Kolmogorov flow with a grid of tiles.'),
    reynolds: z.number().positive().finite().default(40).describe('Reynolds number Re: viscosity 1/Re at forcing amplitude 1 (default 40).'),
    forcingWavenumber: z.number().int().positive().default(4).describe('Forcing wavenumber n of sin(n y) e_x (default 4).'),
    aspect: z.number().positive().finite().default(1).describe('Box [0, 2 pi aspect) x [0, 2 pi) (default 1).'),
    points: pair(gridSize).default([64, 64]).describe('Grid points [nx, ny], powers of two (default [64, 64]).'),
    dt: z.number().positive().finite().default(0.02).describe('Solver time step (default 0.02).'),
    linearDrag: z.number().nonnegative().finite().default(0).describe('Linear drag coefficient mu, the term -mu u (default 0).'),
    tiles: pair(z.number().int().positive())
      .default([4, 2])
      .describe('Tile grid [Tx, Ty]; Ty must divide forcingWavenumber so tiles span whole forcing wavelengths (default [4, 2]).'),
    actuatorPosition: pair(z.number().min(0).lt(1))
      .default([0.5, 0.5])
      .describe("Jet centre in the tile's frame, in tile lengths; must fall on a grid point (default [0.5, 0.5])."),
    actuatorWidth: z
      .number()
      .positive()
      .finite()
      .default(0.3)
      .describe('Standard deviation sigma (length units) of each periodised-Gaussian jet (default 0.3).'),
    actionBound: z.number().positive().finite().default(1).describe('Bound a_max on each jet amplitude (peak body force, default 1).'),
    controlSteps: z.number().int().positive().default(25).describe('Solver steps m an action is held: one decision per m*dt (default 25).'),
    sensorsPerTile: pair(z.number().int().positive())
      .default([4, 4])
      .describe('Sensors [Sx, Sy] per tile window on grid points, each sensing u and v (default [4, 4]).'),
    haloTiles: pair(z.number().int().nonnegative()).default([0, 0]).describe('Neighbouring tiles sensed on each side [Hx, Hy] (default [0, 0]).'),
    oppositionOffset: pair(z.number().finite())
      .default([0, 0])
      .describe('Offset (length units) from each jet centre to the point where opposition control senses v; whole grid spacings (default [0, 0]).'),
    episodeLength: z.number().int().positive().default(100).describe('Decisions per episode (default 100, i.e. 50 time units at the defaults).'),
    spinUpTime: z
      .number()
      .nonnegative()
      .finite()
      .default(40)
      .describe('Uncontrolled time integrated from the seeded initial state before an episode starts (default 40).'),
    initialNoise: z
      .number()
      .positive()
      .finite()
      .default(1)
      .describe('Standard deviation of the seeded grid vorticity noise added to the laminar state to start the spin-up (default 1).'),
    blowUpEnergy: z
      .number()
      .positive()
      .default(100)
      .describe('A copy whose kinetic energy exceeds this (or is not finite) has diverged (default 100; E_lam = 1.5625 at Re 40, n 4).'),
    reward: rewardSchema('s = 1 - Cf/Cf0 - c Pi+/P0', {
      meanFlowFloor: z
        .number()
        .positive()
        .max(1)
        .default(0.05)
        .describe('Tile mean flow is floored at this fraction of U_lam before Cf = 2/(n U^2) is formed, so Cf <= Cf_lam/floor^2 (default 0.05).'),
    }),
    reference: referenceSchema('Cf0 (uncontrolled mean tile Cf) and I0 (uncontrolled mean power input)', { time: 500, copies: 4 }),
  })
  .superRefine((c, ctx) => {
    const bad = (path: (string | number)[], message: string, input: unknown): void => {
      ctx.addIssue({ code: 'custom', path, message, input });
    };
    const [nx, ny] = c.points;
    const [tx, ty] = c.tiles;
    const n = c.forcingWavenumber;
    if (3 * n >= ny) bad(['forcingWavenumber'], `expected 3n < points[1] (${ny}) so the forcing survives the 2/3 rule`, n);
    if (nx % tx !== 0) bad(['tiles', 0], `expected a divisor of points[0] (${nx})`, tx);
    if (ny % ty !== 0) bad(['tiles', 1], `expected a divisor of points[1] (${ny})`, ty);
    if (n % ty !== 0) {
      bad(['tiles', 1], `expected a divisor of forcingWavenumber (${n}) so every tile spans whole wavelengths of sin(n y)`, ty);
    }
    const cx = nx / tx;
    const cy = ny / ty;
    c.actuatorPosition.forEach((f, d) => {
      const cells = (d === 0 ? cx : cy) * f;
      if (Math.abs(cells - Math.round(cells)) > 1e-9) bad(['actuatorPosition', d], `expected a whole number of grid spacings (${d === 0 ? cx : cy} per tile)`, f);
    });
    c.sensorsPerTile.forEach((sN, d) => {
      const cells = d === 0 ? cx : cy;
      if (Number.isInteger(cells) && cells % sN !== 0) bad(['sensorsPerTile', d], `expected a divisor of the tile's ${cells} grid points`, sN);
    });
    c.haloTiles.forEach((h, d) => {
      const t = d === 0 ? tx : ty;
      if (2 * h + 1 > t) bad(['haloTiles', d], `expected 2*halo + 1 <= tiles[${d}] (${t}) so a tile does not sense itself twice`, h);
    });
    const spacing = [(2 * Math.PI * c.aspect) / nx, (2 * Math.PI) / ny];
    c.oppositionOffset.forEach((o, d) => {
      const cells = o / spacing[d]!;
      if (Math.abs(cells - Math.round(cells)) > 1e-6) {
        bad(['oppositionOffset', d], `expected a whole number of grid spacings (${spacing[d]!.toPrecision(6)})`, o);
      }
    });
    const tileLen = Math.min((2 * Math.PI * c.aspect) / tx, (2 * Math.PI) / ty);
    if (c.actuatorWidth > tileLen / 2) bad(['actuatorWidth'], `expected at most half the smaller tile side (${tileLen / 2})`, c.actuatorWidth);
    if (c.reference.blockTime > c.reference.time) {
      bad(['reference', 'blockTime'], `expected at most reference.time (${c.reference.time})`, c.reference.blockTime);
    }
  });

export type KolmogorovConfig = z.output<typeof kolmogorovConfigSchema>;

/** Parse and validate an `env:` section for the Kolmogorov surrogate (defaults filled in). */
export function parseKolmogorovConfig(raw: unknown, root = 'env'): KolmogorovConfig {
  return parseConfig(kolmogorovConfigSchema, raw, root);
}

/** The solver parameters of a config. */
export function kolmogorovPhysics(c: KolmogorovConfig): KolmogorovPhysics {
  return { re: c.reynolds, forcingWavenumber: c.forcingWavenumber, aspect: c.aspect, grid: c.points, dt: c.dt, linearDrag: c.linearDrag };
}

/**
 * Seeded initial vorticity of copy `copy`: the laminar state plus grid noise of standard
 * deviation `noise`, drawn by global grid index (j*nx + i) from Rng.derive(seed,
 * "kolmogorov-init"), so tiling does not change it. Dealiased by `setVorticity`.
 */
export function seedKolmogorov(solver: KolmogorovSolver, copy: number, seed: number, noise: number): void {
  const { nx, ny } = solver;
  const n = solver.physics.forcingWavenumber;
  const U = laminarAmplitude(solver.physics.re, n);
  const rng = Rng.derive(seed, 'kolmogorov-init');
  const w = new Float64Array(nx * ny);
  for (let j = 0; j < ny; j++) {
    const lam = -U * n * Math.cos((2 * Math.PI * n * j) / ny);
    for (let i = 0; i < nx; i++) w[j * nx + i] = lam + noise * rng.normal();
  }
  solver.setVorticity(copy, w);
}

// ---------------------------------------------------------------------------------------
// The tiled environment
// ---------------------------------------------------------------------------------------

/** What KolmogorovEnv needs beyond its config. */
export interface KolmogorovEnvOptions {
  /** Copies B stepped together. */
  readonly copies: number;
  /** Cf0: long-time uncontrolled mean of the tile Cf (tiles and intervals) for this config. */
  readonly cf0: number;
  /** I0 = P0: long-time uncontrolled mean energy input rate <u sin(n y)>, per unit area. */
  readonly i0: number;
  /** Receives events worth logging (a copy diverged). */
  readonly onEvent?: (e: EnvEvent) => void;
}

/** StepOut plus the domain diagnostics a report wants. */
export interface KolmogorovStepOut extends StepOut {
  /** Interval mean of I/I_lam per copy, [B]. */
  readonly inputRatio: Float64Array;
  /** Interval mean of D/D_lam per copy, [B]. */
  readonly dissipationRatio: Float64Array;
  /** Domain mean of the tiles' Cf/Cf0 per copy, [B]. */
  readonly domainDrag: Float64Array;
}

/**
 * Kolmogorov flow cut into a Tx x Ty grid of tiles (implements `TiledEnv`); the physics of
 * the drag analogue is in docs/kolmogorov.md. Tile (tx, ty) covers
 * [tx Lx/Tx, (tx+1) Lx/Tx) x [ty Ly/Ty, (ty+1) Ly/Ty) and is numbered t = ty*Tx + tx.
 *
 * Actuation: one jet per tile, a body force in y, a_t g(x - x_t) e_y, g the periodised
 * Gaussian of standard deviation sigma (peak 1), x_t = tile origin + actuatorPosition.
 * The total force sum_t a_t g_t minus its mean (so it has zero mean: no net momentum is
 * injected, which the vorticity form could not represent) is held for m solver steps;
 * its curl enters N. Amplitudes are clipped to [-a_max, a_max].
 *
 * Sensing: Sx x Sy sensors per tile window at grid offsets (s*stride + floor(stride/2)),
 * stride = tile cells / S, over the windows of tiles tx-Hx..tx+Hx, ty-Hy..ty+Hy (periodic).
 * Observation = u at every sensor (rows bottom to top, x fastest), then v at the same
 * points. Positions are in the tile frame, so shifting the flow by one tile permutes
 * the tiles' observations, actions and rewards.
 *
 * Drag analogue (docs/kolmogorov.md): tile mean-flow amplitude U_t = 2 <u sin(n y)>_tile
 * (grid mean over the tile; the projection of u on sin(n y), exact for the laminar state
 * because the tile spans whole wavelengths), averaged over the interval by the trapezoid
 * rule over the m+1 step samples; Cf_t = 2 F / (n max(U_t, floor U_lam)^2) with F = 1
 * (Cf_lam = 2 n^3 / Re^2 is the lowest value); drag = Cf_t / Cf0, Cf0 the cached long-time
 * uncontrolled mean of Cf_t, so the uncontrolled drag averages 1.
 *
 * Actuation power: jet t exchanges p_t = a_t int v g_t dA with the flow (its term of dE/dt;
 * the mean correction does no work on a zero-mean v). Cost Pi+_t = max(p_t, 0)/|tile|,
 * interval-averaged; actuationPower = Pi+_t / P0 with P0 = I0 the cached uncontrolled mean
 * power input per unit area. Signed <v f>_t/P0 is `forcingWork`.
 *
 * Reward: s_t = 1 - Cf_t/Cf0 - c Pi+_t/P0, s_D = mean_t s_t, r_t = (1 - beta) s_t + beta s_D. A diverged copy gets
 * `reward.onDivergence` on every tile, zero observations, NaN drag, and its state is
 * zeroed until the caller resets it. Net saving (tables): 1 - Cf/Cf0 - Pi+/P0.
 * Not a channel flow: the "drag" is an analogue (docs/kolmogorov.md).
 */
export class KolmogorovEnv implements TiledEnv {
  readonly spec: EnvSpec;
  readonly config: KolmogorovConfig;
  readonly cf0: number;
  readonly i0: number;
  readonly solver: KolmogorovSolver;
  /** Signed work rate <v f> of each tile's jet over the last interval, / P0, [B, T]. */
  readonly forcingWork: Float64Array;
  /** Interval-mean tile mean-flow amplitude U_t of the last step, [B, T]. */
  readonly tileMeanFlow: Float64Array;

  private readonly B: number;
  private readonly T: number;
  private readonly Tx: number;
  private readonly Ty: number;
  private readonly cx: number;
  private readonly cy: number;
  private readonly nx: number;
  private readonly ny: number;
  private readonly onEvent: ((e: EnvEvent) => void) | undefined;
  /** Jet stencil g at offsets (dy, dx) in [-hy, hy] x [-hx, hx] cells, [(2hy+1)(2hx+1)]. */
  private readonly stencil: Float64Array;
  private readonly hx: number;
  private readonly hy: number;
  private readonly stencilSum: number;
  /** Grid point (j*nx + i) under stencil entry s of tile t's jet, [T, stencil size]. */
  private readonly jetPoint: Int32Array;
  /** sin(n y_j) per grid row, [ny]. */
  private readonly sinRow: Float64Array;
  /** Grid point (j*nx + i) of observation sensor s of tile t, [T, sensorsPerObs]. */
  private readonly sensorPoint: Int32Array;
  private readonly sensorsPerObs: number;
  /** Grid point where tile t's opposition signal is sensed, [T]. */
  private readonly oppPoint: Int32Array;

  private readonly force: Float64Array;
  private readonly amp: Float64Array;
  private readonly uLast: Float64Array;
  private readonly projLast: Float64Array;
  private readonly uAcc: Float64Array;
  private readonly costAcc: Float64Array;
  private readonly workAcc: Float64Array;
  private readonly inAcc: Float64Array;
  private readonly disAcc: Float64Array;
  private readonly rowSum: Float64Array;
  private readonly dissipationNow: Float64Array;
  private readonly divergedNow: Uint8Array;
  private weight = 0;
  private spinSolver: KolmogorovSolver | null = null;

  private readonly buf: TiledStepBuffers;
  private readonly inputRatio: Float64Array;
  private readonly dissipationRatio: Float64Array;
  private readonly domainDrag: Float64Array;
  private readonly opp: Float64Array;
  private readonly out: KolmogorovStepOut;

  constructor(config: KolmogorovConfig, options: KolmogorovEnvOptions) {
    this.config = parseKolmogorovConfig(config);
    const c = this.config;
    if (!Number.isInteger(options.copies) || options.copies < 1) {
      throw new Error(`KolmogorovEnv: copies must be an integer >= 1, got ${options.copies}`);
    }
    if (!(options.cf0 > 0 && Number.isFinite(options.cf0))) throw new Error(`KolmogorovEnv: cf0 must be positive and finite, got ${options.cf0}`);
    if (!(options.i0 > 0 && Number.isFinite(options.i0))) throw new Error(`KolmogorovEnv: i0 must be positive and finite, got ${options.i0}`);
    this.cf0 = options.cf0;
    this.i0 = options.i0;
    this.onEvent = options.onEvent;
    const B = (this.B = options.copies);
    const [nx, ny] = c.points;
    this.nx = nx;
    this.ny = ny;
    const [Tx, Ty] = c.tiles;
    this.Tx = Tx;
    this.Ty = Ty;
    const T = (this.T = Tx * Ty);
    const cx = (this.cx = nx / Tx);
    const cy = (this.cy = ny / Ty);
    this.solver = new KolmogorovSolver(kolmogorovPhysics(c), B);
    const s = this.solver;
    const dx = s.lx / nx;
    const dy = s.ly / ny;
    const n = c.forcingWavenumber;

    // Jet stencil: periodised Gaussian on whole-cell offsets, cut where it is below 1e-12
    // of its peak (7.5 sigma), or the whole period if that is smaller. The cut stencil is
    // the force applied and the one the power is computed with, so they stay consistent.
    const sigma = c.actuatorWidth;
    const reach = 7.5 * sigma;
    this.hx = Math.min(Math.ceil(reach / dx), Math.floor((nx - 1) / 2));
    this.hy = Math.min(Math.ceil(reach / dy), Math.floor((ny - 1) / 2));
    const wx = 2 * this.hx + 1;
    const wy = 2 * this.hy + 1;
    this.stencil = new Float64Array(wx * wy);
    let sum = 0;
    for (let a = -this.hy; a <= this.hy; a++) {
      for (let b = -this.hx; b <= this.hx; b++) {
        let g = 0;
        for (let p = -2; p <= 2; p++) {
          for (let q = -2; q <= 2; q++) {
            const ex = b * dx + p * s.lx;
            const ey = a * dy + q * s.ly;
            g += Math.exp(-(ex * ex + ey * ey) / (2 * sigma * sigma));
          }
        }
        this.stencil[(a + this.hy) * wx + (b + this.hx)] = g;
        sum += g;
      }
    }
    this.stencilSum = sum;
    this.jetPoint = new Int32Array(T * wx * wy);
    const pi = Math.round(c.actuatorPosition[0] * cx);
    const pj = Math.round(c.actuatorPosition[1] * cy);
    const oi = Math.round(c.oppositionOffset[0] / dx);
    const oj = Math.round(c.oppositionOffset[1] / dy);
    this.oppPoint = new Int32Array(T);
    for (let ty = 0; ty < Ty; ty++) {
      for (let tx = 0; tx < Tx; tx++) {
        const t = ty * Tx + tx;
        for (let a = -this.hy; a <= this.hy; a++) {
          for (let b = -this.hx; b <= this.hx; b++) {
            const sIdx = (a + this.hy) * wx + (b + this.hx);
            this.jetPoint[t * wx * wy + sIdx] = mod(ty * cy + pj + a, ny) * nx + mod(tx * cx + pi + b, nx);
          }
        }
        this.oppPoint[t] = mod(ty * cy + pj + oj, ny) * nx + mod(tx * cx + pi + oi, nx);
      }
    }
    this.sinRow = new Float64Array(ny);
    for (let j = 0; j < ny; j++) this.sinRow[j] = Math.sin((2 * Math.PI * n * j) / ny);

    // Sensors.
    const [Sx, Sy] = c.sensorsPerTile;
    const [Hx, Hy] = c.haloTiles;
    const strideX = cx / Sx;
    const strideY = cy / Sy;
    const firstX = Math.floor(strideX / 2);
    const firstY = Math.floor(strideY / 2);
    const rowsX = (2 * Hx + 1) * Sx;
    const rowsY = (2 * Hy + 1) * Sy;
    this.sensorsPerObs = rowsX * rowsY;
    this.sensorPoint = new Int32Array(T * this.sensorsPerObs);
    const positions: number[][] = [];
    for (let r = 0; r < rowsY; r++) {
      const offY = (r - Hy * Sy) * strideY + firstY; // cells from the tile origin
      for (let q = 0; q < rowsX; q++) {
        const offX = (q - Hx * Sx) * strideX + firstX;
        positions.push([offX / cx, offY / cy]);
        for (let ty = 0; ty < Ty; ty++) {
          for (let tx = 0; tx < Tx; tx++) {
            const t = ty * Tx + tx;
            this.sensorPoint[t * this.sensorsPerObs + r * rowsX + q] = mod(ty * cy + offY, ny) * nx + mod(tx * cx + offX, nx);
          }
        }
      }
    }
    const obsLayout: ObsLayoutEntry[] = [
      { quantity: 'u', count: this.sensorsPerObs, positions },
      { quantity: 'v', count: this.sensorsPerObs, positions },
    ];
    const obsDim = 2 * this.sensorsPerObs;

    this.spec = {
      kind: 'kolmogorov',
      copies: B,
      tileGrid: [Tx, Ty],
      tiles: T,
      obsDim,
      actDim: 1,
      actionBound: c.actionBound,
      controlInterval: c.controlSteps * c.dt,
      episodeLength: c.episodeLength,
      obsLayout,
      dragName: 'Cf/Cf0',
    };

    this.force = new Float64Array(nx * ny * B);
    this.amp = new Float64Array(B * T);
    this.uLast = new Float64Array(B * T);
    this.projLast = new Float64Array(B * T);
    this.uAcc = new Float64Array(B * T);
    this.costAcc = new Float64Array(B * T);
    this.workAcc = new Float64Array(B * T);
    this.inAcc = new Float64Array(B);
    this.disAcc = new Float64Array(B);
    this.rowSum = new Float64Array(B * Tx);
    this.dissipationNow = new Float64Array(B);
    this.forcingWork = new Float64Array(B * T);
    this.tileMeanFlow = new Float64Array(B * T);
    this.divergedNow = new Uint8Array(B);
    this.buf = new TiledStepBuffers(B, T, obsDim);
    this.inputRatio = new Float64Array(B);
    this.dissipationRatio = new Float64Array(B);
    this.domainDrag = new Float64Array(B);
    this.opp = new Float64Array(B * T);
    this.out = {
      ...this.buf.out,
      inputRatio: this.inputRatio,
      dissipationRatio: this.dissipationRatio,
      domainDrag: this.domainDrag,
    };
    this.solver.sampler = (vel) => this.sample(vel, this.weight);
  }

  // --- TiledEnv -------------------------------------------------------------------------

  reset(seeds: ArrayLike<number>): Float32Array {
    if (seeds.length !== this.B) throw new Error(`KolmogorovEnv.reset: expected ${this.B} seeds (one per copy), got ${seeds.length}`);
    for (let b = 0; b < this.B; b++) checkSeed('KolmogorovEnv.reset', seeds[b]!, `seeds[${b}]`);
    const s = this.solver;
    this.amp.fill(0);
    this.applyForce();
    for (let b = 0; b < this.B; b++) seedKolmogorov(s, b, seeds[b]!, this.config.initialNoise);
    s.sampler = null;
    s.advance(Math.round(this.config.spinUpTime / this.config.dt));
    s.sampler = (vel) => this.sample(vel, this.weight);
    this.buf.decisions.fill(0);
    this.divergedNow.fill(0);
    for (let b = 0; b < this.B; b++) this.check(b, 'spin-up');
    this.solver.computeVelocity();
    return this.observe();
  }

  resetCopy(copy: number, seed: number): void {
    checkCopy('KolmogorovEnv.resetCopy', copy, this.B);
    checkSeed('KolmogorovEnv.resetCopy', seed, 'seed');
    // Spin up alone in a one-copy solver: the batch-inner arithmetic is identical per copy,
    // so the result equals the batched reset bit for bit.
    this.spinSolver ??= new KolmogorovSolver(kolmogorovPhysics(this.config), 1);
    const one = this.spinSolver;
    seedKolmogorov(one, 0, seed, this.config.initialNoise);
    one.advance(Math.round(this.config.spinUpTime / this.config.dt));
    this.solver.copyStateFrom(one, 0, copy);
    for (let t = 0; t < this.T; t++) this.amp[copy * this.T + t] = 0;
    this.applyForce();
    this.buf.decisions[copy] = 0;
    this.divergedNow[copy] = 0;
    this.check(copy, 'spin-up');
    this.solver.computeVelocity();
    this.writeObs();
  }

  observe(): Float32Array {
    this.writeObs();
    return this.buf.obs;
  }

  step(actions: Float32Array): KolmogorovStepOut {
    const { B, T } = this;
    const c = this.config;
    clipActions('KolmogorovEnv', actions, this.amp, c.actionBound, T, 'tile');
    this.applyForce();
    const m = c.controlSteps;
    this.uAcc.fill(0);
    this.costAcc.fill(0);
    this.workAcc.fill(0);
    this.inAcc.fill(0);
    this.disAcc.fill(0);
    // Trapezoid rule over t0..tm: stage-1 samples at t0..t(m-1) inside the steps, tm after.
    for (let k = 0; k < m; k++) {
      this.weight = k === 0 ? 0.5 : 1;
      this.solver.advance(1);
    }
    this.solver.computeVelocity();
    this.sample(this.solver.velocity, 0.5);
    for (let b = 0; b < B; b++) this.check(b, 'step');

    const inv = 1 / m;
    const n = c.forcingWavenumber;
    const lam = laminarAmplitude(c.reynolds, n) / 2; // I_lam = D_lam
    const floor = c.reward.meanFlowFloor * laminarAmplitude(c.reynolds, n);
    const cfScale = 2 / (n * this.cf0); // Cf_t / Cf0 = cfScale / U^2
    const invP0 = 1 / this.i0;
    const beta = c.reward.beta;
    const pen = c.reward.actuationPenalty;
    const { drag, actuationPower: power, reward } = this.buf;
    this.buf.beginDecision();
    for (let b = 0; b < B; b++) {
      if (this.divergedNow[b]) {
        this.buf.markDiverged(b, c.reward.onDivergence);
        this.inputRatio[b] = NaN;
        this.dissipationRatio[b] = NaN;
        this.domainDrag[b] = NaN;
        for (let i = b * T; i < (b + 1) * T; i++) {
          this.forcingWork[i] = NaN;
          this.tileMeanFlow[i] = NaN;
        }
        continue;
      }
      let sDomain = 0;
      let dDomain = 0;
      for (let t = 0; t < T; t++) {
        const i = b * T + t;
        const U = this.uAcc[i]! * inv;
        this.tileMeanFlow[i] = U;
        const Ue = U > floor ? U : floor;
        drag[i] = cfScale / (Ue * Ue);
        power[i] = this.costAcc[i]! * inv * invP0;
        this.forcingWork[i] = this.workAcc[i]! * inv * invP0;
        dDomain += drag[i]!;
        sDomain += 1 - drag[i]! - pen * power[i]!;
      }
      sDomain /= T;
      this.domainDrag[b] = dDomain / T;
      this.inputRatio[b] = (this.inAcc[b]! * inv) / lam;
      this.dissipationRatio[b] = (this.disAcc[b]! * inv) / lam;
      for (let t = 0; t < T; t++) {
        const i = b * T + t;
        reward[i] = (1 - beta) * (1 - drag[i]! - pen * power[i]!) + beta * sDomain;
      }
      this.buf.countDecision(b, c.episodeLength);
    }
    this.divergedNow.fill(0);
    this.writeObs();
    return this.out;
  }

  oppositionSignal(): Float64Array {
    const { B, T } = this;
    const V = this.solver.velocity;
    const C = 2 * B;
    for (let b = 0; b < B; b++) {
      for (let t = 0; t < T; t++) this.opp[b * T + t] = V[this.oppPoint[t]! * C + B + b]!;
    }
    return this.opp;
  }

  /**
   * Fields of one copy for plots, a new array [3][ny][nx]: vorticity, u, v at grid point
   * (i, j) = (x_i, y_j) at field*nx*ny + j*nx + i.
   */
  snapshot(copy: number): Float64Array {
    checkCopy('KolmogorovEnv.snapshot', copy, this.B);
    const { nx, ny, B } = this;
    const out = new Float64Array(3 * nx * ny);
    out.set(this.solver.vorticity(copy), 0);
    const V = this.solver.velocity;
    for (let p = 0; p < nx * ny; p++) {
      out[nx * ny + p] = V[p * 2 * B + copy]!;
      out[2 * nx * ny + p] = V[p * 2 * B + B + copy]!;
    }
    return out;
  }

  /**
   * The dynamic state at a decision boundary (copies): spectral vorticity omRe, omIm
   * [modes][B] (fft2.ts layout), jet amplitudes amp [B, T], decisions [B] and the pending
   * divergence flags [B]. The jet forcing, velocity and observations are functions of these
   * and are recomputed by `setState`, bit for bit.
   */
  getState(): EnvState {
    return {
      meta: this.stateMeta(),
      arrays: {
        omRe: this.solver.omRe.slice(),
        omIm: this.solver.omIm.slice(),
        amp: this.amp.slice(),
        decisions: this.buf.decisions.slice(),
        divergedNow: this.divergedNow.slice(),
      },
    };
  }

  /** Restore a state from `getState` of a KolmogorovEnv with the same config and copies (else throws naming the field). */
  setState(state: EnvState): void {
    const who = 'KolmogorovEnv.setState';
    checkStateMeta(who, state, this.stateMeta());
    restoreStateArray(who, state, 'omRe', this.solver.omRe);
    restoreStateArray(who, state, 'omIm', this.solver.omIm);
    restoreStateArray(who, state, 'amp', this.amp);
    restoreStateArray(who, state, 'decisions', this.buf.decisions);
    restoreStateArray(who, state, 'divergedNow', this.divergedNow);
    this.applyForce();
    this.solver.computeVelocity();
    this.writeObs();
  }

  private stateMeta(): Record<string, string | number | boolean | null> {
    const c = this.config;
    return {
      format: KOLMOGOROV_STATE_FORMAT,
      kind: 'kolmogorov',
      copies: this.B,
      nx: this.nx,
      ny: this.ny,
      reynolds: c.reynolds,
      forcingWavenumber: c.forcingWavenumber,
      aspect: c.aspect,
      tilesX: this.Tx,
      tilesY: this.Ty,
    };
  }

  /** Clipped amplitudes applied in the last step, [B, T] (= [B, T, actDim]). */
  appliedActions(): Float64Array {
    return this.amp;
  }

  // --- internals ------------------------------------------------------------------------

  /** Build f_y = sum_t a_t g_t - mean for every copy and hand it to the solver. */
  private applyForce(): void {
    const { B, T, nx, ny } = this;
    const f = this.force;
    f.fill(0);
    const g = this.stencil;
    const S = g.length;
    const idx = this.jetPoint;
    for (let b = 0; b < B; b++) {
      let total = 0;
      for (let t = 0; t < T; t++) {
        const a = this.amp[b * T + t]!;
        if (a === 0) continue;
        total += a;
        for (let s = 0, q = t * S; s < S; s++, q++) f[idx[q]! * B + b]! += a * g[s]!;
      }
      const mean = (total * this.stencilSum) / (nx * ny);
      if (mean !== 0) for (let p = b; p < f.length; p += B) f[p]! -= mean;
    }
    this.solver.setJetForce(f);
  }

  /**
   * One sample of the interval means, from the velocity [ny][nx][2B] of every copy at one
   * time: tile mean flow U_t, jet power p_t, domain I and D; added with weight w.
   */
  private sample(vel: Float64Array, w: number): void {
    const { B, T, Tx, Ty, nx, cx, cy } = this;
    const C = 2 * B;
    const rowSum = this.rowSum;
    // Tile mean flow: U_t = (2 / (cx cy)) sum_tile u sin(n y).
    const scale = 2 / (cx * cy);
    for (let ty = 0; ty < Ty; ty++) {
      rowSum.fill(0);
      for (let j = ty * cy; j < (ty + 1) * cy; j++) {
        const sj = this.sinRow[j]!;
        for (let tx = 0; tx < Tx; tx++) {
          const p0 = (j * nx + tx * cx) * C;
          for (let b = 0; b < B; b++) {
            let acc = 0;
            for (let i = 0, p = p0 + b; i < cx; i++, p += C) acc += vel[p]!;
            rowSum[b * Tx + tx]! += sj * acc;
          }
        }
      }
      for (let b = 0; b < B; b++) {
        for (let tx = 0; tx < Tx; tx++) this.uLast[b * T + ty * Tx + tx] = scale * rowSum[b * Tx + tx]!;
      }
    }
    // Jet power: p_t = a_t sum_stencil v g dA.
    const dA = (this.solver.lx * this.solver.ly) / (nx * this.ny);
    const tileArea = (this.solver.lx * this.solver.ly) / T;
    const g = this.stencil;
    const S = g.length;
    const idx = this.jetPoint;
    for (let t = 0; t < T; t++) {
      for (let b = 0; b < B; b++) {
        let acc = 0;
        for (let s = 0, q = t * S; s < S; s++, q++) acc += g[s]! * vel[idx[q]! * C + B + b]!;
        this.projLast[b * T + t] = acc;
      }
    }
    if (w === 0) return;
    this.solver.dissipationAll(this.dissipationNow);
    for (let b = 0; b < B; b++) {
      let uDom = 0;
      for (let t = 0; t < T; t++) {
        const i = b * T + t;
        const pw = this.amp[i]! * this.projLast[i]! * dA;
        this.uAcc[i]! += w * this.uLast[i]!;
        this.workAcc[i]! += (w * pw) / tileArea;
        if (pw > 0) this.costAcc[i]! += (w * pw) / tileArea;
        uDom += this.uLast[i]!;
      }
      this.inAcc[b]! += w * (uDom / T / 2);
      this.disAcc[b]! += w * this.dissipationNow[b]!;
    }
  }

  /** Flag a copy whose state is not finite or whose energy exceeds the bound; zero its state. */
  private check(b: number, phase: string): void {
    if (this.divergedNow[b]) return;
    const finite = this.solver.isFinite(b);
    const e = finite ? this.solver.budget(b).energy : NaN;
    const bound = this.config.blowUpEnergy;
    if (finite && e <= bound) return;
    this.divergedNow[b] = 1;
    this.solver.clearCopy(b);
    this.onEvent?.({
      kind: 'diverged',
      copy: b,
      message: `kolmogorov copy ${b} diverged during ${phase} after ${this.buf.decisions[b]} decisions: ${finite ? `energy ${e.toPrecision(4)} > ${bound}` : 'non-finite vorticity'}`,
    });
  }

  /** Observations of every tile from the current velocity. */
  private writeObs(): void {
    const { B, T } = this;
    const S = this.sensorsPerObs;
    const obsDim = this.spec.obsDim;
    const V = this.solver.velocity;
    const C = 2 * B;
    for (let b = 0; b < B; b++) {
      const dead = this.divergedNow[b] === 1 || this.buf.diverged[b] === 1;
      const obs = this.buf.obs;
      for (let t = 0; t < T; t++) {
        const o = (b * T + t) * obsDim;
        for (let s = 0; s < S; s++) {
          const p = this.sensorPoint[t * S + s]! * C;
          obs[o + s] = dead ? 0 : V[p + b]!;
          obs[o + S + s] = dead ? 0 : V[p + B + b]!;
        }
      }
    }
  }
}

// ---------------------------------------------------------------------------------------
// Reference values (Cf0, I0) and the registry entry
// ---------------------------------------------------------------------------------------

/** Everything the uncontrolled tile-Cf statistics depend on: physics, tiling, floor, interval and protocol. */
export function kolmogorovReferenceKey(c: KolmogorovConfig): Record<string, unknown> {
  return {
    kind: 'kolmogorov',
    reynolds: c.reynolds,
    forcingWavenumber: c.forcingWavenumber,
    aspect: c.aspect,
    points: c.points,
    dt: c.dt,
    linearDrag: c.linearDrag,
    tiles: c.tiles,
    controlSteps: c.controlSteps,
    meanFlowFloor: c.reward.meanFlowFloor,
    spinUpTime: c.spinUpTime,
    initialNoise: c.initialNoise,
    reference: c.reference,
  };
}

/**
 * Measure Cf0 (long-time uncontrolled mean of the tile Cf = 2/(n max(U_t, floor U_lam)^2),
 * over tiles and control intervals) and I0 (uncontrolled mean power input per unit area)
 * with the env's own estimator: `reference.copies` seeded copies, uncontrolled, after the
 * spin-up, for `reference.time` each, cut into blocks of `reference.blockTime` (batch means,
 * reference.ts). Throws if a copy diverges.
 */
export function measureKolmogorovReferences(c: KolmogorovConfig): { cf0: ReferenceValue; i0: ReferenceValue } {
  const r = c.reference;
  const env = new KolmogorovEnv({ ...c, episodeLength: Number.MAX_SAFE_INTEGER }, { copies: r.copies, cf0: 1, i0: 1 });
  const seeds = Rng.derive(r.seed, 'kolmogorov-reference');
  env.reset(Array.from({ length: r.copies }, () => seeds.uint32()));
  const interval = c.controlSteps * c.dt;
  const perBlock = Math.max(1, Math.round(r.blockTime / interval));
  const blocks = Math.max(1, Math.floor(r.time / (perBlock * interval)));
  const T = env.spec.tiles;
  const iLam = laminarAmplitude(c.reynolds, c.forcingWavenumber) / 2;
  const zero = new Float32Array(r.copies * T);
  const cf: number[] = [];
  const inp: number[] = [];
  const accCf = new Float64Array(r.copies);
  const accI = new Float64Array(r.copies);
  for (let k = 0; k < blocks; k++) {
    accCf.fill(0);
    accI.fill(0);
    for (let i = 0; i < perBlock; i++) {
      const out = env.step(zero);
      for (let b = 0; b < r.copies; b++) {
        if (out.diverged[b]) throw new Error(`measureKolmogorovReferences: uncontrolled copy ${b} diverged (dt = ${c.dt} too large for points = ${c.points}?)`);
        accCf[b]! += out.domainDrag[b]!; // with cf0 = 1 this is the tile mean of Cf_t
        accI[b]! += out.inputRatio[b]! * iLam;
      }
    }
    for (let b = 0; b < r.copies; b++) {
      cf.push(accCf[b]! / perBlock);
      inp.push(accI[b]! / perBlock);
    }
  }
  const key = kolmogorovReferenceKey(c);
  const bt = perBlock * interval;
  return {
    cf0: referenceFromBlocks('kolmogorov Cf0 = mean tile 2/(n max(U_t, floor U_lam)^2)', key, cf, bt),
    i0: referenceFromBlocks('kolmogorov I0 = <u sin(n y)>', key, inp, bt),
  };
}

/** One measurement serves both cached values within a process. */
const measured = new Map<string, { cf0: ReferenceValue; i0: ReferenceValue }>();
function measureOnce(c: KolmogorovConfig): { cf0: ReferenceValue; i0: ReferenceValue } {
  const k = JSON.stringify(kolmogorovReferenceKey(c));
  let v = measured.get(k);
  if (!v) {
    v = measureKolmogorovReferences(c);
    measured.set(k, v);
  }
  return v;
}

/** The cached I0 (measured together with Cf0 when absent). */
export function kolmogorovI0(c: KolmogorovConfig, options: { cacheDir?: string; onEvent?: (e: EnvEvent) => void }): ReferenceValue {
  return cachedReference('kolmogorov-i0', kolmogorovReferenceKey(c), () => measureOnce(c).i0, options);
}

/** Registry entry: `kind: kolmogorov`. The reference value is Cf0; I0 is cached beside it. */
export const kolmogorovEnvKind: EnvKind<KolmogorovConfig> = {
  kind: 'kolmogorov',
  summary: 'Kolmogorov flow u_t + u.grad u = -grad p + lap u/Re + sin(n y) e_x on a 2-D periodic box, cut into Tx x Ty tiles',
  schema: kolmogorovConfigSchema,
  reference(config, options) {
    return cachedReference('kolmogorov-cf0', kolmogorovReferenceKey(config), () => measureOnce(config).cf0, options);
  },
  create(config, options) {
    const cf0 = options.reference ?? kolmogorovEnvKind.reference(config, options).mean;
    const i0 = kolmogorovI0(config, options).mean;
    return new KolmogorovEnv(config, { copies: options.copies, cf0, i0, onEvent: options.onEvent });
  },
};

// ---------------------------------------------------------------------------------------
// Fluctuation statistics for reports
// ---------------------------------------------------------------------------------------

/** Joint statistics of velocity fluctuations (u', v') at sensor points. */
export interface FluctuationStats {
  readonly samples: number;
  /** Mean of u and v per class (the Reynolds mean that is subtracted), [classes]. */
  readonly meanU: Float64Array;
  readonly meanV: Float64Array;
  /** Standard deviations of u' and v' over all samples, and their correlation coefficient. */
  readonly stdU: number;
  readonly stdV: number;
  readonly correlation: number;
  /**
   * Fractions of samples in the quadrants Q1 (u' > 0, v' > 0), Q2 (u' < 0, v' > 0),
   * Q3 (u' < 0, v' < 0), Q4 (u' > 0, v' < 0) (quadrant analysis: Wallace, Eckelman &
   * Brodkey 1972, J. Fluid Mech. 54; Willmarth & Lu 1972, J. Fluid Mech. 55). A zero
   * fluctuation counts as positive.
   */
  readonly fractions: readonly [number, number, number, number];
  /** Each quadrant's contribution to <u'v'> (the four sum to <u'v'>). */
  readonly stress: readonly [number, number, number, number];
  /** Quadrant fractions within each class, [classes][4] (Q1..Q4), and <u'v'> per class, [classes]. */
  readonly classFractions: Float64Array;
  readonly classStress: Float64Array;
  /** Joint histogram of (u', v'): `bins` x `bins` cells on [-range, range]^2, density per unit area, v rows, u fastest. */
  readonly histogram: { readonly bins: number; readonly range: number; readonly density: Float64Array };
}

/**
 * Fluctuation statistics of velocity samples (u[k], v[k]) of class cls[k] in [0, classes):
 * samples of one class share a Reynolds mean (for Kolmogorov sensors: the sensor's y
 * position in the tile, whose mean flow differs; x, tiles, copies and time are averaged).
 * u' = u - mean_class(u), v' likewise; then quadrant fractions, quadrant stresses and a
 * joint histogram. In Kolmogorov flow the mean shear changes sign across a wavelength, so
 * the ejection/sweep reading of Q2/Q4 holds per class, with the sign of dU/dy there.
 */
export function fluctuationStats(
  u: ArrayLike<number>,
  v: ArrayLike<number>,
  cls: ArrayLike<number>,
  classes: number,
  options: { bins?: number; range?: number } = {},
): FluctuationStats {
  const N = u.length;
  if (v.length !== N || cls.length !== N) throw new Error(`fluctuationStats: u, v and cls must have one length, got ${N}, ${v.length}, ${cls.length}`);
  if (N === 0) throw new Error('fluctuationStats: no samples');
  if (!Number.isInteger(classes) || classes < 1) throw new Error(`fluctuationStats: classes must be an integer >= 1, got ${classes}`);
  const bins = options.bins ?? 41;
  if (!Number.isInteger(bins) || bins < 1) throw new Error(`fluctuationStats: bins must be an integer >= 1, got ${bins}`);
  const meanU = new Float64Array(classes);
  const meanV = new Float64Array(classes);
  const count = new Float64Array(classes);
  for (let k = 0; k < N; k++) {
    const c = cls[k]!;
    if (!Number.isInteger(c) || c < 0 || c >= classes) throw new Error(`fluctuationStats: cls[${k}] must be an integer in [0, ${classes}), got ${c}`);
    meanU[c]! += u[k]!;
    meanV[c]! += v[k]!;
    count[c]! += 1;
  }
  for (let c = 0; c < classes; c++) {
    if (count[c]! > 0) {
      meanU[c]! /= count[c]!;
      meanV[c]! /= count[c]!;
    }
  }
  let suu = 0;
  let svv = 0;
  let suv = 0;
  const q = [0, 0, 0, 0];
  const st = [0, 0, 0, 0];
  const classFractions = new Float64Array(classes * 4);
  const classStress = new Float64Array(classes);
  for (let k = 0; k < N; k++) {
    const c = cls[k]!;
    const a = u[k]! - meanU[c]!;
    const b = v[k]! - meanV[c]!;
    suu += a * a;
    svv += b * b;
    suv += a * b;
    const quad = a >= 0 ? (b >= 0 ? 0 : 3) : b >= 0 ? 1 : 2;
    q[quad]! += 1;
    st[quad]! += a * b;
    classFractions[c * 4 + quad]! += 1;
    classStress[c]! += a * b;
  }
  for (let c = 0; c < classes; c++) {
    if (count[c]! === 0) continue;
    for (let j = 0; j < 4; j++) classFractions[c * 4 + j]! /= count[c]!;
    classStress[c]! /= count[c]!;
  }
  const stdU = Math.sqrt(suu / N);
  const stdV = Math.sqrt(svv / N);
  const range = options.range ?? 4 * Math.max(stdU, stdV, Number.MIN_VALUE);
  const density = new Float64Array(bins * bins);
  const cell = (2 * range) / bins;
  for (let k = 0; k < N; k++) {
    const c = cls[k]!;
    const i = Math.floor((u[k]! - meanU[c]! + range) / cell);
    const j = Math.floor((v[k]! - meanV[c]! + range) / cell);
    if (i >= 0 && i < bins && j >= 0 && j < bins) density[j * bins + i]! += 1 / (N * cell * cell);
  }
  return {
    samples: N,
    meanU,
    meanV,
    stdU,
    stdV,
    correlation: suv / N / (stdU * stdV),
    fractions: [q[0]! / N, q[1]! / N, q[2]! / N, q[3]! / N],
    stress: [st[0]! / N, st[1]! / N, st[2]! / N, st[3]! / N],
    classFractions,
    classStress,
    histogram: { bins, range, density },
  };
}

/**
 * Velocity at every tile's own sensors (no halo) for every copy, from the env's current
 * state: u, v and the class (sensor row in the tile, 0..Sy-1) of each sample, in the
 * order [copy][tile][sensor row][sensor column]. New arrays; feed to `fluctuationStats`.
 */
export function sensorSamples(env: KolmogorovEnv): { u: Float64Array; v: Float64Array; cls: Int32Array; classes: number } {
  const [Sx, Sy] = env.config.sensorsPerTile;
  const [Hx, Hy] = env.config.haloTiles;
  const { copies: B, tiles: T, obsDim } = env.spec;
  const rowsX = (2 * Hx + 1) * Sx;
  const S = obsDim / 2;
  const obs = env.observe();
  const n = B * T * Sx * Sy;
  const u = new Float64Array(n);
  const v = new Float64Array(n);
  const cls = new Int32Array(n);
  let k = 0;
  for (let bt = 0; bt < B * T; bt++) {
    for (let r = 0; r < Sy; r++) {
      for (let q = 0; q < Sx; q++, k++) {
        const s = (Hy * Sy + r) * rowsX + Hx * Sx + q;
        u[k] = obs[bt * obsDim + s]!;
        v[k] = obs[bt * obsDim + S + s]!;
        cls[k] = r;
      }
    }
  }
  return { u, v, cls, classes: Sy };
}
