/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_segment.c: segset_build, seghier_build and the row lookups
 * segset_row / seghier_row (src/segment.c), against the contract in
 * src/internal.h: segment 0 is the global one ("*" in every key), the others
 * are the key combinations present in the rows, numbered in the bytewise
 * order of their key texts (strcmp, key by key); with levels, the segments
 * of every level (k1..kK), (k1..kK-1, *), ..., share one numbering in that
 * order, "*" standing for an open key; level[g] counts the fixed keys and
 * parent[g] is the segment one level up.  Only segment.c's own contract is
 * tested here (keys, order, levels, parents, row lookup), not how a fit
 * uses the segments.
 *
 * The expected numbering of the small tables is worked by hand from that
 * rule (bytes: ' ' 0x20 < '#' 0x23 < '*' 0x2A < 'N' 0x4E < 'a' 0x61 < the
 * UTF-8 lead byte 0xC3 of "Öst"); the large ones (more than 65536 values of
 * a key, so 32-bit ids, and more key combinations than the direct map's
 * 2^22 codes, so the hashed map) are checked against a reference built in
 * the test by sorting the rows' key tuples, which shares no code with
 * segment.c. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "testutil.h"

#define MAXK 6

/* A table of nrows rows: column 0 "actual_s" (numbers), columns 1..nk the
 * keys "k1".."knk" with the texts keys[j][i]. */
static etacal_table *make_table(size_t nrows, size_t nk, const char *const *const *keys)
{
    static const char *const names[MAXK] = {"k1", "k2", "k3", "k4", "k5", "k6"};
    etacal_colspec cols[MAXK + 1];
    etacal_column_data data[MAXK + 1];
    memset(data, 0, sizeof data);
    double *y = malloc((nrows ? nrows : 1) * sizeof *y);
    assert_non_null(y);
    for (size_t i = 0; i < nrows; i++)
        y[i] = 2.385 + 0.125 * (double)i;
    cols[0] = (etacal_colspec){"actual_s", ETACAL_COL_NUM, 0, "duration"};
    data[0].num = y;
    for (size_t j = 0; j < nk; j++) {
        cols[j + 1] = (etacal_colspec){names[j], ETACAL_COL_KEY, 0, NULL};
        data[j + 1].str = keys[j];
    }
    etacal_table *t = NULL;
    etacal_error err;
    etacal_error_clear(&err);
    int rc = etacal_table_from_arrays(cols, data, nk + 1, nrows, "seg", 0, &t, &err);
    if (rc)
        fail_msg("etacal_table_from_arrays: %s: %s", err.where, err.msg);
    free(y);
    return t;
}

static const size_t kcols[MAXK] = {1, 2, 3, 4, 5, 6};

/* The keys of segment g must be want[0..nk). */
static void expect_keys(char **got, size_t nk, const char *const *want, size_t g)
{
    for (size_t j = 0; j < nk; j++)
        if (strcmp(got[j], want[j]) != 0)
            fail_msg("segment %zu key %zu is '%s', expected '%s'", g, j, got[j], want[j]);
}

/* ---- hand-worked tables -------------------------------------------------- */

static const char *const zone8[] = {"north", "south", "North", "\xC3\x96st", "north", NULL, "ab", "a b"};
static const char *const band8[] = {"b2", "a1", "b2", "a1", "a1", "b2", "b2", "a1"};

