/**
 * The policy server and its clients: the TypeScript client and the C example
 * (examples/policy-client.c, compiled with gcc -Wall -Wextra -Werror), over TCP and a Unix
 * socket, against tilewise's own actions (Agent.act on the same backend: exact equality, the
 * wire carries float32 unchanged).
 */
import { spawn } from 'node:child_process';
import { existsSync, mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Rng } from '@tilewise/envs';
import { buildExportModel, exportPolicy, PolicyEvaluator } from '../src/export';
import { serveCommand } from '../src/commands/serve';
import { PolicyClient } from '../src/serve/client';
import { PolicyServer } from '../src/serve/server';
import { formatAddress, parseAddress, type Address } from '../src/wire/address';
import { ERR, MSG, RemoteError } from '../src/wire/protocol';
import { compile, skipWithout } from './helpers/compilers';
import { randomObservations, trainedPolicy, type TrainedPolicy } from './helpers/policy';

const root = join(__dirname, '..', '..', '..');
const dir = mkdtempSync(join(tmpdir(), 'tilewise-serve-'));
let t: TrainedPolicy;
let evaluator: PolicyEvaluator;
let server: PolicyServer;
let tcp: Address;

beforeAll(async () => {
  t = await trainedPolicy({ hidden: [64, 48], seed: 31 });
  evaluator = await PolicyEvaluator.create(t.snapshot, 'simd');
  const model = buildExportModel(t.input);
  server = new PolicyServer({ policy: evaluator, actionBound: model.actionBound, metadata: JSON.stringify(model.metadata), maxTiles: 256 });
  tcp = await server.listen(parseAddress('127.0.0.1:0'));
});

afterAll(async () => {
  await server.close();
  evaluator.dispose();
  t.agent.dispose();
});

