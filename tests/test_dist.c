/*
 * Tests of the distributions: pdf, cdf, sf, inverse, moments, native
 * parameters and the u-space maps of every kind against scipy.stats (table
 * tests/fixtures/ref_dist.txt from tests/ref/gen_dist.py), the moment
 * formulas of REFERENCES.md, round trips, tails, and the validation
 * messages word for word.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "numerics/dist.h"
#include "base/error.h"
#include "numerics/special.h"

#define BIT(p) (1u << (p))

static double rel_err(double got, double want) {
  if (got == want)
    return 0.0;
  if (isnan(got) || isnan(want))
    return INFINITY;
  return fabs(got - want) / fmax(fabs(want), DBL_MIN);
}

/* A spec from name/value pairs, ending with NULL. */
static bk_dist_spec_t spec_of(const char *name, ...) {
  bk_dist_spec_t s;
  memset(&s, 0, sizeof s);
  va_list ap;
  va_start(ap, name);
  for (const char *n = name; n != NULL; n = va_arg(ap, const char *)) {
    int p = bk_dist_param_from_name(n);
    cr_assert_geq(p, 0, "unknown parameter %s", n);
    s.has |= BIT(p);
    s.v[p] = va_arg(ap, double);
  }
  va_end(ap);
  return s;
}

static bk_dist_t make(bk_dist_kind_t kind, bk_dist_spec_t s) {
  bk_dist_t d;
  char why[256];
  int rc = bk_dist_init(&d, kind, &s, why, sizeof why, NULL);
  cr_assert_eq(rc, 0, "%s: %s", bk_dist_name(kind), why);
  return d;
}

/* ---------------------------------------------------------------------- */
/* The scipy table                                                         */
/* ---------------------------------------------------------------------- */

/* [lib] scipy.stats norm, lognorm, gumbel_r, gumbel_l, weibull_min,
 * invweibull, gamma, expon, uniform, triang, beta, truncnorm: pdf, cdf, sf,
 * ppf, from_u (ppf of Phi(u), Newton-polished on scipy's cdf/sf), mean, sd,
 * median and the native parameters. 1e-12 relative covers the shape solved
 * numerically for Weibull/Frechet by moments (bisection here, brentq in
 * the generator) and the tails; most lines agree to a few ulp. */
Test(dist, matches_scipy_reference_table) {
  const char *dir = getenv("BRINK_FIXTURES");
  cr_assert_not_null(dir, "BRINK_FIXTURES is not set");
  char path[1024];
  snprintf(path, sizeof path, "%s/ref_dist.txt", dir);
  FILE *f = fopen(path, "r");
  cr_assert_not_null(f, "cannot open %s", path);
  char line[1024];
  int lineno = 0, n = 0;
  int seen[BK_DIST__COUNT] = {0};
  while (fgets(line, sizeof line, f)) {
    lineno++;
    char *save = NULL;
    char *tok = strtok_r(line, " \n", &save);
    if (tok == NULL)
      continue;
    int kind = bk_dist_kind_from_name(tok);
    cr_assert_geq(kind, 0, "%s:%d: unknown kind %s", path, lineno, tok);
    int np = atoi(strtok_r(NULL, " \n", &save));
    bk_dist_spec_t s;
    memset(&s, 0, sizeof s);
    for (int i = 0; i < np; i++) {
      int p = bk_dist_param_from_name(strtok_r(NULL, " \n", &save));
      cr_assert_geq(p, 0, "%s:%d: unknown parameter", path, lineno);
      s.has |= BIT(p);
      s.v[p] = strtod(strtok_r(NULL, " \n", &save), NULL);
    }
    const char *op = strtok_r(NULL, " \n", &save);
    double x = strtod(strtok_r(NULL, " \n", &save), NULL);
    double want = strtod(strtok_r(NULL, " \n", &save), NULL);
    bk_dist_t d;
    char why[256];
    int rc = bk_dist_init(&d, kind, &s, why, sizeof why, NULL);
    cr_assert_eq(rc, 0, "%s:%d: %s", path, lineno, why);
    double got;
    if (strcmp(op, "pdf") == 0)
      got = bk_dist_pdf(&d, x);
    else if (strcmp(op, "cdf") == 0)
      got = bk_dist_cdf(&d, x);
    else if (strcmp(op, "sf") == 0)
      got = bk_dist_sf(&d, x);
    else if (strcmp(op, "ppf") == 0)
      got = bk_dist_icdf(&d, x);
    else if (strcmp(op, "from_u") == 0)
      got = bk_dist_from_u(&d, x);
    else if (strcmp(op, "mean") == 0)
      got = d.mean;
    else if (strcmp(op, "sd") == 0)
      got = d.sd;
    else if (strcmp(op, "median") == 0)
      got = bk_dist_median(&d);
    else if (op[0] == 'p' && op[1] >= '0' && op[1] <= '5')
      got = d.p[op[1] - '0'];
    else
      cr_assert_fail("%s:%d: unknown op %s", path, lineno, op);
    double tol = 1e-12;
    /* A native parameter that is 0 is compared absolutely. */
    int ok = want == 0.0 ? fabs(got) <= 1e-300 : rel_err(got, want) <= tol;
    cr_expect(ok, "%s:%d: %s %s(%.17g) = %.17g, scipy %.17g (rel %.2g)", path,
              lineno, tok, op, x, got, want, rel_err(got, want));
    seen[kind]++;
    n++;
  }
  fclose(f);
  cr_expect_gt(n, 1500);
  for (int k = 0; k < BK_DIST__COUNT; k++)
    if (k != BK_DIST_CONSTANT)
      cr_expect_gt(seen[k], 20, "few lines for %s", bk_dist_name(k));
}

