/*
 * Special functions used by the distributions and the estimators: standard
 * normal pdf/cdf/inverse, regularized incomplete gamma and beta functions and
 * their inverses. Each implementation names its published algorithm and its
 * accuracy beside the code.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_SPECIAL_H
#define BK_SPECIAL_H

double bk_norm_pdf(double x);
/* Phi(x), accurate to full double precision in both tails. */
double bk_norm_cdf(double x);
/* 1 - Phi(x) without cancellation (Phi(-x)). */
double bk_norm_sf(double x);
/* Phi^-1(p) for 0 < p < 1 (AS 241 plus one Newton refinement); -inf/inf at
 * 0/1, NaN outside. */
double bk_norm_icdf(double p);

/* Regularized lower incomplete gamma P(a, x) and upper Q(a, x). */
double bk_gamma_p(double a, double x);
double bk_gamma_q(double a, double x);
/* x such that P(a, x) = p. */
double bk_gamma_p_inv(double a, double p);
/* x such that Q(a, x) = q, accurate for small q (upper tail). */
double bk_gamma_q_inv(double a, double q);

/* Regularized incomplete beta I_x(a, b). */
double bk_beta_inc(double a, double b, double x);
/* Its complement 1 - I_x(a, b), computed directly (accurate when small). */
double bk_beta_inc_c(double a, double b, double x);
/* x such that I_x(a, b) = p. */
double bk_beta_inc_inv(double a, double b, double p);

/* Densities in the same accurate form: x^(a-1) e^-x / Gamma(a), and
 * x^(a-1) y^(b-1) / B(a, b) with y = 1 - x given by the caller (who may know
 * it more precisely than 1 - x). */
double bk_gamma_density(double a, double x);
double bk_beta_density(double a, double b, double x, double y);

/* Student t distribution with nu degrees of freedom: cdf and quantile. */
double bk_student_cdf(double t, double nu);
double bk_student_icdf(double p, double nu);

/* Bivariate standard normal cdf P(X <= h, Y <= k) with correlation rho,
 * -1 <= rho <= 1, by Sheppard's (1900) integral over theta = asin(r),
 *   Phi2 = Phi(h) Phi(k) + (1/2pi) int_0^asin(rho)
 *          exp(-(h^2 - 2 h k sin t + k^2) / (2 cos^2 t)) dt,
 * whose integrand is smooth and bounded, integrated by adaptive Simpson to
 * about 1e-14 relative (checked against scipy). */
double bk_norm2_cdf(double h, double k, double rho);

#endif
