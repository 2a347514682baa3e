/*
 * Private to the methods layer: the entry point of each method file, and
 * the FORM design-point search that importance sampling shares.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_METHOD_IMPL_H
#define BK_METHOD_IMPL_H

#include "methods/mctx.h"
#include "methods/method.h"

/* Sampling methods (method_mc.c). */
int bk__method_mc(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err);

/* The FORM design-point search under keys "form/..." (method_form.c) in
 * the method context m, also the first phase of importance sampling (whose
 * sampling then goes on in the same context, so that counts and the error
 * limit cover the whole run): fills m->res->dp (converged or not, with a
 * warning when not), adds the failures it saw to res->est.failures, and
 * sets res->stop_reason. The caller applies bk_mctx_finish. Returns 0,
 * BK_ESTOPPED or another negative code with m->err set. */
int bk__form_search(bk_mctx_t *m);

/* The other methods, one file each. */
int bk__method_form(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err);
int bk__method_importance(const bk_study_t *s, bk_evaluator_t *ev,
                          const bk_method_opts_t *opts, bk_result_t *res,
                          bk_error_t *err);
int bk__method_cross_entropy(const bk_study_t *s, bk_evaluator_t *ev,
                             const bk_method_opts_t *opts, bk_result_t *res,
                             bk_error_t *err);
int bk__method_subset(const bk_study_t *s, bk_evaluator_t *ev,
                      const bk_method_opts_t *opts, bk_result_t *res,
                      bk_error_t *err);

#endif
