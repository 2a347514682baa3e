/*
 * The HTML report of a run folder: one self-contained file (inline CSS and
 * SVG, no scripts, no network) with the study summary, the result, charts
 * (convergence, limit-state histogram, inputs that drive failure, scatter
 * of the two most influential inputs, model run times) and the table of
 * model errors. Numbers come from the run's report.json; the samples behind
 * the charts come from records.log, or, for studies evaluated in process
 * (which keep no records), from the first evaluations of the same design
 * recomputed from the seed. The file is well-formed XML as well as HTML.
 *
 * SPDX-License-Identifier: MIT
 */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "numerics/dist.h"
#include "base/fault.h"
#include "methods/method.h"
#include "eval/records.h"
#include "reports/report.h"
#include "study/study.h"
#include "reports/svg.h"

/* ---- a reader for our own report.json -------------------------------- */

enum { J_NULL, J_BOOL, J_NUM, J_STR, J_ARR, J_OBJ };

typedef struct jv {
  int t;
  double num;
  char *str;
  struct jv *items;
  char **keys;
  size_t n;
} jv_t;

static void jv_free(jv_t *v) {
  for (size_t i = 0; i < v->n; i++) {
    jv_free(&v->items[i]);
    if (v->keys)
      bk_free(v->keys[i]);
  }
  bk_free(v->items);
  bk_free(v->keys);
  bk_free(v->str);
  memset(v, 0, sizeof *v);
}

static void skip_ws(const char **p) {
  while (**p == ' ' || **p == '\n' || **p == '\t' || **p == '\r')
    (*p)++;
}

static int parse_string(const char **p, char **out) {
  bk_buf_t b;
  bk_buf_init(&b);
  (*p)++;
  while (**p && **p != '"') {
    char c = *(*p)++;
    if (c == '\\') {
      char e = *(*p)++;
      if (e == 'n')
        c = '\n';
      else if (e == 't')
        c = '\t';
      else if (e == 'r')
        c = '\r';
      else if (e == 'u') {
        unsigned u = 0;
        for (int i = 0; i < 4 && **p; i++) {
          char h = *(*p)++;
          u = u * 16 + (unsigned)(h >= 'a'   ? h - 'a' + 10
                                  : h >= 'A' ? h - 'A' + 10
                                             : h - '0');
        }
        c = u < 0x80 ? (char)u : '?';
      } else if (e == '\0')
        break;
      else
        c = e;
    }
    bk_buf_putc(&b, c);
  }
  if (**p != '"') {
    bk_buf_close(&b);
    return -1;
  }
  (*p)++;
  bk_buf_putc(&b, '\0');
  *out = b.data;
  return 0;
}

static int parse_value(const char **p, jv_t *v, int depth) {
  memset(v, 0, sizeof *v);
  skip_ws(p);
  if (depth > 32)
    return -1;
  if (**p == '{' || **p == '[') {
    int obj = **p == '{';
    char close = obj ? '}' : ']';
    v->t = obj ? J_OBJ : J_ARR;
    (*p)++;
    size_t cap = 0;
    for (;;) {
      skip_ws(p);
      if (**p == close) {
        (*p)++;
        return 0;
      }
      if (v->n == cap) {
        cap = cap ? 2 * cap : 8;
        jv_t *ni = bk_realloc(v->items, cap * sizeof *ni);
        if (!ni)
          return -1;
        v->items = ni;
        if (obj) {
          char **nk = bk_realloc(v->keys, cap * sizeof *nk);
          if (!nk)
            return -1;
          v->keys = nk;
        }
      }
      if (obj) {
        if (**p != '"' || parse_string(p, &v->keys[v->n]))
          return -1;
        skip_ws(p);
        if (**p != ':') {
          bk_free(v->keys[v->n]);
          return -1;
        }
        (*p)++;
      }
      if (parse_value(p, &v->items[v->n], depth + 1)) {
        v->n++;
        return -1;
      }
      v->n++;
      skip_ws(p);
      if (**p == ',')
        (*p)++;
      else if (**p != close)
        return -1;
    }
  }
  if (**p == '"') {
    v->t = J_STR;
    return parse_string(p, &v->str);
  }
  if (strncmp(*p, "true", 4) == 0 || strncmp(*p, "false", 5) == 0) {
    v->t = J_BOOL;
    v->num = **p == 't';
    *p += **p == 't' ? 4 : 5;
    return 0;
  }
  if (strncmp(*p, "null", 4) == 0) {
    v->t = J_NULL;
    v->num = NAN;
    *p += 4;
    return 0;
  }
  char *end;
  v->t = J_NUM;
  v->num = strtod(*p, &end);
  if (end == *p)
    return -1;
  *p = end;
  return 0;
}

static const jv_t *jget(const jv_t *o, const char *k) {
  if (!o || o->t != J_OBJ)
    return NULL;
  for (size_t i = 0; i < o->n; i++)
    if (strcmp(o->keys[i], k) == 0)
      return &o->items[i];
  return NULL;
}

static double jnum(const jv_t *o, const char *k) {
  const jv_t *v = jget(o, k);
  return v && (v->t == J_NUM || v->t == J_BOOL) ? v->num : NAN;
}

static const char *jstr(const jv_t *o, const char *k) {
  const jv_t *v = jget(o, k);
  return v && v->t == J_STR ? v->str : "";
}

static double jat(const jv_t *a, size_t i) {
  return a && a->t == J_ARR && i < a->n && a->items[i].t == J_NUM
             ? a->items[i].num
             : NAN;
}

static int read_file(const char *path, bk_buf_t *b) {
  FILE *f = fopen(path, "r");
  if (!f)
    return -errno;
  char chunk[8192];
  size_t n;
  while ((n = fread(chunk, 1, sizeof chunk, f)) > 0)
    bk_buf_append(b, chunk, n);
  fclose(f);
  return bk_buf_putc(b, '\0');
}

/* ---- the samples behind the charts ------------------------------------ */

/* A model error as the report lists it. */
typedef struct {
  char *key;
  int fault;
  char *reason;
  char *folder;
  double *x; /* the run's inputs, nx of them */
} model_error_t;

/* How many model errors the report lists (all are counted). */
#define ERRSHOWN 500
/* How many inputs of each the error table shows (the records have all). */
#define ERRVARS 8

typedef struct {
  size_t nx;
  size_t n, cap;
  double *x; /* n * nx */
  double *g;
  double *sec; /* NaN in process */
  size_t nok, nfail;
  model_error_t *err;  /* the first ERRSHOWN */
  size_t nerr, caperr; /* nerr counts them all */
  size_t errs_by_kind[BK_FAULT__COUNT];
  int from_records;
  size_t limit; /* in process: how many points were kept */
  /* Over every evaluation seen (all records; in process, the first
   * STREAM of the design): sums for the influence of the inputs, and the
   * first FAILCAP failures for the scatter. */
  uint64_t nall, nfailall;
  double *sum, *sumsq, *fsum;
  double *fx;
  size_t nfx;
  /* A re-analysis: g of each record is computed again with this study's
   * limit states from the recorded inputs and outputs. */
  const bk_study_t *regs;
  double *vals;
} samples_t;

#define FAILCAP   3000
#define SUBSAMPLE 20000
#define STREAM    (1u << 22)

static int stats_init(samples_t *s) {
  s->sum = bk_calloc(s->nx + 1, sizeof *s->sum);
  s->sumsq = bk_calloc(s->nx + 1, sizeof *s->sumsq);
  s->fsum = bk_calloc(s->nx + 1, sizeof *s->fsum);
  s->fx = bk_calloc(FAILCAP * s->nx + 1, sizeof *s->fx);
  return s->sum && s->sumsq && s->fsum && s->fx ? 0 : BK_ENOMEM;
}

