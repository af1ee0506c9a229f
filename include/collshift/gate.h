/* Gating a time record: envelope, burst detection, decay-law diagnostics, gates, gated spectra
 * with their normalisation, spectrogram, and the FFTW plan cache that makes them fast.
 *
 * ---------------------------------------------------------------------------------------------
 * Time axes. A record's sample j (0-based) is at time t_j = rec->t0_s + j * rec->dt_s: the
 * record's time axis, on which every time of an envelope, a burst and the decay diagnostics is
 * given ("absolute" times: t = 0 is wherever the file put it, e.g. the trigger). A GATE, however,
 * is measured from the record's FIRST SAMPLE (start_s = 0 is sample 0), as the stable command
 * line says (`--gate NAME=START:LENGTH[:WINDOW]`); cs_gate.t_start_s gives the absolute time too.
 * A gate [start_s, start_s + length_s) holds the samples j with start_s <= j dt < start_s +
 * length_s (both compared with a tolerance of 1e-6 dt, so "0:10us" at 1 MHz holds exactly 10).
 *
 * ---------------------------------------------------------------------------------------------
 * Gated spectra: conventions and normalisation. For a gate of m samples x_{i0} .. x_{i0+m-1}
 * (complex I + iQ, or real), the window w_0 .. w_{m-1} stretched over the gate (cs_window_fill,
 * periodic or symmetric form) and a transform length N >= pad * m (the padding is zeros):
 *
 *     X(f_k) = dt * sum_{j<m} w_j x_{i0+j} exp(-2 pi i f_k j dt),     f_k = k / (N dt)
 *
 * i.e. the Riemann sum of the continuous Fourier transform of the windowed signal, in
 * (signal unit) * s, with phase referenced to the gate's first sample (time t_gate_s). The power
 * spectral density, in (signal unit)^2 / Hz, is
 *
 *     complex input, TWO-SIDED:  S(f_k) = |X(f_k)|^2 / (dt * sum_j w_j^2),  every k
 *     real input,    ONE-SIDED:  S(f_k) = 2 |X(f_k)|^2 / (dt * sum_j w_j^2),  0 < f_k < Nyquist
 *                                (not doubled at f = 0 and, for even N, at the Nyquist bin)
 *
 * so that (Parseval's theorem) sum_k S(f_k) * df = sum_j w_j^2 |x_{i0+j}|^2 / sum_j w_j^2: the
 * window-weighted mean power in the gate (the plain mean for "rect"), independent of pad; a
 * complex white noise with E|x|^2 = sigma^2 has S = sigma^2 dt (two-sided), a real one with
 * variance sigma^2 has S = 2 sigma^2 dt (one-sided). A complex tone A exp(2 pi i f0 t) on a bin
 * gives |X| = A dt sum_j w_j (coherent gain), so S_peak = A^2 dt (sum w)^2 / sum w^2
 * = A^2 / enbw_hz; a real sine A cos(2 pi f0 t) integrates to A^2 / 2 over its line.
 * Frequencies ascend. Complex input keeps the negative frequencies: k runs over
 * -N/2 .. N/2 - 1 for even N (fftshifted), -(N-1)/2 .. (N-1)/2 for odd N; real input gives
 * k = 0 .. floor(N/2). The local-oscillator frequency lo_hz is ADDED to every frequency of the
 * output axes (psd->freq_hz = lo_hz + f_k); X is always indexed like psd->freq_hz.
 *
 * Transform length. By default N is the smallest EVEN number >= pad * m of the form
 * 2^a 3^b 5^c 7^d (FFTW's fast sizes), and cs_gated_spectrum.nfft says which; with
 * cs_gate_options.exact_length, N = pad * m exactly. Even N lets the transform produce the
 * fftshifted order directly (the window is multiplied by (-1)^j in the one windowing pass).
 *
 * ---------------------------------------------------------------------------------------------
 * Gate specifications (cs_gate_spec_parse), with W = the burst's FWHM duration:
 *
 *     GATE   := NAME '=' START ':' LENGTH [ ':' WINDOW ]
 *     NAME   := 1..31 characters from [A-Za-z0-9_.-]
 *     START  := TIME                          from the record's first sample (the stable form)
 *             | ANCHOR [ ('+' | '-') OFFSET ]  relative to a detected feature
 *     LENGTH := TIME | NUMBER 'w'             a duration (NUMBER 'w' = NUMBER * W)
 *             | 'rest'                        up to the end of the record
 *             | ANCHOR [ ('+' | '-') OFFSET ]  up to that point (the gate ENDS there)
 *     OFFSET := TIME | NUMBER 'w'
 *     TIME   := a number with a time unit, read by cs_quantity_parse ("20us", "1.5 ms", "3e-6s");
 *               a unit is required; START may not be negative
 *     ANCHOR := 'zero'  time 0 of the record's time axis (e.g. the trigger)
 *             | 'onset' | 'peak' | 'end'      the burst's onset, peak and end (cs_burst)
 *             | 'tail'                         start of the exponential tail (cs_burst.tail_start_s)
 *             | 'fade'                         where the envelope sinks into the noise floor
 *     WINDOW := a window specification for cs_window_parse ("hann", "tukey:0.25", "kaiser:8"),
 *               optionally followed by ",periodic" or ",symmetric" (default: periodic form)
 * Examples: "early=0us:2us", "late=20us:200us:hann", "early=peak-2w:4w:hann",
 * "late=end+3w:rest:rect", "burst=onset:end+1w:tukey:0.2,symmetric", "pre=zero-5us:5us".
 * Anchors other than 'zero' and every 'w' need a detected burst (cs_gate_resolve says so).
 * A resolved gate reaching outside the record is cut to it (cs_gate.clipped).
 * Default automatic gates (cs_gate_auto): "early=peak-2w:4w" and "late=end+3w:rest", i.e.
 * CS_GATE_AUTO_EARLY_K = 2 FWHM either side of the peak, and from CS_GATE_AUTO_LATE_M = 3 FWHM
 * after the burst's end to the last sample.
 *
 * ---------------------------------------------------------------------------------------------
 * Threads and FFTW. A workspace (cs_gate_alloc) owns an FFTW plan cache keyed by (length, kind,
 * in-place), window and scratch buffers; use one workspace per thread. Plans are made once
 * and then executed with fftw_execute_dft / _dft_r2c / _dft_c2r on new arrays, which FFTW
 * allows concurrently. Plan creation and destruction, and wisdom import and export, are NOT
 * thread-safe in FFTW: this module does all of them under one process-wide mutex, which other
 * modules that call the FFTW planner must take too (cs_gate_planner_lock / _unlock). Plans are
 * made with FFTW_ESTIMATE unless wisdom for that size is known (then the wisdom's plan is used),
 * or the workspace was told to measure (cs_gate_set_effort). Arrays handed to FFTW by this
 * module are allocated with fftw_malloc, so their SIMD alignment matches the plans'.
 *
 * Wisdom is FFTW's record of measured plans. The default file is
 * $XDG_CACHE_HOME/collshift/fftw-wisdom, or $HOME/.cache/collshift/fftw-wisdom when
 * XDG_CACHE_HOME is unset or empty. Loading and saving never fail hard: a missing or broken
 * file is reported by the status and the module plans without it.
 *
 * Nothing here prints or exits. Every function that takes a `cs_error *err` accepts NULL. */
