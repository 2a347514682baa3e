/*
 * Surrogate-assisted reliability analysis: a Gaussian-process surrogate of g
 * in standard normal space (numerics/gp.h) refined by active learning
 * (numerics/learn.h), and an estimate that never rests on the surrogate
 * alone: a control-variate correction by model runs keeps it unbiased
 * whatever the surrogate's quality.
 *
 * 1. Starting design: a Latin hypercube of analysis.surrogate.start_points
 *    points (default max(10, 2 nu + 2)) mapped through Phi^-1 and scaled
 *    by s0 = min(2, max(1, 6 / sqrt(nu))), so that the design reaches
 *    radii of about 2.5 to 6 where small failure probabilities live.
 *    Keys "sg/t0/<j>".
 * 2. Learning iterations t = 1, 2, ...: the surrogate (anisotropic Matern
 *    5/2, maximum likelihood, a nugget when the model is noisy, warm-
 *    started from the previous fit; with trend auto the constant and the
 *    linear trend are both fitted and the one of smaller BIC kept) builds,
 *    with no model run, two populations in u-space by subset simulation
 *    (levels of conditional probability 0.1, down to 1e-12; level 0 is
 *    10 npop points of phi): one on mu alone, down to mu <= 0, and an
 *    exploring one on mu - 4 s, down to where failure is plausible. The
 *    exploring population's levels are the candidates, with points on the
 *    sphere of radius beta_s - 0.3 (beta_s the surrogate's reliability
 *    index). The batch of analysis.surrogate.batch points is chosen by the
 *    learning function U (Echard, Gayton & Lemaire 2011) or EFF (Bichon et
 *    al. 2008), spread by weighted k-means over the margin probability
 *    (Dubourg, Sudret & Bourinet 2011) or by the Kriging believer
 *    (Ginsbourger et al. 2010); while a sphere point has U < 4, one point
 *    of the batch goes to the sphere's least certain point (see sphere()).
 *    Keys "sg/t<t>/<j>"; one evaluator call per iteration. Learning on
 *    the surrogate's own populations follows the subset-simulation
 *    variants of active learning (Huang, Chen & Zhu 2016, Structural
 *    Safety 59:86-95, from memory).
 * 3. The proposal q: Gaussians fitted to clusters of both populations'
 *    last levels (see fit_mixture), refitted twice to points of q weighted
 *    by pi phi / q (adaptive importance sampling on the surrogate alone,
 *    which restores each failure region's share), mixed with phi itself
 *    at weight 0.1 (a defensive mixture, Hesterberg 1995, Technometrics
 *    37(2):185-194), so that w = phi / q never exceeds 10 and q > 0
 *    everywhere.
 * 4. The estimate (a control variate whose mean is computed on the
 *    surrogate; Peherstorfer, Willcox & Gunzburger 2016, SIAM J. Sci.
 *    Comput. 38(5):A3163-A3194, and Peherstorfer, Cui, Marzouk & Willcox
 *    2016, Comput. Methods Appl. Mech. Eng. 300:490-509, from memory):
 *       Pf = E_phi[pi] + E_phi[1{g <= 0} - pi],
 *    pi = Phi(-mu / s) the surrogate's probability of failure at u
 *    (Dubourg, Sudret & Deheeger 2013). The first term, Pf_s, is an
 *    importance-sampling mean of pi w over M points of q, the surrogate
 *    only (M doubled from 20000 until its cov is at most 0.4 target_cov);
 *    the second, the correction, the mean of (1{g <= 0} - pi) w over N
 *    points of q with model runs, keys "sg/c/<i>", in batches of `batch`
 *    points. Both are unbiased for any surrogate (q > 0 wherever the
 *    integrands are not 0) and independent (separate streams), so their
 *    variances add. A good surrogate makes the correction's terms nearly
 *    all 0 and N small; a poor one makes them large, and the correction
 *    costs runs as importance sampling would, without losing honesty.
 *    The correction's variance is the largest of: the sample variance;
 *    the surrogate's prediction E_q[pi (1 - pi) w^2] / N (under the
 *    surrogate a point fails with probability pi); and (Pf / (N + 2))^2
 *    (see correct()). The interval is normal, cut at 0.
 * 5. Stopping. The correction runs needed for a cov of 0.9 target_cov
 *    are predicted from E_phi[pi (1 - pi) phi / q] (the larger of its
 *    importance-sampling estimate and its estimate over the exploring
 *    population's levels as strata, which see regions q hardly covers).
 *    Learning stops when they are at most MIN_CORR, or when learning no
 *    longer lowers the predicted total of runs for PATIENCE_ITER
 *    iterations, or when it has spent training_share of max_evaluations;
 *    never while a sphere point has U < 4. The correction stops at
 *    target_cov (checked after whole batches, from MIN_CORR runs on) or
 *    at max_evaluations.
 *
 * Determinism: every random number comes from the counter-based stream
 * addressed by (seed, a label of the iteration, index); the fits start
 * from fixed points and BLAS runs on one thread; so every decision is a
 * function of (study, seed, responses so far) and a resumed run replays
 * the same keys.
 *
 * Model errors: a faulty training point is left out of the surrogate
 * (and counted); a faulty correction point is left out of the estimate
 * (on_error: skip; pf_bounds take it as safe and as failed) or counted as
 * failed (fail); abort and the error limit act through the method context.
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "numerics/gp.h"
#include "numerics/learn.h"
#include "numerics/order.h"
#include "numerics/rng.h"
#include "numerics/sampler.h"
#include "numerics/special.h"

#define P0            0.1    /* conditional probability per population level */
#define MAX_LEVELS    12     /* so populations reach Pf 1e-12 */
#define KAPPA         4.0    /* exploring population: mu - KAPPA s <= 0 */
#define BAND_K        2.0    /* the learning curve's band: mu -+ BAND_K s */
#define MAX_COMP      16     /* mixture components */
#define DEFENSIVE     0.1    /* weight of phi in the proposal */
#define MIN_CORR      20     /* correction runs before target_cov counts */
#define N0_MAX        20000  /* points of phi in a population's level 0 */
#define M_ADAPT       4000   /* points per refit of the proposal */
#define M_LEARN       4000   /* points per learning estimate */
#define M_FINAL       20000  /* first size of the final surrogate estimate */
#define M_FINAL_MAX   320000 /* its largest size */
#define SHARE_CORR    0.9    /* cov allotted to the correction / target */
#define SHARE_SURR    0.4    /* cov allotted to the surrogate part */
#define PATIENCE_ITER 3      /* learning iterations without gain */
#define CHUNK         1024   /* points per prediction call */
#define MANY_VARS     20     /* beyond this, warn */
#define SPHERE_U                                                               \
  4.0 /* learning goes on, and explores, while a sphere                        \
         candidate has U below this */
#define MARGIN_K 1.959963984540054 /* Phi^-1(0.975) */

/* A Gaussian mixture mixed with phi: q = lambda phi + (1 - lambda)
 * sum_k w_k N(mean_k, L_k L_k^T). */
typedef struct {
  size_t k;
  double lambda;
  double w[MAX_COMP];
  double logdet[MAX_COMP]; /* sum of log diag L_k */
  double *mean;            /* k x nu */
  double *chol;            /* k x nu x nu, lower triangular */
} mix_t;

/* Sums of the surrogate-only estimate over M points of q. */
typedef struct {
  double m;      /* points */
  double pf;     /* Pf_s, mean of pi w */
  double var;    /* variance of that mean */
  double vpred;  /* E_q[pi (1 - pi) w^2]: predicted correction variance */
  double lo, hi; /* means of 1{mu + KAPPA s <= 0} w and 1{mu - KAPPA s <= 0}
                    w: the surrogate's own band */
} sest_t;

