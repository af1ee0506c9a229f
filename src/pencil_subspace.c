/* Matrix pencil: the leading singular subspace of the Hankel matrix by FFT products and Krylov. */
/*
 * See item 1 at the top of pencil.c: the leading eigenpairs of the Gram matrix G = X X^H
 * (X = Y^T, Y the Hankel matrix of the record) come from a block Krylov (block Lanczos)
 * iteration with full reorthogonalisation and Rayleigh-Ritz extraction; G is never formed, its
 * products being two correlations of the record done by FFT.
 */
#include <collshift/pencil.h>

#include "pencil_impl.h"

#include <gsl/gsl_eigen.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_vector.h>

#include <float.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* Krylov iteration: tolerances and limits (see pencil_subspace()). */
#define KRYLOV_VEC_TOL 1e-10   /* relative residual of the singular vectors used */
#define KRYLOV_ABS_TOL 1e-13   /* ... or this fraction of sigma_1^2 (rounding floor) */
#define KRYLOV_VAL_TOL 0.1
#define KRYLOV_ACCEPT 1e-6     /* vectors worse than this at the limit: CS_ENOCONV */
#define KRYLOV_FULL 48         /* below this dimension the whole space is used */
#define KRYLOV_DEFLATE 1e-9    /* a candidate shrinking below this fraction is dependent */
#define KRYLOV_BLOCK 2         /* vectors per block (see pencil_subspace()) */

/* ---------------------------------------------------------------- Hankel products by FFT */

/* The transforms are FFTW's, with the plan from the gate workspace's cache (see gate.h: made once
 * per length under the process-wide planner lock, then run with fftw_execute_dft on the
 * fftw_malloc'ed buffers here, which have the plan's alignment). Only the forward plan is made:
 * the inverse transform is taken as conj(F(conj x)) / P (the DFT of the conjugate is the
 * conjugate of the DFT with the opposite sign), the conjugations folded into the loops before
 * and after it, which saves a second plan per length (planning a length, even with FFTW_ESTIMATE,
 * took 1.3-2.6 M instructions here, as much as 40-80 transforms of a 540-point tail gate). */

void pencil_hankel_release(hankel *h)
{
    fftw_free(h->yhat);
    fftw_free(h->buf);
    fftw_free(h->buf2);
    memset(h, 0, sizeof *h);
}

int pencil_hankel_init(hankel *h, cs_gate_workspace *gws, cplx *y, size_t N, size_t L,
                       cs_error *err)
{
    memset(h, 0, sizeof *h);
    h->N = N;
    h->n = L + 1;
    h->m = N - L;
    h->P = cs_gate_fast_size(N);
    h->y = y;
    if (h->P == 0 || h->P > SIZE_MAX / sizeof *h->yhat)
        return CS_ENOMEM;
    h->yhat = fftw_malloc(h->P * sizeof *h->yhat);
    h->buf = fftw_malloc(h->P * sizeof *h->buf);
    h->buf2 = fftw_malloc(h->P * sizeof *h->buf2);
    if (!h->yhat || !h->buf || !h->buf2) {
        pencil_hankel_release(h);
        return CS_ENOMEM;
    }
    /* the plans are made on the workspace's own fftw_malloc'ed scratch; new-array execution
       needs the same alignment, which fftw_malloc gives (checked, in case it ever does not) */
    cs_error e0;
    cs_error *e = err ? err : &e0;
    h->fwd = (fftw_plan)(uintptr_t)cs_gate_plan(gws, h->P, CS_GATE_FFT_FORWARD, 1, e);
    if (!h->fwd) {
        pencil_hankel_release(h);
        return e->code;
    }
    if (fftw_alignment_of((double *)h->yhat) != 0 || fftw_alignment_of((double *)h->buf) != 0 ||
        fftw_alignment_of((double *)h->buf2) != 0) {
        pencil_hankel_release(h);
        return cs_error_set(err, CS_EUNSUP, NULL, -1, -1,
                            "pencil: fftw_malloc gave arrays of another alignment than FFTW's");
    }
    memcpy(h->yhat, y, N * sizeof *y);
    for (size_t t = N; t < h->P; t++)
        h->yhat[t] = 0;
    fftw_execute_dft(h->fwd, h->yhat, h->yhat);
    return CS_OK;
}

/* out[i] = sum_{j < lv} y[i + j] v[j] (conj(v[j]) when cv) for i < lo, where lo + lv - 1 = N.
 * As a circular correlation of length P >= N: its transform is yhat[k] * vhat[-k]. */
