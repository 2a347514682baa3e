/*
 * Gaussian-process regression (see gp.h for the model). The formulas, for
 * the data scaled as ys = (y - shift) / scale (shift the mean of y when the
 * trend has a constant, else 0; scale the spread of y), with
 * C = R + nugget I, its Cholesky factor C = L L^T, F the n x p matrix of
 * trend functions and Ft = L^-1 F = Q RF (thin QR):
 *
 *   beta  = argmin |L^-1 (ys - F b)|^2 (generalised least squares, solved by
 *           QR of Ft rather than the normal equations F^T C^-1 F b = ...)
 *   rt    = L^-1 (ys - F beta),  a = C^-1 (ys - F beta) = L^-T rt
 *   sigma2 = rt.rt / n (maximum likelihood; Santner, Williams & Notz 2003,
 *           section 3.3, from memory)
 *   loglik = -(n log sigma2 + log|C| + n (1 + log 2 pi)) / 2, with the
 *           profile sigma2 (the constant n follows from rt.rt/sigma2 = n);
 *           with a fixed sigma2, -(rt.rt/sigma2 + n log sigma2 + log|C|
 *           + n log 2 pi) / 2. In the units of y it is lower by n log scale.
 *   d loglik / d phi = tr((a a^T / sigma2 - C^-1) dC/dphi) / 2 for any
 *           parameter phi of C. With a profile sigma2 this holds as well:
 *           n sigma2 is a minimum over beta, whose derivative is
 *           -a^T (dC/dphi) a (envelope theorem), which gives the same
 *           expression (Rasmussen & Williams 2006, eq. 5.9 from memory, is the
 * case without trend). For phi = log length_j and Matern 5/2, dR/dphi = (5/3)
 * (1 + sqrt(5) r) exp(-sqrt(5) r) dv_j^2 with dv_j the j-th difference of the
 * scaled inputs u / length; for the squared exponential, R dv_j^2; for phi =
 * log nugget, nugget I.
 *
 * Prediction at x, with k the vector of R(x, u_i) and kt = L^-1 k
 * (Sacks et al. 1989, section 3; Santner et al. 2003, chapter 3, the
 * "universal Kriging" predictor and its mean squared error):
 *   mean = f(x)^T beta + k^T a
 *   var  = sigma2 (1 - kt.kt + w.w),  RF^T w = Ft^T kt - f(x),
 * the last term being the variance added by estimating beta (it is
 * (F^T C^-1 k - f)^T (F^T C^-1 F)^-1 (F^T C^-1 k - f) written with the QR
 * factor). Points are handled in blocks so that the triangular solves and
 * products are BLAS level 3 (dtrsm, dgemm). The mean is a plain loop, so a
 * point's mean has the same bits whatever block it is in.
 *
 * Leave-one-out (Dubrule 1983): with P = C^-1 - C^-1 F (F^T C^-1 F)^-1
 * F^T C^-1 (the upper-left block of the inverse of the bordered Kriging
 * matrix [[C, F], [F^T, 0]]), the residual of point i is a_i / P_ii and its
 * variance sigma2 / P_ii. P_ii is diag(C^-1) less the squared row norms of
 * H = L^-T Ft RF^-1.
 *
 * Safety: the inputs must be finite; a Cholesky factorisation that fails
 * is retried with jitter 1e-10, 1e-9, ... 1e-6 (relative to sigma2) added
 * to the nugget, then the fit fails with BK_ERANGE. Every result is checked
 * for finiteness before it is returned.
 *
 * The optimiser is NLopt's SLSQP (Kraft 1988, a sequential quadratic
 * programming method with BFGS updates; BSD licence), with the analytic
 * gradient, over log length scales (and log nugget) in bounds. The
 * L-BFGS of NLopt is LGPL code and is not used.
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/gp.h"

#include <cblas.h>
#include <float.h>
#include <lapacke.h>
#include <limits.h>
#include <math.h>
#include <nlopt.h>
#include <stdint.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"

#define SQRT5     2.23606797749978969641
#define LOG_2PI   1.83787706640934548356
#define NJITTER   6 /* tries: no jitter, then 1e-10 .. 1e-6 */
#define MAXSTARTS 8
#define BLOCK     256 /* prediction points per block */

/* ---------------------------------------------------------------------- */
/* BLAS threads                                                            */
/* ---------------------------------------------------------------------- */

/* OpenBLAS splits large products over threads, and a split changes the
 * order of sums and so the last bits. One thread keeps every fit a pure
 * function of its data. Called before any BLAS or LAPACK use in this
 * file; cheap, so it needs no once-flag. */
static void pin_blas(void) {
  openblas_set_num_threads(1);
}

