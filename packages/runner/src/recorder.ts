/**
 * A recording wrapper around a TiledEnv for evaluation: it forwards every call and keeps, for
 * each evaluated episode, the time series a report plots (docs/formats.md):
 *
 *   drag     f32 [E, D]     domain-mean drag analogue of each decision (NaN once diverged)
 *   power    f32 [E, D]     domain-mean actuation power of each decision
 *   actions  f32 [E, D, A]  applied (clipped) actuator amplitudes, A = tiles * actDim
 *   signal   f32 [E, D, A]  the opposition signal at each actuator when the action was chosen
 *                           (the sensed fluctuation the actuator answers: joint statistics)
 *   field    f32 [F, S]     snapshots of the physical field (env.snapshot, S values each) of the
 *                           first `fieldEpisodes` episodes, every `fieldEvery` decisions from
 *                           the start (decision 0 = the initial state); fieldIndex i32 [F, 2]
 *                           holds (episode, decision) of each snapshot
 *   histogram u32 [bins]    counts of applied amplitudes over [-bound, bound] for the decisions
 *                           after the discarded transient
 * E = evaluated episodes (seeds), D = decisions per episode. Episodes run B at a time
 * (envs baselines.ts evaluatePolicy): copies of a last, partial group repeat a seed and are
 * not recorded.
 */
import type { EnvState, StepOut, TiledEnv } from '@tilewise/envs';

export interface RecordOptions {
  readonly episodes: number;
  readonly decisions: number;
  readonly discardDecisions: number;
  readonly fieldEvery: number;
  readonly fieldEpisodes: number;
  readonly histogramBins: number;
}

export interface Recording {
  readonly drag: Float32Array;
  readonly power: Float32Array;
  readonly actions: Float32Array;
  readonly signal: Float32Array;
  readonly field: Float32Array;
  readonly fieldIndex: Int32Array;
  readonly fieldSize: number;
  readonly histogram: Uint32Array;
}

export class RecordingEnv implements TiledEnv {
  readonly spec: TiledEnv['spec'];
  private readonly inner: TiledEnv;
  private readonly o: RecordOptions;
  private readonly A: number;
  private group = -1;
  private decision = 0;
  private readonly drag: Float32Array;
  private readonly power: Float32Array;
  private readonly actions: Float32Array;
  private readonly signal: Float32Array;
  private readonly fields: Float32Array[] = [];
  private readonly fieldIdx: number[] = [];
  private readonly histogram: Uint32Array;

  constructor(inner: TiledEnv, o: RecordOptions) {
    this.inner = inner;
    this.spec = inner.spec;
    this.o = o;
    this.A = inner.spec.tiles * inner.spec.actDim;
    const ed = o.episodes * o.decisions;
    this.drag = new Float32Array(ed).fill(NaN);
    this.power = new Float32Array(ed).fill(NaN);
    this.actions = new Float32Array(ed * this.A);
    this.signal = new Float32Array(ed * this.A);
    this.histogram = new Uint32Array(o.histogramBins);
  }

  /** Episode index of copy b in the current group, or -1 if it is not recorded. */
  private episode(b: number): number {
    const e = this.group * this.spec.copies + b;
    return e < this.o.episodes ? e : -1;
  }

  private snapshotAll(): void {
    if (this.o.fieldEvery <= 0 || this.decision % this.o.fieldEvery !== 0) return;
    for (let b = 0; b < this.spec.copies; b++) {
      const e = this.episode(b);
      if (e < 0 || e >= this.o.fieldEpisodes) continue;
      this.fields.push(Float32Array.from(this.inner.snapshot(b)));
      this.fieldIdx.push(e, this.decision);
    }
  }

  reset(seeds: ArrayLike<number>): Float32Array {
    const obs = this.inner.reset(seeds);
    this.group++;
    this.decision = 0;
    this.snapshotAll();
    return obs;
  }

  resetCopy(copy: number, seed: number): void {
    this.inner.resetCopy(copy, seed);
  }

  observe(): Float32Array {
    return this.inner.observe();
  }

  step(actions: Float32Array): StepOut {
    const { copies: B, tiles: T, actionBound: bound } = this.spec;
    const A = this.A;
    const D = this.o.decisions;
    const k = this.decision;
    const sig = k < D ? this.inner.oppositionSignal() : null;
    const out = this.inner.step(actions);
    if (sig) {
      const bins = this.o.histogramBins;
      for (let b = 0; b < B; b++) {
        const e = this.episode(b);
        if (e < 0) continue;
        const row = (e * D + k) * A;
        for (let i = 0; i < A; i++) {
          const a = actions[b * A + i]!;
          const c = a > bound ? bound : a < -bound ? -bound : a;
          this.actions[row + i] = c;
          this.signal[row + i] = sig[b * A + i]!;
          if (k >= this.o.discardDecisions) {
            const bin = Math.min(bins - 1, Math.floor(((c + bound) / (2 * bound)) * bins));
            this.histogram[bin]! += 1;
          }
        }
        let d = 0;
        let p = 0;
        for (let t = 0; t < T; t++) {
          d += out.drag[b * T + t]!;
          p += out.actuationPower[b * T + t]!;
        }
        this.drag[e * D + k] = d / T;
        this.power[e * D + k] = p / T;
      }
    }
    this.decision++;
    this.snapshotAll();
    return out;
  }

  oppositionSignal(): Float64Array {
    return this.inner.oppositionSignal();
  }

  snapshot(copy: number): Float64Array {
    return this.inner.snapshot(copy);
  }

  getState(): EnvState {
    if (!this.inner.getState) throw new Error('RecordingEnv: the wrapped env has no getState');
    return this.inner.getState();
  }

  setState(s: EnvState): void {
    if (!this.inner.setState) throw new Error('RecordingEnv: the wrapped env has no setState');
    this.inner.setState(s);
  }

  recording(): Recording {
    const size = this.fields[0]?.length ?? 0;
    const field = new Float32Array(this.fields.length * size);
    this.fields.forEach((f, i) => field.set(f, i * size));
    return {
      drag: this.drag,
      power: this.power,
      actions: this.actions,
      signal: this.signal,
      field,
      fieldIndex: Int32Array.from(this.fieldIdx),
      fieldSize: size,
      histogram: this.histogram,
    };
  }
}
