/*
 * Fingerprints of files and of a version command's output (see
 * fingerprint.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/fingerprint.h"

#include <errno.h>
#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include "base/buf.h"

/* The lanes of bk_study_digest_hex (study.h), one byte at a time. */
static uint64_t mix64(uint64_t z) {
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}

void bk_fingerprint_init(bk_fingerprint_t *f, uint64_t len) {
  f->a = 0xcbf29ce484222325ULL;
  f->b = 0x84222325cbf29ce4ULL ^ len;
  f->len = len;
}

void bk_fingerprint_update(bk_fingerprint_t *f, const void *data, size_t n) {
  const unsigned char *p = data;
  uint64_t a = f->a, b = f->b;
  for (size_t i = 0; i < n; i++) {
    a = (a ^ p[i]) * 0x100000001b3ULL;
    b = (b ^ p[i]) * 0x00000100000001b3ULL + 0x9e3779b97f4a7c15ULL;
    b ^= b >> 29;
  }
  f->a = a;
  f->b = b;
}

void bk_fingerprint_final(bk_fingerprint_t *f, char hex[33]) {
  uint64_t a = mix64(f->a ^ f->len);
  uint64_t b = mix64(f->b ^ a);
  snprintf(hex, 33, "%016llx%016llx", (unsigned long long)a,
           (unsigned long long)b);
}

int bk_fingerprint_file(const char *path, const char *what, char hex[33],
                        bk_error_t *err) {
  int fd = open(path, O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    int e = -errno;
    return bk_error_set(err, e, NULL, 0, 0, "cannot read %s (%s): %s", what,
                        path, strerror(-e));
  }
  struct stat st;
  if (fstat(fd, &st) != 0) {
    int e = -errno;
    close(fd);
    return bk_error_set(err, e, NULL, 0, 0, "cannot read %s (%s): %s", what,
                        path, strerror(-e));
  }
  bk_fingerprint_t f;
  bk_fingerprint_init(&f, (uint64_t)st.st_size);
  unsigned char block[1 << 16];
  uint64_t total = 0;
  int rc = 0;
  for (;;) {
    ssize_t n = read(fd, block, sizeof block);
    if (n < 0 && errno == EINTR)
      continue;
    if (n < 0) {
      rc = -errno;
      bk_error_set(err, rc, NULL, 0, 0, "cannot read %s (%s): %s", what, path,
                   strerror(-rc));
      break;
    }
    if (n == 0)
      break;
    bk_fingerprint_update(&f, block, (size_t)n);
    total += (uint64_t)n;
  }
  close(fd);
  if (!rc && total != (uint64_t)st.st_size)
    rc = bk_error_set(err, -EAGAIN, NULL, 0, 0,
                      "%s (%s) changed while brink read it; run again once "
                      "it is written",
                      what, path);
  if (!rc)
    bk_fingerprint_final(&f, hex);
  return rc;
}

static double now_seconds(void) {
  struct timespec ts;
  clock_gettime(CLOCK_MONOTONIC, &ts);
  return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* The output of a version command is small; more than this is refused. */
#define MAX_VERSION_OUTPUT (16u << 20)

int bk_fingerprint_command(char *const argv[], const char *dir, double limit,
                           char hex[33], bk_error_t *err) {
  int fds[2];
  if (pipe(fds) != 0)
    return bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                        "model.version_command: cannot make a pipe: %s",
                        strerror(errno));
  fflush(NULL);
  pid_t pid = fork();
  if (pid < 0) {
    int e = errno;
    close(fds[0]);
    close(fds[1]);
    return bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                        "model.version_command: cannot start %s: %s", argv[0],
                        strerror(e));
  }
  if (pid == 0) {
    int in = open("/dev/null", O_RDONLY);
    if (in >= 0)
      dup2(in, 0);
    dup2(fds[1], 1);
    close(fds[0]);
    close(fds[1]);
    if (dir && chdir(dir) != 0)
      _exit(126);
    execvp(argv[0], argv);
    _exit(127);
  }
  close(fds[1]);
  bk_buf_t out;
  bk_buf_init(&out);
  double deadline = now_seconds() + limit;
  int rc = 0, timed_out = 0;
  char block[4096];
  for (;;) {
    double left = deadline - now_seconds();
    if (left <= 0) {
      timed_out = 1;
      break;
    }
    struct pollfd pf = {fds[0], POLLIN, 0};
    int pr = poll(&pf, 1, (int)(left * 1000) + 1);
    if (pr < 0 && errno == EINTR)
      continue;
    if (pr <= 0)
      continue;
    ssize_t n = read(fds[0], block, sizeof block);
    if (n < 0 && errno == EINTR)
      continue;
    if (n <= 0)
      break;
    if (out.len + (size_t)n > MAX_VERSION_OUTPUT ||
        bk_buf_append(&out, block, (size_t)n)) {
      rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                        "model.version_command: %s printed more than %u MB; "
                        "it should print a version, not data",
                        argv[0], MAX_VERSION_OUTPUT >> 20);
      break;
    }
  }
  close(fds[0]);
  if (timed_out || rc)
    kill(pid, SIGKILL);
  int status = 0;
  while (waitpid(pid, &status, 0) < 0 && errno == EINTR)
    ;
  if (!rc && timed_out)
    rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                      "model.version_command: %s did not finish within %g s",
                      argv[0], limit);
  else if (!rc && WIFEXITED(status) && WEXITSTATUS(status) == 127)
    rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                      "model.version_command: cannot run %s", argv[0]);
  else if (!rc && !(WIFEXITED(status) && WEXITSTATUS(status) == 0))
    rc = bk_error_set(
        err, BK_EMODEL, NULL, 0, 0,
        "model.version_command: %s %s %d; it must print the model's "
        "version and exit 0",
        argv[0],
        WIFEXITED(status) ? "exited with status" : "was killed by signal",
        WIFEXITED(status) ? WEXITSTATUS(status) : WTERMSIG(status));
  if (!rc) {
    /* The command line, each word ended by a NUL, then the output. */
    uint64_t len = out.len;
    for (size_t i = 0; argv[i]; i++)
      len += strlen(argv[i]) + 1;
    bk_fingerprint_t f;
    bk_fingerprint_init(&f, len);
    for (size_t i = 0; argv[i]; i++)
      bk_fingerprint_update(&f, argv[i], strlen(argv[i]) + 1);
    if (out.len)
      bk_fingerprint_update(&f, out.data, out.len);
    bk_fingerprint_final(&f, hex);
  }
  bk_buf_close(&out);
  return rc;
}
