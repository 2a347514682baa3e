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
#include <sys/types.h>

#include "base/error.h"

/* One finished evaluation. For bk_records_append all pointers are
 * borrowed. Filled by bk_records_find/bk_records_scan, they point into
 * storage owned by the records object, valid until the next call on it. */
typedef struct {
  const char *key; /* e.g. "mc/123", "lhs/r3/77"; no blanks */
  size_t nx;
  const double *x; /* physical inputs, full precision */
  size_t ny;
  const double *y; /* extracted outputs (NaN where not extracted) */
  double g;        /* limit-state value (NaN on a fault) */
  int fault;       /* bk_fault_t; 0 = ok */
  int attempts;
  double seconds; /* wall time of the last attempt */
  const char *host;
  const char *reason; /* why the run faulted ("exit status 3"); "" when ok */
  const char *folder; /* the run folder kept (a path, or HOST:PATH when it
                         stayed on a node's scratch disk); "" when removed */
} bk_record_t;

/* One part of the study fingerprint, e.g. {"study", "3f2a..."} or
 * {"template templates/purlin.inp", "91bc..."}. On a mismatch the message
 * lists the parts that differ. */
typedef struct {
  const char *name;
  const char *digest;
} bk_fingerprint_part_t;

typedef struct {
  const char *path; /* the log file, e.g. runs/purlin/records.log */
  const char *tool; /* "brink 0.1.0", stored in the header */
  size_t nparts;
  const bk_fingerprint_part_t *parts;
  size_t nx;
  const char *const *xnames;
  size_t ny;
  const char *const *ynames;
  int read_only;        /* open for reading only: no lock, no repair */
  double sync_interval; /* seconds between fsyncs; default 1 when 0,
                           every append when negative */
  int any_study;        /* with read_only: accept the log whatever study
                           made it (parts, xnames and ynames are then
                           ignored; see bk_records_columns) */
} bk_records_opts_t;

typedef struct bk_records bk_records_t;

/* Opens (creating it and its folders when absent, unless read_only) the
 * log. Takes the lock (path + ".lock" holding "host:pid"; BK_ELOCKED, the
 * message naming host and pid, when another live brink holds it; a lock
 * left by a dead process on this host is taken over). Verifies the header
 * (BK_EMISMATCH with the differing parts named) and every line's checksum
 * (BK_ECORRUPT with err->line set). A torn or damaged last line is
 * truncated away (in read-only mode only skipped) and counted in
 * bk_records_dropped(). When a key appears on several lines the later line
 * wins. read_only on a missing or empty log gives BK_ENOTFOUND; a read-only
 * object sees the log as it was at open. On failure nothing is changed on
 * disk and *out is NULL. */
int bk_records_open(bk_records_t **out, const bk_records_opts_t *opts,
                    bk_error_t *err);
/* Opens folder/records.log read-only, whatever study made it (any_study):
 * what reports, export, plan and status read. Errors as bk_records_open. */
int bk_records_open_folder(bk_records_t **out, const char *folder,
                           bk_error_t *err);
/* Fsyncs, releases the lock, frees. NULL is allowed. Returns 0 or the
 * negative errno of a failed fsync or close (the object is freed anyway). */
int bk_records_close(bk_records_t *r);

/* 1 and *rec when `key` is recorded, else 0 (also when the line cannot be
 * read back or parsed: the evaluation is then simply made again). */
int bk_records_find(bk_records_t *r, const char *key, bk_record_t *rec);
/* Appends one record with a single write(2). Data reaches the OS at once;
 * an append fsyncs when the last fsync is sync_interval or more ago, so
 * call bk_records_sync from a timer to bound the delay when appends are
 * rare. Returns 0, or a negative code (BK_EINVAL for a bad key or shape,
 * BK_ENOSPC, -EIO, ...) with err set; the log then still ends on a
 * whole line. If that could not be ensured, or an fsync failed, every
 * later append fails too: the run must stop. */
int bk_records_append(bk_records_t *r, const bk_record_t *rec, bk_error_t *err);
/* Fsyncs if anything was appended since the last fsync; 0 or -errno. */
int bk_records_sync(bk_records_t *r);

/* Number of distinct keys recorded. */
size_t bk_records_count(const bk_records_t *r);
/* Number of torn tail bytes dropped at open (0 when the log was whole). */
size_t bk_records_dropped(const bk_records_t *r);

typedef int (*bk_records_cb)(void *data, const bk_record_t *rec);
/* Calls cb for every record in log order (a key on several lines once, at
 * its latest line); stops early when cb returns non-zero and returns that
 * value. Returns 0, or a negative code when the log cannot be read. cb may
 * call bk_records_find and bk_records_append; records appended during the
 * scan are not visited. */
int bk_records_scan(bk_records_t *r, bk_records_cb cb, void *data);

/* The format version of the open log (2 for new logs; 1 for a log made
 * by an earlier brink, which is appended to in its own format). */
int bk_records_version(const bk_records_t *r);

/* Encodes one record as a log line of the current format (with its
 * checksum and newline) into a new string freed with bk_free. Returns 0,
 * BK_EINVAL for a key that is empty or holds a blank, a control character or
 * '#', an unknown fault or negative attempts, or BK_ENOMEM. */
int bk_records_encode(const bk_record_t *rec, char **line, size_t *len);

/* What the header says, for report and export on a folder (any_study).
 * The strings are owned by the records object and live until close. */
void bk_records_columns(const bk_records_t *r, size_t *nx,
                        const char *const **xnames, size_t *ny,
                        const char *const **ynames);
const bk_fingerprint_part_t *bk_records_parts(const bk_records_t *r,
                                              size_t *nparts);
const char *bk_records_tool(const bk_records_t *r);
/* Creation time of the log, "2025-01-31T12:00:00Z". */
const char *bk_records_created(const bk_records_t *r);

/* CRC-32C (Castagnoli) of n bytes, continuing from `crc` (0 to start):
 * the per-line checksum of the log. */
uint32_t bk_records_crc32c(uint32_t crc, const void *p, size_t n);

/* For tests only: replaces write(2) for appends (NULL restores it), to
 * inject short writes and ENOSPC/EIO. */
typedef ssize_t (*bk__records_write_fn)(int fd, const void *buf, size_t n);
void bk__records_set_write(bk__records_write_fn fn);

#endif
