/*
 * The sessions file: one line per `brink run` of a study, appended when
 * the run ends (done, stopped or failed), so that the report can give the
 * time spent on the study over all its sessions and not only the last
 * one. It lives beside the records in the run folder, `sessions.log`, a
 * TAB-separated table with `#` header lines (docs/records.md):
 *
 *   # brink-sessions 1
 *   start	seconds	outcome	evaluations	host	pid	part
 *   2025-03-14T09:26:53Z	158.2	stopped	812	node03	48213	local
 *
 * It feeds no decision: a lost or damaged line only makes the total time
 * short, and a line that cannot be read is skipped.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_SESSIONS_H
#define BK_SESSIONS_H

#include <stdint.h>
#include <time.h>

#define BK_SESSIONS_FILE "sessions.log"

/* One session, as appended. */
typedef struct {
  time_t start;         /* wall clock at the start */
  double seconds;       /* wall time of the session */
  const char *outcome;  /* "done", "stopped" or "error" */
  uint64_t evaluations; /* evaluations made (not replayed) in the session */
  const char *host;
  long pid;
  const char *part; /* "local", "mpi", "shard 2/8" */
} bk_session_t;

/* Appends the session's line to FOLDER/sessions.log (made, with its
 * header, when absent) with one write. Returns 0 or a negative errno. */
int bk_sessions_append(const char *folder, const bk_session_t *ss);

/* Sums the seconds of every readable session line of FOLDER/sessions.log
 * into *seconds and counts them into *count (both 0 when there is no
 * file). Returns 0, or a negative errno other than ENOENT. */
int bk_sessions_total(const char *folder, double *seconds, uint32_t *count);

#endif
