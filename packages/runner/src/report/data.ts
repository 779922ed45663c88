/**
 * Reading what a report shows, with errors that name the file and what is wrong:
 *
 *   <run>/config.yaml, summary.json, log.jsonl       a training run (docs/runner.md)
 *   <run>/evaluation/<domain>/evaluation.json        an evaluation (docs/evaluation-format.md)
 *   <run>/evaluation/<domain>/series.twdata
 *
 * An input is a run directory, an evaluation directory (holding <domain>/evaluation.json, as
 * written by `tilewise evaluate --out` or `tilewise transfer --out`), one domain directory
 * (holding evaluation.json itself), or a sweep aggregate (.json or .csv) whose rows name run
 * directories (see `readSweepAggregate`). Everything is validated before use: a report never
 * plots a half-read file.
 */
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { basename, dirname, join, resolve } from 'node:path';
import { decodeContainer, getBlock } from '@tilewise/agent';
import { parse as parseYaml } from 'yaml';
import { z } from 'zod';
import { EVALUATION_FORMAT, SERIES_KIND } from '../evaluation';
import type { Recording } from '../recorder';
import { RUN_FILES } from '../trainer';

/** Bad input: the message starts with the file (or directory) and says what is wrong. */
export class ReportInputError extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'ReportInputError';
  }
}

const fail = (where: string, what: string): never => {
  throw new ReportInputError(`${where}: ${what}`);
};

function zodProblems(e: z.ZodError): string {
  return e.issues
    .slice(0, 5)
    .map((i) => `${i.path.length ? i.path.map((p) => (typeof p === 'number' ? `[${p}]` : `.${String(p)}`)).join('').replace(/^\./, '') : '(top level)'}: ${i.message}`)
    .join('; ');
}

function readJson(path: string, what: string): unknown {
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (e) {
    return fail(path, `cannot read the ${what} (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`);
  }
  try {
    return JSON.parse(text);
  } catch (e) {
    return fail(path, `the ${what} is not valid JSON (${(e as Error).message})`);
  }
}

function parseWith<T>(schema: z.ZodType<T>, value: unknown, path: string, what: string): T {
  const r = schema.safeParse(value);
  if (!r.success) fail(path, `not a valid ${what}: ${zodProblems(r.error)}`);
  return r.data as T;
}

// ---------------------------------------------------------------------------------------------
// evaluation.json
// ---------------------------------------------------------------------------------------------

const num = z.number();
const nnum = z.number().nullable();
const ciSchema = z.looseObject({ mean: num, halfWidth: nnum, sd: nnum, n: z.number().int() }).nullable();

const evaluationSchema = z.looseObject({
  format: z.literal(EVALUATION_FORMAT),
  label: z.string(),
  kind: z.string(),
  dragName: z.string(),
  tiles: z.number().int().positive(),
  env: z.record(z.string(), z.unknown()),
  reference: z.looseObject({ mean: num, ci95: num }),
  protocol: z.looseObject({
    seeds: z.array(z.number()),
    episodeLength: z.number().int().positive(),
    discardDecisions: z.number().int().nonnegative(),
  }),
  opposition: z
    .looseObject({
      bestAlpha: num,
      sweep: z.array(z.looseObject({ alpha: num, drag: ciSchema, netSaving: ciSchema })),
    })
    .nullable(),
  controllers: z
    .array(
      z.looseObject({
        name: z.string(),
        role: z.enum(['policy', 'none', 'opposition', 'random']),
        episodes: z.number().int(),
        divergedEpisodes: z.number().int(),
        drag: ciSchema,
        netSaving: ciSchema,
        actuationPower: ciSchema,
        atBounds: ciSchema,
        perEpisode: z.array(
          z.looseObject({ seed: z.number(), drag: nnum, netSaving: nnum, actuationPower: nnum, atBounds: nnum, diverged: z.boolean() }),
        ),
      }),
    )
    .min(1),
  caution: z.string().optional(),
});

