/**
 * Build an environment from plain data (a resolved env section, copy count and reference
 * value), the same way in the trainer's thread and in worker threads.
 */
import { parseEnvConfig, type EnvEvent, type TiledEnv } from '@tilewise/envs';
import { registerExternalEnv } from './external/env';

// The runner's own env kind, "external" (a solver process over the wire protocol), registered
// in every thread that parses or builds environments.
registerExternalEnv();

export interface EnvBuildSpec {
  /** The resolved env section (as in a run's config.yaml). */
  readonly config: Record<string, unknown>;
  readonly copies: number;
  /** The normalising reference value (e.g. P0), measured or read from the cache beforehand. */
  readonly reference: number;
}

export function buildEnv(spec: EnvBuildSpec, onEvent?: (e: EnvEvent) => void): TiledEnv {
  const p = parseEnvConfig(spec.config, 'env');
  return p.kind.create(p.config, { copies: spec.copies, reference: spec.reference, onEvent });
}
