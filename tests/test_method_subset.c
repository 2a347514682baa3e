/*
 * Tests of subset simulation on closed-form rare-event problems (Pf from
 * 1e-3 to 1e-7): the exact value lies inside the stated Au-Beck interval
 * for most seeds, levels and keys are what method_subset.c says, runs are
 * deterministic, stops propagate, the level cap warns.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "methods/method.h"
#include "numerics/special.h"
#include "study/study.h"

#include "helpers/rare.h"

TestSuite(method_subset, .init = setup, .fini = teardown, .timeout = 120);

static double detail(const bk_result_t *r, const char *label) {
  for (size_t i = 0; i < r->ndetails; i++)
    if (!strcmp(r->details[i].label, label))
      return r->details[i].value;
  return NAN;
}

/* Linear limit state, Pf = Phi(-beta) exactly (Cornell 1969; values from
 * scipy.stats.norm.sf in ref_rare.txt). Coverage of the stated 95%
 * interval over 40 seeds: at least 80% (the Au-Beck cov leaves out the
 * correlation between levels, so some shortfall below 95% is expected). */
Test(method_subset, linear_intervals_cover_from_1e3_to_1e7) {
  const char *betas[] = {"3.09", "4.75", "5.2"};
  for (int i = 0; i < 3; i++) {
    char what[64];
    snprintf(what, sizeof what, "subset linear beta %s", betas[i]);
    double c =
        coverage(what, linear_fmt, betas[i], "method: subset, samples: 500",
                 ref_value("normal_sf", betas[i]), 40, 0);
    cr_expect_geq(c, 0.8, "%s coverage %.2f", what, c);
  }
}

/* g = beta - |a|: two symmetric design points, Pf = 2 Phi(-beta)
 * (scipy.stats.norm.sf(4.9) in ref_rare.txt, times 2). */
Test(method_subset, two_design_points_are_covered) {
  double exact = 2 * ref_value("normal_sf", "4.9");
  double c = coverage("subset two design points", two_points_fmt, "4.9",
                      "method: subset, samples: 500", exact, 40, 0);
  cr_expect_geq(c, 0.8, "coverage %.2f", c);
}

/* Sum of 20 unit exponentials above 48.8: Pf = Q(20, 48.8) (Erlang tail;
 * scipy.stats.gamma.sf in ref_rare.txt). */
Test(method_subset, sum_of_20_exponentials_is_covered) {
  double exact = ref_value("gamma_sf", "20 48.8");
  double c = coverage("subset 20 exponentials 1e-6", NULL, "48.8",
                      "method: subset, samples: 500", exact, 40, 1);
  cr_expect_geq(c, 0.8, "coverage %.2f", c);
}

/* Level 0 is one batch "ss/l0" of analysis.samples points; each further
 * level is chain steps "ss/l<L>/s<S>" of one proposal per chain (p0 *
 * samples chains of 1/p0 points); the same seed gives the same result bit
 * for bit. */
Test(method_subset, batches_keys_and_determinism) {
  bk_study_t *s =
      study_from(linear_fmt, 9, "3.5", "method: subset, samples: 200");
  spy_t a, b;
  memset(&a, 0, sizeof a);
  memset(&b, 0, sizeof b);
  bk_result_t ra, rb;
  cr_assert_eq(run_rc(s, &ra, &a), 0);
  cr_assert_eq(run_rc(s, &rb, &b), 0);
  cr_assert_str_eq(a.prefixes, b.prefixes);
  cr_assert(ra.est.pf == rb.est.pf && ra.est.cov == rb.est.cov);
  cr_assert_eq(strncmp(a.prefixes, "ss/l0 ss/l1/s1 ss/l1/s2 ", 24), 0, "%s",
               a.prefixes);
  cr_assert_eq(a.sizes[0], 200);
  cr_assert_eq(a.sizes[1], 20); /* 20 chains (or more on ties) */
  cr_assert(strstr(a.prefixes, "ss/l1/s9 ") && !strstr(a.prefixes, "s10 "));
  cr_assert_str_eq(ra.est.ci_method, "subset genealogy (lognormal)");
  /* Pf = Phi(-3.5) = 2.33e-4 (A&S Table 26.1): 4 levels at p0 = 0.1. */
  cr_assert_eq(detail(&ra, "levels"), 4);
  cr_assert_gt(ra.est.cov, 0);
  bk_result_close(&ra);
  bk_result_close(&rb);
  bk_study_free(s);
}

/* The Au-Beck cov of a single Monte Carlo level is the binomial one,
 * sqrt((1 - P) / (N P)) (Au & Beck 2001, eq. 13 with gamma = 0). */
Test(method_subset, one_level_is_binomial) {
  bk_study_t *s =
      study_from(linear_fmt, 3, "1.0", "method: subset, samples: 1000");
  bk_result_t r;
  run(s, &r);
  cr_assert_eq(detail(&r, "levels"), 1);
  double P = r.est.pf;
  cr_assert_float_eq(r.est.cov, sqrt((1 - P) / (1000 * P)), 1e-12);
  cr_assert_eq(r.evaluations, 1000);
  bk_result_close(&r);
  bk_study_free(s);
}

Test(method_subset, stop_from_the_evaluator_is_returned) {
  bk_study_t *s =
      study_from(linear_fmt, 9, "4.0", "method: subset, samples: 200");
  spy_t sp;
  memset(&sp, 0, sizeof sp);
  sp.stop_at = 4;
  bk_result_t r;
  cr_assert_eq(run_rc(s, &r, &sp), BK_ESTOPPED);
  cr_assert_eq(r.evaluations, 200 + 2 * 20);
  bk_result_close(&r);
  bk_study_free(s);
}

/* max_levels reached before g <= 0: a warning, and stop_reason says so. */
Test(method_subset, level_cap_warns) {
  bk_study_t *s = study_from(linear_fmt, 9, "5.2",
                             "method: subset, samples: 200, "
                             "subset: {max_levels: 3}");
  bk_result_t r;
  run(s, &r);
  cr_assert_str_eq(r.stop_reason, "level cap reached");
  cr_assert_geq(r.nwarnings, 1);
  cr_expect(strstr(r.warnings[0], "levels stopped at 3"), "%s", r.warnings[0]);
  cr_assert_leq(r.est.pf, 2e-3);
  bk_result_close(&r);
  bk_study_free(s);
}

/* NaN limit-state values at level 0 are excluded with pf_bounds around the
 * estimate; in the chains they are rejected proposals, counted. */
Test(method_subset, model_errors_are_counted_and_bounded) {
  bk_study_t *s = study_from(linear_fmt, 2, "3.5 + 0*sqrt(a + 2.5)",
                             "method: subset, samples: 500");
  bk_result_t r;
  run(s, &r);
  cr_assert_gt(r.model_errors, 0);
  cr_assert_leq(r.pf_bounds[0], r.est.pf);
  cr_assert_geq(r.pf_bounds[1], r.est.pf);
  bk_result_close(&r);
  bk_study_free(s);
}
