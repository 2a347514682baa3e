/*
 * Integration tests of the brink command: real processes, exit codes,
 * messages, files written (or not), the JSON summary read back by an
 * independent JSON parser (Python's json module), and Ctrl-C.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-cli-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(cli, .init = setup, .fini = teardown);

static const char *exe(void) {
  const char *e = getenv("BRINK_EXE");
  cr_assert(e, "BRINK_EXE must be set");
  return e;
}

static void write_file(const char *name, const char *text) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "w");
  cr_assert(f);
  fputs(text, f);
  fclose(f);
}

static char *read_file(const char *name) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "r");
  if (!f)
    return NULL;
  static char buf[1 << 16];
  size_t n = fread(buf, 1, sizeof buf - 1, f);
  buf[n] = '\0';
  fclose(f);
  return buf;
}

/* Runs `brink ARGS` in the test folder, stdout and stderr to files;
 * returns the exit status. */
static int brink(const char *args) {
  char cmd[2048];
  snprintf(cmd, sizeof cmd, "cd '%s' && '%s' %s >out.txt 2>err.txt </dev/null",
           dir, exe(), args);
  int st = system(cmd);
  cr_assert(WIFEXITED(st));
  return WEXITSTATUS(st);
}

static int exists(const char *name) {
  char p[600];
  struct stat st;
  snprintf(p, sizeof p, "%s/%s", dir, name);
  return stat(p, &st) == 0;
}

static const char good[] =
    "name: shelf\n"
    "seed: 99\n"
    "variables:\n"
    "  load: {type: gumbel, mean: 2.0, cov: 0.25}\n"
    "  cap:  {type: lognormal, mean: 4.0, cov: 0.1}\n"
    "limit_state: cap - load\n"
    "analysis: {method: lhs, samples: 40000, replicates: 4, target_beta: 3.8}\n"
    "run: {folder: out/shelf}\n";

Test(cli, help_and_version) {
  cr_assert_eq(brink("--help"), 0);
  char *out = read_file("out.txt");
  cr_assert(strstr(out, "usage: brink COMMAND"));
  cr_assert(strstr(out, "run STUDY.yaml"));
  cr_assert_eq(brink("run --help"), 0);
  cr_assert(strstr(read_file("out.txt"), "usage: brink run STUDY.yaml"));
  cr_assert_eq(brink("help check"), 0);
  cr_assert(strstr(read_file("out.txt"), "usage: brink check"));
  cr_assert_eq(brink("--version"), 0);
  cr_assert(strncmp(read_file("out.txt"), "brink ", 6) == 0);
}

Test(cli, misuse_exits_2_with_a_hint) {
  cr_assert_eq(brink(""), 2);
  cr_assert_eq(brink("frobnicate"), 2);
  cr_assert(strstr(read_file("err.txt"), "unknown command 'frobnicate'"));
  cr_assert(strstr(read_file("err.txt"), "brink --help"));
  cr_assert_eq(brink("run"), 2);
  cr_assert_eq(brink("run a.yaml --fast"), 2);
  cr_assert(strstr(read_file("err.txt"), "unknown option '--fast'"));
}

Test(cli, bad_study_exits_2_names_location_and_writes_nothing) {
  write_file("bad.yaml", "variables:\n"
                         "  x: {type: normal, mean: 1, sd: 1}\n"
                         "limit_state: x - y\n"
                         "run: {folder: out/bad}\n");
  cr_assert_eq(brink("run bad.yaml"), 2);
  char *err = read_file("err.txt");
  cr_assert(strstr(err, "bad.yaml:3:18: limit_state: unknown name 'y'"), "%s",
            err);
  /* The offending line and a caret under the column. */
  cr_assert(strstr(err, "  limit_state: x - y\n                   ^"), "%s",
            err);
  cr_assert(!exists("out"), "nothing may be written");
}

