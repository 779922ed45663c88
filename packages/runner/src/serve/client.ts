/**
 * A TypeScript client of the policy service (tests, benchmarks, and an example of the protocol
 * from the calling side; examples/policy-client.c is the C one). Requests may be pipelined;
 * replies are matched to requests by id.
 */
import { connect, type Socket } from 'node:net';
import { connectOptions, formatAddress, type Address } from '../wire/address';
import { decodeError, decodeInfo, isFatal, encodeBatch, encodeFrame, FrameDecoder, messageName, MSG, readArray, RemoteError, type Frame, type PolicyInfo } from '../wire/protocol';

export class PolicyClient {
  private readonly decoder = new FrameDecoder(256 * 2 ** 20);
  private readonly pending = new Map<number, { resolve: (f: Frame) => void; reject: (e: Error) => void; type: number }>();
  private nextId = 1;
  private closedError: Error | null = null;

  private constructor(private readonly socket: Socket, readonly address: string) {
    socket.setNoDelay(true);
    socket.on('data', (chunk: Buffer) => {
      const { frames, error } = this.decoder.push(chunk);
      for (const f of frames) {
        const w = this.pending.get(f.id);
        if (!w) {
          // An ERROR for no request of ours (id 0): the server is closing the connection.
          if (f.type === MSG.ERROR) {
            const e = decodeError(f.payload);
            this.fail(new RemoteError(e.code, e.detail, e.message, `connection to ${address}`));
          }
          continue;
        }
        this.pending.delete(f.id);
        w.resolve(f);
        if (f.type === MSG.ERROR && isFatal(decodeError(f.payload).code)) {
          const e = decodeError(f.payload);
          this.fail(new RemoteError(e.code, e.detail, e.message, `connection to ${address}`));
        }
      }
      if (error) this.fail(new Error(`policy client ${address}: ${error.message}`));
    });
    socket.on('error', (e) => this.fail(new Error(`policy client ${address}: ${e.message}`)));
    socket.on('close', () => this.fail(new Error(`policy client ${address}: the server closed the connection`)));
  }

  static connect(a: Address): Promise<PolicyClient> {
    return new Promise((resolve, reject) => {
      const s = connect(connectOptions(a));
      s.once('connect', () => {
        s.off('error', reject);
        resolve(new PolicyClient(s, formatAddress(a)));
      });
      s.once('error', (e) => reject(new Error(`cannot connect to ${formatAddress(a)}: ${e.message}`)));
    });
  }

  private fail(e: Error): void {
    if (!this.closedError) this.closedError = e;
    for (const w of this.pending.values()) w.reject(this.closedError);
    this.pending.clear();
  }

  /** Send one request frame and wait for its reply; an ERROR reply rejects with a RemoteError. */
  request(type: number, payload?: Uint8Array, expect?: number): Promise<Frame> {
    if (this.closedError) return Promise.reject(this.closedError);
    const id = this.nextId;
    this.nextId = (this.nextId + 1) >>> 0 || 1;
    return new Promise<Frame>((resolve, reject) => {
      this.pending.set(id, {
        type,
        reject,
        resolve: (f) => {
          if (f.type === MSG.ERROR) {
            const e = decodeError(f.payload);
            reject(new RemoteError(e.code, e.detail, e.message, `${messageName(type)} to ${this.address}`));
          } else if (expect !== undefined && f.type !== expect) {
            reject(new Error(`${messageName(type)} to ${this.address}: expected ${messageName(expect)}, got ${messageName(f.type)}`));
          } else resolve(f);
        },
      });
      this.socket.write(encodeFrame(type, id, payload));
    });
  }

  async info(): Promise<PolicyInfo> {
    return decodeInfo((await this.request(MSG.INFO_REQUEST, undefined, MSG.INFO)).payload);
  }

  async status(): Promise<Record<string, unknown>> {
    return JSON.parse((await this.request(MSG.STATUS_REQUEST, undefined, MSG.STATUS)).payload.toString('utf8'));
  }

  /** Actions [tiles, actDim] for observations [tiles, obsDim]. */
  async act(obs: Float32Array, tiles: number, obsDim: number): Promise<Float32Array> {
    const f = await this.request(MSG.ACT, encodeBatch(tiles, obsDim, obs), MSG.ACTIONS);
    const rows = f.payload.readUInt32LE(0);
    const width = f.payload.readUInt32LE(4);
    if (rows !== tiles || f.payload.length !== 8 + 4 * rows * width) {
      throw new Error(`ACTIONS from ${this.address}: ${rows} tiles x ${width} in ${f.payload.length} bytes does not answer ${tiles} tiles`);
    }
    const out = new Float32Array(rows * width);
    readArray(f.payload, 8, out);
    return out;
  }

  /** Write raw bytes (the fuzz test's malformed frames). */
  writeRaw(bytes: Uint8Array): void {
    this.socket.write(bytes);
  }

  close(): void {
    this.socket.end();
    this.socket.destroy();
  }
}
