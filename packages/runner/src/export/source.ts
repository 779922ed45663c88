/**
 * Where an exported, served or hand-checked policy comes from:
 *   - a run directory (its best or latest policy; the run's resolved config is hashed),
 *   - a `.policy` file written by training (policy.ts; its env section is hashed, the run config
 *     not being at hand),
 *   - a JSON export (json.ts; it keeps the hash it was written with).
 */
import { closeSync, openSync, readSync, statSync } from 'node:fs';
import { resolvedConfig } from '../config';
import { openPolicySource } from '../commands/evaluate';
import { exportInputOf, loadPolicyJson } from './json';
import type { ExportInput } from './model';

/** True when `path` is a file whose first non-blank byte is '{' (a JSON export, not a binary container). */
function looksLikeJson(path: string): boolean {
  try {
    if (!statSync(path).isFile()) return false;
    const fd = openSync(path, 'r');
    try {
      const head = Buffer.alloc(64);
      const n = readSync(fd, head, 0, 64, 0);
      return head.subarray(0, n).toString('latin1').trimStart().startsWith('{');
    } finally {
      closeSync(fd);
    }
  } catch {
    return false;
  }
}

/** Open a run directory, a .policy file or a JSON export as export input. */
export function openExportSource(path: string, which: 'best' | 'latest' = 'best'): ExportInput {
  if (looksLikeJson(path)) return exportInputOf(loadPolicyJson(path));
  const src = openPolicySource(path, which);
  const p = src.policy;
  return {
    snapshot: p.snapshot,
    env: { kind: p.env.kind, spec: p.env.spec, config: p.env.config, reference: p.env.reference },
    trainingConfig: src.config ? resolvedConfig(src.config) : { env: p.env.config },
    source: { ...p.source, from: src.runDir ? `run directory (${which} policy)` : 'policy file' },
  };
}
