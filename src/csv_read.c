/* SPDX-License-Identifier: GPL-3.0-or-later */
/* csv_read.c: a CSV file into typed columns (numbers as double arrays, keys
 * dictionary-encoded), with a FILE:LINE message for every bad input.
 *
 * Each field is handled as libcsv delivers it: a numeric field is parsed
 * into a one-row staging area, a key field interned in its dictionary.  Only
 * when the record ends with the right number of fields and every value is
 * acceptable is the staged row appended, so a bad or skipped row leaves no
 * trace in the columns. */
#define _DEFAULT_SOURCE
#include "base.h"
#include "csvio.h"
#include "table_impl.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <threads.h>
#include <unistd.h>

typedef struct reader {
    etacal_table *t;
    const etacal_colspec *spec;
    const etacal_read_opts *opts;
    const char *path;
    etacal_error *err;
    int header_done;
    size_t nheader;
    int *role;           /* file column -> table column or -1 */
    size_t role_cap;
    double *stage_num;   /* per table column */
    uint32_t *stage_key;
    unsigned char *seen; /* per table column: header matched */
    int row_bad;         /* 0 ok, 1 missing (skip), 2 malformed */
    char bad_msg[160];
    int fatal;           /* an error that --bad-rows skip does not cover */
    rowbuf pending;      /* key values of the current row not yet in a dictionary */
    size_t *pending_col;
    size_t pending_cap;
    size_t first_col_bad;
} reader;

static void set_bad(reader *r, int severity, const char *fmt, const char *a, const char *b)
{
    if (r->row_bad >= severity)
        return;
    r->row_bad = severity;
    snprintf(r->bad_msg, sizeof r->bad_msg, fmt, a, b);
}

static void header_field(reader *r, size_t col, const char *s, size_t len)
{
    if (grow_array((void **)&r->role, &r->role_cap, col + 1, sizeof *r->role) != 0) {
        r->fatal = ETACAL_ENOMEM;
        return;
    }
    r->role[col] = -1;
    r->nheader = col + 1;
    for (size_t i = 0; i < r->t->ncols; i++) {
        const char *name = r->spec[i].name;
        if (strlen(name) == len && memcmp(name, s, len) == 0) {
            if (r->seen[i]) {
                r->fatal = ETACAL_EPARSE;
                snprintf(r->bad_msg, sizeof r->bad_msg, "column '%s' appears twice in the header",
                         name);
                return;
            }
            r->seen[i] = 1;
            r->role[col] = (int)i;
        }
    }
}

static void data_field(reader *r, size_t col, const char *s, size_t len)
{
    if (col >= r->nheader)
        return; /* counted at the end of the row */
    int ti = r->role[col];
    if (ti < 0)
        return;
    column *c = &r->t->cols[ti];
    if (c->type == ETACAL_COL_KEY) {
        if (len == 1 && s[0] == '*') {
            set_bad(r, 2, "'*' is reserved for \"all values\" and cannot be a value of '%s'%s",
                    c->name, "");
            return;
        }
        /* A value seen before gets its id now; a new one waits for the
         * end of the row, so that a skipped row adds no key value. */
        if (!strdict_find(&c->dict, s, len, &r->stage_key[ti])) {
            /* Only a new value is checked: a key column has few. */
            if (!utf8_valid(s, len)) {
                set_bad(r, 2, "a value of key column '%s' is not valid UTF-8%s", c->name, "");
                return;
            }
            /* the unit separator joins key values in quote tables and apply */
            if (memchr(s, '\x1f', len)) {
                set_bad(r, 2, "a value of key column '%s' holds the control character 0x1f%s", c->name, "");
                return;
            }
            rowbuf_add(&r->pending, s, len);
            if (r->pending.oom)
                r->fatal = ETACAL_ENOMEM; /* the value was not added: nf did not grow */
            else if (grow_array((void **)&r->pending_col, &r->pending_cap, r->pending.nf,
                           sizeof *r->pending_col) != 0)
                r->fatal = ETACAL_ENOMEM;
            else
                r->pending_col[r->pending.nf - 1] = (size_t)ti;
        }
        return;
    }
    double v;
    int k = (c->flags & ETACAL_NUM_TIME) ? etacal_time_parse(s, len, &v) : etacal_num_parse(s, len, &v);
    if (k == ETACAL_NUM_BAD) {
        char shown[160];
        const char *why = (c->flags & ETACAL_NUM_TIME) ? NULL : num_bad_reason(s, len);
        snprintf(shown, sizeof shown, "%.*s%s'%s%s%s", len > 40 ? 40 : (int)len, s, len > 40 ? "..." : "",
                 why ? " (" : "", why ? why : "", why ? ")" : "");
        set_bad(r, 2,
                (c->flags & ETACAL_NUM_TIME)
                    ? "column '%s' is not a timestamp (ISO 8601 or Unix seconds): '%s"
                    : "column '%s' is not numeric: '%s",
                c->name, shown);
        return;
    }
    if (k == ETACAL_NUM_MISSING) {
        if (c->flags & ETACAL_NUM_SKIP_MISSING)
            set_bad(r, 1, "missing value in '%s'%s", c->name, "");
        r->stage_num[ti] = NAN;
        return;
    }
    const char *what = c->what ? c->what : "value";
    if ((c->flags & ETACAL_NUM_FINITE) && !isfinite(v)) {
        set_bad(r, 2, "column '%s': %s is not finite", c->name, what);
        return;
    }
    if ((c->flags & ETACAL_NUM_POSITIVE) && !(v > 0)) {
        set_bad(r, 2, "column '%s': %s must be positive", c->name, what);
        return;
    }
    if ((c->flags & ETACAL_NUM_NONNEG) && v < 0) {
        set_bad(r, 2, "column '%s': %s is negative", c->name, what);
        return;
    }
    r->stage_num[ti] = v;
}

