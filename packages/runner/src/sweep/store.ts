/**
 * A sweep's output directory on the machine that runs or controls it (docs/sweeps.md):
 *   plan.json              the expanded sweep: settings (key, label, values, origin), seeds, runs
 *   results/<id>.json      one record per finished run (run.ts RunRecord), <id> = <setting key>-seed<seed>
 *   runs/<setting>/seed<n>/ run directories of a local sweep (a queue worker keeps them under its --runs-dir)
 *   logs/<id>.log          what a local run process printed
 *   aggregate.json, aggregate.csv, runs.csv   the aggregation (aggregate.ts)
 * A run counts as finished when its record is here; re-running a sweep runs only the others.
 */
import { existsSync, mkdirSync, readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { writeFileAtomic } from '../atomic';
import { isFinished, RUN_RECORD_FORMAT, type RunRecord } from './run';
import type { RunTask, Sweep } from './spec';

export const PLAN_FORMAT = 'tilewise-sweep-plan/1';
export const SWEEP_DIRS = { results: 'results', runs: 'runs', logs: 'logs', plan: 'plan.json' } as const;

/** The output directory: --out, else sweeps/<name>. */
export function sweepOutDir(sweep: Sweep, out?: string): string {
  return resolve(out ?? join('sweeps', sweep.name));
}

export function writePlan(outDir: string, sweep: Sweep): void {
  mkdirSync(outDir, { recursive: true });
  const plan = {
    format: PLAN_FORMAT,
    name: sweep.name,
    file: sweep.file,
    seeds: sweep.seeds,
    evaluate: sweep.evaluate,
    rank: sweep.rank,
    retry: sweep.retry,
    settings: sweep.settings.map((s) => ({ key: s.key, label: s.label, values: s.values, origin: s.origin, dir: s.dir })),
    runs: sweep.tasks.map((t) => ({ id: t.id, key: t.key, seed: t.seed, runPath: t.runPath })),
  };
  writeFileAtomic(join(outDir, SWEEP_DIRS.plan), `${JSON.stringify(plan, null, 2)}\n`);
}

export function recordPath(outDir: string, id: string): string {
  return join(outDir, SWEEP_DIRS.results, `${id}.json`);
}

/** The record of a task if it is stored and belongs to the task (same sweep, setting and seed). */
export function readRecord(outDir: string, task: RunTask): RunRecord | null {
  const path = recordPath(outDir, task.id);
  if (!existsSync(path)) return null;
  try {
    const r = JSON.parse(readFileSync(path, 'utf8')) as RunRecord;
    const ok = r.format === RUN_RECORD_FORMAT && r.key === task.key && r.seed === task.seed && isFinished(r.summary, task);
    return ok ? r : null;
  } catch {
    return null; // unreadable: the run is done again (it finds its finished run directory, if any)
  }
}

/** Stored records of the planned runs, by task id. */
export function readRecords(outDir: string, sweep: Sweep): Map<string, RunRecord> {
  const out = new Map<string, RunRecord>();
  for (const t of sweep.tasks) {
    const r = readRecord(outDir, t);
    if (r) out.set(t.id, r);
  }
  return out;
}

export function writeRecord(outDir: string, rec: RunRecord): void {
  mkdirSync(join(outDir, SWEEP_DIRS.results), { recursive: true });
  writeFileAtomic(recordPath(outDir, rec.id), `${JSON.stringify(rec, null, 2)}\n`);
}
