/*
 * The SVG chart writer (see svg.h). Plain text output into a buffer; the
 * look (colours, fonts) comes from the CSS classes of the HTML report.
 *
 * SPDX-License-Identifier: MIT
 */
#include "reports/svg.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void bk_svg_escape(bk_buf_t *o, const char *s) {
  for (; s && *s; s++) {
    switch (*s) {
    case '&':
      bk_buf_puts(o, "&amp;");
      break;
    case '<':
      bk_buf_puts(o, "&lt;");
      break;
    case '>':
      bk_buf_puts(o, "&gt;");
      break;
    case '"':
      bk_buf_puts(o, "&quot;");
      break;
    default:
      bk_buf_putc(o, *s);
    }
  }
}

double bk_svg_step(double lo, double hi, int target) {
  double span = hi - lo;
  if (!(span > 0) || !isfinite(span))
    return 1;
  double raw = span / (target > 0 ? target : 5);
  double mag = pow(10, floor(log10(raw)));
  double f = raw / mag;
  double nice = f < 1.5 ? 1 : f < 3.5 ? 2 : f < 7.5 ? 5 : 10;
  return nice * mag;
}

size_t bk_svg_ticks(double lo, double hi, int target, double *t, size_t cap) {
  double st = bk_svg_step(lo, hi, target);
  size_t n = 0;
  double first = ceil(lo / st - 1e-9) * st;
  for (double v = first; v <= hi + st * 1e-9 && n < cap; v += st) {
    /* Snap rounding noise (0.30000000000000004 -> 0.3, -1e-17 -> 0). */
    double snapped = round(v / st) * st;
    t[n++] = fabs(snapped) < st * 1e-9 ? 0 : snapped;
  }
  return n;
}

void bk_svg_format(char *b, size_t n, double v, double step) {
  double a = fabs(v);
  if (v == 0) {
    snprintf(b, n, "0");
  } else if (a >= 1e5 || a < 1e-3) {
    /* 1.00e-04 -> 1e-4, 2.50e+05 -> 2.5e5 */
    char t[40];
    snprintf(t, sizeof t, "%.2e", v);
    char *e = strchr(t, 'e');
    char mant[40];
    size_t m = (size_t)(e - t);
    memcpy(mant, t, m);
    mant[m] = '\0';
    while (m > 0 && mant[m - 1] == '0')
      mant[--m] = '\0';
    if (m > 0 && mant[m - 1] == '.')
      mant[--m] = '\0';
    int ex = atoi(e + 1);
    snprintf(b, n, "%se%d", mant, ex);
  } else if (step == 0) {
    snprintf(b, n, "%g", v);
  } else {
    int dec = step > 0 && step < 1 ? (int)ceil(-log10(step) - 1e-9) : 0;
    if (dec > 6)
      dec = 6;
    snprintf(b, n, "%.*f", dec, v);
  }
}

static double tx(double v, int lg) {
  return lg ? log10(v) : v;
}

double bk_svg_px(const bk_svg_t *p, double x) {
  double a = tx(p->x0, p->logx), b = tx(p->x1, p->logx);
  double f = b > a ? (tx(x, p->logx) - a) / (b - a) : 0.5;
  return p->ml + f * (p->w - p->ml - p->mr);
}

double bk_svg_py(const bk_svg_t *p, double y) {
  double a = tx(p->y0, p->logy), b = tx(p->y1, p->logy);
  double f = b > a ? (tx(y, p->logy) - a) / (b - a) : 0.5;
  return p->h - p->mb - f * (p->h - p->mt - p->mb);
}

void bk_svg_begin(bk_svg_t *p, bk_buf_t *o, double w, double h,
                  const char *chart, const char *title) {
  memset(p, 0, sizeof *p);
  p->o = o;
  p->w = w;
  p->h = h;
  p->ml = 78;
  p->mr = 24;
  p->mt = 16;
  p->mb = 52;
  p->x0 = 0;
  p->x1 = 1;
  p->y0 = 0;
  p->y1 = 1;
  bk_buf_printf(o,
                "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"%g\" "
                "height=\"%g\" viewBox=\"0 0 %g %g\" data-chart=\"",
                w, h, w, h);
  bk_svg_escape(o, chart);
  bk_buf_puts(o, "\" role=\"img\"><title>");
  bk_svg_escape(o, title);
  bk_buf_puts(o, "</title>\n");
}

