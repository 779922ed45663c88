// Compiles the AssemblyScript kernels (assembly/kernels.ts) into the two WebAssembly builds the
// `simd` network backend loads: build/wasm/simd.wasm (plain SIMD, bit-reproducible) and
// build/wasm/simd-fma.wasm (relaxed-SIMD fused multiply-add). Run by the workspace's `prepare`
// and `test` scripts; outputs are generated, gitignored and never committed.
//
// Stamp: build/wasm/source.sha256 holds the SHA-256 of this script and kernels.ts; the loader
// (src/net/simd/loader.ts) rebuilds when it does not match the sources in the tree.
//
// Memory: imported as `env.memory`, shared (so that growing it never detaches the Float32Array
// views the host hands out, and so that workers can share it). `--runtime stub` because the
// kernels never allocate: the host owns all buffers.
import asc from 'assemblyscript/asc';
import { createHash } from 'node:crypto';
import { mkdirSync, readFileSync, renameSync, writeFileSync } from 'node:fs';
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
  // Write under a temporary name, then rename: a concurrent reader sees the old or the new file.
  const tmp = join(outDir, `${b.name}.${process.pid}.tmp`);
  const { error, stderr } = await asc.main([...common, ...b.extra, '--outFile', tmp]);
  if (error) {
    process.stderr.write(stderr.toString());
    process.stderr.write(`assembly/build.mjs: ${b.name} failed: ${error.message}\n`);
    process.exit(1);
  }
  renameSync(tmp, join(outDir, b.name));
}

const hash = createHash('sha256');
for (const f of ['build.mjs', 'kernels.ts']) hash.update(readFileSync(join(pkg, 'assembly', f)));
writeFileSync(join(outDir, `source.sha256.${process.pid}.tmp`), `${hash.digest('hex')}\n`);
renameSync(join(outDir, `source.sha256.${process.pid}.tmp`), join(outDir, 'source.sha256'));
