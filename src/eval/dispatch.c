/*
 * The dispatcher (see dispatch.h): records lookup, run folders, executor,
 * extraction, limit state, retries, record append and the keep policy.
 *
 * A run folder is made fresh for each attempt (an old one left by a crash
 * is removed first), without following symbolic links, so a model cannot
 * make brink write outside the run folder.
 *
 * A finished folder that is not kept and holds no subfolder is emptied of
 * everything but the files brink itself writes before the run (decks,
 * copies) and renamed to a spare name instead of removed; the next run's
 * folder is that spare renamed again, with those files rewritten from the
 * start. To the model the folder is as fresh as a new one, and the file
 * system is spared creating and deleting most inodes of every run (ext4
 * without a journal scans past every inode deleted in the last half minute
 * on each creation, which made that the largest cost of a trivial model
 * run). The tidying and renaming run on a helper thread of the executor
 * (bk_exec_work). Spares are removed when the dispatcher is freed. A file of
 * brink's own in a reused folder is written over only when it is a regular
 * file with no other link; a hard link a model made to a file elsewhere is
 * removed and a new file made, so nothing outside the folder is written.
 *
 * A finished evaluation goes to the sink only when it is final: a fault
 * with retries left is run again, or, when the run is stopping, left out
 * (it runs again, with all its retries, on resume), so a resumed run
 * records exactly what an uninterrupted one records. A failure of brink's
 * own (records, a full disk, a folder that cannot be made) cancels the
 * executor, never the user's stop flag.
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/dispatch.h"

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

#include "base/alloc.h"
#include "base/buf.h"
#include "base/fault.h"
#include "base/stop.h"
#include "eval/replay.h"
#include "study/extract.h"
#include "study/template.h"

extern char **environ;

/* One evaluation in flight. */
typedef struct {
  bk_dispatch_t *d;
  bk_point_t *pt;
  char key[BK_REPLAY_KEY_MAX];
  char *dir;
  int attempts;
  int done;
  int need;  /* to run: not found in the records */
  int chunk; /* its chunk of the host list while it runs, else -1 */
} job_t;

struct bk_dispatch {
  bk_dispatch_opts_t o;
  bk_dispatch_stats_t st;
  bk_sink_t records_sink; /* when no sink is given */
  char **base_env; /* environ without what the model does not inherit, the
                      run's resources, model.env */
  size_t nbase_env;
  char res[6][48];  /* the resource variables in base_env */
  char hosts[1100]; /* {{ _hosts }}: HOST:RANKS under run.launch direct */
  char **chunks;    /* the host list split between concurrent runs */
  int *chunk_busy;
  size_t nchunks;
  double *vals; /* x then y, for the limit state */
  char **spare; /* folders to reuse (see the top of this file) */
  size_t nspare;
  size_t capspare;
  long pid;                /* for spare names */
  unsigned long spare_seq; /* for unique spare names */
  /* The batch being run. Folders are made just before their job is
   * submitted, at most `window` ahead, so that finished ones can be
   * reused; the window grows when the executor has nothing queued. */
  job_t *batch;
  size_t nbatch;
  size_t next;     /* the next job to consider submitting */
  size_t inflight; /* submitted, not finished */
  size_t window;
  int fatal; /* a failure of brink's own: the batch is cancelled */
  bk_error_t fatal_err;
};

static int records_put(bk_sink_t *sk, const bk_record_t *rec, bk_error_t *err) {
  return bk_records_append(sk->data, rec, err);
}

void bk_dispatch_sink_records(bk_sink_t *sk, bk_records_t *r) {
  sk->put = records_put;
  sk->data = r;
}

/* Records a failure of brink's own (the first one wins) and cancels the
 * executor, so the batch ends. err_in, when not NULL, is the error. */
static void fail(bk_dispatch_t *d, int code, const bk_error_t *err_in) {
  if (!d->fatal) {
    d->fatal = code;
    if (err_in && err_in->code)
      d->fatal_err = *err_in;
  }
  bk_exec_cancel(d->o.exec);
}

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

