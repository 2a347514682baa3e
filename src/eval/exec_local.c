/*
 * The local executor: runs model processes on this machine with libuv, at
 * most `slots` at a time (see exec.h for the contract).
 *
 * Every model runs in its own session and process group (POSIX_SPAWN_SETSID),
 * so a signal sent to the group reaches the whole tree a wrapper script may
 * spawn. Processes start with posix_spawn, which glibc implements with
 * clone(CLONE_VM | CLONE_VFORK): no page tables are copied, which is what a
 * fork costs a large parent. They are reaped from a SIGCHLD watcher, by pid,
 * so children that other parts of the program start are left alone. After the
 * group leader exits, however it exits, the group gets SIGKILL, so no child it
 * left behind outlives the run: the leader's end is seen without reaping it
 * (WNOWAIT), the group is killed while the unreaped leader keeps its id from
 * being reused, and only then is the leader reaped. No signal ever goes to a
 * group whose leader was reaped. Timeouts send SIGTERM to the group and
 * SIGKILL after the grace; a stop request (stop.h) or a cancel does the same
 * to every running group and drops the queue. Every accepted job's callback
 * runs exactly once, always from inside the event loop: never from
 * bk_exec_submit itself, which would surprise a caller holding locks or
 * iterating a list.
 *
 * SPDX-License-Identifier: MIT
 */
#include "eval/exec.h"

#include "base/alloc.h"
#include "base/error.h"
#include "base/fault.h"
#include "base/stop.h"

#include <assert.h>
#include <errno.h>
#include <fcntl.h>
#include <signal.h>
#include <spawn.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>
#include <stdatomic.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <uv.h>

extern char **environ;

static bk__exec_kill_fn kill_fn = kill;

void bk__exec_set_kill(bk__exec_kill_fn fn) {
  kill_fn = fn ? fn : kill;
}

/* How often the loop looks at the stop flag. A signal handler cannot touch
 * the loop safely, so the flag is polled; 50 ms is quick for a person and
 * costs nothing. */
#define POLL_MS 50
/* Seconds from SIGTERM to SIGKILL when the job names no grace. */
#define DEFAULT_GRACE 5.0

/* What the per-job timer does when it fires next. */
typedef enum {
  TIMER_TIMEOUT, /* the job's timeout: send SIGTERM, then wait the grace */
  TIMER_GRACE,   /* the grace after SIGTERM: send SIGKILL */
  TIMER_IDLE     /* nothing left to do */
} timer_phase_t;

/* One submitted job. It lives from bk_exec_submit until its callback has run
 * and its timer, if it has one, is closed (cb_done && nopen == 0), and is in
 * at most one of the executor's lists at a time: queued, running or
 * deferred. */
typedef struct job {
  /* Copies of the submitted bk_job_t, in the same allocation as the job. */
  char *key;
  char *dir;
  char **argv;
  char **env; /* NULL: inherit brink's environment */
  char *stdout_name;
  char *stderr_name;
  double timeout;
  double grace;
  bk_exec_cb cb;
  void *data;

  /* Private. */
  struct bk_exec *ex;
  struct job *prev;
  struct job *next;
  uv_timer_t timer;
  pid_t pid;       /* also the process group id */
  int has_timer;   /* timer initialised (it is closed when the run ends) */
  int nopen;       /* libuv handles not yet closed */
  int cb_done;     /* the callback has run */
  int timed_out;   /* SIGTERM sent because of the timeout */
  int interrupted; /* SIGTERM sent because of a stop request */
  timer_phase_t phase;
  uint64_t t0; /* uv_hrtime at spawn, ns */
  bk_job_result_t res;
} job_t;

typedef struct {
  job_t *head;
  job_t *tail;
} job_list_t;

struct bk_exec {
  /* Read-only after bk_exec_local_new. */
  int slots;

