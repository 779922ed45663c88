/**
 * Network backend selection from the agent config's `backend` field.
 * "auto" runs the fastest backend that starts (see `net/tfjs.ts` for the tfjs order);
 * a named backend that cannot start is an error, never silently replaced.
 * The choice is reported through `log` (no global logger).
 */
import type { BackendChoice } from '../config';
import { createTfjsBackend, type TransposeMode } from './tfjs';
import type { NetBackend } from './types';

export interface SelectOptions {
  /** Receives one line naming the backend that runs. */
  readonly log?: (message: string) => void;
  /** tfjs only: how transposed products are formed (benchmarks compare the two). */
  readonly transpose?: TransposeMode;
}

export async function createNetBackend(choice: BackendChoice, options: SelectOptions = {}): Promise<NetBackend> {
  switch (choice) {
    case 'auto':
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
