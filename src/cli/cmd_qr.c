/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_qr.c: `etacal qr`: linear quantile regression at one or more levels,
 * with standard errors, t statistics and p-values; with --predict, the
 * fitted quantiles (rearranged so they never cross) appended to a stream of
 * new rows.  The library fits (etacal_qr_fit_levels), writes the fits
 * (etacal_qr_write) or predicts (qr_fits_predict_csv). */
#include "cli.h"

#include <getopt.h>
#include <string.h>

#define MAX_TAU ETACAL_APPLY_MAX_TARGETS
#define MAX_X ETACAL_QR_MAX_COVARIATES

static const char help[] =
    "Usage: etacal qr DATA.csv --y COL --x COL[,COL...] [OPTION]...\n"
    "Linear quantile regression of --y on an intercept and the --x columns, solved\n"
    "exactly (Frisch-Newton interior point with preprocessing for large files).\n"
    "\n"
    "  --y COL               the response (required)\n"
    "  --x COL[,COL...]      the covariates (required; up to 16)\n"
    "  --tau T[,T...]        quantile levels in (0,1) (default 0.5); repeatable\n"
    "  --se powell|boot|none standard errors: Powell kernel sandwich with the\n"
    "                        Hall-Sheather bandwidth (default), xy-pair bootstrap, or none\n"
    "  --reps N              bootstrap replications (default 200)\n"
    "  --seed S              seed of the bootstrap and of the preprocessing subsamples (default 1)\n"
    "  --eps E               duality-gap tolerance of the solver (default 1e-6)\n"
    "  --format text|csv|json  output format of the fit (default text)\n"
    "  --predict NEW.csv     instead of the fit, write NEW.csv with one column q_<pct>\n"
    "                        per level appended (q_10, q_50, q_90), rearranged so that\n"
    "                        they do not cross; the fit is summarised on stderr.\n"
    "                        Covariates outside their range in DATA.csv are clamped\n"
    "                        into it (counted); when --y is never negative in\n"
    "                        DATA.csv, predictions are never below 0\n"
    "  -o, --output FILE     write to FILE, which appears only when complete (default stdout)\n"
    "  --delim D             comma (default), semicolon, tab or pipe\n"
    "  --bad-rows error|skip malformed data rows are an error (default) or skipped\n"
    "  --max-bad-share F     with --bad-rows skip: fail above this share (default 0.01)\n"
    "  -h, --help            show this help and exit\n"
    "\n"
    "Rows with a missing value in a used column are left out and counted.\n";

typedef struct qr_args {
    const char *yname, *format, *predict, *output, *path;
    char *xs[MAX_X];
    size_t nx, reps, seed, ntau;
    double taus[MAX_TAU];
    int sem;
    double eps;
    etacal_read_opts ro;
} qr_args;

enum { O_Y = 256, O_X, O_TAU, O_SE, O_REPS, O_SEED, O_EPS, O_FORMAT, O_PREDICT };

/* One option with a value to check: 0, -1 when c is none of them, else
 * the exit status. */
static int qr_option(int c, qr_args *a)
{
    switch (c) {
    case O_X:
        a->nx = 0;
        if (parse_names(optarg, a->xs, &a->nx, MAX_X) != 0)
            return usage_error("qr", "--x takes up to %d comma-separated column names", MAX_X);
        return 0;
    case O_TAU:
        if (parse_targets(optarg, a->taus, &a->ntau, MAX_TAU) != 0)
            return usage_error("qr", "--tau takes levels in (0,1), such as 0.1,0.5,0.9 (at most %d)", MAX_TAU);
        return 0;
    case O_SE:
        if (strcmp(optarg, "powell") == 0)
            a->sem = ETACAL_SE_POWELL;
        else if (strcmp(optarg, "boot") == 0)
            a->sem = ETACAL_SE_BOOT;
        else if (strcmp(optarg, "none") == 0)
            a->sem = ETACAL_SE_NONE;
        else
            return usage_error("qr", "--se must be powell, boot or none");
        return 0;
    case O_REPS:
        if (parse_size(optarg, &a->reps) != 0 || a->reps < 2)
            return usage_error("qr", "--reps takes a whole number >= 2");
        return 0;
    case O_SEED:
        if (parse_size(optarg, &a->seed) != 0)
            return usage_error("qr", "--seed takes a whole number");
        return 0;
    case O_EPS:
        if (parse_seconds(optarg, &a->eps) != 0 || !(a->eps > 0))
            return usage_error("qr", "--eps takes a tolerance > 0");
        return 0;
    case O_FORMAT: return parse_format(optarg, "qr", &a->format) != 0 ? EXIT_USAGE : 0;
    default: return -1;
    }
}

