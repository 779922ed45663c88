/**
 * Replay buffer: a preallocated ring of typed arrays shared by every tile of every copy
 * (one transition per tile per step, as cooperative agents sharing one policy learn in
 * Gupta, Egorov & Kochenderfer 2017, "Cooperative multi-agent control using deep
 * reinforcement learning", AAMAS workshops).
 *
 * Layout (row i is one tile transition):
 *   obs      Float32Array [capacity, obsDim]   raw (unnormalised) observation
 *   act      Float32Array [capacity, actDim]   action divided by the action bound, in [-1, 1]
 *   reward   Float32Array [capacity]           raw reward
 *   nextObs  Float32Array [capacity, obsDim]   raw observation after the step
 *   notDone  Float32Array [capacity]           0 after a true terminal state, 1 otherwise
 *                                              (a time-limit truncation stores 1: the target
 *                                              bootstraps through it)
 * `pos` is the next row written; `full` says every row holds data; `size` = full ? capacity : pos.
 * Inserts copy; the buffer never keeps a reference to a caller's array.
 * Sampling is uniform with replacement, through the caller's seeded `Rng`.
 */
import type { Rng } from '@tilewise/envs';

/** A sampled minibatch, preallocated by `createBatch` and filled in place by `sample`. */
export interface Batch {
  /** Rows filled. */
  size: number;
  readonly obs: Float32Array;
  readonly act: Float32Array;
  readonly reward: Float32Array;
  readonly nextObs: Float32Array;
  readonly notDone: Float32Array;
}

export function createBatch(size: number, obsDim: number, actDim: number): Batch {
  return {
    size,
    obs: new Float32Array(size * obsDim),
    act: new Float32Array(size * actDim),
    reward: new Float32Array(size),
    nextObs: new Float32Array(size * obsDim),
    notDone: new Float32Array(size),
  };
}

/** Saved form of a replay buffer: rows [0, size) of each array plus the ring position. */
export interface ReplayState {
  readonly capacity: number;
  readonly obsDim: number;
  readonly actDim: number;
  readonly pos: number;
  readonly full: boolean;
  readonly obs: Float32Array;
  readonly act: Float32Array;
  readonly reward: Float32Array;
  readonly nextObs: Float32Array;
  readonly notDone: Float32Array;
}

export class ReplayBuffer {
  readonly obs: Float32Array;
  readonly act: Float32Array;
  readonly reward: Float32Array;
  readonly nextObs: Float32Array;
  readonly notDone: Float32Array;
  pos = 0;
  full = false;

  constructor(
    readonly capacity: number,
    readonly obsDim: number,
    readonly actDim: number,
  ) {
    for (const [k, v] of [['capacity', capacity], ['obsDim', obsDim], ['actDim', actDim]] as const) {
      if (!Number.isInteger(v) || v < 1) throw new Error(`ReplayBuffer: ${k} must be a positive integer, got ${v}`);
    }
    const widest = capacity * Math.max(obsDim, actDim);
    if (widest > 2 ** 31 - 1) {
      throw new Error(`ReplayBuffer: capacity ${capacity} x obsDim ${obsDim} exceeds one typed array (2^31 - 1 elements); lower replayCapacity`);
    }
    this.obs = new Float32Array(capacity * obsDim);
    this.act = new Float32Array(capacity * actDim);
    this.reward = new Float32Array(capacity);
    this.nextObs = new Float32Array(capacity * obsDim);
    this.notDone = new Float32Array(capacity);
  }

  get size(): number {
    return this.full ? this.capacity : this.pos;
  }

  /**
   * Append `count` transitions, row r taken from row r of each argument. `act` must already be
   * scaled to [-1, 1]; `terminal[r]` nonzero marks a true terminal state (no bootstrap).
   */
  add(
    count: number,
    obs: Float32Array,
    act: Float32Array,
    reward: ArrayLike<number>,
    nextObs: Float32Array,
    terminal: ArrayLike<number>,
  ): void {
    const { obsDim: od, actDim: ad } = this;
    for (let r = 0; r < count; r++) {
      const i = this.pos;
      this.obs.set(obs.subarray(r * od, r * od + od), i * od);
      this.nextObs.set(nextObs.subarray(r * od, r * od + od), i * od);
      this.act.set(act.subarray(r * ad, r * ad + ad), i * ad);
      this.reward[i] = reward[r]!;
      this.notDone[i] = terminal[r] ? 0 : 1;
      this.pos = i + 1;
      if (this.pos === this.capacity) {
        this.pos = 0;
        this.full = true;
      }
    }
  }

  /** Fill `out` with `out.size` rows drawn uniformly (with replacement) from the stored ones. */
  sample(rng: Rng, out: Batch): void {
    const n = this.size;
    if (n === 0) throw new Error('ReplayBuffer.sample: the buffer is empty');
    const { obsDim: od, actDim: ad } = this;
    for (let r = 0; r < out.size; r++) {
      const i = rng.int(n);
      out.obs.set(this.obs.subarray(i * od, i * od + od), r * od);
      out.nextObs.set(this.nextObs.subarray(i * od, i * od + od), r * od);
      out.act.set(this.act.subarray(i * ad, i * ad + ad), r * ad);
      out.reward[r] = this.reward[i]!;
      out.notDone[r] = this.notDone[i]!;
    }
  }

  getState(): ReplayState {
    const n = this.size;
    return {
      capacity: this.capacity,
      obsDim: this.obsDim,
      actDim: this.actDim,
      pos: this.pos,
      full: this.full,
      obs: this.obs.slice(0, n * this.obsDim),
      act: this.act.slice(0, n * this.actDim),
      reward: this.reward.slice(0, n),
      nextObs: this.nextObs.slice(0, n * this.obsDim),
      notDone: this.notDone.slice(0, n),
    };
  }

  setState(s: ReplayState): void {
    for (const k of ['capacity', 'obsDim', 'actDim'] as const) {
      if (s[k] !== this[k]) throw new Error(`ReplayBuffer.setState: saved ${k} ${s[k]} differs from this buffer's ${this[k]}`);
    }
    const n = s.full ? s.capacity : s.pos;
    if (!Number.isInteger(s.pos) || s.pos < 0 || s.pos >= s.capacity) {
      throw new Error(`ReplayBuffer.setState: pos must be an integer in [0, ${s.capacity}), got ${s.pos}`);
    }
    const want: Array<[string, Float32Array, number]> = [
      ['obs', s.obs, n * this.obsDim],
      ['act', s.act, n * this.actDim],
      ['reward', s.reward, n],
      ['nextObs', s.nextObs, n * this.obsDim],
      ['notDone', s.notDone, n],
    ];
    for (const [k, arr, len] of want) {
      if (arr.length !== len) throw new Error(`ReplayBuffer.setState: ${k} has length ${arr.length}, expected ${len} for ${n} rows`);
    }
    this.obs.fill(0).set(s.obs);
    this.act.fill(0).set(s.act);
    this.reward.fill(0).set(s.reward);
    this.nextObs.fill(0).set(s.nextObs);
    this.notDone.fill(0).set(s.notDone);
    this.pos = s.pos;
    this.full = s.full;
  }
}
