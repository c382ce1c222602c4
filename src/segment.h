/* SPDX-License-Identifier: GPL-3.0-or-later */
/* segment.h: the segments of a table's rows, by key combination and by level
 * (layer 3: segment.c).
 * Not installed. */
#ifndef ETACAL_SEGMENT_H
#define ETACAL_SEGMENT_H

#include "base.h"

/* segset: the segments of a table (segment.c).  keys[g][j] is the text of
 * key j in segment g; segment 0 is the global one ("*"), the others come in
 * the bytewise order of their key texts. */
typedef struct segmap {
    uint32_t *direct;
    size_t ndirect;
    uint64_t *hkeys;
    uint32_t *hvals; /* segment + 1; 0 empty */
    size_t nslots, used;
} segmap;

typedef struct keycol {
    const void *ids;
    int width;
} keycol;

typedef struct segset {
    size_t nkeys, nseg;
    char ***keys;
    segmap map;
    keycol *kcols;
    size_t *kc;
} segset;

int segset_build(segset *s, const etacal_table *t, const size_t *key_cols, size_t nkeys, etacal_error *err);

/* The segment of a row (0 when there are no keys), inline: it runs once per
 * row in every pass of a fit. */
static inline uint64_t mix64(uint64_t x)
{
    x ^= x >> 33;
    x *= UINT64_C(0xff51afd7ed558ccd);
    x ^= x >> 33;
    return x;
}

static inline uint32_t key_at(const keycol *k, size_t i)
{
    return k->width == 2 ? ((const uint16_t *)k->ids)[i] : ((const uint32_t *)k->ids)[i];
}

static inline uint64_t row_code(const keycol *keyids, const size_t *kc, size_t nkeys, size_t i)
{
    uint64_t code = 0;
    for (size_t j = 0; j < nkeys; j++)
        code = code * (uint64_t)kc[j] + key_at(&keyids[j], i);
    return code;
}

static inline uint32_t row_seg(const segmap *m, const keycol *keyids, const size_t *kc, size_t nkeys,
                        size_t i)
{
    if (nkeys == 0)
        return 0;
    uint64_t code = row_code(keyids, kc, nkeys, i);
    if (m->direct)
        return m->direct[code] - 1;
    size_t mask = m->nslots - 1;
    size_t s = (size_t)mix64(code) & mask;
    while (m->hkeys[s] != code)
        s = (s + 1) & mask;
    return m->hvals[s] - 1;
}

static inline uint32_t segset_row(const segset *s, size_t row)
{
    return row_seg(&s->map, s->kcols, s->kc, s->nkeys, row);
}

void segset_free(segset *s);

/* seghier: the segments of every level of the keys (segment.c): with
 * levels, (k1..kK), (k1..kK-1, *), ..., down to the global segment 0; without,
 * the full key combinations and the global segment.  keys[g][j] is "*" for
 * the keys that segment g leaves open; level[g] is how many it fixes;
 * parent[g] is the segment one level up (0 at level 1). */
typedef struct seghier {
    size_t nkeys, nseg;
    char ***keys;
    size_t *level, *parent;
    segset *lv;     /* lv[L-1]: the segments of the first L keys */
    uint32_t **uni; /* uni[L-1][segset index] -> segment number */
} seghier;

int seghier_build(seghier *h, const etacal_table *t, const size_t *key_cols, size_t nkeys, int levels,
                  etacal_error *err);
void seghier_free(seghier *h);
/* The segment of row i at level L (0 <= L <= nkeys): 0 for L = 0.  Without
 * levels only L = 0 and L = nkeys are defined. */
static inline uint32_t seghier_row(const seghier *h, size_t L, size_t i)
{
    return L == 0 ? 0 : h->uni[L - 1][segset_row(&h->lv[L - 1], i)];
}

#endif
