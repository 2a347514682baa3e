/*
 * Tests of extract: reading numbers in C and Fortran notations, patterns on
 * real solver output, the selection among matches, faults and their
 * reasons, and the streaming scan of large files across chunk edges.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "base/alloc.h"
#include "base/buf.h"
#include "base/error.h"
#include "study/extract.h"
#include "base/fault.h"

static char tmpdir[256];

static void make_tmpdir(void) {
  const char *t = getenv("TMPDIR");
  snprintf(tmpdir, sizeof tmpdir, "%s/bk-extract-XXXXXX", t && *t ? t : "/tmp");
  cr_assert_not_null(mkdtemp(tmpdir));
}

static void remove_tmpdir(void) {
  char cmd[300];
  snprintf(cmd, sizeof cmd, "rm -rf '%s'", tmpdir);
  if (system(cmd) != 0)
    fprintf(stderr, "could not remove %s\n", tmpdir);
  bk__extract_set_chunk(0);
  bk_alloc_fail_at(0);
}

TestSuite(extract, .init = make_tmpdir, .fini = remove_tmpdir);

/* ---- helpers ---- */

static bk_pattern_t *compile(const char *re) {
  bk_pattern_t *p = NULL;
  char msg[256] = "";
  size_t off = 0;
  int rc = bk_extract_pattern_compile(re, &p, msg, sizeof msg, &off);
  cr_assert_eq(rc, 0, "pattern %s: %s at %zu", re, msg, off);
  return p;
}

static void tmp_path(char *dst, size_t cap, const char *name) {
  snprintf(dst, cap, "%s/%s", tmpdir, name);
}

static void write_file(const char *path, const char *text, size_t len) {
  FILE *f = fopen(path, "wb");
  cr_assert_not_null(f, "%s: %s", path, strerror(errno));
  cr_assert_eq(fwrite(text, 1, len, f), len);
  cr_assert_eq(fclose(f), 0);
}

/* Reads a whole file into a buffer (small fixtures only). */
static void read_file(const char *path, bk_buf_t *b) {
  FILE *f = fopen(path, "rb");
  cr_assert_not_null(f, "%s: %s", path, strerror(errno));
  char tmp[4096];
  size_t n;
  while ((n = fread(tmp, 1, sizeof tmp, f)) > 0)
    cr_assert_eq(bk_buf_append(b, tmp, n), 0);
  fclose(f);
}

static void fixture_path(char *dst, size_t cap, const char *name) {
  const char *dir = getenv("BRINK_FIXTURES");
  cr_assert_not_null(dir, "BRINK_FIXTURES is not set");
  snprintf(dst, cap, "%s/%s", dir, name);
}

static int text_value(const char *re, const char *text, bk_match_t sel,
                      double *v, char *why, size_t whycap) {
  bk_pattern_t *p = compile(re);
  int rc = bk_extract_text(p, text, strlen(text), sel, v, why, whycap);
  bk_extract_pattern_free(p);
  return rc;
}

/* Peak resident set size of this process, in kB. */
static long peak_rss_kb(void) {
  FILE *f = fopen("/proc/self/status", "r");
  cr_assert_not_null(f);
  char line[256];
  long kb = -1;
  while (fgets(line, sizeof line, f))
    if (sscanf(line, "VmHWM: %ld kB", &kb) == 1)
      break;
  fclose(f);
  cr_assert_gt(kb, 0, "no VmHWM in /proc/self/status");
  return kb;
}

/* Resets the peak to the present size where Linux allows it, and returns
 * the peak, in kB. */
static long peak_reset_kb(void) {
  static int refused;
  static long first = -1;
  if (!refused) {
    FILE *f = fopen("/proc/self/clear_refs", "w");
    refused = !f || fputs("5", f) < 0;
    if (f && fclose(f) != 0)
      refused = 1;
  }
  long kb = peak_rss_kb();
  if (refused) {
    if (first < 0)
      first = kb;
    return first;
  }
  return kb;
}

/* The larger of `worst` and the growth of the peak since `before`. */
static long growth(long before, long worst) {
  long g = peak_rss_kb() - before;
  return g > worst ? g : worst;
}

/* All matches of a scan, as "offset:text" lines. */
static int collect_cb(const char *s, size_t len, size_t offset, void *data) {
  bk_buf_t *b = data;
  cr_assert_eq(bk_buf_printf(b, "%zu:%.*s\n", offset, (int)len, s), 0);
  return 0;
}

/* ---- numbers ---- */

/* C forms. Reference: C11 7.22.1.3 (strtod) as implemented by glibc, which
 * rounds correctly; and the C compiler's reading of the same literal
 * (C11 6.4.4.2). */
Test(extract, c_notation_reads_as_strtod) {
  static const struct {
    const char *text;
    double want;
  } cases[] = {
      {"1.5E+03", 1.5E+03},
      {"1.5e3", 1.5e3},
      {"-.5e-2", -.5e-2},
      {"+3.", 3.},
      {"5.", 5.},
      {".5", .5},
      {"42", 42},
      {"-0", -0.0},
      {"007", 7},
      {"0.1", 0.1},
      {"-7.498613E-17", -7.498613E-17},
      {"2.2250738585072014e-308", 2.2250738585072014e-308},
      {"4.9406564584124654e-324", 4.9406564584124654e-324},
      {"1e-400", 0.0},
      {"1.7976931348623157e308", 1.7976931348623157e308},
      {"123456789012345678901234567890", 123456789012345678901234567890.0},
      {"0.30000000000000004", 0.30000000000000004},
      {"1E+005", 1E+005},
      {"  12.5  ", 12.5},
      {"\t-3e2\r\n", -3e2},
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    const char *s = cases[i].text;
    double v = NAN;
    cr_assert_eq(bk_extract_number(s, strlen(s), &v), 0, "'%s' refused", s);
    double ref = strtod(s, NULL);
    cr_assert(v == ref && signbit(v) == signbit(ref),
              "'%s': %.17g, strtod %.17g", s, v, ref);
    cr_assert(v == cases[i].want, "'%s': %.17g, literal %.17g", s, v,
              cases[i].want);
  }
}

