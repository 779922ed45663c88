/**
 * The shared-weight agent: ONE actor and ONE set of critics serve every tile of every
 * environment copy (parameter sharing among cooperative agents, Gupta, Egorov & Kochenderfer
 * 2017). The trainer calls:
 *
 *   act(obs, count, explore)  obs [count, obsDim] (count = B copies x T tiles, tile-major)
 *                             -> actions [count, actDim] in [-bound, bound], one batched
 *                             forward pass through the actor
 *   store(obs, actions, rewards, nextObs, terminal)
 *                             one transition per tile into the single replay buffer;
 *                             terminal [count] is 1 only for true terminal states: pass 0 for
 *                             a time-limit truncation so the target bootstraps through it
 *   update()                  one TD3/DDPG step on a sampled minibatch; returns the losses
 *   getState() / setState(), save() / load()   everything needed to resume bit for bit
 *   dispose()
 *
 * Observations are stored raw and normalised (running statistics, `normalizer.ts`) when
 * acting and when a minibatch is sampled. Actions are stored divided by the bound.
 * Exploration: while fewer than `warmup` transitions are stored, `act(..., true)` returns
 * uniform random actions; afterwards policy + noise, clipped to the bound.
 *
 * Randomness: independent streams derived from the seed: "agent/init" (network
 * initialisation), "agent/replay" (minibatch indices), "agent/explore" (exploration noise),
 * "agent/warmup" (random actions), "agent/smoothing" (target-policy noise). All but init are
 * part of the saved state.
 *
 * Buffers returned by `act` are owned by the agent and overwritten by the next call.
 */
import { Rng, type RngState } from '@tilewise/envs';
import { parseAgentConfig, type AgentConfig } from './config';
import { decodeContainer, encodeContainer, getBlock, type BlockArray, type Json } from './container';
import { initMlpParams } from './net/init';
import { createNetBackend, type SelectOptions } from './net/select';
import type { MlpSpec, NetBackend } from './net/types';
import { RunningNormalizer } from './normalizer';
import { ExplorationNoise } from './noise';
import { createBatch, ReplayBuffer, type Batch } from './replay';
import { createTd3Networks, Td3, type UpdateResult } from './td3';

/** Container kind of a saved agent. */
export const AGENT_STATE_KIND = 'tilewise-agent';
const STATE_FORMAT = 1;

export interface AgentOptions {
  /** Observation components per tile. */
  readonly obsDim: number;
  /** Action components per tile. */
  readonly actDim: number;
  /** Every action component lies in [-actionBound, actionBound]. */
  readonly actionBound: number;
  /** Run seed; the agent derives its own streams from it. */
  readonly seed: number | string;
  /** The `agent:` config section (raw or already resolved); defaults to td3. */
  readonly config?: unknown;
  /** Use this backend instead of the one `config.backend` names (benchmarks, tests). */
  readonly backend?: NetBackend;
  /** Receives the backend line and other one-off notices. */
  readonly log?: (message: string) => void;
  /** tfjs: transposed-product mode, for benchmarks. */
  readonly transpose?: SelectOptions['transpose'];
}

/** The saved state: JSON metadata and named arrays (put in a container by `save`). */
export interface AgentState {
  readonly meta: Json;
  readonly blocks: ReadonlyMap<string, BlockArray>;
}

/** What an exported policy needs: the actor, its bound and the frozen normaliser. */
export interface PolicySnapshot {
  readonly spec: MlpSpec;
  readonly params: Float32Array;
  readonly actionBound: number;
  /** Per-component mean and 1/sqrt(var + eps), and the clip; null when normalisation is off. */
  readonly normalizer: { readonly mean: Float64Array; readonly invStd: Float64Array; readonly clip: number } | null;
}

/** Create an agent, starting the network backend the config asks for. */
export async function createAgent(options: AgentOptions): Promise<Agent> {
  const config = parseAgentConfig(options.config ?? {});
  const backend = options.backend ?? (await createNetBackend(config.backend, { log: options.log, transpose: options.transpose }));
  return new Agent(options, config, backend);
}

function checkDims(o: Pick<AgentOptions, 'obsDim' | 'actDim' | 'actionBound'>): void {
  if (!Number.isInteger(o.obsDim) || o.obsDim < 1) throw new Error(`agent: obsDim must be a positive integer, got ${o.obsDim}`);
  if (!Number.isInteger(o.actDim) || o.actDim < 1) throw new Error(`agent: actDim must be a positive integer, got ${o.actDim}`);
  if (!(o.actionBound > 0) || !Number.isFinite(o.actionBound)) {
    throw new Error(`agent: actionBound must be a positive finite number, got ${o.actionBound}`);
  }
}

