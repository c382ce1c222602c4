/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_quote.c: fitting quote tables (etacal_quotes_fit), writing them as
 * CSV and reading them back (quotes_write_csv / _read_csv), with the
 * reader's validation errors.
 *
 * The main fit is small enough to check by hand: every expected bound below
 * is the k-th smallest of the listed scores, k = ceil((n+1) tau), rounded up
 * to a whole millisecond (add) or to 1e-6 (ratio). */
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

typedef struct fixture {
    tu_dir dir;
    char path[600];
    etacal_table *t;
    etacal_quotes *q, *q2;
    etacal_error err;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    if (!f)
        return -1;
    tu_dir_make(&f->dir);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    etacal_table_destroy(f->t);
    etacal_quotes_destroy(f->q);
    etacal_quotes_destroy(f->q2);
    tu_dir_remove(&f->dir);
    free(f);
    return 0;
}

/* Table columns: 0 actual_s, 1 pred_s, 2 zone, 3 vehicle (nkeys of them). */
static void load(fixture *f, const char *text, size_t nkeys)
{
    static const etacal_colspec cols[] = {
        {"actual_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE,
         "duration"},
        {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE,
         "prediction"},
        {"zone", ETACAL_COL_KEY, 0, NULL},
        {"vehicle", ETACAL_COL_KEY, 0, NULL},
    };
    etacal_table_destroy(f->t);
    f->t = NULL;
    tu_write_text(&f->dir, "calib.csv", text, f->path, sizeof f->path);
    etacal_error e;
    if (etacal_table_read_csv(f->path, cols, 2 + nkeys, NULL, &f->t, &e) != ETACAL_OK)
        fail_msg("reading the calibration data: %s: %s", e.where, e.msg);
}

static int fit(fixture *f, size_t nkeys, int method, const double *targets, size_t ntargets,
               size_t min_rows)
{
    static const size_t keys[] = {2, 3};
    etacal_fit_opts o = {method, targets, ntargets, min_rows, NULL, 0, 0, 0, 0, NULL, NULL, 0};
    etacal_quotes_destroy(f->q);
    f->q = NULL;
    etacal_error_clear(&f->err);
    return etacal_quotes_fit(f->t, 0, 1, keys, nkeys, &o, &f->q, &f->err);
}

/* The hand-checked data set: 17 orders in three zones, interleaved so that
 * the zones first appear as north, south, east.  Scores actual - pred:
 *   north (9): -30.25 -5.5 7.75 12.5 19.9 48.125 63.0625 86.2 101.3755
 *   south (6): -9.875 22.25 33.3 55 77.4375 120.5
 *   east  (2): -4.75 90.5
 * all 17 sorted: -30.25 -9.875 -5.5 -4.75 7.75 12.5 19.9 22.25 33.3 48.125
 *   55 63.0625 77.4375 86.2 90.5 101.3755 120.5 */
static const char *calib_csv = "order_id,zone,pred_s,actual_s\n"
                               "1,north,600,612.5\n"
                               "2,south,500,533.3\n"
                               "3,north,900,869.75\n"
                               "4,east,1100,1190.5\n"
                               "5,south,650,640.125\n"
                               "6,north,1200,1248.125\n"
                               "7,north,450,457.75\n"
                               "8,south,1000,1120.5\n"
                               "9,north,1500,1601.3755\n"
                               "10,east,820,815.25\n"
                               "11,south,380,402.25\n"
                               "12,north,720,714.5\n"
                               "13,north,1080,1143.0625\n"
                               "14,south,1400,1455\n"
                               "15,north,300,386.2\n"
                               "16,south,760,837.4375\n"
                               "17,north,840,859.9\n";

/* The global row takes all 17 rows: the rows left over (east's 2 at .8,
 * east's and south's 8 at .9) give no finite bound (k = 3 > 2, 9 > 8). */
static const char *calib_quotes_csv = "zone,target,method,n,k,offset_s,slope,cell\n"
                                      "*,0.8,add,17,15,90.5,1,all\n"
                                      "*,0.9,add,17,17,120.5,1,all\n"
                                      "north,0.8,add,9,8,86.2,1,own\n"
                                      "north,0.9,add,9,9,101.376,1,own\n"
                                      "south,0.8,add,6,6,120.5,1,own\n";

static void check_row(const etacal_quotes *q, size_t r, const char *key, size_t target, size_t n,
                      size_t k, double offset, double slope)
{
    assert_true(r < q->nrows);
    const etacal_quote *row = &q->rows[r];
    assert_string_equal(q->segs[row->seg].keys[0], key);
    assert_int_equal(row->target, target);
    assert_int_equal(row->n, n);
    assert_int_equal(row->k, k);
    assert_close(row->offset_s, offset, 1e-13);
    assert_close(row->slope, slope, 1e-13);
}

