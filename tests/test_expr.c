/*
 * Tests of the expression compiler and evaluator. References: C99
 * arithmetic and the C library's libm, computed by the compiler in this
 * file beside each check (bit for bit, NaN matching NaN); the precedence of
 * ^ follows the usual mathematical convention (a^b^c = a^(b^c),
 * -a^2 = -(a^2)), written out as pow() calls. Error messages are checked
 * verbatim with their byte offsets.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"
#include "study/expr.h"

/* Names bound in most tests, and the C variables of the same names. */
static const char *const var_names[] = {"r", "s", "t", "x", "y", "z_2"};
static const bk_names_t vars = {var_names, 6};

static int same(double a, double b) {
  if (isnan(a) || isnan(b))
    return isnan(a) && isnan(b);
  return a == b && signbit(a) == signbit(b);
}

/* Compiles src (which must succeed) and evaluates it on `values`. */
static double run(const char *src, const bk_names_t *names,
                  const double *values) {
  bk_expr_t *e = NULL;
  char msg[512];
  size_t off = 99;
  int rc = bk_expr_compile(src, strlen(src), names, &e, msg, sizeof msg, &off);
  cr_assert_eq(rc, 0, "compile \"%s\": %d %s (offset %zu)", src, rc, msg, off);
  cr_assert_not_null(e);
  double v = bk_expr_eval(e, values);
  bk_expr_free(e);
  return v;
}

/* Checks that src evaluates to `want`, computed by C from the same
 * formula. */
#define CHECK_AS(src, want)                                                    \
  do {                                                                         \
    double got_ = run(src, &vars, vals);                                       \
    double want_ = (want);                                                     \
    cr_expect(same(got_, want_), "%s = %.17g, C gives %.17g", src, got_,       \
              want_);                                                          \
  } while (0)

/* For formulas that are the same text in C and in brink. */
#define CHECK(formula) CHECK_AS(#formula, formula)

Test(expr, arithmetic_matches_c) {
  /* Reference: C99 evaluation of the same formula (IEEE 754 double). */
  double r = 10.5, s = -2.25, t = 3.0, x = 0.1, y = 7e10, z_2 = -0.0;
  double vals[] = {r, s, t, x, y, z_2};
  CHECK(r - s * t);
  CHECK(r - s - t);
  CHECK(r / s / t);
  CHECK(r / (s / t));
  CHECK(r + s * t - x / y);
  CHECK((r + s) * (t - x));
  CHECK(r * s + t * x + y * z_2);
  CHECK(-r * -s);
  CHECK(-(r - s));
  CHECK(r - -s);
  CHECK(+r + +s);
  CHECK(x + x + x - 0.3);
  CHECK(1 / (1 / x));
  CHECK(z_2 * r);
  CHECK(-z_2);
  CHECK(0.1 + 0.2);
  CHECK((r * s) / (t * x) - (y / r) * (s + t));
  CHECK(((((r)))) * ((s)));
  CHECK(r * s * t * x * y);
  CHECK(2 * r - 3 * s + 4 * t);
  CHECK_AS("r\t-\n s *\r\nt", r - s * t);
}

Test(expr, power_is_right_associative_and_binds_tighter_than_minus) {
  /* Reference: mathematical convention, a^b^c = a^(b^c) and
   * -a^b = -(a^b), written out with C's pow(). */
  double r = 1.5, s = -2.0, t = 3.0, x = 0.5, y = 2.0, z_2 = 0.0;
  double vals[] = {r, s, t, x, y, z_2};
  CHECK_AS("2^3^2", 512.0);
  CHECK_AS("(2^3)^2", 64.0);
  CHECK_AS("-2^2", -4.0);
  CHECK_AS("(-2)^2", 4.0);
  CHECK_AS("2^-1", 0.5);
  CHECK_AS("2^-2^2", 0.0625);
  CHECK_AS("-r^t", -pow(r, t));
  CHECK_AS("r^t^x", pow(r, pow(t, x)));
  CHECK_AS("s^t", pow(s, t));
  CHECK_AS("r*t^x", r * pow(t, x));
  CHECK_AS("r^t*x", pow(r, t) * x);
  CHECK_AS("r/t^2", r / (t * t));
  CHECK_AS("t^-x", pow(t, -x));
  CHECK_AS("2*-t^2", 2 * -(t * t));
  CHECK_AS("r - s^2", r - s * s);
  CHECK_AS("x^y", x * x); /* y = 2 at run time: x*x as well */
  CHECK_AS("pow(r, t)", pow(r, t));
  CHECK_AS("pow(s, 2)", s * s);
  CHECK_AS("z_2^0", 1.0); /* C99 F.9.4.4: pow(x, +-0) is 1 */
}

