/** Timing helper shared by the benchmark scripts (no dependencies). */

/** Best of `rounds` timings of `reps` calls, ms per call (after max(2, reps / 4) warm-up calls). */
export function bestTime(fn: () => void, reps: number, rounds: number): number {
  for (let i = 0; i < Math.max(2, reps / 4); i++) fn();
  let best = Infinity;
  for (let r = 0; r < rounds; r++) {
    const t0 = performance.now();
    for (let i = 0; i < reps; i++) fn();
    best = Math.min(best, (performance.now() - t0) / reps);
  }
  return best;
}
