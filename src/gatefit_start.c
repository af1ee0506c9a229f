/* Starting values of the gate-aware fit: bursts from the gate's intensity, decays from the matrix
 * pencil, amplitudes by linear least squares.
 *
 * Everything here works on a complex version z of the gate: the samples themselves for a complex
 * record, the analytic signal (cs_envelope_analytic) for a real one, whose complex amplitude of
 * A cos(2 pi f s + phi) env(s) is A exp(i phi) env(s) for f inside the band, as in the model.
 *
 * Bursts, one at a time on what the earlier ones leave (r = z - bursts found so far):
 *   - the intensity |r|^2, smoothed (cs_envelope_smooth, sigma = max(2, m/1000) samples);
 *   - the peak: its maximum, refined by a parabola through the three samples around it;
 *   - the floor: the 10th percentile of the smoothed intensity (the gate may be mostly burst);
 *   - the half-maximum crossings (linear interpolation): FWHM of the intensity, minus the
 *     smoothing in quadrature (2.3548 sigma), and tau = FWHM / (2 ln(1 + sqrt 2)) since
 *     sech^2(u) = 1/2 at cosh u = sqrt 2, u = ln(1 + sqrt 2);
 *   - the frequency: the pulse-pair (lag-one autocorrelation) estimator over the half-maximum
 *     span, f = arg(sum r_{j+1} conj(r_j)) / (2 pi dt), i.e. the intensity-weighted mean
 *     instantaneous frequency (common practice in Doppler radar);
 *   - its complex amplitude by projection, then subtracted.
 * This assumes that each burst dominates the intensity where it is; user starting values
 * (cs_gatefit_options.start) take over when it does not.
 *
 * Decays: the total-least-squares matrix pencil (cs_pencil_estimate, order = number of decays)
 * of what the bursts leave, over the whole gate and, when there are bursts and at least
 * max(32, 8 x decays) samples remain there, from 6 tau after the last burst's peak; of the two
 * candidates the one whose starting model (amplitudes solved) leaves the smaller residual sum
 * of squares wins. (After the burst alone fails when the decay is mostly spent by then: its
 * pencil then fits noise; the whole gate alone suffers from what an imperfect burst start
 * leaves.) The pencil sees at most 2048 samples (the first ones, CS_PENCIL_REDUCE_TRUNCATE:
 * block averaging would alias lines outside the reduced band, and the start of a decay holds
 * most of its signal; its cost grows faster than the length, and 2048 samples resolve lines
 * 1/(2048 dt) apart). The pencil's decay rate is the intensity rate Gamma (kept >= 0.02 /
 * gate length). The pencil's components come by decreasing amplitude and are given to the
 * decays in the order of the model. If the pencil fails, the largest peaks of the periodogram
 * of that stretch (zero-padded 4 times, peaks at least 4 resolution widths apart) give the
 * frequencies and Gamma = 2 / (stretch length). When the user's starting values give the
 * frequency and the rate of every decay (the split pipeline passes its own pencil's), no pencil
 * is run: its values would be overridden anyway.
 *
 * Amplitudes: with every nonlinear parameter set, the model is linear in the real and
 * imaginary parts of the complex amplitudes; they are the linear least-squares solution
 * (gsl_multifit_linear_tsvd, SVD) over the samples with window > 0 where the model is not
 * negligible (cs_gatefit_impl_active: the other samples add nothing to the normal equations).
 * One component of a complex record needs no SVD: its two columns (Re E, Im E) and (-Im E, Re E)
 * are orthogonal with equal norms, so c = sum conj(E) x / sum |E|^2. */
#include "gatefit_impl.h"

#include <collshift/pencil.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_multifit.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PI_ 3.14159265358979323846
#define LN1SQRT2 0.88137358701954302   /* ln(1 + sqrt 2) = arccosh(sqrt 2) */
#define GF_PENCIL_MAX 2048             /* samples given to the matrix pencil at most */

/* sech(u) without overflow. */
static double sech_(double u)
{
    double e = exp(-fabs(u));
    return 2.0 * e / (1.0 + e * e);
}

