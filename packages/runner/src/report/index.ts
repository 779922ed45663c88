/**
 * `tilewise report`: a report of one run, or of several side by side (the seeds of a setting
 * drawn as bands), written to a directory:
 *
 *   <out>/report.html      self-contained page (styles, data, Vega bundle embedded; offline)
 *   <out>/figures/<id>.svg every figure as an SVG file (drawn by Vega in Node)
 *   <out>/report.json      the numbers behind the tables (format tilewise-report/1)
 *
 * Inputs: run directories, evaluation directories and sweep aggregates (data.ts).
 * The format of report.json and the figures are described in docs/report.md.
 */
import { mkdirSync, statSync } from 'node:fs';
import { join, resolve } from 'node:path';
import type { Spec as VegaSpec } from 'vega';
import { writeFileAtomic } from '../atomic';
import { readInputDir, readSweepAggregate, ReportInputError, type RunData, type SweepAggregate } from './data';
import { buildFigures, type Figure } from './figures';
import { CAUTION, reportHtml } from './html';
import { buildModel, comparisons, controllerRows, type Comparison, type ControllerRow } from './model';
import { toSvg, toVega, vegaBrowserBundle, vegaLiteVersion, vegaVersion } from './render';
import { BAND_KINDS, type BandKind } from './stats';

export { ReportInputError } from './data';
export const REPORT_FORMAT = 'tilewise-report/1';

export interface ReportOptions {
  /** Output directory (created). */
  readonly out: string;
  readonly title?: string;
  /** Band drawn around means of several seeds and of held-out episodes (default ci95). */
  readonly band?: BandKind;
  /** Write the SVG figure files (default true). */
  readonly svg?: boolean;
  /** Time stamp written in the page (tests pin it). */
  readonly now?: Date;
  /** Warnings (vega-lite's, and about the inputs). */
  readonly warn?: (line: string) => void;
}

export interface ReportResult {
  readonly out: string;
  readonly html: string;
  readonly json: string;
  readonly figures: ReadonlyArray<{ readonly id: string; readonly title: string; readonly svg: string | null; readonly primary: Figure['primary'] }>;
  readonly warnings: readonly string[];
}

function isFile(p: string): boolean {
  try {
    return statSync(p).isFile();
  } catch {
    return false;
  }
}

/** Read every input; a sweep aggregate contributes its runs, labelled by their setting. */
export function readInputs(inputs: readonly string[]): { runs: RunData[]; sweep: SweepAggregate | null; skipped: string[] } {
  if (!inputs.length) throw new ReportInputError('report: no input (give run directories, evaluation directories or a sweep aggregate)');
  const runs: RunData[] = [];
  let sweep: SweepAggregate | null = null;
  const skipped: string[] = [];
  const seen = new Set<string>();
  const add = (r: RunData, from: string): void => {
    if (seen.has(r.dir)) throw new ReportInputError(`${from}: ${r.dir} is given more than once`);
    seen.add(r.dir);
    runs.push(r);
  };
  for (const input of inputs) {
    if (isFile(input) && /\.(json|csv)$/i.test(input)) {
      if (sweep) throw new ReportInputError(`${input}: only one sweep aggregate per report (already reading ${sweep.path})`);
      sweep = readSweepAggregate(input);
      if (sweep.skipped.length) skipped.push(`${input}: left out ${sweep.skipped.length} row(s) without a completed run (${sweep.skipped.slice(0, 3).join('; ')}${sweep.skipped.length > 3 ? '; ...' : ''})`);
      for (const row of sweep.rows) {
        const r = readInputDir(row.runDir);
        if (row.setting !== null) r.settingLabel = row.setting;
        add(r, input);
      }
    } else add(readInputDir(input), input);
  }
  return { runs, sweep, skipped };
}

