/*
 * Tests of the Nataf transformation: the integral equation for rho0 against
 * closed forms (Liu and Der Kiureghian 1986, Pearson's arcsine law) and
 * against an independent scipy computation (tests/ref/gen_transform.py),
 * the u <-> x mapping, and the validation messages.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>

#include <malloc.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "numerics/special.h"
#include "numerics/transform.h"

/* A distribution from study-file parameters, e.g.
 * dist(BK_DIST_GUMBEL, BK_PARAM_LOCATION, 0.0, BK_PARAM_SCALE, 1.0, -1). */
static bk_dist_t dist(bk_dist_kind_t kind, ...) {
  bk_dist_spec_t spec;
  memset(&spec, 0, sizeof spec);
  va_list ap;
  va_start(ap, kind);
  for (int p; (p = va_arg(ap, int)) >= 0;) {
    spec.has |= 1u << p;
    spec.v[p] = va_arg(ap, double);
  }
  va_end(ap);
  bk_dist_t d;
  char why[256];
  int bad;
  int rc = bk_dist_init(&d, kind, &spec, why, sizeof why, &bad);
  cr_assert_eq(rc, 0, "bk_dist_init(%s): %s", bk_dist_name(kind), why);
  return d;
}

static bk_dist_t normal(double mean, double sd) {
  return dist(BK_DIST_NORMAL, BK_PARAM_MEAN, mean, BK_PARAM_SD, sd, -1);
}

static bk_dist_t lognormal(double mean, double cov) {
  return dist(BK_DIST_LOGNORMAL, BK_PARAM_MEAN, mean, BK_PARAM_COV, cov, -1);
}

static bk_dist_t gumbel(void) {
  return dist(BK_DIST_GUMBEL, BK_PARAM_LOCATION, 0.0, BK_PARAM_SCALE, 1.0, -1);
}

static bk_dist_t uniform01(void) {
  return dist(BK_DIST_UNIFORM, BK_PARAM_LOWER, 0.0, BK_PARAM_UPPER, 1.0, -1);
}

static bk_dist_t exponential(double rate) {
  return dist(BK_DIST_EXPONENTIAL, BK_PARAM_RATE, rate, -1);
}

static bk_dist_t constant(double v) {
  return dist(BK_DIST_CONSTANT, BK_PARAM_VALUE, v, -1);
}

/* The parameters of a fixture line: four numbers per kind, as documented
 * in tests/ref/gen_transform.py. */
static bk_dist_t dist_from_line(const char *kind, const double *p) {
  if (!strcmp(kind, "normal"))
    return normal(p[0], p[1]);
  if (!strcmp(kind, "lognormal"))
    return dist(BK_DIST_LOGNORMAL, BK_PARAM_MEAN, p[0], BK_PARAM_SD, p[1], -1);
  if (!strcmp(kind, "gumbel") || !strcmp(kind, "gumbel-min"))
    return dist(kind[6] ? BK_DIST_GUMBEL_MIN : BK_DIST_GUMBEL,
                BK_PARAM_LOCATION, p[0], BK_PARAM_SCALE, p[1], -1);
  if (!strcmp(kind, "weibull") || !strcmp(kind, "frechet"))
    return dist(kind[0] == 'w' ? BK_DIST_WEIBULL : BK_DIST_FRECHET,
                BK_PARAM_SCALE, p[0], BK_PARAM_SHAPE, p[1], -1);
  if (!strcmp(kind, "gamma"))
    return dist(BK_DIST_GAMMA, BK_PARAM_SHAPE, p[0], BK_PARAM_SCALE, p[1], -1);
  if (!strcmp(kind, "exponential"))
    return exponential(p[0]);
  if (!strcmp(kind, "uniform"))
    return dist(BK_DIST_UNIFORM, BK_PARAM_LOWER, p[0], BK_PARAM_UPPER, p[1],
                -1);
  if (!strcmp(kind, "triangular"))
    return dist(BK_DIST_TRIANGULAR, BK_PARAM_LOWER, p[0], BK_PARAM_MODE, p[1],
                BK_PARAM_UPPER, p[2], -1);
  if (!strcmp(kind, "beta"))
    return dist(BK_DIST_BETA, BK_PARAM_ALPHA, p[0], BK_PARAM_BETA, p[1], -1);
  if (!strcmp(kind, "truncated-normal"))
    return dist(BK_DIST_TRUNCATED_NORMAL, BK_PARAM_MU, p[0], BK_PARAM_SIGMA,
                p[1], BK_PARAM_LOWER, p[2], BK_PARAM_UPPER, p[3], -1);
  cr_assert_fail("unknown kind %s in the fixture", kind);
  return normal(0, 1);
}

