/**
 * `tilewise baselines <config.yaml>`: P/P0 (or the surrogate's drag analogue) of the
 * classical baselines over seeded episodes, with Student-t 95% confidence intervals over
 * episodes, the net saving and the fraction of actuator-decisions at the bounds. The
 * opposition gain is chosen by a sweep on tuning seeds that are separate from the
 * evaluation seeds (so the reported figure is not biased by the selection).
 */
import {
  Rng,
  evaluatePolicy,
  formatGain,
  gainGrid,
  noControl,
  opposition,
  randomActuation,
  summarizeEpisodes,
  sweepOppositionGain,
  type BaselinePolicy,
  type EnvEvent,
  type GainSweepResult,
  type PolicySummary,
} from '@tilewise/envs';
import type { RunConfig } from '../config';
import { formatTable, pm } from '../table';

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

/** Seeds derived from a base seed and a purpose, so tuning and evaluation never share one. */
export function episodeSeeds(base: number, purpose: string, count: number): number[] {
  const rng = Rng.derive(base, purpose);
  return Array.from({ length: count }, () => rng.uint32());
}

export function runBaselines(cfg: RunConfig, o: BaselinesOptions): BaselinesResult {
  const { env: parsed, evaluation: ev, baselines: bl } = cfg;
  const ref = parsed.kind.reference(parsed.config, { cacheDir: o.cacheDir, onEvent: o.onEvent });
  const env = parsed.kind.create(parsed.config, { copies: ev.copies, reference: ref.mean, cacheDir: o.cacheDir, onEvent: o.onEvent });
  const dragName = env.spec.dragName;
  const episodes = o.episodes ?? ev.episodes;
  const evalOpts = { episodeLength: ev.episodeLength, discardDecisions: ev.discardDecisions };
  o.log(`reference: ${ref.quantity} = ${ref.mean.toPrecision(5)} ± ${ref.ci95.toPrecision(2)} (95%, batch means over ${ref.blocks} blocks)`);

  let sweep: GainSweepResult | null = null;
  if (bl.policies.includes('opposition')) {
    const g = bl.gainSweep;
    const gains = gainGrid(g.min, g.max, g.count, g.scale);
    sweep = sweepOppositionGain(env, {
      ...evalOpts,
      seeds: episodeSeeds(ev.seed, 'baseline-tuning', g.episodes),
      gains,
      criterion: g.criterion,
    });
    o.log('');
    o.log(`opposition gain sweep (${g.episodes} tuning episodes per gain, best by ${g.criterion === 'drag' ? dragName : 'net saving'}):`);
    o.log(
      formatTable(
        ['alpha', dragName, 'net saving', 'at bounds', 'diverged'],
        sweep.rows.map((r) => [
          formatGain(r.alpha),
          pm(r.summary.drag),
          pm(r.summary.netSaving),
          r.summary.atBounds ? r.summary.atBounds.mean.toFixed(3) : 'n/a',
          String(r.summary.divergedEpisodes),
        ]),
      ),
    );
    o.log(`best alpha = ${formatGain(sweep.bestAlpha)}`);
  }

  const seeds = episodeSeeds(ev.seed, 'evaluation', episodes);
  const policies: BaselinePolicy[] = bl.policies.map((p) =>
    p === 'none' ? noControl() : p === 'random' ? randomActuation() : opposition(sweep!.bestAlpha),
  );
  const summaries = policies.map((p) => summarizeEpisodes(p.name, evaluatePolicy(env, p, { ...evalOpts, seeds })));
  o.log('');
  o.log(`baselines over ${episodes} evaluation episodes per policy (first ${ev.discardDecisions} decisions of each discarded):`);
  o.log(
    formatTable(
      ['policy', 'episodes', `${dragName} (95% CI)`, 'net saving (95% CI)', 'at bounds', 'diverged'],
      summaries.map((s) => [
        s.policy,
        String(s.episodes),
        pm(s.drag),
        pm(s.netSaving),
        s.atBounds ? s.atBounds.mean.toFixed(3) : 'n/a',
        String(s.divergedEpisodes),
      ]),
    ),
  );
  o.log('');
  o.log('Intervals: Student-t 95% over episodes. Net saving = 1 - (drag + actuation cost)/reference, where the');
  o.log('actuation cost counts only power that actuators supply (energy they absorb is not credited).');
  o.log('Caution: this is a surrogate, not a channel flow; its drag analogue does not predict channel-flow drag.');
  return {
    kind: env.spec.kind,
    reference: { mean: ref.mean, ci95: ref.ci95, stdErr: ref.stdErr, blocks: ref.blocks },
    sweep,
    summaries,
  };
}