int bk_gp_blas_threads(void) {
  pin_blas();
  return openblas_get_num_threads();
}

/* ---------------------------------------------------------------------- */
/* Kernel                                                                  */
/* ---------------------------------------------------------------------- */

static double kern(bk_gp_kernel_t kernel, double r2) {
  if (kernel == BK_GP_SQEXP)
    return exp(-0.5 * r2);
  double r = sqrt(r2);
  return (1 + SQRT5 * r + (5.0 / 3.0) * r2) * exp(-SQRT5 * r);
}

/* The factor c in dR/dlog length_j = c dv_j^2 (see the header comment). */
static double dkern(bk_gp_kernel_t kernel, double r2) {
  if (kernel == BK_GP_SQEXP)
    return exp(-0.5 * r2);
  double r = sqrt(r2);
  return (5.0 / 3.0) * (1 + SQRT5 * r) * exp(-SQRT5 * r);
}

double bk_gp_dist2(const double *a, const double *b, size_t d) {
  double s = 0;
  for (size_t j = 0; j < d; j++) {
    double t = a[j] - b[j];
    s += t * t;
  }
  return s;
}

static size_t trend_size(bk_gp_trend_t trend, size_t d) {
  return trend == BK_GP_TREND_ZERO       ? 0
         : trend == BK_GP_TREND_CONSTANT ? 1
                                         : d + 1;
}

/* The trend functions at x: f[0..p). */
static void trend_at(bk_gp_trend_t trend, const double *x, size_t d,
                     double *f) {
  if (trend == BK_GP_TREND_ZERO)
    return;
  f[0] = 1;
  if (trend == BK_GP_TREND_LINEAR)
    memcpy(f + 1, x, d * sizeof *f);
}

/* ---------------------------------------------------------------------- */
/* Likelihood workspace                                                    */
/* ---------------------------------------------------------------------- */

/* Everything one likelihood evaluation needs, allocated once per fit.
 * After a successful evaluate(), L, Ft, A (QR of Ft, RF in its upper
 * p x p corner), beta, rt, v and the scalars describe that point. */
typedef struct {
  /* problem (borrowed) */
  const double *u;  /* n x d row-major */
  const double *ys; /* scaled values */
  size_t n, d, p;
  bk_gp_kernel_t kernel;
  bk_gp_trend_t trend;
  double sigma2_fixed; /* scaled; 0 for the profile value */
  int est_nugget;
  double nugget; /* when not estimated */
  /* buffers */
  double *F;  /* n x p, column-major */
  double *L;  /* n x n, column-major, lower triangle used */
  double *Ci; /* n x n, C^-1 lower triangle (gradient only) */
  double *Ft; /* n x p */
  double *A;  /* n x p, QR factors of Ft */
  double *rt; /* n */
  double *a;  /* n */
  double *v;  /* n x d row-major, u / length */
  double *lengths;
  double *beta;   /* p (the dgels right-hand side needs n) */
  double *qrwork; /* dgels workspace */
  int lqrwork;
  /* results */
  double tau;    /* nugget part being estimated or fixed */
  double jitter; /* added by retries */
  double sigma2; /* scaled */
  double ll;     /* scaled units */
  /* optimiser */
  size_t nevals;
  double best_ll;
  size_t nz;             /* d, or d + 1 with an estimated nugget */
  const double *fixed_z; /* fixed log lengths (nugget-only search) */
  double *best_z;
  int have_best;
  int stop_code; /* a failure that must end the fit (not a bad point) */
} work_t;

static void work_free(work_t *w) {
  bk_free(w->F);
  bk_free(w->L);
  bk_free(w->Ci);
  bk_free(w->Ft);
  bk_free(w->A);
  bk_free(w->rt);
  bk_free(w->a);
  bk_free(w->v);
  bk_free(w->lengths);
  bk_free(w->beta);
  bk_free(w->qrwork);
  bk_free(w->best_z);
}

