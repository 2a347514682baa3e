/*
 * Method dispatch, the in-process evaluator and results (see method.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "method.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "alloc.h"
#include "buf.h"
#include "fault.h"

static int inprocess_batch(bk_evaluator_t *ev, const char *prefix,
                           bk_point_t *pts, size_t n, bk_error_t *err) {
  (void)prefix;
  (void)err;
  const bk_study_t *s = ev->data;
  for (size_t i = 0; i < n; i++) {
    double g = bk_expr_eval(s->g, pts[i].x);
    pts[i].g = g;
    pts[i].fault = isnan(g) ? BK_FAULT_NOT_A_NUMBER : BK_FAULT_NONE;
  }
  return 0;
}

void bk_evaluator_inprocess(bk_evaluator_t *ev, const bk_study_t *s) {
  ev->batch = inprocess_batch;
  ev->data = (void *)s;
}

void bk_result_close(bk_result_t *r) {
  bk_free(r->replicate_pf);
  bk_free(r->history);
  bk_free(r->dp.u);
  bk_free(r->dp.x);
  bk_free(r->dp.alpha2);
  for (size_t i = 0; i < r->nwarnings; i++)
    bk_free(r->warnings[i]);
  bk_free(r->warnings);
  bk_free(r->details);
  memset(r, 0, sizeof *r);
}

int bk__result_warn(bk_result_t *r, const char *fmt, ...) {
  char **w = bk_realloc(r->warnings, (r->nwarnings + 1) * sizeof *w);
  if (!w)
    return BK_ENOMEM;
  r->warnings = w;
  bk_buf_t b;
  bk_buf_init(&b);
  va_list ap;
  va_start(ap, fmt);
  int rc = bk_buf_vprintf(&b, fmt, ap);
  va_end(ap);
  if (rc || !b.data) {
    bk_buf_close(&b);
    return BK_ENOMEM;
  }
  r->warnings[r->nwarnings++] = b.data;
  return 0;
}

int bk__result_detail(bk_result_t *r, const char *label, double value) {
  bk_detail_t *d = bk_realloc(r->details, (r->ndetails + 1) * sizeof *d);
  if (!d)
    return BK_ENOMEM;
  r->details = d;
  snprintf(d[r->ndetails].label, sizeof d[r->ndetails].label, "%s", label);
  d[r->ndetails].value = value;
  r->ndetails++;
  return 0;
}

int bk__result_design_point(bk_result_t *r, size_t nu, size_t nvars) {
  bk_free(r->dp.u);
  bk_free(r->dp.x);
  bk_free(r->dp.alpha2);
  r->dp.u = bk_calloc(nu ? nu : 1, sizeof(double));
  r->dp.x = bk_calloc(nvars ? nvars : 1, sizeof(double));
  r->dp.alpha2 = bk_calloc(nvars ? nvars : 1, sizeof(double));
  if (!r->dp.u || !r->dp.x || !r->dp.alpha2)
    return BK_ENOMEM;
  r->dp.present = 1;
  r->dp.pf_sorm = NAN;
  return 0;
}

int bk__result_push_history(bk_result_t *r) {
  if (r->nhistory == r->caphistory) {
    size_t cap = r->caphistory ? 2 * r->caphistory : 64;
    bk_history_t *h = bk_realloc(r->history, cap * sizeof *h);
    if (!h)
      return BK_ENOMEM;
    r->history = h;
    r->caphistory = cap;
  }
  bk_history_t *h = &r->history[r->nhistory++];
  h->n = r->evaluations;
  h->pf = r->est.pf;
  h->ci[0] = r->est.ci[0];
  h->ci[1] = r->est.ci[1];
  return 0;
}

int bk_method_run(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err) {
  memset(res, 0, sizeof *res);
  res->method = bk_method_name(s->analysis.method);
  switch (s->analysis.method) {
  case BK_METHOD_RANDOM:
  case BK_METHOD_LHS:
  case BK_METHOD_SOBOL:
    return bk__method_mc(s, ev, opts, res, err);
  case BK_METHOD_FORM:
    return bk__method_form(s, ev, opts, res, err);
  case BK_METHOD_IMPORTANCE:
    return bk__method_importance(s, ev, opts, res, err);
  case BK_METHOD_CROSS_ENTROPY:
    return bk__method_cross_entropy(s, ev, opts, res, err);
  case BK_METHOD_SUBSET:
    return bk__method_subset(s, ev, opts, res, err);
  default:
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "method %s is not available in this version",
                        bk_method_name(s->analysis.method));
  }
}
