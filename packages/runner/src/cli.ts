/**
 * The `tilewise` command line. Each command is one entry of COMMANDS (name, arguments,
 * options, action); add a command by adding an entry. Exit codes: 0 success, 1 runtime
 * error, 2 usage or configuration error (the message names the field path and value).
 */
import { Command, CommanderError, Option } from 'commander';
import { ConfigError, envKinds, type EnvEvent } from '@tilewise/envs';
import { loadRunConfig } from './config';
import { runBaselines } from './commands/baselines';

export const EXIT_OK = 0;
export const EXIT_RUNTIME = 1;
export const EXIT_CONFIG = 2;

/** Where commands write: stdout for results, stderr for progress and errors. */
export interface Io {
  out(line: string): void;
  err(line: string): void;
}

const processIo: Io = {
  out: (l) => process.stdout.write(`${l}\n`),
  err: (l) => process.stderr.write(`${l}\n`),
};

interface CommandEntry {
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

function eventLogger(io: Io, quiet: boolean): (e: EnvEvent) => void {
  return (e) => {
    if (!quiet || e.kind === 'diverged') io.err(`[${e.kind}] ${e.message}`);
  };
}

export const COMMANDS: CommandEntry[] = [
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
