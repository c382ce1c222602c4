/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote.c: fitting a quote table by per-segment split conformal
 * prediction, and writing it as CSV.
 *
 * For each segment g (a combination of key values, plus the global one) and
 * target tau, the scores s_i of its n_g rows give the bound s_(k), k =
 * ceil((n_g+1) tau) (Vovk et al. 2005, Mondrian conformal: the guarantee
 * holds within each segment; Lei et al. 2018).  Scores are laid out by
 * segment with one counting sort, so each bound is a selection inside one
 * contiguous slice: O(n) per segment and target, no full sort. */
#include "internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

const char *etacal_method_name(int method)
{
    switch (method) {
    case ETACAL_METHOD_ADD: return "add";
    case ETACAL_METHOD_RATIO: return "ratio";
    default: return NULL;
    }
}

int etacal_method_parse(const char *name)
{
    if (strcmp(name, "add") == 0)
        return ETACAL_METHOD_ADD;
    if (strcmp(name, "ratio") == 0)
        return ETACAL_METHOD_RATIO;
    return -1;
}

static void segment_free(etacal_segment *s, size_t nkeys)
{
    if (s->keys)
        for (size_t j = 0; j < nkeys; j++)
            free(s->keys[j]);
    free(s->keys);
    free(s->k);
    free(s->score_q);
    free(s->status);
}

void etacal_quotes_destroy(etacal_quotes *q)
{
    if (!q)
        return;
    for (size_t i = 0; i < q->nsegs; i++)
        segment_free(&q->segs[i], q->nkeys);
    free(q->segs);
    if (q->key_names)
        for (size_t j = 0; j < q->nkeys; j++)
            free(q->key_names[j]);
    free(q->key_names);
    free(q->targets);
    free(q->rows);
    free(q);
}

long etacal_quotes_find_target(const etacal_quotes *q, double tau)
{
    for (size_t i = 0; i < q->ntargets; i++)
        if (q->targets[i] == tau)
            return (long)i;
    return -1;
}

static char *dupn(const char *s, size_t n)
{
    char *d = malloc(n + 1);
    if (d) {
        memcpy(d, s, n);
        d[n] = '\0';
    }
    return d;
}

