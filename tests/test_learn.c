/*
 * Tests of the active-learning numerics: learning functions against scipy
 * (the EFF against the integral of its definition), weighted k-means and
 * the Kriging believer against scikit-learn, and the metamodel-based
 * importance sampling estimator: unbiased, with intervals that cover the
 * exact Pf at the stated rate over many seeds.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "numerics/gp.h"
#include "numerics/learn.h"
#include "numerics/rng.h"
#include "numerics/special.h"

static FILE *open_fixture(const char *name) {
  const char *dir = getenv("BRINK_FIXTURES");
  cr_assert(dir, "BRINK_FIXTURES must be set");
  char path[1024];
  snprintf(path, sizeof path, "%s/%s", dir, name);
  FILE *f = fopen(path, "r");
  cr_assert(f, "cannot open %s", path);
  return f;
}

static void assert_rel(double got, double want, double tol, const char *what) {
  double d = fabs(got - want);
  cr_assert(d <= tol * fabs(want) || d < 1e-300, "%s: got %.17g, want %.17g",
            what, got, want);
}

/* EFF, pi, the margin probability and alpha_loo against scipy
 * (tests/ref/gen_learn.py, table tests/fixtures/ref_learn.txt; the EFF
 * values are scipy.integrate.quad of E[max(eps - |G|, 0)], so they check
 * the closed form of Bichon et al. 2008 independently). */
Test(learn, functions_match_scipy) {
  FILE *f = open_fixture("ref_learn.txt");
  char kind[16];
  int n = 0;
  while (fscanf(f, "%15s", kind) == 1) {
    char what[96];
    if (!strcmp(kind, "eff")) {
      double mu, s, want;
      cr_assert(fscanf(f, "%lf %lf %lf", &mu, &s, &want) == 3);
      snprintf(what, sizeof what, "eff(%g, %g)", mu, s);
      assert_rel(bk_learn_eff(mu, s), want, 1e-10, what); /* scipy quad */
    } else if (!strcmp(kind, "pi")) {
      double mu, s, want;
      cr_assert(fscanf(f, "%lf %lf %lf", &mu, &s, &want) == 3);
      snprintf(what, sizeof what, "pi(%g, %g)", mu, s);
      assert_rel(bk_learn_pi(mu, s), want, 1e-13, what); /* norm.cdf */
    } else if (!strcmp(kind, "margin")) {
      double mu, s, k, want;
      cr_assert(fscanf(f, "%lf %lf %lf %lf", &mu, &s, &k, &want) == 4);
      snprintf(what, sizeof what, "margin(%g, %g)", mu, s);
      assert_rel(bk_learn_margin(mu, s, k), want, 1e-12, what); /* norm.cdf */
    } else {
      cr_assert_str_eq(kind, "alpha_loo");
      int m;
      cr_assert(fscanf(f, "%d", &m) == 1 && m <= 32);
      double y[32], mean[32], sd[32], want;
      for (int i = 0; i < m; i++)
        cr_assert(fscanf(f, "%lf %lf %lf", &y[i], &mean[i], &sd[i]) == 3);
      cr_assert(fscanf(f, "%lf", &want) == 1);
      assert_rel(bk_learn_alpha_loo(y, mean, sd, (size_t)m), want, 1e-13,
                 "alpha_loo"); /* numpy / norm.cdf */
    }
    n++;
  }
  fclose(f);
  cr_assert_eq(n, 22);
}

/* Limits with s = 0 and U's definition (Echard et al. 2011). */
Test(learn, zero_variance_limits) {
  cr_assert_eq(bk_learn_u(-1.5, 0.5), 3);
  cr_assert(isinf(bk_learn_u(1, 0)));
  cr_assert_eq(bk_learn_u(0, 0), 0);
  cr_assert_eq(bk_learn_eff(1, 0), 0);
  cr_assert_eq(bk_learn_pi(-1, 0), 1);
  cr_assert_eq(bk_learn_pi(0, 0), 1);
  cr_assert_eq(bk_learn_pi(1e-300, 0), 0);
  cr_assert_eq(bk_learn_margin(0, 0, 2), 1);
  cr_assert_eq(bk_learn_margin(1, 0, 2), 0);
  /* far from the threshold EFF vanishes and never goes negative */
  for (double t = 4; t < 40; t += 0.5)
    cr_assert(bk_learn_eff(t, 1) >= 0 && bk_learn_eff(t, 1) < 1e-2);
}

