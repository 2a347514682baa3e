/*
 * Unit tests of shard.c: parsing I/N, key ownership, log names, the shard
 * evaluator (owned points reach the inner evaluator, the others are safe)
 * and the evaluator that serves keys from record logs and counts the
 * missing ones by owning shard.
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
#include "eval/shard.h"

Test(shard, parses_i_of_n_counted_from_zero) {
  bk_shard_t sh;
  char why[200];
  cr_assert_eq(bk_shard_parse("0/4", &sh, why, sizeof why), 0);
  cr_assert_eq(sh.index, 0);
  cr_assert_eq(sh.count, 4);
  cr_assert_eq(bk_shard_parse("3/4", &sh, why, sizeof why), 0);
  cr_assert_eq(sh.index, 3);
  const char *bad[] = {"4/4", "1/0",  "-1/4", "1/", "/4",
                       "a/b", "1 /4", "1/4x", "",   "12345678/99999999",
                       "2"};
  for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
    why[0] = '\0';
    cr_assert_eq(bk_shard_parse(bad[i], &sh, why, sizeof why), BK_EINVAL,
                 "'%s'", bad[i]);
    cr_assert(why[0], "a reason for '%s'", bad[i]);
  }
  cr_assert_eq(bk_shard_parse(NULL, &sh, why, sizeof why), BK_EINVAL);
}

Test(shard, every_index_has_exactly_one_owner_and_shares_are_even) {
  bk_shard_t sh[5];
  for (uint32_t i = 0; i < 5; i++)
    sh[i] = (bk_shard_t){i, 5};
  int counts[5] = {0};
  for (uint64_t k = 0; k < 1000; k++) {
    int owners = 0;
    for (int i = 0; i < 5; i++)
      if (bk_shard_owns(&sh[i], k)) {
        owners++;
        counts[i]++;
      }
    cr_assert_eq(owners, 1, "index %llu", (unsigned long long)k);
  }
  for (int i = 0; i < 5; i++)
    cr_assert_eq(counts[i], 200);
  bk_shard_t none = {0, 0};
  cr_assert(bk_shard_owns(&none, 12345));
}

Test(shard, log_names_round_trip_and_others_are_not_shards) {
  bk_shard_t sh = {2, 7}, back;
  char name[64];
  bk_shard_log_name(&sh, name, sizeof name);
  cr_assert_str_eq(name, "records-shard-2-of-7.log");
  cr_assert(bk_shard_parse_log_name(name, &back));
  cr_assert_eq(back.index, 2);
  cr_assert_eq(back.count, 7);
  const char *no[] = {"records.log",
                      "records-shard-7-of-7.log",
                      "records-shard-02-of-7.log",
                      "records-shard-1-of-7.log~",
                      "records-shard-1-of-7.log.lock",
                      "x"};
  for (size_t i = 0; i < sizeof no / sizeof no[0]; i++)
    cr_assert(!bk_shard_parse_log_name(no[i], &back), "%s", no[i]);
}

Test(shard, only_sampling_methods_may_be_sharded) {
  cr_assert(bk_shard_method_allowed(BK_METHOD_RANDOM));
  cr_assert(bk_shard_method_allowed(BK_METHOD_LHS));
  cr_assert(bk_shard_method_allowed(BK_METHOD_SOBOL));
  cr_assert(!bk_shard_method_allowed(BK_METHOD_FORM));
  cr_assert(!bk_shard_method_allowed(BK_METHOD_IMPORTANCE));
  cr_assert(!bk_shard_method_allowed(BK_METHOD_CROSS_ENTROPY));
  cr_assert(!bk_shard_method_allowed(BK_METHOD_SUBSET));
}

/* An inner evaluator that records which indices it saw and answers
 * g = -index. */
typedef struct {
  uint64_t seen[64];
  size_t nseen;
} inner_t;

static int inner_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                       size_t n, bk_error_t *err) {
  (void)err;
  inner_t *in = ev->data;
  cr_assert_str_eq(prefix, "mc");
  for (size_t i = 0; i < n; i++) {
    in->seen[in->nseen++] = pts[i].index;
    pts[i].g = -(double)pts[i].index;
    pts[i].fault = pts[i].index == 4 ? BK_FAULT_TIMEOUT : BK_FAULT_NONE;
  }
  return 0;
}

