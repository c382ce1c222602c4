/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_holdout.c: the held-out rows and their scores (src/holdout.c):
 * etacal_holdout_mask and etacal_quotes_holdout, against the contracts in
 * include/etacal/quote.h and quote_index.h.
 *
 * What each check is measured against:
 * - the time-based mask: the cut-off is the type-1 sample quantile at
 *   1 - share (Hyndman & Fan 1996, type 1: x_(ceil(n p)), the inverse of the
 *   empirical CDF) and rows at the cut-off stay in the fit.  A ten-row
 *   example with ties is worked by hand below; a 1000-row one with heavy
 *   ties was counted once with numpy 1.24.2 (Debian bookworm) as
 *   sum(t > numpy.quantile(t, 1 - share, method='inverted_cdf')), the
 *   script in the comment beside the numbers.
 * - the random mask: the held-out count is Binomial(n, share); the
 *   tolerance is 5 standard deviations sqrt(n share (1 - share)), which a
 *   correct generator misses with probability below 6e-7 (normal
 *   approximation, two-sided).  The mask must be the draws of GSL's mt19937
 *   seeded with the holdout stream's seed (src/seed.c: SplitMix64 output
 *   number ETACAL_STREAM_HOLDOUT from the user's seed), which the test
 *   computes with testutil.h's own splitmix64, not with etacal_seed_stream.
 *   SplitMix64's first output from state 0, 0xe220a8397b1dcdaf, is from
 *   memory of Vigna's reference splitmix64.c (kind c); both
 *   implementations must give it.
 * - etacal_quotes_holdout: every count and sum is recomputed by brute
 *   force from the test's own copy of the table (the rows the table file is
 *   written from): the serving row by the rule of quote_index.h (own
 *   segment, then the last keys as "*", down to the global row), the
 *   promise by quote.h's formula max(0, offset_s + slope pred +
 *   sum coef_j clamp(x_j, min_j, max_j)), and per-segment counts only for
 *   rows whose own combination of keys is a segment of the table. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "results.h"
#include "testutil.h"

/* ---- the mask ---------------------------------------------------------- */

static etacal_table *time_table(const double *tm, size_t n)
{
    static const etacal_colspec cols[] = {{"created_at", ETACAL_COL_NUM, ETACAL_NUM_TIME, "time"}};
    etacal_column_data d = {0};
    d.num = tm;
    etacal_table *t = NULL;
    etacal_error err;
    if (etacal_table_from_arrays(cols, &d, 1, n, "times", 0, &t, &err) != ETACAL_OK)
        fail_msg("table: %s: %s", err.where, err.msg);
    return t;
}

/* Ten rows, three of them at the same time.  Sorted: 12.125, 123.5,
 * 456.25, 456.25, 600, 789.75 (x3), 999.875, 1234.5 (plus 1700000000).
 * share .3: ceil(10 x .7) = 7th = 789.75, rows after it: 999.875, 1234.5 -> 2
 * share .25: ceil(7.5) = 8th = 789.75 -> 2
 * share .15: ceil(8.5) = 9th = 999.875 -> 1 (1234.5)
 * share .45: ceil(5.5) = 6th = 789.75 -> 2: the tie keeps all three in
 * share .55: ceil(4.5) = 5th = 600 -> 5 (the three 789.75, 999.875, 1234.5)
 * share .2: 10 x .8 = 8 exactly, the 8th = 789.75 -> 2 (not the 9th: 1)
 * share .5: 10 x .5 = 5 exactly, the 5th = 600 -> 5 (not the 6th: 2) */