typedef struct {
  bk_mctx_t ctx;
  const bk_study_t *s;
  const bk_surrogate_opts_t *o;
  bk_result_t *res;
  bk_error_t *err;
  size_t nu;
  /* Training set: successful points only. */
  double *tu, *ty;
  size_t nt, capt;
  uint64_t train_runs, train_faults, train_failures;
  bk_gp_t *gp;
  double lengths[2][BK_GP_MAXDIM]; /* last fit of each trend */
  int have_lengths[2];
  double warm_nugget[2];
  /* Population and candidates (level 0 then the last level). */
  size_t n0, npop;           /* level 0's points; each later level's */
  double *cand;              /* n0 + MAX_LEVELS npop points (see population) */
  double *cmu, *csd;         /* their mean and sd */
  int reached;               /* the last level is mu - KAPPA s <= 0 */
  int levels;                /* levels after level 0 */
  size_t nsphere;            /* candidates on a sphere after the levels */
  size_t nmean;              /* the last level of the population on mu
                                alone, right after the levels */
  double kappa;              /* the population's region: mu - kappa s */
  double *keep, *kmu, *ksd;  /* scratch: a last level kept */
  double lb[MAX_LEVELS + 2]; /* threshold of each level; lb[0] = inf */
  double lp[MAX_LEVELS + 2]; /* P(G <= lb[l]) */
  /* Proposal. */
  mix_t q;
  /* Scratch for predictions. */
  double *pu, *pm, *pv;
} sg_t;

static double mix_logpdf(const mix_t *q, size_t nu, const double *u);
static const double *last_level(const sg_t *g, size_t *n);

/* ---------------------------------------------------------------------- */
/* Small helpers                                                          */
/* ---------------------------------------------------------------------- */

static int oom(sg_t *g) {
  return bk_error_set(g->err, BK_ENOMEM, NULL, 0, 0, "out of memory");
}

/* Standard normals for (stream, index) in dims [dim, dim + n). */
static void normals(const sg_t *g, uint64_t stream, uint64_t index,
                    uint32_t dim, size_t n, double *z) {
  bk_rng_u01_fill(g->s->seed, stream, index, dim, (uint32_t)n, z);
  for (size_t j = 0; j < n; j++)
    z[j] = bk_norm_icdf(z[j]);
}

static double log_phi(const double *u, size_t nu) {
  double r2 = 0;
  for (size_t j = 0; j < nu; j++)
    r2 += u[j] * u[j];
  return -0.5 * r2 - 0.5 * (double)nu * log(2 * M_PI);
}

/* Mean and standard deviation of the surrogate at m points (any m). */
static int predict(sg_t *g, const double *u, size_t m, double *mu, double *sd) {
  for (size_t i = 0; i < m; i += CHUNK) {
    size_t c = m - i < CHUNK ? m - i : CHUNK;
    int rc = bk_gp_predict(g->gp, u + i * g->nu, c, mu + i, sd ? sd + i : NULL);
    if (rc)
      return bk_error_set(g->err, rc, NULL, 0, 0,
                          "the surrogate's prediction failed (%s)",
                          bk_strerror(rc));
  }
  if (sd)
    for (size_t i = 0; i < m; i++)
      sd[i] = sqrt(sd[i]);
  return 0;
}

/* ---------------------------------------------------------------------- */
/* The surrogate                                                           */
/* ---------------------------------------------------------------------- */

static int add_training(sg_t *g, const double *u, double y) {
  if (g->nt == g->capt) {
    size_t cap = g->capt ? 2 * g->capt : 64;
    double *tu = bk_realloc(g->tu, cap * g->nu * sizeof *tu);
    if (!tu)
      return oom(g);
    g->tu = tu;
    double *ty = bk_realloc(g->ty, cap * sizeof *ty);
    if (!ty)
      return oom(g);
    g->ty = ty;
    g->capt = cap;
  }
  memcpy(g->tu + g->nt * g->nu, u, g->nu * sizeof *u);
  g->ty[g->nt++] = y;
  return 0;
}

/* Fits a process with the given trend, warm-started from the last fit of
 * that trend. Returns 0 with *out set, or a code of bk_gp_new. */
static int fit_trend(sg_t *g, int linear, bk_gp_t **out) {
  bk_gp_options_t o;
  bk_gp_options_default(&o);
  o.kernel = BK_GP_MATERN52;
  o.trend = linear ? BK_GP_TREND_LINEAR : BK_GP_TREND_CONSTANT;
  o.estimate_nugget = g->o->noisy;
  if (g->have_lengths[linear]) {
    o.warm_lengths = g->lengths[linear];
    o.warm_nugget = g->warm_nugget[linear];
    o.nstarts = 2;
  }
  int rc = bk_gp_new(out, g->tu, g->ty, g->nt, g->nu, &o);
  if (rc == 0) {
    memcpy(g->lengths[linear], (*out)->lengths, g->nu * sizeof(double));
    g->warm_nugget[linear] = (*out)->nugget > 0 ? (*out)->nugget : 1e-6;
    g->have_lengths[linear] = 1;
  }
  return rc;
}

/* Refits the surrogate to the training set. With trend auto, both trends
 * are fitted and the one of smaller BIC, -2 log-likelihood + (trend
 * coefficients) ln n (Schwarz 1978), is kept: the linear trend where g is
 * nearly linear in u (it extrapolates well in many dimensions), the
 * constant one elsewhere (it extrapolates to the mean, with a variance
 * that grows away from the data, which keeps unexplored regions
 * uncertain). A linear trend needs nu + 3 points at least. */
static int fit(sg_t *g) {
  if (g->nt < 3)
    return bk_error_set(g->err, BK_EMODEL, NULL, 0, 0,
                        "only %zu training runs of the surrogate succeeded; "
                        "it needs at least 3",
                        g->nt);
  int want = g->o->trend; /* 0 constant, 1 linear, 2 auto */
  int can_linear = g->nt >= g->nu + 3;
  bk_gp_t *c = NULL, *l = NULL;
  int rc = 0, rl = BK_EINVAL;
  if (want != 1 || !can_linear)
    rc = fit_trend(g, 0, &c);
  if (want != 0 && can_linear)
    rl = fit_trend(g, 1, &l);
  if (rc == BK_ENOMEM || rl == BK_ENOMEM) {
    bk_gp_free(c);
    bk_gp_free(l);
    return oom(g);
  }
  bk_gp_t *gp = c;
  if (l && c) {
    double n = (double)g->nt;
    double bic_c = -2 * c->loglik + 1 * log(n);
    double bic_l = -2 * l->loglik + (double)(g->nu + 1) * log(n);
    gp = bic_l < bic_c ? l : c;
  } else if (l) {
    gp = l;
  }
  if (gp != c)
    bk_gp_free(c);
  if (gp != l)
    bk_gp_free(l);
  if (!gp)
    return bk_error_set(g->err, rc ? rc : rl, NULL, 0, 0,
                        "the surrogate cannot be fitted to the %zu training "
                        "runs (all values of g equal, or the points "
                        "degenerate); use method subset instead",
                        g->nt);
  bk_gp_free(g->gp);
  g->gp = gp;
  return 0;
}

/* Evaluates points [0, n) of the batch (already set) under `prefix` as
 * training runs, adding the successful ones to the training set. */
static int run_training(sg_t *g, const char *prefix, size_t n,
                        const double *u) {
  bk_mctx_t *c = &g->ctx;
  int rc = bk_mctx_evaluate(c, prefix, n);
  if (rc)
    return rc;
  for (size_t i = 0; i < n; i++) {
    const bk_point_t *p = &c->pts[i];
    g->train_runs++;
    if (p->fault != BK_FAULT_NONE || !isfinite(p->g)) {
      g->train_faults++;
      continue;
    }
    g->train_failures += p->g <= 0;
    if ((rc = add_training(g, u + i * g->nu, p->g)))
      return rc;
  }
  return 0;
}

/* ---------------------------------------------------------------------- */
/* Populations on the surrogate: subset simulation on G = mu - KAPPA s     */
/* ---------------------------------------------------------------------- */

/* Runs Markov chains from `ns` seeds (rows of seeds, with their mu and sd)
 * within G <= b until `n` states are made (seeds included), writing states
 * to out (n x nu) and their mu, sd. Conditional sampling with the
 * phi-invariant proposal v = rho u + sigma z (adaptive conditional
 * sampling, Papaioannou, Betz, Zwirglmaier & Straub 2015, Probabilistic
 * Engineering Mechanics 41:89-103), lambda adapted towards acceptance
 * 0.44. */