static void test_fit_hand_checked(void **state)
{
    fixture *f = *state;
    load(f, calib_csv, 1);
    const double targets[] = {0.9, 0.8}; /* unsorted on purpose */
    assert_int_equal(fit(f, 1, ETACAL_METHOD_ADD, targets, 2, 5), ETACAL_OK);
    const etacal_quotes *q = f->q;
    assert_int_equal(q->method, ETACAL_METHOD_ADD);
    assert_int_equal(q->nkeys, 1);
    assert_string_equal(q->key_names[0], "zone");
    assert_int_equal(q->ntargets, 2);
    assert_same_double(q->targets[0], 0.8);
    assert_same_double(q->targets[1], 0.9);
    assert_int_equal(etacal_quotes_find_target(q, 0.9), 1);
    assert_int_equal(etacal_quotes_find_target(q, 0.8), 0);
    assert_int_equal(etacal_quotes_find_target(q, 0.85), -1);

    /* Segments: global first, then sorted by key text. */
    assert_int_equal(q->nsegs, 4);
    static const char *names[] = {"*", "east", "north", "south"};
    static const size_t ns[] = {17, 2, 9, 6}, bare[] = {4, 1, 2, 1};
    for (size_t s = 0; s < 4; s++) {
        assert_string_equal(q->segs[s].keys[0], names[s]);
        assert_int_equal(q->segs[s].n, ns[s]);
        assert_int_equal(q->segs[s].bare_hits, bare[s]);
    }
    const etacal_segment *gl = &q->segs[0], *east = &q->segs[1], *north = &q->segs[2],
                         *south = &q->segs[3];
    /* global n=17: k(.8) = ceil(14.4) = 15 -> 90.5; k(.9) = ceil(16.2) = 17 -> 120.5 */
    assert_int_equal(gl->k[0], 15);
    assert_int_equal(gl->k[1], 17);
    assert_close(gl->score_q[0], 90.5, 1e-15);
    assert_close(gl->score_q[1], 120.5, 1e-15);
    assert_int_equal(gl->status[0], ETACAL_OWN_ROW);
    assert_int_equal(gl->status[1], ETACAL_OWN_ROW);
    /* north n=9: k(.8) = 8 -> 86.2; k(.9) = 9 -> 101.3755 (the table rounds it
     * up to 101.376) */
    assert_int_equal(north->k[0], 8);
    assert_int_equal(north->k[1], 9);
    assert_close(north->score_q[0], 86.2, 1e-12);
    assert_close(north->score_q[1], 101.3755, 1e-12);
    assert_int_equal(north->status[0], ETACAL_OWN_ROW);
    assert_int_equal(north->status[1], ETACAL_OWN_ROW);
    /* south n=6: k(.8) = ceil(5.6) = 6 -> 120.5; k(.9) = ceil(6.3) = 7 > 6 */
    assert_int_equal(south->k[0], 6);
    assert_int_equal(south->k[1], 7);
    assert_close(south->score_q[0], 120.5, 1e-15);
    assert_true(isinf(south->score_q[1]) && south->score_q[1] > 0);
    assert_int_equal(south->status[0], ETACAL_OWN_ROW);
    assert_int_equal(south->status[1], ETACAL_FALLBACK_RANK);
    /* east n=2 < min_rows 5: falls back for both (k = 3 > 2 as well) */
    assert_int_equal(east->status[0], ETACAL_FALLBACK_FEW_ROWS);
    assert_int_equal(east->status[1], ETACAL_FALLBACK_FEW_ROWS);
    assert_int_equal(east->k[0], 3);
    assert_true(isinf(east->score_q[0]));

    /* Rows: by segment, then target; own rows only. */
    assert_int_equal(q->nrows, 5);
    check_row(q, 0, "*", 0, 17, 15, 90.5, 1);
    check_row(q, 1, "*", 1, 17, 17, 120.5, 1);
    check_row(q, 2, "north", 0, 9, 8, 86.2, 1);
    check_row(q, 3, "north", 1, 9, 9, 101.376, 1);
    check_row(q, 4, "south", 0, 6, 6, 120.5, 1);
    for (size_t r = 0; r < q->nrows; r++)
        assert_int_equal(q->rows[r].method, ETACAL_METHOD_ADD);
    /* Rounded up, never down. */
    assert_true(q->rows[3].offset_s >= north->score_q[1]);

    /* Accuracy over all 17 (sums of the exact decimal differences, python
     * fractions): mean error 687.5255/17, MAE 788.2755/17, RMSE
     * sqrt(59014.05856275/17). */
    assert_int_equal(q->accuracy.n, 17);
    assert_int_equal(q->accuracy.on_time, 4);
    assert_close(q->accuracy.mean_error, 40.44267647058823, 1e-12);
    assert_close(q->accuracy.mae, 46.36914705882353, 1e-12);
    assert_close(q->accuracy.rmse, 58.91871697154928, 1e-12);
}

static void test_fit_default_min_rows_and_no_keys(void **state)
{
    fixture *f = *state;
    load(f, calib_csv, 1);
    const double targets[] = {0.8};
    /* min_rows 0 means 200: every zone falls back, the global row stays. */
    assert_int_equal(fit(f, 1, ETACAL_METHOD_ADD, targets, 1, 0), ETACAL_OK);
    assert_int_equal(f->q->nsegs, 4);
    for (size_t s = 1; s < 4; s++)
        assert_int_equal(f->q->segs[s].status[0], ETACAL_FALLBACK_FEW_ROWS);
    assert_int_equal(f->q->nrows, 1);
    check_row(f->q, 0, "*", 0, 17, 15, 90.5, 1);
    /* No key columns: the global segment only. */
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, targets, 1, 5), ETACAL_OK);
    assert_int_equal(f->q->nkeys, 0);
    assert_int_equal(f->q->nsegs, 1);
    assert_int_equal(f->q->nrows, 1);
    assert_int_equal(f->q->rows[0].k, 15);
    assert_close(f->q->rows[0].offset_s, 90.5, 1e-15);
    /* Duplicated targets count once. */
    const double dup[] = {0.9, 0.8, 0.9, 0.8};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, dup, 4, 5), ETACAL_OK);
    assert_int_equal(f->q->ntargets, 2);
    assert_int_equal(f->q->nrows, 2);
}

static void test_fit_ratio(void **state)
{
    fixture *f = *state;
    /* Ratios actual/pred: 1.234567875 1.1 0.96 1.1 1.1004 1.17 1.13 0.95 1.12;
     * sorted 0.95 0.96 1.1 1.1 1.1004 1.12 1.13 1.17 1.234567875.
     * n=9: k(.8) = 8 -> 1.17; k(.9) = 9 -> 1.234567875, up to 1.234568. */
    load(f,
         "pred_s,actual_s\n800,987.6543\n1000,1100\n500,480\n640,704\n1250,1375.5\n900,1053\n"
         "400,452\n1600,1520\n720,806.4\n",
         0);
    const double targets[] = {0.8, 0.9};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_RATIO, targets, 2, 5), ETACAL_OK);
    const etacal_quotes *q = f->q;
    assert_int_equal(q->method, ETACAL_METHOD_RATIO);
    assert_int_equal(q->nrows, 2);
    assert_int_equal(q->rows[0].k, 8);
    assert_int_equal(q->rows[1].k, 9);
    assert_close(q->segs[0].score_q[0], 1.17, 1e-14);
    assert_close(q->segs[0].score_q[1], 1.234567875, 1e-14);
    assert_same_double(q->rows[0].offset_s, 0.0);
    assert_close(q->rows[0].slope, 1.17, 1e-15);
    assert_close(q->rows[1].slope, 1.234568, 1e-15);
    assert_int_equal(q->rows[0].method, ETACAL_METHOD_RATIO);
    /* The text. */
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(q, fp, &f->err), ETACAL_OK);
    fclose(fp);
    assert_string_equal(buf, "target,method,n,k,offset_s,slope\n"
                             "0.8,ratio,9,8,0,1.17\n"
                             "0.9,ratio,9,9,0,1.234568\n");
    /* ... and back: no key columns, the global segment has no keys. */
    tu_write_text(&f->dir, "ratio.csv", buf, f->path, sizeof f->path);
    free(buf);
    assert_int_equal(etacal_quotes_read_csv(f->path, 0, &f->q2, &f->err), ETACAL_OK);
    assert_int_equal(f->q2->nkeys, 0);
    assert_int_equal(f->q2->method, ETACAL_METHOD_RATIO);
    assert_int_equal(f->q2->nsegs, 1);
    assert_int_equal(f->q2->nrows, 2);
    assert_close(f->q2->rows[1].slope, 1.234568, 1e-15);
}

