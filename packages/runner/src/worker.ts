/**
 * The two helpers of the trainer, each either in a worker thread (train.parallel: true) or
 * in the trainer's own thread:
 *
 *   TrainSide  steps the training copies (EnvRunner). `step(actions)` starts the step and
 *              returns a promise: with a worker, the environment advances on the other core
 *              while the trainer runs the agent's updates, then the trainer awaits the result.
 *   Validator  runs validation episodes of a policy snapshot.
 *
 * Both variants run the same code on the same data in the same order, so a run gives
 * identical results with and without workers (tested).
 */
import { Worker } from 'node:worker_threads';
import type { EnvEvent, PolicySummary } from '@tilewise/envs';
import { buildEnv, type EnvBuildSpec } from './env-build';
import { EnvRunner, type EnvRunnerState, type EnvStepResult } from './env-runner';
import { validatePolicy, type ValidationRequest } from './validation';
import type { WorkerInit } from './worker-host';

export interface TrainSide {
  start(): Promise<Float32Array>;
  step(actions: Float32Array): Promise<EnvStepResult>;
  observe(): Promise<Float32Array>;
  getState(): Promise<EnvRunnerState>;
  setState(s: EnvRunnerState): Promise<void>;
  close(): Promise<void>;
}

export interface Validator {
  validate(req: ValidationRequest): Promise<PolicySummary>;
  close(): Promise<void>;
}

/** Promise-based calls into a worker thread running worker-host.ts. */
class WorkerClient {
  private readonly worker: Worker;
  private next = 1;
  private readonly pending = new Map<number, { resolve: (v: unknown) => void; reject: (e: Error) => void }>();
  private failure: Error | null = null;
  readonly ready: Promise<void>;

  constructor(init: WorkerInit, onEvent?: (e: EnvEvent) => void) {
    this.worker = new Worker(new URL('./worker-entry.mjs', import.meta.url), { workerData: init });
    this.ready = new Promise((resolve, reject) => {
      const fail = (e: Error): void => {
        this.failure = e;
        reject(e);
        for (const p of this.pending.values()) p.reject(e);
        this.pending.clear();
      };
      this.worker.on('error', (e) => fail(new Error(`${init.role} worker failed: ${e.message}`)));
      this.worker.on('exit', (code) => {
        if (code !== 0 || this.pending.size) fail(new Error(`${init.role} worker exited (code ${code})`));
      });
      this.worker.on('message', (m: { ready?: boolean; event?: EnvEvent; id?: number; result?: unknown; error?: { message: string; stack?: string } }) => {
        if (m.ready) return resolve();
        if (m.event) return onEvent?.(m.event);
        const p = this.pending.get(m.id!);
        if (!p) return;
        this.pending.delete(m.id!);
        if (m.error) {
          const e = new Error(m.error.message);
          e.stack = m.error.stack;
          p.reject(e);
        } else p.resolve(m.result);
      });
    });
  }

  call<T>(method: string, ...args: unknown[]): Promise<T> {
    if (this.failure) return Promise.reject(this.failure);
    const id = this.next++;
    return new Promise<T>((resolve, reject) => {
      this.pending.set(id, { resolve: resolve as (v: unknown) => void, reject });
      this.worker.postMessage({ id, method, args });
    });
  }

  async close(): Promise<void> {
    await this.worker.terminate();
  }
}

export interface SideOptions {
  readonly parallel: boolean;
  readonly env: EnvBuildSpec;
  readonly onEvent?: (e: EnvEvent) => void;
}

export async function createTrainSide(o: SideOptions & { runSeed: number; heldOut: number[] }): Promise<TrainSide> {
  if (o.parallel) {
    const w = new WorkerClient({ role: 'train', env: o.env, runSeed: o.runSeed, heldOut: o.heldOut }, o.onEvent);
    await w.ready;
    return {
      start: () => w.call('start'),
      step: (a) => w.call('step', a),
      observe: () => w.call('observe'),
      getState: () => w.call('getState'),
      setState: (s) => w.call('setState', s),
      close: () => w.close(),
    };
  }
  const r = new EnvRunner(buildEnv(o.env, o.onEvent), o.runSeed, o.heldOut);
  return {
    start: async () => r.start(),
    // Not async: the step runs now, before the caller's updates (same order of arithmetic).
    step: (a) => Promise.resolve(r.step(a)),
    observe: async () => r.observe(),
    getState: async () => r.getState(),
    setState: async (s) => r.setState(s),
    close: async () => {},
  };
}

export async function createValidator(o: SideOptions): Promise<Validator> {
  if (o.parallel) {
    const w = new WorkerClient({ role: 'validate', env: o.env }, o.onEvent);
    await w.ready;
    return { validate: (req) => w.call('validate', req), close: () => w.close() };
  }
  const env = buildEnv(o.env, o.onEvent);
  return { validate: async (req) => validatePolicy(env, req), close: async () => {} };
}
