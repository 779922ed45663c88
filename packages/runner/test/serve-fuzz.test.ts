/**
 * Robustness of the policy server: more than 10,000 malformed frames (bad lengths, truncated
 * frames, wrong sizes, NaN and infinities, wrong version, bad magic, unknown types, garbage),
 * drawn from a seeded Rng. Every frame gets the answer the protocol promises (an ERROR with the
 * right code and the connection kept, or for a framing error an ERROR and a clean close), valid
 * requests mixed in are still answered exactly, the server stays up, no connection is left
 * open, and memory stays bounded (the decoder's peak buffer and the heap after a full GC).
 */
import { connect, type Socket } from 'node:net';
import { setFlagsFromString } from 'node:v8';
import { runInNewContext } from 'node:vm';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Rng } from '@tilewise/envs';
import { buildExportModel, PolicyEvaluator } from '../src/export';
import { PolicyClient } from '../src/serve/client';
import { PolicyServer } from '../src/serve/server';
import { connectOptions, type Address } from '../src/wire/address';
import { decodeError, encodeFrame, ERR, FrameDecoder, HEADER_BYTES, MAGIC, MSG, readArray, type Frame } from '../src/wire/protocol';
import { randomObservations, trainedPolicy, type TrainedPolicy } from './helpers/policy';

setFlagsFromString('--expose-gc');
const gc = runInNewContext('gc') as () => void;

const OBS = 24;
const MAX_TILES = 64;
let t: TrainedPolicy;
let evaluator: PolicyEvaluator;
let server: PolicyServer;
let address: Address;

beforeAll(async () => {
  t = await trainedPolicy({ hidden: [32], seed: 41, updates: 2 });
  evaluator = await PolicyEvaluator.create(t.snapshot, 'simd');
  const model = buildExportModel(t.input);
  server = new PolicyServer({ policy: evaluator, actionBound: 0.5, metadata: JSON.stringify(model.metadata), maxTiles: MAX_TILES });
  address = await server.listen({ kind: 'tcp', host: '127.0.0.1', port: 0 });
});

afterAll(async () => {
  await server.close();
  evaluator.dispose();
  t.agent.dispose();
});

/** A raw connection collecting every frame the server sends, and whether it closed. */
class Raw {
  readonly frames: Frame[] = [];
  closed = false;
  private readonly decoder = new FrameDecoder(1 << 20);
  private waiters: Array<() => void> = [];
  private constructor(readonly socket: Socket) {
    socket.on('data', (c: Buffer) => {
      this.frames.push(...this.decoder.push(c).frames);
      this.wake();
    });
    socket.on('error', () => {});
    socket.on('close', () => {
      this.closed = true;
      this.wake();
    });
  }
  static open(): Promise<Raw> {
    return new Promise((resolve, reject) => {
      const s = connect(connectOptions(address), () => resolve(new Raw(s)));
      s.once('error', reject);
    });
  }
  private wake(): void {
    const w = this.waiters;
    this.waiters = [];
    for (const f of w) f();
  }
  /** Wait until `cond` holds (or fail after `ms`). */
  async until(cond: () => boolean, ms = 20_000): Promise<void> {
    const deadline = Date.now() + ms;
    while (!cond()) {
      if (Date.now() > deadline) {
        const last = this.frames.at(-1);
        throw new Error(`timed out: ${this.frames.length} frames received, closed ${this.closed}; last ${last ? `${last.type} id ${last.id} ${last.payload.subarray(8).toString()}` : 'none'}`);
      }
      await new Promise<void>((r) => {
        this.waiters.push(r);
        setTimeout(r, 50);
      });
    }
  }
}

function frame(type: number, id: number, payload: Uint8Array): Buffer {
  return encodeFrame(type, id, payload);
}

function actPayload(tiles: number, width: number, values: Float32Array | null, extraBytes = 0): Buffer {
  const n = values ? values.length : tiles * width;
  const p = Buffer.alloc(Math.max(0, 8 + 4 * n + extraBytes));
  if (p.length >= 4) p.writeUInt32LE(tiles >>> 0, 0);
  if (p.length >= 8) p.writeUInt32LE(width >>> 0, 4);
  if (values) for (let i = 0; i < n && 8 + 4 * i + 4 <= p.length; i++) p.writeFloatLE(values[i]!, 8 + 4 * i);
  return p;
}

