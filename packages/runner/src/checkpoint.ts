/**
 * Training checkpoints: everything a run needs to continue bit for bit, in one tilewise state
 * container (agent container.ts: JSON header, named typed arrays, CRC-32) of kind
 * "tilewise-checkpoint", written atomically (atomic.ts) into <run>/checkpoints/ as
 * step-<step, 10 digits>.ckpt. After a new checkpoint is written the oldest beyond `keep`
 * are deleted, so the previous good one always survives a failed or interrupted write.
 *
 * Blocks: agent/<name>  the agent state (agent.ts getState: weights, targets, Adam moments,
 *                       normaliser, replay ring)
 *         env/<name>    the environment state of every training copy (EnvState arrays)
 *         runner/...    per-copy episode accumulators
 *         best/...      the best validated policy (actor parameters and normaliser)
 * Meta:   { format, step, trainer, agent (agent meta: generator states, counters), env
 *           (EnvState meta), runner (training-seed generator, current seeds), best, reference }
 *
 * Reading: the newest checkpoint that decodes is used. A file that does not (truncated,
 * checksum mismatch, wrong kind) is reported, renamed to <name>.corrupt (so it is neither
 * used nor counted again) and the next older one is tried.
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, renameSync, unlinkSync } from 'node:fs';
import { join } from 'node:path';
import { decodeContainer, encodeContainer, type BlockArray, type Json } from '@tilewise/agent';
import { isTemporary, writeFileAtomic, type AtomicWriteHooks } from './atomic';

export const CHECKPOINT_KIND = 'tilewise-checkpoint';
export const CHECKPOINT_FORMAT = 1;
const NAME = /^step-(\d{10})\.ckpt$/;

export interface CheckpointData {
  readonly meta: { readonly format: number; readonly step: number } & { readonly [k: string]: Json };
  readonly blocks: ReadonlyMap<string, BlockArray>;
}

export function checkpointName(step: number): string {
  return `step-${String(step).padStart(10, '0')}.ckpt`;
}

/** Checkpoint files in `dir`, newest (highest step) first; temporaries and .corrupt files excluded. */
export function listCheckpoints(dir: string): string[] {
  if (!existsSync(dir)) return [];
  return readdirSync(dir)
    .filter((f) => !isTemporary(f) && NAME.test(f))
    .sort()
    .reverse();
}

/** Write a checkpoint atomically, then delete the oldest beyond `keep`. Returns its path. */
export function writeCheckpoint(dir: string, data: CheckpointData, keep: number, hooks: AtomicWriteHooks = {}): string {
  mkdirSync(dir, { recursive: true });
  const path = join(dir, checkpointName(data.meta.step));
  writeFileAtomic(path, encodeContainer(CHECKPOINT_KIND, data.meta, data.blocks), hooks);
  for (const old of listCheckpoints(dir).slice(keep)) unlinkSync(join(dir, old));
  return path;
}

/** Decode one checkpoint file; errors name the file and what is wrong. */
export function readCheckpoint(path: string): CheckpointData {
  const what = `checkpoint ${path}`;
  const c = decodeContainer(readFileSync(path), CHECKPOINT_KIND, what);
  const meta = c.meta as CheckpointData['meta'];
  if (meta?.format !== CHECKPOINT_FORMAT) {
    throw new Error(`${what}: format ${JSON.stringify(meta?.format)} is not supported (this build reads ${CHECKPOINT_FORMAT})`);
  }
  return { meta, blocks: c.blocks };
}

/**
 * The newest readable checkpoint in `dir`, or null when there is none. Unreadable ones are
 * reported through `report`, renamed to *.corrupt and skipped.
 */
export function loadLatestCheckpoint(dir: string, report: (message: string) => void): { path: string; data: CheckpointData } | null {
  for (const name of listCheckpoints(dir)) {
    const path = join(dir, name);
    try {
      return { path, data: readCheckpoint(path) };
    } catch (e) {
      const corrupt = `${path}.corrupt`;
      report(`${(e as Error).message}; it is kept as ${corrupt} and the previous checkpoint is used`);
      renameSync(path, corrupt);
    }
  }
  return null;
}

/** Blocks of `blocks` whose name starts with `prefix`, with the prefix removed. */
export function blocksUnder(blocks: ReadonlyMap<string, BlockArray>, prefix: string): Map<string, BlockArray> {
  const out = new Map<string, BlockArray>();
  for (const [k, v] of blocks) if (k.startsWith(prefix)) out.set(k.slice(prefix.length), v);
  return out;
}