/* ---------------------------------------------------------------------- */
/* Batch selection against scikit-learn                                    */
/* ---------------------------------------------------------------------- */

typedef struct {
  char kind[16], name[32];
  size_t m, d, q, n;
  double sigma2, nugget, lengths[8];
  double *x, *w, *centroids, *train, *ytrain;
  size_t *label, pick[16];
} lcase_t;

static lcase_t lcases[8];
static int nlcases;

/* Runs tests/ref/learn_sklearn.py and parses its records. */
static void load_sklearn(void) {
  const char *root = getenv("BRINK_SOURCE_ROOT");
  cr_assert(root, "BRINK_SOURCE_ROOT must be set");
  char cmd[1200];
  snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s/tests/ref/learn_sklearn.py",
           root);
  FILE *f = popen(cmd, "r");
  cr_assert(f, "cannot run %s", cmd);
  static char line[65536];
  lcase_t *c = NULL;
  size_t nx = 0, nc = 0, ntr = 0;
  nlcases = 0;
  while (fgets(line, sizeof line, f)) {
    char tag[16];
    int used = 0;
    if (sscanf(line, "%15s %n", tag, &used) != 1)
      continue;
    char *s = line + used, *end;
    if (!strcmp(tag, "kmeans") || !strcmp(tag, "believer")) {
      c = &lcases[nlcases++];
      memset(c, 0, sizeof *c);
      strcpy(c->kind, tag);
      if (!strcmp(tag, "kmeans")) {
        cr_assert(sscanf(s, "%31s %zu %zu %zu", c->name, &c->m, &c->d, &c->q) ==
                  4);
      } else {
        int k;
        cr_assert(sscanf(s, "%31s %zu %zu %zu %zu %lf %lf %n", c->name, &c->n,
                         &c->d, &c->m, &c->q, &c->sigma2, &c->nugget, &k) == 7);
        s += k;
        for (size_t j = 0; j < c->d; j++)
          c->lengths[j] = strtod(s, &s);
      }
      c->x = calloc(c->m * c->d, sizeof(double));
      c->w = calloc(c->m, sizeof(double));
      c->centroids = calloc(c->q * c->d, sizeof(double));
      c->label = calloc(c->m, sizeof(size_t));
      c->train = calloc((c->n + 1) * c->d, sizeof(double));
      c->ytrain = calloc(c->n + 1, sizeof(double));
      nx = nc = ntr = 0;
    } else if (!strcmp(tag, "x") && !strcmp(c->kind, "kmeans")) {
      for (size_t j = 0; j < c->d; j++)
        c->x[nx * c->d + j] = strtod(s, &s);
      c->w[nx++] = strtod(s, &end);
      cr_assert(end != s);
    } else if (!strcmp(tag, "x")) {
      for (size_t j = 0; j < c->d; j++)
        c->train[ntr * c->d + j] = strtod(s, &s);
      c->ytrain[ntr++] = strtod(s, &end);
      cr_assert(end != s);
    } else if (!strcmp(tag, "c")) {
      for (size_t j = 0; j < c->d; j++)
        c->x[nx * c->d + j] = strtod(s, &s);
      nx++;
    } else if (!strcmp(tag, "centroid")) {
      for (size_t j = 0; j < c->d; j++)
        c->centroids[nc * c->d + j] = strtod(s, &s);
      nc++;
    } else if (!strcmp(tag, "label")) {
      for (size_t i = 0; i < c->m; i++)
        c->label[i] = strtoul(s, &s, 10);
    } else if (!strcmp(tag, "pick")) {
      for (size_t k = 0; k < c->q; k++)
        c->pick[k] = strtoul(s, &s, 10);
    } else if (!strcmp(tag, "end")) {
      cr_assert_eq(nx, c->m, "%s", c->name);
    }
  }
  cr_assert(pclose(f) == 0, "%s failed (python3-sklearn installed?)", cmd);
  cr_assert_eq(nlcases, 3);
}