describe('addresses', () => {
  it('parses ports, hosts, IPv6 and unix paths, and names what is wrong', () => {
    expect(parseAddress('5780')).toEqual({ kind: 'tcp', host: '127.0.0.1', port: 5780 });
    expect(parseAddress('0.0.0.0:80')).toEqual({ kind: 'tcp', host: '0.0.0.0', port: 80 });
    expect(parseAddress('[::1]:5780')).toEqual({ kind: 'tcp', host: '::1', port: 5780 });
    expect(formatAddress(parseAddress('[::1]:5780'))).toBe('[::1]:5780');
    expect(parseAddress('unix:/tmp/x.sock')).toEqual({ kind: 'unix', path: '/tmp/x.sock' });
    expect(() => parseAddress('localhost:http', '--listen')).toThrow(/--listen: port "http" is not a number \(got "localhost:http"/);
    expect(() => parseAddress('99999')).toThrow(/port 99999 is above 65535/);
    expect(() => parseAddress('::1:80')).toThrow(/IPv6 host needs brackets/);
    expect(() => parseAddress(`unix:/${'x'.repeat(120)}`)).toThrow(/longer than the 107 a Unix socket allows/);
  });
});

describe('policy server', () => {
  it('INFO gives the dimensions, limit, bound and metadata', async () => {
    const c = await PolicyClient.connect(tcp);
    const info = await c.info();
    expect(info).toMatchObject({ obsDim: 24, actDim: 1, maxTiles: 256, actionBound: 0.5 });
    expect(JSON.parse(info.metadata).env.obsLayout[0].count).toBe(24);
    c.close();
  });

  it('answers a batch of 64 tiles with exactly the agent actions, pipelined requests in order', async () => {
    const c = await PolicyClient.connect(tcp);
    const rng = Rng.derive(2, 'test/serve');
    const batches = Array.from({ length: 5 }, () => randomObservations(rng, 64, 24, 2));
    const replies = await Promise.all(batches.map((b) => c.act(b, 64, 24)));
    batches.forEach((b, k) => expect(replies[k]).toEqual(t.agent.act(b, 64, false)));
    c.close();
  });

  it('refuses bad requests with an error naming the problem and keeps the connection', async () => {
    const c = await PolicyClient.connect(tcp);
    const obs = randomObservations(new Rng(3), 2, 24);
    obs[30] = Number.NaN;
    await expect(c.act(obs, 2, 24)).rejects.toThrow(/NON_FINITE: observation 6 of tile 1 is NaN/);
    await expect(c.act(new Float32Array(23), 1, 23)).rejects.toThrow(/MISMATCH: ACT obsDim 23 differs from the policy's 24/);
    const head = Buffer.alloc(8);
    head.writeUInt32LE(257, 0);
    head.writeUInt32LE(24, 4);
    await expect(c.request(MSG.ACT, head)).rejects.toThrow(/TOO_MANY_TILES: ACT with 257 tiles, more than this server's limit of 256/);
    const e = await c.act(new Float32Array(23), 1, 23).catch((x: unknown) => x);
    expect(e).toBeInstanceOf(RemoteError);
    expect((e as RemoteError).code).toBe(ERR.MISMATCH);
    expect(await c.act(obs.fill(0.1), 2, 24)).toEqual(t.agent.act(obs, 2, false));
    // A whole 257-tile request is longer than the frame limit: answered, then the connection closes.
    await expect(c.act(new Float32Array(257 * 24), 257, 24)).rejects.toThrow(/FRAME_TOO_LARGE: payload length 24680 exceeds the limit of 24584 bytes; closing/);
    await expect(c.info()).rejects.toThrow(/FRAME_TOO_LARGE/);
    c.close();
  });

  it('serves on a Unix socket, replacing a stale socket file but not a live one', async () => {
    const path = join(dir, 'policy.sock');
    const model = buildExportModel(t.input);
    const make = (): PolicyServer => new PolicyServer({ policy: evaluator, actionBound: 0.5, metadata: JSON.stringify(model.metadata) });
    const a = make();
    await a.listen({ kind: 'unix', path });
    await expect(make().listen({ kind: 'unix', path })).rejects.toThrow(/another process is listening there/);
    const c = await PolicyClient.connect({ kind: 'unix', path });
    const obs = randomObservations(new Rng(4), 3, 24);
    expect(await c.act(obs, 3, 24)).toEqual(t.agent.act(obs, 3, false));
    c.close();
    await a.close();
    // A socket file left behind by a process that died (net.Server removes its own on close).
    const child = spawn(process.execPath, ['-e', "require('net').createServer().listen(process.argv[1], () => console.log('up'))", path]);
    const up = await new Promise((r) => {
      child.stdout.once('data', () => r(true));
      child.once('exit', () => r(false));
    });
    expect(up).toBe(true);
    child.kill('SIGKILL');
    await new Promise((r) => child.once('exit', r));
    expect(existsSync(path)).toBe(true);
    writeFileSync(join(dir, 'not-a-socket'), 'x');
    await expect(make().listen({ kind: 'unix', path: join(dir, 'not-a-socket') })).rejects.toThrow(/exists and is not a socket/);
    const b = make();
    await b.listen({ kind: 'unix', path });
    expect(existsSync(path)).toBe(true);
    await b.close();
  });

  it('serveCommand serves a JSON export until aborted', async () => {
    const out = join(dir, 'export');
    exportPolicy(t.input, { outDir: out, formats: ['json'] });
    const controller = new AbortController();
    const lines: string[] = [];
    let bound: Address | null = null;
    const done = serveCommand(join(out, 'tilewise_policy.json'), { listen: '127.0.0.1:0', signal: controller.signal, log: (l) => lines.push(l), onListening: (a) => (bound = a) });
    while (!bound) await new Promise((r) => setTimeout(r, 10));
    const c = await PolicyClient.connect(bound);
    const obs = randomObservations(new Rng(5), 64, 24);
    const got = await c.act(obs, 64, 24);
    const ref = t.agent.act(obs, 64, false);
    let d = 0;
    for (let i = 0; i < 64; i++) d = Math.max(d, Math.abs(got[i]! - ref[i]!));
    expect(d).toBeLessThanOrEqual(1e-5); // the default backend may be the FMA build
    c.close();
    controller.abort();
    await done;
    expect(lines[0]).toMatch(/^serving .*tilewise_policy.json on 127.0.0.1:\d+: 24 observations -> 1 actions per tile/);
    expect(lines.at(-1)).toMatch(/stopping: 1 requests, 64 tiles answered, 0 malformed requests refused/);
  });
});

describe.skipIf(skipWithout('gcc'))('C client example (examples/policy-client.c)', () => {
  const exe = join(dir, 'policy-client');
  beforeAll(() => compile('gcc', ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror', '-o', exe, join(root, 'examples', 'policy-client.c')]));

  /** Run the client with observations on stdin; resolves with its stdout lines. */
  function runClient(address: string, obs: Float32Array, obsDim: number, extra: string[] = []): Promise<{ code: number | null; out: string; err: string }> {
    return new Promise((resolve) => {
      const p = spawn(exe, [address, ...extra]);
      let out = '';
      let err = '';
      p.stdout.on('data', (d) => (out += d));
      p.stderr.on('data', (d) => (err += d));
      p.on('close', (code) => resolve({ code, out, err }));
      const lines: string[] = [];
      for (let r = 0; r < obs.length / obsDim; r++) lines.push(Array.from(obs.subarray(r * obsDim, (r + 1) * obsDim), (v) => v.toPrecision(9)).join(' '));
      p.stdin.end(`${lines.join('\n')}\n`);
    });
  }

  it('gets exactly the agent actions over TCP and over a Unix socket', async () => {
    const obs = randomObservations(Rng.derive(6, 'test/c-client'), 64, 24, 2);
    const ref = t.agent.act(obs, 64, false);
    const path = join(dir, 'c-client.sock');
    const model = buildExportModel(t.input);
    const unix = new PolicyServer({ policy: evaluator, actionBound: 0.5, metadata: JSON.stringify(model.metadata) });
    await unix.listen({ kind: 'unix', path });
    for (const address of [formatAddress(tcp), `unix:${path}`]) {
      const r = await runClient(address, obs, 24);
      expect(r.err).toMatch(/24 observations -> 1 actions per tile, bound 0.5, up to/);
      expect(r.code).toBe(0);
      const got = Float32Array.from(r.out.trim().split('\n').map(Number));
      expect(got).toEqual(ref);
    }
    await unix.close();
  });

  it('reports the server error and exits 1 when a tile is incomplete or non-finite', async () => {
    const bad = await runClient(formatAddress(tcp), new Float32Array([0, Number.NaN, ...new Array(22).fill(0)]), 24);
    expect(bad.code).toBe(1);
    expect(bad.err).toMatch(/the server answered error 6: observation 1 of tile 0 is NaN/);
    const short = await runClient(formatAddress(tcp), new Float32Array(23), 23);
    expect(short.code).toBe(1);
    expect(short.err).toMatch(/not a multiple of obsDim/);
  });

  it('times repeated round trips when asked (the benchmark mode)', async () => {
    const r = await runClient(formatAddress(tcp), randomObservations(new Rng(7), 64, 24), 24, ['20']);
    expect(r.code).toBe(0);
    expect(r.err).toMatch(/20 round trips of 64 tiles, [\d.]+ us each/);
  });
});
