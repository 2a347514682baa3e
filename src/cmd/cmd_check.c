/*
 * `brink check`: validates a study and prints its probabilistic model, the
 * limit state at the medians (or the model command, outputs and a deck
 * rendered at the medians) and the design that will run. Writes nothing,
 * except with --try: the model then runs once at the medians in a scratch
 * folder, and what it did and what was extracted is shown.
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

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "eval/dispatch.h"
#include "numerics/dist.h"
#include "eval/exec.h"
#include "study/extract.h"
#include "base/fault.h"
#include "eval/records.h"
#include "base/stop.h"
#include "study/study.h"
#include "study/template.h"

static const char check_help[] =
    "usage: brink check STUDY.yaml [--try]\n"
    "\n"
    "Validates the study file (every error names file:line:col), then prints\n"
    "the variables with their moments, the correlations before and after the\n"
    "Nataf adjustment, the limit state evaluated at the medians, and the\n"
    "design the method will run. Writes nothing.\n"
    "\n"
    "  --try   also run the model once, at the medians, in a scratch folder\n"
    "          (kept, under $TMPDIR or /tmp), and show the rendered deck, the\n"
    "          command, its exit status, and each output with its value or\n"
    "          why it was not found. Exit code 1 when the run or an\n"
    "          extraction fails. The first thing to do when wrapping a new\n"
    "          program.\n";

/* Opens dir/name for reading; NULL when absent. */
static FILE *open_in(const char *dir, const char *name) {
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/%s", dir, name);
  FILE *f = p.data ? fopen(p.data, "r") : NULL;
  bk_buf_close(&p);
  return f;
}

static void print_tail(const char *dir, const char *name, int lines) {
  FILE *f = open_in(dir, name);
  if (!f)
    return;
  char *ring[64] = {0};
  size_t n = 0;
  char line[512];
  while (fgets(line, sizeof line, f)) {
    line[strcspn(line, "\n")] = '\0';
    bk_free(ring[n % 64]);
    ring[n % 64] = bk_strdup(line);
    n++;
  }
  fclose(f);
  size_t from = n > (size_t)lines ? n - (size_t)lines : 0;
  if (n)
    printf("  last lines of %s%s:\n", name, from ? "" : " (all of it)");
  for (size_t i = from; i < n; i++)
    printf("  | %s\n", ring[i % 64] ? ring[i % 64] : "(out of memory)");
  for (size_t i = 0; i < 64; i++)
    bk_free(ring[i]);
}

static void print_head(const char *dir, const char *name, int lines) {
  FILE *f = open_in(dir, name);
  if (!f)
    return;
  char line[512];
  int n = 0;
  while (n < lines && fgets(line, sizeof line, f)) {
    line[strcspn(line, "\n")] = '\0';
    if (n++ == 0)
      printf("      %s begins:\n", name);
    printf("      | %s\n", line);
  }
  fclose(f);
}

/* Runs the model once at `med` in a scratch folder through the same
 * dispatcher a run uses. Returns an exit code. */
