/*
 * Tests of the reports: the JSON summary's keys and values, the text
 * report's caution, the SVG writer's ticks and labels, and the HTML report
 * of an in-process study (its charts and the numbers they carry).
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "base/buf.h"
#include "methods/method.h"
#include "reports/report.h"
#include "study/study.h"
#include "reports/svg.h"

static char dir[256];

static void setup(void) {
  snprintf(dir, sizeof dir, "/tmp/bk-test-report-XXXXXX");
  cr_assert(mkdtemp(dir));
}

static void teardown(void) {
  char cmd[600];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
  cr_assert_eq(system(cmd), 0);
}

TestSuite(report, .init = setup, .fini = teardown, .timeout = 60);

Test(report, ticks_are_round_and_cover_the_range) {
  double t[32];
  size_t n = bk_svg_ticks(0, 1, 5, t, 32);
  cr_assert_eq(n, 6);
  for (size_t i = 0; i < n; i++)
    cr_assert_float_eq(t[i], 0.2 * (double)i, 1e-15);
  n = bk_svg_ticks(-103.7, 352.1, 6, t, 32);
  cr_assert_eq(t[0], -100);
  cr_assert_eq(t[n - 1], 300);
  cr_assert_eq(t[1] - t[0], 100);
  /* Snapped: no 0.30000000000000004, and zero is exactly zero. */
  n = bk_svg_ticks(-0.25, 0.35, 6, t, 32);
  int zero = 0;
  for (size_t i = 0; i < n; i++)
    zero |= t[i] == 0;
  cr_assert(zero);
  cr_assert_eq(bk_svg_step(0, 2000, 6), 200);
  cr_assert_eq(bk_svg_step(0, 0.006, 6), 0.001);
}

Test(report, tick_labels_are_short) {
  char b[32];
  bk_svg_format(b, sizeof b, 0.3, 0.1);
  cr_assert_str_eq(b, "0.3");
  bk_svg_format(b, sizeof b, 1e-4, 0);
  cr_assert_str_eq(b, "1e-4");
  bk_svg_format(b, sizeof b, 0.02, 0);
  cr_assert_str_eq(b, "0.02");
  bk_svg_format(b, sizeof b, 250000, 50000);
  cr_assert_str_eq(b, "2.5e5");
  bk_svg_format(b, sizeof b, 1200, 200);
  cr_assert_str_eq(b, "1200");
  bk_svg_format(b, sizeof b, 0, 1);
  cr_assert_str_eq(b, "0");
}

Test(report, svg_text_is_escaped) {
  bk_buf_t o;
  bk_buf_init(&o);
  bk_svg_escape(&o, "g <= 0 & \"a\" > b");
  cr_assert_str_eq(o.data, "g &lt;= 0 &amp; &quot;a&quot; &gt; b");
  bk_buf_close(&o);
}

static bk_study_t *load(const char *text) {
  char p[400];
  snprintf(p, sizeof p, "%s/s.yaml", dir);
  FILE *f = fopen(p, "w");
  cr_assert(f);
  fputs(text, f);
  fclose(f);
  bk_study_t *s;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_study_load(p, &s, &err), 0, "%s", err.msg);
  return s;
}

/* R - S with R ~ N(5, 1), S ~ N(2, 1): beta = 3 / sqrt(2) = 2.1213,
 * Pf = Phi(-2.1213) = 0.016947 (Cornell 1969; scipy.stats.norm.cdf). */
static const char study[] = "name: rs\n"
                            "seed: 3\n"
                            "variables:\n"
                            "  R: {type: normal, mean: 5, sd: 1}\n"
                            "  S: {type: normal, mean: 2, sd: 1}\n"
                            "limit_state: R - S\n"
                            "analysis: {method: random, samples: 30000,"
                            " target_beta: 2.5}\n"
                            "run: {folder: out}\n";

static void run_study(bk_study_t *s, bk_result_t *r) {
  bk_evaluator_t ev;
  bk_evaluator_inprocess(&ev, s);
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_method_run(s, &ev, NULL, r, &err), 0, "%s", err.msg);
}

