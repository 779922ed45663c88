/**
 * Surrogate speed. Prints one JSON object per figure per line on stdout.
 *
 * KS (packages/envs/src/ks.ts):
 *   - "ks-solver": bare ETDRK4 solver steps (8 real FFTs of size n per step), the figure
 *     compared with a NumPy ETDRK4 of the same step (target: >= 35,000 steps/s for one copy
 *     and >= 130,000 copy-steps/s for 16 copies at n = 64);
 *   - "ks-env": environment decisions (m = 5 solver steps each, plus sampling of P and
 *     actuator power every step, forcing, observations), reported as solver copy-steps/s.
 * Kolmogorov flow (packages/envs/src/kolmogorov.ts), Re = 40, n = 4, 64^2 (dt 0.02) and 128^2
 * (dt 0.01):
 *   - "kolmogorov-solver": bare ETDRK4 steps (4 stages x 2 inverse + 2 forward real 2-D FFTs
 *     of 2 fields each), one copy and a batch of 8;
 *   - "kolmogorov-env": decisions of the tiled env (4 x 2 tiles, 25 steps each, tile mean-flow
 *     and jet-power sampling every step, forcing, observations), as solver copy-steps/s.
 * Usage: npx tsx scripts/bench-envs.ts [--seconds S] [--only ks|kolmogorov]  (S = measuring time per figure, default 2)
 */
import { KolmogorovEnv, KolmogorovSolver, parseKolmogorovConfig, seedKolmogorov } from '../packages/envs/src/kolmogorov';
import { KsEnv, KsSolver, parseKsConfig, seedKsNoise } from '../packages/envs/src/ks';

const secArg = process.argv.indexOf('--seconds');
const seconds = secArg >= 0 ? Number(process.argv[secArg + 1]) : 2;

function timeIt(run: (reps: number) => void, unitsPerRep: number): number {
  run(Math.max(1, Math.round(200 / unitsPerRep))); // warm-up (JIT)
  let reps = 1;
  let elapsed = 0;
  for (;;) {
    const t0 = performance.now();
    run(reps);
    elapsed = (performance.now() - t0) / 1000;
    if (elapsed > seconds / 4) break;
    reps *= 2;
  }
  // Best of three timed batches sized to about seconds/3 each.
  const target = Math.max(1, Math.round((reps * seconds) / 3 / elapsed));
  let best = Infinity;
  for (let k = 0; k < 3; k++) {
    const t0 = performance.now();
    run(target);
    best = Math.min(best, (performance.now() - t0) / 1000);
  }
  return (target * unitsPerRep) / best;
}

const onlyArg = process.argv.indexOf('--only');
const only = onlyArg >= 0 ? process.argv[onlyArg + 1] : undefined;

const cases: Array<[number, number]> = only === 'kolmogorov' ? [] : [
  [64, 22],
  [256, 88],
];
for (const [n, L] of cases) {
  for (const copies of [1, 16]) {
    const s = new KsSolver({ length: L, points: n, dt: 0.05, copies });
    for (let b = 0; b < copies; b++) seedKsNoise(s, b, b + 1, 0.1);
    for (let i = 0; i < 2000; i++) s.step();
    const rate = timeIt((reps) => {
      for (let i = 0; i < reps; i++) s.step();
    }, copies);
    console.log(
      JSON.stringify({ env: 'ks', what: 'ks-solver', n, L, dt: 0.05, copies, steps_per_s: Math.round(rate / copies), copy_steps_per_s: Math.round(rate) }),
    );
  }
  for (const copies of [1, 16]) {
    const T = L === 22 ? 4 : 16;
    const cfg = parseKsConfig({ kind: 'ks', length: L, points: n, tiles: T, actuators: T, spinUpTime: 50, episodeLength: 1_000_000 });
    const env = new KsEnv(cfg, { copies, p0: 1 });
    env.reset(Array.from({ length: copies }, (_, b) => b + 1));
    const acts = new Float32Array(copies * T).map((_, i) => 0.3 * Math.sin(i));
    const m = cfg.controlSteps;
    const rate = timeIt((reps) => {
      for (let i = 0; i < reps; i++) env.step(acts);
    }, copies * m);
    console.log(
      JSON.stringify({
        env: 'ks',
        what: 'ks-env',
        n,
        L,
        dt: 0.05,
        tiles: T,
        controlSteps: m,
        copies,
        decisions_per_s: Math.round(rate / m),
        copy_steps_per_s: Math.round(rate),
      }),
    );
  }
}

for (const [points, dt] of only === 'ks' ? [] : [
  [64, 0.02],
  [128, 0.01],
] as Array<[number, number]>) {
  const physics = { re: 40, forcingWavenumber: 4, aspect: 1, grid: [points, points] as [number, number], dt, linearDrag: 0 };
  for (const copies of [1, 8]) {
    const s = new KolmogorovSolver(physics, copies);
    for (let b = 0; b < copies; b++) seedKolmogorov(s, b, b + 1, 1);
    s.advance(Math.round(10 / dt));
    const rate = timeIt((reps) => s.advance(reps), copies);
    console.log(
      JSON.stringify({ env: 'kolmogorov', what: 'kolmogorov-solver', points, re: 40, n: 4, dt, copies, steps_per_s: Math.round(rate / copies), copy_steps_per_s: Math.round(rate) }),
    );
  }
  for (const copies of [1, 8]) {
    const cfg = parseKolmogorovConfig({ kind: 'kolmogorov', points: [points, points], dt, controlSteps: 25, tiles: [4, 2], spinUpTime: 10, episodeLength: 1_000_000 });
    const env = new KolmogorovEnv(cfg, { copies, cf0: 1, i0: 1 });
    env.reset(Array.from({ length: copies }, (_, b) => b + 1));
    const acts = new Float32Array(copies * 8).map((_, i) => 0.5 * Math.sin(i));
    const m = cfg.controlSteps;
    const rate = timeIt((reps) => {
      for (let i = 0; i < reps; i++) env.step(acts);
    }, copies * m);
    console.log(
      JSON.stringify({
        env: 'kolmogorov',
        what: 'kolmogorov-env',
        points,
        re: 40,
        n: 4,
        dt,
        tiles: [4, 2],
        controlSteps: m,
        copies,
        decisions_per_s: +(rate / m).toFixed(2),
        copy_steps_per_s: Math.round(rate),
      }),
    );
  }
}
