/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_out_backtest.c: the writers of a backtest's result (out_backtest.c,
 * etacal_backtest_write) on a hand-made result of three periods: one with a
 * finite promise (18 of 20 on time), one without orders, one unbounded (5
 * of 5).  The on-time rates' 95% intervals are checked against the Wilson
 * (1927) formula worked out here; times against a known instant
 * (1700000000 s after the epoch is 2023-11-14T22:13:20Z).  JSON is read
 * back with json_loads.  A refusing sink gives ETACAL_EIO; every
 * allocation failing in turn gives the normal bytes or out of memory. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <jansson.h>
#include <math.h>

#include "testutil.h"
#include "outtest.h"

#define T0 1700000000.0
#define DAY 86400.0

static etacal_backtest_period periods[] = {
    {T0, T0 + DAY, 140, 20, 18, 0.9, 312.25, ETACAL_BT_FINITE},
    {T0 + DAY, T0 + 2 * DAY, 150, 0, 0, 0.9, NAN, ETACAL_BT_FINITE},
    {T0 + 2 * DAY, T0 + 3 * DAY, 3, 5, 5, 0.9, NAN, ETACAL_BT_UNBOUNDED},
};

static const etacal_backtest_result result = {3, periods, 25, 23, 312.25, 1, 20, 1, 5, 0, 0};
static const etacal_backtest_opts bopts = {ETACAL_METHOD_ADD, 0.9, 7 * DAY, DAY, 200, 0, 0, 0, NULL, 0, 0.5, 1};

static int writer(const void *ctx, int format, const etacal_sink *out, etacal_error *err)
{
    (void)ctx;
    return etacal_backtest_write(&result, &bopts, "orders.csv", format, out, err);
}

/* Wilson (1927) at 95%, z = Phi^-1(0.975) = 1.959963984540054. */
static void wilson(double x, double n, double *lo, double *hi)
{
    double z = 1.959963984540054, z2 = z * z;
    double c = (x + z2 / 2) / (n + z2), h = z * sqrt(x * (n - x) / n + z2 / 4) / (n + z2);
    *lo = c - h;
    *hi = c + h;
}

static char *write_ok(int format)
{
    int rc;
    etacal_error err;
    char *s = ot_write(writer, NULL, format, &rc, &err);
    if (!s)
        fail_msg("format %d: %d %s", format, rc, err.msg);
    return s;
}

static void test_text(void **state)
{
    (void)state;
    char *s = write_ok(ETACAL_FORMAT_TEXT);
    const char *head = "etacal backtest: orders.csv, target 90%, method add, window 168 h, period 24 h\n"
                       "calibration: orders placed in the window before the period start and delivered by it "
                       "(placed + actual <= start), as the nightly job saw them\n";
    assert_true(strncmp(s, head, strlen(head)) == 0);
    double lo, hi;
    char want[160];
    wilson(18, 20, &lo, &hi);
    snprintf(want, sizeof want, "2023-11-14T22:13:20Z    140  20  90.00%% (18/20)  %.4f-%.4f        5.20  0.9000\n",
             lo, hi);
    assert_non_null(strstr(s, want));
    assert_non_null(strstr(s, "2023-11-15T22:13:20Z    150   0               -                          -  0.9000\n"));
    assert_non_null(strstr(s, "unbounded  0.9000\n"));
    wilson(23, 25, &lo, &hi);
    snprintf(want, sizeof want,
             "\noverall: 92.00%% on time (23/25), 95%% CI %.4f-%.4f, mean buffer 5.20 min over the 20 orders", lo,
             hi);
    assert_non_null(strstr(s, want));
    assert_non_null(strstr(s, "promises: 1 period finite (20 orders), 1 unbounded (5 orders, all on time), "
                              "0 none (0 orders, all late)\n"));
    free(s);
}

static void test_csv(void **state)
{
    (void)state;
    char *s = write_ok(ETACAL_FORMAT_CSV);
    double lo, hi;
    wilson(18, 20, &lo, &hi);
    char want[1024];
    snprintf(want, sizeof want,
             "period_start,period_end,calib,n,hits,on_time,ci_low,ci_high,mean_buffer_s,level,promise\n"
             "2023-11-14T22:13:20Z,2023-11-15T22:13:20Z,140,20,18,0.9,%.10g,%.10g,312.25,0.9,finite\n"
             "2023-11-15T22:13:20Z,2023-11-16T22:13:20Z,150,0,0,,,,,0.9,\n",
             lo, hi);
    assert_true(strncmp(s, want, strlen(want)) == 0);
    wilson(5, 5, &lo, &hi);
    snprintf(want, sizeof want, "2023-11-16T22:13:20Z,2023-11-17T22:13:20Z,3,5,5,1,%.10g,%.10g,,0.9,unbounded\n",
             lo, hi);
    assert_non_null(strstr(s, want));
    free(s);
}

