/** The value after `--name` on the command line, or the fallback: the benchmark scripts' option reader. */
export function option(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && process.argv[i + 1] ? process.argv[i + 1]! : fallback;
}
