/**
 * The tilewise state container: one binary file holding a JSON header and named typed-array
 * blocks, sealed by a CRC-32. Agent states (weights, target weights, optimiser moments,
 * normaliser, replay buffer, generator states) and the runner's checkpoints use it.
 *
 * Layout (all integers little-endian):
 *   offset 0   8 bytes  magic "TWSTATE\n"
 *   offset 8   u32      format version (1)
 *   offset 12  u32      header length H in bytes
 *   offset 16  H bytes  header, UTF-8 JSON: { kind, meta, blocks: [{ name, dtype, length, offset }] }
 *              padding with zeros to a multiple of 8
 *   data       the blocks' bytes, each starting at its `offset` (from the start of the data
 *              section, a multiple of 8) and holding `length` elements of `dtype`
 *   last 4     u32      CRC-32 of every preceding byte
 * dtype: "f32" | "f64" | "i32" | "u32" | "u8".
 *
 * CRC-32 is the IEEE 802.3 / zlib checksum: reflected polynomial 0xEDB88320, initial value
 * and final XOR 0xFFFFFFFF (check value CRC-32("123456789") = 0xCBF43926; Williams 1993,
 * "A painless guide to CRC error detection algorithms", and the parameter catalogues that
 * list this model as CRC-32/ISO-HDLC). Written here rather than imported because Node 20's
 * `zlib.crc32` only exists from 20.15 on; the test checks the two agree.
 */

const MAGIC = 'TWSTATE\n';
const VERSION = 1;
const PREFIX = 16;

export type BlockArray = Float32Array | Float64Array | Int32Array | Uint32Array | Uint8Array;
export type Dtype = 'f32' | 'f64' | 'i32' | 'u32' | 'u8';

const CTOR = { f32: Float32Array, f64: Float64Array, i32: Int32Array, u32: Uint32Array, u8: Uint8Array } as const;

function dtypeOf(a: BlockArray): Dtype {
  if (a instanceof Float32Array) return 'f32';
  if (a instanceof Float64Array) return 'f64';
  if (a instanceof Int32Array) return 'i32';
  if (a instanceof Uint32Array) return 'u32';
  if (a instanceof Uint8Array) return 'u8';
  throw new Error('container: blocks must be Float32Array, Float64Array, Int32Array, Uint32Array or Uint8Array');
}

/** JSON-serialisable metadata. */
export type Json = null | boolean | number | string | Json[] | { [k: string]: Json };

/** What a container holds: a kind tag, JSON metadata and named arrays. */
export interface Bundle {
  readonly kind: string;
  readonly meta: Json;
  readonly blocks: ReadonlyMap<string, BlockArray>;
}

interface BlockEntry {
  name: string;
  dtype: Dtype;
  length: number;
  offset: number;
}

let crcTable: Uint32Array | null = null;

/** CRC-32 (IEEE 802.3 / zlib) of `bytes`, continuing from `crc` (0 to start). */
export function crc32(bytes: Uint8Array, crc = 0): number {
  if (!crcTable) {
    crcTable = new Uint32Array(256);
    for (let n = 0; n < 256; n++) {
      let c = n;
      for (let k = 0; k < 8; k++) c = c & 1 ? 0xedb88320 ^ (c >>> 1) : c >>> 1;
      crcTable[n] = c >>> 0;
    }
  }
  let c = (crc ^ 0xffffffff) >>> 0;
  for (let i = 0; i < bytes.length; i++) c = crcTable[(c ^ bytes[i]!) & 0xff]! ^ (c >>> 8);
  return (c ^ 0xffffffff) >>> 0;
}

function littleEndian(): boolean {
  return new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;
}

const align8 = (n: number): number => (n + 7) & ~7;

/** Serialise a bundle. Block names must be unique and non-empty. */
export function encodeContainer(kind: string, meta: Json, blocks: ReadonlyMap<string, BlockArray> | Record<string, BlockArray>): Uint8Array {
  if (!littleEndian()) throw new Error('container: big-endian platforms are not supported');
  const entries = blocks instanceof Map ? [...blocks.entries()] : Object.entries(blocks as Record<string, BlockArray>);
  const table: BlockEntry[] = [];
  let data = 0;
  const seen = new Set<string>();
  for (const [name, arr] of entries) {
    if (!name || seen.has(name)) throw new Error(`container: block names must be unique and non-empty, got ${JSON.stringify(name)}`);
    seen.add(name);
    table.push({ name, dtype: dtypeOf(arr), length: arr.length, offset: data });
    data = align8(data + arr.byteLength);
  }
  const header = new TextEncoder().encode(JSON.stringify({ kind, meta, blocks: table }));
  const dataStart = align8(PREFIX + header.length);
  const total = dataStart + data + 4;
  const out = new Uint8Array(total);
  const view = new DataView(out.buffer);
  for (let i = 0; i < 8; i++) out[i] = MAGIC.charCodeAt(i);
  view.setUint32(8, VERSION, true);
  view.setUint32(12, header.length, true);
  out.set(header, PREFIX);
  entries.forEach(([, arr], k) => {
    out.set(new Uint8Array(arr.buffer, arr.byteOffset, arr.byteLength), dataStart + table[k]!.offset);
  });
  view.setUint32(total - 4, crc32(out.subarray(0, total - 4)), true);
  return out;
}