/* ---------------------------------------------------------------------- */
/* Moment formulas                                                         */
/* ---------------------------------------------------------------------- */

/* [practice] REFERENCES.md: Gumbel scale = sd sqrt(6)/pi, location = mean
 * - 0.5772156649 scale (gumbel-min: + 0.5772156649 scale). */
Test(dist, gumbel_moments_follow_references) {
  bk_dist_t d = make(BK_DIST_GUMBEL, spec_of("mean", 1.1, "cov", 0.3, NULL));
  double scale = 0.33 * sqrt(6.0) / M_PI;
  cr_expect(rel_err(d.p[1], scale) < 1e-15);
  cr_expect(rel_err(d.p[0], 1.1 - 0.5772156649 * scale) < 1e-10);
  cr_expect(rel_err(d.mean, 1.1) < 1e-15);
  cr_expect(rel_err(d.sd, 0.33) < 1e-15);
  d = make(BK_DIST_GUMBEL_MIN, spec_of("mean", 30.0, "sd", 3.0, NULL));
  scale = 3.0 * sqrt(6.0) / M_PI;
  cr_expect(rel_err(d.p[0], 30.0 + 0.5772156649 * scale) < 1e-10);
}

/* [practice] REFERENCES.md: lognormal sigma_ln^2 = ln(1 + cov^2), mu_ln =
 * ln(mean) - sigma_ln^2/2. */
Test(dist, lognormal_moments_follow_references) {
  bk_dist_t d =
      make(BK_DIST_LOGNORMAL, spec_of("mean", 380.0, "cov", 0.07, NULL));
  double s2 = log(1.0 + 0.07 * 0.07);
  cr_expect(rel_err(d.p[1], sqrt(s2)) < 1e-14);
  cr_expect(rel_err(d.p[0], log(380.0) - s2 / 2.0) < 1e-15);
  cr_expect(rel_err(bk_dist_median(&d), exp(d.p[0])) < 1e-15);
  d = make(BK_DIST_LOGNORMAL, spec_of("mu", 1.0, "sigma", 0.5, NULL));
  cr_expect(rel_err(d.mean, exp(1.0 + 0.125)) < 1e-15);
  cr_expect(rel_err(d.sd, d.mean * sqrt(exp(0.25) - 1.0)) < 1e-14);
}

