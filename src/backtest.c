/* SPDX-License-Identifier: GPL-3.0-or-later */
/* backtest.c: rolling-origin evaluation of quote tables, optionally with
 * recency weights and adaptive conformal inference (Gibbs & Candes 2021,
 * "Adaptive conformal inference under distribution shift": alpha_{t+1} =
 * alpha_t + gamma (alpha - err_t), here per period, err_t its miss rate).
 * Each period is calibrated only on the rows delivered by its start.  At
 * alpha_t <= 0 (or when the rank k exceeds n) the promise is unbounded and
 * every order on time; at alpha_t >= 1 there is none and every order is
 * late; either way the level keeps moving, so that (their Lemma 4.1) it
 * stays in [-gamma, 1 + gamma] and the long-run miss rate obeys their
 * Prop. 4.1. */
#include "base.h"
#include "results.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

void backtest_release(etacal_backtest_result *r)
{
    if (!r)
        return;
    free(r->periods);
    memset(r, 0, sizeof *r);
}

int backtest_fill(const etacal_table *t, size_t actual_col, size_t pred_col, size_t time_col,
                        const size_t *key_cols, size_t nkeys, const etacal_backtest_opts *o,
                        etacal_backtest_result *out, etacal_error *err)
{
    memset(out, 0, sizeof *out);
    if (!(o->target > 0 && o->target < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "target must be in (0,1)");
    if (!(o->window_s > 0) || !(o->every_s > 0))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "window and period must be positive durations");
    size_t n = etacal_table_rows(t);
    const double *tm = etacal_table_num(t, time_col);
    if (!tm || n == 0)
        return etacal_error_set(err, ETACAL_ENUM, etacal_table_source(t), "no data rows");
    double t0 = INFINITY, t1 = -INFINITY;
    for (size_t i = 0; i < n; i++) {
        t0 = tm[i] < t0 ? tm[i] : t0;
        t1 = tm[i] > t1 ? tm[i] : t1;
    }
    double first = t0 + o->window_s;
    if (!(first <= t1))
        return etacal_error_set(err, ETACAL_ENUM, etacal_table_source(t),
                                "the data span less than one window: nothing to backtest");
    size_t np = (size_t)floor((t1 - first) / o->every_s) + 1;
    if (np > 100000)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "more than 100000 periods: choose a longer period");
    out->periods = calloc(np, sizeof *out->periods);
    unsigned char *fitm = malloc(n), *evm = malloc(n);
    double *w = o->half_life_s > 0 ? malloc(n * sizeof *w) : NULL;
    int rc = ETACAL_OK;
    if (!out->periods || !fitm || !evm || (o->half_life_s > 0 && !w)) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto done;
    }
    out->nperiods = np;
    const double *y = etacal_table_num(t, actual_col);
    if (!y) {
        rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "the actual column must be numeric");
        goto done;
    }
    double level = o->target, bufsum = 0;
    size_t bufn = 0;
    for (size_t k = 0; k < np; k++) {
        etacal_backtest_period *pd = &out->periods[k];
        pd->start = first + (double)k * o->every_s;
        pd->end = pd->start + o->every_s;
        pd->level = level;
        pd->mean_buffer = NAN;
        for (size_t i = 0; i < n; i++) {
            /* no look-ahead: the job at pd->start knows only the orders
             * delivered by then (placed + actual duration <= start) */
            fitm[i] = tm[i] >= pd->start - o->window_s && tm[i] < pd->start && tm[i] + y[i] <= pd->start;
            evm[i] = tm[i] >= pd->start && tm[i] < pd->end;
            pd->calib += fitm[i];
            pd->n += evm[i];
        }
        if (pd->n == 0)
            continue; /* no order to score: not a step of the update */
        double lv = level;
        if (lv <= 0) {
            /* alpha_t >= 1: the empty set, no promise; every order late */
            pd->promise = ETACAL_BT_NONE;
            pd->hits = 0;
        } else if (lv >= 1) {
            /* alpha_t <= 0: the unbounded promise keeps every order */
            pd->promise = ETACAL_BT_UNBOUNDED;
            pd->hits = pd->n;
        } else {
            if (w) {
                etacal_recency_weights(tm, n, fitm, o->half_life_s, w);
                for (size_t i = 0; i < n; i++)
                    w[i] = fitm[i] ? w[i] : 0;
            }
            etacal_fit_opts fo = {o->method, &lv, 1, o->min_rows, o->x_cols, o->nx, o->split, o->seed,
                                  o->confidence, fitm, w, 0};
            etacal_quotes *q = NULL;
            etacal_error e2;
            /* With no calibration row the rank ceil((0+1) level) = 1 > 0:
             * unbounded, as below. */
            int frc = pd->calib == 0 ? ETACAL_ENUM : etacal_quotes_fit(t, actual_col, pred_col, key_cols, nkeys, &fo, &q, &e2);
            if (frc != ETACAL_OK)
                etacal_quotes_destroy(q);
            if (frc == ETACAL_ENUM) {
                /* too few rows for a finite bound at this level (k > n,
                 * i.e. level > n/(n+1); weights too light; qr short of
                 * rows): the conformal bound is +infinity */
                pd->promise = ETACAL_BT_UNBOUNDED;
                pd->hits = pd->n;
            } else if (frc != ETACAL_OK) {
                char a[32];
                etacal_time_format(pd->start, a);
                rc = frc == ETACAL_ENOMEM ? etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory")
                                          : etacal_error_set(err, frc, e2.where[0] ? e2.where : NULL,
                                                             "period from %s: %s", a, e2.msg);
                goto done;
            } else {
                etacal_holdout h;
                rc = holdout_fill(q, t, actual_col, pred_col, key_cols, o->x_cols, evm, &h, err);
                etacal_quotes_destroy(q);
                if (rc)
                    goto done;
                pd->promise = ETACAL_BT_FINITE;
                pd->hits = h.hits[0];
                pd->mean_buffer = (h.promise_sum[0] - h.pred_sum[0]) / (double)h.n[0];
                bufsum += h.promise_sum[0] - h.pred_sum[0];
                bufn += h.n[0];
                holdout_release(&h);
            }
        }
        out->n += pd->n;
        out->hits += pd->hits;
        if (pd->promise == ETACAL_BT_FINITE) {
            out->finite_periods++;
            out->finite_n += pd->n;
        } else if (pd->promise == ETACAL_BT_UNBOUNDED) {
            out->unbounded_periods++;
            out->unbounded_n += pd->n;
        } else {
            out->none_periods++;
            out->none_n += pd->n;
        }
        /* Gibbs & Candes (2021) eq. 2 on the miss level alpha_t = 1 -
         * level, one step per period with its miss rate as err_t: it never
         * stops, whatever the promise was */
        if (o->gamma > 0)
            level += o->gamma * (o->target - (double)pd->hits / (double)pd->n);
    }
    out->mean_buffer = bufn ? bufsum / (double)bufn : NAN;
done:
    free(fitm);
    free(evm);
    free(w);
    if (rc)
        backtest_release(out);
    return rc;
}
