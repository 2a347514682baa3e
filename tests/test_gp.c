/*
 * Tests of the Gaussian-process regression: fits with fixed
 * hyperparameters against scikit-learn (simple Kriging) and the textbook
 * formulas in numpy (ordinary and universal Kriging), maximum likelihood
 * against scikit-learn's optimum, leave-one-out against refits, the
 * likelihood gradient against differences, determinism, bad input and
 * out-of-memory paths. The references come from tests/ref/gp_sklearn.py,
 * run with Debian's /usr/bin/python3 by each test that needs them.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <lapacke.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "numerics/gp.h"
#include "numerics/rng.h"
#include "numerics/special.h"

/* ---------------------------------------------------------------------- */
/* Reference cases from tests/ref/gp_sklearn.py                            */
/* ---------------------------------------------------------------------- */

#define MAXCASES 16
#define MAXD     8

typedef struct {
  char name[32], kernel[16], trend[16];
  int is_mle, noise;
  int n, d, m, p;
  double sigma2, nugget, lengths[MAXD], truth[MAXD];
  double *x, *y, *t, *tmean, *tvar, *loo_r, *loo_v;
  double loglik, beta[MAXD + 1];
  double fit_lengths[MAXD], fit_sigma2, fit_noise, fit_loglik;
} refcase_t;

static refcase_t cases[MAXCASES];
static int ncases;

static void read_doubles(char **s, double *out, int k) {
  for (int i = 0; i < k; i++) {
    char *end;
    out[i] = strtod(*s, &end);
    cr_assert(end != *s, "reference: number expected in '%s'", *s);
    *s = end;
  }
}

/* Runs the reference script and parses its records into cases[]. */
static void load_reference(void) {
  const char *root = getenv("BRINK_SOURCE_ROOT");
  cr_assert(root, "BRINK_SOURCE_ROOT must be set");
  char cmd[1200];
  snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s/tests/ref/gp_sklearn.py",
           root);
  FILE *f = popen(cmd, "r");
  cr_assert(f, "cannot run %s", cmd);
  static char line[8192];
  refcase_t *c = NULL;
  int nx = 0, nt = 0, nl = 0;
  ncases = 0;
  while (fgets(line, sizeof line, f)) {
    char tag[16];
    int used = 0;
    if (sscanf(line, "%15s %n", tag, &used) != 1)
      continue;
    char *s = line + used;
    if (!strcmp(tag, "case") || !strcmp(tag, "mle")) {
      cr_assert(ncases < MAXCASES);
      c = &cases[ncases++];
      memset(c, 0, sizeof *c);
      c->is_mle = !strcmp(tag, "mle");
      if (c->is_mle) {
        cr_assert(sscanf(s, "%31s %15s %d %d %d", c->name, c->kernel, &c->n,
                         &c->d, &c->noise) == 5);
        strcpy(c->trend, "zero");
      } else {
        cr_assert(sscanf(s, "%31s %15s %15s %d %d %d", c->name, c->kernel,
                         c->trend, &c->n, &c->d, &c->m) == 6);
      }
      cr_assert(c->d <= MAXD);
      c->p = !strcmp(c->trend, "zero")       ? 0
             : !strcmp(c->trend, "constant") ? 1
                                             : c->d + 1;
      c->x = calloc((size_t)c->n * c->d, sizeof(double));
      c->y = calloc(c->n, sizeof(double));
      c->t = calloc((size_t)(c->m + 1) * c->d, sizeof(double));
      c->tmean = calloc(c->m + 1, sizeof(double));
      c->tvar = calloc(c->m + 1, sizeof(double));
      c->loo_r = calloc(c->n, sizeof(double));
      c->loo_v = calloc(c->n, sizeof(double));
      nx = nt = nl = 0;
    } else if (!strcmp(tag, "param")) {
      double v[2];
      read_doubles(&s, v, 2);
      c->sigma2 = v[0];
      c->nugget = v[1];
    } else if (!strcmp(tag, "lengths")) {
      read_doubles(&s, c->lengths, c->d);
    } else if (!strcmp(tag, "truth")) {
      read_doubles(&s, c->truth, c->d);
    } else if (!strcmp(tag, "x")) {
      cr_assert(nx < c->n);
      read_doubles(&s, c->x + (size_t)nx * c->d, c->d);
      read_doubles(&s, c->y + nx, 1);
      nx++;
    } else if (!strcmp(tag, "t")) {
      cr_assert(nt < c->m);
      read_doubles(&s, c->t + (size_t)nt * c->d, c->d);
      read_doubles(&s, c->tmean + nt, 1);
      read_doubles(&s, c->tvar + nt, 1);
      nt++;
    } else if (!strcmp(tag, "loglik")) {
      read_doubles(&s, &c->loglik, 1);
    } else if (!strcmp(tag, "beta")) {
      read_doubles(&s, c->beta, c->p);
    } else if (!strcmp(tag, "loo")) {
      cr_assert(nl < c->n);
      read_doubles(&s, c->loo_r + nl, 1);
      read_doubles(&s, c->loo_v + nl, 1);
      nl++;
    } else if (!strcmp(tag, "fit")) {
      read_doubles(&s, c->fit_lengths, c->d);
      double v[3];
      read_doubles(&s, v, 3);
      c->fit_sigma2 = v[0];
      c->fit_noise = v[1];
      c->fit_loglik = v[2];
    } else if (!strcmp(tag, "end")) {
      cr_assert(nx == c->n && nt == c->m, "%s: incomplete record", c->name);
      cr_assert(c->is_mle || nl == c->n, "%s: loo lines missing", c->name);
    }
  }
  cr_assert(pclose(f) == 0, "%s failed (python3-sklearn installed?)", cmd);
  cr_assert(ncases >= 8, "reference: %d cases", ncases);
}

