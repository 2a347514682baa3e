/*
 * bk-test-model: a small model program for brink's tests. It computes
 * closed-form outputs from its inputs and, on request, misbehaves in each
 * of the ways a real model can, so the executor, the extractor and the
 * fault handling can be tested without a real solver.
 *
 * Usage: bk-test-model [INPUT-FILE | NAME=VALUE]...
 *
 * Inputs are lines "name = value" in the input files (blank lines and
 * lines starting with '#' are skipped) and NAME=VALUE arguments, read in
 * order; a name given twice keeps its last value. Reserved names:
 *   mode     how to behave (below); else env BK_MODEL_MODE; else "ok"
 *   beta     offset of the limit state g (default 2)
 *   outfile  output file in the working folder (default out.txt)
 *   marker   attempt counter file of the flaky mode (default flaky.marker)
 * Every other input whose value is a number is a variable x1..xn.
 *
 * Output, written to stdout and to the output file:
 *   echo: NAME = VALUE     each input, in order (numbers as %.17g)
 *   result: n = N          number of variables
 *   result: sum = S        x1 + ... + xn
 *   result: sumsq = Q      x1^2 + ... + xn^2
 *   result: prod = P       x1 * ... * xn (1 when n = 0)
 *   result: g = G          beta - S / sqrt(n) (beta when n = 0)
 * Numbers are printed with %.17g. For independent standard normal
 * variables, S / sqrt(n) is standard normal, so P(g < 0) = Phi(-beta)
 * exactly: a linear limit state with a known failure probability.
 * A line "bk-test-model: mode M, N variables" goes to stderr.
 *
 * Side files in the working folder:
 *   model.pid   the process id, written at start in every mode
 *   times.txt   "START END", CLOCK_MONOTONIC seconds at start and just
 *               before a normal exit (used to measure concurrency)
 *
 * Modes:
 *   ok                normal run, exit status 0
 *   exit N            no output, exit status N (default 1)
 *   crash             raise SIGSEGV
 *   abort             abort(), that is SIGABRT
 *   hang              sleep forever; SIGTERM kills it
 *   hang-ignore-term  sleep forever ignoring SIGTERM; only SIGKILL helps
 *                     (both hang modes die with their parent process, so
 *                     a test program killed midway leaves none behind)
 *   garbage           normal run, but g prints as "NaN" and sum as "twelve"
 *   partial           write the first half of the output bytes, exit 0
 *   orphan            fork a child in the same process group that writes
 *                     its pid to orphan.pid and sleeps 300 s; the parent
 *                     waits for that file, runs normally and exits 0
 *   slow S            sleep S seconds (default 1), then run normally
 *   bigout N          print N MiB (default 1) of filler lines to stdout,
 *                     then run normally
 *   flaky [N]         fail with exit status 1 on the first N attempts
 *                     (default 1), counted in the marker file, then run
 *                     normally
 *   chaos [P]         misbehave for a fraction P (default 0.2) of the
 *                     samples, chosen by a hash of the variables' values,
 *                     so the same sample always does the same: of those,
 *                     40% crash (SIGSEGV), 20% hang for 120 s (without
 *                     dying with their parent: brink must clean them up)
 *                     and 40% print garbage; the others run normally
 *                     after sleeping 0 to 40 ms
 * Input errors exit with status 2.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include <errno.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/prctl.h>
#include <sys/types.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#define MAX_INPUTS 1024

typedef struct {
  char *name;
  char *value;
  int is_number;
  double x;
} input_t;

static input_t inputs[MAX_INPUTS];
static int ninputs;
static double t_start;
static pid_t parent_pid;

static void die(int status, const char *fmt, ...) {
  va_list ap;
  va_start(ap, fmt);
  fputs("bk-test-model: ", stderr);
  vfprintf(stderr, fmt, ap);
  fputc('\n', stderr);
  va_end(ap);
  exit(status);
}

static double now(void) {
  struct timespec ts;
  clock_gettime(CLOCK_MONOTONIC, &ts);
  return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

static void sleep_seconds(double s) {
  struct timespec ts;
  ts.tv_sec = (time_t)s;
  ts.tv_nsec = (long)((s - (double)ts.tv_sec) * 1e9);
  while (nanosleep(&ts, &ts) < 0 && errno == EINTR)
    ;
}

static char *trim(char *s) {
  while (*s == ' ' || *s == '\t')
    s++;
  size_t n = strlen(s);
  while (n > 0 && strchr(" \t\r\n", s[n - 1]))
    s[--n] = '\0';
  return s;
}

static char *dup_or_die(const char *s) {
  char *d = strdup(s);
  if (!d)
    die(2, "out of memory");
  return d;
}

static void add_input(const char *name, const char *value) {
  if (!*name)
    die(2, "input without a name (value '%s')", value);
  input_t *in = NULL;
  for (int i = 0; i < ninputs; i++)
    if (strcmp(inputs[i].name, name) == 0) {
      in = &inputs[i];
      free(in->value);
      break;
    }
  if (!in) {
    if (ninputs == MAX_INPUTS)
      die(2, "more than %d inputs", MAX_INPUTS);
    in = &inputs[ninputs++];
    in->name = dup_or_die(name);
  }
  in->value = dup_or_die(value);
  char *end;
  errno = 0;
  in->x = strtod(value, &end);
  in->is_number = *value && !*end && errno == 0;
}

/* Splits "name = value" (or "name=value") in place and adds it. */
static void add_assignment(char *text, const char *where, int line) {
  char *eq = strchr(text, '=');
  if (!eq)
    die(2, "%s:%d: expected 'name = value'", where, line);
  *eq = '\0';
  add_input(trim(text), trim(eq + 1));
}