static int chains(sg_t *g, uint64_t stream, const double *seeds,
                  const double *smu, const double *ssd, size_t ns, double b,
                  size_t n, double *out, double *omu, double *osd) {
  size_t nu = g->nu;
  size_t len = (n + ns - 1) / ns;
  double sig0[BK_GP_MAXDIM];
  for (size_t j = 0; j < nu; j++) {
    double m = 0, v = 0;
    for (size_t c = 0; c < ns; c++)
      m += seeds[c * nu + j];
    m /= (double)ns;
    for (size_t c = 0; c < ns; c++)
      v += (seeds[c * nu + j] - m) * (seeds[c * nu + j] - m);
    sig0[j] = ns > 1 ? sqrt(v / (double)(ns - 1)) : 1;
    if (!(sig0[j] > 1e-3))
      sig0[j] = 1e-3;
  }
  double *cur = bk_malloc(ns * nu * sizeof *cur);
  double *cmu = bk_malloc(ns * sizeof *cmu), *csd = bk_malloc(ns * sizeof *csd);
  double *prop = bk_malloc(ns * nu * sizeof *prop);
  double *pmu = bk_malloc(ns * sizeof *pmu), *psd = bk_malloc(ns * sizeof *psd);
  int rc = 0;
  if (!cur || !cmu || !csd || !prop || !pmu || !psd) {
    rc = oom(g);
    goto done;
  }
  memcpy(cur, seeds, ns * nu * sizeof *cur);
  memcpy(cmu, smu, ns * sizeof *cmu);
  memcpy(csd, ssd, ns * sizeof *csd);
  size_t k = 0;
  double lambda = 0.6;
  for (size_t c = 0; c < ns && k < n; c++, k++) {
    memcpy(out + k * nu, cur + c * nu, nu * sizeof *out);
    omu[k] = cmu[c];
    osd[k] = csd[c];
  }
  double z[BK_GP_MAXDIM];
  for (size_t step = 1; step < len && k < n; step++) {
    for (size_t c = 0; c < ns; c++) {
      normals(g, stream, step * ns + c, 0, nu, z);
      for (size_t j = 0; j < nu; j++) {
        double sg = lambda * sig0[j];
        if (sg > 1)
          sg = 1;
        double rho = sqrt(1 - sg * sg);
        prop[c * nu + j] = rho * cur[c * nu + j] + sg * z[j];
      }
    }
    if ((rc = predict(g, prop, ns, pmu, psd)))
      goto done;
    size_t acc = 0;
    for (size_t c = 0; c < ns; c++) {
      if (pmu[c] - g->kappa * psd[c] <= b) {
        memcpy(cur + c * nu, prop + c * nu, nu * sizeof *cur);
        cmu[c] = pmu[c];
        csd[c] = psd[c];
        acc++;
      }
    }
    for (size_t c = 0; c < ns && k < n; c++, k++) {
      memcpy(out + k * nu, cur + c * nu, nu * sizeof *out);
      omu[k] = cmu[c];
      osd[k] = csd[c];
    }
    double a = (double)acc / (double)ns;
    lambda *= exp((a - 0.44) / sqrt((double)step));
    if (lambda > 10)
      lambda = 10;
  }
done:
  bk_free(cur);
  bk_free(cmu);
  bk_free(csd);
  bk_free(prop);
  bk_free(pmu);
  bk_free(psd);
  return rc;
}

/* Builds the population of iteration `it`: level 0, n0 points of phi, at
 * cand[0, n0); then levels 1..L of npop points each, level l at
 * cand[n0 + (l - 1) npop, ...), points of phi restricted to G <= b_l, with
 * P(G <= b_l) about lp[l]. Level 1 grows from p0 npop seeds taken in index
 * order among the level-0 points below b_1 (independent points of phi
 * there, so any choice that ignores their G keeps the distribution). The
 * last level has b_L = 0 when the surrogate reaches failure (reached). */
static int population(sg_t *g, const char *prefix, int it) {
  size_t nu = g->nu, N = g->npop, n0 = g->n0;
  size_t nc = (size_t)(P0 * (double)N);
  char label[48];
  snprintf(label, sizeof label, "%s%d", prefix, it);
  uint64_t st0 = bk_rng_stream(label);
  for (size_t i = 0; i < n0; i++)
    normals(g, st0, i, 0, nu, g->cand + i * nu);
  int rc = predict(g, g->cand, n0, g->cmu, g->csd);
  if (rc)
    return rc;
  size_t cap = n0 > N ? n0 : N;
  bk_order_pair_t *rk = bk_malloc(cap * sizeof *rk);
  double *seeds = bk_malloc(cap * nu * sizeof *seeds);
  double *smu = bk_malloc(cap * sizeof *smu),
         *ssd = bk_malloc(cap * sizeof *ssd);
  if (!rk || !seeds || !smu || !ssd) {
    rc = oom(g);
    goto done;
  }
  g->reached = 0;
  g->levels = 0;
  g->lb[0] = INFINITY;
  g->lp[0] = 1;
  size_t off = 0, n = n0; /* the current level */
  for (int l = 0; l < MAX_LEVELS; l++) {
    const double *cur = g->cand + off * nu;
    const double *cmu = g->cmu + off, *csd = g->csd + off;
    size_t nbelow0 = 0;
    for (size_t i = 0; i < n; i++) {
      rk[i].v = cmu[i] - g->kappa * csd[i];
      rk[i].i = i;
      nbelow0 += rk[i].v <= 0;
    }
    size_t need = l == 0 ? (size_t)(P0 * (double)n) : nc;
    double b;
    if (nbelow0 >= need) {
      b = 0;
      g->reached = 1;
    } else {
      bk_order_sort(rk, n);
      b = rk[need - 1].v;
    }
    /* Seeds: the points with G <= b in index order, at most nc of them
     * (the level-0 ones are independent; later levels' are chain states
     * and all are used when fewer than nc). */
    size_t nb = 0, ns = 0;
    for (size_t i = 0; i < n; i++) {
      if (!(cmu[i] - g->kappa * csd[i] <= b))
        continue;
      nb++;
      if (ns < nc || (l > 0 && g->reached)) {
        if (ns < cap) {
          memcpy(seeds + ns * nu, cur + i * nu, nu * sizeof *seeds);
          smu[ns] = cmu[i];
          ssd[ns] = csd[i];
          ns++;
        }
      }
    }
    if (ns == 0)
      break;
    if (g->reached && l > 0 && nb == n)
      break; /* this level lies in the region already */
    g->lb[l + 1] = b;
    g->lp[l + 1] = g->lp[l] * (double)nb / (double)n;
    size_t noff = n0 + (size_t)l * N;
    snprintf(label, sizeof label, "%s%d/l%d", prefix, it, l + 1);
    if ((rc = chains(g, bk_rng_stream(label), seeds, smu, ssd, ns, b, N,
                     g->cand + noff * nu, g->cmu + noff, g->csd + noff)))
      goto done;
    g->levels = l + 1;
    off = noff;
    n = N;
    if (g->reached)
      break;
  }
done:
  bk_free(rk);
  bk_free(seeds);
  bk_free(smu);
  bk_free(ssd);
  return rc;
}

/* The populations of iteration `it`: on mu alone (kappa 0, streams
 * "sg/m<it>..."), whose regions keep the shares the surrogate gives them,
 * then the exploring one (kappa KAPPA, "sg/p<it>..."), whose levels drift
 * towards where the surrogate is unsure and can lose a well-known region
 * on the way. The candidates are the exploring population's levels; the
 * last level of the first follows them, and both last levels seed the
 * proposal. */
static int two_populations(sg_t *g, int it) {
  size_t nu = g->nu, n;
  g->kappa = 0;
  int rc = population(g, "sg/m", it);
  if (rc)
    return rc;
  const double *x = last_level(g, &n);
  const double *mu = g->cmu + (x - g->cand) / nu,
               *sd = g->csd + (x - g->cand) / nu;
  memcpy(g->keep, x, n * nu * sizeof *x);
  memcpy(g->kmu, mu, n * sizeof *mu);
  memcpy(g->ksd, sd, n * sizeof *sd);
  g->kappa = KAPPA;
  if ((rc = population(g, "sg/p", it)))
    return rc;
  size_t off = g->n0 + (size_t)g->levels * g->npop;
  memcpy(g->cand + off * nu, g->keep, n * nu * sizeof *x);
  memcpy(g->cmu + off, g->kmu, n * sizeof *mu);
  memcpy(g->csd + off, g->ksd, n * sizeof *sd);
  g->nmean = n;
  return 0;
}

/* The points of the population and their count. */
static size_t pop_size(const sg_t *g) {
  return g->n0 + (size_t)g->levels * g->npop + g->nmean + g->nsphere;
}

