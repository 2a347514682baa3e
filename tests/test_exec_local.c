/*
 * Tests of the local executor (exec_local.c) with the test model program
 * (tests/helpers/model.c, path in BRINK_TEST_MODEL): fault classification,
 * captured output, process-group cleanup, slot limits, callbacks running
 * exactly once, and stop requests. Concurrency is judged from timestamps
 * the model writes, never from how long anything took.
 *
 * SPDX-License-Identifier: MIT
 */
#include "base/error.h"
#include "eval/exec.h"
#include "base/fault.h"
#include "base/stop.h"

#include <criterion/criterion.h>

#include <errno.h>
#include <ftw.h>
#include <math.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/prctl.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

extern char **environ;

static char tmp[256];

static int remove_entry(const char *path, const struct stat *st, int flag,
                        struct FTW *ftw) {
  (void)st;
  (void)flag;
  (void)ftw;
  return remove(path);
}

static void setup(void) {
  bk__stop_set(0);
  const char *base = getenv("TMPDIR");
  snprintf(tmp, sizeof tmp, "%s/bk-exec-XXXXXX", base ? base : "/tmp");
  cr_assert_not_null(mkdtemp(tmp), "mkdtemp: %s", strerror(errno));
}

static void teardown(void) {
  nftw(tmp, remove_entry, 16, FTW_DEPTH | FTW_PHYS);
}

TestSuite(exec_local, .init = setup, .fini = teardown, .timeout = 60);

static char *model(void) {
  char *m = getenv("BRINK_TEST_MODEL");
  cr_assert_not_null(m, "BRINK_TEST_MODEL is not set (run through meson)");
  return m;
}

/* Makes tmp/name and returns its path (static storage, one per slot). */
static const char *subdir(const char *name) {
  static char paths[16][512];
  static int next;
  char *p = paths[next++ % 16];
  snprintf(p, 512, "%s/%s", tmp, name);
  cr_assert_eq(mkdir(p, 0755), 0, "mkdir %s: %s", p, strerror(errno));
  return p;
}

/* The contents of dir/name, NUL-terminated, or NULL when absent. */
static char *slurp(const char *dir, const char *name, size_t *len) {
  char path[1024];
  snprintf(path, sizeof path, "%s/%s", dir, name);
  FILE *f = fopen(path, "rb");
  if (!f)
    return NULL;
  size_t cap = 4096, n = 0;
  char *buf = malloc(cap);
  size_t got;
  while ((got = fread(buf + n, 1, cap - n - 1, f)) > 0) {
    n += got;
    if (cap - n - 1 == 0)
      buf = realloc(buf, cap *= 2);
  }
  fclose(f);
  buf[n] = '\0';
  if (len)
    *len = n;
  return buf;
}

static pid_t read_pid(const char *dir, const char *name) {
  char *text = slurp(dir, name, NULL);
  if (!text)
    return 0;
  pid_t pid = (pid_t)atol(text);
  free(text);
  return pid;
}

static int process_gone(pid_t pid) {
  return kill(pid, 0) == -1 && errno == ESRCH;
}

/* Callback bookkeeping. */
typedef struct {
  int calls;
  int max_running; /* bk_exec_running seen from the callback */
  bk_job_result_t res;
  bk_exec_t *ex;
} probe_t;

static void record(void *data, const bk_job_result_t *res) {
  probe_t *p = data;
  p->calls++;
  p->res = *res;
  if (p->ex && bk_exec_running(p->ex) > p->max_running)
    p->max_running = bk_exec_running(p->ex);
}

static bk_job_t job_in(const char *dir, char *const *argv) {
  bk_job_t j = {
      .key = "k",
      .dir = dir,
      .argv = argv,
      .env = environ,
      .timeout = 0,
      .grace = 0,
      .stdout_name = "stdout",
      .stderr_name = "stderr",
  };
  return j;
}

/* Runs one job on a one-slot executor and returns its result. */
static bk_job_result_t run_one(const bk_job_t *job) {
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 1), 0);
  probe_t p = {0};
  cr_assert_eq(bk_exec_submit(ex, job, record, &p), 0);
  cr_assert_eq(bk_exec_wait(ex), 0);
  cr_assert_eq(p.calls, 1, "callback ran %d times", p.calls);
  cr_assert_eq(bk_exec_running(ex), 0);
  bk_exec_free(ex);
  return p.res;
}

