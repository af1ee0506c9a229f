/* Matrix-pencil estimation of damped complex exponentials, with first-order error propagation.
 *
 * The method (Y. Hua and T. K. Sarkar, "Matrix pencil method for estimating parameters of
 * exponentially damped/undamped sinusoids in noise", IEEE Trans. Acoust. Speech Signal Process.
 * 38(5), 814-824 (1990); equation numbers are not quoted here, the steps are from memory).
 * With N samples y_t and a pencil parameter L, the Hankel matrix Y[i][j] = y_{i+j}
 * ((N-L) x (L+1)) of a noise-free sum of M exponentials sum_k a_k z_k^t has rank M, and its row
 * space is spanned by the vectors (z_k^j)_{j<=L}. Let S ((L+1) x M) be an orthonormal basis of
 * the dominant M-dimensional subspace of the row space (the conjugates of the M leading right
 * singular vectors: truncating the SVD is the total-least-squares step that filters the noise).
 * Deleting the last row of S gives S1, deleting the first gives S2; then S2 = S1 Phi with Phi
 * similar to diag(z_k), so the poles are the eigenvalues of the M x M matrix
 * Phi = pinv(S1) S2 (Hua and Sarkar's pinv(V1') V2' up to complex conjugation). From a pole,
 * f = arg(z) / (2 pi dt) and Gamma = -ln|z| / dt; the amplitudes are the linear least-squares
 * solution of the Vandermonde system y_t = sum_k a_k z_k^t. Hua and Sarkar find the variance of
 * the estimates close to the Cramer-Rao bound for L between N/3 and 2N/3 (the method is symmetric
 * under L <-> N - L); the default is L = N/3, which makes the subspace the smaller side.
 *
 * Numerical choices.
 * 1. No complex SVD. GSL has none, and the alternatives are slow here: the real embedding
 *    [[B, -C], [C, B]] of the (2N/3) x (N/3) complex Hankel matrix (whose singular values come in
 *    equal pairs) took 4.7 s in gsl_linalg_SV_decomp for N = 1000, and the eigenvectors of the
 *    334 x 334 Hermitian Gram matrix took 2.8 s in gsl_eigen_hermv (its eigenvalues alone 24 ms;
 *    real symmetric gsl_eigen_symmv 0.17 s) on this machine. Only M + 1 .. max_order + 1 leading
 *    singular pairs are needed, so they are found as eigenpairs of the Gram matrix
 *    G = X X^H (X = Y^T, (L+1) x (L+1); eigenvalues sigma^2, eigenvectors = S) by a block Krylov
 *    (block Lanczos) iteration with full reorthogonalisation and Rayleigh-Ritz extraction. G is
 *    never formed: X v and X^H w are correlations of the record with v, done by FFT (GSL's
 *    mixed-radix FFT, length P >= N with factors 2, 3, 5; P >= N is enough because the wanted
 *    outputs never wrap around). A product costs O(N log N), the iteration O(N k (log N + k))
 *    for a basis of k vectors, and the memory is O(N k). Measured here (complex records, the
 *    default max_order 8 and a fixed order 1): N = 1000 in 9-17 ms and 2.4 ms, N = 4000 in
 *    45-65 ms and 10 ms, instead of seconds to minutes. The Rayleigh-Ritz problems (k x k
 *    Hermitian, k <= a few hundred) are solved with GSL: gsl_linalg_hermtd_decomp reduces them to
 *    real symmetric tridiagonal form, whose eigenvectors come from gsl_eigen_symmv (fast for
 *    real matrices) and are mapped back with gsl_linalg_hermtd_unpack's U.
 *    The cost of working with G instead of Y: squared singular values lose relative accuracy
 *    below about sqrt(eps) sigma_1, so singular values below rel_threshold * sigma_1 (>= 1e-7)
 *    are not used. Data whose noise or quantisation is above 1e-7 of the signal (all measured
 *    data) lose nothing: the rounding error of the subspace, eps sigma_1^2 / sigma_M^2, is then
 *    far below its statistical error, ||noise|| / sigma_M.
 *    The M singular vectors used are converged to a relative residual of 1e-10; the other
 *    singular values reported (beyond the order) only to 0.1, enough for the order rule: they
 *    are Rayleigh-Ritz values, lower bounds typically within 2 % of the exact ones (noise
 *    singular values cluster, and resolving them would triple the cost).
 *    The trace of G is sum_t w_t |y_t|^2 (w_t = how often y_t occurs in Y), which gives the mean
 *    of the eigenvalues not computed: the noise floor of the order rule. For white noise alone
 *    the largest singular value stayed below 3.3 floors in 999 of 1000 simulated records of
 *    100-3000 samples (below 2.8 in 99 %; shorter records scatter more: 32 samples, 4.8 at
 *    99 %), hence the default threshold 3.5. The automatic order is capped at N/6 so that at
 *    least as many singular values are left for the floor as are computed.
 * 2. The reduced pencil is a complex M x M matrix Phi, and GSL's non-symmetric eigensolver is
 *    real. The real embedding R = [[Re Phi, -Im Phi], [Im Phi, Re Phi]] has the eigenvalues of
 *    Phi and their conjugates; an eigenvector [x; -i x] belongs to an eigenvalue of Phi,
 *    [x; +i x] to a conjugate. Telling them apart by the eigenvectors fails when Phi has both z
 *    and conj(z) as eigenvalues (a real signal, or lines placed symmetrically about the LO):
 *    the embedding then has double eigenvalues with mixed eigenvectors. So the embedding is taken
 *    of Phi + i h I with h = ||Phi||_F + 1 > max |Im z|: every eigenvalue of Phi then moves to
 *    the upper half plane (Im >= 1) and every conjugate to the lower one, so they never meet, the
 *    upper ones minus i h are the poles, and their eigenvectors [x; -i x] give the eigenvectors
 *    x of Phi. Cost: gsl_eigen_nonsymmv of order 2M, negligible.
 * 3. Amplitudes: complex Householder QR of the N x M Vandermonde matrix (z^t = exp(t log z),
 *    so no error accumulates along t), gsl_linalg_complex_QR_lssolve.
 * 4. Errors: first-order perturbation of the whole chain by the noise e_t, with the noise-free
 *    quantities replaced by the estimates. For the rank-M signal X0 = S Sigma Q^H the dominant
 *    left singular subspace moves by P_perp F Q Sigma^-1 (F the noise part of X, P_perp =
 *    I - S S^H); Phi then moves by pinv(S1) (J2 - z J1) dS, and the pole z_k (right eigenvector
 *    r_k, left p_k with p_k^T r_k = 1) by dz_k = p_k^T dPhi r_k = u_k^T F g_k with
 *    u_k = P_perp^T (J2 - z_k J1)^T pinv(S1)^T p_k and g_k = Q Sigma^-1 r_k; P_perp drops out,
 *    because u_k without it is already orthogonal to S (S^T u_k = p_k^T (Phi - z_k I) = 0 by
 *    the normal equations of Phi). Since F[j][i] = e_{i+j}, dz_k = sum_t c_k[t] e_t with c_k
 *    the convolution of u_k and g_k (by FFT). The amplitudes move by
 *    pinv(Z) (e - sum_l a_l dZ/dz_l dz_l). Each error is then
 *    s^2 sum_t |coefficient_t|^2 (complex circular noise, s^2 per real component) or
 *    s^2 sum_t (Re or Im coefficient_t)^2 (real noise), with s^2 = RSS / (2N - 4M) (complex) or
 *    RSS / (N - 2M) (real). These are this estimator's own first-order errors (not the
 *    Cramer-Rao bound, which they approach when the pencil is efficient). This kind of
 *    first-order analysis of subspace methods is standard (e.g. F. Li, H. Liu and R. J. Vaccaro,
 *    IEEE Trans. Aerosp. Electron. Syst. 29(4), 1170-1184 (1993); from memory); the derivation
 *    above is complete in itself, and tests/test_pencil.c checks it against the scatter of
 *    many noise realisations.
 * 5. Long records: block averaging by D keeps the model exact (pole z^D, amplitude times
 *    (1 + z + ... + z^(D-1)) / D, undone afterwards) and, for white noise and lines well inside
 *    the reduced band, loses almost no information, while the cost falls with N.
 * Results: poles, then frequencies, rates, amplitudes referred to the input sampling interval and
 * to the first sample. */
