/* Envelope of a record, burst detection (peak, FWHM, onset, end, tail) and decay-law diagnostics.
 *
 * Envelope. For complex I/Q the instantaneous intensity is |I + iQ|^2. For a real record it is
 * |z|^2 with z the analytic signal: the record is zero-padded to an even FFT-friendly length N,
 * transformed (r2c, in place), the positive frequencies doubled (not DC nor the Nyquist bin),
 * the negative ones set to zero, and transformed back (c2c); then Re z = x and Im z = H[x], the
 * discrete Hilbert transform (S. L. Marple, "Computing the discrete-time analytic signal via
 * FFT", IEEE Trans. Signal Process. 47, 2600-2603 (1999)). For x = a(t) cos(phi(t)) with a slow
 * compared with the carrier, |z|^2 = a^2 (Bedrosian's theorem), so the envelope of a real
 * record is the same intensity the complex down-converted record would have given. The padding
 * moves the transform's circular wrap-around into zeros; a few samples at each end still carry
 * edge effects.
 *
 * Smoothing. A Gaussian of standard deviation sigma is approximated by three passes of a
 * centred moving average of odd width b; each pass adds the variance (b^2 - 1)/12, so
 * b = round_odd(sqrt(4 sigma^2 + 1)) and the realised sigma = sqrt((b^2 - 1)/4) is what is
 * reported (W. M. Wells, "Efficient synthesis of Gaussian filters by cascaded uniform filters",
 * IEEE Trans. PAMI 8, 234-239 (1986)). Cost: O(n) whatever the width. The running sums are
 * recomputed exactly every max(1024, b) steps, so rounding from a bright burst never leaks into
 * a faint tail. At the ends the average runs over the samples that exist.
 *
 * Noise floor. The median of the smoothed intensity over a quiet region (by default the quieter
 * of the first and the last 10 % of the record, i.e. the pre-trigger stretch if the record has
 * one, else the end; "quieter" = lower mean raw intensity, which any leftover signal, such as
 * the rising edge of a burst, raises while hardly moving a median). Its spread is the larger of
 * 1.4826 x the median absolute deviation of the smoothed intensity (robust to a stray pulse) and
 * sqrt(var tau sum h^2): the raw intensity's variance, reduced by the smoothing kernel h, with
 * tau the noise's integrated autocorrelation (1 for complex white noise, 2 for the analytic
 * signal of real white noise, more if the quiet region shows it). The MAD alone is unreliable
 * when the region spans few smoothing widths: pure noise then reached 14 "sigmas" in tests,
 * against at most 7 with the model. The mean of the raw intensity there is the noise power
 * subtracted before logarithms are taken in the decay fits.
 *
 * Burst. Detected on the envelope's (pilot) smoothing, whose default width max(4 dt, n dt/2048)
 * averages enough samples that the noise of the smoothed intensity is nearly Gaussian: a burst
 * must rise min_snr = 10 robust standard deviations above the floor, far beyond the largest
 * excursion of pure noise (about 4-5 sigma for 10^6 samples; checked by the tests). Then the
 * raw intensity is smoothed again with sigma = 0.1 x FWHM, iterated until the width settles:
 * this widens a Gaussian pulse by 2.7 % and a sech^2 pulse by about as much, and the reported
 * FWHM removes the smoothing in quadrature, sqrt(measured^2 - (2.3548 sigma)^2) (exact for a
 * Gaussian pulse). Half-maximum crossings are interpolated linearly between samples and the
 * peak by a parabola through its three highest samples. Onset and end are the crossings of
 * floor + max(1e-2 (peak - floor), 5 floor_sigma): 1 % of the peak for a strong burst, five
 * noise sigmas for a weak one. The fade point, where the decay sinks into the noise, is the
 * first crossing of floor + 5 floor_sigma after the peak on the heavier of the two smoothings.
 *
 * Decay laws. Fitting logarithms of a smoothed curve with per-sample weights would count
 * correlated samples as independent. Instead the raw intensity is averaged in bins of at least
 * 8 samples, and each bin gives y = ln(mean - floor_raw) with standard error
 * s/(sqrt(count) (mean - floor_raw)), s the scatter within the bin: for white noise the bins are
 * independent and the weights honest. Exponential fits use bins of equal width (a bin average
 * of exp(-g t) is then a constant factor times exp(-g t_centre), so the slope is unbiased);
 * power-law fits use logarithmic bins in t - t_origin (the bin average of t^-p is then a constant
 * times t_geo^-p, again unbiased). Bins less than 3 standard errors above the floor are
 * dropped, which keeps ln() away from zero and its large bias there. The straight line comes
 * from gsl_fit_wlinear; its errors are scaled up by sqrt(chi2/dof) when chi2/dof > 1
 * (common practice: the scatter, not the nominal weights, then sets the error).
 * The local decay rate -d ln I/dt is the slope through 7 neighbouring bins on a logarithmic
 * time axis after the peak (20 bins per decade); the exponential tail is where this rate stops
 * changing: the earliest point j whose rate and the next agree with the weighted mean of all
 * later rates within 3 standard errors, and whose later rates are constant by a chi2 test at
 * the 1e-3 level. Neighbouring rates share 6 of their 7 bins, so a chi2 over all of them would
 * count one fluctuation seven times (a suffix of 20 rates holds about 3 independent values, and
 * "chi2/dof <= 2" then failed in 10 % of noise realisations); the test therefore uses every
 * 7th rate, which share no bins. */
#include <collshift/gate.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_fit.h>

#include <complex.h>
#include <fftw3.h>

#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define FWHM_PER_SIGMA 2.3548200450309493   /* 2 sqrt(2 ln 2) */
#define MIN_BIN 8
#define BINS_PER_DECADE 20.0
#define RATE_HALF 3                          /* local rate: 2 * RATE_HALF + 1 bins */

/* ---------------------------------------------------------------- smoothing */

/* The moving average's resynchronisation interval (see box). */
static size_t box_resync(size_t h)
{
    return 2 * h + 1 > 1024 ? 2 * h + 1 : 1024;
}

/* The samples [j0, j0 + resync) of box(): what box computes there depends only on y (so a block
 * can be computed alone, with the same bits). */
