/* SPDX-License-Identifier: GPL-3.0-or-later */
/* out_fit.c: the summary of a fit run for people (fit.h,
 * etacal_fit_write_summary): the rows read, the method, the point accuracy
 * of the prediction, one aligned table row per segment (its bound per
 * target, the coverage law of the bound, and which row an order of the
 * segment gets), the pooled cells, and with a holdout the on-time rates on
 * the held-out rows with Wilson intervals.  The row that serves a segment
 * is found through the quote index, as apply finds it. */
#include "base.h"
#include "quote_internal.h"
#include "textout.h"

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* What the writer's parts share. */
typedef struct fsum {
    FILE *fp;
    const etacal_quotes *q;
    const etacal_quote_index *ix;
    size_t min_rows;
} fsum;

static void fmt_pct(char *buf, size_t n, size_t hits, size_t total)
{
    if (total == 0)
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, "%.2f%%", 100.0 * (double)hits / (double)total);
}

/* "global" or "(harbour, *)": how the summary names a segment. */
static void segment_label(char *buf, size_t n, const etacal_quotes *q, size_t g)
{
    if (g == 0) {
        snprintf(buf, n, "global");
        return;
    }
    size_t w = (size_t)snprintf(buf, n, "(");
    for (size_t j = 0; j < q->nkeys && w < n; j++)
        w += (size_t)snprintf(buf + w, n - w, "%s%s", j ? ", " : "", q->segs[g].keys[j]);
    if (w < n)
        snprintf(buf + w, n - w, ")");
}

/* The table row an order of segment g gets at target ti (its own, or the
 * nearest level above with one: the quote index's rule), or -1. */
static long serving_row(const fsum *f, size_t g, size_t ti)
{
    return etacal_quote_index_lookup(f->ix, (const char *const *)f->q->segs[g].keys, NULL, ti, NULL);
}

/* The segment of that row (0, the global one, when none matches). */
static size_t serving_seg(const fsum *f, size_t g, size_t ti)
{
    long r = serving_row(f, g, ti);
    return r < 0 ? 0 : f->q->rows[r].seg;
}

/* Whether the global row at target ti is calibrated on all rows. */
static int global_all(const fsum *f, size_t ti)
{
    long r = serving_row(f, 0, ti);
    return r >= 0 && f->q->rows[r].seg == 0 && f->q->rows[r].cell == ETACAL_CELL_ALL;
}

/* The rows of the cell behind segment g's row at target ti (its pooled
 * cell; for the global row without one, all rows). */
static size_t pooled_n(const fsum *f, size_t g, size_t ti)
{
    return g == 0 && global_all(f, ti) ? f->q->segs[0].n : f->q->segs[g].pool_n[ti];
}

/* Which segments were pooled into which row, and with how many rows: per
 * target, every row of a pooled cell (a coarser segment's row, or the
 * global one) with the full key combinations whose rows it holds.
 * Returns 0, or -1 when out of memory. */
static int print_pooled(const fsum *f)
{
    const etacal_quotes *q = f->q;
    FILE *fp = f->fp;
    size_t ns = q->nsegs, nt = q->ntargets;
    size_t *members = calloc(ns, sizeof *members);
    if (!members)
        return -1;
    int header = 0;
    for (size_t ti = 0; ti < nt; ti++) {
        memset(members, 0, ns * sizeof *members);
        for (size_t g = 1; g < ns; g++)
            if (q->segs[g].level == q->nkeys && q->segs[g].status[ti] != ETACAL_OWN_ROW)
                members[serving_seg(f, g, ti)]++;
        char p[ETACAL_NUM_BUFSZ];
        etacal_percent_label(q->targets[ti], p);
        for (size_t g = 0; g < ns; g++) {
            if (q->segs[g].level == q->nkeys || q->segs[g].status[ti] != ETACAL_OWN_ROW || (g == 0 && !members[0]))
                continue;
            if (!header) {
                fputs("pooled cells (calibrated on the rows of the segments below them without a row of their "
                      "own):\n", fp);
                header = 1;
            }
            char who[64];
            segment_label(who, sizeof who, q, g);
            size_t m = members[g];
            if (g == 0 && global_all(f, ti))
                fprintf(fp, "  %s at %s%%: all %zu rows; %zu row%s left over from %zu segment%s, too few for a "
                            "pooled cell: no guarantee for %s\n",
                        who, p, pooled_n(f, 0, ti), q->segs[0].pool_n[ti], q->segs[0].pool_n[ti] == 1 ? "" : "s", m,
                        m == 1 ? "" : "s", m == 1 ? "it" : "them");
            else
                fprintf(fp, "  %s at %s%%: %zu row%s from %zu segment%s\n", who, p, pooled_n(f, g, ti),
                        pooled_n(f, g, ti) == 1 ? "" : "s", m, m == 1 ? "" : "s");
        }
    }
    free(members);
    return 0;
}

