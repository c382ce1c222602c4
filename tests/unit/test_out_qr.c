/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_out_qr.c: quantile regression at several levels as one run
 * (qr_levels.c) and the writers of its fits (out_qr.c, etacal_qr_write).
 *
 * The run: on points on a line, y = 2 + 3x exactly, every quantile's fit
 * is that line (the check function's minimum, 0, is reached there and
 * only there); the covariate's range and the response's sign are those of
 * the data; bad levels are refused.
 *
 * The writers, on hand-made fits: a coefficient whose estimate is 2.228139
 * standard errors has the two-sided p-value 0.05 at 10 degrees of freedom
 * (Student's t table: t(0.975, 10) = 2.228); text, CSV and JSON (read back
 * with json_loads) carry the values field by field; a refusing sink gives
 * ETACAL_EIO; every allocation failing in turn gives the normal bytes or
 * out of memory.  The intercept's t = 3.75 at 10 df has the two-sided
 * p-value 0.0037838164 (2 * scipy.stats.t.sf(3.75, 10), Debian's scipy,
 * run when this test was written). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <jansson.h>
#include <math.h>

#include "testutil.h"
#include "outtest.h"

#define T975_10 2.228139

static etacal_qr_fits fits;
static const char *const xnames[] = {"income"};
static const etacal_read_stats rows = {.data_rows = 14, .kept = 12, .missing = 2};
static const etacal_qr_write_opts wo = {"engel.csv", "foodexp", xnames, &rows};

static int setup(void **state)
{
    (void)state;
    memset(&fits, 0, sizeof fits);
    fits.ntau = 2;
    fits.k = 1;
    fits.taus[0] = 0.25;
    fits.taus[1] = 0.5;
    fits.res[0] = (etacal_qr_result){2, {1.5, 0.25}, 12.5, 7, 1.234567e-7, 1, 12};
    fits.res[1] = (etacal_qr_result){2, {1.75, 0.3}, 14.0625, 9, 2.5e-8, 1, 12};
    fits.se[0][0] = 0.4;
    fits.se[0][1] = 0.25 / T975_10;
    fits.se[1][0] = fits.se[1][1] = NAN; /* none: "-", null */
    fits.bandwidth[0] = 0.3125;
    fits.bandwidth[1] = 0.28125;
    fits.se_method = ETACAL_SE_POWELL;
    return 0;
}

