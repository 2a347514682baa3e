/*
 * Tests of the planning figures against hand calculations with the
 * published formulas: the binomial variance of crude Monte Carlo, the
 * importance-sampling variance at the design point of a linear limit state
 * (values from scipy), Au & Beck's (2001) subset-simulation cov, FORM's
 * batch sizes, and wall time as evaluations x seconds / slots.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <string.h>

#include "methods/plan.h"

static int close_rel(double a, double b, double tol) {
  return fabs(a - b) <= tol * fabs(b);
}

/* Binomial variance: cov^2 = (1 - Pf) / (N Pf). Pf 1e-3, cov 0.1:
 * N = 0.999 / (1e-3 * 0.01) = 99900; Pf 1e-6: 99999900 ("1e8" for crude
 * sampling at 1e-6, [practice]). */
Test(plan, crude_monte_carlo_is_binomial) {
  cr_expect(close_rel(bk_plan_mc(1e-3, 0.1), 99900, 1e-12));
  cr_expect(close_rel(bk_plan_mc(1e-6, 0.1), 99999900, 1e-12));
  /* REFERENCES.md [practice]: Pf 0.0025 with N = 1e6 gives cov ~2%. */
  double n = bk_plan_mc(0.0025, 0.02);
  cr_expect(n > 0.95e6 && n < 1.05e6, "%g", n);
}

/* Relative variance per sample exp(beta^2) Phi(-2 beta) / Phi(-beta)^2 - 1
 * for the density N(u*, I) on a linear limit state: values computed with
 * scipy.stats.norm (sf) in Debian's scipy 1.10. */
Test(plan, importance_variance_of_the_linear_case) {
  cr_expect(
      close_rel(bk_plan_is_relvar(3.090232306167813), 3.486125101970859, 1e-9));
  cr_expect(
      close_rel(bk_plan_is_relvar(4.753424308822899), 5.386929589521124, 1e-9));
  /* Pf 1e-6, cov 0.1: about 539 samples after FORM. */
  cr_expect(close_rel(bk_plan_is(1e-6, 0.1), 538.6929589521123, 1e-8));
  /* No overflow far out (beta 30: exp(900) alone overflows); scipy:
   * exp(900 + norm.logsf(60) - 2 norm.logsf(30)) - 1. */
  double v = bk_plan_is_relvar(30);
  cr_expect(close_rel(v, 36.67238121159486, 1e-8), "%.12g", v);
}

/* Au & Beck (2001): m = ceil(ln Pf / ln p0) levels, cov^2 = m (1 + gamma)
 * (1 - p0) / (p0 N). Pf 1e-6, p0 0.1, gamma 2, cov 0.1: m = 6,
 * N = 6 * 3 * 0.9 / (0.1 * 0.01) = 16200 per level, 97200 in all.
 * Pf 1e-4, cov 0.2: m = 4, N = 4 * 3 * 0.9 / (0.1 * 0.04) = 2700, 10800. */
Test(plan, subset_simulation_after_au_and_beck) {
  int m;
  cr_expect(close_rel(bk_plan_subset(1e-6, 0.1, 0.1, 2, &m), 97200, 1e-12));
  cr_expect_eq(m, 6);
  cr_expect(close_rel(bk_plan_subset(1e-4, 0.2, 0.1, 2, &m), 10800, 1e-12));
  cr_expect_eq(m, 4);
  /* p0 0.2 at Pf 1e-3: m = ceil(4.29) = 5, N = 5*3*0.8/(0.2*0.01) = 6000. */
  cr_expect(close_rel(bk_plan_subset(1e-3, 0.1, 0.2, 2, &m), 30000, 1e-12));
  cr_expect_eq(m, 5);
}

/* FORM: nu + 1 (forward) or 2 nu + 1 (central) points per iteration, plus
 * 2 (nu - 1)^2 curvature points for SORM. */
Test(plan, form_batches) {
  cr_expect_eq(bk_plan_form(3, 0, 10, 0), 40);
  cr_expect_eq(bk_plan_form(3, 1, 10, 0), 70);
  cr_expect_eq(bk_plan_form(3, 0, 10, 1), 48);
  cr_expect_eq(bk_plan_form(1, 0, 10, 1), 20);
}

/* FORM's exploration for one design point (method_form.c): the curvature
 * check along nu - 1 tangent axes, 2 points each, and the probe of
 * 2 nu + 32 points up to 50 variables, 32 above; the check's points are
 * SORM's first, so not counted twice. */
