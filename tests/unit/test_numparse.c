/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_numparse.c: etacal_num_parse and etacal_num_format.
 *
 * Parsing is checked against glibc's strtod in the C locale (correctly
 * rounded) on many seeded random decimal strings, on long mantissas and on
 * exact halfway cases; missing tokens and malformed numbers are checked one
 * by one.  Formatting is checked for round trips, for the short forms the
 * quote tables rely on and for being the shortest form that reads back. */
#define _GNU_SOURCE
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <float.h>
#include <locale.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/numparse.h"
#include "internal.h"
#include "testutil.h"

/* Parses a NUL-terminated string. */
static int parse(const char *s, double *out) { return etacal_num_parse(s, strlen(s), out); }

/* strtod in the C locale, requiring the whole string to be consumed. */
static double ref_strtod(const char *s)
{
    char *end;
    double v = strtod(s, &end);
    if (*end != '\0')
        fail_msg("reference strtod did not consume '%s'", s);
    return v;
}

static void test_parse_plain_values(void **state)
{
    (void)state;
    static const struct {
        const char *s;
        double want;
    } cases[] = {
        {"2.385", 2.385},
        {"944.7", 944.7},
        {"-0.0625", -0.0625},
        {"+17.25", 17.25},
        {"1800", 1800.0},
        {"1.5e3", 1500.0},
        {"2.5E-3", 0.0025},
        {"1e+2", 100.0},
        {".5", 0.5},
        {"7.", 7.0},
        {"000123.4500", 123.45},
        {"  2.385", 2.385},
        {"2.385\t ", 2.385},
        {" \t-3.75e-2 ", -0.0375},
        {"1e-7", 1e-7},
        {"123456789012345678", 123456789012345678.0},
        {"9007199254740993", 9007199254740992.0}, /* 2^53+1: halfway, ties to even */
        {"9007199254740995", 9007199254740996.0}, /* 2^53+3: halfway, ties to even */
        {"1.7976931348623157e308", DBL_MAX},
        {"4.9406564584124654e-324", 0x1p-1074},
        {"2.2250738585072014e-308", DBL_MIN},
        {"inf", INFINITY},
        {"-Infinity", -INFINITY},
        {"+INF", INFINITY},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        double v = 123.456;
        int rc = parse(cases[i].s, &v);
        if (rc != ETACAL_NUM_VALUE)
            fail_msg("'%s': code %d, expected a value", cases[i].s, rc);
        assert_same_double(v, cases[i].want);
    }
    double v;
    assert_int_equal(parse("-0", &v), ETACAL_NUM_VALUE);
    assert_true(v == 0 && signbit(v));
    assert_int_equal(parse("-0.000e5", &v), ETACAL_NUM_VALUE);
    assert_true(v == 0 && signbit(v));
    assert_int_equal(parse("0e999999", &v), ETACAL_NUM_VALUE);
    assert_true(v == 0 && !signbit(v));
}

