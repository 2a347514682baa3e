/*
 * Benchmark: evaluations needed to reach cov 0.1 at Pf about 1e-6 with
 * cross-entropy and subset simulation on three closed-form problems, beside
 * crude Monte Carlo's (1 - Pf) / (Pf cov^2). In process, no model, no
 * records; every number is a pure function of the seeds, so the table is
 * reproducible. Usage: bench_rare [SEEDS] (default 20).
 *
 * Problems (exact Pf from tests/fixtures/ref_rare.txt, scipy):
 *   linear     g = 4.75 - (a + b)/sqrt(2), a, b standard normal;
 *              Pf = Phi(-4.75) = 1.0171e-6
 *   two points g = 4.9 - |a|; Pf = 2 Phi(-4.9) = 9.5837e-7
 *   exp20      g = 48.8 - (x1 + ... + x20), unit exponentials;
 *              Pf = Q(20, 48.8) = 1.0166e-6
 * Cross-entropy runs with target_cov 0.1 and reports its evaluations
 * (adaptation included). Subset simulation has no stopping rule on the
 * cov: its samples per level are chosen from a pilot at 1000 per level so
 * that the empirical cov over seeds is about 0.1 (cov scales as
 * 1/sqrt(samples)), then measured. Columns: mean evaluations, mean Pf /
 * exact, empirical cov of the estimates over the seeds, mean stated cov,
 * interval coverage.
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
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

static void problem_text(char *out, size_t cap, int which, int seed,
                         const char *analysis) {
  if (which == 0)
    snprintf(out, cap,
             "seed: %d\nvariables:\n  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "limit_state: 4.75 - (a + b)/sqrt(2)\nanalysis: {%s}\n",
             seed, analysis);
  else if (which == 1)
    snprintf(out, cap,
             "seed: %d\nvariables:\n  a: {type: normal, mean: 0, sd: 1}\n"
             "  b: {type: normal, mean: 0, sd: 1}\n"
             "limit_state: 4.9 - abs(a)\nanalysis: {%s}\n",
             seed, analysis);
  else {
    size_t l = (size_t)snprintf(out, cap, "seed: %d\nvariables:\n", seed);
    for (int i = 1; i <= 20; i++)
      l += (size_t)snprintf(out + l, cap - l,
                            "  x%d: {type: exponential, rate: 1}\n", i);
    l += (size_t)snprintf(out + l, cap - l, "limit_state: 48.8 - (x1");
    for (int i = 2; i <= 20; i++)
      l += (size_t)snprintf(out + l, cap - l, " + x%d", i);
    snprintf(out + l, cap - l, ")\nanalysis: {%s}\n", analysis);
  }
}

typedef struct {
  double evals, ratio, ecov, scov, coverage;
} row_t;

static row_t measure(int which, const char *analysis, double exact, int seeds) {
  row_t r = {0, 0, 0, 0, 0};
  double s1 = 0, s2 = 0;
  char text[8192];
  for (int seed = 1; seed <= seeds; seed++) {
    problem_text(text, sizeof text, which, seed, analysis);
    bk_study_t *s = load(text);
    bk_evaluator_t ev;
    bk_evaluator_inprocess(&ev, s);
    bk_result_t res;
    bk_error_t err;
    bk_error_clear(&err);
    if (bk_method_run(s, &ev, NULL, &res, &err)) {
      fprintf(stderr, "%s\n", err.msg);
      exit(1);
    }
    r.evals += (double)res.evaluations / seeds;
    s1 += res.est.pf;
    s2 += res.est.pf * res.est.pf;
    r.scov += res.est.cov / seeds;
    r.coverage +=
        (res.est.ci[0] <= exact && exact <= res.est.ci[1]) / (double)seeds;
    bk_result_close(&res);
    bk_study_free(s);
  }
  double mean = s1 / seeds;
  r.ratio = mean / exact;
  r.ecov = sqrt(fmax(0, (s2 - seeds * mean * mean) / (seeds - 1))) / mean;
  return r;
}

static void print_row(const char *prob, const char *method, row_t r) {
  printf("| %-10s | %-28s | %8.0f | %5.2f | %5.3f | %5.3f | %4.0f%% |\n", prob,
         method, r.evals, r.ratio, r.ecov, r.scov, 100 * r.coverage);
  fflush(stdout);
}

int main(int argc, char **argv) {
  int seeds = argc > 1 ? atoi(argv[1]) : 20;
  if (seeds < 2)
    seeds = 2;
  char dir[] = "/tmp/bk-bench-rare-XXXXXX";
  if (!mkdtemp(dir))
    return 1;
  snprintf(path, sizeof path, "%s/study.yaml", dir);
  const char *names[] = {"linear", "two points", "exp20"};
  /* Exact values: tests/fixtures/ref_rare.txt (scipy). */
  const double exact[] = {1.0170832425687032e-06, 2 * 4.791832765903185e-07,
                          1.0166226880761094e-06};
  printf("| problem    | method                       | evals    | Pf/ex "
         "| e.cov | s.cov | cover |\n");
  printf("|------------|------------------------------|----------|-------"
         "|-------|-------|-------|\n");
  for (int p = 0; p < 3; p++) {
    printf("| %-10s | %-28s | %8.3g |       | 0.100 |       |       |\n",
           names[p], "crude MC (formula)", (1 - exact[p]) / (exact[p] * 0.01));
    print_row(names[p], "cross-entropy K=1 N=500",
              measure(p, "method: cross-entropy", exact[p], seeds));
    if (p == 1)
      print_row(names[p], "cross-entropy K=2 N=500",
                measure(p,
                        "method: cross-entropy, cross_entropy: "
                        "{components: 2}",
                        exact[p], seeds));
    if (p == 2)
      print_row(
          names[p], "cross-entropy K=1 N=2000",
          measure(p, "method: cross-entropy, samples: 2000", exact[p], seeds));
    row_t pilot = measure(p, "method: subset, samples: 1000", exact[p], seeds);
    print_row(names[p], "subset N=1000 (pilot)", pilot);
    double n = 1000 * (pilot.ecov / 0.1) * (pilot.ecov / 0.1);
    n = 100 * ceil(n / 100);
    char an[128], label[64];
    snprintf(an, sizeof an, "method: subset, samples: %.0f", n);
    snprintf(label, sizeof label, "subset N=%.0f", n);
    print_row(names[p], label, measure(p, an, exact[p], seeds));
  }
  unlink(path);
  rmdir(dir);
  return 0;
}
