/*
 * Tests of the model-error watcher (methods/evidence.h): errors that
 * strike at random stay quiet, errors clustered near the failure region
 * are named with the bounds on Pf, for every method.
 *
 * The problem is the linear limit state g = beta*sqrt(2) - u1 - u2 of
 * tests/helpers/problems.h, Pf = Phi(-beta) (closed form, Cornell 1969).
 * A wrapper around the in-process evaluator turns some runs into model
 * errors: either at random (5%, by a hash of the key), or every run with
 * g < 0.5 (about 5% of the runs with beta = 2, and every failure).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/fault.h"
#include "methods/evidence.h"
#include "methods/method.h"
#include "study/study.h"

#include "helpers/problems.h"

TestSuite(evidence, .init = problems_setup, .fini = problems_teardown);

typedef enum { ERR_NONE, ERR_RANDOM, ERR_NEAR_FAILURE } err_mode_t;

typedef struct {
  bk_evaluator_t inner;
  err_mode_t mode;
  double rate;   /* ERR_RANDOM: share of runs */
  double below;  /* ERR_NEAR_FAILURE: runs with g below this fail */
  uint64_t salt; /* the seed, so that each seed errs elsewhere */
} faulty_t;

static uint64_t mix(uint64_t z) {
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}

static uint64_t key_hash(const char *prefix, uint64_t index, uint64_t salt) {
  uint64_t h = salt * 0x9e3779b97f4a7c15ULL + index;
  for (const char *p = prefix; *p; p++)
    h = mix(h ^ (unsigned char)*p);
  return mix(h);
}

/* The in-process evaluator, then the chosen runs made model errors (g NaN,
 * as a crashed model leaves it). */
static int faulty_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                        size_t n, bk_error_t *err) {
  faulty_t *f = ev->data;
  int rc = f->inner.batch(&f->inner, prefix, pts, n, err);
  for (size_t i = 0; !rc && i < n; i++) {
    int bad = 0;
    if (f->mode == ERR_RANDOM)
      bad = (double)(key_hash(prefix, pts[i].index, f->salt) >> 11) * 0x1p-53 <
            f->rate;
    else if (f->mode == ERR_NEAR_FAILURE)
      bad = pts[i].g < f->below;
    if (bad) {
      pts[i].g = NAN;
      pts[i].fault = BK_FAULT_EXIT_CODE;
    }
  }
  return rc;
}

static int has_cluster_warning(const bk_result_t *r) {
  for (size_t i = 0; i < r->nwarnings; i++)
    if (strstr(r->warnings[i], "model errors cluster near the failure"))
      return 1;
  return 0;
}

static const char *cluster_warning(const bk_result_t *r) {
  for (size_t i = 0; i < r->nwarnings; i++)
    if (strstr(r->warnings[i], "model errors cluster near the failure"))
      return r->warnings[i];
  return NULL;
}

/* A method may stop on its model errors (FORM when the start point
 * fails): run_faulty then returns -1 instead of failing the test. */
static int tolerate_failure;

/* Runs `analysis` on the linear problem (beta) with errors by `mode`;
 * returns whether it warned. */
static int run_faulty(const char *beta, int seed, const char *analysis,
                      err_mode_t mode, bk_result_t *r) {
  bk_study_t *s = problem_study("linear", "2", beta, seed, analysis);
  faulty_t f = {
      .mode = mode, .rate = 0.05, .below = 0.5, .salt = (uint64_t)seed};
  bk_evaluator_inprocess(&f.inner, s);
  bk_evaluator_t ev = {faulty_batch, &f};
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_method_run(s, &ev, NULL, r, &err);
  if (rc && tolerate_failure) {
    bk_study_free(s);
    return -1;
  }
  cr_assert_eq(rc, 0, "seed %d: %s", seed, err.msg);
  int warned = has_cluster_warning(r);
  bk_study_free(s);
  return warned;
}

/* Errors at random, 5% of the runs: the test is quiet in at least 95% of
 * 50 seeds (its own false-alarm rate is about 0.1%). */
Test(evidence, random_errors_stay_quiet) {
  int quiet = 0, errs = 0;
  for (int seed = 1; seed <= 50; seed++) {
    bk_result_t r;
    quiet +=
        !run_faulty("2", seed, "method: random, samples: 2000", ERR_RANDOM, &r);
    errs += r.model_errors > 0;
    bk_result_close(&r);
  }
  cr_expect_eq(errs, 50, "every seed had model errors (%d)", errs);
  cr_expect_geq(quiet, 48, "quiet in %d of 50 seeds", quiet);
}

/* Errors wherever g < 0.5: the warning in at least 95% of 50 seeds, with
 * the bounds (all safe, all failed) around the exact Pf. */
