/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_access.c: read access to a quote table for programs outside the
 * library (quote.h's accessors), so that the table's layout in memory can
 * change without breaking them.  Indices out of range give 0, NaN or NULL. */
#include "base.h"
#include "quote_internal.h"

#include <math.h>

size_t etacal_quotes_nkeys(const etacal_quotes *q) { return q->nkeys; }

const char *etacal_quotes_key_name(const etacal_quotes *q, size_t j) { return j < q->nkeys ? q->key_names[j] : NULL; }

int etacal_quotes_method(const etacal_quotes *q) { return q->method; }

size_t etacal_quotes_ntargets(const etacal_quotes *q) { return q->ntargets; }

double etacal_quotes_target(const etacal_quotes *q, size_t t) { return t < q->ntargets ? q->targets[t] : NAN; }

double etacal_quotes_confidence(const etacal_quotes *q) { return q->confidence; }

const etacal_accuracy *etacal_quotes_accuracy(const etacal_quotes *q) { return &q->accuracy; }

size_t etacal_quotes_ncoef(const etacal_quotes *q) { return q->ncoef; }

const char *etacal_quotes_coef_name(const etacal_quotes *q, size_t j)
{
    return j < q->ncoef ? q->coef_names[j] : NULL;
}

size_t etacal_quotes_nsegs(const etacal_quotes *q) { return q->nsegs; }

const char *etacal_quotes_seg_key(const etacal_quotes *q, size_t g, size_t j)
{
    return g < q->nsegs && j < q->nkeys ? q->segs[g].keys[j] : NULL;
}

const char *const *etacal_quotes_seg_keys(const etacal_quotes *q, size_t g)
{
    return g < q->nsegs ? (const char *const *)q->segs[g].keys : NULL;
}

size_t etacal_quotes_seg_level(const etacal_quotes *q, size_t g) { return g < q->nsegs ? q->segs[g].level : 0; }

size_t etacal_quotes_seg_n(const etacal_quotes *q, size_t g) { return g < q->nsegs ? q->segs[g].n : 0; }

size_t etacal_quotes_seg_bare_hits(const etacal_quotes *q, size_t g)
{
    return g < q->nsegs ? q->segs[g].bare_hits : 0;
}

size_t etacal_quotes_seg_k(const etacal_quotes *q, size_t g, size_t t)
{
    return g < q->nsegs && t < q->ntargets ? q->segs[g].k[t] : 0;
}

double etacal_quotes_seg_score(const etacal_quotes *q, size_t g, size_t t)
{
    return g < q->nsegs && t < q->ntargets ? q->segs[g].score_q[t] : NAN;
}

int etacal_quotes_seg_status(const etacal_quotes *q, size_t g, size_t t)
{
    return g < q->nsegs && t < q->ntargets ? q->segs[g].status[t] : -1;
}

size_t etacal_quotes_seg_pool_n(const etacal_quotes *q, size_t g, size_t t)
{
    return g < q->nsegs && t < q->ntargets && q->segs[g].pool_n ? q->segs[g].pool_n[t] : 0;
}

size_t etacal_quotes_nrows(const etacal_quotes *q) { return q->nrows; }

int etacal_quotes_row(const etacal_quotes *q, size_t r, etacal_quote_row *out)
{
    if (r >= q->nrows)
        return ETACAL_EINVAL;
    const etacal_quote *x = &q->rows[r];
    out->seg = x->seg;
    out->target = x->target;
    out->n = x->n;
    out->k = x->k;
    out->offset_s = x->offset_s;
    out->slope = x->slope;
    out->cell = x->cell;
    return ETACAL_OK;
}

double etacal_quotes_row_coef(const etacal_quotes *q, size_t r, size_t j)
{
    return r < q->nrows && j < q->ncoef ? q->rows[r].coef[j] : NAN;
}

int etacal_quotes_row_range(const etacal_quotes *q, size_t r, size_t j, double *lo, double *hi)
{
    if (r >= q->nrows || j >= q->ncoef || !q->rows[r].x_min)
        return 0;
    *lo = q->rows[r].x_min[j];
    *hi = q->rows[r].x_max[j];
    return 1;
}
