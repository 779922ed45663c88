/**
 * The tiled KS environment (src/ks.ts, KsEnv): contract, equivariance, determinism,
 * blow-up handling, reward and power definitions, config validation. Solver physics is
 * in ks-physics.test.ts.
 */
import { describe, expect, it } from 'vitest';
import { checkStepOut, exerciseEnv } from '../src/checker';
import { ConfigError } from '../src/config';
import type { EnvEvent } from '../src/contract';
import { KsEnv, KsSolver, measureKsP0, parseKsConfig, type KsConfig } from '../src/ks';

/** A fast config for mechanics tests (short spin-up; P0 is only a normaliser here). */
function cfg(over: Record<string, unknown> = {}): KsConfig {
  return parseKsConfig({ kind: 'ks', spinUpTime: 20, episodeLength: 6, ...over });
}
const P0 = 0.9;

describe('KsEnv contract', () => {
  it('passes the contract checker with clipping, episode ends and resets (u and u_x sensing)', () => {
    const env = new KsEnv(cfg({ senseGradient: true }), { copies: 3, p0: P0 });
    expect(exerciseEnv(env, { steps: 14, seed: 1, overdrive: 2 })).toEqual([]);
  });

  it('has the documented spec: 4 tiles, 1 actuator each, 3 windows x 8 sensors', () => {
    const env = new KsEnv(cfg(), { copies: 2, p0: P0 });
    const s = env.spec;
    expect([s.tiles, s.actDim, s.obsDim, s.actionBound, s.controlInterval]).toEqual([4, 1, 24, 0.5, 0.25]);
    expect(s.tileGrid).toEqual([4, 1]);
    expect(s.obsLayout[0]!.positions[0]).toEqual([-1 + 1 / 16]);
    expect(s.obsLayout[0]!.positions[8]).toEqual([1 / 16]);
    expect(s.dragName).toBe('P/P0');
  });

  it('flags done and truncated at the episode length', () => {
    const env = new KsEnv(cfg({ episodeLength: 3 }), { copies: 2, p0: P0 });
    env.reset([1, 2]);
    const a = new Float32Array(8);
    for (let i = 0; i < 2; i++) expect(Array.from(env.step(a).done)).toEqual([0, 0]);
    const out = env.step(a);
    expect(Array.from(out.done)).toEqual([1, 1]);
    expect(Array.from(out.truncated)).toEqual([1, 1]);
  });

  it('rejects actions of the wrong length and NaN actions with clear messages', () => {
    const env = new KsEnv(cfg(), { copies: 2, p0: P0 });
    env.reset([1, 2]);
    expect(() => env.step(new Float32Array(7))).toThrow(/\[2, 4, 1\]/);
    const a = new Float32Array(8);
    a[5] = NaN;
    expect(() => env.step(a)).toThrow(/actions\[5\] is NaN \(copy 1, actuator 1\)/);
  });
});

describe('KsEnv determinism', () => {
  it('the same seed gives the same state bit for bit, alone or in a batch, reset or resetCopy', () => {
    const one = new KsEnv(cfg(), { copies: 1, p0: P0 });
    const three = new KsEnv(cfg(), { copies: 3, p0: P0 });
    one.reset([42]);
    three.reset([7, 42, 9]);
    expect(Array.from(three.snapshot(1))).toEqual(Array.from(one.snapshot(0)));
    three.resetCopy(2, 42);
    expect(Array.from(three.snapshot(2))).toEqual(Array.from(one.snapshot(0)));
    // And stepping with the same actions stays identical.
    const a1 = Float32Array.from([0.3, -0.2, 0.1, 0.5]);
    const a3 = new Float32Array(12);
    a3.set(a1, 4);
    a3.set(a1, 8);
    const r1 = Array.from(one.step(a1).reward);
    const out3 = three.step(a3);
    expect(Array.from(out3.reward.slice(4, 8))).toEqual(r1);
    expect(Array.from(out3.reward.slice(8, 12))).toEqual(r1);
  });

  it('different seeds give different states; the initial noise does not depend on the tiling', () => {
    const a = new KsEnv(cfg(), { copies: 2, p0: P0 });
    a.reset([1, 2]);
    expect(Array.from(a.snapshot(0))).not.toEqual(Array.from(a.snapshot(1)));
    const b = new KsEnv(cfg({ tiles: 2, actuators: 2, haloTiles: 0 }), { copies: 1, p0: P0 });
    b.reset([1]);
    expect(Array.from(b.snapshot(0))).toEqual(Array.from(a.snapshot(0)));
  });
});

