/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_backtest.c: `etacal backtest`: would the nightly job have kept its
 * promise?  Rolling origin over time, per period and overall. */
#include "cli.h"

#include <getopt.h>
#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_KEYS 16

static const char help[] =
    "Usage: etacal backtest DATA.csv --actual COL --pred COL --time COL [OPTION]...\n"
    "Rolling-origin backtest: at each step, fit a quote table on the orders of the\n"
    "preceding window delivered by then (placed + actual <= start: no look-ahead),\n"
    "promise the next period's orders, and record their on-time rate.\n"
    "\n"
    "  --actual COL, --pred COL   as for etacal fit (required)\n"
    "  --time COL            timestamps (ISO 8601 or Unix seconds) (required)\n"
    "  --by COL[,COL...]     segments, as for etacal fit\n"
    "  --target T            the on-time target (default 0.9)\n"
    "  --window D            calibration window before each period (default 28d)\n"
    "  --every D             period length (default 1d); D like 7d, 36h, 90m, 3600\n"
    "  --half-life D         recency weights within each window, as for etacal fit\n"
    "  --adapt GAMMA         adaptive conformal inference: after each period the working\n"
    "                        level moves by GAMMA x (target - observed on-time rate);\n"
    "                        at a level >= n/(n+1) the promise is unbounded (all on\n"
    "                        time), at <= 0 there is none (all late)\n"
    "  --method add|ratio|qr as for etacal fit (default add), with --x, --split, --seed\n"
    "  --confidence C        as for etacal fit\n"
    "  --min-rows N          as for etacal fit (default 200)\n"
    "  --format text|csv|json  output format (default text)\n"
    "  -o, --output FILE     write to FILE, which appears only when complete\n"
    "  --delim D, --bad-rows error|skip, --max-bad-share F   as for etacal fit\n"
    "  -h, --help            show this help and exit\n";

/* The promise column: finite, unbounded (every order on time) or none
 * (every order late); empty for a period without orders. */
static const char *promise_name(const etacal_backtest_period *p)
{
    if (p->n == 0)
        return NULL;
    return p->promise == ETACAL_BT_UNBOUNDED ? "unbounded" : p->promise == ETACAL_BT_NONE ? "none" : "finite";
}

static const char calib_note[] = "orders placed in the window before the period start and delivered by it "
                                 "(placed + actual <= start)";

static void wilson(size_t h, size_t n, double *lo, double *hi)
{
    etacal_error e;
    *lo = *hi = NAN;
    if (n)
        etacal_binom_wilson(h, n, 0.95, lo, hi, &e);
}

