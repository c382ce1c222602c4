/* SPDX-License-Identifier: GPL-3.0-or-later */
/* out_check.c: the writers of a check's result (check.h): aligned text for
 * people, CSV for machines, JSON (jansson) with the shape documented in
 * check.h.  They compute nothing: every figure, test and verdict comes
 * from etacal_check_run. */
#include "base.h"
#include "stream.h"
#include "textout.h"

#include <math.h>
#include <string.h>

#define NKEYS_MAX 64

static const char *measure_kind(int kind)
{
    return kind == ETACAL_MEASURE_UPPER ? "upper" : kind == ETACAL_MEASURE_INTERVAL ? "interval" : "quantile";
}

static const char *col_name(const etacal_check_write_opts *o, size_t col)
{
    const char *s = etacal_table_col_name(o->table, col);
    return s ? s : "";
}

static void label(char *buf, size_t n, const etacal_check_result *r, size_t k, const etacal_check_write_opts *o)
{
    const etacal_measure_def *d = &r->measures[k];
    const char *c = col_name(o, d->col);
    if (d->kind == ETACAL_MEASURE_INTERVAL)
        snprintf(buf, n, "interval [%s, %s]", col_name(o, d->col2), c);
    else if (d->kind == ETACAL_MEASURE_UPPER)
        snprintf(buf, n, "upper %s", c);
    else
        snprintf(buf, n, "quantile %s", c);
}

static void fmt(char *buf, size_t n, const char *f, double v)
{
    if (isnan(v))
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, f, v);
}

/* The verdict of the gate on one figure. */
static const char *verdict(const etacal_check_result *r, size_t g, const etacal_measure *m)
{
    if (m->tested)
        return m->reject ? "under" : "ok";
    if (!isnan(r->measures[0].nominal) && r->segs[g].thin && (g != 0 || !r->table_law))
        return "thin";
    return "-";
}

static void fmt_p(char *buf, size_t n, double p)
{
    if (isnan(p))
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, "%.3g", p);
}

/* The key cells of a row: the segment's keys, or "*" under "segment". */
static size_t key_cells(const etacal_check_result *r, const char **cells, char *const *keys, const char *none)
{
    size_t c = 0;
    for (size_t j = 0; j < r->nkeys; j++)
        cells[c++] = keys[j];
    if (!r->nkeys)
        cells[c++] = none;
    return c;
}

/* One row of the gate's table: cells after the keys. */
static size_t gate_row(char (*b)[96], const etacal_check_result *r, size_t g, size_t k,
                       const etacal_check_write_opts *o)
{
    const etacal_check_segment *sg = &r->segs[g];
    const etacal_measure *m = &sg->m[k];
    size_t i = 0;
    if (r->table_law) {
        snprintf(b[i++], 96, "%zu", sg->cal_n);
        snprintf(b[i++], 96, "%zu", sg->cal_k);
        snprintf(b[i++], 96, "%.4f", (double)sg->cal_k / (double)(sg->cal_n + 1));
    } else {
        label(b[i++], 96, r, k, o);
    }
    snprintf(b[i++], 96, "%zu", m->n);
    snprintf(b[i++], 96, "%zu", m->hits);
    fmt(b[i++], 96, "%.4f", m->coverage);
    if (!r->table_law)
        fmt(b[i++], 96, "%.4f", r->measures[k].nominal);
    fmt_p(b[i++], 96, m->p);
    fmt_p(b[i++], 96, m->p_holm);
    snprintf(b[i++], 96, "%s", verdict(r, g, m));
    return i;
}

