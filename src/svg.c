/* SPDX-License-Identifier: GPL-3.0-or-later */
/* svg.c: a small SVG chart writer (see svg.h).  Layout is estimated from
 * code-point counts at 11 px text (about 6.6 px a character in DejaVu Sans,
 * rounded up to 7); tick steps are 1, 2 or 5 times a power of ten (common
 * practice, no source); the palette is Okabe & Ito's (2008, "Color
 * universal design"), each colour with its own dash pattern and marker. */
#include "base.h"
#include "svg.h"

#include <math.h>
#include <stdint.h>
#include <string.h>

#define CHAR_W 7.0 /* px per character of 11 px text, rounded up */

enum { M_CIRCLE, M_SQUARE, M_TRIANGLE, M_DIAMOND, M_HOLLOW };

static const struct {
    const char *stroke, *dash, *fill;
    int marker;
} S[ETACAL_SVG_NSTYLES] = {
    {"#0072B2", NULL, "#0072B2", M_CIRCLE},    {"#D55E00", "6 3", "#D55E00", M_SQUARE},
    {"#000000", "2 3", "#000000", M_TRIANGLE}, {"#009E73", "8 3 2 3", "#009E73", M_DIAMOND},
    {"#767676", NULL, "none", M_HOLLOW},       {"#56B4E9", NULL, "#56B4E9", M_SQUARE},
};

static int style_ok(int s) { return s >= 0 && s < ETACAL_SVG_NSTYLES ? s : 0; }

/* ---- text ---------------------------------------------------------------- */

/* The length of the valid UTF-8 sequence at s (1 to 4), or 0 when the bytes
 * there are not one (overlong forms, surrogates and values above U+10FFFF
 * are invalid). */
static size_t utf8_len(const unsigned char *s)
{
    unsigned c = s[0];
    if (c < 0x80)
        return 1;
    if (c >= 0xC2 && c <= 0xDF)
        return (s[1] & 0xC0) == 0x80 ? 2 : 0;
    if (c >= 0xE0 && c <= 0xEF) {
        if ((s[1] & 0xC0) != 0x80 || (s[2] & 0xC0) != 0x80)
            return 0;
        if ((c == 0xE0 && s[1] < 0xA0) || (c == 0xED && s[1] >= 0xA0))
            return 0;
        return 3;
    }
    if (c >= 0xF0 && c <= 0xF4) {
        if ((s[1] & 0xC0) != 0x80 || (s[2] & 0xC0) != 0x80 || (s[3] & 0xC0) != 0x80)
            return 0;
        if ((c == 0xF0 && s[1] < 0x90) || (c == 0xF4 && s[1] >= 0x90))
            return 0;
        return 4;
    }
    return 0;
}

void etacal_svg_escape(FILE *fp, const char *s)
{
    const unsigned char *p = (const unsigned char *)s;
    while (*p) {
        size_t l = utf8_len(p);
        if (l == 0) {
            fputs("\xEF\xBF\xBD", fp);
            p++;
            continue;
        }
        if (l == 1) {
            unsigned c = *p;
            switch (c) {
            case '&': fputs("&amp;", fp); break;
            case '<': fputs("&lt;", fp); break;
            case '>': fputs("&gt;", fp); break;
            case '"': fputs("&quot;", fp); break;
            case '\'': fputs("&#39;", fp); break;
            default:
                if ((c < 0x20 && c != '\t' && c != '\n') || c == 0x7F)
                    fputs("\xEF\xBF\xBD", fp);
                else
                    putc((int)c, fp);
            }
        } else {
            fwrite(p, 1, l, fp);
        }
        p += l;
    }
}

size_t etacal_svg_width(const char *s)
{
    size_t w = 0;
    const unsigned char *p = (const unsigned char *)s;
    while (*p) {
        size_t l = utf8_len(p);
        p += l ? l : 1;
        w++;
    }
    return w;
}

