/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_apply.c: apply_csv, streaming orders through a quote table.
 *
 * Records must come out byte for byte (quoting, CRLF, newlines inside
 * quotes) with the promise columns appended; each order takes the most
 * specific matching row (own segment, then the last keys as '*', then the
 * global row); missing predictions give empty promises; malformed rows are
 * errors with FILE:LINE, or pass through empty under --bad-rows skip. */
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

typedef struct fixture {
    tu_dir dir;
    char qpath[600], in[600];
    etacal_quotes *q;
    etacal_error err;
    etacal_apply_stats st;
    char *out;
    size_t outlen;
} fixture;

/* Targets .9 and .975; rows for the global segment, one partial level
 * (north,*) and two full segments, one of them for .9 only. */
static const char *table_csv = "zone,vehicle,target,method,n,k,offset_s,slope\n"
                               "*,*,0.9,add,5000,4501,312.125,1\n"
                               "*,*,0.975,add,5000,4877,655.5,1\n"
                               "north,*,0.9,add,900,811,250.25,1\n"
                               "north,bike,0.9,add,400,361,180.0625,1\n"
                               "north,bike,0.975,add,400,391,420.5,1\n"
                               "south,car,0.9,add,300,271,95.5,1\n";

static void load_table(fixture *f, const char *text)
{
    etacal_quotes_destroy(f->q);
    f->q = NULL;
    tu_write_text(&f->dir, "quotes.csv", text, f->qpath, sizeof f->qpath);
    etacal_error e;
    if (etacal_quotes_read_csv(f->qpath, 0, &f->q, &e) != ETACAL_OK)
        fail_msg("reading the quote table: %s: %s", e.where, e.msg);
}

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    if (!f)
        return -1;
    tu_dir_make(&f->dir);
    load_table(f, table_csv);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    etacal_quotes_destroy(f->q);
    free(f->out);
    tu_dir_remove(&f->dir);
    free(f);
    return 0;
}

/* Runs apply on the given orders bytes into a memory stream; the output is
 * in f->out (NUL-terminated) whatever the status. */
static int run_bytes(fixture *f, const char *orders, size_t len, const etacal_apply_opts *o)
{
    tu_write_bytes(&f->dir, "orders.csv", orders, len, f->in, sizeof f->in);
    free(f->out);
    f->out = NULL;
    f->outlen = 0;
    FILE *fp = open_memstream(&f->out, &f->outlen);
    assert_non_null(fp);
    etacal_error_clear(&f->err);
    int rc = apply_csv(f->q, f->in, fp, o, &f->st, &f->err);
    assert_int_equal(fclose(fp), 0);
    return rc;
}

static int run(fixture *f, const char *orders, const etacal_apply_opts *o)
{
    return run_bytes(f, orders, strlen(orders), o);
}

static etacal_apply_opts default_opts(void)
{
    etacal_apply_opts o;
    memset(&o, 0, sizeof o);
    o.pred_col = "pred_s";
    return o;
}

static void expect_fail(fixture *f, const char *orders, const etacal_apply_opts *o, int code,
                        size_t line, const char *msg)
{
    int rc = run(f, orders, o);
    char where[700];
    if (line)
        tu_where(where, sizeof where, f->in, line);
    else
        snprintf(where, sizeof where, "%s", f->in);
    assert_error(&f->err, code, where, msg);
    assert_int_equal(rc, code);
}