static void hankel_corr(hankel *h, const cplx *v, int cv, size_t lv, cplx *out, size_t lo)
{
    size_t P = h->P;
    cplx *b = h->buf;
    /* b[t] = v[-t mod P], whose transform is vhat[-k] */
    b[0] = cv ? conj(v[0]) : v[0];
    size_t z = P - lv + 1;   /* b[t] = 0 for 1 <= t < z */
    for (size_t t = 1; t < z; t++)
        b[t] = 0;
    if (cv)
        for (size_t t = z; t < P; t++)
            b[t] = conj(v[P - t]);
    else
        for (size_t t = z; t < P; t++)
            b[t] = v[P - t];
    fftw_execute_dft(h->fwd, b, b);
    double *bd = (double *)b;
    const double *yd = (const double *)h->yhat;
    for (size_t k = 0; k < P; k++) {   /* b[k] = conj(b[k] yhat[k]), written out (no NaN recovery) */
        double br = bd[2 * k], bi = bd[2 * k + 1], yr = yd[2 * k], yi = yd[2 * k + 1];
        bd[2 * k] = br * yr - bi * yi;
        bd[2 * k + 1] = -(br * yi + bi * yr);
    }
    fftw_execute_dft(h->fwd, b, b);   /* the inverse is conj(b) / P */
    double s = 1.0 / (double)P;
    double *od = (double *)out;
    if (cv)   /* conj of the inverse: see pencil_hankel_xh */
        for (size_t i = 0; i < 2 * lo; i++)
            od[i] = bd[i] * s;
    else
        for (size_t i = 0; i < lo; i++) {
            od[2 * i] = bd[2 * i] * s;
            od[2 * i + 1] = -(bd[2 * i + 1] * s);
        }
}

/* X^H v (length m) for v of length n: conj(Y conj v)... with X = Y^T, X^H = conj(Y). */
void pencil_hankel_xh(hankel *h, const cplx *v, cplx *out)
{
    hankel_corr(h, v, 1, h->n, out, h->m);
}

/* G v = X (X^H v) for v of length n; tmp holds m. */
static void hankel_gram(hankel *h, const cplx *v, cplx *out, cplx *tmp)
{
    pencil_hankel_xh(h, v, tmp);
    hankel_corr(h, tmp, 0, h->m, out, h->n);
}

/* Linear convolution c[t] = sum_j u[j] g[t - j] of u (n) and g (m), t < N = n + m - 1. */
void pencil_hankel_conv(hankel *h, const cplx *u, const cplx *g, cplx *c)
{
    size_t P = h->P;
    cplx *b = h->buf, *b2 = h->buf2;
    for (size_t t = 0; t < P; t++) {
        b[t] = t < h->n ? u[t] : 0;
        b2[t] = t < h->m ? g[t] : 0;
    }
    fftw_execute_dft(h->fwd, b, b);
    fftw_execute_dft(h->fwd, b2, b2);
    for (size_t k = 0; k < P; k++)
        b[k] = conj(b[k] * b2[k]);
    fftw_execute_dft(h->fwd, b, b);   /* the inverse is conj(b) / P */
    double s = 1.0 / (double)P;
    for (size_t t = 0; t < h->N; t++)
        c[t] = conj(b[t]) * s;
}

/* ---------------------------------------------------------------- leading eigenpairs of G */

