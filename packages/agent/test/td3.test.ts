/**
 * td3.ts against the algorithms written out separately here, step by step from the papers:
 * DDPG (Lillicrap et al. 2016, Algorithm 1) for the ddpg preset, and TD3 (Fujimoto et al.
 * 2018, Algorithm 1) for the td3 preset. Both sides run the same backend calls in the same
 * order on identical copies of the networks, so the results must agree bit for bit.
 */
import { Rng } from '@tilewise/envs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { initMlpParams } from '../src/net/init';
import { createNetBackend } from '../src/net/select';
import type { MlpSpec, NetBackend } from '../src/net/types';
import { createBatch, type Batch } from '../src/replay';
import { createTd3Networks, Td3, type Td3Networks, type Td3Settings } from '../src/td3';

const OBS = 3;
const ACT = 2;
const N = 16;
const actorSpec: MlpSpec = { sizes: [OBS, 16, ACT], hidden: 'relu', output: 'tanh' };
const criticSpec: MlpSpec = { sizes: [OBS + ACT, 16, 1], hidden: 'relu', output: 'linear' };
const adam = { beta1: 0.9, beta2: 0.999, eps: 1e-8 };

function randomBatch(seed: string): Batch {
  const b = createBatch(N, OBS, ACT);
  const r = new Rng(seed);
  r.fillUniform(b.obs, -1, 1);
  r.fillUniform(b.nextObs, -1, 1);
  r.fillUniform(b.act, -1, 1);
  r.fillUniform(b.reward, -1, 1);
  for (let i = 0; i < N; i++) b.notDone[i] = i % 4 === 0 ? 0 : 1; // some true terminals
  return b;
}

function networks(backend: NetBackend, settings: Td3Settings, seed: string): Td3Networks {
  const init = new Rng(seed);
  // Wider final-layer init than the default so the first steps move every output.
  const actor = initMlpParams(actorSpec, init, 0.3);
  const critics = Array.from({ length: settings.critics }, () => initMlpParams(criticSpec, init, 0.3));
  return createTd3Networks(backend, settings, actorSpec, criticSpec, actor, critics);
}

function join(obs: Float32Array, act: Float32Array): Float32Array {
  const out = new Float32Array(N * (OBS + ACT));
  for (let i = 0; i < N; i++) {
    out.set(obs.subarray(i * OBS, (i + 1) * OBS), i * (OBS + ACT));
    out.set(act.subarray(i * ACT, (i + 1) * ACT), i * (OBS + ACT) + OBS);
  }
  return out;
}

/** Deterministic policy gradient step, shared by both written-out algorithms. */
function actorStep(n: Td3Networks, b: Batch): number {
  const a = n.actor.forward(b.obs, N);
  const q = n.critics[0]!.forward(join(b.obs, a), N);
  let s = 0;
  for (let i = 0; i < N; i++) s += q[i]!;
  const dsa = n.critics[0]!.backward(new Float32Array(N).fill(-1 / N), true)!;
  const da = new Float32Array(N * ACT);
  for (let i = 0; i < N; i++) da.set(dsa.subarray(i * (OBS + ACT) + OBS, (i + 1) * (OBS + ACT)), i * ACT);
  n.actor.backward(da, false);
  n.actorOpt.step();
  return -s / N;
}

function expectSameNetworks(a: Td3Networks, b: Td3Networks): void {
  expect(a.actor.getParams()).toEqual(b.actor.getParams());
  expect(a.actorTarget.getParams()).toEqual(b.actorTarget.getParams());
  a.critics.forEach((c, j) => expect(c.getParams()).toEqual(b.critics[j]!.getParams()));
  a.criticTargets.forEach((c, j) => expect(c.getParams()).toEqual(b.criticTargets[j]!.getParams()));
}

