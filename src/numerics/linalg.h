/*
 * Dense linear algebra that feeds decisions, over LAPACKE and OpenBLAS
 * with one BLAS thread, so that a result is a pure function of its input
 * (a split over threads changes the order of sums and the last bits).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_LINALG_H
#define BK_LINALG_H

#include <stddef.h>

/* Eigenvalues of the symmetric n x n matrix a (row-major; only its lower
 * triangle is read; destroyed) into ev[n] in ascending order, by LAPACK's
 * dsyev. Returns 0, BK_ENOMEM, or BK_ERANGE when the iteration did not
 * converge. */
int bk_linalg_sym_eigenvalues(double *a, size_t n, double *ev);

#endif
