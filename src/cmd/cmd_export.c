/*
 * `brink export`: the record log of a study as a table, one row per
 * evaluation, with columns named after the variables and the outputs: CSV
 * (RFC 4180 quoting, empty cells where a value is missing) or JSON lines.
 * Read-only; works while a run is in progress.
 *
 * SPDX-License-Identifier: MIT
 */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "base/fault.h"
#include "eval/records.h"
#include "reports/report.h"
#include "study/study.h"

static const char export_help[] =
    "usage: brink export FOLDER|STUDY.yaml [--csv | --json-lines] [-o FILE]\n"
    "\n"
    "Writes one row per recorded evaluation, in the order the runs finished:\n"
    "key, the variables, the model outputs, g (named limit_state when a\n"
    "variable or an output is called g), failed (1 when g <= 0), status (ok\n"
    "or the model error kind), attempts, seconds, host, reason (what went\n"
    "wrong in a model error) and folder (the run folder kept). A study with\n"
    "several limit_states has g (the system's) and then one column per\n"
    "limit state, named after it, computed from the recorded inputs and\n"
    "outputs (on a folder the study is found through report.json; give the\n"
    "study file while a run goes). Missing\n"
    "values are empty cells in CSV and null in JSON lines. Goes to stdout\n"
    "unless -o FILE is given. Safe to use while the study runs.\n"
    "\n"
    "  --csv          comma-separated values with a header line (default)\n"
    "  --json-lines   one JSON object per line (also --jsonl)\n"
    "  -o FILE        write to FILE (also --output FILE)\n";

typedef struct {
  FILE *f;
  int json;
  size_t nx, ny;
  const char *const *xn;
  const char *const *yn;
  const char *gname;   /* "g", or "limit_state" when a column is named g */
  const bk_study_t *s; /* with several limit states, else NULL */
  double *vals;        /* nx + ny values for the modes */
  double gc[BK_STUDY_MAX_MODES];
  bk_buf_t line;
} export_t;

static void csv_text(bk_buf_t *b, const char *s) {
  if (!strpbrk(s, ",\"\n\r")) {
    bk_buf_puts(b, s);
    return;
  }
  bk_buf_putc(b, '"');
  for (; *s; s++) {
    if (*s == '"')
      bk_buf_putc(b, '"');
    bk_buf_putc(b, *s);
  }
  bk_buf_putc(b, '"');
}

/* The shortest text that reads back as the same double (as in the
 * records), so a value recorded as 0.3 is exported as 0.3. */
static void csv_num(bk_buf_t *b, double v) {
  if (isfinite(v))
    bk_buf_put_double(b, v);
}

/* Each mode's value of record r into e->gc (NaN when the model failed). */
static void mode_values(export_t *e, const bk_record_t *r) {
  size_t nm = e->s ? e->s->nmodes : 0;
  for (size_t k = 0; k < nm; k++)
    e->gc[k] = NAN;
  if (!nm || r->nx != e->nx || r->ny != e->ny ||
      (r->fault != BK_FAULT_NONE && r->fault != BK_FAULT_NOT_A_NUMBER))
    return;
  memcpy(e->vals, r->x, r->nx * sizeof *e->vals);
  if (r->ny)
    memcpy(e->vals + r->nx, r->y, r->ny * sizeof *e->vals);
  bk_study_g(e->s, e->vals, e->gc);
}

