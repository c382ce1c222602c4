/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_conformal.c: the split-conformal rank rule, exact ceil(m * tau),
 * the minimum calibration size and the type-1 sample quantile. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/conformal.h"
#include "internal.h"
#include "testutil.h"

/* 1..10 in a scrambled order, times scale. */
static void one_to_ten(double *x, double scale)
{
    static const int perm[10] = {7, 2, 10, 4, 1, 9, 3, 6, 8, 5};
    for (int i = 0; i < 10; i++)
        x[i] = perm[i] * scale;
}

static void test_quantile_type1_hyndman_fan(void **state)
{
    (void)state;
    double x[10];
    /* Hyndman & Fan (1996) type 1 on x = 1..10; values from R's
     * quantile(1:10, p, type = 1), run once in R 4.2.2. */
    one_to_ten(x, 1.0);
    assert_same_double(etacal_quantile_type1(x, 10, 0.1), 1.0);
    one_to_ten(x, 1.0);
    assert_same_double(etacal_quantile_type1(x, 10, 0.25), 3.0);
    one_to_ten(x, 1.0);
    assert_same_double(etacal_quantile_type1(x, 10, 0.9), 9.0);
    /* The same order statistics on scaled data (2.385 * j). */
    one_to_ten(x, 2.385);
    assert_close(etacal_quantile_type1(x, 10, 0.25), 3 * 2.385, 1e-15);
    one_to_ten(x, 2.385);
    assert_close(etacal_quantile_type1(x, 10, 0.9), 9 * 2.385, 1e-15);
    /* The ends: j = max(1, ceil(n p)). */
    one_to_ten(x, 2.385);
    assert_close(etacal_quantile_type1(x, 10, 0.0), 2.385, 1e-15);
    one_to_ten(x, 2.385);
    assert_close(etacal_quantile_type1(x, 10, 1.0), 23.85, 1e-15);
    /* p = 0.3: n p = 3 exactly in decimal, so j = 3, not 4 (0.3 in binary
     * is a hair below 3/10, 10 * 0.3 rounds to 3 either way). */
    one_to_ten(x, 2.385);
    assert_close(etacal_quantile_type1(x, 10, 0.3), 3 * 2.385, 1e-15);
    /* p = 0.56 on 25 values: 25 * 0.56 is 14.000000000000002 in double,
     * j must be 14 (the decimal 0.56 * 25 = 14). */
    double y[25];
    for (int i = 0; i < 25; i++)
        y[i] = (double)((i * 7) % 25 + 1) * 0.5; /* 0.5 .. 12.5 scrambled */
    assert_close(etacal_quantile_type1(y, 25, 0.56), 7.0, 1e-15);
    assert_true(ceil(25 * 0.56) == 15); /* the naive rank is off by one */
}

static void test_rank_rule_lei(void **state)
{
    (void)state;
    /* Lei et al. (2018) rank k = ceil((n+1)(1-alpha)); values from
     * Hyndman & Fan (1996), type 1. */
    assert_int_equal(etacal_conformal_rank(19, 0.95), 19);
    assert_int_equal(etacal_conformal_rank(18, 0.95), 19); /* > n: unbounded */
    assert_int_equal(etacal_conformal_rank(100, 0.9), 91);
    assert_close(91.0 / 101.0, 0.900990, 1e-6); /* the coverage k/(n+1) quoted there */

    /* Through etacal_conformal_upper on distinct scores. */
    double s[100];
    size_t k = 0;
    for (int i = 0; i < 19; i++)
        s[i] = 2.385 + 13.25 * ((i * 11) % 19); /* 19 distinct, scrambled */
    assert_close(etacal_conformal_upper(s, 19, 0.95, &k), 2.385 + 13.25 * 18, 1e-15);
    assert_int_equal(k, 19);
    for (int i = 0; i < 18; i++)
        s[i] = 2.385 + 13.25 * ((i * 5) % 18);
    double q = etacal_conformal_upper(s, 18, 0.95, &k);
    assert_true(isinf(q) && q > 0);
    assert_int_equal(k, 19);
    for (int i = 0; i < 100; i++)
        s[i] = -40.5 + 1.125 * ((i * 37) % 100);
    assert_close(etacal_conformal_upper(s, 100, 0.9, &k), -40.5 + 1.125 * 90, 1e-15);
    assert_int_equal(k, 91);
    /* k_out may be NULL. */
    for (int i = 0; i < 100; i++)
        s[i] = -40.5 + 1.125 * ((i * 37) % 100);
    assert_close(etacal_conformal_upper(s, 100, 0.9, NULL), -40.5 + 1.125 * 90, 1e-15);
}