char *etacal_svg_truncate(const char *s, size_t max, char *buf, size_t cap)
{
    const unsigned char *p = (const unsigned char *)s;
    size_t w = 0, out = 0;
    if (cap == 0)
        return buf;
    int cut = etacal_svg_width(s) > max;
    size_t keep = cut ? (max ? max - 1 : 0) : max;
    while (*p && w < keep) {
        size_t l = utf8_len(p);
        if (l == 0)
            l = 1; /* kept as is; escaping replaces it */
        if (out + l + 4 > cap)
            break;
        memcpy(buf + out, p, l);
        out += l;
        p += l;
        w++;
    }
    if (cut && out + 4 <= cap) {
        memcpy(buf + out, "\xE2\x80\xA6", 3); /* … */
        out += 3;
    }
    buf[out] = '\0';
    return buf;
}

/* ---- numbers ------------------------------------------------------------- */

size_t etacal_svg_num(double x, int ndec, char *buf)
{
    if (isnan(x))
        return (size_t)snprintf(buf, ETACAL_SVG_NUMSZ, "nan");
    if (isinf(x))
        return (size_t)snprintf(buf, ETACAL_SVG_NUMSZ, x > 0 ? "inf" : "-inf");
    if (ndec < 0)
        ndec = 0;
    if (ndec > 9)
        ndec = 9;
    if (fabs(x) >= 1e15)
        return (size_t)snprintf(buf, ETACAL_SVG_NUMSZ, "%.17g", x);
    uint64_t scale = 1;
    for (int i = 0; i < ndec; i++)
        scale *= 10;
    /* round half away from zero on the scaled magnitude; integer
     * arithmetic from here on, so no locale enters */
    double m = round(fabs(x) * (double)scale);
    if (m >= 9e18)
        return (size_t)snprintf(buf, ETACAL_SVG_NUMSZ, "%.17g", x);
    uint64_t r = (uint64_t)m;
    uint64_t ip = r / scale, fp = r % scale;
    int neg = x < 0 && r != 0;
    size_t len = (size_t)snprintf(buf, ETACAL_SVG_NUMSZ, "%s%llu", neg ? "-" : "", (unsigned long long)ip);
    if (ndec > 0)
        len += (size_t)snprintf(buf + len, ETACAL_SVG_NUMSZ - len, ".%0*llu", ndec, (unsigned long long)fp);
    return len;
}

/* A coordinate in px with one decimal. */
static void px(FILE *fp, double v)
{
    char b[ETACAL_SVG_NUMSZ];
    etacal_svg_num(v, 1, b);
    fputs(b, fp);
}

int etacal_svg_nice_ticks(double lo, double hi, size_t maxn, etacal_svg_ticks *out, etacal_error *err)
{
    if (!isfinite(lo) || !isfinite(hi) || lo > hi)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "bad axis range [%g, %g]", lo, hi);
    if (maxn < 2)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "an axis needs room for 2 ticks or more");
    if (lo == hi) {
        double d = lo != 0 ? fabs(lo) * 0.05 : 0.5;
        lo -= d;
        hi += d;
    }
    double raw = (hi - lo) / (double)(maxn - 1);
    double p = pow(10, floor(log10(raw)));
    static const double mult[] = {1, 2, 5, 10, 20, 50};
    for (size_t i = 0; i < sizeof mult / sizeof *mult; i++) {
        double step = mult[i] * p;
        double k0 = floor(lo / step + 1e-9), k1 = ceil(hi / step - 1e-9);
        double n = k1 - k0 + 1;
        if (n <= (double)maxn) {
            out->step = step;
            out->first = k0 * step;
            out->n = (size_t)n;
            double e = floor(log10(step) + 1e-9);
            out->ndec = e < 0 ? (int)-e : 0;
            return ETACAL_OK;
        }
    }
    return etacal_error_set(err, ETACAL_EINVAL, NULL, "no tick step found for [%g, %g]", lo, hi);
}

static double tick_value(const etacal_svg_ticks *t, size_t i)
{
    return (floor(t->first / t->step + 0.5) + (double)i) * t->step;
}

/* ---- charts -------------------------------------------------------------- */

static double sx(const etacal_svg_chart *c, double x)
{
    return c->left + (x - c->xlo) / (c->xhi - c->xlo) * (c->right - c->left);
}

static double sy(const etacal_svg_chart *c, double y)
{
    return c->bottom - (y - c->ylo) / (c->yhi - c->ylo) * (c->bottom - c->top);
}

