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

TestSuite(badinput, .init = itest_setup, .fini = teardown);

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

/* ---- checks made at load time --------------------------------------- */

/* What brink prints for an error on line LINE of s.yaml at the first
 * `token` of that line: the location and message, the line itself and a
 * caret under the token. */
static const char *located(int line, const char *token, const char *msg) {
  char *text = read_file("s.yaml");
  const char *p = text;
  for (int i = 1; i < line; i++) {
    p = strchr(p, '\n');
    cr_assert(p, "s.yaml has no line %d", line);
    p++;
  }
  size_t len = strcspn(p, "\n");
  const char *at = strstr(p, token);
  cr_assert(at && at < p + len, "'%s' is not on line %d", token, line);
  int col = (int)(at - p) + 1;
  static char want[8192];
  snprintf(want, sizeof want, "brink: s.yaml:%d:%d: %s\n  %.*s\n  %*s^\n", line,
           col, msg, (int)len, p, col - 1, "");
  return want;
}

/* Both `check` and `run` refuse s.yaml with exit 2 and exactly `want` on
 * stderr, and neither makes the run folder `out`. */
static void refused_by_both(const char *want) {
  static const char *const cmds[] = {"check s.yaml", "run s.yaml"};
  for (int i = 0; i < 2; i++) {
    int rc = brink(cmds[i]);
    char *err = read_file("err.txt");
    cr_assert_eq(rc, 2, "%s: exit %d: %s", cmds[i], rc, err);
    cr_assert_str_eq(err, want, "%s", cmds[i]);
    cr_assert_str_eq(read_file("out.txt"), "", "%s", cmds[i]);
    cr_assert(!exists("out"), "%s made a run folder", cmds[i]);
  }
}

/* An in-process study of `vars` (a YAML flow mapping) with `analysis`. */
static void write_plain(const char *vars, const char *analysis) {
  write_file("s.yaml",
             "name: plain\n"
             "variables: %s\n"
             "limit_state: \"3 - a\"\n"
             "analysis: %s\n"
             "run: {folder: out}\n",
             vars, analysis);
}

#define ONE_VAR "{a: {type: normal, mean: 0, sd: 1}, c: 2}"

Test(badinput, every_variable_constant_is_refused_for_every_method) {
  static const char *const analyses[] = {
      "{method: random, samples: 10}",
      "{method: lhs, samples: 10}",
      "{method: sobol, samples: 16}",
      "{method: form}",
      "{method: importance}",
      "{method: cross-entropy}",
      "{method: subset}",
  };
  static const char *const names[] = {"random", "lhs",        "sobol",
                                      "form",   "importance", "cross-entropy",
                                      "subset"};
  for (int i = 0; i < 7; i++) {
    write_plain("{a: 1, c: {type: constant, value: 2}}", analyses[i]);
    char msg[300];
    snprintf(msg, sizeof msg,
             "every variable is a constant, so method %s has nothing random "
             "to work on; give at least one variable a distribution",
             names[i]);
    refused_by_both(located(2, "variables", msg));
  }
}

Test(badinput, sobol_with_more_variables_than_its_table) {
  /* BK_SOBOL_MAXDIM (21201) + 1 random variables. */
  char *vars = malloc(21202 * 48 + 16);
  size_t n = (size_t)sprintf(vars, "{");
  for (int i = 0; i <= 21201; i++)
    n += (size_t)sprintf(vars + n, "%sa%d: {type: normal, mean: 0, sd: 1}",
                         i ? ", " : "", i);
  sprintf(vars + n, "}");
  write_file("s.yaml",
             "variables: %s\n"
             "limit_state: \"3 - a0\"\n"
             "analysis: {method: sobol, samples: 16}\n"
             "run: {folder: out}\n",
             vars);
  free(vars);
  refused_by_both(located(3, "sobol",
                          "sobol supports at most 21201 random variables "
                          "(the study has 21202); use lhs or random"));
}

Test(badinput, sobol_with_more_points_per_replicate_than_its_indices) {
  write_plain(ONE_VAR, "{method: sobol, samples: 1e10, replicates: 2}");
  refused_by_both(located(
      4, "1e10",
      "sobol takes at most 4294967296 points per replicate (got 5000000000: "
      "analysis.samples 10000000000 over 2 replicates); give more "
      "replicates or fewer samples"));
}

