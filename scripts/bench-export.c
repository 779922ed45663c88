/* Timing harness of the C export for scripts/bench-export.ts: calls tilewise_policy_act on a
 * batch of `tiles` observations (read from argv[1], float64 [tiles][OBS_DIM]) repeatedly for
 * about argv[2] seconds, in rounds, and prints "tiles calls seconds" of the fastest round. */
#define _POSIX_C_SOURCE 200112L
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "tilewise_policy.h"

static double now(void) {
  struct timespec t;
  clock_gettime(CLOCK_MONOTONIC, &t);
  return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

int main(int argc, char **argv) {
  FILE *in;
  long bytes;
  size_t tiles, r;
  double *obs, *act, seconds, best = 1e30, sink = 0;
  long calls = 1, k;
  int round;
  if (argc != 3) return 2;
  in = fopen(argv[1], "rb");
  if (!in || fseek(in, 0, SEEK_END) != 0 || (bytes = ftell(in)) <= 0 || fseek(in, 0, SEEK_SET) != 0) return 1;
  tiles = (size_t)bytes / (sizeof(double) * TILEWISE_POLICY_OBS_DIM);
  obs = malloc((size_t)bytes);
  act = malloc(tiles * TILEWISE_POLICY_ACT_DIM * sizeof(double));
  if (!obs || !act || fread(obs, (size_t)bytes, 1, in) != 1) return 1;
  fclose(in);
  seconds = atof(argv[2]);
  /* calibrate: calls per round of about seconds / 5 */
  for (;;) {
    double t0 = now();
    for (k = 0; k < calls; k++) tilewise_policy_act(tiles, obs, act);
    if (now() - t0 > seconds / 5 || calls > (1L << 30)) break;
    calls *= 2;
  }
  for (round = 0; round < 5; round++) {
    double t0 = now(), t;
    for (k = 0; k < calls; k++) {
      tilewise_policy_act(tiles, obs, act);
      sink += act[k % (long)tiles];
    }
    t = now() - t0;
    if (t < best) best = t;
  }
  for (r = 0; r < tiles; r++) sink += act[r];
  printf("%lu %ld %.9f %g\n", (unsigned long)tiles, calls, best, sink);
  free(obs);
  free(act);
  return 0;
}
