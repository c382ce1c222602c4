/* SPDX-License-Identifier: GPL-3.0-or-later */
/* holdout.c: how a quote table does on rows it was not fitted on: each
 * held-out row gets the promise that etacal apply would give it (the most
 * specific matching row), and the rows on time are counted overall and per
 * segment. */
#include "base.h"
#include "results.h"
#include "quote_internal.h"

#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

void holdout_release(etacal_holdout *h)
{
    if (!h)
        return;
    free(h->n);
    free(h->hits);
    free(h->bare);
    free(h->promise_sum);
    free(h->pred_sum);
    memset(h, 0, sizeof *h);
}

int holdout_fill(const etacal_quotes *q, const etacal_table *t, size_t actual_col, size_t pred_col,
                          const size_t *key_cols, const size_t *x_cols, const unsigned char *mask,
                          etacal_holdout *out, etacal_error *err)
{
    memset(out, 0, sizeof *out);
    if (q->nkeys > ETACAL_MAX_KEYS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a quote table has at most %d key columns",
                                ETACAL_MAX_KEYS);
    int rc = ETACAL_OK;
    etacal_quote_index *ix = NULL;
    size_t nt = q->ntargets, ns = q->nsegs;
    out->nsegs = ns;
    out->ntargets = nt;
    out->n = calloc(ns, sizeof *out->n);
    out->hits = calloc(ns * nt, sizeof *out->hits);
    out->bare = calloc(ns, sizeof *out->bare);
    out->promise_sum = calloc(ns * nt, sizeof *out->promise_sum);
    out->pred_sum = calloc(ns, sizeof *out->pred_sum);
    if (!out->n || !out->hits || !out->bare || !out->promise_sum || !out->pred_sum) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto done;
    }
    if ((rc = etacal_quote_index_create(q, &ix, err)) != 0)
        goto done;
    const double *y = etacal_table_num(t, actual_col), *p = etacal_table_num(t, pred_col);
    const char *texts[ETACAL_MAX_KEYS + 1];
    size_t n = etacal_table_rows(t);
    for (size_t i = 0; i < n; i++) {
        if (mask && !mask[i])
            continue;
        for (size_t j = 0; j < q->nkeys; j++)
            texts[j] = etacal_table_key_text(t, key_cols[j], etacal_table_key_id(t, key_cols[j], i));
        /* the row's own segment, if the table has it */
        long own = q->nkeys ? etacal_quote_index_segment(ix, texts, NULL) : -1;
        size_t hit_bare = y[i] <= p[i];
        out->n[0]++;
        out->bare[0] += hit_bare;
        out->pred_sum[0] += p[i];
        if (own > 0) {
            out->n[own]++;
            out->bare[own] += hit_bare;
            out->pred_sum[own] += p[i];
        }
        for (size_t ti = 0; ti < nt; ti++) {
            long row = etacal_quote_index_lookup(ix, texts, NULL, ti, NULL);
            if (row < 0) {
                rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "the quote table has no global row");
                goto done;
            }
            double x[ETACAL_QR_MAX_COVARIATES];
            for (size_t j = 0; j < q->ncoef; j++)
                x[j] = etacal_table_num(t, x_cols[j])[i];
            double v = etacal_quote_index_promise(ix, row, p[i], x, NULL, NULL);
            size_t hit = y[i] <= v;
            out->hits[ti] += hit;
            out->promise_sum[ti] += v;
            if (own > 0) {
                out->hits[(size_t)own * nt + ti] += hit;
                out->promise_sum[(size_t)own * nt + ti] += v;
            }
        }
    }
done:
    etacal_quote_index_destroy(ix);
    if (rc)
        holdout_release(out);
    return rc;
}

size_t etacal_holdout_mask(const etacal_table *t, long time_col, double share, unsigned long seed,
                           unsigned char *mask)
{
    size_t n = etacal_table_rows(t), held = 0;
    for (size_t i = 0; i < n; i++)
        mask[i] = 1;
    if (!(share > 0 && share < 1) || n < 2)
        return 0;
    if (time_col >= 0) {
        const double *tm = etacal_table_num(t, (size_t)time_col);
        double *c = malloc(n * sizeof *c);
        if (!tm || !c) {
            free(c);
            return tm ? ETACAL_HOLDOUT_NOMEM : 0;
        }
        memcpy(c, tm, n * sizeof *c);
        /* the cut-off: the type-1 quantile at 1 - share */
        double cut = etacal_quantile_type1(c, n, 1 - share);
        free(c);
        for (size_t i = 0; i < n; i++)
            if (tm[i] > cut) {
                mask[i] = 0;
                held++;
            }
        return held;
    }
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    if (!r)
        return ETACAL_HOLDOUT_NOMEM;
    gsl_rng_set(r, (unsigned long)etacal_seed_stream(seed ? seed : 1, ETACAL_STREAM_HOLDOUT));
    for (size_t i = 0; i < n; i++)
        if (gsl_rng_uniform(r) < share) {
            mask[i] = 0;
            held++;
        }
    gsl_rng_free(r);
    return held;
}

void etacal_recency_weights(const double *time, size_t n, const unsigned char *mask, double half_life,
                            double *w)
{
    double newest = -INFINITY;
    for (size_t i = 0; i < n; i++)
        if ((!mask || mask[i]) && time[i] > newest)
            newest = time[i];
    for (size_t i = 0; i < n; i++)
        w[i] = exp2(-(newest - time[i]) / half_life);
}
