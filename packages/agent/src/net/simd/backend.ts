/**
 * The `simd` network backend: `NetBackend` over the WebAssembly SIMD kernels.
 *
 * `createSimdBackend({ mode })` loads the kernels in a fresh memory (see `loader.ts`): mode
 * "fast" (default) runs the relaxed-SIMD FMA build when the engine validates it, mode "strict"
 * always runs the plain build, whose results are bit-identical on every machine. `name` is the
 * build that runs ("simd-fma" or "simd"); `reason` says why, for the log line.
 */
import type { AdamConfig, Mlp, MlpSpec, NetBackend } from '../types';
import { SimdAdam } from './adam';
import { loadSimdKernels, type SimdMode } from './loader';
import { SimdMlp } from './mlp';

export interface SimdBackendOptions {
  /** "fast" (default): FMA build when available; "strict": plain SIMD, bit-reproducible. */
  readonly mode?: SimdMode;
}

export interface SimdBackend extends NetBackend {
  readonly name: 'simd' | 'simd-fma';
  readonly mode: SimdMode;
  /** Why this build runs (e.g. "fast mode: relaxed-SIMD FMA validated"). */
  readonly reason: string;
  createMlp(spec: MlpSpec): SimdMlp;
  createAdam(net: Mlp, config: AdamConfig): SimdAdam;
}

export function createSimdBackend(options: SimdBackendOptions = {}): SimdBackend {
  const mode = options.mode ?? 'fast';
  const { build, reason, k, heap } = loadSimdKernels(mode);
  return {
    name: build,
    mode,
    reason,
    createMlp: (spec) => new SimdMlp(k, heap, spec),
    createAdam: (net, config) => {
      if (!(net instanceof SimdMlp) || net.heap !== heap) {
        throw new Error('simd backend: createAdam needs a network created by this backend');
      }
      return new SimdAdam(k, net, config);
    },
  };
}