  /* Private. */
  uv_loop_t loop;
  uv_timer_t poll;        /* watches the stop flag during bk_exec_wait */
  uv_idle_t idle;         /* active while deferred callbacks are pending */
  uv_signal_t chld;       /* SIGCHLD: reap; referenced while processes run */
  posix_spawnattr_t attr; /* setsid, default signals, empty mask */
  int null_fd;            /* /dev/null, for stdin and unnamed outputs */
  /* The last PATH lookup: program name, PATH value, path found. */
  char *path_prog;
  char *path_var;
  char *path_found;
  job_list_t queued; /* submitted, not started */
  job_list_t running;
  job_list_t deferred; /* finished without a process; callback pending */
  int nrunning;
  int in_wait;          /* inside bk_exec_wait: handles exist, jobs may start */
  int stopping;         /* a stop or cancel is carried out in this wait */
  atomic_int cancelled; /* bk_exec_cancel was called; cleared by the wait */
  bk_exec_poll_cb poll_cb;
  void *poll_data;
};

static void list_push(job_list_t *l, job_t *j) {
  j->next = NULL;
  j->prev = l->tail;
  if (l->tail)
    l->tail->next = j;
  else
    l->head = j;
  l->tail = j;
}

static void list_remove(job_list_t *l, job_t *j) {
  if (j->prev)
    j->prev->next = j->next;
  else
    l->head = j->next;
  if (j->next)
    j->next->prev = j->prev;
  else
    l->tail = j->prev;
  j->prev = j->next = NULL;
}

static job_t *list_pop(job_list_t *l) {
  job_t *j = l->head;
  if (j)
    list_remove(l, j);
  return j;
}

static size_t strv_len(char *const *v) {
  size_t n = 0;
  while (v[n])
    n++;
  return n;
}

static size_t strv_bytes(char *const *v) {
  size_t b = 0;
  for (size_t i = 0; v[i]; i++)
    b += strlen(v[i]) + 1;
  return b;
}

/* Copies s to *at and advances *at. */
static char *pack_str(char **at, const char *s) {
  size_t n = strlen(s) + 1;
  char *c = memcpy(*at, s, n);
  *at += n;
  return c;
}

/* Copies the strings of a NULL-ended vector into *at, filling slots. */
static void pack_strv(char **slots, char **at, char *const *v) {
  size_t i = 0;
  for (; v[i]; i++)
    slots[i] = pack_str(at, v[i]);
  slots[i] = NULL;
}

/* A job with copies of every string of the submitted one, in one
 * allocation: the job, the argv and env pointer arrays, then the strings.
 * Returns NULL when out of memory. */
static struct job *job_alloc(const bk_job_t *job) {
  size_t argc = strv_len(job->argv);
  size_t envc = job->env ? strv_len(job->env) : 0;
  size_t nptr = argc + 1 + (job->env ? envc + 1 : 0);
  size_t bytes = strlen(job->dir) + 1 + strv_bytes(job->argv);
  if (job->env)
    bytes += strv_bytes(job->env);
  if (job->key)
    bytes += strlen(job->key) + 1;
  if (job->stdout_name)
    bytes += strlen(job->stdout_name) + 1;
  if (job->stderr_name)
    bytes += strlen(job->stderr_name) + 1;
  size_t head = sizeof(struct job) + nptr * sizeof(char *);
  struct job *j = bk_malloc(head + bytes);
  if (!j)
    return NULL;
  memset(j, 0, sizeof *j);
  char **ptrs = (char **)(void *)(j + 1);
  char *at = (char *)j + head;
  j->argv = ptrs;
  pack_strv(j->argv, &at, job->argv);
  if (job->env) {
    j->env = ptrs + argc + 1;
    pack_strv(j->env, &at, job->env);
  }
  j->dir = pack_str(&at, job->dir);
  if (job->key)
    j->key = pack_str(&at, job->key);
  if (job->stdout_name)
    j->stdout_name = pack_str(&at, job->stdout_name);
  if (job->stderr_name)
    j->stderr_name = pack_str(&at, job->stderr_name);
  return j;
}

static void job_free(struct job *j) {
  bk_free(j);
}

/* Frees the job once nothing refers to it any more. */
static void job_release(job_t *j) {
  if (j->cb_done && j->nopen == 0)
    job_free(j);
}

static void on_handle_closed(uv_handle_t *h) {
  job_t *j = h->data;
  j->nopen--;
  job_release(j);
}

