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

#include "base/buf.h"
#include "base/error.h"
#include "methods/result.h"
#include "study/study.h"

/* The caution printed with every result. */
extern const char bk_report_caution[];

int bk_report_json(const bk_study_t *s, const bk_result_t *r, bk_buf_t *out);
int bk_report_text(const bk_study_t *s, const bk_result_t *r, bk_buf_t *out);

/* Appends the self-contained HTML report of run folder `folder` (which
 * holds report.json, and records.log for studies with a model) for the
 * loaded study `s` (report_html.c). Returns 0, or a negative code with err
 * set (no report.json: run the study first). */
int bk_report_html(const char *folder, const bk_study_t *s, bk_buf_t *out,
                   bk_error_t *err);

/* The same from the JSON summary `json` (as bk_report_json writes it)
 * instead of folder/report.json; for a re-analysis (its "reanalysis" key)
 * the charts compute g again from the records with the study's limit
 * states. */
int bk_report_html_of(const char *folder, const bk_study_t *s, const char *json,
                      bk_buf_t *out, bk_error_t *err);

/* The study file that made the report.json in `folder` (its "study" key),
 * as a new string freed with bk_free. Returns 0, a negative errno when
 * there is no report.json, BK_ENOTFOUND when it names no study, or
 * BK_ECORRUPT. */
int bk_report_study_path(const char *folder, char **path);

/* Appends a JSON string literal (quoted, escaped). */
int bk_report_json_string(bk_buf_t *out, const char *s);
/* Appends a JSON number (the shortest text that reads back as the same
 * double, bk_buf_put_double), or null when not finite. */
int bk_report_json_number(bk_buf_t *out, double v);

#endif
