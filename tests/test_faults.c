/*
 * Faults of the world around brink: a disk that fills up while records are
 * written or decks rendered (a small tmpfs mounted by the test), and chaos:
 * brink killed with SIGKILL at 20 random moments during a run of a model
 * that crashes, hangs and prints garbage for some samples, resumed each
 * time. In every case the final records must equal those of an
 * uninterrupted run, key for key, with no key missing or twice, and no
 * model process may be left behind.
 *
 * The disk-full tests need to mount a tmpfs (root, or a user namespace
 * that allows it); elsewhere they are skipped.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mount.h>
#include <sys/stat.h>
#include <sys/statvfs.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include "helpers/itest.h"

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "umount '%s/fs' 2>/dev/null", dir);
  cr_assert(system(cmd) >= 0);
  itest_teardown();
}

TestSuite(faults, .init = itest_setup, .fini = teardown);

/* A study of two standard normal inputs through the test model in `mode`;
 * `extra_model` and `run` are added to the model and run sections. */
static void write_study(const char *name, const char *mode, int samples,
                        const char *extra_model, const char *run) {
  write_file(name,
             "seed: 4242\n"
             "variables:\n"
             "  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "model:\n"
             "  files: [{template: deck.txt, to: in.txt}]\n"
             "  command: ['%s', in.txt]\n"
             "  env: {BK_MODEL_MODE: '%s'}\n"
             "  outputs:\n"
             "    g: {file: out.txt, pattern: 'result: g = (\\S+)'}\n"
             "%s"
             "limit_state: g\n"
             "analysis: {method: random, samples: %d}\n"
             "run: {%s}\n",
             env("BRINK_TEST_MODEL"), mode, extra_model, samples, run);
}

/* Mounts a tmpfs of `kib` KiB at dir/fs; 0 when that is not allowed. */
static int mount_small_fs(int kib) {
  char p[600], opts[64];
  snprintf(p, sizeof p, "%s/fs", dir);
  cr_assert_eq(mkdir(p, 0755), 0);
  snprintf(opts, sizeof opts, "size=%dk", kib);
  return mount("tmpfs", p, "tmpfs", 0, opts) == 0;
}

/* Fills dir/fs with dir/fs/filler until `left` bytes stay free. */
static void fill_fs(long left) {
  char p[600];
  snprintf(p, sizeof p, "%s/fs", dir);
  struct statvfs sv;
  cr_assert_eq(statvfs(p, &sv), 0);
  long avail = (long)sv.f_bavail * (long)sv.f_bsize;
  cr_assert_gt(avail, left);
  snprintf(p, sizeof p, "%s/fs/filler", dir);
  FILE *f = fopen(p, "w");
  cr_assert(f);
  static char block[4096];
  for (long n = 0; n + (long)sizeof block <= avail - left; n += sizeof block)
    cr_assert_eq(fwrite(block, 1, sizeof block, f), sizeof block);
  cr_assert_eq(fclose(f), 0);
}

static void free_fs(void) {
  char p[600];
  snprintf(p, sizeof p, "%s/fs/filler", dir);
  cr_assert_eq(unlink(p), 0);
}

static void write_deck(size_t pad) {
  char p[600];
  snprintf(p, sizeof p, "%s/deck.txt", dir);
  FILE *f = fopen(p, "w");
  cr_assert(f);
  fputs("x1 = {{ a : %.17g }}\nx2 = {{ b : %.17g }}\nbeta = 1.5\n", f);
  for (size_t n = 0; n < pad; n += 64)
    fputs("# padding of a large input deck, as a mesh would make it.....\n", f);
  fclose(f);
}

/* Records on a file system that fills up mid-run: exit 3 with a message,
 * the records intact; after space is freed the resume ends with the same
 * records as a run that had space. */
Test(faults, disk_full_while_writing_records) {
  write_deck(0);
  write_study("ref.yaml", "ok", 200, "", "folder: ref, slots: 2");
  cr_assert_eq(brink("run ref.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *want = canonical_records("ref");
  cr_assert_eq(count_lines(want), 200);
  if (!mount_small_fs(256))
    cr_skip_test("cannot mount a tmpfs here (needs root)");
  /* Run folders elsewhere: only the records fill the small disk. */
  char run[700];
  snprintf(run, sizeof run, "folder: fs/out, slots: 2, scratch: '%s'", dir);
  write_study("full.yaml", "ok", 200, "", run);
  fill_fs(3 * 4096);
  int rc = brink("run full.yaml");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 3, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "cannot write records to"), "%s", err);
  cr_assert(strstr(err, "No space left on device"), "%s", err);
  cr_assert(strstr(err, "the records written so far are intact. Free space "
                        "and run `brink run full.yaml` again to resume"),
            "%s", err);
  int partial = count_lines(canonical_records("fs/out"));
  cr_assert(partial > 0 && partial < 200, "%d records before the disk filled",
            partial);
  free_fs();
  rc = brink("run full.yaml --quiet");
  cr_assert_eq(rc, 0, "exit %d: %s", rc, read_file("err.txt"));
  cr_assert_str_eq(canonical_records("fs/out"), want);
}

