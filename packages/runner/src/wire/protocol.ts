/**
 * The tilewise wire protocol, version 1 (docs/wire-protocol.md has the byte layouts). One
 * protocol serves both directions:
 *   - policy service: a solver asks `tilewise serve` for the actions of a batch of tiles;
 *   - environment link: a solver connects to a training run and acts as its environment
 *     (observations and rewards in, actions out), see external/.
 *
 * Every message is one frame: a 16-byte header and a payload, all integers and floats
 * little-endian.
 *   offset 0  u8[4]  magic "TWLW"
 *   offset 4  u16    protocol version (1)
 *   offset 6  u16    message type (MSG)
 *   offset 8  u32    request id; a reply carries the id of its request
 *   offset 12 u32    payload length in bytes (the receiver's limit applies before any is read)
 *   offset 16        payload
 * Floats on the wire are float32 for observations, actions and rewards (the environment
 * contract's types), float64 for seeds, drag and power.
 */

export const MAGIC = Uint8Array.from([0x54, 0x57, 0x4c, 0x57]); // "TWLW"
export const PROTOCOL_VERSION = 1;
export const HEADER_BYTES = 16;

/** Message types. */
export const MSG = {
  ERROR: 0x0001,
  // policy service
  INFO_REQUEST: 0x0010,
  INFO: 0x0011,
  ACT: 0x0012,
  ACTIONS: 0x0013,
  STATUS_REQUEST: 0x0014,
  STATUS: 0x0015,
  // environment link (solver = environment)
  ENV_HELLO: 0x0020,
  ENV_WELCOME: 0x0021,
  RESET: 0x0022,
  OBSERVATION: 0x0023,
  RESET_COPY: 0x0024,
  STEP: 0x0026,
  TRANSITION: 0x0027,
  OPPOSITION_REQUEST: 0x0028,
  OPPOSITION: 0x0029,
  SNAPSHOT_REQUEST: 0x002a,
  SNAPSHOT: 0x002b,
  CLOSE: 0x002f,
} as const;

export function messageName(type: number): string {
  for (const [k, v] of Object.entries(MSG)) if (v === type) return k;
  return `0x${type.toString(16).padStart(4, '0')}`;
}

/**
 * Error codes (ERROR payload). Codes 1-3 are framing errors: the sender of the bad frame
 * cannot be followed any more, so the receiver answers and closes the connection. The others
 * answer one frame; the connection stays usable.
 */
export const ERR = {
  BAD_MAGIC: 1,
  BAD_VERSION: 2,
  FRAME_TOO_LARGE: 3,
  UNKNOWN_TYPE: 4,
  BAD_SIZE: 5,
  NON_FINITE: 6,
  TOO_MANY_TILES: 7,
  UNSUPPORTED: 8,
  MISMATCH: 9,
  INTERNAL: 10,
  UNEXPECTED: 11,
} as const;

/** A framing error: the connection is closed after it. */
export const isFatal = (code: number): boolean => code === ERR.BAD_MAGIC || code === ERR.BAD_VERSION || code === ERR.FRAME_TOO_LARGE;

export function errorName(code: number): string {
  for (const [k, v] of Object.entries(ERR)) if (v === code) return k;
  return `code ${code}`;
}

/** Longest error message sent (bytes of UTF-8); longer ones are cut. */
export const MAX_ERROR_TEXT = 1024;

function littleEndian(): boolean {
  return new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;
}
if (!littleEndian()) throw new Error('wire protocol: big-endian platforms are not supported (typed arrays are copied as little-endian bytes)');

export interface Frame {
  readonly type: number;
  readonly id: number;
  readonly payload: Buffer;
}

/** A framing error: the stream cannot be followed past it. */
export interface FramingError {
  readonly code: number;
  readonly message: string;
  /** The request id when the header was readable (FRAME_TOO_LARGE), else 0. */
  readonly id: number;
}

/** One frame's bytes. */
export function encodeFrame(type: number, id: number, payload: Uint8Array = new Uint8Array(0)): Buffer {
  const out = Buffer.allocUnsafe(HEADER_BYTES + payload.length);
  out.set(MAGIC, 0);
  out.writeUInt16LE(PROTOCOL_VERSION, 4);
  out.writeUInt16LE(type, 6);
  out.writeUInt32LE(id >>> 0, 8);
  out.writeUInt32LE(payload.length, 12);
  out.set(payload, HEADER_BYTES);
  return out;
}

