/* SPDX-License-Identifier: GPL-3.0-or-later */
/* failmalloc.c: an allocator hook for out-of-memory tests, loaded with
 * LD_PRELOAD.  malloc, calloc, realloc (and so strdup, open_memstream...,
 * which glibc routes through them) count their calls; with
 * ETACAL_FAIL_AT=N the Nth call returns NULL (errno ENOMEM) and every other
 * call succeeds.  With ETACAL_FAIL_REPORT set, the number of calls is
 * written to stderr at exit ("failmalloc: N allocations"), which tells a
 * test how many N to try.  The real allocator is glibc's, reached through
 * its __libc_* entry points (dlsym would allocate while being looked up). */
#define _GNU_SOURCE
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

extern void *__libc_malloc(size_t size);
extern void *__libc_calloc(size_t n, size_t size);
extern void *__libc_realloc(void *p, size_t size);

static unsigned long fail_at; /* 0: never */
static unsigned long calls;
static int inited;

static void init(void)
{
    if (inited)
        return;
    inited = 1;
    const char *s = getenv("ETACAL_FAIL_AT");
    fail_at = s ? strtoul(s, NULL, 10) : 0;
}

static int should_fail(void)
{
    init();
    unsigned long c = __atomic_add_fetch(&calls, 1, __ATOMIC_RELAXED);
    if (fail_at && c == fail_at) {
        errno = ENOMEM;
        return 1;
    }
    return 0;
}

void *malloc(size_t size)
{
    return should_fail() ? NULL : __libc_malloc(size);
}

void *calloc(size_t n, size_t size)
{
    return should_fail() ? NULL : __libc_calloc(n, size);
}

void *realloc(void *p, size_t size)
{
    return should_fail() ? NULL : __libc_realloc(p, size);
}

__attribute__((destructor)) static void report(void)
{
    if (!getenv("ETACAL_FAIL_REPORT"))
        return;
    char buf[64];
    int n = snprintf(buf, sizeof buf, "failmalloc: %lu allocations\n", __atomic_load_n(&calls, __ATOMIC_RELAXED));
    if (n > 0)
        (void)!write(2, buf, (size_t)n);
}