Test(cli, run_writes_reports_with_the_json_keys) {
  write_file("shelf.yaml", good);
  cr_assert_eq(brink("run shelf.yaml --quiet"), 0, "%s", read_file("err.txt"));
  cr_assert(exists("out/shelf/report.json"));
  cr_assert(exists("out/shelf/report.txt"));
  /* Python's json module as an independent parser; the keys of DESIGN.md
   * section 3 with their types. */
  char cmd[2048];
  snprintf(cmd, sizeof cmd,
           "/usr/bin/python3 -c \"import json,sys\n"
           "d=json.load(open(sys.argv[1]))\n"
           "for k in ['pf','beta','cov','ci_level']: assert "
           "isinstance(d[k],float), k\n"
           "for k in ['evaluations','failures','model_errors','excluded',"
           "'seed']: assert isinstance(d[k],int), k\n"
           "for k in ['ci','pf_bounds']: assert len(d[k])==2, k\n"
           "assert d['method']=='lhs' and d['ci_method']=='student-t'\n"
           "assert d['evaluations']==40000 and d['seed']==99\n"
           "assert d['ci'][0] <= d['pf'] <= d['ci'][1]\n"
           "assert d['meets_target_beta'] is False\n"
           "\" '%s/out/shelf/report.json'",
           dir);
  cr_assert_eq(system(cmd), 0, "report.json lacks keys");
  cr_assert_eq(brink("report out/shelf"), 0);
  char *text = read_file("out.txt");
  cr_assert(strstr(text, "failure probability"));
  cr_assert(strstr(text, "reliability index"));
  cr_assert(strstr(text, "licensed engineer"), "the caution is shown");
  cr_assert_eq(brink("report shelf.yaml --json"), 0);
  cr_assert(strstr(read_file("out.txt"), "\"pf\": "));
}

Test(cli, report_without_a_run_says_what_to_do) {
  cr_assert_eq(brink("report nowhere"), 2);
  cr_assert(strstr(read_file("err.txt"), "no finished result in nowhere"));
  cr_assert(strstr(read_file("err.txt"), "brink run"));
}

Test(cli, check_prints_the_model) {
  write_file("shelf.yaml", good);
  cr_assert_eq(brink("check shelf.yaml"), 0, "%s", read_file("err.txt"));
  char *out = read_file("out.txt");
  cr_assert(strstr(out, "load"));
  cr_assert(strstr(out, "gumbel"));
  cr_assert(strstr(out, "at the medians g = "));
  cr_assert(strstr(out, "4 replicates of 10000 points"));
  cr_assert(!exists("out"), "check writes nothing");
}

/* What `samples` means for the adaptive methods, and the likely total:
 * subset simulation runs `samples` per level, about log10(1/Pf) levels at
 * p0 = 0.1 (Au & Beck 2001). */
Test(cli, check_says_what_samples_means) {
  write_file("ss.yaml", "name: ss\n"
                        "variables:\n  a: {type: normal, mean: 0, sd: 1}\n"
                        "limit_state: 4 - a\n"
                        "analysis: {method: subset, samples: 2000}\n");
  cr_assert_eq(brink("check ss.yaml"), 0, "%s", read_file("err.txt"));
  char *out = read_file("out.txt");
  cr_assert(strstr(out, "2000 points per level (analysis.samples)"), "%s",
            out);
  cr_assert(strstr(out, "Pf 1e-4 takes about 4 levels = 8000 evaluations"),
            "%s", out);
  write_file("ce.yaml", "name: ce\n"
                        "variables:\n  a: {type: normal, mean: 0, sd: 1}\n"
                        "limit_state: 4 - a\n"
                        "analysis: {method: cross-entropy, samples: 300}\n");
  cr_assert_eq(brink("check ce.yaml"), 0, "%s", read_file("err.txt"));
  cr_assert(strstr(read_file("out.txt"),
                   "300 points per step (analysis.samples): up to 30 "
                   "adaptation steps"),
            "%s", read_file("out.txt"));
}

/* The first SIGINT stops cleanly: exit 3, a line saying how to resume, no
 * report; running again completes. */
Test(cli, interrupt_exits_3_and_says_how_to_resume) {
  write_file("long.yaml", "name: long\n"
                          "variables:\n"
                          "  a: {type: normal, mean: 10, sd: 1}\n"
                          "limit_state: a\n"
                          "analysis: {method: random, samples: 4e9}\n"
                          "run: {folder: out/long}\n");
  char cmd[2048];
  snprintf(cmd, sizeof cmd, "cd '%s' && exec '%s' run long.yaml >out.txt "
                            "2>err.txt </dev/null",
           dir, exe());
  pid_t pid = fork();
  cr_assert_geq(pid, 0);
  if (pid == 0) {
    execl("/bin/sh", "sh", "-c", cmd, (char *)NULL);
    _exit(127);
  }
  /* Wait until the run is under way (progress is printed as plain lines
   * only every 10 s, so poll for the run folder instead). */
  for (int i = 0; i < 200 && !exists("out/long"); i++)
    usleep(20000);
  usleep(200000);
  kill(pid, SIGINT);
  int st;
  waitpid(pid, &st, 0);
  cr_assert(WIFEXITED(st));
  cr_assert_eq(WEXITSTATUS(st), 3, "%s", read_file("err.txt"));
  cr_assert(strstr(read_file("err.txt"), "again to resume"),
            "%s", read_file("err.txt"));
  cr_assert(!exists("out/long/report.json"));
}
