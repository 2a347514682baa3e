/*
 * An MPI worker rank (see mpi_worker.h).
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/mpi_worker.h"

#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/stop.h"
#include "eval/dispatch.h"
#include "eval/exec.h"
#include "eval/mpi_comm.h"
#include "eval/mpi_wire.h"
#include "eval/replay.h"

#define POLL_US     50
#define POLL_MAX_US 1000

static void sleep_us(long us) {
  struct timespec ts = {us / 1000000, (us % 1000000) * 1000};
  nanosleep(&ts, NULL);
}

/* ---- kept folders ------------------------------------------------------ */

/* Copying a kept folder from scratch into the shared work folder (nftw
 * passes no context, hence these). */
static const char *copy_root_src;
static const char *copy_root_dst;
static int copy_failed;

static int copy_entry(const char *p, const struct stat *sb, int flag,
                      struct FTW *ftw) {
  (void)ftw;
  bk_buf_t d;
  bk_buf_init(&d);
  bk_buf_printf(&d, "%s%s", copy_root_dst, p + strlen(copy_root_src));
  if (!d.data) {
    copy_failed = ENOMEM;
    return -1;
  }
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
    int in = open(p, O_RDONLY | O_CLOEXEC | O_NOFOLLOW);
    int out =
        in < 0
            ? -1
            : open(d.data, O_WRONLY | O_CREAT | O_EXCL | O_NOFOLLOW | O_CLOEXEC,
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
  bk_dispatch_remove_tree(dst);
  copy_root_src = src;
  copy_root_dst = dst;
  copy_failed = 0;
  if (nftw(src, copy_entry, 32, FTW_PHYS) != 0 && !copy_failed)
    copy_failed = errno ? errno : EIO;
  return copy_failed;
}

/* ---- the sink: records into the reply ---------------------------------- */

typedef struct {
  const bk_mpi_worker_opts_t *o;
  bk_buf_t records; /* packed records of the chunk so far */
  uint32_t n;
  bk_buf_t folder; /* the folder named by the record being packed */
} reply_t;

/* The folder a record names once its folder was kept: in scratch, it is
 * copied into keep_dir and named there (the scratch copy removed), or
 * named HOST:PATH when the copy fails (a warning says why). */
static const char *kept_folder(reply_t *rp, const char *folder) {
  const bk_mpi_worker_opts_t *o = rp->o;
  size_t wl = strlen(o->work_dir);
  if (!*folder || !o->keep_dir || strncmp(folder, o->work_dir, wl) != 0 ||
      folder[wl] != '/')
    return folder;
  bk_buf_t dst;
  bk_buf_init(&dst);
  bk_buf_printf(&dst, "%s/%s", o->keep_dir, folder + wl + 1);
  int e = dst.data ? copy_tree(folder, dst.data) : ENOMEM;
  bk_buf_reset(&rp->folder);
  if (e == 0) {
    bk_buf_puts(&rp->folder, dst.data);
    bk_dispatch_remove_tree(folder);
  } else {
    fprintf(stderr,
            "brink: warning: on %s, cannot copy the kept folder %s to %s "
            "(%s); it stays there\n",
            o->host, folder, dst.data ? dst.data : "the run folder",
            strerror(e));
    bk_buf_printf(&rp->folder, "%s:%s", o->host, folder);
  }
  bk_buf_close(&dst);
  return rp->folder.data ? rp->folder.data : folder;
}

static int reply_put(bk_sink_t *sk, const bk_record_t *rec, bk_error_t *err) {
  reply_t *rp = sk->data;
  bk_record_t r = *rec;
  r.folder = kept_folder(rp, rec->folder ? rec->folder : "");
  int rc = bk_wire_put_record(&rp->records, &r);
  if (rc)
    return bk_error_set(err, rc, NULL, 0, 0, "cannot send %s: %s", rec->key,
                        bk_strerror(rc));
  rp->n++;
  return 0;
}

/* ---- the loop ---------------------------------------------------------- */

/* The executor's poll while a chunk runs: a STOP cancels it. A STOP that
 * comes after its chunk ended is taken by the loop and needs nothing. */
static void watch_stop(void *data, bk_exec_t *ex) {
  (void)data;
  bk_mpi_msg_t m;
  if (!bk_mpi_probe(0, BK_WIRE_STOP, &m))
    return;
  char *p;
  if (bk_mpi_recv(&m, &p) == 0)
    bk_free(p);
  bk_exec_cancel(ex);
}

static void send_hello(const char *host, const char *failure, int slots) {
  bk_buf_t b;
  bk_buf_init(&b);
  if (bk_wire_put_hello(&b, host, failure, slots) == 0)
    bk_mpi_send(0, BK_WIRE_HELLO, b.data, b.len);
  bk_buf_close(&b);
}

static void send_result(int status, const char *why, const char *host,
                        const reply_t *rp) {
  bk_buf_t b;
  bk_buf_init(&b);
  if (bk_wire_put_result(&b, status, why, host, rp ? rp->n : 0,
                         rp ? &rp->records : NULL) != 0) {
    bk_buf_reset(&b);
    bk_wire_put_result(&b, BK_WIRE_FAILED, "out of memory", host, 0, NULL);
  }
  bk_mpi_send(0, BK_WIRE_RESULT, b.data, b.len);
  bk_buf_close(&b);
}

/* Evaluates one WORK message and sends the RESULT. */
static void work_chunk(const bk_mpi_worker_opts_t *o, bk_evaluator_t *local,
                       reply_t *rp, const char *m, size_t len) {
  const bk_study_t *s = o->study;
  size_t nv = s->nvars, ny = s->model.noutputs;
  bk_wire_reader_t r;
  bk_wire_reader_init(&r, m, len);
  const char *prefix;
  uint32_t n;
  bk_error_t err;
  bk_error_clear(&err);
  bk_point_t *pts = NULL;
  double *vals = NULL;
  int rc = bk_wire_get_work(&r, &prefix, BK_REPLAY_KEY_MAX - 21, &n);
  if (rc == 0 && (n == 0 || n > (uint32_t)s->run.slots))
    rc = BK_EPROTO;
  if (rc == 0) {
    pts = bk_calloc(n, sizeof *pts);
    vals = bk_calloc((size_t)n * (nv + ny + 1), sizeof *vals);
    if (!pts || !vals)
      rc = BK_ENOMEM;
  }
  for (uint32_t k = 0; rc == 0 && k < n; k++) {
    pts[k].x = vals + (size_t)k * (nv + ny + 1);
    pts[k].y = pts[k].x + nv;
    pts[k].g = NAN;
    rc = bk_wire_get_point(&r, &pts[k].index, pts[k].x, nv);
  }
  if (rc == 0 && r.left != 0)
    rc = BK_EPROTO;
  if (rc == BK_EPROTO)
    bk_error_set(&err, rc, NULL, 0, 0,
                 "a malformed work message from rank 0 (do all ranks run "
                 "the same brink build?)");
  else if (rc)
    bk_error_set(&err, rc, NULL, 0, 0, "out of memory");
  bk_buf_reset(&rp->records);
  rp->n = 0;
  if (rc == 0)
    rc = local->batch(local, prefix, pts, n, &err);
  int status = rc == 0             ? BK_WIRE_DONE
               : rc == BK_ESTOPPED ? BK_WIRE_STOPPED
                                   : BK_WIRE_FAILED;
  send_result(
      status,
      status == BK_WIRE_FAILED ? (err.msg[0] ? err.msg : bk_strerror(rc)) : "",
      o->host, rp);
  bk_free(pts);
  bk_free(vals);
}

int bk_mpi_worker_run(const bk_mpi_worker_opts_t *opts, const char *failure) {
  const char *host = opts && opts->host ? opts->host : "?";
  char why[512] = "";
  bk_exec_t *ex = NULL;
  bk_dispatch_t *d = NULL;
  reply_t rp = {.o = opts, .n = 0};
  bk_buf_init(&rp.records);
  bk_buf_init(&rp.folder);
  bk_sink_t sink = {reply_put, &rp};
  if (!failure && opts && opts->study->model.present) {
    int rc = bk_exec_local_new(&ex, opts->study->run.slots);
    if (rc)
      snprintf(why, sizeof why, "cannot start the executor: %s",
               bk_strerror(rc));
    bk_dispatch_opts_t dop = {
        .study = opts->study,
        .records = NULL, /* the coordinator replays */
        .sink = &sink,
        .exec = ex,
        .work_dir = opts->work_dir,
        .host = host,
    };
    if (rc == 0 && bk_dispatch_new(&d, &dop) != 0)
      snprintf(why, sizeof why, "out of memory");
    if (ex)
      bk_exec_set_poll(ex, watch_stop, NULL);
  } else if (!failure) {
    snprintf(why, sizeof why, "the study has no model section");
  }
  if (!failure && why[0])
    failure = why;
  send_hello(host, failure,
             opts && opts->study->run.slots > 0 ? opts->study->run.slots : 1);
  bk_evaluator_t local;
  if (d)
    bk_dispatch_evaluator(d, &local);
  long idle_us = POLL_US;
  int rc = 0;
  for (;;) {
    bk_mpi_msg_t m;
    if (!bk_mpi_probe(0, BK_MPI_ANY, &m)) {
      sleep_us(idle_us);
      idle_us = idle_us * 2 < POLL_MAX_US ? idle_us * 2 : POLL_MAX_US;
      continue;
    }
    idle_us = POLL_US;
    char *p;
    if (bk_mpi_recv(&m, &p)) {
      rc = BK_ENOMEM;
      break;
    }
    if (m.tag == BK_WIRE_QUIT) {
      bk_free(p);
      break;
    }
    if (m.tag == BK_WIRE_WORK) {
      if (failure)
        send_result(BK_WIRE_FAILED, failure, host, NULL);
      else
        work_chunk(opts, &local, &rp, p, m.len);
    }
    /* A STOP that arrives after its chunk ended needs nothing. */
    bk_free(p);
  }
  bk_dispatch_free(d);
  bk_exec_free(ex);
  bk_buf_close(&rp.records);
  bk_buf_close(&rp.folder);
  return rc;
}
