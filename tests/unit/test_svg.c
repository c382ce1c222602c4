/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_svg.c: the chart writer: escaping of hostile text (<b>&" and
 * friends, invalid UTF-8, control characters), cutting labels on code
 * points, locale-free fixed-point numbers, the choice of nice ticks
 * (steps of 1, 2 or 5 times a power of ten: common practice, no source),
 * the heat ramp getting darker with the value (so greyscale keeps the
 * order), deterministic output, and the error paths.  Also the argument
 * checks of etacal_binom_range (its values are checked against scipy in
 * tests/ref/test_scipy_binom_range.py). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "svg.h"
#include "internal.h"

/* What f writes to a memory stream, as a new string (free it). */
typedef struct mem {
    char *buf;
    size_t len;
} mem;

static char *capture(void (*f)(FILE *, const void *), const void *arg)
{
    mem *m = calloc(1, sizeof *m);
    assert_non_null(m);
    FILE *fp = open_memstream(&m->buf, &m->len);
    assert_non_null(fp);
    f(fp, arg);
    assert_int_equal(fclose(fp), 0);
    char *s = m->buf;
    free(m);
    return s;
}

static void put_escaped(FILE *fp, const void *s) { etacal_svg_escape(fp, s); }

static void test_escape(void **state)
{
    (void)state;
    char *s = capture(put_escaped, "<b>&\"");
    assert_string_equal(s, "&lt;b&gt;&amp;&quot;");
    free(s);
    s = capture(put_escaped, "it's </svg><script>x()</script>");
    assert_string_equal(s, "it&#39;s &lt;/svg&gt;&lt;script&gt;x()&lt;/script&gt;");
    free(s);
    /* UTF-8 passes; a lone continuation byte, an overlong '/', a surrogate
     * and a control character become U+FFFD */
    s = capture(put_escaped, "K\xC3\xB8" "ge \x80|\xC0\xAF|\xED\xA0\x80|\x01|\t");
    assert_string_equal(s, "K\xC3\xB8" "ge \xEF\xBF\xBD|\xEF\xBF\xBD\xEF\xBF\xBD|\xEF\xBF\xBD\xEF\xBF\xBD\xEF\xBF\xBD|"
                           "\xEF\xBF\xBD|\t");
    free(s);
}

static void test_truncate(void **state)
{
    (void)state;
    char b[64];
    assert_string_equal(etacal_svg_truncate("harbour", 10, b, sizeof b), "harbour");
    assert_string_equal(etacal_svg_truncate("north-hill-east", 6, b, sizeof b), "north\xE2\x80\xA6");
    /* three code points of two bytes each, cut at two: one kept, then the ellipsis */
    assert_string_equal(etacal_svg_truncate("\xC3\xA6\xC3\xB8\xC3\xA5", 2, b, sizeof b), "\xC3\xA6\xE2\x80\xA6");
    assert_int_equal(etacal_svg_width("\xC3\xA6\xC3\xB8\xC3\xA5"), 3);
}

static void test_num(void **state)
{
    (void)state;
    char b[ETACAL_SVG_NUMSZ];
    etacal_svg_num(38.835, 1, b);
    assert_string_equal(b, "38.8");
    etacal_svg_num(-0.04, 1, b);
    assert_string_equal(b, "0.0");
    etacal_svg_num(-0.04, 0, b);
    assert_string_equal(b, "0");
    etacal_svg_num(-12.5, 0, b);
    assert_string_equal(b, "-13");
    etacal_svg_num(0.07, 3, b);
    assert_string_equal(b, "0.070");
    etacal_svg_num(2385.0, 0, b);
    assert_string_equal(b, "2385");
    etacal_svg_num(NAN, 2, b);
    assert_string_equal(b, "nan");
    etacal_svg_num(-INFINITY, 2, b);
    assert_string_equal(b, "-inf");
    etacal_svg_num(1e20, 2, b);
    assert_string_equal(b, "1e+20");
}

