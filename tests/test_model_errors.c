/*
 * Integration tests of model errors in the reports, with the brink
 * executable and a model script: a model that exits 1 when the load is
 * high (its errors cluster near the failure region) makes every report
 * warn and show the bounds on Pf; a model that fails at random does not;
 * the error tables list each errored run's inputs; and the stop after too
 * many errors names the first run's reason and says how to start afresh.
 *
 * The model: g = 2.5*sqrt(2) - a - b with a, b standard normal, so
 * Pf = Phi(-2.5) (closed form, Cornell 1969).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>

#include "helpers/itest.h"

TestSuite(model_errors, .init = itest_setup, .fini = itest_teardown);

/* `fails` is a shell condition on $a, $b and $BRINK_INDEX under which the
 * model exits 1 before writing its output. */
static void write_study(const char *fails, const char *max_fraction,
                        int samples) {
  write_file("deck.txt", "a={{ a : %%.17g }}\nb={{ b : %%.17g }}\n");
  write_file("model.sh",
             ". ./in.txt\n"
             "if %s; then echo 'solver diverged' >&2; exit 1; fi\n"
             "awk -v a=\"$a\" -v b=\"$b\" 'BEGIN { printf \"g = %%.17g\\n\", "
             "2.5*sqrt(2) - a - b }' > out.txt\n",
             fails);
  write_file("s.yaml",
             "name: errs\n"
             "seed: 3\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: deck.txt, to: in.txt}]\n"
             "  copy: [model.sh]\n"
             "  command: [sh, model.sh]\n"
             "  max_error_fraction: %s\n"
             "  outputs:\n"
             "    g: {file: out.txt, pattern: 'g = (\\S+)'}\n"
             "limit_state: g\n"
             "analysis: {method: random, samples: %d}\n"
             "run: {folder: out, slots: 2}\n",
             max_fraction, samples);
}

/* High load: a + b above 2.3, about 5% of the runs and every failure. */
static const char high_load[] =
    "awk -v a=\"$a\" -v b=\"$b\" 'BEGIN { exit !(a + b > 2.3) }'";

Test(model_errors, clustered_errors_warn_in_every_report) {
  write_study(high_load, "0.2", 400);
  int rc = brink("run s.yaml --quiet");
  cr_assert_eq(rc, 0, "%s", read_file("err.txt"));
  char *text = read_file("out/report.txt");
  cr_assert(strstr(text, "WARNING: model errors cluster near the failure "
                         "region"),
            "%s", text);
  cr_assert(strstr(text, "Pf if left-out runs"), "%s", text);
  /* The error table: key, kind, reason, inputs by name, folder. */
  cr_assert(strstr(text, "model errors, the first "), "%s", text);
  cr_assert(strstr(text, "exit-code: exit status 1"), "%s", text);
  cr_assert(strstr(text, "      a = "), "%s", text);
  cr_assert(strstr(text, "      folder "), "%s", text);
  char *json = read_file("out/report.json");
  cr_assert(strstr(json, "\"warnings\": [\"model errors cluster near the "
                         "failure region"),
            "%s", json);
  cr_assert(strstr(json, "\"pf_bounds\": ["), "%s", json);
  cr_assert(strstr(json, "\"error_runs\": ["), "%s", json);
  cr_assert(strstr(json, "\"kind\": \"exit-code\", \"reason\": \"exit status "
                         "1\""),
            "%s", json);
  cr_assert(strstr(json, "\"x\": {\"a\": "), "%s", json);
  cr_assert_eq(brink("report out --html r.html"), 0, "%s",
               read_file("err.txt"));
  char *html = read_file("r.html");
  cr_assert(strstr(html, "model errors cluster near the failure region"));
  cr_assert(strstr(html, "<circle class=\"err\""), "errored runs drawn");
  cr_assert(strstr(html, ">model error</text>"), "legend entry");
  cr_assert(strstr(html, "data-table=\"model-errors\""));
}

/* The same share of errors, struck by the key alone (every 20th run):
 * no warning. */
Test(model_errors, random_errors_stay_quiet) {
  write_study("[ $((BRINK_INDEX % 20)) -eq 7 ]", "0.2", 400);
  int rc = brink("run s.yaml --quiet");
  cr_assert_eq(rc, 0, "%s", read_file("err.txt"));
  char *json = read_file("out/report.json");
  cr_assert(strstr(json, "\"model_errors\": 20"), "%s", json);
  cr_assert(!strstr(json, "cluster near the failure"), "%s", json);
}

/* Too many errors: the stop names the kind, the first run and its reason,
 * and says how to start afresh; exit 1. */
Test(model_errors, error_limit_names_the_reason) {
  write_study("awk -v a=\"$a\" 'BEGIN { exit !(a > 1) }'", "0.05", 200);
  int rc = brink("run s.yaml --quiet");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 1, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "above model.max_error_fraction 0.05"), "%s", err);
  cr_assert(strstr(err, "most ended in exit-code"), "%s", err);
  cr_assert(strstr(err, "(\"exit status 1\")"), "%s", err);
  cr_assert(strstr(err, "set run.folder to a new folder"), "%s", err);
  /* Fixing the copied script changes the study: the folder is refused,
   * as the message says. */
  write_study("false", "0.05", 200);
  rc = brink("run s.yaml --quiet");
  err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "copy model.sh changed"), "%s", err);
}
