/* SPDX-License-Identifier: GPL-3.0-or-later */
/* publish.h: publishing a quote table, as the nightly job does it.
 *
 * etacal_publish_run is the whole sequence as one call: fit a new table
 * (etacal_fit_csv), compare it with the current one, evaluate the guards,
 * and replace the current table only when every guard holds: under a
 * lock, atomically and durably, keeping the previous table, with a
 * provenance record.  It returns the guards as data, the comparison and
 * what was written; a front end prints them (`etacal publish` does).  The
 * clock is the caller's: the time goes in the specification.
 *
 * Below it, the parts it is built of, for callers who need one alone: a
 * comparison of two tables at a reference order, the lock beside the
 * table, the copy of the previous table, an atomic file write, and
 * SHA-256 checksums for the provenance record. */
#ifndef ETACAL_PUBLISH_H
#define ETACAL_PUBLISH_H

#include <stddef.h>
#include <stdint.h>

#include "etacal/error.h"
#include "etacal/fit.h"
#include "etacal/io.h"
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
 * missing from x_names is an error).  *out is a new object (free with
 * etacal_quotes_diff_destroy; NULL after an error). */
int etacal_quotes_compare(const etacal_quotes *old_q, const etacal_quotes *new_q, double pred,
                          const char *const *x_names, const double *x, size_t nx, etacal_quotes_diff **out,
                          etacal_error *err);
void etacal_quotes_diff_destroy(etacal_quotes_diff *x);

/* The promise the table gives keys (nkeys values, "*" for any) at target
 * index ti, at pred and covariates x (in q's coef order), with apply's
 * fallback to the nearest level above and its formula (etacal_quotes_promise:
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

/* ---- publishing as one call --------------------------------------------- */

/* What to publish and under which guards.  etacal_publishspec_init fills
 * the defaults; the caller sets fit (an etacal_fitspec), input, table and
 * now at least. */
typedef struct etacal_publishspec {
    etacal_fitspec fit;      /* the fit of the new table (see fit.h) */
    const char *input;       /* the calibration rows: a CSV file (not "-":
                                its checksum goes in the record) */
    etacal_read_opts ro;     /* how to read it (init: malformed rows skipped);
                                the reader refuses no share of malformed
                                rows: the "bad rows" guard judges */
    const char *table;       /* the quote table to replace (a file path);
                                beside it PATH.lock, PATH.prev, PATH.meta.json */
    const char *history;     /* NULL, or a directory that also gets a dated
                                copy of each published table and its record */
    /* the guards' limits */
    size_t min_total_rows;   /* rows used in the fit, at least (init 1000) */
    double max_bad_share;    /* malformed rows skipped, at most this share of
                                the data rows (init 0.01) */
    double max_change_s;     /* no promise at the reference order moves by
                                more than this many seconds (NaN: no limit) */
    double max_change_pct;   /* ... nor by more than this percent (NaN: no
                                limit); both NaN: 25 percent (init) */
    double ref_pred;         /* the reference order's prediction, seconds
                                (NaN: the median prediction; init) */
    int allow_layout_change; /* accept other key columns, fewer targets or
                                new covariates (init 0) */
    int require_holdout;     /* the holdout guard must hold (needs
                                fit.holdout > 0; init 0) */
    int dry_run;             /* evaluate and report, replace nothing */
    double wait_s;           /* wait up to this long for the lock (init 60) */
    double now;              /* the current time, Unix seconds UTC: the
                                record's written_at and the history copy's
                                name (init NaN: must be set) */
    const char *const *command; /* the record's "command": the command line
                                   or call that asked for this (borrowed) */
    size_t ncommand;
} etacal_publishspec;

void etacal_publishspec_init(etacal_publishspec *s);

/* One guard's verdict, as data.  The seven guards come in this order:
 *   "rows"           value: rows used in the fit, limit: min_total_rows
 *   "bad rows"       value: share of data rows skipped as malformed,
 *                    limit: max_bad_share
 *   "current table"  fails when a table exists at the path but is not a
 *                    valid quote table, or cannot be compared (a covariate
 *                    the new fit does not read); no value
 *   "change"         value: the move of the promise nearest its limit
 *                    (signed; in seconds or percent of the current promise,
 *                    whichever limit binds: unit "s" or "%"), limit: that
 *                    limit; skipped without a current table
 *   "layout"         fails (unless allow_layout_change) when the new table
 *                    has other key columns, lacks a target of the current
 *                    one or has a covariate it lacks; no value; skipped
 *                    without a current table
 *   "holdout"        with fit.holdout: value: the Wilson 95% upper bound
 *                    (binom.h) of the held-out on-time rate of the target
 *                    it is lowest for relative to the target, limit: that
 *                    target; fails when any bound lies below its target;
 *                    skipped unless require_holdout (value and limit still
 *                    given), and without a holdout
 *   "well formed"    the new table read back from its temporary file is the
 *                    table in memory; value: its rows
 * value and limit are NaN where there is none.  message is the line the
 * change report and the provenance record show. */
enum { ETACAL_GUARD_PASSED = 0, ETACAL_GUARD_FAILED = 1, ETACAL_GUARD_SKIPPED = 2 };
#define ETACAL_PUBLISH_NGUARDS 7

typedef struct etacal_guard {
    const char *name;  /* static text */
    int status;        /* ETACAL_GUARD_* */
    double value, limit;
    const char *unit;  /* "rows", "share", "s", "%" or "" (static text) */
    char message[256];
} etacal_guard;

