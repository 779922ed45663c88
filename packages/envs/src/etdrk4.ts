/**
 * Exponential time differencing, fourth-order Runge-Kutta (ETDRK4) for stiff systems
 * whose linear part is diagonal:
 *
 *     dv/dt = L v + N(v, t),     L = diag(L_0 .. L_{M-1}) real,
 *
 * as arises for Fourier coefficients v of a periodic PDE (e.g. Kuramoto-Sivashinsky,
 * L_k = k^2 - k^4; 2-D Navier-Stokes vorticity, L_k = -nu |k|^2 - mu).
 *
 * Scheme: Cox & Matthews (2002), J. Comput. Phys. 176, 430-455 (their ETDRK4), as
 * written in Kassam & Trefethen (2005) and their program kursiv.m. One step of size h:
 *     a     = E2 v + Q N(v)
 *     b     = E2 v + Q N(a)
 *     c     = E2 a + Q (2 N(b) - N(v))
 *     v_new = E v + f1 N(v) + 2 f2 (N(a) + N(b)) + f3 N(c)
 * with E = exp(hL), E2 = exp(hL/2) and, for z = hL,
 *     Q  = h (e^{z/2} - 1) / z
 *     f1 = h (-4 - z + e^z (4 - 3z + z^2)) / z^3
 *     f2 = h (2 + z + e^z (-2 + z)) / z^3
 *     f3 = h (-4 - 3z - z^2 + e^z (4 - z)) / z^3.
 *
 * These expressions lose every digit to cancellation for small |z|. Following Kassam &
 * Trefethen (2005), SIAM J. Sci. Comput. 26(4), 1214-1233, sec. 3 and their program
 * kursiv.m, each function is instead evaluated as the mean of its values over points
 * on a circle of radius R centred at z (Cauchy's integral formula, trapezoid rule):
 * with real L the circle is symmetric about the real axis, so M points on the upper
 * half circle, r_j = R exp(i pi (j - 1/2) / M), j = 1..M, and the real part of their
 * mean suffice. Their program uses M = 16, R = 1 (the defaults here).
 *
 * Nonautonomous forcing that is constant over a step (held actuation) is handled
 * exactly when it is included in N: for constant N the scheme returns the exact
 * solution, since f1 + 4 f2 + f3 = (e^z - 1) h / z (a property of the scheme, tested).
 *
 * This file is the one place where time-stepping coefficients are computed.
 */

/** Options of the contour-integral evaluation. */
export interface Etdrk4Options {
  /** Points on the upper half circle (Kassam & Trefethen 2005, kursiv.m: 16). */
  readonly contourPoints?: number;
  /** Radius of the circle around each h*L_k (Kassam & Trefethen 2005: 1). */
  readonly contourRadius?: number;
}

/** ETDRK4 coefficients for step h, one entry per diagonal entry of L. */
export interface Etdrk4Coefficients {
  /** The step size h they were computed for. */
  readonly h: number;
  /** Number of diagonal entries M. */
  readonly modes: number;
  readonly E: Float64Array;
  readonly E2: Float64Array;
  readonly Q: Float64Array;
  readonly f1: Float64Array;
  readonly f2: Float64Array;
  readonly f3: Float64Array;
}

/** Default number of contour points, as in Kassam & Trefethen's kursiv.m. */
export const ETDRK4_CONTOUR_POINTS = 16;
/** Default contour radius, as in Kassam & Trefethen's kursiv.m. */
export const ETDRK4_CONTOUR_RADIUS = 1;

/**
 * Coefficients E, E2, Q, f1, f2, f3 of Cox & Matthews' ETDRK4 for the diagonal operator
 * `L` and step `h`, the phi-functions by Kassam & Trefethen's contour mean.
 */
