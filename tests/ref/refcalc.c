/* SPDX-License-Identifier: GPL-3.0-or-later */
/* refcalc.c: a thin driver that exposes library calls to the reference
 * scripts, which compare them with numpy and the like.
 *   refcalc type1 P [P...]   < numbers   type-1 quantiles (Hyndman & Fan 1996)
 *   refcalc rank N TAU                    ceil((N+1) TAU)
 *   refcalc conformal TAU    < numbers   the one-sided split-conformal bound
 *   refcalc wilson|exact CONF < "x n" lines   binomial intervals, "lo hi" per line
 * Numbers are read one per line; results print with %.17g, one per line. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_errno.h>

#include "etacal/etacal.h"

static double *read_all(size_t *n)
{
    size_t cap = 1024;
    double *x = malloc(cap * sizeof *x);
    char line[256];
    *n = 0;
    while (x && fgets(line, sizeof line, stdin)) {
        size_t len = strcspn(line, "\r\n");
        double v;
        if (etacal_num_parse(line, len, &v) != ETACAL_NUM_VALUE) {
            fprintf(stderr, "refcalc: bad number '%.*s'\n", (int)len, line);
            exit(1);
        }
        if (*n == cap) {
            cap *= 2;
            double *y = realloc(x, cap * sizeof *x);
            if (!y)
                exit(1);
            x = y;
        }
        x[(*n)++] = v;
    }
    return x;
}

static double arg(const char *s)
{
    double v;
    if (etacal_num_parse(s, strlen(s), &v) != ETACAL_NUM_VALUE) {
        fprintf(stderr, "refcalc: bad argument '%s'\n", s);
        exit(2);
    }
    return v;
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    if (argc >= 3 && strcmp(argv[1], "type1") == 0) {
        size_t n;
        double *x = read_all(&n);
        for (int i = 2; i < argc; i++)
            printf("%.17g\n", etacal_quantile_type1(x, n, arg(argv[i])));
        free(x);
        return 0;
    }
    if (argc == 4 && strcmp(argv[1], "rank") == 0) {
        printf("%zu\n", etacal_conformal_rank((size_t)arg(argv[2]), arg(argv[3])));
        return 0;
    }
    if (argc == 3 && strcmp(argv[1], "conformal") == 0) {
        size_t n, k;
        double *x = read_all(&n);
        printf("%.17g\n", etacal_conformal_upper(x, n, arg(argv[2]), &k));
        free(x);
        return 0;
    }
    if (argc == 3 && (strcmp(argv[1], "wilson") == 0 || strcmp(argv[1], "exact") == 0)) {
        int method = strcmp(argv[1], "exact") == 0 ? ETACAL_CI_EXACT : ETACAL_CI_WILSON;
        double conf = arg(argv[2]);
        size_t x, n;
        while (scanf("%zu %zu", &x, &n) == 2) {
            double lo, hi;
            etacal_error err;
            if (etacal_binom_ci(method, x, n, conf, &lo, &hi, &err) != ETACAL_OK) {
                fprintf(stderr, "refcalc: %s\n", err.msg);
                return 1;
            }
            printf("%.17g %.17g\n", lo, hi);
        }
        return 0;
    }
    fprintf(stderr, "usage: refcalc type1 P... | rank N TAU | conformal TAU | wilson|exact CONF\n");
    return 2;
}
