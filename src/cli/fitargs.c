/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fitargs.c: the options of `etacal fit` (shared with `etacal publish`),
 * the fit run, and the summary printed after it. */
#include "fitargs.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_KEYS FIT_MAX_KEYS

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

/* Whether the global row at target ti is calibrated on all rows, and the
 * rows of the cell behind segment g's row at target ti (its pooled cell;
 * for the global row without one, all rows; method qr: fitting and
 * calibration parts together). */
static int global_all(const etacal_quotes *q, size_t ti)
{
    for (size_t r = 0; r < q->nrows; r++)
        if (q->rows[r].seg == 0 && q->rows[r].target == ti)
            return q->rows[r].cell == ETACAL_CELL_ALL;
    return 0;
}

static size_t pooled_n(const etacal_quotes *q, size_t g, size_t ti)
{
    return g == 0 && global_all(q, ti) ? q->segs[0].n : q->segs[g].pool_n[ti];
}

/* Which segments were pooled into which row, and with how many rows: per
 * target, every row of a pooled cell (a coarser segment's row, or the
 * global one) with the full key combinations whose rows it holds.
 * Returns 0, or -1 when out of memory. */
static int print_pooled(FILE *fp, const etacal_quotes *q)
{
    size_t ns = q->nsegs, nt = q->ntargets;
    size_t *members = calloc(ns, sizeof *members);
    if (!members)
        return -1;
    int header = 0;
    for (size_t ti = 0; ti < nt; ti++) {
        memset(members, 0, ns * sizeof *members);
        for (size_t g = 1; g < ns; g++) {
            if (q->segs[g].level != q->nkeys || q->segs[g].status[ti] == ETACAL_OWN_ROW)
                continue;
            size_t up = g;
            while (up != 0 && q->segs[up].status[ti] != ETACAL_OWN_ROW)
                up = q->segs[up].parent;
            members[up]++;
        }
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
            if (g == 0 && global_all(q, ti))
                fprintf(fp, "  %s at %s%%: all %zu rows; %zu row%s left over from %zu segment%s, too few for a "
                            "pooled cell: no guarantee for %s\n",
                        who, p, pooled_n(q, 0, ti), q->segs[0].pool_n[ti], q->segs[0].pool_n[ti] == 1 ? "" : "s", m,
                        m == 1 ? "" : "s", m == 1 ? "it" : "them");
            else
                fprintf(fp, "  %s at %s%%: %zu row%s from %zu segment%s\n", who, p, pooled_n(q, g, ti),
                        pooled_n(q, g, ti) == 1 ? "" : "s", m,
                        m == 1 ? "" : "s");
        }
    }
    free(members);
    return 0;
}

