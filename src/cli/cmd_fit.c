/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_fit.c: `etacal fit`: read calibration rows, fit the quote table,
 * write it, and print a summary people can read. */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_KEYS 16
#define MAX_TARGETS ETACAL_APPLY_MAX_TARGETS

static const char help[] =
    "Usage: etacal fit CAL.csv --actual COL --pred COL [OPTION]...\n"
    "Fit a quote table: per segment and on-time target, the buffer to add to the\n"
    "prediction so that at least that share of orders arrives by the promise\n"
    "(one-sided split-conformal bound).\n"
    "\n"
    "  --actual COL          column of actual durations, seconds (required)\n"
    "  --pred COL            column of predicted durations, seconds (required)\n"
    "  --by COL[,COL...]     key columns that define segments (default: one global segment)\n"
    "  --target T[,T...]     on-time targets in (0,1) (default 0.9); repeatable\n"
    "  --method add|ratio|qr add: promise = pred + buffer (default);\n"
    "                        ratio: promise = pred * factor (predictions must be > 0);\n"
    "                        qr: quantile regression of actual on pred (and --x), plus a\n"
    "                        conformal correction from held-back rows\n"
    "  --x COL[,COL...]      method qr: extra covariates of the regression\n"
    "  --split F             method qr: share of each segment's rows for the regression,\n"
    "                        the rest calibrates the correction (default 0.5)\n"
    "  --seed S              method qr: seed of the random split (default 1)\n"
    "  --min-rows N          a segment with fewer rows uses the nearest level above\n"
    "                        (default 200)\n"
    "  --holdout F           fit on the other rows and report the on-time rate reached\n"
    "                        on this share of them, overall and per segment (Wilson 95%)\n"
    "  --time COL            timestamps (ISO 8601 or Unix seconds): --holdout takes the\n"
    "                        latest rows instead of a random share (--seed)\n"
    "  --half-life D         with --time: weight each row by 2^(-age/D), age from the\n"
    "                        newest row (weighted conformal for drift, and weighted\n"
    "                        regression for method qr); D like 7d, 36h\n"
    "  --confidence C        choose each rank so that the on-time rate is at least the\n"
    "                        target with probability C over the calibration draw, not\n"
    "                        only on average (Beta law of the coverage)\n"
    "  -o, --output FILE     write the table to FILE (atomically) and the summary to\n"
    "                        stdout; without -o the table goes to stdout, the summary to stderr\n"
    "  --delim D             comma (default), semicolon, tab or pipe\n"
    "  --bad-rows error|skip malformed data rows are an error (default) or skipped and counted\n"
    "  --max-bad-share F     with --bad-rows skip: fail if more than this share is bad (default 0.01)\n"
    "  --threads 1|auto      read a large file (16 MiB or more) in two halves at once\n"
    "                        when there are two CPUs (auto, the default), or with one\n"
    "  -q, --quiet           no summary\n"
    "  -h, --help            show this help and exit\n"
    "\n"
    "Rows with a missing actual or prediction (empty, NA, NaN, null) are left out and\n"
    "counted.  CAL.csv may be - for standard input.\n";

static void fmt_pct(char *buf, size_t n, size_t hits, size_t total)
{
    if (total == 0)
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, "%.2f%%", 100.0 * (double)hits / (double)total);
}

/* "global" or "(harbour, *)": how the summary names a segment. */
static void segment_label(char *buf, size_t n, const etacal_quotes *q, size_t g)
{
    if (g == 0) {
        snprintf(buf, n, "global");
        return;
    }
    size_t w = (size_t)snprintf(buf, n, "(");
    for (size_t j = 0; j < q->nkeys && w < n; j++)
        w += (size_t)snprintf(buf + w, n - w, "%s%s", j ? ", " : "", q->segs[g].keys[j]);
    if (w < n)
        snprintf(buf + w, n - w, ")");
}

