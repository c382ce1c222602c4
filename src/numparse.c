/* SPDX-License-Identifier: GPL-3.0-or-later */
/* numparse.c: locale-free, correctly rounded decimal parsing and shortest
 * round-trip formatting.
 *
 * Most CSV numbers have few digits, and for those Clinger's fast path is
 * exact: a mantissa below 2^53 and a power of ten up to 1e22 are both exact
 * doubles, so one IEEE multiplication or division rounds correctly (Clinger,
 * "How to read floating point numbers accurately", PLDI 1990).  Anything
 * longer goes to strtod_l in the C locale, which glibc rounds correctly. */
#define _GNU_SOURCE
#include "base.h"

#include <locale.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <threads.h>

static const double pow10_exact[23] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                       1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                                       1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};

static locale_t c_locale;
static once_flag c_locale_once = ONCE_FLAG_INIT;

static void make_c_locale(void) { c_locale = newlocale(LC_ALL_MASK, "C", (locale_t)0); }

static int lower_eq(const char *s, size_t len, const char *word)
{
    size_t n = strlen(word);
    if (len != n)
        return 0;
    for (size_t i = 0; i < n; i++) {
        char c = s[i];
        if (c >= 'A' && c <= 'Z')
            c = (char)(c - 'A' + 'a');
        if (c != word[i])
            return 0;
    }
    return 1;
}

/* Significant digits kept when a long number is shortened for strtod_l.
 * A double, and a midpoint between two doubles, has at most 767
 * significant decimal digits, so a decimal's first 768 digits and whether
 * any later one is nonzero decide its correct rounding: two decimals that
 * agree there lie on the same side of every double and every midpoint. */
#define KEEP_DIGITS 780

/* s (trimmed, already checked to be a decimal number: sign, digits, one
 * point, exponent) through strtod_l in the C locale.  A long one is first
 * rewritten as [sign]0.DDD...[1]eN with its first KEEP_DIGITS significant
 * digits, a sticky 1 when a later digit is nonzero, and the exponent that
 * keeps its value: no allocation, whatever the length. */
static double slow_parse(const char *s, size_t len, int *ok)
{
    char buf[KEEP_DIGITS + 64];
    size_t w = 0;
    *ok = 0;
    if (len < KEEP_DIGITS) {
        memcpy(buf, s, len);
        w = len;
    } else {
        const char *p = s, *end = s + len;
        if (*p == '+' || *p == '-')
            buf[w++] = *p++;
        buf[w++] = '0';
        buf[w++] = '.';
        long long point = 0; /* the value is 0.DDD... x 10^point */
        size_t kept = 0;
        int nonzero = 0, sticky = 0, frac = 0;
        for (; p < end && *p != 'e' && *p != 'E'; p++) {
            if (*p == '.') {
                frac = 1;
                continue;
            }
            if (!nonzero && *p == '0') { /* a leading zero */
                point -= frac;
                continue;
            }
            nonzero = 1;
            point += !frac;
            if (kept < KEEP_DIGITS) {
                buf[w++] = *p;
                kept++;
            } else if (*p != '0') {
                sticky = 1;
            }
        }
        if (!nonzero)
            buf[w++] = '0';
        if (sticky)
            buf[w++] = '1';
        long long e = 0;
        int eneg = 0;
        if (p < end) { /* the exponent, saturated: beyond 1e9 it only overflows or underflows */
            p++;
            if (p < end && (*p == '+' || *p == '-'))
                eneg = *p++ == '-';
            for (; p < end; p++)
                if (e < 1000000000)
                    e = e * 10 + (*p - '0');
        }
        point += eneg ? -e : e;
        w += (size_t)snprintf(buf + w, sizeof buf - w, "e%lld", point);
    }
    buf[w] = '\0';
    call_once(&c_locale_once, make_c_locale);
    double v = 0;
    if (c_locale != (locale_t)0) {
        char *endp;
        v = strtod_l(buf, &endp, c_locale);
        *ok = (endp == buf + w);
    }
    return v;
}

