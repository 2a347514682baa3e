/*
 * The messages between the MPI coordinator and its workers, in one place:
 * their tags, and how each is packed into bytes and read back. Pure
 * functions on buffers, without MPI, so they are tested like any other
 * code. A message that cannot be read back whole and valid (cut short,
 * a count or a value out of range, a string without its end) gives
 * BK_EPROTO, never a crash; the run then ends with exit 1 (not 3: a job
 * script must not requeue a run that would fail the same way).
 *
 *   worker -> 0  HELLO   i32 ok, str host, str why, i32 slots (models the
 *                        worker runs at a time, 1 .. 4096)
 *   0 -> worker  WORK    str prefix, u32 n, n x (u64 index, f64 x[nx])
 *   worker -> 0  RESULT  i32 status, str why, str host, u32 n,
 *                        n x record
 *   0 -> worker  STOP    empty: stop the chunk's models and reply
 *   0 -> worker  QUIT    empty: end
 *   record       str key, u32 nx, f64 x[nx], u32 ny, f64 y[ny], f64 g,
 *                i32 fault, i32 attempts, f64 seconds, str host,
 *                str reason, str folder
 *   str          u32 length, the bytes, a NUL
 *
 * A RESULT carries exactly the records the coordinator appends to its log
 * (it is the single writer): those of the chunk's evaluations that are
 * final, in the order they finished. Numbers are in the machine's own
 * representation: every rank must run the same brink on the same
 * architecture, as in any MPI job.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_MPI_WIRE_H
#define BK_MPI_WIRE_H

#include <stddef.h>
#include <stdint.h>

#include "base/buf.h"
#include "eval/records.h"

enum {
  BK_WIRE_HELLO = 11,
  BK_WIRE_WORK,
  BK_WIRE_RESULT,
  BK_WIRE_STOP,
  BK_WIRE_QUIT
};

/* The status of a RESULT. */
enum {
  BK_WIRE_DONE = 0,    /* every point of the chunk is in the result */
  BK_WIRE_STOPPED = 1, /* stopped (by STOP or a signal on the worker's
                          node); the result holds what finished */
  BK_WIRE_FAILED = 2   /* the worker cannot go on; `why` says why */
};

/* Reads a message front to back. The first read that does not fit marks
 * the reader bad; later reads then give zeros and empty strings, so a
 * decoder checks `bad` once at the end. */
typedef struct {
  const char *p;
  size_t left;
  int bad;
} bk_wire_reader_t;

void bk_wire_reader_init(bk_wire_reader_t *r, const void *data, size_t n);

/* Each put appends to b and returns 0 or BK_ENOMEM. Each get returns 0 or
 * BK_EPROTO; strings it gives point into the message. */

int bk_wire_put_hello(bk_buf_t *b, const char *host, const char *failure,
                      int slots);
/* *failure is NULL when the worker can run models. */
int bk_wire_get_hello(bk_wire_reader_t *r, const char **host,
                      const char **failure, int *slots);

int bk_wire_put_work(bk_buf_t *b, const char *prefix, uint32_t n);
int bk_wire_put_point(bk_buf_t *b, uint64_t index, const double *x, size_t nx);
/* The prefix must be shorter than `prefix_max` bytes. */
int bk_wire_get_work(bk_wire_reader_t *r, const char **prefix,
                     size_t prefix_max, uint32_t *n);
int bk_wire_get_point(bk_wire_reader_t *r, uint64_t *index, double *x,
                      size_t nx);

/* The head of a RESULT, then `records` (n records packed with
 * bk_wire_put_record) appended as they are. */
int bk_wire_put_result(bk_buf_t *b, int status, const char *why,
                       const char *host, uint32_t n, const bk_buf_t *records);
int bk_wire_put_record(bk_buf_t *b, const bk_record_t *rec);
int bk_wire_get_result(bk_wire_reader_t *r, int *status, const char **why,
                       const char **host, uint32_t *n);
/* Reads one record with nx inputs into x and ny outputs into y (a record
 * of another shape is BK_EPROTO); rec's arrays point to x and y. */
int bk_wire_get_record(bk_wire_reader_t *r, bk_record_t *rec, double *x,
                       size_t nx, double *y, size_t ny);

#endif
