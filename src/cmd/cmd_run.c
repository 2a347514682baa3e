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
#include "eval/sessions.h"
#include "eval/shard.h"
#include "base/stop.h"
#include "cmd/progress.h"
#include "study/study.h"

static const char run_help[] =
    "usage: brink run STUDY.yaml [--quiet] [--mpi | --shard I/N]\n"
    "\n"
    "Runs the study's method and writes report.txt and report.json into the\n"
    "run folder (run.folder, default runs/NAME beside the study file), then\n"
    "prints the text report. Every run, stopped ones too, adds a line to\n"
    "sessions.log there; the report's run time is their sum. Progress goes\n"
    "to stderr: a live line on a terminal, a plain line every 10 seconds\n"
    "otherwise: counts as runs end, the batch under way, and for random,\n"
    "lhs and sobol done of planned with the time to go (docs/reports.md).\n"
    "Ctrl-C (or SIGTERM, SIGUSR1) stops cleanly with exit code 3; running the\n"
    "same command again resumes and ends with the same numbers. A resume is\n"
    "refused (exit code 2, nothing written) when the study, a template, a\n"
    "model.copy or model.watch file, or the output of model.version_command\n"
    "changed since the records were made; the message names which.\n"
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

static double now_seconds(void) {
  struct timespec ts;
  clock_gettime(CLOCK_MONOTONIC, &ts);
  return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

typedef bk_progress_t progress_t;

static void on_progress(void *data, const bk_method_progress_t *mp) {
  progress_t *p = data;
  bk_progress_method(p, mp);
  bk_progress_show(p, now_seconds(), 0);
}

static void on_tick(void *data, const bk_dispatch_stats_t *st) {
  progress_t *p = data;
  p->st = st;
  bk_progress_show(p, now_seconds(), 0);
}

/* Evaluations in all when known in advance (as the methods report it);
 * 0 when the responses decide. */
static uint64_t planned_evaluations(const bk_study_t *s) {
  const bk_analysis_t *a = &s->analysis;
  if (a->method == BK_METHOD_LHS || a->method == BK_METHOD_SOBOL)
    return (a->samples / a->replicates) * a->replicates;
  if (a->method != BK_METHOD_RANDOM || !a->samples)
    return 0;
  return a->samples < a->max_evaluations ? a->samples : a->max_evaluations;
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

/* The reason recorded for a faulted run (bk_note_cb). */
static int recorded_reason(void *data, const char *key, char *reason,
                           size_t rcap, char *folder, size_t fcap) {
  bk_record_t rec;
  if (bk_records_find(data, key, &rec) != 1)
    return 0;
  snprintf(reason, rcap, "%s", rec.reason ? rec.reason : "");
  snprintf(folder, fcap, "%s", rec.folder ? rec.folder : "");
  return 1;
}

/* Opens the records (resuming), then the executor and the dispatcher, or
 * in the MPI mode the coordinator. Returns 0 or an exit code, having
 * printed why. */
static int model_run_open(const bk_study_t *s, model_run_t *m, progress_t *pr,
                          int quiet, const run_mode_t *mode) {
  bk_error_t err;
  bk_error_clear(&err);
  bk_shard_ident_t id;
  int irc = bk_shard_ident_init(&id, s, &err);
  if (irc) {
    bk__cli_print_error(&err);
    return bk_error_exit(irc);
  }
  char logname[96] = "records.log";
  if (mode->shard.count)
    bk_shard_log_name(&mode->shard, logname, sizeof logname);
  bk_buf_t lp;
  bk_buf_init(&lp);
  bk_buf_printf(&lp, "%s/%s", s->run.folder, logname);
  bk_records_opts_t ro;
  bk_shard_ident_opts(&id, s, lp.data, &ro);
  int rc = bk_records_open(&m->records, &ro, &err);
  bk_shard_ident_close(&id);
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
            bk_study_method_name(s->analysis.method));
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
  time_t wall_start = time(NULL);
  progress_t pr;
  bk_progress_init(&pr, now_seconds());
  pr.tty = isatty(2);
  pr.quiet = quiet;
  pr.planned = planned_evaluations(s);
  if (mode->shard.count)
    pr.planned = (pr.planned + mode->shard.count - 1 - mode->shard.index) /
                 mode->shard.count;
  pr.running_share = s->analysis.method == BK_METHOD_RANDOM ||
                     s->analysis.method == BK_METHOD_LHS ||
                     s->analysis.method == BK_METHOD_SOBOL;
  pr.on_error_fail = s->model.on_error == BK_ON_ERROR_FAIL;
  pr.processes = s->model.present;
  bk_method_opts_t opts = {on_progress, &pr, NULL, NULL};
  bk_evaluator_t ev;
  bk_inprocess_t inproc = {s, on_tick, &pr, {0}};
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
    if (mr.records) {
      opts.note = recorded_reason;
      opts.note_data = mr.records;
    }
  } else {
    bk_evaluator_inprocess_counted(&ev, &inproc);
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
  if (rc == 0 && !mode->shard.count) {
    /* The last state, with the method's final estimate. */
    bk_method_progress_t fin = {&res, pr.planned, pr.stage, 0, 0};
    bk_progress_method(&pr, &fin);
    bk_progress_show(&pr, now_seconds(), 1);
  }
  if (pr.shown && pr.tty)
    fputc('\n', stderr);
  int exit_code = BK_EXIT_DONE;
  uint64_t recorded = mr.records ? bk_records_count(mr.records) : 0;
  /* Evaluations made here, not replayed from the records. */
  uint64_t made = pr.st ? pr.st->completed : res.evaluations;
  int crc = model_run_close(&mr, &err);
  pr.st = NULL; /* it may have been the dispatcher's */
  if (rc == 0 && crc)
    rc = crc;
  /* This session goes into the sessions file, whatever its outcome, and
   * the report shows the time over all sessions. */
  char part[64] = "local";
  if (mode->shard.count)
    snprintf(part, sizeof part, "shard %u/%u", mode->shard.index,
             mode->shard.count);
  else if (mode->mpi)
    snprintf(part, sizeof part, "mpi");
  char host[256];
  if (gethostname(host, sizeof host) != 0)
    snprintf(host, sizeof host, "localhost");
  host[sizeof host - 1] = '\0';
  bk_session_t ss = {.start = wall_start,
                     .seconds = now_seconds() - pr.start,
                     .outcome = rc == 0             ? "done"
                                : rc == BK_ESTOPPED ? "stopped"
                                                    : "error",
                     .evaluations = made,
                     .host = host,
                     .pid = (long)getpid(),
                     .part = part};
  int src = bk_sessions_append(s->run.folder, &ss);
  if (src)
    fprintf(stderr,
            "brink: warning: cannot add this session to %s/%s: %s (the "
            "report's total run time leaves it out)\n",
            s->run.folder, BK_SESSIONS_FILE, bk_strerror(src));
  res.seconds = ss.seconds;
  bk_sessions_total(s->run.folder, &res.seconds_total, &res.sessions);
  if (src) {
    res.seconds_total += ss.seconds;
    res.sessions++;
  }
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
  } else if ((rc = bk__cli_write_reports(s, &res, quiet, &err)) != 0) {
    bk__cli_print_error(&err);
    exit_code = bk_error_exit(rc);
  } else if (!quiet) {
    printf("\nReport written to %s/report.txt and report.json\n",
           s->run.folder);
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
