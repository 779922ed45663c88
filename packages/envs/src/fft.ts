/**
 * Batched fast Fourier transforms of power-of-two size on flat Float64Arrays with
 * split real/imaginary parts.
 *
 * Why hand-written: the solvers step many copies at once and need (a) transforms of a
 * whole batch in one call with the batch loop innermost, (b) split re/im typed arrays
 * updated in place, (c) a real-to-half-spectrum forward and a half-spectrum-to-real
 * inverse, and (d) no allocation per call. `fft.js` (the reference used in the tests)
 * works on one interleaved complex array at a time and has no real inverse.
 *
 * Conventions
 * - Forward transform, unnormalised:   X_k = sum_{j=0}^{n-1} x_j exp(-2 pi i j k / n).
 * - Inverse transform, scaled by 1/n:  x_j = (1/n) sum_{k=0}^{n-1} X_k exp(+2 pi i j k / n),
 *   so inverse(forward(x)) = x.
 * - Wavenumber ordering of a complex transform: index k = 0..n-1 holds wavenumber k for
 *   k <= n/2 and k - n above (the usual FFT order). A real transform stores only the half
 *   spectrum k = 0..n/2 (n/2 + 1 entries); the other half is its complex conjugate.
 * - Nyquist handling: the real forward transform writes the k = n/2 entry (purely real,
 *   im = 0 exactly). The real inverse ignores the imaginary parts of the k = 0 and k = n/2
 *   entries (they are zero for any real signal). Callers that differentiate zero the
 *   Nyquist entry themselves for odd derivatives (see spectral.ts).
 *
 * Layout ("batch-inner"): a batch of `batch` transforms is stored element-major with the
 * batch index fastest. Element j of transform b lives at
 *     offset + j * stride + b,     b in [0, batch),  stride >= batch (default: batch).
 * With batch = 1 this is one contiguous transform. A row-major field [rows, cols] is a
 * batch of `cols` column transforms (stride = cols); B copies of a 1-D field stored as
 * [n, B] are one call. The innermost loop of every butterfly runs over the batch, which
 * is what makes batched calls fast.
 *
 * Algorithm: iterative radix-2 decimation in time (Cooley & Tukey 1965, Math. Comp. 19)
 * after a bit-reversal permutation, with pairs of stages fused into one pass over the data
 * (radix-2^2); per-stage twiddle tables are precomputed. A real
 * transform of size n uses one complex transform of size n/2 on z_j = x_{2j} + i x_{2j+1}
 * and the standard split step X_k = E_k + W^k O_k (e.g. Press et al., Numerical Recipes,
 * 3rd ed. 2007, sec. 12.3.2). Allocation happens only in constructors and the first time
 * a real transform sees a batch larger than any before.
 */

function checkPowerOfTwo(n: number, what: string): void {
  if (!Number.isInteger(n) || n < 1 || (n & (n - 1)) !== 0 || n > 1 << 30) {
    throw new Error(`${what}: size must be a power of two >= 1, got ${n}`);
  }
}

/**
 * cos and sin of 2 pi k / n for 0 <= k < n/2, with the quarter-turn k = n/4 exact (cos = 0)
 * and angles above an eighth turn taken from the complementary angle, so every value is
 * one correctly rounded library call (no growth of error with k).
 */
function unitRoot(k: number, n: number): [number, number] {
  if (4 * k === n) return [0, 1];
  if (8 * k <= n) {
    const a = (2 * Math.PI * k) / n;
    return [Math.cos(a), Math.sin(a)];
  }
  if (4 * k < n) {
    const a = (2 * Math.PI * (n - 4 * k)) / (4 * n); // pi/2 - 2 pi k/n
    return [Math.sin(a), Math.cos(a)];
  }
  const a = (2 * Math.PI * (4 * k - n)) / (4 * n); // 2 pi k/n - pi/2
  return [-Math.sin(a), Math.cos(a)];
}

/** Bit-reversal permutation of 0..n-1 (n a power of two). */
function bitReversal(n: number): Int32Array {
  const rev = new Int32Array(n);
  let bits = 0;
  while (1 << bits < n) bits++;
  for (let i = 0; i < n; i++) {
    let r = 0;
    for (let b = 0; b < bits; b++) if (i & (1 << b)) r |= 1 << (bits - 1 - b);
    rev[i] = r;
  }
  return rev;
}

