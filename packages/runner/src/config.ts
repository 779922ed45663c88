/**
 * The run configuration file (YAML). Its top level is a mapping of sections; each
 * section has its own strict schema (unknown keys rejected, defaults filled in, errors
 * naming the path and the value). Sections:
 *   env:         the surrogate, validated by the registry in @tilewise/envs by its `kind`
 *   evaluation:  seeded evaluation episodes (used by `baselines`, later by evaluation of policies)
 *   baselines:   which classical baselines to run and the opposition gain sweep
 * Other commands add their sections to SECTIONS (e.g. agent:, train:).
 */
import { readFileSync } from 'node:fs';
import { ConfigError, parseConfig, parseEnvConfig, type ParsedEnvConfig } from '@tilewise/envs';
import { parse as parseYaml } from 'yaml';
import { z } from 'zod';

export const evaluationSchema = z
  .strictObject({
    seed: z.number().int().default(1).describe('Base seed; episode seeds are derived from it (default 1).'),
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

export type EvaluationConfig = z.output<typeof evaluationSchema>;
export type BaselinesConfig = z.output<typeof baselinesSchema>;

/** Known top-level sections other than env, with their schemas. */
export const SECTIONS = {
  evaluation: evaluationSchema,
  baselines: baselinesSchema,
} as const;

export interface RunConfig {
  readonly env: ParsedEnvConfig;
  readonly evaluation: EvaluationConfig;
  readonly baselines: BaselinesConfig;
  /** The raw parsed YAML (for provenance in outputs). */
  readonly raw: Record<string, unknown>;
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
  const evaluation = attempt(() => parseConfig(evaluationSchema, obj.evaluation ?? {}, 'evaluation'));
  const baselines = attempt(() => parseConfig(baselinesSchema, obj.baselines ?? {}, 'baselines'));
  if (issues.length || !env || !evaluation || !baselines) throw new ConfigError(issues);
  if (evaluation.episodeLength !== undefined && evaluation.discardDecisions >= evaluation.episodeLength) {
    throw new ConfigError([
      `evaluation.discardDecisions: expected fewer than evaluation.episodeLength (${evaluation.episodeLength}) (got ${evaluation.discardDecisions})`,
    ]);
  }
  const envLen = (env.config as { episodeLength?: number }).episodeLength;
  if (evaluation.episodeLength === undefined && envLen !== undefined && evaluation.discardDecisions >= envLen) {
    throw new ConfigError([
      `evaluation.discardDecisions: expected fewer than env.episodeLength (${envLen}) (got ${evaluation.discardDecisions})`,
    ]);
  }
  return { env, evaluation, baselines, raw: obj };
}

/** Read a YAML config file; a missing file or a YAML syntax error is a ConfigError. */
export function loadRunConfig(path: string): RunConfig {
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (e) {
    throw new ConfigError([`${path}: cannot read the config file (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`]);
  }
  let raw: unknown;
  try {
    raw = parseYaml(text);
  } catch (e) {
    throw new ConfigError([`${path}: not valid YAML: ${(e as Error).message.split('\n')[0]}`]);
  }
  return parseRunConfig(raw);
}
