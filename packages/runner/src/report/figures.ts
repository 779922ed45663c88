/**
 * The report's figures as Vega-Lite specifications (the charting library draws them; nothing
 * here draws by hand). Each figure carries its data inline, a title and a caption that says
 * what is plotted, over what and with which band, and `primary`: the name of its data mark
 * and how many items that mark draws, so the page test can check that every figure drew its data.
 *
 * Figures (per evaluation domain unless said otherwise):
 *   learning-return, learning-critic-loss, learning-validation   over training steps (all runs)
 *   drag-time-<d>        drag analogue vs time per controller, mean and band over held-out episodes
 *   sweep-<d>            the opposition gain sweep that tuned the baseline
 *   spacetime-<d>        KS: u(x, t) of the first held-out episode for each controller
 *   snapshot-<d>         Kolmogorov: vorticity at the last recorded decision of the first episode
 *   actuation-<d>        a few actuators' amplitudes over the first held-out episode
 *   histogram-<d>        amplitude histogram after the transient, with the shares at the bounds
 *   bounds-<d>           shares of time at the lower and upper bound
 *   control-law-<d>      joint histogram of (sensed opposition signal, action)
 *   joint-<d>            joint distribution of two fluctuation components with quadrant fractions
 */
import type { RunLog } from './data';
import {
  afterTransient,
  amplitudesAfterTransient,
  fieldGrid,
  fluctuationSamples,
  quadrantRow,
  type ControllerView,
  type DomainView,
  type QuadrantRow,
  type ReportModel,
  type Setting,
} from './model';
import { band, bandWords, binnedMeans, boundShares, columnBands, histogram, histogram2d, maxAbs, rms, type BandKind } from './stats';

/** A Vega-Lite specification (kept as plain data; vega-lite validates it when compiling). */
export type VlSpec = Record<string, unknown>;

export interface Figure {
  readonly id: string;
  /** Section heading the figure belongs to. */
  readonly section: string;
  readonly title: string;
  readonly caption: string;
  readonly spec: VlSpec;
  /** The data mark (its Vega-Lite name) and the number of items it must draw. */
  readonly primary: { readonly name: string; readonly items: number };
}

/** What a section says when a figure cannot be drawn (and why). */
export interface FigureNote {
  readonly section: string;
  readonly text: string;
}

const POLICY_COLORS = ['#1f77b4', '#2ca02c', '#d62728', '#17becf', '#bcbd22', '#8c564b', '#e377c2'];
const BASELINE_COLORS: Record<string, string> = { none: '#7f7f7f', opposition: '#ff7f0e', random: '#9467bd' };

/** A color scale that gives every controller of a domain the same color in every figure. */
function controllerColors(cs: readonly ControllerView[]): { domain: string[]; range: string[] } {
  let k = 0;
  return {
    domain: cs.map((c) => c.id),
    range: cs.map((c) => (c.role === 'policy' ? POLICY_COLORS[k++ % POLICY_COLORS.length]! : (BASELINE_COLORS[c.role] ?? '#333333'))),
  };
}

const fix = (x: number, d = 6): number | null => (Number.isFinite(x) ? Number(x.toPrecision(d)) : null);
const pct = (x: number): string => `${(100 * x).toFixed(1)}%`;
const SIZE = { width: 560, height: 240 };
/** Legend entries of line charts drawn as strokes. */
const LINE_LEGEND = { symbolType: 'stroke', symbolStrokeWidth: 2.5, symbolOpacity: 1 };
const PANEL = { width: 200, height: 200 };

/** Small multiples: one panel per value of `field` (panels in `order`), each drawing `layer`. */
function panels(rows: unknown[], order: readonly string[], layer: VlSpec[], o: { field?: string; dir?: 'column' | 'row'; width?: number; height?: number } = {}): VlSpec {
  return {
    data: { values: rows },
    facet: {
      [o.dir ?? 'column']: {
        field: o.field ?? 'controller',
        type: 'nominal',
        title: null,
        sort: order,
        // Row panels get their name above them (beside them it would collide with the y axis title).
        ...(o.dir === 'row' ? { header: { labelOrient: 'top', labelAngle: 0, labelAnchor: 'start', labelFontWeight: 'bold' } } : {}),
      },
    },
    spec: { width: o.width ?? PANEL.width, height: o.height ?? PANEL.height, layer },
  };
}

/** One axis of a heatmap: cells span [from, to]; a fixed domain is drawn without rounding. */
interface CellAxis {
  readonly from: string;
  readonly to: string;
  readonly title: string;
  readonly domain?: readonly [number, number];
}

/** A heatmap layer: rectangles [x.from, x.to] x [y.from, y.to] colored by `color`, optionally filtered. */
function cellLayer(name: string, x: CellAxis, y: CellAxis, color: VlSpec, filter?: string): VlSpec {
  const axis = (a: CellAxis) => ({ field: a.from, type: 'quantitative', title: a.title, ...(a.domain ? { scale: { domain: a.domain, nice: false } } : {}) });
  return { name, ...(filter ? { transform: [{ filter }] } : {}), mark: { type: 'rect' }, encoding: { x: axis(x), x2: { field: x.to }, y: axis(y), y2: { field: y.to }, color } };
}