export async function writeReport(inputs: readonly string[], o: ReportOptions): Promise<ReportResult> {
  const bandKind = o.band ?? 'ci95';
  if (!BAND_KINDS.includes(bandKind)) throw new ReportInputError(`--band: expected one of ${BAND_KINDS.join(', ')} (got ${JSON.stringify(bandKind)})`);
  const warnings: string[] = [];
  const warn = (w: string): void => {
    warnings.push(w);
    o.warn?.(w);
  };
  const { runs, sweep, skipped } = readInputs(inputs);
  skipped.forEach(warn);
  for (const r of runs) {
    if (r.summary && r.summary.status !== 'completed') warn(`${r.dir}: the run is ${r.summary.status} (its curves end at step ${r.summary.steps})`);
    if (r.config && !r.domains.length) warn(`${r.dir}: no evaluation data yet (tilewise evaluate ${r.dir}); the report shows its learning curves only`);
  }
  const model = buildModel(runs, bandKind, sweep);
  const figures = buildFigures(model);
  const all = [...figures.learning, ...figures.domains.flatMap((d) => d.figures)];
  const compiled = new Map<string, VegaSpec>();
  for (const f of all) {
    const c = toVega(f);
    c.warnings.forEach(warn);
    compiled.set(f.id, c.spec);
  }
  const rows = new Map<string, ControllerRow[]>(model.domains.map((d) => [d.label, controllerRows(d)]));
  const comps = new Map<string, Comparison[]>(model.domains.map((d) => [d.label, comparisons(d)]));

  const out = resolve(o.out);
  mkdirSync(out, { recursive: true });
  const svgDir = join(out, 'figures');
  const written: Array<ReportResult['figures'][number]> = [];
  if (o.svg !== false) mkdirSync(svgDir, { recursive: true });
  for (const f of all) {
    let svg: string | null = null;
    if (o.svg !== false) {
      svg = join(svgDir, `${f.id}.svg`);
      writeFileAtomic(svg, await toSvg(compiled.get(f.id)!));
    }
    written.push({ id: f.id, title: f.title, svg, primary: f.primary });
  }
  const generated = (o.now ?? new Date()).toISOString().replace(/\.\d+Z$/, 'Z');
  const title = o.title ?? defaultTitle(runs);
  const html = reportHtml({
    title,
    model,
    figures,
    compiled,
    rows,
    comparisons: comps,
    generated,
    versions: { vega: vegaVersion, vegaLite: vegaLiteVersion },
    vegaBundle: vegaBrowserBundle(),
  });
  const htmlPath = join(out, 'report.html');
  writeFileAtomic(htmlPath, html);
  const jsonPath = join(out, 'report.json');
  const data = {
    format: REPORT_FORMAT,
    title,
    generated,
    band: bandKind,
    inputs: runs.map((r) => ({ dir: r.dir, setting: r.settingLabel, seed: r.seed })),
    settings: model.settings.map((s) => ({ label: s.label, runs: s.runs.map((r) => r.dir) })),
    domains: figures.domains.map((df) => ({
      label: df.domain.label,
      kind: df.domain.kind,
      dragName: df.domain.dragName,
      tiles: df.domain.tiles,
      episodes: df.domain.episodes,
      controllers: rows.get(df.domain.label),
      comparisons: comps.get(df.domain.label),
      quadrants: df.quadrants,
      notes: df.notes.map((n) => n.text),
    })),
    figures: written.map((f) => ({ id: f.id, title: f.title, svg: f.svg ? `figures/${f.id}.svg` : null, primary: f.primary })),
    caution: CAUTION,
  };
  writeFileAtomic(jsonPath, `${JSON.stringify(data, (_k, v) => (typeof v === 'number' && !Number.isFinite(v) ? null : v), 2)}\n`);
  return { out, html: htmlPath, json: jsonPath, figures: written, warnings };
}

function defaultTitle(runs: readonly RunData[]): string {
  if (runs.length === 1) return `tilewise report: ${runs[0]!.name}`;
  const settings = [...new Set(runs.map((r) => r.settingLabel))];
  return `tilewise report: ${settings.join(', ')} (${runs.length} runs)`;
}
