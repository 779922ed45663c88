/**
 * Crash-safe file writes: the bytes go to a temporary file in the same directory, which is
 * flushed to disk (fsync) and then renamed over the target; the directory is fsynced so the
 * rename itself is durable. A reader sees the old file or the new one, never a part of one.
 * A crash leaves at most a stray `*.tmp-<pid>` file, which readers ignore.
 */
import { closeSync, fsyncSync, openSync, renameSync, unlinkSync, writeSync } from 'node:fs';
import { basename, dirname, join } from 'node:path';

/** Test hook: called after the temporary file is complete and before the rename. */
export interface AtomicWriteHooks {
  readonly beforeRename?: (tmpPath: string) => void;
}

/** Suffix of temporary files (`<name>.tmp-<pid>`); `isTemporary` recognises them. */
export const TMP_MARK = '.tmp-';

export function isTemporary(name: string): boolean {
  return name.includes(TMP_MARK);
}

export function writeFileAtomic(path: string, data: Uint8Array | string, hooks: AtomicWriteHooks = {}): void {
  const tmp = join(dirname(path), `${basename(path)}${TMP_MARK}${process.pid}`);
  const bytes = typeof data === 'string' ? Buffer.from(data, 'utf8') : data;
  const fd = openSync(tmp, 'w');
  try {
    let off = 0;
    while (off < bytes.length) off += writeSync(fd, bytes, off, bytes.length - off);
    fsyncSync(fd);
  } catch (e) {
    closeSync(fd);
    try {
      unlinkSync(tmp);
    } catch {
      // already gone
    }
    throw e;
  }
  closeSync(fd);
  hooks.beforeRename?.(tmp);
  renameSync(tmp, path);
  fsyncDir(dirname(path));
}

/** fsync a directory so a rename in it survives a power loss (a no-op where unsupported). */
export function fsyncDir(dir: string): void {
  let fd: number | undefined;
  try {
    fd = openSync(dir, 'r');
    fsyncSync(fd);
  } catch {
    // Some filesystems refuse fsync on directories; the rename is still atomic.
  } finally {
    if (fd !== undefined) closeSync(fd);
  }
}