static void case_options(const refcase_t *c, bk_gp_options_t *o) {
  bk_gp_options_default(o);
  o->kernel = !strcmp(c->kernel, "matern") ? BK_GP_MATERN52 : BK_GP_SQEXP;
  o->trend = !strcmp(c->trend, "zero")       ? BK_GP_TREND_ZERO
             : !strcmp(c->trend, "constant") ? BK_GP_TREND_CONSTANT
                                             : BK_GP_TREND_LINEAR;
}

static void assert_rel(double got, double want, double tol, const char *what,
                       int i) {
  double dd = fabs(got - want);
  cr_assert(dd <= tol * fabs(want) || dd < 1e-300,
            "%s[%d]: got %.17g, want %.17g (rel %.3g)", what, i, got, want,
            dd / fabs(want));
}

/* ---------------------------------------------------------------------- */
/* Fixed hyperparameters                                                   */
/* ---------------------------------------------------------------------- */

/* Simple Kriging (known zero mean, fixed sigma2, lengths, nugget) against
 * sklearn GaussianProcessRegressor(ConstantKernel * Matern(nu=2.5) or RBF,
 * alpha = sigma2 nugget, optimizer=None): predictive mean and variance,
 * log marginal likelihood. */
Test(gp, simple_kriging_matches_sklearn) {
  load_reference();
  int checked = 0;
  for (int k = 0; k < ncases; k++) {
    refcase_t *c = &cases[k];
    if (strncmp(c->name, "sk-", 3))
      continue;
    bk_gp_options_t o;
    case_options(c, &o);
    o.lengths = c->lengths;
    o.sigma2 = c->sigma2;
    o.nugget = c->nugget;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, c->x, c->y, c->n, c->d, &o), 0, "%s", c->name);
    cr_assert_eq(gp->jitter, 0);
    double mean[64], var[64];
    cr_assert_eq(bk_gp_predict(gp, c->t, c->m, mean, var), 0);
    for (int i = 0; i < c->m; i++) {
      assert_rel(mean[i], c->tmean[i], 1e-8, c->name, i); /* sklearn */
      assert_rel(var[i], c->tvar[i], 1e-8, c->name, i);   /* sklearn */
    }
    /* sklearn log_marginal_likelihood_value_ */
    assert_rel(gp->loglik, c->loglik, 1e-10, c->name, -1);
    cr_assert_eq(gp->sigma2, c->sigma2);
    bk_gp_free(gp);
    checked++;
  }
  cr_assert_eq(checked, 2);
}

