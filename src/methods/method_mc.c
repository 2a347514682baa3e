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
 * sobol (estimate.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"
#include "base/fault.h"
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
/* The most doubles of sampled coordinates held at once (128 KiB): points
 * are sampled a block at a time, which sets each dimension's permutation up
 * once per block rather than once per point. */
#define U_DOUBLES 16384u
/* The error fraction limit is applied after this many evaluations. */
#define MIN_FOR_ERROR_LIMIT 20

typedef struct {
  const bk_study_t *s;
  bk_evaluator_t *ev;
  const bk_method_opts_t *opts;
  bk_result_t *res;
  bk_error_t *err;
  size_t nu;
  size_t chunk;
  size_t urows; /* points whose coordinates u holds at once */
  bk_point_t *pts;
  double *xs;
  double *ys;
  double *u; /* urows rows of nu: sampled, then standard normal */
  /* Counts over the estimate's scope (the run or the current replicate). */
  uint64_t n, k, e;
  /* Over the whole run. */
  uint64_t total_n, total_k, total_e;
} mc_t;

/* Evaluates points [from, to) of sampler `sp` under key prefix `prefix`,
 * adding to the counts. */
static int run_range(mc_t *m, const bk_sampler_t *sp, const char *prefix,
                     uint64_t from, uint64_t to) {
  const bk_study_t *s = m->s;
  size_t ny = s->model.noutputs;
  while (from < to) {
    size_t c = (size_t)((to - from) < m->chunk ? (to - from) : m->chunk);
    for (size_t i0 = 0; i0 < c; i0 += m->urows) {
      size_t nr = c - i0 < m->urows ? c - i0 : m->urows;
      bk_sampler_points(sp, from + i0, nr, m->u);
      for (size_t j = 0; j < nr * m->nu; j++)
        m->u[j] = bk_norm_icdf(m->u[j]);
      for (size_t i = i0; i < i0 + nr; i++) {
        bk_point_t *p = &m->pts[i];
        p->index = from + i;
        p->x = m->xs + i * s->nvars;
        p->y = ny ? m->ys + i * ny : NULL;
        bk_transform_u_to_x(s->transform, m->u + (i - i0) * m->nu, p->x);
        p->g = NAN;
        p->fault = BK_FAULT_NONE;
      }
    }
    int rc = m->ev->batch(m->ev, prefix, m->pts, c, m->err);
    if (rc)
      return rc;
    for (size_t i = 0; i < c; i++) {
      const bk_point_t *p = &m->pts[i];
      if (p->fault != BK_FAULT_NONE) {
        m->e++;
        m->total_e++;
        if (s->model.on_error == BK_ON_ERROR_ABORT)
          return bk_error_set(m->err, BK_EMODEL, NULL, 0, 0,
                              "model error (%s) at %s/%llu and model.on_error "
                              "is abort",
                              bk_fault_name(p->fault), prefix,
                              (unsigned long long)p->index);
      } else if (p->g <= 0) {
        m->k++;
        m->total_k++;
      }
      m->n++;
      m->total_n++;
    }
    m->res->evaluations = m->total_n;
    from += c;
    if (bk_stop_requested())
      return BK_ESTOPPED;
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

/* At the end (`final`) the limit applies whatever the count; during the
 * run only after MIN_FOR_ERROR_LIMIT evaluations, so that one early crash
 * does not stop a study. */
static int check_error_limit(mc_t *m, int final) {
  const bk_model_t *md = &m->s->model;
  if (m->total_n == 0 || (!final && m->total_n < MIN_FOR_ERROR_LIMIT))
    return 0;
  if (!md->present && m->total_e < m->total_n)
    return 0;
  double frac = (double)m->total_e / (double)m->total_n;
  if (frac > md->max_error_fraction)
    return bk_error_set(m->err, BK_EMODEL, NULL, 0, 0,
                        "%llu of %llu model runs failed (%.1f%%, above "
                        "model.max_error_fraction %g); the records say why "
                        "and the run folders are kept. Fix the model and "
                        "run again to resume",
                        (unsigned long long)m->total_e,
                        (unsigned long long)m->total_n, 100 * frac,
                        md->max_error_fraction);
  return 0;
}

static void progress(mc_t *m, uint64_t planned) {
  if (m->opts && m->opts->progress)
    m->opts->progress(m->opts->progress_data, m->res, planned);
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
    if ((rc = bk_result_push_history(r)))
      return bk_error_set(m->err, rc, NULL, 0, 0, "out of memory");
    progress(m, total);
    if ((rc = check_error_limit(m, 0)))
      return rc;
    if (a->target_cov > 0 && r->est.cov <= a->target_cov) {
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
  uint64_t planned = per * a->replicates;
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
    if ((rc = run_range(m, &sp, prefix, 0, per)))
      return rc;
    uint64_t n, k;
    policy_counts(m, m->n, m->k, m->e, &n, &k);
    r->replicate_pf[j] = n ? (double)k / (double)n : NAN;
    r->replicates = j + 1;
    uint64_t tn, tk;
    policy_counts(m, m->total_n, m->total_k, m->total_e, &tn, &tk);
    bk_estimate_replicates(r->replicate_pf, r->replicates, per, tk, a->ci_level,
                           &r->est);
    r->est.n = tn;
    fill_common(m);
    if ((rc = bk_result_push_history(r)))
      return bk_error_set(m->err, rc, NULL, 0, 0, "out of memory");
    progress(m, planned);
    if ((rc = check_error_limit(m, 0)))
      return rc;
    /* The spread of fewer than four replicates says too little about the
     * error to stop on. */
    uint32_t min_reps = a->replicates < 4 ? a->replicates : 4;
    if (a->target_cov > 0 && r->replicates >= min_reps &&
        r->est.cov <= a->target_cov) {
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
  m.s = s;
  m.ev = ev;
  m.opts = opts;
  m.res = res;
  m.err = err;
  m.nu = bk_transform_nu(s->transform);
  if (m.nu == 0)
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "every variable is a constant: there is nothing to "
                        "sample; give at least one variable a distribution");
  if (s->analysis.method == BK_METHOD_SOBOL && m.nu > BK_SOBOL_MAXDIM)
    return bk_error_set(err, BK_EINVAL, s->path, 0, 0,
                        "sobol supports at most %d random variables (the "
                        "study has %zu); use lhs or random",
                        BK_SOBOL_MAXDIM, m.nu);
  size_t nv = s->nvars ? s->nvars : 1;
  size_t batch = s->model.present ? BATCH_MODEL : BATCH_INPROCESS;
  m.chunk = CHUNK_DOUBLES / nv;
  if (m.chunk > batch)
    m.chunk = batch;
  if (!s->model.present && m.chunk > CHUNK_INPROCESS)
    m.chunk = CHUNK_INPROCESS;
  if (m.chunk < 1)
    m.chunk = 1;
  size_t ny = s->model.noutputs;
  m.pts = bk_calloc(m.chunk, sizeof *m.pts);
  m.xs = bk_calloc(m.chunk * s->nvars, sizeof *m.xs);
  m.ys = ny ? bk_calloc(m.chunk * ny, sizeof *m.ys) : NULL;
  m.urows = U_DOUBLES / m.nu;
  if (m.urows > m.chunk)
    m.urows = m.chunk;
  if (m.urows < 1)
    m.urows = 1;
  m.u = bk_calloc(m.urows * m.nu, sizeof *m.u);
  int rc;
  if (!m.pts || !m.xs || (ny && !m.ys) || !m.u) {
    rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    goto out;
  }
  if (s->analysis.method == BK_METHOD_RANDOM)
    rc = run_random(&m);
  else
    rc = run_replicated(&m);
  if (rc == 0)
    rc = check_error_limit(&m, 1);
out:
  bk_free(m.pts);
  bk_free(m.xs);
  bk_free(m.ys);
  bk_free(m.u);
  return rc;
}
