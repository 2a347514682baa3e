/*
 * The append-only record log of a study: a header with the study's
 * fingerprint, then one checksummed text line per finished evaluation.
 * Single writer, guarded by a lock file holding host:pid. An index maps
 * each key to its line's offset so that lookups re-read one line and memory
 * stays small. A torn last line (power loss, kill -9) is detected, dropped
 * and reported; damage before the last line is refused, naming the line.
 * Works on NFS/Lustre: plain read/write/fsync, no mmap, no shared memory.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_RECORDS_H
#define BK_RECORDS_H

#include <stddef.h>
#include <stdint.h>

#include "error.h"

/* One finished evaluation. For bk_records_append all pointers are
 * borrowed. Filled by bk_records_find/bk_records_scan, they point into
 * storage owned by the records object, valid until the next call on it. */
typedef struct {
  const char *key;   /* e.g. "mc/123", "lhs/r3/77"; no blanks */
  size_t nx;
  const double *x;   /* physical inputs, full precision */
  size_t ny;
  const double *y;   /* extracted outputs (NaN where not extracted) */
  double g;          /* limit-state value (NaN on a fault) */
  int fault;         /* bk_fault_t; 0 = ok */
  int attempts;
  double seconds;    /* wall time of the last attempt */
  const char *host;
  const char *note;  /* fault reason or run folder kept; may be "" */
} bk_record_t;

/* One part of the study fingerprint, e.g. {"study", "3f2a..."} or
 * {"template templates/purlin.inp", "91bc..."}. On a mismatch the message
 * lists the parts that differ. */
typedef struct {
  const char *name;
  const char *digest;
} bk_fingerprint_part_t;

typedef struct {
  const char *path;       /* the log file, e.g. runs/purlin/records.log */
  const char *tool;       /* "brink 0.1.0", stored in the header */
  size_t nparts;
  const bk_fingerprint_part_t *parts;
  size_t nx;
  const char *const *xnames;
  size_t ny;
  const char *const *ynames;
  int read_only;          /* open for reading only: no lock, no repair */
  double sync_interval;   /* seconds between fsyncs; default 1 when 0 */
} bk_records_opts_t;

typedef struct bk_records bk_records_t;

/* Opens (creating when absent, unless read_only) the log. Takes the lock
 * (path + ".lock"; BK_ELOCKED with "held by HOST:PID" when another live
 * brink holds it; a lock left by a dead process on this host is taken
 * over). Verifies the header (BK_EMISMATCH with the differing parts named)
 * and every line's checksum (BK_ECORRUPT naming the line number). A torn
 * last line is truncated away (in read-only mode only skipped) and
 * counted in bk_records_dropped(). On failure nothing is changed on disk
 * and *out is NULL. */
int bk_records_open(bk_records_t **out, const bk_records_opts_t *opts,
                    bk_error_t *err);
/* Flushes, fsyncs, releases the lock, frees. NULL is allowed. */
int bk_records_close(bk_records_t *r);

/* 1 and *rec when `key` is recorded, else 0. */
int bk_records_find(bk_records_t *r, const char *key, bk_record_t *rec);
/* Appends one record. Data reaches the OS at once (write), and the disk at
 * most sync_interval later (fsync). Returns 0, or a negative code (e.g.
 * BK_ENOSPACE) with err set; the log then still ends on a whole line. */
int bk_records_append(bk_records_t *r, const bk_record_t *rec,
                      bk_error_t *err);
int bk_records_sync(bk_records_t *r);

size_t bk_records_count(const bk_records_t *r);
/* Number of torn tail bytes dropped at open (0 when the log was whole). */
size_t bk_records_dropped(const bk_records_t *r);

typedef int (*bk_records_cb)(void *data, const bk_record_t *rec);
/* Calls cb for every record in log order; stops early when cb returns
 * non-zero and returns that value. */
int bk_records_scan(bk_records_t *r, bk_records_cb cb, void *data);

/* Encodes one record as a log line (with its checksum and newline) into
 * a new string freed with bk_free. Returns 0 or BK_ENOMEM. */
int bk_records_encode(const bk_record_t *rec, char **line, size_t *len);

#endif