/* Candidates on the sphere of radius beta_s - 0.3 (beta_s the surrogate's
 * reliability index; at least 0.5), appended after the levels: all of
 * them have the same density, nearly that of the design points found, so
 * one with U < 2 marks a direction where the surrogate cannot exclude a
 * failure region about as likely as the ones it knows (a second design
 * point that the levels, which follow the regions already found, would
 * miss). Returns the smallest U among them. */
static int sphere(sg_t *g, int it, double pf, double *umin, size_t *imin) {
  size_t nu = g->nu, n = g->npop;
  size_t off = g->n0 + (size_t)g->levels * g->npop + g->nmean;
  double r = -bk_norm_icdf(pf) - 0.3;
  if (!(r > 0.5))
    r = 0.5;
  char label[48];
  snprintf(label, sizeof label, "sg/r%d", it);
  uint64_t st = bk_rng_stream(label);
  double *x = g->cand + off * nu;
  for (size_t i = 0; i < n; i++) {
    normals(g, st, i, 0, nu, x + i * nu);
    double r2 = 0;
    for (size_t j = 0; j < nu; j++)
      r2 += x[i * nu + j] * x[i * nu + j];
    double f = r / sqrt(r2 > 0 ? r2 : 1);
    for (size_t j = 0; j < nu; j++)
      x[i * nu + j] *= f;
  }
  int rc = predict(g, x, n, g->cmu + off, g->csd + off);
  if (rc)
    return rc;
  g->nsphere = n;
  double m = INFINITY;
  for (size_t i = 0; i < n; i++) {
    double v = bk_learn_u(g->cmu[off + i], g->csd[off + i]);
    if (v < m) {
      m = v;
      *imin = off + i;
    }
  }
  *umin = m;
  return 0;
}

/* The last level (the proposal is fitted to it). */
static const double *last_level(const sg_t *g, size_t *n) {
  if (g->levels == 0) {
    *n = g->n0;
    return g->cand;
  }
  *n = g->npop;
  return g->cand + (g->n0 + (size_t)(g->levels - 1) * g->npop) * g->nu;
}

/* Stratified estimates over the population (subset simulation's levels as
 * strata S_l = {b_{l+1} < G <= b_l}, the last one G <= b_L; Au & Beck
 * 2001): E_phi[f] = sum_l P_l mean over level l of f 1{S_l}. Fills, for
 * the learning curve and the stopping rule, Pf_s = E[pi], the band
 * E[1{mu + BAND_K s <= 0}] and E[1{mu - BAND_K s <= 0}], and the predicted
 * variance of one correction term E_phi[pi (1 - pi) phi / q]. */
static void pop_estimate(const sg_t *g, sest_t *e) {
  double f[4] = {0};
  size_t nu = g->nu;
  for (int l = 0; l <= g->levels; l++) {
    size_t off = l == 0 ? 0 : g->n0 + (size_t)(l - 1) * g->npop;
    size_t n = l == 0 ? g->n0 : g->npop;
    double hi = g->lb[l], lo = l < g->levels ? g->lb[l + 1] : -INFINITY;
    double s[4] = {0};
    for (size_t i = off; i < off + n; i++) {
      double mu = g->cmu[i], sd = g->csd[i], G = mu - g->kappa * sd;
      if (!(G <= hi && G > lo))
        continue;
      double pi = bk_learn_pi(mu, sd);
      const double *u = g->cand + i * nu;
      double w = exp(log_phi(u, nu) - mix_logpdf(&g->q, nu, u));
      s[0] += pi;
      s[1] += mu + BAND_K * sd <= 0;
      s[2] += mu - BAND_K * sd <= 0;
      s[3] += pi * (1 - pi) * w;
    }
    for (int k = 0; k < 4; k++)
      f[k] += g->lp[l] * s[k] / (double)n;
  }
  e->m = (double)pop_size(g);
  e->pf = f[0];
  e->var = 0;
  e->lo = f[1];
  e->hi = f[2];
  e->vpred = f[3];
}

/* ---------------------------------------------------------------------- */
/* The proposal mixture                                                   */
/* ---------------------------------------------------------------------- */

/* log of the component density N(mean_k, L L^T) at u. */
static double comp_logpdf(const mix_t *q, size_t k, size_t nu,
                          const double *u) {
  const double *m = q->mean + k * nu, *L = q->chol + k * nu * nu;
  double z[BK_GP_MAXDIM], r2 = 0;
  for (size_t i = 0; i < nu; i++) {
    double s = u[i] - m[i];
    for (size_t j = 0; j < i; j++)
      s -= L[i * nu + j] * z[j];
    z[i] = s / L[i * nu + i];
    r2 += z[i] * z[i];
  }
  return -0.5 * r2 - q->logdet[k] - 0.5 * (double)nu * log(2 * M_PI);
}

/* log q(u). */
static double mix_logpdf(const mix_t *q, size_t nu, const double *u) {
  double lv[MAX_COMP + 1], mx = -INFINITY;
  size_t n = 0;
  lv[n++] = log(q->lambda) + log_phi(u, nu);
  for (size_t k = 0; k < q->k; k++)
    if (q->w[k] > 0)
      lv[n++] = log((1 - q->lambda) * q->w[k]) + comp_logpdf(q, k, nu, u);
  for (size_t i = 0; i < n; i++)
    if (lv[i] > mx)
      mx = lv[i];
  double s = 0;
  for (size_t i = 0; i < n; i++)
    s += exp(lv[i] - mx);
  return mx + log(s);
}

/* Point `index` of q from `stream` into u; returns w = phi(u) / q(u). */
static double mix_sample(const sg_t *g, const mix_t *q, uint64_t stream,
                         uint64_t index, double *u) {
  size_t nu = g->nu;
  double r = bk_rng_u01(g->s->seed, stream, index, 0);
  double z[BK_GP_MAXDIM];
  normals(g, stream, index, 1, nu, z);
  if (r < q->lambda || q->k == 0) {
    memcpy(u, z, nu * sizeof *u);
  } else {
    double t = (r - q->lambda) / (1 - q->lambda), c = 0;
    size_t k = 0;
    for (; k + 1 < q->k; k++) {
      c += q->w[k];
      if (t < c)
        break;
    }
    const double *m = q->mean + k * nu, *L = q->chol + k * nu * nu;
    for (size_t i = 0; i < nu; i++) {
      double s = m[i];
      for (size_t j = 0; j <= i; j++)
        s += L[i * nu + j] * z[j];
      u[i] = s;
    }
  }
  return exp(log_phi(u, nu) - mix_logpdf(q, nu, u));
}

/* In-place Cholesky of the nu x nu matrix a (lower part); 0 or -1. */
static int cholesky(double *a, size_t nu) {
  for (size_t j = 0; j < nu; j++) {
    double d = a[j * nu + j];
    for (size_t k = 0; k < j; k++)
      d -= a[j * nu + k] * a[j * nu + k];
    if (!(d > 0))
      return -1;
    d = sqrt(d);
    a[j * nu + j] = d;
    for (size_t i = j + 1; i < nu; i++) {
      double s = a[i * nu + j];
      for (size_t k = 0; k < j; k++)
        s -= a[i * nu + k] * a[j * nu + k];
      a[i * nu + j] = s / d;
    }
    for (size_t k = j + 1; k < nu; k++)
      a[j * nu + k] = 0;
  }
  return 0;
}

/* Fits the proposal to the last population (Gaussian mixture importance
 * densities built from samples of the failure domain: Au & Beck 1999,
 * Structural Safety 21(2):135-158, with kernels; here clusters): K
 * clusters by weighted k-means (learn.h; K = n / (20 (nu + 1)), 1 to
 * MAX_COMP), one Gaussian per cluster with the cluster's mean and
 * covariance shrunk towards the pooled within-cluster covariance (weight
 * nu + 2 points for the pooled one, so small clusters stay positive
 * definite), widened by 1 + 1/sqrt(nu) (a fitted Gaussian has lighter
 * tails than the truncated density it stands for), weights the clusters'
 * shares. Many small clusters follow several failure regions and curved
 * ones, where one Gaussian per region fitted by EM can merge two regions
 * and leave a third uncovered. */
