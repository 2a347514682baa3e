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
 * Error bar: the Au-Beck coefficient of variation, delta^2 = sum_l
 * (1 - P_l) / (N P_l) (1 + gamma_l), with gamma_l from the correlation of
 * the indicator along the chains (Au & Beck 2001, eqs. 27-29); levels are
 * taken as uncorrelated. The interval is lognormal with that cov, named
 * "au-beck (lognormal)".
 *
 * Model errors: at level 0 a faulty point is left out (skip) or taken as
 * failed (fail, g = -inf); in the chains a faulty proposal is a rejected
 * one, counted in model_errors. pf_bounds cover level 0 only (its faulty
 * points taken as safe and as failed, the later levels unchanged); what a
 * rejected faulty proposal hides cannot be bounded without more runs.
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/method_impl.h"
#include "numerics/rng.h"
#include "numerics/special.h"
#include "base/stop.h"

#define MIN_FOR_ERROR_LIMIT 20
#define TARGET_ACCEPTANCE   0.44
#define LAMBDA0             0.6

typedef struct {
  const bk_study_t *s;
  bk_evaluator_t *ev;
  const bk_method_opts_t *opts;
  bk_result_t *res;
  bk_error_t *err;
  size_t nu, N;
  bk_point_t *pts;
  double *xs, *ys;
  uint64_t total_n, total_e, mcmc_e;
} ss_t;

static int check_error_limit(ss_t *m, int final) {
  const bk_model_t *md = &m->s->model;
  if (m->total_n == 0 || (!final && m->total_n < MIN_FOR_ERROR_LIMIT))
    return 0;
  if (!md->present && m->total_e < m->total_n)
    return 0;
  double frac = (double)m->total_e / (double)m->total_n;
  if (frac > md->max_error_fraction)
    return bk_error_set(m->err, BK_EMODEL, NULL, 0, 0,
                        "%llu of %llu model runs failed (%.1f%%, above "
                        "model.max_error_fraction %g); the records say why "
                        "and the run folders are kept. Fix the model and "
                        "run again to resume",
                        (unsigned long long)m->total_e,
                        (unsigned long long)m->total_n, 100 * frac,
                        md->max_error_fraction);
  return 0;
}

