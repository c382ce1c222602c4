/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_report.c: `etacal report`: one HTML page a product manager can read
 * at a glance.  Reads the calibration rows, holds out a share, fits a quote
 * table at the chosen target and at every target of the cost curve and the
 * calibration chart, measures them on the held-out rows, runs the backtest
 * when there is a time column, and hands the results to
 * etacal_report_write_html.  No statistics here. */
#include "fitargs.h"

#include <getopt.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_KEYS FIT_MAX_KEYS
#define MAX_LEVELS 128

static const char help[] =
    "Usage: etacal report CAL.csv --actual COL --pred COL [OPTION]... -o REPORT.html\n"
    "Write one self-contained HTML page (inline SVG charts, no scripts, nothing fetched)\n"
    "about a quote table: the on-time rate it reaches on held-out rows next to the bare\n"
    "prediction's, the cost curve, a calibration chart, the on-time rate per segment,\n"
    "the buffers by segment, the backtest (with --time), the residuals, the table itself\n"
    "and the command line.\n"
    "\n"
    "  --actual COL, --pred COL   as for etacal fit (required)\n"
    "  --by COL[,COL...]     segments, as for etacal fit; the grid of buffers uses the\n"
    "                        first two\n"
    "  --target T            the on-time target shown (default 0.9)\n"
    "  --method add|ratio|qr as for etacal fit (default add), with --x, --split, --seed\n"
    "  --min-rows N          as for etacal fit (default 200)\n"
    "  --holdout F           share of rows held out to measure (default 0.2)\n"
    "  --time COL            timestamps: hold out the latest rows, show the time range,\n"
    "                        and add the rolling-origin backtest\n"
    "  --window D, --every D the backtest's window and period (default 28d, 1d)\n"
    "  --half-life D         with --time: recency weights 2^(-age/D), as for etacal fit\n"
    "                        (and within each backtest window)\n"
    "  --seed S              seed of the random held-out share and of --method qr (default 1)\n"
    "  --title TEXT          the page's title (default \"Promise report\")\n"
    "  -o, --output FILE     write to FILE, which appears only when complete (default: stdout)\n"
    "  --delim D, --bad-rows error|skip, --max-bad-share F, --threads 1|auto   as for etacal fit\n"
    "  -h, --help            show this help and exit\n";

/* Appends s to the growing string *buf, quoted for a POSIX shell when it
 * holds anything but plain characters. */
