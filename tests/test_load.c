/*
 * Load: many evaluations of a trivial external model with 50 variables,
 * a study with 10,000 variables evaluated in-process, and a model that
 * prints 100 MiB. Memory must stay flat: the peak resident size of brink
 * (getrusage of the child, which covers what it waited for too) is
 * measured at two sizes and may grow by little more than the records
 * index (under 50 bytes per evaluation) between them.
 *
 * BRINK_LOAD_SCALE multiplies the sizes (default 1: 500 and 2,000 model
 * evaluations, 900 and 3,600 in-process samples of 10,000 variables).
 * BRINK_LOAD_SCALE=500 runs 1e6 model evaluations (and 1.8e6 samples of
 * 10,000 variables: hours; run the tests one by one with --filter).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

static char dir[256];
static char *owned[64];
static int nowned;

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-load-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  for (int i = 0; i < nowned; i++)
    free(owned[i]);
  nowned = 0;
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(load, .init = setup, .fini = teardown, .timeout = 3600);

static const char *env(const char *name) {
  const char *v = getenv(name);
  cr_assert(v, "%s must be set", name);
  return v;
}

static double scale(void) {
  const char *s = getenv("BRINK_LOAD_SCALE");
  double v = s ? atof(s) : 1.0;
  return v > 0 ? v : 1.0;
}

static FILE *open_file(const char *name) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "w");
  cr_assert(f, "%s", p);
  return f;
}

static char *read_file(const char *name) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "r");
  if (!f)
    return NULL;
  size_t cap = 1 << 16, n = 0, r;
  char *buf = malloc(cap);
  while ((r = fread(buf + n, 1, cap - n - 1, f)) > 0) {
    n += r;
    if (n + 1 >= cap)
      buf = realloc(buf, cap *= 2);
  }
  buf[n] = '\0';
  fclose(f);
  if (nowned < 64)
    owned[nowned++] = buf;
  return buf;
}

/* Runs `brink run NAME --quiet` in dir; returns the exit status and the
 * peak resident size in KiB. */
static int brink_run(const char *name, long *peak_kib, double *seconds) {
  char out[600], err[600];
  snprintf(out, sizeof out, "%s/out.txt", dir);
  snprintf(err, sizeof err, "%s/err.txt", dir);
  struct timespec t0, t1;
  clock_gettime(CLOCK_MONOTONIC, &t0);
  pid_t pid = fork();
  cr_assert_geq(pid, 0);
  if (pid == 0) {
    /* Under AddressSanitizer freed memory waits in a quarantine (256 MB by
     * default) that would look like growth; keep it small. Other builds
     * ignore the variable. */
    char asan[1024];
    const char *o = getenv("ASAN_OPTIONS");
    snprintf(asan, sizeof asan, "%s%squarantine_size_mb=1", o ? o : "",
             o && *o ? ":" : "");
    setenv("ASAN_OPTIONS", asan, 1);
    if (chdir(dir) != 0 || !freopen(out, "w", stdout) ||
        !freopen(err, "w", stderr))
      _exit(126);
    execl(env("BRINK_EXE"), "brink", "run", name, "--quiet", (char *)NULL);
    _exit(127);
  }
  int st;
  struct rusage ru;
  cr_assert_eq(wait4(pid, &st, 0, &ru), pid);
  clock_gettime(CLOCK_MONOTONIC, &t1);
  *peak_kib = ru.ru_maxrss;
  if (seconds)
    *seconds = (double)(t1.tv_sec - t0.tv_sec) +
               1e-9 * (double)(t1.tv_nsec - t0.tv_nsec);
  cr_assert(WIFEXITED(st));
  return WEXITSTATUS(st);
}

static long json_count(const char *folder, const char *key) {
  char name[300], pat[64];
  snprintf(name, sizeof name, "%s/report.json", folder);
  char *j = read_file(name);
  cr_assert(j, "no %s", name);
  snprintf(pat, sizeof pat, "\"%s\": ", key);
  char *p = strstr(j, pat);
  cr_assert(p, "no %s in %s", key, name);
  return atol(p + strlen(pat));
}

/* A trivial external model (the test model, one process per evaluation)
 * with 50 standard normal variables. */
static void write_model_study(const char *name, long samples) {
  FILE *f = open_file("deck50.txt");
  for (int i = 0; i < 50; i++)
    fprintf(f, "x%d = {{ v%d : %%.17g }}\n", i, i);
  fputs("beta = 3\n", f);
  fclose(f);
  f = open_file(name);
  fprintf(f, "seed: 11\nvariables:\n");
  for (int i = 0; i < 50; i++)
    fprintf(f, "  v%d: {type: normal, mean: 0, sd: 1}\n", i);
  fprintf(f,
          "model:\n"
          "  files: [{template: deck50.txt, to: in.txt}]\n"
          "  command: ['%s', in.txt]\n"
          "  outputs:\n"
          "    g: {stdout: true, pattern: '^result: g = (\\S+)'}\n"
          "  keep: none\n"
          "limit_state: g\n"
          "analysis: {method: random, samples: %ld}\n"
          "run: {folder: %.*s, slots: 2}\n",
          env("BRINK_TEST_MODEL"), samples, (int)strlen(name) - 5, name);
  fclose(f);
}

