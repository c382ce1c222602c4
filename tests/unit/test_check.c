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

/* Holm (1979) by hand: p = .01, .04, .03, .005.  Sorted: .005 x 4 = .02,
 * .01 x 3 = .03, .03 x 2 = .06, .04 x 1 = .04 -> running max .06.  At
 * delta = .05 the first two are rejected and the step-down stops at .03 >
 * .05/2. */
static void test_holm_by_hand(void **state)
{
    (void)state;
    double p[] = {0.01, 0.04, 0.03, 0.005}, adj[4];
    etacal_error err;
    assert_int_equal(etacal_holm(p, 4, adj, &err), ETACAL_OK);
    const double want[] = {0.03, 0.06, 0.06, 0.02};
    for (int i = 0; i < 4; i++)
        assert_true(fabs(adj[i] - want[i]) < 1e-15);
    /* capped at 1; in place; one value is its own adjustment */
    double q[] = {0.6, 0.7};
    assert_int_equal(etacal_holm(q, 2, q, &err), ETACAL_OK);
    assert_true(q[0] == 1 && q[1] == 1);
    double one = 0.0123;
    assert_int_equal(etacal_holm(&one, 1, &one, &err), ETACAL_OK);
    assert_true(one == 0.0123);
    double bad[] = {0.1, NAN};
    assert_int_equal(etacal_holm(bad, 2, adj, &err), ETACAL_EINVAL);
    bad[1] = 1.5;
    assert_int_equal(etacal_holm(bad, 2, adj, &err), ETACAL_EINVAL);
}

/* The gate without a table: one-sided binomial p-values at the nominal
 * level and Holm across the overall figure and the segments that are not
 * thin (zone a 40/40, zone b 0/4 with min_rows 3, so b is tested). */
static void test_gate_binomial(void **state)
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
    assert_int_equal(r->ntests, 3);
    assert_true(r->gate_level == 0.05);
    const etacal_measure *b = &r->segs[2].m[0];
    /* P(X <= 0), X ~ Bin(4, 0.9) = 0.1^4 */
    assert_true(fabs(b->p - 1e-4) < 1e-16);
    assert_true(b->tested && b->reject);
    /* overall: 40 of 44, P(X <= 40; 44, .9) */
    assert_true(fabs(r->segs[0].m[0].p - etacal_binom_cdf(40, 44, 0.9)) < 1e-15);
    assert_true(r->gate_failed && r->nrejected == 1);
    etacal_check_destroy(r);
    /* thin b (min_rows 5) is not tested: the overall and a pass */
    o.min_rows = 5;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    assert_int_equal(r->ntests, 2);
    assert_false(r->segs[2].m[0].tested);
    assert_true(isnan(r->segs[2].m[0].p));
    assert_false(r->gate_failed);
    etacal_check_destroy(r);
    etacal_table_destroy(t);
}

static char tdir[64];

static void write_file(const char *name, const char *text)
{
    char p[128];
    snprintf(p, sizeof p, "%s/%s", tdir, name);
    FILE *fp = fopen(p, "w");
    assert_non_null(fp);
    assert_int_equal(fputs(text, fp) >= 0, 1);
    assert_int_equal(fclose(fp), 0);
}

/* The gate under a table's law.  Rows (n, k at tau 0.9): (*,*) 400, 361;
 * (a,*) 300, 271; (a,x) 250, 226.  Orders (a,x) take their own row, (a,y)
 * falls back to (a,*), (b,z) to (*,*), as etacal apply looks them up. */
