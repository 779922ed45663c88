/**
 * Sweeps across machines, on BullMQ (a Redis-backed job queue): the controller enqueues one job
 * per run; `tilewise sweep-worker` on each machine takes jobs, `concurrency` at a time, and
 * trains each in a sandboxed process (processor.ts, forked by BullMQ), so the worker's own
 * event loop stays free to renew the job locks however long a run computes.
 *
 * - Job id: "<sweep>.<setting key>-seed<seed>". Adding a job whose id exists adds nothing, so
 *   enqueueing a sweep again (or with more seeds) queues only the runs that are not there yet;
 *   runs that failed for good are put back.
 * - Retries: a failed run is retried `retry.attempts` times in all, with exponential backoff
 *   (BullMQ: backoffSeconds * 2^(try - 1)). A run whose worker vanished (killed, machine lost)
 *   stops renewing its lock; after `lockSeconds` another worker's stalled-job check puts it back
 *   in the queue. Either way the next try resumes from the run's last checkpoint when the run
 *   directories are on storage the workers share (--runs-dir), and starts over otherwise.
 * - Results: the job's return value is the run's record (run.ts: its summary JSON with the
 *   evaluation), kept in Redis, so the controller aggregates without a shared filesystem.
 * - An unreachable Redis is reported within `PROBE_SECONDS`, before any queue object starts
 *   its reconnect loop.
 */
import { hostname } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Queue, Worker, type ConnectionOptions, type Job } from 'bullmq';
import { Redis, type RedisOptions } from 'ioredis';
import { ConfigError } from '@tilewise/envs';
import { RUN_RECORD_FORMAT, type RunProgress, type RunRecord } from './run';
import type { RunTask, Sweep } from './spec';
import { readRecords, writeRecord } from './store';
import { runningText, statusText, type RunningRun, type SweepCounts, type SweepView } from './view';

/** The queue all sweeps share unless --queue names another. */
export const DEFAULT_QUEUE = 'tilewise-runs';
/** How long the connection check waits before calling Redis unreachable. */
export const PROBE_SECONDS = 3;
const PROCESSOR = join(dirname(fileURLToPath(import.meta.url)), 'processor.mjs');
/** Environment variables through which the worker tells its sandboxed processes where to work. */
export const PROCESSOR_ENV = { runsDir: 'TILEWISE_SWEEP_RUNS_DIR', cacheDir: 'TILEWISE_SWEEP_CACHE_DIR' } as const;

/** A failure the user can act on, reported without a stack trace (exit code 1). */
export class SweepFailure extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'SweepFailure';
  }
}

export interface RedisTarget {
  /** The URL with any password masked, for messages. */
  readonly display: string;
  readonly options: RedisOptions;
}

