/**
 * TensorFlow.js implementation of the network interface (`net/types.ts`).
 *
 * Engines, in the order "auto" tries them:
 *   tfjs-node  native libtensorflow, when the optional package `@tensorflow/tfjs-node` is
 *              installed AND its native binding loads (its install script downloads
 *              libtensorflow; offline installs leave it without a binding, and it is skipped)
 *   tfjs-wasm  `@tensorflow/tfjs-backend-wasm` (XNNPACK compiled to WebAssembly, SIMD when the
 *              runtime supports it, one thread under Node); its .wasm files ship in the package
 *   tfjs-cpu   the plain JavaScript kernels of tfjs
 * The engine that runs is reported through the caller's `log` callback.
 *
 * tfjs keeps one engine per process (its backend registry is global). A backend object
 * selects its engine when created; creating a backend for another engine while networks of
 * the first are alive throws, rather than silently moving tensors between engines.
 *
 * Storage. Each network keeps its parameters as ONE flat tensor in the order of
 * `net/types.ts` (W_0, b_0, W_1, b_1, ...), so that Adam and Polyak averaging cost a dozen
 * tensor operations per network instead of a dozen per layer (tfjs pays a fixed cost of
 * roughly 5-15 us per operation on wasm). Per-layer views (slices, reshaped) are cut again
 * whenever the parameters change.
 *
 * Gradients are written by hand (a plain MLP; no tfjs autodiff). With y = act(x W + b):
 *   dZ = dY * act'(y)          act' from the OUTPUT y: relu -> [y > 0], tanh -> 1 - y^2, linear -> 1
 *   dW = x^T dZ,  db = 1^T dZ,  dx = dZ W^T
 * On the wasm engine, matMul with transposeA/transposeB runs 10-25x slower than the plain
 * product (see docs/benchmarks.md), so by default the transpose is made explicitly first
 * (`transpose: "explicit"`); `"flag"` passes the transpose flags to matMul (kept for the
 * benchmark, and the better choice on engines whose transposed product is fast).
 * The bias gradient 1^T dZ is a [1, B] x [B, n] product: on wasm a column sum over axis 0
 * costs about as much as a full transpose.
 *
 * Every tensor this module caches is `tf.keep`-ed, so a caller's enclosing `tf.tidy` cannot
 * dispose it; each is disposed explicitly when replaced.
 *
 * Input arrays are copied before they become tensors (the CPU engine would otherwise alias
 * the caller's buffer); outputs are copied into buffers owned by the network.
 */
import * as tf from '@tensorflow/tfjs';
import { setWasmPaths } from '@tensorflow/tfjs-backend-wasm';
import { createRequire } from 'node:module';
import { dirname, join } from 'node:path';
import { checkMlpSpec } from './init';
import {
  mlpParamCount,
  type Activation,
  type Adam,
  type AdamConfig,
  type AdamState,
  type Mlp,
  type MlpSpec,
  type NetBackend,
} from './types';

/** A tfjs engine this module can run on. */
export type TfjsEngine = 'tfjs-node' | 'tfjs-wasm' | 'tfjs-cpu';
/** Engine choice: a named engine, or "auto" (node, then wasm, then cpu). */
export type TfjsChoice = 'auto' | TfjsEngine;
/** How gradients multiply by a transposed matrix: transpose first, or matMul's transpose flags. */
export type TransposeMode = 'explicit' | 'flag';

export const TFJS_ENGINES: readonly TfjsEngine[] = ['tfjs-node', 'tfjs-wasm', 'tfjs-cpu'];

/** tfjs's own registry name of each engine. */
const TF_BACKEND_NAME: Record<TfjsEngine, string> = {
  'tfjs-node': 'tensorflow',
  'tfjs-wasm': 'wasm',
  'tfjs-cpu': 'cpu',
};

