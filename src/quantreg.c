/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quantreg.c: linear quantile regression by the Frisch-Newton interior
 * point method with preprocessing (Portnoy & Koenker 1997, "The Gaussian
 * hare and the Laplacian tortoise", Statistical Science 12:279-300), in the
 * steps of quantreg's rqfnb and rq.fit.pfn (see ../shared/METHODS.md), plus
 * standard errors (Powell kernel sandwich, xy bootstrap) and the monotone
 * rearrangement of Chernozhukov, Fernandez-Val & Galichon (2010).
 *
 * The LP: min c'x s.t. Ax = b, 0 <= x <= 1, with c = -y, A = X' (p x n) and
 * b = (1 - tau) X'1; the regression coefficients are minus the dual
 * variables of the equality constraints. */
#include "internal.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdatomic.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <threads.h>
#include <time.h>
#include <unistd.h>

#define PMAX (ETACAL_QR_MAX_COVARIATES + 1)
#define STEP_B 0.99995 /* fraction of the way to the boundary (rqfnb's beta) */

/* ---- the data, centred and scaled ------------------------------------ */

typedef struct design {
    const double *y;
    const double *const *x;
    const double *w;
    size_t n, k, p;
    double mean[PMAX], scale[PMAX], inv[PMAX];
} design;

/* Row i of the scaled design (1, (x_ij - m_j)/s_j) and its response, both
 * times the weight: w rho(u) = rho(w u) for w >= 0, so a weighted fit is an
 * unweighted fit of the scaled rows. */
static inline double design_row(const design *d, size_t i, double *row)
{
    double wi = d->w ? d->w[i] : 1;
    row[0] = wi;
    for (size_t j = 0; j < d->k; j++)
        row[j + 1] = wi * (d->x[j][i] - d->mean[j + 1]) * d->inv[j + 1];
    return wi * d->y[i];
}

/* Cholesky of a small SPD matrix in place (lower triangle), with a relative
 * pivot test: returns the first column whose pivot is not clearly positive
 * (a column that is a combination of the earlier ones), or -1. */
static long small_cholesky(double *a, size_t p)
{
    for (size_t j = 0; j < p; j++) {
        double diag = a[j * p + j];
        double s = diag;
        for (size_t k = 0; k < j; k++)
            s -= a[j * p + k] * a[j * p + k];
        if (!(s > 1e-10 * (diag > 0 ? diag : 1)))
            return (long)j;
        double r = sqrt(s);
        a[j * p + j] = r;
        for (size_t i = j + 1; i < p; i++) {
            double t = a[i * p + j];
            for (size_t k = 0; k < j; k++)
                t -= a[i * p + k] * a[j * p + k];
            a[i * p + j] = t / r;
        }
    }
    return -1;
}

/* Mean of v[0..n) (center NULL), or mean of (v - c)^2 (center given),
 * summed in blocks of 256 with a compensated sum across blocks. */
static double block_mean(const double *v, size_t n, double c, const double *center)
{
    ksum tot = {0, 0};
    for (size_t i = 0; i < n; i += 256) {
        size_t e = i + 256 < n ? i + 256 : n;
        double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
        size_t j = i;
        if (center) {
            for (; j + 4 <= e; j += 4) {
                double a = v[j] - c, b = v[j + 1] - c, cc = v[j + 2] - c, dd = v[j + 3] - c;
                s0 += a * a;
                s1 += b * b;
                s2 += cc * cc;
                s3 += dd * dd;
            }
            for (; j < e; j++)
                s0 += (v[j] - c) * (v[j] - c);
        } else {
            for (; j + 4 <= e; j += 4) {
                s0 += v[j];
                s1 += v[j + 1];
                s2 += v[j + 2];
                s3 += v[j + 3];
            }
            for (; j < e; j++)
                s0 += v[j];
        }
        ksum_add(&tot, (s0 + s1) + (s2 + s3));
    }
    return ksum_value(&tot) / (double)n;
}

static int design_init(design *d, const double *y, const double *const *x, size_t k, const double *w, size_t n,
                       const char *const *names, etacal_error *err)
{
    memset(d, 0, sizeof *d);
    d->y = y;
    d->x = x;
    d->w = w;
    d->n = n;
    d->k = k;
    d->p = k + 1;
    d->mean[0] = 0;
    d->scale[0] = 1;
    d->inv[0] = 1;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(y[i]))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "response of data row %zu is not finite", i + 1);
        if (w && !(w[i] >= 0 && isfinite(w[i])))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "weight of data row %zu is not a finite number >= 0",
                                    i + 1);
    }
    for (size_t j = 0; j < k; j++) {
        /* The centre and scale only condition the problem (the answer is
         * mapped back exactly), so plain sums in blocks are accurate enough. */
        double m = block_mean(x[j], n, 0, NULL);
        if (!isfinite(m)) {
            for (size_t i = 0; i < n; i++)
                if (!isfinite(x[j][i]))
                    return etacal_error_set(err, ETACAL_EINVAL, NULL, "covariate '%s' of data row %zu is not finite",
                                            names && names[j] ? names[j] : "?", i + 1);
        }
        double sd = sqrt(block_mean(x[j], n, m, &m));
        if (!(sd > 1e-12 * (fabs(m) > 1 ? fabs(m) : 1)))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "covariate '%s' is constant: it cannot be told apart from the intercept",
                                    names && names[j] ? names[j] : "?");
        d->mean[j + 1] = m;
        d->scale[j + 1] = sd;
        d->inv[j + 1] = 1 / sd;
    }
    /* Collinearity: Cholesky of the scaled X'X (unweighted), first on at
     * most 50,000 evenly spaced rows; exact collinearity shows on any set
     * of rows, and only when those look singular are all rows checked (a
     * rare value may make a subset singular when the whole is not). */
    size_t p = d->p;
    design unw = *d;
    unw.w = NULL;
    long bad = -1;
    for (size_t stride = n > 50000 ? (n + 49999) / 50000 : 1;; stride = 1) {
        double g[PMAX * PMAX] = {0}, row[PMAX];
        for (size_t i = 0; i < n; i += stride) {
            design_row(&unw, i, row);
            for (size_t a = 0; a < p; a++)
                for (size_t b = 0; b <= a; b++)
                    g[a * p + b] += row[a] * row[b];
        }
        for (size_t a = 0; a < p; a++)
            for (size_t b = a + 1; b < p; b++)
                g[a * p + b] = g[b * p + a];
        bad = small_cholesky(g, p);
        if (bad < 0 || stride == 1)
            break;
    }
    if (bad > 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL,
                                "covariate '%s' is a linear combination of the intercept and the covariates before it (collinear)",
                                names && names[bad - 1] ? names[bad - 1] : "?");
    return ETACAL_OK;
}


static double dot_row(const double *xi, const double *v, size_t p)
{
    double s = 0;
    for (size_t j = 0; j < p; j++)
        s += xi[j] * v[j];
    return s;
}

/* ---- quantiles ---------------------------------------------------------- */

static double type7(double *v, size_t n, double prob)
{
    /* Hyndman & Fan type 7: h = (n-1)p + 1, linear between x_(j) and x_(j+1) */
    double h = (double)(n - 1) * prob + 1;
    size_t j = (size_t)floor(h);
    if (j < 1)
        j = 1;
    if (j >= n)
        return etacal_select(v, n, n);
    double g = h - (double)j;
    double lo = etacal_select(v, n, j);
    double hi = v[j];
    for (size_t i = j + 1; i < n; i++)
        if (v[i] < hi)
            hi = v[i];
    return lo + g * (hi - lo);
}
static void type7_pair(double *v, size_t n, double p1, double p2, double *q1, double *q2)
{
    double h = (double)(n - 1) * p1 + 1;
    size_t j = (size_t)floor(h);
    if (j < 1)
        j = 1;
    *q1 = type7(v, n, p1);
    if (j >= n) {
        *q2 = *q1;
        return;
    }
    /* v[j-1] is x_(j) and v[j..n) hold x_(j+1) .. x_(n) in some order */
    double h2 = (double)(n - 1) * p2 + 1;
    size_t j2 = (size_t)floor(h2);
    if (j2 <= j) {
        *q2 = type7(v, n, p2);
        return;
    }
    size_t off = j - 1;
    double q = (double)(n - 1 - off) > 0 ? (h2 - 1 - (double)off) / (double)(n - 1 - off) : 0;
    *q2 = type7(v + off, n - off, q < 0 ? 0 : q > 1 ? 1 : q);
}

/* Coefficients of the scaled fit in the original units. */
static void to_original(const design *d, const double *b, double *coef)
{
    double b0 = b[0];
    for (size_t j = 1; j < d->p; j++) {
        coef[j] = b[j] / d->scale[j];
        b0 -= b[j] * d->mean[j] / d->scale[j];
    }
    coef[0] = b0;
}

/* ---- threads ----------------------------------------------------------- */

/* Every pass over rows below splits them into chunks of a fixed size; a
 * chunk writes its partial sums to its own slot and the caller adds the
 * slots in chunk order.  The chunks do not depend on the number of threads
 * (nor on which thread ran which chunk), so neither does any bit of the
 * answer. */
#define QR_MAX_THREADS 8

typedef void (*chunk_fn)(void *ctx, size_t chunk);

typedef struct job {
    chunk_fn fn;
    void *ctx;
    size_t nchunks;
} job;

/* The caller publishes a job and takes chunks itself; a worker that wakes
 * takes chunks too.  The caller waits only for chunks in progress, never
 * for a worker that has not started (on a busy machine it may not run for
 * a while).  ticket = generation << 32 | next chunk: a worker that comes
 * late finds the chunks of its generation taken, or takes those of the
 * newest.  Two job slots by generation parity suffice: the caller does not
 * publish the next job while a chunk of the current one is in progress. */