double complex cs_gatefit_impl_basis(cs_gatefit_kind kind, double f, double rate, double tp, double s)
{
    double ph = 2.0 * PI_ * f * s;
    double env = kind == CS_GATEFIT_DECAY ? exp(-0.5 * rate * s) : sech_((s - tp) / rate);
    return env * cos(ph) + I * (env * sin(ph));
}

void cs_gatefit_impl_basis_init(gf_basis_it *it, cs_gatefit_kind kind, double f, double rate, double tp,
                                double dt)
{
    memset(it, 0, sizeof *it);
    it->kind = kind;
    it->f = f;
    it->rate = rate;
    it->tp = tp;
    it->dt = dt;
    double a = 2.0 * PI_ * f * dt;
    it->w = cos(a) + I * sin(a);
    if (kind == CS_GATEFIT_DECAY) {
        double g = exp(-0.5 * rate * dt);
        it->q = g * cos(a) + I * (g * sin(a));
    } else {
        it->dz = dt / rate;
        it->up = exp(it->dz);
        it->down = exp(-it->dz);
    }
}

void cs_gatefit_impl_basis_anchor(gf_basis_it *it, size_t j)
{
    double s = (double)j * it->dt, ph = 2.0 * PI_ * it->f * s;
    double c = cos(ph), sn = sin(ph);
    if (it->kind == CS_GATEFIT_DECAY) {
        double env = exp(-0.5 * it->rate * s);
        it->E = env * c + I * (env * sn);
    } else {
        it->z = (s - it->tp) / it->rate;
        it->e = exp(-fabs(it->z));
        it->ph = c + I * sn;
        double env = 2.0 * it->e / (1.0 + it->e * it->e);
        it->E = env * c + I * (env * sn);
    }
    it->j = j;
    it->left = GF_ANCHOR - 1;
    it->started = 1;
}

size_t cs_gatefit_impl_active(const gf_problem *P, const gf_theta *th, double margin)
{
    if (P->nused == 0)
        return 0;
    double s_cut = 0.0;
    for (size_t k = 0; k < P->ncomp; k++) {
        double s = P->kind[k] == CS_GATEFIT_DECAY
                       ? 2.0 * GF_NEGLIGIBLE / (th->rate[k] * margin)   /* e^{-Gamma s / 2} */
                       : th->tp[k] + (GF_NEGLIGIBLE + 1.0) * th->rate[k] / margin; /* sech z < 2 e^-|z| */
        if (!(s < INFINITY))
            return P->nused;
        s_cut = fmax(s_cut, s);
    }
    double jc = s_cut / P->dt;
    if (!(jc < (double)P->idx[P->nused - 1]))
        return P->nused;
    /* the first used sample after jc, at least a few dozen samples */
    size_t lo = 0, hi = P->nused;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if ((double)P->idx[mid] <= jc)
            lo = mid + 1;
        else
            hi = mid;
    }
    size_t need = 64 + 8 * CS_GATEFIT_MAX_COMP * CS_GATEFIT_BURST_NPARAMS;
    return lo > need ? lo : need < P->nused ? need : P->nused;
}

