/**
 * A small trained policy for the export, server and act tests: a real agent (createAgent) whose
 * normaliser has seen shifted, scaled observations and whose networks took a few TD3 updates on
 * random transitions, with the spec of the KS L = 22, 4-tile env for the layout metadata.
 * `finalLayerInit` is raised to about 1/sqrt(width) so the actions span the bound (with the default 3e-3 every
 * action would be ~1e-3 and a 1e-5 parity check would say little).
 */
import { createAgent, type Agent, type PolicySnapshot } from '@tilewise/agent';
import { KsEnv, parseKsConfig, Rng, type EnvSpec } from '@tilewise/envs';
import type { ExportInput } from '../../src/export';

/**
 * The KS env the export tests use: L = 22, 4 tiles, 8 sensors per window and the neighbours'
 * windows (24 observations per tile), one actuator per tile, bound 0.5. Pinned here (not read
 * from configs/) so the tests do not move when the shipped configs change.
 */
export const KS_ENV = {
  kind: 'ks',
  length: 22,
  points: 64,
  tiles: 4,
  actuators: 4,
  actionBound: 0.5,
  sensorsPerTile: 8,
  haloTiles: 1,
} as const;

/** The KS spec without running anything (P0 given, never measured). */
export function ksSpec(copies = 1, env: Record<string, unknown> = KS_ENV): { spec: EnvSpec; config: Record<string, unknown> } {
  const config = parseKsConfig(env);
  return { spec: new KsEnv(config, { copies, p0: 1 }).spec, config: config as unknown as Record<string, unknown> };
}

export interface TrainedPolicy {
  readonly agent: Agent;
  readonly snapshot: PolicySnapshot;
  readonly input: ExportInput;
  readonly spec: EnvSpec;
}

/** Observations with per-component offsets and scales, like sensor readings. */
export function randomObservations(rng: Rng, count: number, obsDim: number, spread = 1): Float32Array {
  const obs = new Float32Array(count * obsDim);
  for (let r = 0; r < count; r++) {
    for (let j = 0; j < obsDim; j++) obs[r * obsDim + j] = 0.3 * Math.sin(j) + spread * (1 + 0.05 * j) * rng.normal();
  }
  return obs;
}

export async function trainedPolicy(o: { hidden?: number[]; activation?: 'relu' | 'tanh'; seed?: number; normalizer?: boolean; updates?: number } = {}): Promise<TrainedPolicy> {
  const { spec, config } = ksSpec();
  const agent = await createAgent({
    obsDim: spec.obsDim,
    actDim: spec.actDim,
    actionBound: spec.actionBound,
    seed: o.seed ?? 11,
    config: {
      algo: 'td3',
      backend: 'simd',
      actor: { hidden: o.hidden ?? [64, 48], activation: o.activation ?? 'relu' },
      critic: { hidden: [32, 32] },
      // about 1 / sqrt(width): pre-tanh outputs of order one
      finalLayerInit: 1 / Math.sqrt((o.hidden ?? [64, 48]).at(-1) ?? spec.obsDim),
      warmup: 0,
      batchSize: 32,
      replayCapacity: 4096,
      normalizer: { enabled: o.normalizer ?? true },
    },
  });
  const rng = Rng.derive(o.seed ?? 11, 'test/export-data');
  const n = 64;
  for (let k = 0; k < 4; k++) {
    const obs = randomObservations(rng, n, spec.obsDim);
    const next = randomObservations(rng, n, spec.obsDim);
    const act = new Float32Array(n * spec.actDim);
    rng.fillUniform(act, -spec.actionBound, spec.actionBound);
    const reward = new Float32Array(n);
    rng.fillNormal(reward);
    agent.store(obs, act, reward, next, new Float32Array(n));
  }
  for (let k = 0; k < (o.updates ?? 10); k++) agent.update();
  agent.freezeNormalizer();
  const snapshot = agent.policy();
  const input: ExportInput = {
    snapshot,
    env: { kind: 'ks', spec, config, reference: 1 },
    trainingConfig: { env: config, agent: agent.config },
    source: { test: 'trainedPolicy', seed: o.seed ?? 11 },
  };
  return { agent, snapshot, input, spec };
}