Test(expr, number_literals_read_as_c_reads_them) {
  /* Reference: the C compiler's reading of the same literals. */
  double vals[6] = {0};
  CHECK(7e10);
  CHECK(7.0E+10);
  CHECK(1e-3);
  CHECK(.5);
  CHECK(5.);
  CHECK(0.1);
  CHECK(123456789012345678901234567890.0);
  CHECK(2.2250738585072014e-308);
  CHECK(4.9406564584124654e-324);
  CHECK(1.7976931348623157e308);
  CHECK(0.30000000000000004);
  CHECK(1E0);
  CHECK(00012.5e-0001);
  CHECK_AS("1e-400", 0.0); /* underflows to zero, as strtod() gives */
}

Test(expr, functions_match_libm) {
  /* Reference: glibc libm called directly; the expression must call the
   * same functions, so results agree bit for bit. */
  static const double xs[] = {0.0, -0.0, 0.5,      1.0,      -1.0,   2.0,
                              3.7, -7.3, 1e-9,     1e10,     -1e300, 700.0,
                              1e3, NAN,  INFINITY, -INFINITY};
  for (size_t i = 0; i < sizeof xs / sizeof xs[0]; i++) {
    double x = xs[i], y = 1.25;
    double vals[] = {0, 0, 0, x, y, 0};
    CHECK_AS("abs(x)", fabs(x));
    CHECK_AS("sqrt(x)", sqrt(x));
    CHECK_AS("exp(x)", exp(x));
    CHECK_AS("log(x)", log(x));
    CHECK_AS("log10(x)", log10(x));
    CHECK_AS("sin(x)", sin(x));
    CHECK_AS("cos(x)", cos(x));
    CHECK_AS("tan(x)", tan(x));
    CHECK_AS("pow(x, y)", pow(x, y));
    CHECK_AS("x^y", pow(x, y));
    CHECK_AS("pow(y, x)", pow(y, x));
    CHECK_AS("x^2", x * x);
    CHECK_AS("sqrt(abs(x)) + log(1 + abs(x))",
             sqrt(fabs(x)) + log(1 + fabs(x)));
  }
}

Test(expr, min_and_max_take_two_or_more_arguments) {
  double r = 3, s = -1, t = 2, x = 7, y = -5, z_2 = 0;
  double vals[] = {r, s, t, x, y, z_2};
  CHECK_AS("min(r, s)", -1.0);
  CHECK_AS("max(r, s)", 3.0);
  CHECK_AS("min(r, s, t, x, y)", -5.0);
  CHECK_AS("max(r, s, t, x, y)", 7.0);
  CHECK_AS("min(r, s) + max(t, x)", 6.0);
  CHECK_AS("max(min(r, t), min(x, y))", 2.0);
  CHECK_AS("min(1, 2, 3)", 1.0);
  CHECK_AS("-max(-r, -s)", -1.0); /* = min(r, s) */
}

