/* SPDX-License-Identifier: GPL-3.0-or-later */
/* check.c: coverage of promises, intervals and quantile forecasts, with
 * binomial confidence intervals (binom.c), pinball loss and the interval
 * score (metrics.c), overall and per segment (segment.c).  One pass over
 * the rows; sums are compensated (Kahan-Neumaier).  The gate: one-sided
 * tests of each figure, binomial at the nominal level or, with the quote
 * table that made the promises, Beta-binomial under the law of each served
 * row's bound (Vovk 2012), and Holm's (1979) correction across them. */
#include "base.h"
#include "quote_internal.h"
#include "segment.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

const char *etacal_status_name(int status)
{
    switch (status) {
    case ETACAL_STATUS_OK: return "ok";
    case ETACAL_STATUS_UNDER: return "under";
    case ETACAL_STATUS_OVER: return "over";
    default: return "-";
    }
}

typedef struct acc {
    size_t n, hits, late;
    ksum pin, is, width, slack, lateness;
} acc;

void etacal_check_destroy(etacal_check_result *r)
{
    if (!r)
        return;
    for (size_t g = 0; g < r->nsegs; g++) {
        if (r->segs[g].keys)
            for (size_t j = 0; j < r->nkeys; j++)
                free(r->segs[g].keys[j]);
        free(r->segs[g].keys);
        free(r->segs[g].m);
    }
    free(r->segs);
    if (r->key_names)
        for (size_t j = 0; j < r->nkeys; j++)
            free(r->key_names[j]);
    free(r->key_names);
    free(r->measures);
    free(r);
}

static int level_ok(double v) { return isnan(v) || (v > 0 && v < 1); }

typedef struct qsort_ent {
    double tau;
    size_t col;
} qsort_ent;

static int cmp_q(const void *a, const void *b)
{
    double x = ((const qsort_ent *)a)->tau, y = ((const qsort_ent *)b)->tau;
    return (x > y) - (x < y);
}

static void add_row(acc *a, const etacal_measure_def *d, double y, double v, double v2)
{
    a->n++;
    switch (d->kind) {
    case ETACAL_MEASURE_UPPER:
        if (y <= v) {
            a->hits++;
            ksum_add(&a->slack, v - y);
        } else {
            a->late++;
            ksum_add(&a->lateness, y - v);
        }
        if (!isnan(d->level))
            ksum_add(&a->pin, etacal_pinball(y, v, d->level));
        break;
    case ETACAL_MEASURE_INTERVAL: /* v upper, v2 lower */
        a->hits += (v2 <= y && y <= v);
        ksum_add(&a->width, v - v2);
        if (!isnan(d->tail_lo))
            ksum_add(&a->is, etacal_interval_score_tails(y, v2, v, d->tail_lo, d->tail_hi));
        else if (!isnan(d->level))
            ksum_add(&a->is, etacal_interval_score(y, v2, v, d->level));
        break;
    default:
        a->hits += y <= v;
        ksum_add(&a->pin, etacal_pinball(y, v, d->level));
        break;
    }
}