static int cmp_dbl(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Sorted distinct copy of the targets, each checked to lie in (0,1). */

int quotes_set_targets(etacal_quotes *q, const double *targets, size_t n, etacal_error *err)
{
    if (n == 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no target given");
    q->targets = malloc(n * sizeof *q->targets);
    if (!q->targets)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    for (size_t i = 0; i < n; i++) {
        if (!(targets[i] > 0 && targets[i] < 1))
            return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                    "target must be an on-time rate in (0,1), got %g", targets[i]);
        q->targets[i] = targets[i];
    }
    qsort(q->targets, n, sizeof *q->targets, cmp_dbl);
    size_t w = 0;
    for (size_t i = 0; i < n; i++)
        if (w == 0 || q->targets[w - 1] != q->targets[i])
            q->targets[w++] = q->targets[i];
    q->ntargets = w;
    return ETACAL_OK;
}


int segment_alloc(etacal_segment *s, size_t nkeys, size_t ntargets)
{
    memset(s, 0, sizeof *s);
    s->keys = calloc(nkeys ? nkeys : 1, sizeof *s->keys);
    s->k = calloc(ntargets, sizeof *s->k);
    s->score_q = calloc(ntargets, sizeof *s->score_q);
    s->status = calloc(ntargets, sizeof *s->status);
    return (s->keys && s->k && s->score_q && s->status) ? 0 : -1;
}

static size_t bucket(double x, double lo, double scale, size_t B)
{
    double b = (x - lo) * scale;
    if (!(b > 0))
        return 0;
    return b >= (double)B ? B - 1 : (size_t)b;
}

/* One order statistic to find: segment g, target ti. */
typedef struct job {
    size_t bucket; /* SIZE_MAX: k > n, no finite bound */
    size_t rank;   /* rank within the bucket */
    size_t cap, used, off;
} job;

int etacal_quotes_fit(const etacal_table *t, size_t actual_col, size_t pred_col,
                      const size_t *key_cols, size_t nkeys, const etacal_fit_opts *opts,
                      etacal_quotes **out, etacal_error *err)
{
    int rc = ETACAL_OK;
    size_t *hist = NULL;
    double *mn = NULL, *mx = NULL, *scale = NULL, *cand = NULL;
    job *jobs = NULL;
    segset ss = {0};
    *out = NULL;

    size_t n = etacal_table_rows(t);
    const char *src = etacal_table_source(t);
    if (n == 0)
        return etacal_error_set(err, ETACAL_ENUM, src, "no data rows with both an actual and a prediction");
    const double *y = etacal_table_num(t, actual_col);
    const double *p = etacal_table_num(t, pred_col);
    if (!y || !p)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "actual and prediction must be numeric columns");
    if (opts->method != ETACAL_METHOD_ADD && opts->method != ETACAL_METHOD_RATIO)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown method %d", opts->method);
    size_t min_rows = opts->min_rows ? opts->min_rows : 200;

    etacal_quotes *q = calloc(1, sizeof *q);
    if (!q)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    q->method = opts->method;
    q->nkeys = nkeys;
    if ((rc = quotes_set_targets(q, opts->targets, opts->ntargets, err)) != 0)
        goto done;
    q->key_names = calloc(nkeys ? nkeys : 1, sizeof *q->key_names);
    if (!q->key_names)
        goto nomem;
    for (size_t j = 0; j < nkeys; j++) {
        const char *name = etacal_table_col_name(t, key_cols[j]);
        if (!(q->key_names[j] = dupn(name, strlen(name))))
            goto nomem;
    }

    /* 1. Segments: global first, the others sorted by their key texts. */
    if ((rc = segset_build(&ss, t, key_cols, nkeys, err)) != 0)
        goto done;
    size_t nseg = ss.nseg;
    q->segs = calloc(nseg, sizeof *q->segs);
    if (!q->segs)
        goto nomem;
    q->nsegs = nseg;
    for (size_t g = 0; g < nseg; g++) {
        if (segment_alloc(&q->segs[g], nkeys, q->ntargets) != 0)
            goto nomem;
        free(q->segs[g].keys);
        q->segs[g].keys = ss.keys[g]; /* ownership moves to the table */
        ss.keys[g] = NULL;
    }

    /* 2. Pass over the rows: validation, accuracy, per-segment n, bare
     *    hits and score range. */
    mn = malloc(nseg * sizeof *mn);
    mx = malloc(nseg * sizeof *mx);
    if (!mn || !mx)
        goto nomem;
    for (size_t g = 0; g < nseg; g++) {
        mn[g] = INFINITY;
        mx[g] = -INFINITY;
    }
    int ratio = q->method == ETACAL_METHOD_RATIO;
    ksum sq = {0, 0}, ab = {0, 0}, me = {0, 0};
    size_t on_time = 0;
    for (size_t i = 0; i < n; i++) {
        double a = y[i], pr = p[i];
        if (!isfinite(a) || !isfinite(pr)) {
            rc = etacal_error_set(err, ETACAL_EINVAL, src, "non-finite actual or prediction in data row %zu", i + 1);
            goto done;
        }
        if (ratio && !(pr > 0)) {
            rc = etacal_error_set(err, ETACAL_EINVAL, src,
                                  "method ratio needs predictions > 0 (data row %zu has %g)", i + 1, pr);
            goto done;
        }
        double sc = ratio ? a / pr : a - pr;
        double e = a - pr;
        ksum_add(&sq, e * e);
        ksum_add(&ab, fabs(e));
        ksum_add(&me, e);
        int hit = a <= pr;
        on_time += (size_t)hit;
        uint32_t g = segset_row(&ss, i);
        q->segs[g].n++;
        q->segs[g].bare_hits += (size_t)hit;
        if (sc < mn[g])
            mn[g] = sc;
        if (sc > mx[g])
            mx[g] = sc;
        if (sc < mn[0])
            mn[0] = sc;
        if (sc > mx[0])
            mx[0] = sc;
    }
    q->accuracy.n = n;
    q->accuracy.rmse = sqrt(ksum_value(&sq) / (double)n);
    q->accuracy.mae = ksum_value(&ab) / (double)n;
    q->accuracy.mean_error = ksum_value(&me) / (double)n;
    q->accuracy.on_time = on_time;
    etacal_segment *gl = &q->segs[0];
    if (nkeys) {
        gl->n = n;
        gl->bare_hits = on_time;
    }

    /* 3. The k-th smallest score of every (segment, target) by bucket
     *    selection, without copying or reordering the rows: a histogram of
     *    each segment's scores over B equal-width buckets of its range
     *    finds the bucket that holds rank k; a second pass gathers only
     *    that bucket's scores, and an exact selection among them gives the
     *    order statistic.  The bucket index is a monotone function of the
     *    score, so this is exact; only the work depends on the spread. */
    size_t B = 4096;
    while (B > 16 && (double)B * (double)nseg * sizeof(size_t) > 64.0 * 1024 * 1024)
        B /= 2;
    hist = calloc(nseg * B, sizeof *hist);
    scale = malloc(nseg * sizeof *scale);
    size_t njobs = nseg * q->ntargets;
    jobs = calloc(njobs, sizeof *jobs);
    if (!hist || !scale || !jobs)
        goto nomem;
    for (size_t g = 0; g < nseg; g++) {
        double w = mx[g] - mn[g];
        scale[g] = w > 0 && isfinite(w) ? (double)B / w : 0;
    }
    for (size_t i = 0; i < n; i++) {
        double sc = ratio ? y[i] / p[i] : y[i] - p[i];
        uint32_t g = segset_row(&ss, i);
        hist[(size_t)g * B + bucket(sc, mn[g], scale[g], B)]++;
        if (g)
            hist[bucket(sc, mn[0], scale[0], B)]++;
    }
    size_t ncand = 0;
    for (size_t g = 0; g < nseg; g++) {
        etacal_segment *sg = &q->segs[g];
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            size_t k = etacal_conformal_rank(sg->n, q->targets[ti]);
            if (k < 1)
                k = 1;
            sg->k[ti] = k;
            sg->status[ti] = g == 0                 ? ETACAL_OWN_ROW
                             : sg->n < min_rows     ? ETACAL_FALLBACK_FEW_ROWS
                             : k > sg->n            ? ETACAL_FALLBACK_RANK
                                                    : ETACAL_OWN_ROW;
            job *jb = &jobs[g * q->ntargets + ti];
            if (k > sg->n) {
                jb->bucket = SIZE_MAX;
                sg->score_q[ti] = INFINITY;
                continue;
            }
            const size_t *h = hist + g * B;
            size_t cum = 0, b = 0;
            while (cum + h[b] < k)
                cum += h[b++];
            jb->bucket = b;
            jb->rank = k - cum;
            jb->cap = h[b];
            jb->off = ncand;
            ncand += h[b];
        }
    }
    for (size_t ti = 0; ti < q->ntargets; ti++)
        if (gl->k[ti] > n) {
            rc = etacal_error_set(err, ETACAL_ENUM, src,
                                  "only %zu rows: a promise for target %g needs at least %zu "
                                  "calibration rows (rank ceil((n+1)*tau) must not exceed n)",
                                  n, q->targets[ti], etacal_conformal_min_n(q->targets[ti]));
            goto done;
        }
    cand = malloc((ncand ? ncand : 1) * sizeof *cand);
    if (!cand)
        goto nomem;
    for (size_t i = 0; i < n; i++) {
        double sc = ratio ? y[i] / p[i] : y[i] - p[i];
        uint32_t g = segset_row(&ss, i);
        size_t bg = bucket(sc, mn[g], scale[g], B);
        job *jg = &jobs[(size_t)g * q->ntargets];
        for (size_t ti = 0; ti < q->ntargets; ti++)
            if (jg[ti].bucket == bg)
                cand[jg[ti].off + jg[ti].used++] = sc;
        if (g) {
            size_t b0 = bucket(sc, mn[0], scale[0], B);
            for (size_t ti = 0; ti < q->ntargets; ti++)
                if (jobs[ti].bucket == b0)
                    cand[jobs[ti].off + jobs[ti].used++] = sc;
        }
    }
    for (size_t g = 0; g < nseg; g++)
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            job *jb = &jobs[g * q->ntargets + ti];
            if (jb->bucket != SIZE_MAX)
                q->segs[g].score_q[ti] = etacal_select(cand + jb->off, jb->cap, jb->rank);
        }

    /* 4. The rows of the table. */
    size_t nrows = 0;
    for (size_t s = 0; s < nseg; s++)
        for (size_t ti = 0; ti < q->ntargets; ti++)
            nrows += q->segs[s].status[ti] == ETACAL_OWN_ROW;
    q->rows = calloc(nrows ? nrows : 1, sizeof *q->rows);
    if (!q->rows)
        goto nomem;
    for (size_t s = 0; s < nseg; s++) {
        const etacal_segment *g = &q->segs[s];
        for (size_t ti = 0; ti < q->ntargets; ti++) {
            if (g->status[ti] != ETACAL_OWN_ROW)
                continue;
            etacal_quote *r = &q->rows[q->nrows++];
            r->seg = s;
            r->target = ti;
            r->method = q->method;
            r->n = g->n;
            r->k = g->k[ti];
            /* Rounded up, never down, so the guarantee survives: the
             * offset to the millisecond, a factor to 1e-6. */
            if (q->method == ETACAL_METHOD_ADD) {
                r->offset_s = ceil_scaled(g->score_q[ti], 1e3);
                r->slope = 1;
            } else {
                r->offset_s = 0;
                r->slope = ceil_scaled(g->score_q[ti], 1e6);
            }
        }
    }
    goto done;

