/*
 * Tests of the surrogate method (method_surrogate.c) in process: study
 * keys and their errors, the keys and batch sizes of the evaluator calls,
 * determinism, closed-form answers, model errors, the many-variables
 * warning, a budget too small to correct, and refusal of shards. Coverage
 * over seeds on the benchmark problems is in test_coverage.c; resume
 * after kill -9 and busy slots in test_resume_methods.c.
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

#include "eval/shard.h"
#include "methods/method.h"
#include "numerics/special.h"
#include "study/study.h"

#include "helpers/rare.h"

TestSuite(method_surrogate, .init = setup, .fini = teardown, .timeout = 300);

static double detail(const bk_result_t *r, const char *label) {
  for (size_t i = 0; i < r->ndetails; i++)
    if (!strcmp(r->details[i].label, label))
      return r->details[i].value;
  return NAN;
}

static int has_warning(const bk_result_t *r, const char *part) {
  for (size_t i = 0; i < r->nwarnings; i++)
    if (strstr(r->warnings[i], part))
      return 1;
  return 0;
}

/* The error of loading a study text. */
static void load_error(const char *text, char *msg, size_t cap, int *line,
                       int *col) {
  char path[512];
  snprintf(path, sizeof path, "%s/bad.yaml", dir);
  FILE *f = fopen(path, "w");
  cr_assert(f);
  fputs(text, f);
  fclose(f);
  bk_study_t *s = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_neq(bk_study_load(path, &s, &err), 0, "loaded: %s", text);
  snprintf(msg, cap, "%s", err.msg);
  *line = err.line;
  *col = err.col;
}

Test(method_surrogate, defaults_follow_the_documentation) {
  bk_study_t *s = study_from(linear_fmt, 1, "3", "method: surrogate");
  const bk_analysis_t *a = &s->analysis;
  cr_expect_eq(a->method, BK_METHOD_SURROGATE);
  cr_expect_float_eq(a->target_cov, 0.1, 0);
  cr_expect_eq(a->max_evaluations, 500);
  cr_expect_eq(a->surrogate.batch, s->run.slots); /* run.slots */
  cr_expect_eq(a->surrogate.trend, 2);            /* auto */
  cr_expect_eq(a->surrogate.noisy, 0);
  cr_expect_eq(a->surrogate.eff, 0);
  cr_expect_eq(a->surrogate.believer, 0);
  cr_expect_float_eq(a->surrogate.train_share, 0.6, 0);
  bk_study_free(s);
  s = study_from(linear_fmt, 1, "3",
                 "method: surrogate, surrogate: {batch: 7, start_points: 12, "
                 "trend: linear, noisy: true, pick_by: eff, spread: believer, "
                 "training_share: 0.5}");
  a = &s->analysis;
  cr_expect_eq(a->surrogate.batch, 7);
  cr_expect_eq(a->surrogate.start, 12);
  cr_expect_eq(a->surrogate.trend, 1);
  cr_expect_eq(a->surrogate.noisy, 1);
  cr_expect_eq(a->surrogate.eff, 1);
  cr_expect_eq(a->surrogate.believer, 1);
  cr_expect_float_eq(a->surrogate.train_share, 0.5, 0);
  bk_study_free(s);
}

/* The batch size sets which points each iteration picks, so it is part of
 * the study's fingerprint (a resume with another batch is refused rather
 * than given other points under the same keys). */
Test(method_surrogate, batch_is_part_of_the_fingerprint) {
  bk_study_t *a = study_from(linear_fmt, 1, "3",
                             "method: surrogate, surrogate: {batch: 2}");
  bk_study_t *b = study_from(linear_fmt, 1, "3",
                             "method: surrogate, surrogate: {batch: 3}");
  cr_expect_str_neq(a->digest_study, b->digest_study);
  bk_study_free(a);
  bk_study_free(b);
}

