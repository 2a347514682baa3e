/*
 * Growable byte buffer, always NUL-terminated. Buffers travel as
 * bk_buf_t *, so growth never invalidates the caller's handle.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_BUF_H
#define BK_BUF_H

#include <stdarg.h>
#include <stddef.h>

typedef struct {
  char *data; /* NUL-terminated when cap > 0 */
  size_t len;
  size_t cap;
} bk_buf_t;

void bk_buf_init(bk_buf_t *b);
void bk_buf_close(bk_buf_t *b);
void bk_buf_reset(bk_buf_t *b);
/* Each returns 0 or BK_ENOMEM (the buffer is left as it was). */
int bk_buf_reserve(bk_buf_t *b, size_t extra);
int bk_buf_append(bk_buf_t *b, const void *p, size_t n);
int bk_buf_puts(bk_buf_t *b, const char *s);
int bk_buf_putc(bk_buf_t *b, char c);
int bk_buf_printf(bk_buf_t *b, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
int bk_buf_vprintf(bk_buf_t *b, const char *fmt, va_list ap);
/* Appends a finite v as the shortest %g text (at most 17 significant
 * digits) that strtod reads back as exactly v: 0.3 is "0.3", not
 * "0.29999999999999999". Not-finite values print as printf prints them.
 * Returns 0 or BK_ENOMEM. */
int bk_buf_put_double(bk_buf_t *b, double v);

#endif
