/**
 * Aggregation of sweep runs (src/sweep/aggregate.ts) on crafted run records, against values
 * computed by hand. The two-sided 95% Student-t quantiles used by hand have closed forms for one
 * and two degrees of freedom: t_{p,1} = tan(pi (p - 1/2)) (the Cauchy law) and
 * t_{p,2} = (2p - 1) / sqrt(2 p (1 - p)); for three, the tabulated 3.1824 (Abramowitz & Stegun
 * 1964, Table 26.10), here to the digits scipy.stats.t.ppf(0.975, 3) prints. jstat 1.9.6, a
 * general-purpose statistics library, is checked against them too (to its ~1e-9 precision).
 */
import jStatModule from 'jstat';
import { describe, expect, it } from 'vitest';
import { aggregate, aggregateCsv, aggregateLines, runRow, runsCsv, stat } from '../src/sweep/aggregate';
import type { RunRecord } from '../src/sweep/run';
import { parseSweep, type Sweep } from '../src/sweep/spec';
import type { TrainSummary } from '../src/trainer';

const jStat = jStatModule.jStat ?? jStatModule;
const T975 = { 1: Math.tan(Math.PI * 0.475), 2: 0.95 / Math.sqrt(2 * 0.975 * 0.025), 3: 3.1824463052837078 } as const;

describe('statistics over seeds', () => {
  it('the closed-form quantiles agree with the printed tables, and jstat with them', () => {
    expect(T975[1]).toBeCloseTo(12.7062, 4); // the printed tables
    expect(T975[2]).toBeCloseTo(4.3027, 4);
    for (const [df, t] of Object.entries(T975)) expect(jStat.studentt.inv(0.975, Number(df))).toBeCloseTo(t, 8);
  });

  it('two seeds: mean (a+b)/2, half-width t(0.975, 1) |a-b| / 2', () => {
    const s = stat([0.5, 0.7]);
    expect(s.n).toBe(2);
    expect(s.mean).toBeCloseTo(0.6, 14);
    expect(s.sd).toBeCloseTo(Math.SQRT2 * 0.1, 14); // sqrt(((0.1)^2 + (0.1)^2) / 1)
    expect(s.halfWidth).toBeCloseTo(T975[1] * 0.1, 10); // sd / sqrt(2) = 0.1
    expect(s.low).toBeCloseTo(0.6 - T975[1] * 0.1, 10);
    expect(s.high).toBeCloseTo(0.6 + T975[1] * 0.1, 10);
  });

  it('three seeds [1, 2, 4]: mean 7/3, sd sqrt(7/3), half-width t(0.975, 2) sd / sqrt(3)', () => {
    const s = stat([1, 2, 4]);
    expect(s.mean).toBeCloseTo(7 / 3, 14);
    expect(s.sd).toBeCloseTo(Math.sqrt(7 / 3), 14); // ((4/3)^2 + (1/3)^2 + (5/3)^2) / 2 = 7/3
    expect(s.halfWidth).toBeCloseTo((T975[2] * Math.sqrt(7 / 3)) / Math.sqrt(3), 10);
    const [lo, hi] = jStat.tci(7 / 3, 0.05, [1, 2, 4]);
    expect(s.low).toBeCloseTo(lo, 8);
    expect(s.high).toBeCloseTo(hi, 8);
  });

  it('one seed has a mean and no interval; nulls and non-finite values are left out', () => {
    expect(stat([0.4])).toEqual({ n: 1, mean: 0.4, halfWidth: null, low: null, high: null, sd: null });
    expect(stat([null, 0.4, Number.NaN])).toMatchObject({ n: 1, mean: 0.4 });
    expect(stat([])).toEqual({ n: 0, mean: null, halfWidth: null, low: null, high: null, sd: null });
  });
});

