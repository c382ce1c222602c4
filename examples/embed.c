/* SPDX-License-Identifier: GPL-3.0-or-later */
/* embed.c: libetacal from another program, with nothing but
 * <etacal/etacal.h>.
 *
 * A week of made-up orders of the invented city of Veldmark is built in
 * memory (no CSV file), a quote table is fitted at a 90% on-time target per
 * zone, and two new orders get their promises.  Build it against an
 * installed library:
 *
 *     cc -std=c11 embed.c $(pkg-config --cflags --libs etacal) -o embed
 *
 * With an argument, the rows are also written to that CSV file, so that the
 * command-line tool can be run on the same data (tests/tools/embed.sh).
 *
 * The promise is an upper bound that 90% of orders of a zone meet; it is
 * not a deadline for the courier. */
#include <etacal/etacal.h>

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#define NROWS 6000

/* A small seeded generator (splitmix64), so every run gives the same rows. */
static uint64_t next(uint64_t *s)
{
    uint64_t z = (*s += UINT64_C(0x9e3779b97f4a7c15));
    z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
    return z ^ (z >> 31);
}

static double unif(uint64_t *s) { return (double)(next(s) >> 11) * 0x1.0p-53; }

int main(int argc, char **argv)
{
    printf("libetacal %s\n", etacal_version());

    static double actual[NROWS], pred[NROWS];
    static const char *zone[NROWS];
    static const char *const zones[] = {"harbour", "old town", "riverside"};
    static const double extra[] = {120, 300, 60}; /* old town's lanes are slow */
    uint64_t seed = 20261202;
    for (size_t i = 0; i < NROWS; i++) {
        size_t z = (size_t)(next(&seed) % 3);
        zone[i] = zones[z];
        pred[i] = 900 + 1500 * unif(&seed);
        /* durations run late of the prediction by a skewed amount */
        actual[i] = pred[i] - 200 + extra[z] * -log(1 - unif(&seed)) * 2;
        if (actual[i] < 60)
            actual[i] = 60;
    }

    if (argc > 1) {
        FILE *fp = fopen(argv[1], "w");
        if (!fp) {
            perror(argv[1]);
            return 1;
        }
        fprintf(fp, "zone,pred_s,actual_s\n");
        for (size_t i = 0; i < NROWS; i++)
            fprintf(fp, "%s,%.17g,%.17g\n", zone[i], pred[i], actual[i]);
        if (fclose(fp) != 0) {
            perror(argv[1]);
            return 1;
        }
    }

    etacal_fitspec spec;
    etacal_fitspec_init(&spec);
    static const char *const keys[] = {"zone"};
    static const double target = 0.9;
    spec.actual = "actual_s";
    spec.pred = "pred_s";
    spec.keys = keys;
    spec.nkeys = 1;
    spec.targets = &target;
    spec.ntargets = 1;

    etacal_error err;
    etacal_colspec cols[ETACAL_FIT_MAX_COLS];
    size_t ncols = etacal_fitspec_columns(&spec, cols);
    etacal_column_data data[ETACAL_FIT_MAX_COLS] = {{.num = actual}, {.num = pred}, {.str = zone}};
    etacal_table *t = NULL;
    etacal_fit_run *run = NULL;
    etacal_quote_index *ix = NULL;
    int rc = etacal_table_from_arrays(cols, data, ncols, NROWS, "week", ETACAL_TABLE_BORROW, &t, &err);
    if (rc == ETACAL_OK)
        rc = etacal_fit_table(&spec, t, &run, &err);
    if (rc == ETACAL_OK)
        rc = etacal_quote_index_create(etacal_fit_run_quotes(run), &ix, &err);
    if (rc != ETACAL_OK) {
        fprintf(stderr, "embed: %s%s%s\n", err.where, err.where[0] ? ": " : "", err.msg);
        etacal_fit_run_destroy(run);
        etacal_table_destroy(t);
        return 1;
    }

    /* two new orders: their zone and the model's prediction */
    const char *order_zone[2] = {"old town", "harbour"};
    double order_pred[2] = {1260, 1260};
    for (size_t o = 0; o < 2; o++) {
        const char *k[1] = {order_zone[o]};
        long row = etacal_quote_index_lookup(ix, k, NULL, 0, NULL);
        double promise = etacal_promise_round(etacal_quote_index_promise(ix, row, order_pred[o], NULL, NULL, NULL), 60);
        printf("order %zu in %s: predicted %.0f s, promised %.0f s (%.0f min)\n", o + 1, order_zone[o],
               order_pred[o], promise, promise / 60);
    }

    etacal_quote_index_destroy(ix);
    etacal_fit_run_destroy(run);
    etacal_table_destroy(t);
    return 0;
}
