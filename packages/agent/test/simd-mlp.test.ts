/**
 * The simd backend's `Mlp` (src/net/simd/mlp.ts) in both builds, against outside references:
 * - a Float64 forward/backward written from the definitions (test/simd-reference.ts);
 * - central finite differences of the network's own forward pass;
 * - tfjs automatic differentiation (`tf.grads`, CPU backend) on the same weights and batch;
 * plus the interface's contract (flat parameter order, copies, views, errors, dispose).
 */
import * as tf from '@tensorflow/tfjs';
import { Rng } from '@tilewise/envs';
import { beforeAll, describe, expect, it } from 'vitest';
import { createSimdBackend } from '../src/net/simd';
import type { Mlp, MlpSpec } from '../src/net/types';
import { initParams, layerOffsets, maxAbs, maxAbsDiff, refBackward, refForward } from './simd-reference';

function randomArray(n: number, rng: Rng, lo = -1, hi = 1): Float32Array {
  const a = new Float32Array(n);
  rng.fillUniform(a, lo, hi);
  return a;
}

const specs: [string, MlpSpec][] = [
  ['critic 17-64-64-1 relu/linear', { sizes: [17, 64, 64, 1], hidden: 'relu', output: 'linear' }],
  ['actor 16-64-64-1 relu/tanh', { sizes: [16, 64, 64, 1], hidden: 'relu', output: 'tanh' }],
  ['critic 17-256-256-1 relu/linear', { sizes: [17, 256, 256, 1], hidden: 'relu', output: 'linear' }],
  ['ragged 5-7-3 tanh/relu', { sizes: [5, 7, 3], hidden: 'tanh', output: 'relu' }],
  ['single layer 6-4 linear', { sizes: [6, 4], hidden: 'relu', output: 'linear' }],
];

