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

/* ---- Surrogate ------------------------------------------------------- */

/* Killed in the middle of learning (training batches "sg/t<i>/<j>") and of
 * the correction ("sg/c/<i>"), resumed: the same keys, inputs and
 * numbers as the uninterrupted run, the surrogate's fits included (they
 * are functions of the responses: fixed starts, one BLAS thread). */
Test(resume_methods, surrogate_resumes_after_kill_9_with_identical_records) {
  const char *an = "{method: surrogate, max_evaluations: 90, "
                   "target_cov: 0.02}";
  write_form_study("ref.yaml", "ref", an);
  write_form_study("k.yaml", "k", an);
  kill_and_resume("ref.yaml", "ref", "k.yaml", "k", 4711, 4);
  char *canon = canonical_records("k");
  cr_assert_eq(count_lines(canon), 90, "%s", canon);
  cr_assert(strstr(canon, "sg/t0/0\t") && strstr(canon, "sg/t1/1\t") &&
                strstr(canon, "sg/c/0\t"),
            "%s", canon);
  char *json = read_file("k/report.json");
  cr_assert(strstr(json, "\"training runs\""), "%s", json);
}

/* Every slot busy: with batch = run.slots = 3, a model that sleeps 0.4 s
 * runs three at a time in learning and in the correction alike; the
 * model logs its start and end times, and the largest number running
 * at once is counted from them. */
Test(resume_methods, surrogate_keeps_every_slot_busy) {
  write_file("deck.txt", "a={{ a : %%.17g }} b={{ b : %%.17g }}\n");
  write_file(
      "m.sh",
      "s=$(date +%%s.%%N); sleep 0.4\n"
      "set -- $(tr '=' ' ' < in.txt)\n"
      "awk -v a=\"$2\" -v b=\"$4\" "
      "'BEGIN { printf \"g = %%.17g\\n\", 3.2 - (a + b)/1.4142135623730951 }' "
      "> out.txt\n"
      "echo \"$s $(date +%%s.%%N)\" >> '%s/times.log'\n",
      dir);
  write_file("busy.yaml", "name: busy\n"
                          "seed: 5\n"
                          "variables:\n"
                          "  a: {type: normal, mean: 0, sd: 1}\n"
                          "  b: {type: normal, mean: 0, sd: 1}\n"
                          "model:\n"
                          "  files: [{template: deck.txt, to: in.txt}]\n"
                          "  copy: [m.sh]\n"
                          "  command: [sh, m.sh]\n"
                          "  outputs:\n"
                          "    g: {file: out.txt, pattern: 'g = (\\S+)'}\n"
                          "limit_state: g\n"
                          "analysis: {method: surrogate, max_evaluations: 45}\n"
                          "run: {folder: busy, slots: 3}\n");
  cr_assert_eq(brink("run busy.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *log = read_file("times.log");
  double t0[64], t1[64];
  int n = 0;
  for (char *p = log; n < 64 && sscanf(p, "%lf %lf", &t0[n], &t1[n]) == 2; n++)
    p = strchr(p, '\n') + 1;
  cr_assert_geq(n, 20, "%s", log);
  /* For each start, the runs running 0.1 s later (once its wave has
   * started; a run lasts 0.4 s). */
  int most = 0, full = 0;
  for (int i = 0; i < n; i++) {
    int k = 0;
    double tc = t0[i] + 0.1;
    for (int j = 0; j < n; j++)
      k += t0[j] <= tc && tc < t1[j];
    most = k > most ? k : most;
    full += k >= 3;
  }
  cr_expect_eq(most, 3, "at most %d runs at once", most);
  /* Runs start in waves of three, so most starts see a full wave. */
  cr_expect_geq(full, 2 * n / 3, "%d of %d starts with every slot busy", full,
                n);
}

/* The surrogate method is adaptive: shards are refused with the reason,
 * exit 2, nothing written. */
Test(resume_methods, surrogate_refuses_shards) {
  write_form_study("sh.yaml", "sh", "{method: surrogate}");
  cr_assert_eq(brink("run sh.yaml --shard 1/2"), 2, "%s", read_file("err.txt"));
  char *e = read_file("err.txt");
  cr_expect(strstr(e, "--shard works with the sampling methods (random, lhs, "
                      "sobol) only: surrogate chooses each batch from the "
                      "responses"),
            "%s", e);
  cr_expect(!exists("sh/records.log"));
}
