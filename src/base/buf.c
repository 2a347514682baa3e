/*
 * Growable byte buffer (see buf.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "base/buf.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"

void bk_buf_init(bk_buf_t *b) {
  b->data = NULL;
  b->len = 0;
  b->cap = 0;
}

void bk_buf_close(bk_buf_t *b) {
  bk_free(b->data);
  bk_buf_init(b);
}

void bk_buf_reset(bk_buf_t *b) {
  b->len = 0;
  if (b->data)
    b->data[0] = '\0';
}

int bk_buf_reserve(bk_buf_t *b, size_t extra) {
  if (b->len + extra + 1 <= b->cap)
    return 0;
  size_t cap = b->cap ? b->cap : 64;
  while (cap < b->len + extra + 1)
    cap *= 2;
  char *p = bk_realloc(b->data, cap);
  if (!p)
    return BK_ENOMEM;
  b->data = p;
  b->cap = cap;
  return 0;
}

int bk_buf_append(bk_buf_t *b, const void *p, size_t n) {
  if (bk_buf_reserve(b, n))
    return BK_ENOMEM;
  if (n)
    memcpy(b->data + b->len, p, n);
  b->len += n;
  b->data[b->len] = '\0';
  return 0;
}

int bk_buf_puts(bk_buf_t *b, const char *s) {
  return bk_buf_append(b, s, strlen(s));
}

int bk_buf_putc(bk_buf_t *b, char c) {
  return bk_buf_append(b, &c, 1);
}

int bk_buf_vprintf(bk_buf_t *b, const char *fmt, va_list ap) {
  va_list ap2;
  va_copy(ap2, ap);
  char small[256];
  int n = vsnprintf(small, sizeof small, fmt, ap);
  if (n < 0) {
    va_end(ap2);
    return BK_EINVAL;
  }
  int rc;
  if ((size_t)n < sizeof small) {
    rc = bk_buf_append(b, small, (size_t)n);
  } else if ((rc = bk_buf_reserve(b, (size_t)n)) == 0) {
    vsnprintf(b->data + b->len, (size_t)n + 1, fmt, ap2);
    b->len += (size_t)n;
  }
  va_end(ap2);
  return rc;
}

int bk_buf_printf(bk_buf_t *b, const char *fmt, ...) {
  va_list ap;
  va_start(ap, fmt);
  int rc = bk_buf_vprintf(b, fmt, ap);
  va_end(ap);
  return rc;
}

/* Does %.<prec>g of v read back as v? Leaves the text in tmp. */
static int round_trips(char *tmp, size_t cap, int prec, double v) {
  snprintf(tmp, cap, "%.*g", prec, v);
  return strtod(tmp, NULL) == v;
}

/* Seventeen significant digits always read back (IEEE 754-2008, 5.12.2).
 * Most sampled values need 16 or 17, so those are tried first: when 15 do
 * not suffice, 16 or 17 do. Otherwise the precision climbs from 1 and
 * stops at the first that reads back, so "0.3" costs two conversions.
 * brink never calls setlocale(), so the decimal point is '.'. */
int bk_buf_put_double(bk_buf_t *b, double v) {
  char tmp[40];
  if (!isfinite(v)) {
    snprintf(tmp, sizeof tmp, "%g", v);
    return bk_buf_puts(b, tmp);
  }
  if (!round_trips(tmp, sizeof tmp, 15, v)) {
    if (!round_trips(tmp, sizeof tmp, 16, v))
      snprintf(tmp, sizeof tmp, "%.17g", v);
    return bk_buf_puts(b, tmp);
  }
  for (int prec = 1; prec < 15; prec++)
    if (round_trips(tmp, sizeof tmp, prec, v))
      return bk_buf_puts(b, tmp);
  snprintf(tmp, sizeof tmp, "%.15g", v);
  return bk_buf_puts(b, tmp);
}