Test(method_surrogate, bad_keys_are_located_and_explained) {
  static const struct {
    const char *analysis, *msg;
  } cases[] = {
      {"method: surrogate, surrogate: {trend: quadratic}",
       "analysis.surrogate.trend must be auto, constant or linear; got "
       "'quadratic'"},
      {"method: surrogate, surrogate: {spread: random}",
       "analysis.surrogate.spread must be clusters or believer; got 'random'"},
      {"method: surrogate, surrogate: {pick_by: v}",
       "analysis.surrogate.pick_by must be u or eff; got 'v'"},
      {"method: surrogate, surrogate: {noisy: yes}",
       "analysis.surrogate.noisy must be true or false; got 'yes'"},
      {"method: surrogate, surrogate: {training_share: 1.5}",
       "analysis.surrogate.training_share must lie between 0 and 1 (got "
       "1.5), e.g. 0.6"},
      {"method: surrogate, samples: 100",
       "analysis.samples does not apply to method surrogate (model runs per "
       "iteration are analysis.surrogate.batch; the total is "
       "analysis.max_evaluations)"},
  };
  for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
    char text[1024], msg[1024];
    snprintf(text, sizeof text, linear_fmt, 1, "3", cases[i].analysis);
    int line, col;
    load_error(text, msg, sizeof msg, &line, &col);
    cr_expect_str_eq(msg, cases[i].msg);
    cr_expect_eq(line, 6, "%s: line %d", cases[i].analysis, line);
  }
}

/* One evaluator call per learning iteration and per correction batch, with
 * the keys the documentation names, each batch `batch` points (the
 * starting design excepted). */
Test(method_surrogate, batches_have_their_own_keys_and_size) {
  bk_study_t *s = study_from(two_points_fmt, 3, "3.5",
                             "method: surrogate, surrogate: {batch: 5}");
  spy_t sp;
  memset(&sp, 0, sizeof sp);
  bk_result_t r;
  cr_assert_eq(run_rc(s, &r, &sp), 0);
  cr_expect(!strncmp(sp.prefixes, "sg/t0 sg/t1 sg/t2 ", 18), "%s", sp.prefixes);
  cr_expect(strstr(sp.prefixes, "sg/c "), "%s", sp.prefixes);
  cr_expect_eq(sp.sizes[0], 10); /* max(10, 2 nu + 2) */
  for (int i = 1; i < sp.nbatches && i < 512; i++)
    cr_expect_eq(sp.sizes[i], 5, "batch %d of %zu", i, sp.sizes[i]);
  double train = detail(&r, "training runs"),
         corr = detail(&r, "correction runs");
  cr_expect_eq(train + corr, (double)r.evaluations);
  cr_expect_geq(corr, 20);
  bk_result_close(&r);
  bk_study_free(s);
}

/* Every decision is a function of (study, seed, responses): two runs give
 * the same numbers bit for bit. */
Test(method_surrogate, runs_are_deterministic) {
  bk_result_t r1, r2;
  bk_study_t *s = study_from(two_points_fmt, 9, "3.5",
                             "method: surrogate, surrogate: {batch: 3}");
  run(s, &r1);
  run(s, &r2);
  cr_expect_eq(memcmp(&r1.est.pf, &r2.est.pf, sizeof(double)), 0);
  cr_expect_eq(memcmp(&r1.est.cov, &r2.est.cov, sizeof(double)), 0);
  cr_expect_eq(r1.evaluations, r2.evaluations);
  cr_expect_eq(r1.nhistory, r2.nhistory);
  bk_result_close(&r1);
  bk_result_close(&r2);
  bk_study_free(s);
}

/* g = beta - |a|: Pf = 2 Phi(-beta) (scipy.stats.norm.sf(4.9) in
 * ref_rare.txt, times 2), two design points: the interval holds it and
 * the model runs stay in the tens. */
Test(method_surrogate, two_design_points_within_a_hundred_runs) {
  double exact = 2 * ref_value("normal_sf", "4.9");
  int hits = 0;
  for (int seed = 1; seed <= 10; seed++) {
    bk_study_t *s = study_from(two_points_fmt, seed, "4.9",
                               "method: surrogate, surrogate: {batch: 4}");
    bk_result_t r;
    run(s, &r);
    hits += r.est.ci[0] <= exact && exact <= r.est.ci[1];
    cr_expect_leq(r.evaluations, 150, "seed %d: %llu runs", seed,
                  (unsigned long long)r.evaluations);
    cr_expect(r.est.cov <= 0.1, "seed %d: cov %g", seed, r.est.cov);
    cr_expect_str_eq(r.stop_reason, "target_cov reached");
    bk_result_close(&r);
    bk_study_free(s);
  }
  cr_expect_geq(hits, 8, "%d of 10 intervals hold 2 Phi(-4.9)", hits);
}

/* The learning curve: one history entry per learning iteration (the
 * surrogate's estimate within its band) and per correction batch. */
