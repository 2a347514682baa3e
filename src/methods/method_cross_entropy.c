/*
 * The cross-entropy method: adaptive importance sampling with a Gaussian
 * mixture in standard normal space (Rubinstein 1999; Kurtz & Song 2013;
 * Geyer, Papaioannou & Straub 2019, "CE-GM").
 *
 * Adaptation. Step t draws analysis.samples points from the current
 * density h_t (h_0 is the standard normal), keys "ce/s<t>/<i>". The
 * intermediate threshold is the rho-quantile of g, raised to 0; the points
 * with g at or below it are the elite set, weighted by phi(u) / h_t(u)
 * (the likelihood ratio towards the optimal density of that threshold),
 * and the next density is the mixture of analysis.cross_entropy.components
 * Gaussians fitted to them by weighted EM, each covariance blended with
 * the previous density's (smoothed updating, see ALPHA). Adaptation stops
 * when the threshold reaches 0 or after max_steps steps.
 *
 * Covariances only where the points can fit them. The log-weight
 * log phi(u) - log h(u) of a Gaussian h whose covariance differs from the
 * identity sums a term per dimension, so in high dimension the weights
 * degenerate unless h keeps the identity covariance in all but a few
 * directions (Au & Beck 2003, "Importance sampling in high dimensions",
 * Structural Safety 25:139-163); a covariance estimated from ne points has
 * eigenvalues spread by about 2 sqrt(nu / ne) around the truth
 * (Marchenko & Pastur 1967, from memory), which adds about
 * nu^2 / (2 ne) to the variance of the log-weights. So the covariances are
 * fitted only when the expected elite points rho N are at least nu^2 / 2
 * (that variance at most 1: 2 variables need 2 elite points, 20 need 200,
 * 100 need 5000); otherwise every component keeps the identity covariance
 * and only the means are fitted (the mixture of shifted standard normals,
 * whose weights depend on the few directions of the means, as for
 * importance sampling at a design point). This happens by itself for
 * large nu; the report says which (detail "covariances fitted").
 *
 * Estimation. The final density samples batches of analysis.samples
 * points, keys "ce/final/<i>", i counting on across batches; the estimate
 * is the weighted mean of I(g <= 0) phi(u) / h(u), its variance the sample
 * variance over n, and target_cov is checked after whole batches only,
 * capped by max_evaluations (which counts adaptation too). The interval is
 * the normal one from that variance, cut at 0 ("normal (weighted)").
 * With fitted covariances the final density is the last fit with its
 * covariances widened by 1 + 1/sqrt(nu) (see widen).
 *
 * Evidence before a stop on target_cov (see may_stop): at least
 * MIN_FAILURES failing points, an effective sample size of at least
 * MIN_ESS, and more samples than exp(KL), KL the Kullback-Leibler
 * divergence of the sampling density from the optimal one, estimated from
 * the weights: Chatterjee & Diaconis (2018, "The sample size required in
 * importance sampling", Annals of Applied Probability 28:1099-1135) show
 * that importance sampling needs about exp(KL) samples, and that fewer
 * give an estimate far below the truth whose sample variance does not
 * show it. A run that reaches target_cov without that evidence goes on
 * sampling, and warns if it ends so.
 *
 * Memory. A batch holds at most CHUNK_DOUBLES values of u (32 MiB): with
 * more points times variables a step or final batch is evaluated in
 * chunks (keys unchanged; the final phase then checks target_cov after
 * every chunk). Only g and the log-weight of every point of a step are
 * kept; the elite points are drawn again from their keys for the fit
 * (every point is a pure function of its key and the density), and held
 * only when they fit in the same bound. So memory does not grow with the
 * dimension times the samples, and no nu x nu matrix exists without
 * fitted covariances.
 *
 * Determinism: the component of point i is chosen by bk_rng_u01(seed,
 * stream(prefix), i, 0) and its normals come from dimensions 1..nu of the
 * same counter, so every point is a pure function of (seed, key) and of the
 * responses before it. The EM starts from the elite points in index order
 * (farthest-point seeding) and sums in that order, so a resumed run that
 * replays recorded responses follows the same path bit for bit.
 *
 * Model errors: a faulty point is never elite under on_error skip or abort
 * and is left out of the estimate (skip); under fail it counts as a
 * failure (g = -inf), in adaptation and estimate alike. Because every
 * point's weight is known, pf_bounds are exact for the final phase: the
 * faulty points taken as safe, and as failed.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "methods/weighted.h"
#include "numerics/rng.h"
#include "numerics/special.h"
/* EM: iterations and relative tolerance on the weighted log-likelihood. */
#define EM_MAX_ITER 200
#define EM_TOL      1e-9
/* A component whose mixture weight falls below this is dropped. */
#define MIN_COMPONENT_WEIGHT 1e-6
/* The most values of u a batch or the stored elite set holds (32 MiB). */
#define CHUNK_DOUBLES (4u << 20)
/* The evidence a stop on target_cov needs (see the file comment): failing
 * points (common practice, as for crude sampling) and effective samples
 * (below it the degenerate-weights warning fires). */
