/* SPDX-License-Identifier: GPL-3.0-or-later */
/* out_backtest.c: the writers of a rolling-origin backtest's result
 * (backtest.h): aligned text for people, CSV for machines, JSON (jansson).
 * The on-time rates get a 95% Wilson (1927) score interval from binom.c;
 * nothing else is computed here. */
#include "base.h"
#include "textout.h"

#include <math.h>
#include <string.h>

static const char calib_note[] = "orders placed in the window before the period start and delivered by it "
                                 "(placed + actual <= start)";

/* The promise column: finite, unbounded (every order on time) or none
 * (every order late); NULL for a period without orders. */
static const char *promise_name(const etacal_backtest_period *p)
{
    if (p->n == 0)
        return NULL;
    return p->promise == ETACAL_BT_UNBOUNDED ? "unbounded" : p->promise == ETACAL_BT_NONE ? "none" : "finite";
}

/* The 95% Wilson interval of h on-time orders of n; NaN for n = 0. */
static void wilson(size_t h, size_t n, double *lo, double *hi)
{
    etacal_error e;
    *lo = *hi = NAN;
    if (n && etacal_binom_wilson(h, n, 0.95, lo, hi, &e) != ETACAL_OK)
        *lo = *hi = NAN;
}

/* One period's line of the text table. */
static int text_row(ttab *tt, const etacal_backtest_period *p)
{
    char a[32], cells[6][64];
    double lo, hi;
    etacal_time_format(p->start, a);
    snprintf(cells[0], sizeof cells[0], "%zu", p->calib);
    snprintf(cells[1], sizeof cells[1], "%zu", p->n);
    wilson(p->hits, p->n, &lo, &hi);
    if (p->n) {
        snprintf(cells[2], sizeof cells[2], "%.2f%% (%zu/%zu)", 100.0 * (double)p->hits / (double)p->n, p->hits,
                 p->n);
        snprintf(cells[3], sizeof cells[3], "%.4f-%.4f", lo, hi);
    } else {
        snprintf(cells[2], sizeof cells[2], "-");
        cells[3][0] = '\0';
    }
    if (isfinite(p->mean_buffer))
        snprintf(cells[4], sizeof cells[4], "%.2f", p->mean_buffer / 60);
    else
        snprintf(cells[4], sizeof cells[4], "%s",
                 p->n == 0 ? "-" : p->promise == ETACAL_BT_UNBOUNDED ? "unbounded" : "none");
    snprintf(cells[5], sizeof cells[5], "%.4f", p->level);
    const char *row[7] = {a, cells[0], cells[1], cells[2], cells[3], cells[4], cells[5]};
    return ttab_add(tt, row);
}

/* Returns 0, or -1 when out of memory. */
static int write_text(FILE *fp, const etacal_backtest_result *r, const etacal_backtest_opts *bo, const char *src)
{
    char tp[ETACAL_NUM_BUFSZ];
    etacal_percent_label(bo->target, tp);
    fprintf(fp, "etacal backtest: %s, target %s%%, method %s, window %g h, period %g h%s%s\n", src, tp,
            etacal_method_name(bo->method), bo->window_s / 3600, bo->every_s / 3600,
            bo->half_life_s > 0 ? ", recency weights" : "", bo->gamma > 0 ? ", adaptive level" : "");
    fprintf(fp, "calibration: %s, as the nightly job saw them\n", calib_note);
    ttab tt;
    if (ttab_init(&tt, 7) != 0)
        return -1;
    const char *h[7] = {"period start", "calib", "n", "on time", "95% CI", "buffer min", "level"};
    ttab_add(&tt, h);
    for (int j = 1; j < 7; j++)
        tt.right[j] = j != 4;
    for (size_t k = 0; k < r->nperiods; k++)
        text_row(&tt, &r->periods[k]);
    int bad = ttab_print(&tt, fp) != 0;
    ttab_free(&tt);
    if (bad)
        return -1;
    double lo, hi;
    wilson(r->hits, r->n, &lo, &hi);
    char mb[32];
    if (isfinite(r->mean_buffer))
        snprintf(mb, sizeof mb, "%.2f min", r->mean_buffer / 60);
    else
        snprintf(mb, sizeof mb, "-");
    fprintf(fp, "\noverall: %.2f%% on time (%zu/%zu), 95%% CI %.4f-%.4f, mean buffer %s over the %zu orders "
                "with a finite promise\n",
            r->n ? 100.0 * (double)r->hits / (double)r->n : 0.0, r->hits, r->n, lo, hi, mb, r->finite_n);
    fprintf(fp, "promises: %zu period%s finite (%zu orders), %zu unbounded (%zu orders, all on time), "
                "%zu none (%zu orders, all late)\n",
            r->finite_periods, r->finite_periods == 1 ? "" : "s", r->finite_n, r->unbounded_periods, r->unbounded_n,
            r->none_periods, r->none_n);
    return 0;
}

