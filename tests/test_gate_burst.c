/* Check suite for the gate module's envelope, burst detection and decay-law diagnostics. */
#include <check.h>
#include <collshift/gate.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_statistics_double.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

#define PI_T 3.14159265358979323846264338327950288
#define N_OF(a) ((int)(sizeof(a) / sizeof((a)[0])))

static gsl_rng *rng_new(unsigned long seed)
{
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    ck_assert_ptr_nonnull(r);
    gsl_rng_set(r, seed);
    return r;
}

/* A record carrying intensity I(t) on a carrier f_c: complex sqrt(I) exp(2 pi i f_c t) or real
 * sqrt(I) cos(2 pi f_c t), plus white noise of mean power `noise` (E|n|^2 for complex, the
 * variance for real), t = t0 + j dt. */
typedef double (*intensity_fn)(double t, const double *p);

static cs_record *make_record(size_t n, int cplx, double dt, double t0, double fc, intensity_fn I,
                              const double *p, double noise, unsigned long seed)
{
    cs_record *r = cs_record_alloc(n, cplx);
    ck_assert_ptr_nonnull(r);
    r->dt_s = dt;
    r->t0_s = t0;
    gsl_rng *g = rng_new(seed);
    double s = cplx ? sqrt(noise / 2) : sqrt(noise);
    for (size_t j = 0; j < n; j++) {
        double t = t0 + (double)j * dt, a = I ? sqrt(I(t, p)) : 0.0, ph = 2 * PI_T * fc * t;
        if (cplx) {
            r->data[2 * j] = a * cos(ph) + (noise > 0 ? gsl_ran_gaussian(g, s) : 0.0);
            r->data[2 * j + 1] = a * sin(ph) + (noise > 0 ? gsl_ran_gaussian(g, s) : 0.0);
        } else {
            r->data[j] = a * cos(ph) + (noise > 0 ? gsl_ran_gaussian(g, s) : 0.0);
        }
    }
    gsl_rng_free(g);
    return r;
}

/* Superradiant burst: P sech^2((t - tD)/tau) (mean-field pulse shape, Gross & Haroche 1982,
 * physics guide section 4; FWHM = 2 arccosh(sqrt 2) tau = 1.76275 tau) plus a slow exponential
 * tail T exp(-(t - tD)/tt) switched on at tD. p = {P, tD, tau, T, tt}. */
static double burst_shape(double t, const double *p)
{
    double c = cosh((t - p[1]) / p[2]);
    return p[0] / (c * c) + (t > p[1] ? p[3] * exp(-(t - p[1]) / p[4]) : 0.0);
}

static double exp_shape(double t, const double *p)   /* {A, t_start, rate} */
{
    return t < p[1] ? 0.0 : p[0] * exp(-p[2] * (t - p[1]));
}

static double power_shape(double t, const double *p)   /* {A, t_origin, exponent, t_min} */
{
    return t < p[3] ? 0.0 : p[0] * pow(t - p[1], -p[2]);
}

/* ---- analytic signal and envelope --------------------------------------------------------- */

/* Handbook: the analytic signal of cos(w t) is exp(i w t) (Hilbert transform of cos is sin).
 * With the tone periodic in the record and a record length that is already FFT-friendly, the
 * discrete construction is exact to rounding at every sample. */
