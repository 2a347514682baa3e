/*
 * Subset simulation (Au & Beck 2001) with adaptive conditional sampling
 * (aCS, Papaioannou, Betz, Zwirglmaier & Straub 2015) in standard normal
 * space.
 *
 * Level 0 is crude Monte Carlo of analysis.samples points, keys
 * "ss/l0/<i>". At each level the points are ordered by g (index order on
 * ties); the threshold b is the g of the Nc-th point, Nc = p0 * samples,
 * and every point with g <= b seeds one Markov chain of the next level
 * (so the conditional probability is exactly seeds / samples, p0 when g
 * has no ties). Once Nc or more points have g <= 0 the level is the last
 * and Pf = prod P_l * (failures / samples).
 *
 * The chains advance in lockstep: the next states of all chains form one
 * batch, keys "ss/l<level>/s<step>/<chain>" (the evaluator names a key
 * prefix/index, so the chain number comes last). A proposal is
 * v = rho u + sigma z per coordinate with sigma = min(1, lambda sigma0),
 * sigma0 the spread of the seeds, rho = sqrt(1 - sigma^2); it is accepted
 * when g(v) <= b. After every step lambda moves towards an acceptance rate
 * of 0.44: log lambda += (a - 0.44) / sqrt(i), i counting the steps of the
 * level (lambda starts at 0.6 and carries over between levels). These are
 * deterministic points, so the path is a function of (seed, responses).
 *
 * Error bar. Au & Beck (2001, eqs. 27-29) give the cov of the product
 * as delta^2 = sum_l delta_l^2, delta_l^2 = (1 - P_l) / (N P_l) (1 +
 * gamma_l), gamma_l from the correlation of the indicator along each
 * chain, with the levels taken as uncorrelated (their lower bound; the
 * upper one, fully correlated levels, is (sum_l delta_l)^2). Measured over
 * hundreds of seeds (bench/coverage_sweep, figures in docs/methods.md) it
 * understates the spread of ln Pf by a factor growing with the levels:
 * 1.10 at Pf 1e-3, 1.23 at 1e-6 and 1.37 at 1e-9 with 500 points per
 * level (95% intervals covering 83% of the time at 1e-9), and by 1.4 to
 * 1.7 where chains stay in separate islands (scattered failure regions)
 * or on curved domains. Two things are missing: chains started from seeds
 * of one chain of the level before are correlated (a rejected step
 * repeats a state, so two seeds can be the same point), and the levels'
 * errors are correlated (a population off the conditional distribution
 * passes its error on to the next levels).
 *
 * So the cov is taken from the genealogy, the way the error of a
 * sequential Monte Carlo sampler is (subset simulation is one: Cerou, Del
 * Moral, Furon & Guyader 2012, Statistics and Computing 22:795-808): ln Pf
 * is sum_l ln P_l, and to first order its error is sum_l (P_l^ - P_l) /
 * P_l, a sum over the points of every level of their centred indicators
 * (I - P_l) / (N P_l) (I: below the next threshold; at the last level,
 * g <= 0). Grouped by ancestor, these sums are nearly independent, so
 * their squares estimate the variance, with the covariance between levels
 * included (Chan & Lai 2013, Annals of Statistics 41:2877-2904; Lee &
 * Whiteley 2018, Biometrika 105:609-625, group by the ancestor at level
 * 0). Grouping by the level-0 ancestor collapses after a few levels (all
 * points soon descend from a handful), so the ancestor is taken at most
 * GENEALOGY_LAG levels back, and only levels that close are paired (the
 * fixed-lag estimator of Olsson & Douc 2019, Bernoulli 25:1504-1535;
 * these references from memory);
 * each group sum gets the small-sample factor G / (G - 1). Correlation
 * between levels further apart is taken as Au & Beck's sum between their
 * two bounds with one correlation rho between every pair of levels,
 * delta^2 = sum delta_l^2 + rho ((sum delta_l)^2 - sum delta_l^2), as the
 * factor this puts on the uncorrelated sum: rho = LEVEL_RHO / sqrt(p0 N),
 * fitted to the measured spread on the linear problem at 500 to 2000
 * points per level (rho about 0.11 at 500, 0.056 at 2000: the levels'
 * correlation fades as the chains get more seeds). The interval is
 * lognormal with that cov, "subset genealogy (lognormal)"; one level
 * alone is crude sampling and gets the binomial estimate ("wilson").
 *
 * Model errors: at level 0 a faulty point is left out (skip) or taken as
 * failed (fail, g = -inf); in the chains a faulty proposal is a rejected
 * one, counted in model_errors. pf_bounds cover level 0 only (its faulty
 * points taken as safe and as failed, the later levels unchanged); what a
 * rejected faulty proposal hides cannot be bounded without more runs.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "numerics/rng.h"
#include "numerics/special.h"

#define TARGET_ACCEPTANCE 0.44
#define LAMBDA0           0.6
/* The genealogy of the error bar (see the file comment): points are
 * grouped by their ancestor this many levels back, and levels further
 * apart are taken as correlated by LEVEL_RHO / sqrt(p0 N). */
