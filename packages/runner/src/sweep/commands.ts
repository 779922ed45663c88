/**
 * The sweep commands of the `tilewise` command line (entries of cli.ts COMMANDS):
 *   sweep          run a sweep file on this machine, a pool of processes; aggregate
 *   sweep-enqueue  put a sweep's runs on a Redis queue (--wait: follow them, then aggregate)
 *   sweep-worker   take runs from the queue and train them, N at a time
 *   sweep-status   what the queue (and a sweep's runs on it) is doing
 *   sweep-collect  fetch the finished runs' records from the queue and aggregate
 * docs/sweeps.md describes the sweep file, the output directory and the aggregate files.
 */
import { availableParallelism } from 'node:os';
import type { Command } from 'commander';
import { ConfigError } from '@tilewise/envs';
import type { Queue } from 'bullmq';
import type { CommandEntry, Io } from '../cli';
import { formatTable } from '../table';
import { aggregate, aggregateLines, writeAggregate } from './aggregate';
import { runLocalPool } from './pool';
import { DEFAULT_QUEUE, enqueueSweep, openQueue, parseRedisUrl, startWorker, statusLines, SweepFailure, snapshot, watchSweep } from './queue';
import { loadSweep, type Sweep } from './spec';
import { readRecords, sweepOutDir, writePlan } from './store';
import { createSweepView, noSweepView, type SweepView } from './view';

const DEFAULT_REDIS = 'redis://127.0.0.1:6379';

// The exit codes of cli.ts (0, 1, 130, 143; test/sweep-cli.test.ts checks they agree). Not
// imported: cli.ts imports this module, and a value import back would be circular.
const EXIT_OK = 0;
const EXIT_RUNTIME = 1;
const EXIT_SIGINT = 130;
const EXIT_SIGTERM = 143;

function intOption(name: string, min: number) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isInteger(n) || n < min) throw new ConfigError([`--${name}: expected an integer >= ${min} (got ${JSON.stringify(v)})`]);
    return n;
  };
}

function secondsOption(name: string) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isFinite(n) || n <= 0) throw new ConfigError([`--${name}: expected a positive number of seconds (got ${JSON.stringify(v)})`]);
    return n;
  };
}

/** The sweep view on stderr: redrawn on a terminal; through io.err (plain lines) otherwise. */
function viewFor(io: Io, opts: Record<string, unknown>): SweepView {
  if (opts.quiet || opts.progress === false) return noSweepView;
  if (io.progress) {
    return createSweepView({ write: (s) => process.stderr.write(s), tty: Boolean(process.stderr.isTTY), columns: process.stderr.columns });
  }
  return createSweepView({ write: (s) => io.err(s.replace(/\n$/, '')), tty: false });
}

/** Run `body`; a SweepFailure is printed without a stack and exits 1. */
async function guarded(io: Io, body: () => Promise<number>): Promise<number> {
  try {
    return await body();
  } catch (e) {
    if (e instanceof SweepFailure) {
      io.err(`tilewise: ${e.message}`);
      return EXIT_RUNTIME;
    }
    throw e;
  }
}

function redisOption(cmd: Command): Command {
  return cmd
    .option('--redis <url>', `Redis server: redis://[user[:password]@]host[:port][/db] (default: $TILEWISE_REDIS, else ${DEFAULT_REDIS})`)
    .option('--queue <name>', 'queue name (every controller and worker of a sweep must use the same)', DEFAULT_QUEUE);
}

function redisTarget(opts: Record<string, unknown>) {
  const queue = opts.queue as string;
  if (!/^[A-Za-z0-9][A-Za-z0-9._-]*$/.test(queue)) throw new ConfigError([`--queue: expected letters, digits, ".", "_" or "-" (got ${JSON.stringify(queue)})`]);
  return { target: parseRedisUrl((opts.redis as string | undefined) ?? process.env.TILEWISE_REDIS ?? DEFAULT_REDIS), queue };
}

/** Print the aggregate, write its files; returns the exit code for the runs' outcome. */
function finishSweep(io: Io, sweep: Sweep, outDir: string, records: Parameters<typeof aggregate>[1], failures: Map<string, string>): number {
  const a = aggregate(sweep, records, failures);
  const files = writeAggregate(outDir, a);
  for (const l of aggregateLines(a)) io.out(l);
  io.out('');
  io.out(`aggregate: ${files.join(', ')}`);
  return a.runs.failed > 0 ? EXIT_RUNTIME : EXIT_OK;
}

function planLines(sweep: Sweep, outDir: string): string[] {
  const done = readRecords(outDir, sweep);
  const rows = sweep.settings.map((s) => {
    const finished = sweep.seeds.filter((seed) => done.has(`${s.key}-seed${seed}`)).length;
    return [s.key, s.label, s.origin, `${finished}/${sweep.seeds.length}`];
  });
  return [
    `sweep ${sweep.name}: ${sweep.settings.length} setting${sweep.settings.length === 1 ? '' : 's'} x ${sweep.seeds.length} seed${sweep.seeds.length === 1 ? '' : 's'} (${sweep.seeds.join(', ')}) = ${sweep.tasks.length} runs; ${done.size} finished in ${outDir}`,
    `ranked by ${sweep.rank.metric} on ${sweep.rank.domain}; a failing run is tried up to ${sweep.retry.attempts} time${sweep.retry.attempts === 1 ? '' : 's'}`,
    '',
    formatTable(['key', 'setting', 'from', 'finished seeds'], rows),
  ];
}