START_TEST(test_analytic_cos)
{
    const size_t n = 4096;
    double *x = malloc(n * sizeof(double)), *z = malloc(2 * n * sizeof(double));
    for (size_t j = 0; j < n; j++)
        x[j] = 2.5 * cos(2 * PI_T * 300.0 * (double)j / (double)n + 0.4);
    cs_gate_workspace *ws = cs_gate_alloc();
    ck_assert_int_eq(cs_envelope_analytic(ws, x, n, z, NULL), CS_OK);
    for (size_t j = 0; j < n; j++) {
        double ph = 2 * PI_T * 300.0 * (double)j / (double)n + 0.4;
        ck_assert(fabs(z[2 * j] - 2.5 * cos(ph)) < 1e-11);
        ck_assert(fabs(z[2 * j + 1] - 2.5 * sin(ph)) < 1e-11);
    }
    /* not periodic and padded (1001 -> 1008 points): exact real part, and away from the ends
     * the imaginary part is sin within the edge effects' reach (~1/(2 pi^2 f d), d samples
     * from an end, f in cycles per sample) */
    const size_t m = 1001;
    for (size_t j = 0; j < m; j++)
        x[j] = cos(2 * PI_T * 0.123 * (double)j);
    ck_assert_int_eq(cs_envelope_analytic(ws, x, m, z, NULL), CS_OK);
    for (size_t j = 0; j < m; j++)
        ck_assert(fabs(z[2 * j] - x[j]) < 1e-12);
    for (size_t j = 200; j < m - 200; j++)
        ck_assert_msg(fabs(z[2 * j + 1] - sin(2 * PI_T * 0.123 * (double)j)) < 0.01, "sample %zu", j);
    ck_assert_int_eq(cs_envelope_analytic(ws, x, 1, z, NULL), CS_EINVAL);
    free(x);
    free(z);
    cs_gate_free(ws);
}
END_TEST

/* An amplitude-modulated cosine a(t) cos(w_c t) with a band-limited modulation well below the
 * carrier: the analytic signal's squared magnitude is a(t)^2 (Bedrosian's theorem, handbook:
 * analytic signal of cos is exp). Periodic case: exact; non-periodic: interior points within
 * 1 %. */
static double am(double t, const double *p)   /* {f_m}: (1 + 0.5 cos(2 pi f_m t))^2 */
{
    double a = 1.0 + 0.5 * cos(2 * PI_T * p[0] * t);
    return a * a;
}

START_TEST(test_envelope_am)
{
    cs_gate_workspace *ws = cs_gate_alloc();
    const size_t n = 8192;
    const double dt = 1e-6;
    double fm[1] = {5.0 / ((double)n * dt)};   /* 5 periods in the record */
    double fc = 1000.0 / ((double)n * dt);
    cs_record *r = make_record(n, 0, dt, 0.0, fc, am, fm, 0.0, 1);
    cs_envelope *e = NULL;
    cs_error err;
    ck_assert_msg(cs_envelope_compute(ws, r, NULL, &e, &err) == CS_OK, "%s", err.msg);
    ck_assert(e->from_real);
    for (size_t j = 0; j < n; j++)
        ck_assert_msg(fabs(e->intensity[j] - am((double)j * dt, fm)) < 1e-9, "sample %zu: %g vs %g", j,
                      e->intensity[j], am((double)j * dt, fm));
    cs_envelope_free(e);
    cs_record_free(r);
    /* not periodic: 5.3 modulation periods, carrier off the grid */
    fm[0] = 5.3 / (6000 * dt);
    r = make_record(6000, 0, dt, 0.0, 0.1371 / dt, am, fm, 0.0, 1);
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
    for (size_t j = 600; j < 5400; j++)
        ck_assert(fabs(e->intensity[j] / am((double)j * dt, fm) - 1) < 0.01);
    /* the complex record of the same signal has |x|^2 exactly */
    cs_record *c = make_record(6000, 1, dt, 0.0, 0.1371 / dt, am, fm, 0.0, 1);
    cs_envelope *ec = NULL;
    ck_assert_int_eq(cs_envelope_compute(ws, c, NULL, &ec, NULL), CS_OK);
    ck_assert(!ec->from_real);
    for (size_t j = 0; j < 6000; j++)
        ck_assert(fabs(ec->intensity[j] - am((double)j * dt, fm)) < 1e-12);
    for (size_t j = 600; j < 5400; j++)
        ck_assert(fabs(ec->intensity[j] / e->intensity[j] - 1) < 0.01);
    cs_envelope_free(e);
    cs_envelope_free(ec);
    cs_record_free(r);
    cs_record_free(c);
    cs_gate_free(ws);
}
END_TEST