export function domainTitle(d: DomainView): string {
  const e = d.env;
  if (d.kind === 'ks') return `${d.label}: KS L = ${e.length}, ${d.tiles} tiles`;
  if (d.kind === 'kolmogorov') return `${d.label}: Kolmogorov ${JSON.stringify(e.points)}, ${d.tiles} tiles`;
  return `${d.label}: ${d.kind}, ${d.tiles} tiles`;
}

// ---------------------------------------------------------------------------------------------
// Learning curves
// ---------------------------------------------------------------------------------------------

type Points = ReadonlyArray<{ readonly x: number; readonly y: number; readonly lo?: number | null; readonly hi?: number | null }>;

/** Most points a learning curve draws per setting; runs with more logged steps are averaged in step bins. */
export const CURVE_POINTS = 120;

/**
 * One setting's curve from its runs' points: when every run has the same steps and at most
 * CURVE_POINTS of them, the values at each step (several per step averaged); otherwise means
 * in CURVE_POINTS equal step bins. Then the mean over runs at each point with the band over
 * runs (a single run keeps its own lo/hi when the points carry them).
 */
export function curveBands(runs: readonly Points[], kind: BandKind, maxPoints = CURVE_POINTS): Array<{ x: number; mean: number; lo: number; hi: number; n: number }> {
  const nonEmpty = runs.filter((r) => r.length > 0);
  if (!nonEmpty.length) return [];
  const steps = nonEmpty.map((r) => [...new Set(r.map((p) => p.x))].sort((a, b) => a - b));
  const shared = steps.every((s) => s.length === steps[0]!.length && s.every((x, i) => x === steps[0]![i])) && steps[0]!.length <= maxPoints;
  let xs: number[];
  let perRun: Float64Array[];
  if (shared) {
    xs = steps[0]!;
    perRun = nonEmpty.map((r) => binnedMeansAt(r, xs));
  } else {
    const maxX = Math.max(...nonEmpty.flatMap((r) => r.map((p) => p.x)));
    const bins = maxPoints;
    const edges = Float64Array.from({ length: bins + 1 }, (_, i) => (maxX * i) / bins);
    xs = Array.from({ length: bins }, (_, i) => 0.5 * (edges[i]! + edges[i + 1]!));
    perRun = nonEmpty.map((r) =>
      binnedMeans(
        r.map((p) => p.x),
        r.map((p) => p.y),
        edges,
      ),
    );
  }
  const single = nonEmpty.length === 1 ? nonEmpty[0]! : null;
  const out: Array<{ x: number; mean: number; lo: number; hi: number; n: number }> = [];
  xs.forEach((x, i) => {
    const b = band(
      perRun.map((r) => r[i]!),
      kind,
    );
    if (b.n === 0) return;
    let { lo, hi } = b;
    if (single && shared) {
      const p = single.find((q) => q.x === x);
      if (p && typeof p.lo === 'number' && typeof p.hi === 'number') {
        lo = p.lo;
        hi = p.hi;
      }
    }
    out.push({ x, mean: b.mean, lo, hi, n: b.n });
  });
  return out;
}

/** Mean of the y values at each of `xs` (exact matches). */
function binnedMeansAt(r: Points, xs: readonly number[]): Float64Array {
  const idx = new Map(xs.map((x, i) => [x, i]));
  const sum = new Float64Array(xs.length);
  const cnt = new Float64Array(xs.length);
  for (const p of r) {
    const i = idx.get(p.x)!;
    if (!Number.isFinite(p.y)) continue;
    sum[i]! += p.y;
    cnt[i]! += 1;
  }
  return sum.map((s, i) => (cnt[i]! ? s / cnt[i]! : NaN));
}

function settingColors(settings: readonly Setting[]) {
  return { domain: settings.map((s) => s.label), range: settings.map((_, i) => POLICY_COLORS[i % POLICY_COLORS.length]!) };
}

