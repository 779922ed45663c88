/**
 * The agent solves a problem with a known optimum: discrete-time LQR for the double
 * integrator. The optimal gain comes from the discrete algebraic Riccati equation, solved
 * with ml-matrix (test/helpers/lqr.ts); the solver itself is checked first against a
 * published worked example and against independently computed values.
 */
import { Matrix } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { createNetBackend } from '../src/net/select';
import { dlqr, LQR_PROTOCOL, trainLqr } from './helpers/lqr';

const A = new Matrix([
  [1, 1],
  [0, 1],
]);
const B = new Matrix([[0], [1]]);
const I2 = Matrix.eye(2);
const R1 = new Matrix([[1]]);

describe('Riccati solver (ml-matrix)', () => {
  it('reproduces the published discrete LQR worked example', () => {
    // Altair Compose documentation, function dlqr, example:
    // A = [9, 0.2; 0, 8], B = [0; 1], Q = [2, 1; 1, 2], R = 1 ->
    // K = [394.61003 16.76761], X = [1.04036e7 2.34349e5; 2.34349e5 5.34387e3],
    // closed-loop poles 0.11073, 0.12166 (printed to the digits shown).
    const r = dlqr(
      new Matrix([
        [9, 0.2],
        [0, 8],
      ]),
      B,
      new Matrix([
        [2, 1],
        [1, 2],
      ]),
      R1,
    );
    expect(r.K.get(0, 0)).toBeCloseTo(394.61003, 4);
    expect(r.K.get(0, 1)).toBeCloseTo(16.76761, 4);
    expect(r.P.get(0, 0) / 1.04036e7).toBeCloseTo(1, 5);
    expect(r.P.get(0, 1) / 2.34349e5).toBeCloseTo(1, 5);
    expect(r.P.get(1, 1) / 5.34387e3).toBeCloseTo(1, 5);
    expect(r.poles[0]).toBeCloseTo(0.11073, 5);
    expect(r.poles[1]).toBeCloseTo(0.12166, 5);
  });

  it('gives the double-integrator gains computed independently', () => {
    // Computed (not published) by iterating the same recursion in NumPy float64 for this
    // project: gamma = 1 -> K = [0.42208, 1.24393]; gamma = 0.99 -> K = [0.41885, 1.23813].
    const k1 = dlqr(A, B, I2, R1, 1).K;
    expect(k1.get(0, 0)).toBeCloseTo(0.42208, 5);
    expect(k1.get(0, 1)).toBeCloseTo(1.24393, 5);
    const k99 = dlqr(A, B, I2, R1, 0.99).K;
    expect(k99.get(0, 0)).toBeCloseTo(0.41885, 5);
    expect(k99.get(0, 1)).toBeCloseTo(1.23813, 5);
    // Discounted optimality: P solves P = Q + K'RK + gamma (A - BK)' P (A - BK) (the
    // Bellman equation of the closed loop), a check independent of the iteration.
    const g = 0.9;
    const { K, P } = dlqr(A, B, I2, R1, g);
    const Acl = A.clone().sub(B.mmul(K));
    const rhs = I2.clone().add(K.transpose().mmul(R1).mmul(K)).add(Acl.transpose().mmul(P).mmul(Acl).mul(g));
    expect(rhs.clone().sub(P).abs().max()).toBeLessThan(1e-10);
  });
});

describe.each(['tfjs-wasm', 'simd-fma', 'simd'] as const)('TD3 on the double-integrator LQR (%s backend)', (backendName) => {
  it(
    'learns a policy whose gain is within 10% of the discounted Riccati gain',
    async () => {
      // Protocol (test/helpers/lqr.ts): gamma = 0.9, 64 tiles each an independent double
      // integrator, x0 ~ U[-1,1]^2, time limit 5 steps (bootstrapped), 3000 steps with one
      // update each; actor = tanh of one affine layer times the bound 3 (linear near 0),
      // critic relu [64, 64]. The gain is the central difference of the deterministic policy
      // at x = 0, averaged over the last 1000 steps (10 readings).
      // Why these choices: with longer episodes an early destabilising policy drives the
      // states to where tanh saturates and its gradient vanishes, and training can stall;
      // gamma = 0.9 keeps the value horizon short enough for a few thousand updates.
      // Tolerance: 10% per component. Seeds 1-8 landed within 8.3% when this test was written
      // (scripts/check-lqr-seeds.ts prints them; the learned gains sit a few per cent above the
      // optimum on average); this seed is one deterministic run.
      const optimal = dlqr(A, B, I2, R1, LQR_PROTOCOL.gamma).K; // [0.38818, 1.18173]
      const run = await trainLqr(1, { backend: await createNetBackend(backendName) });
      for (let j = 0; j < 2; j++) {
        const k = optimal.get(0, j);
        expect(Math.abs(run.gain[j]! - k) / k).toBeLessThan(0.1);
      }
    },
    120_000,
  );
});