static void test_apply_pass_through_and_fallback(void **state)
{
    fixture *f = *state;
    const char *orders = "order_id,zone,vehicle,pred_s,note\r\n"
                         "A-1,north,bike,1200,\"rush, \"\"VIP\"\"\"\r\n"
                         "A-2,north,car,600.5,plain\r\n"
                         "A-3,south,car,1500,\"two\nlines\"\r\n"
                         "A-4,east,bike,NA,x\r\n"
                         "A-5,east,van,2.385,y";
    etacal_apply_opts o = default_opts();
    assert_int_equal(run(f, orders, &o), ETACAL_OK);
    /* A-1 north,bike: .9 1200 + 180.0625 = 1380.0625 -> up to 1380.063 ms;
     *                 .975 1200 + 420.5 = 1620.5
     * A-2 north,car: .9 from north,* 600.5 + 250.25 = 850.75;
     *                .975 global 600.5 + 655.5 = 1256
     * A-3 south,car: .9 own 1500 + 95.5; .975 global 1500 + 655.5
     * A-4 no prediction: empty promises
     * A-5 east,van: global for both, 2.385 + 312.125, 2.385 + 655.5;
     *     the last line had no newline and gets one */
    const char *want = "order_id,zone,vehicle,pred_s,note,promise_s_90,promise_s_97.5\r\n"
                       "A-1,north,bike,1200,\"rush, \"\"VIP\"\"\",1380.063,1620.5\r\n"
                       "A-2,north,car,600.5,plain,850.75,1256\r\n"
                       "A-3,south,car,1500,\"two\nlines\",1595.5,2155.5\r\n"
                       "A-4,east,bike,NA,x,,\r\n"
                       "A-5,east,van,2.385,y,314.51,657.885\n";
    assert_string_equal(f->out, want);
    assert_int_equal(f->st.rows, 5);
    assert_int_equal(f->st.promised, 4);
    assert_int_equal(f->st.missing_pred, 1);
    assert_int_equal(f->st.bad, 0);
    assert_int_equal(f->st.fallback, 2); /* A-2 (north,*) and A-5 (global) at .9 */
    assert_int_equal(f->st.with_actual, 0);
    assert_int_equal(f->st.first_bad_line, 0);
}

static void test_apply_missing_prediction_tokens(void **state)
{
    fixture *f = *state;
    const char *orders = "zone,vehicle,pred_s\n"
                         "north,bike,\n"
                         "north,bike,null\n"
                         "north,bike,\"NaN\"\n"
                         "north,bike, NA \n"
                         "north,bike,17.25\n";
    etacal_apply_opts o = default_opts();
    size_t sel[] = {0};
    o.targets = sel;
    o.ntargets = 1;
    assert_int_equal(run(f, orders, &o), ETACAL_OK);
    assert_string_equal(f->out, "zone,vehicle,pred_s,promise_s\n"
                                "north,bike,,\n"
                                "north,bike,null,\n"
                                "north,bike,\"NaN\",\n"
                                "north,bike, NA ,\n"
                                "north,bike,17.25,197.313\n");
    assert_int_equal(f->st.missing_pred, 4);
    assert_int_equal(f->st.promised, 1);
    assert_int_equal(f->st.rows, 5);
}

static void test_apply_one_target_rounding_and_actuals(void **state)
{
    fixture *f = *state;
    const char *orders = "id,zone,vehicle,pred_s,actual_s\n"
                         "1,north,bike,1200,1500.25\n"
                         "2,south,car,1500,2200\n"
                         "3,west,car,944.7,900\n"
                         "4,west,car,800,NA\n"
                         "5,north,bike,NA,3.5\n";
    etacal_apply_opts o = default_opts();
    size_t sel[] = {1}; /* .975 only */
    o.targets = sel;
    o.ntargets = 1;
    o.round_s = 60;
    o.actual_col = "actual_s";
    assert_int_equal(run(f, orders, &o), ETACAL_OK);
    /* .975: 1 own row 1620.5 -> 1680; 2 global (south,car has .9 only)
     * 2155.5 -> 2160; 3 global 1600.2 -> 1620; 4 global 1455.5 -> 1500. */
    assert_string_equal(f->out, "id,zone,vehicle,pred_s,actual_s,promise_s\n"
                                "1,north,bike,1200,1500.25,1680\n"
                                "2,south,car,1500,2200,2160\n"
                                "3,west,car,944.7,900,1620\n"
                                "4,west,car,800,NA,1500\n"
                                "5,north,bike,NA,3.5,\n");
    assert_int_equal(f->st.rows, 5);
    assert_int_equal(f->st.promised, 4);
    assert_int_equal(f->st.missing_pred, 1);
    assert_int_equal(f->st.with_actual, 3);
    assert_int_equal(f->st.hits[0], 2);   /* 1500.25 <= 1680, 900 <= 1620; 2200 > 2160 */
    assert_int_equal(f->st.bare_hits, 1); /* 900 <= 944.7 */
    assert_int_equal(f->st.fallback, 3);
}

