/* SPDX-License-Identifier: GPL-3.0-or-later */
/* publish_run.c: publishing a quote table as one library call
 * (etacal_publish_run, see publish.h): the guards evaluated and returned
 * as data, the comparison with the current table, the layout and
 * same-table checks, the provenance record (jansson) and the replace
 * sequence under the lock.  The parts (lock, comparison, keep copy,
 * checksums) are in publish.c.
 *
 * The holdout guard uses the Wilson (1927) score interval of binom.h; the
 * change guard compares promises at one reference order (medians: common
 * practice, no source).  The clock is the caller's (spec->now). */
#define _GNU_SOURCE
#include "base.h"
#include "results.h"
#include "stream.h"
#include "quote_internal.h"
#include "textout.h"

#include "etacal/binom.h"
#include "etacal/io.h"
#include "etacal/publish.h"
#include "etacal/timeparse.h"
#include "etacal/version.h"

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#define PATH_CAP 4096

struct etacal_publish_result {
    int outcome, replaced, kept, meta_written;
    etacal_fit_run *fit;
    etacal_quotes *cur;   /* the current table as read, or NULL */
    int have_cur;         /* cur was compared: diff holds the comparison */
    char cur_problem[400];
    etacal_quotes_diff diff;
    size_t compared;
    double ref_pred, ref_x[ETACAL_QR_MAX_COVARIATES];
    etacal_guard guards[ETACAL_PUBLISH_NGUARDS];
    char in_sha[65], tab_sha[65];
    uint64_t in_bytes;
    char stamp[32], iso[32];
    char prev[PATH_CAP], meta[PATH_CAP], hist[PATH_CAP];
    char *record;
    size_t record_len;
};

/* What a run needs on the way and not after it. */
typedef struct work {
    const etacal_publishspec *s;
    etacal_publish_result *r;
    const etacal_quotes *q;  /* the new table (the fit's) */
    char *buf;               /* the new table's bytes */
    size_t buflen;
    outfile of;
    etacal_quotes *back;     /* the new table read back */
} work;

void etacal_publishspec_init(etacal_publishspec *s)
{
    memset(s, 0, sizeof *s);
    etacal_fitspec_init(&s->fit);
    s->ro.bad_rows = ETACAL_BAD_ROWS_SKIP;
    s->ro.max_bad_share = 1;
    s->min_total_rows = 1000;
    s->max_bad_share = 0.01;
    s->max_change_s = NAN;
    s->max_change_pct = NAN;
    s->ref_pred = NAN;
    s->wait_s = 60;
    s->now = NAN;
}

const char *etacal_guard_status_name(int status)
{
    return status == ETACAL_GUARD_PASSED ? "ok" : status == ETACAL_GUARD_FAILED ? "failed" : "not checked";
}

void etacal_publish_result_destroy(etacal_publish_result *r)
{
    if (!r)
        return;
    free(r->record);
    quotes_diff_release(&r->diff);
    etacal_quotes_destroy(r->cur);
    etacal_fit_run_destroy(r->fit);
    free(r);
}

int etacal_publish_result_outcome(const etacal_publish_result *r) { return r->outcome; }

const etacal_guard *etacal_publish_result_guards(const etacal_publish_result *r, size_t *n)
{
    if (n)
        *n = ETACAL_PUBLISH_NGUARDS;
    return r->guards;
}

const etacal_fit_run *etacal_publish_result_fit(const etacal_publish_result *r) { return r->fit; }

const etacal_quotes *etacal_publish_result_current(const etacal_publish_result *r)
{
    return r->have_cur ? r->cur : NULL;
}

const etacal_quotes_diff *etacal_publish_result_diff(const etacal_publish_result *r)
{
    return r->have_cur ? &r->diff : NULL;
}

const char *etacal_publish_result_current_problem(const etacal_publish_result *r) { return r->cur_problem; }

size_t etacal_publish_result_compared(const etacal_publish_result *r) { return r->compared; }

double etacal_publish_result_reference(const etacal_publish_result *r, const double **x)
{
    if (x)
        *x = r->ref_x;
    return r->ref_pred;
}

