/*
 * Expression compiler and evaluator (see expr.h and docs/expressions.md).
 *
 * Source text is parsed by recursive descent into a small tree; a subtree
 * whose operands are all constants is folded into a constant as soon as it
 * is built. The tree is then flattened into a program for an accumulator
 * stack machine: the top of the stack lives in a local variable, and a
 * binary operator whose operand is a name or a constant carries that operand
 * inline, so "r - s*t" runs as three instructions. Operands are ordered by
 * their Sethi-Ullman number, which keeps the stack at most log2(leaves) + 1
 * deep. Evaluation touches only the program, the caller's values and a fixed
 * array on the C stack; it allocates nothing and keeps no state, so one
 * compiled expression may be evaluated from several threads at once.
 *
 * Arithmetic is IEEE 754 double precision as C99 defines it: 1/0 is inf,
 * 0/0 and sqrt(-1) are NaN, and NaN propagates through every operator and
 * function (also min and max, unlike C's fmin and fmax).
 *
 * SPDX-License-Identifier: MIT
 */
#include "study/expr.h"

#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/alloc.h"
#include "base/error.h"

/* Parsing recursion (parentheses, signs, powers, calls) deeper than
 * MAX_NESTING and trees taller than MAX_HEIGHT are refused, which keeps the
 * recursive parser and code generator well inside the C stack. STACK_SLOTS
 * bounds the evaluation stack; by the Sethi-Ullman bound a program needing
 * more would have more than 2^63 leaves, so the check in bk_expr_compile()
 * is a guard only. */
#define MAX_NESTING 500
#define MAX_HEIGHT  10000
#define STACK_SLOTS 64

/* Longest number literal accepted; longer ones cannot be more precise. */
#define MAX_NUMBER_LEN 400

/* At most this many bytes of a name are quoted in messages. */
#define QUOTE_MAX 64

/* Binary and unary operators. Functions of one argument are unary
 * operators; SQR is x*x, the form x^2 takes. */
#define BK_BINOPS(X) X(ADD) X(SUB) X(MUL) X(DIV) X(POW) X(MIN) X(MAX)
#define BK_UNOPS(X)                                                            \
  X(NEG) X(SQR) X(ABS) X(SQRT) X(EXP) X(LOG) X(LOG10) X(SIN) X(COS) X(TAN)

enum {
#define X(n) B_##n,
  BK_BINOPS(X)
#undef X
};

enum {
#define X(n) U_##n,
  BK_UNOPS(X)
#undef X
};

/* Operand modes of a binary instruction. With L and R the left and right
 * operands of the source operator and `acc` the top of the stack:
 *   S   L popped from the stack, R = acc     RS  R popped, L = acc
 *   V   L = acc, R = values[i]                RV  L = values[i], R = acc
 *   K   L = acc, R = k                        RK  L = k, R = acc */
enum { M_S, M_RS, M_V, M_RV, M_K, M_RK, NMODES };

/* Opcodes. Binary opcodes are laid out as OP_ADD_S + op * NMODES + mode and
 * unary ones as OP_NEG + op; code_bin() and code_un() rely on that order. */
enum {
  OP_END,
  OP_VAR,   /* push acc, acc = values[i] */
  OP_CONST, /* push acc, acc = k */
#define X(n)                                                                   \
  OP_##n##_S, OP_##n##_RS, OP_##n##_V, OP_##n##_RV, OP_##n##_K, OP_##n##_RK,
  BK_BINOPS(X)
#undef X
#define X(n) OP_##n,
      BK_UNOPS(X)
#undef X
};

typedef struct {
  uint32_t op;
  uint32_t i; /* name index for OP_VAR and modes V, RV */
  double k;   /* constant for OP_CONST and modes K, RK */
} op_t;

/* A compiled program: `code` ends with OP_END. */
struct bk_expr {
  size_t ncode;
  op_t code[];
};

/* The arithmetic, shared by constant folding and evaluation so that a
 * folded subtree has exactly the value it would have at run time. */
static inline double f_ADD(double a, double b) {
  return a + b;
}
static inline double f_SUB(double a, double b) {
  return a - b;
}
static inline double f_MUL(double a, double b) {
  return a * b;
}
static inline double f_DIV(double a, double b) {
  return a / b;
}
/* x^2 is x*x, the correctly rounded square, wherever the exponent is
 * exactly 2; every other power is the C library's pow(). */
