/**
 * WebAssembly SIMD kernels for the agent's dense networks (the `simd` network backend).
 *
 * Compiled twice by `assembly/build.mjs`:
 * - `simd.wasm`: plain SIMD. Every product is `f32x4.mul` then `f32x4.add`, so each result is a
 *   fixed sequence of IEEE-754 binary32 operations: bit-identical on every machine (strict mode).
 * - `simd-fma.wasm`: relaxed SIMD. Products in the matrix kernels use `f32x4.relaxed_madd`, which
 *   V8 lowers to a fused multiply-add where the CPU has one (results may differ across hardware
 *   in the last bits; fast mode).
 * Element-wise kernels (activation derivatives, column sums, Adam, Polyak) use plain operations
 * in both builds.
 *
 * Conventions
 * - Every pointer is a byte offset into the one (shared, imported) linear memory; every array is
 *   float32. The host allocates all buffers (see `src/net/simd/heap.ts`); nothing here allocates.
 * - Matrices are row-major. Strides are in elements.
 * - Summation order is fixed and documented per kernel (it is what strict mode reproduces).
 *
 * Matrix-product design: register blocks of 4 rows x 8 columns (eight f32x4 accumulators, two
 * B vectors, one broadcast A value: 11 of the 16 vector registers, so nothing spills); B is read
 * as v128 along a row, A is broadcast with `v128.load32_splat`; the reduction index runs
 * innermost and is not unrolled. Ragged edges use 4-row x 4-column blocks, then single rows,
 * then scalar columns (the 1-wide critic output).
 */

/** Epilogue activation codes (host side: `ACT` in `src/net/simd/kernels.ts`). */
const ACT_LINEAR: i32 = 0;
const ACT_RELU: i32 = 1;
const ACT_TANH: i32 = 2;

/** Tile side (elements) of the blocked transpose: 16 rows of output lines fit any cache set. */
const TILE: i32 = 16;

/** Smallest C width for which gemm packs A^T panels (they are reused by N / 8 column blocks). */
const PACK_MIN_N: i32 = 16;

/** Start of free memory after the module's static data: the host allocator starts here. */
export function heapBase(): usize {
  return __heap_base;
}

/** 1 when this build uses relaxed-SIMD fused multiply-add, else 0. */
export function usesFma(): i32 {
  return ASC_FEATURE_RELAXED_SIMD ? 1 : 0;
}

// @ts-ignore: decorator
@inline function madd(a: v128, b: v128, c: v128): v128 {
  if (ASC_FEATURE_RELAXED_SIMD) {
    return f32x4.relaxed_madd(a, b, c);
  } else {
    return f32x4.add(f32x4.mul(a, b), c);
  }
}

// @ts-ignore: decorator
@inline function tanh4(v: v128): v128 {
  let r = f32x4.splat(Mathf.tanh(f32x4.extract_lane(v, 0)));
  r = f32x4.replace_lane(r, 1, Mathf.tanh(f32x4.extract_lane(v, 1)));
  r = f32x4.replace_lane(r, 2, Mathf.tanh(f32x4.extract_lane(v, 2)));
  r = f32x4.replace_lane(r, 3, Mathf.tanh(f32x4.extract_lane(v, 3)));
  return r;
}

/**
 * Activation derivative expressed through the activation's output y:
 * relu'(y) = [y > 0], tanh'(y) = 1 - y^2, linear' = 1.
 */
// @ts-ignore: decorator
@inline function dact4(kind: i32, y: v128): v128 {
  if (kind == ACT_RELU) return v128.and(f32x4.splat(1.0), f32x4.gt(y, f32x4.splat(0.0)));
  if (kind == ACT_TANH) return f32x4.sub(f32x4.splat(1.0), f32x4.mul(y, y));
  return f32x4.splat(1.0);
}

// @ts-ignore: decorator
@inline function dact1(kind: i32, y: f32): f32 {
  if (kind == ACT_RELU) return y > 0 ? 1.0 : 0.0;
  if (kind == ACT_TANH) return 1.0 - y * y;
  return 1.0;
}

