import { describe, expect, it } from 'vitest';
import { Fft2 } from '../src/fft2';
import { Rng } from '../src/random';

/**
 * Direct O((nx ny)^2) 2-D DFT, F(mx, my) = sum_{i,j} f(i,j) exp(-2 pi i (mx i/nx + my j/ny)),
 * evaluated term by term with the phase reduced exactly: the outside reference (the
 * definition itself) for the batched 2-D real FFT.
 */
function directDft2(f: (i: number, j: number) => number, nx: number, ny: number, mx: number, my: number): [number, number] {
  let sr = 0;
  let si = 0;
  for (let j = 0; j < ny; j++) {
    for (let i = 0; i < nx; i++) {
      // phase = 2 pi (mx i / nx + my j / ny), reduced modulo 1 turn in exact integer arithmetic
      const num = (((mx * i) % nx) * ny + ((my * j) % ny) * nx) % (nx * ny);
      const a = (-2 * Math.PI * num) / (nx * ny);
      sr += f(i, j) * Math.cos(a);
      si += f(i, j) * Math.sin(a);
    }
  }
  return [sr, si];
}

describe('Fft2 (2-D real FFT on fft.ts)', () => {
  it.each([
    [8, 4],
    [4, 8],
    [16, 16],
    [32, 8],
  ])('nx=%i ny=%i: half spectrum of 3 fields matches the direct 2-D DFT', (nx, ny) => {
    const fields = 3;
    const fft = new Fft2(nx, ny);
    const phys = new Float64Array(nx * ny * fields);
    new Rng(`fft2-${nx}-${ny}`).fillNormal(phys);
    const keep = phys.slice();
    const re = new Float64Array(fft.spectralSize * fields);
    const im = new Float64Array(fft.spectralSize * fields);
    fft.forward(phys, re, im, fields);
    expect(phys).toEqual(keep); // input untouched
    const tol = 1e-12 * nx * ny; // accumulated rounding of nx*ny-term sums (common practice)
    for (let c = 0; c < fields; c++) {
      const f = (i: number, j: number) => phys[(j * nx + i) * fields + c]!;
      for (let ix = 0; ix < nx; ix++) {
        const mx = ix <= nx / 2 ? ix : ix - nx;
        for (let my = 0; my < ny / 2 + 1; my++) {
          const [r, s] = directDft2(f, nx, ny, (mx + nx) % nx, my);
          const p = (my * nx + ix) * fields + c;
          expect(Math.abs(re[p]! - r)).toBeLessThan(tol);
          expect(Math.abs(im[p]! - s)).toBeLessThan(tol);
        }
      }
    }
    // Round trip.
    const back = new Float64Array(phys.length);
    fft.inverseInPlace(re, im, back, fields);
    for (let k = 0; k < phys.length; k++) expect(Math.abs(back[k]! - phys[k]!)).toBeLessThan(1e-13 * nx * ny);
  });

  it('band limit myKeep: forward zeroes my >= myKeep, inverse treats them as zero', () => {
    const nx = 16;
    const ny = 16;
    const full = new Fft2(nx, ny);
    const cut = new Fft2(nx, ny, 6);
    const phys = new Float64Array(nx * ny * 2);
    new Rng('fft2-keep').fillNormal(phys);
    const n = full.spectralSize * 2;
    const [ar, ai, br, bi] = [0, 1, 2, 3].map(() => new Float64Array(n)) as [Float64Array, Float64Array, Float64Array, Float64Array];
    full.forward(phys, ar, ai, 2);
    cut.forward(phys, br, bi, 2);
    for (let ix = 0; ix < nx; ix++) {
      for (let my = 0; my < full.nky; my++) {
        for (let c = 0; c < 2; c++) {
          const p = (my * nx + ix) * 2 + c;
          expect(br[p]).toBe(my < 6 ? ar[p] : 0);
          expect(bi[p]).toBe(my < 6 ? ai[p] : 0);
          if (my >= 6) {
            ar[p] = 0;
            ai[p] = 0;
            br[p] = 1e3; // ignored by the band-limited inverse
          }
        }
      }
    }
    const x = new Float64Array(phys.length);
    const y = new Float64Array(phys.length);
    full.inverseInPlace(ar, ai, x, 2);
    cut.inverseInPlace(br, bi, y, 2);
    for (let k = 0; k < x.length; k++) expect(Math.abs(x[k]! - y[k]!)).toBeLessThan(1e-13);
  });

  it('Parseval: sum of squares equals the weighted half-spectrum energy / (nx ny)', () => {
    const nx = 32;
    const ny = 16;
    const fft = new Fft2(nx, ny);
    const phys = new Float64Array(nx * ny);
    new Rng('fft2-parseval').fillNormal(phys);
    const re = new Float64Array(fft.spectralSize);
    const im = new Float64Array(fft.spectralSize);
    fft.forward(phys, re, im);
    let s = 0;
    for (const x of phys) s += x * x;
    let e = 0;
    for (let ix = 0; ix < nx; ix++) {
      for (let my = 0; my <= ny / 2; my++) {
        const w = my === 0 || my === ny / 2 ? 1 : 2;
        const p = my * nx + ix;
        e += w * (re[p]! ** 2 + im[p]! ** 2);
      }
    }
    expect(Math.abs(e / (nx * ny) - s)).toBeLessThan(1e-11 * s);
  });

  it('rejects arrays that are too short, naming the sizes', () => {
    const fft = new Fft2(8, 8);
    expect(() => fft.forward(new Float64Array(10), new Float64Array(80), new Float64Array(80))).toThrow(/physical array too short: need 64/);
  });
});