export interface TfjsBackendOptions {
  /** Receives one line saying which engine runs (and why others were skipped). Default: silent. */
  readonly log?: (message: string) => void;
  /** Transposed products: "explicit" (default on wasm and cpu) or "flag" (default on tfjs-node). */
  readonly transpose?: TransposeMode;
}

export interface TfjsBackend extends NetBackend {
  readonly engine: TfjsEngine;
  readonly transpose: TransposeMode;
  /** Number of tensors alive in the tfjs engine (for leak checks). */
  liveTensors(): number;
}

// --- engine selection -----------------------------------------------------------------------

/** Networks alive per engine; guards against switching tfjs's single global engine under them. */
const liveNets: Record<TfjsEngine, number> = { 'tfjs-node': 0, 'tfjs-wasm': 0, 'tfjs-cpu': 0 };
let wasmPathsSet = false;

/** Try to make `engine` the active tfjs engine; returns null on success, else the reason. */
async function activate(engine: TfjsEngine): Promise<string | null> {
  const name = TF_BACKEND_NAME[engine];
  if (tf.getBackend() === name && tf.findBackend(name)) return null;
  try {
    if (engine === 'tfjs-node') {
      // A variable specifier keeps type-checking and bundling independent of whether the
      // optional package is installed.
      const spec = '@tensorflow/tfjs-node';
      await import(/* @vite-ignore */ spec);
    }
    if (engine === 'tfjs-wasm' && !wasmPathsSet) {
      const req = createRequire(import.meta.url);
      setWasmPaths(join(dirname(req.resolve('@tensorflow/tfjs-backend-wasm/package.json')), 'dist') + '/');
      wasmPathsSet = true;
    }
    const ok = await tf.setBackend(name);
    if (!ok) return `tf.setBackend("${name}") failed`;
    await tf.ready();
    return null;
  } catch (e) {
    return (e instanceof Error ? e.message : String(e)).split('\n')[0] ?? 'unknown error';
  }
}

/**
 * Select a tfjs engine and return a network backend bound to it. `choice` "auto" tries
 * tfjs-node, tfjs-wasm, tfjs-cpu in that order; a named engine that cannot start throws.
 */
export async function createTfjsBackend(choice: TfjsChoice = 'auto', options: TfjsBackendOptions = {}): Promise<TfjsBackend> {
  const log = options.log ?? (() => {});
  if (choice !== 'auto' && !TFJS_ENGINES.includes(choice)) {
    throw new Error(`createTfjsBackend: unknown engine ${JSON.stringify(choice)}; expected "auto" or one of ${TFJS_ENGINES.join(', ')}`);
  }
  const candidates = choice === 'auto' ? TFJS_ENGINES : [choice];
  const skipped: string[] = [];
  for (const engine of candidates) {
    const busy = TFJS_ENGINES.find((e) => e !== engine && liveNets[e] > 0);
    if (busy) {
      throw new Error(
        `createTfjsBackend: cannot switch tfjs to ${engine}: ${liveNets[busy]} network(s) are alive on ${busy} ` +
          '(tfjs has one engine per process; dispose them first)',
      );
    }
    const reason = await activate(engine);
    if (reason !== null) {
      if (choice !== 'auto') throw new Error(`createTfjsBackend: engine ${engine} is not available: ${reason}`);
      skipped.push(`${engine} (${reason.length > 120 ? reason.slice(0, 117) + '...' : reason})`);
      continue;
    }
    const transpose = options.transpose ?? (engine === 'tfjs-node' ? 'flag' : 'explicit');
    let detail = '';
    if (engine === 'tfjs-wasm') {
      const simd = await tf.env().getAsync('WASM_HAS_SIMD_SUPPORT');
      detail = simd ? ' (SIMD build, 1 thread)' : ' (scalar build, no SIMD support in this runtime, 1 thread)';
    }
    log(`network backend: ${engine}${detail}, transposed products: ${transpose}` + (skipped.length ? `; skipped ${skipped.join('; ')}` : ''));
    return new TfjsBackendImpl(engine, transpose);
  }
  throw new Error(`createTfjsBackend: no tfjs engine could start: ${skipped.join('; ')}`);
}

