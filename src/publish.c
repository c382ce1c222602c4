/* SPDX-License-Identifier: GPL-3.0-or-later */
/* publish.c: SHA-256, the reference order, the comparison of two quote
 * tables, the publisher's lock and the copy of the previous table. */
#define _GNU_SOURCE
#include "base.h"
#include "results.h"
#include "quote_internal.h"

#include "etacal/conformal.h"
#include "etacal/io.h"
#include "etacal/publish.h"

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <dirent.h>
#include <sys/file.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

/* ---- SHA-256, FIPS 180-4 section 6.2 ------------------------------------ */

static const uint32_t sha_k[64] = {
    0x428a2f98, 0x71374491, 0xb5c0fbcf, 0xe9b5dba5, 0x3956c25b, 0x59f111f1, 0x923f82a4, 0xab1c5ed5,
    0xd807aa98, 0x12835b01, 0x243185be, 0x550c7dc3, 0x72be5d74, 0x80deb1fe, 0x9bdc06a7, 0xc19bf174,
    0xe49b69c1, 0xefbe4786, 0x0fc19dc6, 0x240ca1cc, 0x2de92c6f, 0x4a7484aa, 0x5cb0a9dc, 0x76f988da,
    0x983e5152, 0xa831c66d, 0xb00327c8, 0xbf597fc7, 0xc6e00bf3, 0xd5a79147, 0x06ca6351, 0x14292967,
    0x27b70a85, 0x2e1b2138, 0x4d2c6dfc, 0x53380d13, 0x650a7354, 0x766a0abb, 0x81c2c92e, 0x92722c85,
    0xa2bfe8a1, 0xa81a664b, 0xc24b8b70, 0xc76c51a3, 0xd192e819, 0xd6990624, 0xf40e3585, 0x106aa070,
    0x19a4c116, 0x1e376c08, 0x2748774c, 0x34b0bcb5, 0x391c0cb3, 0x4ed8aa4a, 0x5b9cca4f, 0x682e6ff3,
    0x748f82ee, 0x78a5636f, 0x84c87814, 0x8cc70208, 0x90befffa, 0xa4506ceb, 0xbef9a3f7, 0xc67178f2};

static uint32_t ror(uint32_t x, int n) { return (x >> n) | (x << (32 - n)); }

static void sha_block(uint32_t h[8], const unsigned char *p)
{
    uint32_t w[64];
    for (int t = 0; t < 16; t++)
        w[t] = (uint32_t)p[4 * t] << 24 | (uint32_t)p[4 * t + 1] << 16 | (uint32_t)p[4 * t + 2] << 8 |
               (uint32_t)p[4 * t + 3];
    for (int t = 16; t < 64; t++) {
        uint32_t s0 = ror(w[t - 15], 7) ^ ror(w[t - 15], 18) ^ (w[t - 15] >> 3);
        uint32_t s1 = ror(w[t - 2], 17) ^ ror(w[t - 2], 19) ^ (w[t - 2] >> 10);
        w[t] = w[t - 16] + s0 + w[t - 7] + s1;
    }
    uint32_t a = h[0], b = h[1], c = h[2], d = h[3], e = h[4], f = h[5], g = h[6], hh = h[7];
    for (int t = 0; t < 64; t++) {
        uint32_t t1 = hh + (ror(e, 6) ^ ror(e, 11) ^ ror(e, 25)) + ((e & f) ^ (~e & g)) + sha_k[t] + w[t];
        uint32_t t2 = (ror(a, 2) ^ ror(a, 13) ^ ror(a, 22)) + ((a & b) ^ (a & c) ^ (b & c));
        hh = g;
        g = f;
        f = e;
        e = d + t1;
        d = c;
        c = b;
        b = a;
        a = t1 + t2;
    }
    h[0] += a;
    h[1] += b;
    h[2] += c;
    h[3] += d;
    h[4] += e;
    h[5] += f;
    h[6] += g;
    h[7] += hh;
}