static void test_time_mask_by_hand(void **state)
{
    (void)state;
    const double base = 1700000000;
    const double tm[10] = {base + 123.5,  base + 456.25, base + 456.25, base + 789.75, base + 12.125,
                           base + 789.75, base + 789.75, base + 1234.5, base + 600.0,  base + 999.875};
    etacal_table *t = time_table(tm, 10);
    struct {
        double share;
        size_t held;
        unsigned char mask[10];
    } cases[] = {
        {0.3, 2, {1, 1, 1, 1, 1, 1, 1, 0, 1, 0}},  {0.25, 2, {1, 1, 1, 1, 1, 1, 1, 0, 1, 0}},
        {0.15, 1, {1, 1, 1, 1, 1, 1, 1, 0, 1, 1}}, {0.45, 2, {1, 1, 1, 1, 1, 1, 1, 0, 1, 0}},
        {0.55, 5, {1, 1, 1, 0, 1, 0, 0, 0, 1, 0}}, {0.2, 2, {1, 1, 1, 1, 1, 1, 1, 0, 1, 0}},
        {0.5, 5, {1, 1, 1, 0, 1, 0, 0, 0, 1, 0}},
    };
    for (size_t c = 0; c < sizeof cases / sizeof *cases; c++) {
        unsigned char mask[10];
        memset(mask, 7, sizeof mask);
        size_t held = etacal_holdout_mask(t, 0, cases[c].share, 42, mask);
        if (held != cases[c].held)
            fail_msg("share %g: %zu held out, expected %zu", cases[c].share, held, cases[c].held);
        for (size_t i = 0; i < 10; i++)
            if (mask[i] != cases[c].mask[i])
                fail_msg("share %g: mask[%zu] = %d, expected %d", cases[c].share, i, mask[i], cases[c].mask[i]);
    }
    /* nothing to hold out: share 0, 1, NaN, negative; every row stays in */
    const double none[] = {0, 1, NAN, -0.25, 1.5};
    for (size_t c = 0; c < sizeof none / sizeof *none; c++) {
        unsigned char mask[10];
        memset(mask, 7, sizeof mask);
        assert_int_equal(etacal_holdout_mask(t, 0, none[c], 42, mask), 0);
        for (size_t i = 0; i < 10; i++)
            assert_int_equal(mask[i], 1);
        memset(mask, 7, sizeof mask);
        assert_int_equal(etacal_holdout_mask(t, -1, none[c], 42, mask), 0);
        for (size_t i = 0; i < 10; i++)
            assert_int_equal(mask[i], 1);
    }
    etacal_table_destroy(t);
    /* one row: nothing can be held out */
    t = time_table(tm, 1);
    unsigned char m1 = 7;
    assert_int_equal(etacal_holdout_mask(t, 0, 0.5, 42, &m1), 0);
    assert_int_equal(m1, 1);
    assert_int_equal(etacal_holdout_mask(t, -1, 0.5, 42, &m1), 0);
    assert_int_equal(m1, 1);
    etacal_table_destroy(t);
}

/* 1000 rows on 97 distinct times (about ten rows each).  The counts are
 * numpy's (see the file header), from
 *   t = numpy.array([1700000000 + 60*((i*7919) % 97) + 0.25 for i in range(1000)])
 *   for s in shares: (t > numpy.quantile(t, 1-s, method='inverted_cdf')).sum() */
static void test_time_mask_numpy(void **state)
{
    (void)state;
    enum { N = 1000 };
    double tm[N];
    for (size_t i = 0; i < N; i++)
        tm[i] = 1700000000.0 + 60.0 * (double)((i * 7919) % 97) + 0.25;
    etacal_table *t = time_table(tm, N);
    const double shares[] = {0.1, 0.2, 0.333, 0.5, 0.75, 0.999};
    const size_t numpy_held[] = {93, 196, 330, 496, 743, 989};
    const double numpy_cut[] = {1700005220.25, 1700004620.25, 1700003840.25,
                                1700002880.25, 1700001440.25, 1700000000.25};
    static unsigned char mask[N];
    for (size_t c = 0; c < sizeof shares / sizeof *shares; c++) {
        size_t held = etacal_holdout_mask(t, 0, shares[c], 7, mask);
        if (held != numpy_held[c])
            fail_msg("share %g: %zu held out, numpy %zu", shares[c], held, numpy_held[c]);
        /* exactly the rows after numpy's cut-off */
        for (size_t i = 0; i < N; i++)
            if (mask[i] != !(tm[i] > numpy_cut[c]))
                fail_msg("share %g: row %zu (time %.17g) mask %d", shares[c], i, tm[i], mask[i]);
    }
    etacal_table_destroy(t);
}