/* The columns and levels: -1 to go on, else the exit status. */
static int check_args_qr(qr_args *a)
{
    if (!a->yname || a->nx == 0)
        return usage_error("qr", "--y and --x are required");
    for (size_t j = 0; j < a->nx; j++) {
        if (strcmp(a->xs[j], a->yname) == 0)
            return usage_error("qr", "'%s' is both the response and a covariate", a->xs[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(a->xs[i], a->xs[j]) == 0)
                return usage_error("qr", "--x names '%s' twice", a->xs[j]);
    }
    if (a->ntau == 0)
        a->taus[a->ntau++] = 0.5;
    /* ascending, distinct levels */
    for (size_t i = 1; i < a->ntau; i++)
        for (size_t j = i; j > 0 && a->taus[j - 1] > a->taus[j]; j--) {
            double tmp = a->taus[j];
            a->taus[j] = a->taus[j - 1];
            a->taus[j - 1] = tmp;
        }
    for (size_t i = 1; i < a->ntau; i++)
        if (a->taus[i] == a->taus[i - 1])
            return usage_error("qr", "--tau names %g twice", a->taus[i]);
    return -1;
}

/* Parses the command line into a: -1 to go on, else the exit status. */
static int parse_options(int argc, char **argv, qr_args *a)
{
    static const struct option longopts[] = {
        {"y", required_argument, 0, O_Y},           {"x", required_argument, 0, O_X},
        {"tau", required_argument, 0, O_TAU},       {"se", required_argument, 0, O_SE},
        {"reps", required_argument, 0, O_REPS},     {"seed", required_argument, 0, O_SEED},
        {"eps", required_argument, 0, O_EPS},       {"format", required_argument, 0, O_FORMAT},
        {"predict", required_argument, 0, O_PREDICT}, {"output", required_argument, 0, 'o'},
        READ_OPTIONS, {"help", no_argument, 0, 'h'},
        {0, 0, 0, 0}};
    int c, r;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_Y: a->yname = optarg; break;
        case O_PREDICT: a->predict = optarg; break;
        case 'o': a->output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        default:
            r = qr_option(c, a);
            if (r < 0)
                r = other_option(c, "qr", &a->ro, argv);
            if (r)
                return r;
            break;
        }
    }
    if ((r = one_input(argc, argv, "qr", "data file")) != 0)
        return r;
    a->path = argv[optind];
    const char *inputs[2] = {a->path, a->predict};
    if ((r = cli_check_output("qr", a->output, inputs, 2)) != 0)
        return r;
    return check_args_qr(a);
}

static int format_code(const char *f)
{
    return strcmp(f, "json") == 0 ? ETACAL_FORMAT_JSON : strcmp(f, "csv") == 0 ? ETACAL_FORMAT_CSV : ETACAL_FORMAT_TEXT;
}

/* --predict's summary on stderr, once the output is whole. */
static void predict_summary(const qr_args *a, const etacal_qr_fits *f, size_t n, const etacal_qr_predict_stats *ps)
{
    fprintf(stderr,
            "etacal qr: fitted %zu level%s on %zu rows of %s; %s: %zu rows, %zu without a covariate, %zu malformed, "
            "%zu with a covariate outside the fit's range (clamped into it)",
            f->ntau, f->ntau == 1 ? "" : "s", n, a->path, a->predict, ps->rows, ps->missing, ps->bad, ps->clamped);
    if (f->y_nonneg)
        fprintf(stderr, ", %zu with a quantile raised to 0 ('%s' is never negative in the fit)", ps->floored,
                a->yname);
    fputc('\n', stderr);
}

/* Reads the data, fits, writes the fits or the predictions. */
static int run(const qr_args *a, etacal_qr_fits *f)
{
    etacal_colspec cols[1 + MAX_X];
    unsigned fl = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE;
    cols[0] = (etacal_colspec){a->yname, ETACAL_COL_NUM, fl, "response"};
    for (size_t j = 0; j < a->nx; j++)
        cols[1 + j] = (etacal_colspec){a->xs[j], ETACAL_COL_NUM, fl, "covariate"};
    progress pg = {a->path, 0, -1};
    etacal_read_opts ro = a->ro;
    ro.progress = progress_cb;
    ro.progress_ud = &pg;
    etacal_error err;
    etacal_error_clear(&err);
    etacal_table *t = NULL;
    cliout of = {0};
    int rc = etacal_table_read_csv(cli_input(a->path), cols, 1 + a->nx, &ro, &t, &err);
    progress_end(&pg);
    if (rc)
        return report_error(&err);
    size_t n = etacal_table_rows(t);
    const double *xc[MAX_X];
    for (size_t j = 0; j < a->nx; j++)
        xc[j] = etacal_table_num(t, 1 + j);
    etacal_qr_opts qo = {.eps = a->eps, .seed = (unsigned long)a->seed, .threads = a->ro.threads};
    if (n == 0)
        rc = etacal_error_set(&err, ETACAL_ENUM, a->path, "no data rows");
    else
        rc = etacal_qr_fit_levels(etacal_table_num(t, 0), xc, a->nx, n, a->taus, a->ntau,
                                  (const char *const *)a->xs, a->predict ? ETACAL_SE_NONE : a->sem, a->reps, &qo, f,
                                  &err);
    if (rc == 0)
        rc = cliout_open(&of, a->output, &err);
    etacal_qr_predict_stats ps;
    if (rc == 0 && a->predict) {
        rc = etacal_qr_fits_predict(f, (const char *const *)a->xs, cli_input(a->predict), &of.sink, a->ro.delim,
                                        a->ro.bad_rows, &ps, &err);
    } else if (rc == 0) {
        etacal_qr_write_opts wo = {a->path, a->yname, (const char *const *)a->xs, etacal_table_stats(t)};
        rc = etacal_qr_write(f, &wo, format_code(a->format), &of.sink, &err);
    }
    if (rc == 0)
        rc = cliout_commit(&of, &err);
    cliout_close(&of);
    if (rc == 0 && a->predict)
        predict_summary(a, f, n, &ps);
    etacal_table_destroy(t);
    return rc ? report_error(&err) : 0;
}

int cmd_qr(int argc, char **argv)
{
    qr_args a = {.format = "text", .reps = 200, .seed = 1, .sem = ETACAL_SE_POWELL};
    a.ro = (etacal_read_opts){
        .delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01, .threads = ETACAL_THREADS_AUTO};
    int rc = parse_options(argc, argv, &a);
    if (rc >= 0)
        return rc;
    etacal_qr_fits f; /* some 11 kB */
    return run(&a, &f);
}
