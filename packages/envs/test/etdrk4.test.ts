import { describe, expect, it } from 'vitest';
import { Etdrk4Stepper, etdrk4Coefficients, type NonlinearTerm } from '../src/etdrk4';

/** Closed forms of the ETDRK4 coefficients (Cox & Matthews 2002), accurate where |z| is not small. */
function closedForm(z: number, h: number) {
  const e = Math.exp(z);
  return {
    Q: (h * (Math.exp(z / 2) - 1)) / z,
    f1: (h * (-4 - z + e * (4 - 3 * z + z * z))) / z ** 3,
    f2: (h * (2 + z + e * (-2 + z))) / z ** 3,
    f3: (h * (-4 - 3 * z - z * z + e * (4 - z))) / z ** 3,
  };
}

/** Measured order p = log2(err(h) / err(h/2)) for each successive halving. */
function orders(errors: number[]): number[] {
  const p: number[] = [];
  for (let i = 1; i < errors.length; i++) p.push(Math.log2(errors[i - 1]! / errors[i]!));
  return p;
}

describe('etdrk4Coefficients', () => {
  it('match the closed forms where they are well conditioned (|z| >= 1)', () => {
    const h = 0.25;
    const zs = [-40, -8, -3, -1, 1, 2.5];
    const c = etdrk4Coefficients(Float64Array.from(zs.map((z) => z / h)), h);
    zs.forEach((z, k) => {
      const ref = closedForm(z, h);
      expect(c.E[k]).toBeCloseTo(Math.exp(z), 14);
      expect(c.E2[k]).toBeCloseTo(Math.exp(z / 2), 14);
      expect(Math.abs(c.Q[k]! - ref.Q)).toBeLessThan(1e-13 * Math.max(1, Math.abs(ref.Q)));
      expect(Math.abs(c.f1[k]! - ref.f1)).toBeLessThan(1e-12 * h);
      expect(Math.abs(c.f2[k]! - ref.f2)).toBeLessThan(1e-12 * h);
      expect(Math.abs(c.f3[k]! - ref.f3)).toBeLessThan(1e-12 * h);
    });
  });

  it('match the phi-function series near z = 0, where the closed forms cancel catastrophically', () => {
    // phi_l(z) = sum_n z^n / (n + l)!; Cox-Matthews weights in phi form (Hochbruck & Ostermann
    // 2010, Acta Numerica 19, 209-286, sec. 2.3): f1 = h(phi1 - 3 phi2 + 4 phi3),
    // 2 f2 = h(2 phi2 - 4 phi3), f3 = h(-phi2 + 4 phi3), Q = (h/2) phi1(z/2).
    // At z = 0: Q = h/2 and f1 = f2 = f3 = h/6 (Kassam & Trefethen 2005, sec. 2).
    const phi = (l: number, z: number): number => {
      let term = 1;
      for (let i = 1; i <= l; i++) term /= i;
      let sum = 0;
      for (let n = 0; n < 30; n++) {
        sum += term;
        term *= z / (n + l + 1);
      }
      return sum;
    };
    const h = 0.1;
    const zs = [0, 1e-9, 1e-5, 1e-3, -0.05, 0.3];
    const c = etdrk4Coefficients(Float64Array.from(zs.map((z) => z / h)), h);
    expect(c.Q[0]).toBeCloseTo(h / 2, 15);
    expect(c.f1[0]).toBeCloseTo(h / 6, 15);
    zs.forEach((z, k) => {
      const [p1, p2, p3] = [phi(1, z), phi(2, z), phi(3, z)];
      expect(Math.abs(c.Q[k]! - (h / 2) * phi(1, z / 2))).toBeLessThan(1e-15);
      expect(Math.abs(c.f1[k]! - h * (p1 - 3 * p2 + 4 * p3))).toBeLessThan(1e-15);
      expect(Math.abs(c.f2[k]! - h * (p2 - 2 * p3))).toBeLessThan(1e-15);
      expect(Math.abs(c.f3[k]! - h * (-p2 + 4 * p3))).toBeLessThan(1e-15);
    });
  });

  it('f1 + 4 f2 + f3 = h (e^z - 1)/z, so a constant N is integrated exactly', () => {
    const h = 0.05;
    const L = Float64Array.from([-1000, -3.2, -0.01, 0, 0.7]);
    const c = etdrk4Coefficients(L, h);
    for (let k = 0; k < L.length; k++) {
      const z = h * L[k]!;
      const phi1 = z === 0 ? h : (h * Math.expm1(z)) / z;
      expect(Math.abs(c.f1[k]! + 4 * c.f2[k]! + c.f3[k]! - phi1)).toBeLessThan(1e-14);
    }
  });

  it('reject bad input naming the value', () => {
    expect(() => etdrk4Coefficients(Float64Array.from([1]), 0)).toThrow(/h must be.*got 0/);
    expect(() => etdrk4Coefficients(Float64Array.from([1, NaN]), 0.1)).toThrow(/L\[1\].*NaN/);
  });
});

