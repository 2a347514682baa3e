/*
 * Special functions for the distributions and the estimators: the standard
 * normal pdf, cdf and inverse, the regularized incomplete gamma and beta
 * functions with their inverses, and the Student t distribution built on the
 * incomplete beta function.
 *
 * Accuracy (checked in tests/test_special.c against scipy, GSL and exact
 * sums): normal cdf within 2e-15 relative down to Phi(-37.5), its inverse
 * within a few ulp from 1e-300 to 1 - 1e-16; incomplete gamma and beta
 * within about 1e-13 relative, also for parameters up to 1e6..1e8 (the
 * upper gamma tail Q loses to about 2e-13 for shapes near 1e-3); the
 * inverses to a few ulp of the root of these.
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/special.h"

#include <float.h>
#include <math.h>

#define LN_SQRT_2PI  0.91893853320467274178 /* log(sqrt(2 pi)) */
#define INV_SQRT_2PI 0.39894228040143267794 /* 1/sqrt(2 pi) */
/* 1/sqrt(2) split into the nearest double and the remainder, so that x/sqrt2
 * can be formed with an error far below one ulp. */
#define SQRT1_2_HI 0.70710678118654757274
#define SQRT1_2_LO (-4.8336466567264567e-17)

/* ---------------------------------------------------------------------- */
/* Standard normal                                                         */
/* ---------------------------------------------------------------------- */

/* exp(-x*x/2) with the square formed exactly: x = h + (x - h) where h has at
 * most 10 significant bits, so h*h is exact and the remainder small (the
 * splitting of W. J. Cody's normal integral, also used in AS 66 variants).
 * Without it the rounding of x*x costs up to 1e-13 relative at x = 38. */
static double exp_half_sq(double x) {
  double h = trunc(x * 16.0) / 16.0;
  double del = (x - h) * (x + h);
  return exp(-0.5 * h * h) * exp(-0.5 * del);
}

double bk_norm_pdf(double x) {
  if (isnan(x))
    return x;
  if (fabs(x) > 40.0)
    return 0.0;
  return INV_SQRT_2PI * exp_half_sq(fabs(x));
}

/* Phi(-t) for t >= 0 as erfc(t/sqrt2)/2. The argument t/sqrt2 is rounded;
 * for large t the relative error of erfc grows as 2 z^2 times that rounding,
 * so the exact remainder e (t/sqrt2 = z + e) is folded back in to first
 * order: erfc(z + e) = erfc(z) (1 - e r) with r = 2/sqrt(pi) exp(-z^2) /
 * erfc(z). Since e r is below 1e-16 z^2 only a rough r is needed: the
 * bounds on Mills' ratio (A&S 7.1.13) put r between z + sqrt(z^2 + 4/pi)
 * and z + sqrt(z^2 + 2); the latter is within 10% for all z and exact as
 * z grows, leaving an error below 0.2 ulp and saving an exp. */
static double norm_lower_tail(double t) {
  double z = t * SQRT1_2_HI;
  double e = fma(t, SQRT1_2_HI, -z) + t * SQRT1_2_LO;
  double q = 0.5 * erfc(z);
  if (q == 0.0)
    return 0.0; /* t beyond 38.5, or infinite (where e is NaN) */
  double r = z + sqrt(z * z + 2.0);
  return q - q * (e * r);
}

double bk_norm_cdf(double x) {
  if (isnan(x))
    return x;
  if (x < 0.0)
    return norm_lower_tail(-x);
  return 1.0 - norm_lower_tail(x);
}

double bk_norm_sf(double x) {
  return bk_norm_cdf(-x);
}

/* Wichura (1988), Algorithm AS 241 (PPND16), Applied Statistics 37:477-484:
 * rational approximations with relative accuracy about 1e-16. Coefficients
 * in ascending powers; the denominators have leading coefficient 1. */