/* The mask the documented stream gives: mt19937 seeded with SplitMix64's
 * output number `stream` from state seed (testutil.h's splitmix64). */
static size_t expected_random_mask(unsigned long seed, unsigned stream, double share, size_t n, unsigned char *m)
{
    tu_rng g = {seed};
    uint64_t s = 0;
    for (unsigned i = 0; i < stream; i++)
        s = tu_next(&g);
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    assert_non_null(r);
    gsl_rng_set(r, (unsigned long)s);
    size_t held = 0;
    for (size_t i = 0; i < n; i++) {
        m[i] = !(gsl_rng_uniform(r) < share);
        held += !m[i];
    }
    gsl_rng_free(r);
    return held;
}

static void test_random_mask(void **state)
{
    (void)state;
    /* the two SplitMix64s against the reference's first output from 0 */
    tu_rng g0 = {0};
    assert_true(tu_next(&g0) == UINT64_C(0xe220a8397b1dcdaf));
    assert_true(etacal_seed_stream(0, 1) == UINT64_C(0xe220a8397b1dcdaf));

    enum { N = 20000 };
    static double tm[N];
    for (size_t i = 0; i < N; i++)
        tm[i] = 1700000000.0 + (double)i * 37.25;
    etacal_table *t = time_table(tm, N);
    static unsigned char mask[N], again[N], want[N];
    const double shares[] = {0.05, 0.2, 0.5, 0.875};
    const unsigned long seeds[] = {1, 20260412, 0x5eed5eedUL, 4294967297UL};
    for (size_t c = 0; c < sizeof shares / sizeof *shares; c++)
        for (size_t s = 0; s < sizeof seeds / sizeof *seeds; s++) {
            double p = shares[c];
            size_t held = etacal_holdout_mask(t, -1, p, seeds[s], mask);
            /* Binomial(N, p): within 5 sd of N p */
            double sd = sqrt(N * p * (1 - p));
            if (fabs((double)held - N * p) > 5 * sd)
                fail_msg("share %g seed %lu: %zu held out of %d, expected %g +- %g", p, seeds[s], held, N, N * p,
                         5 * sd);
            size_t zeros = 0;
            for (size_t i = 0; i < N; i++) {
                assert_true(mask[i] == 0 || mask[i] == 1);
                zeros += !mask[i];
            }
            assert_int_equal(zeros, held);
            /* exactly the holdout stream's draws */
            assert_int_equal(expected_random_mask(seeds[s], ETACAL_STREAM_HOLDOUT, p, N, want), held);
            assert_memory_equal(mask, want, N);
            /* the same seed, the same mask */
            assert_int_equal(etacal_holdout_mask(t, -1, p, seeds[s], again), held);
            assert_memory_equal(mask, again, N);
            /* not the generator seeded with the user's seed itself, nor the
             * qr split's stream: rows agree only by chance, 1 - 2p(1-p) of
             * them (within 5 sd) */
            gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
            assert_non_null(r);
            gsl_rng_set(r, seeds[s]);
            size_t same_raw = 0;
            for (size_t i = 0; i < N; i++)
                same_raw += mask[i] == !(gsl_rng_uniform(r) < p);
            gsl_rng_free(r);
            expected_random_mask(seeds[s], ETACAL_STREAM_QR_SPLIT, p, N, want);
            size_t same_split = 0;
            for (size_t i = 0; i < N; i++)
                same_split += mask[i] == want[i];
            double agree = 1 - 2 * p * (1 - p), sda = sqrt(N * agree * (1 - agree));
            if (fabs((double)same_raw - N * agree) > 5 * sda || fabs((double)same_split - N * agree) > 5 * sda)
                fail_msg("share %g seed %lu: %zu / %zu rows agree with the raw seed's / split stream's draws, "
                         "chance %g +- %g",
                         p, seeds[s], same_raw, same_split, N * agree, 5 * sda);
        }
    /* another seed, another mask */
    etacal_holdout_mask(t, -1, 0.2, 1, mask);
    etacal_holdout_mask(t, -1, 0.2, 2, again);
    assert_true(memcmp(mask, again, N) != 0);
    etacal_table_destroy(t);
}

