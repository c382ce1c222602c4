/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fit.c: the fit specification, its checks, and one fit run (read, hold
 * out, weigh, fit, score) shared by every command and binding (fit.h). */
#include "base.h"
#include "results.h"
#include "quote_internal.h"

#include <stdlib.h>
#include <string.h>

struct etacal_fit_run {
    etacal_table *own;          /* the table read by etacal_fit_csv, or NULL */
    const etacal_table *t;      /* the rows (own or the caller's) */
    etacal_quotes *q;
    size_t key_cols[ETACAL_MAX_KEYS], x_cols[ETACAL_QR_MAX_COVARIATES];
    size_t actual_col, pred_col;
    long time_col;
    unsigned char *mask;        /* with a holdout: 1 for the held-out rows */
    size_t held;
    int has_holdout;
    etacal_holdout ho;
};

void etacal_fitspec_init(etacal_fitspec *s)
{
    memset(s, 0, sizeof *s);
    s->method = ETACAL_METHOD_ADD;
    s->min_rows = 200;
    s->split = 0.5;
    s->seed = 1;
}

/* Quote-table columns a key column may not be called (the reader would take
 * the key for them). */
static const char *const reserved[] = {"target", "method", "n", "k", "offset_s", "slope",
                                       "confidence", "coverage_mean", "coverage_low"};

int fit_key_name_reserved(const char *name)
{
    if (strncmp(name, "coef_", 5) == 0)
        return 1;
    for (size_t i = 0; i < sizeof reserved / sizeof *reserved; i++)
        if (strcmp(name, reserved[i]) == 0)
            return 1;
    return 0;
}

static int inval(etacal_error *err, const char *fmt, const char *a)
{
    return etacal_error_set(err, ETACAL_EINVAL, NULL, fmt, a);
}

