/* Matrix-pencil estimates of frequencies, decay rates, amplitudes and phases of damped complex
 * exponentials in a uniformly sampled record.
 *
 * Model. Sample k (k = 0 .. n-1, time t_k = k dt) of the record is taken to be
 *     y_k = sum_{j<M} A_j exp(i phi_j) exp((-Gamma_j / 2 + 2 pi i f_j) t_k) + noise
 * with white noise of equal variance in every sample (in each of I and Q for complex records).
 * f_j is a cyclic frequency in Hz relative to the record's local oscillator (the caller adds the
 * LO); Gamma_j is the INTENSITY (population) decay rate in s^-1, the project's convention: the
 * amplitude decays as exp(-Gamma t / 2), the power as exp(-Gamma t), and the Lorentzian line of
 * that component has FWHM Gamma_j / (2 pi) Hz (cs_pencil_component.fwhm_hz).
 * Amplitudes and phases refer to the first sample (t = 0); to refer them to a time t0, multiply
 * the complex amplitude by exp((-Gamma / 2 + 2 pi i f) t0).
 *
 * Method: the total-least-squares matrix pencil of Y. Hua and T. K. Sarkar, IEEE Trans. Acoust.
 * Speech Signal Process. 38(5), 814-824 (1990), with first-order error propagation. The numerical
 * choices (how the singular vectors are found without a complex SVD, how the eigenvalues of the
 * complex reduced pencil are found with GSL's real solver, cost) are explained at the top of
 * src/pencil.c.
 *
 * Real records (is_complex = 0). A real signal is a sum of conjugate pairs: a damped cosine
 * A cos(2 pi f t + phi) exp(-Gamma t) appears as two components at +f and -f, each of amplitude
 * A/2 and phases +phi and -phi, so M must count both (a cosine needs order 2). Either read the
 * pairs that way, or turn the record into its analytic signal first (then order 1 per line).
 * Frequencies are then only meaningful in [0, 1/(2 dt)).
 *
 * Frequency range. Frequencies are found modulo the sampling rate of the samples analysed, in
 * (-1/(2 dt'), 1/(2 dt')], dt' = decimation * dt. Record reduction (max_samples, below) by block
 * averaging lowers that rate: lines outside the reduced band alias.
 *
 * Errors. The reported standard errors are the first-order propagation of white noise through
 * the whole estimator (singular subspace, pencil eigenvalues, linear amplitudes), with the noise
 * level taken from the residuals (or given in noise_sd). They describe this estimator's own
 * scatter, not a lower bound. They assume white noise, an order that is right and a signal well
 * above the noise: for a component near the noise floor the first-order picture, and so the
 * error, becomes unreliable. Numbers that cannot be computed are NaN and error_status says why.
 *
 * Transforms. The Hankel products and the error convolutions are FFTs of an FFTW-friendly length
 * (2^a 3^b 5^c 7^d >= the samples used), run with FFTW plans from a gate workspace's plan cache
 * (collshift/gate.h): cs_pencil_estimate_ws uses the caller's workspace, so a length met again
 * reuses its plans; cs_pencil_estimate makes a workspace for the call and frees it.
 *
 * Thread safety: cs_pencil_estimate is reentrant (each call allocates its own workspace), and so
 * is cs_pencil_estimate_ws with one gate workspace per thread (FFTW planning is serialised by
 * the gate module's planner lock); both turn GSL's abort-on-error handler off for the whole
 * process, as every collshift module using GSL does. */
#ifndef CS_PENCIL_H
#define CS_PENCIL_H

#include <stddef.h>
#include <collshift/error.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Largest model order accepted (fixed or automatic). */
#define CS_PENCIL_MAX_ORDER 32
/* Fewest samples (after reduction) that can be analysed at all. */
#define CS_PENCIL_MIN_SAMPLES 4

