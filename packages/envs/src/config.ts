/**
 * Validation of configuration objects at the boundary, shared by every surrogate and
 * by the runner. Schemas are zod strict objects (unknown keys rejected) whose fields
 * carry a one-line `.describe()` doc and their default. A failed parse throws a
 * `ConfigError` whose message lists every problem as `path: what was expected (got value)`.
 */
import type { z } from 'zod';

/** A configuration problem: the message names the field path, the value and what was expected. */
export class ConfigError extends Error {
  readonly issues: readonly string[];
  constructor(issues: readonly string[]) {
    super(issues.length === 1 ? `invalid config: ${issues[0]}` : `invalid config:\n  ${issues.join('\n  ')}`);
    this.name = 'ConfigError';
    this.issues = issues;
  }
}

function showValue(v: unknown): string {
  if (v === undefined) return 'nothing';
  try {
    const s = JSON.stringify(v);
    if (s === undefined) return String(v);
    return s.length > 80 ? `${s.slice(0, 77)}...` : s;
  } catch {
    return String(v);
  }
}

/** Join a root path ("env") and an issue path (["tiles"]) into "env.tiles" / "env.list[2]". */
export function joinPath(root: string, path: ReadonlyArray<PropertyKey>): string {
  let s = root;
  for (const p of path) {
    if (typeof p === 'number') s += `[${p}]`;
    else s += s ? `.${String(p)}` : String(p);
  }
  return s || '(top level)';
}

/** Format one zod issue as "path: message (got value)". */
function formatIssue(root: string, issue: z.core.$ZodIssue): string {
  const path = joinPath(root, issue.path);
  if (issue.code === 'unrecognized_keys') {
    const keys = issue.keys.map((k) => joinPath(root, [...issue.path, k]));
    return `${path}: unknown key${keys.length > 1 ? 's' : ''} ${keys.join(', ')}`;
  }
  const input = (issue as { input?: unknown }).input;
  return `${path}: ${issue.message} (got ${showValue(input)})`;
}

/**
 * Parse `raw` with `schema`, returning the typed value with defaults filled in, or
 * throwing a ConfigError whose messages are prefixed with `root` (e.g. "env").
 */
export function parseConfig<S extends z.ZodType>(schema: S, raw: unknown, root: string): z.output<S> {
  const r = schema.safeParse(raw, { reportInput: true });
  if (r.success) return r.data;
  throw new ConfigError(r.error.issues.map((i) => formatIssue(root, i)));
}
