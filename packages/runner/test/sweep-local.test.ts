/**
 * `tilewise sweep` end to end at tiny size (src/sweep/pool.ts, run.ts, store.ts): a sweep of
 * 2 settings x 2 seeds runs in a pool of 2 processes and aggregates correctly (each run's
 * figure is its own evaluation file's; the per-setting interval is recomputed by hand); running
 * it again runs nothing; adding a seed runs only the new runs, and a run process killed
 * (SIGKILL) mid-run is retried and resumes from its last checkpoint.
 */
import { existsSync, mkdtempSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { main, type Io } from '../src/cli';
import { readSweepAggregate } from '../src/report/data';
import type { Aggregate } from '../src/sweep/aggregate';
import type { RunRecord } from '../src/sweep/run';
import { loadSweep } from '../src/sweep/spec';
import { readSummary } from '../src/trainer';
import { evaluationFileDrag, policyDrag, TINY_STEPS, waitFor, writeTinySweep } from './helpers/sweep';

const root = mkdtempSync(join(tmpdir(), 'tilewise-sweep-local-'));
const cacheDir = join(root, 'cache');
const out = join(root, 'out');
/** t_{0.975, 1} = tan(0.475 pi) (closed form for one degree of freedom; tables: 12.706). */
const T975_1 = Math.tan(Math.PI * 0.475);

function captureIo(): Io & { outs: string[]; errs: string[] } {
  const outs: string[] = [];
  const errs: string[] = [];
  return { outs, errs, out: (l) => outs.push(l), err: (l) => errs.push(l) };
}

const sweepArgs = (file: string) => ['sweep', file, '--out', out, '--jobs', '2', '--cache-dir', cacheDir];

function readRecordsIn(dir: string): Map<string, RunRecord> {
  const m = new Map<string, RunRecord>();
  for (const f of readdirSync(join(dir, 'results'))) {
    const r = JSON.parse(readFileSync(join(dir, 'results', f), 'utf8')) as RunRecord;
    m.set(r.id, r);
  }
  return m;
}

describe('tilewise sweep (local pool, end to end, tiny)', () => {
  const file = writeTinySweep(root, { name: 'tiny', seeds: [1, 2] });
  let firstMtimes: Map<string, number>;

  it('2 settings x 2 seeds complete in their own run directories and aggregate to hand-computed figures', async () => {
    const io = captureIo();
    const code = await main(sweepArgs(file), io);
    expect(code, io.errs.join('\n')).toBe(0);
    expect(io.errs[0]).toMatch(/sweep tiny: 2 settings x 2 seeds = 4 runs; 0 finished already \(skipped\), 4 to run, 2 at a time/);
    expect(io.errs.filter((l) => /: finished \(/.test(l))).toHaveLength(4);
    expect(io.errs.some((l) => /^runs: \d\/4 done, \d running, 0 failed, \d waiting/.test(l))).toBe(true);

    const sweep = loadSweep(file);
    const records = readRecordsIn(out);
    expect([...records.keys()].sort()).toEqual(sweep.tasks.map((t) => t.id).sort());
    const dirs = new Set<string>();
    for (const t of sweep.tasks) {
      const r = records.get(t.id)!;
      const dir = join(out, 'runs', t.runPath);
      dirs.add(dir);
      expect(r.runDir).toBe(dir);
      const s = readSummary(dir)!;
      expect(s.status).toBe('completed');
      expect(s.steps).toBe(TINY_STEPS);
      expect(s.seed).toBe(t.seed);
      expect(readFileSync(join(dir, 'config.yaml'), 'utf8')).toMatch(new RegExp(`seed: ${t.seed}\\n`));
      // The record's figure is the run's own evaluation file's.
      expect(policyDrag(r)).toBe(evaluationFileDrag(dir));
    }
    expect(dirs.size).toBe(4);

    const a = JSON.parse(readFileSync(join(out, 'aggregate.json'), 'utf8')) as Aggregate;
    expect(a.format).toBe('tilewise-sweep-aggregate/1');
    expect(a.runs).toEqual({ planned: 4, completed: 4, failed: 0, missing: 0 });
    for (const st of sweep.settings) {
      const [x1, x2] = [1, 2].map((seed) => evaluationFileDrag(join(out, 'runs', st.dir, `seed${seed}`))) as [number, number];
      const row = a.settings.find((r) => r.key === st.key)!;
      expect(row.metric.n).toBe(2);
      expect(row.metric.mean).toBeCloseTo((x1 + x2) / 2, 14);
      // Two seeds: sd = |x1 - x2| / sqrt(2), standard error |x1 - x2| / 2.
      expect(row.metric.halfWidth).toBeCloseTo((T975_1 * Math.abs(x1 - x2)) / 2, 12);
      expect(row.policyDrag.mean).toBeCloseTo((x1 + x2) / 2, 14);
    }
    const ranked = [...a.settings].sort((p, q) => p.metric.mean! - q.metric.mean!);
    expect(a.best!.key).toBe(ranked[0]!.key);
    expect(ranked.map((r) => r.rank)).toEqual([1, 2]);
    const csv = readFileSync(join(out, 'aggregate.csv'), 'utf8').trimEnd().split('\n');
    expect(csv).toHaveLength(3);
    expect(csv[0]).toMatch(/^rank,best,key,label,agent\.finalLayerInit,seeds,completed,failed,metric_mean,metric_ci95,/);
    expect(readFileSync(join(out, 'runs.csv'), 'utf8').trimEnd().split('\n')).toHaveLength(5);
    expect(io.outs.join('\n')).toMatch(/best setting: agent\.finalLayerInit=0\.(003|1) \(key [0-9a-f]{10}\): P\/P0 [0-9.]+ ± [0-9.]+ over 2 seeds/);
    // The report command reads both the JSON aggregate (settings with their runs) and runs.csv.
    for (const f of ['aggregate.json', 'runs.csv']) {
      const g = readSweepAggregate(join(out, f));
      expect(g.rows.map((r) => r.runDir).sort(), f).toEqual([...dirs].sort());
      expect(new Set(g.rows.map((r) => r.setting)), f).toEqual(new Set(sweep.settings.map((s) => s.label)));
    }
    firstMtimes = new Map([...records.keys()].map((id) => [id, statSync(join(out, 'results', `${id}.json`)).mtimeMs]));
  }, 600_000);

  it('running it again runs nothing and changes no result', async () => {
    const io = captureIo();
    const code = await main(sweepArgs(file), io);
    expect(code, io.errs.join('\n')).toBe(0);
    expect(io.errs[0]).toMatch(/= 4 runs; all finished already, nothing to run/);
    expect(io.errs.some((l) => /started/.test(l))).toBe(false);
    for (const [id, t] of firstMtimes) expect(statSync(join(out, 'results', `${id}.json`)).mtimeMs).toBe(t);
    for (const f of readdirSync(join(out, 'logs'))) expect(readFileSync(join(out, 'logs', f), 'utf8').match(/^--- /gm)).toHaveLength(1);
    expect(io.outs.join('\n')).toMatch(/sweep tiny: 4\/4 runs finished/);
  }, 120_000);

  it('adding a seed runs only the new runs; a run process killed mid-run is retried and resumes from its checkpoint', async () => {
    writeTinySweep(root, { name: 'tiny', seeds: [1, 2, 3] });
    const sweep = loadSweep(file);
    const victim = sweep.tasks.find((t) => t.seed === 3)!;
    const runDir = join(out, 'runs', victim.runPath);
    const logFile = join(out, 'logs', `${victim.id}.log`);
    const io = captureIo();
    const running = main(sweepArgs(file), io);
    // Kill the victim's process once it has a checkpoint and is still training.
    const pid = await waitFor(
      'a checkpoint of the seed-3 run',
      () => {
        const s = existsSync(logFile) ? readSummary(runDir) : null;
        const ck = existsSync(join(runDir, 'checkpoints')) ? readdirSync(join(runDir, 'checkpoints')).filter((f) => f.endsWith('.ckpt')) : [];
        if (!s || s.status !== 'running' || ck.length === 0) return undefined;
        return Number(/\(process (\d+)\)/.exec(readFileSync(logFile, 'utf8'))![1]);
      },
      300,
    );
    const killedAt = readSummary(runDir)!.steps;
    process.kill(pid, 'SIGKILL');
    const code = await running;
    expect(code, io.errs.join('\n')).toBe(0);
    expect(io.errs[0]).toMatch(/= 6 runs; 4 finished already \(skipped\), 2 to run/);
    expect(io.errs.filter((l) => /started/.test(l) && !/seed 3/.test(l))).toEqual([]);
    expect(io.errs.some((l) => new RegExp(`seed 3: try 1 failed: its process ended with signal SIGKILL.*retrying in 1 s`).test(l))).toBe(true);
    expect(io.errs.some((l) => /seed 3: started \(try 2 of 3, from its last checkpoint\)/.test(l))).toBe(true);

    const records = readRecordsIn(out);
    expect(records.size).toBe(6);
    for (const [id, t] of firstMtimes) expect(statSync(join(out, 'results', `${id}.json`)).mtimeMs).toBe(t);
    const s = readSummary(runDir)!;
    expect(s.status).toBe('completed');
    expect(s.steps).toBe(TINY_STEPS);
    expect(s.resumes).toHaveLength(1);
    expect(s.resumes[0]!.step).toBeGreaterThanOrEqual(killedAt); // the newest checkpoint, not a fresh start
    expect(s.resumes[0]!.step).toBeGreaterThan(0);
    const log = readFileSync(join(runDir, 'log.jsonl'), 'utf8').trimEnd().split('\n').map((l) => JSON.parse(l) as { msg: string });
    expect(log.filter((e) => e.msg === 'start')).toHaveLength(1);
    expect(log.filter((e) => e.msg === 'resume')).toHaveLength(1);
    expect(log.filter((e) => e.msg === 'stop')).toHaveLength(1);
    const a = JSON.parse(readFileSync(join(out, 'aggregate.json'), 'utf8')) as Aggregate;
    expect(a.runs).toEqual({ planned: 6, completed: 6, failed: 0, missing: 0 });
    expect(a.settings.every((r) => r.metric.n === 3)).toBe(true);
  }, 600_000);
});
