/* SPDX-License-Identifier: GPL-3.0-or-later */
/* segment.c: segments of a table, the combinations of values of its key
 * columns, numbered 1.. in the bytewise order of their key texts, with 0 for
 * the global segment ("*" in every key).  A row's segment is found again
 * from its key ids through a map from their mixed-radix code, so no
 * per-row array is kept. */
#include "base.h"
#include "segment.h"

#include <stdlib.h>
#include <string.h>

/* Maps the mixed-radix code of a row's key ids to a dense segment number:
 * a direct table when the code space is small, else open addressing. */


#define DIRECT_MAX (UINT64_C(1) << 22)

static int segmap_init(segmap *m, uint64_t space)
{
    memset(m, 0, sizeof *m);
    if (space <= DIRECT_MAX) {
        m->ndirect = (size_t)space;
        m->direct = calloc(m->ndirect ? m->ndirect : 1, sizeof *m->direct);
        return m->direct ? 0 : -1;
    }
    m->nslots = 1024;
    m->hkeys = calloc(m->nslots, sizeof *m->hkeys);
    m->hvals = calloc(m->nslots, sizeof *m->hvals);
    return m->hkeys && m->hvals ? 0 : -1;
}

static void segmap_free(segmap *m)
{
    free(m->direct);
    free(m->hkeys);
    free(m->hvals);
}


static uint32_t *segmap_slot(segmap *m, uint64_t code)
{
    if (m->direct)
        return &m->direct[code];
    size_t mask = m->nslots - 1;
    size_t i = (size_t)mix64(code) & mask;
    while (m->hvals[i] && m->hkeys[i] != code)
        i = (i + 1) & mask;
    m->hkeys[i] = code;
    return &m->hvals[i];
}

static int segmap_grow(segmap *m)
{
    if (m->direct || m->used * 2 < m->nslots)
        return 0;
    segmap n = {0};
    n.nslots = m->nslots * 2;
    n.hkeys = calloc(n.nslots, sizeof *n.hkeys);
    n.hvals = calloc(n.nslots, sizeof *n.hvals);
    if (!n.hkeys || !n.hvals) {
        segmap_free(&n);
        return -1;
    }
    for (size_t i = 0; i < m->nslots; i++)
        if (m->hvals[i])
            *segmap_slot(&n, m->hkeys[i]) = m->hvals[i];
    n.used = m->used;
    segmap_free(m);
    *m = n;
    return 0;
}

/* The mixed-radix code of row i's key ids. */




/* Segment numbers in the map become remap[number]. */
static void segmap_renumber(segmap *m, const uint32_t *remap)
{
    uint32_t *v = m->direct ? m->direct : m->hvals;
    size_t len = m->direct ? m->ndirect : m->nslots;
    for (size_t i = 0; i < len; i++)
        if (v[i])
            v[i] = remap[v[i] - 1] + 1;
}

/* Row i's segment (0, the global one, when there are no keys). */

typedef struct sortent {
    char **keys;
    size_t nkeys;
    size_t idx;
} sortent;

static int cmp_sortent(const void *a, const void *b)
{
    const sortent *x = a, *y = b;
    for (size_t j = 0; j < x->nkeys; j++) {
        int c = strcmp(x->keys[j], y->keys[j]);
        if (c)
            return c;
    }
    return 0;
}


static char *dupn(const char *s, size_t n)
{
    char *d = malloc(n + 1);
    if (d) {
        memcpy(d, s, n);
        d[n] = '\0';
    }
    return d;
}

void segset_free(segset *s)
{
    if (!s)
        return;
    if (s->keys)
        for (size_t g = 0; g < s->nseg; g++) {
            if (s->keys[g])
                for (size_t j = 0; j < s->nkeys; j++)
                    free(s->keys[g][j]);
            free(s->keys[g]);
        }
    free(s->keys);
    segmap_free(&s->map);
    free(s->kcols);
    free(s->kc);
    memset(s, 0, sizeof *s);
}


