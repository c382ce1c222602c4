/* SPDX-License-Identifier: GPL-3.0-or-later */
/* refcalc.c: a thin driver that exposes library calls to the reference
 * scripts, which compare them with numpy and the like.
 *   refcalc type1 P [P...]   < numbers   type-1 quantiles (Hyndman & Fan 1996)
 *   refcalc rank N TAU                    ceil((N+1) TAU)
 *   refcalc conformal TAU    < numbers   the one-sided split-conformal bound
 *   refcalc wilson|exact CONF < "x n" lines   binomial intervals, "lo hi" per line
 *   refcalc rankconf CONF < "n tau" lines    the rank with confidence, "k mean low"
 *   refcalc range CONF < "p n" lines   the central binomial range, "lo hi" per line
 *   refcalc qr TAU K SE [PRE] < "y x1 .. xK" lines   quantile regression: prints
 *           "coef c0 .. cK", "se s0 .. sK", "objective", "iterations", "bandwidth";
 *           SE is none, powell or boot (200 reps, seed 1); PRE 1 forces
 *           preprocessing, 2 forbids it
 *   refcalc utf8 < hex lines              1 or 0 per line: the bytes are UTF-8 (utf8_valid)
 *   refcalc rearrange < "m t1..tm q1..qm" lines   etacal_rearrange: the m
 *           rearranged values on one line
 *   refcalc betabinom < "h m a b" lines   P(H <= h), H ~ Beta-binomial(m, a, b), one per line
 *   refcalc binomcdf < "h m p" lines      P(X <= h), X ~ Binomial(m, p), one per line
 *   refcalc holm < lines of p-values      Holm-adjusted p-values, the same shape
 * Numbers are read one per line; results print with %.17g, one per line. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_errno.h>

#include "etacal/etacal.h"
#include "internal.h" /* utf8_valid */

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
    if (argc == 2 && strcmp(argv[1], "utf8") == 0) {
        static char line[4096];
        unsigned char bytes[2048];
        while (fgets(line, sizeof line, stdin)) {
            size_t n = 0;
            unsigned b;
            for (const char *p = line; sscanf(p, "%2x", &b) == 1 && n < sizeof bytes; p += 2)
                bytes[n++] = (unsigned char)b;
            printf("%d\n", utf8_valid((const char *)bytes, n));
        }
        return 0;
    }
    if (argc >= 3 && strcmp(argv[1], "type1") == 0) {
        size_t n;
        double *x = read_all(&n);
        for (int i = 2; i < argc; i++)
            printf("%.17g\n", etacal_quantile_type1(x, n, arg(argv[i])));
        free(x);
        return 0;
    }
    if (argc == 2 && strcmp(argv[1], "betabinom") == 0) {
        size_t h, m;
        double a, b;
        while (scanf("%zu %zu %lf %lf", &h, &m, &a, &b) == 4)
            printf("%.17g\n", etacal_betabinom_cdf(h, m, a, b));
        return 0;
    }
    if (argc == 2 && strcmp(argv[1], "binomcdf") == 0) {
        size_t h, m;
        double p;
        while (scanf("%zu %zu %lf", &h, &m, &p) == 3)
            printf("%.17g\n", etacal_binom_cdf(h, m, p));
        return 0;
    }
    if (argc == 2 && strcmp(argv[1], "holm") == 0) {
        static char line[65536];
        while (fgets(line, sizeof line, stdin)) {
            double p[1024];
            size_t n = 0;
            char *s = line, *end;
            while (n < 1024) {
                double v = strtod(s, &end);
                if (end == s)
                    break;
                p[n++] = v;
                s = end;
            }
            etacal_error err;
            if (etacal_holm(p, n, p, &err) != ETACAL_OK) {
                fprintf(stderr, "refcalc: %s\n", err.msg);
                return 1;
            }
            for (size_t i = 0; i < n; i++)
                printf("%s%.17g", i ? " " : "", p[i]);
            printf("\n");
        }
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
    if (argc == 3 && strcmp(argv[1], "range") == 0) {
        double conf = arg(argv[2]), p;
        size_t n, lo, hi;
        while (scanf("%lf %zu", &p, &n) == 2) {
            etacal_error err;
            if (etacal_binom_range(p, n, conf, &lo, &hi, &err) != ETACAL_OK) {
                fprintf(stderr, "refcalc: %s\n", err.msg);
                return 1;
            }
            printf("%zu %zu\n", lo, hi);
        }
        return 0;
    }
    if (argc == 3 && strcmp(argv[1], "rankconf") == 0) {
        double conf = arg(argv[2]), tau;
        size_t n;
        while (scanf("%zu %lf", &n, &tau) == 2) {
            size_t k = etacal_conformal_rank_conf(n, tau, conf);
            printf("%zu %.17g %.17g\n", k, k <= n ? etacal_coverage_mean(n, k) : 1.0,
                   k <= n ? etacal_coverage_low(n, k, conf) : 1.0);
        }
        return 0;
    }
    if (argc >= 5 && strcmp(argv[1], "qr") == 0) {
        double tau = arg(argv[2]);
        size_t k = (size_t)arg(argv[3]);
        const char *sem = argv[4];
        etacal_qr_opts o = {0};
        if (argc >= 6)
            o.preprocess = (int)arg(argv[5]);
        size_t cap = 1024, n = 0;
        double *y = malloc(cap * sizeof *y), *xs = malloc(cap * 16 * sizeof *xs);
        double v[17];
        for (;;) {
            size_t got = 0;
            for (size_t j = 0; j <= k; j++)
                got += scanf("%lf", &v[j]) == 1;
            if (got != k + 1)
                break;
            if (n == cap) {
                cap *= 2;
                y = realloc(y, cap * sizeof *y);
                xs = realloc(xs, cap * 16 * sizeof *xs);
            }
            y[n] = v[0];
            for (size_t j = 0; j < k; j++)
                xs[j * 0 + n * 16 + j] = v[j + 1];
            n++;
        }
        double *cols[16];
        for (size_t j = 0; j < k; j++) {
            cols[j] = malloc(n * sizeof(double));
            for (size_t i = 0; i < n; i++)
                cols[j][i] = xs[i * 16 + j];
        }
        etacal_qr_result r;
        etacal_error err;
        if (etacal_qr_fit(y, (const double *const *)cols, k, NULL, n, tau, NULL, &o, &r, &err) != ETACAL_OK) {
            fprintf(stderr, "refcalc: %s\n", err.msg);
            return 1;
        }
        int m = strcmp(sem, "powell") == 0 ? ETACAL_SE_POWELL : strcmp(sem, "boot") == 0 ? ETACAL_SE_BOOT : ETACAL_SE_NONE;
        double se[17], bw;
        if (etacal_qr_se(y, (const double *const *)cols, k, n, tau, &r, m, 200, 1, &o, se, &bw, &err) != ETACAL_OK) {
            fprintf(stderr, "refcalc: %s\n", err.msg);
            return 1;
        }
        printf("coef");
        for (size_t j = 0; j < r.p; j++)
            printf(" %.17g", r.coef[j]);
        printf("\nse");
        for (size_t j = 0; j < r.p; j++)
            printf(" %.17g", se[j]);
        printf("\nobjective %.17g\niterations %d\nbandwidth %.17g\nsolves %d\n", r.objective, r.iterations, bw,
               r.solves);
        for (size_t j = 0; j < k; j++)
            free(cols[j]);
        free(y);
        free(xs);
        return 0;
    }
    if (argc == 2 && strcmp(argv[1], "rearrange") == 0) {
        size_t m;
        while (scanf("%zu", &m) == 1) {
            double t[ETACAL_QR_MAX_LEVELS], q[ETACAL_QR_MAX_LEVELS];
            if (m == 0 || m > ETACAL_QR_MAX_LEVELS)
                return 2;
            for (size_t i = 0; i < 2 * m; i++)
                if (scanf("%lf", i < m ? &t[i] : &q[i - m]) != 1)
                    return 2;
            etacal_error err;
            if (etacal_rearrange(t, q, m, &err) != ETACAL_OK) {
                fprintf(stderr, "refcalc: %s\n", err.msg);
                return 1;
            }
            for (size_t i = 0; i < m; i++)
                printf(i ? " %.17g" : "%.17g", q[i]);
            putchar('\n');
        }
        return 0;
    }
    fprintf(stderr, "usage: refcalc type1 P... | rank N TAU | conformal TAU | wilson|exact CONF\n");
    return 2;
}
