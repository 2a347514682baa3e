/*
 * Nataf transformation (see transform.h). Two parts live here:
 *
 * 1. The Nataf integral equation of Liu and Der Kiureghian (1986): for two
 *    marginals F_a, F_b and a Gaussian-copula correlation rho0, the physical
 *    correlation is rho = E[z_a z_b] with z = (X - mean) / sd and
 *    X = F^-1(Phi(U)), (U_a, U_b) standard bivariate normal with correlation
 *    rho0. The expectation is a product Gauss-Hermite rule (composite
 *    Gauss-Legendre next to the kink of a triangular marginal), and rho0
 *    for a given rho is found by Brent's method on [-1, 1]. Closed forms
 *    are used where they exist. Accuracy: rho0 to about 1e-10 against
 *    scipy for the marginals tested; it degrades for frechet shapes close
 *    to 2, whose variance barely exists.
 *
 * 2. The transformation itself: the adjusted matrix R0 of the correlated
 *    variables is Cholesky-factorised, R0 = L L^T, and z = L u maps
 *    independent standard normals to correlated ones, x = F^-1(Phi(z)).
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/transform.h"

#include <float.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "numerics/special.h"

/* ---------------------------------------------------------------------- */
/* Gauss-Hermite rule for the standard normal weight                       */
/* ---------------------------------------------------------------------- */

/* Number of nodes per dimension of the product rule (GH_N^2 = 4096 points
 * per evaluation of rho(rho0)). Against a 180-node rule the 64-node rule
 * gives rho to about 1e-10 or better for the marginals whose quantile
 * function x(u) is analytic in u (normal, lognormal, gumbel, weibull,
 * frechet with a finite variance, gamma, exponential, uniform, beta,
 * truncated normal). The triangular x(u) has a kink at the mode, where
 * Gauss-Hermite gives only about 1e-5; such a marginal gets the composite
 * rule below instead. */
#define GH_N 64

/* Number of eigenvalues of the Jacobi matrix of the probabilists' Hermite
 * polynomials (zero diagonal, off-diagonal sqrt(k), k = 1..n-1) that are
 * smaller than `lambda`, by the Sturm sequence of the leading minors. */
static int sturm_count(int n, double lambda) {
  int count = 0;
  double q = -lambda;
  for (int k = 0;;) {
    if (q < 0)
      count++;
    if (++k == n)
      break;
    if (q == 0)
      q = DBL_EPSILON; /* perturbs a zero pivot, as in bisection codes */
    q = -lambda - k / q;
  }
  return count;
}

/* Orthonormal Hermite polynomials p_k = He_k / sqrt(k!) by the three-term
 * recurrence sqrt(k+1) p_{k+1} = x p_k - sqrt(k) p_{k-1}. Returns p_n(x),
 * stores p_{n-1}(x) in `prev` and sum_{k<n} p_k(x)^2 in `sumsq`. */
static double hermite_orthonormal(int n, double x, double *prev,
                                  double *sumsq) {
  double pm = 0, p = 1, s = 0;
  for (int k = 0; k < n; k++) {
    s += p * p;
    double next = (x * p - sqrt((double)k) * pm) / sqrt(k + 1.0);
    pm = p;
    p = next;
  }
  *prev = pm;
  *sumsq = s;
  return p;
}

/* Nodes and weights of the n-point Gauss rule for the standard normal
 * density (weights sum to 1), ascending. Golub and Welsch (1969): the nodes
 * are the eigenvalues of the Jacobi matrix, found here by Sturm bisection
 * (Barth, Martin and Wilkinson 1967) and polished by two Newton steps on
 * p_n; the weights are the Christoffel numbers 1 / sum_{k<n} p_k(x)^2,
 * equal to the squared first eigenvector components of Golub-Welsch. The
 * rule is exact for polynomials of degree up to 2n-1. 1 <= n <= 256. */
void bk__transform_gauss_hermite(int n, double *x, double *w) {
  double bound = 2 * sqrt(n > 1 ? n - 1.0 : 1.0); /* Gershgorin */
  double total = 0;
  for (int i = 0; i < n; i++) {
    double lo = -bound, hi = bound;
    for (int it = 0; it < 200 && hi - lo > 4 * DBL_EPSILON * bound; it++) {
      double mid = 0.5 * (lo + hi);
      if (sturm_count(n, mid) > i)
        hi = mid;
      else
        lo = mid;
    }
    double xi = 0.5 * (lo + hi), prev, sumsq;
    for (int it = 0; it < 2; it++) {
      double pn = hermite_orthonormal(n, xi, &prev, &sumsq);
      if (prev != 0)
        xi -= pn / (sqrt((double)n) * prev);
    }
    hermite_orthonormal(n, xi, &prev, &sumsq);
    x[i] = xi;
    w[i] = 1 / sumsq;
  }
  /* Symmetrise (the rule is symmetric about 0) and normalise. */
  for (int i = 0; i < n / 2; i++) {
    int j = n - 1 - i;
    double xs = 0.5 * (x[j] - x[i]), ws = 0.5 * (w[i] + w[j]);
    x[i] = -xs;
    x[j] = xs;
    w[i] = w[j] = ws;
  }
  if (n % 2)
    x[n / 2] = 0;
  for (int i = 0; i < n; i++)
    total += w[i];
  for (int i = 0; i < n; i++)
    w[i] /= total;
}

