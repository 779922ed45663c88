/**
 * The tfjs network backend against outside references:
 * - forward against a Float64 evaluation of the MLP definition (test/helpers/mlp64.ts);
 * - hand-written gradients against central finite differences of that Float64 forward, and
 *   against tfjs's own automatic differentiation (tf.grads) on the same weights and batch;
 * - Adam against Kingma & Ba (2015, ICLR) Algorithm 1 evaluated in Float64, and against the
 *   closed form of the first step (|step| = lr per parameter, Section 2 of the paper);
 * - Polyak averaging against its element-wise float32 definition (exact).
 * Run on the wasm and the plain CPU engines.
 */
import * as tf from '@tensorflow/tfjs';
import { Rng } from '@tilewise/envs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { initMlpParams } from '../../src/net/init';
import { createTfjsBackend, type TfjsBackend, type TfjsEngine } from '../../src/net/tfjs';
import type { Mlp, MlpSpec } from '../../src/net/types';
import { centralDiff, forward64, relMaxError } from '../helpers/mlp64';

function data(n: number, seed: string, scale = 1): Float32Array {
  const out = new Float32Array(n);
  Rng.derive(seed, 'test-data').fillUniform(out, -scale, scale);
  return out;
}

const B = 7;
const criticSpec = (hidden: 'relu' | 'tanh'): MlpSpec => ({ sizes: [5, 8, 6, 1], hidden, output: 'linear' });
const actorSpec: MlpSpec = { sizes: [3, 8, 2], hidden: 'tanh', output: 'tanh' };

/** Parameters drawn wider than the default init so every layer matters to the gradient. */
function params(spec: MlpSpec, seed: string): Float32Array {
  return initMlpParams(spec, Rng.derive(seed, 'init'), 0.5);
}

