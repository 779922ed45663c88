/**
 * The sweep file (YAML; docs/sweeps.md): a base run config, the settings to vary, the seeds, the
 * evaluation each trained policy gets and the metric that ranks settings. `loadSweep` validates
 * it and expands it into a plan: one `RunTask` per (setting, seed), each carrying its fully
 * resolved run config, so a worker needs neither the sweep file nor the base config file.
 *
 * Settings are written with dotted keys into the run config (`agent.actorLr`, `env.reward.beta`);
 * a mapping value is merged into the base, other values replace it (as evaluation.transfer does).
 * Settings come from `vary` entries, each exactly one of
 *   list:  explicit settings, one mapping of dotted keys each
 *   grid:  every combination of the listed values (the last key varies fastest)
 *   draw:  `count` seeded random draws over ranges (uniform or log-uniform, integer or not, or a
 *          choice among values); more draws later keep the earlier ones
 * plus optional `with:` keys added to each of them. `common:` keys apply to every run.
 *
 * A run is identified by its setting key and its seed. The setting key hashes the resolved run
 * config apart from the seed (and the run name), together with the evaluation: the same
 * setting written differently gets the same key, and a changed base config gets new keys, so a
 * finished run is never reused for a config it was not trained with.
 */
import { createHash } from 'node:crypto';
import { basename, dirname, resolve } from 'node:path';
import { ConfigError, joinPath, parseConfig, Rng } from '@tilewise/envs';
import { z } from 'zod';
import { mergeDeep, parseRunConfig, readYamlFile, resolvedConfig, SECTIONS, type RunConfig } from '../config';
import { canonicalJson } from '../export/model';

/** Ranking metrics: what each one reads from a run and whether lower or higher is better. */
export const RANK_METRICS = {
  drag: { goal: 'min', doc: "the policy's drag analogue (e.g. P/P0) on the held-out evaluation seeds" },
  dragVsOpposition: { goal: 'min', doc: "the policy's drag analogue divided by tuned opposition control's, on the same evaluation seeds" },
  netSaving: { goal: 'max', doc: "the policy's net saving 1 - (drag + actuation cost)/reference on the evaluation seeds" },
  validationDrag: { goal: 'min', doc: 'the best validation drag analogue reached during training (no evaluation needed)' },
} as const;
export type RankMetric = keyof typeof RANK_METRICS;

const NAME_RE = /^[A-Za-z0-9][A-Za-z0-9._-]*$/;
const KEY_RE = /^[A-Za-z][A-Za-z0-9_]*(\.[A-Za-z][A-Za-z0-9_]*)*$/;
const SECTION_NAMES = ['env', ...Object.keys(SECTIONS)];

const dotted = z.record(z.string(), z.unknown());

const rangeSchema = z
  .strictObject({
    min: z.number().finite().optional().describe('Lower end of the range.'),
    max: z.number().finite().optional().describe('Upper end of the range.'),
    scale: z.enum(['linear', 'log']).default('linear').describe('Uniform on the values (linear) or on their logarithms (log) (default linear).'),
    integer: z.boolean().default(false).describe('Draw integers, both ends included (default false).'),
    choices: z.array(z.unknown()).min(1).optional().describe('Instead of a range: one of these values, each equally likely.'),
  })
  .superRefine((r, ctx) => {
    if (r.choices !== undefined) {
      if (r.min !== undefined || r.max !== undefined) ctx.addIssue({ code: 'custom', message: 'expected either choices or min/max, not both', input: r });
      return;
    }
    if (r.min === undefined || r.max === undefined) {
      ctx.addIssue({ code: 'custom', message: 'expected min and max (or choices)', input: r });
      return;
    }
    if (!(r.max > r.min)) ctx.addIssue({ code: 'custom', path: ['max'], message: `expected more than min (${r.min})`, input: r.max });
    if (r.scale === 'log' && r.min <= 0) ctx.addIssue({ code: 'custom', path: ['min'], message: 'expected a positive number for scale log', input: r.min });
    if (r.integer && Math.ceil(r.min) > Math.floor(r.max)) ctx.addIssue({ code: 'custom', path: ['max'], message: 'no integer lies in [min, max]', input: r.max });
  });

