/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_out_fit.c: the fit summary writer (etacal_fit_write_summary) on a
 * small fitted table with a thin segment and a holdout: the heading counts
 * are the run's, a segment's coverage figures are those of the Beta law of
 * the conformal bound (mean k/(n+1), lower quantile from GSL's inverse Beta
 * CDF), the thin segment names the row it is pooled in, the held-out
 * intervals are Wilson's in closed form; a sink that refuses bytes gives
 * ETACAL_EIO. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "testutil.h"
#include "outfixture.h"

#define NROWS 1500

typedef struct fixture {
    tu_dir d;
    char path[600];
    etacal_fitspec s;
    etacal_fit_run *run;
} fixture;

static const char *const keys[] = {"zone"};
static const double targets[] = {0.8, 0.9};

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    tu_dir_make(&f->d);
    ot_rows(&f->d, NROWS, UINT64_C(0x5eed0f17), f->path, sizeof f->path);
    etacal_fitspec_init(&f->s);
    f->s.actual = "actual_s";
    f->s.pred = "pred_s";
    f->s.keys = keys;
    f->s.nkeys = 1;
    f->s.targets = targets;
    f->s.ntargets = 2;
    f->s.min_rows = 100;
    f->s.confidence = 0.9;
    f->s.holdout = 0.2;
    etacal_error err;
    assert_int_equal(etacal_fit_csv(&f->s, f->path, NULL, &f->run, &err), ETACAL_OK);
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

/* The whitespace-separated words of the line at p, up to max. */
static size_t words(const char *p, char w[][64], size_t max)
{
    size_t n = 0;
    while (*p && *p != '\n' && n < max) {
        while (*p == ' ')
            p++;
        size_t l = 0;
        while (*p && *p != ' ' && *p != '\n' && l < 63)
            w[n][l++] = *p++;
        w[n][l] = '\0';
        if (l)
            n++;
    }
    return n;
}

static long seg_of(const etacal_quotes *q, const char *zone)
{
    for (size_t g = 0; g < etacal_quotes_nsegs(q); g++)
        if (strcmp(etacal_quotes_seg_key(q, g, 0), zone) == 0)
            return (long)g;
    return -1;
}

