/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_util.c: the small internal helpers (strdict, grow_array, rowbuf,
 * ceil_scaled, csv_put_field, ksum), etacal_percent_label and the error
 * record. */
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
#include "stream.h"
#include "testutil.h"

static void test_strdict_dense_ids(void **state)
{
    (void)state;
    strdict d;
    strdict_init(&d);
    uint32_t id = 99;
    /* An empty dictionary finds nothing. */
    assert_int_equal(strdict_find(&d, "north", 5, &id), 0);
    assert_int_equal(id, 99);
    assert_int_equal(strdict_intern(&d, "north", 5, &id), 0);
    assert_int_equal(id, 0);
    assert_int_equal(strdict_intern(&d, "south", 5, &id), 0);
    assert_int_equal(id, 1);
    assert_int_equal(strdict_intern(&d, "north", 5, &id), 0);
    assert_int_equal(id, 0);
    /* Lengths matter, not NUL terminators: a prefix is a new string, and
     * bytes after len are ignored. */
    assert_int_equal(strdict_intern(&d, "northeast", 5, &id), 0);
    assert_int_equal(id, 0);
    assert_int_equal(strdict_intern(&d, "nort", 4, &id), 0);
    assert_int_equal(id, 2);
    /* The empty string and a string with a NUL inside are values too. */
    assert_int_equal(strdict_intern(&d, "", 0, &id), 0);
    assert_int_equal(id, 3);
    assert_int_equal(strdict_intern(&d, "a\0b", 3, &id), 0);
    assert_int_equal(id, 4);
    assert_int_equal(strdict_intern(&d, "a\0c", 3, &id), 0);
    assert_int_equal(id, 5);
    assert_int_equal(d.count, 6);
    assert_string_equal(strdict_str(&d, 0), "north");
    assert_string_equal(strdict_str(&d, 2), "nort");
    assert_string_equal(strdict_str(&d, 3), "");
    assert_int_equal(strdict_len(&d, 4), 3);
    assert_memory_equal(strdict_str(&d, 4), "a\0b", 4); /* NUL-terminated as well */
    assert_int_equal(strdict_find(&d, "south", 5, &id), 1);
    assert_int_equal(id, 1);
    assert_int_equal(strdict_find(&d, "west", 4, &id), 0);
    assert_int_equal(strdict_find(&d, "a\0c", 3, &id), 1);
    assert_int_equal(id, 5);
    strdict_free(&d);
    assert_int_equal(d.count, 0);
    assert_null(d.arena);
    strdict_free(&d); /* twice is fine */
    strdict_free(NULL);
}

static void test_strdict_many_strings(void **state)
{
    (void)state;
    /* 50000 strings: many rehashes and arena moves; every id stays put and
     * every string stays findable. */
    strdict d;
    strdict_init(&d);
    char buf[64];
    const int n = 50000;
    for (int i = 0; i < n; i++) {
        int len = snprintf(buf, sizeof buf, "zone-%d-%x", i * 7, (unsigned)(i * 2654435761u));
        uint32_t id;
        assert_int_equal(strdict_intern(&d, buf, (size_t)len, &id), 0);
        if (id != (uint32_t)i)
            fail_msg("string %d got id %u", i, id);
    }
    assert_int_equal(d.count, (size_t)n);
    assert_true(d.nslots >= 2 * (size_t)n);
    assert_int_equal(d.nslots & (d.nslots - 1), 0); /* a power of two */
    for (int i = n; i-- > 0;) {
        int len = snprintf(buf, sizeof buf, "zone-%d-%x", i * 7, (unsigned)(i * 2654435761u));
        uint32_t id = 0;
        assert_int_equal(strdict_find(&d, buf, (size_t)len, &id), 1);
        assert_int_equal(id, (uint32_t)i);
        assert_string_equal(strdict_str(&d, id), buf);
        assert_int_equal(strdict_len(&d, id), (size_t)len);
        /* interning again adds nothing */
        assert_int_equal(strdict_intern(&d, buf, (size_t)len, &id), 0);
        assert_int_equal(id, (uint32_t)i);
    }
    assert_int_equal(d.count, (size_t)n);
    assert_int_equal(strdict_find(&d, "zone-7-0", 8, &(uint32_t){0}), 0);
    strdict_free(&d);
}

