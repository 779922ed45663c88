/**
 * The external-solver environment end to end: the KS surrogate in a child process
 * (examples/ks-solver.ts) connects over the wire protocol and acts as the environment. Every
 * transition of a few hundred steps (observations, rewards, drag, power, done/truncated/
 * diverged flags, the opposition signal, field snapshots, resets of single copies) must equal
 * the same surrogate run in-process bit for bit: the link moves float32 and float64 values
 * unchanged and the surrogate is deterministic. An agent trained through the link ends with the
 * same weights as one trained in-process.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { createAgent } from '@tilewise/agent';
import { createEnv, KsEnv, parseKsConfig, Rng, type TiledEnv } from '@tilewise/envs';
import { ExternalEnv, parseExternalConfig, registerExternalEnv } from '../src/external/env';

const root = join(__dirname, '..', '..', '..');
const dir = mkdtempSync(join(tmpdir(), 'tilewise-external-'));
const P0 = 1.25;
/** A short KS setup (short spin-up, 60-decision episodes so single-copy resets happen). */
const KS = { kind: 'ks', length: 22, points: 64, tiles: 4, actuators: 4, actionBound: 0.5, sensorsPerTile: 8, haloTiles: 1, spinUpTime: 10, episodeLength: 60 };
const spec = new KsEnv(parseKsConfig(KS), { copies: 1, p0: P0 }).spec;
const EXTERNAL = {
  kind: 'external',
  tileGrid: [4, 1],
  obsDim: spec.obsDim,
  actDim: spec.actDim,
  actionBound: 0.5,
  controlInterval: spec.controlInterval,
  episodeLength: 60,
  obsLayout: spec.obsLayout.map((e) => ({ quantity: e.quantity, count: e.count, positions: e.positions.map((p) => [...p]) })),
  dragName: 'P/P0',
  connectTimeout: 60,
  replyTimeout: 60,
};

const children: ChildProcess[] = [];
const envs: ExternalEnv[] = [];
afterEach(() => {
  for (const e of envs.splice(0)) e.close();
  for (const c of children.splice(0)) if (c.exitCode === null) c.kill();
});

/** Start examples/ks-solver.ts connecting to `address`; collects its stderr. */
function startSolver(address: string, ks: object = KS): { child: ChildProcess; stderr: () => string; exited: Promise<number | null> } {
  const child = spawn(process.execPath, ['--import', 'tsx', join(root, 'examples', 'ks-solver.ts'), address, '--config', JSON.stringify(ks), '--p0', String(P0)], { cwd: root });
  children.push(child);
  let err = '';
  child.stderr!.on('data', (d) => (err += d));
  const exited = new Promise<number | null>((r) => child.once('exit', (code) => r(code)));
  return { child, stderr: () => err, exited };
}

function external(listen: string, copies: number, extra: object = {}): ExternalEnv {
  registerExternalEnv();
  const env = createEnv({ ...EXTERNAL, listen, ...extra }, { copies }) as ExternalEnv;
  envs.push(env);
  return env;
}

function expectSameStep(a: ReturnType<TiledEnv['step']>, b: ReturnType<TiledEnv['step']>): void {
  expect(a.obs).toEqual(b.obs);
  expect(a.reward).toEqual(b.reward);
  expect(a.drag).toEqual(b.drag);
  expect(a.actuationPower).toEqual(b.actuationPower);
  expect(a.done).toEqual(b.done);
  expect(a.truncated).toEqual(b.truncated);
  expect(a.diverged).toEqual(b.diverged);
}

