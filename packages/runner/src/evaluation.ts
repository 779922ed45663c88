/**
 * Comparison of controllers on identical seeded initial states: a trained policy (optional),
 * no control, opposition control at the gain that is best on separate tuning seeds, random
 * actuation, each over the same evaluation seeds with the same protocol (episode length,
 * discarded transient), with Student-t 95% intervals over episodes.
 *
 * `compareControllers` runs one domain; `evaluatePolicyOnDomains` runs a policy on its
 * training domain and on transfer domains (same tile size, more tiles) and writes the data a
 * report needs (docs/formats.md) under <out>/<domain>/: evaluation.json (summary)
 * and series.twdata (time series, actuation, field snapshots).
 */
import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import { encodeContainer, type BlockArray, type Json } from '@tilewise/agent';
import {
  ConfigError,
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
  type EpisodeResult,
  type GainSweepResult,
  type ParsedEnvConfig,
  type PolicySummary,
  type TiledEnv,
} from '@tilewise/envs';
import { writeFileAtomic } from './atomic';
import { episodeSeeds } from './seeds';
import type { BaselinesConfig, EvaluationConfig } from './config';
import { PolicyNet } from './policy-net';
import type { PolicyFile } from './policy';
import { RecordingEnv, type Recording } from './recorder';
import { formatTable, pm } from './table';
import { netPolicy } from './validation';

export const EVALUATION_FORMAT = 'tilewise-evaluation/1';
export const SERIES_KIND = 'tilewise-evaluation-series';

export interface DomainSpec {
  /** Directory-safe label, e.g. "train" or "transfer-1". */
  readonly label: string;
  readonly env: ParsedEnvConfig;
  readonly evaluation: EvaluationConfig;
  readonly baselines: BaselinesConfig;
}

export interface ControllerResult {
  readonly name: string;
  readonly role: 'policy' | 'none' | 'opposition' | 'random';
  readonly summary: PolicySummary;
  readonly episodes: readonly EpisodeResult[];
  readonly recording: Recording | null;
}

export interface DomainResult {
  readonly label: string;
  readonly kind: string;
  readonly dragName: string;
  readonly tiles: number;
  readonly controlInterval: number;
  readonly actionBound: number;
  readonly envConfig: Record<string, unknown>;
  readonly reference: { readonly mean: number; readonly ci95: number; readonly stdErr: number; readonly blocks: number };
  readonly sweep: GainSweepResult | null;
  readonly seeds: readonly number[];
  readonly tuningSeeds: readonly number[];
  readonly episodeLength: number;
  readonly discardDecisions: number;
  readonly controllers: readonly ControllerResult[];
}

export interface CompareOptions {
  readonly cacheDir?: string;
  /** Override evaluation.episodes. */
  readonly episodes?: number;
  /** The trained policy, with the name it has in tables. */
  readonly policy?: { readonly net: PolicyNet; readonly name: string };
  /** Keep time series (RecordingEnv) for every controller. */
  readonly record?: boolean;
  readonly log: (line: string) => void;
  /** Progress notes of long work (stderr in the CLI). */
  readonly note?: (line: string) => void;
  readonly onEvent?: (e: EnvEvent) => void;
}

