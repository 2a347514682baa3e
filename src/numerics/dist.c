/*
 * Probability distributions of the basic variables. bk_dist_init checks a
 * parameter set from the study file (by moments or by native parameters),
 * derives the native parameters and the moments; the evaluation functions
 * are then cheap and keep the tails: every kind computes its survival
 * function directly, and bk_dist_from_u works from the side of the standard
 * normal u where the probability is small.
 *
 * Layout of bk_dist_t.p by kind (see also bk_dist_init):
 *   normal            p0 mean, p1 sd
 *   lognormal         p0 mu (mean of ln X), p1 sigma (sd of ln X)
 *   gumbel            p0 location, p1 scale; F = exp(-exp(-(x-p0)/p1))
 *   gumbel-min        p0 location, p1 scale; F = 1 - exp(-exp((x-p0)/p1))
 *   weibull           p0 shape k, p1 scale, p2 location;
 *                     F = 1 - exp(-((x-p2)/p1)^k)
 *   frechet           p0 shape a, p1 scale, p2 location;
 *                     F = exp(-((x-p2)/p1)^-a)
 *   gamma             p0 shape, p1 scale
 *   exponential       p0 rate, p1 location
 *   uniform           p0 lower, p1 upper
 *   triangular        p0 lower, p1 mode, p2 upper
 *   beta              p0 alpha, p1 beta, p2 lower, p3 upper
 *   truncated-normal  p0 mu, p1 s*sigma, p2 a, p3 b, p4 Phi(a), p5 Z: in
 *                     working coordinates z = (x - mu)/(s*sigma) the support
 *                     is [a, b] with a <= 0, mass Z = Phi(b) - Phi(a); s = -1
 *                     (mirrored) when the bounds lie above mu, so that the
 *                     small probabilities are always the computed ones.
 *   constant          p0 value
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/dist.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "base/error.h"
#include "numerics/special.h"

#define EULER_GAMMA   0.57721566490153286061
#define PI_OVER_SQRT6 1.28254983016186409554 /* pi / sqrt(6) */
#define SQRT3         1.73205080756887729353
#define SQRT12        3.46410161513775458705
#define LN_SQRT_2PI   0.91893853320467274178

/* ---------------------------------------------------------------------- */
/* Names                                                                   */
/* ---------------------------------------------------------------------- */

static const char *const dist_names[BK_DIST__COUNT] = {
    [BK_DIST_NORMAL] = "normal",
    [BK_DIST_LOGNORMAL] = "lognormal",
    [BK_DIST_GUMBEL] = "gumbel",
    [BK_DIST_GUMBEL_MIN] = "gumbel-min",
    [BK_DIST_WEIBULL] = "weibull",
    [BK_DIST_FRECHET] = "frechet",
    [BK_DIST_GAMMA] = "gamma",
    [BK_DIST_EXPONENTIAL] = "exponential",
    [BK_DIST_UNIFORM] = "uniform",
    [BK_DIST_TRIANGULAR] = "triangular",
    [BK_DIST_BETA] = "beta",
    [BK_DIST_TRUNCATED_NORMAL] = "truncated-normal",
    [BK_DIST_CONSTANT] = "constant",
};

static const char *const param_names[BK_PARAM__COUNT] = {
    [BK_PARAM_MEAN] = "mean",   [BK_PARAM_SD] = "sd",
    [BK_PARAM_COV] = "cov",     [BK_PARAM_MU] = "mu",
    [BK_PARAM_SIGMA] = "sigma", [BK_PARAM_LOCATION] = "location",
    [BK_PARAM_SCALE] = "scale", [BK_PARAM_SHAPE] = "shape",
    [BK_PARAM_RATE] = "rate",   [BK_PARAM_LOWER] = "lower",
    [BK_PARAM_UPPER] = "upper", [BK_PARAM_MODE] = "mode",
    [BK_PARAM_ALPHA] = "alpha", [BK_PARAM_BETA] = "beta",
    [BK_PARAM_VALUE] = "value",
};

const char *bk_dist_name(bk_dist_kind_t kind) {
  if ((int)kind < 0 || kind >= BK_DIST__COUNT)
    return "?";
  return dist_names[kind];
}

int bk_dist_kind_from_name(const char *name) {
  if (name == NULL)
    return -1;
  for (int k = 0; k < BK_DIST__COUNT; k++)
    if (strcmp(name, dist_names[k]) == 0)
      return k;
  return -1;
}

const char *bk_dist_param_name(bk_param_t p) {
  if ((int)p < 0 || p >= BK_PARAM__COUNT)
    return "?";
  return param_names[p];
}

int bk_dist_param_from_name(const char *name) {
  if (name == NULL)
    return -1;
  for (int k = 0; k < BK_PARAM__COUNT; k++)
    if (strcmp(name, param_names[k]) == 0)
      return k;
  return -1;
}

/* ---------------------------------------------------------------------- */
/* Standard normal helpers                                                 */
/* ---------------------------------------------------------------------- */

/* log Phi(u), finite for every finite u. Below -35 Phi underflows soon, so
 * the asymptotic series of Mills' ratio is used (A&S 26.2.12), whose terms
 * up to u^-16 leave an error below 1e-17 there. */
static double norm_logcdf(double u) {
  if (u >= 0.0)
    return log1p(-bk_norm_sf(u));
  if (u > -35.0)
    return log(bk_norm_cdf(u));
  double r = 1.0 / (u * u);
  double s =
      r *
      (-1.0 +
       r * (3.0 +
            r * (-15.0 +
                 r * (105.0 +
                      r * (-945.0 +
                           r * (10395.0 + r * (-135135.0 + r * 2027025.0)))))));
  return -0.5 * u * u - log(-u) - LN_SQRT_2PI + log1p(s);
}

/* -log Phi(u) > 0, also where Phi(u) rounds to 1 (u > 30, where it is
 * Phi(-u) to double precision since -log(1 - q) = q (1 + q/2 + ...)). */
static double neg_logcdf(double u) {
  if (u > 30.0)
    return exp(norm_logcdf(-u));
  return -norm_logcdf(u);
}

/* log(-log Phi(u)), finite for every finite u; the extreme-value kinds
 * need it beyond the range where Phi(-u) is representable. */
static double log_neg_logcdf(double u) {
  if (u > 30.0)
    return norm_logcdf(-u);
  return log(-norm_logcdf(u));
}

/* Phi(hi) - Phi(lo) for 0 <= hi - lo <= 1/2 by 8-point Gauss-Legendre
 * quadrature of the density (nodes and weights of A&S Table 25.4, from
 * memory; numpy.polynomial.legendre.leggauss agrees to 1e-15): every term
 * is positive, so the result keeps full relative accuracy where the
 * difference of the two cdf values would cancel (a truncated normal near a
 * finite bound). The quadrature error is below 1e-20 relative at this
 * width. */
static double norm_mass_narrow(double lo, double hi) {
  static const double node[4] = {0.18343464249564980, 0.52553240991632899,
                                 0.79666647741362674, 0.96028985649753623};
  static const double weight[4] = {0.36268378337836198, 0.31370664587788727,
                                   0.22238103445337447, 0.10122853629037626};
  double h = 0.5 * (hi - lo), m = 0.5 * (hi + lo), sum = 0.0;
  for (int i = 0; i < 4; i++)
    sum += weight[i] *
           (bk_norm_pdf(m - h * node[i]) + bk_norm_pdf(m + h * node[i]));
  return h * sum;
}