class TfjsBackendImpl implements TfjsBackend {
  readonly name: string;
  constructor(
    readonly engine: TfjsEngine,
    readonly transpose: TransposeMode,
  ) {
    this.name = engine;
  }
  createMlp(spec: MlpSpec): Mlp {
    if (tf.getBackend() !== TF_BACKEND_NAME[this.engine]) {
      throw new Error(`tfjs backend: the active tfjs engine is "${tf.getBackend()}", not this backend's ${this.engine}`);
    }
    return new TfjsMlp(spec, this.engine, this.transpose);
  }
  createAdam(net: Mlp, config: AdamConfig): Adam {
    if (!(net instanceof TfjsMlp)) throw new Error('tfjs backend: createAdam needs a network made by a tfjs backend');
    return new TfjsAdam(net, config);
  }
  liveTensors(): number {
    return tf.memory().numTensors;
  }
}

// --- networks -------------------------------------------------------------------------------

/** act'(y) * dY, from the layer's output y. */
function activationGrad(act: Activation, y: tf.Tensor2D, dY: tf.Tensor2D): tf.Tensor2D {
  switch (act) {
    case 'relu':
      return tf.mul(dY, tf.step(y, 0)); // relu'(z) = [z > 0] = [y > 0]; 0 at the kink
    case 'tanh':
      return tf.mul(dY, tf.sub(1, tf.square(y))); // tanh' = 1 - tanh^2
    case 'linear':
      return dY;
  }
}

function applyActivation(act: Activation, z: tf.Tensor2D): tf.Tensor2D {
  switch (act) {
    case 'relu':
      return tf.relu(z);
    case 'tanh':
      return tf.tanh(z);
    case 'linear':
      return z;
  }
}

function checkArray(x: Float32Array, batch: number, width: number, where: string): void {
  if (!Number.isInteger(batch) || batch < 1) throw new Error(`${where}: batch must be a positive integer, got ${batch}`);
  if (!(x instanceof Float32Array)) throw new Error(`${where}: expected a Float32Array`);
  if (x.length < batch * width) {
    throw new Error(`${where}: array of length ${x.length} is shorter than batch x width = ${batch} x ${width}`);
  }
}

class TfjsMlp implements Mlp {
  readonly spec: MlpSpec;
  readonly paramCount: number;
  /** Flat parameters [paramCount]; replaced (never mutated) on every change. */
  flat: tf.Tensor1D;
  /** Flat gradient of the last backward [paramCount]. */
  grad: tf.Tensor1D;
  private views: { w: tf.Tensor2D[]; b: tf.Tensor1D[] } | null = null;
  /** Activations of the last forward: acts[0] the input [B, n0], acts[l+1] the output of layer l. */
  private acts: tf.Tensor2D[] = [];
  private batch = 0;
  private ones: tf.Tensor2D | null = null;
  private yForward = new Float32Array(0);
  private yPredict = new Float32Array(0);
  private dx = new Float32Array(0);
  private disposed = false;

  constructor(
    spec: MlpSpec,
    private readonly engine: TfjsEngine,
    private readonly transpose: TransposeMode,
  ) {
    checkMlpSpec(spec);
    this.spec = { sizes: [...spec.sizes], hidden: spec.hidden, output: spec.output };
    this.paramCount = mlpParamCount(spec);
    this.flat = tf.keep(tf.zeros([this.paramCount]));
    this.grad = tf.keep(tf.zeros([this.paramCount]));
    liveNets[engine]++;
  }

  private get layerCount(): number {
    return this.spec.sizes.length - 1;
  }

  private alive(where: string): void {
    if (this.disposed) throw new Error(`tfjs mlp: ${where} after dispose`);
  }