static void stats_add(samples_t *s, const double *x, double g) {
  s->nall++;
  for (size_t i = 0; i < s->nx; i++) {
    s->sum[i] += x[i];
    s->sumsq[i] += x[i] * x[i];
  }
  if (g <= 0) {
    s->nfailall++;
    for (size_t i = 0; i < s->nx; i++)
      s->fsum[i] += x[i];
    if (s->nfx < FAILCAP)
      memcpy(s->fx + s->nfx++ * s->nx, x, s->nx * sizeof *x);
  }
}

static void samples_close(samples_t *s) {
  bk_free(s->x);
  bk_free(s->g);
  bk_free(s->sec);
  for (size_t i = 0; i < s->nerr && i < ERRSHOWN; i++) {
    bk_free(s->err[i].key);
    bk_free(s->err[i].reason);
    bk_free(s->err[i].folder);
    bk_free(s->err[i].x);
  }
  bk_free(s->err);
  bk_free(s->sum);
  bk_free(s->sumsq);
  bk_free(s->fsum);
  bk_free(s->fx);
  bk_free(s->vals);
  memset(s, 0, sizeof *s);
}

static int samples_push(samples_t *s, const double *x, double g, double sec) {
  if (s->n == s->cap) {
    size_t cap = s->cap ? 2 * s->cap : 1024;
    double *nx = bk_realloc(s->x, cap * s->nx * sizeof *nx + 1);
    if (!nx)
      return BK_ENOMEM;
    s->x = nx;
    double *ng = bk_realloc(s->g, cap * sizeof *ng);
    if (!ng)
      return BK_ENOMEM;
    s->g = ng;
    double *ns = bk_realloc(s->sec, cap * sizeof *ns);
    if (!ns)
      return BK_ENOMEM;
    s->sec = ns;
    s->cap = cap;
  }
  memcpy(s->x + s->n * s->nx, x, s->nx * sizeof *x);
  s->g[s->n] = g;
  s->sec[s->n] = sec;
  s->n++;
  s->nok++;
  if (g <= 0)
    s->nfail++;
  return 0;
}

static int on_record(void *data, const bk_record_t *r) {
  samples_t *s = data;
  bk_record_t again;
  if (s->regs && s->vals && r->nx == s->nx &&
      r->ny == s->regs->model.noutputs &&
      (r->fault == BK_FAULT_NONE || r->fault == BK_FAULT_NOT_A_NUMBER)) {
    again = *r;
    memcpy(s->vals, r->x, r->nx * sizeof *s->vals);
    if (r->ny)
      memcpy(s->vals + r->nx, r->y, r->ny * sizeof *s->vals);
    again.g = bk_study_g(s->regs, s->vals, NULL);
    again.fault = isnan(again.g) ? BK_FAULT_NOT_A_NUMBER : BK_FAULT_NONE;
    r = &again;
  }
  if (r->fault != BK_FAULT_NONE) {
    if (r->fault > 0 && r->fault < BK_FAULT__COUNT)
      s->errs_by_kind[r->fault]++;
    if (s->nerr >= ERRSHOWN) {
      s->nerr++;
      return 0;
    }
    if (s->nerr == s->caperr) {
      size_t cap = s->caperr ? 2 * s->caperr : 16;
      model_error_t *ne = bk_realloc(s->err, cap * sizeof *ne);
      if (!ne)
        return BK_ENOMEM;
      s->err = ne;
      s->caperr = cap;
    }
    model_error_t *e = &s->err[s->nerr++];
    e->key = bk_strdup(r->key);
    e->fault = r->fault;
    e->reason = bk_strdup(r->reason ? r->reason : "");
    e->folder = bk_strdup(r->folder ? r->folder : "");
    e->x = r->nx == s->nx ? bk_calloc(s->nx + 1, sizeof *e->x) : NULL;
    if (!e->key || !e->reason || !e->folder || (r->nx == s->nx && !e->x))
      return BK_ENOMEM;
    if (e->x && s->nx)
      memcpy(e->x, r->x, s->nx * sizeof *e->x);
    return 0;
  }
  if (r->nx != s->nx)
    return 0;
  stats_add(s, r->x, r->g);
  return samples_push(s, r->x, r->g, r->seconds);
}

typedef struct {
  bk_evaluator_t inner;
  samples_t *s;
  size_t limit;
} capture_t;

static int capture_batch(bk_evaluator_t *ev, const char *prefix,
                         bk_point_t *pts, size_t n, bk_error_t *err) {
  capture_t *c = ev->data;
  if (c->s->nall >= STREAM)
    return BK_ESTOPPED;
  int rc = c->inner.batch(&c->inner, prefix, pts, n, err);
  if (rc)
    return rc;
  for (size_t i = 0; i < n; i++) {
    if (c->s->n < c->limit &&
        (rc = samples_push(c->s, pts[i].x, pts[i].g, NAN)) != 0)
      return rc;
    stats_add(c->s, pts[i].x, pts[i].g);
  }
  return 0;
}

#define SUBSAMPLE 20000
#define STREAM    (1u << 22)

static int load_samples(const char *folder, const bk_study_t *st, samples_t *s,
                        int reanalysis) {
  s->nx = st->nvars;
  if (stats_init(s))
    return BK_ENOMEM;
  if (reanalysis) {
    s->regs = st;
    s->vals = bk_calloc(st->nvars + st->model.noutputs + 1, sizeof *s->vals);
    if (!s->vals)
      return BK_ENOMEM;
  }
  if (st->model.present) {
    bk_records_t *rec = NULL;
    bk_error_t err;
    bk_error_clear(&err);
    int rc = bk_records_open_folder(&rec, folder, &err);
    if (rc)
      return 0; /* no records: charts say so */
    s->from_records = 1;
    rc = bk_records_scan(rec, on_record, s);
    bk_records_close(rec);
    return rc;
  }
  bk_method_kind_t m = st->analysis.method;
  if (m != BK_METHOD_RANDOM && m != BK_METHOD_LHS && m != BK_METHOD_SOBOL)
    return 0;
  capture_t c;
  bk_evaluator_inprocess(&c.inner, st);
  c.s = s;
  c.limit = SUBSAMPLE;
  bk_evaluator_t ev = {capture_batch, &c};
  bk_result_t res;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_method_run(st, &ev, NULL, &res, &err);
  bk_result_close(&res);
  s->limit = SUBSAMPLE;
  return rc == BK_ESTOPPED ? 0 : rc;
}

/* ---- page pieces ------------------------------------------------------- */