/* Ordinary and universal Kriging with fixed lengths and nugget, sigma2 and
 * beta by maximum likelihood, against the textbook formulas in numpy
 * (generalised least squares, predictor variance with the beta term,
 * profile log-likelihood). */
Test(gp, universal_kriging_matches_numpy_formulas) {
  load_reference();
  int checked = 0;
  for (int k = 0; k < ncases; k++) {
    refcase_t *c = &cases[k];
    if (strncmp(c->name, "np-", 3))
      continue;
    bk_gp_options_t o;
    case_options(c, &o);
    o.lengths = c->lengths;
    o.nugget = c->nugget;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, c->x, c->y, c->n, c->d, &o), 0, "%s", c->name);
    cr_assert_eq((int)gp->p, c->p);
    double mean[64], var[64];
    cr_assert_eq(bk_gp_predict(gp, c->t, c->m, mean, var), 0);
    for (int i = 0; i < c->m; i++) {
      assert_rel(mean[i], c->tmean[i], 1e-8, c->name, i); /* numpy */
      assert_rel(var[i], c->tvar[i], 1e-8, c->name, i);   /* numpy */
    }
    assert_rel(gp->sigma2, c->sigma2, 1e-9, c->name, -1); /* numpy */
    assert_rel(gp->loglik, c->loglik, 1e-9, c->name, -1); /* numpy */
    for (int i = 0; i < c->p; i++)
      assert_rel(gp->beta[i], c->beta[i], 1e-8, c->name, i); /* numpy */
    bk_gp_free(gp);
    checked++;
  }
  cr_assert_eq(checked, 3);
}

/* bk_gp_loglik at the fixed parameters gives the fit's likelihood. */
Test(gp, loglik_function_agrees_with_fit) {
  load_reference();
  for (int k = 0; k < ncases; k++) {
    refcase_t *c = &cases[k];
    if (c->is_mle)
      continue;
    bk_gp_options_t o;
    case_options(c, &o);
    o.nugget = c->nugget;
    if (c->p == 0)
      o.sigma2 = c->sigma2;
    double theta[MAXD], ll;
    for (int j = 0; j < c->d; j++)
      theta[j] = log(c->lengths[j]);
    cr_assert_eq(bk_gp_loglik(c->x, c->y, c->n, c->d, &o, theta, &ll, NULL), 0);
    /* sklearn log_marginal_likelihood_value_ / numpy profile formula */
    assert_rel(ll, c->loglik, 1e-9, c->name, -1);
  }
}

/* Leave-one-out in closed form against refitting without each point:
 * sklearn refits (simple Kriging) and numpy refits (ordinary and universal
 * Kriging, beta re-estimated, sigma2 kept). */
Test(gp, loo_matches_reference_refits) {
  load_reference();
  for (int k = 0; k < ncases; k++) {
    refcase_t *c = &cases[k];
    if (c->is_mle)
      continue;
    bk_gp_options_t o;
    case_options(c, &o);
    o.lengths = c->lengths;
    o.nugget = c->nugget;
    if (c->p == 0)
      o.sigma2 = c->sigma2;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, c->x, c->y, c->n, c->d, &o), 0);
    double r[64], v[64];
    cr_assert_eq(bk_gp_loo(gp, r, v), 0);
    for (int i = 0; i < c->n; i++) {
      /* sklearn / numpy refits */
      assert_rel(r[i], c->loo_r[i], 1e-7, c->name, i);
      assert_rel(v[i], c->loo_v[i], 1e-7, c->name, i);
    }
    bk_gp_free(gp);
  }
}

/* ---------------------------------------------------------------------- */
/* Maximum likelihood                                                      */
/* ---------------------------------------------------------------------- */

/* The maximum-likelihood lengths, sigma2 (and noise variance) against
 * sklearn's log_marginal_likelihood maximised by scipy L-BFGS-B with tight
 * tolerances. The profile likelihood's maximum is the joint maximum, and a
 * relative nugget sigma2 * tau is the same model as a WhiteKernel, so both
 * optima must agree. sklearn adds alpha = 1e-10 to the diagonal; the fit
 * gets the same as a relative nugget (the likelihood of the squared
 * exponential kernel is sensitive to it). */
