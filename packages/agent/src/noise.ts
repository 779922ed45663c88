/**
 * Exploration noise added to the policy's actions (in units of the action bound).
 *
 * Gaussian: independent N(0, std^2) per action component and step (Fujimoto et al. 2018).
 *
 * Ornstein-Uhlenbeck (Uhlenbeck & Ornstein 1930, "On the theory of the Brownian motion",
 * Phys. Rev. 36, 823), dx = theta (mu - x) dt + sigma dW with mu = 0, as used for
 * exploration by Lillicrap et al. 2016. Discretised EXACTLY over one decision interval dt
 * (Gillespie 1996, "Exact numerical simulation of the Ornstein-Uhlenbeck process and its
 * integral", Phys. Rev. E 54, 2084):
 *   x_{k+1} = x_k e^{-theta dt} + sigma sqrt((1 - e^{-2 theta dt}) / (2 theta)) n_k,  n_k ~ N(0, 1)
 * so the stationary law is N(0, sigma^2 / (2 theta)) and the lag-one autocorrelation is
 * e^{-theta dt} for any dt (an Euler step x += -theta x dt + sigma sqrt(dt) n would instead
 * have variance sigma^2 / (theta (2 - theta dt))).
 *
 * One process per action component of each tile: state [count, actDim], tile-major, where
 * `count` is the number of tiles the agent acts for. Draws are made in index order from the
 * caller's `Rng`, so noise is tied to the global tile index.
 */
import type { Rng } from '@tilewise/envs';
import type { ExplorationConfig } from './config';

export interface NoiseState {
  readonly kind: 'gaussian' | 'ou';
  /** OU state [count * actDim] (empty for Gaussian noise). */
  readonly x: Float64Array;
}

export class ExplorationNoise {
  /** OU state; grows (zero-filled) to the number of components asked for. */
  private x = new Float64Array(0);
  private readonly decay: number;
  private readonly scale: number;

  constructor(readonly config: ExplorationConfig) {
    if (config.kind === 'ou') {
      this.decay = Math.exp(-config.theta * config.dt);
      this.scale = config.sigma * Math.sqrt((1 - Math.exp(-2 * config.theta * config.dt)) / (2 * config.theta));
    } else {
      this.decay = 0;
      this.scale = config.std;
    }
  }

  /** Write the next noise sample of `n` components (tile-major) into out[0..n). */
  sample(rng: Rng, out: Float32Array, n: number): void {
    if (this.config.kind === 'gaussian') {
      for (let i = 0; i < n; i++) out[i] = this.scale * rng.normal();
      return;
    }
    if (this.x.length < n) {
      const grown = new Float64Array(n);
      grown.set(this.x);
      this.x = grown;
    }
    const x = this.x;
    for (let i = 0; i < n; i++) {
      x[i] = x[i]! * this.decay + this.scale * rng.normal();
      out[i] = x[i]!;
    }
  }

  /** Reset the OU state of components [start, start + n) to 0 (start of an episode). */
  reset(start = 0, n = Infinity): void {
    const end = Math.min(this.x.length, start + n);
    for (let i = Math.max(0, start); i < end; i++) this.x[i] = 0;
  }

  getState(): NoiseState {
    return { kind: this.config.kind, x: this.x.slice() };
  }

  setState(s: NoiseState): void {
    if (s.kind !== this.config.kind) throw new Error(`ExplorationNoise.setState: saved kind ${s.kind} differs from configured ${this.config.kind}`);
    this.x = Float64Array.from(s.x);
  }
}