/* ---------------------------------------------------------------------- */
/* The Nataf integral for one pair                                        */
/* ---------------------------------------------------------------------- */

/* Quadrature rules for E[g(Y)], Y standard normal: sum w_i g(y_i). */
#define RULE_MAX 256

typedef struct {
  int n;
  double y[RULE_MAX], w[RULE_MAX];
} rule_t;

/* The composite rule used next to a kink: Gauss-Legendre with GL_N points
 * on panels of width at most 1 over [-CUT, CUT], with panel edges at the
 * kinks, weights w_i = GL weight * phi(y_i). The normal mass beyond 10 is
 * 1.5e-23. On each side of a kink the integrand is analytic, so the error
 * falls geometrically with the panel width; it is below 1e-12 for the
 * triangular marginal (see the tests). */
#define GL_N 10
#define CUT  10.0

/* n-point Gauss-Legendre nodes and weights on [-1, 1] by Newton's method on
 * the Legendre recurrence, starting from the asymptotic guesses
 * cos(pi (i + 3/4) / (n + 1/2)) (Abramowitz and Stegun 25.4.29). */
static void gauss_legendre(int n, double *x, double *w) {
  for (int i = 0; i < n; i++) {
    double z = cos(M_PI * (i + 0.75) / (n + 0.5)), dp = 1;
    for (int it = 0; it < 100; it++) {
      double p0 = 1, p1 = z;
      for (int k = 2; k <= n; k++) {
        double p2 = ((2 * k - 1) * z * p1 - (k - 1) * p0) / k;
        p0 = p1;
        p1 = p2;
      }
      dp = n * (z * p1 - p0) / (z * z - 1);
      double dz = p1 / dp;
      z -= dz;
      if (fabs(dz) < 1e-16)
        break;
    }
    x[n - 1 - i] = z;
    w[n - 1 - i] = 2 / ((1 - z * z) * dp * dp);
  }
}

typedef struct {
  double glx[GL_N], glw[GL_N];
  rule_t gh; /* the GH_N-point Gauss-Hermite rule */
} rules_t;

static void rules_init(rules_t *r) {
  gauss_legendre(GL_N, r->glx, r->glw);
  r->gh.n = GH_N;
  bk__transform_gauss_hermite(GH_N, r->gh.y, r->gh.w);
}

static void add_panels(const rules_t *rs, rule_t *r, double lo, double hi) {
  int np = (int)ceil(hi - lo);
  if (np < 1)
    np = 1;
  double h = (hi - lo) / np;
  for (int k = 0; k < np; k++) {
    double mid = lo + (k + 0.5) * h;
    for (int i = 0; i < GL_N; i++) {
      double y = mid + 0.5 * h * rs->glx[i];
      r->y[r->n] = y;
      r->w[r->n++] = 0.5 * h * rs->glw[i] * exp(-0.5 * y * y) / sqrt(2 * M_PI);
    }
  }
}

/* The rule with panel edges at the kinks k1 and k2 (NaN: none): the
 * Gauss-Hermite rule when there is no kink inside (-CUT, CUT), else the
 * composite rule. At most 2 * CUT + 3 panels, so n <= RULE_MAX. */
static const rule_t *rule_for(const rules_t *rs, rule_t *buf, double k1,
                              double k2) {
  int has1 = fabs(k1) < CUT, has2 = fabs(k2) < CUT;
  if (!has1 && !has2)
    return &rs->gh;
  double e[4] = {-CUT, 0, 0, CUT};
  int ne = 1;
  if (has1)
    e[ne++] = k1;
  if (has2) {
    e[ne++] = k2;
    if (has1 && k2 < k1) {
      e[1] = k2;
      e[2] = k1;
    }
  }
  e[ne++] = CUT;
  buf->n = 0;
  for (int i = 0; i + 1 < ne; i++)
    if (e[i + 1] > e[i])
      add_panels(rs, buf, e[i], e[i + 1]);
  return buf;
}

/* The u at which x(u) = F^-1(Phi(u)) has a kink, or NaN. Only the
 * triangular marginal has one, at its mode, where the density has a corner.
 * The mode is found from the public moments and bounds, mode = 3 mean -
 * lower - upper, the bounds being the quantiles at u = -+30 (Phi(-30) is
 * about 5e-198, so these are the bounds to far below the rounding of the
 * mean). */