static void test_segset_order_and_rows(void **state)
{
    (void)state;
    const char *const *keys[] = {zone8, band8};
    etacal_table *t = make_table(8, 2, keys);
    segset s;
    etacal_error err;
    etacal_error_clear(&err);
    assert_int_equal(segset_build(&s, t, kcols, 2, &err), ETACAL_OK);
    /* Bytewise: "" < "North" < "a b" < "ab" < "north" < "south" < "Öst";
     * then the second key. */
    const char *const want[][2] = {{"*", "*"},     {"", "b2"},    {"North", "b2"}, {"a b", "a1"},
                                   {"ab", "b2"},   {"north", "a1"}, {"north", "b2"}, {"south", "a1"},
                                   {"\xC3\x96st", "a1"}};
    assert_int_equal(s.nkeys, 2);
    assert_int_equal(s.nseg, 9);
    for (size_t g = 0; g < 9; g++)
        expect_keys(s.keys[g], 2, want[g], g);
    const uint32_t rowseg[] = {6, 7, 2, 8, 5, 1, 4, 3};
    for (size_t i = 0; i < 8; i++)
        assert_int_equal(segset_row(&s, i), rowseg[i]);
    segset_free(&s);
    assert_null(s.keys);
    segset_free(&s); /* twice is harmless */
    segset_free(NULL);

    /* One key: the zones alone. */
    assert_int_equal(segset_build(&s, t, kcols, 1, &err), ETACAL_OK);
    assert_int_equal(s.nseg, 8);
    const char *const want1[] = {"*", "", "North", "a b", "ab", "north", "south", "\xC3\x96st"};
    for (size_t g = 0; g < 8; g++)
        expect_keys(s.keys[g], 1, &want1[g], g);
    const uint32_t rowseg1[] = {5, 6, 2, 7, 5, 1, 4, 3};
    for (size_t i = 0; i < 8; i++)
        assert_int_equal(segset_row(&s, i), rowseg1[i]);
    segset_free(&s);

    /* The keys in the other order: band first. */
    const size_t swapped[] = {2, 1};
    assert_int_equal(segset_build(&s, t, swapped, 2, &err), ETACAL_OK);
    assert_int_equal(s.nseg, 9);
    const char *const want2[][2] = {{"*", "*"},      {"a1", "a b"},  {"a1", "north"}, {"a1", "south"},
                                    {"a1", "\xC3\x96st"}, {"b2", ""}, {"b2", "North"}, {"b2", "ab"},
                                    {"b2", "north"}};
    for (size_t g = 0; g < 9; g++)
        expect_keys(s.keys[g], 2, want2[g], g);
    const uint32_t rowseg2[] = {8, 3, 6, 4, 2, 5, 7, 1};
    for (size_t i = 0; i < 8; i++)
        assert_int_equal(segset_row(&s, i), rowseg2[i]);
    segset_free(&s);

    /* No keys: the global segment only, every row in it. */
    assert_int_equal(segset_build(&s, t, kcols, 0, &err), ETACAL_OK);
    assert_int_equal(s.nseg, 1);
    for (size_t i = 0; i < 8; i++)
        assert_int_equal(segset_row(&s, i), 0);
    segset_free(&s);
    assert_int_equal(err.code, ETACAL_OK);
    etacal_table_destroy(t);
}

static void test_seghier_levels_parents(void **state)
{
    (void)state;
    const char *const *keys[] = {zone8, band8};
    etacal_table *t = make_table(8, 2, keys);
    seghier h;
    etacal_error err;
    etacal_error_clear(&err);
    assert_int_equal(seghier_build(&h, t, kcols, 2, 1, &err), ETACAL_OK);
    /* "*" (0x2A) sorts before "a1" and "b2": each zone's level-1 segment
     * comes just before its level-2 ones. */
    const struct {
        const char *k[2];
        size_t level, parent;
    } want[] = {
        {{"*", "*"}, 0, 0},          {{"", "*"}, 1, 0},         {{"", "b2"}, 2, 1},
        {{"North", "*"}, 1, 0},      {{"North", "b2"}, 2, 3},   {{"a b", "*"}, 1, 0},
        {{"a b", "a1"}, 2, 5},       {{"ab", "*"}, 1, 0},       {{"ab", "b2"}, 2, 7},
        {{"north", "*"}, 1, 0},      {{"north", "a1"}, 2, 9},   {{"north", "b2"}, 2, 9},
        {{"south", "*"}, 1, 0},      {{"south", "a1"}, 2, 12},  {{"\xC3\x96st", "*"}, 1, 0},
        {{"\xC3\x96st", "a1"}, 2, 14},
    };
    assert_int_equal(h.nkeys, 2);
    assert_int_equal(h.nseg, 16);
    for (size_t g = 0; g < 16; g++) {
        expect_keys(h.keys[g], 2, want[g].k, g);
        assert_int_equal(h.level[g], want[g].level);
        assert_int_equal(h.parent[g], want[g].parent);
    }
    const uint32_t full[] = {11, 13, 4, 15, 10, 2, 8, 6}, lv1[] = {9, 12, 3, 14, 9, 1, 7, 5};
    for (size_t i = 0; i < 8; i++) {
        assert_int_equal(seghier_row(&h, 0, i), 0);
        assert_int_equal(seghier_row(&h, 1, i), lv1[i]);
        assert_int_equal(seghier_row(&h, 2, i), full[i]);
    }
    seghier_free(&h);
    assert_null(h.keys);
    seghier_free(&h);
    seghier_free(NULL);

    /* Without levels: the full combinations and the global segment, in
     * the same order as segset's. */
    assert_int_equal(seghier_build(&h, t, kcols, 2, 0, &err), ETACAL_OK);
    assert_int_equal(h.nseg, 9);
    const uint32_t flat[] = {6, 7, 2, 8, 5, 1, 4, 3};
    for (size_t i = 0; i < 8; i++) {
        assert_int_equal(seghier_row(&h, 0, i), 0);
        assert_int_equal(seghier_row(&h, 2, i), flat[i]);
        assert_int_equal(h.level[flat[i]], 2);
        assert_int_equal(h.parent[flat[i]], 0);
    }
    expect_keys(h.keys[0], 2, (const char *const[]){"*", "*"}, 0);
    expect_keys(h.keys[8], 2, (const char *const[]){"\xC3\x96st", "a1"}, 8);
    assert_int_equal(h.level[0], 0);
    seghier_free(&h);

    /* No keys: one segment, level 0. */
    assert_int_equal(seghier_build(&h, t, kcols, 0, 1, &err), ETACAL_OK);
    assert_int_equal(h.nseg, 1);
    assert_int_equal(h.level[0], 0);
    assert_int_equal(seghier_row(&h, 0, 5), 0);
    seghier_free(&h);
    assert_int_equal(err.code, ETACAL_OK);
    etacal_table_destroy(t);
}