static void box_block(const double *y, size_t n, size_t h, double *out, size_t j0)
{
    const size_t resync = box_resync(h);
    const double width = (double)(2 * h + 1);
    const size_t jend = j0 + resync < n ? j0 + resync : n;
    size_t lo = j0 >= h ? j0 - h : 0, hi = j0 + h + 1 < n ? j0 + h + 1 : n;   /* sum of [lo, hi) */
    double s = 0.0;
    for (size_t k = lo; k < hi; k++)
        s += y[k];
    out[j0] = s / (double)(hi - lo);
    /* the samples whose window lies inside the record, [a, b), take the same steps as the
       others without their tests: both ends move by one and the width is 2h + 1 */
    size_t j = j0 + 1, a = h + 1 > j ? h + 1 : j, b = n > h ? n - h : 0;
    if (b > jend)
        b = jend;
    for (; j < jend && j < a; j++) {
        if (j + h < n)          /* the window's new right end */
            s += y[hi++];
        if (j > h)              /* its left end moves */
            s -= y[lo++];
        out[j] = s / (double)(hi - lo);
    }
    if (j < b) {
        for (; j + 1 < b; j += 2) {   /* two samples per pass: the same operations, half the loop */
            s += y[j + h];
            s -= y[j - h - 1];
            out[j] = s / width;
            s += y[j + h + 1];
            s -= y[j - h];
            out[j + 1] = s / width;
        }
        for (; j < b; j++) {
            s += y[j + h];
            s -= y[j - h - 1];
            out[j] = s / width;
        }
        hi = j + h;
        lo = j - h - 1;
    }
    for (; j < jend; j++) {
        if (j + h < n)
            s += y[hi++];
        if (j > h)
            s -= y[lo++];
        out[j] = s / (double)(hi - lo);
    }
}

/* One centred moving average of odd width b = 2h + 1 from y into out (distinct arrays). The
 * running sum is formed afresh every `resync` samples (against the drift of rounding); in
 * between the window moves by at most one sample at each end. */
static void box(const double *y, size_t n, size_t h, double *out)
{
    for (size_t j0 = 0; j0 < n; j0 += box_resync(h))
        box_block(y, n, h, out, j0);
}

/* Half-width h of the box (width 2h + 1) for sigma in samples; 0 means no smoothing. */
static size_t box_half(double sigma, size_t n)
{
    if (!(sigma >= 0.5) || n < 2)
        return 0;
    double bw = sqrt(4.0 * sigma * sigma + 1.0);
    size_t h = (size_t)floor((bw - 1.0) / 2.0 + 0.5);
    if (h < 1)
        h = 1;
    return h > n ? n : h;
}

/* Sum of the squared weights of three cascaded boxes of half-width h (1 for h = 0): the factor
 * by which the variance of white noise shrinks. Exact, by convolving the boxes. */
static double kernel_sumsq(size_t h)
{
    if (h == 0)
        return 1.0;
    size_t b = 2 * h + 1, len = 3 * b - 2;
    double *k1 = calloc(len, sizeof(double)), *k2 = calloc(len, sizeof(double));
    if (!k1 || !k2) {   /* Gaussian limit 1/(2 sqrt(pi) sigma) */
        free(k1);
        free(k2);
        return 1.0 / (2.0 * sqrt(3.14159265358979323846) * sqrt((double)(b * b - 1) / 4.0));
    }
    for (size_t i = 0; i < b; i++)
        k1[i] = 1.0 / (double)b;
    for (int pass = 0; pass < 2; pass++) {   /* k2 = k1 * box, then back into k1 */
        size_t cur = (size_t)(pass + 1) * (b - 1) + 1;
        memset(k2, 0, len * sizeof(double));
        for (size_t i = 0; i < cur; i++)
            for (size_t j = 0; j < b; j++)
                k2[i + j] += k1[i] / (double)b;
        memcpy(k1, k2, len * sizeof(double));
    }
    double s = 0.0;
    for (size_t i = 0; i < len; i++)
        s += k1[i] * k1[i];
    free(k1);
    free(k2);
    return s;
}

double cs_envelope_smooth(const double *y, size_t n, double sigma_samples, double *out)
{
    if (!y || !out || !(sigma_samples >= 0) || !isfinite(sigma_samples))
        return -1.0;
    size_t h = box_half(sigma_samples, n);
    if (h == 0) {
        if (out != y)
            memmove(out, y, n * sizeof(double));
        return 0.0;
    }
    double *tmp = malloc(n * sizeof(double));
    if (!tmp)
        return -1.0;
    if (out != y) {   /* the three passes through out and tmp, no copy */
        box(y, n, h, out);
        box(out, n, h, tmp);
        box(tmp, n, h, out);
        free(tmp);
        double b = (double)(2 * h + 1);
        return sqrt((b * b - 1.0) / 4.0);
    }
    box(y, n, h, tmp);
    double *tmp2 = out == y ? malloc(n * sizeof(double)) : out;
    if (!tmp2) {
        free(tmp);
        return -1.0;
    }
    box(tmp, n, h, tmp2);
    box(tmp2, n, h, tmp);
    memcpy(out, tmp, n * sizeof(double));
    if (tmp2 != out)
        free(tmp2);
    free(tmp);
    double b = (double)(2 * h + 1);
    return sqrt((b * b - 1.0) / 4.0);
}

/* The same smoothing as cs_envelope_smooth (the same bits), computed by blocks of box_resync(h)
 * samples only where it is read: burst detection refines its smoothing up to four times but
 * reads each one only over the quiet region, around the burst and out to its edges. Block k of
 * a pass reads blocks k - 1 .. k + 1 of the pass before (h < box_resync(h)). */
typedef struct lazy_smooth {
    const double *y;
    size_t n, h, R, nblk;
    double *pass[3];           /* the three passes' outputs; pass[2] is the smoothing */
    unsigned char *done[3];    /* blocks computed, per pass */
} lazy_smooth;

static void lazy_free(lazy_smooth *lz)
{
    for (int p = 0; p < 3; p++) {
        free(lz->pass[p]);
        free(lz->done[p]);
    }
    memset(lz, 0, sizeof *lz);
}

/* Allocate for y (n samples); CS_OK or CS_ENOMEM. */
static int lazy_alloc(lazy_smooth *lz, const double *y, size_t n)
{
    memset(lz, 0, sizeof *lz);
    lz->y = y;
    lz->n = n;
    for (int p = 0; p < 3; p++) {
        lz->pass[p] = malloc(n * sizeof(double));
        lz->done[p] = malloc(n / 1024 + 1);
        if (!lz->pass[p] || !lz->done[p]) {
            lazy_free(lz);
            return CS_ENOMEM;
        }
    }
    return CS_OK;
}

/* Start the smoothing with sigma samples; returns the realised sigma as cs_envelope_smooth. */
static double lazy_start(lazy_smooth *lz, double sigma)
{
    lz->h = box_half(sigma, lz->n);
    lz->R = box_resync(lz->h);
    lz->nblk = (lz->n + lz->R - 1) / lz->R;
    for (int p = 0; p < 3; p++)
        memset(lz->done[p], 0, lz->n / 1024 + 1);
    if (lz->h == 0) {   /* no smoothing: the samples themselves */
        memcpy(lz->pass[2], lz->y, lz->n * sizeof(double));
        memset(lz->done[2], 1, lz->nblk);
        return 0.0;
    }
    double b = (double)(2 * lz->h + 1);
    return sqrt((b * b - 1.0) / 4.0);
}

static void lazy_block(lazy_smooth *lz, int p, size_t k)
{
    if (lz->done[p][k])
        return;
    if (p > 0)
        for (size_t q = k > 0 ? k - 1 : 0; q <= k + 1 && q < lz->nblk; q++)
            lazy_block(lz, p - 1, q);
    box_block(p > 0 ? lz->pass[p - 1] : lz->y, lz->n, lz->h, lz->pass[p], k * lz->R);
    lz->done[p][k] = 1;
}

