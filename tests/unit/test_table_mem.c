/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_table_mem.c: etacal_table_from_arrays, a table built from arrays in
 * memory.  The CSV reader is the reference: the same rows handed over as
 * arrays and written as a CSV file must give the same columns, the same key
 * texts and ids, the same counts of missing rows, and a quote table fitted
 * from either must be written byte for byte the same.  Then every error with
 * its place ("SOURCE: row I"), pre-coded keys, and borrowing. */
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

static const etacal_colspec cols3[] = {
    {"actual_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE, "duration"},
    {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE, "prediction"},
    {"zone", ETACAL_COL_KEY, 0, NULL},
};

#define NROWS 600

typedef struct rows {
    double actual[NROWS], pred[NROWS];
    const char *zone[NROWS];
    int32_t code[NROWS];
} rows;

static const char *const zones[] = {"quayside", "old town", "docklands", "\xc3\xa9glise", ""};

/* Seeded rows with a few missing actuals and predictions. */
static void make_rows(rows *r)
{
    tu_rng g = {UINT64_C(0x5eed7ab1e)};
    for (size_t i = 0; i < NROWS; i++) {
        r->pred[i] = 600 + 1200 * tu_unif(&g);
        r->actual[i] = r->pred[i] + 300 * (tu_unif(&g) - 0.3);
        int z = (int)tu_below(&g, 5);
        r->zone[i] = zones[z];
        r->code[i] = z == 4 ? -1 : z; /* a negative code stands for "" */
        if (i % 97 == 13)
            r->actual[i] = NAN;
        if (i % 131 == 7)
            r->pred[i] = NAN;
    }
}

/* The same rows as a CSV file ("" for a NaN, the zone quoted). */
static const char *write_csv(const tu_dir *d, const rows *r, char *path, size_t size)
{
    size_t cap = 64 * NROWS + 64;
    char *text = malloc(cap);
    assert_non_null(text);
    size_t n = (size_t)snprintf(text, cap, "actual_s,pred_s,zone\n");
    for (size_t i = 0; i < NROWS; i++) {
        char a[40] = "", p[40] = "";
        if (!isnan(r->actual[i]))
            snprintf(a, sizeof a, "%.17g", r->actual[i]);
        if (!isnan(r->pred[i]))
            snprintf(p, sizeof p, "%.17g", r->pred[i]);
        n += (size_t)snprintf(text + n, cap - n, "%s,%s,\"%s\"\n", a, p, r->zone[i]);
    }
    tu_write_bytes(d, "rows.csv", text, n, path, size);
    free(text);
    return path;
}

static char *quotes_text(const etacal_table *t, const tu_dir *d, const char *name)
{
    static const double targets[] = {0.8, 0.9};
    etacal_fit_opts o = {0};
    o.method = ETACAL_METHOD_ADD;
    o.targets = targets;
    o.ntargets = 2;
    o.min_rows = 50;
    size_t keys[] = {2};
    etacal_quotes *q = NULL;
    etacal_error err;
    assert_int_equal(etacal_quotes_fit(t, 0, 1, keys, 1, &o, &q, &err), ETACAL_OK);
    char path[600];
    tu_path(path, sizeof path, d, name);
    FILE *fp = fopen(path, "wb");
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(q, fp, &err), ETACAL_OK);
    assert_int_equal(fclose(fp), 0);
    etacal_quotes_destroy(q);
    size_t len;
    char *s = tu_read_file(path, &len);
    assert_non_null(s);
    return s;
}

