/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_fit.c: the fit specification (etacal_fitspec_check) and one fit run
 * (etacal_fit_csv, etacal_fit_table).  A run from a CSV file and a run on the
 * same rows from memory give the same quote table byte for byte; the held-out
 * share holds; every check of a specification answers with its reason; the
 * library itself refuses more than ETACAL_MAX_KEYS keys and keys named as a
 * quote-table column (which would write a table that cannot be read back). */
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

#define NROWS 2000

static char *table_text(const etacal_quotes *q, const tu_dir *d, const char *name)
{
    char path[600];
    tu_path(path, sizeof path, d, name);
    FILE *fp = fopen(path, "wb");
    etacal_error err;
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(q, fp, &err), ETACAL_OK);
    assert_int_equal(fclose(fp), 0);
    size_t len;
    char *s = tu_read_file(path, &len);
    assert_non_null(s);
    return s;
}

/* The same seeded rows as a CSV file and as arrays; a run on each. */
static void test_csv_and_memory(void **state)
{
    (void)state;
    static double actual[NROWS], pred[NROWS], dist[NROWS], when[NROWS];
    static const char *zone[NROWS];
    static const char *const zones[] = {"harbour", "old town", "docklands"};
    tu_rng g = {UINT64_C(0xf17)};
    tu_dir d;
    tu_dir_make(&d);
    char path[600];
    tu_path(path, sizeof path, &d, "rows.csv");
    FILE *fp = fopen(path, "wb");
    assert_non_null(fp);
    fprintf(fp, "actual_s,pred_s,zone,dist_km,placed\n");
    for (size_t i = 0; i < NROWS; i++) {
        dist[i] = 0.5 + 7.25 * tu_unif(&g);
        pred[i] = 420 + 150 * dist[i] + 60 * tu_unif(&g);
        actual[i] = pred[i] + 400 * (tu_unif(&g) - 0.35) * (1 + dist[i] / 4);
        if (actual[i] < 0)
            actual[i] = 17.5;
        zone[i] = zones[tu_below(&g, 3)];
        when[i] = 1767225600 + 37 * (double)i;
        fprintf(fp, "%.17g,%.17g,%s,%.17g,%.17g\n", actual[i], pred[i], zone[i], dist[i], when[i]);
    }
    assert_int_equal(fclose(fp), 0);

    static const char *const keys[] = {"zone"};
    static const char *const xs[] = {"dist_km"};
    static const double targets[] = {0.85, 0.95};
    const int methods[] = {ETACAL_METHOD_ADD, ETACAL_METHOD_RATIO, ETACAL_METHOD_QR};
    for (size_t m = 0; m < 3; m++) {
        etacal_fitspec s;
        etacal_fitspec_init(&s);
        s.actual = "actual_s";
        s.pred = "pred_s";
        s.keys = keys;
        s.nkeys = 1;
        s.targets = targets;
        s.ntargets = 2;
        s.method = methods[m];
        s.min_rows = 300;
        s.holdout = 0.25;
        s.time = "placed";
        if (methods[m] == ETACAL_METHOD_QR) {
            s.xs = xs;
            s.nx = 1;
        } else {
            s.half_life = 7200 * 3.5;
        }
        etacal_error err;
        etacal_fit_run *a = NULL, *b = NULL;
        assert_int_equal(etacal_fit_csv(&s, path, NULL, &a, &err), ETACAL_OK);

        etacal_colspec cols[ETACAL_FIT_MAX_COLS];
        size_t ncol = etacal_fitspec_columns(&s, cols);
        etacal_column_data data[ETACAL_FIT_MAX_COLS];
        memset(data, 0, sizeof data);
        for (size_t c = 0; c < ncol; c++) {
            const char *n = cols[c].name;
            if (strcmp(n, "actual_s") == 0)
                data[c].num = actual;
            else if (strcmp(n, "pred_s") == 0)
                data[c].num = pred;
            else if (strcmp(n, "zone") == 0)
                data[c].str = zone;
            else if (strcmp(n, "dist_km") == 0)
                data[c].num = dist;
            else if (strcmp(n, "placed") == 0)
                data[c].num = when;
            else
                fail_msg("unexpected column %s", n);
        }
        etacal_table *t = NULL;
        assert_int_equal(etacal_table_from_arrays(cols, data, ncol, NROWS, "frame", ETACAL_TABLE_BORROW, &t, &err),
                         ETACAL_OK);
        assert_int_equal(etacal_fit_table(&s, t, &b, &err), ETACAL_OK);

        char *ta = table_text(etacal_fit_run_quotes(a), &d, "a.csv");
        char *tb = table_text(etacal_fit_run_quotes(b), &d, "b.csv");
        assert_string_equal(ta, tb);
        free(ta);
        free(tb);
        /* the latest quarter by time is held out: 500 rows, all after the others */
        assert_int_equal(etacal_fit_run_held(a), NROWS / 4);
        const unsigned char *mask = etacal_fit_run_held_mask(b);
        for (size_t i = 0; i < NROWS; i++)
            assert_int_equal(mask[i], i >= NROWS - NROWS / 4);
        const etacal_holdout *ha = etacal_fit_run_holdout(a), *hb = etacal_fit_run_holdout(b);
        assert_non_null(ha);
        assert_int_equal(ha->n[0], NROWS / 4);
        for (size_t k = 0; k < 2; k++)
            assert_int_equal(ha->hits[k], hb->hits[k]);
        assert_int_equal(etacal_fit_run_time_col(a), (long)(ncol - 1));
        assert_ptr_equal(etacal_fit_run_rows(b), t);
        etacal_fit_run_destroy(a);
        etacal_fit_run_destroy(b);
        etacal_table_destroy(t);
    }
    tu_dir_remove(&d);
}

