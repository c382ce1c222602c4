/* SPDX-License-Identifier: GPL-3.0-or-later */
/* select.c: the k-th order statistic in expected O(n) time.
 *
 * Quickselect (Hoare 1961) with a median-of-three pivot and a three-way
 * (Dijkstra) partition, so that heavily tied data, such as durations rounded
 * to whole seconds, shrink the range as fast as distinct data.  After too
 * many rounds without progress it sorts what is left, which bounds the
 * worst case at O(n log n) (the idea of introselect, Musser 1997). */
#include "base.h"

#include <stdlib.h>

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static void swap(double *a, double *b)
{
    double t = *a;
    *a = *b;
    *b = t;
}

double etacal_select(double *x, size_t n, size_t k)
{
    size_t lo = 0, hi = n; /* the answer lies in x[lo..hi) */
    size_t target = k - 1;
    int budget = 2 * 64;
    while (hi - lo > 16) {
        if (budget-- == 0) {
            qsort(x + lo, hi - lo, sizeof *x, cmp_double);
            return x[target];
        }
        size_t mid = lo + (hi - lo) / 2;
        /* median of three into x[mid] */
        if (x[mid] < x[lo])
            swap(&x[mid], &x[lo]);
        if (x[hi - 1] < x[mid]) {
            swap(&x[hi - 1], &x[mid]);
            if (x[mid] < x[lo])
                swap(&x[mid], &x[lo]);
        }
        double pivot = x[mid];
        /* Three-way partition: [lo,lt) < pivot, [lt,i) == pivot, (gt,hi) > pivot. */
        size_t lt = lo, i = lo, gt = hi;
        while (i < gt) {
            if (x[i] < pivot)
                swap(&x[lt++], &x[i++]);
            else if (x[i] > pivot)
                swap(&x[i], &x[--gt]);
            else
                i++;
        }
        if (target < lt)
            hi = lt;
        else if (target >= gt)
            lo = gt;
        else
            return pivot;
    }
    /* insertion sort on the small remainder */
    for (size_t i = lo + 1; i < hi; i++) {
        double v = x[i];
        size_t j = i;
        while (j > lo && x[j - 1] > v) {
            x[j] = x[j - 1];
            j--;
        }
        x[j] = v;
    }
    return x[target];
}
