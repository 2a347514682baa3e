/*
 * Extraction of results from model output (see extract.h): PCRE2 patterns,
 * a streaming scan of output files, the selection among matches and the
 * reading of numbers in C and Fortran notations.
 *
 * A file is read in chunks into a buffer of at most BK_EXTRACT_WINDOW bytes
 * kept plus one chunk, and matched with PCRE2's multi-segment method
 * (pcre2partial(3)): with PCRE2_PARTIAL_HARD, pcre2_match() reports a
 * partial match as soon as an attempt reaches the end of the buffer, at the
 * earliest start position where that happens, so every attempt that starts
 * before it was decided exactly as on the whole file. The scan then keeps
 * the text from that start (plus some context for lookbehinds, ^ and \b),
 * appends the next chunk and matches again from the same start. At the end
 * of the file the last segment is matched without the partial option. So
 * each match is found once, where a whole-file search would find it, as
 * long as its attempt needs less than the window.
 *
 * SPDX-License-Identifier: MIT
 */
#define PCRE2_CODE_UNIT_WIDTH 8

#include "study/extract.h"

#include <errno.h>
#include <fcntl.h>
#include <locale.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <pcre2.h>

#include "base/alloc.h"
#include "base/error.h"
#include "base/fault.h"

/* Bytes read from a file at a time. */
#define CHUNK_DEFAULT ((size_t)1 << 20)

/* Bytes kept before the position where matching resumes, on top of twice
 * the pattern's longest lookbehind. PCRE2 tells only the longest single
 * lookbehind, and nested ones may look further (pcre2partial(3)); a few kB
 * of slack covers any sensible pattern and also keeps \A from matching at
 * the start of a later segment. */
#define KEEP_CONTEXT 4096

/* Memory PCRE2's interpreter may use for backtracking in one match, in KiB
 * (PCRE2's unit). Far more than a sane pattern needs on solver output; it
 * stops a runaway pattern from growing without bound. */
#define HEAP_LIMIT_KIB 8192

/* The longest value text quoted in a reason. */
#define QUOTE_MAX 40

/* The smallest read for a small file. */
#define SMALL_READ ((size_t)1 << 16)

static size_t chunk_size = CHUNK_DEFAULT;

void bk__extract_set_chunk(size_t n) {
  chunk_size = n ? n : CHUNK_DEFAULT;
}

/*
 * A compiled pattern. Read-only after bk_extract_pattern_compile(): the match
 * context is only read by pcre2_match(), and each extraction makes its own
 * match data, so one pattern serves any number of extractions.
 */
struct bk_pattern {
  pcre2_code *code;            /* for the whole text or the last segment */
  pcre2_code *code_seg;        /* for segments with more to come */
  pcre2_general_context *gctx; /* routes PCRE2's allocations to bk_malloc */
  pcre2_match_context *mctx;   /* heap limit */
  size_t keepback;             /* bytes kept before the resume position */
  int has_group;               /* group 1 exists: it is the value */
};

static void *pcre_malloc(PCRE2_SIZE n, void *data) {
  (void)data;
  return bk_malloc(n);
}

static void pcre_free(void *p, void *data) {
  (void)data;
  bk_free(p);
}