int etacal_fitspec_check(const etacal_fitspec *s, etacal_error *err)
{
    if (!s)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no fit specification");
    if (!s->actual || !s->pred || !s->actual[0] || !s->pred[0])
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--actual and --pred are required");
    if (strcmp(s->actual, s->pred) == 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--actual and --pred name the same column");
    if (s->nkeys > ETACAL_MAX_KEYS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--by takes up to %d comma-separated column names",
                                ETACAL_MAX_KEYS);
    if (s->nkeys && !s->keys)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no key names");
    for (size_t j = 0; j < s->nkeys; j++)
        if (!s->keys[j] || !s->keys[j][0])
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "--by names an empty column");
    for (size_t j = 0; j < s->nkeys; j++)
        if (strncmp(s->keys[j], "coef_", 5) == 0)
            return inval(err, "a key column cannot be called '%s' (coef_ columns hold coefficients)", s->keys[j]);
    for (size_t j = 0; j < s->nkeys; j++) {
        const char *k = s->keys[j];
        if (strcmp(k, s->actual) == 0 || strcmp(k, s->pred) == 0)
            return inval(err, "'%s' cannot be both a key and a duration column", k);
        for (size_t i = 0; i < sizeof reserved / sizeof *reserved; i++)
            if (strcmp(k, reserved[i]) == 0)
                return inval(err, "a key column cannot be called '%s' (a quote-table column)", k);
        for (size_t i = 0; i < j; i++)
            if (strcmp(s->keys[i], k) == 0)
                return inval(err, "--by names '%s' twice", k);
    }
    if (s->method != ETACAL_METHOD_ADD && s->method != ETACAL_METHOD_RATIO && s->method != ETACAL_METHOD_QR)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--method must be add, ratio or qr");
    if (s->nx && s->method != ETACAL_METHOD_QR)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--x goes with --method qr");
    if (s->nx > ETACAL_QR_MAX_COVARIATES - 1)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--x takes up to %d comma-separated column names",
                                ETACAL_QR_MAX_COVARIATES - 1);
    if (s->nx && !s->xs)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no covariate names");
    for (size_t j = 0; j < s->nx; j++) {
        const char *x = s->xs[j];
        if (!x || !x[0])
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "--x names an empty column");
        if (strcmp(x, s->actual) == 0 || strcmp(x, s->pred) == 0)
            return inval(err, "--x '%s' is already the actual or the prediction", x);
        for (size_t i = 0; i < s->nkeys; i++)
            if (strcmp(x, s->keys[i]) == 0)
                return inval(err, "'%s' cannot be both a key and a covariate", x);
        for (size_t i = 0; i < j; i++)
            if (strcmp(s->xs[i], x) == 0)
                return inval(err, "--x names '%s' twice", x);
    }
    if (s->ntargets > ETACAL_FIT_MAX_TARGETS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d targets", ETACAL_FIT_MAX_TARGETS);
    if (s->ntargets && !s->targets)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no targets");
    for (size_t i = 0; i < s->ntargets; i++)
        if (!(s->targets[i] > 0 && s->targets[i] < 1))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "--target takes on-time rates in (0,1), not %g",
                                    s->targets[i]);
    if (s->split != 0 && !(s->split > 0 && s->split < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--split takes a share in (0,1)");
    if (s->holdout != 0 && !(s->holdout > 0 && s->holdout < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--holdout takes a share in (0,1), such as 0.2");
    if (s->confidence != 0 && !(s->confidence > 0 && s->confidence < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--confidence takes a probability in (0,1), such as 0.95");
    if (s->threads < 0 && s->threads != ETACAL_THREADS_AUTO)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "threads must be 0 or more, or ETACAL_THREADS_AUTO");
    if (!(s->half_life >= 0))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--half-life takes a positive duration");
    if (s->time && !s->time[0])
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--time names an empty column");
    if (s->time && !s->holdout && !s->half_life)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--time goes with --holdout or --half-life");
    if (s->half_life && !s->time)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--half-life needs --time (the age of each row)");
    if (s->half_life && s->confidence > 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "--half-life does not go with --confidence");
    if (s->time) {
        if (strcmp(s->time, s->actual) == 0 || strcmp(s->time, s->pred) == 0)
            return inval(err, "--time '%s' is already the actual or the prediction", s->time);
        for (size_t i = 0; i < s->nkeys; i++)
            if (strcmp(s->time, s->keys[i]) == 0)
                return inval(err, "'%s' cannot be both a key and the time", s->time);
        for (size_t i = 0; i < s->nx; i++)
            if (strcmp(s->time, s->xs[i]) == 0)
                return inval(err, "'%s' cannot be both a covariate and the time", s->time);
    }
    return ETACAL_OK;
}

size_t etacal_fitspec_columns(const etacal_fitspec *s, etacal_colspec *cols)
{
    unsigned flags = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_NONNEG;
    cols[0] = (etacal_colspec){s->actual, ETACAL_COL_NUM, flags, "duration"};
    cols[1] = (etacal_colspec){s->pred, ETACAL_COL_NUM,
                               flags | (s->method == ETACAL_METHOD_RATIO ? ETACAL_NUM_POSITIVE : 0u), "prediction"};
    size_t ncol = 2;
    for (size_t j = 0; j < s->nkeys; j++)
        cols[ncol++] = (etacal_colspec){s->keys[j], ETACAL_COL_KEY, 0, NULL};
    for (size_t j = 0; j < s->nx; j++)
        cols[ncol++] = (etacal_colspec){s->xs[j], ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE,
                                        "covariate"};
    if (s->time)
        cols[ncol++] = (etacal_colspec){s->time, ETACAL_COL_NUM,
                                        ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE | ETACAL_NUM_TIME, "timestamp"};
    return ncol;
}

/* The column of t called name with the given type, or an error. */
static int find_col(const etacal_table *t, const char *name, int want_key, size_t *col, etacal_error *err)
{
    for (size_t c = 0; c < etacal_table_cols(t); c++) {
        if (strcmp(etacal_table_col_name(t, c), name) != 0)
            continue;
        int is_key = etacal_table_key_ids(t, c, NULL) != NULL;
        if (is_key != want_key)
            return etacal_error_set(err, ETACAL_EINVAL, etacal_table_source(t), "column '%s' is not a %s column",
                                    name, want_key ? "key" : "numeric");
        *col = c;
        return ETACAL_OK;
    }
    return etacal_error_set(err, ETACAL_EINVAL, etacal_table_source(t), "no column '%s' in the table", name);
}

void etacal_fit_run_destroy(etacal_fit_run *r)
{
    if (!r)
        return;
    holdout_release(&r->ho);
    free(r->mask);
    etacal_quotes_destroy(r->q);
    etacal_table_destroy(r->own);
    free(r);
}

int etacal_fit_table(const etacal_fitspec *s, const etacal_table *t, etacal_fit_run **out, etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the result");
    *out = NULL;
    int rc = etacal_fitspec_check(s, err);
    if (rc)
        return rc;
    if (!t)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no table");
    etacal_fit_run *r = calloc(1, sizeof *r);
    if (!r)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    r->t = t;
    r->time_col = -1;
    double *wts = NULL;
    const char *src = etacal_table_source(t);
    if ((rc = find_col(t, s->actual, 0, &r->actual_col, err)) || (rc = find_col(t, s->pred, 0, &r->pred_col, err)))
        goto done;
    for (size_t j = 0; j < s->nkeys; j++)
        if ((rc = find_col(t, s->keys[j], 1, &r->key_cols[j], err)))
            goto done;
    for (size_t j = 0; j < s->nx; j++)
        if ((rc = find_col(t, s->xs[j], 0, &r->x_cols[j], err)))
            goto done;
    if (s->time) {
        size_t tc;
        if ((rc = find_col(t, s->time, 0, &tc, err)))
            goto done;
        r->time_col = (long)tc;
    }
    static const double default_target = 0.9;
    etacal_fit_opts fo = {0};
    fo.method = s->method;
    fo.targets = s->ntargets ? s->targets : &default_target;
    fo.ntargets = s->ntargets ? s->ntargets : 1;
    fo.min_rows = s->min_rows;
    fo.x_cols = r->x_cols;
    fo.nx = s->nx;
    fo.split = s->split;
    fo.seed = s->seed;
    fo.confidence = s->confidence;
    fo.threads = s->threads;
    size_t n = etacal_table_rows(t);
    if (s->holdout > 0) {
        r->has_holdout = 1;
        r->mask = malloc(n ? n : 1);
        if (!r->mask) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        r->held = etacal_holdout_mask(t, r->time_col, s->holdout, s->seed, r->mask);
        if (r->held == ETACAL_HOLDOUT_NOMEM) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        if (r->held == 0 || r->held == n) {
            rc = etacal_error_set(err, ETACAL_ENUM, src, "--holdout %g leaves %s rows to %s", s->holdout,
                                  r->held == 0 ? "no" : "all", r->held == 0 ? "hold out" : "fit on");
            goto done;
        }
        fo.mask = r->mask;
    }
    if (s->half_life > 0) {
        wts = malloc((n ? n : 1) * sizeof *wts);
        if (!wts) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        etacal_recency_weights(etacal_table_num(t, (size_t)r->time_col), n, r->mask, s->half_life, wts);
        fo.weights = wts;
    }
    if ((rc = etacal_quotes_fit(t, r->actual_col, r->pred_col, r->key_cols, s->nkeys, &fo, &r->q, err)) != 0)
        goto done;
    if (r->mask) {
        /* the mask fitted on the kept rows; flipped, it marks the held-out ones */
        for (size_t i = 0; i < n; i++)
            r->mask[i] = !r->mask[i];
        rc = holdout_fill(r->q, t, r->actual_col, r->pred_col, r->key_cols, r->x_cols, r->mask, &r->ho,
                                   err);
    }
done:
    free(wts);
    if (rc) {
        etacal_fit_run_destroy(r);
        return rc;
    }
    *out = r;
    return ETACAL_OK;
}

int etacal_fit_csv(const etacal_fitspec *s, const char *path, const etacal_read_opts *ro, etacal_fit_run **out,
                   etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the result");
    *out = NULL;
    int rc = etacal_fitspec_check(s, err);
    if (rc)
        return rc;
    etacal_colspec cols[ETACAL_FIT_MAX_COLS];
    size_t ncol = etacal_fitspec_columns(s, cols);
    etacal_table *t = NULL;
    if ((rc = etacal_table_read_csv(path, cols, ncol, ro, &t, err)) != 0)
        return rc;
    if ((rc = etacal_fit_table(s, t, out, err)) != 0) {
        etacal_table_destroy(t);
        return rc;
    }
    (*out)->own = t;
    return ETACAL_OK;
}

const etacal_table *etacal_fit_run_rows(const etacal_fit_run *r) { return r->t; }
const etacal_quotes *etacal_fit_run_quotes(const etacal_fit_run *r) { return r->q; }
size_t etacal_fit_run_held(const etacal_fit_run *r) { return r->held; }
const unsigned char *etacal_fit_run_held_mask(const etacal_fit_run *r) { return r->mask; }
const etacal_holdout *etacal_fit_run_holdout(const etacal_fit_run *r) { return r->has_holdout ? &r->ho : NULL; }
const size_t *etacal_fit_run_key_cols(const etacal_fit_run *r) { return r->key_cols; }
const size_t *etacal_fit_run_x_cols(const etacal_fit_run *r) { return r->x_cols; }
size_t etacal_fit_run_actual_col(const etacal_fit_run *r) { return r->actual_col; }
size_t etacal_fit_run_pred_col(const etacal_fit_run *r) { return r->pred_col; }
long etacal_fit_run_time_col(const etacal_fit_run *r) { return r->time_col; }
