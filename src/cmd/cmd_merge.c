/*
 * `brink merge`: combines the logs of the shards of a study (brink run
 * --shard I/N) into RUN.FOLDER/records.log and writes the report. The
 * study's method runs again with every key served from the shard logs (no
 * model runs), so the numbers are those a single run would give. Refuses
 * logs of another study, and names the shards that are missing or
 * incomplete.
 *
 * SPDX-License-Identifier: MIT
 */
#include <dirent.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "methods/method.h"
#include "eval/records.h"
#include "eval/sessions.h"
#include "eval/shard.h"
#include "base/stop.h"
#include "study/study.h"

static const char merge_help[] =
    "usage: brink merge STUDY.yaml [-q | --quiet]\n"
    "\n"
    "Combines the shard logs of the study's run folder\n"
    "(records-shard-I-of-N.log, written by `brink run --shard I/N`) into\n"
    "records.log and writes report.txt and report.json, with the numbers a\n"
    "single `brink run` of the study gives. Nothing is written when a shard\n"
    "is missing or incomplete (exit 1, naming them) or a log belongs to\n"
    "another study (exit 2).\n"
    "\n"
    "  -q, --quiet   do not print the report\n";

typedef struct {
  bk_records_t **logs;
  size_t nlogs;
  uint32_t count;
  bk_shard_ident_t id; /* made once: it runs model.version_command */
  int has_id;
} shard_set_t;

/* The reason recorded for a faulted run, from the shard that holds it
 * (bk_note_cb). */
static int shard_reason(void *data, const char *key, char *reason, size_t rcap,
                        char *folder, size_t fcap) {
  const shard_set_t *ss = data;
  bk_record_t rec;
  for (size_t i = 0; i < ss->nlogs; i++)
    if (ss->logs[i] && bk_records_find(ss->logs[i], key, &rec) == 1) {
      snprintf(reason, rcap, "%s", rec.reason ? rec.reason : "");
      snprintf(folder, fcap, "%s", rec.folder ? rec.folder : "");
      return 1;
    }
  return 0;
}

static void shard_set_close(shard_set_t *ss) {
  for (size_t i = 0; i < ss->nlogs; i++)
    bk_records_close(ss->logs[i]);
  bk_free(ss->logs);
  if (ss->has_id)
    bk_shard_ident_close(&ss->id);
  memset(ss, 0, sizeof *ss);
}

/* Finds and opens the shard logs. Returns 0 or an exit code, having
 * printed why. */
static int open_shards(const bk_study_t *s, shard_set_t *ss) {
  memset(ss, 0, sizeof *ss);
  DIR *d = opendir(s->run.folder);
  if (!d) {
    fprintf(stderr, "brink: cannot read the run folder %s: %s\n", s->run.folder,
            strerror(errno));
    return BK_EXIT_USAGE;
  }
  struct dirent *e;
  uint32_t other = 0;
  unsigned char *present = NULL;
  int rc = 0;
  while ((e = readdir(d))) {
    bk_shard_t sh;
    if (!bk_shard_parse_log_name(e->d_name, &sh))
      continue;
    if (ss->count == 0) {
      ss->count = sh.count;
      present = bk_calloc(sh.count, 1);
      if (!present) {
        rc = BK_EXIT_RUNTIME;
        break;
      }
    }
    if (sh.count != ss->count) {
      other = sh.count;
      continue;
    }
    present[sh.index] = 1;
  }
  closedir(d);
  if (rc) {
    fprintf(stderr, "brink: out of memory\n");
    bk_free(present);
    return rc;
  }
  if (ss->count == 0) {
    fprintf(stderr,
            "brink: no shard logs (records-shard-I-of-N.log) in %s; run "
            "`brink run --shard I/N %s` for I = 0 .. N-1 first\n",
            s->run.folder, s->path);
    return BK_EXIT_USAGE;
  }
  if (other) {
    fprintf(stderr,
            "brink: %s holds shards of two different splits (of %u and of "
            "%u); keep the logs of one split only\n",
            s->run.folder, ss->count, other);
    bk_free(present);
    return BK_EXIT_USAGE;
  }
  bk_buf_t miss;
  bk_buf_init(&miss);
  uint32_t nmiss = 0;
  for (uint32_t i = 0; i < ss->count; i++)
    if (!present[i]) {
      if (nmiss < 20)
        bk_buf_printf(&miss, "%s%u", nmiss ? ", " : "", i);
      nmiss++;
    }
  bk_free(present);
  if (nmiss) {
    fprintf(stderr,
            "brink: %u of %u shards are missing (no log yet): %s%s; run "
            "`brink run --shard I/%u %s` for each, then merge again\n",
            nmiss, ss->count, miss.data, nmiss > 20 ? ", ..." : "", ss->count,
            s->path);
    bk_buf_close(&miss);
    return BK_EXIT_RUNTIME;
  }
  bk_buf_close(&miss);
  ss->logs = bk_calloc(ss->count, sizeof *ss->logs);
  bk_error_t ierr;
  bk_error_clear(&ierr);
  int irc = ss->logs ? bk_shard_ident_init(&ss->id, s, &ierr) : BK_ENOMEM;
  ss->has_id = irc == 0;
  if (irc) {
    if (ss->logs)
      bk__cli_print_error(&ierr);
    else
      fprintf(stderr, "brink: out of memory\n");
    shard_set_close(ss);
    return irc == BK_ENOMEM ? BK_EXIT_RUNTIME : bk_error_exit(irc);
  }
  for (uint32_t i = 0; i < ss->count && rc == 0; i++) {
    bk_shard_t sh = {i, ss->count};
    char name[96];
    bk_shard_log_name(&sh, name, sizeof name);
    bk_buf_t p;
    bk_buf_init(&p);
    bk_buf_printf(&p, "%s/%s", s->run.folder, name);
    bk_records_opts_t ro;
    bk_shard_ident_opts(&ss->id, s, p.data, &ro);
    ro.read_only = 1;
    bk_error_t err;
    bk_error_clear(&err);
    int orc = bk_records_open(&ss->logs[ss->nlogs], &ro, &err);
    if (orc == 0) {
      ss->nlogs++;
    } else if (orc == BK_ENOTFOUND) {
      /* An empty log: the shard started but recorded nothing; the replay
       * below names it as incomplete. */
    } else {
      bk__cli_print_error(&err);
      fprintf(stderr, "brink: shard %u/%u (%s) cannot be merged\n", i,
              ss->count, p.data);
      rc = bk_error_exit(orc);
    }
    bk_buf_close(&p);
  }
  if (rc)
    shard_set_close(ss);
  return rc;
}