const varyEntrySchema = z
  .strictObject({
    list: z.array(dotted).min(1).optional().describe('Explicit settings, each a mapping of dotted config keys to values.'),
    grid: z
      .record(z.string(), z.array(z.unknown()).min(1))
      .optional()
      .describe('Dotted config keys, each with the values to try; every combination is a setting.'),
    draw: z
      .strictObject({
        count: z.number().int().positive().max(10000).describe('Settings drawn.'),
        seed: z.number().int().nonnegative().describe('Seed of the draws (the same seed gives the same settings).'),
        digits: z
          .number()
          .int()
          .min(1)
          .max(17)
          .nullable()
          .default(3)
          .describe('Significant digits kept of drawn non-integer numbers (default 3; null: all).'),
        ranges: z.record(z.string(), rangeSchema).describe('Dotted config keys with the range each is drawn from.'),
      })
      .optional()
      .describe('Seeded random settings.'),
    with: dotted.default({}).describe('Dotted config keys added to every setting of this entry (default none).'),
  })
  .superRefine((e, ctx) => {
    const kinds = (['list', 'grid', 'draw'] as const).filter((k) => e[k] !== undefined);
    if (kinds.length !== 1) {
      ctx.addIssue({ code: 'custom', message: 'expected exactly one of list, grid or draw', input: kinds });
    }
    if (e.grid && Object.keys(e.grid).length === 0) ctx.addIssue({ code: 'custom', path: ['grid'], message: 'expected at least one key', input: e.grid });
    if (e.draw && Object.keys(e.draw.ranges).length === 0) ctx.addIssue({ code: 'custom', path: ['draw', 'ranges'], message: 'expected at least one key', input: e.draw.ranges });
  });

export const sweepSchema = z
  .strictObject({
    name: z.string().regex(NAME_RE, 'expected letters, digits, ".", "_" or "-"').optional().describe("The sweep's name: its output directory and queue job ids (default: the file's base name)."),
    base: z
      .union([z.string().min(1), z.record(z.string(), z.unknown())], { error: 'expected a config file name or an inline config mapping' })
      .describe('The base run config: a config file (relative to the sweep file) or an inline config mapping.'),
    common: dotted.default({}).describe('Dotted config keys applied to every run (default none).'),
    vary: z.array(varyEntrySchema).default([]).describe('The settings (default none: the base config alone).'),
    seeds: z
      .union([
        z.array(z.number().int().nonnegative()).min(1),
        z.strictObject({
          first: z.number().int().nonnegative().default(1).describe('First seed (default 1).'),
          count: z.number().int().positive().max(10000).describe('Seeds first, first + 1, ...'),
        }),
      ], { error: 'expected a list of seeds or { first, count }' })
      .default([1, 2, 3])
      .describe('Run seeds (train.seed) of every setting: a list, or { first, count } (default [1, 2, 3]).'),
    evaluate: z
      .strictObject({
        enabled: z.boolean().default(true).describe('Evaluate every trained policy against the baselines (default true).'),
        policy: z.enum(['best', 'latest']).default('best').describe('Which policy of a run is evaluated (default best).'),
        episodes: z.number().int().min(2).nullable().default(null).describe("Evaluation episodes per controller (default: the config's evaluation.episodes)."),
        transfer: z.boolean().default(false).describe("Also evaluate on the config's evaluation.transfer domains (default false)."),
      })
      .prefault({})
      .describe('The evaluation of each trained policy (as tilewise evaluate).'),
    rank: z
      .strictObject({
        metric: z
          .enum(Object.keys(RANK_METRICS) as [RankMetric, ...RankMetric[]])
          .default('drag')
          .describe(`What ranks settings: ${Object.entries(RANK_METRICS).map(([k, v]) => `${k} (${v.goal}imum: ${v.doc})`).join('; ')} (default drag).`),
        domain: z.string().regex(/^(train|transfer-[1-9][0-9]*)$/, 'expected train or transfer-<n>').default('train').describe('Evaluated domain the metric is read on (default train).'),
      })
      .prefault({})
      .describe('The ranking of settings (mean over seeds).'),
    retry: z
      .strictObject({
        attempts: z.number().int().min(1).max(100).default(3).describe('Tries per run, the first included (default 3).'),
        backoffSeconds: z.number().nonnegative().finite().default(10).describe('Wait before the second try; it doubles with each further try (default 10).'),
      })
      .prefault({})
      .describe('Retries of failed runs; a retry resumes from the run\'s last checkpoint.'),
  })
  .superRefine((s, ctx) => {
    if (Array.isArray(s.seeds)) {
      const seen = new Set<number>();
      s.seeds.forEach((v, i) => {
        if (seen.has(v)) ctx.addIssue({ code: 'custom', path: ['seeds', i], message: 'expected distinct seeds (this one is repeated)', input: v });
        seen.add(v);
      });
    }
    if (s.rank.metric !== 'validationDrag' && !s.evaluate.enabled) {
      ctx.addIssue({ code: 'custom', path: ['rank', 'metric'], message: 'needs evaluate.enabled (or rank by validationDrag)', input: s.rank.metric });
    }
    if (s.rank.domain !== 'train' && !s.evaluate.transfer) {
      ctx.addIssue({ code: 'custom', path: ['rank', 'domain'], message: 'a transfer domain needs evaluate.transfer: true', input: s.rank.domain });
    }
    if (s.rank.domain !== 'train' && s.rank.metric === 'validationDrag') {
      ctx.addIssue({ code: 'custom', path: ['rank', 'domain'], message: 'validationDrag is measured on the training domain only', input: s.rank.domain });
    }
  });