/**
 * Epilogue of one output vector c[i, j..j+3]: v (+ bias[j..j+3]), then activation `act`, then
 * (when `d` != 0) times act'(D[i, j..j+3]) of kind `dkind`. `bias` and `d` point at the element
 * that matches the stored one (0 = absent).
 */
// @ts-ignore: decorator
@inline function store4(c: usize, v: v128, bias: usize, act: i32, d: usize, dkind: i32): void {
  if (bias) v = f32x4.add(v, v128.load(bias));
  if (act == ACT_RELU) v = f32x4.max(v, f32x4.splat(0.0));
  else if (act == ACT_TANH) v = tanh4(v);
  if (d) v = f32x4.mul(v, dact4(dkind, v128.load(d)));
  v128.store(c, v);
}

// @ts-ignore: decorator
@inline function store1(c: usize, v: f32, bias: usize, act: i32, d: usize, dkind: i32): void {
  if (bias) v = v + load<f32>(bias);
  if (act == ACT_RELU) v = v > 0 ? v : 0;
  else if (act == ACT_TANH) v = Mathf.tanh(v);
  if (d) v = v * dact1(dkind, load<f32>(d));
  store<f32>(c, v);
}

/**
 * C = epilogue(A B): C [M, N] row-major (leading dimension N), B [K, N] row-major, and A given
 * by strides: A(i, p) = a[i * sai + p * sap] (sai = K, sap = 1 for a row-major A [M, K];
 * sai = 1, sap = M' for the transpose of a row-major [K, M'] matrix, i.e. A^T B).
 *
 * Epilogue per element (see `store4`): + bias[j] (when bias != 0), activation `act`
 * (0 linear, 1 relu, 2 tanh), then times act'(D[i, j]) of kind `dkind` (when d != 0; D has C's
 * shape and leading dimension).
 *
 * `pack` (0 = none): scratch of 4 K floats, used to copy A's 4-row panels contiguous when
 * sai = 1 and N >= PACK_MIN_N. A caller running gemm on several threads gives each its own.
 *
 * Summation order: c[i, j] = (((0 + A(i,0) B(0,j)) + A(i,1) B(1,j)) + ...) + A(i,K-1) B(K-1,j),
 * then the epilogue; with FMA each step is fused.
 */
export function gemm(
  a: usize, sai: i32, sap: i32, b: usize, c: usize, M: i32, K: i32, N: i32,
  bias: usize, act: i32, d: usize, dkind: i32, pack: usize,
): void {
  // Specialised copies for the epilogues the networks use (constants fold away the epilogue's
  // branches, which matters when K is small); any other combination takes the general path.
  if (d == 0) {
    if (bias == 0) {
      if (act == ACT_LINEAR) gemmBody(a, sai, sap, b, c, M, K, N, 0, ACT_LINEAR, 0, ACT_LINEAR, pack);
      else gemmBody(a, sai, sap, b, c, M, K, N, 0, act, 0, dkind, pack);
    } else if (act == ACT_RELU) gemmBody(a, sai, sap, b, c, M, K, N, bias, ACT_RELU, 0, ACT_LINEAR, pack);
    else if (act == ACT_TANH) gemmBody(a, sai, sap, b, c, M, K, N, bias, ACT_TANH, 0, ACT_LINEAR, pack);
    else gemmBody(a, sai, sap, b, c, M, K, N, bias, ACT_LINEAR, 0, ACT_LINEAR, pack);
  } else if (bias == 0 && act == ACT_LINEAR) {
    if (dkind == ACT_RELU) gemmBody(a, sai, sap, b, c, M, K, N, 0, ACT_LINEAR, d, ACT_RELU, pack);
    else if (dkind == ACT_TANH) gemmBody(a, sai, sap, b, c, M, K, N, 0, ACT_LINEAR, d, ACT_TANH, pack);
    else gemmBody(a, sai, sap, b, c, M, K, N, 0, ACT_LINEAR, d, ACT_LINEAR, pack);
  } else {
    gemmBody(a, sai, sap, b, c, M, K, N, bias, act, d, dkind, pack);
  }
}

