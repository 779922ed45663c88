/**
 * End to end: how long `tilewise train` takes to reach a validated policy that beats tuned
 * opposition control, per network backend. Prints one JSON object per figure per line.
 *
 *   beat-opposition   for each backend, one training run of the config (default
 *                     configs/ks-l22-t4.yaml) with only agent.backend changed, validation every
 *                     --every steps (10 held-out seeds), no final evaluation. Reports the training
 *                     seconds (those of the validation, which count the validations themselves)
 *                     and steps at the first validation whose mean P/P0 is below the opposition
 *                     figure, and below each of the stricter --levels (on this config a policy
 *                     passes opposition within seconds of the warm-up; how fast it goes well below
 *                     it is what the backend changes), the best validation, and the steps done in
 *                     the budget. Runs follow each other, so the machine is shared by nothing else.
 *
 * The opposition figure (--opposition, default 0.535) is the best-gain opposition P/P0 that
 * `tilewise baselines configs/ks-l22-t4.yaml` measures on this config (docs/benchmarks.md); the
 * validation seeds differ from the evaluation seeds, so a first crossing is an indication and the
 * final comparison is `tilewise evaluate`'s table.
 *
 * Usage: npx tsx scripts/bench-beat-opposition.ts [--config configs/ks-l22-t4.yaml]
 *        [--backends simd-fma,tfjs-wasm] [--seconds 300] [--every 1000] [--opposition 0.535] [--levels 0.3,0.2,0.15] [--seed 1]
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { loadavg, tmpdir } from 'node:os';
import { join } from 'node:path';
import { BACKEND_CHOICES, type BackendChoice } from '../packages/agent/src/config';
import { loadRunConfig } from '../packages/runner/src/config';
import { train, type ValidationPoint } from '../packages/runner/src/trainer';
import { option } from './options';

const configPath = option('config', 'configs/ks-l22-t4.yaml');
const backends = option('backends', 'simd-fma,tfjs-wasm').split(',');
const seconds = Number(option('seconds', '300'));
const every = Number(option('every', '1000'));
const levels = option('levels', '0.3,0.2,0.15').split(',').map(Number);
const opposition = Number(option('opposition', '0.535'));
const seed = Number(option('seed', '1'));
for (const [name, v] of [['seconds', seconds], ['every', every], ['opposition', opposition], ['seed', seed]] as const) {
  if (!(Number.isFinite(v) && v > 0)) throw new Error(`--${name}: expected a positive number, got ${option(name, '')}`);
}
for (const b of backends) {
  if (!(BACKEND_CHOICES as readonly string[]).includes(b)) throw new Error(`--backends: expected some of ${BACKEND_CHOICES.join(', ')}, got ${b}`);
}

const emit = (o: Record<string, unknown>): void => void process.stdout.write(`${JSON.stringify(o)}\n`);
const s1 = (x: number): number => Number(x.toFixed(1));
const base = loadRunConfig(configPath);
const work = mkdtempSync(join(tmpdir(), 'tilewise-beat-'));
try {
  for (const backend of backends) {
    const cfg = {
      ...base,
      agent: { ...base.agent, backend: backend as BackendChoice },
      train: {
        ...base.train,
        seed,
        finalEvaluation: false,
        stop: { ...base.train.stop, seconds, steps: null },
        validation: { ...base.train.validation, every },
        checkpoint: { ...base.train.checkpoint, everySeconds: 3600 },
      },
    };
    const load = loadavg()[0]!;
    const s = await train(cfg, { runDir: join(work, `run-${backend}`) });
    const below = (level: number): ValidationPoint | undefined => s.validations.find((v) => v.drag !== null && v.drag < level);
    const first = below(opposition);
    emit({
      figure: 'beat-opposition', config: configPath, backend: s.backend, seed, budget_s: seconds, validation_every: every, opposition_drag_ratio: opposition,
      first_below_s: first ? s1(first.seconds) : null,
      first_below_min: first ? Number((first.seconds / 60).toFixed(2)) : null,
      first_below_step: first?.step ?? null, first_below_drag_ratio: first?.drag ?? null,
      ...Object.fromEntries(levels.map((level) => [`first_below_${level}_s`, below(level) ? s1(below(level)!.seconds) : null])),
      best_drag_ratio: s.best?.drag ?? null, best_step: s.best?.step ?? null, best_s: s.best ? s1(s.best.seconds) : null,
      steps_in_budget: s.steps, validations: s.validations.length, load_1min_at_start: Number(load.toFixed(2)),
    });
  }
} finally {
  rmSync(work, { recursive: true, force: true });
}
