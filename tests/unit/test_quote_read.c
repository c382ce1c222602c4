/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_quote_read.c: reading quote tables (src/quote_read.c,
 * etacal_quotes_read_csv) beyond what tests/unit/test_quote.c and the e2e
 * cases tests/data/quotes_bad_* check, against the contract in
 * include/etacal/quote.h and the header comment of quote_read.c.
 *
 * What each check is measured against:
 * - the round trip: a table with every optional part (method qr, coef_
 *   columns, min_/max_ ranges, a confidence, empty k) whose numbers are
 *   random finite doubles drawn bit by bit (subnormals, -0, the largest
 *   double, values with 17 significant digits), written with
 *   quotes_write_csv and read back: every field must be equal bit
 *   for bit (quote.h: "Numbers in shortest round-trip form"), and writing
 *   the read table must give the same bytes;
 * - the header rules of quote.h: the columns before 'target' are the keys,
 *   the known columns may come in any order after it, unknown ones
 *   (a note, 'remark', 'Target' in another case) are ignored;
 * - quote.h's struct comment: rows by segment, then target, whatever the
 *   file's order; segments in the file's order with the global one first;
 * - the 'confidence' column: one value on every row (compared as numbers),
 *   else an error at the row that differs;
 * - the CSV shapes of RFC 4180 (IETF 2005) section 2 (rule 1: CRLF ends a
 *   record) and csvstream's extensions (internal.h: a byte-order mark is
 *   dropped; any one-byte delimiter);
 * - the limits: 16 key columns (ETACAL_MAX_KEYS) and 16 coef_ columns
 *   (ETACAL_QR_MAX_COVARIATES), each refused one above, accepted at it.
 * Every error is checked by code, FILE:LINE and message. */
#define _GNU_SOURCE
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "stream.h"
#include "testutil.h"

typedef struct fixture {
    tu_dir dir;
    char path[600];
    etacal_quotes *q, *q2;
    etacal_error err;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    if (!f)
        return -1;
    tu_dir_make(&f->dir);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    etacal_quotes_destroy(f->q);
    etacal_quotes_destroy(f->q2);
    tu_dir_remove(&f->dir);
    free(f);
    return 0;
}

static int read_bytes(fixture *f, const char *bytes, size_t len, char delim, etacal_quotes **out)
{
    etacal_quotes_destroy(*out);
    *out = NULL;
    tu_write_bytes(&f->dir, "quotes.csv", bytes, len, f->path, sizeof f->path);
    etacal_error_clear(&f->err);
    return etacal_quotes_read_csv(f->path, delim, out, &f->err);
}

static int read_text(fixture *f, const char *text, char delim)
{
    return read_bytes(f, text, strlen(text), delim, &f->q2);
}

static void expect_error(fixture *f, const char *text, char delim, size_t line, const char *msg)
{
    int rc = read_text(f, text, delim);
    if (rc == ETACAL_OK)
        fail_msg("reading succeeded, expected '%s'", msg);
    char where[700];
    tu_where(where, sizeof where, f->path, line);
    assert_int_equal(rc, ETACAL_EPARSE);
    assert_error(&f->err, ETACAL_EPARSE, where, msg);
    assert_null(f->q2);
}

static char *write_mem(const etacal_quotes *q)
{
    char *buf = NULL;
    size_t len = 0;
    FILE *fp = open_memstream(&buf, &len);
    assert_non_null(fp);
    etacal_error err;
    assert_int_equal(quotes_write_csv(q, fp, &err), ETACAL_OK);
    assert_int_equal(fclose(fp), 0);
    return buf;
}

/* ---- the round trip ------------------------------------------------------ */