/** In-place complex FFT of size n over a batch; see the module comment for layout and scaling. */
export class ComplexFft {
  readonly n: number;
  /** rev[j] = bit-reversed j, for callers that scatter their input straight into bit-reversed order. */
  readonly bitrev: Int32Array;
  /** Twiddles of stage s (half-length h = 2^s) at [h-1, 2h-1): cos and -sin of 2 pi k / (2h). */
  private readonly twRe: Float64Array;
  private readonly twImFwd: Float64Array;
  private readonly twImInv: Float64Array;

  constructor(n: number) {
    checkPowerOfTwo(n, 'ComplexFft');
    this.n = n;
    this.bitrev = bitReversal(n);
    const m = Math.max(1, n - 1);
    this.twRe = new Float64Array(m);
    this.twImFwd = new Float64Array(m);
    this.twImInv = new Float64Array(m);
    for (let h = 1; h < n; h <<= 1) {
      for (let k = 0; k < h; k++) {
        // Angles from the exact integer ratio k/(2h) keep cos/sin accurate to one rounding.
        const [c, sn] = unitRoot(k, 2 * h);
        this.twRe[h - 1 + k] = c;
        this.twImFwd[h - 1 + k] = -sn;
        this.twImInv[h - 1 + k] = sn;
      }
    }
  }

  /** Forward transform in place (unnormalised). */
  forward(re: Float64Array, im: Float64Array, batch = 1, stride = batch, offset = 0): void {
    this.check(re, im, batch, stride, offset);
    this.permute(re, im, batch, stride, offset);
    this.butterflies(re, im, batch, stride, offset, false);
  }

  /** Inverse transform in place, scaled by 1/n. */
  inverse(re: Float64Array, im: Float64Array, batch = 1, stride = batch, offset = 0): void {
    this.check(re, im, batch, stride, offset);
    this.permute(re, im, batch, stride, offset);
    this.butterflies(re, im, batch, stride, offset, true);
    const s = 1 / this.n;
    for (let j = 0; j < this.n; j++) {
      const p = offset + j * stride;
      for (let b = 0; b < batch; b++) {
        re[p + b]! *= s;
        im[p + b]! *= s;
      }
    }
  }

  private check(re: Float64Array, im: Float64Array, batch: number, stride: number, offset: number): void {
    if (!Number.isInteger(batch) || batch < 1) throw new Error(`ComplexFft: batch must be an integer >= 1, got ${batch}`);
    if (!Number.isInteger(stride) || stride < batch) {
      throw new Error(`ComplexFft: stride must be an integer >= batch (${batch}), got ${stride}`);
    }
    const need = offset + (this.n - 1) * stride + batch;
    if (!Number.isInteger(offset) || offset < 0 || re.length < need || im.length < need) {
      throw new Error(
        `ComplexFft: arrays too short for n=${this.n}, batch=${batch}, stride=${stride}, offset=${offset}: ` +
          `need ${need}, got re ${re.length}, im ${im.length}`,
      );
    }
  }

  /** Bit-reversal permutation of the rows (each row = `batch` consecutive entries). */
  private permute(re: Float64Array, im: Float64Array, batch: number, stride: number, offset: number): void {
    const rev = this.bitrev;
    for (let j = 0; j < this.n; j++) {
      const r = rev[j]!;
      if (r <= j) continue;
      let p = offset + j * stride;
      let q = offset + r * stride;
      for (let b = 0; b < batch; b++, p++, q++) {
        const tr = re[p]!;
        re[p] = re[q]!;
        re[q] = tr;
        const ti = im[p]!;
        im[p] = im[q]!;
        im[q] = ti;
      }
    }
  }

