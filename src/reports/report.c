/*
 * Text and JSON reports (see report.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "reports/report.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "base/fault.h"
#include "numerics/dist.h"

const char bk_report_caution[] =
    "These figures hold only for the probabilistic model and the limit state\n"
    "given in the study, and only as far as the analysis model is valid. They\n"
    "do not replace the checks required by the applicable design codes; the\n"
    "governing code, the consequence class and a licensed engineer decide\n"
    "whether a reliability level is acceptable.\n";

int bk_report_json_string(bk_buf_t *out, const char *s) {
  bk_buf_putc(out, '"');
  for (const unsigned char *p = (const unsigned char *)s; *p; p++) {
    switch (*p) {
    case '"':
      bk_buf_puts(out, "\\\"");
      break;
    case '\\':
      bk_buf_puts(out, "\\\\");
      break;
    case '\n':
      bk_buf_puts(out, "\\n");
      break;
    case '\t':
      bk_buf_puts(out, "\\t");
      break;
    case '\r':
      bk_buf_puts(out, "\\r");
      break;
    default:
      if (*p < 0x20)
        bk_buf_printf(out, "\\u%04x", *p);
      else
        bk_buf_putc(out, (char)*p);
    }
  }
  return bk_buf_putc(out, '"');
}

int bk_report_json_number(bk_buf_t *out, double v) {
  if (!isfinite(v))
    return bk_buf_puts(out, "null");
  return bk_buf_put_double(out, v);
}

static void key(bk_buf_t *o, const char *k, int *first) {
  bk_buf_puts(o, *first ? "\n  " : ",\n  ");
  *first = 0;
  bk_report_json_string(o, k);
  bk_buf_puts(o, ": ");
}

static void pair(bk_buf_t *o, const double v[2]) {
  bk_buf_putc(o, '[');
  bk_report_json_number(o, v[0]);
  bk_buf_puts(o, ", ");
  bk_report_json_number(o, v[1]);
  bk_buf_putc(o, ']');
}

/* The first runs that ended in a model error: key, kind, reason, folder
 * and every input by name. */
static void error_runs_json(bk_buf_t *o, const bk_study_t *s,
                            const bk_result_t *r, int *first) {
  if (!r->nerror_runs)
    return;
  key(o, "error_runs", first);
  bk_buf_putc(o, '[');
  for (size_t i = 0; i < r->nerror_runs; i++) {
    const bk_error_run_t *e = &r->error_runs[i];
    bk_buf_puts(o, i ? ",\n    {\"key\": " : "\n    {\"key\": ");
    bk_report_json_string(o, e->key);
    bk_buf_puts(o, ", \"kind\": ");
    bk_report_json_string(o, bk_fault_name(e->fault));
    bk_buf_puts(o, ", \"reason\": ");
    bk_report_json_string(o, e->reason);
    bk_buf_puts(o, ", \"folder\": ");
    bk_report_json_string(o, e->folder);
    bk_buf_puts(o, ", \"x\": {");
    for (size_t k = 0; k < s->nvars; k++) {
      bk_buf_puts(o, k ? ", " : "");
      bk_report_json_string(o, s->vars[k].name);
      bk_buf_puts(o, ": ");
      bk_report_json_number(o, e->x[k]);
    }
    bk_buf_puts(o, "}}");
  }
  bk_buf_putc(o, ']');
}

/* A design point as a JSON object: convergence, beta, pf_form and
 * pf_sorm, and x, u and alpha^2 by variable name (u of the random
 * variables only: constants take no u coordinate). */
