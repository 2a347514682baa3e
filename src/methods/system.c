/*
 * Systems of several limit states under FORM (see system.h).
 *
 * Each mode gets its own design-point search through an evaluator that
 * files its keys under "form/<mode>/..." and hands the search that mode's
 * value as g; the study's evaluator still computes (and records) the
 * system's g, and the mode's value is computed again from x and y, so a
 * resumed run replays the same keys.
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/system.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "numerics/special.h"

/* Bounds for the union of n events of probabilities p (descending order of
 * idx) and pairwise joint probabilities pij (n x n). */
static void union_bounds(const double *p, const double *pij, const int *idx,
                         size_t n, double simple[2], double dit[2]) {
  double sum = 0, lo = 0, hi = 0;
  for (size_t a = 0; a < n; a++) {
    int i = idx[a];
    sum += p[i];
    double s = 0, mx = 0;
    for (size_t b = 0; b < a; b++) {
      double q = pij[i * n + idx[b]];
      s += q;
      mx = q > mx ? q : mx;
    }
    lo += a == 0 ? p[i] : fmax(0, p[i] - s);
    hi += a == 0 ? p[i] : p[i] - mx;
  }
  simple[0] = n ? p[idx[0]] : 0;
  simple[1] = fmin(1, sum);
  dit[0] = fmin(1, lo);
  dit[1] = fmin(1, hi);
}

/* idx: 0..n-1 by descending p. */
static void order_desc(const double *p, int *idx, size_t n) {
  for (size_t i = 0; i < n; i++)
    idx[i] = (int)i;
  for (size_t i = 1; i < n; i++)
    for (size_t j = i; j > 0 && p[idx[j]] > p[idx[j - 1]]; j--) {
      int t = idx[j];
      idx[j] = idx[j - 1];
      idx[j - 1] = t;
    }
}

void bk_system_bounds(const double *beta, const double *alpha, size_t n,
                      size_t nu, int parallel, bk_system_bounds_t *out) {
  double p[BK_STUDY_MAX_MODES], q[BK_STUDY_MAX_MODES];
  double pij[BK_STUDY_MAX_MODES * BK_STUDY_MAX_MODES];
  double qij[BK_STUDY_MAX_MODES * BK_STUDY_MAX_MODES];
  int idx[BK_STUDY_MAX_MODES];
  int positive = 1;
  memset(out, 0, sizeof *out);
  if (n == 0 || n > BK_STUDY_MAX_MODES)
    return;
  for (size_t i = 0; i < n; i++) {
    p[i] = bk_norm_cdf(-beta[i]);
    q[i] = bk_norm_cdf(beta[i]);
  }
  for (size_t i = 0; i < n; i++)
    for (size_t j = 0; j < n; j++) {
      double rho = 0;
      for (size_t k = 0; k < nu; k++)
        rho += alpha[i * nu + k] * alpha[j * nu + k];
      rho = rho > 1 ? 1 : rho < -1 ? -1 : rho;
      positive &= i == j || rho >= 0;
      /* P(F_i and F_j), and of the complements P(S_i and S_j). */
      pij[i * n + j] = i == j ? p[i] : bk_norm2_cdf(-beta[i], -beta[j], rho);
      qij[i * n + j] = i == j ? q[i] : bk_norm2_cdf(beta[i], beta[j], rho);
    }
  out->present = 1;
  if (!parallel) {
    order_desc(p, idx, n);
    union_bounds(p, pij, idx, n, out->simple, out->ditlevsen);
    return;
  }
  /* Parallel: the intersection of the F_i is the complement of the union
   * of the S_i; bounds on that union bound it from the other side. */
  double prod = 1, mn = 1;
  for (size_t i = 0; i < n; i++) {
    prod *= p[i];
    mn = fmin(mn, p[i]);
  }
  out->simple[0] = positive ? prod : 0;
  out->simple[1] = mn;
  double s_simple[2], s_dit[2];
  order_desc(q, idx, n);
  union_bounds(q, qij, idx, n, s_simple, s_dit);
  double upair = mn;
  for (size_t i = 0; i < n; i++)
    for (size_t j = i + 1; j < n; j++)
      upair = fmin(upair, pij[i * n + j]);
  out->ditlevsen[0] = fmax(0, 1 - s_dit[1]);
  out->ditlevsen[1] = fmin(upair, fmax(0, 1 - s_dit[0]));
  if (out->ditlevsen[0] > out->ditlevsen[1]) /* rounding, n = 2 */
    out->ditlevsen[0] = out->ditlevsen[1];
}