static void read_input_file(const char *path) {
  FILE *f = fopen(path, "r");
  if (!f)
    die(2, "cannot open %s: %s", path, strerror(errno));
  char line[4096];
  int lineno = 0;
  while (fgets(line, sizeof line, f)) {
    lineno++;
    char *s = trim(line);
    if (*s == '\0' || *s == '#')
      continue;
    add_assignment(s, path, lineno);
  }
  fclose(f);
}

static const char *lookup(const char *name) {
  for (int i = 0; i < ninputs; i++)
    if (strcmp(inputs[i].name, name) == 0)
      return inputs[i].value;
  return NULL;
}

static int is_reserved(const char *name) {
  return !strcmp(name, "mode") || !strcmp(name, "beta") ||
         !strcmp(name, "outfile") || !strcmp(name, "marker");
}

/* A growable text of the output, so it can be written twice or cut. */
typedef struct {
  char *p;
  size_t len, cap;
} text_t;

static void text_printf(text_t *t, const char *fmt, ...) {
  for (;;) {
    va_list ap;
    va_start(ap, fmt);
    size_t room = t->cap - t->len;
    int n = vsnprintf(t->p ? t->p + t->len : NULL, room, fmt, ap);
    va_end(ap);
    if (n < 0)
      die(2, "output formatting failed");
    if ((size_t)n < room) {
      t->len += (size_t)n;
      return;
    }
    size_t cap = t->cap ? t->cap * 2 : 1024;
    while (cap - t->len <= (size_t)n)
      cap *= 2;
    char *p = realloc(t->p, cap);
    if (!p)
      die(2, "out of memory");
    t->p = p;
    t->cap = cap;
  }
}

static void write_file(const char *path, const char *data, size_t n) {
  FILE *f = fopen(path, "w");
  if (!f)
    die(2, "cannot write %s: %s", path, strerror(errno));
  if (fwrite(data, 1, n, f) != n || fclose(f) != 0)
    die(2, "cannot write %s", path);
}

/* Builds the output text; `garbage` spoils two of the numbers. */
static void build_output(text_t *t, int garbage, int *nvars) {
  double beta = 2.0;
  const char *b = lookup("beta");
  if (b) {
    char *end;
    beta = strtod(b, &end);
    if (!*b || *end)
      die(2, "beta = %s is not a number", b);
  }
  int n = 0;
  double sum = 0, sumsq = 0, prod = 1;
  for (int i = 0; i < ninputs; i++) {
    const input_t *in = &inputs[i];
    if (in->is_number)
      text_printf(t, "echo: %s = %.17g\n", in->name, in->x);
    else
      text_printf(t, "echo: %s = %s\n", in->name, in->value);
    if (in->is_number && !is_reserved(in->name)) {
      n++;
      sum += in->x;
      sumsq += in->x * in->x;
      prod *= in->x;
    }
  }
  double g = n > 0 ? beta - sum / sqrt((double)n) : beta;
  text_printf(t, "result: n = %d\n", n);
  if (garbage)
    text_printf(t, "result: sum = twelve\n");
  else
    text_printf(t, "result: sum = %.17g\n", sum);
  text_printf(t, "result: sumsq = %.17g\n", sumsq);
  text_printf(t, "result: prod = %.17g\n", prod);
  if (garbage)
    text_printf(t, "result: g = NaN\n");
  else
    text_printf(t, "result: g = %.17g\n", g);
  *nvars = n;
}