Test(shard, evaluator_passes_owned_points_and_marks_the_rest_safe) {
  inner_t in = {.nseen = 0};
  bk_evaluator_t inner = {inner_batch, &in}, ev;
  bk_shard_eval_t se = {{1, 3}, &inner, 0};
  bk_shard_evaluator(&se, &ev);
  bk_point_t pts[10];
  double x[10];
  for (int i = 0; i < 10; i++)
    pts[i] = (bk_point_t){(uint64_t)i, &x[i], NULL, NAN, -1, NULL};
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(ev.batch(&ev, "mc", pts, 10, &err), 0);
  cr_assert_eq(in.nseen, 3);
  cr_assert_eq(in.seen[0], 1);
  cr_assert_eq(in.seen[1], 4);
  cr_assert_eq(in.seen[2], 7);
  cr_assert_eq(se.owned, 3);
  for (int i = 0; i < 10; i++) {
    if (i % 3 == 1) {
      cr_assert_eq(pts[i].g, -(double)i);
      cr_assert_eq(pts[i].fault, i == 4 ? BK_FAULT_TIMEOUT : BK_FAULT_NONE);
    } else {
      cr_assert_eq(pts[i].g, 1.0);
      cr_assert_eq(pts[i].fault, BK_FAULT_NONE);
    }
  }
}

Test(shard, serve_answers_from_the_logs_and_counts_missing_keys) {
  char path[] = "/tmp/bk-test-shard-XXXXXX";
  cr_assert(mkdtemp(path));
  char log[300];
  snprintf(log, sizeof log, "%s/records.log", path);
  const char *xn[] = {"a"};
  bk_fingerprint_part_t part = {"study", "abc"};
  bk_records_opts_t ro = {.path = log,
                          .tool = "brink test",
                          .nparts = 1,
                          .parts = &part,
                          .nx = 1,
                          .xnames = xn};
  bk_records_t *r;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_records_open(&r, &ro, &err), 0, "%s", err.msg);
  /* Keys mc/0, mc/2, mc/4 are recorded; 1 and 3 (shard 1 of 2) and 5 are
   * not. */
  double xs[6] = {0.5, 1.5, 2.5, 3.5, 4.5, 5.5};
  for (int i = 0; i < 6; i += 2) {
    char key[16];
    snprintf(key, sizeof key, "mc/%d", i);
    bk_record_t rec = {.key = key,
                       .nx = 1,
                       .x = &xs[i],
                       .g = 10.0 + i,
                       .fault = i == 2 ? BK_FAULT_EXIT_CODE : 0,
                       .attempts = 1,
                       .host = "h",
                       .reason = ""};
    if (i == 2)
      rec.g = NAN;
    cr_assert_eq(bk_records_append(r, &rec, &err), 0);
  }
  bk_study_t s;
  memset(&s, 0, sizeof s);
  s.nvars = 1;
  uint64_t missing[2] = {0, 0};
  char first[2][96] = {"", ""};
  bk_serve_t sv = {&s, &r, 1, 2, missing, first, 0, 0};
  bk_evaluator_t ev;
  bk_shard_serve_evaluator(&sv, &ev);
  bk_point_t pts[6];
  for (int i = 0; i < 6; i++)
    pts[i] = (bk_point_t){(uint64_t)i, &xs[i], NULL, NAN, -1, NULL};
  cr_assert_eq(ev.batch(&ev, "mc", pts, 6, &err), 0);
  cr_assert_eq(sv.served, 3);
  cr_assert_eq(pts[0].g, 10.0);
  cr_assert_eq(pts[4].g, 14.0);
  cr_assert(isnan(pts[2].g));
  cr_assert_eq(pts[2].fault, BK_FAULT_EXIT_CODE);
  cr_assert_eq(missing[0], 0);
  cr_assert_eq(missing[1], 3);
  cr_assert_str_eq(first[1], "mc/1");
  cr_assert_eq(pts[1].g, 1.0, "missing keys are answered as safe");
  /* Inputs that differ from the recorded ones are refused. */
  double other = 9.0;
  bk_point_t bad = {0, &other, NULL, NAN, -1, NULL};
  cr_assert_eq(ev.batch(&ev, "mc", &bad, 1, &err), BK_EMISMATCH);
  cr_assert(strstr(err.msg, "mc/0"), "%s", err.msg);
  bk_records_close(r);
  char cmd[400];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", path);
  cr_assert_eq(system(cmd), 0);
}