Test(gp, mle_matches_sklearn_optimum) {
  load_reference();
  int checked = 0;
  for (int k = 0; k < ncases; k++) {
    refcase_t *c = &cases[k];
    if (!c->is_mle)
      continue;
    bk_gp_options_t o;
    case_options(c, &o);
    o.estimate_nugget = c->noise;
    /* sklearn's alpha = 1e-10 (absolute) as a relative nugget */
    o.nugget = 1e-10 / c->fit_sigma2;
    o.nugget_bounds[0] = 1e-10 / c->fit_sigma2;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, c->x, c->y, c->n, c->d, &o), 0, "%s", c->name);
    for (int j = 0; j < c->d; j++)
      assert_rel(gp->lengths[j], c->fit_lengths[j], 1e-4, c->name, j);
    /* sigma2 is the flattest direction: sklearn's squared-exponential
     * optimum stops 1e-4 away (its likelihood 2e-8 below ours). */
    assert_rel(gp->sigma2, c->fit_sigma2, 1e-3, c->name, -1);
    if (c->noise)
      assert_rel(gp->sigma2 * gp->nugget, c->fit_noise, 1e-3, c->name, -1);
    /* Not worse than sklearn's optimum, and not much better. */
    cr_assert(
        gp->loglik > c->fit_loglik - 1e-7 && gp->loglik < c->fit_loglik + 1e-7,
        "%s: loglik %.12g, sklearn %.12g", c->name, gp->loglik, c->fit_loglik);
    bk_gp_free(gp);
    checked++;
  }
  cr_assert_eq(checked, 3);
}

/* The other two searches reach the same optimum: lengths fixed at
 * sklearn's optimum with the nugget estimated alone, and a warm start at
 * that optimum with one fixed start. */
Test(gp, partial_and_warm_searches_reach_sklearn_optimum) {
  load_reference();
  int checked = 0;
  for (int k = 0; k < ncases; k++) {
    refcase_t *c = &cases[k];
    if (!c->is_mle || !c->noise)
      continue;
    bk_gp_options_t o;
    case_options(c, &o);
    o.estimate_nugget = 1;
    o.nugget_bounds[0] = 1e-10 / c->fit_sigma2;
    o.lengths = c->fit_lengths;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, c->x, c->y, c->n, c->d, &o), 0);
    cr_assert_eq(gp->lengths[0], c->fit_lengths[0]);
    /* sklearn WhiteKernel noise_level and ConstantKernel */
    assert_rel(gp->sigma2 * gp->nugget, c->fit_noise, 1e-4, c->name, -1);
    assert_rel(gp->sigma2, c->fit_sigma2, 1e-4, c->name, -1);
    bk_gp_free(gp);
    o.lengths = NULL;
    o.warm_lengths = c->fit_lengths;
    o.warm_nugget = c->fit_noise / c->fit_sigma2;
    o.nstarts = 1;
    cr_assert_eq(bk_gp_new(&gp, c->x, c->y, c->n, c->d, &o), 0);
    for (int j = 0; j < c->d; j++) /* sklearn */
      assert_rel(gp->lengths[j], c->fit_lengths[j], 1e-4, c->name, j);
    bk_gp_free(gp);
    checked++;
  }
  cr_assert_eq(checked, 1);
}

/* Data drawn (in numpy) from processes with known lengths and noise
 * variance: the estimates are close to the truth (a statistical check on
 * one sample each; the exact optimum is checked against sklearn above). */
Test(gp, mle_recovers_known_process) {
  load_reference();
  for (int k = 0; k < ncases; k++) {
    refcase_t *c = &cases[k];
    if (!c->is_mle)
      continue;
    bk_gp_options_t o;
    case_options(c, &o);
    o.estimate_nugget = c->noise;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, c->x, c->y, c->n, c->d, &o), 0);
    for (int j = 0; j < c->d; j++)
      cr_assert(fabs(log(gp->lengths[j] / c->truth[j])) < log(1.3),
                "%s: length %d is %g, truth %g", c->name, j, gp->lengths[j],
                c->truth[j]);
    if (c->noise) /* the script's noise variance 0.04 */
      cr_assert(fabs(log(gp->sigma2 * gp->nugget / 0.04)) < log(1.5));
    bk_gp_free(gp);
  }
}

