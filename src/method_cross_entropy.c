/*
 * The cross-entropy method. Not available in this version yet.
 *
 * SPDX-License-Identifier: MIT
 */
#include "method.h"

int bk__method_cross_entropy(const bk_study_t *s, bk_evaluator_t *ev,
                             const bk_method_opts_t *opts, bk_result_t *res,
                             bk_error_t *err) {
  (void)ev;
  (void)opts;
  (void)res;
  return bk_error_set(
      err, BK_EINVAL, s->path, 0, 0,
      "method cross-entropy is not available in this version yet; use "
      "random, lhs or sobol");
}
