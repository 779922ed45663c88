/**
 * Classical baselines, generic over any `TiledEnv`: no control, opposition control
 * a = clip(-alpha s) with s from `env.oppositionSignal()`, seeded random actuation, an
 * evaluation loop over seeded episodes and a sweep that finds the best opposition gain.
 *
 * Episode statistics (all normalised by the surrogate's reference, e.g. P0):
 * - drag: mean over the evaluated decisions and tiles of the drag analogue (e.g. P/P0);
 * - actuationPower: same mean of the actuation cost (e.g. Pi+/P0);
 * - netSaving: 1 - drag - actuationPower;
 * - atBounds: fraction of actuator-decisions with |a| at or beyond the bound (clipped);
 * - diverged: whether the copy diverged (its episode statistics are then not used).
 * The first `discardDecisions` decisions of each episode (the transient after switching
 * the controller on) are excluded from the means.
 */
import type { TiledEnv } from './contract';
import { Rng } from './random';
import { meanWithCi, type MeanCi } from './stats';

export interface BaselinePolicy {
  /** Name for tables, e.g. "none", "opposition(alpha=0.8)", "random". */
  readonly name: string;
  /** Called when copy `copy` starts an episode from `seed` (seeded policies draw from it). */
  startEpisode?(copy: number, seed: number): void;
  /** Write actions [B, T, actDim] for the current state into `out`. */
  act(env: TiledEnv, obs: Float32Array, out: Float32Array): void;
}

/** Zero actuation. */
export function noControl(): BaselinePolicy {
  return {
    name: 'none',
    act(_env, _obs, out) {
      out.fill(0);
    },
  };
}

/** Opposition control a = clip(-alpha s, +-bound), s = env.oppositionSignal(). */
export function opposition(alpha: number): BaselinePolicy {
  if (!Number.isFinite(alpha)) throw new Error(`opposition: alpha must be finite, got ${alpha}`);
  return {
    name: `opposition(alpha=${formatGain(alpha)})`,
    act(env, _obs, out) {
      const s = env.oppositionSignal();
      const bound = env.spec.actionBound;
      for (let i = 0; i < out.length; i++) {
        const a = -alpha * s[i]!;
        out[i] = a > bound ? bound : a < -bound ? -bound : a;
      }
    },
  };
}

/** Independent uniform amplitudes in [-bound, bound] each decision, seeded per episode by (seed, "random-actuation"). */
export function randomActuation(): BaselinePolicy {
  const rngs = new Map<number, Rng>();
  return {
    name: 'random',
    startEpisode(copy, seed) {
      rngs.set(copy, Rng.derive(seed, 'random-actuation'));
    },
    act(env, _obs, out) {
      const per = env.spec.tiles * env.spec.actDim;
      const bound = env.spec.actionBound;
      for (let b = 0; b < env.spec.copies; b++) {
        let rng = rngs.get(b);
        if (!rng) {
          rng = Rng.derive(`copy-${b}`, 'random-actuation');
          rngs.set(b, rng);
        }
        for (let i = b * per; i < (b + 1) * per; i++) out[i] = rng.uniformIn(-bound, bound);
      }
    },
  };
}

export function formatGain(alpha: number): string {
  return Number(alpha.toPrecision(3)).toString();
}

export interface EpisodeResult {
  readonly seed: number;
  readonly drag: number;
  readonly actuationPower: number;
  readonly netSaving: number;
  readonly atBounds: number;
  readonly diverged: boolean;
  /** Decisions that entered the means. */
  readonly decisions: number;
}

export interface EvaluationOptions {
  /** One episode per seed. */
  readonly seeds: readonly number[];
  /** Decisions per episode (default: env.spec.episodeLength). */
  readonly episodeLength?: number;
  /** Decisions at the start of each episode left out of the means (default 0). */
  readonly discardDecisions?: number;
}

/**
 * Run `policy` for one episode per seed, B episodes at a time (env.spec.copies); the
 * copies of a last, partial group run on repeated seeds and are ignored.
 */