Test(expr, ieee_semantics_at_evaluation) {
  /* Reference: IEEE 754 / C99 Annex F: x/0 is +-inf, 0/0 and sqrt(-1)
   * are NaN, log(0) is -inf. min and max propagate NaN by design
   * (docs/expressions.md), unlike C's fmin/fmax. */
  double vals[] = {0, 1, -1, NAN, INFINITY, 0};
  cr_expect(same(run("s/r", &vars, vals), INFINITY));
  cr_expect(same(run("t/r", &vars, vals), -INFINITY));
  cr_expect(same(run("1/0", &vars, vals), INFINITY));
  cr_expect(same(run("-1/0", &vars, vals), -INFINITY));
  cr_expect(isnan(run("r/r", &vars, vals)));
  cr_expect(isnan(run("sqrt(-1)", &vars, vals)));
  cr_expect(isnan(run("sqrt(t)", &vars, vals)));
  cr_expect(isnan(run("log(-1)", &vars, vals)));
  cr_expect(same(run("log(r)", &vars, vals), -INFINITY));
  cr_expect(isnan(run("y - y", &vars, vals)));
  cr_expect(isnan(run("min(x, 1)", &vars, vals)));
  cr_expect(isnan(run("min(1, x)", &vars, vals)));
  cr_expect(isnan(run("max(x, 1)", &vars, vals)));
  cr_expect(isnan(run("max(1, 2, x, 3)", &vars, vals)));
  cr_expect(isnan(run("x * 0", &vars, vals)));
  cr_expect(same(run("1e308 * 10", &vars, vals), INFINITY));
  cr_expect(same(run("-0", &vars, vals), -0.0));
  cr_expect(same(run("min(0, -0)", &vars, vals), 0.0));
  cr_expect(same(run("min(-0, 0)", &vars, vals), -0.0));
}

Test(expr, names_bind_to_values_by_index) {
  static const char *const n[] = {"span", "deflection", "E_mod2", "_k"};
  bk_names_t names = {n, 4};
  double vals[] = {6.0, 0.021, 2.1e5, -1};
  cr_expect(same(run("span*1000/200 - deflection", &names, vals),
                 6.0 * 1000 / 200 - 0.021));
  cr_expect(same(run("E_mod2 * _k", &names, vals), -2.1e5));
  vals[0] = 8.0;
  cr_expect(same(run("span*1000/200 - deflection", &names, vals),
                 8.0 * 1000 / 200 - 0.021));
}

Test(expr, name_that_equals_a_function_is_a_variable_unless_called) {
  static const char *const n[] = {"min", "e"};
  bk_names_t names = {n, 2};
  double vals[] = {4.0, 2.5};
  cr_expect(same(run("min * e", &names, vals), 10.0));
  cr_expect(same(run("min(min, e)", &names, vals), 2.5));
}

Test(expr, one_compiled_expression_evaluates_many_times) {
  bk_expr_t *e;
  const char *src = "r - s*t";
  cr_assert_eq(bk_expr_compile(src, strlen(src), &vars, &e, NULL, 0, NULL), 0);
  for (int i = 0; i < 1000; i++) {
    double v[6] = {i * 0.5, i - 3.0, 1.0 / (i + 1), 0, 0, 0};
    cr_assert(same(bk_expr_eval(e, v), v[0] - v[1] * v[2]));
  }
  bk_expr_free(e);
}

Test(expr, source_need_not_be_nul_terminated) {
  const char src[] = "r+s9999";
  bk_expr_t *e;
  double v[6] = {1, 2, 0, 0, 0, 0};
  cr_assert_eq(bk_expr_compile(src, 3, &vars, &e, NULL, 0, NULL), 0);
  cr_expect(same(bk_expr_eval(e, v), 3.0));
  bk_expr_free(e);
  /* A number at the very end of the given length stops there. */
  cr_assert_eq(bk_expr_compile("2.5e1", 3, &vars, &e, NULL, 0, NULL), 0);
  cr_expect(same(bk_expr_eval(e, v), 2.5));
  bk_expr_free(e);
}