function curveFigure(
  m: ReportModel,
  id: string,
  title: string,
  yTitle: string,
  pick: (log: RunLog) => Points,
  caption: string,
  opts: { logY?: boolean; rules?: Array<{ label: string; y: number }> } = {},
): Figure | null {
  const settings = m.settings.filter((s) => s.runs.some((r) => r.log));
  const rows: Array<Record<string, unknown>> = [];
  let multi = false;
  for (const s of settings) {
    const runs = s.runs.filter((r) => r.log).map((r) => pick(r.log!));
    if (runs.filter((r) => r.length).length > 1) multi = true;
    for (const p of curveBands(runs, m.band)) {
      if (opts.logY && !(p.mean > 0)) continue;
      const ok = Number.isFinite(p.lo) && Number.isFinite(p.hi) && (!opts.logY || p.lo > 0);
      rows.push({ kind: 'curve', setting: s.label, step: p.x, mean: fix(p.mean), lo: ok ? fix(p.lo) : null, hi: ok ? fix(p.hi) : null, runs: p.n });
    }
  }
  if (!rows.length) return null;
  for (const r of opts.rules ?? []) rows.push({ kind: 'rule', label: r.label, y: fix(r.y) });
  const color = { field: 'setting', type: 'nominal', title: 'setting', scale: settingColors(settings) };
  const yScale = opts.logY ? { type: 'log' } : { zero: false };
  // The line layer comes first: a shared legend takes its symbols from the first layer.
  const layer: VlSpec[] = [
    {
      name: 'curve',
      transform: [{ filter: "datum.kind === 'curve'" }],
      mark: { type: 'line', point: rows.length < 80 ? { size: 18 } : false },
      encoding: {
        x: { field: 'step', type: 'quantitative', title: 'environment steps', axis: { format: '~s' } },
        y: { field: 'mean', type: 'quantitative', title: yTitle, scale: yScale },
        color: { ...color, legend: LINE_LEGEND },
        tooltip: [
          { field: 'setting', type: 'nominal' },
          { field: 'step', type: 'quantitative' },
          { field: 'mean', type: 'quantitative', format: '.4g' },
          { field: 'runs', type: 'quantitative' },
        ],
      },
    },
  ];
  if (rows.some((r) => r.kind === 'curve' && r.lo !== null)) {
    layer.push({
      transform: [{ filter: "datum.kind === 'curve' && datum.lo !== null" }],
      mark: { type: 'area', fillOpacity: 0.2 },
      encoding: { x: { field: 'step', type: 'quantitative' }, y: { field: 'lo', type: 'quantitative', scale: yScale }, y2: { field: 'hi' }, color },
    });
  }
  if (opts.rules?.length) {
    layer.push(
      { transform: [{ filter: "datum.kind === 'rule'" }], mark: { type: 'rule', strokeDash: [5, 4], color: '#555' }, encoding: { y: { field: 'y', type: 'quantitative' } } },
      {
        transform: [{ filter: "datum.kind === 'rule'" }],
        mark: { type: 'text', align: 'left', dx: 4, dy: -6, color: '#333', fontSize: 11 },
        encoding: { x: { value: 0 }, y: { field: 'y', type: 'quantitative' }, text: { field: 'label' } },
      },
    );
  }
  const bandNote = multi ? `Band: ${bandWords(m.band, 'the seeds of a setting')}.` : '';
  return {
    id,
    section: 'Learning curves',
    title,
    caption: `${caption} ${bandNote}`.trim(),
    spec: { ...SIZE, data: { values: rows }, layer },
    primary: { name: 'curve_marks', items: new Set(rows.filter((r) => r.kind === 'curve').map((r) => r.setting)).size },
  };
}

function learningFigures(m: ReportModel): Figure[] {
  const out: Array<Figure | null> = [];
  out.push(
    curveFigure(
      m,
      'learning-return',
      'Episode return during training',
      'train/episode_return',
      (l) => l.episodes.map((e) => ({ x: e.step, y: e.ret })),
      'Return of each finished training episode (exploration noise on), averaged over the episodes ending at the same step, or in step bins when there are many.',
    ),
  );
  out.push(
    curveFigure(
      m,
      'learning-critic-loss',
      'Critic loss during training',
      'train/critic_loss (log scale)',
      (l) => l.critic.map((c) => ({ x: c.step, y: c.loss })),
      'Mean critic loss over the updates of each log interval (logEvery steps).',
      { logY: true },
    ),
  );
  // Baseline levels only when every run trained on one surrogate (a single training domain).
  const trains = m.domains.filter((d) => d.evalLabel === 'train');
  const train = trains.length === 1 ? trains[0] : undefined;
  const rules: Array<{ label: string; y: number }> = [];
  if (train) {
    for (const c of train.controllers) {
      const mean = c.entries[0]?.summary.drag?.mean;
      if ((c.role === 'none' || c.role === 'opposition') && typeof mean === 'number') rules.push({ label: `${c.id} (evaluation)`, y: mean });
    }
  }
  const names = new Set(m.runs.flatMap((r) => (r.summary ? [r.summary.dragName] : [])));
  const dragName = names.size === 1 ? [...names][0]! : (train?.dragName ?? 'drag ratio');
  const single = m.runs.filter((r) => r.log?.validations.length).length === 1;
  out.push(
    curveFigure(
      m,
      'learning-validation',
      `Validation ${dragName} during training`,
      `eval/drag_ratio (${dragName})`,
      (l) => l.validations.filter((v) => v.drag !== null).map((v) => ({ x: v.step, y: v.drag!, lo: v.halfWidth === null ? null : v.drag! - v.halfWidth, hi: v.halfWidth === null ? null : v.drag! + v.halfWidth })),
      `${dragName} of the deterministic policy on the held-out validation seeds at each validation point (the best one is kept as best.policy).` +
        (single ? ' Band: Student-t 95% interval over the validation episodes.' : '') +
        (rules.length ? ' Dashed: no control and tuned opposition in the final evaluation (training domain, evaluation seeds).' : ''),
      { rules },
    ),
  );
  return out.filter((f): f is Figure => f !== null);
}

// ---------------------------------------------------------------------------------------------
// Drag versus time
// ---------------------------------------------------------------------------------------------

