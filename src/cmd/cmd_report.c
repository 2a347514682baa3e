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
#include "base/stop.h"
#include "cmd/cli.h"
#include "base/error.h"
#include "eval/records.h"
#include "eval/shard.h"
#include "methods/method.h"
#include "reports/report.h"
#include "study/study.h"

static const char report_help[] =
    "usage: brink report FOLDER|STUDY.yaml [--json | --html FILE]\n"
    "                    [--limit-state NAME=EXPRESSION]...\n"
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
    "  --limit-state NAME=EXPRESSION\n"
    "                what if: Pf of a changed or new limit state from the\n"
    "                recorded inputs and outputs, without running the model\n"
    "                (random, lhs and sobol studies; repeat for several).\n"
    "                NAME is one of limit_states (the system changes with\n"
    "                it), limit_state for a study of one, or a new name\n"
    "                (reported beside the system). Marked as a re-analysis;\n"
    "                report.json is left as it is\n"
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

/* The number after "KEY": in a report.json text, or NaN. */
static double json_number(const char *text, const char *key) {
  char pat[64];
  snprintf(pat, sizeof pat, "\"%s\": ", key);
  const char *p = strstr(text, pat);
  if (!p)
    return NAN;
  char *end;
  double v = strtod(p + strlen(pat), &end);
  return end == p + strlen(pat) ? NAN : v;
}

/* Sets the design of the re-analysis to the one the run made: the same
 * evaluations (random) or replicates (lhs, sobol), with no stopping rule,
 * so that the method asks for exactly the recorded keys. */
static int same_design(bk_study_t *s, const char *json, const char *folder) {
  bk_analysis_t *a = &s->analysis;
  double n = json_number(json, "evaluations");
  if (a->method == BK_METHOD_RANDOM) {
    if (!(n >= 1)) {
      fprintf(stderr, "brink: %s/report.json names no evaluations\n", folder);
      return BK_EXIT_USAGE;
    }
    a->samples = (uint64_t)n;
  } else {
    double r = json_number(json, "replicates"),
           per = json_number(json, "per_replicate");
    if (!(r >= 1) || !(per >= 1)) {
      fprintf(stderr, "brink: %s/report.json names no replicates\n", folder);
      return BK_EXIT_USAGE;
    }
    a->replicates = (uint32_t)r;
    a->samples = (uint64_t)r * (uint64_t)per;
  }
  a->target_cov = 0;
  if (a->max_evaluations < a->samples)
    a->max_evaluations = a->samples;
  return 0;
}

/* `brink report --limit-state NAME=EXPRESSION...`: the study's method runs
 * again on the recorded evaluations with the changed limit states. */
