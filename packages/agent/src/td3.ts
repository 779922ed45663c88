/**
 * TD3 (Fujimoto, van Hoof & Meger 2018, "Addressing function approximation error in
 * actor-critic methods", ICML, Algorithm 1), with DDPG (Lillicrap et al. 2016, ICLR) as the
 * preset critics = 1, policyDelay = 1, targetNoise = null of the same code.
 *
 * `update(batch)` is the whole learning step and reads top to bottom like Algorithm 1.
 * Collecting transitions, normalising observations and saving live in `agent.ts`.
 *
 * Conventions: actions are in [-1, 1] (the actor ends in tanh; the agent scales by the
 * action bound outside); observations arrive normalised; `notDone` is 0 only after a true
 * terminal state, so time-limit truncations bootstrap. The critic sees the row
 * [observation, action] (width obsDim + actDim). The networks are reached only through the
 * narrow interface of `net/types.ts`.
 *
 * Losses: the critic step minimises sum_j mean_i (Q_j(s_i, a_i) - y_i)^2 (reported as
 * `criticLoss`, the sum over critics as in [F]'s reference code); the actor step minimises
 * -mean_i Q_1(s_i, mu(s_i)) (reported as `actorLoss`, null on updates without an actor step).
 */
import type { Rng } from '@tilewise/envs';
import type { Batch } from './replay';
import type { Adam, AdamConfig, Mlp, NetBackend } from './net/types';

export interface Td3Settings {
  /** Discount factor gamma. */
  readonly gamma: number;
  /** Polyak rate tau of the target networks. */
  readonly tau: number;
  /** Critic updates per actor and target update (d in Algorithm 1). */
  readonly policyDelay: number;
  /** Number of critics (2: clipped double Q; 1: DDPG). */
  readonly critics: 1 | 2;
  /** Target policy smoothing: noise N(0, std^2) clipped to [-clip, clip]; null for none. */
  readonly targetNoise: { readonly std: number; readonly clip: number } | null;
  readonly actorLr: number;
  readonly criticLr: number;
  readonly adam: Omit<AdamConfig, 'lr'>;
}

/** The networks of one learner; targets start as copies of their online networks. */
export interface Td3Networks {
  readonly actor: Mlp;
  readonly actorTarget: Mlp;
  readonly critics: readonly Mlp[];
  readonly criticTargets: readonly Mlp[];
  readonly actorOpt: Adam;
  readonly criticOpts: readonly Adam[];
}

export interface UpdateResult {
  /** sum_j mean_i (Q_j - y)^2 before the critic step. */
  readonly criticLoss: number;
  /** -mean_i Q_1(s_i, mu(s_i)) before the actor step, or null when the actor was not updated. */
  readonly actorLoss: number | null;
  /** mean_i Q_1(s_i, a_i) before the critic step. */
  readonly q: number;
  /** mean_i y_i, the critic target. */
  readonly target: number;
}

/** Build the actor, critics, their targets (as copies) and optimisers from initial parameters. */
export function createTd3Networks(
  backend: NetBackend,
  settings: Td3Settings,
  actorSpec: Mlp['spec'],
  criticSpec: Mlp['spec'],
  actorParams: Float32Array,
  criticParams: readonly Float32Array[],
): Td3Networks {
  if (criticParams.length !== settings.critics) {
    throw new Error(`createTd3Networks: ${settings.critics} critic(s) configured, ${criticParams.length} parameter set(s) given`);
  }
  const net = (spec: Mlp['spec'], p: Float32Array): Mlp => {
    const m = backend.createMlp(spec);
    m.setParams(p);
    return m;
  };
  const actor = net(actorSpec, actorParams);
  const critics = criticParams.map((p) => net(criticSpec, p));
  const adam = (lr: number): AdamConfig => ({ lr, ...settings.adam });
  return {
    actor,
    actorTarget: net(actorSpec, actorParams),
    critics,
    criticTargets: criticParams.map((p) => net(criticSpec, p)),
    actorOpt: backend.createAdam(actor, adam(settings.actorLr)),
    criticOpts: critics.map((c) => backend.createAdam(c, adam(settings.criticLr))),
  };
}

export class Td3 {
  /** Number of completed `update` calls (t in Algorithm 1, counted in gradient steps). */
  updates = 0;
  private readonly obsDim: number;
  private readonly actDim: number;
  // Scratch, sized for the batch on first use: [n, obsDim + actDim] rows, [n] and [n, actDim].
  private n = 0;
  private sa = new Float32Array(0);
  private y = new Float32Array(0);
  private dq = new Float32Array(0);
  private da = new Float32Array(0);
  private aTilde = new Float32Array(0);

  constructor(
    readonly settings: Td3Settings,
    readonly nets: Td3Networks,
    /** Source of the target-smoothing noise (replaced when a saved state is restored). */
    public smoothingRng: Rng,
  ) {
    if (nets.critics.length !== settings.critics || nets.criticTargets.length !== settings.critics) {
      throw new Error(`Td3: ${settings.critics} critic(s) configured, ${nets.critics.length} given`);
    }
    this.actDim = nets.actor.spec.sizes[nets.actor.spec.sizes.length - 1]!;
    this.obsDim = nets.actor.spec.sizes[0]!;
    const cIn = nets.critics[0]!.spec.sizes[0]!;
    if (cIn !== this.obsDim + this.actDim) {
      throw new Error(`Td3: critic input width ${cIn} must equal obsDim + actDim = ${this.obsDim} + ${this.actDim}`);
    }
  }

