/*
 * `brink status`: where a running or stopped study stands: evaluations
 * recorded against those planned, failures and the running estimate, model
 * errors by kind, the throughput and the time to go, and whether a brink
 * holds the folder's lock. Read-only: it opens the records without the
 * lock, so it works while a run is in progress.
 *
 * SPDX-License-Identifier: MIT
 */
#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <signal.h>
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
#include "base/fault.h"
#include "eval/records.h"
#include "eval/sessions.h"
#include "reports/report.h"
#include "study/study.h"

static const char status_help[] =
    "usage: brink status FOLDER|STUDY.yaml\n"
    "\n"
    "Shows where a running or stopped study stands: evaluations recorded\n"
    "(against those planned and with the time to go for random, lhs and\n"
    "sobol, whose total is known in advance), failures and the running\n"
    "estimate of the failure probability, model errors by kind, throughput,\n"
    "the earlier runs and their time (sessions.log), and whether a brink is\n"
    "running on the folder now.\n"
    "Read-only: safe while `brink run` works on the same folder.\n"
    "Given a folder, the study is found through report.json or as a *.yaml\n"
    "up to three folders above whose run folder it is; when none is found,\n"
    "status says so and shows only what the records tell. Give the study\n"
    "file when the folder is not in its default place (runs/NAME beside\n"
    "the study), so that the plan and the estimate are known.\n";

#define RECENT 200

typedef struct {
  uint64_t n, ok, failed;
  uint64_t by_kind[BK_FAULT__COUNT];
  double recent[RECENT]; /* run times of the last RECENT runs */
  size_t nrecent;
  /* The latest model error in the log. */
  char last_key[96];
  int last_fault;
  char last_reason[256];
  char last_folder[512];
} tally_t;

static int on_record(void *data, const bk_record_t *r) {
  tally_t *t = data;
  t->n++;
  if (r->fault == BK_FAULT_NONE) {
    t->ok++;
    if (r->g <= 0)
      t->failed++;
  } else if (r->fault > 0 && r->fault < BK_FAULT__COUNT) {
    t->by_kind[r->fault]++;
    snprintf(t->last_key, sizeof t->last_key, "%s", r->key);
    t->last_fault = r->fault;
    snprintf(t->last_reason, sizeof t->last_reason, "%s",
             r->reason ? r->reason : "");
    snprintf(t->last_folder, sizeof t->last_folder, "%s",
             r->folder ? r->folder : "");
  }
  if (isfinite(r->seconds))
    t->recent[t->nrecent++ % RECENT] = r->seconds;
  return 0;
}

static int is_regular_file(const char *p) {
  struct stat st;
  return stat(p, &st) == 0 && S_ISREG(st.st_mode);
}

/* Looks for the study whose run folder is `folder`: the one named in
 * report.json, else a *.yaml up to three folders above it. */
static bk_study_t *find_study(const char *folder) {
  char *p = NULL;
  bk_study_t *s = NULL;
  bk_error_t err;
  if (bk_report_study_path(folder, &p) == 0) {
    bk_error_clear(&err);
    bk_study_load(p, &s, &err);
    bk_free(p);
    if (s)
      return s;
  }
  char *want = realpath(folder, NULL);
  if (!want)
    return NULL;
  bk_buf_t dir;
  bk_buf_init(&dir);
  int oom = bk_buf_puts(&dir, want);
  for (int up = 0; up < 3 && !s && !oom; up++) {
    if ((oom = bk_buf_puts(&dir, "/..")) != 0)
      break;
    DIR *d = opendir(dir.data);
    struct dirent *e;
    while (d && !s && !oom && (e = readdir(d)) != NULL) {
      size_t len = strlen(e->d_name);
      if (len < 6 || strcmp(e->d_name + len - 5, ".yaml") != 0)
        continue;
      bk_buf_t f;
      bk_buf_init(&f);
      char *real = realpath(dir.data, NULL);
      oom = bk_buf_printf(&f, "%s/%s", real ? real : dir.data, e->d_name);
      free(real);
      bk_error_clear(&err);
      if (!oom && bk_study_load(f.data, &s, &err) == 0) {
        char *got = realpath(s->run.folder, NULL);
        if (!got || strcmp(got, want) != 0) {
          bk_study_free(s);
          s = NULL;
        }
        free(got);
      }
      bk_buf_close(&f);
    }
    if (d)
      closedir(d);
  }
  bk_buf_close(&dir);
  free(want);
  return s;
}

static uint64_t planned(const bk_study_t *s, int *exact) {
  const bk_analysis_t *a = &s->analysis;
  *exact = 1;
  if (a->method == BK_METHOD_LHS || a->method == BK_METHOD_SOBOL)
    return (a->samples / a->replicates) * a->replicates;
  if (a->method != BK_METHOD_RANDOM)
    *exact = 0;
  uint64_t n = a->samples && a->method == BK_METHOD_RANDOM ? a->samples
                                                           : a->max_evaluations;
  return n < a->max_evaluations ? n : a->max_evaluations;
}

