/**
 * The combined progress of a sweep (src/sweep/view.ts): counts, the ETA computed by hand, and
 * what a terminal and a log receive.
 */
import { describe, expect, it } from 'vitest';
import { createSweepView, runningText, statusText, sweepEta, type RunningRun } from '../src/sweep/view';

const running = (fraction: number | null, step = 10): RunningRun => ({
  label: 'agent.gamma=0.9',
  seed: 2,
  progress: { phase: 'training', fraction, step, total: 100, validation: '0.61' },
});

describe('sweep progress', () => {
  it('ETA: the work done counts running runs by their fraction', () => {
    // 8 runs to do: 3 done, 1 failed, two running at 50% and 25%: 4.75 of 8 in 95 s.
    const c = { total: 8, done: 3, running: 2, failed: 1, waiting: 2 };
    const { fraction, eta } = sweepEta(c, [running(0.5), running(0.25)], 95);
    expect(fraction).toBeCloseTo(4.75 / 8, 15);
    expect(eta).toBeCloseTo((95 * (1 - 4.75 / 8)) / (4.75 / 8), 10); // = 65 s
    expect(eta).toBeCloseTo(65, 10);
    expect(sweepEta({ total: 2, done: 0, running: 1, failed: 0, waiting: 1 }, [running(null)], 5).eta).toBeNull();
    expect(sweepEta({ total: 0, done: 0, running: 0, failed: 0, waiting: 0 }, [], 5)).toEqual({ fraction: 1, eta: 0 });
  });

  it('status and running-run lines', () => {
    const c = { total: 8, done: 3, running: 2, failed: 1, waiting: 2 };
    expect(statusText(c, [running(0.5), running(0.25)], 95)).toBe('3/8 done, 2 running, 1 failed, 2 waiting, 1m35s elapsed, ETA 1m05s');
    expect(statusText({ total: 2, done: 2, running: 0, failed: 0, waiting: 0 }, [], 12)).toBe('2/2 done, 0 running, 0 failed, 0 waiting, 12s elapsed');
    expect(runningText(running(0.5, 50))).toBe('agent.gamma=0.9 seed 2: 50% (step 50/100, val 0.61)');
    expect(runningText({ label: 'base', seed: 1, progress: null, where: 'w1' })).toBe('base seed 1 on w1: starting');
    expect(runningText({ label: 'base', seed: 1, progress: { phase: 'evaluating', fraction: 1, step: 9, total: 9, validation: null } })).toBe('base seed 1: evaluating');
  });

  it('a log gets event lines at once and status lines every plainEvery seconds; a terminal gets one redrawn line', () => {
    let t = 0;
    const out: string[] = [];
    const v = createSweepView({ write: (s) => out.push(s), tty: false, plainEvery: 30, now: () => t });
    const c = { total: 2, done: 0, running: 1, failed: 0, waiting: 1 };
    v.update(c, [running(0.1)]);
    t = 10;
    v.update(c, [running(0.2)]); // within 30 s of the last: nothing
    v.line('run base seed 1: finished');
    t = 31;
    v.update({ ...c, done: 1, running: 1, waiting: 0 }, [running(0.5)]);
    expect(out).toEqual([
      'runs: 0/2 done, 1 running, 0 failed, 1 waiting, 0s elapsed, ETA ?\n',
      '  agent.gamma=0.9 seed 2: 10% (step 10/100, val 0.61)\n',
      'run base seed 1: finished\n',
      'runs: 1/2 done, 1 running, 0 failed, 0 waiting, 31s elapsed, ETA 10s\n',
      '  agent.gamma=0.9 seed 2: 50% (step 10/100, val 0.61)\n',
    ]);
    const tty: string[] = [];
    const w = createSweepView({ write: (s) => tty.push(s), tty: true, columns: 200, now: () => 4 });
    w.update(c, [running(0.5)]);
    w.line('event');
    w.done();
    expect(tty[0]).toMatch(/^\r\x1b\[2Kruns: 0\/2 done, 1 running.* \| agent\.gamma=0\.9 seed 2: 50%/);
    expect(tty.slice(1)).toEqual(['\r\x1b[2K', 'event\n']);
  });
});
