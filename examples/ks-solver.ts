/**
 * The Kuramoto-Sivashinsky surrogate as an external solver: a separate process that connects to
 * a tilewise run (env kind "external") and acts as its environment over the wire protocol
 * (docs/wire-protocol.md). It shows the solver side of the environment link, and the tests use
 * it to check that training against a solver gives exactly the transitions of the same
 * surrogate run in-process.
 *
 *   npx tsx examples/ks-solver.ts ADDRESS [--config '{"kind":"ks",...}'] [--p0 P0]
 *
 * ADDRESS is where the run listens (its env.listen: PORT, HOST:PORT or unix:PATH). --config is
 * the KS env section as JSON (default: the env section of configs/ks-l22-t4.yaml); --p0 fixes the
 * normalising reference (default: measured once and cached, as tilewise does).
 * A solver in C or Fortran implements the same frames; this file is the reference.
 */
import { join } from 'node:path';
import { createEnv, ksEnvKind, parseKsConfig } from '../packages/envs/src/index';
import { loadRunConfig } from '../packages/runner/src/config';
import { runSolver } from '../packages/runner/src/external/solver';
import { parseAddress } from '../packages/runner/src/wire/address';

function option(name: string): string | undefined {
  const i = process.argv.indexOf(name);
  return i > 0 ? process.argv[i + 1] : undefined;
}

/** The default physics: the env section of configs/ks-l22-t4.yaml. */
const DEFAULT_CONFIG = join(import.meta.dirname, '..', 'configs', 'ks-l22-t4.yaml');

const address = process.argv[2];
if (!address || address.startsWith('--')) {
  process.stderr.write('usage: npx tsx examples/ks-solver.ts ADDRESS [--config JSON] [--p0 P0]\n');
  process.exit(2);
}
const configText = option('--config');
const config = parseKsConfig(configText ? JSON.parse(configText) : loadRunConfig(DEFAULT_CONFIG).env.config);
const p0Text = option('--p0');
const p0 = p0Text !== undefined ? Number(p0Text) : ksEnvKind.reference(config, {}).mean;

const steps = await runSolver((copies) => createEnv(config, { copies, reference: p0 }), parseAddress(address, 'address'), {
  name: `ks-solver pid ${process.pid}`,
  log: (l) => process.stderr.write(`${l}\n`),
});
process.stderr.write(`ks-solver: ${steps} steps answered\n`);
