/**
 * Export parity: every export path against tilewise's own in-process actions (Agent.act with the
 * deterministic policy) and against an outside implementation: onnxruntime-node for ONNX, gcc-
 * and gfortran-compiled code for C and Fortran. Tolerance 1e-5 (max abs difference over 1,000
 * random observations, spread so that the normaliser's clip is hit). The action spread is
 * checked too, so a saturated or silent policy cannot pass.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { execFileSync } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import * as ort from 'onnxruntime-node';
import onnxProto from 'onnx-proto';
import { Rng } from '@tilewise/envs';
import { buildExportModel, configHash, exportPolicy, loadPolicyJson, onnxMetadataProps, PolicyEvaluator, type ExportInput } from '../src/export';
import { float32Text } from '../src/export/model';
import { compile, skipWithout } from './helpers/compilers';
import { randomObservations, trainedPolicy, type TrainedPolicy } from './helpers/policy';

const TOL = 1e-5;
const N = 1000;
const fixtures = join(__dirname, 'fixtures');

function maxAbsDiff(a: ArrayLike<number>, b: ArrayLike<number>): number {
  expect(a.length).toBe(b.length);
  let d = 0;
  for (let i = 0; i < a.length; i++) d = Math.max(d, Math.abs(a[i]! - b[i]!));
  return d;
}

/** The reference actions must spread over the bound (not all saturated, not all ~0). */
function expectSpread(actions: Float32Array, bound: number): void {
  let sat = 0;
  let sum = 0;
  let sq = 0;
  for (const v of actions) {
    if (Math.abs(v) > 0.99 * bound) sat++;
    sum += v;
    sq += v * v;
  }
  const n = actions.length;
  const std = Math.sqrt(sq / n - (sum / n) ** 2);
  expect(sat / n).toBeLessThan(0.5);
  expect(std).toBeGreaterThan(0.1 * bound);
}

interface Case {
  readonly label: string;
  policy: TrainedPolicy;
  dir: string;
  obs: Float32Array;
  /** Agent.act(obs, N, false). */
  ref: Float32Array;
}

async function makeCase(label: string, o: Parameters<typeof trainedPolicy>[0]): Promise<Case> {
  const policy = await trainedPolicy(o);
  const dir = mkdtempSync(join(tmpdir(), `tilewise-export-${label}-`));
  exportPolicy(policy.input, { outDir: dir, formats: ['onnx', 'c', 'fortran', 'json'] });
  const obs = randomObservations(Rng.derive(5, `test/export-obs/${label}`), N, policy.spec.obsDim, 2.5);
  const ref = policy.agent.act(obs, N, false).slice();
  writeFileSync(join(dir, 'obs.f64'), new Float64Array(obs));
  return { label, policy, dir, obs, ref };
}

function readF64(path: string): Float64Array {
  const b = readFileSync(path);
  return new Float64Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.byteLength));
}

const cases: Case[] = [];

beforeAll(async () => {
  // relu hidden layers with a normaliser (the td3 default shape, narrower), and tanh hidden
  // layers without one (the other activation and the path without normalisation).
  cases.push(await makeCase('relu-norm', { hidden: [64, 48], activation: 'relu', normalizer: true, seed: 3 }));
  cases.push(await makeCase('tanh-raw', { hidden: [40], activation: 'tanh', normalizer: false, seed: 4 }));
});

afterAll(() => {
  for (const c of cases) c.policy.agent.dispose();
});

describe('in-process reference', () => {
  it('the reference actions spread over the bound', () => {
    for (const c of cases) expectSpread(c.ref, c.policy.spec.actionBound);
  });

  it('PolicyEvaluator on the agent backend equals Agent.act bit for bit', async () => {
    for (const c of cases) {
      const ev = await PolicyEvaluator.create(c.policy.snapshot, 'simd');
      expect(ev.act(c.obs, N)).toEqual(c.ref);
      ev.dispose();
    }
  });
});