int bk_dispatch_remove_tree(const char *path) {
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

/* Does the variable "NAME=VALUE" match `pat`: a name, or a prefix ending
 * in '*'? */
static int env_match(const char *kv, const char *pat) {
  size_t n = strlen(pat);
  if (n > 0 && pat[n - 1] == '*')
    return strncmp(kv, pat, n - 1) == 0;
  return strncmp(kv, pat, n) == 0 && kv[n] == '=';
}

/* The variables a model does not inherit from brink (docs/cluster.md,
 * "The model's environment"): brink's own, those of the launcher that
 * started brink (mpirun, srun, a PMI), which would make a model's own
 * mpirun join brink's job or fail, glibc's allocation checks, which slow
 * every program, and the thread counts brink sets itself. */
static const char *const removed_always[] = {
    "BRINK_*",         "OMPI_*",          "PMIX_*",        "PMI_*",
    "PRTE_*",          "ORTE_*",          "HYDRA_*",       "MPI_LOCALRANKID",
    "MPI_LOCALNRANKS", "MALLOC_PERTURB_", "MALLOC_CHECK_", NULL};
/* Under run.launch direct, every Slurm variable: a model's mpirun then
 * starts its ranks on this node as it would outside Slurm. */
static const char *const removed_direct[] = {"SLURM_*", NULL};
/* Under run.launch srun, the variables of brink's own step and task,
 * which srun would take for options of the model's step; the job's stay,
 * so that srun finds the allocation. */
static const char *const removed_srun[] = {"SLURM_STEP*",
                                           "SLURM_PROCID",
                                           "SLURM_LOCALID",
                                           "SLURM_NODEID",
                                           "SLURM_TASK_PID",
                                           "SLURM_GTIDS",
                                           "SLURM_CPU_BIND*",
                                           "SLURM_LAUNCH_NODE_IPADDR",
                                           "SLURM_SRUN_COMM_*",
                                           "SLURM_PTY_*",
                                           "SLURM_DISTRIBUTION",
                                           "SLURM_CPUS_PER_TASK",
                                           "SLURM_NTASKS*",
                                           "SLURM_NPROCS",
                                           "SLURM_NNODES",
                                           "SLURM_TASKS_PER_NODE",
                                           "SLURM_EXACT",
                                           "SLURM_OVERLAP",
                                           NULL};
/* Set from run.threads (model.env overrides them). */
static const char *const thread_vars[] = {
    "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", NULL};

static int in_list(const char *kv, const char *const *list) {
  for (; *list; list++)
    if (env_match(kv, *list))
      return 1;
  return 0;
}

int bk_dispatch_env_removed(const bk_study_t *s, const char *kv) {
  const bk_model_t *m = &s->model;
  int gone = in_list(kv, removed_always) ||
             in_list(kv, s->run.launch == BK_LAUNCH_SRUN ? removed_srun
                                                         : removed_direct);
  if (gone && strncmp(kv, "BRINK_", 6) != 0)
    for (size_t i = 0; i < m->ninherit; i++)
      if (env_match(kv, m->inherit[i]))
        return 0;
  return gone || in_list(kv, thread_vars);
}

static int build_base_env(bk_dispatch_t *d) {
  const bk_study_t *s = d->o.study;
  const bk_model_t *m = &s->model;
  size_t n = 0;
  while (environ && environ[n])
    n++;
  size_t nres = sizeof d->res / sizeof d->res[0];
  d->base_env = bk_calloc(n + m->nenv + nres + 1, sizeof *d->base_env);
  if (!d->base_env)
    return BK_ENOMEM;
  for (size_t i = 0; i < n; i++) {
    if (bk_dispatch_env_removed(s, environ[i]))
      continue;
    int overridden = 0;
    for (size_t j = 0; j < m->nenv; j++)
      if (env_name_eq(environ[i], m->env[j]))
        overridden = 1;
    if (!overridden)
      d->base_env[d->nbase_env++] = environ[i];
  }
  /* The run's resources, unless model.env sets them. */
  int threads = s->run.threads > 0 ? s->run.threads : 1;
  int ranks = s->run.ranks > 0 ? s->run.ranks : 1;
  snprintf(d->res[0], sizeof d->res[0], "BRINK_THREADS=%d", threads);
  snprintf(d->res[1], sizeof d->res[1], "BRINK_RANKS=%d", ranks);
  snprintf(d->res[2], sizeof d->res[2], "BRINK_CORES=%d", threads * ranks);
  for (int k = 0; thread_vars[k]; k++)
    snprintf(d->res[3 + k], sizeof d->res[3 + k], "%s=%d", thread_vars[k],
             threads);
  for (size_t k = 0; k < nres; k++) {
    int overridden = 0;
    for (size_t j = 0; j < m->nenv; j++)
      if (env_name_eq(d->res[k], m->env[j]))
        overridden = 1;
    if (!overridden)
      d->base_env[d->nbase_env++] = d->res[k];
  }
  for (size_t j = 0; j < m->nenv; j++)
    d->base_env[d->nbase_env++] = m->env[j];
  return 0;
}

static const char *job_hosts(const job_t *j);

/* The argv of one run: model.command with its placeholders rendered like
 * a deck (the values, _index, _key, _folder and the run's resources
 * _threads, _ranks, _cores, _hosts), after `srun --exact ...` under
 * run.launch srun. NULL when out of memory; free with free_argv. */
static char **run_argv(const bk_dispatch_t *d, const job_t *j) {
  const bk_study_t *s = d->o.study;
  const bk_run_t *r = &s->run;
  bk_template_ctx_t ctx = {.values = j->pt->x,
                           .index = (double)j->pt->index,
                           .key = j->key,
                           .folder = j->dir,
                           .threads = r->threads,
                           .ranks = r->ranks,
                           .hosts = job_hosts(j)};
  char **cmd = bk_study_render_argv(s, &ctx);
  size_t pre = r->launch == BK_LAUNCH_SRUN ? 7 : 0;
  char **argv = cmd ? bk_calloc(pre + s->model.argc + 1, sizeof *argv) : NULL;
  if (!argv) {
    bk_free(cmd);
    return NULL;
  }
  int bad = 0;
  if (pre) {
    char t[3][BK_REPLAY_KEY_MAX + 32];
    snprintf(t[0], sizeof t[0], "--ntasks=%d", r->ranks > 0 ? r->ranks : 1);
    snprintf(t[1], sizeof t[1], "--cpus-per-task=%d",
             r->threads > 0 ? r->threads : 1);
    snprintf(t[2], sizeof t[2], "--job-name=%s", j->key);
    const char *a[7] = {
        "srun", "--exact", t[0], t[1], t[2], "--kill-on-bad-exit=1", "--quiet"};
    for (size_t i = 0; i < pre; i++)
      bad |= !(argv[i] = bk_strdup(a[i]));
  }
  for (size_t i = 0; !bad && i < s->model.argc; i++)
    bad |= !(argv[pre + i] = bk_strdup(cmd[i]));
  bk_free(cmd);
  if (bad) {
    for (size_t i = 0; i < pre + s->model.argc; i++)
      bk_free(argv[i]);
    bk_free(argv);
    return NULL;
  }
  return argv;
}

static void free_argv(char **argv) {
  for (size_t i = 0; argv && argv[i]; i++)
    bk_free(argv[i]);
  bk_free(argv);
}

/* Reads the host list and splits it into chunks of run.ranks lines (the
 * last chunk may be short only when the list is shorter than one chunk).
 * Returns 0, BK_ENOMEM or BK_EIO. */
static int read_chunks(bk_dispatch_t *d, const char *path) {
  FILE *f = fopen(path, "r");
  if (!f)
    return BK_EIO;
  int ranks = d->o.study->run.ranks > 0 ? d->o.study->run.ranks : 1;
  char line[512];
  char **hosts = NULL;
  size_t n = 0, cap = 0;
  int rc = 0;
  while (rc == 0 && fgets(line, sizeof line, f)) {
    char *h = line;
    while (*h == ' ' || *h == '\t')
      h++;
    size_t len = strcspn(h, " \t\r\n");
    if (len == 0)
      continue;
    if (n == cap) {
      size_t nc = cap ? 2 * cap : 64;
      char **nh = bk_realloc(hosts, nc * sizeof *nh);
      if (!nh) {
        rc = BK_ENOMEM;
        break;
      }
      hosts = nh;
      cap = nc;
    }
    if (!(hosts[n] = bk_strndup(h, len)))
      rc = BK_ENOMEM;
    else
      n++;
  }
  fclose(f);
  if (rc == 0 && n == 0)
    rc = BK_EIO;
  size_t nch = n >= (size_t)ranks ? n / (size_t)ranks : 1;
  if (rc == 0) {
    d->chunks = bk_calloc(nch, sizeof *d->chunks);
    d->chunk_busy = bk_calloc(nch, sizeof *d->chunk_busy);
    if (!d->chunks || !d->chunk_busy)
      rc = BK_ENOMEM;
  }
  for (size_t c = 0; rc == 0 && c < nch; c++) {
    size_t from = c * (size_t)ranks;
    size_t to = nch == 1 && n < (size_t)ranks ? n : from + (size_t)ranks;
    bk_buf_t b;
    bk_buf_init(&b);
    int bad = bk_buf_puts(&b, "");
    /* "host:count" for each host, in the order of the list. */
    for (size_t i = from; i < to; i++) {
      int seen = 0;
      for (size_t k = from; k < i; k++)
        seen |= strcmp(hosts[k], hosts[i]) == 0;
      if (seen)
        continue;
      int count = 0;
      for (size_t k = i; k < to; k++)
        count += strcmp(hosts[k], hosts[i]) == 0;
      bad |= bk_buf_printf(&b, "%s%s:%d", b.len ? "," : "", hosts[i], count);
    }
    if (bad) {
      bk_buf_close(&b);
      rc = BK_ENOMEM;
    } else {
      d->chunks[d->nchunks++] = b.data;
    }
  }
  for (size_t i = 0; i < n; i++)
    bk_free(hosts[i]);
  bk_free(hosts);
  return rc;
}

int bk_dispatch_new(bk_dispatch_t **out, const bk_dispatch_opts_t *opts) {
  bk_dispatch_t *d = bk_calloc(1, sizeof *d);
  if (!d)
    return BK_ENOMEM;
  d->o = *opts;
  d->pid = (long)getpid();
  if (opts->study->run.launch == BK_LAUNCH_DIRECT)
    snprintf(d->hosts, sizeof d->hosts, "%s:%d",
             opts->host && *opts->host ? opts->host : "localhost",
             opts->study->run.ranks > 0 ? opts->study->run.ranks : 1);
  if (!d->o.sink) {
    bk_dispatch_sink_records(&d->records_sink, opts->records);
    d->o.sink = &d->records_sink;
  }
  const bk_study_t *s = opts->study;
  d->vals = bk_calloc(s->nvars + s->model.noutputs + 1, sizeof *d->vals);
  if (!d->vals || build_base_env(d)) {
    bk_dispatch_free(d);
    return BK_ENOMEM;
  }
  if (opts->hostfile) {
    int rc = read_chunks(d, opts->hostfile);
    if (rc) {
      bk_dispatch_free(d);
      return rc;
    }
  }
  *out = d;
  return 0;
}

void bk_dispatch_free(bk_dispatch_t *d) {
  if (!d)
    return;
  for (size_t i = 0; i < d->nspare; i++) {
    bk_dispatch_remove_tree(d->spare[i]);
    bk_free(d->spare[i]);
  }
  bk_free(d->spare);
  for (size_t i = 0; i < d->nchunks; i++)
    bk_free(d->chunks[i]);
  bk_free(d->chunks);
  bk_free(d->chunk_busy);
  bk_free(d->base_env);
  bk_free(d->vals);
  bk_free(d);
}

const bk_dispatch_stats_t *bk_dispatch_stats(const bk_dispatch_t *d) {
  return &d->st;
}

/* Opens dir/name for writing a file of brink's own into a run folder:
 * never through a symbolic link; new in a new folder; in a reused one the
 * old file is written over (and cut to its new length after writing:
 * truncating first would free and allocate its blocks again, which costs
 * a discard on some disks; and not at all when the old file was no
 * longer) when it is a regular file with no other link, and removed and
 * made anew otherwise (a hard link the model made to a file outside the
 * folder must not be written through). Returns a descriptor, with the
 * old file's size in *old_size (0 for a new file), or -errno. */
static int open_own(const char *path, int reused, off_t *old_size) {
  int flags = O_WRONLY | O_CREAT | O_NOFOLLOW | O_CLOEXEC;
  *old_size = 0;
  int fd = open(path, flags | (reused ? 0 : O_EXCL), 0666);
  if (fd < 0 || !reused)
    return fd < 0 ? -errno : fd;
  struct stat st;
  if (fstat(fd, &st) == 0 && S_ISREG(st.st_mode) && st.st_nlink == 1) {
    *old_size = st.st_size;
    return fd;
  }
  close(fd);
  if (unlink(path) != 0 && errno != ENOENT)
    return -errno;
  fd = open(path, flags | O_EXCL, 0666);
  return fd < 0 ? -errno : fd;
}

/* Writes `len` bytes to dir/name (see open_own). */
static int write_new_file(const char *dir, const char *name, const char *data,
                          size_t len, int reused) {
  char path[4096];
  int n = snprintf(path, sizeof path, "%s/%s", dir, name);
  if (n < 0 || (size_t)n >= sizeof path)
    return -ENAMETOOLONG;
  off_t old;
  int fd = open_own(path, reused, &old);
  if (fd < 0)
    return fd;
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
  if (old > (off_t)len && ftruncate(fd, (off_t)len) != 0) {
    int e = -errno;
    close(fd);
    return e;
  }
  return close(fd) == 0 ? 0 : -errno;
}

static int copy_file(const char *src, const char *dir, const char *name,
                     int reused) {
  int in = open(src, O_RDONLY | O_CLOEXEC);
  if (in < 0)
    return -errno;
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/%s", dir, name);
  off_t old = 0;
  int out = p.data ? open_own(p.data, reused, &old) : BK_ENOMEM;
  bk_buf_close(&p);
  if (out < 0) {
    close(in);
    return out;
  }
  char buf[65536];
  int rc = 0;
  off_t total = 0;
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
    total += r;
    if (rc)
      break;
  }
  if (rc == 0 && old > total && ftruncate(out, total) != 0)
    rc = -errno;
  close(in);
  if (close(out) != 0 && rc == 0)
    rc = -errno;
  return rc;
}