Test(report, json_has_the_fixed_keys_and_the_study_path) {
  bk_study_t *s = load(study);
  bk_result_t r;
  run_study(s, &r);
  bk_buf_t o;
  bk_buf_init(&o);
  cr_assert_eq(bk_report_json(s, &r, &o), 0);
  const char *keys[] = {
      "\"pf\"",           "\"beta\"",      "\"cov\"",         "\"ci\"",
      "\"ci_level\"",     "\"ci_method\"", "\"evaluations\"", "\"failures\"",
      "\"model_errors\"", "\"excluded\"",  "\"pf_bounds\"",   "\"method\"",
      "\"seed\"",         "\"study\"",     "\"history\"",     "\"target_beta\"",
      "\"fingerprint\"",  "\"caution\""};
  for (size_t i = 0; i < sizeof keys / sizeof keys[0]; i++)
    cr_assert(strstr(o.data, keys[i]), "no %s", keys[i]);
  cr_assert(strstr(o.data, "\"evaluations\": 30000"));
  char *abs = realpath(s->path, NULL);
  cr_assert(strstr(o.data, abs));
  free(abs);
  /* 30000 samples: Pf within 5 binomial sd of Phi(-2.1213) = 0.016947. */
  cr_assert(fabs(r.est.pf - 0.016947) < 5 * sqrt(0.016947 / 30000));
  bk_buf_close(&o);
  bk_buf_init(&o);
  cr_assert_eq(bk_report_text(s, &r, &o), 0);
  cr_assert(strstr(o.data, "licensed engineer"));
  cr_assert(strstr(o.data, "target beta          2.50: not met"));
  bk_buf_close(&o);
  bk_result_close(&r);
  bk_study_free(s);
}

Test(report, html_charts_carry_the_numbers_of_the_run) {
  bk_study_t *s = load(study);
  bk_result_t r;
  run_study(s, &r);
  bk_buf_t json, html;
  bk_buf_init(&json);
  bk_buf_init(&html);
  bk_report_json(s, &r, &json);
  char p[400];
  snprintf(p, sizeof p, "%s/report.json", dir);
  FILE *f = fopen(p, "w");
  fputs(json.data, f);
  fclose(f);
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_report_html(dir, s, &html, &err), 0, "%s", err.msg);
  const char *h = html.data;
  /* One batch of 30000 in process: a single estimate, no curve. */
  cr_assert_eq(r.nhistory, 1);
  cr_assert_null(strstr(h, "data-chart=\"convergence\""));
  cr_assert(strstr(h, "single estimate"));
  cr_assert(strstr(h, "data-chart=\"g-histogram\""));
  cr_assert(strstr(h, "data-chart=\"influence\""));
  cr_assert(strstr(h, "data-chart=\"scatter\""));
  /* In process: no records, so no run times and no error table. */
  cr_assert_null(strstr(h, "data-chart=\"run-times\""));
  cr_assert_null(strstr(h, "data-table=\"model-errors\""));
  /* The histogram holds the first 20000 evaluations of the design; its
   * failure bins hold exactly the failures among them. */
  size_t total = 0, fails = 0;
  for (const char *q = strstr(h, "data-lo="); q;
       q = strstr(q + 1, "data-lo=")) {
    double lo, hi;
    size_t c;
    cr_assert_eq(sscanf(q, "data-lo=\"%lf\" data-hi=\"%lf\" data-count=\"%zu\"",
                        &lo, &hi, &c),
                 3);
    total += c;
    if (hi <= 0)
      fails += c;
  }
  cr_assert_eq(total, 20000);
  /* Independently: the same first 20000 points through a fresh run of
   * the method capped at 20000 samples (random sampling: point i is the
   * same whatever the total). */
  bk_study_t *s2 = load("name: rs\n"
                        "seed: 3\n"
                        "variables:\n"
                        "  R: {type: normal, mean: 5, sd: 1}\n"
                        "  S: {type: normal, mean: 2, sd: 1}\n"
                        "limit_state: R - S\n"
                        "analysis: {method: random, samples: 20000}\n"
                        "run: {folder: out}\n");
  bk_result_t r2;
  run_study(s2, &r2);
  cr_assert_eq(fails, r2.est.failures);
  /* Both inputs drive failure: R low (negative shift), S high. */
  const char *bar = strstr(h, "data-var=\"R\" data-value=\"");
  cr_assert(bar);
  cr_assert_lt(strtod(bar + strlen("data-var=\"R\" data-value=\""), NULL), 0);
  bar = strstr(h, "data-var=\"S\" data-value=\"");
  cr_assert(bar);
  cr_assert_gt(strtod(bar + strlen("data-var=\"S\" data-value=\""), NULL), 0);
  cr_assert(strstr(h, "licensed engineer"));
  cr_assert(strstr(h, "not met"));
  bk_result_close(&r2);
  bk_study_free(s2);
  bk_buf_close(&json);
  bk_buf_close(&html);
  bk_result_close(&r);
  bk_study_free(s);
}