void etacal_sha256_init(etacal_sha256 *s)
{
    static const uint32_t h0[8] = {0x6a09e667, 0xbb67ae85, 0x3c6ef372, 0xa54ff53a,
                                   0x510e527f, 0x9b05688c, 0x1f83d9ab, 0x5be0cd19};
    memcpy(s->h, h0, sizeof h0);
    s->len = 0;
    s->nbuf = 0;
}

void etacal_sha256_update(etacal_sha256 *s, const void *data, size_t n)
{
    const unsigned char *p = data;
    s->len += n;
    if (s->nbuf) {
        size_t take = 64 - s->nbuf < n ? 64 - s->nbuf : n;
        memcpy(s->buf + s->nbuf, p, take);
        s->nbuf += take;
        p += take;
        n -= take;
        if (s->nbuf < 64)
            return;
        sha_block(s->h, s->buf);
        s->nbuf = 0;
    }
    for (; n >= 64; p += 64, n -= 64)
        sha_block(s->h, p);
    memcpy(s->buf, p, n);
    s->nbuf = n;
}

void etacal_sha256_hex(etacal_sha256 *s, char hex[65])
{
    uint64_t bits = s->len * 8;
    unsigned char pad[72] = {0x80};
    size_t npad = (s->nbuf < 56 ? 56 : 120) - s->nbuf;
    for (int i = 0; i < 8; i++)
        pad[npad + (size_t)i] = (unsigned char)(bits >> (56 - 8 * i));
    uint64_t len = s->len;
    etacal_sha256_update(s, pad, npad + 8);
    s->len = len;
    static const char digits[] = "0123456789abcdef";
    for (int i = 0; i < 8; i++)
        for (int j = 0; j < 4; j++) {
            unsigned byte = (s->h[i] >> (24 - 8 * j)) & 0xff;
            hex[8 * i + 2 * j] = digits[byte >> 4];
            hex[8 * i + 2 * j + 1] = digits[byte & 15];
        }
    hex[64] = '\0';
}

int etacal_sha256_file(const char *path, char hex[65], uint64_t *bytes, etacal_error *err)
{
    int fd = open(path, O_RDONLY);
    if (fd < 0)
        return etacal_error_set(err, ETACAL_EIO, path, "cannot open: %s", strerror(errno));
    unsigned char *buf = malloc(1 << 16);
    if (!buf) {
        close(fd);
        return etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
    }
    etacal_sha256 s;
    etacal_sha256_init(&s);
    for (;;) {
        ssize_t r = read(fd, buf, 1 << 16);
        if (r < 0 && errno == EINTR)
            continue;
        if (r < 0) {
            int e = errno;
            free(buf);
            close(fd);
            return etacal_error_set(err, ETACAL_EIO, path, "read failed: %s", strerror(e));
        }
        if (r == 0)
            break;
        etacal_sha256_update(&s, buf, (size_t)r);
    }
    free(buf);
    close(fd);
    if (bytes)
        *bytes = s.len;
    etacal_sha256_hex(&s, hex);
    return ETACAL_OK;
}

/* ---- the reference order ------------------------------------------------ */

static double median_of(const double *v, size_t n, double *work)
{
    memcpy(work, v, n * sizeof *work);
    /* the lower median for an even n: a value of the data */
    return etacal_select(work, n, (n + 1) / 2);
}

int etacal_reference_point(const etacal_table *t, size_t pred_col, const size_t *x_cols, size_t nx,
                           double *pred_out, double *x_out, etacal_error *err)
{
    size_t n = etacal_table_rows(t);
    if (n == 0)
        return etacal_error_set(err, ETACAL_ENUM, NULL, "no rows for a reference point");
    double *work = malloc(n * sizeof *work);
    if (!work)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    *pred_out = median_of(etacal_table_num(t, pred_col), n, work);
    for (size_t j = 0; j < nx; j++)
        x_out[j] = median_of(etacal_table_num(t, x_cols[j]), n, work);
    free(work);
    return ETACAL_OK;
}

