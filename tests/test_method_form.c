/*
 * Tests of FORM and Breitung's SORM on limit states with known answers:
 * linear in normals (Cornell 1969), lognormal over lognormal (Rosenblueth
 * & Esteva 1972), two nonlinear cases against a direct minimisation with
 * scipy (tests/ref/gen_form.py), paraboloids against Breitung's formula
 * and the exact probability; the batch layout of the keys; faults;
 * non-convergence and a limit state that never fails, reported clearly.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <unistd.h>

#include "base/fault.h"
#include "methods/method.h"
#include "numerics/special.h"
#include "study/study.h"

static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-form-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(method_form, .init = setup, .fini = teardown);

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

static int has_note(const bk_result_t *r, const char *text) {
  for (size_t i = 0; i < r->nnotes; i++)
    if (strstr(r->notes[i], text))
      return 1;
  return 0;
}

static double detail(const bk_result_t *r, const char *label) {
  for (size_t i = 0; i < r->ndetails; i++)
    if (strcmp(r->details[i].label, label) == 0)
      return r->details[i].value;
  return NAN;
}

/* Cornell (1969): g = R - S with normal R, S is linear in u, so FORM is
 * exact: beta = (mR - mS) / sqrt(sR^2 + sS^2 - 2 rho sR sS). With
 * correlation the Nataf rho0 of two normals is rho itself (Liu & Der
 * Kiureghian 1986). */
Test(method_form, linear_in_normals_gives_the_exact_beta) {
  const char *diffs[] = {"forward", "central"};
  double rhos[] = {0, 0.4};
  for (int di = 0; di < 2; di++)
    for (int ri = 0; ri < 2; ri++) {
      double rho = rhos[ri];
      bk_study_t *s =
          study_from("variables:\n"
                     "  r: {type: normal, mean: 200, sd: 20}\n"
                     "  s: {type: normal, mean: 125, sd: 30}\n"
                     "  k: {type: constant, value: 1}\n"
                     "%s"
                     "limit_state: r - k*s\n"
                     "analysis: {method: form, form: {differences: %s}}\n",
                     rho ? "correlations: [[r, s, 0.4]]\n" : "", diffs[di]);
      bk_result_t r;
      run(s, &r);
      double beta = 75 / sqrt(400 + 900 - 2 * rho * 600);
      cr_expect(fabs(r.est.beta - beta) < 1e-8,
                "%s rho %g: beta %.12g, want "
                "%.12g",
                diffs[di], rho, r.est.beta, beta);
      cr_expect(fabs(r.est.pf - bk_norm_cdf(-beta)) < 1e-10 * r.est.pf);
      cr_assert(r.dp.present && r.dp.converged);
      /* The linear case converges on the second iterate: the first step
       * lands on the surface; the exploration adds its own runs and finds
       * no other design point. */
      cr_expect_eq(r.dp.iterations, 2);
      cr_expect_eq(r.evaluations - (uint64_t)detail(&r, "exploration runs"),
                   2 * (di ? 5 : 3));
      cr_expect_eq(detail(&r, "design points found"), 1);
      cr_expect_eq(r.nwarnings, 0, "%s", r.nwarnings ? r.warnings[0] : "");
      cr_expect_str_eq(r.est.ci_method,
                       "none (FORM is not a sampling estimate)");
      cr_expect(isnan(r.est.cov));
      /* Both sides meet on the surface: r* = s* (k = 1). */
      cr_expect(fabs(r.dp.x[0] - r.dp.x[1]) < 1e-6, "r* %g s* %g", r.dp.x[0],
                r.dp.x[1]);
      cr_expect_eq(r.dp.x[2], 1);
      cr_expect_eq(r.dp.alpha2[2], 0);
      /* Importance factors of the correlated normals, gamma = alpha^T
       * L^-1 (Der Kiureghian 2005, from memory): for a linear g that is
       * the gradient in z, (sR, -sS), whatever rho, so the shares are
       * 400/1300 and 900/1300. */
      double want_r = 400.0 / 1300.0;
      cr_expect(fabs(r.dp.alpha2[0] - want_r) < 1e-6, "alpha2 r %g want %g",
                r.dp.alpha2[0], want_r);
      cr_expect(fabs(r.dp.alpha2[0] + r.dp.alpha2[1] - 1) < 1e-12);
      bk_result_close(&r);
      bk_study_free(s);
    }
}

/* Rosenblueth & Esteva (1972): lognormal R over lognormal S, exact
 * beta = ln((mR/mS) sqrt((1+cS^2)/(1+cR^2))) / sqrt(ln((1+cR^2)(1+cS^2))).
 * g = ln R - ln S is linear in u; g = R - S has the same failure surface
 * R = S, so FORM must find the same design point. */
