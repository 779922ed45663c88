/**
 * `tilewise serve <source>`: the policy server (serve/server.ts) on 127.0.0.1 by default, until
 * the abort signal (SIGINT/SIGTERM from the command line).
 */
import type { BackendChoice } from '@tilewise/agent';
import { ConfigError } from '@tilewise/envs';
import { PolicyEvaluator } from '../export/evaluator';
import { buildExportModel } from '../export/model';
import { openExportSource } from '../export/source';
import { PolicyServer } from '../serve/server';
import { formatAddress, parseAddress, type Address } from '../wire/address';

/** Default listening address: loopback only, a port of tilewise's own choosing. */
export const DEFAULT_SERVE_ADDRESS = '127.0.0.1:5780';

export interface ServeOptions {
  readonly listen?: string;
  readonly maxTiles?: number;
  readonly maxConnections?: number;
  readonly which?: 'best' | 'latest';
  /** Network backend (default auto, as the agent config). */
  readonly backend?: BackendChoice;
  /** Called once listening, with the bound address. */
  readonly onListening?: (a: Address) => void;
  readonly log?: (line: string) => void;
  readonly signal: AbortSignal;
}

export async function serveCommand(source: string, o: ServeOptions): Promise<void> {
  let address: Address;
  try {
    address = parseAddress(o.listen ?? DEFAULT_SERVE_ADDRESS, '--listen');
  } catch (e) {
    throw new ConfigError([(e as Error).message]);
  }
  const input = openExportSource(source, o.which ?? 'best');
  const model = buildExportModel(input, `policy ${source}`);
  const evaluator = await PolicyEvaluator.create(input.snapshot, o.backend ?? 'auto');
  const server = new PolicyServer({
    policy: evaluator,
    actionBound: model.actionBound,
    metadata: JSON.stringify(model.metadata),
    maxTiles: o.maxTiles,
    maxConnections: o.maxConnections,
    log: o.log,
  });
  try {
    const bound = await server.listen(address);
    o.log?.(`serving ${source} on ${formatAddress(bound)}: ${model.obsDim} observations -> ${model.actDim} actions per tile, up to ${server.maxTiles} tiles per request (${evaluator.backendName})`);
    o.onListening?.(bound);
    if (!o.signal.aborted) await new Promise<void>((resolve) => o.signal.addEventListener('abort', () => resolve(), { once: true }));
    o.log?.(`stopping: ${server.stats.actRequests} requests, ${server.stats.tiles} tiles answered, ${server.stats.errors} malformed requests refused`);
  } finally {
    await server.close();
    evaluator.dispose();
  }
}