/* Sets up w for the scaled problem; returns 0 or BK_ENOMEM (w freed). */
static int work_init(work_t *w, const double *u, const double *ys, size_t n,
                     size_t d, const bk_gp_options_t *opt, double sigma2_s,
                     int with_gradient) {
  memset(w, 0, sizeof *w);
  w->u = u;
  w->ys = ys;
  w->n = n;
  w->d = d;
  w->p = trend_size(opt->trend, d);
  w->kernel = opt->kernel;
  w->trend = opt->trend;
  w->sigma2_fixed = sigma2_s;
  w->est_nugget = opt->estimate_nugget;
  w->nugget = opt->nugget;
  w->nz = d + (opt->estimate_nugget ? 1 : 0);
  size_t p = w->p;
  w->F = bk_malloc((p ? n * p : 1) * sizeof(double));
  w->L = bk_malloc(n * n * sizeof(double));
  w->Ci = with_gradient ? bk_malloc(n * n * sizeof(double)) : NULL;
  w->Ft = bk_malloc((p ? n * p : 1) * sizeof(double));
  w->A = bk_malloc((p ? n * p : 1) * sizeof(double));
  w->rt = bk_malloc(n * sizeof(double));
  w->a = bk_malloc(n * sizeof(double));
  w->v = bk_malloc(n * d * sizeof(double));
  w->lengths = bk_malloc(d * sizeof(double));
  w->beta = bk_malloc(n * sizeof(double));
  w->best_z = bk_malloc((d + 1) * sizeof(double));
  if (!w->F || !w->L || (with_gradient && !w->Ci) || !w->Ft || !w->A ||
      !w->rt || !w->a || !w->v || !w->lengths || !w->beta || !w->best_z)
    goto nomem;
  double f[BK_GP_MAXDIM + 1];
  for (size_t i = 0; i < n; i++) {
    trend_at(opt->trend, u + i * d, d, f);
    for (size_t k = 0; k < p; k++)
      w->F[i + k * n] = f[k];
  }
  if (p > 0) {
    double q;
    lapack_int info =
        LAPACKE_dgels_work(LAPACK_COL_MAJOR, 'N', (int)n, (int)p, 1, w->A,
                           (int)n, w->beta, (int)n, &q, -1);
    if (info != 0)
      goto nomem;
    w->lqrwork = (int)q + 1;
    w->qrwork = bk_malloc((size_t)w->lqrwork * sizeof(double));
    if (!w->qrwork)
      goto nomem;
  }
  return 0;
nomem:
  work_free(w);
  return BK_ENOMEM;
}

/* Fills the lower triangle of L with R + (tau + jitter) I. */
static void build_cov(work_t *w, double diag) {
  size_t n = w->n, d = w->d;
  for (size_t k = 0; k < n; k++) {
    double *col = w->L + k * n;
    col[k] = 1 + diag;
    const double *vk = w->v + k * d;
    for (size_t i = k + 1; i < n; i++)
      col[i] = kern(w->kernel, bk_gp_dist2(w->v + i * d, vk, d));
  }
}

/* The likelihood at log parameters z (d log lengths, then the log nugget
 * when estimated), and its gradient in grad when not NULL. Returns 0, or
 * BK_ERANGE (matrix not positive definite even with jitter, trend not
 * identifiable, zero residual with a profile sigma2, a non-finite value).
 */