#define MIN_FAILURES 10
#define MIN_ESS      30.0

/* A Gaussian mixture in u-space. With fitted covariances (L != NULL) L
 * holds the lower Cholesky factors (row-major nu x nu each) and logdet
 * their log determinants; without, every covariance is the identity and
 * logdet is 0. Invariant: k >= 1, pi sums to 1, every L has a positive
 * diagonal. */
typedef struct {
  size_t nu, k, cap;
  double *pi;
  double *mu;
  double *L;
  double *logdet;
} gm_t;

static int gm_init(gm_t *g, size_t nu, size_t cap, int full) {
  memset(g, 0, sizeof *g);
  g->nu = nu;
  g->cap = cap;
  g->pi = bk_calloc(cap, sizeof *g->pi);
  g->mu = bk_calloc(cap * nu, sizeof *g->mu);
  g->L = full ? bk_calloc(cap * nu * nu, sizeof *g->L) : NULL;
  g->logdet = bk_calloc(cap, sizeof *g->logdet);
  if (!g->pi || !g->mu || (full && !g->L) || !g->logdet)
    return BK_ENOMEM;
  return 0;
}

static void gm_close(gm_t *g) {
  bk_free(g->pi);
  bk_free(g->mu);
  bk_free(g->L);
  bk_free(g->logdet);
  memset(g, 0, sizeof *g);
}

/* The standard normal density as a one-component mixture. */
static void gm_standard(gm_t *g) {
  size_t nu = g->nu;
  g->k = 1;
  g->pi[0] = 1;
  memset(g->mu, 0, nu * sizeof *g->mu);
  if (g->L) {
    memset(g->L, 0, nu * nu * sizeof *g->L);
    for (size_t d = 0; d < nu; d++)
      g->L[d * nu + d] = 1;
  }
  g->logdet[0] = 0;
}

/* Cholesky factorisation of the symmetric matrix a (nu x nu, row-major)
 * into lower l. Returns 0, or -1 when a is not positive definite. */
static int cholesky(const double *a, double *l, size_t nu) {
  memset(l, 0, nu * nu * sizeof *l);
  for (size_t i = 0; i < nu; i++)
    for (size_t j = 0; j <= i; j++) {
      double s = a[i * nu + j];
      for (size_t m = 0; m < j; m++)
        s -= l[i * nu + m] * l[j * nu + m];
      if (i == j) {
        if (!(s > 0))
          return -1;
        l[i * nu + i] = sqrt(s);
      } else {
        l[i * nu + j] = s / l[j * nu + j];
      }
    }
  return 0;
}

/* log N(u; mu_c, Sigma_c) without the -nu/2 log(2 pi) term, which cancels
 * in every ratio used here. `tmp` holds nu doubles. */
static double gm_logpdf_c(const gm_t *g, size_t c, const double *u,
                          double *tmp) {
  size_t nu = g->nu;
  const double *mu = g->mu + c * nu;
  double q = 0;
  if (!g->L) {
    for (size_t i = 0; i < nu; i++)
      q += (u[i] - mu[i]) * (u[i] - mu[i]);
    return -0.5 * q;
  }
  const double *L = g->L + c * nu * nu;
  for (size_t i = 0; i < nu; i++) {
    double s = u[i] - mu[i];
    for (size_t m = 0; m < i; m++)
      s -= L[i * nu + m] * tmp[m];
    tmp[i] = s / L[i * nu + i];
    q += tmp[i] * tmp[i];
  }
  return -0.5 * q - 0.5 * g->logdet[c];
}

/* log h(u) of the mixture, same convention. */
static double gm_logpdf(const gm_t *g, const double *u, double *tmp,
                        double *lc) {
  double mx = -INFINITY;
  for (size_t c = 0; c < g->k; c++) {
    lc[c] =
        g->pi[c] > 0 ? log(g->pi[c]) + gm_logpdf_c(g, c, u, tmp) : -INFINITY;
    if (lc[c] > mx)
      mx = lc[c];
  }
  if (!isfinite(mx))
    return mx;
  double s = 0;
  for (size_t c = 0; c < g->k; c++)
    s += exp(lc[c] - mx);
  return mx + log(s);
}

/* log phi(u) in the same convention. */
static double log_phi(const double *u, size_t nu) {
  double q = 0;
  for (size_t d = 0; d < nu; d++)
    q += u[d] * u[d];
  return -0.5 * q;
}

/* Point `index` of density g under stream `stream`: the component from
 * dimension 0, normals from dimensions 1..nu. */