/* Weighted Lloyd iterations from the documented start against
 * sklearn.cluster.KMeans(algorithm='lloyd', n_init=1, tol=0) with
 * sample_weight from the same start: the same labels, centroids to
 * rounding, and the same picked candidates. */
Test(learn, kmeans_matches_sklearn) {
  load_sklearn();
  int checked = 0;
  for (int k = 0; k < nlcases; k++) {
    lcase_t *c = &lcases[k];
    if (strcmp(c->kind, "kmeans"))
      continue;
    double *cent = malloc(c->q * c->d * sizeof(double));
    size_t pick[16], *label = malloc(c->m * sizeof(size_t));
    int it =
        bk_learn_kmeans(c->x, c->w, c->m, c->d, c->q, 1000, cent, pick, label);
    cr_assert_gt(it, 0, "%s: %d", c->name, it);
    for (size_t i = 0; i < c->m; i++)
      cr_assert_eq(label[i], c->label[i], "%s: label %zu", c->name, i);
    for (size_t i = 0; i < c->q * c->d; i++) /* sklearn */
      cr_assert(fabs(cent[i] - c->centroids[i]) < 1e-12, "%s: %.17g %.17g",
                c->name, cent[i], c->centroids[i]);
    for (size_t i = 0; i < c->q; i++)
      cr_assert_eq(pick[i], c->pick[i], "%s: pick %zu", c->name, i);
    free(cent);
    free(label);
    checked++;
  }
  cr_assert_eq(checked, 2);
}

/* The Kriging believer's picks against the same procedure on sklearn's
 * GaussianProcessRegressor (simple Kriging, fixed hyperparameters). */
Test(learn, believer_matches_sklearn) {
  load_sklearn();
  lcase_t *c = &lcases[2];
  cr_assert_str_eq(c->kind, "believer");
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.trend = BK_GP_TREND_ZERO;
  o.lengths = c->lengths;
  o.sigma2 = c->sigma2;
  o.nugget = c->nugget;
  bk_gp_t *gp;
  cr_assert_eq(bk_gp_new(&gp, c->train, c->ytrain, c->n, c->d, &o), 0);
  size_t pick[16];
  cr_assert_eq(
      bk_learn_believer(gp, c->train, c->ytrain, c->x, c->m, c->q, pick), 0);
  for (size_t k = 0; k < c->q; k++)
    cr_assert_eq(pick[k], c->pick[k], "pick %zu: %zu, sklearn %zu", k, pick[k],
                 c->pick[k]);
  bk_gp_free(gp);
}

Test(learn, kmeans_rejects_bad_input) {
  double x[8] = {0, 0, 1, 1, 0, 0, 2, 2}, w[4] = {1, 1, 1, 0}, c[8];
  size_t pick[4];
  cr_assert_eq(bk_learn_kmeans(x, w, 4, 2, 0, 10, c, pick, NULL), BK_EINVAL);
  /* three weighted candidates but only two distinct positions */
  cr_assert_eq(bk_learn_kmeans(x, w, 4, 2, 3, 10, c, pick, NULL), BK_EINVAL);
  cr_assert_gt(bk_learn_kmeans(x, w, 4, 2, 2, 10, c, pick, NULL), 0);
  cr_assert(pick[0] != pick[1] && pick[0] != 3 && pick[1] != 3);
  w[1] = NAN;
  cr_assert_eq(bk_learn_kmeans(x, w, 4, 2, 2, 10, c, pick, NULL), BK_EINVAL);
}

/* ---------------------------------------------------------------------- */
/* Metamodel-based importance sampling                                     */
/* ---------------------------------------------------------------------- */

/* The problem: g(u) = beta - u1 (Pf = Phi(-beta), exact) and a surrogate
 * with mean beta' - u1 and constant sd s, so pi(u) = Phi((u1 - beta')/s)
 * and Pf_eps = E[pi] = Phi(-beta'/sqrt(1 + s^2)) (closed form). Samples of
 * h = pi phi / Pf_eps are exact: with Z standard normal, pi(u) = P[s Z <=
 * u1 - beta'], so under h the variable W = (u1 - s Z)/sqrt(1 + s^2) is a
 * standard normal truncated to W >= b = beta'/sqrt(1 + s^2), and u1 =
 * rho W + sqrt(1 - rho^2) V with rho = 1/sqrt(1 + s^2), V standard normal.
 * Returns the estimate for one seed. */