void bk_svg_end(bk_svg_t *p) {
  bk_buf_puts(p->o, "</svg>\n");
}

void bk_svg_text(bk_svg_t *p, double px, double py, const char *anchor,
                 const char *cls, const char *text) {
  bk_buf_printf(p->o, "<text x=\"%.1f\" y=\"%.1f\" text-anchor=\"%s\"", px, py,
                anchor);
  if (cls)
    bk_buf_printf(p->o, " class=\"%s\"", cls);
  bk_buf_putc(p->o, '>');
  bk_svg_escape(p->o, text);
  bk_buf_puts(p->o, "</text>\n");
}

/* Log-axis ticks: decades, thinned to about 8 labels. */
static size_t log_ticks(double lo, double hi, double *t, size_t cap,
                        double *every) {
  double a = floor(log10(lo) + 1e-9), b = ceil(log10(hi) - 1e-9);
  double k = ceil((b - a) / 8);
  if (k < 1)
    k = 1;
  *every = k;
  /* Few decades: label 1, 2 and 5 of each, so the axis still reads. */
  static const double few[] = {1, 2, 5};
  size_t nm = b - a <= 2 ? 3 : 1;
  size_t n = 0;
  for (double e = a; e <= b && n < cap; e += k)
    for (size_t m = 0; m < nm && n < cap; m++) {
      double v = few[m] * pow(10, e);
      if (v >= lo * (1 - 1e-9) && v <= hi * (1 + 1e-9))
        t[n++] = v;
    }
  return n;
}

static void axis_ticks(const bk_svg_t *p, int y, double *t, size_t *n,
                       double *step) {
  double lo = y ? p->y0 : p->x0, hi = y ? p->y1 : p->x1;
  int lg = y ? p->logy : p->logx;
  double every;
  if (lg) {
    *n = log_ticks(lo, hi, t, 24, &every);
    *step = 0;
  } else {
    *n = bk_svg_ticks(lo, hi, y ? 5 : 6, t, 24);
    *step = bk_svg_step(lo, hi, y ? 5 : 6);
  }
}

void bk_svg_axes(bk_svg_t *p, const char *xlabel, const char *ylabel) {
  double t[24], st;
  size_t n;
  char lab[48];
  double left = p->ml, right = p->w - p->mr, top = p->mt, bottom = p->h - p->mb;
  bk_buf_t *o = p->o;
  bk_buf_puts(o, "<g class=\"axes\">\n");
  if (ylabel) {
    axis_ticks(p, 1, t, &n, &st);
    for (size_t i = 0; i < n; i++) {
      double y = bk_svg_py(p, t[i]);
      bk_buf_printf(o,
                    "<line class=\"grid\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" "
                    "y2=\"%.1f\"/>\n",
                    left, y, right, y);
      bk_svg_format(lab, sizeof lab, t[i], st);
      bk_svg_text(p, left - 6, y + 4, "end", "tick", lab);
    }
  }
  if (xlabel) {
    axis_ticks(p, 0, t, &n, &st);
    for (size_t i = 0; i < n; i++) {
      double x = bk_svg_px(p, t[i]);
      bk_buf_printf(o,
                    "<line class=\"tickmark\" x1=\"%.1f\" y1=\"%.1f\" "
                    "x2=\"%.1f\" y2=\"%.1f\"/>\n",
                    x, bottom, x, bottom + 5);
      bk_svg_format(lab, sizeof lab, t[i], st);
      bk_svg_text(p, x, bottom + 18, "middle", "tick", lab);
    }
  }
  bk_buf_printf(o,
                "<rect class=\"frame\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" "
                "height=\"%.1f\"/>\n",
                left, top, right - left, bottom - top);
  if (xlabel && *xlabel)
    bk_svg_text(p, (left + right) / 2, p->h - 10, "middle", "label", xlabel);
  if (ylabel && *ylabel) {
    bk_buf_printf(o,
                  "<text class=\"label\" text-anchor=\"middle\" "
                  "transform=\"translate(16,%.1f) rotate(-90)\">",
                  (top + bottom) / 2);
    bk_svg_escape(o, ylabel);
    bk_buf_puts(o, "</text>\n");
  }
  bk_buf_puts(o, "</g>\n");
}

