/*
 * The MPI coordinator (see mpi_coord.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/mpi_coord.h"

#include <errno.h>
#include <inttypes.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/fault.h"
#include "base/stop.h"
#include "eval/mpi_comm.h"
#include "eval/mpi_wire.h"
#include "eval/replay.h"

/* Microseconds an idle coordinator sleeps between polls: short right after
 * a message, doubling while nothing comes, up to POLL_MAX_US. */
#define POLL_US     50
#define POLL_MAX_US 1000
/* Seconds a stopping coordinator waits for the workers' last results (the
 * model grace from SIGTERM to SIGKILL is 5 s). */
#define STOP_WAIT 12.0

static double now_s(void) {
  struct timespec ts;
  clock_gettime(CLOCK_MONOTONIC, &ts);
  return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void sleep_us(long us) {
  struct timespec ts = {us / 1000000, (us % 1000000) * 1000};
  nanosleep(&ts, NULL);
}

/* A worker rank. While busy it holds the chunk pos[0..n) (positions in
 * the batch). */
typedef struct {
  int busy;
  size_t *pos;
  size_t n;
  int slots; /* its run.slots, from its HELLO */
  int stop_sent;
  char host[256];
} worker_t;

struct bk_mpi_coord {
  bk_mpi_coord_opts_t o;
  bk_dispatch_stats_t st;
  int nworkers;
  worker_t *w; /* index rank - 1 */
  double *rx;  /* a received record's inputs and outputs */
  double *ry;
};

static int malformed(bk_error_t *err, int rank, const char *host) {
  return bk_error_set(err, BK_EPROTO, NULL, 0, 0,
                      "a malformed message from MPI rank %d on %s (do all "
                      "ranks run the same brink build?)",
                      rank, host && *host ? host : "an unknown host");
}

int bk_mpi_coord_new(bk_mpi_coord_t **out, const bk_mpi_coord_opts_t *opts,
                     bk_error_t *err) {
  *out = NULL;
  const bk_study_t *s = opts->study;
  bk_mpi_coord_t *c = bk_calloc(1, sizeof *c);
  if (!c)
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  c->o = *opts;
  c->nworkers = bk_mpi_size() - 1;
  c->w = bk_calloc((size_t)(c->nworkers > 0 ? c->nworkers : 1), sizeof *c->w);
  c->rx = bk_calloc(s->nvars + 1, sizeof *c->rx);
  c->ry = bk_calloc(s->model.noutputs + 1, sizeof *c->ry);
  int rc = c->w && c->rx && c->ry ? 0 : BK_ENOMEM;
  if (rc) {
    bk_mpi_coord_free(c);
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  }
  int greeted = 0;
  while (greeted < c->nworkers) {
    bk_mpi_msg_t m;
    if (!bk_mpi_probe(BK_MPI_ANY, BK_WIRE_HELLO, &m)) {
      if (bk_stop_requested()) {
        rc = BK_ESTOPPED;
        break;
      }
      sleep_us(POLL_US);
      continue;
    }
    char *data;
    int rrc = bk_mpi_recv(&m, &data);
    if (rrc) {
      rc = bk_error_set(err, rrc, NULL, 0, 0, "out of memory");
      break;
    }
    worker_t *w = &c->w[m.source - 1];
    bk_wire_reader_t r;
    bk_wire_reader_init(&r, data, m.len);
    const char *host, *failure;
    int prc = bk_wire_get_hello(&r, &host, &failure, &w->slots);
    snprintf(w->host, sizeof w->host, "%s", host ? host : "");
    /* Each worker holds at most its own run.slots evaluations: the
     * slots follow the cores of its rank. */
    if (!prc && !w->pos &&
        !(w->pos = bk_calloc((size_t)w->slots, sizeof *w->pos)) && rc == 0)
      rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
    if (prc && rc == 0)
      rc = malformed(err, m.source, NULL);
    else if (failure && rc == 0)
      rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                        "MPI rank %d on %s cannot run models: %s", m.source,
                        w->host, failure);
    bk_free(data);
    greeted++;
  }
  if (rc) {
    bk_mpi_coord_free(c);
    return rc;
  }
  *out = c;
  return 0;
}

void bk_mpi_coord_free(bk_mpi_coord_t *c) {
  if (!c)
    return;
  for (int i = 0; c->w && i < c->nworkers; i++)
    bk_free(c->w[i].pos);
  bk_free(c->w);
  bk_free(c->rx);
  bk_free(c->ry);
  bk_free(c);
}

const bk_dispatch_stats_t *bk_mpi_coord_stats(const bk_mpi_coord_t *c) {
  return &c->st;
}

