/*
 * FORM: the design point, the point of the failure surface g = 0 closest
 * to the origin of standard normal space, found by the improved HL-RF
 * iteration (Hasofer & Lind 1974; Rackwitz & Fiessler 1978; Zhang & Der
 * Kiureghian 1997), and optionally Breitung's (1984) SORM correction from
 * the principal curvatures there.
 *
 * Keys. Iteration batch k is "form/iK": point 0 is the iterate, points
 * 1..nu the forward steps u + h e_j (central: 1..2nu, u + h e_j then
 * u - h e_j). A gradient point that faults is retried with half the step
 * under the next free indices (1 + r nd + j for retry r), so every key
 * names one evaluation. After a rejected step the line search evaluates
 * only point 0 of the next batch, then its gradient points under the same
 * prefix. The SORM curvature batch is "form/h". The path is a pure
 * function of the study and the responses, so a resumed run replays the
 * same keys and ends on the same design point.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "numerics/special.h"

/* Iterates stay inside this radius in u-space: Phi(-20) is about 3e-89, so
 * a design point further out means no failure worth reporting. */
#define R_MAX 20.0
/* Step halvings of the line search before giving up. */
#define MAX_HALVINGS 10
/* Armijo constant of the line search, 1/2 as in Zhang & Der Kiureghian
 * (1997). (The optimisation textbooks' 1e-4 accepts every plain HL-RF
 * step, which on curved surfaces creeps towards the design point; the
 * half steps that 1/2 forces there converge in fewer iterations.) */
#define ARMIJO 0.5
/* Gradient retries with half the step after a faulted gradient point. */
#define GRAD_RETRIES 3

/* The state of one search. Vectors have nu entries: u, grad, alpha are
 * the accepted iterate, its gradient and -grad / |grad|; cand and cgrad
 * the candidate and its gradient; d the step from prev, the iterate the
 * line search starts from; tmp one point of a batch. x holds nvars. */
typedef struct {
  bk_mctx_t *m;
  const bk_form_opts_t *fo;
  size_t nu, nd; /* u dimension; difference points per gradient */
  double *work;  /* owns every vector below */
  double *u, *grad, *alpha, *cand, *cgrad, *d, *prev, *tmp, *x;
  double g, g_scale, beta, gnorm; /* at the accepted iterate */
  /* Line search: the merit at prev, its slope along d, the merit's
   * weight c on |g|, and the step length lambda. */
  double merit0, slope, c, lambda;
  int halvings, have_prev;
  int converged, iterations;
  int capped;         /* stopped by max_iterations or max_evaluations */
  const char *why;    /* why the search ended without converging */
  uint64_t failures0; /* failures of the context before the search */
} form_t;

static double dot(const double *a, const double *b, size_t n) {
  double s = 0;
  for (size_t i = 0; i < n; i++)
    s += a[i] * b[i];
  return s;
}

/* Evaluates points [0, n) of the context's batch and reports progress. */
static int evaluate(form_t *f, const char *prefix, size_t n) {
  int rc = bk_mctx_evaluate(f->m, prefix, n);
  if (rc == 0)
    bk_mctx_progress(f->m);
  return rc;
}

/* The gradient at u by differences under `prefix`, points from index 1.
 * With `with0` point 0 (u itself) goes into the same batch and *g0,
 * *fault0 receive its result (a faulted point 0 ends the call with no
 * gradient); otherwise *g0 is given. Faulted gradient points are retried
 * with half the step under new indices; after GRAD_RETRIES the search
 * fails, naming the key. */
