/*
 * The dispatcher (see dispatch.h): records lookup, run folders, executor,
 * extraction, limit state, retries, record append and the keep policy.
 *
 * A run folder is made fresh for each attempt (an old one left by a crash
 * is removed first), without following symbolic links, so a model cannot
 * make brink write outside the run folder.
 *
 * SPDX-License-Identifier: MIT
 */
#include "dispatch.h"

#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/statvfs.h>
#include <unistd.h>

#include "alloc.h"
#include "buf.h"
#include "extract.h"
#include "fault.h"
#include "stop.h"
#include "template.h"

extern char **environ;

/* One evaluation in flight. */
typedef struct {
  bk_dispatch_t *d;
  bk_point_t *pt;
  char key[96];
  char *dir;
  int attempts;
  int done;
} job_t;

struct bk_dispatch {
  bk_dispatch_opts_t o;
  bk_dispatch_stats_t st;
  char **base_env; /* environ + model.env, without BRINK_* */
  size_t nbase_env;
  double *vals; /* x then y, for the limit state */
  int fatal;    /* a records failure: stop the batch */
  bk_error_t fatal_err;
  const char *prefix;
};

void bk_dispatch_folder_name(const char *key, char *out, size_t cap) {
  size_t i = 0;
  for (; key[i] && i + 1 < cap; i++)
    out[i] = key[i] == '/' ? '-' : key[i];
  out[i] = '\0';
}

static int remove_entry(const char *p, const struct stat *sb, int flag,
                        struct FTW *ftw) {
  (void)sb;
  (void)flag;
  (void)ftw;
  return remove(p) == 0 || errno == ENOENT ? 0 : -1;
}

int bk_remove_tree(const char *path) {
  struct stat st;
  if (lstat(path, &st) != 0)
    return errno == ENOENT ? 0 : -errno;
  if (!S_ISDIR(st.st_mode))
    return unlink(path) == 0 ? 0 : -errno;
  return nftw(path, remove_entry, 32, FTW_DEPTH | FTW_PHYS) == 0 ? 0 : -errno;
}

int bk_dispatch_reap(const char *work_dir) {
  size_t n = strlen(work_dir);
  while (n > 1 && work_dir[n - 1] == '/')
    n--;
  DIR *d = opendir("/proc");
  if (!d)
    return 0;
  int killed = 0;
  pid_t self = getpid();
  uid_t uid = geteuid();
  struct dirent *e;
  while ((e = readdir(d))) {
    char *end;
    long pid = strtol(e->d_name, &end, 10);
    if (*end || pid <= 0 || (pid_t)pid == self)
      continue;
    char link[64], cwd[4096];
    snprintf(link, sizeof link, "/proc/%ld/cwd", pid);
    struct stat st;
    if (lstat(link, &st) != 0 || st.st_uid != uid)
      continue;
    ssize_t k = readlink(link, cwd, sizeof cwd - 1);
    if (k <= 0)
      continue;
    cwd[k] = '\0';
    if ((size_t)k <= n || strncmp(cwd, work_dir, n) != 0 || cwd[n] != '/')
      continue;
    /* Each model leads its own process group; a child it spawned is in
     * that group too, or found by its own working folder. */
    pid_t pg = getpgid((pid_t)pid);
    if (pg > 1 && pg != getpgrp())
      kill(-pg, SIGKILL);
    kill((pid_t)pid, SIGKILL);
    killed++;
  }
  closedir(d);
  return killed;
}

static int env_name_eq(const char *a, const char *b) {
  while (*a && *a != '=' && *a == *b) {
    a++;
    b++;
  }
  return (*a == '=' || !*a) && (*b == '=' || !*b);
}