/* ---- the held-out scores ----------------------------------------------- */

/* The test's own copy of a quote table: what the file is written from and
 * what the brute force reads. */
typedef struct trow {
    const char *zone, *band; /* band NULL: a table with one key */
    double target, offset, slope;
    double coef[2], lo[2], hi[2]; /* covariates items, dist_km (method qr) */
} trow;

/* Method add.  Two targets; (north, lunch) and (east, *) lack .8 rows, and
 * (south, night) has a negative offset so that small predictions floor. */
static const trow add_rows[] = {
    {"*", "*", 0.8, 187.375, 1, {0}, {0}, {0}},           {"*", "*", 0.9, 301.625, 1, {0}, {0}, {0}},
    {"north", "*", 0.8, 143.25, 1, {0}, {0}, {0}},        {"north", "*", 0.9, 262.875, 1, {0}, {0}, {0}},
    {"north", "lunch", 0.9, 244.125, 1, {0}, {0}, {0}},   {"south", "dinner", 0.8, 119.5625, 1, {0}, {0}, {0}},
    {"south", "dinner", 0.9, 288.3125, 1, {0}, {0}, {0}}, {"south", "night", 0.8, -512.375, 1, {0}, {0}, {0}},
    {"south", "night", 0.9, -97.0625, 1, {0}, {0}, {0}},  {"east", "*", 0.9, 333.75, 1, {0}, {0}, {0}},
};

/* Method qr with covariates items and dist_km, their ranges. */
static const trow qr_rows[] = {
    {"*", "*", 0.8, 61.875, 0.8125, {13.25, 21.5}, {1, 0.4}, {8, 11.5}},
    {"*", "*", 0.9, 97.625, 0.90625, {15.75, 24.125}, {1, 0.4}, {8, 11.5}},
    {"north", "*", 0.8, 40.5, 0.84375, {11.5, 26.25}, {2, 0.75}, {7, 9.25}},
    {"north", "*", 0.9, 71.25, 0.9375, {12.25, 28.5}, {2, 0.75}, {7, 9.25}},
    {"north", "lunch", 0.9, 55.125, 0.96875, {9.75, 31.875}, {1, 1.5}, {6, 8.125}},
    {"south", "dinner", 0.8, -420.5, 0.71875, {-6.25, 18.75}, {3, 0.5}, {9, 12.75}},
};

static void write_table(const char *path, const trow *rows, size_t nrows, int qr)
{
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    /* covariate columns deliberately in another order than the data's */
    fprintf(fp, "zone,band,target,method,n,k,offset_s,slope%s,note\n",
            qr ? ",coef_items,coef_dist_km,min_items,max_items,min_dist_km,max_dist_km" : "");
    for (size_t r = 0; r < nrows; r++) {
        const trow *w = &rows[r];
        fprintf(fp, "%s,%s,%.17g,%s,500,480,%.17g,%.17g", w->zone, w->band, w->target, qr ? "qr" : "add", w->offset,
                w->slope);
        if (qr)
            fprintf(fp, ",%.17g,%.17g,%.17g,%.17g,%.17g,%.17g", w->coef[0], w->coef[1], w->lo[0], w->hi[0], w->lo[1],
                    w->hi[1]);
        fprintf(fp, ",row %zu\n", r);
    }
    assert_int_equal(fclose(fp), 0);
}

