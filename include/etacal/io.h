/* SPDX-License-Identifier: GPL-3.0-or-later */
/* io.h: where output goes: sinks (a write callback) and output files
 * that appear whole or not at all. */
#ifndef ETACAL_IO_H
#define ETACAL_IO_H

#include <stddef.h>

#include "etacal/error.h"

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

/* Where a writer's bytes go: write(ud, buf, len) takes len bytes and
 * returns 0, or nonzero to stop; the writer then fails with ETACAL_EIO.
 * Every writer of the library takes a sink or a path, so a program can send
 * output anywhere (a buffer, a socket, a database) without a FILE.  Bytes
 * arrive in chunks of any size, in order. */
typedef struct etacal_sink {
    int (*write)(void *ud, const char *buf, size_t len);
    void *ud;
} etacal_sink;

/* An output file that appears only when complete: the bytes written to its
 * sink go to a temporary file in the same directory, which
 * etacal_outfile_commit flushes, fsyncs and renames over the path.  An
 * existing file at the path is left untouched until then, and for ever if
 * the writer fails.  The path is taken as it is ("-" is a file of that
 * name: standard output is the caller's to handle).  Open gives a new
 * object; destroy it after a commit, or instead of one to abandon the
 * output (the temporary file is removed).  NULL is allowed. */
typedef struct etacal_outfile etacal_outfile;

int etacal_outfile_open(const char *path, etacal_outfile **out, etacal_error *err);
/* The sink to hand a writer; valid until the outfile is destroyed. */
const etacal_sink *etacal_outfile_sink(const etacal_outfile *o);
/* Flushes and checks the data, then fsyncs, renames into place and fsyncs
 * the directory.  On failure the temporary file is removed. */
int etacal_outfile_commit(etacal_outfile *o, etacal_error *err);
void etacal_outfile_destroy(etacal_outfile *o);

/* The formats of the result writers (etacal_check_write,
 * etacal_backtest_write, etacal_qr_write, etacal_curve_write,
 * etacal_publish_write_report): aligned text for people; CSV
 * for machines and SQL joins (a header line, then one record per figure,
 * comma-delimited, an empty field for none); JSON (one object, indented
 * by 2, members in a fixed order, NaN and infinities as null) whose shape
 * each writer documents.  Any other value is an error (ETACAL_EINVAL). */
enum { ETACAL_FORMAT_TEXT = 0, ETACAL_FORMAT_CSV = 1, ETACAL_FORMAT_JSON = 2 };

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