Test(plan, form_exploration) {
  cr_expect_eq(bk_plan_explore(2, -1, 0), 2 + 36);
  cr_expect_eq(bk_plan_explore(3, -1, 1), 38);
  cr_expect_eq(bk_plan_explore(1000, -1, 0), 32);
  cr_expect_eq(bk_plan_explore(1, -1, 0), 2);
  cr_expect_eq(bk_plan_explore(10, 0, 0), 18);
}

/* The table: wall time = ceil(evaluations / slots) x seconds, FORM's
 * iterations one batch after another. */
Test(plan, table_rows_and_wall_time) {
  bk_plan_opts_t o = {
      .pf = 1e-6, .cov = 0.1, .seconds = 60, .slots = 16, .nu = 2};
  bk_plan_row_t rows[BK_PLAN_ROWS];
  bk_plan_compute(&o, rows);
  const char *names[] = {"random",     "lhs",           "sobol",  "form",
                         "importance", "cross-entropy", "subset", "surrogate"};
  for (int i = 0; i < BK_PLAN_ROWS; i++)
    cr_expect_str_eq(rows[i].method, names[i]);
  cr_expect_eq(rows[0].evaluations, 99999900);
  cr_expect_eq(rows[0].seconds, ceil(99999900.0 / 16) * 60);
  /* FORM: 10 iterations of 3 points, each one round of 60 s. */
  cr_expect_eq(rows[3].evaluations, 30);
  cr_expect_eq(rows[3].seconds, 600);
  /* Importance: 539 rounded up to whole batches of 500 = 1000, + 30. */
  cr_expect_eq(rows[4].evaluations, 1030);
  cr_expect_eq(rows[4].seconds, 600 + ceil(1000.0 / 16) * 60);
  /* Cross-entropy: 6 steps of 500, then 1000 as importance sampling. */
  cr_expect_eq(rows[5].evaluations, 4000);
  cr_expect_eq(rows[6].evaluations, 97200);
  /* Surrogate: 10 start points, 8 x 4 learning runs, 30 corrections. */
  cr_expect_eq(rows[7].evaluations, 72);
  cr_expect_eq(rows[7].seconds, ceil(72.0 / 16) * 60);
  /* Unknown seconds: no wall time. */
  o.seconds = NAN;
  bk_plan_compute(&o, rows);
  for (int i = 0; i < BK_PLAN_ROWS; i++)
    cr_expect(isnan(rows[i].seconds));
}

/* A pilot of lhs or sobol: its own figure scales as 1/N from the pilot's
 * replicate spread (the variance of an average of N equally spread
 * samples, common practice), and lhs never asks more than random (Owen
 * 1997, from memory). Here the pilot of 1024 sobol points gave cov 0.010;
 * cov 0.005 needs four times as many. */
Test(plan, a_pilot_scales_lhs_and_sobol) {
  cr_expect_eq(bk_plan_scaled(1024, 0.010, 0.005), 4096);
  cr_expect_eq(bk_plan_scaled(1000, 0.1, 0.1), 1000);
  bk_plan_opts_t o = {.pf = 0.03,
                      .cov = 0.005,
                      .seconds = 1,
                      .slots = 1,
                      .nu = 4,
                      .pilot_method = "sobol",
                      .pilot_evaluations = 1024,
                      .pilot_cov = 0.010};
  bk_plan_row_t rows[BK_PLAN_ROWS];
  bk_plan_compute(&o, rows);
  cr_expect_eq(rows[2].evaluations, 4096);
  cr_expect_eq(rows[2].seconds, 4096);
  cr_expect_str_eq(rows[2].note, "scaled from the pilot's replicate spread");
  /* lhs and random keep the binomial figure. */
  cr_expect_eq(rows[1].evaluations, rows[0].evaluations);
  /* A spread from few failures asking more than random: capped. */
  o.pilot_method = "lhs";
  o.pilot_cov = 1.0;
  bk_plan_compute(&o, rows);
  cr_expect_eq(rows[1].evaluations, rows[0].evaluations + 1);
  /* No pilot, or a pilot of another method: unchanged. */
  o.pilot_method = "random";
  bk_plan_compute(&o, rows);
  cr_expect_eq(rows[1].evaluations, rows[0].evaluations);
  cr_expect_eq(rows[2].evaluations, rows[0].evaluations);
}
