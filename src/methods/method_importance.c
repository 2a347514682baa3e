/*
 * Importance sampling around the design points. The centres c_k are the
 * design points the FORM phase finds with its exploration (same evaluator,
 * same method context, keys "form/..."), or analysis.importance.center
 * (x-space, mapped to u). Samples come from a defensive mixture
 * (Hesterberg 1995, Technometrics 37:185-194; Owen & Zhou 2000, JASA
 * 95:135-143):
 *
 *   h(u) = delta phi(u) + (1 - delta) sum_k pi_k phi(u - c_k),
 *
 * delta = analysis.importance.defensive, pi_k proportional to each design
 * point's first-order share of Pf (Phi(-beta_k), times its curvature
 * factor where checked). Sample I, key "is/I", takes its component from
 * uniform 0 and its normals from uniforms 1..nu of the counter-based
 * stream "is"; its weight w = phi(u) / h(u) is at most 1 / delta, so one
 * sample in a failure region no design point covers cannot blow up the
 * estimate, and the variance estimate stays finite. Pf = mean of
 * w I(g <= 0) with the sample variance of w I as its error (Melchers &
 * Beck, Structural Reliability Analysis and Prediction, 3rd ed., ch. 5),
 * the sampling phase and the log-space estimator of weighted.h and
 * estimate.h. When the medians fail (negative beta), Pf is above 1/2 and
 * the original density is sampled (every weight 1).
 *
 * target_cov is checked only after whole batches of analysis.samples
 * evaluations, so a resumed run stops at the same point, and only when the
 * weights are not degenerate. Warnings when the weights degenerate, when
 * FORM and sampling disagree, when a failing sample lies nearer the origin
 * than every design point, and when failing samples carry weight where no
 * design point's component reaches (a failure region the exploration
 * missed).
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <math.h>
#include <string.h>

#include "base/alloc.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "methods/weighted.h"
#include "numerics/rng.h"
#include "numerics/special.h"

/* The weights are degenerate when the effective sample size is below this
 * share of the failing samples, or one sample carries more than half of
 * the estimate. */
#define ESS_SHARE 0.1
/* The stopping rule's gate: target_cov counts only with at least this
 * many effective samples and no sample carrying half the estimate. */
#define STOP_ESS 10.0
/* Unexplained failing samples (where the original density's share of h
 * is the larger) warn once they carry this share of the estimate. */
#define UNEXPLAINED_SHARE 0.05

typedef struct {
  bk_mctx_t ctx;
  size_t nu;
  size_t k;        /* mixture components besides the original density */
  double *centers; /* k x nu */
  double *cc;      /* k: |c_k|^2 */
  double *logpi;   /* k: log((1 - delta) pi_k) */
  double *cum;     /* k: cumulative pi_k */
  double delta;    /* share of the original density */
  double near_c;   /* the smallest |c_k| */
  double *z;       /* nu + 1 uniforms, then normals */
  /* The failing sample nearest the origin: a design point is the failure
   * point nearest the origin, so a failing sample clearly nearer than
   * every centre proves that a design point was missed. */
  double near_r2;
  uint64_t near_key;
  /* Failing samples no design point explains. */
  bk_estimate_wsum_t unexp;
  uint64_t unexp_first;
  double unexp_angle; /* the largest, over them, of the smallest angle to
                         a centre (degrees) */
} is_t;

/* log(exp(a) + exp(b)). */
static double log_add(double a, double b) {
  if (a == -INFINITY)
    return b;
  if (b == -INFINITY)
    return a;
  return a > b ? a + log1p(exp(b - a)) : b + log1p(exp(a - b));
}

/* The centres: the given one, or the design points of a FORM phase run in
 * the same context (so its evaluations count towards max_evaluations and
 * the error limit), with their mixture weights. Returns 0, or a negative
 * code with err set; an error when FORM finds no design point says what
 * to do instead. */