static inline double f_POW(double a, double b) {
  return b == 2.0 ? a * a : pow(a, b);
}
/* min and max propagate NaN: a limit state min(g1, g2) whose g1 failed to
 * compute must not quietly become g2. Of two equal values (0 and -0) the
 * first is returned. */
static inline double f_MIN(double a, double b) {
  if (isnan(a) || isnan(b))
    return a + b;
  return b < a ? b : a;
}
static inline double f_MAX(double a, double b) {
  if (isnan(a) || isnan(b))
    return a + b;
  return b > a ? b : a;
}
static inline double f_NEG(double a) {
  return -a;
}
static inline double f_SQR(double a) {
  return a * a;
}
#define f_ABS   fabs
#define f_SQRT  sqrt
#define f_EXP   exp
#define f_LOG   log
#define f_LOG10 log10
#define f_SIN   sin
#define f_COS   cos
#define f_TAN   tan

static double apply_bin(int op, double a, double b) {
  switch (op) {
#define X(n)                                                                   \
  case B_##n:                                                                  \
    return f_##n(a, b);
    BK_BINOPS(X)
#undef X
  }
  return NAN;
}

static double apply_un(int op, double a) {
  switch (op) {
#define X(n)                                                                   \
  case U_##n:                                                                  \
    return f_##n(a);
    BK_UNOPS(X)
#undef X
  }
  return NAN;
}

double bk_expr_eval(const bk_expr_t *e, const double *values) {
  double stack[STACK_SLOTS + 1];
  double *sp = stack;
  double acc = 0.0;
  for (const op_t *p = e->code;; p++) {
    switch (p->op) {
    case OP_END:
      return acc;
    case OP_VAR:
      *sp++ = acc;
      acc = values[p->i];
      break;
    case OP_CONST:
      *sp++ = acc;
      acc = p->k;
      break;
#define X(n)                                                                   \
  case OP_##n##_S:                                                             \
    sp--;                                                                      \
    acc = f_##n(*sp, acc);                                                     \
    break;                                                                     \
  case OP_##n##_RS:                                                            \
    sp--;                                                                      \
    acc = f_##n(acc, *sp);                                                     \
    break;                                                                     \
  case OP_##n##_V:                                                             \
    acc = f_##n(acc, values[p->i]);                                            \
    break;                                                                     \
  case OP_##n##_RV:                                                            \
    acc = f_##n(values[p->i], acc);                                            \
    break;                                                                     \
  case OP_##n##_K:                                                             \
    acc = f_##n(acc, p->k);                                                    \
    break;                                                                     \
  case OP_##n##_RK:                                                            \
    acc = f_##n(p->k, acc);                                                    \
    break;
      BK_BINOPS(X)
#undef X
#define X(n)                                                                   \
  case OP_##n:                                                                 \
    acc = f_##n(acc);                                                          \
    break;
      BK_UNOPS(X)
#undef X
    default:
      return NAN;
    }
  }
}

void bk_expr_uses(const bk_expr_t *e, unsigned char *used) {
  for (size_t j = 0; j < e->ncode; j++) {
    uint32_t op = e->code[j].op;
    int var = op == OP_VAR;
    if (op >= OP_ADD_S && op < OP_NEG) {
      uint32_t mode = (op - OP_ADD_S) % NMODES;
      var = mode == M_V || mode == M_RV;
    }
    if (var)
      used[e->code[j].i] = 1;
  }
}

void bk_expr_free(bk_expr_t *e) {
  bk_free(e);
}

/* ---- Functions ---- */

enum { FN_UN, FN_BIN, FN_NARY };

static const struct {
  const char *name;
  int kind;
  int op;
} funcs[] = {
    {"min", FN_NARY, B_MIN},   {"max", FN_NARY, B_MAX}, {"abs", FN_UN, U_ABS},
    {"sqrt", FN_UN, U_SQRT},   {"exp", FN_UN, U_EXP},   {"log", FN_UN, U_LOG},
    {"log10", FN_UN, U_LOG10}, {"pow", FN_BIN, B_POW},  {"sin", FN_UN, U_SIN},
    {"cos", FN_UN, U_COS},     {"tan", FN_UN, U_TAN},
};
#define NFUNCS (sizeof funcs / sizeof funcs[0])

/* ---- Tree ---- */

enum { N_NUM, N_VAR, N_UN, N_BIN };

