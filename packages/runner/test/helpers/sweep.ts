/**
 * Tiny but complete sweeps for the sweep tests: two settings (the actor's last-layer init,
 * which changes what is learnt) over the given seeds, a few hundred inline training steps each
 * with checkpoints every 100 steps, and a small evaluation (2 episodes per controller, 2 gains).
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { stringify as toYaml } from 'yaml';
import type { RunRecord } from '../../src/sweep/run';

export const TINY_BASE = {
  env: { kind: 'ks', spinUpTime: 10, episodeLength: 40, reference: { time: 100, copies: 2, blockTime: 25 } },
  agent: { actor: { hidden: [24, 24] }, critic: { hidden: [24, 24] }, batchSize: 32, warmup: 160 },
  train: {
    copies: 2,
    parallel: false,
    stop: { steps: 800, seconds: null },
    validation: { every: 200, episodes: 2, episodeLength: 12, discardDecisions: 2 },
    checkpoint: { everySteps: 100, everySeconds: 0 },
    logEvery: 100,
  },
  evaluation: { seed: 5, episodes: 2, copies: 2, episodeLength: 12, discardDecisions: 2 },
  baselines: { gainSweep: { min: 0.3, max: 1, count: 2, episodes: 2 } },
};

export const TINY_STEPS = TINY_BASE.train.stop.steps;

/** Write base.yaml and <name>.yaml into `dir`; returns the sweep file's path. */
export function writeTinySweep(dir: string, o: { name: string; seeds: number[]; backoffSeconds?: number }): string {
  writeFileSync(join(dir, 'base.yaml'), toYaml(TINY_BASE));
  const sweep = {
    name: o.name,
    base: 'base.yaml',
    vary: [{ list: [{ 'agent.finalLayerInit': 0.003 }, { 'agent.finalLayerInit': 0.1 }] }],
    seeds: o.seeds,
    rank: { metric: 'drag' },
    retry: { attempts: 3, backoffSeconds: o.backoffSeconds ?? 1 },
  };
  const path = join(dir, `${o.name}.yaml`);
  writeFileSync(path, toYaml(sweep));
  return path;
}

/** The policy's mean drag on the training domain, as the run's own evaluation.json records it. */
export function evaluationFileDrag(runDir: string): number {
  const e = JSON.parse(readFileSync(join(runDir, 'evaluation', 'train', 'evaluation.json'), 'utf8')) as {
    controllers: Array<{ role: string; drag: { mean: number } }>;
  };
  return e.controllers.find((c) => c.role === 'policy')!.drag.mean;
}

export function policyDrag(rec: RunRecord): number {
  const ev = rec.summary.evaluation as unknown as Array<{ label: string; controllers: Array<{ role: string; drag: { mean: number } }> }>;
  return ev.find((d) => d.label === 'train')!.controllers.find((c) => c.role === 'policy')!.drag.mean;
}

/** Resolve when `check` returns a value other than undefined (polled every `everyMs`), or throw after `seconds`. */
export async function waitFor<T>(what: string, check: () => T | undefined, seconds: number, everyMs = 50): Promise<T> {
  const end = Date.now() + seconds * 1000;
  for (;;) {
    const v = check();
    if (v !== undefined) return v;
    if (Date.now() > end) throw new Error(`timed out after ${seconds} s waiting for ${what}`);
    await new Promise((r) => setTimeout(r, everyMs));
  }
}
