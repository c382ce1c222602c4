/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_pool.c: the threads of the quantile regression's passes over rows.
 * Every pass splits the rows into chunks of a fixed size; a chunk writes its
 * partial sums to its own slot and the caller adds the slots in chunk
 * order.  The chunks do not depend on the number of threads (nor on which
 * thread ran which chunk), so neither does any bit of the answer. */
#include "qr_internal.h"

#include <string.h>
#include <threads.h>
#include <time.h>

/* A pass held up this long after the caller's last chunk counts as a
 * stall (a chunk takes well under a millisecond); MAX_STALLS of them and
 * the workers are left out. */
#define STALL_S 0.002
#define MAX_STALLS 3

static void pool_drain(pool *P)
{
    for (;;) {
        atomic_fetch_add(&P->inflight, 1);
        uint64_t t = atomic_fetch_add(&P->ticket, 1);
        const job *J = &P->jobs[(t >> 32) & 1];
        size_t c = (size_t)(t & 0xffffffffu);
        if (c >= J->nchunks) {
            atomic_fetch_sub(&P->inflight, 1);
            return;
        }
        J->fn(J->ctx, c);
        atomic_fetch_sub(&P->inflight, 1);
    }
}

/* Polls of a worker before it sleeps (some tens of microseconds): the
 * interior-point passes follow each other that closely. */
#define SPIN 200000L

static int pool_main(void *arg)
{
    pool *P = arg;
    unsigned long seen = 0;
    for (;;) {
        /* a short spin first: the next pass usually follows at once */
        for (long i = 0; i < SPIN && atomic_load(&P->pub) == seen && !atomic_load(&P->quit); i++)
            ;
        if (atomic_load(&P->pub) == seen) {
            mtx_lock(&P->mu);
            while (atomic_load(&P->pub) == seen && !atomic_load(&P->quit))
                cnd_wait(&P->go, &P->mu);
            mtx_unlock(&P->mu);
        }
        if (atomic_load(&P->quit))
            return 0;
        seen = atomic_load(&P->pub);
        pool_drain(P);
    }
}

void qr_pool_start(pool *P, int nthreads)
{
    memset(P, 0, sizeof *P);
    atomic_init(&P->pub, 0);
    atomic_init(&P->quit, 0);
    atomic_init(&P->ticket, 0);
    atomic_init(&P->inflight, 0);
    if (nthreads < 2)
        return;
    if (mtx_init(&P->mu, mtx_plain) != thrd_success)
        return;
    if (cnd_init(&P->go) != thrd_success) {
        mtx_destroy(&P->mu);
        return;
    }
    P->inited = 1;
    for (int t = 0; t < nthreads - 1 && t < QR_MAX_THREADS; t++) {
        if (thrd_create(&P->th[t], pool_main, P) != thrd_success)
            break;
        P->workers++;
    }
    P->started = P->workers;
}

void qr_pool_stop(pool *P)
{
    if (!P->inited)
        return;
    mtx_lock(&P->mu);
    atomic_store(&P->quit, 1);
    cnd_broadcast(&P->go);
    mtx_unlock(&P->mu);
    for (int t = 0; t < P->started; t++)
        thrd_join(P->th[t], NULL);
    cnd_destroy(&P->go);
    mtx_destroy(&P->mu);
    P->inited = 0;
}

void qr_pool_run(pool *P, chunk_fn fn, void *ctx, size_t nchunks)
{
    if (!P || P->workers == 0 || nchunks < 2) {
        for (size_t c = 0; c < nchunks; c++)
            fn(ctx, c);
        return;
    }
    uint64_t g = ++P->gen;
    job *J = &P->jobs[g & 1];
    J->fn = fn;
    J->ctx = ctx;
    J->nchunks = nchunks;
    atomic_store(&P->ticket, g << 32);
    mtx_lock(&P->mu);
    atomic_fetch_add(&P->pub, 1);
    cnd_broadcast(&P->go);
    mtx_unlock(&P->mu);
    pool_drain(P);
    /* Wait for the chunks in progress.  A worker that the system has
     * paused with a chunk in hand (the other CPUs busy with other work)
     * holds the pass up for a time slice: after a few such stalls the fit
     * goes on with the calling thread alone (the same answer). */
    struct timespec t0 = {0, 0};
    for (long i = 0; atomic_load(&P->inflight) != 0; i++) {
        if (i == 1000)
            clock_gettime(CLOCK_MONOTONIC, &t0);
        if (i > 1000 && i % 256 == 0) {
            struct timespec t1;
            clock_gettime(CLOCK_MONOTONIC, &t1);
            double waited = (double)(t1.tv_sec - t0.tv_sec) + 1e-9 * (double)(t1.tv_nsec - t0.tv_nsec);
            if (waited > STALL_S && !P->stalled) {
                P->stalled = 1;
                P->stalls++;
            }
            thrd_yield();
        }
    }
    P->stalled = 0;
    if (P->stalls >= MAX_STALLS)
        P->workers = 0; /* they sleep until qr_pool_stop */
}