static int append_arg(char **buf, size_t *len, size_t *cap, const char *s)
{
    int plain = *s != '\0';
    for (const char *p = s; *p; p++)
        if (!strchr("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_./=,:+-@%", *p))
            plain = 0;
    size_t need = *len + 4 * strlen(s) + 4;
    if (need > *cap) {
        size_t ncap = *cap ? *cap : 256;
        while (ncap < need)
            ncap *= 2;
        char *nb = realloc(*buf, ncap);
        if (!nb)
            return -1;
        *buf = nb;
        *cap = ncap;
    }
    char *w = *buf + *len;
    if (*len)
        *w++ = ' ';
    if (plain) {
        size_t l = strlen(s);
        memcpy(w, s, l);
        w += l;
    } else {
        *w++ = '\'';
        for (const char *p = s; *p; p++) {
            if (*p == '\'') {
                memcpy(w, "'\\''", 4);
                w += 4;
            } else {
                *w++ = *p;
            }
        }
        *w++ = '\'';
    }
    *w = '\0';
    *len = (size_t)(w - *buf);
    return 0;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static int run(int argc, char **argv, const char *cmdline)
{
    /* the options it shares with fit (fitargs.h), and its own */
    enum { O_TARGET1 = 700, O_WINDOW, O_EVERY, O_TITLE };
    static const struct option longopts[] = {
        {"target", required_argument, 0, O_TARGET1}, /* before FIT_OPTIONS': one target only */
        FIT_OPTIONS,
        {"window", required_argument, 0, O_WINDOW},  {"every", required_argument, 0, O_EVERY},
        {"title", required_argument, 0, O_TITLE},    {"output", required_argument, 0, 'o'},
        READ_OPTIONS,                                {"help", no_argument, 0, 'h'},
        {0, 0, 0, 0}};
    fit_args a;
    fit_args_init(&a);
    a.holdout = 0.2;
    const char *output = NULL, *title = NULL;
    double target = 0.9, window = 28 * 86400.0, every = 86400.0;
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_TARGET1:
            if (parse_share(optarg, &target) != 0 || !(target > 0 && target < 1))
                return usage_error("report", "--target takes one on-time rate in (0,1), such as 0.9");
            break;
        case O_WINDOW:
        case O_EVERY: {
            double v;
            if (parse_duration(optarg, &v) != 0 || !(v > 0))
                return usage_error("report", "durations look like 28d, 1d, 36h, 90m or 3600 (seconds)");
            *(c == O_WINDOW ? &window : &every) = v;
            break;
        }
        case O_TITLE: title = optarg; break;
        case 'o': output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        default: {
            int r = fit_option(c, "report", &a);
            if (r < 0)
                r = other_option(c, "report", &a.ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "report", "calibration file");
    if (nin)
        return nin;
    if (a.confidence > 0)
        return usage_error("report", "--confidence is not offered by report (use etacal fit or curve)");
    a.ntargets = 1;
    a.targets[0] = target;
    int u = fit_args_check(&a, "report");
    if (u)
        return u;
    const char *actual = a.actual, *pred = a.pred, *timecol = a.timecol;
    size_t nkeys = a.nkeys, nx = a.nx, seed = a.seed, min_rows = a.min_rows;
    double split = a.split, holdout = a.holdout, halflife = a.halflife;
    int method = a.method;
    etacal_read_opts ro = a.ro;
    const char *path = argv[optind];

    /* the targets: the cost-curve grid, the calibration levels and the target */
    double targets[MAX_LEVELS];
    size_t nt = etacal_curve_grid(0.5, 0.99, 0.01, targets, MAX_LEVELS);
    nt += etacal_curve_grid(0.05, 0.45, 0.05, targets + nt, MAX_LEVELS - nt);
    targets[nt++] = target;
    qsort(targets, nt, sizeof *targets, cmp_double);
    size_t w = 0;
    for (size_t i = 0; i < nt; i++)
        if (w == 0 || targets[i] != targets[w - 1])
            targets[w++] = targets[i];
    nt = w;

    etacal_colspec cols[FIT_MAX_COLS];
    size_t key_cols[MAX_KEYS], x_cols[ETACAL_QR_MAX_COVARIATES];
    long time_col;
    size_t ncol = fit_columns(&a, cols, key_cols, x_cols, &time_col);
    progress pg = {path, 0, -1};
    ro.progress = progress_cb;
    ro.progress_ud = &pg;

    etacal_error err;
    etacal_error_clear(&err);
    etacal_table *t = NULL;
    etacal_quotes *q = NULL;
    etacal_holdout ho = {0};
    etacal_curve cv = {0};
    etacal_report_hist hist = {0};
    etacal_backtest_result bt = {0};
    etacal_outfile of = {0};
    unsigned char *mask = NULL;
    double *wts = NULL;
    char bt_note[300] = "", note[400] = "";
    int have_bt = 0;
    int rc = etacal_table_read_csv(path, cols, ncol, &ro, &t, &err);
    progress_end(&pg);
    if (rc)
        return report_error(&err);
    size_t n = etacal_table_rows(t);
    size_t held = 0;
    if ((rc = holdout_rows(t, time_col, holdout, seed, path, &mask, &held, &err)) != 0)
        goto fail;
    /* the levels of the grids that the rows fitted on can bound (n >= tau/(1-tau)); the chosen target
     * stays, and says so itself when it cannot be met */
    w = 0;
    for (size_t i = 0; i < nt; i++)
        if (targets[i] == target || etacal_conformal_min_n(targets[i]) <= n - held)
            targets[w++] = targets[i];
    nt = w;
    etacal_fit_opts fo = {method, targets, nt, min_rows, x_cols, nx, split, (unsigned long)seed, 0, mask, NULL};
    if (halflife > 0) {
        wts = malloc((n ? n : 1) * sizeof *wts);
        if (!wts) {
            rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
        etacal_recency_weights(etacal_table_num(t, (size_t)time_col), n, mask, halflife, wts);
        fo.weights = wts;
    }
    rc = etacal_quotes_fit(t, 0, 1, key_cols, nkeys, &fo, &q, &err);
    if (rc == ETACAL_ENUM && nt > 1) {
        /* a level of the charts that cannot be fitted should not cost the
         * page: fit the chosen target alone, and say so */
        snprintf(note, sizeof note, "the levels of the cost curve and the calibration chart could not be fitted (%s); "
                 "the page shows the chosen target only", err.msg);
        etacal_error_clear(&err);
        targets[0] = target;
        fo.ntargets = 1;
        rc = etacal_quotes_fit(t, 0, 1, key_cols, nkeys, &fo, &q, &err);
        if (rc == 0)
            fprintf(stderr, "etacal: report: %s\n", note);
    }
    if (rc)
        goto fail;
    if ((rc = etacal_report_hist_residuals(t, 0, 1, mask, &hist, &err)) != 0)
        goto fail;
    for (size_t i = 0; i < n; i++)
        mask[i] = !mask[i];
    if ((rc = etacal_quotes_holdout(q, t, 0, 1, key_cols, x_cols, mask, &ho, &err)) != 0)
        goto fail;
    if ((rc = etacal_curve_compute(q, &ho, 0.95, &cv, &err)) != 0)
        goto fail;
    double tmin = NAN, tmax = NAN;
    if (timecol) {
        const double *tm = etacal_table_num(t, (size_t)time_col);
        for (size_t i = 0; i < n; i++) {
            tmin = i == 0 || tm[i] < tmin ? tm[i] : tmin;
            tmax = i == 0 || tm[i] > tmax ? tm[i] : tmax;
        }
        etacal_backtest_opts bo = {method, target, window, every, min_rows, halflife, 0, 0, x_cols, nx, split,
                                   (unsigned long)seed};
        etacal_error be;
        etacal_error_clear(&be);
        rc = etacal_backtest_run(t, 0, 1, (size_t)time_col, key_cols, nkeys, &bo, &bt, &be);
        if (rc == ETACAL_ENUM) {
            /* the data are too short for this window: the page says so */
            snprintf(bt_note, sizeof bt_note, "%s", be.msg);
            fprintf(stderr, "etacal: report: no backtest: %s\n", be.msg);
        } else if (rc) {
            err = be;
            goto fail;
        } else {
            have_bt = 1;
        }
    }
    char how[160];
    {
        char sh[ETACAL_NUM_BUFSZ];
        etacal_percent_label(holdout, sh);
        if (timecol)
            snprintf(how, sizeof how, "the latest %s%% by %s", sh, timecol);
        else
            snprintf(how, sizeof how, "a random %s%%, seed %zu", sh, seed);
    }
    etacal_report rep = {0};
    rep.title = title;
    rep.command = cmdline;
    rep.source = path;
    rep.actual_name = actual;
    rep.pred_name = pred;
    rep.time_name = timecol;
    rep.stats = etacal_table_stats(t);
    rep.time_min = tmin;
    rep.time_max = tmax;
    rep.q = q;
    rep.target = (size_t)etacal_quotes_find_target(q, target);
    rep.ho = &ho;
    rep.curve = &cv;
    rep.held = held;
    rep.fitted = n - held;
    rep.held_how = how;
    rep.hist = &hist;
    rep.bt = have_bt ? &bt : NULL;
    rep.bt_note = bt_note[0] ? bt_note : NULL;
    rep.note = note[0] ? note : NULL;
    rep.half_life_s = halflife;
    rep.bt_window_s = window;
    rep.bt_every_s = every;
    rep.thin = 30;
    rep.curve_from = 0.5;
    if ((rc = etacal_outfile_open(&of, output ? output : "-", &err)) != 0)
        goto fail;
    if ((rc = etacal_report_write_html(of.fp, &rep, &err)) != 0)
        goto fail;
    rc = etacal_outfile_commit(&of, &err);
fail:
    etacal_outfile_abort(&of); /* nothing left to abort after a commit */
    etacal_backtest_free(&bt);
    etacal_report_hist_free(&hist);
    etacal_curve_free(&cv);
    etacal_holdout_free(&ho);
    etacal_quotes_destroy(q);
    etacal_table_destroy(t);
    free(wts);
    free(mask);
    return rc ? report_error(&err) : 0;
}

int cmd_report(int argc, char **argv)
{
    /* the command line as typed, for the page (argv[0] is "report"), taken
     * before getopt permutes argv and parse_names cuts --by at its commas */
    char *cmdline = NULL;
    size_t len = 0, cap = 0;
    int bad = append_arg(&cmdline, &len, &cap, "etacal") != 0;
    for (int i = 0; i < argc && !bad; i++)
        bad = append_arg(&cmdline, &len, &cap, argv[i]) != 0;
    if (bad) {
        free(cmdline);
        fprintf(stderr, "etacal: out of memory\n");
        return EXIT_DATA;
    }
    int rc = run(argc, argv, cmdline);
    free(cmdline);
    return rc;
}
