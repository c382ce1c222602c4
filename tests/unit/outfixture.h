/* SPDX-License-Identifier: GPL-3.0-or-later */
/* outfixture.h: what the tests of the result writers (test_out_*.c) share: a
 * sink into a growing buffer, sinks that refuse bytes, seeded delivery rows
 * as a CSV file, and the Wilson score interval in closed form as the
 * outside check of the intervals the writers print.
 *
 * Include after testutil.h. */
#ifndef ETACAL_OUTFIXTURE_H
#define ETACAL_OUTFIXTURE_H

#include "etacal/etacal.h"

/* ---- sinks --------------------------------------------------------------- */

typedef struct ot_buf {
    char *data; /* NUL-terminated */
    size_t len, cap;
} ot_buf;

static inline int ot_buf_write(void *ud, const char *buf, size_t len)
{
    ot_buf *b = ud;
    if (b->len + len + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 256;
        while (cap < b->len + len + 1)
            cap *= 2;
        char *d = realloc(b->data, cap);
        if (!d)
            return -1;
        b->data = d;
        b->cap = cap;
    }
    memcpy(b->data + b->len, buf, len);
    b->len += len;
    b->data[b->len] = '\0';
    return 0;
}

static inline etacal_sink ot_buf_sink(ot_buf *b)
{
    etacal_sink s = {ot_buf_write, b};
    return s;
}

static inline void ot_buf_free(ot_buf *b)
{
    free(b->data);
    memset(b, 0, sizeof *b);
}

/* A sink that takes `left` bytes and then refuses everything. */
typedef struct ot_stop {
    size_t left, got;
} ot_stop;

static inline int ot_stop_write(void *ud, const char *buf, size_t len)
{
    (void)buf;
    ot_stop *s = ud;
    if (len > s->left) {
        s->left = 0;
        return -1;
    }
    s->left -= len;
    s->got += len;
    return 0;
}

static inline etacal_sink ot_stop_sink(ot_stop *s)
{
    etacal_sink k = {ot_stop_write, s};
    return k;
}

/* The line of text that starts with prefix (at a line start), or NULL. */
static inline const char *ot_line(const char *text, const char *prefix)
{
    size_t n = strlen(prefix);
    for (const char *p = text; p && *p; p = strchr(p, '\n') ? strchr(p, '\n') + 1 : NULL)
        if (strncmp(p, prefix, n) == 0)
            return p;
    return NULL;
}

/* Lines in text. */
static inline size_t ot_lines(const char *text)
{
    size_t n = 0;
    for (; *text; text++)
        n += *text == '\n';
    return n;
}

/* ---- data ---------------------------------------------------------------- */

/* n seeded delivery rows: actual_s, pred_s, zone (harbour and old town
 * many, "kiln row" about 3%: a thin segment), dist_km, placed (Unix s),
 * written to rows.csv in d; path gets the file's path. */
static inline void ot_rows(const tu_dir *d, size_t n, uint64_t seed, char *path, size_t size)
{
    tu_rng g = {seed};
    tu_path(path, size, d, "rows.csv");
    FILE *fp = fopen(path, "wb");
    assert_non_null(fp);
    fprintf(fp, "actual_s,pred_s,zone,dist_km,placed\n");
    for (size_t i = 0; i < n; i++) {
        double u = tu_unif(&g);
        const char *zone = u < 0.03 ? "kiln row" : u < 0.55 ? "harbour" : "old town";
        double dist = 0.5 + 6.75 * tu_unif(&g);
        double pred = 430 + 140 * dist + 55 * tu_unif(&g);
        double actual = pred + 380 * (tu_unif(&g) - 0.4) * (1 + dist / 5);
        if (actual < 0)
            actual = 21.5;
        fprintf(fp, "%.6f,%.6f,%s,%.4f,%.0f\n", actual, pred, zone, dist, 1767225600 + 41.0 * (double)i);
    }
    assert_int_equal(fclose(fp), 0);
}

/* ---- the outside check ------------------------------------------------- */

/* The Wilson score interval of x successes in n trials at 95% (Wilson
 * 1927, JASA 22:209-212; the formula as in Agresti & Coull 1998, eq. 2):
 * (p + z^2/2n -+ z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n), z the 0.975
 * quantile of the standard normal, 1.959963984540054 (handbook value). */
static inline void ot_wilson95(size_t x, size_t n, double *lo, double *hi)
{
    const double z = 1.959963984540054;
    double p = (double)x / (double)n, nn = (double)n, z2 = z * z;
    double c = (p + z2 / (2 * nn)) / (1 + z2 / nn);
    double h = z * sqrt(p * (1 - p) / nn + z2 / (4 * nn * nn)) / (1 + z2 / nn);
    *lo = c - h;
    *hi = c + h;
}

#endif