#define GENEALOGY_LAG 2
#define LEVEL_RHO     0.77

/* A level: N points as chains stored one after the other, chain c at
 * rows off[c] .. off[c] + len[c] - 1 of u (N * nu) and g (N); level 0 is
 * N chains of one point. */
typedef struct {
  double *u, *g;
  size_t *off, *len;
  uint32_t *fm; /* several limit states: the modes failing at each point */
} level_t;

static int level_alloc(level_t *l, size_t N, size_t nu) {
  l->u = bk_calloc(N * nu, sizeof *l->u);
  l->g = bk_calloc(N, sizeof *l->g);
  l->off = bk_calloc(N, sizeof *l->off);
  l->len = bk_calloc(N, sizeof *l->len);
  l->fm = bk_calloc(N, sizeof *l->fm);
  return l->u && l->g && l->off && l->len && l->fm ? 0 : BK_ENOMEM;
}

static void level_free(level_t *l) {
  bk_free(l->u);
  bk_free(l->g);
  bk_free(l->off);
  bk_free(l->len);
  bk_free(l->fm);
}

/* One run: the current level, with nchains chains, and the next one being
 * built from its seeds; the two swap when the next is complete. */
typedef struct {
  bk_mctx_t ctx;
  size_t nu, N, nc; /* nc = p0 N, the points below each threshold */
  int fail_mode;    /* on_error fail */
  level_t cur, nx;
  size_t nchains;
  /* Work space: proposals (N * nu), seed spread and normals (nu), the
   * order of the points by g and the seeds' positions (N). */
  double *prop, *sig, *z;
  size_t *order, *seedpos;
  /* Level 0: faulted points and the points in its estimate. */
  size_t e0, n0;
  /* Over the levels so far: log of the product of the P_l, its value
   * before the last level, the Au-Beck delta^2, the aCS scale, P_0. */
  double logp, logreach, delta2, lambda, p_first;
  double acc_sum;  /* accepted proposals */
  uint64_t acc_n;  /* proposals */
  uint64_t mcmc_e; /* proposals that ended in a model error */
  int level, final;
  size_t nf;             /* points of the last level with g <= 0 */
  uint64_t final_chains; /* chains of the last level holding a failure */
  /* The genealogy: for every level so far, the g of its points, the
   * position of each point's seed in the level before (level 0: none),
   * the threshold its points were counted against and their share below
   * it. Level 0's points left out of the estimate are marked in out0. */
  double **hg;
  uint32_t **hpar;
  double *hb, *hp, *hd;
  unsigned char *out0;
  int nh;
} ss_t;

