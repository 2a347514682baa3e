/*
 * The taxonomy of model-run faults. A fault is data, not an error: the run
 * gets a record with its fault kind and the study goes on (subject to the
 * on_error policy).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_FAULT_H
#define BK_FAULT_H

typedef enum {
  BK_FAULT_NONE = 0,      /* "ok" */
  BK_FAULT_SPAWN,         /* "spawn-failed": program missing, not executable */
  BK_FAULT_EXIT_CODE,     /* "exit-code": exited with a non-zero status */
  BK_FAULT_SIGNAL,        /* "signal": killed by a signal it did not ask for */
  BK_FAULT_TIMEOUT,       /* "timeout": exceeded model.timeout, killed */
  BK_FAULT_NO_OUTPUT,     /* "no-output-file": the named output file is absent */
  BK_FAULT_NO_MATCH,      /* "no-match": the pattern matched nothing */
  BK_FAULT_NOT_A_NUMBER,  /* "not-a-number": the match is not a finite number */
  BK_FAULT__COUNT,
  BK_FAULT_INTERRUPTED = 100 /* stopped by brink itself; never recorded */
} bk_fault_t;

/* "ok", "spawn-failed", "exit-code", ... */
const char *bk_fault_name(int fault);
/* The fault for a name, or -1. */
int bk_fault_from_name(const char *name);

#endif