/* How the model order M is chosen when it is not given (order == 0). With sigma_1 >= sigma_2 >=
 * ... the singular values of the Hankel data matrix, K = max_order + 1 of them computed, and the
 * noise floor the root-mean-square of all the others (from the trace of Y^H Y, so without
 * computing them):
 *   NOISE: M = the number of leading singular values with sigma_k >= noise_threshold * floor.
 *          For white noise alone the largest singular value stayed below 3.3 floors in 999 of
 *          1000 simulated records of 100 to 3000 samples (2.8 in 99 %), hence the default 3.5;
 *          records of a few dozen samples scatter more (32 samples: 4.8 at 99 %) and want a
 *          larger threshold. A line is found when its singular value, roughly
 *          |amplitude| sqrt((n - L)(L + 1)) for a slowly decaying one, passes the threshold.
 *   GAP:   M = the k <= max_order maximising sigma_k / sigma_{k+1} (Hua and Sarkar's "largest
 *          gap"; always at least 1, so it cannot say "no signal").
 * In both, a singular value below rel_threshold * sigma_1 never counts (the numerical floor),
 * and M is at most n_used / 6, which leaves at least as many singular values for the floor as
 * are computed. */
typedef enum cs_pencil_order_rule {
    CS_PENCIL_ORDER_NOISE = 0,
    CS_PENCIL_ORDER_GAP = 1
} cs_pencil_order_rule;

/* How a record longer than max_samples is shortened. */
typedef enum cs_pencil_reduce {
    CS_PENCIL_REDUCE_AVERAGE = 0,  /* the mean of each block of D consecutive samples, D the
                                      smallest with floor(n / D) <= max_samples (a trailing
                                      partial block is dropped). Exact for the model (poles z^D,
                                      amplitudes corrected back); keeps nearly all the
                                      information about lines well inside |f| < 1/(2 D dt), but
                                      lines outside that band alias */
    CS_PENCIL_REDUCE_TRUNCATE = 1  /* keep the first max_samples samples */
} cs_pencil_reduce;

/* Tunables (GSL-style: start from cs_pencil_default_parameters()). */
typedef struct cs_pencil_parameters {
    size_t order;                     /* number of exponentials M; 0 (default) = choose it */
    size_t max_order;                 /* largest automatic M, 1 .. CS_PENCIL_MAX_ORDER
                                         (default 8) */
    cs_pencil_order_rule order_rule;  /* default CS_PENCIL_ORDER_NOISE */
    double noise_threshold;           /* NOISE rule: factor over the floor, > 1 (default 3.5) */
    double rel_threshold;             /* numerical floor relative to sigma_1, in [1e-7, 1)
                                         (default 1e-6; see src/pencil.c for why not lower) */
    double pencil_fraction;           /* pencil parameter L = round(pencil_fraction * n_used),
                                         in [0.1, 0.9] (default 1/3; Hua and Sarkar recommend
                                         n/3 .. n/2), then kept within [M + 1, n_used - M - 1] */
    size_t max_samples;               /* longer records are reduced to at most this many samples
                                         (default 8192, at least 16) */
    cs_pencil_reduce reduce;          /* default CS_PENCIL_REDUCE_AVERAGE */
    double noise_sd;                  /* noise standard deviation per input sample (per real
                                         component for complex records), in sample units;
                                         0 (default) = estimate it from the residuals */
} cs_pencil_parameters;

cs_pencil_parameters cs_pencil_default_parameters(void);

/* One damped exponential. Errors are standard errors (NaN when not computable). */
typedef struct cs_pencil_component {
    double freq_hz, freq_hz_err;          /* cyclic frequency relative to the LO, Hz */
    double gamma_per_s, gamma_per_s_err;  /* intensity decay rate Gamma, s^-1 (negative: growing) */
    double fwhm_hz, fwhm_hz_err;          /* Gamma / (2 pi): Lorentzian FWHM of the line, Hz */
    double amplitude, amplitude_err;      /* |complex amplitude| at t = 0, sample units */
    double phase_rad, phase_rad_err;      /* its argument at t = 0, in (-pi, pi] */
    double pole_re, pole_im;              /* z = exp((-gamma + 2 pi i f) dt_s) for the input dt */
} cs_pencil_component;