/** First path where two JSON values differ, or null. */
function firstDifference(a: unknown, b: unknown, path: string): string | null {
  if (typeof a !== typeof b || Array.isArray(a) !== Array.isArray(b) || a === null || b === null || typeof a !== 'object') {
    return Object.is(a, b) ? null : path;
  }
  const keys = new Set([...Object.keys(a as object), ...Object.keys(b as object)]);
  for (const k of keys) {
    const d = firstDifference((a as Record<string, unknown>)[k], (b as Record<string, unknown>)[k], Array.isArray(a) ? `${path}[${k}]` : `${path}.${k}`);
    if (d) return d;
  }
  return null;
}

function valueAt(obj: unknown, path: string): unknown {
  const parts = path.replace(/\[(\d+)\]/g, '.$1').split('.').slice(1);
  let v: unknown = obj;
  for (const p of parts) v = v === null || typeof v !== 'object' ? undefined : (v as Record<string, unknown>)[p];
  return v;
}

export class Agent {
  readonly config: AgentConfig;
  readonly obsDim: number;
  readonly actDim: number;
  readonly actionBound: number;
  readonly backend: NetBackend;
  readonly replay: ReplayBuffer;
  /** Observation statistics, or null when `normalizer.enabled` is false. */
  readonly normalizer: RunningNormalizer | null;
  readonly actorSpec: MlpSpec;
  readonly criticSpec: MlpSpec;
  /** Tile transitions stored so far. */
  transitions = 0;
  private readonly td3: Td3;
  private readonly noise: ExplorationNoise;
  private replayRng: Rng;
  private exploreRng: Rng;
  private warmupRng: Rng;
  private readonly batch: Batch;
  private obsBuf = new Float32Array(0);
  private noiseBuf = new Float32Array(0);
  private actOut = new Float32Array(0);
  private actScaled = new Float32Array(0);
  private disposed = false;

  constructor(options: Pick<AgentOptions, 'obsDim' | 'actDim' | 'actionBound' | 'seed'>, config: AgentConfig, backend: NetBackend) {
    checkDims(options);
    const { obsDim, actDim, actionBound, seed } = options;
    this.config = config;
    this.obsDim = obsDim;
    this.actDim = actDim;
    this.actionBound = actionBound;
    this.backend = backend;
    this.actorSpec = { sizes: [obsDim, ...config.actor.hidden, actDim], hidden: config.actor.activation, output: 'tanh' };
    this.criticSpec = { sizes: [obsDim + actDim, ...config.critic.hidden, 1], hidden: config.critic.activation, output: 'linear' };
    const init = Rng.derive(seed, 'agent/init');
    const actorParams = initMlpParams(this.actorSpec, init, config.finalLayerInit);
    const criticParams = Array.from({ length: config.critics }, () => initMlpParams(this.criticSpec, init, config.finalLayerInit));
    const settings = {
      gamma: config.gamma,
      tau: config.tau,
      policyDelay: config.policyDelay,
      critics: config.critics,
      targetNoise: config.targetNoise,
      actorLr: config.actorLr,
      criticLr: config.criticLr,
      adam: config.adam,
    };
    this.td3 = new Td3(
      settings,
      createTd3Networks(backend, settings, this.actorSpec, this.criticSpec, actorParams, criticParams),
      Rng.derive(seed, 'agent/smoothing'),
    );
    this.replayRng = Rng.derive(seed, 'agent/replay');
    this.exploreRng = Rng.derive(seed, 'agent/explore');
    this.warmupRng = Rng.derive(seed, 'agent/warmup');
    this.replay = new ReplayBuffer(config.replayCapacity, obsDim, actDim);
    this.normalizer = config.normalizer.enabled ? new RunningNormalizer(obsDim, config.normalizer.clip, config.normalizer.eps) : null;
    this.noise = new ExplorationNoise(config.exploration);
    this.batch = createBatch(config.batchSize, obsDim, actDim);
  }

  /** Gradient steps taken so far. */
  get updates(): number {
    return this.td3.updates;
  }

  /** True once the warm-up is over and the replay buffer holds a minibatch. */
  get ready(): boolean {
    return this.transitions >= this.config.warmup && this.replay.size >= this.config.batchSize;
  }