static int finish(etacal_measure *m, const acc *a, const etacal_measure_def *d, const etacal_check_result *r,
                  etacal_error *err)
{
    memset(m, 0, sizeof *m);
    m->n = a->n;
    m->hits = a->hits;
    m->late = a->late;
    double nan = NAN;
    m->coverage = m->ci_lo = m->ci_hi = m->pinball = m->interval_score = nan;
    m->mean_width = m->mean_slack = m->mean_lateness = nan;
    m->status = ETACAL_STATUS_NONE;
    if (a->n == 0)
        return ETACAL_OK;
    double n = (double)a->n;
    m->coverage = (double)a->hits / n;
    int rc = etacal_binom_ci(r->ci, a->hits, a->n, r->confidence, &m->ci_lo, &m->ci_hi, err);
    if (rc)
        return rc;
    if (!isnan(d->nominal))
        m->status = m->ci_hi < d->nominal   ? ETACAL_STATUS_UNDER
                    : m->ci_lo > d->nominal ? ETACAL_STATUS_OVER
                                            : ETACAL_STATUS_OK;
    if (d->kind == ETACAL_MEASURE_UPPER) {
        if (!isnan(d->level))
            m->pinball = ksum_value(&a->pin) / n;
        if (a->hits)
            m->mean_slack = ksum_value(&a->slack) / (double)a->hits;
        if (a->late)
            m->mean_lateness = ksum_value(&a->lateness) / (double)a->late;
    } else if (d->kind == ETACAL_MEASURE_INTERVAL) {
        m->mean_width = ksum_value(&a->width) / n;
        if (!isnan(d->level))
            m->interval_score = ksum_value(&a->is) / n;
    } else {
        m->pinball = ksum_value(&a->pin) / n;
    }
    return ETACAL_OK;
}

typedef struct holm_ent {
    double p;
    size_t i;
} holm_ent;

static int cmp_holm(const void *a, const void *b)
{
    const holm_ent *x = a, *y = b;
    if (x->p != y->p)
        return (x->p > y->p) - (x->p < y->p);
    return (x->i > y->i) - (x->i < y->i);
}

int etacal_holm(const double *p, size_t n, double *adj, etacal_error *err)
{
    if (n == 0)
        return ETACAL_OK;
    for (size_t i = 0; i < n; i++)
        if (!(p[i] >= 0 && p[i] <= 1))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "a p-value must be in [0,1], got %g", p[i]);
    holm_ent *e = malloc(n * sizeof *e);
    if (!e)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    for (size_t i = 0; i < n; i++)
        e[i] = (holm_ent){p[i], i};
    qsort(e, n, sizeof *e, cmp_holm);
    /* Holm (1979): the j-th smallest (from 1) is compared with delta/(n-j+1);
     * the adjusted value is the running maximum of (n-j+1) p_(j), capped at 1. */
    double run = 0;
    for (size_t j = 0; j < n; j++) {
        double v = (double)(n - j) * e[j].p;
        if (v > 1)
            v = 1;
        if (v > run)
            run = v;
        adj[e[j].i] = run;
    }
    free(e);
    return ETACAL_OK;
}

/* The rank an unweighted fit gives a row of n calibration rows at tau. */
static size_t fit_rank(size_t n, double tau, double conf)
{
    size_t k = conf > 0 ? etacal_conformal_rank_conf(n, tau, conf) : etacal_conformal_rank(n, tau);
    return k < 1 ? 1 : k;
}

/* "(north, *)" for messages. */
static void row_label(char *buf, size_t size, const etacal_quotes *q, size_t seg)
{
    size_t w = 0;
    if (q->nkeys == 0) {
        snprintf(buf, size, "(global)");
        return;
    }
    w += (size_t)snprintf(buf, size, "(");
    for (size_t j = 0; j < q->nkeys && w < size; j++)
        w += (size_t)snprintf(buf + w, size - w, "%s%.40s", j ? ", " : "", q->segs[seg].keys[j]);
    if (w < size)
        snprintf(buf + w, size - w, ")");
}

/* With a table: the table row serving each key combination of ss (the
 * prefix fallback of etacal apply), the served rows in the table's order
 * as segments 1.., and *segof[c] the segment of combination c.  Fills
 * r->segs' keys, table_row, cal_n and cal_k, and r->nsegs. */