/** Shift copy 1 of `env` to copy 0 shifted right by `cells` grid points (spectral phase shift is not exact; copy the grid). */
function shiftedCopy(src: KsSolver, shiftPoints: number, dst: KsSolver): void {
  const n = src.points;
  const u = new Float64Array(n * src.copies);
  src.physical(u);
  const v = new Float64Array(n);
  for (let j = 0; j < n; j++) v[(j + shiftPoints) % n] = u[j]!;
  dst.setPhysical(0, v);
}

describe('KsEnv tile equivariance', () => {
  it('shifting the state by one tile permutes observations exactly, and actions/rewards to round-off', () => {
    const c = cfg({ senseGradient: true });
    const a = new KsEnv(c, { copies: 1, p0: P0 });
    const b = new KsEnv(c, { copies: 1, p0: P0 });
    a.reset([5]);
    b.reset([5]);
    // b := a shifted right by one tile (16 grid points): tile t of a becomes tile t+1 of b.
    // Set both from the same grid values so the two states are exact shifts of each other.
    const u = a.snapshot(0);
    a.solver.setPhysical(0, u);
    shiftedCopy(a.solver, 16, b.solver);
    const oa = a.observe().slice();
    const ob = b.observe().slice();
    const T = 4;
    const d = a.spec.obsDim;
    for (let t = 0; t < T; t++) {
      const tb = (t + 1) % T;
      // Observations come from grid values (exactly shifted) up to the FFT round trip.
      for (let s = 0; s < d; s++) expect(Math.abs(ob[tb * d + s]! - oa[t * d + s]!)).toBeLessThan(1e-12);
    }
    // The same policy (a function of the tile's own observation) acts identically.
    const opA = a.oppositionSignal().slice();
    const opB = b.oppositionSignal().slice();
    for (let t = 0; t < T; t++) expect(Math.abs(opB[(t + 1) % T]! - opA[t]!)).toBeLessThan(1e-12);
    const actA = Float32Array.from([0.4, -0.3, 0.2, -0.5]);
    const actB = new Float32Array(4);
    for (let t = 0; t < T; t++) actB[(t + 1) % T] = actA[t]!;
    const ra = Array.from(a.step(actA).reward);
    const rb = Array.from(b.step(actB).reward);
    for (let t = 0; t < T; t++) expect(Math.abs(rb[(t + 1) % T]! - ra[t]!)).toBeLessThan(1e-10);
  });

  it('observation is an exact permutation when the field is sampled directly (no FFT round trip)', () => {
    // The sensor table itself: sensor s of tile t+1 sits exactly one tile (16 points) right of tile t's.
    const env = new KsEnv(cfg(), { copies: 1, p0: P0 });
    const idx = (env as unknown as { sensorIndex: Int32Array }).sensorIndex;
    const S = 24;
    for (let t = 0; t < 4; t++) {
      for (let s = 0; s < S; s++) expect(idx[((t + 1) % 4) * S + s]).toBe((idx[t * S + s]! + 16) % 64);
    }
    // Actuator profiles are exact shifts of each other.
    const prof = env.profiles;
    for (let a = 0; a < 3; a++) {
      for (let j = 0; j < 64; j++) expect(prof[(a + 1) * 64 + ((j + 16) % 64)]).toBe(prof[a * 64 + j]);
    }
  });
});