int cmd_backtest(int argc, char **argv)
{
    enum { O_ACTUAL = 256, O_PRED, O_TIME, O_BY, O_TARGET, O_WINDOW, O_EVERY, O_HALF, O_ADAPT, O_METHOD, O_MINROWS,
           O_FORMAT, O_X, O_SPLIT, O_SEED, O_CONF };
    static const struct option longopts[] = {
        {"actual", required_argument, 0, O_ACTUAL},   {"pred", required_argument, 0, O_PRED},
        {"time", required_argument, 0, O_TIME},       {"by", required_argument, 0, O_BY},
        {"target", required_argument, 0, O_TARGET},   {"window", required_argument, 0, O_WINDOW},
        {"every", required_argument, 0, O_EVERY},     {"half-life", required_argument, 0, O_HALF},
        {"adapt", required_argument, 0, O_ADAPT},     {"method", required_argument, 0, O_METHOD},
        {"min-rows", required_argument, 0, O_MINROWS}, {"format", required_argument, 0, O_FORMAT},
        {"output", required_argument, 0, 'o'},        {"x", required_argument, 0, O_X},             {"split", required_argument, 0, O_SPLIT},
        {"seed", required_argument, 0, O_SEED},       {"confidence", required_argument, 0, O_CONF},
        READ_OPTIONS, {"help", no_argument, 0, 'h'},                {0, 0, 0, 0}};
    const char *actual = NULL, *pred = NULL, *timecol = NULL, *output = NULL, *format = "text";
    char *keys[MAX_KEYS], *xs[ETACAL_QR_MAX_COVARIATES];
    size_t nkeys = 0, nx = 0, seed = 1;
    etacal_backtest_opts bo = {ETACAL_METHOD_ADD, 0.9, 28 * 86400.0, 86400.0, 200, 0, 0, 0, NULL, 0, 0.5, 1};
    etacal_read_opts ro = {.delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01,
                          .threads = ETACAL_THREADS_AUTO};
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_ACTUAL: actual = optarg; break;
        case O_PRED: pred = optarg; break;
        case O_TIME: timecol = optarg; break;
        case O_BY:
            nkeys = 0;
            if (parse_names(optarg, keys, &nkeys, MAX_KEYS) != 0)
                return usage_error("backtest", "--by takes up to %d comma-separated column names", MAX_KEYS);
            break;
        case O_TARGET:
            if (parse_share(optarg, &bo.target) != 0 || !(bo.target > 0 && bo.target < 1))
                return usage_error("backtest", "--target takes one on-time rate in (0,1)");
            break;
        case O_WINDOW:
        case O_EVERY:
        case O_HALF: {
            double v;
            if (parse_duration(optarg, &v) != 0 || !(v > 0))
                return usage_error("backtest", "durations look like 28d, 1d, 36h, 90m or 3600 (seconds)");
            *(c == O_WINDOW ? &bo.window_s : c == O_EVERY ? &bo.every_s : &bo.half_life_s) = v;
            break;
        }
        case O_ADAPT:
            if (parse_share(optarg, &bo.gamma) != 0 || !(bo.gamma > 0))
                return usage_error("backtest", "--adapt takes a step gamma in (0,1], such as 0.05");
            break;
        case O_METHOD:
            bo.method = etacal_method_parse(optarg);
            if (bo.method < 0)
                return usage_error("backtest", "--method must be add, ratio or qr");
            break;
        case O_X:
            nx = 0;
            if (parse_names(optarg, xs, &nx, ETACAL_QR_MAX_COVARIATES - 1) != 0)
                return usage_error("backtest", "--x takes up to %d comma-separated column names",
                                   ETACAL_QR_MAX_COVARIATES - 1);
            break;
        case O_SPLIT:
            if (parse_share(optarg, &bo.split) != 0 || !(bo.split > 0 && bo.split < 1))
                return usage_error("backtest", "--split takes a share in (0,1)");
            break;
        case O_SEED:
            if (parse_size(optarg, &seed) != 0)
                return usage_error("backtest", "--seed takes a whole number");
            break;
        case O_CONF:
            if (parse_share(optarg, &bo.confidence) != 0 || !(bo.confidence > 0 && bo.confidence < 1))
                return usage_error("backtest", "--confidence takes a probability in (0,1)");
            break;
        case O_MINROWS:
            if (parse_size(optarg, &bo.min_rows) != 0 || bo.min_rows == 0)
                return usage_error("backtest", "--min-rows takes a whole number >= 1");
            break;
        case O_FORMAT:
            if (parse_format(optarg, "backtest", &format) != 0)
                return EXIT_USAGE;
            break;
        case 'o': output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        default: {
            int r = other_option(c, "backtest", &ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "backtest", "data file");
    if (nin)
        return nin;
    if (!actual || !pred || !timecol)
        return usage_error("backtest", "--actual, --pred and --time are required");
    if (nx && bo.method != ETACAL_METHOD_QR)
        return usage_error("backtest", "--x goes with --method qr");
    if (bo.half_life_s > 0 && bo.confidence > 0)
        return usage_error("backtest", "--half-life does not go with --confidence");
    bo.seed = (unsigned long)seed;
    const char *path = argv[optind];
    etacal_colspec cols[3 + MAX_KEYS + ETACAL_QR_MAX_COVARIATES];
    unsigned flags = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_NONNEG;
    cols[0] = (etacal_colspec){actual, ETACAL_COL_NUM, flags, "duration"};
    cols[1] = (etacal_colspec){pred, ETACAL_COL_NUM,
                               flags | (bo.method == ETACAL_METHOD_RATIO ? ETACAL_NUM_POSITIVE : 0u), "prediction"};
    cols[2] = (etacal_colspec){timecol, ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_TIME,
                               "timestamp"};
    size_t key_cols[MAX_KEYS], x_cols[ETACAL_QR_MAX_COVARIATES];
    for (size_t j = 0; j < nkeys; j++) {
        cols[3 + j] = (etacal_colspec){keys[j], ETACAL_COL_KEY, 0, NULL};
        key_cols[j] = 3 + j;
    }
    for (size_t j = 0; j < nx; j++) {
        cols[3 + nkeys + j] =
            (etacal_colspec){xs[j], ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE, "covariate"};
        x_cols[j] = 3 + nkeys + j;
    }
    bo.x_cols = x_cols;
    bo.nx = nx;
    etacal_error err;
    etacal_error_clear(&err);
    etacal_table *t = NULL;
    etacal_backtest_result r = {0};
    etacal_outfile of = {0};
    int rc = etacal_table_read_csv(path, cols, 3 + nkeys + nx, &ro, &t, &err);
    if (rc)
        return report_error(&err);
    if ((rc = etacal_backtest_run(t, 0, 1, 2, key_cols, nkeys, &bo, &r, &err)) != 0)
        goto fail;
    if ((rc = etacal_outfile_open(&of, output ? output : "-", &err)) != 0)
        goto fail;
    FILE *fp = of.fp;
    double lo, hi;
    char a[32], b[32];
    if (strcmp(format, "text") == 0) {
        char tp[ETACAL_NUM_BUFSZ];
        etacal_percent_label(bo.target, tp);
        fprintf(fp, "etacal backtest: %s, target %s%%, method %s, window %g h, period %g h%s%s\n", path, tp,
                etacal_method_name(bo.method), bo.window_s / 3600, bo.every_s / 3600,
                bo.half_life_s > 0 ? ", recency weights" : "", bo.gamma > 0 ? ", adaptive level" : "");
        fprintf(fp, "calibration: %s, as the nightly job saw them\n", calib_note);
        text_table tt;
        if (tt_init(&tt, 7) != 0) {
            etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
        const char *h[7] = {"period start", "calib", "n", "on time", "95% CI", "buffer min", "level"};
        tt_add(&tt, h);
        for (int j = 1; j < 7; j++)
            tt.right[j] = j != 4;
        for (size_t k = 0; k < r.nperiods; k++) {
            const etacal_backtest_period *p = &r.periods[k];
            char cells[6][64];
            etacal_time_format(p->start, a);
            snprintf(cells[0], sizeof cells[0], "%zu", p->calib);
            snprintf(cells[1], sizeof cells[1], "%zu", p->n);
            wilson(p->hits, p->n, &lo, &hi);
            if (p->n) {
                snprintf(cells[2], sizeof cells[2], "%.2f%% (%zu/%zu)", 100.0 * (double)p->hits / (double)p->n, p->hits, p->n);
                snprintf(cells[3], sizeof cells[3], "%.4f-%.4f", lo, hi);
            } else {
                snprintf(cells[2], sizeof cells[2], "-");
                cells[3][0] = '\0';
            }
            if (isfinite(p->mean_buffer))
                snprintf(cells[4], sizeof cells[4], "%.2f", p->mean_buffer / 60);
            else
                snprintf(cells[4], sizeof cells[4], "%s",
                         p->n == 0 ? "-" : p->promise == ETACAL_BT_UNBOUNDED ? "unbounded" : "none");
            snprintf(cells[5], sizeof cells[5], "%.4f", p->level);
            const char *row[7] = {a, cells[0], cells[1], cells[2], cells[3], cells[4], cells[5]};
            tt_add(&tt, row);
        }
        int tbad = tt_print(&tt, fp) != 0;
        tt_free(&tt);
        if (tbad) {
            etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
        wilson(r.hits, r.n, &lo, &hi);
        char mb[32];
        if (isfinite(r.mean_buffer))
            snprintf(mb, sizeof mb, "%.2f min", r.mean_buffer / 60);
        else
            snprintf(mb, sizeof mb, "-");
        fprintf(fp, "\noverall: %.2f%% on time (%zu/%zu), 95%% CI %.4f-%.4f, mean buffer %s over the %zu orders "
                    "with a finite promise\n",
                r.n ? 100.0 * (double)r.hits / (double)r.n : 0.0, r.hits, r.n, lo, hi, mb, r.finite_n);
        fprintf(fp, "promises: %zu period%s finite (%zu orders), %zu unbounded (%zu orders, all on time), "
                    "%zu none (%zu orders, all late)\n",
                r.finite_periods, r.finite_periods == 1 ? "" : "s", r.finite_n, r.unbounded_periods, r.unbounded_n,
                r.none_periods, r.none_n);
    } else if (strcmp(format, "csv") == 0) {
        fputs("period_start,period_end,calib,n,hits,on_time,ci_low,ci_high,mean_buffer_s,level,promise\n", fp);
        for (size_t k = 0; k < r.nperiods; k++) {
            const etacal_backtest_period *p = &r.periods[k];
            etacal_time_format(p->start, a);
            etacal_time_format(p->end, b);
            wilson(p->hits, p->n, &lo, &hi);
            fprintf(fp, "%s,%s,%zu,%zu,%zu,", a, b, p->calib, p->n, p->hits);
            if (p->n)
                fprintf(fp, "%.10g,%.10g,%.10g", (double)p->hits / (double)p->n, lo, hi);
            else
                fputs(",,", fp);
            fputc(',', fp);
            if (isfinite(p->mean_buffer))
                fprintf(fp, "%.10g", p->mean_buffer);
            const char *pn = promise_name(p);
            fprintf(fp, ",%.10g,%s\n", p->level, pn ? pn : "");
        }
    } else {
        json_t *root = json_object(), *ps = json_array();
        json_object_set_new(root, "etacal", json_string(ETACAL_VERSION));
        json_object_set_new(root, "file", json_string(path));
        json_object_set_new(root, "target", json_real(bo.target));
        json_object_set_new(root, "window_s", json_real(bo.window_s));
        json_object_set_new(root, "every_s", json_real(bo.every_s));
        json_object_set_new(root, "calibration", json_string(calib_note));
        for (size_t k = 0; k < r.nperiods; k++) {
            const etacal_backtest_period *p = &r.periods[k];
            etacal_time_format(p->start, a);
            etacal_time_format(p->end, b);
            wilson(p->hits, p->n, &lo, &hi);
            int has = p->n != 0;
            const char *pn = promise_name(p);
            json_array_append_new(
                ps, json_pack("{s:s,s:s,s:I,s:I,s:I,s:o,s:[o,o],s:o,s:f,s:o}", "start", a, "end", b, "calib",
                              (json_int_t)p->calib, "n", (json_int_t)p->n, "hits", (json_int_t)p->hits, "on_time",
                              has ? json_real((double)p->hits / (double)p->n) : json_null(), "ci",
                              has ? json_real(lo) : json_null(), has ? json_real(hi) : json_null(), "mean_buffer_s",
                              isfinite(p->mean_buffer) ? json_real(p->mean_buffer) : json_null(), "level", p->level,
                              "promise", pn ? json_string(pn) : json_null()));
        }
        json_object_set_new(root, "periods", ps);
        wilson(r.hits, r.n, &lo, &hi);
        json_object_set_new(root, "overall", json_pack("{s:I,s:I,s:o,s:[o,o],s:o}", "n", (json_int_t)r.n, "hits",
                                                       (json_int_t)r.hits,
                                                       "on_time", r.n ? json_real((double)r.hits / (double)r.n) : json_null(),
                                                       "ci", r.n ? json_real(lo) : json_null(),
                                                       r.n ? json_real(hi) : json_null(),
                                                       "mean_buffer_s",
                                                       isfinite(r.mean_buffer) ? json_real(r.mean_buffer) : json_null()));
        json_object_set_new(root, "promises",
                            json_pack("{s:{s:I,s:I},s:{s:I,s:I},s:{s:I,s:I}}", "finite", "periods",
                                      (json_int_t)r.finite_periods, "n", (json_int_t)r.finite_n, "unbounded",
                                      "periods", (json_int_t)r.unbounded_periods, "n", (json_int_t)r.unbounded_n,
                                      "none", "periods", (json_int_t)r.none_periods, "n", (json_int_t)r.none_n));
        rc = json_out(root, fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10),
                      output ? output : "stdout", &err);
        json_decref(root);
        if (rc)
            goto fail;
    }
    if ((rc = etacal_outfile_commit(&of, &err)) != 0)
        goto fail;
    etacal_backtest_free(&r);
    etacal_table_destroy(t);
    return 0;
fail:
    etacal_outfile_abort(&of);
    etacal_backtest_free(&r);
    etacal_table_destroy(t);
    return report_error(&err);
}
