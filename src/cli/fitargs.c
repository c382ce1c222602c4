/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fitargs.c: the options of `etacal fit` (shared with `etacal publish`,
 * `curve` and `report`) and the library's fit specification they make. */
#include "fitargs.h"

#include <stdlib.h>
#include <string.h>

#define MAX_KEYS FIT_MAX_KEYS

void fit_args_init(fit_args *a)
{
    memset(a, 0, sizeof *a);
    a->min_rows = 200;
    a->seed = 1;
    a->split = 0.5;
    a->method = ETACAL_METHOD_ADD;
    a->ro = (etacal_read_opts){
        .delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01, .threads = ETACAL_THREADS_AUTO};
}

int fit_option(int c, const char *cmd, fit_args *a)
{
    switch (c) {
    case FO_ACTUAL: a->actual = optarg; return 0;
    case FO_PRED: a->pred = optarg; return 0;
    case FO_BY:
        a->nkeys = 0;
        if (parse_names(optarg, a->keys, &a->nkeys, MAX_KEYS) != 0)
            return usage_error(cmd, "--by takes up to %d comma-separated column names", MAX_KEYS);
        return 0;
    case FO_TARGET:
        if (parse_targets(optarg, a->targets, &a->ntargets, FIT_MAX_TARGETS) != 0)
            return usage_error(cmd, "--target takes on-time rates in (0,1), such as 0.9,0.95 (at most %d)",
                               FIT_MAX_TARGETS);
        return 0;
    case FO_METHOD:
        a->method = etacal_method_parse(optarg);
        if (a->method < 0)
            return usage_error(cmd, "--method must be add, ratio or qr, not '%s'", optarg);
        return 0;
    case FO_MINROWS:
        if (parse_size(optarg, &a->min_rows) != 0 || a->min_rows == 0)
            return usage_error(cmd, "--min-rows takes a whole number >= 1");
        return 0;
    case FO_X:
        a->nx = 0;
        if (parse_names(optarg, a->xs, &a->nx, ETACAL_QR_MAX_COVARIATES - 1) != 0)
            return usage_error(cmd, "--x takes up to %d comma-separated column names",
                               ETACAL_QR_MAX_COVARIATES - 1);
        return 0;
    case FO_SPLIT:
        if (parse_share(optarg, &a->split) != 0 || !(a->split > 0 && a->split < 1))
            return usage_error(cmd, "--split takes a share in (0,1)");
        return 0;
    case FO_SEED:
        if (parse_size(optarg, &a->seed) != 0)
            return usage_error(cmd, "--seed takes a whole number");
        return 0;
    case FO_HOLDOUT:
        if (parse_share(optarg, &a->holdout) != 0 || !(a->holdout > 0 && a->holdout < 1))
            return usage_error(cmd, "--holdout takes a share in (0,1), such as 0.2");
        return 0;
    case FO_TIME: a->timecol = optarg; return 0;
    case FO_HALFLIFE:
        if (parse_duration(optarg, &a->halflife) != 0 || !(a->halflife > 0))
            return usage_error(cmd, "--half-life takes a duration such as 7d, 36h, 90m or 3600 (seconds)");
        return 0;
    case FO_CONF:
        if (parse_share(optarg, &a->confidence) != 0 || !(a->confidence > 0 && a->confidence < 1))
            return usage_error(cmd, "--confidence takes a probability in (0,1), such as 0.95");
        return 0;
    default:
        return -1;
    }
}

void fit_spec(const fit_args *a, etacal_fitspec *s)
{
    etacal_fitspec_init(s);
    s->actual = a->actual;
    s->pred = a->pred;
    s->keys = (const char *const *)a->keys;
    s->nkeys = a->nkeys;
    s->xs = (const char *const *)a->xs;
    s->nx = a->nx;
    s->targets = a->targets;
    s->ntargets = a->ntargets;
    s->method = a->method;
    s->min_rows = a->min_rows;
    s->split = a->split;
    s->seed = (unsigned long)a->seed;
    s->confidence = a->confidence;
    s->holdout = a->holdout;
    s->time = a->timecol;
    s->half_life = a->halflife;
    s->threads = a->ro.threads;
}

int fit_args_check(fit_args *a, const char *cmd)
{
    etacal_fitspec s;
    etacal_error err;
    fit_spec(a, &s);
    if (etacal_fitspec_check(&s, &err) != 0)
        return usage_error(cmd, "%s", err.msg);
    if (a->ntargets == 0)
        a->targets[a->ntargets++] = 0.9;
    return 0;
}