/* A finite double from random bits, or one of the awkward ones. */
static double any_double(tu_rng *g)
{
    static const double odd[] = {0x1p-1074, -0.0, DBL_MAX, -DBL_MIN, 0.1 + 0.2, 1.0 / 3, -2.5e-310, 123456789.0123456};
    if (tu_below(g, 4) == 0)
        return odd[tu_below(g, sizeof odd / sizeof *odd)];
    for (;;) {
        uint64_t b = tu_next(g);
        double v;
        memcpy(&v, &b, sizeof v);
        if (isfinite(v))
            return v;
    }
}

/* Skeleton: two keys, three targets, method qr with covariates
 * "dist km" (a space, quoted nowhere) and items, ranges, a confidence;
 * rows at all three levels, (north, *) without a 0.5 row. */
static const char skeleton[] =
    "zone,band,target,method,n,k,offset_s,slope,coef_dist km,coef_items,min_dist km,max_dist km,min_items,"
    "max_items,confidence,coverage_mean,coverage_low\n"
    "*,*,0.5,qr,1000,501,-12.5,0.8125,21.25,3.375,0.4,11.5,1,8,0.9,0.5,0.4\n"
    "*,*,0.8,qr,1000,801,1,1,1,1,0,1,0,1,0.9,0.8,0.7\n"
    "*,*,0.95,qr,1000,951,1,1,1,1,0,1,0,1,0.9,0.95,0.9\n"
    "north,*,0.8,qr,400,321,1,1,1,1,0,1,0,1,0.9,0.8,0.7\n"
    "north,*,0.95,qr,400,381,1,1,1,1,0,1,0,1,0.9,0.95,0.9\n"
    "north,\"lunch, late\",0.5,qr,200,,1,1,1,1,0,1,0,1,0.9,0.5,0.4\n"
    "north,\"lunch, late\",0.8,qr,200,161,1,1,1,1,0,1,0,1,0.9,0.8,0.7\n"
    "south,dinner,0.95,qr,250,239,1,1,1,1,0,1,0,1,0.9,0.95,0.9\n";

static void assert_same_table(const etacal_quotes *a, const etacal_quotes *b)
{
    assert_int_equal(b->nkeys, a->nkeys);
    for (size_t j = 0; j < a->nkeys; j++)
        assert_string_equal(b->key_names[j], a->key_names[j]);
    assert_int_equal(b->method, a->method);
    assert_int_equal(b->ntargets, a->ntargets);
    for (size_t t = 0; t < a->ntargets; t++)
        assert_same_double(b->targets[t], a->targets[t]);
    assert_int_equal(b->nsegs, a->nsegs);
    for (size_t s = 0; s < a->nsegs; s++)
        for (size_t j = 0; j < a->nkeys; j++)
            assert_string_equal(b->segs[s].keys[j], a->segs[s].keys[j]);
    assert_int_equal(b->ncoef, a->ncoef);
    for (size_t j = 0; j < a->ncoef; j++)
        assert_string_equal(b->coef_names[j], a->coef_names[j]);
    assert_true(!a->ranges == !b->ranges);
    assert_same_double(b->confidence, a->confidence);
    assert_int_equal(b->nrows, a->nrows);
    for (size_t r = 0; r < a->nrows; r++) {
        const etacal_quote *x = &a->rows[r], *y = &b->rows[r];
        assert_int_equal(y->seg, x->seg);
        assert_int_equal(y->target, x->target);
        assert_int_equal(y->method, x->method);
        assert_int_equal(y->n, x->n);
        assert_int_equal(y->k, x->k);
        assert_same_double(y->offset_s, x->offset_s);
        assert_same_double(y->slope, x->slope);
        for (size_t j = 0; j < a->ncoef; j++) {
            assert_same_double(y->coef[j], x->coef[j]);
            if (a->ranges) {
                assert_same_double(y->x_min[j], x->x_min[j]);
                assert_same_double(y->x_max[j], x->x_max[j]);
            }
        }
    }
}

