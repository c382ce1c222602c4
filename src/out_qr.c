/* SPDX-License-Identifier: GPL-3.0-or-later */
/* out_qr.c: the writers of quantile regression fits at several levels
 * (etacal_qr_fits, quantreg.h): aligned text for people, CSV for machines,
 * JSON (jansson).  Each coefficient's t statistic is estimate / standard
 * error and its p-value two-sided with n - p degrees of freedom
 * (etacal_t_pvalue, qr_se.c), as quantreg's summary.rq reports them. */
#include "base.h"
#include "stream.h"
#include "textout.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static double tval(double b, double se) { return isnan(se) || se == 0 ? NAN : b / se; }

static const char *term_name(const etacal_qr_write_opts *o, size_t j)
{
    return j == 0 ? "(intercept)" : o->x_names[j - 1] ? o->x_names[j - 1] : "";
}

/* The table of one level's coefficients; 0, or -1 when out of memory. */
static int text_terms(FILE *fp, const etacal_qr_fits *f, size_t ti, const etacal_qr_write_opts *o)
{
    const etacal_qr_result *r = &f->res[ti];
    ttab tt;
    if (ttab_init(&tt, 5) != 0)
        return -1;
    const char *h[5] = {"term", "estimate", "std.error", "t", "p-value"};
    ttab_add(&tt, h);
    for (int j = 1; j < 5; j++)
        tt.right[j] = 1;
    for (size_t j = 0; j < r->p; j++) {
        char b[4][48];
        snprintf(b[0], sizeof b[0], "%.8g", r->coef[j]);
        double se = f->se[ti][j], tv = tval(r->coef[j], se);
        if (isnan(se)) {
            snprintf(b[1], sizeof b[1], "-");
            snprintf(b[2], sizeof b[2], "-");
            snprintf(b[3], sizeof b[3], "-");
        } else {
            snprintf(b[1], sizeof b[1], "%.6g", se);
            snprintf(b[2], sizeof b[2], "%.3f", tv);
            double pv = etacal_t_pvalue(tv, (double)(r->n - r->p));
            if (pv < 1e-16)
                snprintf(b[3], sizeof b[3], "< 1e-16");
            else
                snprintf(b[3], sizeof b[3], "%.3g", pv);
        }
        const char *row[5] = {term_name(o, j), b[0], b[1], b[2], b[3]};
        ttab_add(&tt, row);
    }
    int bad = ttab_print(&tt, fp) != 0;
    ttab_free(&tt);
    return bad ? -1 : 0;
}

/* Returns 0, or -1 when out of memory. */
static int write_text(FILE *fp, const etacal_qr_fits *f, const etacal_qr_write_opts *o, const etacal_read_stats *st)
{
    int sem = f->se_method;
    fprintf(fp, "etacal qr: %s\n", o->source ? o->source : "");
    fprintf(fp, "rows: %zu read, %zu used, %zu left out (missing value), %zu malformed skipped\n", st->data_rows,
            st->kept, st->missing, st->bad);
    fprintf(fp, "model: %s ~ 1", o->y_name);
    for (size_t j = 0; j < f->k; j++)
        fprintf(fp, " + %s", term_name(o, j + 1));
    if (sem == ETACAL_SE_POWELL)
        fprintf(fp, "\nstandard errors: Powell kernel sandwich, Hall-Sheather bandwidth (alpha 0.05)\n");
    else if (sem == ETACAL_SE_BOOT)
        fprintf(fp, "\nstandard errors: xy-pair bootstrap, %zu replications\n", f->reps);
    else
        fprintf(fp, "\nstandard errors: none\n");
    for (size_t ti = 0; ti < f->ntau; ti++) {
        const etacal_qr_result *r = &f->res[ti];
        fprintf(fp, "\ntau %g: n %zu, objective %.10g, iterations %d, duality gap %.3g", f->taus[ti], r->n,
                r->objective, r->iterations, r->gap);
        if (sem == ETACAL_SE_POWELL)
            fprintf(fp, ", kernel bandwidth %.6g", f->bandwidth[ti]);
        fputs("\n", fp);
        if (text_terms(fp, f, ti, o) != 0)
            return -1;
    }
    return 0;
}

static void write_csv(FILE *fp, const etacal_qr_fits *f, const etacal_qr_write_opts *o)
{
    fputs("tau,term,estimate,std_error,t,p_value,n,objective,iterations,gap\n", fp);
    for (size_t ti = 0; ti < f->ntau; ti++) {
        const etacal_qr_result *r = &f->res[ti];
        for (size_t j = 0; j < r->p; j++) {
            char tau[ETACAL_NUM_BUFSZ];
            etacal_num_format(f->taus[ti], tau);
            fprintf(fp, "%s,", tau);
            const char *term = term_name(o, j);
            csv_put_field(fp, term, strlen(term), ',');
            fprintf(fp, ",%.12g,", r->coef[j]);
            double se = f->se[ti][j];
            if (!isnan(se)) {
                double tv = tval(r->coef[j], se);
                fprintf(fp, "%.10g,%.10g,%.6g", se, tv, etacal_t_pvalue(tv, (double)(r->n - r->p)));
            } else {
                fputs(",,", fp);
            }
            fprintf(fp, ",%zu,%.12g,%d,%.3g\n", r->n, r->objective, r->iterations, r->gap);
        }
    }
}