static void gate_intro(FILE *fp, const etacal_check_result *r, const etacal_check_write_opts *o)
{
    char lv[32];
    snprintf(lv, sizeof lv, "%g", r->gate_level);
    if (r->table_law) {
        char tg[ETACAL_NUM_BUFSZ];
        etacal_num_format(r->target, tg);
        fprintf(fp,
                "\ngate test under the law of the table %s at target %s: the orders each table row\n"
                "served, against Beta-binomial(orders, k, n+1-k), the law of the hits of a\n"
                "split-conformal bound of rank k among n calibration rows (Vovk 2012);\n"
                "one-sided, p = P(H <= hits), Holm (1979) across %zu rows at family-wise error %s\n",
                o->quote_source ? o->quote_source : "", tg, r->ntests, lv);
    } else {
        fprintf(fp,
                "\ngate test: each figure's hits against Binomial(n, nominal), one-sided, p = P(X <= hits),\n"
                "Holm (1979) across %zu figures at family-wise error %s.\n"
                "Calibration noise is not accounted for: a fitted table's own coverage is random\n"
                "(Beta(k, n+1-k) for rank k of n; Vovk 2012), so an honest table can fail this\n"
                "gate; give --table QUOTES.csv to test against that law.\n",
                r->ntests, lv);
    }
}

/* The gate's tests: how, and one line per figure. */
static int write_gate_text(FILE *fp, const etacal_check_result *r, const etacal_check_write_opts *o)
{
    gate_intro(fp, r, o);
    size_t nk = r->nkeys ? r->nkeys : 1;
    enum { NG = 10 };
    size_t ng = r->table_law ? 9 : 8;
    ttab tt;
    if (ttab_init(&tt, nk + ng) != 0)
        return -1;
    const char *cells[NKEYS_MAX + NG];
    size_t c = key_cells(r, cells, r->key_names, "segment");
    static const char *hlaw[NG] = {"n", "k", "expected", "orders", "hits", "coverage", "p", "p_holm", "verdict", ""};
    static const char *hbin[NG] = {"measure", "n", "hits", "coverage", "nominal", "p", "p_holm", "verdict", "", ""};
    for (size_t i = 0; i < ng; i++)
        cells[c + i] = r->table_law ? hlaw[i] : hbin[i];
    ttab_add(&tt, cells);
    for (size_t i = nk; i < nk + ng - 1; i++)
        tt.right[i] = 1;
    if (!r->table_law)
        tt.right[nk] = 0;
    for (size_t g = 0; g < r->nsegs; g++) {
        if (r->table_law && g == 0)
            continue; /* the overall figure mixes the rows' laws: not tested */
        for (size_t k = 0; k < r->nmeasures; k++) {
            c = key_cells(r, cells, r->segs[g].keys, "*");
            char b[NG][96];
            size_t n = gate_row(b, r, g, k, o);
            for (size_t x = 0; x < n; x++)
                cells[c + x] = b[x];
            ttab_add(&tt, cells);
        }
    }
    int bad = ttab_print(&tt, fp) != 0;
    ttab_free(&tt);
    return bad ? -1 : 0;
}

enum { NFIX = 13 };

/* One row of the main table: cells after the keys. */
static void main_row(char (*b)[96], const etacal_check_result *r, size_t g, size_t k,
                     const etacal_check_write_opts *o)
{
    const etacal_check_segment *sg = &r->segs[g];
    const etacal_measure *m = &sg->m[k];
    label(b[0], 96, r, k, o);
    snprintf(b[1], 96, "%zu", m->n);
    snprintf(b[2], 96, "%zu", m->hits);
    fmt(b[3], 96, "%.4f", m->coverage);
    fmt(b[4], 96, "%.4f", r->measures[k].nominal);
    if (isnan(m->ci_lo))
        snprintf(b[5], 96, "-");
    else
        snprintf(b[5], 96, "%.4f-%.4f", m->ci_lo, m->ci_hi);
    snprintf(b[6], 96, "%s", etacal_status_name(m->status));
    fmt(b[7], 96, "%.2f", m->pinball);
    fmt(b[8], 96, "%.1f", m->interval_score);
    fmt(b[9], 96, "%.1f", m->mean_width);
    fmt(b[10], 96, "%.1f", m->mean_slack);
    fmt(b[11], 96, "%.1f", m->mean_lateness);
    snprintf(b[12], 96, "%s", sg->thin ? "thin" : "");
}