int segset_build(segset *s, const etacal_table *t, const size_t *key_cols, size_t nkeys, etacal_error *err)
{
    int rc = ETACAL_OK;
    size_t *first = NULL, firstcap = 0;
    uint32_t *remap = NULL;
    sortent *order = NULL;
    char ***sorted = NULL;
    memset(s, 0, sizeof *s);
    s->nkeys = nkeys;
    s->kcols = calloc(nkeys ? nkeys : 1, sizeof *s->kcols);
    s->kc = calloc(nkeys ? nkeys : 1, sizeof *s->kc);
    if (!s->kcols || !s->kc)
        goto nomem;
    uint64_t space = 1;
    for (size_t j = 0; j < nkeys; j++) {
        s->kcols[j].ids = etacal_table_key_ids(t, key_cols[j], &s->kcols[j].width);
        if (!s->kcols[j].ids) {
            rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "'%s' is not a key column",
                                  etacal_table_col_name(t, key_cols[j]));
            goto done;
        }
        s->kc[j] = etacal_table_key_count(t, key_cols[j]);
        uint64_t c = s->kc[j] ? s->kc[j] : 1;
        if (space > UINT64_MAX / c) {
            rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "too many combinations of key values");
            goto done;
        }
        space *= c;
    }
    if (segmap_init(&s->map, space) != 0)
        goto nomem;
    /* numbered in order of first appearance, then renumbered sorted */
    size_t n = etacal_table_rows(t), nseg = 1;
    for (size_t i = 0; i < n && nkeys; i++) {
        uint64_t code = row_code(s->kcols, s->kc, nkeys, i);
        uint32_t *slot = segmap_slot(&s->map, code);
        if (*slot == 0) {
            if (nseg >= UINT32_MAX - 1) {
                rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "too many segments");
                goto done;
            }
            if (grow_array((void **)&first, &firstcap, nseg + 1, sizeof *first) != 0)
                goto nomem;
            first[nseg] = i;
            *slot = (uint32_t)nseg++ + 1;
            s->map.used++;
            if (segmap_grow(&s->map) != 0)
                goto nomem;
        }
    }
    s->keys = calloc(nseg, sizeof *s->keys);
    if (!s->keys)
        goto nomem;
    s->nseg = nseg;
    for (size_t g = 0; g < nseg; g++) {
        s->keys[g] = calloc(nkeys ? nkeys : 1, sizeof *s->keys[g]);
        if (!s->keys[g])
            goto nomem;
        for (size_t j = 0; j < nkeys; j++) {
            const char *txt = g == 0 ? "*"
                                     : etacal_table_key_text(t, key_cols[j], key_at(&s->kcols[j], first[g]));
            if (!(s->keys[g][j] = dupn(txt, strlen(txt))))
                goto nomem;
        }
    }
    remap = malloc(nseg * sizeof *remap);
    if (!remap)
        goto nomem;
    for (size_t g = 0; g < nseg; g++)
        remap[g] = (uint32_t)g;
    if (nseg > 2) {
        order = malloc((nseg - 1) * sizeof *order);
        sorted = malloc(nseg * sizeof *sorted);
        if (!order || !sorted)
            goto nomem;
        for (size_t g = 1; g < nseg; g++)
            order[g - 1] = (sortent){s->keys[g], nkeys, g};
        qsort(order, nseg - 1, sizeof *order, cmp_sortent);
        sorted[0] = s->keys[0];
        for (size_t g = 1; g < nseg; g++) {
            sorted[g] = s->keys[order[g - 1].idx];
            remap[order[g - 1].idx] = (uint32_t)g;
        }
        free(s->keys);
        s->keys = sorted;
        sorted = NULL;
    }
    segmap_renumber(&s->map, remap);
    goto done;
nomem:
    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
done:
    free(first);
    free(remap);
    free(order);
    free(sorted);
    if (rc)
        segset_free(s);
    return rc;
}

/* ---- the hierarchy of levels ------------------------------------------
 * --by k1,k2,...,kK defines levels from the most specific to the global
 * one: (k1..kK), (k1..kK-1, *), ..., (*, ..., *).  Every level's segments
 * get one number in a single space (0: the global segment), ordered by
 * their key texts with "*" for the keys a level leaves open. */

void seghier_free(seghier *h)
{
    if (!h)
        return;
    if (h->keys)
        for (size_t g = 0; g < h->nseg; g++) {
            if (h->keys[g])
                for (size_t j = 0; j < h->nkeys; j++)
                    free(h->keys[g][j]);
            free(h->keys[g]);
        }
    free(h->keys);
    free(h->level);
    free(h->parent);
    if (h->lv)
        for (size_t L = 0; L < h->nkeys; L++) {
            segset_free(&h->lv[L]);
            if (h->uni) /* NULL when its calloc failed */
                free(h->uni[L]);
        }
    free(h->lv);
    free(h->uni);
    memset(h, 0, sizeof *h);
}

