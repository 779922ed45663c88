/**
 * From the runs read by data.ts to what the report shows: runs grouped into settings (runs that
 * differ only in their seed), and for each evaluation domain the controllers side by side: the
 * policy of each setting (its seeds pooled) and the baselines (no control, tuned opposition,
 * random) once per distinct environment. Every number of the tables is computed here; the
 * figures (figures.ts) draw the same quantities.
 */
import { fluctuationStats, meanWithCi, SpectralDerivative, type FluctuationStats } from '@tilewise/envs';
import { canonicalJson, type ControllerSeries, type ControllerSummary, type DomainData, type RunData, type SweepAggregate } from './data';
import { boundShares, pairedDifference, rms, type BandKind, type BoundShares } from './stats';

export interface Setting {
  readonly key: string;
  readonly label: string;
  readonly runs: readonly RunData[];
}

/** One controller of one domain, with the data of every run that evaluated it. */
export interface ControllerView {
  /** Unique display name (legends, tables). */
  readonly id: string;
  readonly role: ControllerSummary['role'];
  /** The evaluation's own name, e.g. "opposition(alpha=3)" or "policy (best, step 2000)". */
  readonly name: string;
  /** The setting of a policy; null for baselines. */
  readonly setting: Setting | null;
  /** One entry per run (seed) that evaluated this controller on this domain. */
  readonly entries: ReadonlyArray<{ readonly run: RunData; readonly domain: DomainData; readonly summary: ControllerSummary; readonly series: ControllerSeries | null }>;
}

export interface DomainView {
  /** The evaluation's domain label (train, transfer-1, ...), with the surrogate appended when a report mixes surrogates under one label. */
  readonly label: string;
  /** Directory- and id-safe form of the label. */
  readonly slug: string;
  /** The evaluation's own label: train, transfer-<i> or transfer. */
  readonly evalLabel: string;
  readonly kind: string;
  readonly dragName: string;
  readonly tiles: number;
  readonly env: Record<string, unknown>;
  /** True when the domains under this label do not all share one environment. */
  readonly mixedEnvs: boolean;
  readonly controlInterval: number | null;
  readonly actionBound: number | null;
  readonly decisions: number;
  readonly discardDecisions: number;
  readonly episodes: number;
  readonly controllers: readonly ControllerView[];
  /** The first domain data under this label (opposition sweep, reference). */
  readonly first: DomainData;
}

export interface ReportModel {
  readonly runs: readonly RunData[];
  readonly settings: readonly Setting[];
  readonly domains: readonly DomainView[];
  readonly sweep: SweepAggregate | null;
  readonly band: BandKind;
}

/** Group runs into settings, in input order; a sweep's setting names win over config names. */
export function groupSettings(runs: readonly RunData[]): Setting[] {
  const byKey = new Map<string, RunData[]>();
  for (const r of runs) {
    const k = `${r.settingKey}\u0000${r.settingLabel}`;
    byKey.set(k, [...(byKey.get(k) ?? []), r]);
  }
  const settings = [...byKey.entries()].map(([key, rs]) => ({ key, label: rs[0]!.settingLabel, runs: rs }));
  // Distinct settings that happen to share a label get a suffix.
  const seen = new Map<string, number>();
  return settings.map((s) => {
    const k = (seen.get(s.label) ?? 0) + 1;
    seen.set(s.label, k);
    return k === 1 ? s : { ...s, label: `${s.label} #${k}` };
  });
}

export function buildModel(runs: readonly RunData[], bandKind: BandKind, sweep: SweepAggregate | null = null): ReportModel {
  const settings = groupSettings(runs);
  // Domains are matched by label and surrogate (a report may hold runs on different surrogates).
  const keys: Array<{ label: string; kind: string }> = [];
  for (const r of runs) for (const d of r.domains) if (!keys.some((k) => k.label === d.label && k.kind === d.summary.kind)) keys.push({ label: d.label, kind: d.summary.kind });
  keys.sort((a, b) => (a.label === 'train' ? 0 : 1) - (b.label === 'train' ? 0 : 1));
  const domains = keys.map(({ label, kind }) => {
    const shared = keys.filter((k) => k.label === label).length > 1;
    return buildDomain(label, kind, shared ? `${label} (${kind})` : label, settings);
  });
  return { runs, settings, domains, sweep, band: bandKind };
}