Test(badinput, lhs_max_evaluations_below_one_replicate) {
  write_plain(ONE_VAR, "{method: lhs, samples: 100, replicates: 4, "
                       "max_evaluations: 10}");
  refused_by_both(located(
      4, "10}",
      "analysis.max_evaluations (10) is below one replicate (25 points: "
      "analysis.samples 100 over 4 replicates), so nothing would run; raise "
      "it"));
}

Test(badinput, form_max_evaluations_below_one_iteration) {
  write_plain(ONE_VAR, "{method: form, max_evaluations: 1}");
  refused_by_both(
      located(4, "1}",
              "analysis.max_evaluations (1) is below one FORM iteration (2 "
              "evaluations: the point and its forward differences), so the "
              "design-point search cannot start; raise it"));
  /* Importance sampling without a centre searches it with FORM. */
  write_plain(ONE_VAR, "{method: importance, max_evaluations: 2, "
                       "form: {differences: central}}");
  refused_by_both(
      located(4, "2,",
              "analysis.max_evaluations (2) is below one FORM iteration (3 "
              "evaluations: the point and its central differences), so the "
              "design-point search cannot start; raise it"));
}

Test(badinput, importance_center_outside_the_distribution) {
  write_plain("{a: {type: lognormal, mean: 3, sd: 1}}",
              "{method: importance, importance: {center: {a: -1}}}");
  refused_by_both(located(4, "-1",
                          "analysis.importance.center: a = -1 lies outside "
                          "the range of its lognormal distribution; give a "
                          "value it can take"));
}

Test(badinput, cross_entropy_needs_two_samples_and_room_for_two_batches) {
  write_plain(ONE_VAR, "{method: cross-entropy, samples: 1}");
  refused_by_both(located(4, "1}",
                          "cross-entropy needs analysis.samples of at least "
                          "2 (points per step)"));
  write_plain(ONE_VAR, "{method: cross-entropy, samples: 100, "
                       "max_evaluations: 150}");
  refused_by_both(located(
      4, "150}",
      "analysis.max_evaluations (150) leaves no room for cross-entropy "
      "with 100 points per step: one adaptation step and one final batch "
      "need 200; raise it"));
  /* The default max_evaluations (200000): the error points at samples. */
  write_plain(ONE_VAR, "{method: cross-entropy, samples: 150000}");
  refused_by_both(located(
      4, "150000}",
      "analysis.max_evaluations (200000, the default) leaves no room for "
      "cross-entropy with 150000 points per step: one adaptation step and "
      "one final batch need 300000; give a larger analysis.max_evaluations "
      "or fewer samples"));
}

Test(badinput, subset_needs_seeds_and_room_for_one_level) {
  write_plain(ONE_VAR, "{method: subset, samples: 4}");
  refused_by_both(
      located(4, "4}",
              "subset simulation needs analysis.samples * analysis.subset.p0 "
              "between 1 and the samples (got 4 samples, p0 0.1); give more "
              "samples"));
  write_plain(ONE_VAR, "{method: subset, samples: 1, subset: {p0: 0.5}}");
  refused_by_both(
      located(4, "1,",
              "subset simulation needs analysis.samples * analysis.subset.p0 "
              "between 1 and the samples (got 1 samples, p0 0.5); give more "
              "samples"));
  write_plain(ONE_VAR, "{method: subset, samples: 100, max_evaluations: 50}");
  refused_by_both(
      located(4, "50}",
              "analysis.max_evaluations (50) is below one level of subset "
              "simulation (analysis.samples, 100 points); raise it"));
}

