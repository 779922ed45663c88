/**
 * Benchmarks of the `simd` network backend (packages/agent/src/net/simd), one JSON object per
 * figure per line on stdout:
 * - matrix-product kernels: GFLOP/s for the shapes of the agent's layers (plain and FMA builds);
 * - a TD3 update (Fujimoto, van Hoof & Meger 2018, Algorithm 1: target policy smoothing, twin
 *   critics, delayed actor step, Polyak averaging) assembled by hand over the `NetBackend`
 *   interface with the shapes of scripts/bench-agent.ts: batch 256, obs 16, act 1, two hidden
 *   layers of width 64 or 256, policy delay 2, on one thread and on two (a helper thread for
 *   large products). ms_per_update averages over updates, so it includes half an actor step each.
 *
 * Usage: npx tsx scripts/bench-simd.ts [--quick]
 */
import { bestTime as time } from '../packages/agent/bench/timing';
import { Rng } from '../packages/envs/src/random';
import { createSimdBackend, type SimdMode } from '../packages/agent/src/net/simd';
import { loadSimdKernels } from '../packages/agent/src/net/simd/loader';
import type { MlpSpec, NetBackend } from '../packages/agent/src/net/types';

const quick = process.argv.includes('--quick');

function emit(o: Record<string, unknown>): void {
  process.stdout.write(`${JSON.stringify(o)}\n`);
}

function benchKernels(mode: SimdMode): void {
  const { build, k, heap } = loadSimdKernels(mode);
  const rng = Rng.derive(1, 'bench-simd/kernels');
  const shapes: [string, number, number, number, boolean][] = [
    ['A B', 256, 64, 64, false],
    ['A B', 256, 256, 256, false],
    ['A^T B', 64, 256, 64, true],
    ['A^T B', 256, 256, 256, true],
    ['A B', 256, 256, 1, false],
  ];
  for (const [op, M, K, N, tA] of shapes) {
    const a = heap.allocF32(M * K);
    const b = heap.allocF32(K * N);
    const c = heap.allocF32(M * N);
    rng.fillUniform(heap.f32(a, M * K), -1, 1);
    rng.fillUniform(heap.f32(b, K * N), -1, 1);
    const pack = heap.allocF32(4 * K);
    const fn = tA ? () => k.gemm(a, 1, M, b, c, M, K, N, 0, 0, 0, 0, pack) : () => k.gemm(a, K, 1, b, c, M, K, N, 0, 0, 0, 0, 0);
    const reps = Math.max(10, Math.floor((quick ? 2e7 : 1e8) / (M * K * N)));
    const ms = time(fn, reps, quick ? 3 : 7);
    emit({ bench: 'simd-kernel', backend: build, op, M, K, N, gflops: +((2 * M * K * N) / ms / 1e6).toFixed(2), us: +(ms * 1000).toFixed(1) });
  }
}

/** A hand-assembled TD3 update over the interface; returns ms per update. */
function benchTd3(be: NetBackend, width: number): number {
  const B = 256;
  const obs = 16;
  const act = 1;
  const gamma = 0.99;
  const tau = 0.005;
  const rng = Rng.derive(2, `bench-simd/td3/${width}`);
  const actorSpec: MlpSpec = { sizes: [obs, width, width, act], hidden: 'relu', output: 'tanh' };
  const criticSpec: MlpSpec = { sizes: [obs + act, width, width, 1], hidden: 'relu', output: 'linear' };
  const mk = (spec: MlpSpec) => {
    const n = be.createMlp(spec);
    const p = new Float32Array(n.paramCount);
    rng.fillUniform(p, -1 / Math.sqrt(width), 1 / Math.sqrt(width));
    n.setParams(p);
    return n;
  };
  const actor = mk(actorSpec);
  const actorT = mk(actorSpec);
  const q1 = mk(criticSpec);
  const q2 = mk(criticSpec);
  const q1T = mk(criticSpec);
  const q2T = mk(criticSpec);
  const adam = { lr: 3e-4, beta1: 0.9, beta2: 0.999, eps: 1e-8 };
  const optA = be.createAdam(actor, adam);
  const opt1 = be.createAdam(q1, adam);
  const opt2 = be.createAdam(q2, adam);
  // One fixed batch (sampling from a replay buffer is not what is measured here).
  const s = new Float32Array(B * obs);
  const a = new Float32Array(B * act);
  const r = new Float32Array(B);
  const s2 = new Float32Array(B * obs);
  const done = new Float32Array(B);
  const noise = new Float32Array(B * act);
  rng.fillUniform(s, -1, 1);
  rng.fillUniform(a, -1, 1);
  rng.fillUniform(r, -1, 0);
  rng.fillUniform(s2, -1, 1);
  rng.fillNormal(noise, 0, 0.2);
  const sa = new Float32Array(B * (obs + act));
  const y = new Float32Array(B);
  const dq = new Float32Array(B);
  const dA = new Float32Array(B * act);
  const concat = (st: Float32Array, ac: ArrayLike<number>): void => {
    for (let i = 0; i < B; i++) {
      sa.set(st.subarray(i * obs, (i + 1) * obs), i * (obs + act));
      for (let j = 0; j < act; j++) sa[i * (obs + act) + obs + j] = ac[i * act + j]!;
    }
  };
  let it = 0;
  const update = (): void => {
    it++;
    // Target actions with clipped smoothing noise (sigma 0.2, clip 0.5), bounded to [-1, 1].
    const a2 = actorT.predict(s2, B);
    const a2n = dA; // reuse as scratch
    for (let i = 0; i < B * act; i++) a2n[i] = Math.min(1, Math.max(-1, a2[i]! + Math.min(0.5, Math.max(-0.5, noise[i]!))));
    concat(s2, a2n);
    const t1 = q1T.predict(sa, B);
    const t2 = q2T.predict(sa, B);
    for (let i = 0; i < B; i++) y[i] = r[i]! + gamma * (1 - done[i]!) * Math.min(t1[i]!, t2[i]!);
    concat(s, a);
    for (const [q, opt] of [[q1, opt1], [q2, opt2]] as const) {
      const qv = q.forward(sa, B);
      for (let i = 0; i < B; i++) dq[i] = (2 * (qv[i]! - y[i]!)) / B;
      q.backward(dq, false);
      opt.step();
    }
    if (it % 2 === 0) {
      const pi = actor.forward(s, B);
      concat(s, pi);
      q1.forward(sa, B);
      dq.fill(-1 / B);
      const dsa = q1.backward(dq, true)!;
      for (let i = 0; i < B; i++) for (let j = 0; j < act; j++) dA[i * act + j] = dsa[i * (obs + act) + obs + j]!;
      actor.backward(dA, false);
      optA.step();
      actor.polyakInto(actorT, tau);
      q1.polyakInto(q1T, tau);
      q2.polyakInto(q2T, tau);
    }
  };
  const reps = width >= 256 ? (quick ? 10 : 40) : quick ? 50 : 200;
  return time(update, reps, quick ? 3 : 5);
}

benchKernels('strict');
benchKernels('fast');
for (const mode of ['strict', 'fast'] as const) {
  for (const threads of [1, 2] as const) {
    const be = createSimdBackend({ mode, threads });
    for (const width of [64, 256]) {
      const ms = benchTd3(be, width);
      emit({ algo: 'td3', width, batch: 256, obs: 16, act: 1, backend: be.name, threads: be.threads, assembled: 'bench-simd', ms_per_update: +ms.toFixed(3) });
    }
    be.dispose();
  }
}