describe('Etdrk4Stepper', () => {
  /** dv/dt = L v + c v with complex c: exact solution v0 exp((L + c) t). */
  function linearRun(h: number, T: number, L: number[], cRe: number, cIm: number): number {
    const coeffs = etdrk4Coefficients(Float64Array.from(L), h);
    const stepper = new Etdrk4Stepper(coeffs, 2);
    const vRe = new Float64Array(L.length * 2).fill(1);
    const vIm = new Float64Array(L.length * 2).fill(0.5);
    const N: NonlinearTerm = {
      evaluate(aRe, aIm, oRe, oIm) {
        for (let i = 0; i < aRe.length; i++) {
          oRe[i] = cRe * aRe[i]! - cIm * aIm[i]!;
          oIm[i] = cRe * aIm[i]! + cIm * aRe[i]!;
        }
      },
    };
    const steps = Math.round(T / h);
    for (let s = 0; s < steps; s++) stepper.step(vRe, vIm, N);
    let err = 0;
    L.forEach((l, k) => {
      const g = Math.exp((l + cRe) * T);
      const exRe = g * (Math.cos(cIm * T) - 0.5 * Math.sin(cIm * T));
      const exIm = g * (Math.sin(cIm * T) + 0.5 * Math.cos(cIm * T));
      for (let b = 0; b < 2; b++) {
        err = Math.max(err, Math.hypot(vRe[k * 2 + b]! - exRe, vIm[k * 2 + b]! - exIm));
      }
    });
    return err;
  }

  it('is fourth order on a linear problem with exact solution (stiff diagonal part)', () => {
    const errs = [0.2, 0.1, 0.05, 0.025].map((h) => linearRun(h, 2, [-20, -1, 0.3], -0.4, 2));
    const p = orders(errs);
    for (const q of p) expect(q).toBeGreaterThan(3.7);
    for (const q of p) expect(q).toBeLessThan(4.6);
  });

  it('is fourth order on a nonlinear Bernoulli equation with exact solution', () => {
    // dv/dt = l v - v^2, v(0) = v0: v(t) = l v0 e^{lt} / (l + v0 (e^{lt} - 1)).
    const l = -3;
    const v0 = 2;
    const T = 1;
    const exact = (l * v0 * Math.exp(l * T)) / (l + v0 * Math.expm1(l * T));
    const N: NonlinearTerm = {
      evaluate(aRe, aIm, oRe, oIm) {
        for (let i = 0; i < aRe.length; i++) {
          oRe[i] = -(aRe[i]! * aRe[i]! - aIm[i]! * aIm[i]!);
          oIm[i] = -2 * aRe[i]! * aIm[i]!;
        }
      },
    };
    // Steps in the asymptotic range: h |dN/dv| = 2 h |v| <= 0.2.
    const errs = [0.05, 0.025, 0.0125, 0.00625].map((h) => {
      const stepper = new Etdrk4Stepper(etdrk4Coefficients(Float64Array.from([l]), h), 1);
      const vRe = Float64Array.from([v0]);
      const vIm = new Float64Array(1);
      for (let s = 0; s < Math.round(T / h); s++) stepper.step(vRe, vIm, N);
      expect(vIm[0]).toBe(0);
      return Math.abs(vRe[0]! - exact);
    });
    for (const q of orders(errs)) {
      expect(q).toBeGreaterThan(3.7);
      expect(q).toBeLessThan(4.6);
    }
  });

  it('rejects a state of the wrong length', () => {
    const stepper = new Etdrk4Stepper(etdrk4Coefficients(Float64Array.from([1, 2]), 0.1), 3);
    const N: NonlinearTerm = { evaluate() {} };
    expect(() => stepper.step(new Float64Array(5), new Float64Array(6), N)).toThrow(/modes\*batch = 6/);
  });
});
