/*
 * The numerical parts of surrogate-assisted reliability analysis that do not
 * depend on how model runs are made: learning functions that say where a
 * Gaussian-process surrogate of g (numerics/gp.h) should be refined, the
 * choice of several points at once, and the metamodel-based importance
 * sampling estimator, whose result never rests on the surrogate alone.
 * Throughout, the surrogate at a point is the predictive mean mu and
 * standard deviation s of g, and failure is g <= 0.
 *
 * Learning functions and classification:
 *  - U = |mu| / s (Echard, Gayton & Lemaire 2011, Structural Safety
 *    33(2):145-154, "AK-MCS"): the number of standard deviations between the
 *    prediction and the limit state, so Phi(-U) is the probability that the
 *    sign of g is predicted wrongly. Refine at the smallest U; the paper
 *    stops learning once min U >= 2.
 *  - EFF, the expected feasibility function (Bichon, Eldred, Swiler,
 *    Mahadevan & McFarland 2008, AIAA Journal 46(10):2459-2468, from
 *    memory), with eps = 2 s around the threshold 0:
 *      EFF = mu [2 Phi(-mu/s) - Phi((-eps-mu)/s) - Phi((eps-mu)/s)]
 *          - s [2 phi(-mu/s) - phi((-eps-mu)/s) - phi((eps-mu)/s)]
 *          + eps [Phi((eps-mu)/s) - Phi((-eps-mu)/s)],
 *    which is E[max(eps - |G|, 0)] for G ~ N(mu, s^2) (that integral is the
 *    test's reference). Refine at the largest EFF.
 *  - The probabilistic classification function pi = P[G <= 0] =
 *    Phi(-mu / s) (Dubourg, Sudret & Deheeger 2013, Probabilistic
 *    Engineering Mechanics 33:47-57, section 3), the indicator of mu <= 0
 *    when s = 0.
 *  - The margin probability P[-k s <= G <= k s] = Phi(k - mu/s) -
 *    Phi(-k - mu/s) (Dubourg, Sudret & Bourinet 2011, Structural and
 *    Multidisciplinary Optimization 44(5):673-690, from memory, with
 *    k = Phi^-1(0.975)): the weight of a candidate in the margin of
 *    uncertainty around the limit state.
 *
 * Several points per iteration (so q model runs can go in parallel):
 *  - weighted k-means (Lloyd's algorithm) of candidates with weights, e.g.
 *    the margin probability, as in Dubourg et al. 2011 (section 4, from
 *    memory): the q centroids are spread over the margin, and each is
 *    replaced by the candidate of its cluster nearest to it, so the points
 *    are candidates themselves. The start is deterministic: the heaviest
 *    candidate, then each next one maximising weight times squared
 *    distance to the chosen ones (a greedy, seedless form of k-means++).
 *  - the "Kriging believer" (Ginsbourger, Le Riche & Carraro 2010, in
 *    Computational Intelligence in Expensive Optimization Problems,
 *    Springer, from memory): take the best candidate by U, pretend its
 *    value is the predicted mean, refit with the same hyperparameters (the
 *    variance shrinks near it), and take the next.
 *
 * Metamodel-based importance sampling (Dubourg, Sudret & Deheeger 2013;
 * equation numbers not quoted as they are not checked here):
 *    Pf = Pf_eps * alpha_corr, with
 *    Pf_eps = E_phi[pi(U)] (the augmented failure probability, estimated
 *      from N samples of the standard normal density phi by the mean of pi;
 *      it needs only the surrogate), and
 *    alpha_corr = E_h[1{g(U) <= 0} / pi(U)] (the correction factor,
 *      estimated from N_corr samples of the quasi-optimal density
 *      h = pi phi / Pf_eps with real model runs).
 *  Each part's cov is the sample standard deviation over sqrt(N) over its
 *  mean; the two estimators are independent, so the cov of their product is
 *  exactly sqrt(d1^2 + d2^2 + d1^2 d2^2) (the variance of a product of
 *  independent variables, Goodman 1960, JASA 55:708-713); the paper uses
 *  the first-order sqrt(d1^2 + d2^2). The estimate is unbiased whatever the
 *  surrogate's quality as long as pi > 0 wherever g <= 0: a poor surrogate
 *  costs variance, not bias.
 *  The leave-one-out estimate alpha_loo = mean over the training points of
 *  1{y_i <= 0} / pi_-i(u_i), with pi_-i from the leave-one-out mean and
 *  variance, is the paper's check that the surrogate is good enough to
 *  stop refining (it suggests alpha_loo within [0.1, 10]; from memory).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_LEARN_H
#define BK_LEARN_H

#include <stddef.h>

#include "numerics/gp.h"

/* U = |mu| / s; +inf when s = 0 and mu != 0, 0 when both are 0. */
double bk_learn_u(double mu, double s);

