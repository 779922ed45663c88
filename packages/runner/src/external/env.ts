/**
 * An environment played by an outside solver (env kind "external"): the solver process connects
 * to tilewise over the wire protocol (docs/wire-protocol.md, environment link) and answers
 * RESET, RESET_COPY, STEP, OPPOSITION_REQUEST and SNAPSHOT_REQUEST, so the trainer uses it like
 * any surrogate (`TiledEnv`). examples/ks-solver.ts is a solver (the KS surrogate in a separate
 * process); external/solver.ts is the solver side for any TiledEnv in TypeScript.
 *
 * The config declares the spec (tile grid, sizes, bound, interval, episode length, layout), so
 * the env can be built and its spec read without a solver (the runner builds spec probes); the
 * solver's ENV_HELLO must agree, field by field. Nothing listens until the first reset(): then
 * the env listens on `listen`, accepts one solver (waiting up to `connectTimeout` seconds) and
 * stops listening, so the address is free again for the next environment the run creates.
 * Every environment (training, validation, evaluation) takes its own solver connection, one
 * after the other on the same address; two at once need two addresses.
 *
 * The calls block (the contract is synchronous) while an I/O thread (link-worker.ts) talks to
 * the solver; a solver that does not answer within `replyTimeout` seconds, closes the
 * connection, breaks the protocol or answers ERROR makes the call throw, naming what happened.
 * Buffers returned are owned by the env and overwritten by the next call, as the contract says.
 * No getState/setState: a run against a solver cannot be checkpointed (train.checkpoint.enabled
 * must be false; the trainer says so).
 */
import { MessageChannel, receiveMessageOnPort, Worker, type MessagePort } from 'node:worker_threads';
import { z } from 'zod';
import { envKinds, parseConfig, registerEnvKind, type EnvKind, type EnvSpec, type ReferenceValue, type StepOut, type TiledEnv } from '@tilewise/envs';
import { formatAddress, parseAddress, type Address } from '../wire/address';
import { MSG, readArray, readTransition, transitionLayout } from '../wire/protocol';
import type { LinkInit, LinkReply, LinkRequest } from './link-worker';

const layoutEntry = z.strictObject({
  quantity: z.string().min(1).describe('What is sensed, e.g. "u" or "wall shear".'),
  count: z.number().int().min(1).describe('Components in this group.'),
  positions: z.array(z.array(z.number())).describe('Sensor positions in tile lengths from the tile origin (one per component, or empty).'),
});

/** The `env:` section for `kind: external`. */
export const externalConfigSchema = z
  .strictObject({
    kind: z.literal('external').describe('Environment played by a solver process over the wire protocol.'),
    listen: z.string().default('127.0.0.1:5781').describe('Where tilewise waits for the solver: PORT, HOST:PORT or unix:PATH (default 127.0.0.1:5781).'),
    tileGrid: z.tuple([z.number().int().min(1), z.number().int().min(1)]).describe('Tiles per copy (Tx, Ty); 1-D solvers use [T, 1].'),
    obsDim: z.number().int().min(1).describe('Observation components per tile.'),
    actDim: z.number().int().min(1).describe('Action components per tile.'),
    actionBound: z.number().positive().describe('Every action component lies in [-actionBound, actionBound].'),
    controlInterval: z.number().positive().describe('Time units between two decisions (what the solver integrates per STEP).'),
    episodeLength: z.number().int().min(1).describe('Decisions per episode (the solver reports done/truncated).'),
    obsLayout: z.array(layoutEntry).optional().describe('What each observation component is (default: one group "obs" without positions).'),
    dragName: z.string().default('drag').describe('Name of the drag analogue the solver reports (default "drag").'),
    connectTimeout: z.number().positive().default(600).describe('Seconds to wait for the solver to connect at the first reset (default 600).'),
    replyTimeout: z.number().positive().default(600).describe('Seconds to wait for one answer of the solver (default 600).'),
    maxSnapshotValues: z.number().int().min(1).max(2 ** 27).default(2 ** 20).describe('Largest field SNAPSHOT accepted, in float64 values (default 1,048,576).'),
  })
  .superRefine((c, ctx) => {
    const n = (c.obsLayout ?? []).reduce((s, e) => s + e.count, 0);
    if (c.obsLayout && n !== c.obsDim) ctx.addIssue({ code: 'custom', path: ['obsLayout'], message: `counts sum to ${n}, obsDim is ${c.obsDim}`, input: c.obsLayout });
    (c.obsLayout ?? []).forEach((e, i) => {
      if (e.positions.length !== 0 && e.positions.length !== e.count) {
        ctx.addIssue({ code: 'custom', path: ['obsLayout', i, 'positions'], message: `expected ${e.count} positions or none, got ${e.positions.length}`, input: e.positions });
      }
    });
    try {
      parseAddress(c.listen, 'listen');
    } catch (e) {
      ctx.addIssue({ code: 'custom', path: ['listen'], message: (e as Error).message, input: c.listen });
    }
  });

