/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_qr.c: `etacal qr`: linear quantile regression at one or more levels,
 * with standard errors, t statistics and p-values; with --predict, the
 * fitted quantiles (rearranged so they never cross) appended to a stream of
 * new rows. */
#include "cli.h"

#include <getopt.h>
#include <jansson.h>
#include <math.h>
#include <stdlib.h>
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

typedef struct fitset {
    size_t ntau, k;
    double taus[MAX_TAU];
    etacal_qr_result res[MAX_TAU];
    double se[MAX_TAU][MAX_X + 1];
    double bw[MAX_TAU];
} fitset;

static double tval(double b, double se) { return isnan(se) || se == 0 ? NAN : b / se; }

/* Returns 0, or -1 when out of memory. */
static int write_text(FILE *fp, const char *path, const char *yname, char **xs, const etacal_table *t,
                      const fitset *f, int sem, size_t reps)
{
    const etacal_read_stats *st = etacal_table_stats(t);
    fprintf(fp, "etacal qr: %s\n", path);
    fprintf(fp, "rows: %zu read, %zu used, %zu left out (missing value), %zu malformed skipped\n", st->data_rows,
            st->kept, st->missing, st->bad);
    fprintf(fp, "model: %s ~ 1", yname);
    for (size_t j = 0; j < f->k; j++)
        fprintf(fp, " + %s", xs[j]);
    if (sem == ETACAL_SE_POWELL)
        fprintf(fp, "\nstandard errors: Powell kernel sandwich, Hall-Sheather bandwidth (alpha 0.05)\n");
    else if (sem == ETACAL_SE_BOOT)
        fprintf(fp, "\nstandard errors: xy-pair bootstrap, %zu replications\n", reps);
    else
        fprintf(fp, "\nstandard errors: none\n");
    for (size_t ti = 0; ti < f->ntau; ti++) {
        const etacal_qr_result *r = &f->res[ti];
        fprintf(fp, "\ntau %g: n %zu, objective %.10g, iterations %d, duality gap %.3g", f->taus[ti], r->n,
                r->objective, r->iterations, r->gap);
        if (sem == ETACAL_SE_POWELL)
            fprintf(fp, ", kernel bandwidth %.6g", f->bw[ti]);
        fputs("\n", fp);
        text_table tt;
        if (tt_init(&tt, 5) != 0)
            return -1;
        const char *h[5] = {"term", "estimate", "std.error", "t", "p-value"};
        tt_add(&tt, h);
        for (int j = 1; j < 5; j++)
            tt.right[j] = 1;
        for (size_t j = 0; j < r->p; j++) {
            char b[4][48];
            snprintf(b[0], sizeof b[0], "%.8g", r->coef[j]);
            double se = f->se[ti][j], tv = tval(r->coef[j], se);
            if (isnan(se)) {
                snprintf(b[1], sizeof b[1], "-");
                snprintf(b[2], sizeof b[2], "-");
                snprintf(b[3], sizeof b[3], "-");
            } else {
                snprintf(b[1], sizeof b[1], "%.6g", se);
                snprintf(b[2], sizeof b[2], "%.3f", tv);
                double pv = etacal_t_pvalue(tv, (double)(r->n - r->p));
                if (pv < 1e-16)
                    snprintf(b[3], sizeof b[3], "< 1e-16");
                else
                    snprintf(b[3], sizeof b[3], "%.3g", pv);
            }
            const char *row[5] = {j == 0 ? "(intercept)" : xs[j - 1], b[0], b[1], b[2], b[3]};
            tt_add(&tt, row);
        }
        int bad = tt_print(&tt, fp) != 0;
        tt_free(&tt);
        if (bad)
            return -1;
    }
    return 0;
}