static void put(char *dst, size_t cap, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* Formats into dst[0..cap), when there is a dst. */
static void put(char *dst, size_t cap, const char *fmt, ...) {
  if (!dst || !cap)
    return;
  va_list ap;
  va_start(ap, fmt);
  vsnprintf(dst, cap, fmt, ap);
  va_end(ap);
}

void bk_extract_pattern_free(bk_pattern_t *p) {
  if (!p)
    return;
  pcre2_match_context_free(p->mctx);
  pcre2_code_free(p->code);
  pcre2_code_free(p->code_seg);
  pcre2_general_context_free(p->gctx);
  bk_free(p);
}

/*
 * Finds what the scan cannot give as a search over the whole output would:
 * \G (true where a pcre2_match() call starts, and the scan starts calls at
 * other places than a whole-text search) and (*COMMIT) (whose failure ends
 * the whole call). Returns the message and sets *at, or returns NULL. The
 * look is lexical: a \G in a (?x) comment is refused too.
 */
static const char *unsupported(const char *re, size_t *at) {
  for (size_t i = 0; re[i]; i++) {
    if (re[i] == '\\') {
      if (re[i + 1] == 'G') {
        *at = i;
        return "\\G is not supported in output patterns";
      }
      if (re[i + 1] == 'Q') {
        const char *e = strstr(re + i + 2, "\\E");
        if (!e)
          return NULL;
        i = (size_t)(e - re) + 1;
        continue;
      }
      if (re[i + 1])
        i++;
      continue;
    }
    if (strncmp(re + i, "(*COMMIT", 8) == 0) {
      *at = i;
      return "(*COMMIT) is not supported in output patterns";
    }
  }
  return NULL;
}

int bk_extract_pattern_compile(const char *re, bk_pattern_t **out, char *msg,
                       size_t msgcap, size_t *err_off) {
  *out = NULL;
  if (err_off)
    *err_off = 0;
  if (!re) {
    put(msg, msgcap, "no pattern");
    return BK_EINVAL;
  }
  pcre2_compile_context *cctx = NULL;
  bk_pattern_t *p = bk_calloc(1, sizeof *p);
  if (!p)
    goto nomem;
  p->gctx = pcre2_general_context_create(pcre_malloc, pcre_free, NULL);
  if (!p->gctx)
    goto nomem;
  cctx = pcre2_compile_context_create(p->gctx);
  p->mctx = pcre2_match_context_create(p->gctx);
  if (!cctx || !p->mctx)
    goto nomem;
  /* Outputs written on Windows end lines in CR LF: let ^, $ and . see
   * those line ends too. */
  pcre2_set_newline(cctx, PCRE2_NEWLINE_ANYCRLF);
  pcre2_set_heap_limit(p->mctx, HEAP_LIMIT_KIB);

  int code;
  PCRE2_SIZE off;
  p->code = pcre2_compile((PCRE2_SPTR)re, PCRE2_ZERO_TERMINATED,
                          PCRE2_MULTILINE | PCRE2_NEVER_UTF, &code, &off, cctx);
  if (!p->code) {
    if (code == PCRE2_ERROR_HEAP_FAILED)
      goto nomem;
    if (msg && msgcap) {
      PCRE2_UCHAR text[256];
      if (pcre2_get_error_message(code, text, sizeof text) < 0)
        snprintf((char *)text, sizeof text, "error %d", code);
      put(msg, msgcap, "%s", (const char *)text);
    }
    if (err_off)
      *err_off = off;
    pcre2_compile_context_free(cctx);
    bk_extract_pattern_free(p);
    return BK_EPARSE;
  }
  /* Checked once PCRE2 has accepted the pattern, so that a \G inside a
   * broken pattern does not hide PCRE2's message. */
  size_t at = 0;
  const char *why = unsupported(re, &at);
  if (why) {
    put(msg, msgcap, "%s", why);
    if (err_off)
      *err_off = at;
    pcre2_compile_context_free(cctx);
    bk_extract_pattern_free(p);
    return BK_EPARSE;
  }
  /* In multi-line mode ^ never matches at the end of the subject, and
   * PCRE2 reports no partial match there (pcre2_match.c, OP_CIRCM), so an
   * attempt such as "TIP\n^ +9" would be lost when a segment ends right
   * after the newline. Segments followed by more text are matched with
   * PCRE2_ALT_CIRCUMFLEX instead, under which ^ matches after a newline at
   * the end: right there, since the real end is further on. The option
   * changes nothing else. */
  p->code_seg =
      pcre2_compile((PCRE2_SPTR)re, PCRE2_ZERO_TERMINATED,
                    PCRE2_MULTILINE | PCRE2_NEVER_UTF | PCRE2_ALT_CIRCUMFLEX,
                    &code, &off, cctx);
  pcre2_compile_context_free(cctx);
  cctx = NULL;
  if (!p->code_seg)
    goto nomem; /* it compiled once, so only memory can be short */
  /* JIT is an optimisation only: where it is missing or fails, the
   * interpreter gives the same matches. */
  (void)pcre2_jit_compile(p->code, PCRE2_JIT_COMPLETE);
  (void)pcre2_jit_compile(p->code_seg, PCRE2_JIT_PARTIAL_HARD);

  uint32_t ngroups = 0, lookbehind = 0;
  pcre2_pattern_info(p->code, PCRE2_INFO_CAPTURECOUNT, &ngroups);
  pcre2_pattern_info(p->code, PCRE2_INFO_MAXLOOKBEHIND, &lookbehind);
  p->has_group = ngroups >= 1;
  p->keepback = KEEP_CONTEXT + 2 * (size_t)lookbehind;
  *out = p;
  return 0;

nomem:
  pcre2_compile_context_free(cctx);
  bk_extract_pattern_free(p);
  put(msg, msgcap, "out of memory");
  return BK_ENOMEM;
}

/* ---- numbers ---- */

static int is_blank(char c) {
  return c == ' ' || c == '\t' || c == '\r' || c == '\n' || c == '\v' ||
         c == '\f';
}

static int is_digit(char c) {
  return c >= '0' && c <= '9';
}

/*
 * Parses s[0..len), blanks around allowed, as
 *
 *   [+-] (digits [. [digits]] | . digits) [exponent]
 *   exponent: (E|e|D|d) [+-] digits  |  (+|-) digits
 *
 * The second exponent form is Fortran's for exponents above 99 under an
 * Ew.d or Dw.d edit descriptor, where the letter is dropped to make room
 * (ISO/IEC 1539-1, E and D editing; -1.474969+104). The token is rewritten
 * in C notation and read by strtod(), so C forms round exactly as strtod
 * does. Returns 0, -1 when it is not a number, -2 when it overflows.
 */
static int parse_number(const char *s, size_t len, double *out) {
  size_t i = 0, n = len;
  while (i < n && is_blank(s[i]))
    i++;
  while (n > i && is_blank(s[n - 1]))
    n--;
  size_t j = i;
  if (j < n && (s[j] == '+' || s[j] == '-'))
    j++;
  size_t int_at = j;
  while (j < n && is_digit(s[j]))
    j++;
  size_t nint = j - int_at, dot = 0, frac_at = j, nfrac = 0;
  if (j < n && s[j] == '.') {
    dot = j++;
    frac_at = j;
    while (j < n && is_digit(s[j]))
      j++;
    nfrac = j - frac_at;
  }
  if (nint + nfrac == 0)
    return -1;
  size_t mant_end = j;
  size_t exp_at = n; /* exponent sign or first digit; n = no exponent */
  if (j < n) {
    char c = s[j];
    if (c == 'e' || c == 'E' || c == 'd' || c == 'D') {
      j++;
      exp_at = j;
      if (j < n && (s[j] == '+' || s[j] == '-'))
        j++;
    } else if (c == '+' || c == '-') {
      exp_at = j++;
    } else {
      return -1;
    }
    size_t dig = j;
    while (j < n && is_digit(s[j]))
      j++;
    if (j == dig || j != n)
      return -1;
  }

  /* The C spelling: mantissa with the locale's decimal point (strtod obeys
   * LC_NUMERIC), then 'e' and the exponent. */
  const char *dp = localeconv()->decimal_point;
  size_t ndp = dp && *dp ? strlen(dp) : 1;
  size_t need = (n - i) + ndp + 2;
  char small[128];
  char *c = need <= sizeof small ? small : bk_malloc(need);
  if (!c)
    return -1;
  size_t k = 0;
  for (size_t m = i; m < mant_end; m++) {
    if (dot && m == dot) {
      memcpy(c + k, dp && *dp ? dp : ".", ndp);
      k += ndp;
    } else {
      c[k++] = s[m];
    }
  }
  if (exp_at < n) {
    c[k++] = 'e';
    memcpy(c + k, s + exp_at, n - exp_at);
    k += n - exp_at;
  }
  c[k] = '\0';
  errno = 0;
  char *end;
  double v = strtod(c, &end);
  int bad = (size_t)(end - c) != k;
  if (c != small)
    bk_free(c);
  if (bad)
    return -1;
  if (!isfinite(v))
    return -2;
  *out = v;
  return 0;
}

int bk_extract_number(const char *s, size_t len, double *out) {
  double v;
  if (!s || parse_number(s, len, &v))
    return -1;
  *out = v;
  return 0;
}

/* ---- scanning ---- */

typedef struct {
  const bk_pattern_t *p;
  pcre2_match_data *md;
  bk_extract_cb cb;
  void *data;
  uint32_t retry;  /* after an empty match: look for a non-empty one there */
  uint32_t no_jit; /* PCRE2_NO_JIT once the JIT stack proved too small */
} scan_t;

static int run_match(scan_t *s, const pcre2_code *code, const char *subj,
                     size_t len, size_t at, uint32_t opts) {
  int rc = pcre2_match(code, (PCRE2_SPTR)subj, len, at, opts | s->no_jit, s->md,
                       s->p->mctx);
  if (rc == PCRE2_ERROR_JIT_STACKLIMIT && !s->no_jit) {
    /* The interpreter keeps its backtracking state on the heap, within
     * HEAP_LIMIT_KIB, so it can go where JIT's fixed stack cannot. */
    s->no_jit = PCRE2_NO_JIT;
    rc = pcre2_match(code, (PCRE2_SPTR)subj, len, at, opts | s->no_jit, s->md,
                     s->p->mctx);
  }
  return rc;
}

/*
 * Matches subj[*pos..len), where subj[0] is at byte `base` of the input and
 * subj[0..*pos) is context, and calls the callback for each match. `eof`
 * says that the input ends at len. Returns 0 when the segment is done:
 * *pos is then len, or the start of an attempt that needs more input
 * (always len or less, and s->retry tells whether it is the non-empty
 * retry after an empty match). Returns 1 when the callback stopped the
 * scan, or a negative PCRE2 error code.
 *
 * Empty matches follow pcre2demo: after one, a non-empty match anchored at
 * the same place is tried, and if there is none the scan steps one
 * character (a CR LF pair counts as one).
 */
static int scan_segment(scan_t *s, const char *subj, size_t len, size_t *pos,
                        size_t base, int eof) {
  PCRE2_SIZE *ov = pcre2_get_ovector_pointer(s->md);
  const pcre2_code *code = eof ? s->p->code : s->p->code_seg;
  uint32_t partial = eof ? 0 : PCRE2_PARTIAL_HARD;
  for (;;) {
    size_t from = *pos;
    int rc = run_match(s, code, subj, len, from, s->retry | partial);
    /* A match that ends at the end of a segment with more to come is
     * taken as partial: it may change (a ^ that held only because of
     * PCRE2_ALT_CIRCUMFLEX, a pattern that ends with ^). The attempt
     * started at pcre2_get_startchar(), before ov[0] if \K was used. */
    int at_end = rc >= 0 && !eof && ov[1] == len;
    if (rc == PCRE2_ERROR_PARTIAL || at_end ||
        (rc == PCRE2_ERROR_NOMATCH && !s->retry)) {
      if (rc == PCRE2_ERROR_PARTIAL)
        *pos = ov[0];
      else if (at_end)
        *pos = pcre2_get_startchar(s->md);
      else
        *pos = len;
      /* Resuming at the very end, just after a CR: whether PCRE2 would
       * try a match there depends on the next byte, as it skips the middle
       * of a CR LF when it advances. Resume at the CR instead, where the
       * attempt failed without reaching the end and so fails again, and
       * let PCRE2 advance from there as it would on the whole text. */
      if (!eof && *pos == len && len > from && subj[len - 1] == '\r')
        *pos = len - 1;
      return 0;
    }
    if (rc == PCRE2_ERROR_NOMATCH) {
      /* No non-empty match where the empty one was: step on. */
      if (*pos >= len)
        return 0;
      size_t step = 1;
      if (subj[*pos] == '\r') {
        if (*pos + 1 == len && !eof)
          return 0; /* a LF may follow in the next chunk */
        if (*pos + 1 < len && subj[*pos + 1] == '\n')
          step = 2;
      }
      s->retry = 0;
      *pos += step;
      continue;
    }
    if (rc < 0)
      return rc;
    size_t start = ov[0], end = ov[1];
    if (end < start)
      return PCRE2_ERROR_INTERNAL; /* \K in an assertion; not allowed */
    const char *t = subj + start;
    size_t tlen = end - start, toff = start;
    if (s->p->has_group) {
      if (rc >= 2 && ov[2] != PCRE2_UNSET) {
        t = subj + ov[2];
        tlen = ov[3] - ov[2];
        toff = ov[2];
      } else {
        tlen = 0;
      }
    }
    if (s->cb(t, tlen, base + toff, s->data))
      return 1;
    s->retry = end == start ? PCRE2_NOTEMPTY_ATSTART | PCRE2_ANCHORED : 0;
    *pos = end;
  }
}

/* "12.3 kB": sizes in SI units, as file managers show them. */
static void format_size(size_t n, char *dst, size_t cap) {
  if (n == 0) {
    snprintf(dst, cap, "empty");
    return;
  }
  if (n < 1000) {
    snprintf(dst, cap, "%zu B", n);
    return;
  }
  static const char *const units[] = {"kB", "MB", "GB", "TB"};
  double v = (double)n / 1000;
  int u = 0;
  while (v >= 999.95 && u < 3) {
    v /= 1000;
    u++;
  }
  snprintf(dst, cap, "%.1f %s", v, units[u]);
}

static const char *base_name(const char *path) {
  const char *slash = strrchr(path, '/');
  return slash && slash[1] ? slash + 1 : path;
}

/* Turns a PCRE2 failure of the scan into a fault or BK_ENOMEM. */
static int scan_failed(int rc, const char *name, size_t at, char *why,
                       size_t whycap) {
  if (rc == PCRE2_ERROR_NOMEMORY) {
    put(why, whycap, "out of memory");
    return BK_ENOMEM;
  }
  PCRE2_UCHAR text[256];
  if (pcre2_get_error_message(rc, text, sizeof text) < 0)
    snprintf((char *)text, sizeof text, "error %d", rc);
  put(why, whycap, "pattern gave up at byte %zu of %s: %s", at, name,
      (const char *)text);
  return BK_FAULT_NO_MATCH;
}

/* Reads up to n bytes, fewer only at the end of the file. Returns the count
 * or -1 with errno. */
static ssize_t read_full(int fd, char *dst, size_t n) {
  size_t got = 0;
  while (got < n) {
    ssize_t r = read(fd, dst + got, n - got);
    if (r < 0 && errno == EINTR)
      continue;
    if (r < 0)
      return -1;
    if (r == 0)
      break;
    got += (size_t)r;
  }
  return (ssize_t)got;
}

static int scan_init(scan_t *s, const bk_pattern_t *p, bk_extract_cb cb,
                     void *data) {
  s->p = p;
  s->cb = cb;
  s->data = data;
  s->retry = 0;
  s->no_jit = 0;
  s->md = pcre2_match_data_create_from_pattern(p->code, p->gctx);
  return s->md ? 0 : BK_ENOMEM;
}

/*
 * Scans file `path`, telling its size in *nbytes (the bytes read). The
 * buffer holds the kept text (at most BK_EXTRACT_WINDOW bytes) and one
 * chunk: after each segment the text before the resume position, less the
 * context, is dropped. Returns as bk_extract_file_each.
 */
static int scan_file(const bk_pattern_t *p, const char *path, bk_extract_cb cb,
                     void *data, char *why, size_t whycap, size_t *nbytes) {
  const char *name = base_name(path);
  *nbytes = 0;
  int fd = open(path, O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    if (errno == ENOENT || errno == ENOTDIR)
      put(why, whycap, "%s not found", name);
    else
      put(why, whycap, "cannot open %s: %s", name, strerror(errno));
    return BK_FAULT_NO_OUTPUT;
  }
  struct stat st;
  if (fstat(fd, &st) != 0) {
    put(why, whycap, "cannot read %s: %s", name, strerror(errno));
    close(fd);
    return BK_FAULT_NO_OUTPUT;
  }
  if (S_ISDIR(st.st_mode)) {
    close(fd);
    put(why, whycap, "%s is a folder, not a file", name);
    return BK_FAULT_NO_OUTPUT;
  }

  /* A small file is read in one go, into a buffer of about its size (a
   * read that comes back short tells the end). Sizes are hints only: the
   * file may still grow, or be a pipe. */
  size_t chunk = chunk_size;
  if (S_ISREG(st.st_mode) && st.st_size >= 0 && (uintmax_t)st.st_size < chunk) {
    size_t want = (size_t)st.st_size + 1;
    if (want < SMALL_READ)
      want = SMALL_READ;
    if (want < chunk)
      chunk = want;
  }
  int rc = 0;
  char *buf = NULL;
  size_t cap = 0;
  scan_t s;
  s.md = NULL;
  if (scan_init(&s, p, cb, data))
    goto nomem;
  size_t len = 0, pos = 0, base = 0;
  for (;;) {
    if (len + chunk > cap) {
      /* Grows to BK_EXTRACT_WINDOW + chunk at most: len stays within the
       * window (checked below). */
      size_t ncap = cap ? 2 * cap : chunk + p->keepback;
      if (ncap < len + chunk)
        ncap = len + chunk;
      if (ncap > BK_EXTRACT_WINDOW + chunk)
        ncap = BK_EXTRACT_WINDOW + chunk;
      char *nbuf = bk_realloc(buf, ncap);
      if (!nbuf)
        goto nomem;
      buf = nbuf;
      cap = ncap;
    }
    ssize_t n = read_full(fd, buf + len, chunk);
    if (n < 0) {
      put(why, whycap, "cannot read %s: %s", name, strerror(errno));
      rc = BK_FAULT_NO_OUTPUT;
      goto done;
    }
    int eof = (size_t)n < chunk;
    len += (size_t)n;
    *nbytes += (size_t)n;
    int r = scan_segment(&s, buf, len, &pos, base, eof);
    if (r < 0) {
      rc = scan_failed(r, name, base + pos, why, whycap);
      goto done;
    }
    if (r == 1 || eof)
      break;
    size_t keep = pos > p->keepback ? pos - p->keepback : 0;
    if (len - keep > BK_EXTRACT_WINDOW) {
      put(why, whycap, "match at byte %zu of %s spans more than %u MiB",
          base + pos, name, BK_EXTRACT_WINDOW >> 20);
      rc = BK_FAULT_NO_MATCH;
      goto done;
    }
    memmove(buf, buf + keep, len - keep);
    len -= keep;
    pos -= keep;
    base += keep;
  }

done:
  pcre2_match_data_free(s.md);
  bk_free(buf);
  close(fd);
  return rc;

nomem:
  put(why, whycap, "out of memory");
  rc = BK_ENOMEM;
  goto done;
}

static int scan_text(const bk_pattern_t *p, const char *name, const char *text,
                     size_t len, bk_extract_cb cb, void *data, char *why,
                     size_t whycap) {
  scan_t s;
  if (scan_init(&s, p, cb, data)) {
    put(why, whycap, "out of memory");
    return BK_ENOMEM;
  }
  size_t pos = 0;
  int r = scan_segment(&s, text ? text : "", text ? len : 0, &pos, 0, 1);
  pcre2_match_data_free(s.md);
  return r < 0 ? scan_failed(r, name, pos, why, whycap) : 0;
}

int bk_extract_file_each(const bk_pattern_t *p, const char *path,
                         bk_extract_cb cb, void *data, char *why,
                         size_t whycap) {
  size_t nbytes;
  return scan_file(p, path, cb, data, why, whycap, &nbytes);
}

int bk_extract_text_each(const bk_pattern_t *p, const char *text, size_t len,
                         bk_extract_cb cb, void *data, char *why,
                         size_t whycap) {
  return scan_text(p, "output", text, len, cb, data, why, whycap);
}

/* ---- selection ---- */

/*
 * The selection so far. `state` and `quote` belong to the match that
 * decides: for first and last the selected one, for max and min the first
 * that is not a number (the scan stops there).
 */
typedef struct {
  bk_match_t sel;
  size_t n;                  /* matches seen */
  int state;                 /* 0 number, -1 not a number, -2 out of range */
  double value;              /* when state is 0 and n > 0 */
  char quote[QUOTE_MAX + 4]; /* the text, when state is not 0 */
} select_t;

/* Quotes s[0..len) for a reason: blanks around dropped, control bytes as
 * '?', cut at QUOTE_MAX bytes with "...". */
static void quote_text(const char *s, size_t len, char *dst) {
  size_t i = 0, n = len;
  while (i < n && is_blank(s[i]))
    i++;
  while (n > i && is_blank(s[n - 1]))
    n--;
  size_t k = 0;
  for (; i < n && k < QUOTE_MAX; i++) {
    unsigned char c = (unsigned char)s[i];
    dst[k++] = c < 0x20 || c == 0x7f ? '?' : (char)c;
  }
  if (i < n) {
    memcpy(dst + k, "...", 3);
    k += 3;
  }
  dst[k] = '\0';
}

static int select_cb(const char *s, size_t len, size_t offset, void *data) {
  (void)offset;
  select_t *q = data;
  double v = 0;
  int rc = parse_number(s, len, &v);
  q->n++;
  if (rc == 0 && (q->sel == BK_MATCH_MAX || q->sel == BK_MATCH_MIN)) {
    int better = q->sel == BK_MATCH_MAX ? v > q->value : v < q->value;
    if (q->n == 1 || better)
      q->value = v;
    return 0;
  }
  q->state = rc;
  q->value = v;
  if (rc)
    quote_text(s, len, q->quote);
  return q->sel != BK_MATCH_LAST;
}

/* Turns the selection into the result of bk_extract_*. */
static int select_finish(const select_t *q, const char *name, size_t nbytes,
                         double *value, char *why, size_t whycap) {
  if (q->n == 0) {
    char size[32];
    format_size(nbytes, size, sizeof size);
    put(why, whycap, "no match in %s (%s)", name, size);
    return BK_FAULT_NO_MATCH;
  }
  if (q->state == -1 && !q->quote[0]) {
    put(why, whycap, "the match is empty, not a number");
    return BK_FAULT_NOT_A_NUMBER;
  }
  if (q->state) {
    put(why, whycap, "matched '%s', %s", q->quote,
        q->state == -2 ? "out of range" : "not a number");
    return BK_FAULT_NOT_A_NUMBER;
  }
  *value = q->value;
  put(why, whycap, "%s", "");
  return BK_FAULT_NONE;
}

static void select_init(select_t *q, bk_match_t sel) {
  q->sel = sel;
  q->n = 0;
  q->state = 0;
  q->value = 0;
  q->quote[0] = '\0';
}

int bk_extract_file(const bk_pattern_t *p, const char *path, bk_match_t sel,
                    double *value, char *why, size_t whycap) {
  select_t q;
  select_init(&q, sel);
  size_t nbytes;
  int rc = scan_file(p, path, select_cb, &q, why, whycap, &nbytes);
  if (rc)
    return rc;
  return select_finish(&q, base_name(path), nbytes, value, why, whycap);
}

int bk_extract_text_named(const bk_pattern_t *p, const char *name,
                          const char *text, size_t len, bk_match_t sel,
                          double *value, char *why, size_t whycap) {
  select_t q;
  select_init(&q, sel);
  int rc = scan_text(p, name, text, len, select_cb, &q, why, whycap);
  if (rc)
    return rc;
  return select_finish(&q, name, text ? len : 0, value, why, whycap);
}

int bk_extract_text(const bk_pattern_t *p, const char *text, size_t len,
                    bk_match_t sel, double *value, char *why, size_t whycap) {
  return bk_extract_text_named(p, "output", text, len, sel, value, why, whycap);
}
