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
#include "dispatch.h"
#include "error.h"
#include "exec.h"
#include "method.h"
#include "records.h"
#include "report.h"
#include "stop.h"
#include "study.h"
#include "template.h"

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
  /* The latest estimate, from the method's decision points. */
  double pf;
  double cov;
  uint64_t failures;
  uint64_t planned;
  uint64_t evaluations;
  uint64_t errors;
  /* From the dispatcher, for studies with a model. */
  const bk_dispatch_stats_t *dst;
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

static void show_progress(progress_t *p, int final) {
  if (p->quiet)
    return;
  double t = now_seconds();
  if (!final && t - p->last < (p->tty ? 0.1 : 10.0))
    return;
  p->last = t;
  double el = t - p->start;
  uint64_t done = p->evaluations;
  uint64_t fresh = done;
  int running = 0;
  if (p->dst) {
    uint64_t d2 = p->dst->replayed + p->dst->completed;
    if (d2 > done)
      done = d2;
    fresh = p->dst->completed;
    running = p->dst->running;
  }
  double rate = el > 0 ? (double)fresh / el : 0;
  char rb[32], eb[32], cov[32], run[32] = "";
  format_rate(rb, sizeof rb, rate);
  format_eta(eb, sizeof eb,
             rate > 0 && p->planned > done
                 ? (double)(p->planned - done) / rate
                 : (p->planned <= done ? 0 : NAN));
  if (isfinite(p->cov))
    snprintf(cov, sizeof cov, "%.3f", p->cov);
  else
    snprintf(cov, sizeof cov, "-");
  if (p->dst)
    snprintf(run, sizeof run, "  %d running", running);
  uint64_t errors = p->dst ? p->dst->errors : p->errors;
  fprintf(stderr,
          "%s%llu/%llu done%s  %llu failures  %llu errors  Pf %.3e  cov %s  "
          "%s  ETA %s%s",
          p->tty ? "\r\033[K" : "", (unsigned long long)done,
          (unsigned long long)p->planned, run,
          (unsigned long long)p->failures, (unsigned long long)errors, p->pf,
          cov, rb, eb, p->tty ? "" : "\n");
  fflush(stderr);
  p->shown = 1;
}

static void on_progress(void *data, const bk_result_t *r, uint64_t planned) {
  progress_t *p = data;
  p->pf = r->est.pf;
  p->cov = r->est.cov;
  p->failures = r->est.failures;
  p->planned = planned;
  p->evaluations = r->evaluations;
  p->errors = r->model_errors;
  show_progress(p, r->evaluations >= planned);
}

