/*
 * Benchmark of the surrogate method (method_surrogate.c): model runs to
 * reach cov 0.1, interval coverage, and the surrogate's own CPU time per
 * learning iteration. In process (the limit state stands for the model),
 * no records; every number is a pure function of the seeds.
 *
 * Usage: bench_surrogate [SEEDS [PROBLEM]] (default 20 seeds, every
 *        problem), or bench_surrogate cpu (CPU per iteration up to 500
 *        training points in 20 dimensions).
 *
 * Problems and exact Pf (tests/fixtures/ref_problems.txt, scipy; see
 * tests/ref/gen_problems.py for the sources):
 *   linear N B   g = B sqrt(N) - sum u_i, Pf = Phi(-B), N = 2, 6, 10, 20
 *                and B = 2.33, 3.09, 4.27, 4.75 (1e-2 to 1e-6)
 *   series4      four-branch series system, Pf 4.457e-3
 *   two points   g = 4.9 - |a|, Pf = 2 Phi(-4.9) = 9.584e-7 (ref_rare.txt)
 *   parabola     g = 5 - u2 - u1^2/2, two design points, Pf 2.891e-3
 *   lnratio      lognormal over lognormal, Pf 5.246e-7
 *   oscillator   six normals, F1 (1, 0.2): Pf 2.860e-2; (0.6, 0.1): 9.131e-6
 * Columns: mean and largest model runs, mean Pf / exact, empirical cov of
 * the estimates, mean stated cov, share of intervals holding the exact
 * value, share of runs that reached target_cov, mean CPU seconds per
 * learning iteration.
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "methods/method.h"
#include "study/study.h"

static char path[512];

static bk_study_t *load(const char *text) {
  FILE *f = fopen(path, "w");
  if (!f)
    exit(1);
  fputs(text, f);
  fclose(f);
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  if (bk_study_load(path, &s, &err)) {
    fprintf(stderr, "%s\n", err.msg);
    exit(1);
  }
  return s;
}

typedef struct {
  const char *name;
  int n;    /* variables of a linear problem, else 0 */
  double b; /* its beta */
  const char *vars, *g;
  double exact;
} problem_t;

static const problem_t problems[] = {
    {"linear 2 2.33", 2, 2.33, NULL, NULL, 0.009903075559164245},
    {"linear 2 3.09", 2, 3.09, NULL, NULL, 0.0010007824766140115},
    {"linear 2 4.27", 2, 4.27, NULL, NULL, 9.773648372917584e-06},
    {"linear 2 4.75", 2, 4.75, NULL, NULL, 1.0170832425687032e-06},
    {"linear 6 4.75", 6, 4.75, NULL, NULL, 1.0170832425687032e-06},
    {"linear 10 4.75", 10, 4.75, NULL, NULL, 1.0170832425687032e-06},
    {"linear 20 2.33", 20, 2.33, NULL, NULL, 0.009903075559164245},
    {"linear 20 4.75", 20, 4.75, NULL, NULL, 1.0170832425687032e-06},
    {"series4 6", 0, 0,
     "  u1: {type: normal, mean: 0, sd: 1}\n"
     "  u2: {type: normal, mean: 0, sd: 1}\n",
     "min(3 + 0.1*(u1-u2)^2 - (u1+u2)/sqrt(2), 3 + 0.1*(u1-u2)^2 + "
     "(u1+u2)/sqrt(2), (u1-u2) + 6/sqrt(2), (u2-u1) + 6/sqrt(2))",
     0.004457331490624721},
    {"two points 4.9", 0, 0,
     "  a: {type: normal, mean: 0, sd: 1}\n"
     "  b: {type: normal, mean: 0, sd: 1}\n",
     "4.9 - abs(a)", 9.58366553180637e-07},
    {"parabola 5", 0, 0,
     "  u1: {type: normal, mean: 0, sd: 1}\n"
     "  u2: {type: normal, mean: 0, sd: 1}\n",
     "5.0 - u2 - 0.5*u1^2", 0.0028914664554812036},
    {"lnratio 4", 0, 0,
     "  R: {type: lognormal, mean: 4.0, cov: 0.15}\n"
     "  S: {type: lognormal, mean: 1, cov: 0.25}\n",
     "R - S", 5.246290880875482e-07},
    {"oscillator 1e-2", 0, 0,
     "  m:  {type: normal, mean: 1, sd: 0.05}\n"
     "  c1: {type: normal, mean: 1, sd: 0.1}\n"
     "  c2: {type: normal, mean: 0.1, sd: 0.01}\n"
     "  r:  {type: normal, mean: 0.5, sd: 0.05}\n"
     "  F1: {type: normal, mean: 1.0, sd: 0.2}\n"
     "  t1: {type: normal, mean: 1, sd: 0.2}\n",
     "3*r - abs(2*F1/(m*((c1+c2)/m)) * sin(sqrt((c1+c2)/m)*t1/2))",
     0.028595593781568045},
    {"oscillator 1e-5", 0, 0,
     "  m:  {type: normal, mean: 1, sd: 0.05}\n"
     "  c1: {type: normal, mean: 1, sd: 0.1}\n"
     "  c2: {type: normal, mean: 0.1, sd: 0.01}\n"
     "  r:  {type: normal, mean: 0.5, sd: 0.05}\n"
     "  F1: {type: normal, mean: 0.6, sd: 0.1}\n"
     "  t1: {type: normal, mean: 1, sd: 0.2}\n",
     "3*r - abs(2*F1/(m*((c1+c2)/m)) * sin(sqrt((c1+c2)/m)*t1/2))",
     9.130975905537926e-06},
};