/* Runs the job's callback; the job is freed when its handles are closed. */
static void job_finish(job_t *j) {
  assert(!j->cb_done);
  j->cb_done = 1;
  j->cb(j->data, &j->res);
  job_release(j);
}

/* Milliseconds for a libuv timer, rounded up so a tiny positive time never
 * becomes 0. */
static uint64_t to_ms(double seconds) {
  if (seconds <= 0)
    return 0;
  double ms = seconds * 1000.0;
  if (ms > 1e15)
    ms = 1e15;
  uint64_t r = (uint64_t)ms;
  if ((double)r < ms)
    r++;
  return r;
}

static double grace_of(const job_t *j) {
  return j->grace > 0 ? j->grace : DEFAULT_GRACE;
}

static const char *signal_name(int sig, char *buf, size_t n) {
  const char *abbrev = sigabbrev_np(sig);
  if (abbrev)
    snprintf(buf, n, "SIG%s", abbrev);
  else
    snprintf(buf, n, "signal %d", sig);
  return buf;
}

static void on_idle(uv_idle_t *h);

/* Queues a job that will not run a process, for its callback to run from
 * the idle handle. */
static void defer(bk_exec_t *ex, job_t *j, int fault) {
  j->res.fault = fault;
  if (fault == BK_FAULT_INTERRUPTED)
    snprintf(j->res.why, sizeof j->res.why, "interrupted");
  list_push(&ex->deferred, j);
  if (!uv_is_active((uv_handle_t *)&ex->idle))
    uv_idle_start(&ex->idle, on_idle);
}

/* Sends SIGTERM to the job's group and arms SIGKILL after the grace, unless
 * that already happened. */
static void on_job_timer(uv_timer_t *t);

/* Gives the job its timer, unless it has one. */
static void job_timer_init(job_t *j) {
  if (j->has_timer)
    return;
  uv_timer_init(&j->ex->loop, &j->timer);
  j->timer.data = j;
  j->has_timer = 1;
  j->nopen++;
}

static void job_terminate(job_t *j) {
  if (j->phase != TIMER_TIMEOUT)
    return;
  kill_fn(-j->pid, SIGTERM);
  j->phase = TIMER_GRACE;
  job_timer_init(j);
  uv_timer_stop(&j->timer);
  uv_timer_start(&j->timer, on_job_timer, to_ms(grace_of(j)), 0);
}

static void on_job_timer(uv_timer_t *t) {
  job_t *j = t->data;
  if (j->phase == TIMER_TIMEOUT) {
    j->timed_out = 1;
    job_terminate(j);
  } else if (j->phase == TIMER_GRACE) {
    kill_fn(-j->pid, SIGKILL);
    j->phase = TIMER_IDLE;
  }
}

static void fill_slots(bk_exec_t *ex);

/* Classifies how the process ended. A timeout or a stop wins over how the
 * process died, since brink itself sent the signal. */
static void classify(job_t *j, int64_t status, int sig) {
  bk_job_result_t *r = &j->res;
  char name[32];
  r->exit_status = (int)status;
  r->term_signal = sig;
  if (j->interrupted) {
    r->fault = BK_FAULT_INTERRUPTED;
    snprintf(r->why, sizeof r->why, "interrupted");
  } else if (j->timed_out) {
    r->fault = BK_FAULT_TIMEOUT;
    snprintf(r->why, sizeof r->why, "timeout after %g s", j->timeout);
  } else if (sig != 0) {
    r->fault = BK_FAULT_SIGNAL;
    snprintf(r->why, sizeof r->why, "killed by %s",
             signal_name(sig, name, sizeof name));
  } else if (status != 0) {
    r->fault = BK_FAULT_EXIT_CODE;
    snprintf(r->why, sizeof r->why, "exit status %d", (int)status);
  } else {
    r->fault = BK_FAULT_NONE;
    r->why[0] = '\0';
  }
}

/* The loop must live while processes run, and only then: the SIGCHLD
 * watcher is referenced while there are any. */
static void running_add(bk_exec_t *ex, job_t *j) {
  list_push(&ex->running, j);
  if (ex->nrunning++ == 0)
    uv_ref((uv_handle_t *)&ex->chld);
}