void bk_mpi_coord_quit_workers(void) {
  if (bk_mpi_abandoned())
    return;
  int size = bk_mpi_size();
  for (int r = 1; r < size; r++)
    bk_mpi_send(r, BK_WIRE_QUIT, "", 0);
}

/* Sends the next chunk of pending positions to worker `wi`. Returns 0 or
 * BK_ENOMEM. */
static int send_chunk(bk_mpi_coord_t *c, int wi, const char *prefix,
                      const bk_point_t *pts, size_t *pending, size_t *npending,
                      size_t per) {
  worker_t *w = &c->w[wi];
  size_t nv = c->o.study->nvars;
  if (per > (size_t)w->slots)
    per = (size_t)w->slots;
  size_t n = *npending < per ? *npending : per;
  bk_buf_t b;
  bk_buf_init(&b);
  int rc = bk_wire_put_work(&b, prefix, (uint32_t)n);
  for (size_t k = 0; rc == 0 && k < n; k++) {
    size_t i = pending[*npending - 1 - k];
    w->pos[k] = i;
    rc = bk_wire_put_point(&b, pts[i].index, pts[i].x, nv);
  }
  if (rc == 0) {
    *npending -= n;
    w->n = n;
    w->busy = 1;
    w->stop_sent = 0;
    bk_mpi_send(wi + 1, BK_WIRE_WORK, b.data, b.len);
  }
  bk_buf_close(&b);
  return rc;
}

/* The position in worker w's chunk of the point whose key is `key`, or -1
 * when the key is none of them. */
static long chunk_position(const worker_t *w, const char *prefix,
                           const bk_point_t *pts, const char *key) {
  size_t np = strlen(prefix);
  if (strncmp(key, prefix, np) != 0 || key[np] != '/')
    return -1;
  const char *digits = key + np + 1;
  char *end;
  errno = 0;
  unsigned long long idx = strtoull(digits, &end, 10);
  if (*digits < '0' || *digits > '9' || *end || errno)
    return -1;
  for (size_t k = 0; k < w->n; k++)
    if (pts[w->pos[k]].index == idx)
      return (long)w->pos[k];
  return -1;
}

/* Takes one RESULT: appends its records to the log (as they are: the
 * worker sent exactly what is recorded) and fills their points. Returns
 * the worker's status, or a negative code with err set. */
static int take_result(bk_mpi_coord_t *c, const char *prefix, bk_point_t *pts,
                       unsigned char *done, const bk_mpi_msg_t *m,
                       bk_error_t *err) {
  const bk_study_t *s = c->o.study;
  size_t nx = s->nvars, ny = s->model.noutputs;
  worker_t *w = &c->w[m->source - 1];
  char *data;
  if (bk_mpi_recv(m, &data))
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  bk_wire_reader_t r;
  bk_wire_reader_init(&r, data, m->len);
  int status;
  const char *why, *host;
  uint32_t n;
  int rc = bk_wire_get_result(&r, &status, &why, &host, &n);
  if (rc || !w->busy || n > w->n) {
    rc = malformed(err, m->source, w->host);
    goto out;
  }
  snprintf(w->host, sizeof w->host, "%s", host);
  for (uint32_t k = 0; k < n; k++) {
    bk_record_t rec;
    if (bk_wire_get_record(&r, &rec, c->rx, nx, c->ry, ny)) {
      rc = malformed(err, m->source, w->host);
      goto out;
    }
    /* A record for a point it was sent, once, with the inputs it was
     * sent. */
    long i = chunk_position(w, prefix, pts, rec.key);
    if (i < 0 || done[i] || !bk_replay_same_inputs(rec.x, pts[i].x, nx)) {
      rc = malformed(err, m->source, w->host);
      goto out;
    }
    rc = bk_records_append(c->o.records, &rec, err);
    if (rc)
      goto out;
    if (ny)
      memcpy(pts[i].y, rec.y, ny * sizeof *rec.y);
    pts[i].g = rec.g;
    pts[i].fault = rec.fault;
    done[i] = 1;
    c->st.completed++;
    if (rec.fault != BK_FAULT_NONE)
      c->st.errors++;
    else if (rec.g <= 0)
      c->st.failures++;
    if (c->o.tick)
      c->o.tick(c->o.tick_data, &c->st);
  }
  if (r.left != 0 || (status == BK_WIRE_DONE && n != w->n)) {
    rc = malformed(err, m->source, w->host);
    goto out;
  }
  rc = status;
  if (status == BK_WIRE_FAILED)
    bk_error_set(err, BK_EMODEL, NULL, 0, 0, "MPI rank %d on %s: %s", m->source,
                 w->host, why);
out:
  w->busy = 0;
  bk_free(data);
  return rc;
}