static const double ppnd_a[8] = {
    3.3871328727963666080e+0, 1.3314166789178437745e+2,
    1.9715909503065514427e+3, 1.3731693765509461125e+4,
    4.5921953931549871457e+4, 6.7265770927008700853e+4,
    3.3430575583588128105e+4, 2.5090809287301226727e+3};
static const double ppnd_b[8] = {1.0,
                                 4.2313330701600911252e+1,
                                 6.8718700749205790830e+2,
                                 5.3941960214247511077e+3,
                                 2.1213794301586595867e+4,
                                 3.9307895800092710610e+4,
                                 2.8729085735721942674e+4,
                                 5.2264952788528545610e+3};
static const double ppnd_c[8] = {
    1.42343711074968357734e+0, 4.63033784615654529590e+0,
    5.76949722146069140550e+0, 3.64784832476320460504e+0,
    1.27045825245236838258e+0, 2.41780725177450611770e-1,
    2.27238449892691845833e-2, 7.74545014278341407640e-4};
static const double ppnd_d[8] = {1.0,
                                 2.05319162663775882187e+0,
                                 1.67638483018380384940e+0,
                                 6.89767334985100004550e-1,
                                 1.48103976427480074590e-1,
                                 1.51986665636164571966e-2,
                                 5.47593808499534494600e-4,
                                 1.05075007164441684324e-9};
static const double ppnd_e[8] = {
    6.65790464350110377720e+0, 5.46378491116411436990e+0,
    1.78482653991729133580e+0, 2.96560571828504891230e-1,
    2.65321895265761230930e-2, 1.24266094738807843860e-3,
    2.71155556874348757815e-5, 2.01033439929228813265e-7};
static const double ppnd_f[8] = {1.0,
                                 5.99832206555887937690e-1,
                                 1.36929880922735805310e-1,
                                 1.48753612908506148525e-2,
                                 7.86869131145613259100e-4,
                                 1.84631831751005468180e-5,
                                 1.42151175831644588870e-7,
                                 2.04426310338993978564e-15};

static inline double poly7(const double c[8], double r) {
  double s = c[7];
  for (int i = 6; i >= 0; i--)
    s = s * r + c[i];
  return s;
}

/* Phi^-1(p) for 0 < p < 1 given p and its complement q = 1 - p, so that the
 * tail which is small is used without rounding. */
static double ppnd16(double p, double q) {
  double d = p - 0.5;
  if (fabs(d) <= 0.425) {
    double r = 0.180625 - d * d;
    return d * poly7(ppnd_a, r) / poly7(ppnd_b, r);
  }
  double r = sqrt(-log(d < 0.0 ? p : q));
  double x;
  if (r <= 5.0) {
    r -= 1.6;
    x = poly7(ppnd_c, r) / poly7(ppnd_d, r);
  } else {
    r -= 5.0;
    x = poly7(ppnd_e, r) / poly7(ppnd_f, r);
  }
  return d < 0.0 ? -x : x;
}

/* AS 241, then in the tails (p or 1-p below 0.075) one Halley step on
 * Phi(x) = p using the accurate tail cdf above. The central branch is left
 * alone: there the rational function is already accurate relative to x
 * itself, while a correction through Phi(x) - p would only be accurate
 * relative to p. */
double bk_norm_icdf(double p) {
  if (isnan(p) || p < 0.0 || p > 1.0)
    return NAN;
  if (p == 0.0)
    return -INFINITY;
  if (p == 1.0)
    return INFINITY;
  double q = 1.0 - p; /* exact for p >= 0.5 */
  double x = ppnd16(p, q);
  if (fabs(p - 0.5) <= 0.425)
    return x;
  /* Work in the lower tail: t < 0 with Phi(t) = s, s the small one. */
  double s = p < 0.5 ? p : q;
  double t = p < 0.5 ? x : -x;
  double f = norm_lower_tail(-t) - s;
  /* The step is tiny, so a plain exp is precise enough for the density. */
  double pdf = INV_SQRT_2PI * exp(-0.5 * t * t);
  if (pdf > 0.0) {
    double u = f / pdf;
    t -= u / (1.0 + 0.5 * t * u);
  }
  return p < 0.5 ? t : -t;
}

