/**
 * Aggregation of a sweep's run records into one row per setting (docs/sweeps.md gives the file
 * formats): over the seeds of a setting, the mean and a two-sided 95% Student-t confidence
 * interval (n - 1 degrees of freedom) of the ranking metric, of the policy's drag analogue next
 * to tuned opposition control's and no control's on the same evaluation seeds, of their ratio,
 * of the net saving and of the training time; the settings ranked by the metric's mean and the
 * best one named, with whether its interval is clear of the runner-up's.
 *
 * Each run contributes one number per quantity (its mean over evaluation episodes), so the
 * interval is over seeds: it measures how much a setting's result depends on the run seed, not
 * the episode-to-episode spread within a run. The t quantile is `studentTQuantile` of
 * @tilewise/envs (stats.ts: the t CDF through the regularised incomplete beta function,
 * Abramowitz & Stegun 1964 eq. 26.7.1, checked there against tabulated quantiles).
 */
import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import { meanWithCi } from '@tilewise/envs';
import { writeFileAtomic } from '../atomic';
import { formatDuration } from '../progress';
import { formatTable } from '../table';
import { RANK_METRICS, type RankSpec, type Sweep } from './spec';
import type { RunRecord } from './run';

export const AGGREGATE_FORMAT = 'tilewise-sweep-aggregate/1';
export const AGGREGATE_FILES = { json: 'aggregate.json', csv: 'aggregate.csv', runs: 'runs.csv' } as const;
export const CI_LEVEL = 0.95;
export const INTERVAL_METHOD =
  'two-sided Student-t interval over seeds, n - 1 degrees of freedom; quantile from @tilewise/envs stats.ts (incomplete beta, Abramowitz & Stegun 26.7.1)';
const CAUTION = 'A surrogate is not a channel flow: its drag analogue does not predict channel-flow drag.';

/** Mean and 95% interval of one quantity over the seeds of a setting (nulls where undefined). */
export interface Stat {
  readonly n: number;
  readonly mean: number | null;
  /** Half-width t_{0.975, n-1} * sd / sqrt(n); null for n < 2. */
  readonly halfWidth: number | null;
  readonly low: number | null;
  readonly high: number | null;
  /** Sample standard deviation (n - 1); null for n < 2. */
  readonly sd: number | null;
}

/** What one run contributes. */
export interface RunRow {
  readonly seed: number;
  readonly status: 'completed' | 'failed' | 'missing';
  readonly metric: number | null;
  readonly policyDrag: number | null;
  readonly oppositionDrag: number | null;
  readonly noControlDrag: number | null;
  readonly dragVsOpposition: number | null;
  readonly netSaving: number | null;
  readonly trainSeconds: number | null;
  readonly steps: number | null;
  readonly bestStep: number | null;
  readonly divergedEpisodes: number | null;
  readonly runDir: string | null;
  readonly host: string | null;
  readonly error: string | null;
}

export interface SettingRow {
  /** 1 = best; null when no run of the setting has the metric. */
  readonly rank: number | null;
  readonly key: string;
  readonly label: string;
  readonly values: Readonly<Record<string, unknown>>;
  readonly seeds: readonly number[];
  readonly completed: number;
  readonly failed: number;
  readonly metric: Stat;
  readonly policyDrag: Stat;
  readonly oppositionDrag: Stat;
  readonly noControlDrag: Stat;
  readonly dragVsOpposition: Stat;
  readonly netSaving: Stat;
  readonly trainSeconds: Stat;
  readonly steps: Stat;
  readonly runs: readonly RunRow[];
}

export interface Aggregate {
  readonly format: typeof AGGREGATE_FORMAT;
  readonly sweep: string;
  readonly createdAt: string;
  readonly metric: { readonly name: string; readonly goal: 'min' | 'max'; readonly domain: string; readonly description: string };
  readonly dragName: string | null;
  readonly interval: { readonly level: number; readonly method: string };
  readonly varied: readonly string[];
  readonly runs: { readonly planned: number; readonly completed: number; readonly failed: number; readonly missing: number };
  readonly best: { readonly key: string; readonly label: string; readonly separated: boolean | null; readonly note: string } | null;
  readonly settings: readonly SettingRow[];
  readonly caution: string;
}