typedef struct pool {
    int workers; /* threads running besides the caller */
    int inited;
    thrd_t th[QR_MAX_THREADS];
    mtx_t mu;
    cnd_t go;
    atomic_ulong pub; /* jobs published (workers sleep until it moves) */
    atomic_int quit;
    uint64_t gen;
    job jobs[2];
    _Atomic uint64_t ticket;
    atomic_int inflight;
    int started;         /* workers started (workers drops to 0 after stalls) */
    int stalls, stalled; /* passes held up by a paused worker */
} pool;

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

/* Starts nthreads - 1 workers (fewer when a thread cannot be created: the
 * answer is the same, only slower). */
static void pool_start(pool *P, int nthreads)
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

static void pool_stop(pool *P)
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

/* Runs fn(ctx, c) for c in [0, nchunks), on the workers and the caller. */
static void pool_run(pool *P, chunk_fn fn, void *ctx, size_t nchunks)
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
        P->workers = 0; /* they sleep until pool_stop */
}

/* The kernels below are written for a chunk of any length and inlined twice,
 * once for a full chunk (a constant length, which lets the compiler use
 * vector instructions at -O2) and once for the last, shorter one. */
#if defined(__GNUC__)
#define KERNEL static inline __attribute__((always_inline))
#else
#define KERNEL static inline
#endif

#if defined(__GNUC__)
typedef double v2d __attribute__((vector_size(16)));
static inline v2d vld(const double *p)
{
    v2d v;
    memcpy(&v, p, sizeof v);
    return v;
}
#endif

/* sum a[i] b[i] over n, four partial sums (a fixed order) */
KERNEL double dotv(const double *restrict a, const double *restrict b, size_t n)
{
    double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
    size_t i = 0;
    for (; i + 4 <= n; i += 4) {
        s0 += a[i] * b[i];
        s1 += a[i + 1] * b[i + 1];
        s2 += a[i + 2] * b[i + 2];
        s3 += a[i + 3] * b[i + 3];
    }
    for (; i < n; i++)
        s0 += a[i] * b[i];
    return (s0 + s1) + (s2 + s3);
}

/* Two sums at once over one column: sum a[i] u[i] and sum a[i] v[i]. */
KERNEL void dot2v(const double *restrict a, const double *restrict u, const double *restrict v, size_t n,
                  double *su, double *sv)
{
#if defined(__GNUC__)
    /* two lanes, GCC's vector extension (SSE2 on x86-64, scalar elsewhere) */
    v2d s0 = {0, 0}, s1 = {0, 0};
    size_t i = 0;
    for (; i + 2 <= n; i += 2) {
        v2d x = vld(a + i);
        s0 += x * vld(u + i);
        s1 += x * vld(v + i);
    }
    double t0 = s0[0] + s0[1], t1 = s1[0] + s1[1];
    for (; i < n; i++) {
        t0 += a[i] * u[i];
        t1 += a[i] * v[i];
    }
    *su = t0;
    *sv = t1;
#else
    *su = dotv(a, u, n);
    *sv = dotv(a, v, n);
#endif
}

/* The 2 x 2 block of sums a_r[i] b_c[i], r, c in {0, 1}: out = (00, 01,
 * 10, 11); each column is loaded once for two products. */
KERNEL void gram22(const double *restrict a0, const double *restrict a1, const double *restrict b0,
                   const double *restrict b1, size_t n, double *out)
{
#if defined(__GNUC__)
    v2d s00 = {0, 0}, s01 = {0, 0}, s10 = {0, 0}, s11 = {0, 0};
    size_t i = 0;
    for (; i + 2 <= n; i += 2) {
        v2d x0 = vld(a0 + i), x1 = vld(a1 + i), y0 = vld(b0 + i), y1 = vld(b1 + i);
        s00 += x0 * y0;
        s01 += x0 * y1;
        s10 += x1 * y0;
        s11 += x1 * y1;
    }
    double t00 = s00[0] + s00[1], t01 = s01[0] + s01[1], t10 = s10[0] + s10[1], t11 = s11[0] + s11[1];
    for (; i < n; i++) {
        t00 += a0[i] * b0[i];
        t01 += a0[i] * b1[i];
        t10 += a1[i] * b0[i];
        t11 += a1[i] * b1[i];
    }
    out[0] = t00;
    out[1] = t01;
    out[2] = t10;
    out[3] = t11;
#else
    out[0] = dotv(a0, b0, n);
    out[1] = dotv(a0, b1, n);
    out[2] = dotv(a1, b0, n);
    out[3] = dotv(a1, b1, n);
#endif
}

/* The packed lower triangle of sum_i A_r[i] B_c[i] (A_r = column r of A,
 * leading dimensions la, lb), in 2 x 2 blocks. */
KERNEL void gram_packed(const double *A, size_t la, const double *B, size_t lb, size_t p, size_t n, double *M)
{
    for (size_t r = 0; r < p; r += 2) {
        size_t r1 = r + 1 < p ? r + 1 : r;
        for (size_t c = 0; c <= r; c += 2) {
            double o[4];
            size_t c1 = c + 1 < p ? c + 1 : c;
            gram22(A + r * la, A + r1 * la, B + c * lb, B + c1 * lb, n, o);
            M[r * (r + 1) / 2 + c] = o[0];
            if (c + 1 <= r)
                M[r * (r + 1) / 2 + c + 1] = o[1];
            if (r + 1 < p) {
                M[r1 * (r1 + 1) / 2 + c] = o[2];
                M[r1 * (r1 + 1) / 2 + c + 1] = o[3];
            }
        }
    }
}

/* out[i] = sum_j v[j] X[j*ld + i] for the rows of a chunk */
KERNEL void rowdot(const double *restrict X, size_t ld, size_t p, const double *v, double *restrict out, size_t n)
{
    size_t i = 0;
#if defined(__GNUC__)
    /* two rows at a time, the sum kept in a register (same order of terms) */
    for (; i + 2 <= n; i += 2) {
        v2d acc = v[0] * vld(X + i);
        for (size_t j = 1; j < p; j++)
            acc += v[j] * vld(X + j * ld + i);
        memcpy(out + i, &acc, sizeof acc);
    }
#endif
    for (; i < n; i++) {
        double acc = v[0] * X[i];
        for (size_t j = 1; j < p; j++)
            acc += v[j] * X[j * ld + i];
        out[i] = acc;
    }
}

/* ---- Frisch-Newton on a dense m x p matrix ---------------------------- */

#define FN_CH 256 /* rows per chunk of the interior-point passes */
/* a chunk's slot: two p-vectors, the packed lower triangle of a p x p
 * matrix, then scalars */
#define NSCAL 8
/* rounded up to whole cache lines of 64 bytes, so that two chunks' slots
 * never share one (threads writing to one line slow each other down) */
#define SLOT ((2 * PMAX + PMAX * (PMAX + 1) / 2 + NSCAL + 7) / 8 * 8)
enum { S_GAP = SLOT - NSCAL, S_AP, S_AD, S_S1, S_S2, S_S3 }; /* offsets of the scalars */

typedef struct fnwork {
    size_t cap, chcap;
    double *x, *s, *z, *w, *dx, *dz, *dw;
    double *part;
} fnwork;

/* Memory starting on a cache line (64 bytes): a chunk of FN_CH doubles
 * then covers whole lines, and no line is written by two threads. */
static void *lines_alloc(size_t bytes)
{
    return aligned_alloc(64, (bytes + 63) / 64 * 64);
}

static void fnwork_free(fnwork *f)
{
    double **arr[] = {&f->x, &f->s, &f->z, &f->w, &f->dx, &f->dz, &f->dw};
    for (size_t i = 0; i < sizeof arr / sizeof *arr; i++) {
        free(*arr[i]);
        *arr[i] = NULL;
    }
    free(f->part);
    f->part = NULL;
    f->cap = f->chcap = 0;
}

static int fnwork_reserve(fnwork *f, size_t m)
{
    size_t nch = (m + FN_CH - 1) / FN_CH;
    if (m <= f->cap && nch <= f->chcap)
        return 0;
    fnwork_free(f);
    double **arr[] = {&f->x, &f->s, &f->z, &f->w, &f->dx, &f->dz, &f->dw};
    for (size_t i = 0; i < sizeof arr / sizeof *arr; i++)
        if (!(*arr[i] = lines_alloc(m * sizeof(double)))) {
            fnwork_free(f);
            return -1;
        }
    if (!(f->part = lines_alloc(nch * SLOT * sizeof(double)))) {
        fnwork_free(f);
        return -1;
    }
    f->cap = m;
    f->chcap = nch;
    return 0;
}

/* M = sum q_i x_i x_i', factored; solves M v = rhs in place. */
typedef struct pfact {
    gsl_matrix *m;
    gsl_vector *v;
} pfact;

static int factor_packed(pfact *f, const double *a, size_t p)
{
    for (size_t r = 0; r < p; r++)
        for (size_t c = 0; c <= r; c++) {
            double v = a[r * (r + 1) / 2 + c];
            gsl_matrix_set(f->m, r, c, v);
            gsl_matrix_set(f->m, c, r, v);
        }
    return gsl_linalg_cholesky_decomp1(f->m);
}

static int solve(pfact *f, double *v, size_t p)
{
    for (size_t j = 0; j < p; j++)
        gsl_vector_set(f->v, j, v[j]);
    int rc = gsl_linalg_cholesky_svx(f->m, f->v);
    for (size_t j = 0; j < p; j++)
        v[j] = gsl_vector_get(f->v, j);
    return rc;
}

typedef struct fnctx {
    const double *X, *Y; /* column j of X at X + j*m */
    size_t m, p;
    double tau, eps, mu, aP, aD;
    int init, update, prep;
    double yd[PMAX], dy[PMAX];
    fnwork *W;
} fnctx;

