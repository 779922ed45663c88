/**
 * The agent's configuration: the `agent:` section of a tilewise run config.
 *
 * `algo` picks a preset; every other field defaults to that preset's value and may be
 * overridden. Presets (values and sources):
 *
 * | field          | td3                          | ddpg                        |
 * |----------------|------------------------------|-----------------------------|
 * | critics        | 2  [F]                       | 1  [L]                      |
 * | policyDelay    | 2  [F]                       | 1  [L]                      |
 * | targetNoise    | std 0.2, clip 0.5  [F]       | none  [L]                   |
 * | exploration    | Gaussian std 0.1  [F]        | OU theta 0.15, sigma 0.2 [L]|
 * | gamma          | 0.99  [F]                    | 0.99  [L]                   |
 * | tau            | 0.005  [F]                   | 0.001  [L]                  |
 * | actorLr        | 3e-4  [F19]                  | 1e-4  [L]                   |
 * | criticLr       | 3e-4  [F19]                  | 1e-3  [L]                   |
 * | batchSize      | 256  [F19]                   | 64  [L]                     |
 * | hidden widths  | [256, 256]  [F19]            | [400, 300]  [L]             |
 * | warmup         | 25000 transitions  [F19]     | 0  [L]                      |
 * | replayCapacity | 1e6  [F], [L]                | 1e6  [L]                    |
 * | finalLayerInit | 3e-3  [L]                    | 3e-3  [L]                   |
 *
 * [F]   Fujimoto, van Hoof & Meger 2018, "Addressing function approximation error in
 *       actor-critic methods", ICML (Section 6.1 and the hyper-parameter table of the
 *       appendix; recalled from memory).
 * [F19] The authors' revision of the reference implementation accompanying [F] (2019),
 *       which changed lr 1e-3 -> 3e-4, batch 100 -> 256, hidden [400, 300] -> [256, 256] and
 *       the initial random-action phase 1e4 -> 25e3 steps (recalled from memory). The paper's
 *       own values are 1e-3, 100, [400, 300] and 1e4.
 * [L]   Lillicrap et al. 2016, "Continuous control with deep reinforcement learning", ICLR,
 *       Section 7 "Experiment details". The preset leaves out the paper's batch
 *       normalisation and its L2 weight decay of 1e-2 on the critic, as do most later
 *       re-implementations (including the DDPG baseline of [F]); and it feeds the action to
 *       the critic's first layer instead of its second, as [F] does.
 *
 * Units: noise standard deviations and clips are fractions of the action bound (the agent
 * works with actions scaled to [-1, 1]); `warmup` and `replayCapacity` count tile
 * transitions (B copies x T tiles per environment step).
 */
import { ConfigError, parseConfig } from '@tilewise/envs';
import { z } from 'zod';

const activation = z.enum(['relu', 'tanh']);
const positive = z.number().positive().finite();
const fraction = z.number().min(0).finite();

const netSchema = z.strictObject({
  hidden: z
    .array(z.number().int().min(1).max(65536))
    .max(16)
    .optional()
    .describe('Hidden layer widths (td3 [256, 256], ddpg [400, 300]); [] makes a single affine layer.'),
  activation: activation.optional().describe('Activation of hidden layers: relu or tanh (default relu, both papers).'),
});

const gaussianSchema = z.strictObject({
  kind: z.literal('gaussian'),
  std: fraction.default(0.1).describe('Standard deviation, in units of the action bound (default 0.1, Fujimoto et al. 2018).'),
});

const ouSchema = z.strictObject({
  kind: z.literal('ou'),
  theta: positive.default(0.15).describe('Mean-reversion rate theta per unit time (default 0.15, Lillicrap et al. 2016).'),
  sigma: fraction.default(0.2).describe('Diffusion sigma, in units of the action bound (default 0.2, Lillicrap et al. 2016).'),
  dt: positive.default(1).describe('Time between two decisions in the units of theta (default 1: one step).'),
});

const targetNoiseSchema = z.strictObject({
  std: fraction.default(0.2).describe('Standard deviation of the target-action noise, fraction of the bound (default 0.2, Fujimoto et al. 2018).'),
  clip: fraction.default(0.5).describe('The noise is clipped to [-clip, clip] (default 0.5, Fujimoto et al. 2018).'),
});

const normalizerSchema = z.strictObject({
  enabled: z.boolean().optional().describe('Normalise observations by running mean and variance (default true).'),
  clip: positive.optional().describe('Normalised observations are clipped to [-clip, clip] (default 5, common practice).'),
  eps: positive.optional().describe('Added to the variance before the square root (default 1e-8, common practice).'),
});

