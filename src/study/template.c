/*
 * Input-deck templates (see template.h and docs/templates.md).
 *
 * Parsing splits the text into segments: literal text (with the escapes
 * \{{ and \}} already resolved), numeric placeholders holding a compiled
 * expression and a validated printf conversion, and the text placeholders
 * {{ _key }} and {{ _folder }}. Rendering walks the segments and appends to
 * a buffer; it does no parsing, so a deck rendered for every evaluation
 * costs little more than a copy. Errors carry the 1-based line and byte
 * column of the offending token, computed from its byte offset.
 *
 * SPDX-License-Identifier: MIT
 */
#include "study/template.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "base/alloc.h"

/* Default conversion: at most 20 characters ("-1.23456789012e-308" is 19),
 * so a value always fits a 20-column fixed field. */
#define DEFAULT_FORMAT "%.12g"

/* Widths and precisions above this are refused: no solver field is wider,
 * and a double has no more digits to show. */
#define MAX_FIELD 99

enum { SEG_TEXT, SEG_NUMBER, SEG_KEY, SEG_FOLDER, SEG_HOSTS };

/* A segment. SEG_TEXT is text[off..off+len) of the template; SEG_NUMBER
 * owns `expr` and prints it with `fmt`, a validated single double
 * conversion. */
typedef struct {
  int kind;
  size_t off, len;
  bk_expr_t *expr;
  char fmt[16];
} seg_t;

/* Invariant: expressions index values[0..nnames) as the parse-time names
 * and values[nnames..nnames+NRESERVED) as the reserved numeric names. */
struct bk_template {
  char *text;
  seg_t *segs;
  size_t nsegs;
  size_t nnames;
};

void bk_template_free(bk_template_t *t) {
  if (!t)
    return;
  for (size_t i = 0; i < t->nsegs; i++)
    bk_expr_free(t->segs[i].expr);
  bk_free(t->segs);
  bk_free(t->text);
  bk_free(t);
}

/* The numeric names every template may use, after the caller's. */
static const char *const reserved[] = {"_index", "_threads", "_ranks",
                                       "_cores"};
#define NRESERVED (sizeof reserved / sizeof reserved[0])

/* ---- Parsing ---- */

typedef struct {
  const char *path;
  const char *src;
  size_t len;
  bk_names_t names; /* caller's names plus "_index" */
  bk_buf_t lit;     /* literal text, escapes resolved */
  seg_t *segs;
  size_t nsegs, capsegs;
  bk_error_t *err;
} tparse_t;

/* Sets err at byte offset `off` of the source; returns `code`. */
static int fail_at(tparse_t *p, int code, size_t off, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));
static int fail_at(tparse_t *p, int code, size_t off, const char *fmt, ...) {
  int line = 1;
  size_t start = 0;
  for (size_t i = 0; i < off && i < p->len; i++) {
    if (p->src[i] == '\n') {
      line++;
      start = i + 1;
    }
  }
  va_list ap;
  va_start(ap, fmt);
  bk_error_vset(p->err, code, p->path, line, (int)(off - start + 1), fmt, ap);
  va_end(ap);
  return code;
}

static seg_t *add_seg(tparse_t *p, int kind) {
  if (p->nsegs == p->capsegs) {
    size_t cap = p->capsegs ? 2 * p->capsegs : 8;
    seg_t *s = bk_realloc(p->segs, cap * sizeof *s);
    if (!s)
      return NULL;
    p->segs = s;
    p->capsegs = cap;
  }
  seg_t *s = &p->segs[p->nsegs++];
  memset(s, 0, sizeof *s);
  s->kind = kind;
  return s;
}

/* Appends src[from..to) as literal text, merging with a preceding text
 * segment. */
static int add_text(tparse_t *p, size_t from, size_t to) {
  if (to == from)
    return 0;
  size_t off = p->lit.len;
  if (bk_buf_append(&p->lit, p->src + from, to - from))
    return fail_at(p, BK_ENOMEM, from, "out of memory");
  seg_t *last = p->nsegs ? &p->segs[p->nsegs - 1] : NULL;
  if (last && last->kind == SEG_TEXT && last->off + last->len == off) {
    last->len += to - from;
    return 0;
  }
  seg_t *s = add_seg(p, SEG_TEXT);
  if (!s)
    return fail_at(p, BK_ENOMEM, from, "out of memory");
  s->off = off;
  s->len = to - from;
  return 0;
}

