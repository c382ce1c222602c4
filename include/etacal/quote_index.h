/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_index.h: finding the row of a quote table that serves an order, and
 * the promise it gives.
 *
 * Every user of a quote table (apply, the held-out scores, publish's
 * comparison, the report, a binding or a database integration) goes
 * through one index, so that they all pick the same row by the same rule:
 * an order takes the most specific row of the table that matches it, its
 * own segment first, then its segment with the last keys replaced by "*",
 * down to the global row.  A table with two segments of the same keys is
 * refused (ETACAL_EINVAL). */
#ifndef ETACAL_QUOTE_INDEX_H
#define ETACAL_QUOTE_INDEX_H

#include <stddef.h>

#include "etacal/error.h"
#include "etacal/quote.h"

#ifdef __cplusplus
extern "C" {
#endif
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

typedef struct etacal_quote_index etacal_quote_index;

/* Builds the index of q (borrowed: q must outlive the index).  *out is new;
 * free with etacal_quote_index_destroy (NULL allowed). */
int etacal_quote_index_create(const etacal_quotes *q, etacal_quote_index **out, etacal_error *err);
void etacal_quote_index_destroy(etacal_quote_index *ix);

/* The row (an index into the table's rows) that serves an order whose key
 * values are keys[j] (lens[j] bytes each; lens NULL: NUL-terminated texts),
 * for target index ti; -1 when no row matches (a table without a global row
 * for that target).  A key value "*" stands for any value (the segment one
 * level up).  *level (may be NULL) gets the number of keys the row matched
 * by value: nkeys for the order's own segment, 0 for the global row.  Never
 * allocates; safe from several threads at once. */
long etacal_quote_index_lookup(const etacal_quote_index *ix, const char *const *keys, const size_t *lens, size_t ti,
                               size_t *level);

/* The segment (an index into the table's segments) whose key values are
 * exactly keys: values, then "*" for the keys a coarser segment leaves open
 * ("north", "*"); -1 when the table has no such segment (or a value follows
 * a "*").  The segments of a table are numbered as the table holds
 * them. */
long etacal_quote_index_segment(const etacal_quote_index *ix, const char *const *keys, const size_t *lens);

/* The promise of row r for an order with prediction pred and covariates
 * x[0..ncoef) in the table's coefficient order (NULL without covariates),
 * seconds, not rounded: etacal_quotes_promise's formula (covariates clamped
 * into the row's range, never below 0; *clamped and *floored, each may be
 * NULL, say whether either happened). */
double etacal_quote_index_promise(const etacal_quote_index *ix, long r, double pred, const double *x, int *clamped,
                                  int *floored);

/* The table the index was built from. */
const etacal_quotes *etacal_quote_index_quotes(const etacal_quote_index *ix);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