static void test_fit_ratio_needs_positive_predictions(void **state)
{
    fixture *f = *state;
    load(f, "pred_s,actual_s\n800,987.6543\n1000,1100\n0,480\n640,704\n", 0);
    const double targets[] = {0.5};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_RATIO, targets, 1, 1), ETACAL_EINVAL);
    assert_null(f->q);
    assert_error(&f->err, ETACAL_EINVAL, f->path,
                 "method ratio needs predictions > 0 (data row 3 has 0)");
    /* The same data fits with the add method. */
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, targets, 1, 1), ETACAL_OK);
}

static void test_fit_errors(void **state)
{
    fixture *f = *state;
    /* 8 rows: at tau .9 the rank ceil(9 * .9) = 9 > 8, and the global
     * segment needs at least 9. */
    load(f,
         "pred_s,actual_s\n800,987.6543\n1000,1100\n500,480\n640,704\n1250,1375.5\n900,1053\n"
         "400,452\n1600,1520\n",
         0);
    const double t89[] = {0.8, 0.9};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, t89, 2, 5), ETACAL_ENUM);
    assert_null(f->q);
    assert_error(&f->err, ETACAL_ENUM, f->path,
                 "only 8 rows: a promise for target 0.9 needs at least 9 calibration rows (rank "
                 "ceil((n+1)*tau) must not exceed n)");
    const double t95[] = {0.95};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, t95, 1, 5), ETACAL_ENUM);
    assert_error(&f->err, ETACAL_ENUM, f->path,
                 "only 8 rows: a promise for target 0.95 needs at least 19 calibration rows (rank "
                 "ceil((n+1)*tau) must not exceed n)");
    /* 0.8 alone is fine: ceil(9 * .8) = 8. */
    const double t8[] = {0.8};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, t8, 1, 5), ETACAL_OK);
    assert_int_equal(f->q->rows[0].k, 8);

    /* Targets outside (0,1), none, NaN. */
    const double bad1[] = {0.9, 1.0};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, bad1, 2, 5), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "target must be an on-time rate in (0,1), got 1");
    const double bad0[] = {0.0};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, bad0, 1, 5), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "target must be an on-time rate in (0,1), got 0");
    const double badn[] = {NAN};
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, badn, 1, 5), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "target must be an on-time rate in (0,1), got nan");
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, t8, 0, 5), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "no target given");
    /* Unknown method. */
    assert_int_equal(fit(f, 0, 7, t8, 1, 5), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "unknown method 7");
    assert_null(f->q);

    /* No rows at all. */
    load(f, "pred_s,actual_s\n", 0);
    assert_int_equal(fit(f, 0, ETACAL_METHOD_ADD, t8, 1, 5), ETACAL_ENUM);
    assert_error(&f->err, ETACAL_ENUM, f->path, "no data rows with both an actual and a prediction");

    /* Columns of the wrong type. */
    load(f, calib_csv, 1);
    etacal_fit_opts o = {ETACAL_METHOD_ADD, t8, 1, 5, NULL, 0, 0, 0, 0, NULL, NULL, 0};
    const size_t notkey[] = {1};
    assert_int_equal(etacal_quotes_fit(f->t, 0, 1, notkey, 1, &o, &f->q, &f->err), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "'pred_s' is not a key column");
    const size_t key[] = {2};
    assert_int_equal(etacal_quotes_fit(f->t, 2, 1, key, 1, &o, &f->q, &f->err), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "actual and prediction must be numeric columns");
}

/* Two keys and random data against a brute-force computation of every
 * bound: scores per segment sorted with qsort, k with integer arithmetic. */
