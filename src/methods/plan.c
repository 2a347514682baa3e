/*
 * Planning figures per method (see plan.h). Each formula names its source;
 * FORM and cross-entropy figures rest on stated assumptions (iterations,
 * adaptation steps) because those methods have no closed-form cost.
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/plan.h"

#include <math.h>
#include <string.h>

#include "numerics/special.h"

double bk_plan_mc(double pf, double cov) {
  /* Binomial variance pf (1 - pf) / N, so cov^2 = (1 - pf) / (N pf). */
  return (1 - pf) / (pf * cov * cov);
}

/* ln Phi(-x): directly while Phi(-x) is a normal double, else the
 * asymptotic series of Mills' ratio (Abramowitz & Stegun 26.2.12), whose
 * error beyond x = 20 is below 1e-10 relative. */
static double log_sf(double x) {
  if (x < 20)
    return log(bk_norm_sf(x));
  double r = 1 / (x * x);
  double s = 1 - r * (1 - 3 * r * (1 - 5 * r * (1 - 7 * r)));
  return -0.5 * x * x - log(x) - 0.5 * log(2 * M_PI) + log(s);
}

double bk_plan_is_relvar(double beta) {
  /* E_h[(w I)^2] = exp(beta^2) Phi(-2 beta) for the density N(u*, I) and a
   * half-space at distance beta; divided by pf^2 = Phi(-beta)^2. Written
   * in logarithms so that large beta neither overflows nor underflows. */
  double lr = beta * beta + log_sf(2 * beta) - 2 * log_sf(beta);
  return exp(lr) - 1;
}

double bk_plan_is(double pf, double cov) {
  double beta = -bk_norm_icdf(pf);
  return bk_plan_is_relvar(beta) / (cov * cov);
}

double bk_plan_subset(double pf, double cov, double p0, double gamma,
                      int *levels) {
  int m = (int)ceil(log(pf) / log(p0) - 1e-12);
  if (m < 1)
    m = 1;
  if (levels)
    *levels = m;
  double n = m * (1 + gamma) * (1 - p0) / (p0 * cov * cov);
  return ceil(n) * m;
}

double bk_plan_form(size_t nu, int central, int iterations, int sorm) {
  double per = central ? 2.0 * (double)nu + 1 : (double)nu + 1;
  double n = per * iterations;
  if (sorm && nu > 1)
    n += 2.0 * (double)(nu - 1) * (double)(nu - 1);
  return n;
}

double bk_plan_explore(size_t nu, int probe, int sorm) {
  double n = 0;
  if (nu <= 50 && nu > 1 && !sorm)
    n += 2.0 * (double)(nu - 1);
  double p = probe >= 0 ? probe : nu <= 50 ? 2.0 * (double)nu + 32 : 32;
  if (nu == 1 && p > 2)
    p = 2;
  return n + p;
}

double bk_plan_scaled(double n, double cov_pilot, double cov) {
  return ceil(n * (cov_pilot / cov) * (cov_pilot / cov));
}

double bk_plan_surrogate(size_t nu, double cov) {
  double n0 = 2.0 * (double)nu + 2 > 10 ? 2.0 * (double)nu + 2 : 10;
  double corr = ceil(0.3 / (cov * cov));
  return n0 + 8 * ((double)nu + 2) + (corr > 20 ? corr : 20);
}

/* Wall time of `n` evaluations run `slots` at a time. */
static double wall(double n, const bk_plan_opts_t *o) {
  if (!isfinite(o->seconds) || !isfinite(n))
    return NAN;
  return ceil(n / o->slots) * o->seconds;
}