const char *etacal_publish_result_prev_path(const etacal_publish_result *r) { return r->kept ? r->prev : ""; }

const char *etacal_publish_result_record_path(const etacal_publish_result *r)
{
    return r->meta_written ? r->meta : "";
}

const char *etacal_publish_result_history_path(const etacal_publish_result *r) { return r->hist; }

const char *etacal_publish_result_record(const etacal_publish_result *r, size_t *len)
{
    if (len)
        *len = r->record ? r->record_len : 0;
    return r->record;
}

/* ---- the guards ------------------------------------------------------------ */

static void guard_set(etacal_guard *g, const char *name, int status, double value, double limit,
                      const char *unit)
{
    g->name = name;
    g->status = status;
    g->value = value;
    g->limit = limit;
    g->unit = unit;
    g->message[0] = '\0';
}

/* The guard's message (truncated to its buffer, as a line of a report). */
#if defined(__GNUC__)
__attribute__((format(printf, 2, 3)))
#endif
static void gmsg(etacal_guard *g, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(g->message, sizeof g->message, fmt, ap);
    va_end(ap);
}

static void keys_label(char *buf, size_t n, const etacal_quotes *q, const char *const *keys)
{
    if (q->nkeys == 0) {
        snprintf(buf, n, "global");
        return;
    }
    size_t w = (size_t)snprintf(buf, n, "(");
    for (size_t j = 0; j < q->nkeys && w < n; j++)
        w += (size_t)snprintf(buf + w, n - w, "%s%s", j ? ", " : "", keys[j]);
    if (w < n)
        snprintf(buf + w, n - w, ")");
}

static double move_of(const etacal_quote_move *m) { return m->new_promise - m->old_promise; }

static void guard_rows(etacal_guard *g, const etacal_publishspec *s, const etacal_table *t)
{
    size_t used = etacal_table_rows(t);
    guard_set(g, "rows", used >= s->min_total_rows ? ETACAL_GUARD_PASSED : ETACAL_GUARD_FAILED, (double)used,
              (double)s->min_total_rows, "rows");
    gmsg(g, "%zu used, at least %zu wanted (--min-total-rows)", used,
             s->min_total_rows);
}

static void guard_bad_rows(etacal_guard *g, const etacal_publishspec *s, const etacal_table *t)
{
    const etacal_read_stats *rs = etacal_table_stats(t);
    double share = rs->data_rows ? (double)rs->bad / (double)rs->data_rows : 0;
    guard_set(g, "bad rows", share <= s->max_bad_share ? ETACAL_GUARD_PASSED : ETACAL_GUARD_FAILED, share,
              s->max_bad_share, "share");
    snprintf(g->message, sizeof g->message,
             "%zu of %zu skipped (%.2f%%), at most %.2f%% allowed (--max-bad-share)", rs->bad, rs->data_rows,
             100 * share, 100 * s->max_bad_share);
}

static void guard_current(etacal_guard *g, const etacal_publish_result *r)
{
    guard_set(g, "current table", ETACAL_GUARD_PASSED, NAN, NAN, "");
    if (r->cur_problem[0]) {
        g->status = ETACAL_GUARD_FAILED;
        gmsg(g, "not valid (%.180s); fix it or move it aside", r->cur_problem);
    } else {
        gmsg(g, "%s", r->have_cur ? "valid" : "none yet: this is the first table");
    }
}

/* By how much the move m exceeds the limit in seconds and in percent
 * (relative to the limit; <= 0: within; -INFINITY: no such limit). */
static void move_excess(const etacal_quote_move *m, double max_s, double max_pct, double *ex_s, double *ex_pct)
{
    double mv = fabs(move_of(m));
    *ex_s = -INFINITY;
    *ex_pct = -INFINITY;
    if (!isnan(max_s))
        *ex_s = (mv - max_s) / fmax(max_s, 1e-9);
    if (!isnan(max_pct))
        *ex_pct = m->old_promise > 0 ? (100 * mv / m->old_promise - max_pct) / fmax(max_pct, 1e-9)
                                     : (mv > 0 ? INFINITY : -INFINITY);
}