static int gradient(form_t *f, const char *prefix, const double *u, int with0,
                    double *g0, int *fault0, double *grad) {
  bk_mctx_t *m = f->m;
  size_t nu = f->nu, nd = f->nd;
  int rc = bk_mctx_reserve(m, nd + 1);
  if (rc)
    return rc;
  double h = f->fo->step;
  for (int r = 0; r <= GRAD_RETRIES; r++, h /= 2) {
    size_t o = with0 && r == 0 ? 1 : 0;
    if (o)
      bk_mctx_set_u(m, 0, 0, u);
    for (size_t j = 0; j < nd; j++) {
      memcpy(f->tmp, u, nu * sizeof *u);
      f->tmp[j % nu] += j < nu ? h : -h;
      bk_mctx_set_u(m, o + j, 1 + (uint64_t)r * nd + j, f->tmp);
    }
    if ((rc = evaluate(f, prefix, o + nd)))
      return rc;
    const bk_point_t *p = m->pts;
    if (o) {
      *fault0 = p[0].fault;
      *g0 = p[0].fault ? NAN : p[0].g;
      if (p[0].fault)
        return 0;
    }
    size_t bad = nd;
    for (size_t j = 0; j < nd && bad == nd; j++)
      if (p[o + j].fault)
        bad = j;
    if (bad == nd) {
      const bk_point_t *pd = p + o;
      for (size_t j = 0; j < nu; j++)
        grad[j] =
            nd > nu ? (pd[j].g - pd[nu + j].g) / (2 * h) : (pd[j].g - *g0) / h;
      return 0;
    }
    if (r == GRAD_RETRIES)
      return bk_error_set(m->err, BK_EMODEL, NULL, 0, 0,
                          "FORM: the model failed (%s) at the gradient point "
                          "%s/%llu, also after %d retries with smaller "
                          "steps; the records say why",
                          bk_fault_name(p[o + bad].fault), prefix,
                          (unsigned long long)p[o + bad].index, GRAD_RETRIES);
  }
  return 0;
}

/* Eigenvalues of the symmetric n x n matrix a (row-major, destroyed) by
 * cyclic Jacobi rotations (Golub & Van Loan, Matrix Computations,
 * section 8.5), into ev[n]. */
static void jacobi_eigenvalues(double *a, size_t n, double *ev) {
  for (int sweep = 0; sweep < 100; sweep++) {
    double off = 0;
    for (size_t p = 0; p < n; p++)
      for (size_t q = p + 1; q < n; q++)
        off += a[p * n + q] * a[p * n + q];
    if (off < 1e-300)
      break;
    for (size_t p = 0; p < n; p++)
      for (size_t q = p + 1; q < n; q++) {
        double apq = a[p * n + q];
        if (apq == 0)
          continue;
        double theta = (a[q * n + q] - a[p * n + p]) / (2 * apq);
        double t =
            (theta >= 0 ? 1 : -1) / (fabs(theta) + sqrt(theta * theta + 1));
        double c = 1 / sqrt(t * t + 1), sn = t * c;
        for (size_t k = 0; k < n; k++) {
          double akp = a[k * n + p], akq = a[k * n + q];
          a[k * n + p] = c * akp - sn * akq;
          a[k * n + q] = sn * akp + c * akq;
        }
        for (size_t k = 0; k < n; k++) {
          double apk = a[p * n + k], aqk = a[q * n + k];
          a[p * n + k] = c * apk - sn * aqk;
          a[q * n + k] = sn * apk + c * aqk;
        }
      }
  }
  for (size_t i = 0; i < n; i++)
    ev[i] = a[i * n + i];
}

/* An orthonormal basis of u-space into the rows of basis (nu x nu): row 0
 * is alpha (a unit vector), rows 1..nu-1 span the tangent plane, by
 * Gram-Schmidt (twice, for accuracy) from the unit vectors, skipping those
 * nearly parallel to the rows so far. */
static void tangent_basis(const double *alpha, size_t nu, double *basis) {
  memcpy(basis, alpha, nu * sizeof *basis);
  size_t nb = 1;
  for (size_t e = 0; e < nu && nb < nu; e++) {
    double *v = basis + nb * nu;
    memset(v, 0, nu * sizeof *v);
    v[e] = 1;
    for (int pass = 0; pass < 2; pass++)
      for (size_t b = 0; b < nb; b++) {
        double c = dot(v, basis + b * nu, nu);
        for (size_t i = 0; i < nu; i++)
          v[i] -= c * basis[b * nu + i];
      }
    double nv = sqrt(dot(v, v, nu));
    if (nv < 1e-6)
      continue;
    for (size_t i = 0; i < nu; i++)
      v[i] /= nv;
    nb++;
  }
}

/* Sets the curvature batch around u with step h along the tangent rows
 * r_1..r_m of basis: u +- h r_i (2 m points), then u + h (+-r_i +-r_j)
 * for i < j (4 each), key indices in that order. Returns the count. */