/* Make the smoothing valid over [a, b) (clipped to the record). */
static void lazy_range(lazy_smooth *lz, size_t a, size_t b)
{
    if (!lz)
        return;
    if (b > lz->n)
        b = lz->n;
    for (size_t k = a / lz->R; a < b && k <= (b - 1) / lz->R; k++)
        lazy_block(lz, 2, k);
}

static inline void lazy_need(lazy_smooth *lz, size_t j)
{
    if (lz && j < lz->n && !lz->done[2][j / lz->R])
        lazy_block(lz, 2, j / lz->R);
}

/* ---------------------------------------------------------------- analytic signal */

/* Fill buf (2N doubles, fftw_malloc'ed) with the analytic signal of x (n reals, n <= N),
 * scaled by N (the caller divides). */
static int analytic_into(cs_gate_workspace *ws, const double *x, size_t n, size_t N, double *buf,
                         cs_error *err)
{
    memcpy(buf, x, n * sizeof(double));
    memset(buf + n, 0, (2 * N - n) * sizeof(double));
    int rc = cs_gate_fft(ws, CS_GATE_FFT_R2C, N, buf, buf, err);
    if (rc != CS_OK)
        return rc;
    /* bins 1 .. N/2 - 1 doubled, N/2 (Nyquist) kept, N/2 + 1 .. N - 1 zero */
    for (size_t k = 1; k < N / 2; k++) {
        buf[2 * k] *= 2.0;
        buf[2 * k + 1] *= 2.0;
    }
    memset(buf + 2 * (N / 2 + 1), 0, 2 * (N - N / 2 - 1) * sizeof(double));
    return cs_gate_fft(ws, CS_GATE_FFT_BACKWARD, N, buf, buf, err);
}

int cs_envelope_analytic(cs_gate_workspace *ws, const double *x, size_t n, double *z,
                         cs_error *err)
{
    if (!ws || !x || !z || n < 2)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "analytic signal: invalid arguments");
    size_t N = cs_gate_fast_size(n);
    if (N == 0)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "analytic signal: %zu samples is too many", n);
    double *buf = fftw_malloc(2 * N * sizeof(double));
    if (!buf)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the analytic signal");
    int rc = analytic_into(ws, x, n, N, buf, err);
    if (rc == CS_OK) {
        double inv = 1.0 / (double)N;
        for (size_t j = 0; j < 2 * n; j++)
            z[j] = buf[j] * inv;
    }
    fftw_free(buf);
    return rc;
}

/* ---------------------------------------------------------------- robust statistics */

/* The k-th smallest of v[0..n) (reordered): Hoare's selection with a median-of-three pivot,
 * O(n) on average (C. A. R. Hoare, "Algorithm 65: Find", Commun. ACM 4, 321 (1961)). */
static double select_kth(double *v, size_t n, size_t k)
{
    size_t lo = 0, hi = n - 1;
    while (hi > lo) {
        size_t mid = lo + (hi - lo) / 2;
        double a = v[lo], b = v[mid], c = v[hi];
        double piv = a < b ? (b < c ? b : (a < c ? c : a)) : (a < c ? a : (b < c ? c : b));
        size_t i = lo, j = hi;
        while (i <= j) {
            while (v[i] < piv)
                i++;
            while (v[j] > piv)
                j--;
            if (i <= j) {
                double t = v[i];
                v[i] = v[j];
                v[j] = t;
                i++;
                if (j == 0)
                    break;
                j--;
            }
        }
        if (k <= j)
            hi = j;
        else if (k >= i)
            lo = i;
        else
            return v[k];
    }
    return v[k];
}

/* The k-th smallest of v[lo..hi] (reordered so that v[lo..k) <= v[k] <= v(k..hi]), for long
 * arrays by Floyd and Rivest's selection (R. W. Floyd and R. L. Rivest, "Algorithm 489: The
 * algorithm SELECT - for finding the ith smallest of n elements", Commun. ACM 18, 173 (1975)):
 * the k-th of a sample of about n^(2/3) elements, found first, gives two pivots that bracket
 * rank k closely, so one partition of the whole array leaves only a small part to search
 * (about n + min(k, n - k) comparisons against the 2-3 n of select_kth). The value is the same
 * as select_kth's: the k-th smallest is unique. */
static double select_fr(double *v, ptrdiff_t lo, ptrdiff_t hi, ptrdiff_t k)
{
    while (hi > lo) {
        if (hi - lo > 600) {
            double n = (double)(hi - lo + 1), i = (double)(k - lo + 1), z = log(n);
            double s = 0.5 * exp(2.0 * z / 3.0), sd = 0.5 * sqrt(z * s * (n - s) / n);
            if (i < n / 2)
                sd = -sd;
            ptrdiff_t nl = (ptrdiff_t)((double)k - i * s / n + sd), nh = (ptrdiff_t)((double)k + (n - i) * s / n + sd);
            select_fr(v, nl > lo ? nl : lo, nh < hi ? nh : hi, k);
        }
        double t = v[k], tmp;
        ptrdiff_t i = lo, j = hi;
        tmp = v[lo], v[lo] = v[k], v[k] = tmp;
        if (v[hi] > t)
            tmp = v[hi], v[hi] = v[lo], v[lo] = tmp;
        while (i < j) {
            tmp = v[i], v[i] = v[j], v[j] = tmp;
            i++;
            j--;
            while (v[i] < t)
                i++;
            while (v[j] > t)
                j--;
        }
        if (v[lo] == t) {
            tmp = v[lo], v[lo] = v[j], v[j] = tmp;
        } else {
            j++;
            tmp = v[j], v[j] = v[hi], v[hi] = tmp;
        }
        if (j <= k)
            lo = j + 1;
        if (k <= j)
            hi = j - 1;
    }
    return v[k];
}

/* Median of v[0..n) (reordered), n >= 1. */
static double median_inplace(double *v, size_t n)
{
    double hi = n > 1024 && n < (size_t)PTRDIFF_MAX ? select_fr(v, 0, (ptrdiff_t)n - 1, (ptrdiff_t)(n / 2))
                                                  : select_kth(v, n, n / 2);
    if (n % 2)
        return hi;
    double lo = v[0];   /* largest of the lower part v[0 .. n/2) */
    for (size_t i = 1; i < n / 2; i++)
        if (v[i] > lo)
            lo = v[i];
    return 0.5 * (lo + hi);
}

/* Median and 1.4826 MAD of y[first .. first + count); tmp holds count doubles. */
static void robust_stats(const double *y, size_t first, size_t count, double *tmp, double *med,
                         double *sig)
{
    memcpy(tmp, y + first, count * sizeof(double));
    double m = median_inplace(tmp, count);
    for (size_t j = 0; j < count; j++)
        tmp[j] = fabs(y[first + j] - m);
    *med = m;
    *sig = 1.4826 * median_inplace(tmp, count);
}