function buildDomain(evalLabel: string, kind: string, label: string, settings: readonly Setting[]): DomainView {
  const controllers: ControllerView[] = [];
  const baselines = new Map<string, ControllerView & { entries: ControllerView['entries'][number][] }>();
  const envs = new Set<string>();
  let first: DomainData | null = null;
  const multi = settings.length > 1;
  for (const s of settings) {
    const policyEntries: Array<ControllerView['entries'][number]> = [];
    let policyName = '';
    for (const run of s.runs) {
      const d = run.domains.find((x) => x.label === evalLabel && x.summary.kind === kind);
      if (!d) continue;
      first ??= d;
      const envKey = canonicalJson(d.summary.env);
      envs.add(envKey);
      d.summary.controllers.forEach((c, i) => {
        const series = d.series?.controllers[i] ?? null;
        if (c.role === 'policy') {
          policyEntries.push({ run, domain: d, summary: c, series });
          policyName = c.name;
          return;
        }
        // Baselines are deterministic given the environment and the seeds: one entry per distinct setup.
        const key = `${c.name}\u0000${envKey}\u0000${canonicalJson(d.summary.protocol)}`;
        if (!baselines.has(key)) baselines.set(key, { id: c.name, role: c.role, name: c.name, setting: null, entries: [{ run, domain: d, summary: c, series }] });
      });
    }
    if (policyEntries.length) {
      const n = policyEntries.length;
      const id = multi ? `${s.label}: policy${n > 1 ? ` (${n} seeds)` : ''}` : n > 1 ? `policy (${n} seeds)` : policyName;
      controllers.push({ id, role: 'policy', name: policyName, setting: s, entries: policyEntries });
    }
  }
  // Baselines of different environments under one label get the name of the environment's first run.
  const names = new Map<string, number>();
  for (const b of baselines.values()) names.set(b.name, (names.get(b.name) ?? 0) + 1);
  for (const b of baselines.values()) {
    controllers.push(names.get(b.name)! > 1 ? { ...b, id: `${b.name} [${b.entries[0]!.run.settingLabel}]` } : b);
  }
  const f = first!;
  const series = f.series;
  return {
    label,
    slug: label.replace(/[^A-Za-z0-9._-]+/g, '-').replace(/-+$/, ''),
    evalLabel,
    kind: f.summary.kind,
    dragName: f.summary.dragName,
    tiles: f.summary.tiles,
    env: f.summary.env,
    mixedEnvs: envs.size > 1,
    controlInterval: series?.controlInterval ?? null,
    actionBound: series?.actionBound ?? (typeof f.summary.env.actionBound === 'number' ? f.summary.env.actionBound : null),
    decisions: f.summary.protocol.episodeLength,
    discardDecisions: f.summary.protocol.discardDecisions,
    episodes: f.summary.protocol.seeds.length,
    controllers,
    first: f,
  };
}

// ---------------------------------------------------------------------------------------------
// Table figures
// ---------------------------------------------------------------------------------------------

type Ci = { mean: number; halfWidth: number | null; n: number } | null;

/** A row of a domain's comparison table. */
export interface ControllerRow {
  readonly controller: string;
  readonly role: string;
  /** Runs (seeds) behind the row. */
  readonly runs: number;
  readonly episodes: number;
  readonly diverged: number;
  readonly drag: Ci;
  readonly netSaving: Ci;
  readonly actuationPower: Ci;
  readonly atBounds: Ci;
  /** Which interval: over episodes of one run, or over the per-seed means of several. */
  readonly interval: 'episodes' | 'seeds';
  /** Shares of amplitudes at the lower and upper bound (from the recorded series), when recorded. */
  readonly bounds: BoundShares | null;
}

function ciOf(x: { mean: number; halfWidth: number | null; n: number } | null): Ci {
  return x ? { mean: x.mean, halfWidth: x.halfWidth, n: x.n } : null;
}