static void study_text(char *out, size_t cap, const problem_t *p, int seed,
                       const char *analysis) {
  size_t l = (size_t)snprintf(out, cap, "seed: %d\nvariables:\n", seed);
  if (p->n) {
    for (int i = 1; i <= p->n; i++)
      l += (size_t)snprintf(out + l, cap - l,
                            "  u%d: {type: normal, mean: 0, sd: 1}\n", i);
    l += (size_t)snprintf(out + l, cap - l, "limit_state: \"%.17g",
                          p->b * sqrt((double)p->n));
    for (int i = 1; i <= p->n; i++)
      l += (size_t)snprintf(out + l, cap - l, " - u%d", i);
    snprintf(out + l, cap - l, "\"\nanalysis: {%s}\n", analysis);
  } else {
    snprintf(out + l, cap - l, "%slimit_state: \"%s\"\nanalysis: {%s}\n",
             p->vars, p->g, analysis);
  }
}

/* CPU time at each decision point, for the time per iteration. */
typedef struct {
  double cpu[4096];
  uint64_t n[4096];
  int k;
} cpu_log_t;

static double cpu_now(void) {
  struct timespec ts;
  clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
  return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* Logs the CPU time at each decision point (not at the start of a
 * batch). */
static void on_progress(void *data, const bk_method_progress_t *p) {
  cpu_log_t *c = data;
  const bk_result_t *r = p->sofar;
  if (p->batch_size == 0 && r && c->k < 4096) {
    c->cpu[c->k] = cpu_now();
    c->n[c->k] = r->evaluations;
    c->k++;
  }
}

static double detail(const bk_result_t *r, const char *label) {
  for (size_t i = 0; i < r->ndetails; i++)
    if (!strcmp(r->details[i].label, label))
      return r->details[i].value;
  return NAN;
}

static void bench(const problem_t *p, int seeds, const char *analysis) {
  double sum = 0, sum2 = 0, scov = 0, evals = 0, emax = 0, cover = 0, reach = 0,
         cpu = 0;
  static char text[65536];
  for (int seed = 1; seed <= seeds; seed++) {
    study_text(text, sizeof text, p, seed, analysis);
    bk_study_t *s = load(text);
    bk_evaluator_t ev;
    bk_evaluator_inprocess(&ev, s);
    static cpu_log_t cl;
    cl.k = 0;
    bk_method_opts_t o = {on_progress, &cl, NULL, NULL};
    bk_error_t err;
    bk_error_clear(&err);
    bk_result_t r;
    double t0 = cpu_now();
    if (bk_method_run(s, &ev, &o, &r, &err)) {
      fprintf(stderr, "%s seed %d: %s\n", p->name, seed, err.msg);
      exit(1);
    }
    double it = detail(&r, "learning iterations");
    double t_learn = t0;
    /* The learning iterations end where the correction's first entry
     * is: the history entries before it belong to learning. */
    for (int i = 0; i < cl.k && i < (int)it + 1; i++)
      t_learn = cl.cpu[i];
    cpu += it > 0 ? (t_learn - t0) / (it + 1) / seeds : 0;
    double x = r.est.pf / p->exact;
    sum += x;
    sum2 += x * x;
    scov += r.est.cov / seeds;
    evals += (double)r.evaluations / seeds;
    if ((double)r.evaluations > emax)
      emax = (double)r.evaluations;
    cover += r.est.ci[0] <= p->exact && p->exact <= r.est.ci[1];
    reach += !strcmp(r.stop_reason, "target_cov reached");
    bk_result_close(&r);
    bk_study_free(s);
  }
  double m = sum / seeds, ecov = sqrt(fabs(sum2 / seeds - m * m)) / m;
  printf("| %-16s | %6.0f | %5.0f | %5.3f | %5.3f | %5.3f | %4.0f%% | %4.0f%% "
         "| %6.3f |\n",
         p->name, evals, emax, m, ecov, scov, 100 * cover / seeds,
         100 * reach / seeds, cpu);
  fflush(stdout);
}

/* CPU per learning iteration as the training set grows to 500 points in
 * 20 dimensions: a limit state the surrogate cannot learn quickly (a sum
 * of squares and sines), learning kept going by a small target_cov. */
static void bench_cpu(void) {
  static char text[65536];
  size_t l = (size_t)snprintf(text, sizeof text, "seed: 1\nvariables:\n");
  for (int i = 1; i <= 20; i++)
    l += (size_t)snprintf(text + l, sizeof text - l,
                          "  u%d: {type: normal, mean: 0, sd: 1}\n", i);
  l += (size_t)snprintf(text + l, sizeof text - l, "limit_state: \"40");
  for (int i = 1; i <= 20; i++)
    l += (size_t)snprintf(text + l, sizeof text - l, " - u%d^2 - 2*sin(3*u%d)",
                          i, i);
  snprintf(text + l, sizeof text - l,
           "\"\nanalysis: {method: surrogate, max_evaluations: 560, "
           "target_cov: 0.001, surrogate: {batch: 16, training_share: "
           "0.95}}\n");
  bk_study_t *s = load(text);
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  static cpu_log_t cl;
  cl.k = 0;
  bk_method_opts_t o = {on_progress, &cl, NULL, NULL};
  bk_error_t err;
  bk_error_clear(&err);
  bk_result_t r;
  double t0 = cpu_now();
  int rc = bk_method_run(s, &ev, &o, &r, &err);
  printf("rc %d, %llu runs, %.0f training runs\n", rc,
         (unsigned long long)r.evaluations, detail(&r, "training runs"));
  printf("| training points | CPU s for the iteration |\n|---:|---:|\n");
  double prev = t0;
  for (int i = 0; i < cl.k; i++) {
    if (i % 5 == 0 || i == cl.k - 1)
      printf("| %llu | %.2f |\n", (unsigned long long)cl.n[i],
             cl.cpu[i] - prev);
    prev = cl.cpu[i];
  }
  bk_result_close(&r);
  bk_study_free(s);
}

int main(int argc, char **argv) {
  snprintf(path, sizeof path, "/tmp/bench_surrogate_%d.yaml", (int)getpid());
  if (argc > 1 && !strcmp(argv[1], "cpu")) {
    bench_cpu();
    unlink(path);
    return 0;
  }
  int seeds = argc > 1 ? atoi(argv[1]) : 20;
  const char *only = argc > 2 ? argv[2] : NULL;
  const char *an = "method: surrogate, target_cov: 0.1, max_evaluations: "
                   "600, surrogate: {batch: 4}";
  printf("surrogate, batch 4, target_cov 0.1, max_evaluations 600, %d "
         "seeds\n\n",
         seeds);
  printf("| problem          |  runs  |  max  | Pf/ex | e.cov | s.cov | "
         "cover | reach | cpu/it |\n"
         "|------------------|-------:|------:|------:|------:|------:|"
         "------:|------:|-------:|\n");
  for (size_t i = 0; i < sizeof problems / sizeof *problems; i++)
    if (!only || strstr(problems[i].name, only))
      bench(&problems[i], seeds, an);
  unlink(path);
  return 0;
}
