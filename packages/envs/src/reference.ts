/**
 * Reference values (e.g. P0, the long-time uncontrolled mean of a surrogate's drag
 * analogue) measured once and cached on disk with their uncertainty.
 *
 * Uncertainty: batch means. Each of `copies` independent uncontrolled runs is cut into
 * blocks of length `blockTime` (long compared with the decorrelation time of the
 * quantity), the block means are treated as independent samples, and the reported
 * standard error is their sample standard deviation over sqrt(number of blocks)
 * (e.g. Flyvbjerg & Petersen 1989, J. Chem. Phys. 91, 461; Law & Kelton, Simulation
 * Modeling and Analysis). `ci95` is the Student-t 95% half-width.
 *
 * Cache: one JSON file per (surrogate, physics, measurement protocol) key in the cache
 * directory: option `cacheDir`, else $TILEWISE_CACHE, else $XDG_CACHE_HOME/tilewise,
 * else ~/.cache/tilewise. The file records the key; a file whose key differs is ignored.
 */
import { createHash } from 'node:crypto';
import { mkdirSync, readFileSync, renameSync, writeFileSync } from 'node:fs';
import { homedir } from 'node:os';
import { join } from 'node:path';
import type { EnvEvent } from './contract';
import { meanWithCi } from './stats';

/** Format version of cached reference files. */
const REFERENCE_FORMAT = 'tilewise-reference/1';

export interface ReferenceValue {
  readonly format: string;
  /** What was measured, e.g. "ks P0 = <u_x^2>". */
  readonly quantity: string;
  /** The key the value belongs to (surrogate kind, physics and protocol). */
  readonly key: Readonly<Record<string, unknown>>;
  readonly mean: number;
  /** Standard error from batch means. */
  readonly stdErr: number;
  /** Student-t 95% half-width from batch means. */
  readonly ci95: number;
  readonly blocks: number;
  readonly blockTime: number;
  /** Total measured time summed over copies. */
  readonly totalTime: number;
  readonly method: string;
  /** ISO time of the measurement. */
  readonly measuredAt: string;
}

/** The cache directory: explicit, else $TILEWISE_CACHE, else $XDG_CACHE_HOME/tilewise, else ~/.cache/tilewise. */
export function defaultCacheDir(explicit?: string): string {
  if (explicit) return explicit;
  const env = process.env.TILEWISE_CACHE;
  if (env) return env;
  const xdg = process.env.XDG_CACHE_HOME;
  return join(xdg || join(homedir(), '.cache'), 'tilewise');
}

function canonical(v: unknown): string {
  if (Array.isArray(v)) return `[${v.map(canonical).join(',')}]`;
  if (v && typeof v === 'object') {
    const o = v as Record<string, unknown>;
    return `{${Object.keys(o)
      .sort()
      .map((k) => `${JSON.stringify(k)}:${canonical(o[k])}`)
      .join(',')}}`;
  }
  return JSON.stringify(v);
}

/** Summarise block means into a ReferenceValue (batch-means uncertainty). */
export function referenceFromBlocks(
  quantity: string,
  key: Readonly<Record<string, unknown>>,
  blockMeans: readonly number[],
  blockTime: number,
): ReferenceValue {
  const s = meanWithCi(blockMeans, 0.95);
  return {
    format: REFERENCE_FORMAT,
    quantity,
    key,
    mean: s.mean,
    stdErr: s.stdErr,
    ci95: s.halfWidth,
    blocks: blockMeans.length,
    blockTime,
    totalTime: blockMeans.length * blockTime,
    method: 'batch means over independent uncontrolled runs; stdErr = sd(blocks)/sqrt(blocks); ci95 = Student-t 95%',
    measuredAt: new Date().toISOString(),
  };
}

export interface CacheOptions {
  readonly cacheDir?: string;
  readonly onEvent?: (e: EnvEvent) => void;
}

/**
 * The cached reference for `key`, measuring (and caching) it first if absent. The file name
 * is `<name>-<hash of key>.json`. A cache directory that cannot be written is reported
 * through onEvent and the measured value is still returned.
 */
export function cachedReference(
  name: string,
  key: Readonly<Record<string, unknown>>,
  measure: () => ReferenceValue,
  options: CacheOptions = {},
): ReferenceValue {
  const dir = defaultCacheDir(options.cacheDir);
  const hash = createHash('sha256').update(canonical(key)).digest('hex').slice(0, 16);
  const file = join(dir, `${name}-${hash}.json`);
  try {
    const v = JSON.parse(readFileSync(file, 'utf8')) as ReferenceValue;
    if (v.format === REFERENCE_FORMAT && canonical(v.key) === canonical(key) && Number.isFinite(v.mean) && v.mean > 0) return v;
  } catch {
    // absent or unreadable: measure below
  }
  options.onEvent?.({ kind: 'reference-measuring', message: `measuring ${name} (not cached in ${dir}); this runs once` });
  const v = measure();
  try {
    mkdirSync(dir, { recursive: true });
    const tmp = `${file}.${process.pid}.tmp`;
    writeFileSync(tmp, `${JSON.stringify(v, null, 2)}\n`);
    renameSync(tmp, file);
    options.onEvent?.({ kind: 'reference-cached', message: `${name} = ${v.mean} +- ${v.ci95} (95%) cached in ${file}` });
  } catch (e) {
    options.onEvent?.({ kind: 'reference-not-cached', message: `could not write ${file}: ${(e as Error).message}` });
  }
  return v;
}