/* [practice] REFERENCES.md: Weibull mean = scale Gamma(1 + 1/k), variance
 * = scale^2 (Gamma(1 + 2/k) - Gamma(1 + 1/k)^2). */
Test(dist, weibull_moments_follow_references) {
  double ks[] = {0.5, 1.0, 2.5, 10.0, 80.0};
  for (size_t i = 0; i < sizeof ks / sizeof ks[0]; i++) {
    double k = ks[i];
    bk_dist_t d = make(BK_DIST_WEIBULL, spec_of("shape", k, "scale", 3.0,
                                                "location", 1.0, NULL));
    double g1 = tgamma(1 + 1 / k), g2 = tgamma(1 + 2 / k);
    cr_expect(rel_err(d.mean, 1.0 + 3.0 * g1) < 1e-14, "k %g", k);
    /* The formula itself cancels for large k; 1e-11 at k = 80. */
    cr_expect(rel_err(d.sd, 3.0 * sqrt(g2 - g1 * g1)) < 1e-11, "k %g", k);
  }
}

/* Every kind given by moments reproduces them. */
Test(dist, moment_forms_reproduce_mean_and_sd) {
  static const struct {
    bk_dist_kind_t kind;
    double mean, sd;
  } cases[] = {
      {BK_DIST_NORMAL, -3.0, 0.5},   {BK_DIST_LOGNORMAL, 2.0, 3.0},
      {BK_DIST_GUMBEL, 1.0, 0.2},    {BK_DIST_GUMBEL_MIN, -1.0, 0.2},
      {BK_DIST_WEIBULL, 10.0, 1e-3}, {BK_DIST_WEIBULL, 10.0, 2.0},
      {BK_DIST_WEIBULL, 1.0, 30.0},  {BK_DIST_FRECHET, 50.0, 12.5},
      {BK_DIST_FRECHET, 5.0, 20.0},  {BK_DIST_FRECHET, 5.0, 1e-4},
      {BK_DIST_GAMMA, 5.0, 2.5},     {BK_DIST_EXPONENTIAL, 10.0, 3.0},
      {BK_DIST_UNIFORM, 5.0, 1.0},   {BK_DIST_BETA, 0.3, 0.1},
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    bk_dist_t d = make(cases[i].kind,
                       spec_of("mean", cases[i].mean, "sd", cases[i].sd, NULL));
    const char *name = bk_dist_name(cases[i].kind);
    cr_expect(rel_err(d.mean, cases[i].mean) < 1e-13, "%s mean %.17g", name,
              d.mean);
    cr_expect(rel_err(d.sd, cases[i].sd) < 1e-10, "%s sd %.17g", name, d.sd);
    /* cov gives the same distribution as sd = cov |mean|. */
    bk_dist_t e =
        make(cases[i].kind, spec_of("mean", cases[i].mean, "cov",
                                    cases[i].sd / fabs(cases[i].mean), NULL));
    for (int j = 0; j < 6; j++)
      cr_expect(rel_err(e.p[j], d.p[j]) < 1e-13 || e.p[j] == d.p[j], "%s p%d",
                name, j);
  }
  /* Exponential by mean alone, and with a location. */
  bk_dist_t d = make(BK_DIST_EXPONENTIAL, spec_of("mean", 4.0, NULL));
  cr_expect(rel_err(d.p[0], 0.25) < 1e-16 && d.p[1] == 0.0);
  d = make(BK_DIST_EXPONENTIAL, spec_of("mean", 4.0, "location", 1.0, NULL));
  cr_expect(rel_err(d.p[0], 1.0 / 3.0) < 1e-16 && d.p[1] == 1.0);
  /* Beta by moments on [10, 20]. */
  d = make(BK_DIST_BETA, spec_of("mean", 15.0, "sd", 2.0, "lower", 10.0,
                                 "upper", 20.0, NULL));
  cr_expect(rel_err(d.mean, 15.0) < 1e-15 && rel_err(d.sd, 2.0) < 1e-14);
}