static void write_csv(FILE *fp, char **xs, const fitset *f)
{
    fputs("tau,term,estimate,std_error,t,p_value,n,objective,iterations,gap\n", fp);
    for (size_t ti = 0; ti < f->ntau; ti++) {
        const etacal_qr_result *r = &f->res[ti];
        for (size_t j = 0; j < r->p; j++) {
            char tau[ETACAL_NUM_BUFSZ];
            etacal_num_format(f->taus[ti], tau);
            fprintf(fp, "%s,", tau);
            csv_field(fp, j == 0 ? "(intercept)" : xs[j - 1]);
            fprintf(fp, ",%.12g,", r->coef[j]);
            double se = f->se[ti][j];
            if (!isnan(se)) {
                double tv = tval(r->coef[j], se);
                fprintf(fp, "%.10g,%.10g,%.6g", se, tv, etacal_t_pvalue(tv, (double)(r->n - r->p)));
            } else {
                fputs(",,", fp);
            }
            fprintf(fp, ",%zu,%.12g,%d,%.3g\n", r->n, r->objective, r->iterations, r->gap);
        }
    }
}

static json_t *jnum(double v) { return isfinite(v) ? json_real(v) : json_null(); }

static json_t *build_json(const char *path, const char *yname, char **xs, const etacal_table *t, const fitset *f,
                          int sem, size_t reps)
{
    const etacal_read_stats *st = etacal_table_stats(t);
    json_t *root = json_object();
    json_object_set_new(root, "etacal", json_string(ETACAL_VERSION));
    json_object_set_new(root, "file", json_string(path));
    json_object_set_new(root, "rows", json_pack("{s:I,s:I,s:I,s:I}", "read", (json_int_t)st->data_rows, "used",
                                                (json_int_t)st->kept, "missing", (json_int_t)st->missing,
                                                "malformed", (json_int_t)st->bad));
    json_object_set_new(root, "y", json_string(yname));
    json_t *xa = json_array();
    for (size_t j = 0; j < f->k; j++)
        json_array_append_new(xa, json_string(xs[j]));
    json_object_set_new(root, "x", xa);
    json_object_set_new(root, "se", json_string(sem == ETACAL_SE_POWELL ? "powell" : sem == ETACAL_SE_BOOT ? "boot" : "none"));
    json_object_set_new(root, "reps", sem == ETACAL_SE_BOOT ? json_integer((json_int_t)reps) : json_null());
    json_t *fits = json_array();
    for (size_t ti = 0; ti < f->ntau; ti++) {
        const etacal_qr_result *r = &f->res[ti];
        json_t *o = json_object();
        json_object_set_new(o, "tau", json_real(f->taus[ti]));
        json_object_set_new(o, "n", json_integer((json_int_t)r->n));
        json_object_set_new(o, "objective", json_real(r->objective));
        json_object_set_new(o, "iterations", json_integer(r->iterations));
        char g[32]; /* the gap matters to 3 digits; more would be rounding noise */
        snprintf(g, sizeof g, "%.3g", r->gap);
        json_object_set_new(o, "gap", json_real(strtod(g, NULL)));
        json_object_set_new(o, "bandwidth", jnum(f->bw[ti]));
        json_t *terms = json_array();
        for (size_t j = 0; j < r->p; j++) {
            double se = f->se[ti][j], tv = tval(r->coef[j], se);
            json_array_append_new(
                terms, json_pack("{s:s,s:o,s:o,s:o,s:o}", "term", j == 0 ? "(intercept)" : xs[j - 1], "estimate",
                                 json_real(r->coef[j]), "std_error", jnum(se), "t", jnum(tv), "p_value",
                                 jnum(isnan(tv) ? NAN : etacal_t_pvalue(tv, (double)(r->n - r->p)))));
        }
        json_object_set_new(o, "terms", terms);
        json_array_append_new(fits, o);
    }
    json_object_set_new(root, "fits", fits);
    return root;
}

