/**
 * The `tilewise` command line. Each command is one entry of COMMANDS (name, arguments,
 * options, action); add a command by adding an entry. Exit codes: 0 success, 1 runtime
 * error, 2 usage or configuration error (the message names the field path and value).
 */
import { Command, CommanderError, Option } from 'commander';
import { BACKEND_CHOICES, type BackendChoice } from '@tilewise/agent';
import { ConfigError, envKinds, type EnvEvent } from '@tilewise/envs';
import { stringify as toYaml } from 'yaml';
import { loadRunConfig, resolvedConfig, type RunConfig } from './config';
import { runBaselines } from './commands/baselines';
import { fieldReference } from './fields';
import { evaluateSource, openPolicySource, transferSource } from './commands/evaluate';
import { actCommand, type ObservationFormat } from './commands/act';
import { exportCommand, parseFormats } from './commands/export-policy';
import { DEFAULT_SERVE_ADDRESS, serveCommand } from './commands/serve';
import { createProgress, noProgress, type Progress } from './progress';
import { resumeRun, train, type TrainSummary } from './trainer';
import { REPORT_COMMAND } from './report/command';
import { SWEEP_COMMANDS } from './sweep/commands';

export const EXIT_OK = 0;
export const EXIT_RUNTIME = 1;
export const EXIT_CONFIG = 2;
/** Training stopped by SIGINT or SIGTERM after writing its final checkpoint (128 + signal number). */
export const EXIT_SIGINT = 130;
export const EXIT_SIGTERM = 143;

/** Where commands write: stdout for results, stderr for progress and errors. */
export interface Io {
  out(line: string): void;
  err(line: string): void;
  /** A progress display on stderr (absent: none). */
  progress?(): Progress;
  /** Install SIGINT/SIGTERM handlers that abort `controller`; returns the uninstaller. */
  onSignals?(controller: AbortController, say: (line: string) => void): () => void;
}

const processIo: Io = {
  out: (l) => process.stdout.write(`${l}\n`),
  err: (l) => process.stderr.write(`${l}\n`),
  progress: () => createProgress({ write: (s) => process.stderr.write(s), tty: Boolean(process.stderr.isTTY), columns: process.stderr.columns }),
  onSignals(controller, say) {
    const handler = (sig: NodeJS.Signals): void => {
      if (controller.signal.aborted) {
        say(`tilewise: ${sig} again: quitting without waiting (the last checkpoint on disk is intact)`);
        process.exit(sig === 'SIGTERM' ? EXIT_SIGTERM : EXIT_SIGINT);
      }
      say(`tilewise: ${sig}: stopping after this step and writing a checkpoint (send it again to quit at once)`);
      controller.abort(sig);
    };
    process.on('SIGINT', handler);
    process.on('SIGTERM', handler);
    return () => {
      process.off('SIGINT', handler);
      process.off('SIGTERM', handler);
    };
  },
};

export interface CommandEntry {
  readonly name: string;
  readonly summary: string;
  /** Declare arguments and options on `cmd`. */
  configure(cmd: Command): void;
  /** Run; return the exit code. Throw ConfigError for bad configuration. */
  run(args: string[], opts: Record<string, unknown>, io: Io): Promise<number> | number;
}

function positiveInt(name: string) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isInteger(n) || n < 1) throw new ConfigError([`--${name}: expected a positive integer (got ${JSON.stringify(v)})`]);
    return n;
  };
}

function nonNegativeInt(name: string) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isInteger(n) || n < 0) throw new ConfigError([`--${name}: expected a non-negative integer (got ${JSON.stringify(v)})`]);
    return n;
  };
}

function positiveNumber(name: string) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isFinite(n) || n <= 0) throw new ConfigError([`--${name}: expected a positive number (got ${JSON.stringify(v)})`]);
    return n;
  };
}