/* ---------------------------------------------------------------------- */
/* Helpers shared by the incomplete gamma and beta functions               */
/* ---------------------------------------------------------------------- */

/* Stirling's error s(a) = lgamma(a) - (a - 1/2) log a + a - log sqrt(2 pi).
 * For a >= 15 the asymptotic series (Abramowitz & Stegun 6.1.41, terms to
 * a^-13, truncation error below 1e-20); below, the recurrence s(a) = s(a+1)
 * + (a + 1/2) log1p(1/a) - 1 carries it up, which keeps the absolute error
 * near 1e-15 where lgamma differences would cancel to 1e-14. */
static double stirlerr(double a) {
  double acc = 0.0;
  while (a < 15.0) {
    acc += (a + 0.5) * log1p(1.0 / a) - 1.0;
    a += 1.0;
  }
  double r = 1.0 / (a * a);
  double s =
      (1.0 / 12.0 -
       r * (1.0 / 360.0 -
            r * (1.0 / 1260.0 -
                 r * (1.0 / 1680.0 - r * (1.0 / 1188.0 - r * (691.0 / 360360.0 -
                                                              r / 156.0)))))) /
      a;
  return acc + s;
}

/* Loader's deviance term bd0(x, m) = x log(x/m) + m - x >= 0, computed
 * without cancellation when x is close to m by the series in v = (x-m)/(x+m)
 * (C. Loader, "Fast and accurate computation of binomial probabilities",
 * 2000). */
static double bd0(double x, double m) {
  if (fabs(x - m) < 0.1 * (x + m)) {
    double v = (x - m) / (x + m);
    double s = (x - m) * v;
    double ej = 2.0 * x * v;
    v *= v;
    for (int j = 1; j < 1000; j++) {
      ej *= v;
      double s1 = s + ej / (2 * j + 1);
      if (s1 == s)
        return s1;
      s = s1;
    }
    return s;
  }
  return x * log(x / m) + m - x;
}

/* x^a e^-x / Gamma(a) for a > 0, x > 0, in the Stirling form
 * sqrt(a / 2pi) exp(-bd0(a, x) - s(a)), which stays accurate for large a
 * where a log x - x - lgamma(a) would cancel. */
static double gamma_prefactor(double a, double x) {
  return sqrt(a / (2.0 * M_PI)) * exp(-bd0(a, x) - stirlerr(a));
}

/* ---------------------------------------------------------------------- */
/* Incomplete gamma                                                        */
/* ---------------------------------------------------------------------- */

#define TINY 1e-300
#define EPS  DBL_EPSILON

/* P(a, x) by its power series, x < a + 1 (Abramowitz & Stegun 6.5.29). */
static double gamma_p_series(double a, double x) {
  double term = 1.0 / a, sum = term;
  for (int n = 1; n < 100000; n++) {
    term *= x / (a + n);
    sum += term;
    if (fabs(term) < fabs(sum) * EPS)
      break;
  }
  return sum * gamma_prefactor(a, x);
}

/* Q(a, x) by its continued fraction (A&S 6.5.31), x >= a + 1, evaluated by
 * the modified Lentz method (Lentz 1976; Thompson & Barnett 1986). */
static double gamma_q_cf(double a, double x) {
  double b = x + 1.0 - a;
  double c = 1.0 / TINY;
  double d = 1.0 / b;
  double h = d;
  for (int i = 1; i < 100000; i++) {
    double an = -i * (i - a);
    b += 2.0;
    d = an * d + b;
    if (fabs(d) < TINY)
      d = TINY;
    c = b + an / c;
    if (fabs(c) < TINY)
      c = TINY;
    d = 1.0 / d;
    double del = d * c;
    h *= del;
    if (fabs(del - 1.0) < EPS)
      break;
  }
  return h * gamma_prefactor(a, x);
}