describe.each(['strict', 'fast'] as const)('SimdMlp (%s build)', (mode) => {
  const be = createSimdBackend({ mode });

  it.each(specs)('%s: forward, predict and backward against a Float64 reference', (_name, spec) => {
    const rng = Rng.derive(11, `simd-mlp/${mode}/${spec.sizes.join('-')}`);
    const net = be.createMlp(spec);
    const params = initParams(spec, rng);
    net.setParams(params);
    for (const batch of [256, 3]) {
      const x = randomArray(batch * spec.sizes[0]!, rng);
      const out = spec.sizes[spec.sizes.length - 1]!;
      const dy = randomArray(batch * out, rng);
      const y = net.forward(x, batch).slice();
      const yp = net.predict(x, batch);
      expect(yp).toEqual(y);
      const ref = refForward(spec, params, x, batch);
      const yRef = ref.ys[ref.ys.length - 1]!;
      // Activations are O(1) and each layer sums <= 257 products: errors of a few 1e-6.
      expect(maxAbsDiff(y, yRef)).toBeLessThanOrEqual(2e-5 * Math.max(1, maxAbs(yRef)));
      const dx = net.backward(dy, true)!;
      const g = net.getGrads();
      const gRef = refBackward(spec, params, ref, dy, batch);
      // dW sums over the batch (up to 256 terms of size <= 1): scale the tolerance by max |g|.
      expect(maxAbsDiff(g, gRef.grads)).toBeLessThanOrEqual(1e-5 * Math.max(1, maxAbs(gRef.grads)));
      expect(maxAbsDiff(dx, gRef.dx)).toBeLessThanOrEqual(1e-5 * Math.max(1, maxAbs(gRef.dx)));
      expect(net.backward(dy, false)).toBeNull();
      expect(net.getGrads()).toEqual(g);
    }
    net.dispose();
  });

  it.each([
    ['tanh/linear', { sizes: [4, 6, 5, 2], hidden: 'tanh', output: 'linear' } as MlpSpec],
    ['tanh/tanh', { sizes: [3, 8, 1], hidden: 'tanh', output: 'tanh' } as MlpSpec],
    ['linear/linear', { sizes: [5, 4, 3], hidden: 'linear', output: 'linear' } as MlpSpec],
  ])('%s: parameter and input gradients against central finite differences of forward', (_n, spec) => {
    // Loss L = sum(w * y) with fixed weights w; h = 1e-2 in float32 keeps the rounding noise
    // (about 1e-7 |L| / h) and the truncation error (h^2 |L'''| / 6) both below 1e-4.
    const rng = Rng.derive(12, `simd-mlp/fd/${mode}/${_n}`);
    const net = be.createMlp(spec);
    const params = initParams(spec, rng);
    net.setParams(params);
    const batch = 5;
    const x = randomArray(batch * spec.sizes[0]!, rng);
    const w = randomArray(batch * spec.sizes[spec.sizes.length - 1]!, rng);
    const loss = (p: Float32Array, xx: Float32Array): number => {
      net.setParams(p);
      const y = net.predict(xx, batch);
      let s = 0;
      for (let k = 0; k < y.length; k++) s += w[k]! * y[k]!;
      return s;
    };
    net.setParams(params);
    net.forward(x, batch);
    const dx = net.backward(w, true)!.slice();
    const g = net.getGrads();
    const h = 1e-2;
    /** Central differences of f at v0 in float32 steps, each checked against `grad`. */
    const check = (f: (v: Float32Array) => number, v0: Float32Array, grad: Float32Array): void => {
      for (let k = 0; k < v0.length; k++) {
        const vp = v0.slice();
        const vm = v0.slice();
        vp[k] = vp[k]! + h;
        vm[k] = vm[k]! - h;
        const fd = (f(vp) - f(vm)) / (vp[k]! - vm[k]!);
        expect(Math.abs(fd - grad[k]!)).toBeLessThanOrEqual(2e-4 * Math.max(1, Math.abs(grad[k]!)));
      }
    };
    check((p) => loss(p, x), params, g);
    check((xx) => loss(params, xx), x, dx);
    net.dispose();
  });

  describe('against tfjs automatic differentiation (CPU backend)', () => {
    beforeAll(async () => {
      await tf.setBackend('cpu');
    });

    /** The same MLP in tfjs ops; returns y. */
    function tfForward(spec: MlpSpec, vars: tf.Tensor[], x: tf.Tensor): tf.Tensor {
      let h = x;
      const L = spec.sizes.length - 1;
      for (let l = 0; l < L; l++) {
        h = tf.add(tf.matMul(h, vars[2 * l]!), vars[2 * l + 1]!);
        const a = l === L - 1 ? spec.output : spec.hidden;
        if (a === 'relu') h = tf.relu(h);
        else if (a === 'tanh') h = tf.tanh(h);
      }
      return h;
    }

    it.each(specs.slice(0, 3))('%s, batch 256: dL/dparams and dL/dx equal tf.grads', (_name, spec) => {
      const rng = Rng.derive(13, `simd-mlp/tfjs/${mode}/${spec.sizes.join('-')}`);
      const net: Mlp = be.createMlp(spec);
      const params = initParams(spec, rng);
      net.setParams(params);
      const batch = 256;
      const x = randomArray(batch * spec.sizes[0]!, rng);
      const dy = randomArray(batch * spec.sizes[spec.sizes.length - 1]!, rng);
      const y = net.forward(x, batch).slice();
      const dx = net.backward(dy, true)!.slice();
      const g = net.getGrads();
      const { yTf, gTf } = tf.tidy(() => {
        const offs = layerOffsets(spec.sizes);
        const tensors: tf.Tensor[] = [];
        offs.forEach(({ w, b }, l) => {
          const nin = spec.sizes[l]!;
          const nout = spec.sizes[l + 1]!;
          tensors.push(tf.tensor2d(params.slice(w, w + nin * nout), [nin, nout]));
          tensors.push(tf.tensor1d(params.slice(b, b + nout)));
        });
        const xT = tf.tensor2d(x, [batch, spec.sizes[0]!]);
        const dyT = tf.tensor2d(dy, [batch, spec.sizes[spec.sizes.length - 1]!]);
        const f = (...args: tf.Tensor[]): tf.Scalar => tf.sum(tf.mul(tfForward(spec, args.slice(1), args[0]!), dyT));
        const grads = tf.grads(f)([xT, ...tensors]);
        return {
          yTf: tfForward(spec, tensors, xT).dataSync() as Float32Array,
          gTf: grads.map((t) => t.dataSync() as Float32Array),
        };
      });
      expect(maxAbsDiff(y, yTf)).toBeLessThanOrEqual(1e-5 * Math.max(1, maxAbs(yTf)));
      const flat = new Float32Array(g.length);
      let o = 0;
      for (const t of gTf.slice(1)) {
        flat.set(t, o);
        o += t.length;
      }
      expect(o).toBe(net.paramCount);
      expect(maxAbsDiff(g, flat)).toBeLessThanOrEqual(1e-5 * Math.max(1, maxAbs(flat)));
      expect(maxAbsDiff(dx, gTf[0]!)).toBeLessThanOrEqual(1e-5 * Math.max(1, maxAbs(gTf[0]!)));
      net.dispose();
    });
  });

  it('keeps the flat order W0, b0, W1, b1 and hands out copies', () => {
    const spec: MlpSpec = { sizes: [2, 3, 1], hidden: 'linear', output: 'linear' };
    const net = be.createMlp(spec);
    expect(net.paramCount).toBe(2 * 3 + 3 + 3 * 1 + 1);
    // y = (x W0 + b0) W1 + b1 with W0 = [[1,2,3],[4,5,6]], b0 = [7,8,9], W1 = [1,10,100]^T, b1 = 1000.
    const p = Float32Array.from([1, 2, 3, 4, 5, 6, 7, 8, 9, 1, 10, 100, 1000]);
    net.setParams(p);
    const y = net.forward(Float32Array.from([1, 0, 0, 1]), 2);
    // x = [1, 0]: h = [8, 10, 12] -> 8 + 100 + 1200 + 1000 = 2308; x = [0, 1]: h = [11, 13, 15] -> 2641.
    expect(Array.from(y)).toEqual([2308, 2641]);
    const got = net.getParams();
    expect(got).toEqual(p);
    got[0] = 99;
    expect(net.getParams()[0]).toBe(1);
    // Steady state hands out the same views (no per-call allocation of outputs).
    const x2 = Float32Array.from([1, 0, 0, 1]);
    expect(net.forward(x2, 2)).toBe(net.forward(x2, 2));
    expect(net.predict(x2, 2)).toBe(net.predict(x2, 2));
    expect(net.backward(Float32Array.from([1, 1]), true)).toBe(net.backward(Float32Array.from([1, 1]), true));
    const g = net.getGrads();
    g[0] = 99;
    expect(net.getGrads()[0]).not.toBe(99);
    net.dispose();
  });

  it('rejects bad shapes and use after dispose, and Polyak across different networks', () => {
    const spec: MlpSpec = { sizes: [3, 4, 2], hidden: 'relu', output: 'linear' };
    expect(() => be.createMlp({ sizes: [3], hidden: 'relu', output: 'linear' })).toThrow(/mlp.sizes/);
    expect(() => be.createMlp({ sizes: [3, 0, 1], hidden: 'relu', output: 'linear' })).toThrow(/mlp.sizes\[1\]/);
    expect(() => be.createMlp({ sizes: [3, 2], hidden: 'gelu' as 'relu', output: 'linear' })).toThrow(/mlp.hidden/);
    const net = be.createMlp(spec);
    expect(() => net.backward(new Float32Array(4), false)).toThrow(/forward first/);
    expect(() => net.forward(new Float32Array(5), 2)).toThrow(/batch\*in = 6/);
    expect(() => net.forward(new Float32Array(6), 0)).toThrow(/batch/);
    expect(() => net.setParams(new Float32Array(3))).toThrow(/expected 26 values/);
    net.forward(new Float32Array(6), 2);
    expect(() => net.backward(new Float32Array(3), false)).toThrow(/batch\*out = 4/);
    const other = be.createMlp({ sizes: [3, 5, 2], hidden: 'relu', output: 'linear' });
    expect(() => net.polyakInto(other, 0.5)).toThrow(/sizes/);
    const twin = be.createMlp(spec);
    expect(() => net.polyakInto(twin, 1.5)).toThrow(/tau/);
    const foreign = createSimdBackend({ mode }).createMlp(spec);
    expect(() => net.polyakInto(foreign, 0.5)).toThrow(/same simd backend/);
    net.dispose();
    expect(() => net.forward(new Float32Array(6), 2)).toThrow(/after dispose/);
    [other, twin, foreign].forEach((n) => n.dispose());
  });

  it('keeps earlier outputs valid while another network grows the memory', () => {
    const rng = Rng.derive(14, `simd-mlp/views/${mode}`);
    const spec: MlpSpec = { sizes: [8, 16, 4], hidden: 'relu', output: 'linear' };
    const a = be.createMlp(spec);
    a.setParams(initParams(spec, rng));
    const y = a.forward(randomArray(8 * 8, rng), 8);
    const before = y.slice();
    // A network and batch big enough to grow the memory by several pages.
    const big = be.createMlp({ sizes: [256, 256, 256], hidden: 'relu', output: 'linear' });
    big.forward(new Float32Array(4096 * 256), 4096);
    expect(y.length).toBe(32);
    expect(y).toEqual(before);
    big.dispose();
    a.dispose();
  });
});