static void duration(char *b, size_t n, double s) {
  if (!isfinite(s) || s < 0)
    snprintf(b, n, "unknown");
  else if (s < 90)
    snprintf(b, n, "%.0f s", s);
  else if (s < 5400)
    snprintf(b, n, "%.0f min", s / 60);
  else if (s < 3 * 86400)
    snprintf(b, n, "%.1f h", s / 3600);
  else
    snprintf(b, n, "%.1f days", s / 86400);
}

/* 1 when a live brink holds the lock (who filled), 0 when none does, -1
 * when it is held from another host (cannot tell). */
static int lock_holder(const char *log, char *who, size_t cap) {
  bk_buf_t lp;
  bk_buf_init(&lp);
  bk_buf_printf(&lp, "%s.lock", log);
  FILE *f = fopen(lp.data, "r");
  bk_buf_close(&lp);
  who[0] = '\0';
  if (!f)
    return 0;
  char line[512] = "";
  if (!fgets(line, sizeof line, f))
    line[0] = '\0';
  fclose(f);
  line[strcspn(line, "\r\n")] = '\0';
  char *colon = strrchr(line, ':');
  if (!colon)
    return 0;
  *colon = '\0';
  long pid = strtol(colon + 1, NULL, 10);
  char host[256];
  if (gethostname(host, sizeof host) != 0)
    host[0] = '\0';
  host[sizeof host - 1] = '\0';
  snprintf(who, cap, "pid %ld on %s", pid, line);
  if (strcmp(host, line) != 0)
    return -1;
  if (pid <= 0)
    return 0;
  return kill((pid_t)pid, 0) == 0 || errno == EPERM ? 1 : 0;
}

