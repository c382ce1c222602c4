/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_apply.c: `etacal apply`: stream new orders through a quote table,
 * appending the promise to each (apply_csv), and the library's
 * summary of the run (etacal_apply_write_summary) on stderr, or on stdout
 * with -o. */
#include "cli.h"
#include "outsink.h"

#include <getopt.h>
#include <string.h>

static const char help[] =
    "Usage: etacal apply QUOTES.csv ORDERS.csv --pred COL [OPTION]...\n"
    "Copy every order of ORDERS.csv unchanged and append its promise in seconds:\n"
    "'promise_s' for one target, 'promise_s_<pct>' (promise_s_90, promise_s_97.5)\n"
    "for several.  Each order takes the most specific row of the quote table that\n"
    "matches its key columns, else the global row.  A promise is never below 0; with\n"
    "a method qr table, covariates outside the range the row was fitted on\n"
    "(min_<name>, max_<name>) are clamped into it and counted in the summary.\n"
    "\n"
    "  --pred COL            column of predicted durations, seconds (required)\n"
    "  --target T[,T...]     targets of the table to apply (default: all of them)\n"
    "  --round SECONDS       round each promise up to a multiple of SECONDS (60: whole\n"
    "                        minutes); by default promises are rounded up to the millisecond\n"
    "  --actual COL          also report the on-time rate the promises reach on these\n"
    "                        orders (their actual durations, where known)\n"
    "  -o, --output FILE     write to FILE, which appears only when complete (default stdout)\n"
    "  --delim D             comma (default), semicolon, tab or pipe; used for the\n"
    "                        orders and for the appended columns\n"
    "  --table-delim D       delimiter of QUOTES.csv (default comma)\n"
    "  --bad-rows error|skip a malformed order is an error (default), or written with an\n"
    "                        empty promise and counted\n"
    "  -q, --quiet           no summary\n"
    "  -h, --help            show this help and exit\n"
    "\n"
    "An order with an empty or NA prediction gets an empty promise and is counted.\n"
    "The summary goes to stderr (to stdout with -o).  ORDERS.csv may be -.\n";

int cmd_apply(int argc, char **argv)
{
    enum { O_PRED = 256, O_TARGET, O_ROUND, O_ACTUAL, O_DELIM, O_TDELIM, O_BAD };
    static const struct option longopts[] = {
        {"pred", required_argument, 0, O_PRED},     {"target", required_argument, 0, O_TARGET},
        {"round", required_argument, 0, O_ROUND},   {"actual", required_argument, 0, O_ACTUAL},
        {"output", required_argument, 0, 'o'},      {"delim", required_argument, 0, O_DELIM},
        {"table-delim", required_argument, 0, O_TDELIM}, {"bad-rows", required_argument, 0, O_BAD},
        {"quiet", no_argument, 0, 'q'},             {"help", no_argument, 0, 'h'},
        {0, 0, 0, 0}};
    etacal_apply_opts ao = {0};
    ao.delim = ',';
    char tdelim = ',';
    const char *output = NULL;
    double targets[ETACAL_APPLY_MAX_TARGETS];
    size_t ntargets = 0;
    int quiet = 0, c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:qh", longopts, NULL)) != -1) {
        switch (c) {
        case O_PRED: ao.pred_col = optarg; break;
        case O_ACTUAL: ao.actual_col = optarg; break;
        case O_TARGET:
            if (parse_targets(optarg, targets, &ntargets, ETACAL_APPLY_MAX_TARGETS) != 0)
                return usage_error("apply", "--target takes on-time rates in (0,1), such as 0.9,0.95");
            break;
        case O_ROUND:
            if (parse_seconds(optarg, &ao.round_s) != 0)
                return usage_error("apply", "--round takes a number of seconds >= 0");
            break;
        case 'o': output = optarg; break;
        case O_DELIM:
            if (parse_delim(optarg, &ao.delim) != 0)
                return usage_error("apply", "--delim must be comma, semicolon, tab or pipe");
            break;
        case O_TDELIM:
            if (parse_delim(optarg, &tdelim) != 0)
                return usage_error("apply", "--table-delim must be comma, semicolon, tab or pipe");
            break;
        case O_BAD:
            if (parse_bad_rows(optarg, &ao.bad_rows) != 0)
                return usage_error("apply", "--bad-rows must be error or skip");
            break;
        case 'q': quiet = 1; break;
        case 'h': fputs(help, stdout); return 0;
        case ':': return usage_error("apply", "option '%s' needs a value", argv[optind - 1]);
        default: return usage_error("apply", "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (argc - optind != 2)
        return usage_error("apply", "expected a quote table and an orders file");
    if (!ao.pred_col)
        return usage_error("apply", "--pred is required");
    const char *table = argv[optind], *orders = argv[optind + 1];
    if (strcmp(table, "-") == 0 && strcmp(orders, "-") == 0)
        return usage_error("apply", "the quote table and the orders cannot both be standard input ('-')");
    const char *inputs[2] = {table, orders};
    int u = cli_check_output("apply", output, inputs, 2);
    if (u)
        return u;

    etacal_error err;
    etacal_error_clear(&err);
    etacal_quotes *q = NULL;
    cliout of = {0};
    etacal_apply_stats st;
    outbuf sum = {0};
    size_t sel[ETACAL_APPLY_MAX_TARGETS];
    int rc = etacal_quotes_read_csv(cli_input(table), tdelim, &q, &err);
    if (rc)
        return report_error(&err);
    for (size_t i = 0; i < ntargets; i++) {
        long ti = etacal_quotes_find_target(q, targets[i]);
        if (ti < 0) {
            char buf[ETACAL_NUM_BUFSZ];
            etacal_num_format(targets[i], buf);
            etacal_error_set(&err, ETACAL_EINVAL, table, "the quote table has no rows for target %s", buf);
            goto fail;
        }
        sel[i] = (size_t)ti;
    }
    if (ntargets) {
        ao.targets = sel;
        ao.ntargets = ntargets;
    }
    rc = cliout_open(&of, output, &err);
    if (rc)
        goto fail;
    rc = etacal_apply(q, cli_input(orders), &of.sink, &ao, &st, &err);
    /* the summary is made in memory first: the orders' output appears only
     * with it */
    if (rc == 0 && !quiet) {
        etacal_sink sink = outbuf_sink(&sum);
        rc = etacal_apply_write_summary(q, orders, &ao, &st, &sink, &err);
        if (rc && sum.oom)
            rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    if (rc == 0)
        rc = cliout_commit(&of, &err);
    cliout_close(&of);
    if (rc)
        goto fail;
    if (!quiet)
        fwrite(sum.data, 1, sum.len, output ? stdout : stderr);
    free(sum.data);
    etacal_quotes_destroy(q);
    return 0;
fail:
    free(sum.data);
    etacal_quotes_destroy(q);
    return report_error(&err);
}
