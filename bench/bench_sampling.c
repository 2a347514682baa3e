/*
 * Benchmark: sampling plus limit-state evaluation of an analytic study, in
 * process, with no records. Prints evaluations per second and the peak
 * resident memory, so that runs at several sizes show whether memory stays
 * flat. Usage: bench_sampling STUDY.yaml SAMPLES
 *
 * SPDX-License-Identifier: MIT
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "methods/method.h"
#include "study/study.h"

static long peak_kb(void) {
  FILE *f = fopen("/proc/self/status", "r");
  char line[256];
  long kb = -1;
  while (f && fgets(line, sizeof line, f))
    if (strncmp(line, "VmHWM:", 6) == 0)
      kb = atol(line + 6);
  if (f)
    fclose(f);
  return kb;
}

int main(int argc, char **argv) {
  if (argc != 3) {
    fprintf(stderr, "usage: %s STUDY.yaml SAMPLES\n", argv[0]);
    return 2;
  }
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  if (bk_study_load(argv[1], &s, &err)) {
    bk_error_print(&err, stderr);
    return 2;
  }
  uint64_t n = (uint64_t)strtod(argv[2], NULL);
  s->analysis.samples = n;
  s->analysis.max_evaluations = n;
  s->analysis.target_cov = 0;
  if (s->analysis.method != BK_METHOD_RANDOM &&
      n < s->analysis.replicates)
    s->analysis.replicates = 1;
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  bk_result_t r;
  struct timespec t0, t1;
  clock_gettime(CLOCK_MONOTONIC, &t0);
  int rc = bk_method_run(s, &ev, NULL, &r, &err);
  clock_gettime(CLOCK_MONOTONIC, &t1);
  if (rc) {
    bk_error_print(&err, stderr);
    return 1;
  }
  double sec = (double)(t1.tv_sec - t0.tv_sec) + 1e-9 * (double)(t1.tv_nsec - t0.tv_nsec);
  printf("%s %llu evaluations %.3f s %.2f M/s peak_rss_kb %ld pf %.6e\n",
         bk_method_name(s->analysis.method), (unsigned long long)r.evaluations,
         sec, (double)r.evaluations / sec / 1e6, peak_kb(), r.est.pf);
  bk_result_close(&r);
  bk_study_free(s);
  return 0;
}
