/* SPDX-License-Identifier: GPL-3.0-or-later */
/* io.c: output files that appear whole or not at all (temporary file in the
 * same directory, fsync, rename, fsync of the directory). */
#define _GNU_SOURCE
#include "base.h"

#include <errno.h>
#include <fcntl.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

int outfile_open(outfile *o, const char *path, etacal_error *err)
{
    memset(o, 0, sizeof *o);
    if (!path || !path[0])
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no output path");
    size_t len = strlen(path);
    o->path = malloc(len + 1);
    o->tmp = malloc(len + 16);
    if (!o->path || !o->tmp) {
        outfile_abort(o);
        return etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
    }
    memcpy(o->path, path, len + 1);
    snprintf(o->tmp, len + 16, "%s.tmp.XXXXXX", path);
    int fd = mkstemp(o->tmp);
    if (fd < 0) {
        int e = errno;
        free(o->tmp);
        o->tmp = NULL;
        outfile_abort(o);
        return etacal_error_set(err, ETACAL_EIO, path, "cannot create output file: %s", strerror(e));
    }
    mode_t um = umask(0);
    umask(um);
    (void)fchmod(fd, 0666 & ~um);
    o->fp = fdopen(fd, "w");
    if (!o->fp) {
        int e = errno;
        close(fd);
        outfile_abort(o);
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

int outfile_commit(outfile *o, etacal_error *err)
{
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
        outfile_abort(o);
        return etacal_error_set(err, ETACAL_EIO, where, "write failed: %s", strerror(e));
    }
    fsync_dir_of(o->path);
    free(o->tmp);
    o->tmp = NULL;
    free(o->path);
    o->path = NULL;
    return ETACAL_OK;
}

void outfile_abort(outfile *o)
{
    if (!o)
        return;
    if (o->fp)
        fclose(o->fp);
    o->fp = NULL;
    if (o->tmp)
        unlink(o->tmp);
    free(o->tmp);
    free(o->path);
    o->tmp = NULL;
    o->path = NULL;
}

/* ---- sinks ---------------------------------------------------------------
 * The writers inside the library print with stdio; a caller's sink is
 * wrapped in a stream of its own (glibc's fopencookie), so one writer serves
 * files, paths and callbacks alike. */
typedef struct sink_cookie {
    etacal_sink sink;
    int failed;
} sink_cookie;

static ssize_t sink_write(void *c, const char *buf, size_t len)
{
    sink_cookie *k = c;
    if (k->failed || k->sink.write(k->sink.ud, buf, len) != 0) {
        k->failed = 1;
        errno = EIO;
        return -1;
    }
    return (ssize_t)len;
}

static int sink_close(void *c)
{
    sink_cookie *k = c;
    int failed = k->failed;
    free(k);
    return failed ? -1 : 0;
}

int sink_fopen(const etacal_sink *s, FILE **fp, etacal_error *err)
{
    *fp = NULL;
    if (!s || !s->write)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no sink to write to");
    sink_cookie *k = malloc(sizeof *k);
    if (k) {
        k->sink = *s;
        k->failed = 0;
        cookie_io_functions_t io = {NULL, sink_write, NULL, sink_close};
        if (!(*fp = fopencookie(k, "w", io)))
            free(k);
    }
    return *fp ? ETACAL_OK : etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
}

int sink_fclose(FILE *fp, int rc, etacal_error *err)
{
    int bad = fflush(fp) != 0 || ferror(fp);
    if (fclose(fp) != 0)
        bad = 1;
    if (rc)
        return rc;
    if (bad)
        return etacal_error_set(err, ETACAL_EIO, NULL, "the output sink refused the data");
    return ETACAL_OK;
}

/* ---- the public output file: an outfile and its sink ------------------- */
struct etacal_outfile {
    outfile f;
    etacal_sink sink;
};

int sink_stdio(void *ud, const char *buf, size_t len)
{
    (void)fwrite(buf, 1, len, (FILE *)ud);
    return 0;
}

int etacal_outfile_open(const char *path, etacal_outfile **out, etacal_error *err)
{
    if (!out)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no place for the output file");
    *out = NULL;
    etacal_outfile *o = calloc(1, sizeof *o);
    if (!o)
        return etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
    int rc = outfile_open(&o->f, path, err);
    if (rc) {
        free(o);
        return rc;
    }
    o->sink.write = sink_stdio;
    o->sink.ud = o->f.fp;
    *out = o;
    return ETACAL_OK;
}

const etacal_sink *etacal_outfile_sink(const etacal_outfile *o) { return &o->sink; }

int etacal_outfile_commit(etacal_outfile *o, etacal_error *err)
{
    if (!o)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "no output file");
    return outfile_commit(&o->f, err);
}

void etacal_outfile_destroy(etacal_outfile *o)
{
    if (!o)
        return;
    outfile_abort(&o->f);
    free(o);
}
