/*
 * Statistics of failure-probability estimates: the right error bar for
 * each sampling scheme.
 *  - Crude Monte Carlo (independent samples): Pf = k/n, binomial
 *    cov = sqrt((1-Pf)/(n Pf)), Wilson (1927) score interval, and the exact
 *    Clopper-Pearson (1934) interval.
 *  - Latin hypercube and randomised Sobol: the estimates of R independent
 *    replicates, their mean, the standard error sd/sqrt(R) and a Student t
 *    interval with R-1 degrees of freedom; the binomial formula does not
 *    apply to these designs.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_ESTIMATE_H
#define BK_ESTIMATE_H

#include <stddef.h>
#include <stdint.h>

typedef struct {
  double pf;
  double cov;        /* coefficient of variation of the estimator; inf
                        when Pf = 0 */
  double ci[2];      /* interval at level ci_level */
  double ci_level;
  const char *ci_method; /* "wilson", "clopper-pearson", "student-t" */
  double ci_exact[2];    /* Clopper-Pearson where defined, else = ci */
  double beta;       /* -Phi^-1(pf) */
  double beta_ci[2]; /* beta at the interval's ends (upper Pf -> lower beta) */
  uint64_t n;        /* evaluations used */
  uint64_t failures;
} bk_estimate_t;

/* Wilson score interval for k failures in n trials. */
void bk_wilson(uint64_t n, uint64_t k, double level, double ci[2]);
/* Clopper-Pearson (exact) interval. */
void bk_clopper_pearson(uint64_t n, uint64_t k, double level, double ci[2]);

/* The estimate for k failures in n independent samples (Wilson interval as
 * ci, Clopper-Pearson as ci_exact). */
void bk_estimate_binomial(uint64_t n, uint64_t k, double level,
                          bk_estimate_t *e);

/* The estimate from r replicate estimates pf[0..r) of equal size, each of
 * `per` evaluations, `failures` in total. With r < 2 the interval is the
 * Clopper-Pearson one of the pooled counts. When every replicate saw no
 * failure, ci is the Clopper-Pearson interval of the pooled counts. */
void bk_estimate_replicates(const double *pf, size_t r, uint64_t per,
                            uint64_t failures, double level,
                            bk_estimate_t *e);

/* Reliability index from a failure probability, beta = -Phi^-1(pf), and
 * back. */
double bk_beta_from_pf(double pf);
double bk_pf_from_beta(double beta);

#endif
