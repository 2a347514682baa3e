/*
 * Evidence that model errors bias the result (see evidence.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "methods/evidence.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "base/fault.h"
#include "numerics/order.h"
#include "numerics/transform.h"

/* Reservoir sizes: enough for a test that fires on clustered errors, small
 * enough that the brute-force neighbour search stays cheap. */
#define CAP_OK      20000
#define CAP_ERR     1000
#define MAX_QUERIES 1000
#define MAX_DOUBLES ((size_t)4000000) /* per reservoir of completed runs */

/* ---- the test ------------------------------------------------------- */

/* Average ranks (1-based) of the n values in p (sorted in place), into
 * rank[p[j].i]; returns the tie term sum(t^3 - t). */
static double rank_values(bk_order_pair_t *p, size_t n, double *rank) {
  bk_order_sort(p, n);
  double ties = 0;
  for (size_t j = 0; j < n;) {
    size_t e = j + 1;
    while (e < n && p[e].v == p[j].v)
      e++;
    double r = 0.5 * (double)(j + 1 + e);
    for (size_t q = j; q < e; q++)
      rank[p[q].i] = r;
    double t = (double)(e - j);
    ties += t * t * t - t;
    j = e;
  }
  return ties;
}

/* The k nearest completed runs to q (skipping index self) into nb[k]. */
static void nearest(size_t nu, const double *ok_u, size_t nok, const double *q,
                    size_t self, size_t k, size_t *nb, double *d2) {
  size_t have = 0;
  for (size_t i = 0; i < nok; i++) {
    if (i == self)
      continue;
    const double *p = ok_u + i * nu;
    double d = 0;
    for (size_t j = 0; j < nu; j++) {
      double t = p[j] - q[j];
      d += t * t;
    }
    if (have == k && d >= d2[k - 1])
      continue;
    size_t at = have < k ? have++ : k - 1;
    while (at > 0 && d2[at - 1] > d) {
      d2[at] = d2[at - 1];
      nb[at] = nb[at - 1];
      at--;
    }
    d2[at] = d;
    nb[at] = i;
  }
}

int bk_evidence_test(size_t nu, const double *ok_u, const double *ok_g,
                     size_t nok, const double *err_u, size_t nerr,
                     bk_evidence_test_t *out) {
  memset(out, 0, sizeof *out);
  out->z = NAN;
  out->nerr = nerr;
  out->nok = nok;
  const size_t k = BK_EVIDENCE_K;
  if (nerr < 3 || nok < 2 * k + 1 || nu == 0)
    return 0;
  size_t nq = nok < MAX_QUERIES ? nok : MAX_QUERIES;
  size_t ntot = nerr + nq;
  bk_order_pair_t *p = bk_calloc(nok > ntot ? nok : ntot, sizeof *p);
  double *grank = bk_calloc(nok, sizeof *grank);
  double *score = bk_calloc(ntot, sizeof *score);
  double *srank = bk_calloc(ntot, sizeof *srank);
  if (!p || !grank || !score || !srank) {
    bk_free(p);
    bk_free(grank);
    bk_free(score);
    bk_free(srank);
    return BK_ENOMEM;
  }
  double nfail = 0;
  for (size_t i = 0; i < nok; i++) {
    p[i] = (bk_order_pair_t){ok_g[i], i};
    nfail += ok_g[i] <= 0;
  }
  rank_values(p, nok, grank);
  size_t nb[BK_EVIDENCE_K];
  double d2[BK_EVIDENCE_K];
  double near_fail = 0;
  for (size_t e = 0; e < nerr; e++) {
    nearest(nu, ok_u, nok, err_u + e * nu, (size_t)-1, k, nb, d2);
    double s = 0;
    for (size_t j = 0; j < k; j++) {
      s += grank[nb[j]];
      near_fail += ok_g[nb[j]] <= 0;
    }
    score[e] = s / (double)k;
  }
  /* Completed runs spread over the reservoir (which is in random order
   * once full, and in evaluation order before). */
  for (size_t q = 0; q < nq; q++) {
    size_t i = (size_t)((double)q * (double)nok / (double)nq);
    nearest(nu, ok_u, nok, ok_u + i * nu, i, k, nb, d2);
    double s = 0;
    for (size_t j = 0; j < k; j++)
      s += grank[nb[j]];
    score[nerr + q] = s / (double)k;
  }
  for (size_t i = 0; i < ntot; i++)
    p[i] = (bk_order_pair_t){score[i], i};
  double ties = rank_values(p, ntot, srank);
  double r1 = 0;
  for (size_t e = 0; e < nerr; e++)
    r1 += srank[e];
  double n1 = (double)nerr, n2 = (double)nq, n = n1 + n2;
  double u1 = r1 - n1 * (n1 + 1) / 2;
  double var = n1 * n2 / 12 * ((n + 1) - ties / (n * (n - 1)));
  out->tested = 1;
  out->z = var > 0 ? (u1 - n1 * n2 / 2 + 0.5) / sqrt(var) : 0;
  out->fires = out->z < BK_EVIDENCE_Z;
  out->share_near = near_fail / (n1 * (double)k);
  out->share_all = nfail / (double)nok;
  bk_free(p);
  bk_free(grank);
  bk_free(score);
  bk_free(srank);
  return 0;
}

