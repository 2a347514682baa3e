/*
 * Tests of importance sampling around the design point on closed-form
 * problems: linear limit states in normals from Pf 1e-3 to 1e-7 (Cornell
 * 1969) inside the stated intervals, coverage over 100 seeds, a given
 * centre, batch-boundary stopping, the warnings (degenerate weights, FORM
 * and sampling disagreeing) and runs excluded by model errors.
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

#include "base/fault.h"
#include "methods/method.h"
#include "numerics/special.h"
#include "study/study.h"

static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-is-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(method_importance, .init = setup, .fini = teardown);

static bk_study_t *study_from(const char *fmt, ...) {
  char text[4096];
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(text, sizeof text, fmt, ap);
  va_end(ap);
  char path[512];
  snprintf(path, sizeof path, "%s/study.yaml", dir);
  FILE *f = fopen(path, "w");
  cr_assert(f);
  fputs(text, f);
  fclose(f);
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_study_load(path, &s, &err);
  cr_assert_eq(rc, 0, "%d:%d: %s", err.line, err.col, err.msg);
  return s;
}

static void run(bk_study_t *s, bk_result_t *r) {
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_method_run(s, &ev, NULL, r, &err);
  cr_assert_eq(rc, 0, "%s", err.msg);
}

static int has_warning(const bk_result_t *r, const char *text) {
  for (size_t i = 0; i < r->nwarnings; i++)
    if (strstr(r->warnings[i], text))
      return 1;
  return 0;
}

static double detail(const bk_result_t *r, const char *label) {
  for (size_t i = 0; i < r->ndetails; i++)
    if (strcmp(r->details[i].label, label) == 0)
      return r->details[i].value;
  return NAN;
}

/* Cornell (1969): g = beta - (a + b + c)/sqrt(3) in independent standard
 * normals has Pf = Phi(-beta) exactly. */
static const char linear_study[] =
    "seed: %d\n"
    "variables:\n"
    "  a: {type: normal, mean: 0, sd: 1}\n"
    "  b: {type: normal, mean: 0, sd: 1}\n"
    "  c: {type: normal, mean: 0, sd: 1}\n"
    "limit_state: %.17g - (a + b + c)/sqrt(3)\n"
    "analysis: {method: importance, target_cov: %g, ci_level: %g%s}\n";

/* Pf from 1e-3 to 1e-7: each exact value inside the stated 99% interval
 * (beta from scipy.stats.norm.isf; EN 1990 Table C1 gives the two-decimal
 * values 3.09, 3.72, 4.27, 4.75, 5.20). */
Test(method_importance, linear_cases_from_1e_3_to_1e_7_inside_intervals) {
  double pfs[] = {1e-3, 1e-4, 1e-5, 1e-6, 1e-7};
  for (int i = 0; i < 5; i++) {
    double beta = -bk_norm_icdf(pfs[i]);
    for (int seed = 1; seed <= 3; seed++) {
      bk_study_t *s = study_from(linear_study, seed, beta, 0.05, 0.99, "");
      bk_result_t r;
      run(s, &r);
      cr_expect(r.est.ci[0] <= pfs[i] && pfs[i] <= r.est.ci[1],
                "Pf %g seed %d: [%.4e, %.4e] (estimate %.4e)", pfs[i], seed,
                r.est.ci[0], r.est.ci[1], r.est.pf);
      cr_expect(r.est.cov <= 0.05);
      cr_expect_str_eq(r.stop_reason, "target_cov reached");
      cr_expect_str_eq(r.est.ci_method, "normal (weighted)");
      cr_assert(r.dp.present && r.dp.converged);
      /* FORM is exact here, so sampling agrees: no warning at all. */
      cr_expect_eq(r.nwarnings, 0, "%s", r.nwarnings ? r.warnings[0] : "");
      /* Whole batches of 500 after the FORM phase (2 x 4 evaluations of
       * the search, then the exploration's). */
      cr_expect_eq(
          (r.evaluations - (uint64_t)detail(&r, "FORM evaluations")) % 500, 0);
      cr_expect_eq(detail(&r, "mixture components"), 1);
      cr_expect(detail(&r, "effective sample size") > 0);
      bk_result_close(&r);
      bk_study_free(s);
    }
  }
}

/* 100 seeds of the Pf = 1e-5 case: the 95% normal intervals on the
 * weighted mean cover the exact value at about their nominal rate
 * (binomial spread of 100 trials at 0.95: 85 to 99 holds with
 * probability above 0.999). */
