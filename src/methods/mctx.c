/*
 * The method context (see mctx.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/mctx.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/stop.h"

void bk_mctx_init(bk_mctx_t *m, const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err) {
  memset(m, 0, sizeof *m);
  m->s = s;
  m->ev = ev;
  m->opts = opts;
  m->res = res;
  m->err = err;
  m->nu = bk_transform_nu(s->transform);
}

void bk_mctx_close(bk_mctx_t *m) {
  bk_free(m->pts);
  bk_free(m->xs);
  bk_free(m->ys);
  bk_free(m->gcs);
  bk_free(m->vals);
  m->pts = NULL;
  m->xs = m->ys = m->gcs = m->vals = NULL;
  m->cap = 0;
}

int bk_mctx_reserve(bk_mctx_t *m, size_t n) {
  if (n <= m->cap)
    return 0;
  const bk_study_t *s = m->s;
  size_t nv = s->nvars ? s->nvars : 1, ny = s->model.noutputs;
  bk_mctx_close(m);
  m->pts = bk_calloc(n, sizeof *m->pts);
  m->xs = bk_calloc(n * nv, sizeof *m->xs);
  m->ys = ny ? bk_calloc(n * ny, sizeof *m->ys) : NULL;
  size_t nm = s->nmodes;
  m->gcs = nm ? bk_calloc(n * nm, sizeof *m->gcs) : NULL;
  m->vals = nm ? bk_calloc(nv + ny, sizeof *m->vals) : NULL;
  if (!m->pts || !m->xs || (ny && !m->ys) || (nm && (!m->gcs || !m->vals))) {
    bk_mctx_close(m);
    return bk_mctx_nomem(m);
  }
  for (size_t i = 0; i < n; i++) {
    m->pts[i].x = m->xs + i * nv;
    m->pts[i].y = ny ? m->ys + i * ny : NULL;
    m->pts[i].gc = nm ? m->gcs + i * nm : NULL;
  }
  m->cap = n;
  return 0;
}

void bk_mctx_set_u(bk_mctx_t *m, size_t i, uint64_t index, const double *u) {
  bk_point_t *p = &m->pts[i];
  p->index = index;
  bk_transform_u_to_x(m->s->transform, u, p->x);
  p->g = NAN;
  p->fault = BK_FAULT_NONE;
}

/* The fault kind most runs ended in. */
static int dominant_fault(const bk_mctx_t *m) {
  int best = 0;
  for (int f = 1; f < BK_FAULT__COUNT; f++)
    if (m->nfault[f] > m->nfault[best])
      best = f;
  return best;
}

/* The one error-limit rule (see mctx.h). */
static int error_limit(bk_mctx_t *m, int final) {
  const bk_model_t *md = &m->s->model;
  if (m->n == 0 || (!final && m->n < BK_MCTX_MIN_FOR_ERROR_LIMIT))
    return 0;
  if (!md->present && m->errors < m->n)
    return 0;
  double frac = (double)m->errors / (double)m->n;
  if (frac <= md->max_error_fraction)
    return 0;
  int f = dominant_fault(m);
  /* The first such run's recorded reason, cut to fit the message. */
  char note[160] = "", why[120], folder[8];
  if (m->opts && m->opts->note &&
      m->opts->note(m->opts->note_data, m->first_fault[f], why, sizeof why,
                    folder, sizeof folder) &&
      why[0]) {
    size_t len = strlen(why);
    snprintf(note, sizeof note, " (\"%s%s\")", why,
             len + 1 >= sizeof why ? "..." : "");
  }
  return bk_error_set(
      m->err, BK_EMODEL, NULL, 0, 0,
      "%llu of %llu model runs failed (%.1f%%, above "
      "model.max_error_fraction %g); most ended in %s (%llu), the first at "
      "%s%s. `brink status` and the records say why; the run folders of "
      "failed runs are kept. Failed runs are recorded as such, and this "
      "run folder replays them: once the model is fixed (its command, a "
      "template, a copied or watched file, a pattern: each changes the "
      "study, so this folder is refused), set run.folder to a new folder, "
      "or move this one away, and run again",
      (unsigned long long)m->errors, (unsigned long long)m->n, 100 * frac,
      md->max_error_fraction, bk_fault_name(f),
      (unsigned long long)m->nfault[f], m->first_fault[f], note);
}

