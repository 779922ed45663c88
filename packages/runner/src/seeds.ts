/**
 * Seeds of evaluation episodes, derived from a base seed and a purpose ("evaluation",
 * "baseline-tuning", "validation"), so the sets for different purposes never share a stream.
 */
import { Rng } from '@tilewise/envs';

export function episodeSeeds(base: number, purpose: string, count: number): number[] {
  const rng = Rng.derive(base, purpose);
  return Array.from({ length: count }, () => rng.uint32());
}
