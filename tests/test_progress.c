/*
 * Tests of the progress line of `brink run` and of what feeds it: the
 * evaluators' live counts (in process and through the dispatcher, made
 * and replayed), the methods' stages and totals. The live counts are
 * checked against the methods' own counting (crude Monte Carlo's failures,
 * an independent path through method_mc.c); the line's arithmetic
 * (share, rate, time to go) is worked by hand beside each case.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "base/buf.h"
#include "cmd/progress.h"
#include "eval/dispatch.h"
#include "eval/exec.h"
#include "eval/records.h"
#include "eval/shard.h"
#include "methods/method.h"

static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-progress-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(progress, .init = setup, .fini = teardown);

static const char *line(const bk_progress_t *p, double now) {
  static char out[512];
  bk_buf_t b;
  bk_buf_init(&b);
  bk_progress_line(p, now, &b);
  snprintf(out, sizeof out, "%s", b.data ? b.data : "");
  bk_buf_close(&b);
  return out;
}

/* 39 of 800 runs done, 12 failed, before the first batch of the method
 * ends: the counts are the evaluator's, Pf the running share 12/39 =
 * 0.30769, the rate 39 / 10 s = 3.9 /s, and 761 to go at that rate take
 * 195.1 s = 3m15s. */
Test(progress, live_counts_before_the_first_decision_point) {
  bk_progress_t p;
  bk_progress_init(&p, 100.0);
  p.running_share = 1;
  p.processes = 1;
  bk_result_t r;
  memset(&r, 0, sizeof r);
  bk_method_progress_t mp = {&r, 800, "random sampling", 0, 100};
  bk_progress_method(&p, &mp);
  bk_evaluator_stats_t st = {.completed = 39, .failures = 12, .running = 2};
  p.st = &st;
  cr_assert_str_eq(line(&p, 110.0),
                   "random sampling: 39/800 done  2 running  12 failures  0 "
                   "errors  Pf 3.077e-01  cov -  3.9 /s  ETA 3m15s");
  /* Model errors left out (on_error: skip): 12 / (39 - 3). */
  st.errors = 3;
  cr_assert_str_eq(line(&p, 110.0),
                   "random sampling: 39/800 done  2 running  12 failures  3 "
                   "errors  Pf 3.333e-01  cov -  3.9 /s  ETA 3m15s");
  /* ... or counted as failed (on_error: fail): 15 / 39. */
  p.on_error_fail = 1;
  cr_assert(strstr(line(&p, 110.0), "Pf 3.846e-01"), "%s", line(&p, 110.0));
}

/* FORM: the batch under way and how far it is, no total and no time to go
 * for the run (its cap is a limit, not a plan); 4 of the batch of 11 done,
 * 7 left at 34 / 10 s = 3.4 /s take 2.06 s. */
Test(progress, form_shows_its_iteration_and_batch_not_the_cap) {
  bk_progress_t p;
  bk_progress_init(&p, 0.0);
  p.processes = 1;
  bk_result_t r;
  memset(&r, 0, sizeof r);
  r.evaluations = 30;
  bk_method_progress_t mp = {&r, 0, "FORM search 1, iteration 3", 30, 11};
  bk_progress_method(&p, &mp);
  bk_evaluator_stats_t st = {.completed = 34, .running = 4};
  p.st = &st;
  cr_assert_str_eq(line(&p, 10.0),
                   "FORM search 1, iteration 3: batch 4/11  34 done  4 running"
                   "  0 failures  0 errors  Pf -  cov -  3.4 /s  batch ETA "
                   "2s");
}

