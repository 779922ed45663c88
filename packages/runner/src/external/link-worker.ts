/**
 * The I/O thread of an ExternalEnv (env.ts). The environment contract is synchronous (step
 * returns the transition), sockets in Node are not; so the socket lives in this worker thread
 * and the env's thread waits on a shared counter (Atomics.wait) while this thread talks to the
 * solver. Requests arrive on a MessagePort; each answer is posted back on it and announced by
 * incrementing ctrl[0], which the env's thread reads with receiveMessageOnPort.
 *
 * On the first request this thread listens on the configured address, accepts one solver, reads
 * its ENV_HELLO, checks it against the config (a mismatch is answered with ERROR MISMATCH naming
 * the field, and reported), answers ENV_WELCOME with the number of copies, stops listening, and
 * then relays requests and replies one at a time, checking each reply's type and exact size.
 */
import { createServer, type Server, type Socket } from 'node:net';
import { workerData, type MessagePort } from 'node:worker_threads';
import { formatAddress, listenOn, type Address } from '../wire/address';
import {
  decodeEnvHello,
  decodeError,
  encodeError,
  encodeFrame,
  envReplyBytes,
  ERR,
  errorName,
  FrameDecoder,
  MAX_ERROR_TEXT,
  messageName,
  MSG,
  type EnvHello,
  type Frame,
} from '../wire/protocol';

export interface LinkInit {
  readonly address: Address;
  readonly copies: number;
  readonly expect: { readonly tilesX: number; readonly tilesY: number; readonly obsDim: number; readonly actDim: number; readonly actionBound: number; readonly controlInterval: number; readonly episodeLength: number };
  readonly connectTimeoutMs: number;
  readonly replyTimeoutMs: number;
  readonly maxSnapshotValues: number;
  readonly ctrl: SharedArrayBuffer;
  readonly port: MessagePort;
}

/** Main -> worker. */
export type LinkRequest = { readonly op: 'request'; readonly type: number; readonly expect: number; readonly payload: Uint8Array } | { readonly op: 'close' };
/** Worker -> main. */
export type LinkReply = { readonly ok: true; readonly payload: Uint8Array; readonly solver: string } | { readonly ok: false; readonly error: string };

const init = workerData as LinkInit;
const ctrl = new Int32Array(init.ctrl);
const where = `external env ${formatAddress(init.address)}`;
const shape = { copies: init.copies, tiles: init.expect.tilesX * init.expect.tilesY, obsDim: init.expect.obsDim, actDim: init.expect.actDim };
const replyBytes = envReplyBytes(shape, init.maxSnapshotValues);
const maxPayload = Math.max(...Object.values(replyBytes), 8 + MAX_ERROR_TEXT, 64 * 1024);

let socket: Socket | null = null;
let solverName = 'solver';
let broken: string | null = null;
const decoder = new FrameDecoder(maxPayload);
const inbox: Frame[] = [];
let wakeReader: (() => void) | null = null;

function answer(r: LinkReply): void {
  init.port.postMessage(r);
  Atomics.add(ctrl, 0, 1);
  Atomics.notify(ctrl, 0);
}

function wake(): void {
  const w = wakeReader;
  wakeReader = null;
  w?.();
}

/** The next frame from the solver, or an error after `ms`. */
async function nextFrame(ms: number, waitingFor: string): Promise<Frame> {
  const deadline = Date.now() + ms;
  while (inbox.length === 0) {
    if (broken) throw new Error(broken);
    const left = deadline - Date.now();
    if (left <= 0) throw new Error(`${where}: no answer from the ${solverName} to ${waitingFor} within ${Math.round(ms / 1000)} s`);
    await new Promise<void>((resolve) => {
      const timer = setTimeout(resolve, left);
      wakeReader = () => {
        clearTimeout(timer);
        resolve();
      };
    });
  }
  return inbox.shift()!;
}

function attach(s: Socket): void {
  socket = s;
  s.setNoDelay(true);
  s.on('data', (chunk: Buffer) => {
    const { frames, error } = decoder.push(chunk);
    inbox.push(...frames);
    if (error) {
      broken = `${where}: the ${solverName} broke the protocol (${errorName(error.code)}: ${error.message})`;
      s.end(encodeFrame(MSG.ERROR, error.id, encodeError(error.code, 0, `${error.message}; closing the connection`)));
    }
    wake();
  });
  s.on('error', (e) => {
    broken ??= `${where}: connection to the ${solverName} failed (${e.message})`;
    wake();
  });
  s.on('close', () => {
    broken ??= `${where}: the ${solverName} closed the connection`;
    wake();
  });
}