static size_t curvature_points(form_t *f, const double *u, const double *basis,
                               double h) {
  size_t nu = f->nu, m = nu - 1, k = 0;
  double *p = f->tmp;
  for (size_t i = 0; i < m; i++)
    for (int sg = 1; sg >= -1; sg -= 2, k++) {
      const double *r = basis + (1 + i) * nu;
      for (size_t d = 0; d < nu; d++)
        p[d] = u[d] + sg * h * r[d];
      bk_mctx_set_u(f->m, k, k, p);
    }
  for (size_t i = 0; i < m; i++)
    for (size_t j = i + 1; j < m; j++)
      for (int si = 1; si >= -1; si -= 2)
        for (int sj = 1; sj >= -1; sj -= 2, k++) {
          const double *ri = basis + (1 + i) * nu, *rj = basis + (1 + j) * nu;
          for (size_t d = 0; d < nu; d++)
            p[d] = u[d] + h * (si * ri[d] + sj * rj[d]);
          bk_mctx_set_u(f->m, k, k, p);
        }
  return k;
}

/* The principal curvatures kappa (m values) from the evaluated curvature
 * batch: the Hessian of g in the tangent basis by second differences
 * (hm, m x m work space), divided by |grad g|, and its eigenvalues. */
static void curvatures(const form_t *f, double g0, double gnorm, double h,
                       double *hm, double *kappa) {
  size_t m = f->nu - 1, k = 0;
  const bk_point_t *p = f->m->pts;
  for (size_t i = 0; i < m; i++, k += 2)
    hm[i * m + i] = (p[k].g - 2 * g0 + p[k + 1].g) / (h * h);
  for (size_t i = 0; i < m; i++)
    for (size_t j = i + 1; j < m; j++, k += 4) {
      double v = (p[k].g - p[k + 1].g - p[k + 2].g + p[k + 3].g) / (4 * h * h);
      hm[i * m + j] = hm[j * m + i] = v;
    }
  for (size_t i = 0; i < m * m; i++)
    hm[i] /= gnorm;
  jacobi_eigenvalues(hm, m, kappa);
}

/* Breitung's SORM at the converged design point u* = beta alpha: the
 * tangent basis, the Hessian of g in it as one batch "form/h", the
 * curvatures kappa_i, and Pf = Phi(-beta) prod (1 + beta kappa_i)^-1/2
 * (Breitung 1984) into res->dp.pf_sorm, the curvatures as details. A
 * faulted curvature point, or some 1 + beta kappa_i <= 0, leaves pf_sorm
 * NaN with a warning saying why. */
static int sorm(form_t *f) {
  size_t nu = f->nu, m = nu - 1;
  bk_result_t *res = f->m->res;
  if (m == 0) {
    res->dp.pf_sorm = res->dp.pf_form;
    return 0;
  }
  int rc;
  double *basis = bk_calloc(nu * nu, sizeof *basis);
  double *hm = bk_calloc(m * m, sizeof *hm);
  double *kappa = bk_calloc(m, sizeof *kappa);
  if (!basis || !hm || !kappa) {
    rc = bk_mctx_nomem(f->m);
    goto out;
  }
  tangent_basis(f->alpha, nu, basis);
  if ((rc = bk_mctx_reserve(f->m, 2 * m + 2 * m * (m - 1))))
    goto out;
  /* Second differences amplify noise by 1/h^2, so the step is ten times
   * the gradient step. */
  double h = 10 * f->fo->step;
  size_t npts = curvature_points(f, f->u, basis, h);
  if ((rc = evaluate(f, "form/h", npts)))
    goto out;
  for (size_t i = 0; i < npts; i++)
    if (f->m->pts[i].fault) {
      bk_result_warn(res,
                     "SORM skipped: the model failed (%s) at the curvature "
                     "point form/h/%zu",
                     bk_fault_name(f->m->pts[i].fault), i);
      goto out;
    }
  curvatures(f, f->g, f->gnorm, h, hm, kappa);
  double factor = 1;
  int valid = 1;
  for (size_t i = 0; i < m; i++) {
    double t = 1 + f->beta * kappa[i];
    if (!(t > 0))
      valid = 0;
    else
      factor /= sqrt(t);
  }
  if (valid) {
    res->dp.pf_sorm = res->dp.pf_form * factor;
  } else {
    bk_result_warn(res, "SORM (Breitung) does not apply: a principal "
                        "curvature kappa has 1 + beta kappa <= 0 (the failure "
                        "surface bends round the origin more tightly than "
                        "the beta sphere); use a sampling method");
  }
  for (size_t i = 0; i < m; i++)
    bk_result_detailf(res, kappa[i], "curvature %zu", i + 1);
out:
  bk_free(basis);
  bk_free(hm);
  bk_free(kappa);
  return rc;
}

