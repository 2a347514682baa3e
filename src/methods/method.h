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

#include "base/error.h"
#include "eval/evaluator.h"
#include "methods/result.h"
#include "study/study.h"

/* Where a method stands, for a progress display. Nothing here feeds a
 * decision. */
typedef struct {
  const bk_result_t *sofar; /* as of the last decision point */
  /* Evaluations the method makes in all, when known in advance (random
   * with samples, lhs, sobol); 0 when the responses decide (the other
   * methods stop on convergence or target_cov well below their cap). */
  uint64_t planned;
  const char *stage;    /* the batch under way in words ("FORM search 1,
                           iteration 3"); "" between batches */
  uint64_t batch_first; /* evaluations of the run before that batch */
  uint64_t batch_size;  /* evaluations in it; 0 between batches */
} bk_method_progress_t;

/* Called when a batch starts and at each decision point (may be NULL). */
typedef void (*bk_progress_cb)(void *data, const bk_method_progress_t *p);

/* Writes what the records say of the faulted run under `key`: the reason
 * ("exit status 1") into reason[rcap] and the run folder kept into
 * folder[fcap] ("" when none), for messages and reports; returns 1 when
 * the key is recorded. */
typedef int (*bk_note_cb)(void *data, const char *key, char *reason,
                          size_t rcap, char *folder, size_t fcap);

typedef struct {
  bk_progress_cb progress;
  void *progress_data;
  bk_note_cb note; /* may be NULL */
  void *note_data;
} bk_method_opts_t;

/* The words for a batch of keys PREFIX/i ("form/d1/i3" is "FORM search 2,
 * iteration 3"), for progress displays; the prefix itself when it is not
 * one of the methods' layouts. */
void bk_method_stage(const char *prefix, char *out, size_t cap);

/* Runs the study's method. Returns 0 with *res filled, BK_ESTOPPED when a
 * stop was requested (res holds the partial state), or another negative
 * code with err set. */
int bk_method_run(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err);

#endif