static void write_csv(FILE *fp, const etacal_backtest_result *r)
{
    char a[32], b[32];
    double lo, hi;
    fputs("period_start,period_end,calib,n,hits,on_time,ci_low,ci_high,mean_buffer_s,level,promise\n", fp);
    for (size_t k = 0; k < r->nperiods; k++) {
        const etacal_backtest_period *p = &r->periods[k];
        etacal_time_format(p->start, a);
        etacal_time_format(p->end, b);
        wilson(p->hits, p->n, &lo, &hi);
        fprintf(fp, "%s,%s,%zu,%zu,%zu,", a, b, p->calib, p->n, p->hits);
        if (p->n)
            fprintf(fp, "%.10g,%.10g,%.10g", (double)p->hits / (double)p->n, lo, hi);
        else
            fputs(",,", fp);
        fputc(',', fp);
        if (isfinite(p->mean_buffer))
            fprintf(fp, "%.10g", p->mean_buffer);
        const char *pn = promise_name(p);
        fprintf(fp, ",%.10g,%s\n", p->level, pn ? pn : "");
    }
}

static json_t *jint(size_t v, int *oom) { return jnew(json_integer((json_int_t)v), oom); }

/* n orders, h on time: "n", "hits", "on_time", "ci" (null without orders). */
static void json_rate(json_t *o, size_t h, size_t n, int *oom)
{
    double lo, hi;
    wilson(h, n, &lo, &hi);
    jset(o, "n", jint(n, oom), oom);
    jset(o, "hits", jint(h, oom), oom);
    jset(o, "on_time", jnum(n ? (double)h / (double)n : NAN, oom), oom);
    json_t *ci = jnew(json_array(), oom);
    if (ci) {
        jpush(ci, jnum(lo, oom), oom);
        jpush(ci, jnum(hi, oom), oom);
    }
    jset(o, "ci", ci, oom);
}

static json_t *json_period(const etacal_backtest_period *p, int *oom)
{
    char a[32], b[32];
    json_t *o = jnew(json_object(), oom);
    if (!o)
        return NULL;
    etacal_time_format(p->start, a);
    etacal_time_format(p->end, b);
    jset(o, "start", jstr(a, oom), oom);
    jset(o, "end", jstr(b, oom), oom);
    jset(o, "calib", jint(p->calib, oom), oom);
    json_rate(o, p->hits, p->n, oom);
    jset(o, "mean_buffer_s", jnum(p->mean_buffer, oom), oom);
    jset(o, "level", jnum(p->level, oom), oom);
    const char *pn = promise_name(p);
    jset(o, "promise", pn ? jstr(pn, oom) : jnew(json_null(), oom), oom);
    return o;
}

/* {"periods": P, "n": N} */
static json_t *json_count(size_t periods, size_t n, int *oom)
{
    json_t *o = jnew(json_object(), oom);
    if (o) {
        jset(o, "periods", jint(periods, oom), oom);
        jset(o, "n", jint(n, oom), oom);
    }
    return o;
}

static int write_json(FILE *fp, const etacal_backtest_result *r, const etacal_backtest_opts *bo, const char *src,
                      etacal_error *err)
{
    int oom = 0;
    json_t *root = jnew(json_object(), &oom);
    if (root) {
        jset(root, "etacal", jstr(ETACAL_VERSION, &oom), &oom);
        jset(root, "file", jstr(src, &oom), &oom);
        jset(root, "target", jnum(bo->target, &oom), &oom);
        jset(root, "window_s", jnum(bo->window_s, &oom), &oom);
        jset(root, "every_s", jnum(bo->every_s, &oom), &oom);
        jset(root, "calibration", jstr(calib_note, &oom), &oom);
        json_t *ps = jnew(json_array(), &oom);
        if (ps)
            for (size_t k = 0; k < r->nperiods && !oom; k++)
                jpush(ps, json_period(&r->periods[k], &oom), &oom);
        jset(root, "periods", ps, &oom);
        json_t *all = jnew(json_object(), &oom);
        if (all) {
            json_rate(all, r->hits, r->n, &oom);
            jset(all, "mean_buffer_s", jnum(r->mean_buffer, &oom), &oom);
        }
        jset(root, "overall", all, &oom);
        json_t *pr = jnew(json_object(), &oom);
        if (pr) {
            jset(pr, "finite", json_count(r->finite_periods, r->finite_n, &oom), &oom);
            jset(pr, "unbounded", json_count(r->unbounded_periods, r->unbounded_n, &oom), &oom);
            jset(pr, "none", json_count(r->none_periods, r->none_n, &oom), &oom);
        }
        jset(root, "promises", pr, &oom);
    }
    int rc = jwrite(root, oom, fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10), err);
    json_decref(root);
    return rc;
}

int etacal_backtest_write(const etacal_backtest_result *r, const etacal_backtest_opts *opts, const char *source,
                          int format, const etacal_sink *out, etacal_error *err)
{
    if (!r || !opts)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no backtest result or options to write");
    if (format != ETACAL_FORMAT_TEXT && format != ETACAL_FORMAT_CSV && format != ETACAL_FORMAT_JSON)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown output format %d", format);
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    const char *src = source ? source : "";
    int rc = ETACAL_OK;
    if (format == ETACAL_FORMAT_JSON)
        rc = write_json(fp, r, opts, src, err);
    else if (format == ETACAL_FORMAT_CSV)
        write_csv(fp, r);
    else if (write_text(fp, r, opts, src) != 0)
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return sink_fclose(fp, rc, err);
}
