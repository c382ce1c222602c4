/* SPDX-License-Identifier: GPL-3.0-or-later */
/* io.h: output files that appear whole or not at all. */
#ifndef ETACAL_IO_H
#define ETACAL_IO_H

#include <stdio.h>

#include "etacal/error.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

/* An output file that appears only when complete: the data goes to a
 * temporary file in the same directory, which etacal_outfile_commit flushes,
 * fsyncs and renames over the path.  An existing file at the path is left
 * untouched until then, and for ever if the writer fails.  "-" means stdout,
 * written directly (a stream cannot be taken back).  Zero-initialise before
 * use. */
typedef struct etacal_outfile {
    FILE *fp;   /* write here */
    char *path; /* owned copies */
    char *tmp;
    int is_stdout;
} etacal_outfile;

int etacal_outfile_open(etacal_outfile *o, const char *path, etacal_error *err);
/* Flushes and checks the stream, then (for a file) fsyncs, renames into
 * place and fsyncs the directory.  On failure the temporary file is removed. */
int etacal_outfile_commit(etacal_outfile *o, etacal_error *err);
/* Abandons the output: closes and removes the temporary file.  Safe on a
 * zeroed, committed or already aborted outfile. */
void etacal_outfile_abort(etacal_outfile *o);

/* Where a writer's bytes go: write(ud, buf, len) takes len bytes and
 * returns 0, or nonzero to stop; the writer then fails with ETACAL_EIO.
 * Every writer of the library takes a sink or a path, so a program can send
 * output anywhere (a buffer, a socket, a database) without a FILE.  Bytes
 * arrive in chunks of any size, in order. */
typedef struct etacal_sink {
    int (*write)(void *ud, const char *buf, size_t len);
    void *ud;
} etacal_sink;

/* A write function for a sink over an open stream: {etacal_sink_file, fp}
 * sends a writer's bytes to fp (say an etacal_outfile's).  Nonzero when
 * fwrite writes short. */
int etacal_sink_file(void *fp, const char *buf, size_t len);

/* The formats of the result writers (etacal_check_write,
 * etacal_backtest_write, etacal_qr_write, etacal_curve_write,
 * etacal_publish_write_report): aligned text for people; CSV
 * for machines and SQL joins (a header line, then one record per figure,
 * comma-delimited, an empty field for none); JSON (one object, indented
 * by 2, members in a fixed order, NaN and infinities as null) whose shape
 * each writer documents.  Any other value is an error (ETACAL_EINVAL). */
enum { ETACAL_FORMAT_TEXT = 0, ETACAL_FORMAT_CSV = 1, ETACAL_FORMAT_JSON = 2 };

/* Writes one CSV field (RFC 4180): quoted, with inner quotes doubled, only
 * when it holds the delimiter, a quote, a line break or edge spaces. */
void etacal_csv_put_field(FILE *fp, const char *s, size_t len, char delim);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