static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static void test_fit_random_against_brute_force(void **state)
{
    fixture *f = *state;
    static const char *zones[] = {"west", "north", "east"};
    static const char *veh[] = {"car", "bike"};
    /* segment sizes chosen to cover own rows, few rows (9 < min_rows 10),
     * rank > n (18 rows at .95: ceil(19 * .95) = 19), a zone whose two thin
     * vehicles (7 + 8 rows) pool into a cell of its own at .8 and .9
     * (k = 13, 15 of 15) but not at .95 (16 > 15), and a target (.99) at
     * which the rows left over for the global cell (42) give no finite
     * bound (ceil(43 * .99) = 43), so that the global row takes all rows */
    static const size_t sizes[3][2] = {{400, 18}, {150, 9}, {7, 8}};
    tu_rng r = {UINT64_C(2385)};
    size_t total = 0;
    for (int z = 0; z < 3; z++)
        for (int v = 0; v < 2; v++)
            total += sizes[z][v];
    size_t cap = total * 64 + 64, n = 0;
    char *text = malloc(cap);
    double *sc[3][2];
    size_t cnt[3][2] = {{0}};
    assert_non_null(text);
    for (int z = 0; z < 3; z++)
        for (int v = 0; v < 2; v++) {
            sc[z][v] = malloc(sizes[z][v] * sizeof(double));
            assert_non_null(sc[z][v]);
        }
    double *all = malloc(total * sizeof *all);
    assert_non_null(all);
    n += (size_t)snprintf(text + n, cap - n, "vehicle,pred_s,zone,actual_s\n");
    size_t left[3][2];
    memcpy(left, sizes, sizeof left);
    for (size_t i = 0; i < total; i++) {
        int z, v;
        do {
            z = (int)tu_below(&r, 3);
            v = (int)tu_below(&r, 2);
        } while (left[z][v] == 0);
        left[z][v]--;
        /* whole-millisecond values, so each score is a short decimal */
        long pred_ms = 300000 + (long)tu_below(&r, 1500000);
        long act_ms = pred_ms - 200000 + (long)tu_below(&r, 600000) + 50000 * z;
        if (act_ms < 0)
            act_ms = 0;
        n += (size_t)snprintf(text + n, cap - n, "%s,%ld.%03ld,%s,%ld.%03ld\n", veh[v],
                              pred_ms / 1000, pred_ms % 1000, zones[z], act_ms / 1000, act_ms % 1000);
        double s = (double)act_ms / 1000.0 - (double)pred_ms / 1000.0;
        sc[z][v][cnt[z][v]++] = s;
        all[i] = s;
    }
    load(f, text, 2);
    free(text);
    const double targets[] = {0.95, 0.8, 0.9, 0.99};
    const uint64_t tnum[] = {8, 9, 95, 99}, tden[] = {10, 10, 100, 100}; /* sorted: .8 .9 .95 .99 */
    assert_int_equal(fit(f, 2, ETACAL_METHOD_ADD, targets, 4, 10), ETACAL_OK);
    const etacal_quotes *q = f->q;
    /* the levels of --by zone,vehicle: 6 (zone, vehicle) segments, 3
     * (zone, *) segments and the global one */
    assert_int_equal(q->nsegs, 10);
    assert_int_equal(q->nkeys, 2);
    assert_string_equal(q->key_names[0], "zone");
    assert_string_equal(q->key_names[1], "vehicle");
    /* sorted by key text, "*" (0x2a) before letters: per zone in the order
     * east, north, west, first (zone, *), then bike, car */
    static const int zorder[3] = {2, 1, 0};
    assert_string_equal(q->segs[0].keys[0], "*");
    assert_string_equal(q->segs[0].keys[1], "*");
    /* The pooled cells by brute force, per target: a (zone, vehicle)
     * qualifies with n >= 10 and k <= n; a zone's cell holds its vehicles
     * that did not qualify, and qualifies the same way; the global cell
     * holds the zones' cells that did not qualify and needs k <= n only;
     * without it the global row takes all rows. */
    size_t expect_rows = 0;
    double *pool = malloc(total * sizeof *pool);
    double *zpool[3];
    size_t zn[3];
    assert_non_null(pool);
    for (int z = 0; z < 3; z++) {
        zpool[z] = malloc(total * sizeof(double));
        assert_non_null(zpool[z]);
    }
    int global_rest[4] = {0};
    for (size_t ti = 0; ti < 4; ti++) {
#define KRANK(m) (((uint64_t)(m) + 1) * tnum[ti] + tden[ti] - 1) / tden[ti]
        size_t gn = 0;
        for (int z = 0; z < 3; z++) {
            zn[z] = 0;
            for (int v = 0; v < 2; v++) {
                size_t m = sizes[z][v];
                if (m >= 10 && KRANK(m) <= m)
                    continue;
                memcpy(zpool[z] + zn[z], sc[z][v], m * sizeof(double));
                zn[z] += m;
            }
            int zq = zn[z] >= 10 && KRANK(zn[z]) <= zn[z];
            if (!zq) {
                memcpy(pool + gn, zpool[z], zn[z] * sizeof(double));
                gn += zn[z];
            }
        }
        global_rest[ti] = gn > 0 && KRANK(gn) <= gn;
        for (size_t s = 0; s < 10; s++) {
            const etacal_segment *g = &q->segs[s];
            double *v;
            size_t m, cn;
            int level;
            if (s == 0) {
                level = 0;
                m = total;
                v = global_rest[ti] ? pool : all;
                cn = global_rest[ti] ? gn : total;
                assert_int_equal(g->pool_n[ti], gn);
            } else {
                int z = zorder[(s - 1) / 3], slot = (int)((s - 1) % 3);
                assert_string_equal(g->keys[0], zones[z]);
                if (slot == 0) { /* (zone, *): its pooled cell */
                    assert_string_equal(g->keys[1], "*");
                    m = sizes[z][0] + sizes[z][1];
                    v = zpool[z];
                    cn = zn[z];
                    level = 1;
                    assert_int_equal(g->parent, 0);
                } else {
                    int ve = slot == 1 ? 1 : 0; /* bike, then car */
                    assert_string_equal(g->keys[1], veh[ve]);
                    v = sc[z][ve];
                    m = cn = sizes[z][ve];
                    level = 2;
                    assert_int_equal(g->parent, s - (size_t)slot); /* its (zone, *) */
                }
                assert_int_equal(g->pool_n[ti], cn);
            }
            assert_int_equal(g->level, (size_t)level);
            assert_int_equal(g->n, m);
            double *sorted = malloc((cn ? cn : 1) * sizeof *sorted);
            assert_non_null(sorted);
            memcpy(sorted, v, cn * sizeof *sorted);
            qsort(sorted, cn, sizeof *sorted, cmp_double);
            uint64_t k = KRANK(cn);
            assert_int_equal(g->k[ti], k);
            int want_status = s == 0                 ? ETACAL_OWN_ROW
                              : cn == 0              ? ETACAL_FALLBACK_EMPTY
                              : cn < 10              ? ETACAL_FALLBACK_FEW_ROWS
                              : k > cn               ? ETACAL_FALLBACK_RANK
                                                     : ETACAL_OWN_ROW;
            assert_int_equal(g->status[ti], want_status);
            if (cn == 0)
                assert_true(isnan(g->score_q[ti]));
            else if (k <= cn)
                assert_same_double(g->score_q[ti], sorted[k - 1]);
            else
                assert_true(isinf(g->score_q[ti]));
            free(sorted);
            if (want_status == ETACAL_OWN_ROW) {
                /* its row: the cell's n and what the cell is */
                const etacal_quote *row = NULL;
                for (size_t i = 0; i < q->nrows; i++)
                    if (q->rows[i].seg == s && q->rows[i].target == ti)
                        row = &q->rows[i];
                assert_non_null(row);
                assert_int_equal(row->n, cn);
                assert_int_equal(row->cell, level == 2             ? ETACAL_CELL_OWN
                                            : level == 1 || global_rest[ti] ? ETACAL_CELL_REST
                                                                            : ETACAL_CELL_ALL);
            }
            expect_rows += want_status == ETACAL_OWN_ROW;
        }
#undef KRANK
    }
    /* the cases the sizes were chosen for */
    assert_int_equal(global_rest[0] + global_rest[1] + global_rest[2], 3);
    assert_int_equal(global_rest[3], 0);
    assert_int_equal(q->segs[1].status[0], ETACAL_OWN_ROW);           /* (east, *) pooled at .8 */
    assert_int_equal(q->segs[1].status[2], ETACAL_FALLBACK_RANK);     /* but not at .95 */
    assert_int_equal(q->segs[7].status[1], ETACAL_FALLBACK_EMPTY);    /* (west, *) at .9: both own */
    free(pool);
    for (int z = 0; z < 3; z++)
        free(zpool[z]);
    assert_int_equal(q->nrows, expect_rows);
    for (size_t i = 0; i < q->nrows; i++) {
        const etacal_quote *row = &q->rows[i];
        if (i) { /* by segment, then target */
            const etacal_quote *prev = &q->rows[i - 1];
            assert_true(prev->seg < row->seg || (prev->seg == row->seg && prev->target < row->target));
        }
        double s = q->segs[row->seg].score_q[row->target];
        /* rounded up to a whole millisecond, never down */
        assert_true(row->offset_s >= s - 1e-9 * fabs(s));
        assert_true(row->offset_s - s < 0.001 + 1e-9);
        assert_close(row->offset_s * 1000, nearbyint(row->offset_s * 1000), 1e-12);
    }
    for (int z = 0; z < 3; z++)
        for (int v = 0; v < 2; v++)
            free(sc[z][v]);
    free(all);
}