/**
 * Splits a byte stream into frames. Holds at most one header plus one payload of at most
 * `maxPayload` bytes: a header announcing more is a framing error before any of its payload is
 * kept, so a peer cannot make the receiver buffer more than that.
 */
export class FrameDecoder {
  private chunks: Buffer[] = [];
  private size = 0;
  private header: { type: number; id: number; length: number } | null = null;
  private failed: FramingError | null = null;

  constructor(readonly maxPayload: number) {}

  /** Most bytes held at once so far (for the memory bound). */
  peak = 0;

  /** Bytes held now. */
  get buffered(): number {
    return this.size;
  }

  /** Add bytes; returns the frames completed and, after a framing error, that error (then nothing more). */
  push(chunk: Buffer): { frames: Frame[]; error: FramingError | null } {
    const frames: Frame[] = [];
    if (this.failed) return { frames, error: this.failed };
    this.chunks.push(chunk);
    this.size += chunk.length;
    if (this.size > this.peak) this.peak = this.size;
    for (;;) {
      if (!this.header) {
        if (this.size < HEADER_BYTES) break;
        const h = this.take(HEADER_BYTES);
        if (h[0] !== MAGIC[0] || h[1] !== MAGIC[1] || h[2] !== MAGIC[2] || h[3] !== MAGIC[3]) {
          return this.fail(ERR.BAD_MAGIC, `bad magic bytes ${h.subarray(0, 4).toString('hex')} (expected 54574c57, "TWLW")`, frames);
        }
        const version = h.readUInt16LE(4);
        if (version !== PROTOCOL_VERSION) {
          return this.fail(ERR.BAD_VERSION, `protocol version ${version} is not supported (this end speaks version ${PROTOCOL_VERSION})`, frames);
        }
        const length = h.readUInt32LE(12);
        if (length > this.maxPayload) {
          return this.fail(ERR.FRAME_TOO_LARGE, `payload length ${length} exceeds the limit of ${this.maxPayload} bytes`, frames, h.readUInt32LE(8));
        }
        this.header = { type: h.readUInt16LE(6), id: h.readUInt32LE(8), length };
      }
      if (this.size < this.header.length) break;
      frames.push({ type: this.header.type, id: this.header.id, payload: this.take(this.header.length) });
      this.header = null;
    }
    return { frames, error: null };
  }

  private fail(code: number, message: string, frames: Frame[], id = 0): { frames: Frame[]; error: FramingError } {
    this.failed = { code, message, id };
    this.chunks = [];
    this.size = 0;
    return { frames, error: this.failed };
  }

  /** Remove and return the first n buffered bytes (a fresh buffer when they span chunks). */
  private take(n: number): Buffer {
    const first = this.chunks[0]!;
    let out: Buffer;
    if (first && first.length >= n) {
      out = first.subarray(0, n);
      if (first.length === n) this.chunks.shift();
      else this.chunks[0] = first.subarray(n);
    } else {
      out = Buffer.allocUnsafe(n);
      let off = 0;
      while (off < n) {
        const c = this.chunks[0]!;
        const k = Math.min(c.length, n - off);
        c.copy(out, off, 0, k);
        off += k;
        if (k === c.length) this.chunks.shift();
        else this.chunks[0] = c.subarray(k);
      }
    }
    this.size -= n;
    return out;
  }
}

// --- payload helpers ----------------------------------------------------------------------

/** Copy `count` little-endian values from `buf` at `offset` into `out` (from element `at`). */
export function readArray(buf: Uint8Array, offset: number, out: Float32Array | Float64Array | Uint8Array, count = out.length, at = 0): void {
  const bytes = count * out.BYTES_PER_ELEMENT;
  new Uint8Array(out.buffer, out.byteOffset + at * out.BYTES_PER_ELEMENT, bytes).set(buf.subarray(offset, offset + bytes));
}

/** Write `count` values of `a` (from element `at`) into `buf` at `offset`. */
export function writeArray(buf: Uint8Array, offset: number, a: Float32Array | Float64Array | Uint8Array, count = a.length, at = 0): void {
  buf.set(new Uint8Array(a.buffer, a.byteOffset + at * a.BYTES_PER_ELEMENT, count * a.BYTES_PER_ELEMENT), offset);
}