/* A tree node. `regs` is the number of values live at once while it is
 * evaluated (its Sethi-Ullman number), `height` its height; both count the
 * node itself. Children are indices into the parser's node array. */
typedef struct {
  int kind;
  int op;
  int a, b;
  uint32_t var;
  int regs;
  int height;
  double k;
} node_t;

enum {
  T_END,
  T_NUM,
  T_NAME,
  T_PLUS,
  T_MINUS,
  T_STAR,
  T_SLASH,
  T_CARET,
  T_LP,
  T_RP,
  T_COMMA
};

/* Parser state. The current token is src[tstart..tend); the previous one
 * is kept for messages ("after '+'"). Once `rc` is set, every function
 * returns -1 and the first message stands. */
typedef struct {
  const char *src;
  size_t len;
  size_t pos;
  int tok;
  size_t tstart, tend;
  double tnum;
  int ptok;
  size_t pstart, pend;
  const bk_names_t *names;
  node_t *nodes;
  int nnodes, capnodes;
  int depth;
  int rc;
  char *msg;
  size_t msgcap;
  size_t err_off;
} parser_t;

/* ---- Messages ---- */

/* Appends to the message buffer, truncating quietly when it is full. */
static void msg_add(parser_t *p, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
static void msg_add(parser_t *p, const char *fmt, ...) {
  if (!p->msg || p->msgcap == 0)
    return;
  size_t used = strlen(p->msg);
  if (used + 1 >= p->msgcap)
    return;
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(p->msg + used, p->msgcap - used, fmt, ap);
  va_end(ap);
}

/* Records the first error: code, offset and message. Returns -1. */
static int fail(parser_t *p, int code, size_t off, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));
static int fail(parser_t *p, int code, size_t off, const char *fmt, ...) {
  if (p->rc)
    return -1;
  p->rc = code;
  p->err_off = off;
  if (p->msg && p->msgcap > 0) {
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(p->msg, p->msgcap, fmt, ap);
    va_end(ap);
  }
  return -1;
}

static int quote_len(size_t n) {
  return n > QUOTE_MAX ? QUOTE_MAX : (int)n;
}

/* Describes the current token for "found ..." messages. */
static void describe_token(parser_t *p, char *buf, size_t cap) {
  const char *s = p->src + p->tstart;
  int n = quote_len(p->tend - p->tstart);
  switch (p->tok) {
  case T_END:
    snprintf(buf, cap, "the end of the expression");
    break;
  case T_NUM:
    snprintf(buf, cap, "number '%.*s'", n, s);
    break;
  case T_NAME:
    snprintf(buf, cap, "name '%.*s'", n, s);
    break;
  default:
    snprintf(buf, cap, "'%.*s'", n, s);
    break;
  }
}

/* Optimal string alignment distance (Levenshtein plus adjacent
 * transpositions) between the first QUOTE_MAX bytes of a and b. */
static int edit_distance(const char *a, size_t na, const char *b, size_t nb) {
  int rows[3][QUOTE_MAX + 1];
  na = na > QUOTE_MAX ? QUOTE_MAX : na;
  nb = nb > QUOTE_MAX ? QUOTE_MAX : nb;
  int *pp = rows[0], *prev = rows[1], *cur = rows[2];
  for (size_t j = 0; j <= nb; j++)
    prev[j] = (int)j;
  for (size_t i = 1; i <= na; i++) {
    cur[0] = (int)i;
    for (size_t j = 1; j <= nb; j++) {
      int cost = a[i - 1] != b[j - 1];
      int v = prev[j - 1] + cost;
      if (prev[j] + 1 < v)
        v = prev[j] + 1;
      if (cur[j - 1] + 1 < v)
        v = cur[j - 1] + 1;
      if (i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] &&
          pp[j - 2] + 1 < v)
        v = pp[j - 2] + 1;
      cur[j] = v;
    }
    int *t = pp;
    pp = prev;
    prev = cur;
    cur = t;
  }
  return prev[nb];
}

static int same_ignoring_case(const char *a, size_t na, const char *b) {
  if (strlen(b) != na)
    return 0;
  for (size_t i = 0; i < na; i++) {
    int x = (unsigned char)a[i], y = (unsigned char)b[i];
    if (x >= 'A' && x <= 'Z')
      x += 'a' - 'A';
    if (y >= 'A' && y <= 'Z')
      y += 'a' - 'A';
    if (x != y)
      return 0;
  }
  return 1;
}