Test(exec_local, ok_run_has_no_fault_and_stdout_in_file) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "x=1.5", "y=2", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_NONE, "fault %d: %s", r.fault, r.why);
  cr_assert_eq(r.exit_status, 0);
  cr_assert_eq(r.term_signal, 0);
  cr_assert_str_empty(r.why);
  cr_assert_geq(r.seconds, 0.0);
  char *out = slurp(dir, "stdout", NULL);
  cr_assert_not_null(out);
  /* g = 2 - (1.5 + 2) / sqrt(2), printed with %.17g by the model. */
  char want[64];
  snprintf(want, sizeof want, "result: g = %.17g\n", 2 - 3.5 / sqrt(2.0));
  cr_assert_not_null(strstr(out, want), "stdout was:\n%s", out);
  cr_assert_not_null(strstr(out, "echo: x = 1.5\n"));
  char *file = slurp(dir, "out.txt", NULL);
  cr_assert_str_eq(file, out, "out.txt and stdout differ");
  char *err = slurp(dir, "stderr", NULL);
  cr_assert_str_eq(err, "bk-test-model: mode ok, 2 variables\n");
  free(out);
  free(file);
  free(err);
}

Test(exec_local, stdout_file_is_truncated_before_the_run) {
  const char *dir = subdir("run");
  char path[600];
  snprintf(path, sizeof path, "%s/stdout", dir);
  FILE *f = fopen(path, "w");
  for (int i = 0; i < 1000; i++)
    fputs("stale text from an earlier run\n", f);
  fclose(f);
  char *argv[] = {model(), "mode=exit 3", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_EXIT_CODE);
  size_t n;
  char *out = slurp(dir, "stdout", &n);
  cr_assert_eq(n, 0, "stdout kept %zu bytes", n);
  free(out);
}

Test(exec_local, missing_program_is_spawn_failure) {
  const char *dir = subdir("run");
  char *argv[] = {"bk-no-such-program-here", "x=1", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_SPAWN);
  cr_assert_str_eq(r.why, "bk-no-such-program-here: no such file or "
                          "directory (is it installed and on PATH?)");
}

Test(exec_local, missing_program_path_is_spawn_failure) {
  const char *dir = subdir("run");
  char prog[600];
  snprintf(prog, sizeof prog, "%s/absent", dir);
  char *argv[] = {prog, NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_SPAWN);
  char want[700];
  snprintf(want, sizeof want,
           "%s: no such file or directory (is the path right?)", prog);
  cr_assert_str_eq(r.why, want);
}

Test(exec_local, non_executable_file_is_spawn_failure) {
  const char *dir = subdir("run");
  char prog[600];
  snprintf(prog, sizeof prog, "%s/script.sh", dir);
  FILE *f = fopen(prog, "w");
  fputs("#!/bin/sh\necho hello\n", f);
  fclose(f);
  cr_assert_eq(chmod(prog, 0644), 0);
  char *argv[] = {prog, NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_SPAWN);
  char want[700];
  snprintf(want, sizeof want, "%s: permission denied (is it executable?)",
           prog);
  cr_assert_str_eq(r.why, want);
}

Test(exec_local, stdout_symlink_is_not_followed) {
  const char *dir = subdir("run");
  char target[600], link[600];
  snprintf(target, sizeof target, "%s/target", dir);
  snprintf(link, sizeof link, "%s/stdout", dir);
  cr_assert_eq(symlink(target, link), 0);
  char *argv[] = {model(), NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_SPAWN);
  cr_assert_not_null(strstr(r.why, "cannot open"), "why: %s", r.why);
  struct stat st;
  cr_assert_neq(stat(target, &st), 0, "the symlink target was created");
  cr_assert_eq(read_pid(dir, "model.pid"), 0, "the model ran");
}

Test(exec_local, nonzero_exit_is_exit_code_fault) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=exit 201", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_EXIT_CODE);
  cr_assert_eq(r.exit_status, 201);
  cr_assert_str_eq(r.why, "exit status 201");
}

Test(exec_local, crash_is_signal_fault) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=crash", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_SIGNAL);
  cr_assert_eq(r.term_signal, SIGSEGV);
  cr_assert_str_eq(r.why, "killed by SIGSEGV");
}

Test(exec_local, abort_is_signal_fault) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=abort", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_SIGNAL);
  cr_assert_eq(r.term_signal, SIGABRT);
  cr_assert_str_eq(r.why, "killed by SIGABRT");
}