static void test_gate_table_law(void **state)
{
    (void)state;
    snprintf(tdir, sizeof tdir, "/tmp/etacal-checkt-XXXXXX");
    assert_non_null(mkdtemp(tdir));
    write_file("q.csv", "zone,band,target,method,n,k,offset_s,slope\n"
                        "*,*,0.9,add,400,361,600,1\n"
                        "a,*,0.9,add,300,271,650,1\n"
                        "a,x,0.9,add,250,226,700,1\n");
    /* (a,x): 10 orders, 9 on time; (a,y): 8, 3 on time; (b,z): 6, 6 */
    char data[4096];
    size_t w = (size_t)sprintf(data, "zone,band,actual,promise\n");
    for (int i = 0; i < 10; i++)
        w += (size_t)sprintf(data + w, "a,x,%d,1000\n", i < 9 ? 900 + i : 1100);
    for (int i = 0; i < 8; i++)
        w += (size_t)sprintf(data + w, "a,y,%d,1000\n", i < 3 ? 800 : 1200 + i);
    for (int i = 0; i < 6; i++)
        w += (size_t)sprintf(data + w, "b,z,%d,1000\n", 700 + i);
    write_file("d.csv", data);
    char qp[128], dp[128];
    snprintf(qp, sizeof qp, "%s/q.csv", tdir);
    snprintf(dp, sizeof dp, "%s/d.csv", tdir);
    etacal_quotes *q = NULL;
    etacal_error err;
    assert_int_equal(etacal_quotes_read_csv(qp, ',', &q, &err), ETACAL_OK);
    etacal_colspec cols[] = {{"actual", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
                             {"promise", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
                             {"zone", ETACAL_COL_KEY, 0, NULL},
                             {"band", ETACAL_COL_KEY, 0, NULL}};
    etacal_table *t = NULL;
    assert_int_equal(etacal_table_read_csv(dp, cols, 4, NULL, &t, &err), ETACAL_OK);
    etacal_check_opts o = base();
    o.min_rows = 1;
    size_t tk[] = {2, 3};
    o.table = q;
    o.table_key_cols = tk;
    o.table_source = "q.csv";
    etacal_check_result *r = NULL;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_OK);
    assert_true(r->table_law);
    assert_int_equal(r->nkeys, 2);
    assert_int_equal(r->nsegs, 4); /* overall and the three rows, in the table's order */
    const struct {
        const char *k0, *k1;
        size_t n, k, m, hits;
    } want[] = {{"*", "*", 400, 361, 6, 6}, {"a", "*", 300, 271, 8, 3}, {"a", "x", 250, 226, 10, 9}};
    for (size_t g = 1; g < 4; g++) {
        const etacal_check_segment *sg = &r->segs[g];
        assert_string_equal(sg->keys[0], want[g - 1].k0);
        assert_string_equal(sg->keys[1], want[g - 1].k1);
        assert_int_equal(sg->cal_n, want[g - 1].n);
        assert_int_equal(sg->cal_k, want[g - 1].k);
        assert_int_equal(sg->m[0].n, want[g - 1].m);
        assert_int_equal(sg->m[0].hits, want[g - 1].hits);
        double p = etacal_betabinom_cdf(want[g - 1].hits, want[g - 1].m, (double)want[g - 1].k,
                                        (double)(want[g - 1].n + 1 - want[g - 1].k));
        assert_true(fabs(sg->m[0].p - p) < 1e-15);
        assert_true(sg->m[0].tested);
    }
    assert_false(r->segs[0].m[0].tested); /* the overall figure mixes three laws */
    assert_int_equal(r->ntests, 3);
    /* (a,*): 3 of 8 on time, p about 3e-4, Holm x 3: rejected */
    assert_true(r->segs[2].m[0].p < 0.01 && r->segs[2].m[0].reject);
    assert_true(r->gate_failed);
    etacal_check_destroy(r);

    /* errors: a level that is not a target, keys of its own, a k that a
     * weighted fit (or an edit) left */
    o.upper_level = 0.95;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "no target 0.95"));
    o.upper_level = 0.9;
    size_t kk[] = {2};
    o.key_cols = kk;
    o.nkeys = 1;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_EINVAL);
    o.nkeys = 0;
    etacal_quotes_destroy(q);
    write_file("q.csv", "zone,band,target,method,n,k,offset_s,slope\n"
                        "*,*,0.9,add,400,361,600,1\n"
                        "a,*,0.9,add,300,268,650,1\n");
    assert_int_equal(etacal_quotes_read_csv(qp, ',', &q, &err), ETACAL_OK);
    o.table = q;
    assert_int_equal(etacal_check_run(t, &o, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "row (a, *) at target 0.9 has k = 268, not the rank 271"));
    assert_string_equal(err.where, "q.csv");
    assert_null(r);
    etacal_quotes_destroy(q);
    etacal_table_destroy(t);
    unlink(qp);
    unlink(dp);
    rmdir(tdir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_upper_by_segment),
        cmocka_unit_test(test_interval_and_bounds),
        cmocka_unit_test(test_interval_unequal_tails),
        cmocka_unit_test(test_quantiles_and_crossing),
        cmocka_unit_test(test_errors),
        cmocka_unit_test(test_holm_by_hand),
        cmocka_unit_test(test_gate_binomial),
        cmocka_unit_test(test_gate_table_law),
    };
    return cmocka_run_group_tests_name("check", tests, NULL, NULL);
}
