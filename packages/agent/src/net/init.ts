/**
 * Network initialisation, done in JavaScript from a seeded `Rng` so that every backend
 * (tfjs on any engine, the WebAssembly SIMD kernels) starts from bit-identical weights.
 *
 * Scheme (Lillicrap et al. 2016, "Continuous control with deep reinforcement learning",
 * ICLR, Section 7 "Experiment details"): the weights and biases of every layer except the
 * last are drawn from U(-1/sqrt(f), 1/sqrt(f)) with f the layer's fan-in; the last layer's
 * weights and biases from U(-s, s) with s = 3e-3, so that initial policy outputs and Q
 * estimates are near zero. The 1/sqrt(fan_in) bound is also the default of common deep
 * learning libraries for dense layers (common practice).
 *
 * Draw order: layer by layer, W_l row-major [n(l), n(l+1)] then b_l, matching the flat
 * parameter order of `net/types.ts`. Uniform deviates are drawn in Float64 and rounded to
 * Float32 once.
 */
import type { Rng } from '@tilewise/envs';
import { mlpParamCount, type MlpSpec } from './types';

/** Half-width of the final layer's uniform initialisation (Lillicrap et al. 2016, Section 7: 3e-3). */
export const FINAL_LAYER_INIT = 3e-3;

/**
 * Flat initial parameters of an MLP (W_0, b_0, W_1, b_1, ...), drawn from `rng`.
 * `finalScale` is the half-width of the last layer's uniform range.
 */
export function initMlpParams(spec: MlpSpec, rng: Rng, finalScale: number = FINAL_LAYER_INIT): Float32Array {
  if (!(finalScale > 0) || !Number.isFinite(finalScale)) {
    throw new Error(`initMlpParams: finalScale must be a positive finite number, got ${finalScale}`);
  }
  const out = new Float32Array(mlpParamCount(spec));
  const layers = spec.sizes.length - 1;
  let k = 0;
  for (let l = 0; l < layers; l++) {
    const fanIn = spec.sizes[l]!;
    const fanOut = spec.sizes[l + 1]!;
    const s = l === layers - 1 ? finalScale : 1 / Math.sqrt(fanIn);
    const n = fanIn * fanOut + fanOut; // W_l then b_l, contiguous in the flat order
    for (let i = 0; i < n; i++) out[k++] = rng.uniformIn(-s, s);
  }
  return out;
}

/** Throws unless `spec` describes at least one layer with positive integer widths. */
export function checkMlpSpec(spec: MlpSpec, what = 'mlp'): void {
  if (spec.sizes.length < 2) throw new Error(`${what}.sizes: need at least [in, out], got [${spec.sizes.join(', ')}]`);
  spec.sizes.forEach((n, i) => {
    if (!Number.isInteger(n) || n < 1) throw new Error(`${what}.sizes[${i}]: expected a positive integer, got ${n}`);
  });
}