/* No room even for the records' header and lock: exit 3 as well. */
Test(faults, disk_full_before_the_records_exist) {
  write_deck(0);
  if (!mount_small_fs(256))
    cr_skip_test("cannot mount a tmpfs here (needs root)");
  char run[700];
  snprintf(run, sizeof run, "folder: fs/out, slots: 2, scratch: '%s'", dir);
  write_study("full.yaml", "ok", 20, "", run);
  char p[600];
  snprintf(p, sizeof p, "%s/fs/out", dir);
  cr_assert_eq(mkdir(p, 0755), 0);
  fill_fs(0);
  int rc = brink("run full.yaml");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 3, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "No space left on device"), "%s", err);
  free_fs();
  rc = brink("run full.yaml --quiet");
  cr_assert_eq(rc, 0, "exit %d: %s", rc, read_file("err.txt"));
  cr_assert_eq(count_lines(canonical_records("fs/out")), 20);
}

/* Run folders on a file system with no room for the decks: exit 3 naming
 * the deck; the resume after freeing space ends with the same records. */
Test(faults, disk_full_while_rendering_decks) {
  write_deck(200 * 1024);
  write_study("ref.yaml", "ok", 20, "  keep: all\n", "folder: ref, slots: 1");
  cr_assert_eq(brink("run ref.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *want = canonical_records("ref");
  cr_assert_eq(count_lines(want), 20);
  if (!mount_small_fs(8192))
    cr_skip_test("cannot mount a tmpfs here (needs root)");
  char run[700];
  snprintf(run, sizeof run, "folder: full, slots: 1, scratch: '%s/fs'", dir);
  write_study("full.yaml", "ok", 20, "  keep: all\n", run);
  /* Room for about five of the 200 kB decks of a batch. */
  fill_fs(1100 * 1024);
  int rc = brink("run full.yaml");
  char *err = read_file("err.txt");
  cr_assert_eq(rc, 3, "exit %d: %s", rc, err);
  cr_assert(strstr(err, "/in.txt: no space left on device"), "%s", err);
  cr_assert(strstr(err, "Free space and run `brink run full.yaml` again"), "%s",
            err);
  /* The runs made before the disk filled may be recorded; not all. */
  cr_assert_lt(count_lines(canonical_records("full")), 20);
  free_fs();
  rc = brink("run full.yaml --quiet");
  cr_assert_eq(rc, 0, "exit %d: %s", rc, read_file("err.txt"));
  cr_assert_str_eq(canonical_records("full"), want);
}

static int records_in(const char *folder) {
  char name[300];
  snprintf(name, sizeof name, "%s/records.log", folder);
  char *log = read_file(name);
  return log ? count_lines(log) - 9 : 0;
}

/* The run folders' file system fills up while models run, so models fail
 * for want of space: those failures are not recorded as model faults;
 * brink stops with exit 3, and the resume after freeing space ends with
 * the records of a run that had space. */
Test(faults, disk_fills_up_while_models_run) {
  write_deck(0);
  write_study("ref.yaml", "slow 0.02", 120, "  keep: none\n",
              "folder: ref, slots: 2");
  cr_assert_eq(brink("run ref.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *want = canonical_records("ref");
  cr_assert_eq(count_lines(want), 120);
  if (!mount_small_fs(4096))
    cr_skip_test("cannot mount a tmpfs here (needs root)");
  char run[700];
  snprintf(run, sizeof run, "folder: full, slots: 2, scratch: '%s/fs'", dir);
  write_study("full.yaml", "slow 0.02", 120, "  keep: none\n", run);
  pid_t pid = brink_background("run full.yaml");
  for (int i = 0; i < 1000 && records_in("full") < 10; i++)
    usleep(10000);
  cr_assert_geq(records_in("full"), 10);
  /* Take every free byte, and every byte freed after (brink deletes the
   * files of finished runs) until brink stops. */
  char p[600];
  snprintf(p, sizeof p, "%s/fs/filler", dir);
  int fd = open(p, O_WRONLY | O_CREAT | O_TRUNC, 0644);
  cr_assert_geq(fd, 0);
  static char block[4096];
  int st;
  for (;;) {
    while (write(fd, block, sizeof block) == (ssize_t)sizeof block)
      ;
    if (waitpid(pid, &st, WNOHANG) == pid)
      break;
    usleep(2000);
  }
  close(fd);
  char *err = read_file("bg-err.txt");
  cr_assert(WIFEXITED(st) && WEXITSTATUS(st) == 3, "status %d: %s", st, err);
  cr_assert(strstr(err, "no space left") || strstr(err, "No space left"), "%s",
            err);
  cr_assert(strstr(err, "Free space and run `brink run full.yaml` again"), "%s",
            err);
  char *log = read_file("full/records.log");
  cr_assert(!strstr(log, "\texit-code\t") && !strstr(log, "\tno-") &&
                !strstr(log, "\tspawn-failed\t"),
            "a full disk was recorded as a model fault:\n%s", log);
  free_fs();
  int rc = brink("run full.yaml --quiet");
  cr_assert_eq(rc, 0, "exit %d: %s", rc, read_file("err.txt"));
  cr_assert_str_eq(canonical_records("full"), want);
}

/* Processes of this user whose working folder lies below `below`. */
static int processes_below(const char *below) {
  DIR *d = opendir("/proc");
  cr_assert(d);
  size_t n = strlen(below);
  int count = 0;
  struct dirent *e;
  while ((e = readdir(d))) {
    char *end;
    long pid = strtol(e->d_name, &end, 10);
    if (*end || pid <= 0)
      continue;
    char link[64], cwd[4096];
    snprintf(link, sizeof link, "/proc/%ld/cwd", pid);
    ssize_t k = readlink(link, cwd, sizeof cwd - 1);
    if (k <= 0)
      continue;
    cwd[k] = '\0';
    if ((size_t)k > n && strncmp(cwd, below, n) == 0 && cwd[n] == '/')
      count++;
  }
  closedir(d);
  return count;
}

/* kill -9 at 20 random moments during a run of a model that crashes,
 * hangs and prints garbage for 15% of the samples; resume each time. The
 * timeout is long enough that no normal run reaches it on a busy machine. */
Test(faults, chaos_kill_9_twenty_times_then_identical_records) {
  write_deck(0);
  const char *extra = "  timeout: 2\n"
                      "  retries: 1\n"
                      "  max_error_fraction: 0.5\n";
  write_study("ref.yaml", "chaos 0.15", 160, extra, "folder: ref, slots: 2");
  cr_assert_eq(brink("run ref.yaml --quiet"), 0, "%s", read_file("err.txt"));
  char *want = canonical_records("ref");
  cr_assert_eq(count_lines(want), 160);
  /* The chaos is there: each kind of fault occurs. */
  cr_assert(strstr(want, "\tsignal\t") && strstr(want, "\ttimeout\t") &&
                strstr(want, "\tnot-a-number\t"),
            "%s", want);

  write_study("k.yaml", "chaos 0.15", 160, extra, "folder: k, slots: 2");
  unsigned seed = (unsigned)time(NULL);
  cr_log_info("kill moments from seed %u", seed);
  srand(seed);
  int survived = 0;
  char work[600];
  snprintf(work, sizeof work, "%s/k/work", dir);
  for (int round = 0; round < 20; round++) {
    pid_t pid = brink_background("run k.yaml --quiet");
    usleep(50000 + (useconds_t)(rand() % 450000));
    kill(pid, SIGKILL);
    int st;
    waitpid(pid, &st, 0);
    if (WIFSIGNALED(st))
      survived++;
  }
  cr_assert_gt(survived, 10, "brink finished before most kills");
  int rc = brink("run k.yaml --quiet");
  cr_assert_eq(rc, 0, "exit %d: %s", rc, read_file("err.txt"));
  char *got = canonical_records("k");
  cr_assert_str_eq(got, want);
  /* No key twice in the log, none missing. */
  char cmd[800];
  snprintf(cmd, sizeof cmd,
           "cd '%s' && grep -v '^#' k/records.log | tail -n +2 | cut -f1 | "
           "LC_ALL=C sort | uniq -d | wc -l > dups.txt",
           dir);
  cr_assert_eq(system(cmd), 0);
  cr_assert_eq(atoi(read_file("dups.txt")), 0, "a key was recorded twice");
  /* Hanging models of the killed runs were stopped by the next run. */
  cr_assert_eq(processes_below(work), 0, "model processes left behind");
  char *a = read_file("ref/report.json"), *b = read_file("k/report.json");
  char *pa = strstr(a, "\"pf\""), *pb = strstr(b, "\"pf\"");
  cr_assert(pa && pb);
  cr_assert_eq(strncmp(pa, pb, (size_t)(strstr(pa, "\"evaluations\"") - pa)),
               0);
}
