/* SPDX-License-Identifier: GPL-3.0-or-later */
/* stream.h: the library's stdio writers (not installed).  The public API
 * takes sinks and paths (writers.c wraps these); inside, each module keeps
 * one writer over a stream. */
#ifndef ETACAL_STREAM_H
#define ETACAL_STREAM_H

#include "base.h"

/* Streams the orders in in_path ("-" for stdin) to out: every record is
 * copied byte for byte (quoting kept) with the promise columns appended:
 * "promise_s" for one target, "promise_s_<pct>" (promise_s_90,
 * promise_s_97.5) for several.  The key columns of q are looked up in the
 * orders' header by name.  An order takes the most specific row of the table
 * that matches it: its own segment, then its segment with the last keys
 * replaced by "*", down to the global row.  The promise is
 * etacal_quotes_promise's (covariates clamped into the row's range, never
 * below 0), in seconds, rounded up (never down).  Memory does not grow with the number of orders.  On error
 * the output is incomplete: write to an etacal_outfile to keep it from
 * appearing. */
int apply_csv(const etacal_quotes *q, const char *in_path, FILE *out,
                     const etacal_apply_opts *opts, etacal_apply_stats *stats, etacal_error *err);

/* Writes the table as CSV: the key columns, then
 * target,method,n,k,offset_s,slope and, for method qr, one coef_<name>
 * column per extra covariate, then min_<name>,max_<name> per covariate (its
 * range on the rows the segment's regression was fitted on); with a confidence, also confidence,
 * coverage_mean and coverage_low (the mean of the coverage law of the bound
 * and the coverage reached with that confidence); with key columns, a last
 * column cell (own, rest, all: etacal_cell_name) when every row's cell is
 * known; one row per segment with a row of its own and
 * target, global rows first.  Numbers in shortest round-trip form. */
int quotes_write_csv(const etacal_quotes *q, FILE *fp, etacal_error *err);

/* Writes one CSV field (RFC 4180): quoted, with inner quotes doubled, only
 * when it holds the delimiter, a quote, a line break or edge spaces. */
void csv_put_field(FILE *fp, const char *s, size_t len, char delim);

/* Streams in_path ("-" for stdin) to out, copying each record byte for byte
 * and appending q_<pct> (q_10, q_50, q_97.5) for each of the ntau levels:
 * the fitted quantiles coef[t*p + 0] + sum_j coef[t*p + 1 + j] x_j, with p =
 * k + 1 and x_j clamped into its range, rearranged at each row so that they
 * do not cross, raised to opts->floor, to the nearest millisecond.  The k
 * covariate columns are found by name.  A row with a missing covariate gets
 * empty predictions (counted); a malformed one is an error at FILE:LINE, or
 * with bad_rows = ETACAL_BAD_ROWS_SKIP is written with empty predictions and
 * counted.  stats may be NULL.  Memory does not grow with the number of
 * rows. */
int qr_predict_csv(const double *coef, const double *taus, size_t ntau, size_t k,
                          const char *const *xnames, const char *in_path, FILE *out,
                          const etacal_qr_predict_opts *opts, etacal_qr_predict_stats *stats, etacal_error *err);

/* qr_predict_csv with every level of f: each covariate clamped into
 * its range in the data of the fit, and predictions floored at 0 when the
 * response was never negative there (f->y_nonneg).  xnames name the k
 * covariate columns of in_path.  Errors: as qr_predict_csv;
 * ETACAL_EINVAL for an empty f. */
int qr_fits_predict_csv(const etacal_qr_fits *f, const char *const *xnames, const char *in_path, FILE *out,
                               char delim, int bad_rows, etacal_qr_predict_stats *stats, etacal_error *err);

#endif
