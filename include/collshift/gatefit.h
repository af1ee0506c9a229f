/* Gate-aware line fits: damped exponentials ("decay") and hyperbolic-secant bursts ("burst")
 * fitted to the samples of one gate exactly as the gated spectrum sees them.
 *
 * ---------------------------------------------------------------------------------------------
 * Why. A line seen through a gate is the true line convolved with the gate's transform. A plain
 * Lorentzian fitted to the gated power spectrum is therefore biased: a rectangular gate that cuts
 * a decay adds the sinc^2 of the gate to the line, and a tapering window (hann) suppresses the
 * sharp leading edge of a decay that starts inside the gate, so the windowed signal rises and
 * falls smoothly and its line comes out NARROWER than the true one (with a hann gate much longer
 * than the decay, the envelope near the gate start is ~ t^2 exp(-Gamma t / 2), whose power
 * spectrum falls as the cube of a Lorentzian: about half the true width; when the decay
 * outlasts the gate instead, truncation broadens the line through either gate, the hann more).
 * And an unweighted least-squares fit of a periodogram gives error bars several times off: each
 * bin of a periodogram scatters exponentially (its standard deviation equals its mean, so the
 * bins on the line are far noisier than those of the floor that set chi2/dof), and windowing and
 * zero-padding correlate neighbouring bins. This module removes both problems
 * (tests/test_gatefit.c measures all of this).
 *
 * ---------------------------------------------------------------------------------------------
 * Models. A model is a sum of components written as names joined by '+' ("decay",
 * "decay+decay", "burst+decay"; spaces around '+' allowed; at most CS_GATEFIT_MAX_COMP). With
 * t_g the time of the gate's first sample (cs_gated_spectrum.t_gate_s, the phase reference of
 * the gated spectrum X), s = t - t_g, and lo the local-oscillator frequency that the gated
 * spectrum adds to its axis, a component of a COMPLEX (I + iQ) record is
 *
 *   decay:  m(t) = A exp(i phi) exp[(2 pi i (f - lo) - Gamma/2) s]
 *           parameters center_hz f (absolute: lo included), gamma_per_s Gamma (the INTENSITY
 *           decay rate: |m|^2 ~ exp(-Gamma s), so the line is a Lorentzian of FWHM Gamma/(2 pi)
 *           Hz), amplitude A and phase phi, both at the gate's first sample;
 *   burst:  m(t) = A exp(i phi) sech((t - t_p)/tau) exp[2 pi i (f - lo) s]
 *           parameters center_hz f, tau_s tau > 0, t_peak_s t_p (absolute time, the record's
 *           axis), amplitude A (the peak amplitude) and phase phi (of the carrier at t_g).
 *           Its intensity A^2 sech^2((t - t_p)/tau) is the mean-field superradiant pulse (a
 *           pulse of intensity FWHM 2 ln(1 + sqrt 2) tau = 1.7627 tau; physics guide section 4:
 *           tau = 2 T_R). Its spectrum: the Fourier transform of sech(t/tau) is
 *           pi tau sech(pi^2 tau nu) (derivation at the top of src/gatefit.c), so its power
 *           spectrum is the `sech2` profile (profile.h) of FWHM 2 ln(1 + sqrt 2)/(pi^2 tau)
 *           = 0.178604/tau, reported as fwhm_hz; its line integral is 2 A^2 tau (Parseval).
 * A REAL record (is_complex = 0) is fitted with the real part of the same sum,
 *   decay:  m(t) = A cos(2 pi (f - lo) s + phi) exp(-Gamma s / 2),
 *   burst:  m(t) = A cos(2 pi (f - lo) s + phi) sech((t - t_p)/tau),
 * with f - lo the frequency in the record (so a real record without a mixer has lo = 0, and the
 * one-sided gated spectrum puts the line at f). The frequency of a real record is defined up to
 * sign and aliasing: the fit finds f - lo in [0, 1/(2 dt)] unless started elsewhere.
 *
 * ---------------------------------------------------------------------------------------------
 * The likelihood. Let x_j (j < m) be the gate's samples, w_j its window, and N >= m the padded
 * transform length. The gated spectrum is X = F W x, F the N x m matrix of the padded DFT
 * (F[k][j] = dt exp(-2 pi i f_k j dt), columns orthogonal: F^H F = N dt^2 I) and W = diag(w).
 * Keep only the m' samples with w_j > 0 (the others do not reach X at all), so that W is
 * invertible and B = F W (N x m') has full column rank. For complex white noise of variance
 * sigma^2 per real component, X given the model mean mu is circular Gaussian with mean B mu and
 * covariance C = 2 sigma^2 B B^H: rank m' in N dimensions, so zero-padding and windowing
 * correlate the bins, which is why independent per-bin weights are wrong. X lies on the range of
 * B with probability 1, and there its exact log-density is, up to terms free of the parameters,
 *     -(X - B mu)^H C^+ (X - B mu) = -e^H B^H (B B^H)^+ B e / (2 sigma^2)
 *                                  = -|e|^2 / (2 sigma^2) = -chi2 / 2,      e = x - mu,
 *     chi2 = sum_{w_j > 0} [(Re e_j)^2 + (Im e_j)^2] / sigma^2,
 * because B^H (B B^H)^+ B is the orthogonal projector onto the row space of B, which is all of
 * C^{m'} (full column rank). Equivalently, in the form that shows the gate: fit the windowed
 * samples w_j x_j with the windowed model w_j mu_j (exactly the windowed, truncated signal that
 * X transforms) with residual weights 1/(w_j sigma): the w_j cancel and give the same chi2. So
 * least squares on the gate's time samples IS the exact Gaussian likelihood of the complex gated
 * spectrum, window and padding included, and it costs O(m') per iteration instead of a dense
 * N x N bin covariance. For a real record x is real and the one-sided X (k = 0 .. N/2, whose
 * real and imaginary parts determine x since N >= m) gives the same result with real residuals.
 * (The power spectrum |X|^2 alone throws the phases away and is not Gaussian: fitting it by
 * least squares is neither this likelihood nor calibrated.) Consequences worth knowing: the
 * window cancels, so a rectangular and a hann gate over the same samples give the same fit
 * except that the hann gate drops its zero end sample(s); the padding does not matter at all;
 * and the errors are the ordinary least-squares covariance sigma^2 (J^T J)^-1.
 *
 * The noise level sigma (per real component, in signal units, like cs_record_noise and the
 * matrix pencil's noise_sd) comes from (cs_gatefit_options.noise):
 *   CS_GATEFIT_NOISE_RESIDUALS (default): sigma^2 = RSS/dof of the fit itself. The errors are
 *       then "scaled by sqrt(chi2/dof)" (errors_scaled = 1; chi2 = RSS in signal units^2,
 *       redchi2 = sigma^2). Right when the model describes the gate; with thousands of residuals
 *       its own scatter is small (relative sd 1/sqrt(2 dof)).
 *   CS_GATEFIT_NOISE_GIVEN: options.noise_sd. Errors unscaled (errors_scaled = 0), and
 *       chi2 = RSS / sigma^2 tests the model.
 *   CS_GATEFIT_NOISE_ENVELOPE: from the quiet stretch of the record (cs_envelope_compute with
 *       default parameters: the quieter of its first and last tenth): sigma = sqrt(floor_raw / 2),
 *       floor_raw being the mean |noise|^2 there, for a complex record E|n|^2 = 2 sigma^2, and
 *       for a real one the power of its analytic signal, also 2 sigma^2. Errors unscaled.
 *   CS_GATEFIT_NOISE_RECORD: cs_record_noise(rec) over the whole record (robust MAD of first
 *       differences: fine when most of the record is noise and the lines are oversampled);
 *       errors unscaled.
 * The noise must be white within the gate for the errors to hold (digitiser noise is; a noise
 * filtered to a bandwidth well below the sampling rate is not: decimate first).
 *
 * ---------------------------------------------------------------------------------------------
 * Solver. GSL's trust-region Levenberg-Marquardt (gsl_multifit_nlinear, More scaling, QR) with
 * the analytic Jacobian. The solver's variables are of order one: a centre is an offset from its
 * starting value in units of 1/(gate length) (decay) or 1/(pi tau_0) (burst); Gamma = e^u / T
 * and tau = T e^u (T = gate length), so Gamma > 0 and tau > 0 hold by construction; t_peak is
 * an offset in units of the starting tau; the complex amplitude A exp(i phi) is fitted as its
 * real and imaginary parts (linear, no phase wrapping) relative to the largest starting
 * amplitude. Convergence: a step |du| <= xtol (1 + |u|) (the solver's or, near the end, the
 * undamped Gauss-Newton step's), or GSL's gradient test with gtol; "no progress" from GSL counts
 * as converged only when the Gauss-Newton step left is below 1e4 xtol. Details and the
 * covariance at the top of src/gatefit.c.
 *
 * Starting values (never the true answer, always from the data; src/gatefit_start.c): bursts
 * from the intensity of the gate (peak time, half-maximum width -> tau, pulse-pair frequency over
 * the half-maximum span), one after the other on what the earlier ones leave; decays from the
 * total-least-squares matrix pencil (pencil.h) of what the bursts leave, after the last burst
 * (falling back to the peaks of the padded periodogram when the pencil fails); then all complex
 * amplitudes by linear least squares. cs_gatefit_options.start overrides any of the nonlinear
 * starting values.
 *
 * ---------------------------------------------------------------------------------------------
 * Ownership: a cs_gatefit_result comes from cs_gatefit_run and is freed with
 * cs_gatefit_result_free (NULL-safe); its arrays belong to it. Records, gates, options and
 * workspaces are borrowed. Nothing here prints or exits; GSL's abort-on-error handler is turned
 * off (for the whole process, as every collshift module using GSL does). Reentrant: use one
 * gate workspace per thread. Every function that takes a `cs_error *err` accepts NULL. */
