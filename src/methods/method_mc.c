/*
 * Sampling methods: crude Monte Carlo (random), Latin hypercube (lhs) and
 * randomised quasi-Monte Carlo (sobol).
 *
 * Keys: "mc/I" for random; "lhs/rJ/I" and "sobol/rJ/I" for point I of
 * replicate J. Points are pure functions of (seed, key), so a resumed run
 * sees the same inputs. Decisions are taken at deterministic points only:
 * random checks target_cov after every whole batch (a size fixed by the
 * study, never by slots or timing); lhs and sobol after every whole
 * replicate. Error bars: binomial for random, replicate spread for lhs and
 * sobol (estimate.h). A stop on target_cov also needs evidence: at least
 * MIN_FAILURES failures, and for lhs and sobol failures in at least
 * MIN_FAILING_REPLICATES replicates.
 *
 * Several limit states: every mode is counted on the same evaluations as
 * the system, with the same error bar, so a mode's estimate is bit for bit
 * the one a study of that mode alone makes with the same seed and design
 * (stopping rules look at the system only).
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
#include "methods/mctx.h"
#include "methods/method_impl.h"
#include "numerics/rng.h"
#include "numerics/sampler.h"
#include "numerics/special.h"
#include "base/stop.h"

/* Evaluations between stopping checks for random sampling. In process a
 * check is cheap relative to nothing, so batches are large; with a model
 * they are small enough that a study stops soon after reaching target_cov,
 * and large enough to keep every slot busy. */
#define BATCH_INPROCESS 65536u
#define BATCH_MODEL     256u
/* The most doubles of inputs held for one chunk (32 MiB), and the most
 * points of an in-process chunk (small enough to stay in cache). */
#define CHUNK_DOUBLES   (4u << 20)
#define CHUNK_INPROCESS 2048u
/* The evidence a stop on target_cov needs (common practice): with fewer
 * than MIN_FAILURES failures the binomial cov, and a replicate spread,
 * say too little about the error to stop on, and a spread over fewer than
 * MIN_FAILING_REPLICATES replicates that saw a failure is mostly the
 * spread of zeros. */
#define MIN_FAILURES           10u
#define MIN_FAILING_REPLICATES 2u
/* The most doubles of sampled coordinates held at once (128 KiB): points
 * are sampled a block at a time, which sets each dimension's permutation up
 * once per block rather than once per point. */
#define U_DOUBLES 16384u
typedef struct {
  bk_mctx_t ctx;
  const bk_study_t *s;
  bk_result_t *res;
  bk_error_t *err;
  size_t nu;
  size_t chunk;
  size_t urows; /* points whose coordinates u holds at once */
  double *u;    /* urows rows of nu: sampled, then standard normal */
  /* Counts over the estimate's scope (the run or the current replicate). */
  uint64_t n, k, e;
  /* Over the whole run. */
  uint64_t total_n, total_k, total_e;
  /* Several limit states: the same counts per mode, and the system
   * failures in which the mode fails too. */
  struct mode_count {
    uint64_t n, k, e, total_n, total_k, total_e, both;
  } * modes;
} mc_t;

/* Adds point i of the batch to the counts of each mode. */
static void count_modes(mc_t *m, size_t i) {
  const bk_point_t *p = &m->ctx.pts[i];
  int sys_fails = p->fault == BK_FAULT_NONE && p->g <= 0;
  for (size_t j = 0; j < m->s->nmodes; j++) {
    struct mode_count *c = &m->modes[j];
    double g = p->gc[j];
    int fault =
        (p->fault != BK_FAULT_NONE && p->fault != BK_FAULT_NOT_A_NUMBER) ||
        isnan(g);
    if (fault) {
      c->e++;
      c->total_e++;
    } else if (g <= 0) {
      c->k++;
      c->total_k++;
      c->both += sys_fails;
    }
    c->n++;
    c->total_n++;
  }
}

/* Evaluates points [from, to) of sampler `sp` under key prefix `prefix`,
 * adding to the counts. */
static int run_range(mc_t *m, const bk_sampler_t *sp, const char *prefix,
                     uint64_t from, uint64_t to) {
  bk_mctx_t *c = &m->ctx;
  while (from < to) {
    size_t n = (size_t)((to - from) < m->chunk ? (to - from) : m->chunk);
    for (size_t i0 = 0; i0 < n; i0 += m->urows) {
      size_t nr = n - i0 < m->urows ? n - i0 : m->urows;
      bk_sampler_points(sp, from + i0, nr, m->u);
      for (size_t j = 0; j < nr * m->nu; j++)
        m->u[j] = bk_norm_icdf(m->u[j]);
      for (size_t i = i0; i < i0 + nr; i++)
        bk_mctx_set_u(c, i, from + i, m->u + (i - i0) * m->nu);
    }
    int rc = bk_mctx_evaluate(c, prefix, n);
    if (rc)
      return rc;
    for (size_t i = 0; i < n; i++) {
      const bk_point_t *p = &c->pts[i];
      if (p->fault != BK_FAULT_NONE) {
        m->e++;
        m->total_e++;
      } else if (p->g <= 0) {
        m->k++;
        m->total_k++;
      }
      m->n++;
      m->total_n++;
      if (m->modes)
        count_modes(m, i);
    }
    from += n;
  }
  return 0;
}

