/**
 * The training commands end to end (src/cli.ts): train with the final comparison table,
 * evaluate, transfer, config, exit codes, and a real SIGINT to a child process.
 */
import { spawn } from 'node:child_process';
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { EXIT_CONFIG, EXIT_OK, EXIT_SIGINT, main } from '../src/cli';
import { capture, tempFiles } from './helpers/io';
import { listCheckpoints } from '../src/checkpoint';

const { dir, write } = tempFiles('tilewise-cli-train-');
const cache = join(dir, 'cache');

const TINY = `
env:
  kind: ks
  haloTiles: 0
  spinUpTime: 10
  episodeLength: 30
  reference: { time: 100, copies: 2, blockTime: 25 }
agent: { actor: { hidden: [16] }, critic: { hidden: [16] }, batchSize: 16, warmup: 64 }
train:
  copies: 2
  stop: { steps: 80, seconds: null }
  validation: { every: 40, episodes: 2 }
  checkpoint: { everySteps: 40, everySeconds: 0 }
evaluation:
  seed: 2
  episodes: 2
  copies: 2
  discardDecisions: 5
  transfer: [{ length: 44, points: 128, tiles: 8, actuators: 8 }]
baselines: { policies: [none, opposition], gainSweep: { min: 0.3, max: 1, count: 2, episodes: 2 } }
`;

describe('tilewise train / evaluate / transfer / config', () => {
  let runDir = '';

  it('train writes a run directory and prints the comparison table on the training and transfer domains', async () => {
    const cfg = write('tiny.yaml', TINY);
    const io = capture();
    const code = await main(['train', cfg, '--runs-dir', join(dir, 'runs'), '--cache-dir', cache, '--seed', '3'], io);
    expect(code, io.errText()).toBe(EXIT_OK);
    const runs = readdirSync(join(dir, 'runs'));
    expect(runs).toHaveLength(1);
    expect(runs[0]).toMatch(/^tiny-seed3-\d{8}-\d{6}$/);
    runDir = join(dir, 'runs', runs[0]!);
    const text = io.outText();
    expect(text).toMatch(/== train: ks L = 22, n = 64, 4 tiles ==/);
    expect(text).toMatch(/== transfer-1: ks L = 44, n = 128, 8 tiles ==/);
    expect(text).toMatch(/policy \(best, step \d+\)\s+2\s+\d\.\d{3} ± \d\.\d{3}/);
    expect(text).toMatch(/not a channel flow/);
    expect(io.errText()).toMatch(/training completed \(stop\.steps 80 reached\): 80 steps/);
    for (const f of ['evaluation/train/evaluation.json', 'evaluation/transfer-1/series.twdata', 'summary.json', 'best.policy']) expect(existsSync(join(runDir, f)), f).toBe(true);
    const summary = JSON.parse(readFileSync(join(runDir, 'summary.json'), 'utf8'));
    expect(summary.seed).toBe(3);
    expect(summary.evaluation.map((d: { label: string }) => d.label)).toEqual(['train', 'transfer-1']);
  });

  it('evaluate re-runs the comparison for a run; transfer rejects an incompatible domain with exit 2', async () => {
    const io = capture();
    expect(await main(['evaluate', runDir, '--policy', 'latest', '--no-transfer', '--out', join(dir, 'ev'), '--cache-dir', cache], io)).toBe(EXIT_OK);
    expect(io.outText()).toMatch(/policy \(latest, step 80\)/);
    expect(existsSync(join(dir, 'ev', 'train', 'evaluation.json'))).toBe(true);
    const other = write('other.yaml', 'env: { kind: ks, length: 88, points: 256, tiles: 16, actuators: 16, haloTiles: 1 }\n');
    const io2 = capture();
    expect(await main(['transfer', runDir, other, '--cache-dir', cache], io2)).toBe(EXIT_CONFIG);
    expect(io2.errText()).toMatch(/transfer: obsDim is 24, the policy was trained with 8/);
    const io3 = capture();
    expect(await main(['evaluate', join(dir, 'nothing-here')], io3)).toBe(EXIT_CONFIG);
    expect(io3.errText()).toMatch(/nothing-here: no such run directory or policy file/);
    const io4 = capture();
    expect(await main(['evaluate', runDir, '--policy', 'worst'], io4)).toBe(EXIT_CONFIG);
    expect(io4.errText()).toMatch(/--policy: expected best or latest \(got "worst"\)/);
  });

  it('config prints the resolved config; train --help lists its options', async () => {
    const io = capture();
    expect(await main(['config', write('c.yaml', 'env: { kind: ks }\n')], io)).toBe(EXIT_OK);
    expect(io.outText()).toMatch(/updatesPerStep: 2/);
    expect(io.outText()).toMatch(/gamma: 0\.99/);
    const help = capture();
    expect(await main(['train', '--help'], help)).toBe(EXIT_OK);
    expect(help.outText()).toMatch(/--seconds <s>/);
    expect(await main(['train', write('bad.yaml', 'env: { kind: ks }\ntrain: { copies: 0 }\n')], capture())).toBe(EXIT_CONFIG);
  });

  it('SIGINT stops a training process with a final checkpoint and exit code 130; resume finishes it', async () => {
    const cfg = write('long.yaml', TINY.replace('stop: { steps: 80, seconds: null }', 'stop: { steps: 1000000, seconds: null }'));
    const bin = join(dirname(fileURLToPath(import.meta.url)), '..', 'bin', 'tilewise.mjs');
    const runDir2 = join(dir, 'sigint-run');
    const child = spawn(process.execPath, [bin, 'train', cfg, '--run-dir', runDir2, '--cache-dir', cache, '--no-evaluate'], { stdio: ['ignore', 'pipe', 'pipe'] });
    let err = '';
    child.stderr.on('data', (d: Buffer) => {
      err += d.toString();
    });
    // Wait until training is under way (the first periodic checkpoint is in the log), then interrupt.
    const logPath = join(runDir2, 'log.jsonl');
    const deadline = Date.now() + 90_000;
    while (Date.now() < deadline && !(existsSync(logPath) && readFileSync(logPath, 'utf8').includes('"checkpoint"'))) await new Promise((r) => setTimeout(r, 100));
    child.kill('SIGINT');
    const code = await new Promise<number | null>((resolve) => child.on('exit', (c) => resolve(c)));
    expect(code, err).toBe(EXIT_SIGINT);
    expect(err).toMatch(/SIGINT: stopping after this step and writing a checkpoint/);
    const summary = JSON.parse(readFileSync(join(runDir2, 'summary.json'), 'utf8'));
    expect(summary.status).toBe('interrupted');
    expect(listCheckpoints(join(runDir2, 'checkpoints'))[0]).toBe(`step-${String(summary.steps).padStart(10, '0')}.ckpt`);
    const io = capture();
    expect(await main(['resume', runDir2, '--steps', String(summary.steps + 10), '--no-evaluate', '--cache-dir', cache], io)).toBe(EXIT_OK);
    expect(JSON.parse(readFileSync(join(runDir2, 'summary.json'), 'utf8')).steps).toBe(summary.steps + 10);
  });
});
