/**
 * The solver side of the environment link, for a solver written in TypeScript: connect to a
 * training run (an ExternalEnv listening), declare the environment (ENV_HELLO), build it for the
 * number of copies tilewise asks for (ENV_WELCOME), then answer RESET, RESET_COPY, STEP,
 * OPPOSITION_REQUEST and SNAPSHOT_REQUEST from a `TiledEnv` until CLOSE or the connection ends.
 * examples/ks-solver.ts runs the KS surrogate this way; a C or Fortran solver implements the
 * same frames (docs/wire-protocol.md).
 */
import { connect, type Socket } from 'node:net';
import type { TiledEnv } from '@tilewise/envs';
import { connectOptions, formatAddress, type Address } from '../wire/address';
import {
  decodeError,
  encodeEnvHello,
  encodeError,
  encodeFrame,
  ERR,
  errorName,
  FrameDecoder,
  messageName,
  MSG,
  readArray,
  transitionLayout,
  writeTransition,
  type Frame,
} from '../wire/protocol';

export interface SolverOptions {
  /** Shown in tilewise's messages. */
  readonly name?: string;
  /** Most copies this solver can run (default 1024). */
  readonly maxCopies?: number;
  /** Keep trying to connect this long, ms (tilewise may not listen yet; default 60 s). */
  readonly connectTimeoutMs?: number;
  /** Largest request accepted, bytes (default 256 MiB). */
  readonly maxPayload?: number;
  readonly log?: (line: string) => void;
}

async function connectWithRetry(a: Address, timeoutMs: number): Promise<Socket> {
  const deadline = Date.now() + timeoutMs;
  for (;;) {
    try {
      return await new Promise<Socket>((resolve, reject) => {
        const s = connect(connectOptions(a));
        s.once('connect', () => {
          s.off('error', reject);
          resolve(s);
        });
        s.once('error', reject);
      });
    } catch (e) {
      if (Date.now() > deadline) throw new Error(`solver: cannot connect to ${formatAddress(a)} within ${timeoutMs} ms (${(e as Error).message})`);
      await new Promise((r) => setTimeout(r, 100));
    }
  }
}

/**
 * Serve `makeEnv(copies)` to the run listening at `a`. Resolves with the number of STEPs
 * answered when tilewise sends CLOSE or closes the connection.
 */