static const char *base_name(const char *p) {
  const char *s = strrchr(p, '/');
  return s ? s + 1 : p;
}

/* Is `name` one of the files brink writes into a run folder before the
 * run, and that a reused folder keeps to write over? Not `stdout` and
 * `stderr`: they are removed with the model's files and made anew by the
 * executor. Emptying them in place instead (truncating to zero) makes
 * ext4 write their next contents out to disk when the model closes them
 * (its guard for files replaced by truncation), which cost more than a
 * new file. */
static int own_file(const bk_study_t *s, const char *name) {
  for (size_t i = 0; i < s->model.ndecks; i++)
    if (strcmp(name, s->model.decks[i].to) == 0)
      return 1;
  for (size_t i = 0; i < s->model.ncopy; i++)
    if (strcmp(name, base_name(s->model.copy[i])) == 0)
      return 1;
  return 0;
}

/* Readies a finished folder (not a link) for reuse: removes every entry
 * but the regular files brink writes, which the next run rewrites. Returns
 * 1 when the folder is ready, 0 when it holds a folder or something could
 * not be removed (then it is removed whole). */
static int tidy_for_reuse(const bk_study_t *s, const char *dir) {
  int fd = open(dir, O_RDONLY | O_DIRECTORY | O_NOFOLLOW | O_CLOEXEC);
  if (fd < 0)
    return 0;
  DIR *dh = fdopendir(fd);
  if (!dh) {
    close(fd);
    return 0;
  }
  int ok = 1;
  struct dirent *e;
  while (ok && (e = readdir(dh))) {
    const char *n = e->d_name;
    if (n[0] == '.' && (!n[1] || (n[1] == '.' && !n[2])))
      continue;
    int type = e->d_type;
    if (type == DT_UNKNOWN) {
      struct stat st;
      if (fstatat(fd, n, &st, AT_SYMLINK_NOFOLLOW) != 0)
        type = DT_DIR; /* give up */
      else
        type = S_ISDIR(st.st_mode)   ? DT_DIR
               : S_ISREG(st.st_mode) ? DT_REG
                                     : DT_LNK;
    }
    if (type == DT_DIR)
      ok = 0;
    else if (type != DT_REG || !own_file(s, n))
      ok = unlinkat(fd, n, 0) == 0 || errno == ENOENT;
  }
  closedir(dh);
  return ok;
}

