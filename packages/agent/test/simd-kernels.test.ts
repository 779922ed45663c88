/**
 * Every kernel of assembly/kernels.ts, in both builds, against a Float64 reference computed here
 * from the same float32 inputs.
 *
 * Products are checked element-wise against the classical forward-error bound of a dot product
 * in floating point, |fl(a.b) - a.b| <= gamma_n sum |a_p b_p|, gamma_n = n u / (1 - n u),
 * u = 2^-24 (Higham 2002, "Accuracy and Stability of Numerical Algorithms", 2nd ed., eq. 3.5),
 * with n = K + 1 terms counting the bias. The bound holds with or without fused multiply-add.
 *
 * Measured max |error| (inputs U[-1, 1), so |c| is typically sqrt(K) / 3), plain / FMA build; packing
 * the A^T panels gives the same bits as not packing:
 *   (M,K,N)          A B                 A^T B
 *   (256,64,64)      2.8e-6 / 2.6e-6     3.4e-6 / 3.1e-6
 *   (256,256,256)    1.2e-5 / 1.4e-5     1.4e-5 / 1.4e-5
 *   (64,256,64)      1.1e-5 / 8.7e-6     1.2e-5 / 9.0e-6
 *   (256,256,1)      1.3e-5 / 9.4e-6     7.4e-6 / 6.1e-6
 *   (6,17,20)        5.3e-7 / 5.6e-7     3.7e-7 / 5.4e-7
 *   (7,13,11)        2.2e-7 / 2.4e-7     3.4e-7 / 4.4e-7
 *   (5,3,9)          5.1e-8 / 6.6e-8     6.0e-8 / 5.8e-8
 *   (3,5,4)          5.4e-8 / 4.8e-8     1.3e-7 / 7.5e-8
 *   (1,1,1)          1.6e-9 / 3.7e-9     1.6e-9 / 3.7e-9
 * (regenerate with SIMD_PRINT_ERRORS=1 npx vitest run --project agent simd-kernels).
 */
import { Rng } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { ACT, loadSimdKernels, type SimdMode } from '../src/net/simd/loader';
import { maxAbsDiff } from './simd-reference';

const U = 2 ** -24;
const gamma = (n: number): number => (n * U) / (1 - n * U);
const print = process.env.SIMD_PRINT_ERRORS === '1';

type ActName = 'linear' | 'relu' | 'tanh';
const actF: Record<ActName, (z: number) => number> = { linear: (z) => z, relu: (z) => Math.max(z, 0), tanh: Math.tanh };
const dactF: Record<ActName, (y: number) => number> = { linear: () => 1, relu: (y) => (y > 0 ? 1 : 0), tanh: (y) => 1 - y * y };

function setup(mode: SimdMode) {
  const kern = loadSimdKernels(mode);
  const rng = Rng.derive(7, `simd-kernels/${mode}`);
  const buf = (n: number, lo = -1, hi = 1): { ptr: number; v: Float32Array } => {
    const ptr = kern.heap.allocF32(n);
    const v = kern.heap.f32(ptr, n);
    rng.fillUniform(v, lo, hi);
    return { ptr, v };
  };
  return { ...kern, buf };
}

const shapes: [number, number, number][] = [
  [256, 64, 64],
  [256, 256, 256],
  [64, 256, 64],
  [256, 256, 1],
  [7, 13, 11],
  [5, 3, 9],
  [1, 1, 1],
  [6, 17, 20],
  [3, 5, 4],
];

