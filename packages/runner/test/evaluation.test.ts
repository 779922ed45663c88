/**
 * Evaluation (src/evaluation.ts, src/recorder.ts): controllers on identical seeds, the recorded
 * series agree with the episode statistics, the data files decode, transfer checks.
 */
import { mkdtempSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { decodeContainer, getBlock } from '@tilewise/agent';
import { ConfigError, parseEnvConfig } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { runBaselines } from '../src/commands/baselines';
import { parseRunConfig } from '../src/config';
import { checkTransfer, compareControllers, evaluatePolicyOnDomains, SERIES_KIND } from '../src/evaluation';
import { PolicyNet } from '../src/policy-net';
import { policyEnvSpec, type PolicyFile } from '../src/policy';

const cacheDir = mkdtempSync(join(tmpdir(), 'tilewise-eval-cache-'));

const cfg = parseRunConfig({
  env: { kind: 'ks', spinUpTime: 10, episodeLength: 30, reference: { time: 100, copies: 2, blockTime: 25 } },
  evaluation: { seed: 4, episodes: 3, copies: 2, discardDecisions: 5, record: { fieldEvery: 10, fieldEpisodes: 2, histogramBins: 11 } },
  baselines: { policies: ['none', 'opposition'], gainSweep: { min: 0.3, max: 1, count: 2, episodes: 2 } },
});

/** A policy whose actor has all parameters zero: it always acts 0, exactly like no control. */
function zeroPolicy(envCfg = cfg.env): PolicyFile {
  const env = envCfg.kind.create(envCfg.config, { copies: 1, reference: 1 });
  const spec = { sizes: [env.spec.obsDim, 8, env.spec.actDim], hidden: 'relu' as const, output: 'tanh' as const };
  const params = new Float32Array(env.spec.obsDim * 8 + 8 + 8 * env.spec.actDim + env.spec.actDim);
  return {
    snapshot: { spec, params, actionBound: env.spec.actionBound, normalizer: null },
    env: { kind: 'ks', config: envCfg.config, spec: policyEnvSpec(env.spec), reference: 1 },
    source: { label: 'test' },
  };
}

describe('compareControllers', () => {
  const quiet = { log: () => {}, cacheDir };

  it('runs every controller on the same seeds; a policy that always acts 0 scores exactly like no control', () => {
    const r = compareControllers(
      { label: 'train', env: cfg.env, evaluation: cfg.evaluation, baselines: cfg.baselines },
      { ...quiet, policy: { net: new PolicyNet(zeroPolicy().snapshot), name: 'zero' }, record: true },
    );
    expect(r.controllers.map((c) => c.role)).toEqual(['policy', 'none', 'opposition']);
    const seeds = r.controllers.map((c) => c.episodes.map((e) => e.seed));
    expect(seeds[1]).toEqual(seeds[0]);
    expect(seeds[2]).toEqual(seeds[0]);
    expect(seeds[0]).toEqual(r.seeds);
    // Exact: the same initial states, the same (zero) actions.
    expect(r.controllers[0]!.episodes.map((e) => e.drag)).toEqual(r.controllers[1]!.episodes.map((e) => e.drag));
    // Opposition is the gain that was best on the separate tuning seeds.
    expect(r.controllers[2]!.name).toBe(`opposition(alpha=${r.sweep!.bestAlpha})`);
    expect(r.tuningSeeds.some((s) => r.seeds.includes(s))).toBe(false);
  });

  it('records series whose means equal the episode statistics; the baselines command gives the same figures', () => {
    const r = compareControllers({ label: 'train', env: cfg.env, evaluation: cfg.evaluation, baselines: cfg.baselines }, { ...quiet, record: true });
    const D = r.episodeLength;
    const A = 4;
    for (const c of r.controllers) {
      const rec = c.recording!;
      expect(rec.drag.length).toBe(3 * D);
      expect(rec.actions.length).toBe(3 * D * A);
      c.episodes.forEach((e, i) => {
        let s = 0;
        for (let k = r.discardDecisions; k < D; k++) s += rec.drag[i * D + k]!;
        expect(s / (D - r.discardDecisions)).toBeCloseTo(e.drag, 6); // float32 series vs float64 mean
      });
      const total = rec.histogram.reduce((a, b) => a + b, 0);
      expect(total).toBe(3 * (D - r.discardDecisions) * A);
      // Field snapshots: decisions 0, 10, 20, 30 of the first two episodes, n = 64 values each.
      expect(rec.fieldSize).toBe(64);
      expect(Array.from(rec.fieldIndex)).toEqual([0, 0, 1, 0, 0, 10, 1, 10, 0, 20, 1, 20, 0, 30, 1, 30]);
    }
    const none = r.controllers.find((c) => c.role === 'none')!;
    expect(Array.from(none.recording!.actions).every((a) => a === 0)).toBe(true);
    const opp = r.controllers.find((c) => c.role === 'opposition')!;
    // Opposition acts a = clip(-alpha s): the recorded (signal, action) pairs show it.
    const alpha = r.sweep!.bestAlpha;
    for (let i = 0; i < 50; i++) {
      const s = opp.recording!.signal[i]!;
      expect(opp.recording!.actions[i]).toBeCloseTo(Math.max(-0.5, Math.min(0.5, -alpha * s)), 5);
    }
    const b = runBaselines(cfg, quiet);
    expect(b.summaries.map((s) => s.drag!.mean)).toEqual(r.controllers.map((c) => c.summary.drag!.mean));
  });
});

describe('evaluatePolicyOnDomains', () => {
  it('writes evaluation.json and series.twdata per domain (training and transfer)', () => {
    const out = mkdtempSync(join(tmpdir(), 'tilewise-eval-out-'));
    const big = parseEnvConfig({ ...cfg.env.config, length: 44, points: 128, tiles: 8, actuators: 8 });
    const domains = [
      { label: 'train', env: cfg.env, evaluation: cfg.evaluation, baselines: cfg.baselines },
      { label: 'transfer-1', env: big, evaluation: cfg.evaluation, baselines: cfg.baselines },
    ];
    const res = evaluatePolicyOnDomains({ policy: zeroPolicy(), policyName: 'zero', domains, outDir: out, cacheDir, log: () => {} });
    expect(res.map((r) => r.tiles)).toEqual([4, 8]);
    const json = JSON.parse(readFileSync(join(out, 'transfer-1', 'evaluation.json'), 'utf8'));
    expect(json.format).toBe('tilewise-evaluation/1');
    expect(json.dragName).toBe('P/P0');
    expect(json.controllers.map((c: { role: string }) => c.role)).toEqual(['policy', 'none', 'opposition']);
    expect(json.controllers[1].drag.n).toBe(3);
    expect(json.protocol.seeds).toHaveLength(3);
    expect(json.caution).toMatch(/not a channel flow/);
    const series = decodeContainer(readFileSync(join(out, 'transfer-1', 'series.twdata')), SERIES_KIND);
    const meta = series.meta as { decisions: number; actuators: number; controllers: Array<{ prefix: string; role: string; fieldSize: number }> };
    expect(meta.actuators).toBe(8);
    expect(meta.controllers[2]!.role).toBe('opposition');
    expect(getBlock(series, 'c2/actions', 'f32').length).toBe(3 * meta.decisions * 8);
    expect(getBlock(series, 'c0/field', 'f32').length % 128).toBe(0);
  });
});

describe('checkTransfer', () => {
  const probe = (raw: Record<string, unknown>) => {
    const p = parseEnvConfig({ ...cfg.env.config, ...raw });
    return { parsed: p, env: p.kind.create(p.config, { copies: 1, reference: 1 }) };
  };

  it('accepts the same tile size with more tiles', () => {
    const t = probe({ length: 88, points: 256, tiles: 16, actuators: 16 });
    expect(() => checkTransfer(zeroPolicy(), t.parsed, 'transfer', t.env)).not.toThrow();
  });

  it('rejects other observation sizes, another sensor layout and another tile size, saying what differs', () => {
    const halo = probe({ haloTiles: 0 });
    expect(() => checkTransfer(zeroPolicy(), halo.parsed, 'transfer', halo.env)).toThrow(ConfigError);
    expect(() => checkTransfer(zeroPolicy(), halo.parsed, 'transfer', halo.env)).toThrow(/transfer: obsDim is 8, the policy was trained with 24/);
    const twoPerTile = probe({ actuators: 8 });
    expect(() => checkTransfer(zeroPolicy(), twoPerTile.parsed, 'transfer', twoPerTile.env)).toThrow(/actDim is 2, the policy was trained with 1/);
    const longer = probe({ length: 44, points: 128 });
    expect(() => checkTransfer(zeroPolicy(), longer.parsed, 'transfer', longer.env)).toThrow(/tile size 11 with 32 grid points differs from the policy's 5\.5 with 16/);
  });
});