/* Returns 0, or -1 when out of memory (the summary is then incomplete). */
static int print_summary(FILE *fp, const char *path, const char *pred, const etacal_table *t,
                         const etacal_quotes *q, size_t min_rows)
{
    int rc = -1;
    const etacal_read_stats *st = etacal_table_stats(t);
    const etacal_accuracy *a = &q->accuracy;
    char pct[32];
    fprintf(fp, "etacal fit: %s\n", path);
    fprintf(fp, "rows: %zu read, %zu used, %zu left out (missing actual or prediction), %zu malformed skipped\n",
            st->data_rows, st->kept, st->missing, st->bad);
    fprintf(fp, "method: %s (%s)\n", etacal_method_name(q->method),
            q->method == ETACAL_METHOD_ADD     ? "promise = prediction + buffer"
            : q->method == ETACAL_METHOD_RATIO ? "promise = prediction x factor"
                                               : "promise = offset_s + slope x prediction + coefficients x covariates; "
                                                 "the buffer column is the conformal correction");
    fmt_pct(pct, sizeof pct, a->on_time, a->n);
    fprintf(fp,
            "point accuracy of '%s': RMSE %.1f s, MAE %.1f s, mean error (actual - pred) %+.1f s, "
            "on time with no buffer %s (%zu/%zu)\n",
            pred, a->rmse, a->mae, a->mean_error, pct, a->on_time, a->n);
    putc('\n', fp);

    size_t nk = q->nkeys, nt = q->ntargets;
    int add = q->method != ETACAL_METHOD_RATIO;
    int conf = q->confidence > 0;
    size_t ncols = (nk ? nk : 1) + 2 + nt * ((add ? 2 : 1) + (conf ? 2 : 0)) + 1;
    text_table tt;
    if (tt_init(&tt, ncols) != 0)
        return -1;
    const char **cells = calloc(ncols, sizeof *cells);
    char (*buf)[96] = calloc(ncols, sizeof *buf);
    if (!cells || !buf)
        goto out;
    size_t c = 0;
    for (size_t j = 0; j < nk; j++)
        cells[c++] = q->key_names[j];
    if (nk == 0)
        cells[c++] = "segment";
    cells[c++] = "n";
    cells[c++] = "bare on-time";
    for (size_t ti = 0; ti < nt; ti++) {
        char p[ETACAL_NUM_BUFSZ];
        etacal_percent_label(q->targets[ti], p);
        snprintf(buf[c], sizeof buf[c],
                 q->method == ETACAL_METHOD_QR ? "corr@%s%% s" : add ? "buffer@%s%% s" : "factor@%s%%", p);
        cells[c] = buf[c];
        c++;
        if (add) {
            snprintf(buf[c], sizeof buf[c], "min");
            cells[c] = buf[c];
            c++;
        }
        if (conf) {
            char cp[ETACAL_NUM_BUFSZ];
            etacal_percent_label(q->confidence, cp);
            snprintf(buf[c], sizeof buf[c], "E cover");
            cells[c] = buf[c];
            c++;
            snprintf(buf[c], sizeof buf[c], "cover@%s%%", cp);
            cells[c] = buf[c];
            c++;
        }
    }
    cells[c++] = "row";
    for (size_t j = nk ? nk : 1; j < c - 1; j++)
        tt.right[j] = 1;
    tt_add(&tt, cells);
    for (size_t s = 0; s < q->nsegs; s++) {
        const etacal_segment *g = &q->segs[s];
        c = 0;
        for (size_t j = 0; j < nk; j++)
            cells[c++] = g->keys[j];
        if (nk == 0)
            cells[c++] = "*";
        snprintf(buf[c], sizeof buf[c], "%zu", g->n);
        cells[c] = buf[c];
        c++;
        fmt_pct(buf[c], sizeof buf[c], g->bare_hits, g->n);
        cells[c] = buf[c];
        c++;
        int few = 0;
        char rankmsg[48] = "";
        for (size_t ti = 0; ti < nt; ti++) {
            double v = g->score_q[ti];
            few |= g->status[ti] == ETACAL_FALLBACK_FEW_ROWS;
            if (g->status[ti] == ETACAL_FALLBACK_RANK) {
                char p[ETACAL_NUM_BUFSZ];
                etacal_percent_label(q->targets[ti], p);
                size_t l = strlen(rankmsg);
                snprintf(rankmsg + l, sizeof rankmsg - l, "%s%s%%", l ? "," : "", p);
            }
            if (isinf(v))
                snprintf(buf[c], sizeof buf[c], "unbounded");
            else if (isnan(v))
                snprintf(buf[c], sizeof buf[c], "-");
            else
                snprintf(buf[c], sizeof buf[c], add ? "%.1f" : "%.4f", v);
            cells[c] = buf[c];
            c++;
            if (add) {
                if (!isfinite(v))
                    snprintf(buf[c], sizeof buf[c], "-");
                else
                    snprintf(buf[c], sizeof buf[c], "%.2f", v / 60);
                cells[c] = buf[c];
                c++;
            }
            if (conf) {
                /* the coverage law of the bound: its mean, and what it
                 * reaches with the chosen confidence */
                size_t kk = g->k[ti], nn = g->n;
                if (q->method == ETACAL_METHOD_QR)
                    for (size_t r = 0; r < q->nrows; r++)
                        if (q->rows[r].seg == s && q->rows[r].target == ti)
                            nn = q->rows[r].n;
                int fin = kk >= 1 && kk <= nn && isfinite(v);
                snprintf(buf[c], sizeof buf[c], fin ? "%.4f" : "-", fin ? etacal_coverage_mean(nn, kk) : 0.0);
                cells[c] = buf[c];
                c++;
                snprintf(buf[c], sizeof buf[c], fin ? "%.4f" : "-",
                         fin ? floor(etacal_coverage_low(nn, kk, q->confidence) * 1e4) / 1e4 : 0.0);
                cells[c] = buf[c];
                c++;
            }
        }
        if (s == 0) {
            snprintf(buf[c], sizeof buf[c], "global");
        } else if (!few && !rankmsg[0]) {
            snprintf(buf[c], sizeof buf[c], "own");
        } else {
            /* the nearest level above with a row, per target */
            size_t first = SIZE_MAX;
            int same = 1;
            for (size_t ti = 0; ti < nt; ti++) {
                if (g->status[ti] == ETACAL_OWN_ROW)
                    continue;
                size_t up = s;
                while (up != 0 && q->segs[up].status[ti] != ETACAL_OWN_ROW)
                    up = q->segs[up].parent;
                if (first == SIZE_MAX)
                    first = up;
                same &= up == first;
            }
            char who[64];
            segment_label(who, sizeof who, q, first);
            if (few)
                snprintf(buf[c], sizeof buf[c], "uses %s (n < %zu)", who, min_rows);
            else if (same)
                snprintf(buf[c], sizeof buf[c], "uses %s at %s (k > n)", who, rankmsg);
            else
                snprintf(buf[c], sizeof buf[c], "uses a coarser level at %s (k > n)", rankmsg);
        }
        cells[c] = buf[c];
        c++;
        tt_add(&tt, cells);
    }
    if (tt_print(&tt, fp) != 0)
        goto out;
    size_t fell = 0;
    for (size_t s = 1; s < q->nsegs; s++)
        for (size_t ti = 0; ti < nt; ti++)
            if (q->segs[s].status[ti] != ETACAL_OWN_ROW) {
                fell++;
                break;
            }
    if (nk)
        fprintf(fp, "\n%zu segment%s: %zu with rows of their own for every target, %zu using a coarser level for some; table rows: %zu\n",
                q->nsegs - 1, q->nsegs == 2 ? "" : "s", q->nsegs - 1 - fell, fell, q->nrows);
    rc = 0;
out:
    free(cells);
    free(buf);
    tt_free(&tt);
    return rc;
}