static void guard_change(etacal_guard *g, const etacal_publishspec *s, etacal_publish_result *r,
                         const etacal_quotes *q)
{
    double max_s = s->max_change_s, max_pct = s->max_change_pct;
    if (isnan(max_s) && isnan(max_pct))
        max_pct = 25;
    const etacal_quotes_diff *d = &r->diff;
    const etacal_quote_move *worst = NULL;
    double worst_excess = 0;
    r->compared = 0;
    for (size_t i = 0; i < d->nmoves; i++) {
        const etacal_quote_move *m = &d->moves[i];
        if (!isfinite(fabs(move_of(m))))
            continue;
        r->compared++;
        double ex_s, ex_pct;
        move_excess(m, max_s, max_pct, &ex_s, &ex_pct);
        double ex = fmax(ex_s, ex_pct);
        if (!worst || ex > worst_excess) {
            worst = m;
            worst_excess = ex;
        }
    }
    char lim[96];
    if (!isnan(max_s) && !isnan(max_pct))
        snprintf(lim, sizeof lim, "%g s and %g%%", max_s, max_pct);
    else if (!isnan(max_s))
        snprintf(lim, sizeof lim, "%g s", max_s);
    else
        snprintf(lim, sizeof lim, "%g%%", max_pct);
    guard_set(g, "change", ETACAL_GUARD_PASSED, NAN, NAN, "");
    if (!r->have_cur) {
        g->status = ETACAL_GUARD_SKIPPED;
        gmsg(g, "nothing to compare with");
        return;
    }
    if (!worst) {
        gmsg(g, "no promise to compare");
        return;
    }
    char who[128];
    keys_label(who, sizeof who, q, worst->keys);
    if (d->keys_differ)
        snprintf(who, sizeof who, "global");
    double mv = move_of(worst);
    double pct = worst->old_promise > 0 ? 100 * mv / worst->old_promise : 0.0;
    double ex_s, ex_pct;
    move_excess(worst, max_s, max_pct, &ex_s, &ex_pct);
    /* the value in the unit of the limit that binds */
    if (ex_pct >= ex_s) {
        g->value = worst->old_promise > 0 ? pct : mv > 0 ? INFINITY : mv < 0 ? -INFINITY : 0;
        g->limit = max_pct;
        g->unit = "%";
    } else {
        g->value = mv;
        g->limit = max_s;
        g->unit = "s";
    }
    g->status = worst_excess <= 0 ? ETACAL_GUARD_PASSED : ETACAL_GUARD_FAILED;
    gmsg(g, "move nearest the limit %+.1f s (%+.1f%%) at %s, target %g; limit %s",
             mv, pct, who, worst->target, lim);
}

/* The layout check: what an `etacal apply` of the new table would need
 * that the current one did not. */
static int layout_problem(const etacal_quotes *o, const etacal_quotes *n, char *buf, size_t len)
{
    int same = o->nkeys == n->nkeys;
    for (size_t j = 0; same && j < o->nkeys; j++)
        same = strcmp(o->key_names[j], n->key_names[j]) == 0;
    if (!same) {
        snprintf(buf, len, "the key columns differ from the current table's");
        return 1;
    }
    for (size_t t = 0; t < o->ntargets; t++) {
        if (etacal_quotes_find_target(n, o->targets[t]) < 0) {
            snprintf(buf, len, "the current table's target %g is missing", o->targets[t]);
            return 1;
        }
    }
    for (size_t j = 0; j < n->ncoef; j++) {
        size_t i = 0;
        while (i < o->ncoef && strcmp(o->coef_names[i], n->coef_names[j]) != 0)
            i++;
        if (i == o->ncoef) {
            snprintf(buf, len, "the covariate '%s' is new: orders files may lack it", n->coef_names[j]);
            return 1;
        }
    }
    return 0;
}

