/*
 * The coordinator of `brink run --mpi`, on rank 0: the evaluator the
 * method runs on. It replays recorded keys (replay.h), sends the others
 * to the worker ranks in chunks of at most run.slots points, and appends
 * the records the workers send back to the log, of which it is the only
 * writer. Which worker evaluates a key changes nothing in the result.
 *
 * It never blocks in MPI: it polls for replies and sleeps briefly, so stop
 * requests are seen and an idle rank costs no CPU. On a stop it sends STOP
 * to every busy worker and waits for their replies (what finished is
 * recorded) at most STOP_WAIT seconds; a worker silent that long is taken
 * as lost (its rank or node died) and MPI is abandoned (mpi_comm.h).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_MPI_COORD_H
#define BK_MPI_COORD_H

#include "base/error.h"
#include "eval/dispatch.h"
#include "eval/evaluator.h"
#include "eval/records.h"
#include "study/study.h"

typedef struct {
  const bk_study_t *study;
  bk_records_t *records;    /* borrowed; open for writing */
  bk_dispatch_tick_cb tick; /* after each recorded evaluation; may be NULL */
  void *tick_data;
} bk_mpi_coord_opts_t;

typedef struct bk_mpi_coord bk_mpi_coord_t;

/* Waits for every worker's greeting. Returns 0, BK_ESTOPPED, BK_EPROTO for
 * a malformed greeting, or BK_EMODEL with err naming the rank, its host and
 * why it cannot run models. */
int bk_mpi_coord_new(bk_mpi_coord_t **out, const bk_mpi_coord_opts_t *opts,
                     bk_error_t *err);
/* Makes `ev` evaluate through the workers. A batch returns 0, BK_ESTOPPED
 * (a stop request here, or a worker stopped by a signal on its node),
 * BK_EMODEL (a worker cannot go on), BK_EPROTO, or a records failure. */
void bk_mpi_coord_evaluator(bk_mpi_coord_t *c, bk_evaluator_t *ev);
const bk_dispatch_stats_t *bk_mpi_coord_stats(const bk_mpi_coord_t *c);
void bk_mpi_coord_free(bk_mpi_coord_t *c);
/* Tells every worker to end (call once, from rank 0, before
 * bk_mpi_finalize, on every path, also when no coordinator was made). */
void bk_mpi_coord_quit_workers(void);

#endif
