/*
 * Error codes, the exit code each one gives, and the located error record
 * that user-facing failures fill. Codes are negative: a negative errno where
 * the system has one, else one of brink's own. One X-macro list generates
 * the enum, bk_strerror() and bk_error_name(), so a code and its text cannot
 * drift apart.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_ERROR_H
#define BK_ERROR_H

#include <errno.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>

/* One code space: 0 is success, failures are negative. Where the system
 * has an errno for the failure the code IS that negative errno (BK_ENOMEM
 * == -ENOMEM), so a system call's -errno and brink's own code never need
 * to be compared twice; brink's own kinds lie below BK__OWN_BASE, far from
 * any errno. XX(name, value, text). */
#define BK__OWN_BASE (-5000)
#define BK_ERRNO_MAP(XX)                                                       \
  XX(EINVAL, -EINVAL, "invalid argument")                                      \
  XX(ENOMEM, -ENOMEM, "out of memory")                                         \
  XX(EIO, -EIO, "input/output error")                                          \
  XX(ERANGE, -ERANGE, "value out of range")                                    \
  XX(ENOTFOUND, -ENOENT, "no such file or directory")                          \
  XX(ENOSPC, -ENOSPC, "no space left on device")                               \
  XX(EPROTO, -EPROTO, "malformed message between MPI ranks")                   \
  XX(EPARSE, BK__OWN_BASE - 1, "syntax error")                                 \
  XX(ESTUDY, BK__OWN_BASE - 2, "invalid study file")                           \
  XX(EMISMATCH, BK__OWN_BASE - 3, "records belong to a different study")       \
  XX(ECORRUPT, BK__OWN_BASE - 4, "records are damaged")                        \
  XX(ELOCKED, BK__OWN_BASE - 5, "folder is in use by another brink")           \
  XX(ESTOPPED, BK__OWN_BASE - 6, "stopped before the end")                     \
  XX(EMODEL, BK__OWN_BASE - 7, "model error")                                  \
  XX(ECANCELED, BK__OWN_BASE - 8, "cancelled after an internal failure")

typedef enum {
  BK_OK = 0,
#define XX(name, value, text) BK_##name = (value),
  BK_ERRNO_MAP(XX)
#undef XX
} bk_errcode_t;

/* Exit codes of the brink command (DESIGN.md section 3). */
typedef enum {
  BK_EXIT_DONE = 0,    /* finished */
  BK_EXIT_RUNTIME = 1, /* runtime error (records, model error limit) */
  BK_EXIT_USAGE = 2,   /* bad usage, study file or input; nothing written */
  BK_EXIT_STOPPED = 3  /* stopped before the end; resumable as it is */
} bk_exit_t;

/* The exit code for an error code: the one place that decides it (see the
 * table in error.c). Exit 3 promises that running the same command again
 * can succeed without a change (a stop, a full disk once space is freed);
 * job scripts requeue on it, so a failure that would repeat never maps to
 * 3. */
bk_exit_t bk_error_exit(int code);

/* A located error. `line` and `col` are 1-based; 0 means unknown. Filling it
 * never allocates. The first error set is kept; later calls are ignored
 * until bk_error_clear(). */
typedef struct {
  int code;
  int line;
  int col;
  char path[512];
  char msg[768];
} bk_error_t;

const char *bk_strerror(int code);
const char *bk_error_name(int code);

void bk_error_clear(bk_error_t *err);
/* Sets the error (if not already set) and returns `code`. `path` may be
 * NULL. */
int bk_error_set(bk_error_t *err, int code, const char *path, int line, int col,
                 const char *fmt, ...) __attribute__((format(printf, 6, 7)));
int bk_error_vset(bk_error_t *err, int code, const char *path, int line,
                  int col, const char *fmt, va_list ap);
/* Prints "path:line:col: message" and, when the file can be read, the line
 * itself with a caret under the column. */
void bk_error_print(const bk_error_t *err, FILE *f);

#endif
