/*
 * Benchmark: how honest a method's interval is, over many seeds, on the
 * benchmark problems of the coverage suite (tests/helpers/problems.h,
 * references from scipy in tests/fixtures/ref_problems.txt). In process,
 * no model, no records. For each problem it prints the share of runs
 * whose interval holds the reference, the misses that warned, the runs
 * that warned, the mean evaluations, and the ratio of the observed spread
 * of the estimates to the stated one: sd(ln Pf) over the seeds against the
 * mean of sqrt(ln(1 + cov^2)), which is what a lognormal or normal
 * interval of that cov assumes (1 when the stated cov is right; a ratio of
 * 1.4 turns a 95% interval into about 84%). Peak resident memory is that
 * of the whole process so far.
 *
 * Usage:
 *   coverage_sweep RUNS 'ANALYSIS' NAME A [B]      one problem
 *   coverage_sweep RUNS 'ANALYSIS' NAME A [B] -- FIRST   seeds from FIRST
 * e.g. coverage_sweep 200 'method: subset, samples: 500' linear 2 6.0
 * bench/coverage_sweep.sh runs the table of bench/README.md.
 *
 * SPDX-License-Identifier: MIT
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>

#include "methods/method.h"
#include "study/study.h"

/* problems.h is written for the Criterion test programs; these stand-ins
 * make it usable here (an unmet assertion ends the benchmark). */
#define BENCH_FAIL(...)                                                        \
  do {                                                                         \
    fprintf(stderr, "coverage_sweep: " __VA_ARGS__);                           \
    fputc('\n', stderr);                                                       \
    exit(2);                                                                   \
  } while (0)