/* ---- the watcher ---------------------------------------------------- */

static uint64_t next_random(uint64_t *state) {
  uint64_t z = (*state += 0x9e3779b97f4a7c15ULL);
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}

/* Where item number `seen` (0-based) goes in a reservoir of cap slots
 * holding n: a slot index, or cap when it is not kept. */
static size_t reservoir_slot(uint64_t *state, uint64_t seen, size_t cap) {
  if (seen < cap)
    return (size_t)seen;
  uint64_t j = next_random(state) % (seen + 1);
  return j < cap ? (size_t)j : cap;
}

static int pool_alloc(bk_evidence_pool_t *p, size_t nx, size_t capok,
                      size_t caperr) {
  p->capok = capok;
  p->caperr = caperr;
  p->ok_x = bk_calloc(capok * nx + 1, sizeof *p->ok_x);
  p->ok_g = bk_calloc(capok, sizeof *p->ok_g);
  p->err_x = bk_calloc(caperr * nx + 1, sizeof *p->err_x);
  return p->ok_x && p->ok_g && p->err_x ? 0 : BK_ENOMEM;
}

static void pool_close(bk_evidence_pool_t *p) {
  bk_free(p->ok_x);
  bk_free(p->ok_g);
  bk_free(p->err_x);
  memset(p, 0, sizeof *p);
}

/* Offers one run (its nx inputs x, and g or an error) to the pool's
 * reservoirs. */
static void pool_add(bk_evidence_pool_t *p, uint64_t *state, size_t nx,
                     const double *x, int is_error, double g) {
  if (is_error) {
    size_t at = reservoir_slot(state, p->seen_err++, p->caperr);
    if (at < p->caperr) {
      memcpy(p->err_x + at * nx, x, nx * sizeof *x);
      if (at == p->nerr)
        p->nerr++;
    }
  } else {
    size_t at = reservoir_slot(state, p->seen_ok++, p->capok);
    if (at < p->capok) {
      memcpy(p->ok_x + at * nx, x, nx * sizeof *x);
      p->ok_g[at] = g;
      if (at == p->nok)
        p->nok++;
    }
  }
}

/* Keeps the first errored runs of the batch for the reports' list. */
static void keep_runs(bk_evidence_t *e, const char *prefix,
                      const bk_point_t *pts, size_t n) {
  size_t nv = e->s->nvars;
  for (size_t i = 0; i < n && e->nruns < BK_RESULT_ERROR_RUNS; i++) {
    if (pts[i].fault == BK_FAULT_NONE)
      continue;
    if (!e->runs) {
      e->runs = bk_calloc(BK_RESULT_ERROR_RUNS, sizeof *e->runs);
      if (!e->runs)
        return;
    }
    bk_error_run_t *r = &e->runs[e->nruns];
    r->x = bk_calloc(nv ? nv : 1, sizeof *r->x);
    if (!r->x)
      return;
    if (nv)
      memcpy(r->x, pts[i].x, nv * sizeof *r->x);
    snprintf(r->key, sizeof r->key, "%s/%llu", prefix,
             (unsigned long long)pts[i].index);
    r->fault = pts[i].fault;
    e->nruns++;
  }
}

static int watch_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                       size_t n, bk_error_t *err) {
  bk_evidence_t *e = ev->data;
  int rc = e->inner->batch(e->inner, prefix, pts, n, err);
  size_t nx = e->s->nvars;
  if (rc || e->nomem || e->nu == 0)
    return rc;
  if (!e->started) {
    size_t capok = CAP_OK;
    if (capok * nx > MAX_DOUBLES)
      capok = MAX_DOUBLES / nx > 4 * BK_EVIDENCE_K ? MAX_DOUBLES / nx
                                                   : 4 * BK_EVIDENCE_K;
    e->started = 1;
    if (pool_alloc(&e->all, nx, capok, CAP_ERR) ||
        pool_alloc(&e->first, nx, capok / 4 + 1, CAP_ERR / 4 + 1)) {
      e->nomem = 1; /* the check is then skipped, the run goes on */
      return 0;
    }
    snprintf(e->first_prefix, sizeof e->first_prefix, "%s", prefix);
  }
  keep_runs(e, prefix, pts, n);
  int in_first = strcmp(prefix, e->first_prefix) == 0;
  for (size_t i = 0; i < n; i++) {
    const bk_point_t *p = &pts[i];
    int is_error = p->fault != BK_FAULT_NONE;
    if (!is_error && isnan(p->g))
      continue;
    /* Inputs are kept as x and mapped to u only when the test runs: most
     * points never stay in a full reservoir. */
    pool_add(&e->all, &e->state, nx, p->x, is_error, p->g);
    if (in_first)
      pool_add(&e->first, &e->state, nx, p->x, is_error, p->g);
  }
  return 0;
}

