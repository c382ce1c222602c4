/* SPDX-License-Identifier: GPL-3.0-or-later */
/* outtest.h: what the tests of the result writers (test_out_*.c) share: a
 * sink into a buffer, a sink that refuses every byte, and an allocator
 * whose Nth call fails, so that a writer's out-of-memory paths are walked
 * call by call as tests/tools/failmalloc.sh walks a command's.
 *
 * The allocator replaces malloc, calloc and realloc in the test program
 * (glibc's are reached through __libc_*, as in tests/tools/failmalloc.c).
 * Under AddressSanitizer, whose allocator must see every block, it is left
 * out and the out-of-memory tests skip with a notice.  Include after
 * <cmocka.h>; one test program per file, so each has its own copy. */
#ifndef ETACAL_OUTTEST_H
#define ETACAL_OUTTEST_H

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"

#if defined(__SANITIZE_ADDRESS__)
#define OT_FAILALLOC 0
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define OT_FAILALLOC 0
#endif
#endif
#ifndef OT_FAILALLOC
#define OT_FAILALLOC 1
#endif

#if OT_FAILALLOC
static unsigned long ot_fail_at; /* 0: never */
static unsigned long ot_calls;

extern void *__libc_malloc(size_t size);
extern void *__libc_calloc(size_t n, size_t size);
extern void *__libc_realloc(void *p, size_t size);

static int ot_fail(void)
{
    if (ot_fail_at && ++ot_calls == ot_fail_at) {
        errno = ENOMEM;
        return 1;
    }
    return 0;
}

void *malloc(size_t size) { return ot_fail() ? NULL : __libc_malloc(size); }
void *calloc(size_t n, size_t size) { return ot_fail() ? NULL : __libc_calloc(n, size); }
void *realloc(void *p, size_t size) { return ot_fail() ? NULL : __libc_realloc(p, size); }
#endif

/* A sink into a buffer allocated up front (so that it never allocates
 * while a writer runs), refusing bytes past its capacity. */
typedef struct ot_buf {
    char *p;
    size_t len, cap;
} ot_buf;

static inline int ot_buf_write(void *ud, const char *buf, size_t len)
{
    ot_buf *b = ud;
    if (b->len + len + 1 > b->cap)
        return -1;
    memcpy(b->p + b->len, buf, len);
    b->len += len;
    b->p[b->len] = '\0';
    return 0;
}

static inline void ot_buf_init(ot_buf *b, size_t cap)
{
    b->p = malloc(cap);
    b->len = 0;
    b->cap = cap;
    if (b->p)
        b->p[0] = '\0';
}

static inline int ot_refuse(void *ud, const char *buf, size_t len)
{
    (void)ud;
    (void)buf;
    (void)len;
    return -1;
}

/* A writer under test: writes its result in format to out. */
typedef int (*ot_writer)(const void *ctx, int format, const etacal_sink *out, etacal_error *err);

/* Writes in format to a buffer sink: the bytes (a new string) or NULL
 * after a failure with rc set. */
static inline char *ot_write(ot_writer w, const void *ctx, int format, int *rc, etacal_error *err)
{
    ot_buf b;
    ot_buf_init(&b, 1 << 20);
    if (!b.p) {
        *rc = ETACAL_ENOMEM;
        return NULL;
    }
    etacal_sink s = {ot_buf_write, &b};
    *rc = w(ctx, format, &s, err);
    if (*rc) {
        free(b.p);
        return NULL;
    }
    return b.p;
}

/* For N = 1, 2, ... the Nth allocation of the writer fails, until a run
 * makes fewer than N: every run either gives exactly the bytes of a run
 * without failure or fails with ETACAL_ENOMEM and "out of memory".
 * Returns the number of runs that reported out of memory. */
static inline unsigned long ot_walk_oom(ot_writer w, const void *ctx, int format, const char *want)
{
#if OT_FAILALLOC
    unsigned long oom = 0;
    for (unsigned long n = 1;; n++) {
        ot_buf b;
        ot_buf_init(&b, 1 << 20);
        assert_non_null(b.p);
        etacal_sink s = {ot_buf_write, &b};
        etacal_error err;
        etacal_error_clear(&err);
        ot_calls = 0;
        ot_fail_at = n;
        int rc = w(ctx, format, &s, &err);
        unsigned long made = ot_calls;
        ot_fail_at = 0;
        if (rc == ETACAL_OK) {
            assert_string_equal(b.p, want);
        } else {
            if (rc != ETACAL_ENOMEM)
                fail_msg("allocation %lu failing: code %d, %s", n, rc, err.msg);
            assert_non_null(strstr(err.msg, "out of memory"));
            oom++;
        }
        free(b.p);
        if (made < n)
            break;
    }
    return oom;
#else
    (void)w;
    (void)ctx;
    (void)format;
    (void)want;
    return 0;
#endif
}

/* Skips the calling test, visibly, when the allocator cannot be replaced. */
#if OT_FAILALLOC
#define OT_NEED_FAILALLOC() ((void)0)
#else
#define OT_NEED_FAILALLOC()                                                                                  \
    do {                                                                                                     \
        fprintf(stderr, "SKIP: out-of-memory walk needs glibc's allocator (not under AddressSanitizer)\n"); \
        skip();                                                                                              \
    } while (0)
#endif

#endif
