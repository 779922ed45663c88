/**
 * `tilewise export`: write a trained policy in the formats solvers read (docs/export.md).
 * Formats: onnx (NAME.onnx), c (NAME.h + NAME.c), fortran (NAME.f90), json (NAME.json).
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { cExport } from './c';
import { fortranExport } from './fortran';
import { policyJsonText } from './json';
import { buildExportModel, checkExportName, type ExportInput } from './model';
import { onnxBytes } from './onnx';

export const EXPORT_FORMATS = ['onnx', 'c', 'fortran', 'json'] as const;
export type ExportFormat = (typeof EXPORT_FORMATS)[number];

export interface ExportOptions {
  /** Directory the files go to (created when missing). */
  readonly outDir: string;
  readonly formats: readonly ExportFormat[];
  /** Base name of the files and prefix of the C/Fortran symbols (default "tilewise_policy"). */
  readonly name?: string;
}

/** Write the exports; returns the paths written, in format order. */
export function exportPolicy(input: ExportInput, o: ExportOptions): string[] {
  const name = checkExportName(o.name ?? 'tilewise_policy');
  if (o.formats.length === 0) throw new Error(`export: no format asked for (choose from ${EXPORT_FORMATS.join(', ')})`);
  for (const f of o.formats) {
    if (!EXPORT_FORMATS.includes(f)) throw new Error(`export: unknown format ${JSON.stringify(f)} (choose from ${EXPORT_FORMATS.join(', ')})`);
  }
  const model = buildExportModel(input);
  mkdirSync(o.outDir, { recursive: true });
  const written: string[] = [];
  const put = (file: string, data: string | Uint8Array): void => {
    const path = join(o.outDir, file);
    writeFileSync(path, data);
    written.push(path);
  };
  for (const f of o.formats) {
    if (f === 'onnx') put(`${name}.onnx`, onnxBytes(model));
    else if (f === 'json') put(`${name}.json`, policyJsonText(model));
    else if (f === 'fortran') put(`${name}.f90`, fortranExport(model, name));
    else {
      const c = cExport(model, name);
      put(`${name}.h`, c.header);
      put(`${name}.c`, c.source);
    }
  }
  return written;
}

export { buildExportModel, configHash, canonicalJson, type ExportInput, type ExportModel, type ExportMetadata } from './model';
export { loadPolicyJson, parsePolicyJson, policyJsonText, exportInputOf, DEFAULT_POLICY_JSON_LIMITS, type PolicyJson, type PolicyJsonLimits } from './json';
export { onnxBytes, onnxMetadataProps, ONNX_OPSET } from './onnx';
export { cExport } from './c';
export { fortranExport } from './fortran';
export { PolicyEvaluator } from './evaluator';