/* Adds a folder to the spares, or removes it when a window's worth are
 * kept already (the folders of a batch's last runs, which the next batch's
 * first runs take again). Takes the path. */
static void add_spare(bk_dispatch_t *d, char *path) {
  size_t most = d->window > 64 ? d->window : 64;
  if (d->nspare < most && d->nspare == d->capspare) {
    size_t cap = d->capspare ? 2 * d->capspare : 64;
    char **sp = bk_realloc(d->spare, cap * sizeof *sp);
    if (sp) {
      d->spare = sp;
      d->capspare = cap;
    }
  }
  if (d->nspare < most && d->nspare < d->capspare) {
    d->spare[d->nspare++] = path;
    return;
  }
  bk_dispatch_remove_tree(path);
  bk_free(path);
}

/* A finished folder on its way to the spares: tidied and renamed on a
 * helper thread of the executor, so that the deletions (the slowest part
 * of a trivial run on some file systems) do not hold up the starting of
 * the next models. */
typedef struct {
  const bk_study_t *study;
  bk_dispatch_t *d;
  char *dir;
  char *spare;
  int ok;
} retiring_t;

static void retire_work(void *data) {
  retiring_t *r = data;
  r->ok = tidy_for_reuse(r->study, r->dir) && rename(r->dir, r->spare) == 0;
  if (!r->ok)
    bk_dispatch_remove_tree(r->dir);
}