for (const engine of ['tfjs-wasm', 'tfjs-cpu'] as TfjsEngine[]) {
  describe(`tfjs network backend on ${engine}`, () => {
    let backend: TfjsBackend;
    const nets: Mlp[] = [];
    const make = (spec: MlpSpec, p: Float32Array): Mlp => {
      const net = backend.createMlp(spec);
      net.setParams(p);
      nets.push(net);
      return net;
    };
    beforeAll(async () => {
      const lines: string[] = [];
      backend = await createTfjsBackend(engine, { log: (m) => lines.push(m) });
      expect(backend.name).toBe(engine);
      expect(lines.join('\n')).toContain(engine);
    });
    afterAll(() => {
      for (const n of nets) n.dispose();
    });

    it('forward and predict equal the Float64 definition to float32 accuracy', () => {
      for (const hidden of ['relu', 'tanh'] as const) {
        const spec = criticSpec(hidden);
        const p = params(spec, `fwd-${hidden}`);
        const net = make(spec, p);
        const x = data(B * 5, 'x');
        const ref = forward64(spec, p, x, B);
        expect(relMaxError(net.forward(x, B), ref)).toBeLessThan(2e-6);
        expect(relMaxError(net.predict(x, B), ref)).toBeLessThan(2e-6);
      }
    });

    it('critic-loss gradient equals central finite differences of the Float64 loss', () => {
      // L(theta) = mean_i (Q(x_i) - y_i)^2, dL/dQ_i = 2 (Q_i - y_i) / B, as in td3.ts.
      for (const hidden of ['relu', 'tanh'] as const) {
        const spec = criticSpec(hidden);
        const p = params(spec, `crit-${hidden}`);
        const net = make(spec, p);
        const x = data(B * 5, 'xc');
        const y = data(B, 'yc');
        const q = net.forward(x, B);
        const dq = new Float32Array(B);
        for (let i = 0; i < B; i++) dq[i] = (2 * (q[i]! - y[i]!)) / B;
        const dx = net.backward(dq, true)!;
        const loss64 = (pp: ArrayLike<number>) => {
          const q64 = forward64(spec, pp, x, B);
          let s = 0;
          for (let i = 0; i < B; i++) s += (q64[i]! - y[i]!) ** 2;
          return s / B;
        };
        // h = 1e-6 in Float64: truncation error O(h^2) and rounding O(1e-16 / h) are both
        // far below float32 resolution, so the float32 gradient is what the error measures.
        const fd = centralDiff(loss64, p, 1e-6);
        expect(relMaxError(net.getGrads(), fd)).toBeLessThan(1e-5);
        // Input gradient against differences in x.
        const fdx = centralDiff((xx) => {
          const q64 = forward64(spec, p, xx, B);
          let s = 0;
          for (let i = 0; i < B; i++) s += (q64[i]! - y[i]!) ** 2;
          return s / B;
        }, x, 1e-6);
        expect(relMaxError(dx, fdx)).toBeLessThan(1e-5);
      }
    });

    it('actor gradient through the critic equals central finite differences', () => {
      // J(theta_actor) = -mean_i Q(s_i, mu(s_i)); the chain rule runs as in td3.ts: the critic's
      // input gradient, restricted to the action columns, is the actor's output gradient.
      const cSpec: MlpSpec = { sizes: [5, 8, 6, 1], hidden: 'tanh', output: 'linear' };
      const pa = params(actorSpec, 'actor');
      const pc = params(cSpec, 'critic');
      const actor = make(actorSpec, pa);
      const critic = make(cSpec, pc);
      const s = data(B * 3, 's');
      const a = actor.forward(s, B);
      const sa = new Float32Array(B * 5);
      for (let i = 0; i < B; i++) {
        sa.set(s.subarray(i * 3, i * 3 + 3), i * 5);
        sa.set(a.subarray(i * 2, i * 2 + 2), i * 5 + 3);
      }
      critic.forward(sa, B);
      const dx = critic.backward(new Float32Array(B).fill(-1 / B), true)!;
      const da = new Float32Array(B * 2);
      for (let i = 0; i < B; i++) da.set(dx.subarray(i * 5 + 3, i * 5 + 5), i * 2);
      expect(actor.backward(da, false)).toBeNull();
      const j64 = (pp: ArrayLike<number>) => {
        const a64 = forward64(actorSpec, pp, s, B);
        const sa64 = new Float64Array(B * 5);
        for (let i = 0; i < B; i++) {
          for (let k = 0; k < 3; k++) sa64[i * 5 + k] = s[i * 3 + k]!;
          for (let k = 0; k < 2; k++) sa64[i * 5 + 3 + k] = a64[i * 2 + k]!;
        }
        const q = forward64(cSpec, pc, sa64, B);
        let sum = 0;
        for (let i = 0; i < B; i++) sum += q[i]!;
        return -sum / B;
      };
      expect(relMaxError(actor.getGrads(), centralDiff(j64, pa, 1e-6))).toBeLessThan(1e-5);
    });

    it('gradients agree with tfjs automatic differentiation on the same weights and batch', () => {
      const spec = criticSpec('relu');
      const p = params(spec, 'autodiff');
      const net = make(spec, p);
      const x = data(B * 5, 'xa');
      const y = data(B, 'ya');
      const q = net.forward(x, B);
      const dq = new Float32Array(B);
      for (let i = 0; i < B; i++) dq[i] = (2 * (q[i]! - y[i]!)) / B;
      net.backward(dq, false);
      const auto = tf.tidy(() => {
        const xt = tf.tensor2d(x, [B, 5]);
        const yt = tf.tensor2d(y, [B, 1]);
        const loss = (flat: tf.Tensor) => {
          let a: tf.Tensor = xt;
          let off = 0;
          const s = spec.sizes;
          for (let l = 0; l + 1 < s.length; l++) {
            const w = tf.reshape(tf.slice(flat, [off], [s[l]! * s[l + 1]!]), [s[l]!, s[l + 1]!]);
            off += s[l]! * s[l + 1]!;
            const b = tf.slice(flat, [off], [s[l + 1]!]);
            off += s[l + 1]!;
            const z = tf.add(tf.matMul(a as tf.Tensor2D, w as tf.Tensor2D), b);
            a = l + 2 === s.length ? z : tf.relu(z);
          }
          return tf.mean(tf.square(tf.sub(a, yt)));
        };
        return tf.grad(loss)(tf.tensor1d(p)).dataSync() as Float32Array;
      });
      expect(relMaxError(net.getGrads(), auto)).toBeLessThan(2e-6);
    });

    it('Adam follows Kingma & Ba Algorithm 1 (Float64 reference) and its first-step closed form', () => {
      const spec = criticSpec('tanh');
      const p = params(spec, 'adam');
      const net = make(spec, p);
      const cfg = { lr: 1e-3, beta1: 0.9, beta2: 0.999, eps: 1e-8 };
      const adam = backend.createAdam(net, cfg);
      const x = data(B * 5, 'xadam');
      const theta = Float64Array.from(p);
      const m = new Float64Array(p.length);
      const v = new Float64Array(p.length);
      for (let t = 1; t <= 5; t++) {
        net.forward(x, B);
        net.backward(new Float32Array(B).fill(1 / B), false);
        const g = net.getGrads();
        const before = net.getParams();
        adam.step();
        const after = net.getParams();
        for (let k = 0; k < p.length; k++) {
          // Kingma & Ba (2015) Algorithm 1, from the float32 parameters the backend holds.
          theta[k] = before[k]!;
          m[k] = cfg.beta1 * m[k]! + (1 - cfg.beta1) * g[k]!;
          v[k] = cfg.beta2 * v[k]! + (1 - cfg.beta2) * g[k]! * g[k]!;
          const mHat = m[k]! / (1 - cfg.beta1 ** t);
          const vHat = v[k]! / (1 - cfg.beta2 ** t);
          theta[k] = theta[k]! - (cfg.lr * mHat) / (Math.sqrt(vHat) + cfg.eps);
        }
        // The update itself (theta_t - theta_{t-1}, about lr) must be right to float32
        // accuracy; params are O(0.5), so compare the step, not the parameter.
        const stepRef = theta.map((th, k) => th - before[k]!);
        const stepGot = after.map((a, k) => a - before[k]!);
        // float32 spacing of parameters near 0.5 is 6e-8 = 6e-5 lr, so allow 2e-4 of the step.
        expect(relMaxError(stepGot, stepRef)).toBeLessThan(2e-4);
        if (t === 1) {
          // First step: m_hat = g and v_hat = g^2, so each parameter moves by lr * g/(|g| + eps),
          // i.e. by lr wherever |g| >> eps (Kingma & Ba 2015, Section 2.1, "|Delta_t| <= alpha").
          for (let k = 0; k < p.length; k++) {
            // |g| > 1e-4 keeps eps/|g| <= 1e-4; parameter rounding adds about one float32 spacing (6e-8).
            if (Math.abs(g[k]!) > 1e-4) expect(Math.abs(Math.abs(stepGot[k]!) - cfg.lr)).toBeLessThan(2e-7);
          }
        }
      }
      const st = adam.getState();
      expect(st.step).toBe(5);
      // Moments: Float64 reference to float32 accuracy.
      expect(relMaxError(st.m, m)).toBeLessThan(1e-5);
      expect(relMaxError(st.v, v)).toBeLessThan(1e-5);
      adam.dispose();
    });

    it('Polyak averaging equals its float32 element-wise definition exactly', () => {
      const spec = criticSpec('relu');
      const p = params(spec, 'online');
      const q = params(spec, 'target');
      const online = make(spec, p);
      const target = make(spec, q);
      const tau = 0.005;
      online.polyakInto(target, tau);
      const got = target.getParams();
      const ft = Math.fround(tau);
      const f1 = Math.fround(1 - tau);
      for (let k = 0; k < p.length; k++) {
        expect(got[k]).toBe(Math.fround(Math.fround(ft * p[k]!) + Math.fround(f1 * q[k]!)));
      }
      expect(online.getParams()).toEqual(p);
    });

    it('parameters round-trip exactly; explicit and flag transposes give the same gradients', async () => {
      const spec = criticSpec('relu');
      const p = params(spec, 'rt');
      const net = make(spec, p);
      expect(net.getParams()).toEqual(p);
      const x = data(B * 5, 'xt');
      net.forward(x, B);
      net.backward(new Float32Array(B).fill(0.3), false);
      const gExplicit = net.getGrads();
      const flagBackend = await createTfjsBackend(engine, { transpose: 'flag' });
      const other = flagBackend.createMlp(spec);
      nets.push(other);
      other.setParams(p);
      other.forward(x, B);
      other.backward(new Float32Array(B).fill(0.3), false);
      expect(relMaxError(other.getGrads(), gExplicit)).toBeLessThan(1e-6);
    });

    it('the same calls give bit-identical results', () => {
      const spec = criticSpec('tanh');
      const run = () => {
        const net = make(spec, params(spec, 'det'));
        const adam = backend.createAdam(net, { lr: 1e-3, beta1: 0.9, beta2: 0.999, eps: 1e-8 });
        const x = data(B * 5, 'xd');
        for (let i = 0; i < 3; i++) {
          net.forward(x, B);
          net.backward(new Float32Array(B).fill(0.1), true);
          adam.step();
        }
        adam.dispose();
        return net.getParams();
      };
      expect(run()).toEqual(run());
    });

    it('rejects bad input with clear errors', () => {
      const spec = criticSpec('relu');
      const net = make(spec, params(spec, 'err'));
      expect(() => net.backward(new Float32Array(B), false)).toThrow(/no forward pass/);
      expect(() => net.forward(new Float32Array(3), 2)).toThrow(/length 3 is shorter than batch x width = 2 x 5/);
      expect(() => net.setParams(new Float32Array(4))).toThrow(/length 109, got length 4/);
      expect(() => backend.createMlp({ sizes: [3, 0, 1], hidden: 'relu', output: 'linear' })).toThrow(/sizes\[1\]: expected a positive integer, got 0/);
    });
  });
}

describe('tfjs engine selection', () => {
  it('names the engine it could not start, or starts it when present', async () => {
    // This machine cannot install libtensorflow, so tfjs-node has no native binding here and an
    // explicit request must fail with the reason; on a machine where it loads it must start.
    let native: TfjsBackend | null = null;
    try {
      native = await createTfjsBackend('tfjs-node');
    } catch (e) {
      expect(String(e)).toMatch(/engine tfjs-node is not available: /);
    }
    if (native) expect(native.name).toBe('tfjs-node');
    await expect(createTfjsBackend('gpu' as never)).rejects.toThrow(/unknown engine "gpu"/);
  });

  it('"auto" falls back to a working engine and logs which one runs', async () => {
    const lines: string[] = [];
    const b = await createTfjsBackend('auto', { log: (m) => lines.push(m) });
    expect(lines).toHaveLength(1);
    expect(lines[0]).toMatch(new RegExp(`^network backend: ${b.engine}`));
  });
});
