/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_publish.c: what `etacal publish` is built on: SHA-256 against the
 * FIPS 180-2 worked examples, the promise of a table at a reference order
 * (the same as `etacal apply` gives), the comparison of two tables, the
 * lock beside the table and the copy of the previous table; and the whole
 * publish as one call (etacal_publish_run): each guard's record (name,
 * status, value, limit) on small hand-made tables whose buffers and
 * held-out rates can be worked out by hand, the provenance record, and
 * which files a published, refused or dry run leaves. */
#define _GNU_SOURCE
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "results.h"
#include "stream.h"
#include "testutil.h"

/* ---- SHA-256 ------------------------------------------------------------ */

/* FIPS 180-2, appendix B (examples B.1, B.2, B.3; the digests were recalled
 * from memory and checked against coreutils' sha256sum on this machine),
 * and the empty message (the well-known e3b0... digest, same check). */
static void test_sha256_fips(void **state)
{
    (void)state;
    static const struct {
        const char *msg;
        const char *hex;
    } cases[] = {
        {"abc", "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"},
        {"", "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"},
        {"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq",
         "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        etacal_sha256 s;
        char hex[65];
        etacal_sha256_init(&s);
        etacal_sha256_update(&s, cases[i].msg, strlen(cases[i].msg));
        etacal_sha256_hex(&s, hex);
        assert_string_equal(hex, cases[i].hex);
    }
    /* B.3: one million 'a', fed in pieces of 1 to 999 bytes */
    etacal_sha256 s;
    char hex[65];
    char *a = malloc(1000000);
    assert_non_null(a);
    memset(a, 'a', 1000000);
    etacal_sha256_init(&s);
    size_t off = 0, step = 1;
    while (off < 1000000) {
        size_t take = step < 1000000 - off ? step : 1000000 - off;
        etacal_sha256_update(&s, a + off, take);
        off += take;
        step = step % 999 + 7;
    }
    etacal_sha256_hex(&s, hex);
    assert_string_equal(hex, "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0");
    free(a);
}

/* Every split of a message into two updates gives the one-shot digest
 * (the padding crosses block edges at lengths 55, 56, 63, 64). */
static void test_sha256_splits(void **state)
{
    (void)state;
    unsigned char msg[200];
    for (size_t i = 0; i < sizeof msg; i++)
        msg[i] = (unsigned char)(i * 37 + 11);
    for (size_t len = 0; len <= sizeof msg; len++) {
        etacal_sha256 s;
        char whole[65], parts[65];
        etacal_sha256_init(&s);
        etacal_sha256_update(&s, msg, len);
        etacal_sha256_hex(&s, whole);
        for (size_t cut = 0; cut <= len; cut += 13) {
            etacal_sha256_init(&s);
            etacal_sha256_update(&s, msg, cut);
            etacal_sha256_update(&s, msg + cut, len - cut);
            etacal_sha256_hex(&s, parts);
            assert_string_equal(whole, parts);
        }
    }
}

static void test_sha256_file(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char p[600];
    tu_write_text(&d, "m.txt", "abc", p, sizeof p);
    char hex[65];
    uint64_t bytes = 0;
    etacal_error err;
    assert_int_equal(etacal_sha256_file(p, hex, &bytes, &err), ETACAL_OK);
    assert_string_equal(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    assert_int_equal(bytes, 3);
    char missing[700];
    snprintf(missing, sizeof missing, "%s/none.csv", d.path);
    assert_int_equal(etacal_sha256_file(missing, hex, &bytes, &err), ETACAL_EIO);
    tu_dir_remove(&d);
}

/* ---- tables ------------------------------------------------------------- */

static etacal_quotes *table(tu_dir *d, const char *name, const char *text)
{
    char p[600];
    tu_write_text(d, name, text, p, sizeof p);
    etacal_quotes *q = NULL;
    etacal_error e;
    if (etacal_quotes_read_csv(p, ',', &q, &e) != ETACAL_OK)
        fail_msg("reading %s: %s: %s", name, e.where, e.msg);
    return q;
}

static const char *old_csv = "zone,vehicle,target,method,n,k,offset_s,slope\n"
                             "*,*,0.9,add,5000,4501,300,1\n"
                             "north,*,0.9,add,900,811,250,1\n"
                             "north,bike,0.9,add,400,361,180,1\n"
                             "south,car,0.9,add,300,271,95,1\n";

/* The promise at a point is what `etacal apply` writes for an order of
 * that segment with that prediction: checked against apply_csv on
 * orders of every segment and of unseen ones. */
static void test_promise_at_matches_apply(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    etacal_quotes *q = table(&d, "q.csv", old_csv);
    const char *orders = "zone,vehicle,pred_s\n"
                         "north,bike,1000\n"
                         "north,car,1000\n"
                         "south,car,1000\n"
                         "south,bike,1000\n"
                         "west,van,1000\n";
    char in[600];
    tu_write_text(&d, "orders.csv", orders, in, sizeof in);
    char *out = NULL;
    size_t outlen = 0;
    FILE *fp = open_memstream(&out, &outlen);
    assert_non_null(fp);
    etacal_apply_opts o = {.pred_col = "pred_s"};
    etacal_apply_stats st;
    etacal_error err;
    assert_int_equal(apply_csv(q, in, fp, &o, &st, &err), ETACAL_OK);
    fclose(fp);
    const char *keys[5][2] = {{"north", "bike"}, {"north", "car"}, {"south", "car"}, {"south", "bike"},
                              {"west", "van"}};
    char *line = strchr(out, '\n') + 1;
    for (int i = 0; i < 5; i++) {
        char *comma = strrchr(strtok(i == 0 ? line : NULL, "\n"), ',');
        double from_apply = strtod(comma + 1, NULL);
        double at = etacal_quotes_promise_at(q, keys[i], 0, 1000, NULL);
        assert_true(at == from_apply);
    }
    /* a wildcard key is the segment of the level above */
    const char *north_any[2] = {"north", "*"};
    assert_true(etacal_quotes_promise_at(q, north_any, 0, 1000, NULL) == 1250);
    free(out);
    etacal_quotes_destroy(q);
    tu_dir_remove(&d);
}

static const etacal_quote_move *find_move(const etacal_quotes_diff *df, const char *k0, const char *k1)
{
    for (size_t i = 0; i < df->nmoves; i++)
        if (strcmp(df->moves[i].keys[0], k0) == 0 && strcmp(df->moves[i].keys[1], k1) == 0)
            return &df->moves[i];
    return NULL;
}

static void test_compare(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    etacal_quotes *o = table(&d, "old.csv", old_csv);
    /* north,bike moves +20; south,car is gone (falls back to the global row);
     * east,car is new (was on the global row); (north,*) is unchanged */
    etacal_quotes *n = table(&d, "new.csv",
                             "zone,vehicle,target,method,n,k,offset_s,slope\n"
                             "*,*,0.9,add,5000,4501,300,1\n"
                             "north,*,0.9,add,900,811,250,1\n"
                             "north,bike,0.9,add,400,361,200,1\n"
                             "east,car,0.9,add,300,271,120,1\n");
    etacal_quotes_diff df;
    etacal_error err;
    assert_int_equal(quotes_compare_fill(o, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
    assert_int_equal(df.keys_differ, 0);
    assert_int_equal(df.segs_added, 1);
    assert_int_equal(df.segs_removed, 1);
    assert_int_equal(df.segs_changed, 1);
    assert_int_equal(df.segs_same, 2); /* global and (north,*) */
    assert_int_equal(df.nmoves, 5);
    const etacal_quote_move *m = find_move(&df, "north", "bike");
    assert_non_null(m);
    assert_true(m->old_promise == 1180 && m->new_promise == 1200 && m->in_old && m->in_new);
    m = find_move(&df, "south", "car");
    assert_non_null(m);
    assert_true(m->in_old && !m->in_new && m->old_promise == 1095 && m->new_promise == 1300);
    m = find_move(&df, "east", "car");
    assert_non_null(m);
    assert_true(!m->in_old && m->in_new && m->old_promise == 1300 && m->new_promise == 1120);
    quotes_diff_release(&df);

    /* the same table: nothing moves */
    assert_int_equal(quotes_compare_fill(o, o, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
    assert_int_equal(df.segs_changed + df.segs_added + df.segs_removed, 0);
    assert_int_equal(df.segs_same, 4);
    quotes_diff_release(&df);
    etacal_quotes_destroy(n);

    /* other key columns: only the global rows compare */
    n = table(&d, "new2.csv",
              "zone,target,method,n,k,offset_s,slope\n"
              "*,0.9,add,5000,4501,310,1\n"
              "north,0.9,add,900,811,250,1\n");
    assert_int_equal(quotes_compare_fill(o, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
    assert_int_equal(df.keys_differ, 1);
    assert_int_equal(df.nmoves, 1);
    assert_true(df.moves[0].old_promise == 1300 && df.moves[0].new_promise == 1310);
    quotes_diff_release(&df);
    etacal_quotes_destroy(n);

    /* a target of one table only: no promise on the other side */
    n = table(&d, "new3.csv",
              "zone,vehicle,target,method,n,k,offset_s,slope\n"
              "*,*,0.9,add,5000,4501,300,1\n"
              "*,*,0.95,add,5000,4751,420,1\n");
    assert_int_equal(quotes_compare_fill(o, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
    assert_int_equal(df.targets_added, 1);
    assert_int_equal(df.targets_removed, 0);
    int seen95 = 0;
    for (size_t i = 0; i < df.nmoves; i++)
        if (df.moves[i].target == 0.95) {
            seen95 = 1;
            assert_true(isnan(df.moves[i].old_promise) && df.moves[i].new_promise == 1420);
        }
    assert_true(seen95);
    quotes_diff_release(&df);
    etacal_quotes_destroy(n);

    /* a covariate without a reference value is an error */
    n = table(&d, "new4.csv",
              "target,method,n,k,offset_s,slope,coef_distance_km\n"
              "0.9,qr,5000,2251,200,1.1,60\n");
    etacal_quotes *o1 = table(&d, "old1.csv", "target,method,n,k,offset_s,slope\n0.9,add,5000,4501,300,1\n");
    assert_int_equal(quotes_compare_fill(o1, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "distance_km"));
    const char *names[1] = {"distance_km"};
    double x[1] = {2.5};
    assert_int_equal(quotes_compare_fill(o1, n, 1000, names, x, 1, &df, &err), ETACAL_OK);
    assert_int_equal(df.nmoves, 1);
    assert_true(df.moves[0].old_promise == 1300);
    assert_true(tu_close(df.moves[0].new_promise, 200 + 1.1 * 1000 + 60 * 2.5, 1e-15));
    assert_int_equal(df.method_differs, 1);
    quotes_diff_release(&df);
    etacal_quotes_destroy(n);
    etacal_quotes_destroy(o1);
    etacal_quotes_destroy(o);
    tu_dir_remove(&d);
}

/* ---- lock and previous table -------------------------------------------- */

static void test_lock(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char p[600];
    tu_path(p, sizeof p, &d, "q.csv");
    int a = -1, b = -1;
    etacal_error err;
    assert_int_equal(etacal_lock_acquire(p, 0, &a, &err), ETACAL_OK);
    /* flock locks belong to the open file: a second open waits, then gives up */
    assert_int_equal(etacal_lock_acquire(p, 0.1, &b, &err), ETACAL_EIO);
    assert_non_null(strstr(err.msg, "another publisher holds the lock"));
    assert_non_null(strstr(err.where, "q.csv.lock"));
    etacal_lock_release(a);
    assert_int_equal(etacal_lock_acquire(p, 0, &b, &err), ETACAL_OK);
    etacal_lock_release(b);
    tu_dir_remove(&d);
}

static void test_keep_copy(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char p[600], keep[600];
    tu_path(p, sizeof p, &d, "q.csv");
    tu_path(keep, sizeof keep, &d, "q.csv.prev");
    int kept = 1;
    etacal_error err;
    assert_int_equal(etacal_keep_copy(p, keep, &kept, &err), ETACAL_OK);
    assert_int_equal(kept, 0);
    assert_int_equal(access(keep, F_OK), -1);
    tu_write_text(&d, "q.csv", "first\n", p, sizeof p);
    assert_int_equal(etacal_keep_copy(p, keep, &kept, &err), ETACAL_OK);
    assert_int_equal(kept, 1);
    /* the table is then replaced by rename, as publish does: the copy stays */
    char np[600];
    tu_write_text(&d, "new.csv", "second\n", np, sizeof np);
    assert_int_equal(rename(np, p), 0);
    size_t len;
    char *got = tu_read_file(keep, &len);
    assert_string_equal(got, "first\n");
    free(got);
    assert_int_equal(etacal_keep_copy(p, keep, &kept, &err), ETACAL_OK);
    got = tu_read_file(keep, &len);
    assert_string_equal(got, "second\n");
    free(got);
    assert_int_equal(tu_dir_count(d.path), 2); /* no temporary left */
    tu_dir_remove(&d);
}

static void test_reference_point(void **state)
{
    (void)state;
    tu_dir d;
    tu_dir_make(&d);
    char p[600];
    tu_write_text(&d, "cal.csv", "actual_s,pred_s,km\n1,50,3\n2,10,1\n3,40,9\n4,20,2\n", p, sizeof p);
    etacal_colspec cols[3] = {{"actual_s", ETACAL_COL_NUM, 0, NULL},
                              {"pred_s", ETACAL_COL_NUM, 0, NULL},
                              {"km", ETACAL_COL_NUM, 0, NULL}};
    etacal_read_opts ro = {.delim = ','};
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_read_csv(p, cols, 3, &ro, &t, &err), ETACAL_OK);
    double pred, x[1];
    size_t xc[1] = {2};
    assert_int_equal(etacal_reference_point(t, 1, xc, 1, &pred, x, &err), ETACAL_OK);
    /* the lower median: the 2nd of 4 sorted values (numpy.median would
     * average the two middle ones; we keep a value of the data) */
    assert_true(pred == 20);
    assert_true(x[0] == 2);
    etacal_table_destroy(t);
    tu_dir_remove(&d);
}


/* ---- publishing as one call ---------------------------------------------- */

/* 19 orders predicted at 1000 s that took 1000 + 10 i s (i = 1..19): the
 * scores are 10, 20, ..., 190, and the add buffer of target 0.9 is the
 * ceil((19 + 1) 0.9) = 18th smallest, 180 s (split conformal rank).  The
 * one-row table a fit gives is "target 0.9, offset 180, slope 1", so its
 * promise at the reference prediction 1000 (the median) is 1180 s. */
static void cal_rows(char *buf, size_t size, int bad_row)
{
    size_t w = (size_t)snprintf(buf, size, "actual_s,pred_s\n");
    for (int i = 1; i <= 19; i++)
        w += (size_t)snprintf(buf + w, size - w, "%d,1000\n", 1000 + 10 * i);
    if (bad_row)
        snprintf(buf + w, size - w, "abc,1000\n");
}

static const char *cur_150 = "target,method,n,k,offset_s,slope\n0.9,add,19,18,150,1\n";

typedef struct pub_case {
    tu_dir d;
    char cal[600], table[600];
    etacal_publishspec s;
    const char *cmd[3];
} pub_case;

/* A scratch directory with cal.csv (bad_row: one malformed row more) and,
 * when current is not NULL, q.csv holding it; the spec publishes cal.csv
 * over q.csv at 2025-12-02T00:00:00Z with limits that every guard
 * passes. */
static void pub_setup(pub_case *c, int bad_row, const char *current)
{
    tu_dir_make(&c->d);
    char text[1024];
    cal_rows(text, sizeof text, bad_row);
    tu_write_text(&c->d, "cal.csv", text, c->cal, sizeof c->cal);
    if (current)
        tu_write_text(&c->d, "q.csv", current, c->table, sizeof c->table);
    else
        tu_path(c->table, sizeof c->table, &c->d, "q.csv");
    etacal_publishspec_init(&c->s);
    c->s.fit.actual = "actual_s";
    c->s.fit.pred = "pred_s";
    c->s.input = c->cal;
    c->s.table = c->table;
    c->s.min_total_rows = 10;
    c->s.wait_s = 0;
    c->s.now = 1764633600; /* 2025-12-02T00:00:00Z */
    c->cmd[0] = "test";
    c->cmd[1] = "publish";
    c->cmd[2] = "\"quoted\"";
    c->s.command = c->cmd;
    c->s.ncommand = 3;
}

static etacal_publish_result *pub_run(pub_case *c)
{
    etacal_publish_result *r = NULL;
    etacal_error err;
    etacal_error_clear(&err);
    int rc = etacal_publish_run(&c->s, &r, &err);
    if (rc != ETACAL_OK)
        fail_msg("publish: %s: %s", err.where, err.msg);
    assert_non_null(r);
    return r;
}

static const etacal_guard *guard_of(const etacal_publish_result *r, const char *name)
{
    size_t n = 0;
    const etacal_guard *g = etacal_publish_result_guards(r, &n);
    assert_int_equal(n, ETACAL_PUBLISH_NGUARDS);
    for (size_t i = 0; i < n; i++)
        if (strcmp(g[i].name, name) == 0)
            return &g[i];
    fail_msg("no guard '%s'", name);
    return NULL;
}

/* status, value and limit of one guard (NaN expected: NaN found) */
static void check_guard(const etacal_publish_result *r, const char *name, int status, double value, double limit,
                        const char *unit)
{
    const etacal_guard *g = guard_of(r, name);
    if (g->status != status)
        fail_msg("guard %s: status %d, expected %d (%s)", name, g->status, status, g->message);
    if (!tu_close(g->value, value, 1e-12))
        fail_msg("guard %s: value %.17g, expected %.17g", name, g->value, value);
    if (!tu_close(g->limit, limit, 1e-12))
        fail_msg("guard %s: limit %.17g, expected %.17g", name, g->limit, limit);
    assert_string_equal(g->unit, unit);
}

static int exists(const tu_dir *d, const char *name)
{
    char p[700];
    tu_path(p, sizeof p, d, name);
    return access(p, F_OK) == 0;
}

/* The first table: every guard holds or has nothing to compare with; the
 * table written is the fit's, the record on disk is the result's. */
static void test_publish_first(void **state)
{
    (void)state;
    pub_case c;
    pub_setup(&c, 0, NULL);
    etacal_publish_result *r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISHED);
    check_guard(r, "rows", ETACAL_GUARD_PASSED, 19, 10, "rows");
    check_guard(r, "bad rows", ETACAL_GUARD_PASSED, 0, 0.01, "share");
    check_guard(r, "current table", ETACAL_GUARD_PASSED, NAN, NAN, "");
    assert_string_equal(guard_of(r, "current table")->message, "none yet: this is the first table");
    check_guard(r, "change", ETACAL_GUARD_SKIPPED, NAN, NAN, "");
    check_guard(r, "layout", ETACAL_GUARD_SKIPPED, NAN, NAN, "");
    check_guard(r, "holdout", ETACAL_GUARD_SKIPPED, NAN, NAN, "");
    check_guard(r, "well formed", ETACAL_GUARD_PASSED, 1, NAN, "rows");
    assert_null(etacal_publish_result_current(r));
    assert_null(etacal_publish_result_diff(r));
    const double *x;
    assert_true(etacal_publish_result_reference(r, &x) == 1000);
    /* the table: the hand-worked buffer */
    size_t len;
    char *got = tu_read_file(c.table, &len);
    const etacal_quotes *q = etacal_fit_run_quotes(etacal_publish_result_fit(r));
    assert_int_equal(q->nrows, 1);
    assert_true(q->rows[0].offset_s == 180 && q->rows[0].slope == 1);
    /* the record: on disk as returned; written_at is the caller's time */
    const char *rec = etacal_publish_result_record(r, &len);
    assert_non_null(rec);
    assert_int_equal(rec[len - 1], '\n');
    char meta[700];
    tu_path(meta, sizeof meta, &c.d, "q.csv.meta.json");
    assert_string_equal(etacal_publish_result_record_path(r), meta);
    size_t mlen;
    char *m = tu_read_file(meta, &mlen);
    assert_int_equal(mlen, len);
    assert_memory_equal(m, rec, len);
    assert_non_null(strstr(rec, "\"written_at\": \"2025-12-02T00:00:00Z\""));
    assert_non_null(strstr(rec, "\"command\": [\n    \"test\",\n    \"publish\",\n    \"\\\"quoted\\\"\"\n  ]"));
    /* the table's checksum in the record is the file's */
    char hex[65], want[80];
    assert_int_equal(etacal_sha256_file(c.table, hex, NULL, NULL), ETACAL_OK);
    snprintf(want, sizeof want, "\"sha256\": \"%s\"", hex);
    assert_non_null(strstr(rec, want));
    assert_string_equal(etacal_publish_result_prev_path(r), "");
    assert_false(exists(&c.d, "q.csv.prev"));
    free(m);
    free(got);
    etacal_publish_result_destroy(r);
    tu_dir_remove(&c.d);
}

/* Against a current table whose buffer is 150 s: every promise moves by
 * +30 s, that is +30/1150 = 2.6087% of the current promise at 1000 s. */
static void test_publish_change_guard(void **state)
{
    (void)state;
    pub_case c;
    pub_setup(&c, 0, cur_150);
    /* the default limit: 25% */
    etacal_publish_result *r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISHED);
    check_guard(r, "change", ETACAL_GUARD_PASSED, 100.0 * 30 / 1150, 25, "%");
    check_guard(r, "current table", ETACAL_GUARD_PASSED, NAN, NAN, "");
    check_guard(r, "layout", ETACAL_GUARD_PASSED, NAN, NAN, "");
    assert_int_equal(etacal_publish_result_compared(r), 1);
    const etacal_quotes_diff *df = etacal_publish_result_diff(r);
    assert_non_null(df);
    assert_int_equal(df->nmoves, 1);
    assert_true(df->moves[0].old_promise == 1150 && df->moves[0].new_promise == 1180);
    assert_true(exists(&c.d, "q.csv.prev"));
    etacal_publish_result_destroy(r);

    /* 20 s: refused; the value in seconds, the table left as it was */
    tu_write_text(&c.d, "q.csv", cur_150, c.table, sizeof c.table);
    c.s.max_change_s = 20;
    r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISH_REFUSED);
    check_guard(r, "change", ETACAL_GUARD_FAILED, 30, 20, "s");
    assert_string_equal(guard_of(r, "change")->message,
                        "move nearest the limit +30.0 s (+2.6%) at global, target 0.9; limit 20 s");
    size_t len;
    char *got = tu_read_file(c.table, &len);
    assert_string_equal(got, cur_150);
    free(got);
    /* a refused run builds its record but writes none */
    assert_non_null(etacal_publish_result_record(r, NULL));
    assert_string_equal(etacal_publish_result_record_path(r), "");
    etacal_publish_result_destroy(r);

    /* 20 s and 5%: the seconds bind (30 s is 50% over 20 s; 2.6% is
     * within 5%) */
    c.s.max_change_pct = 5;
    r = pub_run(&c);
    check_guard(r, "change", ETACAL_GUARD_FAILED, 30, 20, "s");
    etacal_publish_result_destroy(r);
    /* 40 s and 2%: the percentage binds */
    c.s.max_change_s = 40;
    c.s.max_change_pct = 2;
    r = pub_run(&c);
    check_guard(r, "change", ETACAL_GUARD_FAILED, 100.0 * 30 / 1150, 2, "%");
    etacal_publish_result_destroy(r);
    /* the reference prediction given: the same move, 30/1650 of 1650 s */
    c.s.ref_pred = 1500;
    c.s.max_change_s = NAN;
    r = pub_run(&c);
    check_guard(r, "change", ETACAL_GUARD_PASSED, 100.0 * 30 / 1650, 2, "%");
    assert_true(etacal_publish_result_reference(r, NULL) == 1500);
    etacal_publish_result_destroy(r);
    tu_dir_remove(&c.d);
}

static void test_publish_rows_and_bad_rows(void **state)
{
    (void)state;
    pub_case c;
    pub_setup(&c, 1, NULL);
    /* 19 rows used, one of 20 skipped: 5% against 1% */
    c.s.min_total_rows = 20;
    etacal_publish_result *r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISH_REFUSED);
    check_guard(r, "rows", ETACAL_GUARD_FAILED, 19, 20, "rows");
    check_guard(r, "bad rows", ETACAL_GUARD_FAILED, 0.05, 0.01, "share");
    assert_string_equal(guard_of(r, "bad rows")->message,
                        "1 of 20 skipped (5.00%), at most 1.00% allowed (--max-bad-share)");
    assert_false(exists(&c.d, "q.csv"));
    assert_false(exists(&c.d, "q.csv.meta.json"));
    etacal_publish_result_destroy(r);
    c.s.min_total_rows = 19;
    c.s.max_bad_share = 0.05;
    r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISHED);
    check_guard(r, "rows", ETACAL_GUARD_PASSED, 19, 19, "rows");
    check_guard(r, "bad rows", ETACAL_GUARD_PASSED, 0.05, 0.05, "share");
    etacal_publish_result_destroy(r);
    tu_dir_remove(&c.d);
}

static void test_publish_current_and_layout(void **state)
{
    (void)state;
    pub_case c;
    /* a current table that is not a quote table */
    pub_setup(&c, 0, "target,method,n,k,offset_s,slope\n0.9,addd,19,18,150,1\n");
    etacal_publish_result *r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISH_REFUSED);
    check_guard(r, "current table", ETACAL_GUARD_FAILED, NAN, NAN, "");
    assert_true(strncmp(guard_of(r, "current table")->message, "not valid (", 11) == 0);
    assert_true(etacal_publish_result_current_problem(r)[0] != '\0');
    check_guard(r, "change", ETACAL_GUARD_SKIPPED, NAN, NAN, "");
    etacal_publish_result_destroy(r);
    tu_dir_remove(&c.d);

    /* other key columns: the layout guard refuses unless allowed */
    pub_setup(&c, 0, "zone,target,method,n,k,offset_s,slope\n*,0.9,add,19,18,150,1\n");
    r = pub_run(&c);
    check_guard(r, "layout", ETACAL_GUARD_FAILED, NAN, NAN, "");
    assert_string_equal(guard_of(r, "layout")->message, "the key columns differ from the current table's");
    etacal_publish_result_destroy(r);
    c.s.allow_layout_change = 1;
    r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISHED);
    check_guard(r, "layout", ETACAL_GUARD_PASSED, NAN, NAN, "");
    etacal_publish_result_destroy(r);
    tu_dir_remove(&c.d);

    /* a target of the current table missing from the new one */
    pub_setup(&c, 0, "target,method,n,k,offset_s,slope\n0.8,add,19,16,120,1\n0.9,add,19,18,150,1\n");
    c.s.dry_run = 1;
    r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISH_REFUSED);
    check_guard(r, "layout", ETACAL_GUARD_FAILED, NAN, NAN, "");
    assert_string_equal(guard_of(r, "layout")->message, "the current table's target 0.8 is missing");
    etacal_publish_result_destroy(r);
    /* both targets: a dry run that passes replaces nothing */
    double tg[2] = {0.8, 0.9};
    c.s.fit.targets = tg;
    c.s.fit.ntargets = 2;
    r = pub_run(&c);
    assert_int_equal(etacal_publish_result_outcome(r), ETACAL_PUBLISH_DRY_RUN);
    check_guard(r, "layout", ETACAL_GUARD_PASSED, NAN, NAN, "");
    assert_false(exists(&c.d, "q.csv.prev"));
    assert_false(exists(&c.d, "q.csv.meta.json"));
    assert_int_equal(tu_dir_count(c.d.path), 3); /* cal.csv, q.csv, q.csv.lock */
    etacal_publish_result_destroy(r);
    tu_dir_remove(&c.d);
}

/* Held-out rows: 20 orders at times 1..20 (Unix seconds), the latest 4
 * held out.  Wilson's upper bound at x = 0 of n is z^2 / (n + z^2) (the
 * formula of binom.h with x = 0), at x = n it is 1. */
static void test_publish_holdout_guard(void **state)
{
    (void)state;
    for (int late_slow = 0; late_slow < 2; late_slow++) {
        pub_case c;
        pub_setup(&c, 0, NULL);
        char text[1024];
        size_t w = (size_t)snprintf(text, sizeof text, "actual_s,pred_s,t\n");
        for (int i = 1; i <= 20; i++) {
            /* the fit's 16 rows score 10..160; the held-out ones 500 or 1 */
            int score = i <= 16 ? 10 * i : late_slow ? 500 : 1;
            w += (size_t)snprintf(text + w, sizeof text - w, "%d,1000,%d\n", 1000 + score, i);
        }
        tu_write_text(&c.d, "cal.csv", text, c.cal, sizeof c.cal);
        c.s.fit.time = "t";
        c.s.fit.holdout = 0.2;
        etacal_publish_result *r = pub_run(&c);
        assert_int_equal(etacal_fit_run_held(etacal_publish_result_fit(r)), 4);
        double z = 1.959963984540054; /* Phi^-1(0.975), handbook value */
        double hi = late_slow ? z * z / (4 + z * z) : 1;
        /* not required: skipped, the numbers still given */
        check_guard(r, "holdout", ETACAL_GUARD_SKIPPED, hi, 0.9, "share");
        assert_non_null(strstr(guard_of(r, "holdout")->message, "(not required)"));
        etacal_publish_result_destroy(r);
        c.s.require_holdout = 1;
        r = pub_run(&c);
        check_guard(r, "holdout", late_slow ? ETACAL_GUARD_FAILED : ETACAL_GUARD_PASSED, hi, 0.9, "share");
        assert_int_equal(etacal_publish_result_outcome(r), late_slow ? ETACAL_PUBLISH_REFUSED : ETACAL_PUBLISHED);
        etacal_publish_result_destroy(r);
        tu_dir_remove(&c.d);
    }
}

static void test_publish_errors_and_history(void **state)
{
    (void)state;
    pub_case c;
    pub_setup(&c, 0, NULL);
    etacal_publish_result *r = (etacal_publish_result *)(void *)&c; /* a run must reset it */
    etacal_error err;
    c.s.now = NAN;
    assert_int_equal(etacal_publish_run(&c.s, &r, &err), ETACAL_EINVAL);
    assert_null(r);
    assert_non_null(strstr(err.msg, "current time"));
    c.s.now = 1764633600;
    c.s.require_holdout = 1;
    assert_int_equal(etacal_publish_run(&c.s, &r, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "--holdout"));
    c.s.require_holdout = 0;
    c.s.input = "-";
    assert_int_equal(etacal_publish_run(&c.s, &r, &err), ETACAL_EINVAL);
    c.s.input = c.cal;
    /* the lock held elsewhere: an error, nothing written */
    int fd = -1;
    assert_int_equal(etacal_lock_acquire(c.table, 0, &fd, &err), ETACAL_OK);
    assert_int_equal(etacal_publish_run(&c.s, &r, &err), ETACAL_EIO);
    assert_null(r);
    etacal_lock_release(fd);
    assert_false(exists(&c.d, "q.csv"));
    /* history copies named by the caller's time, -2 for the second */
    char hist[700];
    tu_path(hist, sizeof hist, &c.d, "hist");
    c.s.history = hist;
    for (int k = 0; k < 2; k++) {
        r = pub_run(&c);
        char want[800];
        snprintf(want, sizeof want, "%s/q.csv.20251202T000000Z%s", hist, k ? "-2" : "");
        assert_string_equal(etacal_publish_result_history_path(r), want);
        etacal_publish_result_destroy(r);
    }
    assert_true(exists(&c.d, "hist/q.csv.20251202T000000Z.meta.json"));
    assert_true(exists(&c.d, "hist/q.csv.20251202T000000Z-2.meta.json"));
    tu_rm_tree(hist);
    tu_dir_remove(&c.d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_sha256_fips),     cmocka_unit_test(test_sha256_splits),
        cmocka_unit_test(test_sha256_file),     cmocka_unit_test(test_promise_at_matches_apply),
        cmocka_unit_test(test_compare),         cmocka_unit_test(test_lock),
        cmocka_unit_test(test_keep_copy),       cmocka_unit_test(test_reference_point),
        cmocka_unit_test(test_publish_first),   cmocka_unit_test(test_publish_change_guard),
        cmocka_unit_test(test_publish_rows_and_bad_rows),
        cmocka_unit_test(test_publish_current_and_layout),
        cmocka_unit_test(test_publish_holdout_guard),
        cmocka_unit_test(test_publish_errors_and_history),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
