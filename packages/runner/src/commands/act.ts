/**
 * `tilewise act <source>`: read observations (JSON lines or CSV), print the actions. For checking
 * an export by hand: run it on the same observations as your compiled C/Fortran export or your
 * solver's coupling and compare.
 *
 * Sources: a run directory (best or latest policy), a .policy file, a JSON export (these run on
 * tilewise's own network backend, as in training), or an ONNX export (run by onnxruntime-node).
 *
 * Input formats:
 *   jsonl  one JSON value per line: an array of obsDim numbers (one tile) or an array of such
 *          arrays (several tiles); blank lines and lines starting with '#' are skipped. Each
 *          line's actions are printed on one line in the same shape.
 *   csv    one tile per row, obsDim numbers separated by commas; a first row that is not all
 *          numbers is a header and is skipped. Printed as CSV with a header a0, a1, ...
 * Numbers are printed as the shortest decimal that reads back to the same float32.
 */
import { readFileSync } from 'node:fs';
import type { BackendChoice } from '@tilewise/agent';
import { ConfigError } from '@tilewise/envs';
import { PolicyEvaluator } from '../export/evaluator';
import { float32Text } from '../export/model';
import { onnxMetadataProps } from '../export/onnx';
import { loadOnnxRuntime } from '../export/onnx-runtime';
import { openExportSource } from '../export/source';

export type ObservationFormat = 'jsonl' | 'csv';

/** Parsed input: rows of observations and how to group the printed actions. */
export interface ObservationInput {
  readonly obs: Float32Array;
  readonly tiles: number;
  /** Per printed line: how many tiles, and whether it was a nested array (jsonl). */
  readonly lines: ReadonlyArray<{ readonly tiles: number; readonly nested: boolean }>;
  readonly header: boolean;
}

function numberAt(v: unknown, where: string): number {
  if (typeof v !== 'number' || !Number.isFinite(v)) throw new ConfigError([`${where}: expected a finite number, got ${JSON.stringify(v) ?? String(v)}`]);
  return v;
}

/** Parse observations; every error names the line (and column) and what was expected. */
export function parseObservations(text: string, format: ObservationFormat, obsDim: number, what = 'input'): ObservationInput {
  const values: number[] = [];
  const lines: Array<{ tiles: number; nested: boolean }> = [];
  const rows = text.split(/\r?\n/);
  let header = false;
  rows.forEach((raw, i) => {
    const line = raw.trim();
    const at = `${what} line ${i + 1}`;
    if (!line || line.startsWith('#')) return;
    if (format === 'csv') {
      const cells = line.split(',').map((c) => c.trim());
      const nums = cells.map(Number);
      if (lines.length === 0 && !header && cells.some((c, k) => c === '' || !Number.isFinite(nums[k]!))) {
        header = true;
        return;
      }
      if (cells.length !== obsDim) throw new ConfigError([`${at}: expected ${obsDim} comma-separated observations, got ${cells.length}`]);
      cells.forEach((c, k) => {
        if (c === '' || !Number.isFinite(nums[k]!)) throw new ConfigError([`${at}, column ${k + 1}: expected a finite number, got ${JSON.stringify(c)}`]);
      });
      values.push(...nums);
      lines.push({ tiles: 1, nested: false });
      return;
    }
    let v: unknown;
    try {
      v = JSON.parse(line);
    } catch (e) {
      throw new ConfigError([`${at}: not valid JSON (${(e as Error).message})`]);
    }
    if (!Array.isArray(v) || v.length === 0) throw new ConfigError([`${at}: expected an array of ${obsDim} observations or an array of such arrays, got ${line.slice(0, 40)}`]);
    const nested = Array.isArray(v[0]);
    const tiles = nested ? (v as unknown[]) : [v];
    tiles.forEach((t, k) => {
      const where = nested ? `${at}, tile ${k}` : at;
      if (!Array.isArray(t) || t.length !== obsDim) {
        throw new ConfigError([`${where}: expected ${obsDim} observations, got ${Array.isArray(t) ? t.length : JSON.stringify(t)}`]);
      }
      t.forEach((x, j) => values.push(numberAt(x, `${where}, observation ${j}`)));
    });
    lines.push({ tiles: tiles.length, nested });
  });
  if (values.length === 0) throw new ConfigError([`${what}: no observations`]);
  return { obs: Float32Array.from(values), tiles: values.length / obsDim, lines, header };
}