/* ---- FORM per mode ------------------------------------------------------ */

typedef struct {
  bk_evaluator_t *inner;
  const bk_study_t *s;
  size_t k;
  double *vals;
} mode_eval_t;

/* The inner evaluator under "form/<mode>/...", then g := the mode's value.
 * A fault of the system's g that is only another mode's NaN is no fault of
 * this mode. */
static int mode_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                      size_t n, bk_error_t *err) {
  mode_eval_t *me = ev->data;
  const bk_study_t *s = me->s;
  char p[160];
  const char *rest = strncmp(prefix, "form/", 5) == 0 ? prefix + 5 : prefix;
  snprintf(p, sizeof p, "form/%s/%s", s->modes[me->k].name, rest);
  int rc = me->inner->batch(me->inner, p, pts, n, err);
  if (rc)
    return rc;
  size_t nx = s->nvars, ny = s->model.noutputs;
  for (size_t i = 0; i < n; i++) {
    bk_point_t *pt = &pts[i];
    if (pt->fault != BK_FAULT_NONE && pt->fault != BK_FAULT_NOT_A_NUMBER)
      continue;
    memcpy(me->vals, pt->x, nx * sizeof *me->vals);
    if (ny)
      memcpy(me->vals + nx, pt->y, ny * sizeof *me->vals);
    double gc[BK_STUDY_MAX_MODES];
    bk_study_g(s, me->vals, gc);
    pt->g = gc[me->k];
    pt->fault = isnan(pt->g) ? BK_FAULT_NOT_A_NUMBER : BK_FAULT_NONE;
  }
  return 0;
}

/* Copies design point a into b (arrays allocated for nu and nvars). */
static int copy_dp(const bk_design_point_t *a, bk_design_point_t *b, size_t nu,
                   size_t nvars) {
  *b = *a;
  b->u = bk_calloc(nu ? nu : 1, sizeof *b->u);
  b->x = bk_calloc(nvars ? nvars : 1, sizeof *b->x);
  b->alpha2 = bk_calloc(nvars ? nvars : 1, sizeof *b->alpha2);
  if (!b->u || !b->x || !b->alpha2)
    return BK_ENOMEM;
  memcpy(b->u, a->u, nu * sizeof *b->u);
  memcpy(b->x, a->x, nvars * sizeof *b->x);
  memcpy(b->alpha2, a->alpha2, nvars * sizeof *b->alpha2);
  return 0;
}