/* One bad specification after another, each with its reason. */
static void test_spec_checks(void **state)
{
    (void)state;
    static const char *const k2[] = {"zone", "zone"};
    static const char *const kt[] = {"target"};
    static const char *const kc[] = {"coef_x"};
    static const char *const x1[] = {"pred_s"};
    static const double bad_t[] = {1.0};
    etacal_fitspec s;
    etacal_error err;
#define CHECK(stmt, want)                                                                                    \
    do {                                                                                                     \
        etacal_fitspec_init(&s);                                                                             \
        s.actual = "actual_s";                                                                               \
        s.pred = "pred_s";                                                                                   \
        stmt;                                                                                                \
        assert_int_equal(etacal_fitspec_check(&s, &err), ETACAL_EINVAL);                                     \
        assert_string_equal(err.msg, want);                                                                  \
    } while (0)
    CHECK(s.actual = NULL, "--actual and --pred are required");
    CHECK(s.pred = "actual_s", "--actual and --pred name the same column");
    CHECK((s.keys = k2, s.nkeys = 2), "--by names 'zone' twice");
    CHECK((s.keys = kt, s.nkeys = 1), "a key column cannot be called 'target' (a quote-table column)");
    CHECK((s.keys = kc, s.nkeys = 1), "a key column cannot be called 'coef_x' (coef_ columns hold coefficients)");
    CHECK((s.keys = k2, s.nkeys = ETACAL_MAX_KEYS + 1), "--by takes up to 16 comma-separated column names");
    CHECK((s.xs = x1, s.nx = 1), "--x goes with --method qr");
    CHECK((s.xs = x1, s.nx = 1, s.method = ETACAL_METHOD_QR), "--x 'pred_s' is already the actual or the prediction");
    CHECK((s.targets = bad_t, s.ntargets = 1), "--target takes on-time rates in (0,1), not 1");
    CHECK(s.holdout = 1.5, "--holdout takes a share in (0,1), such as 0.2");
    CHECK(s.time = "placed", "--time goes with --holdout or --half-life");
    CHECK(s.half_life = 3600, "--half-life needs --time (the age of each row)");
    CHECK((s.half_life = 3600, s.time = "placed", s.confidence = 0.9), "--half-life does not go with --confidence");
    CHECK(s.method = 7, "--method must be add, ratio or qr");
    /* a grid of targets (curve, report) up to ETACAL_FIT_MAX_TARGETS */
    static double grid[ETACAL_FIT_MAX_TARGETS + 1];
    for (size_t i = 0; i <= ETACAL_FIT_MAX_TARGETS; i++)
        grid[i] = 0.0005 + 0.000998 * (double)i;
    CHECK((s.targets = grid, s.ntargets = ETACAL_FIT_MAX_TARGETS + 1), "at most 1000 targets");
#undef CHECK
    etacal_fitspec_init(&s);
    s.actual = "actual_s";
    s.pred = "pred_s";
    assert_int_equal(etacal_fitspec_check(&s, &err), ETACAL_OK);
    s.targets = grid;
    s.ntargets = ETACAL_FIT_MAX_TARGETS;
    assert_int_equal(etacal_fitspec_check(&s, &err), ETACAL_OK);
    assert_int_equal(etacal_fitspec_check(NULL, &err), ETACAL_EINVAL);
}