static void check_rate(json_t *o, int n, int hits)
{
    assert_int_equal(json_integer_value(json_object_get(o, "n")), n);
    assert_int_equal(json_integer_value(json_object_get(o, "hits")), hits);
    json_t *ci = json_object_get(o, "ci");
    assert_int_equal(json_array_size(ci), 2);
    if (n == 0) {
        assert_true(json_is_null(json_object_get(o, "on_time")));
        assert_true(json_is_null(json_array_get(ci, 0)));
        assert_true(json_is_null(json_array_get(ci, 1)));
        return;
    }
    double lo, hi;
    wilson(hits, n, &lo, &hi);
    assert_true(tu_close(json_number_value(json_object_get(o, "on_time")), (double)hits / n, 1e-9));
    assert_true(tu_close(json_real_value(json_array_get(ci, 0)), lo, 1e-9));
    assert_true(tu_close(json_real_value(json_array_get(ci, 1)), hi, 1e-9));
}

static void test_json(void **state)
{
    (void)state;
    char *s = write_ok(ETACAL_FORMAT_JSON);
    json_error_t je;
    json_t *root = json_loads(s, 0, &je);
    if (!root)
        fail_msg("JSON does not parse: %s at line %d", je.text, je.line);
    assert_string_equal(json_string_value(json_object_get(root, "etacal")), ETACAL_VERSION);
    assert_string_equal(json_string_value(json_object_get(root, "file")), "orders.csv");
    assert_true(tu_close(json_real_value(json_object_get(root, "target")), 0.9, 1e-12));
    assert_true(tu_close(json_real_value(json_object_get(root, "window_s")), 7 * DAY, 1e-12));
    assert_true(tu_close(json_real_value(json_object_get(root, "every_s")), DAY, 1e-12));
    assert_non_null(strstr(json_string_value(json_object_get(root, "calibration")), "placed + actual <= start"));
    json_t *ps = json_object_get(root, "periods");
    assert_int_equal(json_array_size(ps), 3);
    static const char *starts[] = {"2023-11-14T22:13:20Z", "2023-11-15T22:13:20Z", "2023-11-16T22:13:20Z"};
    static const char *promise[] = {"finite", NULL, "unbounded"};
    for (size_t k = 0; k < 3; k++) {
        json_t *p = json_array_get(ps, k);
        assert_string_equal(json_string_value(json_object_get(p, "start")), starts[k]);
        if (k < 2)
            assert_string_equal(json_string_value(json_object_get(p, "end")), starts[k + 1]);
        assert_int_equal(json_integer_value(json_object_get(p, "calib")), periods[k].calib);
        check_rate(p, (int)periods[k].n, (int)periods[k].hits);
        assert_true(tu_close(json_real_value(json_object_get(p, "level")), 0.9, 1e-12));
        if (promise[k])
            assert_string_equal(json_string_value(json_object_get(p, "promise")), promise[k]);
        else
            assert_true(json_is_null(json_object_get(p, "promise")));
    }
    assert_true(tu_close(json_real_value(json_object_get(json_array_get(ps, 0), "mean_buffer_s")), 312.25, 1e-12));
    assert_true(json_is_null(json_object_get(json_array_get(ps, 2), "mean_buffer_s")));
    json_t *all = json_object_get(root, "overall");
    check_rate(all, 25, 23);
    json_t *pr = json_object_get(root, "promises");
    assert_int_equal(json_integer_value(json_object_get(json_object_get(pr, "finite"), "n")), 20);
    assert_int_equal(json_integer_value(json_object_get(json_object_get(pr, "unbounded"), "periods")), 1);
    assert_int_equal(json_integer_value(json_object_get(json_object_get(pr, "none"), "n")), 0);
    json_decref(root);
    free(s);
}

static void test_errors(void **state)
{
    (void)state;
    etacal_error err;
    for (int fmt = ETACAL_FORMAT_TEXT; fmt <= ETACAL_FORMAT_JSON; fmt++) {
        etacal_sink refusing = {ot_refuse, NULL};
        assert_int_equal(etacal_backtest_write(&result, &bopts, "x", fmt, &refusing, &err), ETACAL_EIO);
    }
    ot_buf b;
    ot_buf_init(&b, 4096);
    etacal_sink s = {ot_buf_write, &b};
    assert_int_equal(etacal_backtest_write(&result, &bopts, "x", -1, &s, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_backtest_write(&result, NULL, "x", ETACAL_FORMAT_CSV, &s, &err), ETACAL_EINVAL);
    assert_int_equal(b.len, 0);
    free(b.p);
}

static void test_out_of_memory(void **state)
{
    (void)state;
    OT_NEED_FAILALLOC();
    for (int fmt = ETACAL_FORMAT_TEXT; fmt <= ETACAL_FORMAT_JSON; fmt++) {
        char *want = write_ok(fmt);
        unsigned long oom = ot_walk_oom(writer, NULL, fmt, want);
        print_message("format %d: %lu allocations failing in turn reported out of memory\n", fmt, oom);
        assert_true(oom >= 1);
        free(want);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_text),   cmocka_unit_test(test_csv),           cmocka_unit_test(test_json),
        cmocka_unit_test(test_errors), cmocka_unit_test(test_out_of_memory),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
