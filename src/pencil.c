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
 *    never formed: X v and X^H w are correlations of the record with v, done by FFT (FFTW,
 *    length P >= N with factors 2, 3, 5, 7, plans from the gate workspace's cache; P >= N is
 *    enough because the wanted outputs never wrap around). A product costs O(N log N), the
 *    iteration O(N k (log N + k)) for a basis of k vectors, and the memory is O(N k). Measured
 *    here (complex records, the default max_order 8 and a fixed order 1; with GSL's mixed-radix
 *    FFT, which the FFTW transforms replaced): N = 1000 in 9-17 ms and 2.4 ms, N = 4000 in
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
 * to the first sample.
 *
 * Files: this one drives the estimate and propagates the errors; pencil_subspace.c does the
 * Hankel products and the block Krylov iteration (item 1), pencil_linalg.c the reduced pencil
 * and the amplitudes (items 2 and 3). */
#include <collshift/pencil.h>

#include "pencil_impl.h"

#include <gsl/gsl_errno.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

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

/* ---------------------------------------------------------------- errors and order of results */

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
    cplx *y, *Zc, *Zp, *Qr, *c, *vec, *small;
    ritz rz;
    hankel h;
    cs_gate_workspace *own_ws;   /* made for this call when the caller gave none */
} work;

static void work_release(work *w)
{
    free(w->y);
    free(w->Zc);
    free(w->Zp);
    free(w->Qr);
    free(w->c);
    free(w->vec);
    free(w->small);
    free(w->rz.theta);
    free(w->rz.S);
    pencil_hankel_release(&w->h);
    cs_gate_free(w->own_ws);
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
        pencil_hankel_xh(h, S + l * n, w->Qr + l * m);
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
        pencil_hankel_conv(h, hk, g, w->c + k * N);
    }
    for (size_t k = 0; k < M; k++) {
        /* pole: d ln z = sum_t (c_k[t] / z_k) e_t */
        for (size_t t = 0; t < N; t++)
            coef[t] = w->c[k * N + t] / z[k];
        double sd_re, sd_im;
        noise_sd2(coef, N, is_complex, s2, &sd_re, &sd_im);
        comp[k].gamma_per_s_err = 2.0 * sd_re / dt1;   /* intensity rate = 2 x amplitude rate */
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
    return cs_pencil_estimate_ws(NULL, samples, n, is_complex, dt_s, p, out, err);
}

int cs_pencil_estimate_ws(cs_gate_workspace *ws, const double *samples, size_t n,
                          int is_complex, double dt_s, const cs_pencil_parameters *p,
                          cs_pencil_result *out, cs_error *err)
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
    if (!ws) {
        ws = w.own_ws = cs_gate_alloc();
        if (!ws) {
            status = CS_ENOMEM;
            goto fail;
        }
    }
    status = pencil_hankel_init(&w.h, ws, w.y, N, L, err);
    if (status != CS_OK)
        goto fail;
    size_t nc = L + 1, nr = N - L;

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
    status = pencil_subspace(&w.h, K, &oc, &w.rz);
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
    status = pencil_complex_inverse(A, M, Ainv);
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
    status = pencil_amplitudes(w.Zc, w.y, N, M, a, w.Zp, &rss);
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
        c->gamma_per_s = -2.0 * creal(lz) / dt1;   /* |z| = exp(-Gamma dt / 2): Gamma is the intensity rate */
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
    int perr = pencil_complex_inverse(Rv, M, Pv);
    if (perr == CS_ENOMEM) {
        status = CS_ENOMEM;
        goto fail;
    }
    int weak = 0; /* a singular value used that is not positive (rounding-level subspace) */
    for (size_t l = 0; l < M; l++)
        weak |= !(w.rz.theta[l] > 0.0);
    if (perr != CS_OK || weak || pencil_cond1(Rv, Pv, M) > 1e12 || !isfinite(s2)) {
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
                 * cexp((-0.5 * c->gamma_per_s + 2.0 * PI * I * c->freq_hz) * tt);
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
