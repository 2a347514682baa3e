/*
 * Results of a method (see result.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/result.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/error.h"

void bk_result_close(bk_result_t *r) {
  bk_free(r->replicate_pf);
  bk_free(r->history);
  bk_free(r->dp.u);
  bk_free(r->dp.x);
  bk_free(r->dp.alpha2);
  for (size_t i = 0; i < r->nwarnings; i++)
    bk_free(r->warnings[i]);
  bk_free(r->warnings);
  for (size_t i = 0; i < r->nnotes; i++)
    bk_free(r->notes[i]);
  bk_free(r->notes);
  bk_free(r->details);
  for (size_t i = 0; i < r->nerror_runs; i++)
    bk_free(r->error_runs[i].x);
  bk_free(r->error_runs);
  for (size_t i = 0; i < r->ncomponents; i++) {
    bk_free(r->components[i].replicate_pf);
    bk_free(r->components[i].dp.u);
    bk_free(r->components[i].dp.x);
    bk_free(r->components[i].dp.alpha2);
  }
  bk_free(r->components);
  memset(r, 0, sizeof *r);
}

/* Appends a formatted text to the list *texts of *n. */
static int push_text(char ***texts, size_t *n, const char *fmt, va_list ap) {
  char **w = bk_realloc(*texts, (*n + 1) * sizeof *w);
  if (!w)
    return BK_ENOMEM;
  *texts = w;
  bk_buf_t b;
  bk_buf_init(&b);
  int rc = bk_buf_vprintf(&b, fmt, ap);
  if (rc || !b.data) {
    bk_buf_close(&b);
    return BK_ENOMEM;
  }
  w[(*n)++] = b.data;
  return 0;
}

int bk_result_warn(bk_result_t *r, const char *fmt, ...) {
  va_list ap;
  va_start(ap, fmt);
  int rc = push_text(&r->warnings, &r->nwarnings, fmt, ap);
  va_end(ap);
  return rc;
}

int bk_result_note(bk_result_t *r, const char *fmt, ...) {
  va_list ap;
  va_start(ap, fmt);
  int rc = push_text(&r->notes, &r->nnotes, fmt, ap);
  va_end(ap);
  return rc;
}

int bk_result_detail(bk_result_t *r, const char *label, double value) {
  bk_detail_t *d = bk_realloc(r->details, (r->ndetails + 1) * sizeof *d);
  if (!d)
    return BK_ENOMEM;
  r->details = d;
  snprintf(d[r->ndetails].label, sizeof d[r->ndetails].label, "%s", label);
  d[r->ndetails].value = value;
  r->ndetails++;
  return 0;
}

int bk_result_detailf(bk_result_t *r, double value, const char *fmt, ...) {
  char label[sizeof r->details->label];
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(label, sizeof label, fmt, ap);
  va_end(ap);
  return bk_result_detail(r, label, value);
}

int bk_result_design_point(bk_result_t *r, size_t nu, size_t nvars) {
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

int bk_result_push_history(bk_result_t *r) {
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

int bk_result_components(bk_result_t *r, const char *const *names, size_t n,
                         uint32_t replicates) {
  if (r->ncomponents)
    return 0;
  bk_component_t *c = bk_calloc(n ? n : 1, sizeof *c);
  if (!c)
    return BK_ENOMEM;
  r->components = c;
  r->ncomponents = n;
  for (size_t i = 0; i < n; i++) {
    c[i].name = names[i];
    c[i].est.pf = c[i].est.beta = c[i].est.cov = NAN;
    c[i].system_failures = UINT64_MAX;
    if (replicates &&
        !(c[i].replicate_pf = bk_calloc(replicates, sizeof *c[i].replicate_pf)))
      return BK_ENOMEM;
  }
  return 0;
}
