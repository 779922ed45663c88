import { readdirSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { EXIT_CONFIG, EXIT_OK, main } from '../src/cli';
import { capture, tempFiles } from './helpers/io';
import { parseRunConfig } from '../src/config';

const { dir, write: writeConfig } = tempFiles('tilewise-cli-');

/** A small but complete run: short spin-up, few short episodes, a 2-point gain sweep. */
const SMALL = `
env:
  kind: ks
  spinUpTime: 20
  episodeLength: 24
  reference: { time: 100, copies: 2, blockTime: 25 }
evaluation: { seed: 3, episodes: 3, copies: 2, discardDecisions: 4 }
baselines:
  gainSweep: { min: 0.3, max: 1, count: 2, episodes: 2 }
`;

describe('tilewise CLI', () => {
  it('--help lists the baselines command and exits 0', async () => {
    const io = capture();
    expect(await main(['--help'], io)).toBe(EXIT_OK);
    expect(io.outText()).toMatch(/baselines/);
  });

  it('usage errors exit 2', async () => {
    expect(await main(['no-such-command'], capture())).toBe(EXIT_CONFIG);
    expect(await main(['baselines'], capture())).toBe(EXIT_CONFIG);
    expect(await main(['baselines', 'x.yaml', '--episodes', 'zero'], capture())).toBe(EXIT_CONFIG);
  });

  it('config errors exit 2 naming the path and the value', async () => {
    const io = capture();
    const p = writeConfig('bad.yaml', 'env: { kind: ks, tiles: 3 }\nevaluation: { episodes: 1 }\ntrainer: {}\n');
    expect(await main(['baselines', p], io)).toBe(EXIT_CONFIG);
    expect(io.errText()).toMatch(/trainer: unknown section \(known sections: env, agent, train, evaluation, baselines\)/);
    const io2 = capture();
    const p2 = writeConfig('bad2.yaml', 'env: { kind: ks, tiles: 3 }\nevaluation: { episodes: 1 }\n');
    expect(await main(['baselines', p2], io2)).toBe(EXIT_CONFIG);
    expect(io2.errText()).toMatch(/env\.tiles: expected a divisor of points \(64\) \(got 3\)/);
    expect(io2.errText()).toMatch(/evaluation\.episodes: .*\(got 1\)/);
    const io3 = capture();
    expect(await main(['baselines', join(dir, 'missing.yaml')], io3)).toBe(EXIT_CONFIG);
    expect(io3.errText()).toMatch(/cannot read/);
    const io4 = capture();
    expect(await main(['baselines', writeConfig('k.yaml', 'env: { kind: nope }\n')], io4)).toBe(EXIT_CONFIG);
    expect(io4.errText()).toMatch(/env\.kind: expected one of .*"ks".*\(got "nope"\)/);
  });

  it('baselines prints the sweep and the table, caches P0, and is reproducible (smoke test of the pipeline)', async () => {
    const p = writeConfig('small.yaml', SMALL);
    const cache = join(dir, 'cache');
    const io = capture();
    expect(await main(['baselines', p, '--cache-dir', cache, '--json', '-q'], io)).toBe(EXIT_OK);
    const text = io.outText();
    expect(text).toMatch(/best alpha = /);
    expect(text).toMatch(/opposition\(alpha=/);
    expect(text).toMatch(/not a channel flow/);
    expect(readdirSync(cache).some((f) => f.startsWith('ks-p0-'))).toBe(true);
    const json = JSON.parse(text.split('\n').at(-1)!);
    expect(json.summaries.map((s: { policy: string }) => s.policy)[0]).toBe('none');
    // Same seeds, cached P0: the second run prints exactly the same results.
    const io2 = capture();
    expect(await main(['baselines', p, '--cache-dir', cache, '--json', '-q'], io2)).toBe(EXIT_OK);
    expect(io2.outText().split('\n').at(-1)).toBe(text.split('\n').at(-1));
  });

  it('fills section defaults', () => {
    const c = parseRunConfig({ env: { kind: 'ks' } });
    expect(c.evaluation.episodes).toBe(16);
    expect(c.baselines.policies).toEqual(['none', 'opposition', 'random']);
    expect(c.baselines.gainSweep.scale).toBe('log');
  });
});