  /** Per-layer W [n(l), n(l+1)] and b [n(l+1)], sliced from the flat parameters when stale. */
  private layers(): { w: tf.Tensor2D[]; b: tf.Tensor1D[] } {
    if (this.views) return this.views;
    const s = this.spec.sizes;
    const views = tf.tidy(() => {
      const w: tf.Tensor2D[] = [];
      const b: tf.Tensor1D[] = [];
      let off = 0;
      for (let l = 0; l < this.layerCount; l++) {
        const nin = s[l]!;
        const nout = s[l + 1]!;
        w.push(tf.keep(tf.reshape(tf.slice(this.flat, [off], [nin * nout]), [nin, nout])));
        off += nin * nout;
        b.push(tf.keep(tf.slice(this.flat, [off], [nout])));
        off += nout;
      }
      return { w, b };
    });
    this.views = views;
    return views;
  }

  /**
   * Replace the flat parameters with `next` (a kept tensor) and cut the per-layer views at
   * once (every change is followed by a use, and eager views keep the tensor count constant).
   */
  replaceFlat(next: tf.Tensor1D): void {
    this.flat.dispose();
    this.flat = next;
    this.dropViews();
    this.layers();
  }

  private dropViews(): void {
    if (!this.views) return;
    for (const t of this.views.w) t.dispose();
    for (const t of this.views.b) t.dispose();
    this.views = null;
  }

  private dropActs(): void {
    for (const t of this.acts) t.dispose();
    this.acts = [];
  }

  private run(input: tf.Tensor2D): tf.Tensor2D[] {
    const { w, b } = this.layers();
    const out: tf.Tensor2D[] = [input];
    let a = input;
    for (let l = 0; l < this.layerCount; l++) {
      const act = l === this.layerCount - 1 ? this.spec.output : this.spec.hidden;
      if (act === 'relu' || act === 'linear') {
        a = tf.fused.matMul({ a, b: w[l]!, bias: b[l]!, activation: act }) as tf.Tensor2D;
      } else {
        a = applyActivation(act, tf.fused.matMul({ a, b: w[l]!, bias: b[l]! }) as tf.Tensor2D);
      }
      out.push(a);
    }
    return out;
  }

  forward(x: Float32Array, batch: number): Float32Array {
    this.alive('forward');
    const n0 = this.spec.sizes[0]!;
    const nL = this.spec.sizes[this.layerCount]!;
    checkArray(x, batch, n0, 'tfjs mlp forward: x');
    this.dropActs();
    const input = x.slice(0, batch * n0);
    this.acts = tf.tidy(() => this.run(tf.tensor2d(input, [batch, n0]))).map((t) => tf.keep(t));
    this.batch = batch;
    if (this.yForward.length !== batch * nL) this.yForward = new Float32Array(batch * nL);
    this.yForward.set(this.acts[this.layerCount]!.dataSync() as Float32Array);
    return this.yForward;
  }

  predict(x: Float32Array, batch: number): Float32Array {
    this.alive('predict');
    const n0 = this.spec.sizes[0]!;
    const nL = this.spec.sizes[this.layerCount]!;
    checkArray(x, batch, n0, 'tfjs mlp predict: x');
    const input = x.slice(0, batch * n0);
    const y = tf.tidy(() => {
      const acts = this.run(tf.tensor2d(input, [batch, n0]));
      return acts[acts.length - 1]!;
    });
    if (this.yPredict.length !== batch * nL) this.yPredict = new Float32Array(batch * nL);
    this.yPredict.set(y.dataSync() as Float32Array);
    y.dispose();
    return this.yPredict;
  }

  private onesRow(batch: number): tf.Tensor2D {
    if (!this.ones || this.ones.shape[1] !== batch) {
      this.ones?.dispose();
      this.ones = tf.keep(tf.ones([1, batch]) as tf.Tensor2D);
    }
    return this.ones;
  }

