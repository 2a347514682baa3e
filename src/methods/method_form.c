/*
 * FORM: the design point, the point of the failure surface g = 0 closest
 * to the origin of standard normal space, found by the improved HL-RF
 * iteration (Hasofer & Lind 1974; Rackwitz & Fiessler 1978; Zhang & Der
 * Kiureghian 1997), a look for further design points before one is
 * trusted (exploration), and optionally Breitung's (1984) SORM correction
 * from the principal curvatures at the nearest one.
 *
 * Searches. Search 0 starts at the medians (u = 0); its iteration batch k
 * is "form/iK": point 0 is the iterate, points 1..nu the forward steps
 * u + h e_j (central: 1..2nu, u + h e_j then u - h e_j). A gradient point
 * that faults is retried with half the step under the next free indices
 * (1 + r nd + j for retry r), so every key names one evaluation. After a
 * rejected step the line search evaluates only point 0 of the next batch,
 * then its gradient points under the same prefix. Further searches D >= 1
 * start elsewhere and use "form/dD/iK" in the same layout.
 *
 * Exploration (docs/methods.md). A converged search is a design point only
 * if it is a local minimum of the distance on the surface: the second
 * differences of g along the tangent axes at it (keys "form/h", or
 * "form/dD/h" for search D: u +- h r_i, the first 2 (nu - 1) points of the
 * SORM batch) show a saddle where 1 + beta kappa_ii <= 0, and the search
 * then restarts on both sides along that axis. A probe of points around
 * the beta sphere ("form/p/J": the axes, the mirror of the design point
 * and seeded directions at radius beta + PROBE_MARGIN, or shells of radius
 * 1.5 to 6 when no design point is known) shows failing directions that no
 * design point found explains; a search starts from each such direction,
 * the farthest in angle first, until analysis.form.searches are spent.
 * Above FULL_NU random variables the curvature check and searches by
 * gradients cost too much: the probe has only the mirror and seeded
 * directions, and the report says that further design points cannot be
 * excluded.
 *
 * Memory. Every batch is generated point by point from its key index and
 * handed to the evaluator in chunks of at most CHUNK_DOUBLES inputs, so a
 * SORM batch of 2 (nu - 1)^2 points needs memory for its Hessian alone.
 *
 * The path is a pure function of the study, its seed and the responses,
 * so a resumed run replays the same keys and ends on the same result.
 *
 * SPDX-License-Identifier: MIT
 */
#include <assert.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/fault.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "numerics/linalg.h"
#include "numerics/rng.h"
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
/* Up to this many random variables the exploration checks curvatures and
 * searches by gradients from the probe's directions; above it a check
 * costs more runs than the search itself. */
#define FULL_NU 50
/* The probe's radius beyond the nearest design point: a design point this
 * much further out adds Phi(-(beta + 1.5)) / Phi(-beta) < 4% for beta >= 1
 * (0.25% at beta 3), so one beyond the probe matters little. */
#define PROBE_MARGIN 1.5
/* Without a design point the probe looks at PROBE_SHELLS spheres of radius
 * SHELL_STEP, 2 SHELL_STEP, ... (1.5 to 6: Pf down to about 1e-9). */
#define PROBE_SHELLS 4
#define SHELL_STEP   1.5
/* Iteration cap of each exploration search (at most max_iterations). */
#define EXPLORE_ITERATIONS 30
/* Two converged searches closer than this share of max(1, |beta|) found
 * the same point. */
#define SAME_POINT 0.05
/* Inputs (doubles) one evaluator call holds at most: 16 MiB. */
#define CHUNK_DOUBLES ((size_t)1 << 21)
/* Curvatures listed one by one in the details up to this count (then the
 * smallest and the largest). */
#define MAX_CURVATURE_DETAILS 20

/* What a converged search ended on. */
enum { SPOT_DESIGN, SPOT_SADDLE, SPOT_FAR };

/* A converged search's end point. For a design point, hdiag holds the
 * second derivatives of g along the tangent axes (m = nu - 1 values) once
 * checked; reach is the cosine of the widest angle at which a probe
 * direction led a search here (1: none yet). */
typedef struct {
  int kind;
  int search; /* the search that found it (its keys) */
  int iterations;
  double beta, g, gnorm;
  double log_factor; /* log of Breitung's factor from the tangent axes */
  int checked;       /* the curvature check ran */
  double reach;
  double *u, *alpha, *hdiag; /* owned */
} spot_t;

/* One probe point: its g, whether it lies in the event (fails when the
 * medians are safe), and whether a search started from it. */
typedef struct {
  double g;
  unsigned char event, tried;
} probe_t;

/* The state of the search and the exploration. Vectors have nu entries:
 * u, grad, alpha are the accepted iterate, its gradient and
 * -grad / |grad|; cand and cgrad the candidate and its gradient; d the
 * step from prev, the iterate the line search starts from; tmp one point
 * of a batch; start a search's first point; hw the Householder vector of
 * the tangent basis. x holds nvars. */
