/*
 * Importance sampling around a design point. The centre u* is the FORM
 * design point (a FORM phase with the same evaluator, keys "form/...") or
 * analysis.importance.center (x-space, mapped to u). Samples come from the
 * standard normal density shifted to u*: u = u* + z, z standard normal
 * from the counter-based stream "is", key "is/I". Each carries the weight
 * w = phi(u) / phi(u - u*) = exp(-z.u* - |u*|^2 / 2), and
 * Pf = mean of w I(g <= 0), with the sample variance of w I as its error
 * (Melchers & Beck, Structural Reliability Analysis and Prediction, 3rd
 * ed., ch. 5). The interval is the normal one on the weighted mean.
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
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/method_impl.h"
#include "numerics/rng.h"
#include "numerics/special.h"
#include "base/stop.h"

/* The error fraction limit is applied after this many evaluations. */
#define MIN_FOR_ERROR_LIMIT 20
/* Warn when the effective sample size is below this share of the failing
 * samples. */
#define ESS_SHARE 0.1

typedef struct {
  /* Over the importance samples. */
  uint64_t n;      /* evaluated */
  uint64_t hits;   /* g <= 0 */
  uint64_t errors; /* faults */
  /* Welford mean and sum of squares of v = w I over the samples in the
   * estimate (all but the excluded ones), in key order. */
  uint64_t nv;
  double mean, m2;
  double s1, s2, vmax; /* sum, sum of squares and largest v */
  double s1_ok;        /* sum of w over the failing samples */
  double s_wfault;     /* sum of w over the faulted samples */
} is_sums_t;

static void add_value(is_sums_t *t, double v) {
  t->nv++;
  double d = v - t->mean;
  t->mean += d / (double)t->nv;
  t->m2 += d * (v - t->mean);
  t->s1 += v;
  t->s2 += v * v;
  if (v > t->vmax)
    t->vmax = v;
}

static void fill_estimate(const bk_study_t *s, const is_sums_t *t,
                          bk_result_t *r) {
  bk_estimate_t *e = &r->est;
  double level = s->analysis.ci_level;
  double n = (double)t->nv;
  e->pf = t->nv ? t->mean : NAN;
  double var = t->nv > 1 ? t->m2 / (n - 1) : NAN;
  double se = sqrt(var / n);
  e->cov = e->pf > 0 ? se / e->pf : INFINITY;
  double zq = bk_norm_icdf(0.5 + level / 2);
  e->ci[0] = e->pf - zq * se;
  if (e->ci[0] < 0)
    e->ci[0] = 0;
  e->ci[1] = e->pf + zq * se;
  if (e->ci[1] > 1)
    e->ci[1] = 1;
  if (!(e->pf > 0)) {
    e->ci[0] = 0;
    e->ci[1] = NAN;
  }
  e->ci_exact[0] = e->ci[0];
  e->ci_exact[1] = e->ci[1];
  e->ci_level = level;
  e->ci_method = "normal (weighted)";
  e->beta = bk_beta_from_pf(e->pf);
  e->beta_ci[0] = bk_beta_from_pf(e->ci[1]);
  e->beta_ci[1] = bk_beta_from_pf(e->ci[0]);
  e->n = t->nv;
  e->failures = t->hits;
  int skip = s->model.on_error != BK_ON_ERROR_FAIL;
  r->excluded = skip ? t->errors : 0;
  if (r->excluded && t->n) {
    r->pf_bounds[0] = t->s1_ok / (double)t->n;
    r->pf_bounds[1] = (t->s1_ok + t->s_wfault) / (double)t->n;
  } else {
    r->pf_bounds[0] = r->pf_bounds[1] = e->pf;
  }
}