/* Sum of (x_j - mean)^2 over count > 0 values, the mean into *mean. */
static double centred_sumsq(const double *x, size_t count, double *mean)
{
    double m = 0.0;
    for (size_t j = 0; j < count; j++)
        m += x[j];
    m /= (double)count;
    double c0 = 0.0;
    for (size_t j = 0; j < count; j++)
        c0 += (x[j] - m) * (x[j] - m);
    *mean = m;
    return c0;
}

/* The standard deviation the smoothing (half-width h) leaves of the noise in the raw intensity
 * y[first .. first + count) is sqrt(var * tau * sum h_k^2): this returns var * tau (0 when the
 * region is constant), with var the sample variance and tau
 * the integrated autocorrelation sum_{|m| <= 16} rho(m), but at least tau_min: 1 for complex
 * white noise, 2 for the analytic signal of real white noise, whose intensity is correlated at
 * odd lags m with rho(m) = 4/(pi m)^2, and 1 + 2 sum_{odd m} 4/(pi m)^2 = 2. The estimate of tau
 * from a short quiet region is noisy, so it can only raise the white-noise value. */
static double raw_noise_var_tau(const double *y, size_t first, size_t count, double tau_min,
                                double *tau_out)
{
    const double *x = y + first;
    double mean, c0 = centred_sumsq(x, count, &mean);
    *tau_out = tau_min;
    if (!(c0 > 0))
        return 0.0;
    double tau = 1.0;
    size_t L = count / 4 < 16 ? count / 4 : 16;
    double *d = malloc(count * sizeof *d);
    if (!d) {
        for (size_t m = 1; m <= L; m++) {
            double c = 0.0;
            for (size_t j = 0; j + m < count; j++)
                c += (x[j] - mean) * (x[j + m] - mean);
            tau += 2.0 * c / c0;
        }
    } else {
        /* the same products and sums, from the centred values, lags m and m + 1 side by side
           in the two lanes of a vector (each lane summed over j in order: the same bits) */
        for (size_t j = 0; j < count; j++)
            d[j] = x[j] - mean;
        size_t m = 1;
#if defined(__GNUC__)
        typedef double v2 __attribute__((vector_size(16)));
        for (; m + 1 <= L; m += 2) {
            v2 c = {0.0, 0.0};
            size_t j = 0;
            for (; j + m + 1 < count; j++) {
                v2 a = {d[j], d[j]}, b;
                memcpy(&b, d + j + m, sizeof b);
                c += a * b;
            }
            double c_m = c[0] + d[j] * d[j + m];   /* lag m's last product, j + m = count - 1 */
            tau += 2.0 * c_m / c0;
            tau += 2.0 * c[1] / c0;
        }
#endif
        for (; m <= L; m++) {
            double c = 0.0;
            for (size_t j = 0; j + m < count; j++)
                c += d[j] * d[j + m];
            tau += 2.0 * c / c0;
        }
        free(d);
    }
    if (tau < tau_min)
        tau = tau_min;
    *tau_out = tau;
    return c0 / (double)(count - 1) * tau;
}

/* raw_noise_var_tau over the envelope's quiet region, with the autocorrelation sum tau that
 * cs_envelope_compute left in env->noise_tau (the same region, samples and floor tau_min, so
 * the same bits) instead of its 16 lagged products again: only the variance is summed. An
 * envelope whose noise_tau is below the floor or not finite (not made by cs_envelope_compute)
 * gets the full computation. */
static double quiet_var_tau(const cs_envelope *env)
{
    const double tau_min = env->from_real ? 2.0 : 1.0;
    const size_t count = env->quiet_count;
    if (!(env->noise_tau >= tau_min) || !isfinite(env->noise_tau)) {
        double tau;
        return raw_noise_var_tau(env->intensity, env->quiet_first, count, tau_min, &tau);
    }
    double mean, c0 = centred_sumsq(env->intensity + env->quiet_first, count, &mean);
    if (!(c0 > 0))
        return 0.0;
    return c0 / (double)(count - 1) * env->noise_tau;
}

/* Noise floor of a smoothing s (half-width h) of the intensity over the quiet region: the
 * median of s, and the larger of 1.4826 MAD(s) and the model estimate above, whose var x tau
 * part (raw_noise_var_tau of the raw intensity over the same region: the same for every
 * smoothing) is var_tau. The MAD alone underestimates when the quiet region holds few
 * independent smoothing widths. */
static void floor_stats(double var_tau, const double *s, size_t first, size_t count, size_t h, double *tmp,
                        double *med, double *sig)
{
    robust_stats(s, first, count, tmp, med, sig);
    double model = var_tau > 0 ? sqrt(var_tau * kernel_sumsq(h)) : 0.0;
    if (model > *sig)
        *sig = model;
}

/* ---------------------------------------------------------------- envelope */

void cs_envelope_params_default(cs_envelope_params *p)
{
    if (!p)
        return;
    memset(p, 0, sizeof *p);
    p->quiet = CS_ENVELOPE_QUIET_AUTO;
    p->quiet_fraction = 0.1;
}

void cs_envelope_free(cs_envelope *e)
{
    if (!e)
        return;
    free(e->intensity);
    free(e->smooth);
    free(e);
}

/* Choose the quiet region and compute floor statistics of env->smooth (and raw mean). */
static int envelope_floor(cs_envelope *e, const cs_envelope_params *p, cs_error *err)
{
    size_t n = e->n;
    size_t first, count;
    if (p->quiet == CS_ENVELOPE_QUIET_RANGE) {
        double a = ceil(p->quiet_start_s / e->dt_s - 1e-6);
        double b = ceil((p->quiet_start_s + p->quiet_length_s) / e->dt_s - 1e-6);
        if (!(p->quiet_start_s >= 0) || !(b - a >= 8) || b > (double)n)
            return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                "quiet region %g s + %g s is outside the record or holds fewer than 8 samples",
                                p->quiet_start_s, p->quiet_length_s);
        first = (size_t)a;
        count = (size_t)(b - a);
    } else {
        count = (size_t)floor(p->quiet_fraction * (double)n);
        if (count < 8)
            count = 8;
        first = p->quiet == CS_ENVELOPE_QUIET_START ? 0 : n - count;
    }
    double *tmp = malloc(count * sizeof(double));
    if (!tmp)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    double med, sig;
    size_t h = box_half(e->smooth_s / e->dt_s, n);
    if (p->quiet == CS_ENVELOPE_QUIET_AUTO) {   /* the lower noise power wins */
        double s0 = 0.0, s1 = 0.0;
        for (size_t j = 0; j < count; j++) {
            s0 += e->intensity[j];
            s1 += e->intensity[first + j];
        }
        if (s0 < s1)
            first = 0;
    }
    double var_tau = raw_noise_var_tau(e->intensity, first, count, e->from_real ? 2.0 : 1.0, &e->noise_tau);
    floor_stats(var_tau, e->smooth, first, count, h, tmp, &med, &sig);
    free(tmp);
    double s = 0.0;
    for (size_t j = 0; j < count; j++)
        s += e->intensity[first + j];
    e->floor = med;
    e->floor_sigma = sig;
    e->floor_raw = s / (double)count;
    e->quiet_first = first;
    e->quiet_count = count;
    return CS_OK;
}