/* u = Phi^-1(F) given F and S = 1 - F, each computed directly, taking the
 * small one so that neither tail is lost. */
static double u_from_fs(double f, double s) {
  if (f <= 0.5)
    return bk_norm_icdf(f);
  return -bk_norm_icdf(s);
}

/* ---------------------------------------------------------------------- */
/* Messages                                                                */
/* ---------------------------------------------------------------------- */

/* What a failing bk_dist_init reports. */
typedef struct {
  char *why;
  size_t whycap;
  int *bad_param;
} report_t;

__attribute__((format(printf, 4, 5))) static int
fail(report_t *r, int code, int param, const char *fmt, ...) {
  if (r->why != NULL && r->whycap > 0) {
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(r->why, r->whycap, fmt, ap);
    va_end(ap);
  }
  if (r->bad_param != NULL)
    *r->bad_param = param;
  return code;
}

/* The accepted parameter sets of each kind, as the messages state them. */
static const char *const usage[BK_DIST__COUNT] = {
    [BK_DIST_NORMAL] = "mean with sd or cov",
    [BK_DIST_LOGNORMAL] = "mean with sd or cov, or mu with sigma",
    [BK_DIST_GUMBEL] = "mean with sd or cov, or location with scale",
    [BK_DIST_GUMBEL_MIN] = "mean with sd or cov, or location with scale",
    [BK_DIST_WEIBULL] =
        "mean with sd or cov, or shape with scale (location optional)",
    [BK_DIST_FRECHET] =
        "mean with sd or cov, or shape with scale (location optional)",
    [BK_DIST_GAMMA] = "mean with sd or cov, or shape with scale or rate",
    [BK_DIST_EXPONENTIAL] = "mean (sd, cov or location optional), or rate "
                            "(location optional)",
    [BK_DIST_UNIFORM] = "lower with upper, or mean with sd or cov",
    [BK_DIST_TRIANGULAR] = "lower, mode and upper",
    [BK_DIST_BETA] = "alpha with beta, or mean with sd or cov (lower and "
                     "upper optional, default 0 and 1)",
    [BK_DIST_TRUNCATED_NORMAL] =
        "mu with sigma of the parent normal, and lower and/or upper",
    [BK_DIST_CONSTANT] = "value",
};

#define BIT(p) (1u << (p))

/* The parameters each kind knows at all. */
static const unsigned known[BK_DIST__COUNT] = {
    [BK_DIST_NORMAL] =
        BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) | BIT(BK_PARAM_COV),
    [BK_DIST_LOGNORMAL] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                          BIT(BK_PARAM_COV) | BIT(BK_PARAM_MU) |
                          BIT(BK_PARAM_SIGMA),
    [BK_DIST_GUMBEL] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                       BIT(BK_PARAM_COV) | BIT(BK_PARAM_LOCATION) |
                       BIT(BK_PARAM_SCALE),
    [BK_DIST_GUMBEL_MIN] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                           BIT(BK_PARAM_COV) | BIT(BK_PARAM_LOCATION) |
                           BIT(BK_PARAM_SCALE),
    [BK_DIST_WEIBULL] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                        BIT(BK_PARAM_COV) | BIT(BK_PARAM_LOCATION) |
                        BIT(BK_PARAM_SCALE) | BIT(BK_PARAM_SHAPE),
    [BK_DIST_FRECHET] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                        BIT(BK_PARAM_COV) | BIT(BK_PARAM_LOCATION) |
                        BIT(BK_PARAM_SCALE) | BIT(BK_PARAM_SHAPE),
    [BK_DIST_GAMMA] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                      BIT(BK_PARAM_COV) | BIT(BK_PARAM_SHAPE) |
                      BIT(BK_PARAM_SCALE) | BIT(BK_PARAM_RATE),
    [BK_DIST_EXPONENTIAL] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                            BIT(BK_PARAM_COV) | BIT(BK_PARAM_RATE) |
                            BIT(BK_PARAM_LOCATION),
    [BK_DIST_UNIFORM] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) |
                        BIT(BK_PARAM_COV) | BIT(BK_PARAM_LOWER) |
                        BIT(BK_PARAM_UPPER),
    [BK_DIST_TRIANGULAR] =
        BIT(BK_PARAM_LOWER) | BIT(BK_PARAM_MODE) | BIT(BK_PARAM_UPPER),
    [BK_DIST_BETA] = BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) | BIT(BK_PARAM_COV) |
                     BIT(BK_PARAM_ALPHA) | BIT(BK_PARAM_BETA) |
                     BIT(BK_PARAM_LOWER) | BIT(BK_PARAM_UPPER),
    [BK_DIST_TRUNCATED_NORMAL] = BIT(BK_PARAM_MU) | BIT(BK_PARAM_SIGMA) |
                                 BIT(BK_PARAM_LOWER) | BIT(BK_PARAM_UPPER),
    [BK_DIST_CONSTANT] = BIT(BK_PARAM_VALUE),
};

/* The parameter set being checked, with the report to fill. */
typedef struct {
  bk_dist_kind_t kind;
  unsigned has;
  const double *v;
  report_t *r;
} check_t;

static int has(const check_t *c, bk_param_t p) {
  return (c->has & BIT(p)) != 0;
}

/* The lowest-numbered parameter of `mask` that is given, or -1. */
static int first_of(const check_t *c, unsigned mask) {
  unsigned m = c->has & mask;
  for (int p = 0; p < BK_PARAM__COUNT; p++)
    if (m & BIT(p))
      return p;
  return -1;
}

static int need(check_t *c, bk_param_t p, bk_param_t with) {
  if (has(c, p))
    return 0;
  return fail(c->r, BK_EINVAL, -1, "give %s together with %s", param_names[p],
              param_names[with]);
}

static int check_finite(check_t *c, bk_param_t p) {
  if (!has(c, p) || isfinite(c->v[p]))
    return 0;
  return fail(c->r, BK_EINVAL, p, "%s must be a finite number (got %g)",
              param_names[p], c->v[p]);
}

static int positive(check_t *c, bk_param_t p) {
  if (!has(c, p) || c->v[p] > 0.0)
    return 0;
  return fail(c->r, BK_EINVAL, p, "%s must be > 0 (got %g)", param_names[p],
              c->v[p]);
}

/* The moment form: mean with exactly one of sd and cov. Fills *sd (from cov
 * as cov * |mean|, so cov needs a nonzero mean). */
static int moment_sd(check_t *c, double *sd) {
  if (!has(c, BK_PARAM_SD) && !has(c, BK_PARAM_COV))
    return fail(c->r, BK_EINVAL, -1, "give sd or cov together with mean");
  if (has(c, BK_PARAM_SD) && has(c, BK_PARAM_COV))
    return fail(c->r, BK_EINVAL, BK_PARAM_COV,
                "give either sd or cov, not both");
  double mean = c->v[BK_PARAM_MEAN];
  if (has(c, BK_PARAM_SD)) {
    *sd = c->v[BK_PARAM_SD];
    return positive(c, BK_PARAM_SD);
  }
  int rc = positive(c, BK_PARAM_COV);
  if (rc)
    return rc;
  if (mean == 0.0)
    return fail(c->r, BK_EINVAL, BK_PARAM_COV,
                "cov needs a nonzero mean (got mean 0); give sd instead");
  *sd = c->v[BK_PARAM_COV] * fabs(mean);
  return 0;
}

