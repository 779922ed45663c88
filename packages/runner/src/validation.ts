/**
 * Validation: the deterministic policy (a PolicySnapshot, forward pass in policy.ts) over
 * seeded episodes, scored like the baselines (envs baselines.ts: mean drag analogue over the
 * decisions after the transient, Student-t 95% intervals over episodes).
 */
import { evaluatePolicy, summarizeEpisodes, type BaselinePolicy, type PolicySummary, type TiledEnv } from '@tilewise/envs';
import type { PolicySnapshot } from '@tilewise/agent';
import { PolicyNet } from './policy-net';

export interface ValidationRequest {
  readonly snapshot: PolicySnapshot;
  readonly seeds: readonly number[];
  readonly episodeLength?: number;
  readonly discardDecisions: number;
}

/** A PolicyNet as a BaselinePolicy (acts for every tile of every copy in one batch). */
export function netPolicy(net: PolicyNet, name = 'policy'): BaselinePolicy {
  return {
    name,
    act(env, obs, out) {
      out.set(net.act(obs, env.spec.copies * env.spec.tiles));
    },
  };
}

export function validatePolicy(env: TiledEnv, req: ValidationRequest): PolicySummary {
  const policy = netPolicy(new PolicyNet(req.snapshot));
  return summarizeEpisodes('policy', evaluatePolicy(env, policy, { seeds: req.seeds, episodeLength: req.episodeLength, discardDecisions: req.discardDecisions }));
}
