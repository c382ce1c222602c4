/* SPDX-License-Identifier: GPL-3.0-or-later */
/* textout.h: what the library's result writers share (not installed): an
 * aligned text table for people, and JSON documents built with jansson
 * whose every allocation is checked, so that out of memory is reported
 * instead of a document with members missing. */
#ifndef ETACAL_TEXTOUT_H
#define ETACAL_TEXTOUT_H

#include <jansson.h>
#include <stddef.h>
#include <stdio.h>

#include "etacal/error.h"

/* A table of text cells, printed with each column as wide as its widest
 * cell (UTF-8 code points), two spaces between columns, right-aligned
 * where right[j] is set, no trailing blanks. */
typedef struct ttab {
    size_t ncols, nrows, cap;
    char **cells; /* row-major, owned */
    int *right;   /* per column: right-align */
    int oom;      /* a row could not be added: the table is incomplete */
} ttab;

/* 0, or -1 when out of memory (then every later call fails too). */
int ttab_init(ttab *t, size_t ncols);
/* Copies one row of ncols cells (NULL cells print empty). */
int ttab_add(ttab *t, const char *const *cells);
int ttab_print(const ttab *t, FILE *fp);
void ttab_free(ttab *t);

/* JSON building with the allocations checked: each sets *oom when memory
 * runs out.  jstr gives NULL without *oom for a text that is not UTF-8 (its
 * member is left out); jset and jpush take NULL values as nothing to add. */
json_t *jstr(const char *s, int *oom);
json_t *jnew(json_t *v, int *oom);
json_t *jnum(double v, int *oom); /* a real, or null when not finite */
void jset(json_t *o, const char *k, json_t *v, int *oom);
void jpush(json_t *a, json_t *v, int *oom);
/* Writes root (indented with flags) and a newline to fp: ETACAL_OK,
 * ETACAL_ENOMEM when *oom was set or jansson ran out, ETACAL_EIO. */
int jwrite(json_t *root, int oom, FILE *fp, size_t flags, etacal_error *err);

#endif
