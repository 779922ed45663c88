/**
 * Loads the AssemblyScript kernels (`assembly/kernels.ts`) built by `assembly/build.mjs` into
 * `build/wasm/`, and picks the build:
 * - mode "strict": `simd.wasm` (plain SIMD; bit-identical results on every machine);
 * - mode "fast" (default): `simd-fma.wasm` (relaxed-SIMD FMA) when the engine validates it,
 *   otherwise `simd.wasm`. Node 20 keeps relaxed SIMD behind the V8 flag
 *   `--experimental-wasm-relaxed-simd`; it is set here with `v8.setFlagsFromString` before the
 *   module is compiled (newer Node versions have it on, and the flag is then not needed).
 *
 * Compiled modules are cached per file (they are immutable); every `loadSimdKernels` call makes
 * its own memory and instance, so backends share no mutable state. When build/wasm is missing or
 * older than the sources (its SHA-256 stamp differs), the kernels are rebuilt first.
 */
import { spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { existsSync, readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import v8 from 'node:v8';
import { WasmHeap } from './heap';
import { wasmApi, type WasmModule } from './wasm-api';

/** Which build to run: "strict" = plain SIMD (reproducible), "fast" = FMA when available. */
export type SimdMode = 'strict' | 'fast';

/** Maximum memory in 64 KiB pages (1 GiB); must equal MAX_PAGES in assembly/build.mjs. */
const MAX_PAGES = 16384;

/** The kernels' exports (pointers are byte offsets; see assembly/kernels.ts for each contract). */
export interface KernelExports {
  heapBase(): number;
  usesFma(): number;
  gemm(
    a: number, sai: number, sap: number, b: number, c: number, M: number, K: number, N: number,
    bias: number, act: number, d: number, dkind: number, pack: number,
  ): void;
  actGrad(dy: number, y: number, out: number, n: number, kind: number): void;
  colsum(x: number, M: number, N: number, out: number): void;
  transpose(x: number, R: number, C: number, out: number): void;
  adam(
    p: number, g: number, m: number, v: number, n: number,
    lr: number, b1: number, omb1: number, b2: number, omb2: number, eps: number, c1: number, c2: number,
  ): void;
  polyak(src: number, dst: number, n: number, tau: number, omtau: number): void;
}

/** Activation codes shared with the kernels (ACT_* in assembly/kernels.ts). */
export const ACT = { linear: 0, relu: 1, tanh: 2 } as const;

export interface SimdKernels {
  /** "simd" (plain) or "simd-fma" (relaxed-SIMD FMA): the build that runs. */
  readonly build: 'simd' | 'simd-fma';
  /** Why this build was chosen (for the log line). */
  readonly reason: string;
  readonly k: KernelExports;
  readonly heap: WasmHeap;
  /** The compiled module (instantiated again by a helper thread on the same memory). */
  readonly module: WasmModule;
}

const wasmDir = new URL('../../../build/wasm/', import.meta.url);
const assemblyDir = new URL('../../../assembly/', import.meta.url);
const modules = new Map<string, WasmModule>();
let buildChecked = false;

/** SHA-256 of the kernel sources, as assembly/build.mjs stamps it (null outside a source tree). */
function sourceHash(): string | null {
  const files = ['build.mjs', 'kernels.ts'].map((f) => new URL(f, assemblyDir));
  if (!files.every((f) => existsSync(f))) return null;
  const h = createHash('sha256');
  for (const f of files) h.update(readFileSync(f));
  return h.digest('hex');
}

/**
 * Make sure build/wasm matches the kernel sources: when the stamp is missing or stale (a
 * checkout updated without `pnpm install`), run assembly/build.mjs once (a few seconds).
 */
function ensureBuild(): void {
  if (buildChecked) return;
  const want = sourceHash();
  const stamp = new URL('source.sha256', wasmDir);
  const have = existsSync(stamp) ? readFileSync(stamp, 'utf8').trim() : null;
  if (want !== null && have !== want) {
    const script = fileURLToPath(new URL('build.mjs', assemblyDir));
    const r = spawnSync(process.execPath, [script], { encoding: 'utf8' });
    if (r.status !== 0) {
      throw new Error(`simd backend: building the kernels failed (node ${script}): ${r.stderr || r.error?.message || 'unknown error'}`);
    }
  }
  buildChecked = true;
}

function readBuild(file: string): Uint8Array {
  ensureBuild();
  try {
    return readFileSync(new URL(file, wasmDir));
  } catch (e) {
    throw new Error(
      `simd backend: ${file} not found in ${wasmDir.pathname}; build it with ` +
        '`node packages/agent/assembly/build.mjs` (run by `pnpm install` and `pnpm test`)',
      { cause: e },
    );
  }
}

/** True when this engine accepts the relaxed-SIMD build (setting the V8 flag if needed). */
function relaxedSimdAvailable(bytes: Uint8Array): boolean {
  if (wasmApi().validate(bytes)) return true;
  v8.setFlagsFromString('--experimental-wasm-relaxed-simd');
  return wasmApi().validate(bytes);
}

function compiled(file: string, bytes: Uint8Array): WasmModule {
  let m = modules.get(file);
  if (!m) {
    m = new (wasmApi().Module)(bytes);
    modules.set(file, m);
  }
  return m;
}

/** Load, validate and instantiate the kernels for `mode`, in a fresh memory. */
export function loadSimdKernels(mode: SimdMode = 'fast'): SimdKernels {
  if (mode !== 'strict' && mode !== 'fast') {
    throw new Error(`simd backend: mode must be "strict" or "fast", got ${JSON.stringify(mode)}`);
  }
  let file = 'simd.wasm';
  let reason = 'strict mode: plain SIMD, bit-reproducible';
  if (mode === 'fast') {
    const fma = readBuild('simd-fma.wasm');
    if (relaxedSimdAvailable(fma)) {
      file = 'simd-fma.wasm';
      reason = 'fast mode: relaxed-SIMD FMA validated';
      compiled(file, fma);
    } else {
      reason = 'fast mode: relaxed SIMD not supported by this engine, using plain SIMD';
    }
  }
  const mod = modules.get(file) ?? compiled(file, readBuild(file));
  const memory = new (wasmApi().Memory)({ initial: 1, maximum: MAX_PAGES, shared: true });
  const inst = new (wasmApi().Instance)(mod, { env: { memory } });
  const k = inst.exports as unknown as KernelExports;
  const build = k.usesFma() === 1 ? 'simd-fma' : 'simd';
  return { build, reason, k, heap: new WasmHeap(memory, k.heapBase()), module: mod };
}
