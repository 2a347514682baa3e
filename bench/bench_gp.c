/*
 * Benchmark: Gaussian-process fits (maximum likelihood of the lengths),
 * prediction and leave-one-out at the sizes the surrogate method meets, up
 * to 500 points in 20 dimensions. Training points are standard normal
 * (the project's counter-based stream), values a smooth limit state
 * g(u) = 3 - sum(u)/sqrt(d) + 0.3 sum(sin(u_j)) / sqrt(d) + 0.1 u_1^2.
 * Prints wall and CPU time of each step: CPU close to wall time shows that
 * BLAS ran on one thread, as does the thread count BLAS reports.
 * Usage: bench_gp [N D [TREND [NUGGET]]] for one size (TREND 0 constant,
 * 1 linear, 2 zero; NUGGET 1 to estimate it), else a fixed list.
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "numerics/gp.h"
#include "numerics/rng.h"
#include "numerics/special.h"

static double now(clockid_t clk) {
  struct timespec ts;
  clock_gettime(clk, &ts);
  return ts.tv_sec + 1e-9 * ts.tv_nsec;
}

static void data(size_t n, size_t d, uint64_t stream, double *u, double *y) {
  for (size_t i = 0; i < n; i++) {
    double s = 0, w = 0;
    for (size_t j = 0; j < d; j++) {
      double x = bk_norm_icdf(bk_rng_u01(1, stream, i, (uint32_t)j));
      u[i * d + j] = x;
      s += x;
      w += sin(x);
    }
    if (y)
      y[i] = 3 - s / sqrt((double)d) + 0.3 * w / sqrt((double)d) +
             0.1 * u[i * d] * u[i * d];
  }
}

static int run(size_t n, size_t d, int trend, int nugget) {
  double *u = malloc(n * d * sizeof(double)), *y = malloc(n * sizeof(double));
  const size_t m = 100000;
  double *t = malloc(m * d * sizeof(double));
  double *mean = malloc(m * sizeof(double)), *var = malloc(m * sizeof(double));
  double *r = malloc(n * sizeof(double)), *rv = malloc(n * sizeof(double));
  if (!u || !y || !t || !mean || !var || !r || !rv)
    return 1;
  data(n, d, 1, u, y);
  data(m, d, 2, t, NULL);
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.trend = (bk_gp_trend_t)trend;
  o.estimate_nugget = nugget;
  double w0 = now(CLOCK_MONOTONIC), c0 = now(CLOCK_PROCESS_CPUTIME_ID);
  bk_gp_t *gp;
  int rc = bk_gp_new(&gp, u, y, n, d, &o);
  double w1 = now(CLOCK_MONOTONIC), c1 = now(CLOCK_PROCESS_CPUTIME_ID);
  if (rc != 0) {
    fprintf(stderr, "fit failed: %d\n", rc);
    return 1;
  }
  rc = bk_gp_predict(gp, t, m, mean, var);
  double w2 = now(CLOCK_MONOTONIC), c2 = now(CLOCK_PROCESS_CPUTIME_ID);
  rc |= bk_gp_predict(gp, t, m, mean, NULL);
  double w3 = now(CLOCK_MONOTONIC);
  rc |= bk_gp_loo(gp, r, rv);
  double w4 = now(CLOCK_MONOTONIC);
  if (rc != 0) {
    fprintf(stderr, "predict/loo failed: %d\n", rc);
    return 1;
  }
  double z2 = 0;
  for (size_t i = 0; i < n; i++)
    z2 += r[i] * r[i] / rv[i];
  printf("%5zu %3zu %6s %d | fit %7.3f s (cpu %7.3f) %4zu evals %6.2f ms/eval"
         " | predict 1e5 %6.3f s (cpu %6.3f), mean only %6.3f s"
         " | loo %6.3f s | mean z^2 %.2f | blas threads %d\n",
         n, d,
         trend == 0   ? "const"
         : trend == 1 ? "linear"
                      : "zero",
         nugget, w1 - w0, c1 - c0, gp->nevals,
         1e3 * (w1 - w0) / (double)gp->nevals, w2 - w1, c2 - c1, w3 - w2,
         w4 - w3, z2 / n, bk_gp_blas_threads());
  bk_gp_free(gp);
  free(u);
  free(y);
  free(t);
  free(mean);
  free(var);
  free(r);
  free(rv);
  return 0;
}

int main(int argc, char **argv) {
  if (argc >= 3)
    return run(strtoul(argv[1], NULL, 10), strtoul(argv[2], NULL, 10),
               argc > 3 ? atoi(argv[3]) : 0, argc > 4 ? atoi(argv[4]) : 0);
  static const size_t sizes[][2] = {{50, 2},  {100, 5},  {200, 10},
                                    {500, 2}, {500, 10}, {500, 20}};
  for (size_t k = 0; k < sizeof sizes / sizeof sizes[0]; k++)
    if (run(sizes[k][0], sizes[k][1], 0, 0))
      return 1;
  run(500, 20, 1, 0);
  run(500, 20, 0, 1);
  return 0;
}