static void test_round_trip_bits(void **state)
{
    fixture *f = *state;
    assert_int_equal(read_bytes(f, skeleton, strlen(skeleton), 0, &f->q), ETACAL_OK);
    etacal_quotes *q = f->q;
    assert_int_equal(q->nrows, 8);
    assert_int_equal(q->ncoef, 2);
    assert_non_null(q->ranges);
    assert_same_double(q->confidence, 0.9);
    assert_int_equal(q->rows[5].k, 0); /* the empty k: unknown */
    /* the first row's fields, each in its own place */
    const etacal_quote *r0 = &q->rows[0];
    assert_string_equal(q->coef_names[0], "dist km");
    assert_string_equal(q->coef_names[1], "items");
    const double want0[] = {-12.5, 0.8125, 21.25, 3.375, 0.4, 11.5, 1, 8};
    const double got0[] = {r0->offset_s, r0->slope,    r0->coef[0],  r0->coef[1],
                           r0->x_min[0], r0->x_max[0], r0->x_min[1], r0->x_max[1]};
    for (size_t i = 0; i < 8; i++)
        assert_same_double(got0[i], want0[i]);
    assert_int_equal(r0->n, 1000);
    assert_int_equal(r0->k, 501);
    tu_rng g = {UINT64_C(0x0b17b175)};
    /* the values set, kept apart from the table (whose arrays could alias) */
    double set[8][8];
    size_t setn[8], setk[8];
    for (int round = 0; round < 200; round++) {
        /* targets: ascending, in (0,1), as many digits as a double has */
        double t0 = tu_unif(&g) * 0.3 + 0x1p-60, t1 = 0.3 + tu_unif(&g) * 0.3, t2 = 0.6 + tu_unif(&g) * 0.4;
        if (!(t2 < 1))
            t2 = 0.9999999999999999;
        q->targets[0] = t0;
        q->targets[1] = t1;
        q->targets[2] = t2;
        q->confidence = round == 0 ? 0x1p-1074 : round == 1 ? 1 - 0x1p-53 : tu_unif(&g) * 0.98 + 0.01;
        for (size_t r = 0; r < q->nrows; r++) {
            etacal_quote *x = &q->rows[r];
            x->n = setn[r] = 1 + (size_t)tu_below(&g, 1000000);
            x->k = setk[r] = r == 5 ? 0 : 1 + (size_t)tu_below(&g, x->n);
            x->offset_s = set[r][0] = any_double(&g);
            x->slope = set[r][1] = any_double(&g);
            for (size_t j = 0; j < 2; j++) {
                x->coef[j] = set[r][2 + j] = any_double(&g);
                double a = any_double(&g), b = any_double(&g);
                x->x_min[j] = set[r][4 + 2 * j] = a < b ? a : b;
                x->x_max[j] = set[r][5 + 2 * j] = a < b ? b : a;
            }
        }
        char *text = write_mem(q);
        assert_int_equal(read_bytes(f, text, strlen(text), 0, &f->q2), ETACAL_OK);
        assert_same_table(q, f->q2);
        for (size_t r = 0; r < q->nrows; r++) {
            const etacal_quote *y = &f->q2->rows[r];
            const double got[] = {y->offset_s, y->slope,    y->coef[0],  y->coef[1],
                                  y->x_min[0], y->x_max[0], y->x_min[1], y->x_max[1]};
            for (size_t i = 0; i < 8; i++)
                if (!tu_same_bits(got[i], set[r][i]))
                    fail_msg("round %d row %zu field %zu: %a, set %a", round, r, i, got[i], set[r][i]);
            assert_int_equal(y->n, setn[r]);
            assert_int_equal(y->k, setk[r]);
        }
        assert_same_double(f->q2->targets[0], t0);
        assert_same_double(f->q2->targets[2], t2);
        /* the read table writes the same bytes */
        char *again = write_mem(f->q2);
        assert_string_equal(again, text);
        free(again);
        free(text);
    }
}

/* ---- the header ---------------------------------------------------------- */

