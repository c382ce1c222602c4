/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_out_publish.c: publish's change report (etacal_publish_write_report)
 * after a first publish and after a refused one over it: the JSON parsed
 * back (json_loads) holds the run's counts, comparison, moves and guards in
 * the documented order, and each new promise is the new table's line at
 * the reference order (offset_s + slope x pred, quote.h); the text lists at
 * most `show` moves and says what became of the table; CSV is refused
 * (ETACAL_EINVAL) and a sink that refuses bytes gives ETACAL_EIO. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "testutil.h"
#include "outfixture.h"

#define NROWS 1500

static const char *const keys[] = {"zone"};
static const double targets[] = {0.8, 0.9};
static const char *const cmd[] = {"test", "publish"};

typedef struct fixture {
    tu_dir d;
    char rows[600], table[600];
    etacal_publishspec s;
    etacal_publish_result *first, *second;
} fixture;

static etacal_publish_result *run(const etacal_publishspec *s)
{
    etacal_publish_result *r = NULL;
    etacal_error err;
    if (etacal_publish_run(s, &r, &err) != ETACAL_OK)
        fail_msg("publish: %s: %s", err.where, err.msg);
    return r;
}

/* The first publish (no current table), then new rows published over it
 * with a change limit of 1 s, which a guard refuses. */
static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    assert_non_null(f);
    tu_dir_make(&f->d);
    ot_rows(&f->d, NROWS, UINT64_C(0xab1e), f->rows, sizeof f->rows);
    tu_path(f->table, sizeof f->table, &f->d, "q.csv");
    etacal_publishspec_init(&f->s);
    f->s.fit.actual = "actual_s";
    f->s.fit.pred = "pred_s";
    f->s.fit.keys = keys;
    f->s.fit.nkeys = 1;
    f->s.fit.targets = targets;
    f->s.fit.ntargets = 2;
    f->s.fit.min_rows = 80;
    f->s.input = f->rows;
    f->s.table = f->table;
    f->s.min_total_rows = 100;
    f->s.wait_s = 0;
    f->s.now = 1764633600; /* 2025-12-02T00:00:00Z */
    f->s.command = cmd;
    f->s.ncommand = 2;
    f->first = run(&f->s);
    assert_int_equal(etacal_publish_result_outcome(f->first), ETACAL_PUBLISHED);
    ot_rows(&f->d, NROWS, UINT64_C(0xbeef17), f->rows, sizeof f->rows);
    f->s.max_change_s = 1;
    f->s.now += 86400;
    f->second = run(&f->s);
    assert_int_equal(etacal_publish_result_outcome(f->second), ETACAL_PUBLISH_REFUSED);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    etacal_publish_result_destroy(f->first);
    etacal_publish_result_destroy(f->second);
    tu_dir_remove(&f->d);
    free(f);
    return 0;
}

static json_t *report_json(const fixture *f, const etacal_publish_result *r)
{
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    etacal_error err;
    assert_int_equal(etacal_publish_write_report(r, &f->s, ETACAL_FORMAT_JSON, 10, &out, &err), ETACAL_OK);
    json_error_t je;
    json_t *root = json_loads(b.data, 0, &je);
    if (!root)
        fail_msg("the JSON does not parse: %s at line %d", je.text, je.line);
    ot_buf_free(&b);
    return root;
}

static void check_guards(const json_t *root, const etacal_publish_result *r)
{
    static const char *const names[] = {"rows", "bad rows", "current table", "change", "layout", "holdout",
                                        "well formed"};
    size_t ng;
    const etacal_guard *g = etacal_publish_result_guards(r, &ng);
    json_t *gr = json_object_get(root, "guards");
    assert_int_equal(json_array_size(gr), ETACAL_PUBLISH_NGUARDS);
    for (size_t i = 0; i < ETACAL_PUBLISH_NGUARDS; i++) {
        json_t *o = json_array_get(gr, i);
        assert_string_equal(json_string_value(json_object_get(o, "guard")), names[i]);
        assert_string_equal(json_string_value(json_object_get(o, "result")), etacal_guard_status_name(g[i].status));
        assert_string_equal(json_string_value(json_object_get(o, "detail")), g[i].message);
    }
}

static void test_json_first(void **state)
{
    fixture *f = *state;
    json_t *root = report_json(f, f->first);
    assert_string_equal(json_string_value(json_object_get(root, "outcome")), "published");
    assert_string_equal(json_string_value(json_object_get(root, "table")), f->table);
    json_t *rows = json_object_get(root, "rows");
    assert_int_equal(json_integer_value(json_object_get(rows, "read")), NROWS);
    assert_int_equal(json_integer_value(json_object_get(rows, "used")), NROWS);
    assert_true(json_is_null(json_object_get(root, "segments")));
    assert_int_equal(json_array_size(json_object_get(root, "moves")), 0);
    check_guards(root, f->first);
    json_decref(root);
}