/* Fortran forms. Source: ISO/IEC 1539-1:2010 (Fortran 2008) 10.7.2.3.2,
 * E and D editing, from memory: for an exponent of at most 99 the form is
 * E+zz or D+zz, for 99 < |exp| <= 999 the letter is dropped (+zzz); on
 * input the exponent may be a signed digit string or E/D then an optionally
 * signed digit string. Three-digit examples are CalculiX 2.20's output
 * (/work/shared/notes/fe-solver-facts.md). */
Test(extract, fortran_notation_is_read) {
  static const struct {
    const char *text;
    double want;
  } cases[] = {
      {"1.5D+03", 1.5e3},
      {"1.5d3", 1.5e3},
      {"-2.5D-7", -2.5e-7},
      {"+2.5D0", 2.5},
      {"0.100000D+01", 1.0},
      {"-1.474969+104", -1.474969e+104},
      {"3.154045-120", 3.154045e-120},
      {"0.250000+100", 0.25e100},
      {"-9.999999-100", -9.999999e-100},
      {"1.0-5", 1.0e-5},
      {".5+3", 0.5e3},
      {"5.-1", 0.5},
      {" -1.456286E-02 ", -1.456286E-02},
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    const char *s = cases[i].text;
    double v = NAN;
    cr_assert_eq(bk_extract_number(s, strlen(s), &v), 0, "'%s' refused", s);
    cr_assert(v == cases[i].want, "'%s': %.17g, want %.17g", s, v,
              cases[i].want);
  }
}

/* Reference: gfortran 12's own output. Each line of the fixture holds a
 * value written under E14.6, D14.6 or ES14.6 (as solvers print) and the
 * same value under Ew.6E3, which keeps the exponent letter; the second is
 * read with strtod. Generator: tests/fixtures/extract_fortran_numbers.f90. */
Test(extract, numbers_written_by_gfortran_are_read) {
  char path[512];
  fixture_path(path, sizeof path, "extract_fortran_numbers.txt");
  FILE *f = fopen(path, "r");
  cr_assert_not_null(f, "%s", path);
  char a[64], b[64];
  int n = 0, three_digit = 0;
  while (fscanf(f, "%63s %63s", a, b) == 2) {
    double v = NAN;
    cr_assert_eq(bk_extract_number(a, strlen(a), &v), 0, "'%s' refused", a);
    double ref = strtod(b, NULL);
    cr_assert(v == ref, "'%s' read as %.17g, but '%s' is %.17g", a, v, b, ref);
    if (!strpbrk(a, "EeDd"))
      three_digit++;
    n++;
  }
  fclose(f);
  cr_assert_eq(n, 42);
  cr_assert_gt(three_digit, 10);
}

Test(extract, non_numbers_are_refused) {
  static const char *const cases[] = {
      "",      "   ",      "inf",   "-inf",     "Infinity", "nan",   "NaN",
      "-nan",  "0x1p3",    "0x10",  "1e",       "1e+",      "1.0+",  "1.0-",
      "+",     "-",        ".",     "+.",       ".e5",      "1.5Q3", "1,5",
      "1 2",   "12abc",    "1e5x",  "--1",      "+-1",      "1.2.3", "1D",
      "E5",    "1.5E+03)", "1e400", "-1.0+400", "1.0E+3.5", "1+2+3", "1e++5",
      "(1.0)", "1.0d+",    "0b101", "1_000",    "١٢",
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    double v = 12345;
    cr_assert_eq(bk_extract_number(cases[i], strlen(cases[i]), &v), -1,
                 "'%s' accepted as %.17g", cases[i], v);
    cr_assert_eq(v, 12345, "'%s' changed *out", cases[i]);
  }
  double v;
  cr_assert_eq(bk_extract_number("1\0002", 3, &v), -1, "embedded NUL accepted");
}

Test(extract, number_ends_at_the_given_length) {
  double v = 0;
  cr_assert_eq(bk_extract_number("123", 2, &v), 0);
  cr_assert_eq(v, 12);
  cr_assert_eq(bk_extract_number("1.5E+03xyz", 7, &v), 0);
  cr_assert_eq(v, 1500);
  cr_assert_eq(bk_extract_number("1.5E+03", 5, &v), -1); /* "1.5E+" */
}

/* ---- CalculiX output ---- */

/* The excerpt and both patterns are those checked with POSIX regexec in
 * /work/shared/notes/fe-solver-facts.md; PCRE2 reads them unchanged
 * (\( and [[:space:]] mean the same). Expected -1.456286E-02 (u_y of node
 * 9, as printed by ccx 2.20). */
static const char ccx_excerpt[] =
    "\n"
    " displacements (vx,vy,vz) for set TIP and time  0.1000000E+01\n"
    "\n"
    "         9 -7.498613E-17 -1.456286E-02  1.587200E-12\n"
    "\n"
    " stresses (elem, integ.pnt.,sxx,syy,szz,sxy,sxz,syz) for set EALL and "
    "time  0.1000000E+01\n"
    "\n"
    "         1   1 -1.025340E+08 -2.459957E+07 -2.739882E+06 -1.250000E+06 "
    "-1.093260E+05 -5.463752E+06\n";