/* ---------------------------------------------------------------------- */
/* Moment equations solved for a shape parameter                           */
/* ---------------------------------------------------------------------- */

/* lgamma(1 + 2s) - 2 lgamma(1 + s) for |s| < 0.02, from the series
 * lgamma(1 + z) = -gamma z + sum_k>=2 (-1)^k zeta(k) z^k / k (A&S 6.1.33):
 * the difference is sum_k>=2 (-1)^k zeta(k) (2^k - 2)/k s^k, and the terms
 * to k = 13 leave a relative error below 1e-16. Formed from lgamma, the
 * difference (about 1.64 s^2) would cancel to 1e-16/s relative. zeta(k)
 * from memory, confirmed against scipy.special.zeta. */
static double lgamma_diff_small(double s) {
  static const double zeta[14] = {0,
                                  0,
                                  1.6449340668482264,
                                  1.2020569031595943,
                                  1.0823232337111382,
                                  1.0369277551433699,
                                  1.0173430619844491,
                                  1.0083492773819228,
                                  1.0040773561979443,
                                  1.0020083928260822,
                                  1.0009945751278181,
                                  1.0004941886041195,
                                  1.0002460865533080,
                                  1.0001227133475785};
  double sum = 0.0, sk = -s; /* (-s)^k */
  for (int k = 2; k <= 13; k++) {
    sk *= -s;
    sum += zeta[k] * (ldexp(1.0, k) - 2.0) / k * sk;
  }
  return sum;
}

/* cov^2 of a Weibull variable (location 0) as a function of t = 1/k:
 * Gamma(1+2t)/Gamma(1+t)^2 - 1, increasing in t. */
static double weibull_cov2(double t) {
  if (t < 0.02)
    return expm1(lgamma_diff_small(t));
  return expm1(lgamma(1.0 + 2.0 * t) - 2.0 * lgamma(1.0 + t));
}

/* cov^2 of a Frechet variable (location 0), t = 1/alpha in (0, 1/2):
 * Gamma(1-2t)/Gamma(1-t)^2 - 1, increasing in t. */
static double frechet_cov2(double t) {
  if (t < 0.02)
    return expm1(lgamma_diff_small(-t));
  return expm1(lgamma(1.0 - 2.0 * t) - 2.0 * lgamma(1.0 - t));
}

/* Solves f(t) = target for increasing f on (lo, hi) by bisection, to a
 * relative width of 1e-15 (the moment equations are evaluated once per
 * study, so robustness beats speed here). */
static double solve_increasing(double (*f)(double), double target, double lo,
                               double hi) {
  for (int i = 0; i < 400; i++) {
    double mid = lo > 0.0 && hi / lo > 4.0 ? sqrt(lo * hi) : 0.5 * (lo + hi);
    if (f(mid) < target)
      lo = mid;
    else
      hi = mid;
    if (hi - lo <= 1e-15 * hi)
      break;
  }
  return 0.5 * (lo + hi);
}

/* Range of t = 1/shape searched by the moment forms. Below T_MIN (cov
 * under 1e-15) t = cov sqrt(6)/pi, the first term of the expansion, is
 * exact to double precision. */
#define WEIBULL_T_MAX 100.0 /* smallest shape 0.01 */
#define WEIBULL_T_MIN 1e-15
#define FRECHET_T_MIN 1e-15

/* ---------------------------------------------------------------------- */
/* Initialisation per kind                                                 */
/* ---------------------------------------------------------------------- */

static const unsigned moment_bits =
    BIT(BK_PARAM_MEAN) | BIT(BK_PARAM_SD) | BIT(BK_PARAM_COV);

/* Normal: mean with sd or cov. */
static int init_normal(bk_dist_t *d, check_t *c) {
  int rc;
  if (!has(c, BK_PARAM_MEAN))
    return has(c, BK_PARAM_SD) || has(c, BK_PARAM_COV)
               ? need(c, BK_PARAM_MEAN,
                      has(c, BK_PARAM_SD) ? BK_PARAM_SD : BK_PARAM_COV)
               : fail(c->r, BK_EINVAL, -1,
                      "missing parameters for normal; expected %s",
                      usage[c->kind]);
  double sd;
  if ((rc = moment_sd(c, &sd)))
    return rc;
  d->p[0] = c->v[BK_PARAM_MEAN];
  d->p[1] = sd;
  d->mean = d->p[0];
  d->sd = sd;
  return 0;
}

/* Missing everything: name what is expected. */
static int missing(check_t *c) {
  return fail(c->r, BK_EINVAL, -1, "missing parameters for %s; expected %s",
              dist_names[c->kind], usage[c->kind]);
}

/* Checks the moment form when `native` parameters are absent, or the native
 * form otherwise; returns 1 in *by_moments for the moment form. Mixing the
 * two names the first native parameter. */
static int pick_form(check_t *c, unsigned native, const char *native_form,
                     int *by_moments) {
  int m = first_of(c, moment_bits);
  int n = first_of(c, native);
  if (m >= 0 && n >= 0)
    return fail(c->r, BK_EINVAL, n,
                "give either mean with sd or cov, or %s, not both",
                native_form);
  if (m < 0 && n < 0)
    return missing(c);
  *by_moments = m >= 0;
  if (m >= 0 && !has(c, BK_PARAM_MEAN))
    return need(c, BK_PARAM_MEAN, m);
  return 0;
}

static int init_lognormal(bk_dist_t *d, check_t *c) {
  int rc, by_moments;
  if ((rc = pick_form(c, BIT(BK_PARAM_MU) | BIT(BK_PARAM_SIGMA),
                      "mu with sigma", &by_moments)))
    return rc;
  double mu, sigma;
  if (by_moments) {
    double mean = c->v[BK_PARAM_MEAN], sd;
    if (mean <= 0.0)
      return fail(c->r, BK_EINVAL, BK_PARAM_MEAN,
                  "mean must be > 0 for lognormal (got %g)", mean);
    if ((rc = moment_sd(c, &sd)))
      return rc;
    /* sigma^2 = ln(1 + cov^2), mu = ln(mean) - sigma^2/2 (REFERENCES.md). */
    double cov = sd / mean;
    double s2 = log1p(cov * cov);
    sigma = sqrt(s2);
    mu = log(mean) - 0.5 * s2;
    d->mean = mean;
    d->sd = sd;
  } else {
    if ((rc = need(c, BK_PARAM_SIGMA, BK_PARAM_MU)) ||
        (rc = need(c, BK_PARAM_MU, BK_PARAM_SIGMA)) ||
        (rc = positive(c, BK_PARAM_SIGMA)))
      return rc;
    mu = c->v[BK_PARAM_MU];
    sigma = c->v[BK_PARAM_SIGMA];
    d->mean = exp(mu + 0.5 * sigma * sigma);
    d->sd = d->mean * sqrt(expm1(sigma * sigma));
  }
  d->p[0] = mu;
  d->p[1] = sigma;
  return 0;
}