static void retire_done(void *data) {
  retiring_t *r = data;
  if (r->ok) {
    add_spare(r->d, r->spare);
    r->spare = NULL;
  }
  bk_free(r->spare);
  bk_free(r->dir);
  bk_free(r);
}

/* Keeps a finished folder as a spare when it can be reused, and removes it
 * otherwise. */
static void retire_folder(bk_dispatch_t *d, const char *dir) {
  retiring_t *r = bk_calloc(1, sizeof *r);
  bk_buf_t p;
  bk_buf_init(&p);
  bk_buf_printf(&p, "%s/.spare-%s-%ld-%lu", d->o.work_dir,
                d->o.host ? d->o.host : "", d->pid, d->spare_seq++);
  if (r) {
    r->study = d->o.study;
    r->d = d;
    r->dir = bk_strdup(dir);
    r->spare = p.data;
    p.data = NULL;
  }
  if (!r || !r->dir || !r->spare) {
    bk_dispatch_remove_tree(dir);
  } else if (bk_exec_work(d->o.exec, retire_work, retire_done, r) == 0) {
    return;
  } else {
    retire_work(r);
    retire_done(r);
    return;
  }
  if (r) {
    bk_free(r->dir);
    bk_free(r->spare);
    bk_free(r);
  }
  bk_buf_close(&p);
}