describe('KsEnv drag, power and reward', () => {
  it('with zero actions: drag = P/P0 from the solver (Parseval) and power is zero', () => {
    const env = new KsEnv(cfg({ controlSteps: 1 }), { copies: 1, p0: P0 });
    env.reset([3]);
    const p0 = env.solver.meanSquare(0, 1);
    const out = env.step(new Float32Array(4));
    const p1 = env.solver.meanSquare(0, 1);
    let mean = 0;
    for (let t = 0; t < 4; t++) mean += out.drag[t]! / 4;
    // Domain mean of tile P, trapezoid over one step: (P(t0) + P(t1))/2 / P0.
    expect(mean).toBeCloseTo((p0 + p1) / 2 / P0, 12);
    expect(Array.from(out.actuationPower)).toEqual([0, 0, 0, 0]);
    for (let t = 0; t < 4; t++) expect(out.reward[t]).toBeCloseTo(1 - out.drag[t]!, 6);
  });

  it('the signed work rate sums to <u f>, Pi+ >= max(work, 0) tile by tile, and beta mixes tile and domain scores', () => {
    const c = cfg({ reward: { beta: 0.25, actuationPenalty: 2 }, controlSteps: 1 });
    const env = new KsEnv(c, { copies: 1, p0: P0 });
    env.reset([3]);
    const act = Float32Array.from([0.5, -0.5, 0.25, 0.1]);
    // <u f> at the start of the interval from grid values, before stepping.
    const u0 = env.snapshot(0);
    const f = new Float64Array(64);
    for (let a = 0; a < 4; a++) for (let j = 0; j < 64; j++) f[j]! += act[a]! * env.profiles[a * 64 + j]!;
    const out = env.step(act);
    const u1 = env.snapshot(0);
    let uf0 = 0;
    let uf1 = 0;
    for (let j = 0; j < 64; j++) {
      uf0 += (u0[j]! * f[j]!) / 64;
      uf1 += (u1[j]! * f[j]!) / 64;
    }
    let work = 0;
    for (let t = 0; t < 4; t++) work += env.forcingWork[t]! / 4;
    expect(work).toBeCloseTo((uf0 + uf1) / 2 / P0, 10);
    for (let t = 0; t < 4; t++) expect(out.actuationPower[t]).toBeGreaterThanOrEqual(Math.max(env.forcingWork[t]!, 0) - 1e-15);
    const s = Array.from({ length: 4 }, (_, t) => 1 - out.drag[t]! - 2 * out.actuationPower[t]!);
    const sD = s.reduce((x, y) => x + y, 0) / 4;
    for (let t = 0; t < 4; t++) expect(out.reward[t]).toBeCloseTo(0.75 * s[t]! + 0.25 * sD, 6);
  });

  it('the opposition signal is u at the actuator centres (+ offset) by trigonometric interpolation', () => {
    const env = new KsEnv(cfg({ oppositionOffset: 22 / 64 }), { copies: 1, p0: P0 });
    env.reset([8]);
    const u = env.snapshot(0);
    const s = env.oppositionSignal();
    // Actuator a sits at x = (a + 1/2) 22/4 = grid point 8 + 16a; the offset adds one grid spacing.
    for (let a = 0; a < 4; a++) expect(s[a]).toBeCloseTo(u[8 + 16 * a + 1]!, 12);
  });
});