static void rate_cell(char *buf, size_t n, size_t hits, size_t total)
{
    double lo, hi;
    etacal_error e;
    if (total == 0 || etacal_binom_wilson(hits, total, 0.95, &lo, &hi, &e) != ETACAL_OK)
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, "%.2f%% (%zu/%zu) %.4f-%.4f", 100.0 * (double)hits / (double)total, hits, total, lo, hi);
}

static int print_holdout(FILE *fp, const etacal_quotes *q, const etacal_holdout *h, size_t held, size_t n,
                         double share, const char *timecol)
{
    char sh[ETACAL_NUM_BUFSZ];
    etacal_percent_label(share, sh);
    fprintf(fp, "\nholdout: %zu of %zu rows held out (%s %s%%%s%s), the table fitted on the other %zu\n", held, n,
            timecol ? "the latest" : "a random", sh, timecol ? " by " : "", timecol ? timecol : "", n - held);
    fprintf(fp, "on time on the held-out rows, with Wilson 95%% intervals:\n");
    size_t nk = q->nkeys ? q->nkeys : 1, nt = q->ntargets;
    size_t ncols = nk + 1 + nt + 1;
    text_table tt;
    if (tt_init(&tt, ncols) != 0)
        return -1;
    const char *cells[MAX_KEYS + ETACAL_APPLY_MAX_TARGETS + 3];
    char buf[ETACAL_APPLY_MAX_TARGETS + 2][96];
    size_t c = 0;
    for (size_t j = 0; j < q->nkeys; j++)
        cells[c++] = q->key_names[j];
    if (!q->nkeys)
        cells[c++] = "segment";
    cells[c++] = "n";
    for (size_t ti = 0; ti < nt; ti++) {
        char p[ETACAL_NUM_BUFSZ];
        etacal_percent_label(q->targets[ti], p);
        snprintf(buf[ti], sizeof buf[ti], "promise@%s%%", p);
        cells[c++] = buf[ti];
    }
    cells[c++] = "bare prediction";
    tt_add(&tt, cells);
    tt.right[nk] = 1;
    for (size_t g = 0; g < h->nsegs; g++) {
        if (g && (q->segs[g].level != q->nkeys || h->n[g] == 0))
            continue; /* the most specific segments, and the overall figure */
        c = 0;
        for (size_t j = 0; j < q->nkeys; j++)
            cells[c++] = q->segs[g].keys[j];
        if (!q->nkeys)
            cells[c++] = "*";
        char nb[32];
        snprintf(nb, sizeof nb, "%zu", h->n[g]);
        cells[c++] = nb;
        for (size_t ti = 0; ti < nt; ti++) {
            rate_cell(buf[ti], sizeof buf[ti], h->hits[g * nt + ti], h->n[g]);
            cells[c++] = buf[ti];
        }
        rate_cell(buf[nt], sizeof buf[nt], h->bare[g], h->n[g]);
        cells[c++] = buf[nt];
        tt_add(&tt, cells);
    }
    int rc = tt_print(&tt, fp);
    tt_free(&tt);
    return rc;
}

