/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_fn.c: the Frisch-Newton primal-dual interior-point method for the
 * quantile regression LP (Portnoy & Koenker 1997), in the steps of
 * quantreg's rqfnb: the rows in chunks of FN_CH, each pass a kernel per
 * chunk whose sums the caller adds in chunk order (qr_pool.c), and a p x p
 * Cholesky solve (GSL) per Newton step. */
#include "qr_internal.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define STEP_B 0.99995 /* fraction of the way to the boundary (rqfnb's beta) */

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

void *qr_lines_alloc(size_t bytes)
{
    return aligned_alloc(64, (bytes + 63) / 64 * 64);
}

void qr_fnwork_free(fnwork *f)
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
    qr_fnwork_free(f);
    double **arr[] = {&f->x, &f->s, &f->z, &f->w, &f->dx, &f->dz, &f->dw};
    for (size_t i = 0; i < sizeof arr / sizeof *arr; i++)
        if (!(*arr[i] = qr_lines_alloc(m * sizeof(double)))) {
            qr_fnwork_free(f);
            return -1;
        }
    if (!(f->part = qr_lines_alloc(nch * SLOT * sizeof(double)))) {
        qr_fnwork_free(f);
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

int qr_fn_solve(const double *X, const double *Y, size_t m, size_t p, double tau, double eps, double tol,
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
    qr_pool_run(P, run_start, &F, nch);
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
    qr_pool_run(P, run_a, &F, nch);
    F.init = 0;
    double gap = reduce_scalar(W->part, nch, S_GAP);
    int it = 0, prepared = 1;
    while (gap > tol && it < maxit) {
        it++;
        if (!prepared) {
            /* the predicted gap was below the tolerance, the real one is not */
            F.update = 0;
            F.prep = 1;
            qr_pool_run(P, run_a, &F, nch);
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
        qr_pool_run(P, run_b, &F, nch);
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
            qr_pool_run(P, run_d, &F, nch);
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
        qr_pool_run(P, run_a, &F, nch);
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
