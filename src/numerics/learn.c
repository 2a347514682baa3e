/*
 * Learning functions, batch selection and the metamodel-based importance
 * sampling estimator (formulas and sources in learn.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/learn.h"

#include <math.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "numerics/special.h"

/* ---------------------------------------------------------------------- */
/* Learning functions                                                      */
/* ---------------------------------------------------------------------- */

double bk_learn_u(double mu, double s) {
  if (s > 0)
    return fabs(mu) / s;
  return mu == 0 ? 0 : INFINITY;
}

double bk_learn_eff(double mu, double s) {
  if (!(s > 0))
    return 0;
  /* EFF is even in mu; in units of s with t = |mu| / s and eps = 2:
   * EFF / s = t [2 Phi(-t) - Phi(-2-t) - Phi(2-t)]
   *         - [2 phi(t) - phi(2+t) - phi(2-t)] + 2 [Phi(2-t) - Phi(-2-t)].
   * Far from the threshold the terms cancel to nothing; the clamp keeps
   * rounding from giving a negative value. */
  double t = fabs(mu) / s;
  double e = 2;
  double v =
      t * (2 * bk_norm_cdf(-t) - bk_norm_cdf(-e - t) - bk_norm_cdf(e - t)) -
      (2 * bk_norm_pdf(t) - bk_norm_pdf(e + t) - bk_norm_pdf(e - t)) +
      e * (bk_norm_cdf(e - t) - bk_norm_cdf(-e - t));
  return v > 0 ? s * v : 0;
}

double bk_learn_pi(double mu, double s) {
  if (s > 0)
    return bk_norm_cdf(-mu / s);
  return mu <= 0 ? 1 : 0;
}

double bk_learn_margin(double mu, double s, double k) {
  if (!(s > 0))
    return mu == 0 ? 1 : 0;
  double t = mu / s;
  /* Phi(k - t) - Phi(-k - t), the difference taken on the side where both
   * terms are small. */
  if (t > 0)
    return bk_norm_sf(-k - t) - bk_norm_sf(k - t);
  return bk_norm_cdf(k - t) - bk_norm_cdf(-k - t);
}

/* ---------------------------------------------------------------------- */
/* Weighted k-means                                                        */
/* ---------------------------------------------------------------------- */

/* The nearest centroid of point x (ties to the lower index). */
static size_t nearest(const double *x, const double *c, size_t q, size_t d) {
  size_t best = 0;
  double bd = bk_gp_dist2(x, c, d);
  for (size_t k = 1; k < q; k++) {
    double dk = bk_gp_dist2(x, c + k * d, d);
    if (dk < bd) {
      bd = dk;
      best = k;
    }
  }
  return best;
}

