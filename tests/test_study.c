/*
 * Tests of the study loader: a valid study loads with the right values,
 * and every kind of mistake is reported with file:line:col and a message
 * saying what is expected.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "study/study.h"

static char dir[256];
static char path[512];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-study-XXXXXX");
  cr_assert(mkdtemp(dir));
  snprintf(path, sizeof path, "%s/study.yaml", dir);
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(study, .init = setup, .fini = teardown);

static void write_file(const char *name, const char *text) {
  char p[600];
  snprintf(p, sizeof p, "%s/%s", dir, name);
  FILE *f = fopen(p, "w");
  cr_assert(f);
  fputs(text, f);
  fclose(f);
}

static int load(const char *yaml, bk_study_t **s, bk_error_t *err) {
  write_file("study.yaml", yaml);
  bk_error_clear(err);
  return bk_study_load(path, s, err);
}

/* Loads a study that must fail and checks line, column and message. */
static void expect_error(const char *yaml, int line, int col, const char *msg) {
  bk_study_t *s = (bk_study_t *)1;
  bk_error_t err;
  int rc = load(yaml, &s, &err);
  cr_assert_neq(rc, 0, "study loaded but should fail with: %s", msg);
  cr_assert_null(s);
  cr_assert_str_eq(err.path, path);
  cr_expect_eq(err.line, line, "line %d, want %d (%s)", err.line, line,
               err.msg);
  cr_expect_eq(err.col, col, "col %d, want %d (%s)", err.col, col, err.msg);
  cr_expect_str_eq(err.msg, msg);
}

/* Like expect_error, but the message need only contain `part` (for texts
 * composed by the distribution and transformation modules). */
static void expect_error_part(const char *yaml, int line, int col,
                              const char *part) {
  bk_study_t *s = (bk_study_t *)1;
  bk_error_t err;
  int rc = load(yaml, &s, &err);
  cr_assert_neq(rc, 0, "study loaded but should fail with: %s", part);
  cr_expect_eq(err.line, line, "line %d, want %d (%s)", err.line, line,
               err.msg);
  cr_expect_eq(err.col, col, "col %d, want %d (%s)", err.col, col, err.msg);
  cr_expect(strstr(err.msg, part), "message '%s' lacks '%s'", err.msg, part);
}

#define HEAD                                                                   \
  "name: bracket\n"                                                            \
  "seed: 42\n"

Test(study, valid_study_loads) {
  bk_study_t *s;
  bk_error_t err;
  int rc = load(HEAD "variables:\n"
                     "  load: {type: gumbel, mean: 12.5, cov: 0.2}\n"
                     "  res:  {type: lognormal, mean: 30, cov: 7.0E-02}\n"
                     "  k:    {type: constant, value: 1.2}\n"
                     "  w: 3e0\n"
                     "correlations:\n"
                     "  - [load, res, 0.25]\n"
                     "limit_state: \"res - k*load*w/3\"\n"
                     "analysis: {method: sobol, samples: 4096, replicates: 4,"
                     " target_cov: 0.1}\n",
                &s, &err);
  cr_assert_eq(rc, 0, "%s:%d:%d: %s", err.path, err.line, err.col, err.msg);
  cr_assert_str_eq(s->name, "bracket");
  cr_assert_eq(s->seed, 42);
  cr_assert_eq(s->nvars, 4);
  cr_assert_eq(s->vars[0].dist.kind, BK_DIST_GUMBEL);
  cr_assert_float_eq(s->vars[0].dist.mean, 12.5, 1e-12);
  cr_assert_float_eq(s->vars[0].dist.sd, 2.5, 1e-12);
  cr_assert_float_eq(s->vars[1].dist.sd, 30 * 0.07, 1e-12);
  cr_assert_eq(s->vars[3].dist.kind, BK_DIST_CONSTANT);
  cr_assert_eq(bk_transform_nu(s->transform), 2);
  cr_assert_eq(s->ncorr, 1);
  cr_assert_eq(s->analysis.method, BK_METHOD_SOBOL);
  cr_assert_eq(s->analysis.samples, 4096);
  cr_assert_eq(s->analysis.replicates, 4);
  cr_assert_float_eq(s->analysis.target_cov, 0.1, 1e-15);
  char folder[600];
  snprintf(folder, sizeof folder, "%s/runs/bracket", dir);
  cr_assert_str_eq(s->run.folder, folder);
  double x[4] = {12, 30, 1.2, 3};
  cr_assert_float_eq(bk_expr_eval(s->g, x), 30 - 1.2 * 12, 1e-12);
  bk_study_free(s);
}