Test(progress, every_key_layout_has_words) {
  static const char *const cases[][2] = {
      {"mc", "random sampling"},
      {"lhs/r3", "Latin hypercube, replicate 4"},
      {"sobol/r0", "Sobol, replicate 1"},
      {"form/i3", "FORM search 1, iteration 3"},
      {"form/d1/i0", "FORM search 2, iteration 0"},
      {"form/h", "FORM curvature check, search 1"},
      {"form/d2/h", "FORM curvature check, search 3"},
      {"form/p", "FORM probe for further design points"},
      {"is", "importance sampling"},
      {"ce/s0", "cross-entropy adaptation step 1"},
      {"ce/final", "cross-entropy final sampling"},
      {"ss/l0", "subset level 0 (Monte Carlo)"},
      {"ss/l2/s4", "subset level 2, chain step 5"},
      {"sg/t0", "surrogate starting design"},
      {"sg/t7", "surrogate learning iteration 7"},
      {"sg/c", "surrogate correction runs"},
      {"form/i3x", "batch form/i3x"},
      {"try", "batch try"},
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    char out[96];
    bk_method_stage(cases[i][0], out, sizeof out);
    cr_expect_str_eq(out, cases[i][1], "%s", cases[i][0]);
  }
}

static bk_study_t *load(const char *text) {
  char p[600];
  snprintf(p, sizeof p, "%s/s.yaml", dir);
  FILE *f = fopen(p, "w");
  cr_assert(f);
  fputs(text, f);
  fclose(f);
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_study_load(p, &s, &err), 0, "%s", err.msg);
  return s;
}

typedef struct {
  int calls;
  int starts; /* calls announcing a batch */
  uint64_t planned_max;
  int stages_ok;
  const char *want_stage;
  int ticks;
  bk_evaluator_stats_t last;
} seen_t;

static void on_progress(void *data, const bk_method_progress_t *mp) {
  seen_t *s = data;
  s->calls++;
  s->starts += mp->batch_size > 0;
  if (mp->planned > s->planned_max)
    s->planned_max = mp->planned;
  if (mp->stage[0] && strncmp(mp->stage, s->want_stage, strlen(s->want_stage)))
    s->stages_ok = 0;
}

static void on_tick(void *data, const bk_evaluator_stats_t *st) {
  seen_t *s = data;
  s->ticks++;
  s->last = *st;
}

/* In process: FORM reports no total, only batches named FORM; random
 * with samples reports the samples; the evaluator's live failures end
 * equal to crude Monte Carlo's count. */
Test(progress, methods_report_totals_and_stages_in_process) {
  bk_study_t *s = load("name: p\n"
                       "variables:\n"
                       "  a: {type: normal, mean: 2, sd: 1}\n"
                       "  b: {type: normal, mean: 0, sd: 1}\n"
                       "limit_state: a - b\n"
                       "analysis: {method: form}\n");
  seen_t seen = {.stages_ok = 1, .want_stage = "FORM "};
  bk_inprocess_t ip = {s, on_tick, &seen, {0}};
  bk_evaluator_t ev;
  bk_evaluator_inprocess_counted(&ev, &ip);
  bk_method_opts_t opts = {on_progress, &seen, NULL, NULL};
  bk_result_t res;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, &opts, &res, &err), 0, "%s", err.msg);
  cr_assert_eq(seen.planned_max, 0, "FORM announced a total");
  cr_assert(seen.stages_ok);
  cr_assert_gt(seen.starts, 2);
  cr_assert_eq(ip.st.completed, res.evaluations);
  bk_result_close(&res);
  bk_study_free(s);

  s = load("name: p\n"
           "variables:\n"
           "  a: {type: normal, mean: 1, sd: 1}\n"
           "limit_state: a\n"
           "analysis: {method: random, samples: 30000}\n");
  seen_t rs = {.stages_ok = 1, .want_stage = "random sampling"};
  bk_inprocess_t ip2 = {s, on_tick, &rs, {0}};
  bk_evaluator_inprocess_counted(&ev, &ip2);
  opts.progress_data = &rs;
  cr_assert_eq(bk_method_run(s, &ev, &opts, &res, &err), 0, "%s", err.msg);
  cr_assert_eq(rs.planned_max, 30000);
  cr_assert(rs.stages_ok);
  /* Ticks every 4096 evaluations, not only per batch. */
  cr_assert_geq(rs.ticks, 30000 / BK_INPROCESS_TICK);
  cr_assert_eq(rs.last.completed, 30000);
  cr_assert_eq(rs.last.failures, res.est.failures);
  cr_assert_gt(res.est.failures, 0);
  bk_result_close(&res);
  bk_study_free(s);
}