static double kink_u(const bk_dist_t *d) {
  if (d->kind != BK_DIST_TRIANGULAR)
    return NAN;
  double lo = bk_dist_from_u(d, -30), hi = bk_dist_from_u(d, 30);
  if (!(hi > lo))
    return NAN;
  double mode = 3 * d->mean - lo - hi;
  return bk_norm_icdf((mode - lo) / (hi - lo));
}

/* One pair of marginals prepared for the quadrature. `za` holds the
 * standardised outer marginal at the nodes of `outer`; the inner marginal
 * `b` is evaluated at r0 y_i + sqrt(1 - r0^2) y_j. Means and standard
 * deviations are those of the quadrature itself, so that rho(0) = 0 and,
 * for equal marginals, rho(1) = 1 hold exactly in the discrete rule. */
typedef struct {
  const bk_dist_t *a, *b;
  double ka, kb; /* kinks in u, or NaN */
  rules_t rules;
  rule_t outer_buf;
  const rule_t *outer;
  double za[RULE_MAX]; /* (x_a(y_i) - ma) / sa on `outer` */
  double ma, sa, mb, sb;
  int ok; /* 0 when a marginal gave a non-finite value at a node */
} pair_t;

/* Rough cost of bk_dist_from_u: quantiles that need an iterative inverse
 * (gamma, beta, truncated normal) go outside, as the inner marginal is
 * evaluated once per point of the product rule. */
static int from_u_cost(const bk_dist_t *d) {
  switch (d->kind) {
  case BK_DIST_GAMMA:
  case BK_DIST_BETA:
  case BK_DIST_TRUNCATED_NORMAL:
    return 1;
  default:
    return 0;
  }
}

/* Quadrature mean and sd of d on rule r; z receives the standardised
 * values when not NULL. */
static void moments(const bk_dist_t *d, const rule_t *r, double *z,
                    double *mean, double *sd, int *ok) {
  double x[RULE_MAX], m = 0, v = 0;
  for (int i = 0; i < r->n; i++) {
    x[i] = bk_dist_from_u(d, r->y[i]);
    if (!isfinite(x[i]))
      *ok = 0;
    m += r->w[i] * x[i];
  }
  for (int i = 0; i < r->n; i++)
    v += r->w[i] * (x[i] - m) * (x[i] - m);
  double s = sqrt(v);
  if (!(s > 0))
    *ok = 0;
  if (z)
    for (int i = 0; i < r->n; i++)
      z[i] = (x[i] - m) / s;
  *mean = m;
  *sd = s;
}

static void pair_init(pair_t *p, const bk_dist_t *a, const bk_dist_t *b) {
  if (from_u_cost(b) > from_u_cost(a)) {
    const bk_dist_t *t = a;
    a = b;
    b = t;
  }
  rules_init(&p->rules);
  p->a = a;
  p->b = b;
  p->ka = kink_u(a);
  p->kb = kink_u(b);
  p->ok = 1;
  p->outer = rule_for(&p->rules, &p->outer_buf, p->ka, NAN);
  moments(a, p->outer, p->za, &p->ma, &p->sa, &p->ok);
  rule_t buf;
  moments(b, rule_for(&p->rules, &buf, p->kb, NAN), NULL, &p->mb, &p->sb,
          &p->ok);
}

/* rho(r0) = sum_i sum_j w_i w_j za(y_i) zb(r0 y_i + sqrt(1 - r0^2) y_j),
 * with (U_a, U_b) = (Y1, r0 Y1 + sqrt(1 - r0^2) Y2) for independent Y1, Y2.
 * The inner rule has a panel edge where r0 y_i + s y_j crosses the kink of
 * b. At r0 = +-1 it reduces to the one-dimensional E[z_a(Y) z_b(+-Y)]. */
static double pair_rho(const pair_t *p, double r0) {
  double sum = 0;
  rule_t buf;
  if (r0 >= 1 || r0 <= -1) {
    double sg = r0 > 0 ? 1 : -1;
    const rule_t *r = rule_for(&p->rules, &buf, p->ka, sg * p->kb);
    for (int i = 0; i < r->n; i++) {
      double xa = bk_dist_from_u(p->a, r->y[i]);
      double xb = bk_dist_from_u(p->b, sg * r->y[i]);
      sum += r->w[i] * (xa - p->ma) / p->sa * (xb - p->mb) / p->sb;
    }
    return sum;
  }
  double s = sqrt((1 - r0) * (1 + r0));
  const rule_t *o = p->outer;
  for (int i = 0; i < o->n; i++) {
    double inner = 0, c = r0 * o->y[i];
    const rule_t *r = isnan(p->kb)
                          ? &p->rules.gh
                          : rule_for(&p->rules, &buf, (p->kb - c) / s, NAN);
    for (int j = 0; j < r->n; j++)
      inner += r->w[j] * bk_dist_from_u(p->b, c + s * r->y[j]);
    sum += o->w[i] * p->za[i] * (inner - p->mb) / p->sb;
  }
  return sum;
}

