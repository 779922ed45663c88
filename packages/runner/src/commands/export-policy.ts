/**
 * `tilewise export <source>`: write a trained policy as ONNX, C, Fortran and/or JSON
 * (export/index.ts; docs/export.md).
 */
import { statSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { ConfigError } from '@tilewise/envs';
import { EXPORT_FORMATS, exportPolicy, type ExportFormat } from '../export';
import { openExportSource } from '../export/source';

/** "onnx,c" -> ['onnx', 'c']; "all" -> every format. */
export function parseFormats(text: string): ExportFormat[] {
  if (text === 'all') return [...EXPORT_FORMATS];
  const list = text.split(',').map((s) => s.trim()).filter(Boolean);
  const bad = list.filter((f) => !EXPORT_FORMATS.includes(f as ExportFormat));
  if (list.length === 0 || bad.length) {
    throw new ConfigError([`--format: expected a comma-separated list of ${EXPORT_FORMATS.join(', ')} or "all" (got ${JSON.stringify(text)})`]);
  }
  return [...new Set(list)] as ExportFormat[];
}

export interface ExportCommandOptions {
  readonly formats: readonly ExportFormat[];
  /** Output directory; default <run-dir>/export for a run, else ./export. */
  readonly out?: string;
  readonly name?: string;
  readonly which?: 'best' | 'latest';
}

/** Returns the files written. */
export function exportCommand(source: string, o: ExportCommandOptions): string[] {
  const input = openExportSource(source, o.which ?? 'best');
  let isDir = false;
  try {
    isDir = statSync(source).isDirectory();
  } catch {
    // openExportSource has already reported a missing source
  }
  const outDir = o.out ?? (isDir ? join(resolve(source), 'export') : resolve('export'));
  try {
    return exportPolicy(input, { outDir, formats: o.formats, name: o.name });
  } catch (e) {
    const m = (e as Error).message;
    if (m.startsWith('export name:') || m.startsWith('export: unknown format')) throw new ConfigError([m.replace('export name:', '--name:')]);
    throw e;
  }
}
