/*
 * The fixture and helpers of the integration tests that run the brink
 * executable on studies in a temporary folder: files in and out, brink in
 * the foreground or background, records in a comparable form, and kill -9
 * followed by resume. Include once per test file and name the suite with
 * TestSuite(NAME, .init = itest_setup, .fini = itest_teardown).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_TESTS_ITEST_H
#define BK_TESTS_ITEST_H

#include <criterion/criterion.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

static char dir[256];

static inline void itest_setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-itest-XXXXXX");
  cr_assert(mkdtemp(dir));
}

/* Texts returned by read_file, freed at teardown. */
static char *owned[1024];
static int nowned;

static inline void itest_teardown(void) {
  for (int i = 0; i < nowned; i++)
    free(owned[i]);
  nowned = 0;
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

static inline const char *env(const char *name) {
  const char *v = getenv(name);
  cr_assert(v, "%s must be set", name);
  return v;
}

static inline void write_file(const char *name, const char *fmt, ...) {
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

static inline char *read_file(const char *name) {
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
  if (nowned < 1024)
    owned[nowned++] = buf;
  return buf;
}

static inline int exists(const char *name) {
  char p[600];
  struct stat st;
  snprintf(p, sizeof p, "%s/%s", dir, name);
  return stat(p, &st) == 0;
}

static inline int brink(const char *args) {
  char cmd[2048];
  snprintf(cmd, sizeof cmd, "cd '%s' && '%s' %s >out.txt 2>err.txt </dev/null",
           dir, env("BRINK_EXE"), args);
  int st = system(cmd);
  cr_assert(WIFEXITED(st));
  return WEXITSTATUS(st);
}

static inline pid_t brink_background(const char *args) {
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
 * the columns that depend on timing or place (seconds, host, folder,
 * checksum) removed, sorted by key. The reason of a fault is kept. */
static inline char *canonical_records(const char *folder) {
  /* The text is kept in the test folder itself (FOLDER with '/' made '_'),
   * not below FOLDER, which may be on a file system a test filled up. */
  char name[300];
  snprintf(name, sizeof name, "%s.canon", folder);
  for (char *c = name; *c; c++)
    if (*c == '/')
      *c = '_';
  char cmd[1024];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && grep -v '^#' %s/records.log | tail -n +2 | "
           "awk -F'\\t' '{ s = $1 \"\\t\" $2 \"\\t\" $3; "
           "for (i = 6; i <= NF - 2; i++) s = s \"\\t\" $i; print s }' | "
           "LC_ALL=C sort > %s",
           dir, folder, name);
  cr_assert_eq(system(cmd), 0);
  return read_file(name);
}

static inline int count_lines(const char *s) {
  int n = 0;
  for (; *s; s++)
    n += *s == '\n';
  return n;
}

/* Runs `yaml` (folder `folder`) with kills at pseudo-random moments, then
 * to the end, and checks the records and the report's numbers against an
 * uninterrupted run in `ref`. */
static inline void kill_and_resume(const char *ref_yaml, const char *ref,
                                   const char *yaml, const char *folder,
                                   unsigned seed, int rounds) {
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

#endif