Test(exec_local, environment_is_passed_as_given) {
  const char *dir = subdir("run");
  char *argv[] = {model(), NULL};
  char *env[] = {"BK_MODEL_MODE=exit 7", NULL};
  bk_job_t job = job_in(dir, argv);
  job.env = env;
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_EXIT_CODE, "why: %s", r.why);
  cr_assert_eq(r.exit_status, 7);
}

Test(exec_local, program_is_found_on_path_of_job_environment) {
  const char *dir = subdir("run");
  char bindir[600], prog[700];
  snprintf(bindir, sizeof bindir, "%s/bin", tmp);
  cr_assert_eq(mkdir(bindir, 0755), 0);
  snprintf(prog, sizeof prog, "%s/bk-model-alias", bindir);
  cr_assert_eq(symlink(model(), prog), 0);
  char path_var[700];
  snprintf(path_var, sizeof path_var, "PATH=%s", bindir);
  char *argv[] = {"bk-model-alias", "mode=exit 5", NULL};
  char *env[] = {path_var, NULL};
  bk_job_t job = job_in(dir, argv);
  job.env = env;
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_EXIT_CODE, "why: %s", r.why);
  cr_assert_eq(r.exit_status, 5);
}

Test(exec_local, timeout_terminates_hanging_model) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=hang", NULL};
  bk_job_t job = job_in(dir, argv);
  job.timeout = 0.3;
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_TIMEOUT);
  cr_assert_str_eq(r.why, "timeout after 0.3 s");
  cr_assert_eq(r.term_signal, SIGTERM);
  pid_t pid = read_pid(dir, "model.pid");
  cr_assert(pid > 0 && process_gone(pid));
}

Test(exec_local, timeout_escalates_to_sigkill_when_sigterm_is_ignored) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=hang-ignore-term", NULL};
  bk_job_t job = job_in(dir, argv);
  /* Long enough for the model to ignore SIGTERM before it comes. */
  job.timeout = 1;
  job.grace = 0.3;
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_TIMEOUT);
  cr_assert_str_eq(r.why, "timeout after 1 s");
  cr_assert_eq(r.term_signal, SIGKILL);
  char *err = slurp(dir, "stderr", NULL);
  cr_assert_str_eq(err, "bk-test-model: hanging, ignoring SIGTERM\n");
  free(err);
}

Test(exec_local, orphan_left_by_model_is_killed) {
  /* Orphans are reparented to this process, so it can reap and inspect
   * them. */
  cr_assert_eq(prctl(PR_SET_CHILD_SUBREAPER, 1), 0);
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=orphan", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_NONE, "why: %s", r.why);
  pid_t orphan = read_pid(dir, "orphan.pid");
  cr_assert(orphan > 0, "the model wrote no orphan.pid");

  /* SIGKILL was sent before bk_exec_wait returned; give the kernel time to
   * deliver it (the orphan would otherwise sleep 300 s). */
  int status = 0;
  pid_t got = 0;
  for (int i = 0; i < 1000 && got == 0; i++) {
    got = waitpid(orphan, &status, WNOHANG);
    if (got == 0)
      usleep(10000);
  }
  if (got != orphan) {
    kill(orphan, SIGKILL);
    waitpid(orphan, NULL, 0);
    cr_assert_fail("the orphan %d was still alive", (int)orphan);
  }
  cr_assert(WIFSIGNALED(status) && WTERMSIG(status) == SIGKILL);
  cr_assert(process_gone(orphan));
}

