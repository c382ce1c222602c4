/* SPDX-License-Identifier: GPL-3.0-or-later */
/* out_publish.c: the change report of a publish run (publish.h,
 * etacal_publish_write_report): the rows read, the new table, the
 * comparison with the current one (the largest moves of the promise at the
 * reference order, the segments in one table only), the guards and the
 * outcome; as aligned text for people or as JSON. */
#include "base.h"
#include "quote_internal.h"
#include "textout.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* What the report shows: the specification and the run's result. */
typedef struct report_view {
    FILE *fp;
    const etacal_publishspec *s;
    const etacal_publish_result *res;
    const etacal_quotes *q, *cur;   /* the new table; the current one compared, or NULL */
    const etacal_quotes_diff *d;    /* the comparison, or NULL */
    const etacal_read_stats *rs;
    size_t used, show;
    const etacal_guard *g;
    size_t ng;
    double ref_pred;
    const double *ref_x;
} report_view;

static double move_of(const etacal_quote_move *m) { return m->new_promise - m->old_promise; }

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

static const char *outcome_name(int outcome)
{
    return outcome == ETACAL_PUBLISH_REFUSED ? "refused" : outcome == ETACAL_PUBLISH_DRY_RUN ? "dry run" : "published";
}

/* ---- JSON ---------------------------------------------------------------- */

static json_t *keys_json(const etacal_quotes *q, const char *const *keys, int *oom)
{
    json_t *o = jnew(json_object(), oom);
    for (size_t j = 0; o && j < q->nkeys; j++)
        if (utf8_valid(q->key_names[j], strlen(q->key_names[j]))) /* jansson takes no other member name */
            jset(o, q->key_names[j], jstr(keys[j], oom), oom);
    return o;
}

static json_t *jint(size_t v, int *oom) { return jnew(json_integer((json_int_t)v), oom); }

/* A real, left out (as jansson leaves out NaN) when not finite. */
static void jset_real(json_t *o, const char *k, double v, int *oom)
{
    if (isfinite(v))
        jset(o, k, jnew(json_real(v), oom), oom);
}

static json_t *json_heading(const report_view *v, int *oom)
{
    json_t *root = jnew(json_object(), oom);
    if (!root)
        return NULL;
    jset(root, "etacal", jstr(ETACAL_VERSION, oom), oom);
    jset(root, "table", jstr(v->s->table, oom), oom);
    jset(root, "input", jstr(v->s->input, oom), oom);
    jset(root, "outcome", jstr(outcome_name(etacal_publish_result_outcome(v->res)), oom), oom);
    json_t *rows = jnew(json_object(), oom);
    if (rows) {
        jset(rows, "read", jint(v->rs->data_rows, oom), oom);
        jset(rows, "used", jint(v->used, oom), oom);
        jset(rows, "missing", jint(v->rs->missing, oom), oom);
        jset(rows, "skipped_bad", jint(v->rs->bad, oom), oom);
    }
    jset(root, "rows", rows, oom);
    json_t *ref = jnew(json_object(), oom);
    if (ref) {
        jset_real(ref, "pred_s", v->ref_pred, oom);
        for (size_t j = 0; j < v->s->fit.nx; j++)
            if (utf8_valid(v->s->fit.xs[j], strlen(v->s->fit.xs[j])))
                jset_real(ref, v->s->fit.xs[j], v->ref_x[j], oom);
    }
    jset(root, "reference", ref, oom);
    json_t *segs = jnew(json_null(), oom);
    if (v->d) {
        json_decref(segs);
        segs = jnew(json_object(), oom);
        if (segs) {
            jset(segs, "added", jint(v->d->segs_added, oom), oom);
            jset(segs, "removed", jint(v->d->segs_removed, oom), oom);
            jset(segs, "changed", jint(v->d->segs_changed, oom), oom);
            jset(segs, "unchanged", jint(v->d->segs_same, oom), oom);
        }
    }
    jset(root, "segments", segs, oom);
    return root;
}

static json_t *json_move(const report_view *v, const etacal_quote_move *m, int *oom)
{
    json_t *o = jnew(json_object(), oom);
    if (!o)
        return NULL;
    /* the keys of the table the move's row comes from */
    jset(o, "keys", keys_json(m->in_new ? v->q : v->cur, m->keys, oom), oom);
    jset_real(o, "target", m->target, oom);
    jset(o, "in_current", jnew(json_boolean(m->in_old), oom), oom);
    jset(o, "in_new", jnew(json_boolean(m->in_new), oom), oom);
    jset(o, "current_s", jnum(m->old_promise, oom), oom);
    jset(o, "new_s", jnum(m->new_promise, oom), oom);
    jset(o, "move_s", jnum(move_of(m), oom), oom);
    return o;
}