/* Three passes of a moving average of width b have the variance 3 (b^2 - 1)/12 (variance of a
 * discrete uniform distribution, added three times); the smoothing of a delta must have exactly
 * the variance reported, unit sum, and a constant must stay constant. */
START_TEST(test_smoothing)
{
    const size_t n = 2001;
    double *y = calloc(n, sizeof(double)), *o = malloc(n * sizeof(double));
    y[1000] = 1.0;
    const double sig[] = {0.7, 2.0, 7.3, 40.0};
    for (int i = 0; i < 4; i++) {
        double real = cs_envelope_smooth(y, n, sig[i], o);
        ck_assert(real > 0);
        double b = 2 * floor((sqrt(4 * sig[i] * sig[i] + 1) - 1) / 2 + 0.5) + 1;   /* nearest odd */
        if (b < 3)
            b = 3;   /* sigma >= 0.5 smooths with at least 3 samples */
        ck_assert(tu_close(real * real, 3 * (b * b - 1) / 12, 1e-12));
        if (sig[i] >= 1)
            ck_assert(fabs(real - sig[i]) < 0.6);   /* rounding b to an odd integer */
        double s0 = 0, s2 = 0;
        for (size_t j = 0; j < n; j++) {
            double d = (double)j - 1000.0;
            s0 += o[j];
            s2 += o[j] * d * d;
        }
        ck_assert(tu_close(s0, 1.0, 1e-12));
        ck_assert(tu_close(s2, real * real, 1e-9));
    }
    for (size_t j = 0; j < n; j++)
        y[j] = 3.25;
    ck_assert(cs_envelope_smooth(y, n, 25.0, y) > 0);   /* in place */
    for (size_t j = 0; j < n; j++)
        ck_assert(fabs(y[j] - 3.25) < 1e-12);   /* edges average over what exists */
    ck_assert(cs_envelope_smooth(y, n, 0.2, o) == 0.0);
    ck_assert(cs_envelope_smooth(NULL, n, 1.0, o) < 0);
    free(y);
    free(o);
}
END_TEST

/* Noise floor: E|n|^2 of complex white noise is its power (definition), so floor_raw is that
 * within the statistical error of the quiet region's mean (1/sqrt(6553) = 1.2 %); the quiet
 * region is the pre-trigger stretch when the end is louder, and follows the parameters. */
START_TEST(test_floor)
{
    cs_gate_workspace *ws = cs_gate_alloc();
    const double noise = 0.04;
    double p[3] = {1.0, 40e-6, 2e4};   /* an exponential from 40 us to the end, rate 2e4 s^-1 */
    cs_record *r = make_record(65536, 1, 1e-9, 0.0, 0.0, exp_shape, p, noise, 4);
    cs_envelope *e = NULL;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
    ck_assert_uint_eq(e->quiet_first, 0);   /* the start is quieter than the end */
    ck_assert_uint_eq(e->quiet_count, 6553);
    ck_assert(fabs(e->floor_raw / noise - 1) < 0.05);
    ck_assert(fabs(e->floor / noise - 1) < 0.05);
    ck_assert(e->floor_sigma > 0 && e->floor_sigma < 0.2 * noise);
    ck_assert(tu_close(e->smooth_s, 32.0 * 1e-9, 0.02));   /* automatic: n/2048 samples */
    cs_envelope_free(e);
    cs_envelope_params ep;
    cs_envelope_params_default(&ep);
    ep.quiet = CS_ENVELOPE_QUIET_END;
    ep.smooth_s = 10e-9;
    ck_assert_int_eq(cs_envelope_compute(ws, r, &ep, &e, NULL), CS_OK);
    ck_assert_uint_eq(e->quiet_first, 65536 - 6553);
    ck_assert(e->floor_raw > 1.5 * noise);   /* the tail is still there */
    ck_assert(fabs(e->smooth_s / 10e-9 - 1) < 0.1);
    cs_envelope_free(e);
    ep.quiet = CS_ENVELOPE_QUIET_RANGE;
    ep.quiet_start_s = 1e-6;
    ep.quiet_length_s = 10e-6;
    ck_assert_int_eq(cs_envelope_compute(ws, r, &ep, &e, NULL), CS_OK);
    ck_assert_uint_eq(e->quiet_first, 1000);
    ck_assert_uint_eq(e->quiet_count, 10000);
    cs_envelope_free(e);
    cs_error err;
    ep.quiet_start_s = 60e-6;
    ck_assert_int_eq(cs_envelope_compute(ws, r, &ep, &e, &err), CS_EDATA);
    ck_assert_ptr_null(e);
    ep.quiet = CS_ENVELOPE_QUIET_AUTO;
    ep.quiet_fraction = 0.9;
    ck_assert_int_eq(cs_envelope_compute(ws, r, &ep, &e, &err), CS_EINVAL);
    r->data[7] = NAN;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, &err), CS_EDATA);
    ck_assert_ptr_nonnull(strstr(err.msg, "sample 3"));
    r->n = 10;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, &err), CS_EDATA);
    r->n = 65536;
    cs_record_free(r);
    cs_gate_free(ws);
}
END_TEST