static int evaluate(work_t *w, const double *z, double *grad) {
  size_t n = w->n, d = w->d, p = w->p;
  pin_blas();
  for (size_t j = 0; j < d; j++)
    w->lengths[j] = exp(z[j]);
  w->tau = w->est_nugget ? exp(z[d]) : w->nugget;
  for (size_t i = 0; i < n; i++)
    for (size_t j = 0; j < d; j++)
      w->v[i * d + j] = w->u[i * d + j] / w->lengths[j];
  /* Cholesky with a bounded number of jitter retries. */
  int ok = 0;
  for (int t = 0; t < NJITTER && !ok; t++) {
    w->jitter = t == 0 ? 0 : 1e-11 * pow(10, t);
    build_cov(w, w->tau + w->jitter);
    ok = LAPACKE_dpotrf(LAPACK_COL_MAJOR, 'L', (int)n, w->L, (int)n) == 0;
  }
  if (!ok)
    return BK_ERANGE;
  /* Whitened trend and data, GLS by QR. */
  memcpy(w->rt, w->ys, n * sizeof(double));
  cblas_dtrsv(CblasColMajor, CblasLower, CblasNoTrans, CblasNonUnit, (int)n,
              w->L, (int)n, w->rt, 1);
  if (p > 0) {
    memcpy(w->Ft, w->F, n * p * sizeof(double));
    cblas_dtrsm(CblasColMajor, CblasLeft, CblasLower, CblasNoTrans,
                CblasNonUnit, (int)n, (int)p, 1.0, w->L, (int)n, w->Ft, (int)n);
    memcpy(w->A, w->Ft, n * p * sizeof(double));
    memcpy(w->beta, w->rt, n * sizeof(double));
    if (LAPACKE_dgels_work(LAPACK_COL_MAJOR, 'N', (int)n, (int)p, 1, w->A,
                           (int)n, w->beta, (int)n, w->qrwork, w->lqrwork) != 0)
      return BK_ERANGE;
    /* A rank-deficient trend: a diagonal of RF negligible next to the
     * largest. */
    double rmax = 0;
    for (size_t k = 0; k < p; k++)
      rmax = fmax(rmax, fabs(w->A[k + k * n]));
    for (size_t k = 0; k < p; k++)
      if (!(fabs(w->A[k + k * n]) > 1e-12 * rmax))
        return BK_ERANGE;
    cblas_dgemv(CblasColMajor, CblasNoTrans, (int)n, (int)p, -1.0, w->Ft,
                (int)n, w->beta, 1, 1.0, w->rt, 1);
  }
  double q = 0, logdet = 0;
  for (size_t i = 0; i < n; i++) {
    q += w->rt[i] * w->rt[i];
    logdet += log(w->L[i + i * n]);
  }
  logdet *= 2;
  if (w->sigma2_fixed > 0) {
    w->sigma2 = w->sigma2_fixed;
    w->ll = -0.5 * (q / w->sigma2 + n * log(w->sigma2) + logdet + n * LOG_2PI);
  } else {
    w->sigma2 = q / n;
    if (!(w->sigma2 > DBL_MIN))
      return BK_ERANGE;
    w->ll = -0.5 * (n * log(w->sigma2) + logdet + n * (1 + LOG_2PI));
  }
  if (!isfinite(w->ll))
    return BK_ERANGE;
  memcpy(w->a, w->rt, n * sizeof(double));
  cblas_dtrsv(CblasColMajor, CblasLower, CblasTrans, CblasNonUnit, (int)n, w->L,
              (int)n, w->a, 1);
  if (!grad)
    return 0;
  /* Gradient: W = a a^T / sigma2 - C^-1, g_phi = tr(W dC/dphi) / 2; the
   * diagonal of dC/dlog length is zero and W, dC are symmetric, so the
   * sum runs over i > k once. */
  memcpy(w->Ci, w->L, n * n * sizeof(double));
  if (LAPACKE_dpotri(LAPACK_COL_MAJOR, 'L', (int)n, w->Ci, (int)n) != 0)
    return BK_ERANGE;
  double inv_s2 = 1 / w->sigma2;
  for (size_t j = 0; j < d; j++)
    grad[j] = 0;
  for (size_t k = 0; k < n; k++) {
    const double *vk = w->v + k * d;
    double ak = w->a[k] * inv_s2;
    for (size_t i = k + 1; i < n; i++) {
      const double *vi = w->v + i * d;
      double c = (w->a[i] * ak - w->Ci[i + k * n]) *
                 dkern(w->kernel, bk_gp_dist2(vi, vk, d));
      for (size_t j = 0; j < d; j++) {
        double t = vi[j] - vk[j];
        grad[j] += c * t * t;
      }
    }
  }
  if (w->est_nugget) {
    double s = 0;
    for (size_t i = 0; i < n; i++)
      s += w->a[i] * w->a[i] * inv_s2 - w->Ci[i + i * n];
    grad[d] = 0.5 * w->tau * s;
  }
  for (size_t j = 0; j < d + (size_t)w->est_nugget; j++)
    if (!isfinite(grad[j]))
      return BK_ERANGE;
  return 0;
}

/* ---------------------------------------------------------------------- */
/* Options and data checks                                                 */
/* ---------------------------------------------------------------------- */

void bk_gp_options_default(bk_gp_options_t *o) {
  memset(o, 0, sizeof *o);
  o->kernel = BK_GP_MATERN52;
  o->trend = BK_GP_TREND_CONSTANT;
  o->nugget = 1e-10;
  o->nugget_bounds[0] = 1e-10;
  o->nugget_bounds[1] = 1;
  o->length_bounds[0] = 1e-2;
  o->length_bounds[1] = 1e2;
  o->nstarts = 3;
  o->max_evals = 200;
}

static int check_options(const bk_gp_options_t *o, size_t d) {
  if ((unsigned)o->kernel > BK_GP_SQEXP ||
      (unsigned)o->trend > BK_GP_TREND_ZERO)
    return BK_EINVAL;
  if (o->lengths)
    for (size_t j = 0; j < d; j++)
      if (!(o->lengths[j] > 0) || !isfinite(o->lengths[j]))
        return BK_EINVAL;
  if (o->warm_lengths)
    for (size_t j = 0; j < d; j++)
      if (!(o->warm_lengths[j] > 0) || !isfinite(o->warm_lengths[j]))
        return BK_EINVAL;
  if (!(o->nugget >= 0) || !isfinite(o->nugget) || !(o->sigma2 >= 0) ||
      !isfinite(o->sigma2))
    return BK_EINVAL;
  if (o->estimate_nugget &&
      !(o->nugget_bounds[0] > 0 && o->nugget_bounds[1] > o->nugget_bounds[0] &&
        isfinite(o->nugget_bounds[1])))
    return BK_EINVAL;
  if (!(o->length_bounds[0] > 0 && o->length_bounds[1] > o->length_bounds[0] &&
        isfinite(o->length_bounds[1])))
    return BK_EINVAL;
  if (o->nstarts < 1 || o->nstarts > MAXSTARTS || o->max_evals < 1)
    return BK_EINVAL;
  return 0;
}