/* Returns 0, or -1 when out of memory (the summary is then incomplete). */
static int print_summary(FILE *fp, const char *path, const char *pred, const etacal_table *t,
                         const etacal_quotes *q, size_t min_rows)
{
    int rc = -1;
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

    size_t nk = q->nkeys, nt = q->ntargets;
    int add = q->method != ETACAL_METHOD_RATIO;
    int conf = q->confidence > 0;
    size_t ncols = (nk ? nk : 1) + 2 + nt * ((add ? 2 : 1) + (conf ? 2 : 0)) + 1;
    text_table tt;
    if (tt_init(&tt, ncols) != 0)
        return -1;
    const char **cells = calloc(ncols, sizeof *cells);
    char (*buf)[96] = calloc(ncols, sizeof *buf);
    if (!cells || !buf)
        goto out;
    size_t c = 0;
    for (size_t j = 0; j < nk; j++)
        cells[c++] = q->key_names[j];
    if (nk == 0)
        cells[c++] = "segment";
    cells[c++] = "n";
    cells[c++] = "bare on-time";
    for (size_t ti = 0; ti < nt; ti++) {
        char p[ETACAL_NUM_BUFSZ];
        etacal_percent_label(q->targets[ti], p);
        snprintf(buf[c], sizeof buf[c],
                 q->method == ETACAL_METHOD_QR ? "corr@%s%% s" : add ? "buffer@%s%% s" : "factor@%s%%", p);
        cells[c] = buf[c];
        c++;
        if (add) {
            snprintf(buf[c], sizeof buf[c], "min");
            cells[c] = buf[c];
            c++;
        }
        if (conf) {
            char cp[ETACAL_NUM_BUFSZ];
            etacal_percent_label(q->confidence, cp);
            snprintf(buf[c], sizeof buf[c], "E cover");
            cells[c] = buf[c];
            c++;
            snprintf(buf[c], sizeof buf[c], "cover@%s%%", cp);
            cells[c] = buf[c];
            c++;
        }
    }
    cells[c++] = "row";
    for (size_t j = nk ? nk : 1; j < c - 1; j++)
        tt.right[j] = 1;
    tt_add(&tt, cells);
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
        int few = 0;
        char rankmsg[48] = "";
        for (size_t ti = 0; ti < nt; ti++) {
            double v = g->score_q[ti];
            few |= g->status[ti] == ETACAL_FALLBACK_FEW_ROWS;
            if (g->status[ti] == ETACAL_FALLBACK_RANK) {
                char p[ETACAL_NUM_BUFSZ];
                etacal_percent_label(q->targets[ti], p);
                size_t l = strlen(rankmsg);
                snprintf(rankmsg + l, sizeof rankmsg - l, "%s%s%%", l ? "," : "", p);
            }
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
                /* the coverage law of the bound: its mean, and what it
                 * reaches with the chosen confidence */
                size_t kk = g->k[ti], nn = g->n;
                if (q->method == ETACAL_METHOD_QR)
                    for (size_t r = 0; r < q->nrows; r++)
                        if (q->rows[r].seg == s && q->rows[r].target == ti)
                            nn = q->rows[r].n;
                int fin = kk >= 1 && kk <= nn && isfinite(v);
                snprintf(buf[c], sizeof buf[c], fin ? "%.4f" : "-", fin ? etacal_coverage_mean(nn, kk) : 0.0);
                cells[c] = buf[c];
                c++;
                snprintf(buf[c], sizeof buf[c], fin ? "%.4f" : "-",
                         fin ? floor(etacal_coverage_low(nn, kk, q->confidence) * 1e4) / 1e4 : 0.0);
                cells[c] = buf[c];
                c++;
            }
        }
        /* the row an order of this segment gets, and what it is */
        size_t rn = pooled_n(q, s, 0);
        int same_n = 1, empty = 0;
        for (size_t ti = 0; ti < nt; ti++) {
            same_n &= pooled_n(q, s, ti) == rn;
            empty |= g->status[ti] == ETACAL_FALLBACK_EMPTY;
        }
        if (s == 0) {
            int all = global_all(q, 0);
            for (size_t ti = 1; ti < nt; ti++)
                same_n &= global_all(q, ti) == all;
            if (nk == 0)
                snprintf(buf[c], sizeof buf[c], "global");
            else if (!same_n)
                snprintf(buf[c], sizeof buf[c], "global (rows by target below)");
            else if (all)
                snprintf(buf[c], sizeof buf[c], "global: all %zu rows", rn);
            else
                snprintf(buf[c], sizeof buf[c], "global: pooled, %zu row%s", rn, rn == 1 ? "" : "s");
        } else if (!few && !rankmsg[0] && !empty && g->level == nk) {
            snprintf(buf[c], sizeof buf[c], "own");
        } else if (g->level < nk) {
            /* a coarser segment: its pooled cell per target, said once when
             * every target says the same */
            size_t w = 0;
            buf[c][0] = '\0';
            for (size_t ti = 0; ti < nt && w < sizeof buf[c]; ti++) {
                char what[80], p[ETACAL_NUM_BUFSZ];
                int sti = g->status[ti];
                size_t up = s;
                while (up != 0 && q->segs[up].status[ti] != ETACAL_OWN_ROW)
                    up = q->segs[up].parent;
                char who[40];
                segment_label(who, sizeof who, q, up);
                if (sti == ETACAL_OWN_ROW)
                    snprintf(what, sizeof what, "pooled, %zu row%s", pooled_n(q, s, ti), pooled_n(q, s, ti) == 1 ? "" : "s");
                else if (sti == ETACAL_FALLBACK_EMPTY)
                    snprintf(what, sizeof what, "empty (unseen values: %s)", who);
                else
                    snprintf(what, sizeof what, "%zu row%s, pooled in %s", g->pool_n[ti], g->pool_n[ti] == 1 ? "" : "s",
                             who);
                int alike = 1;
                for (size_t t2 = 0; t2 < nt; t2++)
                    alike &= q->segs[s].status[t2] == sti && pooled_n(q, s, t2) == pooled_n(q, s, ti);
                if (alike) {
                    snprintf(buf[c], sizeof buf[c], "%s", what);
                    break;
                }
                etacal_percent_label(q->targets[ti], p);
                w += (size_t)snprintf(buf[c] + w, sizeof buf[c] - w, "%s%s%%: %s", ti ? "; " : "", p, what);
            }
        } else {
            /* the nearest level above with a row, per target */
            size_t first = SIZE_MAX;
            int same = 1;
            for (size_t ti = 0; ti < nt; ti++) {
                if (g->status[ti] == ETACAL_OWN_ROW)
                    continue;
                size_t up = s;
                while (up != 0 && q->segs[up].status[ti] != ETACAL_OWN_ROW)
                    up = q->segs[up].parent;
                if (first == SIZE_MAX)
                    first = up;
                same &= up == first;
            }
            char who[64];
            segment_label(who, sizeof who, q, first);
            if (few)
                snprintf(buf[c], sizeof buf[c], "pooled in %s (n < %zu)", who, min_rows);
            else if (same)
                snprintf(buf[c], sizeof buf[c], "pooled in %s at %s (k > n)", who, rankmsg);
            else
                snprintf(buf[c], sizeof buf[c], "pooled in a coarser level at %s (k > n)", rankmsg);
        }
        cells[c] = buf[c];
        c++;
        tt_add(&tt, cells);
    }
    if (tt_print(&tt, fp) != 0)
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
    if (nk && print_pooled(fp, q) != 0)
        goto out;
    rc = 0;