void bk_plan_compute(const bk_plan_opts_t *o, bk_plan_row_t *rows) {
  int it = o->form_iterations > 0 ? o->form_iterations : 10;
  double gamma = o->gamma > 0 ? o->gamma : 2;
  double p0 = o->p0 > 0 ? o->p0 : 0.1;
  double isb = o->is_batch > 0 ? o->is_batch : 500;
  double rho = o->ce_rho > 0 ? o->ce_rho : 0.1;
  double ceb = o->ce_batch > 0 ? o->ce_batch : 500;
  double n_mc = ceil(bk_plan_mc(o->pf, o->cov));
  rows[0] = (bk_plan_row_t){"random", n_mc, wall(n_mc, o),
                            "binomial, (1-Pf)/(Pf cov^2)"};
  rows[1] = (bk_plan_row_t){"lhs", n_mc, wall(n_mc, o),
                            "upper bound (as random; fewer in practice)"};
  rows[2] = (bk_plan_row_t){"sobol", n_mc, wall(n_mc, o),
                            "upper bound (as random; fewer in practice)"};
  const char *pm = o->pilot_method;
  if (pm && o->pilot_evaluations > 0 && o->pilot_cov > 0 &&
      isfinite(o->pilot_cov) && o->pilot_cov < 1e300) {
    int which = strcmp(pm, "lhs") == 0 ? 1 : strcmp(pm, "sobol") == 0 ? 2 : 0;
    if (which) {
      double n = bk_plan_scaled(o->pilot_evaluations, o->pilot_cov, o->cov);
      rows[which].note = "scaled from the pilot's replicate spread";
      /* Latin hypercube sampling with n points is never worse than random
       * sampling with n - 1 (Owen 1997, from memory): a noisy spread from
       * few failures must not ask for more than random would. */
      if (which == 1 && n > n_mc + 1) {
        n = n_mc + 1;
        rows[which].note = "as random: the pilot's spread asks no fewer";
      }
      rows[which].evaluations = n;
      rows[which].seconds = wall(n, o);
    }
  }
  /* FORM runs its iterations one batch after another. */
  double per = o->central ? 2.0 * (double)o->nu + 1 : (double)o->nu + 1;
  double n_form = bk_plan_form(o->nu, o->central, it, o->sorm);
  double n_explore = o->explore ? bk_plan_explore(o->nu, o->probe, o->sorm) : 0;
  double w_form = NAN;
  if (isfinite(o->seconds)) {
    w_form = it * ceil(per / o->slots) * o->seconds;
    if (o->sorm && o->nu > 1)
      w_form += wall(n_form - per * it, o);
    if (n_explore > 0)
      w_form += wall(n_explore, o);
  }
  n_form += n_explore;
  rows[3] =
      (bk_plan_row_t){"form", n_form, w_form,
                      o->explore ? "10 iterations, one design point assumed; "
                                   "no cov"
                                 : "10 iterations assumed; no cov"};
  if (o->form_iterations > 0)
    rows[3].note = "no cov (not a sampling estimate)";
  double n_is = ceil(bk_plan_is(o->pf, o->cov) / isb) * isb;
  double w_is = isfinite(w_form) ? w_form + wall(n_is, o) : NAN;
  rows[4] = (bk_plan_row_t){"importance", n_form + n_is, w_is,
                            "FORM + IS variance of the linear case"};
  /* Each cross-entropy step moves the intermediate threshold by about a
   * rho quantile, so about ln Pf / ln rho steps reach the failure domain;
   * the final sampling is taken as good as importance sampling at the
   * design point. */
  int steps = (int)ceil(log(o->pf) / log(rho) - 1e-12);
  if (steps < 1)
    steps = 1;
  double n_ce = steps * ceb + n_is;
  rows[5] = (bk_plan_row_t){"cross-entropy", n_ce, wall(n_ce, o),
                            "rough: ln Pf/ln rho steps, then as IS"};
  int levels;
  double n_ss = bk_plan_subset(o->pf, o->cov, p0, gamma, &levels);
  rows[6] = (bk_plan_row_t){"subset", n_ss, wall(n_ss, o),
                            "Au & Beck 2001, gamma = 2 assumed"};
  /* Batches of run.slots points: every round keeps the slots busy. */
  double n_sg = bk_plan_surrogate(o->nu, o->cov);
  rows[7] =
      (bk_plan_row_t){"surrogate", n_sg, wall(n_sg, o),
                      "rough: measured, a good surrogate; poor costs more"};
}