Test(report, html_without_a_result_says_what_to_do) {
  bk_study_t *s = load(study);
  bk_buf_t html;
  bk_buf_init(&html);
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_neq(bk_report_html(dir, s, &html, &err), 0);
  cr_assert(strstr(err.msg, "brink run"), "%s", err.msg);
  bk_buf_close(&html);
  bk_study_free(s);
}

Test(report, convergence_has_one_point_per_stopping_check) {
  bk_study_t *s = load("name: rs\n"
                       "seed: 3\n"
                       "variables:\n"
                       "  R: {type: normal, mean: 5, sd: 1}\n"
                       "  S: {type: normal, mean: 2, sd: 1}\n"
                       "limit_state: R - S\n"
                       "analysis: {method: lhs, samples: 8000, replicates: 4}\n"
                       "run: {folder: out}\n");
  bk_result_t r;
  run_study(s, &r);
  cr_assert_geq(r.nhistory, 2);
  bk_buf_t json, html;
  bk_buf_init(&json);
  bk_buf_init(&html);
  bk_report_json(s, &r, &json);
  char p[400];
  snprintf(p, sizeof p, "%s/report.json", dir);
  FILE *f = fopen(p, "w");
  fputs(json.data, f);
  fclose(f);
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_report_html(dir, s, &html, &err), 0, "%s", err.msg);
  cr_assert(strstr(html.data, "data-chart=\"convergence\""));
  size_t i = 0;
  for (const char *q = strstr(html.data, "data-n="); q;
       q = strstr(q + 1, "data-n="), i++) {
    double n, pf;
    cr_assert_eq(sscanf(q, "data-n=\"%lf\" data-pf=\"%lf\"", &n, &pf), 2);
    cr_assert_lt(i, r.nhistory);
    cr_assert_eq(n, (double)r.history[i].n);
    cr_assert_eq(pf, r.history[i].pf);
  }
  cr_assert_eq(i, r.nhistory);
  bk_buf_close(&json);
  bk_buf_close(&html);
  bk_result_close(&r);
  bk_study_free(s);
}

/* Notes (what a method did and could not check) go into the text report
 * as NOTE lines and into the JSON as "notes", escaped as JSON strings; a
 * result without notes has an empty list. */
Test(report, notes_are_printed_and_listed) {
  bk_study_t *s = load(study);
  bk_result_t r;
  run_study(s, &r);
  bk_buf_t o;
  bk_buf_init(&o);
  cr_assert_eq(bk_report_json(s, &r, &o), 0);
  cr_expect(strstr(o.data, "\"notes\": []"), "%s", o.data);
  bk_buf_close(&o);
  cr_assert_eq(bk_result_note(&r, "probe of %d points, \"quoted\"", 36), 0);
  bk_buf_init(&o);
  cr_assert_eq(bk_report_json(s, &r, &o), 0);
  cr_expect(strstr(o.data, "\"notes\": [\"probe of 36 points, "
                           "\\\"quoted\\\"\"]"),
            "%s", o.data);
  bk_buf_close(&o);
  bk_buf_init(&o);
  cr_assert_eq(bk_report_text(s, &r, &o), 0);
  cr_expect(strstr(o.data, "  NOTE: probe of 36 points, \"quoted\"\n"));
  bk_buf_close(&o);
  bk_result_close(&r);
  bk_study_free(s);
}

Test(report, an_unknown_spread_says_why) {
  bk_study_t *s = load(study);
  bk_result_t r;
  run_study(s, &r);
  bk_buf_t o;
  /* A spread that cannot be estimated although failures were seen (e.g.
   * one failing replicate) must not be called "no failure seen". */
  r.est.cov = NAN;
  r.est.ci_method = "replicates";
  cr_assert(r.est.failures > 0);
  bk_buf_init(&o);
  cr_assert_eq(bk_report_text(s, &r, &o), 0);
  cr_expect(strstr(o.data, "n/a (too few failures to estimate the spread)"),
            "%s", o.data);
  bk_buf_close(&o);
  r.est.failures = 0;
  bk_buf_init(&o);
  cr_assert_eq(bk_report_text(s, &r, &o), 0);
  cr_expect(strstr(o.data, "n/a (no failure seen)"), "%s", o.data);
  bk_buf_close(&o);
  bk_result_close(&r);
  bk_study_free(s);
}