  backward(dy: Float32Array, inputGrad: boolean): Float32Array | null {
    this.alive('backward');
    if (this.acts.length === 0) throw new Error('tfjs mlp backward: no forward pass to differentiate (call forward first)');
    const s = this.spec.sizes;
    const L = this.layerCount;
    const B = this.batch;
    checkArray(dy, B, s[L]!, 'tfjs mlp backward: dy');
    const dyc = dy.slice(0, B * s[L]!);
    const ones = this.onesRow(B);
    const { w } = this.layers();
    const flag = this.transpose === 'flag';
    const result = tf.tidy(() => {
      let dA: tf.Tensor2D = tf.tensor2d(dyc, [B, s[L]!]);
      const parts: tf.Tensor1D[] = new Array<tf.Tensor1D>(2 * L);
      for (let l = L - 1; l >= 0; l--) {
        const act = l === L - 1 ? this.spec.output : this.spec.hidden;
        const dZ = activationGrad(act, this.acts[l + 1]!, dA);
        const x = this.acts[l]!;
        const dW = flag ? tf.matMul(x, dZ, true, false) : tf.matMul(tf.transpose(x), dZ);
        parts[2 * l] = tf.reshape(dW, [-1]);
        parts[2 * l + 1] = tf.reshape(tf.matMul(ones, dZ), [-1]);
        if (l > 0 || inputGrad) dA = flag ? tf.matMul(dZ, w[l]!, false, true) : tf.matMul(dZ, tf.transpose(w[l]!));
      }
      const g = tf.concat(parts) as tf.Tensor1D;
      return inputGrad ? [g, dA] : [g];
    });
    this.grad.dispose();
    this.grad = tf.keep(result[0] as tf.Tensor1D);
    if (!inputGrad) return null;
    const dxT = result[1]!;
    if (this.dx.length !== B * s[0]!) this.dx = new Float32Array(B * s[0]!);
    this.dx.set(dxT.dataSync() as Float32Array);
    dxT.dispose();
    return this.dx;
  }

  getParams(): Float32Array {
    this.alive('getParams');
    return Float32Array.from(this.flat.dataSync() as Float32Array);
  }

  setParams(params: Float32Array): void {
    this.alive('setParams');
    if (!(params instanceof Float32Array) || params.length !== this.paramCount) {
      throw new Error(`tfjs mlp setParams: expected a Float32Array of length ${this.paramCount}, got length ${params?.length}`);
    }
    this.replaceFlat(tf.keep(tf.tensor1d(params.slice())));
  }

  getGrads(): Float32Array {
    this.alive('getGrads');
    return Float32Array.from(this.grad.dataSync() as Float32Array);
  }

  polyakInto(target: Mlp, tau: number): void {
    this.alive('polyakInto');
    if (!(target instanceof TfjsMlp) || target.engine !== this.engine) {
      throw new Error('tfjs mlp polyakInto: target must be a network of the same tfjs backend');
    }
    if (target.paramCount !== this.paramCount || target.spec.sizes.join() !== this.spec.sizes.join()) {
      throw new Error(`tfjs mlp polyakInto: target sizes [${target.spec.sizes}] differ from [${this.spec.sizes}]`);
    }
    if (!(tau >= 0 && tau <= 1)) throw new Error(`tfjs mlp polyakInto: tau must lie in [0, 1], got ${tau}`);
    const next = tf.tidy(() => tf.add(tf.mul(tf.scalar(tau), this.flat), tf.mul(tf.scalar(1 - tau), target.flat)) as tf.Tensor1D);
    target.replaceFlat(tf.keep(next));
  }

  dispose(): void {
    if (this.disposed) return;
    this.dropActs();
    this.dropViews();
    this.ones?.dispose();
    this.flat.dispose();
    this.grad.dispose();
    this.disposed = true;
    liveNets[this.engine]--;
  }
}