/* Key texts with bytes below '*' sort before an open key: a level-2
 * segment may get a smaller number than its parent.  The contract is the
 * bytewise order, parents are found by reference, not by position. */
static void test_seghier_bytes_below_star(void **state)
{
    (void)state;
    static const char *const z[] = {"x", "x", " y", "x"};
    static const char *const b[] = {"#3", "z", "!", "(a)"};
    const char *const *keys[] = {z, b};
    etacal_table *t = make_table(4, 2, keys);
    seghier h;
    etacal_error err;
    assert_int_equal(seghier_build(&h, t, kcols, 2, 1, &err), ETACAL_OK);
    /* " y" < "x"; under "x": "#3" (0x23) < "(a)" (0x28) < "*" < "z" */
    const struct {
        const char *k[2];
        size_t level, parent;
    } want[] = {{{"*", "*"}, 0, 0}, {{" y", "!"}, 2, 2},  {{" y", "*"}, 1, 0}, {{"x", "#3"}, 2, 5},
                {{"x", "(a)"}, 2, 5}, {{"x", "*"}, 1, 0}, {{"x", "z"}, 2, 5}};
    assert_int_equal(h.nseg, 7);
    for (size_t g = 0; g < 7; g++) {
        expect_keys(h.keys[g], 2, want[g].k, g);
        assert_int_equal(h.level[g], want[g].level);
        assert_int_equal(h.parent[g], want[g].parent);
    }
    const uint32_t full[] = {3, 6, 1, 4};
    for (size_t i = 0; i < 4; i++) {
        assert_int_equal(seghier_row(&h, 2, i), full[i]);
        assert_int_equal(seghier_row(&h, 1, i), h.parent[full[i]]);
    }
    seghier_free(&h);
    etacal_table_destroy(t);
}

/* ---- errors --------------------------------------------------------------- */