/* splitmix64 (Steele, Lea and Flood 2014), uniform on (0, 1). */
static double next_uniform(uint64_t *s) {
  uint64_t z = (*s += 0x9e3779b97f4a7c15u);
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9u;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebu;
  z ^= z >> 31;
  return ((double)(z >> 11) + 0.5) * 0x1p-53;
}

static double lognormal_rho0(double c1, double c2, double rho) {
  return log(1 + rho * c1 * c2) / sqrt(log(1 + c1 * c1) * log(1 + c2 * c2));
}

Test(transform, gauss_hermite_rule_integrates_normal_moments_exactly) {
  /* Golub and Welsch (1969): the n-point Gauss rule is exact for degree
   * <= 2n-1; E[Y^2k] = (2k-1)!! for a standard normal Y. */
  int ns[] = {1, 2, 5, 20, 64, 100};
  for (size_t t = 0; t < sizeof ns / sizeof ns[0]; t++) {
    int n = ns[t];
    double x[256], w[256];
    bk__transform_gauss_hermite(n, x, w);
    double want = 1; /* (2k-1)!! */
    for (int k = 0; 2 * k <= 2 * n - 1 && k <= 30; k++) {
      double got = 0, odd = 0;
      for (int i = 0; i < n; i++) {
        got += w[i] * pow(x[i], 2 * k);
        odd += w[i] * pow(x[i], 2 * k + 1);
      }
      cr_assert(fabs(got - want) <= 1e-12 * want, "n=%d E[Y^%d]=%.17g, want %g",
                n, 2 * k, got, want);
      cr_assert(fabs(odd) <= 1e-12 * want * (1 + fabs(x[n - 1])),
                "n=%d odd moment %g", n, odd);
      want *= 2 * k + 1;
    }
    for (int i = 1; i < n; i++)
      cr_assert(x[i] > x[i - 1] && w[i] > 0, "n=%d nodes ascending", n);
  }
  /* He_5(x) = x^5 - 10 x^3 + 15 x: nodes 0 and +-sqrt(5 +- sqrt(10)). */
  double x[5], w[5];
  bk__transform_gauss_hermite(5, x, w);
  cr_assert(fabs(x[4] - sqrt(5 + sqrt(10))) < 1e-14);
  cr_assert(fabs(x[3] - sqrt(5 - sqrt(10))) < 1e-14);
  cr_assert(fabs(x[2]) < 1e-15);
}

Test(transform, closed_forms_of_liu_der_kiureghian_are_used) {
  /* Liu and Der Kiureghian (1986), exact entries: normal-normal rho0 = rho;
   * normal-lognormal rho0 = rho cov / sqrt(ln(1 + cov^2)); lognormal pair
   * rho0 = ln(1 + rho c1 c2) / sqrt(ln(1 + c1^2) ln(1 + c2^2)). */
  bk_dist_t n = normal(3, 2), l1 = lognormal(10, 0.3), l2 = lognormal(2, 0.8);
  cr_assert_eq(bk_transform_nataf_rho0(&n, &n, 0.37), 0.37);
  double c = 0.3, want = 0.6 * c / sqrt(log(1 + c * c));
  cr_assert(fabs(bk_transform_nataf_rho0(&n, &l1, 0.6) - want) < 1e-14);
  cr_assert(fabs(bk_transform_nataf_rho0(&l1, &n, 0.6) - want) < 1e-14);
  cr_assert(fabs(bk_transform_nataf_rho0(&l1, &l2, -0.5) -
                 lognormal_rho0(0.3, 0.8, -0.5)) < 1e-14);
}