function dragTimeFigure(d: DomainView, kind: BandKind): Figure | null {
  const ci = d.controlInterval;
  if (ci === null) return null;
  const rows: Array<Record<string, unknown>> = [];
  for (const c of d.controllers) {
    const mats = c.entries.filter((e) => e.series && e.domain.series);
    if (!mats.length) continue;
    const D = mats[0]!.domain.series!.decisions;
    const all: number[] = [];
    let E = 0;
    for (const e of mats) {
      if (e.domain.series!.decisions !== D) continue;
      for (const v of e.series!.drag) all.push(v);
      E += e.domain.series!.episodes;
    }
    columnBands(all, E, D, kind).forEach((b, k) => {
      if (b.n === 0) return;
      rows.push({ kind: 'curve', controller: c.id, t: fix((k + 1) * ci), mean: fix(b.mean), lo: fix(b.lo), hi: fix(b.hi), episodes: b.n });
    });
  }
  if (!rows.length) return null;
  const k0 = d.discardDecisions * ci;
  rows.push({ kind: 'transient', t0: 0, t1: fix(k0) });
  const color = { field: 'controller', type: 'nominal', title: 'controller', scale: controllerColors(d.controllers) };
  const nCurves = new Set(rows.filter((r) => r.kind === 'curve').map((r) => r.controller)).size;
  return {
    id: `drag-time-${d.slug}`,
    section: domainTitle(d),
    title: `${d.dragName} versus time`,
    caption:
      `${d.dragName} (domain mean over each decision interval of ${ci} time units, plotted at the interval's end; 1 = the uncontrolled reference) for each controller on the same held-out initial states. ` +
      `Line: mean over the ${d.episodes} evaluation episodes${d.controllers.some((c) => c.entries.length > 1) ? ' of each run, pooled over the runs (seeds) of a setting' : ''}; band: ${bandWords(kind, 'episodes')}. ` +
      `Grey: the first ${d.discardDecisions} decisions after switching the controller on, left out of every statistic.`,
    spec: {
      ...SIZE,
      data: { values: rows },
      layer: [
        { transform: [{ filter: "datum.kind === 'transient'" }], mark: { type: 'rect', color: '#000', opacity: 0.07 }, encoding: { x: { field: 't0', type: 'quantitative' }, x2: { field: 't1' } } },
        { mark: { type: 'rule', strokeDash: [2, 3], color: '#888' }, encoding: { y: { datum: 1 } } },
        {
          name: 'dragcurve',
          transform: [{ filter: "datum.kind === 'curve'" }],
          mark: { type: 'line', strokeWidth: 1.6 },
          encoding: {
            x: { field: 't', type: 'quantitative', title: 'time since the controller was switched on', scale: { domain: [0, d.decisions * ci], nice: false } },
            y: { field: 'mean', type: 'quantitative', title: d.dragName },
            color: { ...color, legend: LINE_LEGEND },
          },
        },
        ...(rows.some((r) => r.kind === 'curve' && r.lo !== null) ? [{
          transform: [{ filter: "datum.kind === 'curve' && isValid(datum.lo)" }],
          mark: { type: 'area', fillOpacity: 0.18 },
          encoding: { x: { field: 't', type: 'quantitative' }, y: { field: 'lo', type: 'quantitative' }, y2: { field: 'hi' }, color },
        }] : []),
      ],
    },
    primary: { name: 'dragcurve_marks', items: nCurves },
  };
}

function sweepFigure(d: DomainView): Figure | null {
  const op = d.first.summary.opposition;
  if (!op || !op.sweep.length) return null;
  const rows = op.sweep
    .filter((r) => r.drag)
    .map((r) => {
      const hw = r.drag!.halfWidth;
      return { alpha: fix(r.alpha), mean: fix(r.drag!.mean), lo: hw === null ? null : fix(r.drag!.mean - hw), hi: hw === null ? null : fix(r.drag!.mean + hw), best: r.alpha === op.bestAlpha ? 'best gain' : 'tried' };
    });
  if (!rows.length) return null;
  return {
    id: `sweep-${d.slug}`,
    section: domainTitle(d),
    title: 'Tuning the opposition baseline',
    caption: `${d.dragName} of opposition control a = clip(-alpha s) for each gain alpha on the tuning seeds (separate from the evaluation seeds), mean with its Student-t 95% interval over the tuning episodes; the best gain (alpha = ${fix(op.bestAlpha, 4)}) is the baseline evaluated above.`,
    spec: {
      ...SIZE,
      height: 200,
      data: { values: rows },
      layer: [
        ...(rows.some((r) => r.lo !== null)
          ? [{ transform: [{ filter: 'isValid(datum.lo)' }], mark: { type: 'rule', color: '#ff7f0e' }, encoding: { x: { field: 'alpha', type: 'quantitative', scale: { type: 'log' } }, y: { field: 'lo', type: 'quantitative' }, y2: { field: 'hi' } } }]
          : []),
        {
          name: 'sweeppoints',
          mark: { type: 'point', filled: true, size: 70 },
          encoding: {
            x: { field: 'alpha', type: 'quantitative', scale: { type: 'log' }, title: 'opposition gain alpha (log scale)' },
            y: { field: 'mean', type: 'quantitative', title: d.dragName, scale: { zero: false } },
            color: { field: 'best', type: 'nominal', title: null, scale: { domain: ['tried', 'best gain'], range: ['#ffbb78', '#d62728'] } },
            tooltip: [
              { field: 'alpha', type: 'quantitative', format: '.3g' },
              { field: 'mean', type: 'quantitative', format: '.3f' },
            ],
          },
        },
      ],
    },
    primary: { name: 'sweeppoints_marks', items: rows.length },
  };
}

// ---------------------------------------------------------------------------------------------
// Fields: space-time diagrams (1-D) and snapshots (2-D)
// ---------------------------------------------------------------------------------------------

/** Most grid columns and time rows a heatmap draws per controller (coarser data is subsampled). */
export const HEATMAP_MAX = { columns: 64, rows: 100 };

