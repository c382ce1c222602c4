/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cliout.c: where a command's output goes.  "-" (or no -o) is standard
 * output, written as it goes: a convention of the command line, which the
 * library does not know; any other name is a library output file, which
 * appears whole or not at all. */
#include "cli.h"
#include "outsink.h"

#include <errno.h>
#include <sys/stat.h>
#include <string.h>

int cliout_open(cliout *o, const char *path, etacal_error *err)
{
    memset(o, 0, sizeof *o);
    if (!path || strcmp(path, "-") == 0) {
        o->sink = outsink(stdout); /* write errors show at the commit */
        return ETACAL_OK;
    }
    int rc = etacal_outfile_open(path, &o->of, err);
    if (rc == ETACAL_OK)
        o->sink = *etacal_outfile_sink(o->of);
    return rc;
}

int cliout_commit(cliout *o, etacal_error *err)
{
    if (o->of)
        return etacal_outfile_commit(o->of, err);
    if (fflush(stdout) != 0 || ferror(stdout))
        return etacal_error_set(err, ETACAL_EIO, "stdout", "write failed: %s", strerror(errno));
    return ETACAL_OK;
}

void cliout_close(cliout *o)
{
    etacal_outfile_destroy(o->of);
    o->of = NULL;
}

const char *cli_input(const char *path)
{
    /* "-" is the command line's name for standard input; the library reads
     * paths as they are */
    return path && strcmp(path, "-") == 0 ? "/dev/stdin" : path;
}

/* 1 when path names the same file as out: the same text, or the same
 * device and inode (another path to it, a hard or symbolic link). */
static int same_file(const char *out, const char *in)
{
    if (!in || strcmp(in, "-") == 0)
        return 0;
    if (strcmp(out, in) == 0)
        return 1;
    struct stat so, si;
    return stat(out, &so) == 0 && stat(in, &si) == 0 && so.st_dev == si.st_dev && so.st_ino == si.st_ino;
}

int cli_check_output(const char *cmd, const char *out, const char *const *inputs, size_t n)
{
    if (!out || strcmp(out, "-") == 0)
        return 0;
    for (size_t i = 0; i < n; i++)
        if (same_file(out, inputs[i]))
            return usage_error(cmd, "the output '%s' is an input of this command too ('%s'): nothing written", out,
                               inputs[i]);
    return 0;
}
