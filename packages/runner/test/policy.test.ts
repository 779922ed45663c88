/**
 * Policy files (src/policy.ts) and the plain-JavaScript forward pass (src/policy-net.ts):
 * against a float64 reference written out here, against the agent's own deterministic act(),
 * exact file round trips and clear file errors.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { createAgent, type PolicySnapshot } from '@tilewise/agent';
import { Rng } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { PolicyNet } from '../src/policy-net';
import { decodePolicy, encodePolicy, loadPolicy, savePolicy, type PolicyFile } from '../src/policy';

/** Float64 forward pass of an MLP in the net/types.ts layout, written out independently. */
function reference(s: PolicySnapshot, x: number[]): number[] {
  let v = x.map((xi, j) => (s.normalizer ? Math.max(-s.normalizer.clip, Math.min(s.normalizer.clip, (xi - s.normalizer.mean[j]!) * s.normalizer.invStd[j]!)) : xi));
  let off = 0;
  const L = s.spec.sizes.length - 1;
  for (let l = 0; l < L; l++) {
    const nIn = s.spec.sizes[l]!;
    const nOut = s.spec.sizes[l + 1]!;
    const W = (i: number, o: number) => s.params[off + i * nOut + o]!;
    const b = (o: number) => s.params[off + nIn * nOut + o]!;
    const y: number[] = [];
    for (let o = 0; o < nOut; o++) {
      let z = b(o);
      for (let i = 0; i < nIn; i++) z += v[i]! * W(i, o);
      const act = l === L - 1 ? s.spec.output : s.spec.hidden;
      y.push(act === 'relu' ? Math.max(0, z) : act === 'tanh' ? Math.tanh(z) : z);
    }
    off += nIn * nOut + nOut;
    v = y;
  }
  return v.map((a) => a * s.actionBound);
}

function randomSnapshot(seed: number, normalizer: boolean): PolicySnapshot {
  const rng = new Rng(seed);
  const spec = { sizes: [6, 10, 7, 2], hidden: 'tanh' as const, output: 'tanh' as const };
  const n = 6 * 10 + 10 + 10 * 7 + 7 + 7 * 2 + 2;
  const params = new Float32Array(n);
  rng.fillNormal(params, 0, 0.5);
  return {
    spec,
    params,
    actionBound: 0.5,
    normalizer: normalizer
      ? { mean: Float64Array.from({ length: 6 }, () => rng.normal()), invStd: Float64Array.from({ length: 6 }, () => 0.5 + rng.uniform()), clip: 1.5 }
      : null,
  };
}

describe('PolicyNet', () => {
  it('matches a float64 forward pass to float32 accuracy, with and without normalisation', () => {
    for (const norm of [false, true]) {
      const s = randomSnapshot(norm ? 2 : 1, norm);
      const net = new PolicyNet(s);
      const rng = new Rng(9);
      const obs = new Float32Array(5 * 6);
      rng.fillNormal(obs, 0, 2);
      const a = net.act(obs, 5);
      for (let r = 0; r < 5; r++) {
        const ref = reference(s, Array.from(obs.subarray(r * 6, r * 6 + 6)));
        for (let k = 0; k < 2; k++) expect(Math.abs(a[r * 2 + k]! - ref[k]!)).toBeLessThan(1e-6);
      }
    }
  });

  it("acts like the agent's deterministic policy (simd and tfjs arithmetic, same weights)", async () => {
    const rng = new Rng(3);
    for (const backend of ['simd', 'tfjs-cpu'] as const) {
      const agent = await createAgent({ obsDim: 12, actDim: 1, actionBound: 0.5, seed: 4, config: { backend, actor: { hidden: [16, 16] }, critic: { hidden: [16, 16] }, batchSize: 8, warmup: 0 } });
      // Give the normaliser statistics and move the weights off their initial values.
      const obs = new Float32Array(40 * 12);
      rng.fillNormal(obs, 0.3, 1.7);
      const act = new Float32Array(40);
      agent.store(obs, act, new Float32Array(40).fill(0.5), obs, new Float32Array(40));
      for (let i = 0; i < 20; i++) agent.update();
      const mine = new PolicyNet(agent.policy()).act(obs, 40);
      const theirs = agent.act(obs, 40, false);
      for (let i = 0; i < 40; i++) expect(Math.abs(mine[i]! - theirs[i]!), `${backend} row ${i}`).toBeLessThan(2e-6);
      agent.dispose();
    }
  });

  it('rejects parameters that do not fit the layer sizes', () => {
    const s = randomSnapshot(1, false);
    expect(() => new PolicyNet({ ...s, params: s.params.subarray(1) })).toThrow(/162 parameters given, the layer sizes \[6,10,7,2\] need 163/);
  });
});

describe('policy files', () => {
  const file = (norm: boolean): PolicyFile => ({
    snapshot: randomSnapshot(5, norm),
    env: {
      kind: 'ks',
      config: { kind: 'ks', length: 22 },
      spec: { obsDim: 6, actDim: 2, actionBound: 0.5, tiles: 4, tileGrid: [4, 1], controlInterval: 0.25, obsLayout: [{ quantity: 'u', count: 6, positions: [[0.1]] }], dragName: 'P/P0' },
      reference: 0.92,
    },
    source: { run: 'r', step: 12, validation: null },
  });

  it('round-trip exactly, through bytes and through a file', () => {
    const dir = mkdtempSync(join(tmpdir(), 'tilewise-policy-'));
    for (const norm of [false, true]) {
      const f = file(norm);
      const back = decodePolicy(encodePolicy(f));
      expect(Array.from(back.snapshot.params)).toEqual(Array.from(f.snapshot.params));
      expect(back.snapshot.normalizer?.clip).toBe(f.snapshot.normalizer?.clip);
      expect(Array.from(back.snapshot.normalizer?.mean ?? [])).toEqual(Array.from(f.snapshot.normalizer?.mean ?? []));
      expect(back.env).toEqual(f.env);
      expect(back.source).toEqual(f.source);
      const path = join(dir, `p${norm}.policy`);
      savePolicy(path, f);
      const obs = new Float32Array([1, -2, 0.5, 3, -1, 0]);
      expect(Array.from(new PolicyNet(loadPolicy(path).snapshot).act(obs, 1))).toEqual(Array.from(new PolicyNet(f.snapshot).act(obs, 1)));
    }
  });

  it('reports missing, truncated and foreign files clearly', () => {
    const dir = mkdtempSync(join(tmpdir(), 'tilewise-policy-'));
    expect(() => loadPolicy(join(dir, 'none.policy'))).toThrow(/none\.policy: cannot read it \(ENOENT\)/);
    const bytes = encodePolicy(file(true));
    const cut = join(dir, 'cut.policy');
    writeFileSync(cut, bytes.subarray(0, bytes.length - 9));
    expect(() => loadPolicy(cut)).toThrow(/cut\.policy: truncated/);
    const junk = join(dir, 'junk.policy');
    writeFileSync(junk, 'not a policy at all, just some text');
    expect(() => loadPolicy(junk)).toThrow(/junk\.policy: not a tilewise state container/);
  });
});
