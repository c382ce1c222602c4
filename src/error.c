/* SPDX-License-Identifier: GPL-3.0-or-later */
/* error.c: filling the caller-owned etacal_error record. */
#include "internal.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

void etacal_error_clear(etacal_error *err)
{
    if (!err)
        return;
    err->code = ETACAL_OK;
    err->where[0] = '\0';
    err->msg[0] = '\0';
}

int etacal_error_set(etacal_error *err, int code, const char *where, const char *fmt, ...)
{
    if (!err)
        return code;
    err->code = code;
    snprintf(err->where, sizeof err->where, "%s", where ? where : "");
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(err->msg, sizeof err->msg, fmt, ap);
    va_end(ap);
    return code;
}

const char *etacal_strerror(int code)
{
    switch (code) {
    case ETACAL_OK: return "success";
    case ETACAL_EINVAL: return "invalid argument";
    case ETACAL_ENOMEM: return "out of memory";
    case ETACAL_EIO: return "input/output error";
    case ETACAL_EPARSE: return "malformed input";
    case ETACAL_ENUM: return "numerical problem";
    default: return "unknown error";
    }
}
