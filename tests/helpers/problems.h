/*
 * Benchmark problems from the structural reliability literature, with
 * failure probabilities computed independently by scipy/numpy
 * (tests/ref/gen_problems.py, whose docstring names the source of each),
 * and a coverage harness: run a method over many seeds and count how
 * often its interval holds the reference, and how often it warned when it
 * did not. Included once per test program, after Criterion and the brink
 * headers (methods/method.h, study/study.h).
 *
 * The acceptance rule of an honest method (issue of the whole suite): the
 * 95% interval covers the reference in 90% to 98% of the runs, or every
 * run whose interval misses it says so in a warning. A run that warns is
 * honest even when its interval misses; the upper limit 98% is checked
 * only as far as the seeds can tell (a binomial test at the 1% level:
 * 50 of 50 seeds is what a 95% interval gives 8% of the time).
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static char problems_dir[256];

static void problems_setup(void) {
  snprintf(problems_dir, sizeof problems_dir, "/tmp/bk-test-problems-XXXXXX");
  cr_assert(mkdtemp(problems_dir));
}

static void problems_teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", problems_dir);
  cr_assert_eq(system(cmd), 0);
}

/* A growable text for study files of up to a few thousand variables. */
typedef struct {
  char *p;
  size_t len, cap;
} text_t;

static void text_add(text_t *t, const char *fmt, ...) {
  va_list ap;
  va_start(ap, fmt);
  int n = vsnprintf(NULL, 0, fmt, ap);
  va_end(ap);
  if (t->len + (size_t)n + 1 > t->cap) {
    t->cap = 2 * (t->len + (size_t)n + 1);
    t->p = realloc(t->p, t->cap);
    cr_assert(t->p);
  }
  va_start(ap, fmt);
  vsnprintf(t->p + t->len, t->cap - t->len, fmt, ap);
  va_end(ap);
  t->len += (size_t)n;
}

/* n standard normal variables u1..un. */
static void add_normals(text_t *t, int n) {
  text_add(t, "variables:\n");
  for (int i = 1; i <= n; i++)
    text_add(t, "  u%d: {type: normal, mean: 0, sd: 1}\n", i);
}

/* The study text of problem `name` with parameters `a` and `b` (as in
 * ref_problems.txt; b is "" for one-parameter problems), seed and the
 * analysis mapping's inside. Aborts the test on an unknown name. */
static void problem_text(text_t *t, const char *name, const char *a,
                         const char *b, int seed, const char *analysis) {
  text_add(t, "name: %s\nseed: %d\n", name, seed);
  if (strcmp(name, "series4") == 0) {
    add_normals(t, 2);
    text_add(t,
             "limit_state: \"min(3 + 0.1*(u1-u2)^2 - (u1+u2)/sqrt(2), "
             "3 + 0.1*(u1-u2)^2 + (u1+u2)/sqrt(2), (u1-u2) + %s/sqrt(2), "
             "(u2-u1) + %s/sqrt(2))\"\n",
             a, a);
  } else if (strcmp(name, "serieslin") == 0) {
    add_normals(t, 2);
    text_add(t,
             "limit_state: \"min(%s - (u1+u2)/sqrt(2), %s + (u1+u2)/sqrt(2), "
             "%s + 0.5 - (u1-u2)/sqrt(2), %s + 0.5 + (u1-u2)/sqrt(2))\"\n",
             a, a, a, a);
  } else if (strcmp(name, "parabola") == 0) {
    add_normals(t, 2);
    text_add(t, "limit_state: \"%s - u2 - 0.5*u1^2\"\n", a);
  } else if (strcmp(name, "rastrigin") == 0) {
    add_normals(t, 2);
    text_add(t,
             "limit_state: \"%s - (u1^2 - 5*cos(2*3.141592653589793*u1)) - "
             "(u2^2 - 5*cos(2*3.141592653589793*u2))\"\n",
             a);
  } else if (strcmp(name, "linear") == 0) {
    int n = atoi(a);
    add_normals(t, n);
    text_add(t, "limit_state: \"%.17g", atof(b) * sqrt((double)n));
    for (int i = 1; i <= n; i++)
      text_add(t, " - u%d", i);
    text_add(t, "\"\n");
  } else if (strcmp(name, "lognsum") == 0) {
    int n = atoi(a);
    text_add(t, "variables:\n");
    /* exp(0.2 Z): median 1, so mean exp(0.02) and cov sqrt(exp(0.04)-1). */
    for (int i = 1; i <= n; i++)
      text_add(t, "  x%d: {type: lognormal, mean: %.17g, cov: %.17g}\n", i,
               exp(0.02), sqrt(exp(0.04) - 1));
    text_add(t, "limit_state: \"%s", b);
    for (int i = 1; i <= n; i++)
      text_add(t, " - x%d", i);
    text_add(t, "\"\n");
  } else if (strcmp(name, "corr") == 0) {
    text_add(t,
             "variables:\n"
             "  R: {type: lognormal, mean: %s, cov: 0.15}\n"
             "  S: {type: gumbel, mean: 1, cov: 0.3}\n"
             "correlations:\n  - [R, S, 0.3]\n"
             "limit_state: \"R - S\"\n",
             a);
  } else if (strcmp(name, "oscillator") == 0) {
    /* a: mean of F1, b: its standard deviation (tests/ref/gen_problems.py
     * names the source). */
    text_add(t,
             "variables:\n"
             "  m:  {type: normal, mean: 1, sd: 0.05}\n"
             "  c1: {type: normal, mean: 1, sd: 0.1}\n"
             "  c2: {type: normal, mean: 0.1, sd: 0.01}\n"
             "  r:  {type: normal, mean: 0.5, sd: 0.05}\n"
             "  F1: {type: normal, mean: %s, sd: %s}\n"
             "  t1: {type: normal, mean: 1, sd: 0.2}\n"
             "limit_state: \"3*r - abs(2*F1/(m*((c1+c2)/m)) * "
             "sin(sqrt((c1+c2)/m)*t1/2))\"\n",
             a, b);
  } else if (strcmp(name, "lnratio") == 0) {
    text_add(t,
             "variables:\n"
             "  R: {type: lognormal, mean: %s, cov: 0.15}\n"
             "  S: {type: lognormal, mean: 1, cov: 0.25}\n"
             "limit_state: \"R - S\"\n",
             a);
  } else {
    cr_assert_fail("unknown problem %s", name);
  }
  text_add(t, "analysis: {%s}\n", analysis);
}

