/**
 * The `simd` network backend: `NetBackend` over the WebAssembly SIMD kernels.
 *
 * `createSimdBackend({ mode, threads })` loads the kernels in a fresh memory (see `loader.ts`):
 * mode "fast" (default) runs the relaxed-SIMD FMA build when the engine validates it, mode
 * "strict" always runs the plain build, whose results are bit-identical on every machine.
 * `threads: 2` adds a helper thread for large matrix products (`parallel.ts`); results do not
 * depend on the thread count. `name` is the build that runs ("simd-fma" or "simd"); `describe()`
 * is the line to log.
 */
import type { AdamConfig, Mlp, MlpSpec, NetBackend } from '../types';
import { SimdAdam } from './adam';
import { loadSimdKernels, type SimdMode } from './loader';
import { SimdMlp } from './mlp';
import { MIN_PARALLEL_WORK, twoThreadKernels } from './parallel';

export interface SimdBackendOptions {
  /** "fast" (default): FMA build when available; "strict": plain SIMD, bit-reproducible. */
  readonly mode?: SimdMode;
  /** Threads for large matrix products: 1 (default) or 2 (a helper thread over shared memory). */
  readonly threads?: 1 | 2;
  /** With 2 threads, the smallest product (multiply-adds) that is split (default 2^21). */
  readonly minParallelWork?: number;
}

export interface SimdBackend extends NetBackend {
  readonly name: 'simd' | 'simd-fma';
  readonly mode: SimdMode;
  /** Threads that compute large products (1 if a helper thread was asked for but did not start). */
  readonly threads: number;
  /** Why this build and thread count run (e.g. "fast mode: relaxed-SIMD FMA validated; 1 thread"). */
  readonly reason: string;
  createMlp(spec: MlpSpec): SimdMlp;
  createAdam(net: Mlp, config: AdamConfig): SimdAdam;
  /** Stop the helper thread, if any (networks must not be used afterwards). */
  dispose(): void;
}

export function createSimdBackend(options: SimdBackendOptions = {}): SimdBackend {
  const mode = options.mode ?? 'fast';
  const threads = options.threads ?? 1;
  if (threads !== 1 && threads !== 2) throw new Error(`simd.threads: expected 1 or 2, got ${JSON.stringify(threads)}`);
  const minWork = options.minParallelWork ?? MIN_PARALLEL_WORK;
  if (!(Number.isInteger(minWork) && minWork >= 0)) {
    throw new Error(`simd.minParallelWork: expected a non-negative integer, got ${minWork}`);
  }
  const loaded = loadSimdKernels(mode);
  const { heap } = loaded;
  const par = threads === 2 ? twoThreadKernels(loaded.k, loaded.module, heap, minWork) : null;
  const k = par ? par.k : loaded.k;
  const used = par ? par.threads : 1;
  return {
    name: loaded.build,
    mode,
    threads: used,
    reason: `${loaded.reason}; ${par ? par.reason : '1 thread'}`,
    createMlp: (spec) => new SimdMlp(k, heap, spec),
    createAdam: (net, config) => {
      if (!(net instanceof SimdMlp) || net.heap !== heap) {
        throw new Error('simd backend: createAdam needs a network created by this backend');
      }
      return new SimdAdam(k, net, config);
    },
    dispose: () => par?.dispose(),
  };
}