// @ts-ignore: decorator
@inline function gemmBody(
  a: usize, sai: i32, sap: i32, b: usize, c: usize, M: i32, K: i32, N: i32,
  bias: usize, act: i32, d: usize, dkind: i32, pack: usize,
): void {
  const rs = <usize>sai << 2; // byte stride between rows of A
  const ps0 = <usize>sap << 2; // byte stride along the reduction index of A
  // Pack A's 4-row panels when its rows are adjacent (sai = 1, the A^T B case) and the panel is
  // reused by enough column blocks: the panel's K values per row are then 16 bytes apart
  // instead of sap * 4 (a power of two for power-of-two widths, which maps the whole panel to a
  // few cache sets). Packing only moves data: the arithmetic and its order are unchanged.
  const packing = pack != 0 && sai == 1 && N >= PACK_MIN_N;
  const ldb = <usize>N << 2; // byte stride between rows of B, C and D
  const N8 = N & ~7;
  const N4 = N & ~3;
  let i = 0;
  for (; i + 4 <= M; i += 4) {
    let a0 = a + <usize>i * rs;
    let ps = ps0;
    if (packing) {
      let src = a0;
      let dst = pack;
      for (let p = 0; p < K; p++) {
        v128.store(dst, v128.load(src));
        src += ps0;
        dst += 16;
      }
      a0 = pack;
      ps = 16;
    }
    const a1 = a0 + (packing ? 4 : rs);
    const a2 = a1 + (packing ? 4 : rs);
    const a3 = a2 + (packing ? 4 : rs);
    const crow = c + <usize>i * ldb;
    const drow = d ? d + <usize>i * ldb : 0;
    let j = 0;
    for (; j < N8; j += 8) {
      let c00 = f32x4.splat(0), c01 = f32x4.splat(0);
      let c10 = f32x4.splat(0), c11 = f32x4.splat(0);
      let c20 = f32x4.splat(0), c21 = f32x4.splat(0);
      let c30 = f32x4.splat(0), c31 = f32x4.splat(0);
      let pb = b + (<usize>j << 2);
      let off: usize = 0;
      for (let p = 0; p < K; p++) {
        const b0 = v128.load(pb);
        const b1 = v128.load(pb, 16);
        let x = v128.load32_splat(a0 + off);
        c00 = madd(x, b0, c00); c01 = madd(x, b1, c01);
        x = v128.load32_splat(a1 + off);
        c10 = madd(x, b0, c10); c11 = madd(x, b1, c11);
        x = v128.load32_splat(a2 + off);
        c20 = madd(x, b0, c20); c21 = madd(x, b1, c21);
        x = v128.load32_splat(a3 + off);
        c30 = madd(x, b0, c30); c31 = madd(x, b1, c31);
        off += ps;
        pb += ldb;
      }
      const jb = <usize>j << 2;
      const bj = bias ? bias + jb : 0;
      const bj4 = bias ? bj + 16 : 0;
      const dj = drow ? drow + jb : 0;
      const dj4 = drow ? dj + 16 : 0;
      const dl1 = drow ? ldb : 0;
      store4(crow + jb, c00, bj, act, dj, dkind);
      store4(crow + jb + 16, c01, bj4, act, dj4, dkind);
      store4(crow + ldb + jb, c10, bj, act, dj ? dj + dl1 : 0, dkind);
      store4(crow + ldb + jb + 16, c11, bj4, act, dj4 ? dj4 + dl1 : 0, dkind);
      store4(crow + 2 * ldb + jb, c20, bj, act, dj ? dj + 2 * dl1 : 0, dkind);
      store4(crow + 2 * ldb + jb + 16, c21, bj4, act, dj4 ? dj4 + 2 * dl1 : 0, dkind);
      store4(crow + 3 * ldb + jb, c30, bj, act, dj ? dj + 3 * dl1 : 0, dkind);
      store4(crow + 3 * ldb + jb + 16, c31, bj4, act, dj4 ? dj4 + 3 * dl1 : 0, dkind);
    }
    for (; j < N4; j += 4) {
      let c0 = f32x4.splat(0), c1 = f32x4.splat(0), c2 = f32x4.splat(0), c3 = f32x4.splat(0);
      let pb = b + (<usize>j << 2);
      let off: usize = 0;
      for (let p = 0; p < K; p++) {
        const b0 = v128.load(pb);
        c0 = madd(v128.load32_splat(a0 + off), b0, c0);
        c1 = madd(v128.load32_splat(a1 + off), b0, c1);
        c2 = madd(v128.load32_splat(a2 + off), b0, c2);
        c3 = madd(v128.load32_splat(a3 + off), b0, c3);
        off += ps;
        pb += ldb;
      }
      const jb = <usize>j << 2;
      const bj = bias ? bias + jb : 0;
      const dj = drow ? drow + jb : 0;
      store4(crow + jb, c0, bj, act, dj, dkind);
      store4(crow + ldb + jb, c1, bj, act, dj ? dj + ldb : 0, dkind);
      store4(crow + 2 * ldb + jb, c2, bj, act, dj ? dj + 2 * ldb : 0, dkind);
      store4(crow + 3 * ldb + jb, c3, bj, act, dj ? dj + 3 * ldb : 0, dkind);
    }
    for (; j < N; j++) {
      // Scalar tail (e.g. the 1-wide critic output): four rows at once.
      let s0: f32 = 0, s1: f32 = 0, s2: f32 = 0, s3: f32 = 0;
      let pb = b + (<usize>j << 2);
      let off: usize = 0;
      for (let p = 0; p < K; p++) {
        const bv = load<f32>(pb);
        s0 = s0 + load<f32>(a0 + off) * bv;
        s1 = s1 + load<f32>(a1 + off) * bv;
        s2 = s2 + load<f32>(a2 + off) * bv;
        s3 = s3 + load<f32>(a3 + off) * bv;
        off += ps;
        pb += ldb;
      }
      const jb = <usize>j << 2;
      const bj = bias ? bias + jb : 0;
      const dj = drow ? drow + jb : 0;
      store1(crow + jb, s0, bj, act, dj, dkind);
      store1(crow + ldb + jb, s1, bj, act, dj ? dj + ldb : 0, dkind);
      store1(crow + 2 * ldb + jb, s2, bj, act, dj ? dj + 2 * ldb : 0, dkind);
      store1(crow + 3 * ldb + jb, s3, bj, act, dj ? dj + 3 * ldb : 0, dkind);
    }
  }
  for (; i < M; i++) {
    // Remaining rows one at a time.
    const a0 = a + <usize>i * rs;
    const ps = ps0;
    const crow = c + <usize>i * ldb;
    const drow = d ? d + <usize>i * ldb : 0;
    let j = 0;
    for (; j < N8; j += 8) {
      let c00 = f32x4.splat(0), c01 = f32x4.splat(0);
      let pb = b + (<usize>j << 2);
      let off: usize = 0;
      for (let p = 0; p < K; p++) {
        const x = v128.load32_splat(a0 + off);
        c00 = madd(x, v128.load(pb), c00);
        c01 = madd(x, v128.load(pb, 16), c01);
        off += ps;
        pb += ldb;
      }
      const jb = <usize>j << 2;
      const bj = bias ? bias + jb : 0;
      const dj = drow ? drow + jb : 0;
      store4(crow + jb, c00, bj, act, dj, dkind);
      store4(crow + jb + 16, c01, bias ? bj + 16 : 0, act, dj ? dj + 16 : 0, dkind);
    }
    for (; j < N4; j += 4) {
      let c0 = f32x4.splat(0);
      let pb = b + (<usize>j << 2);
      let off: usize = 0;
      for (let p = 0; p < K; p++) {
        c0 = madd(v128.load32_splat(a0 + off), v128.load(pb), c0);
        off += ps;
        pb += ldb;
      }
      const jb = <usize>j << 2;
      store4(crow + jb, c0, bias ? bias + jb : 0, act, drow ? drow + jb : 0, dkind);
    }
    for (; j < N; j++) {
      let s: f32 = 0;
      let pb = b + (<usize>j << 2);
      let off: usize = 0;
      for (let p = 0; p < K; p++) {
        s = s + load<f32>(a0 + off) * load<f32>(pb);
        off += ps;
        pb += ldb;
      }
      const jb = <usize>j << 2;
      store1(crow + jb, s, bias ? bias + jb : 0, act, drow ? drow + jb : 0, dkind);
    }
  }
}