/* Gumbel for largest (sign +1) or smallest (sign -1) values. */
static int init_gumbel(bk_dist_t *d, check_t *c, double sign) {
  int rc, by_moments;
  if ((rc = pick_form(c, BIT(BK_PARAM_LOCATION) | BIT(BK_PARAM_SCALE),
                      "location with scale", &by_moments)))
    return rc;
  double loc, scale;
  if (by_moments) {
    double sd;
    if ((rc = moment_sd(c, &sd)))
      return rc;
    /* scale = sd sqrt(6)/pi, location = mean -+ gamma scale. */
    scale = sd / PI_OVER_SQRT6;
    loc = c->v[BK_PARAM_MEAN] - sign * EULER_GAMMA * scale;
  } else {
    if ((rc = need(c, BK_PARAM_SCALE, BK_PARAM_LOCATION)) ||
        (rc = need(c, BK_PARAM_LOCATION, BK_PARAM_SCALE)) ||
        (rc = positive(c, BK_PARAM_SCALE)))
      return rc;
    loc = c->v[BK_PARAM_LOCATION];
    scale = c->v[BK_PARAM_SCALE];
  }
  d->p[0] = loc;
  d->p[1] = scale;
  d->mean = loc + sign * EULER_GAMMA * scale;
  d->sd = PI_OVER_SQRT6 * scale;
  return 0;
}

/* Weibull (frechet = 0) or Frechet (frechet = 1): shape, scale, optional
 * location, or by moments (with optional location) solving the shape from
 * cov = sd / (mean - location). */
static int init_weibull_frechet(bk_dist_t *d, check_t *c, int frechet) {
  int rc, by_moments;
  if ((rc = pick_form(c, BIT(BK_PARAM_SHAPE) | BIT(BK_PARAM_SCALE),
                      "shape with scale", &by_moments)))
    return rc;
  double loc = has(c, BK_PARAM_LOCATION) ? c->v[BK_PARAM_LOCATION] : 0.0;
  const char *name = dist_names[c->kind];
  double shape, scale;
  if (by_moments) {
    double mean = c->v[BK_PARAM_MEAN], sd;
    if (!(mean > loc)) {
      if (has(c, BK_PARAM_LOCATION))
        return fail(c->r, BK_EINVAL, BK_PARAM_MEAN,
                    "mean must be > location for %s (got %g <= %g)", name, mean,
                    loc);
      return fail(c->r, BK_EINVAL, BK_PARAM_MEAN,
                  "mean must be > 0 for %s (got %g)", name, mean);
    }
    if ((rc = moment_sd(c, &sd)))
      return rc;
    double cov = sd / (mean - loc);
    double t;
    if (!frechet) {
      if (cov * cov >= weibull_cov2(WEIBULL_T_MAX))
        return fail(c->r, BK_ERANGE,
                    has(c, BK_PARAM_SD) ? BK_PARAM_SD : BK_PARAM_COV,
                    "sd/(mean - location) must be < %.3g for weibull (got "
                    "%g; the shape would be below 0.01)",
                    sqrt(weibull_cov2(WEIBULL_T_MAX)), cov);
      t = cov < 1e-15 ? cov / PI_OVER_SQRT6
                      : solve_increasing(weibull_cov2, cov * cov, WEIBULL_T_MIN,
                                         WEIBULL_T_MAX);
      shape = 1.0 / t;
      scale = (mean - loc) / tgamma(1.0 + t);
    } else {
      /* Any cov > 0 is reached for shape in (2, inf). */
      t = cov < 1e-15
              ? cov / PI_OVER_SQRT6
              : solve_increasing(frechet_cov2, cov * cov, FRECHET_T_MIN, 0.5);
      if (!(t < 0.5))
        return fail(c->r, BK_ERANGE,
                    has(c, BK_PARAM_SD) ? BK_PARAM_SD : BK_PARAM_COV,
                    "spread too large for frechet (got sd/(mean - location) "
                    "= %g)",
                    cov);
      shape = 1.0 / t;
      scale = (mean - loc) / tgamma(1.0 - t);
    }
  } else {
    if ((rc = need(c, BK_PARAM_SCALE, BK_PARAM_SHAPE)) ||
        (rc = need(c, BK_PARAM_SHAPE, BK_PARAM_SCALE)) ||
        (rc = positive(c, BK_PARAM_SHAPE)) ||
        (rc = positive(c, BK_PARAM_SCALE)))
      return rc;
    shape = c->v[BK_PARAM_SHAPE];
    scale = c->v[BK_PARAM_SCALE];
  }
  d->p[0] = shape;
  d->p[1] = scale;
  d->p[2] = loc;
  double t = 1.0 / shape;
  if (!frechet) {
    double g1 = tgamma(1.0 + t);
    d->mean = loc + scale * g1;
    d->sd = scale * g1 * sqrt(weibull_cov2(t));
  } else {
    /* Mean exists for shape > 1, variance for shape > 2. */
    double g1 = shape > 1.0 ? tgamma(1.0 - t) : INFINITY;
    d->mean = loc + scale * g1;
    d->sd = shape > 2.0 ? scale * g1 * sqrt(frechet_cov2(t)) : INFINITY;
  }
  return 0;
}

static int init_gamma(bk_dist_t *d, check_t *c) {
  int rc, by_moments;
  if ((rc = pick_form(
           c, BIT(BK_PARAM_SHAPE) | BIT(BK_PARAM_SCALE) | BIT(BK_PARAM_RATE),
           "shape with scale or rate", &by_moments)))
    return rc;
  double shape, scale;
  if (by_moments) {
    double mean = c->v[BK_PARAM_MEAN], sd;
    if (mean <= 0.0)
      return fail(c->r, BK_EINVAL, BK_PARAM_MEAN,
                  "mean must be > 0 for gamma (got %g)", mean);
    if ((rc = moment_sd(c, &sd)))
      return rc;
    double cov = sd / mean;
    shape = 1.0 / (cov * cov);
    scale = sd * cov; /* sd^2 / mean */
  } else {
    if (has(c, BK_PARAM_SCALE) && has(c, BK_PARAM_RATE))
      return fail(c->r, BK_EINVAL, BK_PARAM_RATE,
                  "give either scale or rate, not both");
    if (!has(c, BK_PARAM_SHAPE))
      return need(c, BK_PARAM_SHAPE,
                  has(c, BK_PARAM_SCALE) ? BK_PARAM_SCALE : BK_PARAM_RATE);
    if (!has(c, BK_PARAM_SCALE) && !has(c, BK_PARAM_RATE))
      return fail(c->r, BK_EINVAL, -1,
                  "give scale or rate together with shape");
    if ((rc = positive(c, BK_PARAM_SHAPE)) ||
        (rc = positive(c, BK_PARAM_SCALE)) || (rc = positive(c, BK_PARAM_RATE)))
      return rc;
    shape = c->v[BK_PARAM_SHAPE];
    scale = has(c, BK_PARAM_SCALE) ? c->v[BK_PARAM_SCALE]
                                   : 1.0 / c->v[BK_PARAM_RATE];
  }
  d->p[0] = shape;
  d->p[1] = scale;
  d->mean = shape * scale;
  d->sd = sqrt(shape) * scale;
  return 0;
}

/* Exponential: rate with optional location; or mean alone (location 0),
 * mean with location, or mean with sd or cov (location = mean - sd). */