/* quote_index.h's rule: own segment, then (zone, *), then (*, *). */
static const trow *serving_row(const trow *rows, size_t nrows, const char *zone, const char *band, double target)
{
    const char *cand[3][2] = {{zone, band}, {zone, "*"}, {"*", "*"}};
    for (size_t c = 0; c < 3; c++)
        for (size_t r = 0; r < nrows; r++)
            if (rows[r].target == target && strcmp(rows[r].zone, cand[c][0]) == 0 &&
                strcmp(rows[r].band, cand[c][1]) == 0)
                return &rows[r];
    return NULL;
}

static double clampd(double x, double lo, double hi) { return x < lo ? lo : x > hi ? hi : x; }

/* quote.h's formula; x = (items, dist_km) */
static double bf_promise(const trow *w, int qr, double pred, const double *x)
{
    double v = w->offset + w->slope * pred;
    if (qr)
        for (size_t j = 0; j < 2; j++)
            v += w->coef[j] * clampd(x[j], w->lo[j], w->hi[j]);
    return v < 0 ? 0 : v;
}

static int is_segment_of(const trow *rows, size_t nrows, const char *zone, const char *band)
{
    for (size_t r = 0; r < nrows; r++)
        if (strcmp(rows[r].zone, zone) == 0 && strcmp(rows[r].band, band) == 0)
            return 1;
    return 0;
}

/* Data columns: 0 actual_s, 1 pred_s, 2 band, 3 zone, 4 dist_km, 5 items. */
enum { C_ACT, C_PRED, C_BAND, C_ZONE, C_DIST, C_ITEMS, NCOLS };
enum { NDATA = 1500 };
static const char *const zones[] = {"north", "south", "east", "west"};
static const char *const bands[] = {"lunch", "dinner", "night"};

typedef struct data {
    double act[NDATA], pred[NDATA], dist[NDATA], items[NDATA];
    const char *zone[NDATA], *band[NDATA];
} data;

static etacal_table *make_data(data *d, uint64_t seed, const trow *rows, size_t nrows, int qr)
{
    tu_rng g = {seed};
    for (size_t i = 0; i < NDATA; i++) {
        d->zone[i] = zones[tu_below(&g, 4)];
        d->band[i] = bands[tu_below(&g, 3)];
        d->pred[i] = nearbyint((250 + 2450 * tu_unif(&g)) * 1000) / 1000;
        d->dist[i] = nearbyint((-1 + 16 * tu_unif(&g)) * 100) / 100; /* beyond every range on both sides */
        d->items[i] = (double)tu_below(&g, 12);                      /* 0..11 */
        d->act[i] = nearbyint((d->pred[i] + (tu_unif(&g) - 0.45) * 700) * 1000) / 1000;
        if (d->act[i] < 0)
            d->act[i] = 0.125;
        if (i % 31 == 7)
            d->act[i] = d->pred[i]; /* on the bare prediction exactly */
        if (i % 23 == 0) {
            /* on the promise exactly: "on time" is actual <= promise */
            const trow *w = serving_row(rows, nrows, d->zone[i], d->band[i], 0.9);
            double x[2] = {d->items[i], d->dist[i]};
            d->act[i] = bf_promise(w, qr, d->pred[i], x);
        }
    }
    static const etacal_colspec cols[NCOLS] = {
        {"actual_s", ETACAL_COL_NUM, ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE, "duration"},
        {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_FINITE, "prediction"},
        {"band", ETACAL_COL_KEY, 0, NULL},
        {"zone", ETACAL_COL_KEY, 0, NULL},
        {"dist_km", ETACAL_COL_NUM, 0, NULL},
        {"items", ETACAL_COL_NUM, 0, NULL},
    };
    etacal_column_data cd[NCOLS];
    memset(cd, 0, sizeof cd);
    cd[C_ACT].num = d->act;
    cd[C_PRED].num = d->pred;
    cd[C_BAND].str = d->band;
    cd[C_ZONE].str = d->zone;
    cd[C_DIST].num = d->dist;
    cd[C_ITEMS].num = d->items;
    etacal_table *t = NULL;
    etacal_error err;
    if (etacal_table_from_arrays(cols, cd, NCOLS, NDATA, "orders", 0, &t, &err) != ETACAL_OK)
        fail_msg("table: %s: %s", err.where, err.msg);
    return t;
}