/* Importance factors of the variables: gamma = alpha^T L^-1 in the
 * correlated standard normals z_i = Phi^-1(F_i(x_i)), normalised (Der
 * Kiureghian 2005, from memory); gamma = alpha without correlations.
 * Column i of L^-1 is the u of the point with z = e_i, found through the
 * transform itself since u depends linearly on z. */
static void importance_factors(form_t *f) {
  const bk_study_t *s = f->m->s;
  size_t nu = f->nu, nv = s->nvars;
  double *x = f->x, *col = f->tmp, *a2 = f->m->res->dp.alpha2;
  double sum = 0;
  size_t ui = 0;
  for (size_t i = 0; i < nv; i++) {
    a2[i] = 0;
    if (s->vars[i].dist.kind == BK_DIST_CONSTANT)
      continue;
    size_t uk = 0;
    for (size_t k = 0; k < nv; k++) {
      const bk_dist_t *d = &s->vars[k].dist;
      if (d->kind == BK_DIST_CONSTANT)
        x[k] = d->mean;
      else
        x[k] = bk_dist_from_u(d, uk++ == ui ? 1.0 : 0.0);
    }
    bk_transform_x_to_u(s->transform, x, col);
    double gmm = dot(f->alpha, col, nu);
    a2[i] = gmm * gmm;
    sum += a2[i];
    ui++;
  }
  for (size_t i = 0; sum > 0 && i < nv; i++)
    a2[i] /= sum;
}

/* Whether the budget allows another iteration; when not, says why. */
static int budget_left(form_t *f) {
  const bk_study_t *s = f->m->s;
  if (f->iterations >= f->fo->max_iterations)
    f->why = "max_iterations reached";
  else if (f->m->n + f->nd + 1 > s->analysis.max_evaluations)
    f->why = "max_evaluations reached";
  else
    return 1;
  f->capped = 1;
  return 0;
}

/* Evaluates the candidate as point 0 of batch `prefix`. A full step
 * evaluates it together with its gradient points (one batch, the usual
 * case); during a line search it goes alone, and the gradient follows if
 * it is accepted. *gc is its g (NaN on a fault), *fault0 its fault. */
static int evaluate_candidate(form_t *f, const char *prefix, int speculative,
                              double *gc, int *fault0) {
  if (speculative)
    return gradient(f, prefix, f->cand, 1, gc, fault0, f->cgrad);
  int rc = bk_mctx_reserve(f->m, 1);
  if (rc)
    return rc;
  bk_mctx_set_u(f->m, 0, 0, f->cand);
  if ((rc = evaluate(f, prefix, 1)))
    return rc;
  *fault0 = f->m->pts[0].fault;
  *gc = *fault0 ? NAN : f->m->pts[0].g;
  return 0;
}

/* After a rejected candidate: halves the step from the accepted iterate.
 * Returns 0, with the reason set, once MAX_HALVINGS are spent. */
static int shorten_step(form_t *f) {
  if (++f->halvings > MAX_HALVINGS) {
    f->why = "the line search found no step that lowers the merit function";
    return 0;
  }
  f->lambda /= 2;
  for (size_t i = 0; i < f->nu; i++)
    f->cand[i] = f->prev[i] + f->lambda * f->d[i];
  return 1;
}

/* Makes the candidate (with g = gc and its gradient in cgrad) the
 * iterate: alpha, beta and the convergence test, on |g| relative to g at
 * the medians and on the distance of u from the line of the gradient.
 * Returns 1 when the search ends here (converged, or a gradient that
 * vanishes, with the reason set). */
