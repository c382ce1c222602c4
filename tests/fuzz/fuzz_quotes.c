/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fuzz_quotes.c: libFuzzer target for the quote-table reader
 * (etacal_quotes_read_csv).  The input is the table.  Oracles: no crash or
 * sanitizer report; a refused table leaves *out NULL with a message; an
 * accepted one has a global row for every target, writes out, reads back
 * the same, and streams a small fixed file of orders. */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include "etacal/etacal.h"
#include "internal.h"
#include "stream.h" /* the quote table's fields, to check them */

#include "fuzz_common.h"

#include <math.h>

static int fuzz_quotes_one(const uint8_t *data, size_t size)
{
    const char *path = fuzz_write(data, size);
    if (!path)
        return 0;
    etacal_quotes *q = (etacal_quotes *)&q; /* must become NULL on failure */
    etacal_error err;
    etacal_error_clear(&err);
    int rc = etacal_quotes_read_csv(path, 0, &q, &err);
    if (rc) {
        FUZZ_CHECK(q == NULL && err.code == rc && err.msg[0]);
        return 0;
    }
    FUZZ_CHECK(q->nrows > 0 && q->ntargets > 0 && q->nsegs > 0);
    for (size_t i = 0; i < q->nrows; i++) {
        const etacal_quote *r = &q->rows[i];
        FUZZ_CHECK(r->seg < q->nsegs && r->target < q->ntargets);
        FUZZ_CHECK(isfinite(r->offset_s) && isfinite(r->slope));
        FUZZ_CHECK(q->targets[r->target] > 0 && q->targets[r->target] < 1);
    }
    for (size_t t = 0; t < q->ntargets; t++)
        FUZZ_CHECK(q->segs[0].status[t] == ETACAL_OWN_ROW);
    /* written and read back: the same rows */
    char *buf = NULL;
    size_t len = 0;
    FILE *mf = open_memstream(&buf, &len);
    FUZZ_CHECK(mf != NULL);
    FUZZ_CHECK(quotes_write_csv(q, mf, &err) == ETACAL_OK);
    FUZZ_CHECK(fclose(mf) == 0);
    path = fuzz_write((const uint8_t *)buf, len);
    FUZZ_CHECK(path != NULL);
    etacal_quotes *q2 = NULL;
    rc = etacal_quotes_read_csv(path, 0, &q2, &err);
    if (rc)
        fprintf(stderr, "re-reading the written table: %s: %s\n%s", err.where, err.msg, buf);
    FUZZ_CHECK(rc == ETACAL_OK);
    FUZZ_CHECK(q2->nrows == q->nrows && q2->ntargets == q->ntargets && q2->nsegs == q->nsegs &&
               q2->nkeys == q->nkeys && q2->ncoef == q->ncoef);
    for (size_t t = 0; t < q->ntargets; t++)
        FUZZ_CHECK(q2->targets[t] == q->targets[t]);
    free(buf);
    /* orders through the table: its key and covariate columns, then the
     * prediction (a name no table column can take: it holds a space) */
    mf = open_memstream(&buf, &len);
    FUZZ_CHECK(mf != NULL);
    for (size_t j = 0; j < q->nkeys; j++) {
        csv_put_field(mf, q->key_names[j], strlen(q->key_names[j]), ',');
        putc(',', mf);
    }
    for (size_t j = 0; j < q->ncoef; j++) {
        csv_put_field(mf, q->coef_names[j], strlen(q->coef_names[j]), ',');
        putc(',', mf);
    }
    fprintf(mf, "\"pred s\"\n");
    for (int row = 0; row < 3; row++) {
        for (size_t j = 0; j < q->nkeys; j++) {
            const char *kv = q->segs[row % q->nsegs].keys[j];
            csv_put_field(mf, kv, strlen(kv), ',');
            putc(',', mf);
        }
        for (size_t j = 0; j < q->ncoef; j++)
            fprintf(mf, "1.5,");
        fprintf(mf, "%s\n", row == 2 ? "NA" : "600.25"); /* NA: a row without a promise */
    }
    FUZZ_CHECK(fclose(mf) == 0);
    etacal_quotes_destroy(q2);
    path = fuzz_write((const uint8_t *)buf, len);
    FUZZ_CHECK(path != NULL);
    FILE *out = fopen("/dev/null", "w");
    FUZZ_CHECK(out != NULL);
    etacal_apply_opts ao = {0};
    ao.pred_col = "pred s";
    etacal_apply_stats st;
    etacal_error_clear(&err);
    rc = apply_csv(q, path, out, &ao, &st, &err);
    fclose(out);
    /* a key column may be named like a covariate, or twice: then apply may
     * refuse the header, but never a row */
    if (rc == ETACAL_OK) {
        if (!(st.rows == 3 && st.promised == 2))
            fprintf(stderr, "apply: %zu rows, %zu promised, %zu bad\n%s", st.rows, st.promised, st.bad, buf);
        FUZZ_CHECK(st.rows == 3 && st.promised == 2);
    }
    free(buf);
    etacal_quotes_destroy(q);
    return 0;
}

#ifndef ETACAL_FUZZ_REPLAY
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size) { return fuzz_quotes_one(data, size); }
#endif