static int fit_mixture(sg_t *g, const double *x, const double *wt, size_t n) {
  size_t nu = g->nu;
  g->q.lambda = DEFENSIVE;
  double *w = bk_malloc(n * sizeof *w);
  if (!w)
    return oom(g);
  /* Weights scaled to sum to the effective number of points, so that
   * cluster weights count points and the prior below weighs nu + 2 of
   * them. */
  double s1 = 0, s2 = 0;
  for (size_t i = 0; i < n; i++) {
    w[i] = wt ? wt[i] : 1;
    s1 += w[i];
    s2 += w[i] * w[i];
  }
  double neff = s2 > 0 ? s1 * s1 / s2 : 0;
  for (size_t i = 0; i < n; i++)
    w[i] *= s1 > 0 ? neff / s1 : 0;
  size_t K = (size_t)(neff / (20 * (double)(nu + 1)));
  K = K < 1 ? 1 : K > MAX_COMP ? MAX_COMP : K;
  double *cent = bk_malloc(K * nu * sizeof *cent);
  double *pool = bk_calloc(nu * nu, sizeof *pool);
  size_t *pick = bk_malloc(K * sizeof *pick), *lab = bk_malloc(n * sizeof *lab);
  int rc = 0;
  if (!cent || !pool || !pick || !lab) {
    rc = oom(g);
    goto out;
  }
  if (!(neff >= 2))
    goto out_phi;
  g->q.lambda = DEFENSIVE;
  g->q.k = 0;
  int r = bk_learn_kmeans(x, w, n, nu, K, 100, cent, pick, lab);
  while (r == BK_EINVAL && K > 1)
    r = bk_learn_kmeans(x, w, n, nu, --K, 100, cent, pick, lab);
  if (r == BK_ENOMEM) {
    rc = oom(g);
    goto out;
  }
  if (r < 0)
    goto out_phi; /* phi alone: a degenerate population */
  double cnt[MAX_COMP] = {0};
  double *mean = g->q.mean, *C = g->q.chol;
  memset(mean, 0, K * nu * sizeof *mean);
  memset(C, 0, K * nu * nu * sizeof *C);
  for (size_t i = 0; i < n; i++) {
    cnt[lab[i]] += w[i];
    for (size_t j = 0; j < nu; j++)
      mean[lab[i] * nu + j] += w[i] * x[i * nu + j];
  }
  for (size_t k = 0; k < K; k++)
    for (size_t j = 0; j < nu; j++)
      mean[k * nu + j] /= cnt[k] > 0 ? cnt[k] : 1;
  double mv = 0;
  for (size_t i = 0; i < n; i++) {
    size_t k = lab[i];
    const double *xi = x + i * nu, *m = mean + k * nu;
    double *Ck = C + k * nu * nu;
    for (size_t a = 0; a < nu; a++)
      for (size_t b = 0; b <= a; b++) {
        double v = w[i] * (xi[a] - m[a]) * (xi[b] - m[b]);
        Ck[a * nu + b] += v;
        pool[a * nu + b] += v;
      }
  }
  for (size_t a = 0; a < nu; a++) {
    for (size_t b = 0; b <= a; b++)
      pool[a * nu + b] /= neff > (double)K + 1 ? neff - (double)K : 1;
    mv += pool[a * nu + a] / (double)nu;
  }
  double prior = (double)nu + 2, ridge = 1e-3 * mv + 1e-9;
  double f = 1 + 1 / sqrt((double)nu);
  size_t kk = 0;
  for (size_t k = 0; k < K; k++) {
    if (!(cnt[k] > 0))
      continue;
    double *Ck = C + kk * nu * nu;
    if (kk != k) {
      memcpy(mean + kk * nu, mean + k * nu, nu * sizeof *mean);
      memcpy(Ck, C + k * nu * nu, nu * nu * sizeof *C);
    }
    for (size_t a = 0; a < nu; a++) {
      for (size_t b = 0; b <= a; b++)
        Ck[a * nu + b] =
            f * (Ck[a * nu + b] + prior * pool[a * nu + b]) / (cnt[k] + prior);
      Ck[a * nu + a] += ridge;
    }
    if (cholesky(Ck, nu))
      continue;
    double ld = 0;
    for (size_t a = 0; a < nu; a++)
      ld += log(Ck[a * nu + a]);
    g->q.logdet[kk] = ld;
    g->q.w[kk] = cnt[k];
    kk++;
  }
  double tot = 0;
  for (size_t k = 0; k < kk; k++)
    tot += g->q.w[k];
  for (size_t k = 0; k < kk; k++)
    g->q.w[k] /= tot;
  g->q.k = kk;
  goto out;
out_phi:
  g->q.k = 0;
out:
  bk_free(w);
  bk_free(cent);
  bk_free(pool);
  bk_free(pick);
  bk_free(lab);
  return rc;
}

/* The proposal from the last level of the exploring population and the
 * last level of the population on mu alone (which follow one another in
 * cand). */
static int fit_proposal(sg_t *g) {
  size_t n;
  const double *x = last_level(g, &n);
  return fit_mixture(g, x, NULL, n + g->nmean);
}

/* Refits the proposal to points of itself weighted by pi phi / q, twice:
 * adaptive importance sampling on the surrogate alone (no model run; the
 * cross-entropy idea of Rubinstein 1999 with the surrogate's pi in place
 * of the indicator). The chains of the population do not move between
 * separate failure regions, so the share of points each region gets there
 * is a matter of chance; the weights restore each region's share of Pf. */
static int refine_proposal(sg_t *g, int it) {
  size_t nu = g->nu, m = M_ADAPT;
  double *x = bk_malloc(m * nu * sizeof *x), *v = bk_malloc(m * sizeof *v);
  double *mu = bk_malloc(m * sizeof *mu), *sd = bk_malloc(m * sizeof *sd);
  int rc = 0;
  if (!x || !v || !mu || !sd) {
    rc = oom(g);
    goto out;
  }
  for (int r = 0; r < 2 && g->q.k > 0; r++) {
    char label[48];
    snprintf(label, sizeof label, "sg/a%d/%d", it, r);
    uint64_t st = bk_rng_stream(label);
    for (size_t i = 0; i < m; i++)
      v[i] = mix_sample(g, &g->q, st, i, x + i * nu);
    if ((rc = predict(g, x, m, mu, sd)))
      goto out;
    double sum = 0;
    for (size_t i = 0; i < m; i++) {
      v[i] *= bk_learn_pi(mu[i], sd[i]);
      sum += v[i];
    }
    if (!(sum > 0))
      break;
    if ((rc = fit_mixture(g, x, v, m)))
      goto out;
  }
out:
  bk_free(x);
  bk_free(v);
  bk_free(mu);
  bk_free(sd);
  return rc;
}

/* ---------------------------------------------------------------------- */
/* The estimate on the surrogate                                          */
/* ---------------------------------------------------------------------- */

/* Adds points [from, to) of q from `stream` to the sums. */
static int surrogate_sums(sg_t *g, uint64_t stream, uint64_t from, uint64_t to,
                          double sums[6]) {
  size_t nu = g->nu;
  for (uint64_t i = from; i < to; i += CHUNK) {
    size_t c = to - i < CHUNK ? (size_t)(to - i) : CHUNK;
    double w[CHUNK];
    for (size_t k = 0; k < c; k++)
      w[k] = mix_sample(g, &g->q, stream, i + k, g->pu + k * nu);
    int rc = predict(g, g->pu, c, g->pm, g->pv);
    if (rc)
      return rc;
    for (size_t k = 0; k < c; k++) {
      double p = bk_learn_pi(g->pm[k], g->pv[k]);
      double v = p * w[k];
      sums[0] += v;
      sums[1] += v * v;
      sums[2] += p * (1 - p) * w[k] * w[k];
      sums[3] += (g->pm[k] + BAND_K * g->pv[k] <= 0) * w[k];
      sums[4] += (g->pm[k] - BAND_K * g->pv[k] <= 0) * w[k];
    }
  }
  return 0;
}

static void sums_to_est(const double sums[6], double m, sest_t *e) {
  e->m = m;
  e->pf = sums[0] / m;
  double v = (sums[1] - m * e->pf * e->pf) / (m - 1);
  e->var = (v > 0 ? v : 0) / m;
  e->vpred = sums[2] / m;
  e->lo = sums[3] / m;
  e->hi = sums[4] / m;
}