static int writer(const void *ctx, int format, const etacal_sink *out, etacal_error *err)
{
    (void)ctx;
    return etacal_qr_write(&fits, &wo, format, out, err);
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

static void test_fit_levels(void **state)
{
    (void)state;
    double y[10], xv[10];
    for (int i = 0; i < 10; i++) {
        xv[i] = 0.5 + 1.25 * i;
        y[i] = 2 + 3 * xv[i];
    }
    const double *x[] = {xv};
    const double taus[] = {0.2, 0.5, 0.8};
    etacal_qr_fits *f = malloc(sizeof *f);
    etacal_error err;
    assert_int_equal(etacal_qr_fit_levels(y, x, 1, 10, taus, 3, xnames, ETACAL_SE_NONE, 0, NULL, f, &err),
                     ETACAL_OK);
    assert_int_equal(f->ntau, 3);
    for (size_t t = 0; t < 3; t++) {
        assert_true(tu_close(f->res[t].coef[0], 2, 1e-6));
        assert_true(tu_close(f->res[t].coef[1], 3, 1e-6));
        assert_true(isnan(f->se[t][0]) && isnan(f->se[t][1]));
        assert_true(isnan(f->bandwidth[t]));
    }
    assert_true(f->x_min[0] == 0.5 && f->x_max[0] == 0.5 + 1.25 * 9);
    assert_int_equal(f->y_nonneg, 1);
    y[3] = -1; /* the response is no longer never negative */
    assert_int_equal(etacal_qr_fit_levels(y, x, 1, 10, taus, 1, xnames, ETACAL_SE_NONE, 0, NULL, f, &err),
                     ETACAL_OK);
    assert_int_equal(f->y_nonneg, 0);
    const double down[] = {0.5, 0.2};
    assert_int_equal(etacal_qr_fit_levels(y, x, 1, 10, down, 2, xnames, ETACAL_SE_NONE, 0, NULL, f, &err),
                     ETACAL_EINVAL);
    assert_int_equal(etacal_qr_fit_levels(y, x, 1, 0, taus, 1, xnames, ETACAL_SE_NONE, 0, NULL, f, &err),
                     ETACAL_ENUM);
    assert_int_equal(etacal_qr_fit_levels(y, x, 1, 10, taus, 1, xnames, 9, 0, NULL, f, &err), ETACAL_EINVAL);
    free(f);
}

static void test_text(void **state)
{
    (void)state;
    char *s = write_ok(ETACAL_FORMAT_TEXT);
    const char *head = "etacal qr: engel.csv\n"
                       "rows: 14 read, 12 used, 2 left out (missing value), 0 malformed skipped\n"
                       "model: foodexp ~ 1 + income\n"
                       "standard errors: Powell kernel sandwich, Hall-Sheather bandwidth (alpha 0.05)\n"
                       "\ntau 0.25: n 12, objective 12.5, iterations 7, duality gap 1.23e-07, kernel bandwidth "
                       "0.3125\n"
                       "term         estimate  std.error      t  p-value\n"
                       "(intercept)       1.5        0.4  3.750  0.00378\n"
                       "income           0.25   0.112201  2.228     0.05\n";
    char *first = strndup(s, strlen(head));
    assert_string_equal(first, head);
    free(first);
    assert_non_null(strstr(s, "(intercept)      1.75          -  -        -\n"));
    free(s);
}

static void test_csv(void **state)
{
    (void)state;
    char *s = write_ok(ETACAL_FORMAT_CSV);
    const char *head = "tau,term,estimate,std_error,t,p_value,n,objective,iterations,gap\n"
                       "0.25,(intercept),1.5,0.4,3.75,0.00378382,12,12.5,7,1.23e-07\n";
    char *first = strndup(s, strlen(head));
    /* the intercept's p-value: two-sided, t = 3.75 at 10 df:
     * 2 * scipy.stats.t.sf(3.75, 10) = 0.0037838164 (Debian's scipy, run
     * when this test was written) */
    assert_string_equal(first, head);
    free(first);
    char *x = strstr(s, "0.25,income,0.25,");
    assert_non_null(x);
    double se, t, p;
    assert_int_equal(sscanf(x + strlen("0.25,income,0.25,"), "%lf,%lf,%lf", &se, &t, &p), 3);
    assert_true(tu_close(se, 0.25 / T975_10, 1e-9));
    assert_true(tu_close(t, T975_10, 1e-9));
    assert_true(fabs(p - 0.05) < 5e-6); /* the table's t has 7 digits */
    assert_non_null(strstr(s, "0.5,income,0.3,,,,12,14.0625,9,2.5e-08\n"));
    free(s);
}

static void test_json(void **state)
{
    (void)state;
    char *s = write_ok(ETACAL_FORMAT_JSON);
    json_error_t je;
    json_t *root = json_loads(s, 0, &je);
    if (!root)
        fail_msg("JSON does not parse: %s at line %d", je.text, je.line);
    assert_string_equal(json_string_value(json_object_get(root, "file")), "engel.csv");
    assert_int_equal(json_integer_value(json_object_get(json_object_get(root, "rows"), "missing")), 2);
    assert_string_equal(json_string_value(json_object_get(root, "y")), "foodexp");
    assert_string_equal(json_string_value(json_array_get(json_object_get(root, "x"), 0)), "income");
    assert_string_equal(json_string_value(json_object_get(root, "se")), "powell");
    assert_true(json_is_null(json_object_get(root, "reps")));
    json_t *fl = json_object_get(root, "fits");
    assert_int_equal(json_array_size(fl), 2);
    json_t *f0 = json_array_get(fl, 0);
    assert_true(tu_close(json_real_value(json_object_get(f0, "tau")), 0.25, 1e-12));
    assert_int_equal(json_integer_value(json_object_get(f0, "n")), 12);
    assert_int_equal(json_integer_value(json_object_get(f0, "iterations")), 7);
    assert_true(tu_close(json_real_value(json_object_get(f0, "gap")), 1.23e-7, 1e-12));
    assert_true(tu_close(json_real_value(json_object_get(f0, "bandwidth")), 0.3125, 1e-12));
    json_t *x = json_array_get(json_object_get(f0, "terms"), 1);
    assert_string_equal(json_string_value(json_object_get(x, "term")), "income");
    assert_true(tu_close(json_real_value(json_object_get(x, "estimate")), 0.25, 1e-12));
    assert_true(tu_close(json_real_value(json_object_get(x, "t")), T975_10, 1e-10));
    assert_true(fabs(json_real_value(json_object_get(x, "p_value")) - 0.05) < 5e-6);
    json_t *x1 = json_array_get(json_object_get(json_array_get(fl, 1), "terms"), 1);
    assert_true(json_is_null(json_object_get(x1, "std_error")));
    assert_true(json_is_null(json_object_get(x1, "t")));
    assert_true(json_is_null(json_object_get(x1, "p_value")));
    json_decref(root);
    free(s);
}

static void test_errors(void **state)
{
    (void)state;
    etacal_error err;
    for (int fmt = ETACAL_FORMAT_TEXT; fmt <= ETACAL_FORMAT_JSON; fmt++) {
        etacal_sink refusing = {ot_refuse, NULL};
        assert_int_equal(etacal_qr_write(&fits, &wo, fmt, &refusing, &err), ETACAL_EIO);
    }
    ot_buf b;
    ot_buf_init(&b, 4096);
    etacal_sink s = {ot_buf_write, &b};
    assert_int_equal(etacal_qr_write(&fits, &wo, 3, &s, &err), ETACAL_EINVAL);
    etacal_qr_write_opts no_names = {"x", "y", NULL, NULL};
    assert_int_equal(etacal_qr_write(&fits, &no_names, ETACAL_FORMAT_CSV, &s, &err), ETACAL_EINVAL);
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
        cmocka_unit_test(test_fit_levels), cmocka_unit_test(test_text),   cmocka_unit_test(test_csv),
        cmocka_unit_test(test_json),       cmocka_unit_test(test_errors), cmocka_unit_test(test_out_of_memory),
    };
    return cmocka_run_group_tests(tests, setup, NULL);
}