/** Index of the first non-finite float32 in `buf` (n values from `offset`), or -1. */
export function firstNonFinite32(buf: Buffer, offset: number, n: number): number {
  for (let i = 0; i < n; i++) {
    if (!Number.isFinite(buf.readFloatLE(offset + 4 * i))) return i;
  }
  return -1;
}

export function encodeError(code: number, detail: number, message: string): Buffer {
  let text = Buffer.from(message, 'utf8');
  if (text.length > MAX_ERROR_TEXT) text = text.subarray(0, MAX_ERROR_TEXT);
  const out = Buffer.alloc(8 + text.length);
  out.writeUInt32LE(code, 0);
  out.writeUInt32LE(detail >>> 0, 4);
  text.copy(out, 8);
  return out;
}

export interface WireError {
  readonly code: number;
  readonly detail: number;
  readonly message: string;
}

export function decodeError(p: Buffer): WireError {
  if (p.length < 8) return { code: ERR.BAD_SIZE, detail: 0, message: `(an ERROR frame of ${p.length} bytes, shorter than 8)` };
  return { code: p.readUInt32LE(0), detail: p.readUInt32LE(4), message: p.subarray(8).toString('utf8') };
}

/** An ERROR frame received, as an exception. */
export class RemoteError extends Error {
  constructor(
    readonly code: number,
    readonly detail: number,
    readonly remoteMessage: string,
    context: string,
  ) {
    super(`${context}: the peer answered ${errorName(code)}: ${remoteMessage}`);
    this.name = 'RemoteError';
  }
}

// --- policy service payloads ---------------------------------------------------------------

export interface PolicyInfo {
  readonly obsDim: number;
  readonly actDim: number;
  /** Most tiles one ACT may carry. */
  readonly maxTiles: number;
  readonly actionBound: number;
  /** The export metadata (JSON text). */
  readonly metadata: string;
}

/** INFO: u32 obsDim, u32 actDim, u32 maxTiles, u32 reserved (0), f64 actionBound, UTF-8 metadata JSON. */
export function encodeInfo(i: PolicyInfo): Buffer {
  const meta = Buffer.from(i.metadata, 'utf8');
  const out = Buffer.alloc(24 + meta.length);
  out.writeUInt32LE(i.obsDim, 0);
  out.writeUInt32LE(i.actDim, 4);
  out.writeUInt32LE(i.maxTiles, 8);
  out.writeUInt32LE(0, 12);
  out.writeDoubleLE(i.actionBound, 16);
  meta.copy(out, 24);
  return out;
}

export function decodeInfo(p: Buffer): PolicyInfo {
  if (p.length < 24) throw new Error(`INFO payload of ${p.length} bytes is shorter than 24`);
  return { obsDim: p.readUInt32LE(0), actDim: p.readUInt32LE(4), maxTiles: p.readUInt32LE(8), actionBound: p.readDoubleLE(16), metadata: p.subarray(24).toString('utf8') };
}

/** ACT: u32 tiles, u32 obsDim, f32 obs[tiles][obsDim]. ACTIONS: u32 tiles, u32 actDim, f32 actions[tiles][actDim]. */
export function encodeBatch(rows: number, width: number, values: Float32Array): Buffer {
  const out = Buffer.allocUnsafe(8 + 4 * rows * width);
  out.writeUInt32LE(rows, 0);
  out.writeUInt32LE(width, 4);
  writeArray(out, 8, values, rows * width);
  return out;
}

/** The payload size of a batch of `rows` x `width` float32. */
export const batchBytes = (rows: number, width: number): number => 8 + 4 * rows * width;

// --- environment link payloads ---------------------------------------------------------------

/** What a solver declares in ENV_HELLO; tilewise checks it against its `env:` config. */
export interface EnvHello {
  readonly tilesX: number;
  readonly tilesY: number;
  readonly obsDim: number;
  readonly actDim: number;
  /** Most copies the solver can run at once (tilewise asks for B <= this in ENV_WELCOME). */
  readonly maxCopies: number;
  readonly episodeLength: number;
  readonly actionBound: number;
  readonly controlInterval: number;
  /** Free-form description (JSON object text), e.g. {"name": "...", "dragName": "..."}. */
  readonly info: string;
}