  private alive(where: string): void {
    if (this.disposed) throw new Error(`agent.${where}: the agent was disposed`);
  }

  private normalized(obs: Float32Array, rows: number): Float32Array {
    const n = rows * this.obsDim;
    if (this.obsBuf.length < n) this.obsBuf = new Float32Array(n);
    if (this.normalizer) this.normalizer.normalize(obs, rows, this.obsBuf);
    else this.obsBuf.set(obs.subarray(0, n));
    return this.obsBuf;
  }

  /**
   * Actions for `count` tiles from observations obs [count, obsDim]. With `explore`, random
   * actions during the warm-up, then policy plus exploration noise; without, the
   * deterministic policy. Returns [count, actDim], owned by the agent.
   */
  act(obs: Float32Array, count: number, explore: boolean): Float32Array {
    this.alive('act');
    if (!Number.isInteger(count) || count < 1) throw new Error(`agent.act: count must be a positive integer, got ${count}`);
    if (!(obs instanceof Float32Array) || obs.length < count * this.obsDim) {
      throw new Error(`agent.act: obs must be a Float32Array of at least count x obsDim = ${count} x ${this.obsDim} values, got ${obs?.length}`);
    }
    const n = count * this.actDim;
    if (this.actOut.length !== n) this.actOut = new Float32Array(n);
    const out = this.actOut;
    const bound = this.actionBound;
    if (explore && this.transitions < this.config.warmup) {
      for (let i = 0; i < n; i++) out[i] = bound * this.warmupRng.uniformIn(-1, 1);
      return out;
    }
    const a = this.td3.nets.actor.predict(this.normalized(obs, count), count);
    if (!explore) {
      for (let i = 0; i < n; i++) out[i] = bound * a[i]!;
      return out;
    }
    if (this.noiseBuf.length < n) this.noiseBuf = new Float32Array(n);
    this.noise.sample(this.exploreRng, this.noiseBuf, n);
    for (let i = 0; i < n; i++) {
      const v = a[i]! + this.noiseBuf[i]!;
      out[i] = bound * (v > 1 ? 1 : v < -1 ? -1 : v);
    }
    return out;
  }

  /** Reset the exploration noise of tiles [firstTile, firstTile + tiles) (OU only; start of an episode). */
  resetNoise(firstTile = 0, tiles = Infinity): void {
    this.noise.reset(firstTile * this.actDim, tiles * this.actDim);
  }

  /** Stop (or resume) updating the observation statistics. */
  freezeNormalizer(frozen = true): void {
    if (this.normalizer) this.normalizer.frozen = frozen;
  }

  /**
   * Store one transition per tile. obs, nextObs [count, obsDim]; actions [count, actDim] as
   * applied (env units); rewards [count]; terminal [count], nonzero only for a true terminal
   * state. count = rewards.length. Non-finite values are rejected.
   */
  store(obs: Float32Array, actions: Float32Array, rewards: ArrayLike<number>, nextObs: Float32Array, terminal: ArrayLike<number>): void {
    this.alive('store');
    const count = rewards.length;
    const od = this.obsDim;
    const ad = this.actDim;
    const sizes: Array<[string, ArrayLike<number>, number]> = [
      ['obs', obs, count * od],
      ['actions', actions, count * ad],
      ['nextObs', nextObs, count * od],
      ['terminal', terminal, count],
    ];
    for (const [name, arr, len] of sizes) {
      if (arr.length !== len) throw new Error(`agent.store: ${name} has length ${arr.length}, expected ${len} (${count} tiles from rewards.length)`);
    }
    for (const [name, arr] of [['obs', obs], ['actions', actions], ['rewards', rewards], ['nextObs', nextObs]] as const) {
      for (let i = 0; i < arr.length; i++) {
        if (!Number.isFinite(arr[i]!)) {
          const w = name === 'rewards' ? 1 : name === 'actions' ? ad : od;
          throw new Error(`agent.store: ${name}[${i}] is ${arr[i]} (tile ${Math.floor(i / w)}); transitions of a diverged copy must not be stored`);
        }
      }
    }
    if (this.actScaled.length !== count * ad) this.actScaled = new Float32Array(count * ad);
    const inv = 1 / this.actionBound;
    for (let i = 0; i < count * ad; i++) {
      const v = actions[i]! * inv;
      this.actScaled[i] = v > 1 ? 1 : v < -1 ? -1 : v;
    }
    this.normalizer?.update(obs, count);
    this.replay.add(count, obs, this.actScaled, rewards, nextObs, terminal);
    this.transitions += count;
  }