static const char css[] =
    "body{font-family:'DejaVu Sans',Helvetica,Arial,sans-serif;color:#1d2530;"
    "max-width:1060px;margin:24px auto;padding:0 20px;line-height:1.45;"
    "font-size:15px}\n"
    "h1{font-size:24px;margin:0 0 4px}h2{font-size:18px;margin:30px 0 8px;"
    "border-bottom:1px solid #c9d1da;padding-bottom:4px}\n"
    "h3{font-size:15px;margin:22px 0 2px}\n"
    ".sub{color:#56616e;margin:0 0 16px}\n"
    ".key{display:flex;flex-wrap:wrap;gap:12px;margin:12px 0}\n"
    ".tile{border:1px solid #c9d1da;border-radius:6px;padding:10px 14px;"
    "min-width:180px}\n"
    ".tile .v{font-size:22px;font-weight:bold}.tile .l{color:#56616e;"
    "font-size:13px}\n"
    ".ok{color:#1f6f3a}.bad{color:#a3251b}.warn{color:#8a5a00}\n"
    "table{border-collapse:collapse;margin:6px 0 10px}"
    "td,th{padding:3px 18px 3px 0;text-align:left;vertical-align:top}\n"
    "th{color:#56616e;font-weight:normal;border-bottom:1px solid #c9d1da}\n"
    "td.n{text-align:right;font-variant-numeric:tabular-nums}\n"
    "code{font-family:'DejaVu Sans Mono',monospace;font-size:13px;"
    "background:#f1f4f7;padding:1px 4px;border-radius:3px}\n"
    ".caution{border-left:4px solid #b07d1a;background:#fbf6ea;padding:8px "
    "14px;"
    "margin:16px 0}\n"
    ".note{color:#56616e;font-size:13px;margin:2px 0 6px}\n"
    "svg{display:block;margin:6px 0 4px}\n"
    "svg text{font-family:'DejaVu Sans',Helvetica,Arial,sans-serif}\n"
    "svg .tick{font-size:12px;fill:#3d4754}svg .label{font-size:13px;"
    "fill:#1d2530}\n"
    "svg .note{font-size:12px;fill:#a3251b}\n"
    "svg .frame{fill:none;stroke:#8893a0}svg .grid{stroke:#e3e8ee}"
    "svg .tickmark{stroke:#8893a0}\n"
    "svg .est{fill:none;stroke:#1f4e89;stroke-width:2}"
    "svg .ci{fill:#1f4e89;fill-opacity:0.16;stroke:none}\n"
    "svg .safe{fill:#8aa4c2}svg .fail{fill:#c0392b}"
    "svg .zero{stroke:#c0392b;stroke-width:1.5;stroke-dasharray:5 3}\n"
    "svg .bar{fill:#1f4e89}svg .barneg{fill:#7a93b3}"
    "svg .time{fill:#5b7a99}\n"
    "svg circle.safe{fill:#8aa4c2;fill-opacity:0.55}"
    "svg circle.fail{fill:#c0392b;fill-opacity:0.9}"
    "svg circle.err{fill:none;stroke:#e67e22;stroke-width:1.6}\n"
    "svg .target{stroke:#1f6f3a;stroke-width:1.5;stroke-dasharray:6 3}\n";

static void esc(bk_buf_t *o, const char *s) {
  bk_svg_escape(o, s);
}

static void sci(bk_buf_t *o, double v) {
  if (isnan(v))
    bk_buf_puts(o, "n/a");
  else if (v == 0)
    bk_buf_puts(o, "0");
  else
    bk_buf_printf(o, "%.3e", v);
}

static void fix3(bk_buf_t *o, double v) {
  if (isfinite(v))
    bk_buf_printf(o, "%.3f", v);
  else
    bk_buf_puts(o, isnan(v) ? "n/a" : v > 0 ? "&#8734;" : "-&#8734;");
}

static void tile(bk_buf_t *o, const char *label, const char *value,
                 const char *cls) {
  bk_buf_printf(o, "<div class=\"tile\"><div class=\"v%s%s\">", cls ? " " : "",
                cls ? cls : "");
  bk_buf_puts(o, value);
  bk_buf_puts(o, "</div><div class=\"l\">");
  esc(o, label);
  bk_buf_puts(o, "</div></div>\n");
}

static void row(bk_buf_t *o, const char *k, const char *v) {
  bk_buf_puts(o, "<tr><th>");
  esc(o, k);
  bk_buf_puts(o, "</th><td>");
  esc(o, v);
  bk_buf_puts(o, "</td></tr>\n");
}

/* ---- charts ------------------------------------------------------------ */

static void chart_convergence(bk_buf_t *o, const jv_t *hist, double ci_level) {
  bk_buf_puts(o, "<h3>Convergence of the failure probability</h3>\n");
  size_t n = hist && hist->t == J_ARR ? hist->n : 0;
  double *x = bk_calloc(n + 1, sizeof *x), *pf = bk_calloc(n + 1, sizeof *pf);
  double *lo = bk_calloc(n + 1, sizeof *lo), *hi = bk_calloc(n + 1, sizeof *hi);
  double ymin = INFINITY, ymax = 0, xmax = 0;
  size_t m = 0;
  for (size_t i = 0; i < n; i++) {
    const jv_t *e = &hist->items[i];
    x[m] = jat(e, 0);
    pf[m] = jat(e, 1);
    lo[m] = jat(e, 2);
    hi[m] = jat(e, 3);
    double vals[3] = {pf[m], lo[m], hi[m]};
    for (int k = 0; k < 3; k++)
      if (vals[k] > 0 && isfinite(vals[k])) {
        ymin = fmin(ymin, vals[k]);
        ymax = fmax(ymax, vals[k]);
      }
    xmax = fmax(xmax, x[m]);
    m++;
  }
  if (m == 1) {
    bk_buf_puts(o, "<p class=\"note\">The method made a single estimate, so "
                   "there is no convergence to draw.</p>\n");
  } else if (m == 0 || !(ymax > 0)) {
    bk_buf_puts(o, "<p class=\"note\">No estimate with a failure yet, so "
                   "there is nothing to draw on a log scale.</p>\n");
  } else {
    bk_svg_t p;
    bk_svg_begin(&p, o, 980, 340, "convergence",
                 "Failure probability estimate and its interval against the "
                 "number of evaluations");
    p.x0 = 0;
    p.x1 = xmax;
    p.logy = 1;
    p.y0 = pow(10, floor(log10(ymin)));
    p.y1 = pow(10, ceil(log10(ymax)));
    if (p.y1 <= p.y0)
      p.y1 = p.y0 * 10;
    bk_svg_axes(&p, "evaluations", "failure probability (log scale)");
    bk_svg_band(&p, m, x, lo, hi, "ci");
    bk_svg_line(&p, m, x, pf, "est");
    for (size_t i = 0; i < m; i++) {
      bk_buf_printf(o,
                    "<circle class=\"pt\" r=\"2.5\" fill=\"#1f4e89\" "
                    "data-n=\"%.17g\" data-pf=\"%.17g\"",
                    x[i], pf[i]);
      if (pf[i] > 0)
        bk_buf_printf(o, " cx=\"%.1f\" cy=\"%.1f\"", bk_svg_px(&p, x[i]),
                      bk_svg_py(&p, pf[i]));
      else
        bk_buf_puts(o, " cx=\"-10\" cy=\"-10\"");
      bk_buf_puts(o, "/>\n");
    }
    bk_svg_end(&p);
    bk_buf_printf(o,
                  "<p class=\"note\">Dark line: the estimate at each stopping "
                  "check (%zu of them); shaded band: its %g%% interval. Points "
                  "with no failure yet (estimate 0) cannot be shown on the log "
                  "scale.</p>\n",
                  m, 100 * ci_level);
  }
  bk_free(x);
  bk_free(pf);
  bk_free(lo);
  bk_free(hi);
}

static int cmp_double(const void *a, const void *b) {
  double x = *(const double *)a, y = *(const double *)b;
  return (x > y) - (x < y);
}