/** --policy best|latest (for a run directory). */
function policyChoice(opts: Record<string, unknown>): 'best' | 'latest' {
  const which = opts.policy as string;
  if (which !== 'best' && which !== 'latest') throw new ConfigError([`--policy: expected best or latest (got ${JSON.stringify(which)})`]);
  return which;
}

/** --backend (a network backend name of the agent config). */
function backendChoice(opts: Record<string, unknown>): BackendChoice {
  const b = opts.backend as string;
  if (!BACKEND_CHOICES.includes(b as BackendChoice)) throw new ConfigError([`--backend: expected one of ${BACKEND_CHOICES.join(', ')} (got ${JSON.stringify(b)})`]);
  return b as BackendChoice;
}

/** Progress notes of long evaluations on stderr (none with --quiet). */
function notes(io: Io, quiet: boolean): (line: string) => void {
  return quiet ? () => {} : (l) => io.err(l);
}

function eventLogger(io: Io, quiet: boolean): (e: EnvEvent) => void {
  return (e) => {
    if (!quiet || e.kind === 'diverged') io.err(`[${e.kind}] ${e.message}`);
  };
}

/** Run training (fresh or resumed) with signal handling and progress; then the final evaluation. */
async function trainingSession(
  io: Io,
  opts: Record<string, unknown>,
  start: (common: { progress: Progress; say: (l: string) => void; signal: AbortSignal; cacheDir?: string }) => Promise<TrainSummary>,
  finalEvaluation: boolean,
): Promise<number> {
  const quiet = Boolean(opts.quiet);
  const progress = quiet || opts.progress === false ? noProgress : (io.progress?.() ?? noProgress);
  const say = (l: string): void => progress.line(l);
  const controller = new AbortController();
  const off = io.onSignals?.(controller, (l) => io.err(l)) ?? (() => {});
  let summary: TrainSummary;
  try {
    summary = await start({ progress, say: quiet ? () => {} : (l) => io.err(l), signal: controller.signal, cacheDir: opts.cacheDir as string | undefined });
  } finally {
    off();
  }
  const best = summary.best;
  io.err(
    `training ${summary.status} (${summary.stopReason}): ${summary.steps} steps, ${summary.updates} updates in ${summary.trainSeconds.toFixed(0)} s` +
      (best ? `; best validation ${summary.dragName} ${best.drag} ± ${best.halfWidth} at step ${best.step}` : ''),
  );
  io.err(`run directory: ${summary.runDir}`);
  if (summary.status === 'interrupted') return controller.signal.reason === 'SIGTERM' ? EXIT_SIGTERM : EXIT_SIGINT;
  if (finalEvaluation && opts.evaluate !== false) {
    const src = openPolicySource(summary.runDir, 'best');
    evaluateSource(src, null, { cacheDir: opts.cacheDir as string | undefined, log: (l) => io.out(l), note: notes(io, quiet), onEvent: eventLogger(io, quiet) });
  }
  if (opts.json) io.out(JSON.stringify(summary));
  return EXIT_OK;
}

/** Apply --seed/--steps/--seconds to a parsed config. */
function withOverrides(cfg: RunConfig, opts: Record<string, unknown>): RunConfig {
  const t = cfg.train;
  const stop = {
    ...t.stop,
    ...(opts.steps !== undefined ? { steps: opts.steps as number } : {}),
    ...(opts.seconds !== undefined ? { seconds: opts.seconds as number } : {}),
  };
  return { ...cfg, train: { ...t, seed: (opts.seed as number | undefined) ?? t.seed, stop } };
}

/** Options of train and resume after their own. */
function sessionOptions(cmd: Command): void {
  cmd
    .option('--no-evaluate', 'skip the final evaluation (overrides train.finalEvaluation)')
    .option('--no-progress', 'no progress bar or progress lines')
    .option('--cache-dir <dir>', 'where reference values (P0) are cached (default: $TILEWISE_CACHE or ~/.cache/tilewise)')
    .addOption(new Option('--json', 'also print the run summary as one JSON object on the last line'))
    .option('-q, --quiet', 'only results and errors');
}