static void test_ticks(void **state)
{
    (void)state;
    etacal_svg_ticks t;
    etacal_error err;
    assert_int_equal(etacal_svg_nice_ticks(0, 100, 11, &t, &err), ETACAL_OK);
    assert_true(t.step == 10 && t.first == 0 && t.n == 11 && t.ndec == 0);
    assert_int_equal(etacal_svg_nice_ticks(0.3, 9.7, 6, &t, &err), ETACAL_OK);
    assert_true(t.step == 2 && t.first == 0 && t.n == 6);
    assert_int_equal(etacal_svg_nice_ticks(-20.3, 38.1, 50, &t, &err), ETACAL_OK);
    assert_true(t.step == 2 && t.first == -22 && t.n == 32);
    assert_int_equal(etacal_svg_nice_ticks(87.2, 93.4, 8, &t, &err), ETACAL_OK);
    assert_true(t.step == 1 && t.first == 87 && t.n == 8);
    assert_int_equal(etacal_svg_nice_ticks(0.8512, 0.9387, 6, &t, &err), ETACAL_OK);
    assert_true(fabs(t.step - 0.02) < 1e-15 && t.ndec == 2 && t.n == 6);
    /* a single value gets a range around it */
    assert_int_equal(etacal_svg_nice_ticks(5, 5, 5, &t, &err), ETACAL_OK);
    assert_true(t.first <= 5 && t.first + (double)(t.n - 1) * t.step >= 5 && t.n >= 2);
    assert_int_equal(etacal_svg_nice_ticks(3, 1, 5, &t, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_svg_nice_ticks(NAN, 1, 5, &t, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_svg_nice_ticks(0, INFINITY, 5, &t, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_svg_nice_ticks(0, 1, 1, &t, &err), ETACAL_EINVAL);
}

static void test_ramp(void **state)
{
    (void)state;
    /* luminance (Rec. 709 weights) falls strictly from light to dark */
    double prev = 1e9;
    for (int i = 0; i <= 20; i++) {
        char c[8];
        etacal_svg_ramp(i / 20.0, c);
        unsigned r, g, b;
        assert_int_equal(sscanf(c, "#%2x%2x%2x", &r, &g, &b), 3);
        double y = 0.2126 * r + 0.7152 * g + 0.0722 * b;
        assert_true(y < prev);
        prev = y;
    }
}

static void draw(FILE *fp, const void *arg)
{
    const char *name = arg;
    etacal_svg_chart c;
    etacal_error err;
    double x[4] = {50, 60.5, 80, 99}, y[4] = {27.3, 29.9, NAN, 56.2}, lo[4] = {26, 28, 30, 50},
           hi[4] = {28, 31, 35, 60};
    assert_int_equal(etacal_svg_begin(&c, fp, 600, 300, 50, 99, 25, 60, name, NULL, &err), ETACAL_OK);
    etacal_svg_axes(&c, "on-time target", name);
    etacal_svg_band(&c, x, lo, hi, 4, ETACAL_SVG_BAND);
    etacal_svg_line(&c, x, y, 4, ETACAL_SVG_MAIN);
    etacal_svg_markers(&c, x, y, 4, ETACAL_SVG_ALT, 3);
    etacal_svg_errbars(&c, x, lo, hi, 4, ETACAL_SVG_MUTED, 0);
    const char *tips[4] = {name, NULL, name, "plain"};
    etacal_svg_markers_titled(&c, x, y, 4, ETACAL_SVG_MAIN, 3, tips);
    etacal_svg_vline(&c, 90, ETACAL_SVG_ALT, name);
    etacal_svg_hline(&c, 28, ETACAL_SVG_MUTED, "bare");
    const char *labels[2] = {name, "band"};
    int styles[2] = {ETACAL_SVG_MAIN, ETACAL_SVG_BAND}, kinds[2] = {0, 1};
    etacal_svg_legend(&c, labels, styles, kinds, 2);
    etacal_svg_end(&c);
    const char *rows[2] = {name, "harbour"}, *cols[2] = {"dinner", "late"};
    double v[4] = {26.6, 9.6, NAN, 11.8};
    unsigned char mark[4] = {0, 1, 0, 0};
    etacal_svg_heat(fp, name, rows, 2, cols, 2, v, mark, 1);
}

static void test_chart(void **state)
{
    (void)state;
    char *a = capture(draw, "<b>&\"zone");
    char *b = capture(draw, "<b>&\"zone");
    assert_string_equal(a, b); /* the same calls, the same bytes */
    assert_null(strstr(a, "<b>"));
    assert_non_null(strstr(a, "&lt;b&gt;&amp;&quot;zone"));
    /* the NaN breaks the line into one polyline of two points; the last point is alone */
    assert_non_null(strstr(a, "<polyline points=\""));
    const char *first = strstr(a, "<polyline");
    assert_null(strstr(first + 1, "<polyline"));
    /* nothing that fetches or runs */
    assert_null(strstr(a, "http"));
    assert_null(strstr(a, "<script"));
    /* ticks at 25, 30, ..., 60 minutes on the y axis */
    assert_non_null(strstr(a, ">25</text>"));
    assert_non_null(strstr(a, ">60</text>"));
    assert_non_null(strstr(a, "9.6*")); /* a marked heat cell */
    /* tooltips: the first point's escaped, none on the second, none for the NaN point */
    assert_non_null(strstr(a, "<g><title>&lt;b&gt;&amp;&quot;zone</title>"));
    assert_non_null(strstr(a, "<g><title>plain</title>"));
    free(a);
    free(b);
}

/* 60 date labels on a 600 px axis: only those that keep apart are drawn. */
static void dense(FILE *fp, const void *arg)
{
    (void)arg;
    static double pos[60];
    static const char *lab[60];
    for (int i = 0; i < 60; i++) {
        pos[i] = i;
        lab[i] = "2026-10-19";
    }
    etacal_svg_layout lay = {0};
    lay.xpos = pos;
    lay.xlab = lab;
    lay.nxpos = 60;
    etacal_svg_chart c;
    etacal_error err;
    assert_int_equal(etacal_svg_begin(&c, fp, 600, 300, 0, 59, 0, 1, "dense", &lay, &err), ETACAL_OK);
    etacal_svg_axes(&c, NULL, NULL);
    etacal_svg_end(&c);
}

static void test_labels_apart(void **state)
{
    (void)state;
    char *s = capture(dense, NULL);
    /* the x positions of the drawn labels, from their text elements */
    double prev = -1e9, minsep = 1e9;
    int drawn = 0;
    for (const char *p = s; (p = strstr(p, "<text x=\"")) != NULL; p++) {
        double x = strtod(p + 9, NULL);
        if (!strstr(p, ">2026-10-19<") || strstr(p, ">2026-10-19<") - p > 80)
            continue;
        if (drawn++)
            minsep = fmin(minsep, x - prev);
        prev = x;
    }
    /* ten characters of about 7 px: centres at least 70 px apart */
    assert_true(drawn >= 4 && drawn < 60);
    assert_true(minsep >= 70);
    free(s);
}

static void test_chart_errors(void **state)
{
    (void)state;
    etacal_svg_chart c;
    etacal_error err;
    FILE *fp = fopen("/dev/null", "w");
    assert_non_null(fp);
    assert_int_equal(etacal_svg_begin(&c, fp, 60, 50, 0, 1, 0, 1, "tiny", NULL, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_svg_begin(&c, fp, 600, 300, 1, 0, 0, 1, "backwards", NULL, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_svg_begin(&c, fp, 600, 300, 0, 1, NAN, 1, "nan", NULL, &err), ETACAL_EINVAL);
    double pos[1] = {1};
    const char *lab[1] = {"x"};
    etacal_svg_layout lay = {0};
    lay.ypos = pos;
    lay.ylab = lab;
    lay.nypos = 1;
    assert_int_equal(etacal_svg_begin(&c, fp, 600, 300, 0, 1, 1, 1, "empty category range", &lay, &err),
                     ETACAL_EINVAL);
    fclose(fp);
}

static void test_binom_range_args(void **state)
{
    (void)state;
    size_t lo, hi;
    etacal_error err;
    assert_int_equal(etacal_binom_range(0.9, 0, 0.95, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_range(1.2, 10, 0.95, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_range(NAN, 10, 0.95, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_range(0.9, 10, 1, &lo, &hi, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_binom_range(0, 17, 0.95, &lo, &hi, &err), ETACAL_OK);
    assert_true(lo == 0 && hi == 0);
    assert_int_equal(etacal_binom_range(1, 17, 0.95, &lo, &hi, &err), ETACAL_OK);
    assert_true(lo == 17 && hi == 17);
    assert_int_equal(etacal_binom_range(0.9, 12000, 0.95, &lo, &hi, &err), ETACAL_OK);
    assert_true(lo < 10800 && hi > 10800 && lo <= hi);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_escape),         cmocka_unit_test(test_truncate), cmocka_unit_test(test_num),
        cmocka_unit_test(test_ticks),          cmocka_unit_test(test_ramp),     cmocka_unit_test(test_chart),
        cmocka_unit_test(test_chart_errors),   cmocka_unit_test(test_binom_range_args),
        cmocka_unit_test(test_labels_apart),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