static void metais_once(uint64_t seed, double beta, double beta_s, double s,
                        size_t neps, size_t ncorr, bk_learn_est_t *pf,
                        double *pi, int *fail) {
  for (size_t i = 0; i < neps; i++) {
    double u = bk_norm_icdf(bk_rng_u01(seed, 1, i, 0));
    pi[i] = bk_learn_pi(beta_s - u, s);
  }
  bk_learn_est_t e, a;
  bk_learn_pf_eps(pi, neps, &e);
  double b = beta_s / sqrt(1 + s * s), rho = 1 / sqrt(1 + s * s);
  double tail = bk_norm_sf(b);
  for (size_t i = 0; i < ncorr; i++) {
    double w = -bk_norm_icdf(bk_rng_u01(seed, 2, i, 0) * tail);
    double v = bk_norm_icdf(bk_rng_u01(seed, 2, i, 1));
    double u = rho * w + sqrt(1 - rho * rho) * v;
    fail[i] = beta - u <= 0;
    pi[i] = bk_learn_pi(beta_s - u, s);
  }
  cr_assert_eq(bk_learn_alpha(fail, pi, ncorr, &a), 0);
  bk_learn_metais(&e, &a, pf);
}

/* Over 400 seeds the estimate is unbiased (mean within 3 standard errors of
 * Phi(-3)) and the interval Pf (1 +- 1.96 cov) covers it 90-98% of the
 * time (REFERENCES.md rule), for a good and a poor surrogate: the
 * correction by real runs keeps the estimate honest either way. */
Test(learn, metais_is_unbiased_and_covers, .timeout = 120) {
  const double beta = 3, pf_exact = bk_norm_cdf(-3.0);
  const double surrogates[2][2] = {{3.1, 0.3}, {3.8, 0.8}};
  const size_t neps = 20000, ncorr = 300;
  const int nseeds = 400;
  double *pi = malloc(neps * sizeof(double));
  int *fail = malloc(ncorr * sizeof(int));
  for (int k = 0; k < 2; k++) {
    double bs = surrogates[k][0], s = surrogates[k][1];
    int covered = 0;
    double sum = 0, sum2 = 0, mean_cov = 0;
    for (int seed = 0; seed < nseeds; seed++) {
      bk_learn_est_t pf;
      metais_once(100 + (uint64_t)seed, beta, bs, s, neps, ncorr, &pf, pi,
                  fail);
      covered += fabs(pf.mean - pf_exact) <= 1.96 * pf.cov * pf.mean;
      sum += pf.mean;
      sum2 += pf.mean * pf.mean;
      mean_cov += pf.cov / nseeds;
    }
    double m = sum / nseeds;
    double se = sqrt((sum2 / nseeds - m * m) / (nseeds - 1));
    double rate = (double)covered / nseeds;
    cr_assert(fabs(m - pf_exact) < 3 * se,
              "surrogate %d: mean %.6g, exact %.6g, se %.3g", k, m, pf_exact,
              se);
    cr_assert(rate >= 0.90 && rate <= 0.98,
              "surrogate %d: coverage %.3f (mean cov %.3f)", k, rate, mean_cov);
    /* the stated cov matches the spread over seeds within 15% */
    cr_assert(fabs(se * sqrt(nseeds) / m / mean_cov - 1) < 0.15,
              "surrogate %d: spread %.4f, stated %.4f", k,
              se * sqrt(nseeds) / m, mean_cov);
  }
  free(pi);
  free(fail);
}

/* Pf_eps of the closed-form problem: E[pi] = Phi(-beta'/sqrt(1 + s^2))
 * (the expectation of a normal cdf of a normal variable), within 4 of the
 * stated standard errors. */
