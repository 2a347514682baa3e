/*
 * `brink check`: validates a study and prints its probabilistic model, the
 * limit state at the medians (or the model command, outputs and a deck
 * rendered at the medians) and the design that will run. Writes nothing.
 *
 * SPDX-License-Identifier: MIT
 */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "alloc.h"
#include "buf.h"
#include "cli.h"
#include "error.h"
#include "dist.h"
#include "study.h"
#include "template.h"

static const char check_help[] =
    "usage: brink check STUDY.yaml\n"
    "\n"
    "Validates the study file (every error names file:line:col), then prints\n"
    "the variables with their moments, the correlations before and after the\n"
    "Nataf adjustment, the limit state evaluated at the medians, and the\n"
    "design the method will run. Writes nothing.\n";

int bk__cmd_check(int argc, char **argv) {
  const char *path = NULL;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(check_help, stdout);
      return BK_EXIT_DONE;
    } else if (argv[i][0] == '-')
      return bk__cli_usage_error("check: unknown option '%s'", argv[i]);
    else if (path)
      return bk__cli_usage_error(
          "check: one study file at a time ('%s' is extra)", argv[i]);
    else
      path = argv[i];
  }
  if (!path)
    return bk__cli_usage_error("check: %s",
                               "give a study file, e.g. brink check "
                               "study.yaml");
  bk_study_t *s;
  int rc = bk__cli_load_study(path, &s);
  if (rc)
    return rc;
  printf("Study %s (%s): valid\n\n", s->name, path);
  printf("Variables (%zu, of which %zu random)\n", s->nvars,
         bk_transform_nu(s->transform));
  printf("  %-14s %-17s %14s %14s %14s\n", "name", "distribution", "mean", "sd",
         "median");
  double *med = bk_calloc(s->nvars + s->model.noutputs + 1, sizeof *med);
  for (size_t i = 0; i < s->nvars; i++) {
    const bk_dist_t *d = &s->vars[i].dist;
    med[i] = bk_dist_median(d);
    printf("  %-14s %-17s %14.6g %14.6g %14.6g\n", s->vars[i].name,
           bk_dist_name(d->kind), d->mean, d->sd, med[i]);
  }
  if (s->ncorr) {
    printf("\nCorrelations (physical rho, then the Nataf rho0 used)\n");
    for (size_t i = 0; i < s->ncorr; i++)
      printf("  %-14s %-14s %8.4f %8.4f\n", s->vars[s->corr[i].a].name,
             s->vars[s->corr[i].b].name, s->corr[i].rho,
             bk_transform_rho0(s->transform, s->corr[i].a, s->corr[i].b));
  }
  printf("\nLimit state (failure when g <= 0)\n  g = %s\n", s->limit_state);
  if (!s->model.present) {
    double g = bk_expr_eval(s->g, med);
    printf("  at the medians g = %.6g (%s)\n", g, g <= 0 ? "failed" : "safe");
  } else {
    const bk_model_t *m = &s->model;
    printf("\nModel\n  command   ");
    for (size_t i = 0; i < m->argc; i++)
      printf("%s%s", i ? " " : "", m->argv[i]);
    printf("\n  timeout   %s", m->timeout > 0 ? "" : "none");
    if (m->timeout > 0)
      printf("%g s", m->timeout);
    printf(", retries %d, on_error %s, keep %s\n", m->retries,
           m->on_error == BK_ON_ERROR_SKIP   ? "skip"
           : m->on_error == BK_ON_ERROR_FAIL ? "fail"
                                             : "abort",
           (const char *[]){"all", "failed", "errors", "none"}[m->keep]);
    for (size_t i = 0; i < m->noutputs; i++)
      printf(
          "  output    %s from %s, pattern %s (%s match)\n", m->outputs[i].name,
          m->outputs[i].from_stdout ? "stdout" : m->outputs[i].file,
          m->outputs[i].pattern,
          (const char *[]){"first", "last", "max", "min"}[m->outputs[i].match]);
    for (size_t i = 0; i < m->ndecks; i++) {
      bk_buf_t deck;
      bk_buf_init(&deck);
      bk_template_ctx_t ctx = {med, 0, "check/0", "(run folder)"};
      bk_template_render(m->decks[i].tpl, &ctx, &deck);
      printf("\n%s rendered at the medians (from %s):\n", m->decks[i].to,
             m->decks[i].template_name);
      int lines = 0;
      const char *p = deck.data ? deck.data : "";
      while (*p && lines < 60) {
        const char *nl = strchr(p, '\n');
        size_t len = nl ? (size_t)(nl - p) : strlen(p);
        printf("  | %.*s\n", (int)len, p);
        lines++;
        p += len + (nl ? 1 : 0);
      }
      if (*p)
        printf("  | ... (%zu bytes in all)\n", deck.len);
      bk_buf_close(&deck);
    }
  }
  const bk_analysis_t *a = &s->analysis;
  printf("\nMethod %s, seed %llu\n", bk_method_name(a->method),
         (unsigned long long)s->seed);
  if (a->method == BK_METHOD_LHS || a->method == BK_METHOD_SOBOL) {
    uint64_t per = a->samples / a->replicates;
    printf("  %u replicates of %llu points = %llu evaluations\n", a->replicates,
           (unsigned long long)per, (unsigned long long)(per * a->replicates));
    if (a->method == BK_METHOD_SOBOL && (per & (per - 1)) != 0)
      printf("  note: Sobol points are best balanced when each replicate is "
             "a power of two (e.g. %llu)\n",
             (unsigned long long)(1ull << (int)floor(log2((double)per))));
  } else {
    printf("  up to %llu evaluations\n",
           (unsigned long long)(a->samples && a->samples < a->max_evaluations
                                    ? a->samples
                                    : a->max_evaluations));
  }
  if (a->target_cov > 0)
    printf("  stops early once the cov reaches %g\n", a->target_cov);
  printf("  %g%% confidence intervals\n", 100 * a->ci_level);
  if (a->has_target_beta)
    printf("  target reliability index %.2f\n", a->target_beta);
  printf("\nRun folder %s (%d slots)\n", s->run.folder, s->run.slots);
  bk_free(med);
  bk_study_free(s);
  return BK_EXIT_DONE;
}
