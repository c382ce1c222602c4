/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_pass.c: the passes over all rows of the quantile regression, in
 * chunks of DATA_CH rows on the threads of qr_pool.c: the ratio of each
 * row's residual to its band under the subsample's fit, the split into rows
 * below, above and near the fit (glob sums and candidates) for the
 * preprocessing (qr_pre.c), and the check of the sides with the objective. */
#include "qr_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static int cand_push(chunkout *o, size_t rec, const double *v)
{
    if (o->ncand == o->cap) {
        size_t cap = o->cap ? 2 * o->cap : 64;
        double *nb = realloc(o->cand, cap * rec * sizeof *nb);
        if (!nb) {
            o->oom = 1;
            return -1;
        }
        o->cand = nb;
        o->cap = cap;
    }
    memcpy(o->cand + o->ncand * rec, v, rec * sizeof *v);
    o->ncand++;
    return 0;
}

/* A block of n rows from i0: the centred covariates into D (k rows of VB)
 * and the weights (1 without weights) into wv. */
KERNEL void load_block(const design *d, size_t i0, size_t n, double D[][VB], double *restrict wv)
{
    for (size_t j = 0; j < d->k; j++) {
        const double *restrict xj = d->x[j] + i0;
        double mj = d->mean[j + 1];
        for (size_t i = 0; i < n; i++)
            D[j][i] = xj[i] - mj;
    }
    if (d->w)
        for (size_t i = 0; i < n; i++)
            wv[i] = d->w[i0 + i];
    else
        for (size_t i = 0; i < n; i++)
            wv[i] = 1;
}

/* Ratio residual / band of the pilot fit for a block of rows, with the
 * centred covariates in D (k rows of VB). */
KERNEL void block_ratio(const dpass *P, size_t i0, size_t n, double D[][VB], double *restrict wv,
                        double *restrict ratio, double *nfacc)
{
    const design *d = P->d;
    size_t k = d->k, p = d->p;
    double fit[VB], b2[VB], r[VB];
    const double *restrict y = d->y + i0;
    load_block(d, i0, n, D, wv);
    for (size_t i = 0; i < n; i++)
        fit[i] = P->bc[0];
    for (size_t j = 0; j < k; j++) {
        double c = P->bc[j + 1];
        for (size_t i = 0; i < n; i++)
            fit[i] += c * D[j][i];
    }
    for (size_t i = 0; i < n; i++) {
        r[i] = wv[i] * (y[i] - fit[i]);
        b2[i] = 0;
    }
    size_t i = 0;
#if defined(__GNUC__)
    /* two rows at a time, each term of the band in a register */
    for (; i + 2 <= n; i += 2) {
        v2d acc = {0, 0};
        for (size_t a = 0; a < p; a++) {
            const double *la = P->Ls + a * p;
            v2d ta = {la[0], la[0]};
            for (size_t c = 1; c <= a; c++)
                ta += la[c] * vld(&D[c - 1][i]);
            acc += ta * ta;
        }
        memcpy(b2 + i, &acc, sizeof acc);
    }
#endif
    for (; i < n; i++) {
        double acc = 0;
        for (size_t a = 0; a < p; a++) {
            const double *la = P->Ls + a * p;
            double ta = la[0];
            for (size_t c = 1; c <= a; c++)
                ta += la[c] * D[c - 1][i];
            acc += ta * ta;
        }
        b2[i] = acc;
    }
    double eps = P->eps, acc = 0;
    for (i = 0; i < n; i++) {
        double band = wv[i] * sqrt(b2[i]);
        ratio[i] = r[i] / (band > eps ? band : eps);
        /* NaN when y, a covariate or the weight is not finite */
        acc += (r[i] - r[i]) + (b2[i] - b2[i]);
    }
    *nfacc += acc;
}

KERNEL double sumv(const double *restrict a, size_t n)
{
    double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
    size_t i = 0;
    for (; i + 4 <= n; i += 4) {
        s0 += a[i];
        s1 += a[i + 1];
        s2 += a[i + 2];
        s3 += a[i + 3];
    }
    for (; i < n; i++)
        s0 += a[i];
    return (s0 + s1) + (s2 + s3);
}

/* A block of rows: the ratios (PASS_RATIO), or the split into below, above
 * and near by the window [lo, hi] (PASS_SPLIT) or by the flags
 * (PASS_FLAGS): glob sums of the rows below and above, the near rows kept
 * as candidates. */
