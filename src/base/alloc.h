/*
 * Allocation wrappers. Tests may install a hook that makes the n-th
 * allocation fail, to exercise every out-of-memory path.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_ALLOC_H
#define BK_ALLOC_H

#include <stddef.h>

void *bk_malloc(size_t n);
void *bk_calloc(size_t count, size_t n);
void *bk_realloc(void *p, size_t n);
void bk_free(void *p);
char *bk_strdup(const char *s);
char *bk_strndup(const char *s, size_t n);

/* Test hook: when `fail_at` > 0, the fail_at-th allocation from now returns
 * NULL (and only that one). 0 disables it. */
void bk_alloc_fail_at(long fail_at);

#endif