export type SweepFile = z.output<typeof sweepSchema>;
export type EvaluateSpec = SweepFile['evaluate'];
export type RankSpec = SweepFile['rank'];
export type RetrySpec = SweepFile['retry'];

/** One setting: the dotted keys it changes (beyond `common`) and where each value came from. */
export interface Setting {
  /** Hash of the resolved config (seed and name excepted) and the evaluation: 10 hex digits. */
  readonly key: string;
  /** Readable form of `values`, e.g. "agent.actorLr=0.0003 agent.gamma=0.98" ("base" when empty). */
  readonly label: string;
  readonly values: Readonly<Record<string, unknown>>;
  /** The vary entry it came from, e.g. "vary[1].grid" ("base" for the base alone). */
  readonly origin: string;
  /** Directory of its runs, relative to the sweep's runs directory: "<label slug>-<key>". */
  readonly dir: string;
  /** Resolved run config (plain data) with train.seed still the base's. */
  readonly config: Record<string, unknown>;
}

/** What names a run: its sweep, its setting (key, label, values) and its seed. */
export interface RunIdentity extends Pick<Setting, 'key' | 'label' | 'values'> {
  readonly sweep: string;
  /** "<setting key>-seed<seed>": the result's file name and (with the sweep name) the queue job id. */
  readonly id: string;
  readonly seed: number;
}

/** One run of the plan: what a worker needs, and nothing that lives only on the controller. */
export interface RunTask extends RunIdentity {
  readonly format: 'tilewise-sweep-task/1';
  /** Run directory relative to the sweep's runs directory: "<setting dir>/seed<seed>". */
  readonly runPath: string;
  /** The resolved run config with train.seed = seed. */
  readonly config: Record<string, unknown>;
  readonly evaluate: EvaluateSpec;
}

export interface Sweep {
  readonly name: string;
  /** The sweep file (absolute), or null for a sweep given as data. */
  readonly file: string | null;
  readonly settings: readonly Setting[];
  readonly seeds: readonly number[];
  readonly evaluate: EvaluateSpec;
  readonly rank: RankSpec;
  readonly retry: RetrySpec;
  /** settings x seeds, setting-major. */
  readonly tasks: readonly RunTask[];
  /** The dotted keys some setting changes, in order of first appearance (aggregate columns). */
  readonly varied: readonly string[];
}

/** Read and validate a sweep file. */
export function loadSweep(path: string): Sweep {
  const file = resolve(path);
  return parseSweep(readYamlFile(file, 'sweep file'), { file });
}

