/**
 * The host-side allocator of the `simd` backend's one WebAssembly memory.
 *
 * All network buffers (parameters, gradients, activations, Adam moments, scratch) live in one
 * shared `WebAssembly.Memory`; the kernels receive byte offsets into it. Blocks are 64-byte
 * aligned (a cache line, and the v128 alignment the kernels prefer), carved from the top of the
 * used region (bump) or reused from a first-fit free list that coalesces neighbours. Growing the
 * memory never detaches earlier views because the memory is shared (a SharedArrayBuffer keeps its
 * length; later `memory.buffer` objects see the grown memory). Allocation happens when a network
 * is created or first sees a larger batch, never inside the update loop.
 */

import type { WasmMemory } from './wasm-api';

/** Block alignment in bytes. */
const ALIGN = 64;
/** WebAssembly page size in bytes. */
const PAGE = 65536;

interface FreeBlock {
  off: number;
  bytes: number;
}

export class WasmHeap {
  private top: number;
  private readonly free: FreeBlock[] = [];

  /** @param base first usable byte (the module's `__heap_base`). */
  constructor(
    readonly memory: WasmMemory,
    base: number,
  ) {
    this.top = align(base);
  }

  /** Bytes between the heap base and the top of the bump region (for tests and diagnostics). */
  get used(): number {
    return this.top;
  }

  /** A zero-filled block of `n` float32 values; returns its byte offset. */
  allocF32(n: number): number {
    if (!Number.isInteger(n) || n < 0) throw new Error(`WasmHeap.allocF32: n must be a non-negative integer, got ${n}`);
    const bytes = align(Math.max(4 * n, ALIGN));
    let off = -1;
    for (let k = 0; k < this.free.length; k++) {
      const blk = this.free[k]!;
      if (blk.bytes >= bytes) {
        off = blk.off;
        if (blk.bytes === bytes) this.free.splice(k, 1);
        else {
          blk.off += bytes;
          blk.bytes -= bytes;
        }
        break;
      }
    }
    if (off < 0) {
      off = this.top;
      this.top += bytes;
      const need = this.top - this.memory.buffer.byteLength;
      if (need > 0) this.memory.grow(Math.ceil(need / PAGE));
    }
    this.f32(off, n).fill(0);
    return off;
  }

  /** Return a block from `allocF32(n)` to the free list. */
  freeF32(off: number, n: number): void {
    const bytes = align(Math.max(4 * n, ALIGN));
    this.free.push({ off, bytes });
    this.free.sort((x, y) => x.off - y.off);
    for (let k = 0; k + 1 < this.free.length; ) {
      const a = this.free[k]!;
      const b = this.free[k + 1]!;
      if (a.off + a.bytes === b.off) {
        a.bytes += b.bytes;
        this.free.splice(k + 1, 1);
      } else k++;
    }
    const last = this.free[this.free.length - 1];
    if (last && last.off + last.bytes === this.top) {
      this.top = last.off;
      this.free.pop();
    }
  }

  /** A Float32Array view of `n` values at byte offset `off` (stays valid: the memory is shared). */
  f32(off: number, n: number): Float32Array {
    return new Float32Array(this.memory.buffer, off, n);
  }
}

function align(x: number): number {
  return Math.ceil(x / ALIGN) * ALIGN;
}