/** Listen, accept one solver, check its ENV_HELLO, answer ENV_WELCOME. */
async function connectSolver(): Promise<void> {
  const server: Server = createServer();
  const accepted = new Promise<Socket>((resolve) => server.once('connection', resolve));
  await listenOn(server, init.address);
  let timer: NodeJS.Timeout | undefined;
  const s = await Promise.race([
    accepted,
    new Promise<never>((_, reject) => {
      timer = setTimeout(() => reject(new Error(`${where}: no solver connected within ${Math.round(init.connectTimeoutMs / 1000)} s (env.connectTimeout)`)), init.connectTimeoutMs);
    }),
  ]).finally(() => {
    clearTimeout(timer);
    server.close();
  });
  attach(s);
  const hello = await nextFrame(init.connectTimeoutMs, 'the handshake (ENV_HELLO)');
  if (hello.type !== MSG.ENV_HELLO) {
    return refuseSolver(ERR.UNEXPECTED, `expected ENV_HELLO first, got ${messageName(hello.type)}`);
  }
  let h: EnvHello;
  try {
    h = decodeEnvHello(hello.payload);
  } catch (e) {
    return refuseSolver(ERR.BAD_SIZE, (e as Error).message);
  }
  try {
    const name = (JSON.parse(h.info || '{}') as { name?: unknown }).name;
    if (typeof name === 'string' && name) solverName = `solver "${name.slice(0, 80)}"`;
  } catch {
    // the description is free-form; a bad one is only not shown
  }
  const e = init.expect;
  const checks: Array<[string, number, number]> = [
    ['tileGrid[0]', h.tilesX, e.tilesX],
    ['tileGrid[1]', h.tilesY, e.tilesY],
    ['obsDim', h.obsDim, e.obsDim],
    ['actDim', h.actDim, e.actDim],
    ['actionBound', h.actionBound, e.actionBound],
    ['controlInterval', h.controlInterval, e.controlInterval],
    ['episodeLength', h.episodeLength, e.episodeLength],
  ];
  for (const [field, got, want] of checks) {
    if (got !== want) return refuseSolver(ERR.MISMATCH, `env.${field}: the ${solverName} says ${got}, the config says ${want}`);
  }
  if (h.maxCopies < init.copies) {
    return refuseSolver(ERR.MISMATCH, `copies: tilewise needs ${init.copies} copies, the ${solverName} runs at most ${h.maxCopies}`);
  }
  const welcome = Buffer.alloc(8);
  welcome.writeUInt32LE(init.copies, 0);
  s.write(encodeFrame(MSG.ENV_WELCOME, hello.id, welcome));
}

function refuseSolver(code: number, message: string): never {
  socket?.end(encodeFrame(MSG.ERROR, 0, encodeError(code, 0, message)));
  broken = `${where}: ${message}`;
  throw new Error(broken);
}

let nextId = 1;

async function relay(r: Extract<LinkRequest, { op: 'request' }>): Promise<Uint8Array> {
  if (!socket) await connectSolver();
  if (broken) throw new Error(broken);
  const id = nextId++;
  socket!.write(encodeFrame(r.type, id, r.payload));
  const f = await nextFrame(init.replyTimeoutMs, messageName(r.type));
  if (f.type === MSG.ERROR) {
    const e = decodeError(f.payload);
    throw new Error(`${where}: the ${solverName} answered ${messageName(r.type)} with ${errorName(e.code)}: ${e.message}`);
  }
  if (f.type !== r.expect || f.id !== id) {
    broken = `${where}: the ${solverName} answered ${messageName(r.type)} (id ${id}) with ${messageName(f.type)} (id ${f.id}), expected ${messageName(r.expect)}`;
    throw new Error(broken);
  }
  const size = replyBytes[r.expect]!;
  const ok = r.expect === MSG.SNAPSHOT ? f.payload.length <= size && f.payload.length % 8 === 0 : f.payload.length === size;
  if (!ok) {
    throw new Error(
      `${where}: the ${solverName} sent a ${messageName(f.type)} of ${f.payload.length} bytes, expected ${r.expect === MSG.SNAPSHOT ? `a multiple of 8 up to ${size}` : size} ` +
        `(${shape.copies} copies x ${shape.tiles} tiles, obsDim ${shape.obsDim}, actDim ${shape.actDim})`,
    );
  }
  return new Uint8Array(f.payload);
}

init.port.on('message', (m: LinkRequest) => {
  if (m.op === 'close') {
    if (socket && !broken) socket.end(encodeFrame(MSG.CLOSE, 0));
    socket?.once('finish', () => socket?.destroy());
    init.port.close();
    return;
  }
  relay(m).then(
    (payload) => answer({ ok: true, payload, solver: solverName }),
    (e: unknown) => answer({ ok: false, error: e instanceof Error ? e.message : String(e) }),
  );
});