static void test_apply_more_specific_row_wins(void **state)
{
    fixture *f = *state;
    /* Three levels for .9: north,bike (own), north,* and global; keys in
     * another column order than in the table, extra columns around. */
    const char *orders = "vehicle;x;pred_s;zone\n"
                         "bike;1;100;north\n"
                         "van;2;100;north\n"
                         "bike;3;100;south\n"
                         "car;4;100;south\n"
                         "\"bike\";5;100;\"north\"\n";
    etacal_apply_opts o = default_opts();
    size_t sel[] = {0};
    o.targets = sel;
    o.ntargets = 1;
    o.delim = ';';
    assert_int_equal(run(f, orders, &o), ETACAL_OK);
    assert_string_equal(f->out, "vehicle;x;pred_s;zone;promise_s\n"
                                "bike;1;100;north;280.063\n"
                                "van;2;100;north;350.25\n"
                                "bike;3;100;south;412.125\n"
                                "car;4;100;south;195.5\n"
                                "\"bike\";5;100;\"north\";280.063\n");
    assert_int_equal(f->st.fallback, 2);
}

static void test_apply_ratio_table(void **state)
{
    fixture *f = *state;
    load_table(f, "target,method,n,k,offset_s,slope\n0.9,ratio,50,46,0,1.25\n");
    etacal_apply_opts o = default_opts();
    assert_int_equal(run(f, "pred_s\n1000\n2.385\n", &o), ETACAL_OK);
    /* 2.385 * 1.25 = 2.98125 -> up to 2.982 */
    assert_string_equal(f->out, "pred_s,promise_s\n1000,1250\n2.385,2.982\n");
    assert_int_equal(f->st.fallback, 0); /* no keys: the global row is the own row */
    expect_fail(f, "pred_s\n1000\n0\n", &o, ETACAL_EPARSE, 3,
                "column 'pred_s': method ratio needs a prediction > 0");
}

static void test_apply_header_errors(void **state)
{
    fixture *f = *state;
    etacal_apply_opts o = default_opts();
    expect_fail(f, "zone,vehicle,prediction\nnorth,bike,1200\n", &o, ETACAL_EINVAL, 1,
                "no column 'pred_s' in the header");
    expect_fail(f, "\nzone,pred_s\nnorth,1200\n", &o, ETACAL_EINVAL, 2,
                "no column 'vehicle' in the header (a key column of the quote table)");
    o.actual_col = "actual_s";
    expect_fail(f, "zone,vehicle,pred_s\nnorth,bike,1200\n", &o, ETACAL_EINVAL, 1,
                "no column 'actual_s' in the header");
    o.actual_col = NULL;
    expect_fail(f, "zone,vehicle,pred_s,promise_s_97.5\nnorth,bike,1200,3\n", &o, ETACAL_EINVAL, 1,
                "the orders already have a column 'promise_s_97.5'");
    size_t sel[] = {0};
    o.targets = sel;
    o.ntargets = 1;
    expect_fail(f, "zone,vehicle,promise_s,pred_s\nnorth,bike,1,1200\n", &o, ETACAL_EINVAL, 1,
                "the orders already have a column 'promise_s'");
    expect_fail(f, "", &o, ETACAL_EPARSE, 0, "empty file: expected a header row");
    expect_fail(f, "\n\n", &o, ETACAL_EPARSE, 0, "empty file: expected a header row");
    /* A header alone is fine: the header comes out with the new column. */
    assert_int_equal(run(f, "zone,vehicle,pred_s\n", &o), ETACAL_OK);
    assert_string_equal(f->out, "zone,vehicle,pred_s,promise_s\n");
    assert_int_equal(f->st.rows, 0);
}