#ifndef CS_GATE_H
#define CS_GATE_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/io.h>
#include <collshift/window.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ================================================================ workspace and plan cache */

typedef struct cs_gate_workspace cs_gate_workspace;

/* A workspace with an empty plan cache and no scratch (buffers grow on first use and are kept).
 * Returns NULL when memory runs out. */
cs_gate_workspace *cs_gate_alloc(void);
/* Destroy the cached plans (under the planner mutex) and free everything. NULL-safe. */
void cs_gate_free(cs_gate_workspace *ws);

/* Planner effort for plans not covered by wisdom. */
typedef enum cs_gate_effort {
    CS_GATE_EFFORT_ESTIMATE = 0,  /* FFTW_ESTIMATE (default): instant, no measurement */
    CS_GATE_EFFORT_MEASURE,       /* FFTW_MEASURE: times candidate plans (seconds for 2^21) */
    CS_GATE_EFFORT_PATIENT        /* FFTW_PATIENT: longer still */
} cs_gate_effort;

/* Set the effort for plans made from now on (cached plans stay). CS_OK or CS_EINVAL. */
int cs_gate_set_effort(cs_gate_workspace *ws, cs_gate_effort effort);

/* Transform kinds (FFTW's, unnormalised: a forward then backward transform multiplies by n). */
typedef enum cs_gate_fft_kind {
    CS_GATE_FFT_FORWARD = 0,  /* complex -> complex, exp(-2 pi i jk/n): n complex in, n out */
    CS_GATE_FFT_BACKWARD,     /* complex -> complex, exp(+2 pi i jk/n): n complex in, n out */
    CS_GATE_FFT_R2C,          /* real -> complex forward: n reals in, n/2 + 1 complex out */
    CS_GATE_FFT_C2R           /* complex -> real backward: n/2 + 1 complex in, n reals out */
} cs_gate_fft_kind;

/* The plan cache keeps the CS_GATE_PLAN_MAX most recently used plans: a campaign whose gates
 * have ever new lengths would otherwise keep a plan (and its twiddle tables) for every length it
 * ever met, so memory would grow with the number of records; the least recently used plan is
 * destroyed (under the planner mutex) to make room. */
#define CS_GATE_PLAN_MAX 32

/* The cached plan for (n, kind, in_place != 0), created if absent, returned as an opaque handle
 * whose only use is identity (the same pointer for the same key while it stays in the cache,
 * i.e. while it is among the CS_GATE_PLAN_MAX most recently used). NULL when n == 0,
 * n > INT_MAX, kind is invalid or planning failed; then *err says why. */
