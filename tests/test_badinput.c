/*
 * The catalogue of bad inputs: each is refused before anything runs, with
 * a message naming file:line:col where there is one, exit code 2, and
 * nothing written (no run folder, or the records left byte for byte as
 * they were). A torn last line of the records is the one repair brink
 * makes: it is dropped, and the run says so. The inputs that once made a
 * fuzz target fail (tests/fixtures/fuzz-regressions/) and the fuzz seed
 * corpora (fuzz/corpus/) are replayed through the fuzz targets' code.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <dirent.h>
#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mount.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

/* The fuzz targets, under names of their own. */
#define BK_FUZZ_ENTRY fuzz_expr_one
#include "../fuzz/fuzz_expr.c"
#undef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY fuzz_template_one
#include "../fuzz/fuzz_template.c"
#undef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY fuzz_extract_one
#include "../fuzz/fuzz_extract.c"
#undef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY fuzz_study_one
#include "../fuzz/fuzz_study.c"
#undef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY fuzz_records_one
#include "../fuzz/fuzz_records.c"
#undef BK_FUZZ_ENTRY

#include "helpers/itest.h"

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "umount '%s/ro' 2>/dev/null", dir);
  cr_assert(system(cmd) >= 0);
  itest_teardown();
}

TestSuite(badinput, .init = itest_setup, .fini = teardown, .timeout = 120);

/* A good study of two normal inputs through the test model, with `subst`
 * replacing the text `from` (when given) to spoil it. */
static void write_study(const char *from, const char *to) {
  write_file("deck.txt", "x1 = {{ a : %%.17g }}\nx2 = {{ b }}\nbeta = 1.5\n");
  char text[4096];
  snprintf(text, sizeof text,
           "name: bad\n"
           "seed: 77\n"
           "variables:\n"
           "  a: {type: normal, mean: 0, sd: 1}\n"
           "  b: {type: normal, mean: 0, sd: 1}\n"
           "model:\n"
           "  files: [{template: deck.txt, to: in.txt}]\n"
           "  command: ['%s', in.txt]\n"
           "  timeout: 5\n"
           "  outputs:\n"
           "    g: {file: out.txt, pattern: 'result: g = (\\S+)'}\n"
           "limit_state: g\n"
           "analysis: {method: random, samples: 20}\n"
           "run: {folder: out, slots: 2}\n",
           env("BRINK_TEST_MODEL"));
  if (from) {
    char *at = strstr(text, from);
    cr_assert(at, "'%s' not in the study", from);
    char fixed[4096];
    snprintf(fixed, sizeof fixed, "%.*s%s%s", (int)(at - text), text, to,
             at + strlen(from));
    write_file("s.yaml", "%s", fixed);
  } else {
    write_file("s.yaml", "%s", text);
  }
}

/* Runs the study, expecting exit 2, the message `want` on stderr (a
 * fragment, location included), and no run folder. */
static void refused(const char *want) {
  int rc = brink("run s.yaml");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, want), "wanted '%s' in:\n%s", want, err);
  cr_assert(!exists("out"), "a run folder was made: %s", err);
}

Test(badinput, malformed_yaml_names_line_and_column) {
  write_study("  b: {type: normal, mean: 0, sd: 1}\n",
              "  b: {type: normal, mean: 0, sd: 1\n");
  refused("s.yaml:6:6: malformed YAML: did not find expected ',' or '}' "
          "while parsing a flow mapping");
}

Test(badinput, duplicated_key_names_both_lines) {
  write_study("seed: 77\n", "seed: 77\nseed: 78\n");
  refused("s.yaml:3:1: duplicate key 'seed' in the study file (first given "
          "on line 2)");
}

Test(badinput, wrong_types_are_named) {
  write_study("samples: 20", "samples: twenty");
  refused("s.yaml:13:37: analysis.samples must be a number, got 'twenty'");
  write_study("timeout: 5", "timeout: [5]");
  refused("s.yaml:9:12: model.timeout must be a number, got a list");
  write_study("name: bad", "name: {a: 1}");
  refused("s.yaml:1:7: name must be a text, got a mapping");
}

Test(badinput, impossible_distribution_parameters) {
  write_study("mean: 0, sd: 1}\n  b", "mean: 0, sd: -1}\n  b");
  refused("s.yaml:4:30: variable 'a' (normal): ");
  write_study("a: {type: normal, mean: 0, sd: 1}",
              "a: {type: uniform, lower: 2, upper: 1}");
  refused("s.yaml:4:");
}