static int ss_alloc(ss_t *m) {
  size_t N = m->N, nu = m->nu;
  m->prop = bk_calloc(N * nu, sizeof *m->prop);
  m->sig = bk_calloc(nu, sizeof *m->sig);
  m->z = bk_calloc(nu, sizeof *m->z);
  m->order = bk_calloc(N, sizeof *m->order);
  m->seedpos = bk_calloc(N, sizeof *m->seedpos);
  size_t L = (size_t)m->ctx.s->analysis.subset.max_levels;
  m->hg = bk_calloc(L, sizeof *m->hg);
  m->hpar = bk_calloc(L, sizeof *m->hpar);
  m->hb = bk_calloc(L, sizeof *m->hb);
  m->hp = bk_calloc(L, sizeof *m->hp);
  m->hd = bk_calloc(L, sizeof *m->hd);
  m->out0 = bk_calloc(N, 1);
  if (level_alloc(&m->cur, N, nu) || level_alloc(&m->nx, N, nu) || !m->prop ||
      !m->sig || !m->z || !m->order || !m->seedpos || !m->hg || !m->hpar ||
      !m->hb || !m->hp || !m->hd || !m->out0 || bk_mctx_reserve(&m->ctx, N))
    return bk_mctx_nomem(&m->ctx);
  return 0;
}

static void ss_free(ss_t *m) {
  level_free(&m->cur);
  level_free(&m->nx);
  bk_free(m->prop);
  bk_free(m->sig);
  bk_free(m->z);
  bk_free(m->order);
  bk_free(m->seedpos);
  for (int l = 0; m->hg && l < m->ctx.s->analysis.subset.max_levels; l++) {
    bk_free(m->hg[l]);
    bk_free(m->hpar[l]);
  }
  bk_free(m->hg);
  bk_free(m->hpar);
  bk_free(m->hb);
  bk_free(m->hp);
  bk_free(m->hd);
  bk_free(m->out0);
}

/* Sorting order: by g, then by position (deterministic on ties). qsort
 * has no context argument in C11, so the g array is passed through a file
 * variable: one subset run at a time per process. */
static const double *sort_g;
static int cmp_order(const void *a, const void *b) {
  size_t i = *(const size_t *)a, j = *(const size_t *)b;
  double x = sort_g[i], y = sort_g[j];
  if (x < y)
    return -1;
  if (x > y)
    return 1;
  return (i > j) - (i < j);
}

/* gamma of Au & Beck (2001, eq. 29) for the indicator g <= b over the nc
 * chains of level l, with P the fraction of all N points below b. Unequal chain
 * lengths use the pairs that exist at each lag. */
static double chain_gamma(const level_t *l, size_t nc, size_t N, double b,
                          double P) {
  const double *g = l->g;
  const size_t *off = l->off, *len = l->len;
  size_t maxlen = 0;
  for (size_t c = 0; c < nc; c++)
    if (len[c] > maxlen)
      maxlen = len[c];
  double r0 = P * (1 - P);
  if (!(r0 > 0) || maxlen < 2)
    return 0;
  double gam = 0;
  for (size_t k = 1; k < maxlen; k++) {
    double sum = 0;
    size_t pairs = 0;
    for (size_t c = 0; c < nc; c++)
      for (size_t j = 0; j + k < len[c]; j++) {
        sum += (g[off[c] + j] <= b) * (g[off[c] + j + k] <= b);
        pairs++;
      }
    if (!pairs)
      break;
    double rk = sum / (double)pairs - P * P;
    gam += 2 * ((double)pairs / (double)N) * rk / r0;
  }
  return gam > 0 ? gam : 0;
}

/* Level 0: crude Monte Carlo of N points, keys "ss/l0/<i>". A faulted
 * point is failed (g = -inf) under on_error fail, and otherwise left out:
 * g = +inf sorts it last, so it never seeds a chain nor counts as failed,
 * and n0 leaves it out of the level's probability. */
