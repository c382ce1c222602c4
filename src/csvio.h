/* SPDX-License-Identifier: GPL-3.0-or-later */
/* csvio.h: CSV in chunks through libcsv with physical line numbers, and the
 * record buffer of the readers (layer 2: csv_stream.c).
 * Not installed. */
#ifndef ETACAL_CSVIO_H
#define ETACAL_CSVIO_H

#include "base.h"

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

#endif