static int on_record(void *data, const bk_record_t *r) {
  export_t *e = data;
  bk_buf_t *b = &e->line;
  bk_buf_reset(b);
  size_t nm = e->s ? e->s->nmodes : 0;
  mode_values(e, r);
  int failed = r->fault == BK_FAULT_NONE && r->g <= 0;
  if (e->json) {
    bk_buf_puts(b, "{\"key\": ");
    bk_report_json_string(b, r->key);
    for (size_t i = 0; i < e->nx; i++) {
      bk_buf_puts(b, ", ");
      bk_report_json_string(b, e->xn[i]);
      bk_buf_puts(b, ": ");
      bk_report_json_number(b, i < r->nx ? r->x[i] : NAN);
    }
    for (size_t i = 0; i < e->ny; i++) {
      bk_buf_puts(b, ", ");
      bk_report_json_string(b, e->yn[i]);
      bk_buf_puts(b, ": ");
      bk_report_json_number(b, i < r->ny ? r->y[i] : NAN);
    }
    bk_buf_puts(b, ", ");
    bk_report_json_string(b, e->gname);
    bk_buf_puts(b, ": ");
    bk_report_json_number(b, r->g);
    for (size_t k = 0; k < nm; k++) {
      bk_buf_puts(b, ", ");
      bk_report_json_string(b, e->s->modes[k].name);
      bk_buf_puts(b, ": ");
      bk_report_json_number(b, e->gc[k]);
    }
    bk_buf_printf(b, ", \"failed\": %s, \"status\": ",
                  r->fault ? "null"
                  : failed ? "true"
                           : "false");
    bk_report_json_string(b, bk_fault_name(r->fault));
    bk_buf_printf(b, ", \"attempts\": %d, \"seconds\": ", r->attempts);
    bk_report_json_number(b, r->seconds);
    bk_buf_puts(b, ", \"host\": ");
    bk_report_json_string(b, r->host ? r->host : "");
    bk_buf_puts(b, ", \"reason\": ");
    bk_report_json_string(b, r->reason ? r->reason : "");
    bk_buf_puts(b, ", \"folder\": ");
    bk_report_json_string(b, r->folder ? r->folder : "");
    bk_buf_puts(b, "}\n");
  } else {
    csv_text(b, r->key);
    for (size_t i = 0; i < e->nx; i++) {
      bk_buf_putc(b, ',');
      csv_num(b, i < r->nx ? r->x[i] : NAN);
    }
    for (size_t i = 0; i < e->ny; i++) {
      bk_buf_putc(b, ',');
      csv_num(b, i < r->ny ? r->y[i] : NAN);
    }
    bk_buf_putc(b, ',');
    csv_num(b, r->g);
    for (size_t k = 0; k < nm; k++) {
      bk_buf_putc(b, ',');
      csv_num(b, e->gc[k]);
    }
    bk_buf_printf(b, ",%s,%s,%d,",
                  r->fault ? ""
                  : failed ? "1"
                           : "0",
                  bk_fault_name(r->fault), r->attempts);
    csv_num(b, r->seconds);
    bk_buf_putc(b, ',');
    csv_text(b, r->host ? r->host : "");
    bk_buf_putc(b, ',');
    csv_text(b, r->reason ? r->reason : "");
    bk_buf_putc(b, ',');
    csv_text(b, r->folder ? r->folder : "");
    bk_buf_putc(b, '\n');
  }
  if (fwrite(b->data, 1, b->len, e->f) != b->len)
    return -EIO;
  return 0;
}

/* The study named in folder/report.json when it has several limit states
 * and loads; else NULL (then no mode columns). Quiet: the records export
 * without it. */
static bk_study_t *study_of_folder(const char *folder) {
  char *path = NULL;
  if (bk_report_study_path(folder, &path))
    return NULL;
  bk_study_t *s = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  if (bk_study_load(path, &s, &err) == 0 && !s->nmodes) {
    bk_study_free(s);
    s = NULL;
  }
  bk_free(path);
  return s;
}

/* Is the log made by study s (its study fingerprint)? */
static int made_by(const bk_records_t *rec, const bk_study_t *s) {
  size_t n;
  const bk_fingerprint_part_t *p = bk_records_parts(rec, &n);
  for (size_t i = 0; i < n; i++)
    if (strcmp(p[i].name, "study") == 0)
      return strcmp(p[i].digest, s->digest_study) == 0;
  return 0;
}

static int is_regular_file(const char *p) {
  struct stat st;
  return stat(p, &st) == 0 && S_ISREG(st.st_mode);
}