/** The options evaluate and transfer share, from their flags. */
function evaluationOptions(opts: Record<string, unknown>, io: Io) {
  const quiet = Boolean(opts.quiet);
  return {
    episodes: opts.episodes as number | undefined,
    cacheDir: opts.cacheDir as string | undefined,
    log: (l: string) => io.out(l),
    note: notes(io, quiet),
    onEvent: eventLogger(io, quiet),
  };
}

export const COMMANDS: CommandEntry[] = [
  {
    name: 'train',
    summary: 'Train a shared-weight policy from a config in a new run directory, then compare it with the baselines',
    configure(cmd) {
      cmd
        .argument('<config>', 'YAML config (env:, agent:, train:, evaluation:, baselines:)')
        .option('--runs-dir <dir>', 'where the run directory is created', 'runs')
        .option('--run-dir <dir>', 'use exactly this (new or empty) run directory')
        .option('--seed <n>', 'run seed (overrides train.seed)', nonNegativeInt('seed'))
        .option('--steps <n>', 'stop after this many environment steps (overrides train.stop.steps)', positiveInt('steps'))
        .option('--seconds <s>', 'training time budget in seconds (overrides train.stop.seconds)', positiveNumber('seconds'));
      sessionOptions(cmd);
    },
    async run(args, opts, io) {
      const cfg = withOverrides(loadRunConfig(args[0]!), opts);
      return trainingSession(
        io,
        opts,
        (c) => train(cfg, { ...c, configPath: args[0], runsDir: opts.runsDir as string, runDir: opts.runDir as string | undefined }),
        cfg.train.finalEvaluation,
      );
    },
  },
  {
    name: 'resume',
    summary: 'Continue a run from its newest good checkpoint (bit-identical continuation)',
    configure(cmd) {
      cmd
        .argument('<run-dir>', 'a run directory made by tilewise train')
        .option('--steps <n>', 'new total step limit (replaces train.stop.steps)', positiveInt('steps'))
        .option('--seconds <s>', 'new total time budget in seconds (replaces train.stop.seconds)', positiveNumber('seconds'));
      sessionOptions(cmd);
    },
    async run(args, opts, io) {
      const runDir = args[0]!;
      const cfg = loadRunConfig(`${runDir}/config.yaml`);
      return trainingSession(
        io,
        opts,
        (c) => resumeRun(runDir, { ...c, steps: opts.steps as number | undefined, seconds: opts.seconds as number | undefined }),
        cfg.train.finalEvaluation,
      );
    },
  },
  {
    name: 'evaluate',
    summary: "Compare a trained policy with no control and tuned opposition control on identical seeded initial states (training domain and the config's transfer domains)",
    configure(cmd) {
      cmd
        .argument('<source>', 'a run directory or a .policy file')
        .option('--policy <which>', 'for a run directory: best or latest', 'best')
        .option('--config <file>', 'take evaluation:, baselines: and evaluation.transfer from this config instead of the run')
        .option('--episodes <n>', 'evaluation episodes per controller (overrides evaluation.episodes)', positiveInt('episodes'))
        .option('--out <dir>', 'where to write the evaluation data (default: <run>/evaluation; none for a policy file)')
        .option('--no-transfer', 'only the training domain')
        .option('--cache-dir <dir>', 'where reference values (P0) are cached')
        .option('-q, --quiet', 'only results and errors');
    },
    run(args, opts, io) {
      const src = openPolicySource(args[0]!, policyChoice(opts));
      const cfg = opts.config ? loadRunConfig(opts.config as string) : null;
      evaluateSource(src, cfg, { ...evaluationOptions(opts, io), out: opts.out as string | undefined, noTransfer: opts.transfer === false });
      return EXIT_OK;
    },
  },
  {
    name: 'transfer',
    summary: "Evaluate a trained policy on another domain (same tile size, more tiles) against that domain's baselines",
    configure(cmd) {
      cmd
        .argument('<source>', 'a run directory (its best policy) or a .policy file')
        .argument('<config>', "YAML config of the other domain (its env:, evaluation:, baselines:)")
        .option('--policy <which>', 'for a run directory: best or latest', 'best')
        .option('--episodes <n>', 'evaluation episodes per controller (overrides evaluation.episodes)', positiveInt('episodes'))
        .option('--out <dir>', 'where to write the evaluation data (default: none)')
        .option('--cache-dir <dir>', 'where reference values (P0) are cached')
        .option('-q, --quiet', 'only results and errors');
    },
    run(args, opts, io) {
      const src = openPolicySource(args[0]!, policyChoice(opts));
      transferSource(src, args[1]!, { ...evaluationOptions(opts, io), out: (opts.out as string | undefined) ?? null });
      return EXIT_OK;
    },
  },
  {
    name: 'config',
    summary: 'Validate a config and print it with every default filled in (YAML); --fields lists every config field',
    configure(cmd) {
      cmd.argument('[config]', 'YAML config').option('--fields', 'print the reference of every config field with its default (Markdown)');
    },
    run(args, opts, io) {
      if (opts.fields) {
        io.out(fieldReference());
        return EXIT_OK;
      }
      if (!args[0]) throw new ConfigError(['config: expected a config file (or --fields)']);
      io.out(toYaml(resolvedConfig(loadRunConfig(args[0]))).trimEnd());
      return EXIT_OK;
    },
  },
  {
    name: 'baselines',
    summary: 'Evaluate the classical baselines (no control, opposition with a gain sweep, random) over seeded episodes',
    configure(cmd) {
      cmd
        .argument('<config>', 'YAML config with env:, evaluation: and baselines: sections')
        .option('--episodes <n>', 'evaluation episodes per policy (overrides evaluation.episodes)', positiveInt('episodes'))
        .option('--cache-dir <dir>', 'where reference values (P0) are cached (default: $TILEWISE_CACHE or ~/.cache/tilewise)')
        .addOption(new Option('--json', 'also print the results as one JSON object on the last line'))
        .option('-q, --quiet', 'only results and errors');
    },
    run(args, opts, io) {
      const cfg = loadRunConfig(args[0]!);
      const quiet = Boolean(opts.quiet);
      const result = runBaselines(cfg, {
        cacheDir: opts.cacheDir as string | undefined,
        episodes: opts.episodes as number | undefined,
        log: (l) => io.out(l),
        onEvent: eventLogger(io, quiet),
      });
      if (opts.json) io.out(JSON.stringify(result));
      return EXIT_OK;
    },
  },
  {
    name: 'export',
    summary: 'Write a trained policy (normalisation and action scaling baked in, with metadata) as ONNX, C, Fortran and/or JSON',
    configure(cmd) {
      cmd
        .argument('<source>', 'a run directory, a .policy file or a JSON export')
        .option('--format <list>', 'comma-separated: onnx, c, fortran, json; or all', 'all')
        .option('--out <dir>', 'output directory (default: <run-dir>/export, or ./export for a file)')
        .option('--name <name>', 'file base name and C/Fortran symbol prefix', 'tilewise_policy')
        .option('--policy <which>', 'for a run directory: best or latest', 'best');
    },
    run(args, opts, io) {
      const files = exportCommand(args[0]!, { formats: parseFormats(opts.format as string), out: opts.out as string | undefined, name: opts.name as string, which: policyChoice(opts) });
      for (const f of files) io.out(f);
      return EXIT_OK;
    },
  },
  {
    name: 'act',
    summary: 'Print the actions of a policy or export for observations read as JSON lines or CSV (to check an export by hand)',
    configure(cmd) {
      cmd
        .argument('<source>', 'a run directory, a .policy file, a JSON export or an ONNX export')
        .option('--input <file>', 'observations (default: standard input)')
        .option('--format <fmt>', 'jsonl (an array of obsDim numbers, or of such arrays, per line) or csv (one tile per row); default from the file name, else jsonl')
        .option('--policy <which>', 'for a run directory: best or latest', 'best')
        .option('--backend <name>', `network backend for a run, .policy or JSON source: ${BACKEND_CHOICES.join(', ')}`, 'auto');
    },
    async run(args, opts, io) {
      const lines = await actCommand(args[0]!, {
        input: opts.input as string | undefined,
        format: opts.format as ObservationFormat | undefined,
        which: policyChoice(opts),
        backend: backendChoice(opts),
      });
      for (const l of lines) io.out(l);
      return EXIT_OK;
    },
  },
  {
    name: 'serve',
    summary: 'Answer batches of tile observations with actions over the tilewise wire protocol (docs/wire-protocol.md) until interrupted',
    configure(cmd) {
      cmd
        .argument('<source>', 'a run directory, a .policy file or a JSON export')
        .option('--listen <address>', 'PORT, HOST:PORT or unix:PATH', DEFAULT_SERVE_ADDRESS)
        .option('--max-tiles <n>', 'most tiles in one request', positiveInt('max-tiles'), 4096)
        .option('--max-connections <n>', 'most connections open at once', positiveInt('max-connections'), 64)
        .option('--policy <which>', 'for a run directory: best or latest', 'best')
        .option('--backend <name>', `network backend: ${BACKEND_CHOICES.join(', ')}`, 'auto')
        .option('-q, --quiet', 'no connection lines');
    },
    async run(args, opts, io) {
      const controller = new AbortController();
      const stop = (): void => controller.abort();
      process.once('SIGINT', stop);
      process.once('SIGTERM', stop);
      try {
        await serveCommand(args[0]!, {
          listen: opts.listen as string,
          maxTiles: opts.maxTiles as number,
          maxConnections: opts.maxConnections as number,
          which: policyChoice(opts),
          backend: backendChoice(opts),
          log: (l) => (opts.quiet && !l.startsWith('serving') ? undefined : io.err(l)),
          signal: controller.signal,
        });
      } finally {
        process.off('SIGINT', stop);
        process.off('SIGTERM', stop);
      }
      return EXIT_OK;
    },
  },
  REPORT_COMMAND,
  ...SWEEP_COMMANDS,
];