static int init_exponential(bk_dist_t *d, check_t *c) {
  int rc, by_moments;
  if ((rc = pick_form(c, BIT(BK_PARAM_RATE), "rate", &by_moments)))
    return rc;
  double rate, loc;
  if (by_moments) {
    double mean = c->v[BK_PARAM_MEAN];
    if (has(c, BK_PARAM_SD) || has(c, BK_PARAM_COV)) {
      if (has(c, BK_PARAM_LOCATION))
        return fail(c->r, BK_EINVAL, BK_PARAM_LOCATION,
                    "location does not go with mean and %s for exponential "
                    "(the location is mean - sd); expected %s",
                    has(c, BK_PARAM_SD) ? "sd" : "cov", usage[c->kind]);
      double sd;
      if ((rc = moment_sd(c, &sd)))
        return rc;
      rate = 1.0 / sd;
      loc = mean - sd;
    } else {
      loc = has(c, BK_PARAM_LOCATION) ? c->v[BK_PARAM_LOCATION] : 0.0;
      if (!(mean > loc)) {
        if (has(c, BK_PARAM_LOCATION))
          return fail(c->r, BK_EINVAL, BK_PARAM_MEAN,
                      "mean must be > location for exponential (got %g <= "
                      "%g)",
                      mean, loc);
        return fail(c->r, BK_EINVAL, BK_PARAM_MEAN,
                    "mean must be > 0 for exponential (got %g)", mean);
      }
      rate = 1.0 / (mean - loc);
    }
  } else {
    if ((rc = positive(c, BK_PARAM_RATE)))
      return rc;
    rate = c->v[BK_PARAM_RATE];
    loc = has(c, BK_PARAM_LOCATION) ? c->v[BK_PARAM_LOCATION] : 0.0;
  }
  d->p[0] = rate;
  d->p[1] = loc;
  d->mean = loc + 1.0 / rate;
  d->sd = 1.0 / rate;
  return 0;
}

static int lower_below_upper(check_t *c, double lo, double hi) {
  if (lo < hi)
    return 0;
  return fail(c->r, BK_EINVAL, BK_PARAM_UPPER,
              "lower must be < upper (got %g >= %g)", lo, hi);
}

static int init_uniform(bk_dist_t *d, check_t *c) {
  int rc, by_moments;
  if ((rc = pick_form(c, BIT(BK_PARAM_LOWER) | BIT(BK_PARAM_UPPER),
                      "lower with upper", &by_moments)))
    return rc;
  double lo, hi;
  if (by_moments) {
    double sd;
    if ((rc = moment_sd(c, &sd)))
      return rc;
    lo = c->v[BK_PARAM_MEAN] - SQRT3 * sd;
    hi = c->v[BK_PARAM_MEAN] + SQRT3 * sd;
  } else {
    if ((rc = need(c, BK_PARAM_UPPER, BK_PARAM_LOWER)) ||
        (rc = need(c, BK_PARAM_LOWER, BK_PARAM_UPPER)))
      return rc;
    lo = c->v[BK_PARAM_LOWER];
    hi = c->v[BK_PARAM_UPPER];
    if ((rc = lower_below_upper(c, lo, hi)))
      return rc;
  }
  d->p[0] = lo;
  d->p[1] = hi;
  d->mean = 0.5 * (lo + hi);
  d->sd = (hi - lo) / SQRT12;
  return 0;
}

static int init_triangular(bk_dist_t *d, check_t *c) {
  int rc;
  if (c->has == 0)
    return missing(c);
  for (int p = 0; p < 3; p++) {
    bk_param_t want[3] = {BK_PARAM_LOWER, BK_PARAM_MODE, BK_PARAM_UPPER};
    if (!has(c, want[p]))
      return fail(c->r, BK_EINVAL, -1,
                  "give lower, mode and upper for triangular (%s is "
                  "missing)",
                  param_names[want[p]]);
  }
  double lo = c->v[BK_PARAM_LOWER], mode = c->v[BK_PARAM_MODE],
         hi = c->v[BK_PARAM_UPPER];
  if ((rc = lower_below_upper(c, lo, hi)))
    return rc;
  if (!(mode >= lo && mode <= hi))
    return fail(c->r, BK_EINVAL, BK_PARAM_MODE,
                "mode must be within [lower, upper] (got %g outside [%g, "
                "%g])",
                mode, lo, hi);
  d->p[0] = lo;
  d->p[1] = mode;
  d->p[2] = hi;
  d->mean = (lo + mode + hi) / 3.0;
  /* Variance (a^2 + b^2 + c^2 - ab - ac - bc)/18, written as a sum of
   * squares so that it cannot go negative by rounding. */
  double v = ((hi - lo) * (hi - lo) + (mode - lo) * (mode - lo) +
              (hi - mode) * (hi - mode)) /
             36.0;
  d->sd = sqrt(v);
  return 0;
}

static int init_beta(bk_dist_t *d, check_t *c) {
  int rc, by_moments;
  if ((rc = pick_form(c, BIT(BK_PARAM_ALPHA) | BIT(BK_PARAM_BETA),
                      "alpha with beta", &by_moments)))
    return rc;
  double lo = has(c, BK_PARAM_LOWER) ? c->v[BK_PARAM_LOWER] : 0.0;
  double hi = has(c, BK_PARAM_UPPER) ? c->v[BK_PARAM_UPPER] : 1.0;
  if ((rc = lower_below_upper(c, lo, hi)))
    return rc;
  double a, b;
  if (by_moments) {
    double mean = c->v[BK_PARAM_MEAN], sd;
    if (!(mean > lo && mean < hi))
      return fail(c->r, BK_EINVAL, BK_PARAM_MEAN,
                  "mean must be within (lower, upper) for beta (got %g "
                  "outside (%g, %g))",
                  mean, lo, hi);
    if ((rc = moment_sd(c, &sd)))
      return rc;
    double w = hi - lo;
    double m = (mean - lo) / w, s = sd / w;
    double smax = sqrt(m * (1.0 - m));
    if (!(s < smax))
      return fail(c->r, BK_EINVAL,
                  has(c, BK_PARAM_SD) ? BK_PARAM_SD : BK_PARAM_COV,
                  "sd must be < %g for beta with mean %g on [%g, %g] (got "
                  "%g)",
                  smax * w, mean, lo, hi, sd);
    double nu = m * (1.0 - m) / (s * s) - 1.0;
    a = m * nu;
    b = (1.0 - m) * nu;
  } else {
    if ((rc = need(c, BK_PARAM_BETA, BK_PARAM_ALPHA)) ||
        (rc = need(c, BK_PARAM_ALPHA, BK_PARAM_BETA)) ||
        (rc = positive(c, BK_PARAM_ALPHA)) || (rc = positive(c, BK_PARAM_BETA)))
      return rc;
    a = c->v[BK_PARAM_ALPHA];
    b = c->v[BK_PARAM_BETA];
  }
  d->p[0] = a;
  d->p[1] = b;
  d->p[2] = lo;
  d->p[3] = hi;
  double w = hi - lo, ab = a + b;
  d->mean = lo + w * (a / ab);
  d->sd = w * sqrt(a * b / (ab + 1.0)) / ab;
  return 0;
}