static void running_remove(bk_exec_t *ex, job_t *j) {
  list_remove(&ex->running, j);
  if (--ex->nrunning == 0)
    uv_unref((uv_handle_t *)&ex->chld);
}

/* The job's process has ended but is not reaped yet. */
static void job_exited(job_t *j) {
  bk_exec_t *ex = j->ex;

  /* The leader is gone but its process group may not be: kill whatever it
   * left behind. The unreaped leader keeps the group id from being reused,
   * so this cannot reach another group; reaping comes after. */
  kill_fn(-j->pid, SIGKILL);
  bk_stop_unregister_pgid(j->pid);
  int ws = 0;
  pid_t r;
  do
    r = waitpid(j->pid, &ws, 0);
  while (r < 0 && errno == EINTR);

  j->res.seconds = (double)(uv_hrtime() - j->t0) / 1e9;
  if (WIFSIGNALED(ws))
    classify(j, 0, WTERMSIG(ws));
  else
    classify(j, WIFEXITED(ws) ? WEXITSTATUS(ws) : 0, 0);

  j->phase = TIMER_IDLE;
  if (j->has_timer) {
    uv_timer_stop(&j->timer);
    uv_close((uv_handle_t *)&j->timer, on_handle_closed);
  }
  running_remove(ex, j);

  /* Start the next job before the callback, so a slow callback does not
   * leave a slot idle. */
  fill_slots(ex);
  job_finish(j);
}

static job_t *running_find(bk_exec_t *ex, pid_t pid) {
  for (job_t *j = ex->running.head; j; j = j->next)
    if (j->pid == pid)
      return j;
  return NULL;
}

/* 1 when the process has ended (it stays unreaped). */
static int has_ended(pid_t pid) {
  siginfo_t si;
  int r;
  si.si_pid = 0;
  do
    r = waitid(P_PID, (id_t)pid, &si, WEXITED | WNOHANG | WNOWAIT);
  while (r < 0 && errno == EINTR);
  return r == 0 && si.si_pid == pid;
}

/* Asks every running job's process whether it has ended. */
static void reap_each(bk_exec_t *ex) {
  job_t *next;
  for (job_t *j = ex->running.head; j; j = next) {
    next = j->next;
    if (has_ended(j->pid))
      job_exited(j);
  }
}

/* Handles the ended processes of running jobs. A peek at any ended child
 * finds ours in one call each; a child this executor did not start (its
 * owner reaps it) sends us asking each of ours instead. */
static void on_chld(uv_signal_t *h, int signum) {
  (void)signum;
  bk_exec_t *ex = h->data;
  while (ex->running.head) {
    siginfo_t si;
    si.si_pid = 0;
    if (waitid(P_ALL, 0, &si, WEXITED | WNOHANG | WNOWAIT) != 0) {
      if (errno == EINTR)
        continue;
      break;
    }
    if (si.si_pid == 0)
      break;
    job_t *j = running_find(ex, si.si_pid);
    if (!j) {
      reap_each(ex);
      break;
    }
    job_exited(j);
  }
}

/* Opens dir/name for the child's stdout or stderr (the shared /dev/null
 * when there is no name), empty. A file left there (a reused run folder)
 * is written over only when it is a regular file with no other link: a
 * hard link that a model made to a file elsewhere is removed and a new
 * file made, so nothing outside the folder is truncated or written. Never
 * follows a symbolic link. Returns a descriptor >= 3, so the child's dup2
 * onto 0, 1 and 2 cannot overwrite it, or a negative libuv code. */
static int open_output(bk_exec_t *ex, const char *dir, const char *name) {
  char path[4096];
  if (!name)
    return ex->null_fd;
  int n = snprintf(path, sizeof path, "%s/%s", dir, name);
  if (n < 0 || (size_t)n >= sizeof path)
    return UV_ENAMETOOLONG;
  int fd = open(path, O_CREAT | O_WRONLY | O_CLOEXEC | O_NOFOLLOW, 0644);
  if (fd < 0)
    return -errno;
  struct stat st;
  if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode) || st.st_nlink != 1) {
    close(fd);
    if (unlink(path) != 0 && errno != ENOENT)
      return -errno;
    fd = open(path, O_CREAT | O_EXCL | O_WRONLY | O_CLOEXEC | O_NOFOLLOW, 0644);
    if (fd < 0)
      return -errno;
  } else if (st.st_size > 0 && ftruncate(fd, 0) != 0) {
    int e = -errno;
    close(fd);
    return e;
  }
  if (fd < 3) {
    int hi = fcntl(fd, F_DUPFD_CLOEXEC, 3);
    int e = errno;
    close(fd);
    if (hi < 0)
      return -e;
    fd = hi;
  }
  return fd;
}