static int reanalyse(const char *folder, const char *study_path, int json,
                     const char *html, char **changes, int nchanges) {
  char *found = NULL;
  if (!study_path) {
    if (bk_report_study_path(folder, &found)) {
      fprintf(stderr,
              "brink: no finished result in %s to re-analyse (or its "
              "report.json names no study); give the study file instead\n",
              folder);
      return BK_EXIT_USAGE;
    }
    study_path = found;
  }
  bk_study_t *s = NULL;
  int exit_code = bk__cli_load_study(study_path, &s);
  bk_buf_t jp, rj, what, out;
  bk_buf_init(&jp);
  bk_buf_init(&rj);
  bk_buf_init(&what);
  bk_buf_init(&out);
  bk_records_t *rec = NULL;
  bk_result_t res;
  memset(&res, 0, sizeof res);
  if (exit_code)
    goto done;
  exit_code = BK_EXIT_USAGE;
  bk_method_kind_t m = s->analysis.method;
  if (m != BK_METHOD_RANDOM && m != BK_METHOD_LHS && m != BK_METHOD_SOBOL) {
    fprintf(stderr,
            "brink: report --limit-state re-analyses random, lhs and sobol "
            "studies only: the %s method chose where to evaluate from the "
            "values of g, so its evaluations say nothing reliable about "
            "another limit state. Run the study again with the changed "
            "limit state (a new run.folder)\n",
            bk_study_method_name(m));
    goto done;
  }
  bk_buf_printf(&jp, "%s/report.json", folder);
  FILE *f = fopen(jp.data, "r");
  char chunk[8192];
  size_t n;
  while (f && (n = fread(chunk, 1, sizeof chunk, f)) > 0)
    bk_buf_append(&rj, chunk, n);
  if (f)
    fclose(f);
  if (!rj.data) {
    fprintf(stderr,
            "brink: no finished result in %s to re-analyse; `brink run "
            "%s` first\n",
            folder, study_path);
    goto done;
  }
  if ((exit_code = same_design(s, rj.data, folder)))
    goto done;
  exit_code = BK_EXIT_USAGE;
  for (int i = 0; i < nchanges; i++) {
    const char *eq = strchr(changes[i], '=');
    if (!eq || eq == changes[i]) {
      fprintf(stderr,
              "brink: report: --limit-state takes NAME=EXPRESSION, e.g. "
              "--limit-state shear=\"R2 - 1.8*S\"; got '%s'\n",
              changes[i]);
      goto done;
    }
    char *name = bk_strndup(changes[i], (size_t)(eq - changes[i]));
    char msg[512] = "";
    int rc = name ? bk_study_set_limit_state(s, name, eq + 1, msg, sizeof msg)
                  : BK_ENOMEM;
    bk_free(name);
    if (rc) {
      fprintf(stderr, "brink: report: --limit-state %s\n",
              rc == BK_ENOMEM ? "out of memory" : msg);
      goto done;
    }
    bk_buf_printf(&what, "%s%s", i ? "; " : "", changes[i]);
  }
  bk_evaluator_t ev;
  uint64_t missing = 0;
  char first[96] = "";
  bk_serve_t sv;
  memset(&sv, 0, sizeof sv);
  bk_error_t err;
  bk_error_clear(&err);
  if (s->model.present) {
    bk_buf_t lp;
    bk_buf_init(&lp);
    bk_buf_printf(&lp, "%s/records.log", folder);
    bk_records_opts_t ro = {.path = lp.data, .read_only = 1, .any_study = 1};
    int rc = bk_records_open(&rec, &ro, &err);
    bk_buf_close(&lp);
    if (rc) {
      bk__cli_print_error(&err);
      exit_code = bk_error_exit(rc);
      goto done;
    }
    sv = (bk_serve_t){s, &rec, 1, 1, &missing, &first, 0, 1};
    bk_shard_serve_evaluator(&sv, &ev);
  } else {
    bk_evaluator_inprocess(&ev, s);
  }
  bk_stop_install();
  res.reanalysis = what.data;
  int rc = bk_method_run(s, &ev, NULL, &res, &err);
  res.reanalysis = what.data;
  if (rc) {
    if (rc != BK_ESTOPPED)
      bk__cli_print_error(&err);
    exit_code = bk_error_exit(rc);
    goto done;
  }
  if (missing) {
    fprintf(stderr,
            "brink: cannot re-analyse: %llu evaluations of the run are not "
            "in %s/records.log (first: %s); the re-analysis needs every "
            "one. `brink run %s` completes them\n",
            (unsigned long long)missing, folder, first, study_path);
    exit_code = BK_EXIT_RUNTIME;
    goto done;
  }
  if (html) {
    bk_buf_t j;
    bk_buf_init(&j);
    bk_report_json(s, &res, &j);
    rc = j.data ? bk_report_html_of(folder, s, j.data, &out, &err) : BK_ENOMEM;
    bk_buf_close(&j);
    if (rc) {
      bk__cli_print_error(&err);
      exit_code = BK_EXIT_RUNTIME;
      goto done;
    }
    FILE *o = strcmp(html, "-") == 0 ? stdout : fopen(html, "w");
    if (!o || fwrite(out.data, 1, out.len, o) != out.len ||
        (o != stdout && fclose(o) != 0)) {
      fprintf(stderr, "brink: cannot write %s: %s\n", html, strerror(errno));
      exit_code = BK_EXIT_RUNTIME;
      goto done;
    }
    if (o != stdout)
      fprintf(stderr, "brink: re-analysis report written to %s\n", html);
  } else {
    if (json)
      bk_report_json(s, &res, &out);
    else
      bk_report_text(s, &res, &out);
    if (out.data)
      fwrite(out.data, 1, out.len, stdout);
  }
  exit_code = BK_EXIT_DONE;
done:
  bk_result_close(&res);
  bk_records_close(rec);
  bk_buf_close(&jp);
  bk_buf_close(&rj);
  bk_buf_close(&what);
  bk_buf_close(&out);
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
  char **changes = NULL;
  int nchanges = 0;
  for (int i = 0; i < argc; i++) {
    if (bk__cli_is_help(argv[i])) {
      fputs(report_help, stdout);
      bk_free(changes);
      return BK_EXIT_DONE;
    } else if (strcmp(argv[i], "--json") == 0)
      json = 1;
    else if (strcmp(argv[i], "--html") == 0) {
      if (i + 1 >= argc) {
        bk_free(changes);
        return bk__cli_usage_error("report: %s",
                                   "--html needs a file name, e.g. --html "
                                   "report.html");
      }
      html = argv[++i];
    } else if (strcmp(argv[i], "--limit-state") == 0 ||
               strncmp(argv[i], "--limit-state=", 14) == 0) {
      const char *v = argv[i][13] == '=' ? argv[i] + 14 : NULL;
      if (!v && i + 1 >= argc) {
        bk_free(changes);
        return bk__cli_usage_error("report: %s",
                                   "--limit-state needs NAME=EXPRESSION, "
                                   "e.g. --limit-state shear=\"R2 - 1.8*S\"");
      }
      char **nc = bk_realloc(changes, (size_t)(nchanges + 1) * sizeof *nc);
      if (!nc) {
        bk_free(changes);
        fprintf(stderr, "brink: out of memory\n");
        return BK_EXIT_RUNTIME;
      }
      changes = nc;
      changes[nchanges++] = (char *)(v ? v : argv[++i]);
    } else if (argv[i][0] == '-' || target) {
      bk_free(changes);
      return bk__cli_usage_error(argv[i][0] == '-'
                                     ? "report: unknown option '%s'"
                                     : "report: one folder at a time ('%s' "
                                       "is extra)",
                                 argv[i]);
    } else
      target = argv[i];
  }
  if (!target || (json && html)) {
    bk_free(changes);
    return bk__cli_usage_error("report: %s",
                               !target ? "give the run folder or the study "
                                         "file, e.g. brink report runs/NAME"
                                       : "choose --json or --html");
  }
  char *folder = NULL;
  if (is_regular_file(target)) {
    bk_study_t *s;
    int rc = bk__cli_load_study(target, &s);
    if (rc) {
      bk_free(changes);
      return rc;
    }
    folder = bk_strdup(s->run.folder);
    bk_study_free(s);
  } else {
    folder = bk_strdup(target);
  }
  if (nchanges) {
    int rc = reanalyse(folder, is_regular_file(target) ? target : NULL, json,
                       html, changes, nchanges);
    bk_free(changes);
    bk_free(folder);
    return rc;
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
