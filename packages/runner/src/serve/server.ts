/**
 * The policy server (`tilewise serve`): answers batches of tile observations with actions over
 * the wire protocol (wire/protocol.ts, docs/wire-protocol.md).
 *
 * Requests: INFO_REQUEST -> INFO, ACT -> ACTIONS, STATUS_REQUEST -> STATUS; anything else gets an
 * ERROR frame. A malformed request (wrong sizes, non-finite values, too many tiles, unknown
 * type) is answered with ERROR and the connection stays open; a framing error (bad magic, other
 * protocol version, a payload longer than the limit) is answered with ERROR and the connection
 * is closed, since the stream cannot be followed past it.
 *
 * Memory is bounded whatever clients send: a connection holds at most one frame of at most
 * `maxPayload` bytes (the ACT of `maxTiles` tiles) plus one socket chunk, a client that does not
 * read its replies is paused once `maxPendingWrite` bytes wait to be sent, and at most
 * `maxConnections` connections are open. Actions are computed synchronously between reads, so
 * concurrent clients are served in turn.
 */
import { createServer, type Server, type Socket } from 'node:net';
import { formatAddress, listenOn, type Address } from '../wire/address';
import {
  batchBytes,
  encodeBatch,
  encodeError,
  encodeFrame,
  encodeInfo,
  ERR,
  FrameDecoder,
  messageName,
  MSG,
  readArray,
  type Frame,
} from '../wire/protocol';

/** What the server runs: a batched policy (PolicyEvaluator fits). */
export interface BatchPolicy {
  readonly obsDim: number;
  readonly actDim: number;
  act(obs: Float32Array, count: number): Float32Array;
}

export interface PolicyServerOptions {
  readonly policy: BatchPolicy;
  readonly actionBound: number;
  /** The export metadata sent in INFO (JSON text). */
  readonly metadata: string;
  /** Most tiles in one ACT (default 4096). */
  readonly maxTiles?: number;
  /** Most connections open at once (default 64). */
  readonly maxConnections?: number;
  /** Reply bytes allowed to wait for a slow reader before its connection is paused (default 4 MiB). */
  readonly maxPendingWrite?: number;
  /** Connection open/close lines. */
  readonly log?: (line: string) => void;
}

export interface ServerStats {
  connections: number;
  open: number;
  frames: number;
  actRequests: number;
  tiles: number;
  /** ERROR frames sent for malformed requests (connection kept). */
  errors: number;
  /** Connections closed after a framing error. */
  framingErrors: number;
  /** Largest number of bytes one connection's frame decoder held. */
  peakBufferedBytes: number;
}

export class PolicyServer {
  readonly maxTiles: number;
  readonly maxPayload: number;
  readonly stats: ServerStats = { connections: 0, open: 0, frames: 0, actRequests: 0, tiles: 0, errors: 0, framingErrors: 0, peakBufferedBytes: 0 };
  private readonly server: Server;
  private readonly sockets = new Set<Socket>();
  private readonly policy: BatchPolicy;
  private readonly info: Buffer;
  private readonly maxPendingWrite: number;
  private readonly log: (line: string) => void;
  private obs = new Float32Array(0);
  private bound: Address | null = null;

  constructor(private readonly o: PolicyServerOptions) {
    this.policy = o.policy;
    this.maxTiles = o.maxTiles ?? 4096;
    if (!Number.isInteger(this.maxTiles) || this.maxTiles < 1) throw new Error(`PolicyServer: maxTiles must be a positive integer, got ${this.maxTiles}`);
    this.maxPayload = Math.max(batchBytes(this.maxTiles, o.policy.obsDim), 4096);
    this.maxPendingWrite = o.maxPendingWrite ?? 4 * 2 ** 20;
    this.log = o.log ?? (() => {});
    this.info = encodeInfo({ obsDim: o.policy.obsDim, actDim: o.policy.actDim, maxTiles: this.maxTiles, actionBound: o.actionBound, metadata: o.metadata });
    this.server = createServer((s) => this.accept(s));
    this.server.maxConnections = o.maxConnections ?? 64;
  }

  /** Start listening; resolves with the bound address (the chosen port for port 0). */
  async listen(a: Address): Promise<Address> {
    this.bound = await listenOn(this.server, a);
    return this.bound;
  }

  get address(): Address | null {
    return this.bound;
  }

  /** Stop accepting, close every connection. */
  async close(): Promise<void> {
    for (const s of this.sockets) s.destroy();
    await new Promise<void>((resolve) => this.server.close(() => resolve()));
  }

