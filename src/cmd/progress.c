/*
 * The progress line of `brink run` (see progress.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "cmd/progress.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

void bk_progress_init(bk_progress_t *p, double start) {
  memset(p, 0, sizeof *p);
  p->start = start;
  p->pf = NAN;
  p->cov = NAN;
}

void bk_progress_method(bk_progress_t *p, const bk_method_progress_t *mp) {
  const bk_result_t *r = mp->sofar;
  p->planned = mp->planned;
  if (r) {
    p->evaluations = r->evaluations;
    p->model_errors = r->model_errors;
    p->failures = r->est.failures;
    /* Before its first decision point the estimate is all zeros. */
    int has = r->nhistory > 0 || r->est.ci_method;
    p->pf = has ? r->est.pf : NAN;
    p->cov = has ? r->est.cov : NAN;
  }
  if (mp->stage != p->stage)
    snprintf(p->stage, sizeof p->stage, "%s", mp->stage ? mp->stage : "");
  p->batch_first = mp->batch_first;
  p->batch_size = mp->batch_size;
}

static void put_rate(bk_buf_t *b, double rate) {
  if (rate >= 1e6)
    bk_buf_printf(b, "%.1f M/s", rate / 1e6);
  else if (rate >= 1e3)
    bk_buf_printf(b, "%.1f k/s", rate / 1e3);
  else
    bk_buf_printf(b, "%.1f /s", rate);
}

static void put_eta(bk_buf_t *b, double s) {
  if (!isfinite(s) || s < 0)
    bk_buf_puts(b, "-");
  else if (s < 60)
    bk_buf_printf(b, "%.0fs", s);
  else if (s < 3600)
    bk_buf_printf(b, "%.0fm%02.0fs", floor(s / 60), fmod(floor(s), 60));
  else
    bk_buf_printf(b, "%.0fh%02.0fm", floor(s / 3600), fmod(floor(s / 60), 60));
}

void bk_progress_line(const bk_progress_t *p, double now, bk_buf_t *out) {
  const bk_evaluator_stats_t *st = p->st;
  /* The evaluator's counts run ahead of the method's between decision
   * points; both start with this process (a resumed run replays). */
  uint64_t done = p->evaluations, fresh = p->evaluations;
  uint64_t failures = p->failures, errors = p->model_errors;
  if (st) {
    uint64_t live = st->replayed + st->completed;
    done = live > done ? live : done;
    fresh = st->completed;
    failures = st->failures;
    errors = st->errors + st->replayed_errors;
  }
  double el = now - p->start;
  double rate = el > 0 ? (double)fresh / el : 0;
  if (p->stage[0])
    bk_buf_printf(out, "%s: ", p->stage);
  uint64_t bend = p->batch_first + p->batch_size;
  if (p->planned) {
    bk_buf_printf(out, "%llu/%llu done", (unsigned long long)done,
                  (unsigned long long)p->planned);
  } else {
    if (p->batch_size) {
      uint64_t in = done > p->batch_first ? done - p->batch_first : 0;
      bk_buf_printf(
          out, "batch %llu/%llu  ",
          (unsigned long long)(in < p->batch_size ? in : p->batch_size),
          (unsigned long long)p->batch_size);
    }
    bk_buf_printf(out, "%llu done", (unsigned long long)done);
  }
  if (st && p->processes)
    bk_buf_printf(out, "  %d running", st->running);
  bk_buf_printf(out, "  %llu failures  %llu errors  Pf ",
                (unsigned long long)failures, (unsigned long long)errors);
  double pf = p->pf;
  if (p->running_share && st) {
    /* The running share, as the estimate counts it (on_error). */
    uint64_t n = p->on_error_fail ? done : done - errors;
    uint64_t k = failures + (p->on_error_fail ? errors : 0);
    pf = n > 0 && done >= errors ? (double)k / (double)n : NAN;
  }
  if (isfinite(pf))
    bk_buf_printf(out, "%.3e", pf);
  else
    bk_buf_puts(out, "-");
  bk_buf_puts(out, "  cov ");
  if (isfinite(p->cov))
    bk_buf_printf(out, "%.3f", p->cov);
  else
    bk_buf_puts(out, "-");
  bk_buf_puts(out, "  ");
  put_rate(out, rate);
  if (p->planned) {
    bk_buf_puts(out, "  ETA ");
    put_eta(out, p->planned <= done ? 0
                 : rate > 0         ? (double)(p->planned - done) / rate
                                    : NAN);
  } else if (p->batch_size && done < bend && rate > 0) {
    bk_buf_puts(out, "  batch ETA ");
    put_eta(out, (double)(bend - done) / rate);
  }
}

void bk_progress_show(bk_progress_t *p, double now, int force) {
  if (p->quiet)
    return;
  if (!force && now - p->last < (p->tty ? 0.1 : 10.0))
    return;
  p->last = now;
  bk_buf_t b;
  bk_buf_init(&b);
  bk_progress_line(p, now, &b);
  if (b.data) {
    fprintf(stderr, "%s%s%s", p->tty ? "\r\033[K" : "", b.data,
            p->tty ? "" : "\n");
    fflush(stderr);
    p->shown = 1;
  }
  bk_buf_close(&b);
}
