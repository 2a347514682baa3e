/*
 * Unit tests of replay.c: the key of a point, a key found in the first
 * log that has it, the bit-for-bit check of the inputs (the one mismatch
 * message, verbatim), and points left alone when nothing is recorded.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "base/fault.h"
#include "eval/replay.h"

static char folder[64];

static void setup(void) {
  snprintf(folder, sizeof folder, "/tmp/bk-replay-XXXXXX");
  cr_assert(mkdtemp(folder));
}

static void teardown(void) {
  char cmd[128];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", folder);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(replay, .init = setup, .fini = teardown);

static const char *const xnames[] = {"a", "b"};
static const char *const ynames[] = {"out"};

/* A log `name` holding key/x -> y = 10 x[0], g = g, fault. */
static bk_records_t *log_with(const char *name, const char *key,
                              const double *x, double g, int fault) {
  char path[128];
  snprintf(path, sizeof path, "%s/%s", folder, name);
  bk_fingerprint_part_t part = {"study", "abc"};
  bk_records_opts_t ro = {.path = path,
                          .tool = "brink test",
                          .nparts = 1,
                          .parts = &part,
                          .nx = 2,
                          .xnames = xnames,
                          .ny = 1,
                          .ynames = ynames};
  bk_records_t *r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_records_open(&r, &ro, &err), 0, "%s", err.msg);
  double y = 10 * x[0];
  bk_record_t rec = {.key = key,
                     .nx = 2,
                     .x = x,
                     .ny = 1,
                     .y = &y,
                     .g = g,
                     .fault = fault,
                     .attempts = 1,
                     .host = "h",
                     .reason = fault ? "exit status 3" : "",
                     .folder = ""};
  cr_assert_eq(bk_records_append(r, &rec, &err), 0, "%s", err.msg);
  return r;
}

Test(replay, key_is_prefix_slash_index) {
  char key[BK_REPLAY_KEY_MAX];
  cr_assert_eq(bk_replay_key(key, sizeof key, "lhs/r3", 77), 0);
  cr_assert_str_eq(key, "lhs/r3/77");
  cr_assert_eq(bk_replay_key(key, sizeof key, "mc", UINT64_MAX), 0);
  cr_assert_str_eq(key, "mc/18446744073709551615");
  char small[6];
  cr_assert_eq(bk_replay_key(small, sizeof small, "mc", 12345), BK_ERANGE);
}

Test(replay, recorded_point_gets_outputs_g_fault_and_the_record) {
  double x[2] = {0.25, -3};
  bk_records_t *a = log_with("a.log", "mc/1", (double[]){9, 9}, 5, 0);
  bk_records_t *b = log_with("b.log", "mc/2", x, NAN, BK_FAULT_EXIT_CODE);
  bk_records_t *logs[] = {a, NULL, b};
  double y = NAN;
  bk_point_t pt = {2, (double[]){0.25, -3}, &y, 0, 0, NULL};
  bk_record_t rec;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_replay_point(logs, 3, "mc/2", 2, 1, &pt, &rec, &err), 1);
  cr_assert_eq(y, 2.5);
  cr_assert(isnan(pt.g));
  cr_assert_eq(pt.fault, BK_FAULT_EXIT_CODE);
  cr_assert_str_eq(rec.reason, "exit status 3");
  cr_assert_eq(err.code, 0);
  bk_records_close(a);
  bk_records_close(b);
}

Test(replay, unrecorded_point_is_left_alone) {
  double x[2] = {1, 2};
  bk_records_t *a = log_with("a.log", "mc/1", x, 5, 0);
  double y = -7;
  bk_point_t pt = {3, x, &y, -8, -9, NULL};
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_replay_point(&a, 1, "mc/3", 2, 1, &pt, NULL, &err), 0);
  cr_assert_eq(y, -7);
  cr_assert_eq(pt.g, -8);
  cr_assert_eq(pt.fault, -9);
  cr_assert_eq(bk_replay_point(NULL, 0, "mc/1", 2, 1, &pt, NULL, &err), 0);
  bk_records_close(a);
}

/* The inputs are compared bit for bit: 0 and -0 differ, as do two doubles
 * one unit in the last place apart. */
Test(replay, inputs_that_differ_in_one_bit_are_refused) {
  double x[2] = {0.0, 0.1};
  bk_records_t *a = log_with("a.log", "lhs/r0/4", x, 5, 0);
  double other[][2] = {{-0.0, 0.1}, {0.0, nextafter(0.1, 1)}};
  for (int i = 0; i < 2; i++) {
    double y = -7;
    bk_point_t pt = {4, other[i], &y, -8, 0, NULL};
    bk_error_t err;
    bk_error_clear(&err);
    cr_assert_eq(bk_replay_point(&a, 1, "lhs/r0/4", 2, 1, &pt, NULL, &err),
                 BK_EMISMATCH);
    cr_assert_str_eq(err.msg,
                     "the recorded inputs of lhs/r0/4 differ from the ones "
                     "this study gives, so the records were made "
                     "differently (another brink version?) and cannot be "
                     "reused. Use a new run.folder");
    cr_assert_eq(y, -7, "a refused point is left alone");
  }
  bk_records_close(a);
}

Test(replay, same_inputs_compares_bits) {
  double a[3] = {1, NAN, -0.0}, b[3] = {1, NAN, -0.0}, c[3] = {1, NAN, 0.0};
  cr_assert(bk_replay_same_inputs(a, b, 3));
  cr_assert_not(bk_replay_same_inputs(a, c, 3));
  cr_assert(bk_replay_same_inputs(NULL, NULL, 0));
}