/* Noise of the smoothed intensity: a complex Gaussian's intensity is exponential, its standard
 * deviation equals its mean (common practice), so smoothing with weights h leaves
 * mean * sqrt(sum h^2); for the analytic signal of real white noise the intensity is correlated
 * (integrated autocorrelation 2), which doubles the variance. sum h^2 of a smoothing close to a
 * Gaussian of sigma s samples is 1/(2 sqrt(pi) s). Tolerance 10 %. */
START_TEST(test_floor_sigma)
{
    cs_gate_workspace *ws = cs_gate_alloc();
    for (int cplx = 0; cplx <= 1; cplx++) {
        cs_record *r = make_record(65536, cplx, 1e-8, 0.0, 0.0, NULL, NULL, 0.5, 90 + (unsigned long)cplx);
        cs_envelope *e = NULL;
        ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
        double s = e->smooth_s / 1e-8, sumsq = 1.0 / (2.0 * sqrt(PI_T) * s);
        double expect = e->floor_raw * sqrt((cplx ? 1.0 : 2.0) * sumsq);
        ck_assert_msg(fabs(e->floor_sigma / expect - 1) < 0.1, "%s: floor sigma %.4g, expected %.4g",
                      cplx ? "complex" : "real", e->floor_sigma, expect);
        ck_assert(e->noise_tau >= (cplx ? 1.0 : 2.0) && e->noise_tau < (cplx ? 1.3 : 2.4));
        cs_envelope_free(e);
        cs_record_free(r);
    }
    cs_gate_free(ws);
}
END_TEST

/* ---- burst detection ---------------------------------------------------------------------- */

static const struct burst_case {
    size_t n;
    int cplx;
    double fc;        /* carrier (IF for real records), Hz */
    double tau;       /* sech^2 time constant, s */
    double tail;      /* tail amplitude relative to the peak */
    double noise;     /* noise power relative to the peak */
    unsigned long seed;
} burst_cases[] = {
    {65536, 1, 3e6, 200e-9, 3e-3, 4e-4, 1},
    {65536, 1, -11e6, 200e-9, 3e-3, 4e-4, 2},
    {65536, 1, 0.0, 60e-9, 1e-3, 1e-4, 3},
    {65536, 1, 5e6, 500e-9, 1e-2, 1e-3, 4},     /* strong tail: fades by ~25 us */
    {65536, 0, 80e6, 200e-9, 3e-3, 4e-4, 5},   /* real record on an IF of 80 MHz */
    {262144, 1, 2e6, 300e-9, 2e-3, 2e-4, 6},
};

