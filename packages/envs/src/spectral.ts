/**
 * Helpers for Fourier pseudo-spectral methods on a periodic interval [0, L) sampled at
 * n equispaced points x_j = j L / n (n a power of two), built on `fft.ts`.
 *
 * Conventions (shared by every 1-D surrogate; the 2-D ones apply them per direction):
 * - Spectra are unnormalised half spectra from `RealFft.forward`: entry j = 0..n/2 holds
 *   the coefficient of exp(+i k_j x) times n, with angular wavenumber k_j = 2 pi j / L.
 * - Nyquist handling: the j = n/2 entry has no partner of opposite sign, so an odd
 *   derivative of it is not real; derivatives of odd order set it to zero, even orders
 *   keep it ((i k)^2 = -k^2 is real). Solvers hold the Nyquist mode at zero.
 * - Dealiasing (optional, Orszag's 2/3 rule: Orszag 1971, J. Atmos. Sci. 28, 1074):
 *   a quadratic product is truncated to |j| < n/3, i.e. entries j with 3 j >= n are zeroed.
 */
import { RealFft } from './fft';

/** Angular wavenumbers k_j = 2 pi j / L of the half spectrum, j = 0..n/2. */
export function halfSpectrumWavenumbers(n: number, L: number): Float64Array {
  if (!(L > 0 && Number.isFinite(L))) throw new Error(`halfSpectrumWavenumbers: L must be positive and finite, got ${L}`);
  const k = new Float64Array(n / 2 + 1);
  for (let j = 0; j <= n / 2; j++) k[j] = (2 * Math.PI * j) / L;
  return k;
}

/** Orszag's 2/3-rule mask over the half spectrum: 1 for 3 j < n, else 0. */
export function twoThirdsMask(n: number): Float64Array {
  const m = new Float64Array(n / 2 + 1);
  for (let j = 0; j <= n / 2; j++) m[j] = 3 * j < n ? 1 : 0;
  return m;
}

/**
 * Multiply half spectra by (i k_j)^order, writing into out (which may alias the input).
 * Layout [blocks, n/2+1, batch]: `blocks` consecutive batch-inner blocks (blocks = B,
 * batch = 1 is the copy-major layout [B, n/2+1]). The Nyquist entry is zeroed for odd orders.
 */
export function differentiateSpectrum(
  k: Float64Array,
  order: number,
  re: Float64Array,
  im: Float64Array,
  outRe: Float64Array,
  outIm: Float64Array,
  batch = 1,
  blocks = 1,
): void {
  if (!Number.isInteger(order) || order < 0) throw new Error(`differentiateSpectrum: order must be an integer >= 0, got ${order}`);
  const nSpec = k.length;
  const nyq = nSpec - 1;
  // (i k)^order = k^order * i^order, i^order cycling 1, i, -1, -i.
  const phase = order % 4;
  for (let j = 0; j < nSpec; j++) {
    const kp = j === nyq && order % 2 === 1 ? 0 : k[j]! ** order;
    for (let c = 0; c < blocks; c++) {
      for (let b = 0, p = (c * nSpec + j) * batch; b < batch; b++, p++) {
        const r = re[p]!;
        const s = im[p]!;
        if (phase === 0) {
          outRe[p] = kp * r;
          outIm[p] = kp * s;
        } else if (phase === 1) {
          outRe[p] = -kp * s;
          outIm[p] = kp * r;
        } else if (phase === 2) {
          outRe[p] = -kp * r;
          outIm[p] = -kp * s;
        } else {
          outRe[p] = kp * s;
          outIm[p] = -kp * r;
        }
      }
    }
  }
}

/**
 * Spectral derivative d^order u / dx^order of a batch of periodic samples u [n, batch]
 * on [0, L), written to out [n, batch]. Allocates its work arrays once per instance.
 */
export class SpectralDerivative {
  readonly n: number;
  readonly L: number;
  readonly k: Float64Array;
  private readonly fft: RealFft;
  private re: Float64Array;
  private im: Float64Array;

  constructor(n: number, L: number) {
    this.fft = new RealFft(n);
    this.n = n;
    this.L = L;
    this.k = halfSpectrumWavenumbers(n, L);
    this.re = new Float64Array(0);
    this.im = new Float64Array(0);
  }

  apply(u: Float64Array, order: number, out: Float64Array, batch = 1): void {
    const need = this.fft.nSpec * batch;
    if (this.re.length < need) {
      this.re = new Float64Array(need);
      this.im = new Float64Array(need);
    }
    this.fft.forward(u, this.re, this.im, batch);
    differentiateSpectrum(this.k, order, this.re, this.im, this.re, this.im, batch);
    this.fft.inverse(this.re, this.im, out, batch);
  }
}
