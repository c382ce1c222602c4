/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_curve.c: `etacal curve`: what each on-time target costs.  One fit at
 * every target of a grid on the calibration rows minus a held-out share,
 * then on the held-out rows: the on-time rate reached (Wilson interval), the
 * mean promise and the mean time added to the bare prediction, overall and
 * per segment (the fit run of fit.h, and etacal_curve_compute).  The text
 * view marks the marginal cost of each extra point. */
#include "fitargs.h"
#include "outsink.h"

#include <getopt.h>
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
    if ((u = cli_check_output("curve", output, (const char *const *)&argv[optind], 1)) != 0)
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
    etacal_curve *cv = NULL;
    cliout of = {0};
    int rc = etacal_fit_csv(&spec, cli_input(path), &a.ro, &run, &err);
    if (rc)
        return report_error(&err);
    if ((rc = etacal_curve_compute(etacal_fit_run_quotes(run), etacal_fit_run_holdout(run), 0.95, &cv, &err)) != 0)
        goto fail;
    if ((rc = cliout_open(&of, output, &err)) != 0)
        goto fail;
    int fmt = strcmp(format, "json") == 0 ? ETACAL_FORMAT_JSON
              : strcmp(format, "csv") == 0 ? ETACAL_FORMAT_CSV
                                           : ETACAL_FORMAT_TEXT;
    if ((rc = etacal_curve_write(cv, run, &spec, path, fmt, &of.sink, &err)) != 0)
        goto fail;
    if ((rc = cliout_commit(&of, &err)) != 0)
        goto fail;
    cliout_close(&of);
    etacal_curve_destroy(cv);
    etacal_fit_run_destroy(run);
    return 0;
fail:
    cliout_close(&of);
    etacal_curve_destroy(cv);
    etacal_fit_run_destroy(run);
    return report_error(&err);
}
