/* SPDX-License-Identifier: GPL-3.0-or-later */
/* timeparse.c: ISO 8601 date-times and Unix seconds to seconds since the
 * epoch.  Days from a civil date by the algorithm of Howard Hinnant
 * ("chrono-compatible low-level date algorithms", public domain), exact for
 * the proleptic Gregorian calendar; no libc time functions, so the process
 * time zone and locale never matter. */
#include "base.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

static long long days_from_civil(long long y, unsigned m, unsigned d)
{
    y -= m <= 2;
    long long era = (y >= 0 ? y : y - 399) / 400;
    unsigned yoe = (unsigned)(y - era * 400);
    unsigned doy = (153 * (m + (m > 2 ? (unsigned)-3 : 9)) + 2) / 5 + d - 1;
    unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    return era * 146097 + (long long)doe - 719468;
}

static int digits(const char *s, size_t n, const char *end, unsigned *out)
{
    if (s + n > end)
        return -1;
    unsigned v = 0;
    for (size_t i = 0; i < n; i++) {
        if (s[i] < '0' || s[i] > '9')
            return -1;
        v = v * 10 + (unsigned)(s[i] - '0');
    }
    *out = v;
    return 0;
}

int etacal_time_parse(const char *s, size_t len, double *out)
{
    while (len && (*s == ' ' || *s == '\t')) {
        s++;
        len--;
    }
    while (len && (s[len - 1] == ' ' || s[len - 1] == '\t'))
        len--;
    const char *end = s + len;
    /* a date has a '-' after four digits; anything else is Unix seconds */
    if (!(len >= 10 && s[4] == '-')) {
        double v;
        int k = etacal_num_parse(s, len, &v);
        /* Unix seconds of the years 0000-9999 only, like the dates below:
         * 1e300 "seconds" is no time, and would overflow a long long when
         * a time is written back (etacal_time_format). */
        if (k == ETACAL_NUM_VALUE && !(v >= -62167219200.0 && v < 253402300800.0))
            return ETACAL_NUM_BAD; /* also inf */
        if (k == ETACAL_NUM_VALUE)
            *out = v;
        return k;
    }
    unsigned Y, M, D, h = 0, mi = 0, sec = 0;
    if (digits(s, 4, end, &Y) || s[4] != '-' || digits(s + 5, 2, end, &M) || s[7] != '-' ||
        digits(s + 8, 2, end, &D))
        return ETACAL_NUM_BAD;
    const char *p = s + 10;
    double frac = 0;
    if (p < end && (*p == 'T' || *p == ' ')) {
        p++;
        if (digits(p, 2, end, &h) || p + 2 >= end || p[2] != ':' || digits(p + 3, 2, end, &mi))
            return ETACAL_NUM_BAD;
        p += 5;
        if (p < end && *p == ':') {
            if (digits(p + 1, 2, end, &sec))
                return ETACAL_NUM_BAD;
            p += 3;
            if (p < end && (*p == '.' || *p == ',')) {
                p++;
                double scale = 0.1;
                const char *q = p;
                while (p < end && *p >= '0' && *p <= '9') {
                    frac += (*p - '0') * scale;
                    scale /= 10;
                    p++;
                }
                if (p == q)
                    return ETACAL_NUM_BAD;
            }
        }
    }
    long long offset = 0;
    if (p < end) {
        if (*p == 'Z' && p + 1 == end) {
            p++;
        } else if (*p == '+' || *p == '-') {
            int neg = *p == '-';
            unsigned oh, om = 0;
            if (digits(p + 1, 2, end, &oh))
                return ETACAL_NUM_BAD;
            p += 3;
            if (p < end && *p == ':')
                p++;
            if (p < end) {
                if (digits(p, 2, end, &om))
                    return ETACAL_NUM_BAD;
                p += 2;
            }
            if (oh > 23 || om > 59)
                return ETACAL_NUM_BAD;
            offset = (neg ? -1 : 1) * (long long)(oh * 3600 + om * 60);
        } else {
            return ETACAL_NUM_BAD;
        }
    }
    if (p != end)
        return ETACAL_NUM_BAD;
    static const unsigned mdays[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
    int leap = (Y % 4 == 0 && Y % 100 != 0) || Y % 400 == 0;
    if (M < 1 || M > 12 || D < 1 || D > mdays[M - 1] + (M == 2 && leap) || h > 23 || mi > 59 || sec > 60)
        return ETACAL_NUM_BAD;
    long long t = days_from_civil(Y, M, D) * 86400 + h * 3600 + mi * 60 + sec - offset;
    *out = (double)t + frac;
    return ETACAL_NUM_VALUE;
}

void etacal_time_format(double t, char *buf)
{
    /* civil_from_days (Hinnant), the inverse of days_from_civil */
    /* clamped to the years 0000-9999 first: a double beyond long long
     * converts with undefined behaviour (C11 6.3.1.4) */
    if (!(t >= -62167219200.0))
        t = -62167219200.0;
    if (t > 253402300799.0)
        t = 253402300799.0;
    long long s = (long long)floor(t);
    long long z = (s >= 0 ? s : s - 86399) / 86400;
    long long secs = s - z * 86400;
    z += 719468;
    long long era = (z >= 0 ? z : z - 146096) / 146097;
    unsigned doe = (unsigned)(z - era * 146097);
    unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
    long long y = (long long)yoe + era * 400;
    unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    unsigned mp = (5 * doy + 2) / 153;
    unsigned d = doy - (153 * mp + 2) / 5 + 1;
    unsigned m = mp < 10 ? mp + 3 : mp - 9;
    y += m <= 2;
    int yy = y < -9999 ? -9999 : y > 9999 ? 9999 : (int)y;
    int hh = (int)(secs / 3600), mi = (int)(secs / 60 % 60), ss = (int)(secs % 60);
    snprintf(buf, 32, "%04d-%02u-%02uT%02d:%02d:%02dZ", yy, m % 100, d % 100, hh % 100, mi, ss);
}