static void test_summary(void **state)
{
    fixture *f = *state;
    const etacal_quotes *q = etacal_fit_run_quotes(f->run);
    const etacal_read_stats *st = etacal_table_stats(etacal_fit_run_rows(f->run));
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    etacal_error err;
    assert_int_equal(etacal_fit_write_summary(f->run, &f->s, "rows.csv", &out, &err), ETACAL_OK);
    assert_non_null(b.data);
    assert_true(strncmp(b.data, "etacal fit: rows.csv\n", 21) == 0);
    char want[256];
    snprintf(want, sizeof want, "rows: %zu read, %zu used, %zu left out", st->data_rows, st->kept, st->missing);
    assert_non_null(ot_line(b.data, want));
    assert_int_equal(st->data_rows, NROWS);

    /* harbour: a row of its own; its coverage figures per target */
    long g = seg_of(q, "harbour");
    assert_true(g > 0);
    const char *line = ot_line(b.data, "harbour ");
    assert_non_null(line);
    char w[16][64];
    size_t nw = words(line, w, 16);
    assert_int_equal(nw, 12); /* zone n bare (buffer min E cover) x 2, row */
    assert_string_equal(w[11], "own");
    size_t n = etacal_quotes_seg_n(q, (size_t)g);
    snprintf(want, sizeof want, "%zu", n);
    assert_string_equal(w[1], want);
    for (size_t ti = 0; ti < 2; ti++) {
        size_t k = etacal_quotes_seg_k(q, (size_t)g, ti);
        assert_true(k >= 1 && k <= n);
        /* the coverage of the k-th smallest of n exchangeable scores is
         * Beta(k, n + 1 - k) (Vovk, Gammerman & Shafer 2005; Angelopoulos
         * & Bates 2021, sec. 3.2): mean k/(n+1) */
        snprintf(want, sizeof want, "%.4f", (double)k / (double)(n + 1));
        assert_string_equal(w[5 + 4 * ti], want);
        /* with confidence 0.9: the 10% quantile of that law, cut to 4
         * decimals (one unit of the last digit for the cut) */
        double low = gsl_cdf_beta_Pinv(0.1, (double)k, (double)(n + 1 - k));
        double shown = strtod(w[6 + 4 * ti], NULL);
        assert_true(shown <= low + 1e-12 && shown > low - 1e-4);
        /* the buffer is the segment's bound */
        snprintf(want, sizeof want, "%.1f", etacal_quotes_seg_score(q, (size_t)g, ti));
        assert_string_equal(w[3 + 4 * ti], want);
    }

    /* the thin segment falls back to the global row, and says so */
    g = seg_of(q, "kiln row");
    assert_true(g > 0);
    assert_int_equal(etacal_quotes_seg_status(q, (size_t)g, 0), ETACAL_FALLBACK_FEW_ROWS);
    line = ot_line(b.data, "kiln row ");
    assert_non_null(line);
    const char *end = strchr(line, '\n');
    assert_non_null(end);
    const char *tail = "pooled in global (n < 100)";
    assert_true((size_t)(end - line) > strlen(tail));
    assert_memory_equal(end - strlen(tail), tail, strlen(tail));
    /* it shows no coverage figures: the global row's line has those of the
     * bound it gets */
    nw = words(line, w, 16);
    assert_string_equal(w[6], "-"); /* E cover at the first target */
    /* the global row's figures are those of its calibration cell: the row's
     * n (the pooled or left-over rows), not the segment's */
    for (size_t r = 0; r < etacal_quotes_nrows(q); r++) {
        etacal_quote_row row;
        assert_int_equal(etacal_quotes_row(q, r, &row), ETACAL_OK);
        if (row.seg != 0 || row.target != 0)
            continue;
        line = ot_line(b.data, "* ");
        assert_non_null(line);
        nw = words(line, w, 16);
        snprintf(want, sizeof want, "%.4f", (double)row.k / (double)(row.n + 1));
        assert_string_equal(w[5], want);
        assert_true(strtod(w[5], NULL) >= 0.8 - 1e-4); /* the first target (0.8): its mean coverage, not k over all rows */
    }

    /* the held-out rows: counts and Wilson 95% intervals overall */
    const etacal_holdout *h = etacal_fit_run_holdout(f->run);
    size_t held = etacal_fit_run_held(f->run);
    snprintf(want, sizeof want, "holdout: %zu of %d rows held out (a random 20%%), the table fitted on the other %zu\n",
             held, NROWS, NROWS - held);
    const char *ho = ot_line(b.data, want);
    assert_non_null(ho);
    line = ot_line(ho, "*");
    assert_non_null(line);
    nw = words(line, w, 16);
    assert_int_equal(nw, 2 + 3 * 3); /* *, n, (rate, (hits/n), lo-hi) x (2 targets + bare) */
    snprintf(want, sizeof want, "%zu", h->n[0]);
    assert_string_equal(w[1], want);
    for (size_t ti = 0; ti < 3; ti++) {
        size_t x = ti < 2 ? h->hits[ti] : h->bare[0];
        double lo, hi;
        ot_wilson95(x, h->n[0], &lo, &hi);
        snprintf(want, sizeof want, "(%zu/%zu)", x, h->n[0]);
        assert_string_equal(w[3 + 3 * ti], want);
        snprintf(want, sizeof want, "%.4f-%.4f", lo, hi);
        assert_string_equal(w[4 + 3 * ti], want);
    }
    ot_buf_free(&b);
}

/* The same run written twice gives the same bytes; a sink that refuses
 * bytes at once or midway gives ETACAL_EIO; no sink gives ETACAL_EINVAL. */
static void test_sinks(void **state)
{
    fixture *f = *state;
    ot_buf a = {0}, b = {0};
    etacal_sink sa = ot_buf_sink(&a), sb = ot_buf_sink(&b);
    etacal_error err;
    assert_int_equal(etacal_fit_write_summary(f->run, &f->s, "rows.csv", &sa, &err), ETACAL_OK);
    assert_int_equal(etacal_fit_write_summary(f->run, &f->s, "rows.csv", &sb, &err), ETACAL_OK);
    assert_int_equal(a.len, b.len);
    assert_memory_equal(a.data, b.data, a.len);
    size_t stops[] = {0, 37, a.len / 2};
    for (size_t i = 0; i < 3; i++) {
        ot_stop st = {stops[i], 0};
        etacal_sink s = ot_stop_sink(&st);
        assert_int_equal(etacal_fit_write_summary(f->run, &f->s, "rows.csv", &s, &err), ETACAL_EIO);
        assert_int_equal(err.code, ETACAL_EIO);
        assert_true(st.got <= stops[i]);
    }
    etacal_sink none = {NULL, NULL};
    assert_int_equal(etacal_fit_write_summary(f->run, &f->s, "rows.csv", &none, &err), ETACAL_EINVAL);
    assert_int_equal(etacal_fit_write_summary(f->run, &f->s, "rows.csv", NULL, &err), ETACAL_EINVAL);
    ot_buf_free(&a);
    ot_buf_free(&b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_summary, setup, teardown),
        cmocka_unit_test_setup_teardown(test_sinks, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
