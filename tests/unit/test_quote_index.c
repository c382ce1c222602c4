/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_quote_index.c: the one lookup of a quote table's rows
 * (quote_index.c).  A hand-made table with rows at every level and a
 * target that some segments lack: each order's row worked out by hand from
 * the rule (own segment, then the last keys as "*", down to the global
 * row); "*" keys; values the table has never seen; then random orders
 * against apply's stream and publish's etacal_quotes_promise_at, which must
 * agree with the index on every order. */
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

static const char table_text[] = "zone,band,target,method,n,k,offset_s,slope\n"
                                 "*,*,0.8,add,900,721,100.5,1\n"
                                 "*,*,0.9,add,900,811,200.25,1\n"
                                 "north,*,0.8,add,400,321,110.5,1\n"
                                 "north,*,0.9,add,400,361,210.25,1\n"
                                 "north,lunch,0.9,add,250,226,230.75,1\n"
                                 "south,dinner,0.8,add,260,209,140.5,1\n"
                                 "south,dinner,0.9,add,260,235,240.125,1\n";

static etacal_quotes *load(tu_dir *d)
{
    char path[600];
    tu_write_text(d, "q.csv", table_text, path, sizeof path);
    etacal_quotes *q = NULL;
    etacal_error err;
    assert_int_equal(etacal_quotes_read_csv(path, ',', &q, &err), ETACAL_OK);
    return q;
}

static double offset_of(const etacal_quotes *q, long r) { return q->rows[r].offset_s; }

static void test_by_hand(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    etacal_quotes *q = load(&d);
    etacal_quote_index *ix = NULL;
    etacal_error err;
    assert_int_equal(etacal_quote_index_create(q, &ix, &err), ETACAL_OK);
    assert_ptr_equal(etacal_quote_index_quotes(ix), q);
    struct {
        const char *zone, *band;
        size_t ti;
        double offset;
        size_t level;
    } cases[] = {
        {"north", "lunch", 1, 230.75, 2},  /* its own row */
        {"north", "lunch", 0, 110.5, 1},   /* no 0.8 row of its own: (north, *) */
        {"north", "dinner", 1, 210.25, 1}, /* a band the zone has no row for */
        {"south", "dinner", 0, 140.5, 2},
        {"south", "lunch", 1, 200.25, 0},  /* no (south, *): the global row */
        {"west", "lunch", 1, 200.25, 0},   /* a zone never seen */
        {"north", "*", 1, 210.25, 1},      /* "*": the segment one level up */
        {"*", "lunch", 0, 100.5, 0},
        {"", "", 0, 100.5, 0},
        {"North", "lunch", 1, 200.25, 0},  /* values are compared byte for byte */
    };
    for (size_t c = 0; c < sizeof cases / sizeof *cases; c++) {
        const char *keys[2] = {cases[c].zone, cases[c].band};
        size_t level = 99;
        long r = etacal_quote_index_lookup(ix, keys, NULL, cases[c].ti, &level);
        assert_true(r >= 0);
        if (offset_of(q, r) != cases[c].offset || level != cases[c].level)
            fail_msg("case %zu (%s, %s, target %zu): offset %g level %zu, expected %g level %zu", c, keys[0], keys[1],
                     cases[c].ti, offset_of(q, r), level, cases[c].offset, cases[c].level);
        /* the same with lengths instead of NUL-terminated texts */
        char zbuf[16];
        size_t lens[2] = {strlen(keys[0]), strlen(keys[1])};
        snprintf(zbuf, sizeof zbuf, "%sXYZ", keys[0]);
        const char *keys2[2] = {zbuf, keys[1]};
        assert_int_equal(etacal_quote_index_lookup(ix, keys2, lens, cases[c].ti, NULL), r);
        /* promise: offset + slope x pred */
        assert_same_double(etacal_quote_index_promise(ix, r, 1234.5, NULL, NULL, NULL), cases[c].offset + 1234.5);
    }
    const char *keys[2] = {"north", "lunch"};
    assert_int_equal(etacal_quote_index_lookup(ix, keys, NULL, 2, NULL), -1); /* no such target */
    etacal_quote_index_destroy(ix);
    etacal_quote_index_destroy(NULL);
    etacal_quotes_destroy(q);
    tu_dir_remove(&d);
}

/* Random orders: the index, apply's stream and publish's promise_at give
 * the same promise for each. */
static void test_agrees_with_apply(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    etacal_quotes *q = load(&d);
    etacal_quote_index *ix = NULL;
    etacal_error err;
    assert_int_equal(etacal_quote_index_create(q, &ix, &err), ETACAL_OK);
    static const char *const zones[] = {"north", "south", "east", "*north"};
    static const char *const bands[] = {"lunch", "dinner", "night"};
    enum { N = 400 };
    tu_rng g = {UINT64_C(0x1dea)};
    char path[600];
    tu_path(path, sizeof path, &d, "orders.csv");
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    fprintf(fp, "zone,band,pred_s\n");
    size_t zi[N], bi[N];
    double pred[N];
    for (size_t i = 0; i < N; i++) {
        zi[i] = tu_below(&g, 4);
        bi[i] = tu_below(&g, 3);
        pred[i] = (double)(300 + tu_below(&g, 2400));
        fprintf(fp, "%s,%s,%.0f\n", zones[zi[i]], bands[bi[i]], pred[i]);
    }
    assert_int_equal(fclose(fp), 0);
    char *out = NULL;
    size_t outlen = 0;
    FILE *os = open_memstream(&out, &outlen);
    etacal_apply_opts o = {0};
    o.pred_col = "pred_s";
    etacal_apply_stats st;
    assert_int_equal(apply_csv(q, path, os, &o, &st, &err), ETACAL_OK);
    assert_int_equal(fclose(os), 0);
    char *line = strchr(out, '\n') + 1;
    for (size_t i = 0; i < N; i++) {
        const char *keys[2] = {zones[zi[i]], bands[bi[i]]};
        for (size_t ti = 0; ti < 2; ti++) {
            long r = etacal_quote_index_lookup(ix, keys, NULL, ti, NULL);
            assert_true(r >= 0);
            double v = etacal_quote_index_promise(ix, r, pred[i], NULL, NULL, NULL);
            assert_same_double(v, etacal_quotes_promise_at(q, keys, ti, pred[i], NULL));
            if (ti == 0) {
                /* apply writes the promise of target 0.8 and 0.9 as promise_s_80,promise_s_90 */
                double a80, a90;
                char zb[16], bb[16];
                assert_int_equal(sscanf(line, "%15[^,],%15[^,],%*[^,],%lf,%lf", zb, bb, &a80, &a90), 4);
                assert_same_double(a80, etacal_promise_round(v, 0));
                long r9 = etacal_quote_index_lookup(ix, keys, NULL, 1, NULL);
                assert_same_double(a90, etacal_promise_round(etacal_quote_index_promise(ix, r9, pred[i], NULL, NULL, NULL), 0));
            }
        }
        line = strchr(line, '\n') + 1;
    }
    free(out);
    etacal_quote_index_destroy(ix);
    etacal_quotes_destroy(q);
    tu_dir_remove(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_by_hand),
        cmocka_unit_test(test_agrees_with_apply),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