static void test_json_refused(void **state)
{
    fixture *f = *state;
    const etacal_quotes_diff *d = etacal_publish_result_diff(f->second);
    assert_non_null(d);
    const etacal_quotes *q = etacal_fit_run_quotes(etacal_publish_result_fit(f->second));
    const double *x;
    double ref = etacal_publish_result_reference(f->second, &x);
    json_t *root = report_json(f, f->second);
    assert_string_equal(json_string_value(json_object_get(root, "outcome")), "refused");
    assert_close(json_number_value(json_object_get(json_object_get(root, "reference"), "pred_s")), ref, 1e-9);
    json_t *segs = json_object_get(root, "segments");
    assert_int_equal(json_integer_value(json_object_get(segs, "added")), d->segs_added);
    assert_int_equal(json_integer_value(json_object_get(segs, "removed")), d->segs_removed);
    assert_int_equal(json_integer_value(json_object_get(segs, "changed")), d->segs_changed);
    assert_int_equal(json_integer_value(json_object_get(segs, "unchanged")), d->segs_same);
    json_t *mv = json_object_get(root, "moves");
    assert_int_equal(json_array_size(mv), d->nmoves);
    assert_true(d->nmoves > 0);
    etacal_quote_index *ix = NULL;
    etacal_error err;
    assert_int_equal(etacal_quote_index_create(q, &ix, &err), ETACAL_OK);
    size_t checked = 0;
    for (size_t i = 0; i < d->nmoves; i++) {
        json_t *o = json_array_get(mv, i);
        const etacal_quote_move *m = &d->moves[i];
        const char *zone = json_string_value(json_object_get(json_object_get(o, "keys"), "zone"));
        assert_non_null(zone);
        assert_string_equal(zone, m->keys[0]);
        assert_close(json_number_value(json_object_get(o, "target")), m->target, 1e-12);
        assert_int_equal(json_is_true(json_object_get(o, "in_new")), m->in_new != 0);
        double cur = json_number_value(json_object_get(o, "current_s"));
        double nw = json_number_value(json_object_get(o, "new_s"));
        assert_close(cur, m->old_promise, 1e-9);
        assert_close(nw, m->new_promise, 1e-9);
        assert_close(json_number_value(json_object_get(o, "move_s")), nw - cur, 1e-9);
        if (!m->in_new)
            continue;
        /* the new promise: the line of the row that serves the segment */
        long ti = etacal_quotes_find_target(q, m->target);
        assert_true(ti >= 0);
        long r = etacal_quote_index_lookup(ix, m->keys, NULL, (size_t)ti, NULL);
        assert_true(r >= 0);
        etacal_quote_row row;
        assert_int_equal(etacal_quotes_row(q, (size_t)r, &row), 0);
        double want = row.offset_s + row.slope * ref;
        assert_close(nw, want < 0 ? 0 : want, 1e-9);
        checked++;
    }
    assert_true(checked > 0);
    etacal_quote_index_destroy(ix);
    check_guards(root, f->second);
    json_decref(root);
}

static void test_text(void **state)
{
    fixture *f = *state;
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    etacal_error err;
    assert_int_equal(etacal_publish_write_report(f->second, &f->s, ETACAL_FORMAT_TEXT, 2, &out, &err), ETACAL_OK);
    char want[1400];
    snprintf(want, sizeof want, "etacal publish: %s from %s\n", f->table, f->rows);
    assert_true(strncmp(b.data, want, strlen(want)) == 0);
    assert_non_null(ot_line(b.data, "current table: method add"));
    assert_non_null(ot_line(b.data, "reference order: prediction "));
    /* --show 2: the header row and two moves, then a blank line */
    const char *p = ot_line(b.data, "largest moves of the promise at the reference order:\n");
    assert_non_null(p);
    p = strchr(p, '\n') + 1;
    assert_true(strncmp(p, "zone", 4) == 0);
    size_t n = 0;
    while (*p && *p != '\n') {
        p = strchr(p, '\n') + 1;
        n++;
    }
    assert_int_equal(n, 3);
    assert_non_null(ot_line(b.data, "change         FAILED"));
    snprintf(want, sizeof want, "refused: nothing replaced; %s is left as it was\n", f->table);
    assert_non_null(ot_line(b.data, want));
    ot_buf_free(&b);

    out = ot_buf_sink(&b);
    assert_int_equal(etacal_publish_write_report(f->first, &f->s, ETACAL_FORMAT_TEXT, 10, &out, &err), ETACAL_OK);
    assert_non_null(ot_line(b.data, "current table: none\n"));
    snprintf(want, sizeof want, "published: %s; provenance in %s.meta.json\n", f->table, f->table);
    assert_non_null(ot_line(b.data, want));
    ot_buf_free(&b);
}

static void test_errors(void **state)
{
    fixture *f = *state;
    etacal_error err;
    ot_buf b = {0};
    etacal_sink out = ot_buf_sink(&b);
    assert_int_equal(etacal_publish_write_report(f->second, &f->s, ETACAL_FORMAT_CSV, 10, &out, &err),
                     ETACAL_EINVAL);
    assert_int_equal(b.len, 0);
    int fmts[] = {ETACAL_FORMAT_TEXT, ETACAL_FORMAT_JSON};
    for (size_t i = 0; i < 2; i++)
        for (size_t stop = 0; stop < 200; stop += 120) {
            ot_stop st = {stop, 0};
            etacal_sink s = ot_stop_sink(&st);
            assert_int_equal(etacal_publish_write_report(f->second, &f->s, fmts[i], 10, &s, &err), ETACAL_EIO);
        }
    ot_buf_free(&b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_json_first, setup, teardown),
        cmocka_unit_test_setup_teardown(test_json_refused, setup, teardown),
        cmocka_unit_test_setup_teardown(test_text, setup, teardown),
        cmocka_unit_test_setup_teardown(test_errors, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
