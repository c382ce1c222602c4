/* SPDX-License-Identifier: GPL-3.0-or-later */
/* internal.h: declarations shared inside the library, not part of the API. */
#ifndef ETACAL_INTERNAL_H
#define ETACAL_INTERNAL_H

#include "etacal/etacal.h"

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

/* Compensated sum (as Kahan-Neumaier, with Knuth's TwoSum for the error
 * term): long sums of durations stay exact to a few ulps whatever their
 * order. */
typedef struct {
    double s, c;
} ksum;

static inline void ksum_add(ksum *k, double x)
{
    /* TwoSum (Knuth, TAOCP 4.2.2): the exact rounding error of s + x,
     * without a data-dependent branch */
    double t = k->s + x;
    double z = t - k->s;
    k->c += (k->s - (t - z)) + (x - z);
    k->s = t;
}

static inline double ksum_value(const ksum *k) { return k->s + k->c; }

/* Grows *p (an array of elements of size elem with capacity *cap) so that it
 * holds at least need elements, doubling.  Returns 0, or -1 when out of
 * memory (then *p is unchanged). */
int grow_array(void **p, size_t *cap, size_t need, size_t elem);

/* A string dictionary: strings to dense ids 0,1,2,... in order of first
 * appearance.  Strings live in one growing arena. */
typedef struct strdict {
    char *arena;
    size_t arena_len, arena_cap;
    size_t *offs;   /* offset of string id in arena */
    uint32_t *lens; /* length of string id */
    size_t count, offs_cap;
    uint32_t *slots; /* open addressing: id + 1, 0 = empty */
    size_t nslots;   /* power of two */
} strdict;

void strdict_init(strdict *d);
void strdict_free(strdict *d);
/* Returns the id of s (adding it when new) in *id; 0 or -1 out of memory. */
int strdict_intern(strdict *d, const char *s, size_t len, uint32_t *id);
/* Looks s up without adding it: 1 found (id in *id), 0 absent. */
int strdict_find(const strdict *d, const char *s, size_t len, uint32_t *id);
static inline const char *strdict_str(const strdict *d, uint32_t id) { return d->arena + d->offs[id]; }
static inline size_t strdict_len(const strdict *d, uint32_t id) { return d->lens[id]; }

/* The exact value of ceil(m * tau) for the decimal tau as the user wrote it
 * (its shortest round-trip decimal form), so that 0.3 means 3/10 and not
 * 0.299999999999999988898.  Returns 0, or -1 when tau has too many digits
 * for exact arithmetic; then a long double result with a small fuzz is used
 * and still stored. */
int exact_ceil_mul(uint64_t m, double tau, uint64_t *out);


/* Why etacal_num_parse refused s, for a message ("hexadecimal numbers are
 * not read", a comma, digit grouping, out of range), or NULL when it is
 * simply not a number. */
const char *num_bad_reason(const char *s, size_t len);

/* 1 when the len bytes at s are well-formed UTF-8 (Unicode's table 3-7:
 * no overlong forms, no surrogates, nothing above U+10FFFF), else 0. */
int utf8_valid(const char *s, size_t len);

/* csvstream: libcsv driven over a file in chunks, with physical line
 * numbers, a UTF-8 byte-order mark dropped, blank lines skipped and, in raw
 * mode, each record's exact bytes handed to the row callback.
 *
 * field(ud, col, s, len) is called for every field of a record (col counts
 * from 0), then row(ud, nfields, line, raw, rawlen) once per non-blank record,
 * line being the physical line where the record starts (1 = first line).
 * raw/rawlen are the record's bytes including its line terminator (raw mode
 * only, else NULL/0).  row returns 0 to go on, nonzero to stop reading (after
 * filling the caller's error). */
typedef struct csvstream_cb {
    void (*field)(void *ud, size_t col, const char *s, size_t len);
    int (*row)(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen);
    void *ud;
    void (*progress)(void *ud, uint64_t done, uint64_t total);
    void *progress_ud;
} csvstream_cb;

