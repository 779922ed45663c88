/**
 * The run configuration file (YAML). Its top level is a mapping of sections; each
 * section has its own strict schema (unknown keys rejected, defaults filled in, errors
 * naming the path, the value and what was expected). Sections:
 *   env:         the surrogate, validated by the registry in @tilewise/envs by its `kind`
 *   agent:       the learner (TD3/DDPG preset and overrides), the schema of @tilewise/agent
 *   train:       the training loop: copies, updates per step, stop criteria, validation,
 *                checkpoints, logging
 *   evaluation:  seeded evaluation episodes, transfer domains, what is recorded
 *   baselines:   which classical baselines to run and the opposition gain sweep
 * Every field carries a one-line doc with its default (`tilewise config <file>` prints the
 * resolved config; docs/runner.md lists every field).
 */
import { readFileSync } from 'node:fs';
import { agentConfigSchema, type AgentConfig } from '@tilewise/agent';
import { ConfigError, parseConfig, parseEnvConfig, type ParsedEnvConfig } from '@tilewise/envs';
import { parse as parseYaml } from 'yaml';
import { z } from 'zod';
import { registerExternalEnv } from './external/env';

// The runner's own env kind, "external" (a solver process over the wire protocol), registered
// in every thread that parses or builds environments.
registerExternalEnv();

const nullablePositiveInt = (doc: string) => z.number().int().positive().nullable().default(null).describe(doc);

export const evaluationSchema = z
  .strictObject({
    seed: z.number().int().default(1).describe('Base seed; evaluation, tuning and validation seeds are derived from it (default 1).'),
    episodes: z.number().int().min(2).default(16).describe('Evaluation episodes per policy, one seed each (default 16).'),
    copies: z.number().int().positive().default(8).describe('Copies stepped together while evaluating (default 8).'),
    episodeLength: z
      .number()
      .int()
      .positive()
      .optional()
      .describe("Decisions per evaluation episode (default: the env's episodeLength)."),
    discardDecisions: z
      .number()
      .int()
      .nonnegative()
      .default(40)
      .describe('Decisions at the start of each episode left out of the statistics: the transient after switch-on (default 40).'),
    transfer: z
      .array(z.record(z.string(), z.unknown()))
      .default([])
      .describe(
        'Other domains a trained policy is also evaluated on: each entry overrides keys of env (e.g. length, points, tiles, actuators) (default none).',
      ),
    record: z
      .strictObject({
        fieldEvery: z
          .number()
          .int()
          .nonnegative()
          .default(4)
          .describe('Decisions between two saved snapshots of the physical field of the first episode (0: none) (default 4).'),
        fieldEpisodes: z.number().int().nonnegative().default(1).describe('Episodes whose field snapshots are saved (default 1).'),
        histogramBins: z.number().int().min(2).default(41).describe('Bins of the saved actuation histogram over [-bound, bound] (default 41).'),
      })
      .prefault({})
      .describe('What an evaluation saves beside its statistics (docs/formats.md).'),
  })
  .prefault({})
  .describe('Seeded evaluation episodes.');

const policyName = z.enum(['none', 'opposition', 'random']);

export const baselinesSchema = z
  .strictObject({
    policies: z
      .array(policyName)
      .min(1)
      .default(['none', 'opposition', 'random'])
      .describe('Baselines to evaluate, in table order (default none, opposition, random).'),
    gainSweep: z
      .strictObject({
        min: z.number().positive().default(0.1).describe('Smallest opposition gain alpha tried (default 0.1).'),
        max: z.number().positive().default(10).describe('Largest gain tried (default 10).'),
        count: z.number().int().positive().default(9).describe('Gains tried, evenly spaced on `scale` (default 9).'),
        scale: z.enum(['log', 'linear']).default('log').describe('Spacing of the gains (default log).'),
        episodes: z
          .number()
          .int()
          .positive()
          .default(8)
          .describe('Tuning episodes per gain, on seeds separate from the evaluation seeds (default 8).'),
        criterion: z
          .enum(['drag', 'net'])
          .default('drag')
          .describe('Best gain minimises the drag analogue (drag) or maximises the net saving (net) (default drag).'),
      })
      .prefault({})
      .refine((g) => g.max >= g.min, { message: 'expected max >= min', path: ['max'] })
      .describe('Opposition gain sweep.'),
  })
  .prefault({})
  .describe('Classical baselines.');

