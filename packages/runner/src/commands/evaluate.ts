/**
 * `tilewise evaluate <run-dir | file.policy>` and `tilewise transfer <run-dir | file.policy> <config>`:
 * a trained policy against no control and tuned opposition control (and random actuation) on
 * identical seeded initial states, on its training domain and on other domains with the same
 * tile size and more tiles. Tables go to `log`; data to <out>/<domain>/ (evaluation.ts).
 */
import { existsSync, statSync } from 'node:fs';
import { join, resolve } from 'node:path';
import type { Json } from '@tilewise/agent';
import { ConfigError, parseEnvConfig, type EnvEvent } from '@tilewise/envs';
import { loadRunConfig, parseRunConfig, readYamlFile, type RunConfig } from '../config';
import { domainSummary, evaluatePolicyOnDomains, type DomainResult, type DomainSpec } from '../evaluation';
import { loadPolicy, type PolicyFile } from '../policy';
import { readSummary, RUN_FILES } from '../trainer';
import { writeFileAtomic } from '../atomic';

export interface PolicySource {
  readonly policy: PolicyFile;
  /** Table name, e.g. "policy (best, step 12000)". */
  readonly name: string;
  /** The run directory, when the source is one. */
  readonly runDir: string | null;
  /** The run's config, when the source is a run directory. */
  readonly config: RunConfig | null;
}

/** Resolve a run directory (best or latest policy) or a policy file. */
export function openPolicySource(source: string, which: 'best' | 'latest' = 'best'): PolicySource {
  const path = resolve(source);
  if (!existsSync(path)) throw new ConfigError([`${source}: no such run directory or policy file`]);
  if (statSync(path).isDirectory()) {
    const file = join(path, which === 'best' ? RUN_FILES.best : RUN_FILES.latest);
    if (!existsSync(join(path, RUN_FILES.config))) throw new ConfigError([`${source}: not a run directory (no ${RUN_FILES.config})`]);
    if (!existsSync(file)) throw new ConfigError([`${source}: the run has no ${which} policy yet (${file} is missing)`]);
    const policy = loadPolicy(file);
    const config = parseRunConfig(readYamlFile(join(path, RUN_FILES.config), 'run config'));
    return { policy, name: policyName(policy, which), runDir: path, config };
  }
  const policy = loadPolicy(path);
  return { policy, name: policyName(policy, String(policy.source.label ?? 'policy')), runDir: null, config: null };
}

function policyName(p: PolicyFile, label: string): string {
  const step = p.source.step;
  return `policy (${label}${typeof step === 'number' ? `, step ${step}` : ''})`;
}

export interface EvaluateCommandOptions {
  readonly episodes?: number;
  readonly cacheDir?: string;
  /** Output directory; default <run>/evaluation for a run, none for a bare policy file. */
  readonly out?: string | null;
  /** Skip evaluation.transfer domains. */
  readonly noTransfer?: boolean;
  readonly log: (line: string) => void;
  /** Progress notes of long work. */
  readonly note?: (line: string) => void;
  readonly onEvent?: (e: EnvEvent) => void;
}

/** The training domain of a policy, with the evaluation protocol of `cfg` (or the defaults). */
function trainingDomain(src: PolicySource, cfg: RunConfig | null): DomainSpec {
  const base = cfg ?? src.config;
  const env = parseEnvConfig(src.policy.env.config, 'env');
  const protocol = base ?? parseRunConfig({ env: src.policy.env.config });
  return { label: 'train', env, evaluation: protocol.evaluation, baselines: protocol.baselines };
}

/** Evaluate on the training domain and (unless noTransfer) on evaluation.transfer domains. */
export function evaluateSource(src: PolicySource, cfg: RunConfig | null, o: EvaluateCommandOptions): DomainResult[] {
  const train = trainingDomain(src, cfg);
  const protocol = cfg ?? src.config;
  const domains: DomainSpec[] = [train];
  if (!o.noTransfer && protocol) {
    protocol.transfer.forEach((env, i) => domains.push({ label: `transfer-${i + 1}`, env, evaluation: protocol.evaluation, baselines: protocol.baselines }));
  }
  return run(src, domains, o);
}

/** Evaluate on the domain of another config (its env, evaluation and baselines sections). */
export function transferSource(src: PolicySource, configPath: string, o: EvaluateCommandOptions): DomainResult[] {
  const cfg = loadRunConfig(configPath);
  return run(src, [{ label: 'transfer', env: cfg.env, evaluation: cfg.evaluation, baselines: cfg.baselines }], o);
}

function run(src: PolicySource, domains: DomainSpec[], o: EvaluateCommandOptions): DomainResult[] {
  const outDir = o.out === undefined ? (src.runDir ? join(src.runDir, RUN_FILES.evaluation) : null) : o.out;
  const results = evaluatePolicyOnDomains({
    policy: src.policy,
    policyName: src.name,
    domains,
    outDir,
    cacheDir: o.cacheDir,
    episodes: o.episodes,
    log: o.log,
    note: o.note,
    onEvent: o.onEvent,
  });
  if (outDir) o.log(`\nevaluation data: ${outDir}/<domain>/evaluation.json, series.twdata (docs/formats.md)`);
  if (src.runDir && outDir === join(src.runDir, RUN_FILES.evaluation)) recordInSummary(src.runDir, results, src.policy);
  return results;
}

/** Add the evaluation figures to the run's summary.json. */
function recordInSummary(runDir: string, results: DomainResult[], policy: PolicyFile): void {
  const s = readSummary(runDir);
  if (!s) return;
  const compact = results.map((r) => {
    const full = domainSummary(r, policy) as { controllers: Array<Record<string, Json>> } & Record<string, Json>;
    return {
      label: r.label,
      dragName: r.dragName,
      tiles: r.tiles,
      reference: r.reference.mean,
      bestAlpha: r.sweep?.bestAlpha ?? null,
      controllers: full.controllers.map(({ perEpisode: _omit, ...rest }) => rest),
    };
  });
  writeFileAtomic(join(runDir, RUN_FILES.summary), `${JSON.stringify({ ...s, evaluation: compact }, null, 2)}\n`);
}
