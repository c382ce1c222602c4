/* SPDX-License-Identifier: GPL-3.0-or-later */
/* promise.c: the promise of one quote-table row for one order, the formula
 * every user of a table shares (apply, holdout, publish), so that they
 * cannot disagree.
 *
 * Method qr: a linear quantile model is only supported where it was fitted;
 * outside the covariates' range it extrapolates a straight line without
 * bound (a promise of -3,187 s for a distance ten times the largest one
 * seen).  The usual practice for linear models applied beyond their data is
 * to hold each covariate at the nearest edge of the range it was fitted on
 * (common practice, no source): the promise of a far order is then the
 * promise of the edge of the data.  The range is the fitting part's
 * (quote.c), and the calibration scores are computed with the same clamping,
 * so the split-conformal guarantee is that of the clamped formula exactly.
 * A promise is a duration: whatever the formula gives, never below 0. */
#include "base.h"
#include "quote_internal.h"

#include <math.h>

double quote_row_promise(const etacal_quotes *q, const etacal_quote *row, double pred, const double *x,
                            int *clamped, int *floored)
{
    double v = row->offset_s + row->slope * pred;
    int moved = 0;
    for (size_t j = 0; j < q->ncoef; j++) {
        double xj = x[j];
        if (row->x_min && xj < row->x_min[j]) {
            xj = row->x_min[j];
            moved = 1;
        } else if (row->x_max && xj > row->x_max[j]) {
            xj = row->x_max[j];
            moved = 1;
        }
        v += row->coef[j] * xj;
    }
    if (clamped)
        *clamped = moved;
    int low = v < 0;
    if (low)
        v = 0;
    if (floored)
        *floored = low;
    return v;
}

double etacal_quotes_promise(const etacal_quotes *q, size_t r, double pred, const double *x, int *clamped,
                             int *floored)
{
    if (!q || r >= q->nrows)
        return NAN;
    return quote_row_promise(q, &q->rows[r], pred, x, clamped, floored);
}