static void gm_sample(const gm_t *g, uint64_t seed, uint64_t stream,
                      uint64_t index, double *u, double *z) {
  size_t nu = g->nu;
  size_t c = 0;
  if (g->k > 1) {
    double r = bk_rng_u01(seed, stream, index, 0), acc = 0;
    c = g->k - 1;
    for (size_t j = 0; j < g->k; j++) {
      acc += g->pi[j];
      if (r < acc) {
        c = j;
        break;
      }
    }
  }
  bk_rng_u01_fill(seed, stream, index, 1, (uint32_t)nu, z);
  for (size_t d = 0; d < nu; d++)
    z[d] = bk_norm_icdf(z[d]);
  const double *mu = g->mu + c * nu;
  if (!g->L) {
    for (size_t i = 0; i < nu; i++)
      u[i] = mu[i] + z[i];
    return;
  }
  const double *L = g->L + c * nu * nu;
  for (size_t i = 0; i < nu; i++) {
    double s = mu[i];
    for (size_t m = 0; m <= i; m++)
      s += L[i * nu + m] * z[m];
    u[i] = s;
  }
}

/* One run. A step's batch is drawn and evaluated in chunks of `chunk`
 * points: us (chunk * nu) and lw (chunk) hold one chunk; logw and geff
 * every point's log phi(u) - log h(u) and g after the on_error policy
 * (NaN: left out). The elite set: the key indices of its points (elite)
 * and their weights (ew), the points themselves in ex when they fit
 * (stored), else drawn again from their keys (elite_u). h is the current
 * density, hn the next one being fitted. */
typedef struct {
  bk_mctx_t ctx;
  size_t nu, N, K, chunk;
  int full; /* covariances fitted (see the file comment) */
  gm_t h, hn;
  double *us, *lw;
  double *logw, *geff, *sorted;
  size_t *elite;
  double *ew;
  double *ex; /* ecap points */
  size_t ecap;
  int stored;
  uint64_t estream; /* the stream of the step whose elite set it is */
  double *scratch;  /* two points, for elite_u */
  double *resp;     /* N * K responsibilities of the EM */
  double *cov;      /* 3 nu * nu with fitted covariances: covariance,
                       saved factor, pooled covariance; else nu */
  double *wc;       /* N: a component's weights in the M-step */
  double *tmp, *lc, *z;
  /* The adaptation so far. */
  int steps, reached;
  double gamma;
  /* The final phase: sum of w log w and of w over the failing points, in
   * units of exp(kl_max), for the divergence (see kl_estimate). */
  double kl_max, kl_a, kl_s;
} ce_t;

/* Point j of the elite set: stored, or drawn again from its key into
 * scratch slot `slot` (0 or 1). */
static const double *elite_u(ce_t *ce, size_t j, int slot) {
  if (ce->stored)
    return ce->ex + j * ce->nu;
  double *u = ce->scratch + (size_t)slot * ce->nu;
  gm_sample(&ce->h, ce->ctx.s->seed, ce->estream, ce->elite[j], u, ce->z);
  return u;
}

/* Sets component c of g from the weighted mean (and, with fitted
 * covariances, the covariance) of the m elite points with weights w
 * (zeros allowed). A ridge keeps the covariance positive definite when
 * the points are few or collapse: 1e-3 of the mean variance plus 1e-8,
 * raised tenfold until the factorisation succeeds. Returns 0, or -1 when
 * the weights sum to zero. */
static int set_component(ce_t *ce, gm_t *g, size_t c, const double *w,
                         size_t m) {
  size_t nu = g->nu;
  double *mu = g->mu + c * nu, *cov = ce->cov;
  double sw = 0;
  for (size_t i = 0; i < m; i++)
    sw += w[i];
  if (!(sw > 0))
    return -1;
  memset(mu, 0, nu * sizeof *mu);
  for (size_t i = 0; i < m; i++)
    if (w[i] > 0) {
      const double *xi = elite_u(ce, i, 0);
      for (size_t d = 0; d < nu; d++)
        mu[d] += w[i] * xi[d];
    }
  for (size_t d = 0; d < nu; d++)
    mu[d] /= sw;
  if (!g->L)
    return 0;
  memset(cov, 0, nu * nu * sizeof *cov);
  for (size_t i = 0; i < m; i++) {
    if (!(w[i] > 0))
      continue;
    const double *xi = elite_u(ce, i, 0);
    for (size_t a = 0; a < nu; a++) {
      double da = xi[a] - mu[a];
      for (size_t b = 0; b <= a; b++)
        cov[a * nu + b] += w[i] * da * (xi[b] - mu[b]);
    }
  }
  double tr = 0;
  for (size_t a = 0; a < nu; a++) {
    for (size_t b = 0; b <= a; b++) {
      cov[a * nu + b] /= sw;
      cov[b * nu + a] = cov[a * nu + b];
    }
    tr += cov[a * nu + a];
  }
  double ridge = 1e-3 * tr / (double)nu + 1e-8;
  double *L = g->L + c * nu * nu;
  for (int attempt = 0; attempt < 40; attempt++) {
    for (size_t a = 0; a < nu; a++)
      cov[a * nu + a] += ridge;
    if (cholesky(cov, L, nu) == 0)
      break;
    ridge *= 10;
  }
  double ld = 0;
  for (size_t a = 0; a < nu; a++)
    ld += 2 * log(L[a * nu + a]);
  g->logdet[c] = ld;
  return 0;
}