/* Brent (1973), "Algorithms for Minimization without Derivatives", ch. 4:
 * the zero of f on [a, b] given f(a), f(b) of opposite signs, to within
 * 4 eps |x| + tol, combining bisection with secant and inverse quadratic
 * interpolation so that it never does worse than bisection. */
static double brent_zero(const pair_t *p, double target, double a, double b,
                         double fa, double fb, double tol) {
  double c = a, fc = fa, d = b - a, e = d;
  for (int it = 0; it < 200; it++) {
    if (fabs(fc) < fabs(fb)) {
      a = b;
      b = c;
      c = a;
      fa = fb;
      fb = fc;
      fc = fa;
    }
    double tol1 = 2 * DBL_EPSILON * fabs(b) + 0.5 * tol;
    double m = 0.5 * (c - b);
    if (fabs(m) <= tol1 || fb == 0)
      break;
    if (fabs(e) < tol1 || fabs(fa) <= fabs(fb)) {
      d = e = m;
    } else {
      double s = fb / fa, pp, q;
      if (a == c) {
        pp = 2 * m * s;
        q = 1 - s;
      } else {
        double qa = fa / fc, r = fb / fc;
        pp = s * (2 * m * qa * (qa - r) - (b - a) * (r - 1));
        q = (qa - 1) * (r - 1) * (s - 1);
      }
      if (pp > 0)
        q = -q;
      else
        pp = -pp;
      if (2 * pp < 3 * m * q - fabs(tol1 * q) && pp < fabs(0.5 * e * q)) {
        e = d;
        d = pp / q;
      } else {
        d = e = m;
      }
    }
    a = b;
    fa = fb;
    b += fabs(d) > tol1 ? d : (m > 0 ? tol1 : -tol1);
    fb = pair_rho(p, b) - target;
    if ((fb > 0) == (fc > 0)) {
      c = a;
      fc = fa;
      d = e = b - a;
    }
  }
  return b;
}

/* A marginal the equation can take: not constant, finite positive sd. */
static int has_variance(const bk_dist_t *d) {
  return d->kind != BK_DIST_CONSTANT && d->sd > 0 && isfinite(d->sd) &&
         isfinite(d->mean);
}

/* Which closed form applies (Liu and Der Kiureghian 1986, table 2 and the
 * exact entries for normal and lognormal marginals). */
typedef enum {
  FORM_NUMERIC,
  FORM_NORMAL_NORMAL,    /* rho0 = rho */
  FORM_NORMAL_LOGNORMAL, /* rho0 = rho cov / sqrt(ln(1 + cov^2)) */
  FORM_LOGNORMAL_LOGNORMAL,
  FORM_NORMAL_OTHER /* rho0 = rho / E[U z_b(U)], see below */
} form_t;

static form_t closed_form(const bk_dist_t **a, const bk_dist_t **b) {
  if ((*b)->kind == BK_DIST_NORMAL) {
    const bk_dist_t *t = *a;
    *a = *b;
    *b = t;
  }
  if ((*a)->kind == BK_DIST_NORMAL) {
    if ((*b)->kind == BK_DIST_NORMAL)
      return FORM_NORMAL_NORMAL;
    if ((*b)->kind == BK_DIST_LOGNORMAL)
      return FORM_NORMAL_LOGNORMAL;
    return FORM_NORMAL_OTHER;
  }
  if ((*a)->kind == BK_DIST_LOGNORMAL && (*b)->kind == BK_DIST_LOGNORMAL)
    return FORM_LOGNORMAL_LOGNORMAL;
  return FORM_NUMERIC;
}

/* sqrt(ln(1 + cov^2)), the sd of ln X, for a two-parameter lognormal. */
static double lognormal_zeta(const bk_dist_t *d) {
  double cov = d->sd / d->mean;
  return sqrt(log1p(cov * cov));
}

/* E[U z_b(U)] for standard normal U, by the 1-D Gauss-Hermite rule. For a
 * normal U_a and any b, E[U_a z_b(U_b)] = rho0 E[U z_b(U)] (regress U_a on
 * U_b), so rho is linear in rho0 with this slope. */
static double normal_slope(const bk_dist_t *b) {
  rules_t rs;
  rule_t buf;
  double z[RULE_MAX], m, sd, sum = 0;
  int ok = 1;
  rules_init(&rs);
  const rule_t *r = rule_for(&rs, &buf, kink_u(b), NAN);
  moments(b, r, z, &m, &sd, &ok);
  if (!ok)
    return NAN;
  for (int i = 0; i < r->n; i++)
    sum += r->w[i] * r->y[i] * z[i];
  return sum;
}