static const char ccx_line_re[] =
    "^ +9 +[^ ]+ +([-+]?[0-9]\\.[0-9]+E[-+][0-9]+) +[^ ]+ *$";
static const char ccx_header_re[] =
    "displacements \\(vx,vy,vz\\) for set TIP and time +[-+0-9.E]+"
    "[[:space:]]+9 +[^ ]+ +([-+]?[0-9]\\.[0-9]+E[-+][0-9]+)";

Test(extract, calculix_excerpt_gives_tip_deflection) {
  const char *res[] = {ccx_line_re, ccx_header_re};
  for (int i = 0; i < 2; i++) {
    double v = 0;
    char why[128] = "";
    int rc =
        text_value(res[i], ccx_excerpt, BK_MATCH_FIRST, &v, why, sizeof why);
    cr_assert_eq(rc, BK_FAULT_NONE, "pattern %d: %s", i, why);
    cr_assert_eq(v, -1.456286E-02, "pattern %d: %.17g", i, v);
  }
}

/* The fixture is the .dat that ccx 2.20 wrote for the deck beside it
 * (extract_ccx_cantilever.inp, the demo deck of fe-solver-facts.md). The
 * sxx extremes and the count are from awk over the same file:
 * NF==8 && $1,$2 integers -> 200 lines, max 1.644291E+08 (line 34),
 * min -1.644291E+08 (line 18), first -1.025340E+08, last 9.172941E+06. */
Test(extract, calculix_dat_file_gives_tip_deflection_and_stress_extremes) {
  char path[512];
  fixture_path(path, sizeof path, "extract_ccx_cantilever.dat");
  const char *res[] = {ccx_line_re, ccx_header_re};
  for (int i = 0; i < 2; i++) {
    bk_pattern_t *p = compile(res[i]);
    double v = 0;
    char why[128] = "";
    int rc = bk_extract_file(p, path, BK_MATCH_LAST, &v, why, sizeof why);
    cr_assert_eq(rc, BK_FAULT_NONE, "pattern %d: %s", i, why);
    cr_assert_eq(v, -1.456286E-02);
    bk_extract_pattern_free(p);
  }
  bk_pattern_t *p = compile("^ +\\d+ +\\d+ +(\\S+)");
  static const struct {
    bk_match_t sel;
    double want;
  } cases[] = {{BK_MATCH_FIRST, -1.025340E+08},
               {BK_MATCH_LAST, 9.172941E+06},
               {BK_MATCH_MAX, 1.644291E+08},
               {BK_MATCH_MIN, -1.644291E+08}};
  for (size_t i = 0; i < 4; i++) {
    double v = 0;
    char why[128] = "";
    cr_assert_eq(bk_extract_file(p, path, cases[i].sel, &v, why, sizeof why),
                 BK_FAULT_NONE, "%s", why);
    cr_assert_eq(v, cases[i].want, "selection %zu: %.17g", i, v);
  }
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(bk_extract_file_each(p, path, collect_cb, &b, NULL, 0), 0);
  size_t lines = 0;
  for (size_t i = 0; i < b.len; i++)
    lines += b.data[i] == '\n';
  cr_assert_eq(lines, 200);
  bk_buf_close(&b);
  bk_extract_pattern_free(p);
}

/* ---- selection and pattern semantics ---- */

Test(extract, selection_picks_first_last_max_min) {
  const char *text = "r = 3\nr = -7.5\nr = 12\nr = 0.5\nsum = 99\n";
  static const struct {
    bk_match_t sel;
    double want;
  } cases[] = {{BK_MATCH_FIRST, 3},
               {BK_MATCH_LAST, 0.5},
               {BK_MATCH_MAX, 12},
               {BK_MATCH_MIN, -7.5}};
  for (size_t i = 0; i < 4; i++) {
    double v = 0;
    char why[64] = "x";
    cr_assert_eq(
        text_value("^r = (\\S+)$", text, cases[i].sel, &v, why, sizeof why),
        BK_FAULT_NONE);
    cr_assert_eq(v, cases[i].want, "selection %zu: %g", i, v);
    cr_assert_str_eq(why, "");
  }
}

Test(extract, pattern_matching_twice_on_one_line_gives_two_matches) {
  const char *text = "u= 1.0 u= 2.0\nu= 3.0\n";
  bk_pattern_t *p = compile("u= (\\S+)");
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(
      bk_extract_text_each(p, text, strlen(text), collect_cb, &b, NULL, 0), 0);
  cr_assert_str_eq(b.data, "3:1.0\n10:2.0\n17:3.0\n");
  double v = 0;
  cr_assert_eq(
      bk_extract_text(p, text, strlen(text), BK_MATCH_FIRST, &v, NULL, 0), 0);
  cr_assert_eq(v, 1.0);
  cr_assert_eq(
      bk_extract_text(p, text, strlen(text), BK_MATCH_MAX, &v, NULL, 0), 0);
  cr_assert_eq(v, 3.0);
  bk_buf_close(&b);
  bk_extract_pattern_free(p);
}

Test(extract, whole_match_is_the_value_without_group) {
  double v = 0;
  cr_assert_eq(text_value("-?\\d\\.\\d+E[-+]\\d+(?= +1\\.5)", ccx_excerpt,
                          BK_MATCH_FIRST, &v, NULL, 0),
               0);
  cr_assert_eq(v, -1.456286E-02);
}

Test(extract, group_one_is_the_value_when_there_are_several) {
  double v = 0;
  cr_assert_eq(text_value("step (\\d+): (\\S+)", "step 4: 2.5e3\n",
                          BK_MATCH_FIRST, &v, NULL, 0),
               0);
  cr_assert_eq(v, 4);
}