/* Makes the job's folder from a spare. Returns 1 when it did. */
static int reuse_spare(bk_dispatch_t *d, const char *dir) {
  while (d->nspare > 0) {
    char *sp = d->spare[--d->nspare];
    int ok = rename(sp, dir) == 0;
    if (!ok && (errno == EEXIST || errno == ENOTEMPTY || errno == EISDIR ||
                errno == ENOTDIR)) {
      /* An old folder of this key, left by a crash or an earlier attempt:
       * remove it (now, before the folder is made again) and try again. */
      ok = bk_dispatch_remove_tree(dir) == 0 && rename(sp, dir) == 0;
    }
    if (!ok)
      bk_dispatch_remove_tree(sp);
    bk_free(sp);
    if (ok)
      return 1;
  }
  return 0;
}

/* The host list of a job: its chunk, or this host. */
static const char *job_hosts(const job_t *j) {
  return j->chunk >= 0 ? j->d->chunks[j->chunk] : j->d->hosts;
}

/* Gives the job a free chunk of the host list, when there is one. */
static void take_chunk(job_t *j) {
  bk_dispatch_t *d = j->d;
  for (size_t c = 0; j->chunk < 0 && c < d->nchunks; c++)
    if (!d->chunk_busy[c]) {
      d->chunk_busy[c] = 1;
      j->chunk = (int)c;
    }
}

static void give_back_chunk(job_t *j) {
  if (j->chunk >= 0)
    j->d->chunk_busy[j->chunk] = 0;
  j->chunk = -1;
}

/* Makes a fresh run folder for the job and fills it. Returns 0, or a
 * negative code with the reason in why. */
static int prepare_folder(job_t *j, char *why, size_t whycap) {
  bk_dispatch_t *d = j->d;
  const bk_study_t *s = d->o.study;
  int rc = 0;
  int reused = reuse_spare(d, j->dir);
  if (!reused && mkdir(j->dir, 0777) != 0) {
    /* An old folder of this key: remove it first. */
    rc = errno == EEXIST ? bk_dispatch_remove_tree(j->dir) : -errno;
    if (rc == 0 && mkdir(j->dir, 0777) != 0)
      rc = -errno;
  }
  if (rc) {
    snprintf(why, whycap, "cannot make the run folder %s: %s", j->dir,
             bk_strerror(rc));
    return rc;
  }
  bk_buf_t out;
  bk_buf_init(&out);
  for (size_t i = 0; i < s->model.ndecks; i++) {
    const bk_deck_t *dk = &s->model.decks[i];
    bk_template_ctx_t ctx = {.values = j->pt->x,
                             .index = (double)j->pt->index,
                             .key = j->key,
                             .folder = j->dir,
                             .threads = s->run.threads,
                             .ranks = s->run.ranks,
                             .hosts = job_hosts(j)};
    bk_buf_reset(&out);
    rc = bk_template_render(dk->tpl, &ctx, &out);
    if (rc == 0)
      rc = write_new_file(j->dir, dk->to, out.data ? out.data : "", out.len,
                          reused);
    if (rc) {
      snprintf(why, whycap, "cannot write %s/%s: %s", j->dir, dk->to,
               bk_strerror(rc));
      break;
    }
  }
  bk_buf_close(&out);
  for (size_t i = 0; rc == 0 && i < s->model.ncopy; i++) {
    rc = copy_file(s->model.copy[i], j->dir, base_name(s->model.copy[i]),
                   reused);
    if (rc)
      snprintf(why, whycap, "cannot copy %s into %s: %s", s->model.copy[i],
               j->dir, bk_strerror(rc));
  }
  return rc;
}

static void on_done(void *data, const bk_job_result_t *res);

/* Starts (or restarts) one job. Returns 0, or a negative code: a folder
 * that cannot be made or filled is a failure of brink's own (d->fatal is
 * set and the executor cancelled); a refused submission is left to the
 * caller. */
