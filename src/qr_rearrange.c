/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_rearrange.c: the monotone rearrangement of predicted quantiles
 * (Chernozhukov, Fernandez-Val & Galichon 2010), so that they never cross. */
#include "base.h"

#include <math.h>
#include <string.h>

/* The measure of {u in a piece : Q(u) <= y} (strict = 0) or {Q(u) < y}
 * (strict = 1), for the piece of width w on which Q runs linearly from a
 * to b.  On a flat piece (a == b) all or nothing. */
static double piece_below(double a, double b, double w, double y, int strict)
{
    double lo = a < b ? a : b, hi = a < b ? b : a;
    if (strict ? y <= lo : y < lo)
        return 0;
    if (strict ? y > hi : y >= hi)
        return w;
    return w * ((y - lo) / (hi - lo));
}

/* G(y) = sum over the pieces, in piece order (so that G at the largest
 * value is bit for bit the sum of the widths, the last level's target). */
static double below(const double *tau, const double *q, size_t m, double y, int strict)
{
    double g = 0;
    for (size_t j = 0; j + 1 < m; j++)
        g += piece_below(q[j], q[j + 1], tau[j + 1] - tau[j], y, strict);
    return g;
}

/* The rearrangement of Chernozhukov, Fernandez-Val & Galichon (2010,
 * Econometrica 78(3), sec. 2) applied to the piecewise-linear curve Q
 * through (tau_j, q_j): Q*(t) = inf{y : G(y) >= t - tau_0}, G(y) = |{u in
 * [tau_0, tau_m-1] : Q(u) <= y}|, i.e. the quantile function of Q(U) with
 * U uniform on the range of the levels.  G is piecewise linear between
 * consecutive distinct values q_j (each piece contributes a linear ramp, or
 * a jump when flat), so Q* is computed exactly rather than on a grid: find
 * the first value Y_b with G(Y_b) >= t - tau_0 and invert the line between
 * Y_b-1 and the left limit of G at Y_b. */
int etacal_rearrange(const double *tau, double *q, size_t m, etacal_error *err)
{
    if (m > ETACAL_QR_MAX_LEVELS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d levels to rearrange", ETACAL_QR_MAX_LEVELS);
    for (size_t j = 0; j < m; j++) {
        if (!isfinite(q[j]) || !isfinite(tau[j]))
            return etacal_error_set(err, ETACAL_ENUM, NULL, "a predicted quantile is not finite");
        if (j && !(tau[j] > tau[j - 1]))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "levels must be given in ascending order");
    }
    size_t j = 1;
    while (j < m && q[j] >= q[j - 1])
        j++;
    if (j >= m)
        return ETACAL_OK; /* monotone already: its own rearrangement */
    /* the distinct values, ascending (insertion sort: m <= 32) */
    double Y[ETACAL_QR_MAX_LEVELS], out[ETACAL_QR_MAX_LEVELS], GY[ETACAL_QR_MAX_LEVELS];
    size_t K = 0;
    for (size_t i = 0; i < m; i++) {
        size_t at = K;
        while (at > 0 && Y[at - 1] > q[i])
            at--;
        if (at > 0 && Y[at - 1] == q[i])
            continue;
        memmove(Y + at + 1, Y + at, (K - at) * sizeof *Y);
        Y[at] = q[i];
        K++;
    }
    for (size_t b = 0; b < K; b++)
        GY[b] = below(tau, q, m, Y[b], 0);
    double g = 0; /* tau_i - tau_0 as the sum of the widths before level i */
    size_t b = 0;
    for (size_t i = 0; i < m; i++) {
        if (i)
            g += tau[i] - tau[i - 1];
        while (b + 1 < K && GY[b] < g)
            b++;
        if (b == 0 || GY[b - 1] >= g) {
            out[i] = Y[b];
            continue;
        }
        double g0 = GY[b - 1], gl = below(tau, q, m, Y[b], 1);
        double v = g >= gl ? Y[b] : Y[b - 1] + (Y[b] - Y[b - 1]) * ((g - g0) / (gl - g0));
        out[i] = v < Y[b - 1] ? Y[b - 1] : v > Y[b] ? Y[b] : v;
    }
    memcpy(q, out, m * sizeof *q);
    return ETACAL_OK;
}
