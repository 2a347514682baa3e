/*
 * A deterministic sort of values that remember where they came from.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_ORDER_H
#define BK_ORDER_H

#include <stddef.h>

typedef struct {
  double v; /* the value sorted by */
  size_t i; /* its index; breaks ties */
} bk_order_pair_t;

/* Sorts p[0..n) by v ascending, equal values by i ascending, so the order
 * is the same on every platform (qsort is not stable). NaN values must not
 * be given. */
void bk_order_sort(bk_order_pair_t *p, size_t n);

#endif