/* Returns the candidate closest to s[0..n), or NULL when none is close
 * enough to be a likely typo: a case-only difference, or an edit distance
 * below the length of s and at most 1 + n/4. */
static const char *nearest(const char *s, size_t n, const char *const *cand,
                           size_t ncand, size_t stride) {
  const char *best = NULL;
  int bestd = INT_MAX;
  for (size_t i = 0; i < ncand; i++) {
    const char *c = *(const char *const *)((const char *)cand + i * stride);
    if (!c)
      continue;
    int d = same_ignoring_case(s, n, c) ? 0 : edit_distance(s, n, c, strlen(c));
    if (d < bestd) {
      bestd = d;
      best = c;
    }
  }
  if (best && (bestd == 0 || ((size_t)bestd < n && (size_t)bestd <= 1 + n / 4)))
    return best;
  return NULL;
}

/* ---- Lexer ---- */

static int is_digit(int c) {
  return c >= '0' && c <= '9';
}
static int is_name_start(int c) {
  return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || c == '_';
}
static int is_name_char(int c) {
  return is_name_start(c) || is_digit(c);
}
static int is_space(int c) {
  return c == ' ' || c == '\t' || c == '\n' || c == '\r' || c == '\v' ||
         c == '\f';
}

/* Lexes a decimal floating literal at src[i]: digits, an optional fraction
 * and an optional exponent, as C writes them (7e10, 7.0E+10, 1e-3, .5). */
static int lex_number(parser_t *p, size_t i) {
  const char *s = p->src;
  size_t n = p->len, j = i;
  while (j < n && is_digit(s[j]))
    j++;
  if (j < n && s[j] == '.') {
    j++;
    while (j < n && is_digit(s[j]))
      j++;
  }
  if (j < n && (s[j] == 'e' || s[j] == 'E')) {
    size_t k = j + 1;
    if (k < n && (s[k] == '+' || s[k] == '-'))
      k++;
    if (k >= n || !is_digit(s[k])) {
      while (k < n && is_name_char(s[k]))
        k++;
      return fail(p, BK_EPARSE, i,
                  "malformed number '%.*s': the exponent has no digits",
                  quote_len(k - i), s + i);
    }
    while (k < n && is_digit(s[k]))
      k++;
    j = k;
  }
  if (j < n && (is_name_char(s[j]) || s[j] == '.')) {
    size_t k = j;
    while (k < n && (is_name_char(s[k]) || s[k] == '.'))
      k++;
    if (is_name_start(s[j]))
      return fail(p, BK_EPARSE, i,
                  "malformed number '%.*s' (write %.*s*%.*s for a product)",
                  quote_len(k - i), s + i, quote_len(j - i), s + i,
                  quote_len(k - j), s + j);
    return fail(p, BK_EPARSE, i, "malformed number '%.*s'", quote_len(k - i),
                s + i);
  }
  if (j - i > MAX_NUMBER_LEN)
    return fail(p, BK_EPARSE, i,
                "number '%.*s...' is too long (over %d digits)", QUOTE_MAX,
                s + i, MAX_NUMBER_LEN);
  /* strtod() on a NUL-terminated copy: src need not be terminated. brink
   * keeps the C locale for LC_NUMERIC, so the decimal point is '.'. */
  char buf[MAX_NUMBER_LEN + 1];
  memcpy(buf, s + i, j - i);
  buf[j - i] = '\0';
  errno = 0;
  double v = strtod(buf, NULL);
  if (errno == ERANGE && isinf(v))
    return fail(p, BK_EPARSE, i, "number '%.*s' is too large for a double",
                quote_len(j - i), s + i);
  p->tok = T_NUM;
  p->tnum = v;
  p->tend = j;
  p->pos = j;
  return 0;
}

/* Reads the next token into p->tok, remembering the current one as the
 * previous. Returns 0, or -1 on a lexical error. */
