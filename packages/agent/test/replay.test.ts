import { Rng } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { createBatch, ReplayBuffer } from '../src/replay';

/** Transition r has obs = [r, r + 0.5], act = [-r / 100], reward r, next obs = [r + 1, r + 1.5]. */
function rows(start: number, count: number) {
  const obs = new Float32Array(count * 2);
  const next = new Float32Array(count * 2);
  const act = new Float32Array(count);
  const rew = new Float32Array(count);
  const term = new Uint8Array(count);
  for (let i = 0; i < count; i++) {
    const r = start + i;
    obs.set([r, r + 0.5], 2 * i);
    next.set([r + 1, r + 1.5], 2 * i);
    act[i] = -r / 100;
    rew[i] = r;
    term[i] = r % 3 === 0 ? 1 : 0;
  }
  return { obs, next, act, rew, term };
}

describe('replay buffer', () => {
  it('wraps around as a ring and keeps pos/full consistent', () => {
    const buf = new ReplayBuffer(5, 2, 1);
    const a = rows(0, 3);
    buf.add(3, a.obs, a.act, a.rew, a.next, a.term);
    expect([buf.pos, buf.full, buf.size]).toEqual([3, false, 3]);
    const b = rows(3, 4);
    buf.add(4, b.obs, b.act, b.rew, b.next, b.term);
    expect([buf.pos, buf.full, buf.size]).toEqual([2, true, 5]);
    // Rows 0, 1 were overwritten by transitions 5, 6; rows 2..4 hold 2..4.
    expect(Array.from(buf.reward)).toEqual([5, 6, 2, 3, 4]);
    expect(Array.from(buf.obs.subarray(0, 4))).toEqual([5, 5.5, 6, 6.5]);
    expect(Array.from(buf.nextObs.subarray(8, 10))).toEqual([5, 5.5]);
    // notDone is 0 exactly where terminal was set (r % 3 == 0: 3 and 6).
    expect(Array.from(buf.notDone)).toEqual([1, 0, 1, 0, 1]);
  });

  it('copies on insert: later changes to the caller arrays do not reach the buffer', () => {
    const buf = new ReplayBuffer(4, 2, 1);
    const a = rows(10, 2);
    buf.add(2, a.obs, a.act, a.rew, a.next, a.term);
    a.obs.fill(-1);
    a.next.fill(-1);
    a.act.fill(-1);
    expect(Array.from(buf.obs.subarray(0, 4))).toEqual([10, 10.5, 11, 11.5]);
    expect(Array.from(buf.nextObs.subarray(0, 2))).toEqual([11, 11.5]);
    expect(buf.act[1]).toBeCloseTo(-0.11, 6);
  });

  it('samples rows intact and uniformly (chi-square, 99 degrees of freedom)', () => {
    const n = 100;
    const buf = new ReplayBuffer(n, 2, 1);
    const a = rows(0, n);
    buf.add(n, a.obs, a.act, a.rew, a.next, a.term);
    const batch = createBatch(500, 2, 1);
    const rng = new Rng('replay-uniformity');
    const counts = new Float64Array(n);
    let intact = true;
    for (let k = 0; k < 200; k++) {
      buf.sample(rng, batch);
      for (let i = 0; i < batch.size; i++) {
        const r = batch.reward[i]!;
        // Every field of a sampled row belongs to the same transition.
        intact &&= batch.obs[2 * i] === r && batch.nextObs[2 * i + 1] === r + 1.5 && batch.notDone[i] === (r % 3 === 0 ? 0 : 1);
        counts[r]!++;
      }
    }
    expect(intact).toBe(true);
    const expected = (200 * 500) / n;
    let chi2 = 0;
    for (const c of counts) chi2 += (c - expected) ** 2 / expected;
    // 0.1% and 99.9% points of chi-square with k = 99 degrees of freedom from the
    // Wilson & Hilferty (1931) cube-root normal approximation, k (1 - 2/(9k) + z sqrt(2/(9k)))^3
    // with z = -/+3.0902: about 61.1 and 148.3 (tables give 148.23 for the upper point).
    // A biased or row-skipping sampler drives chi2 far above the upper point; a sampler that
    // cycles through rows instead of drawing them gives chi2 near 0, below the lower one.
    const wh = (z: number) => 99 * (1 - 2 / (9 * 99) + z * Math.sqrt(2 / (9 * 99))) ** 3;
    expect(chi2).toBeLessThan(wh(3.0902));
    expect(chi2).toBeGreaterThan(wh(-3.0902));
  });

  it('the same seed draws the same minibatches', () => {
    const buf = new ReplayBuffer(50, 2, 1);
    const a = rows(0, 50);
    buf.add(50, a.obs, a.act, a.rew, a.next, a.term);
    const draw = () => {
      const b = createBatch(20, 2, 1);
      buf.sample(new Rng(7), b);
      return Array.from(b.reward);
    };
    expect(draw()).toEqual(draw());
  });

  it('saves and restores exactly, and rejects mismatched states', () => {
    const buf = new ReplayBuffer(6, 2, 1);
    const a = rows(0, 8);
    buf.add(8, a.obs, a.act, a.rew, a.next, a.term);
    const copy = new ReplayBuffer(6, 2, 1);
    copy.setState(buf.getState());
    expect([copy.pos, copy.full]).toEqual([buf.pos, buf.full]);
    expect(copy.obs).toEqual(buf.obs);
    expect(copy.act).toEqual(buf.act);
    expect(copy.reward).toEqual(buf.reward);
    expect(copy.nextObs).toEqual(buf.nextObs);
    expect(copy.notDone).toEqual(buf.notDone);
    expect(() => new ReplayBuffer(7, 2, 1).setState(buf.getState())).toThrow(/saved capacity 6 differs from this buffer's 7/);
    expect(() => new ReplayBuffer(6, 2, 1).setState({ ...buf.getState(), reward: new Float32Array(2) })).toThrow(/reward has length 2, expected 6/);
  });

  it('refuses to sample from an empty buffer and bad sizes', () => {
    expect(() => new ReplayBuffer(3, 2, 1).sample(new Rng(1), createBatch(2, 2, 1))).toThrow(/empty/);
    expect(() => new ReplayBuffer(0, 2, 1)).toThrow(/capacity must be a positive integer, got 0/);
  });
});
