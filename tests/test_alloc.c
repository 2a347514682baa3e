/*
 * Tests of the allocation wrappers and their fault-injection hook: the
 * n-th allocation from the call fails, and only that one; zero sizes give
 * a pointer that can be freed; the string copies are exact. The study
 * loader is then run with the n-th allocation failing, n rising until it
 * succeeds: each failure must give BK_ENOMEM, no study and no crash (and,
 * under AddressSanitizer, no leak).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "study/study.h"

static void reset(void) {
  bk_alloc_fail_at(0);
}

TestSuite(alloc, .fini = reset);

Test(alloc, the_nth_allocation_fails_and_only_that_one) {
  bk_alloc_fail_at(3);
  void *a = bk_malloc(8), *b = bk_calloc(2, 8), *c = bk_malloc(8);
  void *d = bk_malloc(8), *e = bk_strdup("x");
  cr_assert_not_null(a);
  cr_assert_not_null(b);
  cr_assert_null(c);
  cr_assert_not_null(d);
  cr_assert_not_null(e);
  bk_free(a);
  bk_free(b);
  bk_free(d);
  bk_free(e);
}

Test(alloc, every_wrapper_obeys_the_hook) {
  bk_alloc_fail_at(1);
  cr_assert_null(bk_malloc(1));
  bk_alloc_fail_at(1);
  cr_assert_null(bk_calloc(1, 1));
  void *p = bk_malloc(4);
  bk_alloc_fail_at(1);
  cr_assert_null(bk_realloc(p, 400)); /* p stays valid, as with realloc */
  bk_free(p);
  bk_alloc_fail_at(1);
  cr_assert_null(bk_strdup("abc"));
  bk_alloc_fail_at(1);
  cr_assert_null(bk_strndup("abc", 2));
}

Test(alloc, zero_disables_the_hook) {
  bk_alloc_fail_at(2);
  bk_alloc_fail_at(0);
  for (int i = 0; i < 10; i++) {
    void *p = bk_malloc(16);
    cr_assert_not_null(p);
    bk_free(p);
  }
}

Test(alloc, zero_sizes_give_a_pointer_and_free_null_is_harmless) {
  void *a = bk_malloc(0), *b = bk_calloc(0, 8), *c = bk_realloc(NULL, 0);
  cr_assert(a && b && c);
  bk_free(a);
  bk_free(b);
  bk_free(c);
  bk_free(NULL);
}

Test(alloc, string_copies_are_exact) {
  char *a = bk_strdup("limit state");
  char *b = bk_strndup("limit state", 5);
  cr_assert_str_eq(a, "limit state");
  cr_assert_str_eq(b, "limit");
  bk_free(a);
  bk_free(b);
}

/* Fault injection through a whole module: the study loader. */
Test(alloc, study_loader_fails_cleanly_at_every_allocation) {
  char dir[] = "/tmp/bk-test-alloc-XXXXXX";
  cr_assert(mkdtemp(dir));
  char path[600], deck[600];
  snprintf(path, sizeof path, "%s/s.yaml", dir);
  snprintf(deck, sizeof deck, "%s/deck.txt", dir);
  FILE *f = fopen(deck, "w");
  cr_assert(f);
  fputs("x = {{ a : %.6e }}\n", f);
  fclose(f);
  f = fopen(path, "w");
  cr_assert(f);
  fputs("name: faults\n"
        "variables:\n"
        "  a: {type: lognormal, mean: 3, cov: 0.1}\n"
        "  b: {type: gumbel, mean: 1, sd: 0.2}\n"
        "  c: 2\n"
        "correlations: [[a, b, 0.3]]\n"
        "model:\n"
        "  files: [{template: deck.txt, to: in.txt}]\n"
        "  command: [/bin/sh, -c, 'echo g = 1']\n"
        "  env: {OMP_NUM_THREADS: '1'}\n"
        "  outputs: {y: {stdout: true, pattern: 'g = (\\S+)'}}\n"
        "limit_state: a - b * c + y\n"
        "analysis: {method: lhs, samples: 100}\n",
        f);
  fclose(f);
  int n, rc = -1;
  for (n = 1; n < 10000; n++) {
    bk_study_t *s = (bk_study_t *)1;
    bk_error_t err;
    bk_error_clear(&err);
    bk_alloc_fail_at(n);
    rc = bk_study_load(path, &s, &err);
    bk_alloc_fail_at(0);
    if (rc == 0) {
      bk_study_free(s);
      break;
    }
    cr_assert_eq(rc, BK_ENOMEM, "allocation %d: %s (%d)", n, err.msg, rc);
    cr_assert_null(s);
  }
  cr_assert_eq(rc, 0, "the study never loaded");
  cr_assert_gt(n, 20, "the hook reached only %d allocations", n);
  char cmd[700];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}
