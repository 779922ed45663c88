/**
 * `tilewise export` and `tilewise act` through the command line: a .policy file and a run
 * directory are exported, and `act` prints the agent's actions for observations given as JSON
 * lines or CSV, from the policy itself, its JSON export and its ONNX export (onnxruntime-node).
 */
import { mkdirSync, mkdtempSync, readdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Rng } from '@tilewise/envs';
import { EXIT_CONFIG, EXIT_OK, main, type Io } from '../src/cli';
import { formatActions, parseObservations } from '../src/commands/act';
import { loadRunConfig, resolvedConfig } from '../src/config';
import { configHash, loadPolicyJson } from '../src/export';
import { policyEnvSpec, savePolicy } from '../src/policy';
import { RUN_FILES } from '../src/trainer';
import { randomObservations, trainedPolicy, type TrainedPolicy } from './helpers/policy';

function capture(): Io & { lines: string[]; errors: string[] } {
  const lines: string[] = [];
  const errors: string[] = [];
  return { out: (l) => lines.push(l), err: (l) => errors.push(l), lines, errors };
}

const dir = mkdtempSync(join(tmpdir(), 'tilewise-act-'));
let t: TrainedPolicy;
let policyPath: string;
let obs: Float32Array;
let ref: Float32Array;
const N = 6;

beforeAll(async () => {
  t = await trainedPolicy({ hidden: [32, 16], seed: 51 });
  policyPath = join(dir, 'trained.policy');
  savePolicy(policyPath, {
    snapshot: t.snapshot,
    env: { kind: 'ks', config: t.input.env.config!, spec: policyEnvSpec(t.spec), reference: 1 },
    source: { label: 'best', step: 100 },
  });
  obs = randomObservations(Rng.derive(8, 'test/act'), N, 24, 2);
  ref = t.agent.act(obs, N, false).slice();
});

afterAll(() => t.agent.dispose());

const rows = (o: Float32Array, n: number): number[][] => Array.from({ length: n }, (_, r) => Array.from(o.subarray(r * 24, (r + 1) * 24)));

/** Parse printed JSON lines back to numbers. */
const printed = (lines: string[]): number[] => lines.flatMap((l) => (JSON.parse(l) as unknown[]).flat(2) as number[]);

describe('tilewise export', () => {
  it('writes every format from a .policy file, or the ones asked for', async () => {
    const io = capture();
    expect(await main(['export', policyPath, '--out', join(dir, 'all')], io)).toBe(EXIT_OK);
    expect(io.lines.map((l) => l.slice(join(dir, 'all').length + 1))).toEqual(['tilewise_policy.onnx', 'tilewise_policy.h', 'tilewise_policy.c', 'tilewise_policy.f90', 'tilewise_policy.json']);
    const io2 = capture();
    expect(await main(['export', policyPath, '--format', 'json,c', '--name', 'wall', '--out', join(dir, 'some')], io2)).toBe(EXIT_OK);
    expect(readdirSync(join(dir, 'some')).sort()).toEqual(['wall.c', 'wall.h', 'wall.json']);
  });

  it('exports a run directory into <run>/export, hashing the run config', async () => {
    const run = join(dir, 'run');
    mkdirSync(run);
    writeFileSync(join(run, RUN_FILES.config), 'env:\n  kind: ks\n  tiles: 4\n  actuators: 4\n');
    savePolicy(join(run, RUN_FILES.best), { snapshot: t.snapshot, env: { kind: 'ks', config: t.input.env.config!, spec: policyEnvSpec(t.spec), reference: 1 }, source: { label: 'best' } });
    const io = capture();
    expect(await main(['export', run, '--format', 'json'], io)).toBe(EXIT_OK);
    expect(io.lines).toEqual([join(run, 'export', 'tilewise_policy.json')]);
    const exported = loadPolicyJson(io.lines[0]!);
    expect(exported.metadata.configHash).toBe(configHash(resolvedConfig(loadRunConfig(join(run, RUN_FILES.config)))));
    expect(exported.snapshot.params).toEqual(t.snapshot.params);
    const missing = capture();
    expect(await main(['export', run, '--policy', 'latest'], missing)).toBe(EXIT_CONFIG);
    expect(missing.errors.join('\n')).toMatch(/the run has no latest policy yet/);
  });

  it('names a bad format, name or policy choice (exit 2)', async () => {
    for (const [args, message] of [
      [['--format', 'onnx,pdf'], /--format: expected a comma-separated list of onnx, c, fortran, json or "all" \(got "onnx,pdf"\)/],
      [['--name', 'my-policy'], /--name: .*got "my-policy"/],
      [['--policy', 'newest'], /--policy: expected best or latest \(got "newest"\)/],
    ] as const) {
      const io = capture();
      expect(await main(['export', policyPath, '--out', join(dir, 'bad'), ...args], io)).toBe(EXIT_CONFIG);
      expect(io.errors.join('\n')).toMatch(message);
    }
  });
});