int bk__cmd_export(int argc, char **argv) {
  const char *target = NULL, *out = NULL;
  int json = 0;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(export_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "--csv") == 0)
      json = 0;
    else if (strcmp(argv[i], "--json-lines") == 0 ||
             strcmp(argv[i], "--jsonl") == 0)
      json = 1;
    else if (strcmp(argv[i], "-o") == 0 || strcmp(argv[i], "--output") == 0) {
      if (i + 1 >= argc)
        return bk__cli_usage_error("export: %s", "-o needs a file name");
      out = argv[++i];
    } else if (argv[i][0] == '-' && argv[i][1])
      return bk__cli_usage_error("export: unknown option '%s'", argv[i]);
    else if (target)
      return bk__cli_usage_error("export: one folder at a time ('%s' is extra)",
                                 argv[i]);
    else
      target = argv[i];
  }
  if (!target)
    return bk__cli_usage_error("export: %s",
                               "give the run folder or the study file, e.g. "
                               "brink export runs/NAME --csv");
  char *folder;
  bk_study_t *study = NULL; /* kept for several limit states */
  if (is_regular_file(target)) {
    bk_study_t *s;
    int rc = bk__cli_load_study(target, &s);
    if (rc)
      return rc;
    if (!s->model.present) {
      fprintf(stderr,
              "brink: %s has no model section: its evaluations run in "
              "process and are not recorded, so there is nothing to export "
              "(the result is in %s/report.json)\n",
              target, s->run.folder);
      bk_study_free(s);
      return BK_EXIT_USAGE;
    }
    folder = bk_strdup(s->run.folder);
    if (s->nmodes)
      study = s;
    else
      bk_study_free(s);
  } else {
    folder = bk_strdup(target);
    study = study_of_folder(folder);
  }
  bk_records_t *rec = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_records_open_folder(&rec, folder, &err);
  if (rc) {
    if (rc == BK_ENOTFOUND)
      fprintf(stderr,
              "brink: no records in %s (%s/records.log is absent or empty). "
              "Studies without a model section keep no records; for the "
              "others, run `brink run STUDY.yaml` first\n",
              folder, folder);
    else
      bk__cli_print_error(&err);
    bk_free(folder);
    bk_study_free(study);
    return bk_error_exit(rc);
  }
  export_t e;
  memset(&e, 0, sizeof e);
  e.json = json;
  bk_records_columns(rec, &e.nx, &e.xn, &e.ny, &e.yn);
  e.gname = "g";
  if (study && made_by(rec, study) && e.nx == study->nvars &&
      e.ny == study->model.noutputs) {
    e.vals = bk_calloc(e.nx + e.ny + 1, sizeof *e.vals);
    e.s = e.vals ? study : NULL;
  }
  for (size_t i = 0; i < e.nx + e.ny; i++)
    if (strcmp(i < e.nx ? e.xn[i] : e.yn[i - e.nx], "g") == 0)
      e.gname = "limit_state";
  e.f = out ? fopen(out, "w") : stdout;
  int exit_code = BK_EXIT_DONE;
  if (!e.f) {
    fprintf(stderr, "brink: cannot write %s: %s\n", out, strerror(errno));
    exit_code = BK_EXIT_RUNTIME;
    goto done;
  }
  bk_buf_init(&e.line);
  if (!json) {
    bk_buf_puts(&e.line, "key");
    for (size_t i = 0; i < e.nx; i++) {
      bk_buf_putc(&e.line, ',');
      csv_text(&e.line, e.xn[i]);
    }
    for (size_t i = 0; i < e.ny; i++) {
      bk_buf_putc(&e.line, ',');
      csv_text(&e.line, e.yn[i]);
    }
    bk_buf_printf(&e.line, ",%s", e.gname);
    for (size_t k = 0; e.s && k < e.s->nmodes; k++) {
      bk_buf_putc(&e.line, ',');
      csv_text(&e.line, e.s->modes[k].name);
    }
    bk_buf_puts(&e.line,
                ",failed,status,attempts,seconds,host,reason,folder\n");
    fwrite(e.line.data, 1, e.line.len, e.f);
  }
  rc = bk_records_scan(rec, on_record, &e);
  if ((rc || fflush(e.f) != 0 || ferror(e.f)) && exit_code == BK_EXIT_DONE) {
    fprintf(stderr, "brink: cannot export %s/records.log: %s\n", folder,
            rc ? bk_strerror(rc) : strerror(errno));
    exit_code = BK_EXIT_RUNTIME;
  }
  if (out && fclose(e.f) != 0 && exit_code == BK_EXIT_DONE) {
    fprintf(stderr, "brink: cannot write %s: %s\n", out, strerror(errno));
    exit_code = BK_EXIT_RUNTIME;
  }
  bk_buf_close(&e.line);
done:
  bk_records_close(rec);
  bk_free(folder);
  bk_free(e.vals);
  bk_study_free(study);
  return exit_code;
}
