/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_timeparse.c: ISO 8601 and Unix seconds.  Check values: Unix times
 * from GNU date (`date -u -d @SECONDS`), e.g. 2026-03-02T06:01:58Z is
 * 1772431318 and 2000-02-29T00:00:00Z is 951782400 (common knowledge of the
 * epoch: 1970-01-01T00:00:00Z is 0). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <string.h>

#include "etacal/etacal.h"

static double ok(const char *s)
{
    double v = -1;
    int k = etacal_time_parse(s, strlen(s), &v);
    if (k != ETACAL_NUM_VALUE)
        fail_msg("'%s' was not accepted", s);
    return v;
}

static void bad(const char *s)
{
    double v;
    if (etacal_time_parse(s, strlen(s), &v) != ETACAL_NUM_BAD)
        fail_msg("'%s' was accepted", s);
}

static void test_iso(void **state)
{
    (void)state;
    assert_true(ok("1970-01-01") == 0);
    assert_true(ok("1970-01-01T00:00:00Z") == 0);
    assert_true(ok("2026-03-02T06:01:58Z") == 1772431318);
    assert_true(ok("2026-03-02 06:01:58") == 1772431318);      /* no zone: UTC */
    assert_true(ok("2026-03-02T07:01:58+01:00") == 1772431318); /* offsets */
    assert_true(ok("2026-03-02T01:31:58-0430") == 1772431318);
    assert_true(ok("2026-03-02T08:01:58+02") == 1772431318);
    assert_true(ok("2026-03-02T06:01") == 1772431260);
    assert_true(ok("2026-03-02T06:01:58.25Z") == 1772431318.25);
    assert_true(ok("2000-02-29T00:00:00Z") == 951782400); /* a leap day */
    assert_true(ok("1969-12-31T23:59:59Z") == -1);
    bad("2001-02-29");  /* not a leap year */
    bad("1900-02-29");  /* nor this one */
    bad("2026-13-01");
    bad("2026-04-31");
    bad("2026-03-02T24:00:00Z");
    bad("2026-03-02T06:60:00Z");
    bad("2026-03-02T06:01:58Q");
    bad("2026-03-02T06:01:58+25:00");
    bad("2026-3-2");
    bad("02/03/2026");
}

static void test_unix_and_missing(void **state)
{
    (void)state;
    assert_true(ok("1772431318") == 1772431318);
    assert_true(ok("1772431318.5") == 1772431318.5);
    double v;
    assert_int_equal(etacal_time_parse("", 0, &v), ETACAL_NUM_MISSING);
    assert_int_equal(etacal_time_parse("NA", 2, &v), ETACAL_NUM_MISSING);
    bad("soon");
    bad("inf");
    /* Unix seconds within the years 0000-9999, the range of the dates:
     * 0000-01-01 is 719528 days before 1970-01-01 (proleptic Gregorian,
     * days_from_civil of Hinnant's algorithms), 10000-01-01 is 2932897 after */
    assert_true(ok("-62167219200") == -719528.0 * 86400);
    assert_true(ok("253402300799") == 2932897.0 * 86400 - 1);
    assert_true(ok("0000-01-01T00:00:00Z") == -719528.0 * 86400);
    bad("253402300800");
    bad("-62167219201");
    bad("1e300");
    bad("-1e19");
    /* and writing a time never overflows: out-of-range values are clamped */
    char buf[32];
    etacal_time_format(1e300, buf);
    assert_string_equal(buf, "9999-12-31T23:59:59Z");
    etacal_time_format(-1e300, buf);
    assert_string_equal(buf, "0000-01-01T00:00:00Z");
    etacal_time_format(1772431318.75, buf);
    assert_string_equal(buf, "2026-03-02T06:01:58Z");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_iso),
        cmocka_unit_test(test_unix_and_missing),
    };
    return cmocka_run_group_tests_name("timeparse", tests, NULL, NULL);
}
