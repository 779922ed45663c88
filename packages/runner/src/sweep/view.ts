/**
 * The combined progress of a sweep's runs on the terminal (stderr): counts of runs done,
 * running, failed and waiting, the ETA and the state of each running run. On a TTY one line is
 * redrawn in place and events (a run started, finished, failed, retried) are printed above it;
 * otherwise the events are printed as they happen and a status line every `plainEvery` seconds.
 *
 * ETA: the runs to do are the work; a running run counts for its fraction done (steps or time
 * budget, as the trainer's progress computes it), so fraction = (finished + sum of running
 * fractions) / runs to do and ETA = elapsed * (1 - fraction) / fraction, as `estimate` of
 * progress.ts. It assumes the remaining runs take as long as the average so far.
 */
import { estimate, formatDuration } from '../progress';
import type { RunProgress } from './run';

export interface SweepCounts {
  /** Runs this invocation has to do (finished runs skipped at the start are not counted). */
  readonly total: number;
  readonly done: number;
  readonly running: number;
  readonly failed: number;
  /** Waiting to start, or to be retried. */
  readonly waiting: number;
}

export interface RunningRun {
  readonly label: string;
  readonly seed: number;
  readonly progress: RunProgress | null;
  /** Where it runs (a worker name), when known. */
  readonly where?: string | null;
}

/** Fraction of the work done and the ETA in seconds (null until something has progressed). */
export function sweepEta(c: SweepCounts, running: readonly RunningRun[], elapsed: number): { fraction: number | null; eta: number | null } {
  if (c.total === 0) return { fraction: 1, eta: 0 };
  const partial = running.reduce((s, r) => s + (r.progress?.fraction ?? 0), 0);
  const finished = c.done + c.failed;
  const e = estimate({ done: finished + partial, total: c.total, elapsed, budget: null, metrics: {} });
  return elapsed > 0 ? e : { fraction: e.fraction, eta: null }; // no rate measured yet
}

/** "3/8 done, 2 running, 0 failed, 3 waiting, ETA 4m10s". */
export function statusText(c: SweepCounts, running: readonly RunningRun[], elapsed: number): string {
  const { eta } = sweepEta(c, running, elapsed);
  const etaText = c.done + c.failed === c.total ? '' : `, ETA ${eta === null ? '?' : formatDuration(eta)}`;
  return `${c.done}/${c.total} done, ${c.running} running, ${c.failed} failed, ${c.waiting} waiting, ${formatDuration(elapsed)} elapsed${etaText}`;
}

/** "agent.gamma=0.95 seed 2: 45% (step 900/2000, val 0.61)". */
export function runningText(r: RunningRun): string {
  const p = r.progress;
  const where = r.where ? ` on ${r.where}` : '';
  if (!p) return `${r.label} seed ${r.seed}${where}: starting`;
  if (p.phase === 'evaluating') return `${r.label} seed ${r.seed}${where}: evaluating`;
  const pct = p.fraction === null ? '' : `${Math.round(100 * p.fraction)}% `;
  return `${r.label} seed ${r.seed}${where}: ${pct}(step ${p.step}${p.total ? `/${p.total}` : ''}${p.validation ? `, val ${p.validation}` : ''})`;
}

export interface SweepView {
  /** An event line (run started, finished, failed, ...). */
  line(text: string): void;
  /** The current state; redrawn (TTY) or printed every plainEvery seconds. */
  update(c: SweepCounts, running: readonly RunningRun[]): void;
  done(): void;
}

export interface SweepViewOptions {
  readonly write: (s: string) => void;
  readonly tty: boolean;
  readonly columns?: number;
  /** Seconds between status lines when not a TTY (default 30). */
  readonly plainEvery?: number;
  /** Seconds since the start (tests pin it). */
  readonly now?: () => number;
}

export function createSweepView(o: SweepViewOptions): SweepView {
  const now = o.now ?? (() => performance.now() / 1000);
  const t0 = now();
  const every = o.plainEvery ?? 30;
  const width = Math.max(40, o.columns ?? 100);
  let lastPlain = -Infinity;
  let drawn = false;
  const clear = (): void => {
    if (drawn) o.write('\r\x1b[2K');
    drawn = false;
  };
  return {
    line(text) {
      clear();
      o.write(`${text}\n`);
    },
    update(c, running) {
      const elapsed = now() - t0;
      const status = statusText(c, running, elapsed);
      if (!o.tty) {
        if (elapsed - lastPlain < every) return;
        lastPlain = elapsed;
        o.write(`runs: ${status}\n`);
        for (const r of running) o.write(`  ${runningText(r)}\n`);
        return;
      }
      const text = [`runs: ${status}`, ...running.map(runningText)].join(' | ');
      o.write(`\r\x1b[2K${text.slice(0, width - 1)}`);
      drawn = true;
    },
    done() {
      clear();
    },
  };
}

/** A view that shows nothing (quiet mode, tests). */
export const noSweepView: SweepView = { line() {}, update() {}, done() {} };