// --- optimiser ------------------------------------------------------------------------------

/**
 * Adam (Kingma & Ba 2015, ICLR, Algorithm 1) on the flat parameter tensor:
 *   m <- b1 m + (1 - b1) g;  v <- b2 v + (1 - b2) g^2
 *   theta <- theta - (lr / (1 - b1^t)) * m / (sqrt(v) / sqrt(1 - b2^t) + eps)
 * which is Algorithm 1's m_hat / (sqrt(v_hat) + eps) with the bias corrections folded into
 * scalars (eps stays outside the correction, exactly as in Algorithm 1).
 */
class TfjsAdam implements Adam {
  readonly config: AdamConfig;
  private m: tf.Tensor1D;
  private v: tf.Tensor1D;
  private t = 0;
  private disposed = false;

  constructor(
    private readonly net: TfjsMlp,
    config: AdamConfig,
  ) {
    for (const key of ['lr', 'beta1', 'beta2', 'eps'] as const) {
      if (!Number.isFinite(config[key])) throw new Error(`tfjs adam: config.${key} must be a finite number, got ${config[key]}`);
    }
    if (!(config.beta1 >= 0 && config.beta1 < 1)) throw new Error(`tfjs adam: config.beta1 must lie in [0, 1), got ${config.beta1}`);
    if (!(config.beta2 >= 0 && config.beta2 < 1)) throw new Error(`tfjs adam: config.beta2 must lie in [0, 1), got ${config.beta2}`);
    this.config = { ...config };
    this.m = tf.keep(tf.zeros([net.paramCount]));
    this.v = tf.keep(tf.zeros([net.paramCount]));
  }

  step(): void {
    if (this.disposed) throw new Error('tfjs adam: step after dispose');
    const { lr, beta1, beta2, eps } = this.config;
    this.t++;
    const bc1 = 1 - Math.pow(beta1, this.t);
    const bc2 = 1 - Math.pow(beta2, this.t);
    const net = this.net;
    const [m, v, p] = tf.tidy(() => {
      const g = net.grad;
      const m = tf.add(tf.mul(tf.scalar(beta1), this.m), tf.mul(tf.scalar(1 - beta1), g));
      const v = tf.add(tf.mul(tf.scalar(beta2), this.v), tf.mul(tf.scalar(1 - beta2), tf.square(g)));
      const denom = tf.add(tf.div(tf.sqrt(v), tf.scalar(Math.sqrt(bc2))), tf.scalar(eps));
      const p = tf.sub(net.flat, tf.mul(tf.scalar(lr / bc1), tf.div(m, denom)));
      return [m, v, p] as tf.Tensor1D[];
    }) as [tf.Tensor1D, tf.Tensor1D, tf.Tensor1D];
    this.m.dispose();
    this.v.dispose();
    this.m = tf.keep(m);
    this.v = tf.keep(v);
    net.replaceFlat(tf.keep(p));
  }

  getState(): AdamState {
    return { step: this.t, m: Float32Array.from(this.m.dataSync() as Float32Array), v: Float32Array.from(this.v.dataSync() as Float32Array) };
  }

  setState(state: AdamState): void {
    const n = this.net.paramCount;
    if (!Number.isInteger(state.step) || state.step < 0) throw new Error(`tfjs adam setState: step must be a non-negative integer, got ${state.step}`);
    if (state.m.length !== n || state.v.length !== n) {
      throw new Error(`tfjs adam setState: moments must have length ${n}, got m ${state.m.length}, v ${state.v.length}`);
    }
    this.m.dispose();
    this.v.dispose();
    this.m = tf.keep(tf.tensor1d(Float32Array.from(state.m)));
    this.v = tf.keep(tf.tensor1d(Float32Array.from(state.v)));
    this.t = state.step;
  }

  dispose(): void {
    if (this.disposed) return;
    this.m.dispose();
    this.v.dispose();
    this.disposed = true;
  }
}
