/**
 * The statistics behind the report's figures and tables. Every figure shows a quantity
 * computed here (or by `meanWithCi` / `fluctuationStats` of @tilewise/envs), and
 * test/report-stats.test.ts checks each function against hand-computed cases and against
 * general-purpose statistics libraries (jstat, simple-statistics).
 *
 * Conventions:
 * - Missing values are NaN (a diverged episode's drag, a step bin without data); every
 *   function skips them and reports how many values it used (`n`).
 * - Confidence intervals are two-sided Student-t intervals, mean ± t_{(1+level)/2, n-1} s/sqrt(n)
 *   with the sample standard deviation s (n - 1 in the denominator), as in the evaluation tables.
 * - Histogram bins are half-open [e_i, e_{i+1}) except the last, which also holds its upper
 *   edge; edges are equally spaced on [lo, hi].
 */
import { meanWithCi } from '@tilewise/envs';

/** How a band around a mean is drawn: Student-t 95% interval, ± one standard deviation, or min..max. */
export type BandKind = 'ci95' | 'sd' | 'range';
export const BAND_KINDS: readonly BandKind[] = ['ci95', 'sd', 'range'];

/** Words for a band kind, for captions. */
export function bandWords(kind: BandKind, over: string): string {
  if (kind === 'ci95') return `Student-t 95% confidence interval over ${over}`;
  if (kind === 'sd') return `mean ± one sample standard deviation over ${over}`;
  return `minimum to maximum over ${over}`;
}

/** A mean with a band; lo/hi are NaN when the band needs more values than there are (n < 2). */
export interface Banded {
  readonly n: number;
  readonly mean: number;
  readonly lo: number;
  readonly hi: number;
}

/** Mean and band of the finite values of `xs` (NaN skipped); n = 0 gives NaN everywhere. */
export function band(xs: ArrayLike<number>, kind: BandKind): Banded {
  const v: number[] = [];
  for (let i = 0; i < xs.length; i++) if (Number.isFinite(xs[i]!)) v.push(xs[i]!);
  const n = v.length;
  if (n === 0) return { n, mean: NaN, lo: NaN, hi: NaN };
  if (kind === 'range') {
    let lo = Infinity;
    let hi = -Infinity;
    let s = 0;
    for (const x of v) {
      s += x;
      if (x < lo) lo = x;
      if (x > hi) hi = x;
    }
    return n < 2 ? { n, mean: s / n, lo: NaN, hi: NaN } : { n, mean: s / n, lo, hi };
  }
  const m = meanWithCi(v);
  const half = kind === 'ci95' ? m.halfWidth : m.sd;
  return { n, mean: m.mean, lo: m.mean - half, hi: m.mean + half };
}

/**
 * Column-wise bands of a row-major matrix [rows, cols] (e.g. drag [episodes, decisions]):
 * for each column, the band over the rows' finite values.
 */
export function columnBands(values: ArrayLike<number>, rows: number, cols: number, kind: BandKind): Banded[] {
  if (values.length !== rows * cols) throw new Error(`columnBands: ${values.length} values is not ${rows} rows x ${cols} columns`);
  const col = new Float64Array(rows);
  const out: Banded[] = [];
  for (let c = 0; c < cols; c++) {
    for (let r = 0; r < rows; r++) col[r] = values[r * cols + c]!;
    out.push(band(col, kind));
  }
  return out;
}

/** Counts of `values` in `bins` equal bins on [lo, hi]; values outside go to `below`/`above`, NaN to `missing`. */
export interface Histogram {
  readonly lo: number;
  readonly hi: number;
  /** bins + 1 edges. */
  readonly edges: Float64Array;
  readonly counts: Float64Array;
  readonly below: number;
  readonly above: number;
  readonly missing: number;
  /** Values counted in the bins. */
  readonly total: number;
}