static void chart_histogram(bk_buf_t *o, const samples_t *s, const char *what) {
  bk_buf_puts(o, "<h3>Distribution of the limit-state value g</h3>\n");
  if (s->nok < 2) {
    bk_buf_puts(o, "<p class=\"note\">Not enough evaluations to draw.</p>\n");
    return;
  }
  double gmin = INFINITY, gmax = -INFINITY;
  for (size_t i = 0; i < s->n; i++) {
    gmin = fmin(gmin, s->g[i]);
    gmax = fmax(gmax, s->g[i]);
  }
  double lo = fmin(gmin, 0), hi = fmax(gmax, 0);
  double w = bk_svg_step(lo, hi, 40);
  double a = floor(lo / w) * w, b = ceil(hi / w) * w;
  if (b <= a)
    b = a + w;
  size_t nb = (size_t)llround((b - a) / w);
  if (gmax >= b)
    nb++, b += w;
  size_t *cnt = bk_calloc(nb, sizeof *cnt);
  for (size_t i = 0; i < s->n; i++) {
    size_t k = (size_t)floor((s->g[i] - a) / w);
    if (k >= nb)
      k = nb - 1;
    /* The edges as drawn decide, not the rounding of the division. */
    while (k > 0 && s->g[i] < a + (double)k * w)
      k--;
    while (k + 1 < nb && s->g[i] >= a + (double)(k + 1) * w)
      k++;
    /* g == 0 exactly is a failure: keep it left of the line. */
    if (s->g[i] <= 0 && a + k * w >= 0 && k > 0)
      k--;
    cnt[k]++;
  }
  size_t cmax = 1;
  for (size_t k = 0; k < nb; k++)
    if (cnt[k] > cmax)
      cmax = cnt[k];
  bk_svg_t p;
  bk_svg_begin(&p, o, 980, 320, "g-histogram",
               "Histogram of the limit-state value, failures (g <= 0) in red");
  p.x0 = a;
  p.x1 = b;
  p.logy = 1;
  p.y0 = 0.7;
  p.y1 = pow(10, ceil(log10((double)cmax * 1.05)));
  bk_svg_axes(&p, "limit-state value g (failure when g <= 0)",
              "evaluations per bin (log scale)");
  char attrs[160];
  for (size_t k = 0; k < nb; k++) {
    double xa = a + (double)k * w, xb = a + (double)(k + 1) * w;
    snprintf(attrs, sizeof attrs,
             "data-lo=\"%.17g\" data-hi=\"%.17g\" data-count=\"%zu\"", xa, xb,
             cnt[k]);
    bk_svg_rect(&p, xa, p.y0, xb, cnt[k] ? (double)cnt[k] : p.y0,
                xb <= 0 ? "fail" : "safe", attrs);
  }
  bk_svg_vline(&p, 0, "zero", "g = 0, failure to the left");
  bk_svg_end(&p);
  bk_buf_printf(o,
                "<p class=\"note\">%s: %zu evaluations, %zu of them with g "
                "&#8804; 0 (red). Bin width %g.</p>\n",
                what, s->nok, s->nfail, w);
  bk_free(cnt);
}

typedef struct {
  size_t var;
  double value;
} rank_t;

static int cmp_rank(const void *a, const void *b) {
  double x = fabs(((const rank_t *)a)->value),
         y = fabs(((const rank_t *)b)->value);
  return (x < y) - (x > y);
}

/* Fills ranks (random variables only) and returns their count. */
static size_t influence(const bk_study_t *st, const samples_t *s,
                        const jv_t *alpha2, rank_t *rk) {
  size_t n = 0;
  for (size_t i = 0; i < st->nvars; i++) {
    if (st->vars[i].dist.kind == BK_DIST_CONSTANT)
      continue;
    double v = NAN;
    if (alpha2) {
      v = jnum(alpha2, st->vars[i].name);
    } else if (s->nfailall > 0 && s->nfailall < s->nall) {
      double n = (double)s->nall;
      double m = s->sum[i] / n, mf = s->fsum[i] / (double)s->nfailall;
      double var = (s->sumsq[i] - n * m * m) / (n - 1);
      double sd = var > 0 ? sqrt(var) : 0;
      v = sd > 0 ? (mf - m) / sd : 0;
    }
    rk[n].var = i;
    rk[n].value = v;
    n++;
  }
  qsort(rk, n, sizeof *rk, cmp_rank);
  return n;
}

static void chart_influence(bk_buf_t *o, const bk_study_t *st, const rank_t *rk,
                            size_t n, int form, const samples_t *s) {
  bk_buf_puts(o, "<h3>Inputs that drive failure</h3>\n");
  if (n == 0 || isnan(rk[0].value)) {
    bk_buf_puts(o, "<p class=\"note\">No failures among the evaluations "
                   "available, so the inputs cannot be ranked.</p>\n");
    return;
  }
  double vmax = 0;
  int neg = 0;
  for (size_t i = 0; i < n; i++) {
    vmax = fmax(vmax, fabs(rk[i].value));
    neg |= rk[i].value < 0;
  }
  if (!(vmax > 0))
    vmax = 1;
  double rowh = 28, h = 70 + rowh * (double)n;
  bk_svg_t p;
  bk_svg_begin(&p, o, 980, h, "influence",
               form ? "FORM importance factors"
                    : "Shift of the inputs among "
                      "failures");
  p.ml = 150;
  p.x0 = form ? 0 : (neg ? -vmax * 1.1 : 0);
  p.x1 = form ? fmax(1, vmax) : vmax * 1.1;
  if (!form && !neg)
    p.x0 = 0;
  p.y0 = 0;
  p.y1 = (double)n;
  bk_svg_axes(&p,
              form ? "importance factor \xce\xb1\xc2\xb2 (sums to 1)"
                   : "mean among failures minus mean of all, in standard "
                     "deviations",
              NULL);
  char attrs[200], lab[64];
  for (size_t i = 0; i < n; i++) {
    double yc = (double)n - (double)i - 0.5;
    const char *name = st->vars[rk[i].var].name;
    bk_buf_t a;
    bk_buf_init(&a);
    bk_buf_puts(&a, "data-var=\"");
    bk_svg_escape(&a, name);
    snprintf(attrs, sizeof attrs, "\" data-value=\"%.17g\"", rk[i].value);
    bk_buf_puts(&a, attrs);
    bk_svg_rect(&p, 0, yc - 0.32, rk[i].value, yc + 0.32,
                rk[i].value < 0 ? "barneg" : "bar", a.data);
    bk_buf_close(&a);
    bk_svg_text(&p, p.ml - 8, bk_svg_py(&p, yc) + 4, "end", "label", name);
    snprintf(lab, sizeof lab, form ? "%.3f" : "%+.2f", rk[i].value);
    double px = bk_svg_px(&p, rk[i].value);
    bk_svg_text(&p, rk[i].value < 0 ? px - 6 : px + 6, bk_svg_py(&p, yc) + 4,
                rk[i].value < 0 ? "end" : "start", "tick", lab);
  }
  if (!form && neg)
    bk_svg_vline(&p, 0, "frame", NULL);
  bk_svg_end(&p);
  if (form)
    bk_buf_puts(o, "<p class=\"note\">Importance factors &#945;&#178; at the "
                   "design point found by FORM: the share of each input in "
                   "the reliability index.</p>\n");
  else
    bk_buf_printf(o,
                  "<p class=\"note\">How far each input sits, on average, "
                  "among the %zu failed evaluations from its mean over all "
                  "%zu, in standard deviations of that input. A long bar "
                  "means failures need unusual values of that input; the "
                  "sign tells which side.%s</p>\n",
                  (size_t)s->nfailall, (size_t)s->nall,
                  s->nfailall < 20 ? " With fewer than 20 failures this "
                                     "ranking is rough."
                                   : "");
}

/* Errored runs whose inputs the report holds. */
static size_t error_rows(const samples_t *s) {
  return s->nerr < ERRSHOWN ? s->nerr : ERRSHOWN;
}

/* The scatter's legend, top right of the plot area. */
static void scatter_legend(bk_svg_t *p, int with_errors) {
  static const char *const cls[] = {"safe", "fail", "err"};
  static const char *const text[] = {"safe", "failed", "model error"};
  double px = p->w - p->mr - 118, py = p->mt + 14;
  bk_buf_printf(p->o, "<g data-legend=\"scatter\">\n");
  for (int i = 0; i < (with_errors ? 3 : 2); i++, py += 17) {
    bk_buf_printf(p->o,
                  "<circle class=\"%s\" cx=\"%.1f\" cy=\"%.1f\" "
                  "r=\"%g\"/>\n",
                  cls[i], px, py - 4, i == 2 ? 3.2 : 3.0);
    bk_svg_text(p, px + 10, py, "start", "tick", text[i]);
  }
  bk_buf_puts(p->o, "</g>\n");
}

