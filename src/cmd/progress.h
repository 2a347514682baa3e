/*
 * The progress line of `brink run`. Counts come live from the evaluator
 * (its tick after each finished evaluation, or every few thousand in
 * process), so failures and errors show as they happen; the estimate's
 * coefficient of variation comes from the method's decision points, and
 * the stage from the batch the method has under way. For the methods
 * whose total is known in advance (random with samples, lhs, sobol) the
 * line shows done of planned, the running share of failures as Pf and the
 * time to go; for the others the batch under way and how far it is, and
 * no total: their cap (max_evaluations) is a limit, not a plan. The line
 * is a display only; no decision reads it.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_PROGRESS_H
#define BK_PROGRESS_H

#include <stdint.h>

#include "base/buf.h"
#include "eval/evaluator.h"
#include "methods/method.h"

typedef struct {
  /* Settings, set by the caller. */
  int tty;           /* a live line (\r) every 0.1 s, else a line per 10 s */
  int quiet;         /* nothing at all */
  double start;      /* monotonic seconds at the start of the run */
  int running_share; /* the share of failures is the estimate (random, lhs,
                        sobol), so Pf can be shown live */
  int on_error_fail; /* model errors count as failures (model.on_error) */
  int processes;     /* model runs are processes: show how many run */
  /* From the method, as of its last call (bk_progress_method). */
  uint64_t planned; /* 0: not known in advance */
  uint64_t evaluations;
  uint64_t model_errors;
  uint64_t failures;
  double pf, cov; /* NaN until the method has an estimate */
  char stage[96];
  uint64_t batch_first, batch_size;
  /* From the evaluator, live (may be NULL); borrowed. */
  const bk_evaluator_stats_t *st;
  /* Private. */
  double last;
  int shown;
} bk_progress_t;

/* Sets the settings to their defaults (not a tty, not quiet) and the
 * method's part to "nothing known yet". */
void bk_progress_init(bk_progress_t *p, double start);

/* Takes what the method reports (a bk_progress_cb's argument). */
void bk_progress_method(bk_progress_t *p, const bk_method_progress_t *mp);

/* Appends the line as of `now` (monotonic seconds), without a line end. */
void bk_progress_line(const bk_progress_t *p, double now, bk_buf_t *out);

/* Prints the line to stderr unless quiet, at most every 0.1 s on a
 * terminal and 10 s otherwise, or now when `force` is set. */
void bk_progress_show(bk_progress_t *p, double now, int force);

#endif