static void design_point_json(bk_buf_t *o, const bk_study_t *s,
                              const bk_design_point_t *dp) {
  bk_buf_printf(o, "{\"converged\": %s, \"iterations\": %d, \"beta\": ",
                dp->converged ? "true" : "false", dp->iterations);
  bk_report_json_number(o, dp->beta);
  bk_buf_puts(o, ", \"pf_form\": ");
  bk_report_json_number(o, dp->pf_form);
  bk_buf_puts(o, ", \"pf_sorm\": ");
  bk_report_json_number(o, dp->pf_sorm);
  bk_buf_puts(o, ", \"x\": {");
  for (size_t i = 0; dp->x && i < s->nvars; i++) {
    bk_buf_puts(o, i ? ", " : "");
    bk_report_json_string(o, s->vars[i].name);
    bk_buf_puts(o, ": ");
    bk_report_json_number(o, dp->x[i]);
  }
  bk_buf_puts(o, "}, \"u\": {");
  for (size_t i = 0, k = 0; dp->u && i < s->nvars; i++) {
    if (s->vars[i].dist.kind == BK_DIST_CONSTANT)
      continue;
    bk_buf_puts(o, k ? ", " : "");
    bk_report_json_string(o, s->vars[i].name);
    bk_buf_puts(o, ": ");
    bk_report_json_number(o, dp->u[k++]);
  }
  bk_buf_puts(o, "}, \"alpha2\": {");
  for (size_t i = 0; dp->alpha2 && i < s->nvars; i++) {
    bk_buf_puts(o, i ? ", " : "");
    bk_report_json_string(o, s->vars[i].name);
    bk_buf_puts(o, ": ");
    bk_report_json_number(o, dp->alpha2[i]);
  }
  bk_buf_puts(o, "}}");
}