static void on_field(void *ud, size_t col, const char *s, size_t len)
{
    reader *r = ud;
    if (r->fatal)
        return;
    if (!r->header_done)
        header_field(r, col, s, len);
    else
        data_field(r, col, s, len);
}

static int append_row(reader *r)
{
    etacal_table *t = r->t;
    if (t->rows == t->cap) {
        size_t ncap = t->cap ? t->cap * 2 : 4096;
        for (size_t i = 0; i < t->ncols; i++) {
            column *c = &t->cols[i];
            if (c->type == ETACAL_COL_NUM) {
                double *p = realloc(c->num, ncap * sizeof *p);
                if (!p)
                    return -1;
                c->num = p;
            } else {
                void *p = realloc(c->key, ncap * (size_t)c->kw);
                if (!p)
                    return -1;
                c->key = p;
            }
        }
        t->cap = ncap;
    }
    for (size_t i = 0; i < t->ncols; i++) {
        column *c = &t->cols[i];
        if (c->type == ETACAL_COL_NUM) {
            c->num[t->rows] = r->stage_num[i];
            continue;
        }
        uint32_t id = r->stage_key[i];
        if (c->kw == 2 && id > UINT16_MAX && key_widen(c, t->rows, t->cap) != 0)
            return -1;
        if (c->kw == 2)
            ((uint16_t *)c->key)[t->rows] = (uint16_t)id;
        else
            ((uint32_t *)c->key)[t->rows] = id;
    }
    t->rows++;
    return 0;
}

static int on_row(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen)
{
    (void)raw;
    (void)rawlen;
    reader *r = ud;
    char where[128];
    if (r->fatal) {
        format_where(where, sizeof where, r->path, line);
        if (r->fatal == ETACAL_ENOMEM)
            etacal_error_set(r->err, ETACAL_ENOMEM, where, "out of memory");
        else
            etacal_error_set(r->err, r->fatal, where, "%s", r->bad_msg);
        return 1;
    }
    if (!r->header_done) {
        r->header_done = 1;
        for (size_t i = 0; i < r->t->ncols; i++) {
            if (!r->seen[i]) {
                format_where(where, sizeof where, r->path, line);
                etacal_error_set(r->err, ETACAL_EINVAL, where, "no column '%s' in the header",
                                 r->spec[i].name);
                return 1;
            }
        }
        return 0;
    }
    etacal_read_stats *st = &r->t->stats;
    st->data_rows++;
    if (nfields != r->nheader) {
        char a[32], b[64];
        snprintf(a, sizeof a, "%zu", nfields);
        snprintf(b, sizeof b, "%zu", r->nheader);
        r->row_bad = 0;
        set_bad(r, 2, "%s fields, but the header has %s", a, b);
    }
    int bad = r->row_bad;
    r->row_bad = 0;
    if (bad)
        rowbuf_reset(&r->pending); /* a skipped row leaves no key value behind */
    if (bad == 2) {
        format_where(where, sizeof where, r->path, line);
        if (r->opts->bad_rows != ETACAL_BAD_ROWS_SKIP) {
            etacal_error_set(r->err, ETACAL_EPARSE, where, "%s", r->bad_msg);
            return 1;
        }
        if (st->bad++ == 0) {
            st->first_bad_line = line;
            snprintf(st->first_bad_msg, sizeof st->first_bad_msg, "%s", r->bad_msg);
        }
        return 0;
    }
    if (bad == 1) {
        st->missing++;
        return 0;
    }
    if (r->pending.oom) {
        format_where(where, sizeof where, r->path, line);
        etacal_error_set(r->err, ETACAL_ENOMEM, where, "out of memory");
        return 1;
    }
    for (size_t i = 0; i < r->pending.nf; i++) {
        size_t ti = r->pending_col[i];
        if (strdict_intern(&r->t->cols[ti].dict, rowbuf_get(&r->pending, i), rowbuf_len(&r->pending, i),
                           &r->stage_key[ti]) != 0) {
            format_where(where, sizeof where, r->path, line);
            etacal_error_set(r->err, ETACAL_ENOMEM, where, "out of memory");
            return 1;
        }
    }
    rowbuf_reset(&r->pending);
    if (append_row(r) != 0) {
        format_where(where, sizeof where, r->path, line);
        etacal_error_set(r->err, ETACAL_ENOMEM, where, "out of memory");
        return 1;
    }
    st->kept++;
    return 0;
}