Test(exec_local, slots_bound_the_number_of_concurrent_models) {
  enum { NJOBS = 6 };
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  const char *dirs[NJOBS];
  probe_t p[NJOBS] = {{0}};
  char *argv[] = {model(), "mode=slow 0.4", NULL};
  for (int i = 0; i < NJOBS; i++) {
    char name[16];
    snprintf(name, sizeof name, "run%d", i);
    dirs[i] = subdir(name);
    bk_job_t job = job_in(dirs[i], argv);
    p[i].ex = ex;
    cr_assert_eq(bk_exec_submit(ex, &job, record, &p[i]), 0);
  }
  cr_assert_eq(bk_exec_running(ex), 0, "a job started before the wait");
  cr_assert_eq(bk_exec_wait(ex), 0);
  cr_assert_eq(bk_exec_running(ex), 0);

  double start[NJOBS], end[NJOBS];
  for (int i = 0; i < NJOBS; i++) {
    cr_assert_eq(p[i].calls, 1);
    cr_assert_eq(p[i].res.fault, BK_FAULT_NONE, "why: %s", p[i].res.why);
    cr_assert_leq(p[i].max_running, 2);
    char *t = slurp(dirs[i], "times.txt", NULL);
    cr_assert_not_null(t);
    cr_assert_eq(sscanf(t, "%lf %lf", &start[i], &end[i]), 2);
    free(t);
  }
  /* The most models alive at once: at some model's start, count the
   * models that had started and not yet ended. */
  int most = 0;
  for (int i = 0; i < NJOBS; i++) {
    int alive = 0;
    for (int k = 0; k < NJOBS; k++)
      if (start[k] <= start[i] && start[i] < end[k])
        alive++;
    if (alive > most)
      most = alive;
  }
  cr_assert_leq(most, 2, "%d models ran at once with 2 slots", most);
  /* Both slots were used: the two earliest models overlapped. */
  cr_assert_eq(most, 2, "the second slot stayed idle");
  bk_exec_free(ex);
}

/* A chain: each callback submits the next job until `left` runs out,
 * alternating models that run with programs that cannot start. */
typedef struct {
  bk_exec_t *ex;
  const char *dir;
  int left;
  int calls[16];
  int faults[16];
  int seen_in_submit; /* a callback ran inside bk_exec_submit */
  int in_submit;
} chain_t;

typedef struct {
  chain_t *chain;
  int index;
} link_t;

static link_t links[16];

static void chain_cb(void *data, const bk_job_result_t *res);

static void chain_submit(chain_t *c, int index) {
  char *ok_argv[] = {model(), "x=1", NULL};
  char *bad_argv[] = {"bk-no-such-program-here", NULL};
  bk_job_t job = job_in(c->dir, index % 2 ? bad_argv : ok_argv);
  links[index].chain = c;
  links[index].index = index;
  c->in_submit = 1;
  cr_assert_eq(bk_exec_submit(c->ex, &job, chain_cb, &links[index]), 0);
  c->in_submit = 0;
}

static void chain_cb(void *data, const bk_job_result_t *res) {
  link_t *l = data;
  chain_t *c = l->chain;
  if (c->in_submit)
    c->seen_in_submit = 1;
  c->calls[l->index]++;
  c->faults[l->index] = res->fault;
  if (c->left > 0) {
    int next = 16 - c->left;
    c->left--;
    chain_submit(c, next);
  }
}

Test(exec_local, callbacks_run_once_when_jobs_are_submitted_from_callbacks) {
  chain_t c = {0};
  cr_assert_eq(bk_exec_local_new(&c.ex, 2), 0);
  c.dir = subdir("run");
  c.left = 14; /* jobs 2..15 come from callbacks */
  chain_submit(&c, 0);
  chain_submit(&c, 1);
  cr_assert_eq(c.calls[0] + c.calls[1], 0, "a callback ran before the wait");
  cr_assert_eq(bk_exec_wait(c.ex), 0);
  cr_assert_eq(c.seen_in_submit, 0, "a callback ran inside submit");
  for (int i = 0; i < 16; i++) {
    cr_assert_eq(c.calls[i], 1, "job %d: callback ran %d times", i, c.calls[i]);
    cr_assert_eq(c.faults[i], i % 2 ? BK_FAULT_SPAWN : BK_FAULT_NONE,
                 "job %d: fault %d", i, c.faults[i]);
  }
  bk_exec_free(c.ex);
}

Test(exec_local, executor_is_reusable_across_batches) {
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  const char *dir = subdir("run");
  char *argv[] = {model(), "x=2", NULL};
  char *bad[] = {model(), "mode=exit 4", NULL};
  for (int batch = 0; batch < 3; batch++) {
    probe_t p[3] = {{0}};
    for (int i = 0; i < 3; i++) {
      bk_job_t job = job_in(dir, i == 1 ? bad : argv);
      cr_assert_eq(bk_exec_submit(ex, &job, record, &p[i]), 0);
    }
    cr_assert_eq(bk_exec_wait(ex), 0);
    for (int i = 0; i < 3; i++) {
      cr_assert_eq(p[i].calls, 1, "batch %d job %d", batch, i);
      cr_assert_eq(p[i].res.fault, i == 1 ? BK_FAULT_EXIT_CODE : BK_FAULT_NONE);
    }
  }
  /* An empty batch returns at once. */
  cr_assert_eq(bk_exec_wait(ex), 0);
  bk_exec_free(ex);
}