int bk_report_json(const bk_study_t *s, const bk_result_t *r, bk_buf_t *o) {
  int first = 1;
  const bk_estimate_t *e = &r->est;
  bk_buf_putc(o, '{');
  key(o, "name", &first);
  bk_report_json_string(o, s->name);
  key(o, "study", &first);
  char *abs = realpath(s->path, NULL);
  bk_report_json_string(o, abs ? abs : s->path);
  free(abs);
  key(o, "tool", &first);
  bk_report_json_string(o, "brink " BK_VERSION);
  key(o, "method", &first);
  bk_report_json_string(o, r->method);
  key(o, "seed", &first);
  bk_buf_printf(o, "%llu", (unsigned long long)s->seed);
  key(o, "pf", &first);
  bk_report_json_number(o, e->pf);
  key(o, "beta", &first);
  bk_report_json_number(o, e->beta);
  key(o, "cov", &first);
  bk_report_json_number(o, e->cov);
  key(o, "ci", &first);
  pair(o, e->ci);
  key(o, "ci_level", &first);
  bk_report_json_number(o, e->ci_level);
  key(o, "ci_method", &first);
  bk_report_json_string(o, e->ci_method ? e->ci_method : "none");
  key(o, "ci_exact", &first);
  pair(o, e->ci_exact);
  key(o, "beta_ci", &first);
  pair(o, e->beta_ci);
  key(o, "evaluations", &first);
  bk_buf_printf(o, "%llu", (unsigned long long)r->evaluations);
  key(o, "failures", &first);
  bk_buf_printf(o, "%llu", (unsigned long long)e->failures);
  key(o, "model_errors", &first);
  bk_buf_printf(o, "%llu", (unsigned long long)r->model_errors);
  key(o, "excluded", &first);
  bk_buf_printf(o, "%llu", (unsigned long long)r->excluded);
  key(o, "pf_bounds", &first);
  pair(o, r->pf_bounds);
  if (r->replicates) {
    key(o, "replicates", &first);
    bk_buf_printf(o, "%u", r->replicates);
    key(o, "per_replicate", &first);
    bk_buf_printf(o, "%llu", (unsigned long long)r->per_replicate);
    key(o, "replicate_pf", &first);
    bk_buf_putc(o, '[');
    for (uint32_t i = 0; i < r->replicates; i++) {
      if (i)
        bk_buf_puts(o, ", ");
      bk_report_json_number(o, r->replicate_pf[i]);
    }
    bk_buf_putc(o, ']');
  }
  if (s->analysis.target_cov > 0) {
    key(o, "target_cov", &first);
    bk_report_json_number(o, s->analysis.target_cov);
  }
  if (s->analysis.has_target_beta) {
    key(o, "target_beta", &first);
    bk_report_json_number(o, s->analysis.target_beta);
    key(o, "meets_target_beta", &first);
    bk_buf_puts(o, e->beta >= s->analysis.target_beta ? "true" : "false");
  }
  if (r->dp.present) {
    key(o, "design_point", &first);
    design_point_json(o, s, &r->dp);
  }
  if (s->nmodes) {
    key(o, "system", &first);
    bk_report_json_string(o, s->limit_state);
  }
  if (r->ncomponents) {
    key(o, "components", &first);
    bk_buf_putc(o, '{');
    for (size_t i = 0; i < r->ncomponents; i++) {
      const bk_component_t *c = &r->components[i];
      bk_buf_puts(o, i ? ",\n    " : "\n    ");
      bk_report_json_string(o, c->name);
      bk_buf_puts(o, ": {\"limit_state\": ");
      bk_report_json_string(o, i < s->nmodes ? s->modes[i].text : "");
      if (i >= s->nsystem || s->system == BK_SYSTEM_SINGLE)
        bk_buf_puts(o, ", \"in_system\": false");
      if (!c->present) {
        bk_buf_puts(o, ", \"estimated\": false}");
        continue;
      }
      bk_buf_puts(o, ", \"pf\": ");
      bk_report_json_number(o, c->est.pf);
      bk_buf_puts(o, ", \"beta\": ");
      bk_report_json_number(o, c->est.beta);
      bk_buf_puts(o, ", \"cov\": ");
      bk_report_json_number(o, c->est.cov);
      bk_buf_puts(o, ", \"ci\": ");
      pair(o, c->est.ci);
      bk_buf_puts(o, ", \"ci_method\": ");
      bk_report_json_string(o, c->est.ci_method ? c->est.ci_method : "none");
      bk_buf_puts(o, ", \"beta_ci\": ");
      pair(o, c->est.beta_ci);
      bk_buf_printf(o, ", \"failures\": %llu, \"model_errors\": %llu",
                    (unsigned long long)c->est.failures,
                    (unsigned long long)c->model_errors);
      if (c->excluded) {
        bk_buf_printf(o, ", \"excluded\": %llu, \"pf_bounds\": ",
                      (unsigned long long)c->excluded);
        pair(o, c->pf_bounds);
      }
      if (c->system_failures != UINT64_MAX) {
        /* The share of the system's failures in which this mode fails. */
        bk_buf_printf(o, ", \"system_failures\": %llu, \"share_of_system\": ",
                      (unsigned long long)c->system_failures);
        bk_report_json_number(o, e->failures ? (double)c->system_failures /
                                                   (double)e->failures
                                             : NAN);
      }
      if (c->dp.present) {
        bk_buf_puts(o, ", \"design_point\": ");
        design_point_json(o, s, &c->dp);
      }
      bk_buf_putc(o, '}');
    }
    bk_buf_puts(o, "\n  }");
  }
  if (r->bounds.present) {
    key(o, "system_bounds", &first);
    bk_buf_puts(o, "{\"simple\": ");
    pair(o, r->bounds.simple);
    bk_buf_puts(o, ", \"ditlevsen\": ");
    pair(o, r->bounds.ditlevsen);
    bk_buf_putc(o, '}');
  }
  if (r->reanalysis) {
    key(o, "reanalysis", &first);
    bk_report_json_string(o, r->reanalysis);
  }
  if (r->ndetails) {
    key(o, "details", &first);
    bk_buf_putc(o, '{');
    for (size_t i = 0; i < r->ndetails; i++) {
      bk_buf_puts(o, i ? ", " : "");
      bk_report_json_string(o, r->details[i].label);
      bk_buf_puts(o, ": ");
      bk_report_json_number(o, r->details[i].value);
    }
    bk_buf_putc(o, '}');
  }
  key(o, "warnings", &first);
  bk_buf_putc(o, '[');
  for (size_t i = 0; i < r->nwarnings; i++) {
    bk_buf_puts(o, i ? ", " : "");
    bk_report_json_string(o, r->warnings[i]);
  }
  bk_buf_putc(o, ']');
  key(o, "notes", &first);
  bk_buf_putc(o, '[');
  for (size_t i = 0; i < r->nnotes; i++) {
    bk_buf_puts(o, i ? ", " : "");
    bk_report_json_string(o, r->notes[i]);
  }
  bk_buf_putc(o, ']');
  error_runs_json(o, s, r, &first);
  key(o, "stop_reason", &first);
  bk_report_json_string(o, r->stop_reason ? r->stop_reason : "");
  key(o, "seconds", &first);
  bk_report_json_number(o, r->seconds);
  if (r->sessions) {
    key(o, "seconds_total", &first);
    bk_report_json_number(o, r->seconds_total);
    key(o, "sessions", &first);
    bk_buf_printf(o, "%u", r->sessions);
  }
  key(o, "fingerprint", &first);
  bk_buf_printf(o, "\"%s-%s\"", s->digest_study, s->digest_model);
  key(o, "history", &first);
  bk_buf_putc(o, '[');
  for (size_t i = 0; i < r->nhistory; i++) {
    const bk_history_t *h = &r->history[i];
    bk_buf_printf(o, "%s[%llu, ", i ? ", " : "", (unsigned long long)h->n);
    bk_report_json_number(o, h->pf);
    bk_buf_puts(o, ", ");
    bk_report_json_number(o, h->ci[0]);
    bk_buf_puts(o, ", ");
    bk_report_json_number(o, h->ci[1]);
    bk_buf_putc(o, ']');
  }
  bk_buf_puts(o, "]");
  key(o, "caution", &first);
  bk_report_json_string(o, bk_report_caution);
  return bk_buf_puts(o, "\n}\n");
}

