/* Window functions for gated spectra: a registry of descriptors, "name[:param]" parsing, sampling
 * in symmetric or periodic (DFT-even) form, and Harris's figures of merit.
 *
 * Windows (name on the command line, parameter, default):
 *   rect             rectangular (no taper)
 *   hann             a = (0.5, 0.5)
 *   hamming          a = (0.54, 0.46)
 *   blackman         a = (0.42, 0.50, 0.08)
 *   exact-blackman   a = (7938, 9240, 1430)/18608
 *   blackman-harris  4-term, -92 dB: a = (0.35875, 0.48829, 0.14128, 0.01168)
 *   flattop          5-term: a = (0.21557895, 0.41663158, 0.277263158, 0.083578947, 0.006947368)
 *   tukey[:alpha]    cosine-tapered, alpha in [0,1] = tapered fraction, default 0.5
 *                    (alpha = 0 is rect, alpha = 1 is hann)
 *   gauss[:sigma]    exp(-x^2/(2 sigma^2)), sigma > 0 in units of HALF the window length,
 *                    default 0.4; Harris's Gaussian alpha is 1/sigma (alpha = 2.5 <-> 0.4)
 *   kaiser[:beta]    I0(beta sqrt(1 - x^2)) / I0(beta), beta >= 0, default 3 pi = 9.42478
 *                    (Harris's Kaiser-Bessel alpha is beta/pi, so the default is his alpha = 3)
 * The first seven are generalised cosine windows  w = sum_k a_k cos(pi k x)  (sources: see
 * src/window.c). Here and in cs_window_type.shape, x in [0,1] is the distance from the window's
 * centre in units of its half-length: x = 0 at the centre, x = 1 at the end points.
 *
 * Sampling. With M = n - 1 (symmetric form) or M = n (periodic, "DFT-even" form), sample k
 * (0 <= k < n) is the shape at x = |2k - M| / M. So the symmetric window has w[k] = w[n-1-k]
 * and both end points at the edge value; for n >= 2 the periodic window of length n is the
 * symmetric one of length n + 1 without its last point (w[k] = w[n-k] for 0 < k < n). Both
 * relations hold exactly (bit for bit). n = 1 gives the single sample 1 in either form.
 * Harris's figures of merit are for the periodic form, which is also the right one for spectral
 * analysis (the gated spectrum's default, CS_WINDOW_DEFAULT_FORM); the symmetric form is for
 * filter design or when the caller wants both ends of a gate weighted alike.
 *
 * Reference: F. J. Harris, "On the use of windows for harmonic analysis with the discrete Fourier
 * transform", Proc. IEEE 66(1), 51-83 (1978).
 *
 * Thread safety: the descriptors are immutable; parse, init, format and fill are reentrant.
 * cs_window_merit and cs_window_merit_samples create and destroy an FFTW plan, which FFTW does
 * not allow concurrently with any other FFTW planner call in the process: serialise them with
 * the caller's own FFTW planning. */
#ifndef CS_WINDOW_H
#define CS_WINDOW_H

#include <stddef.h>
#include <collshift/error.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Values of the `periodic` argument of cs_window_fill and cs_window_merit. */
#define CS_WINDOW_SYMMETRIC 0
#define CS_WINDOW_PERIODIC 1
/* The form to use for spectra when the user does not choose one (Harris 1978). */
#define CS_WINDOW_DEFAULT_FORM CS_WINDOW_PERIODIC
/* Buffer size that always holds a specification written by cs_window_format. */
#define CS_WINDOW_SPEC_MAX 64
/* Largest number of cosine coefficients of any built-in window. */
#define CS_WINDOW_MAX_COEF 5

/* A window: a static const descriptor. Adding a window = one descriptor + one registry row
 * (src/window.c). */
typedef struct cs_window_type {
    const char *name;          /* registry key, e.g. "hann" */
    const char *summary;       /* one line for help texts */
    const char *param_name;    /* "alpha", "sigma", "beta"; NULL when the window has no parameter */
    double param_default;      /* used when the specification gives none (0 without parameter) */
    double param_min;          /* allowed range: param_min <= p <= param_max ... */
    double param_max;          /* ... (INFINITY: no upper bound) */
    int param_min_open;        /* ... except p == param_min when this is 1 */
    size_t ncoef;              /* generalised cosine windows: number of coefficients, else 0 */
    const double *coef;        /* a_0 .. a_{ncoef-1} of w = sum_k a_k cos(pi k x), else NULL */
    /* The continuous window at x in [0,1] (see above) for a parameter already checked. */
    double (*shape)(const struct cs_window_type *t, double x, double param);
} cs_window_type;

/* The built-in windows (also reachable through the registry). */
extern const cs_window_type cs_window_rect;
extern const cs_window_type cs_window_hann;
extern const cs_window_type cs_window_hamming;
extern const cs_window_type cs_window_blackman;
extern const cs_window_type cs_window_exact_blackman;
extern const cs_window_type cs_window_blackman_harris;
extern const cs_window_type cs_window_flattop;
extern const cs_window_type cs_window_tukey;
extern const cs_window_type cs_window_gauss;
extern const cs_window_type cs_window_kaiser;

/* A chosen window: a small value type, copied freely. Build it with cs_window_parse or
 * cs_window_init; a hand-built value is checked again by every function that uses it. */
typedef struct cs_window {
    const cs_window_type *type;  /* borrowed static descriptor */
    double param;                /* the parameter (0 for windows without one) */
} cs_window;

/* ---------------------------------------------------------------- registry */