/* The heading lines: the rows, the method and the point accuracy. */
static void print_heading(const fsum *f, const char *path, const char *pred, const etacal_table *t)
{
    const etacal_quotes *q = f->q;
    FILE *fp = f->fp;
    const etacal_read_stats *st = etacal_table_stats(t);
    const etacal_accuracy *a = &q->accuracy;
    char pct[32];
    fprintf(fp, "etacal fit: %s\n", path);
    fprintf(fp, "rows: %zu read, %zu used, %zu left out (missing actual or prediction), %zu malformed skipped\n",
            st->data_rows, st->kept, st->missing, st->bad);
    fprintf(fp, "method: %s (%s)\n", etacal_method_name(q->method),
            q->method == ETACAL_METHOD_ADD     ? "promise = prediction + buffer"
            : q->method == ETACAL_METHOD_RATIO ? "promise = prediction x factor"
                                               : "promise = offset_s + slope x prediction + coefficients x covariates, "
                                                 "covariates clamped into their min_/max_ range, never below 0; "
                                                 "the buffer column is the conformal correction");
    fmt_pct(pct, sizeof pct, a->on_time, a->n);
    fprintf(fp,
            "point accuracy of '%s': RMSE %.1f s, MAE %.1f s, mean error (actual - pred) %+.1f s, "
            "on time with no buffer %s (%zu/%zu)\n",
            pred, a->rmse, a->mae, a->mean_error, pct, a->on_time, a->n);
    putc('\n', fp);
}

/* The segment table's header row into cells (buf holds the texts). */
static size_t header_cells(const etacal_quotes *q, const char **cells, char (*buf)[96])
{
    size_t c = 0, nk = q->nkeys;
    int add = q->method != ETACAL_METHOD_RATIO, conf = q->confidence > 0;
    for (size_t j = 0; j < nk; j++)
        cells[c++] = q->key_names[j];
    if (nk == 0)
        cells[c++] = "segment";
    cells[c++] = "n";
    cells[c++] = "bare on-time";
    for (size_t ti = 0; ti < q->ntargets; ti++) {
        char p[ETACAL_NUM_BUFSZ];
        etacal_percent_label(q->targets[ti], p);
        snprintf(buf[c], sizeof buf[c],
                 q->method == ETACAL_METHOD_QR ? "corr@%s%% s" : add ? "buffer@%s%% s" : "factor@%s%%", p);
        cells[c] = buf[c];
        c++;
        if (add)
            cells[c++] = "min";
        if (conf) {
            cells[c++] = "E cover";
            char cp[ETACAL_NUM_BUFSZ];
            etacal_percent_label(q->confidence, cp);
            snprintf(buf[c], sizeof buf[c], "cover@%s%%", cp);
            cells[c] = buf[c];
            c++;
        }
    }
    cells[c++] = "row";
    return c;
}

/* Segment s's cells of target ti (bound, minutes, coverage law) from
 * cells[c]; returns the next column. */