export type EvaluationSummary = z.infer<typeof evaluationSchema>;
export type ControllerSummary = EvaluationSummary['controllers'][number];

// ---------------------------------------------------------------------------------------------
// series.twdata
// ---------------------------------------------------------------------------------------------

const seriesMetaSchema = z.looseObject({
  format: z.literal(EVALUATION_FORMAT),
  label: z.string(),
  episodes: z.number().int().positive(),
  decisions: z.number().int().positive(),
  discardDecisions: z.number().int().nonnegative(),
  actuators: z.number().int().nonnegative(),
  controlInterval: z.number().positive(),
  actionBound: z.number().positive(),
  controllers: z.array(z.looseObject({ prefix: z.string(), name: z.string(), role: z.string(), fieldSize: z.number().int().nonnegative() })),
});

/**
 * One controller's recorded series (recorder.ts `Recording`: drag and power [E, D], actions and
 * signal [E, D, A], field snapshots [F, fieldSize] with fieldIndex [F, 2], histogram [bins]).
 */
export interface ControllerSeries extends Recording {
  readonly name: string;
  readonly role: string;
}

export interface SeriesData {
  readonly episodes: number;
  readonly decisions: number;
  readonly discardDecisions: number;
  readonly actuators: number;
  readonly controlInterval: number;
  readonly actionBound: number;
  readonly controllers: readonly ControllerSeries[];
}

/** Read and check series.twdata: every block present with the size the metadata implies. */
export function readSeries(path: string): SeriesData {
  let bytes: Uint8Array;
  try {
    bytes = readFileSync(path);
  } catch (e) {
    return fail(path, `cannot read the evaluation series (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`);
  }
  let bundle;
  try {
    bundle = decodeContainer(bytes, SERIES_KIND, path);
  } catch (e) {
    return fail(path, (e as Error).message.replace(`${path}: `, ''));
  }
  const m = parseWith(seriesMetaSchema, bundle.meta, path, 'evaluation series header');
  const { episodes: E, decisions: D, actuators: A } = m;
  const block = <D2 extends 'f32' | 'i32' | 'u32'>(name: string, dtype: D2, length?: number) => {
    try {
      return getBlock(bundle, name, dtype, length, path);
    } catch (e) {
      return fail(path, (e as Error).message.replace(`${path}: `, ''));
    }
  };
  const controllers = m.controllers.map((c): ControllerSeries => {
    const p = c.prefix;
    const fieldIndex = block(`${p}/fieldIndex`, 'i32');
    const F = fieldIndex.length / 2;
    if (!Number.isInteger(F)) fail(path, `block "${p}/fieldIndex" has an odd length ${fieldIndex.length} (expected pairs of episode, decision)`);
    for (let f = 0; f < F; f++) {
      const e = fieldIndex[2 * f]!;
      const d = fieldIndex[2 * f + 1]!;
      if (e < 0 || e >= E || d < 0 || d > D) fail(path, `block "${p}/fieldIndex" entry ${f} is (${e}, ${d}), outside ${E} episodes x ${D} decisions`);
    }
    return {
      name: c.name,
      role: c.role,
      drag: block(`${p}/drag`, 'f32', E * D),
      power: block(`${p}/power`, 'f32', E * D),
      actions: block(`${p}/actions`, 'f32', E * D * A),
      signal: block(`${p}/signal`, 'f32', E * D * A),
      field: block(`${p}/field`, 'f32', F * c.fieldSize),
      fieldIndex,
      fieldSize: c.fieldSize,
      histogram: block(`${p}/histogram`, 'u32'),
    };
  });
  return { episodes: E, decisions: D, discardDecisions: m.discardDecisions, actuators: A, controlInterval: m.controlInterval, actionBound: m.actionBound, controllers };
}

// ---------------------------------------------------------------------------------------------
// Domains (one evaluation.json + series.twdata)
// ---------------------------------------------------------------------------------------------

export interface DomainData {
  readonly dir: string;
  readonly label: string;
  readonly summary: EvaluationSummary;
  /** null when the domain has no series.twdata (statistics only). */
  readonly series: SeriesData | null;
}

