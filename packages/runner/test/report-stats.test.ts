/**
 * The statistics behind the report's figures (src/report/stats.ts, and the quadrant, curve and
 * fluctuation helpers of src/report/model.ts and figures.ts): hand-computed cases, and
 * comparisons with two general-purpose statistics libraries, jstat 1.9.6 (Student-t quantiles
 * and intervals, histograms) and simple-statistics 7.12.1 (means, standard deviations,
 * covariance, correlation). The source of every expected value is named beside its check.
 */
import { Rng } from '@tilewise/envs';
import jStatModule from 'jstat';
import * as ss from 'simple-statistics';
import { describe, expect, it } from 'vitest';
import { curveBands } from '../src/report/figures';
import { fluctuationSamples, quadrantRow, type ControllerView, type DomainView } from '../src/report/model';
import { band, binnedMeans, boundShares, columnBands, histogram, histogram2d, pairedDifference } from '../src/report/stats';

const jStat = jStatModule.jStat ?? jStatModule;

function normals(seed: number, n: number, mean = 0, sd = 1): number[] {
  const rng = new Rng(seed);
  return Array.from({ length: n }, () => mean + sd * rng.normal());
}

describe('band', () => {
  it('ci95 of [1, 2, 3, 4] by hand: mean 2.5, s = sqrt(5/3), t(0.975, 3) = 3.182446 (tables), half-width 2.054260', () => {
    const b = band([1, 2, 3, 4], 'ci95');
    expect(b.n).toBe(4);
    expect(b.mean).toBe(2.5);
    const half = (3.182446305284263 * Math.sqrt(5 / 3)) / 2; // t quantile: Student-t table, 3 dof, 97.5%
    expect(half).toBeCloseTo(2.05426, 5);
    expect(b.lo).toBeCloseTo(2.5 - half, 9);
    expect(b.hi).toBeCloseTo(2.5 + half, 9);
  });

  it('ci95 equals jstat.tci and jstat/simple-statistics mean and sd on seeded samples of several sizes', () => {
    for (const n of [2, 3, 7, 16, 50]) {
      const x = normals(n, n, 0.7, 0.3);
      const b = band(x, 'ci95');
      const [lo, hi] = jStat.tci(jStat.mean(x), 0.05, x); // jstat: t interval of the mean
      // jstat inverts the t CDF iteratively, to about 1e-9 relative
      expect(b.lo).toBeCloseTo(lo, 8);
      expect(b.hi).toBeCloseTo(hi, 8);
      expect(b.mean).toBeCloseTo(ss.mean(x), 12); // simple-statistics mean
      const half = jStat.studentt.inv(0.975, n - 1) * (ss.sampleStandardDeviation(x) / Math.sqrt(n));
      expect(b.hi - b.mean).toBeCloseTo(half, 8);
    }
  });

  it('sd is mean ± the sample standard deviation (simple-statistics), range is min..max', () => {
    const x = normals(3, 9);
    const s = band(x, 'sd');
    expect(s.hi - s.mean).toBeCloseTo(ss.sampleStandardDeviation(x), 12);
    expect(s.mean - s.lo).toBeCloseTo(ss.sampleStandardDeviation(x), 12);
    const r = band(x, 'range');
    expect(r.lo).toBe(ss.min(x));
    expect(r.hi).toBe(ss.max(x));
    expect(r.mean).toBeCloseTo(ss.mean(x), 12);
    // by hand
    expect(band([1, 5, 3], 'range')).toEqual({ n: 3, mean: 3, lo: 1, hi: 5 });
    expect(band([2, 4], 'sd')).toEqual({ n: 2, mean: 3, lo: 3 - Math.SQRT2, hi: 3 + Math.SQRT2 });
  });

  it('skips NaN (a diverged episode), and has no band below two values', () => {
    expect(band([1, NaN, 3], 'range')).toEqual({ n: 2, mean: 2, lo: 1, hi: 3 });
    const one = band([NaN, 4], 'ci95');
    expect(one.n).toBe(1);
    expect(one.mean).toBe(4);
    expect(Number.isNaN(one.lo) && Number.isNaN(one.hi)).toBe(true);
    expect(band([NaN], 'sd').n).toBe(0);
  });

  it('columnBands: per column of a [rows, cols] matrix (drag [episodes, decisions]), by hand', () => {
    // rows (episodes): [1, 10, 5], [3, 20, NaN]
    const c = columnBands([1, 10, 5, 3, 20, NaN], 2, 3, 'range');
    expect(c.map((b) => [b.n, b.mean, b.lo, b.hi])).toEqual([
      [2, 2, 1, 3],
      [2, 15, 10, 20],
      [1, 5, NaN, NaN],
    ]);
    expect(() => columnBands([1, 2, 3], 2, 2, 'sd')).toThrow(/3 values is not 2 rows x 2 columns/);
  });
});