static void close_output(bk_exec_t *ex, int fd) {
  if (fd >= 0 && fd != ex->null_fd)
    close(fd);
}

/* err: a positive errno value. */
static void spawn_failed(job_t *j, int err) {
  const char *prog = j->argv[0];
  const char *hint =
      strchr(prog, '/') ? "is the path right?" : "is it installed and on PATH?";
  if (err == ENOENT)
    snprintf(j->res.why, sizeof j->res.why,
             "%s: no such file or directory (%s)", prog, hint);
  else if (err == EACCES)
    snprintf(j->res.why, sizeof j->res.why,
             "%s: permission denied (is it executable?)", prog);
  else
    snprintf(j->res.why, sizeof j->res.why, "%s: %s", prog, uv_strerror(-err));
}

/* The value of PATH in env, or the default execvp uses. */
static const char *path_of(char *const *env) {
  for (char *const *e = env; e && *e; e++)
    if (strncmp(*e, "PATH=", 5) == 0)
      return *e + 5;
  return "/bin:/usr/bin";
}

/* posix_spawn as execve would see it: the file at `path`, with the
 * /bin/sh fallback execvp makes for an executable without a #! line.
 * Returns 0 or a positive errno value. */
static int spawn_file(bk_exec_t *ex, job_t *j, const char *path,
                      const posix_spawn_file_actions_t *fa) {
  char *const *env = j->env ? j->env : environ;
  int rc = posix_spawn(&j->pid, path, fa, &ex->attr, j->argv, env);
  if (rc != ENOEXEC)
    return rc;
  size_t argc = strv_len(j->argv);
  char **sh = bk_calloc(argc + 2, sizeof *sh);
  if (!sh)
    return ENOMEM;
  sh[0] = "/bin/sh";
  sh[1] = (char *)path;
  for (size_t i = 1; i < argc; i++)
    sh[i + 1] = j->argv[i];
  rc = posix_spawn(&j->pid, "/bin/sh", fa, &ex->attr, sh, env);
  bk_free(sh);
  return rc;
}

/* Remembers a PATH lookup that holds for every job (PATH has only absolute
 * folders), so the next job with the same program and PATH spawns at once. */
static void remember_path(bk_exec_t *ex, const char *prog, const char *pv,
                          const char *found) {
  bk_free(ex->path_prog);
  bk_free(ex->path_var);
  bk_free(ex->path_found);
  ex->path_prog = bk_strdup(prog);
  ex->path_var = bk_strdup(pv);
  ex->path_found = bk_strdup(found);
  if (!ex->path_prog || !ex->path_var || !ex->path_found) {
    bk_free(ex->path_prog);
    bk_free(ex->path_var);
    bk_free(ex->path_found);
    ex->path_prog = ex->path_var = ex->path_found = NULL;
  }
}

/* Spawns argv[0], looked up like execvp on the PATH of the job's
 * environment when it has no '/': each folder in turn, EACCES remembered
 * and the search going on, ENOENT and ENOTDIR skipped. A relative folder
 * is relative to the run folder, as it would be for the child. Returns 0
 * or a positive errno value. */