#ifndef CS_GATEFIT_H
#define CS_GATEFIT_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/fit.h>
#include <collshift/gate.h>
#include <collshift/io.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Largest number of components in one model. */
#define CS_GATEFIT_MAX_COMP 8
/* Parameters of each kind of component (order: see cs_gatefit_param_name). */
#define CS_GATEFIT_DECAY_NPARAMS 4   /* center_hz, gamma_per_s, amplitude, phase_rad */
#define CS_GATEFIT_BURST_NPARAMS 5   /* center_hz, tau_s, t_peak_s, amplitude, phase_rad */
/* 2 ln(1 + sqrt 2) / pi^2: the power-spectrum FWHM of a sech(t/tau) burst is this / tau. */
#define CS_GATEFIT_SECH_FWHM_TAU 0.17860363013582617

typedef enum cs_gatefit_kind {
    CS_GATEFIT_DECAY = 0,    /* damped complex exponential */
    CS_GATEFIT_BURST         /* hyperbolic-secant burst */
} cs_gatefit_kind;

/* "decay" / "burst"; "unknown" otherwise. */
const char *cs_gatefit_kind_name(cs_gatefit_kind k);
/* Number of parameters of a component of kind k (0 for an invalid kind). */
size_t cs_gatefit_kind_nparams(cs_gatefit_kind k);

