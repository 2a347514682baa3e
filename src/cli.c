/*
 * The brink command line: sub-commands, options, --help, progress display
 * and the exit codes of DESIGN.md section 3. Usage goes to stdout when asked
 * for and to stderr (exit 2) on misuse.
 *
 * SPDX-License-Identifier: MIT
 */
#include "cli.h"

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
#include "error.h"
#include "method.h"
#include "report.h"
#include "stop.h"
#include "study.h"

static const char usage_text[] =
    "usage: brink COMMAND [OPTIONS]\n"
    "\n"
    "Estimates the probability that a limit state is violated, by sampling\n"
    "the random inputs of a model described in a study file.\n"
    "\n"
    "commands:\n"
    "  run STUDY.yaml       run the study, or resume it where it stopped\n"
    "  check STUDY.yaml     validate the study and print its probabilistic "
    "model\n"
    "  report FOLDER|STUDY  print the result of a run (--json for JSON)\n"
    "  help [COMMAND]       show help for a command\n"
    "\n"
    "options:\n"
    "  -h, --help           show this help (or `brink COMMAND --help`)\n"
    "  --version            print the version\n"
    "\n"
    "exit codes: 0 done, 1 runtime error, 2 bad usage or study file,\n"
    "            3 stopped before the end (run the same command to resume)\n";

static const char run_help[] =
    "usage: brink run STUDY.yaml [--quiet]\n"
    "\n"
    "Runs the study's method and writes report.txt and report.json into the\n"
    "run folder (run.folder, default runs/NAME beside the study file), then\n"
    "prints the text report. Progress goes to stderr: a live line on a\n"
    "terminal, a plain line every 10 seconds otherwise.\n"
    "Ctrl-C (or SIGTERM, SIGUSR1) stops cleanly with exit code 3; running the\n"
    "same command again resumes and ends with the same numbers.\n"
    "\n"
    "  -q, --quiet   no progress display and no report on stdout\n";

static const char check_help[] =
    "usage: brink check STUDY.yaml\n"
    "\n"
    "Validates the study file (every error names file:line:col), then prints\n"
    "the variables with their moments, the correlations before and after the\n"
    "Nataf adjustment, the limit state evaluated at the medians, and the\n"
    "design the method will run. Writes nothing.\n";

static const char report_help[] =
    "usage: brink report FOLDER|STUDY.yaml [--json]\n"
    "\n"
    "Prints the result of a finished run: the text report, or with --json\n"
    "the JSON summary (keys: pf, beta, cov, ci, ci_level, ci_method,\n"
    "evaluations, failures, model_errors, excluded, pf_bounds, method, seed\n"
    "and more).\n";

static int usage_error(const char *fmt, const char *arg) {
  fprintf(stderr, "brink: ");
  fprintf(stderr, fmt, arg);
  fprintf(stderr, "\n(see `brink --help`)\n");
  return BK_EXIT_USAGE;
}

static int is_help(const char *a) {
  return strcmp(a, "-h") == 0 || strcmp(a, "--help") == 0;
}

static void print_error(const bk_error_t *err) {
  fputs("brink: ", stderr);
  bk_error_print(err, stderr);
}

/* Creates `path` and its missing parents. */
static int make_dirs(const char *path) {
  char *p = bk_strdup(path);
  if (!p)
    return BK_ENOMEM;
  int rc = 0;
  for (char *q = p + 1; *q; q++) {
    if (*q != '/')
      continue;
    *q = '\0';
    if (mkdir(p, 0777) != 0 && errno != EEXIST) {
      rc = -errno;
      break;
    }
    *q = '/';
  }
  if (rc == 0 && mkdir(p, 0777) != 0 && errno != EEXIST)
    rc = -errno;
  bk_free(p);
  return rc;
}

/* Writes `data` to folder/name through a temporary file and a rename, so a
 * reader never sees half a file. */
static int write_atomic(const char *folder, const char *name,
                        const bk_buf_t *data, bk_error_t *err) {
  bk_buf_t tmp, dst;
  bk_buf_init(&tmp);
  bk_buf_init(&dst);
  bk_buf_printf(&tmp, "%s/.%s.tmp", folder, name);
  bk_buf_printf(&dst, "%s/%s", folder, name);
  int rc = 0;
  int fd = open(tmp.data, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0666);
  if (fd < 0) {
    rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                      strerror(errno));
    goto out;
  }
  size_t off = 0;
  while (off < data->len) {
    ssize_t w = write(fd, data->data + off, data->len - off);
    if (w < 0 && errno == EINTR)
      continue;
    if (w < 0) {
      rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                        strerror(errno));
      close(fd);
      unlink(tmp.data);
      goto out;
    }
    off += (size_t)w;
  }
  if (fsync(fd) != 0 || close(fd) != 0) {
    rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                      strerror(errno));
    unlink(tmp.data);
    goto out;
  }
  if (rename(tmp.data, dst.data) != 0) {
    rc = bk_error_set(err, -errno, dst.data, 0, 0, "cannot write: %s",
                      strerror(errno));
    unlink(tmp.data);
  }
