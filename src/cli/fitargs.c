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
                                               : "promise = offset_s + slope x prediction + coefficients x covariates; "
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
        return print_holdout(fp, r->q, &r->ho, r->held, etacal_table_rows(r->t), a->holdout, a->timecol);
    return 0;
}

void fit_args_init(fit_args *a)
{
    memset(a, 0, sizeof *a);
    a->min_rows = 200;
    a->seed = 1;
    a->split = 0.5;
    a->method = ETACAL_METHOD_ADD;
    a->ro = (etacal_read_opts){.delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01};
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

int fit_args_check(fit_args *a, const char *cmd)
{
    if (!a->actual || !a->pred)
        return usage_error(cmd, "--actual and --pred are required");
    if (strcmp(a->actual, a->pred) == 0)
        return usage_error(cmd, "--actual and --pred name the same column");
    static const char *reserved[] = {"target", "method", "n", "k", "offset_s", "slope"};
    for (size_t j = 0; j < a->nkeys; j++)
        if (strncmp(a->keys[j], "coef_", 5) == 0)
            return usage_error(cmd, "a key column cannot be called '%s' (coef_ columns hold coefficients)",
                               a->keys[j]);
    for (size_t j = 0; j < a->nkeys; j++) {
        if (strcmp(a->keys[j], a->actual) == 0 || strcmp(a->keys[j], a->pred) == 0)
            return usage_error(cmd, "'%s' cannot be both a key and a duration column", a->keys[j]);
        for (size_t i = 0; i < sizeof reserved / sizeof *reserved; i++)
            if (strcmp(a->keys[j], reserved[i]) == 0)
                return usage_error(cmd, "a key column cannot be called '%s' (a quote-table column)", a->keys[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(a->keys[i], a->keys[j]) == 0)
                return usage_error(cmd, "--by names '%s' twice", a->keys[j]);
    }
    if (a->nx && a->method != ETACAL_METHOD_QR)
        return usage_error(cmd, "--x goes with --method qr");
    for (size_t j = 0; j < a->nx; j++) {
        if (strcmp(a->xs[j], a->actual) == 0 || strcmp(a->xs[j], a->pred) == 0)
            return usage_error(cmd, "--x '%s' is already the actual or the prediction", a->xs[j]);
        for (size_t i = 0; i < a->nkeys; i++)
            if (strcmp(a->xs[j], a->keys[i]) == 0)
                return usage_error(cmd, "'%s' cannot be both a key and a covariate", a->xs[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(a->xs[i], a->xs[j]) == 0)
                return usage_error(cmd, "--x names '%s' twice", a->xs[j]);
    }
    if (a->ntargets == 0)
        a->targets[a->ntargets++] = 0.9;
    if (a->timecol && !a->holdout && !a->halflife)
        return usage_error(cmd, "--time goes with --holdout or --half-life");
    if (a->halflife && !a->timecol)
        return usage_error(cmd, "--half-life needs --time (the age of each row)");
    if (a->halflife && a->confidence > 0)
        return usage_error(cmd, "--half-life does not go with --confidence");
    if (a->timecol) {
        if (strcmp(a->timecol, a->actual) == 0 || strcmp(a->timecol, a->pred) == 0)
            return usage_error(cmd, "--time '%s' is already the actual or the prediction", a->timecol);
        for (size_t i = 0; i < a->nkeys; i++)
            if (strcmp(a->timecol, a->keys[i]) == 0)
                return usage_error(cmd, "'%s' cannot be both a key and the time", a->timecol);
        for (size_t i = 0; i < a->nx; i++)
            if (strcmp(a->timecol, a->xs[i]) == 0)
                return usage_error(cmd, "'%s' cannot be both a covariate and the time", a->timecol);
    }
    return 0;
}

size_t fit_columns(const fit_args *a, etacal_colspec *cols, size_t *key_cols, size_t *x_cols, long *time_col)
{
    unsigned flags = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_NONNEG;
    cols[0] = (etacal_colspec){a->actual, ETACAL_COL_NUM, flags, "duration"};
    cols[1] = (etacal_colspec){a->pred, ETACAL_COL_NUM,
                               flags | (a->method == ETACAL_METHOD_RATIO ? ETACAL_NUM_POSITIVE : 0u),
                               "prediction"};
    size_t ncol = 2;
    for (size_t j = 0; j < a->nkeys; j++) {
        cols[ncol] = (etacal_colspec){a->keys[j], ETACAL_COL_KEY, 0, NULL};
        key_cols[j] = ncol++;
    }
    for (size_t j = 0; j < a->nx; j++) {
        cols[ncol] = (etacal_colspec){a->xs[j], ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE,
                                      "covariate"};
        x_cols[j] = ncol++;
    }
    *time_col = -1;
    if (a->timecol) {
        cols[ncol] = (etacal_colspec){a->timecol, ETACAL_COL_NUM,
                                      ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_TIME, "timestamp"};
        *time_col = (long)ncol++;
    }
    return ncol;
}

int holdout_rows(const etacal_table *t, long time_col, double share, size_t seed, const char *path,
                 unsigned char **mask, size_t *held, etacal_error *err)
{
    size_t n = etacal_table_rows(t);
    *mask = malloc(n ? n : 1);
    if (!*mask)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    *held = etacal_holdout_mask(t, time_col, share, (unsigned long)seed, *mask);
    if (*held == ETACAL_HOLDOUT_NOMEM)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    if (*held == 0 || *held == n)
        return etacal_error_set(err, ETACAL_ENUM, path, "--holdout %g leaves %s rows to %s", share,
                                *held == 0 ? "no" : "all", *held == 0 ? "hold out" : "fit on");
    return ETACAL_OK;
}

int fit_run(const fit_args *a, const char *path, fit_result *r, etacal_error *err)
{
    etacal_colspec cols[FIT_MAX_COLS];
    size_t ncol = fit_columns(a, cols, r->key_cols, r->x_cols, &r->time_col);
    progress pg = {path, 0, -1};
    etacal_read_opts ro = a->ro;
    ro.progress = progress_cb;
    ro.progress_ud = &pg;
    int rc = etacal_table_read_csv(path, cols, ncol, &ro, &r->t, err);
    progress_end(&pg);
    if (rc)
        return rc;
    etacal_fit_opts fo = {a->method,     a->targets, a->ntargets, a->min_rows, r->x_cols, a->nx, a->split,
                          (unsigned long)a->seed, a->confidence, NULL, NULL};
    size_t n = etacal_table_rows(r->t);
    if (a->holdout > 0) {
        int hr = holdout_rows(r->t, r->time_col, a->holdout, a->seed, path, &r->mask, &r->held, err);
        if (hr)
            return hr;
        fo.mask = r->mask;
    }
    double *wts = NULL;
    if (a->halflife > 0) {
        wts = malloc((n ? n : 1) * sizeof *wts);
        if (!wts)
            return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        etacal_recency_weights(etacal_table_num(r->t, (size_t)r->time_col), n, r->mask, a->halflife, wts);
        fo.weights = wts;
    }
    rc = etacal_quotes_fit(r->t, 0, 1, r->key_cols, a->nkeys, &fo, &r->q, err);
    free(wts);
    if (rc)
        return rc;
    if (r->mask) {
        /* the mask fitted on the kept rows; flip it to score the held-out ones */
        for (size_t i = 0; i < n; i++)
            r->mask[i] = !r->mask[i];
        rc = etacal_quotes_holdout(r->q, r->t, 0, 1, r->key_cols, r->x_cols, r->mask, &r->ho, err);
        if (rc)
            return rc;
    }
    return ETACAL_OK;
}

void fit_result_free(fit_result *r)
{
    etacal_holdout_free(&r->ho);
    free(r->mask);
    etacal_quotes_destroy(r->q);
    etacal_table_destroy(r->t);
    memset(r, 0, sizeof *r);
}