/** Snapshots of the first recorded episode of a controller's first run, in decision order. */
function firstEpisodeSnapshots(c: ControllerView): { series: NonNullable<ControllerView['entries'][number]['series']>; frames: Array<{ f: number; decision: number }> } | null {
  const e = c.entries.find((x) => x.series && x.series.fieldSize > 0 && x.series.fieldIndex.length > 0);
  if (!e) return null;
  const s = e.series!;
  const ep = s.fieldIndex[0]!;
  const frames: Array<{ f: number; decision: number }> = [];
  for (let f = 0; f < s.fieldIndex.length / 2; f++) if (s.fieldIndex[2 * f] === ep) frames.push({ f, decision: s.fieldIndex[2 * f + 1]! });
  frames.sort((a, b) => a.decision - b.decision);
  return { series: s, frames };
}

function spaceTimeFigure(d: DomainView): Figure | null {
  const g = fieldGrid(d);
  const ci = d.controlInterval;
  if (!g || d.kind !== 'ks' || ci === null) return null;
  const rows: Array<Record<string, unknown>> = [];
  let umax = 0;
  const order: string[] = [];
  for (const c of d.controllers) {
    const snaps = firstEpisodeSnapshots(c);
    if (!snaps || snaps.frames.length < 2 || snaps.series.fieldSize !== g.nx) continue;
    order.push(c.id);
    const sx = Math.ceil(g.nx / HEATMAP_MAX.columns);
    const st = Math.ceil(snaps.frames.length / HEATMAP_MAX.rows);
    const dx = g.lx / g.nx;
    const frames = snaps.frames.filter((_, i) => i % st === 0);
    frames.forEach((fr, i) => {
      const t0 = fr.decision * ci;
      const t1 = i + 1 < frames.length ? frames[i + 1]!.decision * ci : t0 + (frames.length > 1 ? t0 - frames[i - 1]!.decision * ci : ci);
      const snap = snaps.series.field.subarray(fr.f * g.nx, (fr.f + 1) * g.nx);
      for (let j = 0; j < g.nx; j += sx) {
        const u = snap[j]!;
        if (Math.abs(u) > umax && Number.isFinite(u)) umax = Math.abs(u);
        rows.push({ controller: c.id, x0: fix(j * dx, 5), x1: fix((j + sx) * dx, 5), t0: fix(t0, 5), t1: fix(t1, 5), u: fix(u, 4) });
      }
    });
  }
  if (!rows.length) return null;
  return {
    id: `spacetime-${d.slug}`,
    section: domainTitle(d),
    title: 'Space-time diagrams of u',
    caption:
      `u(x, t) over the first held-out episode for each controller (the same initial state), from the recorded field snapshots; time runs upwards from the moment the controller is switched on. ` +
      `Shared, symmetric color scale; the tiles are ${g.lx / d.tiles} long. A controller that calms the flow shows weaker, more regular streaks.`,
    spec: panels(
      rows,
      order,
      [
        cellLayer(
          'cells',
          { from: 'x0', to: 'x1', title: 'x', domain: [0, g.lx] },
          { from: 't0', to: 't1', title: 'time' },
          { field: 'u', type: 'quantitative', title: 'u', scale: { scheme: 'redblue', reverse: true, domain: [-umax, umax] } },
        ),
      ],
      { height: 260 },
    ),
    primary: { name: 'cells_marks', items: rows.length },
  };
}

function snapshotFigure(d: DomainView): Figure | null {
  const g = fieldGrid(d);
  if (!g || d.kind !== 'kolmogorov') return null;
  const P = g.nx * g.ny;
  const rows: Array<Record<string, unknown>> = [];
  const order: string[] = [];
  let wmax = 0;
  let at = 0;
  for (const c of d.controllers) {
    const snaps = firstEpisodeSnapshots(c);
    if (!snaps || snaps.series.fieldSize !== 3 * P) continue;
    const last = snaps.frames.at(-1)!;
    at = last.decision;
    order.push(c.id);
    const w = snaps.series.field.subarray(last.f * 3 * P, last.f * 3 * P + P);
    const s = Math.max(1, Math.ceil(Math.max(g.nx, g.ny) / 64));
    const dx = g.lx / g.nx;
    const dy = g.ly / g.ny;
    for (let j = 0; j < g.ny; j += s) {
      for (let i = 0; i < g.nx; i += s) {
        const v = w[j * g.nx + i]!;
        if (Number.isFinite(v) && Math.abs(v) > wmax) wmax = Math.abs(v);
        rows.push({ controller: c.id, x0: fix(i * dx, 5), x1: fix((i + s) * dx, 5), y0: fix(j * dy, 5), y1: fix((j + s) * dy, 5), w: fix(v, 4) });
      }
    }
  }
  if (!rows.length) return null;
  return {
    id: `snapshot-${d.slug}`,
    section: domainTitle(d),
    title: 'Vorticity snapshots',
    caption: `Vorticity of the first held-out episode at its last recorded decision (${at}) for each controller, from the same initial state; shared symmetric color scale. The forcing is sin(n y) along x.`,
    spec: panels(rows, order, [
      cellLayer(
        'cells',
        { from: 'x0', to: 'x1', title: 'x', domain: [0, g.lx] },
        { from: 'y0', to: 'y1', title: 'y', domain: [0, g.ly] },
        { field: 'w', type: 'quantitative', title: 'vorticity', scale: { scheme: 'redblue', reverse: true, domain: [-wmax, wmax] } },
      ),
    ]),
    primary: { name: 'cells_marks', items: rows.length },
  };
}

