/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_read.c: reading a quote table back from CSV and checking that it
 * can be applied, as a hand-edited file may not: the header (key columns,
 * then 'target' and the known columns; others, such as a note, are
 * ignored), one known method, finite numbers, targets in
 * (0,1), 1 <= k <= n, the slope and offset each method implies, key values
 * that are UTF-8 text, key levels of the form (values..., *, ...*), an
 * optional cell column (own on full key combinations, rest, all on the
 * global row), no
 * duplicate rows and a global row for every target.  Every defect is
 * reported with the line of the row (or header) that has it. */
#include "base.h"
#include "csvio.h"
#include "quote_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

typedef struct qrow {
    uint32_t seg;
    double target;
    int method;
    size_t n, k, line;
    double offset_s, slope;
    size_t coef_off; /* into the reader's coefficient store (and, times 2, the range store) */
    int cell;        /* ETACAL_CELL_*; unknown without a 'cell' column */
} qrow;

typedef struct qreader {
    const char *path;
    etacal_error *err;
    rowbuf rb;
    int header_done;
    size_t nfields;
    size_t nkeys;
    long c_target, c_method, c_n, c_k, c_offset, c_slope;
    long c_conf, c_covmean, c_covlow; /* written with --confidence */
    long c_cell;                      /* own, rest or all (optional) */
    size_t header_line;
    char **key_names;
    strdict segs; /* joined key texts (unit separator between) -> segment */
    rowbuf joined;
    qrow *rows;
    size_t nrows, cap;
    int method;
    size_t ncoef;
    long coef_col[ETACAL_QR_MAX_COVARIATES];
    char *coef_name[ETACAL_QR_MAX_COVARIATES];
    double *coefs;
    size_t ncoefs, coefcap;
    /* min_<name>, max_<name>: the covariates' ranges (all or none) */
    long range_col[2][ETACAL_QR_MAX_COVARIATES];
    size_t nrange;     /* min_/max_ columns in the header */
    double *ranges;    /* per row: ncoef minima, then ncoef maxima */
    size_t rangecap;
    double confidence; /* the 'confidence' column's one value, or 0 */
} qreader;

static void on_field(void *ud, size_t col, const char *s, size_t len)
{
    (void)col;
    rowbuf_add(&((qreader *)ud)->rb, s, len);
}

static int fail(qreader *r, size_t line, int code, const char *msg, const char *arg)
{
    char where[128];
    format_where(where, sizeof where, r->path, line);
    etacal_error_set(r->err, code, where, msg, arg);
    return 1;
}

