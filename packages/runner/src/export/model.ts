/**
 * The exported policy as every export format writes it: the actor split into layers, the
 * frozen observation normaliser and the action bound, plus the metadata block.
 *
 * What every format computes, for one tile (obs [obsDim] in, action [actDim] out):
 *   z_j   = float32( clip((obs_j - mean_j) * invStd_j, -clip, clip) )   (no normaliser: z = obs)
 *   h_0   = z
 *   h_l+1 = act_l( float32( b_l + sum_i h_l[i] W_l[i, :] ) )   W_l row-major [n_l, n_l+1]
 *   a     = actionBound * h_L
 * act_l is the hidden activation for l < L-1 and the output activation (tanh for tilewise
 * actors) for the last layer. This is `Agent.act(obs, count, false)` with the normaliser frozen:
 * `RunningNormalizer.normalize` computes the same z, the network backend the same layers in
 * float32. The C and Fortran exports sum in double precision and round each layer's output to
 * float32; ONNX runtimes sum in float32. Both stay far inside the 1e-5 parity tolerance the
 * tests check.
 *
 * Metadata (ExportMetadata, format "tilewise-export-metadata/1"): dimensions, bound, actor
 * architecture, normaliser clip, the observation layout and tile geometry of the environment
 * the policy was trained on, and a SHA-256 of the training config (canonical JSON).
 */
import { createHash } from 'node:crypto';
import { mlpParamCount, type Activation, type Json, type PolicySnapshot } from '@tilewise/agent';
import type { EnvSpec, ObsLayoutEntry } from '@tilewise/envs';

export const METADATA_FORMAT = 'tilewise-export-metadata/1';

/** The environment facts an export carries (a subset of EnvSpec). */
export type ExportEnvSpec = Pick<EnvSpec, 'obsDim' | 'actDim' | 'actionBound' | 'tiles' | 'tileGrid' | 'controlInterval' | 'obsLayout' | 'dragName'>;

/** What to export: the policy, the environment it was trained on and where it came from. */
export interface ExportInput {
  readonly snapshot: PolicySnapshot;
  readonly env: {
    readonly kind: string;
    readonly spec: ExportEnvSpec;
    /** The resolved env section (carries the physical geometry, e.g. domain length). */
    readonly config?: Record<string, unknown>;
    /** The normalising reference value the rewards used (e.g. P0). */
    readonly reference?: number;
  };
  /** The training config (resolved); its SHA-256 goes in the metadata. Default: the env config. */
  readonly trainingConfig?: unknown;
  /** The hash itself, when the training config is not at hand (re-exporting an export). */
  readonly configHash?: string;
  /** Provenance: run, step, label... */
  readonly source?: Record<string, Json>;
}

export interface ExportMetadata {
  readonly format: typeof METADATA_FORMAT;
  readonly obsDim: number;
  readonly actDim: number;
  readonly actionBound: number;
  readonly actor: { readonly sizes: number[]; readonly hidden: Activation; readonly output: Activation };
  readonly normalizer: { readonly clip: number } | null;
  readonly env: {
    readonly kind: string;
    readonly tileGrid: [number, number];
    readonly tiles: number;
    readonly controlInterval: number;
    readonly dragName: string;
    readonly obsLayout: ObsLayoutEntry[];
    readonly config: Json;
    readonly reference: number | null;
  };
  /** "sha256:<hex>" of the canonical JSON of the training config. */
  readonly configHash: string;
  readonly source: Json;
}

export interface ExportLayer {
  readonly nIn: number;
  readonly nOut: number;
  /** Row-major [nIn, nOut] (a view of the snapshot's flat parameters). */
  readonly weights: Float32Array;
  /** [nOut]. */
  readonly bias: Float32Array;
  readonly activation: Activation;
}

export interface ExportModel {
  readonly obsDim: number;
  readonly actDim: number;
  readonly actionBound: number;
  readonly layers: readonly ExportLayer[];
  /** mean and invStd [obsDim] (float64, as the agent keeps them); null when normalisation is off. */
  readonly normalizer: { readonly mean: Float64Array; readonly invStd: Float64Array; readonly clip: number } | null;
  readonly metadata: ExportMetadata;
}