/* Both P and Q; the one computed directly is the smaller-error one. */
static void gamma_pq(double a, double x, double *p, double *q) {
  if (x < a + 1.0) {
    *p = gamma_p_series(a, x);
    *q = 1.0 - *p;
  } else {
    *q = gamma_q_cf(a, x);
    *p = 1.0 - *q;
  }
}

/* P(a, x) (upper = 0) or Q(a, x) (upper = 1). */
static double gamma_tail(double a, double x, int upper) {
  if (isnan(a) || isnan(x) || a <= 0.0 || x < 0.0)
    return NAN;
  if (x == 0.0)
    return upper ? 1.0 : 0.0;
  if (isinf(x))
    return upper ? 0.0 : 1.0;
  double p, q;
  gamma_pq(a, x, &p, &q);
  return upper ? q : p;
}

double bk_gamma_p(double a, double x) {
  return gamma_tail(a, x, 0);
}

double bk_gamma_q(double a, double x) {
  return gamma_tail(a, x, 1);
}

/* Solves P(a, x) = p (tail = 0) or Q(a, x) = p (tail = 1) for x, with the
 * target first put on the side where it is at most 1/2 so the residual is
 * formed from the directly computed small one of P and Q. Halley's method
 * on f, f'(x) = x^(a-1) e^-x / Gamma(a), f''/f' = (a-1)/x - 1, started from
 * the Wilson-Hilferty approximation (A&S 26.4.17) for a > 1 and from the
 * small-x series otherwise (as in Numerical Recipes, 3rd ed., section
 * 6.2.1), with a bracket kept so that a wild step falls back to
 * bisection. */
static double gamma_inv(double a, double p, int tail) {
  if (p > 0.5) {
    p = 1.0 - p; /* exact */
    tail = !tail;
  }
  double pl = tail ? 1.0 - p : p; /* target of P, for the start only */
  double x;
  if (a > 1.0) {
    double z = tail ? -bk_norm_icdf(p) : bk_norm_icdf(p);
    double w = 1.0 - 1.0 / (9.0 * a) + z / (3.0 * sqrt(a));
    x = w > 0.0 ? a * w * w * w : 1e-3 * a;
  } else {
    double t = 1.0 - a * (0.253 + a * 0.12);
    if (pl < t)
      x = pow(pl / t, 1.0 / a);
    else
      x = 1.0 - log(tail ? p / (1.0 - t) : (1.0 - pl) / (1.0 - t));
  }
  /* A root below the smallest normal number is returned as 0: as a
   * subnormal it would have few significant bits. */
  if (!(x > 1e-250)) {
    double p0, q0;
    gamma_pq(a, DBL_MIN, &p0, &q0);
    if ((tail ? p - q0 : p0 - p) >= 0.0)
      return 0.0;
  }
  double lo = 0.0, hi = INFINITY;
  for (int it = 0; it < 300; it++) {
    if (!(x > 0.0) || !isfinite(x))
      x = isinf(hi) ? fmax(2.0 * lo, 1.0) : 0.5 * (lo + hi);
    double pp, qq;
    gamma_pq(a, x, &pp, &qq);
    double f = tail ? p - qq : pp - p; /* increasing in x */
    if (f == 0.0)
      return x;
    if (f < 0.0)
      lo = x;
    else
      hi = x;
    double dens = gamma_prefactor(a, x) / x;
    double xn = NAN;
    if (dens > 0.0 && isfinite(dens)) {
      double u = f / dens;
      double corr = u * ((a - 1.0) / x - 1.0);
      double dx = u / (1.0 - 0.5 * fmin(1.0, corr));
      if (fabs(dx) <= 4.0 * EPS * x)
        return x - dx;
      xn = x - dx;
    }
    if (!(xn > lo && xn < hi)) {
      if (isinf(hi))
        xn = 2.0 * x + 1.0;
      else if (lo > 0.0 && hi / lo > 8.0)
        xn = sqrt(lo * hi);
      else if (lo == 0.0)
        xn = 1e-3 * hi;
      else
        xn = 0.5 * (lo + hi);
    }
    if (hi - lo <= 4.0 * EPS * lo)
      return xn;
    x = xn;
  }
  return x;
}