describe('KsEnv blow-up handling', () => {
  it('an absurd time step makes the copy diverge: flagged, logged, finite outputs, never thrown', () => {
    const events: EnvEvent[] = [];
    const env = new KsEnv(cfg({ dt: 50, spinUpTime: 0 }), { copies: 2, p0: P0, onEvent: (e) => events.push(e) });
    env.reset([1, 2]);
    let sawDiverged = false;
    for (let i = 0; i < 5; i++) {
      const out = env.step(new Float32Array(8).fill(0.5));
      expect(checkStepOut(env.spec, out)).toEqual([]);
      if (out.diverged[0]) {
        sawDiverged = true;
        expect(out.done[0]).toBe(1);
        expect(out.reward[0]).toBe(-10);
        expect(Number.isNaN(out.drag[0]!)).toBe(true);
      }
    }
    expect(sawDiverged).toBe(true);
    expect(events.some((e) => e.kind === 'diverged' && e.copy === 0)).toBe(true);
  });

  it('a huge initial state diverges in one copy without touching the other', () => {
    const env = new KsEnv(cfg(), { copies: 2, p0: P0 });
    env.reset([1, 2]);
    const before = env.snapshot(1);
    const ref = new KsEnv(cfg(), { copies: 1, p0: P0 });
    ref.reset([2]);
    const big = new Float64Array(64);
    for (let j = 0; j < 64; j++) big[j] = 1e6 * Math.sin((2 * Math.PI * 20 * j) / 64);
    env.solver.setPhysical(0, big);
    const a = new Float32Array(8);
    const out = env.step(a);
    expect(out.diverged[0]).toBe(1);
    expect(out.diverged[1]).toBe(0);
    expect(Array.from(before)).toEqual(Array.from(ref.snapshot(0)));
    expect(Array.from(out.reward.slice(4))).toEqual(Array.from(ref.step(new Float32Array(4)).reward));
    // The diverged copy can be reset and stepped again.
    env.resetCopy(0, 3);
    expect(env.step(a).diverged[0]).toBe(0);
  });
});

describe('KS config', () => {
  const bad = (over: Record<string, unknown>): string => {
    try {
      parseKsConfig({ kind: 'ks', ...over });
    } catch (e) {
      expect(e).toBeInstanceOf(ConfigError);
      return (e as Error).message;
    }
    throw new Error('expected a ConfigError');
  };

  it('fills documented defaults', () => {
    const c = parseKsConfig({ kind: 'ks' });
    expect([c.length, c.points, c.dt, c.tiles, c.actuators, c.actionBound, c.controlSteps, c.sensorsPerTile, c.haloTiles]).toEqual([
      22, 64, 0.05, 4, 4, 0.5, 5, 8, 1,
    ]);
    expect(c.reward).toEqual({ beta: 0, actuationPenalty: 0, onDivergence: -10 });
  });

  it('rejects bad values and combinations naming path and value', () => {
    expect(bad({ points: 48 })).toMatch(/env\.points: expected a power of two \(got 48\)/);
    expect(bad({ tiles: 3 })).toMatch(/env\.tiles: expected a divisor of points \(64\) \(got 3\)/);
    expect(bad({ actuators: 6 })).toMatch(/env\.actuators: expected a multiple of tiles \(4\) \(got 6\)/);
    expect(bad({ sensorsPerTile: 5 })).toMatch(/env\.sensorsPerTile: .*\(16\).*\(got 5\)/);
    expect(bad({ haloTiles: 2 })).toMatch(/env\.haloTiles: .*\(got 2\)/);
    expect(bad({ dt: -1 })).toMatch(/env\.dt: .*\(got -1\)/);
    expect(bad({ reward: { beta: 2 } })).toMatch(/env\.reward\.beta: .*\(got 2\)/);
    expect(bad({ lenght: 22 })).toMatch(/unknown key env\.lenght/);
    expect(bad({ reward: { gamma: 0.9 } })).toMatch(/unknown key env\.reward\.gamma/);
  });
});

describe('P0 measurement', () => {
  it('batch means give a positive mean with a finite, smaller-than-mean uncertainty (smoke test of the pipeline)', () => {
    const c = parseKsConfig({ kind: 'ks', spinUpTime: 50, reference: { time: 200, copies: 2, blockTime: 50 } });
    const r = measureKsP0(c);
    expect(r.blocks).toBe(8);
    expect(r.mean).toBeGreaterThan(0.3);
    expect(r.mean).toBeLessThan(2);
    expect(r.stdErr).toBeGreaterThan(0);
    expect(r.ci95).toBeGreaterThan(r.stdErr);
    expect(r.ci95).toBeLessThan(r.mean);
  });
});