Test(load, model_evaluations_with_50_variables_in_flat_memory) {
  long n1 = (long)(500 * scale()), n2 = 4 * n1;
  long peak1, peak2;
  double t1, t2;
  write_model_study("m1.yaml", n1);
  write_model_study("m2.yaml", n2);
  cr_assert_eq(brink_run("m1.yaml", &peak1, &t1), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink_run("m2.yaml", &peak2, &t2), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(json_count("m1", "evaluations"), n1);
  cr_assert_eq(json_count("m2", "evaluations"), n2);
  cr_assert_eq(json_count("m2", "model_errors"), 0);
  /* The records of m2 hold about 1 kB per evaluation; memory may grow by
   * the index only (under 50 bytes each, 100 allowed) and 2 MiB. */
  long allowed = peak1 + (n2 - n1) * 100 / 1024 + 2048;
  cr_log_info("model load: %ld evaluations %.1f s peak %ld KiB; %ld "
              "evaluations %.1f s peak %ld KiB",
              n1, t1, peak1, n2, t2, peak2);
  fprintf(stderr,
          "load: model, 50 variables: %ld evaluations peak %ld KiB (%.0f/s); "
          "%ld evaluations peak %ld KiB (%.0f/s)\n",
          n1, peak1, (double)n1 / t1, n2, peak2, (double)n2 / t2);
  cr_assert_leq(peak2, allowed, "peak %ld KiB at %ld, %ld KiB at %ld", peak1,
                n1, peak2, n2);
}

static void write_wide_study(const char *name, long samples) {
  FILE *f = open_file(name);
  fprintf(f, "seed: 12\nvariables:\n");
  for (int i = 0; i < 10000; i++)
    fprintf(f, "  v%d: {type: normal, mean: 0, sd: 1}\n", i);
  fprintf(f,
          "limit_state: \"3 - (v0 + v4999 + v9999) / sqrt(3)\"\n"
          "analysis: {method: lhs, samples: %ld, replicates: 2}\n"
          "run: {folder: %.*s}\n",
          samples, (int)strlen(name) - 5, name);
  fclose(f);
}

Test(load, ten_thousand_variables_in_process_in_flat_memory) {
  /* Above 900 samples (450 per replicate) the chunks of points, 419 of
   * 10,000 variables, are full: from there memory must not grow. */
  long n1 = (long)(900 * scale()), n2 = 4 * n1;
  long peak1, peak2;
  double t1, t2;
  write_wide_study("w1.yaml", n1);
  write_wide_study("w2.yaml", n2);
  cr_assert_eq(brink_run("w1.yaml", &peak1, &t1), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink_run("w2.yaml", &peak2, &t2), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(json_count("w2", "evaluations"), n2);
  fprintf(stderr,
          "load: 10000 variables in-process: %ld samples peak %ld KiB "
          "(%.1f s); %ld samples peak %ld KiB (%.1f s)\n",
          n1, peak1, t1, n2, peak2, t2);
  cr_assert_leq(peak2, peak1 + peak1 / 10 + 2048,
                "peak %ld KiB at %ld samples, %ld KiB at %ld", peak1, n1, peak2,
                n2);
}

static void write_bigout_study(const char *name, int mib) {
  FILE *f = open_file(name);
  fprintf(f,
          "seed: 13\n"
          "variables:\n"
          "  a: {type: normal, mean: 0, sd: 1}\n"
          "  b: {type: normal, mean: 0, sd: 1}\n"
          "model:\n"
          "  command: ['%s', 'x1=0.5', 'x2=-0.25', 'mode=bigout %d']\n"
          "  outputs:\n"
          "    g: {stdout: true, pattern: '^result: g = (\\S+)', match: "
          "last}\n"
          "    n: {stdout: true, pattern: '^result: n = (\\S+)'}\n"
          "  keep: none\n"
          "limit_state: g + 0*a + 0*b\n"
          "analysis: {method: random, samples: 2}\n"
          "run: {folder: %.*s, slots: 1}\n",
          env("BRINK_TEST_MODEL"), mib, (int)strlen(name) - 5, name);
  fclose(f);
}

/* 100 MiB on stdout, read through the file the executor writes it to:
 * memory stays that of a 1 MiB output. */
Test(load, model_printing_100_mb_is_parsed_in_bounded_memory) {
  long peak1, peak100;
  write_bigout_study("b1.yaml", 1);
  write_bigout_study("b100.yaml", 100);
  cr_assert_eq(brink_run("b1.yaml", &peak1, NULL), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink_run("b100.yaml", &peak100, NULL), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(json_count("b100", "model_errors"), 0);
  cr_assert_eq(json_count("b100", "failures"), 0);
  /* g = 2 - (0.5 - 0.25)/sqrt(2) > 0 in both evaluations. */
  char *log = read_file("b100/records.log");
  cr_assert(strstr(log, "\tok\t"), "%s", log);
  fprintf(stderr, "load: 100 MiB output: peak %ld KiB (1 MiB: %ld KiB)\n",
          peak100, peak1);
  cr_assert_leq(peak100, peak1 + 8192, "peak %ld KiB for 100 MiB, %ld for 1",
                peak100, peak1);
}