/* Result of cs_pencil_estimate; the arrays belong to it (cs_pencil_result_release). */
typedef struct cs_pencil_result {
    size_t order;                    /* M, the number of components */
    cs_pencil_component *comp;       /* M components by decreasing amplitude (amplitudes equal to
                                        1e-9 relative: higher frequency first), or NULL */
    size_t nsingular;                /* singular values computed: M + 1 (fixed order) or
                                        max_order + 1 (automatic; fewer for records shorter
                                        than 6 max_order samples) */
    double *singular;                /* those leading singular values of the Hankel matrix of the
                                        samples analysed, descending, sample units; the first M
                                        to full accuracy, the others Rayleigh-Ritz values (lower
                                        bounds, typically within 2 %) */
    double noise_floor;              /* RMS of the remaining singular values (see order rules) */
    double noise_sd;                 /* noise SD per input sample (per real component) used for
                                        the errors: given, or from the residuals (scaled by
                                        sqrt(decimation) back to input samples) */
    int noise_sd_estimated;          /* 1: from the residuals; 0: parameters.noise_sd */
    double rms_residual;             /* sqrt(mean |y - model|^2) over the samples analysed */
    int error_status;                /* CS_OK when the errors were computed; CS_EDATA (errors
                                        NaN) when no degrees of freedom are left for the noise
                                        estimate, the pencil's eigenvectors are (nearly)
                                        dependent (coincident poles), or a singular value used
                                        is zero */
    size_t n_input;                  /* samples given */
    size_t n_used;                   /* samples analysed after reduction */
    size_t decimation;               /* D: block length of REDUCE_AVERAGE, else 1 */
    size_t pencil_param;             /* L: the Hankel matrix is (n_used - L) x (L + 1) */
    double dt_s;                     /* the input sampling interval */
    int is_complex;                  /* as given */
    size_t subspace_dim;             /* size of the Krylov basis that found the singular vectors */
    double subspace_residual;        /* largest ||G s - sigma^2 s|| / max(sigma^2, 1e-3 sigma_1^2)
                                        of the singular vectors s used (G = Y^T conj(Y));
                                        converged: <= 1e-10 */
} cs_pencil_result;

/* Make *r empty (no arrays). NULL-safe. */
void cs_pencil_result_init(cs_pencil_result *r);
/* Free the arrays of *r and make it empty again. NULL-safe; *r must have been initialised. */
void cs_pencil_result_release(cs_pencil_result *r);

/* Estimate the components of the n samples at `samples` (interleaved re, im when is_complex,
 * else n reals; borrowed), spaced dt_s seconds apart.
 * p may be NULL (defaults). *out must be initialised (cs_pencil_result_init, or a previous
 * result, which is released first). On success it receives the components and diagnostics.
 * Returns
 *   CS_OK;
 *   CS_ENOCONV when the iteration for the singular vectors stopped at its limit before its
 *     tolerance: *out is still filled (subspace_residual says how far it got);
 *   CS_EDATA for too few samples (fewer than CS_PENCIL_MIN_SAMPLES after reduction), a sample
 *     that is not finite, a record that is all zero, no singular value above the threshold (NOISE
 *     rule: *out then holds the singular values and order 0), or poles so strongly growing that
 *     the model overflows;
 *   CS_EINVAL for NULL samples or out, dt_s not finite and > 0, parameters out of range, or an
 *     order larger than CS_PENCIL_MAX_ORDER or than the record allows (n_used >= 2 M + 2);
 *   CS_ENOMEM.
 * Except where said, *out is empty after a failure. *err (NULL-safe) gets the message. */
int cs_pencil_estimate(const double *samples, size_t n, int is_complex, double dt_s,
                       const cs_pencil_parameters *p, cs_pencil_result *out, cs_error *err);

struct cs_gate_workspace;
/* cs_pencil_estimate with the FFT plans taken from (and left in) ws's plan cache
 * (cs_gate_alloc; ws NULL: a workspace for this call only). Returns as cs_pencil_estimate, plus
 * CS_EUNSUP when FFTW cannot plan a transform. */
int cs_pencil_estimate_ws(struct cs_gate_workspace *ws, const double *samples, size_t n,
                          int is_complex, double dt_s, const cs_pencil_parameters *p,
                          cs_pencil_result *out, cs_error *err);

/* The model of a result at the n sample times k * r->dt_s (k < n), written to out: interleaved
 * re, im when is_complex, else the real part only. Returns CS_OK, or CS_EINVAL for NULL r or out
 * (with n > 0). */
int cs_pencil_eval(const cs_pencil_result *r, size_t n, int is_complex, double *out);

#ifdef __cplusplus
}
#endif
#endif /* CS_PENCIL_H */