describe('KsEnv state (getState/setState)', () => {
  /** Seeded actions in [-0.7, 0.7] (beyond the bound, so clipping is exercised). */
  function actions(seed: number, n: number): Float32Array {
    let x = seed;
    return Float32Array.from({ length: n }, () => {
      x = (x * 1103515245 + 12345) % 2147483648;
      return (x / 2147483648 - 0.5) * 1.4;
    });
  }

  it('round-trips exactly: a restored env continues bit for bit like the original', () => {
    const c = cfg({ episodeLength: 50 });
    const a = new KsEnv(c, { copies: 3, p0: P0 });
    a.reset([5, 6, 7]);
    for (let i = 0; i < 4; i++) a.step(actions(i + 1, 3 * 4));
    const saved = a.getState();
    const b = new KsEnv(c, { copies: 3, p0: P0 });
    b.reset([1, 2, 3]); // a different state, overwritten below
    b.setState(saved);
    expect(Array.from(b.observe())).toEqual(Array.from(a.observe()));
    for (let i = 0; i < 5; i++) {
      const act = actions(100 + i, 3 * 4);
      const oa = a.step(act);
      const copyA = { obs: oa.obs.slice(), reward: oa.reward.slice(), drag: oa.drag.slice(), power: oa.actuationPower.slice(), done: oa.done.slice() };
      const ob = b.step(act);
      expect(Array.from(ob.obs)).toEqual(Array.from(copyA.obs));
      expect(Array.from(ob.reward)).toEqual(Array.from(copyA.reward));
      expect(Array.from(ob.drag)).toEqual(Array.from(copyA.drag));
      expect(Array.from(ob.actuationPower)).toEqual(Array.from(copyA.power));
      expect(Array.from(ob.done)).toEqual(Array.from(copyA.done));
    }
    expect(Array.from(b.snapshot(2))).toEqual(Array.from(a.snapshot(2)));
    expect(Array.from(b.oppositionSignal())).toEqual(Array.from(a.oppositionSignal()));
    // The saved arrays are copies: stepping the original did not change them.
    const again = new KsEnv(c, { copies: 3, p0: P0 });
    again.setState(saved);
    expect(Array.from(again.solver.vRe)).not.toEqual(Array.from(a.solver.vRe));
  });

  it('keeps the decision counter: the episode ends at the same step after a restore', () => {
    const c = cfg({ episodeLength: 5 });
    const a = new KsEnv(c, { copies: 1, p0: P0 });
    a.reset([9]);
    for (let i = 0; i < 3; i++) a.step(new Float32Array(4));
    const b = new KsEnv(c, { copies: 1, p0: P0 });
    b.setState(a.getState());
    expect(b.step(new Float32Array(4)).done[0]).toBe(0);
    expect(b.step(new Float32Array(4)).done[0]).toBe(1);
  });

  it('rejects a state from another configuration or copy count, naming the field', () => {
    const a = new KsEnv(cfg(), { copies: 2, p0: P0 });
    a.reset([1, 2]);
    const s = a.getState();
    expect(() => new KsEnv(cfg(), { copies: 3, p0: P0 }).setState(s)).toThrow(/saved copies 2 differs from this env's 3/);
    expect(() => new KsEnv(cfg({ points: 128 }), { copies: 2, p0: P0 }).setState(s)).toThrow(/saved points 64 differs/);
    const bad = { meta: s.meta, arrays: { ...s.arrays, vRe: new Float64Array(3) } };
    expect(() => new KsEnv(cfg(), { copies: 2, p0: P0 }).setState(bad)).toThrow(/array "vRe" must be a Float64Array of length 66, got Float64Array of length 3/);
  });
});
