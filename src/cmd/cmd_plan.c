/*
 * `brink plan`: the evaluations and wall time each method needs to reach
 * the study's target_cov, from a failure probability and seconds per model
 * run given on the command line or taken from a pilot run in the study's
 * run folder (report.json for Pf, records.log for the mean seconds).
 * Writes nothing.
 *
 * SPDX-License-Identifier: MIT
 */
#include <errno.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "methods/plan.h"
#include "eval/records.h"
#include "reports/report.h"
#include "numerics/special.h"
#include "study/study.h"

static const char plan_help[] =
    "usage: brink plan STUDY.yaml [--pf P] [--seconds S] [--cov C]\n"
    "                  [--cores N | --slots N] [--json]\n"
    "\n"
    "Prints, for each method, the evaluations and the wall time needed to\n"
    "reach the coefficient of variation C (default: the study's target_cov,\n"
    "else 0.1) at failure probability P with S seconds per model run, N\n"
    "cores over the cores of one run (run.threads x run.ranks) at a time\n"
    "(default run.slots). Without --pf or --seconds the figures come\n"
    "from a pilot run in the study's run folder: Pf from report.json, the\n"
    "mean seconds per evaluation from records.log. The figures are\n"
    "estimates from each estimator's variance formula (see docs/methods.md),\n"
    "for choosing a method; writes nothing. A pilot run of lhs or sobol also\n"
    "scales that method's figure from the spread of its replicates.\n"
    "\n"
    "  --pf P        expected failure probability (0 < P < 1)\n"
    "  --seconds S   seconds per model run\n"
    "  --cov C       target coefficient of variation\n"
    "  --cores N     cores to run on (64 cores, 16 per run: 4 runs at once)\n"
    "  --slots N     concurrent model runs\n"
    "  --json        print JSON instead of a table\n";

/* What a pilot's report.json says: Pf, cov, evaluations and the method,
 * by a small scan for the top-level keys (the report is ours, one key per
 * line, top-level keys indented by two). NaN / "" when absent. */
typedef struct {
  double pf, cov, evaluations;
  char method[32];
} pilot_t;

static void pilot_read(const char *folder, pilot_t *pl) {
  pl->pf = pl->cov = pl->evaluations = NAN;
  pl->method[0] = '\0';
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/report.json", folder);
  FILE *f = p.data ? fopen(p.data, "r") : NULL;
  bk_buf_close(&p);
  if (!f)
    return;
  static const struct {
    const char *key;
    size_t off;
  } nums[] = {{"  \"pf\": ", offsetof(pilot_t, pf)},
              {"  \"cov\": ", offsetof(pilot_t, cov)},
              {"  \"evaluations\": ", offsetof(pilot_t, evaluations)}};
  char line[4096];
  while (fgets(line, sizeof line, f)) {
    for (size_t i = 0; i < sizeof nums / sizeof nums[0]; i++) {
      size_t kl = strlen(nums[i].key);
      if (strncmp(line, nums[i].key, kl) != 0)
        continue;
      char *end;
      double v = strtod(line + kl, &end);
      if (end != line + kl)
        *(double *)((char *)pl + nums[i].off) = v;
    }
    const char *mk = "  \"method\": \"";
    if (strncmp(line, mk, strlen(mk)) == 0) {
      const char *b = line + strlen(mk), *e = strchr(b, '"');
      if (e && (size_t)(e - b) < sizeof pl->method) {
        memcpy(pl->method, b, (size_t)(e - b));
        pl->method[e - b] = '\0';
      }
    }
  }
  fclose(f);
}

typedef struct {
  double sum;
  uint64_t n;
} seconds_t;

static int add_seconds(void *data, const bk_record_t *rec) {
  seconds_t *t = data;
  if (rec->fault == 0 && isfinite(rec->seconds)) {
    t->sum += rec->seconds;
    t->n++;
  }
  return 0;
}

/* The mean seconds of the successful evaluations in folder/records.log;
 * NaN when there is no log. *n receives their count. */
static double pilot_seconds(const char *folder, uint64_t *n) {
  bk_records_t *rec;
  bk_error_t err;
  bk_error_clear(&err);
  seconds_t t = {0, 0};
  if (bk_records_open_folder(&rec, folder, &err) == 0) {
    bk_records_scan(rec, add_seconds, &t);
    bk_records_close(rec);
  }
  *n = t.n;
  return t.n ? t.sum / (double)t.n : NAN;
}

