/*
 * Reports of a finished (or stopped) study: a readable text summary and the
 * JSON summary whose keys DESIGN.md section 3 fixes (pf, beta, cov, ci,
 * ci_level, ci_method, evaluations, failures, model_errors, excluded,
 * pf_bounds, method, seed, ...).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_REPORT_H
#define BK_REPORT_H

#include "buf.h"
#include "method.h"
#include "study.h"

/* The caution printed with every result. */
extern const char bk_report_caution[];

int bk_report_json(const bk_study_t *s, const bk_result_t *r, bk_buf_t *out);
int bk_report_text(const bk_study_t *s, const bk_result_t *r, bk_buf_t *out);

/* Appends a JSON string literal (quoted, escaped). */
int bk_json_string(bk_buf_t *out, const char *s);
/* Appends a JSON number (%.17g), or null when not finite. */
int bk_json_number(bk_buf_t *out, double v);

#endif
