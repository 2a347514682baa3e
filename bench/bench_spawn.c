/*
 * Baseline for the executor benchmark: spawns a program N times with at
 * most C running at once (fork, exec, waitpid), each in a folder of its
 * own with stdout and stderr to files, and nothing else: no templates, no
 * extraction, no records. Usage: bench_spawn N C FOLDER PROGRAM [ARGS...]
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

int main(int argc, char **argv) {
  if (argc < 5) {
    fprintf(stderr, "usage: %s N C FOLDER PROGRAM [ARGS...]\n", argv[0]);
    return 2;
  }
  long n = atol(argv[1]), c = atol(argv[2]);
  const char *folder = argv[3];
  long started = 0, running = 0, failed = 0;
  while (started < n || running > 0) {
    while (started < n && running < c) {
      char dir[4096];
      snprintf(dir, sizeof dir, "%s/%ld", folder, started);
      mkdir(dir, 0777);
      pid_t pid = fork();
      if (pid == 0) {
        if (chdir(dir) != 0)
          _exit(126);
        int fd = open("stdout", O_WRONLY | O_CREAT | O_TRUNC, 0666);
        int fe = open("stderr", O_WRONLY | O_CREAT | O_TRUNC, 0666);
        dup2(fd, 1);
        dup2(fe, 2);
        execvp(argv[4], argv + 4);
        _exit(127);
      }
      started++;
      running++;
    }
    int st;
    if (wait(&st) > 0) {
      running--;
      failed += !(WIFEXITED(st) && WEXITSTATUS(st) == 0);
    }
  }
  printf("%ld runs, %ld failed\n", n, failed);
  return failed != 0;
}
