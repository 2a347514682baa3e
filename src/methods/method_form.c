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
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/method_impl.h"
#include "numerics/special.h"
#include "base/stop.h"

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

typedef struct {
  const bk_study_t *s;
  bk_evaluator_t *ev;
  const bk_method_opts_t *opts;
  bk_result_t *res;
  bk_error_t *err;
  size_t nu, nd; /* u dimension; difference points per gradient */
  bk_point_t *pts;
  double *xs, *ys, *us; /* cap points */
  uint64_t *idx;
  double *g;
  int *fault;
  size_t cap;
  uint64_t failures;
  uint64_t planned;
} form_t;

static double dot(const double *a, const double *b, size_t n) {
  double s = 0;
  for (size_t i = 0; i < n; i++)
    s += a[i] * b[i];
  return s;
}

static int grow(form_t *f, size_t n) {
  if (n <= f->cap)
    return 0;
  size_t ny = f->s->model.noutputs;
  bk_free(f->pts);
  bk_free(f->xs);
  bk_free(f->ys);
  bk_free(f->us);
  bk_free(f->idx);
  bk_free(f->g);
  bk_free(f->fault);
  f->pts = bk_calloc(n, sizeof *f->pts);
  f->idx = bk_calloc(n, sizeof *f->idx);
  f->g = bk_calloc(n, sizeof *f->g);
  f->fault = bk_calloc(n, sizeof *f->fault);
  f->xs = bk_calloc(n * (f->s->nvars ? f->s->nvars : 1), sizeof *f->xs);
  f->ys = ny ? bk_calloc(n * ny, sizeof *f->ys) : NULL;
  f->us = bk_calloc(n * f->nu, sizeof *f->us);
  f->cap = n;
  if (!f->pts || !f->xs || (ny && !f->ys) || !f->us || !f->idx || !f->g ||
      !f->fault) {
    f->cap = 0;
    return bk_error_set(f->err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  }
  return 0;
}

/* Evaluates the n points f->us[0..n) (u-space) under prefix/idx[i],
 * writing g[i] (NaN on a fault) and fault[i]. Counts evaluations, failures
 * and model errors; with on_error abort a fault is an error naming the
 * key. */
static int evaluate(form_t *f, const char *prefix, const uint64_t *idx,
                    size_t n, double *g, int *fault) {
  const bk_study_t *s = f->s;
  size_t ny = s->model.noutputs;
  for (size_t i = 0; i < n; i++) {
    bk_point_t *p = &f->pts[i];
    p->index = idx[i];
    p->x = f->xs + i * s->nvars;
    p->y = ny ? f->ys + i * ny : NULL;
    bk_transform_u_to_x(s->transform, f->us + i * f->nu, p->x);
    p->g = NAN;
    p->fault = BK_FAULT_NONE;
  }
  int rc = f->ev->batch(f->ev, prefix, f->pts, n, f->err);
  if (rc)
    return rc;
  f->res->evaluations += n;
  for (size_t i = 0; i < n; i++) {
    const bk_point_t *p = &f->pts[i];
    fault[i] = p->fault;
    g[i] = p->fault ? NAN : p->g;
    if (p->fault) {
      f->res->model_errors++;
      if (s->model.on_error == BK_ON_ERROR_ABORT)
        return bk_error_set(f->err, BK_EMODEL, NULL, 0, 0,
                            "model error (%s) at %s/%llu and model.on_error "
                            "is abort",
                            bk_fault_name(p->fault), prefix,
                            (unsigned long long)p->index);
    } else if (p->g <= 0) {
      f->failures++;
    }
  }
  if (f->opts && f->opts->progress)
    f->opts->progress(f->opts->progress_data, f->res, f->planned);
  if (bk_stop_requested())
    return BK_ESTOPPED;
  return 0;
}

/* The gradient at u by differences under `prefix`, points from index 1.
 * With `with0` point 0 (u itself) goes into the same batch and *g0,
 * *fault0 receive its result (a faulted point 0 ends the call with no
 * gradient); otherwise *g0 is given. Faulted gradient points are retried
 * with half the step under new indices; after GRAD_RETRIES the search
 * fails, naming the key. */
static int gradient(form_t *f, const char *prefix, const double *u, int with0,
                    double *g0, int *fault0, double *grad) {
  size_t nu = f->nu, nd = f->nd;
  int rc = grow(f, nd + 1);
  if (rc)
    return rc;
  uint64_t *idx = f->idx;
  double *g = f->g;
  int *fault = f->fault;
  double h = f->s->analysis.form.step;
  for (int r = 0; r <= GRAD_RETRIES; r++, h /= 2) {
    size_t o = with0 && r == 0 ? 1 : 0;
    if (o) {
      memcpy(f->us, u, nu * sizeof *u);
      idx[0] = 0;
    }
    for (size_t j = 0; j < nd; j++) {
      double *p = f->us + (o + j) * nu;
      memcpy(p, u, nu * sizeof *p);
      p[j % nu] += j < nu ? h : -h;
      idx[o + j] = 1 + (uint64_t)r * nd + j;
    }
    if ((rc = evaluate(f, prefix, idx, o + nd, g, fault)))
      return rc;
    if (o) {
      *g0 = g[0];
      *fault0 = fault[0];
      if (fault[0])
        return 0;
    }
    size_t bad = nd;
    for (size_t j = 0; j < nd && bad == nd; j++)
      if (fault[o + j])
        bad = j;
    if (bad == nd) {
      const double *gd = g + o;
      for (size_t j = 0; j < nu; j++)
        grad[j] = nd > nu ? (gd[j] - gd[nu + j]) / (2 * h) : (gd[j] - *g0) / h;
      return 0;
    }
    if (r == GRAD_RETRIES)
      return bk_error_set(f->err, BK_EMODEL, NULL, 0, 0,
                          "FORM: the model failed (%s) at the gradient point "
                          "%s/%llu, also after %d retries with smaller "
                          "steps; the records say why",
                          bk_fault_name(fault[o + bad]), prefix,
                          (unsigned long long)idx[o + bad], GRAD_RETRIES);
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

/* Breitung's SORM at the design point u* = beta alpha: an orthonormal
 * basis r_1..r_m (m = nu - 1) of the tangent plane by Gram-Schmidt from
 * alpha and the unit vectors, the Hessian of g in that basis by second
 * differences as one batch "form/h", the curvature matrix H / |grad g|,
 * its eigenvalues kappa_i, and Pf = Phi(-beta) prod (1 + beta kappa_i)^-1/2
 * (Breitung 1984). */
static int sorm(form_t *f, const double *u, double g0, const double *alpha,
                double gnorm, double beta) {
  size_t nu = f->nu, m = nu - 1;
  bk_result_t *res = f->res;
  if (m == 0) {
    res->dp.pf_sorm = res->dp.pf_form;
    return 0;
  }
  int rc;
  double *basis = bk_calloc(nu * nu, sizeof *basis);
  double *hm = bk_calloc(m * m, sizeof *hm);
  double *kappa = bk_calloc(m, sizeof *kappa);
  size_t npts = 2 * m + 2 * m * (m - 1);
  uint64_t *idx = bk_calloc(npts, sizeof *idx);
  double *g = bk_calloc(npts, sizeof *g);
  int *fault = bk_calloc(npts, sizeof *fault);
  if (!basis || !hm || !kappa || !idx || !g || !fault) {
    rc = bk_error_set(f->err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  /* Row 0 is alpha, rows 1..m the tangent basis. */
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
  if ((rc = grow(f, npts)))
    goto out;
  /* Points: u +- h r_i (2 m), then u + h (+-r_i +-r_j) for i < j. Second
   * differences amplify noise by 1/h^2, so the step is ten times the
   * gradient step. */
  double h = 10 * f->s->analysis.form.step;
  size_t k = 0;
  for (size_t i = 0; i < m; i++)
    for (int sg = 1; sg >= -1; sg -= 2, k++) {
      const double *r = basis + (1 + i) * nu;
      for (size_t d = 0; d < nu; d++)
        f->us[k * nu + d] = u[d] + sg * h * r[d];
    }
  for (size_t i = 0; i < m; i++)
    for (size_t j = i + 1; j < m; j++)
      for (int si = 1; si >= -1; si -= 2)
        for (int sj = 1; sj >= -1; sj -= 2, k++) {
          const double *ri = basis + (1 + i) * nu, *rj = basis + (1 + j) * nu;
          for (size_t d = 0; d < nu; d++)
            f->us[k * nu + d] = u[d] + h * (si * ri[d] + sj * rj[d]);
        }
  for (size_t i = 0; i < npts; i++)
    idx[i] = i;
  if ((rc = evaluate(f, "form/h", idx, npts, g, fault)))
    goto out;
  for (size_t i = 0; i < npts; i++)
    if (fault[i]) {
      bk_result_warn(res,
                      "SORM skipped: the model failed (%s) at the curvature "
                      "point form/h/%zu",
                      bk_fault_name(fault[i]), i);
      goto out;
    }
  k = 0;
  for (size_t i = 0; i < m; i++, k += 2)
    hm[i * m + i] = (g[k] - 2 * g0 + g[k + 1]) / (h * h);
  for (size_t i = 0; i < m; i++)
    for (size_t j = i + 1; j < m; j++, k += 4) {
      double v = (g[k] - g[k + 1] - g[k + 2] + g[k + 3]) / (4 * h * h);
      hm[i * m + j] = hm[j * m + i] = v;
    }
  for (size_t i = 0; i < m * m; i++)
    hm[i] /= gnorm;
  jacobi_eigenvalues(hm, m, kappa);
  double factor = 1;
  int valid = 1;
  for (size_t i = 0; i < m; i++) {
    double t = 1 + beta * kappa[i];
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
  for (size_t i = 0; i < m; i++) {
    char label[64];
    snprintf(label, sizeof label, "curvature %zu", i + 1);
    bk_result_detail(res, label, kappa[i]);
  }
out:
  bk_free(basis);
  bk_free(hm);
  bk_free(kappa);
  bk_free(idx);
  bk_free(g);
  bk_free(fault);
  return rc;
}

/* Importance factors of the variables: gamma = alpha^T L^-1 in the
 * correlated standard normals z_i = Phi^-1(F_i(x_i)), normalised (Der
 * Kiureghian 2005, from memory); gamma = alpha without correlations.
 * Column i of L^-1 is the u of the point with z = e_i, found through the
 * transform itself since u depends linearly on z. */
static void importance_factors(form_t *f, const double *alpha) {
  const bk_study_t *s = f->s;
  size_t nu = f->nu, nv = s->nvars;
  double *x = f->xs, *col = f->us, *a2 = f->res->dp.alpha2;
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
    double gmm = dot(alpha, col, nu);
    a2[i] = gmm * gmm;
    sum += a2[i];
    ui++;
  }
  for (size_t i = 0; sum > 0 && i < nv; i++)
    a2[i] /= sum;
}

int bk__form_search(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err) {
  form_t f;
  memset(&f, 0, sizeof f);
  f.s = s;
  f.ev = ev;
  f.opts = opts;
  f.res = res;
  f.err = err;
  f.nu = bk_transform_nu(s->transform);
  const bk_form_opts_t *fo = &s->analysis.form;
  size_t nu = f.nu;
  if (nu == 0)
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "every variable is a constant: there is no design "
                        "point to search; give at least one variable a "
                        "distribution");
  f.nd = fo->central ? 2 * nu : nu;
  f.planned = (uint64_t)fo->max_iterations * (f.nd + 1);
  int rc = bk_result_design_point(res, nu, s->nvars);
  if (rc)
    return bk_error_set(err, rc, NULL, 0, 0, "out of memory");
  double *work = bk_calloc(7 * nu, sizeof *work);
  if (!work || grow(&f, f.nd + 1)) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  double *u = work, *grad = work + nu, *alpha = work + 2 * nu;
  double *cand = work + 3 * nu, *d = work + 4 * nu, *cgrad = work + 5 * nu;
  double *prev = work + 6 * nu;
  double g = NAN, g_scale = 1, beta = NAN, gnorm = NAN;
  double merit0 = 0, slope = 0, c = 0, lambda = 1;
  int halvings = 0, have_prev = 0, converged = 0, iterations = 0;
  int capped = 0;         /* stopped by max_iterations or max_evaluations */
  const char *why = NULL; /* why the search ended without converging */
  char prefix[48];
  memset(cand, 0, nu * sizeof *cand); /* start at the medians, u = 0 */
  for (uint64_t k = 0;; k++) {
    if (iterations >= fo->max_iterations) {
      why = "max_iterations reached";
      capped = 1;
      break;
    }
    if (res->evaluations + f.nd + 1 > s->analysis.max_evaluations) {
      why = "max_evaluations reached";
      capped = 1;
      break;
    }
    snprintf(prefix, sizeof prefix, "form/i%llu", (unsigned long long)k);
    /* Point 0 is the candidate. A full step evaluates it together with
     * its gradient points (one batch, the usual case); during a line
     * search it goes alone, and the gradient follows if it is accepted. */
    int speculative = halvings == 0;
    int fault0 = 0;
    double gc = NAN;
    if (speculative) {
      rc = gradient(&f, prefix, cand, 1, &gc, &fault0, cgrad);
    } else {
      uint64_t i0 = 0;
      memcpy(f.us, cand, nu * sizeof *cand);
      rc = evaluate(&f, prefix, &i0, 1, &gc, &fault0);
    }
    if (rc)
      goto out;
    double mc = 0.5 * dot(cand, cand, nu) + c * fabs(gc);
    if (!have_prev) {
      if (fault0) {
        rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                          "FORM: the model failed (%s) at the medians (key "
                          "%s/0); the search cannot start",
                          bk_fault_name(fault0), prefix);
        goto out;
      }
      g_scale = gc != 0 && isfinite(gc) ? fabs(gc) : 1;
    } else if (fault0 || !(mc <= merit0 + ARMIJO * lambda * slope)) {
      /* Rejected: halve the step from the accepted iterate. */
      if (++halvings > MAX_HALVINGS) {
        why = "the line search found no step that lowers the merit "
              "function";
        break;
      }
      lambda /= 2;
      for (size_t i = 0; i < nu; i++)
        cand[i] = prev[i] + lambda * d[i];
      continue;
    }
    if (!speculative && (rc = gradient(&f, prefix, cand, 0, &gc, NULL, cgrad)))
      goto out;
    memcpy(u, cand, nu * sizeof *u);
    memcpy(grad, cgrad, nu * sizeof *grad);
    g = gc;
    iterations++;
    have_prev = 1;
    halvings = 0;
    gnorm = sqrt(dot(grad, grad, nu));
    if (!(gnorm > 0) || !isfinite(gnorm)) {
      why = "the gradient of g vanishes at the iterate, so there is no "
            "direction towards failure";
      break;
    }
    for (size_t i = 0; i < nu; i++)
      alpha[i] = -grad[i] / gnorm;
    beta = dot(alpha, u, nu);
    double off = 0;
    for (size_t i = 0; i < nu; i++) {
      double t = u[i] - beta * alpha[i];
      off += t * t;
    }
    if (fabs(g) / g_scale <= fo->tolerance && sqrt(off) <= fo->tolerance) {
      converged = 1;
      break;
    }
    /* HL-RF direction: to the foot of the linearised surface. */
    double t = (dot(grad, u, nu) - g) / (gnorm * gnorm);
    for (size_t i = 0; i < nu; i++)
      d[i] = t * grad[i] - u[i];
    /* Keep the step inside the R_MAX ball. */
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
    c = 2 * (nuu + fabs(g) / gnorm) / gnorm;
    merit0 = 0.5 * nuu * nuu + c * fabs(g);
    double sg = g > 0 ? 1 : (g < 0 ? -1 : 0);
    slope = 0;
    for (size_t i = 0; i < nu; i++)
      slope += (u[i] + c * sg * grad[i]) * d[i];
    if (slope > 0)
      slope = 0;
    lambda = 1;
    memcpy(prev, u, nu * sizeof *prev);
  }
  res->est.failures += f.failures;
  /* The result: the last accepted iterate. */
  bk_design_point_t *dp = &res->dp;
  dp->converged = converged;
  dp->iterations = iterations;
  memcpy(dp->u, u, nu * sizeof *u);
  bk_transform_u_to_x(s->transform, u, dp->x);
  if (isfinite(beta)) {
    dp->beta = beta;
    dp->pf_form = bk_norm_cdf(-beta);
    importance_factors(&f, alpha);
  } else {
    dp->beta = NAN;
    dp->pf_form = NAN;
  }
  if (!converged) {
    if (f.failures == 0 && !capped) {
      bk_result_warn(res,
                      "FORM found no failure domain: none of the %llu "
                      "evaluations had g <= 0 (%s). The limit state may "
                      "never fail, or fail only far out (beta > %g); check "
                      "the limit state",
                      (unsigned long long)res->evaluations, why, R_MAX);
      dp->beta = NAN;
      dp->pf_form = NAN;
      memset(dp->alpha2, 0, s->nvars * sizeof *dp->alpha2);
    } else {
      bk_result_warn(res,
                      "FORM did NOT converge (%s after %d iterations; "
                      "tolerance %g): beta and Pf are those of the last "
                      "iterate, not of a design point",
                      why, iterations, fo->tolerance);
    }
    res->stop_reason = why;
  } else {
    res->stop_reason = "design point converged";
    if (fo->sorm && (rc = sorm(&f, u, g, alpha, gnorm, beta)))
      goto out;
  }
  if (!converged && fo->sorm)
    bk_result_warn(res, "SORM skipped: FORM did not converge");
  rc = 0;
out:
  bk_free(work);
  bk_free(f.pts);
  bk_free(f.xs);
  bk_free(f.ys);
  bk_free(f.us);
  bk_free(f.idx);
  bk_free(f.g);
  bk_free(f.fault);
  return rc;
}

int bk__method_form(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err) {
  int rc = bk__form_search(s, ev, opts, res, err);
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