int etacal_num_parse(const char *s, size_t len, double *out)
{
    /* The common case first: an optional minus, digits with at most one
     * point, nothing else, and a mantissa below 2^53 (exact, as below). */
    if (len && len <= 17) {
        const char *p = s, *e = s + len;
        int neg = *p == '-';
        p += neg;
        uint64_t m = 0;
        int nd = 0, frac = -1;
        for (; p < e; p++) {
            unsigned d = (unsigned)(unsigned char)*p - '0';
            if (d < 10) {
                m = m * 10 + d;
                nd++;
            } else if (*p == '.' && frac < 0) {
                frac = (int)(e - p - 1);
            } else {
                break;
            }
        }
        if (p == e && nd > 0 && m < (UINT64_C(1) << 53)) {
            double v = (double)m;
            if (frac > 0)
                v /= pow10_exact[frac];
            *out = neg ? -v : v;
            return ETACAL_NUM_VALUE;
        }
    }
    while (len > 0 && (*s == ' ' || *s == '\t')) {
        s++;
        len--;
    }
    while (len > 0 && (s[len - 1] == ' ' || s[len - 1] == '\t'))
        len--;
    if (len == 0 || (((unsigned char)*s | 0x20) == 'n' &&
                     (lower_eq(s, len, "na") || lower_eq(s, len, "nan") || lower_eq(s, len, "null")))) {
        *out = NAN;
        return ETACAL_NUM_MISSING;
    }
    const char *p = s, *end = s + len;
    int neg = 0;
    if (*p == '+' || *p == '-') {
        neg = (*p == '-');
        p++;
    }
    if (p < end && (*p | 0x20) == 'i' &&
        (lower_eq(p, (size_t)(end - p), "inf") || lower_eq(p, (size_t)(end - p), "infinity"))) {
        *out = neg ? -INFINITY : INFINITY;
        return ETACAL_NUM_VALUE;
    }
    uint64_t mant = 0;
    int ndig = 0;       /* significant digits kept in mant */
    int dropped = 0;    /* nonzero digits beyond 19 */
    int dexp = 0;       /* decimal exponent adjustment */
    int any = 0;
    while (p < end && *p >= '0' && *p <= '9') {
        any = 1;
        if (ndig < 19) {
            if (mant || *p != '0') {
                mant = mant * 10 + (uint64_t)(*p - '0');
                ndig += (mant != 0);
            }
        } else {
            dexp++;
            dropped = 1;
        }
        p++;
    }
    if (p < end && *p == '.') {
        p++;
        while (p < end && *p >= '0' && *p <= '9') {
            any = 1;
            if (ndig < 19) {
                if (mant || *p != '0') {
                    mant = mant * 10 + (uint64_t)(*p - '0');
                    ndig += (mant != 0);
                }
                dexp--;
            } else {
                dropped = 1;
            }
            p++;
        }
    }
    if (!any)
        return ETACAL_NUM_BAD;
    if (p < end && (*p == 'e' || *p == 'E')) {
        p++;
        int eneg = 0;
        if (p < end && (*p == '+' || *p == '-')) {
            eneg = (*p == '-');
            p++;
        }
        if (p == end || *p < '0' || *p > '9')
            return ETACAL_NUM_BAD;
        int e = 0;
        while (p < end && *p >= '0' && *p <= '9') {
            if (e < 100000)
                e = e * 10 + (*p - '0');
            p++;
        }
        dexp += eneg ? -e : e;
    }
    if (p != end)
        return ETACAL_NUM_BAD;
    double v;
    if (!dropped && mant < (UINT64_C(1) << 53) && dexp >= -22 && dexp <= 22) {
        v = (double)mant;
        v = dexp >= 0 ? v * pow10_exact[dexp] : v / pow10_exact[-dexp];
    } else if (mant == 0 && !dropped) {
        v = 0.0;
    } else {
        /* The literal is not zero here.  A value beyond the doubles
         * (1e400) or one that rounds to zero (1e-400) is refused rather
         * than stored as inf or 0: either would change the number. */
        int ok;
        v = slow_parse(s, len, &ok);
        if (!ok || isinf(v) || v == 0)
            return ETACAL_NUM_BAD;
        *out = v;
        return ETACAL_NUM_VALUE;
    }
    *out = neg ? -v : v;
    return ETACAL_NUM_VALUE;
}

