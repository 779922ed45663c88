/**
 * A trained policy outside the agent: the deterministic actor, its observation normaliser and
 * the facts about the environment it was trained on, as one file.
 *
 * The forward pass is PolicyNet (policy-net.ts).
 *
 * File (docs/formats.md): a tilewise state container (`@tilewise/agent` container.ts)
 * of kind "tilewise-policy" with blocks
 *   actor/params        f32 [paramCount]  flat W_0, b_0, W_1, b_1, ... (net/types.ts order)
 *   normalizer/mean     f64 [obsDim]      (absent when normalisation is off)
 *   normalizer/invStd   f64 [obsDim]      1 / sqrt(var + eps)
 * and meta { format, actor: MlpSpec, actionBound, normalizer: { clip } | null,
 *            env: { kind, config, spec, reference }, source: { ... provenance } }.
 * Action = actionBound * actor(clip((obs - mean) * invStd, -clip, clip)).
 */
import { readFileSync } from 'node:fs';
import { decodeContainer, encodeContainer, getBlock, mlpParamCount, type Json, type MlpSpec, type PolicySnapshot } from '@tilewise/agent';
import type { EnvSpec } from '@tilewise/envs';
import { writeFileAtomic } from './atomic';

export const POLICY_KIND = 'tilewise-policy';
const POLICY_FORMAT = 1;

/** What a policy file says about the environment it was trained on. */
export interface PolicyEnvInfo {
  readonly kind: string;
  /** The resolved env section. */
  readonly config: Record<string, unknown>;
  readonly spec: Pick<EnvSpec, 'obsDim' | 'actDim' | 'actionBound' | 'tiles' | 'tileGrid' | 'controlInterval' | 'obsLayout' | 'dragName'>;
  /** The normalising reference (e.g. P0) the rewards used. */
  readonly reference: number;
}

export interface PolicyFile {
  readonly snapshot: PolicySnapshot;
  readonly env: PolicyEnvInfo;
  /** Provenance: run directory, step, validation score... */
  readonly source: Record<string, Json>;
}

/** The spec fields a policy file keeps. */
export function policyEnvSpec(spec: EnvSpec): PolicyEnvInfo['spec'] {
  const { obsDim, actDim, actionBound, tiles, tileGrid, controlInterval, obsLayout, dragName } = spec;
  return { obsDim, actDim, actionBound, tiles, tileGrid, controlInterval, obsLayout, dragName };
}

export function encodePolicy(p: PolicyFile): Uint8Array {
  const s = p.snapshot;
  const blocks = new Map<string, Float32Array | Float64Array>([['actor/params', s.params]]);
  if (s.normalizer) {
    blocks.set('normalizer/mean', s.normalizer.mean);
    blocks.set('normalizer/invStd', s.normalizer.invStd);
  }
  const meta: Json = {
    format: POLICY_FORMAT,
    actor: { sizes: [...s.spec.sizes], hidden: s.spec.hidden, output: s.spec.output },
    actionBound: s.actionBound,
    normalizer: s.normalizer ? { clip: s.normalizer.clip } : null,
    env: JSON.parse(JSON.stringify(p.env)) as Json,
    source: p.source,
  };
  return encodeContainer(POLICY_KIND, meta, blocks);
}

export function decodePolicy(bytes: Uint8Array, what = 'policy file'): PolicyFile {
  const c = decodeContainer(bytes, POLICY_KIND, what);
  const m = c.meta as unknown as { format?: unknown; actor: MlpSpec; actionBound: number; normalizer: { clip: number } | null; env: PolicyEnvInfo; source: Record<string, Json> };
  if (m?.format !== POLICY_FORMAT) throw new Error(`${what}: policy format ${JSON.stringify(m?.format)} is not supported (this build reads ${POLICY_FORMAT})`);
  const spec = m.actor;
  const params = getBlock(c, 'actor/params', 'f32', mlpParamCount(spec), what);
  const obsDim = spec.sizes[0]!;
  const normalizer = m.normalizer
    ? {
        mean: getBlock(c, 'normalizer/mean', 'f64', obsDim, what),
        invStd: getBlock(c, 'normalizer/invStd', 'f64', obsDim, what),
        clip: m.normalizer.clip,
      }
    : null;
  return { snapshot: { spec, params, actionBound: m.actionBound, normalizer }, env: m.env, source: m.source };
}

export function savePolicy(path: string, p: PolicyFile): void {
  writeFileAtomic(path, encodePolicy(p));
}

export function loadPolicy(path: string): PolicyFile {
  let bytes: Uint8Array;
  try {
    bytes = readFileSync(path);
  } catch (e) {
    throw new Error(`policy file ${path}: cannot read it (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`);
  }
  return decodePolicy(bytes, `policy file ${path}`);
}