int cs_envelope_compute(cs_gate_workspace *ws, const cs_record *rec,
                        const cs_envelope_params *p, cs_envelope **out, cs_error *err)
{
    cs_envelope_params def;
    if (!p) {
        cs_envelope_params_default(&def);
        p = &def;
    }
    if (!ws || !rec || !out || !rec->data)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "envelope: NULL argument");
    *out = NULL;
    if (!(p->smooth_s >= 0) || !isfinite(p->smooth_s) || !(p->quiet_fraction > 0) ||
        !(p->quiet_fraction <= 0.5) || p->quiet < CS_ENVELOPE_QUIET_AUTO ||
        p->quiet > CS_ENVELOPE_QUIET_RANGE)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "envelope: invalid parameter");
    size_t n = rec->n;
    if (n < 16)
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1,
                            "record of %zu samples is too short for an envelope (needs 16)", n);
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "sample interval must be > 0");
    cs_envelope *e = calloc(1, sizeof *e);
    if (!e)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    e->n = n;
    e->t0_s = rec->t0_s;
    e->dt_s = rec->dt_s;
    e->from_real = !rec->is_complex;
    e->intensity = malloc(n * sizeof(double));
    e->smooth = malloc(n * sizeof(double));
    int rc = CS_OK;
    if (!e->intensity || !e->smooth) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for an envelope of %zu samples", n);
        goto fail;
    }
    size_t nd = rec->is_complex ? 2 * n : n;
    /* complex records: the finite check rides on the intensity (non-finite when a part is, or
       when a huge part overflows its square); only then are the samples scanned */
    double acc = 0.0;
    if (rec->is_complex)
        for (size_t j = 0; j < n; j++) {
            double re = rec->data[2 * j], im = rec->data[2 * j + 1];
            double v = re * re + im * im;
            e->intensity[j] = v;
            acc += v * 0.0;   /* stays 0 unless some v is Inf or NaN */
        }
    if (!rec->is_complex || acc != 0.0 || isnan(acc))
        for (size_t j = 0; j < nd; j++)
            if (!isfinite(rec->data[j])) {
                rc = cs_error_set(err, CS_EDATA, rec->source, -1, -1, "sample %zu is not finite",
                                  rec->is_complex ? j / 2 : j);
                goto fail;
            }
    if (rec->is_complex) {
        /* the intensity is in place */
    } else {
        size_t N = cs_gate_fast_size(n);
        double *buf = N ? fftw_malloc(2 * N * sizeof(double)) : NULL;
        if (!buf) {
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the analytic signal");
            goto fail;
        }
        rc = analytic_into(ws, rec->data, n, N, buf, err);
        if (rc == CS_OK) {
            double inv2 = 1.0 / ((double)N * (double)N);
            for (size_t j = 0; j < n; j++)
                e->intensity[j] = (buf[2 * j] * buf[2 * j] + buf[2 * j + 1] * buf[2 * j + 1]) * inv2;
        }
        fftw_free(buf);
        if (rc != CS_OK)
            goto fail;
    }
    double sig = p->smooth_s > 0 ? p->smooth_s / rec->dt_s : fmax(4.0, (double)n / 2048.0);
    double real = cs_envelope_smooth(e->intensity, n, sig, e->smooth);
    if (real < 0) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for smoothing");
        goto fail;
    }
    e->smooth_s = real * rec->dt_s;
    rc = envelope_floor(e, p, err);
    if (rc != CS_OK)
        goto fail;
    *out = e;
    return CS_OK;
fail:
    cs_envelope_free(e);
    return rc;
}

/* ---------------------------------------------------------------- burst detection */

void cs_burst_params_default(cs_burst_params *p)
{
    if (!p)
        return;
    p->min_snr = 10.0;
    p->edge_fraction = 1e-2;
    p->edge_nsigma = 5.0;
    p->smooth_ratio = 0.1;
    p->find_tail = 1;
}

static void burst_none(cs_burst *b, double snr, double floor, double sig)
{
    memset(b, 0, sizeof *b);
    b->status = CS_BURST_NONE;
    b->snr = snr;
    b->floor = floor;
    b->floor_sigma = sig;
    b->peak_time_s = b->peak = b->half_rise_s = b->half_fall_s = b->fwhm_s = NAN;
    b->fwhm_measured_s = b->smooth_s = b->level = b->onset_s = b->end_s = NAN;
    b->tail_start_s = b->fade_s = NAN;
}

/* Index of the maximum of y over [a, b). */
static size_t argmax(const double *y, size_t a, size_t b)
{
    size_t k = a;
    for (size_t j = a + 1; j < b; j++)
        if (y[j] > y[k])
            k = j;
    return k;
}

/* Fractional index where y crosses `level` going outward from the peak ip (y[ip] >= level):
 * dir = -1 backwards, +1 forwards. Returns NaN when y never falls below level. lz: y's lazy
 * smoothing (NULL when y is complete). */
static double crossing(const double *y, size_t n, size_t ip, double level, int dir, lazy_smooth *lz)
{
    lazy_need(lz, ip);
    if (dir < 0) {
        for (size_t j = ip; j > 0; j--) {
            lazy_need(lz, j - 1);
            if (y[j - 1] < level)   /* between j-1 (below) and j (at or above) */
                return (double)(j - 1) + (level - y[j - 1]) / (y[j] - y[j - 1]);
        }
    } else {
        for (size_t j = ip; j + 1 < n; j++) {
            lazy_need(lz, j + 1);
            if (y[j + 1] < level)
                return (double)j + (y[j] - level) / (y[j] - y[j + 1]);
        }
    }
    return NAN;
}

/* Measurements on one smoothing s (floor statistics fl, sg). Returns 0 when there is no
 * falling half-maximum crossing. */
struct shape {
    size_t ip;
    double peak_idx, peak, rise, fall;
    int rise_clipped;
};

static int measure(const double *s, size_t n, size_t lo, size_t hi, double fl, struct shape *sh,
                   lazy_smooth *lz, size_t ip_known)
{
    lazy_range(lz, lo > 0 ? lo - 1 : 0, hi + 1);
    size_t ip = ip_known < n ? ip_known : argmax(s, lo, hi);
    double dp = 0.0, peak = s[ip];
    if (ip > 0 && ip + 1 < n) {
        double ym = s[ip - 1], y0 = s[ip], yp = s[ip + 1], den = ym - 2 * y0 + yp;
        if (den < 0) {
            dp = 0.5 * (ym - yp) / den;
            if (fabs(dp) <= 1.0)
                peak = y0 - 0.25 * (ym - yp) * dp;
            else
                dp = 0.0;
        }
    }
    double half = fl + 0.5 * (peak - fl);
    sh->ip = ip;
    sh->peak_idx = (double)ip + dp;
    sh->peak = peak;
    sh->fall = crossing(s, n, ip, half, +1, lz);
    sh->rise = crossing(s, n, ip, half, -1, lz);
    sh->rise_clipped = isnan(sh->rise);
    if (sh->rise_clipped)
        sh->rise = 0.0;
    return !isnan(sh->fall);
}