/* Standard normals for test data from the project's counter-based stream
 * (inverse cdf). */
static double normal(uint64_t seed, uint64_t i, uint32_t dim) {
  return bk_norm_icdf(bk_rng_u01(seed, 77, i, dim));
}

/* Draws y at n points x from a zero-mean Matern 5/2 process with the given
 * lengths and unit variance, by a Cholesky factor (LAPACKE in the test). */
static void draw_process(uint64_t seed, const double *x, size_t n, size_t d,
                         const double *lengths, double *y) {
  double *K = malloc(n * n * sizeof(double));
  for (size_t i = 0; i < n; i++)
    for (size_t k = 0; k < n; k++) {
      double r2 = 0;
      for (size_t j = 0; j < d; j++) {
        double t = (x[i * d + j] - x[k * d + j]) / lengths[j];
        r2 += t * t;
      }
      double r = sqrt(r2);
      /* Rasmussen & Williams 2006, eq. 4.17 */
      K[i + k * n] = (1 + sqrt(5) * r + 5 * r2 / 3) * exp(-sqrt(5) * r) +
                     (i == k ? 1e-10 : 0);
    }
  cr_assert_eq(LAPACKE_dpotrf(LAPACK_COL_MAJOR, 'L', (int)n, K, (int)n), 0);
  for (size_t i = 0; i < n; i++) {
    y[i] = 0;
    for (size_t k = 0; k <= i; k++)
      y[i] += K[i + k * n] * normal(seed, 1000 + k, 0);
  }
  free(K);
}

/* Over 12 independent samples of a process with lengths 0.6 and 1.5, the
 * geometric mean of the estimates lies within 15% of the truth and every
 * estimate within a factor 2 (maximum likelihood is consistent; the spread
 * at n = 100 is about 10-20% per sample). */
Test(gp, mle_recovers_lengths_over_many_samples) {
  const size_t n = 100, d = 2;
  const double truth[2] = {0.6, 1.5};
  double x[200], y[100], slog[2] = {0, 0};
  const int nseeds = 12;
  for (int s = 0; s < nseeds; s++) {
    uint64_t seed = 1000 + (uint64_t)s;
    for (size_t i = 0; i < n; i++)
      for (size_t j = 0; j < d; j++)
        x[i * d + j] = 1.5 * normal(seed, i, (uint32_t)j);
    draw_process(seed, x, n, d, truth, y);
    bk_gp_options_t o;
    bk_gp_options_default(&o);
    o.trend = BK_GP_TREND_ZERO;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, x, y, n, d, &o), 0, "seed %d", s);
    for (size_t j = 0; j < d; j++) {
      cr_assert(fabs(log(gp->lengths[j] / truth[j])) < log(2.0),
                "seed %d: length %zu is %g", s, j, gp->lengths[j]);
      slog[j] += log(gp->lengths[j] / truth[j]);
    }
    bk_gp_free(gp);
  }
  for (size_t j = 0; j < d; j++)
    cr_assert(fabs(slog[j] / nseeds) < log(1.15),
              "length %zu: geometric mean ratio %g", j, exp(slog[j] / nseeds));
}

/* ---------------------------------------------------------------------- */
/* Gradient, leave-one-out by brute force, determinism                     */
/* ---------------------------------------------------------------------- */

static void smooth_data(size_t n, size_t d, double *x, double *y,
                        double noise) {
  for (size_t i = 0; i < n; i++) {
    double s = 0;
    for (size_t j = 0; j < d; j++) {
      x[i * d + j] = normal(5, i, (uint32_t)j);
      s += sin((double)(j + 1) * x[i * d + j]) / (double)(j + 1);
    }
    y[i] = 3 + s + 0.2 * x[i * d] * x[i * d] + noise * normal(6, i, 0);
  }
}

/* Analytic gradient of the (profile) log-likelihood against central
 * differences with step 1e-5 in log space (common practice), for both
 * kernels, all trends, with and without an estimated nugget. */
