/* SPDX-License-Identifier: GPL-3.0-or-later */
/* apply.c: streaming a file of orders through a quote table.
 *
 * Records are copied through byte for byte (csvstream's raw mode), so the
 * output differs from the input only by the appended promise columns.  Only
 * one record is held at a time: memory is flat in the number of orders. */
#include "base.h"
#include "stream.h"
#include "quote_internal.h"
#include "csvio.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

double ceil_scaled(double x, double scale)
{
    /* A value within 1e-9 units of a whole unit is taken as that unit (the
     * noise of decimal data in binary); otherwise round up.  Dividing the
     * whole number by the scale gives the double nearest to the decimal, so
     * it prints short. */
    double u = x * scale;
    double r = nearbyint(u);
    if (fabs(u - r) <= 1e-9 * (fabs(u) > 1 ? fabs(u) : 1))
        return r / scale;
    return ceil(u) / scale;
}

double etacal_promise_round(double promise, double round_s)
{
    if (!isfinite(promise))
        return promise;
    if (round_s > 0) {
        /* A promise already on the grid, up to decimal noise (2.1 / 0.3 is
         * 7.000000000000001), stays where it is. */
        double q = promise / round_s, r = nearbyint(q);
        if (fabs(q - r) <= 1e-9 * (fabs(q) > 1 ? fabs(q) : 1))
            return r * round_s;
        return ceil(q) * round_s;
    }
    return ceil_scaled(promise, 1000);
}

typedef struct applier {
    const etacal_quotes *q;
    const etacal_apply_opts *o;
    etacal_apply_stats *st;
    FILE *out;
    const char *path;
    etacal_error *err;
    char delim;
    rowbuf rb;
    int header_done;
    size_t nfields;
    long c_pred, c_actual;
    long *c_keys;         /* order column of each table key */
    long c_cov[ETACAL_QR_MAX_COVARIATES]; /* order column of each coef_ covariate */
    double cov[ETACAL_QR_MAX_COVARIATES];
    etacal_quote_index *ix; /* the table's rows by segment */
    size_t nsel;
    size_t sel[ETACAL_APPLY_MAX_TARGETS];
} applier;

static void on_field(void *ud, size_t col, const char *s, size_t len)
{
    (void)col;
    rowbuf_add(&((applier *)ud)->rb, s, len);
}

static int fail(applier *a, size_t line, int code, const char *fmt, const char *arg)
{
    char where[128];
    format_where(where, sizeof where, a->path, line);
    etacal_error_set(a->err, code, where, fmt, arg);
    return 1;
}

static int header(applier *a, size_t line, const char *raw, size_t rawlen)
{
    rowbuf *b = &a->rb;
    a->c_pred = a->c_actual = -1;
    const etacal_quotes *q = a->q;
    a->c_keys = malloc((q->nkeys ? q->nkeys : 1) * sizeof *a->c_keys);
    if (!a->c_keys)
        return fail(a, line, ETACAL_ENOMEM, "out of memory%s", "");
    for (size_t j = 0; j < q->nkeys; j++)
        a->c_keys[j] = -1;
    for (size_t j = 0; j < q->ncoef; j++)
        a->c_cov[j] = -1;
    char name[ETACAL_NUM_BUFSZ + 16];
    for (size_t i = 0; i < b->nf; i++) {
        const char *h = rowbuf_get(b, i);
        if (strcmp(h, a->o->pred_col) == 0)
            a->c_pred = (long)i;
        if (a->o->actual_col && strcmp(h, a->o->actual_col) == 0)
            a->c_actual = (long)i;
        for (size_t j = 0; j < q->nkeys; j++)
            if (strcmp(h, q->key_names[j]) == 0)
                a->c_keys[j] = (long)i;
        for (size_t j = 0; j < q->ncoef; j++)
            if (strcmp(h, q->coef_names[j]) == 0)
                a->c_cov[j] = (long)i;
        for (size_t t = 0; t < a->nsel; t++) {
            if (a->nsel == 1) {
                snprintf(name, sizeof name, "promise_s");
            } else {
                char pct[ETACAL_NUM_BUFSZ];
                etacal_percent_label(q->targets[a->sel[t]], pct);
                snprintf(name, sizeof name, "promise_s_%s", pct);
            }
            if (strcmp(h, name) == 0)
                return fail(a, line, ETACAL_EINVAL, "the orders already have a column '%s'", name);
        }
    }
    if (a->c_pred < 0)
        return fail(a, line, ETACAL_EINVAL, "no column '%s' in the header", a->o->pred_col);
    if (a->o->actual_col && a->c_actual < 0)
        return fail(a, line, ETACAL_EINVAL, "no column '%s' in the header", a->o->actual_col);
    for (size_t j = 0; j < q->nkeys; j++)
        if (a->c_keys[j] < 0)
            return fail(a, line, ETACAL_EINVAL,
                        "no column '%s' in the header (a key column of the quote table)",
                        q->key_names[j]);
    for (size_t j = 0; j < q->ncoef; j++)
        if (a->c_cov[j] < 0)
            return fail(a, line, ETACAL_EINVAL,
                        "no column '%s' in the header (a covariate of the quote table's regression)",
                        q->coef_names[j]);
    a->nfields = b->nf;
    const char *term = csv_put_record(a->out, raw, rawlen);
    for (size_t t = 0; t < a->nsel; t++) {
        putc(a->delim, a->out);
        if (a->nsel == 1) {
            fputs("promise_s", a->out);
        } else {
            char pct[ETACAL_NUM_BUFSZ];
            etacal_percent_label(q->targets[a->sel[t]], pct);
            fprintf(a->out, "promise_s_%s", pct);
        }
    }
    fputs(term, a->out);
    return 0;
}