/* ---- comparing two tables ----------------------------------------------- */

/* The row of segment g's own for target ti, or -1. */
static long own_row(const etacal_quote_index *ix, const etacal_quotes *q, size_t g, size_t ti)
{
    long r = etacal_quote_index_lookup(ix, (const char *const *)q->segs[g].keys, NULL, ti, NULL);
    return r >= 0 && q->rows[r].seg == g ? r : -1;
}

double etacal_quotes_promise_at(const etacal_quotes *q, const char *const *keys, size_t ti, double pred,
                                const double *x)
{
    etacal_quote_index *ix = NULL;
    if (etacal_quote_index_create(q, &ix, NULL) != 0)
        return NAN;
    long r = etacal_quote_index_lookup(ix, keys, NULL, ti, NULL);
    double v = r >= 0 ? etacal_quote_index_promise(ix, r, pred, x, NULL, NULL) : NAN;
    etacal_quote_index_destroy(ix);
    return v;
}

void quotes_diff_release(etacal_quotes_diff *d)
{
    if (!d)
        return;
    free(d->moves);
    memset(d, 0, sizeof *d);
}

/* The covariates of q in its coef order, from the named reference values. */
static int covariates_of(const etacal_quotes *q, const char *const *names, const double *x, size_t nx,
                         double *out, etacal_error *err)
{
    for (size_t j = 0; j < q->ncoef; j++) {
        size_t i = 0;
        while (i < nx && strcmp(names[i], q->coef_names[j]) != 0)
            i++;
        if (i == nx)
            return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                    "no reference value for the covariate '%s' of a table", q->coef_names[j]);
        out[j] = x[i];
    }
    return ETACAL_OK;
}

static int same_keys(const etacal_quotes *a, const etacal_quotes *b)
{
    if (a->nkeys != b->nkeys)
        return 0;
    for (size_t j = 0; j < a->nkeys; j++)
        if (strcmp(a->key_names[j], b->key_names[j]) != 0)
            return 0;
    return 1;
}

static long target_index(const etacal_quotes *q, double tau)
{
    for (size_t t = 0; t < q->ntargets; t++)
        if (q->targets[t] == tau)
            return (long)t;
    return -1;
}