/**
 * out[k] = dy[k] * act'(y[k]) for k < n (act' of kind `kind` expressed through the output y);
 * `out` may alias `dy`.
 */
export function actGrad(dy: usize, y: usize, out: usize, n: i32, kind: i32): void {
  const n4 = n & ~3;
  let k = 0;
  for (; k < n4; k += 4) {
    const o = <usize>k << 2;
    v128.store(out + o, f32x4.mul(v128.load(dy + o), dact4(kind, v128.load(y + o))));
  }
  for (; k < n; k++) {
    const o = <usize>k << 2;
    store<f32>(out + o, load<f32>(dy + o) * dact1(kind, load<f32>(y + o)));
  }
}

/**
 * Column sums of X [M, N] row-major: out[j] = ((x[0,j] + x[1,j]) + ...) + x[M-1,j]
 * (sequential over rows, starting from 0).
 */
export function colsum(x: usize, M: i32, N: i32, out: usize): void {
  const ld = <usize>N << 2;
  const N16 = N & ~15;
  const N4 = N & ~3;
  let j = 0;
  for (; j < N16; j += 16) {
    let s0 = f32x4.splat(0), s1 = f32x4.splat(0), s2 = f32x4.splat(0), s3 = f32x4.splat(0);
    let p = x + (<usize>j << 2);
    for (let i = 0; i < M; i++) {
      s0 = f32x4.add(s0, v128.load(p));
      s1 = f32x4.add(s1, v128.load(p, 16));
      s2 = f32x4.add(s2, v128.load(p, 32));
      s3 = f32x4.add(s3, v128.load(p, 48));
      p += ld;
    }
    const o = out + (<usize>j << 2);
    v128.store(o, s0);
    v128.store(o, s1, 16);
    v128.store(o, s2, 32);
    v128.store(o, s3, 48);
  }
  for (; j < N4; j += 4) {
    let s0 = f32x4.splat(0);
    let p = x + (<usize>j << 2);
    for (let i = 0; i < M; i++) {
      s0 = f32x4.add(s0, v128.load(p));
      p += ld;
    }
    v128.store(out + (<usize>j << 2), s0);
  }
  for (; j < N; j++) {
    let s: f32 = 0;
    let p = x + (<usize>j << 2);
    for (let i = 0; i < M; i++) {
      s = s + load<f32>(p);
      p += ld;
    }
    store<f32>(out + (<usize>j << 2), s);
  }
}