/* Moments that do not exist are infinite; a constant has sd 0. */
Test(dist, missing_moments_are_infinite) {
  bk_dist_t d =
      make(BK_DIST_FRECHET, spec_of("shape", 1.5, "scale", 1.0, NULL));
  cr_expect(isfinite(d.mean) && isinf(d.sd));
  d = make(BK_DIST_FRECHET, spec_of("shape", 0.8, "scale", 1.0, NULL));
  cr_expect(isinf(d.mean) && isinf(d.sd));
  d = make(BK_DIST_CONSTANT, spec_of("value", 6.0, NULL));
  cr_expect(d.mean == 6.0 && d.sd == 0.0);
}

/* ---------------------------------------------------------------------- */
/* Properties                                                              */
/* ---------------------------------------------------------------------- */

/* One distribution of every continuous kind, with parameters that make
 * the tails lopsided. */
static int all_kinds(bk_dist_t out[BK_DIST__COUNT]) {
  int n = 0;
  out[n++] = make(BK_DIST_NORMAL, spec_of("mean", 2.0, "sd", 0.06, NULL));
  out[n++] = make(BK_DIST_LOGNORMAL, spec_of("mean", 380.0, "cov", 0.3, NULL));
  out[n++] = make(BK_DIST_GUMBEL, spec_of("mean", 1.1, "cov", 0.3, NULL));
  out[n++] = make(BK_DIST_GUMBEL_MIN, spec_of("mean", 30.0, "sd", 3.0, NULL));
  out[n++] = make(BK_DIST_WEIBULL, spec_of("mean", 10.0, "cov", 0.4, NULL));
  out[n++] = make(BK_DIST_FRECHET, spec_of("mean", 50.0, "cov", 0.25, NULL));
  out[n++] = make(BK_DIST_GAMMA, spec_of("shape", 0.7, "rate", 2.0, NULL));
  out[n++] =
      make(BK_DIST_EXPONENTIAL, spec_of("rate", 0.5, "location", 1.0, NULL));
  out[n++] = make(BK_DIST_UNIFORM, spec_of("lower", -1.0, "upper", 3.0, NULL));
  out[n++] = make(BK_DIST_TRIANGULAR,
                  spec_of("lower", 1.0, "mode", 2.0, "upper", 5.0, NULL));
  out[n++] = make(BK_DIST_BETA, spec_of("alpha", 2.0, "beta", 0.6, "lower",
                                        10.0, "upper", 20.0, NULL));
  out[n++] = make(BK_DIST_TRUNCATED_NORMAL,
                  spec_of("mu", 10.0, "sigma", 2.0, "lower", 12.0, NULL));
  out[n++] =
      make(BK_DIST_TRUNCATED_NORMAL,
           spec_of("mu", 0.0, "sigma", 1.0, "lower", -1.0, "upper", 2.0, NULL));
  return n;
}

/* How much a probability moves when x moves by one ulp, relative: the
 * floor for any check of F(x) (or S(x)) against a target, since x itself
 * is rounded. Near a finite bound, where the distance to it has few
 * significant bits, this is large. */
static double ulp_shift(double got, double next) {
  return fabs(next - got) / fmax(fabs(got), DBL_MIN);
}

/* The inverse cdf undoes the cdf (and the survival function) across the
 * whole range, tails included, up to the rounding of x. */