Test(expr, uses_reports_each_name_used) {
  static const char *const n[] = {"a", "b", "c", "d", "e"};
  bk_names_t names = {n, 5};
  const char *src = "a*2 + min(d, 3, a) - 1/(2^d) + pow(2, e)";
  bk_expr_t *e;
  cr_assert_eq(bk_expr_compile(src, strlen(src), &names, &e, NULL, 0, NULL), 0);
  unsigned char used[5] = {0};
  bk_expr_uses(e, used);
  cr_expect_eq(used[0], 1);
  cr_expect_eq(used[1], 0);
  cr_expect_eq(used[2], 0);
  cr_expect_eq(used[3], 1);
  cr_expect_eq(used[4], 1);
  bk_expr_free(e);
  cr_assert_eq(bk_expr_compile("b", 1, &names, &e, NULL, 0, NULL), 0);
  memset(used, 0, sizeof used);
  bk_expr_uses(e, used);
  cr_expect(used[1] == 1 && used[0] + used[2] + used[3] + used[4] == 0);
  bk_expr_free(e);
  cr_assert_eq(bk_expr_compile("2*3", 3, &names, &e, NULL, 0, NULL), 0);
  memset(used, 0, sizeof used);
  bk_expr_uses(e, used);
  cr_expect(used[0] + used[1] + used[2] + used[3] + used[4] == 0);
  bk_expr_free(e);
}

/* ---- Errors ---- */

typedef struct {
  const char *src;
  int rc;
  size_t off;
  const char *msg;
} error_case_t;

static const char *const study_names[] = {"span", "deflection", "fy", "t"};
static const bk_names_t study = {study_names, 4};

static const error_case_t error_cases[] = {
    {"span*1000/200 - dflection", BK_ENOTFOUND, 16,
     "unknown name 'dflection' (did you mean 'deflection'?); known names: "
     "span, deflection, fy, t"},
    {"sapn", BK_ENOTFOUND, 0,
     "unknown name 'sapn' (did you mean 'span'?); known names: span, "
     "deflection, fy, t"},
    {"Fy * 2", BK_ENOTFOUND, 0,
     "unknown name 'Fy' (did you mean 'fy'?); known names: span, deflection, "
     "fy, t"},
    {"1 + q", BK_ENOTFOUND, 4,
     "unknown name 'q'; known names: span, deflection, fy, t"},
    {"sqr(t)", BK_ENOTFOUND, 0,
     "unknown function 'sqr' (did you mean 'sqrt'?); functions: min, max, "
     "abs, sqrt, exp, log, log10, pow, sin, cos, tan"},
    {"2 * hypot(t, t)", BK_ENOTFOUND, 4,
     "unknown function 'hypot'; functions: min, max, abs, sqrt, exp, log, "
     "log10, pow, sin, cos, tan"},
    {"fy(2)", BK_EPARSE, 0,
     "'fy' is not a function (write fy*(...) for a "
     "product)"},
    {"sqrt + 1", BK_EPARSE, 0, "'sqrt' is a function; call it as sqrt(...)"},
    {"sqrt(t, 2)", BK_EPARSE, 0, "sqrt() takes 1 argument, got 2"},
    {"t + abs()", BK_EPARSE, 4, "abs() takes 1 argument, got 0"},
    {"pow(t)", BK_EPARSE, 0, "pow() takes 2 arguments, got 1"},
    {"pow(t, 2, 3)", BK_EPARSE, 0, "pow() takes 2 arguments, got 3"},
    {"max(t)", BK_EPARSE, 0, "max() takes at least 2 arguments, got 1"},
    {"1 - min()", BK_EPARSE, 4, "min() takes at least 2 arguments, got 0"},
    {"", BK_EPARSE, 0, "empty expression"},
    {"  \t\n", BK_EPARSE, 0, "empty expression"},
    {"span +", BK_EPARSE, 6,
     "expected a number, a name or '(' after '+', found the end of the "
     "expression"},
    {"span * / 2", BK_EPARSE, 7,
     "expected a number, a name or '(' after '*', found '/'"},
    {") + 1", BK_EPARSE, 0, "expected a number, a name or '(', found ')'"},
    {"min(t, )", BK_EPARSE, 7,
     "expected a number, a name or '(' after ',', found ')'"},
    {"(span - t", BK_EPARSE, 0,
     "'(' is not closed: expected ')' before the end of the expression"},
    {"2 * (span - (t)", BK_EPARSE, 4,
     "'(' is not closed: expected ')' before the end of the expression"},
    {"(span t)", BK_EPARSE, 6, "expected an operator or ')', found name 't'"},
    {"max(t, fy", BK_EPARSE, 0,
     "'max(' is not closed: expected ')' before the end of the expression"},
    {"max(t fy)", BK_EPARSE, 6,
     "expected ',' or ')' in the arguments of max(), found name 'fy'"},
    {"span t", BK_EPARSE, 5,
     "unexpected name 't' after a complete expression (missing operator?)"},
    {"span 2.5", BK_EPARSE, 5,
     "unexpected number '2.5' after a complete expression (missing "
     "operator?)"},
    {"span)", BK_EPARSE, 4, "unexpected ')' without a matching '('"},
    {"span, t", BK_EPARSE, 4, "unexpected ',' outside a function call"},
    {"span ** 2", BK_EPARSE, 5,
     "'**' is not an operator; write a^b for a "
     "power"},
    {"2span", BK_EPARSE, 0,
     "malformed number '2span' (write 2*span for a product)"},
    {"t * 1.5.2", BK_EPARSE, 4, "malformed number '1.5.2'"},
    {"7e", BK_EPARSE, 0, "malformed number '7e': the exponent has no digits"},
    {"7.0E+ 10", BK_EPARSE, 0,
     "malformed number '7.0E+': the exponent has no digits"},
    {"1e999 - t", BK_EPARSE, 0, "number '1e999' is too large for a double"},
    {"t # fy", BK_EPARSE, 2, "unexpected character '#'"},
    {"t < 0", BK_EPARSE, 2, "unexpected character '<'"},
    {"t \x01", BK_EPARSE, 2, "unexpected byte 0x01"},
    {"t + \xc3\xa9", BK_EPARSE, 4, "unexpected byte 0xc3"},
};