/* The start: b-vector part X'1, A c = -X'y and X'X. */
KERNEL void k_start(const fnctx *F, size_t i0, size_t n, double *slot)
{
    size_t m = F->m, p = F->p;
    const double *X = F->X + i0, *Y = F->Y + i0;
    double one[FN_CH];
    for (size_t i = 0; i < n; i++) {
        one[i] = 1;
        F->W->x[i0 + i] = 1 - F->tau;
        F->W->s[i0 + i] = F->tau;
    }
    for (size_t j = 0; j < p; j++) {
        slot[j] = dotv(X + j * m, one, n);
        slot[p + j] = -dotv(X + j * m, Y, n);
    }
    gram_packed(X, m, X, m, p, n, slot + 2 * p);
}

/* The step to the new point (update) or the first dual point (init), the
 * gap there, and (prep) the next Newton system: q = 1/(z/x + w/s), the
 * right-hand side's part X'(q(z - w) - x) and X'QX, and X'e1 of the
 * corrector, e1 = q(1/s - 1/x). */
KERNEL void k_a(const fnctx *F, size_t i0, size_t n, double *slot)
{
    size_t m = F->m, p = F->p;
    fnwork *W = F->W;
    const double *X = F->X + i0;
    double *restrict x = W->x + i0, *restrict s = W->s + i0, *restrict z = W->z + i0, *restrict w = W->w + i0;
    if (F->init) {
        double xyd[FN_CH];
        const double *Y = F->Y + i0;
        rowdot(X, m, p, F->yd, xyd, n);
        double eps = F->eps;
        for (size_t i = 0; i < n; i++) {
            double ri = -Y[i] - xyd[i];
            double zi = ri > 0 ? ri : 0, wi = -ri > 0 ? -ri : 0;
            if (fabs(ri) < eps) {
                zi += eps;
                wi += eps;
            }
            z[i] = zi;
            w[i] = wi;
        }
    } else if (F->update) {
        const double *restrict dx = W->dx + i0, *restrict dz = W->dz + i0, *restrict dw = W->dw + i0;
        double aP = F->aP, aD = F->aD;
        for (size_t i = 0; i < n; i++) {
            x[i] += aP * dx[i];
            s[i] -= aP * dx[i];
            z[i] += aD * dz[i];
            w[i] += aD * dw[i];
        }
    }
    double g0 = 0, g1 = 0;
    size_t i = 0;
    for (; i + 2 <= n; i += 2) {
        g0 += x[i] * z[i] + s[i] * w[i];
        g1 += x[i + 1] * z[i + 1] + s[i + 1] * w[i + 1];
    }
    for (; i < n; i++)
        g0 += x[i] * z[i] + s[i] * w[i];
    slot[S_GAP] = g0 + g1;
    if (!F->prep)
        return;
    double q[FN_CH], v[FN_CH], qx[FN_CH];
    for (i = 0; i < n; i++) {
        double ix = 1 / x[i], is = 1 / s[i];
        q[i] = 1 / (z[i] * ix + w[i] * is);
        v[i] = q[i] * (z[i] - w[i]) - x[i];
        qx[i] = q[i] * (is - ix);
    }
    for (size_t j = 0; j < p; j++)
        dot2v(X + j * m, v, qx, n, &slot[j], &slot[p + j]);
    /* X'QX: the columns q x_r, then the triangle in 2 x 2 blocks */
    double QX[PMAX][FN_CH];
    for (size_t r = 0; r < p; r++) {
        const double *restrict xr = X + r * m;
        for (i = 0; i < n; i++)
            QX[r][i] = q[i] * xr[i];
    }
    gram_packed(QX[0], FN_CH, X, m, p, n, slot + 2 * p);
}

/* Largest steps of a chunk, and the sums that give the gap after a step
 * (aP, aD) as gap + aD S1 + aP S2 + aP aD S3. */
KERNEL void steps_and_sums(const fnwork *W, size_t i0, size_t n, double *slot)
{
    const double *restrict x = W->x + i0, *restrict s = W->s + i0, *restrict z = W->z + i0, *restrict w = W->w + i0;
    const double *restrict dx = W->dx + i0, *restrict dz = W->dz + i0, *restrict dw = W->dw + i0;
    double aP = INFINITY, aD = INFINITY, s1 = 0, s2 = 0, s3 = 0;
    for (size_t i = 0; i < n; i++) {
        /* a division only where the step so far would cross zero */
        if (x[i] + aP * dx[i] < 0) {
            double t = -x[i] / dx[i];
            aP = t < aP ? t : aP;
        }
        if (s[i] - aP * dx[i] < 0) {
            double t = s[i] / dx[i];
            aP = t < aP ? t : aP;
        }
        if (z[i] + aD * dz[i] < 0) {
            double t = -z[i] / dz[i];
            aD = t < aD ? t : aD;
        }
        if (w[i] + aD * dw[i] < 0) {
            double t = -w[i] / dw[i];
            aD = t < aD ? t : aD;
        }
        s1 += x[i] * dz[i] + s[i] * dw[i];
        s2 += dx[i] * (z[i] - w[i]);
        s3 += dx[i] * (dz[i] - dw[i]);
    }
    slot[S_AP] = aP;
    slot[S_AD] = aD;
    slot[S_S1] = s1;
    slot[S_S2] = s2;
    slot[S_S3] = s3;
}

/* The affine-scaling direction: dx = q(X dy - z + w), ds = -dx,
 * dz = -z(1 + dx/x), dw = -w(1 + ds/s); and X'e2 of the corrector, e2 =
 * q(dx dz/x - ds dw/s). */
KERNEL void k_b(const fnctx *F, size_t i0, size_t n, double *slot)
{
    fnwork *W = F->W;
    double xdy[FN_CH];
    rowdot(F->X + i0, F->m, F->p, F->dy, xdy, n);
    const double *restrict z = W->z + i0, *restrict w = W->w + i0;
    const double *restrict x = W->x + i0, *restrict s = W->s + i0;
    double *restrict dx = W->dx + i0, *restrict dz = W->dz + i0, *restrict dw = W->dw + i0;
    double e2[FN_CH];
    for (size_t i = 0; i < n; i++) {
        /* 1/x, 1/s and q again (as k_a has them) rather than stored: the
         * passes are bound by memory traffic, not by divisions */
        double ix = 1 / x[i], is = 1 / s[i], q = 1 / (z[i] * ix + w[i] * is);
        double d = q * (xdy[i] - (z[i] - w[i]));
        double a = -z[i] * (1 + d * ix), c = -w[i] * (1 - d * is);
        dx[i] = d;
        dz[i] = a;
        dw[i] = c;
        e2[i] = q * d * (a * ix + c * is);
    }
    const double *X = F->X + i0;
    for (size_t j = 0; j < F->p; j++)
        slot[j] = dotv(X + j * F->m, e2, n);
    steps_and_sums(W, i0, n, slot);
}

/* The corrected direction (dy solved with the corrector's right-hand side). */
KERNEL void k_d(const fnctx *F, size_t i0, size_t n, double *slot)
{
    fnwork *W = F->W;
    double xdy[FN_CH];
    rowdot(F->X + i0, F->m, F->p, F->dy, xdy, n);
    const double *restrict z = W->z + i0, *restrict w = W->w + i0;
    const double *restrict x = W->x + i0, *restrict s = W->s + i0;
    double *restrict dx = W->dx + i0, *restrict dz = W->dz + i0, *restrict dw = W->dw + i0;
    double mu = F->mu;
    for (size_t i = 0; i < n; i++) {
        double dxa = dx[i], dza = dz[i], dwa = dw[i];
        double ix = 1 / x[i], is = 1 / s[i], q = 1 / (z[i] * ix + w[i] * is);
        double t = q * (mu * (is - ix) + dxa * (dza * ix + dwa * is));
        double d = q * (xdy[i] - z[i] + w[i]) - t;
        dx[i] = d;
        dz[i] = -z[i] + (mu - z[i] * d - dxa * dza) * ix;
        dw[i] = -w[i] + (mu + w[i] * d + dxa * dwa) * is;
    }
    steps_and_sums(W, i0, n, slot);
}

#define CHUNK_WRAPPER(name, kern)                                                                                     \
    static void name(void *ctx, size_t c)                                                                             \
    {                                                                                                                 \
        fnctx *F = ctx;                                                                                               \
        size_t i0 = c * FN_CH, n = F->m - i0 < FN_CH ? F->m - i0 : FN_CH;                                             \
        double *slot = F->W->part + c * SLOT;                                                                         \
        if (n == FN_CH)                                                                                               \
            kern(F, i0, FN_CH, slot);                                                                                 \
        else                                                                                                          \
            kern(F, i0, n, slot);                                                                                     \
    }
CHUNK_WRAPPER(run_start, k_start)
CHUNK_WRAPPER(run_a, k_a)
CHUNK_WRAPPER(run_b, k_b)
CHUNK_WRAPPER(run_d, k_d)

/* Adds the chunks' slots in chunk order: the first nv entries, and the
 * scalar at offset sc of each (when sc < NSCAL). */
static void reduce(const double *part, size_t nch, size_t nv, double *v)
{
    for (size_t j = 0; j < nv; j++)
        v[j] = 0;
    for (size_t c = 0; c < nch; c++)
        for (size_t j = 0; j < nv; j++)
            v[j] += part[c * SLOT + j];
}

static double reduce_scalar(const double *part, size_t nch, size_t off)
{
    double s = 0;
    for (size_t c = 0; c < nch; c++)
        s += part[c * SLOT + off];
    return s;
}

static double reduce_min(const double *part, size_t nch, size_t off)
{
    double a = INFINITY;
    for (size_t c = 0; c < nch; c++)
        a = part[c * SLOT + off] < a ? part[c * SLOT + off] : a;
    a *= STEP_B;
    return a < 1 ? a : 1;
}

/* Frisch-Newton (rqfnb's steps, METHODS.md): rows X (m x p, column j at
 * X + j*m), responses Y; writes the coefficients (scaled space) to b.  eps
 * is rqfnb's eps of the starting point, tol the duality gap at which it
 * stops (eps but for the subsample's fit).  warm (or NULL): coefficients
 * to start the dual from instead of least squares (the subsample's fit for
 * the reduced problem: a few Newton steps fewer). */