static void on_tick(void *data, const bk_dispatch_stats_t *st) {
  progress_t *p = data;
  p->dst = st;
  show_progress(p, 0);
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

static uint64_t planned_evaluations(const bk_study_t *s) {
  const bk_analysis_t *a = &s->analysis;
  if (a->method == BK_METHOD_LHS || a->method == BK_METHOD_SOBOL)
    return (a->samples / a->replicates) * a->replicates;
  uint64_t n = a->samples ? a->samples : a->max_evaluations;
  return n < a->max_evaluations ? n : a->max_evaluations;
}

/* What a run with an external model holds open. */
typedef struct {
  bk_records_t *records;
  bk_exec_t *exec;
  bk_dispatch_t *dispatch;
  char *work_dir;
  char host[256];
} model_run_t;

static int model_run_close(model_run_t *m, bk_error_t *err) {
  int rc = 0;
  bk_dispatch_free(m->dispatch);
  bk_exec_free(m->exec);
  if (m->records && (rc = bk_records_close(m->records)) != 0)
    bk_error_set(err, rc, NULL, 0, 0, "cannot close the records: %s",
                 bk_strerror(rc));
  bk_free(m->work_dir);
  memset(m, 0, sizeof *m);
  return rc;
}

/* Opens the records (resuming), the executor and the dispatcher. Returns 0
 * or an exit code, having printed why. */
static int model_run_open(const bk_study_t *s, model_run_t *m,
                          progress_t *pr, int quiet) {
  bk_error_t err;
  bk_error_clear(&err);
  size_t nparts = 3 + s->model.ndecks;
  bk_fingerprint_part_t *parts = bk_calloc(nparts, sizeof *parts);
  char **names = bk_calloc(nparts, sizeof *names);
  if (!parts || !names) {
    bk_free(parts);
    bk_free(names);
    fprintf(stderr, "brink: out of memory\n");
    return BK_EXIT_RUNTIME;
  }
  parts[0] = (bk_fingerprint_part_t){"study", s->digest_study};
  parts[1] = (bk_fingerprint_part_t){"model", s->digest_model};
  parts[2] = (bk_fingerprint_part_t){"tool", "brink-" BK_VERSION};
  for (size_t i = 0; i < s->model.ndecks; i++) {
    bk_buf_t b;
    bk_buf_init(&b);
    bk_buf_printf(&b, "template %s", s->model.decks[i].template_name);
    names[3 + i] = b.data;
    parts[3 + i] = (bk_fingerprint_part_t){b.data, s->model.decks[i].digest};
  }
  const char **ynames = bk_calloc(s->model.noutputs + 1, sizeof *ynames);
  for (size_t i = 0; ynames && i < s->model.noutputs; i++)
    ynames[i] = s->model.outputs[i].name;
  bk_buf_t lp;
  bk_buf_init(&lp);
  bk_buf_printf(&lp, "%s/records.log", s->run.folder);
  bk_records_opts_t ro = {
      .path = lp.data,
      .tool = "brink " BK_VERSION,
      .nparts = nparts,
      .parts = parts,
      .nx = s->nvars,
      .xnames = (const char *const *)s->var_names,
      .ny = s->model.noutputs,
      .ynames = ynames,
  };
  int rc = bk_records_open(&m->records, &ro, &err);
  for (size_t i = 3; i < nparts; i++)
    bk_free(names[i]);
  bk_free(names);
  bk_free(parts);
  bk_free(ynames);
  if (rc) {
    print_error(&err);
    bk_buf_close(&lp);
    return rc == BK_EMISMATCH ? BK_EXIT_USAGE : BK_EXIT_RUNTIME;
  }
  size_t dropped = bk_records_dropped(m->records);
  if (dropped)
    fprintf(stderr,
            "brink: warning: dropped a torn last line (%zu bytes) from %s, "
            "left by an interrupted write; that evaluation will run again\n",
            dropped, lp.data);
  size_t count = bk_records_count(m->records);
  if (count && !quiet)
    fprintf(stderr, "brink: resuming: %zu evaluations already recorded in "
                    "%s\n",
            count, lp.data);
  bk_buf_close(&lp);
  /* Run folders are named by absolute paths, so that _folder and
   * BRINK_FOLDER mean the same from inside the model's working folder. */
  char *abs_folder = realpath(s->run.folder, NULL);
  bk_buf_t wd;
  bk_buf_init(&wd);
  if (s->run.scratch[0])
    bk_buf_printf(&wd, "%s/brink-%s-%ld", s->run.scratch, s->name,
                  (long)getpid());
  else
    bk_buf_printf(&wd, "%s/work", abs_folder ? abs_folder : s->run.folder);
  free(abs_folder);
  m->work_dir = wd.data;
  int mrc = make_dirs(m->work_dir);
  if (mrc) {
    fprintf(stderr, "brink: cannot create %s: %s\n", m->work_dir,
            bk_strerror(mrc));
    model_run_close(m, &err);
    return BK_EXIT_RUNTIME;
  }
  if (gethostname(m->host, sizeof m->host) != 0)
    snprintf(m->host, sizeof m->host, "localhost");
  m->host[sizeof m->host - 1] = '\0';
  if ((rc = bk_exec_local_new(&m->exec, s->run.slots)) != 0) {
    fprintf(stderr, "brink: cannot start the executor: %s\n",
            bk_strerror(rc));
    model_run_close(m, &err);
    return BK_EXIT_RUNTIME;
  }
  bk_dispatch_opts_t dop = {
      .study = s,
      .records = m->records,
      .exec = m->exec,
      .work_dir = m->work_dir,
      .host = m->host,
      .tick = on_tick,
      .tick_data = pr,
  };
  if ((rc = bk_dispatch_new(&m->dispatch, &dop)) != 0) {
    fprintf(stderr, "brink: out of memory\n");
    model_run_close(m, &err);
    return BK_EXIT_RUNTIME;
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
  bk_error_t err;
  bk_error_clear(&err);
  int mrc = make_dirs(s->run.folder);
  if (mrc) {
    fprintf(stderr, "brink: cannot create the run folder %s: %s\n",
            s->run.folder, bk_strerror(mrc));
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  progress_t pr;
  memset(&pr, 0, sizeof pr);
  pr.tty = isatty(2);
  pr.quiet = quiet;
  pr.start = now_seconds();
  pr.planned = planned_evaluations(s);
  pr.pf = NAN;
  pr.cov = NAN;
  bk_method_opts_t opts = {on_progress, &pr};
  bk_evaluator_t ev;
  model_run_t mr;
  memset(&mr, 0, sizeof mr);
  if (s->model.present) {
    rc = model_run_open(s, &mr, &pr, quiet);
    if (rc) {
      bk_study_free(s);
      return rc;
    }
    bk_dispatch_evaluator(mr.dispatch, &ev);
  } else {
    bk_evaluator_inprocess(&ev, s);
  }
  bk_stop_install();
  bk_result_t res;
  double t0 = now_seconds();
  rc = bk_method_run(s, &ev, &opts, &res, &err);
  res.seconds = now_seconds() - t0;
  if (pr.shown && pr.tty)
    fputc('\n', stderr);
  int exit_code = BK_EXIT_DONE;
  uint64_t recorded = mr.records ? bk_records_count(mr.records) : 0;
  int crc = model_run_close(&mr, &err);
  if (rc == 0 && crc)
    rc = crc;
  if (rc == BK_ESTOPPED) {
    if (s->model.present)
      fprintf(stderr,
              "brink: stopped; %llu evaluations are recorded in %s/records.log."
              " Run `brink run %s` again to resume\n",
              (unsigned long long)recorded, s->run.folder, path);
    else
      fprintf(stderr,
              "brink: stopped after %llu evaluations; run `brink run %s` "
              "again to resume\n",
              (unsigned long long)res.evaluations, path);
    exit_code = BK_EXIT_STOPPED;
  } else if (rc == BK_ENOSPACE || rc == -ENOSPC || rc == BK_EIO ||
             rc == -EIO) {
    print_error(&err);
    fprintf(stderr,
            "brink: stopped; the records written so far are intact. Free "
            "space and run `brink run %s` again to resume\n",
            path);
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
      exit_code = BK_EXIT_STOPPED;
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
      printf("  output    %s from %s, pattern %s (%s match)\n",
             m->outputs[i].name,
             m->outputs[i].from_stdout ? "stdout" : m->outputs[i].file,
             m->outputs[i].pattern,
             (const char *[]){"first", "last", "max",
                              "min"}[m->outputs[i].match]);
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