describe.each(['strict', 'fast'] as const)('kernels (%s build)', (mode) => {
  const s = setup(mode);

  it('runs the expected build', () => {
    expect(s.build).toBe(mode === 'strict' ? 'simd' : 'simd-fma');
  });

  it.each(shapes)('gemm A B and A^T B (plain and packed), (M,K,N) = (%i,%i,%i), within the dot-product error bound', (M, K, N) => {
    const a = s.buf(M * K);
    const b = s.buf(K * N);
    const c = s.buf(M * N);
    const pack = s.buf(4 * K);
    for (const [trans, packed] of [[false, false], [true, false], [true, true]] as const) {
      // trans: A is stored as its transpose, a row-major [K, M] matrix; A(i,p) = a[p*M + i].
      // packed: gemm copies A's 4-row panels into a scratch first (same arithmetic).
      const Aip = (i: number, p: number): number => (trans ? a.v[p * M + i]! : a.v[i * K + p]!);
      if (trans) s.k.gemm(a.ptr, 1, M, b.ptr, c.ptr, M, K, N, 0, ACT.linear, 0, 0, packed ? pack.ptr : 0);
      else s.k.gemm(a.ptr, K, 1, b.ptr, c.ptr, M, K, N, 0, ACT.linear, 0, 0, 0);
      const before = Float32Array.from(c.v);
      let worst = 0;
      let maxErr = 0;
      for (let i = 0; i < M; i++) {
        for (let j = 0; j < N; j++) {
          let e = 0;
          let abs = 0;
          for (let p = 0; p < K; p++) {
            e += Aip(i, p) * b.v[p * N + j]!;
            abs += Math.abs(Aip(i, p) * b.v[p * N + j]!);
          }
          const err = Math.abs(c.v[i * N + j]! - e);
          maxErr = Math.max(maxErr, err);
          worst = Math.max(worst, err / (gamma(K) * abs + Number.MIN_VALUE));
        }
      }
      if (print) console.log(`${mode} ${trans ? 'AtB' : 'AB'}${packed ? ' packed' : ''} (${M},${K},${N}) max err ${maxErr.toExponential(1)}`);
      expect(worst).toBeLessThanOrEqual(1);
      if (packed) {
        // Packing moves data only: bit-identical to the unpacked product.
        s.k.gemm(a.ptr, 1, M, b.ptr, c.ptr, M, K, N, 0, ACT.linear, 0, 0, 0);
        expect(c.v).toEqual(before);
      }
    }
  });

  it.each([
    ['linear', 'relu'],
    ['relu', 'tanh'],
    ['tanh', 'linear'],
  ] as const)('gemm epilogue: bias + %s activation, then times the %s derivative of D', (actName, dName) => {
    for (const [M, K, N] of [[9, 11, 13], [8, 16, 24], [256, 64, 1]] as const) {
      const a = s.buf(M * K);
      const b = s.buf(K * N);
      const bias = s.buf(N);
      const c = s.buf(M * N);
      const d = s.buf(M * N, -0.9, 0.9);
      // Bias and activation, no derivative.
      s.k.gemm(a.ptr, K, 1, b.ptr, c.ptr, M, K, N, bias.ptr, ACT[actName], 0, 0, 0);
      const z = new Float64Array(M * N);
      const zabs = new Float64Array(M * N);
      for (let i = 0; i < M; i++) {
        for (let j = 0; j < N; j++) {
          let e = bias.v[j]!;
          let abs = Math.abs(e);
          for (let p = 0; p < K; p++) {
            e += a.v[i * K + p]! * b.v[p * N + j]!;
            abs += Math.abs(a.v[i * K + p]! * b.v[p * N + j]!);
          }
          z[i * N + j] = e;
          zabs[i * N + j] = abs;
        }
      }
      for (let q = 0; q < M * N; q++) {
        // relu and tanh are 1-Lipschitz; tanh adds at most a few ulps of its own.
        const tol = gamma(K + 1) * zabs[q]! + (actName === 'tanh' ? 4 * U : 0);
        expect(Math.abs(c.v[q]! - actF[actName](z[q]!))).toBeLessThanOrEqual(tol);
      }
      // No bias, no activation, times act'(D): the backward epilogue.
      s.k.gemm(a.ptr, K, 1, b.ptr, c.ptr, M, K, N, 0, ACT.linear, d.ptr, ACT[dName], 0);
      for (let q = 0; q < M * N; q++) {
        const zq = z[q]! - bias.v[q % N]!;
        const dq = dactF[dName](d.v[q]!);
        const tol = (gamma(K + 2) * (zabs[q]! - Math.abs(bias.v[q % N]!)) + 2 * U) * Math.max(1, Math.abs(dq));
        expect(Math.abs(c.v[q]! - zq * dq)).toBeLessThanOrEqual(tol);
      }
    }
  });

  it.each([[256 * 64], [257], [3]])('actGrad over %i values for every activation (Float64 reference)', (n) => {
    const dy = s.buf(n);
    const y = s.buf(n, -1, 1);
    const out = s.buf(n);
    for (const name of ['linear', 'relu', 'tanh'] as const) {
      s.k.actGrad(dy.ptr, y.ptr, out.ptr, n, ACT[name]);
      const ref = Array.from({ length: n }, (_, k) => dy.v[k]! * dactF[name](y.v[k]!));
      // One rounding of 1 - y^2 (two operations) and one of the product.
      expect(maxAbsDiff(out.v, ref)).toBeLessThanOrEqual(4 * U);
    }
  });

  it.each([[256, 256], [256, 64], [256, 1], [7, 21], [1, 5]])('colsum of a (%i x %i) matrix (Float64 reference)', (M, N) => {
    const x = s.buf(M * N);
    const out = s.buf(N);
    s.k.colsum(x.ptr, M, N, out.ptr);
    for (let j = 0; j < N; j++) {
      let e = 0;
      let abs = 0;
      for (let i = 0; i < M; i++) {
        e += x.v[i * N + j]!;
        abs += Math.abs(x.v[i * N + j]!);
      }
      expect(Math.abs(out.v[j]! - e)).toBeLessThanOrEqual(gamma(M) * abs);
    }
  });

  it.each([[256, 256], [17, 256], [256, 1], [6, 7], [1, 9], [4, 4]])('transpose of a (%i x %i) matrix is exact', (R, C) => {
    const x = s.buf(R * C);
    const out = s.buf(R * C);
    s.k.transpose(x.ptr, R, C, out.ptr);
    const ref = new Float32Array(R * C);
    for (let i = 0; i < R; i++) for (let j = 0; j < C; j++) ref[j * R + i] = x.v[i * C + j]!;
    expect(out.v).toEqual(ref);
  });

  it('adam over 1027 parameters, three steps, against a Float64 Kingma & Ba Algorithm 1', () => {
    const n = 1027;
    const p = s.buf(n);
    const g = s.buf(n);
    const m = s.buf(n);
    const v = s.buf(n);
    m.v.fill(0);
    v.v.fill(0);
    const cfg = { lr: 1e-3, beta1: 0.9, beta2: 0.999, eps: 1e-8 };
    const P = Float64Array.from(p.v);
    const Mm = new Float64Array(n);
    const V = new Float64Array(n);
    // Sm: the same recursion on |g| (no cancellation), the scale of m's rounding errors.
    const Sm = new Float64Array(n);
    for (let t = 1; t <= 3; t++) {
      const c1 = 1 / (1 - cfg.beta1 ** t);
      const c2 = 1 / (1 - cfg.beta2 ** t);
      s.k.adam(p.ptr, g.ptr, m.ptr, v.ptr, n, cfg.lr, cfg.beta1, 1 - cfg.beta1, cfg.beta2, 1 - cfg.beta2, cfg.eps, c1, c2);
      for (let k = 0; k < n; k++) {
        Mm[k] = cfg.beta1 * Mm[k]! + (1 - cfg.beta1) * g.v[k]!;
        Sm[k] = cfg.beta1 * Sm[k]! + (1 - cfg.beta1) * Math.abs(g.v[k]!);
        V[k] = cfg.beta2 * V[k]! + (1 - cfg.beta2) * g.v[k]! ** 2;
        P[k] = P[k]! - (cfg.lr * (Mm[k]! * c1)) / (Math.sqrt(V[k]! * c2) + cfg.eps);
      }
      // Each float32 step adds a few roundings of the size of its terms, per step so far.
      for (let k = 0; k < n; k++) {
        const dm = 4 * U * t * Sm[k]!;
        expect(Math.abs(m.v[k]! - Mm[k]!)).toBeLessThanOrEqual(dm);
        expect(Math.abs(v.v[k]! - V[k]!)).toBeLessThanOrEqual(4 * U * t * V[k]!);
        // p: one rounding per step of |p|, plus the step's error: lr * (dm c1 + rel. error) / sqrt(vhat).
        const den = Math.sqrt(V[k]! * c2) + cfg.eps;
        const tolP = 2 * U * t * (Math.abs(P[k]!) + cfg.lr) + (cfg.lr * (dm * c1 + 8 * U * Sm[k]! * c1)) / den;
        expect(Math.abs(p.v[k]! - P[k]!)).toBeLessThanOrEqual(tolP);
      }
      rngFill(g.v, t);
    }
  });

  it('polyak over 1027 parameters against a Float64 reference', () => {
    const n = 1027;
    const src = s.buf(n);
    const dst = s.buf(n);
    const tau = 0.005;
    const ref = Array.from({ length: n }, (_, k) => tau * src.v[k]! + (1 - tau) * dst.v[k]!);
    s.k.polyak(src.ptr, dst.ptr, n, tau, 1 - tau);
    expect(maxAbsDiff(dst.v, ref)).toBeLessThanOrEqual(3 * U);
  });
});

function rngFill(a: Float32Array, t: number): void {
  Rng.derive(t, 'simd-kernels/grad').fillUniform(a, -1, 1);
}
