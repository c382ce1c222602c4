/* SPDX-License-Identifier: GPL-3.0-or-later */
/* curve.c: the cost curve of on-time targets from a quote table fitted at
 * a grid of targets and its held-out counts (holdout.c).  The on-time rates
 * carry Wilson (1927) intervals (binom.c). */
#include "base.h"
#include "results.h"
#include "quote_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

void curve_release(etacal_curve *c)
{
    if (!c)
        return;
    free(c->seg);
    free(c->pts);
    memset(c, 0, sizeof *c);
}

size_t etacal_curve_grid(double from, double to, double step, double *out, size_t max)
{
    size_t n = 0;
    for (size_t i = 0; n < max; i++) {
        double v = from + (double)i * step;
        char b[32];
        snprintf(b, sizeof b, "%.9f", v);
        v = strtod(b, NULL);
        if (v > to + 1e-12 || !(v < 1))
            break;
        out[n++] = v;
    }
    return n;
}

int curve_fill(const etacal_quotes *q, const etacal_holdout *h, double conf, etacal_curve *out,
                         etacal_error *err)
{
    memset(out, 0, sizeof *out);
    if (h->nsegs != q->nsegs || h->ntargets != q->ntargets)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the held-out counts are not those of this quote table");
    if (!(conf > 0 && conf < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "confidence must be in (0,1), got %g", conf);
    size_t nt = q->ntargets, ns = 0;
    for (size_t g = 0; g < q->nsegs; g++)
        ns += g == 0 || (q->segs[g].level == q->nkeys && h->n[g] > 0);
    out->seg = malloc(ns * sizeof *out->seg);
    out->pts = calloc(ns * (nt ? nt : 1), sizeof *out->pts);
    if (!out->seg || !out->pts) {
        curve_release(out);
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    out->nsegs = ns;
    out->ntargets = nt;
    etacal_quote_index *ix = NULL;
    int rc = etacal_quote_index_create(q, &ix, err);
    if (rc) {
        curve_release(out);
        return rc;
    }
    size_t s = 0;
    for (size_t g = 0; g < q->nsegs; g++) {
        if (g && (q->segs[g].level != q->nkeys || h->n[g] == 0))
            continue;
        out->seg[s] = g;
        size_t hn = h->n[g];
        double prev = NAN, prev_t = NAN;
        for (size_t ti = 0; ti < nt; ti++) {
            etacal_curve_point *p = &out->pts[s * nt + ti];
            /* the promise actually given: the row the quote index serves */
            long row = etacal_quote_index_lookup(ix, (const char *const *)q->segs[g].keys, NULL, ti, NULL);
            size_t up = row >= 0 ? q->rows[row].seg : 0;
            p->target = q->targets[ti];
            p->buffer = q->segs[up].score_q[ti];
            p->mean_promise_s = hn ? h->promise_sum[g * nt + ti] / (double)hn : NAN;
            p->mean_extra_s = hn ? p->mean_promise_s - h->pred_sum[g] / (double)hn : NAN;
            p->marginal_s_per_point = isnan(prev) ? NAN : (p->mean_promise_s - prev) / ((q->targets[ti] - prev_t) * 100);
            p->n = hn;
            p->hits = h->hits[g * nt + ti];
            p->ci_lo = p->ci_hi = NAN;
            etacal_error e2;
            if (hn)
                etacal_binom_wilson(p->hits, hn, conf, &p->ci_lo, &p->ci_hi, &e2);
            prev = p->mean_promise_s;
            prev_t = q->targets[ti];
        }
        s++;
    }
    etacal_quote_index_destroy(ix);
    return ETACAL_OK;
}