int cs_gatefit_impl_amplitudes(const gf_problem *P, gf_theta *th, cs_error *err)
{
    /* the samples where the model is not negligible: the others do not change the solution */
    const size_t na = cs_gatefit_impl_active(P, th, 1.0);
    const size_t K = P->ncomp, nc = 2 * K, rows = P->cplx ? 2 * na : na;
    if (P->cplx && K == 1) {
        /* one complex amplitude: c = sum conj(E) x / sum |E|^2, the least-squares solution
           (the design matrix's two real columns are orthogonal and of equal norm) */
        gf_basis_it it;
        cs_gatefit_impl_basis_init(&it, P->kind[0], th->f[0], th->rate[0], th->tp[0], P->dt);
        double nr = 0.0, ni = 0.0, den = 0.0;
        int finite = 1;
        for (size_t i = 0; i < na; i++) {
            size_t j = P->idx[i];
            double complex E = gf_basis_next(&it, j, NULL);
            double er = creal(E), ei = cimag(E), xr = P->x[2 * j], xi = P->x[2 * j + 1];
            finite &= isfinite(er) && isfinite(ei);
            nr += er * xr + ei * xi;
            ni += er * xi - ei * xr;
            den += er * er + ei * ei;
        }
        if (!finite)
            return cs_error_set(err, CS_EDATA, NULL, -1, -1, "starting model is not finite");
        th->c[0] = den > 0 ? nr / den + I * (ni / den) : 0.0;
        if (!isfinite(creal(th->c[0])) || !isfinite(cimag(th->c[0])))
            th->c[0] = 0.0;
        return CS_OK;
    }
    gsl_matrix *X = gsl_matrix_alloc(rows, nc);
    gsl_vector *y = gsl_vector_alloc(rows), *c = gsl_vector_alloc(nc);
    gsl_matrix *cov = gsl_matrix_alloc(nc, nc);
    gsl_multifit_linear_workspace *lw = gsl_multifit_linear_alloc(rows, nc);
    int rc = CS_OK;
    if (!X || !y || !c || !cov || !lw) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the starting amplitudes");
        goto done;
    }
    gf_basis_it it[CS_GATEFIT_MAX_COMP];
    for (size_t k = 0; k < K; k++)
        cs_gatefit_impl_basis_init(&it[k], P->kind[k], th->f[k], th->rate[k], th->tp[k], P->dt);
    for (size_t i = 0; i < na; i++) {
        size_t j = P->idx[i];
        for (size_t k = 0; k < K; k++) {
            double complex E = gf_basis_next(&it[k], j, NULL);
            if (!isfinite(creal(E)) || !isfinite(cimag(E))) {
                rc = cs_error_set(err, CS_EDATA, NULL, -1, -1, "starting model is not finite");
                goto done;
            }
            if (P->cplx) {
                /* c E = (cr + i ci)(Er + i Ei): re = cr Er - ci Ei, im = cr Ei + ci Er */
                gsl_matrix_set(X, 2 * i, 2 * k, creal(E));
                gsl_matrix_set(X, 2 * i, 2 * k + 1, -cimag(E));
                gsl_matrix_set(X, 2 * i + 1, 2 * k, cimag(E));
                gsl_matrix_set(X, 2 * i + 1, 2 * k + 1, creal(E));
            } else {
                gsl_matrix_set(X, i, 2 * k, creal(E));
                gsl_matrix_set(X, i, 2 * k + 1, -cimag(E));
            }
        }
        if (P->cplx) {
            gsl_vector_set(y, 2 * i, P->x[2 * j]);
            gsl_vector_set(y, 2 * i + 1, P->x[2 * j + 1]);
        } else {
            gsl_vector_set(y, i, P->x[j]);
        }
    }
    double chisq;
    size_t rank;
    if (gsl_multifit_linear_tsvd(X, y, 1e-12, c, cov, &chisq, &rank, lw) != GSL_SUCCESS) {
        rc = cs_error_set(err, CS_EDATA, NULL, -1, -1, "starting amplitudes: least squares failed");
        goto done;
    }
    for (size_t k = 0; k < K; k++) {
        double cr = gsl_vector_get(c, 2 * k), ci = gsl_vector_get(c, 2 * k + 1);
        th->c[k] = cr + I * ci;
        if (!isfinite(cr) || !isfinite(ci))
            th->c[k] = 0.0;
    }
done:
    gsl_multifit_linear_free(lw);
    gsl_matrix_free(cov);
    gsl_vector_free(c);
    gsl_vector_free(y);
    gsl_matrix_free(X);
    return rc;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* One burst on the residual r (m complex, interleaved): tau, peak time (from the gate start) and
 * frequency; then its amplitude is projected out of r. scratch: 3 m doubles. */
