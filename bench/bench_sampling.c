/*
 * Benchmark: sampling plus limit-state evaluation of an analytic study, in
 * process, with no records. Prints evaluations per second of wall time and
 * of the process's CPU time, and the peak resident memory, so that runs at
 * several sizes show whether memory stays flat. On a machine shared with
 * other work the CPU-time rate is the steadier one: it leaves out the time
 * the process waited for a core, though not the slowdown from sharing
 * caches. Usage: bench_sampling STUDY.yaml SAMPLES
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

static double seconds(struct timespec a, struct timespec b) {
  return (double)(b.tv_sec - a.tv_sec) + 1e-9 * (double)(b.tv_nsec - a.tv_nsec);
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
  if (s->analysis.method != BK_METHOD_RANDOM && n < s->analysis.replicates)
    s->analysis.replicates = 1;
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  bk_result_t r;
  struct timespec t0, t1, c0, c1;
  clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &c0);
  clock_gettime(CLOCK_MONOTONIC, &t0);
  int rc = bk_method_run(s, &ev, NULL, &r, &err);
  clock_gettime(CLOCK_MONOTONIC, &t1);
  clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &c1);
  if (rc) {
    bk_error_print(&err, stderr);
    return 1;
  }
  double sec = seconds(t0, t1), cpu = seconds(c0, c1);
  double ne = (double)r.evaluations;
  printf("%s %llu evaluations %.3f s %.2f M/s peak_rss_kb %ld pf %.6e "
         "cpu %.3f s %.2f M/s\n",
         bk_study_method_name(s->analysis.method), (unsigned long long)r.evaluations,
         sec, ne / sec / 1e6, peak_kb(), r.est.pf, cpu, ne / cpu / 1e6);
  bk_result_close(&r);
  bk_study_free(s);
  return 0;
}