#define cr_assert(cond, ...)                                                   \
  do {                                                                         \
    if (!(cond))                                                               \
      BENCH_FAIL("failed: %s", #cond);                                         \
  } while (0)
#define cr_assert_eq(a, b, ...) cr_assert((a) == (b))
#define cr_assert_fail(...)     BENCH_FAIL(__VA_ARGS__)
#define cr_expect(cond, ...)    cr_assert(cond)
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wunused-function"
#pragma GCC diagnostic ignored "-Wunused-parameter"
#include "../tests/helpers/problems.h"
#pragma GCC diagnostic pop

/* Candidate intervals a method may report while it is being studied: a
 * detail labelled "cov candidate <name>" is taken as the cov of a
 * lognormal interval around the same Pf. */
#define MAX_CAND 8
typedef struct {
  char name[64];
  int covered;
  int covered_mean; /* the interval of a lognormal with mean Pf */
  double sum_sl;    /* sum of sqrt(ln(1 + cov^2)) */
} cand_t;

int main(int argc, char **argv) {
  if (argc < 5) {
    fprintf(stderr, "usage: coverage_sweep RUNS 'ANALYSIS' NAME A [B] "
                    "[-- FIRST]\n");
    return 2;
  }
  int runs = atoi(argv[1]);
  const char *analysis = argv[2], *name = argv[3], *a = argv[4];
  const char *b = argc > 5 && strcmp(argv[5], "--") ? argv[5] : "";
  int first = 1;
  for (int i = 5; i + 1 < argc; i++)
    if (!strcmp(argv[i], "--"))
      first = atoi(argv[i + 1]);
  problems_setup();
  double exact = problem_ref(name, a, b);
  int covered = 0, warned = 0, warned_miss = 0, errors = 0, n = 0;
  int low = 0, high = 0;
  double evals = 0, max_evals = 0, s_lp = 0, s_lp2 = 0, s_sl = 0, s_pf = 0;
  cand_t cand[MAX_CAND];
  int ncand = 0;
  for (int seed = first; seed < first + runs; seed++) {
    bk_study_t *s = problem_study(name, a, b, seed, analysis);
    bk_evaluator_t ev;
    bk_evaluator_inprocess(&ev, s);
    bk_error_t err;
    bk_error_clear(&err);
    bk_result_t r;
    if (bk_method_run(s, &ev, NULL, &r, &err)) {
      errors++;
      fprintf(stderr, "seed %d: %s\n", seed, err.msg);
      bk_result_close(&r);
      bk_study_free(s);
      continue;
    }
    int hit = r.est.ci[0] <= exact && exact <= r.est.ci[1];
    covered += hit;
    low += r.est.ci[1] < exact;
    high += r.est.ci[0] > exact;
    warned += r.nwarnings > 0;
    warned_miss += !hit && r.nwarnings > 0;
    evals += (double)r.evaluations;
    if ((double)r.evaluations > max_evals)
      max_evals = (double)r.evaluations;
    if (getenv("SWEEP_VERBOSE"))
      printf("seed %d pf %.4e cov %.4f ci [%.4e, %.4e] %s warnings %zu%s%s\n",
             seed, r.est.pf, r.est.cov, r.est.ci[0], r.est.ci[1],
             hit ? "hit" : "MISS", r.nwarnings, r.nwarnings ? ": " : "",
             r.nwarnings ? r.warnings[0] : "");
    if (getenv("SWEEP_DETAILS")) {
      printf("details %d", seed);
      for (size_t i = 0; i < r.ndetails; i++)
        printf(" ;; %s = %.17g", r.details[i].label, r.details[i].value);
      printf("\n");
    }
    if (r.est.pf > 0 && isfinite(r.est.cov)) {
      double lp = log(r.est.pf / exact);
      s_lp += lp;
      s_lp2 += lp * lp;
      s_sl += sqrt(log1p(r.est.cov * r.est.cov));
      s_pf += r.est.pf / exact;
      n++;
      double zq = 1.959963984540054;
      for (size_t i = 0; i < r.ndetails; i++) {
        const char *lab = r.details[i].label;
        if (strncmp(lab, "cov candidate ", 14))
          continue;
        int c = 0;
        while (c < ncand && strcmp(cand[c].name, lab + 14))
          c++;
        if (c == ncand && ncand < MAX_CAND) {
          memset(&cand[c], 0, sizeof cand[c]);
          snprintf(cand[c].name, sizeof cand[c].name, "%s", lab + 14);
          ncand++;
        }
        if (c == MAX_CAND)
          continue;
        double sl = sqrt(log1p(r.details[i].value * r.details[i].value));
        cand[c].sum_sl += sl;
        cand[c].covered += fabs(lp) <= zq * sl;
        cand[c].covered_mean += fabs(lp + sl * sl / 2) <= zq * sl;
      }
    }
    bk_result_close(&r);
    bk_study_free(s);
  }
  problems_teardown();
  double sd = n > 1 ? sqrt(fmax(0, (s_lp2 - s_lp * s_lp / n) / (n - 1))) : NAN;
  struct rusage ru;
  getrusage(RUSAGE_SELF, &ru);
  printf("%s %s %s | %s | ref %.4e | covered %d/%d (low %d high %d) | "
         "warned misses %d | warned %d | errors %d | mean Pf/ref %.3f | "
         "sd ln Pf %.3f stated %.3f ratio %.2f | evals %.0f (max %.0f) | "
         "peak RSS %.0f MiB\n",
         name, a, b, analysis, exact, covered, runs, low, high, warned_miss,
         warned, errors, n ? s_pf / n : NAN, sd, n ? s_sl / n : NAN,
         n ? sd / (s_sl / n) : NAN, evals / runs, max_evals,
         ru.ru_maxrss / 1024.0);
  for (int c = 0; c < ncand; c++)
    printf("  candidate %-24s covered %d/%d (mean-centred %d) stated %.3f "
           "ratio %.2f\n",
           cand[c].name, cand[c].covered, n, cand[c].covered_mean,
           cand[c].sum_sl / n, sd / (cand[c].sum_sl / n));
  return 0;
}
