/*
 * Tests of template parsing and rendering. References: numbers are
 * expected exactly as C's snprintf() prints them with the same conversion
 * (C99 7.19.6.1), text byte for byte as written; error messages, lines and
 * columns are checked verbatim in the bk_error_t fields.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <float.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/error.h"
#include "study/template.h"

static const char *const deck_names[] = {"E", "fy", "t", "span", "load"};
static const bk_names_t deck = {deck_names, 5};
static const double deck_values[] = {2.1e5, 355.0, 0.0125, 6.0, -12.5};

/* Parses text (which must succeed) and renders it with ctx; returns the
 * rendered text, to be freed. */
static char *render(const char *text, size_t len, const bk_names_t *names,
                    const bk_template_ctx_t *ctx, size_t *outlen) {
  bk_template_t *t = NULL;
  bk_error_t err;
  bk_error_clear(&err);
  int rc = bk_template_parse("deck.inp", text, len, names, &t, &err);
  cr_assert_eq(rc, 0, "parse: %d %d:%d %s", rc, err.line, err.col, err.msg);
  cr_assert_not_null(t);
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_template_render(t, ctx, &b), 0);
  bk_template_free(t);
  if (outlen)
    *outlen = b.len;
  if (!b.data)
    return bk_strdup("");
  return b.data;
}

static char *render_deck(const char *text) {
  bk_template_ctx_t ctx = {.values = deck_values,
                           .index = 17,
                           .key = "mc/17",
                           .folder = "runs/purlin/mc-17"};
  return render(text, strlen(text), &deck, &ctx, NULL);
}

#define EXPECT_RENDERS(text, want)                                             \
  do {                                                                         \
    char *got_ = render_deck(text);                                            \
    cr_expect_str_eq(got_, want, "template \"%s\"", text);                     \
    free(got_);                                                                \
  } while (0)

Test(template, placeholder_free_text_renders_unchanged) {
  static const char *const texts[] = {
      "",
      "*HEADING\r\nwarehouse purlin\r\n*NODE\r\n1,\t0.0,\t0.0\r\n",
      "no trailing newline",
      "\n\n\n",
      "single { and } braces, {x} and { {, } }",
      "closing braces alone: }} and }}}",
      "backslashes: \\ \\\\ \\n \\{ \\} a\\b",
      "\t\ttabs\tinside\t",
      "utf-8: \xc3\xa9\xe2\x82\xac and high bytes \xff\xfe",
      "$ % %% %s %n text that looks like formats",
  };
  bk_template_ctx_t ctx = {
      .values = deck_values, .index = 0, .key = "k", .folder = "f"};
  for (size_t i = 0; i < sizeof texts / sizeof texts[0]; i++) {
    size_t n;
    char *got = render(texts[i], strlen(texts[i]), &deck, &ctx, &n);
    cr_expect_eq(n, strlen(texts[i]));
    cr_expect(memcmp(got, texts[i], n) == 0, "text %zu changed", i);
    free(got);
  }
  /* Embedded NUL bytes are text too. */
  const char bin[] = "a\0b\0{\0}";
  size_t n;
  char *got = render(bin, sizeof bin - 1, &deck, &ctx, &n);
  cr_expect_eq(n, sizeof bin - 1);
  cr_expect(memcmp(got, bin, n) == 0);
  free(got);
}

/* Property: random text without "{{", "\{{" or "\}}" renders unchanged.
 * The alphabet favours the bytes the parser looks at. */
Test(template, random_placeholder_free_text_renders_unchanged) {
  static const char alphabet[] = "{}\\{}\\ \t\r\n:%ab0\xc3\x80";
  uint64_t seed = 0x7e3a1ce5d15ea5e5ULL;
  uint64_t s = seed;
  char text[512];
  bk_template_ctx_t ctx = {
      .values = deck_values, .index = 0, .key = "k", .folder = "f"};
  int tried = 0;
  for (int c = 0; c < 2000; c++) {
    size_t len = 0, want = 1 + (size_t)(c % 400);
    while (len < want) {
      s ^= s << 13;
      s ^= s >> 7;
      s ^= s << 17;
      char ch = alphabet[s % (sizeof alphabet - 1)];
      /* Never complete "{{", "\{{" or "\}}". */
      if (ch == '{' && len > 0 && text[len - 1] == '{')
        continue;
      if ((ch == '{' || ch == '}') && len > 1 && text[len - 1] == ch &&
          text[len - 2] == '\\')
        continue;
      text[len++] = ch;
    }
    size_t n;
    char *got = render(text, len, &deck, &ctx, &n);
    cr_assert(n == len && memcmp(got, text, len) == 0,
              "case %d (seed %#llx): text changed", c,
              (unsigned long long)seed);
    free(got);
    tried++;
  }
  cr_expect_eq(tried, 2000);
}

