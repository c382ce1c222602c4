/* SPDX-License-Identifier: GPL-3.0-or-later */
/* util.c: growing arrays, the string dictionary behind key columns, and
 * exact rank arithmetic on decimal levels. */
#include "base.h"

#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

int grow_array(void **p, size_t *cap, size_t need, size_t elem)
{
    if (need <= *cap)
        return 0;
    size_t ncap = *cap ? *cap : 16;
    while (ncap < need) {
        if (ncap > SIZE_MAX / 2 / elem)
            return -1;
        ncap *= 2;
    }
    void *q = realloc(*p, ncap * elem);
    if (!q)
        return -1;
    *p = q;
    *cap = ncap;
    return 0;
}

/* Key texts are short.  Keys of 8 bytes or more are read as (possibly
 * overlapping) 8-byte words, never outside [s, s+len); shorter ones byte
 * by byte. */
static inline uint64_t load8(const char *s)
{
    uint64_t w;
    memcpy(&w, s, 8);
    return w;
}

static uint64_t hash_bytes(const char *s, size_t len)
{
    uint64_t h = UINT64_C(1469598103934665603) ^ len;
    if (len < 8) {
        for (size_t i = 0; i < len; i++) {
            h ^= (unsigned char)s[i];
            h *= UINT64_C(1099511628211);
        }
    } else {
        size_t i = 0;
        for (; i + 8 < len; i += 8)
            h = (h ^ load8(s + i)) * UINT64_C(0xff51afd7ed558ccd);
        h = (h ^ load8(s + len - 8)) * UINT64_C(0xc4ceb9fe1a85ec53);
    }
    return h ^ (h >> 29);
}

static int same_bytes(const char *a, const char *b, size_t len)
{
    if (len < 8) {
        for (size_t i = 0; i < len; i++)
            if (a[i] != b[i])
                return 0;
        return 1;
    }
    for (size_t i = 0; i + 8 < len; i += 8)
        if (load8(a + i) != load8(b + i))
            return 0;
    return load8(a + len - 8) == load8(b + len - 8);
}

void strdict_init(strdict *d) { memset(d, 0, sizeof *d); }

void strdict_free(strdict *d)
{
    if (!d)
        return;
    free(d->arena);
    free(d->offs);
    free(d->lens);
    free(d->slots);
    memset(d, 0, sizeof *d);
}

static int lookup_slot(const strdict *d, const char *s, size_t len, size_t *slot)
{
    size_t mask = d->nslots - 1;
    size_t i = (size_t)hash_bytes(s, len) & mask;
    for (;;) {
        uint32_t v = d->slots[i];
        if (v == 0) {
            *slot = i;
            return 0;
        }
        uint32_t id = v - 1;
        if (d->lens[id] == len && same_bytes(d->arena + d->offs[id], s, len)) {
            *slot = i;
            return 1;
        }
        i = (i + 1) & mask;
    }
}

static int rehash(strdict *d, size_t nslots)
{
    uint32_t *ns = calloc(nslots, sizeof *ns);
    if (!ns)
        return -1;
    free(d->slots);
    d->slots = ns;
    d->nslots = nslots;
    for (size_t id = 0; id < d->count; id++) {
        size_t slot;
        lookup_slot(d, d->arena + d->offs[id], d->lens[id], &slot);
        d->slots[slot] = (uint32_t)id + 1;
    }
    return 0;
}

int strdict_find(const strdict *d, const char *s, size_t len, uint32_t *id)
{
    if (d->nslots == 0)
        return 0;
    size_t slot;
    if (!lookup_slot(d, s, len, &slot))
        return 0;
    *id = d->slots[slot] - 1;
    return 1;
}

int strdict_intern(strdict *d, const char *s, size_t len, uint32_t *id)
{
    if (d->nslots == 0 && rehash(d, 64) != 0)
        return -1;
    size_t slot;
    if (lookup_slot(d, s, len, &slot)) {
        *id = d->slots[slot] - 1;
        return 0;
    }
    if (d->count >= UINT32_MAX - 1 || len > UINT32_MAX)
        return -1;
    size_t cap = d->offs_cap;
    if (grow_array((void **)&d->offs, &cap, d->count + 1, sizeof *d->offs) != 0)
        return -1;
    cap = d->offs_cap;
    if (grow_array((void **)&d->lens, &cap, d->count + 1, sizeof *d->lens) != 0)
        return -1;
    d->offs_cap = cap;
    if (grow_array((void **)&d->arena, &d->arena_cap, d->arena_len + len + 1, 1) != 0)
        return -1;
    memcpy(d->arena + d->arena_len, s, len);
    d->arena[d->arena_len + len] = '\0';
    d->offs[d->count] = d->arena_len;
    d->lens[d->count] = (uint32_t)len;
    d->arena_len += len + 1;
    d->slots[slot] = (uint32_t)d->count + 1;
    *id = (uint32_t)d->count;
    d->count++;
    if (d->count * 2 > d->nslots && rehash(d, d->nslots * 2) != 0)
        return -1;
    return 0;
}

