/**
 * The LQR test (packages/agent/test/lqr.test.ts) runs one seed. This script runs the same
 * protocol for several seeds and prints, per seed, one JSON line with the learned gain and
 * its relative error against the discounted Riccati gain, so the test's tolerance can be
 * judged against the spread. Usage: npx tsx scripts/check-lqr-seeds.ts [firstSeed] [lastSeed]
 */
import { doubleIntegratorGain, LQR_PROTOCOL, trainLqr } from '../packages/agent/test/helpers/lqr';

const first = Number(process.argv[2] ?? 1);
const last = Number(process.argv[3] ?? 8);
const k = doubleIntegratorGain(LQR_PROTOCOL.gamma);
for (let seed = first; seed <= last; seed++) {
  const t0 = performance.now();
  const run = await trainLqr(seed);
  const rel = run.gain.map((g, j) => (g - k[j]!) / k[j]!);
  console.log(JSON.stringify({ check: 'lqr-gain', seed, gamma: LQR_PROTOCOL.gamma, gain: run.gain, riccati: k, rel_error: rel, seconds: (performance.now() - t0) / 1000 }));
}
