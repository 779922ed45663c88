/**
 * The JSON export: weights, architecture, normaliser and metadata under a versioned schema
 * (docs/export.md), for solvers in any language with a JSON reader.
 *
 *   {
 *     "format": "tilewise-policy-json", "version": 1,
 *     "actionBound": 0.5,
 *     "normalizer": { "mean": [obsDim], "invStd": [obsDim], "clip": 5 } | null,
 *     "actor": { "sizes": [obsDim, ..., actDim], "hidden": "relu", "output": "tanh",
 *                "layers": [ { "weights": [n_l * n_l+1, row-major [in, out]], "bias": [n_l+1] }, ... ] },
 *     "metadata": { ExportMetadata }
 *   }
 * Weights are float32 values written as the shortest decimal that reads back to the same float32;
 * mean and invStd are float64.
 *
 * The loader is written for untrusted files. It refuses a file larger than `maxBytes` before
 * reading it, then checks every declared size against fixed limits (layers, width, parameter
 * count) with overflow-free arithmetic, and every array's length against the sizes, before it
 * allocates any typed array; so a crafted file cannot make it allocate more than a small multiple
 * of its own size. Every error names the field and the value.
 */
import { readFileSync, statSync } from 'node:fs';
import { mlpParamCount, type Activation, type PolicySnapshot } from '@tilewise/agent';
import { float32Text, METADATA_FORMAT, type ExportEnvSpec, type ExportInput, type ExportMetadata, type ExportModel } from './model';

export const POLICY_JSON_FORMAT = 'tilewise-policy-json';
export const POLICY_JSON_VERSION = 1;

/** Limits the loader enforces (defaults generous for any tilewise actor). */
export interface PolicyJsonLimits {
  /** Largest file accepted, bytes (default 64 MiB). */
  readonly maxBytes: number;
  /** Most dense layers (default 16). */
  readonly maxLayers: number;
  /** Widest layer, including input and output (default 8192). */
  readonly maxWidth: number;
  /** Most parameters in all (default 8,388,608 = 32 MiB of float32). */
  readonly maxParams: number;
}

export const DEFAULT_POLICY_JSON_LIMITS: PolicyJsonLimits = { maxBytes: 64 * 2 ** 20, maxLayers: 16, maxWidth: 8192, maxParams: 2 ** 23 };

const ACTIVATIONS: readonly Activation[] = ['relu', 'tanh', 'linear'];

/** Write numbers as float32 shortest text inside a JSON array. */
function f32Array(a: Float32Array): string {
  let s = '[';
  for (let i = 0; i < a.length; i++) s += (i ? ',' : '') + float32Text(a[i]!);
  return `${s}]`;
}

function f64Array(a: Float64Array): string {
  return JSON.stringify(Array.from(a));
}

/** The JSON export text of a model. */
export function policyJsonText(m: ExportModel): string {
  const nz = m.normalizer;
  const layers = m.layers.map((l) => `      { "weights": ${f32Array(l.weights)},\n        "bias": ${f32Array(l.bias)} }`).join(',\n');
  const last = m.layers[m.layers.length - 1]!;
  const hidden = m.layers.length > 1 ? m.layers[0]!.activation : m.metadata.actor.hidden;
  return [
    '{',
    `  "format": ${JSON.stringify(POLICY_JSON_FORMAT)},`,
    `  "version": ${POLICY_JSON_VERSION},`,
    `  "actionBound": ${JSON.stringify(m.actionBound)},`,
    `  "normalizer": ${nz ? `{ "mean": ${f64Array(nz.mean)}, "invStd": ${f64Array(nz.invStd)}, "clip": ${JSON.stringify(nz.clip)} }` : 'null'},`,
    '  "actor": {',
    `    "sizes": ${JSON.stringify([m.obsDim, ...m.layers.map((l) => l.nOut)])}, "hidden": ${JSON.stringify(hidden)}, "output": ${JSON.stringify(last.activation)},`,
    '    "layers": [',
    layers,
    '    ]',
    '  },',
    `  "metadata": ${JSON.stringify(m.metadata)}`,
    '}',
    '',
  ].join('\n');
}

/** A loaded JSON export: the policy and its metadata. */
export interface PolicyJson {
  readonly snapshot: PolicySnapshot;
  readonly metadata: ExportMetadata;
}

