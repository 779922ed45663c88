/**
 * End-to-end training at tiny size (src/trainer.ts): run files and log, exact resume, worker
 * and inline runs alike, interruption, crashed and truncated checkpoint writes.
 */
import { existsSync, mkdtempSync, readdirSync, readFileSync, truncateSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { decodeContainer } from '@tilewise/agent';
import { describe, expect, it } from 'vitest';
import { listCheckpoints, readCheckpoint, CHECKPOINT_KIND } from '../src/checkpoint';
import { parseRunConfig, type RunConfig } from '../src/config';
import { loadPolicy } from '../src/policy';
import { resumeRun, train, RUN_FILES, type TrainSummary } from '../src/trainer';

const root = mkdtempSync(join(tmpdir(), 'tilewise-train-'));
const cacheDir = join(root, 'cache');

/** A tiny but complete run: 24-wide networks, 2 copies, 40-decision episodes, validation every 60 steps. */
function tiny(train: Record<string, unknown> = {}, over: Record<string, unknown> = {}): RunConfig {
  return parseRunConfig({
    env: { kind: 'ks', spinUpTime: 10, episodeLength: 40, reference: { time: 100, copies: 2, blockTime: 25 } },
    agent: { actor: { hidden: [24, 24] }, critic: { hidden: [24, 24] }, batchSize: 32, warmup: 160 },
    train: {
      copies: 2,
      stop: { steps: 240, seconds: null },
      validation: { every: 60, episodes: 2, episodeLength: 12, discardDecisions: 2 },
      checkpoint: { everySteps: 120, everySeconds: 0 },
      logEvery: 40,
      finalEvaluation: false,
      ...train,
    },
    evaluation: { seed: 5, episodes: 2, copies: 2, episodeLength: 12, discardDecisions: 2 },
    baselines: { gainSweep: { min: 0.3, max: 1, count: 2, episodes: 2 } },
    ...over,
  });
}

let n = 0;
const runDir = (): string => join(root, `run-${n++}`);

/** The newest checkpoint's agent and env blocks, for exact comparisons. */
function finalState(dir: string): Map<string, ArrayLike<number>> {
  const ck = listCheckpoints(join(dir, RUN_FILES.checkpoints));
  const data = readCheckpoint(join(dir, RUN_FILES.checkpoints, ck[0]!));
  const out = new Map<string, ArrayLike<number>>();
  for (const [k, v] of data.blocks) if (k.startsWith('agent/') || k.startsWith('env/') || k.startsWith('runner/')) out.set(k, v);
  return out;
}

function expectSameState(a: Map<string, ArrayLike<number>>, b: Map<string, ArrayLike<number>>): void {
  expect([...b.keys()]).toEqual([...a.keys()]);
  for (const [k, v] of a) {
    const w = b.get(k)!;
    expect(w.length, k).toBe(v.length);
    // Bit-exact (NaN-safe): compare the bytes.
    expect(Buffer.from(new Uint8Array((w as Float32Array).buffer)).equals(Buffer.from(new Uint8Array((v as Float32Array).buffer))), k).toBe(true);
  }
}

describe('train (end to end, tiny)', () => {
  let straight: { dir: string; summary: TrainSummary };

  it('a few hundred steps produce the run files, and every log line is JSON with namespaced metrics', async () => {
    const dir = runDir();
    const summary = await train(tiny(), { runDir: dir, cacheDir });
    straight = { dir, summary };
    expect(summary.status).toBe('completed');
    expect(summary.steps).toBe(240);
    expect(summary.stopReason).toMatch(/stop\.steps 240/);
    for (const f of [RUN_FILES.config, RUN_FILES.log, RUN_FILES.summary, RUN_FILES.best, RUN_FILES.latest]) expect(existsSync(join(dir, f)), f).toBe(true);
    expect(listCheckpoints(join(dir, RUN_FILES.checkpoints))).toEqual(['step-0000000240.ckpt', 'step-0000000120.ckpt']);
    const lines = readFileSync(join(dir, RUN_FILES.log), 'utf8').trimEnd().split('\n');
    const entries = lines.map((l) => JSON.parse(l) as Record<string, unknown>);
    for (const e of entries) {
      expect(typeof e.msg).toBe('string');
      expect(typeof e.time).toBe('number');
      expect(e.run).toBe('run'); // the config has no train.name and no file name
    }
    const byMsg = (m: string) => entries.filter((e) => e.msg === m);
    expect(byMsg('start')).toHaveLength(1);
    const trainLines = byMsg('train');
    expect(trainLines.map((e) => e.step)).toEqual([40, 80, 120, 160, 200, 240]);
    for (const k of ['train/critic_loss', 'train/actor_loss', 'train/reward', 'train/drag_ratio', 'train/episode_return', 'train/updates']) {
      expect(trainLines.at(-1)![k], k).toEqual(expect.any(Number));
    }
    const val = byMsg('validation');
    expect(val.map((e) => e.step)).toEqual([60, 120, 180, 240]);
    for (const k of ['eval/drag_ratio', 'eval/drag_reduction', 'eval/net_saving', 'eval/best_drag_ratio']) expect(val[0]![k], k).toEqual(expect.any(Number));
    expect(byMsg('episode').length).toBe(summary.episodes);
    expect(byMsg('checkpoint').map((e) => e.step)).toEqual([120, 240]);
    expect(byMsg('stop')).toHaveLength(1);
    // Summary: the best validation is the minimum over the validations, and best.policy holds its step.
    const s = JSON.parse(readFileSync(join(dir, RUN_FILES.summary), 'utf8')) as TrainSummary;
    const drags = s.validations.map((v) => v.drag!);
    expect(s.best!.drag).toBe(Math.min(...drags));
    expect(loadPolicy(join(dir, RUN_FILES.best)).source.step).toBe(s.best!.step);
    expect(loadPolicy(join(dir, RUN_FILES.latest)).source.step).toBe(240);
    // Updates start at the step that finds the warm-up (160 tile transitions = 20 steps of 2 x 4 tiles) stored.
    expect(s.updates).toBe(2 * (240 - 20));
  });

  it('resume is exact: 120 steps, stop, resume to 240 equals 240 straight (weights, Adam, replay, env, generators)', async () => {
    const dir = runDir();
    const first = await train(tiny({ stop: { steps: 120, seconds: null } }), { runDir: dir, cacheDir });
    expect(first.steps).toBe(120);
    const resumed = await resumeRun(dir, { steps: 240, cacheDir });
    expect(resumed.status).toBe('completed');
    expect(resumed.steps).toBe(240);
    expect(resumed.resumes).toHaveLength(1);
    expectSameState(finalState(straight.dir), finalState(dir));
    // The periodic validations (which do not depend on timing) agree too.
    expect(resumed.validations.filter((v) => v.step % 60 === 0).map((v) => v.drag)).toEqual(straight.summary.validations.map((v) => v.drag));
  });

  it('the environment worker changes nothing: parallel: false gives the same final state', async () => {
    const dir = runDir();
    await train(tiny({ parallel: false }), { runDir: dir, cacheDir });
    expectSameState(finalState(straight.dir), finalState(dir));
  });

  it('an interruption (abort signal, as SIGINT does) writes a final checkpoint; resuming continues exactly', async () => {
    const dir = runDir();
    const controller = new AbortController();
    const progress = {
      update: (p: { done: number }) => {
        if (p.done === 100) controller.abort('SIGINT');
      },
      line: () => {},
      done: () => {},
    };
    const s = await train(tiny(), { runDir: dir, cacheDir, signal: controller.signal, progress });
    expect(s.status).toBe('interrupted');
    expect(s.steps).toBe(100);
    expect(listCheckpoints(join(dir, RUN_FILES.checkpoints))[0]).toBe('step-0000000100.ckpt');
    const r = await resumeRun(dir, { cacheDir });
    expect(r.steps).toBe(240);
    expectSameState(finalState(straight.dir), finalState(dir));
  });

  it('a crash between the temporary write and the rename leaves the previous checkpoint usable', async () => {
    const dir = runDir();
    let writes = 0;
    const hooks = {
      beforeRename: () => {
        if (++writes === 2) throw new Error('simulated crash before rename');
      },
    };
    await expect(train(tiny(), { runDir: dir, cacheDir, checkpointHooks: hooks })).rejects.toThrow(/simulated crash/);
    const files = readdirSync(join(dir, RUN_FILES.checkpoints));
    expect(files.filter((f) => f.includes('.tmp-'))).toHaveLength(1); // the unfinished write
    expect(listCheckpoints(join(dir, RUN_FILES.checkpoints))).toEqual(['step-0000000120.ckpt']);
    expect(JSON.parse(readFileSync(join(dir, RUN_FILES.summary), 'utf8')).status).toBe('failed');
    const r = await resumeRun(dir, { cacheDir });
    expect(r.steps).toBe(240);
    expectSameState(finalState(straight.dir), finalState(dir));
  });

  it('a truncated or corrupted newest checkpoint is reported and the previous good one is used', async () => {
    const dir = runDir();
    await train(tiny({ stop: { steps: 180, seconds: null }, checkpoint: { everySteps: 60, everySeconds: 0, keep: 3 } }), { runDir: dir, cacheDir });
    const ckDir = join(dir, RUN_FILES.checkpoints);
    expect(listCheckpoints(ckDir)).toEqual(['step-0000000180.ckpt', 'step-0000000120.ckpt', 'step-0000000060.ckpt']);
    const newest = join(ckDir, 'step-0000000180.ckpt');
    truncateSync(newest, 1000);
    const second = join(ckDir, 'step-0000000120.ckpt');
    const bytes = readFileSync(second);
    bytes[bytes.length >> 1]! ^= 0xff; // one flipped byte in the middle
    writeFileSync(second, bytes);
    const said: string[] = [];
    const r = await resumeRun(dir, { cacheDir, steps: 240, say: (l) => said.push(l) });
    expect(said.join('\n')).toMatch(/step-0000000180\.ckpt: truncated: header of \d+ bytes does not fit in 1000 bytes/);
    expect(said.join('\n')).toMatch(/step-0000000120\.ckpt: checksum mismatch .* corrupted/);
    expect(said.join('\n')).toMatch(/previous checkpoint is used/);
    expect(r.resumes[0]!.checkpoint).toBe('step-0000000060.ckpt');
    expect(readdirSync(ckDir).filter((f) => f.endsWith('.corrupt')).sort()).toEqual(['step-0000000120.ckpt.corrupt', 'step-0000000180.ckpt.corrupt']);
    expect(r.steps).toBe(240);
    expectSameState(finalState(straight.dir), finalState(dir));
    // The checkpoint file is a tilewise container of the checkpoint kind.
    expect(decodeContainer(readFileSync(join(ckDir, listCheckpoints(ckDir)[0]!))).kind).toBe(CHECKPOINT_KIND);
  });

  it('resuming a directory without a readable checkpoint fails clearly', async () => {
    const dir = runDir();
    await train(tiny({ stop: { steps: 20, seconds: null }, checkpoint: { enabled: true, everySteps: 0, everySeconds: 0 } }), { runDir: dir, cacheDir });
    const ckDir = join(dir, RUN_FILES.checkpoints);
    for (const f of listCheckpoints(ckDir)) truncateSync(join(ckDir, f), 10);
    await expect(resumeRun(dir, { cacheDir, say: () => {} })).rejects.toThrow(/no readable checkpoint/);
  });
});