static int init_truncated_normal(bk_dist_t *d, check_t *c) {
  int rc;
  int m = first_of(c, moment_bits);
  if (m >= 0)
    return fail(c->r, BK_EINVAL, m,
                "truncated-normal takes mu and sigma of the parent normal, "
                "not %s (the truncated variable has other moments); "
                "expected %s",
                param_names[m], usage[c->kind]);
  if (c->has == 0)
    return missing(c);
  if (!has(c, BK_PARAM_MU))
    return fail(c->r, BK_EINVAL, -1,
                "give mu and sigma of the parent normal for "
                "truncated-normal (mu is missing)");
  if (!has(c, BK_PARAM_SIGMA))
    return fail(c->r, BK_EINVAL, -1,
                "give mu and sigma of the parent normal for "
                "truncated-normal (sigma is missing)");
  if ((rc = positive(c, BK_PARAM_SIGMA)))
    return rc;
  if (!has(c, BK_PARAM_LOWER) && !has(c, BK_PARAM_UPPER))
    return fail(c->r, BK_EINVAL, -1,
                "give lower and/or upper for truncated-normal (without "
                "bounds use normal)");
  double mu = c->v[BK_PARAM_MU], sigma = c->v[BK_PARAM_SIGMA];
  double lo = has(c, BK_PARAM_LOWER) ? c->v[BK_PARAM_LOWER] : -INFINITY;
  double hi = has(c, BK_PARAM_UPPER) ? c->v[BK_PARAM_UPPER] : INFINITY;
  if ((rc = lower_below_upper(c, lo, hi)))
    return rc;
  double a = (lo - mu) / sigma, b = (hi - mu) / sigma, s = 1.0;
  if (a > 0.0) {
    /* Mirror, so the working interval lies where Phi is small. */
    double t = a;
    a = -b;
    b = -t;
    s = -1.0;
  }
  double pa = bk_norm_cdf(a);
  double z;
  if (b - a <= 0.5)
    z = norm_mass_narrow(a, b);
  else if (b <= 0.0)
    z = bk_norm_cdf(b) - pa;
  else
    z = (0.5 - pa) + (0.5 - bk_norm_sf(b));
  if (!(z > 1e-300))
    return fail(c->r, BK_ERANGE, s > 0 ? BK_PARAM_UPPER : BK_PARAM_LOWER,
                "[lower, upper] = [%g, %g] has probability below 1e-300 "
                "under the parent normal (mu %g, sigma %g)",
                lo, hi, mu, sigma);
  d->p[0] = mu;
  d->p[1] = s * sigma;
  d->p[2] = a;
  d->p[3] = b;
  d->p[4] = pa;
  d->p[5] = z;
  /* Moments in working coordinates: mean (phi(a) - phi(b))/Z, variance
   * 1 + (a phi(a) - b phi(b))/Z - mean^2 (Johnson, Kotz & Balakrishnan,
   * Continuous Univariate Distributions 1, 1994, section 10.1). */
  double fa = bk_norm_pdf(a), fb = bk_norm_pdf(b);
  double afa = isinf(a) ? 0.0 : a * fa, bfb = isinf(b) ? 0.0 : b * fb;
  double mw = (fa - fb) / z;
  double vw = 1.0 + (afa - bfb) / z - mw * mw;
  d->mean = mu + s * sigma * mw;
  d->sd = sigma * sqrt(fmax(vw, 0.0));
  return 0;
}

static int init_constant(bk_dist_t *d, check_t *c) {
  if (!has(c, BK_PARAM_VALUE))
    return missing(c);
  d->p[0] = c->v[BK_PARAM_VALUE];
  d->mean = d->p[0];
  d->sd = 0.0;
  return 0;
}

/* Checks the spec of `kind` and fills `d`; see dist.h. Order of checks:
 * parameters foreign to the kind, finiteness, then the form and the values
 * per kind, so the first problem a reader would fix is the one named. */
int bk_dist_init(bk_dist_t *d, bk_dist_kind_t kind, const bk_dist_spec_t *spec,
                 char *why, size_t whycap, int *bad_param) {
  report_t r = {why, whycap, bad_param};
  if (why != NULL && whycap > 0)
    why[0] = '\0';
  if (bad_param != NULL)
    *bad_param = -1;
  if ((int)kind < 0 || kind >= BK_DIST__COUNT)
    return fail(&r, BK_EINVAL, -1, "unknown distribution kind %d", (int)kind);
  check_t c = {kind, spec->has & (BIT(BK_PARAM__COUNT) - 1), spec->v, &r};
  if (kind == BK_DIST_TRUNCATED_NORMAL) {
    int m = first_of(&c, moment_bits);
    if (m >= 0)
      return init_truncated_normal(d, &c); /* its own message */
  }
  int foreign = first_of(&c, ~known[kind]);
  if (foreign >= 0)
    return fail(&r, BK_EINVAL, foreign,
                "unknown parameter '%s' for %s; expected %s",
                param_names[foreign], dist_names[kind], usage[kind]);
  for (int p = 0; p < BK_PARAM__COUNT; p++) {
    int rc = check_finite(&c, p);
    if (rc)
      return rc;
  }
  memset(d, 0, sizeof *d);
  d->kind = kind;
  int rc;
  switch (kind) {
  case BK_DIST_NORMAL:
    rc = init_normal(d, &c);
    break;
  case BK_DIST_LOGNORMAL:
    rc = init_lognormal(d, &c);
    break;
  case BK_DIST_GUMBEL:
    rc = init_gumbel(d, &c, 1.0);
    break;
  case BK_DIST_GUMBEL_MIN:
    rc = init_gumbel(d, &c, -1.0);
    break;
  case BK_DIST_WEIBULL:
    rc = init_weibull_frechet(d, &c, 0);
    break;
  case BK_DIST_FRECHET:
    rc = init_weibull_frechet(d, &c, 1);
    break;
  case BK_DIST_GAMMA:
    rc = init_gamma(d, &c);
    break;
  case BK_DIST_EXPONENTIAL:
    rc = init_exponential(d, &c);
    break;
  case BK_DIST_UNIFORM:
    rc = init_uniform(d, &c);
    break;
  case BK_DIST_TRIANGULAR:
    rc = init_triangular(d, &c);
    break;
  case BK_DIST_BETA:
    rc = init_beta(d, &c);
    break;
  case BK_DIST_TRUNCATED_NORMAL:
    rc = init_truncated_normal(d, &c);
    break;
  case BK_DIST_CONSTANT:
  default:
    rc = init_constant(d, &c);
    break;
  }
  return rc;
}

/* ---------------------------------------------------------------------- */
/* Evaluation                                                              */
/* ---------------------------------------------------------------------- */

/* Truncated normal in working coordinates: cdf and sf of z on [a, b]. */
static void tn_work_fs(const bk_dist_t *d, double z, double *f, double *s) {
  double a = d->p[2], b = d->p[3], pa = d->p[4], zm = d->p[5];
  if (z <= a) {
    *f = 0.0;
    *s = 1.0;
    return;
  }
  if (z >= b) {
    *f = 1.0;
    *s = 0.0;
    return;
  }
  /* Near a finite bound, by quadrature (see norm_mass_narrow). */
  int near_a = z - a <= 0.5, near_b = b - z <= 0.5;
  if (near_a || near_b) {
    if (near_a)
      *f = norm_mass_narrow(a, z) / zm;
    if (near_b)
      *s = norm_mass_narrow(z, b) / zm;
    if (!near_a)
      *f = 1.0 - *s;
    if (!near_b)
      *s = 1.0 - *f;
    return;
  }
  if (z <= 0.0) {
    *f = (bk_norm_cdf(z) - pa) / zm;
    *s = b <= 0.0 ? (bk_norm_cdf(b) - bk_norm_cdf(z)) / zm
                  : ((0.5 - bk_norm_cdf(z)) + (0.5 - bk_norm_sf(b))) / zm;
  } else {
    /* 0 < z < b, so a <= 0 < b. */
    *f = ((0.5 - pa) + (0.5 - bk_norm_sf(z))) / zm;
    *s = (bk_norm_sf(z) - bk_norm_sf(b)) / zm;
  }
}