static void test_apply_row_errors(void **state)
{
    fixture *f = *state;
    etacal_apply_opts o = default_opts();
    /* The record of line 2 takes lines 2-3, so the bad one is on line 4. */
    const char *head = "order_id,zone,vehicle,pred_s,note\n"
                       "A-1,north,bike,1200,\"a\nb\"\n";
    char text[512];
    snprintf(text, sizeof text, "%sA-2,north,car,12abc,x\n", head);
    expect_fail(f, text, &o, ETACAL_EPARSE, 4, "column 'pred_s' is not numeric: '12abc'");
    /* What came before the bad record is written already. */
    assert_string_equal(f->out, "order_id,zone,vehicle,pred_s,note,promise_s_90,promise_s_97.5\n"
                                "A-1,north,bike,1200,\"a\nb\",1380.063,1620.5\n");
    snprintf(text, sizeof text, "%sA-2,north,car,-2.385,x\n", head);
    expect_fail(f, text, &o, ETACAL_EPARSE, 4, "column 'pred_s': prediction is negative");
    snprintf(text, sizeof text, "%sA-2,north,car,inf,x\n", head);
    expect_fail(f, text, &o, ETACAL_EPARSE, 4, "column 'pred_s': prediction is not finite");
    snprintf(text, sizeof text, "%sA-2,north,car,600\n", head);
    expect_fail(f, text, &o, ETACAL_EPARSE, 4, "4 fields, but the header has 5");
    snprintf(text, sizeof text, "%sA-2,north,car,600,x,y\n", head);
    expect_fail(f, text, &o, ETACAL_EPARSE, 4, "6 fields, but the header has 5");
    /* CRLF lines count the same. */
    expect_fail(f, "id,zone,vehicle,pred_s\r\n1,north,bike,3\r\n\r\n2,north,bike,1,5\r\n", &o,
                ETACAL_EPARSE, 4, "5 fields, but the header has 4");
    o.actual_col = "actual_s";
    expect_fail(f, "zone,vehicle,pred_s,actual_s\nnorth,bike,3,late\n", &o, ETACAL_EPARSE, 2,
                "column 'actual_s' is not numeric: 'late'");
    o.actual_col = NULL;
    /* Broken CSV. */
    expect_fail(f, "zone,vehicle,pred_s\nnorth,bike,3\nnorth,bike,\"4\n", &o, ETACAL_EPARSE, 3,
                "unterminated quoted field");
    expect_fail(f, "zone,vehicle,pred_s\nnorth,bike,3\rnorth,bike,4\n", &o, ETACAL_EPARSE, 2,
                "a bare carriage return ends a line; use LF or CRLF line endings");
    expect_fail(f, "zone,vehicle,pred_s\nnor\"th,bike,3\n", &o, ETACAL_EPARSE, 2,
                "malformed quoting: a quoted field must be quoted as a whole, with inner quotes "
                "doubled");
}

static void test_apply_bad_rows_skip(void **state)
{
    fixture *f = *state;
    etacal_apply_opts o = default_opts();
    o.bad_rows = ETACAL_BAD_ROWS_SKIP;
    size_t sel[] = {0};
    o.targets = sel;
    o.ntargets = 1;
    const char *orders = "zone,vehicle,pred_s\n"
                         "north,bike,1200\n"
                         "north,bike,12abc\n"
                         "north,bike\n"
                         "north,bike,NA\n"
                         "south,car,-4\n"
                         "south,car,1500\n";
    assert_int_equal(run(f, orders, &o), ETACAL_OK);
    assert_string_equal(f->out, "zone,vehicle,pred_s,promise_s\n"
                                "north,bike,1200,1380.063\n"
                                "north,bike,12abc,\n"
                                "north,bike,\n"
                                "north,bike,NA,\n"
                                "south,car,-4,\n"
                                "south,car,1500,1595.5\n");
    assert_int_equal(f->st.rows, 6);
    assert_int_equal(f->st.bad, 3);
    assert_int_equal(f->st.first_bad_line, 3);
    assert_int_equal(f->st.missing_pred, 1);
    assert_int_equal(f->st.promised, 2);
}