/* ---------------------------------------------------------------------- */
/* Learning                                                               */
/* ---------------------------------------------------------------------- */

/* The learning function's badness of a candidate (smaller is better). */
static double badness(const sg_t *g, double mu, double sd) {
  return g->o->eff ? -bk_learn_eff(mu, sd) : bk_learn_u(mu, sd);
}

/* Picks q candidates into pick[]; returns the number picked (may be below
 * q when there are fewer usable candidates). */
static int pick_batch(sg_t *g, size_t q, size_t *pick, size_t *npicked) {
  size_t m = pop_size(g) - g->nsphere, nu = g->nu;
  bk_order_pair_t *rk = bk_malloc(m * sizeof *rk);
  if (!rk)
    return oom(g);
  size_t nuse = 0;
  for (size_t i = 0; i < m; i++) {
    double sd = g->csd[i];
    /* A candidate where the surrogate is sure (on a training point) is of
     * no use. */
    if (!(sd > 1e-9 * sqrt(g->gp->sigma2)))
      continue;
    rk[nuse].v = badness(g, g->cmu[i], sd);
    rk[nuse].i = i;
    nuse++;
  }
  bk_order_sort(rk, nuse);
  int rc = 0;
  if (q > nuse)
    q = nuse;
  *npicked = q;
  if (q <= 1 || (!g->o->believer && q >= nuse)) {
    for (size_t k = 0; k < q; k++)
      pick[k] = rk[k].i;
    goto done;
  }
  /* The best candidates only: enough to spread q points over the margin
   * without paying for every candidate. */
  size_t mm = 20 * q < nuse ? 20 * q : nuse;
  if (mm < 200 && nuse >= 200)
    mm = 200;
  double *x = bk_malloc(mm * nu * sizeof *x), *w = bk_malloc(mm * sizeof *w);
  double *cent = bk_malloc(q * nu * sizeof *cent);
  size_t *pk = bk_malloc(q * sizeof *pk);
  if (!x || !w || !cent || !pk) {
    rc = oom(g);
    goto free_local;
  }
  for (size_t k = 0; k < mm; k++) {
    size_t i = rk[k].i;
    memcpy(x + k * nu, g->cand + i * nu, nu * sizeof *x);
    w[k] = g->o->eff ? bk_learn_eff(g->cmu[i], g->csd[i])
                     : bk_learn_margin(g->cmu[i], g->csd[i], MARGIN_K);
  }
  int r;
  if (g->o->believer)
    r = bk_learn_believer(g->gp, g->tu, g->ty, x, mm, q, pk);
  else
    r = bk_learn_kmeans(x, w, mm, nu, q, 100, cent, pk, NULL);
  if (r == BK_ENOMEM) {
    rc = oom(g);
  } else if (r < 0) {
    /* Too few weighted candidates to spread: the best q by the learning
     * function. */
    for (size_t k = 0; k < q; k++)
      pick[k] = rk[k].i;
  } else {
    for (size_t k = 0; k < q; k++)
      pick[k] = rk[pk[k]].i;
  }
free_local:
  bk_free(x);
  bk_free(w);
  bk_free(cent);
  bk_free(pk);
done:
  bk_free(rk);
  return rc;
}

/* The correction runs predicted for a cov of SHARE_CORR target_cov. */
static double predicted_runs(const sg_t *g, const sest_t *e) {
  double tc = g->s->analysis.target_cov;
  if (!(e->pf > 0))
    return INFINITY;
  double a = SHARE_CORR * tc * e->pf;
  double n = e->vpred / (a * a);
  return n < MIN_CORR ? MIN_CORR : ceil(n);
}

/* Pushes a learning-curve entry: the surrogate's estimate and its band. */
static int push_learning(sg_t *g, const sest_t *e) {
  bk_result_t *r = g->res;
  r->est.pf = e->pf;
  r->est.cov = INFINITY; /* the surrogate's band is no sampling error */
  r->est.ci[0] = e->lo;
  r->est.ci[1] = e->hi > e->pf ? e->hi : e->pf;
  if (r->est.ci[0] > e->pf)
    r->est.ci[0] = e->pf;
  r->est.n = g->ctx.n;
  if (bk_result_push_history(r))
    return oom(g);
  return 0;
}

/* ---------------------------------------------------------------------- */
/* The method                                                             */
/* ---------------------------------------------------------------------- */

/* The starting design: an LHS mapped to normals and scaled. */
static int start_design(sg_t *g) {
  size_t nu = g->nu;
  size_t n0 =
      g->o->start ? (size_t)g->o->start : (2 * nu + 2 > 10 ? 2 * nu + 2 : 10);
  uint64_t cap = g->s->analysis.max_evaluations / 2;
  if (n0 > cap && cap >= 3)
    n0 = (size_t)cap;
  double s0 = 6 / sqrt((double)nu);
  s0 = s0 > 2 ? 2 : s0 < 1 ? 1 : s0;
  bk_sampler_t sp;
  int rc = bk_sampler_init(&sp, BK_SAMPLER_LHS, g->s->seed,
                           bk_rng_stream("sg/t0"), (uint32_t)nu, n0, 1);
  if (rc)
    return bk_error_set(g->err, rc, NULL, 0, 0,
                        "cannot set up the starting design");
  double *u = bk_malloc(n0 * nu * sizeof *u);
  if (!u)
    return oom(g);
  if ((rc = bk_mctx_reserve(&g->ctx, n0)))
    goto out;
  for (size_t i = 0; i < n0; i++) {
    bk_sampler_point(&sp, i, u + i * nu);
    for (size_t j = 0; j < nu; j++)
      u[i * nu + j] = s0 * bk_norm_icdf(u[i * nu + j]);
    bk_mctx_set_u(&g->ctx, i, i, u + i * nu);
  }
  rc = run_training(g, "sg/t0", n0, u);
out:
  bk_free(u);
  return rc;
}

/* Learning iterations; on return g->gp, the candidates and g->q belong to
 * the last surrogate. */
static int learn(sg_t *g, sest_t *last) {
  const bk_analysis_t *a = &g->s->analysis;
  size_t q = (size_t)g->o->batch, nu = g->nu;
  uint64_t cap = (uint64_t)(g->o->train_share * (double)a->max_evaluations);
  size_t *pick = bk_malloc(q * sizeof *pick);
  double *u = bk_malloc(q * nu * sizeof *u);
  int rc = 0;
  if (!pick || !u) {
    rc = oom(g);
    goto out;
  }
  if ((rc = bk_mctx_reserve(&g->ctx, q)))
    goto out;
  double best_total = INFINITY;
  int best_it = 0;
  g->res->stop_reason = "training share spent";
  for (int it = 1;; it++) {
    g->nsphere = g->nmean = 0;
    if ((rc = fit(g)) || (rc = two_populations(g, it)) ||
        (rc = fit_proposal(g)) || (rc = refine_proposal(g, it)))
      goto out;
    char label[48];
    {
      /* The learning estimate by importance sampling with the proposal
       * the estimate will use. */
      snprintf(label, sizeof label, "sg/s%d", it);
      double sums[6] = {0};
      if ((rc = surrogate_sums(g, bk_rng_stream(label), 0, M_LEARN, sums)))
        goto out;
      sums_to_est(sums, M_LEARN, last);
      /* The predicted correction variance also from the exploring
       * population's strata, which reach regions where the surrogate is
       * unsure and the proposal puts little mass, so that importance
       * sampling with it would rarely see them. */
      sest_t st;
      pop_estimate(g, &st);
      if (st.vpred > last->vpred)
        last->vpred = st.vpred;
    }
    double umin = INFINITY;
    size_t imin = 0;
    if (last->pf > 0 && (rc = sphere(g, it, last->pf, &umin, &imin)))
      goto out;
    if ((rc = push_learning(g, last)))
      goto out;
    bk_mctx_progress(&g->ctx);
    /* Stopping (see the top of this file). */
    if (g->reached && g->train_failures > 0 && last->pf > 0 &&
        umin >= SPHERE_U) {
      double np = predicted_runs(g, last);
      double total = (double)g->ctx.n + np;
      if (np <= MIN_CORR) {
        g->res->stop_reason = "surrogate accurate";
        break;
      }
      /* Learning stops paying when the predicted total of runs has not
       * fallen for PATIENCE_ITER iterations; while the correction would
       * not fit in the budget, learning goes on regardless. Predictions
       * count only once the surrogate's band is narrower than its
       * estimate: an early surrogate can be sure and wrong. */
      int credible = last->hi - last->lo <= last->pf;
      if (credible && total < best_total) {
        best_total = total;
        best_it = it;
      } else if (credible && it - best_it >= PATIENCE_ITER &&
                 total <= (double)a->max_evaluations) {
        g->res->stop_reason = "learning no longer pays";
        break;
      }
    }
    if (g->train_runs + q > cap || g->ctx.n + q + MIN_CORR > a->max_evaluations)
      break;
    /* Exploration: while the sphere holds a direction where the surrogate
     * cannot exclude failure, one point of each batch (of every other
     * iteration when the batch is one point) goes to the least certain
     * of them. */
    size_t np = 0, nx = 0;
    if (umin < SPHERE_U && (q > 1 || it % 2 == 1)) {
      pick[0] = imin;
      nx = 1;
    }
    if (q > nx && (rc = pick_batch(g, q - nx, pick + nx, &np)))
      goto out;
    np += nx;
    if (np == 0) {
      g->res->stop_reason = "no candidate left";
      break;
    }
    for (size_t k = 0; k < np; k++) {
      memcpy(u + k * nu, g->cand + pick[k] * nu, nu * sizeof *u);
      bk_mctx_set_u(&g->ctx, k, k, u + k * nu);
    }
    snprintf(label, sizeof label, "sg/t%d", it);
    if ((rc = run_training(g, label, np, u)))
      goto out;
    g->res->dp.iterations = it;
  }
out:
  bk_free(pick);
  bk_free(u);
  return rc;
}

