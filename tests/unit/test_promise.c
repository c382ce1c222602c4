/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_promise.c: quote_row_promise (etacal_quotes_promise), the one formula every user of a
 * quote table shares: offset_s + slope x pred + sum coef_j x_j with each
 * covariate clamped into the row's range [x_min, x_max], never below 0.
 * Expected values are worked by hand in the comments (decimal arithmetic);
 * doubles are compared with a relative tolerance of 1e-12.  Also: a table
 * written with ranges reads them back, and one without reads as "no
 * clamping". */
#define _GNU_SOURCE
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "stream.h"
#include "testutil.h"

#define near(got, want) assert_close(got, want, 1e-12)

/* One qr row with two covariates: distance in [0.7, 9.2], prep in
 * [147, 2459]. */
static double coef[2] = {95.125, 1.0625};
static double lo[2] = {0.7, 147}, hi[2] = {9.2, 2459};

static void row_with(etacal_quotes *q, etacal_quote *r, int ranges)
{
    memset(q, 0, sizeof *q);
    memset(r, 0, sizeof *r);
    q->method = ETACAL_METHOD_QR;
    q->ncoef = 2;
    r->method = ETACAL_METHOD_QR;
    r->offset_s = -564.875;
    r->slope = 0.9375;
    r->coef = coef;
    r->x_min = ranges ? lo : NULL;
    r->x_max = ranges ? hi : NULL;
}

static void test_inside_range(void **state)
{
    (void)state;
    etacal_quotes q;
    etacal_quote r;
    row_with(&q, &r, 1);
    int c = -1, f = -1;
    /* -564.875 + 0.9375 x 1500 + 95.125 x 3.2 + 1.0625 x 600
     * = -564.875 + 1406.25 + 304.4 + 637.5 = 1783.275 */
    double x[2] = {3.2, 600};
    near(quote_row_promise(&q, &r, 1500, x, &c, &f), 1783.275);
    assert_int_equal(c, 0);
    assert_int_equal(f, 0);
    /* at the edges themselves: nothing moves */
    double e[2] = {9.2, 147};
    /* -564.875 + 1406.25 + 875.15 + 156.1875 = 1872.7125 */
    near(quote_row_promise(&q, &r, 1500, e, &c, &f), 1872.7125);
    assert_int_equal(c, 0);
}

static void test_clamped_above_and_below(void **state)
{
    (void)state;
    etacal_quotes q;
    etacal_quote r;
    row_with(&q, &r, 1);
    int c = 0, f = -1;
    /* distance 92 (ten times the maximum) is taken as 9.2, prep 600 as is:
     * -564.875 + 1406.25 + 875.15 + 637.5 = 2354.025 */
    double far[2] = {92, 600};
    near(quote_row_promise(&q, &r, 1500, far, &c, &f), 2354.025);
    assert_int_equal(c, 1);
    assert_int_equal(f, 0);
    /* prep 5 below 147: -564.875 + 1406.25 + 304.4 + 156.1875 = 1301.9625 */
    double low[2] = {3.2, 5};
    c = 0;
    near(quote_row_promise(&q, &r, 1500, low, &c, &f), 1301.9625);
    assert_int_equal(c, 1);
    /* the prediction itself is never clamped: pred 15000 is far above any
     * data, yet counts in full: -564.875 + 14062.5 + 304.4 + 637.5 = 14439.525 */
    double mid[2] = {3.2, 600};
    c = -1;
    near(quote_row_promise(&q, &r, 15000, mid, &c, NULL), 14439.525);
    assert_int_equal(c, 0);
    /* without ranges (an older table) the line extrapolates:
     * -564.875 + 1406.25 + 8751.5 + 637.5 = 10230.375 */
    row_with(&q, &r, 0);
    c = -1;
    near(quote_row_promise(&q, &r, 1500, far, &c, NULL), 10230.375);
    assert_int_equal(c, 0);
}

