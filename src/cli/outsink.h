/* SPDX-License-Identifier: GPL-3.0-or-later */
/* outsink.h: library sinks (etacal_sink, io.h) for the commands that hand
 * output to the library's result writers: over a stdio stream (their open
 * etacal_outfile, stdout, stderr), and into memory, for a summary that must
 * be complete before the command's output file is committed. */
#ifndef ETACAL_CLI_OUTSINK_H
#define ETACAL_CLI_OUTSINK_H

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/io.h"

static inline int outsink_write(void *ud, const char *buf, size_t len)
{
    (void)fwrite(buf, 1, len, (FILE *)ud);
    return 0;
}

/* The sink writing to fp (which stays the caller's).  A failed write is
 * left in the stream's error flag, which the caller checks when it closes
 * or commits the stream (etacal_outfile_commit: "FILE: write failed: ..."),
 * as it did when it printed to the stream itself. */
static inline etacal_sink outsink(FILE *fp)
{
    etacal_sink s = {outsink_write, fp};
    return s;
}

/* A growing buffer; zero-initialise, free data when done. */
typedef struct outbuf {
    char *data;
    size_t len, cap;
    int oom; /* a write found no memory: the writer failed (ETACAL_EIO) for it */
} outbuf;

static inline int outbuf_write(void *ud, const char *buf, size_t len)
{
    outbuf *b = ud;
    if (b->len + len > b->cap) {
        size_t cap = b->cap ? b->cap : 1024;
        while (cap < b->len + len)
            cap *= 2;
        char *d = realloc(b->data, cap);
        if (!d) {
            b->oom = 1;
            return -1;
        }
        b->data = d;
        b->cap = cap;
    }
    memcpy(b->data + b->len, buf, len);
    b->len += len;
    return 0;
}

static inline etacal_sink outbuf_sink(outbuf *b)
{
    etacal_sink s = {outbuf_write, b};
    return s;
}

#endif