const adamSchema = z.strictObject({
  beta1: z.number().min(0).lt(1).optional().describe('First-moment decay (default 0.9, Kingma & Ba 2015).'),
  beta2: z.number().min(0).lt(1).optional().describe('Second-moment decay (default 0.999, Kingma & Ba 2015).'),
  eps: positive.optional().describe('Denominator offset (default 1e-8, Kingma & Ba 2015).'),
});

/**
 * Network backends the agent can be asked for; "auto" picks the fastest that starts.
 * simd-fma / simd: WebAssembly SIMD kernels (net/simd), with fused multiply-add (fast) or the
 * plain build whose results are bit-identical on every machine (strict).
 */
export const BACKEND_CHOICES = ['auto', 'simd-fma', 'simd', 'tfjs-node', 'tfjs-wasm', 'tfjs-cpu'] as const;
export type BackendChoice = (typeof BACKEND_CHOICES)[number];

/** The raw (user-facing) schema: every field optional, unknown keys rejected. */
const rawSchema = z.strictObject({
  algo: z.enum(['td3', 'ddpg']).default('td3').describe('Algorithm preset: td3 (default) or ddpg (TD3 with one critic, delay 1, no smoothing).'),
  backend: z.enum(BACKEND_CHOICES).default('auto').describe('Network backend: auto (default: simd-fma, else simd, else tfjs-node, tfjs-wasm, tfjs-cpu) or one by name; simd is the bit-reproducible build.'),
  gamma: z.number().min(0).lt(1).optional().describe('Discount factor (default 0.99, both papers).'),
  tau: z.number().gt(0).max(1).optional().describe('Polyak rate of the target networks (td3 0.005, ddpg 0.001).'),
  batchSize: z.number().int().min(1).max(1 << 20).optional().describe('Transitions per update (td3 256, ddpg 64).'),
  actorLr: positive.optional().describe('Actor Adam step size (td3 3e-4, ddpg 1e-4).'),
  criticLr: positive.optional().describe('Critic Adam step size (td3 3e-4, ddpg 1e-3).'),
  adam: adamSchema.optional().describe('Adam decay rates and offset (Kingma & Ba 2015 defaults).'),
  actor: netSchema.optional().describe('Actor network: hidden widths and activation; output is tanh times the action bound.'),
  critic: netSchema.optional().describe('Critic network(s): input (observation, action), linear output.'),
  finalLayerInit: positive.optional().describe('Half-width of the uniform init of both last layers (default 3e-3, Lillicrap et al. 2016).'),
  critics: z.union([z.literal(1), z.literal(2)]).optional().describe('Number of critics; the target uses their minimum (td3 2, ddpg 1).'),
  policyDelay: z.number().int().min(1).max(1000).optional().describe('Critic updates per actor and target update (td3 2, ddpg 1).'),
  targetNoise: targetNoiseSchema.nullable().optional().describe('Target policy smoothing noise, or null for none (td3 std 0.2 clip 0.5, ddpg null).'),
  exploration: z
    .discriminatedUnion('kind', [gaussianSchema, ouSchema])
    .optional()
    .describe('Exploration noise added to the policy: gaussian (td3, std 0.1) or ou (ddpg, theta 0.15, sigma 0.2, dt 1).'),
  warmup: z.number().int().min(0).optional().describe('Tile transitions stored with uniform random actions before the policy acts (td3 25000, ddpg 0).'),
  replayCapacity: z.number().int().min(1).max(1e8).optional().describe('Replay buffer size in tile transitions (default 1e6, both papers).'),
  rewardScale: positive.optional().describe('Rewards are multiplied by this before learning (default 1).'),
  normalizer: normalizerSchema.optional().describe('Running observation normalisation.'),
});

export type ExplorationConfig = z.output<typeof gaussianSchema> | z.output<typeof ouSchema>;

/** A fully resolved agent configuration (every field present). */
export interface AgentConfig {
  readonly algo: 'td3' | 'ddpg';
  readonly backend: BackendChoice;
  readonly gamma: number;
  readonly tau: number;
  readonly batchSize: number;
  readonly actorLr: number;
  readonly criticLr: number;
  readonly adam: { readonly beta1: number; readonly beta2: number; readonly eps: number };
  readonly actor: { readonly hidden: readonly number[]; readonly activation: 'relu' | 'tanh' };
  readonly critic: { readonly hidden: readonly number[]; readonly activation: 'relu' | 'tanh' };
  readonly finalLayerInit: number;
  readonly critics: 1 | 2;
  readonly policyDelay: number;
  readonly targetNoise: { readonly std: number; readonly clip: number } | null;
  readonly exploration: ExplorationConfig;
  readonly warmup: number;
  readonly replayCapacity: number;
  readonly rewardScale: number;
  readonly normalizer: { readonly enabled: boolean; readonly clip: number; readonly eps: number };
}