/** Evaluate the baselines (and the policy, first) on one domain. Prints the sweep and the table through `log`. */
export function compareControllers(d: DomainSpec, o: CompareOptions): DomainResult {
  const { env: parsed, evaluation: ev, baselines: bl } = d;
  const ref = parsed.kind.reference(parsed.config, { cacheDir: o.cacheDir, onEvent: o.onEvent });
  const env: TiledEnv = parsed.kind.create(parsed.config, { copies: ev.copies, reference: ref.mean, cacheDir: o.cacheDir, onEvent: o.onEvent });
  const dragName = env.spec.dragName;
  const episodes = o.episodes ?? ev.episodes;
  const episodeLength = ev.episodeLength ?? env.spec.episodeLength;
  const evalOpts = { episodeLength, discardDecisions: ev.discardDecisions };
  o.log(`reference: ${ref.quantity} = ${ref.mean.toPrecision(5)} ± ${ref.ci95.toPrecision(2)} (95%, batch means over ${ref.blocks} blocks)`);

  const tuningSeeds = episodeSeeds(ev.seed, 'baseline-tuning', bl.gainSweep.episodes);
  let sweep: GainSweepResult | null = null;
  const note = o.note ?? (() => {});
  if (bl.policies.includes('opposition')) {
    const g = bl.gainSweep;
    note(`${d.label}: opposition gain sweep, ${g.count} gains x ${g.episodes} tuning episodes...`);
    sweep = sweepOppositionGain(env, { ...evalOpts, seeds: tuningSeeds, gains: gainGrid(g.min, g.max, g.count, g.scale), criterion: g.criterion });
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
  const entries: Array<{ role: ControllerResult['role']; policy: BaselinePolicy }> = [];
  if (o.policy) entries.push({ role: 'policy', policy: netPolicy(o.policy.net, o.policy.name) });
  for (const p of bl.policies) {
    entries.push({ role: p, policy: p === 'none' ? noControl() : p === 'random' ? randomActuation() : opposition(sweep!.bestAlpha) });
  }
  const controllers = entries.map(({ role, policy }): ControllerResult => {
    const rec = o.record
      ? new RecordingEnv(env, {
          episodes,
          decisions: episodeLength,
          discardDecisions: ev.discardDecisions,
          fieldEvery: ev.record.fieldEvery,
          fieldEpisodes: ev.record.fieldEpisodes,
          histogramBins: ev.record.histogramBins,
        })
      : null;
    note(`${d.label}: ${policy.name}, ${episodes} evaluation episodes...`);
    const results = evaluatePolicy(rec ?? env, policy, { ...evalOpts, seeds });
    return { name: policy.name, role, summary: summarizeEpisodes(policy.name, results), episodes: results, recording: rec?.recording() ?? null };
  });
  o.log('');
  o.log(`${episodes} evaluation episodes per controller, identical seeded initial states (first ${ev.discardDecisions} decisions of each discarded):`);
  o.log(
    formatTable(
      ['controller', 'episodes', `${dragName} (95% CI)`, 'net saving (95% CI)', 'actuation power', 'at bounds', 'diverged'],
      controllers.map(({ summary: s }) => [
        s.policy,
        String(s.episodes),
        pm(s.drag),
        pm(s.netSaving),
        s.actuationPower ? s.actuationPower.mean.toFixed(3) : 'n/a',
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
    label: d.label,
    kind: env.spec.kind,
    dragName,
    tiles: env.spec.tiles,
    controlInterval: env.spec.controlInterval,
    actionBound: env.spec.actionBound,
    envConfig: parsed.config as Record<string, unknown>,
    reference: { mean: ref.mean, ci95: ref.ci95, stdErr: ref.stdErr, blocks: ref.blocks },
    sweep,
    seeds,
    tuningSeeds,
    episodeLength,
    discardDecisions: ev.discardDecisions,
    controllers,
  };
}

/** Physical tile size of a domain, for the transfer check; null when the surrogate does not say. */
function tileSize(env: ParsedEnvConfig): number[] | null {
  const c = env.config as Record<string, unknown>;
  if (env.config.kind === 'ks') return [(c.length as number) / (c.tiles as number), (c.points as number) / (c.tiles as number)];
  return null;
}

/**
 * Check that a policy trained on `policy.env` can act on `target`: same observation and action
 * sizes, bound, control interval and sensor layout, and the same tile size. Throws a
 * ConfigError naming what differs.
 */
export function checkTransfer(policy: PolicyFile, target: ParsedEnvConfig, where: string, probe: TiledEnv): void {
  const a = policy.env.spec;
  const b = probe.spec;
  const issues: string[] = [];
  if (policy.env.kind !== target.config.kind) issues.push(`${where}.kind: expected ${JSON.stringify(policy.env.kind)}, the policy's surrogate (got ${JSON.stringify(target.config.kind)})`);
  for (const k of ['obsDim', 'actDim', 'actionBound', 'controlInterval'] as const) {
    if (a[k] !== b[k]) issues.push(`${where}: ${k} is ${b[k]}, the policy was trained with ${a[k]} (observation and action sizes must match)`);
  }
  if (!issues.length && JSON.stringify(a.obsLayout) !== JSON.stringify(b.obsLayout)) {
    issues.push(`${where}: the sensor layout differs from the policy's (sensorsPerTile, haloTiles, senseGradient must match)`);
  }
  const ta = tileSize({ kind: target.kind, config: policy.env.config as ParsedEnvConfig['config'] });
  const tb = tileSize(target);
  if (ta && tb && (Math.abs(ta[0]! - tb[0]!) > 1e-12 * ta[0]! || ta[1] !== tb[1])) {
    issues.push(`${where}: tile size ${tb[0]} with ${tb[1]} grid points differs from the policy's ${ta[0]} with ${ta[1]} (keep length/tiles and points/tiles)`);
  }
  if (issues.length) throw new ConfigError(issues);
}

export interface EvaluateOnDomainsOptions {
  readonly policy: PolicyFile;
  readonly policyName: string;
  readonly domains: readonly DomainSpec[];
  /** Where <label>/evaluation.json and series.twdata go (null: nothing written). */
  readonly outDir: string | null;
  readonly cacheDir?: string;
  readonly episodes?: number;
  readonly log: (line: string) => void;
  readonly note?: (line: string) => void;
  readonly onEvent?: (e: EnvEvent) => void;
}

/** Evaluate a policy against the baselines on each domain; write the data; return the summaries. */
export function evaluatePolicyOnDomains(o: EvaluateOnDomainsOptions): DomainResult[] {
  const out: DomainResult[] = [];
  for (const d of o.domains) {
    const probe = d.env.kind.create(d.env.config, { copies: 1, reference: 1 });
    checkTransfer(o.policy, d.env, d.label === 'train' ? 'env' : d.label, probe);
    o.log('');
    o.log(`== ${d.label}: ${describeDomain(d.env)} ==`);
    const r = compareControllers(d, {
      cacheDir: o.cacheDir,
      episodes: o.episodes,
      policy: { net: new PolicyNet(o.policy.snapshot), name: o.policyName },
      record: o.outDir !== null,
      log: o.log,
      note: o.note,
      onEvent: o.onEvent,
    });
    if (o.outDir) writeDomainResult(join(o.outDir, d.label), r, o.policy);
    out.push(r);
  }
  return out;
}

export function describeDomain(env: ParsedEnvConfig): string {
  const c = env.config as Record<string, unknown>;
  if (env.config.kind === 'ks') return `ks L = ${c.length}, n = ${c.points}, ${c.tiles} tiles`;
  return `${env.config.kind} ${JSON.stringify(c.tiles)} tiles`;
}

/** The JSON summary of one domain (evaluation.json, and summary.json's evaluation entries). */
export function domainSummary(r: DomainResult, policy: PolicyFile | null): Json {
  const ci = (x: { mean: number; halfWidth: number; sd: number; n: number } | null): Json =>
    x ? { mean: x.mean, halfWidth: Number.isFinite(x.halfWidth) ? x.halfWidth : null, sd: Number.isFinite(x.sd) ? x.sd : null, n: x.n } : null;
  return JSON.parse(
    JSON.stringify({
      format: EVALUATION_FORMAT,
      label: r.label,
      kind: r.kind,
      dragName: r.dragName,
      tiles: r.tiles,
      env: r.envConfig,
      reference: r.reference,
      protocol: {
        seeds: r.seeds,
        tuningSeeds: r.tuningSeeds,
        episodeLength: r.episodeLength,
        discardDecisions: r.discardDecisions,
        interval: 'Student-t 95% over episodes',
      },
      opposition: r.sweep
        ? { bestAlpha: r.sweep.bestAlpha, sweep: r.sweep.rows.map((row) => ({ alpha: row.alpha, drag: ci(row.summary.drag), netSaving: ci(row.summary.netSaving) })) }
        : null,
      policy: policy ? { source: policy.source } : null,
      controllers: r.controllers.map((c) => ({
        name: c.name,
        role: c.role,
        episodes: c.summary.episodes,
        divergedEpisodes: c.summary.divergedEpisodes,
        drag: ci(c.summary.drag),
        netSaving: ci(c.summary.netSaving),
        actuationPower: ci(c.summary.actuationPower),
        atBounds: ci(c.summary.atBounds),
        perEpisode: c.episodes.map((e) => ({ seed: e.seed, drag: e.drag, netSaving: e.netSaving, actuationPower: e.actuationPower, atBounds: e.atBounds, diverged: e.diverged })),
      })),
      caution: 'A surrogate is not a channel flow: its drag analogue does not predict channel-flow drag.',
    }),
  ) as Json;
}

function writeDomainResult(dir: string, r: DomainResult, policy: PolicyFile): void {
  mkdirSync(dir, { recursive: true });
  writeFileAtomic(join(dir, 'evaluation.json'), `${JSON.stringify(domainSummary(r, policy), null, 2)}\n`);
  const blocks = new Map<string, BlockArray>();
  const controllers: Json[] = [];
  r.controllers.forEach((c, i) => {
    const rec = c.recording;
    if (!rec) return;
    const p = `c${i}`;
    blocks.set(`${p}/drag`, rec.drag);
    blocks.set(`${p}/power`, rec.power);
    blocks.set(`${p}/actions`, rec.actions);
    blocks.set(`${p}/signal`, rec.signal);
    blocks.set(`${p}/field`, rec.field);
    blocks.set(`${p}/fieldIndex`, rec.fieldIndex);
    blocks.set(`${p}/histogram`, rec.histogram);
    controllers.push({ prefix: p, name: c.name, role: c.role, fieldSize: rec.fieldSize });
  });
  const first = r.controllers[0]!;
  const meta: Json = {
    format: EVALUATION_FORMAT,
    label: r.label,
    kind: r.kind,
    dragName: r.dragName,
    episodes: r.seeds.length,
    decisions: r.episodeLength,
    discardDecisions: r.discardDecisions,
    actuators: first.recording ? first.recording.actions.length / (r.seeds.length * r.episodeLength) : 0,
    controlInterval: r.controlInterval,
    actionBound: r.actionBound,
    seeds: [...r.seeds],
    controllers,
  };
  writeFileAtomic(join(dir, 'series.twdata'), encodeContainer(SERIES_KIND, meta, blocks));
}
