/**
 * Leading Lyapunov exponent of KS at L = 22 (published: 0.048, Cvitanovic, Davidchack &
 * Siminos 2010, SIAM J. Appl. Dyn. Syst. 9, 1-33), measured over a long run. Prints one JSON
 * line. Too long for the test suite, which runs a short version (ks-physics.test.ts).
 * Usage: npx tsx scripts/ks-lyapunov.ts [pairs=16] [time=8000] [dt=0.05]
 */
import { estimateLyapunov } from '../packages/envs/src/ks-analysis';

const [pairs = 16, time = 8000, dt = 0.05] = process.argv.slice(2).map(Number);
const t0 = performance.now();
const r = estimateLyapunov({ length: 22, points: 64, dt, pairs, time, seed: 2010 });
console.log(
  JSON.stringify({
    what: 'ks-lyapunov',
    L: 22,
    n: 64,
    dt,
    pairs,
    time_per_pair: time,
    lambda1: Number(r.mean.toFixed(5)),
    std_err: Number(r.stdErr.toPrecision(2)),
    published: 0.048,
    seconds: Number(((performance.now() - t0) / 1000).toFixed(1)),
  }),
);
