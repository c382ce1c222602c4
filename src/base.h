/* SPDX-License-Identifier: GPL-3.0-or-later */
/* base.h: the foundations the library's modules share (layer 1): compensated
 * sums, growing arrays, the string dictionary, exact decimal arithmetic,
 * text checks, places in messages, seed streams, sinks and output files.
 * Not installed. */
#ifndef ETACAL_BASE_H
#define ETACAL_BASE_H

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

/* "FILE:LINE" into buf. */
void format_where(char *buf, size_t size, const char *path, size_t line);

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

/* x rounded up to a multiple of 1/scale (1e3: milliseconds), allowing for
 * decimal noise of 1e-9 units. */
double ceil_scaled(double x, double scale);

/* A stream over a caller's sink (io.c), for the library's stdio writers:
 * ETACAL_OK and *fp, or ETACAL_EINVAL without a write function, or
 * ETACAL_ENOMEM.  sink_fclose flushes and closes it and returns rc when
 * nonzero, else ETACAL_OK or an I/O error when the sink refused bytes. */
int sink_fopen(const etacal_sink *s, FILE **fp, etacal_error *err);
/* An output file that appears whole or not at all (io.c; the public
 * etacal_outfile is one of these with a sink): the data goes to tmp, which
 * outfile_commit flushes, fsyncs and renames over path.  Zero-initialise;
 * outfile_abort is safe on a zeroed, committed or aborted outfile.  The
 * path is taken as it is. */
typedef struct outfile {
    FILE *fp;   /* write here */
    char *path; /* owned copies */
    char *tmp;
} outfile;
int outfile_open(outfile *o, const char *path, etacal_error *err);
int outfile_commit(outfile *o, etacal_error *err);
void outfile_abort(outfile *o);
/* A sink's write function over a stdio stream (ud: the FILE); a short write
 * stays in the stream's error flag for the commit to report. */
int sink_stdio(void *ud, const char *buf, size_t len);
int sink_fclose(FILE *fp, int rc, etacal_error *err);

/* Writes a raw record without its line terminator and returns the
 * terminator ("\n" or "\r\n"; "\n" when there was none). */
const char *csv_put_record(FILE *out, const char *raw, size_t len);
/* A whole number of milliseconds as seconds, shortest form ("1420",
 * "1480.5"); other values exactly. */
void put_ms(FILE *out, double v);

#endif