#include <collshift/pencil.h>

/* gsl_complex stays GSL's struct whatever the compiler (GSL would otherwise make it the C99
 * type when <complex.h> is seen, depending on the compiler); values cross by to_gsl/from_gsl. */
#define GSL_COMPLEX_LEGACY 1
#include <complex.h>
#include <gsl/gsl_blas.h>
#include <gsl/gsl_eigen.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_fft_complex.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_vector.h>

#include <float.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define PI 3.14159265358979323846264338327950288

typedef double complex cplx;

static gsl_complex to_gsl(cplx z)
{
    gsl_complex g;
    GSL_SET_COMPLEX(&g, creal(z), cimag(z));
    return g;
}

static cplx from_gsl(gsl_complex g)
{
    return GSL_REAL(g) + I * GSL_IMAG(g);
}

/* Krylov iteration: tolerances and limits (see subspace()). */
#define KRYLOV_VEC_TOL 1e-10   /* relative residual of the singular vectors used */
#define KRYLOV_ABS_TOL 1e-13   /* ... or this fraction of sigma_1^2 (rounding floor) */
#define KRYLOV_VAL_TOL 0.1
#define KRYLOV_ACCEPT 1e-6     /* vectors worse than this at the limit: CS_ENOCONV */
#define KRYLOV_FULL 48         /* below this dimension the whole space is used */
#define KRYLOV_DEFLATE 1e-9    /* a candidate shrinking below this fraction is dependent */

cs_pencil_parameters cs_pencil_default_parameters(void)
{
    cs_pencil_parameters p;
    p.order = 0;
    p.max_order = 8;
    p.order_rule = CS_PENCIL_ORDER_NOISE;
    p.noise_threshold = 3.5;
    p.rel_threshold = 1e-6;
    p.pencil_fraction = 1.0 / 3.0;
    p.max_samples = 8192;
    p.reduce = CS_PENCIL_REDUCE_AVERAGE;
    p.noise_sd = 0.0;
    return p;
}

void cs_pencil_result_init(cs_pencil_result *r)
{
    if (!r)
        return;
    memset(r, 0, sizeof *r);
    r->comp = NULL;
    r->singular = NULL;
    r->noise_floor = NAN;
    r->noise_sd = NAN;
    r->rms_residual = NAN;
    r->dt_s = NAN;
    r->subspace_residual = NAN;
    r->error_status = CS_OK;
}

void cs_pencil_result_release(cs_pencil_result *r)
{
    if (!r)
        return;
    free(r->comp);
    free(r->singular);
    cs_pencil_result_init(r);
}

/* ---------------------------------------------------------------- Hankel products by FFT */

/* The record and what the products X v, X^H w need. X = Y^T is n x m, X[j][i] = y[i + j]. */
typedef struct hankel {
    size_t N, n, m, P;       /* samples, columns of Y (L + 1), rows of Y (N - L), FFT length */
    cplx *y;                 /* N samples (owned by the caller of hankel_init) */
    cplx *yhat;              /* FFT of y padded to P */
    cplx *buf;               /* P scratch */
    gsl_fft_complex_wavetable *wt;
    gsl_fft_complex_workspace *ws;
} hankel;

/* Smallest 2^a 3^b 5^c >= n (n >= 1). */
static size_t fft_length(size_t n)
{
    size_t best = SIZE_MAX;
    for (size_t p5 = 1; p5 < 2 * n && p5 < SIZE_MAX / 5; p5 *= 5)
        for (size_t p3 = p5; p3 < 2 * n && p3 < SIZE_MAX / 3; p3 *= 3) {
            size_t p = p3;
            while (p < n)
                p *= 2;
            if (p < best)
                best = p;
        }
    return best;
}

static void hankel_release(hankel *h)
{
    free(h->yhat);
    free(h->buf);
    if (h->wt)
        gsl_fft_complex_wavetable_free(h->wt);
    if (h->ws)
        gsl_fft_complex_workspace_free(h->ws);
    memset(h, 0, sizeof *h);
}