static int fn_solve(const double *X, const double *Y, size_t m, size_t p, double tau, double eps, double tol,
                    int maxit, const double *warm, fnwork *W, pool *P, double *b, int *iters, double *gap_out,
                    etacal_error *err)
{
    if (fnwork_reserve(W, m) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    pfact Fa;
    Fa.m = gsl_matrix_alloc(p, p);
    Fa.v = gsl_vector_alloc(p);
    if (!Fa.m || !Fa.v) {
        gsl_matrix_free(Fa.m);
        gsl_vector_free(Fa.v);
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    int rc = ETACAL_OK;
    size_t nch = (m + FN_CH - 1) / FN_CH, np2 = p * (p + 1) / 2;
    fnctx F = {0};
    F.X = X;
    F.Y = Y;
    F.m = m;
    F.p = p;
    F.tau = tau;
    F.eps = eps;
    F.W = W;
    double bvec[PMAX], rhs[PMAX], u1[PMAX], sums[2 * PMAX + PMAX * (PMAX + 1) / 2];
    /* b = (1 - tau) X'1, x = (1 - tau) 1, s = tau 1; y_d from (X'X) y_d = X'c */
    pool_run(P, run_start, &F, nch);
    reduce(W->part, nch, 2 * p + np2, sums);
    for (size_t j = 0; j < p; j++) {
        bvec[j] = (1 - tau) * sums[j];
        F.yd[j] = sums[p + j];
    }
    if (factor_packed(&Fa, sums + 2 * p, p) != GSL_SUCCESS) {
        rc = etacal_error_set(err, ETACAL_ENUM, NULL, "the design matrix is singular");
        goto done;
    }
    solve(&Fa, F.yd, p);
    if (warm)
        for (size_t j = 0; j < p; j++)
            F.yd[j] = -warm[j];
    F.init = 1;
    F.prep = 1;
    pool_run(P, run_a, &F, nch);
    F.init = 0;
    double gap = reduce_scalar(W->part, nch, S_GAP);
    int it = 0, prepared = 1;
    while (gap > tol && it < maxit) {
        it++;
        if (!prepared) {
            /* the predicted gap was below the tolerance, the real one is not */
            F.update = 0;
            F.prep = 1;
            pool_run(P, run_a, &F, nch);
        }
        reduce(W->part, nch, 2 * p + np2, sums);
        for (size_t j = 0; j < p; j++) {
            rhs[j] = bvec[j] + sums[j];
            u1[j] = sums[p + j];
        }
        if (factor_packed(&Fa, sums + 2 * p, p) != GSL_SUCCESS) {
            rc = etacal_error_set(err, ETACAL_ENUM, NULL, "Newton step failed (matrix not positive definite)");
            goto done;
        }
        memcpy(F.dy, rhs, p * sizeof *rhs);
        solve(&Fa, F.dy, p);
        pool_run(P, run_b, &F, nch);
                double aP = reduce_min(W->part, nch, S_AP), aD = reduce_min(W->part, nch, S_AD);
        if (aP < 1 || aD < 1) {
            /* Mehrotra corrector with the same factorisation: g is the
             * gap after the affine step, t = mu e1 + e2 */
            double g = gap + aD * reduce_scalar(W->part, nch, S_S1) + aP * reduce_scalar(W->part, nch, S_S2) +
                       aP * aD * reduce_scalar(W->part, nch, S_S3);
            double mu = gap * pow(g / gap, 3) / (2 * (double)m);
            reduce(W->part, nch, p, sums);
            for (size_t j = 0; j < p; j++)
                F.dy[j] = rhs[j] + (mu * u1[j] + sums[j]);
            solve(&Fa, F.dy, p);
            F.mu = mu;
            pool_run(P, run_d, &F, nch);
            aP = reduce_min(W->part, nch, S_AP);
            aD = reduce_min(W->part, nch, S_AD);
        }
        double s1 = reduce_scalar(W->part, nch, S_S1), s2 = reduce_scalar(W->part, nch, S_S2),
               s3 = reduce_scalar(W->part, nch, S_S3);
        double pred = gap + aD * s1 + aP * s2 + aP * aD * s3;
        for (size_t j = 0; j < p; j++)
            F.yd[j] += aD * F.dy[j];
        F.aP = aP;
        F.aD = aD;
        F.update = 1;
        /* the next Newton system is built in the same pass as the step,
         * unless the step is predicted to end the iterations */
        F.prep = prepared = it < maxit && !(pred <= 0.5 * tol);
        pool_run(P, run_a, &F, nch);
        gap = reduce_scalar(W->part, nch, S_GAP);
    }
    for (size_t j = 0; j < p; j++)
        b[j] = -F.yd[j];
    *iters = it;
    *gap_out = gap;
    if (gap > tol)
        rc = etacal_error_set(err, ETACAL_ENUM, NULL,
                              "the interior-point method did not converge in %d iterations (gap %g)", maxit, gap);
done:
    gsl_matrix_free(Fa.m);
    gsl_vector_free(Fa.v);
    return rc;
}

/* ---- passes over all rows ---------------------------------------------- */

#define DATA_CH 8192 /* rows per chunk of the passes over all rows */
#define VB 128       /* rows per block inside a chunk */
#define OBJ_BLK 256  /* rows per block of the objective's sum */

enum { PASS_RATIO, PASS_SPLIT, PASS_FLAGS, PASS_CHECK };

/* A chunk's output: the glob sums (compensated) of the rows below (L) and
 * above (H), its candidates (rows near the fit: index, ratio, w y, the
 * scaled row), counts. */
typedef struct chunkout {
    ksum L[PMAX + 1], H[PMAX + 1];
    size_t nL, nH;
    double *cand;
    size_t ncand, cap;
    int nonfinite, oom;
    char pad[64 - (2 * (PMAX + 1) * sizeof(ksum) + 5 * sizeof(size_t) + sizeof(double *) + 2 * sizeof(int)) % 64];
} chunkout; /* a whole number of cache lines (see lines_alloc) */

typedef struct dpass {
    const design *d;
    int mode;
    double tau, eps, lo, hi;
    double bc[PMAX];        /* fit on centred covariates: b0 + sum bc_j (x_j - m_j) */
    double Ls[PMAX * PMAX]; /* band_i = w_i |Ls (1, x_i - m)| */
    double coef[PMAX];      /* PASS_CHECK: coefficients, original units */
    double *ratio;          /* PASS_RATIO: out */
    unsigned char *flags;   /* 1 below, 2 above, 0 near (kept); NULL in a check without preprocessing */
    double *objblk;         /* PASS_CHECK: sum of w rho per OBJ_BLK rows */
    size_t *cbad;           /* PASS_CHECK: rows on the wrong side, per chunk */
    chunkout *out;
} dpass;

static int cand_push(chunkout *o, size_t rec, const double *v)
{
    if (o->ncand == o->cap) {
        size_t cap = o->cap ? 2 * o->cap : 64;
        double *nb = realloc(o->cand, cap * rec * sizeof *nb);
        if (!nb) {
            o->oom = 1;
            return -1;
        }
        o->cand = nb;
        o->cap = cap;
    }
    memcpy(o->cand + o->ncand * rec, v, rec * sizeof *v);
    o->ncand++;
    return 0;
}

/* A block of n rows from i0: the centred covariates into D (k rows of VB)
 * and the weights (1 without weights) into wv. */
KERNEL void load_block(const design *d, size_t i0, size_t n, double D[][VB], double *restrict wv)
{
    for (size_t j = 0; j < d->k; j++) {
        const double *restrict xj = d->x[j] + i0;
        double mj = d->mean[j + 1];
        for (size_t i = 0; i < n; i++)
            D[j][i] = xj[i] - mj;
    }
    if (d->w)
        for (size_t i = 0; i < n; i++)
            wv[i] = d->w[i0 + i];
    else
        for (size_t i = 0; i < n; i++)
            wv[i] = 1;
}

/* Ratio residual / band of the pilot fit for a block of rows, with the
 * centred covariates in D (k rows of VB). */
KERNEL void block_ratio(const dpass *P, size_t i0, size_t n, double D[][VB], double *restrict wv,
                        double *restrict ratio, double *nfacc)
{
    const design *d = P->d;
    size_t k = d->k, p = d->p;
    double fit[VB], b2[VB], r[VB];
    const double *restrict y = d->y + i0;
    load_block(d, i0, n, D, wv);
    for (size_t i = 0; i < n; i++)
        fit[i] = P->bc[0];
    for (size_t j = 0; j < k; j++) {
        double c = P->bc[j + 1];
        for (size_t i = 0; i < n; i++)
            fit[i] += c * D[j][i];
    }
    for (size_t i = 0; i < n; i++) {
        r[i] = wv[i] * (y[i] - fit[i]);
        b2[i] = 0;
    }
    size_t i = 0;
#if defined(__GNUC__)
    /* two rows at a time, each term of the band in a register */
    for (; i + 2 <= n; i += 2) {
        v2d acc = {0, 0};
        for (size_t a = 0; a < p; a++) {
            const double *la = P->Ls + a * p;
            v2d ta = {la[0], la[0]};
            for (size_t c = 1; c <= a; c++)
                ta += la[c] * vld(&D[c - 1][i]);
            acc += ta * ta;
        }
        memcpy(b2 + i, &acc, sizeof acc);
    }
#endif
    for (; i < n; i++) {
        double acc = 0;
        for (size_t a = 0; a < p; a++) {
            const double *la = P->Ls + a * p;
            double ta = la[0];
            for (size_t c = 1; c <= a; c++)
                ta += la[c] * D[c - 1][i];
            acc += ta * ta;
        }
        b2[i] = acc;
    }
    double eps = P->eps, acc = 0;
    for (i = 0; i < n; i++) {
        double band = wv[i] * sqrt(b2[i]);
        ratio[i] = r[i] / (band > eps ? band : eps);
        /* NaN when y, a covariate or the weight is not finite */
        acc += (r[i] - r[i]) + (b2[i] - b2[i]);
    }
    *nfacc += acc;
}


KERNEL double sumv(const double *restrict a, size_t n)
{
    double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
    size_t i = 0;
    for (; i + 4 <= n; i += 4) {
        s0 += a[i];
        s1 += a[i + 1];
        s2 += a[i + 2];
        s3 += a[i + 3];
    }
    for (; i < n; i++)
        s0 += a[i];
    return (s0 + s1) + (s2 + s3);
}

/* A block of rows: the ratios (PASS_RATIO), or the split into below, above
 * and near by the window [lo, hi] (PASS_SPLIT) or by the flags
 * (PASS_FLAGS): glob sums of the rows below and above, the near rows kept
 * as candidates. */
KERNEL void k_split(const dpass *P, size_t i0, size_t n, chunkout *o)
{
    const design *d = P->d;
    size_t k = d->k, p = d->p, rec = p + 3;
    double D[ETACAL_QR_MAX_COVARIATES][VB], wv[VB], ratio[VB], wl[VB], wh[VB], nfacc = 0;
    if (P->mode == PASS_FLAGS) {
        load_block(d, i0, n, D, wv);
        for (size_t i = 0; i < n; i++)
            ratio[i] = 0;
    } else {
        block_ratio(P, i0, n, D, wv, ratio, &nfacc);
        if (!(nfacc == 0))
            o->nonfinite = 1;
        if (d->w)
            for (size_t i = 0; i < n; i++)
                o->nonfinite |= !(wv[i] >= 0);
    }
    if (P->mode == PASS_RATIO) {
        memcpy(P->ratio + i0, ratio, n * sizeof *ratio);
        return;
    }
    unsigned char *fl = P->flags + i0;
    if (P->mode == PASS_SPLIT) {
        double lo = P->lo, hi = P->hi;
        for (size_t i = 0; i < n; i++)
            fl[i] = ratio[i] < lo ? 1 : ratio[i] > hi ? 2 : 0;
    }
    size_t nl = 0, nh = 0;
    for (size_t i = 0; i < n; i++) {
        nl += fl[i] == 1;
        nh += fl[i] == 2;
        wl[i] = fl[i] == 1 ? wv[i] : 0;
        wh[i] = fl[i] == 2 ? wv[i] : 0;
    }
    const double *restrict y = d->y + i0;
    if (nl) {
        o->nL += nl;
        ksum_add(&o->L[0], sumv(wl, n));
        for (size_t j = 0; j < k; j++)
            ksum_add(&o->L[j + 1], dotv(wl, D[j], n) * d->inv[j + 1]);
        ksum_add(&o->L[p], dotv(wl, y, n));
    }
    if (nh) {
        o->nH += nh;
        ksum_add(&o->H[0], sumv(wh, n));
        for (size_t j = 0; j < k; j++)
            ksum_add(&o->H[j + 1], dotv(wh, D[j], n) * d->inv[j + 1]);
        ksum_add(&o->H[p], dotv(wh, y, n));
    }
    if (nl + nh == n)
        return;
    double r[PMAX + 3];
    for (size_t i = 0; i < n; i++) {
        if (fl[i])
            continue;
        /* the scaled row as design_row builds it */
        r[0] = (double)(i0 + i);
        r[1] = ratio[i];
        r[2] = wv[i] * y[i];
        r[3] = wv[i];
        for (size_t j = 0; j < k; j++)
            r[4 + j] = wv[i] * D[j][i] * d->inv[j + 1];
        if (cand_push(o, rec, r) != 0)
            return;
    }
}

/* The objective sum w_i rho_tau(y_i - x_i'coef) per OBJ_BLK rows (as the
 * plain loop of the original units computes it), and, when there are
 * flags, the rows below (above) the fit that have a positive (negative)
 * residual: counted, and their flag set to 0. */
KERNEL void k_check(const dpass *P, size_t i0, size_t n, size_t *bad)
{
    const design *d = P->d;
    size_t k = d->k;
    double fit[OBJ_BLK], u[OBJ_BLK];
    const double *restrict y = d->y + i0;
    for (size_t i = 0; i < n; i++)
        fit[i] = P->coef[0];
    for (size_t j = 0; j < k; j++) {
        const double *restrict xj = d->x[j] + i0;
        double c = P->coef[j + 1];
        for (size_t i = 0; i < n; i++)
            fit[i] += c * xj[i];
    }
    for (size_t i = 0; i < n; i++)
        u[i] = y[i] - fit[i];
    double tau = P->tau, blk = 0;
    if (d->w) {
        const double *w = d->w + i0;
        for (size_t i = 0; i < n; i++)
            blk += w[i] * (u[i] >= 0 ? tau * u[i] : (tau - 1) * u[i]);
    } else {
        for (size_t i = 0; i < n; i++)
            blk += 1 * (u[i] >= 0 ? tau * u[i] : (tau - 1) * u[i]);
    }
    P->objblk[i0 / OBJ_BLK] = blk;
    if (!P->flags)
        return;
    unsigned char *fl = P->flags + i0;
    size_t nb = 0;
    for (size_t i = 0; i < n; i++)
        if ((fl[i] == 2 && u[i] < 0) || (fl[i] == 1 && u[i] > 0)) {
            fl[i] = 0;
            nb++;
        }
    *bad += nb;
}

static void run_data(void *ctx, size_t c)
{
    dpass *P = ctx;
    size_t n = P->d->n, i0 = c * DATA_CH, e = n - i0 < DATA_CH ? n : i0 + DATA_CH;
    if (P->mode == PASS_CHECK) {
        size_t bad = 0; /* counted here, stored once: the chunks' counts share cache lines */
        for (size_t b = i0; b < e; b += OBJ_BLK) {
            if (e - b >= OBJ_BLK)
                k_check(P, b, OBJ_BLK, &bad);
            else
                k_check(P, b, e - b, &bad);
        }
        P->cbad[c] = bad;
        return;
    }
    chunkout *o = &P->out[c];
    memset(o->L, 0, sizeof o->L);
    memset(o->H, 0, sizeof o->H);
    o->nL = o->nH = o->ncand = 0;
    o->nonfinite = o->oom = 0;
    for (size_t b = i0; b < e; b += VB) {
        if (e - b >= VB)
            k_split(P, b, VB, o);
        else
            k_split(P, b, e - b, o);
    }
}

static size_t data_chunks(size_t n) { return (n + DATA_CH - 1) / DATA_CH; }

/* The objective at coef (original units), checking the flagged rows'
 * sides; *bad gets the count of wrong rows (their flags are now 0). */
static int check_pass(const design *d, double tau, const double *coef, unsigned char *flags, pool *P, size_t *bad,
                      double *objective)
{
    size_t nch = data_chunks(d->n);
    double *objblk = lines_alloc(((d->n + OBJ_BLK - 1) / OBJ_BLK) * sizeof *objblk);
    size_t *cbad = malloc(nch * sizeof *cbad);
    if (!objblk || !cbad) {
        free(objblk);
        free(cbad);
        return -1;
    }
    dpass D;
    memset(&D, 0, sizeof D);
    D.d = d;
    D.mode = PASS_CHECK;
    D.tau = tau;
    memcpy(D.coef, coef, d->p * sizeof *coef);
    D.flags = flags;
    D.objblk = objblk;
    D.cbad = cbad;
    pool_run(P, run_data, &D, nch);
    ksum obj = {0, 0};
    for (size_t b = 0; b < (d->n + OBJ_BLK - 1) / OBJ_BLK; b++)
        ksum_add(&obj, objblk[b]);
    *objective = ksum_value(&obj);
    *bad = 0;
    for (size_t c = 0; c < nch; c++)
        *bad += cbad[c];
    free(objblk);
    free(cbad);
    return 0;
}

/* ---- the fit ------------------------------------------------------------ */

/* All rows, scaled, column-major. */
static int gather_all(const design *d, double **Xo, double **Yo)
{
    size_t n = d->n, p = d->p;
    double *X = malloc(n * p * sizeof *X), *Y = malloc(n * sizeof *Y);
    if (!X || !Y) {
        free(X);
        free(Y);
        return -1;
    }
    double row[PMAX];
    for (size_t i = 0; i < n; i++) {
        Y[i] = design_row(d, i, row);
        for (size_t j = 0; j < p; j++)
            X[j * n + i] = row[j];
    }
    *Xo = X;
    *Yo = Y;
    return 0;
}

static int fit_all(const design *d, double tau, double eps, int maxit, fnwork *W, pool *P, etacal_qr_result *out,
                   etacal_error *err)
{
    double *X, *Y, b[PMAX];
    if (gather_all(d, &X, &Y) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    int it = 0;
    int rc = fn_solve(X, Y, d->n, d->p, tau, eps, eps, maxit, NULL, W, P, b, &it, &out->gap, err);
    free(X);
    free(Y);
    out->iterations += it;
    out->solves++;
    if (rc)
        return rc;
    to_original(d, b, out->coef);
    size_t bad;
    if (check_pass(d, tau, out->coef, NULL, P, &bad, &out->objective) != 0)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    return ETACAL_OK;
}

/* The error of the full checks, once a pass has seen a non-finite value or
 * a negative weight. */
static int full_check_error(const design *d, const char *const *names, etacal_error *err)
{
    design full;
    int rc = design_init(&full, d->y, d->x, d->k, d->w, d->n, names, err);
    if (rc)
        return rc;
    return etacal_error_set(err, ETACAL_EINVAL, NULL, "the data hold a value that is not finite");
}

/* Type-7 quantile at prob of all n ratios, from the candidates' ratios c[0..nc)
 * (the ratios in [lo, hi]) and the count nl of ratios below lo: 0 when the
 * order statistics it needs are not among the candidates. */
static int type7_window(double *c, size_t nc, size_t n, size_t nl, double prob, double *q)
{
    double h = (double)(n - 1) * prob + 1;
    size_t j = (size_t)floor(h);
    if (j < 1)
        j = 1;
    if (j >= n) {
        if (nl + nc != n || nc == 0)
            return 0;
        *q = etacal_select(c, nc, nc);
        return 1;
    }
    if (!(j > nl && j + 1 <= nl + nc))
        return 0;
    double g = h - (double)j;
    double lo = etacal_select(c, nc, j - nl);
    double hi = c[j - nl];
    for (size_t i = j - nl + 1; i < nc; i++)
        if (c[i] < hi)
            hi = c[i];
    *q = lo + g * (hi - lo);
    return 1;
}

/* The reduced problem: the candidates between klo and khi as rows, the
 * others and the chunks' rows below and above as two glob rows
 * (column-major, *mo rows); flags of the candidates set. */
static int build_reduced(const chunkout *co, size_t nch, size_t p, double klo, double khi, unsigned char *flags,
                         double **Xo, double **Yo, size_t *mo)
{
    size_t rec = p + 3, mid = 0, nl = 0, nh = 0;
    ksum gl[PMAX + 1], gh[PMAX + 1];
    memset(gl, 0, sizeof gl);
    memset(gh, 0, sizeof gh);
    for (size_t c = 0; c < nch; c++) {
        nl += co[c].nL;
        nh += co[c].nH;
        for (size_t j = 0; j <= p; j++) {
            ksum_add(&gl[j], co[c].L[j].s);
            ksum_add(&gl[j], co[c].L[j].c);
            ksum_add(&gh[j], co[c].H[j].s);
            ksum_add(&gh[j], co[c].H[j].c);
        }
        for (size_t i = 0; i < co[c].ncand; i++) {
            const double *r = co[c].cand + i * rec;
            if (r[1] < klo || r[1] > khi) {
                ksum *g = r[1] < klo ? gl : gh;
                *(r[1] < klo ? &nl : &nh) += 1;
                for (size_t j = 0; j < p; j++)
                    ksum_add(&g[j], r[3 + j]);
                ksum_add(&g[p], r[2]);
                flags[(size_t)r[0]] = r[1] < klo ? 1 : 2;
            } else {
                mid++;
            }
        }
    }
    size_t m = mid + (nl > 0) + (nh > 0);
    double *X = malloc((m ? m : 1) * p * sizeof *X), *Y = malloc((m ? m : 1) * sizeof *Y);
    if (!X || !Y) {
        free(X);
        free(Y);
        return -1;
    }
    size_t w = 0;
    for (size_t c = 0; c < nch; c++)
        for (size_t i = 0; i < co[c].ncand; i++) {
            const double *r = co[c].cand + i * rec;
            if (r[1] < klo || r[1] > khi)
                continue;
            for (size_t j = 0; j < p; j++)
                X[j * m + w] = r[3 + j];
            Y[w++] = r[2];
        }
    if (nl) {
        for (size_t j = 0; j < p; j++)
            X[j * m + w] = ksum_value(&gl[j]);
        Y[w++] = ksum_value(&gl[p]);
    }
    if (nh) {
        for (size_t j = 0; j < p; j++)
            X[j * m + w] = ksum_value(&gh[j]);
        Y[w++] = ksum_value(&gh[p]);
    }
    *Xo = X;
    *Yo = Y;
    *mo = m;
    return 0;
}

#if defined(__GNUC__)
#define CTZ64(v) ((size_t)__builtin_ctzll(v))
#else
static size_t CTZ64(uint64_t v)
{
    size_t r = 0;
    while (!(v & 1)) {
        v >>= 1;
        r++;
    }
    return r;
}
#endif

/* The subsample's fit only places the band, so it stops at a relative gap
 * (to sum |y| of the subsample) of SUB_REL_GAP; the final fit is exact. */
#define SUB_REL_GAP 1e-5
/* The window of the first pass: the pilot quantiles (of the subsample's own
 * ratios) at tau -+ (M/2n + PILOT_SD sd + PILOT_BIAS M/n); the exact ones
 * lie inside it nearly always, and when not, all ratios are selected. */
#define PILOT_SD 4.0
/* The rows kept: M = MM_FACTOR m around the fit (quantreg's Mm.factor is
 * 0.8; a wider band makes the fix-up solves rare: on the benchmark's data
 * at 10^6 rows, 0.8 needed one in more than half of the seeds at ten
 * covariates, 1.25 in none of eight). */
#define MM_FACTOR 1.25
#define PILOT_BIAS 0.1

/* Portnoy & Koenker's preprocessing (quantreg's rq.fit.pfn): fit a random
 * subsample, keep the rows whose residuals may lie on either side of the
 * fit, and replace the others by two glob rows; verify the signs on all
 * rows and repair, or start again with a larger subsample.  The passes over
 * all rows: one that computes each row's ratio of residual to band and
 * keeps the rows in a window around the two quantiles of the ratios (which
 * are then selected exactly among them), and one that checks the sides and
 * sums the objective. */
static int fit_pre(design *d, double tau, double eps, int maxit, unsigned long seed, fnwork *W, pool *P,
                   const char *const *names, etacal_qr_result *out, etacal_error *err)
{
    int rc = ETACAL_OK;
    size_t n = d->n, p = d->p, k = d->k, nch = data_chunks(n), nwords = (n + 63) / 64;
    unsigned char *flags = lines_alloc(n);
    uint64_t *bits = malloc(nwords * sizeof *bits);
    chunkout *co = lines_alloc(nch * sizeof *co);
    if (co)
        memset(co, 0, nch * sizeof *co);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    double *Xs = NULL, *Ys = NULL, *Xr = NULL, *Yr = NULL, *sel = NULL, *ratio = NULL;
    if (!flags || !bits || !co || !rng) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto done;
    }
    gsl_rng_set(rng, (unsigned long)etacal_seed_stream(seed ? seed : 5489, ETACAL_STREAM_QR_PRE));
    double mm = round(sqrt((double)p) * pow((double)n, 2.0 / 3.0));
    size_t m = (size_t)mm;
    for (int round_ = 0; round_ < 20; round_++) {
        if (m >= n) {
            /* no subsample: all rows, checked in full first */
            if ((rc = design_init(d, d->y, d->x, k, d->w, n, names, err)) != 0)
                goto done;
            rc = fit_all(d, tau, eps, maxit, W, P, out, err);
            goto done;
        }
        /* m distinct rows at random, taken in row order */
        memset(bits, 0, nwords * sizeof *bits);
        for (size_t got = 0; got < m;) {
            size_t i = (size_t)(gsl_rng_uniform(rng) * (double)n);
            uint64_t bit = (uint64_t)1 << (i & 63);
            if (i < n && !(bits[i >> 6] & bit)) {
                bits[i >> 6] |= bit;
                got++;
            }
        }
        free(Xs);
        free(Ys);
        Xs = malloc(m * p * sizeof *Xs);
        Ys = malloc(m * sizeof *Ys);
        free(sel);
        sel = malloc(m * sizeof *sel);
        if (!Xs || !Ys || !sel) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        /* the rows' values in row order (y, the covariates, the weight) */
        size_t ms = 0, nr = k + 2;
        double chk = 0, sy = 0;
        for (size_t wd = 0; wd < nwords; wd++)
            for (uint64_t v = bits[wd]; v; v &= v - 1) {
                size_t i = wd * 64 + CTZ64(v);
                Xs[ms] = d->y[i];
                for (size_t j = 0; j < k; j++)
                    Xs[(j + 1) * m + ms] = d->x[j][i];
                Ys[ms] = d->w ? d->w[i] : 1;
                ms++;
            }
        for (size_t j = 0; j < nr - 1; j++)
            for (size_t i = 0; i < ms; i++)
                chk += Xs[j * m + i] - Xs[j * m + i];
        for (size_t i = 0; i < ms; i++)
            chk += Ys[i] >= 0 && isfinite(Ys[i]) ? 0 : NAN;
        if (!(chk == 0)) {
            rc = full_check_error(d, names, err);
            goto done;
        }
        if (round_ == 0) {
            /* The centre and scale only condition the problem, so those of
             * the subsample serve.  A covariate that looks constant there
             * is judged on all rows (design_init, with its messages). */
            int suspect = 0;
            for (size_t j = 0; j < k; j++) {
                const double *c = Xs + (j + 1) * m;
                ksum s1 = {0, 0}, s2 = {0, 0};
                for (size_t i = 0; i < ms; i++)
                    ksum_add(&s1, c[i]);
                double mj = ksum_value(&s1) / (double)ms;
                for (size_t i = 0; i < ms; i++)
                    ksum_add(&s2, (c[i] - mj) * (c[i] - mj));
                double sd = sqrt(ksum_value(&s2) / (double)ms);
                if (!(sd > 1e-12 * (fabs(mj) > 1 ? fabs(mj) : 1)))
                    suspect = 1;
                d->mean[j + 1] = mj;
                d->scale[j + 1] = sd;
                d->inv[j + 1] = 1 / sd;
            }
            if (suspect && (rc = design_init(d, d->y, d->x, k, d->w, n, names, err)) != 0)
                goto done;
        }
        /* scaled in place, as design_row does: column 0 becomes the
         * weight, y goes to Ys */
        for (size_t i = 0; i < ms; i++) {
            double wi = Ys[i];
            Ys[i] = wi * Xs[i];
            sy += fabs(Ys[i]);
            Xs[i] = wi;
        }
        for (size_t j = 0; j < k; j++) {
            double *c = Xs + (j + 1) * m, mj = d->mean[j + 1], ij = d->inv[j + 1];
            for (size_t i = 0; i < ms; i++)
                c[i] = Xs[i] * (c[i] - mj) * ij;
        }
        /* band_i = sqrt(x_i' (Xs'Xs)^-1 x_i) through the Cholesky factor */
        double g[PMAX * PMAX] = {0};
        for (size_t a = 0; a < p; a++)
            for (size_t c = 0; c <= a; c++)
                g[a * p + c] = g[c * p + a] = dotv(Xs + a * m, Xs + c * m, ms);
        if (small_cholesky(g, p) >= 0) {
            /* collinear on all rows (design_init says which covariate), or
             * on the subsample only */
            if ((rc = design_init(d, d->y, d->x, k, d->w, n, names, err)) == 0)
                rc = etacal_error_set(err, ETACAL_ENUM, NULL, "the subsample's design is singular");
            goto done;
        }
        int it;
        double bs[PMAX], gap;
        double eps_s = eps > SUB_REL_GAP * sy ? eps : SUB_REL_GAP * sy;
        if ((rc = fn_solve(Xs, Ys, ms, p, tau, eps, eps_s, maxit, NULL, W, P, bs, &it, &gap, err)) != 0)
            goto done;
        out->iterations += it;
        out->solves++;
        /* Linv = L^-1 (lower triangular), so that band_i = |Linv x_i| takes
         * multiplications only */
        double Linv[PMAX * PMAX] = {0};
        for (size_t c = 0; c < p; c++) {
            Linv[c * p + c] = 1 / g[c * p + c];
            for (size_t a = c + 1; a < p; a++) {
                double t = 0;
                for (size_t e = c; e < a; e++)
                    t -= g[a * p + e] * Linv[e * p + c];
                Linv[a * p + c] = t / g[a * p + a];
            }
        }
        dpass D;
        memset(&D, 0, sizeof D);
        D.d = d;
        D.tau = tau;
        D.eps = eps;
        D.flags = flags;
        D.out = co;
        for (size_t j = 0; j < p; j++)
            D.bc[j] = bs[j] * d->inv[j];
        for (size_t a = 0; a < p; a++)
            for (size_t c = 0; c <= a; c++)
                D.Ls[a * p + c] = Linv[a * p + c] * d->inv[c];
        /* the pilot: the subsample's own ratios */
        for (size_t i = 0; i < ms; i++) {
            double zi[PMAX], band = 0;
            for (size_t j = 0; j < p; j++)
                zi[j] = Xs[j * m + i];
            for (size_t a = 0; a < p; a++) {
                double t = 0;
                for (size_t c = 0; c <= a; c++)
                    t += Linv[a * p + c] * zi[c];
                band += t * t;
            }
            band = sqrt(band);
            sel[i] = (Ys[i] - dot_row(zi, bs, p)) / (band > eps ? band : eps);
        }
        double M = MM_FACTOR * (double)m;
        double loq = tau - M / (2 * (double)n), hiq = tau + M / (2 * (double)n);
        if (loq < 1.0 / (double)n)
            loq = 1.0 / (double)n;
        if (hiq > (double)(n - 1) / (double)n)
            hiq = (double)(n - 1) / (double)n;
        double spread = PILOT_SD * sqrt(tau * (1 - tau) / (double)ms) + PILOT_BIAS * (hiq - loq);
        D.lo = loq - spread > 0 ? type7(sel, ms, loq - spread) : -INFINITY;
        D.hi = hiq + spread < 1 ? type7(sel, ms, hiq + spread) : INFINITY;
        D.mode = PASS_SPLIT;
        pool_run(P, run_data, &D, nch);
        size_t nl = 0, nc = 0;
        for (size_t c = 0; c < nch; c++) {
            if (co[c].oom) {
                rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                goto done;
            }
            if (co[c].nonfinite) {
                rc = full_check_error(d, names, err);
                goto done;
            }
            nl += co[c].nL;
            nc += co[c].ncand;
        }
        /* klo, khi: the type-7 quantiles of all n ratios at loq, hiq */
        double klo = 0, khi = 0;
        int inwin = 0;
        free(sel);
        sel = malloc((nc ? nc : 1) * sizeof *sel);
        if (!sel) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        for (size_t c = 0, w = 0; c < nch; c++)
            for (size_t i = 0; i < co[c].ncand; i++)
                sel[w++] = co[c].cand[i * (p + 3) + 1];
        inwin = type7_window(sel, nc, n, nl, loq, &klo) && type7_window(sel, nc, n, nl, hiq, &khi);
        if (!inwin) {
            /* the window missed them: all ratios, selected in full */
            ratio = malloc(n * sizeof *ratio);
            if (!ratio) {
                rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                goto done;
            }
            D.mode = PASS_RATIO;
            D.ratio = ratio;
            pool_run(P, run_data, &D, nch);
            type7_pair(ratio, n, loq, hiq, &klo, &khi);
            free(ratio);
            ratio = NULL;
            D.mode = PASS_SPLIT;
            D.lo = klo;
            D.hi = khi;
            pool_run(P, run_data, &D, nch);
            for (size_t c = 0; c < nch; c++)
                if (co[c].oom) {
                    rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                    goto done;
                }
        }
        size_t mr;
        free(Xr);
        free(Yr);
        Xr = Yr = NULL;
        if (build_reduced(co, nch, p, klo, khi, flags, &Xr, &Yr, &mr) != 0) {
            rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
            goto done;
        }
        int grow = 0;
        double b[PMAX];
        memcpy(b, bs, sizeof b);
        for (int fix = 0; fix < 3; fix++) {
            rc = fn_solve(Xr, Yr, mr, p, tau, eps, eps, maxit, b, W, P, b, &it, &out->gap, err);
            if (rc)
                goto done;
            out->iterations += it;
            out->solves++;
            to_original(d, b, out->coef);
            size_t bad;
            if (check_pass(d, tau, out->coef, flags, P, &bad, &out->objective) != 0) {
                rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                goto done;
            }
            if (bad == 0)
                goto done; /* the globbed rows are on their sides: optimal for all rows */
            if ((double)bad > 0.1 * M) {
                grow = 1;
                break;
            }
            /* the wrong rows (their flags now 0) join the kept ones */
            D.mode = PASS_FLAGS;
            pool_run(P, run_data, &D, nch);
            free(Xr);
            free(Yr);
            Xr = Yr = NULL;
            if (build_reduced(co, nch, p, -INFINITY, INFINITY, flags, &Xr, &Yr, &mr) != 0) {
                rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
                goto done;
            }
        }
        if (grow)
            m *= 2;
    }
    rc = etacal_error_set(err, ETACAL_ENUM, NULL, "preprocessing did not settle after 20 subsamples");
done:
    if (co)
        for (size_t c = 0; c < nch; c++)
            free(co[c].cand);
    free(co);
    free(Xs);
    free(Ys);
    free(Xr);
    free(Yr);
    free(sel);
    free(ratio);
    free(flags);
    free(bits);
    gsl_rng_free(rng);
    return rc;
}

/* Fits below this many rows run on the calling thread alone. */
#define QR_THREADS_MIN 16384

int etacal_qr_fit(const double *y, const double *const *x, size_t k, const double *w, size_t n, double tau,
                  const char *const *names, const etacal_qr_opts *opts, etacal_qr_result *out, etacal_error *err)
{
    static const etacal_qr_opts defaults = {0};
    if (!opts)
        opts = &defaults;
    memset(out, 0, sizeof *out);
    if (!(tau > 0 && tau < 1))
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "tau must be in (0,1), got %g", tau);
    if (k > ETACAL_QR_MAX_COVARIATES)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d covariates", ETACAL_QR_MAX_COVARIATES);
    if (n <= k + 1)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "%zu rows for %zu coefficients: more rows are needed", n,
                                k + 1);
    if (opts->threads < 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "threads must be 0 (all CPUs) or more, got %d",
                                opts->threads);
    int pre = opts->preprocess == 1 || (opts->preprocess == 0 && n > 20000);
    design d;
    int rc = ETACAL_OK;
    if (pre) {
        /* checked and scaled on the subsample and in the passes over all
         * rows (fit_pre) */
        memset(&d, 0, sizeof d);
        d.y = y;
        d.x = x;
        d.w = w;
        d.n = n;
        d.k = k;
        d.p = k + 1;
        d.scale[0] = d.inv[0] = 1;
    } else if ((rc = design_init(&d, y, x, k, w, n, names, err)) != 0) {
        return rc;
    }
    double eps = opts->eps > 0 ? opts->eps : 1e-6;
    int maxit = opts->maxit > 0 ? opts->maxit : 500;
    int nth = opts->threads;
    if (nth == 0) {
        long c = sysconf(_SC_NPROCESSORS_ONLN);
        nth = c > 0 ? (c < QR_MAX_THREADS ? (int)c : QR_MAX_THREADS) : 1;
    }
    pool P;
    pool_start(&P, n >= QR_THREADS_MIN ? nth : 1);
    fnwork W = {0};
    if (pre)
        rc = fit_pre(&d, tau, eps, maxit, opts->seed, &W, &P, names, out, err);
    else
        rc = fit_all(&d, tau, eps, maxit, &W, &P, out, err);
    pool_stop(&P);
    fnwork_free(&W);
    if (rc)
        return rc;
    out->p = d.p;
    out->n = n;
    return ETACAL_OK;
}