/* The EM's starting point for k >= 2 components: farthest-point seeding
 * (the first centre is the point of largest weight, lowest index on ties;
 * each next one the positive-weight point farthest from the centres so
 * far), then every point goes wholly to its nearest centre, as row i of r
 * (stride kmax). Deterministic in index order. Returns 0 or -2 when out of
 * memory. */
static int seed_clusters(ce_t *ce, size_t k, size_t kmax, const double *w,
                         size_t m, double *r) {
  size_t nu = ce->nu;
  size_t *centre = (size_t *)bk_calloc(k, sizeof *centre);
  double *dmin = bk_calloc(m, sizeof *dmin);
  double *cj = bk_calloc(nu, sizeof *cj);
  if (!centre || !dmin || !cj) {
    bk_free(centre);
    bk_free(dmin);
    bk_free(cj);
    return -2;
  }
  size_t best = 0;
  for (size_t i = 1; i < m; i++)
    if (w[i] > w[best])
      best = i;
  centre[0] = best;
  for (size_t i = 0; i < m; i++)
    dmin[i] = INFINITY;
  /* Column 0 of r holds each point's nearest centre so far. */
  for (size_t j = 1; j <= k; j++) {
    memcpy(cj, elite_u(ce, centre[j - 1], 1), nu * sizeof *cj);
    size_t far = 0;
    double fd = -1;
    for (size_t i = 0; i < m; i++) {
      const double *xi = elite_u(ce, i, 0);
      double d2 = 0;
      for (size_t d = 0; d < nu; d++)
        d2 += (xi[d] - cj[d]) * (xi[d] - cj[d]);
      if (d2 < dmin[i]) {
        dmin[i] = d2;
        r[i * kmax] = (double)(j - 1);
      }
      if (w[i] > 0 && dmin[i] > fd) {
        fd = dmin[i];
        far = i;
      }
    }
    if (j < k)
      centre[j] = far;
  }
  for (size_t i = 0; i < m; i++) {
    size_t a = (size_t)r[i * kmax];
    for (size_t c = 0; c < k; c++)
      r[i * kmax + c] = c == a ? 1 : 0;
  }
  bk_free(centre);
  bk_free(dmin);
  bk_free(cj);
  return 0;
}

/* M-step: each component of g from the points weighted by w times its
 * responsibilities; components with a mixture weight below
 * MIN_COMPONENT_WEIGHT, or none to form, are dropped and the columns of r
 * follow. Returns the components kept, then in g->k. */
static size_t em_maximise(ce_t *ce, gm_t *g, size_t kmax, const double *w,
                          size_t m, double sw, double *r) {
  double *wc = ce->wc;
  size_t kk = 0;
  for (size_t c = 0; c < g->k; c++) {
    double s = 0;
    for (size_t i = 0; i < m; i++) {
      wc[i] = w[i] * r[i * kmax + c];
      s += wc[i];
    }
    if (!(s / sw >= MIN_COMPONENT_WEIGHT))
      continue;
    if (set_component(ce, g, kk, wc, m))
      continue;
    g->pi[kk] = s / sw;
    /* Move this component's responsibilities to column kk. */
    if (kk != c)
      for (size_t i = 0; i < m; i++)
        r[i * kmax + kk] = r[i * kmax + c];
    kk++;
  }
  if (kk == 0)
    return 0;
  g->k = kk;
  double spi = 0;
  for (size_t c = 0; c < g->k; c++)
    spi += g->pi[c];
  for (size_t c = 0; c < g->k; c++)
    g->pi[c] /= spi;
  return kk;
}

/* E-step: the responsibilities r of the components for every point, and
 * the weighted mean log-likelihood, returned. */
static double em_expect(ce_t *ce, const gm_t *g, size_t kmax, const double *w,
                        size_t m, double sw, double *r) {
  double ll = 0;
  for (size_t i = 0; i < m; i++) {
    double lh = gm_logpdf(g, elite_u(ce, i, 0), ce->tmp, ce->lc);
    for (size_t c = 0; c < g->k; c++)
      r[i * kmax + c] = isfinite(lh) ? exp(ce->lc[c] - lh) : 1.0 / g->k;
    if (w[i] > 0)
      ll += w[i] * lh;
  }
  return ll / sw;
}

/* Fits g (up to kmax components) to the m elite points with weights w
 * (summing to a positive number) by weighted EM from seed_clusters, until
 * the log-likelihood changes by less than EM_TOL relative or EM_MAX_ITER.
 * Returns 0, -1 when no component can be formed, or -2 when out of
 * memory. */