/** Parse redis://[user[:password]@]host[:port][/db] (rediss:// for TLS). */
export function parseRedisUrl(url: string, option = '--redis'): RedisTarget {
  let u: URL;
  const bad = (why: string): ConfigError =>
    new ConfigError([`${option}: expected redis://[user[:password]@]host[:port][/db] or rediss://... (${why}) (got ${JSON.stringify(url)})`]);
  try {
    u = new URL(url);
  } catch {
    throw bad('not a URL');
  }
  if (u.protocol !== 'redis:' && u.protocol !== 'rediss:') throw bad(`scheme ${u.protocol.replace(':', '')} is not redis or rediss`);
  if (!u.hostname) throw bad('no host');
  const port = u.port ? Number(u.port) : 6379;
  const path = u.pathname.replace(/^\//, '');
  if (path && !/^\d+$/.test(path)) throw bad(`database ${JSON.stringify(path)} is not a number`);
  if (u.search || u.hash) throw bad('query and fragment are not supported');
  const options: RedisOptions = {
    host: u.hostname.replace(/^\[|\]$/g, ''),
    port,
    ...(u.username ? { username: decodeURIComponent(u.username) } : {}),
    ...(u.password ? { password: decodeURIComponent(u.password) } : {}),
    ...(path ? { db: Number(path) } : {}),
    ...(u.protocol === 'rediss:' ? { tls: {} } : {}),
  };
  const shown = new URL(url);
  if (shown.password) shown.password = '***';
  return { display: shown.toString(), options };
}

/** Connect once, with no retries, and PING; throws SweepFailure naming the URL and the cause. */
export async function probeRedis(target: RedisTarget, seconds = PROBE_SECONDS): Promise<void> {
  const client = new Redis({
    ...target.options,
    lazyConnect: true,
    connectTimeout: seconds * 1000,
    retryStrategy: () => null,
    maxRetriesPerRequest: 0,
    enableOfflineQueue: false,
  });
  let lastError: Error | null = null;
  client.on('error', (e: Error) => (lastError = e));
  let timer: NodeJS.Timeout | undefined;
  const deadline = new Promise<never>((_, reject) => {
    timer = setTimeout(() => reject(new Error(`no answer within ${seconds} s`)), seconds * 1000 + 500);
  });
  try {
    await Promise.race([client.connect().then(() => client.ping()), deadline]);
  } catch (e) {
    const err = (lastError ?? e) as NodeJS.ErrnoException;
    const cause = err.code ? `${err.code}${err.message && !err.message.includes(err.code) ? `: ${err.message}` : ''}` : err.message;
    throw new SweepFailure(
      `cannot reach Redis at ${target.display} (${cause}); start redis-server there or pass --redis with the address of one that runs (e.g. redis://127.0.0.1:6379)`,
    );
  } finally {
    clearTimeout(timer);
    client.disconnect();
  }
}

/** Connection options for BullMQ classes (workers need maxRetriesPerRequest null). */
function connection(target: RedisTarget): ConnectionOptions {
  return { ...target.options, maxRetriesPerRequest: null } as ConnectionOptions;
}

export function jobId(task: Pick<RunTask, 'sweep' | 'id'>): string {
  return `${task.sweep}.${task.id}`;
}

/** Open a queue after checking that Redis answers. */
export async function openQueue(target: RedisTarget, name: string): Promise<Queue> {
  await probeRedis(target);
  const q = new Queue(name, { connection: connection(target) });
  q.on('error', () => {}); // reconnects are ioredis's job; the commands that fail report it
  return q;
}

export interface EnqueueResult {
  readonly added: number;
  readonly requeued: number;
  /** Already waiting, running or delayed on the queue. */
  readonly queued: number;
  /** Completed on the queue (their records are collected) or recorded in the output directory. */
  readonly finished: number;
}

/** Put the sweep's unfinished runs on the queue (records already in `outDir` are skipped). */
export async function enqueueSweep(queue: Queue, sweep: Sweep, outDir: string): Promise<EnqueueResult> {
  const local = readRecords(outDir, sweep);
  let added = 0;
  let requeued = 0;
  let queued = 0;
  let finished = local.size;
  const opts = {
    attempts: sweep.retry.attempts,
    backoff: { type: 'exponential', delay: sweep.retry.backoffSeconds * 1000 },
    removeOnComplete: false,
    removeOnFail: false,
  } as const;
  for (const task of sweep.tasks) {
    if (local.has(task.id)) continue;
    const id = jobId(task);
    const job = await queue.getJob(id);
    const state = job ? await job.getState() : 'unknown';
    if (state === 'unknown') {
      await queue.add('run', task, { ...opts, jobId: id });
      added++;
    } else if (state === 'failed') {
      await job!.retry('failed', { resetAttemptsMade: true, resetAttemptsStarted: true });
      requeued++;
    } else if (state === 'completed') finished++;
    else queued++;
  }
  return { added, requeued, queued, finished };
}

export interface QueueSnapshot {
  /** Counts over the runs not recorded in outDir when the watch began (`before`). */
  readonly counts: SweepCounts;
  readonly running: RunningRun[];
  /** Task id -> failure reason, for runs that failed for good. */
  readonly failures: Map<string, string>;
  /** Records of the sweep's finished runs: read from outDir, or collected from completed jobs. */
  readonly records: Map<string, RunRecord>;
  /** When the earliest of the sweep's jobs on the queue was added (ms since the epoch), if any is there. */
  readonly enqueuedAt: number | null;
}

/**
 * The state of a sweep's runs on the queue. Records of completed jobs are read from Redis (and
 * written to outDir when `store`); a run's record is taken by its task id, so each counts once.
 * `before`: ids recorded in outDir before the current command began (not counted as work).
 */
export async function snapshot(queue: Queue, sweep: Sweep, outDir: string, o: { store: boolean; before: ReadonlySet<string> }): Promise<QueueSnapshot> {
  const records = readRecords(outDir, sweep);
  const failures = new Map<string, string>();
  const running: RunningRun[] = [];
  let waiting = 0;
  let enqueuedAt: number | null = null;
  for (const task of sweep.tasks) {
    if (records.has(task.id)) continue;
    const job = (await queue.getJob(jobId(task))) as Job<RunTask, RunRecord> | undefined;
    const state = job ? await job.getState() : 'unknown';
    if (job && (enqueuedAt === null || job.timestamp < enqueuedAt)) enqueuedAt = job.timestamp;
    if (state === 'completed') {
      const rec = job!.returnvalue;
      if (!rec || rec.format !== RUN_RECORD_FORMAT || rec.key !== task.key || rec.seed !== task.seed) {
        failures.set(task.id, `job ${job!.id} completed without a run record`);
        continue;
      }
      if (o.store) writeRecord(outDir, rec);
      records.set(task.id, rec);
    } else if (state === 'failed') failures.set(task.id, job!.failedReason || 'failed');
    else if (state === 'active') {
      const p = job!.progress;
      running.push({ label: task.label, seed: task.seed, progress: p && typeof p === 'object' ? (p as unknown as RunProgress) : null, where: job!.processedBy ?? null });
    } else waiting++; // waiting, delayed (backoff), prioritized, or not enqueued
  }
  const before = [...o.before].filter((id) => records.has(id)).length;
  const counts = { total: sweep.tasks.length - before, done: records.size - before, running: running.length, failed: failures.size, waiting };
  return { counts, running, failures, records, enqueuedAt };
}

/** Poll until every run of the sweep has completed or failed for good; returns the last snapshot. */
export async function watchSweep(
  queue: Queue,
  sweep: Sweep,
  outDir: string,
  o: { view: SweepView; pollSeconds?: number; signal?: AbortSignal },
): Promise<QueueSnapshot> {
  const before = new Set(readRecords(outDir, sweep).keys());
  const told = new Set<string>(before);
  for (;;) {
    const s = await snapshot(queue, sweep, outDir, { store: true, before });
    for (const [id, rec] of s.records) {
      if (told.has(id)) continue;
      told.add(id);
      o.view.line(`run ${rec.label} seed ${rec.seed}: finished on ${rec.host} (${rec.summary.steps} steps in ${Math.round(rec.summary.trainSeconds)} s)`);
    }
    for (const [id, why] of s.failures) {
      if (told.has(`failed:${id}`)) continue;
      told.add(`failed:${id}`);
      o.view.line(`run ${id}: FAILED for good: ${why}`);
    }
    o.view.update(s.counts, s.running);
    if ((s.counts.running === 0 && s.counts.waiting === 0) || o.signal?.aborted) {
      o.view.done();
      return s;
    }
    await new Promise((r) => setTimeout(r, 1000 * (o.pollSeconds ?? 2)));
  }
}

/** Lines describing the queue (and the sweep's runs on it, when given). */
export async function statusLines(queue: Queue, sweep: Sweep | null, outDir: string | null): Promise<string[]> {
  const c = await queue.getJobCounts('waiting', 'active', 'delayed', 'prioritized', 'completed', 'failed');
  // One entry per Redis connection; a named worker's connections are called "<queue key>:w:<name>".
  const names = [...new Set((await queue.getWorkers()).map((w) => (w.rawname ?? '').split(':w:')[1] || w.addr || '?'))];
  const lines = [
    `queue ${queue.name}: ${(c.waiting ?? 0) + (c.prioritized ?? 0)} waiting, ${c.active ?? 0} running, ${c.delayed ?? 0} delayed (retry backoff), ${c.completed ?? 0} completed, ${c.failed ?? 0} failed`,
    `workers connected: ${names.length}${names.length ? ` (${names.join(', ')})` : ''}`,
  ];
  if (sweep && outDir) {
    const s = await snapshot(queue, sweep, outDir, { store: false, before: new Set() });
    const k = s.counts;
    const elapsed = s.enqueuedAt === null ? 0 : (Date.now() - s.enqueuedAt) / 1000;
    lines.push(`sweep ${sweep.name}: ${statusText(k, s.running, elapsed)}${s.enqueuedAt === null ? '' : ' (since the first of its runs still on the queue was added)'}`);
    for (const r of s.running) lines.push(`  ${runningText(r)}`);
    for (const [id, why] of s.failures) lines.push(`  failed: ${id}: ${why}`);
  } else {
    for (const j of await queue.getActive(0, 49)) {
      const t = j.data as RunTask;
      const p = j.progress && typeof j.progress === 'object' ? (j.progress as unknown as RunProgress) : null;
      lines.push(`  ${t.sweep}: ${runningText({ label: t.label, seed: t.seed, progress: p, where: j.processedBy ?? null })}`);
    }
    for (const j of await queue.getFailed(0, 19)) lines.push(`  failed: ${j.id}: ${j.failedReason}`);
  }
  return lines;
}

export interface WorkerOptions {
  readonly target: RedisTarget;
  readonly queue: string;
  readonly concurrency: number;
  /** Root of the run directories (<runsDir>/<sweep>/<setting>/seed<n>); shared storage lets another machine resume a run. */
  readonly runsDir: string;
  readonly cacheDir?: string;
  readonly name?: string;
  /** Job lock duration; a run whose worker vanished is taken over after about this long (plus a stalled check). */
  readonly lockSeconds: number;
  /** How often one run may be taken over from a vanished worker before it counts as failed. */
  readonly maxStalls: number;
  readonly say: (line: string) => void;
}

export interface SweepWorker {
  readonly worker: Worker;
  /** Stop: running runs write a checkpoint and go back to the queue; resolves when closed. */
  stop(reason: string): Promise<void>;
}

/** Start a worker (after checking that Redis answers). */
export async function startWorker(o: WorkerOptions): Promise<SweepWorker> {
  await probeRedis(o.target);
  const runsDir = resolve(o.runsDir);
  const name = o.name ?? `${hostname()}-${process.pid}`;
  const worker = new Worker(o.queue, PROCESSOR, {
    connection: connection(o.target),
    concurrency: o.concurrency,
    name,
    lockDuration: o.lockSeconds * 1000,
    stalledInterval: o.lockSeconds * 1000,
    maxStalledCount: o.maxStalls,
    useWorkerThreads: false,
    workerForkOptions: {
      env: {
        ...process.env,
        [PROCESSOR_ENV.runsDir]: runsDir,
        ...(o.cacheDir ? { [PROCESSOR_ENV.cacheDir]: resolve(o.cacheDir) } : {}),
      },
    },
  });
  const what = (job: Job | undefined): string => {
    const t = job?.data as RunTask | undefined;
    return t ? `run ${t.label} seed ${t.seed} (${t.sweep}, job ${job!.id})` : `job ${job?.id ?? '?'}`;
  };
  const errors = new Set<string>();
  worker.on('active', (job) => o.say(`${what(job)}: started, try ${job.attemptsMade + 1} of ${job.opts.attempts ?? 1}`));
  worker.on('completed', (job) => o.say(`${what(job)}: finished`));
  worker.on('failed', (job, err) => {
    if (!job) return;
    if (err.name === 'WaitingError') return o.say(`${what(job)}: stopped with a checkpoint and put back in the queue`);
    const attempts = job.opts.attempts ?? 1;
    const final = job.attemptsMade >= attempts || err.name === 'UnrecoverableError';
    o.say(`${what(job)}: try ${job.attemptsMade} of ${attempts} failed: ${err.message}${final ? ' (no tries left)' : '; it will be retried after a backoff'}`);
  });
  worker.on('stalled', (id) => o.say(`job ${id}: its worker stopped renewing the lock; it is back in the queue and resumes from its last checkpoint`));
  worker.on('lockRenewalFailed', (ids) => {
    for (const id of ids) worker.cancelJob(id, 'lock lost');
  });
  worker.on('error', (e) => {
    if (errors.has(e.message)) return;
    errors.add(e.message);
    o.say(`worker: ${e.message}`);
  });
  o.say(`worker ${name}: taking runs from queue ${o.queue} at ${o.target.display}, ${o.concurrency} at a time; run directories under ${runsDir}`);
  return {
    worker,
    async stop(reason) {
      worker.cancelAllJobs(reason);
      await worker.close();
    },
  };
}

