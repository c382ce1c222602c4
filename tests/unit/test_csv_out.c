/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_csv_out.c: csv_put_record and put_ms (src/csv_out.c), against the
 * contract in src/internal.h.
 *
 * csv_put_record writes a raw record without its line terminator and
 * returns that terminator ("\n" or "\r\n"; "\n" when there was none): every
 * byte before the terminator must come out unchanged, including quoted CRLFs,
 * a bare CR and NUL bytes.
 *
 * put_ms writes a whole number of milliseconds as seconds in its shortest
 * form and any other value exactly.  The expected texts are the shortest
 * round-trip decimal forms as Python prints them: the values noted "from
 * Python's repr" were printed once by Debian's /usr/bin/python3
 * (repr(float), which is the shortest string that reads back as the same
 * double), with Python's trailing ".0" of whole numbers left out, since
 * put_ms writes whole seconds without a fraction.  Each case also checks
 * that the text reads back (strtod) as the value, or, for values within the
 * documented 1e-9 s of a whole millisecond, as that millisecond. */
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

/* What csv_put_record(raw, len) writes, into out (NUL-terminated; *outlen
 * gets the byte count, which may include NULs), and what it returns. */
static const char *put_record(const char *raw, size_t len, char *out, size_t size, size_t *outlen)
{
    char *mem = NULL;
    size_t memlen = 0;
    FILE *fp = open_memstream(&mem, &memlen);
    assert_non_null(fp);
    const char *term = csv_put_record(fp, raw, len);
    assert_int_equal(fclose(fp), 0);
    assert_true(memlen < size);
    memcpy(out, mem, memlen);
    out[memlen] = '\0';
    *outlen = memlen;
    free(mem);
    return term;
}

/* put_ms(v) as a string (a static buffer: valid until the next call). */
static const char *ms_text(double v)
{
    static char out[128];
    char *mem = NULL;
    size_t memlen = 0;
    FILE *fp = open_memstream(&mem, &memlen);
    assert_non_null(fp);
    put_ms(fp, v);
    assert_int_equal(fclose(fp), 0);
    assert_true(memlen < sizeof out);
    memcpy(out, mem, memlen);
    out[memlen] = '\0';
    free(mem);
    return out;
}

/* put_ms(v) must write want, and want must read back as back (bit for bit). */
static void expect_ms(double v, const char *want, double back)
{
    const char *got = ms_text(v);
    if (strcmp(got, want) != 0)
        fail_msg("put_ms(%.17g) wrote '%s', expected '%s'", v, got, want);
    char *end = NULL;
    double r = strtod(got, &end);
    assert_true(*end == '\0');
    assert_same_double(r, back);
}

static void test_put_record_terminators(void **state)
{
    (void)state;
    char out[256];
    size_t n = 0;
    /* LF: written without it, "\n" returned. */
    assert_string_equal(put_record("a17,2.385,north\n", 16, out, sizeof out, &n), "\n");
    assert_int_equal(n, 15);
    assert_string_equal(out, "a17,2.385,north");
    /* CRLF: both bytes kept back, "\r\n" returned. */
    assert_string_equal(put_record("a17,2.385,north\r\n", 17, out, sizeof out, &n), "\r\n");
    assert_int_equal(n, 15);
    assert_string_equal(out, "a17,2.385,north");
    /* No terminator (the last record of a file): all bytes, "\n" returned. */
    assert_string_equal(put_record("a18,944.7,south", 15, out, sizeof out, &n), "\n");
    assert_int_equal(n, 15);
    assert_string_equal(out, "a18,944.7,south");
    /* A record that is only a terminator, and an empty one. */
    assert_string_equal(put_record("\r\n", 2, out, sizeof out, &n), "\r\n");
    assert_int_equal(n, 0);
    assert_string_equal(put_record("\n", 1, out, sizeof out, &n), "\n");
    assert_int_equal(n, 0);
    assert_string_equal(put_record("", 0, out, sizeof out, &n), "\n");
    assert_int_equal(n, 0);
    /* len counts, not a NUL: bytes after len are not written, and the
     * terminator is looked for at len, not at the end of the string. */
    assert_string_equal(put_record("x,1480.5\r\ntail", 10, out, sizeof out, &n), "\r\n");
    assert_string_equal(out, "x,1480.5");
    assert_string_equal(put_record("x,1480.5\r\ntail", 9, out, sizeof out, &n), "\n");
    assert_int_equal(n, 9);
    assert_string_equal(out, "x,1480.5\r");
}