static int spawn_job(bk_exec_t *ex, job_t *j,
                     const posix_spawn_file_actions_t *fa) {
  const char *prog = j->argv[0];
  if (strchr(prog, '/'))
    return spawn_file(ex, j, prog, fa);
  if (!*prog)
    return ENOENT;
  const char *pv = path_of(j->env ? j->env : environ);
  if (ex->path_prog && strcmp(ex->path_prog, prog) == 0 &&
      strcmp(ex->path_var, pv) == 0) {
    int rc = spawn_file(ex, j, ex->path_found, fa);
    if (rc != ENOENT && rc != EACCES && rc != ENOTDIR)
      return rc;
  }
  size_t plen = strlen(prog);
  /* A lookup holds for every job when no folder depends on the cwd. */
  int all_absolute = *pv == '/';
  for (const char *c = strchr(pv, ':'); c && all_absolute;
       c = strchr(c + 1, ':'))
    if (c[1] != '/')
      all_absolute = 0;
  int err = ENOENT;
  for (const char *p = pv;; p++) {
    const char *colon = strchr(p, ':');
    size_t dlen = colon ? (size_t)(colon - p) : strlen(p);
    char *cand = bk_malloc(dlen + plen + 3);
    if (!cand)
      return ENOMEM;
    if (dlen == 0)
      snprintf(cand, dlen + plen + 3, "./%s", prog);
    else
      snprintf(cand, dlen + plen + 3, "%.*s/%s", (int)dlen, p, prog);
    int rc = spawn_file(ex, j, cand, fa);
    if (rc == 0 && all_absolute)
      remember_path(ex, prog, pv, cand);
    bk_free(cand);
    if (rc == 0)
      return 0;
    if (rc == EACCES)
      err = EACCES;
    else if (rc != ENOENT && rc != ENOTDIR)
      return rc;
    if (!colon)
      return err;
    p = colon;
  }
}

/* Starts one job, or defers it with BK_FAULT_SPAWN when its process cannot
 * start. */
static void job_start(bk_exec_t *ex, job_t *j) {
  int fd_out = -1;
  int fd_err = -1;

  fd_out = open_output(ex, j->dir, j->stdout_name);
  if (fd_out < 0) {
    snprintf(j->res.why, sizeof j->res.why, "cannot open %s/%s: %s", j->dir,
             j->stdout_name, uv_strerror(fd_out));
    goto fail;
  }
  fd_err = open_output(ex, j->dir, j->stderr_name);
  if (fd_err < 0) {
    snprintf(j->res.why, sizeof j->res.why, "cannot open %s/%s: %s", j->dir,
             j->stderr_name, uv_strerror(fd_err));
    goto fail;
  }

  posix_spawn_file_actions_t fa;
  int rc = posix_spawn_file_actions_init(&fa);
  if (rc == 0)
    rc = posix_spawn_file_actions_addchdir_np(&fa, j->dir);
  if (rc == 0)
    rc = posix_spawn_file_actions_adddup2(&fa, ex->null_fd, 0);
  if (rc == 0)
    rc = posix_spawn_file_actions_adddup2(&fa, fd_out, 1);
  if (rc == 0)
    rc = posix_spawn_file_actions_adddup2(&fa, fd_err, 2);
  j->t0 = uv_hrtime();
  if (rc == 0)
    rc = spawn_job(ex, j, &fa);
  posix_spawn_file_actions_destroy(&fa);
  close_output(ex, fd_out);
  close_output(ex, fd_err);
  fd_out = fd_err = -1;
  if (rc != 0) {
    spawn_failed(j, rc);
    goto fail;
  }

  bk_stop_register_pgid(j->pid);
  j->phase = TIMER_TIMEOUT;
  if (j->timeout > 0) {
    job_timer_init(j);
    uv_timer_start(&j->timer, on_job_timer, to_ms(j->timeout), 0);
  }
  running_add(ex, j);
  return;

fail:
  close_output(ex, fd_out);
  close_output(ex, fd_err);
  j->res.seconds = 0;
  defer(ex, j, BK_FAULT_SPAWN);
}

/* Starts queued jobs while slots are free. A job that fails to spawn frees
 * its slot at once, so the loop goes on to the next. */
static void fill_slots(bk_exec_t *ex) {
  while (!ex->stopping && ex->nrunning < ex->slots && ex->queued.head)
    job_start(ex, list_pop(&ex->queued));
}

/* Drops the queue and terminates every running group. */
static void begin_stop(bk_exec_t *ex) {
  ex->stopping = 1;
  job_t *j;
  while ((j = list_pop(&ex->queued)))
    defer(ex, j, BK_FAULT_INTERRUPTED);
  for (j = ex->running.head; j; j = j->next) {
    j->interrupted = 1;
    job_terminate(j);
  }
}