static void test_header_rules(void **state)
{
    fixture *f = *state;
    /* The known columns in another order, unknown ones between them
     * (Target in another case, remark, a note with delimiters), none of them
     * read. */
    const char *text = "region,zone,target,note,slope,remark,Target,n,offset_s,method,k,confidence\n"
                       "*,*,0.9,\"a, b\",1,17,0.5,5000,312.125,add,4501,0.95\n"
                       "eu,*,0.9,,1,x,zz,900,250.0625,add,811,0.95\n"
                       "eu,berlin,0.9,n,1,,,400,180.375,add,361,0.95\n";
    assert_int_equal(read_text(f, text, 0), ETACAL_OK);
    const etacal_quotes *q = f->q2;
    assert_int_equal(q->nkeys, 2);
    assert_string_equal(q->key_names[0], "region");
    assert_string_equal(q->key_names[1], "zone");
    assert_int_equal(q->ntargets, 1);
    assert_same_double(q->targets[0], 0.9);
    assert_same_double(q->confidence, 0.95);
    assert_int_equal(q->ncoef, 0);
    assert_null(q->ranges);
    assert_int_equal(q->nrows, 3);
    const double off[] = {312.125, 250.0625, 180.375};
    const size_t n[] = {5000, 900, 400}, k[] = {4501, 811, 361};
    for (size_t r = 0; r < 3; r++) {
        assert_int_equal(q->rows[r].seg, r);
        assert_same_double(q->rows[r].offset_s, off[r]);
        assert_same_double(q->rows[r].slope, 1);
        assert_int_equal(q->rows[r].n, n[r]);
        assert_int_equal(q->rows[r].k, k[r]);
        assert_int_equal(q->rows[r].method, ETACAL_METHOD_ADD);
        assert_null(q->rows[r].x_min);
    }
    assert_string_equal(q->segs[2].keys[1], "berlin");
    /* Everything before 'target' is a key, whatever its name. */
    assert_int_equal(read_text(f, "note,cell,target,method,n,offset_s,slope\n*,*,0.9,add,50,3.5,1\n", 0), ETACAL_OK);
    assert_int_equal(f->q2->nkeys, 2);
    assert_string_equal(f->q2->key_names[0], "note");
    assert_string_equal(f->q2->key_names[1], "cell");
    /* No keys at all: the one global row. */
    assert_int_equal(read_text(f, "target,method,n,offset_s,slope\n0.9,ratio,50,0,1.375\n", 0), ETACAL_OK);
    assert_int_equal(f->q2->nkeys, 0);
    assert_int_equal(f->q2->nsegs, 1);
    assert_same_double(f->q2->rows[0].slope, 1.375);
    assert_same_double(f->q2->segs[0].score_q[0], 1.375);
    /* A known column before 'target' is refused, not taken for a key. */
    expect_error(f, "zone,slope,target,method,n,offset_s\n*,1,0.9,add,50,3.5\n", 0, 1,
                 "column 'slope' must come after 'target' (the key columns come first)");
    expect_error(f, "zone,confidence,target,method,n,offset_s,slope\n*,0.9,0.9,add,50,3.5,1\n", 0, 1,
                 "column 'confidence' must come after 'target' (the key columns come first)");
    expect_error(f, "zone,Target,method,n,offset_s,slope\n*,0.9,add,50,3.5,1\n", 0, 1,
                 "not a quote table: no column 'target' in the header");
    expect_error(f, "zone,target,method,n,offset_s,slope,coef_\n*,0.9,qr,50,3.5,1,2\n", 0, 1,
                 "column 'coef_' names no covariate");
    expect_error(f, "zone,target,method,n,offset_s,slope,coef_a,coef_a\n*,0.9,qr,50,3.5,1,2,3\n", 0, 1,
                 "column 'coef_a' appears twice in the header");
    expect_error(f, "zone,target,method,n,offset_s,slope,coef_a,min_a,max_a,max_a\n*,0.9,qr,50,3.5,1,2,0,1,1\n", 0, 1,
                 "column 'max_a' appears twice in the header");
}

