/** An Io (src/cli.ts) that keeps what a command writes, for assertions. */
import type { Io } from '../../src/cli';

export function capture(): Io & { outText: () => string; errText: () => string } {
  const out: string[] = [];
  const err: string[] = [];
  return { out: (l) => out.push(l), err: (l) => err.push(l), outText: () => out.join('\n'), errText: () => err.join('\n') };
}
