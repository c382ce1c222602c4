/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_predict.c: fitted quantile regressions applied to a CSV stream
 * (src/predict.c, qr_predict_csv), against the contract in
 * include/etacal/quantreg.h.
 *
 * What each check is measured against:
 * - the records: every input record (quoted fields, embedded line breaks,
 *   CRLF, a last line without a line break) must come out byte for byte,
 *   followed by the delimiter and one q_<pct> field per level, then the
 *   record's own terminator ("\n" when it had none);
 * - the values: the formula of quantreg.h, coef[t p] + sum_j coef[t p + 1
 *   + j] clamp(x_j, x_min_j, x_max_j), then the monotone rearrangement of
 *   Chernozhukov, Fernandez-Val & Galichon (2010), which the test takes from
 *   etacal_rearrange on the same values (its own tests compare it with R),
 *   then the floor, then the nearest millisecond;
 * - one crossing case worked by hand (below, in test_by_hand) from the
 *   definition in quantreg.h: the rearranged value at level tau is the
 *   (tau - tau_0)-quantile of the piecewise-linear curve's values;
 * - the stats struct counted by the test row by row (missing covariates,
 *   malformed rows skipped, rows with a covariate clamped, rows floored);
 * - each error's code, FILE:LINE and message. */
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

/* Runs the prediction on text; the output in *outp (free it). */
static int run(tu_dir *d, const char *text, size_t len, const double *coef, const double *taus, size_t ntau, size_t k,
               const char *const *xnames, const etacal_qr_predict_opts *o, etacal_qr_predict_stats *st, char *path,
               size_t pathsize, char **outp, etacal_error *err)
{
    tu_write_bytes(d, "in.csv", text, len, path, pathsize);
    size_t outlen = 0;
    *outp = NULL;
    FILE *os = open_memstream(outp, &outlen);
    assert_non_null(os);
    etacal_error_clear(err);
    int rc = qr_predict_csv(coef, taus, ntau, k, xnames, path, os, o, st, err);
    assert_int_equal(fclose(os), 0);
    return rc;
}

/* One covariate dist_km; levels .1, .5, .9:
 *   q_10 = 120 + 40 d,  q_50 = 300 + 10 d,  q_90 = 500 + 5 d,
 * which cross for d > 6 (120 + 40 d > 300 + 10 d).  Range of d [-4, 12],
 * floor 0.
 * - d = 2: 200, 320, 510, ascending: unchanged.
 * - d = 10: 520, 400, 550.  The curve falls 520 -> 400 on [.1, .5] and rises
 *   400 -> 550 on [.5, .9].  Rearranged: q_10 = the minimum 400, q_90 = the
 *   maximum 550, q_50 = the y where the levels with a value <= y measure
 *   .5 - .1 = .4: for y in [400, 520] that is .4 (y - 400)/120 on the first
 *   piece plus .4 (y - 400)/150 on the second, .006 (y - 400) = .4, y =
 *   466.666..., written 466.667 (a sort would give 520).
 * - d = 20, clamped to 12: 600, 420, 560; q_50: .4 (y - 420)(1/180 + 1/140)
 *   = .4, y - 420 = 78.75: 420, 498.75, 600.
 * - d = -5, clamped to -4: -40, 260, 480; q_10 floored: 0, 260, 480.
 * - d = -3.01: -0.4, 269.9, 484.95; q_10 just below the floor: 0.
 * - d empty, then NA: empty predictions. */
