/**
 * One sweep run (src/sweep/run.ts executeRun), in this process: an abort from a timer stops an
 * inline run (train.parallel false) with a checkpoint; running it again resumes and evaluates;
 * a third time only reads the record back. A directory holding foreign files is not emptied.
 * Also: the local pool's backoff, and the exit codes the sweep commands share with cli.ts.
 */
import { existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { EXIT_OK, EXIT_RUNTIME, EXIT_SIGINT, EXIT_SIGTERM } from '../src/cli';
import { backoffSeconds } from '../src/sweep/pool';
import { executeRun, SWEEP_EVALUATION_TABLE } from '../src/sweep/run';
import { parseSweep } from '../src/sweep/spec';
import { readSummary } from '../src/trainer';
import { TINY_BASE, waitFor } from './helpers/sweep';

const root = mkdtempSync(join(tmpdir(), 'tilewise-sweep-run-'));
const cacheDir = join(root, 'cache');

function task(steps: number) {
  const s = parseSweep({ name: 'one', base: TINY_BASE, common: { 'train.stop.steps': steps }, seeds: [4] });
  return s.tasks[0]!;
}

describe('executeRun', () => {
  it('an abort from a timer stops an inline run with a checkpoint; the next call resumes, evaluates and returns the record; the third only reads it', async () => {
    const t = task(3000);
    const runDir = join(root, 'a');
    const controller = new AbortController();
    const ckpts = join(runDir, 'checkpoints');
    // Abort from the event loop (as a signal handler or an IPC message does) once a checkpoint exists.
    const watcher = waitFor('the first checkpoint', () => (existsSync(ckpts) && readdirSync(ckpts).some((f) => f.endsWith('.ckpt')) ? true : undefined), 300, 20).then(() =>
      controller.abort('test'),
    );
    const first = await executeRun(t, { runDir, cacheDir, signal: controller.signal });
    await watcher;
    expect(first.status).toBe('interrupted');
    const stoppedAt = (first as { step: number }).step;
    expect(stoppedAt).toBeGreaterThan(0);
    expect(stoppedAt).toBeLessThan(3000);
    expect(readSummary(runDir)!.status).toBe('interrupted');

    const progress: number[] = [];
    const second = await executeRun(t, { runDir, cacheDir, onProgress: (p) => p.fraction !== null && progress.push(p.fraction) });
    expect(second.status).toBe('completed');
    const rec = (second as Extract<typeof second, { status: 'completed' }>).record;
    expect(rec).toMatchObject({ format: 'tilewise-sweep-run/1', sweep: 'one', id: t.id, key: t.key, seed: 4, runDir });
    expect(rec.summary.steps).toBe(3000);
    expect(rec.summary.resumes).toHaveLength(1);
    expect(rec.summary.resumes[0]!.step).toBe(stoppedAt);
    expect(Array.isArray(rec.summary.evaluation)).toBe(true);
    expect(progress.at(-1)).toBe(1); // the evaluation phase reports 1
    expect(readFileSync(join(runDir, SWEEP_EVALUATION_TABLE), 'utf8')).toMatch(/== train: ks L = 22/);

    const mtime = statSync(join(runDir, 'summary.json')).mtimeMs;
    const third = await executeRun(t, { runDir, cacheDir });
    expect(third.status).toBe('completed');
    expect((third as Extract<typeof third, { status: 'completed' }>).record.summary).toEqual(rec.summary);
    expect(statSync(join(runDir, 'summary.json')).mtimeMs).toBe(mtime);
  }, 300_000);

  it('a directory with files a run does not write is not emptied for a fresh start', async () => {
    const runDir = join(root, 'b');
    mkdirSync(runDir, { recursive: true });
    writeFileSync(join(runDir, 'notes.txt'), 'mine');
    await expect(executeRun(task(100), { runDir, cacheDir })).rejects.toThrow(/cannot start the run afresh: the directory holds files a run does not write \(notes\.txt\)/);
    expect(readFileSync(join(runDir, 'notes.txt'), 'utf8')).toBe('mine');
  });
});

describe('pool and command constants', () => {
  it('backoff doubles from backoffSeconds', () => {
    const r = { attempts: 4, backoffSeconds: 10 };
    expect([1, 2, 3].map((k) => backoffSeconds(r, k))).toEqual([10, 20, 40]);
  });

  it('the sweep commands use the exit codes of cli.ts', () => {
    const src = readFileSync(join(__dirname, '..', 'src', 'sweep', 'commands.ts'), 'utf8');
    for (const [name, v] of Object.entries({ EXIT_OK, EXIT_RUNTIME, EXIT_SIGINT, EXIT_SIGTERM })) {
      expect(src).toContain(`const ${name} = ${v};`);
    }
  });
});