int cmd_qr(int argc, char **argv)
{
    enum { O_Y = 256, O_X, O_TAU, O_SE, O_REPS, O_SEED, O_EPS, O_FORMAT, O_PREDICT };
    static const struct option longopts[] = {
        {"y", required_argument, 0, O_Y},           {"x", required_argument, 0, O_X},
        {"tau", required_argument, 0, O_TAU},       {"se", required_argument, 0, O_SE},
        {"reps", required_argument, 0, O_REPS},     {"seed", required_argument, 0, O_SEED},
        {"eps", required_argument, 0, O_EPS},       {"format", required_argument, 0, O_FORMAT},
        {"predict", required_argument, 0, O_PREDICT}, {"output", required_argument, 0, 'o'},
        READ_OPTIONS, {"help", no_argument, 0, 'h'},
        {0, 0, 0, 0}};
    const char *yname = NULL, *format = "text", *predict = NULL, *output = NULL;
    char *xs[MAX_X];
    size_t nx = 0, reps = 200, seed = 1;
    fitset f;
    memset(&f, 0, sizeof f);
    int sem = ETACAL_SE_POWELL, c;
    double eps = 0;
    etacal_read_opts ro = {.delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01,
                          .threads = ETACAL_THREADS_AUTO};
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_Y: yname = optarg; break;
        case O_X:
            nx = 0;
            if (parse_names(optarg, xs, &nx, MAX_X) != 0)
                return usage_error("qr", "--x takes up to %d comma-separated column names", MAX_X);
            break;
        case O_TAU:
            if (parse_targets(optarg, f.taus, &f.ntau, MAX_TAU) != 0)
                return usage_error("qr", "--tau takes levels in (0,1), such as 0.1,0.5,0.9 (at most %d)", MAX_TAU);
            break;
        case O_SE:
            if (strcmp(optarg, "powell") == 0)
                sem = ETACAL_SE_POWELL;
            else if (strcmp(optarg, "boot") == 0)
                sem = ETACAL_SE_BOOT;
            else if (strcmp(optarg, "none") == 0)
                sem = ETACAL_SE_NONE;
            else
                return usage_error("qr", "--se must be powell, boot or none");
            break;
        case O_REPS:
            if (parse_size(optarg, &reps) != 0 || reps < 2)
                return usage_error("qr", "--reps takes a whole number >= 2");
            break;
        case O_SEED:
            if (parse_size(optarg, &seed) != 0)
                return usage_error("qr", "--seed takes a whole number");
            break;
        case O_EPS:
            if (parse_seconds(optarg, &eps) != 0 || !(eps > 0))
                return usage_error("qr", "--eps takes a tolerance > 0");
            break;
        case O_FORMAT:
            if (parse_format(optarg, "qr", &format) != 0)
                return EXIT_USAGE;
            break;
        case O_PREDICT: predict = optarg; break;
        case 'o': output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        default: {
            int r = other_option(c, "qr", &ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "qr", "data file");
    if (nin)
        return nin;
    if (!yname || nx == 0)
        return usage_error("qr", "--y and --x are required");
    for (size_t j = 0; j < nx; j++) {
        if (strcmp(xs[j], yname) == 0)
            return usage_error("qr", "'%s' is both the response and a covariate", xs[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(xs[i], xs[j]) == 0)
                return usage_error("qr", "--x names '%s' twice", xs[j]);
    }
    if (f.ntau == 0)
        f.taus[f.ntau++] = 0.5;
    /* ascending, distinct levels */
    for (size_t i = 1; i < f.ntau; i++)
        for (size_t j = i; j > 0 && f.taus[j - 1] > f.taus[j]; j--) {
            double tmp = f.taus[j];
            f.taus[j] = f.taus[j - 1];
            f.taus[j - 1] = tmp;
        }
    for (size_t i = 1; i < f.ntau; i++)
        if (f.taus[i] == f.taus[i - 1])
            return usage_error("qr", "--tau names %g twice", f.taus[i]);
    f.k = nx;
    const char *path = argv[optind];

    etacal_colspec cols[1 + MAX_X];
    unsigned fl = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE;
    cols[0] = (etacal_colspec){yname, ETACAL_COL_NUM, fl, "response"};
    for (size_t j = 0; j < nx; j++)
        cols[1 + j] = (etacal_colspec){xs[j], ETACAL_COL_NUM, fl, "covariate"};
    progress pg = {path, 0, -1};
    ro.progress = progress_cb;
    ro.progress_ud = &pg;
    etacal_error err;
    etacal_error_clear(&err);
    etacal_table *t = NULL;
    etacal_outfile of = {0};
    int rc = etacal_table_read_csv(path, cols, 1 + nx, &ro, &t, &err);
    progress_end(&pg);
    if (rc)
        return report_error(&err);
    size_t n = etacal_table_rows(t);
    const double *y = etacal_table_num(t, 0);
    const double *xc[MAX_X];
    for (size_t j = 0; j < nx; j++)
        xc[j] = etacal_table_num(t, 1 + j);
    etacal_qr_opts qo = {0};
    qo.eps = eps;
    qo.seed = (unsigned long)seed;
    qo.threads = ro.threads; /* --threads: the reading's and the fit's */
    for (size_t ti = 0; ti < f.ntau; ti++) {
        if (n == 0) {
            rc = etacal_error_set(&err, ETACAL_ENUM, path, "no data rows");
            goto fail;
        }
        rc = etacal_qr_fit(y, xc, nx, NULL, n, f.taus[ti], (const char *const *)xs, &qo, &f.res[ti], &err);
        if (rc)
            goto fail;
        rc = etacal_qr_se(y, xc, nx, n, f.taus[ti], &f.res[ti], predict ? ETACAL_SE_NONE : sem, reps,
                          (unsigned long)seed, &qo, f.se[ti], &f.bw[ti], &err);
        if (rc)
            goto fail;
    }
    rc = etacal_outfile_open(&of, output ? output : "-", &err);
    if (rc)
        goto fail;
    if (predict) {
        double coef[MAX_TAU * (MAX_X + 1)];
        for (size_t ti = 0; ti < f.ntau; ti++)
            memcpy(coef + ti * (nx + 1), f.res[ti].coef, (nx + 1) * sizeof *coef);
        /* the covariates' range in the data of the fit, and a floor of 0
         * for a response that is never negative there (a duration) */
        double xmin[MAX_X], xmax[MAX_X];
        for (size_t j = 0; j < nx; j++) {
            xmin[j] = xmax[j] = xc[j][0];
            for (size_t i = 1; i < n; i++) {
                if (xc[j][i] < xmin[j])
                    xmin[j] = xc[j][i];
                if (xc[j][i] > xmax[j])
                    xmax[j] = xc[j][i];
            }
        }
        int nonneg = 1;
        for (size_t i = 0; i < n && nonneg; i++)
            nonneg = y[i] >= 0;
        etacal_qr_predict_opts po = {ro.delim, ro.bad_rows, xmin, xmax, nonneg ? 0 : -INFINITY};
        etacal_qr_predict_stats ps;
        rc = etacal_qr_predict_csv(coef, f.taus, f.ntau, nx, (const char *const *)xs, predict, of.fp, &po, &ps,
                                   &err);
        if (rc == 0)
            rc = etacal_outfile_commit(&of, &err);
        if (rc) {
            etacal_outfile_abort(&of);
            goto fail;
        }
        fprintf(stderr,
                "etacal qr: fitted %zu level%s on %zu rows of %s; %s: %zu rows, %zu without a covariate, %zu malformed, "
                "%zu with a covariate outside the fit's range (clamped into it)",
                f.ntau, f.ntau == 1 ? "" : "s", n, path, predict, ps.rows, ps.missing, ps.bad, ps.clamped);
        if (nonneg)
            fprintf(stderr, ", %zu with a quantile raised to 0 ('%s' is never negative in the fit)", ps.floored,
                    yname);
        fputc('\n', stderr);
    } else {
        if (strcmp(format, "json") == 0) {
            json_t *j = build_json(path, yname, xs, t, &f, sem, reps);
            rc = json_out(j, of.fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(12),
                          output ? output : "stdout", &err);
            json_decref(j);
            if (rc) {
                etacal_outfile_abort(&of);
                goto fail;
            }
        } else if (strcmp(format, "csv") == 0) {
            write_csv(of.fp, xs, &f);
        } else {
            if (write_text(of.fp, path, yname, xs, t, &f, sem, reps) != 0) {
                etacal_outfile_abort(&of);
                rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
                goto fail;
            }
        }
        rc = etacal_outfile_commit(&of, &err);
        if (rc) {
            etacal_outfile_abort(&of);
            goto fail;
        }
    }
    etacal_table_destroy(t);
    return 0;
fail:
    etacal_table_destroy(t);
    return report_error(&err);
}