static int gm_fit(ce_t *ce, gm_t *g, size_t kmax, const double *w, size_t m) {
  double *r = ce->resp;
  size_t npos = 0;
  for (size_t i = 0; i < m; i++)
    npos += w[i] > 0;
  size_t k = kmax < npos ? kmax : npos;
  if (k == 0)
    return -1;
  if (k == 1) {
    g->k = 1;
    g->pi[0] = 1;
    return set_component(ce, g, 0, w, m);
  }
  if (seed_clusters(ce, k, kmax, w, m, r))
    return -2;
  double prev = -INFINITY;
  g->k = k;
  double sw = 0;
  for (size_t i = 0; i < m; i++)
    sw += w[i];
  for (int it = 0; it < EM_MAX_ITER; it++) {
    if (em_maximise(ce, g, kmax, w, m, sw, r) == 0)
      return -1;
    double ll = em_expect(ce, g, kmax, w, m, sw, r);
    if (g->k == 1 || fabs(ll - prev) <= EM_TOL * (1 + fabs(ll)))
      break;
    prev = ll;
  }
  return 0;
}

/* Covariance smoothing (Rubinstein & Kroese 2004, smoothed updating): each
 * fitted covariance is blended with the pooled within-component covariance
 * of the previous density, sum_c pi_c Sigma_c, with weight ALPHA on the
 * new fit. Without it the elite points of a narrow density cover only its
 * edge of the next optimal density, the fitted spread shrinks from step to
 * step, and the thresholds stall short of 0. */
#define ALPHA 0.5

/* cov = sum_c pi_c L_c L_c^T of g. */
static void gm_pooled(const gm_t *g, double *cov) {
  size_t nu = g->nu;
  memset(cov, 0, nu * nu * sizeof *cov);
  for (size_t c = 0; c < g->k; c++) {
    const double *L = g->L + c * nu * nu;
    for (size_t a = 0; a < nu; a++)
      for (size_t b = 0; b <= a; b++) {
        double s = 0;
        for (size_t m = 0; m <= b; m++)
          s += L[a * nu + m] * L[b * nu + m];
        cov[a * nu + b] += g->pi[c] * s;
        cov[b * nu + a] = cov[a * nu + b];
      }
  }
}

/* Blends every component of `to` with the pooled covariance `pool`. */
static void gm_smooth(gm_t *to, const double *pool, double *cov, double alpha) {
  size_t nu = to->nu;
  for (size_t c = 0; c < to->k; c++) {
    double *L = to->L + c * nu * nu;
    for (size_t a = 0; a < nu; a++)
      for (size_t b = 0; b <= a; b++) {
        double s = 0;
        for (size_t m = 0; m <= b; m++)
          s += L[a * nu + m] * L[b * nu + m];
        cov[a * nu + b] = alpha * s + (1 - alpha) * pool[a * nu + b];
        cov[b * nu + a] = cov[a * nu + b];
      }
    double *save = cov + nu * nu;
    memcpy(save, L, nu * nu * sizeof *L);
    if (cholesky(cov, L, nu)) {
      memcpy(L, save, nu * nu * sizeof *L); /* keep the fit */
      continue;
    }
    double ld = 0;
    for (size_t a = 0; a < nu; a++)
      ld += 2 * log(L[a * nu + a]);
    to->logdet[c] = ld;
  }
}

static int ce_alloc(ce_t *ce) {
  size_t N = ce->N, nu = ce->nu, K = ce->K, C = ce->chunk;
  ce->us = bk_calloc(C * nu, sizeof *ce->us);
  ce->lw = bk_calloc(C, sizeof *ce->lw);
  ce->logw = bk_calloc(N, sizeof *ce->logw);
  ce->geff = bk_calloc(N, sizeof *ce->geff);
  ce->sorted = bk_calloc(N, sizeof *ce->sorted);
  ce->elite = (size_t *)bk_calloc(N, sizeof *ce->elite);
  ce->ew = bk_calloc(N, sizeof *ce->ew);
  ce->wc = bk_calloc(N, sizeof *ce->wc);
  ce->ecap = CHUNK_DOUBLES / nu < N ? CHUNK_DOUBLES / nu : N;
  ce->ex = bk_calloc(ce->ecap ? ce->ecap * nu : 1, sizeof *ce->ex);
  ce->scratch = bk_calloc(2 * nu, sizeof *ce->scratch);
  ce->resp = bk_calloc(N * K, sizeof *ce->resp);
  ce->cov = bk_calloc(ce->full ? 3 * nu * nu : nu, sizeof *ce->cov);
  ce->tmp = bk_calloc(nu, sizeof *ce->tmp);
  ce->z = bk_calloc(nu, sizeof *ce->z);
  ce->lc = bk_calloc(K, sizeof *ce->lc);
  if (!ce->us || !ce->lw || !ce->logw || !ce->geff || !ce->sorted ||
      !ce->elite || !ce->ew || !ce->wc || !ce->ex || !ce->scratch ||
      !ce->resp || !ce->cov || !ce->tmp || !ce->z || !ce->lc ||
      gm_init(&ce->h, nu, K, ce->full) || gm_init(&ce->hn, nu, K, ce->full) ||
      bk_mctx_reserve(&ce->ctx, C))
    return bk_mctx_nomem(&ce->ctx);
  return 0;
}