double bk_gamma_p_inv(double a, double p) {
  if (isnan(a) || isnan(p) || a <= 0.0 || p < 0.0 || p > 1.0)
    return NAN;
  if (p == 0.0)
    return 0.0;
  if (p == 1.0)
    return INFINITY;
  return gamma_inv(a, p, 0);
}

double bk_gamma_q_inv(double a, double q) {
  if (isnan(a) || isnan(q) || a <= 0.0 || q < 0.0 || q > 1.0)
    return NAN;
  if (q == 0.0)
    return INFINITY;
  if (q == 1.0)
    return 0.0;
  return gamma_inv(a, q, 1);
}

/* ---------------------------------------------------------------------- */
/* Incomplete beta                                                         */
/* ---------------------------------------------------------------------- */

/* x^a y^b / B(a, b) with y = 1 - x, in the Stirling form
^ * sqrt(a b / (2 pi c)) exp(-bd0(a, c x) - bd0(b, c y) + s(c) - s(a) - s(b)),
 * c = a + b. This is an exact rewriting (since a + b = c x + c y), and it
 * avoids the cancellation of lgamma(a) + lgamma(b) - lgamma(a+b) for large
 * parameters, which matters for binomial intervals with millions of
 * samples. */
static double beta_prefactor(double a, double b, double x, double y) {
  double c = a + b;
  double e =
      -bd0(a, c * x) - bd0(b, c * y) + stirlerr(c) - stirlerr(a) - stirlerr(b);
  return sqrt(a * b / (2.0 * M_PI * c)) * exp(e);
}

/* I_x(a, b) = prefactor / F with F the even contraction of the continued
 * fraction A&S 26.5.8, in the form of Didonato & Morris (1992), ACM TOMS
 * 18:360-373 (BFRAC):
 *   F = b0 + a1/(b1 + a2/(b2 + ...)),
 *   a_m = (a+m-1)(a+b+m-1) m (b-m) x^2 / (a+2m-1)^2,
 *   b_m = m + m(b-m)x/(a+2m-1) + (a+m)(a y - b x + 1 + m(2-x))/(a+2m+1).
 * Unlike the plain fraction it uses y = 1 - x explicitly (a y - b x), which
 * keeps full accuracy when x is near 1 and a is large (Student t with many
 * degrees of freedom, binomial tails with few events in millions of
 * trials), where the plain fraction lost up to five digits. Evaluated by
 * the modified Lentz method (Thompson & Barnett 1986); converges fast for
 * x below about a/(a+b). */
static double beta_frac(double a, double b, double x, double y) {
  double f = a * (a * y - b * x + 1.0) / (a + 1.0);
  if (fabs(f) < TINY)
    f = TINY;
  double c = f, d = 0.0;
  int maxit = 1000 + (int)(20.0 * sqrt(fmax(a, b)));
  for (int m = 1; m <= maxit; m++) {
    double den = a + 2.0 * m - 1.0;
    double am =
        (a + m - 1.0) * (a + b + m - 1.0) * m * (b - m) * x * x / (den * den);
    double bm =
        m + m * (b - m) * x / den +
        (a + m) * (a * y - b * x + 1.0 + m * (2.0 - x)) / (a + 2.0 * m + 1.0);
    d = bm + am * d;
    if (fabs(d) < TINY)
      d = TINY;
    c = bm + am / c;
    if (fabs(c) < TINY)
      c = TINY;
    d = 1.0 / d;
    double del = c * d;
    f *= del;
    if (fabs(del - 1.0) <= EPS)
      break;
  }
  return f;
}

static void beta_inc_xy(double a, double b, double x, double y, double *i,
                        double *ic) {
  double pre = beta_prefactor(a, b, x, y);
  if (x < a / (a + b)) {
    *i = pre / beta_frac(a, b, x, y);
    *ic = 1.0 - *i;
  } else {
    *ic = pre / beta_frac(b, a, y, x);
    *i = 1.0 - *ic;
  }
}

