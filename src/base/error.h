/*
 * Error codes and the located error record that user-facing failures fill.
 * Codes are negative; system failures are reported as negative errno values.
 * One X-macro list generates the enum, bk_strerror() and bk_err_name(), so a
 * code and its text cannot drift apart.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_ERROR_H
#define BK_ERROR_H

#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>

#define BK_ERRNO_MAP(XX)                                                       \
  XX(EINVAL, "invalid argument")                                               \
  XX(ENOMEM, "out of memory")                                                  \
  XX(EPARSE, "syntax error")                                                   \
  XX(ESTUDY, "invalid study file")                                             \
  XX(EIO, "input/output error")                                                \
  XX(ERANGE, "value out of range")                                             \
  XX(ENOTFOUND, "not found")                                                   \
  XX(EMISMATCH, "records belong to a different study")                        \
  XX(ECORRUPT, "records are damaged")                                          \
  XX(ELOCKED, "folder is in use by another brink")                             \
  XX(ESTOPPED, "stopped before the end")                                       \
  XX(EMODEL, "model error")                                                    \
  XX(ENOSPACE, "no space left on device")

typedef enum {
  BK_OK = 0,
#define XX(name, text) BK_##name,
  BK__ERR_FIRST = -1000,
  BK_ERRNO_MAP(XX)
#undef XX
      BK__ERR_LAST
} bk_errcode_t;

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
const char *bk_err_name(int code);

void bk_error_clear(bk_error_t *err);
/* Sets the error (if not already set) and returns `code`. `path` may be
 * NULL. */
int bk_error_set(bk_error_t *err, int code, const char *path, int line,
                 int col, const char *fmt, ...)
    __attribute__((format(printf, 6, 7)));
int bk_error_vset(bk_error_t *err, int code, const char *path, int line,
                  int col, const char *fmt, va_list ap);
/* Prints "path:line:col: message" and, when the file can be read, the line
 * itself with a caret under the column. */
void bk_error_print(const bk_error_t *err, FILE *f);

#endif
