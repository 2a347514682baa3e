/*
 * Estimators and their intervals (see estimate.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/estimate.h"

#include <math.h>

#include "numerics/special.h"

double bk_beta_from_pf(double pf) {
  if (pf <= 0)
    return INFINITY;
  if (pf >= 1)
    return -INFINITY;
  return -bk_norm_icdf(pf);
}

double bk_pf_from_beta(double beta) {
  return bk_norm_cdf(-beta);
}

/* Wilson (1927), JASA 22:209-212: the score interval
 * (p + z^2/2n +- z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n). */
void bk_wilson(uint64_t n, uint64_t k, double level, double ci[2]) {
  if (n == 0) {
    ci[0] = 0;
    ci[1] = 1;
    return;
  }
  double z = bk_norm_icdf(0.5 + level / 2);
  double nn = (double)n, p = (double)k / nn, z2 = z * z;
  double centre = (p + z2 / (2 * nn)) / (1 + z2 / nn);
  double half = z * sqrt(p * (1 - p) / nn + z2 / (4 * nn * nn)) / (1 + z2 / nn);
  ci[0] = k == 0 ? 0 : fmax(0, centre - half);
  ci[1] = k == n ? 1 : fmin(1, centre + half);
}

/* Clopper & Pearson (1934), Biometrika 26:404-413: the bounds are beta
 * quantiles, lower = B^-1(a/2; k, n-k+1), upper = B^-1(1-a/2; k+1, n-k). */
void bk_clopper_pearson(uint64_t n, uint64_t k, double level, double ci[2]) {
  double a = 1 - level;
  double kk = (double)k, nn = (double)n;
  ci[0] = k == 0 ? 0 : bk_beta_inc_inv(kk, nn - kk + 1, a / 2);
  ci[1] = k == n ? 1 : bk_beta_inc_inv(kk + 1, nn - kk, 1 - a / 2);
}

static void fill_beta(bk_estimate_t *e) {
  e->beta = bk_beta_from_pf(e->pf);
  e->beta_ci[0] = bk_beta_from_pf(e->ci[1]);
  e->beta_ci[1] = bk_beta_from_pf(e->ci[0]);
}

void bk_estimate_binomial(uint64_t n, uint64_t k, double level,
                          bk_estimate_t *e) {
  e->n = n;
  e->failures = k;
  e->ci_level = level;
  e->pf = n ? (double)k / (double)n : NAN;
  e->cov = k ? sqrt((1 - e->pf) / ((double)n * e->pf)) : INFINITY;
  bk_wilson(n, k, level, e->ci);
  bk_clopper_pearson(n, k, level, e->ci_exact);
  e->ci_method = "wilson";
  fill_beta(e);
}

void bk_estimate_replicates(const double *pf, size_t r, uint64_t per,
                            uint64_t failures, double level,
                            bk_estimate_t *e) {
  e->n = (uint64_t)r * per;
  e->failures = failures;
  e->ci_level = level;
  double mean = 0;
  for (size_t i = 0; i < r; i++)
    mean += pf[i];
  mean = r ? mean / (double)r : NAN;
  e->pf = mean;
  bk_clopper_pearson(e->n, failures, level, e->ci_exact);
  if (r < 2 || failures == 0) {
    e->cov = failures ? NAN : INFINITY;
    e->ci[0] = e->ci_exact[0];
    e->ci[1] = e->ci_exact[1];
    e->ci_method = "clopper-pearson";
    fill_beta(e);
    return;
  }
  /* Sample variance by the two-pass formula. */
  double ss = 0;
  for (size_t i = 0; i < r; i++)
    ss += (pf[i] - mean) * (pf[i] - mean);
  double sd = sqrt(ss / (double)(r - 1));
  double se = sd / sqrt((double)r);
  e->cov = mean > 0 ? se / mean : INFINITY;
  double t = bk_student_icdf(0.5 + level / 2, (double)(r - 1));
  e->ci[0] = fmax(0, mean - t * se);
  e->ci[1] = fmin(1, mean + t * se);
  e->ci_method = "student-t";
  fill_beta(e);
}