Test(method_form, lognormal_over_lognormal_gives_rosenblueth_esteva) {
  double mR = 3.0, cR = 0.15, mS = 1.2, cS = 0.25;
  double beta = log((mR / mS) * sqrt((1 + cS * cS) / (1 + cR * cR))) /
                sqrt(log((1 + cR * cR) * (1 + cS * cS)));
  const char *gs[] = {"log(r) - log(s)", "r - s", "r/s - 1"};
  for (int i = 0; i < 3; i++) {
    bk_study_t *s =
        study_from("variables:\n"
                   "  r: {type: lognormal, mean: %g, cov: %g}\n"
                   "  s: {type: lognormal, mean: %g, cov: %g}\n"
                   "limit_state: %s\n"
                   "analysis: {method: form, form: {tolerance: 1e-7}}\n",
                   mR, cR, mS, cS, gs[i]);
    bk_result_t r;
    run(s, &r);
    cr_assert(r.dp.converged, "%s", gs[i]);
    cr_expect(fabs(r.est.beta - beta) < 1e-6, "%s: beta %.10g want %.10g",
              gs[i], r.est.beta, beta);
    bk_result_close(&r);
    bk_study_free(s);
  }
}

/* Nonlinear cases against scipy's direct minimisation of |u| on g = 0
 * (tests/ref/gen_form.py, fixture ref_form.txt). */
Test(method_form, nonlinear_cases_match_a_direct_minimisation) {
  char path[512];
  snprintf(path, sizeof path, "%s/ref_form.txt", getenv("BRINK_FIXTURES"));
  FILE *f = fopen(path, "r");
  cr_assert(f, "%s", path);
  char name[64];
  double beta, u1, u2;
  int cases = 0;
  while (fscanf(f, "%63s %lf %lf %lf", name, &beta, &u1, &u2) == 4) {
    const char *vars, *g;
    if (strcmp(name, "lognormal-gumbel") == 0) {
      vars = "  r: {type: lognormal, mean: 3, cov: 0.15}\n"
             "  s: {type: gumbel, mean: 1.2, cov: 0.25}\n";
      g = "r - s";
    } else if (strcmp(name, "parabola-offset") == 0) {
      vars = "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n";
      g = "3 - a - 0.2*(b - 0.5)^2";
    } else {
      cr_assert_fail("unknown case %s", name);
    }
    for (int central = 0; central < 2; central++) {
      bk_study_t *s = study_from(
          "variables:\n%s"
          "limit_state: %s\n"
          "analysis: {method: form, form: {tolerance: 1e-7, step: 1e-5, "
          "differences: %s}}\n",
          vars, g, central ? "central" : "forward");
      bk_result_t r;
      run(s, &r);
      cr_assert(r.dp.converged, "%s", name);
      cr_expect(fabs(r.est.beta - beta) < 1e-5, "%s: beta %.10g want %.10g",
                name, r.est.beta, beta);
      cr_expect(fabs(r.dp.u[0] - u1) < 1e-3 && fabs(r.dp.u[1] - u2) < 1e-3,
                "%s: u* (%g, %g) want (%g, %g)", name, r.dp.u[0], r.dp.u[1], u1,
                u2);
      bk_result_close(&r);
      bk_study_free(s);
    }
    cases++;
  }
  fclose(f);
  cr_assert_eq(cases, 2);
}

/* P(u2 >= beta + k u1^2) for independent standard normals, by composite
 * Simpson quadrature of phi(u1) Phi(-(beta + k u1^2)) on [-12, 12]. */
static double parabola_exact(double beta, double k) {
  int n = 24000;
  double a = -12, h = 24.0 / n, sum = 0;
  for (int i = 0; i <= n; i++) {
    double x = a + i * h;
    double f = bk_norm_pdf(x) * bk_norm_cdf(-(beta + k * x * x));
    sum += f * (i == 0 || i == n ? 1 : (i % 2 ? 4 : 2));
  }
  return sum * h / 3;
}

/* Breitung (1984): Pf ~ Phi(-beta) prod (1 + beta kappa_i)^-1/2. For
 * g = beta - u2 + k u1^2 the design point is (0, beta) and kappa = 2k.
 * The exact Pf (quadrature above; scipy.integrate.quad gives 1.0435988e-3
 * for beta 3, k 0.1) lies within Breitung's asymptotic error, 2.3% here. */