static void ce_free(ce_t *ce) {
  gm_close(&ce->h);
  gm_close(&ce->hn);
  bk_free(ce->us);
  bk_free(ce->lw);
  bk_free(ce->logw);
  bk_free(ce->geff);
  bk_free(ce->sorted);
  bk_free(ce->elite);
  bk_free(ce->ew);
  bk_free(ce->wc);
  bk_free(ce->ex);
  bk_free(ce->scratch);
  bk_free(ce->resp);
  bk_free(ce->cov);
  bk_free(ce->tmp);
  bk_free(ce->z);
  bk_free(ce->lc);
}

/* Point `index` of the current density h (see gm_sample) and its
 * log-weight log phi(u) - log h(u). */
static double draw_mixture(void *data, uint64_t stream, uint64_t index,
                           double *u) {
  ce_t *ce = data;
  gm_sample(&ce->h, ce->ctx.s->seed, stream, index, u, ce->z);
  return log_phi(u, ce->nu) - gm_logpdf(&ce->h, u, ce->tmp, ce->lc);
}

static int cmp_double(const void *a, const void *b) {
  double x = *(const double *)a, y = *(const double *)b;
  return (x > y) - (x < y);
}

/* The step's threshold: the rho-quantile of the valid g of the batch,
 * raised to 0 (then the adaptation has reached the failure domain). */
static int threshold(ce_t *ce, int t) {
  size_t nv = 0;
  for (size_t i = 0; i < ce->N; i++)
    if (!isnan(ce->geff[i]))
      ce->sorted[nv++] = ce->geff[i];
  if (nv == 0)
    return bk_error_set(ce->ctx.err, BK_EMODEL, NULL, 0, 0,
                        "every evaluation of adaptation step %d failed; "
                        "the cross-entropy method cannot go on",
                        t);
  qsort(ce->sorted, nv, sizeof *ce->sorted, cmp_double);
  size_t q = (size_t)ceil(ce->ctx.s->analysis.cross_entropy.rho * (double)nv);
  if (q < 1)
    q = 1;
  ce->gamma = ce->sorted[q - 1];
  if (ce->gamma <= 0) {
    ce->gamma = 0;
    ce->reached = 1;
  }
  return 0;
}

/* The elite set of the step drawn under `prefix`: the points at or below
 * the threshold, in index order, with weights phi / h scaled by the
 * largest (so the largest is 1); held in ex when they fit, else drawn
 * again when needed. Returns their count. */
static size_t elite_set(ce_t *ce, const char *prefix) {
  size_t ne = 0;
  double lmax = -INFINITY;
  for (size_t i = 0; i < ce->N; i++)
    if (!isnan(ce->geff[i]) && ce->geff[i] <= ce->gamma && ce->logw[i] > lmax)
      lmax = ce->logw[i];
  for (size_t i = 0; i < ce->N; i++) {
    if (isnan(ce->geff[i]) || ce->geff[i] > ce->gamma)
      continue;
    ce->elite[ne] = i;
    ce->ew[ne] = exp(ce->logw[i] - lmax);
    ne++;
  }
  ce->estream = bk_rng_stream(prefix);
  ce->stored = 0;
  if (ne <= ce->ecap) {
    for (size_t j = 0; j < ne; j++)
      memcpy(ce->ex + j * ce->nu, elite_u(ce, j, 0), ce->nu * sizeof *ce->ex);
    ce->stored = 1;
  }
  return ne;
}

/* Fits the next density to the ne elite points and, when the fit forms,
 * smooths its covariances towards the current density's (when fitted)
 * and makes it current. Returns 0 or BK_ENOMEM with err set. */
static int refit(ce_t *ce, size_t ne) {
  size_t nu = ce->nu;
  int frc = gm_fit(ce, &ce->hn, ce->K, ce->ew, ne);
  if (frc == -2)
    return bk_mctx_nomem(&ce->ctx);
  if (frc != 0)
    return 0;
  if (ce->full) {
    double *pool = ce->cov + 2 * nu * nu;
    gm_pooled(&ce->h, pool);
    /* Fewer effective elite points than dimensions give a covariance
     * whose eigenvalues scatter widely; lean on the previous density the
     * more, the fewer points there are per dimension. */
    double a1 = 0, a2 = 0;
    for (size_t i = 0; i < ne; i++) {
      a1 += ce->ew[i];
      a2 += ce->ew[i] * ce->ew[i];
    }
    double neff = a1 * a1 / a2;
    double alpha = ALPHA * neff / (neff + (double)nu);
    gm_smooth(&ce->hn, pool, ce->cov, alpha);
  }
  gm_t sw = ce->h;
  ce->h = ce->hn;
  ce->hn = sw;
  return 0;
}

/* Adaptation step t: one batch "ce/s<t>" from h (in chunks), its
 * threshold, the elite set and the next density. */