/* The most specific table row for target ti of the current record, or -1;
 * *level_out is the number of keys matched by value. */
static long lookup(applier *a, size_t ti, size_t *level_out)
{
    const char *keys[ETACAL_MAX_KEYS];
    size_t lens[ETACAL_MAX_KEYS];
    for (size_t j = 0; j < a->q->nkeys; j++) {
        keys[j] = rowbuf_get(&a->rb, (size_t)a->c_keys[j]);
        lens[j] = rowbuf_len(&a->rb, (size_t)a->c_keys[j]);
    }
    return etacal_quote_index_lookup(a->ix, keys, lens, ti, level_out);
}

/* "column 'x' is not numeric: '1e400' (beyond the range of a double)" */
static void bad_number(char *msg, size_t size, const char *col, const char *s, size_t len)
{
    const char *why = num_bad_reason(s, len);
    snprintf(msg, size, "column '%.40s' is not numeric: '%.*s%s'%s%s%s", col, len > 40 ? 40 : (int)len, s,
             len > 40 ? "..." : "", why ? " (" : "", why ? why : "", why ? ")" : "");
}

static void put_promise(applier *a, double v) { put_ms(a->out, v); }

static int on_row(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen)
{
    applier *a = ud;
    rowbuf *b = &a->rb;
    int stop = 0;
    if (b->oom) {
        stop = fail(a, line, ETACAL_ENOMEM, "out of memory%s", "");
        goto out;
    }
    if (!a->header_done) {
        a->header_done = 1;
        stop = header(a, line, raw, rawlen);
        goto out;
    }
    etacal_apply_stats *st = a->st;
    const char *problem = NULL;
    char msg[160];
    double pred = NAN, actual = NAN;
    int missing = 0;
    if (nfields != a->nfields) {
        snprintf(msg, sizeof msg, "%zu fields, but the header has %zu", nfields, a->nfields);
        problem = msg;
    } else {
        /* Keys as fit reads them: a key that fit would refuse cannot be
         * promised by a row of its own. */
        for (size_t j = 0; j < a->q->nkeys && !problem; j++) {
            size_t cj = (size_t)a->c_keys[j], len = rowbuf_len(b, cj);
            if (!utf8_valid(rowbuf_get(b, cj), len) || memchr(rowbuf_get(b, cj), '\x1f', len)) {
                snprintf(msg, sizeof msg, "a value of key column '%.60s' is not valid UTF-8%s", a->q->key_names[j],
                         utf8_valid(rowbuf_get(b, cj), len) ? " text (it holds the control character 0x1f)" : "");
                problem = msg;
            }
        }
        int k = ETACAL_NUM_MISSING;
        if (!problem)
            k = etacal_num_parse(rowbuf_get(b, (size_t)a->c_pred), rowbuf_len(b, (size_t)a->c_pred), &pred);
        if (problem) {
            /* a key already: reported below */
        } else if (k == ETACAL_NUM_BAD) {
            bad_number(msg, sizeof msg, a->o->pred_col, rowbuf_get(b, (size_t)a->c_pred),
                       rowbuf_len(b, (size_t)a->c_pred));
            problem = msg;
        } else if (k == ETACAL_NUM_MISSING) {
            missing = 1;
        } else if (!isfinite(pred) || pred < 0) {
            snprintf(msg, sizeof msg, "column '%s': prediction is %s", a->o->pred_col,
                     isfinite(pred) ? "negative" : "not finite");
            problem = msg;
        } else if (a->q->method == ETACAL_METHOD_RATIO && !(pred > 0)) {
            snprintf(msg, sizeof msg, "column '%s': method ratio needs a prediction > 0", a->o->pred_col);
            problem = msg;
        }
        for (size_t j = 0; j < a->q->ncoef && !problem && !missing; j++) {
            size_t cj = (size_t)a->c_cov[j];
            k = etacal_num_parse(rowbuf_get(b, cj), rowbuf_len(b, cj), &a->cov[j]);
            if (k == ETACAL_NUM_MISSING) {
                missing = 1;
            } else if (k == ETACAL_NUM_BAD || !isfinite(a->cov[j])) {
                snprintf(msg, sizeof msg, "column '%s' is not a finite number: '%.40s'", a->q->coef_names[j],
                         rowbuf_get(b, cj));
                problem = msg;
            }
        }
        if (!problem && a->c_actual >= 0) {
            k = etacal_num_parse(rowbuf_get(b, (size_t)a->c_actual), rowbuf_len(b, (size_t)a->c_actual),
                                 &actual);
            if (k == ETACAL_NUM_BAD) {
                bad_number(msg, sizeof msg, a->o->actual_col, rowbuf_get(b, (size_t)a->c_actual),
                           rowbuf_len(b, (size_t)a->c_actual));
                problem = msg;
            }
        }
    }
    if (problem) {
        if (a->o->bad_rows != ETACAL_BAD_ROWS_SKIP) {
            stop = fail(a, line, ETACAL_EPARSE, "%s", problem);
            goto out;
        }
        if (st->bad++ == 0)
            st->first_bad_line = line;
        missing = 1;
    } else if (missing) {
        st->missing_pred++;
    }
    st->rows++;
    const char *term = csv_put_record(a->out, raw, rawlen);
    int have_actual = !missing && isfinite(actual);
    if (!missing) {
        st->promised++;
        st->pred_sum += pred;
    }
    if (have_actual) {
        st->with_actual++;
        st->bare_hits += actual <= pred;
    }
    int clamped = 0, floored = 0;
    for (size_t t = 0; t < a->nsel; t++) {
        putc(a->delim, a->out);
        if (missing)
            continue;
        size_t level = 0;
        long r = lookup(a, a->sel[t], &level);
        int moved = 0, low = 0;
        double raw_v = etacal_quote_index_promise(a->ix, r, pred, a->cov, &moved, &low);
        clamped |= moved;
        floored |= low;
        double v = etacal_promise_round(raw_v, a->o->round_s);
        if (!isfinite(v)) {
            /* finite table values can still overflow together */
            stop = fail(a, line, ETACAL_ENUM, "the promise overflows (offset_s + slope x prediction%s is not finite)",
                        a->q->ncoef ? " + coefficients x covariates" : "");
            goto out;
        }
        if (t == 0 && level < a->q->nkeys)
            st->fallback++;
        put_promise(a, v);
        st->promise_sum[t] += v;
        if (have_actual)
            st->hits[t] += actual <= v;
    }
    st->clamped += clamped;
    st->floored += floored;
    fputs(term, a->out);
    if (ferror(a->out))
        stop = fail(a, line, ETACAL_EIO, "write failed%s", "");
out:
    rowbuf_reset(b);
    return stop;
}