Test(extract, unset_group_is_an_empty_match) {
  double v = 0;
  char why[64];
  cr_assert_eq(
      text_value("(\\d+)?x", "x\n", BK_MATCH_FIRST, &v, why, sizeof why),
      BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(why, "the match is empty, not a number");
}

Test(extract, dot_does_not_match_a_line_end) {
  double v = 0;
  cr_assert_eq(text_value("a.(\\d)", "a\n1\n", BK_MATCH_FIRST, &v, NULL, 0),
               BK_FAULT_NO_MATCH);
  cr_assert_eq(text_value("a\\s(\\d)", "a\n1\n", BK_MATCH_FIRST, &v, NULL, 0),
               BK_FAULT_NONE);
  cr_assert_eq(v, 1);
  cr_assert_eq(text_value("(?s)a.(\\d)", "a\n1\n", BK_MATCH_FIRST, &v, NULL, 0),
               BK_FAULT_NONE);
}

Test(extract, crlf_line_ends_bound_lines) {
  const char *text = "u = 1.5\r\nu = 2.5\r\nold mac\ru = 4\r";
  bk_pattern_t *p = compile("^u = (.*)$");
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(
      bk_extract_text_each(p, text, strlen(text), collect_cb, &b, NULL, 0), 0);
  cr_assert_str_eq(b.data, "4:1.5\n13:2.5\n30:4\n");
  bk_buf_close(&b);
  bk_extract_pattern_free(p);
}

Test(extract, empty_matches_advance) {
  const char *text = "a1\r\n\r\nb22\n";
  bk_pattern_t *p = compile("\\d*");
  bk_buf_t b;
  bk_buf_init(&b);
  cr_assert_eq(
      bk_extract_text_each(p, text, strlen(text), collect_cb, &b, NULL, 0), 0);
  /* As pcre2demo: "" at 0, "1" at 1, "" at 2 (then CR LF is stepped as
   * one), "" at 4 (then CR LF again), "" at 6, "22" at 7, "" at 9, "" at 10
   * (the end). */
  cr_assert_str_eq(b.data, "0:\n1:1\n2:\n4:\n6:\n7:22\n9:\n10:\n");
  bk_buf_close(&b);
  bk_extract_pattern_free(p);
}

/* The examples of docs/outputs.md give what the page says. */
Test(extract, examples_of_the_outputs_page_work) {
  static const struct {
    const char *re;
    const char *text;
    bk_match_t sel;
    double want;
  } cases[] = {
      {"^ +412 +(\\S+) +\\S+ +\\S+ *$",
       " displacements (vx,vy,vz) for set RAILSEAT and time  0.1000000E+01\n"
       "\n"
       "       412  3.118062E-03 -1.204577E-04  2.250310E-06\n",
       BK_MATCH_FIRST, 3.118062E-03},
      {"for set RAILSEAT and time +\\S+\\s+412 +(\\S+)",
       " displacements (vx,vy,vz) for set RAILSEAT and time  0.1000000E+01\r\n"
       "\r\n"
       "       412  3.118062E-03 -1.204577E-04  2.250310E-06\r\n",
       BK_MATCH_FIRST, 3.118062E-03},
      {"PEAK SETTLEMENT = +(\\S+) M",
       "  CONSOLIDATION STAGE  3\n"
       "  PEAK SETTLEMENT =    -0.1521044D-01 M   AT NODE   57\n"
       "  CONSOLIDATION STAGE  4\n"
       "  PEAK SETTLEMENT =    -0.1843302D-01 M   AT NODE   57\n",
       BK_MATCH_LAST, -0.1843302e-01},
      {"^ *Newton iterations: *(\\d+)",
       "step 1\n  Newton iterations: 4\nstep 2\n  Newton iterations: 11\n",
       BK_MATCH_LAST, 11},
      {"factor of safety \\(Spencer\\)\\R *-+\\R *(\\S+)",
       " Minimum factor of safety (Spencer)\r\n"
       " ----------------------------------\r\n"
       "    1.2874\r\n",
       BK_MATCH_FIRST, 1.2874},
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    double v = 0;
    char why[128] = "";
    cr_assert_eq(text_value(cases[i].re, cases[i].text, cases[i].sel, &v, why,
                            sizeof why),
                 BK_FAULT_NONE, "example %zu: %s", i, why);
    cr_assert_eq(v, cases[i].want, "example %zu: %.17g", i, v);
  }
  /* \n misses the value in a CR LF file, as the page warns. */
  cr_assert_eq(text_value("factor of safety \\(Spencer\\)\\n *-+\\n *(\\S+)",
                          cases[4].text, BK_MATCH_FIRST, &(double){0}, NULL, 0),
               BK_FAULT_NO_MATCH);
  /* The page's pattern for any notation takes each gfortran number whole. */
  bk_pattern_t *p = compile("([-+]?(?:\\d+\\.?\\d*|\\.\\d+)(?:[EeDd][-+]?\\d+|"
                            "[-+]\\d+)?)");
  char path[512];
  fixture_path(path, sizeof path, "extract_fortran_numbers.txt");
  bk_buf_t all, want;
  bk_buf_init(&all);
  bk_buf_init(&want);
  read_file(path, &all);
  char *save = NULL;
  for (char *tok = strtok_r(all.data, " \n", &save); tok;
       tok = strtok_r(NULL, " \n", &save)) {
    double v = 0;
    cr_assert_eq(
        bk_extract_text(p, tok, strlen(tok), BK_MATCH_FIRST, &v, NULL, 0),
        BK_FAULT_NONE);
    bk_buf_reset(&want);
    cr_assert_eq(
        bk_extract_text_each(p, tok, strlen(tok), collect_cb, &want, NULL, 0),
        0);
    char one[80];
    snprintf(one, sizeof one, "0:%s\n", tok);
    cr_assert_str_eq(want.data, one, "'%s' was split", tok);
  }
  bk_buf_close(&all);
  bk_buf_close(&want);
  bk_extract_pattern_free(p);
}

/* ---- faults and their reasons ---- */

Test(extract, missing_file_is_no_output) {
  char path[512];
  tmp_path(path, sizeof path, "purlin.dat");
  bk_pattern_t *p = compile("(\\d+)");
  double v = 7;
  char why[128];
  cr_assert_eq(bk_extract_file(p, path, BK_MATCH_FIRST, &v, why, sizeof why),
               BK_FAULT_NO_OUTPUT);
  cr_assert_str_eq(why, "purlin.dat not found");
  cr_assert_eq(v, 7);
  tmp_path(path, sizeof path, "nofolder/purlin.dat");
  cr_assert_eq(bk_extract_file(p, path, BK_MATCH_FIRST, &v, why, sizeof why),
               BK_FAULT_NO_OUTPUT);
  cr_assert_str_eq(why, "purlin.dat not found");
  cr_assert_eq(bk_extract_file(p, tmpdir, BK_MATCH_FIRST, &v, why, sizeof why),
               BK_FAULT_NO_OUTPUT);
  cr_assert(strstr(why, "is a folder, not a file"), "%s", why);
  bk_extract_pattern_free(p);
}

Test(extract, unreadable_file_is_no_output_with_reason) {
  if (geteuid() == 0)
    cr_skip_test("permissions do not apply to root");
  char path[512];
  tmp_path(path, sizeof path, "locked.dat");
  write_file(path, "1\n", 2);
  cr_assert_eq(chmod(path, 0), 0);
  bk_pattern_t *p = compile("(\\d+)");
  double v;
  char why[128];
  cr_assert_eq(bk_extract_file(p, path, BK_MATCH_FIRST, &v, why, sizeof why),
               BK_FAULT_NO_OUTPUT);
  cr_assert_str_eq(why, "cannot open locked.dat: Permission denied");
  bk_extract_pattern_free(p);
}

Test(extract, empty_file_is_no_match) {
  char path[512];
  tmp_path(path, sizeof path, "empty.dat");
  write_file(path, "", 0);
  bk_pattern_t *p = compile("^ +9 +(\\S+)");
  double v;
  char why[128];
  cr_assert_eq(bk_extract_file(p, path, BK_MATCH_LAST, &v, why, sizeof why),
               BK_FAULT_NO_MATCH);
  cr_assert_str_eq(why, "no match in empty.dat (empty)");
  cr_assert_eq(bk_extract_text(p, "", 0, BK_MATCH_LAST, &v, why, sizeof why),
               BK_FAULT_NO_MATCH);
  cr_assert_str_eq(why, "no match in output (empty)");
  cr_assert_eq(bk_extract_text_named(p, "stdout", NULL, 0, BK_MATCH_LAST, &v,
                                     why, sizeof why),
               BK_FAULT_NO_MATCH);
  cr_assert_str_eq(why, "no match in stdout (empty)");
  bk_extract_pattern_free(p);
}

Test(extract, no_match_names_file_and_size) {
  static const struct {
    size_t size;
    const char *why;
  } cases[] = {
      {512, "no match in purlin.dat (512 B)"},
      {12300, "no match in purlin.dat (12.3 kB)"},
      {999999, "no match in purlin.dat (1.0 MB)"},
      {3400000, "no match in purlin.dat (3.4 MB)"},
  };
  char path[512];
  tmp_path(path, sizeof path, "purlin.dat");
  bk_pattern_t *p = compile("tip = (\\S+)");
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    char *text = malloc(cases[i].size);
    cr_assert_not_null(text);
    for (size_t k = 0; k < cases[i].size; k++)
      text[k] = k % 64 == 63 ? '\n' : 'x';
    write_file(path, text, cases[i].size);
    free(text);
    double v;
    char why[128];
    cr_assert_eq(bk_extract_file(p, path, BK_MATCH_FIRST, &v, why, sizeof why),
                 BK_FAULT_NO_MATCH);
    cr_assert_str_eq(why, cases[i].why);
  }
  bk_extract_pattern_free(p);
}