const void *cs_gate_plan(cs_gate_workspace *ws, size_t n, cs_gate_fft_kind kind, int in_place,
                         cs_error *err);
/* Number of plans in the cache (at most CS_GATE_PLAN_MAX). */
size_t cs_gate_plan_count(const cs_gate_workspace *ws);

/* Execute the cached transform of length n on caller arrays of interleaved (re, im) doubles
 * (reals for the real side of R2C/C2R), borrowed: in is never modified (C2R works on a copy);
 * in == out selects an in-place plan (for R2C/C2R in place the array must hold 2 (n/2 + 1)
 * doubles). Arrays of any alignment work: when their alignment differs from the plan's they
 * are copied through the workspace's scratch. Returns CS_OK, CS_EINVAL (NULL array, n == 0,
 * bad kind), CS_ERANGE (n > INT_MAX), CS_ENOMEM, CS_EUNSUP (FFTW could not plan). */
int cs_gate_fft(cs_gate_workspace *ws, cs_gate_fft_kind kind, size_t n, const double *in,
                double *out, cs_error *err);

/* The process-wide lock around FFTW planner calls (see the top of this file). Recursive use
 * deadlocks: never call a cs_gate function while holding it. */
void cs_gate_planner_lock(void);
void cs_gate_planner_unlock(void);

/* Smallest even n' >= n of the form 2^a 3^b 5^c 7^d (a >= 1); 0 when n is 0 or too large. */
size_t cs_gate_fast_size(size_t n);

/* ================================================================ wisdom */

/* Write the default wisdom path (see the top of this file) into buf of size n.
 * CS_OK; CS_EINVAL when neither XDG_CACHE_HOME nor HOME is set; CS_ERANGE when buf is short. */
int cs_gate_wisdom_default_path(char *buf, size_t n, cs_error *err);
/* Import FFTW wisdom from path (NULL: the default path). Accumulates with the wisdom already
 * known. CS_OK; CS_EIO when the file cannot be read (e.g. it does not exist yet); CS_EFORMAT
 * when FFTW rejects its content; CS_EINVAL when path is NULL and no default exists. Non-fatal:
 * the caller may ignore every failure. */
int cs_gate_wisdom_load(const char *path, cs_error *err);
/* Export all wisdom to path (NULL: the default path, whose folder is created if needed),
 * atomically (cs_write_atomic). CS_OK; CS_EIO; CS_ENOMEM; CS_EINVAL as for _load. */
int cs_gate_wisdom_save(const char *path, cs_error *err);
/* Forget all wisdom of the process (fftw_forget_wisdom, under the planner mutex). Cached plans
 * keep working. */
void cs_gate_wisdom_forget(void);

/* ================================================================ envelope */

/* Which part of the record gives the noise floor. */
typedef enum cs_envelope_quiet {
    CS_ENVELOPE_QUIET_AUTO = 0,  /* the quieter (lower mean intensity) of the first and last
                                    quiet_fraction of the record: the pre-trigger stretch when
                                    there is one, otherwise the end (default) */
    CS_ENVELOPE_QUIET_END,       /* the last quiet_fraction of the record */
    CS_ENVELOPE_QUIET_START,     /* the first quiet_fraction (pre-trigger) */
    CS_ENVELOPE_QUIET_RANGE      /* [quiet_start_s, quiet_start_s + quiet_length_s), measured
                                    from the first sample like a gate */
} cs_envelope_quiet;

typedef struct cs_envelope_params {
    double smooth_s;         /* standard deviation of the Gaussian smoothing, s; 0 = automatic:
                                max(4 dt, n dt / 2048). Realised as three passes of a centred
                                moving average of odd width b with 3 (b^2 - 1)/12 = sigma^2 */
    cs_envelope_quiet quiet; /* default CS_ENVELOPE_QUIET_AUTO */
    double quiet_fraction;   /* default 0.1; in (0, 0.5] */
    double quiet_start_s;    /* CS_ENVELOPE_QUIET_RANGE only */
    double quiet_length_s;   /* CS_ENVELOPE_QUIET_RANGE only */
} cs_envelope_params;

void cs_envelope_params_default(cs_envelope_params *p);

/* Instantaneous intensity of a record and its robust noise floor. */
typedef struct cs_envelope {
    size_t n;                /* samples, as the record */
    double t0_s, dt_s;       /* the record's time axis */
    int from_real;           /* 1 when computed through the analytic signal of a real record */
    double *intensity;       /* |x|^2 for complex x = I + iQ; |z|^2 for a real record, with
                                z = x + i H[x] the analytic signal (so a cos(...) gives a^2),
                                in (signal unit)^2; n values */
    double *smooth;          /* intensity smoothed with sigma smooth_s; n values */
    double smooth_s;         /* the standard deviation actually realised, s */
    double floor;            /* median of `smooth` in the quiet region */
    double floor_sigma;      /* noise standard deviation of `smooth` there: the larger of
                                1.4826 * MAD(smooth) and sqrt(var(intensity) * noise_tau *
                                sum of the squared smoothing weights) */
    double floor_raw;        /* mean of `intensity` there: the noise power E|noise|^2 */
    size_t quiet_first, quiet_count;  /* the quiet region's samples */
    double noise_tau;        /* integrated autocorrelation of the intensity's noise, samples:
                                1 for complex white noise, 2 for a real record's analytic signal
                                (or more when estimated from a correlated quiet region); the
                                decay fits multiply their bin variances by it */
} cs_envelope;

