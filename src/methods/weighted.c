/*
 * Weighted sampling (see weighted.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/weighted.h"

#include <math.h>

#include "base/alloc.h"
#include "numerics/rng.h"

int bk_weighted_batch(bk_mctx_t *m, const char *prefix, uint64_t first,
                      size_t n, bk_weighted_draw_cb draw, void *data,
                      double *us, double *logw) {
  uint64_t stream = bk_rng_stream(prefix);
  for (size_t i = 0; i < n; i++) {
    double *u = us + i * m->nu;
    logw[i] = draw(data, stream, first + i, u);
    bk_mctx_set_u(m, i, first + i, u);
  }
  return bk_mctx_evaluate(m, prefix, n);
}

/* Adds point i of the batch just evaluated. A point is in the estimate
 * unless it faulted under on_error skip (then bk_mctx_g is NaN). */
static void add_point(bk_mctx_t *m, bk_weighted_t *w, size_t i, double logw,
                      const double *u) {
  const bk_point_t *p = &m->pts[i];
  double g = bk_mctx_g(m, i);
  int faulted = p->fault != BK_FAULT_NONE;
  double v = g <= 0 ? logw : -INFINITY;
  w->n++;
  w->errors += faulted;
  if (!(faulted && isnan(g)))
    bk_estimate_wsum_add(&w->est, v);
  bk_estimate_wsum_add(&w->lo, faulted ? -INFINITY : v);
  bk_estimate_wsum_add(&w->hi, faulted ? logw : v);
  if (!faulted && w->seen)
    w->seen(w->data, p->index, u, g);
  for (size_t k = 0; w->mode_est && k < m->s->nmodes; k++) {
    double gk = bk_mctx_gc(m, i, k);
    int fk = isnan(p->gc[k]) ||
             (p->fault != BK_FAULT_NONE && p->fault != BK_FAULT_NOT_A_NUMBER);
    w->mode_errors[k] += fk;
    if (!(fk && isnan(gk)))
      bk_estimate_wsum_add(&w->mode_est[k], gk <= 0 ? logw : -INFINITY);
  }
}

/* Each mode's estimate as it stands. */
static void fill_modes(const bk_mctx_t *m, const bk_weighted_t *w) {
  bk_result_t *r = m->res;
  for (size_t k = 0; w->mode_est && k < r->ncomponents; k++) {
    bk_component_t *c = &r->components[k];
    bk_estimate_weighted(&w->mode_est[k], m->s->analysis.ci_level, &c->est);
    c->present = 1;
    c->model_errors = w->mode_errors[k];
    c->excluded =
        m->s->model.on_error == BK_ON_ERROR_FAIL ? 0 : w->mode_errors[k];
    c->pf_bounds[0] = c->pf_bounds[1] = c->est.pf;
  }
}

/* The estimate and its bounds as they stand. */
static void fill_result(const bk_mctx_t *m, const bk_weighted_t *w) {
  bk_result_t *r = m->res;
  bk_estimate_weighted(&w->est, m->s->analysis.ci_level, &r->est);
  r->excluded = m->s->model.on_error == BK_ON_ERROR_FAIL ? 0 : w->errors;
  if (r->excluded) {
    r->pf_bounds[0] = bk_estimate_wsum_mean(&w->lo);
    r->pf_bounds[1] = bk_estimate_wsum_mean(&w->hi);
  } else {
    r->pf_bounds[0] = r->pf_bounds[1] = r->est.pf;
  }
}

/* Points per evaluator call (see BK_WEIGHTED_CHUNK_DOUBLES). */
static size_t chunk_points(const bk_mctx_t *m, size_t batch) {
  size_t wd = m->s->nvars > m->nu ? m->s->nvars : m->nu;
  size_t c = BK_WEIGHTED_CHUNK_DOUBLES / (wd ? wd : 1);
  if (c < 64)
    c = 64;
  return c < batch ? c : batch;
}

int bk_weighted_run(bk_mctx_t *m, bk_weighted_t *w) {
  const bk_analysis_t *a = &m->s->analysis;
  bk_result_t *res = m->res;
  size_t batch = w->batch, chunk = chunk_points(m, w->batch);
  bk_estimate_wsum_init(&w->est);
  bk_estimate_wsum_init(&w->lo);
  bk_estimate_wsum_init(&w->hi);
  w->n = w->errors = 0;
  double *us = bk_calloc(chunk * m->nu, sizeof *us);
  double *logw = bk_calloc(chunk, sizeof *logw);
  int rc;
  if (!us || !logw || bk_mctx_reserve(m, chunk)) {
    rc = bk_mctx_nomem(m);
    goto out;
  }
  if (m->s->nmodes) {
    const char *names[BK_STUDY_MAX_MODES];
    for (size_t k = 0; k < m->s->nmodes; k++)
      names[k] = m->s->modes[k].name;
    w->mode_est = bk_calloc(m->s->nmodes, sizeof *w->mode_est);
    w->mode_errors = bk_calloc(m->s->nmodes, sizeof *w->mode_errors);
    if (!w->mode_est || !w->mode_errors ||
        bk_result_components(res, names, m->s->nmodes, 0)) {
      rc = bk_mctx_nomem(m);
      goto out;
    }
    for (size_t k = 0; k < m->s->nmodes; k++)
      bk_estimate_wsum_init(&w->mode_est[k]);
  }
  res->stop_reason = "max_evaluations reached before target_cov";
  uint64_t next = 0;
  while (m->n < a->max_evaluations) {
    uint64_t left = a->max_evaluations - m->n;
    size_t n = left < batch ? (size_t)left : batch;
    for (size_t done = 0; done < n;) {
      size_t c = n - done < chunk ? n - done : chunk;
      rc = bk_weighted_batch(m, w->prefix, next, c, w->draw, w->data, us, logw);
      if (rc)
        goto out;
      next += c;
      done += c;
      for (size_t i = 0; i < c; i++)
        add_point(m, w, i, logw[i], us + i * m->nu);
    }
    fill_result(m, w);
    fill_modes(m, w);
    if ((rc = bk_result_push_history(res))) {
      rc = bk_mctx_nomem(m);
      goto out;
    }
    int reached = res->est.cov <= a->target_cov &&
                  (!w->may_stop || w->may_stop(w->data, w));
    bk_mctx_progress(m);
    if (reached) {
      res->stop_reason = "target_cov reached";
      break;
    }
  }
  rc = 0;
out:
  bk_free(us);
  bk_free(logw);
  bk_free(w->mode_est);
  bk_free(w->mode_errors);
  w->mode_est = NULL;
  w->mode_errors = NULL;
  return rc;
}
