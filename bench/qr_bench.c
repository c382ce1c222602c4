/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_bench.c: times etacal's quantile regression fit alone (no file
 * reading) on seeded data, and can write the same data as CSV for the
 * reference solvers (R's quantreg, statsmodels).
 *   qr_bench N P TAU [--csv FILE] [--reps R] [--threads T] [--seed S]
 * N rows, P covariates; y = 1500 + sum b_j x_j + (60 + 20|x_1|) e, rounded
 * to whole seconds (many ties, as real durations have).  Prints one line:
 *   n p tau seconds(min of R runs) objective iterations coef-checksum solves */
#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "etacal/etacal.h"

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

int main(int argc, char **argv)
{
    if (argc < 4) {
        fprintf(stderr, "usage: qr_bench N P TAU [--csv FILE] [--reps R] [--threads T] [--seed S]\n");
        return 2;
    }
    gsl_set_error_handler_off();
    size_t n = (size_t)strtoull(argv[1], NULL, 10), p = (size_t)strtoul(argv[2], NULL, 10);
    double tau = strtod(argv[3], NULL);
    const char *csv = NULL;
    int reps = 1, threads = ETACAL_THREADS_AUTO;
    unsigned long seed = 0;
    for (int i = 4; i + 1 < argc; i += 2) {
        if (strcmp(argv[i], "--csv") == 0)
            csv = argv[i + 1];
        else if (strcmp(argv[i], "--reps") == 0)
            reps = atoi(argv[i + 1]);
        else if (strcmp(argv[i], "--threads") == 0)
            threads = atoi(argv[i + 1]);
        else if (strcmp(argv[i], "--seed") == 0)
            seed = strtoul(argv[i + 1], NULL, 10);
    }
    if (p < 1 || p > ETACAL_QR_MAX_COVARIATES || n < 10)
        return 2;
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 20261201);
    double *y = malloc(n * sizeof *y);
    double *x[ETACAL_QR_MAX_COVARIATES];
    double b[ETACAL_QR_MAX_COVARIATES], sc[ETACAL_QR_MAX_COVARIATES];
    for (size_t j = 0; j < p; j++) {
        x[j] = malloc(n * sizeof(double));
        b[j] = gsl_ran_flat(r, -80, 80);
        sc[j] = gsl_ran_flat(r, 0.5, 3);
    }
    for (size_t i = 0; i < n; i++) {
        double v = 1500;
        for (size_t j = 0; j < p; j++) {
            x[j][i] = sc[j] * gsl_ran_ugaussian(r);
            v += b[j] * x[j][i];
        }
        v += (60 + 20 * fabs(x[0][i])) * gsl_ran_ugaussian(r);
        y[i] = nearbyint(v);
    }
    gsl_rng_free(r);
    if (csv) {
        FILE *fp = fopen(csv, "w");
        if (!fp)
            return 1;
        fprintf(fp, "y");
        for (size_t j = 0; j < p; j++)
            fprintf(fp, ",x%zu", j + 1);
        fputc('\n', fp);
        for (size_t i = 0; i < n; i++) {
            fprintf(fp, "%.0f", y[i]);
            for (size_t j = 0; j < p; j++)
                fprintf(fp, ",%.17g", x[j][i]);
            fputc('\n', fp);
        }
        if (fclose(fp) != 0)
            return 1;
    }
    double best = INFINITY;
    etacal_qr_result res;
    unsigned long long sum = 0;
    etacal_qr_opts opts = {0};
    opts.threads = threads;
    opts.seed = seed;
    for (int k = 0; k < reps; k++) {
        etacal_error err;
        double t0 = now();
        if (etacal_qr_fit(y, (const double *const *)x, p, NULL, n, tau, NULL, &opts, &res, &err) != ETACAL_OK) {
            fprintf(stderr, "qr_bench: %s\n", err.msg);
            return 1;
        }
        double dt = now() - t0;
        if (dt < best)
            best = dt;
        unsigned long long s = 0;
        for (size_t j = 0; j < res.p; j++) {
            unsigned long long u;
            memcpy(&u, &res.coef[j], sizeof u);
            s = s * 1099511628211ULL ^ u;
        }
        if (k && s != sum) {
            fprintf(stderr, "qr_bench: run %d gave other coefficients\n", k);
            return 1;
        }
        sum = s;
    }
    printf("%zu %zu %g %.4f %.17g %d %016llx %d\n", n, p, tau, best, res.objective, res.iterations, sum, res.solves);
    for (size_t j = 0; j < p; j++)
        free(x[j]);
    free(y);
    return 0;
}