/* Pooled thin cells by hand (--by zone,vehicle --min-rows 3).  Scores
 * actual - pred:
 *   (x, p) 10 20 30 40   (x, q) 100   (x, r) 200 300
 *   (y, p) 7             (z, p) 1 2 3
 * At .5: (x, p) own, k = ceil(5 x .5) = 3 -> 30; (x, q) and (x, r) are
 * thin, their cell (x, *) = {100, 200, 300}, n = 3, k = 2 -> 200; (y, p)
 * is thin and so is its cell {7}, which goes up: the global cell is {7},
 * k = 1 -> 7; (z, p) own, k = 2 -> 2, so (z, *) is empty.
 * At .9: (x, p) k = 5 > 4, (x, *) = all 7 of x, k = 8 > 7; (z, p) k = 4 > 3
 * and (z, *) = its 3, k = 4 > 3: everything reaches the global cell, all
 * 11 rows, k = ceil(12 x .9) = 11 -> 300. */
static const char *pooled_csv = "zone,vehicle,pred_s,actual_s\n"
                                "x,p,611.5,621.5\n"
                                "z,p,905.25,906.25\n"
                                "x,r,700,900\n"
                                "y,p,1210.125,1217.125\n"
                                "x,p,533,553\n"
                                "x,q,812.75,912.75\n"
                                "z,p,640,642\n"
                                "x,p,777.5,807.5\n"
                                "x,r,1020,1320\n"
                                "z,p,1500.5,1503.5\n"
                                "x,p,450.25,490.25\n";

static void test_fit_pooled_by_hand(void **state)
{
    fixture *f = *state;
    load(f, pooled_csv, 2);
    const double targets[] = {0.9, 0.5};
    assert_int_equal(fit(f, 2, ETACAL_METHOD_ADD, targets, 2, 3), ETACAL_OK);
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(f->q, fp, &f->err), ETACAL_OK);
    fclose(fp);
    assert_string_equal(buf, "zone,vehicle,target,method,n,k,offset_s,slope,cell\n"
                             "*,*,0.5,add,1,1,7,1,rest\n"
                             "*,*,0.9,add,11,11,300,1,rest\n"
                             "x,*,0.5,add,3,2,200,1,rest\n"
                             "x,p,0.5,add,4,3,30,1,own\n"
                             "z,p,0.5,add,3,2,2,1,own\n");
    free(buf);
    /* segments: * | x,* x,p x,q x,r | y,* y,p | z,* z,p */
    const etacal_quotes *q = f->q;
    assert_int_equal(q->nsegs, 9);
    static const size_t pool5[] = {1, 3, 4, 1, 2, 1, 1, 0, 3}, pool9[] = {11, 7, 4, 1, 2, 1, 1, 3, 3};
    static const int st5[] = {ETACAL_OWN_ROW,           ETACAL_OWN_ROW,           ETACAL_OWN_ROW,
                              ETACAL_FALLBACK_FEW_ROWS, ETACAL_FALLBACK_FEW_ROWS, ETACAL_FALLBACK_FEW_ROWS,
                              ETACAL_FALLBACK_FEW_ROWS, ETACAL_FALLBACK_EMPTY,    ETACAL_OWN_ROW};
    static const int st9[] = {ETACAL_OWN_ROW,           ETACAL_FALLBACK_RANK,     ETACAL_FALLBACK_RANK,
                              ETACAL_FALLBACK_FEW_ROWS, ETACAL_FALLBACK_FEW_ROWS, ETACAL_FALLBACK_FEW_ROWS,
                              ETACAL_FALLBACK_FEW_ROWS, ETACAL_FALLBACK_RANK,     ETACAL_FALLBACK_RANK};
    for (size_t g = 0; g < 9; g++) {
        assert_int_equal(q->segs[g].pool_n[0], pool5[g]);
        assert_int_equal(q->segs[g].pool_n[1], pool9[g]);
        assert_int_equal(q->segs[g].status[0], st5[g]);
        assert_int_equal(q->segs[g].status[1], st9[g]);
    }
    assert_true(isnan(q->segs[7].score_q[0])); /* (z, *) at .5: no rows */

    /* Method ratio follows the same cells: pred 1000 + the scores would give
     * factors 1 + s/1000; here the factors of the rows' own scores, y/p. */
    assert_int_equal(fit(f, 2, ETACAL_METHOD_RATIO, targets, 2, 3), ETACAL_OK);
    assert_int_equal(f->q->nrows, 5);
    for (size_t r = 0; r < f->q->nrows; r++) {
        const etacal_quote *row = &f->q->rows[r];
        assert_int_equal(row->n, f->q->segs[row->seg].pool_n[row->target]);
    }
    /* the global row at .9: the largest factor of all 11 rows,
     * 1320/1020 = 1.294118 (rounded up to 1e-6) */
    assert_same_double(f->q->rows[1].slope, 1.294118);
    /* (x, *) at .5: factors 912.75/812.75, 900/700, 1320/1020, the second
     * smallest: 900/700 = 1.2857143 -> 1.285715 */
    assert_same_double(f->q->rows[2].slope, 1.285715);
    /* the global row at .5: (y, p) alone, 1217.125/1210.125 -> 1.005785 */
    assert_same_double(f->q->rows[0].slope, 1.005785);

    /* Recency weights all 1 give the unweighted cells (the mass tau (1 + n)
     * is the rank ceil((n+1) tau)). */
    double w[11];
    for (size_t i = 0; i < 11; i++)
        w[i] = 1;
    static const size_t keys[] = {2, 3};
    etacal_fit_opts o = {ETACAL_METHOD_ADD, targets, 2, 3, NULL, 0, 0, 0, 0, NULL, w, 0};
    etacal_quotes *qw = NULL;
    assert_int_equal(etacal_quotes_fit(f->t, 0, 1, keys, 2, &o, &qw, &f->err), ETACAL_OK);
    assert_int_equal(qw->nrows, 5);
    static const double offs[] = {7, 300, 200, 30, 2};
    for (size_t r = 0; r < 5; r++) {
        assert_same_double(qw->rows[r].offset_s, offs[r]);
        assert_int_equal(qw->rows[r].cell, r < 3 ? ETACAL_CELL_REST : ETACAL_CELL_OWN);
    }
    etacal_quotes_destroy(qw);
}