/** A sweep of two settings over three seeds (no runs are made: records are crafted below). */
function sweep(metric: 'drag' | 'dragVsOpposition' | 'netSaving' | 'validationDrag' = 'drag'): Sweep {
  return parseSweep({
    name: 'agg',
    base: { env: { kind: 'ks' }, train: { stop: { steps: 100, seconds: null } } },
    vary: [{ grid: { 'agent.gamma': [0.9, 0.95] } }],
    seeds: [1, 2, 3],
    rank: { metric },
  });
}

const controller = (role: string, drag: number, net: number, diverged = 0) => ({
  name: role,
  role,
  episodes: 16,
  divergedEpisodes: diverged,
  drag: { mean: drag, halfWidth: 0.01, sd: 0.02, n: 16 },
  netSaving: { mean: net, halfWidth: 0.01, sd: 0.02, n: 16 },
  actuationPower: { mean: 0, halfWidth: 0, sd: 0, n: 16 },
  atBounds: { mean: 0, halfWidth: 0, sd: 0, n: 16 },
});

/** A record as a finished run returns it, with the figures the aggregation reads. */
function record(sw: Sweep, setting: number, seed: number, f: { drag: number; opp: number; none?: number; net?: number; seconds: number; best?: number }): RunRecord {
  const st = sw.settings[setting]!;
  const summary = {
    format: 'tilewise-run-summary/1',
    status: 'completed',
    dragName: 'P/P0',
    steps: 100,
    trainSeconds: f.seconds,
    best: f.best === undefined ? null : { step: 50, drag: f.best },
    evaluation: [
      {
        label: 'train',
        dragName: 'P/P0',
        controllers: [controller('policy', f.drag, f.net ?? 1 - f.drag), controller('none', f.none ?? 1, 0), controller('opposition', f.opp, 1 - f.opp)],
      },
    ],
  } as unknown as TrainSummary;
  return { format: 'tilewise-sweep-run/1', sweep: sw.name, id: `${st.key}-seed${seed}`, key: st.key, label: st.label, values: st.values, seed, runDir: `/runs/${st.dir}/seed${seed}`, host: 'h', finishedAt: '', summary };
}

function records(list: RunRecord[]): Map<string, RunRecord> {
  return new Map(list.map((r) => [r.id, r]));
}