Test(method_surrogate, learning_curve_is_recorded) {
  bk_study_t *s = study_from(linear_fmt, 2, "4.0",
                             "method: surrogate, surrogate: {batch: 4}");
  bk_result_t r;
  run(s, &r);
  cr_assert_geq(r.nhistory, 2);
  for (size_t i = 0; i < r.nhistory; i++) {
    const bk_history_t *h = &r.history[i];
    cr_expect(h->ci[0] <= h->pf && h->pf <= h->ci[1], "entry %zu", i);
    if (i)
      cr_expect_geq(h->n, r.history[i - 1].n);
  }
  cr_expect_eq(r.history[r.nhistory - 1].n, r.evaluations);
  bk_result_close(&r);
  bk_study_free(s);
}

/* Model errors: g is not a number for a > 2.5 (sqrt of a negative), so
 * some training points fault. They are left out of the surrogate and
 * counted; under skip the correction's faulty points are excluded and
 * bounded. */
Test(method_surrogate, faulty_points_are_left_out_and_counted) {
  bk_study_t *s =
      study_from("seed: 4\n"
                 "variables:\n"
                 "  a: {type: normal, mean: 0, sd: 1}\n"
                 "  b: {type: normal, mean: 0, sd: 1}\n"
                 "limit_state: 3.5 - b + 0*sqrt(2.5 - a)\n"
                 "analysis: {method: surrogate, surrogate: {batch: 4}}\n");
  bk_result_t r;
  run(s, &r);
  cr_expect_gt(detail(&r, "training faults"), 0);
  cr_expect_eq(r.model_errors,
               detail(&r, "training faults") + (double)r.excluded);
  double exact = bk_norm_sf(3.5); /* the faults lie where b is safe */
  cr_expect(r.pf_bounds[0] <= r.est.pf && r.est.pf <= r.pf_bounds[1]);
  cr_expect(r.est.ci[0] <= exact && exact <= r.est.ci[1], "%g not in [%g, %g]",
            exact, r.est.ci[0], r.est.ci[1]);
  bk_result_close(&r);
  bk_study_free(s);
}

/* A budget too small for the correction: no claim of target_cov, cov not
 * 0, and a warning. */
Test(method_surrogate, too_small_a_budget_never_claims_target_cov) {
  bk_study_t *s = study_from(linear_fmt, 1, "3.5",
                             "method: surrogate, max_evaluations: 11, "
                             "surrogate: {batch: 4}");
  bk_result_t r;
  run(s, &r);
  cr_expect_leq(r.evaluations, 11);
  cr_expect(r.est.cov > 0);
  cr_expect(has_warning(&r, "correction runs"), "%zu warnings", r.nwarnings);
  cr_expect_str_neq(r.stop_reason, "target_cov reached");
  bk_result_close(&r);
  bk_study_free(s);
}

/* Beyond 20 variables the report warns and names subset simulation. */
Test(method_surrogate, many_variables_warn_and_name_subset) {
  char text[8192] = "seed: 1\nvariables:\n";
  char g[2048] = "limit_state: 15";
  for (int i = 1; i <= 24; i++) {
    size_t l = strlen(text);
    snprintf(text + l, sizeof text - l,
             "  x%d: {type: normal, mean: 0, sd: "
             "1}\n",
             i);
    l = strlen(g);
    snprintf(g + l, sizeof g - l, " - x%d", i);
  }
  size_t l = strlen(text);
  snprintf(text + l, sizeof text - l,
           "%s\nanalysis: {method: surrogate, max_evaluations: 90, "
           "surrogate: {batch: 8}}\n",
           g);
  bk_study_t *s = study_from("%s", text);
  bk_result_t r;
  run(s, &r);
  cr_expect(has_warning(&r, "24 random variables"));
  cr_expect(has_warning(&r, "method subset"));
  bk_result_close(&r);
  bk_study_free(s);
}

/* Adaptive: each batch depends on the responses before it, so a shard
 * could not know its points. */
Test(method_surrogate, shards_are_refused) {
  cr_expect_eq(bk_shard_method_allowed(BK_METHOD_SURROGATE), 0);
}

/* A stop request propagates, with the partial result. */
Test(method_surrogate, a_stop_is_passed_on) {
  bk_study_t *s = study_from(linear_fmt, 1, "3",
                             "method: surrogate, surrogate: {batch: 4}");
  spy_t sp;
  memset(&sp, 0, sizeof sp);
  sp.stop_at = 3;
  bk_result_t r;
  cr_expect_eq(run_rc(s, &r, &sp), BK_ESTOPPED);
  bk_result_close(&r);
  bk_study_free(s);
}
