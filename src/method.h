/*
 * The method interface. A method is a deterministic function of (study,
 * seed, responses so far): it names every model call by an evaluation key
 * ("mc/123", "lhs/r3/77", "sobol/r0/5"), hands batches of keyed points to
 * an evaluator, and makes decisions (stop on target_cov, next replicate)
 * only at batch boundaries, never on completion order. Methods never touch
 * processes; evaluators never know statistics.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_METHOD_H
#define BK_METHOD_H

#include <stddef.h>
#include <stdint.h>

#include "error.h"
#include "estimate.h"
#include "study.h"

/* One evaluation of a batch. The method fills index and x; the evaluator
 * fills y, g and fault. */
typedef struct {
  uint64_t index; /* the key is PREFIX/index */
  double *x;      /* nvars physical inputs */
  double *y;      /* noutputs extracted outputs (may be NULL if none) */
  double g;       /* limit-state value; NaN on a fault */
  int fault;      /* bk_fault_t */
} bk_point_t;

typedef struct bk_evaluator bk_evaluator_t;
struct bk_evaluator {
  /* Evaluates the n points of one batch, keys prefix/index. Returns 0,
   * BK_ESTOPPED when a stop was requested (the batch is incomplete and
   * must not be used), or another negative code with err set. */
  int (*batch)(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
               size_t n, bk_error_t *err);
  void *data;
};

/* An evaluator computing the limit state in process, on the variables
 * alone (studies without a model section). */
void bk_evaluator_inprocess(bk_evaluator_t *ev, const bk_study_t *s);

/* Convergence history: the estimate after each decision point. */
typedef struct {
  uint64_t n;
  double pf;
  double ci[2];
} bk_history_t;

/* A design point found by FORM (form, and importance without a given
 * center). Arrays are owned by the result. */
typedef struct {
  int present;
  int converged;
  int iterations;
  double beta;    /* FORM reliability index, distance to the origin in u */
  double pf_form; /* Phi(-beta) */
  double pf_sorm; /* Breitung SORM; NaN when not computed */
  double *u;      /* nu coordinates */
  double *x;      /* nvars physical values */
  double *alpha2; /* nvars importance factors (0 for constants), sum 1 */
} bk_design_point_t;

/* A labelled number a method wants reported (levels of subset simulation,
 * effective sample size, ...). */
typedef struct {
  char label[64];
  double value;
} bk_detail_t;

/* What a method reports back. Owned by the caller; bk_result_close frees
 * the arrays. */
typedef struct {
  const char *method;
  bk_estimate_t est;
  uint64_t evaluations; /* model calls, all of them */
  uint64_t model_errors;
  uint64_t excluded;   /* runs left out of the estimate (on_error: skip) */
  double pf_bounds[2]; /* excluded runs taken as safe / as failed */
  uint32_t replicates; /* lhs, sobol: replicates completed */
  uint64_t per_replicate;
  double *replicate_pf;
  const char *stop_reason; /* "target_cov reached", "samples done", ... */
  bk_history_t *history;
  size_t nhistory;
  size_t caphistory;
  double seconds;
  bk_design_point_t dp;
  char **warnings; /* evidence against the method's result */
  size_t nwarnings;
  bk_detail_t *details;
  size_t ndetails;
} bk_result_t;

void bk_result_close(bk_result_t *r);

/* Called at each decision point (may be NULL). */
typedef void (*bk_progress_cb)(void *data, const bk_result_t *sofar,
                               uint64_t planned);

typedef struct {
  bk_progress_cb progress;
  void *progress_data;
} bk_method_opts_t;

/* Runs the study's method. Returns 0 with *res filled, BK_ESTOPPED when a
 * stop was requested (res holds the partial state), or another negative
 * code with err set. */
int bk_method_run(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err);

/* Sampling methods (method_mc.c). */
int bk__method_mc(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err);

/* Appends a history entry; returns 0 or BK_ENOMEM. */
int bk__result_push_history(bk_result_t *r);
/* Adds a warning (printed in reports); returns 0 or BK_ENOMEM. */
int bk__result_warn(bk_result_t *r, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
/* Adds a labelled number to the report; returns 0 or BK_ENOMEM. */
int bk__result_detail(bk_result_t *r, const char *label, double value);
/* Allocates dp's arrays for nu and nvars; returns 0 or BK_ENOMEM. */
int bk__result_design_point(bk_result_t *r, size_t nu, size_t nvars);

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

#endif