static int hankel_init(hankel *h, cplx *y, size_t N, size_t L)
{
    memset(h, 0, sizeof *h);
    h->N = N;
    h->n = L + 1;
    h->m = N - L;
    h->P = fft_length(N);
    h->y = y;
    h->yhat = malloc(h->P * sizeof *h->yhat);
    h->buf = malloc(h->P * sizeof *h->buf);
    h->wt = gsl_fft_complex_wavetable_alloc(h->P);
    h->ws = gsl_fft_complex_workspace_alloc(h->P);
    if (!h->yhat || !h->buf || !h->wt || !h->ws) {
        hankel_release(h);
        return CS_ENOMEM;
    }
    memcpy(h->yhat, y, N * sizeof *y);
    for (size_t t = N; t < h->P; t++)
        h->yhat[t] = 0;
    if (gsl_fft_complex_forward((double *)h->yhat, 1, h->P, h->wt, h->ws) != GSL_SUCCESS) {
        hankel_release(h);
        return CS_ENOMEM;
    }
    return CS_OK;
}

/* out[i] = sum_{j < lv} y[i + j] v[j] for i < lo, where lo + lv - 1 = N. As a circular
 * correlation of length P >= N: its transform is yhat[k] * vhat[-k]. */
static void hankel_corr(hankel *h, const cplx *v, size_t lv, cplx *out, size_t lo)
{
    size_t P = h->P;
    cplx *b = h->buf;
    /* b[t] = v[-t mod P], whose transform is vhat[-k] */
    b[0] = v[0];
    for (size_t t = 1; t < P; t++)
        b[t] = (P - t < lv) ? v[P - t] : 0;
    gsl_fft_complex_forward((double *)b, 1, P, h->wt, h->ws);
    for (size_t k = 0; k < P; k++)
        b[k] *= h->yhat[k];
    gsl_fft_complex_inverse((double *)b, 1, P, h->wt, h->ws);
    memcpy(out, b, lo * sizeof *out);
}

/* X^H v (length m) for v of length n: conj(Y conj v)... with X = Y^T, X^H = conj(Y). */
static void hankel_xh(hankel *h, const cplx *v, cplx *out, cplx *tmp)
{
    for (size_t j = 0; j < h->n; j++)
        tmp[j] = conj(v[j]);
    hankel_corr(h, tmp, h->n, out, h->m);
    for (size_t i = 0; i < h->m; i++)
        out[i] = conj(out[i]);
}

/* G v = X (X^H v) for v of length n; tmp holds n + m. */
static void hankel_gram(hankel *h, const cplx *v, cplx *out, cplx *tmp)
{
    cplx *w = tmp + h->n;
    hankel_xh(h, v, w, tmp);
    hankel_corr(h, w, h->m, out, h->n);
}