static void test_by_hand(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    const double coef[] = {120, 40, 300, 10, 500, 5};
    const double taus[] = {0.1, 0.5, 0.9};
    const char *xn[] = {"dist_km"};
    const double lo[] = {-4}, hi[] = {12};
    etacal_qr_predict_opts o = {0, ETACAL_BAD_ROWS_ERROR, lo, hi, 0};
    etacal_qr_predict_stats st;
    etacal_error err;
    char path[600], *out;
    const char *in = "id,dist_km\na,2\nb,10\nc,20\nd,-5\ne,\nf,NA\ng,-3.01\n";
    assert_int_equal(run(&d, in, strlen(in), coef, taus, 3, 1, xn, &o, &st, path, sizeof path, &out, &err), ETACAL_OK);
    assert_string_equal(out, "id,dist_km,q_10,q_50,q_90\n"
                             "a,2,200,320,510\n"
                             "b,10,400,466.667,550\n"
                             "c,20,420,498.75,600\n"
                             "d,-5,0,260,480\n"
                             "e,,,,\n"
                             "f,NA,,,\n"
                             "g,-3.01,0,269.9,484.95\n");
    free(out);
    assert_int_equal(st.rows, 7);
    assert_int_equal(st.missing, 2);
    assert_int_equal(st.bad, 0);
    assert_int_equal(st.clamped, 2);
    assert_int_equal(st.floored, 2);
    /* The crossing row against etacal_rearrange, and not the sort. */
    double q[3] = {520, 400, 550};
    assert_int_equal(etacal_rearrange(taus, q, 3, &err), ETACAL_OK);
    assert_close(q[1], 1400.0 / 3, 1e-13);
    /* Without ranges and floor: d = 20 and -5 as they are.  d = 20: 920,
     * 500, 600: q_10 = 500, q_90 = 920; q_50 for y in [500, 600]: .4 (y -
     * 500)/420 + .4 (y - 500)/100 = .4, y = 500 + 1/(1/420 + 1/100) =
     * 580.769...; d = -5: -80, 250, 475, ascending, kept negative. */
    etacal_qr_predict_opts o2 = {0, ETACAL_BAD_ROWS_ERROR, NULL, NULL, -INFINITY};
    in = "id,dist_km\nc,20\nd,-5\n";
    assert_int_equal(run(&d, in, strlen(in), coef, taus, 3, 1, xn, &o2, &st, path, sizeof path, &out, &err), ETACAL_OK);
    assert_string_equal(out, "id,dist_km,q_10,q_50,q_90\nc,20,500,580.769,920\nd,-5,-80,250,475\n");
    free(out);
    assert_int_equal(st.clamped, 0);
    assert_int_equal(st.floored, 0);
    /* A byte-order mark is no part of the first record (internal.h:
     * csvstream drops it): the header's column is found, and the copy of
     * the header starts at its first name. */
    in = "\xEF\xBB\xBF"
         "dist_km,id\r\n2,a\r\n";
    assert_int_equal(run(&d, in, strlen(in), coef, taus, 3, 1, xn, &o2, &st, path, sizeof path, &out, &err), ETACAL_OK);
    assert_string_equal(out, "dist_km,id,q_10,q_50,q_90\r\n2,a,200,320,510\r\n");
    free(out);
    tu_dir_remove(&d);
}

/* Formats v, already a whole number of milliseconds, as the writer must:
 * up to three decimals, trailing zeros dropped. */
static void fmt_ms(double v, char *buf, size_t size)
{
    snprintf(buf, size, "%.3f", v);
    char *dot = strchr(buf, '.');
    if (dot) {
        char *e = buf + strlen(buf);
        while (e > dot + 1 && e[-1] == '0')
            *--e = '\0';
        if (e == dot + 1)
            *dot = '\0';
    }
    if (strcmp(buf, "-0") == 0)
        strcpy(buf, "0");
}

/* Random rows: two covariates in the file in another order than the fit's,
 * quoted notes with delimiters and line breaks, missing and malformed
 * values, and a last record without a line break.  Expected output built
 * row by row. */