  /** One learning step on a minibatch sampled uniformly from the replay buffer. */
  update(): UpdateResult {
    this.alive('update');
    const b = this.batch;
    if (this.replay.size < b.size) {
      throw new Error(`agent.update: the replay buffer holds ${this.replay.size} transitions, fewer than batchSize ${b.size}`);
    }
    this.replay.sample(this.replayRng, b);
    if (this.normalizer) {
      this.normalizer.normalize(b.obs, b.size, b.obs);
      this.normalizer.normalize(b.nextObs, b.size, b.nextObs);
    }
    const s = this.config.rewardScale;
    if (s !== 1) for (let i = 0; i < b.size; i++) b.reward[i] = b.reward[i]! * s;
    return this.td3.update(b);
  }

  /** The deterministic policy as it would be exported (copies). */
  policy(): PolicySnapshot {
    this.alive('policy');
    const nz = this.normalizer;
    return {
      spec: this.actorSpec,
      params: this.td3.nets.actor.getParams(),
      actionBound: this.actionBound,
      normalizer: nz
        ? {
            mean: nz.mean.slice(),
            invStd: Float64Array.from({ length: this.obsDim }, (_, j) => 1 / Math.sqrt(nz.variance(j) + nz.eps)),
            clip: nz.clip,
          }
        : null,
    };
  }

  // --- state ------------------------------------------------------------------------------

  /** Everything needed to resume exactly: networks, targets, Adam, normaliser, replay, generators, noise. */
  getState(): AgentState {
    this.alive('getState');
    const { nets } = this.td3;
    const blocks = new Map<string, BlockArray>();
    blocks.set('actor', nets.actor.getParams());
    blocks.set('actorTarget', nets.actorTarget.getParams());
    nets.critics.forEach((c, j) => blocks.set(`critic${j}`, c.getParams()));
    nets.criticTargets.forEach((c, j) => blocks.set(`criticTarget${j}`, c.getParams()));
    const adam = [nets.actorOpt, ...nets.criticOpts].map((o) => o.getState());
    const adamNames = ['actor', ...nets.critics.map((_, j) => `critic${j}`)];
    adam.forEach((s, k) => {
      blocks.set(`adam/${adamNames[k]}/m`, s.m);
      blocks.set(`adam/${adamNames[k]}/v`, s.v);
    });
    const rs = this.replay.getState();
    blocks.set('replay/obs', rs.obs);
    blocks.set('replay/act', rs.act);
    blocks.set('replay/reward', rs.reward);
    blocks.set('replay/nextObs', rs.nextObs);
    blocks.set('replay/notDone', rs.notDone);
    const ns = this.normalizer?.getState();
    if (ns) {
      blocks.set('normalizer/mean', ns.mean);
      blocks.set('normalizer/m2', ns.m2);
    }
    blocks.set('noise/x', this.noise.getState().x);
    const rng = (r: Rng): Json => r.getState() as unknown as Json;
    const meta: Json = {
      format: STATE_FORMAT,
      obsDim: this.obsDim,
      actDim: this.actDim,
      actionBound: this.actionBound,
      config: this.config as unknown as Json,
      backend: this.backend.name,
      transitions: this.transitions,
      updates: this.td3.updates,
      adamSteps: adam.map((s) => s.step),
      replay: { pos: rs.pos, full: rs.full },
      normalizer: ns ? { count: ns.count, frozen: ns.frozen } : null,
      rng: {
        replay: rng(this.replayRng),
        explore: rng(this.exploreRng),
        warmup: rng(this.warmupRng),
        smoothing: rng(this.td3.smoothingRng),
      },
    };
    return { meta, blocks };
  }