int bk__cmd_status(int argc, char **argv) {
  const char *target = NULL;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(status_help, stdout);
      return BK_EXIT_DONE;
    } else if (argv[i][0] == '-')
      return bk__cli_usage_error("status: unknown option '%s'", argv[i]);
    else if (target)
      return bk__cli_usage_error("status: one folder at a time ('%s' is extra)",
                                 argv[i]);
    else
      target = argv[i];
  }
  if (!target)
    return bk__cli_usage_error("status: %s",
                               "give the run folder or the study file, e.g. "
                               "brink status runs/NAME");
  bk_study_t *s = NULL;
  char *folder;
  if (is_regular_file(target)) {
    int rc = bk__cli_load_study(target, &s);
    if (rc)
      return rc;
    folder = bk_strdup(s->run.folder);
    if (!folder) {
      bk_study_free(s);
      fprintf(stderr, "brink: out of memory\n");
      return BK_EXIT_RUNTIME;
    }
  } else {
    struct stat st;
    if (stat(target, &st) != 0 || !S_ISDIR(st.st_mode)) {
      fprintf(stderr,
              "brink: %s is not a run folder (%s); give the folder a run "
              "writes into (run.folder, by default runs/NAME beside the "
              "study) or the study file\n",
              target, strerror(errno ? errno : ENOTDIR));
      return BK_EXIT_USAGE;
    }
    folder = bk_strdup(target);
    if (!folder) {
      fprintf(stderr, "brink: out of memory\n");
      return BK_EXIT_RUNTIME;
    }
    s = find_study(folder);
  }
  bk_buf_t lp, rj;
  bk_buf_init(&lp);
  bk_buf_init(&rj);
  tally_t *t = bk_calloc(1, sizeof *t);
  if (bk_buf_printf(&lp, "%s/records.log", folder) ||
      bk_buf_printf(&rj, "%s/report.json", folder) || !t) {
    fprintf(stderr, "brink: out of memory\n");
    bk_free(t);
    bk_buf_close(&lp);
    bk_buf_close(&rj);
    bk_free(folder);
    bk_study_free(s);
    return BK_EXIT_RUNTIME;
  }
  char who[300];
  int held = lock_holder(lp.data, who, sizeof who);
  int finished = is_regular_file(rj.data);
  bk_buf_close(&rj);

  if (s)
    printf("Study %s, folder %s\n", s->name, folder);
  else
    printf("Run folder %s\n"
           "  study          not found: no report.json here names it, and no "
           "*.yaml up to\n"
           "                 three folders above has this run folder; give "
           "it as\n"
           "                 `brink status STUDY.yaml` for the plan, the "
           "estimate and the\n"
           "                 time to go\n",
           folder);
  if (held == 1)
    printf("  state          running (brink %s holds the lock)\n", who);
  else if (held == -1)
    printf("  state          locked by brink %s (another host: cannot "
           "tell whether it still runs)\n",
           who);
  else if (finished)
    printf("  state          finished (report.json written; see `brink "
           "report %s`)\n",
           folder);
  else
    printf("  state          stopped; `brink run %s` resumes it\n",
           s ? s->path : "STUDY.yaml");

  if (s && !s->model.present) {
    printf("  evaluations    in process: this study keeps no records, so its "
           "progress shows only\n                 in the terminal of the "
           "run%s\n",
           finished ? "; the result is in report.json" : "");
    bk_free(t);
    bk_free(folder);
    bk_buf_close(&lp);
    bk_study_free(s);
    return BK_EXIT_DONE;
  }
  bk_records_opts_t ro = {.path = lp.data, .read_only = 1, .any_study = 1};
  bk_records_t *rec = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_records_open(&rec, &ro, &err);
  if (rc == 0)
    rc = bk_records_scan(rec, on_record, t);
  int exit_code = BK_EXIT_DONE;
  if (rc == BK_ENOTFOUND) {
    printf("  evaluations    none recorded yet (%s is absent or empty)\n",
           lp.data);
  } else if (rc) {
    bk__cli_print_error(&err);
    exit_code = BK_EXIT_RUNTIME;
  } else {
    int exact = 1;
    uint64_t plan = s ? planned(s, &exact) : 0;
    /* A cap is not a plan: the adaptive methods stop on their own
     * evidence, mostly far below max_evaluations. */
    if (plan && exact)
      printf("  evaluations    %llu of %llu planned (%.1f%%)\n",
             (unsigned long long)t->n, (unsigned long long)plan,
             100.0 * (double)t->n / (double)plan);
    else if (plan)
      printf("  evaluations    %llu recorded (%s stops on its own evidence; "
             "max_evaluations %llu)\n",
             (unsigned long long)t->n, bk_study_method_name(s->analysis.method),
             (unsigned long long)plan);
    else
      printf("  evaluations    %llu recorded\n", (unsigned long long)t->n);
    /* failures / runs estimates Pf only for crude and stratified
     * sampling; without the study the method is not known. */
    int sampling = s && (s->analysis.method == BK_METHOD_RANDOM ||
                         s->analysis.method == BK_METHOD_LHS ||
                         s->analysis.method == BK_METHOD_SOBOL);
    printf("  failures       %llu (g <= 0)", (unsigned long long)t->failed);
    if (sampling && t->ok)
      printf("; running estimate Pf = %.3e", (double)t->failed / (double)t->ok);
    printf("\n");
    uint64_t nerr = t->n - t->ok;
    printf("  model errors   %llu", (unsigned long long)nerr);
    const char *sep = ":";
    for (int k = 1; k < BK_FAULT__COUNT; k++)
      if (t->by_kind[k]) {
        printf("%s %llu %s", sep, (unsigned long long)t->by_kind[k],
               bk_fault_name(k));
        sep = ",";
      }
    if (nerr && t->n)
      printf(" (%.1f%% of runs)", 100.0 * (double)nerr / (double)t->n);
    printf("\n");
    if (t->last_key[0]) {
      printf("  last error     %s: %s", t->last_key,
             t->last_reason[0] ? t->last_reason : bk_fault_name(t->last_fault));
      if (t->last_folder[0])
        printf("; run folder %s", t->last_folder);
      printf("\n");
    }
    size_t m = t->nrecent < RECENT ? t->nrecent : RECENT;
    double sum = 0;
    for (size_t i = 0; i < m; i++)
      sum += t->recent[i];
    struct stat st;
    if (stat(lp.data, &st) == 0) {
      char ago[32];
      duration(ago, sizeof ago, difftime(time(NULL), st.st_mtime));
      printf("  last record    %s ago\n", ago);
    }
    double total;
    uint32_t nsessions;
    if (bk_sessions_total(folder, &total, &nsessions) == 0 && nsessions)
      printf("  earlier runs   %u, %.3g s in all (sessions.log)\n", nsessions,
             total);
    if (m && sum > 0) {
      double mean = sum / (double)m;
      int slots = s ? s->run.slots : 1;
      double rate = (double)slots / mean;
      printf("  run time       %.3g s per model run (mean of the last %zu)\n",
             mean, m);
      if (s) {
        char rb[48];
        if (rate >= 1)
          snprintf(rb, sizeof rb, "%.*f runs/s", rate < 10 ? 1 : 0, rate);
        else if (rate * 60 >= 1)
          snprintf(rb, sizeof rb, "%.1f runs/min", rate * 60);
        else
          snprintf(rb, sizeof rb, "%.2g runs/h", rate * 3600);
        int per = s->run.cores > 0 ? s->run.cores : 1;
        printf("  rate           about %s with %d run%s at a time (%d "
               "core%s, %d per run)\n",
               rb, slots, slots == 1 ? "" : "s", slots * per,
               slots * per == 1 ? "" : "s", per);
      }
      if (exact && plan > t->n && held == 1) {
        char eta[32];
        duration(eta, sizeof eta, (double)(plan - t->n) / rate);
        printf("  time to go     about %s\n", eta);
      }
    }
  }
  bk_free(t);
  bk_records_close(rec);
  bk_buf_close(&lp);
  bk_free(folder);
  bk_study_free(s);
  return exit_code;
}
