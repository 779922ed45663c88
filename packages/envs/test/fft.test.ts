import FFT from 'fft.js';
import { describe, expect, it } from 'vitest';
import { ComplexFft, RealFft } from '../src/fft';
import { Rng } from '../src/random';

/**
 * Direct O(n^2) DFT, the definition X_k = sum_j x_j exp(-2 pi i jk/n) evaluated term by
 * term (with the angle reduced mod n exactly), as the outside reference for the FFTs.
 */
function directDft(xr: number[], xi: number[], sign: -1 | 1): { re: number[]; im: number[] } {
  const n = xr.length;
  const re: number[] = [];
  const im: number[] = [];
  for (let k = 0; k < n; k++) {
    let sr = 0;
    let si = 0;
    for (let j = 0; j < n; j++) {
      const a = (sign * 2 * Math.PI * ((j * k) % n)) / n;
      const c = Math.cos(a);
      const s = Math.sin(a);
      sr += xr[j]! * c - xi[j]! * s;
      si += xr[j]! * s + xi[j]! * c;
    }
    re.push(sr);
    im.push(si);
  }
  return { re, im };
}

function maxAbs(a: ArrayLike<number>): number {
  let m = 0;
  for (let i = 0; i < a.length; i++) m = Math.max(m, Math.abs(a[i]!));
  return m;
}

const SIZES = [2, 4, 8, 16, 32, 64, 128, 256];

describe('ComplexFft', () => {
  it.each(SIZES)('n=%i: forward matches the direct DFT for a batch of 3 (batch-inner layout)', (n) => {
    const rng = new Rng(`cfft-${n}`);
    const batch = 3;
    const re = new Float64Array(n * batch);
    const im = new Float64Array(n * batch);
    rng.fillNormal(re);
    rng.fillNormal(im);
    const refs = [];
    for (let b = 0; b < batch; b++) {
      const xr: number[] = [];
      const xi: number[] = [];
      for (let j = 0; j < n; j++) {
        xr.push(re[j * batch + b]!);
        xi.push(im[j * batch + b]!);
      }
      refs.push(directDft(xr, xi, -1));
    }
    new ComplexFft(n).forward(re, im, batch);
    const tol = 1e-13 * n * Math.log2(2 * n); // accumulated rounding of n-term sums (common practice)
    for (let b = 0; b < batch; b++) {
      for (let k = 0; k < n; k++) {
        expect(Math.abs(re[k * batch + b]! - refs[b]!.re[k]!)).toBeLessThan(tol);
        expect(Math.abs(im[k * batch + b]! - refs[b]!.im[k]!)).toBeLessThan(tol);
      }
    }
  });

  it.each([8, 64, 1024])('n=%i: matches fft.js (reference library) and inverse undoes forward', (n) => {
    const rng = new Rng(`cfft-lib-${n}`);
    const re = new Float64Array(n);
    const im = new Float64Array(n);
    rng.fillNormal(re);
    rng.fillNormal(im);
    const lib = new FFT(n);
    const data = lib.createComplexArray();
    for (let j = 0; j < n; j++) {
      data[2 * j] = re[j]!;
      data[2 * j + 1] = im[j]!;
    }
    const out = lib.createComplexArray();
    lib.transform(out, data);
    const r0 = re.slice();
    const i0 = im.slice();
    const f = new ComplexFft(n);
    f.forward(re, im);
    for (let k = 0; k < n; k++) {
      expect(re[k]).toBeCloseTo(out[2 * k]!, 10);
      expect(im[k]).toBeCloseTo(out[2 * k + 1]!, 10);
    }
    f.inverse(re, im);
    for (let j = 0; j < n; j++) {
      expect(Math.abs(re[j]! - r0[j]!)).toBeLessThan(1e-13);
      expect(Math.abs(im[j]! - i0[j]!)).toBeLessThan(1e-13);
    }
  });

  it('strided, offset batches transform only their own entries', () => {
    // A row-major [16, 5] block inside a larger array: columns 1..3 transformed, the rest untouched.
    const n = 16;
    const cols = 5;
    const offset = 7;
    const rng = new Rng('strided');
    const re = new Float64Array(offset + n * cols + 4);
    const im = new Float64Array(re.length);
    rng.fillNormal(re);
    rng.fillNormal(im);
    const r0 = re.slice();
    const i0 = im.slice();
    new ComplexFft(n).forward(re, im, 3, cols, offset + 1);
    for (let i = 0; i < re.length; i++) {
      const rel = i - offset;
      const col = rel % cols;
      const inside = rel >= 0 && rel < n * cols && col >= 1 && col <= 3;
      if (!inside) {
        expect(re[i]).toBe(r0[i]);
        expect(im[i]).toBe(i0[i]);
      }
    }
    for (let c = 1; c <= 3; c++) {
      const xr: number[] = [];
      const xi: number[] = [];
      for (let j = 0; j < n; j++) {
        xr.push(r0[offset + j * cols + c]!);
        xi.push(i0[offset + j * cols + c]!);
      }
      const ref = directDft(xr, xi, -1);
      for (let k = 0; k < n; k++) {
        expect(Math.abs(re[offset + k * cols + c]! - ref.re[k]!)).toBeLessThan(1e-12);
        expect(Math.abs(im[offset + k * cols + c]! - ref.im[k]!)).toBeLessThan(1e-12);
      }
    }
  });

  it('rejects bad sizes and short arrays with a message naming the value', () => {
    expect(() => new ComplexFft(12)).toThrow(/power of two.*12/);
    expect(() => new ComplexFft(8).forward(new Float64Array(7), new Float64Array(8))).toThrow(/need 8/);
    expect(() => new ComplexFft(8).forward(new Float64Array(16), new Float64Array(16), 2, 1)).toThrow(/stride/);
  });
});

