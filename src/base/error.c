/*
 * Error codes and located error messages (see error.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "base/error.h"

#include <errno.h>
#include <string.h>

const char *bk_strerror(int code) {
  switch (code) {
  case BK_OK:
    return "success";
#define XX(name, value, text)                                                  \
  case BK_##name:                                                              \
    return text;
    BK_ERRNO_MAP(XX)
#undef XX
  default:
    if (code < 0 && code > -4096)
      return strerror(-code);
    return "unknown error";
  }
}

const char *bk_error_name(int code) {
  switch (code) {
  case BK_OK:
    return "OK";
#define XX(name, value, text)                                                  \
  case BK_##name:                                                              \
    return #name;
    BK_ERRNO_MAP(XX)
#undef XX
  default:
    return "ESYSTEM";
  }
}

bk_exit_t bk_error_exit(int code) {
  switch (code) {
  case BK_OK:
    return BK_EXIT_DONE;
  /* Resumable as it is: a stop request, or a full file system once space
   * is freed (the records are intact). */
  case BK_ESTOPPED:
  case -ENOSPC:
  case -EDQUOT:
    return BK_EXIT_STOPPED;
  /* Bad input: the study, records of another study or damaged ones, a run
   * folder that cannot be written. Nothing was written. */
  case BK_EPARSE:
  case BK_ESTUDY:
  case BK_EMISMATCH:
  case BK_ECORRUPT:
  case BK_ENOTFOUND:
  case -EACCES:
  case -EPERM:
  case -EROFS:
  case -ENOTDIR:
  case -EEXIST:
    return BK_EXIT_USAGE;
  /* Everything else would fail the same way again: a model error limit,
   * a malformed MPI message, an I/O error, no memory, a lock held by a
   * live brink, an internal failure. */
  default:
    return BK_EXIT_RUNTIME;
  }
}

void bk_error_clear(bk_error_t *err) {
  if (err)
    memset(err, 0, sizeof *err);
}

int bk_error_vset(bk_error_t *err, int code, const char *path, int line,
                  int col, const char *fmt, va_list ap) {
  if (!err || err->code != 0)
    return code;
  err->code = code;
  err->line = line;
  err->col = col;
  err->path[0] = '\0';
  if (path)
    snprintf(err->path, sizeof err->path, "%s", path);
  vsnprintf(err->msg, sizeof err->msg, fmt, ap);
  return code;
}

int bk_error_set(bk_error_t *err, int code, const char *path, int line, int col,
                 const char *fmt, ...) {
  va_list ap;
  va_start(ap, fmt);
  bk_error_vset(err, code, path, line, col, fmt, ap);
  va_end(ap);
  return code;
}

/* Reads line `line` (1-based) of `path` into buf; returns 0 when found. */
static int read_line(const char *path, int line, char *buf, size_t cap) {
  FILE *f = fopen(path, "r");
  if (!f)
    return -1;
  int n = 1, rc = -1;
  while (fgets(buf, (int)cap, f)) {
    size_t len = strlen(buf);
    int complete = len > 0 && buf[len - 1] == '\n';
    if (n == line) {
      while (len > 0 && (buf[len - 1] == '\n' || buf[len - 1] == '\r'))
        buf[--len] = '\0';
      rc = 0;
      break;
    }
    if (complete)
      n++;
  }
  fclose(f);
  return rc;
}

void bk_error_print(const bk_error_t *err, FILE *f) {
  if (!err)
    return;
  if (err->path[0] && err->line > 0 && err->col > 0)
    fprintf(f, "%s:%d:%d: %s\n", err->path, err->line, err->col, err->msg);
  else if (err->path[0] && err->line > 0)
    fprintf(f, "%s:%d: %s\n", err->path, err->line, err->msg);
  else if (err->path[0])
    fprintf(f, "%s: %s\n", err->path, err->msg);
  else
    fprintf(f, "%s\n", err->msg);
  char text[1024];
  if (err->path[0] && err->line > 0 && err->col > 0 &&
      read_line(err->path, err->line, text, sizeof text) == 0) {
    fprintf(f, "  %s\n  ", text);
    for (int i = 1; i < err->col && text[i - 1]; i++)
      fputc(text[i - 1] == '\t' ? '\t' : ' ', f);
    fputs("^\n", f);
  }
}