static size_t target_cells(const fsum *f, size_t s, size_t ti, const char **cells, char (*buf)[96], size_t c)
{
    const etacal_quotes *q = f->q;
    const etacal_segment *g = &q->segs[s];
    int add = q->method != ETACAL_METHOD_RATIO, conf = q->confidence > 0;
    double v = g->score_q[ti];
    if (isinf(v))
        snprintf(buf[c], sizeof buf[c], "unbounded");
    else if (isnan(v))
        snprintf(buf[c], sizeof buf[c], "-");
    else
        snprintf(buf[c], sizeof buf[c], add ? "%.1f" : "%.4f", v);
    cells[c] = buf[c];
    c++;
    if (add) {
        if (!isfinite(v))
            snprintf(buf[c], sizeof buf[c], "-");
        else
            snprintf(buf[c], sizeof buf[c], "%.2f", v / 60);
        cells[c] = buf[c];
        c++;
    }
    if (conf) {
        /* the coverage law of the segment's own row (Beta(k, n + 1 - k),
         * conformal.h): its mean, and what it reaches with the chosen
         * confidence, with the row's n and k: the rows of its calibration
         * cell (a pooled cell's, or method qr's calibration part).  A
         * segment served by a coarser row shows none: that row's line has
         * the figures of the bound it uses. */
        long r = serving_row(f, s, ti);
        int own = r >= 0 && q->rows[r].seg == s;
        size_t kk = own ? q->rows[r].k : 0, nn = own ? q->rows[r].n : 0;
        (void)g;
        int fin = own && kk >= 1 && kk <= nn && isfinite(v);
        snprintf(buf[c], sizeof buf[c], fin ? "%.4f" : "-", fin ? etacal_coverage_mean(nn, kk) : 0.0);
        cells[c] = buf[c];
        c++;
        snprintf(buf[c], sizeof buf[c], fin ? "%.4f" : "-",
                 fin ? floor(etacal_coverage_low(nn, kk, q->confidence) * 1e4) / 1e4 : 0.0);
        cells[c] = buf[c];
        c++;
    }
    return c;
}

/* The "row" cell of the global segment. */
static void global_row_cell(const fsum *f, char *out, size_t n)
{
    const etacal_quotes *q = f->q;
    size_t nt = q->ntargets, rn = pooled_n(f, 0, 0);
    int same_n = 1, all = global_all(f, 0);
    for (size_t ti = 0; ti < nt; ti++)
        same_n &= pooled_n(f, 0, ti) == rn && global_all(f, ti) == all;
    if (q->nkeys == 0)
        snprintf(out, n, "global");
    else if (!same_n)
        snprintf(out, n, "global (rows by target below)");
    else if (all)
        snprintf(out, n, "global: all %zu rows", rn);
    else
        snprintf(out, n, "global: pooled, %zu row%s", rn, rn == 1 ? "" : "s");
}

/* The "row" cell of a coarser segment: its pooled cell, per target where
 * the targets differ. */
static void coarse_row_cell(const fsum *f, size_t s, char *out, size_t n)
{
    const etacal_quotes *q = f->q;
    size_t w = 0, nt = q->ntargets;
    out[0] = '\0';
    for (size_t ti = 0; ti < nt; ti++) {
        char what[80], p[ETACAL_NUM_BUFSZ];
        int sti = q->segs[s].status[ti];
        char who[40];
        segment_label(who, sizeof who, q, serving_seg(f, s, ti));
        if (sti == ETACAL_OWN_ROW)
            snprintf(what, sizeof what, "pooled, %zu row%s", pooled_n(f, s, ti), pooled_n(f, s, ti) == 1 ? "" : "s");
        else if (sti == ETACAL_FALLBACK_EMPTY)
            snprintf(what, sizeof what, "empty (unseen values: %s)", who);
        else
            snprintf(what, sizeof what, "%zu row%s, pooled in %s", q->segs[s].pool_n[ti],
                     q->segs[s].pool_n[ti] == 1 ? "" : "s", who);
        int alike = 1;
        for (size_t t2 = 0; t2 < nt; t2++)
            alike &= q->segs[s].status[t2] == sti && pooled_n(f, s, t2) == pooled_n(f, s, ti);
        if (alike) {
            snprintf(out, n, "%s", what);
            return;
        }
        etacal_percent_label(q->targets[ti], p);
        w += (size_t)snprintf(out + w, n - w, "%s%s%%: %s", ti ? "; " : "", p, what);
        if (w >= n)
            return;
    }
}

/* The "row" cell of a full key combination without a row of its own for
 * some target: the row it is pooled in, and why. */