static int adapt_step(ce_t *ce, int t) {
  bk_mctx_t *m = &ce->ctx;
  char prefix[48];
  snprintf(prefix, sizeof prefix, "ce/s%d", t);
  int rc;
  for (size_t first = 0; first < ce->N; first += ce->chunk) {
    size_t n = ce->N - first < ce->chunk ? ce->N - first : ce->chunk;
    rc = bk_weighted_batch(m, prefix, first, n, draw_mixture, ce, ce->us,
                           ce->lw);
    if (rc)
      return rc;
    for (size_t i = 0; i < n; i++) {
      ce->geff[first + i] = bk_mctx_g(m, i);
      ce->logw[first + i] = ce->lw[i];
    }
  }
  if ((rc = threshold(ce, t)) || (rc = refit(ce, elite_set(ce, prefix))))
    return rc;
  ce->steps = t + 1;
  if (bk_result_detailf(m->res, ce->gamma, "threshold step %d", t))
    return bk_mctx_nomem(m);
  m->res->est.pf = NAN;
  m->res->est.cov = NAN;
  bk_mctx_progress(m);
  return 0;
}

/* The adaptation: steps until the threshold reaches 0, max_steps, or too
 * little of max_evaluations is left for a step and a final batch. */
static int adapt(ce_t *ce) {
  bk_mctx_t *m = &ce->ctx;
  const bk_analysis_t *a = &m->s->analysis;
  bk_result_t *res = m->res;
  ce->gamma = INFINITY;
  int rc;
  for (int t = 0; t < a->cross_entropy.max_steps && !ce->reached; t++) {
    if (m->n + 2 * (uint64_t)ce->N > a->max_evaluations)
      break;
    if ((rc = adapt_step(ce, t)))
      return rc;
  }
  if (bk_result_detail(res, "adaptation steps", ce->steps) ||
      bk_result_detail(res, "mixture components", (double)ce->h.k) ||
      bk_result_detail(res, "covariances fitted", ce->full))
    return bk_mctx_nomem(m);
  if (ce->reached)
    return 0;
  if (ce->steps == 0)
    return bk_error_set(m->err, BK_EINVAL, m->s->path, 0, 0,
                        "analysis.max_evaluations (%llu) leaves no room for "
                        "cross-entropy with %zu points per step; raise it",
                        (unsigned long long)a->max_evaluations, ce->N);
  if (bk_result_warn(res,
                     "the adaptation stopped after %d steps with the "
                     "threshold at %g, not 0: the sampling density may miss "
                     "part of the failure domain (raise "
                     "analysis.cross_entropy.max_steps or analysis.samples)",
                     ce->steps, ce->gamma))
    return bk_mctx_nomem(m);
  return 0;
}

/* The final density is widened: its covariances are scaled by
 * 1 + 1/sqrt(nu). A fitted Gaussian has lighter tails than the optimal
 * density whenever the failure domain is curved in u-space (e.g. a sum
 * of skewed variables), and the weights of points in those tails make
 * the variance estimate too small; widening bounds them, at a cost that
 * stays small in high dimension (the factor tends to 1). On the sum of
 * 20 exponentials it raised the interval coverage from about 75% to 90%
 * and lowered the evaluations needed. Only fitted covariances are
 * widened: the identity is the original density's own. */
static void widen(gm_t *h) {
  size_t nu = h->nu;
  if (!h->L)
    return;
  double f = 1 + 1 / sqrt((double)nu);
  for (size_t c = 0; c < h->k; c++) {
    for (size_t q = 0; q < nu * nu; q++)
      h->L[c * nu * nu + q] *= sqrt(f);
    h->logdet[c] += (double)nu * log(f);
  }
}

/* Sees each evaluated final point: a failing one adds w log w and w to
 * the divergence sums, kept in units of exp(kl_max) (as the estimator's
 * own sums) so that no weight underflows. */
static void seen_final(void *data, uint64_t index, const double *u, double g) {
  ce_t *ce = data;
  (void)index;
  if (!(g <= 0))
    return;
  double lw = log_phi(u, ce->nu) - gm_logpdf(&ce->h, u, ce->tmp, ce->lc);
  if (lw > ce->kl_max) {
    double r = exp(ce->kl_max - lw);
    ce->kl_a = ce->kl_a * r + lw;
    ce->kl_s = ce->kl_s * r + 1;
    ce->kl_max = lw;
  } else {
    double v = exp(lw - ce->kl_max);
    ce->kl_a += v * lw;
    ce->kl_s += v;
  }
}

/* The Kullback-Leibler divergence of the sampling density h from the
 * optimal one, phi I(g <= 0) / Pf: KL = E[log w] - log Pf under the
 * optimal density, estimated by the weighted mean of log w over the
 * failing points (self-normalised) and the log of the estimate. 0 when
 * nothing failed. */
static double kl_estimate(const ce_t *ce, const bk_estimate_wsum_t *est) {
  if (est->k == 0 || !(ce->kl_s > 0))
    return 0;
  double kl = ce->kl_a / ce->kl_s - bk_estimate_wsum_log_mean(est);
  return kl > 0 ? kl : 0;
}

/* The stopping gate of the final phase (see the file comment). */
static int may_stop(void *data, const bk_weighted_t *w) {
  const ce_t *ce = data;
  const bk_estimate_wsum_t *est = &w->est;
  return est->k >= MIN_FAILURES && bk_estimate_wsum_ess(est) >= MIN_ESS &&
         log((double)w->n) >= kl_estimate(ce, est);
}