static void chart_scatter(bk_buf_t *o, const bk_study_t *st, const samples_t *s,
                          const rank_t *rk, size_t n, int ranked) {
  if (n < 2 || s->nok < 2)
    return;
  size_t a = rk[0].var, b = rk[1].var;
  bk_buf_puts(o, ranked ? "<h3>The two most influential inputs</h3>\n"
                        : "<h3>The first two inputs, with the model "
                          "errors</h3>\n");
  double x0 = INFINITY, x1 = -INFINITY, y0 = INFINITY, y1 = -INFINITY;
  for (size_t k = 0; k < s->n + s->nfx; k++) {
    const double *row =
        k < s->n ? s->x + k * s->nx : s->fx + (k - s->n) * s->nx;
    double x = row[a], y = row[b];
    x0 = fmin(x0, x);
    x1 = fmax(x1, x);
    y0 = fmin(y0, y);
    y1 = fmax(y1, y);
  }
  size_t nerr_x = error_rows(s);
  for (size_t k = 0; k < nerr_x; k++)
    if (s->err[k].x) {
      x0 = fmin(x0, s->err[k].x[a]);
      x1 = fmax(x1, s->err[k].x[a]);
      y0 = fmin(y0, s->err[k].x[b]);
      y1 = fmax(y1, s->err[k].x[b]);
    }
  bk_svg_t p;
  bk_svg_begin(&p, o, 980, 480, "scatter",
               "Scatter of the two most influential inputs, failures in red");
  double dx = (x1 - x0) * 0.03 + 1e-300, dy = (y1 - y0) * 0.03 + 1e-300;
  p.x0 = x0 - dx;
  p.x1 = x1 + dx;
  p.y0 = y0 - dy;
  p.y1 = y1 + dy;
  bk_svg_axes(&p, st->vars[a].name, st->vars[b].name);
  /* Safe points first (at most 4000 drawn, evenly thinned), failures on
   * top (at most 3000). */
  size_t nsafe = s->nok - s->nfail, every = nsafe > 4000 ? nsafe / 4000 + 1 : 1;
  size_t drawn_safe = 0, drawn_fail = 0, seen = 0;
  for (size_t k = 0; k < s->n; k++)
    if (s->g[k] > 0 && seen++ % every == 0) {
      bk_svg_dot(&p, s->x[k * s->nx + a], s->x[k * s->nx + b], 2, "safe");
      drawn_safe++;
    }
  for (size_t k = 0; k < s->nfx; k++) {
    bk_svg_dot(&p, s->fx[k * s->nx + a], s->fx[k * s->nx + b], 2.6, "fail");
    drawn_fail++;
  }
  /* Model errors on top, as rings: where they sit against the failures
   * tells whether leaving them out biases Pf. */
  size_t drawn_err = 0;
  for (size_t k = 0; k < nerr_x; k++)
    if (s->err[k].x) {
      bk_svg_dot(&p, s->err[k].x[a], s->err[k].x[b], 3.2, "err");
      drawn_err++;
    }
  scatter_legend(&p, drawn_err > 0);
  bk_svg_end(&p);
  bk_buf_printf(o,
                "<p class=\"note\">Red: failed (g &#8804; 0), %zu shown of "
                "the %llu found in %llu evaluations; blue: safe, %zu shown of "
                "the %zu among the first %zu. Values in the units of the "
                "study file.</p>\n",
                drawn_fail, (unsigned long long)s->nfailall,
                (unsigned long long)s->nall, drawn_safe, nsafe, s->n);
  if (drawn_err)
    bk_buf_printf(o,
                  "<p class=\"note\">Orange rings: runs that ended in a "
                  "model error, %zu shown of %zu; they have no g.</p>\n",
                  drawn_err, s->nerr);
}

static void chart_times(bk_buf_t *o, const samples_t *s) {
  if (!s->from_records || s->n < 1)
    return;
  bk_buf_puts(o, "<h3>Model run times</h3>\n");
  double *t = bk_calloc(s->n, sizeof *t);
  size_t m = 0;
  for (size_t k = 0; k < s->n; k++)
    if (isfinite(s->sec[k]))
      t[m++] = s->sec[k];
  if (m == 0) {
    bk_free(t);
    return;
  }
  qsort(t, m, sizeof *t, cmp_double);
  double hi = t[m - 1] > 0 ? t[m - 1] : 1;
  double w = bk_svg_step(0, hi, 30);
  size_t nb = (size_t)floor(hi / w) + 1;
  size_t *cnt = bk_calloc(nb, sizeof *cnt), cmax = 1;
  for (size_t k = 0; k < m; k++) {
    size_t b = (size_t)floor(t[k] / w);
    cnt[b < nb ? b : nb - 1]++;
  }
  for (size_t b = 0; b < nb; b++)
    cmax = cnt[b] > cmax ? cnt[b] : cmax;
  bk_svg_t p;
  bk_svg_begin(&p, o, 980, 260, "run-times",
               "Histogram of model run times in seconds");
  p.x0 = 0;
  p.x1 = w * (double)nb;
  p.y0 = 0;
  p.y1 = (double)cmax * 1.1;
  bk_svg_axes(&p, "wall time of one model run (s)", "model runs");
  char attrs[120];
  for (size_t b = 0; b < nb; b++) {
    snprintf(attrs, sizeof attrs, "data-count=\"%zu\"", cnt[b]);
    bk_svg_rect(&p, w * (double)b, 0, w * (double)(b + 1), (double)cnt[b],
                "time", attrs);
  }
  bk_svg_end(&p);
  double sum = 0;
  for (size_t k = 0; k < m; k++)
    sum += t[k];
  bk_buf_printf(o,
                "<p class=\"note\">%zu successful runs: median %.3g s, "
                "slowest %.3g s, %.3g s of model time in all.</p>\n",
                m, t[m / 2], t[m - 1], sum);
  bk_free(t);
  bk_free(cnt);
}

/* ---- the page ---------------------------------------------------------- */

