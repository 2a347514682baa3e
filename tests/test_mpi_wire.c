/*
 * Unit tests of mpi_wire.c, the messages between the MPI coordinator and
 * its workers, without MPI: each message reads back as it was packed, and
 * a message cut short at any byte, or holding a value out of range, reads
 * as BK_EPROTO (exit 1 through bk_error_exit, never 3).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <string.h>

#include "base/buf.h"
#include "base/fault.h"
#include "eval/mpi_wire.h"

Test(mpi_wire, hello_round_trips_with_and_without_a_failure) {
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_wire_put_hello(&b, "node03", NULL, 6), 0);
  bk_wire_reader_t r;
  bk_wire_reader_init(&r, b.data, b.len);
  const char *host, *failure;
  int slots = 0;
  cr_assert_eq(bk_wire_get_hello(&r, &host, &failure, &slots), 0);
  cr_assert_str_eq(host, "node03");
  cr_assert_null(failure);
  cr_assert_eq(slots, 6);
  bk_buf_reset(&b);
  cr_assert_eq(bk_wire_put_hello(&b, "n", "cannot create /s: denied", 1), 0);
  bk_wire_reader_init(&r, b.data, b.len);
  cr_assert_eq(bk_wire_get_hello(&r, &host, &failure, &slots), 0);
  cr_assert_str_eq(failure, "cannot create /s: denied");
  /* A slot count out of range is a malformed message. */
  bk_buf_reset(&b);
  cr_assert_eq(bk_wire_put_hello(&b, "n", NULL, 0), 0);
  bk_wire_reader_init(&r, b.data, b.len);
  cr_assert_eq(bk_wire_get_hello(&r, &host, &failure, &slots), BK_EPROTO);
  bk_buf_close(&b);
}

Test(mpi_wire, work_round_trips_bit_for_bit) {
  double x[2][3] = {{0.1, -0.0, INFINITY}, {NAN, 1e-310, -2}};
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_wire_put_work(&b, "lhs/r3", 2), 0);
  cr_assert_eq(bk_wire_put_point(&b, 77, x[0], 3), 0);
  cr_assert_eq(bk_wire_put_point(&b, UINT64_MAX, x[1], 3), 0);
  bk_wire_reader_t r;
  bk_wire_reader_init(&r, b.data, b.len);
  const char *prefix;
  uint32_t n;
  cr_assert_eq(bk_wire_get_work(&r, &prefix, 64, &n), 0);
  cr_assert_str_eq(prefix, "lhs/r3");
  cr_assert_eq(n, 2);
  uint64_t idx;
  double got[3];
  cr_assert_eq(bk_wire_get_point(&r, &idx, got, 3), 0);
  cr_assert_eq(idx, 77);
  cr_assert_eq(memcmp(got, x[0], sizeof got), 0);
  cr_assert_eq(bk_wire_get_point(&r, &idx, got, 3), 0);
  cr_assert_eq(idx, UINT64_MAX);
  cr_assert_eq(memcmp(got, x[1], sizeof got), 0);
  cr_assert_eq(r.left, 0);
  /* A prefix too long for a key. */
  bk_wire_reader_init(&r, b.data, b.len);
  cr_assert_eq(bk_wire_get_work(&r, &prefix, 6, &n), BK_EPROTO);
  bk_buf_close(&b);
}

/* A RESULT with two records, as a worker sends it. */
static void pack_result(bk_buf_t *b) {
  double x[2] = {0.5, -1.5}, y[1] = {3.25};
  bk_record_t rec[2] = {
      {.key = "mc/4",
       .nx = 2,
       .x = x,
       .ny = 1,
       .y = y,
       .g = -0.5,
       .fault = BK_FAULT_NONE,
       .attempts = 1,
       .seconds = 0.125,
       .host = "node03",
       .reason = "",
       .folder = "/runs/p/work/mc-4"},
      {.key = "mc/5",
       .nx = 2,
       .x = x,
       .ny = 1,
       .y = y,
       .g = NAN,
       .fault = BK_FAULT_TIMEOUT,
       .attempts = 3,
       .seconds = 600,
       .host = "node03",
       .reason = "timeout after 600 s",
       .folder = "node03:/tmp/brink-p-r1-9/mc-5"},
  };
  bk_buf_t recs;
  bk_buf_init(&recs);
  for (int i = 0; i < 2; i++)
    cr_assert_eq(bk_wire_put_record(&recs, &rec[i]), 0);
  cr_assert_eq(bk_wire_put_result(b, BK_WIRE_STOPPED, "", "node03", 2, &recs),
               0);
  bk_buf_close(&recs);
}

