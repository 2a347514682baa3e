/*
 * The dispatcher: the evaluator of studies with a model section. For each
 * keyed point of a batch it looks the key up in the record log (replay.h);
 * recorded keys return at once (this is how a study resumes), the others
 * get a run folder with the rendered decks and copied files, run through
 * the executor, have their outputs extracted and the limit state
 * evaluated, with retries on faults, and go to the sink: the record log in
 * a local run, the reply to the coordinator on an MPI worker. The keep
 * policy then removes the run folders no one needs.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_DISPATCH_H
#define BK_DISPATCH_H

#include <stdint.h>

#include "eval/evaluator.h"
#include "eval/exec.h"
#include "eval/records.h"
#include "study/study.h"

/* Where the dispatcher puts each finished evaluation, exactly once per
 * evaluation and only when it is final: a run cut short by a stop or a
 * cancel, or a fault with retries left when the run stops, never reaches
 * the sink (it runs again on resume). */
typedef struct bk_sink bk_sink_t;
struct bk_sink {
  /* Takes the finished evaluation; everything in rec is borrowed for the
   * call. Returns 0, or a negative code with err set: the dispatcher then
   * cancels the batch and returns that code. */
  int (*put)(bk_sink_t *sk, const bk_record_t *rec, bk_error_t *err);
  void *data;
};

/* A sink appending to an open record log. */
void bk_dispatch_sink_records(bk_sink_t *sk, bk_records_t *r);

/* The dispatcher's counts (evaluator.h): completed are model runs
 * finished in this process; the tick comes after each of them, and once
 * after the keys of a batch found in the records. */
typedef bk_evaluator_stats_t bk_dispatch_stats_t;
typedef bk_evaluator_tick_cb bk_dispatch_tick_cb;

typedef struct {
  const bk_study_t *study;
  bk_records_t *records;    /* borrowed; keys recorded here are replayed;
                               NULL: none is */
  bk_sink_t *sink;          /* borrowed; NULL: append to `records` */
  bk_exec_t *exec;          /* borrowed */
  const char *work_dir;     /* run folders are made below it */
  const char *host;         /* recorded with each evaluation */
  bk_dispatch_tick_cb tick; /* after each finished run and after the
                               replayed keys of a batch; may be NULL */
  void *tick_data;
  const char *hostfile; /* NULL, or a host list, a host per line and per
                           MPI process ($PBS_NODEFILE): split into chunks
                           of run.ranks lines, one per concurrent run,
                           which gets its chunk in {{ _hosts }} and
                           BRINK_HOSTS ("n1:2,n2:2"); at most as many runs
                           as chunks run at a time */
} bk_dispatch_opts_t;

typedef struct bk_dispatch bk_dispatch_t;

/* Returns 0, BK_ENOMEM, or BK_EIO when the host list cannot be read or
 * holds no host. */
int bk_dispatch_new(bk_dispatch_t **out, const bk_dispatch_opts_t *opts);
void bk_dispatch_free(bk_dispatch_t *d);
/* Makes `ev` evaluate through `d`. */
void bk_dispatch_evaluator(bk_dispatch_t *d, bk_evaluator_t *ev);
const bk_dispatch_stats_t *bk_dispatch_stats(const bk_dispatch_t *d);

/* The run-folder name of a key: '/' becomes '-' ("lhs/r3/77" ->
 * "lhs-r3-77"). */
void bk_dispatch_folder_name(const char *key, char *out, size_t cap);

/* Is the inherited variable "NAME=VALUE" left out of the model's
 * environment (docs/cluster.md, "The model's environment")? brink's own
 * BRINK_* variables; those of an MPI or Slurm launch (all SLURM_* under
 * run.launch direct, those of brink's own step under srun) unless
 * model.inherit names them; glibc's MALLOC_PERTURB_ and MALLOC_CHECK_;
 * and the thread counts brink sets from run.threads. */
int bk_dispatch_env_removed(const bk_study_t *s, const char *kv);

/* Removes a folder and everything below it without following symbolic
 * links. Returns 0 or a negative errno. */
int bk_dispatch_remove_tree(const char *path);

/* Kills (SIGKILL, with their process groups) the processes of this user
 * whose working folder lies below `work_dir`: models left running by a
 * brink that was killed without a chance to stop them (kill -9, power
 * loss of the coordinator only). Call it holding the records lock, before
 * dispatching. Linux only (reads /proc); elsewhere it does nothing.
 * Returns the number of processes killed. */
int bk_dispatch_reap(const char *work_dir);

#endif