static void study_section(bk_buf_t *o, const bk_study_t *st, const jv_t *j) {
  bk_buf_puts(o, "<h2>Study</h2>\n<table>\n");
  row(o, "study", st->name);
  row(o, "study file", jstr(j, "study")[0] ? jstr(j, "study") : st->path);
  if (st->nmodes) {
    for (size_t i = 0; i < st->nmodes; i++) {
      bk_buf_puts(o, "<tr><th>limit state <code>");
      esc(o, st->modes[i].name);
      bk_buf_puts(o, "</code></th><td><code>");
      esc(o, st->modes[i].text);
      bk_buf_puts(o, "</code> (failure when &#8804; 0)</td></tr>\n");
    }
    bk_buf_puts(o, "<tr><th>system</th><td>");
    if (st->system == BK_SYSTEM_SERIES)
      bk_buf_puts(o, "series: fails when any limit state fails (g = min)");
    else if (st->system == BK_SYSTEM_PARALLEL)
      bk_buf_puts(o, "parallel: fails when every limit state fails (g = max)");
    else {
      bk_buf_puts(o, "<code>g = ");
      esc(o, st->limit_state);
      bk_buf_puts(o, "</code> (failure when g &#8804; 0)");
    }
    bk_buf_puts(o, "</td></tr>\n");
  } else {
    bk_buf_puts(o, "<tr><th>limit state</th><td><code>g = ");
    esc(o, st->limit_state);
    bk_buf_puts(o, "</code> (failure when g &#8804; 0)</td></tr>\n");
  }
  if (st->model.present) {
    bk_buf_puts(o, "<tr><th>model command</th><td><code>");
    for (size_t i = 0; i < st->model.argc; i++) {
      if (i)
        bk_buf_putc(o, ' ');
      esc(o, st->model.argv[i]);
    }
    bk_buf_puts(o, "</code></td></tr>\n");
    for (size_t i = 0; i < st->model.noutputs; i++) {
      const bk_output_t *out = &st->model.outputs[i];
      bk_buf_puts(o, "<tr><th>output</th><td><code>");
      esc(o, out->name);
      bk_buf_puts(o, "</code> from ");
      esc(o, out->from_stdout ? "standard output" : out->file);
      bk_buf_puts(o, ", pattern <code>");
      esc(o, out->pattern);
      bk_buf_puts(o, "</code></td></tr>\n");
    }
  } else {
    row(o, "model",
        "none: the limit state is evaluated on the variables "
        "alone");
  }
  char b[256];
  snprintf(b, sizeof b, "%s", jstr(j, "method"));
  row(o, "method", b);
  snprintf(b, sizeof b, "%llu", (unsigned long long)st->seed);
  row(o, "seed", b);
  row(o, "tool", jstr(j, "tool"));
  row(o, "study fingerprint", jstr(j, "fingerprint"));
  bk_buf_puts(o, "</table>\n<h3>Random variables</h3>\n<table>\n"
                 "<tr><th>name</th><th>distribution</th><th>mean</th>"
                 "<th>standard deviation</th><th>cov</th><th>median</th>"
                 "</tr>\n");
  for (size_t i = 0; i < st->nvars; i++) {
    const bk_dist_t *d = &st->vars[i].dist;
    bk_buf_puts(o, "<tr><td><code>");
    esc(o, st->vars[i].name);
    bk_buf_printf(o, "</code></td><td>%s</td>", bk_dist_name(d->kind));
    if (d->kind == BK_DIST_CONSTANT)
      bk_buf_printf(o, "<td class=\"n\">%.6g</td><td></td><td></td><td></td>",
                    d->mean);
    else
      bk_buf_printf(o,
                    "<td class=\"n\">%.6g</td><td class=\"n\">%.6g</td>"
                    "<td class=\"n\">%.3f</td><td class=\"n\">%.6g</td>",
                    d->mean, d->sd, d->mean != 0 ? d->sd / fabs(d->mean) : NAN,
                    bk_dist_median(d));
    bk_buf_puts(o, "</tr>\n");
  }
  bk_buf_puts(o, "</table>\n");
  if (st->ncorr) {
    bk_buf_puts(o, "<h3>Correlations</h3>\n<table>\n<tr><th>between</th>"
                   "<th>and</th><th>correlation</th><th>in the normal space "
                   "(Nataf)</th></tr>\n");
    for (size_t i = 0; i < st->ncorr; i++) {
      bk_buf_puts(o, "<tr><td><code>");
      esc(o, st->vars[st->corr[i].a].name);
      bk_buf_puts(o, "</code></td><td><code>");
      esc(o, st->vars[st->corr[i].b].name);
      bk_buf_printf(
          o,
          "</code></td><td class=\"n\">%.3f</td><td "
          "class=\"n\">%.4f</td></tr>\n",
          st->corr[i].rho,
          bk_transform_rho0(st->transform, st->corr[i].a, st->corr[i].b));
    }
    bk_buf_puts(o, "</table>\n");
  } else {
    bk_buf_puts(o, "<p class=\"note\">The variables are independent (no "
                   "correlations given).</p>\n");
  }
}

/* The modes of a study with several limit states: each one's Pf, beta,
 * interval and share of the system's failures, and the one that drives
 * the system's failure. */
static void components_table(bk_buf_t *o, const jv_t *j) {
  const jv_t *c = jget(j, "components");
  if (!c || c->t != J_OBJ || !c->n)
    return;
  bk_buf_puts(o, "<h3>Limit states</h3>\n<table>\n<tr><th>limit state</th>"
                 "<th>Pf</th><th>&#946;</th><th>cov</th><th>interval of "
                 "Pf</th><th>failures</th><th>share of the system's "
                 "failures</th></tr>\n");
  size_t drive = c->n;
  double best = -1;
  for (size_t i = 0; i < c->n; i++) {
    const jv_t *m = &c->items[i];
    bk_buf_puts(o, "<tr><td><code>");
    esc(o, c->keys[i]);
    bk_buf_puts(o, "</code></td>");
    if (!isfinite(jnum(m, "pf"))) {
      bk_buf_puts(o, "<td colspan=\"6\">not estimated by this method</td>"
                     "</tr>\n");
      continue;
    }
    bk_buf_puts(o, "<td class=\"n\">");
    sci(o, jnum(m, "pf"));
    bk_buf_puts(o, "</td><td class=\"n\">");
    fix3(o, jnum(m, "beta"));
    bk_buf_puts(o, "</td><td class=\"n\">");
    if (isfinite(jnum(m, "cov")))
      bk_buf_printf(o, "%.3f", jnum(m, "cov"));
    else
      bk_buf_puts(o, "n/a");
    bk_buf_puts(o, "</td><td class=\"n\">");
    const jv_t *ci = jget(m, "ci");
    sci(o, jat(ci, 0));
    bk_buf_puts(o, " to ");
    sci(o, jat(ci, 1));
    bk_buf_printf(o, "</td><td class=\"n\">%.0f</td><td class=\"n\">",
                  jnum(m, "failures"));
    double share = jnum(m, "share_of_system");
    if (isfinite(share))
      bk_buf_printf(o, "%.1f%%", 100 * share);
    else
      bk_buf_puts(o, "-");
    bk_buf_puts(o, "</td></tr>\n");
    double key = isfinite(share) ? share : jnum(m, "pf");
    if (key > best) {
      best = key;
      drive = i;
    }
  }
  bk_buf_puts(o, "</table>\n");
  if (drive < c->n) {
    bk_buf_puts(o, "<p><code>");
    esc(o, c->keys[drive]);
    bk_buf_puts(o, isfinite(jnum(&c->items[drive], "share_of_system"))
                       ? "</code> fails in the largest share of the system's "
                         "failures: it drives the system's failure.</p>\n"
                       : "</code> has the largest Pf of the limit "
                         "states.</p>\n");
  }
  const jv_t *b = jget(j, "system_bounds");
  if (b) {
    bk_buf_puts(o, "<table>\n<tr><th>first-order bounds on the system Pf, "
                   "simple</th><td>");
    sci(o, jat(jget(b, "simple"), 0));
    bk_buf_puts(o, " to ");
    sci(o, jat(jget(b, "simple"), 1));
    bk_buf_puts(o, "</td></tr>\n<tr><th>Ditlevsen (bimodal)</th><td>");
    sci(o, jat(jget(b, "ditlevsen"), 0));
    bk_buf_puts(o, " to ");
    sci(o, jat(jget(b, "ditlevsen"), 1));
    bk_buf_puts(o, "</td></tr>\n</table>\n");
  }
}

