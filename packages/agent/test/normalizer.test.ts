import { Rng } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { RunningNormalizer } from '../src/normalizer';

/** Two-pass mean and population variance in Float64 over all rows: the textbook reference. */
function twoPass(rows: Float32Array[], dim: number) {
  let n = 0;
  const mean = new Float64Array(dim);
  for (const r of rows) for (let i = 0; i < r.length; i++) mean[i % dim]! += r[i]!;
  for (const r of rows) n += r.length / dim;
  for (let j = 0; j < dim; j++) mean[j]! /= n;
  const v = new Float64Array(dim);
  for (const r of rows) for (let i = 0; i < r.length; i++) v[i % dim]! += (r[i]! - mean[i % dim]!) ** 2;
  for (let j = 0; j < dim; j++) v[j]! /= n;
  return { n, mean, v };
}

describe('running observation normaliser (Chan, Golub & LeVeque pairwise update)', () => {
  it('matches a two-pass Float64 computation over uneven batches, even with a large offset', () => {
    // Component 0: N(0, 1); component 1: 1e6 + N(0, 0.64^2) (mean >> std: a sum-of-squares
    // formula, n sum x^2 - (sum x)^2, would cancel about 12 of float64's 16 digits); component
    // 2: U[-3, 3).
    const dim = 3;
    const rng = new Rng('normalizer');
    const norm = new RunningNormalizer(dim, 1e9, 1e-8);
    const all: Float32Array[] = [];
    for (const rowsInBatch of [1, 7, 64, 3, 200, 1, 33]) {
      const x = new Float32Array(rowsInBatch * dim);
      for (let r = 0; r < rowsInBatch; r++) {
        x[r * dim] = rng.normal();
        x[r * dim + 1] = 1e6 + 0.64 * rng.normal(); // float32 spacing at 1e6 is 0.0625
        x[r * dim + 2] = rng.uniformIn(-3, 3);
      }
      norm.update(x, rowsInBatch);
      all.push(x);
    }
    const ref = twoPass(all, dim);
    expect(norm.count).toBe(ref.n);
    for (let j = 0; j < dim; j++) {
      expect(Math.abs(norm.mean[j]! - ref.mean[j]!) / Math.abs(ref.mean[j]!)).toBeLessThan(1e-13);
      expect(Math.abs(norm.variance(j) - ref.v[j]!) / ref.v[j]!).toBeLessThan(1e-10);
    }
  });

  it('normalises, clips, and stops updating when frozen', () => {
    const norm = new RunningNormalizer(2, 2, 1e-8);
    norm.update(new Float32Array([0, 10, 2, 10, 4, 10]), 3); // comp 0: mean 2, var 8/3; comp 1 constant
    const out = new Float32Array(4);
    norm.normalize(new Float32Array([4, 10, 100, 11]), 2, out);
    expect(out[0]).toBeCloseTo(2 / Math.sqrt(8 / 3), 6);
    expect(out[1]).toBe(0); // constant component: (x - mean) = 0, no division blow-up
    expect(out[2]).toBe(2); // clipped
    expect(out[3]).toBe(2); // 1 / sqrt(1e-8) clipped
    norm.frozen = true;
    norm.update(new Float32Array([1000, 1000]), 1);
    expect(norm.count).toBe(3);
    expect(norm.mean[0]).toBe(2);
  });

  it('saves and restores exactly', () => {
    const a = new RunningNormalizer(2, 5, 1e-8);
    a.update(new Float32Array([1, 2, 3, 5, 8, 13]), 3);
    const b = new RunningNormalizer(2, 5, 1e-8);
    b.setState(a.getState());
    const x = new Float32Array([0.3, -7]);
    const oa = new Float32Array(2);
    const ob = new Float32Array(2);
    a.normalize(x, 1, oa);
    b.normalize(x, 1, ob);
    expect(ob).toEqual(oa);
    expect(() => new RunningNormalizer(3, 5, 1e-8).setState(a.getState())).toThrow(/saved dimension 2/);
  });
});