export function readDomain(dir: string): DomainData {
  const jsonPath = join(dir, 'evaluation.json');
  const summary = parseWith(evaluationSchema, readJson(jsonPath, 'evaluation summary'), jsonPath, `evaluation summary (${EVALUATION_FORMAT})`);
  const seriesPath = join(dir, 'series.twdata');
  const series = existsSync(seriesPath) ? readSeries(seriesPath) : null;
  if (series) {
    const names = summary.controllers.map((c) => c.name);
    const recorded = series.controllers.map((c) => c.name);
    if (JSON.stringify(names) !== JSON.stringify(recorded)) {
      fail(seriesPath, `its controllers ${JSON.stringify(recorded)} differ from those of ${jsonPath} ${JSON.stringify(names)} (files of different evaluations?)`);
    }
    if (series.episodes !== summary.protocol.seeds.length || series.decisions !== summary.protocol.episodeLength) {
      fail(seriesPath, `${series.episodes} episodes of ${series.decisions} decisions, but ${jsonPath} says ${summary.protocol.seeds.length} of ${summary.protocol.episodeLength}`);
    }
  }
  return { dir, label: summary.label, summary, series };
}

/** Domain directories under an evaluation directory (each holding evaluation.json), sorted with "train" first. */
export function readDomains(evalDir: string): DomainData[] {
  if (existsSync(join(evalDir, 'evaluation.json'))) return [readDomain(evalDir)];
  const subs = readdirSync(evalDir, { withFileTypes: true })
    .filter((d) => d.isDirectory() && existsSync(join(evalDir, d.name, 'evaluation.json')))
    .map((d) => d.name)
    .sort((a, b) => (a === 'train' ? -1 : b === 'train' ? 1 : a.localeCompare(b, 'en', { numeric: true })));
  return subs.map((s) => readDomain(join(evalDir, s)));
}

// ---------------------------------------------------------------------------------------------
// Runs (config.yaml, summary.json, log.jsonl)
// ---------------------------------------------------------------------------------------------

/** What the learning curves need from log.jsonl. */
export interface RunLog {
  /** train/episode_return of each finished episode (diverged ones included), by step. */
  readonly episodes: ReadonlyArray<{ readonly step: number; readonly ret: number; readonly diverged: boolean }>;
  /** train/critic_loss of each log interval (mean over its updates), by step. */
  readonly critic: ReadonlyArray<{ readonly step: number; readonly loss: number }>;
  /** Periodic validation on held-out seeds: eval/drag_ratio and its 95% half-width. */
  readonly validations: ReadonlyArray<{ readonly step: number; readonly drag: number | null; readonly halfWidth: number | null }>;
}