Test(method_form, sorm_on_a_parabola) {
  double beta = 3, k = 0.1;
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: %g - b + %g*a^2\n"
                             "analysis: {method: form, form: {sorm: true}}\n",
                             beta, k);
  bk_result_t r;
  run(s, &r);
  cr_assert(r.dp.converged);
  cr_expect(fabs(r.dp.beta - beta) < 1e-6, "beta %.12g", r.dp.beta);
  double breitung = bk_norm_cdf(-beta) / sqrt(1 + 2 * k * beta);
  cr_expect(fabs(r.dp.pf_sorm - breitung) < 1e-6 * breitung,
            "SORM %.10g, Breitung's formula %.10g", r.dp.pf_sorm, breitung);
  double exact = parabola_exact(beta, k);
  cr_expect(fabs(exact - 1.0435987587942802e-3) < 1e-9, "quadrature %.12g",
            exact);
  cr_expect(fabs(r.dp.pf_sorm / exact - 1) < 0.03, "SORM %.6g exact %.6g",
            r.dp.pf_sorm, exact);
  cr_expect(fabs(r.dp.pf_form / exact - 1) > 0.2, "FORM is off by 29%%");
  bk_result_close(&r);
  bk_study_free(s);
}

/* Three variables, a curvature matrix with a cross term: g = beta - c +
 * k1 a^2 + k2 b^2 + m a b. The curvatures are the eigenvalues of
 * [[2 k1, m], [m, 2 k2]], so Breitung's product is
 * det(I + beta K)^-1/2 = ((1 + 2 beta k1)(1 + 2 beta k2) - beta^2 m^2)^-1/2
 * (a closed form, independent of the eigenvalue routine). */
Test(method_form, sorm_with_a_cross_curvature) {
  double beta = 3.5, k1 = 0.08, k2 = 0.15, m = 0.05;
  bk_study_t *s = study_from(
      "variables:\n"
      "  a: {type: normal, mean: 0, sd: 1}\n"
      "  b: {type: normal, mean: 0, sd: 1}\n"
      "  c: {type: normal, mean: 0, sd: 1}\n"
      "limit_state: %g - c + %g*a^2 + %g*b^2 + %g*a*b\n"
      "analysis: {method: form, form: {sorm: true, differences: central}}\n",
      beta, k1, k2, m);
  bk_result_t r;
  run(s, &r);
  cr_assert(r.dp.converged);
  double det = (1 + 2 * beta * k1) * (1 + 2 * beta * k2) - beta * beta * m * m;
  double want = bk_norm_cdf(-beta) / sqrt(det);
  cr_expect(fabs(r.dp.pf_sorm - want) < 1e-5 * want, "SORM %.10g want %.10g",
            r.dp.pf_sorm, want);
  bk_result_close(&r);
  bk_study_free(s);
}

/* A surface bending round the origin more tightly than the beta sphere
 * (1 + beta kappa <= 0) is outside Breitung's formula: a warning, no
 * SORM value. */
Test(method_form, sorm_outside_its_range_is_reported) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - b - 0.2*a^2\n"
                             "analysis: {method: form, form: {sorm: true, "
                             "max_iterations: 3}}\n");
  bk_result_t r;
  run(s, &r);
  /* (0, 3) is a saddle of the distance here, so FORM leaves it: whether
   * it converges in 3 iterations or not, nothing claims a SORM value. */
  cr_expect(isnan(r.dp.pf_sorm));
  cr_expect(has_warning(&r, "SORM"));
  bk_result_close(&r);
  bk_study_free(s);
}

/* An evaluator that records the batches it sees and faults where told. */
typedef struct {
  const bk_study_t *s;
  char prefixes[64][32];
  size_t sizes[64];
  uint64_t first[64];
  int nbatches;
  const char *fault_prefix; /* fault this key ... */
  uint64_t fault_index;
  int fault_always; /* ... or every gradient point of that prefix */
} spy_t;

static int spy_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                     size_t n, bk_error_t *err) {
  (void)err;
  spy_t *sp = ev->data;
  if (sp->nbatches < 64) {
    snprintf(sp->prefixes[sp->nbatches], 32, "%s", prefix);
    sp->sizes[sp->nbatches] = n;
    sp->first[sp->nbatches] = n ? pts[0].index : 0;
  }
  sp->nbatches++;
  for (size_t i = 0; i < n; i++) {
    pts[i].g = bk_expr_eval(sp->s->g, pts[i].x);
    pts[i].fault = BK_FAULT_NONE;
    if (sp->fault_prefix && strcmp(prefix, sp->fault_prefix) == 0 &&
        (sp->fault_always ? pts[i].index > 0
                          : pts[i].index == sp->fault_index)) {
      pts[i].g = NAN;
      pts[i].fault = BK_FAULT_EXIT_CODE;
    }
  }
  return 0;
}

/* Each iteration is one batch "form/iK": the iterate and its nu (forward)
 * or 2 nu (central) difference points; the curvature points are one batch
 * "form/h" of 2 m^2 points for m = nu - 1 (without exploration). */
