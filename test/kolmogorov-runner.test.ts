import { mkdtempSync, readdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { EXIT_CONFIG, EXIT_OK, main, type Io } from '../packages/runner/src/cli';
import { loadRunConfig } from '../packages/runner/src/config';

function capture(): Io & { outText: () => string; errText: () => string } {
  const out: string[] = [];
  const err: string[] = [];
  return { out: (l) => out.push(l), err: (l) => err.push(l), outText: () => out.join('\n'), errText: () => err.join('\n') };
}

const dir = mkdtempSync(join(tmpdir(), 'tilewise-kolmogorov-'));

describe('Kolmogorov surrogate through the runner', () => {
  it('the shipped configs/kolmogorov-*.yaml parse with the tiles, sensors and jets they document', () => {
    const c = loadRunConfig('configs/kolmogorov-re40-t8.yaml');
    expect(c.env.config.kind).toBe('kolmogorov');
    expect(c.env.config.tiles).toEqual([4, 2]);
    expect(c.env.config.points).toEqual([64, 64]);
    expect(c.train.copies * (c.env.config.tiles as number[]).reduce((a, b) => a * b, 1)).toBe(64); // 64 tile transitions per step, as the config says
    // The transfer box: twice as wide on the same grid spacing, 16 tiles of the same size.
    const w = loadRunConfig('configs/kolmogorov-re40-a2-t16.yaml');
    expect(w.env.config.kind).toBe('kolmogorov');
    expect(w.env.config.tiles).toEqual([8, 2]);
    expect(w.env.config.points).toEqual([128, 64]);
    const tileWidth = (x: typeof c): number => (2 * Math.PI * (x.env.config.aspect as number)) / (x.env.config.tiles as number[])[0]!;
    expect(tileWidth(w)).toBe(tileWidth(c));
  });

  it('baselines runs end to end on a tiny Kolmogorov config and is reproducible (smoke test)', async () => {
    const p = join(dir, 'tiny.yaml');
    writeFileSync(
      p,
      `env:
  kind: kolmogorov
  points: [32, 32]
  spinUpTime: 2
  controlSteps: 2
  episodeLength: 48
  sensorsPerTile: [2, 2]
  reference: { time: 10, copies: 1, blockTime: 5 }
evaluation: { seed: 2, episodes: 2, copies: 2, discardDecisions: 2 }
baselines:
  gainSweep: { min: 0.5, max: 2, count: 2, episodes: 2 }
`,
    );
    const cache = join(dir, 'cache');
    const io = capture();
    expect(await main(['baselines', p, '--cache-dir', cache, '--json', '-q'], io)).toBe(EXIT_OK);
    const text = io.outText();
    expect(text).toMatch(/Cf\/Cf0/);
    expect(text).toMatch(/not a channel flow/);
    const files = readdirSync(cache);
    expect(files.some((f) => f.startsWith('kolmogorov-cf0-'))).toBe(true);
    expect(files.some((f) => f.startsWith('kolmogorov-i0-'))).toBe(true);
    const io2 = capture();
    expect(await main(['baselines', p, '--cache-dir', cache, '--json', '-q'], io2)).toBe(EXIT_OK);
    expect(io2.outText().split('\n').at(-1)).toBe(text.split('\n').at(-1));
  });

  it('a config error in the kolmogorov section exits 2 naming the path', async () => {
    const p = join(dir, 'bad.yaml');
    writeFileSync(p, 'env: { kind: kolmogorov, tiles: [4, 3] }\n');
    const io = capture();
    expect(await main(['baselines', p], io)).toBe(EXIT_CONFIG);
    expect(io.errText()).toMatch(/env\.tiles\[1\]: expected a divisor of forcingWavenumber \(4\)/);
  });
});
