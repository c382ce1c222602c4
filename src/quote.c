/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote.c: fitting a quote table by per-segment split conformal
 * prediction (the writer is quote_write.c, the reader quote_read.c).
 *
 * For each segment g (a combination of key values, plus the global one) and
 * target tau, the scores s_i of its n_g rows give the bound s_(k), k =
 * ceil((n_g+1) tau) (Vovk et al. 2005, Mondrian conformal: the guarantee
 * holds within each segment; Lei et al. 2018).  Scores are laid out by
 * segment with one counting sort, so each bound is a selection inside one
 * contiguous slice: O(n) per segment and target, no full sort. */
#include "base.h"
#include "stream.h"
#include "segment.h"
#include "quote_internal.h"

#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <threads.h>

const char *etacal_method_name(int method)
{
    switch (method) {
    case ETACAL_METHOD_ADD: return "add";
    case ETACAL_METHOD_RATIO: return "ratio";
    case ETACAL_METHOD_QR: return "qr";
    default: return NULL;
    }
}

const char *etacal_cell_name(int cell)
{
    switch (cell) {
    case ETACAL_CELL_OWN: return "own";
    case ETACAL_CELL_REST: return "rest";
    case ETACAL_CELL_ALL: return "all";
    default: return NULL;
    }
}

int etacal_method_parse(const char *name)
{
    if (strcmp(name, "add") == 0)
        return ETACAL_METHOD_ADD;
    if (strcmp(name, "ratio") == 0)
        return ETACAL_METHOD_RATIO;
    if (strcmp(name, "qr") == 0)
        return ETACAL_METHOD_QR;
    return -1;
}

static void segment_free(etacal_segment *s, size_t nkeys)
{
    if (s->keys)
        for (size_t j = 0; j < nkeys; j++)
            free(s->keys[j]);
    free(s->keys);
    free(s->k);
    free(s->score_q);
    free(s->status);
    free(s->pool_n);
}

void etacal_quotes_destroy(etacal_quotes *q)
{
    if (!q)
        return;
    for (size_t i = 0; i < q->nsegs; i++)
        segment_free(&q->segs[i], q->nkeys);
    free(q->segs);
    if (q->key_names)
        for (size_t j = 0; j < q->nkeys; j++)
            free(q->key_names[j]);
    free(q->key_names);
    free(q->targets);
    free(q->rows);
    if (q->coef_names)
        for (size_t j = 0; j < q->ncoef; j++)
            free(q->coef_names[j]);
    free(q->coef_names);
    free(q->coefs);
    free(q->ranges);
    free(q);
}

long etacal_quotes_find_target(const etacal_quotes *q, double tau)
{
    for (size_t i = 0; i < q->ntargets; i++)
        if (q->targets[i] == tau)
            return (long)i;
    return -1;
}

static char *dupn(const char *s, size_t n)
{
    char *d = malloc(n + 1);
    if (d) {
        memcpy(d, s, n);
        d[n] = '\0';
    }
    return d;
}