  /**
   * The butterfly stages on data already in bit-reversed order, without scaling
   * (inverse = conjugate twiddles). Low level: real transforms scatter their input in
   * bit-reversed order and call this directly.
   */
  butterflies(re: Float64Array, im: Float64Array, batch: number, stride: number, offset: number, inverse: boolean): void {
    const n = this.n;
    if (n === 1) return;
    if (n === 2) {
      this.radix2Stage(re, im, batch, stride, offset, 1, inverse);
      return;
    }
    // Stages are done two at a time (radix-2^2: the same arithmetic as two radix-2 stages
    // with half the loads and stores); a single radix-2 stage finishes odd log2(n).
    this.firstTwoStages(re, im, batch, stride, offset, inverse);
    let h = 4;
    for (; 4 * h <= n; h *= 4) this.twoStages(re, im, batch, stride, offset, h, inverse);
    if (h < n) this.radix2Stage(re, im, batch, stride, offset, h, inverse);
  }

  /** Stages h = 1 and h = 2 together: twiddles 1 and -i (forward) / +i (inverse), no multiplies. */
  private firstTwoStages(re: Float64Array, im: Float64Array, batch: number, stride: number, offset: number, inverse: boolean): void {
    const n = this.n;
    const sg = inverse ? -1 : 1; // -i * (a + ib) = b - ia (forward); +i * (a + ib) = -b + ia (inverse)
    for (let start = 0; start < n; start += 4) {
      let p0 = offset + start * stride;
      let p1 = p0 + stride;
      let p2 = p1 + stride;
      let p3 = p2 + stride;
      for (let b = 0; b < batch; b++, p0++, p1++, p2++, p3++) {
        const x0r = re[p0]!;
        const x0i = im[p0]!;
        const x1r = re[p1]!;
        const x1i = im[p1]!;
        const x2r = re[p2]!;
        const x2i = im[p2]!;
        const x3r = re[p3]!;
        const x3i = im[p3]!;
        const y0r = x0r + x1r;
        const y0i = x0i + x1i;
        const y1r = x0r - x1r;
        const y1i = x0i - x1i;
        const y2r = x2r + x3r;
        const y2i = x2i + x3i;
        const y3r = x2r - x3r;
        const y3i = x2i - x3i;
        const tr = sg * y3i;
        const ti = -sg * y3r;
        re[p0] = y0r + y2r;
        im[p0] = y0i + y2i;
        re[p2] = y0r - y2r;
        im[p2] = y0i - y2i;
        re[p1] = y1r + tr;
        im[p1] = y1i + ti;
        re[p3] = y1r - tr;
        im[p3] = y1i - ti;
      }
    }
  }

  /** Stages h and 2h together (h >= 4) on groups of 4h rows. */
  private twoStages(
    re: Float64Array,
    im: Float64Array,
    batch: number,
    stride: number,
    offset: number,
    h: number,
    inverse: boolean,
  ): void {
    const n = this.n;
    const twr = this.twRe;
    const twi = inverse ? this.twImInv : this.twImFwd;
    const sg = inverse ? -1 : 1;
    const hs = h * stride;
    for (let k = 0; k < h; k++) {
      const w1r = twr[h - 1 + k]!; // W_{2h}^k
      const w1i = twi[h - 1 + k]!;
      const w2r = twr[2 * h - 1 + k]!; // W_{4h}^k
      const w2i = twi[2 * h - 1 + k]!;
      for (let start = k; start < n; start += 4 * h) {
        let p0 = offset + start * stride;
        let p1 = p0 + hs;
        let p2 = p1 + hs;
        let p3 = p2 + hs;
        for (let b = 0; b < batch; b++, p0++, p1++, p2++, p3++) {
          const x0r = re[p0]!;
          const x0i = im[p0]!;
          const a1r = re[p1]!;
          const a1i = im[p1]!;
          const x2r = re[p2]!;
          const x2i = im[p2]!;
          const a3r = re[p3]!;
          const a3i = im[p3]!;
          const t1r = a1r * w1r - a1i * w1i;
          const t1i = a1r * w1i + a1i * w1r;
          const t3r = a3r * w1r - a3i * w1i;
          const t3i = a3r * w1i + a3i * w1r;
          const y0r = x0r + t1r;
          const y0i = x0i + t1i;
          const y1r = x0r - t1r;
          const y1i = x0i - t1i;
          const y2r = x2r + t3r;
          const y2i = x2i + t3i;
          const y3r = x2r - t3r;
          const y3i = x2i - t3i;
          const u2r = y2r * w2r - y2i * w2i;
          const u2i = y2r * w2i + y2i * w2r;
          const v3r = y3r * w2r - y3i * w2i;
          const v3i = y3r * w2i + y3i * w2r;
          const u3r = sg * v3i; // (-i or +i) * v3, W_{4h}^{k+h} = W_{4h}^k * W_4^1
          const u3i = -sg * v3r;
          re[p0] = y0r + u2r;
          im[p0] = y0i + u2i;
          re[p2] = y0r - u2r;
          im[p2] = y0i - u2i;
          re[p1] = y1r + u3r;
          im[p1] = y1i + u3i;
          re[p3] = y1r - u3r;
          im[p3] = y1i - u3i;
        }
      }
    }
  }

