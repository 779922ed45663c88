/**
 * Benchmarks of the agent's learning step and policy, one JSON object per figure per line on
 * stdout (notices go to stderr):
 *
 *  agent-update      ms per full TD3 (or DDPG) update through Agent.update(): minibatch
 *                    sampling and normalisation, target actions with clipped noise, twin
 *                    critics, critic Adam steps, the delayed actor step and Polyak averaging
 *                    (so the figure averages in half an actor step at policy delay 2).
 *                    Batch 256, obs 16, act 1, two hidden layers of `width`, widths 64 and 256.
 *  agent-act         ms per deterministic act() for 64 tiles (one batched actor pass).
 *  agent-phase       the update split by network call (forward/predict/backward/adam/polyak)
 *                    and the JavaScript around them, measured by wrapping the backend.
 *  agent-kernel      tfjs backends only: kernel time per update by kernel name, from tf.profile;
 *                    the rest of the phase time is per-operation dispatch overhead.
 *  op-overhead       tfjs only: cost of one trivial tensor operation (dispatch + allocation).
 *  matmul-transpose  tfjs only: A^T B and A B^T through matMul's transpose flags against an
 *                    explicit transpose followed by the plain product, for the update's shapes.
 *
 * Usage: npx tsx scripts/bench-agent.ts [--backend auto|tfjs-wasm|tfjs-cpu|tfjs-node]
 *        [--algo td3|ddpg] [--transpose explicit|flag|both] [--widths 64,256] [--quick]
 * `--backend` takes any name the agent config's `backend` field accepts.
 */
import { Rng } from '../packages/envs/src/random';
import { createAgent, type Agent } from '../packages/agent/src/agent';
import { BACKEND_CHOICES, type BackendChoice } from '../packages/agent/src/config';
import { createNetBackend } from '../packages/agent/src/net/select';
import type { TransposeMode } from '../packages/agent/src/net/tfjs';
import { bestTime as time, opOverheadUs, profileKernels, transposedProduct } from '../packages/agent/bench/tfjs-probes';
import type { Adam, AdamConfig, Mlp, MlpSpec, NetBackend } from '../packages/agent/src/net/types';
import { option } from './options';

const quick = process.argv.includes('--quick');
const backendChoice = option('backend', 'auto') as BackendChoice;
if (!BACKEND_CHOICES.includes(backendChoice)) throw new Error(`--backend: expected one of ${BACKEND_CHOICES.join(', ')}, got ${backendChoice}`);
const algo = option('algo', 'td3');
if (algo !== 'td3' && algo !== 'ddpg') throw new Error(`--algo: expected td3 or ddpg, got ${algo}`);
const transposeOpt = option('transpose', 'both');
const widths = option('widths', '64,256').split(',').map(Number);
const transposes: TransposeMode[] = transposeOpt === 'both' ? ['explicit', 'flag'] : [transposeOpt as TransposeMode];

const OBS = 16;
const ACT = 1;
const BATCH = 256;
const TILES = 64;

function emit(o: Record<string, unknown>): void {
  process.stdout.write(`${JSON.stringify(o)}\n`);
}
const round = (x: number, d = 3) => +x.toFixed(d);

/** A backend whose networks and optimisers add their call times to `phases`. */
function timedBackend(inner: NetBackend, phases: Map<string, number>): NetBackend {
  const add = (k: string, t0: number) => phases.set(k, (phases.get(k) ?? 0) + performance.now() - t0);
  const wrap = <A extends unknown[], R>(k: string, f: (...a: A) => R) => (...a: A): R => {
    const t0 = performance.now();
    const r = f(...a);
    add(k, t0);
    return r;
  };
  const nets = new Map<Mlp, Mlp>();
  return {
    name: inner.name,
    createMlp(spec: MlpSpec): Mlp {
      const m = inner.createMlp(spec);
      const w: Mlp = {
        spec: m.spec,
        paramCount: m.paramCount,
        forward: wrap('forward', (x: Float32Array, b: number) => m.forward(x, b)),
        predict: wrap('predict', (x: Float32Array, b: number) => m.predict(x, b)),
        backward: wrap('backward', (dy: Float32Array, g: boolean) => m.backward(dy, g)),
        getParams: () => m.getParams(),
        setParams: (p) => m.setParams(p),
        getGrads: () => m.getGrads(),
        polyakInto: wrap('polyak', (t: Mlp, tau: number) => m.polyakInto(nets.get(t)!, tau)),
        dispose: () => m.dispose(),
      };
      nets.set(w, m);
      return w;
    },
    createAdam(net: Mlp, config: AdamConfig): Adam {
      const a = inner.createAdam(nets.get(net)!, config);
      return { config: a.config, step: wrap('adam', () => a.step()), getState: () => a.getState(), setState: (s) => a.setState(s), dispose: () => a.dispose() };
    },
  };
}