Test(transform, numeric_solution_reproduces_the_exact_cases) {
  /* Liu and Der Kiureghian (1986) exact cases, solved by the quadrature and
   * Brent's method instead of the closed form: agreement to 1e-7. */
  double covs[] = {0.1, 0.5, 1.0};
  double rhos[] = {-0.6, -0.2, 0.3, 0.8, 0.95};
  bk_dist_t n = normal(0, 1);
  for (size_t i = 0; i < 3; i++) {
    bk_dist_t li = lognormal(5, covs[i]);
    for (size_t r = 0; r < 5; r++) {
      double rho = rhos[r], c = covs[i];
      double want = rho * c / sqrt(log(1 + c * c));
      double got = bk__transform_nataf_rho0_numeric(&n, &li, rho);
      if (fabs(want) < 1) {
        cr_assert(fabs(got - want) < 1e-7, "N-LN cov %g rho %g: %.12g vs %.12g",
                  c, rho, got, want);
      } else {
        cr_assert(isnan(got), "N-LN cov %g rho %g unreachable", c, rho);
      }
      for (size_t j = 0; j < 3; j++) {
        bk_dist_t lj = lognormal(1, covs[j]);
        double d = covs[j];
        double w2 = lognormal_rho0(c, d, rho);
        double g2 = bk__transform_nataf_rho0_numeric(&li, &lj, rho);
        if (1 + rho * c * d > 0 && fabs(w2) < 1)
          cr_assert(fabs(g2 - w2) < 1e-7, "LN-LN %g %g rho %g: %.12g vs %.12g",
                    c, d, rho, g2, w2);
        else
          cr_assert(isnan(g2), "LN-LN %g %g rho %g unreachable", c, d, rho);
      }
    }
  }
  cr_assert(fabs(bk__transform_nataf_rho0_numeric(&n, &n, 0.7) - 0.7) < 1e-12);
}

Test(transform, uniform_pair_follows_the_arcsine_law) {
  /* Pearson (1907): for a bivariate normal with correlation rho0 the
   * correlation of Phi(U_a), Phi(U_b) is (6/pi) asin(rho0/2), so
   * rho0 = 2 sin(pi rho / 6). */
  bk_dist_t u = uniform01();
  bk_dist_t v =
      dist(BK_DIST_UNIFORM, BK_PARAM_LOWER, -3.0, BK_PARAM_UPPER, 7.0, -1);
  for (double rho = -0.9; rho < 0.95; rho += 0.3) {
    double want = 2 * sin(M_PI * rho / 6);
    cr_assert(fabs(bk_transform_nataf_rho0(&u, &v, rho) - want) < 1e-10, "rho %g", rho);
  }
}

Test(transform, normal_with_uniform_scales_by_sqrt_pi_over_3) {
  /* E[U Phi(U)] = 1 / (2 sqrt(pi)) and sd(Phi(U)) = 1 / sqrt(12), so
   * rho = rho0 sqrt(3 / pi): F = sqrt(pi / 3) = 1.0233, the constant of
   * Liu and Der Kiureghian (1986) table 1 (1.023). */
  bk_dist_t n = normal(1, 2), u = uniform01();
  cr_assert(fabs(bk_transform_nataf_rho0(&n, &u, 0.5) - 0.5 * sqrt(M_PI / 3)) < 1e-12);
  cr_assert(fabs(bk__transform_nataf_rho0_numeric(&u, &n, -0.5) + 0.5 * sqrt(M_PI / 3)) <
            1e-10);
  double lo, hi;
  bk_transform_nataf_range(&n, &u, &lo, &hi);
  cr_assert(fabs(hi - sqrt(3 / M_PI)) < 1e-12 && fabs(lo + hi) < 1e-12);
}

Test(transform, exponential_pair_cannot_go_below_one_minus_pi2_over_6) {
  /* The countermonotone correlation of two exponentials is 1 - pi^2/6
   * (Moran 1967, from memory); the comonotone one is 1. */
  bk_dist_t e1 = exponential(1), e2 = exponential(3);
  double lo, hi;
  bk_transform_nataf_range(&e1, &e2, &lo, &hi);
  cr_assert(fabs(lo - (1 - M_PI * M_PI / 6)) < 1e-9, "lo %.15g", lo);
  cr_assert(fabs(hi - 1) < 1e-12, "hi %.15g", hi);
  cr_assert(isnan(bk_transform_nataf_rho0(&e1, &e2, -0.65)));
  cr_assert(!isnan(bk_transform_nataf_rho0(&e1, &e2, -0.64)));
}