static int lex(parser_t *p) {
  if (p->rc)
    return -1;
  p->ptok = p->tok;
  p->pstart = p->tstart;
  p->pend = p->tend;
  const char *s = p->src;
  size_t n = p->len, i = p->pos;
  while (i < n && is_space((unsigned char)s[i]))
    i++;
  p->tstart = i;
  if (i >= n) {
    p->tok = T_END;
    p->tend = p->pos = i;
    return 0;
  }
  int c = (unsigned char)s[i];
  if (is_digit(c) || (c == '.' && i + 1 < n && is_digit(s[i + 1])))
    return lex_number(p, i);
  if (is_name_start(c)) {
    size_t j = i + 1;
    while (j < n && is_name_char(s[j]))
      j++;
    p->tok = T_NAME;
    p->tend = p->pos = j;
    return 0;
  }
  int tok;
  switch (c) {
  case '+':
    tok = T_PLUS;
    break;
  case '-':
    tok = T_MINUS;
    break;
  case '*':
    tok = T_STAR;
    break;
  case '/':
    tok = T_SLASH;
    break;
  case '^':
    tok = T_CARET;
    break;
  case '(':
    tok = T_LP;
    break;
  case ')':
    tok = T_RP;
    break;
  case ',':
    tok = T_COMMA;
    break;
  default:
    if (c > ' ' && c < 0x7f)
      return fail(p, BK_EPARSE, i, "unexpected character '%c'", c);
    return fail(p, BK_EPARSE, i, "unexpected byte 0x%02x", (unsigned)c);
  }
  p->tok = tok;
  p->tend = p->pos = i + 1;
  return 0;
}

/* ---- Tree building, with constant folding ---- */

static int new_node(parser_t *p, size_t off) {
  if (p->nnodes == p->capnodes) {
    int cap = p->capnodes ? 2 * p->capnodes : 32;
    node_t *nodes = bk_realloc(p->nodes, (size_t)cap * sizeof *nodes);
    if (!nodes)
      return fail(p, BK_ENOMEM, off, "out of memory");
    p->nodes = nodes;
    p->capnodes = cap;
  }
  node_t *nd = &p->nodes[p->nnodes];
  memset(nd, 0, sizeof *nd);
  nd->regs = 1;
  nd->height = 1;
  return p->nnodes++;
}

static int mk_num(parser_t *p, double k, size_t off) {
  int n = new_node(p, off);
  if (n >= 0) {
    p->nodes[n].kind = N_NUM;
    p->nodes[n].k = k;
  }
  return n;
}

static int mk_var(parser_t *p, size_t var, size_t off) {
  int n = new_node(p, off);
  if (n >= 0) {
    p->nodes[n].kind = N_VAR;
    p->nodes[n].var = (uint32_t)var;
  }
  return n;
}

static int is_leaf(const node_t *nd) {
  return nd->kind == N_NUM || nd->kind == N_VAR;
}

static int check_height(parser_t *p, int n, size_t off) {
  if (p->nodes[n].height > MAX_HEIGHT)
    return fail(p, BK_EPARSE, off,
                "expression is too complex (more than %d nested operations)",
                MAX_HEIGHT);
  return n;
}

static int mk_un(parser_t *p, int op, int a, size_t off) {
  if (a < 0)
    return -1;
  if (p->nodes[a].kind == N_NUM) {
    p->nodes[a].k = apply_un(op, p->nodes[a].k);
    return a;
  }
  int n = new_node(p, off);
  if (n < 0)
    return -1;
  node_t *nd = &p->nodes[n];
  nd->kind = N_UN;
  nd->op = op;
  nd->a = a;
  nd->regs = p->nodes[a].regs;
  nd->height = p->nodes[a].height + 1;
  return check_height(p, n, off);
}

static int mk_bin(parser_t *p, int op, int a, int b, size_t off) {
  if (a < 0 || b < 0)
    return -1;
  node_t *na = &p->nodes[a], *nb = &p->nodes[b];
  if (na->kind == N_NUM && nb->kind == N_NUM) {
    na->k = apply_bin(op, na->k, nb->k);
    return a;
  }
  if (op == B_POW && nb->kind == N_NUM && nb->k == 2.0)
    return mk_un(p, U_SQR, a, off);
  int ra = na->regs, rb = nb->regs;
  int regs;
  if (is_leaf(nb))
    regs = ra;
  else if (is_leaf(na))
    regs = rb;
  else
    regs = ra == rb ? ra + 1 : (ra > rb ? ra : rb);
  int height = 1 + (na->height > nb->height ? na->height : nb->height);
  int n = new_node(p, off);
  if (n < 0)
    return -1;
  node_t *nd = &p->nodes[n];
  nd->kind = N_BIN;
  nd->op = op;
  nd->a = a;
  nd->b = b;
  nd->regs = regs;
  nd->height = height;
  return check_height(p, n, off);
}

