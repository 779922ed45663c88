/**
 * The sweep file (src/sweep/spec.ts): expansion of lists, grids and seeded draws into settings,
 * seeds, setting keys (what a finished run is recognised by), and clear errors for bad sweep
 * files, each naming the sweep-file path and the value.
 */
import { mkdtempSync, readdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ConfigError, Rng } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { drawValue, expandDotted, labelOf, loadSweep, parseSweep } from '../src/sweep/spec';

const base = { env: { kind: 'ks' }, train: { stop: { steps: 100, seconds: null } } };

function errorOf(raw: unknown, file?: string): string {
  try {
    parseSweep(raw, { file });
  } catch (e) {
    expect(e).toBeInstanceOf(ConfigError);
    return (e as Error).message;
  }
  throw new Error('expected a ConfigError');
}

describe('sweep file: expansion', () => {
  it('the base alone over the default seeds [1, 2, 3] when nothing varies', () => {
    const s = parseSweep({ name: 'only-base', base });
    expect(s.settings.map((x) => x.label)).toEqual(['base']);
    expect(s.seeds).toEqual([1, 2, 3]);
    expect(s.tasks.map((t) => t.seed)).toEqual([1, 2, 3]);
    expect(s.tasks.map((t) => (t.config.train as { seed: number }).seed)).toEqual([1, 2, 3]);
    expect(s.tasks.every((t) => (t.config.train as { name: string }).name === 'only-base')).toBe(true);
    expect(s.tasks.every((t) => (t.config.train as { finalEvaluation: boolean }).finalEvaluation === false)).toBe(true);
    expect(s.tasks[0]!.runPath).toBe(`base-${s.settings[0]!.key}/seed1`);
    expect(s.tasks[0]!.id).toBe(`${s.settings[0]!.key}-seed1`);
  });

  it('list, grid (last key fastest) and with: in file order; common applies to every run', () => {
    const s = parseSweep({
      name: 'x',
      base,
      common: { 'train.copies': 2 },
      vary: [
        { list: [{ 'agent.algo': 'ddpg' }, { 'agent.gamma': 0.9 }] },
        { grid: { 'agent.actorLr': [1e-4, 3e-4], 'train.updatesPerStep': [1, 2, 3] }, with: { 'agent.tau': 0.01 } },
      ],
      seeds: { first: 4, count: 2 },
    });
    expect(s.settings.map((x) => x.label)).toEqual([
      'agent.algo=ddpg',
      'agent.gamma=0.9',
      'agent.tau=0.01 agent.actorLr=0.0001 train.updatesPerStep=1',
      'agent.tau=0.01 agent.actorLr=0.0001 train.updatesPerStep=2',
      'agent.tau=0.01 agent.actorLr=0.0001 train.updatesPerStep=3',
      'agent.tau=0.01 agent.actorLr=0.0003 train.updatesPerStep=1',
      'agent.tau=0.01 agent.actorLr=0.0003 train.updatesPerStep=2',
      'agent.tau=0.01 agent.actorLr=0.0003 train.updatesPerStep=3',
    ]);
    expect(s.seeds).toEqual([4, 5]);
    expect(s.tasks).toHaveLength(16);
    for (const st of s.settings) expect((st.config.train as { copies: number }).copies).toBe(2);
    const g = s.settings[6]!.config as { agent: Record<string, unknown>; train: Record<string, unknown> };
    expect(g.agent.actorLr).toBe(3e-4);
    expect(g.agent.tau).toBe(0.01);
    expect(g.train.updatesPerStep).toBe(2);
    expect(s.settings[0]!.config.agent).toMatchObject({ algo: 'ddpg', critics: 1 }); // the preset resolved
    expect(s.varied).toEqual(['agent.algo', 'agent.gamma', 'agent.tau', 'agent.actorLr', 'train.updatesPerStep']);
  });

  it('a mapping value is merged into the base; other values replace it', () => {
    expect(expandDotted({ 'env.reward.beta': 0.1, 'agent.actor': { hidden: [8] } })).toEqual({ env: { reward: { beta: 0.1 } }, agent: { actor: { hidden: [8] } } });
    const s = parseSweep({ name: 'm', base: { ...base, env: { kind: 'ks', reward: { actuationPenalty: 0.5 } } }, vary: [{ list: [{ 'env.reward': { beta: 0.2 } }] }] });
    expect((s.settings[0]!.config.env as { reward: Record<string, number> }).reward).toMatchObject({ beta: 0.2, actuationPenalty: 0.5 });
  });

  it('seeded draws: the same seed gives the same settings, more draws keep the earlier ones, values stay in range', () => {
    const sweep = (count: number, seed = 7) =>
      parseSweep({
        name: 'd',
        base,
        vary: [
          {
            draw: {
              count,
              seed,
              ranges: {
                'agent.actorLr': { min: 1e-5, max: 1e-3, scale: 'log' },
                'agent.gamma': { min: 0.9, max: 0.99 },
                'agent.batchSize': { min: 16, max: 64, integer: true },
                'agent.algo': { choices: ['td3', 'ddpg'] },
              },
            },
          },
        ],
      });
    const a = sweep(6);
    expect(sweep(6).settings.map((x) => x.values)).toEqual(a.settings.map((x) => x.values));
    expect(sweep(9).settings.slice(0, 6).map((x) => x.values)).toEqual(a.settings.map((x) => x.values));
    expect(sweep(6, 8).settings.map((x) => x.values)).not.toEqual(a.settings.map((x) => x.values));
    for (const st of a.settings) {
      const v = st.values as { 'agent.actorLr': number; 'agent.gamma': number; 'agent.batchSize': number; 'agent.algo': string };
      expect(v['agent.actorLr']).toBeGreaterThanOrEqual(1e-5);
      expect(v['agent.actorLr']).toBeLessThanOrEqual(1e-3);
      expect(Number(v['agent.actorLr'].toPrecision(3))).toBe(v['agent.actorLr']); // 3 significant digits (default)
      expect(v['agent.gamma']).toBeGreaterThanOrEqual(0.9);
      expect(v['agent.gamma']).toBeLessThan(0.99 + 1e-12);
      expect(Number.isInteger(v['agent.batchSize'])).toBe(true);
      expect(['td3', 'ddpg']).toContain(v['agent.algo']);
    }
  });

  it('drawValue: log-uniform draws have the mean of the log-uniform law; integers cover both ends', () => {
    const rng = new Rng(3);
    const n = 20000;
    let sumLog = 0;
    for (let i = 0; i < n; i++) sumLog += Math.log10(drawValue(rng, { min: 1e-4, max: 1e-2, scale: 'log', integer: false }, null) as number);
    // log10 of a log-uniform draw on [1e-4, 1e-2] is uniform on [-4, -2]: mean -3, sd 2/sqrt(12) = 0.577.
    expect(Math.abs(sumLog / n + 3)).toBeLessThan(5 * (0.577 / Math.sqrt(n)));
    const seen = new Set<number>();
    for (let i = 0; i < 500; i++) seen.add(drawValue(rng, { min: 1, max: 4, scale: 'linear', integer: true }, 3) as number);
    expect([...seen].sort()).toEqual([1, 2, 3, 4]);
    const seenLog = new Set<number>();
    for (let i = 0; i < 2000; i++) seenLog.add(drawValue(rng, { min: 1, max: 8, scale: 'log', integer: true }, 3) as number);
    expect([...seenLog].sort((x, y) => x - y)).toEqual([1, 2, 3, 4, 5, 6, 7, 8]);
  });

  it('setting keys: the same run config written differently has the same key; the seed is not in it; a changed base changes it', () => {
    const k = (raw: Record<string, unknown>) => parseSweep({ name: 'k', base, ...raw }).settings[0]!.key;
    const dotted = k({ vary: [{ list: [{ 'agent.gamma': 0.95 }] }] });
    expect(k({ vary: [{ list: [{ agent: { gamma: 0.95 } }] }] })).toBe(dotted);
    expect(k({ common: { 'agent.gamma': 0.95 } })).toBe(dotted); // same resolved config
    expect(k({ vary: [{ list: [{ 'agent.gamma': 0.95 }] }], seeds: [9] })).toBe(dotted);
    expect(k({ name: 'other', vary: [{ list: [{ 'agent.gamma': 0.95 }] }] })).toBe(dotted);
    expect(k({ vary: [{ list: [{ 'agent.gamma': 0.96 }] }] })).not.toBe(dotted);
    expect(parseSweep({ name: 'k', base: { ...base, train: { stop: { steps: 200, seconds: null } } }, vary: [{ list: [{ 'agent.gamma': 0.95 }] }] }).settings[0]!.key).not.toBe(dotted);
    expect(k({ vary: [{ list: [{ 'agent.gamma': 0.95 }] }], evaluate: { episodes: 4 } })).not.toBe(dotted); // a different evaluation
    expect(dotted).toMatch(/^[0-9a-f]{10}$/);
  });

  it('a base config file is read relative to the sweep file; the name defaults to the file name', () => {
    const dir = mkdtempSync(join(tmpdir(), 'tilewise-sweep-spec-'));
    writeFileSync(join(dir, 'base.yaml'), 'env:\n  kind: ks\ntrain:\n  stop: { steps: 50, seconds: null }\n');
    writeFileSync(join(dir, 'lr-scan.yaml'), 'base: base.yaml\nseeds: [1, 2]\nvary:\n  - grid: { agent.gamma: [0.9, 0.95] }\n');
    const s = loadSweep(join(dir, 'lr-scan.yaml'));
    expect(s.name).toBe('lr-scan');
    expect(s.tasks).toHaveLength(4);
    expect((s.tasks[0]!.config.train as { stop: { steps: number } }).stop.steps).toBe(50);
    expect(labelOf({})).toBe('base');
  });
});