static bk_study_t *problem_study(const char *name, const char *a, const char *b,
                                 int seed, const char *analysis) {
  text_t t = {0};
  problem_text(&t, name, a, b, seed, analysis);
  char path[512];
  snprintf(path, sizeof path, "%s/%s.yaml", problems_dir, name);
  FILE *f = fopen(path, "w");
  cr_assert(f);
  fputs(t.p, f);
  fclose(f);
  free(t.p);
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_study_load(path, &s, &err);
  cr_assert_eq(rc, 0, "%s %s %s: %d:%d: %s", name, a, b, err.line, err.col,
               err.msg);
  return s;
}

/* The reference Pf of problem `name` with parameters a (and b) from
 * tests/fixtures/ref_problems.txt: the last number of its line. */
static __attribute__((unused)) double
problem_ref(const char *name, const char *a, const char *b) {
  const char *fx = getenv("BRINK_FIXTURES");
  cr_assert(fx, "BRINK_FIXTURES must be set");
  char path[600], want[200], line[256];
  snprintf(path, sizeof path, "%s/ref_problems.txt", fx);
  snprintf(want, sizeof want, "%s %s%s%s ", name, a, b[0] ? " " : "", b);
  FILE *f = fopen(path, "r");
  cr_assert(f, "%s", path);
  double v = NAN;
  while (fgets(line, sizeof line, f))
    if (strncmp(line, want, strlen(want)) == 0)
      v = strtod(strrchr(line, ' ') + 1, NULL);
  fclose(f);
  cr_assert(!isnan(v), "no '%s' in %s", want, path);
  return v;
}

typedef struct {
  int runs;
  int covered;     /* the interval holds the reference */
  int warned;      /* runs with at least one warning */
  int warned_miss; /* misses that warned */
  int failed;      /* runs that ended in an error (counted as misses) */
  double mean_pf;
  double mean_evals;
  double max_evals;
} cover_t;

/* Runs seeds first..first+runs-1 of a problem in process and counts. */
static __attribute__((unused)) cover_t coverage_of(const char *name,
                                                   const char *a, const char *b,
                                                   const char *analysis,
                                                   int first, int runs) {
  double exact = problem_ref(name, a, b);
  cover_t c;
  memset(&c, 0, sizeof c);
  c.runs = runs;
  for (int seed = first; seed < first + runs; seed++) {
    bk_study_t *s = problem_study(name, a, b, seed, analysis);
    bk_evaluator_t ev;
    bk_evaluator_inprocess(&ev, s);
    bk_error_t err;
    bk_error_clear(&err);
    bk_result_t r;
    int rc = bk_method_run(s, &ev, NULL, &r, &err);
    if (rc) {
      c.failed++;
    } else {
      int hit = r.est.ci[0] <= exact && exact <= r.est.ci[1];
      c.covered += hit;
      c.warned += r.nwarnings > 0;
      c.warned_miss += !hit && r.nwarnings > 0;
      c.mean_pf += r.est.pf / runs;
    }
    c.mean_evals += (double)r.evaluations / runs;
    if ((double)r.evaluations > c.max_evals)
      c.max_evals = (double)r.evaluations;
    bk_result_close(&r);
    bk_study_free(s);
  }
  printf("%-10s %-5s %-6s %-46s exact %.3e mean %.3e covered %d/%d "
         "warned misses %d errors %d evaluations %.0f (max %.0f)\n",
         name, a, b, analysis, exact, c.mean_pf, c.covered, runs, c.warned_miss,
         c.failed, c.mean_evals, c.max_evals);
  fflush(stdout);
  return c;
}

/* P(X >= k) for X binomial(n, p). */
static __attribute__((unused)) double binom_sf(int k, int n, double p) {
  double s = 0;
  for (int i = k; i <= n; i++)
    s += exp(lgamma(n + 1.0) - lgamma(i + 1.0) - lgamma(n - i + 1.0) +
             i * log(p) + (n - i) * log1p(-p));
  return s;
}

/* The acceptance rule (top of this file). */
static __attribute__((unused)) void expect_honest(const cover_t *c,
                                                  const char *what) {
  int honest = c->covered + c->warned_miss;
  double f = (double)honest / c->runs;
  cr_expect(f >= 0.90,
            "%s: only %d of %d runs covered the reference or warned "
            "(%d covered, %d warned misses, %d errors)",
            what, honest, c->runs, c->covered, c->warned_miss, c->failed);
  cr_expect((double)c->covered / c->runs <= 0.98 ||
                binom_sf(c->covered, c->runs, 0.95) >= 0.01,
            "%s: %d of %d intervals covered: wider than a 95%% interval "
            "needs",
            what, c->covered, c->runs);
}

/* For problems a method is built for: at most `share` of the runs warn
 * (a method that always warns would pass expect_honest trivially). */
static __attribute__((unused)) void
expect_few_warnings(const cover_t *c, double share, const char *what) {
  cr_expect(c->warned <= share * c->runs,
            "%s: %d of %d runs warned, where the method should hold", what,
            c->warned, c->runs);
}
