/*
 * Integration tests of cross-entropy and subset simulation with an external
 * model (the test model of tests/helpers/model.c, local executor):
 * a run killed with SIGKILL at random moments and resumed ends with the
 * same records, key for key, and the same numbers as an uninterrupted run
 * (DESIGN.md section 4, "Evaluation key"). One Test() per method.
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

TestSuite(resume_subset, .init = itest_setup, .fini = itest_teardown);

/* Three inputs through the test model, g = 2.5 - (a + b + c) / sqrt(3)
 * from the model plus a bend in the limit state. */
static void write_study(const char *name, const char *folder,
                        const char *analysis) {
  write_file("deck.txt", "x1 = {{ a : %%.17g }}\n"
                         "x2 = {{ b : %%.17g }}\n"
                         "x3 = {{ c : %%.17g }}\n"
                         "beta = 2.5\n");
  write_file(name,
             "name: %s\n"
             "seed: 57\n"
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
             "limit_state: g + 0.1*a*a\n"
             "analysis: %s\n"
             "run: {folder: %s, slots: 2}\n",
             folder, env("BRINK_TEST_MODEL"), analysis, folder);
}

Test(resume_subset, subset_resumes_after_kill_9_with_identical_records) {
  const char *an = "{method: subset, samples: 60}";
  write_study("ref.yaml", "ref", an);
  write_study("k.yaml", "k", an);
  kill_and_resume("ref.yaml", "ref", "k.yaml", "k", 9001, 3);
  char *canon = canonical_records("k");
  cr_assert(strstr(canon, "ss/l0/0\t") && strstr(canon, "ss/l1/s1/0\t") &&
                strstr(canon, "ss/l2/s9/"),
            "%s", canon);
  char *json = read_file("k/report.json");
  cr_assert(strstr(json, "\"ci_method\": \"subset genealogy (lognormal)\""),
            "%s", json);
}

Test(resume_subset, cross_entropy_resumes_after_kill_9_with_identical_records) {
  const char *an = "{method: cross-entropy, samples: 40, max_evaluations: 240, "
                   "target_cov: 0.001}";
  write_study("ref.yaml", "ref", an);
  write_study("k.yaml", "k", an);
  kill_and_resume("ref.yaml", "ref", "k.yaml", "k", 4711, 3);
  char *canon = canonical_records("k");
  cr_assert_eq(count_lines(canon), 240);
  cr_assert(strstr(canon, "ce/s0/0\t") && strstr(canon, "ce/final/0\t"), "%s",
            canon);
}