describe('RealFft', () => {
  it.each(SIZES)('n=%i: half spectrum matches the direct DFT for a batch of 4; Nyquist and mean are real', (n) => {
    const rng = new Rng(`rfft-${n}`);
    const batch = 4;
    const x = new Float64Array(n * batch);
    rng.fillNormal(x);
    const fft = new RealFft(n);
    const re = new Float64Array(fft.nSpec * batch);
    const im = new Float64Array(fft.nSpec * batch);
    fft.forward(x, re, im, batch);
    const tol = 1e-13 * n * Math.log2(2 * n);
    for (let b = 0; b < batch; b++) {
      const xr: number[] = [];
      for (let j = 0; j < n; j++) xr.push(x[j * batch + b]!);
      const ref = directDft(xr, new Array<number>(n).fill(0), -1);
      for (let k = 0; k <= n / 2; k++) {
        expect(Math.abs(re[k * batch + b]! - ref.re[k]!)).toBeLessThan(tol);
        expect(Math.abs(im[k * batch + b]! - ref.im[k]!)).toBeLessThan(tol);
      }
      expect(im[b]).toBe(0);
      expect(im[(n / 2) * batch + b]).toBe(0);
    }
  });

  it.each(SIZES)('n=%i: inverse of the direct DFT spectrum returns the signal (1/n included)', (n) => {
    const rng = new Rng(`irfft-${n}`);
    const xr: number[] = [];
    for (let j = 0; j < n; j++) xr.push(rng.normal());
    const ref = directDft(xr, new Array<number>(n).fill(0), -1);
    const fft = new RealFft(n);
    const re = Float64Array.from(ref.re.slice(0, n / 2 + 1));
    const im = Float64Array.from(ref.im.slice(0, n / 2 + 1));
    const re0 = re.slice();
    const x = new Float64Array(n);
    fft.inverse(re, im, x);
    for (let j = 0; j < n; j++) expect(Math.abs(x[j]! - xr[j]!)).toBeLessThan(1e-13 * n);
    expect(Array.from(re)).toEqual(Array.from(re0)); // input spectrum left untouched
  });

  it('matches fft.js realTransform (reference library) for n = 512', () => {
    const n = 512;
    const rng = new Rng('rfft-lib');
    const x = new Float64Array(n);
    rng.fillNormal(x);
    const lib = new FFT(n);
    const out = lib.createComplexArray();
    lib.realTransform(out, Array.from(x));
    lib.completeSpectrum(out);
    const fft = new RealFft(n);
    const re = new Float64Array(fft.nSpec);
    const im = new Float64Array(fft.nSpec);
    fft.forward(x, re, im);
    const scale = maxAbs(re);
    for (let k = 0; k <= n / 2; k++) {
      expect(Math.abs(re[k]! - out[2 * k]!)).toBeLessThan(1e-13 * scale);
      expect(Math.abs(im[k]! - out[2 * k + 1]!)).toBeLessThan(1e-13 * scale);
    }
  });

  it('a single copy gives bit-identical results alone and inside a batch', () => {
    const n = 64;
    const batch = 5;
    const rng = new Rng('rfft-batch');
    const x = new Float64Array(n * batch);
    rng.fillNormal(x);
    const fft = new RealFft(n);
    const re = new Float64Array(fft.nSpec * batch);
    const im = new Float64Array(fft.nSpec * batch);
    fft.forward(x, re, im, batch);
    const b = 3;
    const x1 = new Float64Array(n);
    for (let j = 0; j < n; j++) x1[j] = x[j * batch + b]!;
    const r1 = new Float64Array(fft.nSpec);
    const i1 = new Float64Array(fft.nSpec);
    fft.forward(x1, r1, i1);
    for (let k = 0; k < fft.nSpec; k++) {
      expect(r1[k]).toBe(re[k * batch + b]);
      expect(i1[k]).toBe(im[k * batch + b]);
    }
    const y = new Float64Array(n * batch);
    fft.inverse(re, im, y, batch);
    const y1 = new Float64Array(n);
    fft.inverse(r1, i1, y1);
    for (let j = 0; j < n; j++) expect(y1[j]).toBe(y[j * batch + b]);
  });

  it('offsets address a sub-block of larger arrays', () => {
    const n = 16;
    const rng = new Rng('rfft-offset');
    const x = new Float64Array(3 + n * 2);
    rng.fillNormal(x);
    const fft = new RealFft(n);
    const re = new Float64Array(5 + fft.nSpec * 2);
    const im = new Float64Array(re.length);
    fft.forward(x, re, im, 2, 3, 5);
    const y = new Float64Array(x.length);
    fft.inverse(re, im, y, 2, 5, 3);
    for (let i = 3; i < x.length; i++) expect(Math.abs(y[i]! - x[i]!)).toBeLessThan(1e-14 * 16);
    for (let i = 0; i < 3; i++) expect(y[i]).toBe(0);
  });

  it.each([8, 64, 256])('n=%i: squareOfSignal is bit-identical to inverse, square, forward (batch of 3) and matches the direct DFT of u^2', (n) => {
    const rng = new Rng(`sq-${n}`);
    const batch = 3;
    const fft = new RealFft(n);
    const x = new Float64Array(n * batch);
    rng.fillNormal(x);
    const re = new Float64Array(fft.nSpec * batch);
    const im = new Float64Array(fft.nSpec * batch);
    fft.forward(x, re, im, batch);
    const u = new Float64Array(n * batch);
    fft.inverse(re, im, u, batch);
    for (let i = 0; i < u.length; i++) u[i] = u[i]! * u[i]!;
    const r1 = new Float64Array(fft.nSpec * batch);
    const i1 = new Float64Array(fft.nSpec * batch);
    fft.forward(u, r1, i1, batch);
    const r2 = new Float64Array(fft.nSpec * batch);
    const i2 = new Float64Array(fft.nSpec * batch);
    fft.squareOfSignal(re, im, r2, i2, batch);
    expect(Array.from(r2)).toEqual(Array.from(r1));
    expect(Array.from(i2)).toEqual(Array.from(i1));
    const sq: number[] = [];
    for (let j = 0; j < n; j++) sq.push(x[j * batch]! ** 2);
    const ref = directDft(sq, new Array<number>(n).fill(0), -1);
    for (let k = 0; k <= n / 2; k++) {
      expect(Math.abs(r2[k * batch]! - ref.re[k]!)).toBeLessThan(1e-12 * n);
      expect(Math.abs(i2[k * batch]! - ref.im[k]!)).toBeLessThan(1e-12 * n);
    }
  });
});