int bk__system_form(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err) {
  size_t nm = s->nsystem, nu = bk_transform_nu(s->transform);
  const char *names[BK_STUDY_MAX_MODES];
  for (size_t i = 0; i < s->nmodes; i++)
    names[i] = s->modes[i].name;
  double beta[BK_STUDY_MAX_MODES];
  double *alpha = bk_calloc(nm * (nu ? nu : 1) + 1, sizeof *alpha);
  double *vals = bk_calloc(s->nvars + s->model.noutputs + 1, sizeof *vals);
  int rc = 0;
  if (!alpha || !vals || bk_result_components(res, names, s->nmodes, 0) != 0) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  mode_eval_t me = {ev, s, 0, vals};
  bk_evaluator_t mev = {mode_batch, &me};
  long best = -1;
  for (size_t k = 0; k < s->nmodes; k++) {
    me.k = k;
    bk_result_t r;
    memset(&r, 0, sizeof r);
    r.method = res->method;
    bk_mctx_t m;
    bk_mctx_init(&m, s, &mev, opts, &r, err);
    rc = bk__method_form_search(&m, NULL);
    if (rc == 0)
      rc = bk_mctx_finish(&m);
    bk_mctx_close(&m);
    res->evaluations += r.evaluations;
    res->model_errors += r.model_errors;
    bk_component_t *c = &res->components[k];
    if (rc == 0)
      rc = copy_dp(&r.dp, &c->dp, nu, s->nvars) ? BK_ENOMEM : 0;
    for (size_t i = 0; rc == 0 && i < r.nwarnings; i++)
      rc = bk_result_warn(res, "%s: %s", names[k], r.warnings[i]);
    for (size_t i = 0; rc == 0 && i < r.nnotes; i++)
      rc = bk_result_note(res, "%s: %s", names[k], r.notes[i]);
    if (rc == BK_ENOMEM)
      bk_error_set(err, rc, NULL, 0, 0, "out of memory");
    if (rc) {
      bk_result_close(&r);
      goto out;
    }
    c->present = 1;
    c->est.pf = r.dp.pf_form;
    c->est.beta = r.dp.beta;
    c->est.cov = NAN;
    c->est.ci[0] = c->est.ci[1] = r.dp.pf_form;
    c->est.ci_exact[0] = c->est.ci_exact[1] = r.dp.pf_form;
    c->est.beta_ci[0] = c->est.beta_ci[1] = r.dp.beta;
    c->est.ci_level = s->analysis.ci_level;
    c->est.ci_method = "none (FORM is not a sampling estimate)";
    c->est.n = r.evaluations;
    c->est.failures = r.est.failures;
    res->est.failures += r.est.failures;
    c->pf_bounds[0] = c->pf_bounds[1] = r.dp.pf_form;
    if (k < nm) {
      beta[k] = r.dp.beta;
      for (size_t j = 0; j < nu; j++)
        alpha[k * nu + j] = r.dp.beta != 0 ? r.dp.u[j] / r.dp.beta : 0;
      if (best < 0 || r.dp.beta < beta[best])
        best = (long)k;
    }
    res->stop_reason = r.stop_reason;
    bk_result_close(&r);
  }
  bk_system_bounds(beta, alpha, nm, nu, s->system == BK_SYSTEM_PARALLEL,
                   &res->bounds);
  /* The system: the Ditlevsen bounds as the interval and the upper one,
   * on the safe side, as the estimate. */
  bk_estimate_t *e = &res->est;
  uint64_t failures = e->failures;
  memset(e, 0, sizeof *e);
  e->failures = failures;
  e->pf = res->bounds.ditlevsen[1];
  e->beta = -bk_norm_icdf(e->pf);
  e->cov = NAN;
  e->ci[0] = e->ci_exact[0] = res->bounds.ditlevsen[0];
  e->ci[1] = e->ci_exact[1] = res->bounds.ditlevsen[1];
  e->beta_ci[0] = -bk_norm_icdf(e->ci[1]);
  e->beta_ci[1] = -bk_norm_icdf(e->ci[0]);
  e->ci_level = s->analysis.ci_level;
  e->ci_method = "none (Ditlevsen bounds, first order)";
  e->n = res->evaluations;
  res->pf_bounds[0] = e->ci[0];
  res->pf_bounds[1] = e->ci[1];
  if (best >= 0 &&
      (rc = copy_dp(&res->components[best].dp, &res->dp, nu, s->nvars)) != 0) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  if (best >= 0 &&
      (rc = bk_result_note(
           res,
           "FORM of a %s system: a design point per limit state (the one "
           "shown is %s's, the smallest beta); the system's Pf is the upper "
           "Ditlevsen bound, its interval the Ditlevsen bounds",
           s->system == BK_SYSTEM_PARALLEL ? "parallel" : "series",
           names[best])) != 0) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  if (bk_result_push_history(res))
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
out:
  bk_free(alpha);
  bk_free(vals);
  return rc;
}