Test(exec_local, submit_copies_the_job) {
  const char *dir = subdir("run");
  char dirbuf[600], arg[32], out_name[32], envvar[64];
  snprintf(dirbuf, sizeof dirbuf, "%s", dir);
  snprintf(arg, sizeof arg, "mode=exit 9");
  snprintf(out_name, sizeof out_name, "captured");
  snprintf(envvar, sizeof envvar, "BK_UNUSED=1");
  char *argv[] = {model(), arg, NULL};
  char *env[] = {envvar, NULL};
  bk_job_t job = job_in(dirbuf, argv);
  job.env = env;
  job.stdout_name = out_name;
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 1), 0);
  probe_t p = {0};
  cr_assert_eq(bk_exec_submit(ex, &job, record, &p), 0);
  /* Spoil everything the job pointed to. */
  memset(dirbuf, 'z', 20);
  snprintf(arg, sizeof arg, "mode=crash");
  snprintf(out_name, sizeof out_name, "elsewhere");
  snprintf(envvar, sizeof envvar, "BK_MODEL_MODE=abort");
  argv[1] = "mode=abort";
  cr_assert_eq(bk_exec_wait(ex), 0);
  cr_assert_eq(p.res.fault, BK_FAULT_EXIT_CODE, "why: %s", p.res.why);
  cr_assert_eq(p.res.exit_status, 9);
  char *err = slurp(dir, "stderr", NULL);
  cr_assert_str_eq(err, "bk-test-model: exiting with status 9\n");
  free(err);
  struct stat st;
  cr_assert_eq(stat(dir, &st), 0);
  char captured[700];
  snprintf(captured, sizeof captured, "%s/captured", dir);
  cr_assert_eq(stat(captured, &st), 0);
  bk_exec_free(ex);
}

Test(exec_local, big_output_is_captured_whole) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=bigout 3", "x=1", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_NONE, "why: %s", r.why);
  size_t n;
  char *out = slurp(dir, "stdout", &n);
  cr_assert_geq(n, (size_t)3 << 20);
  char want[64];
  snprintf(want, sizeof want, "result: g = %.17g\n", 2.0 - 1.0);
  size_t wl = strlen(want);
  cr_assert(n > wl && strcmp(out + n - wl, want) == 0,
            "stdout does not end with the result");
  free(out);
}

Test(exec_local, flaky_model_fails_first_and_succeeds_on_retry) {
  const char *dir = subdir("run");
  char *argv[] = {model(), "mode=flaky", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r1 = run_one(&job);
  cr_assert_eq(r1.fault, BK_FAULT_EXIT_CODE);
  cr_assert_eq(r1.exit_status, 1);
  bk_job_result_t r2 = run_one(&job);
  cr_assert_eq(r2.fault, BK_FAULT_NONE, "why: %s", r2.why);
}

Test(exec_local, partial_and_garbage_outputs_exit_zero) {
  const char *dir = subdir("run");
  char *partial[] = {model(), "mode=partial", "x=1", NULL};
  bk_job_t job = job_in(dir, partial);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_NONE);
  char *out = slurp(dir, "out.txt", NULL);
  cr_assert_null(strstr(out, "result: g ="), "partial output has g:\n%s", out);
  free(out);
  char *garbage[] = {model(), "mode=garbage", "x=1", NULL};
  job = job_in(dir, garbage);
  r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_NONE);
  out = slurp(dir, "out.txt", NULL);
  cr_assert_not_null(strstr(out, "result: g = NaN\n"));
  free(out);
}

/* Stop tests: the first job's callback requests the stop, as the first
 * Ctrl-C would. */
typedef struct {
  probe_t probe;
  int stop_here;
} stopper_t;

static void stop_cb(void *data, const bk_job_result_t *res) {
  stopper_t *s = data;
  record(&s->probe, res);
  if (s->stop_here)
    bk__stop_set(SIGINT);
}