/* I_x(a, b) (upper = 0) or 1 - I_x(a, b) (upper = 1). */
static double beta_tail(double a, double b, double x, int upper) {
  if (isnan(a) || isnan(b) || isnan(x) || a <= 0.0 || b <= 0.0 || x < 0.0 ||
      x > 1.0)
    return NAN;
  if (x == 0.0)
    return upper ? 1.0 : 0.0;
  if (x == 1.0)
    return upper ? 0.0 : 1.0;
  double i, ic;
  beta_inc_xy(a, b, x, 1.0 - x, &i, &ic);
  return upper ? ic : i;
}

double bk_beta_inc(double a, double b, double x) {
  return beta_tail(a, b, x, 0);
}

/* Solves I_x(a, b) = p (when tail = 0) or 1 - I_x(a, b) = p (tail = 1) for
 * x. The target is first put on the side where it is at most 1/2, so the
 * residual is always formed from the directly computed, small one of I and
 * 1 - I. Halley's method with f''/f' = (a-1)/x - (b-1)/(1-x), safeguarded
 * by a bracket and bisection; start from A&S 26.5.22 for a, b >= 1,
 * otherwise from the leading terms near 0 and 1 (Numerical Recipes, 3rd
 * ed., section 6.14.1). */
static double beta_inv(double a, double b, double p, int tail) {
  if (p > 0.5) {
    p = 1.0 - p; /* exact */
    tail = !tail;
  }
  double pl = tail ? 1.0 - p : p; /* target of I_x(a, b), for the start */
  double x;
  if (a >= 1.0 && b >= 1.0) {
    /* y_p of A&S 26.5.22 is the upper normal quantile of I. */
    double z = tail ? bk_norm_icdf(p) : -bk_norm_icdf(p);
    double lam = (z * z - 3.0) / 6.0;
    double h = 2.0 / (1.0 / (2.0 * a - 1.0) + 1.0 / (2.0 * b - 1.0));
    double w = z * sqrt(h + lam) / h -
               (1.0 / (2.0 * b - 1.0) - 1.0 / (2.0 * a - 1.0)) *
                   (lam + 5.0 / 6.0 - 2.0 / (3.0 * h));
    x = a / (a + b * exp(2.0 * w));
  } else {
    double lna = log(a / (a + b)), lnb = log(b / (a + b));
    double t = exp(a * lna) / a, u = exp(b * lnb) / b, w = t + u;
    if (pl < t / w)
      x = pow(a * w * pl, 1.0 / a);
    else
      x = 1.0 - pow(b * w * (tail ? p : 1.0 - p), 1.0 / b);
  }
  if (!(x > 1e-250)) {
    double i0, ic0;
    beta_inc_xy(a, b, DBL_MIN, 1.0, &i0, &ic0);
    if ((tail ? p - ic0 : i0 - p) >= 0.0)
      return 0.0; /* as for the gamma inverse */
  }
  double lo = 0.0, hi = 1.0;
  if (!(x > lo && x < hi))
    x = 0.5;
  for (int it = 0; it < 300; it++) {
    double y = 1.0 - x;
    double i, ic;
    beta_inc_xy(a, b, x, y, &i, &ic);
    double f = tail ? p - ic : i - p; /* increasing in x */
    if (f == 0.0)
      return x;
    if (f < 0.0)
      lo = x;
    else
      hi = x;
    double dens = beta_prefactor(a, b, x, y) / (x * y);
    double xn = NAN;
    if (dens > 0.0 && isfinite(dens)) {
      double u = f / dens;
      double corr = u * ((a - 1.0) / x - (b - 1.0) / y);
      double dx = u / (1.0 - 0.5 * fmin(1.0, corr));
      if (fabs(dx) <= 4.0 * EPS * fmin(x, y))
        return x - dx;
      xn = x - dx;
    }
    if (!(xn > lo && xn < hi)) {
      /* Bisect, geometrically when the bracket spans decades. */
      if (lo > 0.0 && hi / lo > 8.0)
        xn = sqrt(lo * hi);
      else if (lo == 0.0 && hi < 1e-3)
        xn = 1e-3 * hi;
      else
        xn = 0.5 * (lo + hi);
    }
    if (fabs(xn - x) <= 4.0 * EPS * fmin(xn, 1.0 - xn) ||
        fabs(xn - x) <= DBL_MIN)
      return xn;
    if (hi - lo <= 2.0 * EPS * fmin(lo > 0.0 ? lo : hi, 1.0 - lo))
      return xn;
    x = xn;
  }
  return x;
}

