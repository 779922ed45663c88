/** Test helpers for commands: an Io that keeps what a command writes; a temporary directory for config files. */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { Io } from '../../src/cli';

/** A fresh temporary directory and a function that writes a file in it, returning its path. */
export function tempFiles(prefix: string): { dir: string; write: (name: string, text: string) => string } {
  const dir = mkdtempSync(join(tmpdir(), prefix));
  return {
    dir,
    write: (name, text) => {
      const p = join(dir, name);
      writeFileSync(p, text);
      return p;
    },
  };
}

export function capture(): Io & { outText: () => string; errText: () => string } {
  const out: string[] = [];
  const err: string[] = [];
  return { out: (l) => out.push(l), err: (l) => err.push(l), outText: () => out.join('\n'), errText: () => err.join('\n') };
}
