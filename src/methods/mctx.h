/*
 * The method context: what every method needs while it runs, in one place.
 * A method fills the points of a batch from u-space (bk_mctx_set_u), hands
 * the batch to the evaluator under a key prefix (bk_mctx_evaluate), and
 * reads g and the fault of each point back. The context counts
 * evaluations, failures and model errors over the whole run, applies the
 * study's on_error policy and the one error-limit rule, and checks for a
 * stop after every batch; so no method writes any of that itself.
 *
 * The error-limit rule (model.max_error_fraction): after every batch once
 * MIN_FOR_ERROR_LIMIT evaluations are made, and at the end of the method
 * whatever the count (bk_mctx_finish), the share of evaluations that ended
 * in a model error must not exceed the limit. Without a model section the
 * limit state is evaluated in process, and only a study whose every
 * evaluation is not a number is stopped.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_MCTX_H
#define BK_MCTX_H

#include <stddef.h>
#include <stdint.h>

#include "base/fault.h"
#include "methods/method.h"

/* Evaluations before the error fraction limit applies during a run (so
 * that one early crash does not stop a study). */
#define BK_MCTX_MIN_FOR_ERROR_LIMIT 20

typedef struct {
  /* Read-only for the method. */
  const bk_study_t *s;
  bk_evaluator_t *ev;
  const bk_method_opts_t *opts;
  bk_result_t *res;
  bk_error_t *err;
  size_t nu;       /* random variables: the dimension of u */
  bk_point_t *pts; /* the batch: cap points with x (and y) storage */
  size_t cap;
  uint64_t n;        /* evaluations over the run */
  uint64_t failures; /* of those, without a fault and g <= 0 */
  uint64_t errors;   /* of those, ending in a model error */
  uint64_t planned;  /* evaluations in all when known in advance, else 0
                        (bk_method_progress_t) */
  /* Private. */
  char stage[96];       /* the batch under way in words */
  uint64_t batch_first; /* evaluations before it */
  uint64_t batch_size;  /* its size; 0 between batches */
  double *xs, *ys, *gcs, *vals;
  uint64_t nfault[BK_FAULT__COUNT];
  char first_fault[BK_FAULT__COUNT][96]; /* the first key of each kind */
} bk_mctx_t;

/* Prepares the context (no batch storage yet). Counts start at 0 and
 * res->evaluations and res->model_errors follow them. */
void bk_mctx_init(bk_mctx_t *m, const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err);
void bk_mctx_close(bk_mctx_t *m);

/* Makes room for a batch of n points. Returns 0, or BK_ENOMEM with err set
 * (the old batch is then gone). */
int bk_mctx_reserve(bk_mctx_t *m, size_t n);

/* Sets point i of the batch: its key index and its inputs, mapped from
 * u-space (nu values) to the physical x. */
void bk_mctx_set_u(bk_mctx_t *m, size_t i, uint64_t index, const double *u);

/* Evaluates points [0, n) of the batch under keys prefix/index: one call
 * of the evaluator. Then counts, applies on_error abort (BK_EMODEL naming
 * the key), checks for a stop (BK_ESTOPPED) and the error limit
 * (BK_EMODEL). Returns 0 with each point's g and fault filled, or a
 * negative code with err set (the batch must not be used). The batch is
 * announced to the progress callback (its stage) before it runs. With
 * several limit states each point's gc is then recomputed from its x and
 * y (bk_study_g), whoever evaluated or replayed it. */
int bk_mctx_evaluate(bk_mctx_t *m, const char *prefix, size_t n);

/* The limit-state value of point i for an estimate, after the on_error
 * policy: g, or for a point with a model error NaN (skip: left out) or
 * -INFINITY (fail: counted as failed). */
double bk_mctx_g(const bk_mctx_t *m, size_t i);

/* With several limit states: mode k's value at point i after the on_error
 * policy, as bk_mctx_g. A model error, or a mode that is not a number at
 * the point, is a fault of that mode: NaN (skip) or -INFINITY (fail). */
double bk_mctx_gc(const bk_mctx_t *m, size_t i, size_t k);

/* With several limit states: bit k set when mode k fails at point i (no
 * fault and its value <= 0); 0 for one limit state. */
uint32_t bk_mctx_mode_failures(const bk_mctx_t *m, size_t i);

/* Reports progress (res as it stands) to the caller's callback. */
void bk_mctx_progress(bk_mctx_t *m);

/* Sets err to "out of memory" and returns BK_ENOMEM. */
int bk_mctx_nomem(bk_mctx_t *m);

/* The error-limit rule at the end of a method, whatever the count.
 * Returns 0 or BK_EMODEL with err set. */
int bk_mctx_finish(bk_mctx_t *m);

#endif
