/**
 * td3.ts on the simd backend against the same update on the tfjs backend (tfjs-wasm, the
 * reference implementation of the network interface): identical initial weights, batches and
 * smoothing noise, so the two runs differ only by float32 rounding in the networks.
 */
import { Rng } from '@tilewise/envs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { PRESETS } from '../src/config';
import { initMlpParams } from '../src/net/init';
import { createSimdBackend } from '../src/net/simd';
import { createTfjsBackend, type TfjsBackend } from '../src/net/tfjs';
import type { MlpSpec, NetBackend } from '../src/net/types';
import { createBatch, type Batch } from '../src/replay';
import { createTd3Networks, Td3, type Td3Networks, type Td3Settings, type UpdateResult } from '../src/td3';
import { maxAbs, maxAbsDiff } from './simd-reference';

const OBS = 16;
const ACT = 1;
const N = 256;
const WIDTH = 64;
const actorSpec: MlpSpec = { sizes: [OBS, WIDTH, WIDTH, ACT], hidden: 'relu', output: 'tanh' };
const criticSpec: MlpSpec = { sizes: [OBS + ACT, WIDTH, WIDTH, 1], hidden: 'relu', output: 'linear' };
const p = PRESETS.td3;
const settings: Td3Settings = {
  gamma: p.gamma,
  tau: p.tau,
  policyDelay: p.policyDelay,
  critics: p.critics,
  targetNoise: p.targetNoise,
  actorLr: p.actorLr,
  criticLr: p.criticLr,
  adam: p.adam,
};

function batch(seed: number): Batch {
  const b = createBatch(N, OBS, ACT);
  const r = Rng.derive(seed, 'simd-td3/batch');
  r.fillUniform(b.obs, -1, 1);
  r.fillUniform(b.nextObs, -1, 1);
  r.fillUniform(b.act, -1, 1);
  r.fillUniform(b.reward, -1, 0);
  for (let i = 0; i < N; i++) b.notDone[i] = i % 50 === 0 ? 0 : 1;
  return b;
}

function learner(backend: NetBackend): Td3 {
  const init = Rng.derive(3, 'simd-td3/init');
  // A wider final-layer init than the default (3e-3) so every layer carries gradient.
  const actor = initMlpParams(actorSpec, init, 0.1);
  const critics = [initMlpParams(criticSpec, init, 0.1), initMlpParams(criticSpec, init, 0.1)];
  const nets = createTd3Networks(backend, settings, actorSpec, criticSpec, actor, critics);
  return new Td3(settings, nets, Rng.derive(3, 'simd-td3/smoothing'));
}

function allParams(n: Td3Networks): Float32Array[] {
  return [n.actor, n.actorTarget, ...n.critics, ...n.criticTargets].map((m) => m.getParams());
}

describe.each(['strict', 'fast'] as const)('TD3 update on simd (%s) equals tfjs-wasm', (mode) => {
  let tfjs: TfjsBackend;
  const live: Td3[] = [];
  beforeAll(async () => {
    tfjs = await createTfjsBackend('tfjs-wasm');
  });
  afterAll(() => live.forEach((t) => t.dispose()));

  it('losses, Q and targets, and every weight after one and after four updates', () => {
    const a = learner(createSimdBackend({ mode }));
    const b = learner(tfjs);
    live.push(a, b);
    for (let t = 1; t <= 4; t++) {
      const bt = batch(t);
      const ra: UpdateResult = a.update(bt);
      const rb: UpdateResult = b.update(bt);
      // Scalars: float32 sums of 256 terms, relative 1e-5.
      expect(Math.abs(ra.criticLoss - rb.criticLoss)).toBeLessThanOrEqual(1e-5 * Math.abs(rb.criticLoss));
      expect(Math.abs(ra.q - rb.q)).toBeLessThanOrEqual(1e-5 * Math.max(1e-3, Math.abs(rb.q)));
      expect(Math.abs(ra.target - rb.target)).toBeLessThanOrEqual(1e-5 * Math.abs(rb.target));
      expect(ra.actorLoss === null).toBe(rb.actorLoss === null);
      if (ra.actorLoss !== null) expect(Math.abs(ra.actorLoss - rb.actorLoss!)).toBeLessThanOrEqual(1e-5 * Math.max(1e-3, Math.abs(rb.actorLoss!)));
      // Weights: measured max difference 1.5e-8 (one float32 ulp of values near 0.2) in both
      // modes; the bound, 1e-6, is under 1% of one Adam step (lr = 3e-4).
      const pa = allParams(a.nets);
      const pb = allParams(b.nets);
      pa.forEach((x, i) => expect(maxAbsDiff(x, pb[i]!)).toBeLessThanOrEqual(1e-6));
    }
  });
});