class Checker {
  constructor(readonly what: string) {}
  fail(path: string, msg: string): never {
    throw new Error(`${this.what}: ${path}: ${msg}`);
  }
  object(v: unknown, path: string): Record<string, unknown> {
    if (!v || typeof v !== 'object' || Array.isArray(v)) this.fail(path, `expected an object, got ${show(v)}`);
    return v as Record<string, unknown>;
  }
  array(v: unknown, path: string, length?: number): unknown[] {
    if (!Array.isArray(v)) this.fail(path, `expected an array, got ${show(v)}`);
    if (length !== undefined && v.length !== length) this.fail(path, `expected ${length} values, got ${v.length}`);
    return v;
  }
  int(v: unknown, path: string, min: number, max: number): number {
    if (typeof v !== 'number' || !Number.isInteger(v) || v < min || v > max) this.fail(path, `expected an integer in [${min}, ${max}], got ${show(v)}`);
    return v;
  }
  positive(v: unknown, path: string): number {
    if (typeof v !== 'number' || !Number.isFinite(v) || v <= 0) this.fail(path, `expected a positive finite number, got ${show(v)}`);
    return v;
  }
  /** A JSON array of exactly `length` finite numbers as a new typed array (length checked first). */
  numbers<T extends Float32Array | Float64Array>(v: unknown, path: string, length: number, Ctor: new (n: number) => T): T {
    const a = this.array(v, path, length);
    const out = new Ctor(length);
    copyNumbers(this, a, path, out, 0);
    return out;
  }
}

/** Copy the finite numbers of `a` into `out` at `offset`, naming the first non-number. */
function copyNumbers(c: Checker, a: unknown[], path: string, out: Float32Array | Float64Array, offset: number): void {
  for (let i = 0; i < a.length; i++) {
    const x = a[i];
    if (typeof x !== 'number' || !Number.isFinite(x)) c.fail(`${path}[${i}]`, `expected a finite number, got ${show(x)}`);
    out[offset + i] = x;
  }
}

function show(v: unknown): string {
  if (v === undefined) return 'nothing';
  const s = JSON.stringify(v) ?? String(v);
  return s.length > 60 ? `${s.slice(0, 57)}...` : s;
}

/**
 * Parse and validate JSON export text (already known to be within the byte limit). Sizes are
 * checked against `limits` and against the arrays' lengths before any typed array is allocated.
 */
export function parsePolicyJson(text: string, what = 'policy JSON', limits: PolicyJsonLimits = DEFAULT_POLICY_JSON_LIMITS): PolicyJson {
  const c = new Checker(what);
  if (text.length > limits.maxBytes) c.fail('(file)', `${text.length} characters is more than the limit of ${limits.maxBytes}`);
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch (e) {
    c.fail('(file)', `not valid JSON (${(e as Error).message})`);
  }
  const root = c.object(raw, '(top level)');
  if (root.format !== POLICY_JSON_FORMAT) c.fail('format', `expected ${JSON.stringify(POLICY_JSON_FORMAT)}, got ${show(root.format)}`);
  const version = root.version;
  if (typeof version !== 'number' || !Number.isInteger(version)) return c.fail('version', `expected an integer, got ${show(version)}`);
  if (version !== POLICY_JSON_VERSION) {
    c.fail('version', `${version} is not supported (this build reads version ${POLICY_JSON_VERSION}${version > POLICY_JSON_VERSION ? '; the file is newer than this tilewise' : ''})`);
  }
  const actor = c.object(root.actor, 'actor');
  const sizesRaw = c.array(actor.sizes, 'actor.sizes');
  if (sizesRaw.length < 2 || sizesRaw.length > limits.maxLayers + 1) {
    c.fail('actor.sizes', `expected 2 to ${limits.maxLayers + 1} widths (at most ${limits.maxLayers} layers), got ${sizesRaw.length}`);
  }
  const sizes = sizesRaw.map((n, l) => c.int(n, `actor.sizes[${l}]`, 1, limits.maxWidth));
  // Each product is at most maxWidth^2 (exact in float64); the running sum stops at maxParams.
  let params = 0;
  for (let l = 0; l + 1 < sizes.length; l++) {
    params += sizes[l]! * sizes[l + 1]! + sizes[l + 1]!;
    if (params > limits.maxParams) c.fail('actor.sizes', `${JSON.stringify(sizes)} needs more than the limit of ${limits.maxParams} parameters`);
  }
  const act = (k: 'hidden' | 'output'): Activation => {
    const v = actor[k];
    if (!ACTIVATIONS.includes(v as Activation)) c.fail(`actor.${k}`, `expected one of ${ACTIVATIONS.join(', ')}, got ${show(v)}`);
    return v as Activation;
  };
  const spec = { sizes, hidden: act('hidden'), output: act('output') };
  const layersRaw = c.array(actor.layers, 'actor.layers', sizes.length - 1);
  // Every array length first, then one allocation of exactly the validated size.
  const layers = layersRaw.map((lr, l) => {
    const layer = c.object(lr, `actor.layers[${l}]`);
    c.array(layer.weights, `actor.layers[${l}].weights`, sizes[l]! * sizes[l + 1]!);
    c.array(layer.bias, `actor.layers[${l}].bias`, sizes[l + 1]!);
    return layer;
  });
  const flat = new Float32Array(mlpParamCount(spec));
  let off = 0;
  layers.forEach((layer, l) => {
    const nIn = sizes[l]!;
    const nOut = sizes[l + 1]!;
    copyNumbers(c, layer.weights as unknown[], `actor.layers[${l}].weights`, flat, off);
    copyNumbers(c, layer.bias as unknown[], `actor.layers[${l}].bias`, flat, off + nIn * nOut);
    off += nIn * nOut + nOut;
  });
  const obsDim = sizes[0]!;
  const actDim = sizes[sizes.length - 1]!;
  const actionBound = c.positive(root.actionBound, 'actionBound');
  let normalizer: PolicySnapshot['normalizer'] = null;
  if (root.normalizer !== null) {
    const n = c.object(root.normalizer, 'normalizer');
    const mean = c.numbers(n.mean, 'normalizer.mean', obsDim, Float64Array);
    const invStd = c.numbers(n.invStd, 'normalizer.invStd', obsDim, Float64Array);
    invStd.forEach((v, j) => {
      if (!(v > 0)) c.fail(`normalizer.invStd[${j}]`, `expected a positive number, got ${v}`);
    });
    normalizer = { mean, invStd, clip: c.positive(n.clip, 'normalizer.clip') };
  }
  const snapshot: PolicySnapshot = { spec, params: flat, actionBound, normalizer };
  const metadata = checkMetadata(c, root.metadata, snapshot);
  return { snapshot, metadata };
}