/* The widest tick label of numeric ticks t, in characters. */
static size_t tick_chars(const etacal_svg_ticks *t, const char *suffix)
{
    size_t w = 0;
    for (size_t i = 0; i < t->n; i++) {
        char b[ETACAL_SVG_NUMSZ];
        size_t l = etacal_svg_num(tick_value(t, i), t->ndec, b) + (suffix ? etacal_svg_width(suffix) : 0);
        w = l > w ? l : w;
    }
    return w;
}

int etacal_svg_begin(etacal_svg_chart *c, FILE *fp, double width, double height, double xlo, double xhi,
                     double ylo, double yhi, const char *label, const etacal_svg_layout *lay, etacal_error *err)
{
    memset(c, 0, sizeof *c);
    c->fp = fp;
    c->width = width;
    c->height = height;
    c->left = lay && lay->left_margin > 0 ? lay->left_margin : 64;
    c->right = width - 18;
    c->top = 34;
    c->bottom = height - 46;
    if (!(c->right - c->left > 40 && c->bottom - c->top > 40))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a chart of %gx%g px has no room to plot", width, height);
    if (lay) {
        c->xpos = lay->xpos;
        c->xlab = lay->xlab;
        c->nxpos = lay->nxpos;
        c->ypos = lay->ypos;
        c->ylab = lay->ylab;
        c->nypos = lay->nypos;
        c->xsuffix = lay->xsuffix;
        c->ysuffix = lay->ysuffix;
    }
    int rc;
    if (!c->xpos) {
        /* as many ticks as fit with their labels apart */
        size_t maxn = (size_t)((c->right - c->left) / 48) + 1;
        for (;; maxn--) {
            if ((rc = etacal_svg_nice_ticks(xlo, xhi, maxn < 2 ? 2 : maxn, &c->xt, err)) != 0)
                return rc;
            double w = (double)tick_chars(&c->xt, c->xsuffix) * CHAR_W + 14;
            if (maxn <= 2 || (double)(c->xt.n - 1) * w <= c->right - c->left)
                break;
        }
        xlo = fmin(xlo, tick_value(&c->xt, 0));
        xhi = fmax(xhi, tick_value(&c->xt, c->xt.n - 1));
    } else if (!(isfinite(xlo) && isfinite(xhi) && xlo < xhi)) {
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "bad axis range [%g, %g]", xlo, xhi);
    }
    if (!c->ypos) {
        size_t maxn = (size_t)((c->bottom - c->top) / 30) + 1;
        if ((rc = etacal_svg_nice_ticks(ylo, yhi, maxn < 2 ? 2 : maxn, &c->yt, err)) != 0)
            return rc;
        ylo = fmin(ylo, tick_value(&c->yt, 0));
        yhi = fmax(yhi, tick_value(&c->yt, c->yt.n - 1));
    } else if (!(isfinite(ylo) && isfinite(yhi) && ylo < yhi)) {
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "bad axis range [%g, %g]", ylo, yhi);
    }
    c->xlo = xlo;
    c->xhi = xhi;
    c->ylo = ylo;
    c->yhi = yhi;
    fputs("<svg width=\"", fp);
    px(fp, width);
    fputs("\" height=\"", fp);
    px(fp, height);
    fputs("\" viewBox=\"0 0 ", fp);
    px(fp, width);
    fputc(' ', fp);
    px(fp, height);
    fputs("\" role=\"img\" font-size=\"11\"><title>", fp);
    etacal_svg_escape(fp, label ? label : "chart");
    fputs("</title>\n", fp);
    return ETACAL_OK;
}

static void text_at(FILE *fp, double x, double y, const char *anchor, const char *extra, const char *s)
{
    fputs("<text x=\"", fp);
    px(fp, x);
    fputs("\" y=\"", fp);
    px(fp, y);
    fprintf(fp, "\" text-anchor=\"%s\"%s>", anchor, extra ? extra : "");
    etacal_svg_escape(fp, s);
    fputs("</text>\n", fp);
}

