/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_qr.c: method qr of the quote-table fit: per cell (segment and
 * target), a linear quantile regression of the actual on the prediction
 * and the covariates, fitted on a seeded share of the cell's rows, and the
 * one-sided conformal correction from the others (conformalized quantile
 * regression, Romano, Patterson & Candes 2019), with the covariates clamped
 * into the fitting rows' range.  Cells are pooled as for add and ratio
 * (quote.c). */
#include "base.h"
#include "quote_internal.h"
#include "segment.h"

#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Method qr: conformalized quantile regression, one-sided (Romano,
 * Patterson & Candes 2019).  Each segment's rows are split at random (seeded)
 * into a fitting part and a calibration part.  On the first, the
 * tau-quantile regression of the actual duration on the prediction and the
 * extra covariates; on the second, the scores actual - q(x) and their
 * conformal bound s_(k), k = ceil((n_cal + 1) tau).  The promise q(x) +
 * s_(k) then covers at least tau of future orders of the segment, whatever
 * the regression got wrong. */
int quotes_fit_qr(etacal_quotes *q, const etacal_table *t, const seghier *hs, size_t actual_col, size_t pred_col,
                  const etacal_fit_opts *o, size_t min_rows, etacal_error *err)
{
    int rc = ETACAL_OK;
    size_t n = etacal_table_rows(t), nseg = hs->nseg, nx = o->nx, p = 2 + nx, nk = q->nkeys;
    const double *y = etacal_table_num(t, actual_col), *pr = etacal_table_num(t, pred_col);
    const double *xc[ETACAL_QR_MAX_COVARIATES];
    const char *names[ETACAL_QR_MAX_COVARIATES];
    names[0] = etacal_table_col_name(t, pred_col);
    for (size_t j = 0; j < nx; j++) {
        xc[j] = etacal_table_num(t, o->x_cols[j]);
        names[j + 1] = etacal_table_col_name(t, o->x_cols[j]);
    }
    double split = o->split > 0 ? o->split : 0.5;
    /* the rows of each segment: one counting sort per level */
    uint32_t *idx = malloc((nk ? nk : 1) * n * sizeof *idx), *gidx = malloc(n * sizeof *gidx);
    size_t *start = calloc(nseg + 1, sizeof *start), *fill = calloc(nseg, sizeof *fill);
    size_t *count = calloc(nseg, sizeof *count), *nbrow = calloc(nseg * q->ntargets, sizeof *nbrow);
    size_t *order = malloc(nseg * sizeof *order);
    char *qual = calloc(nseg * q->ntargets, 1), *cellrow = calloc(nseg * q->ntargets, 1);
    unsigned char *sel = malloc(n ? n : 1);
    size_t lvl_off[ETACAL_MAX_KEYS + 1] = {0};
    unsigned char *fitpart = malloc(n);
    double *buf = malloc(n * (p + 1) * sizeof *buf);
    double *wbuf = o->weights ? malloc(n * sizeof *wbuf) : NULL;
    double *coef = malloc(nseg * q->ntargets * p * sizeof *coef);
    /* per cell (segment, target): each covariate's range on its fitting part */
    double *cellrange = malloc((nseg * q->ntargets * 2 * nx + 1) * sizeof *cellrange);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!idx || !gidx || !start || !fill || !count || !nbrow || !order || !qual || !cellrow || !sel || !fitpart ||
        !buf || !coef || !cellrange || !rng ||
        (o->weights && !wbuf)) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto done;
    }
    gsl_rng_set(rng, (unsigned long)etacal_seed_stream(o->seed ? o->seed : 1, ETACAL_STREAM_QR_SPLIT));
    size_t nall = 0;
    for (size_t i = 0; i < n; i++) {
        fitpart[i] = gsl_rng_uniform(rng) < split;
        if (o->mask && !o->mask[i])
            continue;
        gidx[nall++] = (uint32_t)i;
        for (size_t L = 1; L <= nk; L++)
            count[seghier_row(hs, L, i)]++;
    }
    for (size_t g = 1; g < nseg; g++) {
        size_t L = hs->level[g];
        start[g] = lvl_off[L];
        lvl_off[L] += count[g];
    }
    for (size_t i = 0; i < n; i++) {
        if (o->mask && !o->mask[i])
            continue;
        for (size_t L = 1; L <= nk; L++) {
            uint32_t g = seghier_row(hs, L, i);
            idx[(L - 1) * n + start[g] + fill[g]++] = (uint32_t)i;
        }
    }
    /* Pooled thin cells as for methods add and ratio (see etacal_quotes_fit),
     * bottom up: the cell of segment g at target ti holds the rows of g whose
     * segments below g all failed to qualify at ti; the regression and its
     * correction are fitted on that cell.  The global cell takes the rows
     * left over, and all rows when those give no fit or no finite bound. */
    for (size_t L = nk + 1, w = 0; L-- > 0;)
        for (size_t g = 0; g < nseg; g++)
            if (hs->level[g] == L)
                order[w++] = g;
    for (size_t oi = 0; oi < nseg; oi++) {
        size_t g = order[oi];
        etacal_segment *sg = &q->segs[g];
        int global = g == 0;
        size_t L = hs->level[g];
        /* rows of the segment: all rows for the global one */
        const uint32_t *rows = global ? gidx : idx + (L - 1) * n + start[g];
        size_t nrows_g = global ? nall : count[g];
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            double tau = q->targets[ti];
            for (int all = 0; all < 2; all++) {
                /* the rows of the cell: a row of g is in it when no segment
                 * between its own and g qualified */
                size_t na = 0, nb = 0;
                for (size_t r = 0; r < nrows_g; r++) {
                    size_t i = rows[r];
                    int in = 1;
                    for (size_t Lc = nk; Lc > L && in && !all; Lc--)
                        in = !qual[(size_t)seghier_row(hs, Lc, i) * q->ntargets + ti];
                    sel[r] = (unsigned char)in;
                    na += in && fitpart[i];
                    nb += in && !fitpart[i];
                }
                if (!all)
                    sg->pool_n[ti] = na + nb;
                if (!global && (na + nb < min_rows || na <= p)) {
                    sg->status[ti] = na + nb == 0 && L < nk ? ETACAL_FALLBACK_EMPTY : ETACAL_FALLBACK_FEW_ROWS;
                    sg->score_q[ti] = NAN;
                    sg->k[ti] = 0;
                    break;
                }
                /* columns of the fitting part, then of the calibration part
                 * (with recency weights, a weight column after each part) */
                double *fy = buf, *fx = buf + na, *cy = buf + na * (p + 1), *cx = cy + nb;
                double *fw = wbuf, *cw = wbuf ? wbuf + na : NULL;
                size_t wa = 0, wb = 0;
                for (size_t r = 0; r < nrows_g; r++) {
                    if (!sel[r])
                        continue;
                    size_t i = rows[r];
                    if (fitpart[i]) {
                        fy[wa] = y[i];
                        fx[wa] = pr[i];
                        for (size_t j = 0; j < nx; j++)
                            fx[(j + 1) * na + wa] = xc[j][i];
                        if (fw)
                            fw[wa] = o->weights[i];
                        wa++;
                    } else {
                        cy[wb] = y[i];
                        cx[wb] = pr[i];
                        for (size_t j = 0; j < nx; j++)
                            cx[(j + 1) * nb + wb] = xc[j][i];
                        if (cw)
                            cw[wb] = o->weights[i];
                        wb++;
                    }
                }
                const double *fcols[ETACAL_QR_MAX_COVARIATES];
                for (size_t j = 0; j <= nx; j++)
                    fcols[j] = fx + j * na;
                /* The covariates' range on the fitting part: the regression
                 * says nothing beyond it, so the promise clamps covariates
                 * into it (promise.c), and so do the calibration scores
                 * below, which makes the conformal bound that of the clamped
                 * formula. */
                double *xlo = cellrange + (g * q->ntargets + ti) * 2 * nx, *xhi = xlo + nx;
                for (size_t j = 0; j < nx; j++) {
                    const double *col = fx + (j + 1) * na;
                    xlo[j] = xhi[j] = na ? col[0] : 0;
                    for (size_t r = 1; r < na; r++) {
                        if (col[r] < xlo[j])
                            xlo[j] = col[r];
                        if (col[r] > xhi[j])
                            xhi[j] = col[r];
                    }
                }
                double *b = coef + (g * q->ntargets + ti) * p;
                etacal_qr_result res;
                etacal_error e2;
                etacal_qr_opts qo = {0};
                qo.seed = o->seed;
                qo.threads = o->threads;
                int frc = na > p ? etacal_qr_fit(fy, fcols, nx + 1, fw, na, tau, names, &qo, &res, &e2)
                                 : ETACAL_EINVAL;
                if (frc == ETACAL_ENOMEM) { /* not a reason to fall back: an error */
                    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                    goto done;
                }
                if (frc != ETACAL_OK && !global) {
                    sg->status[ti] = ETACAL_FALLBACK_FEW_ROWS;
                    sg->score_q[ti] = NAN;
                    break;
                }
                if (frc != ETACAL_OK && !all)
                    continue; /* the global cell of the rows left over: all rows instead */
                if (frc != ETACAL_OK) {
                    if (na <= p)
                        etacal_error_set(&e2, ETACAL_ENUM, NULL, "%zu rows to fit the regression", na);
                    rc = etacal_error_set(err, e2.code, etacal_table_source(t), "method qr, all rows: %s", e2.msg);
                    goto done;
                }
                memcpy(b, res.coef, p * sizeof *b);
                /* the conformal correction from the calibration part */
                size_t k;
                double *scores = malloc((nb ? nb : 1) * sizeof *scores);
                if (!scores) {
                    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                    goto done;
                }
                for (size_t r = 0; r < nb; r++) {
                    double f = b[0] + b[1] * cx[r];
                    for (size_t j = 0; j < nx; j++) {
                        double xj = cx[(j + 1) * nb + r];
                        f += b[j + 2] * (xj < xlo[j] ? xlo[j] : xj > xhi[j] ? xhi[j] : xj);
                    }
                    scores[r] = cy[r] - f;
                }
                double corr;
                if (cw) {
                    corr = quote_weighted_upper(scores, cw, nb, tau, &k);
                } else {
                    k = quote_rank_rule(nb, tau, o->confidence);
                    corr = k <= nb ? etacal_select(scores, nb, k) : INFINITY;
                }
                free(scores);
                if (isnan(corr)) {
                    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                    goto done;
                }
                sg->k[ti] = k;
                sg->score_q[ti] = corr;
                sg->status[ti] = isinf(corr) ? ETACAL_FALLBACK_RANK : ETACAL_OWN_ROW;
                if (global && isinf(corr) && !all) {
                    sg->status[ti] = ETACAL_OWN_ROW;
                    continue;
                }
                if (global && isinf(corr)) {
                    rc = etacal_error_set(err, ETACAL_ENUM, etacal_table_source(t),
                                          "method qr: %zu calibration rows; target %g needs at least %zu", nb, tau,
                                          quote_rule_min_n(tau, o->confidence));
                    goto done;
                }
                qual[g * q->ntargets + ti] = !isinf(corr);
                nbrow[g * q->ntargets + ti] = nb;
                cellrow[g * q->ntargets + ti] = (char)(nk == 0 || L == nk ? ETACAL_CELL_OWN
                                                       : all            ? ETACAL_CELL_ALL
                                                                        : ETACAL_CELL_REST);
                break;
            }
        }
    }
    /* rows of the table */
    size_t nrows = 0;
    for (size_t g = 0; g < nseg; g++)
        for (size_t ti = 0; ti < q->ntargets; ti++)
            nrows += q->segs[g].status[ti] == ETACAL_OWN_ROW;
    q->rows = calloc(nrows ? nrows : 1, sizeof *q->rows);
    q->ncoef = nx;
    q->coef_names = calloc(nx ? nx : 1, sizeof *q->coef_names);
    size_t ncoefs = nrows * nx;
    q->coefs = calloc(ncoefs ? ncoefs : 1, sizeof *q->coefs);
    q->ranges = calloc(ncoefs ? 2 * ncoefs : 1, sizeof *q->ranges);
    if (!q->rows || !q->coef_names || !q->coefs || !q->ranges) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto done;
    }
    for (size_t j = 0; j < nx; j++) {
        size_t len = strlen(names[j + 1]);
        if (!(q->coef_names[j] = malloc(len + 1))) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        memcpy(q->coef_names[j], names[j + 1], len + 1);
    }
    for (size_t g = 0; g < nseg; g++) {
        const etacal_segment *sg = &q->segs[g];
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            if (sg->status[ti] != ETACAL_OWN_ROW)
                continue;
            const double *b = coef + (g * q->ntargets + ti) * p;
            etacal_quote *r = &q->rows[q->nrows];
            r->seg = g;
            r->target = ti;
            r->method = ETACAL_METHOD_QR;
            r->k = sg->k[ti];
            r->n = 0; /* set below: the calibration rows */
            r->offset_s = ceil_scaled(b[0] + sg->score_q[ti], 1e3);
            r->slope = b[1];
            r->coef = q->coefs + q->nrows * nx;
            r->x_min = q->ranges + q->nrows * 2 * nx;
            r->x_max = r->x_min + nx;
            const double *cr = cellrange + (g * q->ntargets + ti) * 2 * nx;
            for (size_t j = 0; j < nx; j++) {
                r->coef[j] = b[j + 2];
                r->x_min[j] = cr[j];
                r->x_max[j] = cr[nx + j];
            }
            q->nrows++;
        }
    }
    /* n of a row: the calibration rows of its cell */
    for (size_t rr = 0; rr < q->nrows; rr++) {
        size_t c = q->rows[rr].seg * q->ntargets + q->rows[rr].target;
        q->rows[rr].n = nbrow[c];
        q->rows[rr].cell = cellrow[c];
    }
done:
    free(idx);
    free(gidx);
    free(start);
    free(fill);
    free(count);
    free(nbrow);
    free(order);
    free(qual);
    free(cellrow);
    free(sel);
    free(fitpart);
    free(buf);
    free(wbuf);
    free(coef);
    free(cellrange);
    gsl_rng_free(rng);
    return rc;
}