static int write_main_table(FILE *fp, const etacal_check_result *r, const etacal_check_write_opts *o,
                            const char *cihead)
{
    size_t nk = r->nkeys ? r->nkeys : 1;
    ttab tt;
    if (ttab_init(&tt, nk + NFIX) != 0)
        return -1;
    const char *cells[NKEYS_MAX + NFIX];
    size_t c = key_cells(r, cells, r->key_names, "segment");
    const char *head[NFIX] = {"measure", "n", "hits", "coverage", "nominal", "ci", "status", "pinball",
                              "int.score", "width_s", "slack_s", "late_s", "note"};
    for (size_t i = 0; i < NFIX; i++)
        cells[c + i] = i == 5 ? cihead : head[i];
    ttab_add(&tt, cells);
    for (size_t i = nk + 1; i < nk + 12; i++)
        tt.right[i] = 1;
    tt.right[nk + 5] = 0;
    tt.right[nk + 6] = 0;
    for (size_t g = 0; g < r->nsegs; g++)
        for (size_t k = 0; k < r->nmeasures; k++) {
            c = key_cells(r, cells, r->segs[g].keys, "*");
            char b[NFIX][96];
            main_row(b, r, g, k, o);
            for (size_t i = 0; i < NFIX; i++)
                cells[c + i] = b[i];
            ttab_add(&tt, cells);
        }
    int bad = ttab_print(&tt, fp) != 0;
    ttab_free(&tt);
    return bad ? -1 : 0;
}

/* The quantile forecast as a whole: calibration table and crossing. */
static int write_calibration(FILE *fp, const etacal_check_result *r, const etacal_check_write_opts *o,
                             const char *cihead)
{
    const etacal_check_segment *all = &r->segs[0];
    fprintf(fp, "\ncalibration of the quantile forecast (all rows): nominal tau against the share of\n"
                "actuals at or below the quantile\n");
    ttab ct;
    if (ttab_init(&ct, 5) != 0)
        return -1;
    const char *h[5] = {"column", "tau", "share below", cihead, "status"};
    ttab_add(&ct, h);
    ct.right[1] = ct.right[2] = 1;
    for (size_t k = r->nmeasures - r->nq_sorted; k < r->nmeasures; k++) {
        char b[5][64];
        const etacal_measure *m = &all->m[k];
        snprintf(b[0], sizeof b[0], "%s", col_name(o, r->measures[k].col));
        snprintf(b[1], sizeof b[1], "%.4f", r->measures[k].nominal);
        fmt(b[2], sizeof b[2], "%.4f", m->coverage);
        snprintf(b[3], sizeof b[3], "%.4f-%.4f", m->ci_lo, m->ci_hi);
        snprintf(b[4], sizeof b[4], "%s", etacal_status_name(m->status));
        const char *row[5] = {b[0], b[1], b[2], b[3], b[4]};
        ttab_add(&ct, row);
    }
    int bad = ttab_print(&ct, fp) != 0;
    ttab_free(&ct);
    if (bad)
        return -1;
    fprintf(fp, "crossing: %zu of %zu rows have a lower-tau quantile above a higher one\n", all->crossing_rows,
            all->n);
    return 0;
}

