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

/* The design points FORM hands to importance sampling: n points of nu
 * coordinates, nearest first, each with its beta and the log of its
 * first-order share of Pf, log Phi(-|beta|) plus the log of the curvature
 * factor where checked. `trusted` is 0 when no search converged on a
 * design point and the one point is search 0's last iterate (n is then 0
 * or 1). `complement` says that the medians fail, so the points border
 * the safe domain. */
typedef struct {
  size_t n;
  double *u, *beta, *log_share;
  int trusted;
  int complement;
} bk__design_points_t;

void bk__method_design_points_close(bk__design_points_t *dps);

/* The FORM design-point search with its exploration under keys "form/..."
 * (method_form.c) in the method context m, also the first phase of
 * importance sampling (whose sampling then goes on in the same context, so
 * that counts and the error limit cover the whole run): fills m->res->dp
 * (the nearest design point, or search 0's last iterate with a warning),
 * the warnings, notes and details of the exploration, adds the failures
 * it saw to res->est.failures, and sets res->stop_reason; with `out`, also
 * the design points for sampling (freed by bk__method_design_points_close). The
 * caller applies bk_mctx_finish. Returns 0, BK_ESTOPPED or another
 * negative code with m->err set. */
int bk__method_form_search(bk_mctx_t *m, bk__design_points_t *out);

/* FORM of a system of several limit states (system.c): a design point per
 * mode and the system's first-order bounds. */
int bk__system_form(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err);

/* Subset simulation of several limit states (system.c): with a series
 * system every mode's failure domain lies in the system's, so P(F_k) =
 * P(F_sys) P(F_k | F_sys), the second factor from the last level's
 * points with g <= 0 (values g, failing modes fm; chain c at rows off[c]
 * .. off[c] + len[c] - 1); other systems get a
 * note saying why their modes are not estimated. Reads res->est (the
 * system's). Returns 0 or BK_ENOMEM. */
int bk__system_subset(bk_result_t *res, const bk_study_t *s, const double *g,
                      const uint32_t *fm, const size_t *off, const size_t *len,
                      size_t nchains);

/* The surrogate method learns the system's g alone (system.c): its modes
 * are listed as not estimated, with a note. Returns 0 or BK_ENOMEM. */
int bk__system_surrogate(bk_result_t *res, const bk_study_t *s);

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
