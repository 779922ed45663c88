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
 * Storage. Each network keeps one tensor per weight matrix and bias (W_0, b_0, W_1, b_1, ...;
 * the flat order of `net/types.ts` only exists in getParams/setParams). A single flat tensor
 * with per-layer slices would let Adam run as a dozen operations per network instead of a
 * dozen per tensor, but on the wasm engine every Slice copies its WHOLE input out of wasm
 * memory first (readSync), so cutting six views out of a 70k-parameter vector cost more than
 * the optimiser step it saved (measured; see docs/benchmarks.md).
 *
 * Gradients are written by hand (a plain MLP; no tfjs autodiff). With y = act(x W + b):
 *   dZ = dY * act'(y)          act' from the OUTPUT y: relu -> [y > 0], tanh -> 1 - y^2, linear -> 1
 *   dW = x^T dZ,  db = 1^T dZ,  dx = dZ W^T
 * For the first layer, x^T is built in JavaScript when the input is uploaded (a tfjs Transpose
 * on wasm costs about as much as a product of the same size).
 * On the wasm engine, matMul with transposeA/transposeB runs 6-20x slower than the plain
 * product (see docs/benchmarks.md), so there the transpose is made explicitly first
 * (`transpose: "explicit"`, the wasm default); `"flag"` passes the transpose flags to matMul,
 * the default on the cpu and node engines, whose transposed products are not slower.
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
  /** Transposed products: "explicit" (default on wasm) or "flag" (default on cpu and node, whose transposed products are not slower). */
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
    const transpose = options.transpose ?? (engine === 'tfjs-wasm' ? 'explicit' : 'flag');
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

/** Concatenate tensors' values into one flat Float32Array of length n (a copy). */
function flattenTensors(ts: readonly tf.Tensor[], n: number): Float32Array {
  const out = new Float32Array(n);
  let off = 0;
  for (const t of ts) {
    out.set(t.dataSync() as Float32Array, off);
    off += t.size;
  }
  return out;
}

/** Cut a flat array into kept tensors of the given shapes (copies). */
function splitToTensors(flat: Float32Array, shapes: readonly number[][]): tf.Tensor[] {
  let off = 0;
  return shapes.map((sh) => {
    const n = sh.reduce((a, b) => a * b, 1);
    const t = tf.keep(tf.tensor(flat.slice(off, off + n), sh));
    off += n;
    return t;
  });
}

class TfjsMlp implements Mlp {
  readonly spec: MlpSpec;
  readonly paramCount: number;
  /** Parameters in the flat order W_0, b_0, W_1, b_1, ...; W_l [n(l), n(l+1)], b_l [n(l+1)]. Replaced, never mutated. */
  params: tf.Tensor[];
  /** Gradient of the last backward, same shapes and order as `params`. */
  grads: tf.Tensor[];
  /** Activations of the last forward: acts[0] the input [B, n0], acts[l+1] the output of layer l. */
  private acts: tf.Tensor2D[] = [];
  /** The last forward's input, transposed in JavaScript on upload [n0, B] (saves a tfjs transpose). */
  private inputT: tf.Tensor2D | null = null;
  private batch = 0;
  private ones: tf.Tensor2D | null = null;
  private yForward = new Float32Array(0);
  private yPredict = new Float32Array(0);
  private dx = new Float32Array(0);
  private xT = new Float32Array(0);
  private disposed = false;

  constructor(
    spec: MlpSpec,
    private readonly engine: TfjsEngine,
    private readonly transpose: TransposeMode,
  ) {
    checkMlpSpec(spec);
    this.spec = { sizes: [...spec.sizes], hidden: spec.hidden, output: spec.output };
    this.paramCount = mlpParamCount(spec);
    this.params = this.shapes().map((sh) => tf.keep(tf.zeros(sh)));
    this.grads = this.shapes().map((sh) => tf.keep(tf.zeros(sh)));
    liveNets[engine]++;
  }

  private get layerCount(): number {
    return this.spec.sizes.length - 1;
  }

