/**
 * End to end: how long `tilewise train` takes to reach a validated policy that beats tuned
 * opposition control, per network backend. Prints one JSON object per figure per line.
 *
 *   beat-opposition   for each backend, one training run of the config (default
 *                     configs/ks-l22-t4.yaml) with only agent.backend changed, validation every
 *                     --every steps (10 held-out seeds), no final evaluation. Reports the training
 *                     seconds (time/train_seconds of the validation line, which counts the
 *                     validations themselves) and steps at the first validation whose mean P/P0 is
 *                     below the opposition figure, and below each of the stricter --levels (on this
 *                     config a policy passes opposition within seconds of the warm-up; how fast it
 *                     goes well below it is what the backend changes), the best validation, and the
 *                     steps done in the budget. Runs follow each other, so the machine is shared by
 *                     nothing else.
 *
 * The opposition figure (--opposition, default 0.535) is the best-gain opposition P/P0 that
 * `tilewise baselines configs/ks-l22-t4.yaml` measures on this config (docs/benchmarks.md); the
 * validation seeds differ from the evaluation seeds, so a first crossing is an indication and the
 * final comparison is `tilewise evaluate`'s table.
 *
 * Usage: npx tsx scripts/bench-beat-opposition.ts [--config configs/ks-l22-t4.yaml]
 *        [--backends simd-fma,tfjs-wasm] [--seconds 300] [--every 1000] [--opposition 0.535] [--levels 0.3,0.2,0.15] [--seed 1]
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { loadavg, tmpdir } from 'node:os';
import { join } from 'node:path';
import { loadRunConfig, resolvedConfig } from '../packages/runner/src/config';

function option(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && process.argv[i + 1] ? process.argv[i + 1]! : fallback;
}
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

const emit = (o: Record<string, unknown>): void => void process.stdout.write(`${JSON.stringify(o)}\n`);
const root = join(import.meta.dirname, '..');
const work = mkdtempSync(join(tmpdir(), 'tilewise-beat-'));
try {
  for (const backend of backends) {
    const config = resolvedConfig(loadRunConfig(configPath)) as Record<string, Record<string, unknown>>;
    config.agent = { ...config.agent, backend };
    const train = config.train!;
    train.seed = seed;
    train.stop = { seconds };
    train.validation = { ...(train.validation as object), every };
    train.checkpoint = { ...(train.checkpoint as object), everySeconds: 3600 };
    const cfgFile = join(work, `${backend}.yaml`);
    writeFileSync(cfgFile, JSON.stringify(config, null, 1)); // JSON is YAML
    const runDir = join(work, `run-${backend}`);
    const load = loadavg()[0];
    const res = spawnSync(process.execPath, [join(root, 'packages/runner/bin/tilewise.mjs'), 'train', cfgFile, '--run-dir', runDir, '--no-evaluate', '--no-progress', '--quiet'], { encoding: 'utf8', cwd: root });
    if (res.status !== 0) throw new Error(`train with backend ${backend} failed (exit ${res.status}): ${res.stderr.slice(-2000)}`);
    const lines = readFileSync(join(runDir, 'log.jsonl'), 'utf8').trim().split('\n').map((l) => JSON.parse(l) as Record<string, unknown>);
    const start = lines.find((l) => l.msg === 'start');
    const vals = lines.filter((l) => l.msg === 'validation');
    const first = vals.find((l) => (l['eval/drag_ratio'] as number) < opposition);
    const best = vals.reduce<Record<string, unknown> | undefined>((b, l) => (b === undefined || (l['eval/drag_ratio'] as number) < (b['eval/drag_ratio'] as number) ? l : b), undefined);
    const last = vals.at(-1);
    emit({
      figure: 'beat-opposition', config: configPath, backend: start?.backend ?? backend, seed, budget_s: seconds, validation_every: every, opposition_drag_ratio: opposition,
      first_below_s: first ? Number((first['time/train_seconds'] as number).toFixed(1)) : null,
      first_below_min: first ? Number(((first['time/train_seconds'] as number) / 60).toFixed(2)) : null,
      first_below_step: first?.step ?? null, first_below_drag_ratio: first?.['eval/drag_ratio'] ?? null,
      ...Object.fromEntries(levels.map((level) => {
        const hit = vals.find((l) => (l['eval/drag_ratio'] as number) < level);
        return [`first_below_${level}_s`, hit ? Number((hit['time/train_seconds'] as number).toFixed(1)) : null];
      })),
      best_drag_ratio: best?.['eval/drag_ratio'] ?? null, best_step: best?.step ?? null,
      best_s: best ? Number((best['time/train_seconds'] as number).toFixed(1)) : null,
      steps_in_budget: last?.step ?? null, validations: vals.length, load_1min_at_start: Number(load!.toFixed(2)),
    });
  }
} finally {
  rmSync(work, { recursive: true, force: true });
}
