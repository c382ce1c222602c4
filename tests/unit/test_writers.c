/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_writers.c: the public writers over a sink or a path (writers.c,
 * io.c's sink streams).  The stdio writers are the reference: a quote table
 * and an applied stream written through a sink are the same bytes as
 * written to a stream; a sink that refuses bytes makes the writer fail with
 * ETACAL_EIO; a path gets the whole file or, on an error, nothing (an
 * existing file untouched); "-" is a file name to the library. */
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

static const char table_text[] = "zone,target,method,n,k,offset_s,slope\n"
                                 "*,0.9,add,900,811,312.5,1\n"
                                 "north,0.9,add,400,361,288.25,1\n";

static const char orders_text[] = "id,zone,pred_s\n"
                                  "1,north,1200.5\n"
                                  "2,south,\"840\"\n"
                                  "3,north,\n";

/* A sink into a growing buffer that refuses bytes past limit. */
typedef struct membuf {
    char *p;
    size_t len, cap, limit;
    int calls;
} membuf;

static int mem_write(void *ud, const char *buf, size_t len)
{
    membuf *m = ud;
    m->calls++;
    if (m->len + len > m->limit)
        return -1;
    if (m->len + len + 1 > m->cap) {
        size_t cap = (m->len + len + 1) * 2;
        char *p = realloc(m->p, cap);
        if (!p)
            return -1;
        m->p = p;
        m->cap = cap;
    }
    memcpy(m->p + m->len, buf, len);
    m->len += len;
    m->p[m->len] = '\0';
    return 0;
}

static char *stream_bytes(int (*fn)(FILE *, void *), void *arg, size_t *len)
{
    char *out = NULL;
    FILE *fp = open_memstream(&out, len);
    assert_non_null(fp);
    assert_int_equal(fn(fp, arg), ETACAL_OK);
    assert_int_equal(fclose(fp), 0);
    return out;
}

typedef struct ctx {
    etacal_quotes *q;
    const char *orders;
    etacal_apply_opts o;
    etacal_apply_stats st;
    etacal_error err;
} ctx;

static int quotes_to_stream(FILE *fp, void *arg)
{
    ctx *c = arg;
    return quotes_write_csv(c->q, fp, &c->err);
}

static int apply_to_stream(FILE *fp, void *arg)
{
    ctx *c = arg;
    return apply_csv(c->q, c->orders, fp, &c->o, &c->st, &c->err);
}

static void test_sinks_and_paths(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char tpath[600], opath[600], out[600];
    tu_write_text(&d, "q.csv", table_text, tpath, sizeof tpath);
    tu_write_text(&d, "orders.csv", orders_text, opath, sizeof opath);
    ctx c;
    memset(&c, 0, sizeof c);
    assert_int_equal(etacal_quotes_read_csv(tpath, ',', &c.q, &c.err), ETACAL_OK);
    c.orders = opath;
    c.o.pred_col = "pred_s";

    /* the quote table */
    size_t want_len;
    char *want = stream_bytes(quotes_to_stream, &c, &want_len);
    membuf m = {NULL, 0, 0, SIZE_MAX, 0};
    etacal_sink sink = {mem_write, &m};
    assert_int_equal(etacal_quotes_write(c.q, &sink, &c.err), ETACAL_OK);
    assert_int_equal(m.len, want_len);
    assert_memory_equal(m.p, want, want_len);
    char *qwant = want;
    size_t qwant_len = want_len;

    /* the applied orders, and the same counts */
    want = stream_bytes(apply_to_stream, &c, &want_len);
    etacal_apply_stats first = c.st;
    assert_int_equal(first.promised, 2);
    m.len = 0;
    memset(&c.st, 0, sizeof c.st);
    assert_int_equal(etacal_apply(c.q, opath, &sink, &c.o, &c.st, &c.err), ETACAL_OK);
    assert_int_equal(m.len, want_len);
    assert_memory_equal(m.p, want, want_len);
    assert_int_equal(c.st.promised, first.promised);
    assert_int_equal(c.st.missing_pred, first.missing_pred);

    /* to a path: the same bytes */
    tu_path(out, sizeof out, &d, "promised.csv");
    assert_int_equal(etacal_apply_path(c.q, opath, out, &c.o, &c.st, &c.err), ETACAL_OK);
    size_t got_len;
    char *got = tu_read_file(out, &got_len);
    assert_non_null(got);
    assert_int_equal(got_len, want_len);
    assert_memory_equal(got, want, want_len);
    free(got);
    free(want);

    /* a sink that refuses bytes: an I/O error */
    membuf small = {NULL, 0, 0, 20, 0};
    etacal_sink refusing = {mem_write, &small};
    assert_int_equal(etacal_quotes_write(c.q, &refusing, &c.err), ETACAL_EIO);
    assert_true(small.calls > 0);
    free(small.p);
    etacal_sink none = {NULL, NULL};
    assert_int_equal(etacal_quotes_write(c.q, &none, &c.err), ETACAL_EINVAL);

    /* a path after an error in the input: the old file stays as it was */
    tu_write_text(&d, "promised.csv", "old bytes\n", out, sizeof out);
    char bad[600];
    tu_write_text(&d, "bad.csv", "id,zone,pred_s\n1,north,12x\n", bad, sizeof bad);
    assert_int_equal(etacal_apply_path(c.q, bad, out, &c.o, &c.st, &c.err), ETACAL_EPARSE);
    got = tu_read_file(out, &got_len);
    assert_string_equal(got, "old bytes\n");
    free(got);
    assert_int_equal(tu_dir_count(d.path), 4); /* q, orders, promised, bad: no temporary left */

    /* the table to a path; "-" is a file of that name */
    tu_path(out, sizeof out, &d, "-");
    assert_int_equal(etacal_quotes_write_path(c.q, out, &c.err), ETACAL_OK);
    got = tu_read_file(out, &got_len);
    assert_non_null(got);
    assert_int_equal(got_len, qwant_len);
    assert_memory_equal(got, qwant, qwant_len);
    free(got);
    free(qwant);

    free(m.p);
    etacal_quotes_destroy(c.q);
    tu_dir_remove(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_sinks_and_paths),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