START_TEST(test_burst_synthetic)
{
    const struct burst_case *c = &burst_cases[_i];
    const double dt = 1e-9, t0 = -2e-6, tD = 5e-6, tt = 8e-6;
    double p[5] = {1.0, tD, c->tau, c->tail, tt};
    cs_record *r = make_record(c->n, c->cplx, dt, t0, c->fc, burst_shape, p, c->noise, c->seed);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_envelope *e = NULL;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
    cs_burst b;
    cs_error err;
    ck_assert_int_eq(cs_burst_detect(e, NULL, &b, &err), CS_OK);
    ck_assert_int_eq(b.status, CS_BURST_FOUND);
    double fwhm = 2 * acosh(sqrt(2.0)) * c->tau;   /* sech^2 FWHM (exact) */
    ck_assert_msg(fabs(b.peak_time_s - tD) < 0.03 * fwhm, "peak at %.6g s, true %.6g s", b.peak_time_s, tD);
    ck_assert_msg(fabs(b.fwhm_s / fwhm - 1) < 0.05, "fwhm %.6g s, true %.6g s", b.fwhm_s, fwhm);
    ck_assert(b.snr > 100);
    ck_assert(b.half_rise_s < b.peak_time_s && b.peak_time_s < b.half_fall_s);
    ck_assert(b.onset_s < b.half_rise_s && b.half_fall_s < b.end_s);
    ck_assert(b.end_s <= b.tail_start_s && b.tail_start_s <= b.fade_s);
    ck_assert(!b.onset_clipped && !b.end_clipped);
    /* the sech^2 falls like 4 P exp(-2 (t - tD)/tau): it reaches the onset/end level (1 % of the
     * peak here) near tD +- (tau/2) ln(400) (a little later on the tail's side) */
    double half_span = 0.5 * c->tau * log(400.0);
    ck_assert_msg(fabs(b.onset_s - (tD - half_span)) < 0.15 * half_span, "onset %.6g s", b.onset_s);
    ck_assert(b.end_s > tD + 0.85 * half_span);
    /* the tail settles once the sech^2 has sunk well below it */
    double cross = tD + 0.5 * c->tau * log(4.0 / c->tail);
    ck_assert_msg(b.tail_start_s > cross, "tail starts at %.6g s, before the crossover %.6g s",
                  b.tail_start_s, cross);
    ck_assert(b.tail_from_rate);
    /* automatic gates around it */
    cs_gate g[2];
    size_t ng;
    ck_assert_int_eq(cs_gate_auto(r, &b, NULL, g, &ng, &err), CS_OK);
    ck_assert_uint_eq(ng, 2);
    ck_assert(fabs(g[0].t_start_s + 0.5 * g[0].length_s - b.peak_time_s) < 2 * dt);
    ck_assert(g[1].t_start_s > b.end_s);
    cs_envelope_free(e);
    cs_record_free(r);
    cs_gate_free(ws);
}
END_TEST

/* Pure noise: no burst (the largest excursion of the smoothed noise stays far below 10 robust
 * sigmas), times NaN, and no automatic gates. */
static const struct noise_case {
    size_t n;
    int cplx;
    unsigned long seed;
} noise_cases[] = {
    {1024, 1, 11}, {65536, 1, 12}, {65536, 0, 13}, {1048576, 1, 14}, {4096, 0, 15}, {20000, 1, 16},
    /* seeds whose short quiet region fooled a MAD-only noise estimate (snr 12 to 15) */
    {1024, 1, 205}, {1024, 1, 285}, {1024, 1, 310}, {4096, 0, 284},
};

START_TEST(test_no_burst)
{
    const struct noise_case *c = &noise_cases[_i];
    cs_record *r = make_record(c->n, c->cplx, 1e-8, 0.0, 0.0, NULL, NULL, 0.5, c->seed);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_envelope *e = NULL;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
    cs_burst b;
    ck_assert_int_eq(cs_burst_detect(e, NULL, &b, NULL), CS_OK);
    ck_assert_msg(b.status == CS_BURST_NONE, "noise taken for a burst: snr %g", b.snr);
    ck_assert(b.snr < 8);
    ck_assert(isnan(b.peak_time_s) && isnan(b.fwhm_s) && isnan(b.end_s));
    cs_gate g[2];
    size_t ng = 9;
    cs_error err;
    ck_assert_int_eq(cs_gate_auto(r, &b, NULL, g, &ng, &err), CS_EDATA);
    ck_assert_uint_eq(ng, 0);
    cs_burst_decay *d = NULL;
    ck_assert_int_eq(cs_burst_decay_analyse(e, &b, &d, NULL), CS_EDATA);
    ck_assert_ptr_null(d);
    cs_envelope_free(e);
    cs_record_free(r);
    cs_gate_free(ws);
}
END_TEST

