/*
 * The local executor: runs model processes on this machine with libuv, at
 * most `slots` at a time (see exec.h for the contract).
 *
 * Every model runs in its own session and process group (setsid through
 * UV_PROCESS_DETACHED), so a signal sent to the group reaches the whole tree
 * a wrapper script may spawn. After the group leader exits, however it
 * exits, the group gets SIGKILL, so no child it left behind outlives the
 * run. Timeouts send SIGTERM to the group and SIGKILL after the grace; a
 * stop request (stop.h) does the same to every running group and drops the
 * queue. Every accepted job's callback runs exactly once, always from inside
 * the event loop: never from bk_exec_submit itself, which would surprise a
 * caller holding locks or iterating a list.
 *
 * SPDX-License-Identifier: MIT
 */
#include "exec.h"

#include "alloc.h"
#include "error.h"
#include "fault.h"
#include "stop.h"

#include <assert.h>
#include <errno.h>
#include <fcntl.h>
#include <signal.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

#include <uv.h>

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
 * and its libuv handles are closed (cb_done && nopen == 0), and is in at most
 * one of the executor's lists at a time: queued, running or deferred. */
typedef struct job {
  /* Copies of the submitted bk_job_t, owned by the job. */
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
  uv_process_t proc;
  uv_timer_t timer;
  pid_t pid;       /* also the process group id */
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
  uv_timer_t poll;   /* watches the stop flag during bk_exec_wait */
  uv_idle_t idle;    /* active while deferred callbacks are pending */
  job_list_t queued; /* submitted, not started */
  job_list_t running;
  job_list_t deferred; /* finished without a process; callback pending */
  int nrunning;
  int in_wait;  /* inside bk_exec_wait: handles exist, jobs may start */
  int stopping; /* a stop was seen in this bk_exec_wait */
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

static void free_strv(char **v) {
  if (!v)
    return;
  for (char **p = v; *p; p++)
    bk_free(*p);
  bk_free(v);
}

/* A deep copy of a NULL-ended string vector, or NULL when out of memory. */
static char **copy_strv(char *const *v) {
  size_t n = 0;
  while (v[n])
    n++;
  char **c = bk_calloc(n + 1, sizeof *c);
  if (!c)
    return NULL;
  for (size_t i = 0; i < n; i++)
    if (!(c[i] = bk_strdup(v[i]))) {
      free_strv(c);
      return NULL;
    }
  return c;
}

static void job_free(job_t *j) {
  bk_free(j->key);
  bk_free(j->dir);
  free_strv(j->argv);
  free_strv(j->env);
  bk_free(j->stdout_name);
  bk_free(j->stderr_name);
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

static void job_terminate(job_t *j) {
  if (j->phase != TIMER_TIMEOUT)
    return;
  kill(-j->pid, SIGTERM);
  j->phase = TIMER_GRACE;
  uv_timer_stop(&j->timer);
  uv_timer_start(&j->timer, on_job_timer, to_ms(grace_of(j)), 0);
}

static void on_job_timer(uv_timer_t *t) {
  job_t *j = t->data;
  if (j->phase == TIMER_TIMEOUT) {
    j->timed_out = 1;
    job_terminate(j);
  } else if (j->phase == TIMER_GRACE) {
    kill(-j->pid, SIGKILL);
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

static void on_job_exit(uv_process_t *proc, int64_t status, int sig) {
  job_t *j = proc->data;
  bk_exec_t *ex = j->ex;

  /* The leader is gone but its process group may not be: kill whatever it
   * left behind. The group id cannot be reused while a member lives. */
  kill(-j->pid, SIGKILL);
  bk_stop_unregister_pgid(j->pid);

  j->res.seconds = (double)(uv_hrtime() - j->t0) / 1e9;
  classify(j, status, sig);

  uv_timer_stop(&j->timer);
  j->phase = TIMER_IDLE;
  uv_close((uv_handle_t *)&j->proc, on_handle_closed);
  uv_close((uv_handle_t *)&j->timer, on_handle_closed);
  list_remove(&ex->running, j);
  ex->nrunning--;

  /* Start the next job before the callback, so a slow callback does not
   * leave a slot idle. */
  fill_slots(ex);
  job_finish(j);
}

/* Opens dir/name for the child's stdout or stderr. Returns the descriptor or
 * a negative libuv code. */
static int open_output(const char *dir, const char *name) {
  char path[4096];
  if (!name)
    return open("/dev/null", O_WRONLY | O_CLOEXEC);
  int n = snprintf(path, sizeof path, "%s/%s", dir, name);
  if (n < 0 || (size_t)n >= sizeof path)
    return UV_ENAMETOOLONG;
  int fd =
      open(path, O_CREAT | O_TRUNC | O_WRONLY | O_CLOEXEC | O_NOFOLLOW, 0644);
  return fd < 0 ? -errno : fd;
}

static void spawn_failed(job_t *j, int err) {
  const char *prog = j->argv[0];
  const char *hint =
      strchr(prog, '/') ? "is the path right?" : "is it installed and on PATH?";
  if (err == UV_ENOENT)
    snprintf(j->res.why, sizeof j->res.why,
             "%s: no such file or directory (%s)", prog, hint);
  else if (err == UV_EACCES)
    snprintf(j->res.why, sizeof j->res.why,
             "%s: permission denied (is it executable?)", prog);
  else
    snprintf(j->res.why, sizeof j->res.why, "%s: %s", prog, uv_strerror(err));
}

/* Starts one job, or defers it with BK_FAULT_SPAWN when its process cannot
 * start. */
static void job_start(bk_exec_t *ex, job_t *j) {
  int fd_out = -1;
  int fd_err = -1;

  fd_out = open_output(j->dir, j->stdout_name);
  if (fd_out < 0) {
    snprintf(j->res.why, sizeof j->res.why, "cannot open %s/%s: %s", j->dir,
             j->stdout_name, uv_strerror(fd_out));
    goto fail;
  }
  fd_err = open_output(j->dir, j->stderr_name);
  if (fd_err < 0) {
    snprintf(j->res.why, sizeof j->res.why, "cannot open %s/%s: %s", j->dir,
             j->stderr_name, uv_strerror(fd_err));
    goto fail;
  }

  uv_stdio_container_t stdio[3];
  stdio[0].flags = UV_IGNORE; /* libuv connects it to /dev/null */
  stdio[1].flags = UV_INHERIT_FD;
  stdio[1].data.fd = fd_out;
  stdio[2].flags = UV_INHERIT_FD;
  stdio[2].data.fd = fd_err;

  uv_process_options_t opt;
  memset(&opt, 0, sizeof opt);
  opt.exit_cb = on_job_exit;
  opt.file = j->argv[0];
  opt.args = j->argv;
  opt.env = j->env;
  opt.cwd = j->dir;
  opt.flags = UV_PROCESS_DETACHED; /* setsid: own session and group */
  opt.stdio_count = 3;
  opt.stdio = stdio;

  j->proc.data = j;
  j->t0 = uv_hrtime();
  int rc = uv_spawn(&ex->loop, &j->proc, &opt);
  close(fd_out);
  close(fd_err);
  fd_out = fd_err = -1;
  /* The handle is initialised even when the spawn fails, and must be
   * closed either way. */
  j->nopen++;
  if (rc < 0) {
    uv_close((uv_handle_t *)&j->proc, on_handle_closed);
    spawn_failed(j, rc);
    goto fail;
  }

  j->pid = j->proc.pid;
  bk_stop_register_pgid(j->pid);
  uv_timer_init(&ex->loop, &j->timer);
  j->timer.data = j;
  j->nopen++;
  j->phase = TIMER_TIMEOUT;
  if (j->timeout > 0)
    uv_timer_start(&j->timer, on_job_timer, to_ms(j->timeout), 0);
  list_push(&ex->running, j);
  ex->nrunning++;
  return;

fail:
  if (fd_out >= 0)
    close(fd_out);
  if (fd_err >= 0)
    close(fd_err);
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

static void on_poll(uv_timer_t *t) {
  bk_exec_t *ex = t->data;
  if (!ex->stopping && bk_stop_requested())
    begin_stop(ex);
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
  int rc = uv_loop_init(&ex->loop);
  if (rc < 0) {
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
  if (bk_stop_requested() || ex->stopping)
    return BK_ESTOPPED;

  job_t *j = bk_calloc(1, sizeof *j);
  if (!j)
    return BK_ENOMEM;
  j->ex = ex;
  j->cb = cb;
  j->data = data;
  j->timeout = job->timeout;
  j->grace = job->grace;
  if (!(j->dir = bk_strdup(job->dir)) || !(j->argv = copy_strv(job->argv)))
    goto nomem;
  if (job->key && !(j->key = bk_strdup(job->key)))
    goto nomem;
  if (job->env && !(j->env = copy_strv(job->env)))
    goto nomem;
  if (job->stdout_name && !(j->stdout_name = bk_strdup(job->stdout_name)))
    goto nomem;
  if (job->stderr_name && !(j->stderr_name = bk_strdup(job->stderr_name)))
    goto nomem;

  list_push(&ex->queued, j);
  if (ex->in_wait)
    fill_slots(ex);
  return 0;

nomem:
  job_free(j);
  return BK_ENOMEM;
}

int bk_exec_wait(bk_exec_t *ex) {
  if (!ex || ex->in_wait)
    return BK_EINVAL;
  ex->in_wait = 1;
  ex->stopping = 0;

  uv_idle_init(&ex->loop, &ex->idle);
  ex->idle.data = ex;
  uv_timer_init(&ex->loop, &ex->poll);
  ex->poll.data = ex;
  uv_timer_start(&ex->poll, on_poll, POLL_MS, POLL_MS);
  /* The poll timer alone must not keep the loop alive. */
  uv_unref((uv_handle_t *)&ex->poll);

  if (bk_stop_requested())
    begin_stop(ex);
  else
    fill_slots(ex);

  /* The loop lives while a process, timer, deferred callback or closing
   * handle does; queued jobs always have a running one ahead of them. */
  uv_run(&ex->loop, UV_RUN_DEFAULT);
  assert(!ex->queued.head && !ex->running.head && !ex->deferred.head);

  uv_close((uv_handle_t *)&ex->poll, NULL);
  uv_close((uv_handle_t *)&ex->idle, NULL);
  uv_run(&ex->loop, UV_RUN_DEFAULT);

  int stopped = ex->stopping || bk_stop_requested();
  ex->in_wait = 0;
  ex->stopping = 0;
  return stopped ? BK_ESTOPPED : 0;
}

int bk_exec_running(const bk_exec_t *ex) {
  return ex ? ex->nrunning : 0;
}
