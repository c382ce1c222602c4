/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_out_check.c: the writers of a check's result (out_check.c,
 * etacal_check_write) on a small hand-checkable check: nine promises in two
 * zones.  Text, CSV and JSON are read back (JSON with jansson's json_loads)
 * and compared field by field with values worked out by hand here: hits,
 * coverage, lateness, slack, pinball loss, and the Wilson (1927) score
 * interval from its formula.  A sink that refuses bytes gives ETACAL_EIO;
 * with the Nth allocation failing, for every N, the writer either writes
 * exactly the bytes of a normal run or says out of memory. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <jansson.h>
#include <math.h>

#include "testutil.h"
#include "outtest.h"

/* zone a: 5 orders, 3 on time (late by 20.25 and 30.75 s);
 * zone b: 4 orders, 3 on time (late by 15 s). */
static const double actual[] = {610.5, 720.25, 805, 930.75, 1011, 402.5, 515, 388.25, 640};
static const double upper[] = {700, 700, 900, 900, 1200, 450, 500, 450, 700};
static const char *const zone[] = {"a", "a", "a", "a", "a", "b", "b", "b", "b"};

typedef struct fixture {
    etacal_table *t;
    etacal_check_result *r;
    etacal_check_write_opts wo;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    etacal_colspec cols[] = {{"actual_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, "duration"},
                             {"promise_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, "bound"},
                             {"zone", ETACAL_COL_KEY, 0, NULL}};
    etacal_column_data data[] = {{.num = actual}, {.num = upper}, {.str = zone}};
    etacal_error err;
    if (etacal_table_from_arrays(cols, data, 3, 9, "orders.csv", 0, &f->t, &err) != ETACAL_OK)
        return -1;
    etacal_check_opts o = {0};
    size_t keys[] = {2};
    o.actual_col = 0;
    o.upper_col = 1;
    o.lower_col = -1;
    o.upper_level = 0.9;
    o.lower_level = NAN;
    o.key_cols = keys;
    o.nkeys = 1;
    o.confidence = 0.95;
    o.min_rows = 5; /* zone b (4 orders) is thin */
    o.gate_level = 0.05;
    if (etacal_check_run(f->t, &o, &f->r, &err) != ETACAL_OK)
        return -1;
    f->wo = (etacal_check_write_opts){"orders.csv", f->t, NULL, 1};
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    etacal_check_destroy(f->r);
    etacal_table_destroy(f->t);
    free(f);
    return 0;
}

static int writer(const void *ctx, int format, const etacal_sink *out, etacal_error *err)
{
    const fixture *f = ctx;
    return etacal_check_write(f->r, &f->wo, format, out, err);
}

/* Wilson (1927): centre (x + z^2/2)/(n + z^2), half-width
 * z sqrt(x(n-x)/n + z^2/4)/(n + z^2); z = 1.959963984540054 for 95%
 * (Phi^-1(0.975), from any normal table). */
static void wilson(double x, double n, double *lo, double *hi)
{
    double z = 1.959963984540054, z2 = z * z;
    double c = (x + z2 / 2) / (n + z2), h = z * sqrt(x * (n - x) / n + z2 / 4) / (n + z2);
    *lo = c - h;
    *hi = c + h;
}

static char *write_ok(const fixture *f, int format)
{
    int rc;
    etacal_error err;
    char *s = ot_write(writer, f, format, &rc, &err);
    if (!s)
        fail_msg("format %d: %d %s", format, rc, err.msg);
    return s;
}

static void test_text(void **state)
{
    fixture *f = *state;
    char *s = write_ok(f, ETACAL_FORMAT_TEXT);
    assert_true(strncmp(s, "etacal check: orders.csv\nrows: 9 read, 9 used, 0 left out (missing value), "
                           "0 malformed skipped\nintervals: 95% Wilson; segments with fewer than 5 rows are "
                           "marked thin\n\n",
                        strlen("etacal check: orders.csv\n")) == 0);
    assert_non_null(strstr(s, "intervals: 95% Wilson; segments with fewer than 5 rows are marked thin\n"));
    /* the overall line: 6 of 9, coverage 0.6667, under the nominal 0.9 */
    double lo, hi;
    wilson(6, 9, &lo, &hi);
    char want[128];
    snprintf(want, sizeof want, "0.6667   0.9000  %.4f-%.4f  under", lo, hi);
    assert_non_null(strstr(s, want));
    assert_non_null(strstr(s, "upper promise_s"));
    assert_non_null(strstr(s, "thin\n")); /* zone b's note */
    assert_non_null(strstr(s, "\ngate test: each figure's hits against Binomial(n, nominal)"));
    assert_non_null(strstr(s, "\ngate: "));
    free(s);
}

/* Splits a CSV line without quotes into fields (in place). */
static size_t fields(char *line, char **out, size_t max)
{
    size_t n = 0;
    for (char *p = line;; ) {
        char *c = strchr(p, ',');
        if (n < max)
            out[n] = p;
        n++;
        if (!c)
            break;
        *c = '\0';
        p = c + 1;
    }
    return n;
}

static void test_csv(void **state)
{
    fixture *f = *state;
    char *s = write_ok(f, ETACAL_FORMAT_CSV);
    const char *head = "zone,measure,column,column2,nominal,n,hits,coverage,ci_low,ci_high,status,thin,pinball,"
                       "interval_score,mean_width_s,mean_slack_s,mean_lateness_s,late,crossing_rows,p,p_holm,"
                       "verdict\n";
    assert_true(strncmp(s, head, strlen(head)) == 0);
    /* 3 records: overall, a, b */
    size_t lines = 0;
    for (const char *p = s; *p; p++)
        lines += *p == '\n';
    assert_int_equal(lines, 4);
    char *all = s + strlen(head);
    *strchr(all, '\n') = '\0';
    char *fl[32];
    assert_int_equal(fields(all, fl, 32), 22);
    assert_string_equal(fl[0], "*");
    assert_string_equal(fl[1], "upper");
    assert_string_equal(fl[2], "promise_s");
    assert_string_equal(fl[3], "");
    assert_string_equal(fl[4], "0.9");
    assert_string_equal(fl[5], "9");
    assert_string_equal(fl[6], "6");
    assert_true(tu_close(strtod(fl[7], NULL), 6.0 / 9, 1e-9));
    double lo, hi;
    wilson(6, 9, &lo, &hi);
    assert_true(tu_close(strtod(fl[8], NULL), lo, 1e-9));
    assert_true(tu_close(strtod(fl[9], NULL), hi, 1e-9));
    assert_string_equal(fl[10], "under");
    assert_string_equal(fl[11], "0");
    /* pinball at 0.9: (0.1 x 542.75 of slack + 0.9 x 66 s late) / 9 */
    assert_true(tu_close(strtod(fl[12], NULL), (0.1 * 542.75 + 0.9 * 66) / 9, 1e-9));
    assert_string_equal(fl[13], ""); /* no interval score for a promise */
    assert_string_equal(fl[14], "");
    assert_true(tu_close(strtod(fl[15], NULL), 542.75 / 6, 1e-9));
    assert_true(tu_close(strtod(fl[16], NULL), 66.0 / 3, 1e-9));
    assert_string_equal(fl[17], "3");
    assert_string_equal(fl[18], "");
    assert_true(tu_close(strtod(fl[19], NULL), f->r->segs[0].m[0].p, 1e-9));
    free(s);
}

static void test_json(void **state)
{
    fixture *f = *state;
    char *s = write_ok(f, ETACAL_FORMAT_JSON);
    json_error_t je;
    json_t *root = json_loads(s, 0, &je);
    if (!root)
        fail_msg("JSON does not parse: %s at line %d", je.text, je.line);
    assert_string_equal(json_string_value(json_object_get(root, "etacal")), ETACAL_VERSION);
    assert_string_equal(json_string_value(json_object_get(root, "file")), "orders.csv");
    json_t *rows = json_object_get(root, "rows");
    assert_int_equal(json_integer_value(json_object_get(rows, "read")), 9);
    assert_int_equal(json_integer_value(json_object_get(rows, "used")), 9);
    assert_true(tu_close(json_real_value(json_object_get(root, "confidence")), 0.95, 1e-12));
    assert_string_equal(json_string_value(json_object_get(root, "ci")), "wilson");
    assert_int_equal(json_integer_value(json_object_get(root, "min_rows")), 5);
    assert_string_equal(json_string_value(json_array_get(json_object_get(root, "keys"), 0)), "zone");
    json_t *segs = json_object_get(root, "segments");
    assert_int_equal(json_array_size(segs), 3);
    static const struct {
        const char *zone;
        int n, hits, thin;
    } want[] = {{"*", 9, 6, 0}, {"a", 5, 3, 0}, {"b", 4, 3, 1}};
    for (size_t g = 0; g < 3; g++) {
        json_t *sg = json_array_get(segs, g);
        assert_string_equal(json_string_value(json_object_get(json_object_get(sg, "keys"), "zone")), want[g].zone);
        assert_int_equal(json_is_true(json_object_get(sg, "overall")), g == 0);
        assert_int_equal(json_integer_value(json_object_get(sg, "n")), want[g].n);
        assert_int_equal(json_is_true(json_object_get(sg, "thin")), want[g].thin);
        assert_true(json_is_null(json_object_get(sg, "crossing_rows")));
        json_t *m = json_array_get(json_object_get(sg, "measures"), 0);
        assert_string_equal(json_string_value(json_object_get(m, "measure")), "upper");
        assert_string_equal(json_string_value(json_object_get(m, "column")), "promise_s");
        assert_null(json_object_get(m, "lower_column"));
        assert_int_equal(json_integer_value(json_object_get(m, "n")), want[g].n);
        assert_int_equal(json_integer_value(json_object_get(m, "hits")), want[g].hits);
        assert_int_equal(json_integer_value(json_object_get(m, "late")), want[g].n - want[g].hits);
        assert_true(tu_close(json_real_value(json_object_get(m, "coverage")), (double)want[g].hits / want[g].n,
                             1e-9));
        double lo, hi;
        wilson(want[g].hits, want[g].n, &lo, &hi);
        json_t *ci = json_object_get(m, "ci");
        assert_true(tu_close(json_real_value(json_array_get(ci, 0)), lo, 1e-9));
        assert_true(tu_close(json_real_value(json_array_get(ci, 1)), hi, 1e-9));
        assert_true(json_is_null(json_object_get(m, "interval_score")));
        assert_true(json_is_null(json_object_get(m, "mean_width_s")));
        /* with the gate: p and a verdict ("thin" for zone b, not tested) */
        assert_non_null(json_object_get(m, "p_holm"));
        if (want[g].thin) {
            assert_string_equal(json_string_value(json_object_get(m, "verdict")), "thin");
            assert_true(json_is_null(json_object_get(m, "p")));
        } else {
            assert_true(tu_close(json_real_value(json_object_get(m, "p")), f->r->segs[g].m[0].p, 1e-9));
        }
    }
    json_t *all = json_array_get(json_object_get(json_array_get(segs, 0), "measures"), 0);
    assert_true(tu_close(json_real_value(json_object_get(all, "mean_slack_s")), 542.75 / 6, 1e-9));
    assert_true(tu_close(json_real_value(json_object_get(all, "mean_lateness_s")), 22, 1e-9));
    assert_true(tu_close(json_real_value(json_object_get(all, "pinball")), (0.1 * 542.75 + 0.9 * 66) / 9, 1e-9));
    json_t *gate = json_object_get(root, "gate");
    assert_string_equal(json_string_value(json_object_get(gate, "law")), "binomial");
    assert_int_equal(json_integer_value(json_object_get(gate, "tests")), 2); /* overall and zone a */
    assert_int_equal(json_is_true(json_object_get(gate, "failed")), f->r->gate_failed);
    assert_false(json_is_true(json_object_get(gate, "calibration_noise_accounted")));
    json_decref(root);
    free(s);

    /* without the gate: no tests written, "gate" null */
    f->wo.gate = 0;
    s = write_ok(f, ETACAL_FORMAT_JSON);
    f->wo.gate = 1;
    root = json_loads(s, 0, &je);
    assert_non_null(root);
    assert_true(json_is_null(json_object_get(root, "gate")));
    assert_null(json_object_get(json_array_get(json_object_get(json_array_get(json_object_get(root, "segments"), 0),
                                                              "measures"),
                                               0),
                                "verdict"));
    json_decref(root);
    free(s);
}

static void test_errors(void **state)
{
    fixture *f = *state;
    etacal_error err;
    for (int fmt = ETACAL_FORMAT_TEXT; fmt <= ETACAL_FORMAT_JSON; fmt++) {
        etacal_sink refusing = {ot_refuse, NULL};
        etacal_error_clear(&err);
        assert_int_equal(etacal_check_write(f->r, &f->wo, fmt, &refusing, &err), ETACAL_EIO);
        assert_int_equal(err.code, ETACAL_EIO);
    }
    ot_buf b;
    ot_buf_init(&b, 4096);
    etacal_sink s = {ot_buf_write, &b};
    assert_int_equal(etacal_check_write(f->r, &f->wo, 7, &s, &err), ETACAL_EINVAL);
    assert_int_equal(b.len, 0);
    etacal_sink none = {NULL, NULL};
    assert_int_equal(etacal_check_write(f->r, &f->wo, ETACAL_FORMAT_CSV, &none, &err), ETACAL_EINVAL);
    etacal_check_write_opts no_table = {"x.csv", NULL, NULL, 0};
    assert_int_equal(etacal_check_write(f->r, &no_table, ETACAL_FORMAT_CSV, &s, &err), ETACAL_EINVAL);
    free(b.p);
}

static void test_out_of_memory(void **state)
{
    OT_NEED_FAILALLOC();
    fixture *f = *state;
    for (int fmt = ETACAL_FORMAT_TEXT; fmt <= ETACAL_FORMAT_JSON; fmt++) {
        char *want = write_ok(f, fmt);
        unsigned long oom = ot_walk_oom(writer, f, fmt, want);
        print_message("format %d: %lu allocations failing in turn reported out of memory\n", fmt, oom);
        /* the sink's stream, and the text tables' or JSON's allocations */
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
    return cmocka_run_group_tests(tests, setup, teardown);
}