/** Format actions [tiles, actDim] as the input was laid out. */
export function formatActions(actions: Float32Array, actDim: number, input: ObservationInput, format: ObservationFormat): string[] {
  const out: string[] = [];
  const row = (t: number): string[] => Array.from(actions.subarray(t * actDim, (t + 1) * actDim), float32Text);
  if (format === 'csv') {
    out.push(Array.from({ length: actDim }, (_, k) => `a${k}`).join(','));
    for (let t = 0; t < input.tiles; t++) out.push(row(t).join(','));
    return out;
  }
  let t = 0;
  for (const l of input.lines) {
    const tiles = Array.from({ length: l.tiles }, (_, k) => `[${row(t + k).join(',')}]`);
    out.push(l.nested ? `[${tiles.join(',')}]` : tiles[0]!);
    t += l.tiles;
  }
  return out;
}

export interface ActOptions {
  /** Observation file, or "-" / undefined for standard input. */
  readonly input?: string;
  readonly format?: ObservationFormat;
  readonly which?: 'best' | 'latest';
  /** Network backend for tilewise sources (default auto, as the agent config). */
  readonly backend?: BackendChoice;
  /** Read standard input (tests pass text instead). */
  readonly stdin?: () => string;
}

/** A batched policy from any source: tilewise's backend, or onnxruntime for a .onnx file. */
async function openRunner(source: string, which: 'best' | 'latest', backend: BackendChoice): Promise<{ obsDim: number; actDim: number; run(obs: Float32Array, tiles: number): Promise<Float32Array>; close(): Promise<void> }> {
  if (source.toLowerCase().endsWith('.onnx')) {
    const bytes = readFileSync(source);
    const meta = onnxMetadataProps(bytes)['tilewise.metadata'];
    if (!meta) throw new ConfigError([`${source}: an ONNX file without tilewise metadata (metadata_props "tilewise.metadata")`]);
    const { obsDim, actDim } = JSON.parse(meta) as { obsDim: number; actDim: number };
    const ort = await loadOnnxRuntime();
    const session = await ort.InferenceSession.create(bytes);
    return {
      obsDim,
      actDim,
      run: async (obs, tiles) => (await session.run({ obs: new ort.Tensor('float32', obs, [tiles, obsDim]) })).actions!.data as Float32Array,
      close: () => session.release(),
    };
  }
  const input = openExportSource(source, which);
  const ev = await PolicyEvaluator.create(input.snapshot, backend);
  return { obsDim: ev.obsDim, actDim: ev.actDim, run: async (obs, tiles) => ev.act(obs, tiles), close: async () => ev.dispose() };
}

/** Run the command; returns the output lines. */
export async function actCommand(source: string, o: ActOptions): Promise<string[]> {
  const fromStdin = o.input === undefined || o.input === '-';
  const format: ObservationFormat = o.format ?? (!fromStdin && o.input!.toLowerCase().endsWith('.csv') ? 'csv' : 'jsonl');
  if (format !== 'jsonl' && format !== 'csv') throw new ConfigError([`--format: expected jsonl or csv (got ${JSON.stringify(format)})`]);
  const runner = await openRunner(source, o.which ?? 'best', o.backend ?? 'auto');
  try {
    let text: string;
    try {
      text = fromStdin ? (o.stdin ?? (() => readFileSync(0, 'utf8')))() : readFileSync(o.input!, 'utf8');
    } catch (e) {
      throw new ConfigError([`--input ${o.input}: cannot read it (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`]);
    }
    const input = parseObservations(text, format, runner.obsDim, fromStdin ? 'standard input' : o.input!);
    const actions = await runner.run(input.obs, input.tiles);
    return formatActions(actions, runner.actDim, input, format);
  } finally {
    await runner.close();
  }
}
