/**
 * tfjs measurements used by scripts/bench-agent.ts (which cannot import tfjs itself: the
 * workspace root does not depend on it). Not part of the agent's runtime.
 */
import * as tf from '@tensorflow/tfjs';
import { Rng } from '@tilewise/envs';
import { bestTime } from './timing';

export { bestTime };

/** Kernel calls and kernel time by kernel name while `fn` runs (tf.profile). */
export async function profileKernels(fn: () => void): Promise<Map<string, { calls: number; ms: number }>> {
  const prof = await tf.profile(fn);
  const byKernel = new Map<string, { calls: number; ms: number }>();
  for (const k of prof.kernels) {
    const e = byKernel.get(k.name) ?? { calls: 0, ms: 0 };
    e.calls++;
    e.ms += typeof k.kernelTimeMs === 'number' ? k.kernelTimeMs : 0;
    byKernel.set(k.name, e);
  }
  return byKernel;
}

/** Microseconds per trivial tensor operation (add of two scalars: dispatch, bookkeeping, allocation). */
export function opOverheadUs(): number {
  const a = tf.scalar(1);
  const b = tf.scalar(2);
  const us = bestTime(() => tf.add(a, b).dispose(), 2000, 5) * 1000;
  a.dispose();
  b.dispose();
  return us;
}

/**
 * A^T B (A [rows, n1], B [rows, n2]) or A B^T (A [rows, n2], B [n1, n2]) through matMul's
 * transpose flags and by an explicit transpose followed by the plain product; us per product.
 */
export function transposedProduct(kind: 'AtB' | 'ABt', rows: number, n1: number, n2: number, reps: number): { flag: number; explicit: number } {
  const rng = Rng.derive(1, 'bench-agent/matmul');
  const mat = (r: number, c: number) => {
    const d = new Float32Array(r * c);
    rng.fillUniform(d, -1, 1);
    return tf.tensor2d(d, [r, c]);
  };
  const A = kind === 'AtB' ? mat(rows, n1) : mat(rows, n2);
  const B = kind === 'AtB' ? mat(rows, n2) : mat(n1, n2);
  const flag = bestTime(() => tf.tidy(() => (kind === 'AtB' ? tf.matMul(A, B, true, false) : tf.matMul(A, B, false, true))).dispose(), reps, 3);
  const explicit = bestTime(() => tf.tidy(() => (kind === 'AtB' ? tf.matMul(tf.transpose(A), B) : tf.matMul(A, tf.transpose(B)))).dispose(), reps, 3);
  A.dispose();
  B.dispose();
  return { flag: flag * 1000, explicit: explicit * 1000 };
}