static int build_base_env(bk_dispatch_t *d) {
  const bk_model_t *m = &d->o.study->model;
  size_t n = 0;
  while (environ && environ[n])
    n++;
  d->base_env = bk_calloc(n + m->nenv + 1, sizeof *d->base_env);
  if (!d->base_env)
    return BK_ENOMEM;
  for (size_t i = 0; i < n; i++) {
    if (strncmp(environ[i], "BRINK_", 6) == 0)
      continue;
    int overridden = 0;
    for (size_t j = 0; j < m->nenv; j++)
      if (env_name_eq(environ[i], m->env[j]))
        overridden = 1;
    if (!overridden)
      d->base_env[d->nbase_env++] = environ[i];
  }
  for (size_t j = 0; j < m->nenv; j++)
    d->base_env[d->nbase_env++] = m->env[j];
  return 0;
}

int bk_dispatch_new(bk_dispatch_t **out, const bk_dispatch_opts_t *opts) {
  bk_dispatch_t *d = bk_calloc(1, sizeof *d);
  if (!d)
    return BK_ENOMEM;
  d->o = *opts;
  const bk_study_t *s = opts->study;
  d->vals = bk_calloc(s->nvars + s->model.noutputs + 1, sizeof *d->vals);
  if (!d->vals || build_base_env(d)) {
    bk_dispatch_free(d);
    return BK_ENOMEM;
  }
  *out = d;
  return 0;
}

void bk_dispatch_free(bk_dispatch_t *d) {
  if (!d)
    return;
  bk_free(d->base_env);
  bk_free(d->vals);
  bk_free(d);
}

const bk_dispatch_stats_t *bk_dispatch_stats(const bk_dispatch_t *d) {
  return &d->st;
}

/* Writes `len` bytes to dir/name, refusing to follow a link. */
static int write_new_file(const char *dir, const char *name, const char *data,
                          size_t len) {
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/%s", dir, name);
  if (!p.data)
    return BK_ENOMEM;
  int fd =
      open(p.data, O_WRONLY | O_CREAT | O_EXCL | O_NOFOLLOW | O_CLOEXEC, 0666);
  bk_buf_close(&p);
  if (fd < 0)
    return -errno;
  size_t off = 0;
  while (off < len) {
    ssize_t w = write(fd, data + off, len - off);
    if (w < 0 && errno == EINTR)
      continue;
    if (w < 0) {
      int e = -errno;
      close(fd);
      return e;
    }
    off += (size_t)w;
  }
  return close(fd) == 0 ? 0 : -errno;
}

static int copy_file(const char *src, const char *dir, const char *name) {
  int in = open(src, O_RDONLY | O_CLOEXEC);
  if (in < 0)
    return -errno;
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/%s", dir, name);
  int out =
      p.data ? open(p.data,
                    O_WRONLY | O_CREAT | O_EXCL | O_NOFOLLOW | O_CLOEXEC, 0666)
             : -1;
  bk_buf_close(&p);
  if (out < 0) {
    int e = -errno;
    close(in);
    return e;
  }
  char buf[65536];
  int rc = 0;
  for (;;) {
    ssize_t r = read(in, buf, sizeof buf);
    if (r < 0 && errno == EINTR)
      continue;
    if (r <= 0) {
      rc = r < 0 ? -errno : 0;
      break;
    }
    for (ssize_t off = 0; off < r;) {
      ssize_t w = write(out, buf + off, (size_t)(r - off));
      if (w < 0 && errno == EINTR)
        continue;
      if (w < 0) {
        rc = -errno;
        break;
      }
      off += w;
    }
    if (rc)
      break;
  }
  close(in);
  if (close(out) != 0 && rc == 0)
    rc = -errno;
  return rc;
}

static const char *base_name(const char *p) {
  const char *s = strrchr(p, '/');
  return s ? s + 1 : p;
}

/* Makes a fresh run folder for the job and fills it. Returns 0, or a
 * negative code with the reason in why. */