const ACTIVATIONS: readonly Activation[] = ['relu', 'tanh', 'linear'];

/** JSON with object keys sorted at every level (a stable text to hash). */
export function canonicalJson(value: unknown): string {
  const norm = (v: unknown): unknown => {
    if (Array.isArray(v)) return v.map(norm);
    if (v && typeof v === 'object' && !ArrayBuffer.isView(v)) {
      const o = v as Record<string, unknown>;
      return Object.fromEntries(
        Object.keys(o)
          .filter((k) => o[k] !== undefined)
          .sort()
          .map((k) => [k, norm(o[k])]),
      );
    }
    return ArrayBuffer.isView(v) ? Array.from(v as unknown as ArrayLike<number>) : v;
  };
  return JSON.stringify(norm(value)) ?? 'null';
}

/** "sha256:<hex>" of the canonical JSON of `config`. */
export function configHash(config: unknown): string {
  return `sha256:${createHash('sha256').update(canonicalJson(config)).digest('hex')}`;
}

function fail(what: string, msg: string): never {
  throw new Error(`${what}: ${msg}`);
}

/** Throw unless every value of `a` is finite, naming the first bad one. */
export function checkFinite(a: ArrayLike<number>, what: string): void {
  for (let i = 0; i < a.length; i++) {
    if (!Number.isFinite(a[i]!)) fail(what, `element ${i} is ${a[i]}; an exported policy needs finite values`);
  }
}

/**
 * Validate a snapshot against the environment spec and split it into layers (views, no copy).
 * Every problem names the field and the value.
 */
export function buildExportModel(input: ExportInput, what = 'export'): ExportModel {
  const { snapshot: s, env } = input;
  const sizes = s.spec.sizes;
  if (!Array.isArray(sizes) || sizes.length < 2) fail(what, `actor.sizes must list at least input and output widths, got ${JSON.stringify(sizes)}`);
  sizes.forEach((n, l) => {
    if (!Number.isInteger(n) || n < 1) fail(what, `actor.sizes[${l}] must be a positive integer, got ${n}`);
  });
  for (const k of ['hidden', 'output'] as const) {
    if (!ACTIVATIONS.includes(s.spec[k])) fail(what, `actor.${k} must be one of ${ACTIVATIONS.join(', ')}, got ${JSON.stringify(s.spec[k])}`);
  }
  const need = mlpParamCount(s.spec);
  if (s.params.length !== need) fail(what, `actor parameters: ${s.params.length} values, the sizes ${JSON.stringify(sizes)} need ${need}`);
  checkFinite(s.params, `${what}: actor parameters`);
  const obsDim = sizes[0]!;
  const actDim = sizes[sizes.length - 1]!;
  const spec = env.spec;
  if (spec.obsDim !== obsDim) fail(what, `env.spec.obsDim ${spec.obsDim} differs from the actor's input width ${obsDim}`);
  if (spec.actDim !== actDim) fail(what, `env.spec.actDim ${spec.actDim} differs from the actor's output width ${actDim}`);
  if (!(s.actionBound > 0) || !Number.isFinite(s.actionBound)) fail(what, `actionBound must be positive and finite, got ${s.actionBound}`);
  if (spec.actionBound !== s.actionBound) fail(what, `env.spec.actionBound ${spec.actionBound} differs from the policy's ${s.actionBound}`);
  const layoutCount = spec.obsLayout.reduce((n, e) => n + e.count, 0);
  if (layoutCount !== obsDim) fail(what, `env.spec.obsLayout counts sum to ${layoutCount}, obsDim is ${obsDim}`);
  const nz = s.normalizer;
  if (nz) {
    if (nz.mean.length !== obsDim) fail(what, `normalizer.mean has ${nz.mean.length} values, obsDim is ${obsDim}`);
    if (nz.invStd.length !== obsDim) fail(what, `normalizer.invStd has ${nz.invStd.length} values, obsDim is ${obsDim}`);
    checkFinite(nz.mean, `${what}: normalizer.mean`);
    nz.invStd.forEach((v, j) => {
      if (!(v > 0) || !Number.isFinite(v)) fail(what, `normalizer.invStd[${j}] must be positive and finite, got ${v}`);
    });
    if (!(nz.clip > 0)) fail(what, `normalizer.clip must be positive, got ${nz.clip}`);
  }
  const layers: ExportLayer[] = [];
  let off = 0;
  for (let l = 0; l + 1 < sizes.length; l++) {
    const nIn = sizes[l]!;
    const nOut = sizes[l + 1]!;
    const weights = s.params.subarray(off, off + nIn * nOut);
    const bias = s.params.subarray(off + nIn * nOut, off + nIn * nOut + nOut);
    off += nIn * nOut + nOut;
    layers.push({ nIn, nOut, weights, bias, activation: l + 2 === sizes.length ? s.spec.output : s.spec.hidden });
  }
  const metadata: ExportMetadata = {
    format: METADATA_FORMAT,
    obsDim,
    actDim,
    actionBound: s.actionBound,
    actor: { sizes: [...sizes], hidden: s.spec.hidden, output: s.spec.output },
    normalizer: nz ? { clip: nz.clip } : null,
    env: {
      kind: env.kind,
      tileGrid: [spec.tileGrid[0], spec.tileGrid[1]],
      tiles: spec.tiles,
      controlInterval: spec.controlInterval,
      dragName: spec.dragName,
      obsLayout: spec.obsLayout.map((e) => ({ quantity: e.quantity, count: e.count, positions: e.positions.map((p) => [...p]) })),
      config: (env.config ? JSON.parse(JSON.stringify(env.config)) : null) as Json,
      reference: env.reference ?? null,
    },
    configHash: input.configHash ?? configHash(input.trainingConfig ?? env.config ?? null),
    source: (input.source ?? {}) as Json,
  };
  return {
    obsDim,
    actDim,
    actionBound: s.actionBound,
    layers,
    normalizer: nz ? { mean: nz.mean, invStd: nz.invStd, clip: nz.clip } : null,
    metadata,
  };
}

