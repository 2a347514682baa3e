/*
 * Private to the methods layer: the entry point of each method file, and
 * the FORM design-point search that importance sampling shares.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_METHOD_IMPL_H
#define BK_METHOD_IMPL_H

#include "methods/method.h"

/* Sampling methods (method_mc.c). */
int bk__method_mc(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err);

/* The FORM design-point search under keys "form/..." (method_form.c), also
 * the first phase of importance sampling: fills res->dp (converged or not,
 * with a warning when not), adds to res->evaluations, res->model_errors
 * and res->est.failures, and sets res->stop_reason. Returns 0, BK_ESTOPPED
 * or another negative code with err set. */
int bk__form_search(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err);

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
int bk__method_surrogate(const bk_study_t *s, bk_evaluator_t *ev,
                         const bk_method_opts_t *opts, bk_result_t *res,
                         bk_error_t *err);

#endif