int apply_csv(const etacal_quotes *q, const char *in_path, FILE *out,
                     const etacal_apply_opts *opts, etacal_apply_stats *stats, etacal_error *err)
{
    int rc = ETACAL_OK;
    applier a;
    memset(&a, 0, sizeof a);
    memset(stats, 0, sizeof *stats);
    a.q = q;
    a.o = opts;
    a.st = stats;
    a.out = out;
    a.path = in_path;
    a.err = err;
    a.delim = opts->delim ? opts->delim : ',';
    if (!opts->pred_col)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no prediction column given");
    if (opts->targets) {
        if (opts->ntargets == 0 || opts->ntargets > ETACAL_APPLY_MAX_TARGETS)
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "between 1 and %d targets",
                                    ETACAL_APPLY_MAX_TARGETS);
        for (size_t t = 0; t < opts->ntargets; t++) {
            if (opts->targets[t] >= q->ntargets)
                return etacal_error_set(err, ETACAL_EINVAL, NULL, "target index out of range");
            a.sel[t] = opts->targets[t];
        }
        a.nsel = opts->ntargets;
    } else {
        if (q->ntargets > ETACAL_APPLY_MAX_TARGETS)
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "the table has more than %d targets",
                                    ETACAL_APPLY_MAX_TARGETS);
        for (size_t t = 0; t < q->ntargets; t++)
            a.sel[t] = t;
        a.nsel = q->ntargets;
    }
    if (!(opts->round_s >= 0) || !isfinite(opts->round_s))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "rounding must be a finite number of seconds >= 0");
    if ((rc = etacal_quote_index_create(q, &a.ix, err)) != 0)
        goto done;
    for (size_t t = 0; t < a.nsel; t++) {
        const char *any[ETACAL_MAX_KEYS];
        for (size_t j = 0; j < q->nkeys; j++)
            any[j] = "*";
        size_t level = 0;
        if (etacal_quote_index_lookup(a.ix, any, NULL, a.sel[t], &level) < 0) {
            rc = etacal_error_set(err, ETACAL_EINVAL, NULL, "the quote table has no global row for target %g",
                                  q->targets[a.sel[t]]);
            goto done;
        }
    }
    csvstream_cb cb = {on_field, on_row, &a, NULL, NULL};
    rc = csvstream_run(in_path, a.delim, 1, &cb, NULL, err);
    if (rc)
        goto done;
    if (!a.header_done)
        rc = etacal_error_set(err, ETACAL_EPARSE, in_path, "empty file: expected a header row");

done:
    rowbuf_free(&a.rb);
    etacal_quote_index_destroy(a.ix);
    free(a.c_keys);
    return rc;
}