Test(gp, loglik_gradient_matches_differences) {
  const size_t n = 30, d = 3;
  double x[90], y[30];
  smooth_data(n, d, x, y, 0.05);
  for (int kernel = 0; kernel < 2; kernel++)
    for (int trend = 0; trend < 3; trend++)
      for (int nug = 0; nug < 2; nug++) {
        bk_gp_options_t o;
        bk_gp_options_default(&o);
        o.kernel = (bk_gp_kernel_t)kernel;
        o.trend = (bk_gp_trend_t)trend;
        o.estimate_nugget = nug;
        o.nugget = 1e-6;
        double th[4] = {log(0.9), log(1.4), log(2.2), log(1e-2)};
        double ll, g[4];
        cr_assert_eq(bk_gp_loglik(x, y, n, d, &o, th, &ll, g), 0);
        for (size_t j = 0; j < d + (size_t)nug; j++) {
          double h = 1e-5, tp[4], tm[4], lp, lm;
          memcpy(tp, th, sizeof th);
          memcpy(tm, th, sizeof th);
          tp[j] += h;
          tm[j] -= h;
          cr_assert_eq(bk_gp_loglik(x, y, n, d, &o, tp, &lp, NULL), 0);
          cr_assert_eq(bk_gp_loglik(x, y, n, d, &o, tm, &lm, NULL), 0);
          double fd = (lp - lm) / (2 * h);
          cr_assert(fabs(g[j] - fd) <= 1e-6 * fmax(1, fabs(fd)),
                    "kernel %d trend %d nugget %d: d/dtheta%zu %.10g, "
                    "differences %.10g",
                    kernel, trend, nug, j, g[j], fd);
        }
      }
}

/* Dubrule (1983) leave-one-out against refitting this module without each
 * point (same lengths, nugget, sigma2; beta re-estimated): residual y_i -
 * mean_-i(x_i), and its variance = predictive variance + noise. */
Test(gp, loo_matches_brute_force_refits) {
  const size_t n = 40, d = 3;
  double x[120], y[40];
  smooth_data(n, d, x, y, 0.05);
  for (int trend = 0; trend < 3; trend++) {
    bk_gp_options_t o;
    bk_gp_options_default(&o);
    o.trend = (bk_gp_trend_t)trend;
    o.estimate_nugget = 1;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, x, y, n, d, &o), 0);
    double r[40], v[40];
    cr_assert_eq(bk_gp_loo(gp, r, v), 0);
    bk_gp_options_t fo = o;
    fo.lengths = gp->lengths;
    fo.nugget = gp->nugget;
    fo.estimate_nugget = 0;
    fo.sigma2 = gp->sigma2;
    for (size_t i = 0; i < n; i++) {
      double xs[120], ys[40];
      for (size_t k = 0, m = 0; k < n; k++)
        if (k != i) {
          memcpy(xs + m * d, x + k * d, d * sizeof(double));
          ys[m++] = y[k];
        }
      bk_gp_t *g1;
      cr_assert_eq(bk_gp_new(&g1, xs, ys, n - 1, d, &fo), 0);
      double mean, var;
      cr_assert_eq(bk_gp_predict(g1, x + i * d, 1, &mean, &var), 0);
      assert_rel(r[i], y[i] - mean, 1e-8, "loo residual", (int)i);
      assert_rel(v[i], var + gp->sigma2 * gp->nugget, 1e-8, "loo variance",
                 (int)i);
      bk_gp_free(g1);
    }
    bk_gp_free(gp);
  }
}

/* Two fits of the same data give the same bits: hyperparameters,
 * predictions and leave-one-out (one BLAS thread, fixed starts). */