static int header(qreader *r, size_t line)
{
    rowbuf *b = &r->rb;
    r->c_target = r->c_method = r->c_n = r->c_k = r->c_offset = r->c_slope = -1;
    r->c_conf = r->c_covmean = r->c_covlow = r->c_cell = -1;
    r->header_line = line;
    for (size_t i = 0; i < b->nf; i++) {
        const char *h = rowbuf_get(b, i);
        long *slot = NULL;
        char num[24]; /* the column's number, from 1, for messages */
        snprintf(num, sizeof num, "%zu", i + 1);
        if (!h[0])
            return fail(r, line, ETACAL_EPARSE, "column %s of the header has no name", num);
        if (!utf8_valid(h, rowbuf_len(b, i)))
            return fail(r, line, ETACAL_EPARSE, "column %s of the header is not UTF-8 text", num);
        if (strcmp(h, "target") == 0)
            slot = &r->c_target;
        else if (strcmp(h, "method") == 0)
            slot = &r->c_method;
        else if (strcmp(h, "n") == 0)
            slot = &r->c_n;
        else if (strcmp(h, "k") == 0)
            slot = &r->c_k;
        else if (strcmp(h, "offset_s") == 0)
            slot = &r->c_offset;
        else if (strcmp(h, "slope") == 0)
            slot = &r->c_slope;
        else if (strcmp(h, "confidence") == 0)
            slot = &r->c_conf;
        else if (strcmp(h, "coverage_mean") == 0)
            slot = &r->c_covmean;
        else if (strcmp(h, "coverage_low") == 0)
            slot = &r->c_covlow;
        else if (strcmp(h, "cell") == 0 && r->c_target >= 0) /* before 'target': a key */
            slot = &r->c_cell;
        if (slot) {
            if (*slot >= 0)
                return fail(r, line, ETACAL_EPARSE, "column '%s' appears twice in the header", h);
            *slot = (long)i;
        }
        if (strncmp(h, "coef_", 5) == 0 && r->c_target >= 0) {
            if (r->ncoef >= ETACAL_QR_MAX_COVARIATES)
                return fail(r, line, ETACAL_EPARSE, "too many coef_ columns (at most 16)%s", "");
            if (!h[5])
                return fail(r, line, ETACAL_EPARSE, "column 'coef_' names no covariate%s", "");
            for (size_t j = 0; j < r->ncoef; j++)
                if (strcmp(r->coef_name[j], h + 5) == 0)
                    return fail(r, line, ETACAL_EPARSE, "column '%s' appears twice in the header", h);
            size_t len = strlen(h + 5);
            r->coef_name[r->ncoef] = malloc(len + 1);
            if (!r->coef_name[r->ncoef])
                return fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
            memcpy(r->coef_name[r->ncoef], h + 5, len + 1);
            r->coef_col[r->ncoef++] = (long)i;
        }
    }
    /* min_<name> and max_<name>, matched to the coef_ columns now that all
     * of them are known */
    for (size_t j = 0; j < ETACAL_QR_MAX_COVARIATES; j++)
        r->range_col[0][j] = r->range_col[1][j] = -1;
    for (size_t i = r->c_target >= 0 ? (size_t)r->c_target + 1 : b->nf; i < b->nf; i++) {
        const char *h = rowbuf_get(b, i);
        int m = strncmp(h, "min_", 4) == 0 ? 0 : strncmp(h, "max_", 4) == 0 ? 1 : -1;
        if (m < 0)
            continue;
        size_t j = 0;
        while (j < r->ncoef && strcmp(r->coef_name[j], h + 4) != 0)
            j++;
        if (j == r->ncoef)
            return fail(r, line, ETACAL_EPARSE,
                        "column '%s' is the range of no covariate (no coef_ column of that name)", h);
        if (r->range_col[m][j] >= 0)
            return fail(r, line, ETACAL_EPARSE, "column '%s' appears twice in the header", h);
        r->range_col[m][j] = (long)i;
        r->nrange++;
    }
    for (size_t j = 0; j < r->ncoef && r->nrange; j++)
        for (int m = 0; m < 2; m++)
            if (r->range_col[m][j] < 0) {
                char name[300];
                snprintf(name, sizeof name, "%s_%s", m ? "max" : "min", r->coef_name[j]);
                return fail(r, line, ETACAL_EPARSE,
                            "no column '%s': the covariates' ranges (min_, max_) are given for all or none", name);
            }
    static const char *req[] = {"target", "method", "n", "offset_s", "slope"};
    long got[] = {r->c_target, r->c_method, r->c_n, r->c_offset, r->c_slope};
    for (size_t i = 0; i < 5; i++)
        if (got[i] < 0)
            return fail(r, line, ETACAL_EPARSE, "not a quote table: no column '%s' in the header",
                        req[i]);
    r->nkeys = (size_t)r->c_target;
    if (r->nkeys > ETACAL_MAX_KEYS)
        return fail(r, line, ETACAL_EPARSE, "more than 16 key columns before '%s'", "target");
    _Static_assert(ETACAL_MAX_KEYS == 16, "the message above says 16");
    long opt[] = {r->c_k, r->c_conf, r->c_covmean, r->c_covlow};
    static const char *optname[] = {"k", "confidence", "coverage_mean", "coverage_low"};
    for (size_t i = 0; i < 4; i++)
        if (opt[i] >= 0 && opt[i] < r->c_target)
            return fail(r, line, ETACAL_EPARSE, "column '%s' must come after 'target' (the key columns come first)",
                        optname[i]);
    for (size_t i = 0; i < 5; i++)
        if (got[i] < r->c_target)
            return fail(r, line, ETACAL_EPARSE, "column '%s' must come after 'target' (the key columns come first)",
                        req[i]);
    r->key_names = calloc(r->nkeys ? r->nkeys : 1, sizeof *r->key_names);
    if (!r->key_names)
        return fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
    for (size_t j = 0; j < r->nkeys; j++) {
        for (size_t i = 0; i < j; i++)
            if (strcmp(rowbuf_get(b, i), rowbuf_get(b, j)) == 0)
                return fail(r, line, ETACAL_EPARSE, "key column '%s' appears twice", rowbuf_get(b, j));
        size_t len = rowbuf_len(b, j);
        r->key_names[j] = malloc(len + 1);
        if (!r->key_names[j])
            return fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
        memcpy(r->key_names[j], rowbuf_get(b, j), len + 1);
    }
    r->nfields = b->nf;
    return 0;
}