static int is_blank(char c) {
  return c == ' ' || c == '\t' || c == '\r' || c == '\v' || c == '\f';
}

static int is_digit(char c) {
  return c >= '0' && c <= '9';
}

/* Validates the conversion f[0..n) (already trimmed) found at byte `off`
 * and copies it, NUL-terminated, to out. Accepted:
 * %[flags -+ #0][width][.precision] and one of e E f F g G. */
static int check_format(tparse_t *p, const char *f, size_t n, size_t off,
                        char *out, size_t cap) {
  int q = n > 40 ? 40 : (int)n; /* quoted length */
  const char *more = n > 40 ? "..." : "";
  if (f[0] != '%')
    return fail_at(p, BK_EPARSE, off,
                   "format '%.*s%s' must start with '%%' (e.g. %%12.5e)", q, f,
                   more);
  size_t i = 1;
  const char *flags = "-+ #0";
  while (i < n && f[i] && strchr(flags, f[i])) {
    if (memchr(f + 1, f[i], i - 1))
      return fail_at(p, BK_EPARSE, off, "format '%.*s%s' repeats the flag '%c'",
                     q, f, more, f[i]);
    i++;
  }
  size_t w0 = i;
  while (i < n && is_digit(f[i]))
    i++;
  if (i - w0 > 2)
    return fail_at(p, BK_EPARSE, off,
                   "format '%.*s%s': the width is larger than %d", q, f, more,
                   MAX_FIELD);
  if (i < n && f[i] == '.') {
    size_t p0 = ++i;
    while (i < n && is_digit(f[i]))
      i++;
    if (i - p0 > 2)
      return fail_at(p, BK_EPARSE, off,
                     "format '%.*s%s': the precision is larger than %d", q, f,
                     more, MAX_FIELD);
  }
  if (i >= n)
    return fail_at(p, BK_EPARSE, off,
                   "format '%.*s%s' has no conversion; end it with one of e E "
                   "f F g G",
                   q, f, more);
  char c = f[i];
  if (c == '\0' || !strchr("eEfFgG", c)) {
    if (c == 'l' || c == 'L' || c == 'h' || c == 'q' || c == 'j' || c == 'z' ||
        c == 't')
      return fail_at(p, BK_EPARSE, off,
                     "format '%.*s%s' has a length modifier '%c'; write the "
                     "conversion alone, e.g. %%e",
                     q, f, more, c);
    if (c == 'd' || c == 'i' || c == 'u')
      return fail_at(p, BK_EPARSE, off,
                     "format '%.*s%s' converts with '%c'; a number needs one "
                     "of e E f F g G (for a whole number write %%.0f)",
                     q, f, more, c);
    if (c > ' ' && c < 0x7f)
      return fail_at(p, BK_EPARSE, off,
                     "format '%.*s%s' converts with '%c'; a number needs one "
                     "of e E f F g G",
                     q, f, more, c);
    return fail_at(p, BK_EPARSE, off,
                   "format '%.*s%s' has an invalid byte 0x%02x; a number needs "
                   "one of e E f F g G",
                   q, f, more, (unsigned)(unsigned char)c);
  }
  if (i + 1 < n)
    return fail_at(p, BK_EPARSE, off,
                   "format '%.*s%s' has text after the conversion '%c'; a "
                   "placeholder takes exactly one conversion",
                   q, f, more, c);
  if (n + 1 > cap)
    return fail_at(p, BK_EPARSE, off, "format '%.*s%s' is too long", q, f,
                   more);
  memcpy(out, f, n);
  out[n] = '\0';
  return 0;
}

/* If src[off..end) starts with the name _key, _folder or _hosts, returns
 * it. */
