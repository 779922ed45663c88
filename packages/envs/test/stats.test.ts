import { describe, expect, it } from 'vitest';
import { logGamma, meanWithCi, regularizedBeta, studentTCdf, studentTQuantile } from '../src/stats';

describe('Student t', () => {
  it('quantiles match the standard table (Abramowitz & Stegun 1964, Table 26.10; values recalled from memory)', () => {
    // t_{0.975, nu}
    const table: Array<[number, number]> = [
      [1, 12.706],
      [2, 4.303],
      [3, 3.182],
      [4, 2.776],
      [5, 2.571],
      [9, 2.262],
      [10, 2.228],
      [19, 2.093],
      [30, 2.042],
      [60, 2.0],
      [120, 1.98],
    ];
    for (const [nu, t] of table) expect(studentTQuantile(0.975, nu)).toBeCloseTo(t, 3);
    // t_{0.995, 10} = 3.169, t_{0.95, 5} = 2.015 (same table).
    expect(studentTQuantile(0.995, 10)).toBeCloseTo(3.169, 3);
    expect(studentTQuantile(0.95, 5)).toBeCloseTo(2.015, 3);
  });

  it('closed forms: nu = 1 is Cauchy, nu = 2 has t = (2p-1) sqrt(2/(4p(1-p)))', () => {
    // Cauchy quantile tan(pi (p - 1/2)); nu = 2 closed form (e.g. Hill 1970, Comm. ACM 13(10)).
    for (const p of [0.6, 0.9, 0.975, 0.999]) {
      expect(studentTQuantile(p, 1)).toBeCloseTo(Math.tan(Math.PI * (p - 0.5)), 9);
      expect(studentTQuantile(p, 2)).toBeCloseTo(((2 * p - 1) * Math.sqrt(2)) / Math.sqrt(4 * p * (1 - p)), 9);
    }
    expect(studentTQuantile(0.025, 7)).toBeCloseTo(-studentTQuantile(0.975, 7), 12);
    expect(studentTCdf(0, 5)).toBeCloseTo(0.5, 14);
  });

  it('ln Gamma and I_x(a, b) agree with exact values', () => {
    expect(logGamma(5)).toBeCloseTo(Math.log(24), 13);
    expect(logGamma(0.5)).toBeCloseTo(0.5 * Math.log(Math.PI), 13);
    // I_x(1, 1) = x; I_x(a, 1) = x^a; symmetry I_x(a, b) = 1 - I_{1-x}(b, a).
    expect(regularizedBeta(0.3, 1, 1)).toBeCloseTo(0.3, 14);
    expect(regularizedBeta(0.3, 2.5, 1)).toBeCloseTo(0.3 ** 2.5, 13);
    expect(regularizedBeta(0.2, 3, 4.5)).toBeCloseTo(1 - regularizedBeta(0.8, 4.5, 3), 13);
  });

  it('meanWithCi gives mean, sample sd and t-interval; rejects empty input', () => {
    const r = meanWithCi([1, 2, 3, 4]);
    expect(r.mean).toBe(2.5);
    expect(r.sd).toBeCloseTo(Math.sqrt(5 / 3), 14);
    expect(r.halfWidth).toBeCloseTo(studentTQuantile(0.975, 3) * (Math.sqrt(5 / 3) / 2), 12);
    expect(Number.isNaN(meanWithCi([1]).halfWidth)).toBe(true);
    expect(() => meanWithCi([])).toThrow(/no samples/);
  });
});