static int find_centers(is_t *t) {
  bk_mctx_t *m = &t->ctx;
  const bk_study_t *s = m->s;
  bk_result_t *res = m->res;
  size_t nu = t->nu;
  bk__design_points_t dps;
  memset(&dps, 0, sizeof dps);
  size_t k = 1;
  if (!s->analysis.importance.has_center) {
    int rc = bk__method_form_search(m, &dps);
    if (rc)
      return rc;
    if (dps.n == 0 && !dps.complement)
      return bk_error_set(
          m->err, BK_EINVAL, NULL, 0, 0,
          "importance sampling needs a design point, and FORM found none "
          "(%s%s); give analysis.importance.center or use subset "
          "simulation",
          res->stop_reason ? res->stop_reason : "",
          res->est.failures ? "" : "; no evaluation had g <= 0");
    k = dps.complement ? 0 : dps.n;
  }
  t->delta = k == 0 ? 1 : s->analysis.importance.defensive;
  t->k = k;
  t->centers = bk_calloc(k * nu + 1, sizeof *t->centers);
  t->cc = bk_calloc(k + 1, sizeof *t->cc);
  t->logpi = bk_calloc(k + 1, sizeof *t->logpi);
  t->cum = bk_calloc(k + 1, sizeof *t->cum);
  if (!t->centers || !t->cc || !t->logpi || !t->cum) {
    bk__method_design_points_close(&dps);
    return bk_mctx_nomem(m);
  }
  if (s->analysis.importance.has_center) {
    bk_transform_x_to_u(s->transform, s->analysis.importance.center,
                        t->centers);
    t->logpi[0] = 0;
  } else if (k > 0) {
    memcpy(t->centers, dps.u, k * nu * sizeof *t->centers);
    double top = dps.log_share[0];
    for (size_t i = 1; i < k; i++)
      top = dps.log_share[i] > top ? dps.log_share[i] : top;
    for (size_t i = 0; i < k; i++)
      t->logpi[i] = dps.log_share[i] - top;
  }
  /* Normalise pi_k, and fold (1 - delta) into log pi_k. */
  double lsum = -INFINITY;
  for (size_t i = 0; i < k; i++)
    lsum = log_add(lsum, t->logpi[i]);
  double acc = 0;
  t->near_c = INFINITY;
  for (size_t i = 0; i < k; i++) {
    double p = exp(t->logpi[i] - lsum);
    acc += p;
    t->cum[i] = acc;
    t->logpi[i] = log(p) + log1p(-t->delta);
    double *c = t->centers + i * nu;
    double c2 = 0;
    for (size_t d = 0; d < nu; d++)
      c2 += c[d] * c[d];
    t->cc[i] = c2;
    t->near_c = sqrt(c2) < t->near_c ? sqrt(c2) : t->near_c;
  }
  if (k > 0)
    t->cum[k - 1] = 1;
  if (dps.complement && !s->analysis.importance.has_center)
    bk_result_note(res, "the medians fail, so Pf is above 1/2: the "
                        "samples come from the original density (every "
                        "weight 1)");
  bk__method_design_points_close(&dps);
  return 0;
}

/* log of the design-point components' density over phi at u:
 * log sum_k (1 - delta) pi_k exp(u.c_k - |c_k|^2 / 2); *best receives the
 * largest cosine between u and a centre. */
static double log_components(const is_t *t, const double *u, double *best) {
  size_t nu = t->nu;
  double l = -INFINITY, uu = 0;
  for (size_t d = 0; d < nu; d++)
    uu += u[d] * u[d];
  *best = -2;
  for (size_t i = 0; i < t->k; i++) {
    const double *c = t->centers + i * nu;
    double uc = 0;
    for (size_t d = 0; d < nu; d++)
      uc += u[d] * c[d];
    l = log_add(l, t->logpi[i] + uc - 0.5 * t->cc[i]);
    if (uu > 0 && t->cc[i] > 0) {
      double cs = uc / sqrt(uu * t->cc[i]);
      *best = cs > *best ? cs : *best;
    }
  }
  return l;
}

/* log w = log phi(u) - log h(u) = -log(delta + sum_k ...). */
static double log_weight(const is_t *t, const double *u, double *lcomp,
                         double *best) {
  *lcomp = log_components(t, u, best);
  double ld = t->delta > 0 ? log(t->delta) : -INFINITY;
  return -log_add(ld, *lcomp);
}