double bk_beta_inc_c(double a, double b, double x) {
  return beta_tail(a, b, x, 1);
}

double bk_beta_inc_inv(double a, double b, double p) {
  if (isnan(a) || isnan(b) || isnan(p) || a <= 0.0 || b <= 0.0 || p < 0.0 ||
      p > 1.0)
    return NAN;
  if (p == 0.0)
    return 0.0;
  if (p == 1.0)
    return 1.0;
  return beta_inv(a, b, p, 0);
}

double bk_gamma_density(double a, double x) {
  if (isnan(a) || isnan(x) || a <= 0.0)
    return NAN;
  if (x < 0.0 || isinf(x))
    return 0.0;
  if (x == 0.0)
    return a < 1.0 ? INFINITY : a == 1.0 ? 1.0 : 0.0;
  return gamma_prefactor(a, x) / x;
}

double bk_beta_density(double a, double b, double x, double y) {
  if (isnan(a) || isnan(b) || isnan(x) || isnan(y) || a <= 0.0 || b <= 0.0)
    return NAN;
  if (x < 0.0 || y < 0.0)
    return 0.0;
  if (x == 0.0)
    return a < 1.0 ? INFINITY : a == 1.0 ? b : 0.0;
  if (y == 0.0)
    return b < 1.0 ? INFINITY : b == 1.0 ? a : 0.0;
  return beta_prefactor(a, b, x, y) / (x * y);
}

/* ---------------------------------------------------------------------- */
/* Student t                                                               */
/* ---------------------------------------------------------------------- */

/* P(T <= t) = 1 - I_x(nu/2, 1/2)/2 for t > 0, with x = nu / (nu + t^2)
 * (A&S 26.7.1 with 26.5.27). 1 - x = t^2 / (nu + t^2) is formed directly
 * so that small |t| keeps its digits. */
double bk_student_cdf(double t, double nu) {
  if (isnan(t) || isnan(nu) || nu <= 0.0)
    return NAN;
  if (isinf(nu))
    return bk_norm_cdf(t);
  if (isinf(t))
    return t > 0.0 ? 1.0 : 0.0;
  if (t == 0.0)
    return 0.5;
  double t2 = t * t;
  double x, y;
  if (t2 < nu) {
    x = nu / (nu + t2);
    y = t2 / (nu + t2);
  } else {
    double r = nu / t2;
    x = r / (1.0 + r);
    y = 1.0 / (1.0 + r);
  }
  double i, ic;
  beta_inc_xy(0.5 * nu, 0.5, x, y, &i, &ic);
  double tailp = 0.5 * i; /* P(T > |t|) */
  return t > 0.0 ? 1.0 - tailp : tailp;
}

/* Quantile by inverting the incomplete beta function: for a lower tail
 * probability s = min(p, 1-p), 2s = I_x(nu/2, 1/2) = 1 - I_y(1/2, nu/2),
 * y = 1 - x, and t = -sqrt(nu y / x). */