double bk__transform_nataf_rho(const bk_dist_t *a, const bk_dist_t *b, double rho0) {
  if (!has_variance(a) || !has_variance(b) || !(fabs(rho0) <= 1))
    return NAN;
  pair_t p;
  pair_init(&p, a, b);
  return p.ok ? pair_rho(&p, rho0) : NAN;
}

/* The numeric solution: bracket on [-1, 1], where the endpoints are the
 * comonotone and countermonotone limits, then Brent. rho(rho0) increases
 * with rho0 for increasing marginal transforms (Slepian's inequality), so
 * the bracket holds a single root. */
static double solve_numeric(const bk_dist_t *a, const bk_dist_t *b, double rho,
                            double *lo, double *hi) {
  pair_t p;
  pair_init(&p, a, b);
  if (!p.ok)
    return NAN;
  double flo = pair_rho(&p, -1), fhi = pair_rho(&p, 1);
  if (lo)
    *lo = flo;
  if (hi)
    *hi = fhi;
  if (!(rho > flo && rho < fhi))
    return NAN;
  if (rho == 0)
    return 0;
  double r0 = brent_zero(&p, rho, -1, 1, flo - rho, fhi - rho, 1e-14);
  return fabs(r0) < 1 ? r0 : NAN;
}

double bk__transform_nataf_rho0_numeric(const bk_dist_t *a, const bk_dist_t *b,
                              double rho) {
  if (!has_variance(a) || !has_variance(b) || !(fabs(rho) < 1))
    return NAN;
  return solve_numeric(a, b, rho, NULL, NULL);
}

double bk_transform_nataf_rho0(const bk_dist_t *a, const bk_dist_t *b, double rho) {
  if (!has_variance(a) || !has_variance(b) || !(fabs(rho) < 1))
    return NAN;
  double r0;
  switch (closed_form(&a, &b)) {
  case FORM_NORMAL_NORMAL:
    return rho;
  case FORM_NORMAL_LOGNORMAL:
    r0 = rho * (b->sd / b->mean) / lognormal_zeta(b);
    break;
  case FORM_LOGNORMAL_LOGNORMAL: {
    double c = (a->sd / a->mean) * (b->sd / b->mean);
    if (!(1 + rho * c > 0))
      return NAN;
    r0 = log1p(rho * c) / (lognormal_zeta(a) * lognormal_zeta(b));
    break;
  }
  case FORM_NORMAL_OTHER:
    r0 = rho / normal_slope(b);
    break;
  default:
    return solve_numeric(a, b, rho, NULL, NULL);
  }
  return fabs(r0) < 1 ? r0 : NAN;
}

void bk_transform_nataf_range(const bk_dist_t *a, const bk_dist_t *b, double *lo,
                    double *hi) {
  *lo = *hi = NAN;
  if (!has_variance(a) || !has_variance(b))
    return;
  switch (closed_form(&a, &b)) {
  case FORM_NORMAL_NORMAL:
    *lo = -1;
    *hi = 1;
    return;
  case FORM_NORMAL_LOGNORMAL: {
    double s = lognormal_zeta(b) / (b->sd / b->mean);
    *lo = -s;
    *hi = s;
    return;
  }
  case FORM_LOGNORMAL_LOGNORMAL: {
    double zz = lognormal_zeta(a) * lognormal_zeta(b);
    double c = (a->sd / a->mean) * (b->sd / b->mean);
    *lo = expm1(-zz) / c;
    *hi = expm1(zz) / c;
    return;
  }
  case FORM_NORMAL_OTHER: {
    double s = normal_slope(b);
    *lo = -s;
    *hi = s;
    return;
  }
  default:
    solve_numeric(a, b, 0, lo, hi);
    return;
  }
}

/* ---------------------------------------------------------------------- */
/* The transformation                                                     */
/* ---------------------------------------------------------------------- */

/* A variable mapped on its own: x[var] = F^-1(Phi(u[ui])). */
typedef struct {
  size_t var, ui;
} slot_t;

/* A given correlation, sorted by (a, b) with a < b, for lookups. */
typedef struct {
  size_t a, b;
  double rho0;
} pair_rho0_t;

/* Invariants: every variable is in exactly one of `consts`, `indep` and
 * `corr`; u indices number the non-constant variables in variable order, so
 * both `indep[].ui` and `corr[].ui` increase. Row r of the packed lower
 * triangle L starts at r (r + 1) / 2 and belongs to corr[r]. Nothing
 * changes after bk_transform_new, so one transform may be shared by
 * threads. */
struct bk_transform {
  size_t n, nu;
  bk_dist_t *dists; /* n, copied */
  size_t nconst, nindep, k, npairs;
  size_t *consts;     /* nconst variable indices */
  slot_t *indep;      /* nindep */
  slot_t *corr;       /* k, in variable order */
  double *L;          /* k (k + 1) / 2, packed by rows */
  pair_rho0_t *pairs; /* npairs, sorted */
};