/* Parse a model text ("decay+burst") into kinds[0 .. *ncomp - 1] (room for max). Returns CS_OK;
 * CS_EINVAL for a NULL argument, an empty text or component, an unknown name (the message quotes
 * it and lists "decay, burst"), or more than max or CS_GATEFIT_MAX_COMP components. */
int cs_gatefit_parse(const char *text, cs_gatefit_kind *kinds, size_t max, size_t *ncomp,
                     cs_error *err);

/* Where the noise level sigma comes from (see the top of this file). */
typedef enum cs_gatefit_noise {
    CS_GATEFIT_NOISE_RESIDUALS = 0,  /* sigma^2 = RSS/dof; errors scaled (default) */
    CS_GATEFIT_NOISE_GIVEN,          /* cs_gatefit_options.noise_sd; errors unscaled */
    CS_GATEFIT_NOISE_RECORD,         /* cs_record_noise(rec); errors unscaled */
    CS_GATEFIT_NOISE_ENVELOPE        /* the quiet stretch of the envelope: sqrt(floor_raw / 2)
                                        (cs_envelope_compute, default parameters); unscaled */
} cs_gatefit_noise;
/* "residuals", "given", "record", "envelope"; "unknown" otherwise. */
const char *cs_gatefit_noise_name(cs_gatefit_noise n);

