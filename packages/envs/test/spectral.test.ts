import { describe, expect, it } from 'vitest';
import { SpectralDerivative, differentiateSpectrum, halfSpectrumWavenumbers, twoThirdsMask } from '../src/spectral';

/**
 * Exact derivatives of the trigonometric polynomial
 *   u(x) = sum_m (A_m cos(k_m x) + B_m sin(k_m x)),  k_m = 2 pi m / L,
 * d^p/dx^p cos(kx) = k^p cos(kx + p pi/2), d^p/dx^p sin(kx) = k^p sin(kx + p pi/2)
 * (calculus, exact), as the outside reference for spectral differentiation.
 */
function trigPoly(x: number, L: number, order: number, terms: Array<[number, number, number]>): number {
  let s = 0;
  for (const [m, A, B] of terms) {
    const k = (2 * Math.PI * m) / L;
    const sh = (order * Math.PI) / 2;
    s += k ** order * (A * Math.cos(k * x + sh) + B * Math.sin(k * x + sh));
  }
  return s;
}

describe('spectral derivatives', () => {
  const n = 64;
  const L = 22;
  // Modes well below Nyquist (32): differentiation is exact up to rounding.
  const terms: Array<[number, number, number]> = [
    [1, 0.7, -0.3],
    [3, 0.2, 0.5],
    [7, -0.1, 0.05],
    [20, 0.01, -0.02],
  ];

  it.each([0, 1, 2, 3, 4])('order %i equals the exact derivative of a trigonometric polynomial', (order) => {
    const batch = 2;
    const u = new Float64Array(n * batch);
    const exact = new Float64Array(n * batch);
    for (let j = 0; j < n; j++) {
      const x = (j * L) / n;
      for (let b = 0; b < batch; b++) {
        const scale = b + 1;
        u[j * batch + b] = scale * trigPoly(x, L, 0, terms);
        exact[j * batch + b] = scale * trigPoly(x, L, order, terms);
      }
    }
    const out = new Float64Array(n * batch);
    new SpectralDerivative(n, L).apply(u, order, out, batch);
    const kmax = (2 * Math.PI * 20) / L;
    const tol = 1e-13 * Math.max(1, kmax ** order) * 10;
    for (let i = 0; i < n * batch; i++) expect(Math.abs(out[i]! - exact[i]!)).toBeLessThan(tol);
  });

  it('zeroes the Nyquist entry for odd orders only', () => {
    const k = halfSpectrumWavenumbers(8, 2 * Math.PI);
    const re = new Float64Array(5).fill(1);
    const im = new Float64Array(5);
    const oRe = new Float64Array(5);
    const oIm = new Float64Array(5);
    differentiateSpectrum(k, 1, re, im, oRe, oIm);
    expect(oIm[4]).toBe(0);
    expect(oIm[3]).toBe(3);
    differentiateSpectrum(k, 2, re, im, oRe, oIm);
    expect(oRe[4]).toBe(-16);
  });

  it('2/3 mask keeps exactly the entries j < n/3', () => {
    expect(Array.from(twoThirdsMask(8))).toEqual([1, 1, 1, 0, 0]);
    const m = twoThirdsMask(64);
    expect(m[21]).toBe(1);
    expect(m[22]).toBe(0);
  });
});