Test(study, fingerprint_ignores_run_settings_but_not_the_model) {
  bk_study_t *a, *b, *c;
  bk_error_t err;
  const char *base = HEAD "variables: {x: {type: normal, mean: 1, sd: 2}}\n"
                          "limit_state: 3 - x\n"
                          "analysis: {samples: 100}\n";
  cr_assert_eq(load(base, &a, &err), 0);
  cr_assert_eq(load(HEAD "variables: {x: {type: normal, mean: 1, sd: 2}}\n"
                         "limit_state: 3 - x\n"
                         "analysis: {samples: 100, target_cov: 0.5}\n"
                         "run: {slots: 3}\n",
                    &b, &err),
               0);
  cr_assert_eq(load(HEAD "variables: {x: {type: normal, mean: 1, sd: 2.5}}\n"
                         "limit_state: 3 - x\n"
                         "analysis: {samples: 100}\n",
                    &c, &err),
               0);
  cr_assert_str_eq(a->digest_study, b->digest_study);
  cr_assert_str_neq(a->digest_study, c->digest_study);
  bk_study_free(a);
  bk_study_free(b);
  bk_study_free(c);
}

Test(study, malformed_yaml) {
  expect_error(HEAD "variables:\n  x: {type: normal, mean: 1\n", 5, 1,
               "malformed YAML: did not find expected ',' or '}' while "
               "parsing a flow mapping");
}

Test(study, unknown_top_level_key) {
  expect_error(HEAD "variabels: {}\n", 3, 1,
               "unknown key 'variabels' in the study file; expected one of: "
               "name, seed, variables, correlations, model, limit_state, "
               "limit_states, system, analysis, run");
}

Test(study, duplicated_key) {
  expect_error(HEAD "variables:\n"
                    "  x: {type: normal, mean: 1, sd: 1}\n"
                    "  x: {type: normal, mean: 2, sd: 1}\n"
                    "limit_state: x\n",
               5, 3, "duplicate key 'x' in variables (first given on line 4)");
}

Test(study, wrong_type_for_number) {
  expect_error(HEAD "variables:\n"
                    "  x: {type: normal, mean: heavy, sd: 1}\n"
                    "limit_state: x\n",
               4, 27, "mean of variable 'x' must be a number, got 'heavy'");
}

Test(study, wrong_type_for_mapping) {
  expect_error(HEAD "variables: [x, y]\n", 3, 12,
               "variables must be a mapping (name: value lines), got a list");
}

Test(study, unknown_distribution) {
  expect_error_part(HEAD "variables:\n"
                         "  x: {type: gauss, mean: 1, sd: 1}\n"
                         "limit_state: x\n",
                    4, 13,
                    "unknown distribution type 'gauss'; expected one of "
                    "normal, lognormal,");
}

Test(study, unknown_parameter) {
  expect_error_part(HEAD "variables:\n"
                         "  x: {type: normal, mean: 1, stdev: 1}\n"
                         "limit_state: x\n",
                    4, 30,
                    "unknown key 'stdev' in variable 'x'; expected one of: "
                    "type, mean, sd, cov");
}

Test(study, cov_must_be_positive) {
  expect_error_part(HEAD "variables:\n"
                         "  x: {type: lognormal, mean: 10, cov: -0.1}\n"
                         "limit_state: x\n",
                    4, 34, "variable 'x' (lognormal): ");
  bk_study_t *s;
  bk_error_t err;
  load(HEAD "variables:\n"
            "  x: {type: lognormal, mean: 10, cov: -0.1}\n"
            "limit_state: x\n",
       &s, &err);
  cr_expect(strstr(err.msg, "cov"), "%s", err.msg);
}

Test(study, sd_missing) {
  expect_error_part(HEAD "variables:\n"
                         "  x: {type: normal, mean: 10}\n"
                         "limit_state: x\n",
                    4, 6, "variable 'x' (normal): ");
}