const char *num_bad_reason(const char *s, size_t len)
{
    double v;
    while (len > 0 && (*s == ' ' || *s == '\t')) {
        s++;
        len--;
    }
    while (len > 0 && (s[len - 1] == ' ' || s[len - 1] == '\t'))
        len--;
    if (memchr(s, ',', len))
        return "a comma is neither a decimal point nor a thousands separator; write 1234.5";
    if (memchr(s, ' ', len) || memchr(s, '\'', len) || memchr(s, '_', len))
        return "no digit grouping inside a number; write 1234.5";
    size_t i = len && (*s == '+' || *s == '-');
    if (len >= i + 2 && s[i] == '0' && (s[i + 1] | 0x20) == 'x')
        return "hexadecimal numbers are not read";
    /* The grammar of a decimal number, then: what stopped it is the range. */
    size_t j = i, digs = 0;
    while (j < len && s[j] >= '0' && s[j] <= '9')
        j++, digs++;
    if (j < len && s[j] == '.')
        for (j++; j < len && s[j] >= '0' && s[j] <= '9'; j++)
            digs++;
    if (!digs)
        return NULL;
    if (j < len && (s[j] | 0x20) == 'e') {
        j++;
        if (j < len && (s[j] == '+' || s[j] == '-'))
            j++;
        size_t e0 = j;
        while (j < len && s[j] >= '0' && s[j] <= '9')
            j++;
        if (j == e0)
            return NULL;
    }
    if (j == len && etacal_num_parse(s, len, &v) == ETACAL_NUM_BAD)
        return "beyond the range of a double";
    return NULL;
}

size_t etacal_num_format(double x, char *buf)
{
    if (isnan(x))
        return (size_t)snprintf(buf, ETACAL_NUM_BUFSZ, "nan");
    if (isinf(x))
        return (size_t)snprintf(buf, ETACAL_NUM_BUFSZ, x > 0 ? "inf" : "-inf");
    if (x == 0)
        return (size_t)snprintf(buf, ETACAL_NUM_BUFSZ, signbit(x) ? "-0" : "0");
    int len = 0, prec;
    double back;
    for (prec = 1; prec <= 17; prec++) {
        len = snprintf(buf, ETACAL_NUM_BUFSZ, "%.*e", prec - 1, x);
        /* An embedder may have set a locale with a decimal comma. */
        for (int i = 0; i < len; i++)
            if (buf[i] == ',')
                buf[i] = '.';
        if (etacal_num_parse(buf, (size_t)len, &back) == ETACAL_NUM_VALUE && back == x)
            break;
    }
    /* buf is d[.ddd]e[+-]XX with the shortest digits; write it in positional
     * notation when the exponent is moderate, from those digits alone (so
     * 1.8e+03 becomes 1800 and no digit beyond the shortest form appears). */
    const char *e = strchr(buf, 'e');
    int e10 = e ? atoi(e + 1) : 0;
    if (e && e10 >= -5 && e10 < 17) {
        char digits[24];
        int nd = 0, neg = buf[0] == '-';
        for (const char *c = buf; c < e; c++)
            if (*c >= '0' && *c <= '9')
                digits[nd++] = *c;
        char out[ETACAL_NUM_BUFSZ];
        int w = 0;
        if (neg)
            out[w++] = '-';
        if (e10 < 0) {
            out[w++] = '0';
            out[w++] = '.';
            for (int i = 0; i < -e10 - 1; i++)
                out[w++] = '0';
            for (int i = 0; i < nd; i++)
                out[w++] = digits[i];
        } else {
            for (int i = 0; i <= e10; i++)
                out[w++] = i < nd ? digits[i] : '0';
            if (nd > e10 + 1) {
                out[w++] = '.';
                for (int i = e10 + 1; i < nd; i++)
                    out[w++] = digits[i];
            }
        }
        out[w] = '\0';
        memcpy(buf, out, (size_t)w + 1);
        len = w;
    }
    return (size_t)len;
}