static void test_write_and_read_back(void **state)
{
    fixture *f = *state;
    load(f, calib_csv, 1);
    const double targets[] = {0.8, 0.9};
    assert_int_equal(fit(f, 1, ETACAL_METHOD_ADD, targets, 2, 5), ETACAL_OK);
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(f->q, fp, &f->err), ETACAL_OK);
    fclose(fp);
    assert_string_equal(buf, calib_quotes_csv);
    tu_write_text(&f->dir, "quotes.csv", buf, f->path, sizeof f->path);
    free(buf);
    assert_int_equal(etacal_quotes_read_csv(f->path, 0, &f->q2, &f->err), ETACAL_OK);
    const etacal_quotes *a = f->q, *b = f->q2;
    assert_int_equal(b->nkeys, 1);
    assert_string_equal(b->key_names[0], "zone");
    assert_int_equal(b->method, ETACAL_METHOD_ADD);
    assert_int_equal(b->ntargets, 2);
    assert_same_double(b->targets[0], 0.8);
    assert_same_double(b->targets[1], 0.9);
    assert_int_equal(b->nrows, a->nrows);
    for (size_t r = 0; r < a->nrows; r++) {
        const etacal_quote *x = &a->rows[r], *y = &b->rows[r];
        assert_string_equal(a->segs[x->seg].keys[0], b->segs[y->seg].keys[0]);
        assert_int_equal(x->target, y->target);
        assert_int_equal(x->method, y->method);
        assert_int_equal(x->n, y->n);
        assert_int_equal(x->k, y->k);
        assert_same_double(x->offset_s, y->offset_s);
        assert_same_double(x->slope, y->slope);
    }
    /* segments of the read table: global first */
    assert_int_equal(b->nsegs, 3);
    assert_string_equal(b->segs[0].keys[0], "*");
    assert_int_equal(b->segs[0].status[0], ETACAL_OWN_ROW);
    assert_int_equal(b->segs[2].status[1], ETACAL_FALLBACK_FEW_ROWS); /* south has no .9 row */
    /* Writing the read table gives the same text. */
    buf = NULL;
    fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(b, fp, &f->err), ETACAL_OK);
    fclose(fp);
    assert_string_equal(buf, calib_quotes_csv);
    free(buf);
}

static void test_write_quotes_key_fields(void **state)
{
    fixture *f = *state;
    /* Key values that need quoting on the way out, and back. */
    char text[4096];
    size_t n = (size_t)snprintf(text, sizeof text, "zone,vehicle,pred_s,actual_s\n");
    for (int i = 0; i < 10; i++)
        n += (size_t)snprintf(text + n, sizeof text - n,
                              "\"Old Town, \"\"North\"\"\",\"e-bike\",%d.5,%d.25\n", 600 + i * 37,
                              610 + i * 41);
    for (int i = 0; i < 10; i++)
        n += (size_t)snprintf(text + n, sizeof text - n, "\" padded \",car,%d.5,%d.25\n",
                              600 + i * 29, 640 + i * 13);
    load(f, text, 2);
    const double targets[] = {0.9};
    assert_int_equal(fit(f, 2, ETACAL_METHOD_ADD, targets, 1, 5), ETACAL_OK);
    /* global, and per zone the (zone, vehicle) segment; the (zone, *)
     * cells are empty (their one vehicle has a row of its own) */
    assert_int_equal(f->q->nrows, 3);
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    assert_int_equal(quotes_write_csv(f->q, fp, &f->err), ETACAL_OK);
    fclose(fp);
    /* " padded " sorts before "Old..." (space < 'O'), and "*" before the
     * vehicles.  Scores: "Old Town" 9.75 + 4 i (i = 0..9), " padded "
     * 39.75 - 16 i.  Each segment has n = 10, k = ceil(11 * .9) = 10: its
     * largest score, 45.75 and 39.75.  Global: k = ceil(21 * .9) = 19 of
     * 20, the second largest of all: 41.75 ("Old Town", i = 8). */
    assert_string_equal(buf, "zone,vehicle,target,method,n,k,offset_s,slope,cell\n"
                             "*,*,0.9,add,20,19,41.75,1,all\n"
                             "\" padded \",car,0.9,add,10,10,39.75,1,own\n"
                             "\"Old Town, \"\"North\"\"\",e-bike,0.9,add,10,10,45.75,1,own\n");
    tu_write_text(&f->dir, "q.csv", buf, f->path, sizeof f->path);
    free(buf);
    assert_int_equal(etacal_quotes_read_csv(f->path, 0, &f->q2, &f->err), ETACAL_OK);
    assert_int_equal(f->q2->nsegs, 3);
    assert_string_equal(f->q2->segs[1].keys[0], " padded ");
    assert_string_equal(f->q2->segs[1].keys[1], "car");
    assert_int_equal(f->q2->rows[0].cell, ETACAL_CELL_ALL);
    assert_string_equal(f->q2->segs[2].keys[0], "Old Town, \"North\"");
    assert_string_equal(f->q2->segs[2].keys[1], "e-bike");
    assert_int_equal(f->q2->rows[2].cell, ETACAL_CELL_OWN);
}

/* ---- the reader ------------------------------------------------------- */

static int read_q(fixture *f, const char *text, char delim)
{
    etacal_quotes_destroy(f->q2);
    f->q2 = NULL;
    tu_write_text(&f->dir, "quotes.csv", text, f->path, sizeof f->path);
    etacal_error_clear(&f->err);
    return etacal_quotes_read_csv(f->path, delim, &f->q2, &f->err);
}

static void expect_read_error(fixture *f, const char *text, int code, size_t line, const char *msg)
{
    int rc = read_q(f, text, 0);
    if (rc == ETACAL_OK)
        fail_msg("reading succeeded, expected '%s'", msg);
    char where[700];
    if (line)
        tu_where(where, sizeof where, f->path, line);
    else
        snprintf(where, sizeof where, "%s", f->path);
    assert_error(&f->err, code, where, msg);
    assert_int_equal(rc, code);
    assert_null(f->q2);
}

#define HDR "zone,vehicle,target,method,n,k,offset_s,slope\n"
#define GLOBAL90 "*,*,0.9,add,5000,4501,312.125,1\n"