/* Arrays and the CSV reader give the same table and the same quotes. */
static void test_same_as_csv(void **state)
{
    (void)state;
    static rows r;
    make_rows(&r);
    tu_dir d;
    tu_dir_make(&d);
    char path[600];
    write_csv(&d, &r, path, sizeof path);
    etacal_error err;
    etacal_table *fromcsv = NULL, *frommem = NULL, *fromcodes = NULL;
    assert_int_equal(etacal_table_read_csv(path, cols3, 3, NULL, &fromcsv, &err), ETACAL_OK);

    etacal_column_data data[3] = {{.num = r.actual}, {.num = r.pred}, {.str = r.zone}};
    assert_int_equal(etacal_table_from_arrays(cols3, data, 3, NROWS, "frame", 0, &frommem, &err), ETACAL_OK);
    etacal_column_data coded[3] = {{.num = r.actual}, {.num = r.pred},
                                   {.codes = r.code, .labels = zones, .nlabels = 4}};
    assert_int_equal(etacal_table_from_arrays(cols3, coded, 3, NROWS, "frame", 0, &fromcodes, &err),
                     ETACAL_OK);

    const etacal_table *mem[] = {frommem, fromcodes};
    for (size_t m = 0; m < 2; m++) {
        const etacal_table *t = mem[m];
        assert_int_equal(etacal_table_rows(t), etacal_table_rows(fromcsv));
        assert_int_equal(etacal_table_stats(t)->missing, etacal_table_stats(fromcsv)->missing);
        assert_int_equal(etacal_table_stats(t)->data_rows, NROWS);
        assert_true(etacal_table_stats(t)->missing > 0);
        for (size_t c = 0; c < 2; c++)
            for (size_t i = 0; i < etacal_table_rows(t); i++)
                assert_same_double(etacal_table_num(t, c)[i], etacal_table_num(fromcsv, c)[i]);
        assert_int_equal(etacal_table_key_count(t, 2), etacal_table_key_count(fromcsv, 2));
        for (size_t i = 0; i < etacal_table_rows(t); i++) {
            /* ids in order of first appearance, as the reader numbers them */
            assert_int_equal(etacal_table_key_id(t, 2, i), etacal_table_key_id(fromcsv, 2, i));
            uint32_t id = etacal_table_key_id(t, 2, i);
            assert_string_equal(etacal_table_key_text(t, 2, id), etacal_table_key_text(fromcsv, 2, id));
        }
    }
    char *a = quotes_text(fromcsv, &d, "a.csv");
    char *b = quotes_text(frommem, &d, "b.csv");
    char *c = quotes_text(fromcodes, &d, "c.csv");
    assert_string_equal(a, b);
    assert_string_equal(a, c);
    free(a);
    free(b);
    free(c);
    etacal_table_destroy(fromcsv);
    etacal_table_destroy(frommem);
    etacal_table_destroy(fromcodes);
    tu_dir_remove(&d);
}

/* With ETACAL_TABLE_BORROW and no row left out, the caller's array is used;
 * with a row left out, a copy. */
static void test_borrow(void **state)
{
    (void)state;
    double actual[4] = {612.5, 704.25, 1130.75, 998.125};
    double pred[4] = {600.5, 650.75, 1000.25, 1001.5};
    etacal_column_data data[2] = {{.num = actual}, {.num = pred}};
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_from_arrays(cols3, data, 2, 4, NULL, ETACAL_TABLE_BORROW, &t, &err), ETACAL_OK);
    assert_ptr_equal(etacal_table_num(t, 0), actual);
    assert_string_equal(etacal_table_source(t), "arrays");
    etacal_table_destroy(t);
    assert_int_equal(etacal_table_from_arrays(cols3, data, 2, 4, NULL, 0, &t, &err), ETACAL_OK);
    assert_ptr_not_equal(etacal_table_num(t, 0), actual);
    etacal_table_destroy(t);
    pred[2] = NAN;
    assert_int_equal(etacal_table_from_arrays(cols3, data, 2, 4, NULL, ETACAL_TABLE_BORROW, &t, &err), ETACAL_OK);
    assert_ptr_not_equal(etacal_table_num(t, 0), actual);
    assert_int_equal(etacal_table_rows(t), 3);
    assert_same_double(etacal_table_num(t, 0)[2], 998.125);
    etacal_table_destroy(t);
    /* no rows at all is a table of no rows */
    const char *zone[1] = {"quayside"};
    etacal_column_data data3[3] = {{.num = actual}, {.num = pred}, {.str = zone}};
    assert_int_equal(etacal_table_from_arrays(cols3, data3, 3, 0, "empty", 0, &t, &err), ETACAL_OK);
    assert_int_equal(etacal_table_rows(t), 0);
    etacal_table_destroy(t);
}

/* Every bad value is named with its column and row index; nothing is
 * returned. */
