/**
 * `Mlp` over the WebAssembly SIMD kernels (see `src/net/types.ts` for the contract).
 *
 * Memory layout (all float32, in the backend's one wasm memory):
 * - params [paramCount]: W_0 [n0, n1], b_0 [n1], W_1 [n1, n2], b_1 [n2], ... (the flat order of
 *   the interface, so save/load, Adam and Polyak each work on one contiguous block);
 * - grads [paramCount]: same layout;
 * - per pass ("train" for forward/backward, "infer" for predict): input [cap, n0] and one
 *   output per layer y_l [cap, n(l+1)] (post-activation; backward derives act' from y);
 * - backward: two ping-pong buffers dz [cap, max hidden or output width], dx [cap, n0], a
 *   scratch [max n(l) n(l+1)] for the transposed weight W_l^T, and gemm's packing scratch [4 cap].
 * `cap` is the largest batch seen so far; buffers are reallocated only when a batch exceeds it.
 *
 * Per layer, forward is one fused kernel call: y = act(x W + b). Backward per layer l (from
 * the last): dW_l = x_l^T dz (A^T B kernel), db_l = column sums of dz, and, when needed,
 * dz_prev = (dz W_l^T) * act'(y_(l-1)) with W_l^T transposed into scratch first and the
 * activation derivative fused into the product's epilogue.
 */
import { checkMlpSpec } from '../init';
import type { Activation, Mlp, MlpSpec } from '../types';
import { mlpParamCount } from '../types';
import type { WasmHeap } from './heap';
import { ACT, type KernelExports } from './loader';

interface Pass {
  cap: number;
  x: number;
  xv: Float32Array;
  ys: number[];
  /** The last output view handed out, for `outBatch` rows (reused while the batch is the same). */
  out: Float32Array;
  outBatch: number;
}

function validateSpec(spec: MlpSpec): void {
  const acts: readonly Activation[] = ['relu', 'tanh', 'linear'];
  checkMlpSpec(spec);
  if (!acts.includes(spec.hidden)) throw new Error(`mlp.hidden: expected relu|tanh|linear, got ${JSON.stringify(spec.hidden)}`);
  if (!acts.includes(spec.output)) throw new Error(`mlp.output: expected relu|tanh|linear, got ${JSON.stringify(spec.output)}`);
}

export class SimdMlp implements Mlp {
  readonly spec: MlpSpec;
  readonly paramCount: number;
  /** Byte offsets of the parameter and gradient blocks (used by Adam and Polyak). */
  readonly pParams: number;
  readonly pGrads: number;
  private readonly sizes: number[];
  private readonly L: number;
  private readonly acts: number[];
  /** Element offsets of W_l and b_l inside the flat parameter vector. */
  private readonly wOff: number[] = [];
  private readonly bOff: number[] = [];
  private readonly params: Float32Array;
  private readonly grads: Float32Array;
  private readonly maxOut: number;
  private readonly scratch: number;
  private readonly scratchLen: number;
  private readonly train: Pass;
  private readonly infer: Pass;
  private fwdBatch = 0;
  private bwdCap = 0;
  private dzA = 0;
  private dzB = 0;
  private dx = 0;
  /** gemm's panel-packing scratch [4 * cap] for the weight gradients x^T dz. */
  private pack = 0;
  private dzv: Float32Array = new Float32Array(0);
  private dxv: Float32Array = new Float32Array(0);
  private dxOut: Float32Array = new Float32Array(0);
  private dxBatch = 0;
  private disposed = false;