Test(study, lower_not_below_upper) {
  expect_error_part(HEAD "variables:\n"
                         "  x: {type: uniform, lower: 5, upper: 2}\n"
                         "limit_state: x\n",
                    4, 32, "variable 'x' (uniform): lower must be < upper");
}

Test(study, missing_type) {
  expect_error_part(HEAD "variables:\n"
                         "  x: {mean: 10, sd: 1}\n"
                         "limit_state: x\n",
                    4, 6, "variable 'x' needs a type: one of normal,");
}

Test(study, unknown_variable_in_correlation) {
  expect_error(HEAD "variables:\n"
                    "  x: {type: normal, mean: 1, sd: 1}\n"
                    "  y: {type: normal, mean: 1, sd: 1}\n"
                    "correlations:\n"
                    "  - [x, z, 0.5]\n"
                    "limit_state: x - y\n",
               7, 9, "unknown variable 'z' in a correlation");
}

Test(study, correlation_out_of_range) {
  expect_error(HEAD "variables:\n"
                    "  x: {type: normal, mean: 1, sd: 1}\n"
                    "  y: {type: normal, mean: 1, sd: 1}\n"
                    "correlations:\n"
                    "  - [x, y, 1.5]\n"
                    "limit_state: x - y\n",
               7, 12,
               "correlation of x and y must lie strictly between -1 and 1 "
               "(got 1.5)");
}

Test(study, correlation_matrix_not_positive_definite) {
  expect_error_part(HEAD "variables:\n"
                         "  a: {type: normal, mean: 1, sd: 1}\n"
                         "  b: {type: normal, mean: 1, sd: 1}\n"
                         "  c: {type: normal, mean: 1, sd: 1}\n"
                         "correlations:\n"
                         "  - [a, b, 0.9]\n"
                         "  - [b, c, 0.9]\n"
                         "  - [a, c, -0.9]\n"
                         "limit_state: a + b + c\n",
                    8, 3, "correlations: ");
  bk_study_t *s;
  bk_error_t err;
  load(HEAD "variables:\n"
            "  a: {type: normal, mean: 1, sd: 1}\n"
            "  b: {type: normal, mean: 1, sd: 1}\n"
            "  c: {type: normal, mean: 1, sd: 1}\n"
            "correlations:\n"
            "  - [a, b, 0.9]\n"
            "  - [b, c, 0.9]\n"
            "  - [a, c, -0.9]\n"
            "limit_state: a + b + c\n",
       &s, &err);
  cr_expect(strstr(err.msg, "positive definite"), "%s", err.msg);
}

Test(study, unknown_name_in_limit_state) {
  bk_study_t *s;
  bk_error_t err;
  int rc = load(HEAD "variables:\n"
                     "  capacity: {type: normal, mean: 10, sd: 1}\n"
                     "  demand: {type: normal, mean: 5, sd: 1}\n"
                     "limit_state: \"capacity - demnd\"\n",
                &s, &err);
  cr_assert_neq(rc, 0);
  cr_expect_eq(err.line, 6);
  /* The column of the unknown name inside the quoted scalar. */
  cr_expect_eq(err.col, 26, "col %d: %s", err.col, err.msg);
  cr_expect(strncmp(err.msg, "limit_state: unknown name 'demnd'", 33) == 0,
            "%s", err.msg);
  cr_expect(strstr(err.msg, "demand"), "suggests the nearest name: %s",
            err.msg);
}

Test(study, limit_state_missing) {
  expect_error(HEAD "variables:\n"
                    "  x: {type: normal, mean: 1, sd: 1}\n",
               1, 1,
               "the study file needs 'limit_state', an expression that is "
               "<= 0 on failure, e.g. \"r - s\" (or 'limit_states', several "
               "by name)");
}

Test(study, samples_or_target_needed) {
  expect_error(HEAD "variables: {x: {type: normal, mean: 1, sd: 1}}\n"
                    "limit_state: x\n"
                    "analysis: {method: random}\n",
               5, 11,
               "give analysis.samples (the number of evaluations) or "
               "analysis.target_cov (stop once the estimate is that "
               "precise)");
}

