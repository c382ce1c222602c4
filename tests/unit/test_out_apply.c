/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_out_apply.c: apply's summary writer (etacal_apply_write_summary)
 * after applying a fitted table to orders with actual durations: the counts
 * are the run's, the mean promise and extra time are recomputed from the
 * promised file itself, the on-time rates are counted from it (actual <=
 * promise); a selected target is named; a target index out of range gives
 * ETACAL_EINVAL and a sink that refuses bytes ETACAL_EIO. */
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
#include "outfixture.h"

#define NROWS 900

typedef struct fixture {
    tu_dir d;
    char rows[600], out[600];
    etacal_fit_run *run;
} fixture;

static const char *const keys[] = {"zone"};
static const double targets[] = {0.8, 0.9};

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    tu_dir_make(&f->d);
    ot_rows(&f->d, NROWS, UINT64_C(0xa991e), f->rows, sizeof f->rows);
    etacal_fitspec s;
    etacal_fitspec_init(&s);
    s.actual = "actual_s";
    s.pred = "pred_s";
    s.keys = keys;
    s.nkeys = 1;
    s.targets = targets;
    s.ntargets = 2;
    s.min_rows = 60;
    etacal_error err;
    assert_int_equal(etacal_fit_csv(&s, f->rows, NULL, &f->run, &err), ETACAL_OK);
    tu_path(f->out, sizeof f->out, &f->d, "promised.csv");
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    etacal_fit_run_destroy(f->run);
    tu_dir_remove(&f->d);
    free(f);
    return 0;
}

static void test_summary(void **state)
{
    fixture *f = *state;
    const etacal_quotes *q = etacal_fit_run_quotes(f->run);
    etacal_apply_opts ao = {.pred_col = "pred_s", .actual_col = "actual_s", .delim = ','};
    etacal_apply_stats st;
    etacal_error err;
    assert_int_equal(etacal_apply_path(q, f->rows, f->out, &ao, &st, &err), ETACAL_OK);

    /* the promised file, read back: sums and on-time counts of our own */
    FILE *fp = fopen(f->out, "rb");
    assert_non_null(fp);
    char line[512];
    assert_non_null(fgets(line, sizeof line, fp));
    assert_string_equal(line, "actual_s,pred_s,zone,dist_km,placed,promise_s_80,promise_s_90\n");
    double sum[2] = {0, 0}, psum = 0;
    size_t hits[2] = {0, 0}, bare = 0, n = 0;
    while (fgets(line, sizeof line, fp)) {
        double a, p, d, t, p80, p90;
        char zone[32];
        assert_int_equal(sscanf(line, "%lf,%lf,%31[^,],%lf,%lf,%lf,%lf", &a, &p, zone, &d, &t, &p80, &p90), 7);
        sum[0] += p80;
        sum[1] += p90;
        psum += p;
        hits[0] += a <= p80;
        hits[1] += a <= p90;
        bare += a <= p;
        n++;
    }
    fclose(fp);
    assert_int_equal(n, NROWS);

    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    assert_int_equal(etacal_apply_write_summary(q, "orders.csv", &ao, &st, &out, &err), ETACAL_OK);
    char want[300];
    snprintf(want, sizeof want,
             "etacal apply: orders.csv: %d orders, %d promised, 0 without a prediction, 0 malformed; %zu took a "
             "less specific row than their own segment\n",
             NROWS, NROWS, st.fallback);
    assert_true(strncmp(b.data, want, strlen(want)) == 0);
    /* the promises are rounded up to the millisecond in the file: the
     * means agree to the first decimal of a second */
    for (size_t t = 0; t < 2; t++) {
        double mp = sum[t] / (double)n, mb = psum / (double)n;
        snprintf(want, sizeof want, "mean promise for target %s: %.1f s (%.2f min), %.1f s (%.2f min) above",
                 t ? "90%" : "80%", mp, mp / 60, mp - mb, (mp - mb) / 60);
        assert_non_null(ot_line(b.data, want));
        snprintf(want, sizeof want, "  promise for target %s: %.2f%% (%zu/%zu)\n", t ? "90%" : "80%",
                 100.0 * (double)hits[t] / (double)n, hits[t], n);
        assert_non_null(ot_line(b.data, want));
    }
    snprintf(want, sizeof want, "  bare prediction:          %.2f%% (%zu/%zu)\n", 100.0 * (double)bare / (double)n,
             bare, n);
    assert_non_null(ot_line(b.data, want));
    ot_buf_free(&b);
}

/* One selected target (index 1): its line alone. */
static void test_selected(void **state)
{
    fixture *f = *state;
    const etacal_quotes *q = etacal_fit_run_quotes(f->run);
    size_t sel[] = {1};
    etacal_apply_opts ao = {.pred_col = "pred_s", .targets = sel, .ntargets = 1, .delim = ','};
    etacal_apply_stats st;
    etacal_error err;
    assert_int_equal(etacal_apply_path(q, f->rows, f->out, &ao, &st, &err), ETACAL_OK);
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    assert_int_equal(etacal_apply_write_summary(q, "orders.csv", &ao, &st, &out, &err), ETACAL_OK);
    assert_non_null(ot_line(b.data, "mean promise for target 90%: "));
    assert_null(ot_line(b.data, "mean promise for target 80%: "));
    assert_null(ot_line(b.data, "on time"));
    assert_int_equal(ot_lines(b.data), 2);
    ot_buf_free(&b);

    size_t bad[] = {2};
    ao.targets = bad;
    out = ot_buf_sink(&b);
    assert_int_equal(etacal_apply_write_summary(q, "orders.csv", &ao, &st, &out, &err), ETACAL_EINVAL);
    assert_int_equal(b.len, 0);
    ao.targets = sel;
    for (size_t stop = 0; stop < 100; stop += 60) {
        ot_stop so = {stop, 0};
        etacal_sink s = ot_stop_sink(&so);
        assert_int_equal(etacal_apply_write_summary(q, "orders.csv", &ao, &st, &s, &err), ETACAL_EIO);
    }
    ot_buf_free(&b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_summary, setup, teardown),
        cmocka_unit_test_setup_teardown(test_selected, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