/* Runs the study's method through a dispatcher on records.log; returns
 * the result's failures and fills the last tick's counts. */
static uint64_t run_dispatched(bk_study_t *s, seen_t *seen) {
  bk_shard_ident_t id;
  bk_error_t ierr;
  bk_error_clear(&ierr);
  cr_assert_eq(bk_shard_ident_init(&id, s, &ierr), 0, "%s", ierr.msg);
  char lp[600], wd[600];
  snprintf(lp, sizeof lp, "%s/records.log", dir);
  snprintf(wd, sizeof wd, "%s/work", dir);
  mkdir(wd, 0777);
  bk_records_opts_t ro;
  bk_shard_ident_opts(&id, s, lp, &ro);
  bk_records_t *rec;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_records_open(&rec, &ro, &err), 0, "%s", err.msg);
  bk_shard_ident_close(&id);
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  bk_dispatch_opts_t dop = {.study = s,
                            .records = rec,
                            .exec = ex,
                            .work_dir = wd,
                            .host = "test",
                            .tick = on_tick,
                            .tick_data = seen};
  bk_dispatch_t *d;
  cr_assert_eq(bk_dispatch_new(&d, &dop), 0);
  bk_evaluator_t ev;
  bk_dispatch_evaluator(d, &ev);
  bk_method_opts_t opts = {on_progress, seen, NULL, NULL};
  bk_result_t res;
  cr_assert_eq(bk_method_run(s, &ev, &opts, &res, &err), 0, "%s", err.msg);
  uint64_t k = res.est.failures;
  cr_assert_eq(res.model_errors,
               seen->last.errors + seen->last.replayed_errors);
  bk_result_close(&res);
  bk_dispatch_free(d);
  bk_exec_free(ex);
  cr_assert_eq(bk_records_close(rec), 0);
  return k;
}

/* Through the dispatcher: failures and errors counted as runs finish,
 * and again when a resumed run replays them from the records. */
Test(progress, dispatcher_counts_made_and_replayed_evaluations) {
  bk_study_t *s =
      load("name: p\n"
           "variables:\n"
           "  a: {type: normal, mean: 0.5, sd: 1}\n"
           "model:\n"
           "  command: [sh, -c, 'case $1 in -*) exit 3;; esac; echo y=$1',"
           " sh, '{{ a - 0.3 : %.17g }}']\n"
           "  outputs: {y: {stdout: true, pattern: 'y=(\\S+)'}}\n"
           "  max_error_fraction: 0.9\n"
           "  keep: none\n"
           "limit_state: y - 0.5\n"
           "analysis: {method: random, samples: 24}\n"
           "run: {slots: 2}\n");
  seen_t a = {.stages_ok = 1, .want_stage = "random sampling"};
  uint64_t k = run_dispatched(s, &a);
  cr_assert_eq(a.last.completed, 24);
  cr_assert_eq(a.last.replayed, 0);
  cr_assert_eq(a.last.failures, k);
  cr_assert_gt(a.last.errors, 0, "no model errors: the test proves little");
  cr_assert_gt(k, 0);
  cr_assert_geq(a.ticks, 24);
  seen_t b = {.stages_ok = 1, .want_stage = "random sampling"};
  uint64_t k2 = run_dispatched(s, &b);
  cr_assert_eq(k2, k);
  cr_assert_eq(b.last.completed, 0);
  cr_assert_eq(b.last.replayed, 24);
  cr_assert_eq(b.last.failures, k);
  cr_assert_eq(b.last.replayed_errors, a.last.errors);
  cr_assert_geq(b.ticks, 1);
  bk_study_free(s);
}
