/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_streams.c: independent random streams from one seed (seed.c), and
 * what they are for: a random held-out share and the split of method qr,
 * asked for together, each keep their documented share and are independent
 * of each other (issue 11, part 5).
 *
 * Before the streams, both choices drew the same mt19937 sequence from the
 * same seed, so every held-out row came from the would-be fitting half: at
 * a holdout of 0.2 and a split of 0.5 the regression got 0.3/0.8 = 37.5% of
 * the rows left, and 40% of the regression rows' draws were held out.  The
 * checks below would miss those by about 30 and 50 of their standard
 * deviations. */
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
#include "testutil.h"

/* The first outputs of SplitMix64 from states 0 and 1, as printed here by
 * Java's java.util.SplittableRandom(seed).nextLong() (OpenJDK, Debian; the
 * same generator: golden gamma and Stafford's mix13), run with jshell. */
static void test_seed_stream_known_values(void **state)
{
    (void)state;
    static const uint64_t from0[] = {UINT64_C(0xe220a8397b1dcdaf), UINT64_C(0x6e789e6aa1b965f4),
                                     UINT64_C(0x06c45d188009454f), UINT64_C(0xf88bb8a8724c81ec)};
    static const uint64_t from1[] = {UINT64_C(0x910a2dec89025cc1), UINT64_C(0xbeeb8da1658eec67),
                                     UINT64_C(0xf893a2eefb32555e), UINT64_C(0x71c18690ee42c90b)};
    for (unsigned s = 1; s <= 4; s++) {
        assert_true(etacal_seed_stream(0, s) == from0[s - 1]);
        assert_true(etacal_seed_stream(1, s) == from1[s - 1]);
    }
    /* the four streams of the library get four different generator seeds
     * (mt19937 keeps the low 32 bits) for the seeds a user is likely to give */
    for (uint64_t seed = 0; seed < 1000; seed++)
        for (unsigned a = ETACAL_STREAM_HOLDOUT; a <= ETACAL_STREAM_QR_BOOT; a++)
            for (unsigned b = a + 1; b <= ETACAL_STREAM_QR_BOOT; b++)
                assert_true((uint32_t)etacal_seed_stream(seed, a) != (uint32_t)etacal_seed_stream(seed, b));
}

#define N 20000

/* |x - n p| within 4 standard deviations of Bin(n, p): a false alarm has
 * probability about 6e-5 per check (normal approximation, n p (1 - p) in
 * the thousands here); with the fixed seeds below the outcome is fixed. */
static void assert_binomial(size_t x, size_t n, double p, const char *what, unsigned long seed)
{
    double mean = (double)n * p, sd = sqrt((double)n * p * (1 - p));
    if (fabs((double)x - mean) > 4 * sd)
        fail_msg("seed %lu: %s: %zu of %zu, expected %.1f +- 4 x %.1f", seed, what, x, n, mean, sd);
}

static void test_holdout_and_split_independent(void **state)
{
    (void)state;
    tu_dir dir;
    tu_dir_make(&dir);
    /* rows: a prediction in [600, 3000) s and an actual duration around it */
    size_t cap = (size_t)N * 40 + 64, len = 0;
    char *text = malloc(cap);
    assert_non_null(text);
    len += (size_t)snprintf(text, cap, "actual_s,pred_s\n");
    tu_rng r = {20261202};
    for (size_t i = 0; i < N; i++) {
        double pred = 600 + 2400 * tu_unif(&r);
        double act = 1.1 * pred + 300 * (tu_unif(&r) - 0.3);
        len += (size_t)snprintf(text + len, cap - len, "%.3f,%.3f\n", act, pred);
    }
    char path[600];
    tu_write_text(&dir, "rows.csv", text, path, sizeof path);
    free(text);
    static const etacal_colspec cols[] = {
        {"actual_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE, "duration"},
        {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE, "prediction"},
    };
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_read_csv(path, cols, 2, NULL, &t, &err), ETACAL_OK);
    assert_int_equal(etacal_table_rows(t), N);
    unsigned char *mask = malloc(N);
    assert_non_null(mask);
    static const unsigned long seeds[] = {1, 2, 77};
    for (size_t si = 0; si < sizeof seeds / sizeof *seeds; si++) {
        unsigned long seed = seeds[si];
        size_t held = etacal_holdout_mask(t, -1, 0.2, seed, mask);
        size_t count = 0;
        for (size_t i = 0; i < N; i++)
            count += !mask[i];
        assert_int_equal(held, count);
        /* the held-out share: Bin(N, 0.2) */
        assert_binomial(held, N, 0.2, "held-out rows", seed);
        /* the qr split of the rows left, and of all rows (the split draws
         * one number per row of the table, held out or not, so the fit
         * without a mask shows where the held-out rows would have gone) */
        double tau = 0.9;
        etacal_fit_opts o = {ETACAL_METHOD_QR, &tau, 1, 0, NULL, 0, 0.5, seed, 0, mask, NULL, 0};
        etacal_quotes *q = NULL, *q0 = NULL;
        assert_int_equal(etacal_quotes_fit(t, 0, 1, NULL, 0, &o, &q, &err), ETACAL_OK);
        o.mask = NULL;
        assert_int_equal(etacal_quotes_fit(t, 0, 1, NULL, 0, &o, &q0, &err), ETACAL_OK);
        assert_int_equal(q->nrows, 1);
        assert_int_equal(q0->nrows, 1);
        size_t cal_kept = q->rows[0].n;  /* kept and calibrating */
        size_t cal_all = q0->rows[0].n;  /* calibrating, of all rows */
        size_t kept = N - held;
        size_t fit_kept = kept - cal_kept; /* kept and fitting */
        size_t fit_all = N - cal_all;
        /* the regression's share of the rows left: Bin(N - held, 0.5) */
        assert_binomial(fit_kept, kept, 0.5, "regression rows among the rows left", seed);
        /* the calibration share of all rows: Bin(N, 0.5) */
        assert_binomial(cal_all, N, 0.5, "calibration rows among all rows", seed);
        /* independence: among the fit_all rows drawn for the regression, the
         * held-out ones (fit_all - fit_kept) are Bin(fit_all, 0.2) */
        assert_true(fit_all >= fit_kept);
        assert_binomial(fit_all - fit_kept, fit_all, 0.2, "held-out rows among the regression's draws", seed);
        /* and among the calibration draws likewise */
        assert_true(cal_all >= cal_kept);
        assert_binomial(cal_all - cal_kept, cal_all, 0.2, "held-out rows among the calibration draws", seed);
        print_message("seed %lu: held out %zu of %d; regression %zu of %zu left; held-out share of the "
                      "regression draws %zu/%zu\n",
                      seed, held, N, fit_kept, kept, fit_all - fit_kept, fit_all);
        etacal_quotes_destroy(q);
        etacal_quotes_destroy(q0);
    }
    free(mask);
    etacal_table_destroy(t);
    tu_dir_remove(&dir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_seed_stream_known_values),
        cmocka_unit_test(test_holdout_and_split_independent),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