/* ---- inference --------------------------------------------------------- */

double etacal_qr_bandwidth_hs(size_t n, double tau)
{
    double z = gsl_cdf_ugaussian_Pinv(0.975);
    double Q = gsl_cdf_ugaussian_Pinv(tau);
    double f = gsl_ran_ugaussian_pdf(Q);
    double h = pow((double)n, -1.0 / 3) * pow(z, 2.0 / 3) * pow(1.5 * f * f / (2 * Q * Q + 1), 1.0 / 3);
    while (tau - h < 0 || tau + h > 1)
        h /= 2;
    return h;
}

double etacal_t_pvalue(double t, double df)
{
    if (!isfinite(t))
        return isnan(t) ? NAN : 0;
    return 2 * gsl_cdf_tdist_Q(fabs(t), df);
}

/* The measure of {u in a piece : Q(u) <= y} (strict = 0) or {Q(u) < y}
 * (strict = 1), for the piece of width w on which Q runs linearly from a
 * to b.  On a flat piece (a == b) all or nothing. */
static double piece_below(double a, double b, double w, double y, int strict)
{
    double lo = a < b ? a : b, hi = a < b ? b : a;
    if (strict ? y <= lo : y < lo)
        return 0;
    if (strict ? y > hi : y >= hi)
        return w;
    return w * ((y - lo) / (hi - lo));
}

