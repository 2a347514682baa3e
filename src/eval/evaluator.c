/*
 * The in-process evaluator (see evaluator.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/evaluator.h"

#include <math.h>

#include "base/fault.h"

static int inprocess_batch(bk_evaluator_t *ev, const char *prefix,
                           bk_point_t *pts, size_t n, bk_error_t *err) {
  (void)prefix;
  (void)err;
  const bk_study_t *s = ev->data;
  for (size_t i = 0; i < n; i++) {
    double g = bk_study_g(s, pts[i].x, pts[i].gc);
    pts[i].g = g;
    pts[i].fault = isnan(g) ? BK_FAULT_NOT_A_NUMBER : BK_FAULT_NONE;
  }
  return 0;
}

void bk_evaluator_inprocess(bk_evaluator_t *ev, const bk_study_t *s) {
  ev->batch = inprocess_batch;
  ev->data = (void *)s;
}

static int counted_batch(bk_evaluator_t *ev, const char *prefix,
                         bk_point_t *pts, size_t n, bk_error_t *err) {
  bk_inprocess_t *ip = ev->data;
  bk_evaluator_t plain = {inprocess_batch, (void *)ip->study};
  for (size_t i = 0; i < n; i += BK_INPROCESS_TICK) {
    size_t c = n - i < BK_INPROCESS_TICK ? n - i : BK_INPROCESS_TICK;
    inprocess_batch(&plain, prefix, pts + i, c, err);
    for (size_t k = i; k < i + c; k++) {
      ip->st.completed++;
      if (pts[k].fault != BK_FAULT_NONE)
        ip->st.errors++;
      else if (pts[k].g <= 0)
        ip->st.failures++;
    }
    if (ip->tick)
      ip->tick(ip->tick_data, &ip->st);
  }
  return 0;
}

void bk_evaluator_inprocess_counted(bk_evaluator_t *ev, bk_inprocess_t *ip) {
  ev->batch = counted_batch;
  ev->data = ip;
}
