/**
 * Socket addresses on the command line and in configs:
 *   "5780"            TCP port on 127.0.0.1 (the default host: only this machine can connect)
 *   "HOST:PORT"       TCP, e.g. "127.0.0.1:5780", "[::1]:5780", "0.0.0.0:5780" (all interfaces: on purpose only)
 *   "unix:PATH"       a Unix domain socket, e.g. "unix:/tmp/tilewise.sock"
 */
import { existsSync, lstatSync, unlinkSync } from 'node:fs';
import { connect, type Server } from 'node:net';

export type Address = { readonly kind: 'tcp'; readonly host: string; readonly port: number } | { readonly kind: 'unix'; readonly path: string };

export const DEFAULT_HOST = '127.0.0.1';

export function parseAddress(text: string, what = 'address'): Address {
  const bad = (why: string): never => {
    throw new Error(`${what}: ${why} (got ${JSON.stringify(text)}; expected PORT, HOST:PORT or unix:PATH)`);
  };
  if (typeof text !== 'string' || text.length === 0) return bad('empty');
  if (text.startsWith('unix:')) {
    const path = text.slice(5);
    if (!path) return bad('no socket path after "unix:"');
    // Linux sun_path holds 108 bytes including the terminating zero.
    if (Buffer.byteLength(path) > 107) return bad(`the socket path is ${Buffer.byteLength(path)} bytes, longer than the 107 a Unix socket allows`);
    return { kind: 'unix', path };
  }
  let host = DEFAULT_HOST;
  let portText = text;
  const m = /^\[([^\]]+)\]:(.+)$/.exec(text) ?? /^([^:]+):([^:]+)$/.exec(text);
  if (m) {
    host = m[1]!;
    portText = m[2]!;
  } else if (text.includes(':')) return bad('an IPv6 host needs brackets, e.g. [::1]:5780');
  if (!/^\d+$/.test(portText)) return bad(`port ${JSON.stringify(portText)} is not a number`);
  const port = Number(portText);
  if (port > 65535) return bad(`port ${port} is above 65535`);
  return { kind: 'tcp', host, port };
}

export function formatAddress(a: Address): string {
  if (a.kind === 'unix') return `unix:${a.path}`;
  return a.host.includes(':') ? `[${a.host}]:${a.port}` : `${a.host}:${a.port}`;
}

/** Connection options for net.connect. */
export function connectOptions(a: Address): { path: string } | { host: string; port: number } {
  return a.kind === 'unix' ? { path: a.path } : { host: a.host, port: a.port };
}

/**
 * Listen on `a`. For a Unix socket whose file is left over from a process that is gone (nothing
 * accepts on it) the file is removed first; a socket someone still listens on is an error.
 * Returns the address actually bound (the port chosen for port 0).
 */
export async function listenOn(server: Server, a: Address): Promise<Address> {
  if (a.kind === 'unix' && existsSync(a.path)) {
    if (!lstatSync(a.path).isSocket()) throw new Error(`cannot listen on ${formatAddress(a)}: the path exists and is not a socket`);
    const alive = await new Promise<boolean>((resolve) => {
      const s = connect(a.path);
      s.once('connect', () => {
        s.destroy();
        resolve(true);
      });
      s.once('error', () => resolve(false));
    });
    if (alive) throw new Error(`cannot listen on ${formatAddress(a)}: another process is listening there`);
    unlinkSync(a.path);
  }
  await new Promise<void>((resolve, reject) => {
    const onError = (e: NodeJS.ErrnoException): void => reject(new Error(`cannot listen on ${formatAddress(a)} (${e.code ?? e.message})`));
    server.once('error', onError);
    server.listen(connectOptions(a), () => {
      server.off('error', onError);
      resolve();
    });
  });
  const bound = server.address();
  if (a.kind === 'tcp' && bound && typeof bound === 'object') return { kind: 'tcp', host: a.host, port: bound.port };
  return a;
}
