/**
 * Two-thread matrix products for the simd backend: the caller's thread and one helper thread
 * (worker.mjs) share the backend's wasm memory; a large product C = epilogue(A B) is split by
 * rows of C, the caller computing the first half and the helper the second.
 *
 * Every element of C is computed by the same sequence of operations as with one thread (the
 * split only chooses which thread computes which rows), so results are bit-identical for any
 * thread count; strict mode stays reproducible.
 *
 * Synchronisation: an Int32 control block in the shared memory. The caller writes the helper's
 * arguments, then increments SEQ (Atomics.store + notify); the helper, spinning briefly and
 * then sleeping in Atomics.wait, runs its half and sets DONE = SEQ. The caller spins, then
 * sleeps, until DONE = SEQ. Products smaller than `minWork` multiply-adds (where the hand-off
 * would cost more than it saves) stay on the caller's thread.
 */
import { Worker } from 'node:worker_threads';
import type { WasmHeap } from './heap';
import type { KernelExports } from './loader';
import type { WasmModule } from './wasm-api';

/** Control block slots (same names in worker.mjs). */
const SEQ = 0;
const DONE = 1;
const STATUS = 2;
const READY = 3;
const ARGS = 4;
const SLOTS = 20;

/** Busy-wait iterations before sleeping (roughly 0.1-0.3 ms of polling). */
const SPIN = 20000;
/** How long to wait for the helper to start or to answer before giving up (ms). */
const TIMEOUT_MS = 10000;
/**
 * Default smallest product (M K N multiply-adds) worth splitting: 2^21. A 64-wide layer at
 * batch 256 (2^20) stays on one thread; 256-wide hidden layers (2^24) are split.
 */
export const MIN_PARALLEL_WORK = 1 << 21;

export interface ParallelKernels {
  readonly k: KernelExports;
  /** Threads that compute large products (1 when the helper could not start). */
  readonly threads: number;
  /** Why (for the log line). */
  readonly reason: string;
  dispose(): void;
}

/** Wrap `k` so that products of at least `minWork` multiply-adds run on two threads. */
export function twoThreadKernels(k: KernelExports, module: WasmModule, heap: WasmHeap, minWork = MIN_PARALLEL_WORK): ParallelKernels {
  const ctlOff = heap.allocF32(SLOTS);
  const s = new Int32Array(heap.memory.buffer, ctlOff, SLOTS);
  let worker: Worker | null = new Worker(new URL('./worker.mjs', import.meta.url), {
    workerData: { module, memory: heap.memory, ctl: ctlOff, spin: SPIN },
  });
  worker.unref();
  let failure = '';
  worker.on('error', (e) => {
    failure = String(e);
  });
  if (Atomics.wait(s, READY, 0, TIMEOUT_MS) === 'timed-out' && Atomics.load(s, READY) !== 1) {
    void worker.terminate();
    worker = null;
    heap.freeF32(ctlOff, SLOTS);
    return { k, threads: 1, reason: `helper thread did not start within ${TIMEOUT_MS} ms; one thread`, dispose: () => {} };
  }
  let seq = 0;
  // The helper's own packing scratch (4 K floats), grown when a larger K first arrives.
  let helperPack = 0;
  let helperPackK = 0;
  const gemm: KernelExports['gemm'] = (a, sai, sap, b, c, M, K, N, bias, act, d, dkind, pack) => {
    if (M < 8 || M * K * N < minWork || worker === null) {
      k.gemm(a, sai, sap, b, c, M, K, N, bias, act, d, dkind, pack);
      return;
    }
    if (pack !== 0 && K > helperPackK) {
      if (helperPackK > 0) heap.freeF32(helperPack, 4 * helperPackK);
      helperPack = heap.allocF32(4 * K);
      helperPackK = K;
    }
    const M1 = (M >> 3) << 2; // first half, a multiple of 4 rows (whole register blocks)
    const rowBytes = 4 * N;
    s[ARGS] = a + 4 * M1 * sai;
    s[ARGS + 1] = sai;
    s[ARGS + 2] = sap;
    s[ARGS + 3] = b;
    s[ARGS + 4] = c + M1 * rowBytes;
    s[ARGS + 5] = M - M1;
    s[ARGS + 6] = K;
    s[ARGS + 7] = N;
    s[ARGS + 8] = bias;
    s[ARGS + 9] = act;
    s[ARGS + 10] = d ? d + M1 * rowBytes : 0;
    s[ARGS + 11] = dkind;
    s[ARGS + 12] = pack === 0 ? 0 : helperPack;
    seq = seq === 0x7fffffff ? 1 : seq + 1;
    Atomics.store(s, SEQ, seq);
    Atomics.notify(s, SEQ);
    k.gemm(a, sai, sap, b, c, M1, K, N, bias, act, d, dkind, pack);
    let n = 0;
    while (Atomics.load(s, DONE) !== seq) {
      if (++n > SPIN) {
        const prev = Atomics.load(s, DONE);
        if (prev !== seq && Atomics.wait(s, DONE, prev, TIMEOUT_MS) === 'timed-out') {
          throw new Error(`simd backend: helper thread did not answer within ${TIMEOUT_MS} ms ${failure}`);
        }
      }
    }
    if (Atomics.load(s, STATUS) !== 0) throw new Error(`simd backend: helper thread failed in gemm ${failure}`);
  };
  return {
    k: {
      heapBase: k.heapBase,
      usesFma: k.usesFma,
      gemm,
      actGrad: k.actGrad,
      colsum: k.colsum,
      transpose: k.transpose,
      adam: k.adam,
      polyak: k.polyak,
    },
    threads: 2,
    reason: 'two threads for products of at least ' + minWork + ' multiply-adds',
    dispose: () => {
      if (worker === null) return;
      Atomics.store(s, SEQ, -1);
      Atomics.notify(s, SEQ);
      void worker.terminate();
      worker = null;
    },
  };
}
