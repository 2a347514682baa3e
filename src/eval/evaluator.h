/*
 * The evaluator interface, the seam between methods and everything that
 * runs a model. A method names each evaluation by a key (PREFIX/index),
 * fills the physical inputs of a batch of points and hands the batch to an
 * evaluator; the evaluator fills the outputs, g and the fault of each
 * point. Implementations: in process (below, studies without a model
 * section), the local dispatcher (dispatch.h), the MPI coordinator
 * (mpi_coord.h), a shard filter and a records server (shard.h).
 * Evaluators know nothing of statistics.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_EVALUATOR_H
#define BK_EVALUATOR_H

#include <stddef.h>
#include <stdint.h>

#include "base/error.h"
#include "study/study.h"

/* One evaluation of a batch. The method fills index and x; the evaluator
 * fills y, g and fault. With several limit states g is the system's, and
 * gc (nmodes values, NULL for one limit state) each mode's: an evaluator
 * may fill it, and the method context (mctx.h) recomputes it from x and y
 * after every batch, so that replayed points, which carry only the
 * recorded g, have it too. */
typedef struct {
  uint64_t index; /* the key is PREFIX/index */
  double *x;      /* nvars physical inputs */
  double *y;      /* noutputs extracted outputs (may be NULL if none) */
  double g;       /* limit-state value; NaN on a fault */
  int fault;      /* bk_fault_t */
  double *gc;     /* the modes' values (several limit states), or NULL */
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

/* What an evaluator counts as evaluations finish, for progress displays
 * (live, between the methods' decision points; nothing here feeds a
 * decision). */
typedef struct {
  uint64_t replayed;        /* keys found in the records */
  uint64_t completed;       /* evaluations made in this process */
  uint64_t errors;          /* of the completed, ending in a fault */
  uint64_t replayed_errors; /* of the replayed, ending in a fault */
  uint64_t failures;        /* of both, without a fault and g <= 0 */
  int running;              /* processes running now */
} bk_evaluator_stats_t;

typedef void (*bk_evaluator_tick_cb)(void *data,
                                     const bk_evaluator_stats_t *st);

/* An evaluator computing the limit state in process, on the variables
 * alone (studies without a model section). */
void bk_evaluator_inprocess(bk_evaluator_t *ev, const bk_study_t *s);

/* The same, counting into `ip->st` and calling ip->tick (when not NULL)
 * every BK_INPROCESS_TICK evaluations and at the end of each batch. ip is
 * borrowed for as long as ev is used. */
#define BK_INPROCESS_TICK 4096
typedef struct {
  const bk_study_t *study;
  bk_evaluator_tick_cb tick;
  void *tick_data;
  bk_evaluator_stats_t st;
} bk_inprocess_t;
void bk_evaluator_inprocess_counted(bk_evaluator_t *ev, bk_inprocess_t *ip);

#endif