describe('histogram', () => {
  it('counts by hand: half-open bins, the upper edge in the last bin, outside and NaN apart', () => {
    const h = histogram([-1, -0.5, -0.25, 0, 0.49, 0.5, 1, 1.5, NaN], 4, -1, 1);
    // edges -1, -0.5, 0, 0.5, 1: [-1,-0.5) {-1}; [-0.5,0) {-0.5,-0.25}; [0,0.5) {0,0.49}; [0.5,1] {0.5,1}
    expect(Array.from(h.edges)).toEqual([-1, -0.5, 0, 0.5, 1]);
    expect(Array.from(h.counts)).toEqual([1, 2, 2, 2]);
    expect([h.below, h.above, h.missing, h.total]).toEqual([0, 1, 1, 7]);
    expect(histogram([-2], 2, -1, 1).below).toBe(1);
    expect(() => histogram([0], 0, -1, 1)).toThrow(/bins must be an integer >= 1/);
    expect(() => histogram([0], 3, 1, 1)).toThrow(/finite lo < hi/);
  });

  it('equals jstat.histogram over [min, max] on seeded samples', () => {
    for (const bins of [1, 5, 21, 40]) {
      const x = normals(bins, 1000);
      const h = histogram(x, bins, ss.min(x), ss.max(x));
      expect(Array.from(h.counts)).toEqual(jStat.histogram(x, bins));
      expect(h.total).toBe(1000);
    }
  });

  it('histogram2d by hand; its marginals are the 1-D histograms (jstat) of each coordinate', () => {
    const h = histogram2d([0.1, 0.9, 0.9, 0.6, 2], [0.1, 0.1, 0.9, 0.4, 0.5], 2, 2, [0, 1], [0, 1]);
    // cells [y][x]: (0,0) {(.1,.1)}, (0,1) {(.9,.1), (.6,.4)}, (1,1) {(.9,.9)}; x = 2 outside
    expect(Array.from(h.counts)).toEqual([1, 2, 0, 1]);
    expect([h.outside, h.total]).toEqual([1, 4]);
    const x = normals(11, 800);
    const y = normals(12, 800);
    const xr: [number, number] = [ss.min(x), ss.max(x)];
    const yr: [number, number] = [ss.min(y), ss.max(y)];
    const g = histogram2d(x, y, 7, 5, xr, yr);
    const colSums = Array.from({ length: 7 }, (_, i) => Array.from({ length: 5 }, (_, j) => g.counts[j * 7 + i]!).reduce((a, b) => a + b, 0));
    const rowSums = Array.from({ length: 5 }, (_, j) => Array.from(g.counts.subarray(j * 7, (j + 1) * 7)).reduce((a, b) => a + b, 0));
    expect(colSums).toEqual(jStat.histogram(x, 7));
    expect(rowSums).toEqual(jStat.histogram(y, 5));
    expect(() => histogram2d([1], [1, 2], 2, 2, [0, 1], [0, 1])).toThrow(/one length/);
  });
});