/** Build the program; `io` receives all output (tests capture it). */
export function buildProgram(io: Io, setCode: (code: number) => void): Command {
  const program = new Command('tilewise')
    .description(
      'Multi-agent reinforcement learning for flow control on cheap periodic surrogates.\n' +
        `Surrogates: ${envKinds().join(', ')}. Caution: surrogate results do not predict channel-flow drag.`,
    )
    .exitOverride()
    .configureOutput({ writeOut: (s) => io.out(s.trimEnd()), writeErr: (s) => io.err(s.trimEnd()) })
    .showHelpAfterError();
  for (const c of COMMANDS) {
    const cmd = program.command(c.name).description(c.summary).exitOverride();
    c.configure(cmd);
    cmd.action(async (...a: unknown[]) => {
      const command = a[a.length - 1] as Command;
      setCode(await c.run(command.args, command.opts(), io));
    });
  }
  return program;
}

/** Run the command line; returns the exit code instead of exiting. */
export async function main(argv: string[], io: Io = processIo): Promise<number> {
  let code = EXIT_OK;
  const program = buildProgram(io, (c) => (code = c));
  try {
    await program.parseAsync(argv, { from: 'user' });
    return code;
  } catch (e) {
    if (e instanceof CommanderError) {
      // --help and --version exit 0; usage errors (unknown option, missing argument) exit 2.
      return e.exitCode === 0 ? EXIT_OK : EXIT_CONFIG;
    }
    if (e instanceof ConfigError) {
      io.err(`tilewise: ${e.message}`);
      return EXIT_CONFIG;
    }
    io.err(`tilewise: error: ${(e as Error).stack ?? String(e)}`);
    return EXIT_RUNTIME;
  }
}