static int shown(const bk_svg_t *p, double x, double y) {
  if (!isfinite(x) || !isfinite(y))
    return 0;
  if ((p->logx && x <= 0) || (p->logy && y <= 0))
    return 0;
  return 1;
}

void bk_svg_line(bk_svg_t *p, size_t n, const double *x, const double *y,
                 const char *cls) {
  int open = 0;
  for (size_t i = 0; i < n; i++) {
    if (!shown(p, x[i], y[i])) {
      if (open)
        bk_buf_puts(p->o, "\"/>\n");
      open = 0;
      continue;
    }
    if (!open)
      bk_buf_printf(p->o, "<polyline class=\"%s\" points=\"", cls);
    bk_buf_printf(p->o, "%s%.1f,%.1f", open ? " " : "", bk_svg_px(p, x[i]),
                  bk_svg_py(p, y[i]));
    open = 1;
  }
  if (open)
    bk_buf_puts(p->o, "\"/>\n");
}

void bk_svg_band(bk_svg_t *p, size_t n, const double *x, const double *lo,
                 const double *hi, const char *cls) {
  bk_buf_printf(p->o, "<polygon class=\"%s\" points=\"", cls);
  int any = 0;
  for (size_t i = 0; i < n; i++)
    if (shown(p, x[i], hi[i]) && shown(p, x[i], lo[i])) {
      bk_buf_printf(p->o, "%s%.1f,%.1f", any ? " " : "", bk_svg_px(p, x[i]),
                    bk_svg_py(p, hi[i]));
      any = 1;
    }
  for (size_t i = n; i-- > 0;)
    if (shown(p, x[i], hi[i]) && shown(p, x[i], lo[i]))
      bk_buf_printf(p->o, " %.1f,%.1f", bk_svg_px(p, x[i]),
                    bk_svg_py(p, lo[i]));
  bk_buf_puts(p->o, "\"/>\n");
}

void bk_svg_rect(bk_svg_t *p, double xa, double ya, double xb, double yb,
                 const char *cls, const char *attrs) {
  double pa = bk_svg_px(p, xa), pb = bk_svg_px(p, xb);
  double qa = bk_svg_py(p, ya), qb = bk_svg_py(p, yb);
  double x = fmin(pa, pb), y = fmin(qa, qb);
  double w = fabs(pb - pa), h = fabs(qb - qa);
  bk_buf_printf(p->o,
                "<rect class=\"%s\" x=\"%.2f\" y=\"%.2f\" width=\"%.2f\" "
                "height=\"%.2f\"%s%s/>\n",
                cls, x, y, w, h, attrs ? " " : "", attrs ? attrs : "");
}

void bk_svg_dot(bk_svg_t *p, double x, double y, double r, const char *cls) {
  if (!shown(p, x, y))
    return;
  bk_buf_printf(p->o,
                "<circle class=\"%s\" cx=\"%.1f\" cy=\"%.1f\" r=\"%g\"/>\n",
                cls, bk_svg_px(p, x), bk_svg_py(p, y), r);
}

void bk_svg_vline(bk_svg_t *p, double x, const char *cls, const char *label) {
  double px = bk_svg_px(p, x);
  bk_buf_printf(p->o,
                "<line class=\"%s\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" "
                "y2=\"%.1f\"/>\n",
                cls, px, p->mt, px, p->h - p->mb);
  if (label)
    bk_svg_text(p, px + 4, p->mt + 14, "start", "note", label);
}

void bk_svg_hline(bk_svg_t *p, double y, const char *cls, const char *label) {
  double py = bk_svg_py(p, y);
  bk_buf_printf(p->o,
                "<line class=\"%s\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" "
                "y2=\"%.1f\"/>\n",
                cls, p->ml, py, p->w - p->mr, py);
  if (label)
    bk_svg_text(p, p->w - p->mr - 4, py - 5, "end", "note", label);
}