Test(learn, pf_eps_matches_closed_form) {
  const size_t n = 200000;
  double *pi = malloc(n * sizeof(double));
  for (size_t i = 0; i < n; i++) {
    double u = bk_norm_icdf(bk_rng_u01(11, 1, i, 0));
    pi[i] = bk_learn_pi(2.0 - u, 0.6);
  }
  bk_learn_est_t e;
  bk_learn_pf_eps(pi, n, &e);
  double exact = bk_norm_cdf(-2.0 / sqrt(1 + 0.36));
  cr_assert(fabs(e.mean - exact) < 4 * e.cov * e.mean, "%.6g vs %.6g", e.mean,
            exact);
  free(pi);
}

/* The product's cov: exact for independent factors (Goodman 1960),
 * sqrt(a^2 + b^2 + a^2 b^2). */
Test(learn, metais_combines_covs) {
  bk_learn_est_t e = {.mean = 2e-4, .cov = 0.03, .n = 1000};
  bk_learn_est_t a = {.mean = 1.25, .cov = 0.04, .n = 50};
  bk_learn_est_t pf;
  bk_learn_metais(&e, &a, &pf);
  cr_assert_float_eq(pf.mean, 2.5e-4, 1e-18);
  cr_assert_float_eq(pf.cov, sqrt(0.0009 + 0.0016 + 0.0009 * 0.0016), 1e-15);
  cr_assert_eq(pf.n, 1050);
}

/* A failed sample with pi = 0 cannot come from h: rejected. No failure at
 * all gives alpha = 0 with an infinite cov. */
Test(learn, alpha_rejects_impossible_samples) {
  int fail[3] = {1, 0, 1};
  double pi[3] = {0.5, 0.2, 0};
  bk_learn_est_t a;
  cr_assert_eq(bk_learn_alpha(fail, pi, 3, &a), BK_EINVAL);
  cr_assert_eq(bk_learn_alpha(fail, pi, 1, &a), BK_EINVAL);
  int none[3] = {0, 0, 0};
  cr_assert_eq(bk_learn_alpha(none, pi, 3, &a), 0);
  cr_assert_eq(a.mean, 0);
  cr_assert(isinf(a.cov));
  double y[2] = {-1, 1}, m[2] = {2, 1}, sd[2] = {0, 1};
  cr_assert(isinf(bk_learn_alpha_loo(y, m, sd, 2)));
}

/* Every allocation failure in k-means, alpha and the believer gives
 * BK_ENOMEM and leaks nothing (ASan checks the leaks). */
Test(learn, out_of_memory_fails_cleanly) {
  double x[40], w[20], y[6], c[6];
  for (int i = 0; i < 20; i++) {
    x[2 * i] = bk_norm_icdf(bk_rng_u01(3, 1, (uint64_t)i, 0));
    x[2 * i + 1] = bk_norm_icdf(bk_rng_u01(3, 1, (uint64_t)i, 1));
    w[i] = 1 + i % 3;
  }
  for (int i = 0; i < 6; i++)
    y[i] = 1 - x[2 * i];
  size_t pick[3];
  int fail[20] = {1, 0, 1};
  bk_learn_est_t a;
  double len[2] = {1, 1};
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.lengths = len;
  bk_gp_t *gp;
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 2, &o), 0);
  int failures = 0;
  for (long k = 1;; k++) {
    bk_alloc_fail_at(k);
    int r1 = bk_learn_kmeans(x, w, 20, 2, 3, 50, c, pick, NULL);
    bk_alloc_fail_at(k);
    int r2 = bk_learn_alpha(fail, w, 20, &a);
    bk_alloc_fail_at(k);
    int r3 = bk_learn_believer(gp, x, y, x + 12, 14, 3, pick);
    bk_alloc_fail_at(0);
    cr_assert(r1 > 0 || r1 == BK_ENOMEM);
    cr_assert(r2 == 0 || r2 == BK_ENOMEM);
    cr_assert(r3 == 0 || r3 == BK_ENOMEM);
    if (r1 > 0 && r2 == 0 && r3 == 0)
      break;
    failures++;
    cr_assert_lt(k, 1000);
  }
  cr_assert_gt(failures, 5);
  bk_gp_free(gp);
}
