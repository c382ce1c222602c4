/* SPDX-License-Identifier: GPL-3.0-or-later */
/* out_curve.c: the cost curve's writers (curve.h, etacal_curve_write):
 * aligned text with one table per segment, CSV with one line per segment
 * and target, and JSON (the shape is in the man page, docs/etacal.1). */
#include "base.h"
#include "stream.h"
#include "quote_internal.h"
#include "textout.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* What the writers show: the fit run's table and held-out counts, the curve. */
typedef struct curve_view {
    const char *path, *timecol;
    double holdout;
    const etacal_quotes *q;
    const etacal_holdout *ho;
    const etacal_curve *cv;
    size_t nt, n, held;
} curve_view;

/* One segment's aligned table: 0, or -1 when out of memory. */
static int text_segment(FILE *fp, const curve_view *v, size_t s)
{
    const etacal_quotes *q = v->q;
    size_t g = v->cv->seg[s], hn = v->ho->n[g];
    if (q->nkeys) {
        fputs("\nsegment", fp);
        for (size_t j = 0; j < q->nkeys; j++)
            fprintf(fp, "%s%s", j ? ", " : " ", q->segs[g].keys[j]);
    }
    fputc('\n', fp);
    ttab tt;
    if (ttab_init(&tt, 7) != 0)
        return -1;
    const char *h[7] = {"target",
                        q->method == ETACAL_METHOD_ADD     ? "buffer s"
                        : q->method == ETACAL_METHOD_RATIO ? "factor"
                                                           : "corr s",
                        "mean promise min",
                        "extra min", "+min per point", "on time (held out)", "95% CI"};
    ttab_add(&tt, h);
    for (int j = 0; j < 6; j++)
        tt.right[j] = 1;
    for (size_t ti = 0; ti < v->nt; ti++) {
        const etacal_curve_point *pt = &v->cv->pts[s * v->nt + ti];
        char b[6][64];
        snprintf(b[0], sizeof b[0], q->method == ETACAL_METHOD_RATIO ? "%.4f" : "%.1f", pt->buffer);
        snprintf(b[1], sizeof b[1], "%.2f", pt->mean_promise_s / 60);
        snprintf(b[2], sizeof b[2], "%.2f", pt->mean_extra_s / 60);
        if (isnan(pt->marginal_s_per_point))
            snprintf(b[3], sizeof b[3], "-");
        else
            snprintf(b[3], sizeof b[3], "%+.2f", pt->marginal_s_per_point / 60);
        snprintf(b[4], sizeof b[4], "%.2f%% (%zu/%zu)", hn ? 100.0 * (double)pt->hits / (double)hn : 0.0, pt->hits,
                 hn);
        snprintf(b[5], sizeof b[5], "%.4f-%.4f", pt->ci_lo, pt->ci_hi);
        char tp[ETACAL_NUM_BUFSZ + 2];
        etacal_percent_label(q->targets[ti], tp);
        strcat(tp, "%");
        const char *row[7] = {tp, b[0], b[1], b[2], b[3], b[4], b[5]};
        ttab_add(&tt, row);
    }
    int bad = ttab_print(&tt, fp) != 0;
    ttab_free(&tt);
    return bad ? -1 : 0;
}

/* The text view: a heading, then one aligned table per segment. */
static int write_text(FILE *fp, const curve_view *v, etacal_error *err)
{
    char sh[ETACAL_NUM_BUFSZ];
    etacal_percent_label(v->holdout, sh);
    fprintf(fp, "etacal curve: %s, method %s; measured on %zu held-out rows (%s %s%%%s%s), fitted on %zu\n", v->path,
            etacal_method_name(v->q->method), v->held, v->timecol ? "the latest" : "a random", sh,
            v->timecol ? " by " : "", v->timecol ? v->timecol : "", v->n - v->held);
    for (size_t s = 0; s < v->cv->nsegs; s++)
        if (text_segment(fp, v, s) != 0)
            return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return ETACAL_OK;
}

/* The CSV view: one line per segment and target. */
static int write_csv(FILE *fp, const curve_view *v)
{
    const etacal_quotes *q = v->q;
    for (size_t j = 0; j < q->nkeys; j++) {
        csv_put_field(fp, q->key_names[j], strlen(q->key_names[j]), ',');
        putc(',', fp);
    }
    fputs("target,buffer,mean_promise_s,mean_extra_s,marginal_s_per_point,held_n,held_hits,on_time,ci_low,ci_high\n",
          fp);
    for (size_t s = 0; s < v->cv->nsegs; s++) {
        size_t g = v->cv->seg[s], hn = v->ho->n[g];
        for (size_t ti = 0; ti < v->nt; ti++) {
            const etacal_curve_point *pt = &v->cv->pts[s * v->nt + ti];
            char tb[ETACAL_NUM_BUFSZ];
            etacal_num_format(q->targets[ti], tb);
            for (size_t j = 0; j < q->nkeys; j++) {
                csv_put_field(fp, q->segs[g].keys[j], strlen(q->segs[g].keys[j]), ',');
                putc(',', fp);
            }
            fprintf(fp, "%s,%.10g,%.10g,%.10g,", tb, pt->buffer, pt->mean_promise_s, pt->mean_extra_s);
            if (!isnan(pt->marginal_s_per_point))
                fprintf(fp, "%.10g", pt->marginal_s_per_point);
            fprintf(fp, ",%zu,%zu,%.10g,%.10g,%.10g\n", hn, pt->hits, hn ? (double)pt->hits / (double)hn : NAN,
                    pt->ci_lo, pt->ci_hi);
        }
    }
    return ETACAL_OK;
}

