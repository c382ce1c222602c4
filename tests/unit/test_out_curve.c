/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_out_curve.c: the cost curve's writers (etacal_curve_write) on a
 * small curve with segments: the JSON parsed back (json_loads) holds the
 * curve's numbers, and its intervals are Wilson's in closed form; the CSV
 * has one line per segment and target with the same numbers; the text
 * names the run; a sink that refuses bytes gives ETACAL_EIO in every
 * format; an unknown format ETACAL_EINVAL. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "testutil.h"
#include "outfixture.h"

#define NROWS 1200

typedef struct fixture {
    tu_dir d;
    char path[600];
    etacal_fitspec s;
    etacal_fit_run *run;
    etacal_curve cv;
} fixture;

static const char *const keys[] = {"zone"};
static const double targets[] = {0.75, 0.8, 0.85, 0.9};

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    tu_dir_make(&f->d);
    ot_rows(&f->d, NROWS, UINT64_C(0xc0ffee5), f->path, sizeof f->path);
    etacal_fitspec_init(&f->s);
    f->s.actual = "actual_s";
    f->s.pred = "pred_s";
    f->s.keys = keys;
    f->s.nkeys = 1;
    f->s.targets = targets;
    f->s.ntargets = 4;
    f->s.min_rows = 80;
    f->s.holdout = 0.25;
    f->s.time = "placed";
    etacal_error err;
    assert_int_equal(etacal_fit_csv(&f->s, f->path, NULL, &f->run, &err), ETACAL_OK);
    assert_int_equal(curve_fill(etacal_fit_run_quotes(f->run), etacal_fit_run_holdout(f->run), 0.95,
                                          &f->cv, &err),
                     ETACAL_OK);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    curve_release(&f->cv);
    etacal_fit_run_destroy(f->run);
    tu_dir_remove(&f->d);
    free(f);
    return 0;
}

static double jreal(const json_t *o, const char *k)
{
    const json_t *v = json_object_get(o, k);
    assert_non_null(v);
    return json_is_null(v) ? NAN : json_number_value(v);
}

static void test_json(void **state)
{
    fixture *f = *state;
    const etacal_quotes *q = etacal_fit_run_quotes(f->run);
    const etacal_holdout *h = etacal_fit_run_holdout(f->run);
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    etacal_error err;
    assert_int_equal(etacal_curve_write(&f->cv, f->run, &f->s, "rows.csv", ETACAL_FORMAT_JSON, &out, &err),
                     ETACAL_OK);
    json_error_t je;
    json_t *root = json_loads(b.data, 0, &je);
    if (!root)
        fail_msg("the JSON does not parse: %s at line %d", je.text, je.line);
    assert_string_equal(json_string_value(json_object_get(root, "etacal")), ETACAL_VERSION);
    assert_string_equal(json_string_value(json_object_get(root, "file")), "rows.csv");
    json_t *ho = json_object_get(root, "held_out");
    assert_int_equal(json_integer_value(json_object_get(ho, "rows")), etacal_fit_run_held(f->run));
    assert_int_equal(json_integer_value(json_object_get(ho, "of")), NROWS);
    assert_string_equal(json_string_value(json_object_get(ho, "by")), "placed");
    json_t *segs = json_object_get(root, "segments");
    assert_int_equal(json_array_size(segs), f->cv.nsegs);
    assert_true(f->cv.nsegs >= 3); /* overall and the segments with held-out rows */
    for (size_t s = 0; s < f->cv.nsegs; s++) {
        json_t *seg = json_array_get(segs, s);
        size_t g = f->cv.seg[s], hn = h->n[g];
        assert_string_equal(json_string_value(json_object_get(json_object_get(seg, "keys"), "zone")),
                            etacal_quotes_seg_key(q, g, 0));
        assert_int_equal(json_integer_value(json_object_get(seg, "held_n")), hn);
        json_t *pts = json_object_get(seg, "points");
        assert_int_equal(json_array_size(pts), 4);
        for (size_t ti = 0; ti < 4; ti++) {
            json_t *p = json_array_get(pts, ti);
            const etacal_curve_point *pt = &f->cv.pts[s * 4 + ti];
            /* numbers at 10 significant digits */
            assert_close(jreal(p, "target"), targets[ti], 1e-12);
            assert_close(jreal(p, "buffer"), pt->buffer, 1e-9);
            assert_close(jreal(p, "mean_promise_s"), pt->mean_promise_s, 1e-9);
            assert_close(jreal(p, "mean_extra_s"), pt->mean_extra_s, 1e-9);
            if (ti == 0)
                assert_true(json_is_null(json_object_get(p, "marginal_s_per_point")));
            else
                assert_close(jreal(p, "marginal_s_per_point"), pt->marginal_s_per_point, 1e-9);
            size_t hits = (size_t)json_integer_value(json_object_get(p, "held_hits"));
            assert_int_equal(hits, pt->hits);
            assert_int_equal(json_integer_value(json_object_get(p, "held_n")), hn);
            assert_close(jreal(p, "on_time"), (double)hits / (double)hn, 1e-9);
            double lo, hi;
            ot_wilson95(hits, hn, &lo, &hi);
            json_t *ci = json_object_get(p, "ci");
            assert_int_equal(json_array_size(ci), 2);
            assert_close(json_number_value(json_array_get(ci, 0)), lo, 1e-8);
            assert_close(json_number_value(json_array_get(ci, 1)), hi, 1e-8);
        }
    }
    json_decref(root);
    ot_buf_free(&b);
}