static void seg(FILE *fp, double x1, double y1, double x2, double y2, const char *attrs)
{
    fputs("<line x1=\"", fp);
    px(fp, x1);
    fputs("\" y1=\"", fp);
    px(fp, y1);
    fputs("\" x2=\"", fp);
    px(fp, x2);
    fputs("\" y2=\"", fp);
    px(fp, y2);
    fprintf(fp, "\" %s/>\n", attrs);
}

void etacal_svg_axes(etacal_svg_chart *c, const char *xtitle, const char *ytitle)
{
    FILE *fp = c->fp;
    char b[ETACAL_SVG_NUMSZ + 16];
    fputs("<g class=\"axes\">\n", fp);
    /* x: grid, ticks and labels, skipping a label that would touch the last one drawn */
    double last_right = -1e9;
    size_t nx = c->xpos ? c->nxpos : c->xt.n;
    for (size_t i = 0; i < nx; i++) {
        double v = c->xpos ? c->xpos[i] : tick_value(&c->xt, i);
        if (v < c->xlo - 1e-9 * fabs(c->xhi - c->xlo) || v > c->xhi + 1e-9 * fabs(c->xhi - c->xlo))
            continue;
        double x = sx(c, v);
        seg(fp, x, c->top, x, c->bottom, "stroke=\"#e3e3e3\"");
        seg(fp, x, c->bottom, x, c->bottom + 4, "stroke=\"#444\"");
        const char *s;
        if (c->xpos) {
            s = c->xlab[i];
        } else {
            size_t l = etacal_svg_num(v, c->xt.ndec, b);
            snprintf(b + l, sizeof b - l, "%s", c->xsuffix ? c->xsuffix : "");
            s = b;
        }
        double w = (double)etacal_svg_width(s) * CHAR_W;
        if (x - w / 2 < last_right + 6)
            continue;
        last_right = x + w / 2;
        text_at(fp, x, c->bottom + 16, "middle", NULL, s);
    }
    size_t ny = c->ypos ? c->nypos : c->yt.n;
    double last_y = -1e9;
    for (size_t i = 0; i < ny; i++) {
        double v = c->ypos ? c->ypos[i] : tick_value(&c->yt, i);
        if (v < c->ylo - 1e-9 * fabs(c->yhi - c->ylo) || v > c->yhi + 1e-9 * fabs(c->yhi - c->ylo))
            continue;
        double y = sy(c, v);
        seg(fp, c->left, y, c->right, y, "stroke=\"#e3e3e3\"");
        seg(fp, c->left - 4, y, c->left, y, "stroke=\"#444\"");
        const char *s;
        if (c->ypos) {
            s = c->ylab[i];
        } else {
            size_t l = etacal_svg_num(v, c->yt.ndec, b);
            snprintf(b + l, sizeof b - l, "%s", c->ysuffix ? c->ysuffix : "");
            s = b;
        }
        if (fabs(y - last_y) < 12)
            continue;
        last_y = y;
        text_at(fp, c->left - 7, y + 4, "end", NULL, s);
    }
    fputs("<rect x=\"", fp);
    px(fp, c->left);
    fputs("\" y=\"", fp);
    px(fp, c->top);
    fputs("\" width=\"", fp);
    px(fp, c->right - c->left);
    fputs("\" height=\"", fp);
    px(fp, c->bottom - c->top);
    fputs("\" fill=\"none\" stroke=\"#444\"/>\n", fp);
    if (xtitle)
        text_at(fp, (c->left + c->right) / 2, c->bottom + 36, "middle", " font-weight=\"bold\"", xtitle);
    if (ytitle) {
        fputs("<text transform=\"translate(14,", fp);
        px(fp, (c->top + c->bottom) / 2);
        fputs(") rotate(-90)\" text-anchor=\"middle\" font-weight=\"bold\">", fp);
        etacal_svg_escape(fp, ytitle);
        fputs("</text>\n", fp);
    }
    fputs("</g>\n", fp);
}

static void stroke_attrs(FILE *fp, int s, double w)
{
    fprintf(fp, " fill=\"none\" stroke=\"%s\" stroke-width=\"", S[s].stroke);
    px(fp, w);
    fputc('"', fp);
    if (S[s].dash)
        fprintf(fp, " stroke-dasharray=\"%s\"", S[s].dash);
}