KERNEL void k_split(const dpass *P, size_t i0, size_t n, chunkout *o)
{
    const design *d = P->d;
    size_t k = d->k, p = d->p, rec = p + 3;
    double D[ETACAL_QR_MAX_COVARIATES][VB], wv[VB], ratio[VB], wl[VB], wh[VB], nfacc = 0;
    if (P->mode == PASS_FLAGS) {
        load_block(d, i0, n, D, wv);
        for (size_t i = 0; i < n; i++)
            ratio[i] = 0;
    } else {
        block_ratio(P, i0, n, D, wv, ratio, &nfacc);
        if (!(nfacc == 0))
            o->nonfinite = 1;
        if (d->w)
            for (size_t i = 0; i < n; i++)
                o->nonfinite |= !(wv[i] >= 0);
    }
    if (P->mode == PASS_RATIO) {
        memcpy(P->ratio + i0, ratio, n * sizeof *ratio);
        return;
    }
    unsigned char *fl = P->flags + i0;
    if (P->mode == PASS_SPLIT) {
        double lo = P->lo, hi = P->hi;
        for (size_t i = 0; i < n; i++)
            fl[i] = ratio[i] < lo ? 1 : ratio[i] > hi ? 2 : 0;
    }
    size_t nl = 0, nh = 0;
    for (size_t i = 0; i < n; i++) {
        nl += fl[i] == 1;
        nh += fl[i] == 2;
        wl[i] = fl[i] == 1 ? wv[i] : 0;
        wh[i] = fl[i] == 2 ? wv[i] : 0;
    }
    const double *restrict y = d->y + i0;
    if (nl) {
        o->nL += nl;
        ksum_add(&o->L[0], sumv(wl, n));
        for (size_t j = 0; j < k; j++)
            ksum_add(&o->L[j + 1], dotv(wl, D[j], n) * d->inv[j + 1]);
        ksum_add(&o->L[p], dotv(wl, y, n));
    }
    if (nh) {
        o->nH += nh;
        ksum_add(&o->H[0], sumv(wh, n));
        for (size_t j = 0; j < k; j++)
            ksum_add(&o->H[j + 1], dotv(wh, D[j], n) * d->inv[j + 1]);
        ksum_add(&o->H[p], dotv(wh, y, n));
    }
    if (nl + nh == n)
        return;
    double r[PMAX + 3];
    for (size_t i = 0; i < n; i++) {
        if (fl[i])
            continue;
        /* the scaled row as design_row builds it */
        r[0] = (double)(i0 + i);
        r[1] = ratio[i];
        r[2] = wv[i] * y[i];
        r[3] = wv[i];
        for (size_t j = 0; j < k; j++)
            r[4 + j] = wv[i] * D[j][i] * d->inv[j + 1];
        if (cand_push(o, rec, r) != 0)
            return;
    }
}

/* The objective sum w_i rho_tau(y_i - x_i'coef) per OBJ_BLK rows (as the
 * plain loop of the original units computes it), and, when there are
 * flags, the rows below (above) the fit that have a positive (negative)
 * residual: counted, and their flag set to 0. */
KERNEL void k_check(const dpass *P, size_t i0, size_t n, size_t *bad)
{
    const design *d = P->d;
    size_t k = d->k;
    double fit[OBJ_BLK], u[OBJ_BLK];
    const double *restrict y = d->y + i0;
    for (size_t i = 0; i < n; i++)
        fit[i] = P->coef[0];
    for (size_t j = 0; j < k; j++) {
        const double *restrict xj = d->x[j] + i0;
        double c = P->coef[j + 1];
        for (size_t i = 0; i < n; i++)
            fit[i] += c * xj[i];
    }
    for (size_t i = 0; i < n; i++)
        u[i] = y[i] - fit[i];
    double tau = P->tau, blk = 0;
    if (d->w) {
        const double *w = d->w + i0;
        for (size_t i = 0; i < n; i++)
            blk += w[i] * (u[i] >= 0 ? tau * u[i] : (tau - 1) * u[i]);
    } else {
        for (size_t i = 0; i < n; i++)
            blk += 1 * (u[i] >= 0 ? tau * u[i] : (tau - 1) * u[i]);
    }
    P->objblk[i0 / OBJ_BLK] = blk;
    if (!P->flags)
        return;
    unsigned char *fl = P->flags + i0;
    size_t nb = 0;
    for (size_t i = 0; i < n; i++)
        if ((fl[i] == 2 && u[i] < 0) || (fl[i] == 1 && u[i] > 0)) {
            fl[i] = 0;
            nb++;
        }
    *bad += nb;
}

void qr_run_data(void *ctx, size_t c)
{
    dpass *P = ctx;
    size_t n = P->d->n, i0 = c * DATA_CH, e = n - i0 < DATA_CH ? n : i0 + DATA_CH;
    if (P->mode == PASS_CHECK) {
        size_t bad = 0; /* counted here, stored once: the chunks' counts share cache lines */
        for (size_t b = i0; b < e; b += OBJ_BLK) {
            if (e - b >= OBJ_BLK)
                k_check(P, b, OBJ_BLK, &bad);
            else
                k_check(P, b, e - b, &bad);
        }
        P->cbad[c] = bad;
        return;
    }
    chunkout *o = &P->out[c];
    memset(o->L, 0, sizeof o->L);
    memset(o->H, 0, sizeof o->H);
    o->nL = o->nH = o->ncand = 0;
    o->nonfinite = o->oom = 0;
    for (size_t b = i0; b < e; b += VB) {
        if (e - b >= VB)
            k_split(P, b, VB, o);
        else
            k_split(P, b, e - b, o);
    }
}

size_t qr_data_chunks(size_t n) { return (n + DATA_CH - 1) / DATA_CH; }

int qr_check_pass(const design *d, double tau, const double *coef, unsigned char *flags, pool *P, size_t *bad,
                      double *objective)
{
    size_t nch = qr_data_chunks(d->n);
    double *objblk = qr_lines_alloc(((d->n + OBJ_BLK - 1) / OBJ_BLK) * sizeof *objblk);
    size_t *cbad = malloc(nch * sizeof *cbad);
    if (!objblk || !cbad) {
        free(objblk);
        free(cbad);
        return -1;
    }
    dpass D;
    memset(&D, 0, sizeof D);
    D.d = d;
    D.mode = PASS_CHECK;
    D.tau = tau;
    memcpy(D.coef, coef, d->p * sizeof *coef);
    D.flags = flags;
    D.objblk = objblk;
    D.cbad = cbad;
    qr_pool_run(P, qr_run_data, &D, nch);
    ksum obj = {0, 0};
    for (size_t b = 0; b < (d->n + OBJ_BLK - 1) / OBJ_BLK; b++)
        ksum_add(&obj, objblk[b]);
    *objective = ksum_value(&obj);
    *bad = 0;
    for (size_t c = 0; c < nch; c++)
        *bad += cbad[c];
    free(objblk);
    free(cbad);
    return 0;
}