Test(dist, icdf_undoes_cdf_for_every_kind) {
  bk_dist_t d[BK_DIST__COUNT + 2];
  int n = all_kinds(d);
  double ps[] = {1e-12, 1e-8, 1e-4, 0.01, 0.2, 0.5, 0.8, 0.99};
  for (int i = 0; i < n; i++)
    for (size_t j = 0; j < sizeof ps / sizeof ps[0]; j++) {
      const bk_dist_t *di = &d[i];
      const char *name = bk_dist_name(di->kind);
      double p = ps[j];
      double x = bk_dist_icdf(di, p);
      double f = bk_dist_cdf(di, x);
      double tol =
          1e-13 + 4.0 * ulp_shift(f, bk_dist_cdf(di, nextafter(x, 1e300)));
      cr_expect(rel_err(f, p) <= tol, "%s p %g: x %.17g F %.17g", name, p, x,
                f);
      /* The upper tail through from_u and the survival function. */
      double u = -bk_norm_icdf(p);
      x = bk_dist_from_u(di, u);
      double sf = bk_dist_sf(di, x);
      tol = 1e-13 + 4.0 * ulp_shift(sf, bk_dist_sf(di, nextafter(x, -1e300)));
      cr_expect(rel_err(sf, p) <= tol, "%s sf at u %g: x %.17g", name, u, x);
      /* And the lower tail through from_u. */
      x = bk_dist_from_u(di, -u);
      f = bk_dist_cdf(di, x);
      tol = 1e-13 + 4.0 * ulp_shift(f, bk_dist_cdf(di, nextafter(x, 1e300)));
      cr_expect(rel_err(f, p) <= tol, "%s cdf at u %g: x %.17g", name, -u, x);
    }
}

/* to_u is the inverse of from_u (up to the rounding of x), and from_u
 * agrees with icdf(Phi(u)). */
Test(dist, to_u_inverts_from_u) {
  bk_dist_t d[BK_DIST__COUNT + 2];
  int n = all_kinds(d);
  for (int i = 0; i < n; i++) {
    const bk_dist_t *di = &d[i];
    const char *name = bk_dist_name(di->kind);
    for (double u = -7.9; u < 8.0; u += 0.37) {
      double x = bk_dist_from_u(di, u);
      double back = bk_dist_to_u(di, x);
      if (isinf(back)) {
        /* x rounded onto a finite bound of the support. */
        cr_expect(bk_dist_cdf(di, x) == 0.0 || bk_dist_sf(di, x) == 0.0,
                  "%s u %g: x %.17g", name, u, x);
        continue;
      }
      double step =
          fabs(bk_dist_to_u(di, nextafter(x, u > 0 ? -1e300 : 1e300)) - back);
      cr_expect(fabs(back - u) <= 1e-13 * fmax(1.0, fabs(u)) + 4.0 * step,
                "%s u %g: x %.17g back %.17g", name, u, x, back);
      if (fabs(u) < 3.0) {
        double xi = bk_dist_icdf(di, bk_norm_cdf(u));
        cr_expect(rel_err(x, xi) < 1e-12 || fabs(x - xi) < 1e-13,
                  "%s u %g: from_u %.17g icdf %.17g", name, u, x, xi);
      }
    }
  }
}

/* Far tails in closed form: the normal and lognormal map u directly; for
 * the Gumbel variable at u = 20, -log F = -log1p(-Phi(-20)) = Phi(-20) to
 * double precision, so x = location - scale log(Phi(-20)) with Phi(-20) =
 * 2.7536241186062337e-89 ([lib] GSL gsl_cdf_ugaussian_Q(20)). */
Test(dist, from_u_keeps_far_tails) {
  bk_dist_t d = make(BK_DIST_NORMAL, spec_of("mean", 2.0, "sd", 0.5, NULL));
  cr_expect_eq(bk_dist_from_u(&d, 30.0), 2.0 + 0.5 * 30.0);
  cr_expect_eq(bk_dist_to_u(&d, 17.0), 30.0);
  d = make(BK_DIST_LOGNORMAL, spec_of("mu", 1.0, "sigma", 0.5, NULL));
  cr_expect(rel_err(bk_dist_from_u(&d, 30.0), exp(16.0)) < 1e-15);
  cr_expect(rel_err(bk_dist_to_u(&d, exp(16.0)), 30.0) < 1e-15);
  d = make(BK_DIST_GUMBEL, spec_of("location", 2.0, "scale", 0.5, NULL));
  double q = 2.7536241186062337e-89;
  cr_expect(rel_err(bk_dist_from_u(&d, 20.0), 2.0 - 0.5 * log(q)) < 1e-15);
  cr_expect(rel_err(bk_dist_to_u(&d, 2.0 - 0.5 * log(q)), 20.0) < 1e-13);
  cr_expect(rel_err(bk_dist_sf(&d, 2.0 - 0.5 * log(q)), q) < 1e-13);
  /* Beyond the double range of Phi the extreme-value kinds stay finite. */
  cr_expect(isfinite(bk_dist_from_u(&d, -40.0)));
  cr_expect(isfinite(bk_dist_from_u(&d, 40.0)));
  d = make(BK_DIST_WEIBULL, spec_of("shape", 2.0, "scale", 1.0, NULL));
  /* Weibull lower tail: F = 1 - exp(-x^2) ~ x^2, so x = sqrt(Phi(-20)). */
  cr_expect(rel_err(bk_dist_from_u(&d, -20.0), sqrt(q)) < 1e-14);
}