/* Returns 0, or -1 when out of memory. */
static int write_text(FILE *fp, const etacal_check_result *r, const etacal_check_write_opts *o)
{
    const etacal_read_stats *st = etacal_table_stats(o->table);
    char cl[ETACAL_NUM_BUFSZ], cihead[64];
    etacal_percent_label(r->confidence, cl);
    snprintf(cihead, sizeof cihead, "%s%% CI", cl);
    fprintf(fp, "etacal check: %s\n", o->source ? o->source : "");
    fprintf(fp, "rows: %zu read, %zu used, %zu left out (missing value), %zu malformed skipped\n", st->data_rows,
            st->kept, st->missing, st->bad);
    fprintf(fp, "intervals: %s%% %s; segments with fewer than %zu rows are marked thin\n\n", cl,
            r->ci == ETACAL_CI_EXACT ? "Clopper-Pearson" : "Wilson", r->min_rows);
    if (write_main_table(fp, r, o, cihead) != 0)
        return -1;
    if (r->nq_sorted >= 2 && write_calibration(fp, r, o, cihead) != 0)
        return -1;
    if ((o->gate || r->table_law) && write_gate_text(fp, r, o) != 0)
        return -1;
    if (o->gate)
        fprintf(fp, "\ngate: %s (%zu of %zu %s under after Holm's correction)\n",
                r->gate_failed ? "FAILED" : "passed", r->nrejected, r->ntests, r->table_law ? "table rows" : "figures");
    return 0;
}

static void csv_num(FILE *fp, double v)
{
    if (!isnan(v))
        fprintf(fp, "%.10g", v);
}

static void csv_str(FILE *fp, const char *s) { csv_put_field(fp, s, strlen(s), ','); }

/* Separated by commas, each NaN an empty field. */
static void csv_nums(FILE *fp, const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        if (i)
            putc(',', fp);
        csv_num(fp, v[i]);
    }
}

static void csv_header(FILE *fp, const etacal_check_result *r, int gcols)
{
    for (size_t j = 0; j < r->nkeys; j++) {
        csv_str(fp, r->key_names[j]);
        putc(',', fp);
    }
    fputs("measure,column,column2,nominal,n,hits,coverage,ci_low,ci_high,status,thin,pinball,"
          "interval_score,mean_width_s,mean_slack_s,mean_lateness_s,late,crossing_rows",
          fp);
    if (gcols)
        fputs(",p,p_holm,verdict", fp);
    if (r->table_law)
        fputs(",table_n,table_k", fp);
    putc('\n', fp);
}

static void csv_row(FILE *fp, const etacal_check_result *r, size_t g, size_t k, const etacal_check_write_opts *o,
                    int gcols)
{
    const etacal_check_segment *sg = &r->segs[g];
    const etacal_measure *m = &sg->m[k];
    const etacal_measure_def *d = &r->measures[k];
    for (size_t j = 0; j < r->nkeys; j++) {
        csv_str(fp, sg->keys[j]);
        putc(',', fp);
    }
    fprintf(fp, "%s,", measure_kind(d->kind));
    csv_str(fp, col_name(o, d->col));
    putc(',', fp);
    if (d->kind == ETACAL_MEASURE_INTERVAL)
        csv_str(fp, col_name(o, d->col2));
    putc(',', fp);
    csv_num(fp, d->nominal);
    fprintf(fp, ",%zu,%zu,", m->n, m->hits);
    csv_nums(fp, (const double[]){m->coverage, m->ci_lo, m->ci_hi}, 3);
    fprintf(fp, ",%s,%d,", m->status == ETACAL_STATUS_NONE ? "" : etacal_status_name(m->status), sg->thin);
    csv_nums(fp, (const double[]){m->pinball, m->interval_score, m->mean_width, m->mean_slack, m->mean_lateness},
             5);
    putc(',', fp);
    if (d->kind == ETACAL_MEASURE_UPPER)
        fprintf(fp, "%zu", m->late);
    putc(',', fp);
    if (r->nq_sorted >= 2)
        fprintf(fp, "%zu", sg->crossing_rows);
    if (gcols) {
        putc(',', fp);
        csv_nums(fp, (const double[]){m->p, m->p_holm}, 2);
        const char *v = verdict(r, g, m);
        fprintf(fp, ",%s", strcmp(v, "-") ? v : "");
    }
    if (r->table_law && g > 0)
        fprintf(fp, ",%zu,%zu", sg->cal_n, sg->cal_k);
    else if (r->table_law)
        fputs(",,", fp);
    putc('\n', fp);
}

