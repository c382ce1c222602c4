/* SPDX-License-Identifier: GPL-3.0-or-later */
/* table_mem.c: a table built from arrays in memory, for programs and
 * bindings that hold their rows already (a data frame, a database cursor)
 * and should not have to write a CSV file first.
 *
 * The rules are the CSV reader's (csv_read.c): the same flags, the same
 * reserved key values, the same policy for missing values; only the place
 * in a message is a row index instead of a file line.  Every value is
 * checked before anything is kept, so a bad row leaves no table behind. */
#include "base.h"
#include "table_impl.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static char *dup_text(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

static int row_error(etacal_error *err, int code, const char *source, size_t row, const char *fmt,
                     const char *a, const char *b)
{
    char where[128];
    snprintf(where, sizeof where, "%s: row %zu", source, row);
    return etacal_error_set(err, code, where, fmt, a, b);
}

/* The text of key column data d at row i ("" for a missing one). */
static const char *key_value(const etacal_column_data *d, size_t i)
{
    if (d->str)
        return d->str[i] ? d->str[i] : "";
    int32_t c = d->codes[i];
    return c < 0 ? "" : d->labels[c];
}

/* Checks one numeric value against its column's flags: 0, or an error. */
static int check_num(const etacal_colspec *c, double v, const char *source, size_t row, etacal_error *err)
{
    const char *what = c->what ? c->what : "value";
    if (isnan(v))
        return 0;
    if ((c->flags & ETACAL_NUM_FINITE) && !isfinite(v))
        return row_error(err, ETACAL_EPARSE, source, row, "column '%s': %s is not finite", c->name, what);
    if ((c->flags & ETACAL_NUM_POSITIVE) && !(v > 0))
        return row_error(err, ETACAL_EPARSE, source, row, "column '%s': %s must be positive", c->name, what);
    if ((c->flags & ETACAL_NUM_NONNEG) && v < 0)
        return row_error(err, ETACAL_EPARSE, source, row, "column '%s': %s is negative", c->name, what);
    return 0;
}

/* Checks the values of a key column: codes in range, no reserved or
 * malformed text.  Labels are checked once each, texts per row. */
static int check_keys(const etacal_colspec *c, const etacal_column_data *d, size_t nrows, const char *source,
                      etacal_error *err)
{
    for (size_t i = 0; i < nrows; i++) {
        if (d->codes && d->codes[i] >= 0 && (size_t)d->codes[i] >= d->nlabels) {
            char code[32];
            snprintf(code, sizeof code, "%ld", (long)d->codes[i]);
            return row_error(err, ETACAL_EINVAL, source, i, "key column '%s': code %s has no label", c->name,
                             code);
        }
        if (d->codes)
            continue;
        const char *s = key_value(d, i);
        size_t len = strlen(s);
        if (len == 1 && s[0] == '*')
            return row_error(err, ETACAL_EPARSE, source, i,
                             "'*' is reserved for \"all values\" and cannot be a value of '%s'%s", c->name, "");
        if (!utf8_valid(s, len))
            return row_error(err, ETACAL_EPARSE, source, i, "a value of key column '%s' is not valid UTF-8%s",
                             c->name, "");
        if (memchr(s, '\x1f', len))
            return row_error(err, ETACAL_EPARSE, source, i,
                             "a value of key column '%s' holds the control character 0x1f%s", c->name, "");
    }
    for (size_t l = 0; d->codes && l < d->nlabels; l++) {
        const char *s = d->labels[l] ? d->labels[l] : "";
        size_t len = strlen(s);
        char where[128];
        snprintf(where, sizeof where, "%s: label %zu", source, l);
        if ((len == 1 && s[0] == '*') || !utf8_valid(s, len) || memchr(s, '\x1f', len))
            return etacal_error_set(err, ETACAL_EPARSE, where,
                                    "key column '%s': a label is '*', holds 0x1f or is not valid UTF-8",
                                    c->name);
    }
    return 0;
}

/* Fills key column c from d over the kept rows (keep NULL: all rows). */
static int fill_keys(column *c, const etacal_column_data *d, size_t nrows, const unsigned char *keep,
                     size_t kept)
{
    uint32_t *ids = malloc((kept ? kept : 1) * sizeof *ids);
    uint32_t *code_id = NULL; /* pre-coded: label -> id, UINT32_MAX unseen */
    uint32_t empty_id = UINT32_MAX;
    if (!ids)
        return -1;
    if (d->codes) {
        code_id = malloc((d->nlabels ? d->nlabels : 1) * sizeof *code_id);
        if (!code_id) {
            free(ids);
            return -1;
        }
        for (size_t l = 0; l < d->nlabels; l++)
            code_id[l] = UINT32_MAX;
    }
    size_t r = 0;
    for (size_t i = 0; i < nrows; i++) {
        if (keep && !keep[i])
            continue;
        uint32_t *slot = NULL;
        if (d->codes)
            slot = d->codes[i] < 0 ? &empty_id : &code_id[d->codes[i]];
        if (slot && *slot != UINT32_MAX) {
            ids[r++] = *slot;
            continue;
        }
        const char *s = key_value(d, i);
        uint32_t id;
        if (strdict_intern(&c->dict, s, strlen(s), &id) != 0) {
            free(code_id);
            free(ids);
            return -1;
        }
        if (slot)
            *slot = id;
        ids[r++] = id;
    }
    free(code_id);
    if (c->dict.count <= (size_t)UINT16_MAX + 1) {
        uint16_t *narrow = malloc((kept ? kept : 1) * sizeof *narrow);
        if (!narrow) {
            free(ids);
            return -1;
        }
        for (size_t i = 0; i < kept; i++)
            narrow[i] = (uint16_t)ids[i];
        free(ids);
        c->key = narrow;
        c->kw = 2;
    } else {
        c->key = ids;
        c->kw = 4;
    }
    return 0;
}