/* Window named `name` (exact, case-sensitive), or NULL when unknown or name is NULL. */
const cs_window_type *cs_window_find(const char *name);
/* Number of registered windows, and the i-th (NULL when i >= count), in a stable order. */
size_t cs_window_count(void);
const cs_window_type *cs_window_get(size_t i);

/* ---------------------------------------------------------------- choosing a window */

/* Parse "NAME" or "NAME:VALUE" (no spaces; VALUE read with strtod, e.g. "tukey:0.5",
 * "gauss:0.4", "kaiser:8.6") into *w. A window with a parameter given without one gets its
 * default. Returns CS_OK; CS_EINVAL when spec or w is NULL, the name is empty or unknown, a
 * parameterless window is given a value, or VALUE is missing, not a number or not finite;
 * CS_ERANGE when VALUE is outside the window's range (or overflows). On failure *w is
 * {NULL, 0} and *err (NULL-safe) says why, quoting the specification, e.g.
 *   "unknown window 'hanning2': known windows are rect, hann, ..., kaiser"
 *   "window 'tukey:1.5': tukey alpha must be in [0,1]". */
int cs_window_parse(const char *spec, cs_window *w, cs_error *err);

/* *w = {t, param} after checking param against t's range (param is ignored and stored as 0 for
 * a window without a parameter). Returns CS_OK, CS_EINVAL (NULL w or t, non-finite param) or
 * CS_ERANGE (param outside the range); on failure *w is {NULL, 0} and *err says why. */
int cs_window_init(cs_window *w, const cs_window_type *t, double param, cs_error *err);

/* Write the specification of w ("hann", "tukey:0.25": the shortest decimal that reads back as
 * the same double) into buf of size n (CS_WINDOW_SPEC_MAX always suffices), truncating if
 * needed. Writes "" for a NULL or invalid w. Returns buf. */
char *cs_window_format(const cs_window *w, char *buf, size_t n);

/* ---------------------------------------------------------------- sampling */

/* out[k] = window sample k, k < n, in periodic (periodic != 0) or symmetric form (see the top
 * of this file). out is borrowed and must hold n doubles. Returns CS_OK; CS_EINVAL when w, its
 * type or out is NULL or n == 0; CS_ERANGE when w->param is outside the type's range (then
 * nothing is written). */
int cs_window_fill(const cs_window *w, size_t n, int periodic, double *out);

/* ---------------------------------------------------------------- figures of merit */

/* Harris's figures of merit of a sampled window, all from their definitions (Harris 1978),
 * with W(f) = sum_k w[k] exp(-2 pi i f k / n) the window's transform and f in DFT
 * bins (1 bin = sample rate / n). Fields that could not be computed are NaN. */
typedef struct cs_window_merits {
    size_t n;                   /* number of samples */
    double sum;                 /* sum w[k] = W(0): a gated line's amplitude is scaled by it */
    double sum_sq;              /* sum w[k]^2: noise power and PSD normalisation */
    double coherent_gain;       /* sum w / n (1 for rect) */
    double enbw_bins;           /* equivalent noise bandwidth n sum w^2 / (sum w)^2, bins */
    double scallop_loss_db;     /* -20 log10 |W(1/2)| / W(0), dB (3.92 for rect) */
    double worst_case_loss_db;  /* scallop loss + 10 log10 enbw_bins, dB */
    double bw3_bins;            /* full width where |W|^2 = W(0)^2 / 2 (-3.01 dB), bins */
    double bw6_bins;            /* full width where |W| = W(0) / 2 (-6.02 dB), bins */
    double mainlobe_bins;       /* half-width of the main lobe: first minimum of |W| beyond the
                                   6-dB point, bins (2 for hann; the first zero) */
    double sidelobe_db;         /* highest side-lobe level 20 log10 max |W(f)| / W(0) over f from
                                   mainlobe_bins to n/2, dB (negative; -13.26 for rect) */
    double sidelobe_bins;       /* where that maximum is, bins */
} cs_window_merits;

/* Figures of merit of window w sampled with n points in the given form (Harris's tables are for
 * CS_WINDOW_PERIODIC; for large n they no longer depend on n). Equivalent to cs_window_fill and
 * cs_window_merit_samples. Returns as cs_window_merit_samples, plus CS_EINVAL / CS_ERANGE for
 * an invalid w (as cs_window_fill) and CS_ENOMEM. */
int cs_window_merit(const cs_window *w, size_t n, int periodic, cs_window_merits *m, cs_error *err);

/* Figures of merit of any real window w[0..n-1] (borrowed, unchanged). The spectrum is sampled
 * on a grid of 1/16 bin by a zero-padded FFT (FFTW); the crossings of the 3- and 6-dB levels, the
 * value at half a bin, the main-lobe edge and the highest side lobes are then refined by direct
 * sums of W(f) (bisection and golden-section search, to about 1e-10 bin). Side lobes narrower
 * than about 1/8 bin can be missed (a Kaiser window with beta above about 20, whose side lobes
 * are below -150 dB). Cost: one FFT of 16 n points, about 1000 direct sums of n terms, and 16 n
 * doubles of memory. Returns CS_OK; CS_EINVAL when w or m is NULL or n < 2; CS_EDATA when a
 * sample is not finite, sum w <= 0, |W| never falls to the 6-dB level below the Nyquist
 * frequency (n/2 bins), or no side lobe lies below it (then only the side-lobe fields are NaN);
 * CS_ERANGE when 16 n exceeds FFTW's int range; CS_ENOMEM. *err (NULL-safe) gets the message. */
int cs_window_merit_samples(const double *w, size_t n, cs_window_merits *m, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_WINDOW_H */