static int prepare_folder(job_t *j, char *why, size_t whycap) {
  bk_dispatch_t *d = j->d;
  const bk_study_t *s = d->o.study;
  int rc = bk_remove_tree(j->dir);
  if (rc == 0 && mkdir(j->dir, 0777) != 0)
    rc = -errno;
  if (rc) {
    snprintf(why, whycap, "cannot make the run folder %s: %s", j->dir,
             bk_strerror(rc));
    return rc;
  }
  bk_buf_t out;
  bk_buf_init(&out);
  for (size_t i = 0; i < s->model.ndecks; i++) {
    const bk_deck_t *dk = &s->model.decks[i];
    bk_template_ctx_t ctx = {j->pt->x, (double)j->pt->index, j->key, j->dir};
    bk_buf_reset(&out);
    rc = bk_template_render(dk->tpl, &ctx, &out);
    if (rc == 0)
      rc = write_new_file(j->dir, dk->to, out.data ? out.data : "", out.len);
    if (rc) {
      snprintf(why, whycap, "cannot write %s/%s: %s", j->dir, dk->to,
               bk_strerror(rc));
      break;
    }
  }
  bk_buf_close(&out);
  for (size_t i = 0; rc == 0 && i < s->model.ncopy; i++) {
    rc = copy_file(s->model.copy[i], j->dir, base_name(s->model.copy[i]));
    if (rc)
      snprintf(why, whycap, "cannot copy %s into %s: %s", s->model.copy[i],
               j->dir, bk_strerror(rc));
  }
  return rc;
}

static void on_done(void *data, const bk_job_result_t *res);

/* Starts (or restarts) one job. On a preparation failure the run is
 * finished at once as a fault-free failure to run: records stop. */
static int submit(job_t *j) {
  bk_dispatch_t *d = j->d;
  const bk_study_t *s = d->o.study;
  char why[512];
  int rc = prepare_folder(j, why, sizeof why);
  if (rc) {
    d->fatal = rc;
    bk_error_set(&d->fatal_err, rc == -ENOSPC ? BK_ENOSPACE : rc, NULL, 0, 0,
                 "%s", why);
    return rc;
  }
  size_t ne = d->nbase_env;
  char **env = bk_calloc(ne + 4, sizeof *env);
  char kv[3][1200];
  if (!env)
    return BK_ENOMEM;
  memcpy(env, d->base_env, ne * sizeof *env);
  snprintf(kv[0], sizeof kv[0], "BRINK_KEY=%s", j->key);
  snprintf(kv[1], sizeof kv[1], "BRINK_INDEX=%llu",
           (unsigned long long)j->pt->index);
  snprintf(kv[2], sizeof kv[2], "BRINK_FOLDER=%s", j->dir);
  env[ne] = kv[0];
  env[ne + 1] = kv[1];
  env[ne + 2] = kv[2];
  env[ne + 3] = NULL;
  bk_job_t job = {
      .key = j->key,
      .dir = j->dir,
      .argv = s->model.argv,
      .env = env,
      .timeout = s->model.timeout,
      .grace = 5,
      .stdout_name = "stdout",
      .stderr_name = "stderr",
  };
  j->attempts++;
  rc = bk_exec_submit(d->o.exec, &job, on_done, j);
  bk_free(env);
  return rc;
}

/* Should the folder of a finished run stay? */
static int keep_folder(const bk_study_t *s, const bk_point_t *pt) {
  switch (s->model.keep) {
  case BK_KEEP_ALL:
    return 1;
  case BK_KEEP_FAILED:
    return pt->fault != BK_FAULT_NONE || pt->g <= 0;
  case BK_KEEP_ERRORS:
    return pt->fault != BK_FAULT_NONE;
  case BK_KEEP_NONE:
  default:
    return 0;
  }
}

