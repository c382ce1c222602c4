/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_quote_access.c: quote.h's accessors give what the table file says
 * (a hand-made qr table with two keys, two targets, a covariate and its
 * ranges), and 0, NaN or NULL out of range. */
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
#include "testutil.h"

static const char table_text[] =
    "zone,band,target,method,n,k,offset_s,slope,coef_distance_km,min_distance_km,max_distance_km\n"
    "*,*,0.8,qr,900,721,100.5,1.125,30.25,0.5,14\n"
    "*,*,0.9,qr,900,811,200.25,1.0625,31.5,0.5,14\n"
    "north,lunch,0.9,qr,250,226,230.75,0.96875,29.75,1.25,9.5\n";

static void test_accessors(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char path[600];
    tu_write_text(&d, "q.csv", table_text, path, sizeof path);
    etacal_quotes *q = NULL;
    etacal_error err;
    assert_int_equal(etacal_quotes_read_csv(path, ',', &q, &err), ETACAL_OK);
    assert_int_equal(etacal_quotes_nkeys(q), 2);
    assert_string_equal(etacal_quotes_key_name(q, 1), "band");
    assert_null(etacal_quotes_key_name(q, 2));
    assert_int_equal(etacal_quotes_method(q), ETACAL_METHOD_QR);
    assert_int_equal(etacal_quotes_ntargets(q), 2);
    assert_same_double(etacal_quotes_target(q, 1), 0.9);
    assert_true(isnan(etacal_quotes_target(q, 2)));
    assert_int_equal(etacal_quotes_ncoef(q), 1);
    assert_string_equal(etacal_quotes_coef_name(q, 0), "distance_km");
    assert_int_equal(etacal_quotes_nsegs(q), 2);
    assert_string_equal(etacal_quotes_seg_key(q, 0, 0), "*");
    assert_string_equal(etacal_quotes_seg_key(q, 1, 0), "north");
    assert_string_equal(etacal_quotes_seg_keys(q, 1)[1], "lunch");
    assert_int_equal(etacal_quotes_nrows(q), 3);
    etacal_quote_row row;
    assert_int_equal(etacal_quotes_row(q, 2, &row), ETACAL_OK);
    assert_int_equal(row.seg, 1);
    assert_int_equal(row.target, 1);
    assert_int_equal(row.n, 250);
    assert_int_equal(row.k, 226);
    assert_same_double(row.offset_s, 230.75);
    assert_same_double(row.slope, 0.96875);
    assert_int_equal(row.cell, ETACAL_CELL_UNKNOWN); /* no 'cell' column */
    assert_same_double(etacal_quotes_row_coef(q, 2, 0), 29.75);
    double lo = 0, hi = 0;
    assert_int_equal(etacal_quotes_row_range(q, 2, 0, &lo, &hi), 1);
    assert_same_double(lo, 1.25);
    assert_same_double(hi, 9.5);
    assert_int_equal(etacal_quotes_row(q, 3, &row), ETACAL_EINVAL);
    assert_true(isnan(etacal_quotes_row_coef(q, 0, 1)));
    assert_int_equal(etacal_quotes_row_range(q, 0, 1, &lo, &hi), 0);
    assert_int_equal(etacal_quotes_seg_n(q, 7), 0);
    assert_int_equal(etacal_quotes_seg_status(q, 0, 5), -1);
    etacal_quotes_destroy(q);
    tu_dir_remove(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_accessors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