/* Linear convolution c[t] = sum_j u[j] g[t - j] of u (n) and g (m), t < N = n + m - 1. */
static void hankel_conv(hankel *h, const cplx *u, const cplx *g, cplx *c, cplx *tmp)
{
    size_t P = h->P;
    cplx *b = h->buf;
    for (size_t t = 0; t < P; t++) {
        b[t] = t < h->n ? u[t] : 0;
        tmp[t] = t < h->m ? g[t] : 0;
    }
    gsl_fft_complex_forward((double *)b, 1, P, h->wt, h->ws);
    gsl_fft_complex_forward((double *)tmp, 1, P, h->wt, h->ws);
    for (size_t k = 0; k < P; k++)
        b[k] *= tmp[k];
    gsl_fft_complex_inverse((double *)b, 1, P, h->wt, h->ws);
    memcpy(c, b, h->N * sizeof *c);
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
 * Gram-Schmidt, twice, which keeps the basis orthogonal to rounding ("twice is enough").
 * Returns the final norm. */
static double orthogonalise(const cplx *Q, size_t n, size_t k, cplx *v)
{
    for (int pass = 0; pass < 2; pass++)
        for (size_t c = 0; c < k; c++) {
            const cplx *q = Q + c * n;
            cplx d = 0;
            for (size_t i = 0; i < n; i++)
                d += conj(q[i]) * v[i];
            for (size_t i = 0; i < n; i++)
                v[i] -= d * q[i];
        }
    return vnorm(v, n);
}

/* What the order rule needs and produces. */
typedef struct order_ctl {
    size_t fixed;          /* fixed order, or 0 */
    size_t mcap;           /* largest automatic order */
    cs_pencil_order_rule rule;
    double noise_threshold, rel_threshold;
    double trace;          /* trace of G */
} order_ctl;

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

/* The Krylov iteration's output. */
typedef struct ritz {
    size_t K;              /* eigenpairs computed */
    double *theta;         /* K eigenvalues, descending */
    cplx *S;               /* n x K eigenvectors, vector i at S + i n */
    size_t M;              /* the order chosen from theta */
    double floor;          /* noise floor (singular-value units) */
    size_t dim;            /* final basis size */
    double worst;          /* largest relative residual of the M vectors */
    int converged;
} ritz;

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
            cplx s = 0;
            for (size_t j = 0; j < k; j++)
                s += from_gsl(gsl_matrix_complex_get(U, i, j)) * gsl_matrix_get(V, j, c);
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
 * or when the basis reaches kmax. Small problems (n <= KRYLOV_FULL or 3b) use the whole space. */
static int subspace(hankel *h, size_t K, const order_ctl *oc, ritz *out)
{
    size_t n = h->n;
    size_t b = K + 2 < n ? K + 2 : n;
    size_t kmax = (n <= KRYLOV_FULL || n <= 3 * b) ? n : (12 * b > 160 ? 12 * b : 160);
    if (kmax > n)
        kmax = n;
    int status = CS_ENOMEM;
    cplx *Q = malloc(n * kmax * sizeof *Q);
    cplx *W = malloc(n * kmax * sizeof *W);
    cplx *T = malloc(kmax * kmax * sizeof *T);
    cplx *C = malloc(kmax * K * sizeof *C);
    cplx *v = malloc(n * sizeof *v);
    cplx *tmp = malloc((n + h->m) * sizeof *tmp);
    cplx *r = malloc(n * sizeof *r);
    double *theta = malloc(K * sizeof *theta);
    out->theta = malloc(K * sizeof *out->theta);
    out->S = malloc(n * K * sizeof *out->S);
    if (!Q || !W || !T || !C || !v || !tmp || !r || !theta || !out->theta || !out->S)
        goto done;
    out->K = K;
    out->converged = 0;
    uint64_t seed = 0x5eed1234abcdULL;
    size_t k = 0, last0 = 0, last1 = 0; /* the previous block is columns [last0, last1) */
    status = CS_OK;
    for (;;) {
        /* next block: G times the previous block, or random vectors */
        size_t want = b < kmax - k ? b : kmax - k;
        size_t from = last0, added = 0;
        int tries = 0;
        while (added < want) {
            if (from < last1) {
                memcpy(v, W + from * n, n * sizeof *v);
                from++;
            } else {
                for (size_t i = 0; i < n; i++)
                    v[i] = rand_unit(&seed) + I * rand_unit(&seed);
                if (++tries > (int)(4 * kmax))
                    break; /* cannot happen unless the arithmetic is broken */
            }
            double n0 = vnorm(v, n);
            if (!(n0 > 0.0) || !isfinite(n0))
                continue;
            double n1 = orthogonalise(Q, n, k, v);
            if (!(n1 > KRYLOV_DEFLATE * n0))
                continue;
            cplx *q = Q + k * n;
            for (size_t i = 0; i < n; i++)
                q[i] = v[i] / n1;
            hankel_gram(h, q, W + k * n, tmp);
            k++;
            added++;
        }
        last0 = k - added;
        last1 = k;
        /* new columns of T = Q^H W */
        for (size_t c = last0; c < k; c++)
            for (size_t a = 0; a < k; a++) {
                cplx s = 0;
                const cplx *qa = Q + a * n, *wc = W + c * n;
                for (size_t i = 0; i < n; i++)
                    s += conj(qa[i]) * wc[i];
                T[a * kmax + c] = s;
                T[c * kmax + a] = conj(s);
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
        for (size_t c = 0; c < Kk; c++) {
            const cplx *cc = C + c * k;
            for (size_t i = 0; i < n; i++) {
                cplx s = 0, g = 0;
                for (size_t j = 0; j < k; j++) {
                    s += Q[j * n + i] * cc[j];
                    g += W[j * n + i] * cc[j];
                }
                out->S[c * n + i] = s;
                r[i] = g - theta[c] * s;
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

/* ---------------------------------------------------------------- the reduced pencil */

/* Eigenvalues z (M) of the complex M x M matrix Phi (row-major) and unit right eigenvectors
 * (column k of Rv, row-major M x M), through the real embedding of Phi + i h I (see the top). */
static int pencil_poles(const cplx *Phi, size_t M, cplx *z, cplx *Rv)
{
    size_t M2 = 2 * M;
    double h = 1.0;
    for (size_t i = 0; i < M * M; i++)
        h += cabs(Phi[i]) * cabs(Phi[i]);
    h = sqrt(h - 1.0) + 1.0;
    int status = CS_ENOMEM;
    gsl_matrix *R = gsl_matrix_alloc(M2, M2);
    gsl_vector_complex *ev = gsl_vector_complex_alloc(M2);
    gsl_matrix_complex *V = gsl_matrix_complex_alloc(M2, M2);
    gsl_eigen_nonsymmv_workspace *w = gsl_eigen_nonsymmv_alloc(M2);
    if (!R || !ev || !V || !w)
        goto done;
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++) {
            cplx a = Phi[i * M + j] + (i == j ? I * h : 0);
            gsl_matrix_set(R, i, j, creal(a));
            gsl_matrix_set(R, i, j + M, -cimag(a));
            gsl_matrix_set(R, i + M, j, cimag(a));
            gsl_matrix_set(R, i + M, j + M, creal(a));
        }
    status = CS_ENOCONV;
    if (gsl_eigen_nonsymmv(R, ev, V, w) != GSL_SUCCESS)
        goto done;
    size_t cnt = 0;
    for (size_t c = 0; c < M2; c++) {
        cplx mu = from_gsl(gsl_vector_complex_get(ev, c));
        if (!(cimag(mu) > 0.0))
            continue;
        if (cnt == M)
            goto done;
        z[cnt] = mu - I * h;
        double nrm = 0.0;
        for (size_t i = 0; i < M; i++) {
            cplx w1 = from_gsl(gsl_matrix_complex_get(V, i, c));
            cplx w2 = from_gsl(gsl_matrix_complex_get(V, i + M, c));
            cplx x = 0.5 * (w1 + I * w2);
            Rv[i * M + cnt] = x;
            nrm += creal(x) * creal(x) + cimag(x) * cimag(x);
        }
        nrm = sqrt(nrm);
        if (!(nrm > 0.0))
            goto done;
        for (size_t i = 0; i < M; i++)
            Rv[i * M + cnt] /= nrm;
        cnt++;
    }
    status = cnt == M ? CS_OK : CS_ENOCONV;
done:
    gsl_matrix_free(R);
    gsl_vector_complex_free(ev);
    gsl_matrix_complex_free(V);
    if (w)
        gsl_eigen_nonsymmv_free(w);
    return status;
}

/* Inverse of the complex M x M matrix A (row-major) into Ainv. CS_EDATA when singular. */
static int complex_inverse(const cplx *A, size_t M, cplx *Ainv)
{
    int status = CS_ENOMEM, signum;
    gsl_matrix_complex *LU = gsl_matrix_complex_alloc(M, M);
    gsl_matrix_complex *inv = gsl_matrix_complex_alloc(M, M);
    gsl_permutation *perm = gsl_permutation_alloc(M);
    if (!LU || !inv || !perm)
        goto done;
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++)
            gsl_matrix_complex_set(LU, i, j, to_gsl(A[i * M + j]));
    status = CS_EDATA;
    if (gsl_linalg_complex_LU_decomp(LU, perm, &signum) != GSL_SUCCESS)
        goto done;
    for (size_t i = 0; i < M; i++)
        if (cabs(from_gsl(gsl_matrix_complex_get(LU, i, i))) == 0.0)
            goto done;
    if (gsl_linalg_complex_LU_invert(LU, perm, inv) != GSL_SUCCESS)
        goto done;
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++) {
            Ainv[i * M + j] = from_gsl(gsl_matrix_complex_get(inv, i, j));
            if (!isfinite(creal(Ainv[i * M + j])) || !isfinite(cimag(Ainv[i * M + j])))
                goto done;
        }
    status = CS_OK;
done:
    gsl_matrix_complex_free(LU);
    gsl_matrix_complex_free(inv);
    gsl_permutation_free(perm);
    return status;
}

/* 1-norm condition number of the M x M matrix A given its inverse. */
static double cond1(const cplx *A, const cplx *Ainv, size_t M)
{
    double na = 0.0, ni = 0.0;
    for (size_t j = 0; j < M; j++) {
        double sa = 0.0, si = 0.0;
        for (size_t i = 0; i < M; i++) {
            sa += cabs(A[i * M + j]);
            si += cabs(Ainv[i * M + j]);
        }
        na = fmax(na, sa);
        ni = fmax(ni, si);
    }
    return na * ni;
}

/* ---------------------------------------------------------------- amplitudes */

/* Least-squares amplitudes a (M) of y (N) on the Vandermonde columns Z[t][k] = z_k^t (given
 * row-major in Zc, N x M) and the pseudo-inverse Zp (M x N, row-major). *rss gets the residual
 * sum of squares. */
static int amplitudes(const cplx *Zc, const cplx *y, size_t N, size_t M, cplx *a, cplx *Zp,
                      double *rss)
{
    int status = CS_ENOMEM;
    gsl_matrix_complex *QR = gsl_matrix_complex_alloc(N, M);
    gsl_matrix_complex *B = gsl_matrix_complex_alloc(M, N);
    gsl_vector_complex *tau = gsl_vector_complex_alloc(M);
    gsl_vector_complex *b = gsl_vector_complex_alloc(N), *res = gsl_vector_complex_alloc(N);
    gsl_vector_complex *x = gsl_vector_complex_alloc(M), *e = gsl_vector_complex_alloc(N);
    if (!QR || !B || !tau || !b || !res || !x || !e)
        goto done;
    for (size_t t = 0; t < N; t++) {
        for (size_t k = 0; k < M; k++)
            gsl_matrix_complex_set(QR, t, k, to_gsl(Zc[t * M + k]));
        gsl_vector_complex_set(b, t, to_gsl(y[t]));
    }
    status = CS_EDATA;
    if (gsl_linalg_complex_QR_decomp(QR, tau) != GSL_SUCCESS)
        goto done;
    for (size_t k = 0; k < M; k++)
        if (cabs(from_gsl(gsl_matrix_complex_get(QR, k, k))) == 0.0)
            goto done;
    if (gsl_linalg_complex_QR_lssolve(QR, tau, b, x, res) != GSL_SUCCESS)
        goto done;
    double s = 0.0;
    for (size_t t = 0; t < N; t++) {
        cplx r = from_gsl(gsl_vector_complex_get(res, t));
        s += creal(r) * creal(r) + cimag(r) * cimag(r);
    }
    *rss = s;
    for (size_t k = 0; k < M; k++) {
        a[k] = from_gsl(gsl_vector_complex_get(x, k));
        if (!isfinite(creal(a[k])) || !isfinite(cimag(a[k])))
            goto done;
    }
    /* pinv(Z) = R^-1 Q1^H, Q1 the first M columns of Q */
    for (size_t k = 0; k < M; k++) {
        gsl_vector_complex_set_zero(e);
        gsl_vector_complex_set(e, k, to_gsl(1.0));
        if (gsl_linalg_complex_QR_Qvec(QR, tau, e) != GSL_SUCCESS)
            goto done;
        for (size_t t = 0; t < N; t++)
            gsl_matrix_complex_set(B, k, t, to_gsl(conj(from_gsl(gsl_vector_complex_get(e, t)))));
    }
    gsl_matrix_complex_const_view R = gsl_matrix_complex_const_submatrix(QR, 0, 0, M, M);
    if (gsl_blas_ztrsm(CblasLeft, CblasUpper, CblasNoTrans, CblasNonUnit, to_gsl(1.0),
                       &R.matrix, B) != GSL_SUCCESS)
        goto done;
    for (size_t k = 0; k < M; k++)
        for (size_t t = 0; t < N; t++)
            Zp[k * N + t] = from_gsl(gsl_matrix_complex_get(B, k, t));
    status = CS_OK;
done:
    gsl_matrix_complex_free(QR);
    gsl_matrix_complex_free(B);
    gsl_vector_complex_free(tau);
    gsl_vector_complex_free(b);
    gsl_vector_complex_free(res);
    gsl_vector_complex_free(x);
    gsl_vector_complex_free(e);
    return status;
}

/* Standard deviations of Re and Im of sum_t w[t] e_t for white noise e of variance s2 per real
 * component: complex circular noise (both s2 sum |w|^2) or real noise. */
static void noise_sd2(const cplx *w, size_t N, int is_complex, double s2, double *sd_re,
                      double *sd_im)
{
    double sr = 0.0, si = 0.0;
    for (size_t t = 0; t < N; t++) {
        sr += creal(w[t]) * creal(w[t]);
        si += cimag(w[t]) * cimag(w[t]);
    }
    if (is_complex)
        sr = si = sr + si;
    *sd_re = sqrt(s2 * sr);
    *sd_im = sqrt(s2 * si);
}

/* Whether a goes before b: larger amplitude first; amplitudes equal to 1e-9 (the two halves of
 * a real line, equal but for rounding) by higher frequency. */
static int comes_first(const cs_pencil_component *a, const cs_pencil_component *b)
{
    if (fabs(a->amplitude - b->amplitude) > 1e-9 * fmax(a->amplitude, b->amplitude))
        return a->amplitude > b->amplitude;
    return a->freq_hz > b->freq_hz;
}

/* Insertion sort (M <= CS_PENCIL_MAX_ORDER; stable, and safe with the tolerant comparison). */
static void sort_components(cs_pencil_component *c, size_t M)
{
    for (size_t i = 1; i < M; i++) {
        cs_pencil_component x = c[i];
        size_t j = i;
        while (j > 0 && comes_first(&x, &c[j - 1])) {
            c[j] = c[j - 1];
            j--;
        }
        c[j] = x;
    }
}

/* ---------------------------------------------------------------- the estimator */

static int check_parameters(const cs_pencil_parameters *p, cs_error *err)
{
    if (p->order > CS_PENCIL_MAX_ORDER)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: order %zu is larger than the largest supported, %d", p->order,
                            CS_PENCIL_MAX_ORDER);
    if (p->max_order < 1 || p->max_order > CS_PENCIL_MAX_ORDER)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: max_order %zu must be between 1 and %d", p->max_order,
                            CS_PENCIL_MAX_ORDER);
    if (p->order_rule != CS_PENCIL_ORDER_NOISE && p->order_rule != CS_PENCIL_ORDER_GAP)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "pencil: unknown order rule %d",
                            (int)p->order_rule);
    if (!(isfinite(p->noise_threshold) && p->noise_threshold > 1.0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: noise_threshold %g must be finite and > 1",
                            p->noise_threshold);
    if (!(p->rel_threshold >= 1e-7 && p->rel_threshold < 1.0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: rel_threshold %g must be in [1e-7, 1)", p->rel_threshold);
    if (!(p->pencil_fraction >= 0.1 && p->pencil_fraction <= 0.9))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: pencil_fraction %g must be in [0.1, 0.9]", p->pencil_fraction);
    if (p->max_samples < 16)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: max_samples %zu must be at least 16", p->max_samples);
    if (p->reduce != CS_PENCIL_REDUCE_AVERAGE && p->reduce != CS_PENCIL_REDUCE_TRUNCATE)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "pencil: unknown reduction %d",
                            (int)p->reduce);
    if (!(isfinite(p->noise_sd) && p->noise_sd >= 0.0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: noise_sd %g must be finite and >= 0", p->noise_sd);
    return CS_OK;
}

/* Everything allocated by one estimate, freed together. */
typedef struct work {
    cplx *y, *Zc, *Zp, *Qr, *c, *vec, *tmp, *small;
    ritz rz;
    hankel h;
} work;

static void work_release(work *w)
{
    free(w->y);
    free(w->Zc);
    free(w->Zp);
    free(w->Qr);
    free(w->c);
    free(w->vec);
    free(w->tmp);
    free(w->small);
    free(w->rz.theta);
    free(w->rz.S);
    hankel_release(&w->h);
}

/* First-order errors of every component (see the top of the file, item 4); comp[k] has the
 * values already. s2 is the noise variance per real component of the samples analysed. */
static int propagate(work *w, size_t M, const cplx *z, const cplx *Rv, const cplx *Pv,
                     const cplx *Ainv, const cplx *a, double s2, int is_complex, size_t D,
                     double dt1, cs_pencil_component *comp)
{
    hankel *h = &w->h;
    size_t N = h->N, n = h->n, m = h->m;
    const cplx *S = w->rz.S;
    w->Qr = malloc(m * M * sizeof *w->Qr);
    w->c = malloc(N * M * sizeof *w->c);
    w->vec = malloc((n + m + N) * sizeof *w->vec);
    if (!w->Qr || !w->c || !w->vec)
        return CS_ENOMEM;
    cplx *hk = w->vec, *g = hk + n, *coef = g + m;
    double sig[CS_PENCIL_MAX_ORDER];
    for (size_t l = 0; l < M; l++) {
        sig[l] = sqrt(w->rz.theta[l]);
        hankel_xh(h, S + l * n, w->Qr + l * m, w->tmp);
        for (size_t i = 0; i < m; i++)
            w->Qr[l * m + i] /= sig[l];
    }
    for (size_t k = 0; k < M; k++) {
        /* g = Q Sigma^-1 r_k */
        for (size_t i = 0; i < m; i++) {
            cplx s = 0;
            for (size_t l = 0; l < M; l++)
                s += w->Qr[l * m + i] * Rv[l * M + k] / sig[l];
            g[i] = s;
        }
        /* pi = A^-T p_k; q = conj(S1) pi; h = (J2 - z J1)^T q */
        cplx pi[CS_PENCIL_MAX_ORDER];
        for (size_t l = 0; l < M; l++) {
            cplx s = 0;
            for (size_t j = 0; j < M; j++)
                s += Pv[k * M + j] * Ainv[j * M + l];
            pi[l] = s;
        }
        for (size_t j = 0; j < n; j++)
            hk[j] = 0;
        for (size_t j = 0; j + 1 < n; j++) {
            cplx q = 0;
            for (size_t l = 0; l < M; l++)
                q += pi[l] * conj(S[l * n + j]);
            hk[j + 1] += q;
            hk[j] -= z[k] * q;
        }
        /* u = P_perp^T h is h itself: h^T S = pi^T (B - z_k A) = p_k^T (Phi - z_k I) = 0
           (normal equations, left eigenvector) */
        hankel_conv(h, hk, g, w->c + k * N, w->tmp);
    }
    for (size_t k = 0; k < M; k++) {
        /* pole: d ln z = sum_t (c_k[t] / z_k) e_t */
        for (size_t t = 0; t < N; t++)
            coef[t] = w->c[k * N + t] / z[k];
        double sd_re, sd_im;
        noise_sd2(coef, N, is_complex, s2, &sd_re, &sd_im);
        comp[k].gamma_per_s_err = sd_re / dt1;
        comp[k].freq_hz_err = sd_im / (2.0 * PI * dt1);
        comp[k].fwhm_hz_err = comp[k].gamma_per_s_err / (2.0 * PI);
        /* amplitude: pinv(Z) (e - sum_l a_l dZ/dz_l dz_l), then the decimation correction */
        cplx bl[CS_PENCIL_MAX_ORDER]; /* (pinv(Z) dZ/dz_l)[k] for each l */
        for (size_t l = 0; l < M; l++) {
            cplx s = 0; /* dZ[t][l]/dz_l = t z_l^(t-1) = t Z[t][l] / z_l */
            for (size_t t = 1; t < N; t++)
                s += w->Zp[k * N + t] * (double)t * w->Zc[t * M + l];
            bl[l] = s / z[l];
        }
        for (size_t t = 0; t < N; t++) {
            cplx s = w->Zp[k * N + t];
            for (size_t l = 0; l < M; l++)
                s -= a[l] * bl[l] * w->c[l * N + t];
            coef[t] = s;
        }
        cplx zeta = cexp(clog(z[k]) / (double)D), SD = 0, SDp = 0, pw = 1;
        for (size_t i = 0; i < D; i++) {
            if (i > 0)
                SDp += (double)i * pw;
            if (i > 0)
                pw *= zeta;
            SD += pw;
        }
        SD /= (double)D;
        SDp /= (double)D;
        cplx afull = a[k] / SD;
        cplx dzeta = zeta / ((double)D * z[k]);
        cplx rot = cexp(-I * carg(afull));
        for (size_t t = 0; t < N; t++)
            coef[t] = rot * (coef[t] / SD - a[k] * SDp / (SD * SD) * dzeta * w->c[k * N + t]);
        noise_sd2(coef, N, is_complex, s2, &sd_re, &sd_im);
        comp[k].amplitude_err = sd_re;
        comp[k].phase_rad_err = sd_im / cabs(afull);
    }
    return CS_OK;
}

int cs_pencil_estimate(const double *samples, size_t n, int is_complex, double dt_s,
                       const cs_pencil_parameters *p, cs_pencil_result *out, cs_error *err)
{
    if (!out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "pencil: no result to fill");
    cs_pencil_result_release(out);
    gsl_set_error_handler_off();
    cs_pencil_parameters def = cs_pencil_default_parameters();
    if (!p)
        p = &def;
    if (!samples)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "pencil: no samples");
    if (!(isfinite(dt_s) && dt_s > 0.0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: sampling interval %g s must be finite and > 0", dt_s);
    int status = check_parameters(p, err);
    if (status != CS_OK)
        return status;
    is_complex = is_complex != 0;
    size_t nv = is_complex ? 2 * n : n;
    for (size_t i = 0; i < nv; i++)
        if (!isfinite(samples[i]))
            return cs_error_set(err, CS_EDATA, NULL, -1, -1, "pencil: sample %zu is not finite",
                                is_complex ? i / 2 : i);

    /* reduction */
    size_t D = 1, N = n;
    if (n > p->max_samples) {
        if (p->reduce == CS_PENCIL_REDUCE_AVERAGE) {
            D = n / (p->max_samples + 1) + 1; /* the smallest D with n / D <= max_samples */
            N = n / D;
        } else {
            N = p->max_samples;
        }
    }
    if (N < CS_PENCIL_MIN_SAMPLES)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "pencil: too few samples: %zu, need at least %d", N,
                            CS_PENCIL_MIN_SAMPLES);
    if (p->order && N < 2 * p->order + 2)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "pencil: order %zu needs at least %zu samples, the record has %zu",
                            p->order, 2 * p->order + 2, N);
    /* automatic order: leave at least as many singular values for the noise floor as are
       computed, so with L ~ N/3 at most N/6 components */
    size_t mcap = p->order;
    if (!mcap) {
        mcap = N / 6 > 1 ? N / 6 : 1;
        if (mcap > p->max_order)
            mcap = p->max_order;
    }
    double Lf = floor(p->pencil_fraction * (double)N + 0.5);
    size_t L = (size_t)Lf;
    if (L < mcap + 1)
        L = mcap + 1;
    if (L > N - mcap - 1)
        L = N - mcap - 1;

    work w;
    memset(&w, 0, sizeof w);
    w.y = malloc(N * sizeof *w.y);
    if (!w.y) {
        status = CS_ENOMEM;
        goto fail;
    }
    double any = 0.0;
    for (size_t j = 0; j < N; j++) {
        cplx s = 0;
        for (size_t i = j * D; i < (j + 1) * D; i++)
            s += is_complex ? samples[2 * i] + I * samples[2 * i + 1] : samples[i];
        w.y[j] = s / (double)D;
        any = fmax(any, cabs(w.y[j]));
    }
    if (!(any > 0.0)) {
        status = cs_error_set(err, CS_EDATA, NULL, -1, -1, "pencil: the record is all zero");
        goto fail;
    }
    status = hankel_init(&w.h, w.y, N, L);
    if (status != CS_OK)
        goto fail;
    size_t nc = L + 1, nr = N - L;
    w.tmp = malloc((w.h.P + nc + nr) * sizeof *w.tmp);
    if (!w.tmp) {
        status = CS_ENOMEM;
        goto fail;
    }

    /* leading singular values and vectors */
    order_ctl oc;
    oc.fixed = p->order;
    oc.mcap = mcap;
    oc.rule = p->order_rule;
    oc.noise_threshold = p->noise_threshold;
    oc.rel_threshold = p->rel_threshold;
    oc.trace = 0.0;
    for (size_t t = 0; t < N; t++) {
        size_t wt = t + 1;
        if (nc < wt)
            wt = nc;
        if (nr < wt)
            wt = nr;
        if (N - t < wt)
            wt = N - t;
        oc.trace += (double)wt * (creal(w.y[t]) * creal(w.y[t]) + cimag(w.y[t]) * cimag(w.y[t]));
    }
    size_t K = mcap + 1;
    status = subspace(&w.h, K, &oc, &w.rz);
    if (status != CS_OK)
        goto fail;
    out->singular = malloc(K * sizeof *out->singular);
    if (!out->singular) {
        status = CS_ENOMEM;
        goto fail;
    }
    out->nsingular = K;
    for (size_t i = 0; i < K; i++)
        out->singular[i] = sqrt(fmax(w.rz.theta[i], 0.0));
    out->noise_floor = w.rz.floor;
    out->n_input = n;
    out->n_used = N;
    out->decimation = D;
    out->pencil_param = L;
    out->dt_s = dt_s;
    out->is_complex = is_complex;
    out->subspace_dim = w.rz.dim;
    out->subspace_residual = w.rz.worst;
    size_t M = w.rz.M;
    if (M == 0) {
        status = cs_error_set(err, CS_EDATA, NULL, -1, -1,
                              "pencil: no singular value above the noise threshold (largest %g, "
                              "noise floor %g)", out->singular[0], out->noise_floor);
        work_release(&w);
        return status;
    }

    /* the pencil: Phi = (S1^H S1)^-1 S1^H S2 */
    const cplx *S = w.rz.S;
    w.small = malloc(6 * M * M * sizeof *w.small);
    if (!w.small) {
        status = CS_ENOMEM;
        goto fail;
    }
    cplx *A = w.small, *B = A + M * M, *Ainv = B + M * M, *Phi = Ainv + M * M;
    cplx *Rv = Phi + M * M, *Pv = Rv + M * M;
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++) {
            cplx sa = 0, sb = 0;
            for (size_t r = 0; r + 1 < nc; r++) {
                cplx c1 = conj(S[i * nc + r]);
                sa += c1 * S[j * nc + r];
                sb += c1 * S[j * nc + r + 1];
            }
            A[i * M + j] = sa;
            B[i * M + j] = sb;
        }
    status = complex_inverse(A, M, Ainv);
    if (status != CS_OK) {
        status = cs_error_set(err, status == CS_ENOMEM ? CS_ENOMEM : CS_EDATA, NULL, -1, -1,
                              "pencil: the shifted signal subspace is singular");
        goto fail;
    }
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++) {
            cplx s = 0;
            for (size_t l = 0; l < M; l++)
                s += Ainv[i * M + l] * B[l * M + j];
            Phi[i * M + j] = s;
        }
    cplx z[CS_PENCIL_MAX_ORDER];
    status = pencil_poles(Phi, M, z, Rv);
    if (status != CS_OK) {
        status = cs_error_set(err, status, NULL, -1, -1,
                              "pencil: the eigenvalues of the reduced pencil were not found");
        goto fail;
    }

    /* amplitudes on the Vandermonde basis */
    w.Zc = malloc(N * M * sizeof *w.Zc);
    w.Zp = malloc(N * M * sizeof *w.Zp);
    if (!w.Zc || !w.Zp) {
        status = CS_ENOMEM;
        goto fail;
    }
    for (size_t k = 0; k < M; k++) {
        cplx lz = clog(z[k]);
        for (size_t t = 0; t < N; t++) {
            cplx v = cexp((double)t * lz);
            if (!isfinite(creal(v)) || !isfinite(cimag(v))) {
                status = cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                      "pencil: a component grows too fast to be modelled "
                                      "(|z| = %g)", cabs(z[k]));
                goto fail;
            }
            w.Zc[t * M + k] = v;
        }
    }
    cplx a[CS_PENCIL_MAX_ORDER];
    double rss = 0.0;
    status = amplitudes(w.Zc, w.y, N, M, a, w.Zp, &rss);
    if (status != CS_OK) {
        status = cs_error_set(err, status, NULL, -1, -1,
                              "pencil: the amplitudes could not be solved for (coincident poles)");
        goto fail;
    }

    /* results */
    out->comp = malloc(M * sizeof *out->comp);
    if (!out->comp) {
        status = CS_ENOMEM;
        goto fail;
    }
    out->order = M;
    double dt1 = dt_s * (double)D;
    for (size_t k = 0; k < M; k++) {
        cs_pencil_component *c = &out->comp[k];
        cplx lz = clog(z[k]);
        c->gamma_per_s = -creal(lz) / dt1;
        c->freq_hz = cimag(lz) / (2.0 * PI * dt1);
        c->fwhm_hz = c->gamma_per_s / (2.0 * PI);
        cplx zeta = cexp(lz / (double)D), SD = 0, pw = 1;
        for (size_t i = 0; i < D; i++) {
            if (i > 0)
                pw *= zeta;
            SD += pw;
        }
        SD /= (double)D;
        cplx af = a[k] / SD;
        c->amplitude = cabs(af);
        c->phase_rad = carg(af);
        c->pole_re = creal(zeta);
        c->pole_im = cimag(zeta);
        c->freq_hz_err = c->gamma_per_s_err = c->fwhm_hz_err = NAN;
        c->amplitude_err = c->phase_rad_err = NAN;
    }
    out->rms_residual = sqrt(rss / (double)N);
    double dof = is_complex ? 2.0 * (double)N - 4.0 * (double)M : (double)N - 2.0 * (double)M;
    double s2;
    if (p->noise_sd > 0.0) {
        s2 = p->noise_sd * p->noise_sd / (double)D;
        out->noise_sd_estimated = 0;
    } else {
        s2 = dof > 0.0 ? rss / dof : NAN;
        out->noise_sd_estimated = 1;
    }
    out->noise_sd = sqrt(s2 * (double)D);
    out->error_status = CS_OK;
    int perr = complex_inverse(Rv, M, Pv);
    if (perr == CS_ENOMEM) {
        status = CS_ENOMEM;
        goto fail;
    }
    int weak = 0; /* a singular value used that is not positive (rounding-level subspace) */
    for (size_t l = 0; l < M; l++)
        weak |= !(w.rz.theta[l] > 0.0);
    if (perr != CS_OK || weak || cond1(Rv, Pv, M) > 1e12 || !isfinite(s2)) {
        out->error_status = CS_EDATA;
    } else {
        status = propagate(&w, M, z, Rv, Pv, Ainv, a, s2, is_complex, D, dt1, out->comp);
        if (status != CS_OK)
            goto fail;
    }
    sort_components(out->comp, M);
    status = w.rz.converged ? CS_OK : CS_ENOCONV;
    if (status != CS_OK)
        cs_error_set(err, status, NULL, -1, -1,
                     "pencil: the singular vectors did not converge (relative residual %g)",
                     w.rz.worst);
    work_release(&w);
    return status;
fail:
    if (status == CS_ENOMEM)
        cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "pencil: out of memory");
    work_release(&w);
    cs_pencil_result_release(out);
    return status;
}

int cs_pencil_eval(const cs_pencil_result *r, size_t n, int is_complex, double *out)
{
    if (!r || (!out && n > 0))
        return CS_EINVAL;
    for (size_t t = 0; t < n; t++) {
        cplx s = 0;
        for (size_t k = 0; k < r->order; k++) {
            const cs_pencil_component *c = &r->comp[k];
            double tt = (double)t * r->dt_s;
            s += c->amplitude * cexp(I * c->phase_rad)
                 * cexp((-c->gamma_per_s + 2.0 * PI * I * c->freq_hz) * tt);
        }
        if (is_complex) {
            out[2 * t] = creal(s);
            out[2 * t + 1] = cimag(s);
        } else {
            out[t] = creal(s);
        }
    }
    return CS_OK;
}