Test(gp, fits_are_bit_identical) {
  const size_t n = 120, d = 4, m = 300;
  double *x = malloc(n * d * sizeof(double)), *y = malloc(n * sizeof(double));
  double *t = malloc(m * d * sizeof(double));
  smooth_data(n, d, x, y, 0.02);
  for (size_t i = 0; i < m * d; i++)
    t[i] = 2 * normal(9, i, 0);
  double out[2][2 * 300 + 2 * 120 + 8];
  for (int rep = 0; rep < 2; rep++) {
    bk_gp_options_t o;
    bk_gp_options_default(&o);
    o.trend = BK_GP_TREND_LINEAR;
    o.estimate_nugget = 1;
    bk_gp_t *gp;
    cr_assert_eq(bk_gp_new(&gp, x, y, n, d, &o), 0);
    double *p = out[rep];
    cr_assert_eq(bk_gp_predict(gp, t, m, p, p + m), 0);
    cr_assert_eq(bk_gp_loo(gp, p + 2 * m, p + 2 * m + n), 0);
    p += 2 * m + 2 * n;
    memcpy(p, gp->lengths, d * sizeof(double));
    p[4] = gp->sigma2;
    p[5] = gp->nugget;
    p[6] = gp->loglik;
    p[7] = gp->beta[0];
    bk_gp_free(gp);
  }
  cr_assert(memcmp(out[0], out[1], sizeof out[0]) == 0);
  free(x);
  free(y);
  free(t);
}

/* A point's predictive mean has the same bits whether it is predicted
 * alone or inside a block of others; means and variances agree to
 * rounding. */
Test(gp, prediction_does_not_depend_on_the_batch) {
  const size_t n = 50, d = 2, m = 600;
  double x[100], y[50], *t = malloc(m * d * sizeof(double));
  smooth_data(n, d, x, y, 0);
  for (size_t i = 0; i < m * d; i++)
    t[i] = 2 * normal(10, i, 0);
  bk_gp_t *gp;
  cr_assert_eq(bk_gp_new(&gp, x, y, n, d, NULL), 0);
  double *mean = malloc(m * sizeof(double)), *var = malloc(m * sizeof(double));
  cr_assert_eq(bk_gp_predict(gp, t, m, mean, var), 0);
  for (size_t i = 0; i < m; i += 37) {
    double m1, v1, m2;
    cr_assert_eq(bk_gp_predict(gp, t + i * d, 1, &m1, &v1), 0);
    cr_assert_eq(bk_gp_predict(gp, t + i * d, 1, &m2, NULL), 0);
    cr_assert(m1 == mean[i] && m2 == mean[i], "point %zu", i);
    cr_assert(fabs(v1 - var[i]) <= 1e-12 * gp->sigma2, "point %zu", i);
  }
  free(t);
  free(mean);
  free(var);
  bk_gp_free(gp);
}

/* With the default tiny nugget the process interpolates: at a training
 * point the mean is the value and the variance about zero (common
 * practice for Kriging of a deterministic model). */
Test(gp, interpolates_training_points) {
  const size_t n = 30, d = 2;
  double x[60], y[30], mean[30], var[30];
  smooth_data(n, d, x, y, 0);
  bk_gp_t *gp;
  cr_assert_eq(bk_gp_new(&gp, x, y, n, d, NULL), 0);
  cr_assert_eq(bk_gp_predict(gp, x, n, mean, var), 0);
  for (size_t i = 0; i < n; i++) {
    cr_assert(fabs(mean[i] - y[i]) < 1e-4, "point %zu", i);
    cr_assert(var[i] < 1e-6 * gp->sigma2, "point %zu", i);
  }
  bk_gp_free(gp);
}

/* The fit runs BLAS on one thread (OpenBLAS reports its thread count). */
Test(gp, blas_runs_on_one_thread) {
  cr_assert_eq(bk_gp_blas_threads(), 1);
}

/* ---------------------------------------------------------------------- */
/* Bad input, degenerate data, out of memory                               */
/* ---------------------------------------------------------------------- */

Test(gp, bad_input_is_rejected) {
  double x[6] = {0, 1, 2, 3, 4, 5}, y[6] = {1, 2, 0, 4, 5, 3};
  bk_gp_t *gp = (bk_gp_t *)1;
  cr_assert_eq(bk_gp_new(&gp, x, y, 0, 1, NULL), BK_EINVAL);
  cr_assert_null(gp);
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 0, NULL), BK_EINVAL);
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, BK_GP_MAXDIM + 1, NULL), BK_EINVAL);
  y[2] = NAN;
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 1, NULL), BK_EINVAL);
  y[2] = 0;
  x[3] = INFINITY;
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 1, NULL), BK_EINVAL);
  x[3] = 3;
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.trend = BK_GP_TREND_LINEAR; /* p = 3 with d = 2: needs n > 3 */
  cr_assert_eq(bk_gp_new(&gp, x, y, 3, 2, &o), BK_EINVAL);
  bk_gp_options_default(&o);
  double bad_len = -1;
  o.lengths = &bad_len;
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 1, &o), BK_EINVAL);
  bk_gp_options_default(&o);
  o.nstarts = 0;
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 1, &o), BK_EINVAL);
  bk_gp_options_default(&o);
  o.estimate_nugget = 1;
  o.nugget_bounds[0] = 0;
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 1, &o), BK_EINVAL);
  cr_assert_null(gp);
}

