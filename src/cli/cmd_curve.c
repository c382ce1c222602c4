/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_curve.c: `etacal curve`: what each on-time target costs.  One fit at
 * every target of a grid on the calibration rows minus a held-out share,
 * then on the held-out rows: the on-time rate reached (Wilson interval), the
 * mean promise and the mean time added to the bare prediction, overall and
 * per segment (the fit run of fit.h, and etacal_curve_compute).  The text
 * view marks the marginal cost of each extra point. */
#include "fitargs.h"

#include <getopt.h>
#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_GRID ETACAL_FIT_MAX_TARGETS

static const char help[] =
    "Usage: etacal curve CAL.csv --actual COL --pred COL [OPTION]...\n"
    "The cost curve of on-time targets: for each target of a grid, the buffer, the\n"
    "mean promise and the mean extra time over the bare prediction, and the on-time\n"
    "rate actually reached on held-out rows with its Wilson 95% interval.\n"
    "\n"
    "  --actual COL, --pred COL   as for etacal fit (required)\n"
    "  --by COL[,COL...]     also per segment (most specific level)\n"
    "  --method add|ratio|qr as for etacal fit (default add), with --x and --split\n"
    "  --confidence C        as for etacal fit\n"
    "  --from T --to T --step S   the grid of targets (default 0.5, 0.99, 0.01)\n"
    "  --holdout F           share of rows held out to measure (default 0.2)\n"
    "  --time COL            hold out the latest rows by this timestamp column\n"
    "  --seed S              seed of the random held-out share (default 1)\n"
    "  --min-rows N          as for etacal fit (default 200)\n"
    "  --format text|csv|json  output format (default text)\n"
    "  -o, --output FILE     write to FILE, which appears only when complete\n"
    "  --delim D, --bad-rows error|skip, --max-bad-share F   as for etacal fit\n"
    "  -h, --help            show this help and exit\n";

/* What the writers show: the fit run's table and held-out counts, the curve. */
typedef struct curve_view {
    const char *path, *timecol;
    char *const *keys;
    size_t nkeys;
    int method;
    double holdout;
    const etacal_quotes *q;
    const etacal_holdout *ho;
    const etacal_curve *cv;
    const double *targets;
    size_t nt, n, held;
} curve_view;

/* The text view: a heading, then one aligned table per segment.  0, or -1
 * when out of memory. */
static int write_text(FILE *fp, const curve_view *v)
{
    char sh[ETACAL_NUM_BUFSZ];
    etacal_percent_label(v->holdout, sh);
    fprintf(fp, "etacal curve: %s, method %s; measured on %zu held-out rows (%s %s%%%s%s), fitted on %zu\n",
            v->path, etacal_method_name(v->method), v->held, v->timecol ? "the latest" : "a random", sh,
            v->timecol ? " by " : "", v->timecol ? v->timecol : "", v->n - v->held);
    for (size_t s = 0; s < v->cv->nsegs; s++) {
        size_t g = v->cv->seg[s], hn = v->ho->n[g];
        if (v->nkeys) {
            fputs("\nsegment", fp);
            for (size_t j = 0; j < v->nkeys; j++)
                fprintf(fp, "%s%s", j ? ", " : " ", v->q->segs[g].keys[j]);
        }
        fputc('\n', fp);
        text_table tt;
        if (tt_init(&tt, 7) != 0)
            return -1;
        const char *h[7] = {"target",
                            v->method == ETACAL_METHOD_ADD     ? "buffer s"
                            : v->method == ETACAL_METHOD_RATIO ? "factor"
                                                               : "corr s",
                            "mean promise min",
                            "extra min", "+min per point", "on time (held out)", "95% CI"};
        tt_add(&tt, h);
        for (int j = 0; j < 6; j++)
            tt.right[j] = 1;
        for (size_t ti = 0; ti < v->nt; ti++) {
            const etacal_curve_point *pt = &v->cv->pts[s * v->nt + ti];
            char b[6][64];
            snprintf(b[0], sizeof b[0], v->method == ETACAL_METHOD_RATIO ? "%.4f" : "%.1f", pt->buffer);
            snprintf(b[1], sizeof b[1], "%.2f", pt->mean_promise_s / 60);
            snprintf(b[2], sizeof b[2], "%.2f", pt->mean_extra_s / 60);
            if (isnan(pt->marginal_s_per_point))
                snprintf(b[3], sizeof b[3], "-");
            else
                snprintf(b[3], sizeof b[3], "%+.2f", pt->marginal_s_per_point / 60);
            snprintf(b[4], sizeof b[4], "%.2f%% (%zu/%zu)", hn ? 100.0 * (double)pt->hits / (double)hn : 0.0,
                     pt->hits, hn);
            snprintf(b[5], sizeof b[5], "%.4f-%.4f", pt->ci_lo, pt->ci_hi);
            char tp[ETACAL_NUM_BUFSZ + 2];
            etacal_percent_label(v->targets[ti], tp);
            strcat(tp, "%");
            const char *row[7] = {tp, b[0], b[1], b[2], b[3], b[4], b[5]};
            tt_add(&tt, row);
        }
        int bad = tt_print(&tt, fp) != 0;
        tt_free(&tt);
        if (bad)
            return -1;
    }
    return 0;
}