Test(study, lhs_needs_samples_at_least_replicates) {
  expect_error(HEAD "variables: {x: {type: normal, mean: 1, sd: 1}}\n"
                    "limit_state: x\n"
                    "analysis: {method: lhs, samples: 4, replicates: 8}\n",
               5, 34,
               "analysis.samples (4) must be at least the number of "
               "replicates (8)");
}

Test(study, unknown_method) {
  expect_error(HEAD "variables: {x: {type: normal, mean: 1, sd: 1}}\n"
                    "limit_state: x\n"
                    "analysis: {method: montecarlo, samples: 10}\n",
               5, 20,
               "unknown method 'montecarlo'; expected one of random, lhs, "
               "sobol, form, importance, cross-entropy, subset, surrogate");
}

Test(study, empty_file) {
  expect_error("", 1, 1, "the study file is empty; start from `brink init`");
}

Test(study, missing_file) {
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_neq(bk_study_load("/nonexistent/study.yaml", &s, &err), 0);
  cr_assert_str_eq(err.msg,
                   "cannot read the study file: no such file or directory");
}

Test(study, numbers_are_c_literals) {
  bk_study_t *s;
  bk_error_t err;
  int rc = load(HEAD "variables:\n"
                     "  e: {type: normal, mean: 7.0E+10, sd: 7e9}\n"
                     "  f: {type: normal, mean: 1e-3, sd: .5e-4}\n"
                     "limit_state: e*f\n"
                     "analysis: {samples: 1e3}\n",
                &s, &err);
  cr_assert_eq(rc, 0, "%s", err.msg);
  cr_assert_float_eq(s->vars[0].dist.mean, 7e10, 1);
  cr_assert_float_eq(s->vars[1].dist.sd, 5e-5, 1e-18);
  cr_assert_eq(s->analysis.samples, 1000);
  bk_study_free(s);
}

Test(study, paths_are_relative_to_the_study_and_normalized) {
  bk_study_t *s;
  bk_error_t err;
  int rc = load("variables: {x: {type: normal, mean: 1, sd: 1}}\n"
                "limit_state: x\n"
                "analysis: {samples: 10}\n"
                "run: {folder: ../out/./a/../b}\n",
                &s, &err);
  cr_assert_eq(rc, 0, "%s", err.msg);
  char want[600];
  snprintf(want, sizeof want, "%.*s/out/b", (int)(strrchr(dir, '/') - dir),
           dir);
  cr_assert_str_eq(s->run.folder, want);
  bk_study_free(s);
}

/* ---- the documentation of the study file ---------------------------- */

typedef struct {
  const char *doc;
  char missing[4096];
  int nkeys;
} doc_check_t;

static void check_key(const char *key, void *data) {
  doc_check_t *c = data;
  char quoted[160];
  snprintf(quoted, sizeof quoted, "`%s`", key);
  c->nkeys++;
  if (!strstr(c->doc, quoted)) {
    strncat(c->missing, " ", sizeof c->missing - strlen(c->missing) - 1);
    strncat(c->missing, key, sizeof c->missing - strlen(c->missing) - 1);
  }
}

/* Every key the loader accepts (its own key lists, bk_study_keys) appears
 * in docs/study-file.md as `the.dotted.path`, and so does every method
 * and distribution name. */
Test(study, every_key_is_documented) {
  char p[1024];
  snprintf(p, sizeof p, "%s/docs/study-file.md", getenv("BRINK_SOURCE_ROOT"));
  FILE *f = fopen(p, "r");
  cr_assert(f, "cannot open %s", p);
  static char doc[1 << 18];
  size_t n = fread(doc, 1, sizeof doc - 1, f);
  fclose(f);
  doc[n] = '\0';
  doc_check_t c = {doc, "", 0};
  bk_study_keys(check_key, &c);
  cr_assert_gt(c.nkeys, 50);
  for (int m = 0; m < BK_METHOD__COUNT; m++)
    check_key(bk_study_method_name((bk_method_kind_t)m), &c);
  for (int d = 0; d < BK_DIST__COUNT; d++)
    check_key(bk_dist_name((bk_dist_kind_t)d), &c);
  cr_assert_str_eq(c.missing, "", "not in docs/study-file.md:%s", c.missing);
}

/* The key lists are the loader's own: a key missing from them is refused,
 * and each listed one is accepted where it stands. */
