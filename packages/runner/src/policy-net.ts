/**
 * The deterministic policy as a plain-JavaScript forward pass, used by validation, evaluation
 * and transfer (and by the worker threads, which therefore load no network backend).
 *
 * Why not the agent's backend: evaluation then does not depend on the backend the agent
 * trained with (simd-fma, tfjs...), runs in any thread, and scores a policy file exactly as it
 * will be scored again later. Arithmetic: float32 weights and observations, float64
 * accumulation in input order, each layer's output rounded to float32 (Math.fround) before
 * the activation: a float32 network with exact sums.
 *
 * Action = actionBound * actor(clip((obs - mean) * invStd, -clip, clip)).
 */
import type { MlpSpec, PolicySnapshot } from '@tilewise/agent';

/** The deterministic policy as a batched function obs [count, obsDim] -> actions [count, actDim]. */
export class PolicyNet {
  readonly obsDim: number;
  readonly actDim: number;
  private readonly spec: MlpSpec;
  private readonly params: Float32Array;
  private readonly bound: number;
  private readonly mean: Float64Array | null;
  private readonly invStd: Float64Array | null;
  private readonly clip: number;
  private bufA = new Float64Array(0);
  private bufB = new Float64Array(0);
  private out = new Float32Array(0);

  constructor(s: PolicySnapshot) {
    let needed = 0; // W_l [n_l, n_l+1] then b_l [n_l+1] for each layer (net/types.ts order)
    for (let l = 0; l + 1 < s.spec.sizes.length; l++) needed += (s.spec.sizes[l]! + 1) * s.spec.sizes[l + 1]!;
    if (s.params.length !== needed) {
      throw new Error(`PolicyNet: ${s.params.length} parameters given, the layer sizes ${JSON.stringify(s.spec.sizes)} need ${needed}`);
    }
    this.spec = s.spec;
    this.params = s.params.slice();
    this.bound = s.actionBound;
    this.obsDim = s.spec.sizes[0]!;
    this.actDim = s.spec.sizes[s.spec.sizes.length - 1]!;
    this.mean = s.normalizer ? s.normalizer.mean.slice() : null;
    this.invStd = s.normalizer ? s.normalizer.invStd.slice() : null;
    this.clip = s.normalizer ? s.normalizer.clip : Infinity;
  }

  /** Actions for `count` rows of `obs`; the returned array is owned by the net (overwritten by the next call). */
  act(obs: Float32Array, count: number): Float32Array {
    const sizes = this.spec.sizes;
    const widest = Math.max(...sizes);
    if (obs.length < count * this.obsDim) throw new Error(`PolicyNet.act: obs holds ${obs.length} values, ${count} x ${this.obsDim} needed`);
    if (this.bufA.length < widest) {
      this.bufA = new Float64Array(widest);
      this.bufB = new Float64Array(widest);
    }
    if (this.out.length !== count * this.actDim) this.out = new Float32Array(count * this.actDim);
    const p = this.params;
    const layers = sizes.length - 1;
    for (let r = 0; r < count; r++) {
      let x = this.bufA;
      let y = this.bufB;
      for (let j = 0; j < this.obsDim; j++) {
        let v = obs[r * this.obsDim + j]!;
        if (this.mean) {
          const z = Math.fround((v - this.mean[j]!) * this.invStd![j]!);
          v = z > this.clip ? this.clip : z < -this.clip ? -this.clip : z;
        }
        x[j] = v;
      }
      let off = 0;
      for (let l = 0; l < layers; l++) {
        const nIn = sizes[l]!;
        const nOut = sizes[l + 1]!;
        const bOff = off + nIn * nOut;
        const act = l === layers - 1 ? this.spec.output : this.spec.hidden;
        // y_o = b_o + sum_i x_i W[i, o], summed in order of i (W row-major: rows are contiguous).
        for (let o = 0; o < nOut; o++) y[o] = p[bOff + o]!;
        for (let i = 0; i < nIn; i++) {
          const xi = x[i]!;
          if (xi === 0) continue;
          const row = off + i * nOut;
          for (let o = 0; o < nOut; o++) y[o]! += xi * p[row + o]!;
        }
        for (let o = 0; o < nOut; o++) {
          const s = Math.fround(y[o]!);
          y[o] = act === 'relu' ? (s > 0 ? s : 0) : act === 'tanh' ? Math.fround(Math.tanh(s)) : s;
        }
        off = bOff + nOut;
        const t = x;
        x = y;
        y = t;
      }
      for (let a = 0; a < this.actDim; a++) this.out[r * this.actDim + a] = this.bound * x[a]!;
    }
    return this.out;
  }
}
