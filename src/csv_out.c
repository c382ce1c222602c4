/* SPDX-License-Identifier: GPL-3.0-or-later */
/* csv_out.c: writing records copied through from the input, and numbers
 * of seconds to the millisecond, for the streaming commands (apply, qr
 * --predict). */
#include "base.h"

#include <math.h>
#include <string.h>

const char *csv_put_record(FILE *out, const char *raw, size_t len)
{
    const char *term = "\n";
    if (len && raw[len - 1] == '\n') {
        len--;
        if (len && raw[len - 1] == '\r') {
            len--;
            term = "\r\n";
        }
    }
    fwrite(raw, 1, len, out);
    return term;
}

/* Seconds with up to three decimals, trailing zeros dropped, for a value
 * that is a whole number of milliseconds (up to decimal noise); printf's
 * float formatting would cost more than the rest of a streaming pass.  Any
 * other value is written exactly, in its shortest form. */
void put_ms(FILE *out, double v)
{
    char buf[64];
    double ms = v * 1000, r = nearbyint(ms);
    if (!(fabs(ms - r) <= 1e-6 && fabs(r) < 9e15)) {
        etacal_num_format(v, buf);
        fputs(buf, out);
        return;
    }
    long long m = (long long)r;
    char *e = buf + sizeof buf, *p = e;
    int neg = m < 0;
    unsigned long long u = neg ? (unsigned long long)(-m) : (unsigned long long)m;
    unsigned frac = (unsigned)(u % 1000);
    u /= 1000;
    if (frac) {
        int digits = 3;
        while (frac % 10 == 0) {
            frac /= 10;
            digits--;
        }
        for (int i = 0; i < digits; i++) {
            *--p = (char)('0' + frac % 10);
            frac /= 10;
        }
        *--p = '.';
    }
    do {
        *--p = (char)('0' + u % 10);
        u /= 10;
    } while (u);
    if (neg)
        *--p = '-';
    fwrite(p, 1, (size_t)(e - p), out);
}