Test(template, fixed_width_deck_line_matches_snprintf) {
  /* Reference: snprintf() with the same conversions. */
  const char *tpl = "*MATERIAL, NAME=STEEL\n*ELASTIC\n{{ E : %.12E }}, 0.3\n";
  char want[256];
  snprintf(want, sizeof want, "*MATERIAL, NAME=STEEL\n*ELASTIC\n%.12E, 0.3\n",
           deck_values[0]);
  EXPECT_RENDERS(tpl, want);
  cr_expect_str_eq(want, "*MATERIAL, NAME=STEEL\n*ELASTIC\n"
                         "2.100000000000E+05, 0.3\n");

  const char *fields = "{{fy:%10.3f}}{{ t : %10.4e }}{{ load:%-10.2f}}|\n";
  snprintf(want, sizeof want, "%10.3f%10.4e%-10.2f|\n", deck_values[1],
           deck_values[2], deck_values[4]);
  EXPECT_RENDERS(fields, want);

  const char *flags = "{{ load : %+012.3e }} {{ fy : %#.0f }} {{ t : % G }}";
  snprintf(want, sizeof want, "%+012.3e %#.0f % G", deck_values[4],
           deck_values[1], deck_values[2]);
  EXPECT_RENDERS(flags, want);

  snprintf(want, sizeof want, "%F %g %e %f", deck_values[3], deck_values[3],
           deck_values[3], deck_values[3]);
  EXPECT_RENDERS("{{span:%F}} {{span:%g}} {{span:%e}} {{span:%f}}", want);
}

Test(template, default_format_is_12_significant_digits) {
  /* Reference: snprintf("%.12g"). */
  char want[256];
  snprintf(want, sizeof want, "E=%.12g span/3=%.12g load=%.12g", deck_values[0],
           deck_values[3] / 3, deck_values[4]);
  EXPECT_RENDERS("E={{ E }} span/3={{ span / 3 }} load={{load}}", want);
}

Test(template, default_format_fits_twenty_columns) {
  static const double xs[] = {
      -DBL_MIN,         -DBL_MAX,  -1.0 / 3.0, -4.9e-324, -123456789012345.0,
      -1.23456789e-300, 0.1 + 0.2, NAN,        -INFINITY};
  static const char *const n[] = {"x"};
  bk_names_t names = {n, 1};
  for (size_t i = 0; i < sizeof xs / sizeof xs[0]; i++) {
    bk_template_ctx_t ctx = {
        .values = &xs[i], .index = 0, .key = "", .folder = ""};
    size_t len;
    char *got = render("{{ x }}", 7, &names, &ctx, &len);
    cr_expect_leq(len, 20, "%.17g renders as %s", xs[i], got);
    free(got);
  }
}

Test(template, expressions_use_study_variables) {
  char want[256];
  snprintf(want, sizeof want, "*CLOAD\n 3, 2, %.12g\n*STEP, INC=%.12g\n",
           deck_values[4] * deck_values[3] / 2, fmax(10.0, deck_values[3]));
  EXPECT_RENDERS("*CLOAD\n 3, 2, {{ load*span/2 }}\n*STEP, INC={{ max(10, "
                 "span) }}\n",
                 want);
  EXPECT_RENDERS("{{ 2^10 }} {{ -2^2 }} {{ 1/4 : %.3f }}", "1024 -4 0.250");
}