/** Mean and interval of the finite numbers among `xs`. */
export function stat(xs: ReadonlyArray<number | null>): Stat {
  const v = xs.filter((x): x is number => x !== null && Number.isFinite(x));
  if (v.length === 0) return { n: 0, mean: null, halfWidth: null, low: null, high: null, sd: null };
  const m = meanWithCi(v, CI_LEVEL);
  const hw = Number.isFinite(m.halfWidth) ? m.halfWidth : null;
  return { n: m.n, mean: m.mean, halfWidth: hw, low: hw === null ? null : m.mean - hw, high: hw === null ? null : m.mean + hw, sd: Number.isFinite(m.sd) ? m.sd : null };
}

interface ControllerEntry {
  readonly role?: string;
  readonly divergedEpisodes?: number;
  readonly drag?: { readonly mean?: number } | null;
  readonly netSaving?: { readonly mean?: number } | null;
}

const num = (x: unknown): number | null => (typeof x === 'number' && Number.isFinite(x) ? x : null);

/** The numbers one finished run contributes, read from its summary. */
export function runRow(rec: RunRecord, rank: RankSpec): RunRow {
  const s = rec.summary;
  const evaluations = (Array.isArray(s.evaluation) ? s.evaluation : []) as Array<{ label?: string; controllers?: ControllerEntry[] }>;
  const domain = evaluations.find((e) => e.label === rank.domain);
  const by = (role: string): ControllerEntry | undefined => domain?.controllers?.find((c) => c.role === role);
  const policyDrag = num(by('policy')?.drag?.mean);
  const oppositionDrag = num(by('opposition')?.drag?.mean);
  const dragVsOpposition = policyDrag !== null && oppositionDrag !== null && oppositionDrag > 0 ? policyDrag / oppositionDrag : null;
  const netSaving = num(by('policy')?.netSaving?.mean);
  const validationDrag = num(s.best?.drag);
  const metric = { drag: policyDrag, dragVsOpposition, netSaving, validationDrag }[rank.metric as keyof typeof RANK_METRICS];
  return {
    seed: rec.seed,
    status: 'completed',
    metric,
    policyDrag,
    oppositionDrag,
    noControlDrag: num(by('none')?.drag?.mean),
    dragVsOpposition,
    netSaving,
    trainSeconds: num(s.trainSeconds),
    steps: num(s.steps),
    bestStep: num(s.best?.step),
    divergedEpisodes: num(by('policy')?.divergedEpisodes),
    runDir: rec.runDir,
    host: rec.host,
    error: null,
  };
}

function emptyRow(seed: number, status: 'failed' | 'missing', error: string | null): RunRow {
  return {
    seed,
    status,
    metric: null,
    policyDrag: null,
    oppositionDrag: null,
    noControlDrag: null,
    dragVsOpposition: null,
    netSaving: null,
    trainSeconds: null,
    steps: null,
    bestStep: null,
    divergedEpisodes: null,
    runDir: null,
    host: null,
    error,
  };
}

/**
 * Aggregate the records of the sweep's planned runs (records of runs no longer planned, e.g. of
 * seeds removed from the file, are left out). `failures` maps task ids to the error of runs
 * that failed for good.
 */
