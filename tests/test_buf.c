/*
 * Tests of the growable buffer: it is NUL-terminated after every call,
 * grows across its first capacity and many doublings, formats long texts
 * exactly as snprintf does, and leaves its content as it was when an
 * allocation fails (BK_ENOMEM).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/error.h"

static void reset(void) {
  bk_alloc_fail_at(0);
}

TestSuite(buf, .fini = reset);

Test(buf, starts_empty_and_stays_terminated) {
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_null(b.data);
  cr_assert_eq(b.len, 0);
  cr_assert_eq(bk_buf_puts(&b, ""), 0);
  cr_assert_not_null(b.data);
  cr_assert_str_eq(b.data, "");
  cr_assert_eq(bk_buf_putc(&b, 'g'), 0);
  cr_assert_eq(bk_buf_append(&b, "<=0xyz", 3), 0);
  cr_assert_str_eq(b.data, "g<=0");
  cr_assert_eq(b.len, 4);
  bk_buf_reset(&b);
  cr_assert_str_eq(b.data, "");
  cr_assert_eq(b.len, 0);
  bk_buf_close(&b);
  cr_assert_null(b.data);
}

Test(buf, grows_over_many_doublings) {
  bk_buf_t b;
  bk_buf_init(&b);
  char want[100001];
  for (int i = 0; i < 100000; i++) {
    want[i] = (char)('a' + i % 26);
    cr_assert_eq(bk_buf_putc(&b, want[i]), 0);
    cr_assert_eq(b.data[b.len], '\0');
  }
  want[100000] = '\0';
  cr_assert_eq(b.len, 100000);
  cr_assert_str_eq(b.data, want);
  cr_assert_geq(b.cap, b.len + 1);
  bk_buf_close(&b);
}

Test(buf, binary_data_keeps_its_length) {
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_buf_append(&b, "a\0b", 3), 0);
  cr_assert_eq(b.len, 3);
  cr_assert_eq(memcmp(b.data, "a\0b", 4), 0);
  bk_buf_close(&b);
}

/* Both branches of the formatter: into the small stack buffer, and past
 * it straight into the buffer. */
Test(buf, printf_matches_snprintf_short_and_long) {
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_buf_printf(&b, "%s=%.17g;", "beta", 3.8), 0);
  char big[2000];
  memset(big, 'x', sizeof big - 1);
  big[sizeof big - 1] = '\0';
  cr_assert_eq(bk_buf_printf(&b, "[%s|%d]", big, 42), 0);
  char want[2100];
  snprintf(want, sizeof want, "%s=%.17g;[%s|%d]", "beta", 3.8, big, 42);
  cr_assert_str_eq(b.data, want);
  cr_assert_eq(b.len, strlen(want));
  bk_buf_close(&b);
}

Test(buf, a_failed_allocation_leaves_the_content) {
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_buf_puts(&b, "kept"), 0);
  char big[1000];
  memset(big, 'y', sizeof big - 1);
  big[sizeof big - 1] = '\0';
  bk_alloc_fail_at(1);
  cr_assert_eq(bk_buf_puts(&b, big), BK_ENOMEM);
  cr_assert_str_eq(b.data, "kept");
  cr_assert_eq(b.len, 4);
  bk_alloc_fail_at(1);
  cr_assert_eq(bk_buf_printf(&b, "%s", big), BK_ENOMEM);
  cr_assert_str_eq(b.data, "kept");
  bk_alloc_fail_at(0);
  cr_assert_eq(bk_buf_puts(&b, big), 0);
  cr_assert_eq(b.len, 4 + strlen(big));
  bk_buf_close(&b);
  /* An empty buffer whose first allocation fails stays empty. */
  bk_alloc_fail_at(1);
  cr_assert_eq(bk_buf_putc(&b, 'z'), BK_ENOMEM);
  cr_assert_null(b.data);
  cr_assert_eq(b.len, 0);
}