Test(transform, rho0_matches_the_scipy_reference_table) {
  /* tests/fixtures/ref_transform.txt, from tests/ref/gen_transform.py:
   * numpy Gauss-Hermite (160 x 160) or composite Gauss-Legendre over scipy
   * quantiles and scipy.optimize.brentq. */
  const char *dir = getenv("BRINK_FIXTURES");
  cr_assert(dir, "BRINK_FIXTURES is not set");
  char path[1024];
  snprintf(path, sizeof path, "%s/ref_transform.txt", dir);
  FILE *f = fopen(path, "r");
  cr_assert(f, "cannot open %s", path);
  char tag[16], ka[32], kb[32];
  double a[4], b[4], v1, v2;
  int lines = 0;
  while (fscanf(f, "%15s %31s %lf %lf %lf %lf %31s %lf %lf %lf %lf %lf %lf",
                tag, ka, &a[0], &a[1], &a[2], &a[3], kb, &b[0], &b[1], &b[2],
                &b[3], &v1, &v2) == 13) {
    bk_dist_t da = dist_from_line(ka, a), db = dist_from_line(kb, b);
    lines++;
    if (!strcmp(tag, "range")) {
      double lo, hi;
      bk_transform_nataf_range(&da, &db, &lo, &hi);
      cr_assert(fabs(lo - v1) < 1e-7 && fabs(hi - v2) < 1e-7,
                "range %s %s: [%.12g, %.12g], scipy [%.12g, %.12g]", ka, kb, lo,
                hi, v1, v2);
      continue;
    }
    double r0 = bk_transform_nataf_rho0(&da, &db, v1);
    cr_assert(fabs(r0 - v2) < 1e-7, "%s %s rho %g: rho0 %.12g, scipy %.12g", ka,
              kb, v1, r0, v2);
    double back = bk__transform_nataf_rho(&da, &db, v2);
    cr_assert(fabs(back - v1) < 1e-7, "%s %s rho0 %.12g: rho %.12g, want %g",
              ka, kb, v2, back, v1);
    cr_assert(fabs(bk__transform_nataf_rho(&db, &da, v2) - back) < 1e-9,
              "%s %s symmetric", ka, kb);
  }
  fclose(f);
  cr_assert_geq(lines, 30, "read %d lines from %s", lines, path);
}

Test(transform, liu_der_kiureghian_approximations_agree_to_one_percent) {
  /* Liu and Der Kiureghian (1986) tables 2-4, F = rho0 / rho (coefficients
   * from memory; the paper quotes maximum errors near 1%). */
  bk_dist_t n = normal(0, 1), u = uniform01(), e = exponential(1), g = gumbel();
  bk_dist_t gmin =
      dist(BK_DIST_GUMBEL_MIN, BK_PARAM_LOCATION, 0.0, BK_PARAM_SCALE, 1.0, -1);
  struct {
    const bk_dist_t *a, *b;
    double c0, c1, c2;
  } t[] = {
      {&n, &e, 1.107, 0, 0},          {&n, &g, 1.031, 0, 0},
      {&n, &gmin, 1.031, 0, 0},       {&u, &u, 1.047, 0, -0.047},
      {&u, &e, 1.133, 0, 0.029},      {&u, &g, 1.055, 0, 0.015},
      {&e, &e, 1.229, -0.367, 0.153}, {&e, &g, 1.142, -0.154, 0.031},
      {&g, &g, 1.064, -0.069, 0.005},
  };
  for (size_t i = 0; i < sizeof t / sizeof t[0]; i++) {
    double lo, hi;
    bk_transform_nataf_range(t[i].a, t[i].b, &lo, &hi);
    for (int k = -9; k <= 9; k++) {
      double rho = k / 10.0;
      if (k == 0 || rho <= lo || rho >= hi)
        continue;
      double F = bk_transform_nataf_rho0(t[i].a, t[i].b, rho) / rho;
      double approx = t[i].c0 + t[i].c1 * rho + t[i].c2 * rho * rho;
      cr_assert(fabs(approx / F - 1) < 0.01, "%s-%s rho %g: F %.5f, table %.5f",
                bk_dist_name(t[i].a->kind), bk_dist_name(t[i].b->kind), rho, F,
                approx);
    }
  }
}