/* Deterministic pseudo-random numbers for the Krylov start (splitmix64). */
static double rand_unit(uint64_t *s)
{
    uint64_t z = (*s += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    z ^= z >> 31;
    return (double)(z >> 11) * 0x1.0p-52 - 1.0;
}

static double vnorm(const cplx *v, size_t n)
{
    double s = 0.0;
    for (size_t i = 0; i < n; i++)
        s += creal(v[i]) * creal(v[i]) + cimag(v[i]) * cimag(v[i]);
    return sqrt(s);
}

/* Remove from v its components along the k orthonormal columns of Q (n each): modified
 * Gram-Schmidt, `passes` times (see orthogonalise). */
static void gram_schmidt(const cplx *Q, size_t n, size_t k, cplx *v, int passes)
{
    /* the complex products written out in real arithmetic, in the order C evaluates them
       (ac - bd, ad + bc), which gives the same bits without the compiler's NaN recovery */
    double *vv = (double *)v;
    for (int pass = 0; pass < passes; pass++)
        for (size_t c = 0; c < k; c++) {
            const double *q = (const double *)(Q + c * n);
            double dr = 0.0, di = 0.0;
            for (size_t i = 0; i < n; i++) {
                double qr = q[2 * i], qi = q[2 * i + 1], vr = vv[2 * i], vi = vv[2 * i + 1];
                dr += qr * vr - (-qi) * vi;
                di += qr * vi + (-qi) * vr;
            }
            for (size_t i = 0; i < n; i++) {
                double qr = q[2 * i], qi = q[2 * i + 1];
                vv[2 * i] -= dr * qr - di * qi;
                vv[2 * i + 1] -= dr * qi + di * qr;
            }
        }
}

/* Modified Gram-Schmidt twice, which keeps the basis orthogonal to rounding ("twice is
 * enough"). Returns the final norm. */
static double orthogonalise(const cplx *Q, size_t n, size_t k, cplx *v)
{
    gram_schmidt(Q, n, k, v, 2);
    return vnorm(v, n);
}

/* Order from K leading eigenvalues theta of G (n x n); *floor gets the noise floor. */
static size_t choose_order(const order_ctl *c, const double *theta, size_t K, size_t n,
                           double *floor)
{
    double sum = 0.0;
    for (size_t i = 0; i < K; i++)
        sum += fmax(theta[i], 0.0);
    double f2 = (c->trace - sum) / (double)(n - K);
    *floor = sqrt(fmax(f2, 0.0));
    if (c->fixed)
        return c->fixed;
    double s1 = sqrt(fmax(theta[0], 0.0));
    size_t M = 0;
    if (c->rule == CS_PENCIL_ORDER_NOISE) {
        while (M < c->mcap && M < K) {
            double s = sqrt(fmax(theta[M], 0.0));
            if (s < c->noise_threshold * *floor || s < c->rel_threshold * s1 || s <= 0.0)
                break;
            M++;
        }
    } else {
        double best = 0.0;
        for (size_t k = 0; k < c->mcap && k + 1 < K; k++) {
            double s = sqrt(fmax(theta[k], 0.0)), s2 = sqrt(fmax(theta[k + 1], 0.0));
            if (s < c->rel_threshold * s1 || s <= 0.0)
                break;
            double ratio = s2 > 0.0 ? s / s2 : INFINITY;
            if (ratio > best) {
                best = ratio;
                M = k + 1;
            }
        }
    }
    return M;
}

/* Rayleigh-Ritz on the k x k Hermitian T (row-major, leading dimension ld): the K leading
 * eigenvalues (descending) into theta and the eigenvector coefficients (k x K, column i at
 * C + i k) into C. */
static int rayleigh_ritz(const cplx *T, size_t ld, size_t k, size_t K, double *theta, cplx *C)
{
    int status = CS_ENOMEM;
    gsl_matrix_complex *A = gsl_matrix_complex_alloc(k, k);
    gsl_matrix_complex *U = gsl_matrix_complex_alloc(k, k);
    gsl_vector_complex *tau = gsl_vector_complex_alloc(k - 1);
    gsl_vector *d = gsl_vector_alloc(k), *e = gsl_vector_alloc(k - 1), *ev = gsl_vector_alloc(k);
    gsl_matrix *D = gsl_matrix_calloc(k, k), *V = gsl_matrix_alloc(k, k);
    gsl_eigen_symmv_workspace *w = gsl_eigen_symmv_alloc(k);
    if (!A || !U || !tau || !d || !e || !ev || !D || !V || !w)
        goto done;
    for (size_t i = 0; i < k; i++)
        for (size_t j = 0; j < k; j++) {
            /* Hermitian part, so rounding cannot make it non-Hermitian */
            cplx a = 0.5 * (T[i * ld + j] + conj(T[j * ld + i]));
            gsl_matrix_complex_set(A, i, j, to_gsl(a));
        }
    status = CS_ENOCONV;
    if (gsl_linalg_hermtd_decomp(A, tau) != GSL_SUCCESS
        || gsl_linalg_hermtd_unpack(A, tau, U, d, e) != GSL_SUCCESS)
        goto done;
    for (size_t i = 0; i < k; i++) {
        gsl_matrix_set(D, i, i, gsl_vector_get(d, i));
        if (i + 1 < k) {
            gsl_matrix_set(D, i, i + 1, gsl_vector_get(e, i));
            gsl_matrix_set(D, i + 1, i, gsl_vector_get(e, i));
        }
    }
    if (gsl_eigen_symmv(D, ev, V, w) != GSL_SUCCESS
        || gsl_eigen_symmv_sort(ev, V, GSL_EIGEN_SORT_VAL_DESC) != GSL_SUCCESS)
        goto done;
    for (size_t c = 0; c < K; c++) {
        theta[c] = gsl_vector_get(ev, c);
        for (size_t i = 0; i < k; i++) {
            /* sum_j U[i][j] V[j][c] read from the matrices' own storage (the same values as
               gsl_matrix_complex_get and gsl_matrix_get, without a call per element) */
            const double *ui = U->data + 2 * i * U->tda;
            cplx s = 0;
            for (size_t j = 0; j < k; j++)
                s += (ui[2 * j] + I * ui[2 * j + 1]) * V->data[j * V->tda + c];
            C[c * k + i] = s;
        }
    }
    status = CS_OK;
done:
    gsl_matrix_complex_free(A);
    gsl_matrix_complex_free(U);
    gsl_vector_complex_free(tau);
    gsl_vector_free(d);
    gsl_vector_free(e);
    gsl_vector_free(ev);
    gsl_matrix_free(D);
    gsl_matrix_free(V);
    if (w)
        gsl_eigen_symmv_free(w);
    return status;
}

/* The K leading eigenpairs of G by block Krylov iteration with full reorthogonalisation: the
 * basis Q grows by blocks of b vectors, each block G times the previous one made orthonormal to
 * everything before (a candidate that falls into the span, as happens when G has rank < k, is
 * replaced by a random vector), and after each block the Rayleigh-Ritz pairs of Q^H G Q are
 * tested: done when the M vectors the pencil uses have relative residual ||G s - theta s|| /
 * theta <= KRYLOV_VEC_TOL (or the rounding floor) and the other K - M values KRYLOV_VAL_TOL,
 * or when the basis reaches kmax. Small problems (n <= KRYLOV_FULL or 3b) use the whole space.
 *
 * Residuals. The part of the last block's products G q_j outside the basis, R_j, is what the
 * next block starts from anyway; with it the residual of a Ritz pair is sum_j c_j R_j over the
 * last block (see the loop), b vectors instead of the k-term sums Q c and W c, and only the M
 * vectors the pencil uses are formed at the end. (When a product was left out of the basis the
 * residuals are formed from G s directly.) On the split records this took the pencil from
 * 14.35 M to 12.91 M instructions; the poles moved by < 3e-11 of their errors.
 *
 * Block size. The tests above decide when to stop, whatever the block size; the block size only
 * sets how fast the basis gets there. The number of blocks needed is about the same for any b
 * (five on the tail gates of 500-750 samples of the split pipeline's synthetic records, K = 5,
 * for b = 1 ... 9: the degree of the Krylov polynomial is what counts), so the basis grows
 * with b, and its cost (orthogonalisation and Rayleigh-Ritz, O(n k^2)) with b^2. b =
 * KRYLOV_BLOCK = 2 vectors (formerly K + 2) reached the same tolerances with k = 16-18 vectors
 * instead of 35, and the matrix pencil of a split record took 15.2 M instead of 32.2 M
 * instructions (callgrind; the poles moved by < 1e-9 of their errors). A block of two
 * still finds a pair of equal or nearly equal singular values at once (the + and - frequency of
 * a line in a real record, a mirror pair about the LO), for which a single vector (b = 1, even
 * cheaper) would rely on rounding to bring in the second direction. */
int pencil_subspace(hankel *h, size_t K, const order_ctl *oc, ritz *out)
{
    size_t n = h->n;
    size_t b = KRYLOV_BLOCK < n ? KRYLOV_BLOCK : n;
    size_t kmax = (n <= KRYLOV_FULL || n <= 3 * b) ? n : (12 * b > 160 ? 12 * b : 160);
    if (kmax > n)
        kmax = n;
    int status = CS_ENOMEM;
    cplx *Q = malloc(n * kmax * sizeof *Q);
    cplx *W = malloc(n * kmax * sizeof *W);
    cplx *T = malloc(kmax * kmax * sizeof *T);
    cplx *C = malloc(kmax * K * sizeof *C);
    cplx *v = malloc(n * sizeof *v);
    cplx *tmp = malloc(h->m * sizeof *tmp);
    cplx *r = malloc(n * sizeof *r);
    cplx *R = malloc(n * b * sizeof *R);
    double *Rn0 = malloc(b * sizeof *Rn0);
    double *theta = malloc(K * sizeof *theta);
    out->theta = malloc(K * sizeof *out->theta);
    out->S = calloc(n * K, sizeof *out->S);
    if (!Q || !W || !T || !C || !v || !tmp || !r || !R || !Rn0 || !theta || !out->theta || !out->S)
        goto done;
    out->K = K;
    out->converged = 0;
    uint64_t seed = 0x5eed1234abcdULL;
    size_t k = 0, last0 = 0, last1 = 0; /* the previous block is columns [last0, last1) */
    int explicit_res = 0;               /* residuals from G s itself (see below) */
    status = CS_OK;
    for (;;) {
        /* next block: the previous block's G q made orthogonal to the basis (R, below), or
           random vectors */
        size_t want = b < kmax - k ? b : kmax - k;
        size_t from = last0, added = 0, k0 = k;
        int tries = 0;
        while (added < want) {
            double n0, n1;
            int cand = from < last1;
            if (cand) {
                /* R is orthogonal to the columns before this block already: what is left is
                   the block's own new columns (twice, as in orthogonalise) */
                memcpy(v, R + (from - last0) * n, n * sizeof *v);
                n0 = Rn0[from - last0];
                from++;
                n1 = orthogonalise(Q + k0 * n, n, added, v);
            } else {
                for (size_t i = 0; i < n; i++)
                    v[i] = rand_unit(&seed) + I * rand_unit(&seed);
                if (++tries > (int)(4 * kmax))
                    break; /* cannot happen unless the arithmetic is broken */
                n0 = vnorm(v, n);
                n1 = orthogonalise(Q, n, k, v);
            }
            if (!(n0 > 0.0) || !isfinite(n0) || !(n1 > KRYLOV_DEFLATE * n0)) {
                if (cand)
                    explicit_res = 1;   /* a G q left out of the basis */
                continue;
            }
            cplx *q = Q + k * n;
            for (size_t i = 0; i < n; i++)
                q[i] = v[i] / n1;
            hankel_gram(h, q, W + k * n, tmp);
            k++;
            added++;
        }
        if (from < last1)
            explicit_res = 1;   /* G q of the previous block not taken (the basis is full) */
        /* T is block tridiagonal: for q_a two or more blocks before q_c, q_a^H G q_c =
           (G q_a)^H q_c, and G q_a lies in the basis up to the block after q_a's (its part
           outside became that block), to which q_c is orthogonal; those entries are rounding
           and are set to 0 (standard block Lanczos; the reorthogonalisation below still runs
           over the whole basis). Not when a G q_a was left out of the basis (explicit_res). */
        size_t a0 = explicit_res ? 0 : last0;
        last0 = k - added;
        last1 = k;
        for (size_t c = last0; c < k; c++)
            for (size_t a = 0; a < a0; a++)
                T[a * kmax + c] = T[c * kmax + a] = 0;
        /* new columns of T = Q^H W */
        for (size_t c = last0; c < k; c++)
            for (size_t a = a0; a < k; a++) {
                /* conj(qa) . wc in real arithmetic (the same bits, see orthogonalise) */
                const double *qa = (const double *)(Q + a * n), *wc = (const double *)(W + c * n);
                double sr = 0.0, si = 0.0;
                for (size_t i = 0; i < n; i++) {
                    double qr = qa[2 * i], qi = qa[2 * i + 1], wr = wc[2 * i], wi = wc[2 * i + 1];
                    sr += qr * wr - (-qi) * wi;
                    si += qr * wi + (-qi) * wr;
                }
                cplx sc = sr + I * si;
                T[a * kmax + c] = sc;
                T[c * kmax + a] = conj(sc);
            }
        /* R_j = (I - Q Q^H) G q_j for the block just added: the next block's candidates, and
           the residuals of the Ritz pairs. Every G q_j of the earlier blocks went into the basis
           (its part outside became a column of Q), so G Q = Q T + R E^H with E selecting the
           last block, and for s = Q c with T c = theta c: G s - theta s = sum_j c_j R_j over
           the last block (up to rounding, eps ||T||). When a G q_j was left out (dependent, or
           the basis full) that no longer holds and the residuals are formed from G s. */
        for (size_t c = last0; c < k; c++) {
            /* classical Gram-Schmidt with the coefficients just computed (T's column c is
               Q^H w_c), then a modified Gram-Schmidt pass: orthogonal to rounding as with two
               modified passes ("twice is enough" holds for both), one pass of products fewer */
            cplx *rc = R + (c - last0) * n;
            double *rd = (double *)rc;
            const double *wd = (const double *)(W + c * n);
            for (size_t i = 0; i < 2 * n; i++)
                rd[i] = wd[i];
            Rn0[c - last0] = vnorm(rc, n);
            for (size_t a = a0; a < k; a++) {   /* T[a][c] = 0 below a0 */
                const double *qa = (const double *)(Q + a * n);
                double dr = creal(T[a * kmax + c]), di = cimag(T[a * kmax + c]);
                for (size_t i = 0; i < n; i++) {
                    double qr = qa[2 * i], qi = qa[2 * i + 1];
                    rd[2 * i] -= dr * qr - di * qi;
                    rd[2 * i + 1] -= dr * qi + di * qr;
                }
            }
            gram_schmidt(Q, n, k, rc, 1);
        }
        if (added > 0 && k < K + 1 && k < n)
            continue;
        size_t Kk = K < k ? K : k;
        status = rayleigh_ritz(T, kmax, k, Kk, theta, C);
        if (status != CS_OK)
            goto done;
        /* residuals and the order they imply */
        for (size_t c = Kk; c < K; c++)
            theta[c] = 0.0;
        size_t M = choose_order(oc, theta, K, n, &out->floor);
        if (M > Kk)
            M = Kk;
        int ok = 1;
        double worst = 0.0, top = fmax(theta[0], DBL_MIN);
        /* when the basis can still grow, the first pair that fails the test decides: the other
           pairs are tested at the final test only */
        int can_grow = k < n && k < kmax && added > 0;
        for (size_t c = 0; c < Kk && (ok || !can_grow); c++) {
            const cplx *cc = C + c * k;
            if (explicit_res) {
                const double *Qd = (const double *)Q, *Wd = (const double *)W, *cd = (const double *)cc;
                for (size_t i = 0; i < n; i++) {
                    /* sum_j Q[j][i] cc[j] and W[j][i] cc[j] in real arithmetic */
                    double sr = 0.0, si = 0.0, gr = 0.0, gi = 0.0;
                    for (size_t j = 0; j < k; j++) {
                        double ar = Qd[2 * (j * n + i)], ai = Qd[2 * (j * n + i) + 1];
                        double br = Wd[2 * (j * n + i)], bi = Wd[2 * (j * n + i) + 1];
                        double cr = cd[2 * j], ci = cd[2 * j + 1];
                        sr += ar * cr - ai * ci;
                        si += ar * ci + ai * cr;
                        gr += br * cr - bi * ci;
                        gi += br * ci + bi * cr;
                    }
                    cplx sv = sr + I * si, gv = gr + I * gi;
                    r[i] = gv - theta[c] * sv;
                }
            } else {
                for (size_t i = 0; i < n; i++)
                    r[i] = 0;
                for (size_t j = last0; j < k; j++) {
                    const cplx *rj = R + (j - last0) * n;
                    cplx cj = cc[j];
                    for (size_t i = 0; i < n; i++)
                        r[i] += cj * rj[i];
                }
            }
            double res = vnorm(r, n);
            double th = fabs(theta[c]);
            if (c < M) {
                /* relative to theta, or to the rounding floor for the tiny ones */
                double rel = res / fmax(th, KRYLOV_ABS_TOL / KRYLOV_VEC_TOL * top);
                if (rel > worst)
                    worst = rel;
                if (rel > KRYLOV_VEC_TOL)
                    ok = 0;
            } else if (res > fmax(KRYLOV_VAL_TOL * th, KRYLOV_ABS_TOL * top)) {
                ok = 0;
            }
        }
        memcpy(out->theta, theta, K * sizeof *theta);
        out->M = M;
        out->dim = k;
        out->worst = worst;
        int stop = ok || k == n || k >= kmax || added == 0;
        if (stop) {
            /* the M vectors the pencil uses: s = Q c (the others stay 0) */
            for (size_t c = 0; c < M; c++) {
                const cplx *cc = C + c * k;
                cplx *sc = out->S + c * n;
                for (size_t i = 0; i < n; i++)
                    sc[i] = 0;
                for (size_t j = 0; j < k; j++) {
                    const cplx *qj = Q + j * n;
                    cplx cj = cc[j];
                    for (size_t i = 0; i < n; i++)
                        sc[i] += cj * qj[i];
                }
            }
        }
        if (ok || k == n) {
            out->converged = 1;
            break;
        }
        if (k >= kmax || added == 0) {
            out->converged = worst <= KRYLOV_ACCEPT;
            break;
        }
    }
done:
    free(R);
    free(Rn0);
    free(Q);
    free(W);
    free(T);
    free(C);
    free(v);
    free(tmp);
    free(r);
    free(theta);
    return status;
}