/* ---- Parser ----
 *
 *   expr    = mul { ('+' | '-') mul }
 *   mul     = unary { ('*' | '/') unary }
 *   unary   = ('-' | '+') unary | power
 *   power   = primary [ '^' unary ]
 *   primary = number | name | name '(' [ expr { ',' expr } ] ')'
 *           | '(' expr ')'
 *
 * so ^ is right associative and binds tighter than unary minus on its left
 * (-x^2 is -(x^2)) while its exponent may carry a sign (2^-1 is 0.5). */

static int parse_expr(parser_t *p);
static int parse_unary(parser_t *p);

/* Reports that an operand was expected at the current token. */
static int expected_operand(parser_t *p) {
  if (p->rc)
    return -1;
  char found[QUOTE_MAX + 32];
  describe_token(p, found, sizeof found);
  if (p->tok == T_STAR && p->ptok == T_STAR && p->pend == p->tstart)
    return fail(p, BK_EPARSE, p->pstart,
                "'**' is not an operator; write a^b for a power");
  if (p->ptok == T_END && p->tok == T_END)
    return fail(p, BK_EPARSE, 0, "empty expression");
  if (p->ptok == T_END)
    return fail(p, BK_EPARSE, p->tstart,
                "expected a number, a name or '(', found %s", found);
  return fail(p, BK_EPARSE, p->tstart,
              "expected a number, a name or '(' after '%.*s', found %s",
              quote_len(p->pend - p->pstart), p->src + p->pstart, found);
}

static size_t find_name(const bk_names_t *names, const char *s, size_t n) {
  if (!names)
    return SIZE_MAX;
  for (size_t i = 0; i < names->n; i++) {
    const char *c = names->names[i];
    if (c && strlen(c) == n && memcmp(c, s, n) == 0)
      return i;
  }
  return SIZE_MAX;
}

static int find_func(const char *s, size_t n) {
  for (size_t i = 0; i < NFUNCS; i++)
    if (strlen(funcs[i].name) == n && memcmp(funcs[i].name, s, n) == 0)
      return (int)i;
  return -1;
}

/* Fails with the unknown name at s[0..n): nearest known name, then a few
 * of the known names. */
static int unknown_name(parser_t *p, const char *s, size_t n, size_t off) {
  if (find_func(s, n) >= 0)
    return fail(p, BK_EPARSE, off, "'%.*s' is a function; call it as %.*s(...)",
                (int)n, s, (int)n, s);
  size_t nnames = p->names ? p->names->n : 0;
  if (nnames == 0)
    return fail(p, BK_ENOTFOUND, off,
                "unknown name '%.*s'; no names are defined", quote_len(n), s);
  fail(p, BK_ENOTFOUND, off, "unknown name '%.*s'", quote_len(n), s);
  const char *near =
      nearest(s, n, p->names->names, nnames, sizeof(const char *));
  if (near)
    msg_add(p, " (did you mean '%s'?)", near);
  enum { SHOWN = 8 };
  msg_add(p, "; known names: ");
  for (size_t i = 0; i < nnames && i < SHOWN; i++)
    msg_add(p, "%s%s", i ? ", " : "", p->names->names[i]);
  if (nnames > SHOWN)
    msg_add(p, ", ... (%zu in all)", nnames);
  return -1;
}

static int unknown_function(parser_t *p, const char *s, size_t n, size_t off) {
  if (find_name(p->names, s, n) != SIZE_MAX)
    return fail(p, BK_EPARSE, off,
                "'%.*s' is not a function (write %.*s*(...) for a product)",
                quote_len(n), s, quote_len(n), s);
  fail(p, BK_ENOTFOUND, off, "unknown function '%.*s'", quote_len(n), s);
  const char *near = nearest(s, n, &funcs[0].name, NFUNCS, sizeof funcs[0]);
  if (near)
    msg_add(p, " (did you mean '%s'?)", near);
  msg_add(p, "; functions: ");
  for (size_t i = 0; i < NFUNCS; i++)
    msg_add(p, "%s%s", i ? ", " : "", funcs[i].name);
  return -1;
}

/* Parses the arguments of funcs[f] called at `off`; the current token is
 * the '('. */
