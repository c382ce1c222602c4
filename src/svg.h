/* SPDX-License-Identifier: GPL-3.0-or-later */
/* svg.h: a small writer of self-contained SVG charts for the report.
 *
 * It draws what it is given and computes no statistics: axes with "nice"
 * ticks (steps of 1, 2 or 5 times a power of ten) whose labels do not
 * overlap, lines, markers, error bars, shaded bands, histogram bars,
 * reference lines, a legend and a shaded grid of values.  Every number is
 * written by etacal_svg_num, which does not depend on the locale, and every
 * text by etacal_svg_escape, so a segment called <b>&" stays text; the same
 * calls give the same bytes.  Styles follow the Okabe & Ito (2008)
 * colour-blind-safe palette and differ also by dash pattern and marker
 * shape, so that charts stay readable in greyscale.  The output is inline
 * SVG for an HTML page (no xmlns, no script, nothing fetched). */
#ifndef ETACAL_SVG_H
#define ETACAL_SVG_H

#include <stddef.h>
#include <stdio.h>

#include "etacal/error.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */

/* Styles of a series: colour, dash pattern and marker. */
enum {
    ETACAL_SVG_MAIN = 0,   /* blue #0072B2, solid line, filled circles */
    ETACAL_SVG_ALT = 1,    /* vermillion #D55E00, dashed, squares */
    ETACAL_SVG_REF = 2,    /* black, dotted, triangles */
    ETACAL_SVG_GOOD = 3,   /* bluish green #009E73, dash-dot, diamonds */
    ETACAL_SVG_MUTED = 4,  /* grey #767676, solid, hollow circles */
    ETACAL_SVG_BAND = 5,   /* sky blue #56B4E9 fill, for bands and bars */
    ETACAL_SVG_NSTYLES = 6
};

/* Writes s as XML text or attribute content: & < > " ' as entities,
 * invalid UTF-8 and control characters (other than tab and line feed) as
 * U+FFFD. */
void etacal_svg_escape(FILE *fp, const char *s);

/* The first max code points of s, with "…" in place of the rest when s is
 * longer, into buf (cap bytes, NUL-terminated, never cutting a UTF-8
 * sequence).  Returns buf. */
char *etacal_svg_truncate(const char *s, size_t max, char *buf, size_t cap);

/* The width of s in code points (what the layout estimates from). */
size_t etacal_svg_width(const char *s);

/* x rounded to ndec decimals (0 to 9) in plain decimal notation, without
 * the locale ("-0" written as "0"; NaN as "nan", infinities as "inf" and
 * "-inf"; |x| >= 1e15 with %.17g).  buf has ETACAL_SVG_NUMSZ bytes.
 * Returns the length. */
#define ETACAL_SVG_NUMSZ 48
size_t etacal_svg_num(double x, int ndec, char *buf);

/* Ticks first, first + step, ..., n of them, covering [lo, hi]: step is 1,
 * 2 or 5 times a power of ten, the smallest such that n <= maxn; ndec is
 * the number of decimals that shows step exactly.  lo == hi is widened to
 * a unit around it.  Errors: lo or hi not finite, lo > hi, maxn < 2. */
typedef struct etacal_svg_ticks {
    double first, step;
    size_t n;
    int ndec;
} etacal_svg_ticks;
int etacal_svg_nice_ticks(double lo, double hi, size_t maxn, etacal_svg_ticks *out, etacal_error *err);

/* A chart: the plot area inside margins, data ranges and their ticks.
 * Numeric axes get nice ticks and the shown range extends to them; an axis
 * can instead carry caller-given positions and labels (categories, dates). */
typedef struct etacal_svg_chart {
    FILE *fp;
    double width, height;                  /* px */
    double left, right, top, bottom;       /* the plot area in px */
    double xlo, xhi, ylo, yhi;             /* the data range shown */
    etacal_svg_ticks xt, yt;
    const double *xpos, *ypos;             /* custom ticks (NULL: numeric) */
    const char *const *xlab, *const *ylab;
    size_t nxpos, nypos;
    const char *xsuffix, *ysuffix;         /* after numeric tick labels ("%"), or NULL */
} etacal_svg_chart;