static int level0(ss_t *m) {
  bk_mctx_t *c = &m->ctx;
  size_t N = m->N, nu = m->nu;
  uint64_t st0 = bk_rng_stream("ss/l0");
  for (size_t i = 0; i < N; i++) {
    double *u = m->cur.u + i * nu;
    bk_rng_u01_fill(c->s->seed, st0, i, 0, (uint32_t)nu, u);
    for (size_t d = 0; d < nu; d++)
      u[d] = bk_norm_icdf(u[d]);
    bk_mctx_set_u(c, i, i, u);
  }
  int rc = bk_mctx_evaluate(c, "ss/l0", N);
  if (rc)
    return rc;
  for (size_t i = 0; i < N; i++) {
    m->cur.g[i] = c->pts[i].g;
    m->cur.fm[i] = bk_mctx_mode_failures(c, i);
    if (c->pts[i].fault != BK_FAULT_NONE) {
      m->e0++;
      m->out0[i] = !m->fail_mode;
      m->cur.g[i] = m->fail_mode ? -INFINITY : INFINITY;
    }
    m->cur.off[i] = i;
    m->cur.len[i] = 1;
  }
  m->nchains = N;
  m->n0 = m->fail_mode ? N : N - m->e0;
  if (m->n0 == 0)
    return bk_error_set(c->err, BK_EMODEL, NULL, 0, 0,
                        "every evaluation of the first level failed");
  return 0;
}

/* Orders the level's points by g (index order on ties) into m->order and
 * counts those with g <= 0 into m->nf. */
static int order_level(ss_t *m) {
  size_t N = m->N;
  if (!(m->hg[m->level] = bk_malloc(N * sizeof **m->hg)))
    return bk_mctx_nomem(&m->ctx);
  memcpy(m->hg[m->level], m->cur.g, N * sizeof **m->hg);
  m->nh = m->level + 1;
  for (size_t i = 0; i < N; i++)
    m->order[i] = i;
  sort_g = m->cur.g;
  qsort(m->order, N, sizeof *m->order, cmp_order);
  m->nf = 0;
  for (size_t i = 0; i < N; i++)
    m->nf += m->cur.g[i] <= 0;
  return 0;
}

/* The last level (failure domain reached, or a cap): its conditional
 * probability of g <= 0 and gamma join the product, and the chains
 * holding a failure are counted. nl is the level's points in the
 * estimate. */
static int last_level(ss_t *m, size_t nl) {
  double P = (double)m->nf / (double)nl;
  double gam = chain_gamma(&m->cur, m->nchains, m->N, 0, P);
  if (m->level == 0)
    m->p_first = P;
  m->logreach = m->logp;
  m->hb[m->level] = 0;
  m->hp[m->level] = P;
  m->logp += P > 0 ? log(P) : -INFINITY;
  if (P > 0) {
    m->hd[m->level] = sqrt((1 - P) / ((double)nl * P) * (1 + gam));
    m->delta2 += (1 - P) / ((double)nl * P) * (1 + gam);
  }
  m->final = m->nf >= m->nc;
  for (size_t c = 0; c < m->nchains; c++) {
    int any = 0;
    for (size_t j = 0; j < m->cur.len[c]; j++)
      any |= m->cur.g[m->cur.off[c] + j] <= 0;
    m->final_chains += any;
  }
  if (bk_result_detailf(m->ctx.res, P, "P(g <= 0 | level %d)", m->level))
    return bk_mctx_nomem(&m->ctx);
  return 0;
}

/* The next threshold b, the g of the nc-th point in order; every point
 * with g <= b is a seed (positions into m->seedpos, count *ns), and the
 * level's conditional probability seeds / nl and its gamma join the
 * product. */
static int next_threshold(ss_t *m, size_t nl, double *b, size_t *ns) {
  *b = m->cur.g[m->order[m->nc - 1]];
  *ns = 0;
  for (size_t i = 0; i < m->N; i++)
    if (m->cur.g[i] <= *b)
      m->seedpos[(*ns)++] = i;
  double P = (double)*ns / (double)nl;
  if (m->level == 0)
    m->p_first = P;
  double gam = chain_gamma(&m->cur, m->nchains, m->N, *b, P);
  m->hb[m->level] = *b;
  m->hp[m->level] = P;
  m->logp += log(P);
  m->delta2 += (1 - P) / ((double)nl * P) * (1 + gam);
  m->hd[m->level] = sqrt((1 - P) / ((double)nl * P) * (1 + gam));
  if (bk_result_detailf(m->ctx.res, *b, "threshold level %d", m->level + 1))
    return bk_mctx_nomem(&m->ctx);
  return 0;
}