export function aggregate(sweep: Sweep, records: ReadonlyMap<string, RunRecord>, failures: ReadonlyMap<string, string> = new Map()): Aggregate {
  const goal = RANK_METRICS[sweep.rank.metric].goal;
  let dragName: string | null = null;
  const rows = sweep.settings.map((st) => {
    const runs = sweep.seeds.map((seed) => {
      const id = `${st.key}-seed${seed}`;
      const rec = records.get(id);
      if (rec) {
        dragName ??= rec.summary.dragName;
        return runRow(rec, sweep.rank);
      }
      return failures.has(id) ? emptyRow(seed, 'failed', failures.get(id)!) : emptyRow(seed, 'missing', null);
    });
    const col = (f: (r: RunRow) => number | null): Stat => stat(runs.map(f));
    return {
      rank: null as number | null,
      key: st.key,
      label: st.label,
      values: st.values,
      seeds: [...sweep.seeds],
      completed: runs.filter((r) => r.status === 'completed').length,
      failed: runs.filter((r) => r.status === 'failed').length,
      metric: col((r) => r.metric),
      policyDrag: col((r) => r.policyDrag),
      oppositionDrag: col((r) => r.oppositionDrag),
      noControlDrag: col((r) => r.noControlDrag),
      dragVsOpposition: col((r) => r.dragVsOpposition),
      netSaving: col((r) => r.netSaving),
      trainSeconds: col((r) => r.trainSeconds),
      steps: col((r) => r.steps),
      runs,
    };
  });
  const ranked = rows
    .map((r, i) => ({ r, i }))
    .filter(({ r }) => r.metric.mean !== null)
    .sort((a, b) => (goal === 'min' ? a.r.metric.mean! - b.r.metric.mean! : b.r.metric.mean! - a.r.metric.mean!) || a.i - b.i);
  ranked.forEach(({ r }, k) => (r.rank = k + 1));
  const best = ranked[0]?.r ?? null;
  const second = ranked[1]?.r ?? null;
  const all = rows.flatMap((r) => r.runs);
  return {
    format: AGGREGATE_FORMAT,
    sweep: sweep.name,
    createdAt: new Date().toISOString(),
    metric: { name: sweep.rank.metric, goal, domain: sweep.rank.domain, description: RANK_METRICS[sweep.rank.metric].doc },
    dragName,
    interval: { level: CI_LEVEL, method: INTERVAL_METHOD },
    varied: sweep.varied,
    runs: {
      planned: all.length,
      completed: all.filter((r) => r.status === 'completed').length,
      failed: all.filter((r) => r.status === 'failed').length,
      missing: all.filter((r) => r.status === 'missing').length,
    },
    best: best ? { key: best.key, label: best.label, ...separation(best, second, goal) } : null,
    settings: [...ranked.map(({ r }) => r), ...rows.filter((r) => r.rank === null)],
    caution: CAUTION,
  };
}

/** Whether the best setting's interval is clear of the runner-up's, in words. */
function separation(best: SettingRow, second: SettingRow | null, goal: 'min' | 'max'): { separated: boolean | null; note: string } {
  if (!second) return { separated: null, note: 'the only setting with results' };
  const b = best.metric;
  const s = second.metric;
  if (b.halfWidth === null || s.halfWidth === null) return { separated: null, note: 'intervals need at least 2 finished seeds per setting' };
  const clear = goal === 'min' ? b.high! < s.low! : b.low! > s.high!;
  return clear
    ? { separated: true, note: `its 95% interval is clear of the runner-up's (${second.label})` }
    : { separated: false, note: `its 95% interval overlaps the runner-up's (${second.label}): these seeds do not separate them` };
}

// --- files ------------------------------------------------------------------------------------

