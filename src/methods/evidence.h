/*
 * Evidence that model errors bias the result. With run.on_error skip, a
 * run that ended in a model error is left out of the estimate; that is
 * harmless when errors strike at random, and biases Pf low when they
 * cluster where the model is loaded hardest, near the failure region.
 *
 * bk_method_run wraps every method's evaluator in this watcher: it keeps
 * the inputs of the errored runs and of the completed ones (with their
 * g), each in a fixed-size reservoir sample (Vitter 1985,
 * algorithm R, with a fixed seed, so a resumed run keeps the same sample).
 * After the method, bk_evidence_check maps them to the standard-normal
 * space u and compares the neighbourhoods:
 *
 *   for each errored run, the k = 5 nearest completed runs in u-space
 *   (Euclidean), and the mean rank of their g among all completed runs;
 *   the same score for completed runs, their own k nearest others;
 *   a one-sided Wilcoxon-Mann-Whitney rank-sum test (Mann and Whitney
 *   1947, normal approximation with the tie correction) of "the errored
 *   runs' neighbours have lower g".
 *
 * The test runs twice: on all runs, and on the runs of the method's first
 * stage alone (the first key prefix: the plain sample of subset
 * simulation's level 0, cross-entropy's first step, an LHS replicate).
 * Adaptive methods crowd their later runs where errors strike, so that
 * errored and completed runs end up side by side; the first stage still
 * shows the clustering. Each test fires at z < BK_EVIDENCE_Z (one-sided
 * p about 0.0007, so both together about 0.0014 under random errors).
 *
 * When errors strike at random the errored runs are a random subset of
 * the evaluated points, both scores have the same distribution and the
 * test stays quiet.
 * The k-nearest-neighbour comparison of missing and observed cases is
 * common practice in checking whether data are missing at random.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_EVIDENCE_H
#define BK_EVIDENCE_H

#include <stddef.h>
#include <stdint.h>

#include "eval/evaluator.h"
#include "methods/method.h"
#include "methods/result.h"
#include "study/study.h"

#define BK_EVIDENCE_K 5
#define BK_EVIDENCE_Z (-3.2)

/* The outcome of the neighbourhood test. */
typedef struct {
  int tested;        /* 0: too few errored or completed runs */
  int fires;         /* errors cluster where g is low */
  size_t nerr, nok;  /* errored and completed runs compared */
  double z;          /* the rank-sum statistic, normal scale */
  double share_near; /* failed share of the errored runs' neighbours */
  double share_all;  /* failed share of the completed runs */
} bk_evidence_test_t;

/* The test on given points: nok completed runs (u row-major, nu values
 * each, and their g) and nerr errored runs. Returns 0 or BK_ENOMEM. */
int bk_evidence_test(size_t nu, const double *ok_u, const double *ok_g,
                     size_t nok, const double *err_u, size_t nerr,
                     bk_evidence_test_t *out);

/* A reservoir sample of the runs seen, by their physical inputs x:
 * completed ones with their g, errored ones. */
typedef struct {
  double *ok_x, *ok_g;
  size_t nok, capok;
  uint64_t seen_ok;
  double *err_x;
  size_t nerr, caperr;
  uint64_t seen_err;
} bk_evidence_pool_t;

typedef struct {
  bk_evaluator_t ev; /* hand this one to the method */
  bk_evaluator_t *inner;
  const bk_study_t *s;
  size_t nu;
  bk_evidence_pool_t all;   /* every run */
  bk_evidence_pool_t first; /* the runs under the first key prefix */
  char first_prefix[64];
  uint64_t state; /* the reservoirs' random stream, fixed seed */
  int started;    /* the reservoirs are allocated */
  int nomem;
  bk_error_run_t *runs; /* the first BK_RESULT_ERROR_RUNS model errors */
  size_t nruns;
} bk_evidence_t;

/* Wraps `inner` for study s; e->ev is the evaluator to use. */
void bk_evidence_init(bk_evidence_t *e, const bk_study_t *s,
                      bk_evaluator_t *inner);
void bk_evidence_close(bk_evidence_t *e);

/* Moves the first errored runs the watcher saw (key, fault, inputs) into
 * res->error_runs, with their reason and folder from `note` when given. */
void bk_evidence_list(bk_evidence_t *e, bk_result_t *res, bk_note_cb note,
                      void *note_data);

/* Runs the test on what the watcher saw and, when it fires, adds a
 * warning to res naming the bias and the bounds on Pf. Only with
 * on_error skip (fail counts errored runs as failed, abort stops).
 * Returns 0 or BK_ENOMEM. */
int bk_evidence_check(bk_evidence_t *e, bk_result_t *res);

#endif