static void check_stopped_run(const char *mode, double grace) {
  enum { NJOBS = 5 };
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  stopper_t s[NJOBS];
  memset(s, 0, sizeof s);
  const char *dirs[NJOBS];
  char *quick[] = {model(), "mode=slow 0.2", NULL};
  char *hang[] = {model(), (char *)mode, NULL};
  for (int i = 0; i < NJOBS; i++) {
    char name[16];
    snprintf(name, sizeof name, "run%d", i);
    dirs[i] = subdir(name);
    bk_job_t job = job_in(dirs[i], i == 0 ? quick : hang);
    job.grace = grace;
    s[i].stop_here = i == 0;
    cr_assert_eq(bk_exec_submit(ex, &job, stop_cb, &s[i]), 0);
  }
  cr_assert_eq(bk_exec_wait(ex), BK_ESTOPPED);
  cr_assert_eq(bk_exec_running(ex), 0);
  cr_assert_eq(s[0].probe.res.fault, BK_FAULT_NONE, "why: %s",
               s[0].probe.res.why);
  for (int i = 0; i < NJOBS; i++) {
    cr_assert_eq(s[i].probe.calls, 1, "job %d: %d callbacks", i,
                 s[i].probe.calls);
    if (i > 0)
      cr_assert_eq(s[i].probe.res.fault, BK_FAULT_INTERRUPTED,
                   "job %d: fault %d (%s)", i, s[i].probe.res.fault,
                   s[i].probe.res.why);
    pid_t pid = read_pid(dirs[i], "model.pid");
    if (pid > 0)
      cr_assert(process_gone(pid), "job %d: process %ld survived", i,
                (long)pid);
  }
  /* Job 1 ran from the start, and the jobs after job 2 never started. */
  cr_assert_gt(read_pid(dirs[1], "model.pid"), 0);
  for (int i = 3; i < NJOBS; i++)
    cr_assert_eq(read_pid(dirs[i], "model.pid"), 0, "job %d started", i);

  /* Once stopped, new jobs are refused (their callbacks never run). */
  probe_t late = {0};
  bk_job_t job = job_in(dirs[0], quick);
  cr_assert_eq(bk_exec_submit(ex, &job, record, &late), BK_ESTOPPED);
  bk__stop_set(0);
  bk_exec_free(ex);
  cr_assert_eq(late.calls, 0);
}

Test(exec_local, stop_interrupts_running_and_queued_jobs) {
  check_stopped_run("mode=hang", 0);
}

Test(exec_local, stop_kills_models_that_ignore_sigterm) {
  check_stopped_run("mode=hang-ignore-term", 0.3);
}

Test(exec_local, stop_before_wait_starts_nothing) {
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  const char *dir = subdir("run");
  char *argv[] = {model(), NULL};
  probe_t p[3] = {{0}};
  for (int i = 0; i < 3; i++) {
    bk_job_t job = job_in(dir, argv);
    cr_assert_eq(bk_exec_submit(ex, &job, record, &p[i]), 0);
  }
  bk__stop_set(SIGTERM);
  cr_assert_eq(bk_exec_wait(ex), BK_ESTOPPED);
  for (int i = 0; i < 3; i++) {
    cr_assert_eq(p[i].calls, 1);
    cr_assert_eq(p[i].res.fault, BK_FAULT_INTERRUPTED);
  }
  cr_assert_eq(read_pid(dir, "model.pid"), 0, "a model started");
  bk__stop_set(0);
  /* After the flag is cleared, the executor works again. */
  probe_t again = {0};
  bk_job_t job = job_in(dir, argv);
  cr_assert_eq(bk_exec_submit(ex, &job, record, &again), 0);
  cr_assert_eq(bk_exec_wait(ex), 0);
  cr_assert_eq(again.calls, 1);
  cr_assert_eq(again.res.fault, BK_FAULT_NONE);
  bk_exec_free(ex);
}

Test(exec_local, bad_arguments_are_refused) {
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 0), BK_EINVAL);
  cr_assert_null(ex);
  cr_assert_eq(bk_exec_local_new(&ex, 1), 0);
  probe_t p = {0};
  char *empty[] = {NULL};
  bk_job_t job = job_in(tmp, empty);
  cr_assert_eq(bk_exec_submit(ex, &job, record, &p), BK_EINVAL);
  job.argv = NULL;
  cr_assert_eq(bk_exec_submit(ex, &job, record, &p), BK_EINVAL);
  cr_assert_eq(bk_exec_wait(ex), 0);
  cr_assert_eq(p.calls, 0);
  bk_exec_free(ex);
  bk_exec_free(NULL);
}

/* A real signal while every model hangs: nothing but the stop poll can
 * wake the executor. A thread waits until both slots' models have written
 * their pids, inspects them, then signals this process. */
