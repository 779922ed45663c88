/**
 * The environment side of training: B copies of a tiled surrogate, the seeded choice of each
 * new training episode's initial state, and per-episode statistics. It runs in the trainer's
 * thread or in a worker (worker.ts); the two give identical results, because everything it
 * does depends only on its own state and the actions it is given.
 *
 * Training seeds: drawn from Rng.derive(runSeed, "train/reset"); a draw that falls in the
 * held-out set (validation, tuning and evaluation seeds) is skipped, so no training episode
 * starts from a held-out initial state.
 *
 * Layouts (contract.ts): obs [B, T, obsDim], reward [B, T], per-copy flags [B].
 */
import { Rng, type EnvState, type RngState, type TiledEnv } from '@tilewise/envs';

/** One finished training episode. */
export interface EpisodeRecord {
  readonly copy: number;
  readonly seed: number;
  /** Sum over the episode of the tile-mean reward. */
  readonly return: number;
  /** Mean over decisions and tiles of the drag analogue (e.g. P/P0); NaN if it diverged. */
  readonly drag: number;
  /** Mean actuation power (same normalisation); NaN if it diverged. */
  readonly power: number;
  readonly decisions: number;
  readonly diverged: boolean;
}

/** What one training step returns (fresh arrays, safe to keep or transfer). */
export interface EnvStepResult {
  /** Observation after the step, [B, T, obsDim]: the final observation for copies that ended. */
  readonly nextObs: Float32Array;
  /** Observation to act on next, [B, T, obsDim]: after the reset of copies that ended. */
  readonly obs: Float32Array;
  /** [B, T]. */
  readonly reward: Float32Array;
  /** 1 for tiles of copies in a true terminal state (diverged), [B, T]; time limits bootstrap. */
  readonly terminal: Float32Array;
  /** Mean drag analogue over the copies that did not diverge, and their count. */
  readonly dragSum: number;
  readonly dragCount: number;
  readonly episodes: readonly EpisodeRecord[];
}

/** Saved form (inside checkpoints). */
export interface EnvRunnerState {
  readonly env: EnvState;
  readonly rng: RngState;
  readonly seeds: number[];
  readonly acc: { readonly ret: Float64Array; readonly drag: Float64Array; readonly power: Float64Array; readonly n: Int32Array };
}

export class EnvRunner {
  readonly env: TiledEnv;
  private rng: Rng;
  private readonly heldOut: ReadonlySet<number>;
  private readonly B: number;
  private readonly T: number;
  /** Seed of each copy's current episode. */
  private seeds: number[];
  private readonly ret: Float64Array;
  private readonly drag: Float64Array;
  private readonly power: Float64Array;
  private readonly n: Int32Array;

  constructor(env: TiledEnv, runSeed: number, heldOut: Iterable<number>) {
    this.env = env;
    this.rng = Rng.derive(runSeed, 'train/reset');
    this.heldOut = new Set(heldOut);
    this.B = env.spec.copies;
    this.T = env.spec.tiles;
    this.seeds = new Array<number>(this.B).fill(0);
    this.ret = new Float64Array(this.B);
    this.drag = new Float64Array(this.B);
    this.power = new Float64Array(this.B);
    this.n = new Int32Array(this.B);
  }

  private nextSeed(): number {
    for (;;) {
      const s = this.rng.uint32();
      if (!this.heldOut.has(s)) return s;
    }
  }

  /** Start every copy on a fresh training seed; returns the first observation (a copy). */
  start(): Float32Array {
    this.seeds = Array.from({ length: this.B }, () => this.nextSeed());
    this.ret.fill(0);
    this.drag.fill(0);
    this.power.fill(0);
    this.n.fill(0);
    return this.env.reset(this.seeds).slice();
  }

  step(actions: Float32Array): EnvStepResult {
    const { B, T } = this;
    const out = this.env.step(actions);
    const nextObs = out.obs.slice();
    const reward = out.reward.slice();
    const terminal = new Float32Array(B * T);
    const episodes: EpisodeRecord[] = [];
    let dragSum = 0;
    let dragCount = 0;
    const ended: number[] = [];
    for (let b = 0; b < B; b++) {
      let r = 0;
      let d = 0;
      let p = 0;
      for (let t = 0; t < T; t++) {
        r += reward[b * T + t]!;
        d += out.drag[b * T + t]!;
        p += out.actuationPower[b * T + t]!;
      }
      this.ret[b]! += r / T;
      this.n[b]! += 1;
      if (!out.diverged[b]) {
        this.drag[b]! += d / T;
        this.power[b]! += p / T;
        dragSum += d / T;
        dragCount++;
      } else {
        terminal.fill(1, b * T, (b + 1) * T);
      }
      if (out.done[b]) {
        const dv = out.diverged[b] === 1;
        const n = this.n[b]!;
        episodes.push({
          copy: b,
          seed: this.seeds[b]!,
          return: this.ret[b]!,
          drag: dv ? NaN : this.drag[b]! / n,
          power: dv ? NaN : this.power[b]! / n,
          decisions: n,
          diverged: dv,
        });
        ended.push(b);
      }
    }
    for (const b of ended) {
      this.seeds[b] = this.nextSeed();
      this.env.resetCopy(b, this.seeds[b]!);
      this.ret[b] = 0;
      this.drag[b] = 0;
      this.power[b] = 0;
      this.n[b] = 0;
    }
    const obs = ended.length ? this.env.observe().slice() : nextObs.slice();
    return { nextObs, obs, reward, terminal, dragSum, dragCount, episodes };
  }

  /** The current observation (a copy). */
  observe(): Float32Array {
    return this.env.observe().slice();
  }

  getState(): EnvRunnerState {
    if (!this.env.getState) throw new Error(`env kind "${this.env.spec.kind}" cannot save its state (it has no getState), so it cannot be checkpointed`);
    return {
      env: this.env.getState(),
      rng: this.rng.getState(),
      seeds: this.seeds.slice(),
      acc: { ret: this.ret.slice(), drag: this.drag.slice(), power: this.power.slice(), n: this.n.slice() },
    };
  }

  setState(s: EnvRunnerState): void {
    if (!this.env.setState) throw new Error(`env kind "${this.env.spec.kind}" cannot restore a state (it has no setState)`);
    if (s.seeds.length !== this.B) throw new Error(`checkpoint: ${s.seeds.length} training copies saved, this run has ${this.B}`);
    this.env.setState(s.env);
    this.rng = Rng.fromState(s.rng);
    this.seeds = s.seeds.slice();
    this.ret.set(s.acc.ret);
    this.drag.set(s.acc.drag);
    this.power.set(s.acc.power);
    this.n.set(s.acc.n);
  }
}
