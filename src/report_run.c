/* SPDX-License-Identifier: GPL-3.0-or-later */
/* report_run.c: the report as one run (report.h): the fit run of fit.h at
 * the chosen target and the levels of the charts, the residuals, the
 * held-out counts, the cost curve and the backtest, handed to
 * etacal_report_write and written to the caller's sink.  The
 * page itself is report.c's; this file only gathers what it draws. */
#include "base.h"
#include "results.h"

#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

/* The levels of the cost curve, of the calibration chart and the chosen
 * target, at most this many. */
#define MAX_LEVELS 128

void etacal_report_spec_init(etacal_report_spec *s)
{
    memset(s, 0, sizeof *s);
    etacal_fitspec_init(&s->fit);
    s->fit.holdout = 0.2;
    s->window_s = 28 * 86400.0;
    s->every_s = 86400.0;
    s->thin = 30;
    s->curve_from = 0.5;
}

static void add_note(etacal_report_notes *notes, const char *fmt, ...)
{
    if (!notes || notes->n >= ETACAL_REPORT_MAX_NOTES)
        return;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(notes->text[notes->n++], ETACAL_REPORT_NOTE_SZ, fmt, ap);
    va_end(ap);
}

static int spec_check(const etacal_report_spec *s, etacal_error *err)
{
    if (!s)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no report specification");
    int rc = etacal_fitspec_check(&s->fit, err);
    if (rc)
        return rc;
    if (s->fit.ntargets > 1)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--target takes one on-time rate in (0,1), such as 0.9");
    if (s->fit.confidence > 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                "--confidence is not offered by report (use etacal fit or curve)");
    if (!(s->fit.holdout > 0))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a report needs --holdout, a share in (0,1)");
    if (!(s->window_s > 0 && s->every_s > 0))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--window and --every take positive durations");
    if (!(s->curve_from > 0 && s->curve_from < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the cost curve starts at a target in (0,1)");
    return ETACAL_OK;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* The targets of the page, ascending and distinct: the cost-curve grid and
 * the calibration levels that `fitted` rows can bound (n >= tau/(1-tau),
 * etacal_conformal_min_n), and the chosen target, which stays and says
 * so itself when it cannot be met.  Returns how many. */
static size_t page_targets(double target, size_t fitted, double *out)
{
    size_t nt = etacal_curve_grid(0.5, 0.99, 0.01, out, MAX_LEVELS);
    nt += etacal_curve_grid(0.05, 0.45, 0.05, out + nt, MAX_LEVELS - nt);
    out[nt++] = target;
    qsort(out, nt, sizeof *out, cmp_double);
    size_t w = 0;
    for (size_t i = 0; i < nt; i++)
        if ((w == 0 || out[i] != out[w - 1]) && (out[i] == target || etacal_conformal_min_n(out[i]) <= fitted))
            out[w++] = out[i];
    return w;
}

/* How many rows the run will hold out (the same etacal_holdout_mask call
 * the run makes), so that the grid holds only levels the other rows can
 * bound.  A time column the table lacks counts as none: the run then
 * fails on it by name.  ETACAL_HOLDOUT_NOMEM when out of memory. */
static size_t count_held(const etacal_fitspec *s, const etacal_table *t)
{
    long time_col = -1;
    for (size_t c = 0; s->time && c < etacal_table_cols(t); c++)
        if (strcmp(etacal_table_col_name(t, c), s->time) == 0)
            time_col = (long)c;
    size_t n = etacal_table_rows(t);
    unsigned char *mask = malloc(n ? n : 1);
    if (!mask)
        return ETACAL_HOLDOUT_NOMEM;
    size_t held = etacal_holdout_mask(t, time_col, s->holdout, s->seed, mask);
    free(mask);
    return held;
}

static int run_table(const etacal_report_spec *s, const etacal_table *t, const etacal_sink *out, etacal_report_notes *notes,
                     etacal_error *err)
{
    const etacal_fitspec *fs = &s->fit;
    double target = fs->ntargets ? fs->targets[0] : 0.9;
    size_t n = etacal_table_rows(t);
    size_t held = count_held(fs, t);
    if (held == ETACAL_HOLDOUT_NOMEM)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    double targets[MAX_LEVELS];
    size_t nt = page_targets(target, held <= n ? n - held : 0, targets);

    etacal_fit_run *run = NULL;
    etacal_curve cv = {0};
    etacal_report_hist hist = {0};
    etacal_backtest_result bt = {0};
    unsigned char *kept = NULL;
    char note[400] = "", bt_note[300] = "";
    int have_bt = 0;

    etacal_fitspec grid = *fs;
    grid.targets = targets;
    grid.ntargets = nt;
    etacal_error ge; /* err may be NULL, and the note needs the reason */
    etacal_error_clear(&ge);
    int rc = etacal_fit_table(&grid, t, &run, &ge);
    int retry = rc == ETACAL_ENUM && nt > 1 && held > 0 && held < n;
    if (rc && !retry && err)
        *err = ge;
    if (retry) {
        /* a level of the charts that cannot be fitted should not cost the
         * page: fit the chosen target alone, and say so (a holdout that
         * leaves no row on one side fails the same way at any target) */
        snprintf(note, sizeof note,
                 "the levels of the cost curve and the calibration chart could not be fitted (%s); "
                 "the page shows the chosen target only",
                 ge.msg);
        grid.targets = &target;
        grid.ntargets = 1;
        rc = etacal_fit_table(&grid, t, &run, err);
        if (rc == 0)
            add_note(notes, "%s", note);
    }
    if (rc)
        goto done;
    const etacal_quotes *q = etacal_fit_run_quotes(run);
    const unsigned char *held_mask = etacal_fit_run_held_mask(run);
    size_t actual_col = etacal_fit_run_actual_col(run), pred_col = etacal_fit_run_pred_col(run);
    long time_col = etacal_fit_run_time_col(run);
    held = etacal_fit_run_held(run);

    /* the residuals of the rows fitted on */
    if (!(kept = malloc(n ? n : 1))) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto done;
    }
    for (size_t i = 0; i < n; i++)
        kept[i] = !held_mask[i];
    if ((rc = report_hist_fill(t, actual_col, pred_col, kept, &hist, err)) != 0)
        goto done;
    if ((rc = curve_fill(q, etacal_fit_run_holdout(run), 0.95, &cv, err)) != 0)
        goto done;

    double tmin = NAN, tmax = NAN;
    if (time_col >= 0) {
        const double *tm = etacal_table_num(t, (size_t)time_col);
        for (size_t i = 0; i < n; i++) {
            tmin = i == 0 || tm[i] < tmin ? tm[i] : tmin;
            tmax = i == 0 || tm[i] > tmax ? tm[i] : tmax;
        }
        etacal_backtest_opts bo = {.method = fs->method, .target = target, .window_s = s->window_s,
                                   .every_s = s->every_s, .min_rows = fs->min_rows, .half_life_s = fs->half_life,
                                   .x_cols = etacal_fit_run_x_cols(run), .nx = fs->nx, .split = fs->split,
                                   .seed = fs->seed};
        etacal_error be;
        etacal_error_clear(&be);
        rc = backtest_fill(t, actual_col, pred_col, (size_t)time_col, etacal_fit_run_key_cols(run), fs->nkeys,
                                 &bo, &bt, &be);
        if (rc == ETACAL_ENUM) {
            /* the data are too short for this window: the page says so */
            snprintf(bt_note, sizeof bt_note, "%s", be.msg);
            add_note(notes, "no backtest: %s", be.msg);
            rc = 0;
        } else if (rc) {
            *err = be;
            goto done;
        } else {
            have_bt = 1;
        }
    }
    char how[160], sh[ETACAL_NUM_BUFSZ];
    etacal_percent_label(fs->holdout, sh);
    if (fs->time)
        snprintf(how, sizeof how, "the latest %s%% by %s", sh, fs->time);
    else
        snprintf(how, sizeof how, "a random %s%%, seed %lu", sh, fs->seed);

    etacal_report rep = {0};
    rep.title = s->title;
    rep.command = s->command;
    rep.source = etacal_table_source(t);
    rep.actual_name = fs->actual;
    rep.pred_name = fs->pred;
    rep.time_name = fs->time;
    rep.stats = etacal_table_stats(t);
    rep.time_min = tmin;
    rep.time_max = tmax;
    rep.q = q;
    rep.target = (size_t)etacal_quotes_find_target(q, target);
    rep.ho = etacal_fit_run_holdout(run);
    rep.curve = &cv;
    rep.held = held;
    rep.fitted = n - held;
    rep.held_how = how;
    rep.hist = &hist;
    rep.bt = have_bt ? &bt : NULL;
    rep.bt_note = bt_note[0] ? bt_note : NULL;
    rep.note = note[0] ? note : NULL;
    rep.half_life_s = fs->half_life;
    rep.bt_window_s = s->window_s;
    rep.bt_every_s = s->every_s;
    rep.thin = s->thin;
    rep.curve_from = s->curve_from;
    rc = etacal_report_write(&rep, out, err);
done:
    backtest_release(&bt);
    report_hist_release(&hist);
    curve_release(&cv);
    free(kept);
    etacal_fit_run_destroy(run);
    return rc;
}

int etacal_report_table(const etacal_report_spec *s, const etacal_table *t, const etacal_sink *out,
                        etacal_report_notes *notes, etacal_error *err)
{
    if (notes)
        notes->n = 0;
    int rc = spec_check(s, err);
    if (rc)
        return rc;
    if (!t || !out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no table or no output");
    return run_table(s, t, out, notes, err);
}

int etacal_report_csv(const etacal_report_spec *s, const char *in, const etacal_read_opts *ro, const etacal_sink *out,
                      etacal_report_notes *notes, etacal_error *err)
{
    if (notes)
        notes->n = 0;
    int rc = spec_check(s, err);
    if (rc)
        return rc;
    if (!in || !out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no input or no output");
    etacal_colspec cols[ETACAL_FIT_MAX_COLS];
    size_t ncol = etacal_fitspec_columns(&s->fit, cols);
    etacal_table *t = NULL;
    if ((rc = etacal_table_read_csv(in, cols, ncol, ro, &t, err)) != 0)
        return rc;
    rc = run_table(s, t, out, notes, err);
    etacal_table_destroy(t);
    return rc;
}