static int write_json(const report_view *v, etacal_error *err)
{
    int oom = 0;
    json_t *root = json_heading(v, &oom);
    if (root) {
        json_t *mv = jnew(json_array(), &oom);
        for (size_t i = 0; mv && v->d && i < v->d->nmoves && !oom; i++)
            jpush(mv, json_move(v, &v->d->moves[i], &oom), &oom);
        jset(root, "moves", mv, &oom);
        json_t *gr = jnew(json_array(), &oom);
        for (size_t i = 0; gr && i < v->ng && !oom; i++) {
            json_t *o = jnew(json_object(), &oom);
            if (!o)
                break;
            jset(o, "guard", jstr(v->g[i].name, &oom), &oom);
            jset(o, "result", jstr(etacal_guard_status_name(v->g[i].status), &oom), &oom);
            jset(o, "detail", jstr(v->g[i].message, &oom), &oom);
            jpush(gr, o, &oom);
        }
        jset(root, "guards", gr, &oom);
    }
    int rc = jwrite(root, oom, v->fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10), err);
    json_decref(root);
    return rc;
}

/* ---- text ---------------------------------------------------------------- */

/* "new table: method add, 21 rows, targets 0.8, 0.9" */
static void table_line(FILE *fp, const char *what, const etacal_quotes *q)
{
    fprintf(fp, "%s: method %s, %zu row%s, target%s", what, etacal_method_name(q->method), q->nrows,
            q->nrows == 1 ? "" : "s", q->ntargets == 1 ? "" : "s");
    for (size_t t = 0; t < q->ntargets; t++)
        fprintf(fp, "%s%g", t ? ", " : " ", q->targets[t]);
    putc('\n', fp);
}

/* The largest moves at the reference order, at most show of them: 0, or
 * -1 when out of memory. */
static int text_moves(const report_view *v)
{
    const etacal_quotes *q = v->q;
    const etacal_quotes_diff *d = v->d;
    size_t shown = 0;
    for (size_t i = 0; i < d->nmoves; i++)
        shown += isfinite(move_of(&d->moves[i])) && move_of(&d->moves[i]) != 0;
    if (!shown || !v->show)
        return 0;
    fprintf(v->fp, "\nlargest moves of the promise at the reference order:\n");
    size_t nk = q->nkeys ? q->nkeys : 1;
    ttab tt;
    if (ttab_init(&tt, nk + 4) != 0)
        return -1;
    const char *cells[ETACAL_MAX_KEYS + 4];
    char b[4][48];
    size_t k = 0;
    for (size_t j = 0; j < q->nkeys; j++)
        cells[k++] = q->key_names[j];
    if (!q->nkeys)
        cells[k++] = "segment";
    cells[k++] = "target";
    cells[k++] = "current s";
    cells[k++] = "new s";
    cells[k++] = "move s";
    ttab_add(&tt, cells);
    for (size_t j = nk; j < nk + 4; j++)
        tt.right[j] = 1;
    size_t listed = 0;
    for (size_t i = 0; i < d->nmoves && listed < v->show; i++) {
        const etacal_quote_move *m = &d->moves[i];
        double mvv = move_of(m);
        if (!isfinite(mvv) || mvv == 0)
            continue;
        k = 0;
        for (size_t j = 0; j < q->nkeys; j++)
            cells[k++] = d->keys_differ ? "*" : m->keys[j];
        if (!q->nkeys)
            cells[k++] = "*";
        snprintf(b[0], sizeof b[0], "%g", m->target);
        snprintf(b[1], sizeof b[1], "%.1f", m->old_promise);
        snprintf(b[2], sizeof b[2], "%.1f", m->new_promise);
        snprintf(b[3], sizeof b[3], "%+.1f", mvv);
        for (int j = 0; j < 4; j++)
            cells[k++] = b[j];
        ttab_add(&tt, cells);
        listed++;
    }
    int rc = ttab_print(&tt, v->fp);
    ttab_free(&tt);
    return rc;
}