static int table_segments(etacal_check_result *r, const segset *ss, const etacal_check_opts *o, size_t ti,
                          uint32_t **segof_out, etacal_error *err)
{
    const etacal_quotes *q = o->table;
    int rc = ETACAL_OK;
    etacal_quote_index *ix = NULL;
    long *rowseg = malloc((q->nrows ? q->nrows : 1) * sizeof *rowseg);
    uint32_t *segof = calloc(ss->nseg ? ss->nseg : 1, sizeof *segof);
    if (!rowseg || !segof)
        goto nomem;
    for (size_t i = 0; i < q->nrows; i++)
        rowseg[i] = -1;
    if ((rc = etacal_quote_index_create(q, &ix, err)) != 0) {
        if (rc == ETACAL_EINVAL)
            snprintf(err->where, sizeof err->where, "%s", o->table_source);
        goto done;
    }
    /* each combination of the data's keys: the row that serves it */
    size_t first = q->nkeys ? 1 : 0;
    for (size_t c = first; c < ss->nseg; c++) {
        long row = etacal_quote_index_lookup(ix, (const char *const *)ss->keys[c], NULL, ti, NULL);
        if (row < 0) { /* the reader demands a global row for every target */
            rc = etacal_error_set(err, ETACAL_EINVAL, o->table_source, "the table has no global row for target %g",
                                  q->targets[ti]);
            goto done;
        }
        rowseg[row] = 0; /* served */
        segof[c] = (uint32_t)row; /* a row for now, a segment below */
    }
    size_t nseg = 1;
    for (size_t i = 0; i < q->nrows; i++)
        if (rowseg[i] == 0)
            rowseg[i] = (long)nseg++;
    r->segs = calloc(nseg, sizeof *r->segs);
    if (!r->segs)
        goto nomem;
    r->nsegs = nseg;
    for (size_t c = first; c < ss->nseg; c++)
        segof[c] = (uint32_t)rowseg[segof[c]];
    for (size_t g = 0; g < nseg; g++) {
        r->segs[g].table_row = -1;
        if (!(r->segs[g].keys = calloc(q->nkeys ? q->nkeys : 1, sizeof *r->segs[g].keys)))
            goto nomem;
    }
    for (size_t i = 0; i < q->nrows; i++) {
        if (rowseg[i] <= 0)
            continue;
        etacal_check_segment *sg = &r->segs[rowseg[i]];
        const etacal_quote *row = &q->rows[i];
        sg->table_row = (long)i;
        sg->cal_n = row->n;
        sg->cal_k = row->k;
        for (size_t j = 0; j < q->nkeys; j++) {
            const char *txt = q->segs[row->seg].keys[j];
            size_t len = strlen(txt);
            if (!(sg->keys[j] = malloc(len + 1)))
                goto nomem;
            memcpy(sg->keys[j], txt, len + 1);
        }
        /* The Beta law needs a rank fixed by n alone (Vovk 2012). */
        size_t want = fit_rank(row->n, q->targets[ti], q->confidence > 0 ? q->confidence : o->table_confidence);
        if (row->k != want) {
            char lab[160];
            row_label(lab, sizeof lab, q, row->seg);
            if (row->k == 0)
                rc = etacal_error_set(err, ETACAL_EINVAL, o->table_source,
                                      "row %s at target %g has no rank k, so the law of its coverage is "
                                      "unknown; check without --table",
                                      lab, q->targets[ti]);
            else
                rc = etacal_error_set(err, ETACAL_EINVAL, o->table_source,
                                      "row %s at target %g has k = %zu, not the rank %zu that a fit without "
                                      "weights gives for n = %zu: a table fitted with recency weights "
                                      "(--half-life) or edited by hand has no Beta law of coverage; check "
                                      "without --table",
                                      lab, q->targets[ti], row->k, want, row->n);
            goto done;
        }
    }
    for (size_t j = 0; j < q->nkeys; j++) {
        size_t len = 1;
        if (!(r->segs[0].keys[j] = malloc(len + 1)))
            goto nomem;
        memcpy(r->segs[0].keys[j], "*", 2);
    }
    *segof_out = segof;
    segof = NULL;
    goto done;
nomem:
    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
done:
    etacal_quote_index_destroy(ix);
    free(rowseg);
    free(segof);
    return rc;
}