/* G(y) = sum over the pieces, in piece order (so that G at the largest
 * value is bit for bit the sum of the widths, the last level's target). */
static double below(const double *tau, const double *q, size_t m, double y, int strict)
{
    double g = 0;
    for (size_t j = 0; j + 1 < m; j++)
        g += piece_below(q[j], q[j + 1], tau[j + 1] - tau[j], y, strict);
    return g;
}

/* The rearrangement of Chernozhukov, Fernandez-Val & Galichon (2010,
 * Econometrica 78(3), sec. 2) applied to the piecewise-linear curve Q
 * through (tau_j, q_j): Q*(t) = inf{y : G(y) >= t - tau_0}, G(y) = |{u in
 * [tau_0, tau_m-1] : Q(u) <= y}|, i.e. the quantile function of Q(U) with
 * U uniform on the range of the levels.  G is piecewise linear between
 * consecutive distinct values q_j (each piece contributes a linear ramp, or
 * a jump when flat), so Q* is computed exactly rather than on a grid: find
 * the first value Y_b with G(Y_b) >= t - tau_0 and invert the line between
 * Y_b-1 and the left limit of G at Y_b. */
int etacal_rearrange(const double *tau, double *q, size_t m, etacal_error *err)
{
    if (m > ETACAL_QR_MAX_LEVELS)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "at most %d levels to rearrange", ETACAL_QR_MAX_LEVELS);
    for (size_t j = 0; j < m; j++) {
        if (!isfinite(q[j]) || !isfinite(tau[j]))
            return etacal_error_set(err, ETACAL_ENUM, NULL, "a predicted quantile is not finite");
        if (j && !(tau[j] > tau[j - 1]))
            return etacal_error_set(err, ETACAL_EINVAL, NULL, "levels must be given in ascending order");
    }
    size_t j = 1;
    while (j < m && q[j] >= q[j - 1])
        j++;
    if (j >= m)
        return ETACAL_OK; /* monotone already: its own rearrangement */
    /* the distinct values, ascending (insertion sort: m <= 32) */
    double Y[ETACAL_QR_MAX_LEVELS], out[ETACAL_QR_MAX_LEVELS], GY[ETACAL_QR_MAX_LEVELS];
    size_t K = 0;
    for (size_t i = 0; i < m; i++) {
        size_t at = K;
        while (at > 0 && Y[at - 1] > q[i])
            at--;
        if (at > 0 && Y[at - 1] == q[i])
            continue;
        memmove(Y + at + 1, Y + at, (K - at) * sizeof *Y);
        Y[at] = q[i];
        K++;
    }
    for (size_t b = 0; b < K; b++)
        GY[b] = below(tau, q, m, Y[b], 0);
    double g = 0; /* tau_i - tau_0 as the sum of the widths before level i */
    size_t b = 0;
    for (size_t i = 0; i < m; i++) {
        if (i)
            g += tau[i] - tau[i - 1];
        while (b + 1 < K && GY[b] < g)
            b++;
        if (b == 0 || GY[b - 1] >= g) {
            out[i] = Y[b];
            continue;
        }
        double g0 = GY[b - 1], gl = below(tau, q, m, Y[b], 1);
        double v = g >= gl ? Y[b] : Y[b - 1] + (Y[b] - Y[b - 1]) * ((g - g0) / (gl - g0));
        out[i] = v < Y[b - 1] ? Y[b - 1] : v > Y[b] ? Y[b] : v;
    }
    memcpy(q, out, m * sizeof *q);
    return ETACAL_OK;
}