static int cmp_dbl(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Sorted distinct copy of the targets, each checked to lie in (0,1). */

int quotes_set_targets(etacal_quotes *q, const double *targets, size_t n, etacal_error *err)
{
    if (n == 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no target given");
    q->targets = malloc(n * sizeof *q->targets);
    if (!q->targets)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    for (size_t i = 0; i < n; i++) {
        if (!(targets[i] > 0 && targets[i] < 1))
            return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                    "target must be an on-time rate in (0,1), got %g", targets[i]);
        q->targets[i] = targets[i];
    }
    qsort(q->targets, n, sizeof *q->targets, cmp_dbl);
    size_t w = 0;
    for (size_t i = 0; i < n; i++)
        if (w == 0 || q->targets[w - 1] != q->targets[i])
            q->targets[w++] = q->targets[i];
    q->ntargets = w;
    return ETACAL_OK;
}


int segment_alloc(etacal_segment *s, size_t nkeys, size_t ntargets)
{
    memset(s, 0, sizeof *s);
    s->keys = calloc(nkeys ? nkeys : 1, sizeof *s->keys);
    s->k = calloc(ntargets, sizeof *s->k);
    s->score_q = calloc(ntargets, sizeof *s->score_q);
    s->status = calloc(ntargets, sizeof *s->status);
    s->pool_n = calloc(ntargets, sizeof *s->pool_n);
    return (s->keys && s->k && s->score_q && s->status && s->pool_n) ? 0 : -1;
}

static size_t bucket(double x, double lo, double scale, size_t B)
{
    double b = (x - lo) * scale;
    if (!(b > 0))
        return 0;
    return b >= (double)B ? B - 1 : (size_t)b;
}

/* One order statistic to find: segment g, target ti. */
typedef struct job {
    size_t bucket; /* SIZE_MAX: k > n, no finite bound */
    size_t rank;   /* rank within the bucket (weighted: rows below the bucket) */
    size_t cap, used, off;
    double need;   /* weighted: the weight still needed within the bucket */
} job;

typedef struct wpair {
    double s, w;
} wpair;

static int cmp_wpair(const void *a, const void *b)
{
    double x = ((const wpair *)a)->s, y = ((const wpair *)b)->s;
    return (x > y) - (x < y);
}

/* Sums of weights are compared with a relative slack of 1e-12, so that
 * equal weights give exactly the unweighted rank (tau (n+1) in floating
 * point can exceed the whole number it stands for). */
#define WSLACK 1e-12

/* The weighted conformal bound of scores s[0..n) with weights w (the new
 * point weighing 1 at +infinity): the smallest s with sum_{s_j <= s} w_j >=
 * tau (1 + sum w), or +inf.  *k gets the number of scores at or below it.
 * NaN when out of memory. */
double quote_weighted_upper(const double *s, const double *w, size_t n, double tau, size_t *k)
{
    double W = 0;
    for (size_t i = 0; i < n; i++)
        W += w[i];
    double need = tau * (1 + W);
    *k = n + 1;
    if (n == 0 || W < need * (1 - WSLACK))
        return INFINITY;
    wpair *c = malloc(n * sizeof *c);
    if (!c)
        return NAN;
    for (size_t i = 0; i < n; i++)
        c[i] = (wpair){s[i], w[i]};
    qsort(c, n, sizeof *c, cmp_wpair);
    double cum = 0, q = INFINITY;
    for (size_t r = 0; r < n; r++) {
        cum += c[r].w;
        if (cum >= need * (1 - WSLACK)) {
            q = c[r].s;
            *k = r + 1;
            break;
        }
    }
    free(c);
    return q;
}

/* The rank of the bound for n scores at tau: average case, or with
 * confidence. */
size_t quote_rank_rule(size_t n, double tau, double conf)
{
    size_t k = conf > 0 ? etacal_conformal_rank_conf(n, tau, conf) : etacal_conformal_rank(n, tau);
    return k < 1 ? 1 : k;
}

/* The smallest n for which the rule gives a finite bound. */
size_t quote_rule_min_n(double tau, double conf)
{
    size_t n = etacal_conformal_min_n(tau);
    while (conf > 0 && quote_rank_rule(n, tau, conf) > n)
        n++;
    return n;
}


/* ---- the two row passes of the fit, over halves of the rows at once --- */

typedef struct passa {
    const double *y, *p;
    const unsigned char *mask;
    size_t lo, hi;
    int ratio;
    ksum sq, ab, me;
    size_t on_time;
    double lo_s, hi_s;
    size_t bad_row; /* first row (1-based) with a non-finite value or a bad ratio prediction; 0 none */
    int bad_kind;   /* 1 non-finite, 2 ratio prediction <= 0 */
} passa;

static int pass_a(void *arg)
{
    passa *a = arg;
    a->lo_s = INFINITY;
    a->hi_s = -INFINITY;
    /* plain sums within blocks of 256 rows, compensated across blocks */
    for (size_t i0 = a->lo; i0 < a->hi; i0 += 256) {
        size_t e = i0 + 256 < a->hi ? i0 + 256 : a->hi;
        double sq = 0, ab = 0, me = 0, lo = a->lo_s, hi = a->hi_s;
        size_t on = 0;
        for (size_t i = i0; i < e; i++) {
            if (a->mask && !a->mask[i])
                continue;
            double y = a->y[i], pr = a->p[i];
            if (!isfinite(y) || !isfinite(pr)) {
                a->bad_row = i + 1;
                a->bad_kind = 1;
                return 0;
            }
            if (a->ratio && !(pr > 0)) {
                a->bad_row = i + 1;
                a->bad_kind = 2;
                return 0;
            }
            double sc = a->ratio ? y / pr : y - pr, d = y - pr;
            sq += d * d;
            ab += fabs(d);
            me += d;
            on += (size_t)(y <= pr);
            lo = sc < lo ? sc : lo;
            hi = sc > hi ? sc : hi;
        }
        ksum_add(&a->sq, sq);
        ksum_add(&a->ab, ab);
        ksum_add(&a->me, me);
        a->on_time += on;
        a->lo_s = lo;
        a->hi_s = hi;
    }
    return 0;
}

typedef struct passb {
    const double *y, *p, *wts;
    const unsigned char *mask;
    const seghier *hs;
    size_t lo, hi, nkeys, nseg, B;
    int ratio;
    double lo_s, scale0;
    size_t *hist, *n, *bare; /* this half's: nseg * B, nseg, nseg */
    double *whist, *wseg;    /* with weights */
} passb;

static int pass_b(void *arg)
{
    passb *b = arg;
    for (size_t i = b->lo; i < b->hi; i++) {
        if (b->mask && !b->mask[i])
            continue;
        double sc = b->ratio ? b->y[i] / b->p[i] : b->y[i] - b->p[i];
        size_t hit = b->y[i] <= b->p[i], bk = bucket(sc, b->lo_s, b->scale0, b->B);
        for (uint32_t g = seghier_row(b->hs, b->nkeys, i), L = (uint32_t)b->nkeys + 1; L-- > 0;
             g = (uint32_t)b->hs->parent[g]) {
            b->n[g]++;
            b->bare[g] += hit;
            b->hist[(size_t)g * b->B + bk]++;
            if (b->wts) {
                b->whist[(size_t)g * b->B + bk] += b->wts[i];
                b->wseg[g] += b->wts[i];
            }
        }
    }
    return 0;
}

/* Runs f on a and b, b in a second thread when the rows are many; the
 * halves are fixed, so the result does not depend on timing. */
static void run_halves(int (*f)(void *), void *a, void *b, int two)
{
    thrd_t th;
    int started = two && thrd_create(&th, f, b) == thrd_success;
    f(a);
    if (started)
        thrd_join(th, NULL);
    else if (two)
        f(b);
}

int etacal_quotes_fit(const etacal_table *t, size_t actual_col, size_t pred_col,
                      const size_t *key_cols, size_t nkeys, const etacal_fit_opts *opts,
                      etacal_quotes **out, etacal_error *err)
{
    int rc = ETACAL_OK;
    size_t *hist = NULL;
    double *cand = NULL, *whist = NULL, *wseg = NULL;
    wpair *wcand = NULL;
    job *jobs = NULL;
    seghier hs = {0};
    size_t *order = NULL, *phist = NULL;
    char *qual = NULL, *gall = NULL, *inpool = NULL;
    double *pw = NULL, *wphist = NULL;
    *out = NULL;

    size_t n = etacal_table_rows(t);
    const char *src = etacal_table_source(t);
    const unsigned char *mask = opts->mask;
    size_t nfit = n;
    if (mask) {
        nfit = 0;
        for (size_t i = 0; i < n; i++)
            nfit += mask[i] != 0;
    }
    if (nfit == 0)
        return etacal_error_set(err, ETACAL_ENUM, src, "no data rows with both an actual and a prediction");
    const double *y = etacal_table_num(t, actual_col);
    const double *p = etacal_table_num(t, pred_col);
    if (!y || !p)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "actual and prediction must be numeric columns");
    if (opts->method != ETACAL_METHOD_ADD && opts->method != ETACAL_METHOD_RATIO &&
        opts->method != ETACAL_METHOD_QR)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown method %d", opts->method);
    if (opts->method != ETACAL_METHOD_QR && opts->nx)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "covariates go with method qr only");
    if (opts->nx > ETACAL_QR_MAX_COVARIATES - 1)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d covariates besides the prediction",
                                ETACAL_QR_MAX_COVARIATES - 1);
    for (size_t j = 0; j < opts->nx; j++)
        if (!etacal_table_num(t, opts->x_cols[j]))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "covariate '%s' is not a numeric column",
                                    etacal_table_col_name(t, opts->x_cols[j]));
    if (nkeys > ETACAL_MAX_KEYS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d key columns, not %zu", ETACAL_MAX_KEYS, nkeys);
    for (size_t j = 0; j < nkeys; j++) {
        const char *name = etacal_table_col_name(t, key_cols[j]);
        if (fit_key_name_reserved(name))
            return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                    "a key column cannot be called '%s' (a quote-table column)", name);
    }
    size_t min_rows = opts->min_rows ? opts->min_rows : 200;

    etacal_quotes *q = calloc(1, sizeof *q);
    if (!q)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    q->method = opts->method;
    q->nkeys = nkeys;
    if (!(opts->confidence == 0 || (opts->confidence > 0 && opts->confidence < 1))) {
        etacal_quotes_destroy(q);
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "confidence must be in (0,1), got %g", opts->confidence);
    }
    q->confidence = opts->confidence;
    const double *wts = opts->weights;
    if (wts && opts->confidence > 0) {
        etacal_quotes_destroy(q);
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "recency weights do not go with a confidence");
    }
    if ((rc = quotes_set_targets(q, opts->targets, opts->ntargets, err)) != 0)
        goto done;
    q->key_names = calloc(nkeys ? nkeys : 1, sizeof *q->key_names);
    if (!q->key_names)
        goto nomem;
    for (size_t j = 0; j < nkeys; j++) {
        const char *name = etacal_table_col_name(t, key_cols[j]);
        if (!(q->key_names[j] = dupn(name, strlen(name))))
            goto nomem;
    }

    /* 1. Segments of every level: global first, the others sorted by their
     *    key texts. */
    if ((rc = seghier_build(&hs, t, key_cols, nkeys, 1, err)) != 0)
        goto done;
    size_t nseg = hs.nseg;
    q->segs = calloc(nseg, sizeof *q->segs);
    if (!q->segs)
        goto nomem;
    q->nsegs = nseg;
    for (size_t g = 0; g < nseg; g++) {
        if (segment_alloc(&q->segs[g], nkeys, q->ntargets) != 0)
            goto nomem;
        free(q->segs[g].keys);
        q->segs[g].keys = hs.keys[g]; /* ownership moves to the table */
        hs.keys[g] = NULL;
        q->segs[g].level = hs.level[g];
        q->segs[g].parent = hs.parent[g];
    }

    /* 2. Pass over the rows without segments: validation, accuracy and
     *    the range of the scores (two halves at once for large tables; the
     *    compensated sums are merged in row order). */
    int ratio = q->method == ETACAL_METHOD_RATIO;
    int two = n >= 200000 && (opts->threads == ETACAL_THREADS_AUTO || opts->threads >= 2);
    size_t mid = two ? n / 2 : n;
    passa pa[2] = {{y, p, mask, 0, mid, ratio, {0, 0}, {0, 0}, {0, 0}, 0, 0, 0, 0, 0},
                   {y, p, mask, mid, n, ratio, {0, 0}, {0, 0}, {0, 0}, 0, 0, 0, 0, 0}};
    run_halves(pass_a, &pa[0], &pa[1], two);
    for (int h = 0; h < 2; h++)
        if (pa[h].bad_row) {
            rc = pa[h].bad_kind == 1
                     ? etacal_error_set(err, ETACAL_EINVAL, src, "non-finite actual or prediction in data row %zu",
                                        pa[h].bad_row)
                     : etacal_error_set(err, ETACAL_EINVAL, src,
                                        "method ratio needs predictions > 0 (data row %zu has %g)", pa[h].bad_row,
                                        p[pa[h].bad_row - 1]);
            goto done;
        }
    ksum sq = pa[0].sq, ab = pa[0].ab, me = pa[0].me;
    ksum_add(&sq, ksum_value(&pa[1].sq));
    ksum_add(&ab, ksum_value(&pa[1].ab));
    ksum_add(&me, ksum_value(&pa[1].me));
    size_t on_time = pa[0].on_time + pa[1].on_time;
    double lo_s = pa[0].lo_s < pa[1].lo_s ? pa[0].lo_s : pa[1].lo_s;
    double hi_s = pa[0].hi_s > pa[1].hi_s ? pa[0].hi_s : pa[1].hi_s;
    q->accuracy.n = nfit;
    q->accuracy.rmse = sqrt(ksum_value(&sq) / (double)nfit);
    q->accuracy.mae = ksum_value(&ab) / (double)nfit;
    q->accuracy.mean_error = ksum_value(&me) / (double)nfit;
    q->accuracy.on_time = on_time;
    etacal_segment *gl = &q->segs[0];

    if (q->method == ETACAL_METHOD_QR) {
        for (size_t i = 0; i < n; i++) {
            if (mask && !mask[i])
                continue;
            size_t hit = y[i] <= p[i];
            for (uint32_t g = seghier_row(&hs, nkeys, i), L = (uint32_t)nkeys + 1; L-- > 0;
                 g = (uint32_t)hs.parent[g]) {
                q->segs[g].n++;
                q->segs[g].bare_hits += hit;
            }
        }
        rc = quotes_fit_qr(q, t, &hs, actual_col, pred_col, opts, min_rows, err);
        goto done;
    }

    /* 3. The k-th smallest score of every (segment, target) by bucket
     *    selection, without copying or reordering the rows: a histogram of
     *    each segment's scores over B equal-width buckets of the scores'
     *    range finds the bucket that holds rank k; a second pass gathers
     *    only that bucket's scores, and an exact selection among them gives
     *    the order statistic.  The bucket index is a monotone function of
     *    the score, so this is exact; only the work depends on the spread.
     *    Each row counts in its segment at every level, found from its
     *    full-key segment through the parents. */
    size_t B = 4096;
    while (B > 16 && (double)B * (double)nseg * sizeof(size_t) > 64.0 * 1024 * 1024)
        B /= 2;
    hist = calloc(nseg * B, sizeof *hist);
    size_t njobs = nseg * q->ntargets;
    jobs = calloc(njobs, sizeof *jobs);
    if (!hist || !jobs)
        goto nomem;
    if (wts) {
        whist = calloc(nseg * B, sizeof *whist);
        wseg = calloc(nseg, sizeof *wseg);
        if (!whist || !wseg)
            goto nomem;
    }
    double width = hi_s - lo_s;
    double scale0 = width > 0 && isfinite(width) ? (double)B / width : 0;
    {
        /* the second half counts into its own arrays, added to the first's */
        size_t *h2 = NULL, *n2 = NULL, *b2 = NULL;
        double *wh2 = NULL, *ws2 = NULL;
        size_t *n1 = calloc(nseg, sizeof *n1), *b1 = calloc(nseg, sizeof *b1);
        if (two) {
            h2 = calloc(nseg * B, sizeof *h2);
            n2 = calloc(nseg, sizeof *n2);
            b2 = calloc(nseg, sizeof *b2);
            if (wts) {
                wh2 = calloc(nseg * B, sizeof *wh2);
                ws2 = calloc(nseg, sizeof *ws2);
            }
        }
        if (!n1 || !b1 || (two && (!h2 || !n2 || !b2 || (wts && (!wh2 || !ws2))))) {
            free(n1), free(b1), free(h2), free(n2), free(b2), free(wh2), free(ws2);
            goto nomem;
        }
        passb pb[2] = {{y, p, wts, mask, &hs, 0, mid, nkeys, nseg, B, ratio, lo_s, scale0, hist, n1, b1, whist, wseg},
                       {y, p, wts, mask, &hs, mid, n, nkeys, nseg, B, ratio, lo_s, scale0, h2, n2, b2, wh2, ws2}};
        run_halves(pass_b, &pb[0], &pb[1], two);
        for (size_t g = 0; g < nseg; g++) {
            q->segs[g].n = n1[g] + (two ? n2[g] : 0);
            q->segs[g].bare_hits = b1[g] + (two ? b2[g] : 0);
            if (two && wts)
                wseg[g] += ws2[g];
        }
        if (two)
            for (size_t c = 0; c < nseg * B; c++) {
                hist[c] += h2[c];
                if (wts)
                    whist[c] += wh2[c];
            }
        free(n1), free(b1), free(h2), free(n2), free(b2), free(wh2), free(ws2);
    }
    /* Pooled thin cells (Mondrian conformal on the cell, Vovk et al. 2005,
     * ch. 4): per target, bottom up, a segment's pooled cell holds the rows
     * of its children that did not qualify (a full key combination's cell,
     * its own rows).  A cell qualifies with at least min_rows rows and a
     * finite bound; the global cell needs only the finite bound, and when
     * it has none (no rows left over, or too few) the global row is
     * calibrated on all rows instead (gall).  Qualification depends on the
     * counts and weights only, so it is settled before any score is
     * selected; the histogram of a pooled cell is the sum of its
     * unqualified children's (phist, one target at a time). */
    size_t nt = q->ntargets;
    order = malloc(nseg * sizeof *order);
    qual = calloc(nseg * nt, 1);
    gall = calloc(nt, 1);
    inpool = calloc(nt, 1);
    pw = calloc(nseg, sizeof *pw);
    phist = nkeys ? malloc(nseg * B * sizeof *phist) : NULL;
    if (wts && nkeys)
        wphist = malloc(nseg * B * sizeof *wphist);
    if (!order || !qual || !gall || !inpool || !pw || (nkeys && !phist) || (wts && nkeys && !wphist))
        goto nomem;
    {
        /* segments by level, the most specific first, the global one last */
        size_t w = 0;
        for (size_t L = nkeys + 1; L-- > 0;)
            for (size_t g = 0; g < nseg; g++)
                if (q->segs[g].level == L)
                    order[w++] = g;
    }
    size_t ncand = 0;
    for (size_t ti = 0; ti < nt; ti++) {
        double tau = q->targets[ti];
        for (size_t g = 0; g < nseg; g++) {
            q->segs[g].pool_n[ti] = q->segs[g].level == nkeys ? q->segs[g].n : 0;
            pw[g] = q->segs[g].level == nkeys && wts ? wseg[g] : 0;
        }
        for (size_t o = 0; o < nseg; o++) {
            size_t g = order[o];
            etacal_segment *sg = &q->segs[g];
            size_t pn = sg->pool_n[ti];
            int finite = wts ? pn > 0 && pw[g] >= tau * (1 + pw[g]) * (1 - WSLACK)
                             : quote_rank_rule(pn, tau, opts->confidence) <= pn;
            int ok = finite && (g == 0 || pn >= min_rows);
            qual[g * nt + ti] = (char)ok;
            sg->status[ti] = g == 0 || ok                  ? ETACAL_OWN_ROW
                             : pn == 0 && sg->level < nkeys ? ETACAL_FALLBACK_EMPTY
                             : pn < min_rows                ? ETACAL_FALLBACK_FEW_ROWS
                                                            : ETACAL_FALLBACK_RANK;
            if (g != 0 && !ok) {
                q->segs[sg->parent].pool_n[ti] += pn;
                pw[sg->parent] += pw[g];
            }
        }
        gall[ti] = !qual[ti];
        if (nkeys) {
            memcpy(phist, hist, nseg * B * sizeof *phist);
            if (wts)
                memcpy(wphist, whist, nseg * B * sizeof *wphist);
            for (size_t g = 0; g < nseg; g++)
                if (q->segs[g].level < nkeys) {
                    memset(phist + g * B, 0, B * sizeof *phist);
                    if (wts)
                        memset(wphist + g * B, 0, B * sizeof *wphist);
                }
            for (size_t o = 0; o + 1 < nseg; o++) {
                size_t g = order[o], up = q->segs[g].parent;
                if (qual[g * nt + ti])
                    continue;
                for (size_t b = 0; b < B; b++)
                    phist[up * B + b] += phist[g * B + b];
                if (wts)
                    for (size_t b = 0; b < B; b++)
                        wphist[up * B + b] += wphist[g * B + b];
            }
        }
        for (size_t g = 0; g < nseg; g++) {
            etacal_segment *sg = &q->segs[g];
            /* the rows of the cell: its pool, or all rows for the global
             * row without a pooled cell */
            int all = g == 0 && gall[ti];
            size_t cn = all ? sg->n : sg->pool_n[ti];
            double cw = wts ? (all ? wseg[g] : pw[g]) : 0;
            const size_t *h = (all || !nkeys ? hist : phist) + g * B;
            job *jb = &jobs[g * nt + ti];
            if (wts) {
                /* weighted: the mass tau (1 + W) must be reached by the
                 * calibration weights, else the bound is +infinity */
                double need = tau * (1 + cw);
                if (cn == 0 || cw < need * (1 - WSLACK)) {
                    sg->k[ti] = cn + 1;
                    jb->bucket = SIZE_MAX;
                    sg->score_q[ti] = cn ? INFINITY : NAN; /* NaN: an empty cell */
                    continue;
                }
                const double *wh = (all || !nkeys ? whist : wphist) + g * B;
                double cumw = 0;
                size_t cum = 0, b = 0;
                while (b + 1 < B && cumw + wh[b] < need * (1 - WSLACK)) {
                    cumw += wh[b];
                    cum += h[b++];
                }
                jb->bucket = b;
                jb->rank = cum;
                jb->need = need - cumw;
                jb->cap = h[b];
                jb->off = ncand;
                ncand += h[b];
                continue;
            }
            size_t k = quote_rank_rule(cn, tau, opts->confidence);
            sg->k[ti] = k;
            if (k > cn) {
                jb->bucket = SIZE_MAX;
                sg->score_q[ti] = cn ? INFINITY : NAN;
                continue;
            }
            size_t cum = 0, b = 0;
            while (cum + h[b] < k)
                cum += h[b++];
            jb->bucket = b;
            jb->rank = k - cum;
            jb->cap = h[b];
            jb->off = ncand;
            ncand += h[b];
        }
    }
    for (size_t ti = 0; ti < q->ntargets; ti++)
        if (wts && isinf(gl->score_q[ti])) {
            rc = etacal_error_set(err, ETACAL_ENUM, src,
                                  "the recency weights of the %zu rows add up to %g, too little for a "
                                  "finite promise at target %g (they must reach tau/(1-tau))",
                                  nfit, wseg[0], q->targets[ti]);
            goto done;
        }
    for (size_t ti = 0; ti < q->ntargets && !wts; ti++)
        if (gl->k[ti] > nfit) {
            rc = etacal_error_set(err, ETACAL_ENUM, src,
                                  "only %zu rows: a promise for target %g needs at least %zu "
                                  "calibration rows (%s must not exceed n)",
                                  nfit, q->targets[ti], quote_rule_min_n(q->targets[ti], opts->confidence),
                                  opts->confidence > 0 ? "the rank with confidence" : "rank ceil((n+1)*tau)");
            goto done;
        }
    cand = malloc((ncand ? ncand : 1) * sizeof *cand);
    if (wts)
        wcand = malloc((ncand ? ncand : 1) * sizeof *wcand);
    if (!cand || (wts && !wcand))
        goto nomem;
    /* Each row goes to the cell of every segment above it up to the first
     * that qualified (inclusive), and to the global row without a pooled
     * cell. */
    for (size_t i = 0; i < n; i++) {
        if (mask && !mask[i])
            continue;
        double sc = ratio ? y[i] / p[i] : y[i] - p[i];
        size_t bg = bucket(sc, lo_s, scale0, B);
        memset(inpool, 1, nt);
        for (uint32_t g = seghier_row(&hs, nkeys, i), L = (uint32_t)nkeys + 1; L-- > 0;
             g = (uint32_t)hs.parent[g]) {
            job *jg = &jobs[(size_t)g * nt];
            for (size_t ti = 0; ti < nt; ti++) {
                if ((inpool[ti] || (g == 0 && gall[ti])) && jg[ti].bucket == bg) {
                    if (wts)
                        wcand[jg[ti].off + jg[ti].used] = (wpair){sc, wts[i]};
                    cand[jg[ti].off + jg[ti].used++] = sc;
                }
                if (qual[(size_t)g * nt + ti])
                    inpool[ti] = 0;
            }
        }
    }
    for (size_t g = 0; g < nseg; g++)
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            job *jb = &jobs[g * q->ntargets + ti];
            if (jb->bucket == SIZE_MAX)
                continue;
            if (!wts) {
                q->segs[g].score_q[ti] = etacal_select(cand + jb->off, jb->cap, jb->rank);
                continue;
            }
            /* weighted: walk the bucket's scores in order until the mass */
            wpair *c = wcand + jb->off;
            qsort(c, jb->cap, sizeof *c, cmp_wpair);
            double cw = 0;
            size_t r = 0;
            while (r + 1 < jb->cap && cw + c[r].w < jb->need * (1 - WSLACK))
                cw += c[r++].w;
            q->segs[g].score_q[ti] = jb->cap ? c[r].s : INFINITY;
            q->segs[g].k[ti] = jb->rank + r + 1;
        }

    /* 4. The rows of the table. */
    size_t nrows = 0;
    for (size_t s = 0; s < nseg; s++)
        for (size_t ti = 0; ti < q->ntargets; ti++)
            nrows += q->segs[s].status[ti] == ETACAL_OWN_ROW;
    q->rows = calloc(nrows ? nrows : 1, sizeof *q->rows);
    if (!q->rows)
        goto nomem;
    for (size_t s = 0; s < nseg; s++) {
        const etacal_segment *g = &q->segs[s];
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            if (g->status[ti] != ETACAL_OWN_ROW)
                continue;
            etacal_quote *r = &q->rows[q->nrows++];
            r->seg = s;
            r->target = ti;
            r->method = q->method;
            /* the rows of its cell: its own, a pooled cell, or all rows */
            int all = s == 0 && gall[ti];
            r->n = all ? g->n : g->pool_n[ti];
            r->cell = nkeys == 0 || g->level == nkeys ? ETACAL_CELL_OWN : all ? ETACAL_CELL_ALL : ETACAL_CELL_REST;
            r->k = g->k[ti];
            /* Rounded up, never down, so the guarantee survives: the
             * offset to the millisecond, a factor to 1e-6. */
            if (q->method == ETACAL_METHOD_ADD) {
                r->offset_s = ceil_scaled(g->score_q[ti], 1e3);
                r->slope = 1;
            } else {
                r->offset_s = 0;
                r->slope = ceil_scaled(g->score_q[ti], 1e6);
            }
        }
    }
    goto done;

nomem:
    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
done:
    seghier_free(&hs);
    free(hist);
    free(whist);
    free(wseg);
    free(wcand);
    free(cand);
    free(jobs);
    free(order);
    free(phist);
    free(wphist);
    free(qual);
    free(gall);
    free(inpool);
    free(pw);
    if (rc) {
        etacal_quotes_destroy(q);
        return rc;
    }
    *out = q;
    return ETACAL_OK;
}