/** Frames that must be answered with ERROR `code` on a connection that stays open; null code: a valid ACT. */
function keptCase(rng: Rng, id: number): { bytes: Buffer; code: number | null; obs?: Float32Array; tiles?: number } {
  const kind = rng.int(11);
  const tiles = 1 + rng.int(MAX_TILES);
  switch (kind) {
    case 0: {
      // wrong obsDim (in a payload within the frame limit)
      const width = OBS + 1 + rng.int(5);
      return { bytes: frame(MSG.ACT, id, actPayload(1 + rng.int(Math.floor((MAX_TILES * OBS) / width)), width, null)), code: ERR.MISMATCH };
    }
    case 1: // zero tiles
      return { bytes: frame(MSG.ACT, id, actPayload(0, OBS, null)), code: ERR.BAD_SIZE };
    case 2: // more tiles than allowed, announced in a short payload
      return { bytes: frame(MSG.ACT, id, actPayload(MAX_TILES + 1 + rng.int(1e6), OBS, new Float32Array(OBS))), code: ERR.TOO_MANY_TILES };
    case 3: {
      // the payload is shorter or longer than tiles x obsDim (a bad inner length)
      // (a longer one stays within the frame limit: over it is a framing error, tested below)
      let extra = rng.uniform() < 0.5 ? -(1 + rng.int(4 * tiles * OBS)) : 1 + rng.int(64);
      if (8 + 4 * tiles * OBS + extra > server.maxPayload) extra = -extra;
      return { bytes: frame(MSG.ACT, id, actPayload(tiles, OBS, null, extra)), code: ERR.BAD_SIZE };
    }
    case 4: {
      // NaN or an infinity somewhere
      const obs = randomObservations(rng, tiles, OBS);
      obs[rng.int(obs.length)] = [Number.NaN, Infinity, -Infinity][rng.int(3)]!;
      return { bytes: frame(MSG.ACT, id, actPayload(tiles, OBS, obs)), code: ERR.NON_FINITE };
    }
    case 5: // an unknown type with a random payload
      return { bytes: frame(0x0100 + rng.int(0xfe00), id, Buffer.from(Array.from({ length: rng.int(200) }, () => rng.int(256)))), code: ERR.UNKNOWN_TYPE };
    case 6: // a request that carries no payload, with one
      return { bytes: frame(rng.uniform() < 0.5 ? MSG.INFO_REQUEST : MSG.STATUS_REQUEST, id, Buffer.alloc(1 + rng.int(100))), code: ERR.BAD_SIZE };
    case 7: // a message of the environment link, not of the policy service
      return { bytes: frame([MSG.STEP, MSG.RESET, MSG.ENV_HELLO, MSG.ACTIONS, MSG.TRANSITION][rng.int(5)]!, id, Buffer.alloc(rng.int(64))), code: ERR.UNEXPECTED };
    case 8: // an ACT shorter than its own head
      return { bytes: frame(MSG.ACT, id, Buffer.alloc(rng.int(8))), code: ERR.BAD_SIZE };
    default: {
      // valid requests mixed in: still answered, exactly
      const obs = randomObservations(rng, tiles, OBS, 3);
      return { bytes: frame(MSG.ACT, id, actPayload(tiles, OBS, obs)), code: null, obs, tiles };
    }
  }
}

/** Frames after which the server must answer ERROR `code` and close; code null: no answer owed. */
function closingCase(rng: Rng): { bytes: Buffer; code: number | null } {
  const kind = rng.int(5);
  const good = frame(MSG.INFO_REQUEST, 1, Buffer.alloc(0));
  switch (kind) {
    case 0: {
      const b = Buffer.from(good);
      b[rng.int(4)]! ^= 1 + rng.int(255); // bad magic
      return { bytes: b, code: ERR.BAD_MAGIC };
    }
    case 1: {
      const b = Buffer.from(good);
      b.writeUInt16LE([0, 2, 3, 0xffff][rng.int(4)]!, 4); // another protocol version
      return { bytes: b, code: ERR.BAD_VERSION };
    }
    case 2: {
      const b = Buffer.from(good);
      b.writeUInt32LE(server.maxPayload + 1 + rng.int(0xffffffff - server.maxPayload - 1), 12); // a length over the limit, up to 4 GiB
      return { bytes: b, code: ERR.FRAME_TOO_LARGE };
    }
    case 3: {
      // random garbage (not starting with the magic)
      const b = Buffer.from(Array.from({ length: HEADER_BYTES + rng.int(300) }, () => rng.int(256)));
      if (b.subarray(0, 4).equals(MAGIC)) b[0] = 0;
      return { bytes: b, code: ERR.BAD_MAGIC };
    }
    default: {
      // a truncated frame (header promising more than is sent), then the client hangs up
      const payload = actPayload(4, OBS, randomObservations(rng, 4, OBS));
      const b = frame(MSG.ACT, 7, payload);
      return { bytes: b.subarray(0, rng.int(b.length - 1) + 1), code: null };
    }
  }
}