static void test_errors(void **state)
{
    (void)state;
    double actual[3] = {612.5, -4.25, 1130.75};
    double pred[3] = {600.5, 650.75, 1000.25};
    const char *zone[3] = {"quayside", "*", "docks"};
    etacal_column_data data[3] = {{.num = actual}, {.num = pred}, {.str = zone}};
    etacal_table *t = (etacal_table *)(uintptr_t)1;
    etacal_error err;
    assert_int_equal(etacal_table_from_arrays(cols3, data, 3, 3, "df", 0, &t, &err), ETACAL_EPARSE);
    assert_error(&err, ETACAL_EPARSE, "df: row 1", "column 'actual_s': duration is negative");
    assert_null(t);
    actual[1] = 704.25;
    assert_int_equal(etacal_table_from_arrays(cols3, data, 3, 3, "df", 0, &t, &err), ETACAL_EPARSE);
    assert_error(&err, ETACAL_EPARSE, "df: row 1",
                 "'*' is reserved for \"all values\" and cannot be a value of 'zone'");
    zone[1] = "bad\x1fvalue";
    assert_int_equal(etacal_table_from_arrays(cols3, data, 3, 3, "df", 0, &t, &err), ETACAL_EPARSE);
    assert_error(&err, ETACAL_EPARSE, "df: row 1", "a value of key column 'zone' holds the control character 0x1f");
    zone[1] = "\xff";
    assert_int_equal(etacal_table_from_arrays(cols3, data, 3, 3, "df", 0, &t, &err), ETACAL_EPARSE);
    assert_error(&err, ETACAL_EPARSE, "df: row 1", "a value of key column 'zone' is not valid UTF-8");
    zone[1] = "old town";
    pred[2] = INFINITY;
    assert_int_equal(etacal_table_from_arrays(cols3, data, 3, 3, "df", 0, &t, &err), ETACAL_EPARSE);
    assert_error(&err, ETACAL_EPARSE, "df: row 2", "column 'pred_s': prediction is not finite");
    pred[2] = 1000.25;

    static const char *const labels[] = {"quayside", "docks"};
    int32_t codes[3] = {0, 2, 1};
    etacal_column_data coded[3] = {{.num = actual}, {.num = pred}, {.codes = codes, .labels = labels, .nlabels = 2}};
    assert_int_equal(etacal_table_from_arrays(cols3, coded, 3, 3, "df", 0, &t, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "df: row 1", "key column 'zone': code 2 has no label");

    etacal_colspec twice[2] = {cols3[0], cols3[0]};
    assert_int_equal(etacal_table_from_arrays(twice, data, 2, 3, "df", 0, &t, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "df", "column 'actual_s' is given twice");
    etacal_column_data none[3] = {{.num = actual}, {.num = NULL}, {.str = zone}};
    assert_int_equal(etacal_table_from_arrays(cols3, none, 3, 3, "df", 0, &t, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "df", "numeric column 'pred_s' has no values");
    assert_null(t);
}

/* More than 65536 distinct keys switch the ids to 32 bits, as the reader
 * does. */
static void test_wide_keys(void **state)
{
    (void)state;
    size_t n = 70000;
    double *v = malloc(n * sizeof *v);
    char **s = malloc(n * sizeof *s);
    char *buf = malloc(n * 12);
    assert_non_null(v);
    assert_non_null(s);
    assert_non_null(buf);
    for (size_t i = 0; i < n; i++) {
        v[i] = 100.5 + (double)i;
        s[i] = buf + 12 * i;
        snprintf(s[i], 12, "k%zu", i);
    }
    etacal_column_data data[3] = {{.num = v}, {.num = v}, {.str = (const char *const *)s}};
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_from_arrays(cols3, data, 3, n, "wide", 0, &t, &err), ETACAL_OK);
    int width = 0;
    assert_non_null(etacal_table_key_ids(t, 2, &width));
    assert_int_equal(width, 4);
    assert_int_equal(etacal_table_key_count(t, 2), n);
    assert_string_equal(etacal_table_key_text(t, 2, etacal_table_key_id(t, 2, 69999)), "k69999");
    etacal_table_destroy(t);
    free(v);
    free(s);
    free(buf);
}

/* The run-time version is the one of the headers built against. */
static void test_version(void **state)
{
    (void)state;
    assert_string_equal(etacal_version(), ETACAL_VERSION);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_same_as_csv),
        cmocka_unit_test(test_borrow),
        cmocka_unit_test(test_errors),
        cmocka_unit_test(test_wide_keys),
        cmocka_unit_test(test_version),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
