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
 * the KS env section as JSON (default: configs/ks-l22-t4.yaml's physics); --p0 fixes the
 * normalising reference (default: measured once and cached, as tilewise does).
 * A solver in C or Fortran implements the same frames; this file is the reference.
 */
import { createEnv, ksEnvKind, parseKsConfig } from '../packages/envs/src/index';
import { runSolver } from '../packages/runner/src/external/solver';
import { parseAddress } from '../packages/runner/src/wire/address';

function option(name: string): string | undefined {
  const i = process.argv.indexOf(name);
  return i > 0 ? process.argv[i + 1] : undefined;
}

const DEFAULT_KS = {
  kind: 'ks',
  length: 22,
  points: 64,
  dt: 0.05,
  tiles: 4,
  actuators: 4,
  actuatorWidth: 1,
  actionBound: 0.5,
  controlSteps: 5,
  sensorsPerTile: 8,
  haloTiles: 1,
  episodeLength: 400,
};

const address = process.argv[2];
if (!address || address.startsWith('--')) {
  process.stderr.write('usage: npx tsx examples/ks-solver.ts ADDRESS [--config JSON] [--p0 P0]\n');
  process.exit(2);
}
const config = parseKsConfig(JSON.parse(option('--config') ?? JSON.stringify(DEFAULT_KS)));
const p0Text = option('--p0');
const p0 = p0Text !== undefined ? Number(p0Text) : ksEnvKind.reference(config, {}).mean;

const steps = await runSolver((copies) => createEnv(config, { copies, reference: p0 }), parseAddress(address, 'address'), {
  name: `ks-solver pid ${process.pid}`,
  log: (l) => process.stderr.write(`${l}\n`),
});
process.stderr.write(`ks-solver: ${steps} steps answered\n`);