/** The metadata block must agree with the weights it describes; the env facts are typed. */
function checkMetadata(c: Checker, raw: unknown, s: PolicySnapshot): ExportMetadata {
  const m = c.object(raw, 'metadata');
  if (m.format !== METADATA_FORMAT) c.fail('metadata.format', `expected ${JSON.stringify(METADATA_FORMAT)}, got ${show(m.format)}`);
  const sizes = s.spec.sizes;
  const expect: Array<[string, unknown, unknown]> = [
    ['metadata.obsDim', m.obsDim, sizes[0]],
    ['metadata.actDim', m.actDim, sizes[sizes.length - 1]],
    ['metadata.actionBound', m.actionBound, s.actionBound],
  ];
  for (const [path, got, want] of expect) if (got !== want) c.fail(path, `${show(got)} differs from the weights' ${show(want)}`);
  const text = (v: unknown, path: string): string => (typeof v === 'string' ? v : c.fail(path, `expected a string, got ${show(v)}`));
  text(m.configHash, 'metadata.configHash');
  const env = c.object(m.env, 'metadata.env');
  text(env.kind, 'metadata.env.kind');
  text(env.dragName, 'metadata.env.dragName');
  const grid = c.array(env.tileGrid, 'metadata.env.tileGrid', 2).map((n, i) => c.int(n, `metadata.env.tileGrid[${i}]`, 1, 2 ** 20));
  c.int(env.tiles, 'metadata.env.tiles', grid[0]! * grid[1]!, grid[0]! * grid[1]!);
  c.positive(env.controlInterval, 'metadata.env.controlInterval');
  const layout = c.array(env.obsLayout, 'metadata.env.obsLayout');
  let count = 0;
  layout.forEach((e, i) => {
    const entry = c.object(e, `metadata.env.obsLayout[${i}]`);
    text(entry.quantity, `metadata.env.obsLayout[${i}].quantity`);
    const n = c.int(entry.count, `metadata.env.obsLayout[${i}].count`, 0, sizes[0]!);
    c.array(entry.positions, `metadata.env.obsLayout[${i}].positions`, n);
    count += n;
  });
  if (count !== sizes[0]) c.fail('metadata.env.obsLayout', `counts sum to ${count}, obsDim is ${sizes[0]}`);
  return m as unknown as ExportMetadata;
}

/** Read and validate a JSON export file; the size limit is checked before the file is read. */
export function loadPolicyJson(path: string, limits: PolicyJsonLimits = DEFAULT_POLICY_JSON_LIMITS): PolicyJson {
  const what = `policy JSON ${path}`;
  let size: number;
  try {
    size = statSync(path).size;
  } catch (e) {
    throw new Error(`${what}: cannot read it (${(e as NodeJS.ErrnoException).code ?? (e as Error).message})`);
  }
  if (size > limits.maxBytes) throw new Error(`${what}: (file): ${size} bytes is more than the limit of ${limits.maxBytes}`);
  return parsePolicyJson(readFileSync(path, 'utf8'), what, limits);
}

/** The export input of a loaded JSON export (to write it in another format); keeps its config hash. */
export function exportInputOf(p: PolicyJson): ExportInput {
  const e = p.metadata.env;
  const spec: ExportEnvSpec = {
    obsDim: p.metadata.obsDim,
    actDim: p.metadata.actDim,
    actionBound: p.metadata.actionBound,
    tiles: e.tiles,
    tileGrid: e.tileGrid,
    controlInterval: e.controlInterval,
    obsLayout: e.obsLayout,
    dragName: e.dragName,
  };
  return {
    snapshot: p.snapshot,
    env: { kind: e.kind, spec, ...(e.config ? { config: e.config as Record<string, unknown> } : {}), ...(e.reference !== null ? { reference: e.reference } : {}) },
    configHash: p.metadata.configHash,
    source: (p.metadata.source ?? {}) as Record<string, never>,
  };
}