/* Leave-one-out diagnostics of the final surrogate: Q^2, and the rms,
 * largest and share beyond 2 of the standardised residuals. */
static int loo_report(sg_t *g, double *q2, double *rms, double *zmax,
                      double *beyond) {
  size_t n = g->nt;
  double *res = bk_malloc(n * sizeof *res), *var = bk_malloc(n * sizeof *var);
  if (!res || !var) {
    bk_free(res);
    bk_free(var);
    return oom(g);
  }
  int rc = bk_gp_loo(g->gp, res, var);
  if (rc == 0) {
    double m = 0, ss = 0, sr = 0, sz = 0, zm = 0, nb = 0;
    for (size_t i = 0; i < n; i++)
      m += g->ty[i];
    m /= (double)n;
    for (size_t i = 0; i < n; i++) {
      ss += (g->ty[i] - m) * (g->ty[i] - m);
      sr += res[i] * res[i];
      double z = var[i] > 0 ? res[i] / sqrt(var[i]) : 0;
      sz += z * z;
      if (fabs(z) > zm)
        zm = fabs(z);
      nb += fabs(z) > 2;
    }
    *q2 = ss > 0 ? 1 - sr / ss : NAN;
    *rms = sqrt(sz / (double)n);
    *zmax = zm;
    *beyond = nb / (double)n;
  }
  bk_free(res);
  bk_free(var);
  return rc == BK_ENOMEM ? oom(g) : 0;
}

/* Fills res->est from the two parts. */
static void fill_estimate(sg_t *g, double pf, double var) {
  bk_estimate_t *e = &g->res->est;
  double level = g->s->analysis.ci_level;
  double sd = sqrt(var > 0 ? var : 0);
  double zq = bk_norm_icdf(0.5 + level / 2);
  e->pf = pf > 0 ? pf : 0;
  e->cov = pf > 0 && sd > 0 ? sd / pf : INFINITY;
  e->ci[0] = pf - zq * sd;
  if (!(e->ci[0] > 0))
    e->ci[0] = 0;
  e->ci[1] = (pf > 0 ? pf : 0) + zq * sd;
  if (e->ci[1] > 1)
    e->ci[1] = 1;
  e->ci_exact[0] = e->ci[0];
  e->ci_exact[1] = e->ci[1];
  e->ci_level = level;
  e->ci_method = "normal (surrogate + correction)";
  e->beta = bk_estimate_beta_from_pf(e->pf);
  e->beta_ci[0] = bk_estimate_beta_from_pf(e->ci[1]);
  e->beta_ci[1] = bk_estimate_beta_from_pf(e->ci[0]);
}

/* Correction sums. */
typedef struct {
  double n;              /* points in the estimate */
  double s1, s2;         /* sums of Y and Y^2 */
  double nall;           /* points, excluded ones included */
  double s_safe, s_fail; /* sums of Y with excluded points safe / failed */
  uint64_t excluded, hits;
} corr_t;

static int correct(sg_t *g, const sest_t *se) {
  const bk_study_t *s = g->s;
  const bk_analysis_t *a = &s->analysis;
  bk_result_t *r = g->res;
  size_t q = (size_t)g->o->batch, nu = g->nu;
  double tc = a->target_cov;
  uint64_t stream = bk_rng_stream("sg/c");
  double *u = bk_malloc(q * nu * sizeof *u), *w = bk_malloc(q * sizeof *w);
  double *mu = bk_malloc(q * sizeof *mu), *sd = bk_malloc(q * sizeof *sd);
  int rc = 0;
  if (!u || !w || !mu || !sd) {
    rc = oom(g);
    goto out;
  }
  if ((rc = bk_mctx_reserve(&g->ctx, q)))
    goto out;
  corr_t c = {0};
  uint64_t next = 0;
  int onfail = s->model.on_error == BK_ON_ERROR_FAIL;
  r->stop_reason = "max_evaluations reached before target_cov";
  double pf = se->pf, var = se->var;
  while (g->ctx.n < a->max_evaluations) {
    size_t b = q;
    if (g->ctx.n + b > a->max_evaluations)
      b = (size_t)(a->max_evaluations - g->ctx.n);
    for (size_t k = 0; k < b; k++) {
      w[k] = mix_sample(g, &g->q, stream, next + k, u + k * nu);
      bk_mctx_set_u(&g->ctx, k, next + k, u + k * nu);
    }
    if ((rc = predict(g, u, b, mu, sd)) ||
        (rc = bk_mctx_evaluate(&g->ctx, "sg/c", b)))
      goto out;
    next += b;
    for (size_t k = 0; k < b; k++) {
      const bk_point_t *p = &g->ctx.pts[k];
      double pi = bk_learn_pi(mu[k], sd[k]);
      int fault = p->fault != BK_FAULT_NONE || isnan(p->g);
      c.nall++;
      if (fault && !onfail) {
        c.excluded++;
        c.s_safe += -pi * w[k];
        c.s_fail += (1 - pi) * w[k];
        continue;
      }
      int fail = fault || p->g <= 0;
      double y = ((double)fail - pi) * w[k];
      c.hits += fail;
      c.n++;
      c.s1 += y;
      c.s2 += y * y;
      c.s_safe += y;
      c.s_fail += y;
    }
    if (c.n < 2)
      continue;
    double cm = c.s1 / c.n;
    double sv = (c.s2 - c.n * cm * cm) / (c.n - 1);
    double vc = sv > 0 ? sv / c.n : 0;
    double vp = se->vpred / c.n;
    pf = se->pf + cm;
    double v = vc > vp ? vc : vp;
    /* N runs that showed no misclassification still leave a share of
     * about 1/(N + 2) of q where the surrogate may err unseen (Laplace's
     * rule of succession), each such point off by about Pf (q near the
     * optimal density): the correction's error is taken as at least
     * that. */
    double vf = pf > 0 ? pf / (c.n + 2) : 0;
    if (vf * vf > v)
      v = vf * vf;
    var = se->var + v;
    fill_estimate(g, pf, var);
    r->est.n = g->ctx.n;
    r->est.failures = g->ctx.failures;
    r->excluded = c.excluded;
    r->pf_bounds[0] = r->pf_bounds[1] = r->est.pf;
    if (c.excluded) {
      r->pf_bounds[0] = se->pf + c.s_safe / c.nall;
      r->pf_bounds[1] = se->pf + c.s_fail / c.nall;
    }
    if (bk_result_push_history(r)) {
      rc = oom(g);
      goto out;
    }
    bk_mctx_progress(&g->ctx);
    if (c.n >= MIN_CORR && pf > 0 && r->est.cov <= tc) {
      r->stop_reason = "target_cov reached";
      break;
    }
  }
  if (c.n < 2)
    fill_estimate(g, se->pf, INFINITY);
  /* Details of the two parts. */
  double cm = c.n > 0 ? c.s1 / c.n : NAN;
  double vsum = var > 0 ? var : NAN;
  if (bk_result_detail(r, "correction runs", c.nall) ||
      bk_result_detail(r, "correction failures", (double)c.hits) ||
      bk_result_detail(r, "pf surrogate part", se->pf) ||
      bk_result_detail(r, "pf correction part", cm) ||
      bk_result_detail(r, "variance share surrogate", se->var / vsum) ||
      bk_result_detail(r, "variance share correction",
                       (var - se->var) / vsum) ||
      bk_result_detail(r, "surrogate points", se->m))
    rc = oom(g);
  if (c.n >= 2 && c.n < MIN_CORR && rc == 0 &&
      bk_result_warn(r,
                     "only %.0f correction runs (fewer than %d): their "
                     "variance, and so the interval, is itself uncertain; "
                     "raise analysis.max_evaluations",
                     c.n, MIN_CORR))
    rc = oom(g);
  if (c.n < 2 && rc == 0 &&
      bk_result_warn(r, "the correction has fewer than 2 model runs: the "
                        "estimate rests on the surrogate alone and has no "
                        "error bar; raise analysis.max_evaluations"))
    rc = oom(g);
  if (rc == 0 && pf <= 0 &&
      bk_result_warn(r,
                     "the corrected estimate is %s: the surrogate "
                     "and the correction runs disagree; the interval "
                     "is only a bound. Raise analysis.max_evaluations "
                     "or use method subset",
                     pf < 0 ? "negative" : "zero"))
    rc = oom(g);
out:
  bk_free(u);
  bk_free(w);
  bk_free(mu);
  bk_free(sd);
  return rc;
}