/* Envelope of rec (borrowed). Real records: the analytic signal is made by one r2c transform of
 * the record zero-padded to cs_gate_fast_size(n), zeroing the negative frequencies, doubling the
 * positive ones (not DC nor Nyquist) and one backward c2c transform (Marple 1999), so the
 * transforms come from ws's plan cache. *out is allocated (free with cs_envelope_free).
 * Returns CS_OK; CS_EINVAL (NULL argument, bad parameter); CS_EDATA (fewer than 16 samples, a
 * non-finite sample, dt <= 0, an empty quiet region); CS_ENOMEM; CS_EUNSUP (FFTW failed). */
int cs_envelope_compute(cs_gate_workspace *ws, const cs_record *rec,
                        const cs_envelope_params *p, cs_envelope **out, cs_error *err);
void cs_envelope_free(cs_envelope *e);

/* Analytic signal z = x + i H[x] of n >= 2 reals (borrowed) into z (2n doubles, interleaved,
 * borrowed), through the FFT as above with the padded length cs_gate_fast_size(n). Real part:
 * x itself; imaginary part: its Hilbert transform (edge effects within a few samples of each
 * end). Returns as cs_gate_fft, plus CS_EINVAL for n < 2. */
int cs_envelope_analytic(cs_gate_workspace *ws, const double *x, size_t n, double *z,
                         cs_error *err);

/* Smooth y (n values, borrowed) with three passes of a centred moving average of odd width
 * b = 2 round((sqrt(4 sigma^2 + 1) - 1)/2) + 1 >= 3, approximating a Gaussian of standard
 * deviation sigma_samples (>= 0; below 0.5 y is copied), into out (n values; may equal y). At the edges the average runs over the samples that exist.
 * Returns the standard deviation realised, in samples (0 for a copy), or -1 when out of memory
 * or on a NULL argument. */
double cs_envelope_smooth(const double *y, size_t n, double sigma_samples, double *out);

/* ================================================================ burst detection */

typedef enum cs_burst_status {
    CS_BURST_FOUND = 0,      /* a burst significantly above the floor */
    CS_BURST_NONE = 1        /* no burst: (peak - floor) < min_snr * floor_sigma, or no
                                half-maximum crossing on either side */
} cs_burst_status;

typedef struct cs_burst_params {
    double min_snr;          /* significance: (peak - floor) / floor_sigma of the envelope's
                                smoothed intensity must reach this; default 10 */
    double edge_fraction;    /* onset/end level relative to the peak height; default 1e-2 */
    double edge_nsigma;      /* ... but at least this many floor_sigma above the floor; default 5 */
    double smooth_ratio;     /* refined smoothing: sigma = smooth_ratio * FWHM; default 0.1;
                                0 keeps the envelope's smoothing */
    int find_tail;           /* 1 (default): find where the exponential tail starts from the local
                                decay rate (cs_burst_decay); 0: tail_start = end */
} cs_burst_params;

void cs_burst_params_default(cs_burst_params *p);

/* A detected burst. Times are on the record's time axis (absolute); durations in s. */
typedef struct cs_burst {
    cs_burst_status status;
    double snr;              /* (peak - floor) / floor_sigma on the envelope's smoothing */
    double floor;            /* noise floor of the smoothing used below */
    double floor_sigma;
    double peak_time_s;      /* maximum of the refined smoothing, refined by a parabola */
    double peak;             /* its height (including the floor), (signal unit)^2 */
    double half_rise_s;      /* crossings of floor + (peak - floor)/2, linearly interpolated */
    double half_fall_s;
    double fwhm_s;           /* half_fall - half_rise, minus the smoothing in quadrature:
                                sqrt(measured^2 - (2.3548 smooth_s)^2) */
    double fwhm_measured_s;  /* half_fall - half_rise as measured on the smoothed intensity */
    double smooth_s;         /* sigma of the refined smoothing, s */
    double level;            /* onset/end level: floor + max(edge_fraction (peak - floor),
                                edge_nsigma floor_sigma) */
    double onset_s;          /* last upward crossing of `level` before the peak (interpolated) */
    double end_s;            /* first downward crossing of `level` after the peak */
    double tail_start_s;     /* max(end_s, start of the exponential tail); = end_s when no tail
                                regime was found or find_tail == 0 */
    double fade_s;           /* where the decay sinks into the noise: first crossing of
                                floor + edge_nsigma floor_sigma after the peak, on the heavier
                                of the envelope's and the refined smoothing (>= end_s; the last
                                sample when it never sinks) */
    int onset_clipped;       /* 1: no crossing before the peak; onset_s = first sample */
    int end_clipped;         /* 1: no crossing after the peak; end_s = last sample */
    int tail_from_rate;      /* 1: tail_start_s came from the local decay rate */
} cs_burst;