static void random_case(uint64_t seed, char delim, int crlf, int skip)
{
    tu_dir d;
    tu_dir_make(&d);
    enum { N = 400 };
    const double taus[] = {0.05, 0.25, 0.5, 0.9, 0.975};
    enum { T = 5 };
    /* per level: intercept, dist_km, items (they cross in places) */
    const double coef[T * 3] = {180.625, 35.25,  -4.875, 240.5,  28.125, 3.25,   310.375, 21.5,
                                7.625,   455.25, 9.875,  12.125, 601.75, 4.0625, 18.5};
    const char *xn[] = {"dist_km", "items"};
    const double lo[] = {0.35, 1}, hi[] = {14.5, 9};
    etacal_qr_predict_opts o = {delim, skip ? ETACAL_BAD_ROWS_SKIP : ETACAL_BAD_ROWS_ERROR, lo, hi, 150.5};
    char dl = delim ? delim : ',';
    const char *eol = crlf ? "\r\n" : "\n";
    tu_rng g = {seed};
    size_t cap = 1 << 16, n = 0, ecap = 1 << 17, en = 0;
    char *in = malloc(cap), *want = malloc(ecap);
    assert_true(in && want);
#define PUT(buf, len, capv, ...)                                                                                       \
    do {                                                                                                               \
        int w_ = snprintf(buf + len, capv - len, __VA_ARGS__);                                                         \
        assert_true(w_ >= 0 && (size_t)w_ < capv - len);                                                               \
        len += (size_t)w_;                                                                                             \
    } while (0)
    PUT(in, n, cap, "order_id%citems%cnote%cdist_km%s", dl, dl, dl, eol);
    PUT(want, en, ecap, "order_id%citems%cnote%cdist_km%cq_5%cq_25%cq_50%cq_90%cq_97.5%s", dl, dl, dl, dl, dl, dl, dl,
        dl, eol);
    etacal_qr_predict_stats exp = {0};
    size_t crossed = 0;
    for (size_t i = 0; i < N; i++) {
        size_t start = n;
        double dist = nearbyint((-2 + 20 * tu_unif(&g)) * 1000) / 1000;
        double items = (double)tu_below(&g, 12);
        int kind = (int)tu_below(&g, 20); /* 0: dist missing, 1: items NA, 2: bad number, 3: extra field */
        char dtxt[32], itxt[32];
        snprintf(dtxt, sizeof dtxt, "%.3f", dist);
        snprintf(itxt, sizeof itxt, "%.0f", items);
        if (kind == 0)
            dtxt[0] = '\0';
        if (kind == 1)
            strcpy(itxt, "NA");
        if (kind == 2)
            strcpy(dtxt, "12,5km");
        const char *note = tu_below(&g, 4) == 0 ? "\"late; \"\"ring\"\", bell\nthen gate\"" : "plain";
        if (kind == 2)
            PUT(in, n, cap, "A-%zu%c%s%c%s%c\"%s\"", i, dl, itxt, dl, note, dl, dtxt);
        else
            PUT(in, n, cap, "A-%zu%c%s%c%s%c%s", i, dl, itxt, dl, note, dl, dtxt);
        if (kind == 3)
            PUT(in, n, cap, "%cextra", dl);
        int last = i + 1 == N;
        if (!last)
            PUT(in, n, cap, "%s", eol);
        /* expected: the record's bytes without its terminator, then the fields */
        size_t reclen = n - start - (last ? 0 : strlen(eol));
        assert_true(en + reclen < ecap);
        memcpy(want + en, in + start, reclen);
        en += reclen;
        int missing = kind == 0 || kind == 1, bad = kind == 2 || kind == 3;
        exp.rows++;
        exp.missing += missing && !bad;
        exp.bad += bad;
        if (missing || bad) {
            for (size_t t = 0; t < T; t++)
                PUT(want, en, ecap, "%c", dl);
        } else {
            double x[2] = {dist, items};
            int moved = 0, low = 0;
            for (size_t j = 0; j < 2; j++)
                if (x[j] < lo[j] || x[j] > hi[j]) {
                    x[j] = x[j] < lo[j] ? lo[j] : hi[j];
                    moved = 1;
                }
            double q[T];
            for (size_t t = 0; t < T; t++)
                q[t] = coef[t * 3] + coef[t * 3 + 1] * x[0] + coef[t * 3 + 2] * x[1];
            for (size_t t = 1; t < T; t++)
                if (q[t] < q[t - 1]) {
                    crossed++;
                    break;
                }
            etacal_error e2;
            assert_int_equal(etacal_rearrange(taus, q, T, &e2), ETACAL_OK);
            for (size_t t = 0; t < T; t++)
                if (q[t] < o.floor) {
                    q[t] = o.floor;
                    low = 1;
                }
            exp.clamped += (size_t)moved;
            exp.floored += (size_t)low;
            for (size_t t = 0; t < T; t++) {
                char b[64];
                fmt_ms(nearbyint(q[t] * 1000) / 1000, b, sizeof b);
                PUT(want, en, ecap, "%c%s", dl, b);
            }
        }
        PUT(want, en, ecap, "%s", last ? "\n" : eol);
    }
#undef PUT
    /* the data reach every case */
    assert_true(crossed > 10 && exp.clamped > 10 && exp.floored > 5 && exp.missing > 5 && exp.bad > 5);
    etacal_qr_predict_stats st;
    etacal_error err;
    char path[600], *out;
    int rc = run(&d, in, n, coef, taus, T, 2, xn, &o, &st, path, sizeof path, &out, &err);
    if (skip) {
        assert_int_equal(rc, ETACAL_OK);
        if (strcmp(out, want) != 0) {
            size_t i = 0;
            while (out[i] && out[i] == want[i])
                i++;
            fail_msg("output differs at byte %zu: got '%.60s', expected '%.60s'", i, out + i, want + i);
        }
        assert_int_equal(strlen(out), en);
        assert_int_equal(st.rows, exp.rows);
        assert_int_equal(st.missing, exp.missing);
        assert_int_equal(st.bad, exp.bad);
        assert_int_equal(st.clamped, exp.clamped);
        assert_int_equal(st.floored, exp.floored);
    } else {
        /* the first malformed row is an error at its line */
        assert_int_equal(rc, ETACAL_EPARSE);
        /* the first record holding "12,5km" (a bad number) or "extra" (a
         * field too many) */
        size_t line = 1, off = 0;
        const char *hit1 = strstr(in, "\"12,5km\""), *hit2 = strstr(in, "extra");
        const char *hit = !hit1 ? hit2 : !hit2 ? hit1 : hit1 < hit2 ? hit1 : hit2;
        assert_non_null(hit);
        assert_string_equal(err.msg, hit == hit1 ? "column 'dist_km' is not a finite number: '12,5km'"
                                                 : "5 fields, but the header has 4");
        /* back to the start of the record: its "A-" */
        const char *rs = hit;
        while (rs > in && !(rs[0] == 'A' && rs[1] == '-' && (rs[-1] == '\n')))
            rs--;
        for (off = 0; in + off < rs; off++)
            line += in[off] == '\n';
        char where[700];
        tu_where(where, sizeof where, path, line);
        assert_string_equal(err.where, where);
        assert_int_equal(err.code, ETACAL_EPARSE);
    }
    free(out);
    free(in);
    free(want);
    tu_dir_remove(&d);
}