/* ETACAL_MAX_KEYS key columns are read; one more is refused.  The same
 * for ETACAL_QR_MAX_COVARIATES coef_ columns. */
static void test_limits(void **state)
{
    fixture *f = *state;
    char text[4096];
    for (size_t nk = ETACAL_MAX_KEYS; nk <= ETACAL_MAX_KEYS + 1; nk++) {
        size_t n = 0;
        for (size_t j = 0; j < nk; j++)
            n += (size_t)snprintf(text + n, sizeof text - n, "key%zu,", j);
        n += (size_t)snprintf(text + n, sizeof text - n, "target,method,n,offset_s,slope\n");
        for (size_t j = 0; j < nk; j++)
            n += (size_t)snprintf(text + n, sizeof text - n, "*,");
        n += (size_t)snprintf(text + n, sizeof text - n, "0.9,add,50,3.5,1\n");
        for (size_t j = 0; j < nk; j++)
            n += (size_t)snprintf(text + n, sizeof text - n, "v%zu,", j);
        snprintf(text + n, sizeof text - n, "0.9,add,20,7.25,1\n");
        if (nk == ETACAL_MAX_KEYS) {
            assert_int_equal(read_text(f, text, 0), ETACAL_OK);
            assert_int_equal(f->q2->nkeys, ETACAL_MAX_KEYS);
            assert_string_equal(f->q2->key_names[15], "key15");
            assert_string_equal(f->q2->segs[1].keys[15], "v15");
            /* the index takes it too */
            etacal_quote_index *ix = NULL;
            assert_int_equal(etacal_quote_index_create(f->q2, &ix, &f->err), ETACAL_OK);
            etacal_quote_index_destroy(ix);
        } else {
            expect_error(f, text, 0, 1, "more than 16 key columns before 'target'");
        }
    }
    for (size_t nc = ETACAL_QR_MAX_COVARIATES; nc <= ETACAL_QR_MAX_COVARIATES + 1; nc++) {
        size_t n = (size_t)snprintf(text, sizeof text, "zone,target,method,n,offset_s,slope");
        for (size_t j = 0; j < nc; j++)
            n += (size_t)snprintf(text + n, sizeof text - n, ",coef_x%zu", j);
        n += (size_t)snprintf(text + n, sizeof text - n, "\n*,0.9,qr,50,3.5,0.75");
        for (size_t j = 0; j < nc; j++)
            n += (size_t)snprintf(text + n, sizeof text - n, ",%zu.125", j);
        snprintf(text + n, sizeof text - n, "\n");
        if (nc == ETACAL_QR_MAX_COVARIATES) {
            assert_int_equal(read_text(f, text, 0), ETACAL_OK);
            assert_int_equal(f->q2->ncoef, ETACAL_QR_MAX_COVARIATES);
            assert_string_equal(f->q2->coef_names[15], "x15");
            assert_same_double(f->q2->rows[0].coef[15], 15.125);
        } else {
            expect_error(f, text, 0, 1, "too many coef_ columns (at most 16)");
        }
    }
}

/* ---- rows ---------------------------------------------------------------- */