int bk_learn_kmeans(const double *x, const double *w, size_t m, size_t d,
                    size_t q, int max_iter, double *centroids, size_t *pick,
                    size_t *label) {
  if (q == 0 || d == 0 || max_iter < 1)
    return BK_EINVAL;
  size_t npos = 0;
  for (size_t i = 0; i < m; i++) {
    if (!(w[i] >= 0) || !isfinite(w[i]))
      return BK_EINVAL;
    npos += w[i] > 0;
  }
  if (npos < q)
    return BK_EINVAL;
  double *mind = bk_malloc(m * sizeof(double));
  size_t *lab = bk_malloc(m * sizeof(size_t));
  double *wsum = bk_malloc(q * sizeof(double));
  if (!mind || !lab || !wsum) {
    bk_free(mind);
    bk_free(lab);
    bk_free(wsum);
    return BK_ENOMEM;
  }
  int rc = 0;
  /* Start: the heaviest candidate, then the largest w * (squared distance
   * to the nearest chosen centroid). */
  size_t first = 0;
  for (size_t i = 1; i < m; i++)
    if (w[i] > w[first])
      first = i;
  memcpy(centroids, x + first * d, d * sizeof(double));
  for (size_t i = 0; i < m; i++)
    mind[i] = bk_gp_dist2(x + i * d, centroids, d);
  for (size_t k = 1; k < q; k++) {
    size_t best = 0;
    double bs = -1;
    for (size_t i = 0; i < m; i++) {
      double sc = w[i] * mind[i];
      if (sc > bs) {
        bs = sc;
        best = i;
      }
    }
    if (!(bs > 0)) {
      rc = BK_EINVAL; /* fewer distinct weighted positions than q */
      goto done;
    }
    double *ck = centroids + k * d;
    memcpy(ck, x + best * d, d * sizeof(double));
    for (size_t i = 0; i < m; i++)
      mind[i] = fmin(mind[i], bk_gp_dist2(x + i * d, ck, d));
  }
  /* Lloyd's iterations: assign, then move each centroid to the weighted
   * mean of its candidates (a cluster without weight keeps its centroid). */
  int iter = 0;
  for (;;) {
    int changed = 0;
    for (size_t i = 0; i < m; i++) {
      size_t k = nearest(x + i * d, centroids, q, d);
      changed |= iter == 0 || lab[i] != k;
      lab[i] = k;
    }
    if (!changed || iter == max_iter)
      break;
    iter++;
    for (size_t k = 0; k < q; k++)
      wsum[k] = 0;
    for (size_t i = 0; i < m; i++)
      wsum[lab[i]] += w[i];
    for (size_t k = 0; k < q; k++)
      if (wsum[k] > 0)
        memset(centroids + k * d, 0, d * sizeof(double));
    for (size_t i = 0; i < m; i++) {
      size_t k = lab[i];
      if (w[i] > 0)
        for (size_t j = 0; j < d; j++)
          centroids[k * d + j] += w[i] * x[i * d + j];
    }
    for (size_t k = 0; k < q; k++)
      if (wsum[k] > 0)
        for (size_t j = 0; j < d; j++)
          centroids[k * d + j] /= wsum[k];
  }
  /* Each cluster's weighted candidate nearest to its centroid; a cluster
   * with none takes the nearest weighted candidate not yet picked. */
  for (size_t k = 0; k < q; k++) {
    double bd = INFINITY;
    size_t best = m;
    for (size_t i = 0; i < m; i++)
      if (lab[i] == k && w[i] > 0) {
        double di = bk_gp_dist2(x + i * d, centroids + k * d, d);
        if (di < bd) {
          bd = di;
          best = i;
        }
      }
    pick[k] = best;
  }
  for (size_t k = 0; k < q; k++) {
    if (pick[k] != m)
      continue;
    double bd = INFINITY;
    for (size_t i = 0; i < m; i++) {
      if (!(w[i] > 0))
        continue;
      int used = 0;
      for (size_t l = 0; l < q; l++)
        used |= pick[l] == i;
      double di = bk_gp_dist2(x + i * d, centroids + k * d, d);
      if (!used && di < bd) {
        bd = di;
        pick[k] = i;
      }
    }
  }
  if (label)
    memcpy(label, lab, m * sizeof(size_t));
  rc = iter > 0 ? iter : 1;
done:
  bk_free(mind);
  bk_free(lab);
  bk_free(wsum);
  return rc;
}

/* ---------------------------------------------------------------------- */
/* Kriging believer                                                        */
/* ---------------------------------------------------------------------- */