  constructor(
    private readonly k: KernelExports,
    readonly heap: WasmHeap,
    spec: MlpSpec,
  ) {
    validateSpec(spec);
    this.spec = { sizes: [...spec.sizes], hidden: spec.hidden, output: spec.output };
    this.sizes = [...spec.sizes];
    this.L = this.sizes.length - 1;
    this.paramCount = mlpParamCount(spec);
    this.acts = [];
    let off = 0;
    let maxOut = 0;
    let scratchLen = 0;
    for (let l = 0; l < this.L; l++) {
      const nin = this.sizes[l]!;
      const nout = this.sizes[l + 1]!;
      this.wOff.push(off);
      off += nin * nout;
      this.bOff.push(off);
      off += nout;
      this.acts.push(ACT[l === this.L - 1 ? spec.output : spec.hidden]);
      maxOut = Math.max(maxOut, nout);
      scratchLen = Math.max(scratchLen, nin * nout);
    }
    this.maxOut = maxOut;
    this.pParams = heap.allocF32(this.paramCount);
    this.pGrads = heap.allocF32(this.paramCount);
    this.params = heap.f32(this.pParams, this.paramCount);
    this.grads = heap.f32(this.pGrads, this.paramCount);
    this.scratchLen = scratchLen;
    this.scratch = heap.allocF32(scratchLen);
    this.train = this.newPass();
    this.infer = this.newPass();
  }

  forward(x: Float32Array, batch: number): Float32Array {
    const y = this.run(this.train, x, batch);
    this.fwdBatch = batch;
    return y;
  }

  predict(x: Float32Array, batch: number): Float32Array {
    return this.run(this.infer, x, batch);
  }

  backward(dy: Float32Array, inputGrad: boolean): Float32Array | null {
    this.live();
    const batch = this.fwdBatch;
    if (batch === 0) throw new Error('mlp.backward: call forward first');
    const nL = this.sizes[this.L]!;
    if (dy.length < batch * nL) {
      throw new Error(`mlp.backward: dy must hold batch*out = ${batch * nL} values, got ${dy.length}`);
    }
    this.ensureBackward(batch);
    const k = this.k;
    const tr = this.train;
    let dz = this.dzA;
    let dzNext = this.dzB;
    this.dzv.set(dy.length === batch * nL ? dy : dy.subarray(0, batch * nL));
    k.actGrad(dz, tr.ys[this.L - 1]!, dz, batch * nL, this.acts[this.L - 1]!);
    for (let l = this.L - 1; l >= 0; l--) {
      const nin = this.sizes[l]!;
      const nout = this.sizes[l + 1]!;
      const xin = l === 0 ? tr.x : tr.ys[l - 1]!;
      // dW_l [nin, nout] = x_l^T dz: A(i, p) = x_l[p, i], so sai = 1, sap = nin.
      k.gemm(xin, 1, nin, dz, this.pGrads + 4 * this.wOff[l]!, nin, batch, nout, 0, ACT.linear, 0, 0, this.pack);
      k.colsum(dz, batch, nout, this.pGrads + 4 * this.bOff[l]!);
      if (l > 0 || inputGrad) {
        k.transpose(this.pParams + 4 * this.wOff[l]!, nin, nout, this.scratch);
        if (l > 0) {
          // dz_(l-1) = (dz W_l^T) * act'(y_(l-1)), derivative fused in the epilogue.
          k.gemm(dz, nout, 1, this.scratch, dzNext, batch, nout, nin, 0, ACT.linear, tr.ys[l - 1]!, this.acts[l - 1]!, 0);
          const t = dz;
          dz = dzNext;
          dzNext = t;
        } else {
          k.gemm(dz, nout, 1, this.scratch, this.dx, batch, nout, nin, 0, ACT.linear, 0, 0, 0);
        }
      }
    }
    if (!inputGrad) return null;
    if (this.dxBatch !== batch) {
      this.dxOut = this.dxv.subarray(0, batch * this.sizes[0]!);
      this.dxBatch = batch;
    }
    return this.dxOut;
  }

  getParams(): Float32Array {
    this.live();
    return this.params.slice();
  }

  setParams(params: Float32Array): void {
    this.live();
    if (params.length !== this.paramCount) {
      throw new Error(`mlp.setParams: expected ${this.paramCount} values, got ${params.length}`);
    }
    this.params.set(params);
  }

  getGrads(): Float32Array {
    this.live();
    return this.grads.slice();
  }