/* A weak burst is found when it clears the threshold and refused when min_snr asks for more. */
START_TEST(test_burst_threshold)
{
    double p[5] = {0.3, 5e-6, 300e-9, 0.0, 1.0};   /* peak 3 x the noise power */
    cs_record *r = make_record(32768, 1, 1e-9, 0.0, 1e6, burst_shape, p, 0.1, 21);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_envelope *e = NULL;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
    cs_burst b;
    ck_assert_int_eq(cs_burst_detect(e, NULL, &b, NULL), CS_OK);
    ck_assert_int_eq(b.status, CS_BURST_FOUND);
    ck_assert(fabs(b.peak_time_s - 5e-6) < 100e-9);
    cs_burst_params bp;
    cs_burst_params_default(&bp);
    bp.min_snr = 2 * b.snr;
    ck_assert_int_eq(cs_burst_detect(e, &bp, &b, NULL), CS_OK);
    ck_assert_int_eq(b.status, CS_BURST_NONE);
    bp.min_snr = -1;
    ck_assert_int_eq(cs_burst_detect(e, &bp, &b, NULL), CS_EINVAL);
    cs_envelope_free(e);
    cs_record_free(r);
    cs_gate_free(ws);
}
END_TEST

/* ---- decay laws --------------------------------------------------------------------------- */

/* Exponential decay in noise: the fitted rate is unbiased and its error calibrated. Over 40
 * noise realisations the pulls (fit - truth)/error must have a mean within 0.5 and a standard
 * deviation between 0.6 and 1.6 (a rough check: 40 pulls determine their spread to ~11 %). */
START_TEST(test_fit_exp_calibration)
{
    const double dt = 1e-8, rate = 1.0 / 4e-6;
    double p[3] = {1.0, 2e-6, rate};
    cs_gate_workspace *ws = cs_gate_alloc();
    enum { REPS = 40 };
    double pulls[REPS];
    for (int k = 0; k < REPS; k++) {
        cs_record *r = make_record(4096, 1, dt, 0.0, 7e5, exp_shape, p, 0.01, 1000 + (unsigned long)k);
        cs_envelope *e = NULL;
        ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
        cs_burst_fit f;
        cs_error err;
        ck_assert_msg(cs_burst_fit_exp(e, 2.5e-6, 20e-6, &f, &err) == CS_OK, "%s", err.msg);
        ck_assert_int_eq(f.status, CS_OK);
        ck_assert_int_eq(f.law, CS_BURST_LAW_EXP);
        ck_assert(isnan(f.exponent));
        ck_assert(f.nbins >= 20);
        ck_assert(f.rate_err_per_s > 0 && f.rate_err_per_s < 0.1 * rate);
        pulls[k] = (f.rate_per_s - rate) / f.rate_err_per_s;
        if (k == 0) {   /* the intercept is ln I at t_from: ln(exp(-rate 0.5 us)) */
            ck_assert(fabs(f.ln_amplitude - (-rate * 0.5e-6)) < 5 * f.ln_amplitude_err + 0.05);
        }
        cs_envelope_free(e);
        cs_record_free(r);
    }
    double mean = gsl_stats_mean(pulls, 1, REPS), sd = gsl_stats_sd(pulls, 1, REPS);
    ck_assert_msg(fabs(mean) < 0.5, "mean pull %.3f", mean);
    ck_assert_msg(sd > 0.6 && sd < 1.6, "pull spread %.3f", sd);
    cs_gate_free(ws);
}
END_TEST

/* A pure power-law tail (t - t0)^-p (no noise after the onset, tiny noise before it to give a
 * floor, taken from that stretch): the fitted exponent is p within 0.5 %, for several p; the
 * range must follow the origin. */
