/**
 * Progress of long work on the terminal (stderr): on a TTY, one line redrawn in place with a
 * bar, the fraction done, the ETA and the latest metrics; otherwise (a pipe, a CI log) a
 * plain line every `plainEvery` seconds. Written here rather than taken from a progress-bar
 * package because it is one redrawn line whose ETA comes from a step or a time budget,
 * whichever ends first, which the well-kept packages do not compute.
 */

export interface ProgressInfo {
  /** Work done so far and the total (null when unknown). */
  readonly done: number;
  readonly total: number | null;
  /** Seconds spent and the time budget (null when none). */
  readonly elapsed: number;
  readonly budget: number | null;
  /** Short label-value pairs, e.g. { "P/P0": "0.52" }. */
  readonly metrics: Readonly<Record<string, string>>;
}

export interface Progress {
  update(p: ProgressInfo): void;
  /** A message line (keeps the bar below it on a TTY). */
  line(text: string): void;
  /** Clear the bar. */
  done(): void;
}

export function formatDuration(seconds: number): string {
  if (!Number.isFinite(seconds) || seconds < 0) return '?';
  const s = Math.round(seconds);
  const h = Math.floor(s / 3600);
  const m = Math.floor((s % 3600) / 60);
  const r = s % 60;
  return h ? `${h}h${String(m).padStart(2, '0')}m` : m ? `${m}m${String(r).padStart(2, '0')}s` : `${r}s`;
}

/** Fraction done and seconds left, from the step budget or the time budget, whichever ends first. */
export function estimate(p: ProgressInfo): { fraction: number | null; eta: number | null } {
  const byTime = p.budget ? p.elapsed / p.budget : null;
  const bySteps = p.total ? p.done / p.total : null;
  const fraction = byTime === null ? bySteps : bySteps === null ? byTime : Math.max(byTime, bySteps);
  if (fraction === null || fraction <= 0) return { fraction, eta: null };
  return { fraction: Math.min(1, fraction), eta: (p.elapsed * (1 - fraction)) / fraction };
}

function describe(p: ProgressInfo): string {
  const m = Object.entries(p.metrics)
    .map(([k, v]) => `${k} ${v}`)
    .join('  ');
  return m;
}

export interface ProgressOptions {
  readonly write: (s: string) => void;
  readonly tty: boolean;
  /** Seconds between plain lines (non-TTY). */
  readonly plainEvery?: number;
  /** Terminal width (TTY). */
  readonly columns?: number;
}

export function createProgress(o: ProgressOptions): Progress {
  const every = o.plainEvery ?? 10;
  let lastPlain = -Infinity;
  let lastDraw = 0;
  let drawn = false;
  const width = Math.max(40, o.columns ?? 100);
  const clear = (): void => {
    if (drawn) o.write('\r\x1b[2K');
    drawn = false;
  };
  return {
    update(p) {
      const { fraction, eta } = estimate(p);
      const pct = fraction === null ? '' : `${(100 * fraction).toFixed(0).padStart(3)}%`;
      const steps = `step ${p.done}${p.total ? `/${p.total}` : ''}`;
      const time = `${formatDuration(p.elapsed)}${eta !== null ? ` ETA ${formatDuration(eta)}` : ''}`;
      if (!o.tty) {
        if (p.elapsed - lastPlain < every) return;
        lastPlain = p.elapsed;
        o.write(`${[pct.trim(), steps, time, describe(p)].filter(Boolean).join('  ')}\n`);
        return;
      }
      const now = Date.now();
      if (now - lastDraw < 200) return;
      lastDraw = now;
      const barWidth = 24;
      const filled = fraction === null ? 0 : Math.round(barWidth * fraction);
      const bar = `[${'#'.repeat(filled)}${'.'.repeat(barWidth - filled)}]`;
      const text = `${bar} ${pct} ${steps}  ${time}  ${describe(p)}`;
      o.write(`\r\x1b[2K${text.slice(0, width - 1)}`);
      drawn = true;
    },
    line(text) {
      clear();
      o.write(`${text}\n`);
      lastDraw = 0;
    },
    done() {
      clear();
    },
  };
}

/** A progress sink that shows nothing (quiet mode, tests). */
export const noProgress: Progress = { update() {}, line() {}, done() {} };