void etacal_table_destroy(etacal_table *t)
{
    if (!t)
        return;
    for (size_t i = 0; t->cols && i < t->ncols; i++) { /* cols NULL: table_new ran out of memory */
        free(t->cols[i].name);
        if (!t->cols[i].num_borrowed)
            free(t->cols[i].num);
        free(t->cols[i].key);
        strdict_free(&t->cols[i].dict);
    }
    free(t->cols);
    free(t->source);
    free(t);
}

static char *dupstr(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

static etacal_table *table_new(const char *path, const etacal_colspec *cols, size_t ncols)
{
    etacal_table *t = calloc(1, sizeof *t);
    if (!t)
        return NULL;
    t->ncols = ncols;
    t->cols = calloc(ncols ? ncols : 1, sizeof *t->cols);
    t->source = dupstr(path);
    if (!t->cols || !t->source) {
        etacal_table_destroy(t);
        return NULL;
    }
    for (size_t i = 0; i < ncols; i++) {
        column *c = &t->cols[i];
        c->name = dupstr(cols[i].name);
        if (!c->name) {
            etacal_table_destroy(t);
            return NULL;
        }
        c->type = cols[i].type;
        c->flags = cols[i].flags;
        c->what = cols[i].what;
        c->kw = 2;
        strdict_init(&c->dict);
    }
    return t;
}

static int reader_init(reader *r, etacal_table *t, const etacal_colspec *cols, const etacal_read_opts *opts,
                       const char *path, etacal_error *err)
{
    memset(r, 0, sizeof *r);
    size_t n = t->ncols ? t->ncols : 1;
    r->stage_num = calloc(n, sizeof *r->stage_num);
    r->stage_key = calloc(n, sizeof *r->stage_key);
    r->seen = calloc(n, 1);
    r->t = t;
    r->spec = cols;
    r->opts = opts;
    r->path = path;
    r->err = err;
    return r->stage_num && r->stage_key && r->seen ? 0 : -1;
}

static void reader_free(reader *r, int owns_role)
{
    rowbuf_free(&r->pending);
    free(r->pending_col);
    if (owns_role)
        free(r->role);
    free(r->stage_num);
    free(r->stage_key);
    free(r->seen);
}

/* The second half of a file, read by its own thread. */
typedef struct part {
    reader r;
    csvstream_range range;
    etacal_error err;
    int rc;
    uint64_t bytes;
    char delim;
} part;

static int part_main(void *arg)
{
    part *pt = arg;
    csvstream_cb cb = {on_field, on_row, &pt->r, NULL, NULL};
    pt->rc = csvstream_run_range(pt->r.path, pt->delim, 0, &cb, &pt->range, &pt->bytes, &pt->err);
    return 0;
}

/* Gives the whole pages of [p, p+len) back to the system; their content
 * is not needed again (the block is freed right after).  Keeps the peak
 * memory of a merge near the size of the merged table. */
static void release_pages(void *p, size_t len)
{
    long pg = sysconf(_SC_PAGESIZE);
    if (pg <= 0)
        return;
    uintptr_t a = ((uintptr_t)p + (uintptr_t)pg - 1) & ~((uintptr_t)pg - 1);
    uintptr_t b = ((uintptr_t)p + len) & ~((uintptr_t)pg - 1);
    if (b > a)
        (void)madvise((void *)a, b - a, MADV_DONTNEED);
}

/* Copies n elements of size elem from src to dst in 8 MiB steps, giving
 * src's pages back behind the copy. */
static void move_pages(void *dst, void *src, size_t n, size_t elem)
{
    const size_t step = (size_t)8 << 20;
    size_t total = n * elem;
    for (size_t off = 0; off < total; off += step) {
        size_t len = total - off < step ? total - off : step;
        memcpy((char *)dst + off, (char *)src + off, len);
        release_pages((char *)src + off, len);
    }
}

/* Appends the rows of b to a, column by column, freeing b's columns as it
 * goes, and maps b's key ids into a's dictionaries (values new in b come
 * after a's, as in a sequential read). */
static int table_append(etacal_table *a, etacal_table *b)
{
    size_t na = a->rows, nb = b->rows;
    if (nb == 0)
        return 0;
    for (size_t i = 0; i < a->ncols; i++) {
        column *ca = &a->cols[i];
        column *cb = &b->cols[i];
        if (ca->type == ETACAL_COL_NUM) {
            double *p = realloc(ca->num, (na + nb) * sizeof *p);
            if (!p)
                return -1;
            ca->num = p;
            move_pages(p + na, cb->num, nb, sizeof *p);
            free(cb->num);
            cb->num = NULL;
        } else {
            uint32_t *remap = malloc((cb->dict.count ? cb->dict.count : 1) * sizeof *remap);
            if (!remap)
                return -1;
            for (uint32_t id = 0; id < cb->dict.count; id++)
                if (strdict_intern(&ca->dict, strdict_str(&cb->dict, id), strdict_len(&cb->dict, id),
                                   &remap[id]) != 0) {
                    free(remap);
                    return -1;
                }
            if (ca->kw == 2 && ca->dict.count > (size_t)UINT16_MAX + 1 && key_widen(ca, na, na) != 0) {
                free(remap);
                return -1;
            }
            void *p = realloc(ca->key, (na + nb) * (size_t)ca->kw);
            if (!p) {
                free(remap);
                return -1;
            }
            ca->key = p;
            /* b's ids mapped in place (the mapped ids fit a's width, which
             * is at least b's when a is wide; else both are narrow), then
             * moved behind a's. */
            if (ca->kw == 4 && cb->kw == 2) {
                uint32_t *dst = (uint32_t *)p + na;
                for (size_t r = 0; r < nb; r++)
                    dst[r] = remap[((const uint16_t *)cb->key)[r]];
            } else {
                for (size_t r = 0; r < nb; r++) {
                    if (cb->kw == 2)
                        ((uint16_t *)cb->key)[r] = (uint16_t)remap[((uint16_t *)cb->key)[r]];
                    else
                        ((uint32_t *)cb->key)[r] = remap[((uint32_t *)cb->key)[r]];
                }
                if (ca->kw == cb->kw) {
                    move_pages((char *)p + na * (size_t)ca->kw, cb->key, nb, (size_t)ca->kw);
                } else { /* a narrow, b wide: cannot happen (b's values are all in a) */
                    free(remap);
                    return -1;
                }
            }
            free(remap);
            free(cb->key);
            cb->key = NULL;
        }
    }
    a->rows = a->cap = na + nb;
    b->rows = 0;
    return 0;
}

static void stats_add(etacal_read_stats *a, const etacal_read_stats *b)
{
    a->data_rows += b->data_rows;
    a->kept += b->kept;
    a->missing += b->missing;
    if (b->bad && !a->bad) {
        a->first_bad_line = b->first_bad_line;
        memcpy(a->first_bad_msg, b->first_bad_msg, sizeof a->first_bad_msg);
    }
    a->bad += b->bad;
    a->bytes += b->bytes;
}

/* In a two-part read the calling thread reports progress for the whole
 * file from its own half, scaled. */
typedef struct progress_map {
    void (*fn)(void *ud, uint64_t done, uint64_t total);
    void *ud;
    uint64_t base, size;
    double scale;
} progress_map;

static void progress_scaled(void *ud, uint64_t done, uint64_t total)
{
    (void)total;
    progress_map *m = ud;
    uint64_t d = m->base + (uint64_t)((double)done * m->scale);
    m->fn(m->ud, d < m->size ? d : m->size, m->size);
}

/* An error of the second part names its line from the part's start: shift
 * it to the file's line (the number after the last ':' of "FILE:LINE"). */
static void shift_where(etacal_error *err, const char *path, size_t shift)
{
    char *colon = strrchr(err->where, ':');
    if (!colon || colon[1] < '0' || colon[1] > '9')
        return;
    char *end;
    unsigned long long line = strtoull(colon + 1, &end, 10);
    if (*end)
        return;
    format_where(err->where, sizeof err->where, path, (size_t)line + shift);
}

/* Files smaller than this are read by one thread. */
/* The fuzz build lowers it (make fuzz), so that small inputs take the
 * two-part read too. */
#ifdef ETACAL_PARALLEL_MIN
#define PARALLEL_MIN ((uint64_t)(ETACAL_PARALLEL_MIN))
#else
#define PARALLEL_MIN ((uint64_t)16 << 20)
#endif

int etacal_table_read_csv(const char *path, const etacal_colspec *cols, size_t ncols,
                          const etacal_read_opts *opts, etacal_table **out, etacal_error *err)
{
    static const etacal_read_opts defaults = {0};
    int rc = ETACAL_OK;
    reader r;
    memset(&r, 0, sizeof r);
    part *pt = NULL;
    etacal_table *tb = NULL;
    *out = NULL;
    if (!opts)
        opts = &defaults;
    char delim = opts->delim ? opts->delim : ',';
    if (delim == '"' || delim == '\n' || delim == '\r' || delim == ' ')
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the delimiter cannot be a quote, space or newline");
    /* Names go into JSON and text reports, which hold UTF-8 text only. */
    for (size_t i = 0; i < ncols; i++)
        if (!utf8_valid(cols[i].name, strlen(cols[i].name)))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "a column name asked for is not valid UTF-8");
    for (size_t i = 0; i < ncols; i++)
        for (size_t j = 0; j < i; j++)
            if (strcmp(cols[i].name, cols[j].name) == 0)
                return etacal_error_set(err, ETACAL_EINVAL, NULL, "column '%s' is named twice",
                                        cols[i].name);

    etacal_table *t = table_new(path, cols, ncols);
    if (!t)
        return etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
    if (reader_init(&r, t, cols, opts, path, err) != 0) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
        goto done;
    }
    csvstream_cb cb = {on_field, on_row, &r, opts->progress, opts->progress_ud};

    /* A large regular file is read in two halves at once, split at a
     * record boundary; the rows keep their file order. */
    uint64_t header_end = 0, split = 0;
    size_t header_lines = 0;
    struct stat st;
    int parallel = (opts->threads == ETACAL_THREADS_AUTO || opts->threads >= 2) && stat(path, &st) == 0 &&
                   S_ISREG(st.st_mode) && (uint64_t)st.st_size >= PARALLEL_MIN &&
                   sysconf(_SC_NPROCESSORS_ONLN) > 1 &&
                   csv_find_split(path, (uint64_t)st.st_size, &header_end, &header_lines, &split) == 0 &&
                   header_end > 0 && split > header_end && split < (uint64_t)st.st_size;
    if (!parallel) {
        rc = csvstream_run(path, delim, 0, &cb, &t->stats.bytes, err);
        if (rc)
            goto done;
    } else {
        csvstream_range hr = {0, header_end, 1, 0, 0, 0};
        uint64_t hbytes = 0;
        rc = csvstream_run_range(path, delim, 0, &cb, &hr, &hbytes, err);
        if (rc)
            goto done;
        pt = calloc(1, sizeof *pt);
        tb = table_new(path, cols, ncols);
        if (!pt || !tb || reader_init(&pt->r, tb, cols, opts, path, &pt->err) != 0) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
            goto done;
        }
        etacal_error_clear(&pt->err);
        pt->r.header_done = 1;
        pt->r.role = r.role;
        pt->r.nheader = r.nheader;
        /* lines of the second part counted from 1, shifted once the first
         * part has told where it ends */
        pt->range = (csvstream_range){split, (uint64_t)st.st_size, 1, 0, 0, 0};
        pt->delim = delim;
        thrd_t th;
        int started = thrd_create(&th, part_main, pt) == thrd_success;
        if (!started)
            part_main(pt);
        csvstream_range dr = {header_end, split, header_lines + 1, 1, 0, 0};
        progress_map pm = {opts->progress, opts->progress_ud, header_end, (uint64_t)st.st_size,
                           (double)((uint64_t)st.st_size - header_end) / (double)(split - header_end)};
        if (opts->progress) {
            cb.progress = progress_scaled;
            cb.progress_ud = &pm;
        }
        rc = csvstream_run_range(path, delim, 0, &cb, &dr, &t->stats.bytes, err);
        if (started)
            thrd_join(th, NULL);
        t->stats.bytes += hbytes;
        if (!rc && dr.open_end) {
            /* the middle fell inside a quoted field: read it all with one
             * thread instead */
            etacal_table_destroy(tb);
            tb = NULL;
            reader_free(&pt->r, 0);
            free(pt);
            pt = NULL;
            reader_free(&r, 1);
            etacal_table_destroy(t);
            t = table_new(path, cols, ncols);
            if (!t || reader_init(&r, t, cols, opts, path, err) != 0) {
                rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
                goto done;
            }
            csvstream_cb cb1 = {on_field, on_row, &r, opts->progress, opts->progress_ud};
            rc = csvstream_run(path, delim, 0, &cb1, &t->stats.bytes, err);
            if (rc)
                goto done;
            goto finish;
        }
        if (rc)
            goto done; /* the first error in file order */
        size_t shift = dr.end_line - 1;
        if (pt->rc) {
            rc = pt->rc;
            *err = pt->err;
            shift_where(err, path, shift);
            goto done;
        }
        if (tb->stats.first_bad_line)
            tb->stats.first_bad_line += shift;
        tb->stats.bytes = pt->bytes;
        stats_add(&t->stats, &tb->stats);
        if (table_append(t, tb) != 0) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
            goto done;
        }
    }
