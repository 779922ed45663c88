/**
 * Test-only: the discrete algebraic Riccati equation solved with a general-purpose matrix
 * library (ml-matrix), and a small tiled LQR environment trained through the agent's public
 * API. Shared by test/lqr.test.ts and scripts/check-lqr-seeds.ts (the multi-seed check).
 */
import { Rng } from '@tilewise/envs';
import { EigenvalueDecomposition, Matrix, solve } from 'ml-matrix';
import { createAgent } from '../../src/agent';
import type { NetBackend } from '../../src/net/types';

export interface DlqrResult {
  /** Gain of u = -K x, [m, n]. */
  readonly K: Matrix;
  /** Stabilising solution of the DARE, [n, n]. */
  readonly P: Matrix;
  /** Real parts of the closed-loop poles eig(A - B K), sorted ascending. */
  readonly poles: number[];
  readonly iterations: number;
}

/**
 * Minimise sum_k gamma^k (x'Qx + u'Ru) for x+ = Ax + Bu by iterating the Riccati recursion
 *   P <- Q + A'PA - A'PB (R + B'PB)^-1 B'PA,  K = (R + B'PB)^-1 B'PA
 * from P = Q until it stops changing; the discount enters as sqrt(gamma) A, sqrt(gamma) B
 * (the discounted problem is the undiscounted one for the scaled system). Poles are those of
 * the UNSCALED closed loop A - BK.
 */
export function dlqr(A: Matrix, B: Matrix, Q: Matrix, R: Matrix, gamma = 1): DlqrResult {
  const g = Math.sqrt(gamma);
  const As = A.clone().mul(g);
  const Bs = B.clone().mul(g);
  let P = Q.clone();
  let K = new Matrix(B.columns, A.rows);
  for (let it = 1; it <= 100_000; it++) {
    const BtP = Bs.transpose().mmul(P);
    K = solve(R.clone().add(BtP.mmul(Bs)), BtP.mmul(As));
    const next = Q.clone().add(As.transpose().mmul(P).mmul(As)).sub(As.transpose().mmul(P).mmul(Bs).mmul(K));
    const change = next.clone().sub(P).abs().max();
    P = next;
    if (change <= 1e-13 * P.abs().max()) {
      const poles = new EigenvalueDecomposition(A.clone().sub(B.mmul(K))).realEigenvalues.slice().sort((a, b) => a - b);
      return { K, P, poles, iterations: it };
    }
  }
  throw new Error('dlqr: the Riccati iteration did not converge');
}

/** Optimal gain [k_position, k_velocity] of the double integrator with Q = I, R = 1 and discount gamma. */
export function doubleIntegratorGain(gamma: number): [number, number] {
  const A = new Matrix([
    [1, 1],
    [0, 1],
  ]);
  const K = dlqr(A, new Matrix([[0], [1]]), Matrix.eye(2), new Matrix([[1]]), gamma).K;
  return [K.get(0, 0), K.get(0, 1)];
}

export interface LqrRun {
  /** Learned gain [k_position, k_velocity] of u = -K x, from central differences of the policy at x = 0. */
  readonly gain: [number, number];
  /** Gains measured every `every` iterations over the last `average` iterations (averaged into `gain`). */
  readonly samples: Array<[number, number]>;
}

/** The training protocol of the LQR test (see test/lqr.test.ts for the reasoning). */
export const LQR_PROTOCOL = {
  gamma: 0.9,
  tiles: 64,
  episodeSteps: 5,
  actionBound: 3,
  iterations: 3000,
  average: 1000,
  every: 100,
} as const;

/**
 * Train the agent on T independent double integrators x+ = [[1,1],[0,1]] x + [0,1]' u with
 * reward -(x'x + u^2), x0 ~ U[-1,1]^2, episodes cut after `episodeSteps` by a time limit
 * (stored as non-terminal: the target bootstraps through it). One update per step.
 */
export async function trainLqr(seed: number, options: { backend?: NetBackend; iterations?: number } = {}): Promise<LqrRun> {
  const p = LQR_PROTOCOL;
  const iterations = options.iterations ?? p.iterations;
  const agent = await createAgent({
    obsDim: 2,
    actDim: 1,
    actionBound: p.actionBound,
    seed,
    backend: options.backend,
    config: {
      algo: 'td3',
      gamma: p.gamma,
      actor: { hidden: [] },
      critic: { hidden: [64, 64], activation: 'relu' },
      actorLr: 1e-3,
      criticLr: 1e-3,
      batchSize: 256,
      tau: 0.01,
      warmup: 0,
      exploration: { kind: 'gaussian', std: 0.1 },
      replayCapacity: 50_000,
      rewardScale: 0.1,
      normalizer: { enabled: false },
      backend: 'tfjs-wasm',
    },
  });
  try {
    const T = p.tiles;
    const env = Rng.derive(seed, 'lqr-initial-states');
    const x = new Float32Array(T * 2);
    const next = new Float32Array(T * 2);
    const reward = new Float32Array(T);
    const terminal = new Uint8Array(T); // a time limit is not a terminal state
    const h = 0.01;
    const probe = new Float32Array([h, 0, -h, 0, 0, h, 0, -h]);
    const measure = (): [number, number] => {
      const a = agent.act(probe, 4, false);
      return [-(a[0]! - a[1]!) / (2 * h), -(a[2]! - a[3]!) / (2 * h)];
    };
    const samples: Array<[number, number]> = [];
    env.fillUniform(x, -1, 1);
    for (let it = 1; it <= iterations; it++) {
      const u = agent.act(x, T, true);
      for (let i = 0; i < T; i++) {
        const pos = x[2 * i]!;
        const vel = x[2 * i + 1]!;
        const ui = u[i]!;
        reward[i] = -(pos * pos + vel * vel + ui * ui);
        next[2 * i] = pos + vel;
        next[2 * i + 1] = vel + ui;
      }
      agent.store(x, u, reward, next, terminal);
      x.set(next);
      if (it % p.episodeSteps === 0) env.fillUniform(x, -1, 1);
      if (agent.ready) agent.update();
      if (it > iterations - p.average && it % p.every === 0) samples.push(measure());
    }
    const gain: [number, number] = [0, 0];
    for (const s of samples) {
      gain[0] += s[0] / samples.length;
      gain[1] += s[1] / samples.length;
    }
    return { gain, samples };
  } finally {
    agent.dispose();
  }
}