static int accept_candidate(form_t *f, double gc) {
  size_t nu = f->nu;
  memcpy(f->u, f->cand, nu * sizeof *f->u);
  memcpy(f->grad, f->cgrad, nu * sizeof *f->grad);
  f->g = gc;
  f->iterations++;
  f->have_prev = 1;
  f->halvings = 0;
  f->gnorm = sqrt(dot(f->grad, f->grad, nu));
  if (!(f->gnorm > 0) || !isfinite(f->gnorm)) {
    f->why = "the gradient of g vanishes at the iterate, so there is no "
             "direction towards failure";
    return 1;
  }
  for (size_t i = 0; i < nu; i++)
    f->alpha[i] = -f->grad[i] / f->gnorm;
  f->beta = dot(f->alpha, f->u, nu);
  double off = 0;
  for (size_t i = 0; i < nu; i++) {
    double t = f->u[i] - f->beta * f->alpha[i];
    off += t * t;
  }
  if (fabs(f->g) / f->g_scale <= f->fo->tolerance &&
      sqrt(off) <= f->fo->tolerance) {
    f->converged = 1;
    return 1;
  }
  return 0;
}

/* The next full step from the iterate: the HL-RF direction to the foot of
 * the linearised surface, kept inside the R_MAX ball, and the merit
 * function's value and slope there for the line search. */
static void plan_step(form_t *f) {
  size_t nu = f->nu;
  double *u = f->u, *grad = f->grad, *d = f->d, *cand = f->cand;
  double g = f->g, gnorm = f->gnorm;
  double t = (dot(grad, u, nu) - g) / (gnorm * gnorm);
  for (size_t i = 0; i < nu; i++)
    d[i] = t * grad[i] - u[i];
  for (size_t i = 0; i < nu; i++)
    cand[i] = u[i] + d[i];
  double rc2 = sqrt(dot(cand, cand, nu));
  if (rc2 > R_MAX) {
    for (size_t i = 0; i < nu; i++) {
      cand[i] *= R_MAX / rc2;
      d[i] = cand[i] - u[i];
    }
  }
  /* Merit m(u) = |u|^2 / 2 + c |g(u)| with c > |u| / |grad g| (Zhang &
   * Der Kiureghian 1997); adding the linearised distance |g| / |grad g|
   * makes the full step from the origin acceptable on a linear limit
   * state and keeps c |g| independent of the units of g. */
  double nuu = sqrt(dot(u, u, nu));
  f->c = 2 * (nuu + fabs(g) / gnorm) / gnorm;
  f->merit0 = 0.5 * nuu * nuu + f->c * fabs(g);
  double sg = g > 0 ? 1 : (g < 0 ? -1 : 0);
  f->slope = 0;
  for (size_t i = 0; i < nu; i++)
    f->slope += (u[i] + f->c * sg * grad[i]) * d[i];
  if (f->slope > 0)
    f->slope = 0;
  f->lambda = 1;
  memcpy(f->prev, u, nu * sizeof *f->prev);
}

/* The iteration (see the file comment and docs/methods.md): returns 0 when
 * it ended, converged or not (f says how), or a negative code with err
 * set. */
static int iterate(form_t *f) {
  char prefix[48];
  for (uint64_t k = 0; budget_left(f); k++) {
    snprintf(prefix, sizeof prefix, "form/i%llu", (unsigned long long)k);
    int speculative = f->halvings == 0;
    int fault0 = 0;
    double gc = NAN;
    int rc = evaluate_candidate(f, prefix, speculative, &gc, &fault0);
    if (rc)
      return rc;
    double mc = 0.5 * dot(f->cand, f->cand, f->nu) + f->c * fabs(gc);
    if (!f->have_prev) {
      if (fault0)
        return bk_error_set(f->m->err, BK_EMODEL, NULL, 0, 0,
                            "FORM: the model failed (%s) at the medians (key "
                            "%s/0); the search cannot start",
                            bk_fault_name(fault0), prefix);
      f->g_scale = gc != 0 && isfinite(gc) ? fabs(gc) : 1;
    } else if (fault0 || !(mc <= f->merit0 + ARMIJO * f->lambda * f->slope)) {
      /* Rejected: halve the step from the accepted iterate. */
      if (!shorten_step(f))
        return 0;
      continue;
    }
    if (!speculative &&
        (rc = gradient(f, prefix, f->cand, 0, &gc, NULL, f->cgrad)))
      return rc;
    if (accept_candidate(f, gc))
      return 0;
    plan_step(f);
  }
  return 0;
}

/* The result: the last accepted iterate as res->dp, the stop reason, the
 * warnings when it is not a design point, and SORM when asked for. */