/** The model back as a PolicySnapshot (flat parameters in net/types.ts order; copies). */
export function modelSnapshot(m: ExportModel): PolicySnapshot {
  const sizes = [m.obsDim, ...m.layers.map((l) => l.nOut)];
  const params = new Float32Array(m.layers.reduce((n, l) => n + l.weights.length + l.bias.length, 0));
  let off = 0;
  for (const l of m.layers) {
    params.set(l.weights, off);
    params.set(l.bias, off + l.weights.length);
    off += l.weights.length + l.bias.length;
  }
  const last = m.layers[m.layers.length - 1]!;
  return {
    spec: { sizes, hidden: m.layers.length > 1 ? m.layers[0]!.activation : last.activation, output: last.activation },
    params,
    actionBound: m.actionBound,
    normalizer: m.normalizer ? { mean: m.normalizer.mean.slice(), invStd: m.normalizer.invStd.slice(), clip: m.normalizer.clip } : null,
  };
}

/** Smallest positive normal float32, 2^-126. */
const FLOAT32_MIN_NORMAL = 2 ** -126;

/**
 * Shortest decimal text that reads back as the same float32 (at most 9 significant digits,
 * which always suffice for binary32). Used by the JSON, C and Fortran writers.
 */
export function float32Text(v: number): string {
  if (!Number.isFinite(v)) throw new Error(`float32Text: ${v} is not finite`);
  const f = Math.fround(v);
  // Subnormals with all 9 digits: a shorter decimal may lie below the smallest subnormal, which
  // gfortran rejects as an underflow even though it rounds to the right value.
  if (f !== 0 && Math.abs(f) < FLOAT32_MIN_NORMAL) return normalizeNumberText(f.toExponential(8));
  for (let p = 1; p <= 9; p++) {
    // Same digits in fixed or exponent notation: keep the shorter (tiny weights as 1.5e-4).
    const fixed = normalizeNumberText(f.toPrecision(p));
    const exp = normalizeNumberText(f.toExponential(p - 1));
    const t = exp.length < fixed.length ? exp : fixed;
    if (Math.fround(Number(t)) === f) return t;
  }
  return normalizeNumberText(f.toExponential(8));
}

