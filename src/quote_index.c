/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_index.c: the row of a quote table that serves an order
 * (quote_index.h).
 *
 * Each key column's values in the table get small ids (a dictionary per
 * column); a segment is found by the ids of the keys it fixes and its level,
 * packed into a few bytes and looked up in one more dictionary.  A lookup
 * hashes each key text once and then walks the levels up without building
 * any text, and without allocating. */
#include "base.h"
#include "quote_internal.h"

#include <stdlib.h>
#include <string.h>

struct etacal_quote_index {
    const etacal_quotes *q;
    strdict *vals;   /* [nkeys]: the values of key j that the table's segments fix */
    strdict segs;    /* packed (level, ids of the fixed keys) -> segment */
    long *segrow;    /* [seg * ntargets + ti] -> row, or -1 */
};

/* The packed form of a segment: one byte of level, then four bytes per
 * fixed key id.  At most 1 + 4 * ETACAL_MAX_KEYS bytes. */
static size_t pack(unsigned char *buf, size_t level, const uint32_t *ids)
{
    buf[0] = (unsigned char)level;
    for (size_t j = 0; j < level; j++)
        memcpy(buf + 1 + 4 * j, &ids[j], 4);
    return 1 + 4 * level;
}

void etacal_quote_index_destroy(etacal_quote_index *ix)
{
    if (!ix)
        return;
    for (size_t j = 0; ix->vals && j < ix->q->nkeys; j++)
        strdict_free(&ix->vals[j]);
    free(ix->vals);
    strdict_free(&ix->segs);
    free(ix->segrow);
    free(ix);
}

int etacal_quote_index_create(const etacal_quotes *q, etacal_quote_index **out, etacal_error *err)
{
    if (!out || !q)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no quote table to index");
    *out = NULL;
    if (q->nkeys > ETACAL_MAX_KEYS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a quote table has at most %d key columns",
                                ETACAL_MAX_KEYS);
    etacal_quote_index *ix = calloc(1, sizeof *ix);
    if (!ix)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    ix->q = q;
    strdict_init(&ix->segs);
    ix->vals = calloc(q->nkeys ? q->nkeys : 1, sizeof *ix->vals);
    size_t nt = q->ntargets, ns = q->nsegs;
    ix->segrow = malloc((ns * nt > 0 ? ns * nt : 1) * sizeof *ix->segrow);
    if (!ix->vals || !ix->segrow)
        goto nomem;
    for (size_t j = 0; j < q->nkeys; j++)
        strdict_init(&ix->vals[j]);
    for (size_t i = 0; i < ns * nt; i++)
        ix->segrow[i] = -1;
    for (size_t g = 0; g < ns; g++) {
        const etacal_segment *s = &q->segs[g];
        uint32_t ids[ETACAL_MAX_KEYS];
        size_t level = 0;
        /* the keys a segment fixes come first; "*" from there on */
        while (level < q->nkeys && strcmp(s->keys[level], "*") != 0)
            level++;
        for (size_t j = 0; j < level; j++)
            if (strdict_intern(&ix->vals[j], s->keys[j], strlen(s->keys[j]), &ids[j]) != 0)
                goto nomem;
        unsigned char buf[1 + 4 * ETACAL_MAX_KEYS];
        size_t len = pack(buf, level, ids);
        uint32_t id;
        size_t before = ix->segs.count;
        if (strdict_intern(&ix->segs, (const char *)buf, len, &id) != 0)
            goto nomem;
        if (ix->segs.count == before) {
            etacal_quote_index_destroy(ix);
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "the quote table has a duplicate segment");
        }
    }
    /* rows to their segment's id in the dictionary */
    for (size_t r = 0; r < q->nrows; r++) {
        const etacal_quote *row = &q->rows[r];
        const etacal_segment *s = &q->segs[row->seg];
        uint32_t ids[ETACAL_MAX_KEYS];
        size_t level = 0;
        while (level < q->nkeys && strcmp(s->keys[level], "*") != 0)
            level++;
        for (size_t j = 0; j < level; j++)
            strdict_find(&ix->vals[j], s->keys[j], strlen(s->keys[j]), &ids[j]);
        unsigned char buf[1 + 4 * ETACAL_MAX_KEYS];
        uint32_t id;
        strdict_find(&ix->segs, (const char *)buf, pack(buf, level, ids), &id);
        if (ix->segrow[(size_t)id * nt + row->target] < 0)
            ix->segrow[(size_t)id * nt + row->target] = (long)r;
    }
    *out = ix;
    return ETACAL_OK;
nomem:
    etacal_quote_index_destroy(ix);
    return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
}

long etacal_quote_index_lookup(const etacal_quote_index *ix, const char *const *keys, const size_t *lens, size_t ti,
                               size_t *level_out)
{
    const etacal_quotes *q = ix->q;
    if (ti >= q->ntargets)
        return -1;
    uint32_t ids[ETACAL_MAX_KEYS];
    /* known: how many leading keys have a value some segment fixes */
    size_t known = 0;
    while (known < q->nkeys) {
        const char *k = keys[known];
        size_t len = lens ? lens[known] : strlen(k);
        if ((len == 1 && k[0] == '*') || !strdict_find(&ix->vals[known], k, len, &ids[known]))
            break;
        known++;
    }
    /* a "*" key: the levels below it are the segment one level up */
    for (size_t level = known + 1; level-- > 0;) {
        unsigned char buf[1 + 4 * ETACAL_MAX_KEYS];
        uint32_t g;
        if (!strdict_find(&ix->segs, (const char *)buf, pack(buf, level, ids), &g))
            continue;
        long r = ix->segrow[(size_t)g * q->ntargets + ti];
        if (r >= 0) {
            if (level_out)
                *level_out = level;
            return r;
        }
    }
    return -1;
}

long etacal_quote_index_segment(const etacal_quote_index *ix, const char *const *keys, const size_t *lens)
{
    const etacal_quotes *q = ix->q;
    uint32_t ids[ETACAL_MAX_KEYS];
    size_t level = 0;
    for (size_t j = 0; j < q->nkeys; j++) {
        const char *k = keys[j];
        size_t len = lens ? lens[j] : strlen(k);
        int star = len == 1 && k[0] == '*';
        if (star || level < j) {
            /* "*" from here on: a coarser segment; a value after a "*" is none */
            if (!star)
                return -1;
            continue;
        }
        if (!strdict_find(&ix->vals[j], k, len, &ids[j]))
            return -1;
        level = j + 1;
    }
    unsigned char buf[1 + 4 * ETACAL_MAX_KEYS];
    uint32_t g;
    if (!strdict_find(&ix->segs, (const char *)buf, pack(buf, level, ids), &g))
        return -1;
    return (long)g;
}

double etacal_quote_index_promise(const etacal_quote_index *ix, long r, double pred, const double *x, int *clamped,
                                  int *floored)
{
    return quote_row_promise(ix->q, &ix->q->rows[r], pred, x, clamped, floored);
}

const etacal_quotes *etacal_quote_index_quotes(const etacal_quote_index *ix) { return ix->q; }