static void extract_outputs(job_t *j, char *why, size_t whycap) {
  bk_dispatch_t *d = j->d;
  const bk_study_t *s = d->o.study;
  bk_point_t *pt = j->pt;
  for (size_t i = 0; i < s->model.noutputs; i++) {
    const bk_output_t *o = &s->model.outputs[i];
    bk_buf_t p;
    bk_buf_init(&p);
    bk_buf_printf(&p, "%s/%s", j->dir, o->from_stdout ? "stdout" : o->file);
    double v = NAN;
    char w[256] = "";
    int f = p.data ? bk_extract_file(o->re, p.data, o->match, &v, w, sizeof w)
                   : BK_FAULT_NO_OUTPUT;
    bk_buf_close(&p);
    if (f < 0)
      f = BK_FAULT_NO_OUTPUT;
    pt->y[i] = v;
    if (f != BK_FAULT_NONE && pt->fault == BK_FAULT_NONE) {
      pt->fault = f;
      snprintf(why, whycap, "output %s: %s", o->name, w);
    }
  }
  if (pt->fault != BK_FAULT_NONE)
    return;
  memcpy(d->vals, pt->x, s->nvars * sizeof *d->vals);
  if (s->model.noutputs)
    memcpy(d->vals + s->nvars, pt->y, s->model.noutputs * sizeof *d->vals);
  pt->g = bk_expr_eval(s->g, d->vals);
  if (isnan(pt->g)) {
    pt->fault = BK_FAULT_NOT_A_NUMBER;
    snprintf(why, whycap,
             "the limit state is not a number for these "
             "outputs");
  }
}

/* Is the file system of `dir` (nearly) full: under 64 KiB or no inode
 * left? A model that fails then may have failed for want of space, which
 * says nothing about the sample. */
static int disk_full(const char *dir) {
  struct statvfs sv;
  if (statvfs(dir, &sv) != 0)
    return errno == ENOSPC;
  return (double)sv.f_bavail * (double)sv.f_frsize < 65536.0 ||
         (sv.f_files > 0 && sv.f_favail == 0);
}

static void on_done(void *data, const bk_job_result_t *res) {
  job_t *j = data;
  bk_dispatch_t *d = j->d;
  const bk_study_t *s = d->o.study;
  bk_point_t *pt = j->pt;
  if (res->fault == BK_FAULT_INTERRUPTED || d->fatal) {
    j->done = -1;
    return;
  }
  char why[512] = "";
  pt->fault = res->fault;
  pt->g = NAN;
  for (size_t i = 0; i < s->model.noutputs; i++)
    pt->y[i] = NAN;
  if (pt->fault == BK_FAULT_NONE)
    extract_outputs(j, why, sizeof why);
  else
    snprintf(why, sizeof why, "%s", res->why);
  if (pt->fault != BK_FAULT_NONE && disk_full(j->dir)) {
    /* Not recorded: after space is freed the run is made again. */
    d->fatal = BK_ENOSPACE;
    bk_error_set(&d->fatal_err, BK_ENOSPACE, NULL, 0, 0,
                 "%s failed (%s) while the file system of %s has no space "
                 "left; the run is not recorded",
                 j->key, why, j->dir);
    bk_stop_set(SIGTERM);
    j->done = -1;
    return;
  }
  if (pt->fault != BK_FAULT_NONE && j->attempts <= s->model.retries &&
      !bk_stop_requested()) {
    if (submit(j) == 0)
      return;
    if (d->fatal) {
      bk_stop_set(SIGTERM);
      j->done = -1;
      return;
    }
  }
  d->st.completed++;
  if (pt->fault != BK_FAULT_NONE)
    d->st.errors++;
  int keep = keep_folder(s, pt);
  char note[700];
  if (pt->fault != BK_FAULT_NONE)
    snprintf(note, sizeof note, "%s; folder %s", why, j->dir);
  else if (keep)
    snprintf(note, sizeof note, "folder %s", j->dir);
  else
    note[0] = '\0';
  bk_record_t rec = {
      .key = j->key,
      .nx = s->nvars,
      .x = pt->x,
      .ny = s->model.noutputs,
      .y = pt->y,
      .g = pt->g,
      .fault = pt->fault,
      .attempts = j->attempts,
      .seconds = res->seconds,
      .host = d->o.host,
      .note = note,
  };
  int rc = bk_records_append(d->o.records, &rec, &d->fatal_err);
  if (rc) {
    d->fatal = rc;
    bk_stop_set(SIGTERM);
    j->done = -1;
    return;
  }
  if (!keep)
    bk_remove_tree(j->dir);
  j->done = 1;
  if (d->o.tick) {
    d->st.running = bk_exec_running(d->o.exec);
    d->o.tick(d->o.tick_data, &d->st);
  }
}