static void test_put_record_inner_bytes_kept(void **state)
{
    (void)state;
    char out[256];
    size_t n = 0;
    /* Line ends inside quotes belong to the field (RFC 4180, sec. 2, rule
     * 6) and are copied as they are; only the final terminator goes. */
    const char quoted[] = "\"two\r\nlines\",\"say \"\"hi\"\"\",61.875\r\n";
    assert_string_equal(put_record(quoted, sizeof quoted - 1, out, sizeof out, &n), "\r\n");
    assert_int_equal(n, sizeof quoted - 3);
    assert_memory_equal(out, quoted, sizeof quoted - 3);
    /* A record ending in a bare CR (no LF) keeps it: only LF or CRLF is a
     * terminator. */
    assert_string_equal(put_record("a,b\r", 4, out, sizeof out, &n), "\n");
    assert_int_equal(n, 4);
    assert_string_equal(out, "a,b\r");
    /* CR CR LF: only the last CR belongs to the terminator. */
    assert_string_equal(put_record("a,b\r\r\n", 6, out, sizeof out, &n), "\r\n");
    assert_int_equal(n, 4);
    assert_string_equal(out, "a,b\r");
    /* NUL bytes are bytes like any other. */
    const char nul[] = "k\0z,7.125\n";
    assert_string_equal(put_record(nul, sizeof nul - 1, out, sizeof out, &n), "\n");
    assert_int_equal(n, sizeof nul - 2);
    assert_memory_equal(out, nul, sizeof nul - 2);
}

static void test_put_ms_whole_milliseconds(void **state)
{
    (void)state;
    /* The examples of internal.h. */
    expect_ms(1420, "1420", 1420);        /* from Python's repr: '1420.0' */
    expect_ms(1480.5, "1480.5", 1480.5);  /* from Python's repr: '1480.5' */
    /* One, two and three decimals; trailing zeros dropped. */
    expect_ms(2.385, "2.385", 2.385);     /* from Python's repr: '2.385' */
    expect_ms(61.87, "61.87", 61.87);     /* from Python's repr: '61.87' */
    expect_ms(944.7, "944.7", 944.7);     /* from Python's repr: '944.7' */
    expect_ms(0.001, "0.001", 0.001);     /* from Python's repr: '0.001' */
    expect_ms(0.05, "0.05", 0.05);        /* from Python's repr: '0.05' */
    expect_ms(0.1, "0.1", 0.1);           /* from Python's repr: '0.1' */
    expect_ms(3600.01, "3600.01", 3600.01); /* from Python's repr: '3600.01' */
    expect_ms(7.209, "7.209", 7.209);       /* from Python's repr: '7.209' */
    /* Zero: both signs print "0" (Python's repr of -0.0 is '-0.0'; a
     * duration has no sign of zero). */
    expect_ms(0.0, "0", 0.0);
    expect_ms(-0.0, "0", 0.0);
    /* Negative values. */
    expect_ms(-12.25, "-12.25", -12.25);  /* from Python's repr: '-12.25' */
    expect_ms(-0.005, "-0.005", -0.005);  /* from Python's repr: '-0.005' */
    expect_ms(-1420, "-1420", -1420);
    expect_ms(-8999999999.999, "-8999999999.999", -8999999999.999); /* from Python's repr */
    /* Large values: whole milliseconds up to 9e15 ms (below 2^53, where
     * every whole number of milliseconds is a double). */
    expect_ms(123456789.123, "123456789.123", 123456789.123); /* from Python's repr */
    expect_ms(4503599627370.497, "4503599627370.497", 4503599627370.497); /* from Python's repr */
    expect_ms(8999999999999.998, "8999999999999.998", 8999999999999.998); /* from Python's repr */
}

