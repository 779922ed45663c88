/**
 * Independent references for the simd backend's tests (written from the definitions, sharing
 * no code with src/net/simd):
 * - Float64 references: dense layers, their gradients and Adam/Polyak computed in double
 *   precision from the same float32 inputs;
 * - a binary32 emulation: the same arithmetic with every operation rounded to float32 by
 *   `Math.fround`, in the summation order the plain-SIMD kernels document. A double result of
 *   +, -, *, /, sqrt on float32 operands rounded once to float32 equals the correctly rounded
 *   float32 result (Figueroa 1995, "When is double rounding innocuous?", SIGNUM Newsl. 30(3)),
 *   so this emulation is IEEE-754 binary32 arithmetic, independent of any machine.
 */
import type { Rng } from '@tilewise/envs';
import type { Activation, MlpSpec } from '../src/net/types';

export type Num = (x: number) => number;
const f64: Num = (x) => x;
const f32: Num = Math.fround;

function act(a: Activation, z: number, r: Num): number {
  if (a === 'relu') return z > 0 ? z : 0;
  if (a === 'tanh') return r(Math.tanh(z));
  return z;
}

/** act'(y) through the output y. */
function dact(a: Activation, y: number, r: Num): number {
  if (a === 'relu') return y > 0 ? 1 : 0;
  if (a === 'tanh') return r(1 - r(y * y));
  return 1;
}

/** Layer offsets in the flat parameter vector W_0, b_0, W_1, b_1, ... */
export function layerOffsets(sizes: readonly number[]): { w: number; b: number }[] {
  const out: { w: number; b: number }[] = [];
  let o = 0;
  for (let l = 0; l + 1 < sizes.length; l++) {
    out.push({ w: o, b: o + sizes[l]! * sizes[l + 1]! });
    o += sizes[l]! * sizes[l + 1]! + sizes[l + 1]!;
  }
  return out;
}

export interface RefPass {
  /** Post-activation outputs per layer (ys[0] = input). */
  ys: Float64Array[];
}

/**
 * Forward pass; `r` = identity for Float64, Math.fround for the binary32 emulation. Each output
 * is (((0 + x0 w0) + x1 w1) + ...) + b, then the activation.
 */
export function refForward(spec: MlpSpec, params: ArrayLike<number>, x: ArrayLike<number>, batch: number, r: Num = f64): RefPass {
  const { sizes } = spec;
  const offs = layerOffsets(sizes);
  const ys: Float64Array[] = [Float64Array.from({ length: batch * sizes[0]! }, (_, i) => x[i]!)];
  for (let l = 0; l + 1 < sizes.length; l++) {
    const nin = sizes[l]!;
    const nout = sizes[l + 1]!;
    const a = l + 2 === sizes.length ? spec.output : spec.hidden;
    const xin = ys[l]!;
    const y = new Float64Array(batch * nout);
    for (let i = 0; i < batch; i++) {
      for (let j = 0; j < nout; j++) {
        let s = 0;
        for (let p = 0; p < nin; p++) s = r(s + r(xin[i * nin + p]! * params[offs[l]!.w + p * nout + j]!));
        s = r(s + params[offs[l]!.b + j]!);
        y[i * nout + j] = act(a, s, r);
      }
    }
    ys.push(y);
  }
  return { ys };
}

/**
 * Backward pass from dL/dy: returns the flat gradient and dL/dx. Summation orders as in the
 * kernels: dW[i,j] and db[j] sequential over batch rows, dx[b,i] sequential over j.
 */