describe('ONNX export', () => {
  it('onnxruntime-node gives the agent actions within 1e-5 over 1,000 observations', async () => {
    for (const c of cases) {
      const session = await ort.InferenceSession.create(join(c.dir, 'tilewise_policy.onnx'));
      expect(session.inputNames).toEqual(['obs']);
      expect(session.outputNames).toEqual(['actions']);
      const out = await session.run({ obs: new ort.Tensor('float32', c.obs, [N, c.policy.spec.obsDim]) });
      const actions = out.actions!;
      expect(actions.dims).toEqual([N, c.policy.spec.actDim]);
      expect(maxAbsDiff(actions.data as Float32Array, c.ref)).toBeLessThanOrEqual(TOL);
      // Any batch size: the tiles dimension is symbolic.
      const one = await session.run({ obs: new ort.Tensor('float32', c.obs.slice(0, c.policy.spec.obsDim), [1, c.policy.spec.obsDim]) });
      expect(Math.abs((one.actions!.data as Float32Array)[0]! - c.ref[0]!)).toBeLessThanOrEqual(TOL);
      await session.release();
    }
  });

  it('declares opset >= 13 and carries the layout, bound, tile grid and config hash in metadata_props', () => {
    const c = cases[0]!;
    const bytes = readFileSync(join(c.dir, 'tilewise_policy.onnx'));
    const model = onnxProto.onnx.ModelProto.decode(bytes);
    const opset = model.opsetImport.find((o) => (o.domain ?? '') === '');
    expect(Number(opset?.version)).toBeGreaterThanOrEqual(13);
    const props = onnxMetadataProps(bytes);
    const spec = c.policy.spec;
    expect(JSON.parse(props['tilewise.obs_layout']!)).toEqual(JSON.parse(JSON.stringify(spec.obsLayout)));
    expect(Number(props['tilewise.action_bound'])).toBe(spec.actionBound);
    expect(JSON.parse(props['tilewise.tile_grid']!)).toEqual([...spec.tileGrid]);
    expect(props['tilewise.config_hash']).toBe(configHash(c.policy.input.trainingConfig));
    expect(props['tilewise.normalizer']).toBe('baked');
    const md = JSON.parse(props['tilewise.metadata']!);
    expect(md.env.tiles).toBe(spec.tiles);
    expect(md.actor.sizes).toEqual([spec.obsDim, 64, 48, spec.actDim]);
    expect(md.normalizer).toEqual({ clip: 5 });
  });
});