static void test_apply_option_errors(void **state)
{
    fixture *f = *state;
    tu_write_text(&f->dir, "orders.csv", "zone,vehicle,pred_s\nnorth,bike,3\n", f->in, sizeof f->in);
    FILE *fp = tmpfile();
    assert_non_null(fp);
    etacal_apply_opts o = default_opts();
    o.pred_col = NULL;
    assert_int_equal(apply_csv(f->q, f->in, fp, &o, &f->st, &f->err), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "no prediction column given");
    o = default_opts();
    size_t sel[] = {0, 2};
    o.targets = sel;
    o.ntargets = 2;
    assert_int_equal(apply_csv(f->q, f->in, fp, &o, &f->st, &f->err), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "target index out of range");
    o.ntargets = 0;
    assert_int_equal(apply_csv(f->q, f->in, fp, &o, &f->st, &f->err), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "between 1 and 32 targets");
    o = default_opts();
    o.round_s = -60;
    assert_int_equal(apply_csv(f->q, f->in, fp, &o, &f->st, &f->err), ETACAL_EINVAL);
    assert_error(&f->err, ETACAL_EINVAL, "", "rounding must be a finite number of seconds >= 0");
    o.round_s = NAN;
    assert_int_equal(apply_csv(f->q, f->in, fp, &o, &f->st, &f->err), ETACAL_EINVAL);
    o.round_s = INFINITY;
    assert_int_equal(apply_csv(f->q, f->in, fp, &o, &f->st, &f->err), ETACAL_EINVAL);
    /* Nothing was written by the refused calls. */
    assert_int_equal(ftell(fp), 0);
    /* No such input. */
    o = default_opts();
    char missing[700];
    tu_path(missing, sizeof missing, &f->dir, "none.csv");
    assert_int_equal(apply_csv(f->q, missing, fp, &o, &f->st, &f->err), ETACAL_EIO);
    assert_error(&f->err, ETACAL_EIO, missing, "cannot open: No such file or directory");
    /* Into a real file (tmpfile) the output is the same as in memory. */
    assert_int_equal(apply_csv(f->q, f->in, fp, &o, &f->st, &f->err), ETACAL_OK);
    rewind(fp);
    char buf[256] = {0};
    size_t got = fread(buf, 1, sizeof buf - 1, fp);
    fclose(fp);
    const char *want = "zone,vehicle,pred_s,promise_s_90,promise_s_97.5\nnorth,bike,3,183.063,423.5\n";
    assert_int_equal(got, strlen(want));
    assert_string_equal(buf, want);
}

static void test_apply_write_error(void **state)
{
    fixture *f = *state;
    /* A stream open for reading only: every write fails. */
    char ro[700];
    tu_write_text(&f->dir, "ro.txt", "", ro, sizeof ro);
    FILE *fp = fopen(ro, "r");
    assert_non_null(fp);
    tu_write_text(&f->dir, "orders.csv", "zone,vehicle,pred_s\nnorth,bike,3\nnorth,bike,4\n", f->in,
                  sizeof f->in);
    etacal_apply_opts o = default_opts();
    int rc = apply_csv(f->q, f->in, fp, &o, &f->st, &f->err);
    fclose(fp);
    char where[700];
    assert_error(&f->err, ETACAL_EIO, tu_where(where, sizeof where, f->in, 2), "write failed");
    assert_int_equal(rc, ETACAL_EIO);
}

/* More than one read chunk (1 MiB) of records with quoted newlines and
 * doubled quotes: records split across chunks still come out whole. */