export function etdrk4Coefficients(L: Float64Array, h: number, options: Etdrk4Options = {}): Etdrk4Coefficients {
  const M = options.contourPoints ?? ETDRK4_CONTOUR_POINTS;
  const R = options.contourRadius ?? ETDRK4_CONTOUR_RADIUS;
  if (!(Number.isFinite(h) && h > 0)) throw new Error(`etdrk4Coefficients: h must be a positive finite number, got ${h}`);
  if (!Number.isInteger(M) || M < 1) throw new Error(`etdrk4Coefficients: contourPoints must be an integer >= 1, got ${M}`);
  if (!(Number.isFinite(R) && R > 0)) throw new Error(`etdrk4Coefficients: contourRadius must be positive, got ${R}`);
  const n = L.length;
  const E = new Float64Array(n);
  const E2 = new Float64Array(n);
  const Q = new Float64Array(n);
  const f1 = new Float64Array(n);
  const f2 = new Float64Array(n);
  const f3 = new Float64Array(n);
  // Contour points on the upper half circle.
  const rRe = new Float64Array(M);
  const rIm = new Float64Array(M);
  for (let j = 0; j < M; j++) {
    const th = (Math.PI * (j + 0.5)) / M;
    rRe[j] = R * Math.cos(th);
    rIm[j] = R * Math.sin(th);
  }
  for (let k = 0; k < n; k++) {
    const Lk = L[k]!;
    if (!Number.isFinite(Lk)) throw new Error(`etdrk4Coefficients: L[${k}] must be finite, got ${Lk}`);
    const z0 = h * Lk;
    E[k] = Math.exp(z0);
    E2[k] = Math.exp(z0 / 2);
    let sQ = 0;
    let s1 = 0;
    let s2 = 0;
    let s3 = 0;
    for (let j = 0; j < M; j++) {
      // z = z0 + r_j (complex); every quantity below is the real part of a complex expression.
      const zr = z0 + rRe[j]!;
      const zi = rIm[j]!;
      const ez = Math.exp(zr);
      const eRe = ez * Math.cos(zi); // e^z
      const eIm = ez * Math.sin(zi);
      const eh = Math.exp(zr / 2);
      const ehRe = eh * Math.cos(zi / 2); // e^{z/2}
      const ehIm = eh * Math.sin(zi / 2);
      const d = zr * zr + zi * zi;
      const izRe = zr / d; // 1/z
      const izIm = -zi / d;
      const z2Re = zr * zr - zi * zi; // z^2
      const z2Im = 2 * zr * zi;
      const iz3Re = izRe * (izRe * izRe - izIm * izIm) - izIm * (2 * izRe * izIm); // 1/z^3
      const iz3Im = izRe * (2 * izRe * izIm) + izIm * (izRe * izRe - izIm * izIm);
      // Q: (e^{z/2} - 1)/z
      sQ += (ehRe - 1) * izRe - ehIm * izIm;
      // f1: (-4 - z + e^z (4 - 3z + z^2)) / z^3
      {
        const pRe = 4 - 3 * zr + z2Re;
        const pIm = -3 * zi + z2Im;
        const nRe = -4 - zr + (eRe * pRe - eIm * pIm);
        const nIm = -zi + (eRe * pIm + eIm * pRe);
        s1 += nRe * iz3Re - nIm * iz3Im;
      }
      // f2: (2 + z + e^z (-2 + z)) / z^3
      {
        const pRe = -2 + zr;
        const pIm = zi;
        const nRe = 2 + zr + (eRe * pRe - eIm * pIm);
        const nIm = zi + (eRe * pIm + eIm * pRe);
        s2 += nRe * iz3Re - nIm * iz3Im;
      }
      // f3: (-4 - 3z - z^2 + e^z (4 - z)) / z^3
      {
        const pRe = 4 - zr;
        const pIm = -zi;
        const nRe = -4 - 3 * zr - z2Re + (eRe * pRe - eIm * pIm);
        const nIm = -3 * zi - z2Im + (eRe * pIm + eIm * pRe);
        s3 += nRe * iz3Re - nIm * iz3Im;
      }
    }
    Q[k] = (h * sQ) / M;
    f1[k] = (h * s1) / M;
    f2[k] = (h * s2) / M;
    f3[k] = (h * s3) / M;
  }
  return { h, modes: n, E, E2, Q, f1, f2, f3 };
}

/**
 * The nonlinear (and forcing) part N of dv/dt = L v + N(v). The stepper calls it four
 * times per step with state arrays of shape [modes, batch] (batch fastest) and expects
 * N written into the out arrays (same shape). It must not keep references to them.
 */
export interface NonlinearTerm {
  evaluate(vRe: Float64Array, vIm: Float64Array, outRe: Float64Array, outIm: Float64Array): void;
}

/**
 * Generic ETDRK4 stepper over precomputed coefficients. The state is complex and split:
 * vRe, vIm of shape [modes, batch], entry (k, b) at k*batch + b. Work arrays are
 * allocated once here; `step` allocates nothing.
 */