Test(study, the_key_lists_are_the_ones_the_loader_uses) {
  bk_study_t *s;
  bk_error_t err;
  int rc = load("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
                "limit_state: x\n"
                "analysis:\n"
                "  method: form\n"
                "  form: {step: 1e-3, differences: central, max_iterations: "
                "50, tolerance: 1e-4, sorm: true, explore: false, searches: "
                "3, probe: 0}\n"
                "  importance: {center: {x: 1}, defensive: 0}\n"
                "  cross_entropy: {components: 2, rho: 0.2, max_steps: 5}\n"
                "  subset: {p0: 0.2, max_levels: 5}\n"
                "run: {folder: out, slots: 1, scratch: /tmp}\n",
                &s, &err);
  cr_assert_eq(rc, 0, "%d:%d: %s", err.line, err.col, err.msg);
  bk_study_free(s);
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "analysis: {subset: {p1: 0.2}}\n",
               3, 21,
               "unknown key 'p1' in analysis.subset; expected one of: p0, "
               "max_levels");
}

/* The exploration keys and the defensive share: defaults, the values
 * given, and each refusal with its place and what is valid. */
Test(study, exploration_and_defensive_share_keys) {
  bk_study_t *s;
  bk_error_t err;
  int rc = load("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
                "limit_state: x\n"
                "analysis: {method: importance}\n",
                &s, &err);
  cr_assert_eq(rc, 0, "%s", err.msg);
  cr_expect_eq(s->analysis.form.explore, 1);
  cr_expect_eq(s->analysis.form.searches, 0); /* by dimension */
  cr_expect_eq(s->analysis.form.probe, -1);   /* by dimension */
  cr_expect_eq(s->analysis.importance.defensive, 0.1);
  char d1[33];
  snprintf(d1, sizeof d1, "%s", s->digest_study);
  bk_study_free(s);
  rc = load("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
            "limit_state: x\n"
            "analysis: {method: importance, form: {explore: false, "
            "searches: 5, probe: 12}, importance: {defensive: 0.25}}\n",
            &s, &err);
  cr_assert_eq(rc, 0, "%s", err.msg);
  cr_expect_eq(s->analysis.form.explore, 0);
  cr_expect_eq(s->analysis.form.searches, 5);
  cr_expect_eq(s->analysis.form.probe, 12);
  cr_expect_eq(s->analysis.importance.defensive, 0.25);
  /* They change the keys' points, so they are part of the fingerprint. */
  cr_expect_str_neq(s->digest_study, d1);
  bk_study_free(s);
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "analysis: {form: {explore: maybe}}\n",
               3, 28,
               "analysis.form.explore must be true or false; got 'maybe'");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "analysis: {form: {searches: 0}}\n",
               3, 29,
               "analysis.form.searches must be a whole number >= 1, got '0'");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "analysis: {form: {searches: 65}}\n",
               3, 29, "analysis.form.searches must be at most 64 (got 65)");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "analysis: {form: {probe: -1}}\n",
               3, 26,
               "analysis.form.probe must be a whole number >= 0, got '-1'");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "analysis: {importance: {defensive: 1}}\n",
               3, 36,
               "analysis.importance.defensive must lie in [0, 1) (got 1), "
               "e.g. 0.1");
}

/* Several limit states: the modes in the order written, the system's g as
 * the minimum (series), the maximum (parallel) or an expression over the
 * names; each mode's value comes back through gc. */
