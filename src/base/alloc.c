/*
 * Allocation wrappers with a fault-injection hook for tests (see alloc.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "base/alloc.h"

#include <stdlib.h>
#include <string.h>

static long fail_countdown;

void bk_alloc_fail_at(long fail_at) {
  fail_countdown = fail_at;
}

/* Returns 1 when this allocation is the one to fail. */
static int should_fail(void) {
  if (fail_countdown <= 0)
    return 0;
  return --fail_countdown == 0;
}

void *bk_malloc(size_t n) {
  return should_fail() ? NULL : malloc(n ? n : 1);
}

void *bk_calloc(size_t count, size_t n) {
  return should_fail() ? NULL : calloc(count ? count : 1, n ? n : 1);
}

void *bk_realloc(void *p, size_t n) {
  return should_fail() ? NULL : realloc(p, n ? n : 1);
}

void bk_free(void *p) {
  free(p);
}

char *bk_strndup(const char *s, size_t n) {
  char *p = bk_malloc(n + 1);
  if (!p)
    return NULL;
  memcpy(p, s, n);
  p[n] = '\0';
  return p;
}

char *bk_strdup(const char *s) {
  return bk_strndup(s, strlen(s));
}