static void test_read_hand_written_table(void **state)
{
    fixture *f = *state;
    /* By hand: no k column, an extra column, partial levels, a ';' file. */
    const char *text = "zone;vehicle;target;method;n;offset_s;slope;note\n"
                       "*;*;0.9;add;5000;312.125;1;all orders\n"
                       "north;*;0.9;add;900;250.25;1;\n"
                       "north;bike;0.9;add;400;180.0625;1;\"bikes; fast\"\n"
                       "*;*;0.975;add;5000;655.5;1;\n";
    assert_int_equal(read_q(f, text, ';'), ETACAL_OK);
    const etacal_quotes *q = f->q2;
    assert_int_equal(q->nkeys, 2);
    assert_string_equal(q->key_names[1], "vehicle");
    assert_int_equal(q->ntargets, 2);
    assert_same_double(q->targets[1], 0.975);
    assert_int_equal(q->nsegs, 3);
    assert_int_equal(q->nrows, 4);
    assert_string_equal(q->segs[0].keys[0], "*");
    assert_int_equal(q->rows[0].seg, 0);
    assert_int_equal(q->rows[1].seg, 0);
    assert_int_equal(q->rows[1].target, 1);
    assert_close(q->rows[1].offset_s, 655.5, 0);
    assert_int_equal(q->rows[0].k, 0); /* no k column */
    assert_int_equal(q->segs[0].n, 5000);
    assert_close(q->segs[0].score_q[0], 312.125, 0);
    int found_bike = 0;
    for (size_t r = 0; r < q->nrows; r++) {
        const etacal_segment *g = &q->segs[q->rows[r].seg];
        if (strcmp(g->keys[0], "north") == 0 && strcmp(g->keys[1], "bike") == 0) {
            found_bike = 1;
            assert_close(q->rows[r].offset_s, 180.0625, 0);
            assert_int_equal(q->rows[r].n, 400);
        }
    }
    assert_true(found_bike);
    /* A ';' table read with ',' is one column per line. */
    expect_read_error(f, "zone;vehicle;target;method;n;offset_s;slope\n*;*;0.9;add;5000;312.125;1\n",
                      ETACAL_EPARSE, 1, "not a quote table: no column 'target' in the header");
}

/* quote.h: "segs[0] is the global segment; the other segments are sorted by
 * their key texts" for tables built by either the fit or the reader. */
/* quote.h: a table read from a file keeps the file's order of segments,
 * with the global segment first. */
static void test_read_keeps_file_order(void **state)
{
    fixture *f = *state;
    const char *text = "zone,target,method,n,offset_s,slope\n"
                       "south,0.9,add,300,95.5,1\n"
                       "*,0.9,add,5000,312.125,1\n"
                       "north,0.9,add,900,250.25,1\n";
    assert_int_equal(read_q(f, text, 0), ETACAL_OK);
    const etacal_quotes *q = f->q2;
    assert_int_equal(q->nsegs, 3);
    assert_string_equal(q->segs[0].keys[0], "*");
    assert_string_equal(q->segs[1].keys[0], "south");
    assert_string_equal(q->segs[2].keys[0], "north");
}