Test(method_importance, coverage_over_100_seeds) {
  double beta = -bk_norm_icdf(1e-5);
  int covered = 0;
  for (int seed = 100; seed < 200; seed++) {
    bk_study_t *s = study_from(linear_study, seed, beta, 0.1, 0.95, "");
    bk_result_t r;
    run(s, &r);
    covered += r.est.ci[0] <= 1e-5 && 1e-5 <= r.est.ci[1];
    bk_result_close(&r);
    bk_study_free(s);
  }
  cr_expect(covered >= 85 && covered <= 99, "coverage %d of 100", covered);
}

/* Theory for a linear limit state (bk_plan_is_relvar): at Pf 1e-6 one
 * sample has relative variance 5.39, so cov 0.1 needs about 539 samples:
 * two batches of 500 at most, with FORM's evaluations before. */
Test(method_importance, pf_1e_6_needs_about_600_samples) {
  double beta = -bk_norm_icdf(1e-6);
  uint64_t total = 0;
  for (int seed = 1; seed <= 10; seed++) {
    bk_study_t *s = study_from(linear_study, seed, beta, 0.1, 0.95, "");
    bk_result_t r;
    run(s, &r);
    cr_expect_leq(r.evaluations, 8 + 1500);
    total += r.evaluations;
    bk_result_close(&r);
    bk_study_free(s);
  }
  cr_expect_leq(total / 10, 1200);
}

/* A centre given in x-space: no FORM phase, no design point, and the
 * estimate still covers the exact value (importance sampling is unbiased
 * for any centre). */
Test(method_importance, a_given_center_skips_form) {
  double beta = 4;
  double x = beta / sqrt(3);
  char extra[200];
  snprintf(extra, sizeof extra,
           ", importance: {center: {a: %.17g, b: %.17g, c: %.17g}}", x, x, x);
  bk_study_t *s = study_from(linear_study, 7, beta, 0.05, 0.99, extra);
  bk_result_t r;
  run(s, &r);
  cr_expect(!r.dp.present);
  cr_expect_eq(r.evaluations % 500, 0);
  double exact = bk_norm_cdf(-beta);
  cr_expect(r.est.ci[0] <= exact && exact <= r.est.ci[1],
            "[%.4e, %.4e] (estimate %.4e)", r.est.ci[0], r.est.ci[1], r.est.pf);
  bk_result_close(&r);
  bk_study_free(s);
}

/* A centre far from the design point (on the surface, but at distance
 * 3 sqrt(2) sideways of it): the weights of the failing samples spread
 * over orders of magnitude, and the result says so. */
Test(method_importance, degenerate_weights_are_reported) {
  bk_study_t *s = study_from("seed: 3\n"
                             "variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - b\n"
                             "analysis: {method: importance, samples: 200, "
                             "max_evaluations: 400, importance: {center: {a: "
                             "4.5, b: 3}}}\n");
  bk_result_t r;
  run(s, &r);
  cr_expect(has_warning(&r, "importance weights degenerate"), "%s",
            r.nwarnings ? r.warnings[0] : "(none)");
  cr_expect(detail(&r, "effective sample size") < 0.1 * r.est.failures);
  bk_result_close(&r);
  bk_study_free(s);
}

/* g = 3 - b - 0.15 a^2 bends towards the origin: FORM's Phi(-3) =
 * 1.35e-3 is less than half the exact 2.996e-3 (scipy.integrate.quad of
 * phi(a) Phi(-(3 - 0.15 a^2))), sampling finds the exact value, and the
 * result warns of the disagreement. */
Test(method_importance, form_and_sampling_disagreeing_is_reported) {
  bk_study_t *s = study_from("seed: 5\n"
                             "variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - b - 0.15*a^2\n"
                             "analysis: {method: importance, target_cov: "
                             "0.05, ci_level: 0.99}\n");
  bk_result_t r;
  run(s, &r);
  double exact = 0.002995814722962554;
  cr_expect(r.est.ci[0] <= exact && exact <= r.est.ci[1],
            "[%.4e, %.4e] (estimate %.4e)", r.est.ci[0], r.est.ci[1], r.est.pf);
  cr_expect(has_warning(&r, "FORM and importance sampling disagree"));
  bk_result_close(&r);
  bk_study_free(s);
}

/* Model errors (here NaN from sqrt of a negative number where a < -2.5):
 * excluded under on_error skip, with pf_bounds bracketing the estimate. */
Test(method_importance, model_errors_give_pf_bounds) {
  bk_study_t *s = study_from("seed: 9\n"
                             "variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3.5 - b + 0*sqrt(a + 2.5)\n"
                             "analysis: {method: importance, target_cov: "
                             "0.05}\n");
  bk_result_t r;
  run(s, &r);
  cr_assert_gt(r.model_errors, 0);
  /* Excluded are the sampling phase's; the FORM phase's probe may fault
   * as well. */
  cr_expect_gt(r.excluded, 0);
  cr_expect_leq(r.excluded, r.model_errors);
  cr_expect(r.pf_bounds[0] <= r.est.pf && r.est.pf <= r.pf_bounds[1],
            "[%g, %g] around %g", r.pf_bounds[0], r.pf_bounds[1], r.est.pf);
  cr_expect_lt(r.pf_bounds[0], r.pf_bounds[1]);
  bk_result_close(&r);
  bk_study_free(s);
}