/* Detect the burst in env (borrowed). p may be NULL for defaults. Steps: significance on the
 * envelope's smoothing; then the intensity is smoothed again with sigma = smooth_ratio x FWHM
 * (iterated up to 4 times until the width settles within 2 %), and peak, half-maximum
 * crossings, onset, end, fade and the tail are measured on that smoothing. Returns CS_OK also
 * when no burst is found (out->status == CS_BURST_NONE, times NaN); CS_EINVAL (NULL env/out,
 * bad parameter); CS_ENOMEM. */
int cs_burst_detect(const cs_envelope *env, const cs_burst_params *p, cs_burst *out,
                    cs_error *err);

/* ================================================================ decay-law diagnostics */

typedef enum cs_burst_law {
    CS_BURST_LAW_EXP = 0,    /* I = A exp(-rate (t - t_from)):  ln I linear in t */
    CS_BURST_LAW_POWER       /* I = A (t - t_origin)^(-exponent): ln I linear in ln(t - t_origin) */
} cs_burst_law;

/* A weighted straight-line fit to the logarithm of the binned intensity above the floor. The
 * raw intensity is averaged in bins (linear bins for EXP, logarithmic in t - t_origin for
 * POWER; at least 8 samples each); a bin's value is ln(mean - floor_raw) with standard error
 * (scatter in the bin / sqrt(count)) / (mean - floor_raw); bins less than 3 standard errors
 * above the floor are dropped. Fitted with gsl_fit_wlinear. Errors come from the weights and
 * are multiplied by sqrt(chi2/dof) when that exceeds 1 (errors_scaled = 1). */
typedef struct cs_burst_fit {
    int status;              /* CS_OK, or why the fit failed (CS_EDATA: fewer than 3 usable bins) */
    cs_burst_law law;
    double t_from_s, t_to_s; /* fitted range (absolute times) */
    double t_origin_s;       /* POWER: the origin (usually the peak); EXP: t_from_s */
    double rate_per_s;       /* EXP: decay rate of the intensity, s^-1 (NaN for POWER) */
    double rate_err_per_s;
    double exponent;         /* POWER: p of (t - t_origin)^-p (NaN for EXP) */
    double exponent_err;
    double ln_amplitude;     /* intercept: ln I at t_from_s (EXP) or at t - t_origin = 1 s */
    double ln_amplitude_err;
    double cov;              /* covariance of intercept and slope as fitted */
    double chi2;
    size_t dof;
    size_t nbins;            /* bins used */
    int errors_scaled;
} cs_burst_fit;

/* Fit an exponential decay over [t_from_s, t_to_s] (absolute times) of env. The status is
 * returned and also stored in fit->status. CS_OK; CS_EINVAL (NULL, empty or reversed range);
 * CS_EDATA (fewer than 3 bins above the floor). */
int cs_burst_fit_exp(const cs_envelope *env, double t_from_s, double t_to_s, cs_burst_fit *fit,
                     cs_error *err);
/* Fit a power law (t - t_origin_s)^-p over [t_from_s, t_to_s], t_from_s > t_origin_s. Returns as
 * cs_burst_fit_exp. */
int cs_burst_fit_power(const cs_envelope *env, double t_origin_s, double t_from_s,
                       double t_to_s, cs_burst_fit *fit, cs_error *err);

/* The local decay rate and the regimes of the decay after the peak. */
typedef struct cs_burst_decay {
    size_t n;                /* points on the logarithmic time axis */
    double *t_s;             /* bin centres, absolute times, ascending (after the peak) */
    double *rate_per_s;      /* local -d ln I / dt, s^-1: slope of a weighted line through 7
                                neighbouring log-spaced bins (3 either side, fewer at the ends) */
    double *rate_err_per_s;  /* its standard error */
    /* Regime boundaries, absolute times (NaN when absent). They can be used as gate edges. */
    double burst_end_s;      /* = cs_burst.end_s */
    double nonexp_start_s;   /* a non-exponential stretch between the burst and the tail ... */
    double nonexp_end_s;     /* ... (NaN when the tail starts at the burst's end) */
    double exp_start_s;      /* where the local rate becomes constant within its noise: the
                                earliest point whose rate (and the next) agree with the weighted
                                mean of all later rates within 3 standard errors, and whose
                                later non-overlapping rates pass a chi2 test of constancy at the
                                1e-3 level (at least 8 points) */
    double exp_end_s;        /* last point with signal (= fade) */
    cs_burst_fit exp_fit;    /* exponential fit over [exp_start_s, exp_end_s] */
    cs_burst_fit power_fit;  /* power-law fit (origin: the peak) over the non-exponential
                                stretch, or status CS_EDATA when there is none */
} cs_burst_decay;

