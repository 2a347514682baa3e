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

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "eval/dispatch.h"
#include "eval/exec.h"
#include "eval/mpi_comm.h"
#include "eval/mpi_coord.h"
#include "eval/mpi_worker.h"
#include "methods/method.h"
#include "eval/records.h"
#include "reports/report.h"
#include "eval/shard.h"
#include "base/stop.h"
#include "study/study.h"

static const char run_help[] =
    "usage: brink run STUDY.yaml [--quiet] [--mpi | --shard I/N]\n"
    "\n"
    "Runs the study's method and writes report.txt and report.json into the\n"
    "run folder (run.folder, default runs/NAME beside the study file), then\n"
    "prints the text report. Progress goes to stderr: a live line on a\n"
    "terminal, a plain line every 10 seconds otherwise.\n"
    "Ctrl-C (or SIGTERM, SIGUSR1) stops cleanly with exit code 3; running the\n"
    "same command again resumes and ends with the same numbers.\n"
    "\n"
    "  -q, --quiet    no progress display and no report on stdout\n"
    "  --mpi          under mpirun or srun: rank 0 coordinates and keeps the\n"
    "                 records, the other ranks run run.slots models each\n"
    "                 (by default the rank's cores over the cores per run)\n"
    "  --shard I/N    evaluate shard I of N (0 <= I < N) of a random, lhs or\n"
    "                 sobol study into records-shard-I-of-N.log, for job\n"
    "                 arrays; `brink merge` then makes the report\n"
    "See docs/cluster.md.\n";

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
  bk_mpi_coord_t *coord;
  char *work_dir;
  char host[256];
} model_run_t;

static int model_run_close(model_run_t *m, bk_error_t *err) {
  int rc = 0;
  bk_dispatch_free(m->dispatch);
  bk_exec_free(m->exec);
  bk_mpi_coord_free(m->coord);
  if (m->records && (rc = bk_records_close(m->records)) != 0)
    bk_error_set(err, rc, NULL, 0, 0, "cannot close the records: %s",
                 bk_strerror(rc));
  bk_free(m->work_dir);
  memset(m, 0, sizeof *m);
  return rc;
}

/* How this process takes part in the run. */
typedef struct {
  int mpi;          /* rank 0 of an MPI run with workers */
  int under_mpi;    /* brink run --mpi, whatever the number of ranks */
  bk_shard_t shard; /* count 0 = not sharded */
} run_mode_t;

/* Opens the records (resuming), then the executor and the dispatcher, or
 * in the MPI mode the coordinator. Returns 0 or an exit code, having
 * printed why. */
