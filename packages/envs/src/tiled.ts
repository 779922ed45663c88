/**
 * Bookkeeping every tiled surrogate shares, so that a surrogate file holds its physics and
 * little else: the step-output buffers of the contract (allocated once, owned by the env),
 * action clipping with an error that names the offending entry, seed checks, and the
 * end-of-decision flags (time limit, divergence and the reward of a diverged copy).
 *
 * Conventions (contract.ts): per-tile arrays are [B, T] with the tile index fastest; a
 * copy that diverged gets `onDivergence` on every tile, NaN drag and actuation power, and
 * done = 1 with truncated = 0; a copy that reaches the time limit gets done = truncated = 1.
 */
import { z } from 'zod';
import type { EnvState, StepOut } from './contract';

export class TiledStepBuffers {
  readonly obs: Float32Array;
  readonly reward: Float32Array;
  readonly drag: Float64Array;
  readonly actuationPower: Float64Array;
  readonly done: Uint8Array;
  readonly truncated: Uint8Array;
  readonly diverged: Uint8Array;
  /** Decisions taken in the current episode of each copy, [B]. */
  readonly decisions: Int32Array;
  /** The contract view of the buffers above (what `step` returns). */
  readonly out: StepOut;
  private readonly T: number;

  constructor(copies: number, tiles: number, obsDim: number) {
    const B = copies;
    this.T = tiles;
    this.obs = new Float32Array(B * tiles * obsDim);
    this.reward = new Float32Array(B * tiles);
    this.drag = new Float64Array(B * tiles);
    this.actuationPower = new Float64Array(B * tiles);
    this.done = new Uint8Array(B);
    this.truncated = new Uint8Array(B);
    this.diverged = new Uint8Array(B);
    this.decisions = new Int32Array(B);
    this.out = {
      obs: this.obs,
      reward: this.reward,
      drag: this.drag,
      actuationPower: this.actuationPower,
      done: this.done,
      truncated: this.truncated,
      diverged: this.diverged,
    };
  }

  /** Clear the per-copy flags before a decision's results are written. */
  beginDecision(): void {
    this.done.fill(0);
    this.truncated.fill(0);
    this.diverged.fill(0);
  }

  /** Copy b diverged during this decision: flags, NaN drag and power, `onDivergence` reward. */
  markDiverged(b: number, onDivergence: number): void {
    this.decisions[b]! += 1;
    this.diverged[b] = 1;
    this.done[b] = 1;
    for (let i = b * this.T; i < (b + 1) * this.T; i++) {
      this.drag[i] = NaN;
      this.actuationPower[i] = NaN;
      this.reward[i] = onDivergence;
    }
  }

  /** Copy b completed a decision normally: count it and flag the time limit. */
  countDecision(b: number, episodeLength: number): void {
    this.decisions[b]! += 1;
    if (this.decisions[b]! >= episodeLength) {
      this.done[b] = 1;
      this.truncated[b] = 1;
    }
  }
}

/**
 * Clip `actions` ([B, T, actDim], length `amp.length`) to +-bound into `amp`; a NaN throws
 * naming its copy and its index within the copy (called `component`, e.g. "actuator").
 */
export function clipActions(who: string, actions: Float32Array, amp: Float64Array, bound: number, perCopy: number, component = 'component'): void {
  if (actions.length !== amp.length) {
    throw new Error(`${who}.step: actions must have shape [B, T, actDim] (${amp.length} values), got ${actions.length}`);
  }
  for (let i = 0; i < amp.length; i++) {
    const a = actions[i]!;
    if (Number.isNaN(a)) throw new Error(`${who}.step: actions[${i}] is NaN (copy ${Math.floor(i / perCopy)}, ${component} ${i % perCopy})`);
    amp[i] = a > bound ? bound : a < -bound ? -bound : a;
  }
}

/** Throw unless `seed` is a finite number. */
export function checkSeed(who: string, seed: number, what: string): void {
  if (!Number.isFinite(seed)) throw new Error(`${who}: ${what} must be a finite number, got ${seed}`);
}

/** Throw unless `copy` is an integer in [0, copies). */
export function checkCopy(who: string, copy: number, copies: number): void {
  if (!Number.isInteger(copy) || copy < 0 || copy >= copies) throw new Error(`${who}: copy must be an integer in [0, ${copies}), got ${copy}`);
}

/** a mod n in [0, n) for integer a and positive n (periodic index). */
export function mod(a: number, n: number): number {
  const r = a % n;
  return r < 0 ? r + n : r;
}

/** Throw unless every key of `expected` has the same value in the saved state's meta, naming the first that differs. */
export function checkStateMeta(who: string, state: EnvState, expected: Readonly<Record<string, string | number | boolean | null>>): void {
  const m = state?.meta;
  for (const [k, v] of Object.entries(expected)) {
    if (m?.[k] !== v) throw new Error(`${who}: saved ${k} ${JSON.stringify(m?.[k])} differs from this env's ${JSON.stringify(v)}`);
  }
}

/** Copy the saved array `name` into `dst`, which it must match in type and length (else throw naming it). */
export function restoreStateArray(who: string, state: EnvState, name: string, dst: Float64Array | Int32Array | Uint8Array): void {
  const src = state.arrays?.[name];
  if (!src || src.constructor !== dst.constructor || src.length !== dst.length) {
    throw new Error(
      `${who}: array "${name}" must be a ${dst.constructor.name} of length ${dst.length}, got ${src ? `${src.constructor.name} of length ${src.length}` : 'nothing'}`,
    );
  }
  dst.set(src as never);
}

/**
 * The `reward:` section shared by tiled surrogates: beta (domain weight), the actuation penalty
 * c in the score `score` (documented per surrogate), the divergence reward, plus `extra` fields,
 * each of which must have a default.
 */
export function rewardSchema<E extends z.ZodRawShape>(score: string, extra: E) {
  return z
    .strictObject({
      beta: z
        .number()
        .min(0)
        .max(1)
        .default(0)
        .describe('Weight of the domain-wide score in each tile reward: r = (1-beta) s_tile + beta s_domain (default 0).'),
      actuationPenalty: z.number().nonnegative().finite().default(0).describe(`Weight c of actuation power in the score ${score} (default 0).`),
      onDivergence: z.number().finite().default(-10).describe('Reward of every tile of a copy that diverged (default -10).'),
      ...extra,
    })
    .prefault({} as never) // every field has a default (callers' extra fields too), so {} parses
    .describe('Reward shaping.');
}

/** The `reference:` section: how a surrogate's reference value(s) `what` are measured (then cached). */
export function referenceSchema(what: string, defaults: { time: number; copies: number }) {
  return z
    .strictObject({
      time: z.number().positive().finite().default(defaults.time).describe(`Uncontrolled time per copy averaged to measure ${what} (default ${defaults.time}).`),
      copies: z.number().int().positive().default(defaults.copies).describe(`Independent copies averaged to measure ${what} (default ${defaults.copies}).`),
      blockTime: z
        .number()
        .positive()
        .finite()
        .default(50)
        .describe(`Length of the blocks whose means estimate the uncertainty of ${what} (default 50).`),
      seed: z.number().int().default(20240).describe(`Seed of the ${what} measurement runs (default 20240).`),
    })
    .prefault({})
    .describe(`How ${what} is measured (then cached).`);
}