Test(template, key_folder_and_index) {
  EXPECT_RENDERS("** run {{ _key }} in {{_folder}}, evaluation {{ _index }}\n",
                 "** run mc/17 in runs/purlin/mc-17, evaluation 17\n");
  EXPECT_RENDERS("{{ _index : %06.0f }} {{ 2*_index + 1 }}", "000017 35");
  /* NULL texts render as nothing. */
  bk_template_ctx_t ctx = {
      .values = deck_values, .index = 1, .key = NULL, .folder = NULL};
  const char *tpl = "[{{ _key }}][{{ _folder }}]";
  char *got = render(tpl, strlen(tpl), &deck, &ctx, NULL);
  cr_expect_str_eq(got, "[][]");
  free(got);
}

Test(template, index_works_without_study_variables) {
  bk_template_ctx_t ctx = {
      .values = NULL, .index = 4, .key = "lhs/r1/4", .folder = "."};
  const char *tpl = "seed {{ 1000 + _index }} key {{ _key }}";
  char *got = render(tpl, strlen(tpl), NULL, &ctx, NULL);
  cr_expect_str_eq(got, "seed 1004 key lhs/r1/4");
  free(got);
}

Test(template, backslash_braces_are_literal) {
  EXPECT_RENDERS("\\{{ E }}", "{{ E }}");
  EXPECT_RENDERS("\\{{ E \\}}", "{{ E }}");
  EXPECT_RENDERS("a \\}} b", "a }} b");
  EXPECT_RENDERS("\\{{\\{{", "{{{{");
  EXPECT_RENDERS("\\\\{{ x", "\\{{ x");
  EXPECT_RENDERS("\\{ \\} \\a", "\\{ \\} \\a");
  EXPECT_RENDERS("\\{{{{ t : %.4f }}", "{{0.0125");
  EXPECT_RENDERS("{{ t : %.4f }}\\}}", "0.0125}}");
  EXPECT_RENDERS("{{t}}}", "0.0125}");
}

Test(template, render_appends_to_the_buffer) {
  bk_template_t *t;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_template_parse("d", "x={{ fy }};", 11, &deck, &t, &err), 0);
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_buf_puts(&b, "head;"), 0);
  bk_template_ctx_t ctx = {
      .values = deck_values, .index = 0, .key = "", .folder = ""};
  cr_assert_eq(bk_template_render(t, &ctx, &b), 0);
  double other[] = {0, 1.5, 0, 0, 0};
  ctx.values = other;
  cr_assert_eq(bk_template_render(t, &ctx, &b), 0);
  cr_expect_str_eq(b.data, "head;x=355;x=1.5;");
  bk_buf_close(&b);
  bk_template_free(t);
}

Test(template, many_variables) {
  enum { N = 200 };
  static char name_store[N][8];
  static const char *names_v[N];
  static double vals[N];
  for (int i = 0; i < N; i++) {
    snprintf(name_store[i], sizeof name_store[i], "v%d", i);
    names_v[i] = name_store[i];
    vals[i] = i * 0.5;
  }
  bk_names_t names = {names_v, N};
  bk_template_ctx_t ctx = {.values = vals, .index = 3, .key = "", .folder = ""};
  const char *tpl = "{{ v0 }} {{ v199 + _index }} {{ v100 : %.2f }}";
  char *got = render(tpl, strlen(tpl), &names, &ctx, NULL);
  cr_expect_str_eq(got, "0 102.5 50.00");
  free(got);
}

/* ---- Errors ---- */

typedef struct {
  const char *text;
  int code;
  int line, col;
  const char *msg;
} terr_t;