nomem:
    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
done:
    segset_free(&ss);
    free(hist);
    free(mn);
    free(mx);
    free(scale);
    free(cand);
    free(jobs);
    if (rc) {
        etacal_quotes_destroy(q);
        return rc;
    }
    *out = q;
    return ETACAL_OK;
}

/* Writes s as one CSV field, quoted only when it must be. */

void etacal_csv_put_field(FILE *fp, const char *s, size_t len, char delim)
{
    int need = len > 0 && (s[0] == ' ' || s[len - 1] == ' ');
    for (size_t i = 0; i < len && !need; i++)
        need = s[i] == delim || s[i] == '"' || s[i] == '\n' || s[i] == '\r';
    if (!need) {
        fwrite(s, 1, len, fp);
        return;
    }
    putc('"', fp);
    for (size_t i = 0; i < len; i++) {
        if (s[i] == '"')
            putc('"', fp);
        putc(s[i], fp);
    }
    putc('"', fp);
}

int etacal_quotes_write_csv(const etacal_quotes *q, FILE *fp, etacal_error *err)
{
    char num[ETACAL_NUM_BUFSZ];
    for (size_t j = 0; j < q->nkeys; j++) {
        etacal_csv_put_field(fp, q->key_names[j], strlen(q->key_names[j]), ',');
        putc(',', fp);
    }
    fputs("target,method,n,k,offset_s,slope\n", fp);
    for (size_t r = 0; r < q->nrows; r++) {
        const etacal_quote *row = &q->rows[r];
        const etacal_segment *g = &q->segs[row->seg];
        for (size_t j = 0; j < q->nkeys; j++) {
            etacal_csv_put_field(fp, g->keys[j], strlen(g->keys[j]), ',');
            putc(',', fp);
        }
        etacal_num_format(q->targets[row->target], num);
        fprintf(fp, "%s,%s,%zu,%zu,", num, etacal_method_name(row->method), row->n, row->k);
        etacal_num_format(row->offset_s, num);
        fputs(num, fp);
        putc(',', fp);
        etacal_num_format(row->slope, num);
        fputs(num, fp);
        putc('\n', fp);
    }
    if (ferror(fp))
        return etacal_error_set(err, ETACAL_EIO, NULL, "write failed");
    return ETACAL_OK;
}