int bk__method_importance(const bk_study_t *s, bk_evaluator_t *ev,
                          const bk_method_opts_t *opts, bk_result_t *res,
                          bk_error_t *err) {
  const bk_analysis_t *a = &s->analysis;
  size_t nu = bk_transform_nu(s->transform);
  if (nu == 0)
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "every variable is a constant: there is nothing to "
                        "sample; give at least one variable a distribution");
  int rc;
  size_t batch = a->samples ? (size_t)a->samples : 500;
  size_t ny = s->model.noutputs;
  double *center = bk_calloc(nu, sizeof *center);
  double *z = bk_calloc(nu, sizeof *z);
  double *u = bk_calloc(nu, sizeof *u);
  double *w = bk_calloc(batch, sizeof *w);
  double *r2 = bk_calloc(batch, sizeof *r2); /* |u|^2 of each point */
  bk_point_t *pts = bk_calloc(batch, sizeof *pts);
  double *xs = bk_calloc(batch * (s->nvars ? s->nvars : 1), sizeof *xs);
  double *ys = ny ? bk_calloc(batch * ny, sizeof *ys) : NULL;
  if (!center || !z || !u || !w || !r2 || !pts || !xs || (ny && !ys)) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  if (a->importance.has_center) {
    bk_transform_x_to_u(s->transform, a->importance.center, center);
  } else {
    if ((rc = bk__form_search(s, ev, opts, res, err)))
      goto out;
    if (!isfinite(res->dp.beta)) {
      rc = bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "importance sampling needs a design point, and FORM "
                        "found none (%s%s); give analysis.importance.center "
                        "or use subset simulation",
                        res->stop_reason ? res->stop_reason : "",
                        res->est.failures ? "" : "; no evaluation had g <= 0");
      goto out;
    }
    memcpy(center, res->dp.u, nu * sizeof *center);
  }
  double cc = 0;
  for (size_t d = 0; d < nu; d++)
    cc += center[d] * center[d];
  uint64_t form_evals = res->evaluations;
  /* The failing sample nearest the origin: a design point is the failure
   * point nearest the origin, so a failing sample clearly nearer than the
   * centre proves that the centre is not the design point. */
  double near_r2 = INFINITY;
  uint64_t near_key = 0;
  uint64_t form_errors = res->model_errors;
  uint64_t stream = bk_rng_stream("is");
  is_sums_t t;
  memset(&t, 0, sizeof t);
  res->stop_reason = "max_evaluations reached before target_cov";
  uint64_t next = 0;
  while (res->evaluations < a->max_evaluations) {
    uint64_t left = a->max_evaluations - res->evaluations;
    size_t c = left < batch ? (size_t)left : batch;
    for (size_t i = 0; i < c; i++) {
      bk_point_t *p = &pts[i];
      p->index = next + i;
      p->x = xs + i * s->nvars;
      p->y = ny ? ys + i * ny : NULL;
      bk_rng_u01_fill(s->seed, stream, p->index, 0, (uint32_t)nu, z);
      double zc = 0;
      r2[i] = 0;
      for (size_t d = 0; d < nu; d++) {
        z[d] = bk_norm_icdf(z[d]);
        u[d] = center[d] + z[d];
        zc += z[d] * center[d];
        r2[i] += u[d] * u[d];
      }
      w[i] = exp(-zc - 0.5 * cc);
      bk_transform_u_to_x(s->transform, u, p->x);
      p->g = NAN;
      p->fault = BK_FAULT_NONE;
    }
    if ((rc = ev->batch(ev, "is", pts, c, err)))
      goto out;
    next += c;
    res->evaluations += c;
    for (size_t i = 0; i < c; i++) {
      const bk_point_t *p = &pts[i];
      t.n++;
      if (p->fault != BK_FAULT_NONE) {
        t.errors++;
        t.s_wfault += w[i];
        if (s->model.on_error == BK_ON_ERROR_ABORT) {
          rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                            "model error (%s) at is/%llu and model.on_error "
                            "is abort",
                            bk_fault_name(p->fault),
                            (unsigned long long)p->index);
          goto out;
        }
        if (s->model.on_error == BK_ON_ERROR_FAIL)
          add_value(&t, w[i]);
      } else if (p->g <= 0) {
        t.hits++;
        t.s1_ok += w[i];
        if (r2[i] < near_r2) {
          near_r2 = r2[i];
          near_key = p->index;
        }
        add_value(&t, w[i]);
      } else {
        add_value(&t, 0);
      }
    }
    res->model_errors = form_errors + t.errors;
    fill_estimate(s, &t, res);
    if (bk_result_push_history(res)) {
      rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
      goto out;
    }
    if (opts && opts->progress)
      opts->progress(opts->progress_data, res, a->max_evaluations);
    /* The limit applies after MIN_FOR_ERROR_LIMIT evaluations, and
     * whatever the count once the run ends (as in sampling). */
    int last = res->evaluations >= a->max_evaluations ||
               (a->target_cov > 0 && res->est.cov <= a->target_cov);
    if ((t.n >= MIN_FOR_ERROR_LIMIT || last) &&
        (double)t.errors / (double)t.n > s->model.max_error_fraction &&
        (s->model.present || t.errors == t.n)) {
      rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                        "%llu of %llu model runs failed (%.1f%%, above "
                        "model.max_error_fraction %g); the records say why "
                        "and the run folders are kept. Fix the model and "
                        "run again to resume",
                        (unsigned long long)t.errors, (unsigned long long)t.n,
                        100.0 * (double)t.errors / (double)t.n,
                        s->model.max_error_fraction);
      goto out;
    }
    if (bk_stop_requested()) {
      rc = BK_ESTOPPED;
      goto out;
    }
    if (a->target_cov > 0 && res->est.cov <= a->target_cov) {
      res->stop_reason = "target_cov reached";
      break;
    }
  }
  /* Evidence against the result. */
  double ess = t.s2 > 0 ? t.s1 * t.s1 / t.s2 : 0;
  if ((rc = bk_result_detail(res, "effective sample size", ess)) ||
      (rc = bk_result_detail(res, "FORM evaluations", (double)form_evals))) {
    rc = bk_error_set(err, rc, NULL, 0, 0, "out of memory");
    goto out;
  }
  if (t.hits == 0) {
    bk_result_warn(res,
                    "no importance sample failed (g <= 0) in %llu: the "
                    "centre is not on the failure surface, so there is no "
                    "estimate",
                    (unsigned long long)t.n);
  } else if (ess < ESS_SHARE * (double)t.hits || t.vmax > 0.5 * t.s1) {
    bk_result_warn(res,
                    "importance weights degenerate: effective sample size "
                    "%.1f among %llu failing samples, the largest weight "
                    "carries %.0f%% of the estimate; the estimate and its "
                    "interval are unreliable (a wrong centre, or several "
                    "design points)",
                    ess, (unsigned long long)t.hits, 100 * t.vmax / t.s1);
  }
  double rc_ = sqrt(cc), rn = sqrt(near_r2);
  if (t.hits > 0 && rn < rc_ - fmax(0.05, 0.01 * rc_))
    bk_result_warn(res,
                    "a failing sample (is/%llu) lies at distance %.3f from "
                    "the origin in u-space, nearer than the centre (%.3f): "
                    "the centre is not the design point, or there is a "
                    "second design point; consider cross-entropy or subset "
                    "simulation",
                    (unsigned long long)near_key, rn, rc_);
  if (res->dp.present && isfinite(res->dp.pf_form) && t.hits > 0) {
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
  rc = 0;
out:
  bk_free(center);
  bk_free(z);
  bk_free(u);
  bk_free(w);
  bk_free(r2);
  bk_free(pts);
  bk_free(xs);
  bk_free(ys);
  return rc;
}