/* All values equal: nothing to estimate sigma2 from (an error, not NaN);
 * with sigma2 fixed the fit works and predicts the constant. */
Test(gp, constant_values) {
  double x[5] = {0, 1, 2, 3, 4}, y[5] = {2, 2, 2, 2, 2};
  bk_gp_t *gp;
  cr_assert_eq(bk_gp_new(&gp, x, y, 5, 1, NULL), BK_ERANGE);
  cr_assert_null(gp);
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.sigma2 = 1;
  double len = 1;
  o.lengths = &len;
  cr_assert_eq(bk_gp_new(&gp, x, y, 5, 1, &o), 0);
  double t = 2.5, mean, var;
  cr_assert_eq(bk_gp_predict(gp, &t, 1, &mean, &var), 0);
  cr_assert_float_eq(mean, 2, 1e-12);
  bk_gp_free(gp);
}

/* Repeated points with no nugget make the matrix singular: the fit adds
 * jitter (bounded retries) and says so. Points that do not identify a
 * linear trend (all on a line in 2-d) fail with BK_ERANGE. */
Test(gp, singular_matrices_get_jitter_or_fail) {
  double x[12] = {0, 0, 1, 0, 0, 1, 1, 1, 0, 0, 0.5, 0.5};
  double y[6] = {1, 2, 3, 4, 1, 2.5};
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.nugget = 0;
  double len[2] = {1, 1};
  o.lengths = len;
  bk_gp_t *gp;
  y[4] = 1; /* point 4 repeats point 0 with the same value */
  cr_assert_eq(bk_gp_new(&gp, x, y, 6, 2, &o), 0);
  cr_assert_gt(gp->jitter, 0);
  cr_assert_leq(gp->jitter, 1e-6);
  double mean, var;
  cr_assert_eq(bk_gp_predict(gp, x, 1, &mean, &var), 0);
  cr_assert(isfinite(mean) && isfinite(var));
  bk_gp_free(gp);
  double xl[12] = {0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5};
  o.trend = BK_GP_TREND_LINEAR;
  o.nugget = 1e-10;
  cr_assert_eq(bk_gp_new(&gp, xl, y, 6, 2, &o), BK_ERANGE);
  cr_assert_null(gp);
}

/* Every allocation failure in a fit, a prediction and leave-one-out gives
 * BK_ENOMEM and leaks nothing (ASan checks the leaks). */
Test(gp, out_of_memory_fails_cleanly) {
  const size_t n = 20, d = 2;
  double x[40], y[20];
  smooth_data(n, d, x, y, 0);
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.trend = BK_GP_TREND_LINEAR;
  o.nstarts = 1;
  int failures = 0;
  for (long k = 1;; k++) {
    bk_alloc_fail_at(k);
    bk_gp_t *gp;
    int rc = bk_gp_new(&gp, x, y, n, d, &o);
    if (rc == 0) {
      double mean[3], var[3], r[20];
      int rp = bk_gp_predict(gp, x, 3, mean, var);
      int rl = bk_gp_loo(gp, r, NULL);
      bk_alloc_fail_at(0);
      bk_gp_free(gp);
      if (rp == 0 && rl == 0)
        break;
      cr_assert(rp == BK_ENOMEM || rl == BK_ENOMEM);
    } else {
      cr_assert_eq(rc, BK_ENOMEM, "allocation %ld: %d", k, rc);
      cr_assert_null(gp);
    }
    failures++;
    cr_assert_lt(k, 1000);
  }
  bk_alloc_fail_at(0);
  cr_assert_gt(failures, 10);
}