export type ExternalConfig = z.output<typeof externalConfigSchema>;

export function parseExternalConfig(raw: unknown, root = 'env'): ExternalConfig {
  return parseConfig(externalConfigSchema, raw, root);
}

export interface ExternalEnvOptions {
  readonly copies: number;
}

export class ExternalEnv implements TiledEnv {
  readonly spec: EnvSpec;
  readonly config: ExternalConfig;
  readonly address: Address;
  /** The solver's name once connected (from its ENV_HELLO description). */
  solver: string | null = null;
  private readonly B: number;
  private readonly T: number;
  private worker: Worker | null = null;
  private port: MessagePort | null = null;
  private ctrl: Int32Array | null = null;
  private closed = false;
  private readonly obs: Float32Array;
  private readonly out: StepOut & { obs: Float32Array; reward: Float32Array; drag: Float64Array; actuationPower: Float64Array; done: Uint8Array; truncated: Uint8Array; diverged: Uint8Array };
  private readonly opp: Float64Array;

  constructor(config: ExternalConfig, options: ExternalEnvOptions) {
    this.config = parseExternalConfig(config);
    const c = this.config;
    if (!Number.isInteger(options.copies) || options.copies < 1) throw new Error(`ExternalEnv: copies must be an integer >= 1, got ${options.copies}`);
    this.address = parseAddress(c.listen, 'env.listen');
    this.B = options.copies;
    this.T = c.tileGrid[0] * c.tileGrid[1];
    this.spec = {
      kind: 'external',
      copies: this.B,
      tileGrid: [c.tileGrid[0], c.tileGrid[1]],
      tiles: this.T,
      obsDim: c.obsDim,
      actDim: c.actDim,
      actionBound: c.actionBound,
      controlInterval: c.controlInterval,
      episodeLength: c.episodeLength,
      obsLayout: c.obsLayout ?? [{ quantity: 'obs', count: c.obsDim, positions: [] }],
      dragName: c.dragName,
    };
    const bt = this.B * this.T;
    this.obs = new Float32Array(bt * c.obsDim);
    this.out = {
      obs: this.obs,
      reward: new Float32Array(bt),
      drag: new Float64Array(bt),
      actuationPower: new Float64Array(bt),
      done: new Uint8Array(this.B),
      truncated: new Uint8Array(this.B),
      diverged: new Uint8Array(this.B),
    };
    this.opp = new Float64Array(bt * c.actDim);
  }

  private where(): string {
    return `external env ${formatAddress(this.address)}`;
  }

  /** Start the I/O thread (first use). */
  private start(): void {
    const c = this.config;
    const ctrl = new SharedArrayBuffer(4);
    const { port1, port2 } = new MessageChannel();
    const init: LinkInit = {
      address: this.address,
      copies: this.B,
      expect: {
        tilesX: c.tileGrid[0],
        tilesY: c.tileGrid[1],
        obsDim: c.obsDim,
        actDim: c.actDim,
        actionBound: c.actionBound,
        controlInterval: c.controlInterval,
        episodeLength: c.episodeLength,
      },
      connectTimeoutMs: c.connectTimeout * 1000,
      replyTimeoutMs: c.replyTimeout * 1000,
      maxSnapshotValues: c.maxSnapshotValues,
      ctrl,
      port: port2,
    };
    this.worker = new Worker(new URL('./link-entry.mjs', import.meta.url), { workerData: init, transferList: [port2] });
    // The thread must not keep a finished program alive; the socket closes with the process.
    this.worker.unref();
    this.port = port1;
    this.ctrl = new Int32Array(ctrl);
  }

  /** Send one request and block until the reply (or a timeout / error, thrown). */
  private call(type: number, expect: number, payload: Uint8Array): Uint8Array {
    if (this.closed) throw new Error(`${this.where()}: the environment was closed`);
    if (!this.worker) this.start();
    const ctrl = this.ctrl!;
    const seq = Atomics.load(ctrl, 0);
    const req: LinkRequest = { op: 'request', type, expect, payload };
    this.port!.postMessage(req);
    // The link thread enforces the connect and reply timeouts and reports them; this wait only
    // guards against the thread itself dying.
    const limitMs = (this.solver ? 0 : this.config.connectTimeout * 2000) + this.config.replyTimeout * 1000 + 30_000;
    const deadline = Date.now() + limitMs;
    while (Atomics.load(ctrl, 0) === seq) {
      const left = deadline - Date.now();
      if (left <= 0) throw new Error(`${this.where()}: the link thread gave no answer within ${Math.round(limitMs / 1000)} s`);
      Atomics.wait(ctrl, 0, seq, Math.min(left, 1000));
    }
    const msg = receiveMessageOnPort(this.port!)?.message as LinkReply | undefined;
    if (!msg) throw new Error(`${this.where()}: the link thread signalled an answer but sent none`);
    if (!msg.ok) throw new Error(msg.error);
    this.solver = msg.solver;
    return msg.payload;
  }