export function refBackward(
  spec: MlpSpec, params: ArrayLike<number>, pass: RefPass, dy: ArrayLike<number>, batch: number, r: Num = f64,
): { grads: Float64Array; dx: Float64Array } {
  const { sizes } = spec;
  const L = sizes.length - 1;
  const offs = layerOffsets(sizes);
  const grads = new Float64Array(offs[L - 1]!.b + sizes[L]!);
  const nL = sizes[L]!;
  let dz = new Float64Array(batch * nL);
  for (let k = 0; k < batch * nL; k++) dz[k] = r(dy[k]! * dact(spec.output, pass.ys[L]![k]!, r));
  let dx = new Float64Array(0);
  for (let l = L - 1; l >= 0; l--) {
    const nin = sizes[l]!;
    const nout = sizes[l + 1]!;
    const xin = pass.ys[l]!;
    for (let i = 0; i < nin; i++) {
      for (let j = 0; j < nout; j++) {
        let s = 0;
        for (let p = 0; p < batch; p++) s = r(s + r(xin[p * nin + i]! * dz[p * nout + j]!));
        grads[offs[l]!.w + i * nout + j] = s;
      }
    }
    for (let j = 0; j < nout; j++) {
      let s = 0;
      for (let p = 0; p < batch; p++) s = r(s + dz[p * nout + j]!);
      grads[offs[l]!.b + j] = s;
    }
    const prev = new Float64Array(batch * nin);
    for (let p = 0; p < batch; p++) {
      for (let i = 0; i < nin; i++) {
        let s = 0;
        for (let j = 0; j < nout; j++) s = r(s + r(dz[p * nout + j]! * params[offs[l]!.w + i * nout + j]!));
        prev[p * nin + i] = l > 0 ? r(s * dact(spec.hidden, xin[p * nin + i]!, r)) : s;
      }
    }
    if (l === 0) dx = prev;
    else dz = prev;
  }
  return { grads, dx };
}

/**
 * One Adam step (Kingma & Ba 2015, Algorithm 1) in place, in the operation order the kernel
 * documents. With r = identity and float64 hyperparameters it is the Float64 reference; with
 * r = Math.fround and the float32-rounded hyperparameters the kernel receives, the binary32
 * emulation.
 */
export function refAdamStep(
  p: Float64Array, g: ArrayLike<number>, m: Float64Array, v: Float64Array, t: number,
  cfg: { lr: number; beta1: number; beta2: number; eps: number }, r: Num = f64,
): void {
  const c1 = r(1 / (1 - Math.pow(cfg.beta1, t)));
  const c2 = r(1 / (1 - Math.pow(cfg.beta2, t)));
  const lr = r(cfg.lr), b1 = r(cfg.beta1), omb1 = r(1 - cfg.beta1), b2 = r(cfg.beta2), omb2 = r(1 - cfg.beta2), eps = r(cfg.eps);
  for (let k = 0; k < p.length; k++) {
    const gk = g[k]!;
    m[k] = r(r(b1 * m[k]!) + r(omb1 * gk));
    v[k] = r(r(b2 * v[k]!) + r(r(omb2 * gk) * gk));
    p[k] = r(p[k]! - r(r(lr * r(m[k]! * c1)) / r(r(Math.sqrt(r(v[k]! * c2))) + eps)));
  }
}

/** target <- tau src + (1 - tau) target, in place. */
export function refPolyak(src: ArrayLike<number>, dst: Float64Array, tau: number, r: Num = f64): void {
  const t = r(tau), o = r(1 - tau);
  for (let k = 0; k < dst.length; k++) dst[k] = r(r(t * src[k]!) + r(o * dst[k]!));
}

export { f32 as fround32 };

/** Bit patterns of a float32 array (for exact comparisons that distinguish -0 and NaN payloads). */
export function bits(a: ArrayLike<number>): Uint32Array {
  return new Uint32Array(Float32Array.from(a as ArrayLike<number>).buffer);
}

/** max_k |a_k - b_k|. */
export function maxAbsDiff(a: ArrayLike<number>, b: ArrayLike<number>): number {
  if (a.length !== b.length) throw new Error(`length mismatch ${a.length} vs ${b.length}`);
  let e = 0;
  for (let k = 0; k < a.length; k++) e = Math.max(e, Math.abs(a[k]! - b[k]!));
  return e;
}

/** max_k |a_k|. */
export function maxAbs(a: ArrayLike<number>): number {
  let e = 0;
  for (let k = 0; k < a.length; k++) e = Math.max(e, Math.abs(a[k]!));
  return e;
}

/** Weights U(-1/sqrt(n_in), 1/sqrt(n_in)), biases U(-0.1, 0.1): typical initial scales. */
export function initParams(spec: MlpSpec, rng: Rng): Float32Array {
  const offs = layerOffsets(spec.sizes);
  const last = offs[offs.length - 1]!;
  const p = new Float32Array(last.b + spec.sizes[spec.sizes.length - 1]!);
  layerOffsets(spec.sizes).forEach(({ w, b }, l) => {
    const nin = spec.sizes[l]!;
    const nout = spec.sizes[l + 1]!;
    const s = 1 / Math.sqrt(nin);
    rng.fillUniform(p.subarray(w, w + nin * nout), -s, s);
    rng.fillUniform(p.subarray(b, b + nout), -0.1, 0.1);
  });
  return p;
}