Test(evidence, errors_near_failure_warn) {
  int warned = 0, bounded = 0;
  double exact = 0.5 * erfc(2 / sqrt(2.0)); /* Phi(-2) */
  for (int seed = 1; seed <= 50; seed++) {
    bk_result_t r;
    warned += run_faulty("2", seed, "method: random, samples: 2000",
                         ERR_NEAR_FAILURE, &r);
    bounded += r.pf_bounds[0] <= exact && exact <= r.pf_bounds[1];
    cr_expect_lt(r.est.pf, exact, "seed %d: Pf %g is biased low", seed,
                 r.est.pf);
    bk_result_close(&r);
  }
  cr_expect_geq(warned, 48, "warned in %d of 50 seeds", warned);
  cr_expect_eq(bounded, 50, "the bounds hold the exact Pf in %d of 50",
               bounded);
}

/* Without model errors there is nothing to test and nothing to say. */
Test(evidence, no_errors_no_warning) {
  bk_result_t r;
  cr_expect(!run_faulty("2", 7, "method: lhs, samples: 500", ERR_NONE, &r));
  cr_expect_eq(r.model_errors, 0);
  bk_result_close(&r);
}

/* Every method runs behind the watcher; subset and FORM say that their
 * bounds are partial. */
Test(evidence, every_method_warns) {
  static const struct {
    const char *analysis;
    const char *scope; /* in the warning, or NULL */
  } cases[] = {
      {"method: lhs, samples: 2000", NULL},
      {"method: sobol, samples: 2048", NULL},
      {"method: importance, samples: 2000, importance: {center: {u1: 1.41, u2: "
       "1.41}}",
       NULL},
      {"method: cross-entropy, samples: 2000", NULL},
      {"method: form", "no such bounds"},
      {"method: subset, samples: 1000", "first level"},
  };
  for (size_t c = 0; c < sizeof cases / sizeof *cases; c++) {
    bk_result_t r;
    int w = run_faulty("2", 11, cases[c].analysis, ERR_NEAR_FAILURE, &r);
    cr_expect(w, "%s: no warning (%llu errors of %llu)", cases[c].analysis,
              (unsigned long long)r.model_errors,
              (unsigned long long)r.evaluations);
    const char *msg = cluster_warning(&r);
    if (msg && cases[c].scope)
      cr_expect(strstr(msg, cases[c].scope), "%s: %s", cases[c].analysis, msg);
    bk_result_close(&r);
  }
}

/* The test alone: errored points among the lowest g are found; errored
 * points drawn like the others are not (one fixed draw each). */
Test(evidence, test_on_points) {
  enum { N = 400, NE = 20 };
  static double ok_u[N], ok_g[N], err_u[NE];
  for (int i = 0; i < N; i++) {
    ok_u[i] = -3 + 6.0 * (i + 0.5) / N;
    ok_g[i] = 2 - ok_u[i];
  }
  for (int i = 0; i < NE; i++)
    err_u[i] = 1.5 + 0.05 * i; /* g from 0.5 down to -0.45 */
  bk_evidence_test_t t;
  cr_assert_eq(bk_evidence_test(1, ok_u, ok_g, N, err_u, NE, &t), 0);
  cr_expect(t.tested && t.fires, "z %g", t.z);
  cr_expect_gt(t.share_near, t.share_all);
  for (int i = 0; i < NE; i++)
    err_u[i] = -2.85 + 0.3 * i; /* evenly over the range */
  cr_assert_eq(bk_evidence_test(1, ok_u, ok_g, N, err_u, NE, &t), 0);
  cr_expect(t.tested && !t.fires, "z %g", t.z);
  cr_assert_eq(bk_evidence_test(1, ok_u, ok_g, N, err_u, 2, &t), 0);
  cr_expect(!t.tested, "two errored runs are too few to test");
}

/* Errors at random (5%) in the other methods: quiet in all but at most 2
 * of 20 seeds each (FORM stops on seeds where its start point errs). */
Test(evidence, random_errors_quiet_in_every_method) {
  static const char *const analyses[] = {
      "method: lhs, samples: 2000",
      "method: importance, samples: 2000, importance: {center: {u1: 1.41, "
      "u2: 1.41}}",
      "method: cross-entropy, samples: 2000",
      "method: subset, samples: 1000",
      "method: form",
  };
  tolerate_failure = 1;
  for (size_t c = 0; c < sizeof analyses / sizeof *analyses; c++) {
    int quiet = 0, ran = 0;
    for (int seed = 1; seed <= 20; seed++) {
      bk_result_t r;
      memset(&r, 0, sizeof r);
      int w = run_faulty("2", seed, analyses[c], ERR_RANDOM, &r);
      ran += w >= 0;
      quiet += w == 0;
      bk_result_close(&r);
    }
    cr_expect_geq(ran, 15, "%s: ran in %d of 20 seeds", analyses[c], ran);
    cr_expect_geq(quiet, ran - 2, "%s: quiet in %d of %d seeds", analyses[c],
                  quiet, ran);
  }
}