static void write_csv(FILE *fp, const etacal_check_result *r, const etacal_check_write_opts *o)
{
    int gcols = o->gate || r->table_law;
    csv_header(fp, r, gcols);
    for (size_t g = 0; g < r->nsegs; g++)
        for (size_t k = 0; k < r->nmeasures; k++)
            csv_row(fp, r, g, k, o, gcols);
}

static json_t *jint(size_t v, int *oom) { return jnew(json_integer((json_int_t)v), oom); }

static json_t *json_measure(const etacal_check_result *r, size_t g, size_t k, const etacal_check_write_opts *o,
                            int *oom)
{
    const etacal_measure *m = &r->segs[g].m[k];
    const etacal_measure_def *d = &r->measures[k];
    json_t *j = jnew(json_object(), oom);
    if (!j)
        return NULL;
    jset(j, "measure", jstr(measure_kind(d->kind), oom), oom);
    jset(j, "column", jstr(col_name(o, d->col), oom), oom);
    if (d->kind == ETACAL_MEASURE_INTERVAL)
        jset(j, "lower_column", jstr(col_name(o, d->col2), oom), oom);
    jset(j, "nominal", jnum(d->nominal, oom), oom);
    jset(j, "n", jint(m->n, oom), oom);
    jset(j, "hits", jint(m->hits, oom), oom);
    jset(j, "coverage", jnum(m->coverage, oom), oom);
    json_t *ci = jnew(json_array(), oom);
    if (ci) {
        jpush(ci, jnum(m->ci_lo, oom), oom);
        jpush(ci, jnum(m->ci_hi, oom), oom);
    }
    jset(j, "ci", ci, oom);
    jset(j, "status",
         m->status == ETACAL_STATUS_NONE ? jnew(json_null(), oom) : jstr(etacal_status_name(m->status), oom), oom);
    jset(j, "pinball", jnum(m->pinball, oom), oom);
    jset(j, "interval_score", jnum(m->interval_score, oom), oom);
    jset(j, "mean_width_s", jnum(m->mean_width, oom), oom);
    jset(j, "mean_slack_s", jnum(m->mean_slack, oom), oom);
    jset(j, "mean_lateness_s", jnum(m->mean_lateness, oom), oom);
    jset(j, "late", d->kind == ETACAL_MEASURE_UPPER ? jint(m->late, oom) : jnew(json_null(), oom), oom);
    if (o->gate || r->table_law) {
        const char *v = verdict(r, g, m);
        jset(j, "p", jnum(m->p, oom), oom);
        jset(j, "p_holm", jnum(m->p_holm, oom), oom);
        jset(j, "verdict", strcmp(v, "-") ? jstr(v, oom) : jnew(json_null(), oom), oom);
    }
    return j;
}

static json_t *json_segment(const etacal_check_result *r, size_t g, const etacal_check_write_opts *o, int *oom)
{
    const etacal_check_segment *sg = &r->segs[g];
    json_t *s = jnew(json_object(), oom), *kv = jnew(json_object(), oom);
    if (kv)
        for (size_t j = 0; j < r->nkeys; j++)
            jset(kv, r->key_names[j], jstr(sg->keys[j], oom), oom);
    if (!s) {
        json_decref(kv);
        return NULL;
    }
    jset(s, "keys", kv, oom);
    jset(s, "overall", jnew(json_boolean(g == 0), oom), oom);
    jset(s, "n", jint(sg->n, oom), oom);
    jset(s, "thin", jnew(json_boolean(sg->thin), oom), oom);
    if (r->table_law) {
        json_t *tr = jnew(g ? json_object() : json_null(), oom);
        if (tr && g) {
            jset(tr, "n", jint(sg->cal_n, oom), oom);
            jset(tr, "k", jint(sg->cal_k, oom), oom);
        }
        jset(s, "table_row", tr, oom);
    }
    jset(s, "crossing_rows", r->nq_sorted >= 2 ? jint(sg->crossing_rows, oom) : jnew(json_null(), oom), oom);
    json_t *ms = jnew(json_array(), oom);
    if (ms)
        for (size_t k = 0; k < r->nmeasures; k++)
            jpush(ms, json_measure(r, g, k, o, oom), oom);
    jset(s, "measures", ms, oom);
    return s;
}