Test(method_form, each_iteration_is_one_batch) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "  c: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - c + 0.05*a^2 + 0.02*b^2\n"
                             "analysis: {method: form, form: {sorm: true, "
                             "differences: central, explore: false}}\n");
  spy_t sp = {.s = s};
  bk_evaluator_t ev = {spy_batch, &sp};
  bk_result_t r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, &r, &err), 0, "%s", err.msg);
  cr_assert(r.dp.converged);
  cr_assert_geq(sp.nbatches, 3);
  for (int i = 0; i < sp.nbatches - 1; i++) {
    char want[32];
    snprintf(want, sizeof want, "form/i%d", i);
    cr_expect_str_eq(sp.prefixes[i], want);
    cr_expect_eq(sp.sizes[i], 7); /* 1 + 2 nu */
    cr_expect_eq(sp.first[i], 0);
  }
  cr_expect_str_eq(sp.prefixes[sp.nbatches - 1], "form/h");
  cr_expect_eq(sp.sizes[sp.nbatches - 1], 8); /* 2 m^2, m = 2 */
  cr_expect_eq(r.evaluations, (uint64_t)(7 * (sp.nbatches - 1) + 8));
  cr_expect(has_note(&r, "exploration is off"));
  bk_result_close(&r);
  bk_study_free(s);
}

/* With exploration (the default) the keys name each part: search 0
 * "form/iK", the curvature check of its design point "form/h" (the 2 m
 * points u +- h r_i, the first of the SORM batch, whose other 2 m (m - 1)
 * points follow under the same prefix from index 2 m), the probe
 * "form/p" of 2 nu + 32 points from index 0. On this single design point
 * the probe starts no search. */
Test(method_form, exploration_batches_are_named_per_part) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "  c: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - c + 0.05*a^2 + 0.02*b^2\n"
                             "analysis: {method: form, form: {sorm: true}}\n");
  spy_t sp = {.s = s};
  bk_evaluator_t ev = {spy_batch, &sp};
  bk_result_t r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, &r, &err), 0, "%s", err.msg);
  cr_assert(r.dp.converged);
  int n = sp.nbatches;
  cr_assert_geq(n, 4);
  for (int i = 0; i < n - 3; i++)
    cr_expect(strncmp(sp.prefixes[i], "form/i", 6) == 0, "%s", sp.prefixes[i]);
  cr_expect_str_eq(sp.prefixes[n - 3], "form/h");
  cr_expect_eq(sp.sizes[n - 3], 4);
  cr_expect_eq(sp.first[n - 3], 0);
  cr_expect_str_eq(sp.prefixes[n - 2], "form/p");
  cr_expect_eq(sp.sizes[n - 2], 2 * 3 + 32);
  cr_expect_eq(sp.first[n - 2], 0);
  cr_expect_str_eq(sp.prefixes[n - 1], "form/h");
  cr_expect_eq(sp.sizes[n - 1], 4);
  cr_expect_eq(sp.first[n - 1], 4);
  cr_expect_eq(detail(&r, "exploration runs"), 4 + 38);
  cr_expect_eq(detail(&r, "design points found"), 1);
  cr_expect(has_note(&r, "design-point exploration: 42 runs"), "%s",
            r.nnotes ? r.notes[0] : "(none)");
  /* Breitung's product with kappa = 0.1, 0.04 (2 k_i). */
  double want = bk_norm_cdf(-3) / sqrt((1 + 0.3) * (1 + 0.12));
  cr_expect(fabs(r.dp.pf_sorm - want) < 1e-4 * want, "SORM %.8g want %.8g",
            r.dp.pf_sorm, want);
  bk_result_close(&r);
  bk_study_free(s);
}

/* A faulted gradient point is retried with half the step under new keys
 * (indices after the first nu); when every retry faults the search stops
 * with an error naming the key. */
Test(method_form, faulted_gradient_points_are_retried_then_reported) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - b + 0.1*a^2\n"
                             "analysis: {method: form}\n");
  spy_t sp = {.s = s, .fault_prefix = "form/i1", .fault_index = 2};
  bk_evaluator_t ev = {spy_batch, &sp};
  bk_result_t r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, &r, &err), 0, "%s", err.msg);
  cr_assert(r.dp.converged);
  cr_expect(fabs(r.dp.beta - 3) < 1e-6);
  /* form/i1: the batch of 3, then the retry of indices 3 and 4. */
  cr_expect_str_eq(sp.prefixes[1], "form/i1");
  cr_expect_str_eq(sp.prefixes[2], "form/i1");
  cr_expect_eq(sp.sizes[2], 2);
  cr_expect_eq(sp.first[2], 3);
  cr_expect_eq(r.model_errors, 1);
  bk_result_close(&r);

  spy_t sp2 = {.s = s, .fault_prefix = "form/i1", .fault_always = 1};
  bk_evaluator_t ev2 = {spy_batch, &sp2};
  bk_error_clear(&err);
  int rc = bk_method_run(s, &ev2, NULL, &r, &err);
  cr_expect_eq(rc, BK_EMODEL);
  cr_expect(strstr(err.msg, "gradient point form/i1/"), "%s", err.msg);
  bk_result_close(&r);
  bk_study_free(s);
}