Test(dist, constant_is_a_step) {
  bk_dist_t d = make(BK_DIST_CONSTANT, spec_of("value", 6.0, NULL));
  cr_expect_eq(bk_dist_cdf(&d, 5.9), 0.0);
  cr_expect_eq(bk_dist_cdf(&d, 6.0), 1.0);
  cr_expect_eq(bk_dist_icdf(&d, 0.3), 6.0);
  cr_expect_eq(bk_dist_median(&d), 6.0);
  cr_expect_eq(bk_dist_from_u(&d, -3.0), 6.0);
  cr_expect_eq(bk_dist_to_u(&d, 6.0), 0.0);
}

Test(dist, support_edges) {
  bk_dist_t d =
      make(BK_DIST_UNIFORM, spec_of("lower", 1.0, "upper", 3.0, NULL));
  cr_expect_eq(bk_dist_cdf(&d, 0.0), 0.0);
  cr_expect_eq(bk_dist_cdf(&d, 4.0), 1.0);
  cr_expect_eq(bk_dist_pdf(&d, 4.0), 0.0);
  cr_expect_eq(bk_dist_icdf(&d, 0.0), 1.0);
  cr_expect_eq(bk_dist_icdf(&d, 1.0), 3.0);
  cr_expect(isnan(bk_dist_icdf(&d, 1.5)));
  cr_expect(isnan(bk_dist_cdf(&d, NAN)));
  d = make(BK_DIST_LOGNORMAL, spec_of("mu", 0.0, "sigma", 1.0, NULL));
  cr_expect_eq(bk_dist_cdf(&d, -1.0), 0.0);
  cr_expect_eq(bk_dist_pdf(&d, 0.0), 0.0);
  cr_expect_eq(bk_dist_icdf(&d, 0.0), 0.0);
  cr_expect(isinf(bk_dist_icdf(&d, 1.0)));
  d = make(BK_DIST_TRUNCATED_NORMAL,
           spec_of("mu", 0.0, "sigma", 1.0, "lower", 3.0, "upper", 4.0, NULL));
  cr_expect_eq(bk_dist_cdf(&d, 2.9), 0.0);
  cr_expect_eq(bk_dist_sf(&d, 4.1), 0.0);
  cr_expect(bk_dist_from_u(&d, -9.0) >= 3.0);
  cr_expect(bk_dist_from_u(&d, 9.0) <= 4.0);
}

/* ---------------------------------------------------------------------- */
/* Names                                                                   */
/* ---------------------------------------------------------------------- */

Test(dist, names_round_trip) {
  for (int k = 0; k < BK_DIST__COUNT; k++)
    cr_expect_eq(bk_dist_kind_from_name(bk_dist_name(k)), k);
  for (int p = 0; p < BK_PARAM__COUNT; p++)
    cr_expect_eq(bk_dist_param_from_name(bk_dist_param_name(p)), p);
  cr_expect_str_eq(bk_dist_name(BK_DIST_GUMBEL_MIN), "gumbel-min");
  cr_expect_str_eq(bk_dist_name(BK_DIST_TRUNCATED_NORMAL), "truncated-normal");
  cr_expect_eq(bk_dist_kind_from_name("Normal"), -1);
  cr_expect_eq(bk_dist_kind_from_name("gauss"), -1);
  cr_expect_eq(bk_dist_param_from_name("stdev"), -1);
  cr_expect_eq(bk_dist_param_from_name(NULL), -1);
}