/* Starts the next level's ns chains at the seeds, sharing the N points
 * out (the first N % ns chains one longer), and sets sig to the spread of
 * the seeds per coordinate. Returns the longest chain's length. */
static size_t seed_chains(ss_t *m, size_t ns, uint32_t *par) {
  size_t N = m->N, nu = m->nu, maxlen = 0, o = 0;
  for (size_t c = 0; c < ns; c++) {
    m->nx.off[c] = o;
    m->nx.len[c] = N / ns + (c < N % ns);
    for (size_t j = 0; j < m->nx.len[c]; j++)
      par[o + j] = (uint32_t)m->seedpos[c];
    if (m->nx.len[c] > maxlen)
      maxlen = m->nx.len[c];
    memcpy(m->nx.u + o * nu, m->cur.u + m->seedpos[c] * nu,
           nu * sizeof *m->cur.u);
    m->nx.g[o] = m->cur.g[m->seedpos[c]];
    m->nx.fm[o] = m->cur.fm[m->seedpos[c]];
    o += m->nx.len[c];
  }
  for (size_t d = 0; d < nu; d++) {
    double mean = 0, var = 0;
    for (size_t c = 0; c < ns; c++)
      mean += m->cur.u[m->seedpos[c] * nu + d];
    mean /= (double)ns;
    for (size_t c = 0; c < ns; c++) {
      double dd = m->cur.u[m->seedpos[c] * nu + d] - mean;
      var += dd * dd;
    }
    m->sig[d] = ns > 1 ? sqrt(var / (double)(ns - 1)) : 1;
  }
  return maxlen;
}

/* One lockstep step of the ns chains: every chain still shorter than
 * `step` + 1 proposes v = rho u + sigma z from its last state (key
 * "ss/l<level>/s<step>/<chain>"), all in one batch; a proposal with
 * g(v) <= b is accepted, a rejected or faulted one repeats the last state.
 * *acc and *np receive the accepted and proposed counts. */
static int chain_step(ss_t *m, double b, size_t ns, size_t step, size_t *acc,
                      size_t *np) {
  bk_mctx_t *c = &m->ctx;
  size_t nu = m->nu;
  char prefix[64];
  snprintf(prefix, sizeof prefix, "ss/l%d/s%zu", m->level, step);
  uint64_t stream = bk_rng_stream(prefix);
  size_t n = 0;
  for (size_t ch = 0; ch < ns; ch++) {
    if (m->nx.len[ch] <= step)
      continue;
    const double *cur = m->nx.u + (m->nx.off[ch] + step - 1) * nu;
    double *v = m->prop + n * nu;
    bk_rng_u01_fill(c->s->seed, stream, ch, 0, (uint32_t)nu, m->z);
    for (size_t d = 0; d < nu; d++) {
      double sd = m->lambda * m->sig[d];
      if (sd > 1)
        sd = 1;
      double r = sqrt(1 - sd * sd);
      v[d] = r * cur[d] + sd * bk_norm_icdf(m->z[d]);
    }
    bk_mctx_set_u(c, n, ch, v);
    n++;
  }
  int rc = bk_mctx_evaluate(c, prefix, n);
  if (rc)
    return rc;
  *acc = 0;
  for (size_t i = 0; i < n; i++) {
    const bk_point_t *p = &c->pts[i];
    size_t at = m->nx.off[p->index] + step;
    int ok = p->fault == BK_FAULT_NONE && p->g <= b;
    if (p->fault != BK_FAULT_NONE)
      m->mcmc_e++;
    if (ok) {
      memcpy(m->nx.u + at * nu, m->prop + i * nu, nu * sizeof *m->nx.u);
      m->nx.g[at] = p->g;
      m->nx.fm[at] = bk_mctx_mode_failures(c, i);
      (*acc)++;
    } else {
      memcpy(m->nx.u + at * nu, m->nx.u + (at - 1) * nu, nu * sizeof *m->nx.u);
      m->nx.g[at] = m->nx.g[at - 1];
      m->nx.fm[at] = m->nx.fm[at - 1];
    }
  }
  *np = n;
  return 0;
}