out:
  bk_buf_close(&tmp);
  bk_buf_close(&dst);
  return rc;
}

/* ---- progress ------------------------------------------------------- */

typedef struct {
  int tty;
  int quiet;
  double start;
  double last;
  int shown;
} progress_t;

static double now_seconds(void) {
  struct timespec ts;
  clock_gettime(CLOCK_MONOTONIC, &ts);
  return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void format_rate(char *b, size_t n, double rate) {
  if (rate >= 1e6)
    snprintf(b, n, "%.1f M/s", rate / 1e6);
  else if (rate >= 1e3)
    snprintf(b, n, "%.1f k/s", rate / 1e3);
  else
    snprintf(b, n, "%.1f /s", rate);
}

static void format_eta(char *b, size_t n, double s) {
  if (!isfinite(s) || s < 0)
    snprintf(b, n, "-");
  else if (s < 60)
    snprintf(b, n, "%.0fs", s);
  else if (s < 3600)
    snprintf(b, n, "%.0fm%02.0fs", floor(s / 60), fmod(s, 60));
  else
    snprintf(b, n, "%.0fh%02.0fm", floor(s / 3600), fmod(s / 60, 60));
}

static void on_progress(void *data, const bk_result_t *r, uint64_t planned) {
  progress_t *p = data;
  if (p->quiet)
    return;
  double t = now_seconds();
  int final = r->evaluations >= planned;
  if (!final && t - p->last < (p->tty ? 0.1 : 10.0))
    return;
  p->last = t;
  double el = t - p->start;
  double rate = el > 0 ? (double)r->evaluations / el : 0;
  char rb[32], eb[32];
  format_rate(rb, sizeof rb, rate);
  format_eta(eb, sizeof eb,
             rate > 0 ? (double)(planned - r->evaluations) / rate : NAN);
  char cov[32];
  if (isfinite(r->est.cov))
    snprintf(cov, sizeof cov, "%.3f", r->est.cov);
  else
    snprintf(cov, sizeof cov, "-");
  fprintf(stderr,
          "%s%llu/%llu evaluations  %llu failures  %llu errors  Pf %.3e  "
          "cov %s  %s  ETA %s%s",
          p->tty ? "\r\033[K" : "", (unsigned long long)r->evaluations,
          (unsigned long long)planned, (unsigned long long)r->est.failures,
          (unsigned long long)r->model_errors, r->est.pf, cov, rb, eb,
          p->tty ? "" : "\n");
  fflush(stderr);
  p->shown = 1;
}

/* ---- commands ------------------------------------------------------- */

static int load_or_exit(const char *path, bk_study_t **s) {
  bk_error_t err;
  bk_error_clear(&err);
  if (bk_study_load(path, s, &err)) {
    print_error(&err);
    return err.code == BK_ENOMEM ? BK_EXIT_RUNTIME : BK_EXIT_USAGE;
  }
  return 0;
}

static int cmd_run(int argc, char **argv) {
  const char *path = NULL;
  int quiet = 0;
  for (int i = 0; i < argc; i++) {
    if (is_help(argv[i])) {
      fputs(run_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "-q") == 0 || strcmp(argv[i], "--quiet") == 0)
      quiet = 1;
    else if (argv[i][0] == '-')
      return usage_error("run: unknown option '%s'", argv[i]);
    else if (path)
      return usage_error("run: one study file at a time ('%s' is extra)",
                         argv[i]);
    else
      path = argv[i];
  }
  if (!path)
    return usage_error("run: %s", "give a study file, e.g. brink run "
                                  "study.yaml");
  bk_study_t *s;
  int rc = load_or_exit(path, &s);
  if (rc)
    return rc;
  if (s->model.present) {
    fprintf(stderr, "brink: %s: studies with a model section are not "
                    "supported by this version yet\n",
            path);
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  bk_error_t err;
  bk_error_clear(&err);
  int mrc = make_dirs(s->run.folder);
  if (mrc) {
    fprintf(stderr, "brink: cannot create the run folder %s: %s\n",
            s->run.folder, bk_strerror(mrc));
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  bk_stop_install();
  progress_t pr = {isatty(2), quiet, now_seconds(), 0, 0};
  bk_method_opts_t opts = {on_progress, &pr};
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  bk_result_t res;
  double t0 = now_seconds();
  rc = bk_method_run(s, &ev, &opts, &res, &err);
  res.seconds = now_seconds() - t0;
  if (pr.shown && pr.tty)
    fputc('\n', stderr);
  int exit_code = BK_EXIT_DONE;
  if (rc == BK_ESTOPPED) {
    fprintf(stderr,
            "brink: stopped after %llu evaluations; run `brink run %s` again "
            "to resume\n",
            (unsigned long long)res.evaluations, path);
    exit_code = BK_EXIT_STOPPED;
  } else if (rc) {
    print_error(&err);
    exit_code = BK_EXIT_RUNTIME;
  } else {
    bk_buf_t text, json;
    bk_buf_init(&text);
    bk_buf_init(&json);
    bk_report_text(s, &res, &text);
    bk_report_json(s, &res, &json);
    if (write_atomic(s->run.folder, "report.json", &json, &err) ||
        write_atomic(s->run.folder, "report.txt", &text, &err)) {
      print_error(&err);
      exit_code = BK_EXIT_RUNTIME;
    } else if (!quiet) {
      fputs(text.data, stdout);
      printf("\nReport written to %s/report.txt and report.json\n",
             s->run.folder);
    }
    bk_buf_close(&text);
    bk_buf_close(&json);
  }
  bk_result_close(&res);
  bk_study_free(s);
  return exit_code;
}

static int cmd_check(int argc, char **argv) {
  const char *path = NULL;
  for (int i = 0; i < argc; i++) {
    if (is_help(argv[i])) {
      fputs(check_help, stdout);
      return BK_EXIT_DONE;
    } else if (argv[i][0] == '-')
      return usage_error("check: unknown option '%s'", argv[i]);
    else if (path)
      return usage_error("check: one study file at a time ('%s' is extra)",
                         argv[i]);
    else
      path = argv[i];
  }
  if (!path)
    return usage_error("check: %s", "give a study file, e.g. brink check "
                                    "study.yaml");
  bk_study_t *s;
  int rc = load_or_exit(path, &s);
  if (rc)
    return rc;
  printf("Study %s (%s): valid\n\n", s->name, path);
  printf("Variables (%zu, of which %zu random)\n", s->nvars,
         bk_transform_nu(s->transform));
  printf("  %-14s %-17s %14s %14s %14s\n", "name", "distribution", "mean",
         "sd", "median");
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
    printf("  at the medians g = %.6g (%s)\n", g,
           g <= 0 ? "failed" : "safe");
  }
  const bk_analysis_t *a = &s->analysis;
  printf("\nMethod %s, seed %llu\n", bk_method_name(a->method),
         (unsigned long long)s->seed);
  if (a->method == BK_METHOD_LHS || a->method == BK_METHOD_SOBOL) {
    uint64_t per = a->samples / a->replicates;
    printf("  %u replicates of %llu points = %llu evaluations\n",
           a->replicates, (unsigned long long)per,
           (unsigned long long)(per * a->replicates));
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

static int is_regular_file(const char *p) {
  struct stat st;
  return stat(p, &st) == 0 && S_ISREG(st.st_mode);
}

static int cmd_report(int argc, char **argv) {
  const char *target = NULL;
  int json = 0;
  for (int i = 0; i < argc; i++) {
    if (is_help(argv[i])) {
      fputs(report_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "--json") == 0)
      json = 1;
    else if (argv[i][0] == '-')
      return usage_error("report: unknown option '%s'", argv[i]);
    else if (target)
      return usage_error("report: one folder at a time ('%s' is extra)",
                         argv[i]);
    else
      target = argv[i];
  }
  if (!target)
    return usage_error("report: %s", "give the run folder or the study "
                                     "file, e.g. brink report runs/NAME");
  char *folder = NULL;
  if (is_regular_file(target)) {
    bk_study_t *s;
    int rc = load_or_exit(target, &s);
    if (rc)
      return rc;
    folder = bk_strdup(s->run.folder);
    bk_study_free(s);
  } else {
    folder = bk_strdup(target);
  }
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/%s", folder, json ? "report.json" : "report.txt");
  FILE *f = fopen(p.data, "r");
  if (!f) {
    fprintf(stderr,
            "brink: no finished result in %s (%s); run `brink run "
            "STUDY.yaml` first\n",
            folder, strerror(errno));
    bk_buf_close(&p);
    bk_free(folder);
    return BK_EXIT_USAGE;
  }
  char chunk[8192];
  size_t n;
  while ((n = fread(chunk, 1, sizeof chunk, f)) > 0)
    fwrite(chunk, 1, n, stdout);
  fclose(f);
  bk_buf_close(&p);
  bk_free(folder);
  return BK_EXIT_DONE;
}

int bk_cli_main(int argc, char **argv) {
  char *help_argv[3];
  if (argc < 2) {
    fputs(usage_text, stderr);
    return BK_EXIT_USAGE;
  }
  const char *cmd = argv[1];
  if (is_help(cmd)) {
    fputs(usage_text, stdout);
    return BK_EXIT_DONE;
  }
  if (strcmp(cmd, "--version") == 0) {
    printf("brink %s\n", BK_VERSION);
    return BK_EXIT_DONE;
  }
  if (strcmp(cmd, "help") == 0) {
    if (argc < 3) {
      fputs(usage_text, stdout);
      return BK_EXIT_DONE;
    }
    help_argv[0] = argv[0];
    help_argv[1] = argv[2];
    help_argv[2] = "--help";
    cmd = argv[2];
    argc = 3;
    argv = help_argv;
  }
  if (strcmp(cmd, "run") == 0)
    return cmd_run(argc - 2, argv + 2);
  if (strcmp(cmd, "check") == 0)
    return cmd_check(argc - 2, argv + 2);
  if (strcmp(cmd, "report") == 0)
    return cmd_report(argc - 2, argv + 2);
  return usage_error("unknown command '%s'", cmd);
}