static void test_csv_text(void **state)
{
    fixture *f = *state;
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    etacal_error err;
    assert_int_equal(etacal_curve_write(&f->cv, f->run, &f->s, "rows.csv", ETACAL_FORMAT_CSV, &out, &err),
                     ETACAL_OK);
    const char *head = "zone,target,buffer,mean_promise_s,mean_extra_s,marginal_s_per_point,held_n,held_hits,"
                       "on_time,ci_low,ci_high\n";
    assert_true(strncmp(b.data, head, strlen(head)) == 0);
    assert_int_equal(ot_lines(b.data), 1 + f->cv.nsegs * 4);
    /* the overall first line: "*,0.75,buffer,..." with the curve's numbers */
    const char *l = b.data + strlen(head);
    double t, buf, mp, me;
    assert_int_equal(sscanf(l, "*,%lf,%lf,%lf,%lf,,", &t, &buf, &mp, &me), 4);
    assert_close(t, 0.75, 1e-12);
    assert_close(buf, f->cv.pts[0].buffer, 1e-9);
    assert_close(mp, f->cv.pts[0].mean_promise_s, 1e-9);
    assert_close(me, f->cv.pts[0].mean_extra_s, 1e-9);
    ot_buf_free(&b);

    out = ot_buf_sink(&b);
    assert_int_equal(etacal_curve_write(&f->cv, f->run, &f->s, "rows.csv", ETACAL_FORMAT_TEXT, &out, &err),
                     ETACAL_OK);
    char want[200];
    size_t held = etacal_fit_run_held(f->run);
    snprintf(want, sizeof want,
             "etacal curve: rows.csv, method add; measured on %zu held-out rows (the latest 25%% by placed), "
             "fitted on %zu\n",
             held, NROWS - held);
    assert_true(strncmp(b.data, want, strlen(want)) == 0);
    assert_non_null(ot_line(b.data, "segment harbour"));
    assert_non_null(ot_line(b.data, "target  buffer s"));
    ot_buf_free(&b);
}

static void test_errors(void **state)
{
    fixture *f = *state;
    etacal_error err;
    for (int fmt = ETACAL_FORMAT_TEXT; fmt <= ETACAL_FORMAT_JSON; fmt++) {
        size_t stops[] = {0, 50};
        for (size_t i = 0; i < 2; i++) {
            ot_stop st = {stops[i], 0};
            etacal_sink s = ot_stop_sink(&st);
            assert_int_equal(etacal_curve_write(&f->cv, f->run, &f->s, "rows.csv", fmt, &s, &err), ETACAL_EIO);
        }
    }
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    assert_int_equal(etacal_curve_write(&f->cv, f->run, &f->s, "rows.csv", 3, &out, &err), ETACAL_EINVAL);
    assert_int_equal(b.len, 0);
    ot_buf_free(&b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_json, setup, teardown),
        cmocka_unit_test_setup_teardown(test_csv_text, setup, teardown),
        cmocka_unit_test_setup_teardown(test_errors, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