/* Splits tau's shortest decimal form into digits and a power of ten:
 * tau = num / 10^den_exp. */
static int decimal_parts(double tau, uint64_t *num, int *den_exp)
{
    char ebuf[64];
    /* The shortest scientific form that reads back as tau. */
    for (int prec = 0; prec <= 16; prec++) {
        snprintf(ebuf, sizeof ebuf, "%.*e", prec, tau);
        double back;
        for (char *c = ebuf; *c; c++)
            if (*c == ',')
                *c = '.';
        if (etacal_num_parse(ebuf, strlen(ebuf), &back) == ETACAL_NUM_VALUE && back == tau)
            break;
    }
    uint64_t m = 0;
    int digits_after_point = 0, seen_point = 0;
    const char *c = ebuf;
    for (; *c && *c != 'e'; c++) {
        if (*c == '.') {
            seen_point = 1;
            continue;
        }
        if (*c < '0' || *c > '9')
            return -1;
        m = m * 10 + (uint64_t)(*c - '0');
        digits_after_point += seen_point;
    }
    if (*c != 'e')
        return -1;
    int e = atoi(c + 1);
    /* tau = m * 10^(e - digits_after_point) */
    int de = digits_after_point - e;
    while (de < 0) {
        if (m > UINT64_MAX / 10)
            return -1;
        m *= 10;
        de++;
    }
    while (de > 0 && m % 10 == 0) {
        m /= 10;
        de--;
    }
    if (de > 19)
        return -1;
    *num = m;
    *den_exp = de;
    return 0;
}

int exact_ceil_mul(uint64_t m, double tau, uint64_t *out)
{
    uint64_t num;
    int de;
    if (!(tau >= 0) || !isfinite(tau) || decimal_parts(tau, &num, &de) != 0) {
        long double v = (long double)m * (long double)tau;
        *out = (uint64_t)ceill(v - 4 * (long double)DBL_EPSILON * v);
        return -1;
    }
    __extension__ typedef unsigned __int128 u128;
    u128 den = 1;
    for (int i = 0; i < de; i++)
        den *= 10;
    u128 prod = (u128)m * num;
    u128 q = prod / den + (prod % den != 0);
    *out = q > UINT64_MAX ? UINT64_MAX : (uint64_t)q;
    return 0;
}

void etacal_percent_label(double tau, char *buf)
{
    uint64_t num;
    int de;
    if (decimal_parts(tau, &num, &de) != 0) {
        etacal_num_format(tau * 100, buf);
        return;
    }
    /* tau*100 = num / 10^(de-2) */
    char digits[32];
    snprintf(digits, sizeof digits, "%llu", (unsigned long long)num);
    int shift = de - 2;
    size_t nd = strlen(digits);
    if (shift <= 0) {
        size_t w = 0;
        for (size_t i = 0; i < nd; i++)
            buf[w++] = digits[i];
        for (int i = 0; i < -shift; i++)
            buf[w++] = '0';
        buf[w] = '\0';
        return;
    }
    size_t sh = (size_t)shift;
    size_t w = 0;
    if (nd <= sh) {
        buf[w++] = '0';
        buf[w++] = '.';
        for (size_t i = nd; i < sh; i++)
            buf[w++] = '0';
        for (size_t i = 0; i < nd; i++)
            buf[w++] = digits[i];
    } else {
        for (size_t i = 0; i < nd - sh; i++)
            buf[w++] = digits[i];
        buf[w++] = '.';
        for (size_t i = nd - sh; i < nd; i++)
            buf[w++] = digits[i];
    }
    buf[w] = '\0';
}

int utf8_valid(const char *str, size_t len)
{
    /* The well-formed byte sequences of Unicode 15, table 3-7: no overlong
     * forms, no surrogates (ED A0..BF), nothing above U+10FFFF. */
    const unsigned char *s = (const unsigned char *)str, *e = s + len;
    while (s < e) {
        unsigned c = *s;
        if (c < 0x80) {
            s++;
            continue;
        }
        size_t n;
        unsigned lo = 0x80, hi = 0xBF;
        if (c >= 0xC2 && c <= 0xDF)
            n = 1;
        else if (c >= 0xE0 && c <= 0xEF) {
            n = 2;
            if (c == 0xE0)
                lo = 0xA0;
            else if (c == 0xED)
                hi = 0x9F;
        } else if (c >= 0xF0 && c <= 0xF4) {
            n = 3;
            if (c == 0xF0)
                lo = 0x90;
            else if (c == 0xF4)
                hi = 0x8F;
        } else
            return 0;
        if ((size_t)(e - s) <= n)
            return 0;
        if (s[1] < lo || s[1] > hi)
            return 0;
        for (size_t i = 2; i <= n; i++)
            if (s[i] < 0x80 || s[i] > 0xBF)
                return 0;
        s += n + 1;
    }
    return 1;
}
