/*
 * The MPI mode of `brink run --mpi`: rank 0 is the coordinator (the method
 * and the single writer of the records), every other rank is a worker that
 * evaluates keyed points with the local dispatcher and executor (run.slots
 * processes per rank, run folders in node-local scratch when run.scratch is
 * set) and ships the finished evaluations back.
 *
 * Evaluation happens where the files are: a worker renders the decks, runs
 * the model, extracts the outputs and evaluates the limit state in its own
 * run folder; only keys, inputs and finished records travel. Folders the
 * keep policy keeps are copied from scratch into RUN.FOLDER/work; when that
 * fails the record's note names host and path instead.
 *
 * Messages are raw bytes: every rank must run the same brink on the same
 * architecture (as any MPI job does). Built only when meson finds MPI
 * (BK_HAVE_MPI); without it bk_mpi_available() is 0 and the rest fail.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_EXEC_MPI_H
#define BK_EXEC_MPI_H

#include <stdint.h>

#include "eval/dispatch.h"
#include "base/error.h"
#include "eval/evaluator.h"
#include "eval/records.h"
#include "study/study.h"

/* 1 when this brink was built with MPI. */
int bk_mpi_available(void);

/* Initialises MPI (thread level serialized); *rank and *size of the world.
 * Returns 0 or BK_EINVAL when MPI is not available. */
int bk_mpi_init(int *argc, char ***argv, int *rank, int *size);
/* Finalizes MPI, unless a worker did not answer a stop (its rank is
 * taken as lost; the launcher ends the job). */
void bk_mpi_finalize(void);

/* ---- coordinator (rank 0) ---------------------------------------------- */

typedef struct {
  const bk_study_t *study;
  bk_records_t *records;    /* borrowed; open for writing */
  bk_dispatch_tick_cb tick; /* after each finished evaluation; may be NULL */
  void *tick_data;
} bk_mpi_coord_opts_t;

typedef struct bk_mpi_coord bk_mpi_coord_t;

/* Waits for every worker's greeting. Returns 0, BK_ESTOPPED, or
 * BK_EMODEL with err naming the rank, its host and why it cannot run
 * models. */
int bk_mpi_coord_new(bk_mpi_coord_t **out, const bk_mpi_coord_opts_t *opts,
                     bk_error_t *err);
/* Makes `ev` evaluate through the workers. */
void bk_mpi_coord_evaluator(bk_mpi_coord_t *c, bk_evaluator_t *ev);
const bk_dispatch_stats_t *bk_mpi_coord_stats(const bk_mpi_coord_t *c);
void bk_mpi_coord_free(bk_mpi_coord_t *c);
/* Tells every worker to end (call once, from rank 0, before
 * bk_mpi_finalize, on every path, also when no coordinator was made). */
void bk_mpi_quit_workers(void);

/* ---- worker (ranks 1..size-1) ------------------------------------------ */

typedef struct {
  const bk_study_t *study;
  bk_evaluator_t *local; /* a dispatcher over `records` */
  bk_records_t *records; /* the worker's private log */
  const char *work_dir;  /* where the dispatcher makes run folders */
  const char *keep_dir;  /* shared folder for kept folders; NULL when
                            work_dir is already shared */
  const char *host;
} bk_mpi_worker_opts_t;

/* Greets the coordinator (with `failure` as the reason when it is not NULL:
 * the worker cannot run models), then evaluates what it is sent until told
 * to quit. Returns 0 or a negative code. */
int bk_mpi_worker_run(const bk_mpi_worker_opts_t *opts, const char *failure);

#endif
