/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_select.c: etacal_select against qsort.
 *
 * For arrays of many shapes (random, heavily tied, sorted, reverse-sorted,
 * all equal, organ pipe, with infinities and signed zeros) and sizes 1..2000,
 * the k-th smallest must equal the k-th element of the sorted array, for
 * every k on small and medium sizes and a spread of k on large ones, and the
 * array must come back partitioned around position k-1 and still hold the
 * same values. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/conformal.h"
#include "testutil.h"

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

enum { SH_RANDOM, SH_TIES, SH_TWO, SH_SORTED, SH_REVERSE, SH_EQUAL, SH_ORGAN, SH_SPECIAL, SH_N };

static const char *shape_name[SH_N] = {"random", "ties",  "two values", "sorted",
                                        "reverse", "equal", "organ pipe", "inf and signed zero"};

static void fill(double *x, size_t n, int shape, tu_rng *r)
{
    for (size_t i = 0; i < n; i++) {
        switch (shape) {
        case SH_RANDOM: x[i] = 2.385 + 1800.0 * tu_unif(r) - 600.0; break;
        case SH_TIES: x[i] = 2.385 * (double)tu_below(r, 5) - 4.77; break;
        case SH_TWO: x[i] = tu_below(r, 2) ? 944.7 : -0.0625; break;
        case SH_SORTED: x[i] = 0.125 * (double)i - 17.3; break;
        case SH_REVERSE: x[i] = 1800.0 - 0.375 * (double)i; break;
        case SH_EQUAL: x[i] = 61.875; break;
        case SH_ORGAN: x[i] = (double)(i < n / 2 ? i : n - i) * 1.5 + 0.2; break;
        default: {
            static const double v[] = {-INFINITY, INFINITY, 0.0, -0.0, 2.385, -2.385, 1e300};
            x[i] = v[tu_below(r, sizeof v / sizeof v[0])];
            break;
        }
        }
    }
}

/* Checks one selection: the value, its position, the partition and that
 * the multiset of values is unchanged. */
static void check_one(const double *orig, const double *sorted, double *work, size_t n, size_t k,
                      int shape)
{
    memcpy(work, orig, n * sizeof *work);
    double v = etacal_select(work, n, k);
    if (!(v == sorted[k - 1]))
        fail_msg("%s n=%zu k=%zu: select gives %.17g, qsort %.17g", shape_name[shape], n, k, v,
                 sorted[k - 1]);
    if (!(work[k - 1] == v))
        fail_msg("%s n=%zu k=%zu: x[k-1] = %.17g, not the returned %.17g", shape_name[shape], n, k,
                 work[k - 1], v);
    for (size_t i = 0; i < k - 1; i++)
        if (work[i] > v)
            fail_msg("%s n=%zu k=%zu: x[%zu] = %g > the k-th %g", shape_name[shape], n, k, i,
                     work[i], v);
    for (size_t i = k; i < n; i++)
        if (work[i] < v)
            fail_msg("%s n=%zu k=%zu: x[%zu] = %g < the k-th %g", shape_name[shape], n, k, i,
                     work[i], v);
    qsort(work, n, sizeof *work, cmp_double);
    for (size_t i = 0; i < n; i++)
        if (!(work[i] == sorted[i]))
            fail_msg("%s n=%zu k=%zu: the values changed", shape_name[shape], n, k);
}