/* Failures and trials for the estimate, after the on_error policy. */
static void policy_counts(const mc_t *m, uint64_t n, uint64_t k, uint64_t e,
                          uint64_t *pn, uint64_t *pk) {
  if (m->s->model.on_error == BK_ON_ERROR_FAIL) {
    *pn = n;
    *pk = k + e;
  } else {
    *pn = n - e;
    *pk = k;
  }
}

static void fill_common(mc_t *m) {
  bk_result_t *r = m->res;
  r->model_errors = m->total_e;
  r->excluded = m->s->model.on_error == BK_ON_ERROR_FAIL ? 0 : m->total_e;
  double nn = (double)m->total_n;
  if (m->total_n) {
    r->pf_bounds[0] = (double)m->total_k / nn;
    r->pf_bounds[1] = (double)(m->total_k + m->total_e) / nn;
  }
  if (!r->excluded) {
    r->pf_bounds[0] = r->est.pf;
    r->pf_bounds[1] = r->est.pf;
  }
}

/* Each mode's estimate as the system's: binomial (random) or from the
 * replicates (lhs, sobol; replicate j just completed when j >= 0). */
static void mode_estimates(mc_t *m, int32_t j) {
  bk_result_t *r = m->res;
  const bk_analysis_t *a = &m->s->analysis;
  for (size_t i = 0; m->modes && i < r->ncomponents; i++) {
    struct mode_count *c = &m->modes[i];
    bk_component_t *cp = &r->components[i];
    uint64_t n, k, tn, tk;
    policy_counts(m, c->total_n, c->total_k, c->total_e, &tn, &tk);
    if (j < 0) {
      bk_estimate_binomial(tn, tk, a->ci_level, &cp->est);
    } else {
      policy_counts(m, c->n, c->k, c->e, &n, &k);
      cp->replicate_pf[j] = n ? (double)k / (double)n : NAN;
      bk_estimate_replicates(cp->replicate_pf, (size_t)j + 1, r->per_replicate,
                             tk, a->ci_level, &cp->est);
      cp->est.n = tn;
    }
    cp->present = 1;
    cp->model_errors = c->total_e;
    cp->excluded = m->s->model.on_error == BK_ON_ERROR_FAIL ? 0 : c->total_e;
    cp->system_failures = c->both;
    double nn = (double)c->total_n;
    if (c->total_n && cp->excluded) {
      cp->pf_bounds[0] = (double)c->total_k / nn;
      cp->pf_bounds[1] = (double)(c->total_k + c->total_e) / nn;
    } else {
      cp->pf_bounds[0] = cp->pf_bounds[1] = cp->est.pf;
    }
  }
}

/* Starts each scope's counts of the modes again (a new replicate). */
static void modes_new_scope(mc_t *m) {
  for (size_t i = 0; m->modes && i < m->s->nmodes; i++)
    m->modes[i].n = m->modes[i].k = m->modes[i].e = 0;
}

static int run_random(mc_t *m) {
  const bk_analysis_t *a = &m->s->analysis;
  bk_sampler_t sp;
  int rc = bk_sampler_init(&sp, BK_SAMPLER_RANDOM, m->s->seed,
                           bk_rng_stream("mc"), (uint32_t)m->nu, 0, 0);
  if (rc)
    return bk_error_set(m->err, rc, NULL, 0, 0, "cannot set up the sampler");
  uint64_t total = a->samples ? a->samples : a->max_evaluations;
  if (total > a->max_evaluations)
    total = a->max_evaluations;
  uint64_t batch = m->s->model.present ? BATCH_MODEL : BATCH_INPROCESS;
  bk_result_t *r = m->res;
  r->stop_reason = "samples done";
  /* Without samples, target_cov decides and the total is unknown. */
  m->ctx.planned = a->samples ? total : 0;
  uint64_t done = 0;
  while (done < total) {
    uint64_t to = done + batch < total ? done + batch : total;
    if ((rc = run_range(m, &sp, "mc", done, to)))
      return rc;
    done = to;
    uint64_t n, k;
    policy_counts(m, m->n, m->k, m->e, &n, &k);
    bk_estimate_binomial(n, k, a->ci_level, &r->est);
    fill_common(m);
    mode_estimates(m, -1);
    if ((rc = bk_result_push_history(r)))
      return bk_error_set(m->err, rc, NULL, 0, 0, "out of memory");
    bk_mctx_progress(&m->ctx);
    if (a->target_cov > 0 && k >= MIN_FAILURES && r->est.cov <= a->target_cov) {
      r->stop_reason = "target_cov reached";
      break;
    }
  }
  if (done >= total && total == a->max_evaluations && a->samples == 0)
    r->stop_reason = "max_evaluations reached before target_cov";
  return 0;
}