out:
    free(cells);
    free(buf);
    tt_free(&tt);
    return rc;
}

static void rate_cell(char *buf, size_t n, size_t hits, size_t total)
{
    double lo, hi;
    etacal_error e;
    if (total == 0 || etacal_binom_wilson(hits, total, 0.95, &lo, &hi, &e) != ETACAL_OK)
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, "%.2f%% (%zu/%zu) %.4f-%.4f", 100.0 * (double)hits / (double)total, hits, total, lo, hi);
}

static int print_holdout(FILE *fp, const etacal_quotes *q, const etacal_holdout *h, size_t held, size_t n,
                         double share, const char *timecol)
{
    char sh[ETACAL_NUM_BUFSZ];
    etacal_percent_label(share, sh);
    fprintf(fp, "\nholdout: %zu of %zu rows held out (%s %s%%%s%s), the table fitted on the other %zu\n", held, n,
            timecol ? "the latest" : "a random", sh, timecol ? " by " : "", timecol ? timecol : "", n - held);
    fprintf(fp, "on time on the held-out rows, with Wilson 95%% intervals:\n");
    size_t nk = q->nkeys ? q->nkeys : 1, nt = q->ntargets;
    size_t ncols = nk + 1 + nt + 1;
    text_table tt;
    if (tt_init(&tt, ncols) != 0)
        return -1;
    const char *cells[MAX_KEYS + ETACAL_APPLY_MAX_TARGETS + 3];
    char buf[ETACAL_APPLY_MAX_TARGETS + 2][96];
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
    tt_add(&tt, cells);
    tt.right[nk] = 1;
    for (size_t g = 0; g < h->nsegs; g++) {
        if (g && (q->segs[g].level != q->nkeys || h->n[g] == 0))
            continue; /* the most specific segments, and the overall figure */
        c = 0;
        for (size_t j = 0; j < q->nkeys; j++)
            cells[c++] = q->segs[g].keys[j];
        if (!q->nkeys)
            cells[c++] = "*";
        char nb[32];
        snprintf(nb, sizeof nb, "%zu", h->n[g]);
        cells[c++] = nb;
        for (size_t ti = 0; ti < nt; ti++) {
            rate_cell(buf[ti], sizeof buf[ti], h->hits[g * nt + ti], h->n[g]);
            cells[c++] = buf[ti];
        }
        rate_cell(buf[nt], sizeof buf[nt], h->bare[g], h->n[g]);
        cells[c++] = buf[nt];
        tt_add(&tt, cells);
    }
    int rc = tt_print(&tt, fp);
    tt_free(&tt);
    return rc;
}

int fit_print_summary(FILE *fp, const char *path, const fit_args *a, const fit_result *r)
{
    return print_summary(fp, path, a->pred, r->t, r->q, a->min_rows);
}

int fit_print_holdout(FILE *fp, const fit_args *a, const fit_result *r)
{
    if (r->mask)
        return print_holdout(fp, r->q, r->ho, r->held, etacal_table_rows(r->t), a->holdout, a->timecol);
    return 0;
}

void fit_args_init(fit_args *a)
{
    memset(a, 0, sizeof *a);
    a->min_rows = 200;
    a->seed = 1;
    a->split = 0.5;
    a->method = ETACAL_METHOD_ADD;
    a->ro = (etacal_read_opts){
        .delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01, .threads = ETACAL_THREADS_AUTO};
}