/**
 * out [C, R] = transpose of x [R, C] (both row-major); 4x4 blocks through lane shuffles, visited
 * in tiles of TILE x TILE so that the rows written at once (a power-of-two byte stride apart for
 * power-of-two widths, which map to few cache sets) stay few enough to remain in cache.
 */
export function transpose(x: usize, R: i32, C: i32, out: usize): void {
  const R4 = R & ~3;
  const C4 = C & ~3;
  const lx = <usize>C << 2;
  const lo = <usize>R << 2;
  for (let ii = 0; ii < R4; ii += TILE) {
    const iEnd = min(ii + TILE, R4);
    for (let jj = 0; jj < C4; jj += TILE) {
      const jEnd = min(jj + TILE, C4);
      for (let i = ii; i < iEnd; i += 4) {
        for (let j = jj; j < jEnd; j += 4) {
          const p = x + <usize>i * lx + (<usize>j << 2);
          const r0 = v128.load(p);
          const r1 = v128.load(p + lx);
          const r2 = v128.load(p + 2 * lx);
          const r3 = v128.load(p + 3 * lx);
          // Interleave: t0 = [r0.0 r1.0 r0.1 r1.1], t1 = [r0.2 r1.2 r0.3 r1.3], same for r2/r3.
          const t0 = v128.shuffle<f32>(r0, r1, 0, 4, 1, 5);
          const t1 = v128.shuffle<f32>(r0, r1, 2, 6, 3, 7);
          const t2 = v128.shuffle<f32>(r2, r3, 0, 4, 1, 5);
          const t3 = v128.shuffle<f32>(r2, r3, 2, 6, 3, 7);
          const q = out + <usize>j * lo + (<usize>i << 2);
          v128.store(q, v128.shuffle<f32>(t0, t2, 0, 1, 4, 5));
          v128.store(q + lo, v128.shuffle<f32>(t0, t2, 2, 3, 6, 7));
          v128.store(q + 2 * lo, v128.shuffle<f32>(t1, t3, 0, 1, 4, 5));
          v128.store(q + 3 * lo, v128.shuffle<f32>(t1, t3, 2, 3, 6, 7));
        }
      }
    }
  }
  // Ragged edges element by element: columns C4..C of the first R4 rows, then rows R4..R.
  for (let i = 0; i < R4; i++) {
    for (let j = C4; j < C; j++) {
      store<f32>(out + <usize>j * lo + (<usize>i << 2), load<f32>(x + <usize>i * lx + (<usize>j << 2)));
    }
  }
  for (let i = R4; i < R; i++) {
    for (let j = 0; j < C; j++) {
      store<f32>(out + <usize>j * lo + (<usize>i << 2), load<f32>(x + <usize>i * lx + (<usize>j << 2)));
    }
  }
}

