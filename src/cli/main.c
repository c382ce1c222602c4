/* SPDX-License-Identifier: GPL-3.0-or-later */
/* main.c: the etacal command: dispatches to one function per command. */
#include "cli.h"

#include <string.h>

static const char usage[] =
    "Usage: etacal COMMAND [OPTION]... [FILE]...\n"
    "Turn a delivery-time model's point predictions into promise times that\n"
    "keep a target on-time rate.\n"
    "\n"
    "Commands:\n"
    "  fit     fit a promise (quote) table from predictions and actual durations\n"
    "  apply   add promise times to a file of new orders using a quote table\n"
    "  check   check that promises, intervals or quantiles cover what they claim\n"
    "  qr      linear quantile regression, with standard errors and predictions\n"
    "  curve   what each on-time target costs, measured on held-out rows\n"
    "  backtest  would the nightly job have kept its promise? (rolling origin)\n"
    "  publish   fit a new quote table and replace the current one only when every\n"
    "            guard holds (atomic, locked, with a provenance record)\n"
    "  report    one self-contained HTML page: charts and tables on a quote table\n"
    "\n"
    "Run 'etacal COMMAND --help' for a command's options.\n"
    "  -h, --help     show this help and exit\n"
    "  -V, --version  show the version and exit\n"
    "\n"
    "Exit status: 0 success, 1 data or runtime error, 2 usage error,\n"
    "3 a gate failed (etacal check --gate) or a guard refused (etacal publish).\n";

int main(int argc, char **argv)
{
    if (argc < 2)
        return usage_error(NULL, "no command given");
    const char *cmd = argv[1];
    int rc;
    char help_opt[] = "--help";
    char *help_argv[4] = {argv[0], NULL, help_opt, NULL};
    if (strcmp(cmd, "help") == 0 && argc > 2) {
        /* etacal help CMD: that command's help */
        cmd = help_argv[1] = argv[2];
        argc = 3;
        argv = help_argv;
        if (strcmp(cmd, "help") == 0 || cmd[0] == '-')
            return usage_error(NULL, "unknown command '%s'", cmd);
    }
    if (strcmp(cmd, "-h") == 0 || strcmp(cmd, "--help") == 0 || strcmp(cmd, "help") == 0) {
        fputs(usage, stdout);
        rc = 0;
    } else if (strcmp(cmd, "-V") == 0 || strcmp(cmd, "--version") == 0) {
        puts("etacal " ETACAL_VERSION);
        rc = 0;
    } else if (strcmp(cmd, "fit") == 0) {
        rc = cmd_fit(argc - 1, argv + 1);
    } else if (strcmp(cmd, "apply") == 0) {
        rc = cmd_apply(argc - 1, argv + 1);
    } else if (strcmp(cmd, "check") == 0) {
        rc = cmd_check(argc - 1, argv + 1);
    } else if (strcmp(cmd, "qr") == 0) {
        rc = cmd_qr(argc - 1, argv + 1);
    } else if (strcmp(cmd, "curve") == 0) {
        rc = cmd_curve(argc - 1, argv + 1);
    } else if (strcmp(cmd, "backtest") == 0) {
        rc = cmd_backtest(argc - 1, argv + 1);
    } else if (strcmp(cmd, "publish") == 0) {
        rc = cmd_publish(argc - 1, argv + 1);
    } else if (strcmp(cmd, "report") == 0) {
        rc = cmd_report(argc - 1, argv + 1);
    } else if (cmd[0] == '-') {
        return usage_error(NULL, "unknown option '%s'", cmd);
    } else {
        return usage_error(NULL, "unknown command '%s'", cmd);
    }
    if (fflush(stdout) != 0 || ferror(stdout)) {
        fprintf(stderr, "etacal: write error on standard output\n");
        return EXIT_DATA;
    }
    return rc;
}