static int must_stop(bk_exec_t *ex) {
  return bk_stop_requested() || atomic_load(&ex->cancelled);
}

static void on_poll(uv_timer_t *t) {
  bk_exec_t *ex = t->data;
  if (ex->poll_cb)
    ex->poll_cb(ex->poll_data, ex);
  if (!ex->stopping && must_stop(ex))
    begin_stop(ex);
}

void bk_exec_cancel(bk_exec_t *ex) {
  atomic_store(&ex->cancelled, 1);
  if (ex->in_wait && !ex->stopping)
    begin_stop(ex);
}

int bk_exec_stopping(const bk_exec_t *ex) {
  return ex->stopping || bk_stop_requested() ||
         atomic_load(&((bk_exec_t *)ex)->cancelled);
}

typedef struct {
  uv_work_t req;
  bk_exec_work_cb work;
  bk_exec_work_cb done;
  void *data;
} work_t;

static void work_run(uv_work_t *req) {
  work_t *w = req->data;
  w->work(w->data);
}

static void work_after(uv_work_t *req, int status) {
  (void)status;
  work_t *w = req->data;
  w->done(w->data);
  bk_free(w);
}

int bk_exec_work(bk_exec_t *ex, bk_exec_work_cb work, bk_exec_work_cb done,
                 void *data) {
  if (!ex || !ex->in_wait || !work || !done)
    return BK_EINVAL;
  work_t *w = bk_malloc(sizeof *w);
  if (!w)
    return BK_ENOMEM;
  w->req.data = w;
  w->work = work;
  w->done = done;
  w->data = data;
  if (uv_queue_work(&ex->loop, &w->req, work_run, work_after) != 0) {
    bk_free(w);
    return BK_EIO;
  }
  return 0;
}

void bk_exec_set_poll(bk_exec_t *ex, bk_exec_poll_cb cb, void *data) {
  ex->poll_cb = cb;
  ex->poll_data = data;
}

/* Runs the callbacks of jobs that finished without a process. Only the jobs
 * deferred before this call run now; those their callbacks defer run on the
 * next loop iteration, so the loop keeps serving processes and timers. */
static void on_idle(uv_idle_t *h) {
  bk_exec_t *ex = h->data;
  job_list_t batch = ex->deferred;
  ex->deferred.head = ex->deferred.tail = NULL;
  job_t *j;
  while ((j = list_pop(&batch)))
    job_finish(j);
  if (!ex->deferred.head)
    uv_idle_stop(&ex->idle);
}

int bk_exec_local_new(bk_exec_t **out, int slots) {
  *out = NULL;
  if (slots < 1)
    return BK_EINVAL;
  bk_exec_t *ex = bk_calloc(1, sizeof *ex);
  if (!ex)
    return BK_ENOMEM;
  ex->null_fd = open("/dev/null", O_RDWR | O_CLOEXEC);
  if (ex->null_fd >= 0 && ex->null_fd < 3) {
    int hi = fcntl(ex->null_fd, F_DUPFD_CLOEXEC, 3);
    close(ex->null_fd);
    ex->null_fd = hi;
  }
  if (ex->null_fd < 0) {
    bk_free(ex);
    return BK_EIO;
  }
  /* The child gets a session of its own, every signal at its default
   * action and none blocked, as libuv's spawn gave it. */
  sigset_t all, none;
  sigemptyset(&all);
  for (int s = 1; s < 32; s++)
    if (s != SIGKILL && s != SIGSTOP)
      sigaddset(&all, s);
  sigemptyset(&none);
  if (posix_spawnattr_init(&ex->attr) != 0) {
    close(ex->null_fd);
    bk_free(ex);
    return BK_ENOMEM;
  }
  posix_spawnattr_setflags(&ex->attr, POSIX_SPAWN_SETSID |
                                          POSIX_SPAWN_SETSIGDEF |
                                          POSIX_SPAWN_SETSIGMASK);
  posix_spawnattr_setsigdefault(&ex->attr, &all);
  posix_spawnattr_setsigmask(&ex->attr, &none);
  int rc = uv_loop_init(&ex->loop);
  if (rc < 0) {
    posix_spawnattr_destroy(&ex->attr);
    close(ex->null_fd);
    bk_free(ex);
    return rc == UV_ENOMEM ? BK_ENOMEM : BK_EIO;
  }
  ex->slots = slots;
  *out = ex;
  return 0;
}

