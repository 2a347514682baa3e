/*
 * Gaussian-process regression (Kriging) of a scalar function of standard
 * normal variables u, the surrogate of a limit state g(u).
 *
 * The model (Sacks, Welch, Mitchell & Wynn 1989, Statistical Science
 * 4(4):409-435; Santner, Williams & Notz 2003, The Design and Analysis of
 * Computer Experiments, chapter 3):
 *
 *   y(u) = f(u)^T beta + Z(u),   Z a zero-mean Gaussian process with
 *   Cov[Z(u), Z(u')] = sigma2 R(u, u'),  observations y_i = y(u_i) + e_i,
 *   e_i independent N(0, sigma2 * nugget).
 *
 * f is the trend: none (simple Kriging with a known zero mean), a constant
 * (ordinary Kriging) or 1, u_1..u_d (universal Kriging). R is anisotropic,
 * with r = sqrt(sum_j ((u_j - u'_j) / lengths_j)^2):
 *   Matern 5/2:         R = (1 + sqrt(5) r + 5 r^2 / 3) exp(-sqrt(5) r)
 *   squared exponential: R = exp(-r^2 / 2)
 * (Rasmussen & Williams 2006, Gaussian Processes for Machine Learning,
 * eq. 4.17 and 4.9, numbers from memory). The nugget is relative to sigma2, so
 * that beta (by generalised least squares) and sigma2 have closed forms for
 * given lengths and nugget, and the likelihood is maximised over those alone
 * (the concentrated or profile likelihood, Santner et al. 2003, section
 * 3.3, from memory).
 *
 * Scaling: the values y are centred (when the trend has a constant) and
 * divided by their spread inside the fit, which changes nothing but
 * rounding; the inputs are standard normal variables already and are not
 * rescaled, but the bounds of the length scales are relative to the range
 * of the training points in each dimension.
 *
 * Determinism: every fit and prediction is a pure function of its inputs,
 * bit for bit, on a given machine: the optimiser starts from a fixed list
 * of points, and BLAS runs on one thread (set on first use; see
 * bk_gp_blas_threads). Different CPUs may pick different BLAS kernels and
 * so differ in the last bits.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_GP_H
#define BK_GP_H

#include <stddef.h>

/* The largest dimension of u. */
#define BK_GP_MAXDIM 128

typedef enum {
  BK_GP_MATERN52 = 0, /* Matern, smoothness 5/2 (the default) */
  BK_GP_SQEXP         /* squared exponential */
} bk_gp_kernel_t;

typedef enum {
  BK_GP_TREND_CONSTANT = 0, /* ordinary Kriging (the default) */
  BK_GP_TREND_LINEAR,       /* universal Kriging, f = (1, u_1..u_d) */
  BK_GP_TREND_ZERO          /* simple Kriging, known mean 0 */
} bk_gp_trend_t;

/* Options of a fit. Fill with bk_gp_options_default, then change fields.
 * Pointers are borrowed for the duration of bk_gp_new only. */
typedef struct {
  bk_gp_kernel_t kernel;
  bk_gp_trend_t trend;
  /* Length scales: NULL to estimate them by maximum likelihood, else d
   * fixed values (> 0). */
  const double *lengths;
  /* Nugget, relative to sigma2, when not estimated: default 1e-10, a
   * jitter for a deterministic model. */
  double nugget;
  /* Boolean, default 0: estimate the nugget (for a noisy model) within
   * nugget_bounds (default 1e-10 and 1), from the geometric mean of the
   * bounds. */
  int estimate_nugget;
  double nugget_bounds[2];
  /* Process variance in units of y^2: 0 (default) for its closed-form
   * maximum-likelihood value, else fixed. */
  double sigma2;
  /* Bounds of the estimated length scales, as multiples of the range of
   * the training points in each dimension; default 1e-2 and 1e2. */
  double length_bounds[2];
  /* Number of fixed starts of the optimiser (1 to 8, default 3): the
   * length scales all equal to range times 1, 1/4, 4, 1/16, 16, ... */
  int nstarts;
  /* Optional warm start (d length scales, e.g. those of a previous fit),
   * tried before the fixed starts; NULL for none. With an estimated
   * nugget, warm_nugget (> 0) is its start. */
  const double *warm_lengths;
  double warm_nugget;
  /* Likelihood evaluations per start; default 200. */
  int max_evals;
} bk_gp_options_t;

