/**
 * The simd backend as a whole (src/net/simd/backend.ts, loader.ts, adam.ts):
 * - build selection: strict runs the plain build, fast runs the FMA build where it validates;
 * - Adam (Kingma & Ba 2015, Algorithm 1) and Polyak averaging through the interface against a
 *   scalar Float64 reference;
 * - strict mode is IEEE-754 binary32 arithmetic in a documented order: forward, backward, Adam
 *   and Polyak equal, bit for bit, an emulation with Math.fround (test/simd-reference.ts) — so
 *   the results do not depend on the machine;
 * - both modes repeat exactly run after run (fresh backends, same seed).
 */
import { Rng } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { parseAgentConfig } from '../src/config';
import { createNetBackend } from '../src/net/select';
import { createSimdBackend, type SimdMode } from '../src/net/simd';
import type { AdamConfig, MlpSpec } from '../src/net/types';
import { bits, fround32, initParams, maxAbs, maxAbsDiff, refAdamStep, refBackward, refForward, refPolyak } from './simd-reference';

const ADAM: AdamConfig = { lr: 3e-3, beta1: 0.9, beta2: 0.999, eps: 1e-8 };

function randomArray(n: number, rng: Rng): Float32Array {
  const a = new Float32Array(n);
  rng.fillUniform(a, -1, 1);
  return a;
}

describe('build selection', () => {
  it('strict mode runs the plain build, fast mode the relaxed-SIMD FMA build on this Node', () => {
    const strict = createSimdBackend({ mode: 'strict' });
    expect(strict.name).toBe('simd');
    expect(strict.reason).toMatch(/strict/);
    const fast = createSimdBackend();
    expect(fast.mode).toBe('fast');
    // Node >= 20.19 (the workspace's engines field) validates relaxed SIMD once the V8 flag is set.
    expect(fast.name).toBe('simd-fma');
    expect(() => createSimdBackend({ mode: 'quick' as SimdMode })).toThrow(/mode must be "strict" or "fast"/);
  });

  it('is what the agent config selects: auto -> simd-fma, "simd" -> the strict build, each logged', async () => {
    const lines: string[] = [];
    const auto = await createNetBackend(parseAgentConfig({}).backend, { log: (m) => lines.push(m) });
    expect(auto.name).toBe('simd-fma');
    const strict = await createNetBackend(parseAgentConfig({ backend: 'simd' }).backend, { log: (m) => lines.push(m) });
    expect(strict.name).toBe('simd');
    expect((await createNetBackend(parseAgentConfig({ backend: 'simd-fma' }).backend)).name).toBe('simd-fma');
    expect(lines).toEqual([
      'network backend: simd-fma (fast mode: relaxed-SIMD FMA validated; 1 thread)',
      'network backend: simd (strict mode: plain SIMD, bit-reproducible; 1 thread)',
    ]);
  });

  it('createAdam rejects a network from another backend and a bad config', () => {
    const a = createSimdBackend({ mode: 'strict' });
    const b = createSimdBackend({ mode: 'strict' });
    const net = b.createMlp({ sizes: [2, 2], hidden: 'relu', output: 'linear' });
    expect(() => a.createAdam(net, ADAM)).toThrow(/created by this backend/);
    expect(() => b.createAdam(net, { ...ADAM, beta2: 1 })).toThrow(/adam.beta2/);
    expect(() => b.createAdam(net, { ...ADAM, lr: -1 })).toThrow(/adam.lr/);
  });
});

