/* SPDX-License-Identifier: GPL-3.0-or-later */
/* io.c: output files that appear whole or not at all (temporary file in the
 * same directory, fsync, rename, fsync of the directory). */
#define _GNU_SOURCE
#include "internal.h"

#include <errno.h>
#include <fcntl.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

int etacal_outfile_open(etacal_outfile *o, const char *path, etacal_error *err)
{
    memset(o, 0, sizeof *o);
    if (strcmp(path, "-") == 0) {
        o->fp = stdout;
        o->is_stdout = 1;
        return ETACAL_OK;
    }
    size_t len = strlen(path);
    o->path = malloc(len + 1);
    o->tmp = malloc(len + 16);
    if (!o->path || !o->tmp) {
        etacal_outfile_abort(o);
        return etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
    }
    memcpy(o->path, path, len + 1);
    snprintf(o->tmp, len + 16, "%s.tmp.XXXXXX", path);
    int fd = mkstemp(o->tmp);
    if (fd < 0) {
        int e = errno;
        free(o->tmp);
        o->tmp = NULL;
        etacal_outfile_abort(o);
        return etacal_error_set(err, ETACAL_EIO, path, "cannot create output file: %s", strerror(e));
    }
    mode_t um = umask(0);
    umask(um);
    (void)fchmod(fd, 0666 & ~um);
    o->fp = fdopen(fd, "w");
    if (!o->fp) {
        int e = errno;
        close(fd);
        etacal_outfile_abort(o);
        return etacal_error_set(err, ETACAL_EIO, path, "cannot open output file: %s", strerror(e));
    }
    return ETACAL_OK;
}

static void fsync_dir_of(const char *path)
{
    const char *slash = strrchr(path, '/');
    char dir[4096];
    if (!slash)
        snprintf(dir, sizeof dir, ".");
    else if (slash == path)
        snprintf(dir, sizeof dir, "/");
    else
        snprintf(dir, sizeof dir, "%.*s", (int)(slash - path), path);
    int fd = open(dir, O_RDONLY | O_DIRECTORY);
    if (fd >= 0) {
        (void)fsync(fd);
        close(fd);
    }
}

int etacal_outfile_commit(etacal_outfile *o, etacal_error *err)
{
    if (o->is_stdout) {
        if (fflush(stdout) != 0 || ferror(stdout))
            return etacal_error_set(err, ETACAL_EIO, "stdout", "write failed: %s", strerror(errno));
        return ETACAL_OK;
    }
    if (!o->fp)
        return etacal_error_set(err, ETACAL_EIO, o->path, "output file is not open");
    int bad = fflush(o->fp) != 0 || ferror(o->fp);
    int e = errno;
    if (!bad && fsync(fileno(o->fp)) != 0) {
        bad = 1;
        e = errno;
    }
    if (fclose(o->fp) != 0 && !bad) {
        bad = 1;
        e = errno;
    }
    o->fp = NULL;
    if (!bad && rename(o->tmp, o->path) != 0) {
        bad = 1;
        e = errno;
    }
    if (bad) {
        char where[128];
        snprintf(where, sizeof where, "%s", o->path);
        etacal_outfile_abort(o);
        return etacal_error_set(err, ETACAL_EIO, where, "write failed: %s", strerror(e));
    }
    fsync_dir_of(o->path);
    free(o->tmp);
    o->tmp = NULL;
    free(o->path);
    o->path = NULL;
    return ETACAL_OK;
}

void etacal_outfile_abort(etacal_outfile *o)
{
    if (!o)
        return;
    if (o->fp && !o->is_stdout)
        fclose(o->fp);
    o->fp = NULL;
    if (o->tmp)
        unlink(o->tmp);
    free(o->tmp);
    free(o->path);
    o->tmp = NULL;
    o->path = NULL;
}