static void write_pid_file(const char *name, pid_t pid) {
  char tmp[64], text[32];
  snprintf(tmp, sizeof tmp, "%s.tmp%ld", name, (long)pid);
  int n = snprintf(text, sizeof text, "%ld\n", (long)pid);
  write_file(tmp, text, (size_t)n);
  /* rename makes the file appear complete or not at all */
  if (rename(tmp, name) != 0)
    die(2, "cannot rename %s: %s", tmp, strerror(errno));
}

/* Writes the output (all of it, or the first half for `partial`) and the
 * timestamps, then exits 0. */
static void run_normally(const char *mode, int garbage, int partial) {
  text_t t = {0};
  int nvars;
  build_output(&t, garbage, &nvars);
  fprintf(stderr, "bk-test-model: mode %s, %d variables\n", mode, nvars);
  size_t n = partial ? t.len / 2 : t.len;
  const char *outfile = lookup("outfile");
  if (fwrite(t.p, 1, n, stdout) != n || fflush(stdout) != 0)
    die(2, "cannot write stdout");
  write_file(outfile ? outfile : "out.txt", t.p, n);
  free(t.p);
  char times[96];
  int m = snprintf(times, sizeof times, "%.9f %.9f\n", t_start, now());
  write_file("times.txt", times, (size_t)m);
  exit(0);
}

static void big_output(double mib) {
  static const char filler[] =
      "filler: the quick brown fox jumps over the lazy dog, twice over\n";
  size_t want = (size_t)(mib * 1048576.0);
  for (size_t done = 0; done < want; done += sizeof filler - 1)
    fputs(filler, stdout);
}

static void die_of(int sig) {
  fflush(NULL);
  struct sigaction sa;
  memset(&sa, 0, sizeof sa);
  sa.sa_handler = SIG_DFL;
  sigaction(sig, &sa, NULL);
  sigset_t set;
  sigemptyset(&set);
  sigaddset(&set, sig);
  sigprocmask(SIG_UNBLOCK, &set, NULL);
  raise(sig);
  _exit(99); /* not reached */
}

static void hang_forever(int ignore_term) {
  /* A hanging model must not outlive a test program that died without
   * killing it. */
  prctl(PR_SET_PDEATHSIG, SIGKILL);
  if (getppid() != parent_pid)
    _exit(1);
  if (ignore_term)
    signal(SIGTERM, SIG_IGN);
  fprintf(stderr, "bk-test-model: hanging%s\n",
          ignore_term ? ", ignoring SIGTERM" : "");
  fflush(stderr);
  for (;;)
    pause();
}

/* Leaves a child behind in the model's process group. The child writes
 * orphan.pid and closes the pipe; the parent waits for that so the pid is
 * on disk before the model exits. */
static void spawn_orphan(void) {
  int fds[2];
  if (pipe(fds) != 0)
    die(2, "pipe: %s", strerror(errno));
  fflush(NULL);
  pid_t pid = fork();
  if (pid < 0)
    die(2, "fork: %s", strerror(errno));
  if (pid == 0) {
    close(fds[0]);
    write_pid_file("orphan.pid", getpid());
    close(fds[1]);
    sleep_seconds(300);
    _exit(0);
  }
  close(fds[1]);
  char c;
  while (read(fds[0], &c, 1) < 0 && errno == EINTR)
    ;
  close(fds[0]);
}

/* Counts this attempt in the marker file; true while attempts <= n. */
static int flaky_should_fail(int n) {
  const char *marker = lookup("marker");
  if (!marker)
    marker = "flaky.marker";
  int count = 0;
  FILE *f = fopen(marker, "r");
  if (f) {
    if (fscanf(f, "%d", &count) != 1)
      count = 0;
    fclose(f);
  }
  count++;
  char text[32];
  int len = snprintf(text, sizeof text, "%d\n", count);
  write_file(marker, text, (size_t)len);
  return count <= n;
}