Test(expr, errors_are_reported_verbatim_with_offsets) {
  for (size_t i = 0; i < sizeof error_cases / sizeof error_cases[0]; i++) {
    const error_case_t *c = &error_cases[i];
    bk_expr_t *e = (bk_expr_t *)&e; /* must be reset to NULL */
    char msg[512];
    size_t off = 12345;
    int rc = bk_expr_compile(c->src, strlen(c->src), &study, &e, msg,
                             sizeof msg, &off);
    cr_expect_eq(rc, c->rc, "\"%s\": code %d, want %d", c->src, rc, c->rc);
    cr_expect_null(e, "\"%s\": *out not NULL", c->src);
    cr_expect_eq(off, c->off, "\"%s\": offset %zu, want %zu", c->src, off,
                 c->off);
    cr_expect_str_eq(msg, c->msg, "\"%s\"", c->src);
  }
}

Test(expr, unknown_name_lists_at_most_eight_known_names) {
  static const char *const n[] = {"a1", "a2", "a3", "a4", "a5",
                                  "a6", "a7", "a8", "a9", "a10"};
  bk_names_t names = {n, 10};
  char msg[512];
  size_t off;
  bk_expr_t *e;
  int rc = bk_expr_compile("b", 1, &names, &e, msg, sizeof msg, &off);
  cr_expect_eq(rc, BK_ENOTFOUND);
  cr_expect_str_eq(msg, "unknown name 'b'; known names: a1, a2, a3, a4, a5, "
                        "a6, a7, a8, ... (10 in all)");
  rc = bk_expr_compile("x", 1, NULL, &e, msg, sizeof msg, &off);
  cr_expect_eq(rc, BK_ENOTFOUND);
  cr_expect_str_eq(msg, "unknown name 'x'; no names are defined");
}

Test(expr, long_names_are_cut_in_messages) {
  char src[300];
  memset(src, 'q', 200);
  src[200] = '\0';
  char msg[512];
  size_t off;
  bk_expr_t *e;
  cr_assert_eq(bk_expr_compile(src, 200, NULL, &e, msg, sizeof msg, &off),
               BK_ENOTFOUND);
  char want[200];
  snprintf(want, sizeof want, "unknown name '%.64s'; no names are defined",
           src);
  cr_expect_str_eq(msg, want);
}