describe('binnedMeans (learning curves on a common step grid)', () => {
  it('by hand, and each bin equals simple-statistics mean of its values', () => {
    const x = [0, 1, 2, 3, 4, 10];
    const y = [1, 2, 3, NaN, 5, 7];
    const m = binnedMeans(x, y, [0, 2, 4, 10]);
    // [0,2): {1,2} -> 1.5; [2,4): {3} (NaN skipped) -> 3; [4,10]: {5,7} -> 6
    expect(Array.from(m)).toEqual([1.5, 3, 6]);
    expect(Number.isNaN(binnedMeans([5], [1], [0, 1, 2])[0]!)).toBe(true);
    const xs = normals(5, 300, 50, 20).map((v) => Math.abs(v));
    const ys = normals(6, 300);
    const edges = [0, 25, 50, 75, 200];
    const got = binnedMeans(xs, ys, edges);
    for (let b = 0; b < 4; b++) {
      const inBin = ys.filter((_, k) => xs[k]! >= edges[b]! && (b === 3 ? xs[k]! <= edges[b + 1]! : xs[k]! < edges[b + 1]!));
      expect(got[b]).toBeCloseTo(ss.mean(inBin), 12);
    }
  });

  it('curveBands: runs with the same steps -> values per step, band over runs; different steps -> step bins', () => {
    const a = [
      { x: 10, y: 1 },
      { x: 20, y: 2 },
    ];
    const b = [
      { x: 10, y: 3 },
      { x: 20, y: 6 },
    ];
    const r = curveBands([a, b], 'range');
    expect(r).toEqual([
      { x: 10, mean: 2, lo: 1, hi: 3, n: 2 },
      { x: 20, mean: 4, lo: 2, hi: 6, n: 2 },
    ]);
    // ci95 over two runs: t(0.975, 1) = 12.706205 (Student-t table) times s/sqrt(2)
    const c = curveBands([a, b], 'ci95');
    expect(c[0]!.hi - c[0]!.mean).toBeCloseTo(12.706204736, 6); // s = sqrt(2), so s / sqrt(2) = 1
    expect(c[0]!.hi - c[0]!.mean).toBeCloseTo(jStat.studentt.inv(0.975, 1) * (ss.sampleStandardDeviation([1, 3]) / Math.SQRT2), 7);
    // One run keeps its own interval (validation points carry one).
    expect(curveBands([[{ x: 5, y: 0.5, lo: 0.4, hi: 0.7 }]], 'ci95')).toEqual([{ x: 5, mean: 0.5, lo: 0.4, hi: 0.7, n: 1 }]);
    // Different steps: 4 bins over [0, 40] (centres 5, 15, 25, 35).
    const d = curveBands(
      [
        [
          { x: 0, y: 1 },
          { x: 40, y: 3 },
        ],
        [
          { x: 12, y: 5 },
          { x: 38, y: 7 },
        ],
      ],
      'range',
      4,
    );
    expect(d).toEqual([
      { x: 5, mean: 1, lo: NaN, hi: NaN, n: 1 },
      { x: 15, mean: 5, lo: NaN, hi: NaN, n: 1 },
      { x: 35, mean: 5, lo: 3, hi: 7, n: 2 },
    ]);
  });
});

describe('pairedDifference (policy against a baseline on the same initial states)', () => {
  it('by hand: differences [-0.1, -0.2, -0.3] give -0.2 ± t(0.975, 2) 0.1/sqrt(3) = 0.248414', () => {
    const p = pairedDifference([0.5, 0.6, 0.4], [0.6, 0.8, 0.7]);
    expect(p.n).toBe(3);
    expect(p.mean).toBeCloseTo(-0.2, 12);
    expect(p.halfWidth).toBeCloseTo((4.302652729 * 0.1) / Math.sqrt(3), 6); // t table, 2 dof
  });

  it('equals jstat.tci of the differences; pairs with a NaN side are skipped', () => {
    const shared = normals(21, 12, 1, 0.5);
    const na = normals(22, 12, 0, 0.05);
    const nb = normals(23, 12, 0, 0.05);
    const a = shared.map((s, i) => s + na[i]! - 0.1);
    const b = shared.map((s, i) => s + nb[i]!);
    const p = pairedDifference(a, b);
    const d = a.map((x, i) => x - b[i]!);
    const [lo, hi] = jStat.tci(ss.mean(d), 0.05, d);
    expect(p.mean - p.halfWidth).toBeCloseTo(lo, 8);
    expect(p.mean + p.halfWidth).toBeCloseTo(hi, 8);
    // The shared variation between initial states cancels: the paired interval is far narrower.
    const unpaired = band(a, 'ci95');
    expect(p.halfWidth).toBeLessThan(0.25 * (unpaired.hi - unpaired.mean));
    expect(pairedDifference([1, NaN, 3], [0, 5, 1])).toMatchObject({ n: 2, mean: 1.5 });
  });
});

describe('boundShares (time at the bounds)', () => {
  it('by hand, with the float32 rounding of a clipped amplitude counted at its bound', () => {
    const s = boundShares([-0.5, -0.2, 0, 0.5, 0.49, 0.5, NaN], 0.5);
    expect(s.n).toBe(6);
    expect(s.lower).toBeCloseTo(1 / 6, 15);
    expect(s.upper).toBeCloseTo(2 / 6, 15);
    expect(s.atBounds).toBeCloseTo(3 / 6, 15);
    // 0.3 is not a float32: Math.fround(0.3) is just above it, Math.fround(-0.3) just below.
    const f = boundShares(Float32Array.from([0.3, -0.3, 0.2999]), 0.3);
    expect([f.upper, f.lower]).toEqual([1 / 3, 1 / 3]);
  });
});

