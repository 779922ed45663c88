/** Terminal progress (src/progress.ts): ETA from step and time budgets, TTY bar, plain lines. */
import { describe, expect, it } from 'vitest';
import { createProgress, estimate, formatDuration } from '../src/progress';

const info = (o: Partial<Parameters<typeof estimate>[0]>) => ({ done: 0, total: null, elapsed: 0, budget: null, metrics: {}, ...o });

describe('progress', () => {
  it('estimates the fraction and ETA from whichever budget ends first', () => {
    expect(estimate(info({ done: 250, total: 1000, elapsed: 10 }))).toEqual({ fraction: 0.25, eta: 30 });
    expect(estimate(info({ done: 250, elapsed: 60, budget: 600 }))).toEqual({ fraction: 0.1, eta: 540 });
    // Steps 50% done, time 20% done: the step budget ends first.
    expect(estimate(info({ done: 500, total: 1000, elapsed: 120, budget: 600 }))).toEqual({ fraction: 0.5, eta: 120 });
    expect(estimate(info({ done: 10 }))).toEqual({ fraction: null, eta: null });
  });

  it('formats durations', () => {
    expect([formatDuration(5), formatDuration(75), formatDuration(3725), formatDuration(NaN)]).toEqual(['5s', '1m15s', '1h02m', '?']);
  });

  it('prints plain lines at most every plainEvery seconds when not a terminal', () => {
    const out: string[] = [];
    const p = createProgress({ write: (s) => out.push(s), tty: false, plainEvery: 10 });
    for (let t = 0; t <= 25; t++) p.update(info({ done: t * 100, total: 5000, elapsed: t, metrics: { 'P/P0': '0.50' } }));
    expect(out).toEqual(['0%  step 0/5000  0s  P/P0 0.50\n', '20%  step 1000/5000  10s ETA 40s  P/P0 0.50\n', '40%  step 2000/5000  20s ETA 30s  P/P0 0.50\n']);
  });

  it('redraws one line with a bar on a terminal and keeps messages above it', () => {
    const out: string[] = [];
    const p = createProgress({ write: (s) => out.push(s), tty: true, columns: 120 });
    p.update(info({ done: 300, total: 1000, elapsed: 30, metrics: { best: '0.41' } }));
    expect(out[0]).toBe('\r\x1b[2K[#######.................]  30% step 300/1000  30s ETA 1m10s  best 0.41');
    p.line('checkpoint written');
    expect(out.slice(1)).toEqual(['\r\x1b[2K', 'checkpoint written\n']);
    p.done();
    expect(out.length).toBe(3); // nothing drawn since the message, nothing to clear
  });
});
