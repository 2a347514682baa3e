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
 *  - Weighted (importance) sampling, Pf = mean of w I(g <= 0): the sample
 *    variance of the weighted values and a normal interval, with sums kept
 *    in log space so that no weight underflows.
 *  - Subset simulation: a given cov and a lognormal interval.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_ESTIMATE_H
#define BK_ESTIMATE_H

#include <stddef.h>
#include <stdint.h>

typedef struct {
  double pf;
  double cov;   /* coefficient of variation of the estimator; inf
                   when Pf = 0 */
  double ci[2]; /* interval at level ci_level */
  double ci_level;
  const char *ci_method; /* "wilson", "clopper-pearson", "student-t",
                            "normal (weighted)", "lognormal", or a
                            method's own name */
  double ci_exact[2];    /* Clopper-Pearson where defined, else = ci */
  double beta;           /* -Phi^-1(pf) */
  double beta_ci[2]; /* beta at the interval's ends (upper Pf -> lower beta) */
  uint64_t n;        /* evaluations used */
  uint64_t failures;
} bk_estimate_t;

/* Wilson score interval for k failures in n trials. */
void bk_estimate_wilson(uint64_t n, uint64_t k, double level, double ci[2]);
/* Clopper-Pearson (exact) interval. */
void bk_estimate_clopper_pearson(uint64_t n, uint64_t k, double level, double ci[2]);

/* The estimate for k failures in n independent samples (Wilson interval as
 * ci, Clopper-Pearson as ci_exact). */
void bk_estimate_binomial(uint64_t n, uint64_t k, double level,
                          bk_estimate_t *e);

/* The estimate from r replicate estimates pf[0..r) of equal size, each of
 * `per` evaluations, `failures` in total. With r < 2 the interval is the
 * Clopper-Pearson one of the pooled counts. When every replicate saw no
 * failure, ci is the Clopper-Pearson interval of the pooled counts. */
void bk_estimate_replicates(const double *pf, size_t r, uint64_t per,
                            uint64_t failures, double level, bk_estimate_t *e);

/* Sums of the weighted (importance-sampling) estimator Pf = (1/n) sum v_i,
 * v_i = w_i for a failing sample and 0 otherwise, kept in log space: the
 * largest log-weight so far and the sums of v / exp(logmax) and of its
 * square, rescaled whenever the maximum grows. A weight of 1e-400, which
 * no double holds, keeps its digits, and the scale-free quantities (cov,
 * effective sample size) never see the scale. Values are added one at a
 * time in the caller's order (key order in brink), which fixes the last
 * bits of every result. Invariant: s1 >= 1 and s2 >= 1 once k > 0 (the
 * largest value counts 1), s1 = s2 = 0 while k = 0. */
typedef struct {
  uint64_t n;    /* values added, zeros included */
  uint64_t k;    /* of those, positive (failing samples) */
  double logmax; /* largest log-weight added; -INFINITY while k = 0 */
  double s1, s2; /* sum of v / exp(logmax), sum of its square */
} bk_estimate_wsum_t;

/* Fewer effective samples than this make a weighted estimate degenerate
 * (see bk_estimate_weighted). */
#define BK_ESTIMATE_MIN_ESS 2.0

void bk_estimate_wsum_init(bk_estimate_wsum_t *t);
/* Adds one value: a failing sample's log-weight (finite), or -INFINITY for
 * a value of 0 (a safe sample). */
void bk_estimate_wsum_add(bk_estimate_wsum_t *t, double logw);
/* log of the mean, log((1/n) sum v); -INFINITY when k = 0, NaN when
 * n = 0. */
double bk_estimate_wsum_log_mean(const bk_estimate_wsum_t *t);
/* The mean (1/n) sum v, exp of the above: 0 below about 1e-308 even when
 * k > 0 (the log mean keeps it). */
double bk_estimate_wsum_mean(const bk_estimate_wsum_t *t);
/* Effective sample size (sum v)^2 / sum v^2 (Kish 1965, from memory): k
 * for equal weights, near 1 when one weight carries the sum; 0 when
 * k = 0. */
double bk_estimate_wsum_ess(const bk_estimate_wsum_t *t);
/* The share of sum v carried by the largest value, in (0, 1]; 0 when
 * k = 0. */
double bk_estimate_wsum_max_share(const bk_estimate_wsum_t *t);

/* The weighted estimate: pf = exp(logmax) s1 / n; the sample variance of
 * the v_i over n for the variance of pf, so that
 * cov^2 = (n s2 / s1^2 - 1) / (n - 1) = (n / ess - 1) / (n - 1), computed
 * from the scaled sums alone; the normal interval pf -+ z pf cov, cut to
 * [0, 1], named "normal (weighted)"; n and failures are t->n and t->k.
 * Special cases, never a cov of 0 or an interval of zero width:
 *  - n = 0: pf NaN, cov infinite, interval [0, NaN];
 *  - k = 0: pf 0, cov infinite, interval [0, NaN] (the samples give no
 *    upper bound);
 *  - degenerate, k > 0 but fewer than BK_ESTIMATE_MIN_ESS effective
 *    samples (one weight carries about all of the sum), or n < 2, or a
 *    sample variance of 0 (every sample failed with one weight): the
 *    sample variance says nothing about the error, so pf is reported with
 *    an infinite cov and the interval [0, NaN] (no upper bound), as when
 *    no sample failed. A NaN end is printed as n/a. */
void bk_estimate_weighted(const bk_estimate_wsum_t *t, double level,
                          bk_estimate_t *e);

/* An estimate pf with a given coefficient of variation cov taken as that
 * of a lognormal variable with median pf: the interval
 * pf exp(-+ z sqrt(ln(1 + cov^2))), cut at 1, which never reaches below
 * 0 (subset simulation, where the product of the levels' probabilities is
 * skewed). For pf = 0 (or not a number) cov is infinite
 * and the interval [0, NaN]; the caller may give a bound of its own. Sets
 * every field but n and failures (0), and names the interval
 * "lognormal". */
void bk_estimate_lognormal(double pf, double cov, double level,
                           bk_estimate_t *e);

/* Sets beta = -Phi^-1(pf) and beta_ci from the interval ci (the upper Pf
 * gives the lower beta). */
void bk_estimate_set_beta(bk_estimate_t *e);

/* Reliability index from a failure probability, beta = -Phi^-1(pf), and
 * back. */
double bk_estimate_beta_from_pf(double pf);
double bk_estimate_pf_from_beta(double beta);

#endif