static json_t *jint(json_int_t v, int *oom) { return jnew(json_integer(v), oom); }

static json_t *json_term(const etacal_qr_fits *f, size_t ti, size_t j, const etacal_qr_write_opts *o, int *oom)
{
    const etacal_qr_result *r = &f->res[ti];
    double se = f->se[ti][j], tv = tval(r->coef[j], se);
    json_t *t = jnew(json_object(), oom);
    if (!t)
        return NULL;
    jset(t, "term", jstr(term_name(o, j), oom), oom);
    jset(t, "estimate", jnum(r->coef[j], oom), oom);
    jset(t, "std_error", jnum(se, oom), oom);
    jset(t, "t", jnum(tv, oom), oom);
    jset(t, "p_value", jnum(isnan(tv) ? NAN : etacal_t_pvalue(tv, (double)(r->n - r->p)), oom), oom);
    return t;
}

static json_t *json_fit(const etacal_qr_fits *f, size_t ti, const etacal_qr_write_opts *o, int *oom)
{
    const etacal_qr_result *r = &f->res[ti];
    json_t *j = jnew(json_object(), oom);
    if (!j)
        return NULL;
    jset(j, "tau", jnum(f->taus[ti], oom), oom);
    jset(j, "n", jint((json_int_t)r->n, oom), oom);
    jset(j, "objective", jnum(r->objective, oom), oom);
    jset(j, "iterations", jint(r->iterations, oom), oom);
    char g[32]; /* the gap matters to 3 digits; more would be rounding noise */
    snprintf(g, sizeof g, "%.3g", r->gap);
    jset(j, "gap", jnum(strtod(g, NULL), oom), oom);
    jset(j, "bandwidth", jnum(f->bandwidth[ti], oom), oom);
    json_t *terms = jnew(json_array(), oom);
    if (terms)
        for (size_t k = 0; k < r->p; k++)
            jpush(terms, json_term(f, ti, k, o, oom), oom);
    jset(j, "terms", terms, oom);
    return j;
}

static int write_json(FILE *fp, const etacal_qr_fits *f, const etacal_qr_write_opts *o, const etacal_read_stats *st,
                      etacal_error *err)
{
    int oom = 0, sem = f->se_method;
    json_t *root = jnew(json_object(), &oom);
    if (root) {
        jset(root, "etacal", jstr(ETACAL_VERSION, &oom), &oom);
        jset(root, "file", jstr(o->source ? o->source : "", &oom), &oom);
        json_t *rows = jnew(json_object(), &oom);
        if (rows) {
            jset(rows, "read", jint((json_int_t)st->data_rows, &oom), &oom);
            jset(rows, "used", jint((json_int_t)st->kept, &oom), &oom);
            jset(rows, "missing", jint((json_int_t)st->missing, &oom), &oom);
            jset(rows, "malformed", jint((json_int_t)st->bad, &oom), &oom);
        }
        jset(root, "rows", rows, &oom);
        jset(root, "y", jstr(o->y_name, &oom), &oom);
        json_t *xa = jnew(json_array(), &oom);
        if (xa)
            for (size_t j = 0; j < f->k; j++)
                jpush(xa, jstr(term_name(o, j + 1), &oom), &oom);
        jset(root, "x", xa, &oom);
        jset(root, "se", jstr(sem == ETACAL_SE_POWELL ? "powell" : sem == ETACAL_SE_BOOT ? "boot" : "none", &oom),
             &oom);
        jset(root, "reps", sem == ETACAL_SE_BOOT ? jint((json_int_t)f->reps, &oom) : jnew(json_null(), &oom), &oom);
        json_t *fits = jnew(json_array(), &oom);
        if (fits)
            for (size_t ti = 0; ti < f->ntau && !oom; ti++)
                jpush(fits, json_fit(f, ti, o, &oom), &oom);
        jset(root, "fits", fits, &oom);
    }
    int rc = jwrite(root, oom, fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(12), err);
    json_decref(root);
    return rc;
}

int etacal_qr_write(const etacal_qr_fits *f, const etacal_qr_write_opts *opts, int format, const etacal_sink *out,
                    etacal_error *err)
{
    if (!f || !opts || !opts->y_name || (f->k && !opts->x_names) || f->ntau > ETACAL_QR_MAX_LEVELS ||
        f->k > ETACAL_QR_MAX_COVARIATES)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no fits or names to write");
    if (format != ETACAL_FORMAT_TEXT && format != ETACAL_FORMAT_CSV && format != ETACAL_FORMAT_JSON)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown output format %d", format);
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    static const etacal_read_stats none;
    const etacal_read_stats *st = opts->rows ? opts->rows : &none;
    int rc = ETACAL_OK;
    if (format == ETACAL_FORMAT_JSON)
        rc = write_json(fp, f, opts, st, err);
    else if (format == ETACAL_FORMAT_CSV)
        write_csv(fp, f, opts);
    else if (write_text(fp, f, opts, st) != 0)
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return sink_fclose(fp, rc, err);
}