void etacal_svg_line(etacal_svg_chart *c, const double *x, const double *y, size_t n, int style)
{
    int s = style_ok(style);
    size_t i = 0;
    while (i < n) {
        while (i < n && !(isfinite(x[i]) && isfinite(y[i])))
            i++;
        size_t j = i;
        while (j < n && isfinite(x[j]) && isfinite(y[j]))
            j++;
        if (j - i >= 2) {
            fputs("<polyline points=\"", c->fp);
            for (size_t k = i; k < j; k++) {
                if (k > i)
                    fputc(' ', c->fp);
                px(c->fp, sx(c, x[k]));
                fputc(',', c->fp);
                px(c->fp, sy(c, y[k]));
            }
            fputc('"', c->fp);
            stroke_attrs(c->fp, s, 2);
            fputs("/>\n", c->fp);
        }
        i = j;
    }
}

static void marker(FILE *fp, int s, double x, double y, double r)
{
    switch (S[s].marker) {
    case M_SQUARE:
        fputs("<rect x=\"", fp);
        px(fp, x - r);
        fputs("\" y=\"", fp);
        px(fp, y - r);
        fputs("\" width=\"", fp);
        px(fp, 2 * r);
        fputs("\" height=\"", fp);
        px(fp, 2 * r);
        fprintf(fp, "\" fill=\"%s\"/>\n", S[s].fill);
        break;
    case M_TRIANGLE:
    case M_DIAMOND:
        fputs("<path d=\"M", fp);
        if (S[s].marker == M_TRIANGLE) {
            px(fp, x);
            fputc(' ', fp);
            px(fp, y - 1.2 * r);
            fputs("L", fp);
            px(fp, x + 1.1 * r);
            fputc(' ', fp);
            px(fp, y + 0.8 * r);
            fputs("L", fp);
            px(fp, x - 1.1 * r);
            fputc(' ', fp);
            px(fp, y + 0.8 * r);
        } else {
            px(fp, x);
            fputc(' ', fp);
            px(fp, y - 1.3 * r);
            fputs("L", fp);
            px(fp, x + 1.3 * r);
            fputc(' ', fp);
            px(fp, y);
            fputs("L", fp);
            px(fp, x);
            fputc(' ', fp);
            px(fp, y + 1.3 * r);
            fputs("L", fp);
            px(fp, x - 1.3 * r);
            fputc(' ', fp);
            px(fp, y);
        }
        fprintf(fp, "Z\" fill=\"%s\"/>\n", S[s].fill);
        break;
    default:
        fputs("<circle cx=\"", fp);
        px(fp, x);
        fputs("\" cy=\"", fp);
        px(fp, y);
        fputs("\" r=\"", fp);
        px(fp, r);
        if (S[s].marker == M_HOLLOW)
            fprintf(fp, "\" fill=\"#fff\" stroke=\"%s\" stroke-width=\"1.5\"/>\n", S[s].stroke);
        else
            fprintf(fp, "\" fill=\"%s\"/>\n", S[s].fill);
    }
}

void etacal_svg_markers(etacal_svg_chart *c, const double *x, const double *y, size_t n, int style, double r)
{
    int s = style_ok(style);
    for (size_t i = 0; i < n; i++)
        if (isfinite(x[i]) && isfinite(y[i]))
            marker(c->fp, s, sx(c, x[i]), sy(c, y[i]), r);
}

void etacal_svg_markers_titled(etacal_svg_chart *c, const double *x, const double *y, size_t n, int style, double r,
                               const char *const *titles)
{
    int s = style_ok(style);
    for (size_t i = 0; i < n; i++) {
        if (!(isfinite(x[i]) && isfinite(y[i])))
            continue;
        if (titles && titles[i]) {
            fputs("<g><title>", c->fp);
            etacal_svg_escape(c->fp, titles[i]);
            fputs("</title>", c->fp);
        }
        marker(c->fp, s, sx(c, x[i]), sy(c, y[i]), r);
        if (titles && titles[i])
            fputs("</g>\n", c->fp);
    }
}