  /** One radix-2 stage of half-length h. */
  private radix2Stage(
    re: Float64Array,
    im: Float64Array,
    batch: number,
    stride: number,
    offset: number,
    h: number,
    inverse: boolean,
  ): void {
    const n = this.n;
    const twr = this.twRe;
    const twi = inverse ? this.twImInv : this.twImFwd;
    const hs = h * stride;
    for (let k = 0; k < h; k++) {
      const wr = twr[h - 1 + k]!;
      const wi = twi[h - 1 + k]!;
      for (let start = k; start < n; start += 2 * h) {
        let p = offset + start * stride;
        let q = p + hs;
        for (let b = 0; b < batch; b++, p++, q++) {
          const ur = re[q]!;
          const ui = im[q]!;
          const xr = ur * wr - ui * wi;
          const xi = ur * wi + ui * wr;
          const yr = re[p]!;
          const yi = im[p]!;
          re[q] = yr - xr;
          im[q] = yi - xi;
          re[p] = yr + xr;
          im[p] = yi + xi;
        }
      }
    }
  }
}

/**
 * Real-input FFT of size n (n >= 2) over a batch, with half-spectrum output.
 *
 * forward(x, re, im): x has shape [n, batch]; re and im have shape [n/2 + 1, batch]
 * (wavenumbers k = 0..n/2, batch fastest). inverse(re, im, x) undoes it exactly (1/n
 * included) and leaves re/im untouched. Both accept offsets into the arrays (element
 * j of transform b at xOffset + j*batch + b, entry k at specOffset + k*batch + b).
 */
export class RealFft {
  readonly n: number;
  /** Number of half-spectrum entries, n/2 + 1. */
  readonly nSpec: number;
  private readonly half: ComplexFft;
  /** W^k = exp(-2 pi i k / n), k = 0..n/2 - 1. */
  private readonly wRe: Float64Array;
  private readonly wIm: Float64Array;
  private zr: Float64Array;
  private zi: Float64Array;
  private yr: Float64Array;
  private yi: Float64Array;

  constructor(n: number) {
    checkPowerOfTwo(n, 'RealFft');
    if (n < 2) throw new Error(`RealFft: size must be >= 2, got ${n}`);
    this.n = n;
    this.nSpec = n / 2 + 1;
    const h = n / 2;
    this.half = new ComplexFft(h);
    this.wRe = new Float64Array(h);
    this.wIm = new Float64Array(h);
    for (let k = 0; k < h; k++) {
      const [c, sn] = unitRoot(k, n);
      this.wRe[k] = c;
      this.wIm[k] = -sn;
    }
    this.zr = new Float64Array(h);
    this.zi = new Float64Array(h);
    this.yr = new Float64Array(h);
    this.yi = new Float64Array(h);
  }

  private work(batch: number): void {
    const need = (this.n / 2) * batch;
    if (this.zr.length < need) {
      this.zr = new Float64Array(need);
      this.zi = new Float64Array(need);
      this.yr = new Float64Array(need);
      this.yi = new Float64Array(need);
    }
  }

