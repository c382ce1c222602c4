/* SPDX-License-Identifier: GPL-3.0-or-later */
/* qr_pre.c: Portnoy & Koenker's (1997) preprocessing for large n, as
 * quantreg's rq.fit.pfn: fit a random subsample, keep the rows near the
 * fit, glob the others into two rows, solve the reduced problem and check
 * the sides on all rows (qr_pass.c). */
#include "qr_internal.h"

#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static double dot_row(const double *xi, const double *v, size_t p)
{
    double s = 0;
    for (size_t j = 0; j < p; j++)
        s += xi[j] * v[j];
    return s;
}

/* The error of the full checks, once a pass has seen a non-finite value or
 * a negative weight. */
static int full_check_error(const design *d, const char *const *names, etacal_error *err)
{
    design full;
    int rc = qr_design_init(&full, d->y, d->x, d->k, d->w, d->n, names, err);
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

int qr_fit_pre(design *d, double tau, double eps, int maxit, unsigned long seed, fnwork *W, pool *P,
                   const char *const *names, etacal_qr_result *out, etacal_error *err)
{
    int rc = ETACAL_OK;
    size_t n = d->n, p = d->p, k = d->k, nch = qr_data_chunks(n), nwords = (n + 63) / 64;
    unsigned char *flags = qr_lines_alloc(n);
    uint64_t *bits = malloc(nwords * sizeof *bits);
    chunkout *co = qr_lines_alloc(nch * sizeof *co);
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
            if ((rc = qr_design_init(d, d->y, d->x, k, d->w, n, names, err)) != 0)
                goto done;
            rc = qr_fit_all(d, tau, eps, maxit, W, P, out, err);
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
             * is judged on all rows (qr_design_init, with its messages). */
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
            if (suspect && (rc = qr_design_init(d, d->y, d->x, k, d->w, n, names, err)) != 0)
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
        if (qr_small_cholesky(g, p) >= 0) {
            /* collinear on all rows (qr_design_init says which covariate), or
             * on the subsample only */
            if ((rc = qr_design_init(d, d->y, d->x, k, d->w, n, names, err)) == 0)
                rc = etacal_error_set(err, ETACAL_ENUM, NULL, "the subsample's design is singular");
            goto done;
        }
        int it;
        double bs[PMAX], gap;
        double eps_s = eps > SUB_REL_GAP * sy ? eps : SUB_REL_GAP * sy;
        if ((rc = qr_fn_solve(Xs, Ys, ms, p, tau, eps, eps_s, maxit, NULL, W, P, bs, &it, &gap, err)) != 0)
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
        D.lo = loq - spread > 0 ? qr_type7(sel, ms, loq - spread) : -INFINITY;
        D.hi = hiq + spread < 1 ? qr_type7(sel, ms, hiq + spread) : INFINITY;
        D.mode = PASS_SPLIT;
        qr_pool_run(P, qr_run_data, &D, nch);
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
            qr_pool_run(P, qr_run_data, &D, nch);
            qr_type7_pair(ratio, n, loq, hiq, &klo, &khi);
            free(ratio);
            ratio = NULL;
            D.mode = PASS_SPLIT;
            D.lo = klo;
            D.hi = khi;
            qr_pool_run(P, qr_run_data, &D, nch);
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
            rc = qr_fn_solve(Xr, Yr, mr, p, tau, eps, eps, maxit, b, W, P, b, &it, &out->gap, err);
            if (rc)
                goto done;
            out->iterations += it;
            out->solves++;
            qr_to_original(d, b, out->coef);
            size_t bad;
            if (qr_check_pass(d, tau, out->coef, flags, P, &bad, &out->objective) != 0) {
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
            qr_pool_run(P, qr_run_data, &D, nch);
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
