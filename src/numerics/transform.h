/*
 * Nataf transformation between independent standard normal u-space and the
 * physical x-space of the basic variables. The physical correlations are
 * adjusted to the Gaussian-copula correlations rho0 by solving the Liu-Der
 * Kiureghian integral equation numerically, then Cholesky-factorised.
 *
 * Constants take no u dimension: a study with n variables of which m are
 * constant has n-m u coordinates. Only the variables that appear in a
 * correlation share a dense factor; the rest map one by one, so memory is
 * O(n + k^2) for k correlated variables.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_TRANSFORM_H
#define BK_TRANSFORM_H

#include <stddef.h>

#include "numerics/dist.h"

typedef struct bk_transform bk_transform_t;

typedef struct {
  size_t a, b; /* variable indices, a != b */
  double rho;  /* physical-space correlation, -1 < rho < 1 */
} bk_corr_t;

/* Builds the transformation for `n` variables (`dists` is copied) and
 * `ncorr` pairwise correlations (others are zero). Returns 0, or BK_EINVAL
 * with a message in `why` when a pair is invalid (a constant, a repeated
 * pair, |rho| >= 1, rho outside the range the two marginals can reach) or
 * the adjusted matrix is not positive definite. `bad_corr` receives the
 * index of the offending pair, or -1 when the whole matrix is at fault. */
int bk_transform_new(bk_transform_t **out, size_t n, const bk_dist_t *dists,
                     size_t ncorr, const bk_corr_t *corr, char *why,
                     size_t whycap, int *bad_corr);
void bk_transform_free(bk_transform_t *t);

/* Number of u coordinates (variables that are not constant). */
size_t bk_transform_nu(const bk_transform_t *t);
/* x (n values) from u (nu values). */
void bk_transform_u_to_x(const bk_transform_t *t, const double *u, double *x);
/* u (nu values) from x (n values). */
void bk_transform_x_to_u(const bk_transform_t *t, const double *x, double *u);
/* The adjusted correlation of the pair (for reports and tests). */
double bk_transform_rho0(const bk_transform_t *t, size_t a, size_t b);

/* Solves the Nataf integral equation for one pair: the Gaussian-copula
 * correlation rho0 that gives physical correlation rho between marginals a
 * and b. Returns NaN when rho cannot be reached by these marginals. */
double bk_transform_nataf_rho0(const bk_dist_t *a, const bk_dist_t *b, double rho);

/* The physical correlations reachable by marginals a and b: `lo` and `hi`
 * are those of rho0 = -1 and rho0 = 1 (countermonotone and comonotone);
 * every rho strictly between them is reachable. NaN when a marginal is
 * constant or has no finite variance. */
void bk_transform_nataf_range(const bk_dist_t *a, const bk_dist_t *b, double *lo,
                    double *hi);

/* For tests. The physical correlation for a copula correlation rho0, by the
 * product Gauss-Hermite rule; rho0 by that rule and Brent's method, even
 * where a closed form exists; the n-point Gauss rule for the standard
 * normal density (weights sum to 1, nodes ascending, 1 <= n <= 256). */
double bk__transform_nataf_rho(const bk_dist_t *a, const bk_dist_t *b, double rho0);
double bk__transform_nataf_rho0_numeric(const bk_dist_t *a, const bk_dist_t *b,
                              double rho);
void bk__transform_gauss_hermite(int n, double *x, double *w);

#endif