/* Decay diagnostics of env after the burst b (both borrowed; b->status must be FOUND).
 * The log axis starts at peak + FWHM/2 (at least 4 samples after the peak) and runs to the fade
 * point, with 20 bins per decade (ratio 10^(1/20)) and at least 8 samples per bin.
 * *out is allocated (cs_burst_decay_free). Returns CS_OK; CS_EINVAL; CS_EDATA (no burst, or
 * fewer than 7 bins after the peak); CS_ENOMEM. */
int cs_burst_decay_analyse(const cs_envelope *env, const cs_burst *b, cs_burst_decay **out,
                           cs_error *err);
void cs_burst_decay_free(cs_burst_decay *d);

/* ================================================================ gates */

#define CS_GATE_NAME_MAX 32
/* Default automatic gates: early = peak +- K FWHM; late = end + M FWHM to the end. */
#define CS_GATE_AUTO_EARLY_K 2.0
#define CS_GATE_AUTO_LATE_M 3.0

/* A gate, resolved to times. */
typedef struct cs_gate {
    char name[CS_GATE_NAME_MAX];
    double start_s;          /* from the record's first sample, s (>= 0) */
    double length_s;         /* > 0 */
    cs_window window;
    int periodic;            /* CS_WINDOW_PERIODIC (default) or CS_WINDOW_SYMMETRIC */
    double t_start_s;        /* rec->t0_s + start_s (absolute; informative) */
    int clipped;             /* 1 when cs_gate_resolve had to cut the gate to the record */
} cs_gate;

/* Fill *g from explicit values (start/length from the first sample); w NULL = hann. CS_OK or
 * CS_EINVAL (bad name, negative start, non-positive length, invalid window). */
int cs_gate_init(cs_gate *g, const char *name, double start_s, double length_s,
                 const cs_window *w, int periodic, cs_error *err);

/* The samples of gate g in rec: first index and count. CS_OK; CS_ERANGE when the gate reaches
 * beyond the record or holds fewer than 2 samples; CS_EINVAL. */
int cs_gate_samples(const cs_gate *g, const cs_record *rec, size_t *first, size_t *count,
                    cs_error *err);

typedef enum cs_gate_anchor {
    CS_GATE_ANCHOR_FIRST = 0,  /* the record's first sample (plain times) */
    CS_GATE_ANCHOR_ZERO,       /* t = 0 of the record's time axis */
    CS_GATE_ANCHOR_ONSET,
    CS_GATE_ANCHOR_PEAK,
    CS_GATE_ANCHOR_END,
    CS_GATE_ANCHOR_TAIL,
    CS_GATE_ANCHOR_FADE,
    CS_GATE_ANCHOR_REST        /* just after the last sample (LENGTH 'rest') */
} cs_gate_anchor;

/* A point in time: anchor + offset_s + offset_w * FWHM. */
typedef struct cs_gate_point {
    cs_gate_anchor anchor;
    double offset_s;
    double offset_w;
} cs_gate_point;

/* A parsed, not yet resolved gate specification. */
typedef struct cs_gate_spec {
    char name[CS_GATE_NAME_MAX];
    cs_gate_point start;
    int until;               /* 0: the gate lasts length_s + length_w * FWHM; 1: it ends at `stop` */
    double length_s, length_w;
    cs_gate_point stop;      /* until == 1 ('rest' is {CS_GATE_ANCHOR_REST, 0, 0}) */
    cs_window window;
    int periodic;
    int window_given;        /* 1 when the text named a window */
} cs_gate_spec;

/* Parse a gate specification (grammar at the top of this file). default_window: used when the
 * text names none (NULL = hann). Returns CS_OK; CS_EINVAL (syntax: message quotes the text and
 * says what was expected), CS_EUNIT (a time without or with a wrong unit), CS_ERANGE (a
 * negative START, a non-positive LENGTH, a window parameter out of range). */
int cs_gate_spec_parse(const char *text, const cs_window *default_window, cs_gate_spec *spec,
                       cs_error *err);
/* 1 when resolving spec needs a detected burst (a burst anchor or a 'w'), else 0. */
int cs_gate_spec_needs_burst(const cs_gate_spec *spec);
/* Write spec back as text that parses to the same gate (times in s with %.17g). Returns buf. */
char *cs_gate_spec_format(const cs_gate_spec *spec, char *buf, size_t n);

/* Resolve spec against rec and burst (burst may be NULL when not needed). The gate is cut to
 * the record when it reaches beyond it (g->clipped = 1). Returns CS_OK; CS_EINVAL; CS_EDATA
 * (needs a burst and burst is NULL or NONE; the tail/fade anchor is unknown); CS_ERANGE (the gate
 * ends before it starts, or lies outside the record, or keeps fewer than 2 samples). */
int cs_gate_resolve(const cs_gate_spec *spec, const cs_record *rec, const cs_burst *burst,
                    cs_gate *g, cs_error *err);