static int same_doubles(const double *a, const double *b, size_t n) {
  return n == 0 || memcmp(a, b, n * sizeof *a) == 0;
}

static int dispatch_batch(bk_evaluator_t *ev, const char *prefix,
                          bk_point_t *pts, size_t n, bk_error_t *err) {
  bk_dispatch_t *d = ev->data;
  const bk_study_t *s = d->o.study;
  job_t *jobs = bk_calloc(n, sizeof *jobs);
  if (!jobs)
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  d->prefix = prefix;
  int rc = 0, pending = 0;
  for (size_t i = 0; i < n; i++) {
    job_t *j = &jobs[i];
    j->d = d;
    j->pt = &pts[i];
    snprintf(j->key, sizeof j->key, "%s/%llu", prefix,
             (unsigned long long)pts[i].index);
    bk_record_t rec;
    if (bk_records_find(d->o.records, j->key, &rec)) {
      if (rec.nx != s->nvars || !same_doubles(rec.x, pts[i].x, s->nvars)) {
        rc = bk_error_set(err, BK_EMISMATCH, NULL, 0, 0,
                          "the recorded inputs of %s differ from the ones "
                          "this study gives; the records were made "
                          "differently (another brink version?). Use a new "
                          "run.folder",
                          j->key);
        goto out;
      }
      for (size_t k = 0; k < s->model.noutputs && k < rec.ny; k++)
        pts[i].y[k] = rec.y[k];
      pts[i].g = rec.g;
      pts[i].fault = rec.fault;
      j->done = 1;
      d->st.replayed++;
      continue;
    }
    char name[120];
    bk_dispatch_folder_name(j->key, name, sizeof name);
    bk_buf_t p;
    bk_buf_init(&p);
    bk_buf_printf(&p, "%s/%s", d->o.work_dir, name);
    j->dir = p.data;
    if (!j->dir) {
      rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
      goto out;
    }
    if (bk_stop_requested() || d->fatal)
      continue;
    rc = submit(j);
    if (rc && d->fatal) {
      bk_stop_set(SIGTERM);
      break;
    }
    if (rc) {
      rc = bk_error_set(err, rc, NULL, 0, 0, "cannot start %s: %s", j->key,
                        bk_strerror(rc));
      goto out;
    }
    rc = 0;
    pending++;
  }
  int wrc = bk_exec_wait(d->o.exec);
  /* A batch boundary is a natural point to put the records on disk. */
  bk_records_sync(d->o.records);
  if (d->fatal) {
    *err = d->fatal_err;
    if (!err->code)
      err->code = d->fatal;
    rc = d->fatal;
    goto out;
  }
  if (wrc == BK_ESTOPPED || bk_stop_requested()) {
    rc = BK_ESTOPPED;
    goto out;
  }
  if (wrc) {
    rc = bk_error_set(err, wrc, NULL, 0, 0, "the executor failed: %s",
                      bk_strerror(wrc));
    goto out;
  }
  for (size_t i = 0; i < n; i++)
    if (jobs[i].done != 1) {
      rc = bk_error_set(err, BK_EINVAL, NULL, 0, 0,
                        "%s did not finish (internal error)", jobs[i].key);
      goto out;
    }
  (void)pending;
out:
  for (size_t i = 0; i < n; i++)
    bk_free(jobs[i].dir);
  bk_free(jobs);
  return rc;
}

void bk_dispatch_evaluator(bk_dispatch_t *d, bk_evaluator_t *ev) {
  ev->batch = dispatch_batch;
  ev->data = d;
}