/* ---------------------------------------------------------------------- */
/* Validation messages, word for word                                      */
/* ---------------------------------------------------------------------- */

static void expect_error(bk_dist_kind_t kind, bk_dist_spec_t s, int code,
                         int bad, const char *msg) {
  bk_dist_t d;
  char why[256] = "unchanged";
  int bad_param = 99;
  int rc = bk_dist_init(&d, kind, &s, why, sizeof why, &bad_param);
  cr_expect_eq(rc, code, "%s: rc %d for \"%s\"", bk_dist_name(kind), rc, msg);
  cr_expect_str_eq(why, msg);
  cr_expect_eq(bad_param, bad, "bad_param %d for \"%s\"", bad_param, msg);
}

Test(dist, messages_name_parameter_value_and_valid_range) {
  expect_error(BK_DIST_NORMAL, spec_of("mean", 1.0, "cov", -0.1, NULL),
               BK_EINVAL, BK_PARAM_COV, "cov must be > 0 (got -0.1)");
  expect_error(BK_DIST_NORMAL, spec_of("mean", 1.0, "sd", 0.0, NULL), BK_EINVAL,
               BK_PARAM_SD, "sd must be > 0 (got 0)");
  expect_error(BK_DIST_UNIFORM, spec_of("lower", 5.0, "upper", 2.0, NULL),
               BK_EINVAL, BK_PARAM_UPPER, "lower must be < upper (got 5 >= 2)");
  expect_error(BK_DIST_LOGNORMAL, spec_of("mean", -3.0, "cov", 0.1, NULL),
               BK_EINVAL, BK_PARAM_MEAN,
               "mean must be > 0 for lognormal (got -3)");
  expect_error(BK_DIST_TRIANGULAR,
               spec_of("lower", 1.0, "mode", 7.0, "upper", 5.0, NULL),
               BK_EINVAL, BK_PARAM_MODE,
               "mode must be within [lower, upper] (got 7 outside [1, 5])");
  expect_error(BK_DIST_BETA, spec_of("mean", 0.5, "sd", 0.6, NULL), BK_EINVAL,
               BK_PARAM_SD,
               "sd must be < 0.5 for beta with mean 0.5 on [0, 1] (got 0.6)");
  expect_error(BK_DIST_WEIBULL,
               spec_of("mean", 2.0, "sd", 1.0, "location", 3.0, NULL),
               BK_EINVAL, BK_PARAM_MEAN,
               "mean must be > location for weibull (got 2 <= 3)");
  expect_error(BK_DIST_NORMAL, spec_of("mean", NAN, "sd", 1.0, NULL), BK_EINVAL,
               BK_PARAM_MEAN, "mean must be a finite number (got nan)");
  expect_error(BK_DIST_NORMAL, spec_of("mean", 0.0, "cov", 0.1, NULL),
               BK_EINVAL, BK_PARAM_COV,
               "cov needs a nonzero mean (got mean 0); give sd instead");
  expect_error(BK_DIST_WEIBULL, spec_of("mean", 1.0, "cov", 1e30, NULL),
               BK_ERANGE, BK_PARAM_COV,
               "sd/(mean - location) must be < 3.01e+29 for weibull (got "
               "1e+30; the shape would be below 0.01)");
  expect_error(BK_DIST_TRUNCATED_NORMAL,
               spec_of("mu", 0.0, "sigma", 1.0, "lower", 40.0, NULL), BK_ERANGE,
               BK_PARAM_LOWER,
               "[lower, upper] = [40, inf] has probability below 1e-300 "
               "under the parent normal (mu 0, sigma 1)");
}