Test(study, several_limit_states_and_their_system) {
  static const char *const systems[] = {"", "system: parallel\n",
                                        "system: \"min(b, max(a, 2*b))\"\n"};
  /* At x = 3, y = -1: a = x + y = 2 and b = x*y = -3, so series
   * min(2, -3) = -3, parallel max(2, -3) = 2, and min(b, max(a, 2*b)) =
   * min(-3, max(2, -6)) = -3. */
  double vals[2] = {3.0, -1.0};
  double want[] = {-3.0, 2.0, -3.0};
  for (int k = 0; k < 3; k++) {
    char yaml[512];
    snprintf(yaml, sizeof yaml,
             "variables:\n"
             "  x: {type: normal, mean: 3, sd: 1}\n"
             "  y: {type: normal, mean: 1, sd: 1}\n"
             "limit_states:\n"
             "  a: \"x + y\"\n"
             "  b: \"x*y\"\n"
             "analysis: {method: random, samples: 100}\n"
             "%s",
             systems[k]);
    bk_study_t *s;
    bk_error_t err;
    int rc = load(yaml, &s, &err);
    cr_assert_eq(rc, 0, "%d:%d: %s", err.line, err.col, err.msg);
    cr_assert_eq(s->nmodes, 2);
    cr_assert_null(s->g);
    cr_assert_str_eq(s->modes[0].name, "a");
    cr_assert_str_eq(s->modes[1].name, "b");
    cr_assert_str_eq(s->modes[1].text, "x*y");
    cr_assert_eq(s->system, k == 0   ? BK_SYSTEM_SERIES
                            : k == 1 ? BK_SYSTEM_PARALLEL
                                     : BK_SYSTEM_EXPR);
    double gc[2];
    double g = bk_study_g(s, vals, gc);
    cr_expect_eq(gc[0], 2.0);
    cr_expect_eq(gc[1], -3.0);
    cr_expect_eq(g, want[k], "system %d: g %g, want %g", k, g, want[k]);
    cr_expect_eq(bk_study_g(s, vals, NULL), g);
    /* A mode that is not a number makes a series or parallel system not a
     * number (as min and max do in an expression). */
    double nanv[2] = {NAN, 1.0};
    if (k < 2)
      cr_expect(isnan(bk_study_g(s, nanv, NULL)));
    bk_study_free(s);
  }
}

/* The fingerprint holds each mode's expression and the system. */
Test(study, fingerprint_holds_the_modes_and_the_system) {
  const char *yaml[] = {"variables: {x: {type: normal, mean: 3, sd: 1}}\n"
                        "limit_states: {a: \"x\", b: \"x - 1\"}\n",
                        "variables: {x: {type: normal, mean: 3, sd: 1}}\n"
                        "limit_states: {a: \"x\", b: \"x - 2\"}\n",
                        "variables: {x: {type: normal, mean: 3, sd: 1}}\n"
                        "limit_states: {a: \"x\", b: \"x - 1\"}\n"
                        "system: parallel\n"};
  char *d[3];
  char text[400];
  for (int i = 0; i < 3; i++) {
    bk_study_t *s;
    bk_error_t err;
    snprintf(text, sizeof text, "%sanalysis: {method: random, samples: 9}\n",
             yaml[i]);
    cr_assert_eq(load(text, &s, &err), 0, "%s", err.msg);
    d[i] = strdup(s->digest_study);
    bk_study_free(s);
  }
  cr_expect_str_neq(d[0], d[1]);
  cr_expect_str_neq(d[0], d[2]);
  for (int i = 0; i < 3; i++)
    free(d[i]);
}

Test(study, several_limit_states_refused_with_place_and_reason) {
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "limit_states: {a: x}\n",
               3, 15,
               "give either 'limit_state' (one) or 'limit_states' "
               "(several, by name), not both");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_state: x\n"
               "system: series\n",
               3, 9,
               "'system' combines the entries of 'limit_states'; with one "
               "'limit_state' leave it out");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_states: {x: \"x - 1\"}\n",
               2, 16,
               "limit state name 'x' is already the name of a variable; give "
               "it another name");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_states: {series: \"x - 1\"}\n",
               2, 16,
               "'series' names a kind of system; give the limit state "
               "another name");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_states: {g: \"x - 1\"}\n",
               2, 16,
               "'g' names a column of `brink export`; give the limit state "
               "another name");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_states: {\"two words\": \"x - 1\"}\n",
               2, 16,
               "limit state name 'two words' must start with a letter or "
               "'_' and hold only letters, digits and '_' (the system "
               "expression uses it)");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_states: {}\n",
               2, 15,
               "limit_states needs at least one entry, e.g. limit_states: "
               "{bending: \"r - s\"}");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_states: {a: \"x - 1\", b: 5}\n"
               "system: \"min(a, c)\"\n",
               3, 17,
               "system (series, parallel, or an expression over the "
               "limit_states names): unknown name 'c'; known names: a, b");
  expect_error("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
               "limit_states: {a: \"x - 1\", b: 5}\n"
               "system: \"min(a, b)\"\n"
               "analysis: {method: form}\n",
               3, 9,
               "FORM gives first-order bounds for a series or a parallel "
               "system only; for a system written as an expression use a "
               "sampling method (random, lhs, sobol) or importance, "
               "cross-entropy, subset");
  expect_error_part("variables: {x: {type: normal, mean: 3, sd: 1}}\n"
                    "limit_states:\n"
                    "  a: \"x - 1\"\n"
                    "  b: \"x - yy\"\n",
                    4, 11, "limit_states.b: unknown name 'yy'");
}