/* A limit state that never fails: FORM finds no design point and the
 * method says what to do instead. */
Test(method_importance, no_design_point_is_an_error_saying_what_to_do) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 10 + a^2\n"
                             "analysis: {method: importance}\n");
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  bk_error_t err;
  bk_error_clear(&err);
  bk_result_t r;
  int rc = bk_method_run(s, &ev, NULL, &r, &err);
  cr_expect_neq(rc, 0);
  cr_expect(strstr(err.msg, "analysis.importance.center"), "%s", err.msg);
  bk_result_close(&r);
  bk_study_free(s);
}

/* Same study, same bits. */
Test(method_importance, runs_are_reproducible) {
  bk_study_t *s = study_from(linear_study, 4, 4.0, 0.1, 0.95, "");
  bk_result_t a, b;
  run(s, &a);
  run(s, &b);
  cr_expect_eq(a.evaluations, b.evaluations);
  cr_expect(memcmp(&a.est.pf, &b.est.pf, sizeof(double)) == 0);
  cr_expect(memcmp(&a.est.ci, &b.est.ci, sizeof a.est.ci) == 0);
  bk_result_close(&a);
  bk_result_close(&b);
  bk_study_free(s);
}

/* g = 3 - b - 0.5 a^2 with the centre given at (0, 3), a saddle of the
 * distance on the surface: failing samples at a = 1.5, b = 1.9 lie at
 * distance 2.4, nearer than the centre, which proves that the centre is
 * not the design point (the design point is the nearest failure point,
 * Hasofer & Lind 1974). */
Test(method_importance, a_failing_sample_nearer_than_the_centre_is_reported) {
  bk_study_t *s = study_from("seed: 2\n"
                             "variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - b - 0.5*a^2\n"
                             "analysis: {method: importance, importance: "
                             "{center: {a: 0, b: 3}}}\n");
  bk_result_t r;
  run(s, &r);
  cr_expect(has_warning(&r, "nearer than every centre"), "%s",
            r.nwarnings ? r.warnings[0] : "(none)");
  bk_result_close(&r);
  bk_study_free(s);
}

/* Two failure modes, b > 4 and (a + b)/sqrt(2) > 3: FORM from the medians
 * follows the first (beta 4) and misses the nearer second (distance 3).
 * Without exploration, sampling around (0, 4) reaches the second mode, and
 * the result warns that a failing sample lies nearer than the centre and
 * that FORM and sampling disagree (Pf about Phi(-3) + Phi(-4) = 1.38e-3
 * against FORM's Phi(-4) = 3.2e-5, Abramowitz & Stegun Table 26.1). */
Test(method_importance, a_second_design_point_is_reported) {
  bk_study_t *s =
      study_from("seed: 4\n"
                 "variables:\n"
                 "  a: {type: normal, mean: 0, sd: 1}\n"
                 "  b: {type: normal, mean: 0, sd: 1}\n"
                 "limit_state: min(4 - b, 10*(3 - (a + b)/sqrt(2)))\n"
                 "analysis: {method: importance, max_evaluations: "
                 "5000, form: {explore: false}}\n");
  bk_result_t r;
  run(s, &r);
  cr_expect(fabs(r.dp.beta - 4) < 1e-6);
  cr_expect(has_warning(&r, "nearer than every centre"));
  cr_expect(has_warning(&r, "FORM and importance sampling disagree"));
  bk_result_close(&r);
  bk_study_free(s);
}

/* The same two modes with exploration (the default): the probe around the
 * beta sphere fails towards (1, 1), a search from there finds the nearer
 * design point at distance 3, the report's design point is that one, and
 * the mixture around both covers the exact value, scipy.stats.norm.sf(3)
 * + sf(4) - P(both) = 1.36598e-3 (the overlap 1.559e-5 by
 * scipy.integrate.quad of phi(b) Phi(-(3 sqrt 2 - b)) for b > 4), without
 * a warning. */