/* The gate's tests and Holm's procedure across them (check.h). */
static int run_gate(etacal_check_result *r, etacal_error *err)
{
    size_t nt = 0;
    for (size_t g = 0; g < r->nsegs; g++) {
        etacal_check_segment *sg = &r->segs[g];
        for (size_t k = 0; k < r->nmeasures; k++) {
            etacal_measure *m = &sg->m[k];
            const etacal_measure_def *d = &r->measures[k];
            m->p = m->p_holm = NAN;
            if (isnan(d->nominal) || m->n == 0)
                continue;
            if (r->table_law) {
                if (g == 0 || sg->thin) /* the overall figure mixes rows' laws */
                    continue;
                m->p = etacal_betabinom_cdf(m->hits, m->n, (double)sg->cal_k,
                                            (double)(sg->cal_n + 1 - sg->cal_k));
            } else {
                if (g != 0 && sg->thin)
                    continue;
                m->p = etacal_binom_cdf(m->hits, m->n, d->nominal);
            }
            if (isnan(m->p))
                return etacal_error_set(err, ETACAL_ENUM, NULL, "the gate's p-value could not be computed");
            m->tested = 1;
            nt++;
        }
    }
    r->ntests = nt;
    if (nt == 0)
        return ETACAL_OK;
    double *p = malloc(nt * sizeof *p);
    if (!p)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    size_t i = 0;
    for (size_t g = 0; g < r->nsegs; g++)
        for (size_t k = 0; k < r->nmeasures; k++)
            if (r->segs[g].m[k].tested)
                p[i++] = r->segs[g].m[k].p;
    int rc = etacal_holm(p, nt, p, err);
    if (rc == ETACAL_OK) {
        i = 0;
        for (size_t g = 0; g < r->nsegs; g++)
            for (size_t k = 0; k < r->nmeasures; k++) {
                etacal_measure *m = &r->segs[g].m[k];
                if (!m->tested)
                    continue;
                m->p_holm = p[i++];
                m->reject = m->p_holm <= r->gate_level;
                r->nrejected += (size_t)m->reject;
            }
        r->gate_failed = r->nrejected > 0;
    }
    free(p);
    return rc;
}

