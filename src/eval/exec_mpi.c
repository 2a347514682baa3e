/*
 * The MPI mode (see exec_mpi.h): the coordinator's evaluator on rank 0 and
 * the worker loop on the other ranks.
 *
 * Protocol (tags below; payloads are packed bytes):
 *   worker -> 0  HELLO   i32 ok, host, reason
 *   0 -> worker  WORK    prefix, u32 n, n x (u64 index, nvars doubles)
 *   worker -> 0  RESULT  i32 status (0 done, 1 stopped, 2 failed), reason,
 *                        host, u32 n, n x (u8 done, y, g, fault, attempts,
 *                        seconds, note)
 *   0 -> worker  STOP    the current chunk: stop its models and report
 *   0 -> worker  QUIT    end the loop
 * A worker holds one chunk of at most run.slots points at a time. The
 * coordinator never blocks in MPI: it polls with MPI_Iprobe and sleeps
 * briefly, so stop requests are seen and idle ranks cost no CPU (a blocking
 * receive in OpenMPI spins). While a worker evaluates a chunk, a second
 * thread watches for STOP; the main thread makes no MPI call meanwhile
 * (MPI_THREAD_SERIALIZED).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/exec_mpi.h"

#ifdef BK_HAVE_MPI

#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <math.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include <mpi.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/fault.h"
#include "base/stop.h"

enum { TAG_HELLO = 11, TAG_WORK, TAG_RESULT, TAG_STOP, TAG_QUIT };
enum { ST_DONE = 0, ST_STOPPED = 1, ST_FAILED = 2 };

/* Microseconds an idle rank sleeps between polls: short right after a
 * message, doubling while nothing comes, up to POLL_MAX_US. */
#define POLL_US     50
#define POLL_MAX_US 1000
/* Seconds a stopping coordinator waits for the workers' last results (the
 * model grace from SIGTERM to SIGKILL is 5 s). A worker still silent then
 * is taken as lost (its rank or node died): MPI is left without the
 * finalizing handshake, which could wait for it forever. */
#define STOP_WAIT 12.0

/* Set when a worker did not answer a stop: skip the goodbye. */
static int lost_worker;