/** Mean over seeds of per-seed means, with a Student-t interval over seeds. */
function overSeeds(values: ReadonlyArray<number | null | undefined>): Ci {
  const v = values.filter((x): x is number => typeof x === 'number' && Number.isFinite(x));
  if (!v.length) return null;
  const m = meanWithCi(v);
  return { mean: m.mean, halfWidth: Number.isFinite(m.halfWidth) ? m.halfWidth : null, n: m.n };
}

/** Episode indices (in protocol.seeds order) that diverged: their recorded series end in a zeroed or NaN state. */
export function divergedEpisodes(summary: ControllerSummary): Set<number> {
  const out = new Set<number>();
  summary.perEpisode.forEach((e, i) => {
    if (e.diverged) out.add(i);
  });
  return out;
}

/**
 * A per-actuator series of a controller ([E, D, A] blocks: actions or signal) for the decisions
 * after the discarded transient, pooled over its runs; episodes that diverged are left out,
 * as in the evaluation's statistics. Null when nothing was recorded.
 */
export function afterTransient(c: ControllerView, pick: (s: ControllerSeries) => Float32Array): Float32Array | null {
  const parts: Float32Array[] = [];
  for (const e of c.entries) {
    const s = e.series;
    const sd = e.domain.series;
    if (!s || !sd || sd.actuators === 0) continue;
    const { episodes: E, decisions: D, actuators: A, discardDecisions: k0 } = sd;
    const diverged = divergedEpisodes(e.summary);
    const data = pick(s);
    for (let ep = 0; ep < E; ep++) if (!diverged.has(ep)) parts.push(data.subarray((ep * D + k0) * A, (ep + 1) * D * A));
  }
  if (!parts.length) return null;
  const out = new Float32Array(parts.reduce((n, p) => n + p.length, 0));
  let o = 0;
  for (const p of parts) {
    out.set(p, o);
    o += p.length;
  }
  return out;
}

/**
 * Applied amplitudes of a controller after the discarded transient (see afterTransient), as
 * float64 clamped to [-bound, bound]: they were clipped when applied, and their float32
 * rounding may land just outside the bound.
 */
export function amplitudesAfterTransient(c: ControllerView, bound: number): Float64Array | null {
  const a = afterTransient(c, (s) => s.actions);
  return a && Float64Array.from(a, (v) => (v > bound ? bound : v < -bound ? -bound : v));
}

export function controllerRows(d: DomainView): ControllerRow[] {
  return d.controllers.map((c) => {
    const amps = d.actionBound ? amplitudesAfterTransient(c, d.actionBound) : null;
    const bounds = amps ? boundShares(amps, d.actionBound!) : null;
    const sums = c.entries.map((e) => e.summary);
    const episodes = sums.reduce((n, s) => n + s.episodes, 0);
    const diverged = sums.reduce((n, s) => n + s.divergedEpisodes, 0);
    if (c.entries.length === 1) {
      const s = sums[0]!;
      return {
        controller: c.id,
        role: c.role,
        runs: 1,
        episodes,
        diverged,
        drag: ciOf(s.drag),
        netSaving: ciOf(s.netSaving),
        actuationPower: ciOf(s.actuationPower),
        atBounds: ciOf(s.atBounds),
        interval: 'episodes',
        bounds,
      };
    }
    return {
      controller: c.id,
      role: c.role,
      runs: c.entries.length,
      episodes,
      diverged,
      drag: overSeeds(sums.map((s) => s.drag?.mean)),
      netSaving: overSeeds(sums.map((s) => s.netSaving?.mean)),
      actuationPower: overSeeds(sums.map((s) => s.actuationPower?.mean)),
      atBounds: overSeeds(sums.map((s) => s.atBounds?.mean)),
      interval: 'seeds',
      bounds,
    };
  });
}

/** A policy against a baseline on the same initial states. */
export interface Comparison {
  readonly domain: string;
  readonly policy: string;
  readonly baseline: string;
  /** Mean difference policy - baseline of the drag analogue with its 95% half-width. */
  readonly n: number;
  readonly mean: number;
  readonly halfWidth: number;
  readonly over: 'episodes' | 'seeds';
  readonly verdict: 'lower' | 'higher' | 'not distinguishable';
}