static void test_apply_large_stream(void **state)
{
    fixture *f = *state;
    size_t rows = 30000, cap = rows * 80 + 256, cap2 = rows * 100 + 256, n = 0, m = 0;
    char *in = malloc(cap), *want = malloc(cap2);
    assert_non_null(in);
    assert_non_null(want);
    n += (size_t)snprintf(in + n, cap - n, "id,note,zone,vehicle,pred_s\r\n");
    m += (size_t)snprintf(want + m, cap2 - m, "id,note,zone,vehicle,pred_s,promise_s\r\n");
    static const char *zones[] = {"north", "south", "west"};
    static const char *veh[] = {"bike", "car"};
    /* .9 offsets per (zone, vehicle): north,bike own 180.0625; north,car from
     * north,* 250.25; south,car own 95.5; others global 312.125. */
    static const double off[3][2] = {{180.0625, 250.25}, {312.125, 95.5}, {312.125, 312.125}};
    size_t fallback = 0;
    for (size_t i = 0; i < rows; i++) {
        int z = (int)(i % 3), v = (int)((i / 3) % 2);
        long ms = 100000 + (long)((i * 7919) % 3000000);
        char rec[160];
        int len = snprintf(rec, sizeof rec, "%zu,\"line one\nline \"\"%zu\"\"\",%s,%s,%ld.%03ld", i,
                           i, zones[z], veh[v], ms / 1000, ms % 1000);
        n += (size_t)snprintf(in + n, cap - n, "%s%s", rec, (i % 2) ? "\r\n" : "\n");
        /* ms/1000 + offset, rounded up to whole ms; offsets are multiples
         * of 1/16, so in thousandths: ms + 1000 * offset, ceil */
        double p = (double)ms + 1000.0 * off[z][v];
        long pm = (long)ceil(p);
        char ps[32];
        int pl = snprintf(ps, sizeof ps, "%ld.%03ld", pm / 1000, pm % 1000);
        while (pl > 0 && ps[pl - 1] == '0')
            ps[--pl] = '\0';
        if (pl > 0 && ps[pl - 1] == '.')
            ps[--pl] = '\0';
        m += (size_t)snprintf(want + m, cap2 - m, "%.*s,%s%s", len, rec, ps, (i % 2) ? "\r\n" : "\n");
        fallback += !((z == 0 && v == 0) || (z == 1 && v == 1));
    }
    assert_true(n > (1u << 20) + 4096);
    etacal_apply_opts o = default_opts();
    size_t sel[] = {0};
    o.targets = sel;
    o.ntargets = 1;
    assert_int_equal(run_bytes(f, in, n, &o), ETACAL_OK);
    assert_int_equal(f->outlen, m);
    if (memcmp(f->out, want, m) != 0) {
        size_t i = 0;
        while (i < m && f->out[i] == want[i])
            i++;
        fail_msg("output differs at byte %zu: got '%.40s', want '%.40s'", i, f->out + i, want + i);
    }
    assert_int_equal(f->st.rows, rows);
    assert_int_equal(f->st.promised, rows);
    assert_int_equal(f->st.fallback, fallback);
    free(in);
    free(want);
}

static void test_promise_round(void **state)
{
    (void)state;
    /* to whole milliseconds, up */
    assert_close(etacal_promise_round(1380.0625, 0), 1380.063, 1e-15);
    assert_close(etacal_promise_round(1380.0621, 0), 1380.063, 1e-15);
    /* decimal noise is not rounded up a whole millisecond */
    assert_close(etacal_promise_round(312.125 + 2.385, 0), 314.51, 1e-15);
    assert_close(etacal_promise_round(0.1 + 0.2, 0), 0.3, 1e-15);
    assert_close(etacal_promise_round(1256.0, 0), 1256.0, 0);
    /* to a grid */
    assert_close(etacal_promise_round(1620.5, 60), 1680, 0);
    assert_close(etacal_promise_round(1800, 60), 1800, 0);
    assert_close(etacal_promise_round(1800.001, 60), 1860, 0);
    assert_close(etacal_promise_round(1500.25, 300), 1800, 0);
    assert_close(etacal_promise_round(944.63, 0.1), 944.7, 1e-15);
    assert_true(etacal_promise_round(1380.0625, 0) >= 1380.0625);
    double inf = etacal_promise_round(INFINITY, 60);
    assert_true(isinf(inf) && inf > 0);
}

int main(void)
{
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
    const struct CMUnitTest tests[] = {
        T(test_apply_pass_through_and_fallback),
        T(test_apply_missing_prediction_tokens),
        T(test_apply_one_target_rounding_and_actuals),
        T(test_apply_more_specific_row_wins),
        T(test_apply_ratio_table),
        T(test_apply_header_errors),
        T(test_apply_row_errors),
        T(test_apply_bad_rows_skip),
        T(test_apply_option_errors),
        T(test_apply_write_error),
        T(test_apply_large_stream),
        cmocka_unit_test(test_promise_round),
    };
#undef T
    return cmocka_run_group_tests(tests, NULL, NULL);
}
