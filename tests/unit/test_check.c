/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_check.c: the check engine on small hand-checkable tables: hits,
 * coverage, statuses against the nominal level, slack and lateness, thin
 * segments and the gate, crossing quantiles, and its errors. */
#define _GNU_SOURCE
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "etacal/etacal.h"

static char path[64];

static etacal_table *load(const char *text)
{
    snprintf(path, sizeof path, "/tmp/etacal-check-XXXXXX");
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    assert_int_equal(write(fd, text, strlen(text)), (ssize_t)strlen(text));
    close(fd);
    etacal_colspec cols[] = {{"actual", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
                             {"up", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
                             {"lo", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
                             {"zone", ETACAL_COL_KEY, 0, NULL}};
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_read_csv(path, cols, 4, NULL, &t, &err), ETACAL_OK);
    unlink(path);
    return t;
}

static etacal_check_opts base(void)
{
    etacal_check_opts o = {0};
    o.actual_col = 0;
    o.upper_col = 1;
    o.lower_col = -1;
    o.upper_level = 0.9;
    o.lower_level = NAN;
    o.confidence = 0.95;
    o.min_rows = 3;
    return o;
}

/* 40 rows in zone a, all on time; 4 rows in zone b, all late. */
static char *table_text(void)
{
    char *s = malloc(4096);
    size_t w = (size_t)sprintf(s, "zone,actual,up,lo\n");
    for (int i = 0; i < 40; i++)
        w += (size_t)sprintf(s + w, "a,%d,%d,%d\n", 1000 + i, 1100 + i, 900);
    for (int i = 0; i < 4; i++)
        w += (size_t)sprintf(s + w, "b,%d,%d,%d\n", 2000, 1950 - 10 * i, 1000);
    return s;
}

static void test_upper_by_segment(void **state)
{
    (void)state;
    char *txt = table_text();
    etacal_table *t = load(txt);
    free(txt);
    etacal_check_opts o = base();
    size_t keys[] = {3};
    o.key_cols = keys;
    o.nkeys = 1;
    etacal_check_result *r = NULL;
    etacal_error err;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    assert_int_equal(r->nsegs, 3);
    assert_int_equal(r->nmeasures, 1);
    const etacal_measure *all = &r->segs[0].m[0], *a = &r->segs[1].m[0], *b = &r->segs[2].m[0];
    assert_string_equal(r->segs[1].keys[0], "a");
    assert_int_equal(all->n, 44);
    assert_int_equal(all->hits, 40);
    assert_int_equal(all->late, 4);
    assert_true(fabs(all->coverage - 40.0 / 44) < 1e-12);
    /* slack of a: always 100 s; lateness of b: 50, 60, 70, 80 -> 65 */
    assert_true(fabs(a->mean_slack - 100) < 1e-9);
    assert_true(isnan(a->mean_lateness));
    assert_true(fabs(b->mean_lateness - 65) < 1e-9);
    /* pinball at 0.9 of b: mean 0.9 * lateness */
    assert_true(fabs(b->pinball - 0.9 * 65) < 1e-9);
    /* a: 40/40, Wilson lower end above 0.9? 40/40 gives [0.912, 1]: over */
    assert_int_equal(a->status, ETACAL_STATUS_OVER);
    assert_int_equal(b->status, ETACAL_STATUS_UNDER);
    /* overall 40/44 = .909: ok; b has 4 rows >= min_rows 3: the gate fails */
    assert_int_equal(all->status, ETACAL_STATUS_OK);
    assert_int_equal(r->gate_failed, 1);
    etacal_check_destroy(r);
    /* with b thin (min_rows 5) the gate passes: b is shown, not gated */
    o.min_rows = 5;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    assert_true(r->segs[2].thin);
    assert_int_equal(r->segs[2].m[0].status, ETACAL_STATUS_UNDER);
    assert_int_equal(r->gate_failed, 0);
    etacal_check_destroy(r);
    etacal_table_destroy(t);
}

static void test_interval_and_bounds(void **state)
{
    (void)state;
    char *txt = table_text();
    etacal_table *t = load(txt);
    free(txt);
    etacal_check_opts o = base();
    o.lower_col = 2;
    o.lower_level = 0.05;
    o.upper_level = 0.95;
    etacal_check_result *r = NULL;
    etacal_error err;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    /* interval, then each bound as a quantile */
    assert_int_equal(r->nmeasures, 3);
    assert_int_equal(r->measures[0].kind, ETACAL_MEASURE_INTERVAL);
    assert_true(fabs(r->measures[0].nominal - 0.9) < 1e-12);
    const etacal_measure *m = &r->segs[0].m[0];
    assert_int_equal(m->hits, 40); /* b's actuals are above their upper bounds */
    /* width: a 200 + i (mean 219.5), b 950..920 (mean 935) */
    double w = 0;
    for (int i = 0; i < 40; i++)
        w += 200 + i;
    for (int i = 0; i < 4; i++)
        w += 950 - 10 * i;
    assert_true(fabs(m->mean_width - w / 44) < 1e-9);
    /* interval score: width + (2/0.1) * excess above the upper bound */
    double is = w;
    for (int i = 0; i < 4; i++)
        is += 20.0 * (50 + 10 * i);
    assert_true(fabs(m->interval_score - is / 44) < 1e-9);
    assert_int_equal(r->segs[0].m[1].hits, 0); /* nobody below the lower bound */
    etacal_check_destroy(r);
    etacal_table_destroy(t);
}

/* Unequal tails: lower level 0.1, upper level 0.95.  Zone a's rows are
 * inside (width 900 - 1000 + ... as above), zone b's are above the upper
 * bound by 50 + 10 i, each weighed 1/(1 - 0.95) = 20 (not the 2/0.15 of a
 * central interval at alpha = 0.15). */
static void test_interval_unequal_tails(void **state)
{
    (void)state;
    char *txt = table_text();
    etacal_table *t = load(txt);
    free(txt);
    etacal_check_opts o = base();
    o.lower_col = 2;
    o.lower_level = 0.1;
    o.upper_level = 0.95;
    etacal_check_result *r = NULL;
    etacal_error err;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    assert_true(fabs(r->measures[0].nominal - 0.85) < 1e-12);
    assert_true(fabs(r->measures[0].tail_lo - 0.1) < 1e-15 && fabs(r->measures[0].tail_hi - 0.95) < 1e-15);
    const etacal_measure *m = &r->segs[0].m[0];
    double is = m->mean_width * 44;
    for (int i = 0; i < 4; i++)
        is += 20.0 * (50 + 10 * i);
    assert_true(fabs(m->interval_score - is / 44) < 1e-9 * is / 44);
    etacal_check_destroy(r);
    /* a = 1 - b: the central interval's score, as before (20 = 2/0.1) */
    o.lower_level = 0.05;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    assert_true(isnan(r->measures[0].tail_lo));
    etacal_check_destroy(r);
    etacal_table_destroy(t);
}

static void test_quantiles_and_crossing(void **state)
{
    (void)state;
    etacal_table *t = load("zone,actual,up,lo\na,10,12,11\na,20,15,16\na,30,40,5\n");
    etacal_check_opts o = base();
    o.upper_col = -1;
    size_t qc[] = {1, 2};
    double qt[] = {0.8, 0.3}; /* given out of order: sorted by tau */
    o.q_cols = qc;
    o.q_taus = qt;
    o.nq = 2;
    etacal_check_result *r = NULL;
    etacal_error err;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    assert_int_equal(r->nq_sorted, 2);
    assert_true(r->measures[0].nominal == 0.3 && r->measures[0].col == 2);
    /* lo (tau .3) above up (tau .8) in row 2 only: 16 > 15 */
    assert_int_equal(r->segs[0].crossing_rows, 1);
    assert_int_equal(r->segs[0].m[0].hits, 1); /* 10 <= 11 */
    assert_int_equal(r->segs[0].m[1].hits, 2); /* 10 <= 12, 30 <= 40 */
    etacal_check_destroy(r);
    etacal_table_destroy(t);
}

static void test_errors(void **state)
{
    (void)state;
    etacal_table *t = load("zone,actual,up,lo\na,10,12,11\n");
    etacal_check_result *r = NULL;
    etacal_error err;
    etacal_check_opts o = base();
    o.upper_col = -1;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "nothing to check"));
    o = base();
    o.upper_level = 1.5;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_EINVAL);
    o = base();
    o.lower_col = 2;
    o.lower_level = 0.95;
    o.upper_level = 0.05;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "must be above"));
    o = base();
    o.upper_col = -1;
    o.lower_col = 2;
    size_t qc[] = {1};
    double qt[] = {0.5};
    o.q_cols = qc;
    o.q_taus = qt;
    o.nq = 1;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_EINVAL);
    assert_null(r);
    etacal_table_destroy(t);
    etacal_table *empty = load("zone,actual,up,lo\n");
    o = base();
    assert_int_equal(etacal_check_run(empty, &o, &r, &err), ETACAL_ENUM);
    etacal_table_destroy(empty);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_upper_by_segment),
        cmocka_unit_test(test_interval_and_bounds),
        cmocka_unit_test(test_interval_unequal_tails),
        cmocka_unit_test(test_quantiles_and_crossing),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests_name("check", tests, NULL, NULL);
}