export class Etdrk4Stepper {
  readonly coeffs: Etdrk4Coefficients;
  readonly batch: number;
  readonly size: number;
  private readonly aRe: Float64Array;
  private readonly aIm: Float64Array;
  private readonly bRe: Float64Array;
  private readonly bIm: Float64Array;
  private readonly nvRe: Float64Array;
  private readonly nvIm: Float64Array;
  private readonly naRe: Float64Array;
  private readonly naIm: Float64Array;
  private readonly nbRe: Float64Array;
  private readonly nbIm: Float64Array;
  private readonly ncRe: Float64Array;
  private readonly ncIm: Float64Array;

  constructor(coeffs: Etdrk4Coefficients, batch: number) {
    if (!Number.isInteger(batch) || batch < 1) throw new Error(`Etdrk4Stepper: batch must be an integer >= 1, got ${batch}`);
    this.coeffs = coeffs;
    this.batch = batch;
    this.size = coeffs.modes * batch;
    const z = (): Float64Array => new Float64Array(this.size);
    this.aRe = z();
    this.aIm = z();
    this.bRe = z();
    this.bIm = z();
    this.nvRe = z();
    this.nvIm = z();
    this.naRe = z();
    this.naIm = z();
    this.nbRe = z();
    this.nbIm = z();
    this.ncRe = z();
    this.ncIm = z();
  }

  /** Advance (vRe, vIm) in place by one step h. */
  step(vRe: Float64Array, vIm: Float64Array, N: NonlinearTerm): void {
    if (vRe.length !== this.size || vIm.length !== this.size) {
      throw new Error(`Etdrk4Stepper.step: state must have length modes*batch = ${this.size}, got ${vRe.length}, ${vIm.length}`);
    }
    const { E, E2, Q, f1, f2, f3, modes } = this.coeffs;
    const B = this.batch;
    const { aRe, aIm, bRe, bIm, nvRe, nvIm, naRe, naIm, nbRe, nbIm, ncRe, ncIm } = this;

    N.evaluate(vRe, vIm, nvRe, nvIm);
    // a = E2 v + Q N(v)
    for (let k = 0, i = 0; k < modes; k++) {
      const e2 = E2[k]!;
      const q = Q[k]!;
      for (let b = 0; b < B; b++, i++) {
        aRe[i] = e2 * vRe[i]! + q * nvRe[i]!;
        aIm[i] = e2 * vIm[i]! + q * nvIm[i]!;
      }
    }
    N.evaluate(aRe, aIm, naRe, naIm);
    // b = E2 v + Q N(a)
    for (let k = 0, i = 0; k < modes; k++) {
      const e2 = E2[k]!;
      const q = Q[k]!;
      for (let b = 0; b < B; b++, i++) {
        bRe[i] = e2 * vRe[i]! + q * naRe[i]!;
        bIm[i] = e2 * vIm[i]! + q * naIm[i]!;
      }
    }
    N.evaluate(bRe, bIm, nbRe, nbIm);
    // c = E2 a + Q (2 N(b) - N(v)), stored over a (a is no longer needed).
    for (let k = 0, i = 0; k < modes; k++) {
      const e2 = E2[k]!;
      const q = Q[k]!;
      for (let b = 0; b < B; b++, i++) {
        aRe[i] = e2 * aRe[i]! + q * (2 * nbRe[i]! - nvRe[i]!);
        aIm[i] = e2 * aIm[i]! + q * (2 * nbIm[i]! - nvIm[i]!);
      }
    }
    N.evaluate(aRe, aIm, ncRe, ncIm);
    // v = E v + f1 N(v) + 2 f2 (N(a) + N(b)) + f3 N(c)
    for (let k = 0, i = 0; k < modes; k++) {
      const e = E[k]!;
      const g1 = f1[k]!;
      const g2 = 2 * f2[k]!;
      const g3 = f3[k]!;
      for (let b = 0; b < B; b++, i++) {
        vRe[i] = e * vRe[i]! + g1 * nvRe[i]! + g2 * (naRe[i]! + nbRe[i]!) + g3 * ncRe[i]!;
        vIm[i] = e * vIm[i]! + g1 * nvIm[i]! + g2 * (naIm[i]! + nbIm[i]!) + g3 * ncIm[i]!;
      }
    }
  }
}