function checkRange(what: string, bins: number, lo: number, hi: number): void {
  if (!Number.isInteger(bins) || bins < 1) throw new Error(`${what}: bins must be an integer >= 1, got ${bins}`);
  if (!(Number.isFinite(lo) && Number.isFinite(hi) && hi > lo)) throw new Error(`${what}: expected finite lo < hi, got [${lo}, ${hi}]`);
}

/** Bin index of x on [lo, hi] in `bins` bins (the upper edge belongs to the last bin), or -1 / bins outside. */
function binOf(x: number, lo: number, hi: number, bins: number): number {
  if (x < lo) return -1;
  if (x > hi) return bins;
  return Math.min(bins - 1, Math.floor(((x - lo) / (hi - lo)) * bins));
}

export function histogram(values: ArrayLike<number>, bins: number, lo: number, hi: number): Histogram {
  checkRange('histogram', bins, lo, hi);
  const counts = new Float64Array(bins);
  let below = 0;
  let above = 0;
  let missing = 0;
  for (let i = 0; i < values.length; i++) {
    const x = values[i]!;
    if (Number.isNaN(x)) {
      missing++;
      continue;
    }
    const b = binOf(x, lo, hi, bins);
    if (b < 0) below++;
    else if (b >= bins) above++;
    else counts[b]! += 1;
  }
  const edges = new Float64Array(bins + 1);
  for (let i = 0; i <= bins; i++) edges[i] = lo + ((hi - lo) * i) / bins;
  return { lo, hi, edges, counts, below, above, missing, total: values.length - below - above - missing };
}

/**
 * Joint histogram of pairs (x[k], y[k]) on [xLo, xHi] x [yLo, yHi], `bx` x `by` cells, counts
 * row-major [by][bx] (x fastest). Pairs with a coordinate outside its range or NaN are
 * counted in `outside`. Each axis follows `histogram`'s edge rule, so the row sums equal
 * the 1-D histogram of y and the column sums that of x (over the pairs inside).
 */
export interface Histogram2d {
  readonly bx: number;
  readonly by: number;
  readonly xEdges: Float64Array;
  readonly yEdges: Float64Array;
  readonly counts: Float64Array;
  readonly outside: number;
  readonly total: number;
}

export function histogram2d(x: ArrayLike<number>, y: ArrayLike<number>, bx: number, by: number, xr: readonly [number, number], yr: readonly [number, number]): Histogram2d {
  if (x.length !== y.length) throw new Error(`histogram2d: x and y must have one length, got ${x.length} and ${y.length}`);
  checkRange('histogram2d (x)', bx, xr[0], xr[1]);
  checkRange('histogram2d (y)', by, yr[0], yr[1]);
  const counts = new Float64Array(bx * by);
  let outside = 0;
  for (let k = 0; k < x.length; k++) {
    const i = binOf(x[k]!, xr[0], xr[1], bx);
    const j = binOf(y[k]!, yr[0], yr[1], by);
    if (Number.isNaN(x[k]!) || Number.isNaN(y[k]!) || i < 0 || i >= bx || j < 0 || j >= by) outside++;
    else counts[j * bx + i]! += 1;
  }
  const edges = (r: readonly [number, number], b: number): Float64Array => Float64Array.from({ length: b + 1 }, (_, i) => r[0] + ((r[1] - r[0]) * i) / b);
  return { bx, by, xEdges: edges(xr, bx), yEdges: edges(yr, by), counts, outside, total: x.length - outside };
}

/**
 * Means of y over bins of x: `edges` ascending, not necessarily equally spaced (bins + 1
 * values, bins half-open, the last edge inclusive);
 * NaN where a bin holds no finite y. Learning curves put runs whose logs have different
 * steps on one grid this way.
 */
