/**
 * A training run against a solver process: `train()` with `env.kind: external` and the KS
 * surrogate in a child process (examples/ks-solver.ts) ends with exactly the policy of the same
 * run with the surrogate in-process (`env.kind: ks`), since the link carries every value
 * unchanged and the run is deterministic. The run cannot be checkpointed (no getState), which
 * the trainer says when asked to.
 */
import { spawn } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { ksEnvKind, parseKsConfig } from '@tilewise/envs';
import { parseRunConfig } from '../src/config';
import { loadPolicy } from '../src/policy';
import { RUN_FILES, train } from '../src/trainer';

const root = join(__dirname, '..', '..', '..');
const dir = mkdtempSync(join(tmpdir(), 'tilewise-external-train-'));
const KS = {
  kind: 'ks',
  tiles: 4,
  actuators: 4,
  spinUpTime: 10,
  episodeLength: 40,
  reference: { time: 50, copies: 2, blockTime: 25 },
};
const AGENT = { algo: 'td3', backend: 'simd', actor: { hidden: [32] }, critic: { hidden: [32] }, warmup: 100, batchSize: 32, replayCapacity: 8192 };
const TRAIN = {
  seed: 4,
  copies: 2,
  stop: { steps: 150 },
  validation: { every: 0 },
  checkpoint: { enabled: false },
  finalEvaluation: false,
};
const EVALUATION = { episodes: 2, copies: 2, discardDecisions: 4 };

describe('training against an external solver', () => {
  it('gives exactly the policy of the same run in-process', async () => {
    const cacheDir = join(dir, 'cache');
    const p0 = ksEnvKind.reference(parseKsConfig(KS), { cacheDir }).mean;
    const spec = ksEnvKind.create(parseKsConfig(KS), { copies: 1, reference: p0 }).spec;
    const path = join(dir, 'train.sock');
    const external = {
      kind: 'external',
      listen: `unix:${path}`,
      tileGrid: [4, 1],
      obsDim: spec.obsDim,
      actDim: spec.actDim,
      actionBound: spec.actionBound,
      controlInterval: spec.controlInterval,
      episodeLength: KS.episodeLength,
      connectTimeout: 60,
    };
    const child = spawn(process.execPath, ['--import', 'tsx', join(root, 'examples', 'ks-solver.ts'), `unix:${path}`, '--config', JSON.stringify(KS), '--p0', String(p0)], { cwd: root });
    let stderr = '';
    child.stderr.on('data', (d) => (stderr += d));
    const exited = new Promise<number | null>((r) => child.once('exit', r));

    const viaSolver = await train(parseRunConfig({ env: external, agent: AGENT, train: TRAIN, evaluation: EVALUATION }), { runDir: join(dir, 'external'), cacheDir });
    const inProcess = await train(parseRunConfig({ env: KS, agent: AGENT, train: TRAIN, evaluation: EVALUATION }), { runDir: join(dir, 'ks'), cacheDir });
    expect(viaSolver.steps).toBe(150);
    expect(inProcess.steps).toBe(150);
    const a = loadPolicy(join(dir, 'external', RUN_FILES.latest)).snapshot;
    const b = loadPolicy(join(dir, 'ks', RUN_FILES.latest)).snapshot;
    expect(a.params).toEqual(b.params);
    expect(a.normalizer).toEqual(b.normalizer);
    // The solver answered every step of the run (150 steps), then the run's end closed the link.
    child.kill('SIGTERM');
    await exited;
    expect(stderr).toMatch(/running 2 copies of 4 tiles/);
  });

  it('a checkpointed run against a solver is refused up front, naming the field', async () => {
    const cfg = parseRunConfig({
      env: { kind: 'external', tileGrid: [4, 1], obsDim: 24, actDim: 1, actionBound: 0.5, controlInterval: 0.25, episodeLength: 40 },
      agent: AGENT,
      train: { ...TRAIN, checkpoint: { enabled: true } },
      evaluation: EVALUATION,
    });
    await expect(train(cfg, { runDir: join(dir, 'refused') })).rejects.toThrow(/train.checkpoint.enabled: env kind "external" cannot save its state/);
  });
});