/* EFF with eps = 2 s (see above); 0 when s = 0. */
double bk_learn_eff(double mu, double s);

/* pi = P[G <= 0] = Phi(-mu / s); for s = 0, 1 when mu <= 0, else 0. */
double bk_learn_pi(double mu, double s);

/* P[-k s <= G <= k s] = Phi(k - mu/s) - Phi(-k - mu/s); for s = 0, 1 when
 * mu = 0, else 0. */
double bk_learn_margin(double mu, double s, double k);

/* Weighted k-means of m candidates x (row-major, m x d) with weights
 * w[0..m) >= 0 (not all 0) into q clusters (1 <= q <= number of candidates
 * with w > 0), Lloyd's iterations from the deterministic start above until
 * no assignment changes or max_iter iterations. Writes the q centroids to
 * centroids (q x d), and for each cluster the index of its candidate
 * nearest to the centroid to pick[0..q) (distinct indices); label (m
 * values) may be NULL. Candidates with weight 0 are assigned but do not
 * move centroids and are never picked. Returns the number of iterations
 * (>= 1), or BK_EINVAL, BK_ENOMEM. Deterministic: ties go to the lower
 * index. BK_EINVAL also when the candidates of positive weight have fewer
 * than q distinct positions. */
int bk_learn_kmeans(const double *x, const double *w, size_t m, size_t d,
                    size_t q, int max_iter, double *centroids, size_t *pick,
                    size_t *label);

/* Kriging believer: picks q distinct candidates among x (m x d) for the
 * process gp fitted to the n = gp->n training points u, y (as given to
 * bk_gp_new): the smallest U, then, after adding that point with its
 * predicted mean as value and refitting with the same kernel, trend,
 * lengths, nugget and sigma2, the smallest U again, and so on (ties to the
 * lower index). Writes pick[0..q). Returns 0, BK_EINVAL (q = 0 or above
 * m), BK_ENOMEM, or an error of bk_gp_new or bk_gp_predict. */
int bk_learn_believer(const bk_gp_t *gp, const double *u, const double *y,
                      const double *x, size_t m, size_t q, size_t *pick);

/* A mean and its coefficient of variation. */
typedef struct {
  double mean;
  double cov; /* sd of the estimator / mean; inf when mean is 0 */
  size_t n;
} bk_learn_est_t;

/* Pf_eps from pi at n samples of phi: mean and cov of the mean (sample
 * variance with n - 1). n >= 2. */
void bk_learn_pf_eps(const double *pi, size_t n, bk_learn_est_t *out);

/* alpha_corr from n samples of h: fail[i] (nonzero when g <= 0 there) and
 * pi[i] > 0 at the same points. Returns 0, or BK_EINVAL when n < 2 or a
 * failed point has pi = 0 (then the sample cannot be from h). */
int bk_learn_alpha(const int *fail, const double *pi, size_t n,
                   bk_learn_est_t *out);

/* Pf = Pf_eps * alpha_corr and its cov sqrt(d1^2 + d2^2 + d1^2 d2^2). */
void bk_learn_metais(const bk_learn_est_t *pf_eps, const bk_learn_est_t *alpha,
                     bk_learn_est_t *pf);

/* alpha_loo from the n training values y and their leave-one-out means
 * and standard deviations (mean_i = y_i - resid_i and the variance of the
 * process, i.e. var_i less the noise sigma2 * nugget, from bk_gp_loo).
 * +inf when a failed point has pi_-i = 0; 0 without failed points. */
double bk_learn_alpha_loo(const double *y, const double *loo_mean,
                          const double *loo_sd, size_t n);

#endif
