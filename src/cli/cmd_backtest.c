/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_backtest.c: `etacal backtest`: would the nightly job have kept its
 * promise?  Rolling origin over time, per period and overall.  The options
 * become an etacal_backtest_opts; the library replays (etacal_backtest_run)
 * and writes the result (etacal_backtest_write). */
#include "cli.h"

#include <getopt.h>
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

typedef struct bt_args {
    const char *actual, *pred, *timecol, *output, *format, *path;
    char *keys[MAX_KEYS], *xs[ETACAL_QR_MAX_COVARIATES];
    size_t nkeys, nx, seed;
    etacal_backtest_opts bo;
    etacal_read_opts ro;
} bt_args;

enum { O_ACTUAL = 256, O_PRED, O_TIME, O_BY, O_TARGET, O_WINDOW, O_EVERY, O_HALF, O_ADAPT, O_METHOD, O_MINROWS,
       O_FORMAT, O_X, O_SPLIT, O_SEED, O_CONF };

/* One option with a value to check: 0, or the exit status. */
static int bt_option(int c, bt_args *a)
{
    etacal_backtest_opts *bo = &a->bo;
    double v;
    switch (c) {
    case O_BY:
        a->nkeys = 0;
        if (parse_names(optarg, a->keys, &a->nkeys, MAX_KEYS) != 0)
            return usage_error("backtest", "--by takes up to %d comma-separated column names", MAX_KEYS);
        return 0;
    case O_TARGET:
        if (parse_share(optarg, &bo->target) != 0 || !(bo->target > 0 && bo->target < 1))
            return usage_error("backtest", "--target takes one on-time rate in (0,1)");
        return 0;
    case O_WINDOW:
    case O_EVERY:
    case O_HALF:
        if (parse_duration(optarg, &v) != 0 || !(v > 0))
            return usage_error("backtest", "durations look like 28d, 1d, 36h, 90m or 3600 (seconds)");
        *(c == O_WINDOW ? &bo->window_s : c == O_EVERY ? &bo->every_s : &bo->half_life_s) = v;
        return 0;
    case O_ADAPT:
        if (parse_share(optarg, &bo->gamma) != 0 || !(bo->gamma > 0))
            return usage_error("backtest", "--adapt takes a step gamma in (0,1], such as 0.05");
        return 0;
    case O_METHOD:
        bo->method = etacal_method_parse(optarg);
        if (bo->method < 0)
            return usage_error("backtest", "--method must be add, ratio or qr");
        return 0;
    case O_X:
        a->nx = 0;
        if (parse_names(optarg, a->xs, &a->nx, ETACAL_QR_MAX_COVARIATES - 1) != 0)
            return usage_error("backtest", "--x takes up to %d comma-separated column names",
                               ETACAL_QR_MAX_COVARIATES - 1);
        return 0;
    case O_SPLIT:
        if (parse_share(optarg, &bo->split) != 0 || !(bo->split > 0 && bo->split < 1))
            return usage_error("backtest", "--split takes a share in (0,1)");
        return 0;
    case O_SEED:
        if (parse_size(optarg, &a->seed) != 0)
            return usage_error("backtest", "--seed takes a whole number");
        return 0;
    case O_CONF:
        if (parse_share(optarg, &bo->confidence) != 0 || !(bo->confidence > 0 && bo->confidence < 1))
            return usage_error("backtest", "--confidence takes a probability in (0,1)");
        return 0;
    case O_MINROWS:
        if (parse_size(optarg, &bo->min_rows) != 0 || bo->min_rows == 0)
            return usage_error("backtest", "--min-rows takes a whole number >= 1");
        return 0;
    case O_FORMAT: return parse_format(optarg, "backtest", &a->format) != 0 ? EXIT_USAGE : 0;
    default: return -1;
    }
}

