// Helper thread of the simd backend (see parallel.ts): runs the second half of large matrix
// products on the same shared wasm memory. Plain JavaScript so that it starts without a
// TypeScript loader. Protocol over the Int32 control block at workerData.ctl (slot names in
// parallel.ts): wait until SEQ changes, run gemm with the ARGS slots, then DONE <- SEQ.
import { workerData } from 'node:worker_threads';

const SEQ = 0, DONE = 1, STATUS = 2, READY = 3, ARGS = 4;
const { module, memory, ctl, spin } = workerData;
const k = new WebAssembly.Instance(module, { env: { memory } }).exports;
const s = new Int32Array(memory.buffer, ctl, 20);
Atomics.store(s, READY, 1);
Atomics.notify(s, READY);
let seen = 0;
for (;;) {
  let n = 0;
  while (Atomics.load(s, SEQ) === seen) {
    if (++n > spin) Atomics.wait(s, SEQ, seen);
  }
  seen = Atomics.load(s, SEQ);
  if (seen < 0) break;
  try {
    k.gemm(s[ARGS], s[ARGS + 1], s[ARGS + 2], s[ARGS + 3], s[ARGS + 4], s[ARGS + 5], s[ARGS + 6], s[ARGS + 7], s[ARGS + 8], s[ARGS + 9], s[ARGS + 10], s[ARGS + 11], s[ARGS + 12]);
  } catch {
    Atomics.store(s, STATUS, 1);
  }
  Atomics.store(s, DONE, seen);
  Atomics.notify(s, DONE);
}