static void result_section(bk_buf_t *o, const bk_study_t *st, const jv_t *j,
                           const samples_t *s) {
  double pf = jnum(j, "pf"), beta = jnum(j, "beta"), cov = jnum(j, "cov");
  const jv_t *ci = jget(j, "ci"), *bci = jget(j, "beta_ci"),
             *pb = jget(j, "pf_bounds");
  double level = jnum(j, "ci_level");
  bk_buf_t v;
  bk_buf_init(&v);
  bk_buf_puts(o, "<h2>Result</h2>\n");
  if (jstr(j, "reanalysis")[0]) {
    bk_buf_puts(o, "<p class=\"warn\"><b>Re-analysis</b> of the recorded "
                   "evaluations, no model run: ");
    esc(o, jstr(j, "reanalysis"));
    bk_buf_puts(o, "</p>\n");
  }
  bk_buf_puts(o, "<div class=\"key\">\n");
  sci(&v, pf);
  tile(o, "failure probability Pf", v.data, NULL);
  bk_buf_reset(&v);
  fix3(&v, beta);
  tile(o, "reliability index \xce\xb2", v.data, NULL);
  bk_buf_reset(&v);
  if (isfinite(cov))
    bk_buf_printf(&v, "%.3f", cov);
  else
    bk_buf_puts(&v, "n/a");
  tile(o, "coefficient of variation of Pf", v.data, NULL);
  double tb = jnum(j, "target_beta");
  if (isfinite(tb)) {
    bk_buf_reset(&v);
    double blo = jat(bci, 0);
    const char *verdict = blo >= tb   ? "met"
                          : beta < tb ? "not met"
                                      : "met by the estimate only";
    bk_buf_printf(&v, "%s", verdict);
    char lab[96];
    snprintf(lab, sizeof lab, "target reliability index %.2f", tb);
    tile(o, lab, v.data, blo >= tb ? "ok" : beta < tb ? "bad" : "warn");
  }
  bk_buf_puts(o, "</div>\n<table>\n");
  bk_buf_reset(&v);
  char lab[128];
  const char *cim = jstr(j, "ci_method");
  snprintf(lab, sizeof lab, "%g%% interval of Pf", 100 * level);
  if (strncmp(cim, "none", 4) == 0 || !cim[0]) {
    bk_buf_puts(&v, cim[0] ? cim : "none");
    row(o, lab, v.data);
  } else {
    sci(&v, jat(ci, 0));
    bk_buf_puts(&v, " to ");
    sci(&v, jat(ci, 1));
    bk_buf_printf(&v, " (%s)", cim);
    row(o, lab, v.data);
    bk_buf_reset(&v);
    fix3(&v, jat(bci, 0));
    bk_buf_puts(&v, " to ");
    fix3(&v, jat(bci, 1));
    snprintf(lab, sizeof lab, "%g%% interval of \xce\xb2", 100 * level);
    row(o, lab, v.data);
  }
  bk_buf_reset(&v);
  bk_buf_printf(&v, "%.0f", jnum(j, "evaluations"));
  row(o, "evaluations", v.data);
  bk_buf_reset(&v);
  bk_buf_printf(&v, "%.0f", jnum(j, "failures"));
  row(o, "failures (g \xe2\x89\xa4 0)", v.data);
  if (isfinite(jnum(j, "replicates"))) {
    bk_buf_reset(&v);
    bk_buf_printf(&v, "%.0f independent replicates of %.0f points",
                  jnum(j, "replicates"), jnum(j, "per_replicate"));
    row(o, "design", v.data);
  }
  bk_buf_reset(&v);
  bk_buf_printf(&v, "%.0f", jnum(j, "model_errors"));
  if (s->from_records && s->nerr) {
    const char *sep = " (";
    for (int k = 1; k < BK_FAULT__COUNT; k++)
      if (s->errs_by_kind[k]) {
        bk_buf_printf(&v, "%s%zu %s", sep, s->errs_by_kind[k],
                      bk_fault_name(k));
        sep = ", ";
      }
    bk_buf_puts(&v, "); see the table below");
  }
  row(o, "model errors", v.data);
  if (jnum(j, "excluded") > 0) {
    bk_buf_reset(&v);
    sci(&v, jat(pb, 0));
    bk_buf_puts(&v, " (all left-out runs safe) to ");
    sci(&v, jat(pb, 1));
    bk_buf_puts(&v, " (all failed)");
    snprintf(lab, sizeof lab, "Pf bounds (%.0f runs left out)",
             jnum(j, "excluded"));
    row(o, lab, v.data);
  }
  row(o, "stopped because", jstr(j, "stop_reason"));
  bk_buf_reset(&v);
  if (jnum(j, "sessions") > 1)
    bk_buf_printf(&v, "%.3g s in %.0f sessions (the last %.3g s)",
                  jnum(j, "seconds_total"), jnum(j, "sessions"),
                  jnum(j, "seconds"));
  else
    bk_buf_printf(&v, "%.3g s", jnum(j, "seconds"));
  row(o, "run time", v.data);
  const jv_t *det = jget(j, "details");
  for (size_t i = 0; det && det->t == J_OBJ && i < det->n; i++) {
    bk_buf_reset(&v);
    bk_buf_printf(&v, "%.6g", det->items[i].num);
    row(o, det->keys[i], v.data);
  }
  bk_buf_puts(o, "</table>\n");
  components_table(o, j);
  const jv_t *dp = jget(j, "design_point");
  if (dp) {
    bk_buf_puts(o, "<h3>Design point (FORM)</h3>\n<table>\n");
    bk_buf_reset(&v);
    fix3(&v, jnum(dp, "beta"));
    bk_buf_puts(&v, jnum(dp, "converged") > 0 ? " (converged)"
                                              : " (NOT converged)");
    row(o, "reliability index \xce\xb2 (FORM)", v.data);
    bk_buf_puts(o, "</table>\n<table><tr><th>variable</th><th>value at the "
                   "design point</th><th>importance factor "
                   "&#945;&#178;</th></tr>\n");
    const jv_t *x = jget(dp, "x"), *a2 = jget(dp, "alpha2");
    for (size_t i = 0; i < st->nvars; i++) {
      bk_buf_puts(o, "<tr><td><code>");
      esc(o, st->vars[i].name);
      bk_buf_printf(o,
                    "</code></td><td class=\"n\">%.6g</td><td "
                    "class=\"n\">%.4f</td></tr>\n",
                    jnum(x, st->vars[i].name), jnum(a2, st->vars[i].name));
    }
    bk_buf_puts(o, "</table>\n");
  }
  const jv_t *w = jget(j, "warnings");
  for (size_t i = 0; w && w->t == J_ARR && i < w->n; i++) {
    bk_buf_puts(o, "<p class=\"warn\"><b>Warning:</b> ");
    esc(o, w->items[i].t == J_STR ? w->items[i].str : "");
    bk_buf_puts(o, "</p>\n");
  }
  const jv_t *nt = jget(j, "notes");
  for (size_t i = 0; nt && nt->t == J_ARR && i < nt->n; i++) {
    bk_buf_puts(o, "<p><b>Note:</b> ");
    esc(o, nt->items[i].t == J_STR ? nt->items[i].str : "");
    bk_buf_puts(o, "</p>\n");
  }
  bk_buf_close(&v);
}

static void errors_section(bk_buf_t *o, const bk_study_t *st,
                           const samples_t *s) {
  if (!s->from_records)
    return;
  bk_buf_puts(o, "<h2>Model errors</h2>\n");
  if (s->nerr == 0) {
    bk_buf_puts(o, "<p>No model run ended in an error.</p>\n");
    return;
  }
  bk_buf_puts(o, "<table data-table=\"model-errors\">\n<tr><th>evaluation"
                 "</th><th>kind</th><th>what happened</th><th>inputs</th>"
                 "<th>run folder kept</th></tr>\n");
  size_t shown = s->nerr < ERRSHOWN ? s->nerr : ERRSHOWN;
  for (size_t i = 0; i < shown; i++) {
    const model_error_t *e = &s->err[i];
    bk_buf_puts(o, "<tr><td><code>");
    esc(o, e->key);
    bk_buf_printf(o, "</code></td><td>%s</td><td>", bk_fault_name(e->fault));
    esc(o, e->reason);
    bk_buf_puts(o, "</td><td class=\"n\">");
    size_t nshow = s->nx < st->nvars ? s->nx : st->nvars;
    for (size_t k = 0; e->x && k < nshow && k < ERRVARS; k++) {
      bk_buf_puts(o, k ? ", " : "");
      esc(o, st->vars[k].name);
      bk_buf_printf(o, " = %.6g", e->x[k]);
    }
    if (e->x && nshow > ERRVARS)
      bk_buf_printf(o, ", ... (%zu more)", nshow - ERRVARS);
    bk_buf_puts(o, "</td><td>");
    if (e->folder[0]) {
      bk_buf_puts(o, "<code>");
      esc(o, e->folder);
      bk_buf_puts(o, "</code>");
    }
    bk_buf_puts(o, "</td></tr>\n");
  }
  bk_buf_puts(o, "</table>\n");
  if (shown < s->nerr)
    bk_buf_printf(o,
                  "<p class=\"note\">The first %zu of %zu are listed; "
                  "<code>brink export FOLDER --csv</code> lists all.</p>\n",
                  shown, s->nerr);
}