/* Parses the command line into a: -1 to go on, else the exit status. */
static int parse_options(int argc, char **argv, bt_args *a)
{
    static const struct option longopts[] = {
        {"actual", required_argument, 0, O_ACTUAL},   {"pred", required_argument, 0, O_PRED},
        {"time", required_argument, 0, O_TIME},       {"by", required_argument, 0, O_BY},
        {"target", required_argument, 0, O_TARGET},   {"window", required_argument, 0, O_WINDOW},
        {"every", required_argument, 0, O_EVERY},     {"half-life", required_argument, 0, O_HALF},
        {"adapt", required_argument, 0, O_ADAPT},     {"method", required_argument, 0, O_METHOD},
        {"min-rows", required_argument, 0, O_MINROWS}, {"format", required_argument, 0, O_FORMAT},
        {"output", required_argument, 0, 'o'},        {"x", required_argument, 0, O_X},
        {"split", required_argument, 0, O_SPLIT},     {"seed", required_argument, 0, O_SEED},
        {"confidence", required_argument, 0, O_CONF}, READ_OPTIONS,
        {"help", no_argument, 0, 'h'},                {0, 0, 0, 0}};
    int c, r;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_ACTUAL: a->actual = optarg; break;
        case O_PRED: a->pred = optarg; break;
        case O_TIME: a->timecol = optarg; break;
        case 'o': a->output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        default:
            r = bt_option(c, a);
            if (r < 0)
                r = other_option(c, "backtest", &a->ro, argv);
            if (r)
                return r;
            break;
        }
    }
    if ((r = one_input(argc, argv, "backtest", "data file")) != 0)
        return r;
    a->path = argv[optind];
    if ((r = cli_check_output("backtest", a->output, &a->path, 1)) != 0)
        return r;
    if (!a->actual || !a->pred || !a->timecol)
        return usage_error("backtest", "--actual, --pred and --time are required");
    if (a->nx && a->bo.method != ETACAL_METHOD_QR)
        return usage_error("backtest", "--x goes with --method qr");
    if (a->bo.half_life_s > 0 && a->bo.confidence > 0)
        return usage_error("backtest", "--half-life does not go with --confidence");
    a->bo.seed = (unsigned long)a->seed;
    return -1;
}

static int format_code(const char *f)
{
    return strcmp(f, "json") == 0 ? ETACAL_FORMAT_JSON : strcmp(f, "csv") == 0 ? ETACAL_FORMAT_CSV : ETACAL_FORMAT_TEXT;
}

/* Reads the data, replays, writes: the exit status. */
static int run(bt_args *a)
{
    etacal_colspec cols[3 + MAX_KEYS + ETACAL_QR_MAX_COVARIATES];
    unsigned flags = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_NONNEG;
    cols[0] = (etacal_colspec){a->actual, ETACAL_COL_NUM, flags, "duration"};
    cols[1] = (etacal_colspec){a->pred, ETACAL_COL_NUM,
                               flags | (a->bo.method == ETACAL_METHOD_RATIO ? ETACAL_NUM_POSITIVE : 0u), "prediction"};
    cols[2] = (etacal_colspec){a->timecol, ETACAL_COL_NUM,
                               ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_TIME, "timestamp"};
    size_t key_cols[MAX_KEYS], x_cols[ETACAL_QR_MAX_COVARIATES];
    for (size_t j = 0; j < a->nkeys; j++) {
        cols[3 + j] = (etacal_colspec){a->keys[j], ETACAL_COL_KEY, 0, NULL};
        key_cols[j] = 3 + j;
    }
    for (size_t j = 0; j < a->nx; j++) {
        cols[3 + a->nkeys + j] =
            (etacal_colspec){a->xs[j], ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE, "covariate"};
        x_cols[j] = 3 + a->nkeys + j;
    }
    a->bo.x_cols = x_cols;
    a->bo.nx = a->nx;
    etacal_error err;
    etacal_error_clear(&err);
    etacal_table *t = NULL;
    etacal_backtest_result *r = NULL;
    cliout of = {0};
    int rc = etacal_table_read_csv(cli_input(a->path), cols, 3 + a->nkeys + a->nx, &a->ro, &t, &err);
    if (rc == 0)
        rc = etacal_backtest_run(t, 0, 1, 2, key_cols, a->nkeys, &a->bo, &r, &err);
    if (rc == 0)
        rc = cliout_open(&of, a->output, &err);
    if (rc == 0) {
        rc = etacal_backtest_write(r, &a->bo, a->path, format_code(a->format), &of.sink, &err);
        if (rc == 0)
            rc = cliout_commit(&of, &err);
        cliout_close(&of);
    }
    etacal_backtest_destroy(r);
    etacal_table_destroy(t);
    return rc ? report_error(&err) : 0;
}

int cmd_backtest(int argc, char **argv)
{
    bt_args a = {.format = "text", .seed = 1};
    a.bo = (etacal_backtest_opts){ETACAL_METHOD_ADD, 0.9, 28 * 86400.0, 86400.0, 200, 0, 0, 0, NULL, 0, 0.5, 1};
    a.ro = (etacal_read_opts){
        .delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01, .threads = ETACAL_THREADS_AUTO};
    int rc = parse_options(argc, argv, &a);
    return rc < 0 ? run(&a) : rc;
}