  reset(seeds: ArrayLike<number>): Float32Array {
    if (seeds.length !== this.B) throw new Error(`ExternalEnv.reset: expected ${this.B} seeds (one per copy), got ${seeds.length}`);
    const p = Buffer.alloc(8 + 8 * this.B);
    p.writeUInt32LE(this.B, 0);
    for (let b = 0; b < this.B; b++) {
      const s = seeds[b]!;
      if (!Number.isFinite(s)) throw new Error(`ExternalEnv.reset: seeds[${b}] must be a finite number, got ${s}`);
      p.writeDoubleLE(s, 8 + 8 * b);
    }
    readArray(this.call(MSG.RESET, MSG.OBSERVATION, p), 0, this.obs);
    return this.obs;
  }

  resetCopy(copy: number, seed: number): void {
    if (!Number.isInteger(copy) || copy < 0 || copy >= this.B) throw new Error(`ExternalEnv.resetCopy: copy must be an integer in [0, ${this.B}), got ${copy}`);
    if (!Number.isFinite(seed)) throw new Error(`ExternalEnv.resetCopy: seed must be a finite number, got ${seed}`);
    const p = Buffer.alloc(16);
    p.writeUInt32LE(copy, 0);
    p.writeDoubleLE(seed, 8);
    readArray(this.call(MSG.RESET_COPY, MSG.OBSERVATION, p), 0, this.obs);
  }

  observe(): Float32Array {
    return this.obs;
  }

  step(actions: Float32Array): StepOut {
    const n = this.B * this.T * this.config.actDim;
    if (actions.length !== n) throw new Error(`ExternalEnv.step: expected ${n} actions (${this.B} copies x ${this.T} tiles x ${this.config.actDim}), got ${actions.length}`);
    // The contract: actions are clipped to the bound before they act.
    const bound = this.config.actionBound;
    const p = new Float32Array(n);
    for (let i = 0; i < n; i++) {
      const a = actions[i]!;
      p[i] = a > bound ? bound : a < -bound ? -bound : a;
    }
    const r = this.call(MSG.STEP, MSG.TRANSITION, new Uint8Array(p.buffer));
    const L = transitionLayout({ copies: this.B, tiles: this.T, obsDim: this.config.obsDim, actDim: this.config.actDim });
    readTransition(r, L, this.out);
    return this.out;
  }

  oppositionSignal(): Float64Array {
    readArray(this.call(MSG.OPPOSITION_REQUEST, MSG.OPPOSITION, new Uint8Array(0)), 0, this.opp);
    return this.opp;
  }

  snapshot(copy: number): Float64Array {
    if (!Number.isInteger(copy) || copy < 0 || copy >= this.B) throw new Error(`ExternalEnv.snapshot: copy must be an integer in [0, ${this.B}), got ${copy}`);
    const p = Buffer.alloc(4);
    p.writeUInt32LE(copy, 0);
    const r = this.call(MSG.SNAPSHOT_REQUEST, MSG.SNAPSHOT, p);
    const field = new Float64Array(r.length / 8);
    readArray(r, 0, field);
    return field;
  }

  /** Tell the solver the run is over (CLOSE) and stop the I/O thread. */
  close(): void {
    if (this.closed) return;
    this.closed = true;
    if (this.port) {
      const bye: LinkRequest = { op: 'close' };
      this.port.postMessage(bye);
      this.port.close();
    }
  }
}

/** The reference value of an external env: the solver reports drag already normalised (1 = uncontrolled). */
function unitReference(c: ExternalConfig): ReferenceValue {
  return {
    format: 'tilewise-reference/1',
    quantity: `${c.dragName} (normalised by the solver)`,
    key: { kind: 'external' },
    mean: 1,
    stdErr: 0,
    ci95: 0,
    blocks: 0,
    blockTime: 0,
    totalTime: 0,
    method: 'none: the external solver normalises its own drag and rewards',
    measuredAt: new Date(0).toISOString(),
  };
}

/** Registry entry: `kind: external`. */
export const externalEnvKind: EnvKind<ExternalConfig> = {
  kind: 'external',
  summary: 'an outside solver process acting as the environment over the tilewise wire protocol (docs/wire-protocol.md)',
  schema: externalConfigSchema as unknown as z.ZodType<ExternalConfig>,
  reference: (config) => unitReference(config),
  create: (config, options) => new ExternalEnv(config, { copies: options.copies }),
};

/** Register `kind: external` once per thread (the env registry is per thread). */
export function registerExternalEnv(): void {
  if (!envKinds().includes('external')) registerEnvKind(externalEnvKind);
}
