/**
 * Fluctuation statistics at the sensors of the Kolmogorov config for the uncontrolled flow
 * and for opposition control: quadrant fractions of (u', v'), their correlation and rms,
 * via `sensorSamples` and `fluctuationStats` (what the report command calls). One JSON
 * object per policy per line.
 *
 *   npx tsx scripts/kolmogorov-quadrants.ts [config] [--alpha 8] [--episodes 4] [--decisions 60] [--discard 20]
 */
import { fluctuationStats, KolmogorovEnv, parseKolmogorovConfig, sensorSamples } from '../packages/envs/src/kolmogorov';
import { loadRunConfig } from '../packages/runner/src/config';

function arg(name: string, dflt: number): number {
  const i = process.argv.indexOf(`--${name}`);
  return i < 0 ? dflt : Number(process.argv[i + 1]);
}
const file = process.argv[2] && !process.argv[2].startsWith('--') ? process.argv[2] : 'configs/kolmogorov-re40-t8.yaml';
const cfg = parseKolmogorovConfig(loadRunConfig(file).env.config);
const alpha = arg('alpha', 8);
const episodes = arg('episodes', 4);
const decisions = arg('decisions', 60);
const discard = arg('discard', 20);
// Cf0 and I0 only scale drag and power, which this script does not report.
const env = new KolmogorovEnv(cfg, { copies: episodes, cf0: 1, i0: 1 });
const T = env.spec.tiles;
for (const policy of ['none', `opposition(alpha=${alpha})`]) {
  env.reset(Array.from({ length: episodes }, (_, b) => 1000 + b));
  const act = new Float32Array(episodes * T);
  const us: number[] = [];
  const vs: number[] = [];
  const cs: number[] = [];
  let inputRatio = 0;
  for (let d = 0; d < decisions; d++) {
    if (policy !== 'none') {
      const s = env.oppositionSignal();
      for (let i = 0; i < act.length; i++) act[i] = Math.max(-cfg.actionBound, Math.min(cfg.actionBound, -alpha * s[i]!));
    }
    const out = env.step(act);
    if (d < discard) continue;
    for (let b = 0; b < episodes; b++) inputRatio += out.inputRatio[b]! / (episodes * (decisions - discard));
    const smp = sensorSamples(env);
    us.push(...smp.u);
    vs.push(...smp.v);
    cs.push(...smp.cls);
  }
  const st = fluctuationStats(us, vs, cs, cfg.sensorsPerTile[1]);
  console.log(
    JSON.stringify({
      env: 'kolmogorov',
      config: file,
      policy,
      samples: st.samples,
      I_over_Ilam: +inputRatio.toFixed(4),
      Q1: +st.fractions[0].toFixed(4),
      Q2: +st.fractions[1].toFixed(4),
      Q3: +st.fractions[2].toFixed(4),
      Q4: +st.fractions[3].toFixed(4),
      uv_correlation: +st.correlation.toFixed(4),
      uv_by_row: Array.from(st.classStress, (x) => +x.toFixed(4)),
      Q2_Q4_by_row: Array.from({ length: st.classStress.length }, (_, c) => [+st.classFractions[c * 4 + 1]!.toFixed(3), +st.classFractions[c * 4 + 3]!.toFixed(3)]),
      u_rms: +st.stdU.toFixed(4),
      v_rms: +st.stdV.toFixed(4),
    }),
  );
}