int cs_burst_detect(const cs_envelope *env, const cs_burst_params *p, cs_burst *out,
                    cs_error *err)
{
    cs_burst_params def;
    if (!p) {
        cs_burst_params_default(&def);
        p = &def;
    }
    if (!env || !out || !env->smooth || !env->intensity)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "burst: NULL argument");
    if (!(p->min_snr >= 0) || !(p->edge_fraction > 0 && p->edge_fraction < 1) ||
        !(p->edge_nsigma >= 0) || !(p->smooth_ratio >= 0 && p->smooth_ratio < 1))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "burst: invalid parameter");
    const size_t n = env->n;
    const double dt = env->dt_s;
    /* 1. significance on the pilot smoothing */
    size_t ip0 = argmax(env->smooth, 0, n);
    double excess = env->smooth[ip0] - env->floor;
    double snr = env->floor_sigma > 0 ? excess / env->floor_sigma : (excess > 0 ? INFINITY : 0.0);
    if (!(snr >= p->min_snr)) {
        burst_none(out, snr, env->floor, env->floor_sigma);
        return CS_OK;
    }
    struct shape sh;
    if (!measure(env->smooth, n, 0, n, env->floor, &sh, NULL, ip0)) {   /* ip0: argmax over 0..n */
        burst_none(out, snr, env->floor, env->floor_sigma);
        return CS_OK;
    }
    /* 2. refined smoothing, iterated */
    /* the refined smoothings are computed by blocks where they are read (lazy_smooth: the
       same values as cs_envelope_smooth's); s2 is the latest, slz its state when s is s2 */
    lazy_smooth lz;
    memset(&lz, 0, sizeof lz);
    lazy_smooth *slz = NULL;
    double *s2 = NULL, *tmp = NULL;
    const double *s = env->smooth;
    double fl = env->floor, sg = env->floor_sigma, sm = env->smooth_s / dt;
    double fwhm_meas = sh.fall - sh.rise;
    double fwhm = sqrt(fmax(fwhm_meas * fwhm_meas - pow(FWHM_PER_SIGMA * sm, 2), 0.25 * fwhm_meas * fwhm_meas));
    if (p->smooth_ratio > 0) {
        tmp = malloc(env->quiet_count * sizeof(double));
        if (!tmp || lazy_alloc(&lz, env->intensity, n) != CS_OK) {
            free(tmp);
            return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        }
        s2 = lz.pass[2];
        double want = p->smooth_ratio * fwhm;
        double var_tau = quiet_var_tau(env);
        for (int it = 0; it < 4; it++) {
            double real = lazy_start(&lz, want);
            lazy_range(&lz, env->quiet_first, env->quiet_first + env->quiet_count);
            floor_stats(var_tau, s2, env->quiet_first, env->quiet_count, box_half(want, n), tmp, &fl, &sg);
            /* search near the pilot's burst only */
            double lo = sh.rise - fwhm_meas, hi = sh.fall + fwhm_meas + 1;
            size_t a = lo > 0 ? (size_t)lo : 0, b = hi < (double)n ? (size_t)hi : n;
            struct shape s2h;
            if (!measure(s2, n, a, b > a ? b : n, fl, &s2h, &lz, SIZE_MAX))
                break;
            sh = s2h;
            s = s2;
            slz = &lz;
            sm = real;
            fwhm_meas = sh.fall - sh.rise;
            fwhm = sqrt(fmax(fwhm_meas * fwhm_meas - pow(FWHM_PER_SIGMA * sm, 2),
                             0.25 * fwhm_meas * fwhm_meas));
            double next = p->smooth_ratio * fwhm;
            if (fabs(next - want) <= 0.02 * want || (next < 0.5 && want < 0.5))
                break;
            want = next;
        }
        free(tmp);
    }
    /* 3. edges */
    memset(out, 0, sizeof *out);
    out->status = CS_BURST_FOUND;
    out->snr = snr;
    out->floor = fl;
    out->floor_sigma = sg;
    out->smooth_s = sm * dt;
    out->peak = sh.peak;
    out->peak_time_s = env->t0_s + sh.peak_idx * dt;
    out->half_rise_s = env->t0_s + sh.rise * dt;
    out->half_fall_s = env->t0_s + sh.fall * dt;
    out->fwhm_measured_s = fwhm_meas * dt;
    out->fwhm_s = fwhm * dt;
    out->level = fl + fmax(p->edge_fraction * (sh.peak - fl), p->edge_nsigma * sg);
    double on = crossing(s, n, sh.ip, out->level, -1, slz);
    double en = crossing(s, n, sh.ip, out->level, +1, slz);
    out->onset_clipped = isnan(on);
    out->end_clipped = isnan(en);
    out->onset_s = env->t0_s + (isnan(on) ? 0.0 : on) * dt;
    out->end_s = env->t0_s + (isnan(en) ? (double)(n - 1) : en) * dt;
    /* fade on the heavier smoothing */
    const double *sf = s;
    lazy_smooth *flz = slz;
    double ffl = fl, fsg = sg;
    if (env->smooth_s / dt > sm) {
        sf = env->smooth;
        flz = NULL;
        ffl = env->floor;
        fsg = env->floor_sigma;
    }
    size_t fa = sh.ip > 0 ? sh.ip - 1 : 0, fb = sh.ip + 2 < n ? sh.ip + 2 : n;
    lazy_range(flz, fa, fb);
    size_t ipf = argmax(sf, fa, fb);
    double fd = crossing(sf, n, ipf, ffl + p->edge_nsigma * fsg, +1, flz);
    out->fade_s = env->t0_s + (isnan(fd) ? (double)(n - 1) : fd) * dt;
    if (out->fade_s < out->end_s)
        out->fade_s = out->end_s;
    lazy_free(&lz);
    out->tail_start_s = out->end_s;
    if (p->find_tail) {
        cs_burst_decay *d = NULL;
        cs_error e;
        if (cs_burst_decay_analyse(env, out, &d, &e) == CS_OK && isfinite(d->exp_start_s)) {
            out->tail_start_s = fmax(out->end_s, d->exp_start_s);
            out->tail_from_rate = d->exp_start_s > out->end_s;
        }
        cs_burst_decay_free(d);
    }
    return CS_OK;
}

/* ---------------------------------------------------------------- binned intensity */

struct bin {
    double x;      /* abscissa: t (EXP) or ln(t - origin) (POWER), or the bin centre time */
    double t;      /* centre time (absolute) */
    double y;      /* ln(mean - floor) */
    double sy;     /* its standard error */
};