// ---------------------------------------------------------------------------------------------
// Actuation
// ---------------------------------------------------------------------------------------------

/** Actuators drawn in the time-series figure. */
export const ACTUATORS_SHOWN = 3;

function actuated(d: DomainView): ControllerView[] {
  return d.controllers.filter((c) => c.role !== 'none' && c.entries.some((e) => e.series && e.domain.series && e.domain.series.actuators > 0));
}

function actuationFigure(d: DomainView): Figure | null {
  const ci = d.controlInterval;
  const bound = d.actionBound;
  if (ci === null || bound === null) return null;
  const rows: Array<Record<string, unknown>> = [];
  const order: string[] = [];
  for (const c of actuated(d)) {
    const e = c.entries.find((x) => x.series && x.domain.series)!;
    const { decisions: D, actuators: A } = e.domain.series!;
    order.push(c.id);
    for (let a = 0; a < Math.min(ACTUATORS_SHOWN, A); a++) {
      for (let k = 0; k < D; k++) rows.push({ controller: c.id, actuator: `actuator ${a + 1}`, t: fix(k * ci), a: fix(e.series!.actions[k * A + a]!, 5) });
    }
  }
  if (!rows.length) return null;
  const lines = new Set(rows.map((r) => `${r.controller}|${r.actuator}`)).size;
  return {
    id: `actuation-${d.slug}`,
    section: domainTitle(d),
    title: 'Actuation over time',
    caption: `Applied amplitudes of the first ${Math.min(ACTUATORS_SHOWN, d.tiles)} actuators over the first held-out episode (held over each decision interval); dashed: the bounds ±${bound}. No control acts 0 and is not shown.`,
    spec: panels(
      rows,
      order,
      [
        { mark: { type: 'rule', strokeDash: [4, 3], color: '#999' }, encoding: { y: { datum: bound } } },
        { mark: { type: 'rule', strokeDash: [4, 3], color: '#999' }, encoding: { y: { datum: -bound } } },
        {
          name: 'amplitude',
          mark: { type: 'line', interpolate: 'step-after', strokeWidth: 1.2 },
          encoding: {
            x: { field: 't', type: 'quantitative', title: 'time since the controller was switched on', scale: { domain: [0, d.decisions * ci], nice: false } },
            y: { field: 'a', type: 'quantitative', title: 'amplitude', scale: { domain: [-bound * 1.05, bound * 1.05] } },
            color: { field: 'actuator', type: 'nominal', title: null, scale: { scheme: 'dark2' } },
          },
        },
      ],
      { dir: 'row', width: SIZE.width, height: 110 },
    ),
    primary: { name: 'amplitude_marks', items: lines },
  };
}

function histogramFigures(d: DomainView, bins: number): Figure[] {
  const bound = d.actionBound;
  if (bound === null) return [];
  const hist: Array<Record<string, unknown>> = [];
  const shares: Array<Record<string, unknown>> = [];
  const order: string[] = [];
  for (const c of actuated(d)) {
    const amps = amplitudesAfterTransient(c, bound);
    if (!amps) continue;
    const h = histogram(amps, bins, -bound, bound);
    const sh = boundShares(amps, bound);
    const panel = `${c.id} (at bounds ${pct(sh.atBounds)})`;
    order.push(panel);
    h.counts.forEach((n, i) => hist.push({ panel, controller: c.id, a0: fix(h.edges[i]!), a1: fix(h.edges[i + 1]!), share: fix(n / h.total) }));
    shares.push(
      { kind: 'side', controller: c.id, side: 'at the lower bound', share: fix(sh.lower) },
      { kind: 'side', controller: c.id, side: 'at the upper bound', share: fix(sh.upper) },
      { kind: 'total', controller: c.id, share: fix(sh.atBounds), text: `${pct(sh.atBounds)} (${pct(sh.lower)} low, ${pct(sh.upper)} high)` },
    );
  }
  if (!hist.length) return [];
  const barOrder = shares.filter((r) => r.kind === 'total').map((r) => r.controller as string);
  const out: Figure[] = [
    {
      id: `histogram-${d.slug}`,
      section: domainTitle(d),
      title: 'Amplitude histogram',
      caption:
        `Share of applied amplitudes in each of ${bins} bins over [-${bound}, ${bound}], all actuators, decisions after the transient, all held-out episodes` +
        `${d.controllers.some((c) => c.entries.length > 1) ? ' and seeds' : ''}. Tall end bins mean the controller saturates (a two-level switch puts everything there).`,
      spec: panels(
        hist,
        order,
        [
          {
            name: 'bins',
            mark: { type: 'rect', stroke: '#fff', strokeWidth: 0.5 },
            encoding: {
              x: { field: 'a0', type: 'quantitative', title: 'amplitude', scale: { domain: [-bound, bound], nice: false } },
              x2: { field: 'a1' },
              y: { field: 'share', type: 'quantitative', title: 'share of actuator-decisions' },
              color: { field: 'controller', type: 'nominal', legend: null, scale: controllerColors(d.controllers) },
            },
          },
        ],
        { field: 'panel', height: 160 },
      ),
      primary: { name: 'bins_marks', items: hist.length },
    },
    {
      id: `bounds-${d.slug}`,
      section: domainTitle(d),
      title: 'Time at the bounds',
      caption: `Share of actuator-decisions (after the transient) whose amplitude is at the lower or upper bound (|a| >= ${bound}, the evaluation's rule); the tables give the interval over episodes.`,
      spec: {
        width: 420,
        height: { step: 26 },
        data: { values: shares },
        layer: [
          {
            name: 'shares',
            transform: [{ filter: "datum.kind === 'side'" }],
            mark: { type: 'bar' },
            encoding: {
              y: { field: 'controller', type: 'nominal', title: null, sort: barOrder },
              x: { field: 'share', type: 'quantitative', title: 'share of time at a bound', scale: { domain: [0, 1] }, axis: { format: '%' } },
              color: { field: 'side', type: 'nominal', title: null, scale: { domain: ['at the lower bound', 'at the upper bound'], range: ['#6baed6', '#fd8d3c'] } },
              tooltip: [
                { field: 'controller', type: 'nominal' },
                { field: 'side', type: 'nominal' },
                { field: 'share', type: 'quantitative', format: '.1%' },
              ],
            },
          },
          {
            transform: [{ filter: "datum.kind === 'total'" }],
            mark: { type: 'text', align: 'left', dx: 5, fontSize: 11, color: '#333' },
            encoding: { y: { field: 'controller', type: 'nominal', sort: barOrder }, x: { field: 'share', type: 'quantitative' }, text: { field: 'text' } },
          },
        ],
      },
      primary: { name: 'shares_marks', items: shares.filter((r) => r.kind === 'side').length },
    },
  ];
  return out;
}

