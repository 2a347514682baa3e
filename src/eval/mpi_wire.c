/*
 * Packing and reading the MPI messages (see mpi_wire.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/mpi_wire.h"

#include <string.h>

#include "base/error.h"
#include "base/fault.h"

/* ---- writing ----------------------------------------------------------- */

static int put(bk_buf_t *b, const void *p, size_t n) {
  return bk_buf_append(b, p, n) ? BK_ENOMEM : 0;
}

static int put_i32(bk_buf_t *b, int32_t v) {
  return put(b, &v, sizeof v);
}

static int put_u32(bk_buf_t *b, uint32_t v) {
  return put(b, &v, sizeof v);
}

static int put_u64(bk_buf_t *b, uint64_t v) {
  return put(b, &v, sizeof v);
}

static int put_f64(bk_buf_t *b, double v) {
  return put(b, &v, sizeof v);
}

static int put_str(bk_buf_t *b, const char *s) {
  if (!s)
    s = "";
  size_t n = strlen(s);
  if (n > UINT32_MAX - 1)
    return BK_ERANGE;
  int rc = put_u32(b, (uint32_t)n);
  return rc ? rc : put(b, s, n + 1);
}

/* ---- reading ----------------------------------------------------------- */

void bk_wire_reader_init(bk_wire_reader_t *r, const void *data, size_t n) {
  r->p = data;
  r->left = data ? n : 0;
  r->bad = !data;
}

static void get(bk_wire_reader_t *r, void *p, size_t n) {
  if (r->bad || r->left < n) {
    r->bad = 1;
    memset(p, 0, n);
    return;
  }
  memcpy(p, r->p, n);
  r->p += n;
  r->left -= n;
}

static int32_t get_i32(bk_wire_reader_t *r) {
  int32_t v;
  get(r, &v, sizeof v);
  return v;
}

static uint32_t get_u32(bk_wire_reader_t *r) {
  uint32_t v;
  get(r, &v, sizeof v);
  return v;
}

static double get_f64(bk_wire_reader_t *r) {
  double v;
  get(r, &v, sizeof v);
  return v;
}

/* A string of the message: its length, its bytes without a NUL, then the
 * NUL. */
static const char *get_str(bk_wire_reader_t *r) {
  uint32_t n = get_u32(r);
  if (r->bad || r->left < (size_t)n + 1 || r->p[n] != '\0' ||
      memchr(r->p, '\0', n)) {
    r->bad = 1;
    return "";
  }
  const char *s = r->p;
  r->p += (size_t)n + 1;
  r->left -= (size_t)n + 1;
  return s;
}

static int done(const bk_wire_reader_t *r) {
  return r->bad ? BK_EPROTO : 0;
}

/* ---- messages ---------------------------------------------------------- */

int bk_wire_put_hello(bk_buf_t *b, const char *host, const char *failure,
                      int slots) {
  int rc = put_i32(b, failure ? 0 : 1);
  rc = rc ? rc : put_str(b, host);
  rc = rc ? rc : put_str(b, failure);
  return rc ? rc : put_i32(b, slots);
}

int bk_wire_get_hello(bk_wire_reader_t *r, const char **host,
                      const char **failure, int *slots) {
  int32_t ok = get_i32(r);
  *host = get_str(r);
  const char *why = get_str(r);
  int32_t n = get_i32(r);
  if ((ok != 0 && ok != 1) || n < 1 || n > 4096)
    r->bad = 1;
  *slots = r->bad ? 1 : (int)n;
  *failure = ok ? NULL : why;
  return done(r);
}

int bk_wire_put_work(bk_buf_t *b, const char *prefix, uint32_t n) {
  int rc = put_str(b, prefix);
  return rc ? rc : put_u32(b, n);
}

int bk_wire_put_point(bk_buf_t *b, uint64_t index, const double *x, size_t nx) {
  int rc = put_u64(b, index);
  return rc ? rc : put(b, x, nx * sizeof *x);
}

int bk_wire_get_work(bk_wire_reader_t *r, const char **prefix,
                     size_t prefix_max, uint32_t *n) {
  *prefix = get_str(r);
  *n = get_u32(r);
  if (strlen(*prefix) >= prefix_max || !**prefix)
    r->bad = 1;
  return done(r);
}

int bk_wire_get_point(bk_wire_reader_t *r, uint64_t *index, double *x,
                      size_t nx) {
  get(r, index, sizeof *index);
  get(r, x, nx * sizeof *x);
  return done(r);
}

int bk_wire_put_result(bk_buf_t *b, int status, const char *why,
                       const char *host, uint32_t n, const bk_buf_t *records) {
  int rc = put_i32(b, status);
  rc = rc ? rc : put_str(b, why);
  rc = rc ? rc : put_str(b, host);
  rc = rc ? rc : put_u32(b, n);
  if (!rc && records && records->len)
    rc = put(b, records->data, records->len);
  return rc;
}

int bk_wire_put_record(bk_buf_t *b, const bk_record_t *rec) {
  if (rec->nx > UINT32_MAX || rec->ny > UINT32_MAX)
    return BK_ERANGE;
  int rc = put_str(b, rec->key);
  rc = rc ? rc : put_u32(b, (uint32_t)rec->nx);
  rc = rc ? rc : put(b, rec->x, rec->nx * sizeof *rec->x);
  rc = rc ? rc : put_u32(b, (uint32_t)rec->ny);
  rc = rc ? rc : put(b, rec->y, rec->ny * sizeof *rec->y);
  rc = rc ? rc : put_f64(b, rec->g);
  rc = rc ? rc : put_i32(b, rec->fault);
  rc = rc ? rc : put_i32(b, rec->attempts);
  rc = rc ? rc : put_f64(b, rec->seconds);
  rc = rc ? rc : put_str(b, rec->host);
  rc = rc ? rc : put_str(b, rec->reason);
  return rc ? rc : put_str(b, rec->folder);
}

int bk_wire_get_result(bk_wire_reader_t *r, int *status, const char **why,
                       const char **host, uint32_t *n) {
  *status = get_i32(r);
  *why = get_str(r);
  *host = get_str(r);
  *n = get_u32(r);
  if (*status != BK_WIRE_DONE && *status != BK_WIRE_STOPPED &&
      *status != BK_WIRE_FAILED)
    r->bad = 1;
  return done(r);
}

int bk_wire_get_record(bk_wire_reader_t *r, bk_record_t *rec, double *x,
                       size_t nx, double *y, size_t ny) {
  memset(rec, 0, sizeof *rec);
  rec->key = get_str(r);
  if (get_u32(r) != nx)
    r->bad = 1;
  get(r, x, nx * sizeof *x);
  if (get_u32(r) != ny)
    r->bad = 1;
  get(r, y, ny * sizeof *y);
  rec->nx = nx;
  rec->x = x;
  rec->ny = ny;
  rec->y = y;
  rec->g = get_f64(r);
  rec->fault = get_i32(r);
  rec->attempts = get_i32(r);
  rec->seconds = get_f64(r);
  rec->host = get_str(r);
  rec->reason = get_str(r);
  rec->folder = get_str(r);
  /* What a record of a finished evaluation can hold. */
  if (!*rec->key || rec->fault < 0 || rec->fault >= BK_FAULT__COUNT ||
      rec->attempts < 1)
    r->bad = 1;
  return done(r);
}