Test(method_importance, exploration_finds_the_second_design_point) {
  bk_study_t *s =
      study_from("seed: 4\n"
                 "variables:\n"
                 "  a: {type: normal, mean: 0, sd: 1}\n"
                 "  b: {type: normal, mean: 0, sd: 1}\n"
                 "limit_state: min(4 - b, 10*(3 - (a + b)/sqrt(2)))\n"
                 "analysis: {method: importance, max_evaluations: 5000, "
                 "ci_level: 0.99}\n");
  bk_result_t r;
  run(s, &r);
  cr_expect(fabs(r.dp.beta - 3) < 1e-3, "beta %g", r.dp.beta);
  cr_expect_eq(detail(&r, "mixture components"), 2);
  double exact = 1.36598e-3;
  cr_expect(r.est.ci[0] <= exact && exact <= r.est.ci[1],
            "[%.4e, %.4e] (estimate %.4e)", r.est.ci[0], r.est.ci[1], r.est.pf);
  cr_expect_eq(r.nwarnings, 0, "%s", r.nwarnings ? r.warnings[0] : "");
  bk_result_close(&r);
  bk_study_free(s);
}

/* An evaluator that evaluates the limit state in process and faults every
 * tenth importance sample ("is/0", "is/10", ...). */
static int faulty_is_batch(bk_evaluator_t *ev, const char *prefix,
                           bk_point_t *pts, size_t n, bk_error_t *err) {
  (void)err;
  const bk_study_t *s = ev->data;
  for (size_t i = 0; i < n; i++) {
    pts[i].g = bk_expr_eval(s->g, pts[i].x);
    pts[i].fault = BK_FAULT_NONE;
    if (strcmp(prefix, "is") == 0 && pts[i].index % 10 == 0) {
      pts[i].g = NAN;
      pts[i].fault = BK_FAULT_SIGNAL;
    }
  }
  return 0;
}

/* The FORM phase and the sampling share one method context, so the error
 * limit counts the whole run (mctx.h): 10 faulted samples in the first
 * batch of 100, over FORM's 8 evaluations (without exploration) and those
 * 100, is above the default 5% and stops the run, the message counting
 * all 108 and naming the first faulted key. */
Test(method_importance, the_error_limit_counts_form_and_sampling) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "  c: {type: normal, mean: 0, sd: 1}\n"
                             "model:\n"
                             "  command: ['true']\n"
                             "  outputs: {y: {file: out.txt, pattern: "
                             "'y = (\\S+)'}}\n"
                             "limit_state: 4 - (a + b + c)/sqrt(3)\n"
                             "analysis: {method: importance, samples: 100, "
                             "form: {explore: false}}\n");
  bk_evaluator_t ev = {faulty_is_batch, s};
  bk_result_t r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, &r, &err), BK_EMODEL);
  cr_expect_eq(r.evaluations, 108);
  cr_expect_eq(r.model_errors, 10);
  cr_expect(strstr(err.msg, "10 of 108 model runs failed (9.3%"), "%s",
            err.msg);
  cr_expect(strstr(err.msg, "most ended in signal (10), the first at is/0"),
            "%s", err.msg);
  bk_result_close(&r);
  bk_study_free(s);
}

/* g = 1.5 - |b| fails on both sides, b > 1.5 and b < -1.5: Pf = 2
 * Phi(-1.5) = 0.1336144 (scipy.stats.norm.sf(1.5) = 0.0668072, times 2).
 * Without exploration FORM finds one side only; the defensive share of
 * the mixture still samples the other, with bounded weights, and those
 * failing samples, far from the one design point and carrying much of
 * the estimate, bring the warning that names the methods to use. With
 * exploration both sides are design points and nothing is warned. */
Test(method_importance, failures_no_design_point_explains_are_reported) {
  const char *explore[] = {"false", "true"};
  for (int i = 0; i < 2; i++) {
    bk_study_t *s = study_from("seed: 6\n"
                               "variables:\n"
                               "  a: {type: normal, mean: 0, sd: 1}\n"
                               "  b: {type: normal, mean: 0, sd: 1}\n"
                               "limit_state: 1.5 - abs(b) + 0*a\n"
                               "analysis: {method: importance, ci_level: "
                               "0.99, form: {explore: %s}}\n",
                               explore[i]);
    bk_result_t r;
    run(s, &r);
    double exact = 0.1336144;
    cr_expect(r.est.ci[0] <= exact && exact <= r.est.ci[1],
              "explore %s: [%.4e, %.4e] (estimate %.4e)", explore[i],
              r.est.ci[0], r.est.ci[1], r.est.pf);
    int warned = has_warning(&r, "where no design point's component");
    if (i == 0) {
      cr_expect(warned, "%s", r.nwarnings ? r.warnings[0] : "(none)");
      cr_expect(has_warning(&r, "use subset simulation (method: subset) or "
                                "cross-entropy"));
    } else {
      cr_expect_eq(detail(&r, "mixture components"), 2);
      cr_expect_eq(r.nwarnings, 0, "%s", r.nwarnings ? r.warnings[0] : "");
    }
    bk_result_close(&r);
    bk_study_free(s);
  }
}
