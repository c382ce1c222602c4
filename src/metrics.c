/* SPDX-License-Identifier: GPL-3.0-or-later */
/* metrics.c: pinball loss and interval score (formulas in metrics.h). */
#include "base.h"

double etacal_pinball(double y, double q, double tau)
{
    double d = y - q;
    return d >= 0 ? tau * d : (tau - 1) * d;
}

double etacal_interval_score(double y, double l, double u, double alpha)
{
    double s = u - l;
    if (y < l)
        s += 2 / alpha * (l - y);
    if (y > u)
        s += 2 / alpha * (y - u);
    return s;
}

double etacal_interval_score_tails(double y, double l, double u, double a, double b)
{
    double s = u - l;
    if (y < l)
        s += (l - y) / a;
    if (y > u)
        s += (y - u) / (1 - b);
    return s;
}