int fit_option(int c, const char *cmd, fit_args *a)
{
    switch (c) {
    case FO_ACTUAL: a->actual = optarg; return 0;
    case FO_PRED: a->pred = optarg; return 0;
    case FO_BY:
        a->nkeys = 0;
        if (parse_names(optarg, a->keys, &a->nkeys, MAX_KEYS) != 0)
            return usage_error(cmd, "--by takes up to %d comma-separated column names", MAX_KEYS);
        return 0;
    case FO_TARGET:
        if (parse_targets(optarg, a->targets, &a->ntargets, FIT_MAX_TARGETS) != 0)
            return usage_error(cmd, "--target takes on-time rates in (0,1), such as 0.9,0.95 (at most %d)",
                               FIT_MAX_TARGETS);
        return 0;
    case FO_METHOD:
        a->method = etacal_method_parse(optarg);
        if (a->method < 0)
            return usage_error(cmd, "--method must be add, ratio or qr, not '%s'", optarg);
        return 0;
    case FO_MINROWS:
        if (parse_size(optarg, &a->min_rows) != 0 || a->min_rows == 0)
            return usage_error(cmd, "--min-rows takes a whole number >= 1");
        return 0;
    case FO_X:
        a->nx = 0;
        if (parse_names(optarg, a->xs, &a->nx, ETACAL_QR_MAX_COVARIATES - 1) != 0)
            return usage_error(cmd, "--x takes up to %d comma-separated column names",
                               ETACAL_QR_MAX_COVARIATES - 1);
        return 0;
    case FO_SPLIT:
        if (parse_share(optarg, &a->split) != 0 || !(a->split > 0 && a->split < 1))
            return usage_error(cmd, "--split takes a share in (0,1)");
        return 0;
    case FO_SEED:
        if (parse_size(optarg, &a->seed) != 0)
            return usage_error(cmd, "--seed takes a whole number");
        return 0;
    case FO_HOLDOUT:
        if (parse_share(optarg, &a->holdout) != 0 || !(a->holdout > 0 && a->holdout < 1))
            return usage_error(cmd, "--holdout takes a share in (0,1), such as 0.2");
        return 0;
    case FO_TIME: a->timecol = optarg; return 0;
    case FO_HALFLIFE:
        if (parse_duration(optarg, &a->halflife) != 0 || !(a->halflife > 0))
            return usage_error(cmd, "--half-life takes a duration such as 7d, 36h, 90m or 3600 (seconds)");
        return 0;
    case FO_CONF:
        if (parse_share(optarg, &a->confidence) != 0 || !(a->confidence > 0 && a->confidence < 1))
            return usage_error(cmd, "--confidence takes a probability in (0,1), such as 0.95");
        return 0;
    default:
        return -1;
    }
}

void fit_spec(const fit_args *a, etacal_fitspec *s)
{
    etacal_fitspec_init(s);
    s->actual = a->actual;
    s->pred = a->pred;
    s->keys = (const char *const *)a->keys;
    s->nkeys = a->nkeys;
    s->xs = (const char *const *)a->xs;
    s->nx = a->nx;
    s->targets = a->targets;
    s->ntargets = a->ntargets;
    s->method = a->method;
    s->min_rows = a->min_rows;
    s->split = a->split;
    s->seed = (unsigned long)a->seed;
    s->confidence = a->confidence;
    s->holdout = a->holdout;
    s->time = a->timecol;
    s->half_life = a->halflife;
    s->threads = a->ro.threads;
}

int fit_args_check(fit_args *a, const char *cmd)
{
    etacal_fitspec s;
    etacal_error err;
    fit_spec(a, &s);
    if (etacal_fitspec_check(&s, &err) != 0)
        return usage_error(cmd, "%s", err.msg);
    if (a->ntargets == 0)
        a->targets[a->ntargets++] = 0.9;
    return 0;
}

int fit_run(const fit_args *a, const char *path, fit_result *r, etacal_error *err)
{
    etacal_fitspec s;
    fit_spec(a, &s);
    progress pg = {path, 0, -1};
    etacal_read_opts ro = a->ro;
    ro.progress = progress_cb;
    ro.progress_ud = &pg;
    int rc = etacal_fit_csv(&s, path, &ro, &r->run, err);
    progress_end(&pg);
    if (rc)
        return rc;
    r->t = etacal_fit_run_rows(r->run);
    r->q = etacal_fit_run_quotes(r->run);
    r->key_cols = etacal_fit_run_key_cols(r->run);
    r->x_cols = etacal_fit_run_x_cols(r->run);
    r->time_col = etacal_fit_run_time_col(r->run);
    r->mask = etacal_fit_run_held_mask(r->run);
    r->held = etacal_fit_run_held(r->run);
    r->ho = etacal_fit_run_holdout(r->run);
    return ETACAL_OK;
}

void fit_result_free(fit_result *r)
{
    etacal_fit_run_destroy(r->run);
    memset(r, 0, sizeof *r);
}