static void test_grow_array(void **state)
{
    (void)state;
    double *p = NULL;
    size_t cap = 0;
    assert_int_equal(grow_array((void **)&p, &cap, 1, sizeof *p), 0);
    assert_non_null(p);
    assert_int_equal(cap, 16); /* the first capacity */
    p[0] = 2.385;
    p[15] = 944.7;
    /* within capacity: nothing moves */
    double *before = p;
    assert_int_equal(grow_array((void **)&p, &cap, 16, sizeof *p), 0);
    assert_ptr_equal(p, before);
    assert_int_equal(cap, 16);
    assert_int_equal(grow_array((void **)&p, &cap, 0, sizeof *p), 0);
    assert_int_equal(cap, 16);
    /* doubling, contents kept */
    assert_int_equal(grow_array((void **)&p, &cap, 17, sizeof *p), 0);
    assert_int_equal(cap, 32);
    assert_same_double(p[0], 2.385);
    assert_same_double(p[15], 944.7);
    assert_int_equal(grow_array((void **)&p, &cap, 1000, sizeof *p), 0);
    assert_int_equal(cap, 1024);
    assert_same_double(p[15], 944.7);
    p[999] = -17.125;
    /* a size that cannot be represented: -1 and nothing changed */
    before = p;
    assert_int_equal(grow_array((void **)&p, &cap, SIZE_MAX / 4, sizeof *p), -1);
    assert_ptr_equal(p, before);
    assert_int_equal(cap, 1024);
    assert_same_double(p[999], -17.125);
    assert_int_equal(grow_array((void **)&p, &cap, SIZE_MAX, 1), -1);
    assert_int_equal(cap, 1024);
    free(p);
    /* a non-zero start capacity doubles from there */
    char *c = malloc(3);
    size_t ccap = 3;
    assert_non_null(c);
    memcpy(c, "ab", 3);
    assert_int_equal(grow_array((void **)&c, &ccap, 7, 1), 0);
    assert_int_equal(ccap, 12);
    assert_string_equal(c, "ab");
    free(c);
}

static void test_percent_label(void **state)
{
    (void)state;
    static const struct {
        double tau;
        const char *want;
    } cases[] = {
        {0.9, "90"},      {0.975, "97.5"},   {0.95, "95"},      {0.5, "50"},
        {0.99, "99"},     {0.999, "99.9"},   {0.9999, "99.99"}, {0.05, "5"},
        {0.001, "0.1"},   {0.0005, "0.05"},  {0.123, "12.3"},   {0.8125, "81.25"},
        {0.3, "30"},      {0.56, "56"},      {0.57, "57"},      {0.2385, "23.85"}, {1e-7, "0.00001"},
        {0.1 + 0.2, "30.000000000000004"}, /* the double 0.30000000000000004 */
    };
    char buf[ETACAL_NUM_BUFSZ];
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        memset(buf, 'Z', sizeof buf);
        etacal_percent_label(cases[i].tau, buf);
        if (strcmp(buf, cases[i].want) != 0)
            fail_msg("percent_label(%.17g) = '%s', expected '%s'", cases[i].tau, buf, cases[i].want);
    }
    /* A naive tau * 100 would not do: */
    char naive[64];
    snprintf(naive, sizeof naive, "%.17g", 0.57 * 100);
    assert_string_not_equal(naive, "57");
}

/* A 16-digit target: its shortest form is 0.9801341105616702 (the C
 * library's %.16g reads back), so the label is 98.01341105616702. */
static void test_percent_label_sixteen_digits(void **state)
{
    (void)state;
    double tau = strtod("0.9801341105616702", NULL);
    char b[32];
    snprintf(b, sizeof b, "%.16g", tau);
    assert_true(strtod(b, NULL) == tau);
    char buf[ETACAL_NUM_BUFSZ];
    etacal_percent_label(tau, buf);
    if (strcmp(buf, "98.01341105616702") != 0)
        fail_msg("percent_label(0.9801341105616702) = '%s', expected '98.01341105616702'", buf);
}