/* The method in words, for the heading. */
static const char *method_words(const char *m) {
  static const char *const t[][2] = {
      {"random", "crude Monte Carlo sampling"},
      {"lhs", "Latin hypercube sampling"},
      {"sobol", "scrambled Sobol sampling"},
      {"form", "first-order reliability method (FORM)"},
      {"importance", "importance sampling"},
      {"cross-entropy", "cross-entropy importance sampling"},
      {"subset", "subset simulation"},
      {"surrogate", "Gaussian-process surrogate with a correction by model "
                    "runs"},
  };
  for (size_t i = 0; i < sizeof t / sizeof t[0]; i++)
    if (strcmp(m, t[i][0]) == 0)
      return t[i][1];
  return m;
}

int bk_report_html(const char *folder, const bk_study_t *st, bk_buf_t *o,
                   bk_error_t *err) {
  return bk_report_html_of(folder, st, NULL, o, err);
}

int bk_report_html_of(const char *folder, const bk_study_t *st,
                      const char *json, bk_buf_t *o, bk_error_t *err) {
  bk_buf_t text;
  bk_buf_init(&text);
  bk_buf_t path;
  bk_buf_init(&path);
  bk_buf_printf(&path, "%s/report.json", folder);
  int rc = json ? bk_buf_puts(&text, json) : read_file(path.data, &text);
  if (rc) {
    bk_error_set(err, rc, path.data, 0, 0,
                 "no finished result here (%s); run `brink run STUDY.yaml` "
                 "first",
                 bk_strerror(rc));
    bk_buf_close(&path);
    bk_buf_close(&text);
    return rc;
  }
  jv_t j;
  const char *p = text.data;
  if (parse_value(&p, &j, 0) || j.t != J_OBJ) {
    jv_free(&j);
    bk_error_set(err, BK_ECORRUPT, path.data, 0, 0,
                 "cannot read this report.json; run the study again to "
                 "rewrite it");
    bk_buf_close(&path);
    bk_buf_close(&text);
    return BK_ECORRUPT;
  }
  bk_buf_close(&path);
  samples_t s;
  memset(&s, 0, sizeof s);
  rc = load_samples(folder, st, &s, jstr(&j, "reanalysis")[0] != '\0');
  if (rc) {
    bk_error_set(err, rc, folder, 0, 0, "cannot read the evaluations: %s",
                 bk_strerror(rc));
    samples_close(&s);
    jv_free(&j);
    bk_buf_close(&text);
    return rc;
  }
  char fp[80];
  snprintf(fp, sizeof fp, "%s-%s", st->digest_study, st->digest_model);
  int changed =
      strcmp(fp, jstr(&j, "fingerprint")) != 0 && !jstr(&j, "reanalysis")[0];

  bk_buf_puts(o, "<!DOCTYPE html>\n<html xmlns=\"http://www.w3.org/1999/"
                 "xhtml\" lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n"
                 "<title>Reliability report: ");
  esc(o, st->name);
  bk_buf_printf(o, "</title>\n<style>\n%s</style>\n</head>\n<body>\n", css);
  bk_buf_puts(o, "<h1>Reliability report: ");
  esc(o, st->name);
  time_t now = time(NULL);
  char date[32];
  strftime(date, sizeof date, "%Y-%m-%d %H:%M UTC", gmtime(&now));
  bk_buf_puts(o, "</h1>\n<p class=\"sub\">");
  esc(o, method_words(jstr(&j, "method")));
  bk_buf_printf(o, ", seed %llu &#183; made by ", (unsigned long long)st->seed);
  esc(o, jstr(&j, "tool"));
  bk_buf_printf(o, " on %s</p>\n", date);
  if (changed)
    bk_buf_puts(o, "<p class=\"warn\"><b>Note:</b> the study file has "
                   "changed since this run (its fingerprint differs); the "
                   "study section shows the file as it is now.</p>\n");
  result_section(o, st, &j, &s);
  bk_buf_puts(o, "<div class=\"caution\"><b>Caution.</b> ");
  esc(o, bk_report_caution);
  bk_buf_puts(o, "</div>\n<h2>Charts</h2>\n");
  chart_convergence(o, jget(&j, "history"), jnum(&j, "ci_level"));
  const char *mth = jstr(&j, "method");
  if (mth && strcmp(mth, "surrogate") == 0)
    bk_buf_puts(o, "<p class=\"note\">The learning curve: while the "
                   "surrogate learns, each point is its own estimate and the "
                   "band runs from P(mu + 2 s &le; 0) to P(mu - 2 s &le; 0), "
                   "the surrogate's uncertainty, not a confidence interval; "
                   "then each point is the estimate corrected by model runs "
                   "with its interval. The details above give the training "
                   "and correction runs, the leave-one-out fit (Q2, "
                   "standardised residuals) and the share of the variance "
                   "from each part.</p>\n");
  char what[200];
  bk_method_kind_t mk = st->analysis.method;
  int sampling =
      mk == BK_METHOD_RANDOM || mk == BK_METHOD_LHS || mk == BK_METHOD_SOBOL;
  if (s.from_records && !sampling)
    snprintf(what, sizeof what,
             "All recorded evaluations; the method chooses where to "
             "evaluate, so this is not the distribution of g");
  else if (s.from_records)
    snprintf(what, sizeof what, "All recorded evaluations");
  else if (s.limit)
    snprintf(what, sizeof what,
             "The first %zu evaluations of the design, recomputed from the "
             "seed (this study keeps no records)",
             s.n);
  else
    snprintf(what, sizeof what, "Evaluations");
  if (s.n == 0 && !s.from_records && !st->model.present)
    bk_buf_puts(o, "<p class=\"note\">The charts of single evaluations are "
                   "drawn for the sampling methods (random, lhs, sobol) of "
                   "studies without records.</p>\n");
  else if (s.n == 0 && st->model.present && !s.from_records)
    bk_buf_puts(o, "<p class=\"note\">No records.log in this folder, so the "
                   "charts of single evaluations are left out.</p>\n");
  else
    chart_histogram(o, &s, what);
  rank_t *rk = bk_calloc(st->nvars + 1, sizeof *rk);
  const jv_t *dp = jget(&j, "design_point");
  const jv_t *a2 = dp ? jget(dp, "alpha2") : NULL;
  size_t nr = influence(st, &s, a2, rk);
  if (s.n > 0 || a2)
    chart_influence(o, st, rk, nr, a2 != NULL, &s);
  if (s.n > 0 && nr >= 2 && !isnan(rk[1].value))
    chart_scatter(o, st, &s, rk, nr, 1);
  else if (s.n > 0 && nr >= 2 && error_rows(&s) > 0) {
    /* No failure to rank the inputs by, but model errors to show: the
     * first two random inputs, in the order of the study. */
    for (size_t i = 0, k = 0; i < st->nvars && k < 2; i++)
      if (st->vars[i].dist.kind != BK_DIST_CONSTANT)
        rk[k++].var = i;
    chart_scatter(o, st, &s, rk, nr, 0);
  }
  chart_times(o, &s);
  bk_free(rk);
  errors_section(o, st, &s);
  study_section(o, st, &j);
  bk_buf_puts(o, "</body>\n</html>\n");
  samples_close(&s);
  jv_free(&j);
  bk_buf_close(&text);
  return 0;
}

int bk_report_study_path(const char *folder, char **path) {
  *path = NULL;
  bk_buf_t text, p;
  bk_buf_init(&text);
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/report.json", folder);
  int rc = read_file(p.data, &text);
  bk_buf_close(&p);
  if (rc) {
    bk_buf_close(&text);
    return rc;
  }
  jv_t j;
  const char *q = text.data;
  rc = parse_value(&q, &j, 0) || j.t != J_OBJ ? BK_ECORRUPT : 0;
  if (rc == 0 && jstr(&j, "study")[0])
    *path = bk_strdup(jstr(&j, "study"));
  else if (rc == 0)
    rc = BK_ENOTFOUND;
  jv_free(&j);
  bk_buf_close(&text);
  return rc;
}