export const trainSchema = z
  .strictObject({
    name: z
      .string()
      .regex(/^[A-Za-z0-9][A-Za-z0-9._-]*$/, 'expected letters, digits, ".", "_" or "-"')
      .nullable()
      .default(null)
      .describe("Run name, the first part of the run directory's name (default: the config file's base name)."),
    seed: z.number().int().nonnegative().default(1).describe('Run seed: agent initialisation, exploration, replay sampling, training episodes (default 1).'),
    copies: z.number().int().positive().max(4096).default(4).describe('Environment copies stepped together while training (default 4).'),
    updatesPerStep: z
      .number()
      .nonnegative()
      .finite()
      .default(2)
      .describe('Agent updates per environment step (all copies together); fractions accumulate (default 2).'),
    parallel: z
      .boolean()
      .default(true)
      .describe('Step the environment copies in a worker thread while the agent updates, and validate in another (default true).'),
    stop: z
      .strictObject({
        steps: nullablePositiveInt('Stop after this many environment steps (default none).'),
        seconds: z
          .number()
          .positive()
          .finite()
          .nullable()
          .default(600)
          .describe('Stop after this much training wall-clock time, in seconds, summed over resumes (default 600; null: no limit).'),
        dragBelow: z
          .number()
          .positive()
          .finite()
          .nullable()
          .default(null)
          .describe('Stop once a validation mean drag analogue (e.g. P/P0) is below this (default none).'),
        patience: nullablePositiveInt('Stop after this many validations in a row without a new best (default none).'),
      })
      .prefault({})
      .describe('Explicit stop criteria; training stops at the first one met. steps or seconds is required.'),
    validation: z
      .strictObject({
        every: z
          .number()
          .int()
          .nonnegative()
          .default(1000)
          .describe('Environment steps between two validations of the deterministic policy (0: never) (default 1000).'),
        episodes: z
          .number()
          .int()
          .min(2)
          .default(10)
          .describe('Held-out validation seeds, fixed for the run and separate from training and evaluation seeds (default 10).'),
        episodeLength: z
          .number()
          .int()
          .positive()
          .nullable()
          .default(null)
          .describe('Decisions per validation episode (default: evaluation.episodeLength, else the env episodeLength).'),
        discardDecisions: z
          .number()
          .int()
          .nonnegative()
          .nullable()
          .default(null)
          .describe('Decisions at the start of each validation episode left out (default: evaluation.discardDecisions).'),
      })
      .prefault({})
      .describe('Periodic validation; the best validated policy is kept beside the latest.'),
    checkpoint: z
      .strictObject({
        enabled: z.boolean().default(true).describe('Write checkpoints (default true; the env must support getState).'),
        everySteps: z.number().int().nonnegative().default(0).describe('Environment steps between checkpoints (0: not by steps) (default 0).'),
        everySeconds: z
          .number()
          .nonnegative()
          .finite()
          .default(60)
          .describe('Training seconds between checkpoints (0: not by time) (default 60; a KS L = 22 checkpoint with a full replay buffer is ~80 MB).'),
        keep: z.number().int().min(2).default(2).describe('Checkpoints kept; older ones are deleted after a new one is written (default 2).'),
      })
      .prefault({})
      .describe('Checkpoints (atomic; SIGINT/SIGTERM also writes one).'),
    logEvery: z.number().int().positive().default(250).describe('Environment steps between two train/... metric lines in the log (default 250).'),
    finalEvaluation: z
      .boolean()
      .default(true)
      .describe('After training, evaluate the best policy against the baselines (and on evaluation.transfer) and print the table (default true).'),
  })
  .prefault({})
  .superRefine((t, ctx) => {
    if (t.stop.steps === null && t.stop.seconds === null) {
      ctx.addIssue({ code: 'custom', path: ['stop'], message: 'expected steps or seconds (or both)', input: t.stop });
    }
    if (t.stop.patience !== null && t.validation.every === 0) {
      ctx.addIssue({ code: 'custom', path: ['stop', 'patience'], message: 'needs validation (validation.every > 0)', input: t.stop.patience });
    }
    if (t.stop.dragBelow !== null && t.validation.every === 0) {
      ctx.addIssue({ code: 'custom', path: ['stop', 'dragBelow'], message: 'needs validation (validation.every > 0)', input: t.stop.dragBelow });
    }
    const len = t.validation.episodeLength;
    if (len !== null && t.validation.discardDecisions !== null && t.validation.discardDecisions >= len) {
      ctx.addIssue({
        code: 'custom',
        path: ['validation', 'discardDecisions'],
        message: `expected fewer than validation.episodeLength (${len})`,
        input: t.validation.discardDecisions,
      });
    }
  })
  .describe('The training loop.');