/* The library refuses what the CLI's checks used to hide: 17 key columns
 * (a write past a fixed array before) and a key called 'target'. */
static void test_library_guards(void **state)
{
    (void)state;
    enum { NK = ETACAL_MAX_KEYS + 1, N = 40 };
    etacal_colspec cols[2 + NK];
    etacal_column_data data[2 + NK];
    static double actual[N], pred[N];
    static const char *val[N];
    char names[NK][8];
    for (size_t i = 0; i < N; i++) {
        actual[i] = 700.25 + 13.5 * (double)i;
        pred[i] = 650.5 + 11.75 * (double)i;
        val[i] = i % 2 ? "a" : "b";
    }
    cols[0] = (etacal_colspec){"actual_s", ETACAL_COL_NUM, 0, NULL};
    cols[1] = (etacal_colspec){"pred_s", ETACAL_COL_NUM, 0, NULL};
    data[0] = (etacal_column_data){.num = actual};
    data[1] = (etacal_column_data){.num = pred};
    size_t key_cols[NK];
    for (size_t j = 0; j < NK; j++) {
        snprintf(names[j], sizeof names[j], "k%zu", j);
        cols[2 + j] = (etacal_colspec){names[j], ETACAL_COL_KEY, 0, NULL};
        data[2 + j] = (etacal_column_data){.str = val};
        key_cols[j] = 2 + j;
    }
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_from_arrays(cols, data, 2 + NK, N, "keys", 0, &t, &err), ETACAL_OK);
    static const double tau = 0.5;
    etacal_fit_opts o = {0};
    o.targets = &tau;
    o.ntargets = 1;
    o.min_rows = 5;
    etacal_quotes *q = NULL;
    assert_int_equal(etacal_quotes_fit(t, 0, 1, key_cols, NK, &o, &q, &err), ETACAL_EINVAL);
    assert_string_equal(err.msg, "at most 16 key columns, not 17");
    assert_null(q);
    assert_int_equal(etacal_quotes_fit(t, 0, 1, key_cols, ETACAL_MAX_KEYS, &o, &q, &err), ETACAL_OK);
    etacal_quotes_destroy(q);
    q = NULL;
    etacal_table_destroy(t);

    cols[2].name = "target";
    assert_int_equal(etacal_table_from_arrays(cols, data, 3, N, "keys", 0, &t, &err), ETACAL_OK);
    assert_int_equal(etacal_quotes_fit(t, 0, 1, key_cols, 1, &o, &q, &err), ETACAL_EINVAL);
    assert_string_equal(err.msg, "a key column cannot be called 'target' (a quote-table column)");
    etacal_table_destroy(t);

    /* a quote table file with 17 key columns is refused with its line */
    tu_dir d;
    tu_dir_make(&d);
    char text[512] = "", path[600], where[700];
    size_t w = 0;
    for (size_t j = 0; j < NK; j++)
        w += (size_t)snprintf(text + w, sizeof text - w, "k%zu,", j);
    w += (size_t)snprintf(text + w, sizeof text - w, "target,method,n,k,offset_s,slope\n");
    for (size_t j = 0; j < NK; j++)
        w += (size_t)snprintf(text + w, sizeof text - w, "*,");
    snprintf(text + w, sizeof text - w, "0.9,add,500,451,300.5,1\n");
    tu_write_text(&d, "q.csv", text, path, sizeof path);
    assert_int_equal(etacal_quotes_read_csv(path, ',', &q, &err), ETACAL_EPARSE);
    assert_error(&err, ETACAL_EPARSE, tu_where(where, sizeof where, path, 1),
                 "more than 16 key columns before 'target'");
    tu_dir_remove(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_csv_and_memory),
        cmocka_unit_test(test_spec_checks),
        cmocka_unit_test(test_library_guards),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
