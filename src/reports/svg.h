/*
 * A small SVG chart writer for the HTML report: one plot area with linear
 * or logarithmic axes, readable ticks and labels, lines, bands, bars and
 * points. Every drawn data element may carry data-* attributes so that
 * tests can compare a chart with the records it was drawn from.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_SVG_H
#define BK_SVG_H

#include <stddef.h>

#include "base/buf.h"

typedef struct {
  bk_buf_t *o;
  double w, h;           /* whole picture, px */
  double ml, mr, mt, mb; /* margins around the plot area */
  double x0, x1, y0, y1; /* data range shown */
  int logx, logy;        /* base-10 axes */
} bk_svg_t;

/* Starts an <svg> of w x h px named `chart` (data-chart attribute) with a
 * title for screen readers. Set the ranges (and log flags) before axes. */
void bk_svg_begin(bk_svg_t *p, bk_buf_t *o, double w, double h,
                  const char *chart, const char *title);
void bk_svg_end(bk_svg_t *p);

/* Draws the frame, grid, ticks and tick labels, and the axis labels.
 * Category axes: pass NULL labels to skip an axis. */
void bk_svg_axes(bk_svg_t *p, const char *xlabel, const char *ylabel);

/* Data to pixels. */
double bk_svg_px(const bk_svg_t *p, double x);
double bk_svg_py(const bk_svg_t *p, double y);

/* A polyline through the finite points (breaks at NaN). */
void bk_svg_line(bk_svg_t *p, size_t n, const double *x, const double *y,
                 const char *cls);
/* A filled band between lo and hi over x. */
void bk_svg_band(bk_svg_t *p, size_t n, const double *x, const double *lo,
                 const double *hi, const char *cls);
/* A rectangle in data coordinates; `attrs` (may be NULL) is written as is
 * inside the element (e.g. data-count="12"). */
void bk_svg_rect(bk_svg_t *p, double xa, double ya, double xb, double yb,
                 const char *cls, const char *attrs);
/* A dot of radius r px. */
void bk_svg_dot(bk_svg_t *p, double x, double y, double r, const char *cls);
/* A vertical or horizontal reference line across the plot with a label. */
void bk_svg_vline(bk_svg_t *p, double x, const char *cls, const char *label);
void bk_svg_hline(bk_svg_t *p, double y, const char *cls, const char *label);
/* Text at pixel coordinates; anchor "start", "middle" or "end". */
void bk_svg_text(bk_svg_t *p, double px, double py, const char *anchor,
                 const char *cls, const char *text);

/* Appends text with &, <, >, " escaped. */
void bk_svg_escape(bk_buf_t *o, const char *s);

/* Round tick values covering [lo, hi]: about `target` of them, steps of
 * 1, 2 or 5 times a power of ten. Returns the count (at most cap). */
size_t bk_svg_ticks(double lo, double hi, int target, double *t, size_t cap);
/* A "nice" step near (hi - lo) / target. */
double bk_svg_step(double lo, double hi, int target);
/* Formats a tick value compactly ("0.5", "1e-4", "2.5e+05", "120"). */
void bk_svg_format(char *b, size_t n, double v, double step);

#endif