static int fill_design_point(form_t *f) {
  const bk_study_t *s = f->m->s;
  bk_result_t *res = f->m->res;
  size_t nu = f->nu;
  uint64_t failures = f->m->failures - f->failures0;
  res->est.failures += failures;
  bk_design_point_t *dp = &res->dp;
  dp->converged = f->converged;
  dp->iterations = f->iterations;
  memcpy(dp->u, f->u, nu * sizeof *f->u);
  bk_transform_u_to_x(s->transform, f->u, dp->x);
  if (isfinite(f->beta)) {
    dp->beta = f->beta;
    dp->pf_form = bk_norm_cdf(-f->beta);
    importance_factors(f);
  } else {
    dp->beta = NAN;
    dp->pf_form = NAN;
  }
  if (f->converged) {
    res->stop_reason = "design point converged";
    return f->fo->sorm ? sorm(f) : 0;
  }
  if (failures == 0 && !f->capped) {
    bk_result_warn(res,
                   "FORM found no failure domain: none of the %llu "
                   "evaluations had g <= 0 (%s). The limit state may "
                   "never fail, or fail only far out (beta > %g); check "
                   "the limit state",
                   (unsigned long long)res->evaluations, f->why, R_MAX);
    dp->beta = NAN;
    dp->pf_form = NAN;
    memset(dp->alpha2, 0, s->nvars * sizeof *dp->alpha2);
  } else {
    bk_result_warn(res,
                   "FORM did NOT converge (%s after %d iterations; "
                   "tolerance %g): beta and Pf are those of the last "
                   "iterate, not of a design point",
                   f->why, f->iterations, f->fo->tolerance);
  }
  res->stop_reason = f->why;
  if (f->fo->sorm)
    bk_result_warn(res, "SORM skipped: FORM did not converge");
  return 0;
}

int bk__form_search(bk_mctx_t *m) {
  const bk_study_t *s = m->s;
  form_t f;
  memset(&f, 0, sizeof f);
  f.m = m;
  f.fo = &s->analysis.form;
  f.nu = m->nu;
  size_t nu = f.nu;
  assert(nu > 0); /* the loader refuses a study of constants only */
  f.nd = f.fo->central ? 2 * nu : nu;
  f.failures0 = m->failures;
  f.g = NAN;
  f.g_scale = 1;
  f.beta = NAN;
  f.gnorm = NAN;
  f.lambda = 1;
  m->planned = (uint64_t)f.fo->max_iterations * (f.nd + 1);
  int rc = bk_result_design_point(m->res, nu, s->nvars);
  if (rc)
    return bk_mctx_nomem(m);
  f.work = bk_calloc(8 * nu + s->nvars, sizeof *f.work);
  if (!f.work) {
    rc = bk_mctx_nomem(m);
    goto out;
  }
  double **vec[] = {&f.u,     &f.grad, &f.alpha, &f.cand,
                    &f.cgrad, &f.d,    &f.prev,  &f.tmp};
  for (size_t i = 0; i < sizeof vec / sizeof vec[0]; i++)
    *vec[i] = f.work + i * nu;
  f.x = f.work + 8 * nu;
  /* The search starts at the medians, u = 0 (cand is zeroed). */
  if ((rc = iterate(&f)) == 0)
    rc = fill_design_point(&f);
out:
  bk_free(f.work);
  return rc;
}

int bk__method_form(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err) {
  bk_mctx_t m;
  bk_mctx_init(&m, s, ev, opts, res, err);
  int rc = bk__form_search(&m);
  if (rc == 0)
    rc = bk_mctx_finish(&m);
  bk_mctx_close(&m);
  if (rc)
    return rc;
  bk_estimate_t *e = &res->est;
  const bk_design_point_t *dp = &res->dp;
  double pf = dp->pf_form;
  e->pf = pf;
  e->beta = dp->beta;
  e->cov = NAN;
  e->ci[0] = e->ci[1] = pf;
  e->ci_exact[0] = e->ci_exact[1] = pf;
  e->beta_ci[0] = e->beta_ci[1] = dp->beta;
  e->ci_level = s->analysis.ci_level;
  e->ci_method = "none (FORM is not a sampling estimate)";
  e->n = res->evaluations;
  res->pf_bounds[0] = res->pf_bounds[1] = pf;
  if (bk_result_push_history(res))
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  return 0;
}