static void pooled_row_cell(const fsum *f, size_t s, char *out, size_t n)
{
    const etacal_quotes *q = f->q;
    const etacal_segment *g = &q->segs[s];
    size_t first = SIZE_MAX;
    int same = 1, few = 0;
    char rankmsg[48] = "";
    for (size_t ti = 0; ti < q->ntargets; ti++) {
        few |= g->status[ti] == ETACAL_FALLBACK_FEW_ROWS;
        if (g->status[ti] == ETACAL_FALLBACK_RANK) {
            char p[ETACAL_NUM_BUFSZ];
            etacal_percent_label(q->targets[ti], p);
            size_t l = strlen(rankmsg);
            snprintf(rankmsg + l, sizeof rankmsg - l, "%s%s%%", l ? "," : "", p);
        }
        if (g->status[ti] == ETACAL_OWN_ROW)
            continue;
        size_t up = serving_seg(f, s, ti);
        if (first == SIZE_MAX)
            first = up;
        same &= up == first;
    }
    char who[64];
    segment_label(who, sizeof who, q, first);
    char cell[160]; /* cut to n bytes as the table's cells are */
    if (few)
        snprintf(cell, sizeof cell, "pooled in %s (n < %zu)", who, f->min_rows);
    else if (same)
        snprintf(cell, sizeof cell, "pooled in %s at %s (k > n)", who, rankmsg);
    else
        snprintf(cell, sizeof cell, "pooled in a coarser level at %s (k > n)", rankmsg);
    size_t l = strlen(cell);
    if (l >= n)
        l = n - 1;
    memcpy(out, cell, l);
    out[l] = '\0';
}

/* The "row" cell: the row an order of segment s gets, and what it is. */
static void row_cell(const fsum *f, size_t s, char *out, size_t n)
{
    const etacal_quotes *q = f->q;
    int own = 1;
    for (size_t ti = 0; ti < q->ntargets; ti++)
        own &= q->segs[s].status[ti] == ETACAL_OWN_ROW;
    if (s == 0)
        global_row_cell(f, out, n);
    else if (q->segs[s].level < q->nkeys)
        coarse_row_cell(f, s, out, n);
    else if (own)
        snprintf(out, n, "own");
    else
        pooled_row_cell(f, s, out, n);
}

/* The per-segment table and the lines below it: 0, or -1 when out of memory. */
static int print_segments(const fsum *f)
{
    const etacal_quotes *q = f->q;
    FILE *fp = f->fp;
    size_t nk = q->nkeys, nt = q->ntargets;
    int add = q->method != ETACAL_METHOD_RATIO, conf = q->confidence > 0;
    size_t ncols = (nk ? nk : 1) + 2 + nt * ((add ? 2 : 1) + (conf ? 2 : 0)) + 1;
    int rc = -1;
    ttab tt;
    if (ttab_init(&tt, ncols) != 0)
        return -1;
    const char **cells = calloc(ncols, sizeof *cells);
    char (*buf)[96] = calloc(ncols, sizeof *buf);
    if (!cells || !buf)
        goto out;
    size_t c = header_cells(q, cells, buf);
    for (size_t j = nk ? nk : 1; j < c - 1; j++)
        tt.right[j] = 1;
    ttab_add(&tt, cells);
    for (size_t s = 0; s < q->nsegs; s++) {
        const etacal_segment *g = &q->segs[s];
        c = 0;
        for (size_t j = 0; j < nk; j++)
            cells[c++] = g->keys[j];
        if (nk == 0)
            cells[c++] = "*";
        snprintf(buf[c], sizeof buf[c], "%zu", g->n);
        cells[c] = buf[c];
        c++;
        fmt_pct(buf[c], sizeof buf[c], g->bare_hits, g->n);
        cells[c] = buf[c];
        c++;
        for (size_t ti = 0; ti < nt; ti++)
            c = target_cells(f, s, ti, cells, buf, c);
        row_cell(f, s, buf[c], sizeof buf[c]);
        cells[c] = buf[c];
        ttab_add(&tt, cells);
    }
    if (ttab_print(&tt, fp) != 0)
        goto out;
    size_t fell = 0;
    for (size_t s = 1; s < q->nsegs; s++)
        for (size_t ti = 0; ti < nt; ti++)
            if (q->segs[s].status[ti] != ETACAL_OWN_ROW) {
                fell++;
                break;
            }
    if (nk)
        fprintf(fp, "\n%zu segment%s: %zu with rows of their own for every target, %zu using a coarser level for some; table rows: %zu\n",
                q->nsegs - 1, q->nsegs == 2 ? "" : "s", q->nsegs - 1 - fell, fell, q->nrows);
    if (nk && print_pooled(f) != 0)
        goto out;
    rc = 0;
out:
    free(cells);
    free(buf);
    ttab_free(&tt);
    return rc;
}

/* "54.10% (20/37) 0.3863-0.6874": the rate with its Wilson 95% interval. */
static void rate_cell(char *buf, size_t n, size_t hits, size_t total)
{
    double lo, hi;
    etacal_error e;
    if (total == 0 || etacal_binom_wilson(hits, total, 0.95, &lo, &hi, &e) != ETACAL_OK)
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, "%.2f%% (%zu/%zu) %.4f-%.4f", 100.0 * (double)hits / (double)total, hits, total, lo, hi);
}