static void test_put_ms_decimal_noise(void **state)
{
    (void)state;
    /* Within 1e-9 s of a whole millisecond a value counts as that
     * millisecond (decimal noise of a sum): Python's repr of 0.1 + 0.2 is
     * '0.30000000000000004', put_ms writes the millisecond. */
    expect_ms(0.1 + 0.2, "0.3", 0.3);
    expect_ms(1480.5 + 4e-10, "1480.5", 1480.5);
    expect_ms(2.385 - 6e-10, "2.385", 2.385);
    /* Just outside that band the value is written exactly:
     * 2.385 + 5e-9 is '2.3850000049999998' from Python's repr. */
    expect_ms(2.385 + 5e-9, "2.3850000049999998", 2.385 + 5e-9);
}

static void test_put_ms_other_values_exact(void **state)
{
    (void)state;
    /* Not a whole number of milliseconds: shortest round-trip form. */
    expect_ms(2.3855, "2.3855", 2.3855);                         /* from Python's repr */
    expect_ms(1.0 / 3, "0.3333333333333333", 1.0 / 3);           /* from Python's repr */
    expect_ms(0.0005, "0.0005", 0.0005);                         /* from Python's repr */
    expect_ms(-1480.0625, "-1480.0625", -1480.0625);             /* from Python's repr */
    /* Positional notation, never an exponent: Python's repr '7.2e-05' has
     * the same digits. */
    expect_ms(7.2e-05, "0.000072", 7.2e-05);
    /* At and beyond 9e15 ms the exact form is used too; whole seconds
     * still print without a fraction or an exponent (Python's repr:
     * '9000000000000.0', '1e+16', '-2500000000000000.0'). */
    expect_ms(9e12, "9000000000000", 9e12);
    expect_ms(1e16, "10000000000000000", 1e16);
    expect_ms(-2.5e15, "-2500000000000000", -2.5e15);
    /* Not numbers. */
    assert_string_equal(ms_text(NAN), "nan");
    assert_string_equal(ms_text(INFINITY), "inf");
    assert_string_equal(ms_text(-INFINITY), "-inf");
}

/* Every whole number of milliseconds of a seeded sample, from 0 to about
 * 1e10 s, both signs: the text reads back as exactly the double nearest to
 * m / 1000 (what strtod makes of the decimal m/1000 written out), and has
 * no trailing zero after a decimal point. */
static void test_put_ms_random_whole(void **state)
{
    (void)state;
    tu_rng rng = {UINT64_C(0x2385)};
    for (int k = 0; k < 20000; k++) {
        long long m = (long long)tu_below(&rng, UINT64_C(10000000000000));
        if (k % 3 == 0)
            m %= 100000; /* small values too */
        if (k & 1)
            m = -m;
        char dec[64];
        long long a = m < 0 ? -m : m;
        snprintf(dec, sizeof dec, "%s%lld.%03lld", m < 0 ? "-" : "", a / 1000, a % 1000);
        double v = strtod(dec, NULL);
        const char *got = ms_text(v);
        assert_same_double(strtod(got, NULL), v == 0 ? 0.0 : v);
        const char *dot = strchr(got, '.');
        if (dot) {
            size_t len = strlen(got);
            assert_true(got[len - 1] != '0');
            assert_true(len - (size_t)(dot - got) - 1 <= 3);
        }
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_put_record_terminators),
        cmocka_unit_test(test_put_record_inner_bytes_kept),
        cmocka_unit_test(test_put_ms_whole_milliseconds),
        cmocka_unit_test(test_put_ms_decimal_noise),
        cmocka_unit_test(test_put_ms_other_values_exact),
        cmocka_unit_test(test_put_ms_random_whole),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