/**
 * Validate sweep data and expand it into its settings and runs. `file` names the sweep file:
 * the default name and the directory a base config path is relative to.
 */
export function parseSweep(raw: unknown, o: { file?: string } = {}): Sweep {
  if (!raw || typeof raw !== 'object' || Array.isArray(raw)) {
    throw new ConfigError([`(top level): expected a mapping with base:, vary:, seeds:, ... (got ${JSON.stringify(raw) ?? 'nothing'})`]);
  }
  const s = parseConfig(sweepSchema, raw, '');
  const file = o.file ? resolve(o.file) : null;
  const name = s.name ?? (file ? basename(file).replace(/\.(ya?ml)$/i, '') : 'sweep');
  if (!NAME_RE.test(name)) {
    throw new ConfigError([`name: the file name ${JSON.stringify(name)} cannot name the sweep (letters, digits, ".", "_" or "-"); give name: explicitly`]);
  }
  const issues: string[] = [];
  checkKeys(s.common, 'common', issues);
  s.vary.forEach((e, i) => {
    const at = `vary[${i}]`;
    checkKeys(e.with, `${at}.with`, issues);
    e.list?.forEach((m, j) => checkKeys(m, `${at}.list[${j}]`, issues));
    if (e.grid) checkKeys(e.grid, `${at}.grid`, issues);
    if (e.draw) checkKeys(e.draw.ranges, `${at}.draw.ranges`, issues);
  });
  if (issues.length) throw new ConfigError(issues);

  const base = loadBase(s.base, file);
  const seeds = Array.isArray(s.seeds) ? [...s.seeds] : Array.from({ length: s.seeds.count }, (_, i) => (s.seeds as { first: number }).first + i);
  const drafts = expandSettings(s);
  const settings: Setting[] = [];
  const byKey = new Map<string, Setting>();
  for (const d of drafts) {
    const cfg = settingConfig(base, s.common, d, issues);
    if (!cfg) continue;
    const transfers = cfg.transfer.length;
    const m = /^transfer-(\d+)$/.exec(s.rank.domain);
    if (m && Number(m[1]) > transfers) {
      issues.push(`rank.domain: setting "${d.label}" (${d.origin}) has ${transfers} transfer domain${transfers === 1 ? '' : 's'} in evaluation.transfer (got ${JSON.stringify(s.rank.domain)})`);
      continue;
    }
    const plain = resolvedConfig(cfg) as { train: Record<string, unknown> } & Record<string, unknown>;
    plain.train = { ...plain.train, name, finalEvaluation: false };
    const key = settingKey(plain, s.evaluate);
    const prev = byKey.get(key);
    if (prev) {
      issues.push(`${d.origin}: setting "${d.label}" gives the same run config as ${prev.origin} ("${prev.label}")`);
      continue;
    }
    const setting: Setting = { key, label: d.label, values: d.values, origin: d.origin, dir: `${slug(d.label)}-${key}`, config: plain };
    byKey.set(key, setting);
    settings.push(setting);
  }
  if (issues.length) throw new ConfigError([...new Set(issues)]);

  const tasks: RunTask[] = [];
  for (const st of settings) {
    for (const seed of seeds) {
      const train = { ...(st.config.train as Record<string, unknown>), seed };
      tasks.push({
        format: 'tilewise-sweep-task/1',
        sweep: name,
        id: `${st.key}-seed${seed}`,
        key: st.key,
        label: st.label,
        values: st.values,
        seed,
        runPath: `${st.dir}/seed${seed}`,
        config: { ...st.config, train },
        evaluate: s.evaluate,
      });
    }
  }
  const varied: string[] = [];
  for (const st of settings) for (const k of Object.keys(st.values)) if (!varied.includes(k)) varied.push(k);
  return { name, file, settings, seeds, evaluate: s.evaluate, rank: s.rank, retry: s.retry, tasks, varied };
}

/** The hash that names a setting (10 hex digits of SHA-256). */
export function settingKey(config: Record<string, unknown>, evaluate: EvaluateSpec): string {
  const train = { ...(config.train as Record<string, unknown>) };
  delete train.seed;
  delete train.name;
  return createHash('sha256')
    .update(canonicalJson({ config: { ...config, train }, evaluate }))
    .digest('hex')
    .slice(0, 10);
}