void etacal_svg_errbars(etacal_svg_chart *c, const double *x, const double *lo, const double *hi, size_t n,
                        int style, int horizontal)
{
    int s = style_ok(style);
    char attrs[96];
    snprintf(attrs, sizeof attrs, "stroke=\"%s\" stroke-width=\"1.5\"", S[s].stroke);
    for (size_t i = 0; i < n; i++) {
        if (!(isfinite(x[i]) && isfinite(lo[i]) && isfinite(hi[i])))
            continue;
        if (horizontal) {
            double y = sy(c, x[i]), a = sx(c, lo[i]), b = sx(c, hi[i]);
            seg(c->fp, a, y, b, y, attrs);
            seg(c->fp, a, y - 3, a, y + 3, attrs);
            seg(c->fp, b, y - 3, b, y + 3, attrs);
        } else {
            double xx = sx(c, x[i]), a = sy(c, lo[i]), b = sy(c, hi[i]);
            seg(c->fp, xx, a, xx, b, attrs);
            seg(c->fp, xx - 3, a, xx + 3, a, attrs);
            seg(c->fp, xx - 3, b, xx + 3, b, attrs);
        }
    }
}

void etacal_svg_band(etacal_svg_chart *c, const double *x, const double *lo, const double *hi, size_t n, int style)
{
    int s = style_ok(style);
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        m += isfinite(x[i]) && isfinite(lo[i]) && isfinite(hi[i]);
    if (m < 2)
        return;
    fputs("<polygon points=\"", c->fp);
    int first = 1;
    for (size_t i = 0; i < n; i++) {
        if (!(isfinite(x[i]) && isfinite(lo[i]) && isfinite(hi[i])))
            continue;
        if (!first)
            fputc(' ', c->fp);
        first = 0;
        px(c->fp, sx(c, x[i]));
        fputc(',', c->fp);
        px(c->fp, sy(c, hi[i]));
    }
    for (size_t i = n; i-- > 0;) {
        if (!(isfinite(x[i]) && isfinite(lo[i]) && isfinite(hi[i])))
            continue;
        fputc(' ', c->fp);
        px(c->fp, sx(c, x[i]));
        fputc(',', c->fp);
        px(c->fp, sy(c, lo[i]));
    }
    fprintf(c->fp, "\" fill=\"%s\" fill-opacity=\"0.35\" stroke=\"none\"/>\n", S[s].fill[0] == '#' ? S[s].fill : "#56B4E9");
}

void etacal_svg_bars(etacal_svg_chart *c, const double *edges, const double *h, size_t n, int style)
{
    int s = style_ok(style);
    for (size_t i = 0; i < n; i++) {
        if (!(isfinite(edges[i]) && isfinite(edges[i + 1]) && isfinite(h[i])) || h[i] <= 0)
            continue;
        double x0 = sx(c, edges[i]), x1 = sx(c, edges[i + 1]), y = sy(c, h[i]), y0 = sy(c, fmax(0, c->ylo));
        fputs("<rect x=\"", c->fp);
        px(c->fp, x0);
        fputs("\" y=\"", c->fp);
        px(c->fp, y);
        fputs("\" width=\"", c->fp);
        px(c->fp, x1 - x0);
        fputs("\" height=\"", c->fp);
        px(c->fp, y0 - y);
        fprintf(c->fp, "\" fill=\"%s\" stroke=\"#fff\" stroke-width=\"0.5\"/>\n",
                S[s].fill[0] == '#' ? S[s].fill : "#56B4E9");
    }
}

void etacal_svg_vline(etacal_svg_chart *c, double v, int style, const char *label)
{
    if (!isfinite(v) || v < c->xlo || v > c->xhi)
        return;
    int s = style_ok(style);
    double x = sx(c, v);
    fputs("<line x1=\"", c->fp);
    px(c->fp, x);
    fputs("\" y1=\"", c->fp);
    px(c->fp, c->top);
    fputs("\" x2=\"", c->fp);
    px(c->fp, x);
    fputs("\" y2=\"", c->fp);
    px(c->fp, c->bottom);
    fputc('"', c->fp);
    stroke_attrs(c->fp, s, 1.5);
    fputs("/>\n", c->fp);
    if (label) {
        double w = (double)etacal_svg_width(label) * CHAR_W;
        int left = x + 4 + w > c->right;
        text_at(c->fp, left ? x - 4 : x + 4, c->top + 13, left ? "end" : "start", " class=\"lbl\"", label);
    }
}

