/*
 * Probability distributions of the basic variables: pdf, cdf and inverse
 * cdf, with parameters given by moments (mean with sd or cov) or by native
 * parameters. A bk_dist_t is a small value type, filled by bk_dist_init and
 * immutable afterwards.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_DIST_H
#define BK_DIST_H

#include <stddef.h>

typedef enum {
  BK_DIST_NORMAL,
  BK_DIST_LOGNORMAL,
  BK_DIST_GUMBEL,     /* largest values */
  BK_DIST_GUMBEL_MIN, /* smallest values */
  BK_DIST_WEIBULL,
  BK_DIST_FRECHET,
  BK_DIST_GAMMA,
  BK_DIST_EXPONENTIAL,
  BK_DIST_UNIFORM,
  BK_DIST_TRIANGULAR,
  BK_DIST_BETA,
  BK_DIST_TRUNCATED_NORMAL,
  BK_DIST_CONSTANT,
  BK_DIST__COUNT
} bk_dist_kind_t;

/* Parameter names a study file may give, as written there. Each field has a
 * flag in `has`, bit (1u << BK_PARAM_x). */
typedef enum {
  BK_PARAM_MEAN,
  BK_PARAM_SD,
  BK_PARAM_COV,
  BK_PARAM_MU,       /* lognormal: mean of ln X; truncated-normal: parent mean */
  BK_PARAM_SIGMA,    /* lognormal: sd of ln X; truncated-normal: parent sd */
  BK_PARAM_LOCATION, /* gumbel, gumbel-min, weibull, frechet, exponential */
  BK_PARAM_SCALE,    /* gumbel, gumbel-min, weibull, frechet, gamma */
  BK_PARAM_SHAPE,    /* weibull, frechet, gamma */
  BK_PARAM_RATE,     /* exponential, gamma */
  BK_PARAM_LOWER,    /* uniform, triangular, beta, truncated-normal */
  BK_PARAM_UPPER,
  BK_PARAM_MODE,     /* triangular */
  BK_PARAM_ALPHA,    /* beta shape parameters */
  BK_PARAM_BETA,
  BK_PARAM_VALUE,    /* constant */
  BK_PARAM__COUNT
} bk_param_t;

typedef struct {
  unsigned has; /* bit set of bk_param_t given */
  double v[BK_PARAM__COUNT];
} bk_dist_spec_t;

/* A distribution with its derived parameters. `p` holds kind-specific
 * parameters (documented in dist.c); mean and sd are the moments, computed
 * for every kind. */
typedef struct {
  bk_dist_kind_t kind;
  double p[6];
  double mean;
  double sd;
} bk_dist_t;

/* Name as written in study files ("gumbel-min", "truncated-normal", ...). */
const char *bk_dist_name(bk_dist_kind_t kind);
/* Returns the kind for a name, or -1. */
int bk_dist_kind_from_name(const char *name);
const char *bk_dist_param_name(bk_param_t p);
/* Returns the parameter for a name, or -1. */
int bk_dist_param_from_name(const char *name);

/* Fills `d` from `spec`. On failure returns BK_EINVAL (BK_ERANGE when the
 * values are valid one by one but out of reach together, e.g. a Weibull
 * spread needing a shape below 0.01) and writes a message naming the bad
 * parameter, the value and what is valid into `why` (may be NULL), without
 * a trailing period or the variable's name, e.g. "cov must be > 0 (got
 * -0.1)", "unknown parameter 'mode' for normal; expected mean with sd or
 * cov"; `bad_param` (may be NULL) receives the offending parameter or -1
 * when the combination is wrong ("give sd or cov together with mean").
 * `d` is unspecified after failure. */
int bk_dist_init(bk_dist_t *d, bk_dist_kind_t kind, const bk_dist_spec_t *spec,
                 char *why, size_t whycap, int *bad_param);

double bk_dist_pdf(const bk_dist_t *d, double x);
double bk_dist_cdf(const bk_dist_t *d, double x);
/* Survival function 1 - cdf, computed directly (accurate in the upper
 * tail). */
double bk_dist_sf(const bk_dist_t *d, double x);
/* Inverse cdf for 0 < p < 1. */
double bk_dist_icdf(const bk_dist_t *d, double p);
/* The median (icdf(0.5)). */
double bk_dist_median(const bk_dist_t *d);

/* x for a standard normal u, i.e. icdf(Phi(u)), computed without losing the
 * tails (for u beyond +-8 it works from the survival side). */
double bk_dist_from_u(const bk_dist_t *d, double u);
/* u = Phi^-1(cdf(x)), the inverse of bk_dist_from_u. */
double bk_dist_to_u(const bk_dist_t *d, double x);

#endif