static void num(bk_buf_t *o, double v) {
  if (isnan(v))
    bk_buf_puts(o, "n/a");
  else if (isinf(v))
    bk_buf_puts(o, v > 0 ? "inf" : "-inf");
  else
    bk_buf_printf(o, "%.3e", v);
}

static void fixed(bk_buf_t *o, double v) {
  if (isnan(v))
    bk_buf_puts(o, "n/a");
  else if (isinf(v))
    bk_buf_puts(o, v > 0 ? "inf" : "-inf");
  else
    bk_buf_printf(o, "%.3f", v);
}

/* Errored runs, and inputs of each, shown in the text report; the JSON
 * has every input of each listed run. */
#define TEXT_ERROR_RUNS 10
#define TEXT_ERROR_VARS 8

/* The first runs that ended in a model error, one block each. */
static void error_runs_text(bk_buf_t *o, const bk_study_t *s,
                            const bk_result_t *r) {
  if (!r->nerror_runs)
    return;
  size_t nruns =
      r->nerror_runs < TEXT_ERROR_RUNS ? r->nerror_runs : TEXT_ERROR_RUNS;
  bk_buf_printf(o, "  model errors, the first %zu of %llu", nruns,
                (unsigned long long)r->model_errors);
  bk_buf_puts(o, " (`brink export` lists all):\n");
  for (size_t i = 0; i < nruns; i++) {
    const bk_error_run_t *e = &r->error_runs[i];
    bk_buf_printf(o, "    %s  %s%s%s\n      ", e->key, bk_fault_name(e->fault),
                  e->reason[0] ? ": " : "", e->reason);
    size_t nshow = s->nvars < TEXT_ERROR_VARS ? s->nvars : TEXT_ERROR_VARS;
    for (size_t k = 0; k < nshow; k++)
      bk_buf_printf(o, "%s%s = %.6g", k ? ", " : "", s->vars[k].name, e->x[k]);
    if (s->nvars > nshow)
      bk_buf_printf(o, ", ... (%zu more)", s->nvars - nshow);
    bk_buf_putc(o, '\n');
    if (e->folder[0])
      bk_buf_printf(o, "      folder %s\n", e->folder);
  }
}

/* The index of the mode that drives the system's failure: the one failing
 * in most of the system's failures, else the one of largest Pf; -1 when
 * none is known. */
static long driving_mode(const bk_result_t *r, size_t nsystem) {
  long best = -1;
  for (size_t i = 0; i < r->ncomponents && i < nsystem; i++) {
    const bk_component_t *c = &r->components[i], *b;
    if (!c->present)
      continue;
    if (best < 0) {
      best = (long)i;
      continue;
    }
    b = &r->components[best];
    int counted =
        c->system_failures != UINT64_MAX && b->system_failures != UINT64_MAX;
    if (counted ? c->system_failures > b->system_failures
                : c->est.pf > b->est.pf)
      best = (long)i;
  }
  return best;
}

