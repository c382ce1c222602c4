/* SPDX-License-Identifier: GPL-3.0-or-later */
/* check.h: do a model's promises, intervals and quantiles cover what they
 * claim?  Coverage with a binomial confidence interval, pinball loss,
 * interval score, slack and lateness, overall and per segment. */
#ifndef ETACAL_CHECK_H
#define ETACAL_CHECK_H

#include <stddef.h>

#include "etacal/binom.h"
#include "etacal/error.h"
#include "etacal/table.h"

#ifdef __cplusplus
extern "C" {
#endif

enum {
    ETACAL_MEASURE_UPPER = 0,    /* a one-sided promise: hit when actual <= upper */
    ETACAL_MEASURE_INTERVAL = 1, /* hit when lower <= actual <= upper */
    ETACAL_MEASURE_QUANTILE = 2  /* hit when actual <= q (share below) */
};

enum {
    ETACAL_STATUS_NONE = 0,  /* no nominal level to compare with */
    ETACAL_STATUS_OK = 1,    /* the confidence interval holds the nominal level */
    ETACAL_STATUS_UNDER = 2, /* the whole interval lies below it */
    ETACAL_STATUS_OVER = 3   /* the whole interval lies above it */
};

typedef struct etacal_check_opts {
    size_t actual_col;
    long upper_col, lower_col; /* table columns, or -1 */
    double upper_level;        /* NaN when not given */
    double lower_level;
    const size_t *q_cols;      /* quantile forecast columns and their levels */
    const double *q_taus;
    size_t nq;
    const size_t *key_cols;
    size_t nkeys;
    double confidence; /* of the binomial interval; 0 means 0.95 */
    int ci;            /* ETACAL_CI_WILSON or ETACAL_CI_EXACT */
    size_t min_rows;   /* segments with fewer rows are flagged thin; 0 means 30 */
} etacal_check_opts;

/* What is measured, in the order of etacal_check_result.measures:
 * the promise (--upper alone) or the interval (--upper with --lower); then
 * the quantile forecast in ascending tau: the quantile columns and, when an
 * interval's two bounds have levels, the two bounds as quantiles. */
typedef struct etacal_measure_def {
    int kind;
    size_t col, col2;  /* forecast column (interval: upper, lower) */
    double nominal;    /* nominal hit rate (coverage, on-time rate, tau); NaN if unknown */
    double level;      /* pinball level (upper/quantile) or interval alpha; NaN if none */
    /* interval with unequal tails (both levels given, lower level a and
     * upper level b with a != 1 - b): the interval score is
     * etacal_interval_score_tails with these; else NaN and the central
     * interval's score with alpha = level */
    double tail_lo, tail_hi;
} etacal_measure_def;

typedef struct etacal_measure {
    size_t n, hits;
    double coverage, ci_lo, ci_hi;
    int status;
    double pinball;        /* mean pinball loss; NaN without a level */
    double interval_score; /* mean interval score; NaN unless an interval with a nominal level */
    double mean_width;     /* interval: mean upper - lower (s); else NaN */
    double mean_slack;     /* upper: mean upper - actual over on-time rows (s); NaN if none */
    double mean_lateness;  /* upper: mean actual - upper over late rows (s); NaN if none */
    size_t late;           /* upper: rows with actual > upper */
} etacal_measure;

typedef struct etacal_check_segment {
    char **keys;          /* "*" in every key for the overall figures */
    size_t n;
    int thin;             /* n < min_rows: shown, not gated */
    etacal_measure *m;    /* nmeasures entries */
    size_t crossing_rows; /* rows where a lower-tau quantile exceeds a higher one */
} etacal_check_segment;

typedef struct etacal_check_result {
    size_t nkeys;
    char **key_names;
    size_t nmeasures;
    etacal_measure_def *measures;
    size_t nq_sorted;       /* quantile measures (the last ones), for calibration and crossing */
    size_t nsegs;           /* segs[0]: all rows */
    etacal_check_segment *segs;
    double confidence;
    int ci;
    size_t min_rows;
    int gate_failed; /* the overall figure, or a segment that is not thin, is under */
} etacal_check_result;

/* Runs the check over the rows of t (read with ETACAL_NUM_SKIP_MISSING on
 * every column used, so no NaN remains).  *out is new; free with
 * etacal_check_destroy.  Errors: no rows, no measure, levels outside (0,1),
 * an interval whose upper level is not above its lower level, two columns
 * at the same level. */
int etacal_check_run(const etacal_table *t, const etacal_check_opts *opts, etacal_check_result **out,
                     etacal_error *err);
void etacal_check_destroy(etacal_check_result *r);

/* "ok", "under", "over" or "-". */
const char *etacal_status_name(int status);

#ifdef __cplusplus
}
#endif
#endif