/** One CSV field (RFC 4180: quoted when it holds a comma, quote or line break). */
function csvField(v: unknown): string {
  if (v === null || v === undefined) return '';
  const s = typeof v === 'string' ? v : typeof v === 'number' || typeof v === 'boolean' ? String(v) : JSON.stringify(v);
  return /[",\r\n]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s;
}

function csv(header: readonly string[], rows: ReadonlyArray<readonly unknown[]>): string {
  return [header, ...rows].map((r) => r.map(csvField).join(',')).join('\n') + '\n';
}

const STAT_COLUMNS = [
  ['metric', (r: SettingRow) => r.metric],
  ['drag', (r: SettingRow) => r.policyDrag],
  ['opposition_drag', (r: SettingRow) => r.oppositionDrag],
  ['none_drag', (r: SettingRow) => r.noControlDrag],
  ['drag_vs_opposition', (r: SettingRow) => r.dragVsOpposition],
  ['net_saving', (r: SettingRow) => r.netSaving],
  ['train_seconds', (r: SettingRow) => r.trainSeconds],
] as const;

/** aggregate.csv: one row per setting, ranked first. */
export function aggregateCsv(a: Aggregate): string {
  const header = [
    'rank',
    'best',
    'key',
    'label',
    ...a.varied,
    'seeds',
    'completed',
    'failed',
    ...STAT_COLUMNS.flatMap(([name]) => [`${name}_mean`, `${name}_ci95`, `${name}_low`, `${name}_high`]),
    'steps_mean',
  ];
  const rows = a.settings.map((r) => [
    r.rank,
    a.best?.key === r.key,
    r.key,
    r.label,
    ...a.varied.map((k) => r.values[k]),
    r.seeds.length,
    r.completed,
    r.failed,
    ...STAT_COLUMNS.flatMap(([, f]) => {
      const s = f(r);
      return [s.mean, s.halfWidth, s.low, s.high];
    }),
    r.steps.mean,
  ]);
  return csv(header, rows);
}

/** runs.csv: one row per planned run. */
export function runsCsv(a: Aggregate): string {
  const header = [
    'key',
    'label',
    ...a.varied,
    'seed',
    'status',
    'metric',
    'drag',
    'opposition_drag',
    'none_drag',
    'drag_vs_opposition',
    'net_saving',
    'train_seconds',
    'steps',
    'best_step',
    'diverged_episodes',
    'host',
    'run_dir',
    'error',
  ];
  const rows = a.settings.flatMap((st) =>
    st.runs.map((r) => [
      st.key,
      st.label,
      ...a.varied.map((k) => st.values[k]),
      r.seed,
      r.status,
      r.metric,
      r.policyDrag,
      r.oppositionDrag,
      r.noControlDrag,
      r.dragVsOpposition,
      r.netSaving,
      r.trainSeconds,
      r.steps,
      r.bestStep,
      r.divergedEpisodes,
      r.host,
      r.runDir,
      r.error,
    ]),
  );
  return csv(header, rows);
}

/** Write aggregate.json, aggregate.csv and runs.csv into `outDir`; returns their paths. */
export function writeAggregate(outDir: string, a: Aggregate): string[] {
  mkdirSync(outDir, { recursive: true });
  const files = [
    [AGGREGATE_FILES.json, `${JSON.stringify(a, null, 2)}\n`],
    [AGGREGATE_FILES.csv, aggregateCsv(a)],
    [AGGREGATE_FILES.runs, runsCsv(a)],
  ] as const;
  return files.map(([name, text]) => {
    const path = join(outDir, name);
    writeFileAtomic(path, text);
    return path;
  });
}

// --- terminal -------------------------------------------------------------------------------

const fmt = (x: number | null, d = 3): string => (x === null ? 'n/a' : x.toFixed(d));
const pmStat = (s: Stat, d = 3): string => (s.mean === null ? 'n/a' : `${fmt(s.mean, d)} ± ${s.halfWidth === null ? 'n/a' : fmt(s.halfWidth, d)}`);

/** The ranking table and the best setting, as lines for the terminal. */
export function aggregateLines(a: Aggregate): string[] {
  const d = a.dragName ?? 'drag';
  const metricName = a.metric.name === 'drag' ? d : a.metric.name;
  const header = ['rank', 'setting', 'seeds', `${metricName} (95% CI)`, `policy ${d}`, `opposition ${d}`, 'policy/opposition', 'train time'];
  const rows = a.settings.map((r) => [
    r.rank === null ? '-' : String(r.rank),
    r.label,
    `${r.completed}/${r.seeds.length}${r.failed ? ` (${r.failed} failed)` : ''}`,
    pmStat(r.metric),
    pmStat(r.policyDrag),
    fmt(r.oppositionDrag.mean),
    pmStat(r.dragVsOpposition),
    r.trainSeconds.mean === null ? 'n/a' : formatDuration(r.trainSeconds.mean),
  ]);
  const lines = [
    `sweep ${a.sweep}: ${a.runs.completed}/${a.runs.planned} runs finished${a.runs.failed ? `, ${a.runs.failed} failed` : ''}${a.runs.missing ? `, ${a.runs.missing} not run yet` : ''}`,
    `ranked by ${a.metric.name} on ${a.metric.domain} (${a.metric.goal === 'min' ? 'lower' : 'higher'} is better): ${a.metric.description}`,
    '',
    formatTable(header, rows),
    '',
    'Means over seeds (each run: its mean over the evaluation episodes); ± is the half-width of the 95% Student-t interval over seeds.',
  ];
  if (a.best) {
    const b = a.settings.find((r) => r.key === a.best!.key)!;
    lines.push(`best setting: ${b.label} (key ${b.key}): ${metricName} ${pmStat(b.metric)} over ${b.metric.n} seed${b.metric.n === 1 ? '' : 's'}; ${a.best.note}`);
  } else lines.push('best setting: none yet (no finished run has the ranking metric)');
  lines.push(`Caution: ${CAUTION}`);
  return lines;
}