/**
 * One Adam step (Kingma & Ba 2015, Algorithm 1) over n parameters, element-wise:
 *   m <- b1 m + (1 - b1) g;  v <- b2 v + (1 - b2) g^2
 *   p <- p - lr * (m c1) / (sqrt(v c2) + eps)
 * with the bias corrections c1 = 1 / (1 - b1^t), c2 = 1 / (1 - b2^t) computed by the host.
 * Operation order (strict mode reproduces it): m = b1*m + omb1*g; v = b2*v + (omb2*g)*g;
 * p = p - (lr*(m*c1)) / (sqrt(v*c2) + eps), each operation rounded to binary32.
 */
export function adam(
  p: usize, g: usize, m: usize, v: usize, n: i32,
  lr: f32, b1: f32, omb1: f32, b2: f32, omb2: f32, eps: f32, c1: f32, c2: f32,
): void {
  const n4 = n & ~3;
  const vb1 = f32x4.splat(b1), vomb1 = f32x4.splat(omb1), vb2 = f32x4.splat(b2), vomb2 = f32x4.splat(omb2);
  const vlr = f32x4.splat(lr), veps = f32x4.splat(eps), vc1 = f32x4.splat(c1), vc2 = f32x4.splat(c2);
  let k = 0;
  for (; k < n4; k += 4) {
    const o = <usize>k << 2;
    const gk = v128.load(g + o);
    const mk = f32x4.add(f32x4.mul(vb1, v128.load(m + o)), f32x4.mul(vomb1, gk));
    const vk = f32x4.add(f32x4.mul(vb2, v128.load(v + o)), f32x4.mul(f32x4.mul(vomb2, gk), gk));
    v128.store(m + o, mk);
    v128.store(v + o, vk);
    const step = f32x4.div(f32x4.mul(vlr, f32x4.mul(mk, vc1)), f32x4.add(f32x4.sqrt(f32x4.mul(vk, vc2)), veps));
    v128.store(p + o, f32x4.sub(v128.load(p + o), step));
  }
  for (; k < n; k++) {
    const o = <usize>k << 2;
    const gk = load<f32>(g + o);
    const mk = b1 * load<f32>(m + o) + omb1 * gk;
    const vk = b2 * load<f32>(v + o) + (omb2 * gk) * gk;
    store<f32>(m + o, mk);
    store<f32>(v + o, vk);
    store<f32>(p + o, load<f32>(p + o) - (lr * (mk * c1)) / (Mathf.sqrt(vk * c2) + eps));
  }
}

/** Polyak averaging over n parameters: dst <- tau * src + omtau * dst (omtau = 1 - tau). */
export function polyak(src: usize, dst: usize, n: i32, tau: f32, omtau: f32): void {
  const n4 = n & ~3;
  const vt = f32x4.splat(tau), vo = f32x4.splat(omtau);
  let k = 0;
  for (; k < n4; k += 4) {
    const o = <usize>k << 2;
    v128.store(dst + o, f32x4.add(f32x4.mul(vt, v128.load(src + o)), f32x4.mul(vo, v128.load(dst + o))));
  }
  for (; k < n; k++) {
    const o = <usize>k << 2;
    store<f32>(dst + o, tau * load<f32>(src + o) + omtau * load<f32>(dst + o));
  }
}
