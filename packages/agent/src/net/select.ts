/**
 * Network backend selection from the agent config's `backend` field.
 * "auto" runs the fastest backend that starts: the WebAssembly SIMD kernels (`net/simd`, FMA
 * build when the engine validates it, else the plain build), else tfjs (see `net/tfjs.ts` for
 * its order). A named backend that cannot start is an error, never silently replaced:
 * "simd-fma" needs relaxed SIMD; "simd" is the plain, bit-reproducible build (strict mode).
 * The choice is reported through `log` (no global logger).
 */
import type { BackendChoice } from '../config';
import { createSimdBackend } from './simd';
import { createTfjsBackend, type TransposeMode } from './tfjs';
import type { NetBackend } from './types';

export interface SelectOptions {
  /** Receives one line naming the backend that runs. */
  readonly log?: (message: string) => void;
  /** tfjs only: how transposed products are formed (benchmarks compare the two). */
  readonly transpose?: TransposeMode;
}

export async function createNetBackend(choice: BackendChoice, options: SelectOptions = {}): Promise<NetBackend> {
  const log = options.log ?? (() => {});
  switch (choice) {
    case 'auto': {
      let why: string;
      try {
        const be = createSimdBackend({ mode: 'fast' });
        log(`network backend: ${be.name} (${be.reason})`);
        return be;
      } catch (e) {
        why = e instanceof Error ? e.message : String(e);
      }
      log(`network backend: simd kernels did not start (${why}); trying tfjs`);
      return createTfjsBackend(choice, options);
    }
    case 'simd-fma':
    case 'simd': {
      const be = createSimdBackend({ mode: choice === 'simd' ? 'strict' : 'fast' });
      if (be.name !== choice) throw new Error(`network backend: "${choice}" asked for, but ${be.reason}`);
      log(`network backend: ${be.name} (${be.reason})`);
      return be;
    }
    case 'tfjs-node':
    case 'tfjs-wasm':
    case 'tfjs-cpu':
      return createTfjsBackend(choice, options);
    default: {
      const never: never = choice;
      throw new Error(`createNetBackend: unknown backend ${JSON.stringify(never)}`);
    }
  }
}