Test(mpi_wire, result_round_trips_the_records) {
  bk_buf_t b;
  bk_buf_init(&b);
  pack_result(&b);
  bk_wire_reader_t r;
  bk_wire_reader_init(&r, b.data, b.len);
  int status;
  const char *why, *host;
  uint32_t n;
  cr_assert_eq(bk_wire_get_result(&r, &status, &why, &host, &n), 0);
  cr_assert_eq(status, BK_WIRE_STOPPED);
  cr_assert_str_eq(host, "node03");
  cr_assert_eq(n, 2);
  bk_record_t rec;
  double x[2], y[1];
  cr_assert_eq(bk_wire_get_record(&r, &rec, x, 2, y, 1), 0);
  cr_assert_str_eq(rec.key, "mc/4");
  cr_assert_eq(x[1], -1.5);
  cr_assert_eq(y[0], 3.25);
  cr_assert_eq(rec.g, -0.5);
  cr_assert_eq(rec.seconds, 0.125);
  cr_assert_str_eq(rec.folder, "/runs/p/work/mc-4");
  cr_assert_eq(bk_wire_get_record(&r, &rec, x, 2, y, 1), 0);
  cr_assert_str_eq(rec.key, "mc/5");
  cr_assert_eq(rec.fault, BK_FAULT_TIMEOUT);
  cr_assert_eq(rec.attempts, 3);
  cr_assert(isnan(rec.g));
  cr_assert_str_eq(rec.reason, "timeout after 600 s");
  cr_assert_str_eq(rec.folder, "node03:/tmp/brink-p-r1-9/mc-5");
  cr_assert_eq(r.left, 0);
  bk_buf_close(&b);
}

/* Reads a whole RESULT; 0 or the first error. */
static int read_result(const char *p, size_t len) {
  bk_wire_reader_t r;
  bk_wire_reader_init(&r, p, len);
  int status;
  const char *why, *host;
  uint32_t n;
  int rc = bk_wire_get_result(&r, &status, &why, &host, &n);
  for (uint32_t k = 0; rc == 0 && k < n; k++) {
    bk_record_t rec;
    double x[2], y[1];
    rc = bk_wire_get_record(&r, &rec, x, 2, y, 1);
  }
  return rc;
}

Test(mpi_wire, a_message_cut_at_any_byte_is_a_protocol_error) {
  bk_buf_t b;
  bk_buf_init(&b);
  pack_result(&b);
  cr_assert_eq(read_result(b.data, b.len), 0);
  for (size_t cut = 0; cut < b.len; cut++)
    cr_assert_eq(read_result(b.data, cut), BK_EPROTO, "cut at %zu of %zu", cut,
                 b.len);
  cr_assert_eq(read_result(NULL, 0), BK_EPROTO);
  bk_buf_close(&b);
}

Test(mpi_wire, values_out_of_range_are_protocol_errors) {
  bk_buf_t b;
  bk_buf_init(&b);
  pack_result(&b);
  /* The status, first field: 7 is no status. */
  int32_t bad = 7;
  memcpy(b.data, &bad, sizeof bad);
  cr_assert_eq(read_result(b.data, b.len), BK_EPROTO);
  bk_buf_reset(&b);
  pack_result(&b);
  /* A string's NUL overwritten: the string has no end. */
  char *nul = memchr(b.data + 4 + 4, '\0', b.len - 8);
  cr_assert_not_null(nul);
  *nul = 'x';
  cr_assert_eq(read_result(b.data, b.len), BK_EPROTO);
  /* A record of another shape (3 inputs where 2 are expected). */
  bk_buf_reset(&b);
  pack_result(&b);
  bk_wire_reader_t r;
  bk_wire_reader_init(&r, b.data, b.len);
  int status;
  const char *why, *host;
  uint32_t n;
  cr_assert_eq(bk_wire_get_result(&r, &status, &why, &host, &n), 0);
  bk_record_t rec;
  double x[3], y[1];
  cr_assert_eq(bk_wire_get_record(&r, &rec, x, 3, y, 1), BK_EPROTO);
  /* A fault brink never records. */
  bk_buf_t one;
  bk_buf_init(&one);
  double xx[2] = {0, 0}, yy[1] = {0};
  bk_record_t f = {.key = "mc/1",
                   .nx = 2,
                   .x = xx,
                   .ny = 1,
                   .y = yy,
                   .fault = BK_FAULT_INTERRUPTED,
                   .attempts = 1};
  cr_assert_eq(bk_wire_put_record(&one, &f), 0);
  bk_wire_reader_init(&r, one.data, one.len);
  cr_assert_eq(bk_wire_get_record(&r, &rec, xx, 2, yy, 1), BK_EPROTO);
  bk_buf_close(&one);
  bk_buf_close(&b);
}

/* The Slurm scripts requeue on exit 3; a malformed message would fail
 * again, so it must not map to 3. */
Test(mpi_wire, protocol_errors_exit_1) {
  cr_assert_eq(bk_error_exit(BK_EPROTO), BK_EXIT_RUNTIME);
}