static int run_replicated(mc_t *m) {
  const bk_analysis_t *a = &m->s->analysis;
  int is_lhs = a->method == BK_METHOD_LHS;
  bk_result_t *r = m->res;
  uint64_t per = a->samples / a->replicates;
  r->per_replicate = per;
  r->replicate_pf = bk_calloc(a->replicates, sizeof *r->replicate_pf);
  if (!r->replicate_pf)
    return bk_error_set(m->err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  r->stop_reason = "samples done";
  m->ctx.planned = per * a->replicates;
  uint32_t failing_reps = 0;
  int rc;
  for (uint32_t j = 0; j < a->replicates; j++) {
    if (m->total_n + per > a->max_evaluations) {
      r->stop_reason = "max_evaluations reached";
      break;
    }
    char prefix[48];
    snprintf(prefix, sizeof prefix, "%s/r%u", is_lhs ? "lhs" : "sobol", j);
    bk_sampler_t sp;
    rc = bk_sampler_init(&sp, is_lhs ? BK_SAMPLER_LHS : BK_SAMPLER_SOBOL,
                         m->s->seed, bk_rng_stream(prefix), (uint32_t)m->nu,
                         per, 1);
    if (rc)
      return bk_error_set(m->err, rc, NULL, 0, 0,
                          "cannot set up the %s design for %zu variables",
                          is_lhs ? "Latin hypercube" : "Sobol", m->nu);
    m->n = m->k = m->e = 0;
    modes_new_scope(m);
    if ((rc = run_range(m, &sp, prefix, 0, per)))
      return rc;
    uint64_t n, k;
    policy_counts(m, m->n, m->k, m->e, &n, &k);
    r->replicate_pf[j] = n ? (double)k / (double)n : NAN;
    r->replicates = j + 1;
    failing_reps += k > 0;
    uint64_t tn, tk;
    policy_counts(m, m->total_n, m->total_k, m->total_e, &tn, &tk);
    bk_estimate_replicates(r->replicate_pf, r->replicates, per, tk, a->ci_level,
                           &r->est);
    r->est.n = tn;
    fill_common(m);
    mode_estimates(m, (int32_t)j);
    if ((rc = bk_result_push_history(r)))
      return bk_error_set(m->err, rc, NULL, 0, 0, "out of memory");
    bk_mctx_progress(&m->ctx);
    /* The spread of fewer than four replicates says too little about the
     * error to stop on; nor does one of too few failures (see
     * MIN_FAILURES). */
    uint32_t min_reps = a->replicates < 4 ? a->replicates : 4;
    if (a->target_cov > 0 && r->replicates >= min_reps && tk >= MIN_FAILURES &&
        failing_reps >= MIN_FAILING_REPLICATES && r->est.cov <= a->target_cov) {
      r->stop_reason = "target_cov reached";
      break;
    }
  }
  return 0;
}

int bk__method_mc(const bk_study_t *s, bk_evaluator_t *ev,
                  const bk_method_opts_t *opts, bk_result_t *res,
                  bk_error_t *err) {
  mc_t m;
  memset(&m, 0, sizeof m);
  bk_mctx_init(&m.ctx, s, ev, opts, res, err);
  m.s = s;
  m.res = res;
  m.err = err;
  m.nu = m.ctx.nu;
  size_t nv = s->nvars ? s->nvars : 1;
  size_t batch = s->model.present ? BATCH_MODEL : BATCH_INPROCESS;
  m.chunk = CHUNK_DOUBLES / nv;
  if (m.chunk > batch)
    m.chunk = batch;
  if (!s->model.present && m.chunk > CHUNK_INPROCESS)
    m.chunk = CHUNK_INPROCESS;
  if (m.chunk < 1)
    m.chunk = 1;
  m.urows = U_DOUBLES / (m.nu ? m.nu : 1);
  if (m.urows > m.chunk)
    m.urows = m.chunk;
  if (m.urows < 1)
    m.urows = 1;
  m.u = bk_calloc(m.urows * (m.nu ? m.nu : 1), sizeof *m.u);
  int rc;
  if (!m.u) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  if ((rc = bk_mctx_reserve(&m.ctx, m.chunk)))
    goto out;
  if (s->nmodes) {
    const char *names[BK_STUDY_MAX_MODES];
    for (size_t i = 0; i < s->nmodes; i++)
      names[i] = s->modes[i].name;
    m.modes = bk_calloc(s->nmodes, sizeof *m.modes);
    uint32_t reps =
        s->analysis.method == BK_METHOD_RANDOM ? 0 : s->analysis.replicates;
    if (!m.modes || bk_result_components(res, names, s->nmodes, reps)) {
      rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
      goto out;
    }
  }
  if (s->analysis.method == BK_METHOD_RANDOM)
    rc = run_random(&m);
  else
    rc = run_replicated(&m);
  if (rc == 0)
    rc = bk_mctx_finish(&m.ctx);
out:
  bk_mctx_close(&m.ctx);
  bk_free(m.u);
  bk_free(m.modes);
  return rc;
}