/* The comparison with the current table (there is one). */
static int text_comparison(const report_view *v)
{
    const etacal_quotes_diff *d = v->d;
    FILE *fp = v->fp;
    table_line(fp, "current table", v->cur);
    fprintf(fp, "reference order: prediction %.1f s", v->ref_pred);
    for (size_t j = 0; j < v->s->fit.nx; j++)
        fprintf(fp, ", %s %g", v->s->fit.xs[j], v->ref_x[j]);
    fprintf(fp, " (%s)\n", isnan(v->s->ref_pred) ? "medians of the data" : "--ref-pred");
    fprintf(fp, "segments: %zu added, %zu removed, %zu changed, %zu unchanged; %zu promises compared\n",
            d->segs_added, d->segs_removed, d->segs_changed, d->segs_same, etacal_publish_result_compared(v->res));
    int rc = text_moves(v);
    int head = 0;
    for (size_t i = 0; i < d->nmoves; i++) {
        const etacal_quote_move *m = &d->moves[i];
        if (m->in_old == m->in_new)
            continue;
        if (!head++)
            fprintf(fp, "\nsegments with a row in one table only:\n");
        char who[160];
        keys_label(who, sizeof who, m->in_new ? v->q : v->cur, m->keys);
        fprintf(fp, "  %s %s at target %g\n", m->in_new ? "added  " : "removed", who, m->target);
    }
    return rc;
}

/* The guards' table: 0, or -1 when out of memory. */
static int text_guards(const report_view *v)
{
    ttab tt;
    if (ttab_init(&tt, 3) != 0)
        return -1;
    for (size_t i = 0; i < v->ng; i++) {
        int st = v->g[i].status;
        const char *cells[3] = {v->g[i].name,
                                st == ETACAL_GUARD_PASSED ? "ok" : st == ETACAL_GUARD_FAILED ? "FAILED" : "-",
                                v->g[i].message};
        ttab_add(&tt, cells);
    }
    int rc = ttab_print(&tt, v->fp);
    ttab_free(&tt);
    return rc;
}

/* The outcome's line. */
static void text_outcome(const report_view *v)
{
    FILE *fp = v->fp;
    const char *table = v->s->table;
    int outcome = etacal_publish_result_outcome(v->res);
    if (outcome == ETACAL_PUBLISH_REFUSED) {
        fprintf(fp, "refused: nothing replaced; %s is left as it was\n", table);
    } else if (outcome == ETACAL_PUBLISH_DRY_RUN) {
        fprintf(fp, "dry run: every guard holds; %s is unchanged\n", table);
    } else {
        const char *prev = etacal_publish_result_prev_path(v->res);
        const char *meta = etacal_publish_result_record_path(v->res);
        const char *hist = etacal_publish_result_history_path(v->res);
        fprintf(fp, "published: %s", table);
        if (prev[0])
            fprintf(fp, " (the previous table kept as %s)", prev);
        if (meta[0])
            fprintf(fp, "; provenance in %s", meta);
        if (hist[0])
            fprintf(fp, "; history copy %s", hist);
        putc('\n', fp);
    }
}

static int write_text(const report_view *v, etacal_error *err)
{
    FILE *fp = v->fp;
    int bad = 0;
    fprintf(fp, "etacal publish: %s from %s\n", v->s->table, v->s->input);
    fprintf(fp, "rows: %zu read, %zu used, %zu left out (missing actual or prediction), %zu malformed skipped\n",
            v->rs->data_rows, v->used, v->rs->missing, v->rs->bad);
    table_line(fp, "new table", v->q);
    if (v->d)
        bad |= text_comparison(v) != 0;
    else
        fprintf(fp, "current table: %s\n", etacal_publish_result_current_problem(v->res)[0] ? "not valid" : "none");
    fprintf(fp, "\nguards:\n");
    bad |= text_guards(v) != 0;
    putc('\n', fp);
    text_outcome(v);
    if (bad)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return ETACAL_OK;
}

int etacal_publish_write_report(const etacal_publish_result *r, const etacal_publishspec *s, int format,
                                size_t show, const etacal_sink *out, etacal_error *err)
{
    if (!r || !s || !s->table || !s->input)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no publish result to report");
    if (format != ETACAL_FORMAT_TEXT && format != ETACAL_FORMAT_JSON)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the change report is text or JSON, not format %d",
                                format);
    const etacal_fit_run *fit = etacal_publish_result_fit(r);
    const etacal_table *t = etacal_fit_run_rows(fit);
    report_view v = {.s = s, .res = r, .show = show};
    v.q = etacal_fit_run_quotes(fit);
    v.cur = etacal_publish_result_current(r);
    v.d = etacal_publish_result_diff(r);
    v.rs = etacal_table_stats(t);
    v.used = etacal_table_rows(t);
    v.g = etacal_publish_result_guards(r, &v.ng);
    v.ref_pred = etacal_publish_result_reference(r, &v.ref_x);
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    v.fp = fp;
    int rc = format == ETACAL_FORMAT_JSON ? write_json(&v, err) : write_text(&v, err);
    return sink_fclose(fp, rc, err);
}