static void test_ceil_scaled(void **state)
{
    (void)state;
    assert_close(ceil_scaled(86.19999999999999, 1e3), 86.2, 1e-15); /* 386.2 - 300 */
    assert_close(ceil_scaled(101.3755, 1e3), 101.376, 1e-15);
    assert_close(ceil_scaled(101.3751, 1e3), 101.376, 1e-15);
    assert_close(ceil_scaled(-5.5004, 1e3), -5.5, 1e-15);
    assert_close(ceil_scaled(1.234567875, 1e6), 1.234568, 1e-15);
    assert_close(ceil_scaled(1053.0 / 900.0, 1e6), 1.17, 1e-15);
    assert_close(ceil_scaled(1800, 1e3), 1800, 0);
    assert_close(ceil_scaled(0, 1e3), 0, 0);
    /* the result is the double nearest the decimal: it prints short */
    char buf[ETACAL_NUM_BUFSZ];
    etacal_num_format(ceil_scaled(314.51000000000005, 1e3), buf);
    assert_string_equal(buf, "314.51");
    etacal_num_format(ceil_scaled(2.98125, 1e3), buf);
    assert_string_equal(buf, "2.982");
    /* a real excess of more than the noise allowance rounds up */
    assert_close(ceil_scaled(314.510001, 1e3), 314.511, 1e-15);
}

static char *put_field(const char *s, size_t len, char delim)
{
    char *buf = NULL;
    size_t n = 0;
    FILE *fp = open_memstream(&buf, &n);
    assert_non_null(fp);
    csv_put_field(fp, s, len, delim);
    fclose(fp);
    return buf;
}

static void test_csv_put_field(void **state)
{
    (void)state;
    static const struct {
        const char *in;
        char delim;
        const char *want;
    } cases[] = {
        {"north", ',', "north"},
        {"", ',', ""},
        {"Old Town, North", ',', "\"Old Town, North\""},
        {"Old Town, North", ';', "Old Town, North"},
        {"a;b", ';', "\"a;b\""},
        {"say \"hi\"", ',', "\"say \"\"hi\"\"\""},
        {"two\nlines", ',', "\"two\nlines\""},
        {"cr\rhere", ',', "\"cr\rhere\""},
        {" padded", ',', "\" padded\""},
        {"padded ", ',', "\"padded \""},
        {"in side", ',', "in side"},
        {"*", ',', "*"},
        {"a\tb", '\t', "\"a\tb\""},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        char *got = put_field(cases[i].in, strlen(cases[i].in), cases[i].delim);
        if (strcmp(got, cases[i].want) != 0)
            fail_msg("csv_put_field('%s') = '%s', expected '%s'", cases[i].in, got, cases[i].want);
        free(got);
    }
    /* only len bytes */
    char *got = put_field("north,south", 5, ',');
    assert_string_equal(got, "north");
    free(got);
}

static void test_rowbuf(void **state)
{
    (void)state;
    rowbuf r;
    memset(&r, 0, sizeof r);
    rowbuf_add(&r, "north", 5);
    rowbuf_add(&r, "", 0);
    rowbuf_add(&r, "1800.5xyz", 6);
    assert_int_equal(r.nf, 3);
    assert_false(r.oom);
    assert_string_equal(rowbuf_get(&r, 0), "north");
    assert_string_equal(rowbuf_get(&r, 1), "");
    assert_string_equal(rowbuf_get(&r, 2), "1800.5");
    assert_int_equal(rowbuf_len(&r, 2), 6);
    rowbuf_reset(&r);
    assert_int_equal(r.nf, 0);
    /* many fields, long ones: the buffers grow, offsets stay right */
    char field[300];
    for (int i = 0; i < 500; i++) {
        int len = snprintf(field, sizeof field, "%0*d", 1 + (i % 250), i);
        rowbuf_add(&r, field, (size_t)len);
    }
    assert_int_equal(r.nf, 500);
    for (int i = 0; i < 500; i++) {
        int len = snprintf(field, sizeof field, "%0*d", 1 + (i % 250), i);
        assert_int_equal(rowbuf_len(&r, (size_t)i), (size_t)len);
        assert_string_equal(rowbuf_get(&r, (size_t)i), field);
    }
    rowbuf_free(&r);
    assert_null(r.buf);
    assert_int_equal(r.nf, 0);
}

