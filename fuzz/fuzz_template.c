/*
 * Fuzz target: the input-deck template parser and renderer. The input is
 * a template over a fixed name table; what parses is rendered, and every
 * failure must carry a line and column inside the text.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include "base/buf.h"
#include "base/error.h"
#include "study/template.h"

#ifndef BK_FUZZ_ENTRY
#define BK_FUZZ_ENTRY LLVMFuzzerTestOneInput
#endif

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size);

int BK_FUZZ_ENTRY(const uint8_t *data, size_t size) {
  static const char *const names[] = {"P", "E", "L", "phi", "gamma", "q"};
  static const double values[] = {1000.0, 2.1e11, 1.0, 32.0, 19.0, -0.0};
  bk_names_t tab = {names, sizeof names / sizeof names[0]};
  bk_template_t *t = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  int rc =
      bk_template_parse("deck.inp", (const char *)data, size, &tab, &t, &err);
  if (rc == 0) {
    assert(t);
    bk_buf_t out;
    bk_buf_init(&out);
    bk_template_ctx_t ctx = {.values = values,
                             .index = 42.0,
                             .key = "lhs/r3/77",
                             .folder = "/tmp/run/lhs-r3-77",
                             .threads = 4,
                             .ranks = 2,
                             .hosts = "node1:2"};
    rc = bk_template_render(t, &ctx, &out);
    assert(rc == 0);
    bk_buf_close(&out);
    bk_template_free(t);
  } else {
    assert(!t);
    assert(err.code == rc);
    assert(err.line >= 1 && err.col >= 1);
    assert(err.msg[0]);
  }
  return 0;
}