/** Per-episode drag of a controller entry by episode seed (NaN for diverged episodes). */
function dragBySeed(s: ControllerSummary): Map<number, number> {
  return new Map(s.perEpisode.map((e) => [e.seed, e.drag === null || e.diverged ? NaN : e.drag]));
}

/**
 * Paired comparisons of each policy with the tuned opposition baseline and with no control:
 * one run pairs episodes by seed (identical initial states); several runs (seeds of a
 * setting) pair each run's episode-mean difference and take the interval over runs.
 */
export function comparisons(d: DomainView): Comparison[] {
  const out: Comparison[] = [];
  const baselines = d.controllers.filter((c) => c.role === 'opposition' || c.role === 'none');
  for (const p of d.controllers.filter((c) => c.role === 'policy')) {
    for (const b of baselines) {
      const diffs: number[] = [];
      let single: { n: number; mean: number; halfWidth: number } | null = null;
      for (const e of p.entries) {
        // The baseline run on the same environment and seeds as this policy entry.
        const be = b.entries.find((x) => canonicalJson(x.domain.summary.env) === canonicalJson(e.domain.summary.env)) ?? null;
        if (!be) continue;
        const pd = dragBySeed(e.summary);
        const bd = dragBySeed(be.summary);
        const seeds = [...pd.keys()].filter((s) => bd.has(s));
        const pr = pairedDifference(
          seeds.map((s) => pd.get(s)!),
          seeds.map((s) => bd.get(s)!),
        );
        if (p.entries.length === 1) single = pr;
        else if (pr.n > 0) diffs.push(pr.mean);
      }
      let r: { n: number; mean: number; halfWidth: number };
      let over: Comparison['over'] = 'episodes';
      if (single) r = single;
      else {
        if (!diffs.length) continue;
        const m = meanWithCi(diffs);
        r = { n: m.n, mean: m.mean, halfWidth: m.halfWidth };
        over = 'seeds';
      }
      if (r.n === 0) continue;
      const verdict = !Number.isFinite(r.halfWidth) ? 'not distinguishable' : r.mean + r.halfWidth < 0 ? 'lower' : r.mean - r.halfWidth > 0 ? 'higher' : 'not distinguishable';
      out.push({ domain: d.label, policy: p.id, baseline: b.id, n: r.n, mean: r.mean, halfWidth: r.halfWidth, over, verdict });
    }
  }
  return out;
}

// ---------------------------------------------------------------------------------------------
// Fluctuation samples from field snapshots
// ---------------------------------------------------------------------------------------------

/** Two fluctuation components at every grid point of the snapshots taken after the transient. */
export interface FluctuationSamples {
  /** Names of the two components, e.g. ["u'", "u_x"] or ["u'", "v'"]. */
  readonly names: readonly [string, string];
  readonly a: Float64Array;
  readonly b: Float64Array;
  /** Class of each sample: samples of one class share a Reynolds mean (the y row in 2-D; one class in 1-D). */
  readonly cls: Int32Array;
  readonly classes: number;
  readonly snapshots: number;
}

/** Grid of a domain's field: [nx] for KS (length L), [nx, ny] for Kolmogorov; null when unknown. */
export function fieldGrid(d: { kind: string; env: Record<string, unknown> }): { nx: number; ny: number; lx: number; ly: number } | null {
  const e = d.env;
  if (d.kind === 'ks' && typeof e.points === 'number' && typeof e.length === 'number') return { nx: e.points, ny: 1, lx: e.length, ly: 0 };
  if (d.kind === 'kolmogorov' && Array.isArray(e.points) && e.points.length === 2) {
    const [nx, ny] = e.points as number[];
    // Kolmogorov flow on [0, 2 pi a) x [0, 2 pi), a = aspect (docs/kolmogorov.md).
    const aspect = typeof e.aspect === 'number' ? e.aspect : 1;
    return { nx: nx!, ny: ny!, lx: 2 * Math.PI * aspect, ly: 2 * Math.PI };
  }
  return null;
}