/* Validates the data and works out the scaling; returns 0 or a code. */
static int check_data(const double *u, const double *y, size_t n, size_t d,
                      const bk_gp_options_t *o, double *shift, double *scale) {
  if (n == 0 || d == 0 || d > BK_GP_MAXDIM || n > INT_MAX ||
      n > SIZE_MAX / sizeof(double) / n)
    return BK_EINVAL;
  if (n <= trend_size(o->trend, d))
    return BK_EINVAL;
  for (size_t i = 0; i < n * d; i++)
    if (!isfinite(u[i]))
      return BK_EINVAL;
  double m = 0;
  for (size_t i = 0; i < n; i++) {
    if (!isfinite(y[i]))
      return BK_EINVAL;
    m += y[i];
  }
  m = o->trend == BK_GP_TREND_ZERO ? 0 : m / n;
  double s = 0;
  for (size_t i = 0; i < n; i++)
    s += (y[i] - m) * (y[i] - m);
  s = sqrt(s / n);
  if (!(s > 0) || !isfinite(s)) {
    if (o->sigma2 == 0)
      return BK_ERANGE; /* nothing to estimate sigma2 from */
    s = 1;
  }
  *shift = m;
  *scale = s;
  return 0;
}

/* ---------------------------------------------------------------------- */
/* Maximum likelihood                                                      */
/* ---------------------------------------------------------------------- */

/* The optimiser sees only the free parameters x: all of z, or only the
 * log nugget when the lengths are fixed (z[0..d) = w->fixed_z). */
static void expand(const work_t *w, const double *x, double *z) {
  if (w->fixed_z) {
    memcpy(z, w->fixed_z, w->d * sizeof *z);
    z[w->d] = x[0];
  } else {
    memcpy(z, x, w->nz * sizeof *z);
  }
}

static double objective(unsigned nx, const double *x, double *grad,
                        void *data) {
  work_t *w = data;
  double z[BK_GP_MAXDIM + 2], g[BK_GP_MAXDIM + 2];
  expand(w, x, z);
  w->nevals++;
  int rc = evaluate(w, z, grad ? g : NULL);
  if (rc != 0) {
    /* A point the model cannot take (see evaluate): worse than any. */
    if (grad)
      for (unsigned j = 0; j < nx; j++)
        grad[j] = 0;
    return HUGE_VAL;
  }
  if (!w->have_best || w->ll > w->best_ll) {
    w->have_best = 1;
    w->best_ll = w->ll;
    memcpy(w->best_z, z, w->nz * sizeof *z);
  }
  if (grad)
    for (unsigned j = 0; j < nx; j++)
      grad[j] = -g[w->nz - nx + j];
  return -w->ll;
}

/* Maximises the likelihood from each start over bounds lo, hi of z; the
 * best point is left in w->best_z. Starts: the warm one if given, then
 * every length at its dimension's range times 1, 1/4, 4, 1/16, 16, ...
 * (clipped to the bounds), the nugget at the geometric mean of its bounds.
 * Returns 0, BK_ENOMEM, or BK_ERANGE when no start gave a finite
 * likelihood. */
