/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_write.c: a quote table as CSV, one row per segment and target with
 * its own row, numbers in shortest round-trip form, so that the reader
 * (quote_read.c) gets every value back bit for bit. */
#include "base.h"
#include "quote_internal.h"
#include "stream.h"

#include <math.h>
#include <string.h>

/* Writes s as one CSV field, quoted only when it must be. */

void csv_put_field(FILE *fp, const char *s, size_t len, char delim)
{
    int need = len > 0 && (s[0] == ' ' || s[len - 1] == ' ');
    for (size_t i = 0; i < len && !need; i++)
        need = s[i] == delim || s[i] == '"' || s[i] == '\n' || s[i] == '\r';
    if (!need) {
        fwrite(s, 1, len, fp);
        return;
    }
    putc('"', fp);
    for (size_t i = 0; i < len; i++) {
        if (s[i] == '"')
            putc('"', fp);
        putc(s[i], fp);
    }
    putc('"', fp);
}

int quotes_write_csv(const etacal_quotes *q, FILE *fp, etacal_error *err)
{
    char num[ETACAL_NUM_BUFSZ];
    for (size_t j = 0; j < q->nkeys; j++) {
        csv_put_field(fp, q->key_names[j], strlen(q->key_names[j]), ',');
        putc(',', fp);
    }
    fputs("target,method,n,k,offset_s,slope", fp);
    for (size_t j = 0; j < q->ncoef; j++) {
        putc(',', fp);
        char name[256];
        snprintf(name, sizeof name, "coef_%s", q->coef_names[j]);
        csv_put_field(fp, name, strlen(name), ',');
    }
    for (size_t j = 0; j < q->ncoef && q->ranges; j++)
        for (int m = 0; m < 2; m++) {
            putc(',', fp);
            char name[256];
            snprintf(name, sizeof name, "%s_%s", m ? "max" : "min", q->coef_names[j]);
            csv_put_field(fp, name, strlen(name), ',');
        }
    if (q->confidence > 0)
        fputs(",confidence,coverage_mean,coverage_low", fp);
    /* what the rows behind each row are: with keys, when every row says */
    int cells = q->nkeys > 0;
    for (size_t r = 0; r < q->nrows && cells; r++)
        cells = etacal_cell_name(q->rows[r].cell) != NULL;
    if (cells)
        fputs(",cell", fp);
    putc('\n', fp);
    for (size_t r = 0; r < q->nrows; r++) {
        const etacal_quote *row = &q->rows[r];
        const etacal_segment *g = &q->segs[row->seg];
        for (size_t j = 0; j < q->nkeys; j++) {
            csv_put_field(fp, g->keys[j], strlen(g->keys[j]), ',');
            putc(',', fp);
        }
        etacal_num_format(q->targets[row->target], num);
        /* k 0: unknown (a table read without ranks); written empty */
        fprintf(fp, "%s,%s,%zu,", num, etacal_method_name(row->method), row->n);
        if (row->k)
            fprintf(fp, "%zu", row->k);
        putc(',', fp);
        etacal_num_format(row->offset_s, num);
        fputs(num, fp);
        putc(',', fp);
        etacal_num_format(row->slope, num);
        fputs(num, fp);
        for (size_t j = 0; j < q->ncoef; j++) {
            etacal_num_format(row->coef[j], num);
            putc(',', fp);
            fputs(num, fp);
        }
        for (size_t j = 0; j < q->ncoef && q->ranges; j++) {
            etacal_num_format(row->x_min[j], num);
            fprintf(fp, ",%s,", num);
            etacal_num_format(row->x_max[j], num);
            fputs(num, fp);
        }
        if (q->confidence > 0) {
            etacal_num_format(q->confidence, num);
            /* the bound rounded down, so that it never claims too much */
            fprintf(fp, ",%s,%.6f,%.6f", num, etacal_coverage_mean(row->n, row->k),
                    floor(etacal_coverage_low(row->n, row->k, q->confidence) * 1e6) / 1e6);
        }
        if (cells) {
            putc(',', fp);
            fputs(etacal_cell_name(row->cell), fp);
        }
        putc('\n', fp);
    }
    if (ferror(fp))
        return etacal_error_set(err, ETACAL_EIO, NULL, "write failed");
    return ETACAL_OK;
}