Test(expr, small_message_buffer_is_truncated_safely) {
  char msg[12];
  size_t off;
  bk_expr_t *e;
  memset(msg, 'X', sizeof msg);
  int rc = bk_expr_compile("dflection", 9, &study, &e, msg, sizeof msg, &off);
  cr_expect_eq(rc, BK_ENOTFOUND);
  cr_expect_str_eq(msg, "unknown nam");
  /* No buffer at all is allowed too. */
  rc = bk_expr_compile("(", 1, &study, &e, NULL, 0, NULL);
  cr_expect_eq(rc, BK_EPARSE);
}

Test(expr, deep_nesting_is_refused_not_crashing) {
  enum { N = 600 };
  char src[2 * N + 2];
  memset(src, '(', N);
  src[N] = '1';
  memset(src + N + 1, ')', N);
  char msg[256];
  size_t off;
  bk_expr_t *e;
  int rc = bk_expr_compile(src, 2 * N + 1, NULL, &e, msg, sizeof msg, &off);
  cr_expect_eq(rc, BK_EPARSE);
  cr_expect_str_eq(msg, "expression is nested too deeply (more than 500 "
                        "levels)");
  cr_expect_eq(off, 500); /* the 501st parenthesis */
  /* 400 levels are fine. */
  rc = bk_expr_compile(src + 200, 2 * 400 + 1, NULL, &e, msg, sizeof msg, &off);
  cr_assert_eq(rc, 0, "%s", msg);
  cr_expect(same(bk_expr_eval(e, NULL), 1.0));
  bk_expr_free(e);
}

Test(expr, long_chains_are_refused_beyond_the_height_limit) {
  /* "x+x+...": a left-deep tree one level taller per term. */
  static char src[2 * 10002];
  size_t n = 0;
  for (int i = 0; i < 10001; i++) {
    if (i)
      src[n++] = '+';
    src[n++] = 'x';
  }
  char msg[256];
  size_t off;
  bk_expr_t *e;
  int rc = bk_expr_compile(src, n, &vars, &e, msg, sizeof msg, &off);
  cr_expect_eq(rc, BK_EPARSE);
  cr_expect_str_eq(msg, "expression is too complex (more than 10000 nested "
                        "operations)");
  /* 5000 terms compile and sum exactly. */
  rc = bk_expr_compile(src, 2 * 5000 - 1, &vars, &e, msg, sizeof msg, &off);
  cr_assert_eq(rc, 0, "%s", msg);
  double v[6] = {0, 0, 0, 0.5, 0, 0};
  cr_expect(same(bk_expr_eval(e, v), 2500.0));
  bk_expr_free(e);
}

Test(expr, every_failed_allocation_gives_enomem) {
  const char *src = "max(r, s, t) - (x*y + z_2)/(r - s) + 2^3 * sqrt(t)";
  double v[6] = {1, 2, 3, 4, 5, 6};
  double want = run(src, &vars, v);
  for (long n = 1;; n++) {
    bk_expr_t *e = NULL;
    char msg[128];
    size_t off;
    bk_alloc_fail_at(n);
    int rc =
        bk_expr_compile(src, strlen(src), &vars, &e, msg, sizeof msg, &off);
    bk_alloc_fail_at(0);
    if (rc == 0) {
      cr_expect(same(bk_expr_eval(e, v), want));
      bk_expr_free(e);
      cr_expect_gt(n, 1);
      break;
    }
    cr_assert_eq(rc, BK_ENOMEM, "allocation %ld: %d %s", n, rc, msg);
    cr_expect_null(e);
    cr_expect_str_eq(msg, "out of memory");
    cr_assert_lt(n, 100);
  }
}

/* ---- Property: compile(format(tree)) equals a direct evaluation ---- */

enum { K_NUM, K_VAR, K_NEG, K_ADD, K_SUB, K_MUL, K_DIV, K_POW, K_CALL };