/* Statistics of raw intensity over samples [a, b): fills bin y, sy; returns 0 when unusable. */
static int bin_stats(const cs_envelope *env, size_t a, size_t b, struct bin *bn)
{
    size_t c = b - a;
    if (c < 2)
        return 0;
    double s = 0.0;
    for (size_t j = a; j < b; j++)
        s += env->intensity[j];
    double mean = s / (double)c, v = 0.0;
    for (size_t j = a; j < b; j++) {
        double d = env->intensity[j] - mean;
        v += d * d;
    }
    double tau = env->noise_tau >= 1.0 ? env->noise_tau : 1.0;
    double se = sqrt(v / ((double)c - 1.0) / (double)c * tau);
    double sig = mean - env->floor_raw;
    if (!(se > 0) || !(sig > 3.0 * se))
        return 0;
    bn->y = log(sig);
    bn->sy = se / sig;
    return 1;
}

/* Index range [ia, ib) of the samples with t in [ta, tb] (absolute). */
static int time_range(const cs_envelope *env, double ta, double tb, size_t *ia, size_t *ib)
{
    double a = ceil((ta - env->t0_s) / env->dt_s - 1e-9);
    double b = floor((tb - env->t0_s) / env->dt_s + 1e-9) + 1.0;
    if (a < 0)
        a = 0;
    if (b > (double)env->n)
        b = (double)env->n;
    if (!(b > a))
        return 0;
    *ia = (size_t)a;
    *ib = (size_t)b;
    return 1;
}

/* Weighted straight line through bins; fills the fit's slope-dependent fields via callbacks. */
static int line_fit(const struct bin *bins, size_t nb, double *c0, double *c1, double *cov00,
                    double *cov01, double *cov11, double *chi2)
{
    double *x = malloc(3 * nb * sizeof(double));
    if (!x)
        return CS_ENOMEM;
    double *y = x + nb, *w = y + nb;
    for (size_t i = 0; i < nb; i++) {
        x[i] = bins[i].x;
        y[i] = bins[i].y;
        w[i] = 1.0 / (bins[i].sy * bins[i].sy);
    }
    gsl_error_handler_t *old = gsl_set_error_handler_off();
    int g = gsl_fit_wlinear(x, 1, w, 1, y, 1, nb, c0, c1, cov00, cov01, cov11, chi2);
    gsl_set_error_handler(old);
    free(x);
    return g == GSL_SUCCESS && isfinite(*c1) && isfinite(*cov11) ? CS_OK : CS_EDATA;
}

static void fit_reset(cs_burst_fit *f, cs_burst_law law, double ta, double tb, double origin)
{
    memset(f, 0, sizeof *f);
    f->status = CS_EDATA;
    f->law = law;
    f->t_from_s = ta;
    f->t_to_s = tb;
    f->t_origin_s = origin;
    f->rate_per_s = f->rate_err_per_s = f->exponent = f->exponent_err = NAN;
    f->ln_amplitude = f->ln_amplitude_err = f->cov = f->chi2 = NAN;
}

/* Finish a fit from bins: straight line, error scaling, law-specific fields. */
static int fit_bins(struct bin *bins, size_t nb, cs_burst_fit *f, cs_error *err)
{
    f->nbins = nb;
    if (nb < 3) {
        f->status = CS_EDATA;
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "decay fit over %g .. %g s: only %zu bins above the noise floor (needs 3)",
                            f->t_from_s, f->t_to_s, nb);
    }
    double c0, c1, c00, c01, c11, chi2;
    int rc = line_fit(bins, nb, &c0, &c1, &c00, &c01, &c11, &chi2);
    if (rc != CS_OK) {
        f->status = rc;
        return cs_error_set(err, rc, NULL, -1, -1, "decay fit over %g .. %g s failed", f->t_from_s,
                            f->t_to_s);
    }
    f->dof = nb - 2;
    f->chi2 = chi2;
    double scale = 1.0;
    if (f->dof > 0 && chi2 / (double)f->dof > 1.0) {
        scale = chi2 / (double)f->dof;
        f->errors_scaled = 1;
    }
    f->ln_amplitude = c0;
    f->ln_amplitude_err = sqrt(c00 * scale);
    f->cov = c01 * scale;
    if (f->law == CS_BURST_LAW_EXP) {
        f->rate_per_s = -c1;
        f->rate_err_per_s = sqrt(c11 * scale);
    } else {
        f->exponent = -c1;
        f->exponent_err = sqrt(c11 * scale);
    }
    f->status = CS_OK;
    return CS_OK;
}

int cs_burst_fit_exp(const cs_envelope *env, double t_from_s, double t_to_s, cs_burst_fit *fit,
                     cs_error *err)
{
    if (!env || !fit)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "decay fit: NULL argument");
    fit_reset(fit, CS_BURST_LAW_EXP, t_from_s, t_to_s, t_from_s);
    size_t ia, ib;
    if (!(t_to_s > t_from_s) || !time_range(env, t_from_s, t_to_s, &ia, &ib)) {
        fit->status = CS_EINVAL;
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "decay fit: empty range %g .. %g s",
                            t_from_s, t_to_s);
    }
    size_t c = ib - ia, nb = c / MIN_BIN;
    if (nb > 64)
        nb = 64;
    if (nb < 3)
        nb = 3;
    struct bin *bins = malloc(nb * sizeof *bins);
    if (!bins)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    size_t used = 0;
    for (size_t k = 0; k < nb; k++) {
        size_t a = ia + c * k / nb, b = ia + c * (k + 1) / nb;
        struct bin bn;
        if (b > a + 1 && bin_stats(env, a, b, &bn)) {
            bn.t = env->t0_s + 0.5 * (double)(a + b - 1) * env->dt_s;
            bn.x = bn.t - t_from_s;
            bins[used++] = bn;
        }
    }
    int rc = fit_bins(bins, used, fit, err);
    free(bins);
    return rc;
}

/* Logarithmic bins in t - origin over samples [ia, ib) starting at tau0 samples after the
 * origin index io (fractional): ratio r, at least MIN_BIN samples each. Returns the count of
 * usable bins written (bins sized by the caller to hold the maximum). */
static size_t log_bins(const cs_envelope *env, double io, size_t ia, size_t ib, struct bin *bins,
                       size_t maxb, int keep_empty, size_t *edges)
{
    const double r = pow(10.0, 1.0 / BINS_PER_DECADE);
    size_t used = 0, a = ia;
    while (a < ib && used < maxb) {
        double tau_a = (double)a - io;
        size_t b = (size_t)ceil(io + tau_a * r);
        if (b < a + MIN_BIN)
            b = a + MIN_BIN;
        if (b > ib)
            break;
        struct bin bn;
        int ok = bin_stats(env, a, b, &bn);
        if (ok || keep_empty) {
            double ta = (double)a - io, tb = (double)b - io;   /* samples after origin */
            bn.t = env->t0_s + (io + sqrt(ta * tb)) * env->dt_s;
            bn.x = log(sqrt(ta * tb) * env->dt_s);
            if (!ok)
                bn.sy = 0.0;
            if (edges)
                edges[used] = a;
            bins[used++] = bn;
        }
        a = b;
    }
    return used;
}