static void run_sizes(const size_t *sizes, size_t nsizes, int every_k, uint64_t seed)
{
    tu_rng r = {seed};
    double *orig = malloc(2000 * sizeof *orig);
    double *sorted = malloc(2000 * sizeof *sorted);
    double *work = malloc(2000 * sizeof *work);
    assert_non_null(orig);
    assert_non_null(sorted);
    assert_non_null(work);
    for (size_t si = 0; si < nsizes; si++) {
        size_t n = sizes[si];
        for (int shape = 0; shape < SH_N; shape++) {
            fill(orig, n, shape, &r);
            memcpy(sorted, orig, n * sizeof *sorted);
            qsort(sorted, n, sizeof *sorted, cmp_double);
            if (every_k) {
                for (size_t k = 1; k <= n; k++)
                    check_one(orig, sorted, work, n, k, shape);
            } else {
                size_t ks[] = {1, 2, 3, n / 4, n / 2, n / 2 + 1, (9 * n) / 10, n - 1, n};
                for (size_t i = 0; i < sizeof ks / sizeof ks[0]; i++)
                    if (ks[i] >= 1)
                        check_one(orig, sorted, work, n, ks[i], shape);
                for (int i = 0; i < 25; i++)
                    check_one(orig, sorted, work, n, 1 + (size_t)tu_below(&r, n), shape);
            }
        }
    }
    free(orig);
    free(sorted);
    free(work);
}

static void test_select_small_every_k(void **state)
{
    (void)state;
    size_t sizes[40];
    for (size_t i = 0; i < 40; i++)
        sizes[i] = i + 1; /* 1..40: around the insertion-sort cut-off of 16 */
    run_sizes(sizes, 40, 1, UINT64_C(11));
}

static void test_select_medium_every_k(void **state)
{
    (void)state;
    static const size_t sizes[] = {63, 64, 65, 100, 127, 257, 500};
    run_sizes(sizes, sizeof sizes / sizeof sizes[0], 1, UINT64_C(2385));
}

static void test_select_large_spread_of_k(void **state)
{
    (void)state;
    static const size_t sizes[] = {999, 1000, 1024, 1500, 1999, 2000};
    run_sizes(sizes, sizeof sizes / sizeof sizes[0], 0, UINT64_C(9447));
    /* one large size with every k, on random data with ties */
    static const size_t big[] = {2000};
    tu_rng r = {UINT64_C(3)};
    double *orig = malloc(2000 * sizeof *orig), *sorted = malloc(2000 * sizeof *sorted),
           *work = malloc(2000 * sizeof *work);
    assert_non_null(orig);
    assert_non_null(sorted);
    assert_non_null(work);
    fill(orig, big[0], SH_TIES, &r);
    memcpy(sorted, orig, big[0] * sizeof *sorted);
    qsort(sorted, big[0], sizeof *sorted, cmp_double);
    for (size_t k = 1; k <= big[0]; k++)
        check_one(orig, sorted, work, big[0], k, SH_TIES);
    free(orig);
    free(sorted);
    free(work);
}

/* Structured inputs that are hard on median-of-three pivots (interleaved
 * ramps, a zigzag, a multiplicative permutation): whichever way the
 * selection goes (partitions or its sort fallback), the answer must be the
 * same as qsort's. */
static void test_select_adversarial_patterns(void **state)
{
    (void)state;
    size_t n = 2000;
    double *orig = malloc(n * sizeof *orig), *sorted = malloc(n * sizeof *sorted),
           *work = malloc(n * sizeof *work);
    assert_non_null(orig);
    assert_non_null(sorted);
    assert_non_null(work);
    for (int pattern = 0; pattern < 3; pattern++) {
        for (size_t i = 0; i < n; i++) {
            if (pattern == 0)
                orig[i] = (i % 2) ? (double)i * 0.5 + 1000.0 : (double)i * 0.5;
            else if (pattern == 1)
                orig[i] = (i % 2) ? (double)(n - i) : (double)i;
            else
                orig[i] = (double)((i * 7919) % n) * 0.01; /* a permutation, scaled */
        }
        memcpy(sorted, orig, n * sizeof *sorted);
        qsort(sorted, n, sizeof *sorted, cmp_double);
        for (size_t k = 1; k <= n; k += 37)
            check_one(orig, sorted, work, n, k, SH_RANDOM);
        check_one(orig, sorted, work, n, n, SH_RANDOM);
    }
    free(orig);
    free(sorted);
    free(work);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_select_small_every_k),
        cmocka_unit_test(test_select_medium_every_k),
        cmocka_unit_test(test_select_large_spread_of_k),
        cmocka_unit_test(test_select_adversarial_patterns),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
