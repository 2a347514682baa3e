/*
 * Dense linear algebra over LAPACKE/OpenBLAS (see linalg.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/linalg.h"

#include <cblas.h>
#include <lapacke.h>

#include "base/error.h"

int bk_linalg_sym_eigenvalues(double *a, size_t n, double *ev) {
  if (n == 0)
    return 0;
  openblas_set_num_threads(1);
  /* The lower triangle in row-major order is the upper one in column-major
   * order: no transposed copy of a large matrix. */
  lapack_int info = LAPACKE_dsyev(LAPACK_COL_MAJOR, 'N', 'U', (lapack_int)n, a,
                                  (lapack_int)n, ev);
  if (info == LAPACK_WORK_MEMORY_ERROR || info == LAPACK_TRANSPOSE_MEMORY_ERROR)
    return BK_ENOMEM;
  return info == 0 ? 0 : BK_ERANGE;
}