typedef struct {
  bk_mctx_t *m;
  const bk_form_opts_t *fo;
  size_t nu, nd; /* u dimension; difference points per gradient */
  double *work;  /* owns every vector below */
  double *u, *grad, *alpha, *cand, *cgrad, *d, *prev, *tmp, *start, *hw, *dir;
  double *x;
  double *gval;                   /* nd gradient-point values */
  int *gfault;                    /* nd gradient-point faults */
  double g, g_scale, beta, gnorm; /* at the accepted iterate */
  /* Line search: the merit at prev, its slope along d, the merit's
   * weight c on |g|, and the step length lambda. */
  double merit0, slope, c, lambda;
  int halvings, have_prev;
  int converged, iterations;
  int capped;      /* stopped by max_iterations or max_evaluations */
  const char *why; /* why the search ended without converging */
  /* The current search. */
  int search, max_it;
  const double *gbase; /* the point a gradient is taken at */
  double g0pt;         /* g of point 0 of a gradient batch */
  int fault0pt;
  /* The medians: g there and its sign (+1 safe, -1 failing). */
  double g_med;
  int sign;
  int zero_grad0; /* the gradient vanished at the medians */
  /* Search 0's end, for the report when no design point is found. */
  double *u0, *alpha0;
  double beta0;
  int converged0, iterations0, capped0, have_u0;
  const char *why0;
  /* Exploration. */
  int phase;        /* FORM is the first phase of importance sampling */
  int full;         /* curvature checks and gradient searches */
  int max_searches; /* analysis.form.searches, resolved */
  int searches;     /* searches made */
  spot_t *spots;
  int nspots;
  double *queue; /* starts waiting, max_searches x nu */
  int nqueue;
  probe_t *probe;
  size_t nprobe, probe_per; /* points, points per shell */
  double probe_radius;      /* 0: shells */
  const spot_t *mirror;     /* the design point the probe mirrors */
  int probe_done;
  size_t curv_dirs;   /* tangent directions checked, over all points */
  int curv_skipped;   /* a check skipped for the budget or a fault */
  uint64_t n_first;   /* evaluations of search 0 */
  uint64_t failures0; /* failures of the context before FORM */
  /* Curvature batches: the point, its tangent basis, the step, and the
   * values gathered (hd: 2m diagonal points; hm: m x m Hessian or NULL). */
  const spot_t *cs;
  double hh, *hd, *hm;
  double hp_sign;       /* sigma of the Householder reflection */
  size_t hp;            /* the axis it maps to alpha */
  long long curv_fault; /* first faulted curvature index, or -1 */
  int curv_fault_kind;
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

/* Generates point `index` of a batch into u (nu values). */
typedef void (*gen_fn)(form_t *f, uint64_t index, double *u);
/* Takes the result of point `index`. */
typedef void (*use_fn)(form_t *f, uint64_t index, const bk_point_t *p);

/* Points per evaluator call, so that their inputs stay within
 * CHUNK_DOUBLES whatever the dimension. */
static size_t chunk_points(const form_t *f) {
  size_t w = f->m->s->nvars > f->nu ? f->m->s->nvars : f->nu;
  size_t c = CHUNK_DOUBLES / (w ? w : 1);
  return c < 64 ? 64 : c;
}

/* Evaluates the points of key indices [first, first + n) under `prefix`,
 * generated by index, in evaluator calls of at most chunk_points. */
static int eval_range(form_t *f, const char *prefix, uint64_t first, uint64_t n,
                      gen_fn gen, use_fn use) {
  size_t chunk = chunk_points(f);
  while (n > 0) {
    size_t c = n < chunk ? (size_t)n : chunk;
    int rc = bk_mctx_reserve(f->m, c);
    if (rc)
      return rc;
    for (size_t i = 0; i < c; i++) {
      gen(f, first + i, f->tmp);
      bk_mctx_set_u(f->m, i, first + i, f->tmp);
    }
    if ((rc = evaluate(f, prefix, c)))
      return rc;
    for (size_t i = 0; i < c; i++)
      use(f, first + i, &f->m->pts[i]);
    first += c;
    n -= c;
  }
  return 0;
}

/* Gradient batches: index 0 is the point itself, 1 + r nd + j the
 * difference point j of retry r, with the step halved r times. */
static void gen_gradient(form_t *f, uint64_t index, double *u) {
  memcpy(u, f->gbase, f->nu * sizeof *u);
  if (index == 0)
    return;
  uint64_t r = (index - 1) / f->nd, j = (index - 1) % f->nd;
  double h = ldexp(f->fo->step, -(int)r);
  u[j % f->nu] += j < f->nu ? h : -h;
}

static void use_gradient(form_t *f, uint64_t index, const bk_point_t *p) {
  if (index == 0) {
    f->fault0pt = p->fault;
    f->g0pt = p->fault ? NAN : p->g;
    return;
  }
  uint64_t j = (index - 1) % f->nd;
  f->gval[j] = p->g;
  f->gfault[j] = p->fault;
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
  f->gbase = u;
  for (int r = 0; r <= GRAD_RETRIES; r++) {
    int w0 = with0 && r == 0;
    uint64_t first = w0 ? 0 : 1 + (uint64_t)r * nd;
    int rc = eval_range(f, prefix, first, nd + (w0 ? 1 : 0), gen_gradient,
                        use_gradient);
    if (rc)
      return rc;
    if (w0) {
      *fault0 = f->fault0pt;
      *g0 = f->g0pt;
      if (f->fault0pt)
        return 0;
    }
    size_t bad = nd;
    for (size_t j = 0; j < nd && bad == nd; j++)
      if (f->gfault[j])
        bad = j;
    double h = ldexp(f->fo->step, -r);
    if (bad == nd) {
      for (size_t j = 0; j < nu; j++)
        grad[j] = nd > nu ? (f->gval[j] - f->gval[nu + j]) / (2 * h)
                          : (f->gval[j] - *g0) / h;
      return 0;
    }
    if (r == GRAD_RETRIES)
      return bk_error_set(f->m->err, BK_EMODEL, NULL, 0, 0,
                          "FORM: the model failed (%s) at the gradient point "
                          "%s/%llu, also after %d retries with smaller "
                          "steps; the records say why",
                          bk_fault_name(f->gfault[bad]), prefix,
                          (unsigned long long)(1 + (uint64_t)r * nd + bad),
                          GRAD_RETRIES);
  }
  return 0;
}

/* ---- curvatures ------------------------------------------------------ */

/* The tangent basis at a point with unit normal alpha, one vector at a
 * time: the Householder reflection H = I - 2 w w^T / (w^T w) with
 * w = alpha + sigma e_p (p the largest |alpha_p|, sigma its sign, so
 * nothing cancels) maps e_p to -sigma alpha, so its other columns
 * r_i = H e_j = e_j - w w_j / (1 + sigma alpha_p) (j running over the
 * axes but p) are orthonormal and orthogonal to alpha (Golub & Van Loan,
 * section 5.1.2). Sets f->hw, hp and hp_sign for tangent(). */
static void tangent_setup(form_t *f, const double *alpha) {
  size_t nu = f->nu, p = 0;
  for (size_t i = 1; i < nu; i++)
    if (fabs(alpha[i]) > fabs(alpha[p]))
      p = i;
  f->hp = p;
  f->hp_sign = alpha[p] >= 0 ? 1 : -1;
  memcpy(f->hw, alpha, nu * sizeof *f->hw);
  f->hw[p] += f->hp_sign;
}

/* Adds c r_i, tangent vector i in [0, nu - 1), to v. */
static void add_tangent(const form_t *f, size_t i, double c, double *v) {
  size_t j = i < f->hp ? i : i + 1;
  /* 1 + sigma alpha_p = sigma (alpha_p + sigma) = sigma w_p. */
  double k = c * f->hw[j] / (f->hp_sign * f->hw[f->hp]);
  for (size_t d = 0; d < f->nu; d++)
    v[d] -= k * f->hw[d];
  v[j] += c;
}

/* The pair (i, j), i < j < m, of cross-term number q in row order. */
static void pair_of(uint64_t q, size_t m, size_t *pi, size_t *pj) {
  /* Row i starts at s(i) = i (2m - i - 1) / 2. */
  double b = 2.0 * (double)m - 1;
  double disc = b * b - 8.0 * (double)q;
  size_t i = (size_t)((b - sqrt(disc > 0 ? disc : 0)) / 2);
#define ROW_START(i) ((uint64_t)(i) * (2 * (uint64_t)m - (i)-1) / 2)
  while (i > 0 && ROW_START(i) > q)
    i--;
  while (i + 1 < m && ROW_START(i + 1) <= q)
    i++;
  *pi = i;
  *pj = i + 1 + (size_t)(q - ROW_START(i));
#undef ROW_START
}

/* The curvature batch of the point f->cs with step f->hh, by index: first
 * u +- h r_i (2m points, index 2i and 2i + 1), then u + h (+-r_i +-r_j)
 * for i < j (4 each, signs ++, +-, -+, --), 2 m^2 points in all. */
static void gen_curvature(form_t *f, uint64_t index, double *u) {
  size_t m = f->nu - 1;
  memcpy(u, f->cs->u, f->nu * sizeof *u);
  if (index < 2 * (uint64_t)m) {
    add_tangent(f, (size_t)(index / 2), index % 2 ? -f->hh : f->hh, u);
    return;
  }
  uint64_t q = (index - 2 * m) / 4, s = (index - 2 * m) % 4;
  size_t i, j;
  pair_of(q, m, &i, &j);
  add_tangent(f, i, s < 2 ? f->hh : -f->hh, u);
  add_tangent(f, j, s % 2 ? -f->hh : f->hh, u);
}

static void use_curvature(form_t *f, uint64_t index, const bk_point_t *p) {
  size_t m = f->nu - 1;
  if (p->fault) {
    if (f->curv_fault < 0) {
      f->curv_fault = (long long)index;
      f->curv_fault_kind = p->fault;
    }
    return;
  }
  if (index < 2 * (uint64_t)m) {
    f->hd[index] = p->g;
    return;
  }
  uint64_t q = (index - 2 * m) / 4, s = (index - 2 * m) % 4;
  size_t i, j;
  pair_of(q, m, &i, &j);
  double c = (s == 0 || s == 3 ? 1.0 : -1.0) / (4 * f->hh * f->hh);
  f->hm[i * m + j] += c * p->g;
}

/* The prefix of search k's keys with `what` ("i3", "h"). */
static void search_prefix(char *out, size_t n, int k, const char *what) {
  if (k == 0)
    snprintf(out, n, "form/%s", what);
  else
    snprintf(out, n, "form/d%d/%s", k, what);
}

/* Evaluates curvature indices [first, first + n) of spot s. Returns 0 (a
 * faulted point sets f->curv_fault) or a negative code. */
static int curvature_batch(form_t *f, spot_t *s, uint64_t first, uint64_t n) {
  char prefix[48];
  search_prefix(prefix, sizeof prefix, s->search, "h");
  f->cs = s;
  /* Second differences amplify noise by 1/h^2, so the step is ten times
   * the gradient step. */
  f->hh = 10 * f->fo->step;
  f->curv_fault = -1;
  tangent_setup(f, s->alpha);
  return eval_range(f, prefix, first, n, gen_curvature, use_curvature);
}

/* The curvature check of a converged point (full exploration): the second
 * differences along the m tangent axes into s->hdiag, the curvatures
 * kappa_ii = hdiag_i / |grad g|, and Breitung's factor from them into
 * s->log_factor. Where some 1 + beta kappa_ii <= 0 the distance has no
 * minimum along that axis: s becomes a saddle and the search restarts on
 * both sides of it along the axis of the smallest 1 + beta kappa_ii. A
 * check that does not fit the budget, or meets a model error, is skipped
 * (the point stays a design point, unchecked). */
static int curvature_check(form_t *f, spot_t *s) {
  size_t nu = f->nu, m = nu - 1;
  const bk_study_t *st = f->m->s;
  if (m == 0)
    return 0;
  if (f->m->n + 2 * m > st->analysis.max_evaluations) {
    f->curv_skipped = 1;
    return 0;
  }
  int rc = curvature_batch(f, s, 0, 2 * m);
  if (rc)
    return rc;
  if (f->curv_fault >= 0) {
    f->curv_skipped = 1;
    return 0;
  }
  s->hdiag = bk_calloc(m, sizeof *s->hdiag);
  if (!s->hdiag)
    return bk_mctx_nomem(f->m);
  f->curv_dirs += m;
  s->checked = 1;
  double worst = INFINITY, lf = 0;
  size_t wi = 0;
  for (size_t i = 0; i < m; i++) {
    s->hdiag[i] =
        (f->hd[2 * i] - 2 * s->g + f->hd[2 * i + 1]) / (f->hh * f->hh);
    double t = 1 + s->beta * s->hdiag[i] / s->gnorm;
    if (t < worst) {
      worst = t;
      wi = i;
    }
    if (t > 0)
      lf -= 0.5 * log(t);
  }
  s->log_factor = lf;
  if (worst > 0)
    return 0;
  s->kind = SPOT_SADDLE;
  double off = fabs(s->beta) / 2 > 1 ? fabs(s->beta) / 2 : 1;
  tangent_setup(f, s->alpha);
  for (int sg = 1; sg >= -1; sg -= 2) {
    if (f->nqueue >= f->max_searches)
      break;
    double *q = f->queue + (size_t)f->nqueue++ * nu;
    memcpy(q, s->u, nu * sizeof *q);
    add_tangent(f, wi, sg * off, q);
  }
  return 0;
}

/* Breitung's SORM at the design point s (res->dp): the curvature batch of
 * s in chunks (its diagonal points reused when the check made them), the
 * Hessian of g in the tangent basis divided by |grad g|, its eigenvalues
 * kappa_i, and Pf = Phi(-beta) prod (1 + beta kappa_i)^-1/2 (Breitung
 * 1984) into res->dp.pf_sorm, the curvatures as details. A faulted
 * curvature point, or some 1 + beta kappa_i <= 0, leaves pf_sorm NaN with
 * a warning saying why. */
static int sorm(form_t *f, spot_t *s) {
  size_t nu = f->nu, m = nu - 1;
  bk_result_t *res = f->m->res;
  if (m == 0) {
    res->dp.pf_sorm = res->dp.pf_form;
    return 0;
  }
  int rc = 0;
  double *kappa = bk_calloc(m, sizeof *kappa);
  f->hm = bk_calloc(m * m, sizeof *f->hm);
  if (!kappa || !f->hm) {
    rc = bk_mctx_nomem(f->m);
    goto out;
  }
  uint64_t ncross = 2 * (uint64_t)m * (m - 1);
  char prefix[48];
  search_prefix(prefix, sizeof prefix, s->search, "h");
  if (s->checked) {
    rc = curvature_batch(f, s, 2 * m, ncross);
  } else {
    rc = curvature_batch(f, s, 0, 2 * m + ncross);
  }
  if (rc)
    goto out;
  if (f->curv_fault >= 0) {
    bk_result_warn(res,
                   "SORM skipped: the model failed (%s) at the curvature "
                   "point %s/%lld",
                   bk_fault_name(f->curv_fault_kind), prefix, f->curv_fault);
    goto out;
  }
  for (size_t i = 0; i < m; i++)
    f->hm[i * m + i] =
        s->checked
            ? s->hdiag[i]
            : (f->hd[2 * i] - 2 * s->g + f->hd[2 * i + 1]) / (f->hh * f->hh);
  for (size_t i = 0; i < m; i++)
    for (size_t j = i + 1; j < m; j++)
      f->hm[j * m + i] = f->hm[i * m + j];
  for (size_t i = 0; i < m * m; i++)
    f->hm[i] /= s->gnorm;
  if ((rc = bk_linalg_sym_eigenvalues(f->hm, m, kappa)) != 0) {
    if (rc == BK_ENOMEM) {
      rc = bk_mctx_nomem(f->m);
      goto out;
    }
    rc = 0;
    bk_result_warn(res, "SORM skipped: the curvatures did not converge");
    goto out;
  }
  double factor = 1;
  int valid = 1;
  for (size_t i = 0; i < m; i++) {
    double t = 1 + s->beta * kappa[i];
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
  if (m <= MAX_CURVATURE_DETAILS) {
    for (size_t i = 0; i < m; i++)
      bk_result_detailf(res, kappa[i], "curvature %zu", i + 1);
  } else {
    double lo = kappa[0], hi = kappa[0];
    for (size_t i = 1; i < m; i++) {
      lo = kappa[i] < lo ? kappa[i] : lo;
      hi = kappa[i] > hi ? kappa[i] : hi;
    }
    bk_result_detail(res, "smallest curvature", lo);
    bk_result_detail(res, "largest curvature", hi);
  }
out:
  bk_free(kappa);
  bk_free(f->hm);
  f->hm = NULL;
  return rc;
}

/* ---- importance factors --------------------------------------------- */

/* Importance factors of the variables: gamma = alpha^T L^-1 in the
 * correlated standard normals z_i = Phi^-1(F_i(x_i)), normalised (Der
 * Kiureghian 2005, from memory); gamma = alpha without correlations.
 * Column i of L^-1 is the u of the point with z = e_i, found through the
 * transform itself since u depends linearly on z. */
static void importance_factors(form_t *f, const double *alpha) {
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
    double gmm = dot(alpha, col, nu);
    a2[i] = gmm * gmm;
    sum += a2[i];
    ui++;
  }
  for (size_t i = 0; sum > 0 && i < nv; i++)
    a2[i] /= sum;
}

/* ---- one search ------------------------------------------------------ */

/* Whether the budget allows another iteration; when not, says why. */
static int budget_left(form_t *f) {
  const bk_study_t *s = f->m->s;
  if (f->iterations >= f->max_it)
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
    if (f->search == 0 && f->iterations == 1) {
      f->zero_grad0 = 1;
      f->why = "the gradient of g vanishes at the medians, so the search "
               "from there has no direction to go";
    } else {
      f->why = "the gradient of g vanishes at the iterate, so there is no "
               "direction towards failure";
    }
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

/* The iteration of search f->search from f->cand (see the file comment
 * and docs/methods.md): returns 0 when it ended, converged or not (f says
 * how), or a negative code with err set. A model error at the medians
 * stops the run; at the start of a later search it only ends that
 * search. */
static int iterate(form_t *f) {
  char prefix[48], what[32];
  for (uint64_t k = 0; budget_left(f); k++) {
    snprintf(what, sizeof what, "i%llu", (unsigned long long)k);
    search_prefix(prefix, sizeof prefix, f->search, what);
    int speculative = f->halvings == 0;
    int fault0 = 0;
    double gc = NAN;
    int rc = evaluate_candidate(f, prefix, speculative, &gc, &fault0);
    if (rc)
      return rc;
    double mc = 0.5 * dot(f->cand, f->cand, f->nu) + f->c * fabs(gc);
    if (!f->have_prev) {
      if (fault0 && f->search == 0)
        return bk_error_set(f->m->err, BK_EMODEL, NULL, 0, 0,
                            "FORM: the model failed (%s) at the medians (key "
                            "%s/0); the search cannot start",
                            bk_fault_name(fault0), prefix);
      if (fault0) {
        f->why = "the model failed at the search's first point";
        return 0;
      }
      if (f->search == 0) {
        f->g_med = gc;
        f->sign = gc > 0 ? 1 : -1;
        f->g_scale = gc != 0 && isfinite(gc) ? fabs(gc) : 1;
      }
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

/* Runs search k from `start` (nu values). */
static int run_search(form_t *f, int k, const double *start) {
  f->search = k;
  f->max_it = f->fo->max_iterations;
  if (k > 0 && f->max_it > EXPLORE_ITERATIONS)
    f->max_it = EXPLORE_ITERATIONS;
  f->have_prev = f->halvings = 0;
  f->converged = f->iterations = f->capped = 0;
  f->why = NULL;
  f->lambda = 1;
  f->c = 0;
  f->g = f->beta = f->gnorm = NAN;
  memcpy(f->cand, start, f->nu * sizeof *f->cand);
  f->searches++;
  return iterate(f);
}

/* ---- exploration ----------------------------------------------------- */

/* Keeps the end of a search in *out: NULL when it did not converge, the
 * earlier spot when it ended on a point found before (within SAME_POINT),
 * else a new spot, a design point unless the curvature check shows a
 * saddle or beta has the wrong sign for the medians (the far side of a
 * failure region: a stationary point, but the distance is largest there
 * along its ray). Returns 0 or a negative code. */
static int finish_search(form_t *f, spot_t **out) {
  *out = NULL;
  if (!f->converged)
    return 0;
  size_t nu = f->nu;
  double tol = SAME_POINT * (fabs(f->beta) > 1 ? fabs(f->beta) : 1);
  for (int i = 0; i < f->nspots; i++) {
    double d2 = 0;
    for (size_t d = 0; d < nu; d++)
      d2 += (f->spots[i].u[d] - f->u[d]) * (f->spots[i].u[d] - f->u[d]);
    if (sqrt(d2) <= tol) {
      *out = &f->spots[i];
      return 0;
    }
  }
  if (f->nspots == f->max_searches)
    return 0;
  spot_t *s = &f->spots[f->nspots];
  memset(s, 0, sizeof *s);
  s->u = bk_calloc(nu, sizeof *s->u);
  s->alpha = bk_calloc(nu, sizeof *s->alpha);
  if (!s->u || !s->alpha) {
    bk_free(s->u);
    bk_free(s->alpha);
    return bk_mctx_nomem(f->m);
  }
  f->nspots++;
  memcpy(s->u, f->u, nu * sizeof *s->u);
  memcpy(s->alpha, f->alpha, nu * sizeof *s->alpha);
  s->beta = f->beta;
  s->g = f->g;
  s->gnorm = f->gnorm;
  s->search = f->search;
  s->iterations = f->iterations;
  s->reach = 2; /* above every cosine: no probe direction led here yet */
  int far = (f->sign > 0 && f->beta < 0) || (f->sign < 0 && f->beta > 0);
  s->kind = far ? SPOT_FAR : SPOT_DESIGN;
  *out = s;
  if (s->kind == SPOT_DESIGN && f->full && f->fo->explore)
    return curvature_check(f, s);
  return 0;
}

/* The nearest design point found so far, or NULL. */
static spot_t *nearest_design(form_t *f) {
  spot_t *best = NULL;
  for (int i = 0; i < f->nspots; i++)
    if (f->spots[i].kind == SPOT_DESIGN &&
        (!best || fabs(f->spots[i].beta) < fabs(best->beta)))
      best = &f->spots[i];
  return best;
}

/* Probe point j ("form/p/j") into u: shell j / per (one shell at
 * probe_radius, or radius SHELL_STEP (shell + 1) without a design point),
 * direction t = j % per: in one dimension +-1; in two, equally spaced
 * angles turned by a seeded offset per shell; above, the signed axes (full
 * exploration), the mirror of the nearest design point, then seeded
 * directions, uniform on the sphere (normalised standard normals from the
 * stream of "form/p"). */
static void probe_point(form_t *f, uint64_t j, double *u) {
  size_t nu = f->nu;
  uint64_t shell = j / f->probe_per, t = j % f->probe_per;
  double r =
      f->probe_radius > 0 ? f->probe_radius : SHELL_STEP * (double)(shell + 1);
  uint64_t seed = f->m->s->seed, stream = bk_rng_stream("form/p");
  memset(u, 0, nu * sizeof *u);
  if (nu == 1) {
    u[0] = t % 2 ? -r : r;
    return;
  }
  if (nu == 2) {
    double off = bk_rng_u01(seed, stream, shell, 0);
    double a = 2 * M_PI * ((double)t + off) / (double)f->probe_per;
    u[0] = r * cos(a);
    u[1] = r * sin(a);
    return;
  }
  uint64_t naxes = f->full ? 2 * (uint64_t)nu : 0;
  if (t < naxes) {
    u[t / 2] = t % 2 ? -r : r;
    return;
  }
  if (t == naxes && f->mirror) {
    double b = fabs(f->mirror->beta);
    for (size_t d = 0; d < nu; d++)
      u[d] = b > 0 ? -r * f->mirror->u[d] / b : 0;
    if (b > 0)
      return;
  }
  bk_rng_u01_fill(seed, stream, j, 0, (uint32_t)nu, u);
  double n2 = 0;
  for (size_t d = 0; d < nu; d++) {
    u[d] = bk_norm_icdf(u[d]);
    n2 += u[d] * u[d];
  }
  double k = n2 > 0 ? r / sqrt(n2) : 0;
  for (size_t d = 0; d < nu; d++)
    u[d] *= k;
}

static void use_probe(form_t *f, uint64_t j, const bk_point_t *p) {
  probe_t *q = &f->probe[j];
  q->g = p->fault ? NAN : p->g;
  q->event = !p->fault && f->sign * p->g <= 0;
  q->tried = 0;
}

/* Probe points per shell: analysis.form.probe, or its default by
 * dimension (docs/study-file.md); in one dimension the two directions. */
static size_t probe_size(const form_t *f) {
  size_t nu = f->nu;
  if (!f->fo->explore)
    return 0;
  size_t p = f->fo->probe >= 0 ? (size_t)f->fo->probe
             : nu <= FULL_NU   ? 2 * nu + 32
                               : 32;
  return nu == 1 && p > 2 ? 2 : p;
}

/* Evaluates the probe (once), if it fits the budget. */
static int run_probe(form_t *f) {
  f->probe_done = 1;
  size_t per = probe_size(f);
  if (per == 0)
    return 0;
  spot_t *near = nearest_design(f);
  f->mirror = near;
  f->probe_radius = near ? fabs(near->beta) + PROBE_MARGIN : 0;
  size_t n = per * (near ? 1 : PROBE_SHELLS);
  if (f->m->n + n > f->m->s->analysis.max_evaluations)
    return 0;
  f->probe = bk_calloc(n, sizeof *f->probe);
  if (!f->probe)
    return bk_mctx_nomem(f->m);
  f->probe_per = per;
  f->nprobe = n;
  return eval_range(f, "form/p", 0, n, probe_point, use_probe);
}

/* Whether probe point j (direction dir, radius r) is explained: it lies
 * beyond the tangent plane of a design point (where the linearised limit
 * state fails too), or within the reach of a spot a search from the probe
 * led to (design points only when `designs_only`). *maxcos receives the
 * largest cosine with a design point's direction (-2 when none). */
static int explained(form_t *f, const double *dir, double r, int designs_only,
                     double *maxcos) {
  int yes = 0;
  *maxcos = -2;
  for (int i = 0; i < f->nspots; i++) {
    const spot_t *s = &f->spots[i];
    double b = fabs(s->beta);
    if (!(b > 0))
      continue;
    double c = dot(dir, s->u, f->nu) / (r * b);
    if (s->kind == SPOT_DESIGN) {
      if (c * r >= b * (1 - 1e-9))
        yes = 1;
      if (c > *maxcos)
        *maxcos = c;
    }
    if ((s->kind == SPOT_DESIGN || !designs_only) && c >= s->reach)
      yes = 1;
  }
  return yes;
}

/* The start of the next search from the probe: the untried event point
 * that no spot explains, farthest in angle from every design point (the
 * first index on ties), into start; *from is its index. Returns 0 when
 * none is left. */
static int next_probe_start(form_t *f, double *start, uint64_t *from) {
  int found = 0;
  double best = 3;
  for (uint64_t j = 0; j < f->nprobe; j++) {
    if (!f->probe[j].event || f->probe[j].tried)
      continue;
    probe_point(f, j, f->dir);
    double r = sqrt(dot(f->dir, f->dir, f->nu)), c;
    if (r > 0 && !explained(f, f->dir, r, 0, &c) && c < best) {
      best = c;
      *from = j;
      found = 1;
    }
  }
  if (!found)
    return 0;
  f->probe[*from].tried = 1;
  probe_point(f, *from, start);
  return 1;
}

/* Event probe points that no design point explains: their count, and the
 * first one's index in *first. */
static size_t unexplained_probe(form_t *f, uint64_t *first) {
  size_t n = 0;
  for (uint64_t j = 0; j < f->nprobe; j++) {
    if (!f->probe[j].event)
      continue;
    probe_point(f, j, f->dir);
    double r = sqrt(dot(f->dir, f->dir, f->nu)), c;
    if (r > 0 && !explained(f, f->dir, r, 1, &c) && n++ == 0)
      *first = j;
  }
  return n;
}

/* The exploration after search 0: restarts queued by saddles, the probe,
 * and searches from the probe's unexplained directions, while searches
 * and max_evaluations allow (see the file comment). */
static int explore(form_t *f) {
  const bk_study_t *s = f->m->s;
  size_t nu = f->nu;
  int rc;
  for (;;) {
    if (!f->probe_done && f->nqueue == 0) {
      if ((rc = run_probe(f)))
        return rc;
      continue;
    }
    if (f->searches >= f->max_searches ||
        f->m->n + f->nd + 1 > s->analysis.max_evaluations)
      break;
    uint64_t from = 0;
    int from_probe = 0;
    if (f->nqueue > 0) {
      memcpy(f->start, f->queue, nu * sizeof *f->start);
      memmove(f->queue, f->queue + nu,
              (size_t)(f->nqueue - 1) * nu * sizeof *f->queue);
      f->nqueue--;
    } else if (next_probe_start(f, f->start, &from)) {
      from_probe = 1;
    } else {
      break;
    }
    if ((rc = run_search(f, f->searches, f->start)))
      return rc;
    spot_t *sp;
    if ((rc = finish_search(f, &sp)))
      return rc;
    if (sp && from_probe) {
      probe_point(f, from, f->dir);
      double b = fabs(sp->beta), r = sqrt(dot(f->dir, f->dir, nu));
      double c = b > 0 ? dot(f->dir, sp->u, nu) / (r * b) : 2;
      if (c < sp->reach)
        sp->reach = c;
    }
  }
  if (!f->probe_done)
    return run_probe(f);
  return 0;
}

/* ---- the result ------------------------------------------------------ */

/* Indices of the design points into idx (nearest first, search order on
 * ties); returns their count. */
static int design_order(const form_t *f, int *idx) {
  int n = 0;
  for (int i = 0; i < f->nspots; i++) {
    if (f->spots[i].kind != SPOT_DESIGN)
      continue;
    int k = n++;
    while (k > 0 && fabs(f->spots[idx[k - 1]].beta) > fabs(f->spots[i].beta)) {
      idx[k] = idx[k - 1];
      k--;
    }
    idx[k] = i;
  }
  return n;
}

/* The note on what the exploration did and covered. */
static int note_exploration(form_t *f, int ndesign, const int *idx) {
  bk_result_t *res = f->m->res;
  size_t nu = f->nu;
  if (!f->fo->explore)
    return bk_result_note(res, "design-point exploration is off "
                               "(analysis.form.explore: false): further "
                               "design points were not looked for");
  bk_buf_t b;
  bk_buf_init(&b);
  uint64_t extra = f->m->n - f->n_first;
  bk_buf_printf(&b,
                "design-point exploration: %llu runs beyond the first "
                "search's %llu",
                (unsigned long long)extra, (unsigned long long)f->n_first);
  if (f->curv_dirs)
    bk_buf_printf(&b,
                  "; curvatures checked along the tangent axes at %zu "
                  "point%s",
                  f->curv_dirs / (nu - 1), f->curv_dirs == nu - 1 ? "" : "s");
  if (f->nprobe && f->probe_radius > 0)
    bk_buf_printf(&b, "; a probe of %zu points at radius %.2f", f->nprobe,
                  f->probe_radius);
  else if (f->nprobe)
    bk_buf_printf(&b,
                  "; a probe of %zu points on spheres of radius %.1f to "
                  "%.1f",
                  f->nprobe, SHELL_STEP, SHELL_STEP * PROBE_SHELLS);
  else if (probe_size(f) > 0)
    bk_buf_puts(&b, "; no probe (max_evaluations)");
  bk_buf_printf(&b, "; %d search%s in all (at most %d)", f->searches,
                f->searches == 1 ? "" : "es", f->max_searches);
  bk_buf_printf(&b, "; %d design point%s", ndesign, ndesign == 1 ? "" : "s");
  for (int i = 0; i < ndesign && i < 8; i++)
    bk_buf_printf(&b, "%s%.3f", i ? ", " : " at beta ", f->spots[idx[i]].beta);
  int saddles = 0;
  for (int i = 0; i < f->nspots; i++)
    saddles += f->spots[i].kind == SPOT_SADDLE;
  if (saddles)
    bk_buf_printf(&b, "; %d saddle point%s of the distance left", saddles,
                  saddles == 1 ? "" : "s");
  if (f->curv_skipped)
    bk_buf_puts(&b, "; a curvature check was skipped (max_evaluations or a "
                    "model error)");
  if (!f->full)
    bk_buf_printf(&b,
                  ". With %zu random variables (more than %d) there are no "
                  "curvature checks, the probe has the mirror of the design "
                  "point and seeded directions only, and few searches: "
                  "further design points cannot be excluded",
                  nu, FULL_NU);
  else if (nu > 2 && f->nprobe)
    bk_buf_printf(&b,
                  ". In %zu dimensions the probe sees part of the sphere "
                  "only: design points it misses cannot be excluded",
                  nu);
  int rc = b.data ? bk_result_note(res, "%s", b.data) : BK_ENOMEM;
  bk_buf_close(&b);
  return rc ? bk_mctx_nomem(f->m) : 0;
}

/* Warnings on the design points found (several, strongly curved); notes
 * when FORM is a phase of importance sampling, which samples around all
 * of them and needs no first-order approximation. */
static void warn_design_points(form_t *f, int ndesign, const int *idx) {
  bk_result_t *res = f->m->res;
  if (ndesign >= 2) {
    bk_buf_t b;
    bk_buf_init(&b);
    double lo = 0, hi = 0;
    for (int i = 0; i < ndesign; i++) {
      double p = bk_norm_cdf(-f->spots[idx[i]].beta);
      lo = p > lo ? p : lo;
      hi += p;
      if (i < 8)
        bk_buf_printf(&b, "%s%.3f", i ? ", " : "", f->spots[idx[i]].beta);
    }
    if (f->phase)
      bk_result_note(res,
                     "FORM found %d design points (beta %s%s); the sampling "
                     "density is a mixture around all of them",
                     ndesign, b.data ? b.data : "", ndesign > 8 ? ", ..." : "");
    else
      bk_result_warn(res,
                     "FORM found %d design points (beta %s%s): Pf FORM = "
                     "Phi(-beta) counts the nearest alone; to first order "
                     "the failure regions around them together have Pf "
                     "between %.3e and %.3e (the largest Phi(-beta_k) and "
                     "their sum, the simple bounds of a series system); "
                     "importance sampling samples around all of them",
                     ndesign, b.data ? b.data : "", ndesign > 8 ? ", ..." : "",
                     lo, hi < 1 ? hi : 1);
    bk_buf_close(&b);
  }
  const spot_t *s = &f->spots[idx[0]];
  double factor = exp(s->log_factor);
  if (s->checked && (factor > 2 || factor < 0.5) && !f->phase)
    bk_result_warn(res,
                   "the failure surface is strongly curved at the design "
                   "point: its curvatures along the tangent axes put Pf at "
                   "about %.3g times Phi(-beta) (Breitung 1984); sorm: true "
                   "or importance sampling tells more",
                   factor);
}

/* A warning when probe points lie in the event (fail, or are safe when
 * the medians fail) in directions no design point explains. */
static void warn_probe(form_t *f) {
  uint64_t first = 0;
  size_t n = f->nprobe ? unexplained_probe(f, &first) : 0;
  if (n == 0)
    return;
  bk_result_warn(f->m->res,
                 "%zu of the %zu probe points %s in directions that no "
                 "design point found explains (the first is form/p/%llu): "
                 "the %s domain is larger than FORM sees; %s",
                 n, f->nprobe,
                 f->sign > 0 ? "fail (g <= 0)" : "are safe (g > 0)",
                 (unsigned long long)first, f->sign > 0 ? "failure" : "safe",
                 f->phase ? "the sampling density may miss part of it, and "
                            "subset simulation or cross-entropy are safer"
                          : "use importance sampling, subset simulation or "
                            "cross-entropy");
}

/* The result: the nearest design point as res->dp, or search 0's last
 * iterate when there is none, the stop reason, warnings and notes, and
 * SORM when asked for. */
static int fill_result(form_t *f) {
  const bk_study_t *s = f->m->s;
  bk_result_t *res = f->m->res;
  size_t nu = f->nu;
  uint64_t failures = f->m->failures - f->failures0;
  res->est.failures += failures;
  bk_design_point_t *dp = &res->dp;
  int idx[64];
  int ndesign = design_order(f, idx);
  int rc;
  if (ndesign > 0) {
    spot_t *sp = &f->spots[idx[0]];
    dp->converged = 1;
    dp->iterations = sp->iterations;
    memcpy(dp->u, sp->u, nu * sizeof *dp->u);
    bk_transform_u_to_x(s->transform, sp->u, dp->x);
    dp->beta = sp->beta;
    dp->pf_form = bk_norm_cdf(-sp->beta);
    importance_factors(f, sp->alpha);
    res->stop_reason = "design point converged";
    warn_design_points(f, ndesign, idx);
  } else {
    dp->converged = 0;
    dp->iterations = f->iterations0;
    memcpy(dp->u, f->u0, nu * sizeof *dp->u);
    bk_transform_u_to_x(s->transform, f->u0, dp->x);
    int far = f->converged0 &&
              ((f->sign > 0 && f->beta0 < 0) || (f->sign < 0 && f->beta0 > 0));
    if (isfinite(f->beta0) && !far) {
      dp->beta = f->beta0;
      dp->pf_form = bk_norm_cdf(-f->beta0);
      importance_factors(f, f->alpha0);
    } else {
      dp->beta = NAN;
      dp->pf_form = NAN;
    }
    const char *why = f->why0;
    if (far)
      why = "search 0 converged on the far side of a failure region, which "
            "is no design point";
    else if (f->converged0)
      why = "search 0 converged on a saddle point of the distance, which is "
            "no design point";
    if (!why)
      why = "no search converged";
    if (f->zero_grad0 && failures == 0 && f->nprobe == 0) {
      bk_result_warn(res,
                     "FORM could not start: the gradient of g vanishes at "
                     "the medians (g = %g there), so the search has no "
                     "direction, and none of the %llu evaluations had "
                     "g <= 0, which says nothing of the failure domain; "
                     "let the exploration look (analysis.form.explore: "
                     "true), try forward differences, or use subset "
                     "simulation",
                     f->g_med, (unsigned long long)res->evaluations);
      dp->beta = NAN;
      dp->pf_form = NAN;
      memset(dp->alpha2, 0, s->nvars * sizeof *dp->alpha2);
    } else if (failures == 0 && !f->capped0) {
      bk_result_warn(res,
                     "FORM found no failure domain: none of the %llu "
                     "evaluations had g <= 0 (%s). The limit state may "
                     "never fail, or fail only far out (beta > %g); check "
                     "the limit state",
                     (unsigned long long)res->evaluations, why, R_MAX);
      dp->beta = NAN;
      dp->pf_form = NAN;
      memset(dp->alpha2, 0, s->nvars * sizeof *dp->alpha2);
    } else if (f->zero_grad0) {
      bk_result_warn(
          res,
          "FORM found no design point: the gradient of g "
          "vanishes at the medians (g = %g there), so the search "
          "from there had no direction, and %d further search%s "
          "from the probe's directions found none; %llu of the "
          "%llu evaluations had g <= 0, so failures exist: use "
          "subset simulation or cross-entropy",
          f->g_med, f->searches - 1, f->searches - 1 == 1 ? "" : "es",
          (unsigned long long)failures, (unsigned long long)res->evaluations);
    } else if (far) {
      bk_result_warn(res,
                     "FORM found no design point: search 0 converged at "
                     "distance %.3f on the far side of a failure region "
                     "(beta %.3f < 0 although g = %g > 0 at the medians), "
                     "and %d further search%s found none; no beta or Pf is "
                     "given: use subset simulation or cross-entropy",
                     -f->beta0, f->beta0, f->g_med, f->searches - 1,
                     f->searches - 1 == 1 ? "" : "es");
    } else if (f->converged0) {
      bk_result_warn(res,
                     "FORM found no design point: search 0 converged on a "
                     "saddle point of the distance (1 + beta kappa <= 0 "
                     "along a tangent axis), and %d further search%s found "
                     "none; beta and Pf are those of the saddle point",
                     f->searches - 1, f->searches - 1 == 1 ? "" : "es");
    } else {
      bk_result_warn(res,
                     "FORM did NOT converge (%s after %d iterations; "
                     "tolerance %g): %s",
                     why, f->iterations0, f->fo->tolerance,
                     isfinite(dp->beta) ? "beta and Pf are those of the "
                                          "last iterate, not of a design "
                                          "point"
                                        : "no beta or Pf is given");
    }
    res->stop_reason = why;
  }
  warn_probe(f);
  if (f->sign < 0 && ndesign > 0)
    bk_result_note(res,
                   "the medians fail (g = %g <= 0 at u = 0): beta is "
                   "negative, its design point is the nearest safe point, "
                   "at distance %.3f, and Pf = Phi(-beta) = %.4g > 0.5; the "
                   "safe domain has probability about Phi(beta) = %.3g",
                   f->g_med, -dp->beta, dp->pf_form, 1 - dp->pf_form);
  if ((rc = note_exploration(f, ndesign, idx)))
    return rc;
  if (bk_result_detail(res, "design points found", ndesign) ||
      bk_result_detail(res, "exploration runs", (double)(f->m->n - f->n_first)))
    return bk_mctx_nomem(f->m);
  if (!f->fo->sorm)
    return 0;
  if (ndesign > 0)
    return sorm(f, &f->spots[idx[0]]);
  bk_result_warn(res, "SORM skipped: FORM did not converge");
  return 0;
}

/* Hands the design points to the caller (importance sampling): the
 * design points, nearest first, or search 0's last iterate when there is
 * none (`trusted` 0). */
static int hand_over(form_t *f, bk__design_points_t *out) {
  size_t nu = f->nu;
  int idx[64];
  int n = design_order(f, idx);
  memset(out, 0, sizeof *out);
  out->complement = f->sign < 0;
  out->trusted = n > 0;
  /* Without a design point, search 0's last iterate still centres a
   * sampling density (any centre gives an unbiased estimate), unless no
   * evaluation failed at all. */
  int fallback =
      f->have_u0 && isfinite(f->beta0) && f->m->failures > f->failures0;
  if (n == 0 && !fallback)
    return 0;
  size_t k = n > 0 ? (size_t)n : 1;
  out->u = bk_calloc(k * nu, sizeof *out->u);
  out->beta = bk_calloc(k, sizeof *out->beta);
  out->log_share = bk_calloc(k, sizeof *out->log_share);
  if (!out->u || !out->beta || !out->log_share) {
    bk__method_design_points_close(out);
    return bk_mctx_nomem(f->m);
  }
  out->n = k;
  for (size_t i = 0; i < k; i++) {
    const double *u = n > 0 ? f->spots[idx[i]].u : f->u0;
    double b = n > 0 ? f->spots[idx[i]].beta : f->beta0;
    memcpy(out->u + i * nu, u, nu * sizeof *u);
    out->beta[i] = b;
    double lf = n > 0 ? f->spots[idx[i]].log_factor : 0;
    /* A curvature factor far from 1 is a poor guide: keep it within
     * [1/10, 10]. */
    lf = lf > log(10.0) ? log(10.0) : lf < -log(10.0) ? -log(10.0) : lf;
    out->log_share[i] = log(bk_norm_cdf(-fabs(b))) + lf;
  }
  return 0;
}

void bk__method_design_points_close(bk__design_points_t *dps) {
  bk_free(dps->u);
  bk_free(dps->beta);
  bk_free(dps->log_share);
  memset(dps, 0, sizeof *dps);
}

int bk__method_form_search(bk_mctx_t *m, bk__design_points_t *out) {
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
  f.g_scale = 1;
  f.sign = 1;
  f.full = nu <= FULL_NU;
  f.phase = out != NULL;
  f.max_searches = !f.fo->explore       ? 1
                   : f.fo->searches > 0 ? f.fo->searches
                   : f.full             ? 8
                                        : 2;
  if (out)
    memset(out, 0, sizeof *out);
  int rc = bk_result_design_point(m->res, nu, s->nvars);
  if (rc)
    return bk_mctx_nomem(m);
  f.work = bk_calloc(14 * nu + 2 * f.nd + s->nvars, sizeof *f.work);
  f.gfault = bk_calloc(f.nd, sizeof *f.gfault);
  f.spots = bk_calloc((size_t)f.max_searches, sizeof *f.spots);
  f.queue = bk_calloc((size_t)f.max_searches * nu, sizeof *f.queue);
  if (!f.work || !f.gfault || !f.spots || !f.queue) {
    rc = bk_mctx_nomem(m);
    goto out;
  }
  double **vec[] = {&f.u,   &f.grad, &f.alpha, &f.cand,  &f.cgrad,
                    &f.d,   &f.prev, &f.tmp,   &f.start, &f.hw,
                    &f.dir, &f.u0,   &f.alpha0};
  size_t nv = sizeof vec / sizeof vec[0];
  for (size_t i = 0; i < nv; i++)
    *vec[i] = f.work + i * nu;
  f.hd = f.work + nv * nu; /* 2 nu */
  f.gval = f.hd + 2 * nu;  /* nd */
  f.x = f.gval + f.nd;     /* nvars */
  /* Search 0 starts at the medians, u = 0 (start is zeroed). */
  if ((rc = run_search(&f, 0, f.start)))
    goto out;
  memcpy(f.u0, f.u, nu * sizeof *f.u0);
  memcpy(f.alpha0, f.alpha, nu * sizeof *f.alpha0);
  f.have_u0 = f.iterations > 0;
  f.beta0 = f.beta;
  f.converged0 = f.converged;
  f.iterations0 = f.iterations;
  f.capped0 = f.capped;
  f.why0 = f.why;
  f.n_first = m->n;
  spot_t *sp;
  if ((rc = finish_search(&f, &sp)))
    goto out;
  if (f.fo->explore &&
      !(f.capped && f.m->n + f.nd + 1 > s->analysis.max_evaluations) &&
      (rc = explore(&f)))
    goto out;
  if ((rc = fill_result(&f)))
    goto out;
  if (out)
    rc = hand_over(&f, out);
out:
  for (int i = 0; i < f.nspots; i++) {
    bk_free(f.spots[i].u);
    bk_free(f.spots[i].alpha);
    bk_free(f.spots[i].hdiag);
  }
  bk_free(f.spots);
  bk_free(f.queue);
  bk_free(f.probe);
  bk_free(f.gfault);
  bk_free(f.work);
  return rc;
}

int bk__method_form(const bk_study_t *s, bk_evaluator_t *ev,
                    const bk_method_opts_t *opts, bk_result_t *res,
                    bk_error_t *err) {
  if (s->nmodes) /* several limit states: system.c */
    return bk__system_form(s, ev, opts, res, err);
  bk_mctx_t m;
  bk_mctx_init(&m, s, ev, opts, res, err);
  int rc = bk__method_form_search(&m, NULL);
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
