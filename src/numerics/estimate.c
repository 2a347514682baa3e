/*
 * Estimators and their intervals (see estimate.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/estimate.h"

#include <assert.h>
#include <math.h>
#include <string.h>

#include "numerics/special.h"

double bk_estimate_beta_from_pf(double pf) {
  if (pf <= 0)
    return INFINITY;
  if (pf >= 1)
    return -INFINITY;
  return -bk_norm_icdf(pf);
}

double bk_estimate_pf_from_beta(double beta) {
  return bk_norm_cdf(-beta);
}

/* Wilson (1927), JASA 22:209-212: the score interval
 * (p + z^2/2n +- z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n). */
void bk_estimate_wilson(uint64_t n, uint64_t k, double level, double ci[2]) {
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
void bk_estimate_clopper_pearson(uint64_t n, uint64_t k, double level, double ci[2]) {
  double a = 1 - level;
  double kk = (double)k, nn = (double)n;
  ci[0] = k == 0 ? 0 : bk_beta_inc_inv(kk, nn - kk + 1, a / 2);
  ci[1] = k == n ? 1 : bk_beta_inc_inv(kk + 1, nn - kk, 1 - a / 2);
}

void bk_estimate_set_beta(bk_estimate_t *e) {
  e->beta = bk_estimate_beta_from_pf(e->pf);
  e->beta_ci[0] = bk_estimate_beta_from_pf(e->ci[1]);
  e->beta_ci[1] = bk_estimate_beta_from_pf(e->ci[0]);
}

void bk_estimate_binomial(uint64_t n, uint64_t k, double level,
                          bk_estimate_t *e) {
  e->n = n;
  e->failures = k;
  e->ci_level = level;
  e->pf = n ? (double)k / (double)n : NAN;
  e->cov = k ? sqrt((1 - e->pf) / ((double)n * e->pf)) : INFINITY;
  bk_estimate_wilson(n, k, level, e->ci);
  bk_estimate_clopper_pearson(n, k, level, e->ci_exact);
  e->ci_method = "wilson";
  bk_estimate_set_beta(e);
}

void bk_estimate_replicates(const double *pf, size_t r, uint64_t per,
                            uint64_t failures, double level, bk_estimate_t *e) {
  e->n = (uint64_t)r * per;
  e->failures = failures;
  e->ci_level = level;
  double mean = 0;
  for (size_t i = 0; i < r; i++)
    mean += pf[i];
  mean = r ? mean / (double)r : NAN;
  e->pf = mean;
  bk_estimate_clopper_pearson(e->n, failures, level, e->ci_exact);
  if (r < 2 || failures == 0) {
    e->cov = failures ? NAN : INFINITY;
    e->ci[0] = e->ci_exact[0];
    e->ci[1] = e->ci_exact[1];
    e->ci_method = "clopper-pearson";
    bk_estimate_set_beta(e);
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
  bk_estimate_set_beta(e);
}

void bk_estimate_wsum_init(bk_estimate_wsum_t *t) {
  t->n = t->k = 0;
  t->logmax = -INFINITY;
  t->s1 = t->s2 = 0;
}

/* A new largest weight rescales the sums by exp(old - new) <= 1, so they
 * never overflow and the largest value always counts 1. */
void bk_estimate_wsum_add(bk_estimate_wsum_t *t, double logw) {
  assert(!isnan(logw) && logw < INFINITY);
  t->n++;
  if (logw == -INFINITY)
    return;
  t->k++;
  if (logw > t->logmax) {
    double r = exp(t->logmax - logw);
    t->s1 = t->s1 * r + 1;
    t->s2 = t->s2 * r * r + 1;
    t->logmax = logw;
  } else {
    double v = exp(logw - t->logmax);
    t->s1 += v;
    t->s2 += v * v;
  }
}

double bk_estimate_wsum_log_mean(const bk_estimate_wsum_t *t) {
  if (t->n == 0)
    return NAN;
  if (t->k == 0)
    return -INFINITY;
  return t->logmax + log(t->s1 / (double)t->n);
}

double bk_estimate_wsum_mean(const bk_estimate_wsum_t *t) {
  return exp(bk_estimate_wsum_log_mean(t));
}

double bk_estimate_wsum_ess(const bk_estimate_wsum_t *t) {
  return t->k ? t->s1 * t->s1 / t->s2 : 0;
}

double bk_estimate_wsum_max_share(const bk_estimate_wsum_t *t) {
  return t->k ? 1 / t->s1 : 0;
}

/* The sample variance of the v_i is (s2 - s1^2 / n) / (n - 1) in units of
 * exp(2 logmax), and the variance of their mean that over n; divided by
 * the squared mean (s1 / n)^2 the units cancel. n s2 >= s1^2 by
 * Cauchy-Schwarz, so rounding alone can make the difference negative. */
void bk_estimate_weighted(const bk_estimate_wsum_t *t, double level,
                          bk_estimate_t *e) {
  memset(e, 0, sizeof *e);
  e->n = t->n;
  e->failures = t->k;
  e->ci_level = level;
  e->ci_method = "normal (weighted)";
  e->pf = bk_estimate_wsum_mean(t);
  e->cov = INFINITY;
  e->ci[0] = 0;
  e->ci[1] = NAN;
  if (t->k > 0 && t->n >= 2 && bk_estimate_wsum_ess(t) >= BK_ESTIMATE_MIN_ESS) {
    double nn = (double)t->n;
    double c2 = (nn * t->s2 / (t->s1 * t->s1) - 1) / (nn - 1);
    if (c2 > 0) {
      double zq = bk_norm_icdf(0.5 + level / 2);
      double half = zq * e->pf * sqrt(c2);
      e->cov = sqrt(c2);
      e->ci[0] = fmax(0, e->pf - half);
      e->ci[1] = fmin(1, e->pf + half);
    }
  }
  e->ci_exact[0] = e->ci[0];
  e->ci_exact[1] = e->ci[1];
  bk_estimate_set_beta(e);
}

void bk_estimate_lognormal(double pf, double cov, double level,
                           bk_estimate_t *e) {
  memset(e, 0, sizeof *e);
  e->pf = pf;
  e->ci_level = level;
  e->ci_method = "lognormal";
  if (pf > 0) {
    double zq = bk_norm_icdf(0.5 + level / 2);
    double sl = sqrt(log1p(cov * cov));
    e->cov = cov;
    e->ci[0] = pf * exp(-zq * sl);
    e->ci[1] = fmin(1, pf * exp(zq * sl));
  } else {
    e->cov = INFINITY;
    e->ci[0] = 0;
    e->ci[1] = NAN;
  }
  e->ci_exact[0] = e->ci[0];
  e->ci_exact[1] = e->ci[1];
  bk_estimate_set_beta(e);
}