static void test_conformal_upper_edges(void **state)
{
    (void)state;
    size_t k = 77;
    double q = etacal_conformal_upper(NULL, 0, 0.9, &k);
    assert_true(isinf(q) && q > 0);
    assert_int_equal(k, 1);
    /* Ties: the k-th smallest of 3,3,3,5.5,5.5 at n=4 (first four). */
    double s[] = {5.5, 3.25, 5.5, 3.25, 3.25, 944.7, 3.25, 5.5, 3.25};
    /* n = 9, tau = 0.5: k = ceil(10 * 0.5) = 5; sorted 3.25 x5, 5.5 x3, 944.7 */
    assert_close(etacal_conformal_upper(s, 9, 0.5, &k), 3.25, 0);
    assert_int_equal(k, 5);
    double s2[] = {5.5, 3.25, 5.5, 3.25, 3.25, 944.7, 3.25, 5.5, 3.25};
    /* tau = 0.9: k = 9, the maximum */
    assert_close(etacal_conformal_upper(s2, 9, 0.9, &k), 944.7, 0);
    assert_int_equal(k, 9);
    /* A tiny tau: k = ceil(10 * 0.01) = 1, the minimum. */
    double s3[] = {5.5, 3.25, -17.125, 3.25};
    assert_close(etacal_conformal_upper(s3, 4, 0.01, &k), -17.125, 0);
    assert_int_equal(k, 1);
}

/* ceil((n+1)(1-alpha)) computed the naive way, in double; volatile so that
 * the compiler does the arithmetic at run time as written. */
static size_t naive_rank(size_t n, double alpha)
{
    volatile double a = alpha;
    volatile double tau = 1.0 - a;
    volatile double prod = (double)(n + 1) * tau;
    return (size_t)ceil(prod);
}

static void test_rank_float_traps(void **state)
{
    (void)state;
    /* Python fractions, computed once: n=9 a=.7 -> 3; n=24
     * a=.44 -> 14; n=19 a=.95 -> 1 (a plain double ceil gives one more). */
    assert_int_equal(etacal_conformal_rank(9, 0.3), 3);
    assert_int_equal(etacal_conformal_rank(24, 0.56), 14);
    assert_int_equal(etacal_conformal_rank(19, 0.05), 1);
    /* The naive computation really is off by one, so these checks bite. */
    assert_int_equal(naive_rank(9, 0.7), 4);
    assert_int_equal(naive_rank(24, 0.44), 15);
    assert_int_equal(naive_rank(19, 0.95), 2);
    /* Through the bound itself. */
    double s[24];
    size_t k;
    for (int i = 0; i < 24; i++)
        s[i] = 0.5 * ((i * 5) % 24) + 2.385; /* 2.385, 2.885, ... scrambled */
    assert_close(etacal_conformal_upper(s, 24, 0.56, &k), 2.385 + 0.5 * 13, 1e-15);
    assert_int_equal(k, 14);
    double s9[9] = {8.5, 1.25, 7.75, 3.5, 2.385, 6.0, 4.125, 9.0, 5.5};
    assert_close(etacal_conformal_upper(s9, 9, 0.3, &k), 3.5, 0);
    assert_int_equal(k, 3);
    /* The same through etacal_ceil_mul directly, and exact_ceil_mul says it
     * used exact arithmetic. */
    assert_int_equal(etacal_ceil_mul(10, 0.3), 3);
    assert_int_equal(etacal_ceil_mul(25, 0.56), 14);
    assert_int_equal(etacal_ceil_mul(20, 0.05), 1);
    uint64_t out = 0;
    assert_int_equal(exact_ceil_mul(25, 0.56, &out), 0);
    assert_int_equal(out, 14);
}

/* ceil(m * num / 10^de) with integers. */
static uint64_t ref_ceil(uint64_t m, uint64_t num, int de)
{
    uint64_t den = 1;
    for (int i = 0; i < de; i++)
        den *= 10;
    __extension__ unsigned __int128 p = (unsigned __int128)m * num;
    return (uint64_t)(p / den + (p % den != 0));
}