double bk_student_icdf(double p, double nu) {
  if (isnan(p) || isnan(nu) || nu <= 0.0 || p < 0.0 || p > 1.0)
    return NAN;
  if (p == 0.0)
    return -INFINITY;
  if (p == 1.0)
    return INFINITY;
  if (isinf(nu))
    return bk_norm_icdf(p);
  if (p == 0.5)
    return 0.0;
  double s = p < 0.5 ? p : 1.0 - p;
  double t;
  if (nu == 1.0) {
    /* Cauchy: t = -cot(pi s) = -1/tan(pi s), exact in the tail. */
    t = -1.0 / tan(M_PI * s);
  } else {
    /* Solve for whichever of x and y is below 1/2, as the other is then
     * known to full relative precision as 1 minus it. */
    double a = 0.5 * nu;
    double half, halfc;
    beta_inc_xy(a, 0.5, 0.5, 0.5, &half, &halfc);
    if (2.0 * s < half) {
      double x = beta_inv(a, 0.5, 2.0 * s, 0);
      t = -sqrt(nu * ((1.0 - x) / x));
    } else {
      double y = beta_inv(0.5, a, 2.0 * s, 1);
      t = -sqrt(nu * (y / (1.0 - y)));
    }
  }
  return p < 0.5 ? t : -t;
}

/* ---- bivariate normal ------------------------------------------------- */

typedef struct {
  double hh, hk2, kk; /* h^2 + k^2 parts of the exponent */
} norm2_t;

static double norm2_f(const norm2_t *c, double t) {
  double s = sin(t), co = cos(t);
  return exp(-(c->hh - c->hk2 * s + c->kk) / (2 * co * co));
}

/* Adaptive Simpson on [a, b] with the values fa, fm, fb at a, (a+b)/2, b
 * and the whole-interval estimate whole; tol is absolute. */
static double norm2_simpson(const norm2_t *c, double a, double b, double fa,
                            double fm, double fb, double whole, double tol,
                            int depth) {
  double m = 0.5 * (a + b), lm = 0.5 * (a + m), rm = 0.5 * (m + b);
  double flm = norm2_f(c, lm), frm = norm2_f(c, rm);
  double left = (m - a) / 6 * (fa + 4 * flm + fm);
  double right = (b - m) / 6 * (fm + 4 * frm + fb);
  double d = left + right - whole;
  if (depth <= 0 || fabs(d) <= 15 * tol)
    return left + right + d / 15;
  return norm2_simpson(c, a, m, fa, flm, fm, left, tol / 2, depth - 1) +
         norm2_simpson(c, m, b, fm, frm, fb, right, tol / 2, depth - 1);
}

double bk_norm2_cdf(double h, double k, double rho) {
  if (isnan(h) || isnan(k) || isnan(rho) || rho < -1 || rho > 1)
    return NAN;
  if (h == -INFINITY || k == -INFINITY)
    return 0;
  if (h == INFINITY)
    return bk_norm_cdf(k);
  if (k == INFINITY)
    return bk_norm_cdf(h);
  /* The limits rho = +-1: X = Y or X = -Y. */
  if (rho == 1)
    return bk_norm_cdf(h < k ? h : k);
  if (rho == -1)
    return h + k > 0 ? bk_norm_cdf(h) - bk_norm_cdf(-k) : 0;
  double base = bk_norm_cdf(h) * bk_norm_cdf(k);
  if (rho == 0)
    return base;
  norm2_t c = {h * h, 2 * h * k, k * k};
  double b = asin(rho);
  double fa = norm2_f(&c, 0), fm = norm2_f(&c, b / 2), fb = norm2_f(&c, b);
  double whole = b / 6 * (fa + 4 * fm + fb);
  /* The integrand peaks at most at its largest sampled value, so an
   * absolute tolerance relative to the scale of the result holds the
   * relative error of small probabilities. */
  double scale = fmax(fmax(fa, fb), fm) * fabs(b);
  double tol = 1e-15 * fmax(scale, 1e-300);
  double add = norm2_simpson(&c, 0, b, fa, fm, fb, whole, tol, 40) /
               (2 * 3.14159265358979323846);
  double p = base + add;
  return p < 0 ? 0 : p > 1 ? 1 : p;
}
