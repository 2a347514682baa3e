/*
 * Compiles and evaluates C-like infix expressions over named values, for
 * limit states and template placeholders. Syntax: numbers (C literals, 1e-3,
 * 7.0E+10), names, + - * / ^ (power, right associative, binds tighter than
 * unary minus: -x^2 = -(x^2)), unary minus and plus, parentheses, and the
 * functions min max abs sqrt exp log log10 pow sin cos tan. Unknown names
 * and functions, wrong argument counts and syntax errors are reported at
 * compile time with the byte offset of the offending token.
 *
 * Compiled code is a flat stack program; evaluation allocates nothing.
 * See docs/expressions.md.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_EXPR_H
#define BK_EXPR_H

#include <stddef.h>

typedef struct bk_expr bk_expr_t;

/* Name table: `names[i]` is bound to values[i] at evaluation. */
typedef struct {
  const char *const *names;
  size_t n;
} bk_names_t;

/* Compiles src[0..len) (need not be NUL-terminated); `names` may be NULL.
 * The names are only read during the call. On success returns 0 and a new
 * expression in *out, to be freed with bk_expr_free(). On failure returns
 * BK_EPARSE (syntax, argument count), BK_ENOTFOUND (unknown name or
 * function) or BK_ENOMEM, writes a message into `msg` (if msgcap > 0; e.g.
 * "unknown name 'dflection' (did you mean 'deflection'?); known names:
 * span, deflection") and the byte offset of the offending token into
 * *err_off (if not NULL); *out is NULL. */
int bk_expr_compile(const char *src, size_t len, const bk_names_t *names,
                    bk_expr_t **out, char *msg, size_t msgcap, size_t *err_off);
void bk_expr_free(bk_expr_t *e);

/* Evaluates with names[i] bound to values[i]. Allocates nothing and keeps
 * no state, so it may run concurrently on one expression. IEEE 754
 * semantics: 1/0 is inf, sqrt(-1) and 0/0 are NaN, NaN propagates (also
 * through min and max); x^2 is x*x, other powers are pow(). */
double bk_expr_eval(const bk_expr_t *e, const double *values);

/* Which names the expression uses: sets used[i] = 1 for each (array of
 * names->n entries, cleared by the caller). */
void bk_expr_uses(const bk_expr_t *e, unsigned char *used);

#endif
