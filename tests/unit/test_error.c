/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_error.c: the caller-owned error record (src/error.c), against the
 * contract in include/etacal/error.h: etacal_error_set fills code, where
 * ("" for NULL) and the formatted message and returns the code, also for a
 * NULL record; texts longer than the record's buffers are cut to them,
 * NUL-terminated, without touching the bytes around; a where holding '%'
 * is copied, not formatted; etacal_error_clear empties a record and accepts
 * NULL; etacal_strerror names every code and answers "unknown error" for any
 * other value. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "testutil.h"

/* An error record between two guard areas, to see that nothing is written
 * outside it. */
typedef struct guarded {
    unsigned char before[64];
    etacal_error e;
    unsigned char after[64];
} guarded;

static void guard_init(guarded *g)
{
    memset(g, 0xA5, sizeof *g);
}

static void guard_check(const guarded *g)
{
    for (size_t i = 0; i < sizeof g->before; i++)
        assert_int_equal(g->before[i], 0xA5);
    for (size_t i = 0; i < sizeof g->after; i++)
        assert_int_equal(g->after[i], 0xA5);
}

static void test_set_fills_and_returns_code(void **state)
{
    (void)state;
    guarded g;
    guard_init(&g);
    assert_int_equal(etacal_error_set(&g.e, ETACAL_ENUM, "orders.csv:2385",
                                      "segment '%s': %zu rows, %g needed", "north|c9", (size_t)17, 2.385),
                     ETACAL_ENUM);
    assert_error(&g.e, ETACAL_ENUM, "orders.csv:2385", "segment 'north|c9': 17 rows, 2.385 needed");
    /* NULL where is the empty string. */
    assert_int_equal(etacal_error_set(&g.e, ETACAL_EIO, NULL, "write failed: %s", "No space left on device"),
                     ETACAL_EIO);
    assert_error(&g.e, ETACAL_EIO, "", "write failed: No space left on device");
    /* A where holding '%' is copied as it is, not used as a format. */
    assert_int_equal(etacal_error_set(&g.e, ETACAL_EPARSE, "100%s_%d.csv:7", "x"), ETACAL_EPARSE);
    assert_error(&g.e, ETACAL_EPARSE, "100%s_%d.csv:7", "x");
    /* An empty message; a code outside the enum is stored as given. */
    assert_int_equal(etacal_error_set(&g.e, 42, "w", "%s", ""), 42);
    assert_error(&g.e, 42, "w", "");
    /* A shorter text after a longer one leaves nothing of the old one. */
    etacal_error_set(&g.e, ETACAL_EINVAL, "a-long-file-name.csv:944", "tau must be in (0,1), got %g", 1.5);
    etacal_error_set(&g.e, ETACAL_EINVAL, "b:1", "no");
    assert_error(&g.e, ETACAL_EINVAL, "b:1", "no");
    guard_check(&g);
}

static void test_set_null_record(void **state)
{
    (void)state;
    /* Every code comes back; nothing is written anywhere. */
    const int codes[] = {ETACAL_OK, ETACAL_EINVAL, ETACAL_ENOMEM, ETACAL_EIO, ETACAL_EPARSE, ETACAL_ENUM, -7};
    for (size_t i = 0; i < sizeof codes / sizeof *codes; i++)
        assert_int_equal(etacal_error_set(NULL, codes[i], "in.csv:3", "column '%s'", "zone"), codes[i]);
    assert_int_equal(etacal_error_set(NULL, ETACAL_EINVAL, NULL, "%s", "x"), ETACAL_EINVAL);
}

static void test_set_truncates_safely(void **state)
{
    (void)state;
    guarded g;
    const size_t wcap = sizeof g.e.where, mcap = sizeof g.e.msg;
    /* Texts of every length around the buffer sizes: the longest prefix
     * that fits, NUL-terminated, and the guards untouched. */
    char text[1200];
    for (size_t i = 0; i < sizeof text - 1; i++)
        text[i] = (char)('a' + (i * 7) % 26);
    text[sizeof text - 1] = '\0';
    for (size_t len = 0; len < sizeof text - 1; len += (len < 300 ? 1 : 97)) {
        char w[1200];
        memcpy(w, text, len);
        w[len] = '\0';
        guard_init(&g);
        assert_int_equal(etacal_error_set(&g.e, ETACAL_EPARSE, w, "%s", w), ETACAL_EPARSE);
        guard_check(&g);
        size_t wl = len < wcap ? len : wcap - 1, ml = len < mcap ? len : mcap - 1;
        assert_int_equal(strlen(g.e.where), wl);
        assert_int_equal(strlen(g.e.msg), ml);
        assert_memory_equal(g.e.where, w, wl);
        assert_memory_equal(g.e.msg, w, ml);
    }
    /* A message made long by its arguments, not its format. */
    guard_init(&g);
    etacal_error_set(&g.e, ETACAL_EPARSE, NULL, "column '%s' is not numeric: '%s' (%s)", text, text, text);
    guard_check(&g);
    assert_int_equal(strlen(g.e.msg), mcap - 1);
    assert_memory_equal(g.e.msg, "column 'ahov", 12);
}

static void test_clear(void **state)
{
    (void)state;
    guarded g;
    guard_init(&g);
    etacal_error_set(&g.e, ETACAL_ENOMEM, "big.csv:65537", "out of memory");
    etacal_error_clear(&g.e);
    assert_error(&g.e, ETACAL_OK, "", "");
    guard_check(&g);
    /* A record never set (all bytes garbage) is cleared as well. */
    guard_init(&g);
    etacal_error_clear(&g.e);
    assert_int_equal(g.e.code, ETACAL_OK);
    assert_string_equal(g.e.where, "");
    assert_string_equal(g.e.msg, "");
    guard_check(&g);
    /* NULL is allowed (and does nothing). */
    etacal_error_clear(NULL);
}

static void test_strerror(void **state)
{
    (void)state;
    /* The names error.c gives each code in error.h's enum. */
    assert_string_equal(etacal_strerror(ETACAL_OK), "success");
    assert_string_equal(etacal_strerror(ETACAL_EINVAL), "invalid argument");
    assert_string_equal(etacal_strerror(ETACAL_ENOMEM), "out of memory");
    assert_string_equal(etacal_strerror(ETACAL_EIO), "input/output error");
    assert_string_equal(etacal_strerror(ETACAL_EPARSE), "malformed input");
    assert_string_equal(etacal_strerror(ETACAL_ENUM), "numerical problem");
    /* Every name differs from the others and from the unknown one. */
    for (int a = ETACAL_OK; a <= ETACAL_ENUM; a++) {
        assert_string_not_equal(etacal_strerror(a), "unknown error");
        for (int b = ETACAL_OK; b < a; b++)
            assert_string_not_equal(etacal_strerror(a), etacal_strerror(b));
    }
    /* Anything else. */
    const int other[] = {-1, ETACAL_ENUM + 1, 42, INT_MAX, INT_MIN};
    for (size_t i = 0; i < sizeof other / sizeof *other; i++)
        assert_string_equal(etacal_strerror(other[i]), "unknown error");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_set_fills_and_returns_code),
        cmocka_unit_test(test_set_null_record),
        cmocka_unit_test(test_set_truncates_safely),
        cmocka_unit_test(test_clear),
        cmocka_unit_test(test_strerror),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
