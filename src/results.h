/* SPDX-License-Identifier: GPL-3.0-or-later */
/* results.h: the results of the uses of a quote table as the library fills
 * them in place (not installed).  The public API hands each out as a new
 * object with its _destroy (results.c); inside, a run keeps them in its own
 * structs. */
#ifndef ETACAL_RESULTS_H
#define ETACAL_RESULTS_H

#include "base.h"

int backtest_fill(const etacal_table *t, size_t actual_col, size_t pred_col, size_t time_col,
                        const size_t *key_cols, size_t nkeys, const etacal_backtest_opts *opts,
                        etacal_backtest_result *out, etacal_error *err);
void backtest_release(etacal_backtest_result *x);

int curve_fill(const etacal_quotes *q, const etacal_holdout *h, double conf, etacal_curve *out,
                         etacal_error *err);
void curve_release(etacal_curve *x);

int quotes_compare_fill(const etacal_quotes *old_q, const etacal_quotes *new_q, double pred,
                          const char *const *x_names, const double *x, size_t nx, etacal_quotes_diff *out,
                          etacal_error *err);
void quotes_diff_release(etacal_quotes_diff *x);

int holdout_fill(const etacal_quotes *q, const etacal_table *t, size_t actual_col, size_t pred_col,
                          const size_t *key_cols, const size_t *x_cols, const unsigned char *mask,
                          etacal_holdout *out, etacal_error *err);
void holdout_release(etacal_holdout *x);

int report_hist_fill(const etacal_table *t, size_t actual_col, size_t pred_col,
                                 const unsigned char *mask, etacal_report_hist *out, etacal_error *err);
void report_hist_release(etacal_report_hist *x);

#endif
