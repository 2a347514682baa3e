/*
 * Extraction of named results from a model's output with PCRE2 patterns
 * (multi-line: ^ and $ at line boundaries). Group 1, or the only group, is
 * the value; without groups the whole match. The selection picks the first,
 * last, largest or smallest value among all matches. Files are scanned in
 * bounded chunks so that very large outputs are never held in memory
 * (a match may not span more than BK_EXTRACT_WINDOW bytes).
 *
 * Matching rules: lines end in LF, CR LF or CR; `.` does not match a line
 * end (write [\s\S] or (?s) to cross lines); patterns work on bytes (no
 * UTF-8 mode, so (*UTF) is refused); matches do not overlap and are found
 * left to right, exactly as if the whole output were one string. \G and
 * (*COMMIT), which depend on where each search call starts, are refused.
 *
 * Numbers are read in C and Fortran notations: 1.5E+03, 1.5e3, 1.5D+03,
 * -.5e-2, +3., and Fortran's exponent without the letter (-1.474969+104).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_EXTRACT_H
#define BK_EXTRACT_H

#include <stddef.h>

/* The most a match attempt may look at, counted from where it starts, in
 * bytes (a few kB less for the context kept for lookbehinds). */
#define BK_EXTRACT_WINDOW (1u << 20)

typedef enum {
  BK_MATCH_FIRST,
  BK_MATCH_LAST,
  BK_MATCH_MAX,
  BK_MATCH_MIN
} bk_match_t;

typedef struct bk_pattern bk_pattern_t;

/* Compiles `re`. Returns 0, or BK_EPARSE with PCRE2's message in `msg` and
 * the byte offset of the error in *err_off, or BK_ENOMEM. After a failure
 * *out is NULL. A compiled pattern is read-only and may be used by several
 * extractions at once. */
int bk_extract_pattern_compile(const char *re, bk_pattern_t **out, char *msg,
                       size_t msgcap, size_t *err_off);
void bk_extract_pattern_free(bk_pattern_t *p);

/* Extracts from file `path`. Returns BK_FAULT_NONE with *value set, or
 * BK_FAULT_NO_OUTPUT (file absent), BK_FAULT_NO_MATCH or
 * BK_FAULT_NOT_A_NUMBER, with a short reason in `why` (e.g. "no match in
 * purlin.dat (12.3 kB)", "matched 'NaN', not a number"). I/O errors other
 * than absence are reported as BK_FAULT_NO_OUTPUT with the reason.
 *
 * Only the selected match must be a number for first and last; for max and
 * min every match must be one (the first that is not decides the fault).
 * A scan that cannot finish (a match attempt longer than the window, or
 * PCRE2's match or heap limit) is BK_FAULT_NO_MATCH with the reason. Reasons
 * name the file by its last path component. Returns BK_ENOMEM when memory
 * runs out. `why` may be NULL. */
int bk_extract_file(const bk_pattern_t *p, const char *path, bk_match_t sel,
                    double *value, char *why, size_t whycap);
/* The same on a text in memory; reasons call it "output". */
int bk_extract_text(const bk_pattern_t *p, const char *text, size_t len,
                    bk_match_t sel, double *value, char *why, size_t whycap);
/* The same, naming the text `name` in reasons (e.g. "stdout"). */
int bk_extract_text_named(const bk_pattern_t *p, const char *name,
                          const char *text, size_t len, bk_match_t sel,
                          double *value, char *why, size_t whycap);

/* Called for each match, in order, with the value text s[0..len) (group 1,
 * or the whole match when the pattern has no group; empty when group 1 took
 * no part) and the byte offset of that text in the file or text. `s` lives
 * until the callback returns. Return 0 to go on, non-zero to stop. */
typedef int (*bk_extract_cb)(const char *s, size_t len, size_t offset,
                             void *data);
/* Calls `cb` for every match in file `path` (or in text[0..len)). Returns
 * BK_FAULT_NONE when the scan ended (at the end or because `cb` stopped it),
 * whether or not anything matched; else the faults and BK_ENOMEM as for
 * bk_extract_file, with the reason in `why`. */
int bk_extract_file_each(const bk_pattern_t *p, const char *path,
                         bk_extract_cb cb, void *data, char *why,
                         size_t whycap);
int bk_extract_text_each(const bk_pattern_t *p, const char *text, size_t len,
                         bk_extract_cb cb, void *data, char *why,
                         size_t whycap);

/* Parses a whole number token s[0..len) in the notations above. Returns 0
 * and *out (finite), or -1. */
int bk_extract_number(const char *s, size_t len, double *out);

/* Test hook: files are read `n` bytes at a time (0 restores the default of
 * 1 MiB), so that tests can put chunk edges anywhere. */
void bk__extract_set_chunk(size_t n);

#endif
