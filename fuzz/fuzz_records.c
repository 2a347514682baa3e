/*
 * Fuzz target: the record-log reader. The input is written as a log and
 * opened read-only for any study (scan, look-ups), then for writing with
 * the study the seeds were made for (torn-tail repair, one append), and
 * opened again: what was appended must be found, and the reopened log
 * must be whole.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "base/error.h"
#include "eval/records.h"

#ifndef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY LLVMFuzzerTestOneInput
#endif

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size);

static char fr_path[96];

/* The study of the seed logs (fuzz/make_records_seed.c writes them). */
static const bk_fingerprint_part_t fr_parts[] = {
    {"study", "0123456789abcdef0123456789abcdef"},
    {"model", "fedcba9876543210fedcba9876543210"},
    {"tool", "brink-0.1.0"},
};
static const char *const fr_xnames[] = {"a", "b"};
static const char *const fr_ynames[] = {"g_out"};

static const bk_records_opts_t fr_opts = {
    .tool = "brink 0.1.0",
    .nparts = 3,
    .parts = fr_parts,
    .nx = 2,
    .xnames = fr_xnames,
    .ny = 1,
    .ynames = fr_ynames,
    .sync_interval = 1e9,
};

static int fr_visit(void *data, const bk_record_t *rec) {
  size_t *n = data;
  assert(rec->key && rec->key[0]);
  (*n)++;
  return 0;
}

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size) {
  if (!fr_path[0]) {
    char dir[64];
    snprintf(dir, sizeof dir, "/tmp/bk-fuzz-records-%ld", (long)getpid());
    mkdir(dir, 0700);
    snprintf(fr_path, sizeof fr_path, "%s/records.log", dir);
  }
  FILE *f = fopen(fr_path, "wb");
  assert(f);
  if (size)
    assert(fwrite(data, 1, size, f) == size);
  fclose(f);

  bk_records_opts_t ro = fr_opts;
  ro.path = fr_path;
  ro.read_only = 1;
  ro.any_study = 1;
  bk_error_t err;
  bk_error_clear(&err);
  bk_records_t *r = NULL;
  if (bk_records_open(&r, &ro, &err) == 0) {
    size_t n = 0;
    int rc = bk_records_scan(r, fr_visit, &n);
    if (rc == 0)
      assert(n == bk_records_count(r));
    bk_record_t rec;
    (void)bk_records_find(r, "mc/1", &rec);
    (void)bk_records_find(r, "lhs/r0/3", &rec);
    bk_records_close(r);
  } else {
    assert(!r && err.code);
  }

  bk_records_opts_t wo = fr_opts;
  wo.path = fr_path;
  bk_error_clear(&err);
  if (bk_records_open(&r, &wo, &err) != 0) {
    assert(!r && err.code);
    return 0;
  }
  size_t before = bk_records_count(r);
  double x[2] = {0.25, -1.5}, y[1] = {NAN};
  bk_record_t add = {.key = "fuzz/appended",
                     .nx = 2,
                     .x = x,
                     .ny = 1,
                     .y = y,
                     .g = 1.0,
                     .attempts = 1,
                     .seconds = 0.5,
                     .host = "h",
                     .reason = "n",
                     .folder = "f"};
  int rc = bk_records_append(r, &add, &err);
  assert(rc == 0);
  bk_records_close(r);
  bk_error_clear(&err);
  rc = bk_records_open(&r, &wo, &err);
  assert(rc == 0);
  assert(bk_records_dropped(r) == 0);
  bk_record_t got;
  assert(bk_records_find(r, "fuzz/appended", &got));
  assert(got.x[0] == 0.25 && got.x[1] == -1.5 && got.g == 1.0);
  size_t after = bk_records_count(r);
  assert(after == before + 1 || after == before);
  size_t n = 0;
  assert(bk_records_scan(r, fr_visit, &n) == 0 && n == after);
  bk_records_close(r);
  return 0;
}
