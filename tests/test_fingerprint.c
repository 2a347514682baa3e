/*
 * Integration tests of the model's fingerprint: every file the model reads
 * (templates, model.copy, model.watch) and the output of
 * model.version_command are digested into the records header, so that a
 * run resumed after one of them changed is refused, naming it, with exit 2
 * and the records untouched; and a resume with nothing changed ends with
 * the records of an uninterrupted run. Also the streaming file digest
 * against the one-shot digest of the same bytes.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>

#include "eval/fingerprint.h"
#include "study/study.h"

#include "helpers/itest.h"

TestSuite(fingerprint, .init = itest_setup, .fini = itest_teardown);

/* A model in a copied shell script: g = 2.5*sqrt(2) - a - b, after a
 * short sleep so that a run can be killed half way. */
static void write_model(const char *extra) {
  write_file("deck.txt", "a={{ a : %%.17g }}\nb={{ b : %%.17g }}\n");
  write_file("model.sh",
             "# %s\n"
             "sleep 0.02\n"
             ". ./in.txt\n"
             "awk -v a=\"$a\" -v b=\"$b\" 'BEGIN { printf \"g = %%.17g\\n\", "
             "2.5*sqrt(2) - a - b }' > out.txt\n",
             extra);
}

static void write_study(const char *name, const char *folder) {
  write_file(name,
             "name: fp\n"
             "seed: 5\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: deck.txt, to: in.txt}]\n"
             "  copy: [model.sh]\n"
             "  watch: [material.txt]\n"
             "  version_command: [sh, -c, 'cat version.txt']\n"
             "  command: [sh, model.sh]\n"
             "  outputs:\n"
             "    g: {file: out.txt, pattern: 'g = (\\S+)'}\n"
             "limit_state: g\n"
             "analysis: {method: random, samples: 120}\n"
             "run: {folder: %s, slots: 1}\n",
             folder);
}

/* The listing of the run folder's records, to tell that nothing was
 * written. */
static char *records_state(void) {
  char cmd[800];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && (ls -l out/records.log | awk '{print $5}'; "
           "md5sum out/records.log) > state.txt",
           dir);
  cr_assert_eq(system(cmd), 0);
  return read_file("state.txt");
}

/* Starts the study and kills brink once some runs are recorded. */
static void run_and_kill(void) {
  pid_t pid = brink_background("run s.yaml --quiet");
  for (int i = 0; i < 400; i++) {
    char *log = read_file("out/records.log");
    if (log && strstr(log, "\nmc/"))
      break;
    usleep(25000);
  }
  usleep(100000);
  kill(pid, SIGKILL);
  int st;
  waitpid(pid, &st, 0);
  usleep(150000);
}

static void setup_all(void) {
  write_model("version 1");
  write_file("material.txt", "E = 210000\n");
  write_file("version.txt", "solver 7.1\n");
  write_study("s.yaml", "out");
}

/* Changes a file after a killed run; the resume is refused naming it. */
static void expect_refused(const char *file, const char *text,
                           const char *named) {
  setup_all();
  run_and_kill();
  char *before = records_state();
  char *log = read_file("out/records.log");
  cr_assert(log && strstr(log, "\nmc/"), "the killed run recorded runs");
  write_file(file, "%s", text);
  int rc = brink("run s.yaml --quiet");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "were made by a different study"), "%s", err);
  cr_assert(strstr(err, named), "'%s' not named: %s", named, err);
  cr_assert_str_eq(records_state(), before);
}

Test(fingerprint, changed_copy_file_is_refused) {
  expect_refused("model.sh", "sleep 0.02\necho 'g = 1' > out.txt\n",
                 "copy model.sh changed");
}

Test(fingerprint, changed_watched_file_is_refused) {
  expect_refused("material.txt", "E = 200000\n", "watch material.txt changed");
}

Test(fingerprint, changed_version_output_is_refused) {
  expect_refused("version.txt", "solver 7.2\n",
                 "version_command output changed");
}

