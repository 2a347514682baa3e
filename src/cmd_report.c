/*
 * `brink report`: prints the result of a finished run, as text or JSON.
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
#include "study.h"

static const char report_help[] =
    "usage: brink report FOLDER|STUDY.yaml [--json]\n"
    "\n"
    "Prints the result of a finished run: the text report, or with --json\n"
    "the JSON summary (keys: pf, beta, cov, ci, ci_level, ci_method,\n"
    "evaluations, failures, model_errors, excluded, pf_bounds, method, seed\n"
    "and more).\n";

static int is_regular_file(const char *p) {
  struct stat st;
  return stat(p, &st) == 0 && S_ISREG(st.st_mode);
}

int bk__cmd_report(int argc, char **argv) {
  const char *target = NULL;
  int json = 0;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(report_help, stdout);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "--json") == 0)
      json = 1;
    else if (argv[i][0] == '-')
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
