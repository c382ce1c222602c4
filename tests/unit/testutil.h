/* SPDX-License-Identifier: GPL-3.0-or-later */
/* testutil.h: helpers shared by the cmocka unit tests: a scratch directory
 * made with mkdtemp and removed with everything in it, files with given
 * bytes in it, reading a file back, a relative-tolerance comparison of
 * doubles that treats NaN and infinities sensibly, checks of an etacal_error
 * (code, where, message), and a small seeded random generator so that
 * "random" tests are reproducible.
 *
 * Include after <cmocka.h> (and its prerequisites).  Every helper is static
 * inline so that a test file that does not use one gets no warning. */
#ifndef ETACAL_TESTUTIL_H
#define ETACAL_TESTUTIL_H

#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "etacal/error.h"
#include "etacal/table.h"

/* ---- scratch directory ------------------------------------------------- */

/* A directory of its own for one test, under $TMPDIR (or /tmp). */
typedef struct tu_dir {
    char path[512];
} tu_dir;

static inline void tu_dir_make(tu_dir *d)
{
    const char *base = getenv("TMPDIR");
    if (!base || !*base)
        base = "/tmp";
    snprintf(d->path, sizeof d->path, "%s/etacal-unit-XXXXXX", base);
    if (!mkdtemp(d->path))
        fail_msg("mkdtemp(%s): %s", d->path, strerror(errno));
}

/* Removes the directory and the plain files in it (the tests make no
 * subdirectories deeper than one level; those are emptied too). */
static inline void tu_rm_tree(const char *path)
{
    DIR *dp = opendir(path);
    if (!dp)
        return;
    struct dirent *de;
    while ((de = readdir(dp)) != NULL) {
        if (strcmp(de->d_name, ".") == 0 || strcmp(de->d_name, "..") == 0)
            continue;
        size_t size = strlen(path) + strlen(de->d_name) + 2;
        char *sub = malloc(size);
        if (!sub)
            break;
        snprintf(sub, size, "%s/%s", path, de->d_name);
        struct stat st;
        if (lstat(sub, &st) == 0 && S_ISDIR(st.st_mode)) {
            chmod(sub, 0700);
            tu_rm_tree(sub);
        } else {
            unlink(sub);
        }
        free(sub);
    }
    closedir(dp);
    rmdir(path);
}

static inline void tu_dir_remove(tu_dir *d)
{
    if (d->path[0])
        tu_rm_tree(d->path);
    d->path[0] = '\0';
}

/* Number of entries (other than . and ..) in a directory, or -1. */
static inline int tu_dir_count(const char *path)
{
    DIR *dp = opendir(path);
    if (!dp)
        return -1;
    int n = 0;
    struct dirent *de;
    while ((de = readdir(dp)) != NULL)
        if (strcmp(de->d_name, ".") != 0 && strcmp(de->d_name, "..") != 0)
            n++;
    closedir(dp);
    return n;
}

/* "dir/name" into a static-size buffer owned by the caller. */
static inline void tu_path(char *buf, size_t size, const tu_dir *d, const char *name)
{
    snprintf(buf, size, "%s/%s", d->path, name);
}

/* Writes len bytes to dir/name and returns its path in buf. */
static inline const char *tu_write_bytes(const tu_dir *d, const char *name, const void *bytes,
                                         size_t len, char *buf, size_t size)
{
    tu_path(buf, size, d, name);
    FILE *fp = fopen(buf, "wb");
    if (!fp)
        fail_msg("fopen(%s): %s", buf, strerror(errno));
    if (len && fwrite(bytes, 1, len, fp) != len)
        fail_msg("fwrite(%s) failed", buf);
    if (fclose(fp) != 0)
        fail_msg("fclose(%s) failed", buf);
    return buf;
}

/* The same for a NUL-terminated text. */
static inline const char *tu_write_text(const tu_dir *d, const char *name, const char *text,
                                        char *buf, size_t size)
{
    return tu_write_bytes(d, name, text, strlen(text), buf, size);
}

/* The whole file as a new NUL-terminated buffer (free it); *len gets its
 * length.  NULL when it cannot be read. */
static inline char *tu_read_file(const char *path, size_t *len)
{
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return NULL;
    size_t cap = 4096, n = 0;
    char *buf = malloc(cap);
    size_t got;
    while (buf && (got = fread(buf + n, 1, cap - n - 1, fp)) > 0) {
        n += got;
        if (cap - n - 1 == 0) {
            char *nb = realloc(buf, cap * 2);
            if (!nb) {
                free(buf);
                buf = NULL;
                break;
            }
            buf = nb;
            cap *= 2;
        }
    }
    fclose(fp);
    if (!buf)
        return NULL;
    buf[n] = '\0';
    if (len)
        *len = n;
    return buf;
}