/* The CSV view: one line per segment and target. */
static void write_csv(FILE *fp, const curve_view *v)
{
    for (size_t j = 0; j < v->nkeys; j++) {
        csv_field(fp, v->keys[j]);
        putc(',', fp);
    }
    fputs("target,buffer,mean_promise_s,mean_extra_s,marginal_s_per_point,held_n,held_hits,on_time,ci_low,ci_high\n",
          fp);
    for (size_t s = 0; s < v->cv->nsegs; s++) {
        size_t g = v->cv->seg[s], hn = v->ho->n[g];
        for (size_t ti = 0; ti < v->nt; ti++) {
            const etacal_curve_point *pt = &v->cv->pts[s * v->nt + ti];
            char tb[ETACAL_NUM_BUFSZ];
            etacal_num_format(v->targets[ti], tb);
            for (size_t j = 0; j < v->nkeys; j++) {
                csv_field(fp, v->q->segs[g].keys[j]);
                putc(',', fp);
            }
            fprintf(fp, "%s,%.10g,%.10g,%.10g,", tb, pt->buffer, pt->mean_promise_s, pt->mean_extra_s);
            if (!isnan(pt->marginal_s_per_point))
                fprintf(fp, "%.10g", pt->marginal_s_per_point);
            fprintf(fp, ",%zu,%zu,%.10g,%.10g,%.10g\n", hn, pt->hits, hn ? (double)pt->hits / (double)hn : NAN,
                    pt->ci_lo, pt->ci_hi);
        }
    }
}

static json_t *num_or_null(double x) { return isfinite(x) ? json_real(x) : json_null(); }

/* The JSON view (its shape is in the man page). */
static int write_json(FILE *fp, const curve_view *v, const char *outname, etacal_error *err)
{
    json_t *root = json_object();
    json_object_set_new(root, "etacal", json_string(ETACAL_VERSION));
    json_object_set_new(root, "file", json_string(v->path));
    json_object_set_new(root, "held_out", json_pack("{s:I,s:I,s:s}", "rows", (json_int_t)v->held, "of",
                                                    (json_int_t)v->n, "by", v->timecol ? v->timecol : "random"));
    json_t *segs = json_array();
    for (size_t s = 0; s < v->cv->nsegs; s++) {
        size_t g = v->cv->seg[s], hn = v->ho->n[g];
        json_t *pts = json_array();
        for (size_t ti = 0; ti < v->nt; ti++) {
            const etacal_curve_point *pt = &v->cv->pts[s * v->nt + ti];
            json_array_append_new(
                pts, json_pack("{s:f,s:o,s:o,s:o,s:o,s:I,s:I,s:o,s:[o,o]}", "target", v->targets[ti], "buffer",
                               num_or_null(pt->buffer), "mean_promise_s", num_or_null(pt->mean_promise_s),
                               "mean_extra_s", num_or_null(pt->mean_extra_s), "marginal_s_per_point",
                               num_or_null(pt->marginal_s_per_point), "held_n", (json_int_t)hn, "held_hits",
                               (json_int_t)pt->hits, "on_time",
                               hn ? json_real((double)pt->hits / (double)hn) : json_null(), "ci",
                               num_or_null(pt->ci_lo), num_or_null(pt->ci_hi)));
        }
        json_t *kv = json_object();
        for (size_t j = 0; j < v->nkeys; j++)
            json_object_set_new(kv, v->keys[j], json_string(v->q->segs[g].keys[j]));
        json_array_append_new(segs, json_pack("{s:o,s:I,s:o}", "keys", kv, "held_n", (json_int_t)hn, "points", pts));
    }
    if (root)
        json_object_set_new(root, "segments", segs);
    else
        json_decref(segs);
    int rc = json_out(root, fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10), outname, err);
    json_decref(root);
    return rc;
}