/* Variables: 0 lognormal, 1 constant, 2 gumbel, 3 normal (independent),
 * 4 exponential, 5 constant. Correlated: 0, 2, 4. */
static bk_transform_t *mixed(bk_dist_t *d, double r02, double r04, double r24) {
  d[0] = lognormal(2, 0.5);
  d[1] = constant(7.5);
  d[2] = gumbel();
  d[3] = normal(-1, 3);
  d[4] = exponential(2);
  d[5] = constant(-2);
  bk_corr_t c[] = {{0, 2, r02}, {4, 0, r04}, {2, 4, r24}};
  bk_transform_t *t;
  char why[256];
  int bad = 99;
  int rc = bk_transform_new(&t, 6, d, 3, c, why, sizeof why, &bad);
  cr_assert_eq(rc, 0, "bk_transform_new: %s", why);
  cr_assert_eq(bad, -1);
  return t;
}

Test(transform, constants_take_no_u_coordinate) {
  bk_dist_t d[6];
  bk_transform_t *t = mixed(d, 0.5, -0.3, 0.4);
  cr_assert_eq(bk_transform_nu(t), 4);
  double u[4] = {0, 0, 0, 0}, x[6];
  bk_transform_u_to_x(t, u, x);
  cr_assert_eq(x[1], 7.5);
  cr_assert_eq(x[5], -2);
  cr_assert(fabs(x[3] - -1) < 1e-15, "the median of the normal");
  /* u[2] belongs to variable 3 (u skips the constant 1) */
  u[2] = 1;
  bk_transform_u_to_x(t, u, x);
  cr_assert(fabs(x[3] - 2) < 1e-12, "x3 = -1 + 3 u2, got %g", x[3]);
  bk_transform_free(t);
}

Test(transform, x_to_u_undoes_u_to_x) {
  bk_dist_t d[6];
  bk_transform_t *t = mixed(d, 0.5, -0.3, 0.4);
  uint64_t seed = 20240611;
  for (int s = 0; s < 200; s++) {
    double u[4], x[6], back[4];
    for (int i = 0; i < 4; i++)
      u[i] = 4 * (2 * next_uniform(&seed) - 1);
    bk_transform_u_to_x(t, u, x);
    bk_transform_x_to_u(t, x, back);
    for (int i = 0; i < 4; i++)
      cr_assert(fabs(back[i] - u[i]) < 1e-8, "sample %d u%d: %.15g -> %.15g", s,
                i, u[i], back[i]);
  }
  bk_transform_free(t);
}

Test(transform, correlated_normals_use_the_cholesky_factor) {
  /* x = mean + sd L u with L = [[1, 0], [rho, sqrt(1 - rho^2)]]. */
  bk_dist_t d[2] = {normal(1, 2), normal(-3, 0.5)};
  bk_corr_t c = {1, 0, 0.6};
  bk_transform_t *t;
  cr_assert_eq(bk_transform_new(&t, 2, d, 1, &c, NULL, 0, NULL), 0);
  double u[2] = {0.7, -1.3}, x[2];
  bk_transform_u_to_x(t, u, x);
  cr_assert(fabs(x[0] - (1 + 2 * 0.7)) < 1e-14);
  cr_assert(fabs(x[1] - (-3 + 0.5 * (0.6 * 0.7 + 0.8 * -1.3))) < 1e-14);
  cr_assert_eq(bk_transform_rho0(t, 0, 1), 0.6);
  bk_transform_free(t);
}

