/**
 * Small statistics used by baselines, evaluation tables and reference (P0) measurements.
 *
 * The Student-t quantile is computed here rather than taken from a registry package: the
 * well-kept JavaScript implementations pull in hundreds of transitive packages for one
 * function. It is the root of the t CDF, written with the regularised incomplete beta
 * function (Abramowitz & Stegun 1964, eq. 26.7.1 with 26.5.27), evaluated by its continued
 * fraction with the modified Lentz method (Press et al., Numerical Recipes, 3rd ed. 2007,
 * sec. 6.4), and is tested against tabulated quantiles.
 */

/** ln Gamma(x), x > 0 (Lanczos approximation, g = 7, n = 9; relative error ~1e-15). */
export function logGamma(x: number): number {
  const c = [
    0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059,
    12.507343278686905, -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
  ];
  if (x < 0.5) return Math.log(Math.PI / Math.sin(Math.PI * x)) - logGamma(1 - x); // reflection
  const z = x - 1;
  let a = c[0]!;
  const t = z + 7.5;
  for (let i = 1; i < 9; i++) a += c[i]! / (z + i);
  return 0.5 * Math.log(2 * Math.PI) + (z + 0.5) * Math.log(t) - t + Math.log(a);
}

/** Continued fraction of the incomplete beta function (modified Lentz). */
function betaContinuedFraction(a: number, b: number, x: number): number {
  const tiny = 1e-300;
  let c = 1;
  let d = 1 - ((a + b) * x) / (a + 1);
  if (Math.abs(d) < tiny) d = tiny;
  d = 1 / d;
  let h = d;
  for (let m = 1; m <= 1000; m++) {
    const m2 = 2 * m;
    let aa = (m * (b - m) * x) / ((a + m2 - 1) * (a + m2));
    d = 1 + aa * d;
    if (Math.abs(d) < tiny) d = tiny;
    c = 1 + aa / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    h *= d * c;
    aa = (-(a + m) * (a + b + m) * x) / ((a + m2) * (a + m2 + 1));
    d = 1 + aa * d;
    if (Math.abs(d) < tiny) d = tiny;
    c = 1 + aa / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    const del = d * c;
    h *= del;
    if (Math.abs(del - 1) < 1e-16) break;
  }
  return h;
}

/** Regularised incomplete beta function I_x(a, b), 0 <= x <= 1. */
export function regularizedBeta(x: number, a: number, b: number): number {
  if (x <= 0) return 0;
  if (x >= 1) return 1;
  const lnFront = logGamma(a + b) - logGamma(a) - logGamma(b) + a * Math.log(x) + b * Math.log(1 - x);
  if (x < (a + 1) / (a + b + 2)) return (Math.exp(lnFront) * betaContinuedFraction(a, b, x)) / a;
  return 1 - (Math.exp(lnFront) * betaContinuedFraction(b, a, 1 - x)) / b;
}

/** CDF of Student's t with nu degrees of freedom. */
export function studentTCdf(t: number, nu: number): number {
  const x = nu / (nu + t * t);
  const tail = 0.5 * regularizedBeta(x, nu / 2, 0.5);
  return t >= 0 ? 1 - tail : tail;
}

/** Quantile of Student's t: the t with CDF(t) = p, 0 < p < 1, nu > 0. */
export function studentTQuantile(p: number, nu: number): number {
  if (!(p > 0 && p < 1)) throw new Error(`studentTQuantile: p must be in (0, 1), got ${p}`);
  if (!(nu > 0)) throw new Error(`studentTQuantile: degrees of freedom must be positive, got ${nu}`);
  if (p < 0.5) return -studentTQuantile(1 - p, nu);
  let lo = 0;
  let hi = 1;
  while (studentTCdf(hi, nu) < p) hi *= 2;
  for (let i = 0; i < 200 && hi - lo > 1e-14 * hi; i++) {
    const mid = 0.5 * (lo + hi);
    if (studentTCdf(mid, nu) < p) lo = mid;
    else hi = mid;
  }
  return 0.5 * (lo + hi);
}

/** Mean, sample standard deviation and a two-sided Student-t confidence interval. */
export interface MeanCi {
  readonly n: number;
  readonly mean: number;
  /** Sample standard deviation (n - 1 in the denominator); NaN for n < 2. */
  readonly sd: number;
  /** Standard error sd / sqrt(n). */
  readonly stdErr: number;
  /** Half-width of the confidence interval: t_{(1+level)/2, n-1} * stdErr; NaN for n < 2. */
  readonly halfWidth: number;
  readonly level: number;
}

/** Mean of independent samples with a Student-t confidence interval at `level` (default 0.95). */
export function meanWithCi(xs: ArrayLike<number>, level = 0.95): MeanCi {
  const n = xs.length;
  if (n === 0) throw new Error('meanWithCi: no samples');
  let mean = 0;
  for (let i = 0; i < n; i++) mean += xs[i]!;
  mean /= n;
  if (n < 2) return { n, mean, sd: NaN, stdErr: NaN, halfWidth: NaN, level };
  let ss = 0;
  for (let i = 0; i < n; i++) ss += (xs[i]! - mean) ** 2;
  const sd = Math.sqrt(ss / (n - 1));
  const stdErr = sd / Math.sqrt(n);
  return { n, mean, sd, stdErr, halfWidth: studentTQuantile((1 + level) / 2, n - 1) * stdErr, level };
}