static void guard_layout(etacal_guard *g, const etacal_publishspec *s, const etacal_publish_result *r,
                         const etacal_quotes *q)
{
    guard_set(g, "layout", ETACAL_GUARD_PASSED, NAN, NAN, "");
    if (!r->have_cur) {
        g->status = ETACAL_GUARD_SKIPPED;
        gmsg(g, "nothing to compare with");
        return;
    }
    char why[200];
    if (layout_problem(r->cur, q, why, sizeof why)) {
        g->status = s->allow_layout_change ? ETACAL_GUARD_PASSED : ETACAL_GUARD_FAILED;
        gmsg(g, "%s%s", why,
                 s->allow_layout_change ? " (allowed: --allow-layout-change)" : "");
    } else {
        gmsg(g, "same key columns; every current target kept");
    }
}

/* The held-out on-time rate of each target, with its Wilson 95% interval:
 * the guard fails when an interval lies wholly below its target. */
static void guard_holdout(etacal_guard *g, const etacal_publishspec *s, const etacal_fit_run *fit,
                          const etacal_quotes *q)
{
    guard_set(g, "holdout", ETACAL_GUARD_SKIPPED, NAN, NAN, "share");
    const etacal_holdout *ho = etacal_fit_run_holdout(fit);
    if (!(s->fit.holdout > 0) || !ho) {
        g->unit = "";
        gmsg(g, "no --holdout");
        return;
    }
    size_t nt = q->ntargets, w = 0, n = ho->n[0];
    int ok = 1;
    double closest = INFINITY;
    for (size_t t = 0; t < nt; t++) {
        double lo = 0, hi = 0;
        size_t hits = ho->hits[t];
        etacal_error e;
        if (n == 0 || etacal_binom_wilson(hits, n, 0.95, &lo, &hi, &e) != ETACAL_OK) {
            ok = 0;
            g->value = NAN;
            g->limit = q->targets[t];
            closest = -INFINITY;
        } else {
            if (hi < q->targets[t])
                ok = 0;
            if (hi - q->targets[t] < closest) {
                closest = hi - q->targets[t];
                g->value = hi;
                g->limit = q->targets[t];
            }
        }
        if (w < sizeof g->message)
            w += (size_t)snprintf(g->message + w, sizeof g->message - w,
                                  "%starget %g: %.2f%% on time (%zu/%zu), Wilson 95%% %.4f-%.4f", t ? "; " : "",
                                  q->targets[t], n ? 100.0 * (double)hits / (double)n : 0.0, hits, n, lo, hi);
    }
    if (s->require_holdout)
        g->status = ok ? ETACAL_GUARD_PASSED : ETACAL_GUARD_FAILED;
    else if (w < sizeof g->message)
        snprintf(g->message + w, sizeof g->message - w, " (not required)");
}

/* The table that was written and read back against the one in memory. */
static int same_table(const etacal_quotes *a, const etacal_quotes *b)
{
    if (a->nrows != b->nrows || a->ntargets != b->ntargets || a->nkeys != b->nkeys || a->ncoef != b->ncoef ||
        a->method != b->method)
        return 0;
    for (size_t r = 0; r < a->nrows; r++) {
        const etacal_quote *x = &a->rows[r], *y = &b->rows[r];
        if (x->offset_s != y->offset_s || x->slope != y->slope || x->n != y->n || x->k != y->k || (a->nkeys && x->cell != y->cell) ||
            a->targets[x->target] != b->targets[y->target])
            return 0;
        if (!isfinite(x->offset_s) || !isfinite(x->slope))
            return 0;
        for (size_t j = 0; j < a->ncoef; j++)
            if (x->coef[j] != y->coef[j] || !isfinite(x->coef[j]))
                return 0;
        if (a->ncoef && !x->x_min != !y->x_min)
            return 0;
        for (size_t j = 0; j < a->ncoef && x->x_min; j++)
            if (x->x_min[j] != y->x_min[j] || x->x_max[j] != y->x_max[j])
                return 0;
        for (size_t j = 0; j < a->nkeys; j++)
            if (strcmp(a->segs[x->seg].keys[j], b->segs[y->seg].keys[j]) != 0)
                return 0;
    }
    return 1;
}

/* Reads the new table back from its temporary file: ENOMEM is an error of
 * the run, any other failure the guard's. */