int etacal_check_run(const etacal_table *t, const etacal_check_opts *o, etacal_check_result **out,
                     etacal_error *err)
{
    int rc = ETACAL_OK;
    acc *accs = NULL;
    qsort_ent *qs = NULL;
    const double **cols = NULL;
    uint32_t *segof = NULL;
    segset ss = {0};
    *out = NULL;
    size_t n = etacal_table_rows(t);
    if (n == 0)
        return etacal_error_set(err, ETACAL_ENUM, etacal_table_source(t), "no data rows to check");
    if (o->upper_col < 0 && o->nq == 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "nothing to check: give an upper bound or quantiles");
    if (o->lower_col >= 0 && o->upper_col < 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a lower bound needs an upper bound");
    if (!level_ok(o->upper_level) || !level_ok(o->lower_level))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "levels must be in (0,1)");
    for (size_t i = 0; i < o->nq; i++)
        if (!(o->q_taus[i] > 0 && o->q_taus[i] < 1))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "quantile levels must be in (0,1), got %g",
                                    o->q_taus[i]);
    double conf = o->confidence > 0 ? o->confidence : 0.95;
    if (!(conf > 0 && conf < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "confidence must be in (0,1)");
    double glevel = o->gate_level > 0 ? o->gate_level : 0.05;
    if (!(glevel > 0 && glevel < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the gate level must be in (0,1), got %g", glevel);
    long ti = -1;
    if (o->table) {
        if (!(o->table_confidence >= 0 && o->table_confidence < 1))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "the table's confidence must be in (0,1), got %g",
                                    o->table_confidence);
        if (o->upper_col < 0 || o->lower_col >= 0 || o->nq > 0 || o->nkeys > 0)
            return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                    "a check under a table's law takes one promise column at one of its "
                                    "targets, and no lower bound, quantiles or segments of its own");
        ti = etacal_quotes_find_target(o->table, o->upper_level);
        if (ti < 0)
            return etacal_error_set(err, ETACAL_EINVAL, o->table_source, "the table has no target %g",
                                    o->upper_level);
    }

    etacal_check_result *r = calloc(1, sizeof *r);
    if (!r)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    r->confidence = conf;
    r->ci = o->ci;
    r->min_rows = o->min_rows ? o->min_rows : 30;
    r->nkeys = o->table ? o->table->nkeys : o->nkeys;
    r->gate_level = glevel;
    r->table_law = o->table != NULL;
    r->target = o->table ? o->upper_level : NAN;

    /* The measures. */
    r->measures = calloc(3 + o->nq, sizeof *r->measures);
    qs = malloc((o->nq + 2) * sizeof *qs);
    size_t nqs = 0;
    if (!r->measures || !qs)
        goto nomem;
    size_t nm = 0;
    if (o->upper_col >= 0 && o->lower_col < 0) {
        r->measures[nm++] = (etacal_measure_def){ETACAL_MEASURE_UPPER, (size_t)o->upper_col, 0,
                                                 o->upper_level, o->upper_level, NAN, NAN};
    } else if (o->upper_col >= 0) {
        double cover = NAN;
        int both = !isnan(o->upper_level) && !isnan(o->lower_level);
        if (both) {
            if (!(o->upper_level > o->lower_level)) {
                rc = etacal_error_set(err, ETACAL_EINVAL, NULL,
                                      "the upper bound's level (%g) must be above the lower bound's (%g)",
                                      o->upper_level, o->lower_level);
                goto done;
            }
            cover = o->upper_level - o->lower_level;
        } else if (!isnan(o->upper_level)) {
            cover = o->upper_level;
        } else if (!isnan(o->lower_level)) {
            cover = o->lower_level;
        }
        /* Equal tails (a = 1 - b, to rounding) keep the central interval's
         * score with alpha = 1 - cover, as before; unequal ones weigh each
         * side by its own tail (metrics.h). */
        double tlo = NAN, thi = NAN;
        if (both && fabs(o->lower_level - (1 - o->upper_level)) > 1e-9) {
            tlo = o->lower_level;
            thi = o->upper_level;
        }
        r->measures[nm++] = (etacal_measure_def){ETACAL_MEASURE_INTERVAL, (size_t)o->upper_col,
                                                 (size_t)o->lower_col, cover, 1 - cover, tlo, thi};
        if (both) { /* the two bounds join the quantile forecast */
            qs[nqs++] = (qsort_ent){o->lower_level, (size_t)o->lower_col};
            qs[nqs++] = (qsort_ent){o->upper_level, (size_t)o->upper_col};
        }
    }
    for (size_t i = 0; i < o->nq; i++) {
        size_t j = 0;
        while (j < nqs && qs[j].tau != o->q_taus[i])
            j++;
        if (j < nqs) {
            if (qs[j].col == o->q_cols[i])
                continue; /* the same column at the same level, given twice */
            rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "two forecast columns at the same level %g",
                                  o->q_taus[i]);
            goto done;
        }
        qs[nqs++] = (qsort_ent){o->q_taus[i], o->q_cols[i]};
    }
    qsort(qs, nqs, sizeof *qs, cmp_q);
    size_t qfirst = nm;
    for (size_t i = 0; i < nqs; i++)
        r->measures[nm++] =
            (etacal_measure_def){ETACAL_MEASURE_QUANTILE, qs[i].col, 0, qs[i].tau, qs[i].tau, NAN, NAN};
    r->nmeasures = nm;
    r->nq_sorted = nqs;

    /* Column data of every measure, checked numeric. */
    const double *y = etacal_table_num(t, o->actual_col);
    cols = calloc(2 * nm, sizeof *cols);
    if (!cols)
        goto nomem;
    for (size_t k = 0; k < nm; k++) {
        cols[2 * k] = etacal_table_num(t, r->measures[k].col);
        cols[2 * k + 1] =
            r->measures[k].kind == ETACAL_MEASURE_INTERVAL ? etacal_table_num(t, r->measures[k].col2) : NULL;
        if (!cols[2 * k] || (r->measures[k].kind == ETACAL_MEASURE_INTERVAL && !cols[2 * k + 1]) || !y) {
            rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "forecast columns must be numeric");
            goto done;
        }
    }

    /* Segments (with a table: the rows that served the orders) and one
     * pass of sums. */
    const size_t *kcols = o->table ? o->table_key_cols : o->key_cols;
    if ((rc = segset_build(&ss, t, kcols, r->nkeys, err)) != 0)
        goto done;
    r->key_names = calloc(r->nkeys ? r->nkeys : 1, sizeof *r->key_names);
    if (!r->key_names)
        goto nomem;
    for (size_t j = 0; j < r->nkeys; j++) {
        const char *name = o->table ? o->table->key_names[j] : etacal_table_col_name(t, o->key_cols[j]);
        size_t len = strlen(name);
        if (!(r->key_names[j] = malloc(len + 1)))
            goto nomem;
        memcpy(r->key_names[j], name, len + 1);
    }
    if (o->table) {
        if ((rc = table_segments(r, &ss, o, (size_t)ti, &segof, err)) != 0)
            goto done;
    } else {
        if (!(r->segs = calloc(ss.nseg, sizeof *r->segs)))
            goto nomem;
        r->nsegs = ss.nseg;
        for (size_t g = 0; g < ss.nseg; g++) {
            r->segs[g].keys = ss.keys[g];
            r->segs[g].table_row = -1;
            ss.keys[g] = NULL;
        }
    }
    size_t ncell = r->nsegs * nm;
    accs = calloc(ncell ? ncell : 1, sizeof *accs);
    if (!accs)
        goto nomem;
    for (size_t g = 0; g < r->nsegs; g++)
        if (!(r->segs[g].m = calloc(nm ? nm : 1, sizeof *r->segs[g].m)))
            goto nomem;
    for (size_t i = 0; i < n; i++) {
        uint32_t g = segset_row(&ss, i);
        if (segof)
            g = segof[g];
        double yi = y[i];
        r->segs[g].n++;
        if (g)
            r->segs[0].n++;
        for (size_t k = 0; k < nm; k++) {
            double v = cols[2 * k][i], v2 = cols[2 * k + 1] ? cols[2 * k + 1][i] : 0;
            add_row(&accs[(size_t)g * nm + k], &r->measures[k], yi, v, v2);
            if (g)
                add_row(&accs[k], &r->measures[k], yi, v, v2);
        }
        /* crossing: a lower-tau quantile above a higher one */
        for (size_t k = qfirst; k + 1 < nm; k++) {
            if (cols[2 * k][i] > cols[2 * (k + 1)][i]) {
                r->segs[g].crossing_rows++;
                if (g)
                    r->segs[0].crossing_rows++;
                break;
            }
        }
    }
    for (size_t g = 0; g < r->nsegs; g++) {
        etacal_check_segment *sg = &r->segs[g];
        sg->thin = sg->n < r->min_rows;
        for (size_t k = 0; k < nm; k++)
            if ((rc = finish(&sg->m[k], &accs[g * nm + k], &r->measures[k], r, err)) != 0)
                goto done;
    }
    rc = run_gate(r, err);
    goto done;
nomem:
    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
done:
    segset_free(&ss);
    free(segof);
    free(accs);
    free(qs);
    free(cols);
    if (rc) {
        etacal_check_destroy(r);
        return rc;
    }
    *out = r;
    return ETACAL_OK;
}
