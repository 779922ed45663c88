/**
 * Adam (Kingma & Ba 2015, ICLR, Algorithm 1, with bias correction) over a `SimdMlp`'s flat
 * parameters, one kernel call per step. Moments m, v [paramCount] live in the wasm memory.
 * The bias corrections 1/(1 - beta1^t), 1/(1 - beta2^t) are computed here in float64 and
 * rounded to float32 once; 1 - beta1 and 1 - beta2 likewise.
 */
import type { Adam, AdamConfig, AdamState } from '../types';
import type { KernelExports } from './loader';
import type { SimdMlp } from './mlp';

export function validateAdamConfig(c: AdamConfig): void {
  if (!(Number.isFinite(c.lr) && c.lr > 0)) throw new Error(`adam.lr: expected a positive number, got ${c.lr}`);
  if (!(c.beta1 >= 0 && c.beta1 < 1)) throw new Error(`adam.beta1: expected a number in [0, 1), got ${c.beta1}`);
  if (!(c.beta2 >= 0 && c.beta2 < 1)) throw new Error(`adam.beta2: expected a number in [0, 1), got ${c.beta2}`);
  if (!(Number.isFinite(c.eps) && c.eps > 0)) throw new Error(`adam.eps: expected a positive number, got ${c.eps}`);
}

export class SimdAdam implements Adam {
  readonly config: AdamConfig;
  private t = 0;
  private readonly pm: number;
  private readonly pv: number;
  private readonly m: Float32Array;
  private readonly v: Float32Array;
  private disposed = false;

  constructor(
    private readonly k: KernelExports,
    private readonly net: SimdMlp,
    config: AdamConfig,
  ) {
    validateAdamConfig(config);
    this.config = { lr: config.lr, beta1: config.beta1, beta2: config.beta2, eps: config.eps };
    this.pm = net.heap.allocF32(net.paramCount);
    this.pv = net.heap.allocF32(net.paramCount);
    this.m = net.heap.f32(this.pm, net.paramCount);
    this.v = net.heap.f32(this.pv, net.paramCount);
  }

  step(): void {
    this.live();
    this.net.live();
    this.t += 1;
    const { lr, beta1, beta2, eps } = this.config;
    const c1 = 1 / (1 - Math.pow(beta1, this.t));
    const c2 = 1 / (1 - Math.pow(beta2, this.t));
    this.k.adam(this.net.pParams, this.net.pGrads, this.pm, this.pv, this.net.paramCount, lr, beta1, 1 - beta1, beta2, 1 - beta2, eps, c1, c2);
  }

  getState(): AdamState {
    this.live();
    return { step: this.t, m: this.m.slice(), v: this.v.slice() };
  }

  setState(state: AdamState): void {
    this.live();
    const n = this.net.paramCount;
    if (!Number.isInteger(state.step) || state.step < 0) throw new Error(`adam.state.step: expected a non-negative integer, got ${state.step}`);
    if (state.m.length !== n) throw new Error(`adam.state.m: expected ${n} values, got ${state.m.length}`);
    if (state.v.length !== n) throw new Error(`adam.state.v: expected ${n} values, got ${state.v.length}`);
    this.t = state.step;
    this.m.set(state.m);
    this.v.set(state.v);
  }

  dispose(): void {
    if (this.disposed) return;
    this.net.heap.freeF32(this.pm, this.net.paramCount);
    this.net.heap.freeF32(this.pv, this.net.paramCount);
    this.disposed = true;
  }

  private live(): void {
    if (this.disposed) throw new Error('adam: used after dispose()');
  }
}
