/**
 * A Redis server owned by a test: Debian's redis-server on a free port, bound to 127.0.0.1 only,
 * with persistence off, stopped afterwards. CI (CI=true) and root machines must have it
 * (scripts/test-all.sh installs it): there a missing server fails the tests. Only on a developer
 * machine without root are they skipped, with a loud message.
 */
import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { createServer } from 'node:net';
import { parseRedisUrl, probeRedis } from '../../src/sweep/queue';

export function hasRedisServer(): boolean {
  return spawnSync('redis-server', ['--version'], { stdio: 'ignore' }).status === 0;
}

/** True when the Redis tests should be skipped (prints why); never in CI or as root. */
export function skipWithoutRedis(): boolean {
  if (hasRedisServer()) return false;
  if (process.env.CI === 'true' || process.getuid?.() === 0) return false; // the tests run and fail, naming the missing server
  const bar = '!'.repeat(78);
  console.warn(
    `\n${bar}\n!! redis-server is missing: the distributed sweep tests (BullMQ on Redis) are SKIPPED.\n` +
      `!! Install it (Debian: apt-get install redis-server) or run scripts/test-all.sh as root.\n${bar}\n`,
  );
  return true;
}

/** A TCP port nobody listens on at this moment. */
export function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const s = createServer();
    s.on('error', reject);
    s.listen(0, '127.0.0.1', () => {
      const port = (s.address() as { port: number }).port;
      s.close(() => resolve(port));
    });
  });
}

export interface TestRedis {
  readonly url: string;
  readonly process: ChildProcess;
  stop(): Promise<void>;
}

export async function startRedis(): Promise<TestRedis> {
  if (!hasRedisServer()) throw new Error('redis-server is not installed (Debian: apt-get install redis-server); scripts/test-all.sh installs it when run as root');
  const port = await freePort();
  const child = spawn('redis-server', ['--port', String(port), '--bind', '127.0.0.1', '--save', '', '--appendonly', 'no'], { stdio: ['ignore', 'pipe', 'pipe'] });
  let output = '';
  child.stdout!.on('data', (b: Buffer) => (output += b.toString()));
  child.stderr!.on('data', (b: Buffer) => (output += b.toString()));
  const url = `redis://127.0.0.1:${port}`;
  const exited = new Promise<void>((resolve) => child.on('exit', () => resolve()));
  const end = Date.now() + 15_000;
  for (;;) {
    try {
      await probeRedis(parseRedisUrl(url), 1);
      break;
    } catch (e) {
      if (child.exitCode !== null || Date.now() > end) {
        child.kill('SIGKILL');
        throw new Error(`redis-server did not start on port ${port}: ${(e as Error).message}\n${output}`);
      }
      await new Promise((r) => setTimeout(r, 100));
    }
  }
  return {
    url,
    process: child,
    async stop() {
      if (child.exitCode === null) child.kill('SIGTERM');
      await exited;
    },
  };
}
