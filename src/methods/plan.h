/*
 * Planning: how many evaluations, and how much wall time, each method
 * needs to reach a target coefficient of variation at a given failure
 * probability. The figures come from the published variance formulas of
 * each estimator (named beside each function); they are estimates for
 * choosing a method, not promises.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_PLAN_H
#define BK_PLAN_H

#include <stddef.h>

/* What a plan is computed for. */
typedef struct {
  double pf;           /* expected failure probability, 0 < pf < 1 */
  double cov;          /* target coefficient of variation */
  double seconds;      /* per model run; NaN when unknown */
  int slots;           /* concurrent model runs */
  size_t nu;           /* random variables (u-space dimension) */
  int central;         /* FORM central differences */
  int sorm;            /* FORM adds a curvature batch */
  int form_iterations; /* assumed FORM iterations; 10 when 0 */
  int explore;         /* FORM looks for further design points */
  int probe;           /* FORM probe points; -1: by dimension */
  double p0;           /* subset: conditional probability per level */
  double gamma;        /* subset: chain correlation factor; 2 when 0 */
  double is_batch;     /* importance: evaluations between checks */
  double ce_rho;       /* cross-entropy: elite quantile */
  double ce_batch;     /* cross-entropy: evaluations per step */
  /* A pilot run of lhs or sobol (method NULL when none): its evaluations
   * and the cov its replicate spread gave. Their figure then scales the
   * pilot, N = N_pilot (cov_pilot / cov)^2: the variance of these designs
   * falls at least as 1/N, faster than the binomial formula says for
   * random sampling, so the binomial count overstates what they need. */
  const char *pilot_method;
  double pilot_evaluations;
  double pilot_cov;
} bk_plan_opts_t;

/* One row of the plan. */
typedef struct {
  const char *method;
  double evaluations; /* NaN when the method has no such figure */
  double seconds;     /* wall time; NaN when seconds per run unknown */
  const char *note;   /* what the figure assumes */
} bk_plan_row_t;

#define BK_PLAN_ROWS 8

/* Crude Monte Carlo, binomial variance: N = (1 - pf) / (pf cov^2). */
double bk_plan_mc(double pf, double cov);
/* Relative variance per sample, Var/pf^2, of importance sampling with the
 * standard normal density shifted to the design point of a linear limit
 * state at distance beta: exp(beta^2) Phi(-2 beta) / Phi(-beta)^2 - 1. */
double bk_plan_is_relvar(double beta);
/* Importance-sampling evaluations after FORM: relvar / cov^2. */
double bk_plan_is(double pf, double cov);
/* Subset simulation (Au & Beck 2001): m = ceil(ln pf / ln p0) levels and
 * cov^2 = m (1 + gamma) (1 - p0) / (p0 N) give N per level; returns the
 * total N m and sets *levels (may be NULL). */
double bk_plan_subset(double pf, double cov, double p0, double gamma,
                      int *levels);
/* Evaluations a design needs for cov, scaled from a pilot of n
 * evaluations that gave cov_pilot: ceil(n (cov_pilot / cov)^2). */
double bk_plan_scaled(double n, double cov_pilot, double cov);
/* FORM: (nu + 1) forward or (2 nu + 1) central points per iteration times
 * the iterations, plus 2 (nu - 1)^2 curvature points for SORM. */
double bk_plan_form(size_t nu, int central, int iterations, int sorm);
/* FORM's exploration when it finds one design point: the curvature check,
 * 2 (nu - 1) points up to 50 variables (shared with SORM's batch, so not
 * counted again with `sorm`), and the probe, `probe` points or by default
 * 2 nu + 32 up to 50 variables and 32 above (2 for one variable);
 * method_form.c. */
double bk_plan_explore(size_t nu, int probe, int sorm);

/* The surrogate method (method_surrogate.c): a starting design of
 * max(10, 2 nu + 2), about 8 (nu + 2) learning runs and 0.3 / cov^2
 * correction runs (20 at least), as measured on the benchmark problems of
 * docs/methods.md at Pf 1e-2 to 1e-6; a poor surrogate costs more. */
double bk_plan_surrogate(size_t nu, double cov);

/* Fills rows[BK_PLAN_ROWS]: random, lhs, sobol, form, importance,
 * cross-entropy, subset, surrogate. */
void bk_plan_compute(const bk_plan_opts_t *o, bk_plan_row_t *rows);

#endif