finish:
    if (!r.header_done) {
        rc = etacal_error_set(err, ETACAL_EPARSE, path, "empty file: expected a header row");
        goto done;
    }
    etacal_read_stats *rs = &t->stats;
    if (rs->bad && (double)rs->bad > opts->max_bad_share * (double)rs->data_rows) {
        char where[128];
        format_where(where, sizeof where, path, rs->first_bad_line);
        rc = etacal_error_set(err, ETACAL_EPARSE, where,
                              "%s (%zu of %zu data rows are malformed, more than the allowed "
                              "share %g)",
                              rs->first_bad_msg, rs->bad, rs->data_rows, opts->max_bad_share);
        goto done;
    }
    /* Give back the unused tail of the geometric growth. */
    if (t->rows && t->rows < t->cap) {
        for (size_t i = 0; i < ncols; i++) {
            column *c = &t->cols[i];
            if (c->type == ETACAL_COL_NUM) {
                double *p = realloc(c->num, t->rows * sizeof *p);
                if (p)
                    c->num = p;
            } else {
                void *p = realloc(c->key, t->rows * (size_t)c->kw);
                if (p)
                    c->key = p;
            }
        }
        t->cap = t->rows;
    }

done:
    if (pt)
        reader_free(&pt->r, 0);
    free(pt);
    etacal_table_destroy(tb);
    reader_free(&r, 1);
    if (rc) {
        etacal_table_destroy(t);
        return rc;
    }
    *out = t;
    return ETACAL_OK;
}

