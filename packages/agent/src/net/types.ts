/**
 * The narrow interface between the agent's algorithms and the arithmetic of its
 * networks. TD3/DDPG (`td3.ts`) is written only against these types, so a faster
 * backend (tfjs on wasm or native, or hand-written WebAssembly SIMD kernels) can be
 * swapped in without touching the update.
 *
 * Conventions
 * - Float32 everywhere. Batches are row-major [batch, features].
 * - An MLP with sizes [n0, n1, ..., nL] has L dense layers; layer l maps n(l) -> n(l+1)
 *   as y = x W_l + b_l with W_l stored row-major [n(l), n(l+1)].
 * - Flat parameter order (for save/load, Polyak, export): W_0, b_0, W_1, b_1, ...
 * - Hidden layers apply `hidden` activation; the last layer applies `output`.
 * - Arrays returned by a network are views owned by it, valid until its next call of
 *   the same method; copy what you keep.
 */

export type Activation = 'relu' | 'tanh' | 'linear';

export interface MlpSpec {
  /** Layer widths including input and output: [in, hidden..., out]. */
  readonly sizes: readonly number[];
  /** Activation of hidden layers. */
  readonly hidden: Activation;
  /** Activation of the output layer. */
  readonly output: Activation;
}

/** Number of parameters of an MLP. */
export function mlpParamCount(spec: MlpSpec): number {
  let n = 0;
  for (let l = 0; l + 1 < spec.sizes.length; l++) n += spec.sizes[l]! * spec.sizes[l + 1]! + spec.sizes[l + 1]!;
  return n;
}

export interface Mlp {
  readonly spec: MlpSpec;
  readonly paramCount: number;
  /** Forward pass of `batch` rows, keeping activations for `backward`. Returns y [batch, out]. */
  forward(x: Float32Array, batch: number): Float32Array;
  /** Forward pass without keeping activations (inference). Returns y [batch, out]. */
  predict(x: Float32Array, batch: number): Float32Array;
  /**
   * Backward pass from dL/dy [batch, out] of the last `forward`. Overwrites this
   * network's gradient buffer with dL/dparams. Returns dL/dx [batch, in] when
   * `inputGrad` is true, otherwise null.
   */
  backward(dy: Float32Array, inputGrad: boolean): Float32Array | null;
  /** Copy of the flat parameters. */
  getParams(): Float32Array;
  /** Overwrite the flat parameters (length must equal paramCount). */
  setParams(params: Float32Array): void;
  /** Copy of the flat gradient from the last `backward`. */
  getGrads(): Float32Array;
  /** target <- tau * this + (1 - tau) * target, parameter-wise (Polyak averaging). */
  polyakInto(target: Mlp, tau: number): void;
  /** Release backend resources. */
  dispose(): void;
}

export interface AdamConfig {
  /** Step size. */
  readonly lr: number;
  /** First-moment decay (Kingma & Ba 2015 default 0.9). */
  readonly beta1: number;
  /** Second-moment decay (Kingma & Ba 2015 default 0.999). */
  readonly beta2: number;
  /** Denominator offset (Kingma & Ba 2015 default 1e-8). */
  readonly eps: number;
}

export interface AdamState {
  readonly step: number;
  readonly m: Float32Array;
  readonly v: Float32Array;
}

/** Adam (Kingma & Ba 2015, ICLR, Algorithm 1) bound to one network's parameters. */
export interface Adam {
  readonly config: AdamConfig;
  /** Apply one step using the network's current gradient buffer. */
  step(): void;
  getState(): AdamState;
  setState(state: AdamState): void;
  dispose(): void;
}

export interface NetBackend {
  /** Name logged and reported, e.g. "tfjs-wasm", "tfjs-cpu", "simd", "simd-fma". */
  readonly name: string;
  /** A network with parameters initialised by the caller via setParams. */
  createMlp(spec: MlpSpec): Mlp;
  createAdam(net: Mlp, config: AdamConfig): Adam;
}