/* Sample `index`: its component from uniform 0, u = c_k + z (or z from
 * the original density) with z from uniforms 1..nu. */
static double draw_mixture(void *data, uint64_t stream, uint64_t index,
                           double *u) {
  is_t *t = data;
  size_t nu = t->nu;
  bk_rng_u01_fill(t->ctx.s->seed, stream, index, 0, (uint32_t)(nu + 1), t->z);
  double v = t->z[0];
  const double *c = NULL;
  if (t->k > 0 && v >= t->delta) {
    double q = (v - t->delta) / (1 - t->delta);
    size_t i = 0;
    while (i + 1 < t->k && q >= t->cum[i])
      i++;
    c = t->centers + i * nu;
  }
  for (size_t d = 0; d < nu; d++)
    u[d] = (c ? c[d] : 0) + bk_norm_icdf(t->z[1 + d]);
  double lc, best;
  return log_weight(t, u, &lc, &best);
}

/* Notes the failing sample nearest the origin (the first on ties), and
 * failing samples the design points do not explain: where the original
 * density's share of h, delta phi(u), is above the components' (their
 * weight is then above 1 / (2 delta)). */
static void see_sample(void *data, uint64_t index, const double *u, double g) {
  is_t *t = data;
  if (!(g <= 0))
    return;
  double r2 = 0;
  for (size_t d = 0; d < t->nu; d++)
    r2 += u[d] * u[d];
  if (r2 < t->near_r2) {
    t->near_r2 = r2;
    t->near_key = index;
  }
  if (t->k == 0 || !(t->delta > 0))
    return;
  double lc, best;
  double lw = log_weight(t, u, &lc, &best);
  if (log(t->delta) < lc)
    return;
  if (t->unexp.k == 0)
    t->unexp_first = index;
  bk_estimate_wsum_add(&t->unexp, lw);
  double deg = best >= -1 ? acos(best > 1 ? 1 : best) * 180 / M_PI : 180;
  t->unexp_angle = deg > t->unexp_angle ? deg : t->unexp_angle;
}

/* Whether the weights are degenerate (see ESS_SHARE). */
static int degenerate(const bk_estimate_wsum_t *e) {
  return e->k > 0 && (bk_estimate_wsum_ess(e) < ESS_SHARE * (double)e->k ||
                      bk_estimate_wsum_max_share(e) > 0.5);
}

/* The stopping rule's gate (see STOP_ESS): a sample variance from a few
 * large weights says little about the error, so it never stops the run. */
static int may_stop(void *data, const bk_weighted_t *w) {
  (void)data;
  return bk_estimate_wsum_ess(&w->est) >= STOP_ESS &&
         bk_estimate_wsum_max_share(&w->est) <= 0.5;
}

/* Details and the evidence against the result (see the file comment).
 * Returns 0 or BK_ENOMEM with err set. */