#define SMALL                                                                  \
  HEAD "variables:\n"                                                          \
       "  a: {type: normal, mean: 0, sd: 1}\n"                                 \
       "limit_state: 3 - a\n"                                                  \
       "analysis: {method: random, samples: 10}\n"

Test(study, run_resources_and_their_defaults) {
  bk_study_t *s;
  bk_error_t err;
  unsetenv("PBS_NODEFILE");
  cr_assert_eq(load(SMALL, &s, &err), 0, "%s", err.msg);
  cr_assert_eq(s->run.threads, 1);
  cr_assert_eq(s->run.ranks, 1);
  cr_assert_eq(s->run.cores, 1);
  cr_assert_eq(s->run.launch, BK_LAUNCH_DIRECT);
  cr_assert_eq(s->run.slots_given, 0);
  int here = bk_study_machine_cores();
  cr_assert_eq(s->run.slots, here);
  bk_study_free(s);
  /* Slots default to the cores over the cores of one run, at least 1. */
  cr_assert_eq(
      load(SMALL "run: {threads: 2, ranks: 3, launch: srun}\n", &s, &err), 0,
      "%s", err.msg);
  cr_assert_eq(s->run.cores, 6);
  cr_assert_eq(s->run.launch, BK_LAUNCH_SRUN);
  cr_assert_eq(s->run.slots, here / 6 > 0 ? here / 6 : 1);
  bk_study_default_slots(s, 64);
  cr_assert_eq(s->run.slots, 10);
  bk_study_default_slots(s, 5);
  cr_assert_eq(s->run.slots, 1);
  bk_study_free(s);
  /* Given slots stay. */
  cr_assert_eq(load(SMALL "run: {threads: 16, slots: 3}\n", &s, &err), 0);
  bk_study_default_slots(s, 64);
  cr_assert_eq(s->run.slots, 3);
  bk_study_free(s);
  /* A PBS host list: its lines x threads. */
  write_file("nodes", "n1\nn1\n\nn2\nn2\n");
  char nodes[600];
  snprintf(nodes, sizeof nodes, "%s/nodes", dir);
  setenv("PBS_NODEFILE", nodes, 1);
  cr_assert_eq(load(SMALL "run: {ranks: 2}\n", &s, &err), 0);
  cr_assert_eq(s->run.slots, 2);
  bk_study_free(s);
  unsetenv("PBS_NODEFILE");
}

Test(study, run_resources_are_checked) {
  expect_error(SMALL "run: {threads: 0}\n", 7, 16,
               "run.threads must be a whole number >= 1, got '0'");
  expect_error(SMALL "run: {ranks: 70000}\n", 7, 14,
               "run.ranks must be at most 65536");
  expect_error(SMALL "run: {launch: mpirun}\n", 7, 15,
               "run.launch must be direct or srun; got 'mpirun'");
  expect_error_part(SMALL "model:\n  command: [sh, x]\n  inherit: ['A B']\n", 9,
                    13, "model.inherit takes variable names or prefixes");
}

Test(study, allocation_cores_from_slurm) {
  setenv("SLURM_JOB_ID", "12", 1);
  setenv("SLURM_JOB_CPUS_PER_NODE", "4(x2),2", 1);
  cr_assert_eq(bk_study_allocation_cores(), 10);
  setenv("SLURM_JOB_CPUS_PER_NODE", "64", 1);
  cr_assert_eq(bk_study_allocation_cores(), 64);
  setenv("SLURM_JOB_CPUS_PER_NODE", "4(x2", 1);
  cr_assert_eq(bk_study_allocation_cores(), 0);
  unsetenv("SLURM_JOB_ID");
  cr_assert_eq(bk_study_allocation_cores(), 0);
  unsetenv("SLURM_JOB_CPUS_PER_NODE");
}