/* With a model, FORM obeys model.max_error_fraction like every method
 * (mctx.h): one faulted gradient point among the dozen evaluations of the
 * search (without exploration) is above the default 5%, and the run stops with
 * a message naming the fault kind and its first key; allowed 20%, the same
 * search ends normally. (The spy evaluates the limit state itself; the model
 * section only makes the study one with a model.) */
Test(method_form, the_error_limit_applies_to_form) {
  const char *study = "variables:\n"
                      "  a: {type: normal, mean: 0, sd: 1}\n"
                      "  b: {type: normal, mean: 0, sd: 1}\n"
                      "model:\n"
                      "  command: ['true']\n"
                      "  outputs: {y: {file: out.txt, pattern: 'y = (\\S+)'}}\n"
                      "  max_error_fraction: %s\n"
                      "limit_state: 3 - b + 0.1*a^2\n"
                      "analysis: {method: form, form: {explore: false}}\n";
  bk_study_t *s = study_from(study, "0.05");
  spy_t sp = {.s = s, .fault_prefix = "form/i1", .fault_index = 2};
  bk_evaluator_t ev = {spy_batch, &sp};
  bk_result_t r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, &r, &err), BK_EMODEL);
  cr_expect(strstr(err.msg, "1 of "), "%s", err.msg);
  cr_expect(strstr(err.msg, "model runs failed"), "%s", err.msg);
  cr_expect(strstr(err.msg, "most ended in exit-code (1), the first at "
                            "form/i1/2"),
            "%s", err.msg);
  cr_expect_eq(r.model_errors, 1);
  bk_result_close(&r);
  bk_study_free(s);

  s = study_from(study, "0.2");
  spy_t sp2 = {.s = s, .fault_prefix = "form/i1", .fault_index = 2};
  bk_evaluator_t ev2 = {spy_batch, &sp2};
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev2, NULL, &r, &err), 0, "%s", err.msg);
  cr_expect(r.dp.converged && fabs(r.dp.beta - 3) < 1e-6);
  cr_expect_eq(r.model_errors, 1);
  bk_result_close(&r);
  bk_study_free(s);
}

/* An iteration cap that stops a nonlinear search: the result says NOT
 * converged, warns, and still carries the last iterate. */
Test(method_form, non_convergence_is_reported) {
  bk_study_t *s = study_from("variables:\n"
                             "  r: {type: lognormal, mean: 3, cov: 0.3}\n"
                             "  s: {type: gumbel, mean: 1.2, cov: 0.4}\n"
                             "limit_state: r - s\n"
                             "analysis: {method: form, form: {max_iterations: "
                             "2, tolerance: 1e-9}}\n");
  bk_result_t r;
  run(s, &r);
  cr_expect_eq(r.dp.converged, 0);
  cr_expect_eq(r.dp.iterations, 2);
  cr_expect_str_eq(r.stop_reason, "max_iterations reached");
  cr_expect(has_warning(&r, "FORM did NOT converge"));
  cr_expect(isfinite(r.est.beta) && r.est.beta > 0);
  bk_result_close(&r);
  bk_study_free(s);
}

/* g = 10 + a^2 never fails: no failure domain, no estimate (NaN), a
 * warning that says so. */
Test(method_form, a_limit_state_that_never_fails_is_reported) {
  const char *diffs[] = {"forward", "central"};
  for (int i = 0; i < 2; i++) {
    bk_study_t *s =
        study_from("variables:\n"
                   "  a: {type: normal, mean: 0, sd: 1}\n"
                   "  b: {type: normal, mean: 0, sd: 1}\n"
                   "limit_state: 10 + a^2 + 0*b\n"
                   "analysis: {method: form, form: {differences: %s}}\n",
                   diffs[i]);
    bk_result_t r;
    run(s, &r);
    cr_expect_eq(r.dp.converged, 0);
    cr_expect(has_warning(&r, "FORM found no failure domain"), "%s: %s",
              diffs[i], r.nwarnings ? r.warnings[0] : "(none)");
    cr_expect(isnan(r.est.pf) && isnan(r.est.beta));
    cr_expect_eq(r.est.failures, 0);
    bk_result_close(&r);
    bk_study_free(s);
  }
}

/* The path is a pure function of the study and the responses: two runs
 * give the same bits. */
Test(method_form, runs_are_reproducible) {
  bk_study_t *s = study_from("variables:\n"
                             "  r: {type: lognormal, mean: 3, cov: 0.2}\n"
                             "  s: {type: gumbel, mean: 1.2, cov: 0.3}\n"
                             "limit_state: r - s\n"
                             "analysis: {method: form, form: {sorm: true}}\n");
  bk_result_t a, b;
  run(s, &a);
  run(s, &b);
  cr_expect_eq(a.evaluations, b.evaluations);
  cr_expect(memcmp(&a.dp.beta, &b.dp.beta, sizeof(double)) == 0);
  cr_expect(memcmp(&a.dp.pf_sorm, &b.dp.pf_sorm, sizeof(double)) == 0);
  bk_result_close(&a);
  bk_result_close(&b);
  bk_study_free(s);
}

