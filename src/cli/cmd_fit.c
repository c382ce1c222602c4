/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_fit.c: `etacal fit`: read calibration rows, fit the quote table,
 * write it, and print a summary people can read. */
#include "fitargs.h"
#include "outsink.h"

#include <stdlib.h>
#include <string.h>


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
    "  --min-rows N          a segment with fewer rows is pooled with the other thin\n"
    "                        segments of its parent, whose row is calibrated on them\n"
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

int cmd_fit(int argc, char **argv)
{
    static const struct option longopts[] = {FIT_OPTIONS,
                                             {"output", required_argument, 0, 'o'},
                                             {"quiet", no_argument, 0, 'q'},
                                             READ_OPTIONS,
                                             {"help", no_argument, 0, 'h'},
                                             {0, 0, 0, 0}};
    fit_args a;
    fit_args_init(&a);
    const char *output = NULL;
    int quiet = 0;
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:qh", longopts, NULL)) != -1) {
        switch (c) {
        case 'o': output = optarg; break;
        case 'q': quiet = 1; break;
        case 'h': fputs(help, stdout); return 0;
        default: {
            int r = fit_option(c, "fit", &a);
            if (r < 0)
                r = other_option(c, "fit", &a.ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "fit", "calibration file");
    if (nin)
        return nin;
    int u = fit_args_check(&a, "fit");
    if (u)
        return u;
    const char *path = argv[optind];
    if ((u = cli_check_output("fit", output, &path, 1)) != 0)
        return u;

    etacal_error err;
    etacal_error_clear(&err);
    etacal_fitspec spec;
    fit_spec(&a, &spec);
    etacal_fit_run *run = NULL;
    cliout of = {0};
    outbuf sum = {0};
    progress pg = {path, 0, -1};
    etacal_read_opts ro = a.ro;
    ro.progress = progress_cb;
    ro.progress_ud = &pg;
    int rc = etacal_fit_csv(&spec, cli_input(path), &ro, &run, &err);
    progress_end(&pg);
    if (rc)
        goto fail;
    /* The summary is made in memory first: when memory runs out there,
     * no table is written either. */
    if (!quiet) {
        etacal_sink sink = outbuf_sink(&sum);
        if ((rc = etacal_fit_write_summary(run, &spec, path, &sink, &err)) != 0) {
            if (sum.oom)
                rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
            goto fail;
        }
    }
    rc = cliout_open(&of, output, &err);
    if (rc)
        goto fail;
    rc = etacal_quotes_write(etacal_fit_run_quotes(run), &of.sink, &err);
    if (rc == 0)
        rc = cliout_commit(&of, &err);
    cliout_close(&of);
    if (rc)
        goto fail;
    if (!quiet)
        fwrite(sum.data, 1, sum.len, output ? stdout : stderr);
    free(sum.data);
    etacal_fit_run_destroy(run);
    return 0;
fail:
    free(sum.data);
    etacal_fit_run_destroy(run);
    return report_error(&err);
}