/* Grows the next level's chains to their lengths, step by step; after
 * each step lambda moves towards the target acceptance rate (see the
 * file comment). The level's acceptance rate goes into the details. */
static int run_chains(ss_t *m, double b, size_t ns, size_t maxlen) {
  uint64_t acc_level = 0, prop_level = 0;
  for (size_t step = 1; step < maxlen; step++) {
    size_t acc, np;
    int rc = chain_step(m, b, ns, step, &acc, &np);
    if (rc)
      return rc;
    double rate = np ? (double)acc / (double)np : 0;
    acc_level += acc;
    prop_level += np;
    m->lambda *= exp((rate - TARGET_ACCEPTANCE) / sqrt((double)step));
  }
  double rate_level = prop_level ? (double)acc_level / prop_level : NAN;
  m->acc_sum += (double)acc_level;
  m->acc_n += prop_level;
  if (bk_result_detailf(m->ctx.res, rate_level, "acceptance level %d",
                        m->level))
    return bk_mctx_nomem(&m->ctx);
  return 0;
}

/* The new level replaces the old. */
static void swap_levels(ss_t *m, size_t ns) {
  level_t t = m->cur;
  m->cur = m->nx;
  m->nx = t;
  m->nchains = ns;
}

/* The levels: thresholds and chains until nc or more points fail, or a
 * cap (max_levels, or max_evaluations with too little left for a level). */
static int run_levels(ss_t *m) {
  bk_mctx_t *c = &m->ctx;
  const bk_analysis_t *a = &c->s->analysis;
  size_t N = m->N, nc = m->nc;
  int rc;
  for (;;) {
    size_t nl = m->level == 0 ? m->n0 : N;
    if ((rc = order_level(m)))
      return rc;
    int capped = m->level + 1 >= a->subset.max_levels ||
                 c->n + (N - nc) > a->max_evaluations;
    if (m->nf >= nc || capped)
      return last_level(m, nl);
    double b;
    size_t ns;
    if ((rc = next_threshold(m, nl, &b, &ns)))
      return rc;
    m->level++;
    if (!(m->hpar[m->level] = bk_malloc(N * sizeof **m->hpar)))
      return bk_mctx_nomem(c);
    size_t maxlen = seed_chains(m, ns, m->hpar[m->level]);
    if ((rc = run_chains(m, b, ns, maxlen)))
      return rc;
    swap_levels(m, ns);
    c->res->est.pf = NAN;
    c->res->est.cov = NAN;
    bk_mctx_progress(c);
  }
}

/* The ancestor at level r of point i of level l (r <= l). */
static size_t ancestor(const ss_t *m, int l, size_t i, int r) {
  for (; l > r; l--)
    i = m->hpar[l][i];
  return i;
}

/* Adds to s (N values, by ancestor at level r) the centred, scaled
 * indicators (I - P_l) / (n_l P_l) of level l's points. */
static void group_sums(const ss_t *m, int l, int r, double *s) {
  size_t N = m->N;
  double P = m->hp[l], b = m->hb[l];
  double nl = l == 0 ? (double)m->n0 : (double)N;
  for (size_t i = 0; i < N; i++) {
    if (l == 0 && m->out0[i])
      continue;
    double I = m->hg[l][i] <= b;
    s[ancestor(m, l, i, r)] += (I - P) / (nl * P);
  }
}