/* Runs etacal_quotes_holdout on the table of rows and compares every
 * count and sum with the brute force. */
static void check_holdout(const trow *rows, size_t nrows, int qr, uint64_t seed, int use_mask)
{
    tu_dir dir;
    tu_dir_make(&dir);
    char path[600];
    tu_path(path, sizeof path, &dir, "quotes.csv");
    write_table(path, rows, nrows, qr);
    etacal_quotes *q = NULL;
    etacal_error err;
    if (etacal_quotes_read_csv(path, 0, &q, &err) != ETACAL_OK)
        fail_msg("reading the table: %s: %s", err.where, err.msg);
    static data d;
    etacal_table *t = make_data(&d, seed, rows, nrows, qr);
    static unsigned char mask[NDATA];
    tu_rng g = {seed ^ 0xabcdefu};
    for (size_t i = 0; i < NDATA; i++)
        mask[i] = tu_below(&g, 5) < 2 ? (unsigned char)(1 + tu_below(&g, 200)) : 0; /* any nonzero: evaluated */
    const size_t keys[2] = {C_ZONE, C_BAND};
    size_t xc[2];
    /* x_cols in the table's coefficient order */
    assert_int_equal(q->ncoef, qr ? 2 : 0);
    for (size_t j = 0; j < q->ncoef; j++)
        xc[j] = strcmp(q->coef_names[j], "items") == 0 ? C_ITEMS : C_DIST;
    etacal_holdout h;
    memset(&h, 0xa5, sizeof h);
    assert_int_equal(holdout_fill(q, t, C_ACT, C_PRED, keys, xc, use_mask ? mask : NULL, &h, &err), ETACAL_OK);
    assert_int_equal(h.nsegs, q->nsegs);
    assert_int_equal(h.ntargets, 2);
    const double tg[2] = {0.8, 0.9};
    /* brute force, per library segment g (found by its keys) */
    size_t ns = q->nsegs;
    size_t *n = calloc(ns, sizeof *n), *bare = calloc(ns, sizeof *bare), *hits = calloc(2 * ns, sizeof *hits);
    double *psum = calloc(2 * ns, sizeof *psum), *dsum = calloc(ns, sizeof *dsum);
    assert_true(n && bare && hits && psum && dsum);
    size_t floored = 0, clamped = 0, on_edge = 0, fell_back = 0, on_pred = 0;
    for (size_t i = 0; i < NDATA; i++) {
        if (use_mask && !mask[i])
            continue;
        long own = -1;
        if (is_segment_of(rows, nrows, d.zone[i], d.band[i]))
            for (size_t s = 1; s < ns; s++)
                if (strcmp(q->segs[s].keys[0], d.zone[i]) == 0 && strcmp(q->segs[s].keys[1], d.band[i]) == 0)
                    own = (long)s;
        size_t gs[2] = {0, own > 0 ? (size_t)own : 0};
        size_t ng = own > 0 ? 2 : 1;
        int hb = d.act[i] <= d.pred[i];
        on_pred += d.act[i] == d.pred[i];
        for (size_t k = 0; k < ng; k++) {
            n[gs[k]]++;
            bare[gs[k]] += (size_t)hb;
            dsum[gs[k]] += d.pred[i];
        }
        for (size_t ti = 0; ti < 2; ti++) {
            const trow *w = serving_row(rows, nrows, d.zone[i], d.band[i], tg[ti]);
            assert_non_null(w);
            fell_back += strcmp(w->band, d.band[i]) != 0;
            double x[2] = {d.items[i], d.dist[i]};
            double v = bf_promise(w, qr, d.pred[i], x);
            floored += v == 0;
            if (qr)
                clamped += x[0] != clampd(x[0], w->lo[0], w->hi[0]) || x[1] != clampd(x[1], w->lo[1], w->hi[1]);
            on_edge += d.act[i] == v;
            for (size_t k = 0; k < ng; k++) {
                hits[gs[k] * 2 + ti] += d.act[i] <= v;
                psum[gs[k] * 2 + ti] += v;
            }
        }
    }
    /* the data reach every case the rules have */
    assert_true(floored > 0 && on_edge > 0 && fell_back > 0 && on_pred > 0);
    if (qr)
        assert_true(clamped > 0);
    for (size_t s = 0; s < ns; s++) {
        if (h.n[s] != n[s] || h.bare[s] != bare[s])
            fail_msg("segment %zu (%s, %s): n %zu bare %zu, brute force %zu, %zu", s, q->segs[s].keys[0],
                     q->segs[s].keys[1], h.n[s], h.bare[s], n[s], bare[s]);
        assert_close(h.pred_sum[s], dsum[s], 1e-12);
        for (size_t ti = 0; ti < 2; ti++) {
            if (h.hits[s * 2 + ti] != hits[s * 2 + ti])
                fail_msg("segment %zu (%s, %s) target %g: %zu on time, brute force %zu", s, q->segs[s].keys[0],
                         q->segs[s].keys[1], tg[ti], h.hits[s * 2 + ti], hits[s * 2 + ti]);
            assert_close(h.promise_sum[s * 2 + ti], psum[s * 2 + ti], 1e-12);
        }
        /* segments with a "*" are never a row's own combination */
        if (strcmp(q->segs[s].keys[1], "*") == 0 && s > 0)
            assert_int_equal(h.n[s], 0);
    }
    size_t want_n0 = 0;
    for (size_t i = 0; i < NDATA; i++)
        want_n0 += !use_mask || mask[i];
    assert_int_equal(h.n[0], want_n0);
    free(n);
    free(bare);
    free(hits);
    free(psum);
    free(dsum);
    holdout_release(&h);
    assert_null(h.n);
    holdout_release(&h); /* twice, and NULL: no-ops */
    holdout_release(NULL);
    etacal_table_destroy(t);
    etacal_quotes_destroy(q);
    tu_dir_remove(&dir);
}