/* The record's word for a status: "ok", "failed", "not checked". */
const char *etacal_guard_status_name(int status);

/* What a run did. */
enum { ETACAL_PUBLISHED = 0, ETACAL_PUBLISH_REFUSED = 1, ETACAL_PUBLISH_DRY_RUN = 2 };

typedef struct etacal_publish_result etacal_publish_result;

/* Publishes: takes the lock on s->table (waiting up to s->wait_s), removes
 * the temporary files a killed publisher left, fits the new table from
 * s->input, reads the current table (if any), compares the two at the
 * reference order (etacal_reference_point, or s->ref_pred), writes the new
 * table to a temporary file beside the path and reads it back, evaluates
 * the guards, and then, unless a guard failed or s->dry_run: keeps the
 * current table as PATH.prev (etacal_keep_copy), renames the new one into
 * place (fsynced), writes the provenance record PATH.meta.json and, with
 * s->history, the dated copies HISTORY/BASE.YYYYMMDDTHHMMSSZ[-N] and
 * their .meta.json.  A refused or dry run leaves every file as it was
 * (the lock file apart).  The lock is released before the call returns.
 *
 * Returns ETACAL_OK with *out a new result (free with
 * etacal_publish_result_destroy) whatever the guards said; the outcome
 * says whether the table was replaced.  On an error before the
 * replacement, returns its code with *out NULL and the table untouched.
 * When the table was replaced but what follows failed (the provenance
 * record or the history copy), returns that error with *out set: the
 * result says what was written, and etacal_publish_result_record is NULL
 * when the record could not be built. */
int etacal_publish_run(const etacal_publishspec *s, etacal_publish_result **out, etacal_error *err);
void etacal_publish_result_destroy(etacal_publish_result *r);

/* ETACAL_PUBLISHED, ETACAL_PUBLISH_REFUSED (a guard failed: nothing
 * replaced) or ETACAL_PUBLISH_DRY_RUN (every guard held; nothing
 * replaced). */
int etacal_publish_result_outcome(const etacal_publish_result *r);
/* The guards (ETACAL_PUBLISH_NGUARDS of them, in the order above). */
const etacal_guard *etacal_publish_result_guards(const etacal_publish_result *r, size_t *n);
/* The fit of the new table: its rows (with their read counts), quote
 * table, holdout. */
const etacal_fit_run *etacal_publish_result_fit(const etacal_publish_result *r);
/* The current table the new one was compared with, and the comparison
 * (its moves ordered by the size of the move, largest first, moves
 * without a number last); NULL for both when there was none to compare
 * with. */
const etacal_quotes *etacal_publish_result_current(const etacal_publish_result *r);
const etacal_quotes_diff *etacal_publish_result_diff(const etacal_publish_result *r);
/* Why the current table was not compared: "" when there was none or it
 * was; else the reader's message or "cannot compare: ...". */
const char *etacal_publish_result_current_problem(const etacal_publish_result *r);
/* How many promises of the comparison had a number on both sides. */
size_t etacal_publish_result_compared(const etacal_publish_result *r);
/* The reference order: the prediction, and the covariates in the order of
 * s->fit.xs (*x gets fit.nx values). */
double etacal_publish_result_reference(const etacal_publish_result *r, const double **x);
/* The files written: the previous table's copy ("" when there was no
 * previous table or nothing was replaced), the provenance record and the
 * history copy ("" when not written). */
const char *etacal_publish_result_prev_path(const etacal_publish_result *r);
const char *etacal_publish_result_record_path(const etacal_publish_result *r);
const char *etacal_publish_result_history_path(const etacal_publish_result *r);
/* The provenance record (JSON text, a newline at the end; *len its bytes),
 * also for a refused or dry run, where it is not written; NULL when it
 * could not be built.  Its members: etacal (version), written_at (s->now,
 * ISO 8601 UTC), command, input {path, sha256, bytes, rows_read,
 * rows_used, rows_missing, rows_skipped_bad}, time_range {column, first,
 * last} (with a time column), table {sha256, method, targets, rows},
 * guards [{guard, result, detail}]. */
const char *etacal_publish_result_record(const etacal_publish_result *r, size_t *len);

/* The change report of r, the result of a run with the specification s,
 * to out, in a format:
 *   ETACAL_FORMAT_TEXT  for people: the rows read, the new table, the
 *                       current one and the reference order, the segments
 *                       added, removed, changed and unchanged, the largest
 *                       moves of the promise at the reference order (at
 *                       most show of them; 0: none listed), the segments
 *                       with a row in one table only, the guards (ok,
 *                       FAILED or -, and the message) and the outcome with
 *                       the files written;
 *   ETACAL_FORMAT_JSON  {etacal, table, input, outcome ("published",
 *                       "refused", "dry run"), rows {read, used, missing,
 *                       skipped_bad}, reference {pred_s, <covariate>...},
 *                       segments ({added, removed, changed, unchanged}, or
 *                       null without a comparison), moves [{keys, target,
 *                       in_current, in_new, current_s, new_s, move_s}]
 *                       (every move, null for a missing promise), guards
 *                       [{guard, result, detail}]}.
 * ETACAL_OK; ETACAL_EINVAL (another format); ETACAL_ENOMEM (what was
 * written is then incomplete); ETACAL_EIO when the sink refuses bytes. */
int etacal_publish_write_report(const etacal_publish_result *r, const etacal_publishspec *s, int format,
                                size_t show, const etacal_sink *out, etacal_error *err);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
