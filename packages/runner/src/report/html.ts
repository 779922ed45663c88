/**
 * The report page: one self-contained HTML file. Its style sheet, the compiled Vega
 * specifications (with their data) and Vega's browser bundle are embedded, so it opens
 * offline and can be mailed as one file. Tables are plain HTML; figures are drawn by Vega
 * when the page loads (page/report.js).
 */
import { readFileSync } from 'node:fs';
import type { Spec as VegaSpec } from 'vega';
import { domainTitle, type AllFigures, type Figure } from './figures';
import type { Comparison, ControllerRow, QuadrantRow, ReportModel } from './model';
import { bandWords } from './stats';

export const CAUTION =
  'A surrogate is not a channel flow. The Kuramoto-Sivashinsky "drag" is the energy input rate <u_x^2> and the Kolmogorov-flow "drag" a friction coefficient built from the mean-flow amplitude. ' +
  'They share with wall turbulence a forced instability that actuators can weaken, which makes them good for developing agents, tiling, sensing, rewards and couplings; ' +
  'but a drag reduction here does not predict the drag reduction of the same idea in a channel flow, and the ranking of controllers can differ there.';

export function escapeHtml(s: string): string {
  return s.replace(/[&<>"']/g, (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' })[c]!);
}

/** JSON that is safe inside <script>: no "<" (so no "</script>" or "<!--"), U+2028/2029 escaped. */
export function scriptJson(v: unknown): string {
  return JSON.stringify(v)
    .replace(/</g, '\\u003c')
    .replace(/\u2028/g, '\\u2028')
    .replace(/\u2029/g, '\\u2029');
}

const f3 = (x: number | null | undefined, d = 3): string => (typeof x === 'number' && Number.isFinite(x) ? x.toFixed(d) : 'n/a');
function ci(x: { mean: number; halfWidth: number | null } | null, d = 3): string {
  if (!x) return 'n/a';
  return x.halfWidth === null ? `${f3(x.mean, d)} ± n/a` : `${f3(x.mean, d)} ± ${f3(x.halfWidth, d)}`;
}
const pct = (x: number | null | undefined): string => (typeof x === 'number' && Number.isFinite(x) ? `${(100 * x).toFixed(1)}%` : 'n/a');

function table(head: readonly string[], rows: ReadonlyArray<ReadonlyArray<string | { html: string; cls?: string }>>, cls = ''): string {
  const cell = (c: string | { html: string; cls?: string }, tag: string): string =>
    typeof c === 'string' ? `<${tag}>${escapeHtml(c)}</${tag}>` : `<${tag}${c.cls ? ` class="${c.cls}"` : ''}>${c.html}</${tag}>`;
  return `<table${cls ? ` class="${cls}"` : ''}><thead><tr>${head.map((h) => cell(h, 'th')).join('')}</tr></thead><tbody>${rows
    .map((r) => `<tr>${r.map((c) => cell(c, 'td')).join('')}</tr>`)
    .join('')}</tbody></table>`;
}

function runsTable(m: ReportModel): string {
  const runs = m.runs.filter((r) => r.summary);
  if (!runs.length) return '';
  const rows = runs.map((r) => {
    const s = r.summary!;
    const best = s.best;
    return [
      r.name,
      r.settingLabel,
      String(s.seed),
      s.status,
      String(s.steps),
      String(s.updates),
      `${f3(s.trainSeconds, 0)} s`,
      best && best.drag !== null ? `${f3(best.drag)} ± ${best.halfWidth === null ? 'n/a' : f3(best.halfWidth)} (step ${best.step})` : 'n/a',
    ];
  });
  const dragName = runs[0]!.summary!.dragName;
  return `<h3>Runs</h3>${table(['run', 'setting', 'seed', 'status', 'steps', 'updates', 'training time', `best validation ${dragName}`], rows)}`;
}

function controllerTable(dragName: string, rows: readonly ControllerRow[]): string {
  const body = rows.map((r) => [
    r.controller,
    r.runs > 1 ? `${r.runs} seeds` : '1',
    String(r.episodes),
    ci(r.drag),
    ci(r.netSaving),
    ci(r.actuationPower),
    r.bounds ? `${pct(r.bounds.atBounds)} (${pct(r.bounds.lower)} low, ${pct(r.bounds.upper)} high)` : r.atBounds ? pct(r.atBounds.mean) : 'n/a',
    String(r.diverged),
  ]);
  return table(['controller', 'runs', 'episodes', `${dragName} (95% CI)`, 'net saving (95% CI)', 'actuation power', 'at bounds', 'diverged'], body);
}

function comparisonTable(dragName: string, cs: readonly Comparison[]): string {
  if (!cs.length) return '';
  const words = { lower: 'policy lower', higher: 'policy higher', 'not distinguishable': 'not distinguishable at 95%' };
  const body = cs.map((c) => [
    c.policy,
    c.baseline,
    `${c.mean >= 0 ? '+' : ''}${f3(c.mean)} ± ${f3(c.halfWidth)}`,
    `${c.n} ${c.over}`,
    { html: escapeHtml(words[c.verdict]), cls: c.verdict === 'lower' ? 'tw-lower' : c.verdict === 'higher' ? 'tw-higher' : '' },
  ]);
  return table(['policy', 'against', `difference in ${dragName} (policy - baseline, 95% CI)`, 'pairs', 'result'], body);
}

function quadrantTable(qs: readonly QuadrantRow[]): string {
  if (!qs.length) return '';
  const [a, b] = qs[0]!.names;
  const body = qs.map((q) => [
    q.controller,
    String(q.samples),
    ...q.fractions.map((f) => pct(f)),
    f3(q.correlation),
    f3(q.stress[0] + q.stress[1] + q.stress[2] + q.stress[3], 4),
    f3(q.stress[1] + q.stress[3], 4),
    f3(q.rmsA),
    f3(q.rmsB),
  ]);
  return table(['controller', 'samples', 'Q1', 'Q2', 'Q3', 'Q4', `corr(${a}, ${b})`, `<${a} ${b}>`, 'Q2 + Q4 part', `rms ${a}`, `rms ${b}`], body);
}

function figureHtml(f: Figure): string {
  return (
    `<figure class="tw-figure" id="figure-${escapeHtml(f.id)}"><figcaption><strong>${escapeHtml(f.title)}</strong>${escapeHtml(f.caption)} ` +
    `<a href="figures/${encodeURIComponent(f.id)}.svg">SVG</a></figcaption>` +
    `<div class="tw-chart" id="fig-${escapeHtml(f.id)}" data-primary="${escapeHtml(f.primary.name)}" data-items="${f.primary.items}"></div></figure>`
  );
}

export interface PageInput {
  readonly title: string;
  readonly model: ReportModel;
  readonly figures: AllFigures;
  readonly compiled: ReadonlyMap<string, VegaSpec>;
  readonly rows: ReadonlyMap<string, ControllerRow[]>;
  readonly comparisons: ReadonlyMap<string, Comparison[]>;
  readonly generated: string;
  readonly versions: { readonly vega: string; readonly vegaLite: string };
  readonly vegaBundle: string;
}

export function reportHtml(p: PageInput): string {
  const m = p.model;
  const here = new URL('.', import.meta.url);
  const css = readFileSync(new URL('page/report.css', here), 'utf8');
  const js = readFileSync(new URL('page/report.js', here), 'utf8');
  const sections: string[] = [];
  const toc: string[] = ['<li><a href="#summary">Summary</a></li>'];

  // --- summary ---
  const summary: string[] = [runsTable(m)];
  for (const df of p.figures.domains) {
    const d = df.domain;
    const rows = p.rows.get(d.label) ?? [];
    const comps = p.comparisons.get(d.label) ?? [];
    summary.push(`<h3>${d.evalLabel === 'train' ? 'Training domain' : 'Transfer domain'} ${escapeHtml(domainTitle(d))}</h3>`);
    summary.push(controllerTable(d.dragName, rows));
    const seeds = rows.some((r) => r.interval === 'seeds');
    summary.push(
      `<p class="tw-table-note">${d.episodes} held-out evaluation episodes per controller on identical seeded initial states; the first ${d.discardDecisions} of ${d.decisions} decisions of each are left out. ` +
        `Intervals: Student-t 95% over episodes${seeds ? ' (rows of several seeds: over the seeds\u2019 episode means)' : ''}. ` +
        'Net saving = 1 - (drag + actuation cost)/reference, counting only power the actuators supply. ' +
        `Reference: ${escapeHtml(d.first.summary.reference.mean.toPrecision(5))} ± ${escapeHtml(d.first.summary.reference.ci95.toPrecision(2))} (95%).</p>`,
    );
    if (comps.length) {
      summary.push(`<p class="tw-table-note">${d.evalLabel === 'train' ? 'Policy against the baselines' : 'Transfer result: the policy, trained on the training domain, against this domain\u2019s baselines'} (paired on identical initial states):</p>`);
      summary.push(comparisonTable(d.dragName, comps));
    }
  }
  if (m.sweep) {
    const cols = m.sweep.columns;
    summary.push(`<h3>Sweep aggregate</h3><p class="tw-table-note">${escapeHtml(m.sweep.path)}, as given:</p>`);
    summary.push(
      table(
        cols,
        m.sweep.rows.map((r) => cols.map((c) => (r.cells[c] === undefined || r.cells[c] === null ? '' : String(r.cells[c])))),
      ),
    );
  }
  if (!m.domains.length) summary.push('<p class="tw-note">No evaluation data: run <code>tilewise evaluate &lt;run&gt;</code> to compare the policy with the baselines.</p>');
  sections.push(`<section id="summary"><h2>Summary</h2>${summary.join('\n')}</section>`);

  // --- learning ---
  if (p.figures.learning.length) {
    toc.push('<li><a href="#learning">Learning curves</a></li>');
    sections.push(`<section id="learning"><h2>Learning curves</h2>${p.figures.learning.map(figureHtml).join('\n')}</section>`);
  }

  // --- domains ---
  for (const df of p.figures.domains) {
    const id = `domain-${df.domain.slug}`;
    const title = df.figures[0]?.section ?? df.domain.label;
    toc.push(`<li><a href="#${escapeHtml(id)}">${escapeHtml(title)}</a></li>`);
    const parts = df.figures.map((f) => {
      const html = figureHtml(f);
      return f.id.startsWith('joint-') ? `${html}${quadrantTable(df.quadrants)}` : html;
    });
    const notes = df.notes.map((n) => `<p class="tw-note">${escapeHtml(n.text)}</p>`).join('');
    sections.push(`<section id="${escapeHtml(id)}"><h2>${escapeHtml(title)}</h2>${parts.join('\n')}${notes}</section>`);
  }

  const all = [...p.figures.learning, ...p.figures.domains.flatMap((d) => d.figures)];
  const specs = all.map((f) => ({ id: f.id, spec: p.compiled.get(f.id) }));
  const inputs = m.runs.map((r) => r.dir);
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="generator" content="tilewise report">
<title>${escapeHtml(p.title)}</title>
<style>
${css}
</style>
</head>
<body>
<main>
<header>
<h1>${escapeHtml(p.title)}</h1>
<p class="tw-meta">Written ${escapeHtml(p.generated)} by tilewise report from ${inputs.length} input${inputs.length === 1 ? '' : 's'}: ${inputs.map((i) => escapeHtml(i)).join(', ')}.
Bands of several seeds: ${escapeHtml(bandWords(m.band, 'the seeds'))}.</p>
</header>
<aside class="tw-caution" id="caution"><strong>Caution: a surrogate is not a channel flow.</strong> ${escapeHtml(CAUTION.replace(/^A surrogate is not a channel flow\. /, ''))}</aside>
<nav><strong>Contents</strong><ul>${toc.join('')}</ul></nav>
${sections.join('\n')}
<footer>Figures drawn by Vega ${escapeHtml(p.versions.vega)} from Vega-Lite ${escapeHtml(p.versions.vegaLite)} specifications (both BSD-3-Clause, embedded in this page; works offline).
SVG copies of every figure are in the figures/ directory beside this page; the numbers behind the tables are in report.json.</footer>
</main>
<script id="tw-figures" type="application/json">${scriptJson(specs)}</script>
<script>
${p.vegaBundle}
</script>
<script>
${js}
</script>
</body>
</html>
`;
}