static json_t *json_gate(const etacal_check_result *r, const etacal_check_write_opts *o, int *oom)
{
    if (!(o->gate || r->table_law))
        return jnew(json_null(), oom);
    json_t *gj = jnew(json_object(), oom);
    if (!gj)
        return NULL;
    jset(gj, "failed", jnew(json_boolean(r->gate_failed), oom), oom);
    jset(gj, "law", jstr(r->table_law ? "beta-binomial" : "binomial", oom), oom);
    jset(gj, "level", jnum(r->gate_level, oom), oom);
    jset(gj, "tests", jint(r->ntests, oom), oom);
    jset(gj, "rejected", jint(r->nrejected, oom), oom);
    jset(gj, "calibration_noise_accounted", jnew(json_boolean(r->table_law), oom), oom);
    if (r->table_law) {
        jset(gj, "table", jstr(o->quote_source ? o->quote_source : "", oom), oom);
        jset(gj, "target", jnum(r->target, oom), oom);
    }
    return gj;
}

static int write_json(FILE *fp, const etacal_check_result *r, const etacal_check_write_opts *o, etacal_error *err)
{
    const etacal_read_stats *st = etacal_table_stats(o->table);
    int oom = 0;
    json_t *root = jnew(json_object(), &oom);
    if (root) {
        jset(root, "etacal", jstr(ETACAL_VERSION, &oom), &oom);
        jset(root, "file", jstr(o->source ? o->source : "", &oom), &oom);
        json_t *rows = jnew(json_object(), &oom);
        if (rows) {
            jset(rows, "read", jint(st->data_rows, &oom), &oom);
            jset(rows, "used", jint(st->kept, &oom), &oom);
            jset(rows, "missing", jint(st->missing, &oom), &oom);
            jset(rows, "malformed", jint(st->bad, &oom), &oom);
        }
        jset(root, "rows", rows, &oom);
        jset(root, "confidence", jnum(r->confidence, &oom), &oom);
        jset(root, "ci", jstr(r->ci == ETACAL_CI_EXACT ? "exact" : "wilson", &oom), &oom);
        jset(root, "min_rows", jint(r->min_rows, &oom), &oom);
        json_t *keys = jnew(json_array(), &oom);
        if (keys)
            for (size_t j = 0; j < r->nkeys; j++)
                jpush(keys, jstr(r->key_names[j], &oom), &oom);
        jset(root, "keys", keys, &oom);
        json_t *segs = jnew(json_array(), &oom);
        if (segs)
            for (size_t g = 0; g < r->nsegs && !oom; g++)
                jpush(segs, json_segment(r, g, o, &oom), &oom);
        jset(root, "segments", segs, &oom);
        jset(root, "gate", json_gate(r, o, &oom), &oom);
    }
    int rc = jwrite(root, oom, fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10), err);
    json_decref(root);
    return rc;
}

int etacal_check_write(const etacal_check_result *r, const etacal_check_write_opts *opts, int format,
                       const etacal_sink *out, etacal_error *err)
{
    if (!r || !opts || !opts->table)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no check result or table to write");
    if (format != ETACAL_FORMAT_TEXT && format != ETACAL_FORMAT_CSV && format != ETACAL_FORMAT_JSON)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown output format %d", format);
    if (r->nkeys > NKEYS_MAX)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "more than %d key columns", NKEYS_MAX);
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    int rc = ETACAL_OK;
    if (format == ETACAL_FORMAT_JSON)
        rc = write_json(fp, r, opts, err);
    else if (format == ETACAL_FORMAT_CSV)
        write_csv(fp, r, opts);
    else if (write_text(fp, r, opts) != 0)
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return sink_fclose(fp, rc, err);
}
