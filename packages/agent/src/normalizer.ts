/**
 * Running observation normaliser: per-component mean and variance over every observation
 * seen, merged batch by batch with the pairwise update of Chan, Golub & LeVeque
 * ("Updating formulae and a pairwise algorithm for computing sample variances", 1979
 * Stanford report STAN-CS-79-773; "Algorithms for computing the sample variance: analysis
 * and recommendations", The American Statistician 37(3), 1983). For sets A and B with
 * counts nA, nB, means mA, mB and sums of squared deviations M2A, M2B:
 *   n = nA + nB,  delta = mB - mA,
 *   mean = mA + delta nB / n,  M2 = M2A + M2B + delta^2 nA nB / n.
 * Each batch's own mean and M2 come from two passes over it, so no sum of squares of raw
 * values is ever formed (that is what loses precision when |mean| >> std).
 *
 * State in Float64: mean [dim], m2 [dim], count. Variance is the population variance M2/n.
 * Normalised value: clip((x - mean) / sqrt(var + eps), -clip, clip), written to float32.
 * `frozen` stops updates (evaluation, export); the statistics are saved with the policy.
 */

export interface NormalizerState {
  readonly dim: number;
  readonly count: number;
  readonly frozen: boolean;
  readonly mean: Float64Array;
  readonly m2: Float64Array;
}

export class RunningNormalizer {
  readonly mean: Float64Array;
  readonly m2: Float64Array;
  count = 0;
  frozen = false;
  private readonly bMean: Float64Array;
  private readonly bM2: Float64Array;
  /** 1 / sqrt(var + eps) per component, refreshed after every update. */
  private readonly invStd: Float64Array;

  constructor(
    readonly dim: number,
    readonly clip: number,
    readonly eps: number,
  ) {
    if (!Number.isInteger(dim) || dim < 1) throw new Error(`RunningNormalizer: dim must be a positive integer, got ${dim}`);
    if (!(clip > 0)) throw new Error(`RunningNormalizer: clip must be positive, got ${clip}`);
    if (!(eps > 0)) throw new Error(`RunningNormalizer: eps must be positive, got ${eps}`);
    this.mean = new Float64Array(dim);
    this.m2 = new Float64Array(dim);
    this.bMean = new Float64Array(dim);
    this.bM2 = new Float64Array(dim);
    this.invStd = new Float64Array(dim).fill(1 / Math.sqrt(1 + eps));
    this.refresh();
  }

  /** Population variance of component j (1 before any data, so normalising is then a no-op shift). */
  variance(j: number): number {
    return this.count > 0 ? this.m2[j]! / this.count : 1;
  }

  /** Merge `rows` observations x [rows, dim] into the statistics (no-op when frozen). */
  update(x: Float32Array, rows: number): void {
    if (this.frozen || rows === 0) return;
    const d = this.dim;
    const { bMean, bM2 } = this;
    bMean.fill(0);
    bM2.fill(0);
    for (let r = 0; r < rows; r++) for (let j = 0; j < d; j++) bMean[j]! += x[r * d + j]!;
    for (let j = 0; j < d; j++) bMean[j]! /= rows;
    for (let r = 0; r < rows; r++) {
      for (let j = 0; j < d; j++) {
        const e = x[r * d + j]! - bMean[j]!;
        bM2[j]! += e * e;
      }
    }
    const nA = this.count;
    const n = nA + rows;
    for (let j = 0; j < d; j++) {
      const delta = bMean[j]! - this.mean[j]!;
      this.mean[j] = this.mean[j]! + (delta * rows) / n;
      this.m2[j] = this.m2[j]! + bM2[j]! + (delta * delta * nA * rows) / n;
    }
    this.count = n;
    this.refresh();
  }

  private refresh(): void {
    for (let j = 0; j < this.dim; j++) this.invStd[j] = 1 / Math.sqrt(this.variance(j) + this.eps);
  }

  /** out[r, j] = clip((x[r, j] - mean_j) / sqrt(var_j + eps)) for `rows` rows. */
  normalize(x: Float32Array, rows: number, out: Float32Array): void {
    const d = this.dim;
    const c = this.clip;
    for (let r = 0; r < rows; r++) {
      for (let j = 0; j < d; j++) {
        const z = (x[r * d + j]! - this.mean[j]!) * this.invStd[j]!;
        out[r * d + j] = z > c ? c : z < -c ? -c : z;
      }
    }
  }

  getState(): NormalizerState {
    return { dim: this.dim, count: this.count, frozen: this.frozen, mean: this.mean.slice(), m2: this.m2.slice() };
  }

  setState(s: NormalizerState): void {
    if (s.dim !== this.dim || s.mean.length !== this.dim || s.m2.length !== this.dim) {
      throw new Error(`RunningNormalizer.setState: saved dimension ${s.dim} (mean ${s.mean.length}, m2 ${s.m2.length}) differs from ${this.dim}`);
    }
    if (!(s.count >= 0) || !Number.isFinite(s.count)) throw new Error(`RunningNormalizer.setState: count must be a finite non-negative number, got ${s.count}`);
    this.mean.set(s.mean);
    this.m2.set(s.m2);
    this.count = s.count;
    this.frozen = s.frozen;
    this.refresh();
  }
}