async function makeAgent(width: number, backend: NetBackend): Promise<Agent> {
  const agent = await createAgent({
    obsDim: OBS,
    actDim: ACT,
    actionBound: 1,
    seed: 1,
    backend,
    config: { algo, actor: { hidden: [width, width] }, critic: { hidden: [width, width] }, batchSize: BATCH, warmup: 0, replayCapacity: 20_000 },
  });
  // Fill the replay buffer with random transitions (their values do not affect the cost).
  const rng = Rng.derive(1, 'bench-agent/data');
  const obs = new Float32Array(TILES * OBS);
  const next = new Float32Array(TILES * OBS);
  const rew = new Float32Array(TILES);
  for (let s = 0; s < 64; s++) {
    rng.fillUniform(obs, -1, 1);
    rng.fillUniform(next, -1, 1);
    rng.fillUniform(rew, -1, 0);
    agent.store(obs, agent.act(obs, TILES, true), rew, next, new Uint8Array(TILES));
  }
  return agent;
}

const log = (m: string) => process.stderr.write(`${m}\n`);
// Whether the backend "auto" (or the named one) resolves to is a tfjs engine.
const probe = await createNetBackend(backendChoice, { log });
const isTfjs = probe.name.startsWith('tfjs');

for (const transpose of isTfjs ? transposes : (['explicit'] as TransposeMode[])) {
  const backend = isTfjs ? await createNetBackend(backendChoice, { transpose }) : probe;
  const tag = { backend: backend.name, ...(isTfjs ? { transpose } : {}) };
  for (const width of widths) {
    const agent = await makeAgent(width, backend);
    // Updates come in pairs (critic-only, critic + actor) at policy delay 2: time even counts.
    const reps = quick ? (width === 64 ? 20 : 6) : width === 64 ? 100 : 30;
    const ms = time(() => agent.update(), reps, quick ? 2 : 5);
    emit({ bench: 'agent-update', algo, width, batch: BATCH, obs: OBS, act: ACT, ...tag, ms_per_update: round(ms) });
    const probe = new Float32Array(TILES * OBS).fill(0.1);
    emit({ bench: 'agent-act', tiles: TILES, width, obs: OBS, act: ACT, ...tag, ms_per_call: round(time(() => agent.act(probe, TILES, false), quick ? 50 : 300, quick ? 2 : 5), 4) });
    agent.dispose();
    if (transpose !== transposes[0] && isTfjs) continue; // breakdowns once per backend

    // Phase split over a wrapped backend.
    const phases = new Map<string, number>();
    const timed = await makeAgent(width, timedBackend(backend, phases));
    for (let i = 0; i < 10; i++) timed.update();
    phases.clear();
    const n = quick ? 10 : 40;
    const t0 = performance.now();
    for (let i = 0; i < n; i++) timed.update();
    const total = (performance.now() - t0) / n;
    let inNets = 0;
    for (const [phase, t] of phases) {
      inNets += t / n;
      emit({ bench: 'agent-phase', algo, width, batch: BATCH, ...tag, phase, ms_per_update: round(t / n) });
    }
    emit({ bench: 'agent-phase', algo, width, batch: BATCH, ...tag, phase: 'javascript (sampling, normalising, targets, losses)', ms_per_update: round(total - inNets) });

    if (isTfjs) {
      const byKernel = await profileKernels(() => {
        for (let i = 0; i < 10; i++) timed.update();
      });
      let kernelMs = 0;
      let calls = 0;
      for (const [name, e] of [...byKernel].sort((a, b) => b[1].ms - a[1].ms)) {
        if (name.endsWith('__op')) continue; // op-level entries wrap the kernel entries
        kernelMs += e.ms / 10;
        calls += e.calls / 10;
        emit({ bench: 'agent-kernel', algo, width, batch: BATCH, ...tag, kernel: name, calls_per_update: e.calls / 10, ms_per_update: round(e.ms / 10) });
      }
      emit({ bench: 'agent-kernel', algo, width, batch: BATCH, ...tag, kernel: 'all kernels', calls_per_update: calls, ms_per_update: round(kernelMs) });
    }
    timed.dispose();
  }

  if (isTfjs && transpose === transposes[0]) {
    emit({ bench: 'op-overhead', ...tag, op: 'add of two scalars', us_per_op: round(opOverheadUs(), 2) });
    // Transposed products of the update's shapes: matMul flags against transpose-then-multiply.
    const cases: Array<[string, 'AtB' | 'ABt', number]> = [
      ['A^T B (dW = x^T dZ)', 'AtB', 64],
      ['A^T B (dW = x^T dZ)', 'AtB', 256],
      ['A B^T (dx = dZ W^T)', 'ABt', 64],
      ['A B^T (dx = dZ W^T)', 'ABt', 256],
    ];
    for (const [op, kind, width] of cases) {
      const r = transposedProduct(kind, BATCH, width, width, quick ? 5 : 20);
      emit({ bench: 'matmul-transpose', ...tag, op, rows: BATCH, width, flag_us: round(r.flag, 1), explicit_us: round(r.explicit, 1), speedup: round(r.flag / r.explicit, 1) });
    }
  }
}
