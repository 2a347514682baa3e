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

/* Called at each decision point (may be NULL). */
typedef void (*bk_progress_cb)(void *data, const bk_result_t *sofar,
                               uint64_t planned);

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

/* Runs the study's method. Returns 0 with *res filled, BK_ESTOPPED when a
 * stop was requested (res holds the partial state), or another negative
 * code with err set. */
int bk_method_run(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err);

#endif