export const ENV_HELLO_FIXED = 40;

/** ENV_HELLO: u32 tilesX, tilesY, obsDim, actDim, maxCopies, episodeLength; f64 actionBound, controlInterval; UTF-8 JSON. */
export function encodeEnvHello(h: EnvHello): Buffer {
  const info = Buffer.from(h.info, 'utf8');
  const out = Buffer.alloc(ENV_HELLO_FIXED + info.length);
  [h.tilesX, h.tilesY, h.obsDim, h.actDim, h.maxCopies, h.episodeLength].forEach((v, k) => out.writeUInt32LE(v, 4 * k));
  out.writeDoubleLE(h.actionBound, 24);
  out.writeDoubleLE(h.controlInterval, 32);
  info.copy(out, ENV_HELLO_FIXED);
  return out;
}

export function decodeEnvHello(p: Uint8Array): EnvHello {
  if (p.length < ENV_HELLO_FIXED) throw new Error(`ENV_HELLO payload of ${p.length} bytes is shorter than ${ENV_HELLO_FIXED}`);
  const b = Buffer.from(p.buffer, p.byteOffset, p.length);
  const u = (k: number): number => b.readUInt32LE(4 * k);
  return {
    tilesX: u(0),
    tilesY: u(1),
    obsDim: u(2),
    actDim: u(3),
    maxCopies: u(4),
    episodeLength: u(5),
    actionBound: b.readDoubleLE(24),
    controlInterval: b.readDoubleLE(32),
    info: b.subarray(ENV_HELLO_FIXED).toString('utf8'),
  };
}

/** Sizes of the environment link for B copies of T tiles. */
export interface EnvShape {
  readonly copies: number;
  readonly tiles: number;
  readonly obsDim: number;
  readonly actDim: number;
}

/** The StepOut arrays a TRANSITION carries, in payload order (8-byte values first, so every array is aligned). */
export const TRANSITION_FIELDS = ['drag', 'actuationPower', 'obs', 'reward', 'done', 'truncated', 'diverged'] as const;
export type TransitionField = (typeof TRANSITION_FIELDS)[number];
export type TransitionArrays = { readonly [K in TransitionField]: Float32Array | Float64Array | Uint8Array };

/**
 * Byte offsets of the TRANSITION payload:
 *   f64 drag[B*T], f64 actuationPower[B*T], f32 obs[B*T*obsDim], f32 reward[B*T],
 *   u8 done[B], u8 truncated[B], u8 diverged[B].
 */
export function transitionLayout(s: EnvShape): Record<TransitionField, number> & { bytes: number } {
  const bt = s.copies * s.tiles;
  const sizes: Record<TransitionField, number> = { drag: 8 * bt, actuationPower: 8 * bt, obs: 4 * bt * s.obsDim, reward: 4 * bt, done: s.copies, truncated: s.copies, diverged: s.copies };
  const at = {} as Record<TransitionField, number>;
  let off = 0;
  for (const k of TRANSITION_FIELDS) {
    at[k] = off;
    off += sizes[k];
  }
  return { ...at, bytes: off };
}

/** Write a step's arrays into a TRANSITION payload. */
export function writeTransition(buf: Uint8Array, layout: Record<TransitionField, number>, step: TransitionArrays): void {
  for (const k of TRANSITION_FIELDS) writeArray(buf, layout[k], step[k]);
}

/** Read a TRANSITION payload into a step's arrays (sized for the shape). */
export function readTransition(buf: Uint8Array, layout: Record<TransitionField, number>, out: TransitionArrays): void {
  for (const k of TRANSITION_FIELDS) readArray(buf, layout[k], out[k]);
}

/** The exact payload size of each reply of the environment link (SNAPSHOT: at most). */
export function envReplyBytes(s: EnvShape, maxSnapshotValues: number): Record<number, number> {
  const bt = s.copies * s.tiles;
  return {
    [MSG.OBSERVATION]: 4 * bt * s.obsDim,
    [MSG.TRANSITION]: transitionLayout(s).bytes,
    [MSG.OPPOSITION]: 8 * bt * s.actDim,
    [MSG.SNAPSHOT]: 8 * maxSnapshotValues,
  };
}