Test(dist, messages_for_wrong_combinations) {
  expect_error(BK_DIST_NORMAL, spec_of("mean", 1.0, NULL), BK_EINVAL, -1,
               "give sd or cov together with mean");
  expect_error(BK_DIST_NORMAL, spec_of("sd", 1.0, NULL), BK_EINVAL, -1,
               "give mean together with sd");
  expect_error(BK_DIST_NORMAL,
               spec_of("mean", 1.0, "sd", 1.0, "cov", 0.1, NULL), BK_EINVAL,
               BK_PARAM_COV, "give either sd or cov, not both");
  expect_error(BK_DIST_NORMAL, spec_of("mean", 1.0, "mode", 1.0, NULL),
               BK_EINVAL, BK_PARAM_MODE,
               "unknown parameter 'mode' for normal; expected mean with sd "
               "or cov");
  expect_error(BK_DIST_GUMBEL, spec_of("mean", 1.0, "shape", 2.0, NULL),
               BK_EINVAL, BK_PARAM_SHAPE,
               "unknown parameter 'shape' for gumbel; expected mean with sd "
               "or cov, or location with scale");
  expect_error(BK_DIST_LOGNORMAL,
               spec_of("mean", 1.0, "sd", 1.0, "mu", 0.0, NULL), BK_EINVAL,
               BK_PARAM_MU,
               "give either mean with sd or cov, or mu with sigma, not both");
  expect_error(BK_DIST_LOGNORMAL, spec_of("mu", 0.0, NULL), BK_EINVAL, -1,
               "give sigma together with mu");
  expect_error(BK_DIST_GAMMA,
               spec_of("shape", 2.0, "scale", 1.0, "rate", 1.0, NULL),
               BK_EINVAL, BK_PARAM_RATE, "give either scale or rate, not both");
  expect_error(BK_DIST_GAMMA, spec_of("shape", 2.0, NULL), BK_EINVAL, -1,
               "give scale or rate together with shape");
  expect_error(BK_DIST_EXPONENTIAL,
               spec_of("mean", 10.0, "sd", 3.0, "location", 1.0, NULL),
               BK_EINVAL, BK_PARAM_LOCATION,
               "location does not go with mean and sd for exponential (the "
               "location is mean - sd); expected mean (sd, cov or location "
               "optional), or rate (location optional)");
  expect_error(BK_DIST_TRIANGULAR, spec_of("lower", 1.0, "upper", 5.0, NULL),
               BK_EINVAL, -1,
               "give lower, mode and upper for triangular (mode is missing)");
  expect_error(BK_DIST_TRUNCATED_NORMAL,
               spec_of("mean", 0.0, "sd", 1.0, "lower", 0.0, NULL), BK_EINVAL,
               BK_PARAM_MEAN,
               "truncated-normal takes mu and sigma of the parent normal, not "
               "mean (the truncated variable has other moments); expected mu "
               "with sigma of the parent normal, and lower and/or upper");
  expect_error(BK_DIST_TRUNCATED_NORMAL, spec_of("mu", 0.0, "sigma", 1.0, NULL),
               BK_EINVAL, -1,
               "give lower and/or upper for truncated-normal (without bounds "
               "use normal)");
  expect_error(BK_DIST_CONSTANT, spec_of(NULL), BK_EINVAL, -1,
               "missing parameters for constant; expected value");
  expect_error(BK_DIST_BETA, spec_of("lower", 0.0, "upper", 2.0, NULL),
               BK_EINVAL, -1,
               "missing parameters for beta; expected alpha with beta, or "
               "mean with sd or cov (lower and upper optional, default 0 and "
               "1)");
}

/* The message buffer may be short or absent. */
Test(dist, message_buffer_is_optional) {
  bk_dist_spec_t s = spec_of("mean", 1.0, "cov", -0.1, NULL);
  bk_dist_t d;
  cr_expect_eq(bk_dist_init(&d, BK_DIST_NORMAL, &s, NULL, 0, NULL), BK_EINVAL);
  char why[8];
  cr_expect_eq(bk_dist_init(&d, BK_DIST_NORMAL, &s, why, sizeof why, NULL),
               BK_EINVAL);
  cr_expect_str_eq(why, "cov mus");
  s = spec_of("mean", 1.0, "sd", 2.0, NULL);
  cr_expect_eq(bk_dist_init(&d, BK_DIST_NORMAL, &s, why, sizeof why, NULL), 0);
  cr_expect_str_eq(why, "");
}
