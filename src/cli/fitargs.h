/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fitargs.h: the options of `etacal fit`, shared with `etacal publish`
 * (which fits the same way), `curve` and `report`, and the library's fit
 * specification (fit.h) they make. */
#ifndef ETACAL_CLI_FITARGS_H
#define ETACAL_CLI_FITARGS_H

#include "cli.h"

#include <getopt.h>

#define FIT_MAX_KEYS ETACAL_MAX_KEYS
#define FIT_MAX_TARGETS ETACAL_MAX_TARGETS

enum { FO_ACTUAL = 256, FO_PRED, FO_BY, FO_TARGET, FO_METHOD, FO_MINROWS, FO_X, FO_SPLIT, FO_SEED, FO_CONF,
       FO_HOLDOUT, FO_TIME, FO_HALFLIFE };

#define FIT_OPTIONS                                                                                           \
    {"actual", required_argument, 0, FO_ACTUAL}, {"pred", required_argument, 0, FO_PRED},                    \
        {"by", required_argument, 0, FO_BY}, {"target", required_argument, 0, FO_TARGET},                    \
        {"method", required_argument, 0, FO_METHOD}, {"min-rows", required_argument, 0, FO_MINROWS},         \
        {"x", required_argument, 0, FO_X}, {"split", required_argument, 0, FO_SPLIT},                        \
        {"seed", required_argument, 0, FO_SEED}, {"confidence", required_argument, 0, FO_CONF},              \
        {"holdout", required_argument, 0, FO_HOLDOUT}, {"time", required_argument, 0, FO_TIME},              \
        {"half-life", required_argument, 0, FO_HALFLIFE}

/* The help lines of FIT_OPTIONS (without --holdout's and --time's, which
 * each command words for itself). */
#define FIT_OPTIONS_HELP                                                                                      \
    "  --actual COL          column of actual durations, seconds (required)\n"                               \
    "  --pred COL            column of predicted durations, seconds (required)\n"                            \
    "  --by COL[,COL...]     key columns that define segments (default: one global segment)\n"              \
    "  --target T[,T...]     on-time targets in (0,1) (default 0.9); repeatable\n"                           \
    "  --method add|ratio|qr add: promise = pred + buffer (default);\n"                                      \
    "                        ratio: promise = pred * factor (predictions must be > 0);\n"                    \
    "                        qr: quantile regression of actual on pred (and --x), plus a\n"                  \
    "                        conformal correction from held-back rows\n"                                     \
    "  --x COL[,COL...]      method qr: extra covariates of the regression\n"                                \
    "  --split F             method qr: share of each segment's rows for the regression,\n"                  \
    "                        the rest calibrates the correction (default 0.5)\n"                             \
    "  --seed S              method qr: seed of the random split (default 1)\n"                              \
    "  --min-rows N          a segment with fewer rows uses the nearest level above\n"                       \
    "                        (default 200)\n"

typedef struct fit_args {
    const char *actual, *pred, *timecol;
    char *keys[FIT_MAX_KEYS];
    size_t nkeys;
    char *xs[ETACAL_QR_MAX_COVARIATES];
    size_t nx;
    double targets[FIT_MAX_TARGETS];
    size_t ntargets, min_rows, seed;
    double split, confidence, holdout, halflife;
    int method;
    etacal_read_opts ro;
} fit_args;

void fit_args_init(fit_args *a);
/* One option of FIT_OPTIONS: 0 when handled, EXIT_USAGE after a message
 * for a bad value, -1 when c is not one of them. */
int fit_option(int c, const char *cmd, fit_args *a);
/* Cross-checks the options after parsing (and sets the default target):
 * 0, else a usage error. */
int fit_args_check(fit_args *a, const char *cmd);

/* The library's specification of the fit these options ask for (the
 * arrays stay a's). */
void fit_spec(const fit_args *a, etacal_fitspec *s);

#endif