/** Parse log.jsonl: every line a JSON object with a string msg and numeric step. A truncated last line (a killed writer) is skipped. */
export function readRunLog(path: string): RunLog {
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (e) {
    return fail(path, `cannot read the run log (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`);
  }
  const lines = text.split('\n');
  const episodes: Array<{ step: number; ret: number; diverged: boolean }> = [];
  const critic: Array<{ step: number; loss: number }> = [];
  const validations: Array<{ step: number; drag: number | null; halfWidth: number | null }> = [];
  const numOrNull = (v: unknown, line: number, key: string): number | null => {
    if (v === null || v === undefined) return null;
    if (typeof v !== 'number') fail(`${path}:${line}`, `"${key}" is ${JSON.stringify(v)}, expected a number or null`);
    return v as number;
  };
  lines.forEach((raw, i) => {
    const line = i + 1;
    if (raw.trim() === '') return;
    let rec: Record<string, unknown>;
    try {
      rec = JSON.parse(raw) as Record<string, unknown>;
    } catch (e) {
      if (i === lines.length - 1) return; // a line cut short by a killed process: no newline after it
      return fail(`${path}:${line}`, `not a JSON line (${(e as Error).message})`);
    }
    if (rec === null || typeof rec !== 'object' || Array.isArray(rec)) fail(`${path}:${line}`, 'expected a JSON object');
    if (typeof rec.msg !== 'string') fail(`${path}:${line}`, 'the record has no "msg" (not a tilewise run log?)');
    if (rec.msg === 'error') return;
    const step = rec.step;
    if (typeof step !== 'number' || !Number.isInteger(step) || step < 0) fail(`${path}:${line}`, `"step" is ${JSON.stringify(step)}, expected an integer >= 0`);
    const s = step as number;
    if (rec.msg === 'episode') {
      const ret = numOrNull(rec['train/episode_return'], line, 'train/episode_return');
      if (ret !== null) episodes.push({ step: s, ret, diverged: rec['train/episode_diverged'] === true });
    } else if (rec.msg === 'train') {
      const loss = numOrNull(rec['train/critic_loss'], line, 'train/critic_loss');
      if (loss !== null) critic.push({ step: s, loss });
    } else if (rec.msg === 'validation') {
      validations.push({ step: s, drag: numOrNull(rec['eval/drag_ratio'], line, 'eval/drag_ratio'), halfWidth: numOrNull(rec['eval/drag_ratio_ci95'], line, 'eval/drag_ratio_ci95') });
    }
  });
  return { episodes, critic, validations };
}

const summarySchema = z.looseObject({
  format: z.literal('tilewise-run-summary/1'),
  status: z.string(),
  name: z.string(),
  seed: z.number().int(),
  kind: z.string(),
  dragName: z.string(),
  steps: z.number().int().nonnegative(),
  updates: z.number().int().nonnegative(),
  trainSeconds: z.number(),
  best: z.looseObject({ step: z.number(), drag: nnum, halfWidth: nnum }).nullable(),
});
export type RunSummaryData = z.infer<typeof summarySchema>;

export interface RunData {
  /** Absolute path of the run (or evaluation) directory. */
  readonly dir: string;
  /** Display name: the run directory's name. */
  readonly name: string;
  readonly seed: number | null;
  /** Runs with equal keys differ only in their seed (train.seed, train.name). */
  readonly settingKey: string;
  /** Name of the setting the run belongs to (config name, or the sweep's setting). */
  settingLabel: string;
  readonly config: Record<string, unknown> | null;
  readonly summary: RunSummaryData | null;
  readonly log: RunLog | null;
  readonly domains: readonly DomainData[];
}

/** JSON with sorted keys: equal objects give equal strings. */
export function canonicalJson(v: unknown): string {
  if (Array.isArray(v)) return `[${v.map(canonicalJson).join(',')}]`;
  if (v && typeof v === 'object') {
    return `{${Object.keys(v as object)
      .sort()
      .map((k) => `${JSON.stringify(k)}:${canonicalJson((v as Record<string, unknown>)[k])}`)
      .join(',')}}`;
  }
  return JSON.stringify(v) ?? 'null';
}

/** The setting a config belongs to: the config without train.seed and train.name. */
export function settingKeyOf(config: Record<string, unknown>): string {
  const train = { ...((config.train as Record<string, unknown> | undefined) ?? {}) };
  delete train.seed;
  delete train.name;
  return canonicalJson({ ...config, train });
}