/* A fitted process. Heap object from bk_gp_new, freed by bk_gp_free.
 * Read-only fields are valid for its whole life; everything is in the
 * units of the data given (the fit scales y internally). */
typedef struct bk_gp bk_gp_t;
struct bk_gp {
  /* read-only */
  size_t n; /* training points */
  size_t d; /* dimension of u */
  size_t p; /* trend coefficients: 0, 1 or d + 1 */
  bk_gp_kernel_t kernel;
  bk_gp_trend_t trend;
  double *lengths; /* d length scales */
  double sigma2;   /* process variance */
  double nugget;   /* relative nugget used, jitter included */
  double jitter;   /* part of nugget added because a Cholesky
                      factorisation failed; 0 normally */
  double *beta;    /* p trend coefficients (GLS estimate) */
  double loglik;   /* log-likelihood at the fitted values (the
                      profile one when sigma2 was estimated) */
  size_t nevals;   /* likelihood evaluations spent */
  /* private */
  struct bk__gp_fit *fit;
};

/* Fills `o` with the defaults above. */
void bk_gp_options_default(bk_gp_options_t *o);

/* Fits a process to n points u (row-major, n x d: point i at u + i*d) with
 * values y, estimating what `opt` (NULL for the defaults) leaves free:
 * length scales and nugget by maximum likelihood, beta and sigma2 in closed
 * form. The data are copied. On success *out is the new process and 0 is
 * returned; otherwise *out is NULL and the code is BK_EINVAL (n or d zero,
 * d above BK_GP_MAXDIM, a non-finite input, n not above p, bad options),
 * BK_ENOMEM, or BK_ERANGE (all values y equal with a free sigma2, the trend
 * not identifiable from the points, or a covariance matrix not positive
 * definite even after adding jitter up to 1e-6 sigma2). */
int bk_gp_new(bk_gp_t **out, const double *u, const double *y, size_t n,
              size_t d, const bk_gp_options_t *opt);

/* Frees a process; NULL does nothing. */
void bk_gp_free(bk_gp_t *gp);

/* Predictive mean and variance of the (noise-free) process at m points u
 * (row-major, m x d). `var` may be NULL when only the mean is wanted (much
 * cheaper: O(n) per point instead of O(n^2)). For universal and ordinary
 * Kriging the variance includes the uncertainty of beta (see gp.c). Variances
 * that round below zero are returned as 0. A point's mean has the same bits
 * whatever other points share the call; its variance may differ in the last
 * bits with its place in the call (BLAS level-3 blocking), while the same
 * call always gives the same bits. Returns 0, BK_ENOMEM, or BK_ERANGE
 * when a result is not finite (then the outputs are unspecified). */
int bk_gp_predict(const bk_gp_t *gp, const double *u, size_t m, double *mean,
                  double *var);

/* Leave-one-out residuals in closed form (Dubrule 1983, Mathematical
 * Geology 15(6):687-699, from memory): resid[i] = y_i - (prediction at u_i of
 * the process refitted without point i, with the same lengths, nugget and
 * sigma2, beta re-estimated), and var[i] the variance of that residual
 * (the nugget noise included), so resid[i] / sqrt(var[i]) is a standard
 * normal under the model. Either output may be NULL. Returns 0, BK_ENOMEM
 * or BK_ERANGE. */
int bk_gp_loo(const bk_gp_t *gp, double *resid, double *var);

/* The log-likelihood of the data at log length scales theta[0..d) and,
 * with opt->estimate_nugget, log nugget theta[d]: the function the fit
 * maximises, with its gradient in grad (d or d + 1 values; NULL to skip).
 * For tests and diagnostics. Returns 0 or a code as bk_gp_new. */
int bk_gp_loglik(const double *u, const double *y, size_t n, size_t d,
                 const bk_gp_options_t *opt, const double *theta, double *ll,
                 double *grad);

/* The number of threads BLAS uses in this process after the GP module has
 * pinned it (1 is expected), for tests and benchmarks. */
/* The squared Euclidean distance of two points of d coordinates (the
 * kernel's argument; also the k-means distance of learn.c). */
double bk_gp_dist2(const double *a, const double *b, size_t d);
int bk_gp_blas_threads(void);

#endif
