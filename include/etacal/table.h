/* SPDX-License-Identifier: GPL-3.0-or-later */
/* table.h: a CSV file read into columns.
 *
 * Only the columns named by the caller are kept.  Numeric columns become
 * arrays of double; key (segment) columns are dictionary-encoded to dense
 * ids 0..count-1 in order of first appearance, stored in 16 bits while a
 * column has at most 65536 values.  Storage grows by doubling;
 * nothing is allocated per row or field. */
#ifndef ETACAL_TABLE_H
#define ETACAL_TABLE_H

#include <stddef.h>
#include <stdint.h>

#include "etacal/error.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

typedef struct etacal_table etacal_table;

enum { ETACAL_COL_NUM = 0, ETACAL_COL_KEY = 1 };

/* Flags of a numeric column. */
enum {
    ETACAL_NUM_SKIP_MISSING = 1, /* a missing value leaves the row out (counted) */
    ETACAL_NUM_NONNEG = 2,       /* a negative value is a data error */
    ETACAL_NUM_POSITIVE = 4,     /* a value <= 0 is a data error */
    ETACAL_NUM_FINITE = 8,       /* inf is a data error */
    ETACAL_NUM_TIME = 16         /* a timestamp (etacal_time_parse): stored as
                                    seconds since the Unix epoch */
};

typedef struct etacal_colspec {
    const char *name; /* header name, matched exactly */
    int type;         /* ETACAL_COL_NUM or ETACAL_COL_KEY */
    unsigned flags;   /* ETACAL_NUM_* for numeric columns */
    const char *what; /* how messages call it ("duration"); may be NULL */
} etacal_colspec;

enum { ETACAL_BAD_ROWS_ERROR = 0, ETACAL_BAD_ROWS_SKIP = 1 };

typedef struct etacal_read_opts {
    char delim;           /* field delimiter; 0 means ',' */
    int bad_rows;         /* ETACAL_BAD_ROWS_ERROR (default) or _SKIP */
    double max_bad_share; /* with _SKIP: more malformed data rows than this
                             share of all data rows is still an error */
    /* Called now and then with bytes read so far and the file's size (0 when
     * unknown, as for a pipe).  May be NULL. */
    void (*progress)(void *ud, uint64_t done, uint64_t total);
    void *progress_ud;
    /* 0 (default) or 1: read with the calling thread alone.  2 or more, or
     * ETACAL_THREADS_AUTO: a regular file of 16 MiB or more is read in two
     * halves at once when there are two or more CPUs (same result, same
     * messages).  The progress callback is only ever called from the
     * calling thread. */
    int threads;
} etacal_read_opts;

/* Counts of what reading saw. */
typedef struct etacal_read_stats {
    size_t data_rows;       /* data records in the file (header and blank lines excluded) */
    size_t kept;            /* rows stored */
    size_t missing;         /* left out for a missing value in a SKIP_MISSING column */
    size_t bad;             /* malformed rows skipped under ETACAL_BAD_ROWS_SKIP */
    size_t first_bad_line;  /* line of the first skipped malformed row, or 0 */
    char first_bad_msg[160];
    uint64_t bytes;         /* bytes read */
} etacal_read_stats;

/* Reads path ("-" for stdin) with a header row, keeping the ncols columns of
 * cols (in that order: column i of the table is cols[i]).  Quoting follows
 * RFC 4180; CRLF and a UTF-8 byte-order mark are accepted; numbers are read
 * in the C locale.  Errors carry "FILE:LINE" in err->where: a named column
 * missing from the header, a row with the wrong number of fields, a bad or
 * out-of-range number, an unterminated quote, an empty file.  On success
 * *out is a new table (free with etacal_table_destroy). */
int etacal_table_read_csv(const char *path, const etacal_colspec *cols, size_t ncols,
                          const etacal_read_opts *opts, etacal_table **out, etacal_error *err);

void etacal_table_destroy(etacal_table *t);

/* One column's values handed over from memory (etacal_table_from_arrays):
 * set num for a numeric column; for a key column either str (the values as
 * text) or codes with labels (pre-coded values, as a categorical column
 * holds them).  Every array has nrows entries. */
typedef struct etacal_column_data {
    const double *num;        /* NaN is a missing value (as an empty CSV field) */
    const char *const *str;   /* NUL-terminated UTF-8; NULL stands for "" */
    const int32_t *codes;     /* indices into labels; a negative code stands for "" */
    const char *const *labels;
    size_t nlabels;
} etacal_column_data;

/* Flags of etacal_table_from_arrays. */
enum {
    /* The table may keep pointers to the caller's numeric arrays instead of
     * copying them (when no row is left out): the caller keeps them alive
     * and unchanged until etacal_table_destroy. */
    ETACAL_TABLE_BORROW = 1
};

/* Builds a table from ncols arrays of nrows values, without a file: column
 * i of the table is cols[i] with the values data[i].  The same rules as
 * etacal_table_read_csv: flags ETACAL_NUM_* are checked (a value breaking
 * one is an error), a NaN in an ETACAL_NUM_SKIP_MISSING column leaves its
 * row out (counted in the stats as missing), other NaNs stay as missing
 * values; ETACAL_NUM_TIME values are seconds since the Unix epoch already.
 * Key values may not be "*", hold the character 0x1f or be invalid UTF-8.
 * source names the data in messages; errors carry "SOURCE: row I" in
 * err->where, I counting rows from 0 as array indices do.  On success *out
 * is a new table (free with etacal_table_destroy). */
int etacal_table_from_arrays(const etacal_colspec *cols, const etacal_column_data *data, size_t ncols,
                             size_t nrows, const char *source, unsigned flags, etacal_table **out,
                             etacal_error *err);


size_t etacal_table_rows(const etacal_table *t);
size_t etacal_table_cols(const etacal_table *t);
const char *etacal_table_col_name(const etacal_table *t, size_t col);
/* The source file's name as given, for messages. */
const char *etacal_table_source(const etacal_table *t);
const etacal_read_stats *etacal_table_stats(const etacal_table *t);

/* Column data, borrowed from the table; NULL when col has the other type. */
const double *etacal_table_num(const etacal_table *t, size_t col);
/* The ids of a key column, borrowed: *width is 2 (uint16_t ids, while the
 * column has at most 65536 distinct values) or 4 (uint32_t).  NULL for a
 * numeric column. */
const void *etacal_table_key_ids(const etacal_table *t, size_t col, int *width);
/* The id of one row of a key column (col must be a key column). */
uint32_t etacal_table_key_id(const etacal_table *t, size_t col, size_t row);
/* Number of distinct values of a key column, and the text of one. */
size_t etacal_table_key_count(const etacal_table *t, size_t col);
const char *etacal_table_key_text(const etacal_table *t, size_t col, uint32_t id);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