export type EvaluationConfig = z.output<typeof evaluationSchema>;
export type BaselinesConfig = z.output<typeof baselinesSchema>;
export type TrainConfig = z.output<typeof trainSchema>;

/** Known top-level sections other than env, with their schemas. */
export const SECTIONS = {
  agent: agentConfigSchema,
  train: trainSchema,
  evaluation: evaluationSchema,
  baselines: baselinesSchema,
} as const;

export interface RunConfig {
  readonly env: ParsedEnvConfig;
  readonly agent: AgentConfig;
  readonly train: TrainConfig;
  readonly evaluation: EvaluationConfig;
  readonly baselines: BaselinesConfig;
  /** Transfer domains: the env section with each `evaluation.transfer` entry applied. */
  readonly transfer: readonly ParsedEnvConfig[];
  /** The raw parsed YAML (for provenance in outputs). */
  readonly raw: Record<string, unknown>;
}

/** Check that discardDecisions leaves decisions to average, against the env's episode length. */
function checkDiscard(section: string, discard: number, explicitLength: number | null | undefined, env: ParsedEnvConfig, issues: string[]): void {
  const envLen = (env.config as { episodeLength?: number }).episodeLength;
  if ((explicitLength === null || explicitLength === undefined) && envLen !== undefined && discard >= envLen) {
    issues.push(`${section}.discardDecisions: expected fewer than env.episodeLength (${envLen}) (got ${discard})`);
  }
}