  private scratch(n: number): void {
    if (this.n === n) return;
    this.n = n;
    this.sa = new Float32Array(n * (this.obsDim + this.actDim));
    this.y = new Float32Array(n);
    this.dq = new Float32Array(n);
    this.da = new Float32Array(n * this.actDim);
    this.aTilde = new Float32Array(n * this.actDim);
  }

  /** Write rows [obs_i, act_i] into this.sa. */
  private join(obs: Float32Array, act: Float32Array, n: number): Float32Array {
    const od = this.obsDim;
    const ad = this.actDim;
    const w = od + ad;
    for (let i = 0; i < n; i++) {
      this.sa.set(obs.subarray(i * od, i * od + od), i * w);
      this.sa.set(act.subarray(i * ad, i * ad + ad), i * w + od);
    }
    return this.sa;
  }

  /** One learning step on a minibatch (Algorithm 1, inner loop). */
  update(b: Batch): UpdateResult {
    const n = b.size;
    const { gamma, tau, policyDelay, targetNoise } = this.settings;
    const { actor, actorTarget, critics, criticTargets, actorOpt, criticOpts } = this.nets;
    const ad = this.actDim;
    this.scratch(n);
    const { y, dq, da, aTilde } = this;

    // 1. Target actions with clipped smoothing noise:
    //    a~ = clip(mu'(s') + clip(eps, -c, c), -1, 1),  eps ~ N(0, std^2)
    const aNext = actorTarget.predict(b.nextObs, n);
    for (let k = 0; k < n * ad; k++) {
      let a = aNext[k]!;
      if (targetNoise) {
        const eps = targetNoise.std * this.smoothingRng.normal();
        a += eps > targetNoise.clip ? targetNoise.clip : eps < -targetNoise.clip ? -targetNoise.clip : eps;
      }
      aTilde[k] = a > 1 ? 1 : a < -1 ? -1 : a;
    }

    // 2. Clipped double-Q target: y = r + gamma (1 - d) min_j Q'_j(s', a~)
    const nextSa = this.join(b.nextObs, aTilde, n);
    y.set(criticTargets[0]!.predict(nextSa, n));
    for (let j = 1; j < criticTargets.length; j++) {
      const qj = criticTargets[j]!.predict(nextSa, n);
      for (let i = 0; i < n; i++) if (qj[i]! < y[i]!) y[i] = qj[i]!;
    }
    let targetSum = 0;
    for (let i = 0; i < n; i++) {
      y[i] = b.reward[i]! + gamma * b.notDone[i]! * y[i]!;
      targetSum += y[i]!;
    }

    // 3. Critic step: theta_j <- argmin N^-1 sum (y - Q_j(s, a))^2, one Adam step per critic.
    const sa = this.join(b.obs, b.act, n);
    let criticLoss = 0;
    let qSum = 0;
    for (let j = 0; j < critics.length; j++) {
      const q = critics[j]!.forward(sa, n);
      for (let i = 0; i < n; i++) {
        const e = q[i]! - y[i]!;
        criticLoss += (e * e) / n;
        dq[i] = (2 * e) / n;
        if (j === 0) qSum += q[i]!;
      }
      critics[j]!.backward(dq, false);
      criticOpts[j]!.step();
    }
    this.updates++;

    // 4. Delayed policy step (every d critic steps): deterministic policy gradient
    //    grad_phi J = N^-1 sum grad_a Q_1(s, a)|a=mu(s) grad_phi mu(s); we descend -J.
    let actorLoss: number | null = null;
    if (this.updates % policyDelay === 0) {
      const a = actor.forward(b.obs, n);
      const q = critics[0]!.forward(this.join(b.obs, a, n), n);
      let s = 0;
      for (let i = 0; i < n; i++) s += q[i]!;
      actorLoss = -s / n;
      dq.fill(-1 / n);
      const dsa = critics[0]!.backward(dq, true)!;
      const w = this.obsDim + ad;
      for (let i = 0; i < n; i++) da.set(dsa.subarray(i * w + this.obsDim, i * w + w), i * ad);
      actor.backward(da, false);
      actorOpt.step();

      // 5. Target networks: theta' <- tau theta + (1 - tau) theta'
      for (let j = 0; j < critics.length; j++) critics[j]!.polyakInto(criticTargets[j]!, tau);
      actor.polyakInto(actorTarget, tau);
    }

    return { criticLoss, actorLoss, q: qSum / n, target: targetSum / n };
  }

  dispose(): void {
    const { actor, actorTarget, critics, criticTargets, actorOpt, criticOpts } = this.nets;
    for (const o of [actorOpt, ...criticOpts]) o.dispose();
    for (const m of [actor, actorTarget, ...critics, ...criticTargets]) m.dispose();
  }
}
