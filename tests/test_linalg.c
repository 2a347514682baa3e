/*
 * Tests of the dense linear algebra wrappers against closed forms.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdlib.h>

#include "base/alloc.h"
#include "numerics/linalg.h"

/* The tridiagonal Toeplitz matrix with d on the diagonal and c beside it
 * has the eigenvalues d + 2c cos(k pi / (n + 1)), k = 1..n (closed form;
 * e.g. G. D. Smith, Numerical Solution of Partial Differential Equations,
 * the eigenvalues of the second-difference matrix). */
Test(linalg, tridiagonal_toeplitz_eigenvalues_match_the_closed_form) {
  size_t sizes[] = {1, 2, 7, 200};
  for (size_t t = 0; t < sizeof sizes / sizeof sizes[0]; t++) {
    size_t n = sizes[t];
    double d = 2.0, c = -1.0;
    double *a = bk_calloc(n * n, sizeof *a), *ev = bk_calloc(n, sizeof *ev);
    cr_assert(a && ev);
    for (size_t i = 0; i < n; i++) {
      a[i * n + i] = d;
      if (i + 1 < n)
        a[(i + 1) * n + i] = a[i * n + i + 1] = c;
    }
    cr_assert_eq(bk_linalg_sym_eigenvalues(a, n, ev), 0);
    for (size_t k = 1; k <= n; k++) {
      /* Ascending order: k = 1 gives the smallest (c < 0). */
      double want = d + 2 * c * cos((double)k * M_PI / (double)(n + 1));
      double got = ev[k - 1];
      cr_assert(fabs(got - want) < 1e-12, "n=%zu k=%zu: %.17g vs %.17g", n,
                k, got, want);
    }
    bk_free(a);
    bk_free(ev);
  }
}

/* Only the lower triangle (row-major) is read: garbage above the diagonal
 * changes nothing. A diagonal matrix gives its diagonal, sorted. */
Test(linalg, only_the_lower_triangle_is_read) {
  double a[9] = {3, 99, -7, 0, -1, 42, 0, 0, 2};
  double ev[3];
  cr_assert_eq(bk_linalg_sym_eigenvalues(a, 3, ev), 0);
  cr_assert(fabs(ev[0] + 1) < 1e-15 && fabs(ev[1] - 2) < 1e-15 &&
            fabs(ev[2] - 3) < 1e-15);
}

Test(linalg, an_empty_matrix_is_fine) {
  cr_assert_eq(bk_linalg_sym_eigenvalues(NULL, 0, NULL), 0);
}
