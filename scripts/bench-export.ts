/**
 * Speed of every path a solver can take to a trained policy, in tile actions per second at a
 * batch of 64 tiles (one call answers 64 tiles). One JSON object per figure per line on stdout;
 * notices on stderr. The actor is the td3 default (24 -> 256 -> 256 -> 1, relu, tanh; KS L = 22,
 * 4 tiles, 24 observations per tile), normaliser baked in.
 *
 *   export-c            the C export (gcc -O2, no -march: portable code), called in a loop
 *   export-fortran      the Fortran export (gfortran -O2), called in a loop
 *   onnxruntime         the ONNX export through onnxruntime-node, session.run per batch, one
 *                       intra-op thread (and, as a second line, the runtime's default threads)
 *   tilewise            in-process: PolicyEvaluator on the agent's network backend (auto and
 *                       the strict simd build), what `tilewise serve` and `act` compute
 *   serve-roundtrip     `tilewise serve` in its own process on 127.0.0.1, one request in flight:
 *                       from the C client example (examples/policy-client.c, what a C/Fortran
 *                       solver sees) and from the TypeScript client
 *
 * Usage: npx tsx scripts/bench-export.ts [--seconds S] [--batch N]   (S per figure, default 2)
 * Needs gcc and gfortran (figures whose compiler is missing are skipped with a notice).
 */
import { execFileSync, spawn, spawnSync } from 'node:child_process';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { bestTime } from '../packages/agent/bench/timing';
import { createAgent } from '../packages/agent/src/agent';
import { KsEnv, parseKsConfig } from '../packages/envs/src/ks';
import { Rng } from '../packages/envs/src/random';
import { exportPolicy, PolicyEvaluator } from '../packages/runner/src/export';
import { loadOnnxRuntime } from '../packages/runner/src/export/onnx-runtime';
import { PolicyClient } from '../packages/runner/src/serve/client';
import { parseAddress } from '../packages/runner/src/wire/address';
import { option } from './options';

const seconds = Number(option('seconds', '2'));
const batch = Number(option('batch', '64'));
if (!(seconds > 0)) throw new Error(`--seconds: expected a positive number, got ${option('seconds', '')}`);
if (!Number.isInteger(batch) || batch < 1) throw new Error(`--batch: expected a positive integer, got ${option('batch', '')}`);

const root = join(import.meta.dirname, '..');
const say = (l: string): void => void process.stderr.write(`${l}\n`);
const emit = (figure: string, tilesPerSecond: number, extra: Record<string, unknown> = {}): void => {
  process.stdout.write(
    `${JSON.stringify({ figure, batch, actor: '24-256-256-1', tileActionsPerSecond: Math.round(tilesPerSecond), usPerBatch: Number(((1e6 * batch) / tilesPerSecond).toFixed(2)), ...extra })}\n`,
  );
};
const has = (cmd: string): boolean => spawnSync(cmd, ['--version'], { stdio: 'ignore' }).status === 0;

// --- the policy ---------------------------------------------------------------------------------
const config = parseKsConfig({ kind: 'ks', length: 22, points: 64, tiles: 4, actuators: 4, actionBound: 0.5, sensorsPerTile: 8, haloTiles: 1 });
const spec = new KsEnv(config, { copies: 1, p0: 1 }).spec;
const agent = await createAgent({ obsDim: spec.obsDim, actDim: spec.actDim, actionBound: spec.actionBound, seed: 1, config: { algo: 'td3', warmup: 0, batchSize: 64, replayCapacity: 4096 } });
const rng = Rng.derive(1, 'bench-export');
const obs = new Float32Array(batch * spec.obsDim);
rng.fillNormal(obs);
// Give the normaliser statistics (the speed does not depend on the weights' values).
const warm = new Float32Array(64 * spec.obsDim);
rng.fillNormal(warm);
agent.store(warm, new Float32Array(64 * spec.actDim), new Float32Array(64), warm, new Float32Array(64));
const snapshot = agent.policy();
const dir = mkdtempSync(join(tmpdir(), 'tilewise-bench-export-'));
exportPolicy({ snapshot, env: { kind: 'ks', spec, config: config as unknown as Record<string, unknown> } }, { outDir: dir, formats: ['onnx', 'c', 'fortran', 'json'] });
writeFileSync(join(dir, 'obs.f64'), new Float64Array(obs));
say(`bench-export: exports in ${dir}; ${seconds} s per figure, batch ${batch}`);