/* g = 5 - b - a^2/2 from the medians with central differences: the
 * search goes straight up the b axis to (0, 5), where the gradient is
 * (0, -1) and the iteration converges, but the curvature there is -1 and
 * 1 + beta kappa = -4 <= 0: a saddle of the distance, not a design point
 * (Der Kiureghian & Dakessian 1998 use this parabola). The restarts on
 * both sides along the tangent axis find the two design points: on the
 * surface |u|^2 = a^2 + b^2 = 10 - 2b + b^2, least at b = 1, a = +-sqrt(8),
 * beta = 3 (closed form). */
Test(method_form, a_saddle_restarts_towards_both_design_points) {
  bk_study_t *s =
      study_from("variables:\n"
                 "  a: {type: normal, mean: 0, sd: 1}\n"
                 "  b: {type: normal, mean: 0, sd: 1}\n"
                 "limit_state: 5 - b - 0.5*a^2\n"
                 "analysis: {method: form, form: {differences: central, "
                 "tolerance: 1e-6}}\n");
  bk_result_t r;
  run(s, &r);
  cr_assert(r.dp.converged);
  cr_expect(fabs(r.dp.beta - 3) < 1e-4, "beta %.8g", r.dp.beta);
  cr_expect(fabs(fabs(r.dp.u[0]) - sqrt(8)) < 1e-3 &&
                fabs(r.dp.u[1] - 1) < 1e-3,
            "u* (%g, %g)", r.dp.u[0], r.dp.u[1]);
  cr_expect_eq(detail(&r, "design points found"), 2);
  cr_expect(has_warning(&r, "FORM found 2 design points"));
  cr_expect(has_note(&r, "1 saddle point of the distance left"), "%s",
            r.nnotes ? r.notes[0] : "(none)");
  bk_result_close(&r);
  /* Without exploration the saddle is what the search reports. */
  bk_study_free(s);
  s = study_from("variables:\n"
                 "  a: {type: normal, mean: 0, sd: 1}\n"
                 "  b: {type: normal, mean: 0, sd: 1}\n"
                 "limit_state: 5 - b - 0.5*a^2\n"
                 "analysis: {method: form, form: {differences: central, "
                 "explore: false}}\n");
  run(s, &r);
  cr_expect(fabs(r.dp.beta - 5) < 1e-6, "beta %.8g", r.dp.beta);
  bk_result_close(&r);
  bk_study_free(s);
}

/* The modified Rastrigin limit state of the coverage problems
 * (tests/ref/gen_problems.py; Echard, Gayton & Lemaire 2011): g = 20 at
 * the medians and many small failure regions. From the medians the search
 * converges on the far side of one (beta < 0 with g(0) > 0), which is no
 * design point: it is never called converged with a negative beta, and
 * the result warns. With central differences the gradient vanishes at the
 * medians (g is even in each u_i), which is said, and the probe's
 * searches go on from elsewhere; failures exist, so the result is not "no
 * failure domain". */
Test(method_form, rastrigin_far_sides_and_a_vanishing_gradient) {
  const char *diffs[] = {"forward", "central"};
  for (int i = 0; i < 2; i++) {
    bk_study_t *s =
        study_from("variables:\n"
                   "  u1: {type: normal, mean: 0, sd: 1}\n"
                   "  u2: {type: normal, mean: 0, sd: 1}\n"
                   "limit_state: 10 - (u1^2 - 5*cos(2*3.141592653589793*u1)) - "
                   "(u2^2 - 5*cos(2*3.141592653589793*u2))\n"
                   "analysis: {method: form, form: {differences: %s}}\n",
                   diffs[i]);
    bk_result_t r;
    run(s, &r);
    cr_expect(!(r.dp.converged && r.dp.beta < 0), "%s: beta %g converged",
              diffs[i], r.dp.beta);
    cr_expect(!(r.est.pf > 0.5), "%s: Pf %g", diffs[i], r.est.pf);
    cr_expect_gt(r.nwarnings, 0, "%s", diffs[i]);
    cr_expect(!has_warning(&r, "no failure domain"), "%s", diffs[i]);
    cr_expect_gt(r.est.failures, 0);
    bk_result_close(&r);
    bk_study_free(s);
  }
  /* Without exploration the vanishing gradient is named as such. */
  bk_study_t *s = study_from(
      "variables:\n"
      "  u1: {type: normal, mean: 0, sd: 1}\n"
      "  u2: {type: normal, mean: 0, sd: 1}\n"
      "limit_state: 10 - (u1^2 - 5*cos(2*3.141592653589793*u1)) - "
      "(u2^2 - 5*cos(2*3.141592653589793*u2))\n"
      "analysis: {method: form, form: {differences: central, explore: "
      "false}}\n");
  bk_result_t r;
  run(s, &r);
  cr_expect(has_warning(&r, "the gradient of g vanishes at the medians"), "%s",
            r.nwarnings ? r.warnings[0] : "(none)");
  cr_expect(!has_warning(&r, "no failure domain"));
  bk_result_close(&r);
  bk_study_free(s);
}