/* Evaluates n points whose u are rows of `us`, key prefix/index[i]. */
static int evaluate(ss_t *m, const char *prefix, const double *us,
                    const uint64_t *index, size_t n) {
  const bk_study_t *s = m->s;
  size_t ny = s->model.noutputs;
  for (size_t i = 0; i < n; i++) {
    bk_point_t *p = &m->pts[i];
    p->index = index[i];
    p->x = m->xs + i * s->nvars;
    p->y = ny ? m->ys + i * ny : NULL;
    bk_transform_u_to_x(s->transform, us + i * m->nu, p->x);
    p->g = NAN;
    p->fault = BK_FAULT_NONE;
  }
  int rc = m->ev->batch(m->ev, prefix, m->pts, n, m->err);
  if (rc)
    return rc;
  for (size_t i = 0; i < n; i++) {
    m->total_n++;
    if (m->pts[i].fault != BK_FAULT_NONE) {
      m->total_e++;
      if (s->model.on_error == BK_ON_ERROR_ABORT)
        return bk_error_set(m->err, BK_EMODEL, NULL, 0, 0,
                            "model error (%s) at %s/%llu and model.on_error "
                            "is abort",
                            bk_fault_name(m->pts[i].fault), prefix,
                            (unsigned long long)m->pts[i].index);
    }
  }
  m->res->evaluations = m->total_n;
  m->res->model_errors = m->total_e;
  if (bk_stop_requested())
    return BK_ESTOPPED;
  return check_error_limit(m, 0);
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

/* gamma of Au & Beck (2001, eq. 29) for the indicator g <= b over chains
 * stored one after the other (chain c at off[c], len[c] points), with
 * P the fraction of all N points below b. Unequal chain lengths use the
 * pairs that exist at each lag. */
static double chain_gamma(const double *g, const size_t *off, const size_t *len,
                          size_t nc, size_t N, double b, double P) {
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

int bk__method_subset(const bk_study_t *s, bk_evaluator_t *ev,
                      const bk_method_opts_t *opts, bk_result_t *res,
                      bk_error_t *err) {
  const bk_analysis_t *a = &s->analysis;
  ss_t m;
  memset(&m, 0, sizeof m);
  m.s = s;
  m.ev = ev;
  m.res = res;
  m.err = err;
  m.opts = opts;
  m.nu = bk_transform_nu(s->transform);
  size_t nu = m.nu, N = (size_t)a->samples;
  if (nu == 0)
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "every variable is a constant: there is nothing to "
                        "sample; give at least one variable a distribution");
  size_t nc = (size_t)floor(a->subset.p0 * (double)N + 0.5);
  if (nc < 1 || nc >= N)
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "subset simulation needs analysis.samples * "
                        "analysis.subset.p0 between 1 and the samples "
                        "(got %zu samples, p0 %g)",
                        N, a->subset.p0);
  size_t ny = s->model.noutputs;
  m.N = N;
  m.pts = bk_calloc(N, sizeof *m.pts);
  m.xs = bk_calloc(N * (s->nvars ? s->nvars : 1), sizeof *m.xs);
  m.ys = ny ? bk_calloc(N * ny, sizeof *m.ys) : NULL;
  double *u = bk_calloc(N * nu, sizeof *u), *u2 = bk_calloc(N * nu, sizeof *u);
  double *g = bk_calloc(N, sizeof *g), *g2 = bk_calloc(N, sizeof *g);
  double *prop = bk_calloc(N * nu, sizeof *prop);
  double *sig = bk_calloc(nu, sizeof *sig), *z = bk_calloc(nu, sizeof *z);
  size_t *order = bk_calloc(N, sizeof *order);
  size_t *off = bk_calloc(N, sizeof *off), *len = bk_calloc(N, sizeof *len);
  size_t *off2 = bk_calloc(N, sizeof *off), *len2 = bk_calloc(N, sizeof *len);
  size_t *seedpos = bk_calloc(N, sizeof *seedpos),
         *who = bk_calloc(N, sizeof *who);
  uint64_t *idx = bk_calloc(N, sizeof *idx);
  int rc = 0;
  if (!m.pts || !m.xs || (ny && !m.ys) || !u || !u2 || !g || !g2 || !prop ||
      !sig || !z || !order || !off || !len || !off2 || !len2 || !seedpos ||
      !who || !idx) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  int fail_mode = s->model.on_error == BK_ON_ERROR_FAIL;

  /* Level 0: Monte Carlo. */
  uint64_t st0 = bk_rng_stream("ss/l0");
  for (size_t i = 0; i < N; i++) {
    bk_rng_u01_fill(s->seed, st0, i, 0, (uint32_t)nu, u + i * nu);
    for (size_t d = 0; d < nu; d++)
      u[i * nu + d] = bk_norm_icdf(u[i * nu + d]);
    idx[i] = i;
  }
  if ((rc = evaluate(&m, "ss/l0", u, idx, N)))
    goto out;
  size_t e0 = 0;
  for (size_t i = 0; i < N; i++) {
    g[i] = m.pts[i].g;
    if (m.pts[i].fault != BK_FAULT_NONE) {
      e0++;
      g[i] = fail_mode ? -INFINITY : INFINITY;
    }
    off[i] = i;
    len[i] = 1;
  }
  size_t nchains = N;                 /* level 0: N chains of one point */
  size_t n0 = fail_mode ? N : N - e0; /* points in level 0's estimate */
  if (n0 == 0) {
    rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                      "every evaluation of the first level failed");
    goto out;
  }
  double logp = 0, logreach = 0, delta2 = 0, lambda = LAMBDA0;
  double p_first = 1; /* level 0's conditional probability */
  double acc_sum = 0;
  uint64_t acc_n = 0;
  int level = 0, final = 0;
  size_t nf = 0;
  uint64_t final_chains = 0;
  char label[64], prefix[64];
  res->stop_reason = "failure domain reached";
  for (;;) {
    size_t nl = level == 0 ? n0 : N;
    for (size_t i = 0; i < N; i++)
      order[i] = i;
    sort_g = g;
    qsort(order, N, sizeof *order, cmp_order);
    nf = 0;
    for (size_t i = 0; i < N; i++)
      nf += g[i] <= 0;
    int capped = level + 1 >= a->subset.max_levels ||
                 m.total_n + (N - nc) > a->max_evaluations;
    if (nf >= nc || capped) {
      double P = (double)nf / (double)nl;
      double gam = chain_gamma(g, off, len, nchains, N, 0, P);
      if (level == 0)
        p_first = P;
      logreach = logp;
      logp += P > 0 ? log(P) : -INFINITY;
      if (P > 0)
        delta2 += (1 - P) / ((double)nl * P) * (1 + gam);
      final = nf >= nc;
      /* Chains holding a failure. */
      for (size_t c = 0; c < nchains; c++) {
        int any = 0;
        for (size_t j = 0; j < len[c]; j++)
          any |= g[off[c] + j] <= 0;
        final_chains += any;
      }
      snprintf(label, sizeof label, "P(g <= 0 | level %d)", level);
      if ((rc = bk_result_detail(res, label, P)))
        goto nomem;
      break;
    }
    double b = g[order[nc - 1]];
    size_t ns = 0;
    for (size_t i = 0; i < N; i++)
      if (g[i] <= b)
        seedpos[ns++] = i;
    double P = (double)ns / (double)nl;
    if (level == 0)
      p_first = P;
    double gam = chain_gamma(g, off, len, nchains, N, b, P);
    logp += log(P);
    delta2 += (1 - P) / ((double)nl * P) * (1 + gam);
    snprintf(label, sizeof label, "threshold level %d", level + 1);
    if ((rc = bk_result_detail(res, label, b)))
      goto nomem;
    level++;
    /* Next level: chain c starts at its seed; lengths share N out. */
    size_t maxlen = 0, o = 0;
    for (size_t c = 0; c < ns; c++) {
      off2[c] = o;
      len2[c] = N / ns + (c < N % ns);
      if (len2[c] > maxlen)
        maxlen = len2[c];
      memcpy(u2 + o * nu, u + seedpos[c] * nu, nu * sizeof *u);
      g2[o] = g[seedpos[c]];
      o += len2[c];
    }
    /* Spread of the seeds per coordinate. */
    for (size_t d = 0; d < nu; d++) {
      double mean = 0, var = 0;
      for (size_t c = 0; c < ns; c++)
        mean += u[seedpos[c] * nu + d];
      mean /= (double)ns;
      for (size_t c = 0; c < ns; c++) {
        double dd = u[seedpos[c] * nu + d] - mean;
        var += dd * dd;
      }
      sig[d] = ns > 1 ? sqrt(var / (double)(ns - 1)) : 1;
    }
    uint64_t acc_level = 0, prop_level = 0;
    for (size_t step = 1; step < maxlen; step++) {
      snprintf(prefix, sizeof prefix, "ss/l%d/s%zu", level, step);
      uint64_t stream = bk_rng_stream(prefix);
      size_t np = 0;
      for (size_t c = 0; c < ns; c++) {
        if (len2[c] <= step)
          continue;
        const double *cur = u2 + (off2[c] + step - 1) * nu;
        bk_rng_u01_fill(s->seed, stream, c, 0, (uint32_t)nu, z);
        for (size_t d = 0; d < nu; d++) {
          double sd = lambda * sig[d];
          if (sd > 1)
            sd = 1;
          double r = sqrt(1 - sd * sd);
          prop[np * nu + d] = r * cur[d] + sd * bk_norm_icdf(z[d]);
        }
        idx[np] = c;
        who[np] = c;
        np++;
      }
      if ((rc = evaluate(&m, prefix, prop, idx, np)))
        goto out;
      size_t acc = 0;
      for (size_t i = 0; i < np; i++) {
        size_t c = who[i];
        size_t at = off2[c] + step;
        const bk_point_t *p = &m.pts[i];
        int ok = p->fault == BK_FAULT_NONE && p->g <= b;
        if (p->fault != BK_FAULT_NONE)
          m.mcmc_e++;
        if (ok) {
          memcpy(u2 + at * nu, prop + i * nu, nu * sizeof *u);
          g2[at] = p->g;
          acc++;
        } else {
          memcpy(u2 + at * nu, u2 + (at - 1) * nu, nu * sizeof *u);
          g2[at] = g2[at - 1];
        }
      }
      double rate = np ? (double)acc / (double)np : 0;
      acc_level += acc;
      prop_level += np;
      lambda *= exp((rate - TARGET_ACCEPTANCE) / sqrt((double)step));
    }
    double rate_level = prop_level ? (double)acc_level / prop_level : NAN;
    acc_sum += (double)acc_level;
    acc_n += prop_level;
    snprintf(label, sizeof label, "acceptance level %d", level);
    if ((rc = bk_result_detail(res, label, rate_level)))
      goto nomem;
    /* The new level replaces the old. */
    double *t = u;
    u = u2;
    u2 = t;
    t = g;
    g = g2;
    g2 = t;
    size_t *tt = off;
    off = off2;
    off2 = tt;
    tt = len;
    len = len2;
    len2 = tt;
    nchains = ns;
    res->est.pf = NAN;
    res->est.cov = NAN;
    if (m.opts && m.opts->progress)
      m.opts->progress(m.opts->progress_data, res,
                       m.total_n + N - (N / 10 < nc ? nc : N / 10));
  }

  /* The estimate. */
  bk_estimate_t *e = &res->est;
  memset(e, 0, sizeof *e);
  e->pf = exp(logp);
  e->cov = e->pf > 0 ? sqrt(delta2) : INFINITY;
  e->n = m.total_n;
  e->failures = nf;
  e->ci_level = a->ci_level;
  double zq = bk_norm_icdf(0.5 + a->ci_level / 2);
  if (e->pf > 0) {
    double sl = sqrt(log(1 + delta2));
    e->ci_method = "au-beck (lognormal)";
    e->ci[0] = e->pf * exp(-zq * sl);
    e->ci[1] = e->pf * exp(zq * sl);
  } else {
    /* No failure in the last level: an upper bound from its N points
     * (Clopper-Pearson for 0 of N) times the levels' probability. */
    e->ci_method = "upper bound from the last level";
    e->ci[0] = 0;
    e->ci[1] =
        exp(logreach) * (1 - pow((1 - a->ci_level) / 2, 1.0 / (double)N));
  }
  e->ci_exact[0] = e->ci[0];
  e->ci_exact[1] = e->ci[1];
  e->beta = bk_beta_from_pf(e->pf);
  e->beta_ci[0] = bk_beta_from_pf(e->ci[1]);
  e->beta_ci[1] = bk_beta_from_pf(e->ci[0]);
  res->excluded = fail_mode ? 0 : e0;
  res->pf_bounds[0] = res->pf_bounds[1] = e->pf;
  if (e0 && !fail_mode && p_first > 0) {
    /* Level 0's faulty points as safe, then as failed. */
    double f = (double)n0 / (double)N;
    res->pf_bounds[0] = e->pf * f;
    res->pf_bounds[1] =
        e->pf / p_first * (p_first * (double)n0 + (double)e0) / (double)N;
    if (level == 0)
      res->pf_bounds[1] = (p_first * (double)n0 + (double)e0) / (double)N;
  }
  if ((rc = bk_result_detail(res, "levels", level + 1)) ||
      (rc = bk_result_detail(res, "chains with failures",
                              (double)final_chains)) ||
      (acc_n && (rc = bk_result_detail(res, "acceptance rate",
                                        acc_sum / (double)acc_n))))
    goto nomem;
  if ((rc = bk_result_push_history(res)))
    goto nomem;
  if (!final) {
    res->stop_reason = "level cap reached";
    if ((rc = bk_result_warn(
             res,
             "the levels stopped at %d (analysis.subset.max_levels %d or "
             "max_evaluations) before the failure domain was reached: "
             "%zu failures in the last level; Pf lies below %.3g, the "
             "probability of the last threshold, and this estimate is rough",
             level + 1, a->subset.max_levels, nf, exp(logreach))))
      goto nomem;
  } else if (level > 0 && (nf < 20 || final_chains < 5)) {
    if ((rc = bk_result_warn(
             res,
             "the failures of the last level come from %llu of %zu chains "
             "(%zu failures): the chains may not explore the whole failure "
             "domain, so the estimate and its cov can be off; use more "
             "analysis.samples",
             (unsigned long long)final_chains, nchains, nf)))
      goto nomem;
  }
  if (acc_n && acc_sum / (double)acc_n < 0.05)
    if ((rc = bk_result_warn(res,
                              "the chains accepted only %.1f%% of their "
                              "proposals: they barely move, and the cov is "
                              "optimistic",
                              100 * acc_sum / (double)acc_n)))
      goto nomem;
  if (m.mcmc_e)
    if ((rc = bk_result_warn(res,
                              "%llu chain proposals ended in a model error "
                              "and were taken as rejected; pf_bounds cover "
                              "the first level's errors only",
                              (unsigned long long)m.mcmc_e)))
      goto nomem;
  rc = check_error_limit(&m, 1);
  goto out;
nomem:
  rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
out:
  res->evaluations = m.total_n;
  res->model_errors = m.total_e;
  bk_free(m.pts);
  bk_free(m.xs);
  bk_free(m.ys);
  bk_free(u);
  bk_free(u2);
  bk_free(g);
  bk_free(g2);
  bk_free(prop);
  bk_free(sig);
  bk_free(z);
  bk_free(order);
  bk_free(off);
  bk_free(len);
  bk_free(off2);
  bk_free(len2);
  bk_free(seedpos);
  bk_free(who);
  bk_free(idx);
  return rc;
}
