/* SPDX-License-Identifier: GPL-3.0-or-later */
/* outsink.h: a library sink (etacal_sink, io.h) over a stdio stream, for the
 * commands that hand their open output (etacal_outfile, a memory stream,
 * stderr) to the library's result writers. */
#ifndef ETACAL_CLI_OUTSINK_H
#define ETACAL_CLI_OUTSINK_H

#include <stdio.h>

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

#endif
