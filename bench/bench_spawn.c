/*
 * Baseline for the executor benchmark: the least a program can do to run a
 * model N times with at most C running at once: posix_spawn each run in a
 * folder of its own (made with mkdir) with its standard output written to
 * a file there (standard error to /dev/null), and wait for it. No
 * templates, no extraction, no records, nothing deleted. Each run gets a
 * session of its own, as brink gives its models: where the kernel groups
 * processes by session for scheduling (autogroup, on by default in many
 * Linux builds), a loaded machine would otherwise give brink's models a
 * larger share of the CPU than this loop's, and the comparison would
 * measure that instead of brink's own work. Usage:
 * bench_spawn N C FOLDER PROGRAM [ARGS...]
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include <fcntl.h>
#include <spawn.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

extern char **environ;

int main(int argc, char **argv) {
  if (argc < 5) {
    fprintf(stderr, "usage: %s N C FOLDER PROGRAM [ARGS...]\n", argv[0]);
    return 2;
  }
  long n = atol(argv[1]), c = atol(argv[2]);
  const char *folder = argv[3];
  long started = 0, running = 0, failed = 0;
  posix_spawnattr_t attr;
  posix_spawnattr_init(&attr);
  posix_spawnattr_setflags(&attr, POSIX_SPAWN_SETSID);
  while (started < n || running > 0) {
    while (started < n && running < c) {
      char dir[4096];
      snprintf(dir, sizeof dir, "%s/%ld", folder, started);
      mkdir(dir, 0777);
      posix_spawn_file_actions_t fa;
      posix_spawn_file_actions_init(&fa);
      posix_spawn_file_actions_addchdir_np(&fa, dir);
      posix_spawn_file_actions_addopen(&fa, 1, "stdout",
                                       O_WRONLY | O_CREAT | O_TRUNC, 0666);
      posix_spawn_file_actions_addopen(&fa, 2, "/dev/null", O_WRONLY, 0);
      pid_t pid;
      if (posix_spawn(&pid, argv[4], &fa, &attr, argv + 4, environ) != 0)
        failed++;
      else
        running++;
      posix_spawn_file_actions_destroy(&fa);
      started++;
    }
    int st;
    if (running > 0 && wait(&st) > 0) {
      running--;
      failed += !(WIFEXITED(st) && WEXITSTATUS(st) == 0);
    }
  }
  printf("%ld runs, %ld failed\n", n, failed);
  return failed != 0;
}
