/*
 * Weighted sampling: the estimation phase that importance sampling and
 * cross-entropy share. Points u are drawn from a sampling density h under
 * keys prefix/I, I counting on across batches, each with its log-weight
 * log phi(u) - log h(u), and Pf is the weighted estimator of estimate.h
 * (bk_estimate_weighted, sums in log space). Batches of `batch` points run
 * until the estimate reaches target_cov, checked after whole batches only
 * so that a resumed run stops at the same point, or until
 * max_evaluations, which counts the whole run (a FORM phase, adaptation).
 *
 * Model errors: a faulted point is left out of the estimate under on_error
 * skip (res->excluded counts them) and counts as failed under fail. Every
 * point's weight is known, so res->pf_bounds are exact for this phase:
 * the faulted points taken as safe, then as failed.
 *
 * Several limit states: the same points and weights give each mode's
 * estimate, mean of w I(g_k <= 0), unbiased wherever the sampling density
 * covers the mode's failure domain (the defensive mixture of importance
 * sampling and the Gaussian mixtures of cross-entropy are positive
 * everywhere), though it may be poor for a mode whose failures lie away
 * from the system's; its cov says how poor.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_WEIGHTED_H
#define BK_WEIGHTED_H

#include <stddef.h>
#include <stdint.h>

#include "methods/mctx.h"
#include "numerics/estimate.h"

/* Inputs (doubles) of one evaluator call at most: 16 MiB. */
#define BK_WEIGHTED_CHUNK_DOUBLES ((size_t)1 << 21)

/* Draws point `index` of the sampling density from the counter-based
 * stream `stream` (that of the key prefix): fills u (nu values) and
 * returns log phi(u) - log h(u), finite. */
typedef double (*bk_weighted_draw_cb)(void *data, uint64_t stream,
                                      uint64_t index, double *u);
/* Sees each evaluated point that has no fault: its key index, u and g. */
typedef void (*bk_weighted_seen_cb)(void *data, uint64_t index, const double *u,
                                    double g);
typedef struct bk_weighted bk_weighted_t;
/* Whether the phase may stop on target_cov now that the estimate reached
 * it (the estimate's sums in w->est): e.g. not with degenerate weights. */
typedef int (*bk_weighted_stop_cb)(void *data, const bk_weighted_t *w);

struct bk_weighted {
  /* Set by the caller. */
  const char *prefix;
  size_t batch; /* points per batch, at least 1 */
  bk_weighted_draw_cb draw;
  bk_weighted_seen_cb seen;     /* may be NULL */
  bk_weighted_stop_cb may_stop; /* may be NULL: always */
  void *data;
  /* Filled by bk_weighted_run. */
  bk_estimate_wsum_t est;    /* the estimate's values, after on_error */
  bk_estimate_wsum_t lo, hi; /* every point, faulted ones as safe / as
                                failed; lo.k counts the failing points
                                without a fault */
  uint64_t n;                /* points evaluated in this phase */
  uint64_t errors;           /* of those, with a fault */
  /* Private: several limit states, the same estimator per mode (the same
   * weights and points, the mode's indicator), into res->components. */
  bk_estimate_wsum_t *mode_est;
  uint64_t *mode_errors;
};

/* Draws points [first, first + n) with `draw` into rows of us (n * nu) and
 * their log-weights into logw, and evaluates them as one batch of the
 * context under `prefix`. Returns 0 or what bk_mctx_evaluate returns. */
int bk_weighted_batch(bk_mctx_t *m, const char *prefix, uint64_t first,
                      size_t n, bk_weighted_draw_cb draw, void *data,
                      double *us, double *logw);

/* Runs the phase: fills res->est, res->excluded and res->pf_bounds after
 * every batch, pushes the history, reports progress, and sets
 * res->stop_reason. A batch goes to the evaluator in calls of at most
 * BK_WEIGHTED_CHUNK_DOUBLES inputs, so memory stays bounded whatever the
 * dimension and the batch size; the decision points (target_cov, after
 * whole batches) and the results do not depend on the split. Returns 0,
 * or a negative code with m->err set (res then holds the state after the
 * last whole batch). */
int bk_weighted_run(bk_mctx_t *m, bk_weighted_t *w);

#endif
