/*
 * Method dispatch (see method.h): the study's method to its file.
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/method.h"

#include <string.h>

#include "methods/method_impl.h"

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
  case BK_METHOD_SURROGATE: {
    int rc = bk__method_surrogate(s, ev, opts, res, err);
    if (rc == 0 && s->nmodes)
      rc = bk__system_surrogate(res, s);
    if (rc == BK_ENOMEM)
      bk_error_set(err, rc, NULL, 0, 0, "out of memory");
    return rc;
  }
  default:
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "method %s is not available in this version",
                        bk_method_name(s->analysis.method));
  }
}