static void set_why(char *why, size_t whycap, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

static void set_why(char *why, size_t whycap, const char *fmt, ...) {
  if (!why || whycap == 0)
    return;
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(why, whycap, fmt, ap);
  va_end(ap);
}

static int cmp_pair(const void *x, const void *y) {
  const pair_rho0_t *p = x, *q = y;
  if (p->a != q->a)
    return p->a < q->a ? -1 : 1;
  if (p->b != q->b)
    return p->b < q->b ? -1 : 1;
  return 0;
}

/* In-place Cholesky factorisation of the packed symmetric matrix `m`
 * (k x k, lower triangle by rows). Returns 0, or the order (1-based) of the
 * first leading minor that is not positive definite; `m` is then partly
 * overwritten. A pivot below 1e-12 counts as singular: the matrix has unit
 * diagonal, and such a pivot would blow up x_to_u. */
static size_t cholesky_packed(double *m, size_t k) {
  for (size_t r = 0; r < k; r++) {
    double *row = m + r * (r + 1) / 2;
    for (size_t c = 0; c <= r; c++) {
      const double *rc = m + c * (c + 1) / 2;
      double s = row[c];
      for (size_t j = 0; j < c; j++)
        s -= row[j] * rc[j];
      if (c < r) {
        row[c] = s / rc[c];
      } else {
        if (!(s > 1e-12))
          return r + 1;
        row[r] = sqrt(s);
      }
    }
  }
  return 0;
}

/* Rounds a reachable bound toward zero to three decimals, so that the value
 * printed is itself reachable. */
static double toward_zero_3(double v) {
  return v > 0 ? floor(v * 1000) / 1000 : ceil(v * 1000) / 1000;
}

/* "an" before a vowel sound: of the marginal names only "exponential". */
static const char *article(const char *name) {
  return name[0] && strchr("aeio", name[0]) ? "an" : "a";
}

/* Allocates count * size bytes (or nothing when count is 0). */
static int alloc_array(void **out, size_t count, size_t size) {
  *out = NULL;
  if (count == 0)
    return 0;
  if (count > SIZE_MAX / size)
    return BK_ENOMEM;
  *out = bk_malloc(count * size);
  return *out ? 0 : BK_ENOMEM;
}

static int same_dist(const bk_dist_t *x, const bk_dist_t *y) {
  if (x->kind != y->kind || x->mean != y->mean || x->sd != y->sd)
    return 0;
  for (size_t i = 0; i < sizeof x->p / sizeof x->p[0]; i++)
    if (x->p[i] != y->p[i])
      return 0;
  return 1;
}

static const pair_rho0_t *find_pair(const bk_transform_t *t, size_t a,
                                    size_t b) {
  if (t->npairs == 0)
    return NULL;
  pair_rho0_t key = {a < b ? a : b, a < b ? b : a, 0};
  return bsearch(&key, t->pairs, t->npairs, sizeof *t->pairs, cmp_pair);
}

/* rho0 of an earlier pair i' < i with the same marginals and rho, or NaN.
 * Studies often correlate many identical variables alike, and a numeric
 * solve costs up to a few 1e5 quantile evaluations, so it is done once. */
static double earlier_solution(const bk_transform_t *t, const bk_dist_t *d,
                               const bk_corr_t *corr, size_t i) {
  const bk_dist_t *da = &d[corr[i].a], *db = &d[corr[i].b];
  const bk_dist_t *fa = da, *fb = db;
  if (closed_form(&fa, &fb) != FORM_NUMERIC)
    return NAN; /* cheap anyway */
  for (size_t j = 0; j < i; j++) {
    const bk_dist_t *ea = &d[corr[j].a], *eb = &d[corr[j].b];
    if (corr[j].rho == corr[i].rho &&
        ((same_dist(ea, da) && same_dist(eb, db)) ||
         (same_dist(ea, db) && same_dist(eb, da))))
      return find_pair(t, corr[j].a, corr[j].b)->rho0;
  }
  return NAN;
}

int bk_transform_new(bk_transform_t **out, size_t n, const bk_dist_t *dists,
                     size_t ncorr, const bk_corr_t *corr, char *why,
                     size_t whycap, int *bad_corr) {
  int rc = BK_ENOMEM, bad = -1;
  size_t *pos = NULL; /* variable -> row of L, or SIZE_MAX */
  double *phys = NULL;
  bk_transform_t *t = bk_calloc(1, sizeof *t);
  *out = NULL;
  if (why && whycap)
    why[0] = '\0';
  if (!t)
    goto fail;
  t->n = n;
  if (alloc_array((void **)&t->dists, n, sizeof *t->dists) ||
      alloc_array((void **)&pos, n, sizeof *pos) ||
      alloc_array((void **)&t->pairs, ncorr, sizeof *t->pairs))
    goto fail;
  if (n)
    memcpy(t->dists, dists, n * sizeof *dists);

  /* Cheap checks first, pair by pair. */
  rc = BK_EINVAL;
  for (size_t i = 0; i < ncorr; i++) {
    const bk_corr_t *c = &corr[i];
    bad = (int)i;
    if (c->a >= n || c->b >= n) {
      set_why(why, whycap, "variable index %zu is out of range (%zu variables)",
              c->a >= n ? c->a : c->b, n);
      goto fail;
    }
    if (c->a == c->b) {
      set_why(why, whycap, "a variable cannot be correlated with itself");
      goto fail;
    }
    if (!(fabs(c->rho) < 1)) {
      set_why(why, whycap, "%g must lie strictly between -1 and 1", c->rho);
      goto fail;
    }
    for (int s = 0; s < 2; s++) {
      const bk_dist_t *d = &dists[s ? c->b : c->a];
      if (d->kind == BK_DIST_CONSTANT || !(d->sd > 0)) {
        set_why(why, whycap,
                "this pair includes a constant, which cannot be correlated");
        goto fail;
      }
      if (!has_variance(d)) {
        set_why(why, whycap,
                "this pair includes a %s marginal with infinite variance, "
                "whose correlation is undefined",
                bk_dist_name(d->kind));
        goto fail;
      }
    }
    t->pairs[i].a = c->a < c->b ? c->a : c->b;
    t->pairs[i].b = c->a < c->b ? c->b : c->a;
    t->pairs[i].rho0 = (double)i; /* original index until solved */
  }

  /* Repeated pairs: sort, then report the earliest second occurrence. */
  if (ncorr)
    qsort(t->pairs, ncorr, sizeof *t->pairs, cmp_pair);
  bad = -1;
  for (size_t i = 1; i < ncorr; i++) {
    if (cmp_pair(&t->pairs[i - 1], &t->pairs[i]) == 0) {
      int later = (int)fmax(t->pairs[i - 1].rho0, t->pairs[i].rho0);
      if (bad < 0 || later < bad)
        bad = later;
    }
  }
  if (bad >= 0) {
    set_why(why, whycap, "this pair is given more than once");
    goto fail;
  }
  t->npairs = ncorr;

  /* Classify the variables and number the u coordinates. */
  for (size_t v = 0; v < n; v++)
    pos[v] = SIZE_MAX;
  for (size_t i = 0; i < ncorr; i++)
    pos[corr[i].a] = pos[corr[i].b] = 0;
  for (size_t v = 0; v < n; v++) {
    if (dists[v].kind == BK_DIST_CONSTANT)
      t->nconst++;
    else if (pos[v] == SIZE_MAX)
      t->nindep++;
    else
      t->k++;
  }
  rc = BK_ENOMEM;
  /* k <= n, so k (k + 1) / 2 only overflows for absurd k; refuse those. */
  if (t->k >= ((size_t)1 << (sizeof(size_t) * 4 - 1)))
    goto fail;
  size_t nl = t->k * (t->k + 1) / 2;
  if (alloc_array((void **)&t->consts, t->nconst, sizeof *t->consts) ||
      alloc_array((void **)&t->indep, t->nindep, sizeof *t->indep) ||
      alloc_array((void **)&t->corr, t->k, sizeof *t->corr) ||
      alloc_array((void **)&t->L, nl, sizeof *t->L))
    goto fail;
  size_t nc = 0, ni = 0, nk = 0;
  for (size_t v = 0; v < n; v++) {
    if (dists[v].kind == BK_DIST_CONSTANT) {
      t->consts[nc++] = v;
      continue;
    }
    slot_t s = {v, t->nu++};
    if (pos[v] == SIZE_MAX) {
      t->indep[ni++] = s;
    } else {
      pos[v] = nk;
      t->corr[nk++] = s;
    }
  }

  /* Solve the Nataf equation for each pair, in the order given, and fill
   * the packed R0 (unit diagonal). */
  for (size_t r = 0; r < t->k; r++) {
    double *row = t->L + r * (r + 1) / 2;
    for (size_t c = 0; c < r; c++)
      row[c] = 0;
    row[r] = 1;
  }
  rc = BK_EINVAL;
  for (size_t i = 0; i < ncorr; i++) {
    const bk_corr_t *c = &corr[i];
    const bk_dist_t *da = &dists[c->a], *db = &dists[c->b];
    double r0 = earlier_solution(t, dists, corr, i);
    if (isnan(r0))
      r0 = bk_transform_nataf_rho0(da, db, c->rho);
    if (isnan(r0)) {
      double lo, hi;
      const char *na = bk_dist_name(da->kind), *nb = bk_dist_name(db->kind);
      bad = (int)i;
      bk_transform_nataf_range(da, db, &lo, &hi);
      if (isnan(lo) || isnan(hi))
        set_why(why, whycap,
                "the correlation of %s %s and %s %s marginal cannot be "
                "computed (a quantile is not finite far in the tails)",
                article(na), na, article(nb), nb);
      else
        set_why(why, whycap,
                "%g cannot be reached by %s %s and %s %s marginal (%s "
                "reachable about %g)",
                c->rho, article(na), na, article(nb), nb,
                c->rho > 0 ? "largest" : "smallest",
                toward_zero_3(c->rho > 0 ? hi : lo));
      goto fail;
    }
    size_t ra = pos[c->a], rb = pos[c->b];
    if (ra < rb) {
      size_t tmp = ra;
      ra = rb;
      rb = tmp;
    }
    t->L[ra * (ra + 1) / 2 + rb] = r0;
    ((pair_rho0_t *)find_pair(t, c->a, c->b))->rho0 = r0;
  }

  size_t minor = cholesky_packed(t->L, t->k);
  if (minor) {
    /* Say whether the physical matrix was already inconsistent. */
    rc = BK_ENOMEM;
    if (alloc_array((void **)&phys, nl, sizeof *phys))
      goto fail;
    for (size_t r = 0; r < t->k; r++) {
      double *row = phys + r * (r + 1) / 2;
      for (size_t c = 0; c < r; c++)
        row[c] = 0;
      row[r] = 1;
    }
    for (size_t i = 0; i < ncorr; i++) {
      size_t ra = pos[corr[i].a], rb = pos[corr[i].b];
      if (ra < rb) {
        size_t tmp = ra;
        ra = rb;
        rb = tmp;
      }
      phys[ra * (ra + 1) / 2 + rb] = corr[i].rho;
    }
    size_t pminor = cholesky_packed(phys, t->k);
    rc = BK_EINVAL;
    bad = -1;
    if (pminor)
      set_why(why, whycap,
              "the correlation matrix is not positive definite (leading "
              "minor %zu)",
              pminor);
    else
      set_why(why, whycap,
              "the correlation matrix is not positive definite after the "
              "Nataf adjustment (leading minor %zu)",
              minor);
    goto fail;
  }

  bk_free(pos);
  *out = t;
  if (bad_corr)
    *bad_corr = -1;
  return 0;

fail:
  if (bad_corr)
    *bad_corr = rc == BK_EINVAL ? bad : -1;
  if (rc == BK_ENOMEM)
    set_why(why, whycap, "out of memory");
  bk_free(phys);
  bk_free(pos);
  bk_transform_free(t);
  return rc;
}

void bk_transform_free(bk_transform_t *t) {
  if (!t)
    return;
  bk_free(t->dists);
  bk_free(t->consts);
  bk_free(t->indep);
  bk_free(t->corr);
  bk_free(t->L);
  bk_free(t->pairs);
  bk_free(t);
}

size_t bk_transform_nu(const bk_transform_t *t) {
  return t->nu;
}

/* The hot path: no allocation, one pass per class of variable. */
void bk_transform_u_to_x(const bk_transform_t *t, const double *u, double *x) {
  const bk_dist_t *d = t->dists;
  for (size_t i = 0; i < t->nconst; i++)
    x[t->consts[i]] = d[t->consts[i]].mean;
  for (size_t i = 0; i < t->nindep; i++) {
    const slot_t *s = &t->indep[i];
    x[s->var] = bk_dist_from_u(&d[s->var], u[s->ui]);
  }
  const double *row = t->L;
  for (size_t r = 0; r < t->k; r++) {
    double z = 0;
    for (size_t c = 0; c <= r; c++)
      z += row[c] * u[t->corr[c].ui];
    row += r + 1;
    const slot_t *s = &t->corr[r];
    x[s->var] = bk_dist_from_u(&d[s->var], z);
  }
}

/* Inverse of u_to_x: z_r = Phi^-1(F(x)), then L u = z by forward
 * substitution, writing each u in place as soon as it is known. */
void bk_transform_x_to_u(const bk_transform_t *t, const double *x, double *u) {
  const bk_dist_t *d = t->dists;
  for (size_t i = 0; i < t->nindep; i++) {
    const slot_t *s = &t->indep[i];
    u[s->ui] = bk_dist_to_u(&d[s->var], x[s->var]);
  }
  const double *row = t->L;
  for (size_t r = 0; r < t->k; r++) {
    const slot_t *s = &t->corr[r];
    double z = bk_dist_to_u(&d[s->var], x[s->var]);
    for (size_t c = 0; c < r; c++)
      z -= row[c] * u[t->corr[c].ui];
    u[s->ui] = z / row[r];
    row += r + 1;
  }
}

double bk_transform_rho0(const bk_transform_t *t, size_t a, size_t b) {
  if (a >= t->n || b >= t->n)
    return NAN;
  if (a == b)
    return t->dists[a].kind == BK_DIST_CONSTANT ? NAN : 1;
  const pair_rho0_t *hit = find_pair(t, a, b);
  return hit ? hit->rho0 : 0;
}
