/* SPDX-License-Identifier: GPL-3.0-or-later */
/* check.c: coverage of promises, intervals and quantile forecasts, with
 * binomial confidence intervals (binom.c), pinball loss and the interval
 * score (metrics.c), overall and per segment (segment.c).  One pass over
 * the rows; sums are compensated (Kahan-Neumaier). */
#include "internal.h"

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

int etacal_check_run(const etacal_table *t, const etacal_check_opts *o, etacal_check_result **out,
                     etacal_error *err)
{
    int rc = ETACAL_OK;
    acc *accs = NULL;
    qsort_ent *qs = NULL;
    const double **cols = NULL;
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

    etacal_check_result *r = calloc(1, sizeof *r);
    if (!r)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    r->confidence = conf;
    r->ci = o->ci;
    r->min_rows = o->min_rows ? o->min_rows : 30;
    r->nkeys = o->nkeys;

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

    /* Segments and one pass of sums. */
    if ((rc = segset_build(&ss, t, o->key_cols, o->nkeys, err)) != 0)
        goto done;
    r->key_names = calloc(o->nkeys ? o->nkeys : 1, sizeof *r->key_names);
    r->segs = calloc(ss.nseg, sizeof *r->segs);
    size_t ncell = ss.nseg * nm;
    accs = calloc(ncell ? ncell : 1, sizeof *accs);
    if (!r->key_names || !r->segs || !accs)
        goto nomem;
    for (size_t j = 0; j < o->nkeys; j++) {
        const char *name = etacal_table_col_name(t, o->key_cols[j]);
        size_t len = strlen(name);
        if (!(r->key_names[j] = malloc(len + 1)))
            goto nomem;
        memcpy(r->key_names[j], name, len + 1);
    }
    r->nsegs = ss.nseg;
    for (size_t g = 0; g < ss.nseg; g++) {
        r->segs[g].keys = ss.keys[g];
        ss.keys[g] = NULL;
        if (!(r->segs[g].m = calloc(nm ? nm : 1, sizeof *r->segs[g].m)))
            goto nomem;
    }
    for (size_t i = 0; i < n; i++) {
        uint32_t g = segset_row(&ss, i);
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
    for (size_t g = 0; g < ss.nseg; g++) {
        etacal_check_segment *sg = &r->segs[g];
        sg->thin = sg->n < r->min_rows;
        for (size_t k = 0; k < nm; k++) {
            if ((rc = finish(&sg->m[k], &accs[g * nm + k], &r->measures[k], r, err)) != 0)
                goto done;
            if (sg->m[k].status == ETACAL_STATUS_UNDER && (g == 0 || !sg->thin))
                r->gate_failed = 1;
        }
    }
    goto done;
nomem:
    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
done:
    segset_free(&ss);
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