Test(transform, rho0_is_reported_for_each_given_pair) {
  bk_dist_t d[6];
  bk_transform_t *t = mixed(d, 0.5, -0.3, 0.4);
  cr_assert_eq(bk_transform_rho0(t, 0, 2), bk_transform_nataf_rho0(&d[0], &d[2], 0.5));
  cr_assert_eq(bk_transform_rho0(t, 2, 0), bk_transform_rho0(t, 0, 2));
  cr_assert_eq(bk_transform_rho0(t, 0, 4), bk_transform_nataf_rho0(&d[4], &d[0], -0.3));
  cr_assert_eq(bk_transform_rho0(t, 0, 3), 0);
  cr_assert_eq(bk_transform_rho0(t, 3, 3), 1);
  cr_assert(isnan(bk_transform_rho0(t, 0, 6)));
  bk_transform_free(t);
}

/* Pearson correlation of columns a and b of n rows of width w. */
static double sample_corr(const double *x, size_t n, size_t w, size_t a,
                          size_t b) {
  double ma = 0, mb = 0, saa = 0, sbb = 0, sab = 0;
  for (size_t i = 0; i < n; i++) {
    ma += x[i * w + a];
    mb += x[i * w + b];
  }
  ma /= n;
  mb /= n;
  for (size_t i = 0; i < n; i++) {
    double da = x[i * w + a] - ma, db = x[i * w + b] - mb;
    saa += da * da;
    sbb += db * db;
    sab += da * db;
  }
  return sab / sqrt(saa * sbb);
}

Test(transform, sample_correlation_approaches_the_target) {
  /* 20000 draws from u = Phi^-1(splitmix64 uniforms); the sample
   * correlation must lie within 4 standard errors of the target, the error
   * estimated from 20 batches of 1000 (batch means). */
  enum { N = 20000, B = 20 };
  bk_dist_t d[6];
  bk_transform_t *t = mixed(d, 0.5, -0.3, 0.4);
  double *x = malloc(sizeof(double) * N * 6);
  cr_assert(x);
  uint64_t seed = 12345;
  for (size_t i = 0; i < N; i++) {
    double u[4];
    for (int j = 0; j < 4; j++)
      u[j] = bk_norm_icdf(next_uniform(&seed));
    bk_transform_u_to_x(t, u, x + i * 6);
  }
  struct {
    size_t a, b;
    double rho;
  } pairs[] = {{0, 2, 0.5}, {0, 4, -0.3}, {2, 4, 0.4}};
  for (size_t p = 0; p < 3; p++) {
    double r = sample_corr(x, N, 6, pairs[p].a, pairs[p].b);
    double sum = 0, sumsq = 0;
    for (size_t k = 0; k < B; k++) {
      double rk =
          sample_corr(x + k * (N / B) * 6, N / B, 6, pairs[p].a, pairs[p].b);
      sum += rk;
      sumsq += rk * rk;
    }
    double var = (sumsq - sum * sum / B) / (B - 1);
    double se = sqrt(var / B);
    cr_assert(se < 0.02, "standard error %g", se);
    cr_assert(fabs(r - pairs[p].rho) < 4 * se,
              "pair %zu-%zu: sample %.4f, target %.4f, se %.4f", pairs[p].a,
              pairs[p].b, r, pairs[p].rho, se);
    /* Without the adjustment the test would notice. */
    if (p == 1) {
      double r0 = bk_transform_rho0(t, pairs[p].a, pairs[p].b);
      cr_assert(fabs(r0 - pairs[p].rho) > 4 * se, "rho0 %g", r0);
    }
  }
  free(x);
  bk_transform_free(t);
}

static int try_new(size_t n, const bk_dist_t *d, size_t nc, const bk_corr_t *c,
                   char *why, size_t cap, int *bad) {
  bk_transform_t *t = (bk_transform_t *)1;
  int rc = bk_transform_new(&t, n, d, nc, c, why, cap, bad);
  if (rc == 0)
    bk_transform_free(t);
  else
    cr_assert_null(t);
  return rc;
}

Test(transform, inconsistent_matrix_is_not_positive_definite) {
  bk_dist_t d[3] = {normal(0, 1), normal(0, 1), normal(0, 1)};
  bk_corr_t c[] = {{0, 1, 0.9}, {0, 2, 0.9}, {1, 2, -0.9}};
  char why[256];
  int bad = 5;
  cr_assert_eq(try_new(3, d, 3, c, why, sizeof why, &bad), BK_EINVAL);
  cr_assert_str_eq(
      why, "the correlation matrix is not positive definite (leading minor 3)");
  cr_assert_eq(bad, -1);
}