static void test_holdout_add(void **state)
{
    (void)state;
    check_holdout(add_rows, sizeof add_rows / sizeof *add_rows, 0, 0x7a11e5, 1);
    check_holdout(add_rows, sizeof add_rows / sizeof *add_rows, 0, 0x5eed, 0);
}

static void test_holdout_qr(void **state)
{
    (void)state;
    check_holdout(qr_rows, sizeof qr_rows / sizeof *qr_rows, 1, 0xc0ffee, 1);
    check_holdout(qr_rows, sizeof qr_rows / sizeof *qr_rows, 1, 0x9e37, 0);
}

/* A table without key columns: every row counts overall only. */
static void test_holdout_no_keys(void **state)
{
    (void)state;
    tu_dir dir;
    tu_dir_make(&dir);
    char path[600];
    tu_write_text(&dir, "q.csv", "target,method,n,k,offset_s,slope\n0.85,ratio,700,596,0,1.1875\n", path, sizeof path);
    etacal_quotes *q = NULL;
    etacal_error err;
    assert_int_equal(etacal_quotes_read_csv(path, 0, &q, &err), ETACAL_OK);
    static data d;
    etacal_table *t = make_data(&d, 0x0dd, add_rows, sizeof add_rows / sizeof *add_rows, 0);
    etacal_holdout h;
    assert_int_equal(holdout_fill(q, t, C_ACT, C_PRED, NULL, NULL, NULL, &h, &err), ETACAL_OK);
    assert_int_equal(h.nsegs, 1);
    size_t hits = 0, bare = 0;
    double psum = 0;
    for (size_t i = 0; i < NDATA; i++) {
        double v = 1.1875 * d.pred[i];
        hits += d.act[i] <= v;
        bare += d.act[i] <= d.pred[i];
        psum += v;
    }
    assert_int_equal(h.n[0], NDATA);
    assert_int_equal(h.hits[0], hits);
    assert_int_equal(h.bare[0], bare);
    assert_close(h.promise_sum[0], psum, 1e-12);
    holdout_release(&h);
    etacal_table_destroy(t);
    etacal_quotes_destroy(q);
    tu_dir_remove(&dir);
}

