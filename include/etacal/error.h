/* SPDX-License-Identifier: GPL-3.0-or-later */
/* error.h: status codes and the caller-owned error record every fallible
 * etacal call fills.  The library never prints or exits; it returns one of
 * the codes below and, on failure, a message the caller may show. */
#ifndef ETACAL_ERROR_H
#define ETACAL_ERROR_H

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

enum {
    ETACAL_OK = 0,
    ETACAL_EINVAL = 1, /* a bad argument or option value */
    ETACAL_ENOMEM = 2, /* an allocation failed */
    ETACAL_EIO = 3,    /* reading or writing a file failed */
    ETACAL_EPARSE = 4, /* malformed input (CSV shape, a bad number) */
    ETACAL_ENUM = 5    /* a numerical problem (too few rows, no finite result) */
};

/* A thread count meaning "one thread per online CPU" (where a count of
 * threads is asked: etacal_read_opts, etacal_fitspec, etacal_qr_opts).  0
 * and 1 mean the calling thread alone: the library starts no thread unless
 * the caller asks for more. */
#define ETACAL_THREADS_AUTO (-1)

/* `where` holds "FILE:LINE" (or "FILE") when the problem has a place in the
 * input, else the empty string; `msg` says what is wrong, without a
 * trailing newline or program name. */
typedef struct etacal_error {
    int code;
    char where[128];
    char msg[256];
} etacal_error;

/* Clears an error record (code ETACAL_OK, empty strings).  NULL is allowed. */
void etacal_error_clear(etacal_error *err);

/* Fills err (if not NULL) and returns code, so a caller can write
 * `return etacal_error_set(err, ETACAL_EINVAL, NULL, "...", ...);`.
 * where may be NULL. */
int etacal_error_set(etacal_error *err, int code, const char *where, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;

/* A short name for a status code ("invalid argument", ...). */
const char *etacal_strerror(int code);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