static int submit(job_t *j) {
  bk_dispatch_t *d = j->d;
  const bk_study_t *s = d->o.study;
  char why[512];
  int rc = prepare_folder(j, why, sizeof why);
  if (rc) {
    bk_error_t e;
    bk_error_clear(&e);
    bk_error_set(&e, rc == -ENOSPC ? BK_ENOSPC : rc, NULL, 0, 0, "%s", why);
    fail(d, e.code, &e);
    return rc;
  }
  size_t ne = d->nbase_env;
  char **env = bk_calloc(ne + 5, sizeof *env);
  char **argv = run_argv(d, j);
  char kv[3][1200];
  bk_buf_t hv; /* BRINK_HOSTS: a host list has no length limit */
  bk_buf_init(&hv);
  if (job_hosts(j)[0]) /* on failure the fresh buffer stays empty */
    (void)bk_buf_printf(&hv, "BRINK_HOSTS=%s", job_hosts(j));
  if (!env || !argv || (job_hosts(j)[0] && !hv.data)) {
    bk_free(env);
    free_argv(argv);
    bk_buf_close(&hv);
    return BK_ENOMEM;
  }
  memcpy(env, d->base_env, ne * sizeof *env);
  snprintf(kv[0], sizeof kv[0], "BRINK_KEY=%s", j->key);
  snprintf(kv[1], sizeof kv[1], "BRINK_INDEX=%llu",
           (unsigned long long)j->pt->index);
  snprintf(kv[2], sizeof kv[2], "BRINK_FOLDER=%s", j->dir);
  env[ne] = kv[0];
  env[ne + 1] = kv[1];
  env[ne + 2] = kv[2];
  env[ne + 3] = hv.data; /* NULL ends the list when there is none */
  bk_job_t job = {
      .key = j->key,
      .dir = j->dir,
      .argv = argv,
      .env = env,
      .timeout = s->model.timeout,
      .grace = 5,
      .stdout_name = "stdout",
      .stderr_name = "stderr",
  };
  j->attempts++;
  rc = bk_exec_submit(d->o.exec, &job, on_done, j);
  bk_free(env);
  free_argv(argv);
  bk_buf_close(&hv);
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
  pt->g = bk_study_g(s, d->vals, pt->gc);
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

/* A finished attempt. Sets j->done to 1 when the evaluation is final and
 * went to the sink, -1 when it is left out (it runs again on resume), and
 * leaves it 0 when the job was submitted again. */
static void run_done(job_t *j, const bk_job_result_t *res) {
  bk_dispatch_t *d = j->d;
  const bk_study_t *s = d->o.study;
  bk_point_t *pt = j->pt;
  j->done = -1;
  if (res->fault == BK_FAULT_INTERRUPTED || d->fatal)
    return;
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
    bk_error_t e;
    bk_error_clear(&e);
    bk_error_set(&e, BK_ENOSPC, NULL, 0, 0,
                 "%s failed (%s) while the file system of %s has no space "
                 "left; the run is not recorded",
                 j->key, why, j->dir);
    fail(d, BK_ENOSPC, &e);
    return;
  }
  if (pt->fault != BK_FAULT_NONE && j->attempts <= s->model.retries) {
    /* Retries left. While the run stops, the fault is not final: left out,
     * it runs again with all its retries on resume, as it would have
     * without the stop. */
    if (bk_exec_stopping(d->o.exec))
      return;
    j->done = 0;
    int rc = submit(j);
    if (rc == 0)
      return;
    j->done = -1;
    if (!d->fatal) {
      bk_error_t e;
      bk_error_clear(&e);
      bk_error_set(&e, rc, NULL, 0, 0, "cannot start %s again: %s", j->key,
                   bk_strerror(rc));
      if (rc != BK_ESTOPPED && rc != BK_ECANCELED)
        fail(d, rc, &e);
    }
    return;
  }
  d->st.completed++;
  if (pt->fault != BK_FAULT_NONE)
    d->st.errors++;
  else if (pt->g <= 0)
    d->st.failures++;
  int keep = keep_folder(s, pt);
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
      .reason = pt->fault != BK_FAULT_NONE ? why : "",
      .folder = keep ? j->dir : "",
  };
  bk_error_t e;
  bk_error_clear(&e);
  int rc = d->o.sink->put(d->o.sink, &rec, &e);
  if (rc) {
    fail(d, rc, &e);
    return;
  }
  if (!keep)
    retire_folder(d, j->dir);
  j->done = 1;
  if (d->o.tick) {
    d->st.running = bk_exec_running(d->o.exec);
    d->o.tick(d->o.tick_data, &d->st);
  }
}

/* The first window: a few folders beyond the slots. A larger one would
 * only make folders that wait, new ones (the spares come back at the rate
 * runs end), and remove them again at the end. */
#define FIRST_WINDOW(slots) (2 * (size_t)(slots) + 2)
#define MAX_WINDOW          ((size_t)1 << 20)

/* Submits the batch's next jobs while the window has room. A job that
 * cannot be started is a failure of brink's own (the batch is cancelled);
 * a stop leaves the rest unsubmitted. */