/* The automatic early and late gates ("early=peak-2w:4w", "late=end+3w:rest") with window w
 * (NULL = hann), periodic form. Writes up to 2 gates and their number to *ngates: 2, or 1 when
 * the late gate would keep fewer than 2 samples (then only "early"). CS_OK; CS_EDATA when the
 * burst is NONE; CS_ERANGE when not even the early gate fits; CS_EINVAL. */
int cs_gate_auto(const cs_record *rec, const cs_burst *burst, const cs_window *w,
                 cs_gate gates[2], size_t *ngates, cs_error *err);

/* ================================================================ gated spectra */

typedef enum cs_gate_average {
    CS_GATE_AVERAGE_POWER = 0,  /* y = mean over shots of each shot's PSD (default) */
    CS_GATE_AVERAGE_COHERENT    /* y = |mean over shots of X|^2 / (dt sum w^2) (x2 one-sided):
                                   for phase-locked shots; incoherent parts average away */
} cs_gate_average;

typedef struct cs_gate_options {
    size_t pad;              /* zero-padding factor >= 1; default 1 */
    int exact_length;        /* 1: N = pad * m exactly; 0 (default): next even fast size */
    double lo_hz;            /* local-oscillator frequency added to the axis; default 0 */
    int remove_mean;         /* 1: subtract the window-weighted mean of the gate first; default 0 */
    int keep_complex;        /* 1 (default): fill X; 0: X stays NULL (saves memory) */
    cs_gate_average average; /* several shots: how they are combined */
} cs_gate_options;

void cs_gate_options_default(cs_gate_options *o);

/* A gated spectrum. psd and X belong to it; free with cs_gated_spectrum_free. */
typedef struct cs_gated_spectrum {
    cs_gate gate;            /* the gate applied */
    cs_spectrum *psd;        /* freq_hz ascending (lo_hz included), y = PSD, (unit)^2/Hz; sigma:
                                standard error of the mean PSD over shots (power average of >= 2
                                shots), else NULL. meta: psd_convention ("two-sided" or
                                "one-sided"), gate, window, pad, nfft, enbw_hz, lo_hz, nshots,
                                average */
    double *X;               /* psd->n complex values (re, im interleaved), indexed like freq_hz;
                                the mean over shots; (unit) * s; NULL unless keep_complex.
                                Allocated with fftw_malloc */
    size_t first;            /* the gate's first sample */
    size_t m;                /* samples in the gate */
    size_t nfft;             /* transform length N */
    size_t pad;
    double dt_s;
    double t_gate_s;         /* absolute time of the gate's first sample: X's phase reference */
    double df_hz;            /* 1 / (N dt) */
    double sum_w, sum_w2;    /* sum of the window samples and of their squares */
    double enbw_hz;          /* sum w^2 / ((sum w)^2 dt): equivalent noise bandwidth */
    double lo_hz;
    int one_sided;           /* 1 for real input */
    size_t nshots;
    cs_gate_average average;
} cs_gated_spectrum;

/* Gated spectrum of one record (borrowed) through gate g (borrowed); o NULL = defaults.
 * *out: NULL -> allocated; non-NULL -> a spectrum from an earlier call, reused (its arrays are
 * kept when the sizes match, so a loop over records does not allocate). On failure a reused
 * *out is left valid but unspecified; a newly allocated one is freed and *out stays NULL.
 * Returns CS_OK; CS_EINVAL (NULL argument, pad == 0, invalid window); CS_ERANGE (gate beyond
 * the record, fewer than 2 samples, N > INT_MAX); CS_EDATA (a non-finite sample in the gate,
 * dt <= 0); CS_ENOMEM; CS_EUNSUP (FFTW could not plan). */
int cs_gate_spectrum(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *g,
                     const cs_gate_options *o, cs_gated_spectrum **out, cs_error *err);

/* Statistics of averaged neighbouring bins. For white circular Gaussian noise seen through a
 * gate of m samples with window w in an N-point transform (zero-padded when N > m), the power
 * spectra of bins l apart are correlated by |rho(l)|^2 with
 * rho(l) = sum_t w_t^2 e^{-2 pi i l t / N} / sum_t w_t^2 (Isserlis' theorem). The mean of K
 * adjacent bins then has K times its variance equal to one bin's variance times
 *     *g = sum_{|l| < K} (1 - |l| / K) |rho(l)|^2     (1 for K = 1),
 * which tends, for long blocks, to
 *     *ginf = N sum w^4 / (sum w^2)^2                   (Parseval; pad = N / m for rect),
 * the factor by which errors from fitting single bins as independent must be scaled (it is
 * enbw/df only for the rectangular window). Exact for blocks where the noise dominates; where
 * a line dominates, its part of a bin's variance is correlated as Re(rho) instead of |rho|^2
 * and depends on where the signal sits in the gate. Rectangular windows use the Dirichlet
 * kernel in closed form; others are summed over the gate (lags beyond 64 N/m are dropped:
 * a tapered window's correlation has fallen far below 1e-6 there). Either output may be NULL.
 * Returns CS_OK, CS_EINVAL (m < 1, N < m, K < 1, invalid window), CS_ENOMEM. */
