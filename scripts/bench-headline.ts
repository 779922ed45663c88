/**
 * The headline: on the default KS config, `tilewise train` (at most `--seconds` of training,
 * default 600) gives a policy whose P/P0 on held-out seeds is below the tuned opposition
 * baseline's, on the training domain and on the config's transfer domain (4x longer, 4x more
 * tiles). Prints one JSON object per figure per line:
 *
 *   headline-train    per training seed: steps, updates, training seconds, steps/s, the best
 *                     validation (step, seconds, P/P0 with its 95% interval over the validation
 *                     seeds) and the first time a validation fell below each `--marks` value;
 *                     load = 1-minute load average at start and end (2 cores)
 *   headline-curve    per validation: seed, step, seconds, P/P0 and its 95% half-width
 *   headline-eval     per seed, domain and controller: P/P0, net saving, actuation power and
 *                     fraction at the bounds (means, Student-t 95% half-widths over the
 *                     evaluation episodes, identical seeded initial states for every controller)
 *   headline-paired   per seed and domain: policy minus opposition P/P0, paired by initial
 *                     state, mean and Student-t 95% half-width, and whether the policy is below
 *                     opposition (mean) and significantly so (upper end of the interval < 0)
 *
 * Usage: npx tsx scripts/bench-headline.ts [--config configs/ks-l22-t4.yaml] [--seeds 1,2,3]
 *        [--seconds 600] [--steps N] [--runs-dir DIR] [--marks 0.535,0.49] [--cache-dir DIR]
 * Progress and tables go to stderr; the run directories are kept (default: a temporary dir).
 */
import { mkdtempSync } from 'node:fs';
import { loadavg, tmpdir } from 'node:os';
import { join } from 'node:path';
import { meanWithCi } from '../packages/envs/src/stats';
import { loadRunConfig } from '../packages/runner/src/config';
import { evaluateSource, openPolicySource } from '../packages/runner/src/commands/evaluate';
import { createProgress } from '../packages/runner/src/progress';
import { train } from '../packages/runner/src/trainer';
import { option } from './options';

const configPath = option('config', 'configs/ks-l22-t4.yaml');
const seeds = option('seeds', '1,2,3').split(',').map(Number);
const seconds = Number(option('seconds', '600'));
const steps = option('steps', '') ? Number(option('steps', '')) : null;
const marks = option('marks', '0.535,0.49').split(',').map(Number);
const runsDir = option('runs-dir', '') || mkdtempSync(join(tmpdir(), 'tilewise-headline-'));
const cacheDir = option('cache-dir', '') || undefined;
const emit = (o: Record<string, unknown>): void => void process.stdout.write(`${JSON.stringify(o)}\n`);
const r4 = (x: number | null | undefined): number | null => (x === null || x === undefined || !Number.isFinite(x) ? null : Number(x.toPrecision(4)));
const err = (l: string): void => void process.stderr.write(`${l}\n`);

const base = loadRunConfig(configPath);
for (const seed of seeds) {
  const cfg = { ...base, train: { ...base.train, seed, finalEvaluation: false, stop: { ...base.train.stop, seconds, steps } } };
  const load0 = loadavg()[0]!;
  const progress = createProgress({ write: (s) => process.stderr.write(s), tty: Boolean(process.stderr.isTTY), plainEvery: 30 });
  const s = await train(cfg, { runsDir, configPath, cacheDir, progress, say: err });
  const load1 = loadavg()[0]!;
  const first = (m: number) => s.validations.find((v) => v.drag !== null && v.drag < m) ?? null;
  emit({
    figure: 'headline-train',
    config: configPath,
    seed,
    runDir: s.runDir,
    backend: s.backend,
    parallel: s.parallel,
    steps: s.steps,
    updates: s.updates,
    trainSeconds: r4(s.trainSeconds),
    stepsPerSecond: r4(s.stepsPerSecond),
    best: s.best ? { step: s.best.step, seconds: r4(s.best.seconds), drag: s.best.drag, halfWidth: s.best.halfWidth } : null,
    firstBelow: Object.fromEntries(marks.map((m) => [String(m), first(m) ? { step: first(m)!.step, seconds: r4(first(m)!.seconds), drag: first(m)!.drag } : null])),
    load: [r4(load0), r4(load1)],
  });
  for (const v of s.validations) emit({ figure: 'headline-curve', seed, step: v.step, seconds: r4(v.seconds), drag: v.drag, halfWidth: v.halfWidth });

  const src = openPolicySource(s.runDir, 'best');
  const results = evaluateSource(src, null, { cacheDir, log: err });
  for (const d of results) {
    for (const c of d.controllers) {
      const m = c.summary;
      emit({
        figure: 'headline-eval',
        seed,
        domain: d.label,
        length: d.envConfig.length,
        tiles: d.tiles,
        controller: c.name,
        role: c.role,
        episodes: m.episodes,
        drag: r4(m.drag?.mean),
        dragHalfWidth: r4(m.drag?.halfWidth),
        netSaving: r4(m.netSaving?.mean),
        netSavingHalfWidth: r4(m.netSaving?.halfWidth),
        actuationPower: r4(m.actuationPower?.mean),
        atBounds: r4(m.atBounds?.mean),
        diverged: m.divergedEpisodes,
      });
    }
    const pol = d.controllers.find((c) => c.role === 'policy')!;
    const opp = d.controllers.find((c) => c.role === 'opposition');
    if (opp) {
      const diffs = pol.episodes.map((e, i) => e.drag - opp.episodes[i]!.drag).filter(Number.isFinite);
      const ci = meanWithCi(diffs);
      emit({
        figure: 'headline-paired',
        seed,
        domain: d.label,
        tiles: d.tiles,
        bestAlpha: d.sweep?.bestAlpha ?? null,
        policyMinusOpposition: r4(ci.mean),
        halfWidth: r4(ci.halfWidth),
        pairs: diffs.length,
        policyBelow: ci.mean < 0,
        significant: ci.mean + ci.halfWidth < 0,
      });
    }
  }
}