int bk_learn_believer(const bk_gp_t *gp, const double *u, const double *y,
                      const double *x, size_t m, size_t q, size_t *pick) {
  if (q == 0 || q > m)
    return BK_EINVAL;
  size_t n = gp->n, d = gp->d;
  double *ua = bk_malloc((n + q) * d * sizeof(double));
  double *ya = bk_malloc((n + q) * sizeof(double));
  double *mean = bk_malloc(m * sizeof(double));
  double *var = bk_malloc(m * sizeof(double));
  char *used = bk_calloc(m ? m : 1, 1);
  int rc = 0;
  bk_gp_t *cur = NULL;
  if (!ua || !ya || !mean || !var || !used) {
    rc = BK_ENOMEM;
    goto done;
  }
  memcpy(ua, u, n * d * sizeof(double));
  memcpy(ya, y, n * sizeof(double));
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.kernel = gp->kernel;
  o.trend = gp->trend;
  o.lengths = gp->lengths;
  o.nugget = gp->nugget;
  o.sigma2 = gp->sigma2;
  const bk_gp_t *g = gp;
  for (size_t k = 0; k < q; k++) {
    rc = bk_gp_predict(g, x, m, mean, var);
    if (rc != 0)
      goto done;
    size_t best = m;
    double bu = INFINITY;
    for (size_t i = 0; i < m; i++) {
      double ui = bk_learn_u(mean[i], sqrt(var[i]));
      if (!used[i] && (best == m || ui < bu)) {
        bu = ui;
        best = i;
      }
    }
    pick[k] = best;
    used[best] = 1;
    if (k + 1 == q)
      break;
    memcpy(ua + (n + k) * d, x + best * d, d * sizeof(double));
    ya[n + k] = mean[best];
    bk_gp_free(cur);
    cur = NULL;
    rc = bk_gp_new(&cur, ua, ya, n + k + 1, d, &o);
    if (rc != 0)
      goto done;
    g = cur;
  }
done:
  bk_gp_free(cur);
  bk_free(ua);
  bk_free(ya);
  bk_free(mean);
  bk_free(var);
  bk_free(used);
  return rc;
}

/* ---------------------------------------------------------------------- */
/* Metamodel-based importance sampling                                     */
/* ---------------------------------------------------------------------- */

/* Mean and cov of the mean of v[0..n), n >= 2. The two-pass variance keeps
 * rounding small when the values are close to their mean. */
static void mean_cov(const double *v, size_t n, bk_learn_est_t *out) {
  double s = 0;
  for (size_t i = 0; i < n; i++)
    s += v[i];
  double mean = s / n, ss = 0;
  for (size_t i = 0; i < n; i++)
    ss += (v[i] - mean) * (v[i] - mean);
  double sd = sqrt(ss / (n - 1) / n);
  out->mean = mean;
  out->cov = mean > 0 ? sd / mean : INFINITY;
  out->n = n;
}

void bk_learn_pf_eps(const double *pi, size_t n, bk_learn_est_t *out) {
  mean_cov(pi, n, out);
}

int bk_learn_alpha(const int *fail, const double *pi, size_t n,
                   bk_learn_est_t *out) {
  if (n < 2)
    return BK_EINVAL;
  double *v = bk_malloc(n * sizeof(double));
  if (!v)
    return BK_ENOMEM;
  for (size_t i = 0; i < n; i++) {
    if (fail[i] && !(pi[i] > 0)) {
      bk_free(v);
      return BK_EINVAL;
    }
    v[i] = fail[i] ? 1 / pi[i] : 0;
  }
  mean_cov(v, n, out);
  bk_free(v);
  return 0;
}

void bk_learn_metais(const bk_learn_est_t *pf_eps, const bk_learn_est_t *alpha,
                     bk_learn_est_t *pf) {
  double a = pf_eps->cov, b = alpha->cov;
  pf->mean = pf_eps->mean * alpha->mean;
  pf->cov = sqrt(a * a + b * b + a * a * b * b);
  pf->n = pf_eps->n + alpha->n;
}

double bk_learn_alpha_loo(const double *y, const double *loo_mean,
                          const double *loo_sd, size_t n) {
  double s = 0;
  for (size_t i = 0; i < n; i++) {
    if (!(y[i] <= 0))
      continue;
    double p = bk_learn_pi(loo_mean[i], loo_sd[i]);
    if (!(p > 0))
      return INFINITY;
    s += 1 / p;
  }
  return n ? s / n : 0;
}
