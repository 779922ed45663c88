/**
 * One run of a sweep, as a local pool process (pool-child.ts) or a queue worker's sandboxed
 * process (processor.ts) executes it: train in the run directory (or resume it from its last
 * checkpoint, or only finish what is missing), evaluate the trained policy as the sweep says,
 * and return the run's record: the run summary (summary.json, with the evaluation) and the
 * sweep's keys. The record is what a queue job returns, so the controller aggregates without a
 * shared filesystem.
 *
 * What is found in the run directory decides what is done:
 *   summary completed, evaluated (or no evaluation wanted)  nothing: the record is read back
 *   summary completed, not evaluated                         the evaluation only
 *   a readable checkpoint                                    resume, then evaluate
 *   anything else (nothing, or a run that died before its first checkpoint)
 *                                                            a fresh start in an emptied directory
 */
import { existsSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import { hostname } from 'node:os';
import { join } from 'node:path';
import { listCheckpoints } from '../checkpoint';
import { evaluateSource, openPolicySource } from '../commands/evaluate';
import { parseRunConfig } from '../config';
import { estimate, type Progress } from '../progress';
import { readSummary, resumeRun, RUN_FILES, train, type TrainSummary } from '../trainer';
import type { RunIdentity, RunTask } from './spec';

export const RUN_RECORD_FORMAT = 'tilewise-sweep-run/1';

/** The result of one finished run (results/<id>.json; a queue job's return value). */
export interface RunRecord extends RunIdentity {
  readonly format: typeof RUN_RECORD_FORMAT;
  /** Where the run directory is, on the machine that ran it. */
  readonly runDir: string;
  readonly host: string;
  readonly finishedAt: string;
  /** The run's summary.json (with `evaluation` when the sweep evaluates). */
  readonly summary: TrainSummary;
}

/** How far a run is, sent to the controller about once a second. */
export interface RunProgress {
  readonly phase: 'training' | 'evaluating';
  /** Fraction of the training done (steps or time budget, whichever ends first), or null. */
  readonly fraction: number | null;
  readonly step: number;
  readonly total: number | null;
  /** Latest validation drag analogue, as shown by the trainer's progress. */
  readonly validation: string | null;
}

export interface ExecuteOptions {
  readonly runDir: string;
  readonly cacheDir?: string;
  /** Aborting it stops training after the current step with a checkpoint (the outcome is "interrupted"). */
  readonly signal?: AbortSignal;
  readonly onProgress?: (p: RunProgress) => void;
  /** Human-readable lines. */
  readonly say?: (line: string) => void;
}

export type RunOutcome = { readonly status: 'completed'; readonly record: RunRecord } | { readonly status: 'interrupted'; readonly step: number };

/** A summary that the sweep counts as finished. */
export function isFinished(s: TrainSummary | null, task: Pick<RunTask, 'evaluate'>): boolean {
  return s !== null && s.status === 'completed' && (!task.evaluate.enabled || s.evaluation !== undefined);
}

export async function executeRun(task: RunTask, o: ExecuteOptions): Promise<RunOutcome> {
  const dir = o.runDir;
  const say = o.say ?? (() => {});
  let summary = readSummary(dir);
  if (!isFinished(summary, task)) {
    if (summary?.status !== 'completed') {
      const progress = trainingProgress(o.onProgress);
      const common = { progress, signal: o.signal, cacheDir: o.cacheDir, say };
      if (listCheckpoints(join(dir, RUN_FILES.checkpoints)).length > 0) {
        say(`resuming ${dir} from its last checkpoint`);
        summary = await resumeRun(dir, common).catch((e: unknown) => {
          // Every checkpoint unreadable (they are now renamed *.corrupt): start over.
          if (listCheckpoints(join(dir, RUN_FILES.checkpoints)).length === 0) return null;
          throw e;
        });
      } else summary = null;
      if (summary === null) {
        clearRunDir(dir);
        summary = await train(parseRunConfig(task.config), { ...common, runDir: dir });
      }
      if (summary.status === 'interrupted') return { status: 'interrupted', step: summary.steps };
      if (summary.status !== 'completed') throw new Error(`${dir}: training ended as ${summary.status}${summary.error ? `: ${summary.error}` : ''}`);
    }
    if (task.evaluate.enabled) {
      o.onProgress?.({ phase: 'evaluating', fraction: 1, step: summary.steps, total: summary.steps, validation: null });
      const lines: string[] = [];
      evaluateSource(openPolicySource(dir, task.evaluate.policy), null, {
        episodes: task.evaluate.episodes ?? undefined,
        noTransfer: !task.evaluate.transfer,
        cacheDir: o.cacheDir,
        log: (l) => lines.push(l),
      });
      writeFileSync(join(dir, SWEEP_EVALUATION_TABLE), `${lines.join('\n')}\n`);
      summary = readSummary(dir);
      if (!isFinished(summary, task)) throw new Error(`${dir}: the evaluation did not record its results in ${RUN_FILES.summary}`);
    }
  }
  return { status: 'completed', record: runRecord(task, dir, summary!) };
}

/** The evaluation tables printed for a sweep run, kept in its run directory. */
export const SWEEP_EVALUATION_TABLE = 'evaluation.txt';

export function runRecord(task: RunTask, runDir: string, summary: TrainSummary): RunRecord {
  return {
    format: RUN_RECORD_FORMAT,
    sweep: task.sweep,
    id: task.id,
    key: task.key,
    label: task.label,
    values: task.values,
    seed: task.seed,
    runDir,
    host: hostname(),
    finishedAt: new Date().toISOString(),
    summary,
  };
}

/**
 * Empty a run directory for a fresh start. Only a directory that holds nothing but run files
 * is emptied, so a mistyped runs directory never loses anything else.
 */
function clearRunDir(dir: string): void {
  if (!existsSync(dir)) return;
  const known = new Set<string>([...Object.values(RUN_FILES), SWEEP_EVALUATION_TABLE]);
  const stray = readdirSync(dir).filter((f) => !known.has(f) && !f.includes('.tmp-'));
  if (stray.length) throw new Error(`${dir}: cannot start the run afresh: the directory holds files a run does not write (${stray.slice(0, 3).join(', ')})`);
  rmSync(dir, { recursive: true, force: true });
}

/** A trainer progress sink that reports the fraction done, at most once a second. */
function trainingProgress(onProgress: ExecuteOptions['onProgress']): Progress {
  let last = -Infinity;
  return {
    update(p) {
      const now = Date.now();
      if (!onProgress || now - last < 1000) return;
      last = now;
      const v = Object.entries(p.metrics).find(([k]) => k.startsWith('val '));
      onProgress({ phase: 'training', fraction: estimate(p).fraction, step: p.done, total: p.total, validation: v && v[1] !== '-' ? v[1] : null });
    },
    line() {},
    done() {},
  };
}