int cmd_curve(int argc, char **argv)
{
    /* the options it shares with fit (fitargs.h), and its own */
    enum { O_FROM = 700, O_TO, O_STEP, O_FORMAT };
    static const struct option longopts[] = {
        FIT_OPTIONS,
        {"from", required_argument, 0, O_FROM},     {"to", required_argument, 0, O_TO},
        {"step", required_argument, 0, O_STEP},     {"format", required_argument, 0, O_FORMAT},
        {"output", required_argument, 0, 'o'},      READ_OPTIONS,
        {"help", no_argument, 0, 'h'},              {0, 0, 0, 0}};
    fit_args a;
    fit_args_init(&a);
    a.holdout = 0.2;
    const char *output = NULL, *format = "text";
    double from = 0.5, to = 0.99, step = 0.01;
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_FROM:
        case O_TO:
        case O_STEP: {
            double v;
            if (parse_share(optarg, &v) != 0 || !(v > 0 && v < 1))
                return usage_error("curve", "--from, --to and --step take numbers in (0,1)");
            *(c == O_FROM ? &from : c == O_TO ? &to : &step) = v;
            break;
        }
        case O_FORMAT:
            if (parse_format(optarg, "curve", &format) != 0)
                return EXIT_USAGE;
            break;
        case FO_TARGET: return usage_error("curve", "curve takes a grid of targets: --from, --to, --step");
        case FO_HALFLIFE: return usage_error("curve", "--half-life is not offered by curve (use etacal fit)");
        case 'o': output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        default: {
            int r = fit_option(c, "curve", &a);
            if (r < 0)
                r = other_option(c, "curve", &a.ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "curve", "calibration file");
    if (nin)
        return nin;
    a.ntargets = 1; /* checked by fit_args_check; the grid below is the fit's */
    a.targets[0] = 0.9;
    int u = fit_args_check(&a, "curve");
    if (u)
        return u;
    if (from > to)
        return usage_error("curve", "--from must not be above --to");
    static double targets[MAX_GRID];
    size_t nt = etacal_curve_grid(from, to, step, targets, MAX_GRID);
    if (nt == 0)
        return usage_error("curve", "the grid of targets is empty");
    const char *path = argv[optind];

    /* the fit run of fit.h at every target of the grid, scored on the held-out rows */
    etacal_fitspec spec;
    fit_spec(&a, &spec);
    spec.targets = targets;
    spec.ntargets = nt;
    etacal_error err;
    etacal_error_clear(&err);
    etacal_fit_run *run = NULL;
    etacal_curve cv = {0};
    etacal_outfile of = {0};
    int rc = etacal_fit_csv(&spec, path, &a.ro, &run, &err);
    if (rc)
        return report_error(&err);
    const etacal_quotes *q = etacal_fit_run_quotes(run);
    const etacal_holdout *ho = etacal_fit_run_holdout(run);
    size_t n = etacal_table_rows(etacal_fit_run_rows(run)), held = etacal_fit_run_held(run);
    if ((rc = etacal_curve_compute(q, ho, 0.95, &cv, &err)) != 0)
        goto fail;
    if ((rc = etacal_outfile_open(&of, output ? output : "-", &err)) != 0)
        goto fail;
    curve_view v = {path, a.timecol, a.keys, a.nkeys, a.method, a.holdout, q, ho, &cv, targets, nt, n, held};
    if (strcmp(format, "json") == 0)
        rc = write_json(of.fp, &v, output ? output : "stdout", &err);
    else if (strcmp(format, "csv") == 0)
        write_csv(of.fp, &v);
    else if (write_text(of.fp, &v) != 0)
        rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
    if (rc)
        goto fail;
    if ((rc = etacal_outfile_commit(&of, &err)) != 0)
        goto fail;
    etacal_curve_free(&cv);
    etacal_fit_run_destroy(run);
    return 0;
fail:
    etacal_outfile_abort(&of);
    etacal_curve_free(&cv);
    etacal_fit_run_destroy(run);
    return report_error(&err);
}