static int maximise(work_t *w, const bk_gp_options_t *o, const double *lo,
                    const double *hi) {
  size_t d = w->d, nz = w->nz;
  size_t off = w->fixed_z ? d : 0, nx = nz - off;
  nlopt_opt opt = nlopt_create(NLOPT_LD_SLSQP, (unsigned)nx);
  if (!opt)
    return BK_ENOMEM;
  double x[BK_GP_MAXDIM + 2], z[BK_GP_MAXDIM + 2];
  int rc = 0;
  if (nlopt_set_lower_bounds(opt, lo + off) < 0 ||
      nlopt_set_upper_bounds(opt, hi + off) < 0 ||
      nlopt_set_min_objective(opt, objective, w) < 0 ||
      nlopt_set_ftol_rel(opt, 1e-12) < 0 ||
      nlopt_set_xtol_abs1(opt, 1e-7) < 0 ||
      nlopt_set_maxeval(opt, o->max_evals) < 0) {
    rc = BK_ENOMEM;
    goto done;
  }
  int warm = o->warm_lengths || (o->estimate_nugget && o->warm_nugget > 0);
  int nst = o->nstarts + warm;
  for (int s = 0; s < nst; s++) {
    int k = s - warm; /* fixed start index, -1 for the warm start */
    double c = k > 0 ? (k % 2 ? -1.0 : 1.0) * ((k + 1) / 2) * log(4.0) : 0;
    for (size_t j = 0; j < d; j++) {
      double log_range = lo[j] - log(o->length_bounds[0]);
      z[j] = k < 0 && o->warm_lengths ? log(o->warm_lengths[j]) : log_range + c;
      z[j] = fmin(fmax(z[j], lo[j]), hi[j]);
    }
    if (nz > d) {
      double t = 0.5 * (lo[d] + hi[d]);
      if (k < 0 && o->warm_nugget > 0)
        t = log(o->warm_nugget);
      z[d] = fmin(fmax(t, lo[d]), hi[d]);
    }
    memcpy(x, z + off, nx * sizeof *x);
    double f;
    nlopt_result r = nlopt_optimize(opt, x, &f);
    if (r == NLOPT_OUT_OF_MEMORY) {
      rc = BK_ENOMEM;
      goto done;
    }
    /* Other outcomes (stopped by a tolerance, by maxeval, or a failed
     * line search) leave the best point seen in w->best_z. */
  }
  if (!w->have_best)
    rc = BK_ERANGE;
done:
  nlopt_destroy(opt);
  return rc;
}

/* ---------------------------------------------------------------------- */
/* The fitted process                                                      */
/* ---------------------------------------------------------------------- */

struct bk__gp_fit {
  double *v;    /* n x d training inputs over lengths */
  double *L;    /* n x n Cholesky factor of C */
  double *Ft;   /* n x p L^-1 F */
  double *RF;   /* p x p upper triangle (column-major) */
  double *a;    /* n C^-1 (ys - F beta) */
  double *beta; /* p scaled */
  double sigma2_s;
  double shift, scale;
};

void bk_gp_free(bk_gp_t *gp) {
  if (!gp)
    return;
  if (gp->fit) {
    bk_free(gp->fit->v);
    bk_free(gp->fit->L);
    bk_free(gp->fit->Ft);
    bk_free(gp->fit->RF);
    bk_free(gp->fit->a);
    bk_free(gp->fit->beta);
    bk_free(gp->fit);
  }
  bk_free(gp->lengths);
  bk_free(gp->beta);
  bk_free(gp);
}

/* Bounds of the log parameters: lengths relative to the range of the
 * points in each dimension (1 where all points agree). */
static void param_bounds(const double *u, size_t n, size_t d,
                         const bk_gp_options_t *o, double *lo, double *hi) {
  for (size_t j = 0; j < d; j++) {
    double mn = u[j], mx = u[j];
    for (size_t i = 1; i < n; i++) {
      mn = fmin(mn, u[i * d + j]);
      mx = fmax(mx, u[i * d + j]);
    }
    double range = mx > mn ? mx - mn : 1;
    lo[j] = log(range * o->length_bounds[0]);
    hi[j] = log(range * o->length_bounds[1]);
  }
  if (o->estimate_nugget) {
    lo[d] = log(o->nugget_bounds[0]);
    hi[d] = log(o->nugget_bounds[1]);
  }
}