Test(extract, nan_match_is_not_a_number) {
  const char *text = " u =  NaN\n u = 2.0\n";
  double v = 0;
  char why[128];
  cr_assert_eq(
      text_value("u = (.*)$", text, BK_MATCH_FIRST, &v, why, sizeof why),
      BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(why, "matched 'NaN', not a number");
  /* Only the selected match must be a number for first and last ... */
  cr_assert_eq(
      text_value("u = (.*)$", text, BK_MATCH_LAST, &v, why, sizeof why),
      BK_FAULT_NONE);
  cr_assert_eq(v, 2.0);
  /* ... every one for max and min. */
  cr_assert_eq(text_value("u = (.*)$", text, BK_MATCH_MAX, &v, why, sizeof why),
               BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(why, "matched 'NaN', not a number");
  cr_assert_eq(text_value("u = (.*)$",
                          " u = 1\n u = -1.474969+104\n u = "
                          "*****\n",
                          BK_MATCH_MIN, &v, why, sizeof why),
               BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(why, "matched '*****', not a number");
}

Test(extract, overflow_is_out_of_range_and_quotes_are_bounded) {
  double v;
  char why[128];
  cr_assert_eq(text_value("u = (.*)$", "u = -1.0+400\n", BK_MATCH_FIRST, &v,
                          why, sizeof why),
               BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(why, "matched '-1.0+400', out of range");
  cr_assert_eq(
      text_value("u = (.*)$",
                 "u = \tabcdefghijklmnopqrstuvwxyz0123456789ABCDEFGH\n",
                 BK_MATCH_FIRST, &v, why, sizeof why),
      BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(why, "matched 'abcdefghijklmnopqrstuvwxyz0123456789ABCD...',"
                        " not a number");
  cr_assert_eq(text_value("u = ([\\s\\S]*)", "u = 1\n2\n", BK_MATCH_FIRST, &v,
                          why, sizeof why),
               BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(why, "matched '1?2', not a number");
  /* A small why buffer is cut, not overrun. */
  char small[8];
  cr_assert_eq(text_value("u = (.*)$", "u = NaN\n", BK_MATCH_FIRST, &v, small,
                          sizeof small),
               BK_FAULT_NOT_A_NUMBER);
  cr_assert_str_eq(small, "matched");
}

/* Messages are PCRE2 10.42's (pcre2_get_error_message); offsets are bytes
 * from the start of the pattern, where PCRE2 noticed the error. */
Test(extract, invalid_pattern_reports_message_and_offset) {
  static const struct {
    const char *re;
    const char *msg;
    size_t off;
  } cases[] = {
      {"u = (\\S+", "missing closing parenthesis", 8},
      {"x[0-9", "missing terminating ] for character class", 5},
      {"a{2,1}", "numbers out of order in {} quantifier", 5},
      {"*u", "quantifier does not follow a repeatable item", 0},
      {"(*UTF)x", "using UTF is disabled by the application", 6},
      /* brink's own refusals, for what a piecewise scan cannot match as a
       * whole-text search would. */
      {"u = \\G(\\S+)", "\\G is not supported in output patterns", 4},
      {"a(*COMMIT)b", "(*COMMIT) is not supported in output patterns", 1},
  };
  for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
    bk_pattern_t *p = (bk_pattern_t *)1;
    char msg[128] = "";
    size_t off = 99;
    cr_assert_eq(bk_extract_pattern_compile(cases[i].re, &p, msg, sizeof msg, &off),
                 BK_EPARSE, "%s", cases[i].re);
    cr_assert_null(p);
    cr_assert_str_eq(msg, cases[i].msg, "%s", cases[i].re);
    cr_assert_eq(off, cases[i].off, "%s: offset %zu", cases[i].re, off);
  }
}

/* ---- streaming ---- */

/* Filler that matches none of the patterns below: a ccx stress line. */
static const char filler[] =
    "         1   1 -1.025340E+08 -2.459957E+07 -2.739882E+06 -1.250000E+06 "
    "-1.093260E+05 -5.463752E+06\n";

/* Writes filler lines, then one padding line, so that the file ends at
 * byte `target` exactly, at the start of a line. */
static void fill_to(FILE *f, size_t target) {
  static char block[1 << 16];
  static size_t nblock;
  size_t flen = sizeof filler - 1;
  if (!nblock) {
    while (nblock + flen <= sizeof block) {
      memcpy(block + nblock, filler, flen);
      nblock += flen;
    }
  }
  long at = ftell(f);
  cr_assert_geq(at, 0);
  size_t pos = (size_t)at;
  cr_assert_leq(pos, target);
  while (target - pos > nblock + flen + 1) {
    cr_assert_eq(fwrite(block, 1, nblock, f), nblock);
    pos += nblock;
  }
  while (target - pos > flen + 1) {
    cr_assert_eq(fwrite(filler, 1, flen, f), flen);
    pos += flen;
  }
  for (; pos + 1 < target; pos++)
    fputc(' ', f);
  if (pos < target) {
    fputc('\n', f);
    pos++;
  }
}

/* A 30 MB output. Reads go in 1 MiB chunks from the file's start, so
 * chunk edges lie at multiples of 1 MiB. The value line of match A is cut
 * by the first edge inside the number; match B's header line ends just
 * before the second edge and its value line follows after it; match C is
 * 100 bytes from the end. */
Test(extract, large_file_matches_across_chunk_edges_in_bounded_memory) {
  const size_t mib = (size_t)1 << 20;
  char path[512];
  tmp_path(path, sizeof path, "big.dat");
  FILE *f = fopen(path, "wb");
  cr_assert_not_null(f);
  const char *a = " tip u = -1.234567E-02\n";
  fill_to(f, mib - 12); /* the edge falls after "-1." */
  fputs(a, f);
  const char *bh = " displacements for set TIP\n";
  fill_to(f, 2 * mib - strlen(bh));
  fputs(bh, f);
  fputs("\n         9 -1.000000E-17 -2.500000E-02  0.000000E+00\n", f);
  size_t total = 30 * mib + 123;
  const char *c = " tip u = -3.141593-100\n";
  fill_to(f, total - 100);
  fputs(c, f);
  fill_to(f, total);
  cr_assert_eq(fclose(f), 0);
  struct stat st;
  cr_assert_eq(stat(path, &st), 0);
  cr_assert_eq((size_t)st.st_size, total);

  bk_pattern_t *tip = compile("^ tip u = (\\S+)$");
  bk_pattern_t *block = compile("set TIP\\n\\s*^ +9 +\\S+ +(\\S+)");
  /* Each scan is measured from its own start: the peak is reset first
   * (clear_refs, Linux 4.0), so that memory a sanitizer keeps from an
   * earlier scan does not count. Where the reset is refused the growth is
   * measured from the first scan on, which is stricter. */
  long worst = 0;
  double v = 0;
  char why[128] = "";
  long before = peak_reset_kb();
  cr_assert_eq(bk_extract_file(tip, path, BK_MATCH_FIRST, &v, why, sizeof why),
               0, "%s", why);
  cr_assert_eq(v, -1.234567E-02);
  worst = growth(before, worst);
  before = peak_reset_kb();
  cr_assert_eq(bk_extract_file(tip, path, BK_MATCH_LAST, &v, why, sizeof why),
               0, "%s", why);
  cr_assert_eq(v, -3.141593e-100);
  worst = growth(before, worst);
  before = peak_reset_kb();
  cr_assert_eq(bk_extract_file(block, path, BK_MATCH_LAST, &v, why, sizeof why),
               0, "%s", why);
  cr_assert_eq(v, -2.5E-02);
  worst = growth(before, worst);
  bk_buf_t b;
  bk_buf_init(&b);
  before = peak_reset_kb();
  cr_assert_eq(bk_extract_file_each(tip, path, collect_cb, &b, why, sizeof why),
               0, "%s", why);
  worst = growth(before, worst);
  char want[128];
  snprintf(want, sizeof want, "%zu:-1.234567E-02\n%zu:-3.141593-100\n",
           mib - 12 + 9, total - 100 + 9);
  cr_assert_str_eq(b.data, want);
  bk_buf_close(&b);
  cr_log_info("peak memory grew by %ld kB at most in one scan of 30 MB", worst);
  cr_assert_lt(worst, 16 * 1024,
               "peak memory grew by %ld kB while scanning 30 MB", worst);
  bk_extract_pattern_free(tip);
  bk_extract_pattern_free(block);
  cr_assert_eq(unlink(path), 0);
}

/* The file scan must give the same matches, at the same offsets, as one
 * PCRE2 search over the whole text, wherever the chunk edges fall. The
 * text is the real ccx output, again with CR LF line ends. */
Test(extract, chunked_scan_equals_whole_text_scan_for_any_chunk_size) {
  static const char *const patterns[] = {
      "^ +9 +[^ ]+ +([-+]?[0-9]\\.[0-9]+E[-+][0-9]+) +[^ ]+ *$",
      "displacements \\(vx,vy,vz\\) for set TIP and time +[-+0-9.E]+"
      "[[:space:]]+9 +[^ ]+ +([-+]?[0-9]\\.[0-9]+E[-+][0-9]+)",
      "^ +\\d+ +\\d+ +(\\S+)",
      "(?<=E[-+]0)(\\d)\\b",
      "(\\d+)$",
      "^$",
      "x*",
      "\\b4\\d\\b",
      "E\\+0[78](?= +-)",
      "(?s)TIP.*?(\\d+)\\s+stresses",
  };
  char src[512], path[512];
  fixture_path(src, sizeof src, "extract_ccx_cantilever.dat");
  tmp_path(path, sizeof path, "scan.dat");
  bk_buf_t lf, text;
  bk_buf_init(&lf);
  bk_buf_init(&text);
  read_file(src, &lf);
  for (int crlf = 0; crlf < 2; crlf++) {
    bk_buf_reset(&text);
    for (size_t i = 0; i < lf.len; i++) {
      if (crlf && lf.data[i] == '\n')
        cr_assert_eq(bk_buf_putc(&text, '\r'), 0);
      cr_assert_eq(bk_buf_putc(&text, lf.data[i]), 0);
    }
    write_file(path, text.data, text.len);
    for (size_t k = 0; k < sizeof patterns / sizeof patterns[0]; k++) {
      bk_pattern_t *p = compile(patterns[k]);
      bk_buf_t whole, part;
      bk_buf_init(&whole);
      bk_buf_init(&part);
      cr_assert_eq(bk_extract_text_each(p, text.data, text.len, collect_cb,
                                        &whole, NULL, 0),
                   0);
      cr_assert_gt(whole.len, 0, "pattern %zu found nothing", k);
      static const size_t sizes[] = {
          1, 2, 3, 5, 7, 8, 13, 64, 97, 1000, 4095, 4096, 4097, 6000, 20000, 0};
      for (size_t s = 0; s < sizeof sizes / sizeof sizes[0]; s++) {
        bk__extract_set_chunk(sizes[s]);
        bk_buf_reset(&part);
        char why[128] = "";
        cr_assert_eq(
            bk_extract_file_each(p, path, collect_cb, &part, why, sizeof why),
            0, "%s", why);
        cr_assert(part.len == whole.len &&
                      memcmp(part.data, whole.data, whole.len) == 0,
                  "pattern %zu, chunk %zu, crlf %d: matches differ", k,
                  sizes[s], crlf);
      }
      bk__extract_set_chunk(0);
      bk_buf_close(&whole);
      bk_buf_close(&part);
      bk_extract_pattern_free(p);
    }
  }
  bk_buf_close(&lf);
  bk_buf_close(&text);
}

/* The same on random texts made of line ends, blanks and a few other
 * bytes, against patterns chosen to touch the edges of segments: ^ and $,
 * \b, lookarounds, empty matches, CR LF, \z. The seed is fixed; a failure
 * prints the text. */
Test(extract, chunked_scan_equals_whole_text_scan_on_random_texts) {
  static const char *const patterns[] = {
      "a\\n^1",     "^$",         "^",
      "$",          "\\d*",       "(\\d+)$",
      "^ *(\\S+)",  "a\\s+1",     "(?s)a.*?1",
      "(?s)a.*1",   "\\R",        "\\r?\\n^",
      "(?<=a)1+",   "(?<![a1])E", "\\b1\\b",
      "\\B",        "(?-m)^.",    "(?-m)\\S\\s*\\z",
      "\\Z",        "(?-m)$",     "E-?1|a",
      "1(?=\\s*$)", "[^\\n]*",    "(?=(\\d))",
      ".$",         "^\\s*$",     "(?m)1$\\s+^a",
  };
  static const char alphabet[] = "a1 \r\n\nE-";
  const unsigned seed = 20240611u;
  unsigned x = seed;
  char path[512];
  tmp_path(path, sizeof path, "random.dat");
  bk_pattern_t *pats[sizeof patterns / sizeof patterns[0]];
  size_t npat = sizeof patterns / sizeof patterns[0];
  for (size_t k = 0; k < npat; k++)
    pats[k] = compile(patterns[k]);
  bk_buf_t whole, part;
  bk_buf_init(&whole);
  bk_buf_init(&part);
  for (int round = 0; round < 120; round++) {
    char text[160];
    x = x * 1103515245u + 12345u;
    size_t n = (x >> 16) % sizeof text;
    for (size_t i = 0; i < n; i++) {
      x = x * 1103515245u + 12345u;
      text[i] = alphabet[(x >> 16) % (sizeof alphabet - 1)];
    }
    write_file(path, text, n);
    for (size_t k = 0; k < npat; k++) {
      bk_buf_reset(&whole);
      cr_assert_eq(
          bk_extract_text_each(pats[k], text, n, collect_cb, &whole, NULL, 0),
          0);
      static const size_t sizes[] = {1, 2, 3, 5, 8};
      for (size_t c = 0; c < sizeof sizes / sizeof sizes[0]; c++) {
        bk__extract_set_chunk(sizes[c]);
        bk_buf_reset(&part);
        cr_assert_eq(
            bk_extract_file_each(pats[k], path, collect_cb, &part, NULL, 0), 0);
        int same =
            part.len == whole.len &&
            (whole.len == 0 || memcmp(part.data, whole.data, whole.len) == 0);
        if (!same) {
          fprintf(stderr, "seed %u round %d text:", seed, round);
          for (size_t i = 0; i < n; i++)
            fprintf(stderr, " %02x", (unsigned char)text[i]);
          fprintf(stderr, "\nwhole:\n%s\nchunked:\n%s\n",
                  whole.len ? whole.data : "", part.len ? part.data : "");
        }
        cr_assert(same, "pattern '%s', chunk %zu: matches differ", patterns[k],
                  sizes[c]);
      }
      bk__extract_set_chunk(0);
    }
  }
  for (size_t k = 0; k < npat; k++)
    bk_extract_pattern_free(pats[k]);
  bk_buf_close(&whole);
  bk_buf_close(&part);
}

Test(extract, match_longer_than_window_is_no_match_with_reason) {
  size_t n = 3 * ((size_t)1 << 20);
  char *text = malloc(n);
  cr_assert_not_null(text);
  memset(text, 'y', n);
  memcpy(text, "BEGIN\n", 6);
  memcpy(text + n - 6, "7 END\n", 6);
  char path[512];
  tmp_path(path, sizeof path, "long.dat");
  write_file(path, text, n);
  bk_pattern_t *p = compile("(?s)BEGIN.*?(\\d+) END");
  double v = 0;
  char why[128];
  cr_assert_eq(bk_extract_file(p, path, BK_MATCH_FIRST, &v, why, sizeof why),
               BK_FAULT_NO_MATCH);
  cr_assert_str_eq(why, "match at byte 0 of long.dat spans more than 1 MiB");
  /* In memory there is no window. */
  cr_assert_eq(bk_extract_text(p, text, n, BK_MATCH_FIRST, &v, why, sizeof why),
               BK_FAULT_NONE, "%s", why);
  cr_assert_eq(v, 7);
  free(text);
  bk_extract_pattern_free(p);
}

/* Each allocation in turn fails; every failure gives BK_ENOMEM and leaks
 * nothing (ASan's leak check runs at the end of the test process). */
Test(extract, out_of_memory_is_reported_at_every_allocation) {
  for (long n = 1; n <= 60; n++) {
    bk_pattern_t *p = NULL;
    char msg[128] = "";
    size_t off;
    bk_alloc_fail_at(n);
    int rc = bk_extract_pattern_compile(ccx_header_re, &p, msg, sizeof msg, &off);
    bk_alloc_fail_at(0);
    if (rc) {
      cr_assert_eq(rc, BK_ENOMEM, "allocation %ld: %d %s", n, rc, msg);
      cr_assert_str_eq(msg, "out of memory");
      cr_assert_null(p);
    }
    bk_extract_pattern_free(p);
  }
  char path[512];
  fixture_path(path, sizeof path, "extract_ccx_cantilever.dat");
  bk_pattern_t *p = compile(ccx_header_re);
  int ok = 0;
  for (long m = 1; m <= 60; m++) {
    double v = 0;
    char why[128];
    bk_alloc_fail_at(m);
    int rc = bk_extract_file(p, path, BK_MATCH_LAST, &v, why, sizeof why);
    bk_alloc_fail_at(0);
    if (rc == BK_FAULT_NONE) {
      cr_assert_eq(v, -1.456286E-02);
      ok++;
      continue;
    }
    cr_assert_eq(rc, BK_ENOMEM, "allocation %ld: %d %s", m, rc, why);
    cr_assert_str_eq(why, "out of memory");
  }
  cr_assert_gt(ok, 50);
  bk_extract_pattern_free(p);
}
