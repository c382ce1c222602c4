/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_report.c: `etacal report`: one HTML page a product manager can read
 * at a glance.  The options become a report specification; the library
 * (etacal_report_csv) reads, holds out, fits, scores, backtests and writes
 * the page; this prints its notes and errors.  No statistics here. */
#include "fitargs.h"

#include <getopt.h>
#include <stdlib.h>
#include <string.h>

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
    etacal_report_spec rs;
    etacal_report_spec_init(&rs);
    a.holdout = rs.fit.holdout;
    const char *output = NULL;
    double target = 0.9;
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
            *(c == O_WINDOW ? &rs.window_s : &rs.every_s) = v;
            break;
        }
        case O_TITLE: rs.title = optarg; break;
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
    if ((nin = cli_check_output("report", output, (const char *const *)&argv[optind], 1)) != 0)
        return nin;
    if (a.confidence > 0)
        return usage_error("report", "--confidence is not offered by report (use etacal fit or curve)");
    a.ntargets = 1;
    a.targets[0] = target;
    int u = fit_args_check(&a, "report");
    if (u)
        return u;
    fit_spec(&a, &rs.fit);
    rs.command = cmdline;
    const char *path = argv[optind];
    progress pg = {path, 0, -1};
    etacal_read_opts ro = a.ro;
    ro.progress = progress_cb;
    ro.progress_ud = &pg;
    etacal_report_notes notes;
    etacal_error err;
    etacal_error_clear(&err);
    cliout of;
    int rc = cliout_open(&of, output, &err);
    if (rc == 0)
        rc = etacal_report_csv(&rs, cli_input(path), &ro, &of.sink, &notes, &err);
    else
        notes.n = 0;
    if (rc == 0)
        rc = cliout_commit(&of, &err);
    cliout_close(&of);
    progress_end(&pg);
    for (size_t i = 0; i < notes.n; i++)
        fprintf(stderr, "etacal: report: %s\n", notes.text[i]);
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
