/*
 * Input-deck templates. Text is copied as is, except placeholders:
 *   {{ expr }}            the value with %.12g (at most 20 characters, safe
 *                         for fixed-field solvers that read 20 columns)
 *   {{ expr : %12.5e }}   the value with a printf double conversion
 *                         (flags, width, precision; one of e E f F g G)
 * Names in expr are the study variables plus _index (the evaluation's
 * number) and the run's resources _threads, _ranks and _cores (threads x
 * ranks); {{ _key }}, {{ _folder }} and {{ _hosts }} insert the evaluation
 * key, the run folder and the run's MPI host list as text. A backslash before
 * two braces writes them literally:
 * "\{{" renders "{{" and "\}}" renders "}}"; a backslash anywhere else is
 * plain text. A placeholder ends on the line where it starts. See
 * docs/templates.md.
 * Unknown names and bad formats are errors at parse time, with the line and
 * column in the template file.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_TEMPLATE_H
#define BK_TEMPLATE_H

#include <stddef.h>

#include "base/buf.h"
#include "base/error.h"
#include "study/expr.h"

typedef struct bk_template bk_template_t;

/* Parses `text` (len bytes) read from `path` (used in error messages).
 * `names` (may be NULL) are the numeric names an expression may use;
 * "_index", "_threads", "_ranks" and "_cores" are always available in
 * addition. Nothing passed is kept. Returns
 * 0 and *out (free with bk_template_free()), or BK_EPARSE/BK_ENOTFOUND/
 * BK_ENOMEM with err filled as path:line:col (1-based line, byte column of
 * the offending token) and *out NULL. */
int bk_template_parse(const char *path, const char *text, size_t len,
                      const bk_names_t *names, bk_template_t **out,
                      bk_error_t *err);
void bk_template_free(bk_template_t *t);

typedef struct {
  const double *values; /* bound to names given at parse time */
  double index;         /* _index */
  const char *key;      /* _key */
  const char *folder;   /* _folder */
  int threads;          /* _threads; 0 counts as 1 */
  int ranks;            /* _ranks; 0 counts as 1 */
  const char *hosts;    /* _hosts; NULL renders "" */
} bk_template_ctx_t;

/* Appends the rendered text to `out`. Returns 0, or BK_ENOMEM with `out`
 * as it was before the call. `ctx` is only read during the call. */
int bk_template_render(const bk_template_t *t, const bk_template_ctx_t *ctx,
                       bk_buf_t *out);

#endif