describe('aggregate', () => {
  it('per setting: the means and intervals over seeds, computed by hand; ranked; the best named', () => {
    const sw = sweep();
    const a = aggregate(
      sw,
      records([
        record(sw, 0, 1, { drag: 0.5, opp: 0.6, seconds: 10 }),
        record(sw, 0, 2, { drag: 0.7, opp: 0.6, seconds: 14 }),
        record(sw, 0, 3, { drag: 0.6, opp: 0.6, seconds: 12 }),
        record(sw, 1, 1, { drag: 0.3, opp: 0.6, seconds: 20 }),
        record(sw, 1, 2, { drag: 0.4, opp: 0.6, seconds: 22 }),
        record(sw, 1, 3, { drag: 0.2, opp: 0.6, seconds: 30 }),
      ]),
    );
    expect(a.runs).toEqual({ planned: 6, completed: 6, failed: 0, missing: 0 });
    expect(a.dragName).toBe('P/P0');
    // gamma 0.95: [0.3, 0.4, 0.2], mean 0.3, sd 0.1; gamma 0.9: [0.5, 0.7, 0.6], mean 0.6, sd 0.1.
    const [first, second] = a.settings;
    expect(first!.label).toBe('agent.gamma=0.95');
    expect(first!.rank).toBe(1);
    expect(second!.rank).toBe(2);
    expect(first!.metric.mean).toBeCloseTo(0.3, 14);
    expect(first!.metric.sd).toBeCloseTo(0.1, 14);
    const hw = (T975[2] * 0.1) / Math.sqrt(3); // 0.248414...
    expect(first!.metric.halfWidth).toBeCloseTo(hw, 10);
    expect(second!.metric.mean).toBeCloseTo(0.6, 14);
    expect(second!.metric.halfWidth).toBeCloseTo(hw, 10);
    // P/P0 against opposition (0.6 in every run): ratios [0.5, 2/3, 1/3], mean 0.5, sd 1/6.
    expect(first!.oppositionDrag.mean).toBeCloseTo(0.6, 14);
    expect(first!.oppositionDrag.halfWidth).toBeCloseTo(0, 14);
    expect(first!.dragVsOpposition.mean).toBeCloseTo(0.5, 14);
    expect(first!.dragVsOpposition.halfWidth).toBeCloseTo((T975[2] * (1 / 6)) / Math.sqrt(3), 10);
    // Training time [20, 22, 30]: mean 24, sd sqrt(28) (((-4)^2 + (-2)^2 + 6^2) / 2 = 28).
    expect(first!.trainSeconds.mean).toBeCloseTo(24, 12);
    expect(first!.trainSeconds.halfWidth).toBeCloseTo((T975[2] * Math.sqrt(28)) / Math.sqrt(3), 9);
    expect(first!.netSaving.mean).toBeCloseTo(0.7, 14);
    // The intervals overlap: 0.3 + 0.248 = 0.548 > 0.6 - 0.248 = 0.352.
    expect(a.best).toMatchObject({ key: first!.key, separated: false });
    expect(a.best!.note).toMatch(/overlaps the runner-up's \(agent\.gamma=0\.9\)/);
    const lines = aggregateLines(a).join('\n');
    expect(lines).toMatch(/best setting: agent\.gamma=0\.95 \(key [0-9a-f]{10}\): P\/P0 0\.300 ± 0\.248 over 3 seeds/);
    expect(lines).toMatch(/not a channel flow/);
  });

  it('a clear winner is called separated; netSaving ranks the highest first', () => {
    const sw = sweep('netSaving');
    const a = aggregate(
      sw,
      records([
        record(sw, 0, 1, { drag: 0.5, opp: 0.6, net: 0.1, seconds: 1 }),
        record(sw, 0, 2, { drag: 0.5, opp: 0.6, net: 0.11, seconds: 1 }),
        record(sw, 0, 3, { drag: 0.5, opp: 0.6, net: 0.12, seconds: 1 }),
        record(sw, 1, 1, { drag: 0.5, opp: 0.6, net: 0.5, seconds: 1 }),
        record(sw, 1, 2, { drag: 0.5, opp: 0.6, net: 0.51, seconds: 1 }),
        record(sw, 1, 3, { drag: 0.5, opp: 0.6, net: 0.52, seconds: 1 }),
      ]),
    );
    expect(a.metric).toMatchObject({ name: 'netSaving', goal: 'max' });
    expect(a.settings[0]!.label).toBe('agent.gamma=0.95');
    expect(a.best).toMatchObject({ label: 'agent.gamma=0.95', separated: true });
  });

  it('dragVsOpposition and validationDrag read what they say', () => {
    const sw = sweep('dragVsOpposition');
    const r = runRow(record(sw, 0, 1, { drag: 0.3, opp: 0.6, seconds: 1, best: 0.25 }), sw.rank);
    expect(r.metric).toBeCloseTo(0.5, 15);
    const v = sweep('validationDrag');
    expect(runRow(record(v, 0, 1, { drag: 0.3, opp: 0.6, seconds: 1, best: 0.25 }), v.rank).metric).toBe(0.25);
  });

  it('failed and missing runs are counted and left out of the means; a setting without results is unranked', () => {
    const sw = sweep();
    const a = aggregate(
      sw,
      records([record(sw, 1, 1, { drag: 0.3, opp: 0.6, seconds: 1 }), record(sw, 1, 3, { drag: 0.5, opp: 0.6, seconds: 1 })]),
      new Map([[`${sw.settings[1]!.key}-seed2`, 'diverged']]),
    );
    expect(a.runs).toEqual({ planned: 6, completed: 2, failed: 1, missing: 3 });
    const [ranked, unranked] = a.settings;
    expect(ranked!.metric.n).toBe(2);
    expect(ranked!.metric.mean).toBeCloseTo(0.4, 14);
    expect(ranked!.metric.halfWidth).toBeCloseTo(T975[1] * 0.1, 10);
    expect(ranked!.failed).toBe(1);
    expect(ranked!.runs.map((r) => r.status)).toEqual(['completed', 'failed', 'completed']);
    expect(unranked!.rank).toBeNull();
    expect(a.best).toMatchObject({ label: 'agent.gamma=0.95', separated: null, note: 'the only setting with results' });
  });

  it('records of seeds no longer planned are ignored', () => {
    const sw = sweep();
    const extra = { ...record(sw, 0, 1, { drag: 0.1, opp: 0.6, seconds: 1 }), seed: 9, id: `${sw.settings[0]!.key}-seed9` };
    const a = aggregate(sw, records([extra, record(sw, 0, 1, { drag: 0.5, opp: 0.6, seconds: 1 })]));
    expect(a.settings.find((s) => s.label === 'agent.gamma=0.9')!.metric).toMatchObject({ n: 1, mean: 0.5 });
  });

  it('CSV: one header, one row per setting (ranked first) and per run; fields with commas are quoted', () => {
    const sw = parseSweep({
      name: 'csv',
      base: { env: { kind: 'ks' }, train: { stop: { steps: 100, seconds: null } } },
      vary: [{ list: [{ 'agent.actor': { hidden: [8, 8] } }, { 'agent.actor': { hidden: [16] } }] }],
      seeds: [1, 2],
    });
    const a = aggregate(
      sw,
      records([
        record(sw, 0, 1, { drag: 0.5, opp: 0.6, seconds: 1 }),
        record(sw, 0, 2, { drag: 0.7, opp: 0.6, seconds: 1 }),
        record(sw, 1, 1, { drag: 0.2, opp: 0.6, seconds: 1 }),
      ]),
    );
    const lines = aggregateCsv(a).trimEnd().split('\n');
    expect(lines).toHaveLength(3);
    const [header, best, other] = lines.map(parseCsvLine);
    expect(header!.slice(0, 8)).toEqual(['rank', 'best', 'key', 'label', 'agent.actor', 'seeds', 'completed', 'failed']);
    expect(lines[1]).toMatch(/^1,true,[0-9a-f]{10},"agent\.actor=\{""hidden"":\[16\]\}","\{""hidden"":\[16\]\}",2,1,0,0\.2,,,,/);
    const col = (row: string[], name: string): string => row[header!.indexOf(name)]!;
    expect(col(best!, 'metric_ci95')).toBe(''); // one seed: no interval
    expect(col(other!, 'label')).toBe('agent.actor={"hidden":[8,8]}');
    expect(col(other!, 'agent.actor')).toBe('{"hidden":[8,8]}');
    expect(Number(col(other!, 'metric_mean'))).toBeCloseTo(0.6, 14);
    expect(Number(col(other!, 'metric_ci95'))).toBeCloseTo(T975[1] * 0.1, 10);
    expect(Number(col(other!, 'metric_low'))).toBeCloseTo(0.6 - T975[1] * 0.1, 10);
    expect(Number(col(other!, 'drag_vs_opposition_mean'))).toBeCloseTo(1, 14);
    expect(col(other!, 'best')).toBe('false');
    const runs = runsCsv(a).trimEnd().split('\n');
    expect(runs).toHaveLength(1 + 4);
    expect(runs.filter((l) => l.includes(',missing,'))).toHaveLength(1);
  });
});

/** Split one CSV line (RFC 4180 quoting) into fields. */
function parseCsvLine(line: string): string[] {
  const out: string[] = [];
  let field = '';
  let quoted = false;
  for (let i = 0; i < line.length; i++) {
    const c = line[i]!;
    if (quoted) {
      if (c === '"' && line[i + 1] === '"') (field += '"'), i++;
      else if (c === '"') quoted = false;
      else field += c;
    } else if (c === '"') quoted = true;
    else if (c === ',') out.push(field), (field = '');
    else field += c;
  }
  out.push(field);
  return out;
}