/* Warnings about the surrogate's trustworthiness, and its details. */
static int diagnose(sg_t *g, const sest_t *se) {
  bk_result_t *r = g->res;
  double q2 = NAN, rms = NAN, zmax = NAN, beyond = NAN;
  int rc = loo_report(g, &q2, &rms, &zmax, &beyond);
  if (rc)
    return rc;
  if (bk_result_detail(r, "training runs", (double)g->train_runs) ||
      bk_result_detail(r, "training failures", (double)g->train_failures) ||
      bk_result_detail(r, "training faults", (double)g->train_faults) ||
      bk_result_detail(r, "learning iterations", r->dp.iterations) ||
      bk_result_detail(r, "batch", g->o->batch) ||
      bk_result_detail(r, "loo q2", q2) ||
      bk_result_detail(r, "loo residual rms", rms) ||
      bk_result_detail(r, "loo residual max", zmax) ||
      bk_result_detail(r, "loo share beyond 2", beyond) ||
      bk_result_detail(r, "population levels", g->levels) ||
      bk_result_detail(r, "mixture components", (double)g->q.k) ||
      bk_result_detail(r, "predicted correction runs", predicted_runs(g, se)))
    return oom(g);
  if (g->nu > MANY_VARS &&
      bk_result_warn(r,
                     "%zu random variables: a Gaussian-process surrogate "
                     "is seldom accurate beyond %d, and the correction "
                     "then costs as many runs as importance sampling; "
                     "method subset (or cross-entropy) suits many "
                     "variables better",
                     g->nu, MANY_VARS))
    return oom(g);
  if (g->o->noisy && g->gp->nugget > 0.05 &&
      bk_result_warn(r,
                     "the surrogate attributes %.0f%% of the variance of g "
                     "to noise: the model's response is noisy, so the "
                     "surrogate classifies poorly near g = 0 and the "
                     "correction carries the estimate; method subset or "
                     "importance sampling may need fewer runs",
                     100 * g->gp->nugget / (1 + g->gp->nugget)))
    return oom(g);
  if (isfinite(q2) && (q2 < 0.5 || (rms > 3 && q2 < 0.99)) &&
      bk_result_warn(r,
                     "the surrogate fits poorly (leave-one-out Q2 %.2f, "
                     "rms of standardised residuals %.2f): the estimate "
                     "stays unbiased through the correction runs, but the "
                     "surrogate cannot be trusted on its own; if the "
                     "correction is costly, use method subset",
                     q2, rms))
    return oom(g);
  if (!g->reached &&
      bk_result_warn(r, "the surrogate predicts no failure down to a "
                        "probability of 1e-12; the estimate rests on the "
                        "correction runs"))
    return oom(g);
  if (g->train_failures == 0 &&
      bk_result_warn(r, "no training run failed (g <= 0): the surrogate "
                        "has not seen the failure domain"))
    return oom(g);
  return 0;
}

int bk__method_surrogate(const bk_study_t *s, bk_evaluator_t *ev,
                         const bk_method_opts_t *opts, bk_result_t *res,
                         bk_error_t *err) {
  sg_t g;
  memset(&g, 0, sizeof g);
  bk_mctx_init(&g.ctx, s, ev, opts, res, err);
  g.s = s;
  g.o = &s->analysis.surrogate;
  g.res = res;
  g.err = err;
  g.nu = g.ctx.nu;
  res->dp.pf_sorm = NAN;
  int rc;
  if (g.nu == 0 || g.nu > BK_GP_MAXDIM) {
    rc = bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                      "method surrogate needs 1 to %d random variables "
                      "(the study has %zu); use method subset",
                      BK_GP_MAXDIM, g.nu);
    goto out;
  }
  g.npop = 1000 + 100 * g.nu;
  if (g.npop > 4000)
    g.npop = 4000;
  g.n0 = 10 * g.npop > N0_MAX ? N0_MAX : 10 * g.npop;
  size_t nu = g.nu, ncand = g.n0 + (MAX_LEVELS + 2) * g.npop;
  size_t nkeep = g.n0 > g.npop ? g.n0 : g.npop;
  g.keep = bk_malloc(nkeep * nu * sizeof *g.keep);
  g.kmu = bk_malloc(nkeep * sizeof *g.kmu);
  g.ksd = bk_malloc(nkeep * sizeof *g.ksd);
  g.cand = bk_malloc(ncand * nu * sizeof *g.cand);
  g.cmu = bk_malloc(ncand * sizeof *g.cmu);
  g.csd = bk_malloc(ncand * sizeof *g.csd);
  g.q.mean = bk_malloc(MAX_COMP * nu * sizeof *g.q.mean);
  g.q.chol = bk_malloc(MAX_COMP * nu * nu * sizeof *g.q.chol);
  g.pu = bk_malloc(CHUNK * nu * sizeof *g.pu);
  g.pm = bk_malloc(CHUNK * sizeof *g.pm);
  g.pv = bk_malloc(CHUNK * sizeof *g.pv);
  if (!g.cand || !g.cmu || !g.csd || !g.keep || !g.kmu || !g.ksd || !g.q.mean ||
      !g.q.chol || !g.pu || !g.pm || !g.pv) {
    rc = oom(&g);
    goto out;
  }
  sest_t se;
  if ((rc = start_design(&g)) || (rc = learn(&g, &se)))
    goto out;
  /* The final surrogate estimate, M doubled until precise enough. */
  {
    double sums[6] = {0};
    uint64_t m = 0, want = M_FINAL;
    uint64_t st = bk_rng_stream("sg/s");
    for (;;) {
      if ((rc = surrogate_sums(&g, st, m, want, sums)))
        goto out;
      m = want;
      sums_to_est(sums, (double)m, &se);
      if (!(se.pf > 0) ||
          sqrt(se.var) <= SHARE_SURR * s->analysis.target_cov * se.pf ||
          m >= M_FINAL_MAX)
        break;
      want = 2 * m;
    }
  }
  if ((rc = correct(&g, &se)) || (rc = diagnose(&g, &se)))
    goto out;
  rc = bk_mctx_finish(&g.ctx);
out:
  bk_mctx_close(&g.ctx);
  bk_gp_free(g.gp);
  bk_free(g.tu);
  bk_free(g.ty);
  bk_free(g.cand);
  bk_free(g.cmu);
  bk_free(g.csd);
  bk_free(g.keep);
  bk_free(g.kmu);
  bk_free(g.ksd);
  bk_free(g.q.mean);
  bk_free(g.q.chol);
  bk_free(g.pu);
  bk_free(g.pm);
  bk_free(g.pv);
  return rc;
}