  /** Shapes of the parameter tensors in flat order. */
  shapes(): number[][] {
    const s = this.spec.sizes;
    const out: number[][] = [];
    for (let l = 0; l < this.layerCount; l++) out.push([s[l]!, s[l + 1]!], [s[l + 1]!]);
    return out;
  }

  private alive(where: string): void {
    if (this.disposed) throw new Error(`tfjs mlp: ${where} after dispose`);
  }

  /** Replace the parameter tensors with `next` (kept tensors, same shapes). */
  replaceParams(next: tf.Tensor[]): void {
    for (const t of this.params) t.dispose();
    this.params = next;
  }

  private dropActs(): void {
    for (const t of this.acts) t.dispose();
    this.acts = [];
    this.inputT?.dispose();
    this.inputT = null;
  }

  private run(input: tf.Tensor2D): tf.Tensor2D[] {
    const out: tf.Tensor2D[] = [input];
    let a = input;
    for (let l = 0; l < this.layerCount; l++) {
      const w = this.params[2 * l] as tf.Tensor2D;
      const bias = this.params[2 * l + 1]!;
      const act = l === this.layerCount - 1 ? this.spec.output : this.spec.hidden;
      if (act === 'relu' || act === 'linear') {
        a = tf.fused.matMul({ a, b: w, bias, activation: act }) as tf.Tensor2D;
      } else {
        a = applyActivation(act, tf.fused.matMul({ a, b: w, bias }) as tf.Tensor2D);
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
    if (this.transpose === 'explicit') {
      if (this.xT.length !== batch * n0) this.xT = new Float32Array(batch * n0);
      for (let r = 0; r < batch; r++) for (let j = 0; j < n0; j++) this.xT[j * batch + r] = input[r * n0 + j]!;
      this.inputT = tf.keep(tf.tensor2d(this.xT.slice(), [n0, batch]));
    }
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
    const flag = this.transpose === 'flag';
    const result = tf.tidy(() => {
      let dA: tf.Tensor2D = tf.tensor2d(dyc, [B, s[L]!]);
      const grads: tf.Tensor[] = new Array<tf.Tensor>(2 * L);
      for (let l = L - 1; l >= 0; l--) {
        const act = l === L - 1 ? this.spec.output : this.spec.hidden;
        const dZ = activationGrad(act, this.acts[l + 1]!, dA);
        const x = this.acts[l]!;
        const w = this.params[2 * l] as tf.Tensor2D;
        if (flag) {
          grads[2 * l] = tf.matMul(x, dZ, true, false);
        } else {
          grads[2 * l] = tf.matMul(l === 0 ? this.inputT! : tf.transpose(x), dZ);
        }
        grads[2 * l + 1] = tf.reshape(tf.matMul(ones, dZ), [s[l + 1]!]);
        if (l > 0 || inputGrad) dA = flag ? tf.matMul(dZ, w, false, true) : tf.matMul(dZ, tf.transpose(w));
      }
      return inputGrad ? [...grads, dA] : grads;
    });
    for (const g of this.grads) g.dispose();
    this.grads = result.slice(0, 2 * L).map((t) => tf.keep(t));
    if (!inputGrad) return null;
    const dxT = result[2 * L]!;
    if (this.dx.length !== B * s[0]!) this.dx = new Float32Array(B * s[0]!);
    this.dx.set(dxT.dataSync() as Float32Array);
    dxT.dispose();
    return this.dx;
  }

  getParams(): Float32Array {
    this.alive('getParams');
    return flattenTensors(this.params, this.paramCount);
  }

  setParams(params: Float32Array): void {
    this.alive('setParams');
    if (!(params instanceof Float32Array) || params.length !== this.paramCount) {
      throw new Error(`tfjs mlp setParams: expected a Float32Array of length ${this.paramCount}, got length ${params?.length}`);
    }
    this.replaceParams(splitToTensors(params, this.shapes()));
  }

  getGrads(): Float32Array {
    this.alive('getGrads');
    return flattenTensors(this.grads, this.paramCount);
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
    const next = tf.tidy(() => {
      const a = tf.scalar(tau);
      const b = tf.scalar(1 - tau);
      return this.params.map((p, k) => tf.add(tf.mul(a, p), tf.mul(b, target.params[k]!)));
    });
    target.replaceParams(next.map((t) => tf.keep(t)));
  }

  dispose(): void {
    if (this.disposed) return;
    this.dropActs();
    this.ones?.dispose();
    for (const t of [...this.params, ...this.grads]) t.dispose();
    this.disposed = true;
    liveNets[this.engine]--;
  }
}

// --- optimiser ------------------------------------------------------------------------------

/**
 * Adam (Kingma & Ba 2015, ICLR, Algorithm 1) on each parameter tensor:
 *   m <- b1 m + (1 - b1) g;  v <- b2 v + (1 - b2) g^2
 *   theta <- theta - (lr / (1 - b1^t)) * m / (sqrt(v) / sqrt(1 - b2^t) + eps)
 * which is Algorithm 1's m_hat / (sqrt(v_hat) + eps) with the bias corrections folded into
 * scalars (eps stays outside the correction, exactly as in Algorithm 1).
 */
class TfjsAdam implements Adam {
  readonly config: AdamConfig;
  private m: tf.Tensor[];
  private v: tf.Tensor[];
  private t = 0;
  /** Constant scalars b1, 1 - b1, b2, 1 - b2, eps, uploaded once. */
  private readonly k: tf.Scalar[];
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
    this.m = net.shapes().map((sh) => tf.keep(tf.zeros(sh)));
    this.v = net.shapes().map((sh) => tf.keep(tf.zeros(sh)));
    this.k = [config.beta1, 1 - config.beta1, config.beta2, 1 - config.beta2, config.eps].map((x) => tf.keep(tf.scalar(x)));
  }

  step(): void {
    if (this.disposed) throw new Error('tfjs adam: step after dispose');
    const { lr, beta1, beta2 } = this.config;
    this.t++;
    const bc1 = 1 - Math.pow(beta1, this.t);
    const bc2 = 1 - Math.pow(beta2, this.t);
    const net = this.net;
    const [b1, omb1, b2, omb2, eps] = this.k as [tf.Scalar, tf.Scalar, tf.Scalar, tf.Scalar, tf.Scalar];
    const out = tf.tidy(() => {
      const sqrtBc2 = tf.scalar(Math.sqrt(bc2));
      const stepSize = tf.scalar(lr / bc1);
      return net.params.map((p, k) => {
        const g = net.grads[k]!;
        const m = tf.add(tf.mul(b1, this.m[k]!), tf.mul(omb1, g));
        const v = tf.add(tf.mul(b2, this.v[k]!), tf.mul(omb2, tf.square(g)));
        const denom = tf.add(tf.div(tf.sqrt(v), sqrtBc2), eps);
        return [m, v, tf.sub(p, tf.mul(stepSize, tf.div(m, denom)))];
      });
    });
    for (const t of [...this.m, ...this.v]) t.dispose();
    this.m = out.map((x) => tf.keep(x[0]!));
    this.v = out.map((x) => tf.keep(x[1]!));
    net.replaceParams(out.map((x) => tf.keep(x[2]!)));
  }

  getState(): AdamState {
    return { step: this.t, m: flattenTensors(this.m, this.net.paramCount), v: flattenTensors(this.v, this.net.paramCount) };
  }

  setState(state: AdamState): void {
    const n = this.net.paramCount;
    if (!Number.isInteger(state.step) || state.step < 0) throw new Error(`tfjs adam setState: step must be a non-negative integer, got ${state.step}`);
    if (state.m.length !== n || state.v.length !== n) {
      throw new Error(`tfjs adam setState: moments must have length ${n}, got m ${state.m.length}, v ${state.v.length}`);
    }
    for (const t of [...this.m, ...this.v]) t.dispose();
    this.m = splitToTensors(Float32Array.from(state.m), this.net.shapes());
    this.v = splitToTensors(Float32Array.from(state.v), this.net.shapes());
    this.t = state.step;
  }

  dispose(): void {
    if (this.disposed) return;
    for (const t of [...this.m, ...this.v, ...this.k]) t.dispose();
    this.disposed = true;
  }
}