static void test_ksum(void **state)
{
    (void)state;
    /* 1e16 + 2.385 - 1e16: a plain sum loses the 2.385 to rounding. */
    ksum k = {0, 0};
    ksum_add(&k, 1e16);
    ksum_add(&k, 2.385);
    ksum_add(&k, -1e16);
    assert_close(ksum_value(&k), 2.385, 1e-15);
    volatile double plain = 1e16;
    plain += 2.385;
    plain -= 1e16;
    assert_false(tu_close(plain, 2.385, 1e-6));
    /* 0.1 a million times: 100000 to a few ulps, where the plain sum is off
     * by more than 1e-6. */
    ksum s = {0, 0};
    double p = 0;
    for (int i = 0; i < 1000000; i++) {
        ksum_add(&s, 0.1);
        p += 0.1;
    }
    assert_close(ksum_value(&s), 100000.0, 1e-15);
    assert_false(tu_close(p, 100000.0, 1e-11));
}

static void test_error_record(void **state)
{
    (void)state;
    etacal_error e;
    assert_int_equal(etacal_error_set(&e, ETACAL_EPARSE, "in.csv:17", "column '%s' is not numeric: '%s'",
                                      "actual_s", "12abc"),
                     ETACAL_EPARSE);
    assert_error(&e, ETACAL_EPARSE, "in.csv:17", "column 'actual_s' is not numeric: '12abc'");
    assert_int_equal(etacal_error_set(&e, ETACAL_EINVAL, NULL, "tau must be in (0,1), got %g", 1.5),
                     ETACAL_EINVAL);
    assert_error(&e, ETACAL_EINVAL, "", "tau must be in (0,1), got 1.5");
    /* NULL record: only the code comes back. */
    assert_int_equal(etacal_error_set(NULL, ETACAL_ENUM, "x", "y"), ETACAL_ENUM);
    /* Long texts are cut, not overrun. */
    char longw[400];
    memset(longw, 'w', sizeof longw - 1);
    longw[sizeof longw - 1] = '\0';
    etacal_error_set(&e, ETACAL_EIO, longw, "%s", longw);
    assert_int_equal(strlen(e.where), sizeof e.where - 1);
    assert_int_equal(strlen(e.msg), sizeof e.msg - 1);
    etacal_error_clear(&e);
    assert_error(&e, ETACAL_OK, "", "");
    etacal_error_clear(NULL);
    assert_string_equal(etacal_strerror(ETACAL_OK), "success");
    assert_string_equal(etacal_strerror(ETACAL_EINVAL), "invalid argument");
    assert_string_equal(etacal_strerror(ETACAL_ENOMEM), "out of memory");
    assert_string_equal(etacal_strerror(ETACAL_EIO), "input/output error");
    assert_string_equal(etacal_strerror(ETACAL_EPARSE), "malformed input");
    assert_string_equal(etacal_strerror(ETACAL_ENUM), "numerical problem");
    assert_string_equal(etacal_strerror(42), "unknown error");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_strdict_dense_ids),
        cmocka_unit_test(test_strdict_many_strings),
        cmocka_unit_test(test_grow_array),
        cmocka_unit_test(test_percent_label),
        cmocka_unit_test(test_percent_label_sixteen_digits),
        cmocka_unit_test(test_ceil_scaled),
        cmocka_unit_test(test_csv_put_field),
        cmocka_unit_test(test_rowbuf),
        cmocka_unit_test(test_ksum),
        cmocka_unit_test(test_error_record),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
