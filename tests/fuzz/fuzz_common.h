/* SPDX-License-Identifier: GPL-3.0-or-later */
/* fuzz_common.h: what the fuzz targets share.  The readers take a path, so
 * each input is written to one temporary file per process first. */
#ifndef ETACAL_FUZZ_COMMON_H
#define ETACAL_FUZZ_COMMON_H

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static char fuzz_path[4096];

static void fuzz_cleanup(void)
{
    if (fuzz_path[0])
        unlink(fuzz_path);
}

/* Writes data to this process's temporary file; returns its path or NULL. */
__attribute__((unused)) static const char *fuzz_write(const uint8_t *data, size_t size)
{
    if (!fuzz_path[0]) {
        const char *dir = getenv("TMPDIR");
        snprintf(fuzz_path, sizeof fuzz_path, "%s/etacal-fuzz-XXXXXX", dir && *dir ? dir : P_tmpdir);
        int fd = mkstemp(fuzz_path);
        if (fd < 0) {
            fuzz_path[0] = '\0';
            return NULL;
        }
        close(fd);
        atexit(fuzz_cleanup);
    }
    FILE *fp = fopen(fuzz_path, "wb");
    if (!fp)
        return NULL;
    if (size && fwrite(data, 1, size, fp) != size) {
        fclose(fp);
        return NULL;
    }
    if (fclose(fp) != 0)
        return NULL;
    return fuzz_path;
}

/* An oracle of a target failed: a bug, reported as a crash. */
#define FUZZ_CHECK(cond)                                                                        \
    do {                                                                                        \
        if (!(cond)) {                                                                          \
            fprintf(stderr, "fuzz check failed: %s (%s:%d)\n", #cond, __FILE__, __LINE__);      \
            abort();                                                                            \
        }                                                                                       \
    } while (0)

#endif
