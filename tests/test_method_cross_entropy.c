/*
 * Tests of the cross-entropy method on closed-form rare-event problems
 * (Pf from 1e-3 to 1e-7): the exact value lies inside the stated interval
 * for most seeds, the mixture finds two symmetric design points, keys and
 * batches are what method_cross_entropy.c says, runs are deterministic,
 * stops propagate and warnings fire when the evidence is against the
 * result.
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

TestSuite(method_cross_entropy, .init = setup, .fini = teardown,
          .timeout = 120);

/* The committed scipy values agree with brink's own special functions
 * (bk_norm_sf, bk_gamma_q; scipy.stats.norm.sf and gamma.sf in
 * tests/ref/gen_rare.py). */
Test(method_cross_entropy, reference_values_match_special_functions) {
  const char *betas[] = {"3.09", "4.0", "4.75", "4.9", "5.2"};
  for (int i = 0; i < 5; i++) {
    double want = ref_value("normal_sf", betas[i]);
    double got = bk_norm_sf(strtod(betas[i], NULL));
    cr_expect(fabs(got - want) <= 1e-12 * want, "%s: %g vs %g", betas[i], got,
              want);
  }
  const char *ts[] = {"36.7", "45.0", "48.8"};
  for (int i = 0; i < 3; i++) {
    char arg[32];
    snprintf(arg, sizeof arg, "20 %s", ts[i]);
    double want = ref_value("gamma_sf", arg);
    double got = bk_gamma_q(20, strtod(ts[i], NULL));
    cr_expect(fabs(got - want) <= 1e-10 * want, "%s: %g vs %g", ts[i], got,
              want);
  }
}

/* Linear limit state in standard normals, Pf = Phi(-beta) exactly
 * (Cornell 1969), from 1e-3 to 1e-7 (scipy.stats.norm.sf, ref_rare.txt).
 * Coverage over 40 seeds of the stated 95% interval: at least 80%. */
Test(method_cross_entropy, linear_intervals_cover_from_1e3_to_1e7) {
  const char *betas[] = {"3.09", "4.75", "5.2"};
  for (int i = 0; i < 3; i++) {
    char what[64];
    snprintf(what, sizeof what, "cross-entropy linear beta %s", betas[i]);
    double c = coverage(what, linear_fmt, betas[i],
                        "method: cross-entropy, samples: 400",
                        ref_value("normal_sf", betas[i]), 40, 0);
    cr_expect_geq(c, 0.8, "%s coverage %.2f", what, c);
  }
}

/* g = beta - |a|: two symmetric design points, Pf = 2 Phi(-beta) exactly
 * (scipy.stats.norm.sf(4.9) in ref_rare.txt, times 2). A two-component
 * mixture covers both. */
Test(method_cross_entropy, two_design_points_with_two_components) {
  double exact = 2 * ref_value("normal_sf", "4.9");
  double c =
      coverage("cross-entropy two design points, K=2", two_points_fmt, "4.9",
               "method: cross-entropy, samples: 400, "
               "cross_entropy: {components: 2}",
               exact, 40, 0);
  cr_expect_geq(c, 0.8, "coverage %.2f", c);
  bk_study_t *s = study_from(two_points_fmt, 5, "4.9",
                             "method: cross-entropy, "
                             "cross_entropy: {components: 2}");
  bk_result_t r;
  run(s, &r);
  int found = 0;
  for (size_t i = 0; i < r.ndetails; i++)
    if (!strcmp(r.details[i].label, "mixture components")) {
      found = 1;
      cr_expect_eq(r.details[i].value, 2);
    }
  cr_expect(found);
  cr_expect_eq(r.nwarnings, 0, "%s", r.nwarnings ? r.warnings[0] : "");
  bk_result_close(&r);
  bk_study_free(s);
}

/* The sum of 20 unit exponentials above t = 48.8: Pf = Q(20, 48.8) =
 * 1.0166e-6 (Erlang tail; scipy.stats.gamma.sf in ref_rare.txt), a
 * failure domain far from any linearisation in u-space. */
Test(method_cross_entropy, sum_of_20_exponentials_is_covered) {
  double exact = ref_value("gamma_sf", "20 48.8");
  double c = coverage("cross-entropy 20 exponentials 1e-6", NULL, "48.8",
                      "method: cross-entropy, samples: 2000", exact, 40, 1);
  cr_expect_geq(c, 0.8, "coverage %.2f", c);
}

