/**
 * Training throughput: what the second core buys. Prints one JSON object per figure per line.
 *
 *   train-throughput   environment steps/s and agent updates/s of `tilewise train` on a config
 *                      (default configs/ks-l22-t4.yaml) with the environment copies stepped in
 *                      a worker thread while the agent updates (parallel: true) and inline
 *                      (parallel: false); rounds alternate the two modes so a changing machine
 *                      load affects both alike. Validation and checkpoints are off; the run
 *                      starts after the warm-up (random actions) is stored, so every step has
 *                      its updates. `load` is the 1-minute load average at the start of a round.
 *   train-split        inline only: the share of a step spent in the environment and in the
 *                      updates (what the worker can overlap at best).
 *
 * Usage: npx tsx scripts/bench-train.ts [--config configs/ks-l22-t4.yaml] [--steps 3000] [--rounds 3]
 *        [--copies N] [--updates U]
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { loadavg, tmpdir } from 'node:os';
import { join } from 'node:path';
import { createAgent } from '../packages/agent/src/agent';
import { buildEnv } from '../packages/runner/src/env-build';
import { EnvRunner } from '../packages/runner/src/env-runner';
import { loadRunConfig, type RunConfig } from '../packages/runner/src/config';
import { train } from '../packages/runner/src/trainer';
import { option } from './options';

const configPath = option('config', 'configs/ks-l22-t4.yaml');
const steps = Number(option('steps', '3000'));
const rounds = Number(option('rounds', '3'));
const emit = (o: Record<string, unknown>): void => void process.stdout.write(`${JSON.stringify(o)}\n`);
const round3 = (x: number): number => Number(x.toPrecision(4));

const base = loadRunConfig(configPath);
const copies = Number(option('copies', String(base.train.copies)));
const updatesPerStep = Number(option('updates', String(base.train.updatesPerStep)));
const tiles = base.env.config.tiles as number;
// Warm-up in steps: the agent's warm-up in tile transitions over copies x tiles per step.
const warmSteps = Math.ceil(base.agent.warmup / (copies * tiles));

function configFor(parallel: boolean): RunConfig {
  return {
    ...base,
    train: {
      ...base.train,
      copies,
      updatesPerStep,
      parallel,
      stop: { steps: warmSteps + steps, seconds: null, dragBelow: null, patience: null },
      validation: { ...base.train.validation, every: 0 },
      checkpoint: { ...base.train.checkpoint, enabled: false },
      finalEvaluation: false,
    },
  };
}

const tmp = mkdtempSync(join(tmpdir(), 'tilewise-bench-train-'));
for (let r = 0; r < rounds; r++) {
  for (const parallel of r % 2 === 0 ? [true, false] : [false, true]) {
    const load = loadavg()[0]!;
    const dir = join(tmp, `r${r}-${parallel}`);
    const s = await train(configFor(parallel), { runDir: dir });
    // trainSeconds covers the warm-up steps too (no updates); count the whole loop.
    emit({
      figure: 'train-throughput',
      config: configPath,
      parallel,
      copies,
      updatesPerStep,
      width: base.agent.actor.hidden,
      batch: base.agent.batchSize,
      backend: s.backend,
      steps: s.steps,
      seconds: round3(s.trainSeconds),
      stepsPerSecond: round3(s.steps / s.trainSeconds),
      updatesPerSecond: round3(s.updates / s.trainSeconds),
      round: r,
      load: round3(load),
    });
    rmSync(dir, { recursive: true, force: true });
  }
}

// Where an inline step's time goes: environment step vs the agent's updates.
{
  const spec = buildEnv({ config: base.env.config as Record<string, unknown>, copies: 1, reference: 1 }).spec;
  const env = buildEnv({ config: base.env.config as Record<string, unknown>, copies, reference: 1 });
  const runner = new EnvRunner(env, 1, []);
  const agent = await createAgent({ obsDim: spec.obsDim, actDim: spec.actDim, actionBound: spec.actionBound, seed: 1, config: base.agent });
  let obs = runner.start();
  const n = copies * spec.tiles;
  let tEnv = 0;
  let tUpd = 0;
  let counted = 0;
  for (let i = 0; i < warmSteps + Math.min(steps, 1500); i++) {
    const a = agent.act(obs, n, true).slice();
    const t0 = performance.now();
    const res = runner.step(a);
    const t1 = performance.now();
    let k = 0;
    if (agent.ready) for (; k < updatesPerStep; k++) agent.update();
    const t2 = performance.now();
    agent.store(obs, a, res.reward, res.nextObs, res.terminal);
    obs = res.obs;
    if (k > 0) {
      tEnv += t1 - t0;
      tUpd += t2 - t1;
      counted++;
    }
  }
  emit({
    figure: 'train-split',
    config: configPath,
    copies,
    updatesPerStep,
    envMsPerStep: round3(tEnv / counted),
    updateMsPerStep: round3(tUpd / counted),
    envShare: round3(tEnv / (tEnv + tUpd)),
    load: round3(loadavg()[0]!),
  });
  agent.dispose();
}
rmSync(tmp, { recursive: true, force: true });
