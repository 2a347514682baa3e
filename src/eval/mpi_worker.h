/*
 * A worker rank of `brink run --mpi` (ranks 1..size-1). It greets the
 * coordinator, then evaluates each chunk it is sent with a dispatcher over
 * its own local executor (run.slots processes, run folders in node-local
 * scratch when run.scratch is set) and replies with the records of the
 * evaluations that finished: the dispatcher's sink packs each record into
 * the reply, so the worker keeps no log of its own. Evaluation happens
 * where the files are: only keys, inputs and records travel.
 *
 * Folders the keep policy keeps are copied from scratch into the shared
 * RUN.FOLDER/work before the record leaves; when that fails, the record's
 * folder is HOST:PATH and the folder stays on the node.
 *
 * While a chunk runs, the executor's poll callback looks for the
 * coordinator's STOP and cancels the executor (exec.h): no second thread.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_MPI_WORKER_H
#define BK_MPI_WORKER_H

#include "study/study.h"

typedef struct {
  const bk_study_t *study;
  const char *work_dir; /* where run folders are made; exists */
  const char *keep_dir; /* shared folder for kept folders; NULL when
                           work_dir is already shared */
  const char *host;
} bk_mpi_worker_opts_t;

/* Greets the coordinator (with `failure` as the reason when it is not
 * NULL: the worker cannot run models, and answers every chunk with it),
 * then evaluates what it is sent until told to quit. Returns 0 or a
 * negative code. */
int bk_mpi_worker_run(const bk_mpi_worker_opts_t *opts, const char *failure);

#endif