/** Cells per axis of the joint histograms. */
export const JOINT_BINS = 40;

function controlLawFigure(d: DomainView): Figure | null {
  const bound = d.actionBound;
  if (bound === null) return null;
  const cs = actuated(d);
  const pairs: Array<{ c: ControllerView; s: Float32Array; a: Float64Array }> = [];
  for (const c of cs) {
    const s = afterTransient(c, (x) => x.signal);
    const a = amplitudesAfterTransient(c, bound);
    if (s && a) pairs.push({ c, s, a });
  }
  if (!pairs.length) return null;
  const smax = Math.max(...pairs.map((p) => maxAbs(p.s))) || 1;
  const rows: Array<Record<string, unknown>> = [];
  for (const p of pairs) {
    const h = histogram2d(p.s, p.a, JOINT_BINS, JOINT_BINS, [-smax, smax], [-bound, bound]);
    h.counts.forEach((n, k) => {
      if (n === 0) return;
      const i = k % JOINT_BINS;
      const j = Math.floor(k / JOINT_BINS);
      rows.push({ controller: p.c.id, s0: fix(h.xEdges[i]!), s1: fix(h.xEdges[i + 1]!), a0: fix(h.yEdges[j]!), a1: fix(h.yEdges[j + 1]!), share: fix(n / h.total) });
    });
  }
  return {
    id: `control-law-${d.slug}`,
    section: domainTitle(d),
    title: 'What each controller does with what it senses',
    caption:
      'Joint histogram of the opposition signal s at each actuator (the sensed quantity opposition control answers) and the amplitude applied there, decisions after the transient, all held-out episodes (log color scale, empty cells blank). ' +
      'Opposition control lies on the line a = clip(-alpha s); a policy that uses more of its observation spreads around it.',
    spec: panels(
      rows,
      pairs.map((p) => p.c.id),
      [
        cellLayer(
          'lawcells',
          { from: 's0', to: 's1', title: 'opposition signal s', domain: [-smax, smax] },
          { from: 'a0', to: 'a1', title: 'amplitude a', domain: [-bound, bound] },
          { field: 'share', type: 'quantitative', title: 'share', scale: { type: 'log', scheme: 'viridis' } },
        ),
      ],
    ),
    primary: { name: 'lawcells_marks', items: rows.length },
  };
}

// ---------------------------------------------------------------------------------------------
// Fluctuations: joint distribution and quadrant fractions
// ---------------------------------------------------------------------------------------------

export interface JointResult {
  readonly figure: Figure | null;
  readonly quadrants: QuadrantRow[];
}

