/*
 * Extraction of named results from a model's output with PCRE2 patterns
 * (multi-line: ^ and $ at line boundaries). Group 1, or the only group, is
 * the value; without groups the whole match. The selection picks the first,
 * last, largest or smallest value among all matches. Files are scanned in
 * bounded chunks so that very large outputs are never held in memory
 * (a match may not span more than BK_EXTRACT_WINDOW bytes).
 *
 * Numbers are read in C and Fortran notations: 1.5E+03, 1.5e3, 1.5D+03,
 * -.5e-2, +3., and Fortran's exponent without the letter (-1.474969+104).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_EXTRACT_H
#define BK_EXTRACT_H

#include <stddef.h>

#define BK_EXTRACT_WINDOW (1u << 20)

typedef enum {
  BK_MATCH_FIRST,
  BK_MATCH_LAST,
  BK_MATCH_MAX,
  BK_MATCH_MIN
} bk_match_t;

typedef struct bk_pattern bk_pattern_t;

/* Compiles `re`. Returns 0, or BK_EPARSE with PCRE2's message in `msg` and
 * the byte offset of the error in *err_off. */
int bk_pattern_compile(const char *re, bk_pattern_t **out, char *msg,
                       size_t msgcap, size_t *err_off);
void bk_pattern_free(bk_pattern_t *p);

/* Extracts from file `path`. Returns BK_FAULT_NONE with *value set, or
 * BK_FAULT_NO_OUTPUT (file absent), BK_FAULT_NO_MATCH or
 * BK_FAULT_NOT_A_NUMBER, with a short reason in `why` (e.g. "no match in
 * purlin.dat (12.3 kB)", "matched 'NaN', not a number"). I/O errors other
 * than absence are reported as BK_FAULT_NO_OUTPUT with the reason. */
int bk_extract_file(const bk_pattern_t *p, const char *path, bk_match_t sel,
                    double *value, char *why, size_t whycap);
/* The same on a text in memory. */
int bk_extract_text(const bk_pattern_t *p, const char *text, size_t len,
                    bk_match_t sel, double *value, char *why, size_t whycap);

/* Parses a whole number token s[0..len) in the notations above. Returns 0
 * and *out (finite), or -1. */
int bk_number_parse(const char *s, size_t len, double *out);

#endif