  polyakInto(target: Mlp, tau: number): void {
    this.live();
    if (!(target instanceof SimdMlp) || target.heap !== this.heap) {
      throw new Error('mlp.polyakInto: target must be a network of the same simd backend');
    }
    target.live();
    let same = target.sizes.length === this.sizes.length;
    for (let l = 0; same && l < this.sizes.length; l++) same = target.sizes[l] === this.sizes[l];
    if (!same) {
      throw new Error(`mlp.polyakInto: target sizes ${JSON.stringify(target.sizes)} differ from ${JSON.stringify(this.sizes)}`);
    }
    if (!(tau >= 0 && tau <= 1)) throw new Error(`mlp.polyakInto: tau must be in [0, 1], got ${tau}`);
    this.k.polyak(this.pParams, target.pParams, this.paramCount, tau, 1 - tau);
  }

  dispose(): void {
    if (this.disposed) return;
    const h = this.heap;
    h.freeF32(this.pParams, this.paramCount);
    h.freeF32(this.pGrads, this.paramCount);
    h.freeF32(this.scratch, this.scratchLen);
    for (const p of [this.train, this.infer]) this.freePass(p);
    this.freeBackward();
    this.disposed = true;
  }

  /** Throws when the network was disposed (its memory may belong to another network now). */
  live(): void {
    if (this.disposed) throw new Error('mlp: used after dispose()');
  }

  private newPass(): Pass {
    return { cap: 0, x: 0, xv: new Float32Array(0), ys: [], out: new Float32Array(0), outBatch: 0 };
  }

  private run(p: Pass, x: Float32Array, batch: number): Float32Array {
    this.live();
    const n0 = this.sizes[0]!;
    if (!Number.isInteger(batch) || batch < 1) throw new Error(`mlp: batch must be a positive integer, got ${batch}`);
    if (x.length < batch * n0) throw new Error(`mlp: x must hold batch*in = ${batch * n0} values, got ${x.length}`);
    if (batch > p.cap) this.growPass(p, batch);
    p.xv.set(x.length === batch * n0 ? x : x.subarray(0, batch * n0));
    let xin = p.x;
    for (let l = 0; l < this.L; l++) {
      const nin = this.sizes[l]!;
      const y = p.ys[l]!;
      this.k.gemm(xin, nin, 1, this.pParams + 4 * this.wOff[l]!, y, batch, nin, this.sizes[l + 1]!, this.pParams + 4 * this.bOff[l]!, this.acts[l]!, 0, 0, 0);
      xin = y;
    }
    if (p.outBatch !== batch) {
      p.out = this.heap.f32(p.ys[this.L - 1]!, batch * this.sizes[this.L]!);
      p.outBatch = batch;
    }
    return p.out;
  }

  private growPass(p: Pass, batch: number): void {
    this.freePass(p);
    p.cap = batch;
    p.x = this.heap.allocF32(batch * this.sizes[0]!);
    p.xv = this.heap.f32(p.x, batch * this.sizes[0]!);
    for (let l = 0; l < this.L; l++) p.ys.push(this.heap.allocF32(batch * this.sizes[l + 1]!));
    p.outBatch = 0;
  }

  private freePass(p: Pass): void {
    if (p.cap === 0) return;
    this.heap.freeF32(p.x, p.cap * this.sizes[0]!);
    p.ys.forEach((y, l) => this.heap.freeF32(y, p.cap * this.sizes[l + 1]!));
    p.ys = [];
    p.cap = 0;
  }

  private ensureBackward(batch: number): void {
    if (batch <= this.bwdCap) return;
    this.freeBackward();
    this.bwdCap = batch;
    this.dzA = this.heap.allocF32(batch * this.maxOut);
    this.dzB = this.heap.allocF32(batch * this.maxOut);
    this.dx = this.heap.allocF32(batch * this.sizes[0]!);
    this.pack = this.heap.allocF32(4 * batch);
    this.dzv = this.heap.f32(this.dzA, batch * this.maxOut);
    this.dxv = this.heap.f32(this.dx, batch * this.sizes[0]!);
    this.dxBatch = 0;
  }

  private freeBackward(): void {
    if (this.bwdCap === 0) return;
    this.heap.freeF32(this.dzA, this.bwdCap * this.maxOut);
    this.heap.freeF32(this.dzB, this.bwdCap * this.maxOut);
    this.heap.freeF32(this.dx, this.bwdCap * this.sizes[0]!);
    this.heap.freeF32(this.pack, 4 * this.bwdCap);
    this.bwdCap = 0;
  }
}