static void test_rows_sorted(void **state)
{
    fixture *f = *state;
    /* file order: segments north, *, south; targets scrambled */
    const char *text = "zone,target,method,n,k,offset_s,slope\n"
                       "north,0.9,add,400,361,210.25,1\n"
                       "*,0.975,add,900,879,655.5,1\n"
                       "south,0.8,add,300,241,95.125,1\n"
                       "*,0.8,add,900,721,100.5,1\n"
                       "north,0.8,add,400,321,110.75,1\n"
                       "*,0.9,add,900,811,200.375,1\n"
                       "north,0.975,add,400,391,401.0625,1\n";
    assert_int_equal(read_text(f, text, 0), ETACAL_OK);
    const etacal_quotes *q = f->q2;
    assert_int_equal(q->ntargets, 3);
    assert_same_double(q->targets[0], 0.8);
    assert_same_double(q->targets[1], 0.9);
    assert_same_double(q->targets[2], 0.975);
    assert_int_equal(q->nsegs, 3);
    assert_string_equal(q->segs[0].keys[0], "*");
    assert_string_equal(q->segs[1].keys[0], "north");
    assert_string_equal(q->segs[2].keys[0], "south");
    struct {
        size_t seg, target;
        double offset;
        size_t n, k;
    } want[] = {
        {0, 0, 100.5, 900, 721},  {0, 1, 200.375, 900, 811},  {0, 2, 655.5, 900, 879},  {1, 0, 110.75, 400, 321},
        {1, 1, 210.25, 400, 361}, {1, 2, 401.0625, 400, 391}, {2, 0, 95.125, 300, 241},
    };
    assert_int_equal(q->nrows, 7);
    for (size_t r = 0; r < 7; r++) {
        const etacal_quote *x = &q->rows[r];
        if (x->seg != want[r].seg || x->target != want[r].target || x->offset_s != want[r].offset ||
            x->n != want[r].n || x->k != want[r].k)
            fail_msg("row %zu: seg %zu target %zu offset %g n %zu k %zu, expected %zu %zu %g %zu %zu", r, x->seg,
                     x->target, x->offset_s, x->n, x->k, want[r].seg, want[r].target, want[r].offset, want[r].n,
                     want[r].k);
    }
    /* per segment: its own rows, the rest fall back */
    assert_int_equal(q->segs[2].status[0], ETACAL_OWN_ROW);
    assert_int_equal(q->segs[2].status[1], ETACAL_FALLBACK_FEW_ROWS);
    assert_int_equal(q->segs[1].k[2], 391);
    assert_same_double(q->segs[1].score_q[2], 401.0625);
    assert_true(isnan(q->segs[2].score_q[2]));
}

static void test_confidence_one_value(void **state)
{
    fixture *f = *state;
    const char *hdr = "zone,target,method,n,k,offset_s,slope,confidence\n";
    char text[1024];
    /* the same value in other spellings is the same confidence */
    snprintf(text, sizeof text,
             "%s*,0.9,add,5000,4540,312.125,1,0.95\nnorth,0.9,add,900,830,250.25,1,0.950\n"
             "south,0.9,add,900,830,250.25,1,9.5e-1\n",
             hdr);
    assert_int_equal(read_text(f, text, 0), ETACAL_OK);
    assert_same_double(f->q2->confidence, 0.95);
    /* without the column: 0 */
    assert_int_equal(read_text(f, "zone,target,method,n,offset_s,slope\n*,0.9,add,50,3.5,1\n", 0), ETACAL_OK);
    assert_same_double(f->q2->confidence, 0);
    /* a different value: an error at the row that differs */
    snprintf(text, sizeof text,
             "%s*,0.9,add,5000,4540,312.125,1,0.95\n\nnorth,0.9,add,900,830,250.25,1,0.95\n"
             "south,0.9,add,900,830,250.25,1,0.9\n",
             hdr);
    expect_error(f, text, 0, 5, "the rows have different confidences (0.94999999999999996, 0.90000000000000002)");
    snprintf(text, sizeof text, "%s*,0.9,add,5000,4540,312.125,1,0.95\nnorth,0.9,add,900,830,250.25,1,\n", hdr);
    expect_error(f, text, 0, 3, "'confidence' must be a finite number, got ''");
    snprintf(text, sizeof text, "%s*,0.9,add,5000,4540,312.125,1,0\n", hdr);
    expect_error(f, text, 0, 2, "'confidence' must be in (0,1)");
    /* coverage_mean and coverage_low are checked, not kept */
    assert_int_equal(read_text(f,
                               "zone,target,method,n,k,offset_s,slope,coverage_mean,coverage_low\n"
                               "*,0.9,add,5000,4540,312.125,1,0.907818,0.899\n",
                               0),
                     ETACAL_OK);
    assert_same_double(f->q2->confidence, 0);
    expect_error(f,
                 "zone,target,method,n,k,offset_s,slope,coverage_mean,coverage_low\n"
                 "*,0.9,add,5000,4540,312.125,1,1.0000001,0.899\n",
                 0, 2, "'coverage_mean' must be a share in [0,1]");
}