static int number(qreader *r, size_t line, long col, const char *name, double *v)
{
    const char *s = rowbuf_get(&r->rb, (size_t)col);
    int k = etacal_num_parse(s, rowbuf_len(&r->rb, (size_t)col), v);
    if (k != ETACAL_NUM_VALUE || !isfinite(*v)) {
        /* what was there, shortened: 1e400 and 12,5 are numbers to a reader */
        size_t len = rowbuf_len(&r->rb, (size_t)col);
        char msg[200];
        snprintf(msg, sizeof msg, "'%.60s' must be a finite number, got '%.*s%s'", name, len > 40 ? 40 : (int)len, s,
                 len > 40 ? "..." : "");
        return fail(r, line, ETACAL_EPARSE, "%s", msg);
    }
    return 0;
}

static int count(qreader *r, size_t line, long col, const char *name, size_t *out)
{
    double v;
    if (number(r, line, col, name, &v))
        return 1;
    if (!(v >= 0 && v == floor(v) && v < 9e15))
        return fail(r, line, ETACAL_EPARSE, "'%s' must be a whole number >= 0", name);
    *out = (size_t)v;
    return 0;
}

static int on_row(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen)
{
    (void)raw;
    (void)rawlen;
    qreader *r = ud;
    rowbuf *b = &r->rb;
    int stop = 0;
    if (b->oom) {
        stop = fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
        goto out;
    }
    if (!r->header_done) {
        r->header_done = 1;
        stop = header(r, line);
        goto out;
    }
    if (nfields != r->nfields) {
        char msg[96];
        snprintf(msg, sizeof msg, "%zu fields, but the header has %zu", nfields, r->nfields);
        stop = fail(r, line, ETACAL_EPARSE, "%s", msg);
        goto out;
    }
    qrow q = {0};
    q.line = line;
    if ((stop = number(r, line, r->c_target, "target", &q.target)))
        goto out;
    if (!(q.target > 0 && q.target < 1)) {
        stop = fail(r, line, ETACAL_EPARSE, "target must be an on-time rate in (0,1)%s", "");
        goto out;
    }
    q.method = etacal_method_parse(rowbuf_get(b, (size_t)r->c_method));
    if (q.method < 0) {
        stop = fail(r, line, ETACAL_EPARSE, "unknown method '%s' (expected add, ratio or qr)",
                    rowbuf_get(b, (size_t)r->c_method));
        goto out;
    }
    if (r->nrows && q.method != r->method) {
        stop = fail(r, line, ETACAL_EPARSE, "method '%s' differs from the table's first row",
                    rowbuf_get(b, (size_t)r->c_method));
        goto out;
    }
    r->method = q.method;
    if ((stop = count(r, line, r->c_n, "n", &q.n)))
        goto out;
    if (q.n == 0) {
        stop = fail(r, line, ETACAL_EPARSE, "n must be at least 1 (the calibration rows of the segment)%s", "");
        goto out;
    }
    /* k may be left empty (unknown, as in a table written by hand): 0 */
    int k_given = r->c_k >= 0 && rowbuf_len(b, (size_t)r->c_k) > 0;
    if (k_given && (stop = count(r, line, r->c_k, "k", &q.k)))
        goto out;
    if (k_given && !(q.k >= 1 && q.k <= q.n)) {
        char msg[96];
        snprintf(msg, sizeof msg, "k must be a rank from 1 to n = %zu, got %zu", q.n, q.k);
        stop = fail(r, line, ETACAL_EPARSE, "%s", msg);
        goto out;
    }
    if ((stop = number(r, line, r->c_offset, "offset_s", &q.offset_s)) ||
        (stop = number(r, line, r->c_slope, "slope", &q.slope)))
        goto out;
    /* What each method writes: add, prediction + offset_s (slope 1);
     * ratio, prediction x slope (offset_s 0, slope > 0). */
    if (q.method == ETACAL_METHOD_ADD && q.slope != 1) {
        stop = fail(r, line, ETACAL_EPARSE, "method add needs slope 1 (promise = prediction + offset_s)%s", "");
        goto out;
    }
    if (q.method == ETACAL_METHOD_RATIO && !(q.offset_s == 0 && q.slope > 0)) {
        stop = fail(r, line, ETACAL_EPARSE,
                    "method ratio needs offset_s 0 and a slope > 0 (promise = prediction x slope)%s", "");
        goto out;
    }
    long frac[] = {r->c_conf, r->c_covmean, r->c_covlow};
    static const char *fracname[] = {"confidence", "coverage_mean", "coverage_low"};
    for (size_t i = 0; i < 3; i++) {
        double v;
        if (frac[i] < 0)
            continue;
        if ((stop = number(r, line, frac[i], fracname[i], &v)))
            goto out;
        if (!(i == 0 ? v > 0 && v < 1 : v >= 0 && v <= 1)) {
            stop = fail(r, line, ETACAL_EPARSE,
                        i == 0 ? "'%s' must be in (0,1)" : "'%s' must be a share in [0,1]", fracname[i]);
            goto out;
        }
        if (i == 0 && r->confidence > 0 && v != r->confidence) {
            char msg[96];
            snprintf(msg, sizeof msg, "the rows have different confidences (%.17g, %.17g)", r->confidence, v);
            stop = fail(r, line, ETACAL_EPARSE, "%s", msg);
            goto out;
        }
        if (i == 0)
            r->confidence = v;
    }
    if (r->c_cell >= 0) {
        const char *cv = rowbuf_get(b, (size_t)r->c_cell);
        q.cell = strcmp(cv, "own") == 0    ? ETACAL_CELL_OWN
                 : strcmp(cv, "rest") == 0 ? ETACAL_CELL_REST
                 : strcmp(cv, "all") == 0  ? ETACAL_CELL_ALL
                                           : ETACAL_CELL_UNKNOWN;
        if (q.cell == ETACAL_CELL_UNKNOWN) {
            char msg[120];
            snprintf(msg, sizeof msg, "'cell' must be own, rest or all, got '%.40s'", cv);
            stop = fail(r, line, ETACAL_EPARSE, "%s", msg);
            goto out;
        }
    }
    if (r->ncoef && q.method != ETACAL_METHOD_QR) {
        stop = fail(r, line, ETACAL_EPARSE, "coef_ columns belong to method qr, not '%s'",
                    etacal_method_name(q.method));
        goto out;
    }
    if (grow_array((void **)&r->coefs, &r->coefcap, r->ncoefs + r->ncoef + 1, sizeof *r->coefs) != 0) {
        stop = fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
        goto out;
    }
    q.coef_off = r->ncoefs;
    for (size_t j = 0; j < r->ncoef; j++) {
        char name[300];
        snprintf(name, sizeof name, "coef_%s", r->coef_name[j]);
        if ((stop = number(r, line, r->coef_col[j], name, &r->coefs[r->ncoefs + j])))
            goto out;
    }
    if (r->nrange) {
        if (grow_array((void **)&r->ranges, &r->rangecap, 2 * (r->ncoefs + r->ncoef) + 1, sizeof *r->ranges) != 0) {
            stop = fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
            goto out;
        }
        double *lo = r->ranges + 2 * r->ncoefs, *hi = lo + r->ncoef;
        for (size_t j = 0; j < r->ncoef; j++) {
            char name[300];
            for (int m = 0; m < 2; m++) {
                snprintf(name, sizeof name, "%s_%s", m ? "max" : "min", r->coef_name[j]);
                if ((stop = number(r, line, r->range_col[m][j], name, m ? &hi[j] : &lo[j])))
                    goto out;
            }
            if (!(lo[j] <= hi[j])) {
                stop = fail(r, line, ETACAL_EPARSE, "the range of covariate '%s' is empty (min_ above max_)",
                            r->coef_name[j]);
                goto out;
            }
        }
    }
    r->ncoefs += r->ncoef;
    /* Key level: some values, then only "*". */
    int star = 0;
    size_t nstar = 0;
    rowbuf_reset(&r->joined);
    size_t jl = 0;
    for (size_t j = 0; j < r->nkeys; j++) {
        const char *kv = rowbuf_get(b, j);
        size_t kl = rowbuf_len(b, j);
        /* The unit separator joins the keys below: a key holding one
         * could pass for another combination. */
        if (!utf8_valid(kv, kl)) {
            stop = fail(r, line, ETACAL_EPARSE, "the value of key '%s' is not UTF-8 text", r->key_names[j]);
            goto out;
        }
        if (memchr(kv, '\x1f', kl)) {
            stop = fail(r, line, ETACAL_EPARSE, "the value of key '%s' holds the control character 0x1f",
                        r->key_names[j]);
            goto out;
        }
        int is_star = strcmp(kv, "*") == 0;
        if (star && !is_star) {
            stop = fail(r, line, ETACAL_EPARSE,
                        "key '%s' has a value after a '*' key: levels go from the last key to the first",
                        r->key_names[j]);
            goto out;
        }
        star |= is_star;
        nstar += (size_t)is_star;
        jl += rowbuf_len(b, j) + 1;
    }
    /* own: a full key combination; all: the global row */
    if ((q.cell == ETACAL_CELL_OWN && star) || (q.cell == ETACAL_CELL_ALL && nstar < r->nkeys)) {
        stop = fail(r, line, ETACAL_EPARSE, "%s",
                    q.cell == ETACAL_CELL_OWN ? "cell 'own' needs a value in every key (a row with '*' keys is 'rest')"
                                              : "cell 'all' belongs to the global row (every key '*')");
        goto out;
    }
    /* Joined key: the fields with a unit separator after each. */
    char small[512];
    char *jk = jl <= sizeof small ? small : malloc(jl);
    if (!jk) {
        stop = fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
        goto out;
    }
    size_t w = 0;
    for (size_t j = 0; j < r->nkeys; j++) {
        memcpy(jk + w, rowbuf_get(b, j), rowbuf_len(b, j));
        w += rowbuf_len(b, j);
        jk[w++] = '\x1f';
    }
    uint32_t seg;
    int bad = strdict_intern(&r->segs, jk, w, &seg);
    if (jk != small)
        free(jk);
    if (bad || grow_array((void **)&r->rows, &r->cap, r->nrows + 1, sizeof *r->rows) != 0) {
        stop = fail(r, line, ETACAL_ENOMEM, "out of memory%s", "");
        goto out;
    }
    q.seg = seg;
    r->rows[r->nrows++] = q;
out:
    rowbuf_reset(b);
    return stop;
}