Test(transform, adjustment_can_break_positive_definiteness) {
  /* With lognormals of cov 1, rho0 = ln(1 + rho) / ln 2: (0.6, 0.6, -0.27)
   * is positive definite, its adjusted (0.678, 0.678, -0.454) is not. */
  bk_dist_t d[3] = {lognormal(1, 1), lognormal(1, 1), lognormal(1, 1)};
  bk_corr_t c[] = {{0, 1, 0.6}, {0, 2, 0.6}, {1, 2, -0.27}};
  char why[256];
  int bad = 5;
  cr_assert_eq(try_new(3, d, 3, c, why, sizeof why, &bad), BK_EINVAL);
  cr_assert_str_eq(why, "the correlation matrix is not positive definite "
                        "after the Nataf adjustment (leading minor 3)");
  cr_assert_eq(bad, -1);
}

Test(transform, unreachable_correlation_names_the_limit) {
  /* Largest gumbel-uniform correlation 0.93608 (scipy, ref_transform.txt);
   * smallest exponential pair 1 - pi^2/6 = -0.64493. */
  bk_dist_t d[4] = {normal(0, 1), gumbel(), uniform01(), exponential(1)};
  d[0] = exponential(2);
  bk_corr_t c[] = {{1, 3, 0.2}, {1, 2, 0.99}};
  char why[256];
  int bad = 5;
  cr_assert_eq(try_new(4, d, 2, c, why, sizeof why, &bad), BK_EINVAL);
  cr_assert_str_eq(why, "0.99 cannot be reached by a gumbel and a uniform "
                        "marginal (largest reachable about 0.936)");
  cr_assert_eq(bad, 1);
  bk_corr_t e[] = {{3, 0, -0.7}};
  cr_assert_eq(try_new(4, d, 1, e, why, sizeof why, &bad), BK_EINVAL);
  cr_assert_str_eq(why, "-0.7 cannot be reached by an exponential and an "
                        "exponential marginal (smallest reachable about "
                        "-0.644)");
  cr_assert_eq(bad, 0);
  cr_assert(isnan(bk_transform_nataf_rho0(&d[1], &d[2], 0.99)));
}

Test(transform, invalid_pairs_are_reported_with_their_index) {
  bk_dist_t d[3] = {normal(0, 1), constant(4), gumbel()};
  char why[256];
  int bad;
  struct {
    bk_corr_t c[2];
    int bad;
    const char *msg;
  } cases[] = {
      {{{0, 2, 0.1}, {0, 3, 0.2}},
       1,
       "variable index 3 is out of range (3 variables)"},
      {{{2, 2, 0.1}, {0, 2, 0.2}},
       0,
       "a variable cannot be correlated with itself"},
      {{{0, 2, 0.1}, {0, 2, 1.0}}, 1, "1 must lie strictly between -1 and 1"},
      {{{0, 2, 0.1}, {1, 2, 0.2}},
       1,
       "this pair includes a constant, which cannot be correlated"},
      {{{0, 2, 0.1}, {2, 0, 0.2}}, 1, "this pair is given more than once"},
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    bad = 7;
    cr_assert_eq(try_new(3, d, 2, cases[i].c, why, sizeof why, &bad), BK_EINVAL,
                 "case %zu", i);
    cr_assert_str_eq(why, cases[i].msg, "case %zu", i);
    cr_assert_eq(bad, cases[i].bad, "case %zu", i);
  }
  bk_dist_t fr =
      dist(BK_DIST_FRECHET, BK_PARAM_SCALE, 1.0, BK_PARAM_SHAPE, 1.5, -1);
  bk_dist_t d2[2] = {normal(0, 1), fr};
  bk_corr_t c2 = {0, 1, 0.3};
  cr_assert_eq(try_new(2, d2, 1, &c2, why, sizeof why, &bad), BK_EINVAL);
  cr_assert_str_eq(why, "this pair includes a frechet marginal with infinite "
                        "variance, whose correlation is undefined");
}

