/**
 * Test-only Float64 reference of the MLP in `src/net/types.ts` (y = act(x W + b) per layer,
 * flat parameters W_0, b_0, W_1, b_1, ...), written directly from that definition and used
 * as the slow reference the float32 backends are checked against, including by central
 * finite differences.
 */
import type { Activation, MlpSpec } from '../../src/net/types';

function act(a: Activation, z: number): number {
  return a === 'relu' ? Math.max(0, z) : a === 'tanh' ? Math.tanh(z) : z;
}

/** y [batch, out] of the MLP with flat parameters `p` (Float64) on x [batch, in]. */
export function forward64(spec: MlpSpec, p: ArrayLike<number>, x: ArrayLike<number>, batch: number): Float64Array {
  const s = spec.sizes;
  let a = Float64Array.from({ length: batch * s[0]! }, (_, i) => x[i]!);
  let off = 0;
  for (let l = 0; l + 1 < s.length; l++) {
    const nin = s[l]!;
    const nout = s[l + 1]!;
    const f = l + 2 === s.length ? spec.output : spec.hidden;
    const out = new Float64Array(batch * nout);
    for (let r = 0; r < batch; r++) {
      for (let j = 0; j < nout; j++) {
        let z = p[off + nin * nout + j]!;
        for (let i = 0; i < nin; i++) z += a[r * nin + i]! * p[off + i * nout + j]!;
        out[r * nout + j] = act(f, z);
      }
    }
    off += nin * nout + nout;
    a = out;
  }
  return a;
}

/** Central difference (f(p + h e_k) - f(p - h e_k)) / 2h for every k, in Float64. */
export function centralDiff(f: (p: Float64Array) => number, p0: ArrayLike<number>, h: number): Float64Array {
  const p = Float64Array.from(p0 as ArrayLike<number>);
  const g = new Float64Array(p.length);
  for (let k = 0; k < p.length; k++) {
    const keep = p[k]!;
    p[k] = keep + h;
    const fp = f(p);
    p[k] = keep - h;
    const fm = f(p);
    p[k] = keep;
    g[k] = (fp - fm) / (2 * h);
  }
  return g;
}

/** max_k |a_k - b_k| / max(1e-12, max_k |b_k|): error relative to the reference's scale. */
export function relMaxError(a: ArrayLike<number>, b: ArrayLike<number>): number {
  if (a.length !== b.length) throw new Error(`relMaxError: lengths ${a.length} and ${b.length} differ`);
  let err = 0;
  let scale = 0;
  for (let i = 0; i < a.length; i++) {
    err = Math.max(err, Math.abs(a[i]! - b[i]!));
    scale = Math.max(scale, Math.abs(b[i]!));
  }
  return err / Math.max(1e-12, scale);
}
