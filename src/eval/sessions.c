/*
 * The sessions file (see sessions.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/sessions.h"

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "base/buf.h"
#include "base/error.h"

static const char header[] = "# brink-sessions 1\n"
                             "start\tseconds\toutcome\tevaluations\thost\tpid\t"
                             "part\n";

/* A text field: TABs and line breaks would split the table. */
static void put_field(bk_buf_t *b, const char *s) {
  for (; s && *s; s++)
    bk_buf_putc(b, (*s == '\t' || *s == '\n' || *s == '\r') ? ' ' : *s);
}

int bk_sessions_append(const char *folder, const bk_session_t *ss) {
  bk_buf_t path, line;
  bk_buf_init(&path);
  bk_buf_init(&line);
  int rc = bk_buf_printf(&path, "%s/%s", folder, BK_SESSIONS_FILE);
  int fd = -1;
  if (rc)
    goto out;
  fd = open(path.data, O_WRONLY | O_APPEND | O_CREAT | O_CLOEXEC, 0666);
  if (fd < 0) {
    rc = -errno;
    goto out;
  }
  struct stat st;
  if (fstat(fd, &st) != 0) {
    rc = -errno;
    goto out;
  }
  if (st.st_size == 0)
    bk_buf_puts(&line, header);
  char when[32];
  struct tm tm;
  gmtime_r(&ss->start, &tm);
  strftime(when, sizeof when, "%Y-%m-%dT%H:%M:%SZ", &tm);
  bk_buf_printf(&line, "%s\t%.3f\t", when, ss->seconds);
  put_field(&line, ss->outcome);
  bk_buf_printf(&line, "\t%llu\t", (unsigned long long)ss->evaluations);
  put_field(&line, ss->host);
  bk_buf_printf(&line, "\t%ld\t", ss->pid);
  put_field(&line, ss->part);
  if (bk_buf_putc(&line, '\n')) {
    rc = BK_ENOMEM;
    goto out;
  }
  ssize_t n = write(fd, line.data, line.len);
  if (n < 0)
    rc = -errno;
  else if ((size_t)n != line.len)
    rc = -ENOSPC;
out:
  if (fd >= 0 && close(fd) != 0 && rc == 0)
    rc = -errno;
  bk_buf_close(&path);
  bk_buf_close(&line);
  return rc;
}

int bk_sessions_total(const char *folder, double *seconds, uint32_t *count) {
  *seconds = 0;
  *count = 0;
  bk_buf_t path;
  bk_buf_init(&path);
  if (bk_buf_printf(&path, "%s/%s", folder, BK_SESSIONS_FILE))
    return BK_ENOMEM;
  FILE *f = fopen(path.data, "r");
  int rc = f || errno == ENOENT ? 0 : -errno;
  bk_buf_close(&path);
  if (!f)
    return rc;
  char line[1024];
  while (fgets(line, sizeof line, f)) {
    if (line[0] == '#' || strncmp(line, "start\t", 6) == 0)
      continue;
    char *tab = strchr(line, '\t');
    if (!tab)
      continue;
    char *end;
    double s = strtod(tab + 1, &end);
    if (end == tab + 1 || *end != '\t' || !isfinite(s) || s < 0)
      continue;
    *seconds += s;
    ++*count;
  }
  fclose(f);
  return 0;
}