int quotes_compare_fill(const etacal_quotes *old_q, const etacal_quotes *new_q, double pred,
                          const char *const *x_names, const double *x, size_t nx, etacal_quotes_diff *out,
                          etacal_error *err)
{
    memset(out, 0, sizeof *out);
    double xo[ETACAL_QR_MAX_COVARIATES], xn[ETACAL_QR_MAX_COVARIATES];
    if (old_q->ncoef > ETACAL_QR_MAX_COVARIATES || new_q->ncoef > ETACAL_QR_MAX_COVARIATES)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "too many covariates");
    int rc = covariates_of(old_q, x_names, x, nx, xo, err);
    if (rc == 0)
        rc = covariates_of(new_q, x_names, x, nx, xn, err);
    if (rc)
        return rc;
    out->keys_differ = !same_keys(old_q, new_q);
    out->method_differs = old_q->method != new_q->method;
    for (size_t t = 0; t < new_q->ntargets; t++)
        out->targets_added += target_index(old_q, new_q->targets[t]) < 0;
    for (size_t t = 0; t < old_q->ntargets; t++)
        out->targets_removed += target_index(new_q, old_q->targets[t]) < 0;

    /* With other key columns a segment of one table means nothing in the
     * other: only the global segments (index 0) compare. */
    size_t nseg_new = out->keys_differ ? 1 : new_q->nsegs;
    size_t nseg_old = out->keys_differ ? 1 : old_q->nsegs;
    size_t cap = nseg_new * new_q->ntargets + nseg_old * old_q->ntargets;
    out->moves = calloc(cap ? cap : 1, sizeof *out->moves);
    if (!out->moves)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    etacal_quote_index *ixn = NULL, *ixo = NULL;
    if ((rc = etacal_quote_index_create(new_q, &ixn, err)) != 0 ||
        (rc = etacal_quote_index_create(old_q, &ixo, err)) != 0) {
        etacal_quote_index_destroy(ixn);
        quotes_diff_release(out);
        return rc;
    }
    for (int pass = 0; pass < 2; pass++) {
        const etacal_quotes *a = pass == 0 ? new_q : old_q, *b = pass == 0 ? old_q : new_q;
        const etacal_quote_index *ia = pass == 0 ? ixn : ixo, *ib = pass == 0 ? ixo : ixn;
        size_t nseg = pass == 0 ? nseg_new : nseg_old;
        for (size_t g = 0; g < nseg; g++) {
            const etacal_segment *s = &a->segs[g];
            long gb = out->keys_differ ? 0 : etacal_quote_index_segment(ib, (const char *const *)s->keys, NULL);
            int any_a = 0, any_b = 0, moved = 0;
            for (size_t t = 0; t < a->ntargets; t++) {
                if (own_row(ia, a, g, t) < 0)
                    continue;
                long tb = target_index(b, a->targets[t]);
                int in_b = gb >= 0 && tb >= 0 && own_row(ib, b, (size_t)gb, (size_t)tb) >= 0;
                any_a = 1;
                any_b |= in_b;
                if (pass == 1 && in_b)
                    continue; /* already listed from the new table */
                etacal_quote_move *m = &out->moves[out->nmoves++];
                m->keys = (const char *const *)s->keys;
                m->target = a->targets[t];
                double pa, pb = NAN;
                const double *xa = pass == 0 ? xn : xo, *xb = pass == 0 ? xo : xn;
                /* with other key columns, b's global segment */
                const char *const *kb = (const char *const *)(out->keys_differ ? b->segs[0].keys : s->keys);
                long ra = etacal_quote_index_lookup(ia, (const char *const *)s->keys, NULL, t, NULL);
                pa = ra >= 0 ? etacal_quote_index_promise(ia, ra, pred, xa, NULL, NULL) : NAN;
                long rb = tb >= 0 ? etacal_quote_index_lookup(ib, kb, NULL, (size_t)tb, NULL) : -1;
                if (rb >= 0)
                    pb = etacal_quote_index_promise(ib, rb, pred, xb, NULL, NULL);
                m->in_new = pass == 0 ? 1 : in_b;
                m->in_old = pass == 0 ? in_b : 1;
                m->new_promise = pass == 0 ? pa : pb;
                m->old_promise = pass == 0 ? pb : pa;
                if (in_b && !(m->new_promise == m->old_promise))
                    moved = 1;
            }
            if (!any_a)
                continue;
            if (pass == 0) {
                if (!any_b)
                    out->segs_added++;
                else if (moved)
                    out->segs_changed++;
                else
                    out->segs_same++;
            } else if (!any_b) {
                out->segs_removed++;
            }
        }
    }
    etacal_quote_index_destroy(ixn);
    etacal_quote_index_destroy(ixo);
    return ETACAL_OK;
}

/* ---- the lock and the previous table ------------------------------------ */

int etacal_lock_acquire(const char *path, double wait_s, int *fd_out, etacal_error *err)
{
    char lp[4096];
    if ((size_t)snprintf(lp, sizeof lp, "%s.lock", path) >= sizeof lp)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "path too long");
    int fd = open(lp, O_RDWR | O_CREAT | O_CLOEXEC, 0666);
    if (fd < 0)
        return etacal_error_set(err, ETACAL_EIO, lp, "cannot open the lock file: %s", strerror(errno));
    struct timespec start, now;
    clock_gettime(CLOCK_MONOTONIC, &start);
    for (;;) {
        if (flock(fd, LOCK_EX | LOCK_NB) == 0) {
            *fd_out = fd;
            return ETACAL_OK;
        }
        if (errno != EWOULDBLOCK && errno != EINTR) {
            int e = errno;
            close(fd);
            return etacal_error_set(err, ETACAL_EIO, lp, "cannot lock: %s", strerror(e));
        }
        clock_gettime(CLOCK_MONOTONIC, &now);
        double waited = (double)(now.tv_sec - start.tv_sec) + 1e-9 * (double)(now.tv_nsec - start.tv_nsec);
        if (waited >= wait_s) {
            close(fd);
            return etacal_error_set(err, ETACAL_EIO, lp,
                                    "another publisher holds the lock; gave up after %g s (--wait)", wait_s);
        }
        struct timespec nap = {0, 20 * 1000 * 1000};
        nanosleep(&nap, NULL);
    }
}

