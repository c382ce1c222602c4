/* SPDX-License-Identifier: GPL-3.0-or-later */
/* publish.h: what the nightly publisher of quote tables needs besides the
 * fit: a comparison of a new table with the current one at a reference
 * order, a lock beside the table, keeping the previous table, and SHA-256
 * checksums for the provenance record. */
#ifndef ETACAL_PUBLISH_H
#define ETACAL_PUBLISH_H

#include <stddef.h>
#include <stdint.h>

#include "etacal/error.h"
#include "etacal/quote.h"
#include "etacal/table.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

/* ---- SHA-256 (FIPS 180-4) ----------------------------------------------- */
typedef struct etacal_sha256 {
    uint32_t h[8];
    uint64_t len; /* bytes hashed so far */
    unsigned char buf[64];
    size_t nbuf;
} etacal_sha256;

void etacal_sha256_init(etacal_sha256 *s);
void etacal_sha256_update(etacal_sha256 *s, const void *data, size_t n);
/* The digest as 64 lowercase hex digits and a NUL. */
void etacal_sha256_hex(etacal_sha256 *s, char hex[65]);
/* The checksum of a whole file, and its size. */
int etacal_sha256_file(const char *path, char hex[65], uint64_t *bytes, etacal_error *err);

/* ---- the reference order ------------------------------------------------ */
/* The order at which two tables' promises are compared: the median of the
 * prediction column over the rows of t, and of each covariate column
 * (x_cols[j], for the table's coef_<name> terms).  Medians, so that one
 * extreme order does not move the point (common practice, no source). */
int etacal_reference_point(const etacal_table *t, size_t pred_col, const size_t *x_cols, size_t nx,
                           double *pred_out, double *x_out, etacal_error *err);

/* ---- comparing two tables ----------------------------------------------- */
/* One segment and target of either table.  The promise of a table for a
 * segment is the one `etacal apply` would give an order of that segment at
 * the reference point: its own row, or the nearest level above (the same
 * fallback), NaN when the table has no such target. */
typedef struct etacal_quote_move {
    const char *const *keys; /* the segment's key values (borrowed from a table) */
    double target;
    int in_old, in_new;      /* the table has a row of its own for it */
    double old_promise, new_promise; /* seconds, at the reference point */
} etacal_quote_move;

typedef struct etacal_quotes_diff {
    size_t nmoves;
    etacal_quote_move *moves; /* by the new table's row order, then the old-only rows */
    /* Segments (key tuples of any level) with rows in the new table only, in
     * the old only, in both with some promise moved, in both unmoved. */
    size_t segs_added, segs_removed, segs_changed, segs_same;
    size_t targets_added, targets_removed;
    int keys_differ;   /* the key columns differ: only the global rows compare */
    int method_differs;
} etacal_quotes_diff;

/* Compares new_q with old_q at the reference point: pred and, per
 * covariate name of either table, x_names[j] = x[j] (a table's covariate
 * missing from x_names is an error). */
int etacal_quotes_compare(const etacal_quotes *old_q, const etacal_quotes *new_q, double pred,
                          const char *const *x_names, const double *x, size_t nx, etacal_quotes_diff *out,
                          etacal_error *err);
void etacal_quotes_diff_free(etacal_quotes_diff *d);

/* The promise the table gives keys (nkeys values, "*" for any) at target
 * index ti, at pred and covariates x (in q's coef order), with apply's
 * fallback to the nearest level above and its formula (etacal_quote_promise:
 * covariates clamped, never below 0); NaN when no row matches. */
double etacal_quotes_promise_at(const etacal_quotes *q, const char *const *keys, size_t ti, double pred,
                                const double *x);

/* ---- the lock and the previous table ------------------------------------ */
/* Takes an exclusive flock(2) on PATH.lock (created if need be), waiting
 * up to wait_s seconds for another holder to let go.  *fd_out is the lock;
 * it goes with etacal_lock_release or with the process. */
int etacal_lock_acquire(const char *path, double wait_s, int *fd_out, etacal_error *err);
void etacal_lock_release(int fd);

/* Removes the temporary files a killed writer of path left behind
 * (PATH.tmp.* and the .prev copy's PATH.prev.tmp.*).  Call with the lock
 * held.  Returns how many were removed. */
size_t etacal_remove_stale_temps(const char *path);

/* Makes keep a copy of path as it is now (a hard link when the file system
 * allows, else a byte copy), atomically: keep is the old copy or the new
 * one, never a part.  Nothing to do when path does not exist (*kept = 0). */
int etacal_keep_copy(const char *path, const char *keep, int *kept, etacal_error *err);

/* Writes the n bytes of data to path atomically (etacal_outfile). */
int etacal_write_file(const char *path, const void *data, size_t n, etacal_error *err);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