/* One point of the JSON view. */
static json_t *json_point(const etacal_curve_point *pt, double target, size_t hn, int *oom)
{
    json_t *o = jnew(json_object(), oom);
    if (!o)
        return NULL;
    jset(o, "target", jnew(json_real(target), oom), oom);
    jset(o, "buffer", jnum(pt->buffer, oom), oom);
    jset(o, "mean_promise_s", jnum(pt->mean_promise_s, oom), oom);
    jset(o, "mean_extra_s", jnum(pt->mean_extra_s, oom), oom);
    jset(o, "marginal_s_per_point", jnum(pt->marginal_s_per_point, oom), oom);
    jset(o, "held_n", jnew(json_integer((json_int_t)hn), oom), oom);
    jset(o, "held_hits", jnew(json_integer((json_int_t)pt->hits), oom), oom);
    jset(o, "on_time", hn ? jnew(json_real((double)pt->hits / (double)hn), oom) : jnew(json_null(), oom), oom);
    json_t *ci = jnew(json_array(), oom);
    if (ci) {
        jpush(ci, jnum(pt->ci_lo, oom), oom);
        jpush(ci, jnum(pt->ci_hi, oom), oom);
    }
    jset(o, "ci", ci, oom);
    return o;
}

/* One segment of the JSON view. */
static json_t *json_segment(const curve_view *v, size_t s, int *oom)
{
    const etacal_quotes *q = v->q;
    size_t g = v->cv->seg[s], hn = v->ho->n[g];
    json_t *seg = jnew(json_object(), oom);
    json_t *kv = jnew(json_object(), oom);
    json_t *pts = jnew(json_array(), oom);
    if (!seg || !kv || !pts) {
        json_decref(seg);
        json_decref(kv);
        json_decref(pts);
        return NULL;
    }
    for (size_t j = 0; j < q->nkeys; j++)
        if (utf8_valid(q->key_names[j], strlen(q->key_names[j]))) /* jansson takes no other member name */
            jset(kv, q->key_names[j], jstr(q->segs[g].keys[j], oom), oom);
    for (size_t ti = 0; ti < v->nt && !*oom; ti++)
        jpush(pts, json_point(&v->cv->pts[s * v->nt + ti], q->targets[ti], hn, oom), oom);
    jset(seg, "keys", kv, oom);
    jset(seg, "held_n", jnew(json_integer((json_int_t)hn), oom), oom);
    jset(seg, "points", pts, oom);
    return seg;
}

/* The JSON view (its shape is in the man page). */
static int write_json(FILE *fp, const curve_view *v, etacal_error *err)
{
    int oom = 0;
    json_t *root = jnew(json_object(), &oom);
    if (root) {
        jset(root, "etacal", jstr(ETACAL_VERSION, &oom), &oom);
        jset(root, "file", jstr(v->path, &oom), &oom);
        json_t *ho = jnew(json_object(), &oom);
        if (ho) {
            jset(ho, "rows", jnew(json_integer((json_int_t)v->held), &oom), &oom);
            jset(ho, "of", jnew(json_integer((json_int_t)v->n), &oom), &oom);
            jset(ho, "by", jstr(v->timecol ? v->timecol : "random", &oom), &oom);
        }
        jset(root, "held_out", ho, &oom);
        json_t *segs = jnew(json_array(), &oom);
        for (size_t s = 0; segs && s < v->cv->nsegs && !oom; s++)
            jpush(segs, json_segment(v, s, &oom), &oom);
        jset(root, "segments", segs, &oom);
    }
    int rc = jwrite(root, oom, fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10), err);
    json_decref(root);
    return rc;
}

int etacal_curve_write(const etacal_curve *cv, const etacal_fit_run *run, const etacal_fitspec *s, const char *path,
                       int format, const etacal_sink *out, etacal_error *err)
{
    if (!cv || !run || !s || !path)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no curve to write");
    if (format != ETACAL_FORMAT_TEXT && format != ETACAL_FORMAT_CSV && format != ETACAL_FORMAT_JSON)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown output format %d", format);
    const etacal_quotes *q = etacal_fit_run_quotes(run);
    const etacal_holdout *ho = etacal_fit_run_holdout(run);
    if (!ho || cv->ntargets != q->ntargets)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the curve is not of this run (it needs a holdout)");
    curve_view v = {path, s->time, s->holdout, q, ho, cv, q->ntargets,
                    etacal_table_rows(etacal_fit_run_rows(run)), etacal_fit_run_held(run)};
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    int rc = format == ETACAL_FORMAT_JSON  ? write_json(fp, &v, err)
             : format == ETACAL_FORMAT_CSV ? write_csv(fp, &v)
                                           : write_text(fp, &v, err);
    return sink_fclose(fp, rc, err);
}