int cs_gate_block_variance(const cs_window *w, int periodic, size_t m, size_t nfft, size_t K, double *g,
                           double *ginf);

/* Several gates of one record: out[i] for gates[i] (each reused as above). Stops at the first
 * failure (out[i] for later gates untouched). */
int cs_gate_spectra(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *gates,
                    size_t ngates, const cs_gate_options *o, cs_gated_spectrum **out,
                    cs_error *err);

/* One gate over several shots (records of the same kind and dt; the gate must fit every one),
 * averaged as o->average says; nshots in the result. X is always the coherent mean. Returns as
 * cs_gate_spectrum, plus CS_EDATA for shots of mixed kind or dt (message names the shot). */
int cs_gate_spectrum_shots(cs_gate_workspace *ws, cs_record *const *recs, size_t nrec,
                           const cs_gate *g, const cs_gate_options *o, cs_gated_spectrum **out,
                           cs_error *err);

void cs_gated_spectrum_free(cs_gated_spectrum *s);

/* ---- the core, for callers that manage their own arrays (spectrogram, simulations) */

/* Number of output frequencies for transform length nfft: nfft (complex), nfft/2 + 1 (real). */
size_t cs_gate_nfreq(size_t nfft, int is_complex);
/* The output frequency axis (cs_gate_nfreq values, ascending, lo_hz added) into freq_hz. */
void cs_gate_freq_axis(size_t nfft, double dt_s, int is_complex, double lo_hz, double *freq_hz);

/* PSD (and optionally X) of samples [first, first + m) of rec through window w (NULL = hann)
 * in the given form, zero-padded to nfft >= m, with the conventions at the top of this file.
 * psd (cs_gate_nfreq values) and X (2 cs_gate_nfreq doubles) are borrowed; either may be NULL.
 * *sum_w and *sum_w2 (may be NULL) receive the window sums. Returns as cs_gate_spectrum. */
int cs_gate_psd_samples(cs_gate_workspace *ws, const cs_record *rec, size_t first, size_t m,
                        const cs_window *w, int periodic, size_t nfft, int remove_mean,
                        double *psd, double *X, double *sum_w, double *sum_w2, cs_error *err);

/* ================================================================ spectrogram */

typedef struct cs_spectrogram_params {
    size_t segment;          /* samples per segment; 0 = default: 256, or the record if shorter */
    size_t hop;              /* samples between segment starts; 0 = segment / 4 */
    size_t pad;              /* zero padding factor >= 1 (transform = even fast size >= pad *
                                segment); default 1 */
    cs_window window;        /* default hann */
    int periodic;            /* default periodic form */
    double lo_hz;            /* added to the frequency axis */
    double start_s;          /* analyse [start_s, start_s + length_s) from the first sample; */
    double length_s;         /* length_s == 0: to the end */
} cs_spectrogram_params;

void cs_spectrogram_params_default(cs_spectrogram_params *p);

/* Short-time spectra: segment i covers samples [s0 + i hop, s0 + i hop + segment); each row is
 * a gated PSD with the conventions of the gated spectra (two-sided for complex input, fftshifted;
 * one-sided for real input). */
typedef struct cs_spectrogram {
    size_t ntime, nfreq;
    double *time_s;          /* ntime segment centres, absolute times: t0 + (first + (seg-1)/2) dt */
    double *freq_hz;         /* nfreq, ascending, lo_hz included */
    double *psd;             /* ntime x nfreq, row-major (psd[i * nfreq + k]), (unit)^2/Hz */
    size_t segment, hop, nfft;
    int one_sided;
    double lo_hz, enbw_hz;
    cs_window window;
} cs_spectrogram;

/* Spectrogram of rec (borrowed); p NULL = defaults. *out allocated (cs_spectrogram_free).
 * Returns CS_OK; CS_EINVAL; CS_ERANGE (segment longer than the analysed stretch, < 2);
 * CS_EDATA; CS_ENOMEM; CS_EUNSUP. */
int cs_spectrogram_compute(cs_gate_workspace *ws, const cs_record *rec,
                           const cs_spectrogram_params *p, cs_spectrogram **out, cs_error *err);
void cs_spectrogram_free(cs_spectrogram *s);

/* Write s as CSV in LONG format, atomically (cs_write_atomic): comment lines
 * "# psd_convention = two-sided", "# window = hann", "# segment = 256", "# hop = 64",
 * "# nfft = 256", "# enbw = ... Hz", "# lo = ... Hz", then the header "time_s,frequency_hz,psd"
 * and one row per (time, frequency), time-major, numbers with 17 significant digits.
 * Returns CS_OK, CS_EINVAL, CS_ENOMEM, CS_EIO. */
int cs_spectrogram_write_csv(const char *path, const cs_spectrogram *s, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_GATE_H */