describe.skipIf(skipWithout('gcc'))('C export', () => {
  it('compiles with gcc -O2 -Wall -Wextra -Werror and gives the agent actions within 1e-5', () => {
    for (const c of cases) {
      const exe = join(c.dir, 'c-parity');
      compile('gcc', ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror', '-I', c.dir, join(fixtures, 'export-parity.c'), join(c.dir, 'tilewise_policy.c'), '-o', exe, '-lm']);
      execFileSync(exe, [join(c.dir, 'obs.f64'), join(c.dir, 'c.f64')]);
      const actions = readF64(join(c.dir, 'c.f64'));
      expect(actions.length).toBe(N * c.policy.spec.actDim);
      expect(maxAbsDiff(actions, c.ref)).toBeLessThanOrEqual(TOL);
    }
  });

  it('uses only libm: the object file references no other library symbol', () => {
    const c = cases[0]!;
    const obj = join(c.dir, 'policy.o');
    compile('gcc', ['-std=c99', '-O2', '-c', '-I', c.dir, join(c.dir, 'tilewise_policy.c'), '-o', obj]);
    const undefinedSymbols = execFileSync('nm', ['-u', obj]).toString().split('\n').map((l) => l.trim().split(/\s+/).pop()).filter(Boolean);
    expect(undefinedSymbols.filter((s) => s !== 'tanh')).toEqual([]);
  });
});

describe.skipIf(skipWithout('gfortran'))('Fortran export', () => {
  it('compiles with gfortran -std=f2008 -Wall -Werror and gives the agent actions within 1e-5', () => {
    for (const c of cases) {
      const exe = join(c.dir, 'f-parity');
      compile('gfortran', ['-std=f2008', '-O2', '-Wall', '-Werror', '-J', c.dir, join(c.dir, 'tilewise_policy.f90'), join(fixtures, 'export-parity.f90'), '-o', exe]);
      execFileSync(exe, [join(c.dir, 'obs.f64'), join(c.dir, 'f.f64')]);
      const actions = readF64(join(c.dir, 'f.f64'));
      expect(actions.length).toBe(N * c.policy.spec.actDim);
      expect(maxAbsDiff(actions, c.ref)).toBeLessThanOrEqual(TOL);
    }
  });

  it('declares the subroutine pure', () => {
    const text = readFileSync(join(cases[0]!.dir, 'tilewise_policy.f90'), 'utf8');
    expect(text).toMatch(/^ {2}pure subroutine tilewise_policy_act\(n, obs, actions\)$/m);
    expect(Math.max(...text.split('\n').map((l) => l.length))).toBeLessThanOrEqual(132);
  });
});

describe('JSON export', () => {
  it('loads back to the same weights, normaliser and bound, and acts like the agent', async () => {
    for (const c of cases) {
      const p = loadPolicyJson(join(c.dir, 'tilewise_policy.json'));
      const s = c.policy.snapshot;
      expect(p.snapshot.params).toEqual(s.params);
      expect(p.snapshot.spec).toEqual({ sizes: [...s.spec.sizes], hidden: s.spec.hidden, output: s.spec.output });
      expect(p.snapshot.actionBound).toBe(s.actionBound);
      expect(p.snapshot.normalizer).toEqual(s.normalizer);
      expect(p.metadata.env.obsLayout).toEqual(JSON.parse(JSON.stringify(c.policy.spec.obsLayout)));
      const ev = await PolicyEvaluator.create(p.snapshot, 'simd');
      expect(ev.act(c.obs, N)).toEqual(c.ref);
      ev.dispose();
    }
  });
});

describe.skipIf(skipWithout('gcc') || skipWithout('gfortran'))('extreme weights', () => {
  it('subnormal, tiny and huge float32 values survive every format exactly enough (C and Fortran compiled with -Werror)', async () => {
    const c = cases[0]!;
    const params = c.policy.snapshot.params.slice();
    const subnormals = [1e-45, -1.4e-45, 2.8e-45, 9.99e-39, -5.877472e-39, 1.1754942e-38, -2.5e-30, 3.3e-7];
    subnormals.forEach((v, k) => (params[k] = v)); // W0[0, 0..7]
    const b0 = 24 * 64; // b0 follows W0 [24, 64]
    params[b0] = -3.0e38; // a hidden unit that never fires
    params[b0 + 1] = 1e-40;
    const snapshot = { ...c.policy.snapshot, params };
    const input = { ...c.policy.input, snapshot };
    const dir = mkdtempSync(join(tmpdir(), 'tilewise-export-extreme-'));
    exportPolicy(input, { outDir: dir, formats: ['onnx', 'c', 'fortran', 'json'] });
    const ev = await PolicyEvaluator.create(snapshot, 'simd');
    const ref = ev.act(c.obs, N).slice();
    ev.dispose();
    expectSpread(ref, c.policy.spec.actionBound);
    expect(loadPolicyJson(join(dir, 'tilewise_policy.json')).snapshot.params).toEqual(params);
    writeFileSync(join(dir, 'obs.f64'), new Float64Array(c.obs));
    compile('gcc', ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror', '-I', dir, join(fixtures, 'export-parity.c'), join(dir, 'tilewise_policy.c'), '-o', join(dir, 'c'), '-lm']);
    compile('gfortran', ['-std=f2008', '-O2', '-Wall', '-Werror', '-J', dir, join(dir, 'tilewise_policy.f90'), join(fixtures, 'export-parity.f90'), '-o', join(dir, 'f')]);
    execFileSync(join(dir, 'c'), [join(dir, 'obs.f64'), join(dir, 'c.f64')]);
    execFileSync(join(dir, 'f'), [join(dir, 'obs.f64'), join(dir, 'f.f64')]);
    expect(maxAbsDiff(readF64(join(dir, 'c.f64')), ref)).toBeLessThanOrEqual(TOL);
    expect(maxAbsDiff(readF64(join(dir, 'f.f64')), ref)).toBeLessThanOrEqual(TOL);
    const session = await ort.InferenceSession.create(join(dir, 'tilewise_policy.onnx'));
    const out = await session.run({ obs: new ort.Tensor('float32', c.obs, [N, 24]) });
    expect(maxAbsDiff(out.actions!.data as Float32Array, ref)).toBeLessThanOrEqual(TOL);
    await session.release();
  });
});

describe('export input checks', () => {
  const base = (): ExportInput => cases[0]!.policy.input;

  it('rejects a non-finite weight, naming its index', () => {
    const params = base().snapshot.params.slice();
    params[17] = Number.NaN;
    expect(() => buildExportModel({ ...base(), snapshot: { ...base().snapshot, params } })).toThrow(/actor parameters: element 17 is NaN/);
  });

  it('rejects a spec that does not match the actor', () => {
    const spec = { ...base().env.spec, obsDim: 23 };
    expect(() => buildExportModel({ ...base(), env: { ...base().env, spec } })).toThrow(/env.spec.obsDim 23 differs from the actor's input width 24/);
    const bound = { ...base().env.spec, actionBound: 1 };
    expect(() => buildExportModel({ ...base(), env: { ...base().env, spec: bound } })).toThrow(/env.spec.actionBound 1 differs from the policy's 0.5/);
  });

  it('rejects a name that is not a C and Fortran identifier, and an unknown format', () => {
    expect(() => exportPolicy(base(), { outDir: cases[0]!.dir, formats: ['c'], name: '9lives' })).toThrow(/export name: .* got "9lives"/);
    expect(() => exportPolicy(base(), { outDir: cases[0]!.dir, formats: ['tflite' as never] })).toThrow(/unknown format "tflite"/);
  });

  it('a custom name prefixes every generated symbol', () => {
    const dir = mkdtempSync(join(tmpdir(), 'tilewise-export-name-'));
    exportPolicy(base(), { outDir: dir, formats: ['c', 'fortran'], name: 'wall_policy' });
    expect(readFileSync(join(dir, 'wall_policy.h'), 'utf8')).toMatch(/void wall_policy_act\(size_t count, const double \*obs, double \*actions\);/);
    expect(readFileSync(join(dir, 'wall_policy.f90'), 'utf8')).toMatch(/^module wall_policy$/m);
  });

  it('float32Text reads back to the same float32 with at most 9 significant digits', () => {
    const rng = new Rng(8);
    for (let k = 0; k < 2000; k++) {
      const v = Math.fround((rng.uniform() - 0.5) * 10 ** (rng.int(12) - 6));
      const t = float32Text(v);
      expect(Math.fround(Number(t))).toBe(v);
      expect(t.replace(/^-/, '').replace(/e.*$/, '').replace('.', '').replace(/^0+/, '').length).toBeLessThanOrEqual(9);
    }
    for (const v of [0, 1, -2, 1e-45, -2.8e-45, 9.99e-39, 1.1754942e-38, 3.4028234663852886e38]) expect(Math.fround(Number(float32Text(v)))).toBe(Math.fround(v));
  });

  it('the config hash ignores key order and changes with any value', () => {
    expect(configHash({ a: 1, b: { c: [1, 2], d: 'x' } })).toBe(configHash({ b: { d: 'x', c: [1, 2] }, a: 1 }));
    expect(configHash({ a: 1, b: { c: [1, 2], d: 'x' } })).not.toBe(configHash({ a: 1, b: { c: [2, 1], d: 'x' } }));
    expect(configHash(null)).toMatch(/^sha256:[0-9a-f]{64}$/);
  });
});