int cmd_fit(int argc, char **argv)
{
    enum { O_ACTUAL = 256, O_PRED, O_BY, O_TARGET, O_METHOD, O_MINROWS,
           O_X, O_SPLIT, O_SEED, O_CONF, O_HOLDOUT, O_TIME, O_HALFLIFE };
    static const struct option longopts[] = {
        {"actual", required_argument, 0, O_ACTUAL}, {"pred", required_argument, 0, O_PRED},
        {"by", required_argument, 0, O_BY},         {"target", required_argument, 0, O_TARGET},
        {"method", required_argument, 0, O_METHOD}, {"min-rows", required_argument, 0, O_MINROWS},
        {"output", required_argument, 0, 'o'},      {"x", required_argument, 0, O_X},
        {"split", required_argument, 0, O_SPLIT},     {"seed", required_argument, 0, O_SEED},
        {"confidence", required_argument, 0, O_CONF}, {"holdout", required_argument, 0, O_HOLDOUT},
        {"time", required_argument, 0, O_TIME},       {"half-life", required_argument, 0, O_HALFLIFE},
        {"quiet", no_argument, 0, 'q'},             READ_OPTIONS, {"help", no_argument, 0, 'h'},
        {0, 0, 0, 0}};
    const char *actual = NULL, *pred = NULL, *output = NULL;
    char *by = NULL;
    char *keys[MAX_KEYS];
    char *xs[ETACAL_QR_MAX_COVARIATES];
    size_t nkeys = 0, ntargets = 0, min_rows = 200, nx = 0, seed = 1;
    double split = 0.5, confidence = 0, holdout = 0, halflife = 0;
    const char *timecol = NULL;
    double targets[MAX_TARGETS];
    int method = ETACAL_METHOD_ADD, quiet = 0;
    etacal_read_opts ro = {.delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01};
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:qh", longopts, NULL)) != -1) {
        switch (c) {
        case O_ACTUAL: actual = optarg; break;
        case O_PRED: pred = optarg; break;
        case O_BY:
            by = optarg;
            nkeys = 0;
            if (parse_names(by, keys, &nkeys, MAX_KEYS) != 0)
                return usage_error("fit", "--by takes up to %d comma-separated column names", MAX_KEYS);
            break;
        case O_TARGET:
            if (parse_targets(optarg, targets, &ntargets, MAX_TARGETS) != 0)
                return usage_error("fit", "--target takes on-time rates in (0,1), such as 0.9,0.95 (at most %d)",
                                   MAX_TARGETS);
            break;
        case O_METHOD:
            method = etacal_method_parse(optarg);
            if (method < 0)
                return usage_error("fit", "--method must be add, ratio or qr, not '%s'", optarg);
            break;
        case O_MINROWS:
            if (parse_size(optarg, &min_rows) != 0 || min_rows == 0)
                return usage_error("fit", "--min-rows takes a whole number >= 1");
            break;
        case 'o': output = optarg; break;
        case O_X:
            nx = 0;
            if (parse_names(optarg, xs, &nx, ETACAL_QR_MAX_COVARIATES - 1) != 0)
                return usage_error("fit", "--x takes up to %d comma-separated column names",
                                   ETACAL_QR_MAX_COVARIATES - 1);
            break;
        case O_SPLIT:
            if (parse_share(optarg, &split) != 0 || !(split > 0 && split < 1))
                return usage_error("fit", "--split takes a share in (0,1)");
            break;
        case O_SEED:
            if (parse_size(optarg, &seed) != 0)
                return usage_error("fit", "--seed takes a whole number");
            break;
        case O_HOLDOUT:
            if (parse_share(optarg, &holdout) != 0 || !(holdout > 0 && holdout < 1))
                return usage_error("fit", "--holdout takes a share in (0,1), such as 0.2");
            break;
        case O_TIME: timecol = optarg; break;
        case O_HALFLIFE:
            if (parse_duration(optarg, &halflife) != 0 || !(halflife > 0))
                return usage_error("fit", "--half-life takes a duration such as 7d, 36h, 90m or 3600 (seconds)");
            break;
        case O_CONF:
            if (parse_share(optarg, &confidence) != 0 || !(confidence > 0 && confidence < 1))
                return usage_error("fit", "--confidence takes a probability in (0,1), such as 0.95");
            break;
        case 'q': quiet = 1; break;
        case 'h': fputs(help, stdout); return 0;
        default: {
            int r = other_option(c, "fit", &ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "fit", "calibration file");
    if (nin)
        return nin;
    if (!actual || !pred)
        return usage_error("fit", "--actual and --pred are required");
    if (strcmp(actual, pred) == 0)
        return usage_error("fit", "--actual and --pred name the same column");
    static const char *reserved[] = {"target", "method", "n", "k", "offset_s", "slope"};
    for (size_t j = 0; j < nkeys; j++)
        if (strncmp(keys[j], "coef_", 5) == 0)
            return usage_error("fit", "a key column cannot be called '%s' (coef_ columns hold coefficients)",
                               keys[j]);
    for (size_t j = 0; j < nkeys; j++) {
        if (strcmp(keys[j], actual) == 0 || strcmp(keys[j], pred) == 0)
            return usage_error("fit", "'%s' cannot be both a key and a duration column", keys[j]);
        for (size_t i = 0; i < sizeof reserved / sizeof *reserved; i++)
            if (strcmp(keys[j], reserved[i]) == 0)
                return usage_error("fit", "a key column cannot be called '%s' (a quote-table column)", keys[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(keys[i], keys[j]) == 0)
                return usage_error("fit", "--by names '%s' twice", keys[j]);
    }
    if (nx && method != ETACAL_METHOD_QR)
        return usage_error("fit", "--x goes with --method qr");
    for (size_t j = 0; j < nx; j++) {
        if (strcmp(xs[j], actual) == 0 || strcmp(xs[j], pred) == 0)
            return usage_error("fit", "--x '%s' is already the actual or the prediction", xs[j]);
        for (size_t i = 0; i < nkeys; i++)
            if (strcmp(xs[j], keys[i]) == 0)
                return usage_error("fit", "'%s' cannot be both a key and a covariate", xs[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(xs[i], xs[j]) == 0)
                return usage_error("fit", "--x names '%s' twice", xs[j]);
    }
    if (ntargets == 0)
        targets[ntargets++] = 0.9;
    const char *path = argv[optind];

    etacal_colspec cols[3 + MAX_KEYS + ETACAL_QR_MAX_COVARIATES];
    unsigned flags = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_NONNEG;
    cols[0] = (etacal_colspec){actual, ETACAL_COL_NUM, flags, "duration"};
    cols[1] = (etacal_colspec){pred, ETACAL_COL_NUM,
                               flags | (method == ETACAL_METHOD_RATIO ? ETACAL_NUM_POSITIVE : 0u),
                               "prediction"};
    if (timecol && !holdout && !halflife)
        return usage_error("fit", "--time goes with --holdout or --half-life");
    if (halflife && !timecol)
        return usage_error("fit", "--half-life needs --time (the age of each row)");
    if (halflife && confidence > 0)
        return usage_error("fit", "--half-life does not go with --confidence");
    if (timecol) {
        if (strcmp(timecol, actual) == 0 || strcmp(timecol, pred) == 0)
            return usage_error("fit", "--time '%s' is already the actual or the prediction", timecol);
        for (size_t i = 0; i < nkeys; i++)
            if (strcmp(timecol, keys[i]) == 0)
                return usage_error("fit", "'%s' cannot be both a key and the time", timecol);
        for (size_t i = 0; i < nx; i++)
            if (strcmp(timecol, xs[i]) == 0)
                return usage_error("fit", "'%s' cannot be both a covariate and the time", timecol);
    }
    size_t key_cols[MAX_KEYS], x_cols[ETACAL_QR_MAX_COVARIATES];
    for (size_t j = 0; j < nkeys; j++) {
        cols[2 + j] = (etacal_colspec){keys[j], ETACAL_COL_KEY, 0, NULL};
        key_cols[j] = 2 + j;
    }
    for (size_t j = 0; j < nx; j++) {
        cols[2 + nkeys + j] =
            (etacal_colspec){xs[j], ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE, "covariate"};
        x_cols[j] = 2 + nkeys + j;
    }
    progress pg = {path, 0, -1};
    ro.progress = progress_cb;
    ro.progress_ud = &pg;

    etacal_error err;
    etacal_error_clear(&err);
    etacal_table *t = NULL;
    etacal_quotes *q = NULL;
    etacal_outfile of = {0};
    size_t ncol = 2 + nkeys + nx;
    long time_col = -1;
    if (timecol) {
        cols[ncol] = (etacal_colspec){timecol, ETACAL_COL_NUM,
                                      ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_TIME, "timestamp"};
        time_col = (long)ncol++;
    }
    unsigned char *mask = NULL;
    int rc = etacal_table_read_csv(path, cols, ncol, &ro, &t, &err);
    progress_end(&pg);
    if (rc)
        return report_error(&err);
    etacal_fit_opts fo = {method,     targets, ntargets, min_rows, x_cols, nx, split, (unsigned long)seed,
                          confidence, NULL,    NULL};
    size_t held = 0;
    etacal_holdout ho = {0};
    if (holdout > 0) {
        size_t n = etacal_table_rows(t);
        mask = malloc(n ? n : 1);
        if (!mask) {
            etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
        held = etacal_holdout_mask(t, time_col, holdout, (unsigned long)seed, mask);
        if (held == ETACAL_HOLDOUT_NOMEM) {
            etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
        if (held == 0 || held == n) {
            etacal_error_set(&err, ETACAL_ENUM, path, "--holdout %g leaves %s rows to %s", holdout,
                             held == 0 ? "no" : "all", held == 0 ? "hold out" : "fit on");
            goto fail;
        }
        fo.mask = mask;
    }
    double *wts = NULL;
    if (halflife > 0) {
        /* recency weights, the newest row of the fit having weight 1 */
        size_t n = etacal_table_rows(t);
        const double *tm = etacal_table_num(t, (size_t)time_col);
        double newest = -INFINITY;
        for (size_t i = 0; i < n; i++)
            if ((!mask || mask[i]) && tm[i] > newest)
                newest = tm[i];
        wts = malloc((n ? n : 1) * sizeof *wts);
        if (!wts) {
            etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
        for (size_t i = 0; i < n; i++)
            wts[i] = exp2(-(newest - tm[i]) / halflife);
        fo.weights = wts;
    }
    rc = etacal_quotes_fit(t, 0, 1, key_cols, nkeys, &fo, &q, &err);
    free(wts);
    if (rc)
        goto fail;
    if (mask) {
        size_t n = etacal_table_rows(t);
        for (size_t i = 0; i < n; i++)
            mask[i] = !mask[i];
        rc = etacal_quotes_holdout(q, t, 0, 1, key_cols, x_cols, mask, &ho, &err);
        if (rc)
            goto fail;
    }
    /* The summary is made in memory first: when memory runs out there,
     * no table is written either. */
    char *sbuf = NULL;
    size_t slen = 0;
    if (!quiet) {
        FILE *ms = open_memstream(&sbuf, &slen);
        int bad = !ms || print_summary(ms, path, pred, t, q, min_rows) != 0 ||
                  (mask && print_holdout(ms, q, &ho, held, etacal_table_rows(t), holdout, timecol) != 0);
        /* A memory stream fails when it cannot grow.  glibc's fclose of one
         * reports no failure of its last realloc, but then leaves the
         * buffer as the last fflush set it: so that fflush is checked. */
        if (ms && (fflush(ms) != 0 || ferror(ms)))
            bad = 1;
        if (ms && fclose(ms) != 0)
            bad = 1;
        if (!sbuf)
            bad = 1;
        if (bad) {
            free(sbuf);
            etacal_holdout_free(&ho);
            etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
    }
    rc = etacal_outfile_open(&of, output ? output : "-", &err);
    if (rc == 0)
        rc = etacal_quotes_write_csv(q, of.fp, &err);
    if (rc == 0)
        rc = etacal_outfile_commit(&of, &err);
    if (rc) {
        etacal_outfile_abort(&of);
        free(sbuf);
        etacal_holdout_free(&ho);
        goto fail;
    }
    if (!quiet) {
        FILE *fp = output ? stdout : stderr;
        fwrite(sbuf, 1, slen, fp);
        free(sbuf);
    }
    etacal_holdout_free(&ho);
    free(mask);
    etacal_quotes_destroy(q);
    etacal_table_destroy(t);
    return 0;
fail:
    free(mask);
    etacal_quotes_destroy(q);
    etacal_table_destroy(t);
    return report_error(&err);
}