static int burst_start(double *r, size_t m, double dt, double *scratch, double *f, double *tau,
                       double *tp)
{
    double *I_ = scratch, *Is = scratch + m, *srt = scratch + 2 * m;
    for (size_t j = 0; j < m; j++)
        I_[j] = r[2 * j] * r[2 * j] + r[2 * j + 1] * r[2 * j + 1];
    double sig = fmax(2.0, (double)m / 1000.0);
    double real_sig = cs_envelope_smooth(I_, m, sig, Is);
    if (real_sig < 0)
        return CS_ENOMEM;
    size_t p = 0;
    for (size_t j = 1; j < m; j++)
        if (Is[j] > Is[p])
            p = j;
    memcpy(srt, Is, m * sizeof *srt);
    qsort(srt, m, sizeof *srt, cmp_double);
    double floor_ = srt[m / 10];
    double half = floor_ + 0.5 * (Is[p] - floor_);
    double xl = 0.0, xr = (double)(m - 1);
    for (size_t j = p; j > 0; j--)
        if (Is[j - 1] < half) {
            xl = (double)(j - 1) + (half - Is[j - 1]) / (Is[j] - Is[j - 1]);
            break;
        }
    for (size_t j = p; j + 1 < m; j++)
        if (Is[j + 1] < half) {
            xr = (double)j + (Is[j] - half) / (Is[j] - Is[j + 1]);
            break;
        }
    double smear = 2.3548200450309493 * real_sig;   /* FWHM of the smoothing, samples */
    double fw = (xr - xl) * (xr - xl) - smear * smear;
    fw = sqrt(fmax(fw, 1.0)) * dt;
    *tau = fw / (2.0 * LN1SQRT2);
    double d = 0.0;
    if (p > 0 && p + 1 < m) {
        double den = Is[p - 1] - 2.0 * Is[p] + Is[p + 1];
        if (den < 0)
            d = fmax(-1.0, fmin(1.0, 0.5 * (Is[p - 1] - Is[p + 1]) / den));
    }
    *tp = ((double)p + d) * dt;
    size_t j0 = (size_t)floor(xl), j1 = (size_t)ceil(xr);
    if (j0 > 2 && j1 - j0 < 4)
        j0 -= 2;
    if (j1 + 2 < m && j1 - j0 < 4)
        j1 += 2;
    if (j1 >= m)
        j1 = m - 1;
    double complex R = 0.0;
    for (size_t j = j0; j < j1; j++) {
        double complex a = r[2 * j] + I * r[2 * j + 1], b = r[2 * j + 2] + I * r[2 * j + 3];
        R += b * conj(a);
    }
    *f = cabs(R) > 0 ? carg(R) / (2.0 * PI_ * dt) : 0.0;
    /* project out */
    double complex num = 0.0;
    double den = 0.0;
    gf_basis_it it;
    cs_gatefit_impl_basis_init(&it, CS_GATEFIT_BURST, *f, *tau, *tp, dt);
    for (size_t j = 0; j < m; j++) {
        double complex E = gf_basis_next(&it, j, NULL);
        num += conj(E) * (r[2 * j] + I * r[2 * j + 1]);
        den += creal(E) * creal(E) + cimag(E) * cimag(E);
    }
    double complex c = den > 0 ? num / den : 0.0;
    cs_gatefit_impl_basis_init(&it, CS_GATEFIT_BURST, *f, *tau, *tp, dt);
    for (size_t j = 0; j < m; j++) {
        double complex v = c * gf_basis_next(&it, j, NULL);
        r[2 * j] -= creal(v);
        r[2 * j + 1] -= cimag(v);
    }
    return CS_OK;
}

/* The nd largest peaks of the periodogram of z (L complex samples), zero-padded 4 times. */
static int periodogram_peaks(cs_gate_workspace *ws, const double *z, size_t L, double dt, size_t nd,
                             double *f, cs_error *err)
{
    size_t N = cs_gate_fast_size(4 * L);
    if (N == 0)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "gate too long for a transform");
    double *buf = calloc(4 * N, sizeof *buf);
    if (!buf)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a periodogram");
    double *out = buf + 2 * N;
    memcpy(buf, z, 2 * L * sizeof *buf);
    int rc = cs_gate_fft(ws, CS_GATE_FFT_FORWARD, N, buf, out, err);
    if (rc == CS_OK) {
        double *P = buf;   /* reuse the input half for the powers */
        for (size_t k = 0; k < N; k++)
            P[k] = out[2 * k] * out[2 * k] + out[2 * k + 1] * out[2 * k + 1];
        size_t excl = 4 * (N / L + 1);
        for (size_t q = 0; q < nd; q++) {
            size_t best = 0;
            for (size_t k = 1; k < N; k++)
                if (P[k] > P[best])
                    best = k;
            double kk = best >= N / 2 ? (double)best - (double)N : (double)best;
            f[q] = kk / ((double)N * dt);
            for (size_t e = 0; e <= excl; e++) {   /* exclude the neighbourhood (cyclic) */
                P[(best + e) % N] = -1.0;
                P[(best + N - e % N) % N] = -1.0;
            }
        }
    }
    free(buf);
    return rc;
}

