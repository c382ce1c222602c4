/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cli.h: what the command-line front end's files share.  The CLI parses
 * options, calls the library and prints; it computes no statistics. */
#ifndef ETACAL_CLI_H
#define ETACAL_CLI_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "etacal/etacal.h"

enum { EXIT_DATA = 1, EXIT_USAGE = 2 };

int cmd_fit(int argc, char **argv);
int cmd_apply(int argc, char **argv);
int cmd_check(int argc, char **argv);
int cmd_qr(int argc, char **argv);
int cmd_curve(int argc, char **argv);
int cmd_backtest(int argc, char **argv);
int cmd_publish(int argc, char **argv);
int cmd_report(int argc, char **argv);

/* One CSV field with a comma delimiter. */

/* "etacal: CMD: msg" and a hint to --help on stderr; returns EXIT_USAGE. */
int usage_error(const char *cmd, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
/* Prints "etacal: WHERE: MSG" for a library error; returns EXIT_DATA. */
int report_error(const etacal_error *err);

/* The options of every command that reads a data file with etacal_read_opts:
 * --delim, --bad-rows, --max-bad-share, --threads. */
enum { OPT_DELIM = 900, OPT_BAD_ROWS, OPT_MAX_BAD, OPT_THREADS };
#define READ_OPTIONS                                                                                         \
    {"delim", required_argument, 0, OPT_DELIM}, {"bad-rows", required_argument, 0, OPT_BAD_ROWS},           \
        {"max-bad-share", required_argument, 0, OPT_MAX_BAD}, {"threads", required_argument, 0, OPT_THREADS}
/* Handles one of them: 0 when handled, EXIT_USAGE after a message for a bad
 * value, -1 when c is not one of them. */
int read_option(int c, const char *cmd, etacal_read_opts *ro);
/* The end of every command's option switch: a read option, or a missing
 * value (':'), or an unknown option.  0 to go on, else the exit status. */
int other_option(int c, const char *cmd, etacal_read_opts *ro, char **argv);
/* Exactly one input file after the options: 0, else a usage error
 * ("no WHAT given", or the extra argument named). */
int one_input(int argc, char **argv, const char *cmd, const char *what);
/* --format text|csv|json: 0, else a usage error. */
int parse_format(const char *s, const char *cmd, const char **out);

/* Option values shared by the commands. */
/* A command's output (cliout.c): path "-" or NULL is standard output,
 * written as it goes; another path an etacal_outfile, which appears whole
 * or not at all.  Write through sink; commit; close always (it abandons an
 * uncommitted file). */
typedef struct cliout {
    etacal_outfile *of; /* NULL: standard output */
    etacal_sink sink;
} cliout;
int cliout_open(cliout *o, const char *path, etacal_error *err);
int cliout_commit(cliout *o, etacal_error *err);
void cliout_close(cliout *o);
/* The path the library reads for an input named on the command line: "-"
 * (standard input) becomes "/dev/stdin". */
const char *cli_input(const char *path);
/* A usage error (EXIT_USAGE) when the output path out names the same file
 * as one of the n inputs (the same path, or another path or link to the
 * same file), else 0: a command never writes over its own input. */
int cli_check_output(const char *cmd, const char *out, const char *const *inputs, size_t n);

int parse_delim(const char *s, char *out);
int parse_bad_rows(const char *s, int *out);
int parse_share(const char *s, double *out);
int parse_size(const char *s, size_t *out);
int parse_seconds(const char *s, double *out);
/* A duration: a number of seconds, or with a unit s, m, h, d or w. */
int parse_duration(const char *s, double *out);
/* Appends the comma-separated levels of s to targets (capacity max). */
int parse_targets(const char *s, double *targets, size_t *n, size_t max);
/* Splits a comma-separated list of column names; the strings point into
 * the modified s. */
int parse_names(char *s, char **names, size_t *n, size_t max);

/* Progress on stderr while reading a big file, when stderr is a terminal. */
typedef struct progress {
    const char *name;
    int active;
    int last_pct;
} progress;
void progress_cb(void *ud, uint64_t done, uint64_t total);
void progress_end(progress *p);

/* An aligned text table. */

#endif
