/*
 * `brink run`: loads the study, opens the records (resuming) and the
 * executor for studies with a model, runs the method with a progress
 * display, and writes the reports.
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
#include "dispatch.h"
#include "exec.h"
#include "method.h"
#include "records.h"
#include "report.h"
#include "stop.h"
#include "study.h"

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
  char rb[32], eb[32], cov[32], pf[32], run[32] = "";
  if (isfinite(p->pf))
    snprintf(pf, sizeof pf, "%.3e", p->pf);
  else
    snprintf(pf, sizeof pf, "-");
  format_rate(rb, sizeof rb, rate);
  format_eta(eb, sizeof eb,
             rate > 0 && p->planned > done ? (double)(p->planned - done) / rate
                                           : (p->planned <= done ? 0 : NAN));
  if (isfinite(p->cov))
    snprintf(cov, sizeof cov, "%.3f", p->cov);
  else
    snprintf(cov, sizeof cov, "-");
  if (p->dst)
    snprintf(run, sizeof run, "  %d running", running);
  uint64_t errors = p->dst ? p->dst->errors : p->errors;
  fprintf(stderr,
          "%s%llu/%llu done%s  %llu failures  %llu errors  Pf %s  cov %s  "
          "%s  ETA %s%s",
          p->tty ? "\r\033[K" : "", (unsigned long long)done,
          (unsigned long long)p->planned, run, (unsigned long long)p->failures,
          (unsigned long long)errors, pf, cov, rb, eb, p->tty ? "" : "\n");
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
static int model_run_open(const bk_study_t *s, model_run_t *m, progress_t *pr,
                          int quiet) {
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
    bk__cli_print_error(&err);
    bk_buf_close(&lp);
    /* Records of another study, damaged records and a folder that cannot
     * be written are bad input: exit 2, nothing written. */
    return rc == BK_EMISMATCH || rc == BK_ECORRUPT || rc == -EACCES ||
                   rc == -EROFS || rc == -EPERM || rc == -ENOTDIR
               ? BK_EXIT_USAGE
               : BK_EXIT_RUNTIME;
  }
  size_t dropped = bk_records_dropped(m->records);
  if (dropped)
    fprintf(stderr,
            "brink: warning: dropped a torn last line (%zu bytes) from %s, "
            "left by an interrupted write; that evaluation will run again\n",
            dropped, lp.data);
  size_t count = bk_records_count(m->records);
  if (count && !quiet)
    fprintf(stderr,
            "brink: resuming: %zu evaluations already recorded in "
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
  int mrc = bk__cli_make_dirs(m->work_dir);
  if (mrc) {
    fprintf(stderr, "brink: cannot create %s: %s\n", m->work_dir,
            bk_strerror(mrc));
    model_run_close(m, &err);
    return BK_EXIT_RUNTIME;
  }
  /* Models left running by a brink killed with kill -9 on this folder. */
  if (!s->run.scratch[0])
    bk_dispatch_reap(m->work_dir);
  if (gethostname(m->host, sizeof m->host) != 0)
    snprintf(m->host, sizeof m->host, "localhost");
  m->host[sizeof m->host - 1] = '\0';
  if ((rc = bk_exec_local_new(&m->exec, s->run.slots)) != 0) {
    fprintf(stderr, "brink: cannot start the executor: %s\n", bk_strerror(rc));
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

int bk__cmd_run(int argc, char **argv) {
  const char *path = NULL;
  int quiet = 0;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(run_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "-q") == 0 || strcmp(argv[i], "--quiet") == 0)
      quiet = 1;
    else if (argv[i][0] == '-')
      return bk__cli_usage_error("run: unknown option '%s'", argv[i]);
    else if (path)
      return bk__cli_usage_error(
          "run: one study file at a time ('%s' is extra)", argv[i]);
    else
      path = argv[i];
  }
  if (!path)
    return bk__cli_usage_error("run: %s", "give a study file, e.g. brink run "
                                          "study.yaml");
  bk_study_t *s;
  int rc = bk__cli_load_study(path, &s);
  if (rc)
    return rc;
  bk_error_t err;
  bk_error_clear(&err);
  int mrc = bk__cli_make_dirs(s->run.folder);
  if (mrc) {
    fprintf(stderr, "brink: cannot create the run folder %s: %s\n",
            s->run.folder, bk_strerror(mrc));
    bk_study_free(s);
    return mrc == BK_ENOMEM || mrc == -ENOSPC ? BK_EXIT_RUNTIME
                                              : BK_EXIT_USAGE;
  }
  struct stat fst;
  if (stat(s->run.folder, &fst) == 0 && !S_ISDIR(fst.st_mode))
    errno = ENOTDIR;
  else if (access(s->run.folder, W_OK | X_OK) == 0)
    errno = 0;
  if (errno) {
    fprintf(stderr, "brink: cannot write in the run folder %s: %s\n",
            s->run.folder, strerror(errno));
    bk_study_free(s);
    return BK_EXIT_USAGE;
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
  } else if (rc == BK_ENOSPACE || rc == -ENOSPC || rc == BK_EIO || rc == -EIO) {
    bk__cli_print_error(&err);
    fprintf(stderr,
            "brink: stopped; the records written so far are intact. Free "
            "space and run `brink run %s` again to resume\n",
            path);
    exit_code = BK_EXIT_STOPPED;
  } else if (rc) {
    bk__cli_print_error(&err);
    exit_code = BK_EXIT_RUNTIME;
  } else {
    bk_buf_t text, json;
    bk_buf_init(&text);
    bk_buf_init(&json);
    bk_report_text(s, &res, &text);
    bk_report_json(s, &res, &json);
    if (bk__cli_write_atomic(s->run.folder, "report.json", &json, &err) ||
        bk__cli_write_atomic(s->run.folder, "report.txt", &text, &err)) {
      bk__cli_print_error(&err);
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
