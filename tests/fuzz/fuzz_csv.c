/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fuzz_csv.c: libFuzzer target for the CSV ingest: the typed table reader
 * (etacal_table_read_csv, with the two-part parallel read when the fuzz
 * build lowers its size threshold), a fit on what was read, and the
 * streaming apply (csvstream's raw mode) of the fitted table to the same
 * bytes.  The first input byte picks the options; the rest is the file.
 * Oracles: no crash or sanitizer report; a fitted table writes, reads back
 * and applies; reading twice gives the same rows. */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include "etacal/etacal.h"
#include "internal.h"
#include "stream.h" /* the quote table's fields, to check them */

#include "fuzz_common.h"

#include <math.h>

static int fuzz_csv_one(const uint8_t *data, size_t size)
{
    if (size < 1)
        return 0;
    unsigned opt = data[0];
    const char *path = fuzz_write(data + 1, size - 1);
    if (!path)
        return 0;
    static const char delims[4] = {',', ';', '\t', '|'};
    etacal_colspec cols[] = {
        {"zone", ETACAL_COL_KEY, 0, NULL},
        {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE, "prediction"},
        {"actual_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE, "duration"},
        {"placed_at", ETACAL_COL_NUM, ETACAL_NUM_TIME, NULL},
    };
    size_t ncols = (opt & 4) ? 4 : 3;
    etacal_read_opts ro = {0};
    ro.delim = delims[opt & 3];
    ro.bad_rows = (opt & 8) ? ETACAL_BAD_ROWS_SKIP : ETACAL_BAD_ROWS_ERROR;
    ro.max_bad_share = 0.5;
    ro.threads = (opt & 16) ? 1 : ETACAL_THREADS_AUTO;
    etacal_table *t = NULL;
    etacal_error err;
    etacal_error_clear(&err);
    int rc = etacal_table_read_csv(path, cols, ncols, &ro, &t, &err);
    if (rc) {
        FUZZ_CHECK(t == NULL && err.code == rc && err.msg[0]);
        return 0;
    }
    /* one thread or two: the same rows */
    etacal_read_opts r1 = ro;
    r1.threads = ro.threads == 1 ? ETACAL_THREADS_AUTO : 1;
    etacal_table *t1 = NULL;
    etacal_error e1;
    etacal_error_clear(&e1);
    FUZZ_CHECK(etacal_table_read_csv(path, cols, ncols, &r1, &t1, &e1) == ETACAL_OK);
    size_t n = etacal_table_rows(t);
    FUZZ_CHECK(etacal_table_rows(t1) == n);
    for (size_t c = 1; c < ncols; c++)
        FUZZ_CHECK(n == 0 || memcmp(etacal_table_num(t, c), etacal_table_num(t1, c), n * sizeof(double)) == 0);
    etacal_table_destroy(t1);

    /* a fit on small tables (bounded work), then write, read back, apply */
    if (n > 0 && n <= 5000) {
        size_t key = 0;
        double targets[2] = {0.5, 0.9};
        etacal_fit_opts fo = {0};
        fo.method = (opt & 32) ? ETACAL_METHOD_RATIO : ETACAL_METHOD_ADD;
        fo.targets = targets;
        fo.ntargets = 2;
        fo.min_rows = 2;
        etacal_quotes *q = NULL;
        etacal_error_clear(&err);
        if (etacal_quotes_fit(t, 2, 1, &key, (opt & 64) ? 0 : 1, &fo, &q, &err) == ETACAL_OK) {
            FILE *qf = fopen(path, "wb");
            FUZZ_CHECK(qf != NULL);
            FUZZ_CHECK(quotes_write_csv(q, qf, &err) == ETACAL_OK);
            FUZZ_CHECK(fclose(qf) == 0);
            etacal_quotes *q2 = NULL;
            etacal_error e2;
            etacal_error_clear(&e2);
            rc = etacal_quotes_read_csv(path, ',', &q2, &e2);
            if (rc)
                fprintf(stderr, "re-reading a fitted table: %s: %s\n", e2.where, e2.msg);
            FUZZ_CHECK(rc == ETACAL_OK);
            FUZZ_CHECK(q2->nrows == q->nrows && q2->ntargets == q->ntargets);
            /* the original bytes through the table, streamed */
            path = fuzz_write(data + 1, size - 1);
            FUZZ_CHECK(path != NULL);
            FILE *out = fopen("/dev/null", "w");
            FUZZ_CHECK(out != NULL);
            etacal_apply_opts ao = {0};
            ao.pred_col = "pred_s";
            ao.actual_col = "actual_s";
            ao.delim = ro.delim;
            ao.bad_rows = ro.bad_rows;
            ao.round_s = (opt & 128) ? 60 : 0;
            etacal_apply_stats st;
            etacal_error_clear(&e2);
            (void)apply_csv(q2, path, out, &ao, &st, &e2);
            fclose(out);
            etacal_quotes_destroy(q2);
        }
        etacal_quotes_destroy(q);
    }
    etacal_table_destroy(t);
    return 0;
}

#ifndef ETACAL_FUZZ_REPLAY
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size) { return fuzz_csv_one(data, size); }
#endif
