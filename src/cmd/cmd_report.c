/*
 * `brink report`: prints the result of a finished run, as text or JSON, or
 * writes the self-contained HTML report (--html FILE).
 *
 * SPDX-License-Identifier: MIT
 */
#include <dirent.h>
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
#include "reports/report.h"
#include "study/study.h"

static const char report_help[] =
    "usage: brink report FOLDER|STUDY.yaml [--json | --html FILE]\n"
    "\n"
    "Prints the result of a finished run: the text report, or with --json\n"
    "the JSON summary (keys: pf, beta, cov, ci, ci_level, ci_method,\n"
    "evaluations, failures, model_errors, excluded, pf_bounds, method, seed\n"
    "and more).\n"
    "\n"
    "  --json        the JSON summary instead of the text\n"
    "  --html FILE   write one self-contained HTML file (no network, charts\n"
    "                inline) with the study, the result, the convergence,\n"
    "                the distribution of g, the inputs that drive failure,\n"
    "                run times and the model errors; open it in a browser\n"
    "\n"
    "The study file is found through report.json; give it instead of the\n"
    "folder if it has moved.\n";

static int write_html(const char *folder, const char *study_path,
                      const char *out) {
  char *found = NULL;
  if (!study_path) {
    int rc = bk_report_study_path(folder, &found);
    if (rc) {
      fprintf(stderr,
              rc == BK_ENOTFOUND || rc == BK_ECORRUPT
                  ? "brink: %s/report.json does not name its study file; "
                    "give the study instead: brink report STUDY.yaml --html "
                    "FILE\n"
                  : "brink: no finished result in %s. If a run is going or "
                    "was stopped, `brink status` shows where it stands; "
                    "`brink run STUDY.yaml` finishes it\n",
              folder);
      return BK_EXIT_USAGE;
    }
    study_path = found;
  }
  bk_study_t *s;
  int rc = bk__cli_load_study(study_path, &s);
  if (rc) {
    if (found)
      fprintf(stderr,
              "brink: (the study file named in %s/report.json); give the "
              "study instead: brink report STUDY.yaml --html FILE\n",
              folder);
    bk_free(found);
    return rc;
  }
  bk_buf_t html;
  bk_buf_init(&html);
  bk_error_t err;
  bk_error_clear(&err);
  int exit_code = BK_EXIT_DONE;
  if (bk_report_html(folder, s, &html, &err)) {
    bk__cli_print_error(&err);
    exit_code = BK_EXIT_USAGE;
  } else {
    FILE *f = strcmp(out, "-") == 0 ? stdout : fopen(out, "w");
    if (!f || fwrite(html.data, 1, html.len, f) != html.len ||
        (f != stdout && fclose(f) != 0)) {
      fprintf(stderr, "brink: cannot write %s: %s\n", out, strerror(errno));
      exit_code = BK_EXIT_RUNTIME;
    } else if (f != stdout) {
      fprintf(stderr, "brink: report written to %s\n", out);
    }
  }
  bk_buf_close(&html);
  bk_study_free(s);
  bk_free(found);
  return exit_code;
}

static int is_regular_file(const char *p) {
  struct stat st;
  return stat(p, &st) == 0 && S_ISREG(st.st_mode);
}

/* Does `folder` hold shard logs (records-shard-I-of-N.log)? */
static int has_shard_logs(const char *folder) {
  DIR *d = opendir(folder);
  if (!d)
    return 0;
  int found = 0;
  struct dirent *e;
  while (!found && (e = readdir(d)))
    found = strncmp(e->d_name, "records-shard-", 14) == 0;
  closedir(d);
  return found;
}

int bk__cmd_report(int argc, char **argv) {
  const char *target = NULL;
  int json = 0;
  const char *html = NULL;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(report_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "--json") == 0)
      json = 1;
    else if (strcmp(argv[i], "--html") == 0) {
      if (i + 1 >= argc)
        return bk__cli_usage_error("report: %s",
                                   "--html needs a file name, e.g. --html "
                                   "report.html");
      html = argv[++i];
    } else if (argv[i][0] == '-')
      return bk__cli_usage_error("report: unknown option '%s'", argv[i]);
    else if (target)
      return bk__cli_usage_error("report: one folder at a time ('%s' is extra)",
                                 argv[i]);
    else
      target = argv[i];
  }
  if (!target)
    return bk__cli_usage_error("report: %s",
                               "give the run folder or the study "
                               "file, e.g. brink report runs/NAME");
  if (json && html)
    return bk__cli_usage_error("report: %s", "choose --json or --html");
  char *folder = NULL;
  if (is_regular_file(target)) {
    bk_study_t *s;
    int rc = bk__cli_load_study(target, &s);
    if (rc)
      return rc;
    folder = bk_strdup(s->run.folder);
    bk_study_free(s);
  } else {
    folder = bk_strdup(target);
  }
  if (html) {
    int rc = write_html(folder, is_regular_file(target) ? target : NULL, html);
    bk_free(folder);
    return rc;
  }
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/%s", folder, json ? "report.json" : "report.txt");
  FILE *f = fopen(p.data, "r");
  if (!f && has_shard_logs(folder)) {
    fprintf(stderr,
            "brink: %s holds the records of shards but no report yet; "
            "combine them with `brink merge STUDY.yaml`\n",
            folder);
    bk_buf_close(&p);
    bk_free(folder);
    return BK_EXIT_USAGE;
  }
  if (!f) {
    fprintf(stderr,
            "brink: no finished result in %s (%s). If a run is going or "
            "was stopped, `brink status %s` shows where it stands; `brink "
            "run STUDY.yaml` finishes it\n",
            folder, strerror(errno), folder);
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
