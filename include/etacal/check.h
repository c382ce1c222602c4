/* SPDX-License-Identifier: GPL-3.0-or-later */
/* check.h: do a model's promises, intervals and quantiles cover what they
 * claim?  Coverage with a binomial confidence interval, pinball loss,
 * interval score, slack and lateness, overall and per segment. */
#ifndef ETACAL_CHECK_H
#define ETACAL_CHECK_H

#include <stddef.h>

#include "etacal/binom.h"
#include "etacal/error.h"
#include "etacal/io.h"
#include "etacal/quote.h"
#include "etacal/table.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
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
    /* The gate: family-wise error level in (0,1) of its Holm (1979)
     * procedure; 0 means 0.05. */
    double gate_level;
    /* The quote table whose promises upper_col holds (NULL: none).  With
     * it, the orders are grouped by the table row that served them, found
     * as etacal apply finds it (the order's own segment, else its keys
     * replaced by "*" from the last one on until a row for the target
     * exists), and each row's hits are tested against the law of its
     * bound: Beta-binomial(m, k, n + 1 - k) for m orders, the row's
     * calibration n and rank k (Vovk 2012; Angelopoulos & Bates 2023, sec.
     * 3.2).  Needs upper_col with upper_level one of the table's targets,
     * no lower bound, no quantiles and no key_cols; table_key_cols[j] is
     * the column of t that holds the table's key j.  Rows whose k is
     * unknown or is not the rank an unweighted fit gives for their n
     * (ceil((n+1) tau), or the rank with the table's confidence) are an
     * error: recency weights (or hand edits) leave no known law. */
    const etacal_quotes *table;
    const size_t *table_key_cols;
    const char *table_source; /* the table's file, for messages; may be NULL */
    /* The confidence the table was fitted with (its 'confidence' column;
     * etacal_quotes_read_csv does not keep it), 0 for none: its rows' k
     * are then the rank with that confidence.  Used when table->confidence
     * is 0. */
    double table_confidence;
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
    /* The gate's test of this figure (NaN and 0 when it is not tested: no
     * nominal level, a thin segment, or the overall figure under a table):
     * p = P(X <= hits) under the law of an honest figure, Binomial(n,
     * nominal) without a table and Beta-binomial(n, k, n_cal + 1 - k)
     * with one; p_holm the Holm-adjusted p-value over every tested
     * figure; reject = p_holm <= the gate level. */
    double p, p_holm;
    int tested, reject;
} etacal_measure;

typedef struct etacal_check_segment {
    char **keys;          /* "*" in every key for the overall figures */
    size_t n;
    int thin;             /* n < min_rows: shown, not gated */
    etacal_measure *m;    /* nmeasures entries */
    size_t crossing_rows; /* rows where a lower-tau quantile exceeds a higher one */
    long table_row;       /* with a table: the row of table->rows serving these orders; else -1 */
    size_t cal_n, cal_k;  /* with a table: that row's calibration n and rank k; else 0 */
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
    /* The gate: every figure with a nominal level in the overall segment
     * and the segments that are not thin (with a table: the table rows
     * that served at least min_rows orders) is tested one-sided, and Holm's
     * step-down procedure at gate_level across the ntests of them decides;
     * gate_failed when it rejects any. */
    double gate_level;
    size_t ntests, nrejected;
    int table_law;   /* the tests use the table's Beta-binomial law */
    double target;   /* with a table: the target checked */
    int gate_failed;
} etacal_check_result;

/* Runs the check over the rows of t (read with ETACAL_NUM_SKIP_MISSING on
 * every column used, so no NaN remains).  *out is new; free with
 * etacal_check_destroy.  Errors: no rows, no measure, levels outside (0,1),
 * an interval whose upper level is not above its lower level, two columns
 * at the same level. */
int etacal_check_run(const etacal_table *t, const etacal_check_opts *opts, etacal_check_result **out,
                     etacal_error *err);
void etacal_check_destroy(etacal_check_result *r);

/* What etacal_check_write needs beside the result. */
typedef struct etacal_check_write_opts {
    const char *source;        /* the data file's name, as shown ("etacal check: FILE"; "file") */
    const etacal_table *table; /* the rows checked (required): column names, read counts */
    const char *quote_source;  /* with a table's law: the quote table's file name */
    int gate;                  /* the gate was asked for: its tests and verdict are written */
} etacal_check_write_opts;

/* Writes a check's result to out in format ETACAL_FORMAT_TEXT, _CSV or
 * _JSON (io.h), as etacal check prints it; it computes nothing.  The gate's
 * tests (p, p_holm, verdict "ok", "under", "thin" or none) are written
 * when opts->gate is set or the result has a table's law; the verdict line
 * only with opts->gate.
 *
 * Text: a heading (file, rows read, used, left out, malformed; the
 * intervals), a table with one line per segment and measure (coverage to
 * 4 decimals, pinball to 2, seconds to 1, "-" for none), the calibration
 * table and crossing count of a quantile forecast (two levels or more), the
 * gate's tests, the verdict line.
 *
 * CSV: one record per segment and measure: the key columns, then measure,
 * column, column2, nominal, n, hits, coverage, ci_low, ci_high, status,
 * thin, pinball, interval_score, mean_width_s, mean_slack_s,
 * mean_lateness_s, late, crossing_rows; then p, p_holm, verdict with the
 * gate; then table_n, table_k with a table's law (empty on the overall
 * record).  Numbers to 10 significant digits, empty for none.
 *
 * JSON: {"etacal": version, "file", "rows": {"read", "used", "missing",
 * "malformed"}, "confidence", "ci": "wilson"|"exact", "min_rows", "keys":
 * [names], "segments": [{"keys": {name: value}, "overall", "n", "thin",
 * "table_row": {"n", "k"} or null (with a table's law only),
 * "crossing_rows" (null below two quantile levels), "measures":
 * [{"measure": "upper"|"interval"|"quantile", "column", "lower_column"
 * (intervals), "nominal", "n", "hits", "coverage", "ci": [lo, hi],
 * "status", "pinball", "interval_score", "mean_width_s", "mean_slack_s",
 * "mean_lateness_s", "late" (null but for a promise), and with the gate
 * "p", "p_holm", "verdict"}]}], "gate": null or {"failed", "law":
 * "binomial"|"beta-binomial", "level", "tests", "rejected",
 * "calibration_noise_accounted", and with a table's law "table",
 * "target"}}.  Reals to 10 significant digits; NaN as null.
 *
 * Errors: ETACAL_EINVAL (no result or table, an unknown format, a sink
 * without a write function, more than 64 key columns), ETACAL_ENOMEM,
 * ETACAL_EIO when the sink refuses bytes.  On an error the sink may have
 * received part of the output. */
int etacal_check_write(const etacal_check_result *r, const etacal_check_write_opts *opts, int format,
                       const etacal_sink *out, etacal_error *err);

/* Holm's (1979) step-down adjusted p-values of n p-values: with p sorted
 * ascending, adj_(i) = max over j <= i of min(1, (n - j + 1) p_(j)), so
 * that rejecting every adj <= delta is Holm's procedure at family-wise
 * error delta (under any dependence).  adj may be p.  Errors: a p-value
 * outside [0,1] or NaN; out of memory. */
int etacal_holm(const double *p, size_t n, double *adj, etacal_error *err);

/* "ok", "under", "over" or "-". */
const char *etacal_status_name(int status);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