type Preset = Omit<AgentConfig, 'algo' | 'backend'>;

const shared = {
  gamma: 0.99,
  adam: { beta1: 0.9, beta2: 0.999, eps: 1e-8 },
  finalLayerInit: 3e-3,
  replayCapacity: 1_000_000,
  rewardScale: 1,
  normalizer: { enabled: true, clip: 5, eps: 1e-8 },
} as const;

/** The presets of the table above. */
export const PRESETS: Readonly<Record<'td3' | 'ddpg', Preset>> = {
  td3: {
    ...shared,
    tau: 0.005,
    batchSize: 256,
    actorLr: 3e-4,
    criticLr: 3e-4,
    actor: { hidden: [256, 256], activation: 'relu' },
    critic: { hidden: [256, 256], activation: 'relu' },
    critics: 2,
    policyDelay: 2,
    targetNoise: { std: 0.2, clip: 0.5 },
    exploration: { kind: 'gaussian', std: 0.1 },
    warmup: 25_000,
  },
  ddpg: {
    ...shared,
    tau: 0.001,
    batchSize: 64,
    actorLr: 1e-4,
    criticLr: 1e-3,
    actor: { hidden: [400, 300], activation: 'relu' },
    critic: { hidden: [400, 300], activation: 'relu' },
    critics: 1,
    policyDelay: 1,
    targetNoise: null,
    exploration: { kind: 'ou', theta: 0.15, sigma: 0.2, dt: 1 },
    warmup: 0,
  },
};

/** Fill every field the user left out from the preset of `raw.algo`. */
function resolve(raw: z.output<typeof rawSchema>): AgentConfig {
  const p = PRESETS[raw.algo];
  return {
    algo: raw.algo,
    backend: raw.backend,
    gamma: raw.gamma ?? p.gamma,
    tau: raw.tau ?? p.tau,
    batchSize: raw.batchSize ?? p.batchSize,
    actorLr: raw.actorLr ?? p.actorLr,
    criticLr: raw.criticLr ?? p.criticLr,
    adam: { beta1: raw.adam?.beta1 ?? p.adam.beta1, beta2: raw.adam?.beta2 ?? p.adam.beta2, eps: raw.adam?.eps ?? p.adam.eps },
    actor: { hidden: raw.actor?.hidden ?? p.actor.hidden, activation: raw.actor?.activation ?? p.actor.activation },
    critic: { hidden: raw.critic?.hidden ?? p.critic.hidden, activation: raw.critic?.activation ?? p.critic.activation },
    finalLayerInit: raw.finalLayerInit ?? p.finalLayerInit,
    critics: raw.critics ?? p.critics,
    policyDelay: raw.policyDelay ?? p.policyDelay,
    targetNoise: raw.targetNoise === undefined ? p.targetNoise : raw.targetNoise,
    exploration: raw.exploration ?? p.exploration,
    warmup: raw.warmup ?? p.warmup,
    replayCapacity: raw.replayCapacity ?? p.replayCapacity,
    rewardScale: raw.rewardScale ?? p.rewardScale,
    normalizer: {
      enabled: raw.normalizer?.enabled ?? p.normalizer.enabled,
      clip: raw.normalizer?.clip ?? p.normalizer.clip,
      eps: raw.normalizer?.eps ?? p.normalizer.eps,
    },
  };
}

/**
 * The `agent:` section: parses user input, fills defaults from the chosen preset and
 * rejects incompatible combinations. Output type: `AgentConfig`.
 */
export const agentConfigSchema = rawSchema
  .prefault({})
  .transform(resolve)
  .superRefine((c, ctx) => {
    const bad = (path: string[], message: string, input: unknown): void => {
      ctx.addIssue({ code: 'custom', path, message, input });
    };
    if (c.algo === 'ddpg') {
      // DDPG is TD3 with these three switched off; changing them is asking for td3.
      const why = 'ddpg is the td3 update with one critic, policy delay 1 and no target smoothing; use algo: td3 to change it';
      if (c.critics !== 1) bad(['critics'], `expected 1 (${why})`, c.critics);
      if (c.policyDelay !== 1) bad(['policyDelay'], `expected 1 (${why})`, c.policyDelay);
      if (c.targetNoise !== null) bad(['targetNoise'], `expected null (${why})`, c.targetNoise);
    }
    if (c.batchSize > c.replayCapacity) bad(['batchSize'], `expected at most replayCapacity (${c.replayCapacity})`, c.batchSize);
  });

/** Parse and resolve an `agent:` section (`root` prefixes field paths in error messages). */
export function parseAgentConfig(raw: unknown, root = 'agent'): AgentConfig {
  return parseConfig(agentConfigSchema, raw, root);
}

export { ConfigError };