/* Starting values of one component's nonlinear parameters; NaN (the default) = automatic.
 * Fields that do not belong to the component's kind are ignored. */
typedef struct cs_gatefit_start {
    double center_hz;        /* absolute (lo included) */
    double gamma_per_s;      /* decay: > 0 */
    double tau_s;            /* burst: > 0 */
    double t_peak_s;         /* burst: absolute time */
} cs_gatefit_start;

/* All fields NaN. */
void cs_gatefit_start_init(cs_gatefit_start *s);

/* Tunables (start from cs_gatefit_options_default). */
typedef struct cs_gatefit_options {
    cs_gatefit_noise noise;           /* default CS_GATEFIT_NOISE_RESIDUALS */
    double noise_sd;                  /* CS_GATEFIT_NOISE_GIVEN: sigma per real component, > 0 */
    size_t max_iter;                  /* accepted-step limit, default 200 (>= 1) */
    double xtol;                      /* step tolerance, default 1e-10 (> 0) */
    double gtol;                      /* gradient tolerance (GSL's test), default 1e-10 (>= 0) */
    const cs_gatefit_start *start;    /* NULL (default), or one entry per component */
    size_t nstart;                    /* entries in start: 0 or the number of components */
} cs_gatefit_options;

void cs_gatefit_options_default(cs_gatefit_options *o);

/* One fitted component. Errors are standard errors; NaN when not computable (fit not converged,
 * parameter undetermined) and for fields that do not belong to the kind. */
typedef struct cs_gatefit_component {
    cs_gatefit_kind kind;
    size_t first;                         /* index of its first parameter in value/err/cov */
    double center_hz, center_hz_err;      /* absolute line centre, Hz */
    double offset_hz;                     /* center_hz - lo_hz as fitted: the frequency in the
                                             record (exact, whatever the size of lo_hz) */
    double fwhm_hz, fwhm_hz_err;          /* FWHM of the line's power spectrum: Gamma/(2 pi) for
                                             a decay, CS_GATEFIT_SECH_FWHM_TAU/tau for a burst */
    double gamma_per_s, gamma_per_s_err;  /* decay: intensity decay rate, s^-1 */
    double tau_s, tau_s_err;              /* burst: sech time constant, s */
    double t_peak_s, t_peak_s_err;        /* burst: peak time on the record's axis, s */
    double amplitude, amplitude_err;      /* decay: |m| at the gate's first sample; burst: at
                                             the peak; signal units */
    double phase_rad, phase_rad_err;      /* phase at the gate's first sample, (-pi, pi] */
    cs_gatefit_start start;               /* the starting values used (all fields of the kind
                                             set; the others NaN) */
} cs_gatefit_component;

typedef struct cs_gatefit_result {
    cs_fit_status status;         /* CONVERGED, NOT_CONVERGED, SINGULAR or MODEL_NAN
                                     (cs_fit_status_name gives the word) */
    cs_fit_stop stop;             /* why the solver stopped */
    char *model;                  /* the model text as given */
    size_t ncomp;
    cs_gatefit_component *comp;   /* ncomp components, in the order of the model text */
    size_t nparams;               /* sum of the components' parameters */
    double *value;                /* nparams fitted values (component order, each kind's order) */
    double *err;                  /* nparams standard errors (NaN when not computable) */
    double *cov;                  /* nparams x nparams covariance, row-major, in the units of
                                     value (NaN rows for undetermined parameters) */
    double chi2;                  /* RSS / sigma^2 (GIVEN, RECORD, ENVELOPE) or RSS (RESIDUALS) */
    size_t n;                     /* residuals: 2 per used sample (complex) or 1 (real) */
    size_t dof;                   /* n - nparams */
    double redchi2;               /* chi2 / dof (RESIDUALS: the noise variance sigma^2) */
    double rss;                   /* sum of squared residuals, signal units^2 */
    double noise_sd;              /* the sigma used for the errors, per real component
                                     (RESIDUALS: sqrt(RSS/dof)) */
    cs_gatefit_noise noise;       /* where it came from */
    int errors_scaled;            /* 1 when sigma came from the residuals */
    size_t niter, nfev, njev;
    /* what was fitted */
    cs_gate gate;                 /* the gate (t_start_s set) */
    int is_complex;
    size_t first, m;              /* the gate's samples in the record */
    size_t nused;                 /* samples with window > 0 */
    double t0_s, dt_s;            /* the record's time axis */
    double t_gate_s;              /* time of the gate's first sample */
    double lo_hz;
} cs_gatefit_result;

