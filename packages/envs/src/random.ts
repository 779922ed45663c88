/**
 * Seeded random numbers with a state that can be saved and restored.
 *
 * Every source of randomness in tilewise (initial states, spin-up, exploration
 * noise, replay sampling, network initialisation) is an explicit `Rng` passed
 * in by the caller. There is no global generator and `Math.random` is never used.
 *
 * The bit generator is Brent's xorgens "xor4096" (R. P. Brent 2007, "Some long-period
 * random number generators using shifts and xors", ANZIAM J. 48), as packaged by the
 * `seedrandom` library. Its state is a plain JSON-serialisable object, which is what
 * lets a checkpointed run resume bit for bit.
 *
 * Normal deviates use the Marsaglia polar method (Marsaglia & Bray 1964, SIAM Rev. 6(3)),
 * which yields two deviates per accepted pair; the spare is part of the saved state.
 *
 * Streams: `Rng.derive(seed, label)` builds an independent generator from a run seed and
 * a purpose label ("init", "replay", "noise", "env-reset", ...), so adding draws to one
 * purpose never shifts the numbers another purpose sees.
 */
import seedrandom from 'seedrandom';

/** The generator's saved form (JSON-serialisable). */
export interface RngState {
  readonly algorithm: 'xor4096';
  /** Internal xorgens state as produced by seedrandom (`X` array, `w`, `i`). */
  readonly core: { X: number[]; w: number; i: number };
  /** Spare normal deviate from the polar method, or null. */
  readonly spare: number | null;
}

interface Xor4096Prng {
  (): number;
  double(): number;
  int32(): number;
  quick(): number;
  state(): { X: number[]; w: number; i: number };
}

type Xor4096Factory = (seed?: string | number, opts?: { state?: boolean | object }) => Xor4096Prng;
const makeXor4096 = seedrandom.xor4096 as unknown as Xor4096Factory;

export class Rng {
  private prng: Xor4096Prng;
  private spare: number | null = null;

  /** A generator seeded by a number or string. */
  constructor(seed: number | string) {
    if (typeof seed === 'number' && !Number.isFinite(seed)) {
      throw new Error(`Rng: seed must be a finite number or a string, got ${seed}`);
    }
    this.prng = makeXor4096(String(seed), { state: true });
  }

  /** An independent stream for one purpose, derived from a run seed. */
  static derive(seed: number | string, label: string): Rng {
    return new Rng(`${seed}/${label}`);
  }

  /** Rebuild a generator from a saved state; continues exactly where the saved one stopped. */
  static fromState(state: RngState): Rng {
    if (state?.algorithm !== 'xor4096' || !Array.isArray(state.core?.X) || state.core.X.length !== 128) {
      throw new Error('Rng.fromState: not a saved xor4096 state (expected algorithm "xor4096" and 128 state words)');
    }
    const r = new Rng(0);
    r.prng = makeXor4096('', { state: { X: state.core.X.slice(), w: state.core.w, i: state.core.i } });
    r.spare = state.spare;
    return r;
  }

  /** The current state; `Rng.fromState(r.getState())` continues identically to `r`. */
  getState(): RngState {
    return { algorithm: 'xor4096', core: this.prng.state(), spare: this.spare };
  }

  /** Uniform on [0, 1) with 53 random bits. */
  uniform(): number {
    return this.prng.double();
  }

  /** Uniform on [lo, hi). */
  uniformIn(lo: number, hi: number): number {
    return lo + (hi - lo) * this.prng.double();
  }

  /** Uniform integer in [0, n), n >= 1, without modulo bias (rejection on 32-bit draws). */
  int(n: number): number {
    if (!Number.isInteger(n) || n < 1 || n > 0x100000000) {
      throw new Error(`Rng.int: n must be an integer in [1, 2^32], got ${n}`);
    }
    const limit = 0x100000000 - (0x100000000 % n);
    for (;;) {
      const x = this.prng.int32() >>> 0;
      if (x < limit) return x % n;
    }
  }

  /** A 32-bit unsigned integer; useful to seed child generators. */
  uint32(): number {
    return this.prng.int32() >>> 0;
  }

  /** Standard normal deviate (Marsaglia polar method). */
  normal(): number {
    if (this.spare !== null) {
      const s = this.spare;
      this.spare = null;
      return s;
    }
    for (;;) {
      const u = 2 * this.prng.double() - 1;
      const v = 2 * this.prng.double() - 1;
      const s = u * u + v * v;
      if (s > 0 && s < 1) {
        const f = Math.sqrt((-2 * Math.log(s)) / s);
        this.spare = v * f;
        return u * f;
      }
    }
  }

  /** Fill `out` with independent N(mean, std^2) deviates, in index order. */
  fillNormal(out: Float32Array | Float64Array, mean = 0, std = 1): void {
    for (let i = 0; i < out.length; i++) out[i] = mean + std * this.normal();
  }

  /** Fill `out` with independent U[lo, hi) deviates, in index order. */
  fillUniform(out: Float32Array | Float64Array, lo = 0, hi = 1): void {
    for (let i = 0; i < out.length; i++) out[i] = lo + (hi - lo) * this.prng.double();
  }
}