static void test_random_rows(void **state)
{
    (void)state;
    random_case(0x51de, 0, 0, 1);
    random_case(0xfeed, ';', 1, 1);
    random_case(0x7ab5, '\t', 0, 1);
    random_case(0x51de, 0, 0, 0);
    random_case(0xfeed, ';', 1, 0);
}

static void expect_error(tu_dir *d, const char *text, const double *coef, const double *taus, size_t ntau, size_t k,
                         const char *const *xn, const etacal_qr_predict_opts *o, int code, size_t line, const char *msg)
{
    etacal_qr_predict_stats st;
    memset(&st, 0xa5, sizeof st);
    etacal_error err;
    char path[600], *out;
    int rc = run(d, text, strlen(text), coef, taus, ntau, k, xn, o, &st, path, sizeof path, &out, &err);
    free(out);
    char where[700];
    if (line == (size_t)-1)
        where[0] = '\0';
    else if (line == 0)
        snprintf(where, sizeof where, "%s", path);
    else
        tu_where(where, sizeof where, path, line);
    assert_int_equal(rc, code);
    assert_error(&err, code, where, msg);
}

static void test_errors(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    const double coef[] = {120.5, 40.25, 300.125, 10.75, 500.875, 5.5};
    const double taus[] = {0.1, 0.5, 0.9};
    const char *xn[] = {"dist_km"};
    const double lo[] = {-4.5}, hi[] = {12.25};
    etacal_qr_predict_opts o = {0, ETACAL_BAD_ROWS_ERROR, lo, hi, 0};
    const size_t NOLINE = (size_t)-1;
    /* rows */
    expect_error(&d, "id,dist_km\na,2.5\nb,abc\n", coef, taus, 3, 1, xn, &o, ETACAL_EPARSE, 3,
                 "column 'dist_km' is not a finite number: 'abc'");
    expect_error(&d, "id,dist_km\na,2.5\n\nb,inf\n", coef, taus, 3, 1, xn, &o, ETACAL_EPARSE, 4,
                 "column 'dist_km' is not a finite number: 'inf'");
    expect_error(&d, "id,dist_km\n\"a\nb\",2.5\nb,1,2\n", coef, taus, 3, 1, xn, &o, ETACAL_EPARSE, 4,
                 "3 fields, but the header has 2");
    expect_error(&d, "id,dist_km\nb\n", coef, taus, 3, 1, xn, &o, ETACAL_EPARSE, 2, "1 fields, but the header has 2");
    expect_error(&d, "id,dist_km\n\"b,2.5\n", coef, taus, 3, 1, xn, &o, ETACAL_EPARSE, 2, "unterminated quoted field");
    /* header */
    expect_error(&d, "id,dist\na,2.5\n", coef, taus, 3, 1, xn, &o, ETACAL_EINVAL, 1,
                 "no column 'dist_km' in the header (a covariate of the fit)");
    expect_error(&d, "id,q_50,dist_km\na,1,2.5\n", coef, taus, 3, 1, xn, &o, ETACAL_EINVAL, 1,
                 "the file already has a column 'q_50'");
    expect_error(&d, "", coef, taus, 3, 1, xn, &o, ETACAL_EPARSE, 0, "empty file: expected a header row");
    /* arguments */
    expect_error(&d, "id,dist_km\n", coef, taus, 0, 1, xn, &o, ETACAL_EINVAL, NOLINE, "between 1 and 32 levels");
    expect_error(&d, "id,dist_km\n", coef, taus, 33, 1, xn, &o, ETACAL_EINVAL, NOLINE, "between 1 and 32 levels");
    expect_error(&d, "id,dist_km\n", coef, taus, 3, 17, xn, &o, ETACAL_EINVAL, NOLINE, "at most 16 covariates");
    const double down[] = {0.1, 0.9, 0.5}, same[] = {0.1, 0.5, 0.5};
    expect_error(&d, "id,dist_km\n", coef, down, 3, 1, xn, &o, ETACAL_EINVAL, NOLINE,
                 "levels must be given in ascending order");
    expect_error(&d, "id,dist_km\n", coef, same, 3, 1, xn, &o, ETACAL_EINVAL, NOLINE,
                 "levels must be given in ascending order");
    etacal_qr_predict_opts o1 = {0, ETACAL_BAD_ROWS_ERROR, lo, NULL, 0};
    expect_error(&d, "id,dist_km\n", coef, taus, 3, 1, xn, &o1, ETACAL_EINVAL, NOLINE,
                 "give both ends of the covariates' ranges, or neither");
    const double nanlo[] = {NAN};
    etacal_qr_predict_opts o3 = {0, ETACAL_BAD_ROWS_ERROR, hi, lo, 0};
    expect_error(&d, "id,dist_km\n", coef, taus, 3, 1, xn, &o3, ETACAL_EINVAL, NOLINE,
                 "the range of covariate 1 is empty or not a number");
    etacal_qr_predict_opts o4 = {0, ETACAL_BAD_ROWS_ERROR, nanlo, hi, 0};
    expect_error(&d, "id,dist_km\n", coef, taus, 3, 1, xn, &o4, ETACAL_EINVAL, NOLINE,
                 "the range of covariate 1 is empty or not a number");
    etacal_qr_predict_opts o5 = {0, ETACAL_BAD_ROWS_ERROR, lo, hi, NAN};
    expect_error(&d, "id,dist_km\n", coef, taus, 3, 1, xn, &o5, ETACAL_EINVAL, NOLINE, "the floor is not a number");
    /* a missing file */
    char missing[700];
    tu_path(missing, sizeof missing, &d, "nope.csv");
    etacal_error err;
    etacal_qr_predict_stats st;
    assert_int_equal(qr_predict_csv(coef, taus, 3, 1, xn, missing, stdout, &o, &st, &err), ETACAL_EIO);
    assert_error(&err, ETACAL_EIO, missing, "cannot open: No such file or directory");
    /* a header alone: no rows, nothing counted; stats may be NULL */
    char path[600], *out;
    assert_int_equal(run(&d, "id,dist_km", 10, coef, taus, 3, 1, xn, &o, NULL, path, sizeof path, &out, &err),
                     ETACAL_OK);
    assert_string_equal(out, "id,dist_km,q_10,q_50,q_90\n");
    free(out);
    tu_dir_remove(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_by_hand),
        cmocka_unit_test(test_random_rows),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