/* ---- subset simulation -------------------------------------------------- */

int bk__system_subset(bk_result_t *res, const bk_study_t *s, const double *g,
                      const uint32_t *fm, const size_t *off, const size_t *len,
                      size_t nchains) {
  const char *names[BK_STUDY_MAX_MODES];
  for (size_t i = 0; i < s->nmodes; i++)
    names[i] = s->modes[i].name;
  if (bk_result_components(res, names, s->nmodes, 0))
    return BK_ENOMEM;
  if (s->system != BK_SYSTEM_SERIES)
    return bk_result_note(
        res,
        "subset simulation follows the system's g: the modes of a %s "
        "system are not estimated (their failure domains do not lie "
        "inside the system's, so the last level says nothing of "
        "them); use a sampling method, importance or cross-entropy "
        "for each mode's Pf",
        s->system == BK_SYSTEM_PARALLEL ? "parallel"
                                        : "system written as "
                                          "an expression");
  const bk_estimate_t *sys = &res->est;
  double nf = 0;
  uint64_t cnt[BK_STUDY_MAX_MODES] = {0};
  for (size_t c = 0; c < nchains; c++)
    for (size_t i = off[c]; i < off[c] + len[c]; i++) {
      if (!(g[i] <= 0))
        continue;
      nf++;
      for (size_t k = 0; k < s->nmodes; k++)
        cnt[k] += (fm[i] >> k) & 1u;
    }
  for (size_t k = 0; k < s->nmodes; k++) {
    bk_component_t *c = &res->components[k];
    if (!(nf > 0) || !(sys->pf > 0))
      continue;
    double q = (double)cnt[k] / nf;
    /* The error of the share q = sum B_c / sum A_c (A_c: failures of chain
     * c, B_c: those where the mode fails) by the delta method with the
     * chains as independent groups, which keeps the correlation of states
     * along a chain (chains from related seeds stay correlated: still
     * somewhat optimistic). */
    double v = 0;
    for (size_t ch = 0; ch < nchains; ch++) {
      double a = 0, b = 0;
      for (size_t i = off[ch]; i < off[ch] + len[ch]; i++)
        if (g[i] <= 0) {
          a++;
          b += (fm[i] >> k) & 1u;
        }
      v += (b - q * a) * (b - q * a);
    }
    if (nchains > 1)
      v *= (double)nchains / (double)(nchains - 1);
    double cq2 = q > 0 ? v / (nf * nf) / (q * q) : INFINITY;
    double cov = sqrt(sys->cov * sys->cov + cq2);
    bk_estimate_lognormal(sys->pf * q, cov, s->analysis.ci_level, &c->est);
    c->est.ci_method = "subset, last level share (lognormal)";
    c->est.failures = cnt[k];
    c->est.n = sys->n;
    c->present = 1;
    c->system_failures = cnt[k];
    c->pf_bounds[0] = c->pf_bounds[1] = c->est.pf;
  }
  return bk_result_note(
      res, "each limit state's Pf is the system's times the share of the "
           "last level's failures in which it fails (its failure domain "
           "lies inside the series system's); the share's error groups the "
           "failures by chain, but chains from related seeds stay "
           "correlated, so a rare mode's interval can be optimistic");
}

int bk__system_surrogate(bk_result_t *res, const bk_study_t *s) {
  const char *names[BK_STUDY_MAX_MODES];
  for (size_t i = 0; i < s->nmodes; i++)
    names[i] = s->modes[i].name;
  if (bk_result_components(res, names, s->nmodes, 0))
    return BK_ENOMEM;
  return bk_result_note(
      res, "the surrogate learns the system's g only: the limit states' own "
           "Pf are not estimated (use a sampling method, importance or "
           "cross-entropy for them)");
}