static void test_floor_at_zero(void **state)
{
    (void)state;
    etacal_quotes q;
    etacal_quote r;
    row_with(&q, &r, 1);
    int c = -1, f = 0;
    /* short trip: -564.875 + 0.9375 x 40 + 95.125 x 0.7 (0.1 clamped up) +
     * 1.0625 x 147 (20 clamped up) = -564.875 + 37.5 + 66.5875 + 156.1875
     * = -304.6 < 0: promise 0 */
    double x[2] = {0.1, 20};
    assert_true(quote_row_promise(&q, &r, 40, x, &c, &f) == 0);
    assert_int_equal(c, 1);
    assert_int_equal(f, 1);
    /* the add method too: 120 - 300.5 < 0 */
    etacal_quotes qa;
    etacal_quote ra;
    memset(&qa, 0, sizeof qa);
    memset(&ra, 0, sizeof ra);
    ra.method = ETACAL_METHOD_ADD;
    ra.offset_s = -300.5;
    ra.slope = 1;
    f = 0;
    assert_true(quote_row_promise(&qa, &ra, 120, NULL, NULL, &f) == 0);
    assert_int_equal(f, 1);
    near(quote_row_promise(&qa, &ra, 1200.25, NULL, NULL, &f), 899.75);
    assert_int_equal(f, 0);
}

/* A fitted-style table with ranges reads back with them; a table without
 * min_/max_ columns reads with none (no clamping). */
static void test_read_ranges(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char path[600];
    tu_write_text(&d, "q.csv", "zone,target,method,n,k,offset_s,slope,coef_dist,coef_prep,max_prep,min_dist,max_dist,min_prep\n"
                   "*,0.9,qr,500,451,-100.5,0.9,80.25,1.125,2843,0.4,14,111\n"
                   "harbour,0.9,qr,400,361,-90.25,0.875,85.5,1.0625,2459,0.7,9.2,147\n",
                  path, sizeof path);
    etacal_quotes *q = NULL;
    etacal_error err;
    assert_int_equal(etacal_quotes_read_csv(path, ',', &q, &err), ETACAL_OK);
    assert_non_null(q->ranges);
    const etacal_quote *h = &q->rows[1];
    assert_string_equal(q->segs[h->seg].keys[0], "harbour");
    assert_true(h->x_min[0] == 0.7 && h->x_max[0] == 9.2 && h->x_min[1] == 147 && h->x_max[1] == 2459);
    /* distance 92 -> 9.2; prep 600: -90.25 + 0.875 x 1000 + 85.5 x 9.2 +
     * 1.0625 x 600 = -90.25 + 875 + 786.6 + 637.5 = 2208.85 */
    double x[2] = {92, 600};
    int c = 0;
    near(quote_row_promise(q, h, 1000, x, &c, NULL), 2208.85);
    assert_int_equal(c, 1);
    /* written back: the range columns after the coefficients, as min, max */
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(q, fp, &err), ETACAL_OK);
    fclose(fp);
    assert_non_null(strstr(buf, "coef_dist,coef_prep,min_dist,max_dist,min_prep,max_prep\n"));
    assert_non_null(strstr(buf, "harbour,0.9,qr,400,361,-90.25,0.875,85.5,1.0625,0.7,9.2,147,2459\n"));
    free(buf);
    etacal_quotes_destroy(q);

    tu_write_text(&d, "q.csv", "target,method,n,k,offset_s,slope,coef_dist\n0.9,qr,500,451,-100.5,0.9,80.25\n", path,
                  sizeof path);
    assert_int_equal(etacal_quotes_read_csv(path, ',', &q, &err), ETACAL_OK);
    assert_null(q->ranges);
    assert_null(q->rows[0].x_min);
    etacal_quotes_destroy(q);
    tu_dir_remove(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_inside_range),
        cmocka_unit_test(test_clamped_above_and_below),
        cmocka_unit_test(test_floor_at_zero),
        cmocka_unit_test(test_read_ranges),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
