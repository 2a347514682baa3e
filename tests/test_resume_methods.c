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

static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-resume-methods-XXXXXX");
  cr_assert(mkdtemp(dir));
}

/* Texts returned by read_file, freed at teardown. */
static char *owned[256];
static int nowned;

static void teardown(void) {
  for (int i = 0; i < nowned; i++)
    free(owned[i]);
  nowned = 0;
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(resume_methods, .init = setup, .fini = teardown, .timeout = 300);

static const char *env(const char *name) {
  const char *v = getenv(name);
  cr_assert(v, "%s must be set", name);
  return v;
}

static void write_file(const char *name, const char *fmt, ...) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "w");
  cr_assert(f, "%s", p);
  va_list ap;
  va_start(ap, fmt);
  vfprintf(f, fmt, ap);
  va_end(ap);
  fclose(f);
}

static char *read_file(const char *name) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "r");
  if (!f)
    return NULL;
  size_t cap = 1 << 16, n = 0;
  char *buf = malloc(cap);
  size_t r;
  while ((r = fread(buf + n, 1, cap - n - 1, f)) > 0) {
    n += r;
    if (n + 1 >= cap)
      buf = realloc(buf, cap *= 2);
  }
  buf[n] = '\0';
  fclose(f);
  if (nowned < 256)
    owned[nowned++] = buf;
  return buf;
}

static int brink(const char *args) {
  char cmd[2048];
  snprintf(cmd, sizeof cmd, "cd '%s' && '%s' %s >out.txt 2>err.txt </dev/null",
           dir, env("BRINK_EXE"), args);
  int st = system(cmd);
  cr_assert(WIFEXITED(st));
  return WEXITSTATUS(st);
}

static pid_t brink_background(const char *args) {
  char cmd[2048];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && exec '%s' %s >>bg-out.txt 2>>bg-err.txt </dev/null", dir,
           env("BRINK_EXE"), args);
  pid_t pid = fork();
  cr_assert_geq(pid, 0);
  if (pid == 0) {
    execl("/bin/sh", "sh", "-c", cmd, (char *)NULL);
    _exit(127);
  }
  return pid;
}

/* The records of a log as comparable text: every line without '#', with
 * the columns that do not depend on timing or place (seconds, host, note,
 * checksum) removed, sorted by key. */
static char *canonical_records(const char *folder) {
  char cmd[1024];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && grep -v '^#' %s/records.log | tail -n +2 | "
           "awk -F'\\t' '{ s = $1 \"\\t\" $2 \"\\t\" $3; "
           "for (i = 6; i <= NF - 2; i++) s = s \"\\t\" $i; print s }' | "
           "LC_ALL=C sort > %s.canon",
           dir, folder, folder);
  cr_assert_eq(system(cmd), 0);
  char name[300];
  snprintf(name, sizeof name, "%s.canon", folder);
  return read_file(name);
}

static int count_lines(const char *s) {
  int n = 0;
  for (; *s; s++)
    n += *s == '\n';
  return n;
}

/* Runs `yaml` (folder `folder`) with kills at pseudo-random moments, then
 * to the end, and checks the records and the report's numbers against an
 * uninterrupted run in `ref`. */
static void kill_and_resume(const char *ref_yaml, const char *ref,
                            const char *yaml, const char *folder, unsigned seed,
                            int rounds) {
  char args[256];
  snprintf(args, sizeof args, "run %s --quiet", ref_yaml);
  cr_assert_eq(brink(args), 0, "%s", read_file("err.txt"));
  char *want = canonical_records(ref);
  snprintf(args, sizeof args, "run %s --quiet", yaml);
  for (int round = 0; round < rounds; round++) {
    pid_t pid = brink_background(args);
    seed = seed * 1103515245u + 12345u;
    usleep(200000 + (seed >> 8) % 500000);
    kill(pid, SIGKILL);
    int st;
    waitpid(pid, &st, 0);
    /* Model processes of the killed brink finish on their own. */
    usleep(150000);
  }
  int rc = brink(args);
  cr_assert_eq(rc, 0, "%s", read_file("err.txt"));
  char *got = canonical_records(folder);
  cr_assert_str_eq(got, want);
  char ra[300], rb[300];
  snprintf(ra, sizeof ra, "%s/report.json", ref);
  snprintf(rb, sizeof rb, "%s/report.json", folder);
  char *a = read_file(ra), *b = read_file(rb);
  char *pa = strstr(a, "\"pf\""), *pb = strstr(b, "\"pf\"");
  cr_assert(pa && pb);
  cr_assert_eq(strncmp(pa, pb, strstr(pa, "\"model_errors\"") - pa), 0,
               "%s\n---\n%s", a, b);
  char *da = strstr(a, "\"design_point\""), *db = strstr(b, "\"design_point\"");
  if (da || db) {
    cr_assert(da && db);
    cr_assert_eq(strncmp(da, db, strchr(da, '}') - da), 0);
  }
}

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