/* Returns ETACAL_OK, the row callback's stop (ETACAL_EPARSE etc. as the
 * callback set in err, returned as err->code), or an error of its own:
 * I/O, an unterminated quote or malformed quoting (with FILE:LINE).  An
 * empty input is not an error here: *bytes_out is 0 and row is never called. */
int csvstream_run(const char *path, char delim, int raw, const csvstream_cb *cb, uint64_t *bytes_out,
                  etacal_error *err);

/* A byte range of the file to parse ([start, end), starting on a record
 * boundary) and the physical line number at start. */
typedef struct csvstream_range {
    uint64_t start, end;
    size_t first_line;
    int allow_open; /* in: the range may end inside a quoted field */
    int open_end;   /* out: it did (the caller's split was not a record boundary) */
    size_t end_line; /* out: the physical line after the range's last record */
} csvstream_range;

int csvstream_run_range(const char *path, char delim, int raw, const csvstream_cb *cb, csvstream_range *range,
                        uint64_t *bytes_out, etacal_error *err);

/* Finds where the header record of a regular file ends (the first line
 * feed outside quotes, with the header's physical lines) and a candidate
 * split: the first line feed at or after the middle.  Reads only the start
 * and a little around the middle; whether the split is a record boundary is
 * known only once the first part has been parsed up to it (open_end).
 * Returns 0, or -1 on a read error. */
int csv_find_split(const char *path, uint64_t size, uint64_t *header_end, size_t *header_lines,
                   uint64_t *split);

/* "FILE:LINE" into buf. */
void format_where(char *buf, size_t size, const char *path, size_t line);

/* rowbuf: the fields of one record, copied out of libcsv's buffer, each
 * NUL-terminated.  For readers that need a whole record at a time. */
typedef struct rowbuf {
    char *buf;
    size_t len, cap;
    size_t *off, *flen;
    size_t nf, fcap;
    int oom;
} rowbuf;

void rowbuf_add(rowbuf *r, const char *s, size_t len);
static inline void rowbuf_reset(rowbuf *r) { r->len = 0; r->nf = 0; }
static inline const char *rowbuf_get(const rowbuf *r, size_t i) { return r->buf + r->off[i]; }
static inline size_t rowbuf_len(const rowbuf *r, size_t i) { return r->flen[i]; }
void rowbuf_free(rowbuf *r);


/* segset: the segments of a table (segment.c).  keys[g][j] is the text of
 * key j in segment g; segment 0 is the global one ("*"), the others come in
 * the bytewise order of their key texts. */
typedef struct segmap {
    uint32_t *direct;
    size_t ndirect;
    uint64_t *hkeys;
    uint32_t *hvals; /* segment + 1; 0 empty */
    size_t nslots, used;
} segmap;

typedef struct keycol {
    const void *ids;
    int width;
} keycol;

typedef struct segset {
    size_t nkeys, nseg;
    char ***keys;
    segmap map;
    keycol *kcols;
    size_t *kc;
} segset;

int segset_build(segset *s, const etacal_table *t, const size_t *key_cols, size_t nkeys, etacal_error *err);

/* The segment of a row (0 when there are no keys), inline: it runs once per
 * row in every pass of a fit. */
static inline uint64_t mix64(uint64_t x)
{
    x ^= x >> 33;
    x *= UINT64_C(0xff51afd7ed558ccd);
    x ^= x >> 33;
    return x;
}

static inline uint32_t key_at(const keycol *k, size_t i)
{
    return k->width == 2 ? ((const uint16_t *)k->ids)[i] : ((const uint32_t *)k->ids)[i];
}

static inline uint64_t row_code(const keycol *keyids, const size_t *kc, size_t nkeys, size_t i)
{
    uint64_t code = 0;
    for (size_t j = 0; j < nkeys; j++)
        code = code * (uint64_t)kc[j] + key_at(&keyids[j], i);
    return code;
}