void etacal_svg_hline(etacal_svg_chart *c, double v, int style, const char *label)
{
    if (!isfinite(v) || v < c->ylo || v > c->yhi)
        return;
    int s = style_ok(style);
    double y = sy(c, v);
    fputs("<line x1=\"", c->fp);
    px(c->fp, c->left);
    fputs("\" y1=\"", c->fp);
    px(c->fp, y);
    fputs("\" x2=\"", c->fp);
    px(c->fp, c->right);
    fputs("\" y2=\"", c->fp);
    px(c->fp, y);
    fputc('"', c->fp);
    stroke_attrs(c->fp, s, 1.5);
    fputs("/>\n", c->fp);
    if (label) {
        /* above the line, or below it when that is nearer the top edge */
        double ty = y - 5 < c->top + 12 ? y + 14 : y - 5;
        text_at(c->fp, c->right - 4, ty, "end", " class=\"lbl\"", label);
    }
}

void etacal_svg_text(etacal_svg_chart *c, double x, double y, double dx, double dy, const char *anchor,
                     const char *text)
{
    if (!isfinite(x) || !isfinite(y))
        return;
    text_at(c->fp, sx(c, x) + dx, sy(c, y) + dy, anchor, " class=\"lbl\"", text);
}

void etacal_svg_legend(etacal_svg_chart *c, const char *const *labels, const int *styles, const int *kinds, size_t n)
{
    double x = c->left, y = c->top - 14;
    fputs("<g class=\"legend\">\n", c->fp);
    for (size_t i = 0; i < n; i++) {
        int s = style_ok(styles[i]);
        if (kinds[i] == 1) {
            fputs("<rect x=\"", c->fp);
            px(c->fp, x);
            fputs("\" y=\"", c->fp);
            px(c->fp, y - 6);
            fprintf(c->fp, "\" width=\"22\" height=\"10\" fill=\"%s\" fill-opacity=\"0.5\"/>\n",
                    S[s].fill[0] == '#' ? S[s].fill : "#56B4E9");
        } else {
            if (kinds[i] == 0) {
                fputs("<line x1=\"", c->fp);
                px(c->fp, x);
                fputs("\" y1=\"", c->fp);
                px(c->fp, y - 1);
                fputs("\" x2=\"", c->fp);
                px(c->fp, x + 22);
                fputs("\" y2=\"", c->fp);
                px(c->fp, y - 1);
                fputc('"', c->fp);
                stroke_attrs(c->fp, s, 2);
                fputs("/>\n", c->fp);
            }
            marker(c->fp, s, x + 11, y - 1, 3.5);
        }
        text_at(c->fp, x + 28, y + 3, "start", NULL, labels[i]);
        x += 28 + (double)etacal_svg_width(labels[i]) * CHAR_W + 18;
    }
    fputs("</g>\n", c->fp);
}

void etacal_svg_end(etacal_svg_chart *c) { fputs("</svg>\n", c->fp); }

/* ---- the heat grid ------------------------------------------------------- */

void etacal_svg_ramp(double t, char *buf)
{
    /* from #eff3ff to #08306b: every channel falls, so lightness does too */
    static const double a[3] = {239, 243, 255}, b[3] = {8, 48, 107};
    if (!(t >= 0))
        t = 0;
    if (t > 1)
        t = 1;
    int ch[3];
    for (int i = 0; i < 3; i++)
        ch[i] = (int)lround(a[i] + (b[i] - a[i]) * t);
    snprintf(buf, 8, "#%02x%02x%02x", (unsigned)ch[0] & 0xff, (unsigned)ch[1] & 0xff, (unsigned)ch[2] & 0xff);
}