/** Read one input directory: a run directory, an evaluation directory or a domain directory. */
export function readInputDir(path: string): RunData {
  const dir = resolve(path);
  if (!existsSync(dir)) fail(path, 'no such run or evaluation directory');
  if (!statSync(dir).isDirectory()) fail(path, 'expected a run directory, an evaluation directory or a sweep aggregate (.json, .csv)');
  const configPath = join(dir, RUN_FILES.config);
  if (existsSync(configPath)) {
    let config: unknown;
    try {
      config = parseYaml(readFileSync(configPath, 'utf8'));
    } catch (e) {
      return fail(configPath, `not valid YAML: ${(e as Error).message.split('\n')[0]}`);
    }
    if (!config || typeof config !== 'object' || Array.isArray(config)) fail(configPath, 'expected a mapping of config sections');
    const summaryPath = join(dir, RUN_FILES.summary);
    const summary = existsSync(summaryPath) ? parseWith(summarySchema, readJson(summaryPath, 'run summary'), summaryPath, 'run summary (tilewise-run-summary/1)') : null;
    const logPath = join(dir, RUN_FILES.log);
    if (!existsSync(logPath)) fail(logPath, 'missing: the run has no log (was it started by tilewise train?)');
    const log = readRunLog(logPath);
    const evalDir = join(dir, RUN_FILES.evaluation);
    const domains = existsSync(evalDir) ? readDomains(evalDir) : [];
    const cfg = config as Record<string, unknown>;
    const trainName = (cfg.train as Record<string, unknown> | undefined)?.name;
    return {
      dir,
      name: basename(dir),
      seed: summary?.seed ?? ((cfg.train as Record<string, unknown> | undefined)?.seed as number | undefined) ?? null,
      settingKey: settingKeyOf(cfg),
      settingLabel: typeof trainName === 'string' ? trainName : (summary?.name ?? basename(dir)),
      config: cfg,
      summary,
      log,
      domains,
    };
  }
  const domains = readDomains(dir);
  if (!domains.length) {
    fail(path, `neither a run directory (no ${RUN_FILES.config}) nor an evaluation directory (no evaluation.json in it or in its subdirectories)`);
  }
  const env = canonicalJson(domains.map((d) => [d.label, d.summary.env]));
  return { dir, name: basename(dir), seed: null, settingKey: `evaluation:${env}`, settingLabel: basename(dir), config: null, summary: null, log: null, domains };
}

// ---------------------------------------------------------------------------------------------
// Sweep aggregates
// ---------------------------------------------------------------------------------------------

/** One row of a sweep aggregate, as read: the run it names and every column as text or number. */
export interface SweepRow {
  readonly runDir: string;
  readonly setting: string | null;
  readonly cells: Readonly<Record<string, string | number | boolean | null>>;
}

export interface SweepAggregate {
  readonly path: string;
  readonly columns: readonly string[];
  readonly rows: readonly SweepRow[];
  /** Rows left out (a failed or missing run, no run directory), with the reason. */
  readonly skipped: readonly string[];
}

const RUN_DIR_KEYS = ['runDir', 'run_dir', 'rundir', 'run'];
const SETTING_KEYS = ['setting', 'label', 'settingName', 'setting_name', 'name'];

/** Split one CSV line (RFC 4180: quoted fields, doubled quotes inside them). */
function csvCells(line: string, where: string): string[] {
  const out: string[] = [];
  let cur = '';
  let quoted = false;
  for (let i = 0; i < line.length; i++) {
    const ch = line[i]!;
    if (quoted) {
      if (ch === '"' && line[i + 1] === '"') {
        cur += '"';
        i++;
      } else if (ch === '"') quoted = false;
      else cur += ch;
    } else if (ch === '"' && cur === '') quoted = true;
    else if (ch === ',') {
      out.push(cur);
      cur = '';
    } else cur += ch;
  }
  if (quoted) fail(where, 'a quoted field is not closed');
  out.push(cur);
  return out;
}

function readCsvRecords(path: string, abs: string): Array<Record<string, unknown>> {
  let text: string;
  try {
    text = readFileSync(abs, 'utf8');
  } catch (e) {
    return fail(path, `cannot read the sweep aggregate (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`);
  }
  const lines = text.split(/\r?\n/).filter((l) => l.trim() !== '');
  if (lines.length < 2) fail(path, 'expected a header line and at least one row');
  const header = csvCells(lines[0]!, `${path}:1`);
  return lines.slice(1).map((l, i) => {
    const cells = csvCells(l, `${path}:${i + 2}`);
    if (cells.length !== header.length) fail(`${path}:${i + 2}`, `${cells.length} fields, the header has ${header.length}`);
    return Object.fromEntries(header.map((h, c) => [h, cells[c]!]));
  });
}