/* The header holds one part per file, by name. */
Test(fingerprint, parts_in_the_header) {
  setup_all();
  write_study("s.yaml", "out");
  cr_assert_eq(brink("run s.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *log = read_file("out/records.log");
  cr_assert(strstr(log, "# part template deck.txt "), "%s", log);
  cr_assert(strstr(log, "# part copy model.sh "), "%s", log);
  cr_assert(strstr(log, "# part watch material.txt "), "%s", log);
  cr_assert(strstr(log, "# part version_command output "), "%s", log);
}

/* Nothing changed: killed twice, resumed, the records and the numbers of
 * an uninterrupted run. */
Test(fingerprint, unchanged_resumes_bit_for_bit) {
  setup_all();
  write_study("r.yaml", "ref");
  kill_and_resume("r.yaml", "ref", "s.yaml", "out", 11, 2);
}

/* A version command that fails stops the run before anything is
 * written, naming the command. */
Test(fingerprint, failing_version_command_stops) {
  setup_all();
  cr_assert_eq(system("true"), 0);
  char p[600];
  snprintf(p, sizeof p, "%s/version.txt", dir);
  cr_assert_eq(unlink(p), 0);
  int rc = brink("run s.yaml --quiet");
  char *err = read_file("err.txt");
  cr_assert_neq(rc, 0);
  cr_assert(strstr(err, "model.version_command: sh exited with status 1"), "%s",
            err);
  cr_assert(!exists("out/records.log"), "nothing written");
}

/* The file digest is read in blocks and equals the digest of the bytes
 * (a file of several blocks with an odd tail). */
Test(fingerprint, streaming_digest_equals_one_shot) {
  size_t n = 3 * 65536 + 123;
  char *data = malloc(n);
  cr_assert(data);
  for (size_t i = 0; i < n; i++)
    data[i] = (char)(i * 2654435761u >> 13);
  char p[600];
  snprintf(p, sizeof p, "%s/big.bin", dir);
  FILE *f = fopen(p, "wb");
  cr_assert(f);
  cr_assert_eq(fwrite(data, 1, n, f), n);
  fclose(f);
  char a[33], b[33];
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_fingerprint_file(p, "big.bin", a, &err), 0, "%s", err.msg);
  bk_study_digest_hex(data, n, b);
  cr_assert_str_eq(a, b);
  bk_study_digest_hex("", 0, b);
  snprintf(p, sizeof p, "%s/empty.bin", dir);
  f = fopen(p, "wb");
  fclose(f);
  cr_assert_eq(bk_fingerprint_file(p, "empty.bin", a, &err), 0);
  cr_assert_str_eq(a, b);
  free(data);
}

/* Loads s.yaml; returns the code and the message in msg. */
static int load_study(char *msg, size_t cap) {
  char p[600];
  snprintf(p, sizeof p, "%s/s.yaml", dir);
  bk_study_t *s = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_study_load(p, &s, &err);
  snprintf(msg, cap, "%d:%d: %s", err.line, err.col, err.msg);
  bk_study_free(s);
  return rc;
}

/* model.watch and model.version_command refuse what cannot be
 * fingerprinted, at load time, naming the entry. */
Test(fingerprint, bad_watch_and_version_entries) {
  static const struct {
    const char *from, *to, *want;
  } cases[] = {
      {"watch: [material.txt]", "watch: [nothere.txt]",
       "9:11: cannot find 'nothere.txt' (model.watch names files"},
      {"watch: [material.txt]", "watch: [sub]",
       "9:11: 'sub' is a folder; model.watch takes files"},
      {"watch: [material.txt]", "watch: material.txt", "model.watch"},
      {"version_command: [sh, -c, 'cat version.txt']", "version_command: []",
       "model.version_command must name a program"},
      {"version_command: [sh, -c, 'cat version.txt']",
       "version_command: [no-such-solver-xyz, -v]",
       "program 'no-such-solver-xyz' is not on PATH"},
  };
  setup_all();
  char p[600];
  snprintf(p, sizeof p, "%s/sub", dir);
  cr_assert_eq(mkdir(p, 0755), 0);
  char *text = strdup(read_file("s.yaml"));
  for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
    char *at = strstr(text, cases[i].from);
    cr_assert(at, "%s", cases[i].from);
    write_file("s.yaml", "%.*s%s%s", (int)(at - text), text, cases[i].to,
               at + strlen(cases[i].from));
    char msg[1024];
    int rc = load_study(msg, sizeof msg);
    cr_expect_neq(rc, 0, "%s loaded", cases[i].to);
    cr_expect(strstr(msg, cases[i].want), "%s: %s", cases[i].to, msg);
  }
  write_file("s.yaml", "%s", text);
  char msg[1024];
  cr_expect_eq(load_study(msg, sizeof msg), 0, "%s", msg);
  free(text);
}

/* Shards and merge: the version command runs once per session (each
 * shard, then merge once), and a copied file changed before the merge is
 * named and nothing is merged. */
Test(fingerprint, shards_and_merge) {
  setup_all();
  char *text = strdup(read_file("s.yaml"));
  char *at = strstr(text, "'cat version.txt'");
  cr_assert(at);
  write_file("s.yaml", "%.*s'echo run >> calls.txt; cat version.txt'%s",
             (int)(at - text), text, at + strlen("'cat version.txt'"));
  free(text);
  cr_assert_eq(brink("run s.yaml --quiet --shard 0/2"), 0, "%s",
               read_file("err.txt"));
  cr_assert_eq(brink("run s.yaml --quiet --shard 1/2"), 0, "%s",
               read_file("err.txt"));
  write_model("version 2");
  int rc = brink("merge s.yaml --quiet");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 2, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "copy model.sh changed"), "%s", err);
  cr_assert(!exists("out/records.log"), "nothing merged");
  write_model("version 1");
  cr_assert_eq(brink("merge s.yaml --quiet"), 0, "%s", read_file("err.txt"));
  cr_assert_eq(count_lines(read_file("calls.txt")), 4, "%s",
               read_file("calls.txt"));
  char *log = read_file("out/records.log");
  cr_assert(strstr(log, "# part copy model.sh "), "%s", log);
}