void etacal_svg_heat(FILE *fp, const char *label, const char *const *rows, size_t nr, const char *const *cols,
                     size_t nc, const double *v, const unsigned char *mark, int ndec)
{
    char cut[128];
    size_t rw = 4, cw = 4;
    for (size_t i = 0; i < nr; i++) {
        size_t w = etacal_svg_width(etacal_svg_truncate(rows[i], 24, cut, sizeof cut));
        rw = w > rw ? w : rw;
    }
    for (size_t j = 0; j < nc; j++) {
        size_t w = etacal_svg_width(etacal_svg_truncate(cols[j], 24, cut, sizeof cut));
        cw = w > cw ? w : cw;
    }
    double lw = (double)rw * CHAR_W + 14, cellw = fmax(58, (double)cw * CHAR_W + 12), cellh = 26, head = 24;
    double lo = INFINITY, hi = -INFINITY;
    for (size_t i = 0; i < nr * nc; i++)
        if (isfinite(v[i])) {
            lo = fmin(lo, v[i]);
            hi = fmax(hi, v[i]);
        }
    int has = lo <= hi;
    double W = lw + (double)nc * cellw + 2, H = head + (double)nr * cellh + 2 + (has ? 34 : 0);
    if (has && W < lw + 260)
        W = lw + 260; /* room for the scale */
    fputs("<svg width=\"", fp);
    px(fp, W);
    fputs("\" height=\"", fp);
    px(fp, H);
    fputs("\" viewBox=\"0 0 ", fp);
    px(fp, W);
    fputc(' ', fp);
    px(fp, H);
    fputs("\" role=\"img\" font-size=\"11\"><title>", fp);
    etacal_svg_escape(fp, label ? label : "grid");
    fputs("</title>\n", fp);
    for (size_t j = 0; j < nc; j++)
        text_at(fp, lw + ((double)j + 0.5) * cellw, head - 8, "middle", " font-weight=\"bold\"",
                etacal_svg_truncate(cols[j], 24, cut, sizeof cut));
    for (size_t i = 0; i < nr; i++) {
        double y = head + (double)i * cellh;
        text_at(fp, lw - 8, y + cellh / 2 + 4, "end", " font-weight=\"bold\"",
                etacal_svg_truncate(rows[i], 24, cut, sizeof cut));
        for (size_t j = 0; j < nc; j++) {
            double x = lw + (double)j * cellw, val = v[i * nc + j];
            double t = isfinite(val) ? (hi > lo ? (val - lo) / (hi - lo) : 0.5) : 0;
            char col[8], num[ETACAL_SVG_NUMSZ + 2];
            etacal_svg_ramp(t, col);
            fputs("<rect x=\"", fp);
            px(fp, x);
            fputs("\" y=\"", fp);
            px(fp, y);
            fputs("\" width=\"", fp);
            px(fp, cellw);
            fputs("\" height=\"", fp);
            px(fp, cellh);
            fprintf(fp, "\" fill=\"%s\" stroke=\"#fff\" stroke-width=\"2\"/>\n", isfinite(val) ? col : "#ffffff");
            if (isfinite(val)) {
                size_t l = etacal_svg_num(val, ndec, num);
                if (mark && mark[i * nc + j])
                    snprintf(num + l, sizeof num - l, "*");
            } else {
                snprintf(num, sizeof num, "\xE2\x80\x93"); /* – */
            }
            text_at(fp, x + cellw / 2, y + cellh / 2 + 4, "middle",
                    isfinite(val) && t > 0.5 ? " fill=\"#fff\"" : " fill=\"#000\"", num);
        }
    }
    if (has) {
        /* the scale: five steps of the ramp from the lowest value to the highest */
        double y = head + (double)nr * cellh + 12, x0 = lw;
        char a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ];
        etacal_svg_num(lo, ndec, a);
        etacal_svg_num(hi, ndec, b);
        text_at(fp, x0 - 8, y + 10, "end", NULL, a);
        for (int k = 0; k < 5; k++) {
            char col[8];
            etacal_svg_ramp(k / 4.0, col);
            fputs("<rect x=\"", fp);
            px(fp, x0 + k * 36.0);
            fputs("\" y=\"", fp);
            px(fp, y);
            fprintf(fp, "\" width=\"36\" height=\"14\" fill=\"%s\"/>\n", col);
        }
        text_at(fp, x0 + 5 * 36.0 + 8, y + 10, "start", NULL, b);
    }
    fputs("</svg>\n", fp);
}