  private check(x: Float64Array, re: Float64Array, im: Float64Array, batch: number, xOffset: number, specOffset: number): void {
    if (!Number.isInteger(batch) || batch < 1) throw new Error(`RealFft: batch must be an integer >= 1, got ${batch}`);
    const nx = xOffset + this.n * batch;
    const ns = specOffset + this.nSpec * batch;
    if (!Number.isInteger(xOffset) || xOffset < 0 || x.length < nx) {
      throw new Error(`RealFft: real array too short: need ${nx} (n=${this.n}, batch=${batch}, offset=${xOffset}), got ${x.length}`);
    }
    if (!Number.isInteger(specOffset) || specOffset < 0 || re.length < ns || im.length < ns) {
      throw new Error(
        `RealFft: spectrum arrays too short: need ${ns} (n/2+1=${this.nSpec}, batch=${batch}, offset=${specOffset}), ` +
          `got re ${re.length}, im ${im.length}`,
      );
    }
  }

  private checkSpectrum(re: Float64Array, im: Float64Array, batch: number, offset: number, what: string): void {
    if (!Number.isInteger(batch) || batch < 1) throw new Error(`RealFft: batch must be an integer >= 1, got ${batch}`);
    const ns = offset + this.nSpec * batch;
    if (!Number.isInteger(offset) || offset < 0 || re.length < ns || im.length < ns) {
      throw new Error(`RealFft: ${what} spectrum arrays too short: need ${ns}, got re ${re.length}, im ${im.length}`);
    }
  }

  /** Half spectrum of real x: re/im[k] = X_k for k = 0..n/2 (unnormalised). */
  forward(x: Float64Array, re: Float64Array, im: Float64Array, batch = 1, xOffset = 0, specOffset = 0): void {
    this.check(x, re, im, batch, xOffset, specOffset);
    this.work(batch);
    const h = this.n / 2;
    const zr = this.zr;
    const zi = this.zi;
    const rev = this.half.bitrev;
    // Pack z_j = x_{2j} + i x_{2j+1} straight into bit-reversed order.
    for (let j = 0; j < h; j++) {
      let p = rev[j]! * batch;
      let s = xOffset + 2 * j * batch;
      let t = s + batch;
      for (let b = 0; b < batch; b++, p++, s++, t++) {
        zr[p] = x[s]!;
        zi[p] = x[t]!;
      }
    }
    this.half.butterflies(zr, zi, batch, batch, 0, false);
    this.finishForward(zr, zi, re, im, batch, specOffset);
  }

  /** Real x from the half spectrum re/im (k = 0..n/2), scaled by 1/n; re/im are not modified. */
  inverse(re: Float64Array, im: Float64Array, x: Float64Array, batch = 1, specOffset = 0, xOffset = 0): void {
    this.check(x, re, im, batch, xOffset, specOffset);
    this.work(batch);
    const h = this.n / 2;
    const zr = this.zr;
    const zi = this.zi;
    this.startInverse(re, im, zr, zi, batch, specOffset);
    for (let j = 0; j < h; j++) {
      let p = j * batch;
      let s0 = xOffset + 2 * j * batch;
      let s1 = s0 + batch;
      for (let b = 0; b < batch; b++, p++, s0++, s1++) {
        x[s0] = zr[p]!;
        x[s1] = zi[p]!;
      }
    }
  }

  /**
   * FFT(IFFT(X)^2): the half spectrum of the square of the real signal whose half spectrum
   * is (re, im), for a quadratic nonlinearity. Bit-identical to inverse, squaring and
   * forward in turn, without the round trip through a real array. Input and output may not
   * overlap; offsets as for forward/inverse.
   */
  squareOfSignal(
    re: Float64Array,
    im: Float64Array,
    outRe: Float64Array,
    outIm: Float64Array,
    batch = 1,
    inOffset = 0,
    outOffset = 0,
  ): void {
    this.checkSpectrum(re, im, batch, inOffset, 'input');
    this.checkSpectrum(outRe, outIm, batch, outOffset, 'output');
    this.work(batch);
    const h = this.n / 2;
    const zr = this.zr;
    const zi = this.zi;
    const yr = this.yr;
    const yi = this.yi;
    const rev = this.half.bitrev;
    this.startInverse(re, im, zr, zi, batch, inOffset);
    // z_j = u_{2j} + i u_{2j+1}; the forward input is u_{2j}^2 + i u_{2j+1}^2, bit-reversed.
    for (let j = 0; j < h; j++) {
      let p = j * batch;
      let q = rev[j]! * batch;
      for (let b = 0; b < batch; b++, p++, q++) {
        const a = zr[p]!;
        const c = zi[p]!;
        yr[q] = a * a;
        yi[q] = c * c;
      }
    }
    this.half.butterflies(yr, yi, batch, batch, 0, false);
    this.finishForward(yr, yi, outRe, outIm, batch, outOffset);
  }