static const char *const fn_names[] = {"min", "max", "abs",   "sqrt",
                                       "exp", "log", "log10", "pow",
                                       "sin", "cos", "tan"};

typedef struct tnode {
  int kind;
  double k;
  int var;
  int fn;
  int nargs;
  struct tnode *arg[4];
} tnode_t;

typedef struct {
  uint64_t s;
  tnode_t pool[4096];
  int npool;
  char text[1 << 16];
  size_t len;
} gen_t;

static uint64_t next(gen_t *g) {
  /* xorshift64* */
  g->s ^= g->s >> 12;
  g->s ^= g->s << 25;
  g->s ^= g->s >> 27;
  return g->s * 2685821657736338717ULL;
}

static int pick(gen_t *g, int n) {
  return (int)(next(g) % (uint64_t)n);
}

static tnode_t *make(gen_t *g, int depth) {
  tnode_t *n = &g->pool[g->npool++];
  memset(n, 0, sizeof *n);
  int leaf = depth <= 0 || pick(g, 4) == 0;
  if (leaf) {
    static const double ks[] = {0, 1, 2, 3, 0.5, 10, 1e-3, 7e10, 0.1, 2.5};
    if (pick(g, 2)) {
      n->kind = K_VAR;
      n->var = pick(g, 6);
    } else {
      n->kind = K_NUM;
      n->k = pick(g, 3) ? ks[pick(g, 10)] : (double)(next(g) >> 11) * 0x1p-40;
    }
    return n;
  }
  int kind = K_NEG + pick(g, K_CALL - K_NEG + 1);
  n->kind = kind;
  if (kind == K_NEG) {
    n->arg[0] = make(g, depth - 1);
  } else if (kind == K_CALL) {
    n->fn = pick(g, 11);
    n->nargs = n->fn <= 1 ? 2 + pick(g, 3) : n->fn == 7 ? 2 : 1;
    for (int i = 0; i < n->nargs; i++)
      n->arg[i] = make(g, depth - 1);
  } else {
    n->arg[0] = make(g, depth - 1);
    n->arg[1] = make(g, depth - 1);
  }
  return n;
}

/* The documented semantics, written independently of src/expr.c. */
static double pw(double a, double b) {
  return b == 2.0 ? a * a : pow(a, b);
}
static double mn(double a, double b) {
  return isnan(a) || isnan(b) ? NAN : (b < a ? b : a);
}
static double mx(double a, double b) {
  return isnan(a) || isnan(b) ? NAN : (b > a ? b : a);
}

static double direct(const tnode_t *n, const double *v) {
  switch (n->kind) {
  case K_NUM:
    return n->k;
  case K_VAR:
    return v[n->var];
  case K_NEG:
    return -direct(n->arg[0], v);
  case K_ADD:
    return direct(n->arg[0], v) + direct(n->arg[1], v);
  case K_SUB:
    return direct(n->arg[0], v) - direct(n->arg[1], v);
  case K_MUL:
    return direct(n->arg[0], v) * direct(n->arg[1], v);
  case K_DIV:
    return direct(n->arg[0], v) / direct(n->arg[1], v);
  case K_POW:
    return pw(direct(n->arg[0], v), direct(n->arg[1], v));
  default: {
    double a = direct(n->arg[0], v);
    switch (n->fn) {
    case 0:
    case 1:
      for (int i = 1; i < n->nargs; i++) {
        double b = direct(n->arg[i], v);
        a = n->fn == 0 ? mn(a, b) : mx(a, b);
      }
      return a;
    case 2:
      return fabs(a);
    case 3:
      return sqrt(a);
    case 4:
      return exp(a);
    case 5:
      return log(a);
    case 6:
      return log10(a);
    case 7:
      return pw(a, direct(n->arg[1], v));
    case 8:
      return sin(a);
    case 9:
      return cos(a);
    default:
      return tan(a);
    }
  }
  }
}

static void put(gen_t *g, const char *s) {
  size_t n = strlen(s);
  cr_assert_lt(g->len + n, sizeof g->text);
  memcpy(g->text + g->len, s, n);
  g->len += n;
}