void bk_evidence_init(bk_evidence_t *e, const bk_study_t *s,
                      bk_evaluator_t *inner) {
  memset(e, 0, sizeof *e);
  e->inner = inner;
  e->s = s;
  e->nu = bk_transform_nu(s->transform);
  e->state = 0x5eed0f0e7de9ce11ULL;
  e->ev.batch = watch_batch;
  e->ev.data = e;
}

void bk_evidence_list(bk_evidence_t *e, bk_result_t *res, bk_note_cb note,
                      void *note_data) {
  for (size_t i = 0; note && i < e->nruns; i++) {
    bk_error_run_t *r = &e->runs[i];
    if (!note(note_data, r->key, r->reason, sizeof r->reason, r->folder,
              sizeof r->folder))
      r->reason[0] = r->folder[0] = '\0';
  }
  res->error_runs = e->runs;
  res->nerror_runs = e->nruns;
  e->runs = NULL;
  e->nruns = 0;
}

void bk_evidence_close(bk_evidence_t *e) {
  pool_close(&e->all);
  pool_close(&e->first);
  for (size_t i = 0; i < e->nruns; i++)
    bk_free(e->runs[i].x);
  bk_free(e->runs);
  memset(e, 0, sizeof *e);
}

/* The inputs of n points (x, nvars each) in u-space (nu each), into a new
 * array; NULL when out of memory. */
static double *to_u(const bk_evidence_t *e, const double *x, size_t n) {
  double *u = bk_calloc(n * e->nu + 1, sizeof *u);
  for (size_t i = 0; u && i < n; i++)
    bk_transform_x_to_u(e->s->transform, x + i * e->s->nvars, u + i * e->nu);
  return u;
}

/* The test on one pool. */
static int pool_test(const bk_evidence_t *e, const bk_evidence_pool_t *p,
                     bk_evidence_test_t *t) {
  double *ok_u = to_u(e, p->ok_x, p->nok), *err_u = to_u(e, p->err_x, p->nerr);
  int rc = ok_u && err_u ? bk_evidence_test(e->nu, ok_u, p->ok_g, p->nok, err_u,
                                            p->nerr, t)
                         : BK_ENOMEM;
  bk_free(ok_u);
  bk_free(err_u);
  return rc;
}

/* What the method's pf_bounds cover, for the warning. */
static const char *bounds_scope(bk_method_kind_t m) {
  switch (m) {
  case BK_METHOD_SUBSET:
    return " (these bounds cover the first level's errors only: errors at "
           "later levels are left out of both)";
  case BK_METHOD_FORM:
    return " (FORM has no such bounds: both are its own estimate, which "
           "stepped around the errored runs)";
  default:
    return "";
  }
}

int bk_evidence_check(bk_evidence_t *e, bk_result_t *res) {
  if (e->nomem || e->s->model.on_error != BK_ON_ERROR_SKIP || !e->all.seen_err)
    return 0;
  bk_evidence_test_t t, t1;
  int rc = pool_test(e, &e->all, &t);
  if (rc)
    return rc;
  if (!t.fires) {
    if ((rc = pool_test(e, &e->first, &t1)))
      return rc;
    if (!t1.fires)
      return 0;
    t = t1;
  }
  char shares[160];
  if (t.share_all > 0)
    snprintf(shares, sizeof shares,
             "%.0f%% of their nearest completed runs failed, against %.0f%% "
             "of all completed runs",
             100 * t.share_near, 100 * t.share_all);
  else
    snprintf(shares, sizeof shares,
             "no completed run failed: the failures may all be among them");
  return bk_result_warn(
      res,
      "model errors cluster near the failure region: the %llu runs that "
      "ended in a model error (left out: model.on_error skip) lie where "
      "the completed runs have low g (nearest-neighbour rank-sum test, "
      "z = %.1f; %s). Pf is likely biased low: with the left-out runs all "
      "safe it is %.3e, all failed %.3e%s. Fix the model where it fails, "
      "or set model.on_error: fail for a conservative Pf",
      (unsigned long long)e->all.seen_err, t.z, shares, res->pf_bounds[0],
      res->pf_bounds[1], bounds_scope(e->s->analysis.method));
}