/* The relative variance of Pf from the genealogy (see the file comment):
 * the levels' centred indicators summed by their ancestor GENEALOGY_LAG
 * levels back (level 0 at the most), for every level and every pair of
 * levels at most that far apart; a sum over G groups of ancestors is
 * raised by G / (G - 1), the small-sample correction of a variance from
 * G group sums whose total is 0 by construction. Returns NaN when out of
 * memory. */
static double genealogy_var(const ss_t *m) {
  const int lag = GENEALOGY_LAG;
  size_t N = m->N;
  int L = m->level;
  double *a = bk_calloc(N, sizeof *a), *b = bk_calloc(N, sizeof *b);
  if (!a || !b) {
    bk_free(a);
    bk_free(b);
    return NAN;
  }
  double v = 0;
  for (int l2 = 0; l2 <= L; l2++) {
    int r = l2 - lag > 0 ? l2 - lag : 0;
    memset(b, 0, N * sizeof *b);
    group_sums(m, l2, r, b);
    for (int l1 = r; l1 <= l2; l1++) {
      memset(a, 0, N * sizeof *a);
      group_sums(m, l1, r, a);
      double d = 0;
      size_t G = 0;
      for (size_t k = 0; k < N; k++) {
        d += a[k] * b[k];
        G += b[k] != 0;
      }
      /* Level 0 alone: its points are independent and their own groups,
       * and the binomial variance needs no correction. */
      if (l2 > r && G > 1)
        d *= (double)G / (double)(G - 1);
      v += (l1 == l2 ? 1 : 2) * d;
    }
  }
  bk_free(a);
  bk_free(b);
  return v;
}

/* The estimate: Pf = prod P_l with the Au-Beck cov and a lognormal
 * interval; with no failure in the last level, an upper bound from its N
 * points (Clopper-Pearson for 0 of N) times the levels' probability.
 * pf_bounds from level 0's faulted points. */
static int fill_estimate(ss_t *m) {
  const bk_study_t *s = m->ctx.s;
  bk_result_t *res = m->ctx.res;
  bk_estimate_t *e = &res->est;
  double level = s->analysis.ci_level;
  double pf = exp(m->logp);
  if (m->level == 0) {
    /* One level is crude sampling: the binomial estimate. */
    bk_estimate_binomial(m->n0, m->nf, level, e);
  } else if (pf > 0) {
    double v = genealogy_var(m);
    if (isnan(v))
      return bk_mctx_nomem(&m->ctx);
    double sd = 0, s2 = 0;
    for (int l = 0; l <= m->level; l++) {
      sd += m->hd[l];
      s2 += m->hd[l] * m->hd[l];
    }
    double rho = fmin(1, LEVEL_RHO / sqrt((double)m->nc));
    if (s2 > 0)
      v *= 1 + rho * (sd * sd - s2) / s2;
    bk_estimate_lognormal(pf, v > 0 ? sqrt(v) : INFINITY, level, e);
    e->ci_method = "subset genealogy (lognormal)";
    if (bk_result_detail(res, "au-beck cov (levels uncorrelated)",
                         sqrt(m->delta2)))
      return bk_mctx_nomem(&m->ctx);
  } else {
    bk_estimate_lognormal(pf, INFINITY, level, e);
    e->ci_method = "upper bound from the last level";
    e->ci[1] =
        exp(m->logreach) * (1 - pow((1 - level) / 2, 1.0 / (double)m->N));
    e->ci_exact[1] = e->ci[1];
    bk_estimate_set_beta(e);
  }
  e->n = m->ctx.n;
  e->failures = m->nf;
  /* Several limit states: each mode from the last level's failures. */
  if (s->nmodes && bk__system_subset(res, s, m->cur.g, m->cur.fm, m->cur.off,
                                     m->cur.len, m->nchains) == BK_ENOMEM)
    return bk_mctx_nomem(&m->ctx);
  res->excluded = m->fail_mode ? 0 : m->e0;
  res->pf_bounds[0] = res->pf_bounds[1] = e->pf;
  if (m->e0 && !m->fail_mode && m->p_first > 0) {
    /* Level 0's faulty points as safe, then as failed. */
    double n0 = (double)m->n0, e0 = (double)m->e0, N = (double)m->N;
    res->pf_bounds[0] = e->pf * (n0 / N);
    res->pf_bounds[1] = e->pf / m->p_first * (m->p_first * n0 + e0) / N;
    if (m->level == 0)
      res->pf_bounds[1] = (m->p_first * n0 + e0) / N;
  }
  return 0;
}

