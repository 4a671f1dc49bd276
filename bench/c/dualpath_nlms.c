/*
 * The C reference for tapwarden's bench: the same dual-path NLMS step as the engine's float64
 * path, written as plainly as an engineer would write it in C, for the compiler to optimize.
 * Per sample: push x into a doubled delay line; adaptive path y = w.x, e = d - y,
 * mu_n = mu / (delta + ||x||^2), w += mu_n e x; clean path yc = wc.x (fixed weights).
 *
 *   cc -O3 -march=native -ffast-math -o dualpath_nlms dualpath_nlms.c
 *   ./dualpath_nlms TAPS SECONDS RATE     -> prints one JSON line
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static uint64_t state = 0x9e3779b97f4a7c15ull;
static double uniform(void) { /* xorshift64*: a uniform in [-0.5, 0.5) */
  state ^= state >> 12; state ^= state << 25; state ^= state >> 27;
  return (double)((state * 0x2545F4914F6CDD1Dull) >> 11) / 9007199254740992.0 - 0.5;
}

int main(int argc, char **argv) {
  int L = argc > 1 ? atoi(argv[1]) : 256;
  double seconds = argc > 2 ? atof(argv[2]) : 10;
  int rate = argc > 3 ? atoi(argv[3]) : 48000;
  long n = (long)(seconds * rate);
  const int block = 4096;
  double *x = malloc(sizeof(double) * block), *d = malloc(sizeof(double) * block);
  double *line = calloc(2 * (size_t)L, sizeof(double));
  double *w = calloc(L, sizeof(double)), *wc = calloc(L, sizeof(double));
  double *out = malloc(sizeof(double) * block), *outc = malloc(sizeof(double) * block);
  const double mu = 0.5, delta = 1e-6;
  for (int k = 0; k < L; k++) wc[k] = uniform() * 0.01;
  int pos = 0;
  double checksum = 0, elapsed = 0;
  for (long done = 0; done < n; done += block) {
    int m = n - done < block ? (int)(n - done) : block;
    for (int i = 0; i < m; i++) { x[i] = uniform(); d[i] = 0.3 * x[i] + 0.001 * uniform(); }
    struct timespec t0, t1;
    clock_gettime(CLOCK_MONOTONIC, &t0);
    for (int i = 0; i < m; i++) {
      pos = pos == 0 ? L - 1 : pos - 1;
      line[pos] = line[pos + L] = x[i];
      const double *xv = line + pos;
      double y = 0, energy = 0, yc = 0;
      for (int k = 0; k < L; k++) { y += w[k] * xv[k]; energy += xv[k] * xv[k]; }
      double e = d[i] - y;
      double g = mu * e / (delta + energy);
      for (int k = 0; k < L; k++) w[k] += g * xv[k];
      for (int k = 0; k < L; k++) yc += wc[k] * xv[k];
      out[i] = e;
      outc[i] = d[i] - yc;
    }
    clock_gettime(CLOCK_MONOTONIC, &t1);
    elapsed += (t1.tv_sec - t0.tv_sec) + (t1.tv_nsec - t0.tv_nsec) * 1e-9;
    for (int i = 0; i < m; i++) checksum += out[i] * out[i] + outc[i] * outc[i];
  }
  printf("{\"taps\":%d,\"samples\":%ld,\"seconds\":%.6f,\"samplesPerSecond\":%.0f,\"realtimeFactor\":%.2f,\"checksum\":%.6g}\n",
         L, n, elapsed, n / elapsed, n / elapsed / rate, checksum);
  return 0;
}