/* ---- doubles ------------------------------------------------------------ */

/* 1 when a and b agree to relative tolerance rel: both NaN, the same
 * infinity, or |a - b| <= rel * max(|a|, |b|) (so 0 only matches 0). */
static inline int tu_close(double a, double b, double rel)
{
    if (isnan(a) || isnan(b))
        return isnan(a) && isnan(b);
    if (isinf(a) || isinf(b))
        return a == b;
    double scale = fabs(a) > fabs(b) ? fabs(a) : fabs(b);
    return fabs(a - b) <= rel * scale;
}

#define assert_close(a, b, rel)                                                                    \
    do {                                                                                           \
        double tu_a_ = (a), tu_b_ = (b);                                                           \
        if (!tu_close(tu_a_, tu_b_, (rel)))                                                        \
            fail_msg("%s = %.17g, expected %.17g (rel. tol. %g)", #a, tu_a_, tu_b_, (double)(rel)); \
    } while (0)

/* Exact equality of doubles, bit for bit (distinguishes -0 and 0, NaN
 * equals NaN). */
static inline int tu_same_bits(double a, double b)
{
    uint64_t x, y;
    memcpy(&x, &a, sizeof x);
    memcpy(&y, &b, sizeof y);
    return x == y || (isnan(a) && isnan(b));
}

#define assert_same_double(a, b)                                                                   \
    do {                                                                                           \
        double tu_a_ = (a), tu_b_ = (b);                                                           \
        if (!tu_same_bits(tu_a_, tu_b_))                                                           \
            fail_msg("%s = %.17g (%a), expected %.17g (%a)", #a, tu_a_, tu_a_, tu_b_, tu_b_);       \
    } while (0)

/* ---- errors ------------------------------------------------------------- */

/* Checks code, where and msg of an error record.  where and msg are exact
 * strings; pass NULL to skip one. */
#define assert_error(err, want_code, want_where, want_msg)                                         \
    do {                                                                                           \
        const etacal_error *tu_e_ = (err);                                                         \
        if (tu_e_->code != (want_code))                                                            \
            fail_msg("error code %d (%s: %s), expected %d", tu_e_->code, tu_e_->where,             \
                     tu_e_->msg, (int)(want_code));                                                \
        const char *tu_w_ = (want_where), *tu_m_ = (want_msg);                                     \
        if (tu_w_ && strcmp(tu_e_->where, tu_w_) != 0)                                             \
            fail_msg("error where '%s', expected '%s' (msg: %s)", tu_e_->where, tu_w_,             \
                     tu_e_->msg);                                                                  \
        if (tu_m_ && strcmp(tu_e_->msg, tu_m_) != 0)                                               \
            fail_msg("error msg '%s', expected '%s'", tu_e_->msg, tu_m_);                          \
    } while (0)

/* "path:line" into buf, for the where of an error. */
static inline const char *tu_where(char *buf, size_t size, const char *path, size_t line)
{
    snprintf(buf, size, "%s:%zu", path, line);
    return buf;
}

/* ---- random numbers ----------------------------------------------------- */

/* splitmix64 (Steele, Lea & Flood 2014): small, fast, seeded. */
typedef struct tu_rng {
    uint64_t s;
} tu_rng;

static inline uint64_t tu_next(tu_rng *r)
{
    uint64_t z = (r->s += UINT64_C(0x9e3779b97f4a7c15));
    z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
    return z ^ (z >> 31);
}

/* Uniform integer in [0, n), n > 0 (the slight modulo bias is harmless
 * here). */
static inline uint64_t tu_below(tu_rng *r, uint64_t n) { return tu_next(r) % n; }

/* Uniform double in [0, 1). */
static inline double tu_unif(tu_rng *r) { return (double)(tu_next(r) >> 11) * 0x1.0p-53; }

/* A key column's ids as uint32_t, whatever width the table stores them in
 * (a static buffer: valid until the next call). */
static inline const uint32_t *key_ids_of(const etacal_table *t, size_t col)
{
    static uint32_t buf[1 << 20];
    size_t n = etacal_table_rows(t);
    if (n > sizeof buf / sizeof *buf || !etacal_table_key_ids(t, col, NULL))
        return NULL;
    for (size_t i = 0; i < n; i++)
        buf[i] = etacal_table_key_id(t, col, i);
    return buf;
}

#endif