static int guard_well_formed(etacal_guard *g, work *w, etacal_error *err)
{
    guard_set(g, "well formed", ETACAL_GUARD_FAILED, NAN, NAN, "rows");
    etacal_error e;
    etacal_error_clear(&e);
    int rb = etacal_quotes_read_csv(w->of.tmp, ',', &w->back, &e);
    if (rb == ETACAL_ENOMEM) {
        *err = e;
        return rb;
    }
    if (rb != 0) {
        gmsg(g, "the new table does not read back: %.200s", e.msg);
    } else if (!same_table(w->q, w->back)) {
        gmsg(g, "the new table reads back different from what was written");
    } else {
        g->status = ETACAL_GUARD_PASSED;
        g->value = (double)w->back->nrows;
        gmsg(g, "the new table reads back as written (%zu row%s)",
                 w->back->nrows, w->back->nrows == 1 ? "" : "s");
    }
    return ETACAL_OK;
}

/* ---- the steps before the guards -------------------------------------------- */

static int check_spec(const etacal_publishspec *s, etacal_error *err)
{
    if (!s->input || !s->table)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "publish needs an input file and a table path");
    if (strcmp(s->input, "-") == 0 || strcmp(s->table, "-") == 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                "the input and the table must be files, not standard input or output");
    if (!isfinite(s->now))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "publish needs the current time (now)");
    if (s->require_holdout && !(s->fit.holdout > 0))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--require-holdout needs --holdout F");
    if (!(s->max_bad_share >= 0 && s->max_bad_share <= 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--max-bad-share takes a share in [0,1]");
    if (s->max_change_s < 0 || s->max_change_pct < 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "a change limit must be >= 0");
    if (!(s->wait_s >= 0))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--wait takes seconds >= 0");
    size_t n = strlen(s->table);
    if (n + sizeof ".meta.json" > PATH_CAP)
        return etacal_error_set(err, ETACAL_EINVAL, s->table, "path too long");
    return ETACAL_OK;
}

/* The current table, if any: a table that does not read is the "current
 * table" guard's to refuse (r->cur_problem), not an error of the run. */
static int read_current(const etacal_publishspec *s, etacal_publish_result *r, etacal_error *err)
{
    struct stat st;
    if (stat(s->table, &st) == 0) {
        etacal_error e;
        etacal_error_clear(&e);
        if (etacal_quotes_read_csv(s->table, ',', &r->cur, &e) != 0) {
            if (e.code == ETACAL_ENOMEM) {
                *err = e;
                return e.code;
            }
            snprintf(r->cur_problem, sizeof r->cur_problem, "%s%s%s", e.where, e.where[0] ? ": " : "", e.msg);
        } else {
            r->have_cur = 1;
        }
    } else if (errno != ENOENT) {
        return etacal_error_set(err, ETACAL_EIO, s->table, "cannot stat: %s", strerror(errno));
    }
    return ETACAL_OK;
}

/* The reference order and the comparison with the current table. */
static int compare_current(const etacal_publishspec *s, etacal_publish_result *r, const etacal_quotes *q,
                           etacal_error *err)
{
    const etacal_table *t = etacal_fit_run_rows(r->fit);
    int rc = etacal_reference_point(t, etacal_fit_run_pred_col(r->fit), etacal_fit_run_x_cols(r->fit), s->fit.nx,
                                    &r->ref_pred, r->ref_x, err);
    if (rc)
        return rc;
    if (!isnan(s->ref_pred))
        r->ref_pred = s->ref_pred;
    if (!r->have_cur)
        return ETACAL_OK;
    rc = quotes_compare_fill(r->cur, q, r->ref_pred, s->fit.xs, r->ref_x, s->fit.nx, &r->diff, err);
    if (rc && rc != ETACAL_ENOMEM) {
        /* the current table has a covariate the new fit does not read */
        snprintf(r->cur_problem, sizeof r->cur_problem, "cannot compare: %s", err->msg);
        etacal_error_clear(err);
        r->have_cur = 0;
        rc = ETACAL_OK;
        quotes_diff_release(&r->diff);
    }
    return rc;
}

/* The new table in memory (its checksum goes in the record), then in a
 * temporary file beside the path. */
static int write_new(work *w, etacal_error *err)
{
    FILE *ms = open_memstream(&w->buf, &w->buflen);
    if (!ms)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int rc = quotes_write_csv(w->q, ms, err);
    /* glibc's fclose of a memory stream hides a failed last realloc, but
     * leaves the buffer as the last fflush set it: so that is checked */
    int ms_bad = fflush(ms) != 0 || ferror(ms);
    if ((fclose(ms) != 0 || ms_bad || !w->buf) && rc == 0)
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    if (rc)
        return rc;
    etacal_sha256 sh;
    etacal_sha256_init(&sh);
    etacal_sha256_update(&sh, w->buf, w->buflen);
    etacal_sha256_hex(&sh, w->r->tab_sha);
    rc = outfile_open(&w->of, w->s->table, err);
    if (rc)
        return rc;
    if (fwrite(w->buf, 1, w->buflen, w->of.fp) != w->buflen || fflush(w->of.fp) != 0)
        return etacal_error_set(err, ETACAL_EIO, w->s->table, "write failed: %s", strerror(errno));
    return ETACAL_OK;
}

/* ---- the provenance record --------------------------------------------------- */

static json_t *record_input(const etacal_publishspec *s, const etacal_publish_result *r, int *oom)
{
    const etacal_table *t = etacal_fit_run_rows(r->fit);
    const etacal_read_stats *rs = etacal_table_stats(t);
    json_t *inp = jnew(json_object(), oom);
    jset(inp, "path", jstr(s->input, oom), oom);
    jset(inp, "sha256", jstr(r->in_sha, oom), oom);
    jset(inp, "bytes", jnew(json_integer((json_int_t)r->in_bytes), oom), oom);
    jset(inp, "rows_read", jnew(json_integer((json_int_t)rs->data_rows), oom), oom);
    jset(inp, "rows_used", jnew(json_integer((json_int_t)etacal_table_rows(t)), oom), oom);
    jset(inp, "rows_missing", jnew(json_integer((json_int_t)rs->missing), oom), oom);
    jset(inp, "rows_skipped_bad", jnew(json_integer((json_int_t)rs->bad), oom), oom);
    return inp;
}

/* The first and last time of the rows used, or NULL without a time column. */
static json_t *record_time_range(const etacal_publishspec *s, const etacal_publish_result *r, int *oom)
{
    const etacal_table *t = etacal_fit_run_rows(r->fit);
    long tc = etacal_fit_run_time_col(r->fit);
    size_t used = etacal_table_rows(t);
    if (tc < 0 || !used)
        return NULL;
    const double *tm = etacal_table_num(t, (size_t)tc);
    double lo = tm[0], hi = tm[0];
    for (size_t i = 1; i < used; i++) {
        lo = fmin(lo, tm[i]);
        hi = fmax(hi, tm[i]);
    }
    char b1[64], b2[64];
    etacal_time_format(lo, b1);
    etacal_time_format(hi, b2);
    json_t *tr = jnew(json_object(), oom);
    jset(tr, "column", jstr(s->fit.time, oom), oom);
    jset(tr, "first", jstr(b1, oom), oom);
    jset(tr, "last", jstr(b2, oom), oom);
    return tr;
}

static json_t *record_table(const etacal_publish_result *r, const etacal_quotes *q, int *oom)
{
    json_t *tab = jnew(json_object(), oom);
    jset(tab, "sha256", jstr(r->tab_sha, oom), oom);
    jset(tab, "method", jstr(etacal_method_name(q->method), oom), oom);
    json_t *tg = jnew(json_array(), oom);
    for (size_t t = 0; t < q->ntargets; t++)
        jpush(tg, jnew(json_real(q->targets[t]), oom), oom);
    jset(tab, "targets", tg, oom);
    jset(tab, "rows", jnew(json_integer((json_int_t)q->nrows), oom), oom);
    return tab;
}

/* The record as JSON text (r->record), in the member order of publish.h;
 * reals with 15 significant digits. */
static int build_record(const etacal_publishspec *s, etacal_publish_result *r, const etacal_quotes *q,
                        etacal_error *err)
{
    int oom = 0;
    json_t *rec = jnew(json_object(), &oom);
    jset(rec, "etacal", jstr(ETACAL_VERSION, &oom), &oom);
    jset(rec, "written_at", jstr(r->iso, &oom), &oom);
    json_t *cmd = jnew(json_array(), &oom);
    for (size_t i = 0; i < s->ncommand; i++)
        jpush(cmd, jstr(s->command[i], &oom), &oom);
    jset(rec, "command", cmd, &oom);
    jset(rec, "input", record_input(s, r, &oom), &oom);
    jset(rec, "time_range", record_time_range(s, r, &oom), &oom);
    jset(rec, "table", record_table(r, q, &oom), &oom);
    json_t *gj = jnew(json_array(), &oom);
    for (size_t i = 0; i < ETACAL_PUBLISH_NGUARDS; i++) {
        const etacal_guard *g = &r->guards[i];
        json_t *o = jnew(json_object(), &oom);
        jset(o, "guard", jstr(g->name, &oom), &oom);
        jset(o, "result", jstr(etacal_guard_status_name(g->status), &oom), &oom);
        jset(o, "detail", jstr(g->message, &oom), &oom);
        jpush(gj, o, &oom);
    }
    jset(rec, "guards", gj, &oom);
    char *text = oom ? NULL : json_dumps(rec, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(15));
    json_decref(rec);
    if (!text)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    size_t len = strlen(text);
    r->record = malloc(len + 2);
    if (!r->record) {
        free(text);
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    memcpy(r->record, text, len);
    r->record[len] = '\n';
    r->record[len + 1] = '\0';
    r->record_len = len + 1;
    free(text);
    return ETACAL_OK;
}

/* ---- after the replacement ----------------------------------------------------- */

/* The dated copy in the history directory: BASE.STAMP, or BASE.STAMP-K
 * when that exists, with its record beside it. */
static int write_history(const work *w, etacal_error *err)
{
    const etacal_publishspec *s = w->s;
    etacal_publish_result *r = w->r;
    if (mkdir(s->history, 0777) != 0 && errno != EEXIST)
        return etacal_error_set(err, ETACAL_EIO, s->history, "cannot create the history directory: %s",
                                strerror(errno));
    const char *base = strrchr(s->table, '/');
    base = base ? base + 1 : s->table;
    char path[PATH_CAP];
    struct stat hs;
    for (int k = 1; k < 1000; k++) {
        size_t n;
        if (k == 1)
            n = (size_t)snprintf(path, sizeof path, "%s/%s.%s", s->history, base, r->stamp);
        else
            n = (size_t)snprintf(path, sizeof path, "%s/%s.%s-%d", s->history, base, r->stamp, k);
        if (n + sizeof ".meta.json" > sizeof path)
            return etacal_error_set(err, ETACAL_EINVAL, s->history, "path too long");
        if (stat(path, &hs) != 0)
            break;
    }
    int rc = etacal_write_file(path, w->buf, w->buflen, err);
    if (rc)
        return rc;
    memcpy(r->hist, path, sizeof path);
    char hm[PATH_CAP];
    if ((size_t)snprintf(hm, sizeof hm, "%s.meta.json", path) >= sizeof hm)
        return etacal_error_set(err, ETACAL_EINVAL, s->history, "path too long");
    return etacal_write_file(hm, r->record, r->record_len, err);
}

static int by_size_of_move(const void *pa, const void *pb)
{
    const etacal_quote_move *a = pa, *b = pb;
    double x = fabs(move_of(a)), y = fabs(move_of(b));
    int fa = isfinite(x), fb = isfinite(y);
    if (fa != fb)
        return fa ? -1 : 1;
    if (fa && x != y)
        return x > y ? -1 : 1;
    return 0;
}

/* ---- the run ----------------------------------------------------------------- */

/* Everything up to the guards' verdict: fit, current table, comparison,
 * the new table in its temporary file, the guards. */
static int prepare(work *w, etacal_error *err)
{
    const etacal_publishspec *s = w->s;
    etacal_publish_result *r = w->r;
    etacal_read_opts ro = s->ro;
    ro.max_bad_share = 1; /* read everything; the guard decides */
    int rc = etacal_fit_csv(&s->fit, s->input, &ro, &r->fit, err);
    if (rc)
        return rc;
    w->q = etacal_fit_run_quotes(r->fit);
    rc = etacal_sha256_file(s->input, r->in_sha, &r->in_bytes, err);
    if (rc == 0)
        rc = read_current(s, r, err);
    if (rc == 0)
        rc = compare_current(s, r, w->q, err);
    if (rc == 0)
        rc = write_new(w, err);
    if (rc)
        return rc;
    const etacal_table *t = etacal_fit_run_rows(r->fit);
    guard_rows(&r->guards[0], s, t);
    guard_bad_rows(&r->guards[1], s, t);
    guard_current(&r->guards[2], r);
    guard_change(&r->guards[3], s, r, w->q);
    guard_layout(&r->guards[4], s, r, w->q);
    guard_holdout(&r->guards[5], s, r->fit, w->q);
    return guard_well_formed(&r->guards[6], w, err);
}

/* The replacement and what follows it.  Returns 1 with err filled when
 * the table is in place but the record or the history copy is not. */
static int replace(work *w, etacal_error *err)
{
    const etacal_publishspec *s = w->s;
    etacal_publish_result *r = w->r;
    int rc = ETACAL_OK;
    if (r->outcome != ETACAL_PUBLISHED) {
        outfile_abort(&w->of);
    } else {
        rc = etacal_keep_copy(s->table, r->prev, &r->kept, err);
        if (rc == 0)
            rc = outfile_commit(&w->of, err);
        if (rc)
            return rc;
        r->replaced = 1;
    }
    rc = build_record(s, r, w->q, err);
    if (rc == 0 && r->replaced) {
        rc = etacal_write_file(r->meta, r->record, r->record_len, err);
        r->meta_written = rc == 0;
        if (rc == 0 && s->history)
            rc = write_history(w, err);
    }
    return rc;
}

int etacal_publish_run(const etacal_publishspec *s, etacal_publish_result **out, etacal_error *err)
{
    *out = NULL;
    int rc = check_spec(s, err);
    if (rc)
        return rc;
    etacal_publish_result *r = calloc(1, sizeof *r);
    if (!r)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    work w = {.s = s, .r = r};
    int lock = -1;
    rc = etacal_lock_acquire(s->table, s->wait_s, &lock, err);
    if (rc) {
        etacal_publish_result_destroy(r);
        return rc;
    }
    (void)etacal_remove_stale_temps(s->table); /* a killed publisher's */
    rc = prepare(&w, err);
    if (rc == 0) {
        int refused = 0;
        for (size_t i = 0; i < ETACAL_PUBLISH_NGUARDS; i++)
            refused |= r->guards[i].status == ETACAL_GUARD_FAILED;
        r->outcome = refused ? ETACAL_PUBLISH_REFUSED : s->dry_run ? ETACAL_PUBLISH_DRY_RUN : ETACAL_PUBLISHED;
        time_t tt = (time_t)s->now;
        struct tm tmv;
        gmtime_r(&tt, &tmv);
        strftime(r->stamp, sizeof r->stamp, "%Y%m%dT%H%M%SZ", &tmv);
        strftime(r->iso, sizeof r->iso, "%Y-%m-%dT%H:%M:%SZ", &tmv);
        snprintf(r->prev, sizeof r->prev, "%s.prev", s->table);
        snprintf(r->meta, sizeof r->meta, "%s.meta.json", s->table);
        rc = replace(&w, err);
    }
    outfile_abort(&w.of);
    etacal_quotes_destroy(w.back);
    free(w.buf);
    etacal_lock_release(lock);
    if (r->have_cur)
        qsort(r->diff.moves, r->diff.nmoves, sizeof *r->diff.moves, by_size_of_move);
    if (rc && !r->replaced) {
        etacal_publish_result_destroy(r);
        return rc;
    }
    *out = r;
    return rc;
}