START_TEST(test_fit_power)
{
    const double dt = 1e-8, pw[] = {0.5, 1.0, 2.0, 3.0};
    cs_gate_workspace *ws = cs_gate_alloc();
    for (int i = 0; i < 4; i++) {
        double p[4] = {1.0, 1e-6, pw[i], 1.2e-6};   /* A, origin 1 us, exponent, starts 1.2 us */
        p[0] = pow(1e-7, pw[i]);                    /* I = 1 at 100 ns after the origin */
        cs_record *r = make_record(40000, 1, dt, 0.0, 2e6, power_shape, p, 1e-16, 50 + (unsigned long)i);
        cs_envelope *e = NULL;
        cs_envelope_params ep;
        cs_envelope_params_default(&ep);
        ep.quiet = CS_ENVELOPE_QUIET_RANGE;   /* before the onset: the signal never fades */
        ep.quiet_start_s = 0;
        ep.quiet_length_s = 1e-6;
        ck_assert_int_eq(cs_envelope_compute(ws, r, &ep, &e, NULL), CS_OK);
        cs_burst_fit f;
        cs_error err;
        ck_assert_msg(cs_burst_fit_power(e, 1e-6, 1.5e-6, 399e-6, &f, &err) == CS_OK, "%s", err.msg);
        ck_assert_int_eq(f.law, CS_BURST_LAW_POWER);
        ck_assert_msg(fabs(f.exponent / pw[i] - 1) < 0.005, "exponent %.5f, true %.2f", f.exponent, pw[i]);
        ck_assert(isnan(f.rate_per_s));
        ck_assert(f.exponent_err > 0 && f.exponent_err < 0.01);
        ck_assert_int_eq(cs_burst_fit_power(e, 2e-6, 1.5e-6, 399e-6, &f, &err), CS_EINVAL);
        ck_assert_int_eq(f.status, CS_EINVAL);
        cs_envelope_free(e);
        cs_record_free(r);
    }
    cs_gate_free(ws);
}
END_TEST

/* Too little signal: a fit over a stretch of pure noise has no bins above the floor. */
START_TEST(test_fit_no_signal)
{
    cs_record *r = make_record(4096, 1, 1e-8, 0.0, 0.0, NULL, NULL, 1.0, 77);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_envelope *e = NULL;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
    cs_burst_fit f;
    cs_error err;
    ck_assert_int_eq(cs_burst_fit_exp(e, 0.0, 40e-6, &f, &err), CS_EDATA);
    ck_assert_int_eq(f.status, CS_EDATA);
    ck_assert(isnan(f.rate_per_s));
    ck_assert_ptr_nonnull(strstr(err.msg, "above the noise floor"));
    ck_assert_int_eq(cs_burst_fit_exp(e, 10e-6, 5e-6, &f, &err), CS_EINVAL);
    cs_envelope_free(e);
    cs_record_free(r);
    cs_gate_free(ws);
}
END_TEST

/* Regimes of the synthetic burst: the local rate starts near the sech^2's asymptotic 2/tau and
 * settles at the tail's 1/tt; the exponential tail starts after the burst's end, a
 * non-exponential stretch lies between them, and the exponential fit recovers 1/tt. */