/* Options of etacal_svg_begin: the margin left of the plot (0: 64 px), and
 * custom ticks of either axis (NULL for nice ticks; the range then is the
 * one given, not extended). */
typedef struct etacal_svg_layout {
    double left_margin;
    const double *xpos;
    const char *const *xlab;
    size_t nxpos;
    const double *ypos;
    const char *const *ylab;
    size_t nypos;
    const char *xsuffix, *ysuffix;
} etacal_svg_layout;

/* Starts an <svg> of width x height px showing [xlo, xhi] x [ylo, yhi];
 * label is its accessible name (<title>).  Errors: a bad range. */
int etacal_svg_begin(etacal_svg_chart *c, FILE *fp, double width, double height, double xlo, double xhi,
                     double ylo, double yhi, const char *label, const etacal_svg_layout *lay, etacal_error *err);
/* Grid lines, ticks, tick labels and the axis titles (with units). */
void etacal_svg_axes(etacal_svg_chart *c, const char *xtitle, const char *ytitle);
/* A polyline through the finite points (a NaN breaks it). */
void etacal_svg_line(etacal_svg_chart *c, const double *x, const double *y, size_t n, int style);
/* The style's marker at each finite point; r is the radius in px. */
void etacal_svg_markers(etacal_svg_chart *c, const double *x, const double *y, size_t n, int style, double r);
/* The same, each marker with a tooltip (an SVG <title>, escaped) when
 * titles[i] is not NULL. */
void etacal_svg_markers_titled(etacal_svg_chart *c, const double *x, const double *y, size_t n, int style, double r,
                               const char *const *titles);
/* Vertical error bars from lo[i] to hi[i] at x[i] (horizontal ones when
 * horizontal is set: from lo[i] to hi[i] at height y = x[i]). */
void etacal_svg_errbars(etacal_svg_chart *c, const double *x, const double *lo, const double *hi, size_t n,
                        int style, int horizontal);
/* The area between lo and hi over x (ascending), lightly filled. */
void etacal_svg_band(etacal_svg_chart *c, const double *x, const double *lo, const double *hi, size_t n, int style);
/* Bars from edges[i] to edges[i+1] of height h[i]. */
void etacal_svg_bars(etacal_svg_chart *c, const double *edges, const double *h, size_t n, int style);
/* A reference line across the plot at x = v (vertical) or y = v, with a
 * label drawn at its end (may be NULL). */
void etacal_svg_vline(etacal_svg_chart *c, double v, int style, const char *label);
void etacal_svg_hline(etacal_svg_chart *c, double v, int style, const char *label);
/* A text label at data point (x, y), shifted by (dx, dy) px; anchor
 * "start", "middle" or "end". */
void etacal_svg_text(etacal_svg_chart *c, double x, double y, double dx, double dy, const char *anchor,
                     const char *text);
/* A legend in one row above the plot area: kind 0 a line with its marker,
 * 1 a filled box, 2 a marker alone. */
void etacal_svg_legend(etacal_svg_chart *c, const char *const *labels, const int *styles, const int *kinds, size_t n);
void etacal_svg_end(etacal_svg_chart *c);

/* A grid of nr x nc values (row-major; NaN for an empty cell), each cell
 * shaded from light to dark blue by its value between the finite minimum
 * and maximum (a single-hue ramp, so greyscale keeps the order) and showing
 * it with ndec decimals; mark[i] != 0 (mark may be NULL) adds a "*" after
 * the value.  Row and column labels are escaped and cut at 24 code points. */
void etacal_svg_heat(FILE *fp, const char *label, const char *const *rows, size_t nr, const char *const *cols,
                     size_t nc, const double *v, const unsigned char *mark, int ndec);

/* The fill colour of share t in [0,1] of the heat ramp, as "#rrggbb"
 * (buf of 8 bytes). */
void etacal_svg_ramp(double t, char *buf);

#ifdef __cplusplus
}
#endif
#endif