static void space(gen_t *g) {
  static const char *const sp[] = {"", "", "", " ", "  ", "\t", "\n"};
  put(g, sp[pick(g, 7)]);
}

/* Binding strength of each form: 1 sums, 2 products, 3 signs, 4 powers,
 * 5 primaries. A child weaker than its slot needs parentheses. */
static int strength(const tnode_t *n) {
  switch (n->kind) {
  case K_ADD:
  case K_SUB:
    return 1;
  case K_MUL:
  case K_DIV:
    return 2;
  case K_NEG:
    return 3;
  case K_POW:
    return 4;
  default:
    return 5;
  }
}

/* Writes the tree with the fewest parentheses the grammar needs, plus
 * some extra ones and random white space. */
static void format(gen_t *g, const tnode_t *n, int slot) {
  int paren = strength(n) < slot || pick(g, 10) == 0;
  if (paren)
    put(g, "(");
  space(g);
  char buf[64];
  switch (n->kind) {
  case K_NUM:
    snprintf(buf, sizeof buf, "%.17g", n->k);
    put(g, buf);
    break;
  case K_VAR:
    put(g, var_names[n->var]);
    break;
  case K_NEG:
    put(g, "-");
    space(g);
    format(g, n->arg[0], 3);
    break;
  case K_ADD:
  case K_SUB:
    format(g, n->arg[0], 1);
    put(g, n->kind == K_ADD ? "+" : "-");
    space(g);
    format(g, n->arg[1], 2);
    break;
  case K_MUL:
  case K_DIV:
    format(g, n->arg[0], 2);
    put(g, n->kind == K_MUL ? "*" : "/");
    space(g);
    format(g, n->arg[1], 3);
    break;
  case K_POW:
    format(g, n->arg[0], 5);
    put(g, "^");
    space(g);
    format(g, n->arg[1], 3);
    break;
  default:
    put(g, fn_names[n->fn]);
    put(g, "(");
    for (int i = 0; i < n->nargs; i++) {
      if (i)
        put(g, ",");
      format(g, n->arg[i], 1);
    }
    put(g, ")");
    break;
  }
  space(g);
  if (paren)
    put(g, ")");
}

Test(expr, compiled_random_expressions_equal_direct_evaluation) {
  static gen_t g;
  static const double sets[][6] = {
      {1.5, -2.0, 3.0, 0.25, 2.0, 0.0},
      {-0.0, 10.0, -7.5, 1e-300, 1e300, 2.0},
      {0.3, 0.7, -0.1, 4.0, -3.0, 1.0},
      {NAN, 1.0, 2.0, INFINITY, -INFINITY, 0.5},
  };
  uint64_t seed = 0x5eed2024c0ffeeULL;
  int nexprs = 3000;
  for (int c = 0; c < nexprs; c++) {
    g.s = seed + (uint64_t)c * 0x9E3779B97F4A7C15ULL;
    if (g.s == 0)
      g.s = 1;
    g.npool = 0;
    g.len = 0;
    tnode_t *t = make(&g, 1 + pick(&g, 6));
    format(&g, t, 1);
    g.text[g.len] = '\0';
    bk_expr_t *e;
    char msg[256];
    size_t off;
    int rc = bk_expr_compile(g.text, g.len, &vars, &e, msg, sizeof msg, &off);
    cr_assert_eq(
        rc, 0, "case %d (seed %#llx): \"%s\": %s at %zu", c,
        (unsigned long long)(seed + (uint64_t)c * 0x9E3779B97F4A7C15ULL),
        g.text, msg, off);
    for (size_t s = 0; s < sizeof sets / sizeof sets[0]; s++) {
      double got = bk_expr_eval(e, sets[s]);
      double want = direct(t, sets[s]);
      cr_assert(same(got, want),
                "case %d, values %zu: \"%s\" = %.17g, want %.17g", c, s, g.text,
                got, want);
    }
    bk_expr_free(e);
  }
}
