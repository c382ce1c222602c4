/* SPDX-License-Identifier: GPL-3.0-or-later */
/* textout.c: the aligned text table and the checked JSON building that the
 * library's result writers share (textout.h). */
#include "base.h"
#include "textout.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

int ttab_init(ttab *t, size_t ncols)
{
    memset(t, 0, sizeof *t);
    t->ncols = ncols;
    t->right = calloc(ncols, sizeof *t->right);
    t->oom = !t->right;
    return t->right ? 0 : -1;
}

int ttab_add(ttab *t, const char *const *cells)
{
    if (t->oom || !t->right)
        return -1;
    if (t->nrows == t->cap) {
        size_t ncap = t->cap ? t->cap * 2 : 16;
        char **c = realloc(t->cells, ncap * t->ncols * sizeof *c);
        if (!c) {
            t->oom = 1;
            return -1;
        }
        t->cells = c;
        t->cap = ncap;
    }
    for (size_t j = 0; j < t->ncols; j++) {
        const char *s = cells[j] ? cells[j] : "";
        size_t len = strlen(s);
        char *d = malloc(len + 1);
        if (!d) {
            /* the row's cells so far are not counted by nrows: free them */
            while (j-- > 0)
                free(t->cells[t->nrows * t->ncols + j]);
            t->oom = 1;
            return -1;
        }
        memcpy(d, s, len + 1);
        t->cells[t->nrows * t->ncols + j] = d;
    }
    t->nrows++;
    return 0;
}

/* Display width of UTF-8 text: code points, not bytes. */
static size_t width(const char *s)
{
    size_t w = 0;
    for (; *s; s++)
        w += ((unsigned char)*s & 0xC0) != 0x80;
    return w;
}

int ttab_print(const ttab *t, FILE *fp)
{
    if (t->oom || !t->right)
        return -1;
    size_t *w = calloc(t->ncols ? t->ncols : 1, sizeof *w);
    if (!w)
        return -1;
    for (size_t i = 0; i < t->nrows; i++)
        for (size_t j = 0; j < t->ncols; j++) {
            size_t l = width(t->cells[i * t->ncols + j]);
            if (l > w[j])
                w[j] = l;
        }
    for (size_t i = 0; i < t->nrows; i++) {
        /* no trailing blanks: stop after the last non-empty cell */
        size_t end = t->ncols;
        while (end > 1 && !t->cells[i * t->ncols + end - 1][0])
            end--;
        for (size_t j = 0; j < end; j++) {
            const char *c = t->cells[i * t->ncols + j];
            size_t pad = w[j] - width(c);
            int last = j + 1 == end;
            if (t->right[j])
                fprintf(fp, "%*s%s", (int)pad, "", c);
            else
                fprintf(fp, "%s%*s", c, last ? 0 : (int)pad, "");
            if (!last)
                fputs("  ", fp);
        }
        putc('\n', fp);
    }
    free(w);
    return 0;
}

void ttab_free(ttab *t)
{
    for (size_t i = 0; i < t->nrows * t->ncols; i++)
        free(t->cells[i]);
    free(t->cells);
    free(t->right);
    memset(t, 0, sizeof *t);
}

/* A JSON string, or NULL: *oom set when for want of memory.  A text that
 * is not UTF-8 gives NULL without *oom (its member is left out). */
json_t *jstr(const char *s, int *oom)
{
    json_t *v = json_string(s);
    if (!v && utf8_valid(s, strlen(s)))
        *oom = 1;
    return v;
}

/* Sets o[k] = v; a failure for want of memory sets *oom. */
void jset(json_t *o, const char *k, json_t *v, int *oom)
{
    if (!v)
        return; /* jstr said why */
    if (json_object_set_new(o, k, v) != 0)
        *oom = 1;
}

void jpush(json_t *a, json_t *v, int *oom)
{
    if (!v)
        return;
    if (json_array_append_new(a, v) != 0)
        *oom = 1;
}

json_t *jnew(json_t *v, int *oom)
{
    if (!v)
        *oom = 1;
    return v;
}

json_t *jnum(double v, int *oom) { return jnew(isfinite(v) ? json_real(v) : json_null(), oom); }

int jwrite(json_t *root, int oom, FILE *fp, size_t flags, etacal_error *err)
{
    if (oom || !root)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    if (json_dumpf(root, fp, flags) != 0) {
        if (ferror(fp))
            return etacal_error_set(err, ETACAL_EIO, NULL, "cannot write JSON: write failed");
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    putc('\n', fp);
    return ETACAL_OK;
}