export function evaluatePolicy(env: TiledEnv, policy: BaselinePolicy, o: EvaluationOptions): EpisodeResult[] {
  const { copies: B, tiles: T, actDim, actionBound } = env.spec;
  const len = o.episodeLength ?? env.spec.episodeLength;
  const discard = o.discardDecisions ?? 0;
  if (!Number.isInteger(len) || len < 1) throw new Error(`evaluatePolicy: episodeLength must be a positive integer, got ${len}`);
  if (!Number.isInteger(discard) || discard < 0 || discard >= len) {
    throw new Error(`evaluatePolicy: discardDecisions must be an integer in [0, episodeLength = ${len}), got ${discard}`);
  }
  if (o.seeds.length === 0) throw new Error('evaluatePolicy: no seeds');
  const actions = new Float32Array(B * T * actDim);
  const results: EpisodeResult[] = [];
  const drag = new Float64Array(B);
  const power = new Float64Array(B);
  const bounds = new Float64Array(B);
  const diverged = new Uint8Array(B);
  const perCopy = T * actDim;
  for (let g = 0; g < o.seeds.length; g += B) {
    const group = Array.from({ length: B }, (_, b) => o.seeds[Math.min(g + b, o.seeds.length - 1)]!);
    let obs = env.reset(group);
    group.forEach((seed, b) => policy.startEpisode?.(b, seed));
    drag.fill(0);
    power.fill(0);
    bounds.fill(0);
    diverged.fill(0);
    for (let step = 0; step < len; step++) {
      policy.act(env, obs, actions);
      const counted = step >= discard;
      if (counted) {
        for (let b = 0; b < B; b++) {
          let n = 0;
          for (let i = b * perCopy; i < (b + 1) * perCopy; i++) if (Math.abs(actions[i]!) >= actionBound) n++;
          bounds[b]! += n / perCopy;
        }
      }
      const out = env.step(actions);
      obs = out.obs;
      for (let b = 0; b < B; b++) {
        if (out.diverged[b]) diverged[b] = 1;
        if (!counted || diverged[b]) continue;
        let d = 0;
        let p = 0;
        for (let t = 0; t < T; t++) {
          d += out.drag[b * T + t]!;
          p += out.actuationPower[b * T + t]!;
        }
        drag[b]! += d / T;
        power[b]! += p / T;
      }
    }
    const n = len - discard;
    for (let b = 0; b < B && g + b < o.seeds.length; b++) {
      const dv = diverged[b] === 1;
      const dm = dv ? NaN : drag[b]! / n;
      const pm = dv ? NaN : power[b]! / n;
      results.push({
        seed: group[b]!,
        drag: dm,
        actuationPower: pm,
        netSaving: 1 - dm - pm,
        atBounds: dv ? NaN : bounds[b]! / n,
        diverged: dv,
        decisions: n,
      });
    }
  }
  return results;
}

export interface PolicySummary {
  readonly policy: string;
  readonly episodes: number;
  readonly divergedEpisodes: number;
  /** Over episodes that did not diverge; Student-t 95% intervals over episodes. */
  readonly drag: MeanCi | null;
  readonly actuationPower: MeanCi | null;
  readonly netSaving: MeanCi | null;
  readonly atBounds: MeanCi | null;
}

/** Mean and Student-t 95% interval over episodes (diverged episodes counted, not averaged). */
export function summarizeEpisodes(policy: string, results: readonly EpisodeResult[]): PolicySummary {
  const ok = results.filter((r) => !r.diverged);
  const ci = (f: (r: EpisodeResult) => number): MeanCi | null => (ok.length ? meanWithCi(ok.map(f)) : null);
  return {
    policy,
    episodes: results.length,
    divergedEpisodes: results.length - ok.length,
    drag: ci((r) => r.drag),
    actuationPower: ci((r) => r.actuationPower),
    netSaving: ci((r) => r.netSaving),
    atBounds: ci((r) => r.atBounds),
  };
}

export interface GainSweepOptions extends EvaluationOptions {
  /** Gains to try. */
  readonly gains: readonly number[];
  /** What "best" minimises: the drag analogue, or drag + actuation power (maximises net saving). */
  readonly criterion?: 'drag' | 'net';
}

export interface GainSweepResult {
  readonly rows: ReadonlyArray<{ readonly alpha: number; readonly summary: PolicySummary }>;
  /** The gain with the best criterion among those with no diverged episode. */
  readonly bestAlpha: number;
  readonly best: PolicySummary;
}

/** Evaluate opposition control at each gain on the same seeds; pick the best by `criterion`. */
export function sweepOppositionGain(env: TiledEnv, o: GainSweepOptions): GainSweepResult {
  if (o.gains.length === 0) throw new Error('sweepOppositionGain: no gains');
  const crit = o.criterion ?? 'drag';
  const rows = o.gains.map((alpha) => {
    const p = opposition(alpha);
    return { alpha, summary: summarizeEpisodes(p.name, evaluatePolicy(env, p, o)) };
  });
  const score = (s: PolicySummary): number => {
    if (s.divergedEpisodes > 0 || !s.drag || !s.netSaving) return Infinity;
    return crit === 'drag' ? s.drag.mean : -s.netSaving.mean;
  };
  let best = rows[0]!;
  for (const r of rows) if (score(r.summary) < score(best.summary)) best = r;
  return { rows, bestAlpha: best.alpha, best: best.summary };
}

/** `count` gains from `min` to `max`, evenly spaced on a linear or logarithmic scale. */
export function gainGrid(min: number, max: number, count: number, scale: 'linear' | 'log'): number[] {
  if (count === 1) return [min];
  const out: number[] = [];
  for (let i = 0; i < count; i++) {
    const f = i / (count - 1);
    out.push(scale === 'log' ? min * (max / min) ** f : min + (max - min) * f);
  }
  return out;
}