static void components_text(const bk_study_t *s, const bk_result_t *r,
                            bk_buf_t *o) {
  bk_buf_printf(o, "\n  limit states, system %s\n", s->limit_state);
  bk_buf_printf(o, "    %-16s %11s %8s %7s %23s %9s %9s\n", "mode", "Pf",
                "beta", "cov", "interval", "failures", "of system");
  for (size_t i = 0; i < s->nmodes; i++) {
    const bk_component_t *c = i < r->ncomponents ? &r->components[i] : NULL;
    bk_buf_printf(o, "    %-16s ", s->modes[i].name);
    if (i >= s->nsystem || s->system == BK_SYSTEM_SINGLE)
      bk_buf_printf(o, "(beside the system, not part of it)\n    %-16s ", "");
    if (!c || !c->present) {
      bk_buf_puts(o, "not estimated by this method\n");
      continue;
    }
    bk_buf_puts(o, " ");
    num(o, c->est.pf);
    bk_buf_puts(o, " ");
    bk_buf_printf(o, "%8.3f ", c->est.beta);
    if (isfinite(c->est.cov))
      bk_buf_printf(o, "%7.3f ", c->est.cov);
    else
      bk_buf_printf(o, "%7s ", "n/a");
    num(o, c->est.ci[0]);
    bk_buf_puts(o, " to ");
    num(o, c->est.ci[1]);
    bk_buf_printf(o, " %9llu", (unsigned long long)c->est.failures);
    if (c->system_failures != UINT64_MAX && r->est.failures)
      bk_buf_printf(o, " %8.1f%%\n",
                    100.0 * (double)c->system_failures /
                        (double)r->est.failures);
    else
      bk_buf_printf(o, " %9s\n", "-");
  }
  long d = driving_mode(r, s->system == BK_SYSTEM_SINGLE ? 0 : s->nsystem);
  if (d >= 0 && r->est.failures &&
      r->components[d].system_failures != UINT64_MAX)
    bk_buf_printf(o,
                  "    %s fails in %.1f%% of the system's failures (\"of "
                  "system\"); it drives the system's failure\n",
                  r->components[d].name,
                  100.0 * (double)r->components[d].system_failures /
                      (double)r->est.failures);
  else if (d >= 0)
    bk_buf_printf(o, "    %s has the largest Pf of the modes\n",
                  r->components[d].name);
  if (r->bounds.present) {
    bk_buf_puts(o, "    first-order bounds on the system Pf: simple ");
    num(o, r->bounds.simple[0]);
    bk_buf_puts(o, " to ");
    num(o, r->bounds.simple[1]);
    bk_buf_puts(o, ", Ditlevsen ");
    num(o, r->bounds.ditlevsen[0]);
    bk_buf_puts(o, " to ");
    num(o, r->bounds.ditlevsen[1]);
    bk_buf_puts(o, "\n");
  }
}