describe('quadrant fractions (fluctuationStats of @tilewise/envs, as the report calls it)', () => {
  const samples = (a: number[], b: number[]) => ({ names: ["u'", "v'"] as [string, string], a: Float64Array.from(a), b: Float64Array.from(b), cls: new Int32Array(a.length), classes: 1, snapshots: 1 });

  it('by hand: six zero-mean pairs', () => {
    // (2,1) Q1; (-1,1) Q2; (-1,-2) Q3; (1,-1) Q4; (-2,2) Q2; (1,-1) Q4
    const a = [2, -1, -1, 1, -2, 1];
    const b = [1, 1, -2, -1, 2, -1];
    const q = quadrantRow('hand', samples(a, b));
    expect(q.fractions).toEqual([1 / 6, 2 / 6, 1 / 6, 2 / 6]);
    // products 2, -1, 2, -1, -4, -1: Q1 2/6, Q2 -5/6, Q3 2/6, Q4 -2/6, sum <u'v'> = -1/2
    q.stress.forEach((s, i) => expect(s).toBeCloseTo([2 / 6, -5 / 6, 2 / 6, -2 / 6][i]!, 14));
    // <u'v'> is the population covariance: simple-statistics sampleCovariance * (n-1)/n
    expect(q.stress.reduce((x, y) => x + y, 0)).toBeCloseTo((ss.sampleCovariance(a, b) * 5) / 6, 14);
    expect(q.correlation).toBeCloseTo(ss.sampleCorrelation(a, b), 12);
    expect(q.rmsA).toBeCloseTo(Math.sqrt(12 / 6), 14);
  });

  it("Gaussian pairs with correlation 0.6: Q1 = Q3 = 1/4 + asin(rho)/(2 pi), Sheppard 1899, within 4 binomial SE", () => {
    const n = 40000;
    const rho = 0.6;
    const z1 = normals(31, n);
    const z2 = normals(32, n);
    const a = z1;
    const b = z1.map((z, i) => rho * z + Math.sqrt(1 - rho * rho) * z2[i]!);
    const q = quadrantRow('gauss', samples(a, b));
    const p13 = 0.25 + Math.asin(rho) / (2 * Math.PI);
    const p24 = 0.5 - p13;
    const se = Math.sqrt((p13 * (1 - p13)) / n);
    expect(Math.abs(q.fractions[0] - p13)).toBeLessThan(4 * se);
    expect(Math.abs(q.fractions[2] - p13)).toBeLessThan(4 * se);
    expect(Math.abs(q.fractions[1] - p24)).toBeLessThan(4 * se);
    expect(Math.abs(q.fractions[3] - p24)).toBeLessThan(4 * se);
    expect(q.correlation).toBeCloseTo(ss.sampleCorrelation(a, b), 10);
  });
});

describe('fluctuation samples from field snapshots', () => {
  /** A one-controller KS domain whose snapshots are given (only the fields the function reads). */
  function ksDomain(snaps: number[][], decisions: number[], discard: number, episodes: number[] = decisions.map(() => 0), diverged: boolean[] = [false]): { d: DomainView; c: ControllerView } {
    const n = snaps[0]!.length;
    const field = Float32Array.from(snaps.flat());
    const fieldIndex = Int32Array.from(decisions.flatMap((k, i) => [episodes[i]!, k]));
    const domain = { dir: '/x', summary: { protocol: { discardDecisions: discard } } };
    const summary = { perEpisode: diverged.map((dv) => ({ diverged: dv })) };
    const c = { id: 'c', role: 'none', entries: [{ domain, summary, series: { field, fieldIndex, fieldSize: n } }] } as unknown as ControllerView;
    const d = { kind: 'ks', env: { points: n, length: 2 * Math.PI * 2 } } as unknown as DomainView;
    return { d, c };
  }

  it("KS: u' and the spectral slope u_x, snapshots before the transient's end left out (sin -> cos exactly)", () => {
    const n = 32;
    const L = 4 * Math.PI;
    const x = Array.from({ length: n }, (_, j) => (j * L) / n);
    const u = x.map((v) => 1 + Math.sin((2 * Math.PI * v) / L)); // mean 1, slope (2 pi / L) cos
    const junk = x.map(() => 100);
    const { d, c } = ksDomain([junk, u], [0, 10], 5);
    const s = fluctuationSamples(d, c)!;
    expect(s.snapshots).toBe(1);
    expect(s.names).toEqual(["u'", 'u_x']);
    x.forEach((v, j) => {
      expect(s.a[j]).toBeCloseTo(Math.sin((2 * Math.PI * v) / L), 6); // float32 snapshot
      expect(s.b[j]).toBeCloseTo(((2 * Math.PI) / L) * Math.cos((2 * Math.PI * v) / L), 6);
    });
    const early = ksDomain([u], [0], 5); // its only snapshot is inside the transient
    expect(fluctuationSamples(early.d, early.c)).toBeNull();
    // A diverged episode's snapshots (a zeroed state) are left out, as in the evaluation's statistics.
    const zeros = x.map(() => 0);
    const two = ksDomain([u, zeros], [10, 10], 5, [0, 1], [false, true]);
    const t = fluctuationSamples(two.d, two.c)!;
    expect(t.snapshots).toBe(1);
    expect(t.a.length).toBe(n);
  });
});