static const terr_t errs[] = {
    {"*ELASTIC\n  {{ E_mod : %.12E }}, 0.3\n", BK_ENOTFOUND, 2, 6,
     "unknown name 'E_mod'; known names: E, fy, t, span, load, _index, "
     "_threads, _ranks, ... (9 in all)"},
    {"*ELASTIC\n{{ E * fY }}", BK_ENOTFOUND, 2, 8,
     "unknown name 'fY' (did you mean 'fy'?); known names: E, fy, t, span, "
     "load, _index, _threads, _ranks, ... (9 in all)"},
    {"a\nb\n\t{{ fy * }}\n", BK_EPARSE, 3, 10,
     "expected a number, a name or '(' after '*', found the end of the "
     "expression"},
    {"{{ sqrt(fy, t) }}", BK_EPARSE, 1, 4, "sqrt() takes 1 argument, got 2"},
    {"x\r\ny\r\n  {{ (fy + t }}", BK_EPARSE, 3, 6,
     "'(' is not closed: expected ')' before the end of the expression"},
    {"line one\nline two {{ E\n}}", BK_EPARSE, 2, 10,
     "unclosed '{{': expected '}}' on the same line (write \\{{ for literal "
     "braces)"},
    {"{{ E }} and {{ t", BK_EPARSE, 1, 13,
     "unclosed '{{': expected '}}' on the same line (write \\{{ for literal "
     "braces)"},
    {"E = {{  }}", BK_EPARSE, 1, 5,
     "empty placeholder: write an expression between '{{' and '}}' (or \\{{ "
     "for literal braces)"},
    {"{{ E : }}", BK_EPARSE, 1, 6,
     "missing format after ':' (e.g. {{ x : %12.5e }})"},
    {"{{ E : %s }}", BK_EPARSE, 1, 8,
     "format '%s' converts with 's'; a number needs one of e E f F g G"},
    {"{{ E : %n }}", BK_EPARSE, 1, 8,
     "format '%n' converts with 'n'; a number needs one of e E f F g G"},
    {"{{ _index : %5d }}", BK_EPARSE, 1, 13,
     "format '%5d' converts with 'd'; a number needs one of e E f F g G (for "
     "a whole number write %.0f)"},
    {"{{ E : %lf }}", BK_EPARSE, 1, 8,
     "format '%lf' has a length modifier 'l'; write the conversion alone, "
     "e.g. %e"},
    {"{{ E : %e %e }}", BK_EPARSE, 1, 8,
     "format '%e %e' has text after the conversion 'e'; a placeholder takes "
     "exactly one conversion"},
    {"{{ E : %12.5e kN }}", BK_EPARSE, 1, 8,
     "format '%12.5e kN' has text after the conversion 'e'; a placeholder "
     "takes exactly one conversion"},
    {"{{ E : 12.5e }}", BK_EPARSE, 1, 8,
     "format '12.5e' must start with '%' (e.g. %12.5e)"},
    {"{{ E : %.12 }}", BK_EPARSE, 1, 8,
     "format '%.12' has no conversion; end it with one of e E f F g G"},
    {"{{ E : % }}", BK_EPARSE, 1, 8,
     "format '%' has no conversion; end it with one of e E f F g G"},
    {"{{ E : %%e }}", BK_EPARSE, 1, 8,
     "format '%%e' converts with '%'; a number needs one of e E f F g G"},
    {"{{ E : %*e }}", BK_EPARSE, 1, 8,
     "format '%*e' converts with '*'; a number needs one of e E f F g G"},
    {"{{ E : %-0-e }}", BK_EPARSE, 1, 8, "format '%-0-e' repeats the flag '-'"},
    {"{{ E : %100f }}", BK_EPARSE, 1, 8,
     "format '%100f': the width is larger than 99"},
    {"{{ E : %.100f }}", BK_EPARSE, 1, 8,
     "format '%.100f': the precision is larger than 99"},
    {"{{ _key : %s }}", BK_EPARSE, 1, 11, "'_key' is text and takes no format"},
    {"{{ _key + 1 }}", BK_EPARSE, 1, 4,
     "'_key' is text and can only stand alone, as {{ _key }}"},
    {"x {{ 2 * _folder }}", BK_EPARSE, 1, 10,
     "'_folder' is text and can only stand alone, as {{ _folder }}"},
    {"{{ _keys }}", BK_ENOTFOUND, 1, 4,
     "unknown name '_keys'; known names: E, fy, t, span, load, _index, "
     "_threads, _ranks, ... (9 in all)"},
};

