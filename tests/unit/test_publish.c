/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_publish.c: what `etacal publish` is built on: SHA-256 against the
 * FIPS 180-2 worked examples, the promise of a table at a reference order
 * (the same as `etacal apply` gives), the comparison of two tables, the
 * lock beside the table and the copy of the previous table. */
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
 * that segment with that prediction: checked against etacal_apply_csv on
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
    assert_int_equal(etacal_apply_csv(q, in, fp, &o, &st, &err), ETACAL_OK);
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
    assert_int_equal(etacal_quotes_compare(o, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
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
    etacal_quotes_diff_free(&df);

    /* the same table: nothing moves */
    assert_int_equal(etacal_quotes_compare(o, o, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
    assert_int_equal(df.segs_changed + df.segs_added + df.segs_removed, 0);
    assert_int_equal(df.segs_same, 4);
    etacal_quotes_diff_free(&df);
    etacal_quotes_destroy(n);

    /* other key columns: only the global rows compare */
    n = table(&d, "new2.csv",
              "zone,target,method,n,k,offset_s,slope\n"
              "*,0.9,add,5000,4501,310,1\n"
              "north,0.9,add,900,811,250,1\n");
    assert_int_equal(etacal_quotes_compare(o, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
    assert_int_equal(df.keys_differ, 1);
    assert_int_equal(df.nmoves, 1);
    assert_true(df.moves[0].old_promise == 1300 && df.moves[0].new_promise == 1310);
    etacal_quotes_diff_free(&df);
    etacal_quotes_destroy(n);

    /* a target of one table only: no promise on the other side */
    n = table(&d, "new3.csv",
              "zone,vehicle,target,method,n,k,offset_s,slope\n"
              "*,*,0.9,add,5000,4501,300,1\n"
              "*,*,0.95,add,5000,4751,420,1\n");
    assert_int_equal(etacal_quotes_compare(o, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_OK);
    assert_int_equal(df.targets_added, 1);
    assert_int_equal(df.targets_removed, 0);
    int seen95 = 0;
    for (size_t i = 0; i < df.nmoves; i++)
        if (df.moves[i].target == 0.95) {
            seen95 = 1;
            assert_true(isnan(df.moves[i].old_promise) && df.moves[i].new_promise == 1420);
        }
    assert_true(seen95);
    etacal_quotes_diff_free(&df);
    etacal_quotes_destroy(n);

    /* a covariate without a reference value is an error */
    n = table(&d, "new4.csv",
              "target,method,n,k,offset_s,slope,coef_distance_km\n"
              "0.9,qr,5000,2251,200,1.1,60\n");
    etacal_quotes *o1 = table(&d, "old1.csv", "target,method,n,k,offset_s,slope\n0.9,add,5000,4501,300,1\n");
    assert_int_equal(etacal_quotes_compare(o1, n, 1000, NULL, NULL, 0, &df, &err), ETACAL_EINVAL);
    assert_non_null(strstr(err.msg, "distance_km"));
    const char *names[1] = {"distance_km"};
    double x[1] = {2.5};
    assert_int_equal(etacal_quotes_compare(o1, n, 1000, names, x, 1, &df, &err), ETACAL_OK);
    assert_int_equal(df.nmoves, 1);
    assert_true(df.moves[0].old_promise == 1300);
    assert_true(tu_close(df.moves[0].new_promise, 200 + 1.1 * 1000 + 60 * 2.5, 1e-15));
    assert_int_equal(df.method_differs, 1);
    etacal_quotes_diff_free(&df);
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

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_sha256_fips),     cmocka_unit_test(test_sha256_splits),
        cmocka_unit_test(test_sha256_file),     cmocka_unit_test(test_promise_at_matches_apply),
        cmocka_unit_test(test_compare),         cmocka_unit_test(test_lock),
        cmocka_unit_test(test_keep_copy),       cmocka_unit_test(test_reference_point),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