describe('tilewise act', () => {
  beforeAll(async () => {
    await main(['export', policyPath, '--format', 'json,onnx', '--out', join(dir, 'exp')], capture());
  });

  it('prints the agent actions for JSON lines, one tile or several per line', async () => {
    const input = join(dir, 'obs.jsonl');
    const r = rows(obs, N);
    writeFileSync(input, `# a comment\n${JSON.stringify(r[0])}\n\n${JSON.stringify(r.slice(1))}\n`);
    for (const source of [policyPath, join(dir, 'exp', 'tilewise_policy.json'), join(dir, 'exp', 'tilewise_policy.onnx')]) {
      const io = capture();
      expect(await main(['act', source, '--input', input, '--backend', 'simd'], io)).toBe(EXIT_OK);
      expect(io.lines).toHaveLength(2);
      expect(JSON.parse(io.lines[1]!)).toHaveLength(N - 1);
      const got = printed(io.lines);
      expect(got).toHaveLength(N);
      // Printed as float32 text: the same float32 as the agent's on its backend; ONNX within 1e-5.
      got.forEach((v, i) => expect(Math.abs(Math.fround(v) - ref[i]!)).toBeLessThanOrEqual(source.endsWith('.onnx') ? 1e-5 : 0));
    }
  });

  it('reads CSV with a header and prints CSV', async () => {
    const input = join(dir, 'obs.csv');
    writeFileSync(input, `${Array.from({ length: 24 }, (_, j) => `u${j}`).join(',')}\n${rows(obs, N).map((r) => r.join(',')).join('\n')}\n`);
    const io = capture();
    expect(await main(['act', policyPath, '--input', input, '--backend', 'simd'], io)).toBe(EXIT_OK);
    expect(io.lines[0]).toBe('a0');
    expect(Float32Array.from(io.lines.slice(1).map(Number))).toEqual(ref);
  });

  it('names the line and column of bad input (exit 2)', async () => {
    const cases: Array<[string, string, RegExp]> = [
      ['short.jsonl', '[1, 2, 3]\n', /short.jsonl line 1: expected 24 observations, got 3/],
      ['text.jsonl', `${JSON.stringify(rows(obs, 1)[0])}\n[${'"x",'.repeat(23)}"x"]\n`, /text.jsonl line 2, observation 0: expected a finite number, got "x"/],
      ['broken.jsonl', '[1, 2\n', /broken.jsonl line 1: not valid JSON/],
      ['nested.jsonl', `[${JSON.stringify(rows(obs, 1)[0])}, [1]]\n`, /nested.jsonl line 1, tile 1: expected 24 observations, got 1/],
      ['cell.csv', `${rows(obs, 1)[0]!.join(',')}\n${rows(obs, 1)[0]!.slice(0, 23).join(',')},abc\n`, /cell.csv line 2, column 24: expected a finite number, got "abc"/],
      ['empty.jsonl', '\n# nothing\n', /empty.jsonl: no observations/],
    ];
    for (const [name, text, message] of cases) {
      writeFileSync(join(dir, name), text);
      const io = capture();
      expect(await main(['act', policyPath, '--input', join(dir, name)], io)).toBe(EXIT_CONFIG);
      expect(io.errors.join('\n')).toMatch(message);
    }
  });

  it('names a bad backend (exit 2)', async () => {
    const io = capture();
    expect(await main(['act', policyPath, '--backend', 'gpu'], io)).toBe(EXIT_CONFIG);
    expect(io.errors.join('\n')).toMatch(/--backend: expected one of auto, .* \(got "gpu"\)/);
  });

  it('parses and formats without a file (standard input path of the command)', () => {
    const input = parseObservations(`${JSON.stringify(rows(obs, 2))}\n`, 'jsonl', 24, 'standard input');
    expect(input.tiles).toBe(2);
    expect(formatActions(Float32Array.from([0.25, -0.5]), 1, input, 'jsonl')).toEqual(['[[0.25],[-0.5]]']);
  });
});