Test(template, errors_carry_path_line_and_column) {
  for (size_t i = 0; i < sizeof errs / sizeof errs[0]; i++) {
    const terr_t *c = &errs[i];
    bk_template_t *t = (bk_template_t *)&t; /* must be reset to NULL */
    bk_error_t err;
    bk_error_clear(&err);
    int rc = bk_template_parse("templates/purlin.inp", c->text, strlen(c->text),
                               &deck, &t, &err);
    cr_expect_eq(rc, c->code, "case %zu: code %d, want %d", i, rc, c->code);
    cr_expect_eq(err.code, c->code, "case %zu", i);
    cr_expect_null(t, "case %zu", i);
    cr_expect_str_eq(err.path, "templates/purlin.inp", "case %zu", i);
    cr_expect_eq(err.line, c->line, "case %zu: line %d, want %d", i, err.line,
                 c->line);
    cr_expect_eq(err.col, c->col, "case %zu: col %d, want %d", i, err.col,
                 c->col);
    cr_expect_str_eq(err.msg, c->msg, "case %zu", i);
  }
}

Test(template, error_print_puts_the_caret_under_the_token) {
  char dir[] = "/tmp/bk-template-XXXXXX";
  cr_assert_not_null(mkdtemp(dir));
  char path[64];
  snprintf(path, sizeof path, "%s/purlin.inp", dir);
  const char *text = "*ELASTIC\n\t{{ E : %.12E }}, {{ nu }}\n";
  FILE *f = fopen(path, "w");
  cr_assert_not_null(f);
  fputs(text, f);
  fclose(f);

  bk_template_t *t;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_template_parse(path, text, strlen(text), &deck, &t, &err),
               BK_ENOTFOUND);
  char *out = NULL;
  size_t outlen = 0;
  FILE *m = open_memstream(&out, &outlen);
  bk_error_print(&err, m);
  fclose(m);
  char want[512];
  snprintf(want, sizeof want,
           "%s:2:22: unknown name 'nu'; known names: E, fy, t, span, load, "
           "_index, _threads, _ranks, ... (9 in all)\n"
           "  \t{{ E : %%.12E }}, {{ nu }}\n"
           "  \t                    ^\n",
           path);
  cr_expect_str_eq(out, want);
  free(out);
  unlink(path);
  rmdir(dir);
}

Test(template, every_failed_allocation_gives_enomem) {
  const char *tpl = "*NODE\n1, {{ span : %.4f }}\n*KEY {{ _key }} {{ E*fy }}\n";
  bk_template_ctx_t ctx = {
      .values = deck_values, .index = 2, .key = "mc/2", .folder = "runs/mc-2"};
  char *want = render(tpl, strlen(tpl), &deck, &ctx, NULL);
  for (long n = 1;; n++) {
    bk_template_t *t = NULL;
    bk_error_t err;
    bk_error_clear(&err);
    bk_alloc_fail_at(n);
    int rc = bk_template_parse("deck", tpl, strlen(tpl), &deck, &t, &err);
    bk_alloc_fail_at(0);
    if (rc == 0) {
      bk_template_free(t);
      cr_expect_gt(n, 1);
      break;
    }
    cr_assert_eq(rc, BK_ENOMEM, "allocation %ld: %d %s", n, rc, err.msg);
    cr_expect_eq(err.code, BK_ENOMEM);
    cr_expect_null(t);
    cr_assert_lt(n, 100);
  }

  bk_template_t *t;
  bk_error_t err;
  bk_error_clear(&err);
  cr_assert_eq(bk_template_parse("deck", tpl, strlen(tpl), &deck, &t, &err), 0);
  for (long n = 1;; n++) {
    bk_buf_t b;
    bk_buf_init(&b);
    cr_assert_eq(bk_buf_puts(&b, "keep"), 0);
    bk_alloc_fail_at(n);
    int rc = bk_template_render(t, &ctx, &b);
    bk_alloc_fail_at(0);
    if (rc == 0) {
      cr_expect_eq(strncmp(b.data, "keep", 4), 0);
      cr_expect_str_eq(b.data + 4, want);
      bk_buf_close(&b);
      break;
    }
    cr_assert_eq(rc, BK_ENOMEM);
    cr_expect_str_eq(b.data, "keep", "a failed render leaves the buffer");
    bk_buf_close(&b);
    cr_assert_lt(n, 100);
  }
  bk_template_free(t);
  free(want);
}