static int parse_call(parser_t *p, int f, size_t off) {
  const char *name = funcs[f].name;
  int args[2] = {-1, -1};
  int nargs = 0;
  int acc = -1;
  if (lex(p))
    return -1;
  if (p->tok != T_RP) {
    for (;;) {
      int a = parse_expr(p);
      if (a < 0)
        return -1;
      if (nargs < 2)
        args[nargs] = a;
      if (funcs[f].kind == FN_NARY)
        acc = nargs == 0 ? a : mk_bin(p, funcs[f].op, acc, a, off);
      if (nargs < INT_MAX)
        nargs++;
      if (p->tok == T_COMMA) {
        if (lex(p))
          return -1;
        continue;
      }
      if (p->tok == T_RP)
        break;
      if (p->tok == T_END)
        return fail(p, BK_EPARSE, off,
                    "'%s(' is not closed: expected ')' before the end of the "
                    "expression",
                    name);
      char found[QUOTE_MAX + 32];
      describe_token(p, found, sizeof found);
      return fail(p, BK_EPARSE, p->tstart,
                  "expected ',' or ')' in the arguments of %s(), found %s",
                  name, found);
    }
  }
  if (lex(p))
    return -1;
  switch (funcs[f].kind) {
  case FN_UN:
    if (nargs != 1)
      return fail(p, BK_EPARSE, off, "%s() takes 1 argument, got %d", name,
                  nargs);
    return mk_un(p, funcs[f].op, args[0], off);
  case FN_BIN:
    if (nargs != 2)
      return fail(p, BK_EPARSE, off, "%s() takes 2 arguments, got %d", name,
                  nargs);
    return mk_bin(p, funcs[f].op, args[0], args[1], off);
  default:
    if (nargs < 2)
      return fail(p, BK_EPARSE, off, "%s() takes at least 2 arguments, got %d",
                  name, nargs);
    return acc;
  }
}

static int parse_primary(parser_t *p) {
  if (p->rc)
    return -1;
  size_t off = p->tstart;
  if (p->tok == T_NUM) {
    int n = mk_num(p, p->tnum, off);
    if (n < 0 || lex(p))
      return -1;
    return n;
  }
  if (p->tok == T_NAME) {
    const char *s = p->src + p->tstart;
    size_t len = p->tend - p->tstart;
    if (lex(p))
      return -1;
    if (p->tok == T_LP) {
      int f = find_func(s, len);
      if (f < 0)
        return unknown_function(p, s, len, off);
      return parse_call(p, f, off);
    }
    size_t var = find_name(p->names, s, len);
    if (var == SIZE_MAX)
      return unknown_name(p, s, len, off);
    return mk_var(p, var, off);
  }
  if (p->tok == T_LP) {
    if (lex(p))
      return -1;
    int e = parse_expr(p);
    if (e < 0)
      return -1;
    if (p->tok == T_END)
      return fail(p, BK_EPARSE, off,
                  "'(' is not closed: expected ')' before the end of the "
                  "expression");
    if (p->tok != T_RP) {
      char found[QUOTE_MAX + 32];
      describe_token(p, found, sizeof found);
      return fail(p, BK_EPARSE, p->tstart,
                  "expected an operator or ')', found %s", found);
    }
    if (lex(p))
      return -1;
    return e;
  }
  return expected_operand(p);
}

static int parse_power(parser_t *p) {
  int b = parse_primary(p);
  if (b < 0)
    return -1;
  if (p->tok != T_CARET)
    return b;
  size_t off = p->tstart;
  if (lex(p))
    return -1;
  int e = parse_unary(p);
  return mk_bin(p, B_POW, b, e, off);
}

static int parse_unary(parser_t *p) {
  if (p->rc)
    return -1;
  if (++p->depth > MAX_NESTING)
    return fail(p, BK_EPARSE, p->tstart,
                "expression is nested too deeply (more than %d levels)",
                MAX_NESTING);
  int r;
  if (p->tok == T_MINUS || p->tok == T_PLUS) {
    int neg = p->tok == T_MINUS;
    size_t off = p->tstart;
    if (lex(p))
      return -1;
    r = parse_unary(p);
    if (neg)
      r = mk_un(p, U_NEG, r, off);
  } else {
    r = parse_power(p);
  }
  p->depth--;
  return r;
}

static int parse_mul(parser_t *p) {
  int l = parse_unary(p);
  while (l >= 0 && (p->tok == T_STAR || p->tok == T_SLASH)) {
    int op = p->tok == T_STAR ? B_MUL : B_DIV;
    size_t off = p->tstart;
    if (lex(p))
      return -1;
    l = mk_bin(p, op, l, parse_unary(p), off);
  }
  return l;
}

