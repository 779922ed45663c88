/**
 * The run config (src/config.ts): defaults, the resolved config round trip, and clear errors
 * for bad configs (each names the field path and the value, or the combination at fault).
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ConfigError, ksEnvKind, parseKsConfig, registerEnvKind } from '@tilewise/envs';
import { z } from 'zod';
import { parse as parseYaml, stringify as toYaml } from 'yaml';
import { describe, expect, it } from 'vitest';
import { loadRunConfig, parseRunConfig, resolvedConfig } from '../src/config';
import { train } from '../src/trainer';

/** The message of the ConfigError that parsing `raw` throws. */
function errorOf(raw: unknown): string {
  try {
    parseRunConfig(raw);
  } catch (e) {
    expect(e).toBeInstanceOf(ConfigError);
    return (e as Error).message;
  }
  throw new Error('expected a ConfigError');
}

const ks = { kind: 'ks' };

describe('run config', () => {
  it('fills every default and resolves the agent preset', () => {
    const c = parseRunConfig({ env: ks });
    expect(c.train.copies).toBe(4);
    expect(c.train.updatesPerStep).toBe(2);
    expect(c.train.stop).toEqual({ steps: null, seconds: 600, dragBelow: null, patience: null });
    expect(c.train.validation).toEqual({ every: 1000, episodes: 10, episodeLength: null, discardDecisions: null });
    expect(c.train.checkpoint).toEqual({ enabled: true, everySteps: 0, everySeconds: 60, keep: 2 });
    expect(c.agent.critics).toBe(2); // td3 preset
    expect(c.agent.actor.hidden).toEqual([256, 256]);
    expect(c.evaluation.transfer).toEqual([]);
    expect(c.transfer).toEqual([]);
  });

  it('the resolved config parses back to the same config (what a run directory keeps)', () => {
    const c = parseRunConfig({
      env: { kind: 'ks', haloTiles: 0 },
      agent: { algo: 'ddpg', gamma: 0.98 },
      train: { seed: 7, stop: { steps: 100 } },
      evaluation: { transfer: [{ length: 88, points: 256, tiles: 16, actuators: 16 }] },
    });
    const text = toYaml(resolvedConfig(c));
    const again = parseRunConfig(parseYaml(text));
    expect(resolvedConfig(again)).toEqual(resolvedConfig(c));
    expect(again.transfer[0]!.config.tiles).toBe(16);
    expect(again.transfer[0]!.config.haloTiles).toBe(0); // inherited from env
  });

  it('rejects bad configs naming the path and the value', () => {
    const cases: Array<[string, unknown, RegExp]> = [
      ['unknown section', { env: ks, trainer: {} }, /trainer: unknown section \(known sections: env, agent, train, evaluation, baselines\)/],
      ['unknown train key', { env: ks, train: { copys: 4 } }, /train: unknown key train\.copys/],
      ['wrong type', { env: ks, train: { copies: 'four' } }, /train\.copies: .*expected number.*\(got "four"\)/],
      ['out of range', { env: ks, train: { copies: 0 } }, /train\.copies: .*>0.*\(got 0\)/],
      ['negative updates', { env: ks, train: { updatesPerStep: -1 } }, /train\.updatesPerStep: .*>=0.*\(got -1\)/],
      ['no stop criterion', { env: ks, train: { stop: { steps: null, seconds: null } } }, /train\.stop: expected steps or seconds \(or both\) \(got \{"steps":null,"seconds":null/],
      ['patience without validation', { env: ks, train: { stop: { patience: 3 }, validation: { every: 0 } } }, /train\.stop\.patience: needs validation \(validation\.every > 0\) \(got 3\)/],
      ['bad run name', { env: ks, train: { name: 'my run' } }, /train\.name: expected letters, digits.*\(got "my run"\)/],
      ['keep one checkpoint', { env: ks, train: { checkpoint: { keep: 1 } } }, /train\.checkpoint\.keep: .*>=2.*\(got 1\)/],
      [
        'validation transient longer than its episodes',
        { env: ks, train: { validation: { episodeLength: 50, discardDecisions: 50 } } },
        /train\.validation\.discardDecisions: expected fewer than validation\.episodeLength \(50\) \(got 50\)/,
      ],
      ['ddpg with two critics', { env: ks, agent: { algo: 'ddpg', critics: 2 } }, /agent\.critics: expected 1 \(ddpg is the td3 update.*\(got 2\)/],
      ['batch larger than the replay buffer', { env: ks, agent: { replayCapacity: 100 } }, /agent\.batchSize: expected at most replayCapacity \(100\) \(got 256\)/],
      ['unknown agent key', { env: ks, agent: { lr: 0.001 } }, /agent: unknown key agent\.lr/],
      ['env constraint', { env: { kind: 'ks', tiles: 3 } }, /env\.tiles: expected a divisor of points \(64\) \(got 3\)/],
      ['transfer to another surrogate', { env: ks, evaluation: { transfer: [{ kind: 'kolmogorov' }] } }, /evaluation\.transfer\[0\]\.kind: expected the training surrogate "ks" \(got "kolmogorov"\)/],
      ['invalid transfer domain', { env: ks, evaluation: { transfer: [{ points: 256, tiles: 7 }] } }, /evaluation\.transfer\[0\]\.tiles: expected a divisor of points \(256\) \(got 7\)/],
      ['transient longer than the episodes', { env: { kind: 'ks', episodeLength: 30 } }, /evaluation\.discardDecisions: expected fewer than env\.episodeLength \(30\) \(got 40\)/],
    ];
    for (const [what, raw, re] of cases) expect(errorOf(raw), what).toMatch(re);
    expect(cases.length).toBeGreaterThanOrEqual(10);
  });

  it('lists every problem of a config at once', () => {
    const msg = errorOf({ env: { kind: 'ks', tiles: 3 }, train: { copies: 0 }, agent: { gamma: 1.5 } });
    expect(msg).toMatch(/env\.tiles: .*\(got 3\)/);
    expect(msg).toMatch(/train\.copies: .*\(got 0\)/);
    expect(msg).toMatch(/agent\.gamma: .*\(got 1\.5\)/);
  });

  it('reports unreadable files and YAML syntax errors with the file name', () => {
    const dir = mkdtempSync(join(tmpdir(), 'tilewise-config-'));
    const bad = join(dir, 'bad.yaml');
    writeFileSync(bad, 'env: { kind: ks\ntrain: [');
    expect(() => loadRunConfig(bad)).toThrow(/bad\.yaml: not valid YAML/);
    expect(() => loadRunConfig(join(dir, 'none.yaml'))).toThrow(/none\.yaml: cannot read the config file \(ENOENT\)/);
  });

  it('rejects checkpoints for a surrogate that cannot save its state, before any work', async () => {
    // A registered surrogate without getState/setState: KS with those two methods hidden.
    registerEnvKind({
      kind: 'stateless-test',
      summary: 'KS without getState/setState (test only)',
      schema: z.strictObject({ kind: z.literal('stateless-test') }),
      reference: () => {
        throw new Error('the reference must not be measured before the check');
      },
      create: (_c, o) => {
        const env = ksEnvKind.create(parseKsConfig({ kind: 'ks', spinUpTime: 5 }), { copies: o.copies, reference: 1 });
        return { spec: env.spec, reset: (s) => env.reset(s), resetCopy: (b, s) => env.resetCopy(b, s), observe: () => env.observe(), step: (a) => env.step(a), oppositionSignal: () => env.oppositionSignal(), snapshot: (b) => env.snapshot(b) };
      },
    });
    const cfg = parseRunConfig({ env: { kind: 'stateless-test' }, train: { stop: { steps: 1 } } });
    await expect(train(cfg, { runDir: mkdtempSync(join(tmpdir(), 'tilewise-nockpt-')) })).rejects.toThrow(
      /train\.checkpoint\.enabled: env kind "stateless-test" cannot save its state .*\(got true; set it to false\)/,
    );
  });
});
