/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_internal.h: what the files of the quantile regression share, not part
 * of the API (not installed).  quantreg.c: the data, centred and scaled, the
 * type-7 quantiles and the fit (etacal_qr_fit); qr_pool.c: the threads of
 * the passes over rows; qr_fn.c: the Frisch-Newton interior-point solver;
 * qr_pass.c: the passes over all rows of the preprocessing and the check;
 * qr_pre.c: Portnoy & Koenker's preprocessing; qr_se.c: standard errors;
 * qr_rearrange.c: the monotone rearrangement. */
#ifndef ETACAL_QR_INTERNAL_H
#define ETACAL_QR_INTERNAL_H

#include "base.h"

#include <stdatomic.h>
#include <stdint.h>
#include <string.h>
#include <threads.h>

#define PMAX (ETACAL_QR_MAX_COVARIATES + 1)

/* ---- the data, centred and scaled (quantreg.c) ------------------------ */

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
long qr_small_cholesky(double *a, size_t p);

/* Checks the data (finite values, non-negative weights, no constant or
 * collinear covariate: the message names it) and fills the centre and
 * scale of each covariate. */
int qr_design_init(design *d, const double *y, const double *const *x, size_t k, const double *w, size_t n,
                   const char *const *names, etacal_error *err);

/* Hyndman & Fan type-7 quantile of v[0..n) at prob (v is reordered), and
 * two at once (p1 <= p2) sharing the selection. */
double qr_type7(double *v, size_t n, double prob);
void qr_type7_pair(double *v, size_t n, double p1, double p2, double *q1, double *q2);

/* Coefficients of the scaled fit in the original units. */
void qr_to_original(const design *d, const double *b, double *coef);

/* ---- threads (qr_pool.c) ---------------------------------------------- */

/* Every pass over rows splits them into chunks of a fixed size; a
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

/* Starts nthreads - 1 workers (fewer when a thread cannot be created: the
 * answer is the same, only slower); stops them. */
void qr_pool_start(pool *P, int nthreads);
void qr_pool_stop(pool *P);
/* Runs fn(ctx, c) for c in [0, nchunks), on the workers and the caller. */
void qr_pool_run(pool *P, chunk_fn fn, void *ctx, size_t nchunks);

/* ---- kernels shared by the solver and the passes ----------------------- */

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

/* ---- Frisch-Newton (qr_fn.c) ------------------------------------------ */

typedef struct fnwork {
    size_t cap, chcap;
    double *x, *s, *z, *w, *dx, *dz, *dw;
    double *part;
} fnwork;

/* Memory starting on a cache line (64 bytes): a chunk of FN_CH doubles
 * then covers whole lines, and no line is written by two threads. */
void *qr_lines_alloc(size_t bytes);
void qr_fnwork_free(fnwork *f);

/* Frisch-Newton (rqfnb's steps): rows X (m x p, column j at
 * X + j*m), responses Y; writes the coefficients (scaled space) to b.  eps
 * is rqfnb's eps of the starting point, tol the duality gap at which it
 * stops (eps but for the subsample's fit).  warm (or NULL): coefficients
 * to start the dual from instead of least squares (the subsample's fit for
 * the reduced problem: a few Newton steps fewer). */
int qr_fn_solve(const double *X, const double *Y, size_t m, size_t p, double tau, double eps, double tol,
                int maxit, const double *warm, fnwork *W, pool *P, double *b, int *iters, double *gap_out,
                etacal_error *err);

/* ---- passes over all rows (qr_pass.c) ---------------------------------- */

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
} chunkout; /* a whole number of cache lines (see qr_lines_alloc) */

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

/* One chunk of DATA_CH rows of a pass (a chunk_fn over a dpass). */
void qr_run_data(void *ctx, size_t c);
size_t qr_data_chunks(size_t n);
/* The objective at coef (original units), checking the flagged rows'
 * sides; *bad gets the count of wrong rows (their flags are now 0). */
int qr_check_pass(const design *d, double tau, const double *coef, unsigned char *flags, pool *P, size_t *bad,
                  double *objective);

/* ---- the fits (quantreg.c, qr_pre.c) ----------------------------------- */

/* The interior point on all rows, then the objective. */
int qr_fit_all(const design *d, double tau, double eps, int maxit, fnwork *W, pool *P, etacal_qr_result *out,
               etacal_error *err);
/* Portnoy & Koenker's preprocessing (quantreg's rq.fit.pfn): fit a random
 * subsample, keep the rows whose residuals may lie on either side of the
 * fit, and replace the others by two glob rows; verify the signs on all
 * rows and repair, or start again with a larger subsample.  The passes over
 * all rows: one that computes each row's ratio of residual to band and
 * keeps the rows in a window around the two quantiles of the ratios (which
 * are then selected exactly among them), and one that checks the sides and
 * sums the objective. */
int qr_fit_pre(design *d, double tau, double eps, int maxit, unsigned long seed, fnwork *W, pool *P,
               const char *const *names, etacal_qr_result *out, etacal_error *err);

#endif