static int coord_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                       size_t n, bk_error_t *err) {
  bk_mpi_coord_t *c = ev->data;
  const bk_study_t *s = c->o.study;
  size_t *pending = bk_calloc(n + 1, sizeof *pending);
  unsigned char *done = bk_calloc(n + 1, 1);
  if (!pending || !done) {
    bk_free(pending);
    bk_free(done);
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  }
  size_t npending = 0;
  int rc = 0;
  /* Recorded keys return at once; the pending stack is filled backwards so
   * chunks go out in key order. */
  bk_records_t *logs[1] = {c->o.records};
  for (size_t i = n; i-- > 0;) {
    char key[BK_REPLAY_KEY_MAX];
    if (bk_replay_key(key, sizeof key, prefix, pts[i].index)) {
      rc = bk_error_set(err, BK_ERANGE, NULL, 0, 0,
                        "the key %s/%" PRIu64 " is too long", prefix,
                        pts[i].index);
      goto out;
    }
    int found = bk_replay_point(logs, 1, key, s->nvars, s->model.noutputs,
                                &pts[i], NULL, err);
    if (found < 0) {
      rc = found;
      goto out;
    }
    if (found) {
      done[i] = 1;
      c->st.replayed++;
      if (pts[i].fault != BK_FAULT_NONE)
        c->st.replayed_errors++;
      else if (pts[i].g <= 0)
        c->st.failures++;
    } else {
      pending[npending++] = i;
    }
  }
  if (c->nworkers < 1 && npending) {
    rc = bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                      "the MPI mode needs at least 2 ranks");
    goto out;
  }
  /* Spread small batches over all workers rather than filling the first. */
  size_t per = 0;
  if (c->nworkers > 0) {
    size_t even = (npending + (size_t)c->nworkers - 1) / (size_t)c->nworkers;
    per = even > 0 ? even : 1;
  }
  int busy = 0, stopping = 0, failed = 0;
  double stop_at = 0;
  long idle_us = POLL_US;
  for (;;) {
    if (stopping && now_s() - stop_at > STOP_WAIT) {
      /* A worker that does not answer a stop is lost. */
      bk_mpi_abandon();
      break;
    }
    if (!stopping && (bk_stop_requested() || failed)) {
      stopping = 1;
      stop_at = now_s();
      for (int i = 0; i < c->nworkers; i++)
        if (c->w[i].busy && !c->w[i].stop_sent) {
          bk_mpi_send(i + 1, BK_WIRE_STOP, "", 0);
          c->w[i].stop_sent = 1;
        }
    }
    for (int i = 0; !stopping && npending && i < c->nworkers; i++)
      if (!c->w[i].busy) {
        int src = send_chunk(c, i, prefix, pts, pending, &npending, per);
        if (src) {
          rc = bk_error_set(err, src, NULL, 0, 0, "out of memory");
          failed = 1;
          break;
        }
        busy++;
      }
    c->st.running = 0;
    for (int i = 0; i < c->nworkers; i++)
      c->st.running += c->w[i].busy ? (int)c->w[i].n : 0;
    if (!busy)
      break;
    bk_mpi_msg_t m;
    if (!bk_mpi_probe(BK_MPI_ANY, BK_WIRE_RESULT, &m)) {
      sleep_us(idle_us);
      idle_us = idle_us * 2 < POLL_MAX_US ? idle_us * 2 : POLL_MAX_US;
      continue;
    }
    idle_us = POLL_US;
    bk_error_t e2;
    bk_error_clear(&e2);
    int st = take_result(c, prefix, pts, done, &m, &e2);
    busy--;
    if (st < 0 || st == BK_WIRE_FAILED) {
      if (rc >= 0) {
        *err = e2;
        rc = st < 0 ? st : BK_EMODEL;
      }
      /* The other workers are stopped; what they finished is recorded. */
      failed = 1;
    } else if (st == BK_WIRE_STOPPED && !stopping) {
      /* A worker was stopped (a signal on its node): stop everywhere. */
      failed = 1;
      if (rc == 0)
        rc = BK_ESTOPPED;
    }
  }
  if (rc < 0)
    goto out;
  if (stopping || bk_stop_requested()) {
    rc = BK_ESTOPPED;
    goto out;
  }
  for (size_t i = 0; i < n; i++)
    if (!done[i]) {
      char key[BK_REPLAY_KEY_MAX];
      bk_replay_key(key, sizeof key, prefix, pts[i].index);
      rc = bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "%s did not finish (internal error)", key);
      goto out;
    }
out:
  bk_records_sync(c->o.records);
  bk_free(pending);
  bk_free(done);
  return rc;
}

void bk_mpi_coord_evaluator(bk_mpi_coord_t *c, bk_evaluator_t *ev) {
  ev->batch = coord_batch;
  ev->data = c;
}