export const SWEEP_COMMANDS: CommandEntry[] = [
  {
    name: 'sweep',
    summary: 'Run a sweep file (settings x seeds) on this machine, a pool of processes, then rank the settings (mean and 95% CI over seeds)',
    configure(cmd) {
      cmd
        .argument('<sweep-file>', 'YAML sweep file (base:, common:, vary:, seeds:, evaluate:, rank:, retry:; docs/sweeps.md)')
        .option('--out <dir>', 'output directory: results, run directories, aggregate (default: sweeps/<name>)')
        .option('--jobs <n>', `runs at once, one process each (default: one per core, ${availableParallelism()} here)`, intOption('jobs', 1))
        .option('--cache-dir <dir>', 'where reference values (P0) are cached (default: $TILEWISE_CACHE or ~/.cache/tilewise)')
        .option('--plan', 'print the settings and how many of their runs are finished, and run nothing')
        .option('--no-progress', 'no progress display')
        .option('-q, --quiet', 'only results and errors');
    },
    async run(args, opts, io) {
      const sweep = loadSweep(args[0]!);
      const outDir = sweepOutDir(sweep, opts.out as string | undefined);
      if (opts.plan) {
        for (const l of planLines(sweep, outDir)) io.out(l);
        return EXIT_OK;
      }
      writePlan(outDir, sweep);
      const finished = readRecords(outDir, sweep);
      const todo = sweep.tasks.filter((t) => !finished.has(t.id));
      const jobs = Math.min((opts.jobs as number | undefined) ?? availableParallelism(), Math.max(1, todo.length));
      const say = (l: string): void => (opts.quiet ? undefined : io.err(l));
      say(
        `sweep ${sweep.name}: ${sweep.settings.length} settings x ${sweep.seeds.length} seeds = ${sweep.tasks.length} runs; ` +
          (todo.length === 0 ? 'all finished already, nothing to run' : `${finished.size} finished already (skipped), ${todo.length} to run, ${jobs} at a time`),
      );
      let records = finished;
      let failures = new Map<string, string>();
      if (todo.length) {
        const controller = new AbortController();
        const off = io.onSignals?.(controller, (l) => io.err(l)) ?? (() => {});
        try {
          const r = await runLocalPool(todo, { jobs, outDir, cacheDir: opts.cacheDir as string | undefined, retry: sweep.retry, signal: controller.signal, view: viewFor(io, opts) });
          records = new Map([...finished, ...r.records]);
          failures = r.failures;
          if (r.interrupted) {
            io.err(`sweep ${sweep.name}: stopped; ${records.size}/${sweep.tasks.length} runs finished. Run the same command again to go on (unfinished runs resume from their checkpoints).`);
            finishSweep(io, sweep, outDir, records, failures);
            return controller.signal.reason === 'SIGTERM' ? EXIT_SIGTERM : EXIT_SIGINT;
          }
        } finally {
          off();
        }
      }
      return finishSweep(io, sweep, outDir, records, failures);
    },
  },
  {
    name: 'sweep-enqueue',
    summary: "Put a sweep's unfinished runs on a Redis job queue for sweep-worker processes (--wait: follow them and aggregate)",
    configure(cmd) {
      redisOption(cmd.argument('<sweep-file>', 'YAML sweep file (docs/sweeps.md)'))
        .option('--out <dir>', 'output directory: plan, collected results, aggregate (default: sweeps/<name>)')
        .option('--wait', 'follow the runs until all are finished or failed, then collect their results and aggregate')
        .option('--poll <s>', 'seconds between two looks at the queue while waiting', secondsOption('poll'), 2)
        .option('--no-progress', 'no progress display')
        .option('-q, --quiet', 'only results and errors');
    },
    async run(args, opts, io) {
      const sweep = loadSweep(args[0]!);
      const outDir = sweepOutDir(sweep, opts.out as string | undefined);
      const { target, queue: queueName } = redisTarget(opts);
      return guarded(io, async () => {
        const queue = await openQueue(target, queueName);
        try {
          writePlan(outDir, sweep);
          const r = await enqueueSweep(queue, sweep, outDir);
          io.err(
            `sweep ${sweep.name}: ${sweep.tasks.length} runs; ${r.added} added to queue ${queueName} at ${target.display}` +
              `${r.requeued ? `, ${r.requeued} failed before and put back` : ''}${r.queued ? `, ${r.queued} already queued or running` : ''}${r.finished ? `, ${r.finished} finished already` : ''}`,
          );
          if (!opts.wait) {
            io.err(`follow them with: tilewise sweep-status ${args[0]} --redis ${target.display}; aggregate with: tilewise sweep-collect ${args[0]} --redis ${target.display}`);
            return EXIT_OK;
          }
          const controller = new AbortController();
          const off = io.onSignals?.(controller, (l) => io.err(l)) ?? (() => {});
          try {
            const s = await watchSweep(queue, sweep, outDir, { view: viewFor(io, opts), pollSeconds: opts.poll as number, signal: controller.signal });
            if (controller.signal.aborted) {
              io.err('stopped waiting; the runs go on on the workers (tilewise sweep-collect gathers them later)');
              return controller.signal.reason === 'SIGTERM' ? EXIT_SIGTERM : EXIT_SIGINT;
            }
            return finishSweep(io, sweep, outDir, s.records, s.failures);
          } finally {
            off();
          }
        } finally {
          await queue.close();
        }
      });
    },
  },
  {
    name: 'sweep-worker',
    summary: 'Take sweep runs from a Redis job queue and train them, each in a sandboxed process, until interrupted',
    configure(cmd) {
      redisOption(cmd)
        .option('--concurrency <n>', `runs at once on this machine (default: one per core, ${availableParallelism()} here)`, intOption('concurrency', 1))
        .option('--runs-dir <dir>', 'where run directories are made (<dir>/<sweep>/<setting>/seed<n>); on storage all workers share, a retried run resumes from its checkpoint on any machine', 'sweep-runs')
        .option('--cache-dir <dir>', 'where reference values (P0) are cached (default: $TILEWISE_CACHE or ~/.cache/tilewise)')
        .option('--name <name>', 'worker name shown by sweep-status (default: <host>-<pid>)')
        .option('--lock-seconds <s>', 'job lock time: a run whose worker vanished is taken over after about this long', secondsOption('lock-seconds'), 30)
        .option('--max-stalls <n>', 'times a run may be taken over from a vanished worker before it counts as failed', intOption('max-stalls', 0), 3);
    },
    async run(_args, opts, io) {
      const { target, queue } = redisTarget(opts);
      return guarded(io, async () => {
        const w = await startWorker({
          target,
          queue,
          concurrency: (opts.concurrency as number | undefined) ?? availableParallelism(),
          runsDir: opts.runsDir as string,
          cacheDir: opts.cacheDir as string | undefined,
          name: opts.name as string | undefined,
          lockSeconds: opts.lockSeconds as number,
          maxStalls: opts.maxStalls as number,
          say: (l) => io.err(l),
        });
        const controller = new AbortController();
        const off = io.onSignals?.(controller, (l) => io.err(l)) ?? (() => {});
        try {
          await new Promise<void>((resolve) => {
            if (controller.signal.aborted) resolve();
            controller.signal.addEventListener('abort', () => resolve());
            w.worker.on('closed', () => resolve());
          });
          io.err('worker stopping: running runs write a checkpoint and go back to the queue');
          await w.stop('worker stopping');
        } finally {
          off();
        }
        return controller.signal.reason === 'SIGTERM' ? EXIT_SIGTERM : controller.signal.aborted ? EXIT_SIGINT : EXIT_OK;
      });
    },
  },
  {
    name: 'sweep-status',
    summary: 'Show the Redis job queue: runs waiting, running (where, how far), finished and failed; with a sweep file, that sweep\'s runs',
    configure(cmd) {
      redisOption(cmd.argument('[sweep-file]', 'restrict to this sweep (docs/sweeps.md)')).option('--out <dir>', "the sweep's output directory (default: sweeps/<name>)");
    },
    async run(args, opts, io) {
      const sweep = args[0] ? loadSweep(args[0]) : null;
      const { target, queue: queueName } = redisTarget(opts);
      return guarded(io, async () => {
        const queue = await openQueue(target, queueName);
        try {
          for (const l of await statusLines(queue, sweep, sweep ? sweepOutDir(sweep, opts.out as string | undefined) : null)) io.out(l);
        } finally {
          await queue.close();
        }
        return EXIT_OK;
      });
    },
  },
  {
    name: 'sweep-collect',
    summary: "Fetch the finished runs' results of a sweep from the Redis job queue and aggregate them (CSV and JSON)",
    configure(cmd) {
      redisOption(cmd.argument('<sweep-file>', 'YAML sweep file (docs/sweeps.md)')).option('--out <dir>', 'output directory (default: sweeps/<name>)');
    },
    async run(args, opts, io) {
      const sweep = loadSweep(args[0]!);
      const outDir = sweepOutDir(sweep, opts.out as string | undefined);
      const { target, queue: queueName } = redisTarget(opts);
      return guarded(io, async () => {
        const queue: Queue = await openQueue(target, queueName);
        try {
          writePlan(outDir, sweep);
          const s = await snapshot(queue, sweep, outDir, { store: true, before: new Set() });
          const open = s.counts.running + s.counts.waiting;
          if (open) io.err(`sweep ${sweep.name}: ${open} run${open === 1 ? '' : 's'} not finished yet (${s.counts.running} running); the aggregate covers the finished ones`);
          return finishSweep(io, sweep, outDir, s.records, s.failures);
        } finally {
          await queue.close();
        }
      });
    },
  },
];