/* The estimation with the final density (weighted.h), its details and
 * warnings. */
static int estimate(ce_t *ce) {
  bk_mctx_t *m = &ce->ctx;
  bk_result_t *res = m->res;
  ce->kl_max = -INFINITY;
  ce->kl_a = ce->kl_s = 0;
  bk_weighted_t w = {.prefix = "ce/final",
                     .batch = ce->chunk,
                     .draw = draw_mixture,
                     .seen = seen_final,
                     .may_stop = may_stop,
                     .data = ce};
  int rc = bk_weighted_run(m, &w);
  if (rc)
    return rc;
  uint64_t k = w.est.k;
  double ess = bk_estimate_wsum_ess(&w.est);
  double kl = kl_estimate(ce, &w.est);
  if (bk_result_detail(res, "final samples", (double)w.n) ||
      bk_result_detail(res, "effective sample size", ess) ||
      bk_result_detail(res, "divergence from the optimal density", kl))
    return bk_mctx_nomem(m);
  const char *advice =
      ce->full ? "try more analysis.cross_entropy.components or "
                 "analysis.samples, or subset simulation"
               : "with many random variables use subset simulation "
                 "(method: subset), which does not degenerate with the "
                 "dimension";
  /* With a well-fitted density the weights of the failing points are all
   * close to Pf, and the effective sample size is close to their count;
   * a few dozen effective points are too few for the variance estimate. */
  if (k > 0 && (ess < 0.01 * (double)k || ess < MIN_ESS))
    rc = bk_result_warn(
        res,
        "the importance weights are degenerate: the %llu failing "
        "points count as %.1f (effective sample size), so the "
        "interval is unreliable; the sampling density does not match "
        "the failure domain (%s)",
        (unsigned long long)k, ess, advice);
  else if (k > 0 && log((double)w.n) < kl)
    rc = bk_result_warn(
        res,
        "the sampling density is far from the failure domain: its "
        "divergence from the optimal density (%.1f) asks for about "
        "exp(%.1f) = %.3g samples (Chatterjee & Diaconis 2018), more "
        "than the %llu drawn, so Pf may be far too low whatever its "
        "interval says (%s)",
        kl, kl, exp(kl), (unsigned long long)w.n, advice);
  else if (k > 0 && k < MIN_FAILURES)
    rc = bk_result_warn(res,
                        "only %llu final samples failed: too few for the "
                        "interval to be trusted (raise max_evaluations)",
                        (unsigned long long)k);
  if (k == 0)
    rc = bk_result_warn(res,
                        "no failure was seen in %llu final "
                        "samples; Pf is not estimated",
                        (unsigned long long)w.n);
  if (rc)
    return bk_mctx_nomem(m);
  return 0;
}

int bk__method_cross_entropy(const bk_study_t *s, bk_evaluator_t *ev,
                             const bk_method_opts_t *opts, bk_result_t *res,
                             bk_error_t *err) {
  const bk_analysis_t *a = &s->analysis;
  ce_t ce;
  memset(&ce, 0, sizeof ce);
  bk_mctx_init(&ce.ctx, s, ev, opts, res, err);
  ce.nu = ce.ctx.nu;
  ce.N = (size_t)a->samples;
  ce.K = (size_t)a->cross_entropy.components;
  /* The loader refuses a study of constants only and fewer than 2 points
   * per step. */
  assert(ce.nu > 0 && ce.N >= 2);
  ce.chunk = CHUNK_DOUBLES / ce.nu;
  if (ce.chunk > ce.N)
    ce.chunk = ce.N;
  if (ce.chunk < 1)
    ce.chunk = 1;
  double nelite = a->cross_entropy.rho * (double)ce.N;
  ce.full = nelite >= 0.5 * (double)ce.nu * (double)ce.nu;
  int rc = ce_alloc(&ce);
  if (rc)
    goto out;
  gm_standard(&ce.h);
  /* Each step fits nu (nu + 3) / 2 parameters per component from about
   * rho * N points. Measured on the sum of 20 exponentials (bench_rare):
   * 500 points per step needed over 100000 evaluations and mis-stated the
   * interval, 1500 to 2000 about 12000; hence the advice of 100 per
   * dimension. */
  if (ce.full && ce.N < 100 * ce.nu &&
      bk_result_warn(res,
                     "analysis.samples (%zu points per step) is small for %zu "
                     "random variables: each step fits a full covariance "
                     "from about %.0f points; use at least %zu",
                     ce.N, ce.nu, nelite, 100 * ce.nu)) {
    rc = bk_mctx_nomem(&ce.ctx);
    goto out;
  }
  if ((rc = adapt(&ce)))
    goto out;
  widen(&ce.h);
  if ((rc = estimate(&ce)))
    goto out;
  rc = bk_mctx_finish(&ce.ctx);
out:
  bk_mctx_close(&ce.ctx);
  ce_free(&ce);
  return rc;
}