static int report_evidence(is_t *t, const bk_weighted_t *w,
                           uint64_t form_evals) {
  bk_result_t *res = t->ctx.res;
  uint64_t hits = w->lo.k; /* failing samples without a fault */
  double ess = bk_estimate_wsum_ess(&w->est);
  double share = bk_estimate_wsum_max_share(&w->est);
  if (bk_result_detail(res, "effective sample size", ess) ||
      bk_result_detail(res, "FORM evaluations", (double)form_evals) ||
      bk_result_detail(res, "mixture components", (double)t->k) ||
      bk_result_detail(res, "defensive share", t->delta))
    return bk_mctx_nomem(&t->ctx);
  if (hits == 0) {
    bk_result_warn(res,
                   "no importance sample failed (g <= 0) in %llu: the "
                   "centres are not on the failure surface, so there is no "
                   "estimate",
                   (unsigned long long)w->n);
  } else if (degenerate(&w->est)) {
    bk_result_warn(res,
                   "importance weights degenerate: effective sample size "
                   "%.1f among %llu failing samples, the largest weight "
                   "carries %.0f%% of the estimate; the estimate and its "
                   "interval are unreliable (a wrong centre, or design "
                   "points missed)",
                   ess, (unsigned long long)w->est.k, 100 * share);
  }
  if (t->unexp.k > 0 && w->est.k > 0) {
    /* Shares of the sums: log sum = log mean + log n. */
    double lu = bk_estimate_wsum_log_mean(&t->unexp) + log((double)t->unexp.n);
    double la = bk_estimate_wsum_log_mean(&w->est) + log((double)w->est.n);
    double us = exp(lu - la);
    if (us >= UNEXPLAINED_SHARE)
      bk_result_warn(res,
                     "%llu failing samples (the first is/%llu) lie where "
                     "no design point's component of the sampling density "
                     "reaches (up to %.0f degrees from every design point) "
                     "and carry %.0f%% of the estimate: the failure domain "
                     "has parts the design points found do not explain, "
                     "and the interval may be too narrow; use subset "
                     "simulation (method: subset) or cross-entropy "
                     "(method: cross-entropy)",
                     (unsigned long long)t->unexp.k,
                     (unsigned long long)t->unexp_first, t->unexp_angle,
                     100 * (us < 1 ? us : 1));
  }
  double rn = sqrt(t->near_r2), rc_ = t->near_c;
  if (hits > 0 && t->k > 0 && rn < rc_ - fmax(0.05, 0.01 * rc_))
    bk_result_warn(res,
                   "a failing sample (is/%llu) lies at distance %.3f from "
                   "the origin in u-space, nearer than every centre "
                   "(%.3f): a design point was missed (the nearest "
                   "failure point is one); consider cross-entropy or "
                   "subset simulation",
                   (unsigned long long)t->near_key, rn, rc_);
  if (res->dp.present && res->dp.converged && t->k > 0 && hits > 0 &&
      !t->ctx.s->analysis.importance.has_center) {
    /* First order over the design points found: the sum of Phi(-beta_k)
     * (Phi(-beta) alone with one). */
    double pff = 0;
    for (size_t i = 0; i < t->k; i++)
      pff += bk_norm_cdf(-sqrt(t->cc[i]));
    double pf = res->est.pf;
    double se = pf * res->est.cov;
    double hi = pf > pff ? pf : pff, lo = pf > pff ? pff : pf;
    if (fabs(pf - pff) > 3 * se && hi > 2 * lo)
      bk_result_warn(res,
                     "FORM and importance sampling disagree (Pf FORM "
                     "%.3e%s, sampling %.3e); the limit state may be "
                     "strongly nonlinear or have further design points",
                     pff, t->k > 1 ? " summed over the design points" : "", pf);
  }
  return 0;
}

int bk__method_importance(const bk_study_t *s, bk_evaluator_t *ev,
                          const bk_method_opts_t *opts, bk_result_t *res,
                          bk_error_t *err) {
  is_t t;
  memset(&t, 0, sizeof t);
  bk_mctx_init(&t.ctx, s, ev, opts, res, err);
  t.nu = t.ctx.nu;
  assert(t.nu > 0); /* the loader refuses a study of constants only */
  t.near_r2 = INFINITY;
  bk_estimate_wsum_init(&t.unexp);
  t.z = bk_calloc(t.nu + 1, sizeof *t.z);
  int rc;
  if (!t.z) {
    rc = bk_mctx_nomem(&t.ctx);
    goto out;
  }
  if ((rc = find_centers(&t)))
    goto out;
  uint64_t form_evals = t.ctx.n;
  bk_weighted_t w = {.prefix = "is",
                     .batch = s->analysis.samples ? s->analysis.samples : 500,
                     .draw = draw_mixture,
                     .seen = see_sample,
                     .may_stop = may_stop,
                     .data = &t};
  if ((rc = bk_weighted_run(&t.ctx, &w)) ||
      (rc = report_evidence(&t, &w, form_evals)))
    goto out;
  rc = bk_mctx_finish(&t.ctx);
out:
  bk_mctx_close(&t.ctx);
  bk_free(t.centers);
  bk_free(t.cc);
  bk_free(t.logpi);
  bk_free(t.cum);
  bk_free(t.z);
  return rc;
}