static const char *text_name_at(const char *s, size_t off, size_t end) {
  static const char *const text_names[] = {"_key", "_folder", "_hosts"};
  for (int k = 0; k < 3; k++) {
    size_t n = strlen(text_names[k]);
    if (end - off >= n && memcmp(s + off, text_names[k], n) == 0) {
      char c = off + n < end ? s[off + n] : ' ';
      int name_char = (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') ||
                      (c >= '0' && c <= '9') || c == '_';
      if (!name_char)
        return text_names[k];
    }
  }
  return NULL;
}

/* Parses the placeholder whose "{{" is at `open` and whose "}}" is at
 * `close`. */
static int parse_placeholder(tparse_t *p, size_t open, size_t close) {
  const char *s = p->src;
  size_t a = open + 2;
  const char *colon = memchr(s + a, ':', close - a);
  size_t expr_end = colon ? (size_t)(colon - s) : close;

  size_t e0 = a, e1 = expr_end;
  while (e0 < e1 && (is_blank(s[e0])))
    e0++;
  while (e1 > e0 && is_blank(s[e1 - 1]))
    e1--;
  if (e0 == e1)
    return fail_at(p, BK_EPARSE, open,
                   "empty placeholder: write an expression between '{{' and "
                   "'}}' (or \\{{ for literal braces)");

  size_t f0 = 0, f1 = 0;
  if (colon) {
    f0 = expr_end + 1;
    f1 = close;
    while (f0 < f1 && is_blank(s[f0]))
      f0++;
    while (f1 > f0 && is_blank(s[f1 - 1]))
      f1--;
    if (f0 == f1)
      return fail_at(p, BK_EPARSE, expr_end,
                     "missing format after ':' (e.g. {{ x : %%12.5e }})");
  }

  const char *tn = text_name_at(s, e0, e1);
  if (tn && e1 - e0 == strlen(tn)) {
    if (colon)
      return fail_at(p, BK_EPARSE, f0, "'%s' is text and takes no format", tn);
    seg_t *seg = add_seg(p, tn[1] == 'k'   ? SEG_KEY
                            : tn[1] == 'f' ? SEG_FOLDER
                                           : SEG_HOSTS);
    if (!seg)
      return fail_at(p, BK_ENOMEM, open, "out of memory");
    return 0;
  }

  seg_t *seg = add_seg(p, SEG_NUMBER);
  if (!seg)
    return fail_at(p, BK_ENOMEM, open, "out of memory");
  strcpy(seg->fmt, DEFAULT_FORMAT);
  if (colon) {
    int rc = check_format(p, s + f0, f1 - f0, f0, seg->fmt, sizeof seg->fmt);
    if (rc)
      return rc;
  }
  char msg[sizeof p->err->msg];
  size_t off = 0;
  int rc = bk_expr_compile(s + a, expr_end - a, &p->names, &seg->expr, msg,
                           sizeof msg, &off);
  if (rc == BK_ENOTFOUND) {
    const char *bad = text_name_at(s, a + off, expr_end);
    if (bad)
      return fail_at(p, BK_EPARSE, a + off,
                     "'%s' is text and can only stand alone, as {{ %s }}", bad,
                     bad);
  }
  if (rc)
    return fail_at(p, rc, a + off, "%s", msg);
  return 0;
}

static int parse_all(tparse_t *p) {
  const char *s = p->src;
  size_t n = p->len;
  size_t run = 0; /* start of pending literal text */
  size_t i = 0;
  while (i < n) {
    char c = s[i];
    if (c == '\\' && i + 2 < n && s[i + 1] == s[i + 2] &&
        (s[i + 1] == '{' || s[i + 1] == '}')) {
      int rc = add_text(p, run, i);
      if (rc)
        return rc;
      run = i + 1; /* the two braces are copied as text */
      i += 3;
      continue;
    }
    if (c == '{' && i + 1 < n && s[i + 1] == '{') {
      size_t j = i + 2;
      while (j < n && s[j] != '\n' &&
             !(s[j] == '}' && j + 1 < n && s[j + 1] == '}'))
        j++;
      if (j >= n || s[j] == '\n')
        return fail_at(p, BK_EPARSE, i,
                       "unclosed '{{': expected '}}' on the same line (write "
                       "\\{{ for literal braces)");
      int rc = add_text(p, run, i);
      if (rc || (rc = parse_placeholder(p, i, j)))
        return rc;
      i = j + 2;
      run = i;
      continue;
    }
    i++;
  }
  return add_text(p, run, n);
}

int bk_template_parse(const char *path, const char *text, size_t len,
                      const bk_names_t *names, bk_template_t **out,
                      bk_error_t *err) {
  *out = NULL;
  tparse_t p;
  memset(&p, 0, sizeof p);
  p.path = path;
  p.src = text;
  p.len = len;
  p.err = err;
  bk_buf_init(&p.lit);
  size_t nnames = names ? names->n : 0;

  int rc = 0;
  bk_template_t *t = NULL;
  const char **all = bk_malloc((nnames + NRESERVED) * sizeof *all);
  if (!all) {
    rc = bk_error_set(err, BK_ENOMEM, path, 0, 0, "out of memory");
    goto done;
  }
  for (size_t i = 0; i < nnames; i++)
    all[i] = names->names[i];
  for (size_t i = 0; i < NRESERVED; i++)
    all[nnames + i] = reserved[i];
  p.names.names = all;
  p.names.n = nnames + NRESERVED;

  rc = parse_all(&p);
  if (rc)
    goto done;
  t = bk_malloc(sizeof *t);
  if (!t) {
    rc = bk_error_set(err, BK_ENOMEM, path, 0, 0, "out of memory");
    goto done;
  }
  /* An empty literal buffer has no storage yet; give it one byte so that
   * t->text is never NULL. */
  if (!p.lit.data && bk_buf_reserve(&p.lit, 0)) {
    bk_free(t);
    t = NULL;
    rc = bk_error_set(err, BK_ENOMEM, path, 0, 0, "out of memory");
    goto done;
  }
  t->text = p.lit.data;
  t->segs = p.segs;
  t->nsegs = p.nsegs;
  t->nnames = nnames;
  bk_buf_init(&p.lit);
  p.segs = NULL;
  p.nsegs = 0;
  *out = t;

done:
  for (size_t i = 0; i < p.nsegs; i++)
    bk_expr_free(p.segs[i].expr);
  bk_free(p.segs);
  bk_buf_close(&p.lit);
  bk_free(all);
  return rc;
}

/* ---- Rendering ---- */

int bk_template_render(const bk_template_t *t, const bk_template_ctx_t *ctx,
                       bk_buf_t *out) {
  size_t len0 = out->len;
  /* The expressions see the caller's values followed by the reserved
   * names (resources not given count as 1). */
  double small[64];
  double *vals = small;
  if (t->nnames + NRESERVED > sizeof small / sizeof small[0]) {
    vals = bk_malloc((t->nnames + NRESERVED) * sizeof *vals);
    if (!vals)
      return BK_ENOMEM;
  }
  if (t->nnames)
    memcpy(vals, ctx->values, t->nnames * sizeof *vals);
  int threads = ctx->threads > 0 ? ctx->threads : 1;
  int ranks = ctx->ranks > 0 ? ctx->ranks : 1;
  vals[t->nnames] = ctx->index;
  vals[t->nnames + 1] = threads;
  vals[t->nnames + 2] = ranks;
  vals[t->nnames + 3] = (double)threads * ranks;

  int rc = 0;
  for (size_t i = 0; i < t->nsegs && rc == 0; i++) {
    const seg_t *s = &t->segs[i];
    switch (s->kind) {
    case SEG_TEXT:
      rc = bk_buf_append(out, t->text + s->off, s->len);
      break;
    case SEG_NUMBER:
      rc = bk_buf_printf(out, s->fmt, bk_expr_eval(s->expr, vals));
      break;
    case SEG_KEY:
      rc = bk_buf_puts(out, ctx->key ? ctx->key : "");
      break;
    case SEG_HOSTS:
      rc = bk_buf_puts(out, ctx->hosts ? ctx->hosts : "");
      break;
    default:
      rc = bk_buf_puts(out, ctx->folder ? ctx->folder : "");
      break;
    }
  }
  if (vals != small)
    bk_free(vals);
  if (rc) {
    out->len = len0;
    if (out->data)
      out->data[len0] = '\0';
    return BK_ENOMEM;
  }
  return 0;
}