static void feed(bk_dispatch_t *d) {
  while (d->next < d->nbatch && d->inflight < d->window) {
    job_t *j = &d->batch[d->next];
    if (!j->need) {
      d->next++;
      continue;
    }
    if (d->fatal || bk_exec_stopping(d->o.exec))
      return;
    if (d->nchunks) {
      /* With a host list, a run waits for a free chunk of it. */
      take_chunk(j);
      if (j->chunk < 0)
        return;
    }
    int rc = submit(j);
    if (rc) {
      give_back_chunk(j);
      if (!d->fatal && rc != BK_ESTOPPED && rc != BK_ECANCELED) {
        bk_error_t e;
        bk_error_clear(&e);
        bk_error_set(&e, rc, NULL, 0, 0, "cannot start %s: %s", j->key,
                     bk_strerror(rc));
        fail(d, rc, &e);
      }
      return;
    }
    d->next++;
    d->inflight++;
  }
}

static void on_done(void *data, const bk_job_result_t *res) {
  job_t *j = data;
  bk_dispatch_t *d = j->d;
  run_done(j, res);
  if (j->done == 0)
    return; /* submitted again */
  give_back_chunk(j);
  d->inflight--;
  /* Nothing queued behind the running processes while more jobs wait:
   * the folders are not made fast enough, look further ahead. (At the
   * tail of a batch nothing is queued either, but nothing waits.) */
  if (d->window < MAX_WINDOW && d->next < d->nbatch &&
      (size_t)bk_exec_running(d->o.exec) >= d->inflight)
    d->window *= 2;
  feed(d);
}

static int dispatch_batch(bk_evaluator_t *ev, const char *prefix,
                          bk_point_t *pts, size_t n, bk_error_t *err) {
  bk_dispatch_t *d = ev->data;
  const bk_study_t *s = d->o.study;
  job_t *jobs = bk_calloc(n, sizeof *jobs);
  if (!jobs)
    return bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
  int rc = 0;
  d->fatal = 0;
  bk_error_clear(&d->fatal_err);
  bk_records_t *logs[1] = {d->o.records};
  size_t replayed = 0;
  for (size_t i = 0; i < n; i++) {
    job_t *j = &jobs[i];
    j->d = d;
    j->pt = &pts[i];
    j->chunk = -1;
    if (bk_replay_key(j->key, sizeof j->key, prefix, pts[i].index)) {
      rc = bk_error_set(err, BK_ERANGE, NULL, 0, 0,
                        "the key %s/%llu is too long", prefix,
                        (unsigned long long)pts[i].index);
      goto out;
    }
    rc = bk_replay_point(logs, 1, j->key, s->nvars, s->model.noutputs, &pts[i],
                         NULL, err);
    if (rc < 0)
      goto out;
    if (rc == 1) {
      rc = 0;
      j->done = 1;
      d->st.replayed++;
      if (pts[i].fault != BK_FAULT_NONE)
        d->st.replayed_errors++;
      else if (pts[i].g <= 0)
        d->st.failures++;
      replayed++;
      continue;
    }
    char name[BK_REPLAY_KEY_MAX];
    bk_dispatch_folder_name(j->key, name, sizeof name);
    bk_buf_t p;
    bk_buf_init(&p);
    bk_buf_printf(&p, "%s/%s", d->o.work_dir, name);
    j->dir = p.data;
    if (!j->dir) {
      rc = bk_error_set(err, BK_ENOMEM, NULL, 0, 0, "out of memory");
      goto out;
    }
    j->need = 1;
  }
  if (replayed && d->o.tick)
    d->o.tick(d->o.tick_data, &d->st);
  d->batch = jobs;
  d->nbatch = n;
  d->next = 0;
  d->inflight = 0;
  size_t first = FIRST_WINDOW(s->run.slots > 0 ? s->run.slots : 1);
  if (d->window < first)
    d->window = first;
  feed(d);
  int wrc = bk_exec_wait(d->o.exec);
  /* A batch boundary is a natural point to put the records on disk. */
  if (d->o.records)
    bk_records_sync(d->o.records);
  if (d->fatal) {
    *err = d->fatal_err;
    if (!err->code)
      bk_error_set(err, d->fatal, NULL, 0, 0, "%s", bk_strerror(d->fatal));
    rc = d->fatal;
    goto out;
  }
  /* A stop request, or a cancel from outside (a stop sent by message). */
  if (wrc == BK_ESTOPPED || wrc == BK_ECANCELED || bk_stop_requested()) {
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
out:
  d->batch = NULL;
  d->nbatch = d->next = d->inflight = 0;
  for (size_t i = 0; i < n; i++)
    bk_free(jobs[i].dir);
  bk_free(jobs);
  return rc;
}

void bk_dispatch_evaluator(bk_dispatch_t *d, bk_evaluator_t *ev) {
  ev->batch = dispatch_batch;
  ev->data = d;
}