/* Working z for working probabilities w and wc = 1 - w (both exact). */
static double tn_work_icdf(const bk_dist_t *d, double w, double wc) {
  double a = d->p[2], b = d->p[3], pa = d->p[4], zm = d->p[5];
  double z;
  if (w <= 0.5 || b <= 0.0)
    z = bk_norm_icdf(pa + w * zm);
  else
    z = -bk_norm_icdf(bk_norm_sf(b) + wc * zm);
  return fmin(fmax(z, a), b);
}

/* Cdf and survival function together, each computed directly. */
static void dist_fs(const bk_dist_t *d, double x, double *f, double *s) {
  const double *p = d->p;
  double z;
  switch (d->kind) {
  case BK_DIST_NORMAL:
    z = (x - p[0]) / p[1];
    *f = bk_norm_cdf(z);
    *s = bk_norm_sf(z);
    return;
  case BK_DIST_LOGNORMAL:
    if (x <= 0.0) {
      *f = 0.0;
      *s = 1.0;
      return;
    }
    z = (log(x) - p[0]) / p[1];
    *f = bk_norm_cdf(z);
    *s = bk_norm_sf(z);
    return;
  case BK_DIST_GUMBEL: {
    double e = exp(-(x - p[0]) / p[1]);
    *f = exp(-e);
    *s = -expm1(-e);
    return;
  }
  case BK_DIST_GUMBEL_MIN: {
    double e = exp((x - p[0]) / p[1]);
    *f = -expm1(-e);
    *s = exp(-e);
    return;
  }
  case BK_DIST_WEIBULL: {
    if (x <= p[2]) {
      *f = 0.0;
      *s = 1.0;
      return;
    }
    double e = pow((x - p[2]) / p[1], p[0]);
    *f = -expm1(-e);
    *s = exp(-e);
    return;
  }
  case BK_DIST_FRECHET: {
    if (x <= p[2]) {
      *f = 0.0;
      *s = 1.0;
      return;
    }
    double e = pow((x - p[2]) / p[1], -p[0]);
    *f = exp(-e);
    *s = -expm1(-e);
    return;
  }
  case BK_DIST_GAMMA:
    if (x <= 0.0) {
      *f = 0.0;
      *s = 1.0;
      return;
    }
    *f = bk_gamma_p(p[0], x / p[1]);
    *s = bk_gamma_q(p[0], x / p[1]);
    return;
  case BK_DIST_EXPONENTIAL:
    if (x <= p[1]) {
      *f = 0.0;
      *s = 1.0;
      return;
    }
    *f = -expm1(-p[0] * (x - p[1]));
    *s = exp(-p[0] * (x - p[1]));
    return;
  case BK_DIST_UNIFORM:
    if (x <= p[0]) {
      *f = 0.0;
      *s = 1.0;
    } else if (x >= p[1]) {
      *f = 1.0;
      *s = 0.0;
    } else {
      *f = (x - p[0]) / (p[1] - p[0]);
      *s = (p[1] - x) / (p[1] - p[0]);
    }
    return;
  case BK_DIST_TRIANGULAR: {
    double lo = p[0], mode = p[1], hi = p[2];
    if (x <= lo) {
      *f = 0.0;
      *s = 1.0;
    } else if (x >= hi) {
      *f = 1.0;
      *s = 0.0;
    } else if (x <= mode) {
      *f = (x - lo) * (x - lo) / ((hi - lo) * (mode - lo));
      *s = 1.0 - *f;
    } else {
      *s = (hi - x) * (hi - x) / ((hi - lo) * (hi - mode));
      *f = 1.0 - *s;
    }
    return;
  }
  case BK_DIST_BETA: {
    double lo = p[2], hi = p[3];
    if (x <= lo) {
      *f = 0.0;
      *s = 1.0;
    } else if (x >= hi) {
      *f = 1.0;
      *s = 0.0;
    } else {
      double w = hi - lo;
      double t = (x - lo) / w, tc = (hi - x) / w;
      /* I_t(a, b) and 1 - I_t(a, b) = I_(1-t)(b, a), each from its own
       * side of the support. */
      if (t <= 0.5) {
        *f = bk_beta_inc(p[0], p[1], t);
        *s = 1.0 - *f;
        if (*f > 0.5)
          *s = bk_beta_inc(p[1], p[0], tc);
      } else {
        *s = bk_beta_inc(p[1], p[0], tc);
        *f = 1.0 - *s;
        if (*s > 0.5)
          *f = bk_beta_inc(p[0], p[1], t);
      }
    }
    return;
  }
  case BK_DIST_TRUNCATED_NORMAL: {
    double fw, sw;
    tn_work_fs(d, (x - p[0]) / p[1], &fw, &sw);
    if (p[1] > 0.0) {
      *f = fw;
      *s = sw;
    } else {
      *f = sw;
      *s = fw;
    }
    return;
  }
  case BK_DIST_CONSTANT:
  default:
    *f = x < p[0] ? 0.0 : 1.0;
    *s = 1.0 - *f;
    return;
  }
}

double bk_dist_cdf(const bk_dist_t *d, double x) {
  if (isnan(x))
    return x;
  double f, s;
  dist_fs(d, x, &f, &s);
  return f;
}

double bk_dist_sf(const bk_dist_t *d, double x) {
  if (isnan(x))
    return x;
  double f, s;
  dist_fs(d, x, &f, &s);
  return s;
}