describe('policy server under malformed input (fuzz, seeded)', () => {
  it('answers >= 10,000 malformed frames as the protocol says, stays up, and keeps memory bounded', async () => {
    const rng = Rng.derive(2026, 'test/serve-fuzz');
    gc();
    const heapBefore = process.memoryUsage().heapUsed;
    let malformed = 0;

    // 1. Malformed frames that keep the connection: 4 connections x 3,000 frames (9 in 11 malformed), pipelined.
    for (let c = 0; c < 4; c++) {
      const raw = await Raw.open();
      const expected = new Map<number, ReturnType<typeof keptCase>>();
      const chunks: Buffer[] = [];
      for (let i = 1; i <= 3000; i++) {
        const k = keptCase(rng, i);
        expected.set(i, k);
        chunks.push(k.bytes);
        if (k.code !== null) malformed++;
        if (rng.uniform() < 0.02) {
          chunks.push(frame(MSG.ERROR, 0, Buffer.from('a client error frame: never answered'))); // owed no reply
          malformed++;
        }
      }
      // Split the stream at random points: frames arrive cut across packets.
      const stream = Buffer.concat(chunks);
      for (let off = 0; off < stream.length; ) {
        const n = 1 + rng.int(9000);
        raw.socket.write(stream.subarray(off, off + n));
        off += n;
      }
      await raw.until(() => raw.frames.length >= expected.size);
      expect(raw.closed).toBe(false);
      expect(raw.frames.length).toBe(expected.size); // one reply per request, none to the client's ERROR frames
      for (const f of raw.frames) {
        const k = expected.get(f.id)!;
        if (k.code === null) {
          expect(f.type).toBe(MSG.ACTIONS);
          const got = new Float32Array(k.tiles!);
          readArray(f.payload, 8, got);
          expect(got).toEqual(t.agent.act(k.obs!, k.tiles!, false));
        } else {
          expect(f.type).toBe(MSG.ERROR);
          expect(decodeError(f.payload).code).toBe(k.code);
        }
      }
      raw.socket.destroy();
    }

    // 2. Framing errors: one connection each (8 at a time), answered then closed by the server.
    const closing = Array.from({ length: 1200 }, () => closingCase(rng));
    for (let i = 0; i < closing.length; i += 8) {
      await Promise.all(
        closing.slice(i, i + 8).map(async (k) => {
          const raw = await Raw.open();
          raw.socket.write(k.bytes);
          malformed++;
          if (k.code === null) {
            raw.socket.destroy(); // truncated frame, then the client vanishes
            return;
          }
          await raw.until(() => raw.closed);
          expect(raw.frames.length).toBe(1);
          expect(raw.frames[0]!.type).toBe(MSG.ERROR);
          expect(decodeError(raw.frames[0]!.payload).code).toBe(k.code);
        }),
      );
    }
    expect(malformed).toBeGreaterThanOrEqual(10_000);

    // The server is up and answers correctly; no connection is left behind.
    const c = await PolicyClient.connect(address);
    const obs = randomObservations(rng, MAX_TILES, OBS);
    expect(await c.act(obs, MAX_TILES, OBS)).toEqual(t.agent.act(obs, MAX_TILES, false));
    const status = await c.status();
    c.close();
    for (let k = 0; k < 100 && server.stats.open > 0; k++) await new Promise((r) => setTimeout(r, 20));
    expect(server.stats.open).toBe(0);
    expect(status.framingErrors).toBe(closing.filter((k) => k.code !== null).length);
    // Memory: a connection never held more than one frame plus one socket chunk (64 KiB), though
    // headers announced up to 4 GiB; the heap after a full GC is back near where it started.
    expect(server.stats.peakBufferedBytes).toBeLessThanOrEqual(HEADER_BYTES + server.maxPayload + 65536);
    gc();
    expect(process.memoryUsage().heapUsed - heapBefore).toBeLessThan(24 * 2 ** 20);
  });
});
