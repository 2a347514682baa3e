/*
 * Tests of the growable buffer: it is NUL-terminated after every call,
 * grows across its first capacity and many doublings, formats long texts
 * exactly as snprintf does, and leaves its content as it was when an
 * allocation fails (BK_ENOMEM). Numbers are written with the fewest
 * significant digits that read back as the same double, checked against
 * Python's float repr (the shortest round-trip text, Steele & White 1990
 * and Gay 1990, in /usr/bin/python3) on many bit patterns.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

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

static const char *put_double(double v) {
  static char out[64];
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_buf_put_double(&b, v), 0);
  snprintf(out, sizeof out, "%s", b.data);
  bk_buf_close(&b);
  return out;
}

Test(buf, a_double_is_written_with_the_fewest_digits_that_read_back) {
  /* Values from memory of IEEE 754 binary64: 0.3 is stored as
   * 0.299999999999999988898, 0.1 + 0.2 as 0.300000000000000044409. */
  cr_assert_str_eq(put_double(0.3), "0.3");
  cr_assert_str_eq(put_double(0.1 + 0.2), "0.30000000000000004");
  cr_assert_str_eq(put_double(1.0), "1");
  cr_assert_str_eq(put_double(-0.0), "-0");
  cr_assert_str_eq(put_double(380.5), "380.5");
  cr_assert_str_eq(put_double(2.1e11), "2.1e+11");
  cr_assert_str_eq(put_double(1e-5), "1e-05");
  cr_assert_str_eq(put_double(5e-324), "5e-324"); /* the smallest subnormal */
  cr_assert_str_eq(put_double(1.7976931348623157e308),
                   "1.7976931348623157e+308");
  cr_assert_str_eq(put_double(INFINITY), "inf");
}

/* The significant digits of a number's text, without sign, point,
 * exponent or leading and trailing zeros. */
static void digits_of(const char *t, char *out, size_t cap) {
  size_t n = 0;
  for (; *t && *t != 'e' && *t != 'E'; t++)
    if (*t >= '0' && *t <= '9' && n + 1 < cap && (n > 0 || *t != '0'))
      out[n++] = *t;
  while (n > 0 && out[n - 1] == '0')
    n--;
  out[n] = '\0';
}

/* Many doubles: random bit patterns (all exponents) and random values of
 * few digits. Each text reads back bit for bit, and has exactly the
 * digits of Python's repr, the shortest round-trip text. */
Test(buf, shortest_text_round_trips_and_agrees_with_python_repr) {
  enum { N = 4000 };
  double *v = malloc(N * sizeof *v);
  cr_assert(v);
  uint64_t x = 0x9e3779b97f4a7c15u; /* splitmix64, seed printed below */
  for (int i = 0; i < N; i++) {
    x += 0x9e3779b97f4a7c15u;
    uint64_t z = x;
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9u;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebu;
    z ^= z >> 31;
    if (i % 2 == 0) {
      memcpy(&v[i], &z, sizeof z);
      if (!isfinite(v[i]))
        v[i] = (double)(z >> 11);
    } else {
      /* a few decimal digits at a scale: 0.3, 12.75, 4.2e-7 ... */
      v[i] =
          (double)(z % 100000) * pow(10.0, (double)((int)(z >> 40) % 40 - 20));
    }
  }
  char tmpl[] = "/tmp/bk-test-buf-XXXXXX";
  int fd = mkstemp(tmpl);
  cr_assert_geq(fd, 0);
  FILE *f = fdopen(fd, "w");
  for (int i = 0; i < N; i++) {
    const char *t = put_double(v[i]);
    cr_assert_eq(strtod(t, NULL), v[i], "%s does not read back (case %d)", t,
                 i);
    uint64_t bits;
    memcpy(&bits, &v[i], sizeof bits);
    fprintf(f, "%016llx %s\n", (unsigned long long)bits, t);
  }
  fclose(f);
  free(v);
  if (access("/usr/bin/python3", X_OK) != 0) {
    unlink(tmpl);
    cr_skip_test("no /usr/bin/python3 for the reference");
  }
  char cmd[512];
  snprintf(cmd, sizeof cmd,
           "/usr/bin/python3 -c \"import struct,sys\n"
           "for l in open(sys.argv[1]):\n"
           "  b, t = l.split()\n"
           "  print(t, repr(struct.unpack('<d', bytes.fromhex(b)[::-1])[0]))"
           "\" %s",
           tmpl);
  FILE *p = popen(cmd, "r");
  cr_assert(p);
  char ours[64], ref[64];
  int n = 0;
  while (fscanf(p, "%63s %63s", ours, ref) == 2) {
    char d1[40], d2[40];
    digits_of(ours, d1, sizeof d1);
    digits_of(ref, d2, sizeof d2);
    cr_assert_str_eq(d1, d2, "case %d: brink writes %s, Python %s (seed %#llx)",
                     n, ours, ref, 0x9e3779b97f4a7c15ull);
    n++;
  }
  cr_assert_eq(pclose(p), 0);
  unlink(tmpl);
  cr_assert_eq(n, N);
}