double bk_dist_pdf(const bk_dist_t *d, double x) {
  const double *p = d->p;
  if (isnan(x))
    return x;
  switch (d->kind) {
  case BK_DIST_NORMAL:
    return bk_norm_pdf((x - p[0]) / p[1]) / p[1];
  case BK_DIST_LOGNORMAL:
    if (x <= 0.0)
      return 0.0;
    return bk_norm_pdf((log(x) - p[0]) / p[1]) / (p[1] * x);
  case BK_DIST_GUMBEL: {
    double z = (x - p[0]) / p[1];
    return exp(-z - exp(-z)) / p[1];
  }
  case BK_DIST_GUMBEL_MIN: {
    double z = (x - p[0]) / p[1];
    return exp(z - exp(z)) / p[1];
  }
  case BK_DIST_WEIBULL: {
    if (x < p[2])
      return 0.0;
    double z = (x - p[2]) / p[1], k = p[0];
    if (z == 0.0)
      return k < 1.0 ? INFINITY : k == 1.0 ? 1.0 / p[1] : 0.0;
    double e = pow(z, k);
    return k / p[1] * (e / z) * exp(-e);
  }
  case BK_DIST_FRECHET: {
    if (x <= p[2])
      return 0.0;
    double z = (x - p[2]) / p[1], a = p[0];
    double e = pow(z, -a);
    return a / p[1] * (e / z) * exp(-e);
  }
  case BK_DIST_GAMMA: {
    double k = p[0], th = p[1];
    if (x < 0.0)
      return 0.0;
    if (x == 0.0)
      return k < 1.0 ? INFINITY : k == 1.0 ? 1.0 / th : 0.0;
    return bk_gamma_density(k, x / th) / th;
  }
  case BK_DIST_EXPONENTIAL:
    if (x < p[1])
      return 0.0;
    return p[0] * exp(-p[0] * (x - p[1]));
  case BK_DIST_UNIFORM:
    if (x < p[0] || x > p[1])
      return 0.0;
    return 1.0 / (p[1] - p[0]);
  case BK_DIST_TRIANGULAR: {
    double lo = p[0], mode = p[1], hi = p[2];
    if (x < lo || x > hi)
      return 0.0;
    if (x < mode)
      return 2.0 * (x - lo) / ((hi - lo) * (mode - lo));
    if (x > mode)
      return 2.0 * (hi - x) / ((hi - lo) * (hi - mode));
    return 2.0 / (hi - lo);
  }
  case BK_DIST_BETA: {
    double a = p[0], b = p[1], lo = p[2], hi = p[3], w = hi - lo;
    if (x < lo || x > hi)
      return 0.0;
    double t = (x - lo) / w, tc = (hi - x) / w;
    if (t == 0.0)
      return a < 1.0 ? INFINITY : a == 1.0 ? b / w : 0.0;
    if (tc == 0.0)
      return b < 1.0 ? INFINITY : b == 1.0 ? a / w : 0.0;
    return bk_beta_density(a, b, t, tc) / w;
  }
  case BK_DIST_TRUNCATED_NORMAL: {
    double z = (x - p[0]) / p[1];
    if (z < p[2] || z > p[3])
      return 0.0;
    return bk_norm_pdf(z) / (fabs(p[1]) * p[5]);
  }
  case BK_DIST_CONSTANT:
  default:
    return x == p[0] ? INFINITY : 0.0;
  }
}

/* Inverse cdf from both probabilities, F = pf and 1 - F = ps, each exact;
 * the small one drives the tail formula. Shared by bk_dist_icdf and
 * bk_dist_from_u. */
static double dist_inv(const bk_dist_t *d, double pf, double ps) {
  const double *p = d->p;
  switch (d->kind) {
  case BK_DIST_NORMAL:
    return p[0] + p[1] * (pf <= 0.5 ? bk_norm_icdf(pf) : -bk_norm_icdf(ps));
  case BK_DIST_LOGNORMAL:
    return exp(p[0] +
               p[1] * (pf <= 0.5 ? bk_norm_icdf(pf) : -bk_norm_icdf(ps)));
  case BK_DIST_GUMBEL:
    /* F = exp(-exp(-z)): z = -log(-log F). */
    return p[0] - p[1] * log(pf <= 0.5 ? -log(pf) : -log1p(-ps));
  case BK_DIST_GUMBEL_MIN:
    /* S = exp(-exp(z)): z = log(-log S). */
    return p[0] + p[1] * log(ps <= 0.5 ? -log(ps) : -log1p(-pf));
  case BK_DIST_WEIBULL:
    return p[2] + p[1] * pow(ps <= 0.5 ? -log(ps) : -log1p(-pf), 1.0 / p[0]);
  case BK_DIST_FRECHET:
    return p[2] + p[1] * pow(pf <= 0.5 ? -log(pf) : -log1p(-ps), -1.0 / p[0]);
  case BK_DIST_GAMMA:
    return p[1] *
           (pf <= 0.5 ? bk_gamma_p_inv(p[0], pf) : bk_gamma_q_inv(p[0], ps));
  case BK_DIST_EXPONENTIAL:
    return p[1] + (ps <= 0.5 ? -log(ps) : -log1p(-pf)) / p[0];
  case BK_DIST_UNIFORM:
    return pf <= 0.5 ? p[0] + (p[1] - p[0]) * pf : p[1] - (p[1] - p[0]) * ps;
  case BK_DIST_TRIANGULAR: {
    double lo = p[0], mode = p[1], hi = p[2];
    double fm = (mode - lo) / (hi - lo);
    if (pf <= fm)
      return lo + sqrt(pf * (hi - lo) * (mode - lo));
    return hi - sqrt(ps * (hi - lo) * (hi - mode));
  }
  case BK_DIST_BETA: {
    double w = p[3] - p[2];
    if (pf <= 0.5)
      return p[2] + w * bk_beta_inc_inv(p[0], p[1], pf);
    return p[3] - w * bk_beta_inc_inv(p[1], p[0], ps);
  }
  case BK_DIST_TRUNCATED_NORMAL:
    if (p[1] > 0.0)
      return p[0] + p[1] * tn_work_icdf(d, pf, ps);
    return p[0] + p[1] * tn_work_icdf(d, ps, pf);
  case BK_DIST_CONSTANT:
  default:
    return p[0];
  }
}

double bk_dist_icdf(const bk_dist_t *d, double p) {
  if (isnan(p) || p < 0.0 || p > 1.0)
    return NAN;
  return dist_inv(d, p, 1.0 - p);
}

double bk_dist_median(const bk_dist_t *d) {
  return dist_inv(d, 0.5, 0.5);
}

/* The hot path of sampling: the common kinds map u in closed form; the
 * extreme-value kinds take log Phi of the side where it is small, so that
 * e.g. a Gumbel variable at u = 8 keeps all digits of 1 - F = Phi(-8). */
double bk_dist_from_u(const bk_dist_t *d, double u) {
  const double *p = d->p;
  switch (d->kind) {
  case BK_DIST_NORMAL:
    return p[0] + p[1] * u;
  case BK_DIST_LOGNORMAL:
    return exp(p[0] + p[1] * u);
  case BK_DIST_GUMBEL:
    return p[0] - p[1] * log_neg_logcdf(u);
  case BK_DIST_GUMBEL_MIN:
    return p[0] + p[1] * log_neg_logcdf(-u);
  case BK_DIST_WEIBULL:
    if (u < -30.0)
      return p[2] + p[1] * exp(log_neg_logcdf(-u) / p[0]);
    return p[2] + p[1] * pow(-norm_logcdf(-u), 1.0 / p[0]);
  case BK_DIST_FRECHET:
    if (u > 30.0)
      return p[2] + p[1] * exp(-log_neg_logcdf(u) / p[0]);
    return p[2] + p[1] * pow(-norm_logcdf(u), -1.0 / p[0]);
  case BK_DIST_EXPONENTIAL:
    return p[1] + neg_logcdf(-u) / p[0];
  case BK_DIST_CONSTANT:
    return p[0];
  default:
    if (isnan(u))
      return u;
    return dist_inv(d, bk_norm_cdf(u), bk_norm_sf(u));
  }
}

double bk_dist_to_u(const bk_dist_t *d, double x) {
  const double *p = d->p;
  if (isnan(x))
    return x;
  switch (d->kind) {
  case BK_DIST_NORMAL:
    return (x - p[0]) / p[1];
  case BK_DIST_LOGNORMAL:
    return x > 0.0 ? (log(x) - p[0]) / p[1] : -INFINITY;
  case BK_DIST_CONSTANT:
    return 0.0;
  default: {
    double f, s;
    dist_fs(d, x, &f, &s);
    return u_from_fs(f, s);
  }
  }
}