describe('the example sweep files in configs/', () => {
  it('validate and expand', () => {
    const dir = join(__dirname, '..', '..', '..', 'configs');
    const files = readdirSync(dir).filter((f) => /^sweep-.*\.ya?ml$/.test(f));
    expect(files.length).toBeGreaterThan(0);
    for (const f of files) {
      const s = loadSweep(join(dir, f));
      expect(s.tasks.length, f).toBe(s.settings.length * s.seeds.length);
    }
    const ks = loadSweep(join(dir, 'sweep-ks-l22-t4.yaml'));
    expect(ks.tasks).toHaveLength(18);
    expect(ks.rank).toEqual({ metric: 'dragVsOpposition', domain: 'train' });
  });
});

describe('sweep file: errors name the path and the value', () => {
  const cases: Array<[string, unknown, RegExp]> = [
    ['not a mapping', [1, 2], /\(top level\): expected a mapping .*\(got \[1,2\]\)/],
    ['no base', { vary: [] }, /base: expected a config file name or an inline config mapping \(got nothing\)/],
    ['seeds of the wrong kind', { base, seeds: 'many' }, /seeds: expected a list of seeds or \{ first, count \} \(got "many"\)/],
    ['unknown top-level key', { base, seed: [1] }, /unknown key seed/],
    ['bad name', { name: 'a b', base }, /name: expected letters, digits.*\(got "a b"\)/],
    ['repeated seed', { base, seeds: [1, 2, 1] }, /seeds\[2\]: expected distinct seeds .*\(got 1\)/],
    ['negative seed', { base, seeds: [-1] }, /seeds\[0\]: .*>=0 \(got -1\)/],
    ['two generators in one entry', { base, vary: [{ list: [{ 'agent.gamma': 0.9 }], grid: { 'agent.tau': [0.1] } }] }, /vary\[0\]: expected exactly one of list, grid or draw \(got \["list","grid"\]\)/],
    ['empty grid values', { base, vary: [{ grid: { 'agent.gamma': [] } }] }, /vary\[0\]\.grid\.agent\.gamma: .*\(got \[\]\)/],
    ['log range from 0', { base, vary: [{ draw: { count: 2, seed: 1, ranges: { 'agent.actorLr': { min: 0, max: 1, scale: 'log' } } } }] }, /vary\[0\]\.draw\.ranges\.agent\.actorLr\.min: expected a positive number for scale log \(got 0\)/],
    ['max below min', { base, vary: [{ draw: { count: 2, seed: 1, ranges: { 'agent.gamma': { min: 0.9, max: 0.5 } } } }] }, /vary\[0\]\.draw\.ranges\.agent\.gamma\.max: expected more than min \(0\.9\) \(got 0\.5\)/],
    ['range and choices', { base, vary: [{ draw: { count: 1, seed: 1, ranges: { 'agent.algo': { choices: ['td3'], min: 1 } } } }] }, /vary\[0\]\.draw\.ranges\.agent\.algo: expected either choices or min\/max/],
    ['malformed dotted key', { base, vary: [{ list: [{ 'agent..gamma': 0.9 }] }] }, /vary\[0\]\.list\[0\]\.agent\.\.gamma: expected a dotted config key .*\(got "agent\.\.gamma"\)/],
    ['unknown section', { base, common: { 'trainer.copies': 2 } }, /common\.trainer\.copies: expected a key in one of the config sections env, agent, train, evaluation, baselines \(got "trainer\.copies"\)/],
    ['seed set through the config', { base, vary: [{ grid: { 'train.seed': [1, 2] } }] }, /vary\[0\]\.grid\.train\.seed: the run seeds come from seeds:, not from train\.seed/],
    ['run name set', { base, common: { 'train.name': 'x' } }, /common\.train\.name: the sweep names its runs \(got "x"\)/],
    ['bad value in a grid', { base, vary: [{ grid: { 'agent.gamma': [0.9, 1.5] } }] }, /vary\[0\]\.grid\.agent\.gamma\[1\]: agent\.gamma: .*\(got 1\.5\)/],
    ['unknown config key in a list', { base, vary: [{ list: [{ 'agent.gama': 0.9 }] }] }, /vary\[0\]\.list\[0\]\.agent\.gama: agent: unknown key agent\.gama/],
    ['bad nested value', { base, vary: [{ list: [{ 'agent.actor': { hidden: [-1] } }] }] }, /vary\[0\]\.list\[0\]\.agent\.actor: agent\.actor\.hidden\[0\]: .*\(got -1\)/],
    ['bad value in with', { base, vary: [{ list: [{ 'agent.gamma': 0.9 }], with: { 'train.copies': 0 } }] }, /vary\[0\]\.with\.train\.copies: train\.copies: .*\(got 0\)/],
    ['bad common value', { base, common: { 'env.tiles': 3 } }, /common\.env\.tiles: env\.tiles: .*\(got 3\)/],
    ['a combination the config rejects', { base, vary: [{ list: [{ 'env.tiles': 8 }] }] }, /vary\[0\]\.list\[0\] \(setting "env\.tiles=8"\): env\.actuators: expected a multiple of tiles \(8\) \(got 4\)/],
    ['two entries give the same setting', { base, vary: [{ list: [{ 'agent.gamma': 0.99 }] }, { list: [{ 'agent.tau': 0.005 }] }] }, /vary\[1\]\.list\[0\]: setting "agent\.tau=0\.005" gives the same run config as vary\[0\]\.list\[0\] \("agent\.gamma=0\.99"\)/],
    ['unknown rank metric', { base, rank: { metric: 'netsaving' } }, /rank\.metric: .*"netSaving".*\(got "netsaving"\)/],
    ['ranking on an evaluation that is off', { base, evaluate: { enabled: false } }, /rank\.metric: needs evaluate\.enabled \(or rank by validationDrag\) \(got "drag"\)/],
    ['a transfer domain without transfer evaluation', { base, rank: { domain: 'transfer-1' } }, /rank\.domain: a transfer domain needs evaluate\.transfer: true \(got "transfer-1"\)/],
    ['a transfer domain the config lacks', { base, rank: { domain: 'transfer-2' }, evaluate: { transfer: true } }, /rank\.domain: setting "base" \(base\) has 0 transfer domains in evaluation\.transfer \(got "transfer-2"\)/],
    ['zero attempts', { base, retry: { attempts: 0 } }, /retry\.attempts: .*\(got 0\)/],
    ['bad base config', { base: { env: { kind: 'ks', tiles: 'four' } } }, /base: env\.tiles: .*\(got "four"\)/],
    ['missing base file', { base: 'nope.yaml' }, /base: .*nope\.yaml: cannot read the base config \(ENOENT\)/],
  ];
  for (const [what, raw, re] of cases) {
    it(what, () => {
      expect(errorOf(raw, join(tmpdir(), 'some-sweep.yaml'))).toMatch(re);
    });
  }

  it('every problem of a file is listed at once', () => {
    const msg = errorOf({ base, vary: [{ grid: { 'agent.gamma': [1.5], 'agent.tau': [2] } }, { list: [{ 'agent.gama': 1 }] }] });
    expect(msg.split('\n').filter((l) => l.startsWith('  '))).toHaveLength(3);
  });
});
