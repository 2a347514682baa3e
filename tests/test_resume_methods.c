/*
 * Integration tests of the adaptive methods with an external model (the
 * test model of tests/helpers/model.c run through the local executor):
 * a run killed with SIGKILL at random moments and resumed ends with the
 * same records, key for key, and the same numbers as an uninterrupted run
 * (DESIGN.md section 4, "Evaluation key"). One Test() per method; the
 * helpers at the top are shared. Also the command-line side of FORM's
 * non-convergence (exit 0, the report written).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "helpers/itest.h"

TestSuite(resume_methods, .init = itest_setup, .fini = itest_teardown);

/* ---- FORM and importance sampling ------------------------------------ */

/* Three standard normals through the test model, g = 2.5 - (a + b + c) /
 * sqrt(3) from the model, bent by a term of the limit state so that FORM
 * needs several iterations. */
static void write_form_study(const char *name, const char *folder,
                             const char *analysis) {
  write_file("deck.txt", "x1 = {{ a : %%.17g }}\n"
                         "x2 = {{ b : %%.17g }}\n"
                         "x3 = {{ c : %%.17g }}\n"
                         "beta = 2.5\n");
  write_file(name,
             "name: %s\n"
             "seed: 31\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "  c: {type: lognormal, mean: 1, cov: 0.3}\n"
             "model:\n"
             "  files: [{template: deck.txt, to: in.txt}]\n"
             "  command: ['%s', in.txt]\n"
             "  env: {BK_MODEL_MODE: 'slow 0.03'}\n"
             "  timeout: 20\n"
             "  outputs:\n"
             "    g: {file: out.txt, pattern: 'result: g = (\\S+)'}\n"
             "limit_state: g + 0.15*a*a - 0.1*b*c\n"
             "analysis: %s\n"
             "run: {folder: %s, slots: 2}\n",
             folder, env("BRINK_TEST_MODEL"), analysis, folder);
}

Test(resume_methods, form_resumes_after_kill_9_with_identical_records) {
  const char *an = "{method: form, form: {differences: central, sorm: true, "
                   "tolerance: 1e-6}}";
  write_form_study("ref.yaml", "ref", an);
  write_form_study("k.yaml", "k", an);
  kill_and_resume("ref.yaml", "ref", "k.yaml", "k", 4242, 3);
  char *canon = canonical_records("k");
  cr_assert(strstr(canon, "form/h/"), "no curvature batch:\n%s", canon);
  char *json = read_file("k/report.json");
  cr_assert(strstr(json, "\"converged\": true"), "%s", json);
}

Test(resume_methods, importance_resumes_after_kill_9_with_identical_records) {
  const char *an = "{method: importance, samples: 40, max_evaluations: 180, "
                   "target_cov: 0.001}";
  write_form_study("ref.yaml", "ref", an);
  write_form_study("k.yaml", "k", an);
  kill_and_resume("ref.yaml", "ref", "k.yaml", "k", 777, 3);
  char *canon = canonical_records("k");
  cr_assert_eq(count_lines(canon), 180);
  cr_assert(strstr(canon, "is/0\t") && strstr(canon, "form/i0/0\t"), "%s",
            canon);
  /* brink plan reads the pilot: Pf from report.json, seconds from the
   * records. */
  cr_assert_eq(brink("plan k.yaml --json"), 0, "%s", read_file("err.txt"));
  char *plan = read_file("out.txt");
  cr_assert(strstr(plan, "\"pf_from\": \"pilot report.json\""), "%s", plan);
  cr_assert(strstr(plan, "\"seconds_from\": \"pilot records.log\""), "%s",
            plan);
}

/* FORM that stops on its iteration cap: exit 0, the report written, and
 * the non-convergence in the text and in the JSON (docs/methods.md). */
Test(resume_methods, form_not_converging_exits_0_with_the_report) {
  write_file("nc.yaml", "name: nc\n"
                        "variables:\n"
                        "  r: {type: lognormal, mean: 3, cov: 0.3}\n"
                        "  s: {type: gumbel, mean: 1.2, cov: 0.4}\n"
                        "limit_state: r - s\n"
                        "analysis: {method: form, form: {max_iterations: 2, "
                        "tolerance: 1e-9}}\n"
                        "run: {folder: nc}\n");
  cr_assert_eq(brink("run nc.yaml"), 0, "%s", read_file("err.txt"));
  char *text = read_file("nc/report.txt");
  cr_assert(strstr(text, "NOT converged after 2 iterations"), "%s", text);
  cr_assert(strstr(text, "WARNING: FORM did NOT converge"), "%s", text);
  char *json = read_file("nc/report.json");
  cr_assert(strstr(json, "\"converged\": false"), "%s", json);
  cr_assert(strstr(json, "\"warnings\": [\"FORM did NOT converge"), "%s", json);
}