typedef struct hent {
    char **keys;
    size_t nkeys;
    size_t level, idx; /* level L (1..nkeys) and index in that level's segset */
} hent;

static int cmp_hent(const void *a, const void *b)
{
    const hent *x = a, *y = b;
    for (size_t j = 0; j < x->nkeys; j++) {
        int c = strcmp(x->keys[j], y->keys[j]);
        if (c)
            return c;
    }
    return 0;
}

int seghier_build(seghier *h, const etacal_table *t, const size_t *key_cols, size_t nkeys, int levels,
                  etacal_error *err)
{
    int rc = ETACAL_OK;
    hent *ent = NULL;
    size_t ne = 0;
    memset(h, 0, sizeof *h);
    h->nkeys = nkeys;
    size_t first_level = levels ? 1 : nkeys; /* without levels: the full keys only */
    if (nkeys) {
        h->lv = calloc(nkeys, sizeof *h->lv);
        h->uni = calloc(nkeys, sizeof *h->uni);
        if (!h->lv || !h->uni)
            goto nomem;
    }
    size_t total = 1;
    for (size_t L = first_level; L <= nkeys && nkeys; L++) {
        if ((rc = segset_build(&h->lv[L - 1], t, key_cols, L, err)) != 0)
            goto done;
        total += h->lv[L - 1].nseg - 1;
    }
    h->keys = calloc(total, sizeof *h->keys);
    h->level = calloc(total, sizeof *h->level);
    h->parent = calloc(total, sizeof *h->parent);
    ent = malloc(total * sizeof *ent);
    if (!h->keys || !h->level || !h->parent || !ent)
        goto nomem;
    h->nseg = total;
    for (size_t L = first_level; L <= nkeys && nkeys; L++) {
        segset *s = &h->lv[L - 1];
        if (!(h->uni[L - 1] = calloc(s->nseg, sizeof *h->uni[L - 1])))
            goto nomem;
        for (size_t g = 1; g < s->nseg; g++) {
            char **k = calloc(nkeys, sizeof *k);
            if (!k)
                goto nomem;
            ent[ne] = (hent){k, nkeys, L, g};
            ne++;
            for (size_t j = 0; j < nkeys; j++) {
                const char *txt = j < L ? s->keys[g][j] : "*";
                if (!(k[j] = dupn(txt, strlen(txt))))
                    goto nomem;
            }
        }
    }
    qsort(ent, ne, sizeof *ent, cmp_hent);
    if (!(h->keys[0] = calloc(nkeys ? nkeys : 1, sizeof *h->keys[0])))
        goto nomem;
    for (size_t j = 0; j < nkeys; j++)
        if (!(h->keys[0][j] = dupn("*", 1)))
            goto nomem;
    for (size_t e = 0; e < ne; e++) {
        size_t g = e + 1;
        h->keys[g] = ent[e].keys;
        ent[e].keys = NULL;
        h->level[g] = ent[e].level;
        h->uni[ent[e].level - 1][ent[e].idx] = (uint32_t)g;
    }
    /* parents: the segment one level up that holds the same rows; one row
     * of each segment tells (the first of each full-key segment) */
    size_t n = etacal_table_rows(t);
    if (nkeys && first_level == 1) {
        unsigned char *seen = calloc(h->nseg, 1);
        if (!seen)
            goto nomem;
        for (size_t i = 0; i < n; i++) {
            uint32_t g = seghier_row(h, nkeys, i);
            if (seen[g])
                continue;
            for (size_t L = nkeys; L >= 2; L--) {
                uint32_t up = seghier_row(h, L - 1, i);
                seen[g] = 1;
                h->parent[g] = up;
                g = up;
            }
            seen[g] = 1; /* level 1: parent 0 */
        }
        free(seen);
    }
    goto done;
nomem:
    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
done:
    if (ent) {
        for (size_t e = 0; e < ne; e++)
            if (ent[e].keys) {
                for (size_t j = 0; j < nkeys; j++)
                    free(ent[e].keys[j]);
                free(ent[e].keys);
            }
        free(ent);
    }
    if (rc)
        seghier_free(h);
    return rc;
}