int etacal_table_from_arrays(const etacal_colspec *cols, const etacal_column_data *data, size_t ncols,
                             size_t nrows, const char *source, unsigned flags, etacal_table **out,
                             etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the table");
    *out = NULL;
    if (!source)
        source = "arrays";
    if (ncols > 0 && (!cols || !data))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no column specifications or data");

    /* Shapes and names first: what is asked of each column. */
    for (size_t j = 0; j < ncols; j++) {
        const etacal_colspec *c = &cols[j];
        const etacal_column_data *d = &data[j];
        if (!c->name || !c->name[0])
            return etacal_error_set(err, ETACAL_EINVAL, source, "column %zu has no name", j);
        for (size_t m = 0; m < j; m++)
            if (strcmp(cols[m].name, c->name) == 0)
                return etacal_error_set(err, ETACAL_EINVAL, source, "column '%s' is given twice", c->name);
        if (c->type == ETACAL_COL_NUM) {
            if (!d->num && nrows > 0)
                return etacal_error_set(err, ETACAL_EINVAL, source, "numeric column '%s' has no values",
                                        c->name);
        } else if (c->type == ETACAL_COL_KEY) {
            if (nrows > 0 && !d->str && !d->codes)
                return etacal_error_set(err, ETACAL_EINVAL, source, "key column '%s' has no values", c->name);
            if (d->codes && !d->labels && d->nlabels > 0)
                return etacal_error_set(err, ETACAL_EINVAL, source, "key column '%s' has codes but no labels",
                                        c->name);
        } else {
            return etacal_error_set(err, ETACAL_EINVAL, source, "column '%s' has an unknown type", c->name);
        }
    }

    /* Every value checked before anything is built; rows with a missing
     * value in a column that skips them are marked. */
    unsigned char *keep = NULL;
    size_t kept = nrows, missing = 0;
    int rc = ETACAL_OK;
    for (size_t j = 0; j < ncols; j++) {
        const etacal_colspec *c = &cols[j];
        const etacal_column_data *d = &data[j];
        if (c->type == ETACAL_COL_KEY) {
            if ((rc = check_keys(c, d, nrows, source, err)) != 0)
                goto fail;
            continue;
        }
        for (size_t i = 0; i < nrows; i++) {
            double v = d->num[i];
            if ((rc = check_num(c, v, source, i, err)) != 0)
                goto fail;
            if (isnan(v) && (c->flags & ETACAL_NUM_SKIP_MISSING)) {
                if (!keep) {
                    keep = malloc(nrows);
                    if (!keep) {
                        rc = etacal_error_set(err, ETACAL_ENOMEM, source, "out of memory");
                        goto fail;
                    }
                    memset(keep, 1, nrows);
                }
                if (keep[i]) {
                    keep[i] = 0;
                    kept--;
                    missing++;
                }
            }
        }
    }

    etacal_table *t = calloc(1, sizeof *t);
    if (!t || !(t->source = dup_text(source)) || !(t->cols = calloc(ncols ? ncols : 1, sizeof *t->cols))) {
        etacal_table_destroy(t);
        rc = etacal_error_set(err, ETACAL_ENOMEM, source, "out of memory");
        goto fail;
    }
    t->ncols = ncols;
    for (size_t j = 0; j < ncols; j++) {
        column *c = &t->cols[j];
        c->type = cols[j].type;
        c->flags = cols[j].flags;
        c->what = cols[j].what;
        c->kw = 2;
        strdict_init(&c->dict);
        if (!(c->name = dup_text(cols[j].name)))
            goto oom;
        const etacal_column_data *d = &data[j];
        if (c->type == ETACAL_COL_KEY) {
            if (fill_keys(c, d, nrows, keep, kept) != 0)
                goto oom;
            continue;
        }
        if (!keep && (flags & ETACAL_TABLE_BORROW) && nrows > 0) {
            c->num = (double *)(uintptr_t)d->num; /* borrowed, never written */
            c->num_borrowed = 1;
            continue;
        }
        if (!(c->num = malloc((kept ? kept : 1) * sizeof *c->num)))
            goto oom;
        if (!keep) {
            if (nrows > 0)
                memcpy(c->num, d->num, nrows * sizeof *c->num);
        } else {
            size_t r = 0;
            for (size_t i = 0; i < nrows; i++)
                if (keep[i])
                    c->num[r++] = d->num[i];
        }
    }
    t->rows = t->cap = kept;
    t->stats.data_rows = nrows;
    t->stats.kept = kept;
    t->stats.missing = missing;
    free(keep);
    *out = t;
    return ETACAL_OK;

oom:
    etacal_table_destroy(t);
    rc = etacal_error_set(err, ETACAL_ENOMEM, source, "out of memory");
fail:
    free(keep);
    return rc;
}