/** Parse and validate a config object (already read from YAML). */
export function parseRunConfig(raw: unknown): RunConfig {
  if (!raw || typeof raw !== 'object' || Array.isArray(raw)) {
    throw new ConfigError([`(top level): expected a mapping of sections (got ${JSON.stringify(raw) ?? 'nothing'})`]);
  }
  const obj = raw as Record<string, unknown>;
  const known = ['env', ...Object.keys(SECTIONS)];
  const unknown = Object.keys(obj).filter((k) => !known.includes(k));
  if (unknown.length) {
    throw new ConfigError(unknown.map((k) => `${k}: unknown section (known sections: ${known.join(', ')})`));
  }
  if (obj.env === undefined) throw new ConfigError(['env: missing section (it names the surrogate, e.g. kind: ks)']);
  const issues: string[] = [];
  const attempt = <T>(f: () => T): T | undefined => {
    try {
      return f();
    } catch (e) {
      if (e instanceof ConfigError) issues.push(...e.issues);
      else throw e;
      return undefined;
    }
  };
  const env = attempt(() => parseEnvConfig(obj.env, 'env'));
  const agent = attempt(() => parseConfig(agentConfigSchema, obj.agent ?? {}, 'agent'));
  const train = attempt(() => parseConfig(trainSchema, obj.train ?? {}, 'train'));
  const evaluation = attempt(() => parseConfig(evaluationSchema, obj.evaluation ?? {}, 'evaluation'));
  const baselines = attempt(() => parseConfig(baselinesSchema, obj.baselines ?? {}, 'baselines'));
  if (issues.length || !env || !agent || !train || !evaluation || !baselines) throw new ConfigError(issues);

  if (evaluation.episodeLength !== undefined && evaluation.discardDecisions >= evaluation.episodeLength) {
    issues.push(
      `evaluation.discardDecisions: expected fewer than evaluation.episodeLength (${evaluation.episodeLength}) (got ${evaluation.discardDecisions})`,
    );
  }
  checkDiscard('evaluation', evaluation.discardDecisions, evaluation.episodeLength, env, issues);
  if (train.validation.discardDecisions !== null) {
    const valLen = train.validation.episodeLength ?? evaluation.episodeLength;
    if (valLen !== undefined && train.validation.discardDecisions >= valLen) {
      issues.push(`train.validation.discardDecisions: expected fewer than the validation episode length (${valLen}) (got ${train.validation.discardDecisions})`);
    } else checkDiscard('train.validation', train.validation.discardDecisions, valLen, env, issues);
  } else if (train.validation.episodeLength !== null && evaluation.discardDecisions >= train.validation.episodeLength) {
    issues.push(
      `train.validation.episodeLength: expected more than the discarded decisions (evaluation.discardDecisions = ${evaluation.discardDecisions}) (got ${train.validation.episodeLength})`,
    );
  }
  const transfer: ParsedEnvConfig[] = [];
  evaluation.transfer.forEach((over, i) => {
    const path = `evaluation.transfer[${i}]`;
    if ('kind' in over && over.kind !== env.config.kind) {
      issues.push(`${path}.kind: expected the training surrogate ${JSON.stringify(env.config.kind)} (got ${JSON.stringify(over.kind)})`);
      return;
    }
    const t = attempt(() => parseEnvConfig(mergeDeep(env.config, over), path));
    if (t) transfer.push(t);
  });
  if (issues.length) throw new ConfigError(issues);
  return { env, agent, train, evaluation, baselines, transfer, raw: obj };
}

/** `base` with the keys of `over` replaced; nested mappings are merged, arrays replaced. */
export function mergeDeep(base: Record<string, unknown>, over: Record<string, unknown>): Record<string, unknown> {
  const out: Record<string, unknown> = { ...base };
  for (const [k, v] of Object.entries(over)) {
    const b = out[k];
    const isMap = (x: unknown): x is Record<string, unknown> => !!x && typeof x === 'object' && !Array.isArray(x);
    out[k] = isMap(b) && isMap(v) ? mergeDeep(b, v) : v;
  }
  return out;
}

/** Read a YAML config file; a missing file or a YAML syntax error is a ConfigError. */
export function loadRunConfig(path: string): RunConfig {
  return parseRunConfig(readYamlFile(path, 'config file'));
}

/** Parse a YAML file; unreadable files and syntax errors are ConfigErrors naming the file. */
export function readYamlFile(path: string, what: string): unknown {
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (e) {
    throw new ConfigError([`${path}: cannot read the ${what} (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`]);
  }
  try {
    return parseYaml(text);
  } catch (e) {
    throw new ConfigError([`${path}: not valid YAML: ${(e as Error).message.split('\n')[0]}`]);
  }
}

/**
 * The fully resolved config as plain data (every default filled in), in section order. Parsing
 * it again gives the same config: it is what a run directory's config.yaml holds.
 */
export function resolvedConfig(cfg: RunConfig): Record<string, unknown> {
  const plain = (x: unknown): unknown => JSON.parse(JSON.stringify(x));
  return {
    env: plain(cfg.env.config),
    agent: plain(cfg.agent),
    train: plain(cfg.train),
    evaluation: plain(cfg.evaluation),
    baselines: plain(cfg.baselines),
  };
}