/** Dotted keys must be well formed, start with a config section, and leave the seed and name to the sweep. */
function checkKeys(m: Record<string, unknown>, at: string, issues: string[]): void {
  for (const k of Object.keys(m)) {
    const path = joinPath(at, [k]);
    if (!KEY_RE.test(k)) issues.push(`${path}: expected a dotted config key such as agent.actorLr (got ${JSON.stringify(k)})`);
    else if (!SECTION_NAMES.includes(k.split('.')[0]!)) issues.push(`${path}: expected a key in one of the config sections ${SECTION_NAMES.join(', ')} (got ${JSON.stringify(k)})`);
    else if (k === 'train.seed' || k === 'train') {
      if (k === 'train.seed' || (m[k] && typeof m[k] === 'object' && 'seed' in (m[k] as object))) {
        issues.push(`${path}: the run seeds come from seeds:, not from train.seed (got ${JSON.stringify(m[k])})`);
      }
    } else if (k === 'train.name') issues.push(`${path}: the sweep names its runs (got ${JSON.stringify(m[k])})`);
  }
}

/** The base config: a file relative to the sweep file, or inline data; validated on its own first. */
function loadBase(base: string | Record<string, unknown>, file: string | null): Record<string, unknown> {
  let raw: unknown = base;
  let where = 'base';
  if (typeof base === 'string') {
    const path = resolve(file ? dirname(file) : '.', base);
    where = `base (${path})`;
    try {
      raw = readYamlFile(path, 'base config');
    } catch (e) {
      if (e instanceof ConfigError) throw new ConfigError(e.issues.map((i) => `base: ${i}`));
      throw e;
    }
  }
  try {
    parseRunConfig(raw);
  } catch (e) {
    if (e instanceof ConfigError) throw new ConfigError(e.issues.map((i) => `${where}: ${i}`));
    throw e;
  }
  return raw as Record<string, unknown>;
}

interface Draft {
  readonly values: Record<string, unknown>;
  /** Sweep-file path of each value, e.g. values["agent.gamma"] came from vary[1].grid.agent.gamma[2]. */
  readonly sources: Record<string, string>;
  readonly origin: string;
  readonly label: string;
}

/** Every setting of the vary entries, in file order (the base alone when there are none). */
function expandSettings(s: SweepFile): Draft[] {
  if (s.vary.length === 0) return [{ values: {}, sources: {}, origin: 'base', label: 'base' }];
  const out: Draft[] = [];
  s.vary.forEach((e, i) => {
    const at = `vary[${i}]`;
    const parts: Array<{ values: Record<string, unknown>; sources: Record<string, string>; origin: string }> = [];
    if (e.list) {
      e.list.forEach((m, j) => {
        const origin = `${at}.list[${j}]`;
        parts.push({ values: { ...m }, sources: Object.fromEntries(Object.keys(m).map((k) => [k, joinPath(origin, [k])])), origin });
      });
    } else if (e.grid) {
      const keys = Object.keys(e.grid);
      const idx = keys.map(() => 0);
      for (;;) {
        const values: Record<string, unknown> = {};
        const sources: Record<string, string> = {};
        keys.forEach((k, d) => {
          values[k] = e.grid![k]![idx[d]!];
          sources[k] = joinPath(`${at}.grid`, [k, idx[d]!]);
        });
        parts.push({ values, sources, origin: `${at}.grid` });
        let d = keys.length - 1;
        while (d >= 0 && ++idx[d]! >= e.grid[keys[d]!]!.length) idx[d--] = 0;
        if (d < 0) break;
      }
    } else if (e.draw) {
      const rng = Rng.derive(e.draw.seed, `tilewise/sweep/draw`);
      for (let n = 0; n < e.draw.count; n++) {
        const values: Record<string, unknown> = {};
        const sources: Record<string, string> = {};
        for (const [k, r] of Object.entries(e.draw.ranges)) {
          values[k] = drawValue(rng, r, e.draw.digits);
          sources[k] = joinPath(`${at}.draw.ranges`, [k]);
        }
        parts.push({ values, sources, origin: `${at}.draw[${n}]` });
      }
    }
    for (const p of parts) {
      const values = { ...e.with, ...p.values };
      const sources = { ...Object.fromEntries(Object.keys(e.with).map((k) => [k, joinPath(`${at}.with`, [k])])), ...p.sources };
      out.push({ values, sources, origin: p.origin, label: labelOf(values) });
    }
  });
  return out;
}