static void test_ceil_mul_against_integers(void **state)
{
    (void)state;
    static const struct {
        const char *text;
        uint64_t num;
        int de;
    } taus[] = {
        {"0.3", 3, 1},      {"0.56", 56, 2},     {"0.05", 5, 2},      {"0.95", 95, 2},
        {"0.9", 9, 1},      {"0.975", 975, 3},   {"0.99", 99, 2},     {"0.999", 999, 3},
        {"0.85", 85, 2},    {"0.123", 123, 3},   {"0.7", 7, 1},       {"0.1", 1, 1},
        {"0.2385", 2385, 4}, {"0.9447", 9447, 4}, {"0.00125", 125, 5}, {"0.5", 5, 1},
        {"0", 0, 0},        {"1", 1, 0},
    };
    for (size_t i = 0; i < sizeof taus / sizeof taus[0]; i++) {
        double tau = strtod(taus[i].text, NULL);
        for (uint64_t m = 0; m <= 2000; m++) {
            uint64_t want = ref_ceil(m, taus[i].num, taus[i].de);
            size_t got = etacal_ceil_mul((size_t)m, tau);
            if (got != want)
                fail_msg("ceil(%llu * %s) = %zu, expected %llu", (unsigned long long)m,
                         taus[i].text, got, (unsigned long long)want);
        }
        /* large m too */
        static const uint64_t big[] = {999999, 1000000, 123456789, UINT64_C(10000000000)};
        for (size_t j = 0; j < sizeof big / sizeof big[0]; j++)
            assert_int_equal(etacal_ceil_mul((size_t)big[j], tau),
                             ref_ceil(big[j], taus[i].num, taus[i].de));
    }
    /* Random 1-4 digit decimals. */
    tu_rng r = {UINT64_C(4242)};
    for (int i = 0; i < 20000; i++) {
        int de = 1 + (int)tu_below(&r, 4);
        uint64_t den = 1;
        for (int j = 0; j < de; j++)
            den *= 10;
        uint64_t num = 1 + tu_below(&r, den - 1);
        char text[32];
        snprintf(text, sizeof text, "0.%0*llu", de, (unsigned long long)num);
        double tau = strtod(text, NULL);
        uint64_t m = tu_below(&r, 100000);
        size_t got = etacal_ceil_mul((size_t)m, tau);
        if (got != ref_ceil(m, num, de))
            fail_msg("ceil(%llu * %s) = %zu, expected %llu", (unsigned long long)m, text, got,
                     (unsigned long long)ref_ceil(m, num, de));
    }
}

/* A target written with 16 significant digits: its shortest form is
 * 0.9801341105616702 (the C library's %.16g reads back), so ceil(10^16 tau)
 * is exactly 9801341105616702. */
static void test_ceil_mul_sixteen_digit_target(void **state)
{
    (void)state;
    double tau = strtod("0.9801341105616702", NULL);
    char b[32];
    snprintf(b, sizeof b, "%.16g", tau);
    assert_string_equal(b, "0.9801341105616702");
    assert_true(strtod(b, NULL) == tau);
    size_t m = (size_t)UINT64_C(10000000000000000);
    size_t got = etacal_ceil_mul(m, tau);
    if (got != (size_t)UINT64_C(9801341105616702))
        fail_msg("ceil(1e16 * 0.9801341105616702) = %zu, expected 9801341105616702", got);
}

static void test_min_n(void **state)
{
    (void)state;
    /* Split conformal (Lei et al. 2018): n >= (1-a)/a, 19 at a=.05, 99 at .01; 9 at .1. */
    assert_int_equal(etacal_conformal_min_n(0.9), 9);
    assert_int_equal(etacal_conformal_min_n(0.95), 19);
    assert_int_equal(etacal_conformal_min_n(0.99), 99);
    assert_int_equal(etacal_conformal_min_n(0.975), 39);
    assert_int_equal(etacal_conformal_min_n(0.999), 999);
    assert_int_equal(etacal_conformal_min_n(0.5), 1);
    assert_int_equal(etacal_conformal_min_n(1.0), SIZE_MAX);
    /* It agrees with the rank rule: the smallest n with rank(n) <= n. */
    static const double taus[] = {0.3,  0.56, 0.05, 0.8,   0.85, 0.875, 0.9,  0.925,
                                  0.95, 0.96, 0.97, 0.975, 0.98, 0.99,  0.995, 0.9975};
    for (size_t i = 0; i < sizeof taus / sizeof taus[0]; i++) {
        size_t n = etacal_conformal_min_n(taus[i]);
        assert_true(etacal_conformal_rank(n, taus[i]) <= n);
        if (n > 0 && etacal_conformal_rank(n - 1, taus[i]) <= n - 1)
            fail_msg("min_n(%g) = %zu but n-1 already works", taus[i], n);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_quantile_type1_hyndman_fan),
        cmocka_unit_test(test_rank_rule_lei),
        cmocka_unit_test(test_conformal_upper_edges),
        cmocka_unit_test(test_rank_float_traps),
        cmocka_unit_test(test_ceil_mul_against_integers),
        cmocka_unit_test(test_ceil_mul_sixteen_digit_target),
        cmocka_unit_test(test_min_n),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