describe.each(['strict', 'fast'] as const)('Adam and Polyak through the interface (%s build)', (mode) => {
  it('four Adam steps on backward gradients equal a Float64 Algorithm 1; state round-trips', () => {
    const be = createSimdBackend({ mode });
    const rng = Rng.derive(21, `simd-backend/adam/${mode}`);
    const spec: MlpSpec = { sizes: [6, 12, 3], hidden: 'relu', output: 'linear' };
    const net = be.createMlp(spec);
    const p0 = initParams(spec, rng);
    net.setParams(p0);
    const opt = be.createAdam(net, ADAM);
    const M = new Float64Array(p0.length);
    const V = new Float64Array(p0.length);
    for (let t = 1; t <= 4; t++) {
      net.forward(randomArray(10 * 6, rng), 10);
      net.backward(randomArray(10 * 3, rng), false);
      const g = net.getGrads();
      const before = net.getParams();
      opt.step();
      // Reference from the same starting float32 parameters (errors do not compound across steps).
      const Pt = Float64Array.from(before);
      refAdamStep(Pt, g, M, V, t, ADAM);
      // One step moves each parameter by at most about lr; the float32 result is within a few ulps.
      expect(maxAbsDiff(net.getParams(), Pt)).toBeLessThanOrEqual(1e-6);
      expect(maxAbsDiff(opt.getState().m, M)).toBeLessThanOrEqual(1e-6 * Math.max(1, maxAbs(M)));
      expect(maxAbsDiff(opt.getState().v, V)).toBeLessThanOrEqual(1e-6 * Math.max(1e-3, maxAbs(V)));
      expect(maxAbsDiff(net.getParams(), before)).toBeGreaterThan(0.5 * ADAM.lr);
    }
    const st = opt.getState();
    expect(st.step).toBe(4);
    const opt2 = be.createAdam(net, ADAM);
    opt2.setState(st);
    const s2 = opt2.getState();
    expect(s2.step).toBe(4);
    expect(bits(s2.m)).toEqual(bits(st.m));
    expect(bits(s2.v)).toEqual(bits(st.v));
    expect(() => opt2.setState({ step: 1, m: new Float32Array(3), v: st.v })).toThrow(/adam.state.m/);
    expect(() => opt2.setState({ step: -1, m: st.m, v: st.v })).toThrow(/adam.state.step/);
    opt.dispose();
    expect(() => opt.step()).toThrow(/after dispose/);
  });

  it('polyakInto: target <- tau src + (1 - tau) target (Float64 reference), and tau = 1 copies', () => {
    const be = createSimdBackend({ mode });
    const rng = Rng.derive(22, `simd-backend/polyak/${mode}`);
    const spec: MlpSpec = { sizes: [17, 64, 64, 1], hidden: 'relu', output: 'linear' };
    const src = be.createMlp(spec);
    const dst = be.createMlp(spec);
    const ps = initParams(spec, rng);
    const pd = initParams(spec, rng);
    src.setParams(ps);
    dst.setParams(pd);
    const ref = Float64Array.from(pd);
    src.polyakInto(dst, 0.005);
    refPolyak(ps, ref, 0.005);
    expect(maxAbsDiff(dst.getParams(), ref)).toBeLessThanOrEqual(2 ** -23);
    expect(bits(src.getParams())).toEqual(bits(ps));
    src.polyakInto(dst, 1);
    expect(bits(dst.getParams())).toEqual(bits(ps));
  });
});

describe('strict mode is binary32 arithmetic in the documented order (bit-exact emulation)', () => {
  it.each([
    ['critic 17-64-64-1', { sizes: [17, 64, 64, 1], hidden: 'relu', output: 'linear' } as MlpSpec, 32],
    ['ragged 5-9-7-3', { sizes: [5, 9, 7, 3], hidden: 'relu', output: 'relu' } as MlpSpec, 7],
  ])('%s: forward, backward, Adam and Polyak match bit for bit', (_n, spec, batch) => {
    const be = createSimdBackend({ mode: 'strict' });
    const rng = Rng.derive(23, `simd-backend/emulation/${_n}`);
    const net = be.createMlp(spec);
    const target = be.createMlp(spec);
    const p0 = initParams(spec, rng);
    net.setParams(p0);
    target.setParams(initParams(spec, rng));
    const opt = be.createAdam(net, ADAM);
    const P = Float64Array.from(p0);
    const M = new Float64Array(P.length);
    const V = new Float64Array(P.length);
    const T = Float64Array.from(target.getParams());
    for (let t = 1; t <= 3; t++) {
      const x = randomArray(batch * spec.sizes[0]!, rng);
      const dy = randomArray(batch * spec.sizes[spec.sizes.length - 1]!, rng);
      const y = net.forward(x, batch);
      const pass = refForward(spec, P, x, batch, fround32);
      expect(bits(y)).toEqual(bits(pass.ys[pass.ys.length - 1]!));
      const dx = net.backward(dy, true)!;
      const ref = refBackward(spec, P, pass, dy, batch, fround32);
      expect(bits(net.getGrads())).toEqual(bits(ref.grads));
      expect(bits(dx)).toEqual(bits(ref.dx));
      opt.step();
      refAdamStep(P, ref.grads, M, V, t, ADAM, fround32);
      expect(bits(net.getParams())).toEqual(bits(P));
      net.polyakInto(target, 0.01);
      refPolyak(P, T, 0.01, fround32);
      expect(bits(target.getParams())).toEqual(bits(T));
    }
  });
});

