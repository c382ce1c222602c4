/* SPDX-License-Identifier: GPL-3.0-or-later */
/* out_apply.c: the summary of an apply run for people (apply.h,
 * etacal_apply_write_summary): the orders read and promised, the fallbacks,
 * the clamped covariates, the mean promise per target and, with actual
 * durations, the on-time rates the promises reach. */
#include "base.h"
#include "quote_internal.h"

#include <stdio.h>

static void pct(FILE *fp, size_t hits, size_t n)
{
    if (n)
        fprintf(fp, "%.2f%% (%zu/%zu)", 100.0 * (double)hits / (double)n, hits, n);
    else
        fprintf(fp, "- (0/0)");
}

static void write_summary(FILE *fp, const etacal_quotes *q, const char *orders, const etacal_apply_opts *ao,
                          const etacal_apply_stats *st)
{
    fprintf(fp, "etacal apply: %s: %zu orders, %zu promised, %zu without a prediction, %zu malformed", orders,
            st->rows, st->promised, st->missing_pred, st->bad);
    if (q->nkeys)
        fprintf(fp, "; %zu took a less specific row than their own segment", st->fallback);
    putc('\n', fp);
    if (q->ncoef && q->ranges)
        fprintf(fp, "covariates: %zu order%s outside the range their table row was fitted on, clamped into it\n",
                st->clamped, st->clamped == 1 ? "" : "s");
    else if (q->ncoef)
        fputs("covariates: the table has no min_/max_ ranges (written before they were stored): not clamped\n", fp);
    if (st->floored)
        fprintf(fp, "%zu order%s promised 0 s: the formula gave less than 0\n", st->floored,
                st->floored == 1 ? "" : "s");
    /* the targets applied: the selected ones in order, or all */
    size_t nsel = ao->targets ? ao->ntargets : q->ntargets;
    for (size_t t = 0; t < nsel && st->promised; t++) {
        char p[ETACAL_NUM_BUFSZ];
        etacal_percent_label(q->targets[ao->targets ? ao->targets[t] : t], p);
        double mp = st->promise_sum[t] / (double)st->promised, mb = st->pred_sum / (double)st->promised;
        fprintf(fp, "mean promise for target %s%%: %.1f s (%.2f min), %.1f s (%.2f min) above the prediction\n", p,
                mp, mp / 60, mp - mb, (mp - mb) / 60);
    }
    if (ao->actual_col) {
        fprintf(fp, "on time (actual <= promise) on the %zu promised orders with an actual duration:\n",
                st->with_actual);
        for (size_t t = 0; t < nsel; t++) {
            char p[ETACAL_NUM_BUFSZ];
            etacal_percent_label(q->targets[ao->targets ? ao->targets[t] : t], p);
            fprintf(fp, "  promise for target %s%%: ", p);
            pct(fp, st->hits[t], st->with_actual);
            putc('\n', fp);
        }
        fprintf(fp, "  bare prediction:          ");
        pct(fp, st->bare_hits, st->with_actual);
        putc('\n', fp);
    }
}

int etacal_apply_write_summary(const etacal_quotes *q, const char *orders, const etacal_apply_opts *opts,
                               const etacal_apply_stats *stats, const etacal_sink *out, etacal_error *err)
{
    if (!q || !orders || !opts || !stats)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no apply run to summarise");
    size_t nsel = opts->targets ? opts->ntargets : q->ntargets;
    if (nsel > ETACAL_APPLY_MAX_TARGETS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "more than %d targets", ETACAL_APPLY_MAX_TARGETS);
    for (size_t t = 0; opts->targets && t < nsel; t++)
        if (opts->targets[t] >= q->ntargets)
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "target index %zu out of range", opts->targets[t]);
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    write_summary(fp, q, orders, opts, stats);
    return sink_fclose(fp, ETACAL_OK, err);
}