/* Details and the evidence against the result (see docs/methods.md).
 * Returns 0 or BK_ENOMEM with err set. */
static int report_evidence(ss_t *m) {
  const bk_analysis_t *a = &m->ctx.s->analysis;
  bk_result_t *res = m->ctx.res;
  double rate = m->acc_n ? m->acc_sum / (double)m->acc_n : NAN;
  int rc = 0;
  if (bk_result_detail(res, "levels", m->level + 1) ||
      bk_result_detail(res, "chains with failures", (double)m->final_chains) ||
      (m->acc_n && bk_result_detail(res, "acceptance rate", rate)) ||
      bk_result_push_history(res))
    goto nomem;
  if (!m->final) {
    res->stop_reason = "level cap reached";
    rc = bk_result_warn(
        res,
        "the levels stopped at %d (analysis.subset.max_levels %d or "
        "max_evaluations) before the failure domain was reached: %zu "
        "failures in the last level; Pf lies below %.3g, the probability "
        "of the last threshold, and this estimate is rough",
        m->level + 1, a->subset.max_levels, m->nf, exp(m->logreach));
  } else if (m->level > 0 && (m->nf < 20 || m->final_chains < 5)) {
    rc = bk_result_warn(
        res,
        "the failures of the last level come from %llu of %zu chains (%zu "
        "failures): the chains may not explore the whole failure domain, "
        "so the estimate and its cov can be off; use more analysis.samples",
        (unsigned long long)m->final_chains, m->nchains, m->nf);
  }
  if (rc || (m->acc_n && rate < 0.05 &&
             bk_result_warn(res,
                            "the chains accepted only %.1f%% of their "
                            "proposals: they barely move, and the cov is "
                            "optimistic",
                            100 * rate)))
    goto nomem;
  if (m->mcmc_e && bk_result_warn(res,
                                  "%llu chain proposals ended in a model "
                                  "error and were taken as rejected; "
                                  "pf_bounds cover the first level's errors "
                                  "only",
                                  (unsigned long long)m->mcmc_e))
    goto nomem;
  return 0;
nomem:
  return bk_mctx_nomem(&m->ctx);
}

int bk__method_subset(const bk_study_t *s, bk_evaluator_t *ev,
                      const bk_method_opts_t *opts, bk_result_t *res,
                      bk_error_t *err) {
  ss_t m;
  memset(&m, 0, sizeof m);
  bk_mctx_init(&m.ctx, s, ev, opts, res, err);
  m.nu = m.ctx.nu;
  m.N = (size_t)s->analysis.samples;
  m.nc = (size_t)floor(s->analysis.subset.p0 * (double)m.N + 0.5);
  /* The loader refuses a study of constants only, and samples * p0 out
   * of [1, samples). */
  assert(m.nu > 0 && m.nc >= 1 && m.nc < m.N);
  m.fail_mode = s->model.on_error == BK_ON_ERROR_FAIL;
  m.lambda = LAMBDA0;
  m.p_first = 1;
  int rc;
  if ((rc = ss_alloc(&m)))
    goto out;
  res->stop_reason = "failure domain reached";
  if ((rc = level0(&m)) || (rc = run_levels(&m)))
    goto out;
  if ((rc = fill_estimate(&m)) || (rc = report_evidence(&m)))
    goto out;
  rc = bk_mctx_finish(&m.ctx);
out:
  bk_mctx_close(&m.ctx);
  ss_free(&m);
  return rc;
}