typedef struct {
  bk_records_t *out;
  bk_error_t *err;
} copy_ctx_t;

static int copy_record(void *data, const bk_record_t *rec) {
  copy_ctx_t *c = data;
  bk_record_t old;
  if (bk_records_find(c->out, rec->key, &old))
    return 0;
  return bk_records_append(c->out, rec, c->err);
}

/* Writes the union of the shard logs into records.log. */
static int write_merged(const bk_study_t *s, shard_set_t *ss, bk_error_t *err) {
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/records.log", s->run.folder);
  bk_records_opts_t ro;
  bk_shard_ident_opts(&ss->id, s, p.data, &ro);
  bk_records_t *out = NULL;
  int rc = bk_records_open(&out, &ro, err);
  bk_buf_close(&p);
  copy_ctx_t c = {out, err};
  for (size_t i = 0; rc == 0 && i < ss->nlogs; i++)
    rc = bk_records_scan(ss->logs[i], copy_record, &c);
  int crc = bk_records_close(out);
  if (rc == 0 && crc)
    rc = bk_error_set(err, crc, NULL, 0, 0, "cannot close %s/records.log: %s",
                      s->run.folder, bk_strerror(crc));
  return rc;
}

int bk__cmd_merge(int argc, char **argv) {
  const char *path = NULL;
  int quiet = 0;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(merge_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "-q") == 0 || strcmp(argv[i], "--quiet") == 0)
      quiet = 1;
    else if (argv[i][0] == '-')
      return bk__cli_usage_error("merge: unknown option '%s'", argv[i]);
    else if (path)
      return bk__cli_usage_error("merge: one study at a time ('%s' is extra)",
                                 argv[i]);
    else
      path = argv[i];
  }
  if (!path)
    return bk__cli_usage_error("merge: %s", "give the study file, e.g. brink "
                                            "merge study.yaml");
  bk_study_t *s;
  int rc = bk__cli_load_study(path, &s);
  if (rc)
    return rc;
  if (!s->model.present || !bk_shard_method_allowed(s->analysis.method)) {
    fprintf(stderr, "brink: nothing to merge: only studies with a model and "
                    "a sampling method (random, lhs, sobol) are run in "
                    "shards\n");
    bk_study_free(s);
    return BK_EXIT_USAGE;
  }
  shard_set_t ss;
  if ((rc = open_shards(s, &ss)) != 0) {
    bk_study_free(s);
    return rc;
  }
  uint64_t *missing = bk_calloc(ss.count, sizeof *missing);
  char(*first)[96] = bk_calloc(ss.count, sizeof *first);
  bk_serve_t sv = {s, ss.logs, ss.nlogs, ss.count, missing, first, 0, 0};
  bk_evaluator_t ev;
  bk_shard_serve_evaluator(&sv, &ev);
  bk_method_opts_t opts = {NULL, NULL, shard_reason, &ss};
  bk_result_t res;
  memset(&res, 0, sizeof res);
  bk_error_t err;
  bk_error_clear(&err);
  int exit_code = BK_EXIT_DONE;
  bk_stop_install();
  rc = missing && first
           ? bk_method_run(s, &ev, &opts, &res, &err)
           : bk_error_set(&err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  uint32_t incomplete = 0;
  for (uint32_t i = 0; missing && i < ss.count; i++)
    if (missing[i]) {
      if (!incomplete)
        fprintf(stderr, "brink: cannot merge: shards are incomplete\n");
      fprintf(stderr,
              "  shard %u/%u: %llu of its evaluations are not recorded "
              "(first: %s); run `brink run --shard %u/%u %s` again\n",
              i, ss.count, (unsigned long long)missing[i], first[i], i,
              ss.count, path);
      incomplete++;
    }
  if (rc == BK_ESTOPPED) {
    exit_code = bk_error_exit(rc);
  } else if (rc) {
    bk__cli_print_error(&err);
    exit_code = bk_error_exit(rc);
  } else if (incomplete) {
    exit_code = BK_EXIT_RUNTIME;
  } else if ((rc = write_merged(s, &ss, &err)) != 0) {
    bk__cli_print_error(&err);
    exit_code = BK_EXIT_RUNTIME;
  } else {
    /* The shards' sessions, from the sessions file of the run folder. */
    bk_sessions_total(s->run.folder, &res.seconds_total, &res.sessions);
    if ((rc = bk__cli_write_reports(s, &res, quiet, &err)) != 0) {
      bk__cli_print_error(&err);
      exit_code = bk_error_exit(rc);
    } else if (!quiet) {
      printf("\nMerged %u shards into %s/records.log; report written to "
             "%s/report.txt and report.json\n",
             ss.count, s->run.folder, s->run.folder);
    }
  }
  bk_result_close(&res);
  bk_free(missing);
  bk_free(first);
  shard_set_close(&ss);
  bk_study_free(s);
  return exit_code;
}