static void test_holdout_errors(void **state)
{
    (void)state;
    tu_dir dir;
    tu_dir_make(&dir);
    char path[600];
    tu_path(path, sizeof path, &dir, "quotes.csv");
    write_table(path, add_rows, sizeof add_rows / sizeof *add_rows, 0);
    etacal_quotes *q = NULL;
    etacal_error err;
    assert_int_equal(etacal_quotes_read_csv(path, 0, &q, &err), ETACAL_OK);
    static data d;
    etacal_table *t = make_data(&d, 0xe77, add_rows, sizeof add_rows / sizeof *add_rows, 0);
    const size_t keys[2] = {C_ZONE, C_BAND};

    /* A table without a global .9 row, as a caller could build in memory
     * (the reader refuses one): the global .9 row made a second .8 row,
     * which the index ignores (it keeps the first row of a segment and
     * target). */
    size_t g9 = SIZE_MAX;
    for (size_t r = 0; r < q->nrows; r++)
        if (q->rows[r].seg == 0 && q->rows[r].target == 1)
            g9 = r;
    assert_true(g9 != SIZE_MAX);
    q->rows[g9].target = 0;
    etacal_holdout h;
    memset(&h, 0xa5, sizeof h);
    etacal_error_clear(&err);
    assert_int_equal(holdout_fill(q, t, C_ACT, C_PRED, keys, NULL, NULL, &h, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "the quote table has no global row");
    assert_null(h.n);
    assert_null(h.hits);
    assert_null(h.bare);
    assert_null(h.promise_sum);
    assert_null(h.pred_sum);
    /* rows that never fall back to the global row still work: north's
     * rows all end at (north, *) or their own row */
    static unsigned char north[NDATA];
    size_t nn = 0;
    for (size_t i = 0; i < NDATA; i++)
        nn += north[i] = strcmp(d.zone[i], "north") == 0;
    assert_int_equal(holdout_fill(q, t, C_ACT, C_PRED, keys, NULL, north, &h, &err), ETACAL_OK);
    assert_int_equal(h.n[0], nn);
    holdout_release(&h);
    q->rows[g9].target = 1;

    /* more than ETACAL_MAX_KEYS key columns */
    etacal_quotes many = *q;
    many.nkeys = ETACAL_MAX_KEYS + 1;
    memset(&h, 0xa5, sizeof h);
    etacal_error_clear(&err);
    assert_int_equal(holdout_fill(&many, t, C_ACT, C_PRED, keys, NULL, NULL, &h, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "a quote table has at most 16 key columns");
    assert_null(h.n);
    assert_int_equal(h.nsegs, 0);
    etacal_table_destroy(t);
    etacal_quotes_destroy(q);
    tu_dir_remove(&dir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_time_mask_by_hand), cmocka_unit_test(test_time_mask_numpy),
        cmocka_unit_test(test_random_mask),       cmocka_unit_test(test_holdout_add),
        cmocka_unit_test(test_holdout_qr),        cmocka_unit_test(test_holdout_no_keys),
        cmocka_unit_test(test_holdout_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
