// Compiles the AssemblyScript kernels (assembly/kernels.ts) into the two WebAssembly builds the
// `simd` network backend loads: build/wasm/simd.wasm (plain SIMD, bit-reproducible) and
// build/wasm/simd-fma.wasm (relaxed-SIMD fused multiply-add). Run by the workspace's `prepare`
// and `test` scripts; outputs are generated, gitignored and never committed.
//
// Memory: imported as `env.memory`, shared (so that growing it never detaches the Float32Array
// views the host hands out, and so that workers can share it). `--runtime stub` because the
// kernels never allocate: the host owns all buffers.
import asc from 'assemblyscript/asc';
import { mkdirSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const pkg = join(dirname(fileURLToPath(import.meta.url)), '..');
const outDir = join(pkg, 'build', 'wasm');
mkdirSync(outDir, { recursive: true });

/** Maximum memory in 64 KiB pages (1 GiB); a shared memory must declare one. Keep equal to MAX_PAGES in src/net/simd/loader.ts. */
const MAX_PAGES = 16384;

const common = [
  join(pkg, 'assembly', 'kernels.ts'),
  '-O3', '--noAssert', '--runtime', 'stub',
  '--importMemory', '--sharedMemory', '--maximumMemory', String(MAX_PAGES), '--initialMemory', '1',
  '--enable', 'simd', '--enable', 'threads',
];

const builds = [
  { name: 'simd.wasm', extra: [] },
  { name: 'simd-fma.wasm', extra: ['--enable', 'relaxed-simd'] },
];

for (const b of builds) {
  const { error, stderr } = await asc.main([...common, ...b.extra, '--outFile', join(outDir, b.name)]);
  if (error) {
    process.stderr.write(stderr.toString());
    process.stderr.write(`assembly/build.mjs: ${b.name} failed: ${error.message}\n`);
    process.exit(1);
  }
}
