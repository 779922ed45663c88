/**
 * The local pool of a sweep: at most `jobs` runs at once, each in a process of its own
 * (pool-child.ts; a process takes the next run when it is done with one), each run in its own
 * run directory. Written here rather than taken from a worker-pool package: it is a handful of
 * child processes with retries and per-run output files, which the well-kept pools (built for
 * many small tasks) do not give. Across machines, BullMQ does this job instead (queue.ts).
 *
 * A run whose process fails (an error, a crash, a kill) is retried after
 * `backoffSeconds * 2^(try - 1)` seconds, up to `attempts` tries in all; a retry resumes from the
 * run's last checkpoint. A configuration error is not retried. Aborting `signal` sends SIGTERM to
 * the processes (a running run writes a final checkpoint) and starts nothing new.
 */
import { fork, type ChildProcess } from 'node:child_process';
import { appendFileSync, mkdirSync, readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { PoolReply, PoolRequest } from './pool-child';
import type { RunProgress, RunRecord } from './run';
import type { RetrySpec, RunTask } from './spec';
import { SWEEP_DIRS, writeRecord } from './store';
import { noSweepView, type RunningRun, type SweepView } from './view';

const ENTRY = join(dirname(fileURLToPath(import.meta.url)), 'pool-entry.mjs');

export interface PoolOptions {
  /** Runs at once (processes). */
  readonly jobs: number;
  /** The sweep's output directory: records go to results/, run directories to runs/, output to logs/. */
  readonly outDir: string;
  readonly cacheDir?: string;
  readonly retry: RetrySpec;
  readonly signal?: AbortSignal;
  readonly view?: SweepView;
}

export interface PoolResult {
  readonly records: Map<string, RunRecord>;
  /** Runs that failed for good: task id -> last error. */
  readonly failures: Map<string, string>;
  readonly interrupted: boolean;
}

interface Item {
  readonly task: RunTask;
  readonly attempt: number;
  readonly notBefore: number;
}

interface Proc {
  readonly child: ChildProcess;
  /** The run it is doing, if any. */
  item: Item | null;
  progress: RunProgress | null;
  outcome: PoolReply | null;
  logPath: string | null;
}

/** Seconds to wait before try `attempt + 1` after try `attempt` failed. */
export function backoffSeconds(retry: RetrySpec, attempt: number): number {
  return retry.backoffSeconds * 2 ** (attempt - 1);
}

export function runLocalPool(tasks: readonly RunTask[], o: PoolOptions): Promise<PoolResult> {
  const view = o.view ?? noSweepView;
  const records = new Map<string, RunRecord>();
  const failures = new Map<string, string>();
  const queue: Item[] = tasks.map((task) => ({ task, attempt: 1, notBefore: 0 }));
  const procs = new Set<Proc>();
  mkdirSync(join(o.outDir, SWEEP_DIRS.logs), { recursive: true });
  const interrupted = (): boolean => o.signal?.aborted ?? false;
  const busy = (): Proc[] => [...procs].filter((p) => p.item);
  const name = (t: RunTask): string => `run ${t.label} seed ${t.seed}`;

  return new Promise((resolve) => {
    let finished = false;
    const finish = (): void => {
      if (finished) return;
      finished = true;
      clearInterval(timer);
      o.signal?.removeEventListener('abort', onAbort);
      for (const p of procs) if (p.child.connected) p.child.send({ type: 'exit' } satisfies PoolRequest);
      view.done();
      resolve({ records, failures, interrupted: interrupted() });
    };
    const refresh = (): void => {
      const running = busy();
      const runs: RunningRun[] = running.map((p) => ({ label: p.item!.task.label, seed: p.item!.task.seed, progress: p.progress }));
      view.update({ total: tasks.length, done: records.size, running: running.length, failed: failures.size, waiting: queue.length }, runs);
    };

    /** A run's process has reported its end (or died): record, retry or give up. */
    const settle = (p: Proc, exit: { code: number | null; signal: NodeJS.Signals | null } | null): void => {
      const item = p.item!;
      const { task, attempt } = item;
      const out = p.outcome;
      p.item = null;
      p.outcome = null;
      p.progress = null;
      if (out?.type === 'done') {
        writeRecord(o.outDir, out.record);
        records.set(task.id, out.record);
        view.line(`${name(task)}: finished (${out.record.summary.steps} steps in ${Math.round(out.record.summary.trainSeconds)} s)`);
      } else if (out?.type === 'interrupted' || (interrupted() && !out)) {
        view.line(`${name(task)}: stopped${out?.type === 'interrupted' ? ` at step ${out.step}` : ''}; it resumes from its last checkpoint next time`);
      } else {
        const why =
          out?.type === 'error'
            ? out.message
            : `its process ended with ${exit?.signal ? `signal ${exit.signal}` : `exit code ${exit?.code}`} (last output: ${lastLine(p.logPath)})`;
        if (!(out?.type === 'error' && out.config) && attempt < o.retry.attempts && !interrupted()) {
          const wait = backoffSeconds(o.retry, attempt);
          queue.push({ task, attempt: attempt + 1, notBefore: Date.now() + 1000 * wait });
          view.line(`${name(task)}: try ${attempt} failed: ${why}; retrying in ${wait} s`);
        } else {
          failures.set(task.id, why);
          view.line(`${name(task)}: FAILED after ${attempt} tr${attempt === 1 ? 'y' : 'ies'}: ${why} (output: ${p.logPath})`);
        }
      }
    };

    const spawn = (): Proc => {
      // The entry registers its own TypeScript loader; an inspector flag would clash on its port.
      const execArgv = process.execArgv.filter((a) => !a.startsWith('--inspect'));
      const child = fork(ENTRY, [], { stdio: ['ignore', 'pipe', 'pipe', 'ipc'], execArgv });
      const p: Proc = { child, item: null, progress: null, outcome: null, logPath: null };
      const toLog = (b: Buffer): void => {
        if (p.logPath) appendFileSync(p.logPath, b);
      };
      child.stdout!.on('data', toLog);
      child.stderr!.on('data', toLog);
      child.on('message', (m: PoolReply) => {
        if (m.type === 'progress') p.progress = m.progress;
        else {
          p.outcome = m;
          settle(p, null);
          pump();
        }
      });
      child.on('error', (e) => {
        if (p.item && !p.outcome) p.outcome = { type: 'error', message: `could not start a run process: ${e.message}`, config: false };
      });
      child.on('exit', (code, signal) => {
        procs.delete(p);
        if (p.item) settle(p, { code, signal });
        pump();
      });
      procs.add(p);
      return p;
    };

    const start = (item: Item): void => {
      const p = [...procs].find((q) => !q.item && q.child.connected) ?? spawn();
      p.item = item;
      p.logPath = join(o.outDir, SWEEP_DIRS.logs, `${item.task.id}.log`);
      appendFileSync(p.logPath, `--- ${new Date().toISOString()} try ${item.attempt} (process ${p.child.pid})\n`);
      view.line(`${name(item.task)}: started${item.attempt > 1 ? ` (try ${item.attempt} of ${o.retry.attempts}, from its last checkpoint)` : ''}`);
      p.child.send({ type: 'run', task: item.task, runDir: join(o.outDir, SWEEP_DIRS.runs, item.task.runPath), cacheDir: o.cacheDir } satisfies PoolRequest);
    };

    const pump = (): void => {
      if (finished) return;
      if (!interrupted()) {
        const now = Date.now();
        for (let i = 0; i < queue.length && busy().length < o.jobs; ) {
          if (queue[i]!.notBefore <= now) start(queue.splice(i, 1)[0]!);
          else i++;
        }
      }
      if (busy().length === 0 && (queue.length === 0 || interrupted())) finish();
      else refresh();
    };
    const onAbort = (): void => {
      const n = busy().length;
      view.line(`stopping: ${n} running run${n === 1 ? '' : 's'} write${n === 1 ? 's' : ''} a checkpoint; run the sweep again to resume`);
      for (const p of procs) p.child.kill('SIGTERM');
      pump();
    };
    o.signal?.addEventListener('abort', onAbort);
    // Progress redraws, and the starts of retries whose backoff has passed.
    const timer = setInterval(pump, 1000);
    pump();
  });
}

/** The last line a run's process printed, shortened (for failure messages). */
function lastLine(path: string | null): string {
  try {
    const lines = readFileSync(path!, 'utf8').trimEnd().split('\n').filter((l) => l.trim() && !l.startsWith('--- '));
    const last = lines.at(-1) ?? 'none';
    return last.length > 200 ? `${last.slice(0, 197)}...` : last;
  } catch {
    return 'none';
  }
}
