/**
 * `tilewise baselines <config.yaml>`: P/P0 (or the surrogate's drag analogue) of the
 * classical baselines over seeded episodes, with Student-t 95% confidence intervals over
 * episodes, the net saving and the fraction of actuator-decisions at the bounds. The
 * opposition gain is chosen by a sweep on tuning seeds that are separate from the
 * evaluation seeds (so the reported figure is not biased by the selection). The work is
 * `compareControllers` (evaluation.ts) without a trained policy.
 */
import type { EnvEvent, GainSweepResult, PolicySummary } from '@tilewise/envs';
import type { RunConfig } from '../config';
import { compareControllers } from '../evaluation';

export { episodeSeeds } from '../seeds';

export interface BaselinesOptions {
  readonly cacheDir?: string;
  /** Override evaluation.episodes. */
  readonly episodes?: number;
  readonly log: (line: string) => void;
  readonly onEvent?: (e: EnvEvent) => void;
}

export interface BaselinesResult {
  readonly kind: string;
  readonly reference: { readonly mean: number; readonly ci95: number; readonly stdErr: number; readonly blocks: number };
  readonly sweep: GainSweepResult | null;
  readonly summaries: readonly PolicySummary[];
}

export function runBaselines(cfg: RunConfig, o: BaselinesOptions): BaselinesResult {
  const r = compareControllers({ label: 'baselines', env: cfg.env, evaluation: cfg.evaluation, baselines: cfg.baselines }, o);
  return { kind: r.kind, reference: r.reference, sweep: r.sweep, summaries: r.controllers.map((c) => c.summary) };
}