Test(badinput, correlation_matrix_not_positive_definite) {
  write_study("  b: {type: normal, mean: 0, sd: 1}\n",
              "  b: {type: normal, mean: 0, sd: 1}\n"
              "  c: {type: normal, mean: 0, sd: 1}\n"
              "correlations:\n"
              "  - [a, b, 0.9]\n"
              "  - [b, c, 0.9]\n"
              "  - [a, c, -0.9]\n");
  refused("s.yaml:8:3: correlations: the correlation matrix is not "
          "positive definite (leading minor 3)");
}

Test(badinput, unknown_name_in_a_template) {
  write_study(NULL, NULL);
  write_file("deck.txt", "x1 = {{ a }}\nx2 = {{ 2*bb : %%.6e }}\n");
  refused("deck.txt:2:11: unknown name 'bb' (did you mean 'b'?); known "
          "names: a, b, _index");
}

Test(badinput, unknown_name_in_the_limit_state) {
  write_study("limit_state: g", "limit_state: \"g - 0.1*aa\"");
  refused("s.yaml:12:23: limit_state: unknown name 'aa' (did you mean "
          "'a'?); known names: a, b, g");
}

Test(badinput, invalid_regex_points_into_the_pattern) {
  write_study("(\\S+)'}", "(\\S+'}");
  refused("s.yaml:11:");
  cr_assert(strstr(read_file("err.txt"),
                   "invalid pattern for output 'g': missing closing "
                   "parenthesis"),
            "%s", read_file("err.txt"));
}

Test(badinput, model_command_missing_or_not_executable) {
  write_study(env("BRINK_TEST_MODEL"), "/nonexistent/solver");
  refused("s.yaml:8:13: cannot run '/nonexistent/solver': No such file or "
          "directory");
  write_file("solver.sh", "#!/bin/sh\necho 1\n");
  char p[600];
  snprintf(p, sizeof p, "%s/solver.sh", dir);
  cr_assert_eq(chmod(p, 0644), 0);
  write_study(env("BRINK_TEST_MODEL"), p);
  if (access(p, X_OK) == 0) {
    /* root may execute a file without x bits only if one is set; none is,
     * so access() refuses even for root. */
    cr_skip_test("access(X_OK) allows a file without execute bits here");
  }
  refused("cannot run '");
  cr_assert(strstr(read_file("err.txt"), "Permission denied"), "%s",
            read_file("err.txt"));
  write_study("command: ['", "command: ['nosuch-solver-xyz', '");
  refused("s.yaml:8:13: program 'nosuch-solver-xyz' is not on PATH");
}

/* A read-only file system (a tmpfs mounted read-only), or without the
 * rights to mount one, a folder without write permission. */
static int make_read_only_dir(void) {
  char p[600];
  snprintf(p, sizeof p, "%s/ro", dir);
  cr_assert_eq(mkdir(p, 0755), 0);
  if (mount("tmpfs", p, "tmpfs", MS_RDONLY, "size=64k") == 0)
    return 1;
  cr_assert_eq(chmod(p, 0555), 0);
  return access(p, W_OK) != 0;
}

Test(badinput, run_folder_not_writable) {
  if (!make_read_only_dir())
    cr_skip_test("cannot make a read-only folder here");
  write_study("folder: out", "folder: ro/out");
  int rc = brink("run s.yaml");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "cannot create the run folder"), "%s", err);
  cr_assert(!exists("ro/out"));
  /* The folder exists but cannot be written. */
  write_study("folder: out", "folder: ro");
  rc = brink("run s.yaml");
  err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "cannot write in the run folder"), "%s", err);
}

/* The listing of the run folder with sizes, to tell that nothing was
 * written. */
static char *folder_state(void) {
  char cmd[800];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && (find out -printf '%%p %%s\\n' | LC_ALL=C sort; "
           "md5sum out/records.log) > state.txt",
           dir);
  cr_assert_eq(system(cmd), 0);
  return read_file("state.txt");
}

Test(badinput, records_from_another_study_are_refused) {
  write_study(NULL, NULL);
  cr_assert_eq(brink("run s.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *before = folder_state();
  write_study("mean: 0, sd: 1}\n  b", "mean: 0.5, sd: 1}\n  b");
  int rc = brink("run s.yaml");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "were made by a different study: study changed"), "%s",
            err);
  cr_assert_str_eq(folder_state(), before);
}

/* Flips one byte of the record on line `line` (1-based, counted in the
 * file) without changing its length. */
static void damage_line(int line) {
  char *log = read_file("out/records.log");
  char *p = log;
  for (int i = 1; i < line; i++)
    p = strchr(p, '\n') + 1;
  char *tab = strchr(p, '\t');
  cr_assert(tab);
  tab[3] = tab[3] == '1' ? '2' : '1'; /* inside the status or attempts */
  write_file("out/records.log", "%s", log);
}

