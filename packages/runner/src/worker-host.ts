/**
 * What runs inside a runner worker thread (started by worker.ts through worker-entry.mjs):
 * one environment-side object, built from plain data sent by the parent, answering method
 * calls { id, method, args } with { id, result } or { id, error }.
 *
 * Roles:
 *   "train"     an EnvRunner over B training copies (start, step, observe, getState, setState)
 *   "validate"  seeded evaluation episodes of a policy snapshot (validate)
 * Environment events (e.g. a copy that diverged) are forwarded as { event }.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { EnvRunner } from './env-runner';
import { buildEnv, type EnvBuildSpec } from './env-build';
import { validatePolicy, type ValidationRequest } from './validation';

export interface WorkerInit {
  readonly role: 'train' | 'validate';
  readonly env: EnvBuildSpec;
  /** train: run seed and held-out seeds. */
  readonly runSeed?: number;
  readonly heldOut?: number[];
}

const port = parentPort!;
const init = workerData as WorkerInit;
const onEvent = (e: unknown): void => port.postMessage({ event: e });
const env = buildEnv(init.env, onEvent);
const runner = init.role === 'train' ? new EnvRunner(env, init.runSeed!, init.heldOut ?? []) : null;

const methods: Record<string, (...args: any[]) => unknown> = {
  start: () => runner!.start(),
  step: (actions: Float32Array) => runner!.step(actions),
  observe: () => runner!.observe(),
  getState: () => runner!.getState(),
  setState: (s) => runner!.setState(s),
  validate: (req: ValidationRequest) => validatePolicy(env, req),
};

port.on('message', (msg: { id: number; method: string; args: unknown[] }) => {
  try {
    const f = methods[msg.method];
    if (!f) throw new Error(`worker: unknown method ${msg.method}`);
    port.postMessage({ id: msg.id, result: f(...msg.args) });
  } catch (e) {
    port.postMessage({ id: msg.id, error: e instanceof Error ? { message: e.message, stack: e.stack } : { message: String(e) } });
  }
});
port.postMessage({ ready: true });