void cs_gatefit_result_free(cs_gatefit_result *r);

/* Name of parameter i of r ("1.center_hz", "2.tau_s", ...) into buf of size n; "" when i is out
 * of range or r is NULL. Returns buf. */
char *cs_gatefit_param_name(const cs_gatefit_result *r, size_t i, char *buf, size_t n);

/* Fit `model` to the samples of gate g (borrowed) of rec (borrowed) with window weights > 0;
 * lo_hz is the local-oscillator frequency of the record (added to every centre, as in
 * cs_gate_options.lo_hz). ws: a gate workspace for the transforms of the starting values and
 * the envelope (borrowed; NULL: a temporary one is made). o NULL = defaults. On return *out is a result
 * (the caller frees it) whenever the function returns CS_OK or CS_ENOCONV, else NULL.
 * Returns
 *   CS_OK       the fit converged (status CONVERGED) or converged with some parameters
 *               undetermined (status SINGULAR: their errors are NaN);
 *   CS_ENOCONV  status NOT_CONVERGED (iteration limit, no progress) or MODEL_NAN: *out holds the
 *               last point reached, chi2 there and NaN errors;
 *   CS_EINVAL   a NULL argument, lo_hz not finite, an invalid model text, invalid options
 *               (unknown noise source, max_iter 0, xtol <= 0, gtol < 0, nstart neither 0 nor
 *               the number of components, a start out of range, NOISE_GIVEN without a
 *               noise_sd > 0), an invalid window;
 *   CS_ERANGE   the gate reaches beyond the record or holds fewer than 2 samples;
 *   CS_EDATA    a non-finite sample in the gate, dt not > 0, not more residuals than
 *               parameters among the samples with window > 0, an all-zero gate, or
 *               NOISE_RECORD / NOISE_ENVELOPE with a record whose noise level comes out NaN or
 *               0 (or cs_envelope_compute's own CS_EDATA: fewer than 16 samples, ...);
 *   CS_ENOMEM; CS_EUNSUP (FFTW could not plan). */
int cs_gatefit_run(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *g,
                   const char *model, double lo_hz, const cs_gatefit_options *o,
                   cs_gatefit_result **out, cs_error *err);

/* The fitted model at record samples first .. first + n - 1 (times t0_s + j dt_s, the record's
 * axis; outside the gate it is extrapolated) into out: n (re, im) pairs for a complex record,
 * n reals for a real one. Returns CS_OK, or CS_EINVAL for NULL r or out (with n > 0). */
int cs_gatefit_model_eval(const cs_gatefit_result *r, size_t first, size_t n, double *out);

/* The model's gated spectrum through the same transform as the data: the gated PSD
 * (cs_gate_spectrum: r's gate and window, o's padding, transform length, lo_hz axis shift and
 * remove_mean; o NULL = defaults) of the fitted model evaluated at the gate's samples, plus, when
 * with_noise != 0, the expected PSD of the white noise of level r->noise_sd through that window
 * (two-sided complex: 2 sigma^2 dt; one-sided real: 2 sigma^2 dt, sigma^2 dt at 0 and Nyquist;
 * with remove_mean the exact floor of the mean-removed noise, lower near 0). With noise this is
 * the EXPECTED gated PSD of data drawn from the fitted model (the cross terms average to zero),
 * for overlays on the data's gated spectrum made with the same options. *out is allocated or
 * reused as by cs_gate_spectrum; its gate, first, t_gate_s are those of the fit and its source is
 * "gatefit model". Returns CS_OK; CS_EINVAL (NULL argument, pad 0); CS_EDATA (with_noise but
 * the noise level is not finite); CS_ENOMEM; CS_EUNSUP; CS_ERANGE (transform too long). */
int cs_gatefit_model_psd(cs_gate_workspace *ws, const cs_gatefit_result *r,
                         const cs_gate_options *o, int with_noise, cs_gated_spectrum **out,
                         cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_GATEFIT_H */