describe.each(['strict', 'fast'] as const)('determinism (%s build)', (mode) => {
  /** A short seeded training sequence on a fresh backend; returns every output it produced. */
  function run(): Float32Array[] {
    const be = createSimdBackend({ mode });
    const rng = Rng.derive(24, 'simd-backend/determinism');
    const spec: MlpSpec = { sizes: [17, 64, 64, 1], hidden: 'relu', output: 'tanh' };
    const net = be.createMlp(spec);
    const tgt = be.createMlp(spec);
    net.setParams(initParams(spec, rng));
    tgt.setParams(net.getParams());
    const opt = be.createAdam(net, ADAM);
    const out: Float32Array[] = [];
    for (let t = 0; t < 5; t++) {
      const x = randomArray(64 * 17, rng);
      out.push(net.forward(x, 64).slice());
      out.push(net.backward(randomArray(64, rng), true)!.slice());
      opt.step();
      net.polyakInto(tgt, 0.005);
      out.push(tgt.predict(x, 64).slice());
    }
    out.push(net.getParams(), tgt.getParams(), opt.getState().m, opt.getState().v);
    return out;
  }

  it('two fresh runs with the same seed give bit-identical outputs, gradients and weights', () => {
    const a = run();
    const b = run();
    expect(a.length).toBe(b.length);
    a.forEach((x, i) => expect(bits(x)).toEqual(bits(b[i]!)));
  });
});

describe.each(['strict', 'fast'] as const)('two threads (%s build)', (mode) => {
  it('give results bit-identical to one thread (every split size, ragged batches)', () => {
    const one = createSimdBackend({ mode });
    const two = createSimdBackend({ mode, threads: 2, minParallelWork: 0 });
    expect(two.threads).toBe(2);
    expect(two.reason).toMatch(/two threads/);
    const rng = Rng.derive(25, `simd-backend/threads/${mode}`);
    const spec: MlpSpec = { sizes: [17, 256, 256, 1], hidden: 'relu', output: 'tanh' };
    const p0 = initParams(spec, rng);
    const nets = [one, two].map((be) => {
      const n = be.createMlp(spec);
      n.setParams(p0);
      return { n, opt: be.createAdam(n, ADAM) };
    });
    for (const batch of [256, 13, 9]) {
      const x = randomArray(batch * 17, rng);
      const dy = randomArray(batch, rng);
      const outs = nets.map(({ n, opt }) => {
        const y = n.forward(x, batch).slice();
        const dx = n.backward(dy, true)!.slice();
        const g = n.getGrads();
        opt.step();
        return [y, dx, g, n.getParams(), n.predict(x, batch).slice()];
      });
      outs[0]!.forEach((a, i) => expect(bits(outs[1]![i]!)).toEqual(bits(a)));
    }
    two.dispose();
    expect(() => createSimdBackend({ threads: 3 as 2 })).toThrow(/simd.threads/);
    // Each hand-off can wait a scheduler tick when the cores are busy: allow for a loaded machine.
  }, 60_000);
});