int bk_gp_new(bk_gp_t **out, const double *u, const double *y, size_t n,
              size_t d, const bk_gp_options_t *opt) {
  *out = NULL;
  bk_gp_options_t defaults;
  if (!opt) {
    bk_gp_options_default(&defaults);
    opt = &defaults;
  }
  int rc = check_options(opt, d);
  double shift, scale;
  if (rc == 0)
    rc = check_data(u, y, n, d, opt, &shift, &scale);
  if (rc != 0)
    return rc;
  pin_blas();
  size_t p = trend_size(opt->trend, d);
  int free_lengths = !opt->lengths;
  int search = free_lengths || opt->estimate_nugget;
  double *ys = bk_malloc(n * sizeof *ys);
  bk_gp_t *gp = bk_calloc(1, sizeof *gp);
  if (!ys || !gp) {
    bk_free(ys);
    bk_free(gp);
    return BK_ENOMEM;
  }
  for (size_t i = 0; i < n; i++)
    ys[i] = (y[i] - shift) / scale;
  work_t w;
  rc = work_init(&w, u, ys, n, d, opt, opt->sigma2 / (scale * scale), search);
  if (rc != 0) {
    bk_free(ys);
    bk_free(gp);
    return rc;
  }
  double z[BK_GP_MAXDIM + 2], zfix[BK_GP_MAXDIM + 2];
  if (!free_lengths)
    for (size_t j = 0; j < d; j++)
      z[j] = zfix[j] = log(opt->lengths[j]);
  if (search) {
    double lo[BK_GP_MAXDIM + 2], hi[BK_GP_MAXDIM + 2];
    param_bounds(u, n, d, opt, lo, hi);
    if (!free_lengths)
      w.fixed_z = zfix; /* lengths fixed, nugget free */
    rc = maximise(&w, opt, lo, hi);
    if (rc != 0)
      goto fail;
    memcpy(z, w.best_z, w.nz * sizeof *z);
  }
  size_t nevals = w.nevals;
  rc = evaluate(&w, z, NULL);
  if (rc != 0)
    goto fail;
  /* Hand the buffers of the final evaluation over to the process. */
  gp->fit = bk_calloc(1, sizeof *gp->fit);
  gp->lengths = bk_malloc(d * sizeof(double));
  gp->beta = bk_malloc((p ? p : 1) * sizeof(double));
  if (!gp->fit || !gp->lengths || !gp->beta) {
    rc = BK_ENOMEM;
    goto fail;
  }
  struct bk__gp_fit *f = gp->fit;
  f->RF = bk_malloc((p ? p * p : 1) * sizeof(double));
  f->beta = bk_malloc((p ? p : 1) * sizeof(double));
  if (!f->RF || !f->beta) {
    rc = BK_ENOMEM;
    goto fail;
  }
  f->v = w.v;
  f->L = w.L;
  f->Ft = w.Ft;
  f->a = w.a;
  w.v = w.L = w.Ft = w.a = NULL;
  for (size_t k = 0; k < p; k++)
    for (size_t i = 0; i < p; i++)
      f->RF[i + k * p] = i <= k ? w.A[i + k * n] : 0;
  memcpy(f->beta, w.beta, p * sizeof(double));
  f->sigma2_s = w.sigma2;
  f->shift = shift;
  f->scale = scale;
  gp->n = n;
  gp->d = d;
  gp->p = p;
  gp->kernel = opt->kernel;
  gp->trend = opt->trend;
  memcpy(gp->lengths, w.lengths, d * sizeof(double));
  gp->sigma2 = opt->sigma2 > 0 ? opt->sigma2 : w.sigma2 * scale * scale;
  gp->nugget = w.tau + w.jitter;
  gp->jitter = w.jitter;
  for (size_t k = 0; k < p; k++)
    gp->beta[k] = scale * w.beta[k] + (k == 0 ? shift : 0);
  gp->loglik = w.ll - n * log(scale);
  gp->nevals = nevals;
  work_free(&w);
  bk_free(ys);
  *out = gp;
  return 0;
fail:
  work_free(&w);
  bk_free(ys);
  bk_gp_free(gp);
  return rc;
}

int bk_gp_loglik(const double *u, const double *y, size_t n, size_t d,
                 const bk_gp_options_t *opt, const double *theta, double *ll,
                 double *grad) {
  bk_gp_options_t defaults;
  if (!opt) {
    bk_gp_options_default(&defaults);
    opt = &defaults;
  }
  double shift, scale;
  int rc = check_options(opt, d);
  if (rc == 0)
    rc = check_data(u, y, n, d, opt, &shift, &scale);
  if (rc != 0)
    return rc;
  double *ys = bk_malloc(n * sizeof *ys);
  if (!ys)
    return BK_ENOMEM;
  for (size_t i = 0; i < n; i++)
    ys[i] = (y[i] - shift) / scale;
  work_t w;
  rc = work_init(&w, u, ys, n, d, opt, opt->sigma2 / (scale * scale),
                 grad != NULL);
  if (rc == 0) {
    rc = evaluate(&w, theta, grad);
    if (rc == 0)
      *ll = w.ll - n * log(scale);
    work_free(&w);
  }
  bk_free(ys);
  return rc;
}

/* ---------------------------------------------------------------------- */
/* Prediction and leave-one-out                                            */
/* ---------------------------------------------------------------------- */

