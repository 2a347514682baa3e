/*
 * Method dispatch (see method.h): the study's method to its file.
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/method.h"

#include <stdio.h>
#include <string.h>

#include "methods/evidence.h"
#include "methods/method_impl.h"

static int run_method(const bk_study_t *s, bk_evaluator_t *ev,
                      const bk_method_opts_t *opts, bk_result_t *res,
                      bk_error_t *err) {
  memset(res, 0, sizeof *res);
  res->method = bk_study_method_name(s->analysis.method);
  switch (s->analysis.method) {
  case BK_METHOD_RANDOM:
  case BK_METHOD_LHS:
  case BK_METHOD_SOBOL:
    return bk__method_mc(s, ev, opts, res, err);
  case BK_METHOD_FORM:
    return bk__method_form(s, ev, opts, res, err);
  case BK_METHOD_IMPORTANCE:
    return bk__method_importance(s, ev, opts, res, err);
  case BK_METHOD_CROSS_ENTROPY:
    return bk__method_cross_entropy(s, ev, opts, res, err);
  case BK_METHOD_SUBSET:
    return bk__method_subset(s, ev, opts, res, err);
  case BK_METHOD_SURROGATE: {
    int rc = bk__method_surrogate(s, ev, opts, res, err);
    if (rc == 0 && s->nmodes)
      rc = bk__system_surrogate(res, s);
    if (rc == BK_ENOMEM)
      bk_error_set(err, rc, NULL, 0, 0, "out of memory");
    return rc;
  }
  default:
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "method %s is not available in this version",
                        bk_study_method_name(s->analysis.method));
  }
}

/* Every method runs behind the model-error watcher (evidence.h), which
 * warns when the errored runs it saw cluster where g is low. */
int bk_method_run(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err) {
  bk_evidence_t watch;
  bk_evidence_init(&watch, s, ev);
  int rc = run_method(s, &watch.ev, opts, res, err);
  bk_evidence_list(&watch, res, opts ? opts->note : NULL,
                   opts ? opts->note_data : NULL);
  if (rc == 0 && bk_evidence_check(&watch, res))
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  bk_evidence_close(&watch);
  return rc;
}

/* The key layouts of the methods, documented at the top of each
 * method_<name>.c. Numbers in the keys count from 0 except FORM's
 * iterations, shown as written; searches, replicates and steps are shown
 * counting from 1. */
void bk_method_stage(const char *prefix, char *out, size_t cap) {
  unsigned a, b;
  int n = 0;
  if (strcmp(prefix, "mc") == 0)
    snprintf(out, cap, "random sampling");
  else if (sscanf(prefix, "lhs/r%u%n", &a, &n) == 1 && !prefix[n])
    snprintf(out, cap, "Latin hypercube, replicate %u", a + 1);
  else if (sscanf(prefix, "sobol/r%u%n", &a, &n) == 1 && !prefix[n])
    snprintf(out, cap, "Sobol, replicate %u", a + 1);
  else if (sscanf(prefix, "form/i%u%n", &a, &n) == 1 && !prefix[n])
    snprintf(out, cap, "FORM search 1, iteration %u", a);
  else if (sscanf(prefix, "form/d%u/i%u%n", &a, &b, &n) == 2 && !prefix[n])
    snprintf(out, cap, "FORM search %u, iteration %u", a + 1, b);
  else if (strcmp(prefix, "form/h") == 0)
    snprintf(out, cap, "FORM curvature check, search 1");
  else if (sscanf(prefix, "form/d%u/h%n", &a, &n) == 1 && !prefix[n])
    snprintf(out, cap, "FORM curvature check, search %u", a + 1);
  else if (strcmp(prefix, "form/p") == 0)
    snprintf(out, cap, "FORM probe for further design points");
  else if (strcmp(prefix, "is") == 0)
    snprintf(out, cap, "importance sampling");
  else if (sscanf(prefix, "ce/s%u%n", &a, &n) == 1 && !prefix[n])
    snprintf(out, cap, "cross-entropy adaptation step %u", a + 1);
  else if (strcmp(prefix, "ce/final") == 0)
    snprintf(out, cap, "cross-entropy final sampling");
  else if (strcmp(prefix, "ss/l0") == 0)
    snprintf(out, cap, "subset level 0 (Monte Carlo)");
  else if (sscanf(prefix, "ss/l%u/s%u%n", &a, &b, &n) == 2 && !prefix[n])
    snprintf(out, cap, "subset level %u, chain step %u", a, b + 1);
  else if (strcmp(prefix, "sg/t0") == 0)
    snprintf(out, cap, "surrogate starting design");
  else if (sscanf(prefix, "sg/t%u%n", &a, &n) == 1 && !prefix[n])
    snprintf(out, cap, "surrogate learning iteration %u", a);
  else if (strcmp(prefix, "sg/c") == 0)
    snprintf(out, cap, "surrogate correction runs");
  else
    snprintf(out, cap, "batch %s", prefix);
}