/* Frequencies (in the record) and intensity decay rates of nd decays in the L complex samples z:
 * the matrix pencil, or the periodogram's peaks when it fails. */
static int decay_frequencies(cs_gate_workspace *ws, const double *z, size_t L, double dt, size_t nd,
                             double *fd, double *gd, cs_error *err)
{
    cs_pencil_parameters pp = cs_pencil_default_parameters();
    pp.order = nd;
    pp.reduce = CS_PENCIL_REDUCE_TRUNCATE;
    pp.max_samples = L < GF_PENCIL_MAX ? (L < 16 ? 16 : L) : GF_PENCIL_MAX;
    cs_pencil_result pr;
    cs_pencil_result_init(&pr);
    int prc = cs_pencil_estimate_ws(ws, z, L, 1, dt, &pp, &pr, NULL);
    int ok = (prc == CS_OK || prc == CS_ENOCONV) && pr.order == nd;
    for (size_t q = 0; ok && q < nd; q++) {
        fd[q] = pr.comp[q].freq_hz;
        gd[q] = pr.comp[q].gamma_per_s;   /* the pencil reports the intensity rate Gamma */
        if (!isfinite(fd[q]) || !isfinite(gd[q]))
            ok = 0;
    }
    cs_pencil_result_release(&pr);
    if (prc == CS_ENOMEM)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the matrix pencil");
    if (ok)
        return CS_OK;
    int rc = periodogram_peaks(ws, z, L, dt, nd, fd, err);
    for (size_t q = 0; rc == CS_OK && q < nd; q++)
        gd[q] = 2.0 / ((double)L * dt);
    return rc;
}

/* The user's starting values over th; then anything still unusable gets a neutral value. */
static void apply_user(const gf_problem *P, const cs_gatefit_start *user, double t_g, double lo_hz,
                       gf_theta *th)
{
    for (size_t k = 0; user && k < P->ncomp; k++) {
        if (isfinite(user[k].center_hz))
            th->f[k] = user[k].center_hz - lo_hz;
        if (P->kind[k] == CS_GATEFIT_DECAY && isfinite(user[k].gamma_per_s))
            th->rate[k] = user[k].gamma_per_s;
        if (P->kind[k] == CS_GATEFIT_BURST && isfinite(user[k].tau_s))
            th->rate[k] = user[k].tau_s;
        if (P->kind[k] == CS_GATEFIT_BURST && isfinite(user[k].t_peak_s))
            th->tp[k] = user[k].t_peak_s - t_g;
    }
    for (size_t k = 0; k < P->ncomp; k++) {
        if (!isfinite(th->f[k]))
            th->f[k] = 0.0;
        if (!(th->rate[k] > 0) || !isfinite(th->rate[k]))
            th->rate[k] = P->kind[k] == CS_GATEFIT_DECAY ? 2.0 / P->T : P->T / 20.0;
        if (!isfinite(th->tp[k]))
            th->tp[k] = 0.5 * P->T;
    }
}

/* Sum of squared residuals of the model th over the used samples (those after the model's
 * active stretch hold only data). */
static double model_rss(const gf_problem *P, const gf_theta *th)
{
    const size_t na = cs_gatefit_impl_active(P, th, 1.0);
    double rss = P->ss_after[na];
    gf_basis_it it[CS_GATEFIT_MAX_COMP];
    for (size_t k = 0; k < P->ncomp; k++)
        cs_gatefit_impl_basis_init(&it[k], P->kind[k], th->f[k], th->rate[k], th->tp[k], P->dt);
    for (size_t i = 0; i < na; i++) {
        size_t j = P->idx[i];
        double complex M = 0.0;
        for (size_t k = 0; k < P->ncomp; k++)
            M += th->c[k] * gf_basis_next(&it[k], j, NULL);
        if (P->cplx) {
            double a = creal(M) - P->x[2 * j], b = cimag(M) - P->x[2 * j + 1];
            rss += a * a + b * b;
        } else {
            double a = creal(M) - P->x[j];
            rss += a * a;
        }
    }
    return isfinite(rss) ? rss : INFINITY;
}

