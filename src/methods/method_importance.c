/*
 * Importance sampling around a design point. The centre u* is the FORM
 * design point (a FORM phase with the same evaluator and the same method
 * context, keys "form/...") or analysis.importance.center (x-space, mapped
 * to u). Samples come from the standard normal density shifted to u*:
 * u = u* + z, z standard normal from the counter-based stream "is", key
 * "is/I". Each carries the weight w = phi(u) / phi(u - u*) =
 * exp(-z.u* - |u*|^2 / 2), and Pf = mean of w I(g <= 0), with the sample
 * variance of w I as its error (Melchers & Beck, Structural Reliability
 * Analysis and Prediction, 3rd ed., ch. 5). The sampling phase, the
 * estimator (in log space) and the normal interval on the weighted mean
 * are those of weighted.h and estimate.h, shared with cross-entropy.
 *
 * target_cov is checked only after whole batches of analysis.samples
 * evaluations, so a resumed run stops at the same point. Warnings when the
 * weights degenerate (small effective sample size among the failing
 * samples, one sample carrying most of the estimate), when FORM and
 * sampling disagree, and when a failing sample lies nearer the origin than
 * the centre (so another design point exists).
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

/* Warn when the effective sample size is below this share of the failing
 * samples. */
#define ESS_SHARE 0.1

typedef struct {
  bk_mctx_t ctx;
  size_t nu;
  double *center; /* u* */
  double cc;      /* |u*|^2 */
  double *z;      /* nu */
  /* The failing sample nearest the origin: a design point is the failure
   * point nearest the origin, so a failing sample clearly nearer than the
   * centre proves that the centre is not the design point. */
  double near_r2;
  uint64_t near_key;
} is_t;

/* The centre: the given one, or the design point of a FORM phase run in
 * the same context (so its evaluations count towards max_evaluations and
 * the error limit). Returns 0, or a negative code with err set; an error
 * when FORM finds no design point says what to do instead. */
static int find_center(is_t *t) {
  bk_mctx_t *m = &t->ctx;
  const bk_study_t *s = m->s;
  bk_result_t *res = m->res;
  if (s->analysis.importance.has_center) {
    bk_transform_x_to_u(s->transform, s->analysis.importance.center, t->center);
  } else {
    int rc = bk__form_search(m);
    if (rc)
      return rc;
    if (!isfinite(res->dp.beta))
      return bk_error_set(
          m->err, BK_EINVAL, NULL, 0, 0,
          "importance sampling needs a design point, and FORM found none "
          "(%s%s); give analysis.importance.center or use subset simulation",
          res->stop_reason ? res->stop_reason : "",
          res->est.failures ? "" : "; no evaluation had g <= 0");
    memcpy(t->center, res->dp.u, t->nu * sizeof *t->center);
  }
  t->cc = 0;
  for (size_t d = 0; d < t->nu; d++)
    t->cc += t->center[d] * t->center[d];
  return 0;
}

/* Sample `index`: u = u* + z, log w = -z.u* - |u*|^2 / 2. */
static double draw_shifted(void *data, uint64_t stream, uint64_t index,
                           double *u) {
  is_t *t = data;
  size_t nu = t->nu;
  bk_rng_u01_fill(t->ctx.s->seed, stream, index, 0, (uint32_t)nu, t->z);
  double zc = 0;
  for (size_t d = 0; d < nu; d++) {
    t->z[d] = bk_norm_icdf(t->z[d]);
    u[d] = t->center[d] + t->z[d];
    zc += t->z[d] * t->center[d];
  }
  return -zc - 0.5 * t->cc;
}

/* Notes the failing sample nearest the origin (the first on ties). */
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
      bk_result_detail(res, "FORM evaluations", (double)form_evals))
    return bk_mctx_nomem(&t->ctx);
  if (hits == 0) {
    bk_result_warn(res,
                   "no importance sample failed (g <= 0) in %llu: the "
                   "centre is not on the failure surface, so there is no "
                   "estimate",
                   (unsigned long long)w->n);
  } else if (ess < ESS_SHARE * (double)w->est.k || share > 0.5) {
    bk_result_warn(res,
                   "importance weights degenerate: effective sample size "
                   "%.1f among %llu failing samples, the largest weight "
                   "carries %.0f%% of the estimate; the estimate and its "
                   "interval are unreliable (a wrong centre, or several "
                   "design points)",
                   ess, (unsigned long long)w->est.k, 100 * share);
  }
  double rc_ = sqrt(t->cc), rn = sqrt(t->near_r2);
  if (hits > 0 && rn < rc_ - fmax(0.05, 0.01 * rc_))
    bk_result_warn(res,
                   "a failing sample (is/%llu) lies at distance %.3f from "
                   "the origin in u-space, nearer than the centre (%.3f): "
                   "the centre is not the design point, or there is a "
                   "second design point; consider cross-entropy or subset "
                   "simulation",
                   (unsigned long long)t->near_key, rn, rc_);
  if (res->dp.present && isfinite(res->dp.pf_form) && hits > 0) {
    double pf = res->est.pf, pff = res->dp.pf_form;
    double se = pf * res->est.cov;
    double hi = pf > pff ? pf : pff, lo = pf > pff ? pff : pf;
    if (fabs(pf - pff) > 3 * se && hi > 2 * lo)
      bk_result_warn(res,
                     "FORM and importance sampling disagree (Pf FORM "
                     "%.3e, sampling %.3e); the limit state may be "
                     "strongly nonlinear or have several design points",
                     pff, pf);
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
  t.center = bk_calloc(t.nu, sizeof *t.center);
  t.z = bk_calloc(t.nu, sizeof *t.z);
  int rc;
  if (!t.center || !t.z) {
    rc = bk_mctx_nomem(&t.ctx);
    goto out;
  }
  if ((rc = find_center(&t)))
    goto out;
  uint64_t form_evals = t.ctx.n;
  bk_weighted_t w = {.prefix = "is",
                     .batch = s->analysis.samples ? s->analysis.samples : 500,
                     .draw = draw_shifted,
                     .seen = see_sample,
                     .data = &t};
  if ((rc = bk_weighted_run(&t.ctx, &w)) ||
      (rc = report_evidence(&t, &w, form_evals)))
    goto out;
  rc = bk_mctx_finish(&t.ctx);
out:
  bk_mctx_close(&t.ctx);
  bk_free(t.center);
  bk_free(t.z);
  return rc;
}