typedef struct {
  const char *dirs[2];
  pid_t pids[2];
  int own_group[2]; /* process group id == pid */
  int own_session[2];
  char stdin_of[2][64]; /* where fd 0 points */
} watcher_t;

static void *watch_then_signal(void *arg) {
  watcher_t *w = arg;
  for (int i = 0; i < 2; i++) {
    while ((w->pids[i] = read_pid(w->dirs[i], "model.pid")) == 0)
      usleep(10000);
    w->own_group[i] = getpgid(w->pids[i]) == w->pids[i];
    w->own_session[i] = getsid(w->pids[i]) == w->pids[i];
    char fd0[64];
    snprintf(fd0, sizeof fd0, "/proc/%d/fd/0", (int)w->pids[i]);
    ssize_t n = readlink(fd0, w->stdin_of[i], sizeof w->stdin_of[i] - 1);
    w->stdin_of[i][n > 0 ? n : 0] = '\0';
  }
  kill(getpid(), SIGINT);
  return NULL;
}

Test(exec_local, interrupt_signal_stops_hanging_models) {
  bk_stop_install();
  enum { NJOBS = 4 };
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  const char *dirs[NJOBS];
  probe_t p[NJOBS] = {{0}};
  char *argv[] = {model(), "mode=hang", NULL};
  for (int i = 0; i < NJOBS; i++) {
    char name[16];
    snprintf(name, sizeof name, "run%d", i);
    dirs[i] = subdir(name);
    bk_job_t job = job_in(dirs[i], argv);
    cr_assert_eq(bk_exec_submit(ex, &job, record, &p[i]), 0);
  }
  watcher_t w = {.dirs = {dirs[0], dirs[1]}};
  pthread_t thread;
  cr_assert_eq(pthread_create(&thread, NULL, watch_then_signal, &w), 0);
  cr_assert_eq(bk_exec_wait(ex), BK_ESTOPPED);
  pthread_join(thread, NULL);
  cr_assert_eq(bk_stop_signal(), SIGINT);
  for (int i = 0; i < NJOBS; i++) {
    cr_assert_eq(p[i].calls, 1);
    cr_assert_eq(p[i].res.fault, BK_FAULT_INTERRUPTED, "job %d: %s", i,
                 p[i].res.why);
  }
  for (int i = 0; i < 2; i++) {
    cr_assert(w.own_group[i], "model %d shares a process group", i);
    cr_assert(w.own_session[i], "model %d shares a session", i);
    cr_assert_str_eq(w.stdin_of[i], "/dev/null");
    cr_assert(process_gone(w.pids[i]), "model %d survived", i);
  }
  for (int i = 2; i < NJOBS; i++)
    cr_assert_eq(read_pid(dirs[i], "model.pid"), 0, "job %d started", i);
  bk__stop_set(0);
  bk_exec_free(ex);
}

/* The executor signals a process group only while its leader is not
 * reaped: a reaped leader's id, and so its group id, may be reused by an
 * unrelated process. The kill hook checks, at every group signal, that
 * the leader still exists for waitid (running, or ended and unreaped). */
static int group_signals, group_signals_after_reap;

static int checking_kill(pid_t pid, int sig) {
  if (pid < 0) {
    group_signals++;
    siginfo_t si;
    si.si_pid = 0;
    if (waitid(P_PID, (id_t)-pid, &si, WEXITED | WNOHANG | WNOWAIT) != 0 &&
        errno == ECHILD)
      group_signals_after_reap++;
  }
  return kill(pid, sig);
}

Test(exec_local, no_group_is_signalled_after_its_leader_is_reaped) {
  bk__exec_set_kill(checking_kill);
  group_signals = group_signals_after_reap = 0;
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  /* Leaders that exit, crash, time out, and leave an orphan behind. */
  char *modes[] = {"mode=ok", "mode=exit 3", "mode=crash", "mode=orphan",
                   "mode=hang"};
  probe_t p[5] = {{0}};
  for (int i = 0; i < 5; i++) {
    char name[16];
    snprintf(name, sizeof name, "g%d", i);
    char *argv[] = {model(), modes[i], NULL};
    bk_job_t job = job_in(subdir(name), argv);
    job.timeout = i == 4 ? 0.3 : 0;
    cr_assert_eq(bk_exec_submit(ex, &job, record, &p[i]), 0);
  }
  cr_assert_eq(bk_exec_wait(ex), 0);
  bk_exec_free(ex);
  bk__exec_set_kill(NULL);
  for (int i = 0; i < 5; i++)
    cr_assert_eq(p[i].calls, 1);
  cr_assert_eq(p[4].res.fault, BK_FAULT_TIMEOUT);
  /* One SIGKILL per ended leader at least, plus the timeout's SIGTERM. */
  cr_assert_geq(group_signals, 6);
  cr_assert_eq(group_signals_after_reap, 0,
               "%d of %d group signals went to a group whose leader was "
               "reaped",
               group_signals_after_reap, group_signals);
}