int bk_gp_predict(const bk_gp_t *gp, const double *u, size_t m, double *mean,
                  double *var) {
  const struct bk__gp_fit *f = gp->fit;
  size_t n = gp->n, d = gp->d, p = gp->p;
  size_t nb = m < BLOCK ? m : BLOCK;
  if (m == 0)
    return 0;
  pin_blas();
  double *K = bk_malloc(n * nb * sizeof(double));
  double *W = bk_malloc((p ? p * nb : 1) * sizeof(double));
  if (!K || !W) {
    bk_free(K);
    bk_free(W);
    return BK_ENOMEM;
  }
  int rc = 0;
  double vx[BK_GP_MAXDIM + 1], fx[BK_GP_MAXDIM + 1];
  for (size_t b0 = 0; b0 < m; b0 += nb) {
    size_t mb = m - b0 < nb ? m - b0 : nb;
    for (size_t c = 0; c < mb; c++) {
      const double *x = u + (b0 + c) * d;
      for (size_t j = 0; j < d; j++)
        vx[j] = x[j] / gp->lengths[j];
      double *kc = K + c * n;
      double s = 0;
      for (size_t i = 0; i < n; i++) {
        kc[i] = kern(gp->kernel, bk_gp_dist2(f->v + i * d, vx, d));
        s += kc[i] * f->a[i];
      }
      trend_at(gp->trend, x, d, fx);
      for (size_t k = 0; k < p; k++)
        s += fx[k] * f->beta[k];
      mean[b0 + c] = f->shift + f->scale * s;
      if (!isfinite(mean[b0 + c]))
        rc = BK_ERANGE;
    }
    if (!var)
      continue;
    cblas_dtrsm(CblasColMajor, CblasLeft, CblasLower, CblasNoTrans,
                CblasNonUnit, (int)n, (int)mb, 1.0, f->L, (int)n, K, (int)n);
    if (p > 0) {
      /* W = Ft^T kt - f(x), then RF^T w = W. */
      for (size_t c = 0; c < mb; c++) {
        trend_at(gp->trend, u + (b0 + c) * d, d, fx);
        for (size_t k = 0; k < p; k++)
          W[k + c * p] = fx[k];
      }
      cblas_dgemm(CblasColMajor, CblasTrans, CblasNoTrans, (int)p, (int)mb,
                  (int)n, 1.0, f->Ft, (int)n, K, (int)n, -1.0, W, (int)p);
      cblas_dtrsm(CblasColMajor, CblasLeft, CblasUpper, CblasTrans,
                  CblasNonUnit, (int)p, (int)mb, 1.0, f->RF, (int)p, W, (int)p);
    }
    for (size_t c = 0; c < mb; c++) {
      double s = 1;
      const double *kc = K + c * n;
      for (size_t i = 0; i < n; i++)
        s -= kc[i] * kc[i];
      for (size_t k = 0; k < p; k++)
        s += W[k + c * p] * W[k + c * p];
      double v = f->sigma2_s * f->scale * f->scale * s;
      if (!isfinite(v))
        rc = BK_ERANGE;
      var[b0 + c] = v > 0 ? v : 0;
    }
  }
  bk_free(K);
  bk_free(W);
  return rc;
}

int bk_gp_loo(const bk_gp_t *gp, double *resid, double *var) {
  const struct bk__gp_fit *f = gp->fit;
  size_t n = gp->n, p = gp->p;
  pin_blas();
  double *Ci = bk_malloc(n * n * sizeof(double));
  double *H = bk_malloc((p ? n * p : 1) * sizeof(double));
  if (!Ci || !H) {
    bk_free(Ci);
    bk_free(H);
    return BK_ENOMEM;
  }
  int rc = 0;
  memcpy(Ci, f->L, n * n * sizeof(double));
  if (LAPACKE_dpotri(LAPACK_COL_MAJOR, 'L', (int)n, Ci, (int)n) != 0) {
    rc = BK_ERANGE;
    goto done;
  }
  if (p > 0) {
    /* H = L^-T Ft RF^-1 = C^-1 F RF^-1. */
    memcpy(H, f->Ft, n * p * sizeof(double));
    cblas_dtrsm(CblasColMajor, CblasLeft, CblasLower, CblasTrans, CblasNonUnit,
                (int)n, (int)p, 1.0, f->L, (int)n, H, (int)n);
    cblas_dtrsm(CblasColMajor, CblasRight, CblasUpper, CblasNoTrans,
                CblasNonUnit, (int)n, (int)p, 1.0, f->RF, (int)p, H, (int)n);
  }
  for (size_t i = 0; i < n; i++) {
    double pii = Ci[i + i * n];
    for (size_t k = 0; k < p; k++)
      pii -= H[i + k * n] * H[i + k * n];
    double e = f->scale * f->a[i] / pii;
    double v = f->sigma2_s * f->scale * f->scale / pii;
    if (!(pii > 0) || !isfinite(e) || !isfinite(v)) {
      rc = BK_ERANGE;
      goto done;
    }
    if (resid)
      resid[i] = e;
    if (var)
      var[i] = v;
  }
done:
  bk_free(Ci);
  bk_free(H);
  return rc;
}
