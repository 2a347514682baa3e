/*
 * What a method reports back: the estimate, counts, the convergence
 * history, a design point, details and warnings. Filled by the methods,
 * read by reports and commands.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_RESULT_H
#define BK_RESULT_H

#include <stddef.h>
#include <stdint.h>

#include "numerics/estimate.h"

/* Convergence history: the estimate after each decision point. */
typedef struct {
  uint64_t n;
  double pf;
  double ci[2];
} bk_history_t;

/* A design point found by FORM (form, and importance without a given
 * center). Arrays are owned by the result. */
typedef struct {
  int present;
  int converged;
  int iterations;
  double beta;    /* FORM reliability index, distance to the origin in u */
  double pf_form; /* Phi(-beta) */
  double pf_sorm; /* Breitung SORM; NaN when not computed */
  double *u;      /* nu coordinates */
  double *x;      /* nvars physical values */
  double *alpha2; /* nvars importance factors (0 for constants), sum 1 */
} bk_design_point_t;

/* A labelled number a method wants reported (levels of subset simulation,
 * effective sample size, ...). */
typedef struct {
  char label[64];
  double value;
} bk_detail_t;

/* A run that ended in a model error, as the reports list it. */
typedef struct {
  char key[96];
  int fault;        /* bk_fault_t */
  double *x;        /* nvars physical inputs, owned */
  char reason[160]; /* the recorded reason; "" when not known */
  char folder[256]; /* the run folder kept; "" when none */
} bk_error_run_t;

/* How many model errors a result lists (the first ones, in evaluation
 * order; all are counted in model_errors). */
#define BK_RESULT_ERROR_RUNS 20
/* One limit state of several (a failure mode), estimated from the same
 * evaluations as the system. */
typedef struct {
  const char *name; /* the study's name of the mode (lives with the study) */
  int present;      /* the method estimated this mode */
  bk_estimate_t est;
  uint64_t model_errors;    /* evaluations where the mode has no value */
  uint64_t excluded;        /* of those, left out (on_error: skip) */
  double pf_bounds[2];      /* excluded runs taken as safe / as failed */
  double *replicate_pf;     /* lhs, sobol: the result's replicates values */
  uint64_t system_failures; /* system failures in which this mode fails
                               too; UINT64_MAX when not counted */
  /* FORM: the mode's design point; beta and pf_form also in est. */
  bk_design_point_t dp;
} bk_component_t;

/* First-order bounds on the system's Pf from the modes' FORM results. */
typedef struct {
  int present;
  double simple[2];    /* unimodal bounds */
  double ditlevsen[2]; /* bimodal bounds (Ditlevsen 1979) */
} bk_system_bounds_t;

/* What a method reports back. Owned by the caller; bk_result_close frees
 * the arrays. */
typedef struct {
  const char *method;
  bk_estimate_t est;
  uint64_t evaluations; /* model calls, all of them */
  uint64_t model_errors;
  uint64_t excluded;   /* runs left out of the estimate (on_error: skip) */
  double pf_bounds[2]; /* excluded runs taken as safe / as failed */
  uint32_t replicates; /* lhs, sobol: replicates completed */
  uint64_t per_replicate;
  double *replicate_pf;
  const char *stop_reason; /* "target_cov reached", "samples done", ... */
  bk_history_t *history;
  size_t nhistory;
  size_t caphistory;
  double seconds;       /* wall time of this session (brink run) */
  double seconds_total; /* over every session of the study, this one too
                           (the run folder's sessions.log); 0: unknown */
  uint32_t sessions;    /* how many sessions that total covers */
  bk_design_point_t dp;
  char **warnings; /* evidence against the method's result */
  size_t nwarnings;
  char **notes; /* what the method did and could not check, in words */
  size_t nnotes;
  bk_detail_t *details;
  size_t ndetails;
  bk_error_run_t *error_runs; /* the first BK_RESULT_ERROR_RUNS */
  size_t nerror_runs;
  /* Several limit states: each mode's estimate (ncomponents = 0 for one
   * limit state, or when the method cannot estimate the modes). */
  bk_component_t *components;
  size_t ncomponents;
  bk_system_bounds_t bounds;
  /* A re-analysis of recorded evaluations (`brink report --limit-state`):
   * what was changed, NULL for a run. */
  const char *reanalysis;
} bk_result_t;

void bk_result_close(bk_result_t *r);

/* Appends a history entry; returns 0 or BK_ENOMEM. */
int bk_result_push_history(bk_result_t *r);
/* Adds a warning (printed in reports); returns 0 or BK_ENOMEM. */
int bk_result_warn(bk_result_t *r, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
/* Adds a note: what the method did or could not check, not evidence
 * against the result (printed in reports); returns 0 or BK_ENOMEM. */
int bk_result_note(bk_result_t *r, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
/* Adds a labelled number to the report; returns 0 or BK_ENOMEM. */
int bk_result_detail(bk_result_t *r, const char *label, double value);
/* The same with a printf-style label ("threshold level %d"), cut to the
 * 63 bytes a label holds. */
int bk_result_detailf(bk_result_t *r, double value, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));
/* Sets up n components with the given names, each with room for
 * `replicates` replicate values (0: none). Returns 0 or BK_ENOMEM. */
int bk_result_components(bk_result_t *r, const char *const *names, size_t n,
                         uint32_t replicates);
/* Allocates dp's arrays for nu and nvars; returns 0 or BK_ENOMEM. */
int bk_result_design_point(bk_result_t *r, size_t nu, size_t nvars);

#endif