/* The held-out table: 0, or -1 when out of memory. */
static int print_holdout(const fsum *f, const etacal_holdout *h, size_t held, size_t n, double share,
                         const char *timecol)
{
    const etacal_quotes *q = f->q;
    FILE *fp = f->fp;
    char sh[ETACAL_NUM_BUFSZ];
    etacal_percent_label(share, sh);
    fprintf(fp, "\nholdout: %zu of %zu rows held out (%s %s%%%s%s), the table fitted on the other %zu\n", held, n,
            timecol ? "the latest" : "a random", sh, timecol ? " by " : "", timecol ? timecol : "", n - held);
    fprintf(fp, "on time on the held-out rows, with Wilson 95%% intervals:\n");
    size_t nk = q->nkeys ? q->nkeys : 1, nt = q->ntargets;
    size_t ncols = nk + 1 + nt + 1;
    int rc = -1;
    ttab tt;
    if (ttab_init(&tt, ncols) != 0)
        return -1;
    const char **cells = calloc(ncols, sizeof *cells);
    char (*buf)[96] = calloc(nt + 2, sizeof *buf);
    if (!cells || !buf)
        goto out;
    size_t c = 0;
    for (size_t j = 0; j < q->nkeys; j++)
        cells[c++] = q->key_names[j];
    if (!q->nkeys)
        cells[c++] = "segment";
    cells[c++] = "n";
    for (size_t ti = 0; ti < nt; ti++) {
        char p[ETACAL_NUM_BUFSZ];
        etacal_percent_label(q->targets[ti], p);
        snprintf(buf[ti], sizeof buf[ti], "promise@%s%%", p);
        cells[c++] = buf[ti];
    }
    cells[c++] = "bare prediction";
    ttab_add(&tt, cells);
    tt.right[nk] = 1;
    for (size_t g = 0; g < h->nsegs; g++) {
        if (g && (q->segs[g].level != q->nkeys || h->n[g] == 0))
            continue; /* the most specific segments, and the overall figure */
        c = 0;
        for (size_t j = 0; j < q->nkeys; j++)
            cells[c++] = q->segs[g].keys[j];
        if (!q->nkeys)
            cells[c++] = "*";
        snprintf(buf[nt + 1], sizeof buf[nt + 1], "%zu", h->n[g]);
        cells[c++] = buf[nt + 1];
        for (size_t ti = 0; ti < nt; ti++) {
            rate_cell(buf[ti], sizeof buf[ti], h->hits[g * nt + ti], h->n[g]);
            cells[c++] = buf[ti];
        }
        rate_cell(buf[nt], sizeof buf[nt], h->bare[g], h->n[g]);
        cells[c++] = buf[nt];
        ttab_add(&tt, cells);
    }
    rc = ttab_print(&tt, fp);
out:
    free(cells);
    free(buf);
    ttab_free(&tt);
    return rc;
}

static int write_summary(const etacal_fit_run *run, const etacal_fitspec *s, const char *path, FILE *fp,
                         etacal_error *err)
{
    const etacal_quotes *q = etacal_fit_run_quotes(run);
    const etacal_table *t = etacal_fit_run_rows(run);
    etacal_quote_index *ix = NULL;
    int rc = etacal_quote_index_create(q, &ix, err);
    if (rc)
        return rc;
    fsum f = {fp, q, ix, s->min_rows ? s->min_rows : 200};
    print_heading(&f, path, s->pred ? s->pred : "", t);
    int bad = print_segments(&f) != 0;
    const etacal_holdout *h = etacal_fit_run_holdout(run);
    if (!bad && h && etacal_fit_run_held_mask(run))
        bad = print_holdout(&f, h, etacal_fit_run_held(run), etacal_table_rows(t), s->holdout, s->time) != 0;
    etacal_quote_index_destroy(ix);
    if (bad)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return ETACAL_OK;
}

int etacal_fit_write_summary(const etacal_fit_run *run, const etacal_fitspec *s, const char *path,
                             const etacal_sink *out, etacal_error *err)
{
    if (!run || !s || !path)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no fit run to summarise");
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    return sink_fclose(fp, write_summary(run, s, path, fp, err), err);
}
