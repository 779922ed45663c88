/**
 * A process of a local sweep's pool (started by pool.ts through pool-entry.mjs). It runs one
 * run at a time: the parent sends { type: "run", task, runDir, cacheDir }; this process answers
 * with { type: "progress" } messages and one final { type: "done", record },
 * { type: "interrupted" } or { type: "error", message, config }, then waits for the next run.
 * The process is kept between runs because loading the modules costs seconds; a crash ends it
 * and the parent starts a new one.
 *
 * SIGINT/SIGTERM (or the parent going away) stop the current run after its current step with a
 * final checkpoint, so a later run of the sweep resumes where it stopped; then the process exits.
 */
import { ConfigError } from '@tilewise/envs';
import { onParentGone } from './parent';
import { executeRun, type RunProgress, type RunRecord } from './run';
import type { RunTask } from './spec';

export type PoolRequest =
  | { readonly type: 'run'; readonly task: RunTask; readonly runDir: string; readonly cacheDir?: string }
  | { readonly type: 'exit' };

export type PoolReply =
  | { readonly type: 'progress'; readonly progress: RunProgress }
  | { readonly type: 'done'; readonly record: RunRecord }
  | { readonly type: 'interrupted'; readonly step: number }
  | { readonly type: 'error'; readonly message: string; readonly config: boolean };

let current: AbortController | null = null;
let stopping = false;
const stop = (why: string) => (): void => {
  stopping = true;
  if (!current) process.exit(0);
  if (!current.signal.aborted) current.abort(why);
};
process.on('SIGINT', stop('SIGINT'));
process.on('SIGTERM', stop('SIGTERM'));
onParentGone((why) => stop(why)());

const send = (m: PoolReply): Promise<void> =>
  new Promise((resolve) => {
    if (!process.connected) return resolve();
    process.send!(m, undefined, {}, () => resolve());
  });

async function run(msg: Extract<PoolRequest, { type: 'run' }>): Promise<void> {
  current = new AbortController();
  try {
    const out = await executeRun(msg.task, {
      runDir: msg.runDir,
      cacheDir: msg.cacheDir,
      signal: current.signal,
      say: (l) => process.stderr.write(`${l}\n`),
      onProgress: (progress) => void send({ type: 'progress', progress }),
    });
    await send(out.status === 'completed' ? { type: 'done', record: out.record } : { type: 'interrupted', step: out.step });
  } catch (e) {
    process.stderr.write(`${e instanceof Error ? (e.stack ?? e.message) : String(e)}\n`);
    await send({ type: 'error', message: e instanceof Error ? e.message : String(e), config: e instanceof ConfigError });
  } finally {
    current = null;
  }
  if (stopping) process.exit(0);
}

process.on('message', (msg: PoolRequest) => {
  if (msg.type === 'exit') process.exit(0);
  else void run(msg);
});