  private accept(socket: Socket): void {
    const st = this.stats;
    st.connections++;
    st.open++;
    this.sockets.add(socket);
    const peer = socket.remoteAddress ? `${socket.remoteAddress}:${socket.remotePort}` : 'unix socket';
    this.log(`connection ${st.connections} from ${peer}`);
    socket.setNoDelay(true);
    const decoder = new FrameDecoder(this.maxPayload);
    let closing = false;
    socket.on('data', (chunk: Buffer) => {
      if (closing) return;
      const { frames, error } = decoder.push(chunk);
      st.peakBufferedBytes = Math.max(st.peakBufferedBytes, decoder.peak);
      for (const f of frames) this.handle(socket, f);
      if (error) {
        closing = true;
        st.framingErrors++;
        socket.end(encodeFrame(MSG.ERROR, error.id, encodeError(error.code, 0, `${error.message}; closing the connection`)));
        socket.once('finish', () => socket.destroy());
        return;
      }
      if (socket.writableLength > this.maxPendingWrite) {
        socket.pause();
        socket.once('drain', () => socket.resume());
      }
    });
    socket.on('error', () => {
      // A client that resets or vanishes: nothing to answer; 'close' follows.
    });
    socket.on('close', () => {
      st.open--;
      this.sockets.delete(socket);
    });
  }

  private reply(socket: Socket, type: number, id: number, payload?: Uint8Array): void {
    if (!socket.destroyed) socket.write(encodeFrame(type, id, payload));
  }

  private refuse(socket: Socket, id: number, code: number, detail: number, message: string): void {
    this.stats.errors++;
    this.reply(socket, MSG.ERROR, id, encodeError(code, detail, message));
  }

  private handle(socket: Socket, f: Frame): void {
    this.stats.frames++;
    const p = f.payload;
    switch (f.type) {
      case MSG.INFO_REQUEST:
      case MSG.STATUS_REQUEST:
        if (p.length !== 0) return this.refuse(socket, f.id, ERR.BAD_SIZE, f.type, `${messageName(f.type)} carries no payload, got ${p.length} bytes`);
        if (f.type === MSG.INFO_REQUEST) return this.reply(socket, MSG.INFO, f.id, this.info);
        return this.reply(socket, MSG.STATUS, f.id, Buffer.from(JSON.stringify(this.status()), 'utf8'));
      case MSG.ACT:
        return this.act(socket, f);
      case MSG.ERROR:
        return; // never answer an error with an error
      default:
        if (Object.values(MSG).includes(f.type as never)) {
          return this.refuse(socket, f.id, ERR.UNEXPECTED, f.type, `${messageName(f.type)} is not a request of the policy service (INFO_REQUEST, ACT, STATUS_REQUEST)`);
        }
        return this.refuse(socket, f.id, ERR.UNKNOWN_TYPE, f.type, `unknown message type ${messageName(f.type)}`);
    }
  }

  private act(socket: Socket, f: Frame): void {
    const p = f.payload;
    const { obsDim, actDim } = this.policy;
    if (p.length < 8) return this.refuse(socket, f.id, ERR.BAD_SIZE, 0, `ACT payload of ${p.length} bytes is shorter than its 8-byte head (u32 tiles, u32 obsDim)`);
    const tiles = p.readUInt32LE(0);
    const width = p.readUInt32LE(4);
    if (width !== obsDim) return this.refuse(socket, f.id, ERR.MISMATCH, width, `ACT obsDim ${width} differs from the policy's ${obsDim}`);
    if (tiles === 0) return this.refuse(socket, f.id, ERR.BAD_SIZE, 0, 'ACT with 0 tiles');
    if (tiles > this.maxTiles) return this.refuse(socket, f.id, ERR.TOO_MANY_TILES, tiles, `ACT with ${tiles} tiles, more than this server's limit of ${this.maxTiles}`);
    const need = batchBytes(tiles, obsDim);
    if (p.length !== need) return this.refuse(socket, f.id, ERR.BAD_SIZE, p.length, `ACT of ${tiles} tiles x ${obsDim} observations needs ${need} payload bytes, got ${p.length}`);
    const n = tiles * obsDim;
    if (this.obs.length < n) this.obs = new Float32Array(n);
    readArray(p, 8, this.obs, n);
    for (let i = 0; i < n; i++) {
      if (!Number.isFinite(this.obs[i]!)) {
        return this.refuse(socket, f.id, ERR.NON_FINITE, i, `observation ${i % obsDim} of tile ${Math.floor(i / obsDim)} is ${this.obs[i]}`);
      }
    }
    const actions = this.policy.act(this.obs, tiles);
    this.stats.actRequests++;
    this.stats.tiles += tiles;
    this.reply(socket, MSG.ACTIONS, f.id, encodeBatch(tiles, actDim, actions));
  }

  /** STATUS: counters, limits and this process's memory. */
  status(): Record<string, unknown> {
    const m = process.memoryUsage();
    return {
      ...this.stats,
      maxTiles: this.maxTiles,
      maxPayload: this.maxPayload,
      address: this.bound ? formatAddress(this.bound) : null,
      heapUsed: m.heapUsed,
      rss: m.rss,
    };
  }
}