describe.each(['tfjs-wasm', 'simd-fma', 'simd'] as const)('td3.ts against the written-out algorithms (%s)', (backendName) => {
  let backend: NetBackend;
  const live: Array<{ dispose(): void }> = [];
  beforeAll(async () => {
    backend = await createNetBackend(backendName);
  });
  afterAll(() => live.forEach((x) => x.dispose()));

  it('the ddpg preset performs exactly the DDPG update (Lillicrap et al. 2016, Algorithm 1)', () => {
    const settings: Td3Settings = { gamma: 0.99, tau: 0.01, policyDelay: 1, critics: 1, targetNoise: null, actorLr: 1e-3, criticLr: 1e-3, adam };
    const td3 = new Td3(settings, networks(backend, settings, 'nets'), new Rng('unused'));
    live.push(td3);
    const ref = networks(backend, settings, 'nets');
    live.push({ dispose: () => [ref.actor, ref.actorTarget, ...ref.critics, ...ref.criticTargets].forEach((m) => m.dispose()) });
    for (let step = 0; step < 4; step++) {
      const b = randomBatch(`batch-${step}`);
      const got = td3.update(b);
      // y_i = r_i + gamma Q'(s_{i+1}, mu'(s_{i+1})) (zero bootstrap after a terminal state)
      const aNext = ref.actorTarget.predict(b.nextObs, N);
      const qNext = ref.criticTargets[0]!.predict(join(b.nextObs, aNext), N);
      const y = new Float32Array(N);
      for (let i = 0; i < N; i++) y[i] = b.reward[i]! + settings.gamma * b.notDone[i]! * qNext[i]!;
      // Critic: minimise L = N^-1 sum (y_i - Q(s_i, a_i))^2
      const q = ref.critics[0]!.forward(join(b.obs, b.act), N);
      const dq = new Float32Array(N);
      let loss = 0;
      for (let i = 0; i < N; i++) {
        const e = q[i]! - y[i]!;
        loss += (e * e) / N;
        dq[i] = (2 * e) / N;
      }
      ref.critics[0]!.backward(dq, false);
      ref.criticOpts[0]!.step();
      // Actor: sampled policy gradient; then both targets: theta' <- tau theta + (1 - tau) theta'
      const actorLoss = actorStep(ref, b);
      ref.critics[0]!.polyakInto(ref.criticTargets[0]!, settings.tau);
      ref.actor.polyakInto(ref.actorTarget, settings.tau);

      expect(got.criticLoss).toBe(loss);
      expect(got.actorLoss).toBe(actorLoss);
      expectSameNetworks(td3.nets, ref);
    }
  });

  it('the td3 preset performs exactly TD3 (Fujimoto et al. 2018, Algorithm 1)', () => {
    const settings: Td3Settings = {
      gamma: 0.98,
      tau: 0.05,
      policyDelay: 2,
      critics: 2,
      targetNoise: { std: 0.4, clip: 0.5 },
      actorLr: 1e-3,
      criticLr: 2e-3,
      adam,
    };
    const noise = new Rng('smoothing');
    const td3 = new Td3(settings, networks(backend, settings, 'nets2'), Rng.fromState(noise.getState()));
    live.push(td3);
    const ref = networks(backend, settings, 'nets2');
    live.push({ dispose: () => [ref.actor, ref.actorTarget, ...ref.critics, ...ref.criticTargets].forEach((m) => m.dispose()) });
    let clipped = 0;
    for (let t = 1; t <= 5; t++) {
      const b = randomBatch(`batch2-${t}`);
      const actorBefore = td3.nets.actor.getParams();
      const got = td3.update(b);
      // a~ <- mu'(s') + eps, eps ~ clip(N(0, sigma~), -c, c), kept in the action range
      const aNext = ref.actorTarget.predict(b.nextObs, N);
      const aT = new Float32Array(N * ACT);
      for (let k = 0; k < N * ACT; k++) {
        const raw = 0.4 * noise.normal();
        const eps = Math.min(0.5, Math.max(-0.5, raw));
        if (eps !== raw) clipped++;
        aT[k] = Math.min(1, Math.max(-1, aNext[k]! + eps));
      }
      // y <- r + gamma min_{i=1,2} Q'_i(s', a~)
      const sa = join(b.nextObs, aT);
      const q1 = Float32Array.from(ref.criticTargets[0]!.predict(sa, N));
      const q2 = ref.criticTargets[1]!.predict(sa, N);
      const y = new Float32Array(N);
      for (let i = 0; i < N; i++) y[i] = b.reward[i]! + settings.gamma * b.notDone[i]! * Math.min(q1[i]!, q2[i]!);
      // theta_i <- argmin N^-1 sum (y - Q_i(s, a))^2 for both critics
      let loss = 0;
      for (let j = 0; j < 2; j++) {
        const q = ref.critics[j]!.forward(join(b.obs, b.act), N);
        const dq = new Float32Array(N);
        for (let i = 0; i < N; i++) {
          const e = q[i]! - y[i]!;
          loss += (e * e) / N;
          dq[i] = (2 * e) / N;
        }
        ref.critics[j]!.backward(dq, false);
        ref.criticOpts[j]!.step();
      }
      expect(got.criticLoss).toBe(loss);
      // if t mod d: actor step on Q_1, then all three targets
      if (t % 2 === 0) {
        expect(got.actorLoss).toBe(actorStep(ref, b));
        for (let j = 0; j < 2; j++) ref.critics[j]!.polyakInto(ref.criticTargets[j]!, settings.tau);
        ref.actor.polyakInto(ref.actorTarget, settings.tau);
      } else {
        expect(got.actorLoss).toBeNull();
        expect(td3.nets.actor.getParams()).toEqual(actorBefore); // delayed: untouched
      }
      expectSameNetworks(td3.nets, ref);
    }
    expect(clipped).toBeGreaterThan(0); // std 0.4 vs clip 0.5: the clip was exercised
    expect(td3.updates).toBe(5);
  });

  it('a true terminal cuts the bootstrap; a time-limit row bootstraps', () => {
    const settings: Td3Settings = { gamma: 0.9, tau: 0.01, policyDelay: 1, critics: 1, targetNoise: null, actorLr: 1e-3, criticLr: 1e-3, adam };
    const nets = networks(backend, settings, 'nets3');
    const td3 = new Td3(settings, nets, new Rng(0));
    live.push(td3);
    const b = randomBatch('terminal');
    b.notDone.fill(0);
    const all = td3.update(b).target;
    let meanR = 0;
    for (let i = 0; i < N; i++) meanR += b.reward[i]! / N;
    expect(all).toBeCloseTo(meanR, 6); // y = r exactly (float32 rounding of the mean only)
    b.notDone.fill(1);
    const qNext = nets.criticTargets[0]!.predict(join(b.nextObs, nets.actorTarget.predict(b.nextObs, N)), N);
    let meanY = 0;
    for (let i = 0; i < N; i++) meanY += (b.reward[i]! + 0.9 * qNext[i]!) / N;
    expect(td3.update(b).target).toBeCloseTo(meanY, 6);
  });
});