/* The model section: files that brink writes into each run folder. */
Test(badinput, model_files_that_cannot_go_into_a_run_folder) {
  char p[600];
  snprintf(p, sizeof p, "%s/adir", dir);
  cr_assert_eq(mkdir(p, 0755), 0);
  write_file("mesh.inp", "*NODE\n");
  write_study("  command:", "  copy: [adir]\n  command:");
  refused_by_both(located(8, "adir",
                          "'adir' is a folder; model.copy takes files (name "
                          "each file the model needs)"));
  write_study("to: in.txt}", "to: sub/in.txt}");
  refused_by_both(located(7, "sub/in.txt",
                          "'sub/in.txt' must be a plain file name: decks are "
                          "written at the top of each run folder, which has "
                          "no subfolders"));
  write_study("to: in.txt}]", "to: in.txt}, {template: deck.txt, to: in.txt}]");
  refused_by_both(located(7, "in.txt}]",
                          "two files named 'in.txt' go into each run folder "
                          "(the deck from 'deck.txt' is one); give each its "
                          "own name"));
  write_study("to: in.txt}", "to: stdout}");
  refused_by_both(located(7, "stdout",
                          "'stdout' is the file brink captures the model's "
                          "standard output into; choose another name"));
  write_study("to: in.txt}]\n", "to: mesh.inp}]\n  copy: [mesh.inp]\n");
  refused_by_both(located(8, "mesh.inp]",
                          "two files named 'mesh.inp' go into each run "
                          "folder (the deck from 'deck.txt' is one); give "
                          "each its own name"));
  snprintf(p, sizeof p, "%s/b", dir);
  cr_assert_eq(mkdir(p, 0755), 0);
  write_file("b/mesh.inp", "*NODE\n");
  write_study("  command:", "  copy: [mesh.inp, b/mesh.inp]\n  command:");
  refused_by_both(located(8, "b/mesh.inp",
                          "'mesh.inp' and 'b/mesh.inp' would both be copied "
                          "as 'mesh.inp' into each run folder; give each "
                          "file its own name"));
  /* A program run from the run folder must be a file that goes there. */
  write_study("command: ['", "command: [./solve.sh, '");
  refused_by_both(located(8, "./solve.sh",
                          "program './solve.sh' is run from each run folder, "
                          "but no file named 'solve.sh' goes there; give "
                          "the program's full path, or copy it with "
                          "model.copy and run it through its interpreter, "
                          "e.g. command: [sh, solve.sh]"));
  write_study("command: ['", "command: [./in.txt, '");
  refused_by_both(located(8, "./in.txt",
                          "program './in.txt' is the deck rendered from "
                          "'deck.txt', which is written without execute "
                          "permission; run it through its interpreter, e.g. "
                          "command: [sh, in.txt]"));
  write_study("command: ['", "command: [bin/solve, '");
  refused_by_both(located(8, "bin/solve",
                          "program 'bin/solve' would be looked for in a "
                          "subfolder of each run folder, and run folders "
                          "have none; give its full path"));
  /* Were already load-time checks; `check` refuses them too. */
  write_study("  command:", "  copy: [nosuch.inp]\n  command:");
  refused_by_both(located(8, "nosuch.inp",
                          "cannot find 'nosuch.inp' to copy into each run "
                          "folder"));
  write_study("template: deck.txt", "template: nosuch.txt");
  refused_by_both(located(7, "nosuch.txt",
                          "cannot read template 'nosuch.txt': no such file "
                          "or directory"));
}

/* --shard refusals depend on the study and the option: they come before
 * anything is written. */
Test(badinput, shard_refusals_write_nothing) {
  write_plain(ONE_VAR, "{method: form}");
  int rc = brink("run s.yaml --shard 0/2");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "brink: --shard works with the sampling methods "
                        "(random, lhs, sobol) only: form chooses"),
            "%s", err);
  cr_assert(!exists("out"));
  write_plain(ONE_VAR, "{method: random, samples: 10}");
  rc = brink("run s.yaml --shard 0/2");
  err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert_str_eq(err, "brink: --shard needs a study with a model section "
                        "(without one, a study runs in process and keeps no "
                        "records to merge)\n");
  cr_assert(!exists("out"));
}

/* Placeholders in the arguments are checked like those of a deck, at
 * their place in the study file; the program itself cannot hold one. */
Test(badinput, placeholders_in_the_command_are_checked_at_load) {
  write_study("in.txt]", "in.txt, '--load={{ 2*aa : %.6e }}']");
  refused_by_both(located(
      8, "aa",
      "model.command argument 2: unknown name 'aa' (did "
      "you mean 'a'?); known names: a, b, _index, _threads, _ranks, _cores"));
  write_study("in.txt]", "in.txt, '{{ a : %d }}']");
  refused_by_both(located(8, "%d",
                          "model.command argument 2: format '%d' converts "
                          "with 'd'; a number needs one of e E f F g G (for "
                          "a whole number write %.0f)"));
  write_study("command: ['", "command: ['{{ _folder }}/solve', '");
  refused_by_both(located(8, "'{{",
                          "the program '{{ _folder }}/solve' cannot hold a "
                          "placeholder: it is checked when the study is "
                          "loaded; put values in the arguments, e.g. "
                          "command: [solver, --load, '{{ q }}']"));
}