/** Decimal text that reads back as the same float64 (shortest round trip, as JS prints it). */
export function float64Text(v: number): string {
  if (!Number.isFinite(v)) throw new Error(`float64Text: ${v} is not finite`);
  return normalizeNumberText(String(v));
}

/** "1e-7" -> "1e-07" is not needed; just make sure the text has a mantissa point or exponent. */
function normalizeNumberText(t: string): string {
  // toPrecision may give "1.0e+21" style or plain digits; always include '.' or 'e' so C and
  // Fortran read a real literal, and drop a '+' in exponents (both languages accept either).
  let s = t.replace('e+', 'e');
  if (!s.includes('.') && !s.includes('e')) s = `${s}.0`;
  if (s.includes('e') && !s.slice(0, s.indexOf('e')).includes('.')) s = s.replace('e', '.0e');
  return s;
}

/** A C / Fortran identifier for the generated symbols (letters, digits, underscores; <= 40 chars). */
export function checkExportName(name: string): string {
  if (!/^[A-Za-z][A-Za-z0-9_]{0,39}$/.test(name)) {
    throw new Error(`export name: expected a letter followed by at most 39 letters, digits or underscores (a C and Fortran identifier), got ${JSON.stringify(name)}`);
  }
  return name;
}

/** Human-readable lines describing a model, for the comments at the top of generated sources. */
export function summaryLines(m: ExportModel): string[] {
  const md = m.metadata;
  const e = md.env;
  const lines = [
    `actor: ${md.actor.sizes.join(' -> ')}, hidden ${md.actor.hidden}, output ${md.actor.output}`,
    `observation normalisation: ${m.normalizer ? `baked in, clip +-${m.normalizer.clip}` : 'none'}; actions in [-${m.actionBound}, ${m.actionBound}]`,
    `trained on: ${e.kind}, tile grid ${e.tileGrid[0]} x ${e.tileGrid[1]} (${e.tiles} tiles), decision every ${e.controlInterval} time units, drag ${e.dragName}`,
    'observation layout (one tile; positions in tile lengths from the tile origin):',
  ];
  let first = 0;
  for (const g of e.obsLayout) {
    const pos = g.positions.map((p) => `(${p.map((v) => Number(v.toFixed(6))).join(', ')})`).join(' ');
    lines.push(`  [${first}..${first + g.count - 1}] ${g.quantity} at ${pos}`);
    first += g.count;
  }
  lines.push(`training config: ${md.configHash}`);
  return lines;
}

/** Split `text` at spaces into lines of at most `width` characters (a longer word stays whole). */
export function wrapText(text: string, width: number): string[] {
  const out: string[] = [];
  const indent = /^\s*/.exec(text)![0];
  let line = '';
  for (const word of text.trim().split(/\s+/)) {
    if (line && line.length + 1 + word.length > width) {
      out.push(line);
      line = `${indent}    ${word}`;
    } else line = line ? `${line} ${word}` : `${indent}${word}`;
  }
  if (line) out.push(line);
  return out;
}

/**
 * Values as literal text, as many to a line as fit in `width` characters (at least one), each
 * line prefixed with `indent`; returns the lines and the index of each line's first value.
 */
export function literalLines(values: ArrayLike<number>, text: (v: number) => string, width: number, indent: string): { lines: string[]; first: number[] } {
  const lines: string[] = [];
  const first: number[] = [];
  let line = '';
  for (let i = 0; i < values.length; i++) {
    const t = text(values[i]!);
    if (line && indent.length + line.length + 2 + t.length > width) {
      lines.push(indent + line);
      line = '';
    }
    if (!line) first.push(i);
    line = line ? `${line}, ${t}` : t;
  }
  if (line) lines.push(indent + line);
  return { lines, first };
}
