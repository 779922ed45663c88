/**
 * tilewise's own in-process policy: a PolicySnapshot run on the agent's network backend (the
 * same `Mlp.predict` that `Agent.act(obs, count, false)` calls) after the same normalisation
 * arithmetic as `RunningNormalizer.normalize`. With the backend the agent trained on, its actions
 * equal the agent's bit for bit (tested); the policy server and `tilewise act` use it.
 */
import { createNetBackend, mlpParamCount, type BackendChoice, type Mlp, type NetBackend, type PolicySnapshot } from '@tilewise/agent';

export class PolicyEvaluator {
  readonly obsDim: number;
  readonly actDim: number;
  readonly backendName: string;
  private readonly net: Mlp;
  private readonly snapshot: PolicySnapshot;
  private z = new Float32Array(0);
  private out = new Float32Array(0);

  private constructor(snapshot: PolicySnapshot, backend: NetBackend) {
    if (snapshot.params.length !== mlpParamCount(snapshot.spec)) {
      throw new Error(`PolicyEvaluator: ${snapshot.params.length} parameters, the sizes ${JSON.stringify(snapshot.spec.sizes)} need ${mlpParamCount(snapshot.spec)}`);
    }
    this.snapshot = snapshot;
    this.obsDim = snapshot.spec.sizes[0]!;
    this.actDim = snapshot.spec.sizes[snapshot.spec.sizes.length - 1]!;
    this.backendName = backend.name;
    this.net = backend.createMlp(snapshot.spec);
    this.net.setParams(snapshot.params);
  }

  /** Start the backend (`auto` as the agent config does, a named one, or one already running). */
  static async create(snapshot: PolicySnapshot, backend: BackendChoice | NetBackend = 'auto'): Promise<PolicyEvaluator> {
    const be = typeof backend === 'string' ? await createNetBackend(backend) : backend;
    return new PolicyEvaluator(snapshot, be);
  }

  /**
   * Actions [count, actDim] for raw observations obs [count, obsDim]; the returned array is owned
   * by the evaluator and overwritten by the next call.
   */
  act(obs: Float32Array, count: number): Float32Array {
    const d = this.obsDim;
    if (!Number.isInteger(count) || count < 1) throw new Error(`PolicyEvaluator.act: count must be a positive integer, got ${count}`);
    if (obs.length < count * d) throw new Error(`PolicyEvaluator.act: obs holds ${obs.length} values, ${count} x ${d} needed`);
    if (this.z.length < count * d) this.z = new Float32Array(count * d);
    const z = this.z;
    const nz = this.snapshot.normalizer;
    if (nz) {
      const c = nz.clip;
      for (let r = 0; r < count; r++) {
        for (let j = 0; j < d; j++) {
          const v = (obs[r * d + j]! - nz.mean[j]!) * nz.invStd[j]!;
          z[r * d + j] = v > c ? c : v < -c ? -c : v;
        }
      }
    } else z.set(obs.subarray(0, count * d));
    const a = this.net.predict(z, count);
    const n = count * this.actDim;
    if (this.out.length !== n) this.out = new Float32Array(n);
    const bound = this.snapshot.actionBound;
    for (let i = 0; i < n; i++) this.out[i] = bound * a[i]!;
    return this.out;
  }

  dispose(): void {
    this.net.dispose();
  }
}
