/**
 * The contract every tiled surrogate implements, and that the agent, trainer,
 * baselines, evaluation and export rely on.
 *
 * A surrogate steps B independent copies of a periodic PDE together. Each copy's
 * domain is cut into T equal tiles (a Tx x Ty grid; 1-D surrogates use Ty = 1).
 * Every tile senses, acts and is rewarded locally, in its own frame, so one shared
 * policy serves every tile of every copy.
 *
 * Array layout (all row-major, "tile-major"):
 *   obs      Float32Array [B, T, obsDim]   tile t of copy b starts at (b*T + t)*obsDim
 *   actions  Float32Array [B, T, actDim]
 *   reward   Float32Array [B, T]
 *   per-copy flags Uint8Array [B]
 * Tiles are numbered x-fastest: t = ty*Tx + tx.
 *
 * Buffers returned by an environment are owned by it and overwritten by the next
 * call that returns the same kind of buffer; copy what you keep. Environments never
 * keep a reference to a caller's array.
 */

/** One contiguous group of observation components, for export metadata and reports. */
export interface ObsLayoutEntry {
  /** What is sensed, e.g. "u", "u_x", "v". */
  readonly quantity: string;
  /** Number of components in this group. */
  readonly count: number;
  /** Sensor positions relative to the tile's own origin, in units of the tile length (x, and y for 2-D). */
  readonly positions: ReadonlyArray<readonly number[]>;
}

export interface EnvSpec {
  /** Registered surrogate name, e.g. "ks" or "kolmogorov". */
  readonly kind: string;
  /** Number of independent copies stepped together (B). */
  readonly copies: number;
  /** Tile grid (Tx, Ty); 1-D surrogates use (T, 1). */
  readonly tileGrid: readonly [number, number];
  /** Tiles per copy, T = Tx * Ty. */
  readonly tiles: number;
  /** Observation components per tile. */
  readonly obsDim: number;
  /** Action components per tile (actuators owned by the tile). */
  readonly actDim: number;
  /** Every action component lies in [-actionBound, +actionBound]. */
  readonly actionBound: number;
  /** Time units between two decisions (the actuation is held over this interval). */
  readonly controlInterval: number;
  /** Decisions per episode (time limit). */
  readonly episodeLength: number;
  /** What each observation component is. Sum of counts equals obsDim. */
  readonly obsLayout: readonly ObsLayoutEntry[];
  /** Name of the drag analogue, e.g. "P/P0" or "Cf/Cf0", for tables and reports. */
  readonly dragName: string;
}

/** What one decision step returns. All buffers are owned by the environment. */
export interface StepOut {
  /** Observation after the step, [B, T, obsDim]. For a copy that just ended, the final observation. */
  readonly obs: Float32Array;
  /** Reward of each tile over the control interval, [B, T]. */
  readonly reward: Float32Array;
  /** Normalised drag analogue of each tile averaged over the interval (1 = uncontrolled mean), [B, T]. */
  readonly drag: Float64Array;
  /** Actuation power of each tile over the interval, same normalisation as `drag`, [B, T]. */
  readonly actuationPower: Float64Array;
  /** 1 where the copy's episode ended this step (time limit or blow-up), [B]. */
  readonly done: Uint8Array;
  /** 1 where the episode ended only by the time limit (bootstrap through it), [B]. */
  readonly truncated: Uint8Array;
  /** 1 where the copy produced NaN/Inf or blew up; its state is no longer meaningful, [B]. */
  readonly diverged: Uint8Array;
}

export interface TiledEnv {
  readonly spec: EnvSpec;
  /** Reset every copy: copy b starts from the seeded attractor state for `seeds[b]`. Returns obs. */
  reset(seeds: ArrayLike<number>): Float32Array;
  /** Reset one copy from a seeded attractor state (after a divergence or episode end). */
  resetCopy(copy: number, seed: number): void;
  /** Current observation of every tile, [B, T, obsDim]. */
  observe(): Float32Array;
  /** Apply actions [B, T, actDim] (clipped to the bound) for one control interval. */
  step(actions: Float32Array): StepOut;
  /**
   * The signal opposition-type feedback opposes, [B, T, actDim]: for each actuator, the
   * sensed quantity at the configured offset from it. Opposition control is
   * a = clip(-alpha * s).
   */
  oppositionSignal(): Float64Array;
  /** The physical field of one copy, for plots (layout documented by each surrogate). */
  snapshot(copy: number): Float64Array;
  /**
   * Optional: the full dynamic state of every copy at a decision boundary (solver fields,
   * decision counters, pending flags), as copies. With `setState` on an environment built
   * from the same config and copy count, the two continue bit for bit alike. Training
   * checkpoints need it; an environment without it cannot be checkpointed.
   */
  getState?(): EnvState;
  /** Optional: restore a state from `getState` (same config and copies, else it throws naming the mismatch). */
  setState?(state: EnvState): void;
}

/** An environment's saved state: JSON-serialisable metadata and named arrays (copies). */
export interface EnvState {
  /** Format tag, kind and the shape facts `setState` checks, e.g. { kind, copies, points }. */
  readonly meta: { readonly [key: string]: string | number | boolean | null };
  /** Named state arrays (the env's layouts, documented by each surrogate). */
  readonly arrays: { readonly [name: string]: Float64Array | Int32Array | Uint8Array };
}

/**
 * Something an environment reports for the run log, e.g. a copy that diverged. Passed to
 * the `onEvent` callback given when the environment is created; never thrown.
 */
export interface EnvEvent {
  /** Short machine-readable kind, e.g. "diverged". */
  readonly kind: string;
  /** The copy concerned, if any. */
  readonly copy?: number;
  /** One human-readable line. */
  readonly message: string;
}