/* g = -1 + (a + b)/sqrt(2) fails at the medians: beta is negative,
 * -1, and Pf = Phi(1) = 0.8413447461 (Abramowitz & Stegun Table 26.1),
 * with a note that says so (Cornell 1969: linear in normals, exact). */
Test(method_form, failing_medians_give_a_negative_beta) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: -1 + (a + b)/sqrt(2)\n"
                             "analysis: {method: form}\n");
  bk_result_t r;
  run(s, &r);
  cr_assert(r.dp.converged);
  cr_expect(fabs(r.dp.beta + 1) < 1e-8, "beta %.10g", r.dp.beta);
  cr_expect(fabs(r.est.pf - 0.8413447461) < 1e-9, "Pf %.10g", r.est.pf);
  cr_expect(has_note(&r, "the medians fail"));
  cr_expect_eq(r.nwarnings, 0, "%s", r.nwarnings ? r.warnings[0] : "");
  bk_result_close(&r);
  bk_study_free(s);
}

/* Above 50 variables the exploration is a probe only, and the report says
 * that further design points cannot be excluded. SORM on 60 variables,
 * g = 3 - u60 + sum_{i<60} k_i u_i^2 with k_i = 0.01 i - 0.15 (59
 * curvatures 2 k_i, from -0.28 to 0.88), against Breitung's product
 * prod (1 + 6 k_i)^-1/2 computed here in closed form; the curvatures
 * (eigenvalues of a 59 x 59 Hessian) come from the tridiagonal QL
 * routine, the details list the smallest and largest. */
Test(method_form, sorm_in_60_variables_and_the_note_of_a_large_study) {
  char text[8192];
  int o = snprintf(text, sizeof text, "variables:\n");
  for (int i = 1; i <= 60; i++)
    o += snprintf(text + o, sizeof text - o,
                  "  u%d: {type: normal, mean: 0, sd: 1}\n", i);
  o += snprintf(text + o, sizeof text - o, "limit_state: 3 - u60");
  double logf = 0;
  for (int i = 1; i < 60; i++) {
    double k = 0.01 * i - 0.15;
    o += snprintf(text + o, sizeof text - o, " + %.2f*u%d^2", k, i);
    logf -= 0.5 * log(1 + 6 * k);
  }
  snprintf(text + o, sizeof text - o,
           "\nanalysis: {method: form, form: {sorm: true, differences: "
           "central, tolerance: 1e-6}}\n");
  bk_study_t *s = study_from("%s", text);
  bk_result_t r;
  run(s, &r);
  cr_assert(r.dp.converged);
  cr_expect(fabs(r.dp.beta - 3) < 1e-6, "beta %.10g", r.dp.beta);
  double want = bk_norm_cdf(-3) * exp(logf);
  cr_expect(fabs(r.dp.pf_sorm / want - 1) < 1e-3, "SORM %.8g want %.8g",
            r.dp.pf_sorm, want);
  cr_expect(fabs(detail(&r, "smallest curvature") + 0.28) < 1e-3);
  cr_expect(fabs(detail(&r, "largest curvature") - 0.88) < 1e-3);
  cr_expect(has_note(&r, "further design points cannot be excluded"));
  bk_result_close(&r);
  bk_study_free(s);
}

/* FORM and SORM with 1000 variables, g = 3.09 sqrt(1000) - sum u_i (the
 * coverage problem `linear 1000 3.09`, Cornell 1969: beta = 3.09 exact,
 * all curvatures 0 so SORM = FORM): the 2 (nu - 1)^2 = 1996002 curvature
 * points go to the evaluator in chunks generated by index, so the whole
 * run stays within a few tens of MB (it once allocated the batch whole and
 * was killed at 24 GB). The peak resident size of this test's process is
 * checked against 512 MB (getrusage, ru_maxrss in kB). Under the address
 * sanitizer, which makes the 2 million evaluations take minutes, the same
 * path runs with 400 variables (318402 curvature points, 61 chunks). */