/* Keys: adaptation batches "ce/s0", "ce/s1", ... of analysis.samples
 * points, then "ce/final" batches; the same seed gives the same numbers
 * bit for bit, and target_cov is reached after whole batches. */
Test(method_cross_entropy, batches_keys_and_determinism) {
  bk_study_t *s =
      study_from(linear_fmt, 9, "4.0", "method: cross-entropy, samples: 300");
  spy_t a, b;
  memset(&a, 0, sizeof a);
  memset(&b, 0, sizeof b);
  bk_result_t ra, rb;
  cr_assert_eq(run_rc(s, &ra, &a), 0);
  cr_assert_eq(run_rc(s, &rb, &b), 0);
  cr_assert_str_eq(a.prefixes, b.prefixes);
  cr_assert(ra.est.pf == rb.est.pf && ra.est.cov == rb.est.cov);
  cr_assert_eq(strncmp(a.prefixes, "ce/s0 ce/s1 ", 12), 0, "%s", a.prefixes);
  cr_assert(strstr(a.prefixes, "ce/final "), "%s", a.prefixes);
  for (int i = 0; i < a.nbatches; i++)
    cr_assert_eq(a.sizes[i], 300);
  cr_assert_eq(ra.evaluations, 300 * (uint64_t)a.nbatches);
  cr_assert_leq(ra.est.cov, 0.1);
  cr_assert_str_eq(ra.stop_reason, "target_cov reached");
  cr_assert_str_eq(ra.est.ci_method, "normal (weighted)");
  bk_study_t *s2 =
      study_from(linear_fmt, 10, "4.0", "method: cross-entropy, samples: 300");
  bk_result_t rc2;
  run(s2, &rc2);
  cr_assert(rc2.est.pf != ra.est.pf);
  bk_result_close(&ra);
  bk_result_close(&rb);
  bk_result_close(&rc2);
  bk_study_free(s);
  bk_study_free(s2);
}

/* A stop request from the evaluator ends the run with BK_ESTOPPED. */
Test(method_cross_entropy, stop_from_the_evaluator_is_returned) {
  bk_study_t *s =
      study_from(linear_fmt, 9, "4.0", "method: cross-entropy, samples: 300");
  spy_t sp;
  memset(&sp, 0, sizeof sp);
  sp.stop_at = 3;
  bk_result_t r;
  cr_assert_eq(run_rc(s, &r, &sp), BK_ESTOPPED);
  cr_assert_eq(r.evaluations, 600);
  bk_result_close(&r);
  bk_study_free(s);
}

/* Too few steps for the threshold to reach 0 is reported; a single
 * Gaussian across two distant design points gives uneven weights. */
Test(method_cross_entropy, warnings_when_the_evidence_is_against_it) {
  bk_study_t *s = study_from(linear_fmt, 4, "4.75",
                             "method: cross-entropy, samples: 300, "
                             "max_evaluations: 20000, "
                             "cross_entropy: {max_steps: 2}");
  bk_result_t r;
  run(s, &r);
  cr_assert_geq(r.nwarnings, 1);
  cr_expect(strstr(r.warnings[0], "adaptation stopped after 2 steps"), "%s",
            r.warnings[0]);
  bk_result_close(&r);
  bk_study_free(s);
  s = exp20_study(3, "48.8",
                  "method: cross-entropy, samples: 300, "
                  "max_evaluations: 20000");
  run(s, &r);
  int degenerate = 0;
  for (size_t i = 0; i < r.nwarnings; i++)
    degenerate |= strstr(r.warnings[i], "degenerate") != NULL;
  cr_expect(degenerate, "expected the degenerate-weights warning");
  bk_result_close(&r);
  bk_study_free(s);
}

/* NaN limit-state values are model errors, here where a > 3.2, inside
 * part of the failure domain: they are left out of the estimate and
 * pf_bounds (exact, since every weight is known) bracket it. */
Test(method_cross_entropy, model_errors_give_bounds) {
  bk_study_t *s = study_from(linear_fmt, 2, "4.0 + 0*sqrt(3.2 - a)",
                             "method: cross-entropy, samples: 500");
  bk_result_t r;
  run(s, &r);
  cr_assert_gt(r.excluded, 0);
  cr_assert_leq(r.excluded, r.model_errors);
  cr_assert_leq(r.pf_bounds[0], r.est.pf);
  cr_assert_geq(r.pf_bounds[1], r.est.pf);
  bk_result_close(&r);
  bk_study_free(s);
}