static int want_number(const char *opt, const char *v, double *out) {
  char *end;
  errno = 0;
  double x = v ? strtod(v, &end) : NAN;
  if (!v || end == v || *end || errno || !(x > 0) || !isfinite(x)) {
    fprintf(stderr, "brink: plan: %s takes a positive number (e.g. %s 0.5)\n",
            opt, opt);
    return BK_EXIT_USAGE;
  }
  *out = x;
  return 0;
}

static void print_duration(double s) {
  if (!isfinite(s))
    printf("%12s", "n/a");
  else if (s < 120)
    printf("%11.0fs", s);
  else if (s < 7200)
    printf("%10.1f m", s / 60);
  else if (s < 3 * 86400)
    printf("%10.1f h", s / 3600);
  else
    printf("%10.1f d", s / 86400);
}

int bk__cmd_plan(int argc, char **argv) {
  const char *path = NULL;
  double pf = NAN, seconds = NAN, cov = NAN, slots = NAN, cores = NAN;
  int json = 0, rc;
  for (int i = 0; i < argc; i++) {
    const char *a = argv[i];
    if (bk__cli_is_help(a)) {
      fputs(plan_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(a, "--json") == 0) {
      json = 1;
    } else if (strcmp(a, "--pf") == 0 || strcmp(a, "--seconds") == 0 ||
               strcmp(a, "--cov") == 0 || strcmp(a, "--slots") == 0 ||
               strcmp(a, "--cores") == 0) {
      double *dst = a[2] == 'p'   ? &pf
                    : a[3] == 'e' ? &seconds
                    : a[4] == 'v' ? &cov
                    : a[3] == 'o' ? &cores
                                  : &slots;
      if ((rc = want_number(a, i + 1 < argc ? argv[i + 1] : NULL, dst)))
        return rc;
      i++;
    } else if (a[0] == '-') {
      return bk__cli_usage_error("plan: unknown option '%s'", a);
    } else if (path) {
      return bk__cli_usage_error(
          "plan: one study file at a time ('%s' is extra)", a);
    } else {
      path = a;
    }
  }
  if (!path)
    return bk__cli_usage_error("plan: %s", "give a study file, e.g. brink "
                                           "plan study.yaml --pf 1e-5");
  if (!isnan(pf) && !(pf < 1)) {
    fprintf(stderr, "brink: plan: --pf must lie between 0 and 1\n");
    return BK_EXIT_USAGE;
  }
  if (!isnan(slots) && !isnan(cores))
    return bk__cli_usage_error("plan: %s", "give --cores or --slots, not "
                                           "both");
  if ((!isnan(slots) && !(slots >= 1)) || (!isnan(cores) && !(cores >= 1))) {
    fprintf(stderr, "brink: plan: --cores and --slots take a number >= 1\n");
    return BK_EXIT_USAGE;
  }
  bk_study_t *s;
  if ((rc = bk__cli_load_study(path, &s)))
    return rc;
  /* Runs at a time: --slots, or --cores over the cores of one run, or
   * run.slots (given, or the cores brink may use over those of a run). */
  int per_run = s->run.cores > 0 ? s->run.cores : 1;
  if (!isnan(cores)) {
    double n = floor(cores / per_run);
    slots = n < 1 ? 1 : n;
  }
  int ncores = !isnan(cores)        ? (int)cores
               : !isnan(slots)      ? (int)slots * per_run
               : s->run.slots_given ? s->run.slots * per_run
                                    : bk_study_available_cores(s);
  const char *pf_from = "--pf", *sec_from = "--seconds";
  pilot_t pilot;
  pilot_read(s->run.folder, &pilot);
  if (isnan(pf)) {
    pf = pilot.pf;
    pf_from = "pilot report.json";
    if (!(pf > 0 && pf < 1)) {
      fprintf(stderr,
              "brink: plan: no failure probability: give --pf P, or run a "
              "pilot first (brink run with a small analysis.samples) so "
              "that %s/report.json has a Pf above 0\n",
              s->run.folder);
      bk_study_free(s);
      return BK_EXIT_USAGE;
    }
  }
  uint64_t nsec = 0;
  if (isnan(seconds)) {
    seconds = pilot_seconds(s->run.folder, &nsec);
    sec_from = nsec ? "pilot records.log" : "unknown (give --seconds)";
  }
  if (isnan(cov))
    cov = s->analysis.target_cov > 0 ? s->analysis.target_cov : 0.1;
  bk_plan_opts_t o = {
      .pf = pf,
      .cov = cov,
      .seconds = seconds,
      .slots = isnan(slots) ? s->run.slots : (int)slots,
      .nu = bk_transform_nu(s->transform),
      .central = s->analysis.form.central,
      .sorm = s->analysis.form.sorm,
      .explore = s->analysis.form.explore,
      .probe = s->analysis.form.probe,
      .p0 = s->analysis.subset.p0,
      .is_batch = s->analysis.method == BK_METHOD_IMPORTANCE
                      ? (double)s->analysis.samples
                      : 500,
      .ce_rho = s->analysis.cross_entropy.rho,
      .ce_batch = s->analysis.method == BK_METHOD_CROSS_ENTROPY
                      ? (double)s->analysis.samples
                      : 500,
      .pilot_method = pilot.method[0] ? pilot.method : NULL,
      .pilot_evaluations = pilot.evaluations,
      .pilot_cov = pilot.cov,
  };
  if (o.slots < 1)
    o.slots = 1;
  bk_plan_row_t rows[BK_PLAN_ROWS];
  bk_plan_compute(&o, rows);
  if (json) {
    bk_buf_t b;
    bk_buf_init(&b);
    bk_buf_puts(&b, "{\n  \"pf\": ");
    bk_report_json_number(&b, pf);
    bk_buf_puts(&b, ",\n  \"pf_from\": ");
    bk_report_json_string(&b, pf_from);
    bk_buf_puts(&b, ",\n  \"cov\": ");
    bk_report_json_number(&b, cov);
    bk_buf_puts(&b, ",\n  \"seconds_per_run\": ");
    bk_report_json_number(&b, seconds);
    bk_buf_puts(&b, ",\n  \"seconds_from\": ");
    bk_report_json_string(&b, sec_from);
    bk_buf_printf(&b,
                  ",\n  \"slots\": %d,\n  \"cores\": %d,\n  "
                  "\"cores_per_run\": %d,\n  \"random_variables\": %zu",
                  o.slots, ncores, per_run, o.nu);
    bk_buf_puts(&b, ",\n  \"methods\": [");
    for (int i = 0; i < BK_PLAN_ROWS; i++) {
      bk_buf_puts(&b, i ? ",\n    {\"method\": " : "\n    {\"method\": ");
      bk_report_json_string(&b, rows[i].method);
      bk_buf_puts(&b, ", \"evaluations\": ");
      bk_report_json_number(&b, rows[i].evaluations);
      bk_buf_puts(&b, ", \"wall_seconds\": ");
      bk_report_json_number(&b, rows[i].seconds);
      bk_buf_puts(&b, ", \"note\": ");
      bk_report_json_string(&b, rows[i].note);
      bk_buf_putc(&b, '}');
    }
    bk_buf_puts(&b, "\n  ]\n}\n");
    fputs(b.data, stdout);
    bk_buf_close(&b);
  } else {
    printf("Plan for %s: Pf %.3g (%s), target cov %g, ", s->name, pf, pf_from,
           cov);
    if (isfinite(seconds))
      printf("%.3g s per run (%s)\n", seconds, sec_from);
    else
      printf("seconds per run %s\n", sec_from);
    printf("%d core%s, %d per run: %d run%s at a time\n", ncores,
           ncores == 1 ? "" : "s", per_run, o.slots, o.slots == 1 ? "" : "s");
    printf("%zu random variables, beta %.2f\n\n", o.nu, -bk_norm_icdf(pf));
    printf("  %-14s %14s %12s  %s\n", "method", "evaluations", "wall time",
           "assumes");
    for (int i = 0; i < BK_PLAN_ROWS; i++) {
      printf("  %-14s %14.0f ", rows[i].method, rows[i].evaluations);
      print_duration(rows[i].seconds);
      printf("  %s\n", rows[i].note);
    }
    printf("\nWall time = evaluations x seconds per run / runs at a time "
           "(FORM: "
           "iterations run one\nbatch after another). Estimates for "
           "choosing a method, not promises.\n");
  }
  bk_study_free(s);
  return BK_EXIT_DONE;
}