/**
 * Parse a container, checking magic, version, sizes and checksum. With `expectKind` the kind
 * must match. Arrays are fresh copies (aligned), never views of `bytes`.
 */
export function decodeContainer(bytes: Uint8Array, expectKind?: string, what = 'state file'): Bundle {
  if (!littleEndian()) throw new Error('container: big-endian platforms are not supported');
  const fail = (msg: string): never => {
    throw new Error(`${what}: ${msg}`);
  };
  if (bytes.length < PREFIX + 4) fail(`truncated: ${bytes.length} bytes is shorter than the smallest container (${PREFIX + 4})`);
  for (let i = 0; i < 8; i++) {
    if (bytes[i] !== MAGIC.charCodeAt(i)) fail('not a tilewise state container (bad magic bytes)');
  }
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const version = view.getUint32(8, true);
  if (version !== VERSION) fail(`format version ${version} is not supported (this build reads version ${VERSION})`);
  const hlen = view.getUint32(12, true);
  if (PREFIX + hlen + 4 > bytes.length) fail(`truncated: header of ${hlen} bytes does not fit in ${bytes.length} bytes`);
  let header: { kind: string; meta: Json; blocks: BlockEntry[] };
  try {
    header = JSON.parse(new TextDecoder('utf-8', { fatal: true }).decode(bytes.subarray(PREFIX, PREFIX + hlen)));
  } catch (e) {
    return fail(`header is not valid JSON (${(e as Error).message})`);
  }
  if (typeof header?.kind !== 'string' || !Array.isArray(header.blocks)) fail('header lacks "kind" or "blocks"');
  const dataStart = align8(PREFIX + hlen);
  let dataEnd = 0;
  for (const b of header.blocks) {
    if (!(b.dtype in CTOR) || !Number.isInteger(b.length) || b.length < 0 || !Number.isInteger(b.offset) || b.offset % 8 !== 0) {
      fail(`block ${JSON.stringify(b?.name)} has a bad table entry ${JSON.stringify(b)}`);
    }
    dataEnd = Math.max(dataEnd, align8(b.offset + b.length * CTOR[b.dtype].BYTES_PER_ELEMENT));
  }
  const expected = dataStart + dataEnd + 4;
  if (bytes.length < expected) fail(`truncated: ${bytes.length} bytes, the header describes ${expected}`);
  if (bytes.length > expected) fail(`${bytes.length - expected} unexpected trailing bytes after ${expected}`);
  const stored = view.getUint32(expected - 4, true);
  const actual = crc32(bytes.subarray(0, expected - 4));
  if (stored !== actual) {
    fail(`checksum mismatch (stored CRC-32 0x${stored.toString(16).padStart(8, '0')}, computed 0x${actual.toString(16).padStart(8, '0')}): the file is corrupted`);
  }
  if (expectKind !== undefined && header.kind !== expectKind) fail(`holds a "${header.kind}", expected a "${expectKind}"`);
  const blocks = new Map<string, BlockArray>();
  for (const b of header.blocks) {
    const Ctor = CTOR[b.dtype];
    const start = dataStart + b.offset;
    // A fresh, exactly sized buffer. Not bytes.slice(): on a Node Buffer (readFileSync) slice
    // is a view into a larger (possibly pooled) buffer, so copy.buffer would start elsewhere.
    const copy = new Uint8Array(bytes.subarray(start, start + b.length * Ctor.BYTES_PER_ELEMENT));
    blocks.set(b.name, new Ctor(copy.buffer, 0, b.length));
  }
  return { kind: header.kind, meta: header.meta, blocks };
}

/** Typed accessor: the block `name` of `dtype` and (optionally) `length`, or a clear error. */
export function getBlock<D extends Dtype>(bundle: Pick<Bundle, 'blocks'>, name: string, dtype: D, length?: number, what = 'state file'): InstanceType<(typeof CTOR)[D]> {
  const b = bundle.blocks.get(name);
  if (!b) throw new Error(`${what}: block "${name}" is missing`);
  const got = dtypeOf(b);
  if (got !== dtype) throw new Error(`${what}: block "${name}" holds ${got}, expected ${dtype}`);
  if (length !== undefined && b.length !== length) throw new Error(`${what}: block "${name}" has ${b.length} elements, expected ${length}`);
  return b as InstanceType<(typeof CTOR)[D]>;
}