static int try_model(const bk_study_t *s, const double *med) {
  const char *tmp = getenv("TMPDIR");
  bk_buf_t dir;
  bk_buf_init(&dir);
  if (bk_buf_printf(&dir, "%s/brink-try-XXXXXX", tmp && *tmp ? tmp : "/tmp")) {
    fprintf(stderr, "brink: out of memory\n");
    return BK_EXIT_RUNTIME;
  }
  if (!mkdtemp(dir.data)) {
    fprintf(stderr, "brink: cannot make a scratch folder %s: %s\n", dir.data,
            strerror(errno));
    bk_buf_close(&dir);
    return BK_EXIT_RUNTIME;
  }
  /* The same study, but every folder kept and no retry. */
  bk_study_t t = *s;
  t.model.keep = BK_KEEP_ALL;
  t.model.retries = 0;
  bk_buf_t lp, wd;
  bk_buf_init(&lp);
  bk_buf_init(&wd);
  int oom = bk_buf_printf(&lp, "%s/records.log", dir.data) |
            bk_buf_printf(&wd, "%s/work", dir.data);
  const char **yn = bk_calloc(s->model.noutputs + 1, sizeof *yn);
  for (size_t i = 0; yn && i < s->model.noutputs; i++)
    yn[i] = s->model.outputs[i].name;
  bk_fingerprint_part_t part = {"study", s->digest_study};
  bk_records_opts_t ro = {.path = lp.data,
                          .tool = "brink " BK_VERSION,
                          .nparts = 1,
                          .parts = &part,
                          .nx = s->nvars,
                          .xnames = (const char *const *)s->var_names,
                          .ny = s->model.noutputs,
                          .ynames = yn,
                          .sync_interval = -1};
  bk_records_t *rec = NULL;
  bk_exec_t *ex = NULL;
  bk_dispatch_t *d = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  int exit_code = BK_EXIT_DONE;
  double *y = bk_calloc(s->model.noutputs + 1, sizeof *y);
  double *x = bk_calloc(s->nvars + 1, sizeof *x);
  bk_buf_t rd;
  bk_buf_init(&rd);
  if (oom || !yn || !y || !x) {
    fprintf(stderr, "brink: out of memory\n");
    exit_code = BK_EXIT_RUNTIME;
    goto out;
  }
  memcpy(x, med, s->nvars * sizeof *x);
  int rc = bk__cli_make_dirs(wd.data);
  if (rc == 0)
    rc = bk_records_open(&rec, &ro, &err);
  if (rc == 0)
    rc = bk_exec_local_new(&ex, 1);
  bk_dispatch_opts_t dop = {.study = &t,
                            .records = rec,
                            .exec = ex,
                            .work_dir = wd.data,
                            .host = "check"};
  if (rc == 0)
    rc = bk_dispatch_new(&d, &dop);
  double gc[BK_STUDY_MAX_MODES];
  for (size_t i = 0; i < BK_STUDY_MAX_MODES; i++)
    gc[i] = NAN;
  bk_point_t pt = {.index = 0,
                   .x = x,
                   .y = y,
                   .g = NAN,
                   .fault = 0,
                   .gc = s->nmodes ? gc : NULL};
  if (rc == 0) {
    bk_evaluator_t ev;
    bk_dispatch_evaluator(d, &ev);
    bk_stop_install();
    printf("\nTrying the model once at the medians\n");
    fflush(stdout);
    rc = ev.batch(&ev, "try", &pt, 1, &err);
  }
  char run[64];
  bk_dispatch_folder_name("try/0", run, sizeof run);
  if (rc == 0 && bk_buf_printf(&rd, "%s/%s", wd.data, run))
    rc = bk_error_set(&err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  if (rc) {
    if (err.msg[0])
      bk__cli_print_error(&err);
    else
      fprintf(stderr, "brink: cannot try the model: %s\n", bk_strerror(rc));
    exit_code = bk_error_exit(rc);
    goto out;
  }
  bk_record_t r;
  int found = bk_records_find(rec, "try/0", &r);
  printf("  run folder  %s\n", rd.data);
  for (size_t i = 0; i < s->model.ndecks; i++)
    printf("  deck        %s/%s (from %s)\n", rd.data, s->model.decks[i].to,
           s->model.decks[i].template_name);
  /* As run: the placeholders of the arguments rendered. */
  bk_template_ctx_t tctx = {.values = x,
                            .index = 0,
                            .key = "try/0",
                            .folder = rd.data,
                            .threads = s->run.threads,
                            .ranks = s->run.ranks};
  char **args = bk_study_render_argv(s, &tctx);
  printf("  command     ");
  for (size_t i = 0; i < s->model.argc; i++)
    printf("%s%s", i ? " " : "", args ? args[i] : s->model.argv[i]);
  printf("\n");
  bk_free(args);
  int ran = pt.fault == BK_FAULT_NONE || pt.fault >= BK_FAULT_NO_OUTPUT;
  if (ran)
    printf("  exit status 0 (%.3g s)\n", found ? r.seconds : NAN);
  else {
    printf("  failed      %s (%s)\n", found && r.reason ? r.reason : "",
           bk_fault_name(pt.fault));
  }
  if (ran) {
    printf("  outputs\n");
    for (size_t i = 0; i < s->model.noutputs; i++) {
      const bk_output_t *o = &s->model.outputs[i];
      bk_buf_t p;
      bk_buf_init(&p);
      bk_buf_printf(&p, "%s/%s", rd.data, o->from_stdout ? "stdout" : o->file);
      double v = NAN;
      char why[256] = "";
      int f =
          p.data ? bk_extract_file(o->re, p.data, o->match, &v, why, sizeof why)
                 : BK_ENOMEM;
      if (f == BK_FAULT_NONE)
        printf("    %-14s = %.10g   (from %s)\n", o->name, v,
               o->from_stdout ? "stdout" : o->file);
      else {
        printf("    %-14s NOT FOUND: %s (%s); pattern %s\n", o->name,
               f < 0 ? bk_strerror(f) : bk_fault_name(f), why, o->pattern);
        exit_code = BK_EXIT_RUNTIME;
        if (f == BK_FAULT_NO_MATCH)
          print_head(rd.data, o->from_stdout ? "stdout" : o->file, 8);
      }
      bk_buf_close(&p);
    }
  }
  int valued = pt.fault == BK_FAULT_NONE || pt.fault == BK_FAULT_NOT_A_NUMBER;
  for (size_t i = 0; valued && pt.gc && i < s->nmodes; i++)
    printf("  limit state %s = %.10g (%s)\n", s->modes[i].name, gc[i],
           gc[i] <= 0 ? "failed at the medians" : "safe at the medians");
  if (pt.fault == BK_FAULT_NONE)
    printf("  %s g = %.10g (%s)\n", s->nmodes ? "system" : "limit state", pt.g,
           pt.g <= 0 ? "failed at the medians" : "safe at the medians");
  else {
    exit_code = BK_EXIT_RUNTIME;
    if (ran && pt.fault == BK_FAULT_NOT_A_NUMBER)
      printf("  limit state: %s\n",
             found && r.reason ? r.reason : "not a number");
    print_tail(rd.data, "stderr", 12);
    if (!ran)
      print_tail(rd.data, "stdout", 12);
    printf("\nThe model did not work at the medians. Fix the command, the "
           "deck or the\npatterns above and try again; the run folder is "
           "kept for you to look at.\n");
  }
out:
  bk_dispatch_free(d);
  bk_exec_free(ex);
  bk_records_close(rec);
  bk_free(yn);
  bk_free(x);
  bk_free(y);
  bk_buf_close(&rd);
  bk_buf_close(&lp);
  bk_buf_close(&wd);
  bk_buf_close(&dir);
  return exit_code;
}

int bk__cmd_check(int argc, char **argv) {
  const char *path = NULL;
  int try_it = 0;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(check_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "--try") == 0)
      try_it = 1;
    else if (argv[i][0] == '-')
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
  if (!med) {
    fprintf(stderr, "brink: out of memory\n");
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
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
  double gc[BK_STUDY_MAX_MODES];
  if (s->nmodes) {
    printf("\nLimit states (failure when g <= 0)\n");
    for (size_t i = 0; i < s->nmodes; i++)
      printf("  %-14s g = %s\n", s->modes[i].name, s->modes[i].text);
    printf("  system: %s\n",
           s->system == BK_SYSTEM_SERIES     ? "series (fails when any fails)"
           : s->system == BK_SYSTEM_PARALLEL ? "parallel (fails when all fail)"
                                             : s->limit_state);
  } else {
    printf("\nLimit state (failure when g <= 0)\n  g = %s\n", s->limit_state);
  }
  if (!s->model.present) {
    double g = bk_study_g(s, med, gc);
    for (size_t i = 0; i < s->nmodes; i++)
      printf("  at the medians %s = %.6g (%s)\n", s->modes[i].name, gc[i],
             gc[i] <= 0 ? "failed" : "safe");
    printf("  at the medians %s = %.6g (%s)\n", s->nmodes ? "system g" : "g", g,
           g <= 0 ? "failed" : "safe");
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
      bk_template_ctx_t ctx = {.values = med,
                               .index = 0,
                               .key = "check/0",
                               .folder = "(run folder)",
                               .threads = s->run.threads,
                               .ranks = s->run.ranks};
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
  printf("\nMethod %s, seed %llu\n", bk_study_method_name(a->method),
         (unsigned long long)s->seed);
  if (a->method == BK_METHOD_LHS || a->method == BK_METHOD_SOBOL) {
    uint64_t per = a->samples / a->replicates;
    printf("  %u replicates of %llu points = %llu evaluations\n", a->replicates,
           (unsigned long long)per, (unsigned long long)(per * a->replicates));
    if (a->method == BK_METHOD_SOBOL && (per & (per - 1)) != 0)
      printf("  note: Sobol points are best balanced when each replicate is "
             "a power of two (e.g. %llu)\n",
             (unsigned long long)(1ull << (int)floor(log2((double)per))));
  } else if (a->method == BK_METHOD_FORM || a->method == BK_METHOD_IMPORTANCE) {
    const bk_form_opts_t *fo = &a->form;
    size_t nu = bk_transform_nu(s->transform);
    if (a->method == BK_METHOD_IMPORTANCE && a->importance.has_center)
      printf("  importance sampling centred at the given "
             "analysis.importance.center\n");
    else
      printf("  FORM (improved HL-RF): %s differences, step %g in u, "
             "tolerance %g,\n  at most %d iterations of %zu evaluations "
             "each%s\n",
             fo->central ? "central" : "forward", fo->step, fo->tolerance,
             fo->max_iterations, (fo->central ? 2 * nu : nu) + 1,
             fo->sorm && a->method == BK_METHOD_FORM
                 ? ", then a SORM curvature batch"
                 : "");
    if (a->method == BK_METHOD_IMPORTANCE)
      printf("  then importance sampling in batches of %llu, up to %llu "
             "evaluations in all\n",
             (unsigned long long)a->samples,
             (unsigned long long)a->max_evaluations);
  } else if (a->method == BK_METHOD_SUBSET) {
    /* Each level divides Pf by about 1/p0, so Pf ~ p0^k takes k levels of
     * `samples` each. */
    double n = (double)a->samples, p0 = a->subset.p0;
    printf("  %llu points per level (analysis.samples); each level divides "
           "Pf by about %g,\n  so Pf 1e-%d takes about %.0f levels = %.0f "
           "evaluations, Pf 1e-%d about %.0f;\n  at most %d levels and %llu "
           "evaluations\n",
           (unsigned long long)a->samples, 1 / p0, 4, ceil(4 / -log10(p0)),
           n * ceil(4 / -log10(p0)), 8, n * ceil(8 / -log10(p0)),
           a->subset.max_levels, (unsigned long long)a->max_evaluations);
  } else if (a->method == BK_METHOD_CROSS_ENTROPY) {
    printf("  %llu points per step (analysis.samples): up to %d adaptation "
           "steps,\n  then batches of %llu until the cov is reached; at most "
           "%llu evaluations\n",
           (unsigned long long)a->samples, a->cross_entropy.max_steps,
           (unsigned long long)a->samples,
           (unsigned long long)a->max_evaluations);
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
  printf("\nRun folder %s\n", s->run.folder);
  printf("  %d run%s at a time, %d core%s per run (%d thread%s x %d rank%s), "
         "%d core%s in all; each run started %s\n",
         s->run.slots, s->run.slots == 1 ? "" : "s", s->run.cores,
         s->run.cores == 1 ? "" : "s", s->run.threads,
         s->run.threads == 1 ? "" : "s", s->run.ranks,
         s->run.ranks == 1 ? "" : "s", s->run.slots * s->run.cores,
         s->run.slots * s->run.cores == 1 ? "" : "s",
         s->run.launch == BK_LAUNCH_SRUN ? "as a Slurm job step (srun)"
                                         : "directly");
  int here = bk_study_available_cores(s);
  if (s->run.slots * s->run.cores > here)
    printf("  (more than the %d core%s brink may use here: the runs will "
           "share them)\n",
           here, here == 1 ? "" : "s");
  int exit_code = BK_EXIT_DONE;
  if (try_it && s->model.present)
    exit_code = try_model(s, med);
  else if (try_it)
    printf("\nNo model section: the limit state at the medians above is "
           "what --try would show.\n");
  bk_free(med);
  bk_study_free(s);
  return exit_code;
}
