/**
 * The surrogates the runner can build from the YAML `env:` section, by `kind`.
 *
 * A surrogate registers one `EnvKind`: its zod schema (strict, one-line doc and default
 * per field), how to obtain its reference value (e.g. P0, measured once and cached), and
 * how to create the environment for B copies. To add a surrogate, export its EnvKind
 * from its own file and list it in BUILT_IN below.
 */
import type { z } from 'zod';
import { ConfigError, parseConfig } from './config';
import type { EnvEvent, TiledEnv } from './contract';
import { kolmogorovEnvKind } from './kolmogorov';
import { ksEnvKind } from './ks';
import type { ReferenceValue } from './reference';

export interface EnvCreateOptions {
  /** Copies B stepped together. */
  readonly copies: number;
  /** Where reference values are cached (default: reference.ts defaultCacheDir). */
  readonly cacheDir?: string;
  /** Use this reference value (e.g. P0) instead of the cached/measured one. */
  readonly reference?: number;
  /** Receives events worth logging (measurements, divergences). */
  readonly onEvent?: (e: EnvEvent) => void;
}

export interface EnvKind<C> {
  /** The `kind:` value in the config. */
  readonly kind: string;
  /** One line for --help and reports. */
  readonly summary: string;
  /** Strict schema of the `env:` section (with defaults). */
  readonly schema: z.ZodType<C>;
  /** The normalising reference value (cached, measured on first use). */
  reference(config: C, options: { cacheDir?: string; onEvent?: (e: EnvEvent) => void }): ReferenceValue;
  /** Build the environment. */
  create(config: C, options: EnvCreateOptions): TiledEnv;
}

/** Built-in surrogates (each entry has its own config type, hence `any`). */
const BUILT_IN: ReadonlyArray<EnvKind<any>> = [ksEnvKind, kolmogorovEnvKind];

const kinds = new Map<string, EnvKind<any>>(BUILT_IN.map((k) => [k.kind, k]));

/** Add a surrogate (e.g. from a plugin or a test). Rejects a duplicate kind. */
export function registerEnvKind<C>(k: EnvKind<C>): void {
  if (kinds.has(k.kind)) throw new Error(`registerEnvKind: kind "${k.kind}" is already registered`);
  kinds.set(k.kind, k);
}

/** Registered kinds, sorted. */
export function envKinds(): string[] {
  return [...kinds.keys()].sort();
}

/** The registry entry for `kind`, or a ConfigError naming the path and the known kinds. */
export function envKind(kind: unknown, root = 'env'): EnvKind<any> {
  const k = typeof kind === 'string' ? kinds.get(kind) : undefined;
  if (!k) {
    throw new ConfigError([`${root}.kind: expected one of ${envKinds().map((s) => JSON.stringify(s)).join(', ')} (got ${JSON.stringify(kind) ?? 'nothing'})`]);
  }
  return k;
}

/** A validated env section: its kind entry and typed config. */
export interface ParsedEnvConfig {
  readonly kind: EnvKind<any>;
  readonly config: { readonly kind: string } & Record<string, unknown>;
}

/** Validate a raw `env:` section (from YAML); errors name paths under `root`. */
export function parseEnvConfig(raw: unknown, root = 'env'): ParsedEnvConfig {
  if (!raw || typeof raw !== 'object' || Array.isArray(raw)) {
    throw new ConfigError([`${root}: expected a mapping with a kind (got ${JSON.stringify(raw) ?? 'nothing'})`]);
  }
  const k = envKind((raw as { kind?: unknown }).kind, root);
  return { kind: k, config: parseConfig(k.schema, raw, root) };
}

/** Validate `raw` and build the environment. */
export function createEnv(raw: unknown, options: EnvCreateOptions, root = 'env'): TiledEnv {
  const p = parseEnvConfig(raw, root);
  return p.kind.create(p.config, options);
}