static double now_s(void) {
  struct timespec ts;
  clock_gettime(CLOCK_MONOTONIC, &ts);
  return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void sleep_us(long us) {
  struct timespec ts = {us / 1000000, (us % 1000000) * 1000};
  nanosleep(&ts, NULL);
}

int bk_mpi_available(void) {
  return 1;
}

int bk_mpi_init(int *argc, char ***argv, int *rank, int *size) {
  int provided;
  if (MPI_Init_thread(argc, argv, MPI_THREAD_SERIALIZED, &provided) !=
      MPI_SUCCESS)
    return BK_EIO;
  MPI_Comm_set_errhandler(MPI_COMM_WORLD, MPI_ERRORS_ARE_FATAL);
  MPI_Comm_rank(MPI_COMM_WORLD, rank);
  MPI_Comm_size(MPI_COMM_WORLD, size);
  return 0;
}

void bk_mpi_finalize(void) {
  if (!lost_worker)
    MPI_Finalize();
}

/* ---- packing ----------------------------------------------------------- */

typedef struct {
  const char *p;
  size_t left;
  int bad;
} reader_t;

static void put(bk_buf_t *b, const void *p, size_t n) {
  bk_buf_append(b, p, n);
}
static void put_i32(bk_buf_t *b, int32_t v) {
  put(b, &v, sizeof v);
}
static void put_u64(bk_buf_t *b, uint64_t v) {
  put(b, &v, sizeof v);
}
static void put_f64(bk_buf_t *b, double v) {
  put(b, &v, sizeof v);
}
static void put_str(bk_buf_t *b, const char *s) {
  uint32_t n = (uint32_t)strlen(s ? s : "");
  put(b, &n, sizeof n);
  put(b, s ? s : "", n);
}

static void get(reader_t *r, void *p, size_t n) {
  if (r->bad || r->left < n) {
    r->bad = 1;
    memset(p, 0, n);
    return;
  }
  memcpy(p, r->p, n);
  r->p += n;
  r->left -= n;
}
static int32_t get_i32(reader_t *r) {
  int32_t v;
  get(r, &v, sizeof v);
  return v;
}
static uint64_t get_u64(reader_t *r) {
  uint64_t v;
  get(r, &v, sizeof v);
  return v;
}
static double get_f64(reader_t *r) {
  double v;
  get(r, &v, sizeof v);
  return v;
}
/* Copies a string into out (truncating to cap). */
static void get_str(reader_t *r, char *out, size_t cap) {
  uint32_t n = 0;
  get(r, &n, sizeof n);
  if (r->bad || r->left < n) {
    r->bad = 1;
    out[0] = '\0';
    return;
  }
  size_t k = n < cap - 1 ? n : cap - 1;
  memcpy(out, r->p, k);
  out[k] = '\0';
  r->p += n;
  r->left -= n;
}

static void send_buf(const bk_buf_t *b, int dest, int tag) {
  MPI_Send(b->data ? b->data : "", (int)b->len, MPI_BYTE, dest, tag,
           MPI_COMM_WORLD);
}

/* Receives the probed message into a new buffer; *len its size. */
static char *recv_probed(MPI_Status *st, int *len) {
  MPI_Get_count(st, MPI_BYTE, len);
  char *m = bk_malloc((size_t)*len + 1);
  if (!m)
    return NULL;
  MPI_Recv(m, *len, MPI_BYTE, st->MPI_SOURCE, st->MPI_TAG, MPI_COMM_WORLD,
           MPI_STATUS_IGNORE);
  return m;
}

/* ---- coordinator ------------------------------------------------------- */

typedef struct {
  int busy;
  size_t *pos; /* positions in the batch of the chunk's points */
  size_t n;
  int stop_sent;
  char host[256];
} worker_t;

struct bk_mpi_coord {
  bk_mpi_coord_opts_t o;
  bk_dispatch_stats_t st;
  int nworkers;
  worker_t *w; /* index rank - 1 */
  int slots;
};

int bk_mpi_coord_new(bk_mpi_coord_t **out, const bk_mpi_coord_opts_t *opts,
                     bk_error_t *err) {
  *out = NULL;
  int size;
  MPI_Comm_size(MPI_COMM_WORLD, &size);
  bk_mpi_coord_t *c = bk_calloc(1, sizeof *c);
  if (!c)
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  c->o = *opts;
  c->nworkers = size - 1;
  c->slots = opts->study->run.slots > 0 ? opts->study->run.slots : 1;
  c->w = bk_calloc((size_t)(c->nworkers > 0 ? c->nworkers : 1), sizeof *c->w);
  for (int i = 0; c->w && i < c->nworkers; i++)
    c->w[i].pos = bk_calloc((size_t)c->slots, sizeof *c->w[i].pos);
  if (!c->w) {
    bk_free(c);
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  }
  int greeted = 0, rc = 0;
  while (greeted < c->nworkers) {
    int flag;
    MPI_Status st;
    MPI_Iprobe(MPI_ANY_SOURCE, TAG_HELLO, MPI_COMM_WORLD, &flag, &st);
    if (!flag) {
      if (bk_stop_requested()) {
        rc = BK_ESTOPPED;
        break;
      }
      sleep_us(POLL_US);
      continue;
    }
    int len;
    char *m = recv_probed(&st, &len);
    reader_t r = {m, (size_t)len, !m};
    int ok = get_i32(&r);
    worker_t *w = &c->w[st.MPI_SOURCE - 1];
    char why[512];
    get_str(&r, w->host, sizeof w->host);
    get_str(&r, why, sizeof why);
    bk_free(m);
    greeted++;
    if (!ok && rc == 0)
      rc = bk_error_set(err, BK_EMODEL, NULL, 0, 0,
                        "MPI rank %d on %s cannot run models: %s",
                        st.MPI_SOURCE, w->host, why);
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
  for (int i = 0; i < c->nworkers; i++)
    bk_free(c->w[i].pos);
  bk_free(c->w);
  bk_free(c);
}

const bk_dispatch_stats_t *bk_mpi_coord_stats(const bk_mpi_coord_t *c) {
  return &c->st;
}

void bk_mpi_quit_workers(void) {
  if (lost_worker)
    return;
  int size;
  MPI_Comm_size(MPI_COMM_WORLD, &size);
  for (int r = 1; r < size; r++)
    MPI_Send("", 0, MPI_BYTE, r, TAG_QUIT, MPI_COMM_WORLD);
}

static int same_doubles(const double *a, const double *b, size_t n) {
  return n == 0 || memcmp(a, b, n * sizeof *a) == 0;
}

/* Sends the next chunk of pending positions to worker `wi`. */
static void send_chunk(bk_mpi_coord_t *c, int wi, const char *prefix,
                       bk_point_t *pts, size_t *pending, size_t *npending,
                       size_t per) {
  worker_t *w = &c->w[wi];
  size_t nv = c->o.study->nvars;
  bk_buf_t b;
  bk_buf_init(&b);
  put_str(&b, prefix);
  size_t n = *npending < per ? *npending : per;
  put_i32(&b, (int32_t)n);
  for (size_t k = 0; k < n; k++) {
    size_t i = pending[--*npending];
    w->pos[k] = i;
    put_u64(&b, pts[i].index);
    put(&b, pts[i].x, nv * sizeof(double));
  }
  w->n = n;
  w->busy = 1;
  w->stop_sent = 0;
  send_buf(&b, wi + 1, TAG_WORK);
  bk_buf_close(&b);
}

/* Takes one RESULT message: fills the points and appends the records.
 * Returns the worker's status, or a negative code with err set. */
static int take_result(bk_mpi_coord_t *c, const char *prefix, bk_point_t *pts,
                       MPI_Status *mst, bk_error_t *err) {
  const bk_study_t *s = c->o.study;
  worker_t *w = &c->w[mst->MPI_SOURCE - 1];
  int len;
  char *m = recv_probed(mst, &len);
  if (!m)
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  reader_t r = {m, (size_t)len, 0};
  int status = get_i32(&r);
  char why[768], note[1024];
  get_str(&r, why, sizeof why);
  get_str(&r, w->host, sizeof w->host);
  int32_t n = get_i32(&r);
  int rc = status;
  w->busy = 0;
  for (int32_t k = 0; k < n && !r.bad && (size_t)k < w->n; k++) {
    uint8_t done;
    get(&r, &done, 1);
    bk_point_t *pt = &pts[w->pos[k]];
    for (size_t i = 0; i < s->model.noutputs; i++)
      pt->y[i] = get_f64(&r);
    pt->g = get_f64(&r);
    pt->fault = get_i32(&r);
    int attempts = get_i32(&r);
    double seconds = get_f64(&r);
    get_str(&r, note, sizeof note);
    if (!done || r.bad)
      continue;
    char key[96];
    snprintf(key, sizeof key, "%s/%llu", prefix, (unsigned long long)pt->index);
    bk_record_t rec = {
        .key = key,
        .nx = s->nvars,
        .x = pt->x,
        .ny = s->model.noutputs,
        .y = pt->y,
        .g = pt->g,
        .fault = pt->fault,
        .attempts = attempts,
        .seconds = seconds,
        .host = w->host,
        .note = note,
    };
    int arc = bk_records_append(c->o.records, &rec, err);
    if (arc) {
      rc = arc;
      break;
    }
    c->st.completed++;
    if (pt->fault != BK_FAULT_NONE)
      c->st.errors++;
    if (c->o.tick)
      c->o.tick(c->o.tick_data, &c->st);
  }
  bk_free(m);
  if (r.bad && rc >= 0)
    rc = bk_error_set(err, BK_EPROTO, NULL, 0, 0,
                      "a malformed message from MPI rank %d on %s (are all "
                      "ranks the same brink?)",
                      mst->MPI_SOURCE, w->host);
  if (rc == ST_FAILED)
    bk_error_set(err, BK_EMODEL, NULL, 0, 0, "MPI rank %d on %s: %s",
                 mst->MPI_SOURCE, w->host, why);
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
  for (size_t i = n; i-- > 0;) {
    char key[96];
    snprintf(key, sizeof key, "%s/%llu", prefix,
             (unsigned long long)pts[i].index);
    bk_record_t rec;
    if (bk_records_find(c->o.records, key, &rec)) {
      if (rec.nx != s->nvars || !same_doubles(rec.x, pts[i].x, s->nvars)) {
        rc = bk_error_set(err, BK_EMISMATCH, NULL, 0, 0,
                          "the recorded inputs of %s differ from the ones "
                          "this study gives; the records were made "
                          "differently (another brink version?). Use a new "
                          "run.folder",
                          key);
        goto out;
      }
      for (size_t k = 0; k < s->model.noutputs && k < rec.ny; k++)
        pts[i].y[k] = rec.y[k];
      pts[i].g = rec.g;
      pts[i].fault = rec.fault;
      done[i] = 1;
      c->st.replayed++;
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
  size_t per = (size_t)c->slots;
  if (c->nworkers > 0) {
    size_t even = (npending + (size_t)c->nworkers - 1) / (size_t)c->nworkers;
    if (even < per)
      per = even > 0 ? even : 1;
  }
  int busy = 0, stopping = 0, failed = 0;
  double stop_at = 0;
  long idle_us = POLL_US;
  for (;;) {
    if (stopping && now_s() - stop_at > STOP_WAIT) {
      lost_worker = 1;
      break;
    }
    if (!stopping && (bk_stop_requested() || rc < 0 || failed)) {
      stopping = 1;
      stop_at = now_s();
      for (int i = 0; i < c->nworkers; i++)
        if (c->w[i].busy && !c->w[i].stop_sent) {
          MPI_Send("", 0, MPI_BYTE, i + 1, TAG_STOP, MPI_COMM_WORLD);
          c->w[i].stop_sent = 1;
        }
    }
    for (int i = 0; !stopping && !failed && npending && i < c->nworkers; i++)
      if (!c->w[i].busy) {
        send_chunk(c, i, prefix, pts, pending, &npending, per);
        busy++;
      }
    c->st.running = 0;
    for (int i = 0; i < c->nworkers; i++)
      c->st.running += c->w[i].busy ? (int)c->w[i].n : 0;
    if (!busy)
      break;
    int flag;
    MPI_Status mst;
    MPI_Iprobe(MPI_ANY_SOURCE, TAG_RESULT, MPI_COMM_WORLD, &flag, &mst);
    if (!flag) {
      sleep_us(idle_us);
      idle_us = idle_us * 2 < POLL_MAX_US ? idle_us * 2 : POLL_MAX_US;
      continue;
    }
    idle_us = POLL_US;
    bk_error_t e2;
    bk_error_clear(&e2);
    int st = take_result(c, prefix, pts, &mst, &e2);
    busy--;
    if (st < 0 || st == ST_FAILED) {
      if (!err->code)
        *err = e2;
      if (rc >= 0)
        rc = st < 0 ? st : BK_EMODEL;
      failed = 1;
      /* The other workers finish their chunks (their records are kept). */
    } else if (st == ST_STOPPED && !stopping) {
      /* A worker was stopped (a signal on its node): stop everywhere. */
      bk_stop_set(SIGTERM);
    }
  }
  if (rc < 0)
    goto out;
  if (stopping || bk_stop_requested()) {
    rc = BK_ESTOPPED;
    goto out;
  }
  bk_records_sync(c->o.records);
  /* Every point must now be finished: replayed, or recorded from a
   * worker. */
  for (size_t i = 0; i < n; i++) {
    if (done[i])
      continue;
    char key[96];
    snprintf(key, sizeof key, "%s/%llu", prefix,
             (unsigned long long)pts[i].index);
    bk_record_t rec;
    if (!bk_records_find(c->o.records, key, &rec)) {
      rc = bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "%s did not finish (internal error)", key);
      goto out;
    }
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

/* ---- worker ------------------------------------------------------------ */

typedef struct {
  pthread_t th;
  volatile int done; /* set by the main thread to end the watch */
} watcher_t;

/* Watches for STOP while the main thread evaluates a chunk. */
static void *watch(void *arg) {
  watcher_t *wt = arg;
  while (!wt->done) {
    int flag;
    MPI_Status st;
    MPI_Iprobe(0, TAG_STOP, MPI_COMM_WORLD, &flag, &st);
    if (flag) {
      MPI_Recv(NULL, 0, MPI_BYTE, 0, TAG_STOP, MPI_COMM_WORLD,
               MPI_STATUS_IGNORE);
      bk_stop_set(SIGTERM);
      break;
    }
    sleep_us(2000);
  }
  return NULL;
}

/* Copying a kept folder from scratch into the shared work folder. */
static const char *copy_root_src;
static const char *copy_root_dst;
static int copy_failed;

static int copy_entry(const char *p, const struct stat *sb, int flag,
                      struct FTW *ftw) {
  (void)ftw;
  bk_buf_t d;
  bk_buf_init(&d);
  bk_buf_printf(&d, "%s%s", copy_root_dst, p + strlen(copy_root_src));
  if (!d.data)
    return -1;
  int rc = 0;
  if (flag == FTW_D) {
    if (mkdir(d.data, sb->st_mode & 07777) != 0 && errno != EEXIST)
      rc = -1;
  } else if (flag == FTW_SL) {
    char t[4096];
    ssize_t k = readlink(p, t, sizeof t - 1);
    if (k < 0)
      rc = -1;
    else {
      t[k] = '\0';
      rc = symlink(t, d.data) == 0 ? 0 : -1;
    }
  } else if (flag == FTW_F) {
    int in = open(p, O_RDONLY | O_CLOEXEC);
    int out = in < 0 ? -1
                     : open(d.data, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC,
                            sb->st_mode & 07777);
    char buf[65536];
    ssize_t r = 0;
    while (out >= 0 && (r = read(in, buf, sizeof buf)) > 0)
      if (write(out, buf, (size_t)r) != r) {
        r = -1;
        break;
      }
    if (in < 0 || out < 0 || r < 0)
      rc = -1;
    if (in >= 0)
      close(in);
    if (out >= 0 && close(out) != 0)
      rc = -1;
  }
  bk_buf_close(&d);
  if (rc)
    copy_failed = errno ? errno : EIO;
  return rc;
}

/* Copies src to dst (dst replaced). Returns 0 or a positive errno. */
static int copy_tree(const char *src, const char *dst) {
  bk_remove_tree(dst);
  copy_root_src = src;
  copy_root_dst = dst;
  copy_failed = 0;
  if (nftw(src, copy_entry, 32, FTW_PHYS) != 0 && !copy_failed)
    copy_failed = errno ? errno : EIO;
  return copy_failed;
}

/* The note of a record whose folder was kept in scratch: copies the folder
 * into keep_dir and names the copy, or names host and path when the copy
 * fails. */
static void keep_note(const bk_mpi_worker_opts_t *o, const char *note,
                      bk_buf_t *out) {
  bk_buf_reset(out);
  const char *at = o->keep_dir ? strstr(note, "folder ") : NULL;
  size_t wl = strlen(o->work_dir);
  if (!at || strncmp(at + 7, o->work_dir, wl) != 0 || at[7 + wl] != '/') {
    bk_buf_puts(out, note);
    return;
  }
  const char *src = at + 7;
  const char *name = src + wl + 1;
  bk_buf_t dst;
  bk_buf_init(&dst);
  bk_buf_printf(&dst, "%s/%s", o->keep_dir, name);
  int e = dst.data ? copy_tree(src, dst.data) : ENOMEM;
  bk_buf_append(out, note, (size_t)(at - note));
  if (e == 0) {
    bk_buf_printf(out, "folder %s", dst.data);
    bk_remove_tree(src);
  } else {
    bk_buf_printf(out, "folder %s:%s (not copied back: %s)", o->host, src,
                  strerror(e));
  }
  bk_buf_close(&dst);
}

static void send_hello(const char *host, const char *failure) {
  bk_buf_t b;
  bk_buf_init(&b);
  put_i32(&b, failure ? 0 : 1);
  put_str(&b, host);
  put_str(&b, failure ? failure : "");
  send_buf(&b, 0, TAG_HELLO);
  bk_buf_close(&b);
}

/* Evaluates one WORK message and sends the RESULT. */
static void work_chunk(const bk_mpi_worker_opts_t *o, const char *m, int len) {
  const bk_study_t *s = o->study;
  size_t nv = s->nvars, ny = s->model.noutputs;
  reader_t r = {m, (size_t)len, 0};
  char prefix[96];
  get_str(&r, prefix, sizeof prefix);
  int32_t n = get_i32(&r);
  if (n < 0 || r.bad)
    n = 0;
  bk_point_t *pts = bk_calloc((size_t)n + 1, sizeof *pts);
  double *vals = bk_calloc(((size_t)n + 1) * (nv + ny + 1), sizeof *vals);
  bk_buf_t b, note;
  bk_buf_init(&b);
  bk_buf_init(&note);
  bk_error_t err;
  bk_error_clear(&err);
  int rc = 0;
  if (!pts || !vals)
    rc = bk_error_set(&err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  for (int32_t k = 0; rc == 0 && k < n; k++) {
    pts[k].index = get_u64(&r);
    pts[k].x = vals + (size_t)k * (nv + ny + 1);
    pts[k].y = pts[k].x + nv;
    get(&r, pts[k].x, nv * sizeof(double));
  }
  if (rc == 0 && r.bad)
    rc = bk_error_set(&err, BK_EPROTO, NULL, 0, 0, "a malformed work message");
  if (rc == 0 && n > 0) {
    watcher_t wt = {.done = 0};
    int th = pthread_create(&wt.th, NULL, watch, &wt);
    rc = o->local->batch(o->local, prefix, pts, (size_t)n, &err);
    wt.done = 1;
    if (th == 0)
      pthread_join(wt.th, NULL);
  }
  int status = rc == 0 ? ST_DONE : rc == BK_ESTOPPED ? ST_STOPPED : ST_FAILED;
  put_i32(&b, status);
  put_str(&b,
          status == ST_FAILED ? (err.msg[0] ? err.msg : bk_strerror(rc)) : "");
  put_str(&b, o->host);
  put_i32(&b, pts && vals ? n : 0);
  for (int32_t k = 0; pts && vals && k < n; k++) {
    char key[128];
    snprintf(key, sizeof key, "%s/%llu", prefix,
             (unsigned long long)pts[k].index);
    bk_record_t rec;
    uint8_t done = (uint8_t)bk_records_find(o->records, key, &rec);
    put(&b, &done, 1);
    for (size_t i = 0; i < ny; i++)
      put_f64(&b, done && i < rec.ny ? rec.y[i] : NAN);
    put_f64(&b, done ? rec.g : NAN);
    put_i32(&b, done ? rec.fault : 0);
    put_i32(&b, done ? rec.attempts : 0);
    put_f64(&b, done ? rec.seconds : 0);
    if (done)
      keep_note(o, rec.note ? rec.note : "", &note);
    else
      bk_buf_reset(&note);
    put_str(&b, note.data ? note.data : "");
  }
  send_buf(&b, 0, TAG_RESULT);
  bk_buf_close(&b);
  bk_buf_close(&note);
  bk_free(pts);
  bk_free(vals);
}

int bk_mpi_worker_run(const bk_mpi_worker_opts_t *opts, const char *failure) {
  send_hello(opts ? opts->host : "?", failure);
  long idle_us = POLL_US;
  for (;;) {
    int flag;
    MPI_Status st;
    MPI_Iprobe(0, MPI_ANY_TAG, MPI_COMM_WORLD, &flag, &st);
    if (!flag) {
      sleep_us(idle_us);
      idle_us = idle_us * 2 < POLL_MAX_US ? idle_us * 2 : POLL_MAX_US;
      continue;
    }
    idle_us = POLL_US;
    int len;
    char *m = recv_probed(&st, &len);
    if (st.MPI_TAG == TAG_QUIT) {
      bk_free(m);
      return 0;
    }
    if (st.MPI_TAG == TAG_WORK && m) {
      if (failure || !opts) {
        bk_buf_t b;
        bk_buf_init(&b);
        put_i32(&b, ST_FAILED);
        put_str(&b, failure ? failure : "cannot run models");
        put_str(&b, "?");
        put_i32(&b, 0);
        send_buf(&b, 0, TAG_RESULT);
        bk_buf_close(&b);
      } else {
        work_chunk(opts, m, len);
      }
    }
    /* A STOP that arrives after its chunk ended needs nothing. */
    bk_free(m);
  }
}

#else /* no MPI */

int bk_mpi_available(void) {
  return 0;
}
int bk_mpi_init(int *argc, char ***argv, int *rank, int *size) {
  (void)argc;
  (void)argv;
  *rank = 0;
  *size = 1;
  return BK_EINVAL;
}
void bk_mpi_finalize(void) {
}
int bk_mpi_coord_new(bk_mpi_coord_t **out, const bk_mpi_coord_opts_t *opts,
                     bk_error_t *err) {
  (void)opts;
  *out = NULL;
  return bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                      "this brink was built without MPI");
}
void bk_mpi_coord_evaluator(bk_mpi_coord_t *c, bk_evaluator_t *ev) {
  (void)c;
  (void)ev;
}
const bk_dispatch_stats_t *bk_mpi_coord_stats(const bk_mpi_coord_t *c) {
  (void)c;
  return NULL;
}
void bk_mpi_coord_free(bk_mpi_coord_t *c) {
  (void)c;
}
void bk_mpi_quit_workers(void) {
}
int bk_mpi_worker_run(const bk_mpi_worker_opts_t *opts, const char *failure) {
  (void)opts;
  (void)failure;
  return BK_EINVAL;
}

#endif
