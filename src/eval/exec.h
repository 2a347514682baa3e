/*
 * The executor interface: run model processes, each in its own folder,
 * session and process group, at most `slots` at a time. Executors know
 * nothing of statistics; methods know nothing of processes. exec_local.c
 * implements it on libuv. (Several machines are reached one level up: an
 * MPI worker runs a dispatcher over its own local executor, see
 * mpi_worker.h.)
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_EXEC_H
#define BK_EXEC_H

#include <stddef.h>
#include <sys/types.h>

typedef struct {
  const char *key;         /* evaluation key, for messages */
  const char *dir;         /* run folder: exists; cwd of the process */
  char *const *argv;       /* argv[0] is looked up on PATH when no '/' */
  char *const *env;        /* complete environment "NAME=VALUE", NULL-ended */
  double timeout;          /* seconds, 0 = none */
  double grace;            /* seconds from SIGTERM to SIGKILL; 0 -> 5 */
  const char *stdout_name; /* file in dir receiving stdout, e.g. "stdout" */
  const char *stderr_name; /* file in dir receiving stderr */
} bk_job_t;

typedef struct {
  int fault;       /* BK_FAULT_NONE, _SPAWN, _EXIT_CODE, _SIGNAL, _TIMEOUT,
                      or BK_FAULT_INTERRUPTED when brink was stopped */
  int exit_status; /* when exited */
  int term_signal; /* when killed by a signal */
  double seconds;  /* wall time */
  char why[256];   /* e.g. "exit status 201", "killed by SIGSEGV",
                      "timeout after 600 s", "ccx: No such file or
                      directory" */
} bk_job_result_t;

/* Runs exactly once per accepted job, from inside bk_exec_wait. */
typedef void (*bk_exec_cb)(void *data, const bk_job_result_t *res);

typedef struct bk_exec bk_exec_t;

/* A local executor with `slots` concurrent processes (>= 1). */
int bk_exec_local_new(bk_exec_t **out, int slots);
void bk_exec_free(bk_exec_t *ex);

/* Queues a job; the job's strings are copied. Returns 0 (the callback will
 * run exactly once) or a negative code (it will not run). */
int bk_exec_submit(bk_exec_t *ex, const bk_job_t *job, bk_exec_cb cb,
                   void *data);
/* Runs until every submitted job has finished and its callback has run.
 * Callbacks may submit more jobs. Returns 0, or BK_ESTOPPED when a stop
 * was requested (bk_stop_requested), or BK_ECANCELED after bk_exec_cancel:
 * running process groups get SIGTERM, SIGKILL after the grace, queued
 * jobs are dropped, and every callback still runs once, with
 * BK_FAULT_INTERRUPTED. */
int bk_exec_wait(bk_exec_t *ex);
/* Number of processes running now (for progress lines). */
int bk_exec_running(const bk_exec_t *ex);

/* Cancels the current bk_exec_wait, or the next one when none runs: the
 * same as a stop request (SIGTERM to running groups, SIGKILL after the
 * grace, queued jobs dropped, every callback once with
 * BK_FAULT_INTERRUPTED), but for this executor alone and without touching
 * the user's stop requests (stop.h): for failures inside brink and for
 * stops that come by message. That bk_exec_wait returns BK_ECANCELED (or
 * BK_ESTOPPED when a stop was requested too) and clears the cancel. Call
 * it from the thread that calls bk_exec_wait: from a callback, from the
 * poll, or before the wait. */
void bk_exec_cancel(bk_exec_t *ex);
/* 1 while a stop request or a cancel is being carried out: a job that
 * ends now must not be retried (bk_exec_submit refuses it). */
int bk_exec_stopping(const bk_exec_t *ex);

/* Called about every 50 ms while bk_exec_wait runs, from inside it (it may
 * call bk_exec_cancel). */
typedef void (*bk_exec_poll_cb)(void *data, bk_exec_t *ex);
void bk_exec_set_poll(bk_exec_t *ex, bk_exec_poll_cb cb, void *data);

/* Runs work(data) on a helper thread, then done(data) on the thread of
 * bk_exec_wait, which does not return before done has run: for file work
 * that need not hold up the reaping and starting of processes. Only from
 * inside bk_exec_wait (a callback). work must not call the executor.
 * Returns 0, or a negative code (neither runs: do the work in place). */
typedef void (*bk_exec_work_cb)(void *data);
int bk_exec_work(bk_exec_t *ex, bk_exec_work_cb work, bk_exec_work_cb done,
                 void *data);

/* For tests only: replaces kill(2) for the signals the executor sends to
 * process groups (NULL restores it). */
typedef int (*bk__exec_kill_fn)(pid_t pid, int sig);
void bk__exec_set_kill(bk__exec_kill_fn fn);

#endif