int bk_report_text(const bk_study_t *s, const bk_result_t *r, bk_buf_t *o) {
  const bk_estimate_t *e = &r->est;
  bk_buf_printf(o, "Study %s, method %s, seed %llu\n", s->name, r->method,
                (unsigned long long)s->seed);
  if (r->reanalysis)
    bk_buf_printf(o,
                  "  RE-ANALYSIS of the recorded evaluations (no model run): "
                  "%s\n",
                  r->reanalysis);
  if (r->replicates)
    bk_buf_printf(o, "  design               %u replicates of %llu points\n",
                  r->replicates, (unsigned long long)r->per_replicate);
  bk_buf_printf(o, "  evaluations          %llu\n",
                (unsigned long long)r->evaluations);
  bk_buf_printf(o, "  failures (g <= 0)    %llu\n",
                (unsigned long long)e->failures);
  if (r->model_errors)
    bk_buf_printf(o, "  model errors         %llu (%llu left out)\n",
                  (unsigned long long)r->model_errors,
                  (unsigned long long)r->excluded);
  bk_buf_puts(o, "\n  failure probability  ");
  num(o, e->pf);
  bk_buf_puts(o, "\n  coefficient of var.  ");
  if (isfinite(e->cov))
    bk_buf_printf(o, "%.3f", e->cov);
  else if (e->ci_method && strncmp(e->ci_method, "none", 4) == 0)
    bk_buf_puts(o, "n/a (not a sampling estimate)");
  else if (e->failures == 0)
    bk_buf_puts(o, "n/a (no failure seen)");
  else
    bk_buf_puts(o, "n/a (too few failures to estimate the spread)");
  bk_buf_printf(o, "\n  %g%% interval         ", 100 * e->ci_level);
  num(o, e->ci[0]);
  bk_buf_puts(o, " to ");
  num(o, e->ci[1]);
  bk_buf_printf(o, "  (%s)\n", e->ci_method ? e->ci_method : "");
  bk_buf_puts(o, "  reliability index    ");
  fixed(o, e->beta);
  bk_buf_puts(o, "  (");
  fixed(o, e->beta_ci[0]);
  bk_buf_puts(o, " to ");
  fixed(o, e->beta_ci[1]);
  bk_buf_puts(o, ")\n");
  if (r->excluded) {
    bk_buf_puts(o, "  Pf if left-out runs  ");
    num(o, r->pf_bounds[0]);
    bk_buf_puts(o, " (all safe) to ");
    num(o, r->pf_bounds[1]);
    bk_buf_puts(o, " (all failed)\n");
  }
  if (s->analysis.has_target_beta) {
    double tb = s->analysis.target_beta;
    const char *verdict = e->beta_ci[0] >= tb ? "met"
                          : e->beta < tb      ? "not met"
                                              : "met by the estimate, "
                                                "not by its interval";
    bk_buf_printf(o, "  target beta          %.2f: %s\n", tb, verdict);
  }
  if (r->dp.present) {
    bk_buf_printf(o, "\n  design point (FORM, %s after %d iterations)\n",
                  r->dp.converged ? "converged" : "NOT converged",
                  r->dp.iterations);
    bk_buf_puts(o, "    beta FORM          ");
    fixed(o, r->dp.beta);
    bk_buf_puts(o, "   Pf FORM ");
    num(o, r->dp.pf_form);
    if (!isnan(r->dp.pf_sorm)) {
      bk_buf_puts(o, "   Pf SORM (Breitung) ");
      num(o, r->dp.pf_sorm);
    }
    bk_buf_printf(o, "\n    %-16s %14s %10s %10s\n", "variable", "value", "u",
                  "alpha^2");
    for (size_t i = 0, k = 0; i < s->nvars; i++) {
      bk_buf_printf(o, "    %-16s %14.6g ", s->vars[i].name, r->dp.x[i]);
      if (s->vars[i].dist.kind == BK_DIST_CONSTANT)
        bk_buf_printf(o, "%10s", "-");
      else
        bk_buf_printf(o, "%10.4f", r->dp.u[k++]);
      bk_buf_printf(o, " %10.4f\n", r->dp.alpha2[i]);
    }
  }
  if (s->nmodes)
    components_text(s, r, o);
  for (size_t i = 0; i < r->ndetails; i++)
    bk_buf_printf(o, "  %-20s %.6g\n", r->details[i].label,
                  r->details[i].value);
  for (size_t i = 0; i < r->nwarnings; i++)
    bk_buf_printf(o, "  WARNING: %s\n", r->warnings[i]);
  for (size_t i = 0; i < r->nnotes; i++)
    bk_buf_printf(o, "  NOTE: %s\n", r->notes[i]);
  error_runs_text(o, s, r);
  bk_buf_printf(o, "  stopped because      %s", r->stop_reason);
  if (s->analysis.target_cov > 0 && !(e->cov <= s->analysis.target_cov))
    bk_buf_printf(o, " (target_cov %g not reached)", s->analysis.target_cov);
  bk_buf_puts(o, "\n");
  if (r->sessions > 1)
    bk_buf_printf(o,
                  "  run time             %.3g s in %u sessions (this one "
                  "%.3g s)\n",
                  r->seconds_total, r->sessions, r->seconds);
  else
    bk_buf_printf(o, "  run time             %.3g s\n", r->seconds);
  bk_buf_puts(o, "\n");
  return bk_buf_puts(o, bk_report_caution);
}