void etacal_lock_release(int fd)
{
    if (fd >= 0) {
        (void)flock(fd, LOCK_UN);
        close(fd);
    }
}

size_t etacal_remove_stale_temps(const char *path)
{
    const char *slash = strrchr(path, '/');
    char dir[4096], pre1[4096], pre2[4096];
    const char *base = slash ? slash + 1 : path;
    if (slash)
        snprintf(dir, sizeof dir, "%.*s", (int)(slash - path) + (slash == path), path);
    else
        snprintf(dir, sizeof dir, ".");
    snprintf(pre1, sizeof pre1, "%s.tmp.", base);
    snprintf(pre2, sizeof pre2, "%s.prev.tmp.", base);
    DIR *dp = opendir(dir);
    if (!dp)
        return 0;
    size_t removed = 0;
    struct dirent *de;
    while ((de = readdir(dp)) != NULL) {
        if (strncmp(de->d_name, pre1, strlen(pre1)) != 0 && strncmp(de->d_name, pre2, strlen(pre2)) != 0)
            continue;
        char full[8300];
        snprintf(full, sizeof full, "%s/%s", dir, de->d_name);
        removed += unlink(full) == 0;
    }
    closedir(dp);
    return removed;
}

int etacal_write_file(const char *path, const void *data, size_t n, etacal_error *err)
{
    outfile o = {0};
    int rc = outfile_open(&o, path, err);
    if (rc)
        return rc;
    if (n && fwrite(data, 1, n, o.fp) != n) {
        int e = errno;
        outfile_abort(&o);
        return etacal_error_set(err, ETACAL_EIO, path, "write failed: %s", strerror(e));
    }
    return outfile_commit(&o, err);
}

int etacal_keep_copy(const char *path, const char *keep, int *kept, etacal_error *err)
{
    *kept = 0;
    struct stat st;
    if (stat(path, &st) != 0) {
        if (errno == ENOENT)
            return ETACAL_OK;
        return etacal_error_set(err, ETACAL_EIO, path, "cannot stat: %s", strerror(errno));
    }
    char tmp[4096];
    if ((size_t)snprintf(tmp, sizeof tmp, "%s.tmp.%ld", keep, (long)getpid()) >= sizeof tmp)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "path too long");
    unlink(tmp);
    if (link(path, tmp) == 0) {
        if (rename(tmp, keep) != 0) {
            int e = errno;
            unlink(tmp);
            return etacal_error_set(err, ETACAL_EIO, keep, "cannot keep the previous table: %s", strerror(e));
        }
        *kept = 1;
        return ETACAL_OK;
    }
    /* no hard links here: copy the bytes */
    FILE *in = fopen(path, "rb");
    if (!in)
        return etacal_error_set(err, ETACAL_EIO, path, "cannot open: %s", strerror(errno));
    outfile o = {0};
    int rc = outfile_open(&o, keep, err);
    if (rc) {
        fclose(in);
        return rc;
    }
    char buf[1 << 14];
    size_t r;
    while ((r = fread(buf, 1, sizeof buf, in)) > 0)
        if (fwrite(buf, 1, r, o.fp) != r)
            break;
    int bad = ferror(in);
    fclose(in);
    if (bad) {
        outfile_abort(&o);
        return etacal_error_set(err, ETACAL_EIO, path, "read failed");
    }
    rc = outfile_commit(&o, err);
    if (rc == 0)
        *kept = 1;
    return rc;
}