function jointFigure(d: DomainView): JointResult {
  const samples = d.controllers.map((c) => ({ c, s: fluctuationSamples(d, c) })).filter((x) => x.s !== null) as Array<{ c: ControllerView; s: NonNullable<ReturnType<typeof fluctuationSamples>> }>;
  if (!samples.length) return { figure: null, quadrants: [] };
  const quadrants = samples.map(({ c, s }) => quadrantRow(c.id, s));
  // Axes: ±4 rms of the largest rms among the controllers, per component (shared by all panels).
  const ra = 4 * Math.max(...samples.map(({ s }) => rms(s.a)));
  const rb = 4 * Math.max(...samples.map(({ s }) => rms(s.b)));
  const names = samples[0]!.s.names;
  const rows: Array<Record<string, unknown>> = [];
  samples.forEach(({ c, s }, idx) => {
    const h = histogram2d(s.a, s.b, JOINT_BINS, JOINT_BINS, [-ra, ra], [-rb, rb]);
    const area = ((2 * ra) / JOINT_BINS) * ((2 * rb) / JOINT_BINS);
    h.counts.forEach((n, k) => {
      if (n === 0) return;
      const i = k % JOINT_BINS;
      const j = Math.floor(k / JOINT_BINS);
      rows.push({ kind: 'cell', controller: c.id, a0: fix(h.xEdges[i]!), a1: fix(h.xEdges[i + 1]!), b0: fix(h.yEdges[j]!), b1: fix(h.yEdges[j + 1]!), density: fix(n / (s.a.length * area)) });
    });
    const q = quadrants[idx]!.fractions;
    const at = [
      [0.62, 0.9],
      [-0.62, 0.9],
      [-0.62, -0.9],
      [0.62, -0.9],
    ];
    q.forEach((f, i) => rows.push({ kind: 'label', controller: c.id, x: fix(at[i]![0]! * ra), y: fix(at[i]![1]! * rb), text: `Q${i + 1} ${pct(f)}` }));
  });
  const cells = rows.filter((r) => r.kind === 'cell').length;
  const [na, nb] = names;
  const what =
    d.kind === 'ks'
      ? `u' = u - <u> and the slope u_x at every grid point (u_x^2 averages to P, the drag analogue)`
      : `u' and v' at every grid point, the mean flow taken per y row (it depends on y only)`;
  return {
    quadrants,
    figure: {
      id: `joint-${d.slug}`,
      section: domainTitle(d),
      title: `Joint distribution of ${na} and ${nb}`,
      caption:
        `Joint probability density of ${what}, from the field snapshots after the transient (log color scale; axes ±4 rms of the most energetic controller). ` +
        `Labels: the share of samples in each quadrant, Q1 (${na} > 0, ${nb} > 0), Q2 (${na} < 0, ${nb} > 0), Q3 (both < 0), Q4 (${na} > 0, ${nb} < 0).`,
      spec: panels(
        rows,
        samples.map(({ c }) => c.id),
        [
          cellLayer(
            'jointcells',
            { from: 'a0', to: 'a1', title: na, domain: [-ra, ra] },
            { from: 'b0', to: 'b1', title: nb, domain: [-rb, rb] },
            { field: 'density', type: 'quantitative', title: 'density', scale: { type: 'log', scheme: 'blues' } },
            "datum.kind === 'cell'",
          ),
          { mark: { type: 'rule', color: '#444', strokeWidth: 0.7 }, encoding: { x: { datum: 0 } } },
          { mark: { type: 'rule', color: '#444', strokeWidth: 0.7 }, encoding: { y: { datum: 0 } } },
          {
            name: 'quadrantlabels',
            transform: [{ filter: "datum.kind === 'label'" }],
            mark: { type: 'text', fontSize: 11, fontWeight: 'bold', color: '#b30000' },
            encoding: { x: { field: 'x', type: 'quantitative' }, y: { field: 'y', type: 'quantitative' }, text: { field: 'text' } },
          },
        ],
      ),
      primary: { name: 'jointcells_marks', items: cells },
    },
  };
}

// ---------------------------------------------------------------------------------------------

export interface DomainFigures {
  readonly domain: DomainView;
  readonly figures: Figure[];
  readonly quadrants: QuadrantRow[];
  readonly notes: FigureNote[];
}

export interface AllFigures {
  readonly learning: Figure[];
  readonly domains: DomainFigures[];
}

export function buildFigures(m: ReportModel): AllFigures {
  const domains = m.domains.map((d): DomainFigures => {
    const section = domainTitle(d);
    const notes: FigureNote[] = [];
    const figures: Figure[] = [];
    const add = (f: Figure | null, missing: string): void => {
      if (f) figures.push(f);
      else notes.push({ section, text: missing });
    };
    const hasSeries = d.controllers.some((c) => c.entries.some((e) => e.series));
    add(dragTimeFigure(d, m.band), hasSeries ? `No ${d.dragName} time series could be drawn.` : 'No time series: this evaluation has no series.twdata.');
    const sw = sweepFigure(d);
    if (sw) figures.push(sw);
    if (d.kind === 'ks') add(spaceTimeFigure(d), 'No space-time diagram: fewer than two field snapshots of the first episode were recorded (evaluation.record.fieldEvery).');
    else if (d.kind === 'kolmogorov') add(snapshotFigure(d), 'No field snapshots were recorded (evaluation.record.fieldEvery).');
    else notes.push({ section, text: `Surrogate "${d.kind}": the report does not know its field layout, so no field figures.` });
    add(actuationFigure(d), 'No actuation series (no controller acted, or no series.twdata).');
    const bins = d.first.series?.controllers[0]?.histogram.length ?? 41;
    const hf = histogramFigures(d, bins);
    if (hf.length) figures.push(...hf);
    else notes.push({ section, text: 'No amplitude histogram (no recorded actuation).' });
    add(controlLawFigure(d), 'No signal/action pairs recorded.');
    const j = jointFigure(d);
    add(j.figure, 'No fluctuation statistics: no field snapshots after the discarded transient (raise evaluation.record.fieldEvery/fieldEpisodes or the episode length).');
    if (d.mixedEnvs) notes.push({ section, text: `The runs' "${d.label}" domains differ in their environment; baselines are shown once per environment.` });
    return { domain: d, figures, quadrants: j.quadrants, notes };
  });
  return { learning: learningFigures(m), domains };
}