static int parse_expr(parser_t *p) {
  int l = parse_mul(p);
  while (l >= 0 && (p->tok == T_PLUS || p->tok == T_MINUS)) {
    int op = p->tok == T_PLUS ? B_ADD : B_SUB;
    size_t off = p->tstart;
    if (lex(p))
      return -1;
    l = mk_bin(p, op, l, parse_mul(p), off);
  }
  return l;
}

/* ---- Code generation ---- */

static void emit(bk_expr_t *e, uint32_t op, uint32_t i, double k) {
  op_t *o = &e->code[e->ncode++];
  o->op = op;
  o->i = i;
  o->k = k;
}

static void emit_bin(bk_expr_t *e, int op, int mode, const node_t *leaf) {
  uint32_t code = (uint32_t)(OP_ADD_S + op * NMODES + mode);
  if (!leaf)
    emit(e, code, 0, 0.0);
  else if (leaf->kind == N_VAR)
    emit(e, code, leaf->var, 0.0);
  else
    emit(e, code + (M_K - M_V), 0, leaf->k);
}

static void gen(const parser_t *p, bk_expr_t *e, int n) {
  const node_t *nd = &p->nodes[n];
  switch (nd->kind) {
  case N_NUM:
    emit(e, OP_CONST, 0, nd->k);
    break;
  case N_VAR:
    emit(e, OP_VAR, nd->var, 0.0);
    break;
  case N_UN:
    gen(p, e, nd->a);
    emit(e, (uint32_t)(OP_NEG + nd->op), 0, 0.0);
    break;
  default: {
    const node_t *a = &p->nodes[nd->a], *b = &p->nodes[nd->b];
    if (is_leaf(b)) {
      gen(p, e, nd->a);
      emit_bin(e, nd->op, M_V, b);
    } else if (is_leaf(a)) {
      gen(p, e, nd->b);
      emit_bin(e, nd->op, M_RV, a);
    } else if (a->regs >= b->regs) {
      gen(p, e, nd->a);
      gen(p, e, nd->b);
      emit_bin(e, nd->op, M_S, NULL);
    } else {
      gen(p, e, nd->b);
      gen(p, e, nd->a);
      emit_bin(e, nd->op, M_RS, NULL);
    }
    break;
  }
  }
}

int bk_expr_compile(const char *src, size_t len, const bk_names_t *names,
                    bk_expr_t **out, char *msg, size_t msgcap,
                    size_t *err_off) {
  parser_t p;
  memset(&p, 0, sizeof p);
  p.src = src;
  p.len = len;
  p.names = names;
  p.msg = msg;
  p.msgcap = msgcap;
  p.tok = T_END;
  *out = NULL;
  if (msg && msgcap > 0)
    msg[0] = '\0';
  if (err_off)
    *err_off = 0;

  int root = -1;
  if (lex(&p) == 0) {
    root = parse_expr(&p);
    if (root >= 0 && p.tok != T_END) {
      char found[QUOTE_MAX + 32];
      describe_token(&p, found, sizeof found);
      if (p.tok == T_RP)
        root = fail(&p, BK_EPARSE, p.tstart,
                    "unexpected ')' without a matching '('");
      else if (p.tok == T_COMMA)
        root = fail(&p, BK_EPARSE, p.tstart,
                    "unexpected ',' outside a function call");
      else
        root = fail(&p, BK_EPARSE, p.tstart,
                    "unexpected %s after a complete expression (missing "
                    "operator?)",
                    found);
    }
  }
  if (root >= 0 && p.nodes[root].regs > STACK_SLOTS)
    root = fail(&p, BK_EPARSE, 0,
                "expression is too complex (needs more than %d stack slots)",
                STACK_SLOTS);
  if (root >= 0) {
    /* Each node emits at most one instruction, plus OP_END. */
    size_t cap = (size_t)p.nnodes + 1;
    bk_expr_t *e = bk_malloc(sizeof *e + cap * sizeof e->code[0]);
    if (!e) {
      root = fail(&p, BK_ENOMEM, 0, "out of memory");
    } else {
      e->ncode = 0;
      gen(&p, e, root);
      emit(e, OP_END, 0, 0.0);
      *out = e;
    }
  }
  bk_free(p.nodes);
  if (p.rc && err_off)
    *err_off = p.err_off;
  return p.rc;
}
