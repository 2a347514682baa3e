/*
 * A deterministic sort of (value, index) pairs (see order.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/order.h"

#include <stdlib.h>

static int pair_cmp(const void *a, const void *b) {
  const bk_order_pair_t *x = a, *y = b;
  if (x->v < y->v)
    return -1;
  if (x->v > y->v)
    return 1;
  return x->i < y->i ? -1 : x->i > y->i;
}

void bk_order_sort(bk_order_pair_t *p, size_t n) {
  if (n > 1)
    qsort(p, n, sizeof *p, pair_cmp);
}
