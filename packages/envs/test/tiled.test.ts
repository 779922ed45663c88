import { describe, expect, it } from 'vitest';
import { checkCopy, checkSeed, clipActions, mod, TiledStepBuffers } from '../src/tiled';

describe('tiled bookkeeping', () => {
  it('TiledStepBuffers: time limit sets done and truncated; divergence sets done, NaN drag and the divergence reward', () => {
    const buf = new TiledStepBuffers(2, 3, 4);
    expect(buf.obs.length).toBe(24);
    expect(buf.out.reward).toBe(buf.reward);
    buf.beginDecision();
    buf.countDecision(0, 2);
    buf.markDiverged(1, -10);
    expect([buf.done[0], buf.truncated[0], buf.diverged[0]]).toEqual([0, 0, 0]);
    expect([buf.done[1], buf.truncated[1], buf.diverged[1]]).toEqual([1, 0, 1]);
    expect(Array.from(buf.reward.slice(3))).toEqual([-10, -10, -10]);
    expect(Number.isNaN(buf.drag[4]!)).toBe(true);
    buf.beginDecision();
    buf.countDecision(0, 2);
    expect([buf.done[0], buf.truncated[0], buf.diverged[1]]).toEqual([1, 1, 0]);
    expect(Array.from(buf.decisions)).toEqual([2, 1]);
  });

  it('clipActions clips to the bound and names a NaN entry; seed, copy and mod helpers', () => {
    const amp = new Float64Array(4);
    clipActions('Env', Float32Array.from([2, -3, 0.5, -0.25]), amp, 1, 2);
    expect(Array.from(amp)).toEqual([1, -1, 0.5, -0.25]);
    expect(() => clipActions('Env', Float32Array.from([0, 0, NaN, 0]), amp, 1, 2)).toThrow(/actions\[2\] is NaN \(copy 1, component 0\)/);
    expect(() => clipActions('Env', new Float32Array(3), amp, 1, 2)).toThrow(/4 values\), got 3/);
    expect(() => checkSeed('Env', NaN, 'seeds[1]')).toThrow(/seeds\[1\] must be a finite number, got NaN/);
    expect(() => checkCopy('Env', 2, 2)).toThrow(/\[0, 2\), got 2/);
    expect([mod(-1, 5), mod(7, 5), mod(0, 5)]).toEqual([4, 2, 0]);
  });
});
