/**
 * The `tilewise report` entry of the command table (cli.ts COMMANDS). Exit codes: 0 written,
 * 2 bad input (a missing or malformed run directory, evaluation file or sweep aggregate; the
 * message names the file and what is wrong) or a bad option, 1 anything else.
 */
import { existsSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { type Command, Option } from 'commander';
import type { Io } from '../cli';
import { ReportInputError, writeReport } from './index';
import type { BandKind } from './stats';

const EXIT_OK = 0;
const EXIT_INPUT = 2;

function isDirectory(p: string): boolean {
  try {
    return statSync(p).isDirectory();
  } catch {
    return false;
  }
}

export const REPORT_COMMAND = {
  name: 'report',
  summary: 'Write a report of one run or several side by side (seeds as bands): an offline HTML page, SVG figures and the numbers behind them',
  configure(cmd: Command): void {
    cmd
      .argument('<inputs...>', 'run directories, evaluation directories (tilewise evaluate/transfer --out), or one sweep aggregate (.json or .csv)')
      .option('-o, --out <dir>', 'output directory (default: <input>/report for a single directory; required for several inputs)')
      .option('--title <text>', 'page title (default: the run or setting names)')
      .addOption(new Option('--band <kind>', 'band around means over seeds and episodes: ci95 (Student-t 95%), sd (± one standard deviation) or range (min..max)').default('ci95'))
      .option('--no-svg', 'write only the page and report.json, no SVG figure files')
      .option('-q, --quiet', 'only the path of the page and errors');
  },
  async run(args: string[], opts: Record<string, unknown>, io: Io): Promise<number> {
    let out = opts.out as string | undefined;
    if (!out) {
      if (args.length === 1 && !existsSync(args[0]!)) {
        io.err(`tilewise report: ${args[0]}: no such run directory, evaluation directory or sweep aggregate`);
        return EXIT_INPUT;
      }
      if (args.length !== 1 || !isDirectory(args[0]!)) {
        io.err('tilewise report: --out: give an output directory when the report has several inputs or a sweep aggregate');
        return EXIT_INPUT;
      }
      out = join(args[0]!, 'report');
    }
    const quiet = Boolean(opts.quiet);
    try {
      const r = await writeReport(args, {
        out,
        title: opts.title as string | undefined,
        band: opts.band as BandKind, // checked by writeReport
        svg: opts.svg !== false,
        warn: (w) => io.err(`tilewise report: warning: ${w}`),
      });
      if (!quiet) {
        io.out(`report: ${r.html}`);
        io.out(`figures: ${r.figures.length}${opts.svg !== false ? ` SVG files in ${join(r.out, 'figures')}` : ''}; numbers: ${r.json}`);
        io.out('Caution: a surrogate is not a channel flow; its drag analogue does not predict channel-flow drag.');
      } else io.out(r.html);
      return EXIT_OK;
    } catch (e) {
      if (e instanceof ReportInputError) {
        io.err(`tilewise report: ${e.message}`);
        return EXIT_INPUT;
      }
      throw e;
    }
  },
};