/* A model may leave a hard link named like brink's output files to a file
 * elsewhere; the next run in that folder must not truncate or write it. */
Test(exec_local, hard_linked_stdout_is_replaced_not_written_through) {
  const char *dir = subdir("run");
  char victim[600], out[600];
  snprintf(victim, sizeof victim, "%s/precious.txt", tmp);
  snprintf(out, sizeof out, "%s/stdout", dir);
  FILE *f = fopen(victim, "w");
  fputs("precious\n", f);
  fclose(f);
  cr_assert_eq(link(victim, out), 0, "link: %s", strerror(errno));
  char *argv[] = {model(), "x=1", NULL};
  bk_job_t job = job_in(dir, argv);
  bk_job_result_t r = run_one(&job);
  cr_assert_eq(r.fault, BK_FAULT_NONE);
  char *kept = slurp(tmp, "precious.txt", NULL);
  cr_assert_str_eq(kept, "precious\n");
  char *got = slurp(dir, "stdout", NULL);
  cr_assert_not_null(strstr(got, "result: g = "));
  struct stat st;
  cr_assert_eq(stat(out, &st), 0);
  cr_assert_eq(st.st_nlink, 1);
  free(kept);
  free(got);
}

/* A cancel stops the executor like a stop request, but leaves the user's
 * stop flag alone, and is over when the wait returns. */
Test(exec_local, cancel_stops_the_wait_without_a_stop_request) {
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 2), 0);
  probe_t p[3] = {{0}};
  for (int i = 0; i < 3; i++) {
    char name[16];
    snprintf(name, sizeof name, "c%d", i);
    char *argv[] = {model(), "mode=hang", NULL};
    bk_job_t job = job_in(subdir(name), argv);
    cr_assert_eq(bk_exec_submit(ex, &job, record, &p[i]), 0);
  }
  bk_exec_cancel(ex);
  cr_assert(bk_exec_stopping(ex));
  cr_assert_eq(bk_exec_wait(ex), BK_ECANCELED);
  for (int i = 0; i < 3; i++) {
    cr_assert_eq(p[i].calls, 1);
    cr_assert_eq(p[i].res.fault, BK_FAULT_INTERRUPTED);
  }
  cr_assert_eq(bk_stop_requested(), 0);
  cr_assert_not(bk_exec_stopping(ex));
  /* The next wait runs normally. */
  char *argv[] = {model(), "x=1", NULL};
  bk_job_t job = job_in(subdir("after"), argv);
  probe_t q = {0};
  cr_assert_eq(bk_exec_submit(ex, &job, record, &q), 0);
  cr_assert_eq(bk_exec_wait(ex), 0);
  cr_assert_eq(q.res.fault, BK_FAULT_NONE);
  bk_exec_free(ex);
}

/* The poll callback runs during a wait and may cancel it (an MPI worker
 * receiving STOP). */
static void cancel_at_second_poll(void *data, bk_exec_t *ex) {
  int *polls = data;
  if (++*polls == 2)
    bk_exec_cancel(ex);
}

Test(exec_local, poll_callback_can_cancel_a_running_wait) {
  bk_exec_t *ex;
  cr_assert_eq(bk_exec_local_new(&ex, 1), 0);
  int polls = 0;
  bk_exec_set_poll(ex, cancel_at_second_poll, &polls);
  char *argv[] = {model(), "mode=hang", NULL};
  bk_job_t job = job_in(subdir("p"), argv);
  probe_t p = {0};
  cr_assert_eq(bk_exec_submit(ex, &job, record, &p), 0);
  cr_assert_eq(bk_exec_wait(ex), BK_ECANCELED);
  cr_assert_geq(polls, 2);
  cr_assert_eq(p.res.fault, BK_FAULT_INTERRUPTED);
  bk_exec_free(ex);
}