/* Each mode's value at the points of the batch, from x and y. A point whose
 * model failed has no outputs: its modes are NaN. */
static void mode_values(bk_mctx_t *m, size_t n) {
  const bk_study_t *s = m->s;
  size_t nx = s->nvars, ny = s->model.noutputs;
  for (size_t i = 0; i < n; i++) {
    bk_point_t *p = &m->pts[i];
    if (p->fault != BK_FAULT_NONE && p->fault != BK_FAULT_NOT_A_NUMBER) {
      for (size_t k = 0; k < s->nmodes; k++)
        p->gc[k] = NAN;
      continue;
    }
    memcpy(m->vals, p->x, nx * sizeof *m->vals);
    if (ny)
      memcpy(m->vals + nx, p->y, ny * sizeof *m->vals);
    bk_study_g(s, m->vals, p->gc);
  }
}

int bk_mctx_evaluate(bk_mctx_t *m, const char *prefix, size_t n) {
  bk_method_stage(prefix, m->stage, sizeof m->stage);
  m->batch_first = m->n;
  m->batch_size = n;
  bk_mctx_progress(m);
  int rc = m->ev->batch(m->ev, prefix, m->pts, n, m->err);
  m->batch_size = 0;
  if (rc)
    return rc;
  const bk_study_t *s = m->s;
  if (s->nmodes)
    mode_values(m, n);
  for (size_t i = 0; i < n; i++) {
    const bk_point_t *p = &m->pts[i];
    m->n++;
    if (p->fault == BK_FAULT_NONE) {
      if (p->g <= 0)
        m->failures++;
      continue;
    }
    m->errors++;
    int f = p->fault > 0 && p->fault < BK_FAULT__COUNT ? p->fault : 0;
    if (m->nfault[f]++ == 0)
      snprintf(m->first_fault[f], sizeof m->first_fault[f], "%s/%llu", prefix,
               (unsigned long long)p->index);
    if (s->model.on_error == BK_ON_ERROR_ABORT)
      return bk_error_set(m->err, BK_EMODEL, NULL, 0, 0,
                          "model error (%s) at %s/%llu and model.on_error "
                          "is abort",
                          bk_fault_name(p->fault), prefix,
                          (unsigned long long)p->index);
  }
  m->res->evaluations = m->n;
  m->res->model_errors = m->errors;
  if (bk_stop_requested())
    return BK_ESTOPPED;
  return error_limit(m, 0);
}

double bk_mctx_g(const bk_mctx_t *m, size_t i) {
  const bk_point_t *p = &m->pts[i];
  if (p->fault == BK_FAULT_NONE)
    return p->g;
  return m->s->model.on_error == BK_ON_ERROR_FAIL ? -INFINITY : NAN;
}

double bk_mctx_gc(const bk_mctx_t *m, size_t i, size_t k) {
  const bk_point_t *p = &m->pts[i];
  double g = p->gc[k];
  if (p->fault != BK_FAULT_NONE && p->fault != BK_FAULT_NOT_A_NUMBER)
    g = NAN;
  if (!isnan(g))
    return g;
  return m->s->model.on_error == BK_ON_ERROR_FAIL ? -INFINITY : NAN;
}

uint32_t bk_mctx_mode_failures(const bk_mctx_t *m, size_t i) {
  const bk_point_t *p = &m->pts[i];
  uint32_t bits = 0;
  if (!p->gc ||
      (p->fault != BK_FAULT_NONE && p->fault != BK_FAULT_NOT_A_NUMBER))
    return 0;
  for (size_t k = 0; k < m->s->nmodes && k < 32; k++)
    bits |= (uint32_t)(p->gc[k] <= 0) << k;
  return bits;
}

void bk_mctx_progress(bk_mctx_t *m) {
  if (!m->opts || !m->opts->progress)
    return;
  bk_method_progress_t p = {m->res, m->planned, m->stage, m->batch_first,
                            m->batch_size};
  m->opts->progress(m->opts->progress_data, &p);
}

int bk_mctx_nomem(bk_mctx_t *m) {
  return bk_error_set(m->err, BK_ENOMEM, NULL, 0, 0, "out of memory");
}

int bk_mctx_finish(bk_mctx_t *m) {
  return error_limit(m, 1);
}