  /** Inverse, first half: split the half spectrum into Z (bit-reversed, scaled) and run the inverse butterflies. */
  private startInverse(re: Float64Array, im: Float64Array, zr: Float64Array, zi: Float64Array, batch: number, specOffset: number): void {
    const h = this.n / 2;
    const rev = this.half.bitrev;
    const wr = this.wRe;
    const wi = this.wIm;
    // The 1/n of the inverse: 1/h for the half-size transform times the 1/2 of E and O.
    const s = 1 / this.n;
    {
      let o0 = specOffset;
      let oh = specOffset + h * batch;
      let p = rev[0]! * batch;
      for (let b = 0; b < batch; b++, o0++, oh++, p++) {
        const a = re[o0]!;
        const c = re[oh]!;
        zr[p] = s * (a + c);
        zi[p] = s * (a - c);
      }
    }
    // E = (X_k + conj X_{h-k})/2, O = (X_k - conj X_{h-k}) conj(W^k)/2,
    // Z_k = E + i O and Z_{h-k} = conj(E) + i conj(O).
    for (let k = 1; 2 * k <= h; k++) {
      const cr = wr[k]!;
      const ci = wi[k]!;
      let ok = specOffset + k * batch;
      let om = specOffset + (h - k) * batch;
      let pk = rev[k]! * batch;
      let pm = rev[h - k]! * batch;
      for (let b = 0; b < batch; b++, ok++, om++, pk++, pm++) {
        const a = re[ok]!;
        const bb = im[ok]!;
        const c = re[om]!;
        const d = im[om]!;
        const er = s * (a + c);
        const ei = s * (bb - d);
        const dr = s * (a - c);
        const di = s * (bb + d);
        const or = dr * cr + di * ci;
        const oi = di * cr - dr * ci;
        zr[pk] = er - oi;
        zi[pk] = ei + or;
        zr[pm] = er + oi;
        zi[pm] = or - ei;
      }
    }
    this.half.butterflies(zr, zi, batch, batch, 0, true);
  }

  /** Forward, second half: the half spectrum X from the transformed Z = FFT_{n/2}(z). */
  private finishForward(zr: Float64Array, zi: Float64Array, re: Float64Array, im: Float64Array, batch: number, specOffset: number): void {
    const h = this.n / 2;
    const wr = this.wRe;
    const wi = this.wIm;
    // k = 0 and k = n/2: X_0 = Re Z_0 + Im Z_0, X_{n/2} = Re Z_0 - Im Z_0 (both real).
    {
      let o0 = specOffset;
      let oh = specOffset + h * batch;
      for (let b = 0; b < batch; b++, o0++, oh++) {
        const a = zr[b]!;
        const c = zi[b]!;
        re[o0] = a + c;
        im[o0] = 0;
        re[oh] = a - c;
        im[oh] = 0;
      }
    }
    // Pairs (k, h-k): E = (Z_k + conj Z_{h-k})/2, O = (Z_k - conj Z_{h-k})/(2i),
    // X_k = E + W^k O and X_{h-k} = conj(E - W^k O).
    for (let k = 1; 2 * k <= h; k++) {
      const cr = wr[k]!;
      const ci = wi[k]!;
      let pk = k * batch;
      let pm = (h - k) * batch;
      let ok = specOffset + k * batch;
      let om = specOffset + (h - k) * batch;
      for (let b = 0; b < batch; b++, pk++, pm++, ok++, om++) {
        const a = zr[pk]!;
        const bb = zi[pk]!;
        const c = zr[pm]!;
        const d = zi[pm]!;
        const er = 0.5 * (a + c);
        const ei = 0.5 * (bb - d);
        const or = 0.5 * (bb + d);
        const oi = -0.5 * (a - c);
        const tr = cr * or - ci * oi;
        const ti = cr * oi + ci * or;
        re[ok] = er + tr;
        im[ok] = ei + ti;
        re[om] = er - tr;
        im[om] = ti - ei;
      }
    }
  }
}