static void test_parse_honours_length(void **state)
{
    (void)state;
    /* Only len bytes count: what follows must not be read. */
    const char buf[] = "2.38517";
    double v = 0;
    assert_int_equal(etacal_num_parse(buf, 5, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 2.385);
    const char buf2[] = "12abc";
    assert_int_equal(etacal_num_parse(buf2, 2, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 12.0);
    /* A long (slow-path) mantissa followed by more digits. */
    const char buf3[] = "0.1000000000000000000000000000019999";
    assert_int_equal(etacal_num_parse(buf3, 32, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, ref_strtod("0.100000000000000000000000000001"));
}

static void test_parse_missing_tokens(void **state)
{
    (void)state;
    static const char *missing[] = {"",    "   ",  "\t",   "NA",   "na",   "nA",  "NaN",
                                    "nan", "NAN",  "nAn",  "null", "NULL", "Null", " NA ",
                                    "\tnull"};
    for (size_t i = 0; i < sizeof missing / sizeof missing[0]; i++) {
        double v = 2.385;
        int rc = parse(missing[i], &v);
        if (rc != ETACAL_NUM_MISSING)
            fail_msg("'%s': code %d, expected missing", missing[i], rc);
        assert_true(isnan(v));
    }
}

static void test_parse_rejects_malformed(void **state)
{
    (void)state;
    static const char *bad[] = {"1,5",   "0x10", "0X1A",  "1e",    "1e+",   "1E-",  "--1",
                                "+-1",   "12abc", ".",    "+",     "-",     "e5",   "1.2.3",
                                "1 2",   "abc",  "infin", "nana",  "1_000", "1e5x", "0x1p3",
                                "1,000.5", "2.5.", "- 1",  "NA1",  "'3'",   "\"3\"", "1e2.5",
                                /* beyond the doubles, or nonzero yet rounding to zero: refused
                                 * rather than changed to inf or 0 (issue 6; strtod would give
                                 * HUGE_VAL and 0 with ERANGE, C11 7.22.1.3) */
                                "1e400", "-1e400", "1e-400", "2e-324", "1.8e308"};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        double v = 2.385;
        int rc = parse(bad[i], &v);
        if (rc != ETACAL_NUM_BAD)
            fail_msg("'%s': code %d (value %g), expected bad", bad[i], rc, v);
        /* The contract: *out untouched on a bad number. */
        assert_same_double(v, 2.385);
    }
}

/* The reason a message gives for a refused number. */
static void test_bad_reasons(void **state)
{
    (void)state;
    static const struct {
        const char *s, *starts;
    } cases[] = {
        {"1,234", "a comma"},       {"12,5", "a comma"},     {" 1e400 ", "beyond the range"},
        {"-1e-400", "beyond the range"}, {"0x10", "hexadecimal"}, {"-0X1A", "hexadecimal"},
        {"1 234", "no digit grouping"}, {"1'234", "no digit grouping"}, {"1_000", "no digit grouping"},
        {"1797693134862315807937289714053034150799341327710524699274096666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666666", "beyond the range"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        const char *why = num_bad_reason(cases[i].s, strlen(cases[i].s));
        if (!why || strncmp(why, cases[i].starts, strlen(cases[i].starts)) != 0)
            fail_msg("'%s': reason '%s', expected '%s...'", cases[i].s, why ? why : "(none)", cases[i].starts);
    }
    assert_null(num_bad_reason("abc", 3));
    assert_null(num_bad_reason("1e5x", 4));
    assert_null(num_bad_reason("", 0));
}

/* A random decimal string in buf: sign, 1..40 digits with an optional point
 * anywhere, an optional exponent reaching the subnormal and overflow ranges. */
static void random_decimal(tu_rng *r, char *buf, size_t size)
{
    size_t w = 0;
    uint64_t u = tu_below(r, 8);
    if (u == 0)
        buf[w++] = '-';
    else if (u == 1)
        buf[w++] = '+';
    size_t ndig = tu_below(r, 4) == 0 ? 1 + tu_below(r, 40) : 1 + tu_below(r, 19);
    long point = tu_below(r, 3) == 0 ? -1 : (long)tu_below(r, ndig + 1);
    for (size_t i = 0; i < ndig; i++) {
        if ((long)i == point)
            buf[w++] = '.';
        buf[w++] = (char)('0' + tu_below(r, 10));
    }
    if ((long)ndig == point)
        buf[w++] = '.';
    uint64_t e = tu_below(r, 4);
    if (e == 1) { /* small exponents: the fast path */
        buf[w++] = 'e';
        w += (size_t)snprintf(buf + w, size - w, "%d", (int)tu_below(r, 45) - 22);
    } else if (e == 2) { /* anything, subnormals and overflow included */
        buf[w++] = tu_below(r, 2) ? 'E' : 'e';
        int ex = (int)tu_below(r, 700) - 360;
        if (ex < 0)
            buf[w++] = '-';
        else if (tu_below(r, 3) == 0)
            buf[w++] = '+';
        w += (size_t)snprintf(buf + w, size - w, "%d", ex < 0 ? -ex : ex);
    }
    buf[w] = '\0';
}

static void test_parse_random_against_strtod(void **state)
{
    (void)state;
    setlocale(LC_NUMERIC, "C");
    tu_rng r = {UINT64_C(20240917)};
    char buf[128];
    for (int i = 0; i < 200000; i++) {
        random_decimal(&r, buf, sizeof buf);
        double want = ref_strtod(buf);
        double got = NAN;
        /* Pass the length only, with junk after it. */
        size_t len = strlen(buf);
        buf[len] = '9';
        buf[len + 1] = '\0';
        int rc = etacal_num_parse(buf, len, &got);
        buf[len] = '\0';
        /* out of range: strtod's inf, or its 0 for a literal with a
         * nonzero digit, is refused */
        int nonzero = 0;
        for (const char *c = buf; *c && *c != 'e' && *c != 'E'; c++)
            nonzero |= *c >= '1' && *c <= '9';
        if (isinf(want) || (want == 0 && nonzero)) {
            if (rc != ETACAL_NUM_BAD)
                fail_msg("'%s': code %d, expected bad (out of range)", buf, rc);
            continue;
        }
        if (rc != ETACAL_NUM_VALUE)
            fail_msg("'%s': code %d", buf, rc);
        if (!tu_same_bits(got, want))
            fail_msg("'%s': got %a, strtod gives %a", buf, got, want);
    }
}

static void test_parse_long_mantissas(void **state)
{
    (void)state;
    char buf[600];
    /* 0.333... with 300 threes. */
    size_t w = 0;
    buf[w++] = '0';
    buf[w++] = '.';
    for (int i = 0; i < 300; i++)
        buf[w++] = '3';
    buf[w] = '\0';
    double v;
    assert_int_equal(parse(buf, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 1.0 / 3.0);
    assert_same_double(v, ref_strtod(buf));
    /* A 60-digit integer and the same scaled down by an exponent. */
    const char *big = "123456789012345678901234567890123456789012345678901234567890";
    assert_int_equal(parse(big, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, ref_strtod(big));
    const char *scaled = "123456789012345678901234567890123456789012345678901234567890e-59";
    assert_int_equal(parse(scaled, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, ref_strtod(scaled));
    assert_close(v, 1.2345678901234568, 1e-15);
    /* Just above the halfway point between 2^53 and 2^53+2: a digit far
     * out decides (exact binary arithmetic: 2^53 = 9007199254740992). */
    assert_int_equal(parse("9007199254740993.0000000000000000000000001", &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 9007199254740994.0);
    assert_int_equal(parse("9007199254740992.9999999999999999999999999", &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 9007199254740992.0);
    /* Leading zeros do not count as digits. */
    assert_int_equal(parse("0000000000000000000000000000002.385", &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 2.385);
    assert_int_equal(parse("0.0000000000000000000000000000002385e31", &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 2.385);
}

/* The exact decimal expansion of 2^-1075 (half the smallest subnormal):
 * 5^1075 / 10^1075, digits computed here in base 10^9.  Rounding to nearest,
 * ties to even (IEEE 754), sends it to 0, and anything above it to
 * 2^-1074. */
static size_t half_min_subnormal(char *out, size_t size)
{
    uint32_t limb[100] = {1}; /* little-endian base 1e9 */
    size_t nl = 1;
    for (int i = 0; i < 1075; i++) {
        uint64_t carry = 0;
        for (size_t j = 0; j < nl; j++) {
            uint64_t v = (uint64_t)limb[j] * 5 + carry;
            limb[j] = (uint32_t)(v % 1000000000u);
            carry = v / 1000000000u;
        }
        if (carry)
            limb[nl++] = (uint32_t)carry;
    }
    char digits[1000];
    size_t nd = (size_t)snprintf(digits, sizeof digits, "%u", limb[nl - 1]);
    for (size_t j = nl - 1; j-- > 0;)
        nd += (size_t)snprintf(digits + nd, sizeof digits - nd, "%09u", limb[j]);
    /* value = digits * 10^-1075 = d.ddd * 10^(nd - 1 - 1075) */
    return (size_t)snprintf(out, size, "%c.%se%d", digits[0], digits + 1, (int)nd - 1 - 1075);
}

static void test_parse_very_long_mantissa(void **state)
{
    (void)state;
    char half[1100], above[1100];
    size_t len = half_min_subnormal(half, sizeof half);
    assert_true(len > 700);
    assert_memory_equal(half, "2.4703282292062327", 18);
    /* the same digits with a 1 appended to the mantissa */
    const char *e = strchr(half, 'e');
    int mlen = (int)(e - half);
    snprintf(above, sizeof above, "%.*s1%s", mlen, half, e);
    assert_same_double(ref_strtod(half), 0.0);
    assert_same_double(ref_strtod(above), 0x1p-1074);
    double v = 2.385;
    /* 2^-1075 rounds to zero (ties to even): a nonzero number that would
     * become 0 is refused, and read through to its last digit to know it */
    int rc = parse(half, &v);
    if (rc != ETACAL_NUM_BAD)
        fail_msg("a %zu-byte decimal (2^-1075 written out exactly): code %d, expected bad", len, rc);
    assert_same_double(v, 2.385);
    assert_int_equal(parse(above, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 0x1p-1074);
    /* Longer than the 780 digits kept: the same halfway value with 200
     * zeros more is still exactly halfway (refused: it rounds to 0), and
     * with a 1 after those zeros it is just above (2^-1074); the sticky
     * digit decides, as in strtod on the whole text. */
    char longer[1400];
    snprintf(longer, sizeof longer, "%.*s%0200d%s", mlen, half, 0, e);
    assert_true(strlen(longer) > 900);
    assert_same_double(ref_strtod(longer), 0.0);
    v = 2.385;
    assert_int_equal(parse(longer, &v), ETACAL_NUM_BAD);
    snprintf(longer, sizeof longer, "%.*s%0200d1%s", mlen, half, 0, e);
    assert_same_double(ref_strtod(longer), 0x1p-1074);
    assert_int_equal(parse(longer, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 0x1p-1074);
}

/* Numbers of 800 to 3000 characters (shortened to 780 significant digits
 * and a sticky digit before strtod_l) against strtod on the whole text:
 * random digits, and ties 2^53 + 1 (halfway between two doubles) padded
 * with zeros, with and without a last nonzero digit. */
static void test_parse_thousands_of_digits(void **state)
{
    (void)state;
    tu_rng r = {UINT64_C(20261202)};
    static char buf[3200];
    for (int i = 0; i < 300; i++) {
        size_t w = 0, nd = 800 + tu_below(&r, 2100);
        if (tu_below(&r, 2))
            buf[w++] = '-';
        size_t lead = tu_below(&r, 4) == 0 ? tu_below(&r, 50) : 0;
        for (size_t j = 0; j < lead; j++)
            buf[w++] = '0';
        size_t point = tu_below(&r, nd + 1);
        for (size_t j = 0; j < nd; j++) {
            if (j == point)
                buf[w++] = '.';
            buf[w++] = (char)('0' + (j == 0 ? 1 + tu_below(&r, 9) : tu_below(&r, 10)));
        }
        w += (size_t)snprintf(buf + w, sizeof buf - w, "e%d", (int)tu_below(&r, 700) - 350 - (int)(nd - point));
        double want = ref_strtod(buf), got = 2.385;
        int rc = etacal_num_parse(buf, w, &got);
        if (isinf(want) || want == 0) {
            if (rc != ETACAL_NUM_BAD)
                fail_msg("%zu chars: code %d, expected bad (out of range)", w, rc);
            continue;
        }
        if (rc != ETACAL_NUM_VALUE || !tu_same_bits(got, want))
            fail_msg("%zu chars (%.30s...): code %d, got %a, strtod gives %a", w, buf, rc, got, want);
    }
    /* 9007199254740993 = 2^53 + 1: halfway, ties to even (2^53); any later
     * nonzero digit, however far, rounds up to 2^53 + 2 */
    double v;
    snprintf(buf, sizeof buf, "9007199254740993.%01500d", 0);
    assert_int_equal(parse(buf, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 9007199254740992.0);
    snprintf(buf, sizeof buf, "9007199254740993.%01500d1", 0);
    assert_int_equal(parse(buf, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 9007199254740994.0);
    assert_same_double(v, ref_strtod(buf));
    snprintf(buf, sizeof buf, "0.%01500d9007199254740993e1517", 0);
    assert_int_equal(parse(buf, &v), ETACAL_NUM_VALUE);
    assert_same_double(v, ref_strtod(buf));
}

static size_t fmt(double x, char *buf)
{
    memset(buf, 'Z', ETACAL_NUM_BUFSZ);
    size_t n = etacal_num_format(x, buf);
    assert_true(n < ETACAL_NUM_BUFSZ);
    assert_int_equal(n, strlen(buf));
    return n;
}

static void test_format_short_forms(void **state)
{
    (void)state;
    static const struct {
        double x;
        const char *want;
    } cases[] = {
        {0.9, "0.9"},
        {0.975, "0.975"},
        {1800, "1800"},
        {944.7, "944.7"},
        {2.385, "2.385"},
        {-0.0625, "-0.0625"},
        {101.376, "101.376"},
        {0.1 + 0.2, "0.30000000000000004"},
        {123456.789, "123456.789"},
        {0.00001, "0.00001"},
        {0.0000123, "0.0000123"},
        {0.000001, "1e-06"},
        {1e-7, "1e-07"},
        {2.5e-10, "2.5e-10"},
        {1e16, "10000000000000000"},
        {1e17, "1e+17"},
        {1.5e300, "1.5e+300"},
        {DBL_MAX, "1.7976931348623157e+308"},
        {0x1p-1074, "5e-324"},
        {DBL_MIN, "2.2250738585072014e-308"},
        {0.0, "0"},
        {-0.0, "-0"},
        {INFINITY, "inf"},
        {-INFINITY, "-inf"},
        {NAN, "nan"},
    };
    char buf[ETACAL_NUM_BUFSZ];
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        fmt(cases[i].x, buf);
        if (strcmp(buf, cases[i].want) != 0)
            fail_msg("format(%a) = '%s', expected '%s'", cases[i].x, buf, cases[i].want);
    }
}

/* A random finite double: random bits, subnormals, "nice" decimals and
 * whole numbers in turn. */
static double random_double(tu_rng *r)
{
    for (;;) {
        uint64_t kind = tu_below(r, 4), bits = tu_next(r);
        double x;
        if (kind == 0) {
            memcpy(&x, &bits, sizeof x);
        } else if (kind == 1) {
            bits &= ~(UINT64_C(0x7ff) << 52); /* exponent 0: subnormal */
            memcpy(&x, &bits, sizeof x);
        } else if (kind == 2) {
            x = (double)(int64_t)(bits % 2000000000) / 1000.0;
        } else {
            x = ldexp((double)(bits >> 11), (int)tu_below(r, 120) - 60);
        }
        if (isfinite(x))
            return x;
    }
}

/* Significant digits of a formatted number: mantissa digits without
 * leading or trailing zeros. */
static int sig_digits(const char *s)
{
    char d[64];
    size_t n = 0;
    for (const char *c = s; *c && *c != 'e'; c++)
        if (*c >= '0' && *c <= '9')
            d[n++] = *c;
    size_t a = 0;
    while (a < n && d[a] == '0')
        a++;
    while (n > a && d[n - 1] == '0')
        n--;
    return n > a ? (int)(n - a) : 1;
}

/* The fewest significant digits that read back as x (C library). */
static int ref_shortest(double x)
{
    char b[64];
    for (int p = 1; p <= 17; p++) {
        snprintf(b, sizeof b, "%.*e", p - 1, x);
        if (strtod(b, NULL) == x)
            return p;
    }
    return 17;
}

static void test_format_round_trips(void **state)
{
    (void)state;
    setlocale(LC_NUMERIC, "C");
    tu_rng r = {UINT64_C(77123)};
    char buf[ETACAL_NUM_BUFSZ];
    for (int i = 0; i < 200000; i++) {
        double x = random_double(&r);
        size_t n = fmt(x, buf);
        double back = NAN;
        if (etacal_num_parse(buf, n, &back) != ETACAL_NUM_VALUE || !tu_same_bits(back, x))
            fail_msg("format(%a) = '%s' reads back as %a", x, buf, back);
    }
    /* The extremes. */
    static const double edge[] = {DBL_MAX, -DBL_MAX, DBL_MIN, 0x1p-1074, -0x1p-1074,
                                  0x1.fffffffffffffp-1023, 9007199254740993.0, 1e23, 5e-324};
    for (size_t i = 0; i < sizeof edge / sizeof edge[0]; i++) {
        size_t n = fmt(edge[i], buf);
        double back;
        assert_int_equal(etacal_num_parse(buf, n, &back), ETACAL_NUM_VALUE);
        assert_same_double(back, edge[i]);
    }
}

/* Shortest, for all magnitudes except 1e16 <= |x| < 1e17 (see below). */
static void test_format_is_shortest(void **state)
{
    (void)state;
    setlocale(LC_NUMERIC, "C");
    tu_rng r = {UINT64_C(5150)};
    char buf[ETACAL_NUM_BUFSZ];
    for (int i = 0; i < 100000; i++) {
        double x = random_double(&r);
        if (x == 0 || (fabs(x) >= 1e16 && fabs(x) < 1e17))
            continue;
        fmt(x, buf);
        int want = ref_shortest(x);
        if (sig_digits(buf) != want)
            fail_msg("format(%.17g) = '%s': %d significant digits, the shortest has %d", x, buf,
                     sig_digits(buf), want);
    }
}

/* 92030920993190384 is a double (spacing 16 there) whose shortest form has
 * 16 digits, 9.203092099319038e+16 (the C library's %.15e reads back). */
static void test_format_is_shortest_near_1e16(void **state)
{
    (void)state;
    const double x = 92030920993190384.0;
    char buf[ETACAL_NUM_BUFSZ];
    assert_int_equal(ref_shortest(x), 16);
    fmt(x, buf);
    double back;
    assert_int_equal(etacal_num_parse(buf, strlen(buf), &back), ETACAL_NUM_VALUE);
    assert_same_double(back, x);
    if (sig_digits(buf) != 16)
        fail_msg("format(92030920993190384) = '%s': %d significant digits, the shortest "
                 "(9.203092099319038e+16) has 16",
                 buf, sig_digits(buf));
}

/* Parsing and formatting under a locale with a decimal comma. */
static void test_locale_independent(void **state)
{
    (void)state;
    static const char *names[] = {"de_DE.UTF-8", "de_DE.utf8", "de_DE", "fr_FR.UTF-8",
                                  "fr_FR.utf8"};
    const char *got = NULL;
    for (size_t i = 0; i < sizeof names / sizeof names[0] && !got; i++)
        if (setlocale(LC_NUMERIC, names[i]))
            got = names[i];
    if (!got) {
        printf("[  NOTICE  ] no de_DE/fr_FR locale installed: the decimal-comma part of "
               "test_locale_independent is skipped\n");
        setlocale(LC_NUMERIC, "C");
        /* Still: the C locale gives the same answers. */
        double v;
        assert_int_equal(parse("2.5", &v), ETACAL_NUM_VALUE);
        assert_same_double(v, 2.5);
        return;
    }
    assert_string_equal(localeconv()->decimal_point, ",");
    double v = 0;
    assert_int_equal(parse("2.5", &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 2.5);
    v = 2.385;
    assert_int_equal(parse("2,5", &v), ETACAL_NUM_BAD);
    assert_same_double(v, 2.385);
    /* the slow path (more than 19 digits) too */
    assert_int_equal(parse("944.70000000000000000000001", &v), ETACAL_NUM_VALUE);
    assert_same_double(v, 944.7);
    assert_int_equal(parse("1.7976931348623157e308", &v), ETACAL_NUM_VALUE);
    assert_same_double(v, DBL_MAX);
    char buf[ETACAL_NUM_BUFSZ];
    fmt(2.385, buf);
    assert_string_equal(buf, "2.385");
    fmt(-0.0625, buf);
    assert_string_equal(buf, "-0.0625");
    fmt(2.5e-10, buf);
    assert_string_equal(buf, "2.5e-10");
    tu_rng r = {UINT64_C(99)};
    for (int i = 0; i < 2000; i++) {
        double x = random_double(&r);
        size_t n = fmt(x, buf);
        assert_null(strchr(buf, ','));
        double back;
        assert_int_equal(etacal_num_parse(buf, n, &back), ETACAL_NUM_VALUE);
        assert_same_double(back, x);
    }
    setlocale(LC_NUMERIC, "C");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_parse_plain_values),
        cmocka_unit_test(test_parse_honours_length),
        cmocka_unit_test(test_parse_missing_tokens),
        cmocka_unit_test(test_bad_reasons),
        cmocka_unit_test(test_parse_thousands_of_digits),
        cmocka_unit_test(test_parse_rejects_malformed),
        cmocka_unit_test(test_parse_random_against_strtod),
        cmocka_unit_test(test_parse_long_mantissas),
        cmocka_unit_test(test_parse_very_long_mantissa),
        cmocka_unit_test(test_format_short_forms),
        cmocka_unit_test(test_format_round_trips),
        cmocka_unit_test(test_format_is_shortest),
        cmocka_unit_test(test_format_is_shortest_near_1e16),
        cmocka_unit_test(test_locale_independent),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