/* ---- CSV shapes ---------------------------------------------------------- */

static void check_small(const etacal_quotes *q)
{
    assert_int_equal(q->nkeys, 1);
    assert_string_equal(q->key_names[0], "zone");
    assert_int_equal(q->nrows, 2);
    assert_string_equal(q->segs[1].keys[0], "old town; north\tside");
    assert_same_double(q->rows[0].offset_s, 312.125);
    assert_same_double(q->rows[1].offset_s, 250.0625);
    assert_int_equal(q->rows[1].k, 811);
    assert_int_equal(q->method, ETACAL_METHOD_ADD);
}

static void test_csv_shapes(void **state)
{
    fixture *f = *state;
    /* method last: a '\r' left on the field would make it unknown */
    static const char *const bodies[] = {
        "zone%ctarget%cn%ck%coffset_s%cslope%cmethod%s"
        "*%c0.9%c5000%c4501%c312.125%c1%cadd%s"
        "\"old town; north\tside\"%c0.9%c900%c811%c250.0625%c1%cadd%s",
    };
    const char delims[] = {',', ';', '\t', '|'};
    for (size_t b = 0; b < 2; b++)     /* with a byte-order mark or not */
        for (size_t c = 0; c < 2; c++) /* LF or CRLF */
            for (size_t d = 0; d < 4; d++) {
                char dl = delims[d];
                const char *eol = c ? "\r\n" : "\n";
                char text[512];
                int n = snprintf(text, sizeof text, "%s", b ? "\xEF\xBB\xBF" : "");
                snprintf(text + n, sizeof text - (size_t)n, bodies[0], dl, dl, dl, dl, dl, dl, eol, dl, dl, dl, dl, dl,
                         dl, eol, dl, dl, dl, dl, dl, dl, eol);
                int rc = read_text(f, text, d == 0 && b == 0 ? 0 : dl);
                if (rc != ETACAL_OK)
                    fail_msg("bom %zu crlf %zu delim '%c': %s: %s", b, c, dl, f->err.where, f->err.msg);
                check_small(f->q2);
            }
    /* CRLF: the error lines are the records' lines */
    expect_error(f,
                 "zone,target,method,n,k,offset_s,slope\r\n*,0.9,add,5000,4501,312.125,1\r\n\r\n"
                 "north,0.9,add,900,901,250.25,1\r\n",
                 0, 4, "k must be a rank from 1 to n = 900, got 901");
    /* a ';' file read with its delimiter named: a ',' inside a field is text */
    assert_int_equal(
        read_text(f, "zone;target;method;n;offset_s;slope\n*;0.9;add;50;3.5;1\n\"a,b\";0.9;add;9;1.25;1\n", ';'),
        ETACAL_OK);
    assert_string_equal(f->q2->segs[1].keys[0], "a,b");
    /* the byte-order mark is no part of the first key's name: a key
     * column named with one would be a different column */
    assert_int_equal(read_text(f, "\xEF\xBB\xBFtarget,method,n,offset_s,slope\n0.9,add,50,3.5,1\n", 0), ETACAL_OK);
    assert_int_equal(f->q2->nkeys, 0);
}

int main(void)
{
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
    const struct CMUnitTest tests[] = {
        T(test_round_trip_bits), T(test_header_rules),         T(test_limits),
        T(test_rows_sorted),     T(test_confidence_one_value), T(test_csv_shapes),
    };
#undef T
    return cmocka_run_group_tests(tests, NULL, NULL);
}
