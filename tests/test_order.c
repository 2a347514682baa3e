/*
 * Tests of the deterministic (value, index) sort.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdlib.h>

#include "numerics/order.h"

/* Ascending values, equal values in index order whatever order they came
 * in (a stable order by value of the pairs listed by index: common
 * practice for a deterministic ranking). */
Test(order, sorts_by_value_then_index) {
  bk_order_pair_t p[] = {{2.0, 4},       {-1.0, 0}, {2.0, 1}, {INFINITY, 2},
                         {-INFINITY, 5}, {2.0, 3},  {0.5, 6}};
  size_t n = sizeof p / sizeof p[0];
  bk_order_sort(p, n);
  const double v[] = {-INFINITY, -1.0, 0.5, 2.0, 2.0, 2.0, INFINITY};
  const size_t i[] = {5, 0, 6, 1, 3, 4, 2};
  for (size_t k = 0; k < n; k++) {
    cr_expect_eq(p[k].v, v[k], "position %zu", k);
    cr_expect_eq(p[k].i, i[k], "position %zu", k);
  }
}

/* Many ties in a shuffled order: the result is the same permutation for
 * every input order. */
Test(order, ties_give_one_order_whatever_the_input_order) {
  enum { N = 500 };
  static bk_order_pair_t p[N];
  unsigned s = 12345;
  for (size_t k = 0; k < N; k++)
    p[k] = (bk_order_pair_t){(double)(k % 7), k};
  for (size_t k = N - 1; k > 0; k--) { /* a fixed shuffle */
    s = s * 1103515245u + 12345u;
    size_t j = (s >> 8) % (k + 1);
    bk_order_pair_t t = p[k];
    p[k] = p[j];
    p[j] = t;
  }
  bk_order_sort(p, N);
  for (size_t k = 1; k < N; k++)
    cr_assert(p[k - 1].v < p[k].v ||
                  (p[k - 1].v == p[k].v && p[k - 1].i < p[k].i),
              "position %zu", k);
  bk_order_sort(p, 0);
  bk_order_sort(p, 1);
}