Test(badinput, bad_checksum_in_the_middle_is_refused_naming_the_line) {
  write_study(NULL, NULL);
  cr_assert_eq(brink("run s.yaml --quiet"), 0, "%s", read_file("err.txt"));
  /* Line 10 is the first record: 9 header lines before it. */
  damage_line(14);
  char *before = folder_state();
  int rc = brink("run s.yaml");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "out/records.log:14: damaged record (checksum "
                        "mismatch); the log cannot be resumed safely"),
            "%s", err);
  cr_assert_str_eq(folder_state(), before);
}

Test(badinput, torn_last_line_is_dropped_and_reported) {
  write_study(NULL, NULL);
  cr_assert_eq(brink("run s.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *log = read_file("out/records.log");
  size_t len = strlen(log);
  char p[600];
  snprintf(p, sizeof p, "%s/out/records.log", dir);
  cr_assert_eq(truncate(p, (off_t)(len - 7)), 0);
  int rc = brink("run s.yaml --quiet");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 0, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "dropped a torn last line ("), "%s", err);
  cr_assert(strstr(err, "that evaluation will run again"), "%s", err);
  /* The dropped evaluation ran again: as many lines as before. */
  char *again = read_file("out/records.log");
  int n0 = 0, n1 = 0;
  for (char *c = log; *c; c++)
    n0 += *c == '\n';
  for (char *c = again; *c; c++)
    n1 += *c == '\n';
  cr_assert_eq(n1, n0);
}

/* A link planted where a run folder goes (work/mc-0 -> ../../outside) is
 * removed, not followed: nothing is written outside the run folder. */
Test(badinput, run_folders_do_not_follow_symbolic_links) {
  write_study(NULL, NULL);
  char cmd[800];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && mkdir -p outside out/work && echo keep > outside/f && "
           "ln -s ../../outside out/work/mc-0 && ln -s ../../outside/f "
           "out/work/mc-1",
           dir);
  cr_assert_eq(system(cmd), 0);
  int rc = brink("run s.yaml --quiet");
  cr_assert_eq(rc, 0, "exit %d: %s", rc, read_file("err.txt"));
  snprintf(cmd, sizeof cmd, "cd '%s' && test \"$(ls outside)\" = f", dir);
  cr_assert_eq(system(cmd), 0, "something was written into outside/");
  cr_assert_str_eq(read_file("outside/f"), "keep\n");
}

/* ---- fuzz regressions and seeds -------------------------------------- */

static int replay_folder(const char *path,
                         int (*one)(const uint8_t *, size_t)) {
  DIR *d = opendir(path);
  if (!d)
    return 0;
  int n = 0;
  struct dirent *e;
  while ((e = readdir(d))) {
    if (e->d_name[0] == '.')
      continue;
    char p[1024];
    snprintf(p, sizeof p, "%s/%s", path, e->d_name);
    FILE *f = fopen(p, "rb");
    cr_assert(f, "%s", p);
    static uint8_t buf[1 << 20];
    size_t len = fread(buf, 1, sizeof buf, f);
    fclose(f);
    /* A copy of exactly the input's size, so that reading past its end
     * is caught under AddressSanitizer as in the fuzzer. */
    uint8_t *copy = malloc(len ? len : 1);
    memcpy(copy, buf, len);
    one(copy, len);
    free(copy);
    n++;
  }
  closedir(d);
  return n;
}

Test(badinput, fuzz_regressions_and_seeds_replay_cleanly) {
  static const struct {
    const char *name;
    int (*one)(const uint8_t *, size_t);
  } targets[] = {
      {"expr", fuzz_expr_one},       {"template", fuzz_template_one},
      {"extract", fuzz_extract_one}, {"study", fuzz_study_one},
      {"records", fuzz_records_one},
  };
  int total = 0;
  for (size_t i = 0; i < sizeof targets / sizeof targets[0]; i++) {
    char p[800];
    snprintf(p, sizeof p, "%s/fuzz-regressions/%s", env("BRINK_FIXTURES"),
             targets[i].name);
    total += replay_folder(p, targets[i].one);
    snprintf(p, sizeof p, "%s/fuzz/corpus/%s", env("BRINK_SOURCE_ROOT"),
             targets[i].name);
    int seeds = replay_folder(p, targets[i].one);
    cr_assert_gt(seeds, 0, "no seeds in %s", p);
    total += seeds;
  }
  cr_assert_gt(total, 10);
  char cmd[200];
  snprintf(cmd, sizeof cmd, "rm -rf /tmp/bk-fuzz-*-%ld*", (long)getpid());
  cr_assert_eq(system(cmd), 0);
}
