/* SPDX-License-Identifier: GPL-3.0-or-later */
/* table_impl.h: the inside of etacal_table, shared by the CSV reader
 * (csv_read.c) and the builder from arrays in memory (table_mem.c).  Not
 * installed. */
#ifndef ETACAL_TABLE_IMPL_H
#define ETACAL_TABLE_IMPL_H

#include "base.h"

#include <stdlib.h>

typedef struct column {
    char *name;
    int type;
    unsigned flags;
    const char *what;
    double *num;
    void *key; /* ids: uint16_t while the dictionary is small, else uint32_t */
    int kw;    /* bytes per id: 2 or 4 */
    strdict dict;
    int num_borrowed; /* num points into the caller's memory (not freed) */
} column;

static inline uint32_t key_get(const column *c, size_t i)
{
    return c->kw == 2 ? ((const uint16_t *)c->key)[i] : ((const uint32_t *)c->key)[i];
}

/* Switches a column's ids from 16 to 32 bits (for n rows, capacity cap). */
static inline int key_widen(column *c, size_t n, size_t cap)
{
    uint32_t *w = malloc((cap ? cap : 1) * sizeof *w);
    if (!w)
        return -1;
    for (size_t i = 0; i < n; i++)
        w[i] = ((const uint16_t *)c->key)[i];
    free(c->key);
    c->key = w;
    c->kw = 4;
    return 0;
}

struct etacal_table {
    char *source;
    size_t ncols;
    column *cols;
    size_t rows, cap;
    etacal_read_stats stats;
};

#endif