int cs_gatefit_impl_start(cs_gate_workspace *ws, const gf_problem *P, const cs_gatefit_start *user,
                          double t_g, double lo_hz, gf_theta *th, cs_error *err)
{
    const size_t m = P->m, K = P->ncomp;
    const double dt = P->dt, T = P->T;
    size_t nb = 0;
    for (size_t k = 0; k < K; k++)
        nb += P->kind[k] == CS_GATEFIT_BURST;
    /* z: the complex gate, from which the bursts found are subtracted; a complex record's
       samples themselves when there are no bursts (only read then) */
    const int own_z = !P->cplx || nb > 0;
    double *zbuf = own_z ? malloc(2 * m * sizeof *zbuf) : NULL;
    const double *z = own_z ? zbuf : P->x;
    double *scratch = nb > 0 ? malloc(3 * m * sizeof *scratch) : NULL;
    int rc = CS_OK;
    if (!z || (nb > 0 && !scratch)) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for starting values");
        goto done;
    }
    if (P->cplx) {
        if (own_z)
            memcpy(zbuf, P->x, 2 * m * sizeof *zbuf);
    } else {
        rc = cs_envelope_analytic(ws, P->x, m, zbuf, err);
        if (rc != CS_OK)
            goto done;
    }
    memset(th, 0, sizeof *th);
    size_t nd = 0;
    double after = 0.0;   /* time after the last burst (from the gate start) */
    for (size_t k = 0; k < K; k++) {
        if (P->kind[k] != CS_GATEFIT_BURST) {
            nd++;
            continue;
        }
        double f, tau, tp;
        if (burst_start(zbuf, m, dt, scratch, &f, &tau, &tp) != CS_OK) {
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for starting values");
            goto done;
        }
        th->f[k] = f;
        th->rate[k] = tau;
        th->tp[k] = tp;
        after = fmax(after, tp + 6.0 * tau);
    }
    /* decays: the pencil of the whole residual gate, and of the part after the last burst;
     * the candidate whose starting model leaves the smaller residual wins */
    size_t j_after = (size_t)fmin(ceil(after / dt), (double)m), need = 8 * nd > 32 ? 8 * nd : 32;
    size_t cand[2] = {0, j_after}, ncand = nd > 0 && j_after > 0 && m - j_after >= need ? 2 : 1;
    /* the user's frequency and rate for every decay: no pencil needed (it would be overridden) */
    int user_decays = user != NULL;
    for (size_t k = 0; user && k < K; k++)
        if (P->kind[k] == CS_GATEFIT_DECAY && !(isfinite(user[k].center_hz) && isfinite(user[k].gamma_per_s)))
            user_decays = 0;
    if (user_decays)
        ncand = 1;
    double best = INFINITY;
    gf_theta trial;
    for (size_t ci = 0; ci < ncand; ci++) {
        trial = *th;
        if (nd > 0 && !user_decays) {
            double fd[CS_GATEFIT_MAX_COMP], gd[CS_GATEFIT_MAX_COMP];
            rc = decay_frequencies(ws, z + 2 * cand[ci], m - cand[ci], dt, nd, fd, gd, err);
            if (rc != CS_OK)
                goto done;
            size_t q = 0;
            for (size_t k = 0; k < K; k++)
                if (P->kind[k] == CS_GATEFIT_DECAY) {
                    trial.f[k] = fd[q];
                    trial.rate[k] = fmax(gd[q], 0.02 / T);
                    q++;
                }
        }
        apply_user(P, user, t_g, lo_hz, &trial);
        rc = cs_gatefit_impl_amplitudes(P, &trial, err);
        if (rc != CS_OK)
            goto done;
        double rss = ncand > 1 ? model_rss(P, &trial) : 0.0;   /* only to choose a candidate */
        if (ci == 0 || rss < best) {
            best = rss;
            *th = trial;
        }
    }
done:
    free(scratch);
    free(zbuf);
    return rc;
}