#if defined(__SANITIZE_ADDRESS__)
#define BIG_NU 400
#else
#define BIG_NU 1000
#endif
Test(method_form, sorm_with_1000_variables_in_flat_memory, .timeout = 0) {
  size_t cap = 1 << 17, o = 0;
  char *text = malloc(cap);
  cr_assert(text);
  o += (size_t)snprintf(text + o, cap - o, "variables:\n");
  for (int i = 1; i <= BIG_NU; i++)
    o += (size_t)snprintf(text + o, cap - o,
                          "  u%d: {type: normal, mean: 0, sd: 1}\n", i);
  o += (size_t)snprintf(text + o, cap - o, "limit_state: \"%.17g",
                        3.09 * sqrt((double)BIG_NU));
  for (int i = 1; i <= BIG_NU; i++)
    o += (size_t)snprintf(text + o, cap - o, " - u%d", i);
  snprintf(text + o, cap - o,
           "\"\nanalysis: {method: form, form: {sorm: true}}\n");
  char path[512];
  snprintf(path, sizeof path, "%s/study.yaml", dir);
  FILE *fp = fopen(path, "w");
  cr_assert(fp);
  fputs(text, fp);
  fclose(fp);
  free(text);
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_study_load(path, &s, &err), 0, "%s", err.msg);
  bk_result_t r;
  run(s, &r);
  cr_assert(r.dp.converged);
  cr_expect(fabs(r.dp.beta - 3.09) < 1e-6, "beta %.10g", r.dp.beta);
  cr_expect(fabs(r.dp.pf_sorm / r.dp.pf_form - 1) < 1e-3, "SORM %g FORM %g",
            r.dp.pf_sorm, r.dp.pf_form);
  /* Search 0 (2 x 1001), the probe (32), the curvature batch. */
  cr_expect_eq(r.evaluations,
               2 * (BIG_NU + 1) + 32 + 2 * (BIG_NU - 1) * (BIG_NU - 1));
  struct rusage ru;
  cr_assert_eq(getrusage(RUSAGE_SELF, &ru), 0);
  cr_expect_lt(ru.ru_maxrss, 512 * 1024, "peak resident %ld kB", ru.ru_maxrss);
  bk_result_close(&r);
  bk_study_free(s);
}

/* Model errors in the exploration: faulted probe points count as safe,
 * and faulted curvature points skip the check, which the note says; the
 * design point stands and every fault is counted (no model section, so
 * no error limit applies). */
Test(method_form, faults_in_the_exploration_are_counted_and_said) {
  bk_study_t *s = study_from("variables:\n"
                             "  a: {type: normal, mean: 0, sd: 1}\n"
                             "  b: {type: normal, mean: 0, sd: 1}\n"
                             "limit_state: 3 - b + 0.1*a^2\n"
                             "analysis: {method: form}\n");
  spy_t sp = {.s = s, .fault_prefix = "form/p", .fault_always = 1};
  bk_evaluator_t ev = {spy_batch, &sp};
  bk_result_t r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, &r, &err), 0, "%s", err.msg);
  cr_expect(r.dp.converged && fabs(r.dp.beta - 3) < 1e-6);
  cr_expect_eq(r.model_errors, 35); /* probe points 1..35 of 36 */
  cr_expect_eq(r.nwarnings, 0, "%s", r.nwarnings ? r.warnings[0] : "");
  bk_result_close(&r);

  spy_t sp2 = {.s = s, .fault_prefix = "form/h", .fault_index = 1};
  bk_evaluator_t ev2 = {spy_batch, &sp2};
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev2, NULL, &r, &err), 0, "%s", err.msg);
  cr_expect(r.dp.converged && fabs(r.dp.beta - 3) < 1e-6);
  cr_expect_eq(r.model_errors, 1);
  cr_expect(has_note(&r, "a curvature check was skipped"), "%s",
            r.nnotes ? r.notes[0] : "(none)");
  bk_result_close(&r);
  bk_study_free(s);
}

/* A fault at the first point of a further search ends that search only:
 * on two failure modes, b > 4 and (a + b)/sqrt(2) > 3, the probe starts
 * search 1 towards the nearer one (keys form/d1/...); when its first
 * point faults, the next search from the probe finds it (Phi(-3) +
 * Phi(-4) as above). */
Test(method_form, a_fault_at_a_search_start_ends_that_search) {
  bk_study_t *s =
      study_from("variables:\n"
                 "  a: {type: normal, mean: 0, sd: 1}\n"
                 "  b: {type: normal, mean: 0, sd: 1}\n"
                 "limit_state: min(4 - b, 10*(3 - (a + b)/sqrt(2)))\n"
                 "analysis: {method: form}\n");
  spy_t sp = {.s = s, .fault_prefix = "form/d1/i0", .fault_index = 0};
  bk_evaluator_t ev = {spy_batch, &sp};
  bk_result_t r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, &r, &err), 0, "%s", err.msg);
  cr_expect_eq(r.model_errors, 1);
  cr_expect(r.dp.converged && fabs(r.dp.beta - 3) < 1e-3, "beta %g", r.dp.beta);
  cr_expect(has_warning(&r, "FORM found 2 design points"));
  bk_result_close(&r);
  bk_study_free(s);
}