static int cmp_qrow(const void *a, const void *b)
{
    const qrow *x = a, *y = b;
    if (x->seg != y->seg)
        return (x->seg > y->seg) - (x->seg < y->seg);
    return (x->target > y->target) - (x->target < y->target);
}

int etacal_quotes_read_csv(const char *path, char delim, etacal_quotes **out, etacal_error *err)
{
    int rc;
    qreader r;
    memset(&r, 0, sizeof r);
    r.path = path;
    r.err = err;
    strdict_init(&r.segs);
    *out = NULL;
    etacal_quotes *q = calloc(1, sizeof *q);
    if (!q)
        return etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
    csvstream_cb cb = {on_field, on_row, &r, NULL, NULL};
    rc = csvstream_run(path, delim ? delim : ',', 0, &cb, NULL, err);
    if (rc)
        goto done;
    if (!r.header_done) {
        rc = etacal_error_set(err, ETACAL_EPARSE, path, "empty file: expected a quote table");
        goto done;
    }
    if (r.nrows == 0) {
        char where[128];
        format_where(where, sizeof where, path, r.header_line);
        rc = etacal_error_set(err, ETACAL_EPARSE, where, "the quote table has no rows, only a header");
        goto done;
    }
    q->nkeys = r.nkeys;
    q->confidence = r.confidence;
    q->key_names = r.key_names;
    r.key_names = NULL;
    q->method = r.method;
    /* targets */
    double *tv = malloc(r.nrows * sizeof *tv);
    if (!tv) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
        goto done;
    }
    for (size_t i = 0; i < r.nrows; i++)
        tv[i] = r.rows[i].target;
    rc = quotes_set_targets(q, tv, r.nrows, err);
    free(tv);
    if (rc)
        goto done;
    /* segments: the dictionary order, with the global segment moved first */
    size_t nseg = r.segs.count;
    uint32_t global = UINT32_MAX;
    for (uint32_t s = 0; s < nseg; s++) {
        const char *k = strdict_str(&r.segs, s);
        size_t len = strdict_len(&r.segs, s), j;
        for (j = 0; j + 1 < len && k[j] == '*' && k[j + 1] == '\x1f'; j += 2)
            ;
        if (j == len)
            global = s;
    }
    if (global == UINT32_MAX) {
        char where[128];
        format_where(where, sizeof where, path, r.header_line);
        rc = etacal_error_set(err, ETACAL_EPARSE, where, "no global row (every key '*'): every order needs a row to fall back on");
        goto done;
    }
    q->segs = calloc(nseg, sizeof *q->segs);
    if (!q->segs) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
        goto done;
    }
    q->nsegs = nseg;
    for (size_t i = 0; i < r.nrows; i++) {
        uint32_t s = r.rows[i].seg;
        r.rows[i].seg = s == global ? 0 : (s < global ? s + 1 : s);
    }
    for (uint32_t s = 0; s < nseg; s++) {
        uint32_t d = s == global ? 0 : (s < global ? s + 1 : s);
        etacal_segment *g = &q->segs[d];
        if (segment_alloc(g, q->nkeys, q->ntargets) != 0) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
            goto done;
        }
        const char *k = strdict_str(&r.segs, s);
        for (size_t j = 0; j < q->nkeys; j++) {
            const char *e = memchr(k, '\x1f', strlen(k));
            size_t len = (size_t)(e - k);
            g->keys[j] = malloc(len + 1);
            if (!g->keys[j]) {
                rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
                goto done;
            }
            memcpy(g->keys[j], k, len);
            g->keys[j][len] = '\0';
            k = e + 1;
        }
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            g->status[ti] = ETACAL_FALLBACK_FEW_ROWS;
            g->score_q[ti] = NAN;
        }
    }
    qsort(r.rows, r.nrows, sizeof *r.rows, cmp_qrow);
    q->ncoef = r.ncoef;
    q->coef_names = calloc(r.ncoef ? r.ncoef : 1, sizeof *q->coef_names);
    q->coefs = r.coefs;
    r.coefs = NULL;
    q->ranges = r.nrange ? r.ranges : NULL;
    if (r.nrange)
        r.ranges = NULL;
    if (!q->coef_names) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
        goto done;
    }
    for (size_t j = 0; j < r.ncoef; j++) {
        q->coef_names[j] = r.coef_name[j];
        r.coef_name[j] = NULL;
    }
    q->rows = calloc(r.nrows, sizeof *q->rows);
    if (!q->rows) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
        goto done;
    }
    for (size_t i = 0; i < r.nrows; i++) {
        const qrow *x = &r.rows[i];
        if (i && x->seg == r.rows[i - 1].seg && x->target == r.rows[i - 1].target) {
            char where[128];
            size_t l1 = x->line, l0 = r.rows[i - 1].line;
            format_where(where, sizeof where, path, l1 > l0 ? l1 : l0);
            rc = etacal_error_set(err, ETACAL_EPARSE, where,
                                  "duplicate row for the same segment and target %g (first on line %zu)", x->target,
                                  l1 > l0 ? l0 : l1);
            goto done;
        }
        etacal_quote *o = &q->rows[q->nrows++];
        o->seg = x->seg;
        o->target = (size_t)etacal_quotes_find_target(q, x->target);
        o->method = x->method;
        o->n = x->n;
        o->k = x->k;
        o->offset_s = x->offset_s;
        o->slope = x->slope;
        o->cell = x->cell;
        o->coef = q->coefs ? q->coefs + x->coef_off : NULL;
        o->x_min = q->ranges ? q->ranges + 2 * x->coef_off : NULL;
        o->x_max = q->ranges ? o->x_min + q->ncoef : NULL;
        etacal_segment *g = &q->segs[x->seg];
        g->n = x->n;
        g->pool_n[o->target] = x->n;
        g->k[o->target] = x->k;
        g->status[o->target] = ETACAL_OWN_ROW;
        g->score_q[o->target] = x->method == ETACAL_METHOD_RATIO ? x->slope : x->offset_s;
    }
    for (size_t ti = 0; ti < q->ntargets; ti++)
        if (q->segs[0].status[ti] != ETACAL_OWN_ROW) {
            /* the first row of that target shows where it is missing */
            size_t line = 0;
            for (size_t i = 0; i < r.nrows; i++)
                if (r.rows[i].target == q->targets[ti] && (!line || r.rows[i].line < line))
                    line = r.rows[i].line;
            char where[128];
            format_where(where, sizeof where, path, line);
            rc = etacal_error_set(err, ETACAL_EPARSE, where,
                                  "no global row (every key '*') for target %g, which this row has", q->targets[ti]);
            goto done;
        }

done:
    rowbuf_free(&r.rb);
    rowbuf_free(&r.joined);
    strdict_free(&r.segs);
    free(r.rows);
    free(r.coefs);
    free(r.ranges);
    for (size_t j = 0; j < r.ncoef; j++)
        free(r.coef_name[j]);
    if (r.key_names)
        for (size_t j = 0; j < r.nkeys; j++)
            free(r.key_names[j]);
    free(r.key_names);
    if (rc) {
        etacal_quotes_destroy(q);
        return rc;
    }
    *out = q;
    return ETACAL_OK;
}
