/* SPDX-License-Identifier: GPL-3.0-or-later */
/* error.c: filling the caller-owned etacal_error record; and GSL's error
 * handler, turned off when the library is loaded.
 *
 * GSL's default handler aborts the process on an error (a matrix that is
 * not positive definite, an allocation that fails), while the library
 * checks every GSL status and reports it as an etacal_error.  So that no
 * program embedding the library has to remember a call first, the library
 * turns the handler off itself when it is loaded (a constructor: before
 * main, for the static library and the shared one alike; this file is
 * linked into every program that reports an error).  A program that wants
 * GSL's handler for its own GSL calls sets one after that. */
#include "base.h"

#include <gsl/gsl_errno.h>
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

#if defined(__GNUC__)
__attribute__((constructor)) static void gsl_quiet(void) { gsl_set_error_handler_off(); }
#else
#error "a compiler with constructors (GCC, Clang) is needed to turn GSL's aborting handler off at load time"
#endif