export function binnedMeans(x: ArrayLike<number>, y: ArrayLike<number>, edges: ArrayLike<number>): Float64Array {
  if (x.length !== y.length) throw new Error(`binnedMeans: x and y must have one length, got ${x.length} and ${y.length}`);
  const bins = edges.length - 1;
  if (bins < 1) throw new Error('binnedMeans: need at least two edges');
  const sum = new Float64Array(bins);
  const cnt = new Float64Array(bins);
  for (let k = 0; k < x.length; k++) {
    const v = y[k]!;
    const xk = x[k]!;
    if (!Number.isFinite(v) || !(xk >= edges[0]! && xk <= edges[bins]!)) continue;
    // The last edge e with e <= x (binary search; edges need not be equally spaced).
    let lo = 0;
    let hi = bins;
    while (hi - lo > 1) {
      const mid = (lo + hi) >> 1;
      if (edges[mid]! <= xk) lo = mid;
      else hi = mid;
    }
    const b = lo;
    sum[b]! += v;
    cnt[b]! += 1;
  }
  return sum.map((s, b) => (cnt[b]! > 0 ? s / cnt[b]! : NaN));
}

/**
 * Paired comparison of two controllers on the same initial states: the mean of the
 * differences a[i] - b[i] with its Student-t interval (pairs with a NaN side are skipped).
 * Pairing removes the variation between initial states that both controllers share.
 */
export function pairedDifference(a: ArrayLike<number>, b: ArrayLike<number>, level = 0.95): { n: number; mean: number; halfWidth: number } {
  if (a.length !== b.length) throw new Error(`pairedDifference: ${a.length} and ${b.length} values do not pair up`);
  const d: number[] = [];
  for (let i = 0; i < a.length; i++) if (Number.isFinite(a[i]!) && Number.isFinite(b[i]!)) d.push(a[i]! - b[i]!);
  if (d.length === 0) return { n: 0, mean: NaN, halfWidth: NaN };
  const m = meanWithCi(d, level);
  return { n: m.n, mean: m.mean, halfWidth: m.halfWidth };
}

/** Share of actuator amplitudes at the lower bound, inside, and at the upper bound. */
export interface BoundShares {
  readonly n: number;
  readonly lower: number;
  readonly upper: number;
  /** lower + upper: the "at bounds" figure of the evaluation tables. */
  readonly atBounds: number;
}

/**
 * Where applied amplitudes sit relative to the bound: |a| >= bound counts as at a bound
 * (the evaluation's rule). `tolerance` absorbs the float32 rounding of recorded amplitudes
 * (a clipped value stored as float32 may land one ulp inside the float64 bound).
 */
export function boundShares(a: ArrayLike<number>, bound: number, tolerance = 1e-6): BoundShares {
  if (!(bound > 0)) throw new Error(`boundShares: bound must be positive, got ${bound}`);
  const edge = bound * (1 - tolerance);
  let n = 0;
  let lower = 0;
  let upper = 0;
  for (let i = 0; i < a.length; i++) {
    const x = a[i]!;
    if (Number.isNaN(x)) continue;
    n++;
    if (x >= edge) upper++;
    else if (x <= -edge) lower++;
  }
  return n === 0 ? { n, lower: NaN, upper: NaN, atBounds: NaN } : { n, lower: lower / n, upper: upper / n, atBounds: (lower + upper) / n };
}

/** Largest |x| over finite values (0 when there are none). */
export function maxAbs(xs: ArrayLike<number>): number {
  let m = 0;
  for (let i = 0; i < xs.length; i++) {
    const v = Math.abs(xs[i]!);
    if (Number.isFinite(v) && v > m) m = v;
  }
  return m;
}

/** Root mean square of the finite values (NaN when there are none). */
export function rms(xs: ArrayLike<number>): number {
  let s = 0;
  let n = 0;
  for (let i = 0; i < xs.length; i++) {
    const v = xs[i]!;
    if (!Number.isFinite(v)) continue;
    s += v * v;
    n++;
  }
  return n ? Math.sqrt(s / n) : NaN;
}