  /**
   * Restore a state saved by an agent with the same dimensions and config (the backend may
   * differ). A mismatch names the first differing field.
   */
  setState(state: AgentState, what = 'agent state'): void {
    this.alive('setState');
    const m = state.meta as Record<string, unknown> | null;
    if (!m || typeof m !== 'object' || m.format !== STATE_FORMAT) {
      throw new Error(`${what}: unsupported or missing format (expected format ${STATE_FORMAT}, got ${JSON.stringify(m?.format)})`);
    }
    for (const k of ['obsDim', 'actDim', 'actionBound'] as const) {
      if (m[k] !== this[k]) throw new Error(`${what}: saved ${k} ${JSON.stringify(m[k])} differs from this agent's ${this[k]}`);
    }
    const mine = { ...this.config, backend: undefined };
    const saved = { ...(m.config as object), backend: undefined };
    const diff = firstDifference(saved, mine, 'config');
    if (diff) {
      throw new Error(
        `${what}: saved ${diff} ${JSON.stringify(valueAt(saved, diff))} differs from this agent's ${JSON.stringify(valueAt(mine, diff))}`,
      );
    }
    const { nets } = this.td3;
    const g = <D extends 'f32' | 'f64'>(name: string, dtype: D, length?: number) => getBlock(state, name, dtype, length, what);
    const P = (net: { paramCount: number }) => net.paramCount;
    nets.actor.setParams(g('actor', 'f32', P(nets.actor)));
    nets.actorTarget.setParams(g('actorTarget', 'f32', P(nets.actor)));
    nets.critics.forEach((c, j) => c.setParams(g(`critic${j}`, 'f32', P(c))));
    nets.criticTargets.forEach((c, j) => c.setParams(g(`criticTarget${j}`, 'f32', P(c))));
    const opts = [nets.actorOpt, ...nets.criticOpts];
    const names = ['actor', ...nets.critics.map((_, j) => `critic${j}`)];
    const steps = m.adamSteps as number[];
    const sizes = [P(nets.actor), ...nets.critics.map(P)];
    opts.forEach((o, k) =>
      o.setState({ step: steps[k]!, m: g(`adam/${names[k]}/m`, 'f32', sizes[k]), v: g(`adam/${names[k]}/v`, 'f32', sizes[k]) }),
    );
    const rp = m.replay as { pos: number; full: boolean };
    this.replay.setState({
      capacity: this.replay.capacity,
      obsDim: this.obsDim,
      actDim: this.actDim,
      pos: rp.pos,
      full: rp.full,
      obs: g('replay/obs', 'f32'),
      act: g('replay/act', 'f32'),
      reward: g('replay/reward', 'f32'),
      nextObs: g('replay/nextObs', 'f32'),
      notDone: g('replay/notDone', 'f32'),
    });
    const nm = m.normalizer as { count: number; frozen: boolean } | null;
    if (this.normalizer && nm) {
      this.normalizer.setState({
        dim: this.obsDim,
        count: nm.count,
        frozen: nm.frozen,
        mean: g('normalizer/mean', 'f64', this.obsDim),
        m2: g('normalizer/m2', 'f64', this.obsDim),
      });
    }
    this.noise.setState({ kind: this.config.exploration.kind, x: g('noise/x', 'f64') });
    const rng = m.rng as Record<string, RngState>;
    this.replayRng = Rng.fromState(rng.replay!);
    this.exploreRng = Rng.fromState(rng.explore!);
    this.warmupRng = Rng.fromState(rng.warmup!);
    this.td3.smoothingRng = Rng.fromState(rng.smoothing!);
    this.td3.updates = m.updates as number;
    this.transitions = m.transitions as number;
  }

  /** The state as one container file (see `container.ts`). */
  save(): Uint8Array {
    const s = this.getState();
    return encodeContainer(AGENT_STATE_KIND, s.meta, s.blocks);
  }

  /** Restore from bytes written by `save`; truncated, corrupted or mismatched files throw. */
  load(bytes: Uint8Array, what = 'agent state file'): void {
    const c = decodeContainer(bytes, AGENT_STATE_KIND, what);
    this.setState({ meta: c.meta, blocks: c.blocks }, what);
  }

  dispose(): void {
    if (this.disposed) return;
    this.td3.dispose();
    this.disposed = true;
  }
}

/** Build an agent from a saved file alone (its config and dimensions come from the file). */
export async function restoreAgent(bytes: Uint8Array, options: { backend?: NetBackend; log?: (m: string) => void } = {}): Promise<Agent> {
  const c = decodeContainer(bytes, AGENT_STATE_KIND, 'agent state file');
  const m = c.meta as { obsDim: number; actDim: number; actionBound: number; config: unknown };
  const agent = await createAgent({ obsDim: m.obsDim, actDim: m.actDim, actionBound: m.actionBound, seed: 0, config: m.config, ...options });
  agent.setState({ meta: c.meta, blocks: c.blocks }, 'agent state file');
  return agent;
}