// --- compiled exports -----------------------------------------------------------------------------
function compiled(figure: string, cmd: 'gcc' | 'gfortran', args: string[], exe: string, flags: string): void {
  if (!has(cmd)) {
    say(`bench-export: ${cmd} is missing, ${figure} skipped`);
    return;
  }
  execFileSync(cmd, args, { cwd: dir, stdio: ['ignore', 'ignore', 'inherit'] });
  const [tiles, calls, best] = execFileSync(exe, [join(dir, 'obs.f64'), String(seconds)]).toString().trim().split(/\s+/).map(Number);
  emit(figure, (tiles! * calls!) / best!, { compiler: flags });
}
compiled('export-c', 'gcc', ['-std=c99', '-O2', '-I', dir, join(root, 'scripts', 'bench-export.c'), join(dir, 'tilewise_policy.c'), '-o', join(dir, 'bench-c'), '-lm'], join(dir, 'bench-c'), 'gcc -O2');
compiled('export-fortran', 'gfortran', ['-O2', '-J', dir, join(dir, 'tilewise_policy.f90'), join(root, 'scripts', 'bench-export.f90'), '-o', join(dir, 'bench-f')], join(dir, 'bench-f'), 'gfortran -O2');

// --- onnxruntime ----------------------------------------------------------------------------------
const ort = await loadOnnxRuntime();
for (const threads of [1, 0]) {
  const session = await ort.InferenceSession.create(join(dir, 'tilewise_policy.onnx'), threads ? { intraOpNumThreads: 1, interOpNumThreads: 1 } : {});
  const feeds = { obs: new ort.Tensor('float32', obs, [batch, spec.obsDim]) };
  for (let i = 0; i < 50; i++) await session.run(feeds);
  let best = Infinity;
  for (let round = 0; round < 5; round++) {
    let calls = 0;
    const t0 = performance.now();
    while (performance.now() - t0 < (1000 * seconds) / 5) {
      await session.run(feeds);
      calls++;
    }
    best = Math.min(best, (performance.now() - t0) / calls);
  }
  emit('onnxruntime', (batch * 1000) / best, { threads: threads ? 'intraOp 1' : 'runtime default', version: ort.env.versions.node });
  await session.release();
}

// --- tilewise in-process --------------------------------------------------------------------------
for (const backend of ['auto', 'simd'] as const) {
  const ev = await PolicyEvaluator.create(snapshot, backend);
  const reps = Math.max(10, Math.round((seconds * 1000) / 5 / Math.max(1e-3, bestTime(() => ev.act(obs, batch), 20, 1))));
  const ms = bestTime(() => ev.act(obs, batch), reps, 5);
  emit('tilewise', (batch * 1000) / ms, { backend: ev.backendName });
  ev.dispose();
}

// --- server round trip ----------------------------------------------------------------------------
const server = spawn(process.execPath, [join(root, 'packages', 'runner', 'bin', 'tilewise.mjs'), 'serve', join(dir, 'tilewise_policy.json'), '--listen', '127.0.0.1:0'], {
  stdio: ['ignore', 'ignore', 'pipe'],
});
const address = await new Promise<string>((resolve, reject) => {
  let err = '';
  server.stderr.on('data', (d) => {
    err += d;
    const m = / on (127\.0\.0\.1:\d+):/.exec(err);
    if (m) resolve(m[1]!);
  });
  server.once('exit', (code) => reject(new Error(`tilewise serve exited (${code}): ${err}`)));
});
say(`bench-export: tilewise serve on ${address}`);
if (has('gcc')) {
  const exe = join(dir, 'policy-client');
  execFileSync('gcc', ['-std=c99', '-O2', '-o', exe, join(root, 'examples', 'policy-client.c')]);
  const text = Array.from({ length: batch }, (_, r) => Array.from(obs.subarray(r * spec.obsDim, (r + 1) * spec.obsDim)).join(' ')).join('\n');
  const probe = spawnSync(exe, [address, '200'], { input: text });
  const us = Number(/([\d.]+) us each/.exec(probe.stderr.toString())?.[1]);
  const repeat = Math.max(200, Math.round((seconds * 1e6) / us));
  const run = spawnSync(exe, [address, String(repeat)], { input: text });
  const m = /([\d.]+) us each/.exec(run.stderr.toString());
  if (!m) throw new Error(`policy-client: ${run.stderr.toString()}`);
  emit('serve-roundtrip', (batch * 1e6) / Number(m[1]), { client: 'examples/policy-client.c', transport: 'tcp 127.0.0.1' });
}
const client = await PolicyClient.connect(parseAddress(address));
for (let i = 0; i < 100; i++) await client.act(obs, batch, spec.obsDim);
let best = Infinity;
for (let round = 0; round < 5; round++) {
  let calls = 0;
  const t0 = performance.now();
  while (performance.now() - t0 < (1000 * seconds) / 5) {
    await client.act(obs, batch, spec.obsDim);
    calls++;
  }
  best = Math.min(best, (performance.now() - t0) / calls);
}
emit('serve-roundtrip', (batch * 1000) / best, { client: 'TypeScript PolicyClient', transport: 'tcp 127.0.0.1' });
client.close();
server.kill('SIGTERM');
agent.dispose();