static void test_errors(void **state)
{
    (void)state;
    const char *const *keys[] = {zone8, band8};
    etacal_table *t = make_table(8, 2, keys);
    etacal_error err;
    segset s;
    seghier h;
    /* A numeric column as a key. */
    const size_t bad[] = {1, 0};
    assert_int_equal(segset_build(&s, t, bad, 2, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "'actual_s' is not a key column");
    assert_null(s.keys); /* freed on failure, safe to free again */
    assert_int_equal(s.nseg, 0);
    segset_free(&s);
    assert_int_equal(seghier_build(&h, t, bad, 2, 1, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "'actual_s' is not a key column");
    assert_null(h.keys);
    assert_null(h.lv);
    assert_int_equal(h.nseg, 0);
    seghier_free(&h);
    /* ... also without levels, and as the first key */
    const size_t bad0[] = {0};
    assert_int_equal(seghier_build(&h, t, bad0, 1, 0, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "'actual_s' is not a key column");
    seghier_free(&h);
    etacal_table_destroy(t);

    /* More combinations of key values than 64 bits can code: five keys of
     * 10000 values each (1e20 > 2^64 = 1.8e19). */
    enum { N = 10000 };
    char **txt = malloc(N * sizeof *txt);
    assert_non_null(txt);
    for (size_t i = 0; i < N; i++) {
        txt[i] = malloc(16);
        assert_non_null(txt[i]);
        snprintf(txt[i], 16, "v%zu", i);
    }
    const char *const *k5[5];
    for (int j = 0; j < 5; j++)
        k5[j] = (const char *const *)txt;
    t = make_table(N, 5, k5);
    assert_int_equal(segset_build(&s, t, kcols, 5, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "too many combinations of key values");
    assert_null(s.keys);
    assert_int_equal(seghier_build(&h, t, kcols, 5, 1, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "too many combinations of key values");
    assert_null(h.lv);
    /* four of them fit (1e16 codes, the hashed map): one segment per row */
    assert_int_equal(segset_build(&s, t, kcols, 4, &err), ETACAL_OK);
    assert_null(s.map.direct);
    assert_int_equal(s.nseg, N + 1);
    for (size_t i = 0; i < N; i++) {
        uint32_t g = segset_row(&s, i);
        for (size_t j = 0; j < 4; j++)
            assert_string_equal(s.keys[g][j], txt[i]);
    }
    segset_free(&s);
    etacal_table_destroy(t);
    for (size_t i = 0; i < N; i++)
        free(txt[i]);
    free(txt);
}

/* ---- large tables against a reference ------------------------------------- */

typedef struct tuple {
    const char *k[MAXK];
    size_t nk;
} tuple;

static int cmp_tuple(const void *a, const void *b)
{
    const tuple *x = a, *y = b;
    for (size_t j = 0; j < x->nk; j++) {
        int c = strcmp(x->k[j], y->k[j]);
        if (c)
            return c;
    }
    return 0;
}

/* Bytewise comparison of two segments' keys: the order segment numbers
 * must follow. */
static int cmp_keys(char **a, char **b, size_t nk)
{
    for (size_t j = 0; j < nk; j++) {
        int c = strcmp(a[j], b[j]);
        if (c)
            return c;
    }
    return 0;
}

/* Checks a seghier built with levels over the rows keys[j][i] against the
 * rule, segment by segment and row by row. */
static void check_hier(const seghier *h, size_t nrows, size_t nk, const char *const *const *keys)
{
    /* the reference: every prefix tuple (with "*" after it) of every row,
     * sorted and made unique */
    size_t cap = nrows * nk + 1, nt = 0;
    tuple *ref = malloc(cap * sizeof *ref);
    assert_non_null(ref);
    for (size_t i = 0; i < nrows; i++)
        for (size_t L = 1; L <= nk; L++) {
            tuple *u = &ref[nt++];
            u->nk = nk;
            for (size_t j = 0; j < nk; j++)
                u->k[j] = j < L ? keys[j][i] : "*";
        }
    qsort(ref, nt, sizeof *ref, cmp_tuple);
    size_t nu = 0;
    for (size_t e = 0; e < nt; e++)
        if (nu == 0 || cmp_tuple(&ref[nu - 1], &ref[e]) != 0)
            ref[nu++] = ref[e];
    assert_int_equal(h->nseg, nu + 1);
    for (size_t j = 0; j < nk; j++)
        assert_string_equal(h->keys[0][j], "*");
    assert_int_equal(h->level[0], 0);
    for (size_t g = 1; g < h->nseg; g++) {
        for (size_t j = 0; j < nk; j++)
            if (strcmp(h->keys[g][j], ref[g - 1].k[j]) != 0)
                fail_msg("segment %zu key %zu '%s', reference '%s'", g, j, h->keys[g][j], ref[g - 1].k[j]);
        size_t L = 0;
        while (L < nk && strcmp(h->keys[g][L], "*") != 0)
            L++;
        assert_int_equal(h->level[g], L);
        for (size_t j = L; j < nk; j++)
            assert_string_equal(h->keys[g][j], "*");
        size_t p = h->parent[g];
        if (L == 1) {
            assert_int_equal(p, 0);
        } else {
            assert_true(p > 0 && p < h->nseg);
            assert_int_equal(h->level[p], L - 1);
            for (size_t j = 0; j < nk; j++)
                assert_string_equal(h->keys[p][j], j == L - 1 ? "*" : h->keys[g][j]);
        }
        if (g > 1)
            assert_true(cmp_keys(h->keys[g - 1], h->keys[g], nk) < 0);
    }
    for (size_t i = 0; i < nrows; i++) {
        assert_int_equal(seghier_row(h, 0, i), 0);
        for (size_t L = 1; L <= nk; L++) {
            uint32_t g = seghier_row(h, L, i);
            assert_true(g < h->nseg);
            assert_int_equal(h->level[g], L);
            for (size_t j = 0; j < L; j++)
                if (strcmp(h->keys[g][j], keys[j][i]) != 0)
                    fail_msg("row %zu level %zu: segment %u key %zu '%s', row has '%s'", i, L, g, j,
                             h->keys[g][j], keys[j][i]);
            if (L > 1)
                assert_int_equal(h->parent[g], seghier_row(h, L - 1, i));
        }
    }
    free(ref);
}

/* segset over the first nk keys, row by row and in order. */
static void check_set(const segset *s, size_t nrows, size_t nk, const char *const *const *keys)
{
    unsigned char *seen = calloc(s->nseg, 1);
    assert_non_null(seen);
    seen[0] = 1;
    for (size_t i = 0; i < nrows; i++) {
        uint32_t g = segset_row(s, i);
        assert_true(g > 0 && g < s->nseg);
        seen[g] = 1;
        for (size_t j = 0; j < nk; j++)
            assert_string_equal(s->keys[g][j], keys[j][i]);
    }
    for (size_t g = 0; g < s->nseg; g++)
        assert_true(seen[g]); /* no segment without a row */
    for (size_t g = 2; g < s->nseg; g++)
        assert_true(cmp_keys(s->keys[g - 1], s->keys[g], nk) < 0);
    free(seen);
}

/* More than 65536 values of a key (32-bit ids), and with a second key
 * more codes than the direct map holds (70000 x 61 > 2^22). */
static void test_many_key_values(void **state)
{
    (void)state;
    enum { NV = 70000, NR = 100000, NB = 61 };
    char *arena = malloc((size_t)NV * 8 + NB * 8);
    const char **zone = malloc(NR * sizeof *zone), **band = malloc(NR * sizeof *band);
    const char **ztxt = malloc(NV * sizeof *ztxt);
    uint32_t *perm = malloc(NV * sizeof *perm);
    assert_non_null(arena);
    assert_non_null(zone);
    assert_non_null(band);
    assert_non_null(ztxt);
    assert_non_null(perm);
    char *p = arena;
    for (size_t v = 0; v < NV; v++) {
        ztxt[v] = p;
        p += sprintf(p, "%zu", v * 7919 % 100003) + 1; /* not zero-padded: "10" < "9" */
    }
    const char *btxt[NB];
    for (size_t b = 0; b < NB; b++) {
        btxt[b] = p;
        p += sprintf(p, "b%zu", (b * 37) % NB) + 1;
    }
    /* every value once in a seeded shuffle, then random rows */
    tu_rng rng = {UINT64_C(0x2385)};
    for (uint32_t v = 0; v < NV; v++)
        perm[v] = v;
    for (size_t v = NV - 1; v > 0; v--) {
        size_t w = (size_t)tu_below(&rng, v + 1);
        uint32_t tmp = perm[v];
        perm[v] = perm[w];
        perm[w] = tmp;
    }
    for (size_t i = 0; i < NR; i++) {
        zone[i] = ztxt[i < NV ? perm[i] : tu_below(&rng, NV)];
        band[i] = btxt[tu_below(&rng, NB)];
    }
    const char *const *keys[] = {zone, band};
    etacal_table *t = make_table(NR, 2, keys);
    int width = 0;
    assert_non_null(etacal_table_key_ids(t, 1, &width));
    assert_int_equal(width, 4);
    assert_int_equal(etacal_table_key_count(t, 1), NV);
    assert_int_equal(etacal_table_key_count(t, 2), NB);
    etacal_error err;
    segset s;
    assert_int_equal(segset_build(&s, t, kcols, 1, &err), ETACAL_OK);
    assert_non_null(s.map.direct);
    assert_int_equal(s.nseg, NV + 1);
    check_set(&s, NR, 1, keys);
    segset_free(&s);
    assert_int_equal(segset_build(&s, t, kcols, 2, &err), ETACAL_OK);
    assert_null(s.map.direct); /* the hashed map */
    check_set(&s, NR, 2, keys);
    segset_free(&s);
    seghier h;
    assert_int_equal(seghier_build(&h, t, kcols, 2, 1, &err), ETACAL_OK);
    check_hier(&h, NR, 2, keys);
    seghier_free(&h);
    etacal_table_destroy(t);
    free(perm);
    free(ztxt);
    free(band);
    free(zone);
    free(arena);
}

/* Three keys of 120, 200 and 200 values (4.8e6 codes > 2^22: hashed), 30000 random rows
 * (the hashed map grows from 1024 slots), checked with levels. */
static void test_many_combinations(void **state)
{
    (void)state;
    enum { NR = 30000, NV = 200 };
    static char txt[3][NV][8];
    for (int j = 0; j < 3; j++)
        for (int v = 0; v < NV; v++)
            snprintf(txt[j][v], sizeof txt[j][v], "%c%d", "zAm"[j], (v * 13) % NV);
    const char **k[3];
    for (int j = 0; j < 3; j++) {
        k[j] = malloc(NR * sizeof *k[j]);
        assert_non_null(k[j]);
    }
    tu_rng rng = {UINT64_C(944)};
    for (size_t i = 0; i < NR; i++)
        for (int j = 0; j < 3; j++)
            k[j][i] = txt[j][tu_below(&rng, j == 0 ? 120 : NV)];
    const char *const *keys[] = {k[0], k[1], k[2]};
    etacal_table *t = make_table(NR, 3, keys);
    assert_int_equal(etacal_table_key_count(t, 1), 120);
    assert_int_equal(etacal_table_key_count(t, 2), NV);
    assert_int_equal(etacal_table_key_count(t, 3), NV);
    etacal_error err;
    segset s;
    assert_int_equal(segset_build(&s, t, kcols, 3, &err), ETACAL_OK);
    assert_null(s.map.direct);
    assert_true(s.map.nslots > 1024);
    check_set(&s, NR, 3, keys);
    segset_free(&s);
    seghier h;
    assert_int_equal(seghier_build(&h, t, kcols, 3, 1, &err), ETACAL_OK);
    check_hier(&h, NR, 3, keys);
    seghier_free(&h);
    /* without levels: the full tuples only, the same numbers as segset's */
    assert_int_equal(seghier_build(&h, t, kcols, 3, 0, &err), ETACAL_OK);
    assert_int_equal(segset_build(&s, t, kcols, 3, &err), ETACAL_OK);
    assert_int_equal(h.nseg, s.nseg);
    for (size_t i = 0; i < NR; i++)
        assert_int_equal(seghier_row(&h, 3, i), segset_row(&s, i));
    segset_free(&s);
    seghier_free(&h);
    etacal_table_destroy(t);
    for (int j = 0; j < 3; j++)
        free(k[j]);
}

/* A table without rows: the global segment only. */
static void test_no_rows(void **state)
{
    (void)state;
    const char *const *keys[] = {zone8, band8};
    etacal_table *t = make_table(0, 2, keys);
    assert_int_equal(etacal_table_rows(t), 0);
    etacal_error err;
    segset s;
    assert_int_equal(segset_build(&s, t, kcols, 2, &err), ETACAL_OK);
    assert_int_equal(s.nseg, 1);
    segset_free(&s);
    seghier h;
    assert_int_equal(seghier_build(&h, t, kcols, 2, 1, &err), ETACAL_OK);
    assert_int_equal(h.nseg, 1);
    assert_string_equal(h.keys[0][1], "*");
    seghier_free(&h);
    etacal_table_destroy(t);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_segset_order_and_rows),
        cmocka_unit_test(test_seghier_levels_parents),
        cmocka_unit_test(test_seghier_bytes_below_star),
        cmocka_unit_test(test_errors),
        cmocka_unit_test(test_many_key_values),
        cmocka_unit_test(test_many_combinations),
        cmocka_unit_test(test_no_rows),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