int cs_burst_fit_power(const cs_envelope *env, double t_origin_s, double t_from_s,
                       double t_to_s, cs_burst_fit *fit, cs_error *err)
{
    if (!env || !fit)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "decay fit: NULL argument");
    fit_reset(fit, CS_BURST_LAW_POWER, t_from_s, t_to_s, t_origin_s);
    size_t ia, ib;
    if (!(t_to_s > t_from_s) || !(t_from_s > t_origin_s) ||
        !time_range(env, t_from_s, t_to_s, &ia, &ib)) {
        fit->status = CS_EINVAL;
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "power-law fit: need origin %g s < from %g s < to %g s", t_origin_s,
                            t_from_s, t_to_s);
    }
    double io = (t_origin_s - env->t0_s) / env->dt_s;
    if ((double)ia <= io)
        ia = (size_t)floor(io) + 1;
    size_t maxb = (ib - ia) / MIN_BIN + 1;
    struct bin *bins = malloc(maxb * sizeof *bins);
    if (!bins)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    size_t used = log_bins(env, io, ia, ib, bins, maxb, 0, NULL);
    int rc = fit_bins(bins, used, fit, err);
    free(bins);
    return rc;
}

/* ---------------------------------------------------------------- decay diagnostics */

/* Weighted mean of v[a], v[a + step], ... (< b) with standard errors e. */
static double weighted_mean(const double *v, const double *e, size_t a, size_t b, size_t step)
{
    double sw = 0.0, swv = 0.0;
    for (size_t i = a; i < b; i += step) {
        double w = 1.0 / (e[i] * e[i]);
        sw += w;
        swv += w * v[i];
    }
    return swv / sw;
}

void cs_burst_decay_free(cs_burst_decay *d)
{
    if (!d)
        return;
    free(d->t_s);
    free(d->rate_per_s);
    free(d->rate_err_per_s);
    free(d);
}

int cs_burst_decay_analyse(const cs_envelope *env, const cs_burst *b, cs_burst_decay **out,
                           cs_error *err)
{
    if (!env || !b || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "decay: NULL argument");
    *out = NULL;
    if (b->status != CS_BURST_FOUND)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "decay: no burst");
    const double dt = env->dt_s;
    double io = (b->peak_time_s - env->t0_s) / dt;
    double tau0 = fmax(0.5 * b->fwhm_s / dt, 4.0);
    size_t ia = (size_t)ceil(io + tau0);
    double ifade = (b->fade_s - env->t0_s) / dt;
    size_t ib = ifade + 1 < (double)env->n ? (size_t)(ifade + 1) : env->n;
    if (ia + 7 * MIN_BIN > ib)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "decay: too few samples between the peak and the fade point");
    size_t maxb = (ib - ia) / MIN_BIN + 1;
    struct bin *bins = malloc(maxb * sizeof *bins);
    size_t *edges = malloc((maxb + 1) * sizeof *edges);
    cs_burst_decay *d = calloc(1, sizeof *d);
    if (!bins || !edges || !d) {
        free(bins);
        free(edges);
        free(d);
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    }
    size_t nb = log_bins(env, io, ia, ib, bins, maxb, 0, edges);
    int rc = CS_OK;
    if (nb < 2 * RATE_HALF + 1) {
        rc = cs_error_set(err, CS_EDATA, NULL, -1, -1, "decay: only %zu bins above the noise floor", nb);
        goto done;
    }
    d->t_s = malloc(nb * sizeof(double));
    d->rate_per_s = malloc(nb * sizeof(double));
    d->rate_err_per_s = malloc(nb * sizeof(double));
    if (!d->t_s || !d->rate_per_s || !d->rate_err_per_s) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        goto done;
    }
    /* local rates: x = t for the straight line */
    struct bin win[2 * RATE_HALF + 1];
    size_t np = 0;
    for (size_t i = 0; i < nb; i++) {
        size_t lo = i >= RATE_HALF ? i - RATE_HALF : 0;
        size_t hi = i + RATE_HALF + 1 < nb ? i + RATE_HALF + 1 : nb;
        if (hi - lo < 3)
            continue;
        for (size_t k = lo; k < hi; k++) {
            win[k - lo] = bins[k];
            win[k - lo].x = bins[k].t - bins[i].t;
        }
        double c0, c1, c00, c01, c11, chi2;
        if (line_fit(win, hi - lo, &c0, &c1, &c00, &c01, &c11, &chi2) != CS_OK)
            continue;
        d->t_s[np] = bins[i].t;
        d->rate_per_s[np] = -c1;
        d->rate_err_per_s[np] = sqrt(c11);
        np++;
    }
    d->n = np;
    d->burst_end_s = b->end_s;
    d->nonexp_start_s = d->nonexp_end_s = d->exp_start_s = d->exp_end_s = NAN;
    fit_reset(&d->exp_fit, CS_BURST_LAW_EXP, NAN, NAN, NAN);
    fit_reset(&d->power_fit, CS_BURST_LAW_POWER, NAN, NAN, b->peak_time_s);
    /* exponential tail: the earliest j whose suffix j..np-1 is one constant rate: rates j and
     * j+1 within 3 standard errors of the suffix's weighted mean, and the non-overlapping rates
     * j, j+W, j+2W, ... (W = 7: no shared bins, so independent) pass a chi2 test of constancy
     * at the 1e-3 level */
    const size_t W = 2 * RATE_HALF + 1;
    size_t start = np;
    for (size_t j = 0; j + W + 1 <= np; j++) {
        double mu = weighted_mean(d->rate_per_s, d->rate_err_per_s, j, np, 1);
        double z0 = (d->rate_per_s[j] - mu) / d->rate_err_per_s[j];
        double z1 = (d->rate_per_s[j + 1] - mu) / d->rate_err_per_s[j + 1];
        if (fabs(z0) > 3.0 || fabs(z1) > 3.0)
            continue;
        double mi = weighted_mean(d->rate_per_s, d->rate_err_per_s, j, np, W), chi2 = 0;
        size_t k = 0;
        for (size_t i = j; i < np; i += W, k++) {
            double z = (d->rate_per_s[i] - mi) / d->rate_err_per_s[i];
            chi2 += z * z;
        }
        if (gsl_cdf_chisq_Q(chi2, (double)(k - 1)) >= 1e-3) {
            start = j;
            break;
        }
    }
    if (start < np) {
        d->exp_start_s = d->t_s[start];
        d->exp_end_s = b->fade_s;
        cs_error e;
        cs_burst_fit_exp(env, d->exp_start_s, d->exp_end_s, &d->exp_fit, &e);
        if (d->exp_start_s > b->end_s + 2 * dt) {
            d->nonexp_start_s = b->end_s;
            d->nonexp_end_s = d->exp_start_s;
            if (b->end_s > b->peak_time_s)
                cs_burst_fit_power(env, b->peak_time_s, b->end_s, d->exp_start_s, &d->power_fit, &e);
        }
    }
done:
    free(bins);
    free(edges);
    if (rc != CS_OK) {
        cs_burst_decay_free(d);
        return rc;
    }
    *out = d;
    return CS_OK;
}