size_t etacal_table_rows(const etacal_table *t) { return t->rows; }
size_t etacal_table_cols(const etacal_table *t) { return t->ncols; }
const char *etacal_table_col_name(const etacal_table *t, size_t col) { return t->cols[col].name; }
const char *etacal_table_source(const etacal_table *t) { return t->source; }
const etacal_read_stats *etacal_table_stats(const etacal_table *t) { return &t->stats; }

const double *etacal_table_num(const etacal_table *t, size_t col)
{
    return col < t->ncols && t->cols[col].type == ETACAL_COL_NUM ? t->cols[col].num : NULL;
}

const void *etacal_table_key_ids(const etacal_table *t, size_t col, int *width)
{
    if (col >= t->ncols || t->cols[col].type != ETACAL_COL_KEY)
        return NULL;
    if (width)
        *width = t->cols[col].kw;
    return t->cols[col].key;
}

uint32_t etacal_table_key_id(const etacal_table *t, size_t col, size_t row)
{
    return key_get(&t->cols[col], row);
}

size_t etacal_table_key_count(const etacal_table *t, size_t col)
{
    return col < t->ncols && t->cols[col].type == ETACAL_COL_KEY ? t->cols[col].dict.count : 0;
}

const char *etacal_table_key_text(const etacal_table *t, size_t col, uint32_t id)
{
    if (col >= t->ncols || t->cols[col].type != ETACAL_COL_KEY || id >= t->cols[col].dict.count)
        return NULL;
    return strdict_str(&t->cols[col].dict, id);
}
