/*
 * Shared by tests/test_method_cross_entropy.c and tests/test_method_subset.c:
 * studies written to a temporary folder, an evaluator that notes batches,
 * the exact probabilities of tests/fixtures/ref_rare.txt, and a coverage
 * loop over seeds. Included once per test program.
 *
 * SPDX-License-Identifier: MIT
 */
static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-rare-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

static bk_study_t *study_from(const char *fmt, ...) {
  char text[8192];
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(text, sizeof text, fmt, ap);
  va_end(ap);
  char path[512];
  snprintf(path, sizeof path, "%s/study.yaml", dir);
  FILE *f = fopen(path, "w");
  cr_assert(f);
  fputs(text, f);
  fclose(f);
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_study_load(path, &s, &err);
  cr_assert_eq(rc, 0, "%d:%d: %s", err.line, err.col, err.msg);
  return s;
}

/* An evaluator that notes every batch's prefix and size, then evaluates in
 * process; it returns BK_ESTOPPED from batch number stop_at (if > 0). */
typedef struct {
  bk_evaluator_t inner;
  char prefixes[4096];
  size_t sizes[512];
  int nbatches;
  int stop_at;
} spy_t;

static int spy_batch(bk_evaluator_t *ev, const char *prefix, bk_point_t *pts,
                     size_t n, bk_error_t *err) {
  spy_t *sp = ev->data;
  sp->nbatches++;
  if (sp->stop_at && sp->nbatches == sp->stop_at)
    return BK_ESTOPPED;
  size_t l = strlen(sp->prefixes);
  if (l + strlen(prefix) + 2 < sizeof sp->prefixes)
    snprintf(sp->prefixes + l, sizeof sp->prefixes - l, "%s ", prefix);
  if (sp->nbatches <= 512)
    sp->sizes[sp->nbatches - 1] = n;
  return sp->inner.batch(&sp->inner, prefix, pts, n, err);
}

static int run_rc(bk_study_t *s, bk_result_t *r, spy_t *sp) {
  bk_evaluator_t ev;
  bk_error_t err;
  bk_error_clear(&err);
  if (sp) {
    bk_evaluator_inprocess(&sp->inner, s);
    ev.batch = spy_batch;
    ev.data = sp;
  } else {
    bk_evaluator_inprocess(&ev, s);
  }
  return bk_method_run(s, &ev, NULL, r, &err);
}

static void run(bk_study_t *s, bk_result_t *r) {
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_method_run(s, &ev, NULL, r, &err);
  cr_assert_eq(rc, 0, "%s", err.msg);
}

/* A value of tests/fixtures/ref_rare.txt (scipy, tests/ref/gen_rare.py):
 * the last column of the line starting with `kind` and `arg`. */
static double ref_value(const char *kind, const char *arg) {
  const char *fx = getenv("BRINK_FIXTURES");
  cr_assert(fx, "BRINK_FIXTURES must be set");
  char path[600];
  snprintf(path, sizeof path, "%s/ref_rare.txt", fx);
  FILE *f = fopen(path, "r");
  cr_assert(f, "%s", path);
  char line[256];
  double v = NAN;
  size_t kl = strlen(kind), al = strlen(arg);
  while (fgets(line, sizeof line, f)) {
    if (strncmp(line, kind, kl) || line[kl] != ' ' ||
        strncmp(line + kl + 1, arg, al) || line[kl + 1 + al] != ' ')
      continue;
    char *last = strrchr(line, ' ');
    v = strtod(last + 1, NULL);
  }
  fclose(f);
  cr_assert(!isnan(v), "no %s %s in %s", kind, arg, path);
  return v;
}

/* The study texts of the closed-form problems. %d: seed; %s: analysis. */
static const char linear_fmt[] = "seed: %d\n"
                                 "variables:\n"
                                 "  a: {type: normal, mean: 0, sd: 1}\n"
                                 "  b: {type: normal, mean: 0, sd: 1}\n"
                                 "limit_state: %s - (a + b)/sqrt(2)\n"
                                 "analysis: {%s}\n";
static const char two_points_fmt[] = "seed: %d\n"
                                     "variables:\n"
                                     "  a: {type: normal, mean: 0, sd: 1}\n"
                                     "  b: {type: normal, mean: 0, sd: 1}\n"
                                     "limit_state: %s - abs(a)\n"
                                     "analysis: {%s}\n";

static bk_study_t *exp20_study(int seed, const char *t, const char *analysis) {
  char vars[2048] = "", sum[512] = "";
  for (int i = 1; i <= 20; i++) {
    size_t l = strlen(vars);
    snprintf(vars + l, sizeof vars - l, "  x%d: {type: exponential, rate: 1}\n",
             i);
    l = strlen(sum);
    snprintf(sum + l, sizeof sum - l, "%sx%d", i > 1 ? " + " : "", i);
  }
  return study_from("seed: %d\nvariables:\n%slimit_state: %s - (%s)\n"
                    "analysis: {%s}\n",
                    seed, vars, t, sum, analysis);
}

/* Runs `reps` seeds of a problem and returns the fraction of intervals
 * holding `exact`, printing it. */
__attribute__((unused)) static double
coverage(const char *what, const char *fmt, const char *param,
         const char *analysis, double exact, int reps, int is_exp20) {
  int covered = 0;
  double mean = 0;
  uint64_t evals = 0;
  for (int seed = 1; seed <= reps; seed++) {
    bk_study_t *s = is_exp20 ? exp20_study(seed, param, analysis)
                             : study_from(fmt, seed, param, analysis);
    bk_result_t r;
    run(s, &r);
    covered += r.est.ci[0] <= exact && exact <= r.est.ci[1];
    mean += r.est.pf / reps;
    evals += r.evaluations;
    bk_result_close(&r);
    bk_study_free(s);
  }
  double c = (double)covered / reps;
  printf("%-40s exact %.4e mean %.4e coverage %.2f (%d seeds, %.0f "
         "evaluations each)\n",
         what, exact, mean, c, reps, (double)evals / reps);
  return c;
}
