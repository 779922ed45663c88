/**
 * What a `tilewise sweep-worker` sandboxed process does with one job (BullMQ forks this process
 * and keeps it for later jobs; processor.mjs is its entry). The job's data is a RunTask; the run
 * directory is <runs dir>/<sweep>/<setting>/seed<n>, the runs directory coming from the worker
 * (PROCESSOR_ENV). The return value, the run's record, is stored with the job in Redis.
 *
 * - A configuration error cannot be cured by a retry: it fails the job for good (UnrecoverableError).
 * - A cancelled job (the worker stops, or lost the job's lock) stops training with a checkpoint
 *   and goes back to the queue (WaitingError), so it resumes on the next worker that takes it.
 * - If the worker process dies, this process exits at once (parent.ts): the last checkpoint is
 *   the resume point, and a second process must not write the run directory while another
 *   worker resumes it.
 */
import { join } from 'node:path';
import { UnrecoverableError, WaitingError, type SandboxedJob } from 'bullmq';
import { ConfigError } from '@tilewise/envs';
import { executeRun, type RunRecord } from './run';
import type { RunTask } from './spec';
import { onParentGone } from './parent';
import { PROCESSOR_ENV } from './queue';

onParentGone(() => process.exit(1));

const SAFE_NAME = /^[A-Za-z0-9][A-Za-z0-9._-]*$/;
const SAFE_RUN_PATH = /^[A-Za-z0-9][A-Za-z0-9._=-]*\/seed\d+$/;

export async function processRunJob(job: SandboxedJob<RunTask, RunRecord>, token?: string, signal?: AbortSignal): Promise<RunRecord> {
  const task = job.data;
  const runsDir = process.env[PROCESSOR_ENV.runsDir];
  if (!runsDir) throw new UnrecoverableError(`${PROCESSOR_ENV.runsDir} is not set (the sweep worker sets it)`);
  if (task?.format !== 'tilewise-sweep-task/1') throw new UnrecoverableError(`job ${job.id}: not a tilewise sweep run (format ${JSON.stringify(task?.format)})`);
  // The run directory must stay under the runs directory whatever the job says.
  if (!SAFE_NAME.test(task.sweep) || !SAFE_RUN_PATH.test(task.runPath)) {
    throw new UnrecoverableError(`job ${job.id}: sweep ${JSON.stringify(task.sweep)} / run path ${JSON.stringify(task.runPath)} is not a sweep run directory`);
  }
  const say = (l: string): void => void process.stderr.write(`[${job.id}] ${l}\n`);
  let lastProgress = 0;
  try {
    const out = await executeRun(task, {
      runDir: join(runsDir, task.sweep, task.runPath),
      cacheDir: process.env[PROCESSOR_ENV.cacheDir],
      signal,
      say,
      onProgress: (p) => {
        const now = Date.now();
        if (now - lastProgress < 2000 && p.phase === 'training') return;
        lastProgress = now;
        void job.updateProgress(p as unknown as object);
      },
    });
    if (out.status === 'completed') return out.record;
    say(`stopped at step ${out.step} (${String(signal?.reason ?? 'cancelled')}); back to the queue`);
    await job.moveToWait(token);
    // The worker moves the job in Redis when it handles the message just sent; give it that time
    // before the error below lets the worker close its connection.
    await new Promise((r) => setTimeout(r, 300));
    throw new WaitingError();
  } catch (e) {
    if (e instanceof ConfigError) throw new UnrecoverableError(e.message);
    throw e;
  }
}