/**
 * Fluctuation samples of one controller from its field snapshots at decisions >= discard:
 * KS: u' = u - <u> and the slope u_x (spectral derivative; its mean square is P, the drag
 * analogue); Kolmogorov: u' and v' at every grid point, the mean taken per y row (the mean
 * flow depends on y only). Null when the controller has no snapshots after the transient.
 */
export function fluctuationSamples(d: DomainView, c: ControllerView): FluctuationSamples | null {
  const g = fieldGrid(d);
  if (!g) return null;
  const a: number[] = [];
  const b: number[] = [];
  const cls: number[] = [];
  let snapshots = 0;
  const deriv = d.kind === 'ks' ? new SpectralDerivative(g.nx, g.lx) : null;
  const u = new Float64Array(g.nx);
  const ux = new Float64Array(g.nx);
  for (const e of c.entries) {
    const s = e.series;
    if (!s || s.fieldSize === 0) continue;
    const discard = e.domain.summary.protocol.discardDecisions;
    const diverged = divergedEpisodes(e.summary);
    const F = s.fieldIndex.length / 2;
    for (let f = 0; f < F; f++) {
      if (s.fieldIndex[2 * f + 1]! < discard || diverged.has(s.fieldIndex[2 * f]!)) continue;
      const snap = s.field.subarray(f * s.fieldSize, (f + 1) * s.fieldSize);
      if (!snap.every(Number.isFinite)) continue; // defensive: one NaN would poison every mean
      snapshots++;
      if (deriv) {
        if (s.fieldSize !== g.nx) throw new Error(`${e.domain.dir}: field snapshots of ${s.fieldSize} values, the ks grid has ${g.nx} points`);
        u.set(snap);
        deriv.apply(u, 1, ux);
        for (let j = 0; j < g.nx; j++) {
          a.push(u[j]!);
          b.push(ux[j]!);
          cls.push(0);
        }
      } else {
        const P = g.nx * g.ny;
        if (s.fieldSize !== 3 * P) throw new Error(`${e.domain.dir}: field snapshots of ${s.fieldSize} values, expected 3 x ${g.nx} x ${g.ny} (vorticity, u, v)`);
        for (let p = 0; p < P; p++) {
          a.push(snap[P + p]!);
          b.push(snap[2 * P + p]!);
          cls.push(Math.floor(p / g.nx));
        }
      }
    }
  }
  if (!snapshots) return null;
  const classes = d.kind === 'ks' ? 1 : g.ny;
  const names: [string, string] = d.kind === 'ks' ? ["u'", 'u_x'] : ["u'", "v'"];
  // Subtract the class means (fluctuationStats does the same for its statistics).
  const st = fluctuationStats(a, b, cls, classes, { bins: 1 });
  const fa = Float64Array.from(a, (x, k) => x - st.meanU[cls[k]!]!);
  const fb = Float64Array.from(b, (x, k) => x - st.meanV[cls[k]!]!);
  return { names, a: fa, b: fb, cls: Int32Array.from(cls), classes, snapshots };
}

/**
 * Quadrant statistics of one controller's fluctuation samples: `fluctuationStats`' samples,
 * fractions (Q1 a > 0, b > 0; Q2 a < 0, b > 0; Q3 both < 0; Q4 a > 0, b < 0), each quadrant's
 * contribution to <a b> (`stress`) and the correlation, with the rms of each component.
 */
export interface QuadrantRow extends Pick<FluctuationStats, 'samples' | 'fractions' | 'stress' | 'correlation'> {
  readonly controller: string;
  readonly names: readonly [string, string];
  readonly snapshots: number;
  readonly rmsA: number;
  readonly rmsB: number;
}

/** Quadrant statistics of fluctuation samples (already fluctuations: their class means are ~0). */
export function quadrantRow(controller: string, s: FluctuationSamples): QuadrantRow {
  const st = fluctuationStats(s.a, s.b, s.cls, s.classes, { bins: 1 });
  return {
    controller,
    names: s.names,
    samples: st.samples,
    snapshots: s.snapshots,
    fractions: st.fractions,
    stress: st.stress,
    correlation: st.correlation,
    rmsA: rms(s.a),
    rmsB: rms(s.b),
  };
}