/* A hash of the variables' values in [0, 1): the same inputs give the
 * same number (SplitMix64 finaliser over the bits of each value). */
static double inputs_hash(void) {
  uint64_t h = 0x9e3779b97f4a7c15ull;
  for (int i = 0; i < ninputs; i++) {
    if (!inputs[i].is_number || is_reserved(inputs[i].name))
      continue;
    uint64_t bits;
    memcpy(&bits, &inputs[i].x, sizeof bits);
    h ^= bits;
    h = (h ^ (h >> 30)) * 0xbf58476d1ce4e5b9ull;
    h = (h ^ (h >> 27)) * 0x94d049bb133111ebull;
    h ^= h >> 31;
  }
  return (double)(h >> 11) * 0x1p-53;
}

static void chaos(double p) {
  double u = inputs_hash();
  if (u < 0.4 * p) {
    fprintf(stderr, "bk-test-model: chaos: crashing\n");
    die_of(SIGSEGV);
  }
  if (u < 0.6 * p) {
    fprintf(stderr, "bk-test-model: chaos: hanging\n");
    fflush(stderr);
    sleep_seconds(120);
    exit(0);
  }
  if (u < p) {
    fprintf(stderr, "bk-test-model: chaos: garbage\n");
    run_normally("chaos", 1, 0);
  }
  sleep_seconds(0.04 * (u - p) / (1 - p));
  run_normally("chaos", 0, 0);
}

int main(int argc, char **argv) {
  t_start = now();
  parent_pid = getppid();
  write_pid_file("model.pid", getpid());

  for (int i = 1; i < argc; i++) {
    if (strchr(argv[i], '=')) {
      char *copy = dup_or_die(argv[i]);
      add_assignment(copy, "argument", i);
      free(copy);
    } else {
      read_input_file(argv[i]);
    }
  }

  const char *mode_text = lookup("mode");
  if (!mode_text)
    mode_text = getenv("BK_MODEL_MODE");
  if (!mode_text || !*mode_text)
    mode_text = "ok";
  char mode[32] = "";
  double arg = NAN;
  if (sscanf(mode_text, "%31s %lf", mode, &arg) < 1)
    die(2, "bad mode '%s'", mode_text);
  int has_arg = !isnan(arg);

  if (!strcmp(mode, "ok")) {
    run_normally(mode, 0, 0);
  } else if (!strcmp(mode, "exit")) {
    int status = has_arg ? (int)arg : 1;
    fprintf(stderr, "bk-test-model: exiting with status %d\n", status);
    exit(status);
  } else if (!strcmp(mode, "crash")) {
    fprintf(stderr, "bk-test-model: crashing\n");
    die_of(SIGSEGV);
  } else if (!strcmp(mode, "abort")) {
    fprintf(stderr, "bk-test-model: aborting\n");
    die_of(SIGABRT);
  } else if (!strcmp(mode, "hang")) {
    hang_forever(0);
  } else if (!strcmp(mode, "hang-ignore-term")) {
    hang_forever(1);
  } else if (!strcmp(mode, "garbage")) {
    run_normally(mode, 1, 0);
  } else if (!strcmp(mode, "partial")) {
    run_normally(mode, 0, 1);
  } else if (!strcmp(mode, "orphan")) {
    spawn_orphan();
    run_normally(mode, 0, 0);
  } else if (!strcmp(mode, "slow")) {
    sleep_seconds(has_arg && arg > 0 ? arg : 1.0);
    run_normally(mode, 0, 0);
  } else if (!strcmp(mode, "bigout")) {
    big_output(has_arg && arg > 0 ? arg : 1.0);
    run_normally(mode, 0, 0);
  } else if (!strcmp(mode, "chaos")) {
    chaos(has_arg && arg >= 0 && arg < 1 ? arg : 0.2);
  } else if (!strcmp(mode, "flaky")) {
    int n = has_arg ? (int)arg : 1;
    if (flaky_should_fail(n)) {
      fprintf(stderr, "bk-test-model: flaky failure\n");
      exit(1);
    }
    run_normally(mode, 0, 0);
  }
  die(2,
      "unknown mode '%s' (ok, exit N, crash, abort, hang, "
      "hang-ignore-term, garbage, partial, orphan, slow S, bigout N, "
      "flaky N, chaos P)",
      mode);
}