export async function runSolver(makeEnv: (copies: number) => TiledEnv, a: Address, o: SolverOptions = {}): Promise<number> {
  const log = o.log ?? (() => {});
  const socket = await connectWithRetry(a, o.connectTimeoutMs ?? 60_000);
  socket.setNoDelay(true);
  const decoder = new FrameDecoder(o.maxPayload ?? 256 * 2 ** 20);
  const inbox: Frame[] = [];
  let ended: string | null = null;
  let wake: (() => void) | null = null;
  socket.on('data', (chunk: Buffer) => {
    const { frames, error } = decoder.push(chunk);
    inbox.push(...frames);
    if (error) ended = `tilewise broke the protocol (${errorName(error.code)}: ${error.message})`;
    wake?.();
  });
  socket.on('error', (e) => {
    ended ??= `connection error (${e.message})`;
    wake?.();
  });
  socket.on('close', () => {
    ended ??= 'tilewise closed the connection';
    wake?.();
  });
  const next = async (): Promise<Frame | null> => {
    while (inbox.length === 0) {
      if (ended) return null;
      await new Promise<void>((r) => (wake = r));
      wake = null;
    }
    return inbox.shift()!;
  };

  // A probe env (one copy, never reset) to declare the spec.
  const probe = makeEnv(1).spec;
  socket.write(
    encodeFrame(
      MSG.ENV_HELLO,
      1,
      encodeEnvHello({
        tilesX: probe.tileGrid[0],
        tilesY: probe.tileGrid[1],
        obsDim: probe.obsDim,
        actDim: probe.actDim,
        maxCopies: o.maxCopies ?? 1024,
        episodeLength: probe.episodeLength,
        actionBound: probe.actionBound,
        controlInterval: probe.controlInterval,
        info: JSON.stringify({ name: o.name ?? probe.kind, kind: probe.kind, dragName: probe.dragName, obsLayout: probe.obsLayout }),
      }),
    ),
  );
  const welcome = await next();
  if (!welcome) throw new Error(`solver: ${ended}`);
  if (welcome.type === MSG.ERROR) {
    const e = decodeError(welcome.payload);
    socket.destroy();
    throw new Error(`solver: tilewise refused the handshake (${errorName(e.code)}): ${e.message}`);
  }
  if (welcome.type !== MSG.ENV_WELCOME || welcome.payload.length !== 8) throw new Error(`solver: expected ENV_WELCOME, got ${messageName(welcome.type)}`);
  const copies = welcome.payload.readUInt32LE(0);
  const env = makeEnv(copies);
  const { tiles, obsDim, actDim } = env.spec;
  const bt = copies * tiles;
  log(`solver: connected to ${formatAddress(a)}, running ${copies} copies of ${tiles} tiles`);
  const actions = new Float32Array(bt * actDim);
  const L = transitionLayout({ copies, tiles, obsDim, actDim });
  const transition = Buffer.alloc(L.bytes);
  let steps = 0;

  const reply = (f: Frame, type: number, payload: Uint8Array): boolean => socket.write(encodeFrame(type, f.id, payload));
  const refuse = (f: Frame, code: number, message: string): boolean => reply(f, MSG.ERROR, encodeError(code, f.type, message));
  const bytesOf = (a: Float32Array | Float64Array | Uint8Array): Uint8Array => new Uint8Array(a.buffer, a.byteOffset, a.byteLength);

  for (;;) {
    const f = await next();
    if (!f || f.type === MSG.CLOSE) break;
    const p = f.payload;
    try {
      switch (f.type) {
        case MSG.RESET: {
          if (p.length !== 8 + 8 * copies || p.readUInt32LE(0) !== copies) {
            refuse(f, ERR.BAD_SIZE, `RESET needs ${copies} seeds (${8 + 8 * copies} bytes), got ${p.length} bytes`);
            break;
          }
          const seeds = Array.from({ length: copies }, (_, b) => p.readDoubleLE(8 + 8 * b));
          reply(f, MSG.OBSERVATION, bytesOf(env.reset(seeds)));
          break;
        }
        case MSG.RESET_COPY:
          if (p.length !== 16) {
            refuse(f, ERR.BAD_SIZE, `RESET_COPY carries 16 bytes, got ${p.length}`);
            break;
          }
          env.resetCopy(p.readUInt32LE(0), p.readDoubleLE(8));
          reply(f, MSG.OBSERVATION, bytesOf(env.observe()));
          break;
        case MSG.STEP: {
          if (p.length !== 4 * bt * actDim) {
            refuse(f, ERR.BAD_SIZE, `STEP carries ${bt * actDim} float32 actions (${4 * bt * actDim} bytes), got ${p.length}`);
            break;
          }
          readArray(p, 0, actions);
          const s = env.step(actions);
          writeTransition(transition, L, s);
          reply(f, MSG.TRANSITION, transition);
          steps++;
          break;
        }
        case MSG.OPPOSITION_REQUEST:
          reply(f, MSG.OPPOSITION, bytesOf(env.oppositionSignal()));
          break;
        case MSG.SNAPSHOT_REQUEST:
          if (p.length !== 4) {
            refuse(f, ERR.BAD_SIZE, `SNAPSHOT_REQUEST carries 4 bytes, got ${p.length}`);
            break;
          }
          reply(f, MSG.SNAPSHOT, bytesOf(env.snapshot(p.readUInt32LE(0))));
          break;
        default:
          refuse(f, ERR.UNEXPECTED, `${messageName(f.type)} is not a request of the environment link`);
      }
    } catch (e) {
      refuse(f, ERR.INTERNAL, (e as Error).message);
    }
  }
  socket.end();
  log(`solver: done after ${steps} steps (${ended ?? 'CLOSE received'})`);
  return steps;
}
