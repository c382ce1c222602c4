/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fuzz_time.c: libFuzzer target for the timestamp parser
 * (etacal_time_parse) and the number parser under it (etacal_num_parse).
 * Oracles: no crash or sanitizer report, only len bytes read (the input is
 * copied to a buffer of exactly that size, so ASan sees a read past it); a
 * number read agrees bit for bit with glibc's strtod_l in the C locale on
 * the same text; the shortest form written reads back exactly; a time
 * written back is a valid time. */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include "etacal/etacal.h"

#include "fuzz_common.h"

#include <locale.h>
#include <math.h>

static int fuzz_time_one(const uint8_t *data, size_t size)
{
    char *s = malloc(size ? size : 1);
    if (!s)
        return 0;
    if (size)
        memcpy(s, data, size);
    double v = 0;
    int k = etacal_num_parse(s, size, &v);
    FUZZ_CHECK(k == ETACAL_NUM_VALUE || k == ETACAL_NUM_MISSING || k == ETACAL_NUM_BAD);
    if (k == ETACAL_NUM_VALUE) {
        /* the oracle: strtod_l in the C locale on the trimmed text */
        size_t a = 0, b = size;
        while (a < b && (s[a] == ' ' || s[a] == '\t'))
            a++;
        while (b > a && (s[b - 1] == ' ' || s[b - 1] == '\t'))
            b--;
        char *z = malloc(b - a + 1);
        FUZZ_CHECK(z != NULL);
        memcpy(z, s + a, b - a);
        z[b - a] = '\0';
        static locale_t c_loc;
        if (!c_loc)
            c_loc = newlocale(LC_ALL_MASK, "C", (locale_t)0);
        char *end;
        double w = strtod_l(z, &end, c_loc);
        FUZZ_CHECK(*end == '\0');
        FUZZ_CHECK(memcmp(&v, &w, sizeof v) == 0 || (v == 0 && w == 0 && signbit(v) == signbit(w)));
        free(z);
        char buf[ETACAL_NUM_BUFSZ];
        size_t n = etacal_num_format(v, buf);
        FUZZ_CHECK(n < ETACAL_NUM_BUFSZ && n == strlen(buf));
        double back = 0;
        if (isfinite(v)) {
            FUZZ_CHECK(etacal_num_parse(buf, n, &back) == ETACAL_NUM_VALUE);
            FUZZ_CHECK(back == v && signbit(back) == signbit(v));
        }
    }
    double t = 0;
    k = etacal_time_parse(s, size, &t);
    FUZZ_CHECK(k == ETACAL_NUM_VALUE || k == ETACAL_NUM_MISSING || k == ETACAL_NUM_BAD);
    if (k == ETACAL_NUM_VALUE) {
        FUZZ_CHECK(isfinite(t));
        char buf[32];
        etacal_time_format(t, buf);
        double t2 = 0;
        FUZZ_CHECK(etacal_time_parse(buf, strlen(buf), &t2) == ETACAL_NUM_VALUE);
        /* whole seconds written: the same second */
        FUZZ_CHECK(t2 == floor(t));
    }
    free(s);
    return 0;
}

#ifndef ETACAL_FUZZ_REPLAY
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size) { return fuzz_time_one(data, size); }
#endif