describe('external env (KS surrogate in a child process)', () => {
  it('gives exactly the in-process transitions for 300 steps, with resets, opposition signals and snapshots', async () => {
    const path = join(dir, 'ks.sock');
    const solver = startSolver(`unix:${path}`);
    const B = 2;
    const remote = external(`unix:${path}`, B);
    const local = createEnv(KS, { copies: B, reference: P0 });
    expect(remote.spec).toEqual({ ...local.spec, kind: 'external' });
    const rng = Rng.derive(9, 'test/external');
    expect(remote.reset([101, 202])).toEqual(local.reset([101, 202]));
    expect(remote.solver).toMatch(/^solver "ks-solver pid \d+"$/);
    const actions = new Float32Array(B * spec.tiles * spec.actDim);
    let resets = 0;
    for (let step = 1; step <= 300; step++) {
      rng.fillUniform(actions, -0.6, 0.6); // beyond the bound: both clip
      const r = remote.step(actions);
      const l = local.step(actions);
      expectSameStep(r, l);
      for (let b = 0; b < B; b++) {
        if (l.done[b]) {
          const seed = 1000 + step * B + b;
          remote.resetCopy(b, seed);
          local.resetCopy(b, seed);
          resets++;
          expect(remote.observe()).toEqual(local.observe());
        }
      }
      if (step % 50 === 0) {
        expect(remote.oppositionSignal()).toEqual(local.oppositionSignal());
        expect(remote.snapshot(1)).toEqual(local.snapshot(1));
      }
    }
    expect(resets).toBeGreaterThanOrEqual(8); // 300 steps of 60-decision episodes, 2 copies
    remote.close();
    expect(await solver.exited).toBe(0);
    expect(solver.stderr()).toMatch(/running 2 copies of 4 tiles[\s\S]*ks-solver: 300 steps answered/);
  });

  it('an agent trained through the link ends with the weights of one trained in-process', async () => {
    const path = join(dir, 'agent.sock');
    startSolver(`unix:${path}`);
    const B = 2;
    const cfg = { algo: 'td3', backend: 'simd', actor: { hidden: [32] }, critic: { hidden: [32] }, warmup: 64, batchSize: 32, replayCapacity: 4096 };
    const run = async (env: TiledEnv): Promise<Float32Array> => {
      const agent = await createAgent({ obsDim: spec.obsDim, actDim: spec.actDim, actionBound: spec.actionBound, seed: 5, config: cfg });
      let obs = env.reset([7, 8]).slice();
      const n = B * spec.tiles;
      for (let step = 0; step < 120; step++) {
        const a = agent.act(obs, n, true).slice();
        const s = env.step(a);
        agent.store(obs, a, s.reward, s.obs, new Float32Array(n));
        obs = s.obs.slice();
        for (let b = 0; b < B; b++) {
          if (s.done[b]) {
            env.resetCopy(b, 50 + step + b);
            obs.set(env.observe().subarray(b * spec.tiles * spec.obsDim, (b + 1) * spec.tiles * spec.obsDim), b * spec.tiles * spec.obsDim);
          }
        }
        if (agent.ready) agent.update();
      }
      const p = agent.policy().params;
      agent.dispose();
      return p;
    };
    const viaLink = await run(external(`unix:${path}`, B));
    const inProcess = await run(createEnv(KS, { copies: B, reference: P0 }));
    expect(viaLink).toEqual(inProcess);
  });

  it('works over TCP on 127.0.0.1', async () => {
    // A free port: bind port 0, read it, release it (the env binds it again at the first reset).
    const { createServer } = await import('node:net');
    const probe = createServer();
    const port = await new Promise<number>((r) => probe.listen(0, '127.0.0.1', () => r((probe.address() as { port: number }).port)));
    await new Promise((r) => probe.close(r));
    startSolver(`127.0.0.1:${port}`);
    const remote = external(`127.0.0.1:${port}`, 1);
    const local = createEnv(KS, { copies: 1, reference: P0 });
    expect(remote.reset([3])).toEqual(local.reset([3]));
    const a = new Float32Array(spec.tiles).fill(0.2);
    expectSameStep(remote.step(a), local.step(a));
  });

  it('refuses a solver whose environment differs from the config, naming the field', async () => {
    const path = join(dir, 'mismatch.sock');
    const solver = startSolver(`unix:${path}`, { ...KS, sensorsPerTile: 4 });
    const remote = external(`unix:${path}`, 1);
    expect(() => remote.reset([1])).toThrow(/env.obsDim: the solver "ks-solver pid \d+" says 12, the config says 24/);
    expect(await solver.exited).not.toBe(0);
    expect(solver.stderr()).toMatch(/tilewise refused the handshake \(MISMATCH\): env.obsDim/);
  });

  it('says when no solver connects in time, and when the solver goes away', async () => {
    const lonely = external(`unix:${join(dir, 'nobody.sock')}`, 1, { connectTimeout: 1 });
    expect(() => lonely.reset([1])).toThrow(/external env unix:.*nobody.sock: no solver connected within 1 s \(env.connectTimeout\)/);
    const path = join(dir, 'gone.sock');
    const solver = startSolver(`unix:${path}`);
    const remote = external(`unix:${path}`, 1);
    remote.reset([1]);
    solver.child.kill('SIGKILL');
    await solver.exited;
    expect(() => remote.step(new Float32Array(spec.tiles))).toThrow(/the solver "ks-solver pid \d+" closed the connection/);
  });

  it('validates its config, naming the field', () => {
    expect(() => parseExternalConfig({ ...EXTERNAL, listen: 'nowhere:x' })).toThrow(/env.listen: .*port "x" is not a number/);
    expect(() => parseExternalConfig({ ...EXTERNAL, obsDim: 12 })).toThrow(/env.obsLayout: counts sum to 24, obsDim is 12/);
    expect(() => parseExternalConfig({ ...EXTERNAL, tileGrid: [4] })).toThrow(/env.tileGrid/);
    expect(() => parseExternalConfig({ ...EXTERNAL, colour: 'red' })).toThrow(/unknown key env.colour/);
    // The spec without a solver (the runner's probes): nothing listens.
    const probe = new ExternalEnv(parseExternalConfig({ ...EXTERNAL, listen: 'unix:/nonexistent/dir/x.sock' }), { copies: 3 });
    expect(probe.spec.copies).toBe(3);
    expect(probe.spec.tiles).toBe(4);
  });
});
