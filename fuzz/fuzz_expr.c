/*
 * Fuzz target: the expression compiler and evaluator. The input is an
 * expression over a fixed name table; what compiles is evaluated, and
 * every failure must come with an offset inside the text and a message.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include "study/expr.h"

#ifndef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY LLVMFuzzerTestOneInput
#endif

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size);

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size) {
  static const char *const names[] = {"fy",         "t",  "span",
                                      "deflection", "x1", "_index"};
  static const double values[] = {380.0, 2.0, 6.0, 0.03, -1.5, 7.0};
  bk_names_t tab = {names, sizeof names / sizeof names[0]};
  bk_expr_t *e = NULL;
  char msg[256];
  size_t off = (size_t)-1;
  int rc = bk_expr_compile((const char *)data, size, &tab, &e, msg, sizeof msg,
                           &off);
  if (rc == 0) {
    assert(e);
    (void)bk_expr_eval(e, values);
    unsigned char used[6] = {0};
    bk_expr_uses(e, used);
    bk_expr_free(e);
  } else {
    assert(!e);
    assert(off <= size);
    assert(msg[0]);
  }
  return 0;
}