Test(transform, no_variables_and_no_correlations) {
  bk_transform_t *t;
  cr_assert_eq(bk_transform_new(&t, 0, NULL, 0, NULL, NULL, 0, NULL), 0);
  cr_assert_eq(bk_transform_nu(t), 0);
  bk_transform_u_to_x(t, NULL, NULL);
  bk_transform_free(t);
  bk_transform_free(NULL);
}

Test(transform, many_independent_variables_need_no_dense_matrix) {
  /* 10000 variables, one correlated pair: the memory is O(n + k^2), far
   * below the 800 MB a dense n x n factor would take. (mallinfo2 does not
   * see AddressSanitizer's allocator, so that check is skipped there.) */
  enum { N = 10000 };
  bk_dist_t *d = malloc(sizeof *d * N);
  cr_assert(d);
  for (size_t i = 0; i < N; i++)
    d[i] = i % 3 ? normal(i, 1) : gumbel();
  bk_corr_t c = {17, 9000, 0.5};
  size_t before = mallinfo2().uordblks;
  bk_transform_t *t;
  cr_assert_eq(bk_transform_new(&t, N, d, 1, &c, NULL, 0, NULL), 0);
  size_t used = mallinfo2().uordblks - before;
#if !defined(__SANITIZE_ADDRESS__)
  cr_assert_lt(used, 4 * sizeof *d * N, "used %zu bytes", used);
#else
  (void)used;
#endif
  cr_assert_eq(bk_transform_nu(t), N);
  double *u = calloc(N, sizeof *u), *x = malloc(sizeof *x * N);
  cr_assert(u && x);
  u[9000] = 1;
  bk_transform_u_to_x(t, u, x);
  cr_assert(fabs(x[5] - 5) < 1e-12);
  double rho0 = bk_transform_rho0(t, 17, 9000);
  cr_assert(fabs(x[9000] - bk_dist_from_u(&d[9000], sqrt(1 - rho0 * rho0))) <
            1e-12);
  free(u);
  free(x);
  free(d);
  bk_transform_free(t);
}

Test(transform, allocation_failures_return_enomem) {
  bk_dist_t d[6];
  d[0] = lognormal(2, 0.5);
  d[1] = constant(7.5);
  d[2] = gumbel();
  d[3] = normal(-1, 3);
  d[4] = exponential(2);
  d[5] = constant(-2);
  bk_corr_t c[] = {{0, 2, 0.5}, {4, 0, -0.3}, {2, 4, 0.4}};
  int rc = -1;
  long fail_at;
  for (fail_at = 1; fail_at < 100 && rc != 0; fail_at++) {
    bk_transform_t *t = (bk_transform_t *)1;
    char why[64];
    bk_alloc_fail_at(fail_at);
    rc = bk_transform_new(&t, 6, d, 3, c, why, sizeof why, NULL);
    bk_alloc_fail_at(0);
    if (rc == 0) {
      bk_transform_free(t);
    } else {
      cr_assert_eq(rc, BK_ENOMEM, "allocation %ld: %s", fail_at, why);
      cr_assert_null(t);
      cr_assert_str_eq(why, "out of memory");
    }
  }
  cr_assert_eq(rc, 0);
  cr_assert_gt(fail_at, 3, "several allocations were exercised");
}

Test(transform, identical_pairs_share_one_solution) {
  /* Pairs with equal marginals and rho are solved once; the reused rho0
   * must equal a fresh solve (in either order of the marginals). */
  bk_dist_t d[4] = {gumbel(), gumbel(), uniform01(), gumbel()};
  bk_corr_t c[] = {{0, 2, 0.5}, {2, 1, 0.5}, {3, 2, 0.4}};
  bk_transform_t *t;
  cr_assert_eq(bk_transform_new(&t, 4, d, 3, c, NULL, 0, NULL), 0);
  double want = bk_transform_nataf_rho0(&d[0], &d[2], 0.5);
  cr_assert_eq(bk_transform_rho0(t, 0, 2), want);
  cr_assert(fabs(bk_transform_rho0(t, 1, 2) - want) < 1e-12);
  cr_assert_eq(bk_transform_rho0(t, 2, 3), bk_transform_nataf_rho0(&d[3], &d[2], 0.4));
  bk_transform_free(t);
}