/* inverse of a p x p SPD matrix through GSL's Cholesky */
static int spd_inverse(double *a, size_t p)
{
    gsl_matrix_view v = gsl_matrix_view_array(a, p, p);
    if (gsl_linalg_cholesky_decomp1(&v.matrix) != GSL_SUCCESS)
        return -1;
    return gsl_linalg_cholesky_invert(&v.matrix) == GSL_SUCCESS ? 0 : -1;
}

int etacal_qr_se(const double *y, const double *const *x, size_t k, size_t n, double tau,
                 const etacal_qr_result *fit, int method, size_t reps, unsigned long seed,
                 const etacal_qr_opts *opts, double *se, double *bandwidth, etacal_error *err)
{
    size_t p = k + 1;
    for (size_t j = 0; j < p; j++)
        se[j] = NAN;
    if (bandwidth)
        *bandwidth = NAN;
    if (method == ETACAL_SE_NONE)
        return ETACAL_OK;
    if (method == ETACAL_SE_POWELL) {
        double *u = malloc(n * sizeof *u), *uc = malloc(n * sizeof *uc);
        if (!u || !uc) {
            free(u);
            free(uc);
            return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        }
        ksum s1 = {0, 0};
        for (size_t i = 0; i < n; i++) {
            double f = fit->coef[0];
            for (size_t j = 0; j < k; j++)
                f += fit->coef[j + 1] * x[j][i];
            u[i] = y[i] - f;
            ksum_add(&s1, u[i]);
        }
        double mean = ksum_value(&s1) / (double)n;
        ksum s2 = {0, 0};
        for (size_t i = 0; i < n; i++)
            ksum_add(&s2, (u[i] - mean) * (u[i] - mean));
        double sd = sqrt(ksum_value(&s2) / (double)(n - 1));
        memcpy(uc, u, n * sizeof *u);
        double iqr = type7(uc, n, 0.75) - type7(uc, n, 0.25);
        free(uc);
        double hs = etacal_qr_bandwidth_hs(n, tau);
        double spread = sd < iqr / 1.34 ? sd : iqr / 1.34;
        double h = (gsl_cdf_ugaussian_Pinv(tau + hs) - gsl_cdf_ugaussian_Pinv(tau - hs)) * spread;
        if (bandwidth)
            *bandwidth = h;
        if (!(h > 0)) {
            free(u);
            return etacal_error_set(err, ETACAL_ENUM, NULL, "kernel bandwidth is zero (residuals without spread)");
        }
        double H[PMAX * PMAX] = {0}, G[PMAX * PMAX] = {0}, row[PMAX];
        for (size_t i = 0; i < n; i++) {
            double f = gsl_ran_ugaussian_pdf(u[i] / h) / h;
            row[0] = 1;
            for (size_t j = 0; j < k; j++)
                row[j + 1] = x[j][i];
            for (size_t a = 0; a < p; a++)
                for (size_t c = 0; c < p; c++) {
                    H[a * p + c] += f * row[a] * row[c];
                    G[a * p + c] += row[a] * row[c];
                }
        }
        free(u);
        if (spd_inverse(H, p) != 0)
            return etacal_error_set(err, ETACAL_ENUM, NULL, "the kernel sandwich is singular");
        /* cov = tau(1-tau) H^-1 G H^-1 */
        double T[PMAX * PMAX] = {0};
        for (size_t a = 0; a < p; a++)
            for (size_t c = 0; c < p; c++)
                for (size_t e = 0; e < p; e++)
                    T[a * p + c] += H[a * p + e] * G[e * p + c];
        for (size_t a = 0; a < p; a++) {
            double v = 0;
            for (size_t e = 0; e < p; e++)
                v += T[a * p + e] * H[e * p + a];
            se[a] = sqrt(tau * (1 - tau) * v);
        }
        return ETACAL_OK;
    }
    if (method != ETACAL_SE_BOOT)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "unknown standard-error method %d", method);
    if (reps < 2)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the bootstrap needs at least 2 replications");
    int rc = ETACAL_OK;
    double *yb = malloc(n * sizeof *yb), *xb = malloc((k ? k : 1) * n * sizeof *xb);
    double *sum = calloc(p, sizeof *sum), *sum2 = calloc(p, sizeof *sum2);
    const double *xcols[ETACAL_QR_MAX_COVARIATES];
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!yb || !xb || !sum || !sum2 || !rng) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto bdone;
    }
    gsl_rng_set(rng, (unsigned long)etacal_seed_stream(seed ? seed : 5489, ETACAL_STREAM_QR_BOOT));
    for (size_t j = 0; j < k; j++)
        xcols[j] = xb + j * n;
    size_t ok = 0;
    for (size_t r = 0; r < reps; r++) {
        for (size_t i = 0; i < n; i++) {
            size_t s = (size_t)gsl_rng_uniform_int(rng, (unsigned long)n);
            yb[i] = y[s];
            for (size_t j = 0; j < k; j++)
                xb[j * n + i] = x[j][s];
        }
        etacal_qr_result rb;
        etacal_error e2;
        if (etacal_qr_fit(yb, xcols, k, NULL, n, tau, NULL, opts, &rb, &e2) != ETACAL_OK)
            continue; /* a degenerate resample (say, a constant covariate) is skipped */
        for (size_t j = 0; j < p; j++) {
            double d = rb.coef[j] - fit->coef[j];
            sum[j] += d;
            sum2[j] += d * d;
        }
        ok++;
    }
    if (ok < 2) {
        rc = etacal_error_set(err, ETACAL_ENUM, NULL, "too few bootstrap fits succeeded");
        goto bdone;
    }
    for (size_t j = 0; j < p; j++) {
        double m = sum[j] / (double)ok;
        se[j] = sqrt((sum2[j] - (double)ok * m * m) / (double)(ok - 1));
    }
bdone:
    free(yb);
    free(xb);
    free(sum);
    free(sum2);
    gsl_rng_free(rng);
    return rc;
}