static int model_run_open(const bk_study_t *s, model_run_t *m, progress_t *pr,
                          int quiet, const run_mode_t *mode) {
  bk_error_t err;
  bk_error_clear(&err);
  bk_study_ident_t id;
  if (bk_study_ident_init(&id, s)) {
    fprintf(stderr, "brink: out of memory\n");
    return BK_EXIT_RUNTIME;
  }
  char logname[96] = "records.log";
  if (mode->shard.count)
    bk_shard_log_name(&mode->shard, logname, sizeof logname);
  bk_buf_t lp;
  bk_buf_init(&lp);
  bk_buf_printf(&lp, "%s/%s", s->run.folder, logname);
  bk_records_opts_t ro;
  bk_study_ident_opts(&id, s, lp.data, &ro);
  int rc = bk_records_open(&m->records, &ro, &err);
  bk_study_ident_close(&id);
  if (rc) {
    bk__cli_print_error(&err);
    bk_buf_close(&lp);
    if (bk_error_exit(rc) == BK_EXIT_STOPPED)
      fprintf(stderr, "brink: free space and run the same command again\n");
    return bk_error_exit(rc);
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
  if (gethostname(m->host, sizeof m->host) != 0)
    snprintf(m->host, sizeof m->host, "localhost");
  m->host[sizeof m->host - 1] = '\0';
  if (mode->mpi) {
    /* The workers run the models; the coordinator only records. */
    bk_mpi_coord_opts_t co = {s, m->records, on_tick, pr};
    rc = bk_mpi_coord_new(&m->coord, &co, &err);
    if (rc) {
      if (rc != BK_ESTOPPED)
        bk__cli_print_error(&err);
      model_run_close(m, &err);
      return bk_error_exit(rc);
    }
    return 0;
  }
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
  /* In a PBS job, brink alone (not under --mpi) splits the host list
   * between its concurrent runs. */
  const char *nodefile = getenv("PBS_NODEFILE");
  if (!mode->under_mpi && s->run.launch == BK_LAUNCH_DIRECT && nodefile &&
      *nodefile)
    dop.hostfile = nodefile;
  if ((rc = bk_dispatch_new(&m->dispatch, &dop)) != 0) {
    if (rc == BK_EIO)
      fprintf(stderr,
              "brink: cannot read a host from the host list %s "
              "(PBS_NODEFILE)\n",
              nodefile);
    else
      fprintf(stderr, "brink: out of memory\n");
    model_run_close(m, &err);
    return BK_EXIT_RUNTIME;
  }
  return 0;
}

/* Runs the study in this process: locally, as one shard, or as the
 * coordinator of an MPI run. Returns the exit code. */
static int run_study(const char *path, int quiet, const run_mode_t *mode) {
  /* From the start: a stop that comes while the records are being opened
   * must end with exit 3 like any other, not kill brink by default. */
  bk_stop_install();
  bk_study_t *s;
  int rc = bk__cli_load_study(path, &s);
  if (rc)
    return rc;
  if (mode->shard.count && !bk_shard_method_allowed(s->analysis.method)) {
    fprintf(stderr,
            "brink: --shard works with the sampling methods (random, lhs, "
            "sobol) only: %s chooses each batch from the responses to the "
            "earlier ones, so its keys cannot be split in advance. Run it "
            "with --mpi to use several nodes\n",
            bk_method_name(s->analysis.method));
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  if (s->model.present && s->run.launch == BK_LAUNCH_SRUN) {
    const char *why = NULL;
    if (mode->under_mpi)
      why = "run.launch: srun makes brink one process that starts each "
            "model run as a job step of its allocation; run it without "
            "--mpi (brink submit --mode steps writes such a job)";
    else if (!getenv("SLURM_JOB_ID"))
      why = "run.launch: srun starts each model run as a job step of a "
            "Slurm allocation, and SLURM_JOB_ID is not set: run brink "
            "inside one (sbatch, salloc, or brink submit --mode steps), or "
            "set run.launch: direct";
    if (why) {
      fprintf(stderr, "brink: %s\n", why);
      bk_study_free(s);
      return BK_EXIT_USAGE;
    }
  }
  if (mode->shard.count && !s->model.present) {
    fprintf(stderr, "brink: --shard needs a study with a model section "
                    "(without one, a study runs in process and keeps no "
                    "records to merge)\n");
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  bk_error_t err;
  bk_error_clear(&err);
  int mrc = bk__cli_make_dirs(s->run.folder);
  if (mrc) {
    fprintf(stderr, "brink: cannot create the run folder %s: %s\n",
            s->run.folder, bk_strerror(mrc));
    bk_study_free(s);
    return bk_error_exit(mrc);
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
  if (mode->shard.count)
    pr.planned = (pr.planned + mode->shard.count - 1 - mode->shard.index) /
                 mode->shard.count;
  pr.pf = NAN;
  pr.cov = NAN;
  bk_method_opts_t opts = {on_progress, &pr};
  bk_evaluator_t ev;
  model_run_t mr;
  memset(&mr, 0, sizeof mr);
  if (s->model.present) {
    rc = model_run_open(s, &mr, &pr, quiet, mode);
    if (rc) {
      bk_study_free(s);
      return rc;
    }
    if (mr.coord)
      bk_mpi_coord_evaluator(mr.coord, &ev);
    else
      bk_dispatch_evaluator(mr.dispatch, &ev);
  } else {
    bk_evaluator_inprocess(&ev, s);
  }
  /* A shard evaluates every planned sample of its keys: the stopping rule
   * needs all shards' responses, so merge applies it. Its own estimate
   * (other keys taken as safe) means nothing and is not reported. */
  bk_study_t shard_study = *s;
  bk_shard_eval_t se = {mode->shard, &ev, 0};
  bk_evaluator_t shard_ev;
  const bk_study_t *ms = s;
  if (mode->shard.count) {
    shard_study.analysis.target_cov = 0;
    ms = &shard_study;
    bk_shard_evaluator(&se, &shard_ev);
    pr.quiet = 1;
  }
  bk_result_t res;
  double t0 = now_seconds();
  rc =
      bk_method_run(ms, mode->shard.count ? &shard_ev : &ev, &opts, &res, &err);
  res.seconds = now_seconds() - t0;
  if (pr.shown && pr.tty)
    fputc('\n', stderr);
  int exit_code = BK_EXIT_DONE;
  uint64_t recorded = mr.records ? bk_records_count(mr.records) : 0;
  int crc = model_run_close(&mr, &err);
  if (rc == 0 && crc)
    rc = crc;
  char logname[96] = "records.log";
  if (mode->shard.count)
    bk_shard_log_name(&mode->shard, logname, sizeof logname);
  if (rc == BK_ESTOPPED) {
    if (s->model.present)
      fprintf(stderr,
              "brink: stopped; %llu evaluations are recorded in %s/%s."
              " Run the same command again to resume\n",
              (unsigned long long)recorded, s->run.folder, logname);
    else
      fprintf(stderr,
              "brink: stopped after %llu evaluations; run `brink run %s` "
              "again to resume\n",
              (unsigned long long)res.evaluations, path);
    exit_code = BK_EXIT_STOPPED;
  } else if (rc) {
    bk__cli_print_error(&err);
    exit_code = bk_error_exit(rc);
    if (exit_code == BK_EXIT_STOPPED)
      fprintf(stderr,
              "brink: stopped; the records written so far are intact. Free "
              "space and run `brink run %s` again to resume\n",
              path);
  } else if (mode->shard.count) {
    if (!quiet)
      printf("brink: shard %u/%u done: %llu evaluations recorded in %s/%s.\n"
             "When all %u shards are done, run `brink merge %s` for the "
             "report.\n",
             mode->shard.index, mode->shard.count, (unsigned long long)recorded,
             s->run.folder, logname, mode->shard.count, path);
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

/* A worker rank of an MPI run: loads the study, makes its run-folder
 * places, and evaluates what the coordinator sends. Whatever goes wrong
 * is reported to the coordinator rather than printed here. */
static int run_worker(const char *path, int rank) {
  char host[256];
  if (gethostname(host, sizeof host) != 0)
    snprintf(host, sizeof host, "localhost");
  host[sizeof host - 1] = '\0';
  bk_error_t err;
  bk_error_clear(&err);
  bk_study_t *s = NULL;
  char failure[1600] = "";
  bk_buf_t wd, kd;
  bk_buf_init(&wd);
  bk_buf_init(&kd);
  int rc = bk_study_load(path, &s, &err);
  if (rc) {
    snprintf(failure, sizeof failure, "cannot load %s: %s%s%s", path,
             err.path[0] ? err.path : "", err.path[0] ? ": " : "", err.msg);
    goto greet;
  }
  if (!s->model.present)
    goto greet;
  /* A worker runs on the cores of its rank: its CPU affinity, and under
   * srun at most the CPUs of its task (without task binding the
   * affinity is the whole node). */
  int cores = bk_study_machine_cores();
  const char *cpt = getenv("SLURM_CPUS_PER_TASK");
  if (cpt && atoi(cpt) > 0 && atoi(cpt) < cores)
    cores = atoi(cpt);
  bk_study_default_slots(s, cores);
  if (s->run.launch == BK_LAUNCH_SRUN) {
    snprintf(failure, sizeof failure,
             "run.launch: srun does not combine with --mpi (brink runs as "
             "one process in the allocation; brink submit --mode steps)");
    goto greet;
  }
  /* Rank 0 may not have made the run folder yet. */
  bk__cli_make_dirs(s->run.folder);
  char *abs_folder = realpath(s->run.folder, NULL);
  const char *folder = abs_folder ? abs_folder : s->run.folder;
  if (s->run.scratch[0]) {
    bk_buf_printf(&wd, "%s/brink-%s-r%d-%ld", s->run.scratch, s->name, rank,
                  (long)getpid());
    bk_buf_printf(&kd, "%s/work", folder);
  } else {
    bk_buf_printf(&wd, "%s/work", folder);
  }
  free(abs_folder);
  if (!wd.data || (s->run.scratch[0] && !kd.data)) {
    snprintf(failure, sizeof failure, "out of memory");
    goto greet;
  }
  if ((rc = bk__cli_make_dirs(wd.data)) != 0 ||
      (kd.data && (rc = bk__cli_make_dirs(kd.data)) != 0)) {
    snprintf(failure, sizeof failure, "cannot create %s: %s",
             kd.data && access(wd.data, W_OK) == 0 ? kd.data : wd.data,
             bk_strerror(rc));
    goto greet;
  }
  /* Models left on this node by a rank of an earlier run that died; no
   * worker of this run has started one yet (work is sent only after every
   * worker has greeted the coordinator). */
  if (!kd.data)
    bk_dispatch_reap(wd.data);
greet:;
  bk_mpi_worker_opts_t wo = {s, wd.data, kd.data, host};
  bk_stop_install();
  rc = bk_mpi_worker_run(&wo, failure[0] ? failure : NULL);
  /* The scratch folder goes when nothing was left in it. */
  if (kd.data && wd.data)
    rmdir(wd.data);
  bk_buf_close(&wd);
  bk_buf_close(&kd);
  bk_study_free(s);
  return rc ? BK_EXIT_RUNTIME : BK_EXIT_DONE;
}

int bk__cmd_run(int argc, char **argv) {
  const char *path = NULL;
  int quiet = 0;
  run_mode_t mode;
  memset(&mode, 0, sizeof mode);
  int want_mpi = 0;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(run_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "-q") == 0 || strcmp(argv[i], "--quiet") == 0)
      quiet = 1;
    else if (strcmp(argv[i], "--mpi") == 0)
      want_mpi = 1;
    else if (strcmp(argv[i], "--shard") == 0 ||
             strncmp(argv[i], "--shard=", 8) == 0) {
      const char *v = argv[i][7] == '=' ? argv[i] + 8 : NULL;
      if (!v && i + 1 < argc)
        v = argv[++i];
      char why[200];
      if (bk_shard_parse(v, &mode.shard, why, sizeof why))
        return bk__cli_usage_error("run: %s", why);
    } else if (argv[i][0] == '-')
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
  if (want_mpi && mode.shard.count)
    return bk__cli_usage_error("run: %s",
                               "--mpi and --shard do not combine: use MPI "
                               "ranks or array tasks, not both");
  if (!want_mpi)
    return run_study(path, quiet, &mode);
  if (!bk_mpi_available()) {
    fprintf(stderr, "brink: this brink was built without MPI (meson did not "
                    "find it); install OpenMPI's development files and "
                    "rebuild, or use --shard with a job array\n");
    return BK_EXIT_USAGE;
  }
  int rank = 0, size = 1;
  char why[400];
  if (bk_mpi_init(&rank, &size, why, sizeof why)) {
    fprintf(stderr, "brink: cannot start MPI: %s\n", why);
    return BK_EXIT_RUNTIME;
  }
  int code;
  mode.under_mpi = 1;
  if (rank > 0) {
    code = run_worker(path, rank);
  } else {
    /* With a single rank there are no workers: rank 0 runs the models. */
    mode.mpi = size > 1;
    if (size == 1 && !quiet)
      fprintf(stderr, "brink: one MPI rank: running the models on it\n");
    code = run_study(path, quiet, &mode);
    bk_mpi_coord_quit_workers();
  }
  bk_mpi_finalize();
  return code;
}