/**
 * One value from a range. The draws of one entry come from one stream, key by key in file
 * order, so raising `count` keeps the earlier settings.
 */
export function drawValue(rng: Rng, r: z.output<typeof rangeSchema>, digits: number | null): unknown {
  if (r.choices) return r.choices[rng.int(r.choices.length)];
  const min = r.min!;
  const max = r.max!;
  if (r.integer) {
    const lo = Math.ceil(min);
    const hi = Math.floor(max);
    // log: each integer gets the log-width of [k - 1/2, k + 1/2] (lo >= 1 since min > 0).
    if (r.scale === 'log') return Math.min(hi, Math.max(lo, Math.round(Math.exp(rng.uniformIn(Math.log(lo - 0.5), Math.log(hi + 0.5))))));
    return lo + rng.int(hi - lo + 1);
  }
  const x = r.scale === 'log' ? Math.exp(rng.uniformIn(Math.log(min), Math.log(max))) : rng.uniformIn(min, max);
  const v = digits === null ? x : Number(x.toPrecision(digits));
  return Math.min(max, Math.max(min, v));
}

/** "k=v k=v" with compact JSON values ("base" for none). */
export function labelOf(values: Readonly<Record<string, unknown>>): string {
  const parts = Object.entries(values).map(([k, v]) => `${k}=${typeof v === 'string' ? v : JSON.stringify(v)}`);
  return parts.length ? parts.join(' ') : 'base';
}

/** A directory-safe short form of a label. */
function slug(label: string): string {
  const s = label
    .replace(/[^A-Za-z0-9.=-]+/g, '_')
    .replace(/=/g, '-')
    .replace(/^[_.-]+|[_.-]+$/g, '')
    .slice(0, 48)
    .replace(/[_.-]+$/, '');
  return s || 'setting';
}

/** `{ "a.b": 1 }` as `{ a: { b: 1 } }`. */
export function expandDotted(m: Readonly<Record<string, unknown>>): Record<string, unknown> {
  let out: Record<string, unknown> = {};
  for (const [k, v] of Object.entries(m)) {
    const parts = k.split('.');
    let node: unknown = v;
    for (let i = parts.length - 1; i >= 0; i--) node = { [parts[i]!]: node };
    out = mergeDeep(out, node as Record<string, unknown>);
  }
  return out;
}

/**
 * The parsed run config of one setting. Problems are reported at the sweep-file path of the
 * value that caused them when it can be told, else at the setting's origin.
 */
function settingConfig(base: Record<string, unknown>, common: Record<string, unknown>, d: Draft, issues: string[]): RunConfig | null {
  const raw = mergeDeep(mergeDeep(base, expandDotted(common)), expandDotted(d.values));
  try {
    return parseRunConfig(raw);
  } catch (e) {
    if (!(e instanceof ConfigError)) throw e;
    const sources: Record<string, string> = { ...Object.fromEntries(Object.keys(common).map((k) => [k, joinPath('common', [k])])), ...d.sources };
    // Longest key first, so "agent.actor.hidden" wins over "agent.actor".
    const keys = Object.keys(sources).sort((a, b) => b.length - a.length);
    for (const issue of e.issues) {
      const path = issue.split(': ')[0] ?? '';
      const unknown = /unknown keys? (.+)$/.exec(issue)?.[1]?.split(', ') ?? [];
      const under = (p: string, k: string): boolean => p === k || p.startsWith(`${k}.`) || p.startsWith(`${k}[`);
      const hit = keys.find((k) => under(path, k) || unknown.some((u) => under(u, k)));
      issues.push(hit ? `${sources[hit]}: ${issue}` : `${d.origin} (setting "${d.label}"): ${issue}`);
    }
    return null;
  }
}