static void test_read_errors(void **state)
{
    fixture *f = *state;
    /* the cell column: one of own, rest, all; own on a full key combination,
     * all on the global row */
#define CHDR "zone,band,target,method,n,k,offset_s,slope,cell\n"
    expect_read_error(f, CHDR "*,*,0.9,add,5000,4501,312.125,1,pooled\n", ETACAL_EPARSE, 2,
                      "'cell' must be own, rest or all, got 'pooled'");
    expect_read_error(f, CHDR "*,*,0.9,add,5000,4501,312.125,1,all\nnorth,*,0.9,add,900,811,250.25,1,own\n",
                      ETACAL_EPARSE, 3, "cell 'own' needs a value in every key (a row with '*' keys is 'rest')");
    expect_read_error(f, CHDR "*,*,0.9,add,5000,4501,312.125,1,all\nnorth,*,0.9,add,900,811,250.25,1,all\n",
                      ETACAL_EPARSE, 3, "cell 'all' belongs to the global row (every key '*')");
    assert_int_equal(read_q(f,
                            CHDR "*,*,0.9,add,150,136,312.125,1,rest\nnorth,*,0.9,add,900,811,250.25,1,rest\n"
                                 "north,lunch,0.9,add,700,631,201.5,1,own\n",
                            0),
                     ETACAL_OK);
    assert_int_equal(f->q2->rows[0].cell, ETACAL_CELL_REST);
    assert_int_equal(f->q2->rows[1].cell, ETACAL_CELL_REST);
    assert_int_equal(f->q2->rows[2].cell, ETACAL_CELL_OWN);
    /* a key column may be called cell: the column comes before 'target' */
    assert_int_equal(read_q(f, "cell,target,method,n,k,offset_s,slope\n*,0.9,add,50,46,3.5,1\n", 0), ETACAL_OK);
    assert_int_equal(f->q2->nkeys, 1);
    assert_int_equal(f->q2->rows[0].cell, ETACAL_CELL_UNKNOWN);
#undef CHDR
    expect_read_error(f, "zone,target,method,n,k,offset_s\n*,0.9,add,50,46,3.5\n", ETACAL_EPARSE, 1,
                      "not a quote table: no column 'slope' in the header");
    expect_read_error(f, "zone,target,n,k,offset_s,slope\n*,0.9,50,46,3.5,1\n", ETACAL_EPARSE, 1,
                      "not a quote table: no column 'method' in the header");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,811,inf,1\n", ETACAL_EPARSE, 3,
                      "'offset_s' must be a finite number, got 'inf'");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,811,NA,1\n", ETACAL_EPARSE, 3,
                      "'offset_s' must be a finite number, got 'NA'");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,811,250.25,nan\n", ETACAL_EPARSE, 3,
                      "'slope' must be a finite number, got 'nan'");
    expect_read_error(f, HDR "*,*,1,add,5000,4501,312.125,1\n", ETACAL_EPARSE, 2,
                      "target must be an on-time rate in (0,1)");
    expect_read_error(f, HDR GLOBAL90 "\n*,*,0,add,5000,4501,312.125,1\n", ETACAL_EPARSE, 4,
                      "target must be an on-time rate in (0,1)");
    expect_read_error(f, HDR "*,*,-0.9,add,5000,4501,312.125,1\n", ETACAL_EPARSE, 2,
                      "target must be an on-time rate in (0,1)");
    expect_read_error(f, HDR "*,*,90%,add,5000,4501,312.125,1\n", ETACAL_EPARSE, 2,
                      "'target' must be a finite number, got '90%'");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,mult,900,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "unknown method 'mult' (expected add, ratio or qr)");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,ratio,900,811,0,1.25\n", ETACAL_EPARSE, 3,
                      "method 'ratio' differs from the table's first row");
    expect_read_error(f,
                      HDR GLOBAL90 "north,*,0.9,add,900,811,250.25,1\n"
                                   "*,*,0.9,add,17,16,3.5,1\n",
                      ETACAL_EPARSE, 4, "duplicate row for the same segment and target 0.9 (first on line 2)");
    expect_read_error(f,
                      HDR "north,*,0.9,add,900,811,250.25,1\n" GLOBAL90
                          "\"north\",\"*\",0.9,add,17,16,3.5,1\n",
                      ETACAL_EPARSE, 4, "duplicate row for the same segment and target 0.9 (first on line 2)");
    expect_read_error(f, HDR "north,*,0.9,add,900,811,250.25,1\nnorth,bike,0.9,add,9,9,3.5,1\n",
                      ETACAL_EPARSE, 1, "no global row (every key '*'): every order needs a row to fall back on");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.95,add,900,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "no global row (every key '*') for target 0.95, which this row has");
    expect_read_error(f, HDR GLOBAL90 "*,bike,0.9,add,900,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "key 'vehicle' has a value after a '*' key: levels go from the last key to "
                      "the first");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,811,250.25\n", ETACAL_EPARSE, 3,
                      "7 fields, but the header has 8");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900.5,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "'n' must be a whole number >= 0");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,-3,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "'n' must be a whole number >= 0");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,NA,250.25,1\n", ETACAL_EPARSE, 3,
                      "'k' must be a finite number, got 'NA'");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,811,250.25,-0.5\n", ETACAL_EPARSE, 3,
                      "method add needs slope 1 (promise = prediction + offset_s)");
    /* what a hand edit can break (issue 6 part 2): each with its row's line */
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,0,0,250.25,1\n", ETACAL_EPARSE, 3,
                      "n must be at least 1 (the calibration rows of the segment)");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,901,250.25,1\n", ETACAL_EPARSE, 3,
                      "k must be a rank from 1 to n = 900, got 901");
    expect_read_error(f, HDR GLOBAL90 "north,*,0.9,add,900,0,250.25,1\n", ETACAL_EPARSE, 3,
                      "k must be a rank from 1 to n = 900, got 0");
    expect_read_error(f, HDR "*,*,0.9,ratio,5000,4501,12.5,1.25\n", ETACAL_EPARSE, 2,
                      "method ratio needs offset_s 0 and a slope > 0 (promise = prediction x slope)");
    expect_read_error(f, HDR "*,*,0.9,ratio,5000,4501,0,0\n", ETACAL_EPARSE, 2,
                      "method ratio needs offset_s 0 and a slope > 0 (promise = prediction x slope)");
    expect_read_error(f, HDR GLOBAL90 "nor\xc3th,*,0.9,add,900,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "the value of key 'zone' is not UTF-8 text");
    expect_read_error(f, HDR GLOBAL90 "nor\x1fth,*,0.9,add,900,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "the value of key 'zone' holds the control character 0x1f");
    expect_read_error(f, "zone,,target,method,n,offset_s,slope\n*,*,0.9,add,50,3.5,1\n", ETACAL_EPARSE, 1,
                      "column 2 of the header has no name");
    expect_read_error(f, "zo\xffne,target,method,n,offset_s,slope\n*,0.9,add,50,3.5,1\n", ETACAL_EPARSE, 1,
                      "column 1 of the header is not UTF-8 text");
    expect_read_error(f, "zone,target,method,n,k,offset_s,slope,confidence\n*,0.9,add,50,48,3.5,1,1.5\n",
                      ETACAL_EPARSE, 2, "'confidence' must be in (0,1)");
    expect_read_error(f, "zone,target,method,n,k,offset_s,slope,coverage_low\n*,0.9,add,50,48,3.5,1,-0.25\n",
                      ETACAL_EPARSE, 2, "'coverage_low' must be a share in [0,1]");
    expect_read_error(f, "zone,k,target,method,n,offset_s,slope\n*,48,0.9,add,50,3.5,1\n", ETACAL_EPARSE, 1,
                      "column 'k' must come after 'target' (the key columns come first)");
    expect_read_error(f, HDR "*,*,0.9,add,5000,4501,1e400,1\n", ETACAL_EPARSE, 2,
                      "'offset_s' must be a finite number, got '1e400'");
    expect_read_error(f, HDR "*,*,0.9,add,5000,4501,0x10,1\n", ETACAL_EPARSE, 2,
                      "'offset_s' must be a finite number, got '0x10'");
    expect_read_error(f, "zone,method,target,n,offset_s,slope\n*,add,0.9,50,3.5,1\n", ETACAL_EPARSE,
                      1, "column 'method' must come after 'target' (the key columns come first)");
    expect_read_error(f, "zone,zone,target,method,n,offset_s,slope\n*,*,0.9,add,50,3.5,1\n",
                      ETACAL_EPARSE, 1, "key column 'zone' appears twice");
    expect_read_error(f, "zone,target,method,n,offset_s,slope,target\n*,0.9,add,50,3.5,1,0.9\n",
                      ETACAL_EPARSE, 1, "column 'target' appears twice in the header");
    expect_read_error(f, "", ETACAL_EPARSE, 0, "empty file: expected a quote table");
    expect_read_error(f, HDR, ETACAL_EPARSE, 1, "the quote table has no rows, only a header");
    expect_read_error(f, HDR GLOBAL90 "\"north,*,0.9,add,900,811,250.25,1\n", ETACAL_EPARSE, 3,
                      "unterminated quoted field");
    char missing[700];
    tu_path(missing, sizeof missing, &f->dir, "nope.csv");
    etacal_quotes *q = (etacal_quotes *)0x1;
    assert_int_equal(etacal_quotes_read_csv(missing, 0, &q, &f->err), ETACAL_EIO);
    assert_null(q);
    assert_error(&f->err, ETACAL_EIO, missing, "cannot open: No such file or directory");
}

static void test_method_names(void **state)
{
    (void)state;
    assert_string_equal(etacal_method_name(ETACAL_METHOD_ADD), "add");
    assert_string_equal(etacal_method_name(ETACAL_METHOD_RATIO), "ratio");
    assert_string_equal(etacal_method_name(ETACAL_METHOD_QR), "qr");
    assert_int_equal(etacal_method_parse("qr"), ETACAL_METHOD_QR);
    assert_null(etacal_method_name(3));
    assert_null(etacal_method_name(-1));
    assert_int_equal(etacal_method_parse("add"), ETACAL_METHOD_ADD);
    assert_int_equal(etacal_method_parse("ratio"), ETACAL_METHOD_RATIO);
    assert_int_equal(etacal_method_parse("Add"), -1);
    assert_int_equal(etacal_method_parse("mult"), -1);
    assert_int_equal(etacal_method_parse(""), -1);
    etacal_quotes_destroy(NULL);
}

int main(void)
{
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
    const struct CMUnitTest tests[] = {
        T(test_fit_hand_checked),
        T(test_fit_default_min_rows_and_no_keys),
        T(test_fit_ratio),
        T(test_fit_ratio_needs_positive_predictions),
        T(test_fit_errors),
        T(test_fit_random_against_brute_force),
        T(test_fit_pooled_by_hand),
        T(test_write_and_read_back),
        T(test_write_quotes_key_fields),
        T(test_read_hand_written_table),
        T(test_read_keeps_file_order),
        T(test_read_errors),
        T(test_method_names),
    };
#undef T
    return cmocka_run_group_tests(tests, NULL, NULL);
}