/** JSON rows: an array, an object with a `runs`/`rows` array, or per-setting `settings[].runs` (labelled by the setting). */
function jsonRecords(path: string, data: unknown): Array<Record<string, unknown>> {
  const isObj = (v: unknown): v is Record<string, unknown> => !!v && typeof v === 'object' && !Array.isArray(v);
  let list: unknown = Array.isArray(data) ? data : isObj(data) ? (Array.isArray(data.runs) ? data.runs : data.rows) : undefined;
  if (!Array.isArray(list) && isObj(data) && Array.isArray(data.settings)) {
    list = data.settings.flatMap((st, i) => {
      if (!isObj(st) || !Array.isArray(st.runs)) return fail(path, `settings[${i}]: expected an object with a "runs" array`);
      return st.runs.map((r) => (isObj(r) ? { setting: st.label ?? st.key ?? `setting ${i + 1}`, ...r } : r));
    });
  }
  if (!Array.isArray(list)) return fail(path, 'expected an array of run rows, an object with a "runs" (or "rows") array, or "settings" each with a "runs" array');
  list.forEach((r, i) => {
    if (!isObj(r)) fail(path, `runs[${i}]: expected an object`);
  });
  return list as Array<Record<string, unknown>>;
}

/**
 * A sweep's per-run aggregate, JSON or CSV. Each row is one run: it names its run directory
 * in a column `runDir` (or run_dir, rundir, run; relative paths are taken from the
 * aggregate's directory) and may name its setting in `setting` (or label, settingName,
 * setting_name, name). JSON: an array of rows, an object whose `runs` (or `rows`) is one, or
 * an object whose `settings` each carry their `runs` (labelled by the setting's `label`).
 * Rows without a run directory, or whose `status` column says other than "completed", are
 * left out and listed in `skipped`. Other columns are kept and shown as given; runs of one
 * setting are drawn as seeds of that setting.
 */
export function readSweepAggregate(path: string): SweepAggregate {
  const abs = resolve(path);
  const base = dirname(abs);
  const records = /\.csv$/i.test(path) ? readCsvRecords(path, abs) : jsonRecords(path, readJson(abs, 'sweep aggregate'));
  if (!records.length) fail(path, 'the sweep aggregate lists no runs');
  const columns = [...new Set(records.flatMap((r) => Object.keys(r)))];
  const runKey = RUN_DIR_KEYS.find((k) => columns.includes(k));
  if (!runKey) {
    fail(path, `no run directory column (expected one of ${RUN_DIR_KEYS.join(', ')}; found ${columns.join(', ')}); a per-setting table has none, give the per-run one`);
  }
  const settingKey = SETTING_KEYS.find((k) => columns.includes(k));
  const rows: SweepRow[] = [];
  const skipped: string[] = [];
  records.forEach((r, i) => {
    const dir = r[runKey!];
    const status = r.status;
    if (typeof status === 'string' && status !== '' && status !== 'completed') {
      skipped.push(`row ${i + 1}: status ${status}`);
      return;
    }
    if (dir === null || dir === undefined || dir === '') {
      skipped.push(`row ${i + 1}: no run directory`);
      return;
    }
    if (typeof dir !== 'string') fail(path, `row ${i + 1}: "${runKey}" is ${JSON.stringify(dir)}, expected a run directory`);
    const cells: Record<string, string | number | boolean | null> = {};
    for (const [k, v] of Object.entries(r)) cells[k] = v === null || ['string', 'number', 'boolean'].includes(typeof v) ? (v as string | number | boolean | null) : JSON.stringify(v);
    const setting = settingKey ? r[settingKey] : null;
    rows.push({ runDir: resolve(base, dir as string), setting: setting === null || setting === undefined || setting === '' ? null : String(setting), cells });
  });
  if (!rows.length) fail(path, `no completed run with a run directory (${skipped.length} rows left out: ${skipped.slice(0, 3).join('; ')})`);
  return { path: abs, columns, rows, skipped };
}