/* Frees the executor. Jobs still queued (submitted but never waited for)
 * are dropped without their callbacks. Must not be called from a callback. */
void bk_exec_free(bk_exec_t *ex) {
  if (!ex)
    return;
  assert(!ex->in_wait);
  job_t *j;
  while ((j = list_pop(&ex->queued)))
    job_free(j);
  int rc = uv_loop_close(&ex->loop);
  assert(rc == 0);
  (void)rc;
  posix_spawnattr_destroy(&ex->attr);
  close(ex->null_fd);
  bk_free(ex->path_prog);
  bk_free(ex->path_var);
  bk_free(ex->path_found);
  bk_free(ex);
}

/* Copies and queues the job. Returns BK_EINVAL for a job without folder or
 * program, BK_ESTOPPED once a stop was requested (so a callback that
 * resubmits cannot keep a stopping run alive), BK_ENOMEM. Inside
 * bk_exec_wait the job may start at once; its callback still runs later. */
int bk_exec_submit(bk_exec_t *ex, const bk_job_t *job, bk_exec_cb cb,
                   void *data) {
  if (!ex || !job || !cb || !job->dir || !job->argv || !job->argv[0])
    return BK_EINVAL;
  if (bk_stop_requested())
    return BK_ESTOPPED;
  if (ex->stopping || atomic_load(&ex->cancelled))
    return BK_ECANCELED;

  job_t *j = job_alloc(job);
  if (!j)
    return BK_ENOMEM;
  j->ex = ex;
  j->cb = cb;
  j->data = data;
  j->timeout = job->timeout;
  j->grace = job->grace;

  list_push(&ex->queued, j);
  if (ex->in_wait)
    fill_slots(ex);
  return 0;
}

int bk_exec_wait(bk_exec_t *ex) {
  if (!ex || ex->in_wait)
    return BK_EINVAL;
  ex->in_wait = 1;
  ex->stopping = 0;

  uv_idle_init(&ex->loop, &ex->idle);
  ex->idle.data = ex;
  /* Processes are reaped on SIGCHLD; the watcher keeps the loop alive only
   * while some run (running_add, running_remove). */
  uv_signal_init(&ex->loop, &ex->chld);
  ex->chld.data = ex;
  uv_signal_start(&ex->chld, on_chld, SIGCHLD);
  uv_unref((uv_handle_t *)&ex->chld);
  uv_timer_init(&ex->loop, &ex->poll);
  ex->poll.data = ex;
  uv_timer_start(&ex->poll, on_poll, POLL_MS, POLL_MS);
  /* The poll timer alone must not keep the loop alive. */
  uv_unref((uv_handle_t *)&ex->poll);

  if (must_stop(ex))
    begin_stop(ex);
  else
    fill_slots(ex);

  /* The loop lives while a process, timer, deferred callback or closing
   * handle does; queued jobs always have a running one ahead of them. */
  uv_run(&ex->loop, UV_RUN_DEFAULT);
  assert(!ex->queued.head && !ex->running.head && !ex->deferred.head);

  uv_close((uv_handle_t *)&ex->chld, NULL);
  uv_close((uv_handle_t *)&ex->poll, NULL);
  uv_close((uv_handle_t *)&ex->idle, NULL);
  uv_run(&ex->loop, UV_RUN_DEFAULT);

  int rc = bk_stop_requested()                ? BK_ESTOPPED
           : atomic_load(&ex->cancelled) != 0 ? BK_ECANCELED
           : ex->stopping                     ? BK_ESTOPPED
                                              : 0;
  atomic_store(&ex->cancelled, 0);
  ex->in_wait = 0;
  ex->stopping = 0;
  return rc;
}

int bk_exec_running(const bk_exec_t *ex) {
  return ex ? ex->nrunning : 0;
}