START_TEST(test_decay_regimes)
{
    const double dt = 1e-9, tD = 5e-6, tau = 200e-9, tt = 8e-6;
    double p[5] = {1.0, tD, tau, 3e-3, tt};
    cs_record *r = make_record(65536, 1, dt, -2e-6, 3e6, burst_shape, p, 4e-4, 31);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_envelope *e = NULL;
    ck_assert_int_eq(cs_envelope_compute(ws, r, NULL, &e, NULL), CS_OK);
    cs_burst b;
    ck_assert_int_eq(cs_burst_detect(e, NULL, &b, NULL), CS_OK);
    ck_assert_int_eq(b.status, CS_BURST_FOUND);
    cs_burst_decay *d = NULL;
    cs_error err;
    ck_assert_msg(cs_burst_decay_analyse(e, &b, &d, &err) == CS_OK, "%s", err.msg);
    ck_assert(d->n >= 20);
    for (size_t i = 1; i < d->n; i++)
        ck_assert(d->t_s[i] > d->t_s[i - 1] && d->t_s[0] > b.peak_time_s);
    /* early: the burst's own decay, 2/tau asymptotically (d ln sech^2 / dt) */
    double early = 0;
    for (size_t i = 0; i < d->n; i++)
        if (d->t_s[i] < tD + 3 * tau && d->rate_per_s[i] > early)
            early = d->rate_per_s[i];
    ck_assert_msg(early > 0.7 * 2 / tau && early < 1.2 * 2 / tau, "early rate %.4g", early);
    ck_assert(tu_close(d->burst_end_s, b.end_s, 0));
    ck_assert(isfinite(d->exp_start_s) && d->exp_start_s > b.end_s);
    ck_assert(tu_close(d->exp_start_s, b.tail_start_s, 1e-12));
    ck_assert(tu_close(d->nonexp_start_s, b.end_s, 1e-12));
    ck_assert(tu_close(d->nonexp_end_s, d->exp_start_s, 1e-12));
    ck_assert_int_eq(d->exp_fit.status, CS_OK);
    ck_assert_msg(fabs(d->exp_fit.rate_per_s * tt - 1) < 0.1 &&
                      fabs(d->exp_fit.rate_per_s - 1 / tt) < 4 * d->exp_fit.rate_err_per_s,
                  "tail rate %.4g +- %.2g, true %.4g", d->exp_fit.rate_per_s, d->exp_fit.rate_err_per_s, 1 / tt);
    /* late local rates agree with the tail's within their errors, mostly */
    size_t late = 0, ok = 0;
    for (size_t i = 0; i < d->n; i++)
        if (d->t_s[i] >= d->exp_start_s) {
            late++;
            ok += fabs(d->rate_per_s[i] - 1 / tt) < 3 * d->rate_err_per_s[i];
        }
    ck_assert(late >= 5 && ok >= late - 1);
    ck_assert_int_eq(d->power_fit.status, CS_OK);   /* the stretch between is fitted as well */
    ck_assert(d->power_fit.exponent > 0);
    cs_burst_decay_free(d);
    /* tail detection off: tail_start = end */
    cs_burst_params bp;
    cs_burst_params_default(&bp);
    bp.find_tail = 0;
    ck_assert_int_eq(cs_burst_detect(e, &bp, &b, NULL), CS_OK);
    ck_assert(b.tail_start_s == b.end_s && !b.tail_from_rate);
    /* the gate anchors follow the detected features */
    cs_gate_spec s;
    cs_gate g;
    ck_assert_int_eq(cs_gate_spec_parse("t=tail:fade", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, &b, &g, NULL), CS_OK);
    ck_assert(fabs(g.t_start_s - b.tail_start_s) < 1e-6 * dt + dt);
    cs_envelope_free(e);
    cs_record_free(r);
    cs_gate_free(ws);
}
END_TEST

static Suite *gate_burst_suite(void)
{
    Suite *s = suite_create("gate_burst");
    TCase *tc = tcase_create("envelope");
    tcase_add_test(tc, test_analytic_cos);
    tcase_add_test(tc, test_envelope_am);
    tcase_add_test(tc, test_smoothing);
    tcase_add_test(tc, test_floor);
    tcase_add_test(tc, test_floor_sigma);
    suite_add_tcase(s, tc);
    tc = tcase_create("burst");
    tcase_add_loop_test(tc, test_burst_synthetic, 0, N_OF(burst_cases));
    tcase_add_loop_test(tc, test_no_burst, 0, N_OF(noise_cases));
    tcase_add_test(tc, test_burst_threshold);
    suite_add_tcase(s, tc);
    tc = tcase_create("decay");
    tcase_add_test(tc, test_fit_exp_calibration);
    tcase_add_test(tc, test_fit_power);
    tcase_add_test(tc, test_fit_no_signal);
    tcase_add_test(tc, test_decay_regimes);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(gate_burst_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