static inline uint32_t row_seg(const segmap *m, const keycol *keyids, const size_t *kc, size_t nkeys,
                        size_t i)
{
    if (nkeys == 0)
        return 0;
    uint64_t code = row_code(keyids, kc, nkeys, i);
    if (m->direct)
        return m->direct[code] - 1;
    size_t mask = m->nslots - 1;
    size_t s = (size_t)mix64(code) & mask;
    while (m->hkeys[s] != code)
        s = (s + 1) & mask;
    return m->hvals[s] - 1;
}

static inline uint32_t segset_row(const segset *s, size_t row)
{
    return row_seg(&s->map, s->kcols, s->kc, s->nkeys, row);
}

void segset_free(segset *s);

/* seghier: the segments of every level of the keys (segment.c): with
 * levels, (k1..kK), (k1..kK-1, *), ..., down to the global segment 0; without,
 * the full key combinations and the global segment.  keys[g][j] is "*" for
 * the keys that segment g leaves open; level[g] is how many it fixes;
 * parent[g] is the segment one level up (0 at level 1). */
typedef struct seghier {
    size_t nkeys, nseg;
    char ***keys;
    size_t *level, *parent;
    segset *lv;     /* lv[L-1]: the segments of the first L keys */
    uint32_t **uni; /* uni[L-1][segset index] -> segment number */
} seghier;

int seghier_build(seghier *h, const etacal_table *t, const size_t *key_cols, size_t nkeys, int levels,
                  etacal_error *err);
void seghier_free(seghier *h);
/* The segment of row i at level L (0 <= L <= nkeys): 0 for L = 0.  Without
 * levels only L = 0 and L = nkeys are defined. */
static inline uint32_t seghier_row(const seghier *h, size_t L, size_t i)
{
    return L == 0 ? 0 : h->uni[L - 1][segset_row(&h->lv[L - 1], i)];
}

/* Independent random streams from one seed (seed.c): the seed of stream
 * number `stream` (>= 1) is SplitMix64's output number `stream` from state
 * `seed`.  GSL's mt19937 keeps the low 32 bits of a seed. */
enum {
    ETACAL_STREAM_HOLDOUT = 1,  /* the random held-out rows */
    ETACAL_STREAM_QR_SPLIT = 2, /* method qr: fitting or calibration part */
    ETACAL_STREAM_QR_PRE = 3,   /* quantile regression: preprocessing subsamples */
    ETACAL_STREAM_QR_BOOT = 4   /* quantile regression: bootstrap resamples */
};
uint64_t etacal_seed_stream(uint64_t seed, unsigned stream);

/* The p-quantile of Beta(a, b) by bisection (binom.c). */
double beta_quantile(double p, double a, double b);

/* 1 when a key column may not have this name: a quote-table column
 * (target, method, n, k, offset_s, slope, ...) or a coef_ column (fit.c). */
int fit_key_name_reserved(const char *name);

/* Shared by the table fitter and reader. */
int quotes_set_targets(etacal_quotes *q, const double *targets, size_t n, etacal_error *err);
int segment_alloc(etacal_segment *s, size_t nkeys, size_t ntargets);

/* x rounded up to a multiple of 1/scale (1e3: milliseconds), allowing for
 * decimal noise of 1e-9 units. */
double ceil_scaled(double x, double scale);

/* A stream over a caller's sink (io.c), for the library's stdio writers;
 * NULL when out of memory or without a write function.  sink_fclose flushes
 * and closes it and returns rc when nonzero, else ETACAL_OK or an I/O error
 * when the sink refused bytes. */
FILE *sink_fopen(const etacal_sink *s);
/* etacal_outfile_open for a path taken as it is ("-" is a file name here). */
int outfile_open_path(etacal_outfile *o, const char *path, etacal_error *err);
int sink_fclose(FILE *fp, int rc, etacal_error *err);

/* Writes a raw record without its line terminator and returns the
 * terminator ("\n" or "\r\n"; "\n" when there was none). */
const char *csv_put_record(FILE *out, const char *raw, size_t len);
/* A whole number of milliseconds as seconds, shortest form ("1420",
 * "1480.5"); other values exactly. */
void put_ms(FILE *out, double v);

#endif
