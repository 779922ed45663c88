/**
 * Guards of the environment contract (contract.ts) for tests and debugging: shapes,
 * buffer types, bounds, finiteness (a NaN/Inf watchdog for stiff surrogates) and flag
 * consistency. Each function returns a list of problems (empty when all is well), so a
 * test can assert `toEqual([])` and see every violation at once.
 */
import type { EnvSpec, StepOut, TiledEnv } from './contract';
import { Rng } from './random';

/** Problems with the spec itself. */
export function checkSpec(spec: EnvSpec): string[] {
  const p: string[] = [];
  const posInt = (v: number, name: string): void => {
    if (!Number.isInteger(v) || v < 1) p.push(`spec.${name} must be a positive integer, got ${v}`);
  };
  posInt(spec.copies, 'copies');
  posInt(spec.tiles, 'tiles');
  posInt(spec.obsDim, 'obsDim');
  posInt(spec.actDim, 'actDim');
  posInt(spec.episodeLength, 'episodeLength');
  if (spec.tileGrid[0] * spec.tileGrid[1] !== spec.tiles) {
    p.push(`spec.tileGrid ${spec.tileGrid.join('x')} does not multiply to tiles = ${spec.tiles}`);
  }
  if (!(spec.actionBound > 0 && Number.isFinite(spec.actionBound))) p.push(`spec.actionBound must be positive, got ${spec.actionBound}`);
  if (!(spec.controlInterval > 0)) p.push(`spec.controlInterval must be positive, got ${spec.controlInterval}`);
  const total = spec.obsLayout.reduce((s, e) => s + e.count, 0);
  if (total !== spec.obsDim) p.push(`spec.obsLayout counts sum to ${total}, expected obsDim = ${spec.obsDim}`);
  spec.obsLayout.forEach((e, i) => {
    if (e.positions.length !== e.count) p.push(`spec.obsLayout[${i}] has ${e.positions.length} positions for count ${e.count}`);
  });
  if (!spec.kind) p.push('spec.kind is empty');
  if (!spec.dragName) p.push('spec.dragName is empty');
  return p;
}

function firstNonFinite(a: ArrayLike<number>, skip?: (i: number) => boolean): number {
  for (let i = 0; i < a.length; i++) if (!Number.isFinite(a[i]!) && !(skip && skip(i))) return i;
  return -1;
}

/** Problems with an observation buffer: type, shape [B, T, obsDim], finiteness. */
export function checkObservation(spec: EnvSpec, obs: unknown, what = 'obs'): string[] {
  const p: string[] = [];
  if (!(obs instanceof Float32Array)) return [`${what} must be a Float32Array`];
  const n = spec.copies * spec.tiles * spec.obsDim;
  if (obs.length !== n) p.push(`${what} has length ${obs.length}, expected B*T*obsDim = ${n}`);
  const i = firstNonFinite(obs);
  if (i >= 0) p.push(`${what}[${i}] is not finite (${obs[i]})`);
  return p;
}

/** Problems with one step's output. */
export function checkStepOut(spec: EnvSpec, out: StepOut): string[] {
  const B = spec.copies;
  const T = spec.tiles;
  const p = checkObservation(spec, out.obs, 'step.obs');
  const typed: Array<[string, unknown, new (n: number) => ArrayLike<number>, number]> = [
    ['reward', out.reward, Float32Array, B * T],
    ['drag', out.drag, Float64Array, B * T],
    ['actuationPower', out.actuationPower, Float64Array, B * T],
    ['done', out.done, Uint8Array, B],
    ['truncated', out.truncated, Uint8Array, B],
    ['diverged', out.diverged, Uint8Array, B],
  ];
  for (const [name, arr, ctor, len] of typed) {
    if (!(arr instanceof ctor)) p.push(`step.${name} must be a ${ctor.name}`);
    else if ((arr as ArrayLike<number>).length !== len) p.push(`step.${name} has length ${(arr as ArrayLike<number>).length}, expected ${len}`);
  }
  if (p.length) return p;
  const ri = firstNonFinite(out.reward);
  if (ri >= 0) p.push(`step.reward[${ri}] is not finite (${out.reward[ri]})`);
  // drag and power may be NaN only for a diverged copy.
  const skip = (i: number): boolean => out.diverged[Math.floor(i / T)] === 1;
  const di = firstNonFinite(out.drag, skip);
  if (di >= 0) p.push(`step.drag[${di}] is not finite (${out.drag[di]}) for a copy that did not diverge`);
  const ai = firstNonFinite(out.actuationPower, skip);
  if (ai >= 0) p.push(`step.actuationPower[${ai}] is not finite (${out.actuationPower[ai]}) for a copy that did not diverge`);
  for (let i = 0; i < B * T; i++) {
    if (!skip(i) && out.drag[i]! < 0) p.push(`step.drag[${i}] = ${out.drag[i]} is negative`);
    if (!skip(i) && out.actuationPower[i]! < 0) p.push(`step.actuationPower[${i}] = ${out.actuationPower[i]} is negative`);
  }
  for (let b = 0; b < B; b++) {
    for (const [name, f] of [
      ['done', out.done],
      ['truncated', out.truncated],
      ['diverged', out.diverged],
    ] as const) {
      if (f[b] !== 0 && f[b] !== 1) p.push(`step.${name}[${b}] = ${f[b]}, expected 0 or 1`);
    }
    if (out.truncated[b] && !out.done[b]) p.push(`copy ${b}: truncated without done`);
    if (out.diverged[b] && !out.done[b]) p.push(`copy ${b}: diverged without done`);
    if (out.diverged[b] && out.truncated[b]) p.push(`copy ${b}: diverged and truncated at once`);
  }
  return p;
}

/** Problems with an opposition signal [B, T, actDim]. */
export function checkOppositionSignal(spec: EnvSpec, s: unknown): string[] {
  if (!(s instanceof Float64Array)) return ['oppositionSignal must be a Float64Array'];
  const n = spec.copies * spec.tiles * spec.actDim;
  const p: string[] = [];
  if (s.length !== n) p.push(`oppositionSignal has length ${s.length}, expected ${n}`);
  const i = firstNonFinite(s);
  if (i >= 0) p.push(`oppositionSignal[${i}] is not finite`);
  return p;
}

/**
 * Exercise an environment: reset with `seeds`, then `steps` decisions of seeded uniform
 * random actions up to `overdrive` times the bound (so clipping is exercised), checking
 * every output. Copies that end are reset with fresh seeds. Returns all problems found.
 */
export function exerciseEnv(env: TiledEnv, options: { steps: number; seed: number; overdrive?: number }): string[] {
  const spec = env.spec;
  const p = checkSpec(spec);
  const rng = new Rng(`checker/${options.seed}`);
  const seeds = Array.from({ length: spec.copies }, () => rng.uint32());
  p.push(...checkObservation(spec, env.reset(seeds), 'reset.obs'));
  p.push(...checkObservation(spec, env.observe(), 'observe()'));
  const acts = new Float32Array(spec.copies * spec.tiles * spec.actDim);
  const amp = spec.actionBound * (options.overdrive ?? 1.5);
  for (let s = 0; s < options.steps && p.length === 0; s++) {
    rng.fillUniform(acts, -amp, amp);
    p.push(...checkOppositionSignal(spec, env.oppositionSignal()));
    const out = env.step(acts);
    p.push(...checkStepOut(spec, out).map((m) => `step ${s}: ${m}`));
    for (let b = 0; b < spec.copies; b++) if (out.done[b]) env.resetCopy(b, rng.uint32());
  }
  return p;
}
