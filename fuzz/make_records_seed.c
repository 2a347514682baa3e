/*
 * Writes the seed logs of the records fuzz target: a log with a few
 * records of the target's study (fuzz_records.c), as brink writes it.
 * Usage: make_records_seed OUT-FOLDER
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "base/error.h"
#include "base/fault.h"
#include "eval/records.h"

#define BK_FUZZ_ENTRY fuzz_records_one
#include "fuzz_records.c"

int main(int argc, char **argv) {
  if (argc != 2)
    return 2;
  char path[512];
  snprintf(path, sizeof path, "%s/records.log", argv[1]);
  unlink(path);
  bk_records_opts_t o = fr_opts;
  o.path = path;
  bk_error_t err;
  bk_error_clear(&err);
  bk_records_t *r;
  if (bk_records_open(&r, &o, &err)) {
    bk_error_print(&err, stderr);
    return 1;
  }
  const char *keys[] = {"mc/0", "mc/1", "lhs/r0/3", "mc/1", "mc/2"};
  const char *faults[] = {"ok", "ok", "timeout", "signal", "ok"};
  for (int i = 0; i < 5; i++) {
    double x[2] = {0.1 * i, -1e-300 * i}, y[1] = {i == 2 ? NAN : 3.5 * i};
    bk_record_t rec = {.key = keys[i],
                       .nx = 2,
                       .x = x,
                       .ny = 1,
                       .y = y,
                       .g = i == 2 ? NAN : 1.0 - i,
                       .fault = bk_fault_from_name(faults[i]),
                       .attempts = 1 + i % 2,
                       .seconds = 0.25 * i,
                       .host = "node#1\tx",
                       .reason = i == 2 ? "timeout after 2 s" : "",
                       .folder = i == 2 ? "/r/mc-2" : ""};
    if (bk_records_append(r, &rec, &err)) {
      bk_error_print(&err, stderr);
      return 1;
    }
  }
  return bk_records_close(r) ? 1 : 0;
}
