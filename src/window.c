/* Window functions: descriptors and registry, "name[:param]" parsing, sampling, figures of merit.
 *
 * Shapes. Every window is a function of x in [0,1], the distance from the centre in units of
 * the half-length, and sample k of an n-point window is that function at x = |2k - M| / M with
 * M = n - 1 (symmetric) or M = n (periodic). In this variable a generalised cosine window
 * sum_k (-1)^k a_k cos(2 pi k m / M) (Harris's form, m counted from the left end) becomes
 * sum_k a_k cos(pi k x), since cos(pi k (1 - 2m/M)) = (-1)^k cos(2 pi k m / M). Only the left
 * half (k <= M/2) is computed; the right half is a copy, so the symmetries are exact and the
 * periodic window of length n is exactly the symmetric one of length n + 1 without its end.
 *
 * Kaiser. I0(beta) overflows a double beyond beta ~ 713, and GSL's gsl_sf_bessel_I0 would then
 * raise a GSL error (whose default handler aborts). The ratio is therefore formed from the
 * scaled function I0s(y) = exp(-y) I0(y) (gsl_sf_bessel_I0_scaled, finite for every y >= 0):
 * I0(a)/I0(beta) = I0s(a)/I0s(beta) * exp(a - beta), with a = beta sqrt((1 - x)(1 + x)).
 * No GSL error can occur for the finite, non-negative arguments used here.
 *
 * Figures of merit (cs_window_merit_samples). The definitions are Harris's (1978):
 * coherent gain sum w / n, ENBW n sum w^2 / (sum w)^2 bins, scalloping loss |W(1/2)|/W(0),
 * worst-case processing loss = scallop loss + 10 log10 ENBW, the 3-dB (half-power) and 6-dB
 * (half-amplitude) full widths, and the highest side-lobe level. The sums are compensated
 * (Neumaier). The spectrum |W(f)| is first sampled on a grid of 1/P bin (P = 16) by one
 * zero-padded in-place real FFT of length P n (so 16 n doubles of memory). A coarser grid saves
 * memory but misses lobes: a Kaiser window's first side lobes are only about 3/(2 beta/pi) bin
 * wide (0.45 bin for beta = 3 pi), and P = 4 already skipped them. On that grid:
 *   - the 3- and 6-dB widths are bracketed by the first grid point below the level and refined
 *     by bisection on the direct sum W(f) = sum_k w[k] exp(-2 pi i f k / n);
 *   - the main lobe ends at the first local minimum of |W| beyond the 6-dB point (a criterion
 *     that ignores the small ripples inside a flat-top window's pass band), refined by a
 *     golden-section search;
 *   - the side lobes are the grid's local maxima beyond that minimum, up to n/2 bins. A lobe
 *     about a bin wide loses at most a factor cos(pi/(2P)) between its peak and the nearest grid
 *     point, so every local maximum within a factor cos(pi/P) of the highest one (at most 16 of
 *     them, the highest first) is refined by golden-section search on the direct sum.
 * The direct sum takes exp(-2 pi i f k / n) as the product of a per-block phase (exact cos/sin
 * every 64 samples) and 64 precomputed in-block phases, so rounding does not accumulate with n.
 *
 * Printed tables. Some entries of Harris's Table I are known to be wrong (A. H. Nuttall,
 * "Some windows with very good sidelobe behavior", IEEE Trans. Acoust. Speech Signal Process.
 * 29(1), 84-91 (1981)); the tests compare with values computed from the definitions. */
#include <collshift/window.h>

#include <complex.h>
#include <fftw3.h>
#include <gsl/gsl_sf_bessel.h>

#include <ctype.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <stdint.h>
#include <string.h>

#define PI 3.14159265358979323846264338327950288

/* ---------------------------------------------------------------- shapes */

static double shape_rect(const cs_window_type *t, double x, double p)
{
    (void)t;
    (void)x;
    (void)p;
    return 1.0;
}

/* Generalised cosine window sum_k a_k cos(pi k x); the smallest terms are added first. */
static double shape_cosine(const cs_window_type *t, double x, double p)
{
    (void)p;
    double s = 0.0;
    for (size_t k = t->ncoef; k-- > 0;)
        s += t->coef[k] * cos(PI * (double)k * x);
    return s;
}

/* Tukey (cosine-tapered) window: flat for x <= 1 - alpha, a half cosine over the outer alpha of
 * each half. In Harris's sample form, w(m) = (1 + cos(pi (2m/(alpha M) - 1)))/2 for
 * m < alpha M / 2 counted from the end, which is this with m = M (1 - x) / 2. */
static double shape_tukey(const cs_window_type *t, double x, double alpha)
{
    (void)t;
    double flat = 1.0 - alpha;
    if (x <= flat)
        return 1.0;
    return 0.5 * (1.0 + cos(PI * (x - flat) / alpha));
}

/* Gaussian window exp(-x^2 / (2 sigma^2)); Harris's alpha is 1/sigma. */
static double shape_gauss(const cs_window_type *t, double x, double sigma)
{
    (void)t;
    double u = x / sigma;
    return exp(-0.5 * u * u);
}

/* Kaiser(-Bessel) window I0(beta sqrt(1 - x^2)) / I0(beta) through the scaled I0 (see the top). */
static double shape_kaiser(const cs_window_type *t, double x, double beta)
{
    (void)t;
    if (beta == 0.0)
        return 1.0;
    double r = (1.0 - x) * (1.0 + x);
    double a = beta * sqrt(r > 0.0 ? r : 0.0);
    return gsl_sf_bessel_I0_scaled(a) / gsl_sf_bessel_I0_scaled(beta) * exp(a - beta);
}

/* ---------------------------------------------------------------- descriptors */

#define NCOEF(a) (sizeof(a) / sizeof((a)[0]))

/* Hann ("hanning", raised cosine): a = (1/2, 1/2). Harris 1978, Table I. */
static const double coef_hann[] = {0.5, 0.5};
/* Hamming: a = (0.54, 0.46). R. W. Hamming, Digital Filters (Prentice-Hall, 1977; from
 * memory); Harris 1978, Table I, uses these rounded values. */
static const double coef_hamming[] = {0.54, 0.46};
/* Blackman: a = (0.42, 0.50, 0.08). R. B. Blackman and J. W. Tukey, The Measurement of Power
 * Spectra (Dover, 1958; from memory); Harris 1978, Table I. */
static const double coef_blackman[] = {0.42, 0.50, 0.08};
/* Exact Blackman: a = (7938, 9240, 1430) / 18608, the exact values that (0.42, 0.50, 0.08)
 * round. Harris 1978, Table I. */
static const double coef_exact_blackman[] = {7938.0 / 18608.0, 9240.0 / 18608.0, 1430.0 / 18608.0};
/* Minimum 4-term Blackman-Harris, the "-92 dB" window: a = (0.35875, 0.48829, 0.14128, 0.01168).
 * Harris 1978, Table I. */
static const double coef_blackman_harris[] = {0.35875, 0.48829, 0.14128, 0.01168};
/* 5-term flat-top: a = (0.21557895, 0.41663158, 0.277263158, 0.083578947, 0.006947368), the set
 * of MATLAB's flattopwin, whose documentation (MathWorks, Signal Processing Toolbox) takes it from
 * G. D'Antona and A. Ferrero, Digital Signal Processing for Measurement Systems (Springer, New
 * York, 2006), pp. 70-72; also shared/guide/physics.md sect. 10. Not in Harris 1978. */
static const double coef_flattop[] = {0.21557895, 0.41663158, 0.277263158, 0.083578947, 0.006947368};

#define COSINE_WINDOW(ident, nm, text, c)                                                  \
    const cs_window_type ident = {nm, text, NULL, 0.0, 0.0, 0.0, 0, NCOEF(c), c, shape_cosine}

const cs_window_type cs_window_rect = {
    "rect", "rectangular (boxcar): no taper", NULL, 0.0, 0.0, 0.0, 0, 0, NULL, shape_rect};
COSINE_WINDOW(cs_window_hann, "hann", "Hann (raised cosine), -31.5 dB side lobes", coef_hann);
COSINE_WINDOW(cs_window_hamming, "hamming", "Hamming 0.54/0.46, -42.7 dB side lobes", coef_hamming);
COSINE_WINDOW(cs_window_blackman, "blackman", "Blackman 0.42/0.50/0.08, -58.1 dB side lobes",
              coef_blackman);
COSINE_WINDOW(cs_window_exact_blackman, "exact-blackman",
              "exact Blackman (7938/9240/1430)/18608, -68.2 dB side lobes", coef_exact_blackman);
COSINE_WINDOW(cs_window_blackman_harris, "blackman-harris",
              "4-term Blackman-Harris, -92 dB side lobes", coef_blackman_harris);
COSINE_WINDOW(cs_window_flattop, "flattop",
              "5-term flat-top (D'Antona-Ferrero), scallop loss < 0.01 dB", coef_flattop);

/* Tukey (cosine-tapered) window, Harris 1978, Table I. alpha = the tapered fraction of the
 * window; default 0.5 (as MATLAB's tukeywin and SciPy's tukey, from memory). */
const cs_window_type cs_window_tukey = {
    "tukey", "Tukey (cosine-tapered); alpha in [0,1] = tapered fraction (0 rect, 1 hann)", "alpha",
    0.5, 0.0, 1.0, 0, 0, NULL, shape_tukey};
/* Gaussian window, Harris 1978, Table I, with sigma = 1/alpha; default sigma = 0.4 (his
 * alpha = 2.5, also the default of MATLAB's gausswin, from memory). */
const cs_window_type cs_window_gauss = {
    "gauss", "Gaussian; sigma > 0 in units of half the window length (Harris alpha = 1/sigma)",
    "sigma", 0.4, 0.0, INFINITY, 1, 0, NULL, shape_gauss};
/* Kaiser window: J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
 * function", Proc. 1974 IEEE Int. Symp. on Circuits and Systems, 20-23 (from memory); Harris's
 * Kaiser-Bessel window with beta = pi alpha (Harris 1978, Table I). Default beta = 3 pi (his
 * alpha = 3, side lobes about -69.6 dB). */
const cs_window_type cs_window_kaiser = {
    "kaiser", "Kaiser-Bessel; beta >= 0 (Harris alpha = beta/pi), 0 is rect", "beta",
    3.0 * PI, 0.0, INFINITY, 0, 0, NULL, shape_kaiser};

/* ---------------------------------------------------------------- registry */

/* The registry: adding a window is one descriptor and one row here. */
static const cs_window_type *const registry[] = {
    &cs_window_rect,
    &cs_window_hann,
    &cs_window_hamming,
    &cs_window_blackman,
    &cs_window_exact_blackman,
    &cs_window_blackman_harris,
    &cs_window_flattop,
    &cs_window_tukey,
    &cs_window_gauss,
    &cs_window_kaiser,
};

#define REGISTRY_SIZE (sizeof registry / sizeof registry[0])

const cs_window_type *cs_window_find(const char *name)
{
    if (!name)
        return NULL;
    for (size_t i = 0; i < REGISTRY_SIZE; i++)
        if (strcmp(registry[i]->name, name) == 0)
            return registry[i];
    return NULL;
}

size_t cs_window_count(void)
{
    return REGISTRY_SIZE;
}

const cs_window_type *cs_window_get(size_t i)
{
    return i < REGISTRY_SIZE ? registry[i] : NULL;
}

/* Registered type whose name is the first len bytes of s, or NULL. */
static const cs_window_type *find_prefix(const char *s, size_t len)
{
    for (size_t i = 0; i < REGISTRY_SIZE; i++)
        if (strlen(registry[i]->name) == len && strncmp(registry[i]->name, s, len) == 0)
            return registry[i];
    return NULL;
}

/* ---------------------------------------------------------------- choosing a window */

static int param_in_range(const cs_window_type *t, double p)
{
    if (!(p <= t->param_max))
        return 0;
    return t->param_min_open ? p > t->param_min : p >= t->param_min;
}

/* "tukey alpha must be in [0,1]", "gauss sigma must be > 0", "kaiser beta must be >= 0". */
static void range_text(const cs_window_type *t, char *buf, size_t n)
{
    if (isfinite(t->param_max))
        snprintf(buf, n, "%s %s must be in %c%g,%g]", t->name, t->param_name,
                 t->param_min_open ? '(' : '[', t->param_min, t->param_max);
    else
        snprintf(buf, n, "%s %s must be %s %g", t->name, t->param_name,
                 t->param_min_open ? ">" : ">=", t->param_min);
}

/* Status of a hand-built or parsed window value (no message). */
static int check_window(const cs_window *w)
{
    if (!w || !w->type || !w->type->shape)
        return CS_EINVAL;
    if (!w->type->param_name)
        return CS_OK;
    if (!isfinite(w->param))
        return CS_EINVAL;
    return param_in_range(w->type, w->param) ? CS_OK : CS_ERANGE;
}

/* Message for a window value that check_window rejected with status rc. */
static int window_error(const cs_window *w, int rc, cs_error *err)
{
    if (!w || !w->type || !w->type->shape)
        return cs_error_set(err, rc, NULL, -1, -1, "no window given");
    char why[128];
    range_text(w->type, why, sizeof why);
    return cs_error_set(err, rc, NULL, -1, -1, "window '%s': %s (got %g)", w->type->name, why,
                        w->param);
}

int cs_window_init(cs_window *w, const cs_window_type *t, double param, cs_error *err)
{
    if (!w)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no window to fill");
    w->type = NULL;
    w->param = 0.0;
    if (!t)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no window type given");
    if (t->param_name) {
        char why[128];
        if (!isfinite(param))
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "window '%s': %s %g is not finite",
                                t->name, t->param_name, param);
        if (!param_in_range(t, param)) {
            range_text(t, why, sizeof why);
            return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "window '%s': %s (got %g)", t->name,
                                why, param);
        }
    }
    w->type = t;
    w->param = t->param_name ? param : 0.0;
    return CS_OK;
}

/* "rect, hann, ..., kaiser" into buf. */
static void known_names(char *buf, size_t n)
{
    size_t used = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < REGISTRY_SIZE && used < n; i++) {
        int k = snprintf(buf + used, n - used, "%s%s", i ? ", " : "", registry[i]->name);
        if (k < 0)
            break;
        used += (size_t)k;
    }
}

int cs_window_parse(const char *spec, cs_window *w, cs_error *err)
{
    if (!w)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no window to fill");
    w->type = NULL;
    w->param = 0.0;
    if (!spec)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no window given");
    if (!*spec)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "empty window name");

    const char *colon = strchr(spec, ':');
    size_t len = colon ? (size_t)(colon - spec) : strlen(spec);
    const cs_window_type *t = find_prefix(spec, len);
    if (!t) {
        char names[256];
        known_names(names, sizeof names);
        if (len == 0)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "window '%s': no name before ':'; known windows are %s", spec, names);
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "unknown window '%.*s'%s%s%s: known windows are %s",
                            (int)len, spec, colon ? " in '" : "", colon ? spec : "", colon ? "'" : "",
                            names);
    }
    if (!colon) {
        w->type = t;
        w->param = t->param_name ? t->param_default : 0.0;
        return CS_OK;
    }
    if (!t->param_name)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "window '%s': %s takes no parameter", spec,
                            t->name);

    const char *s = colon + 1;
    if (!*s)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "window '%s': missing %s after ':'", spec,
                            t->param_name);
    char *end = NULL;
    errno = 0;
    double v = strtod(s, &end);
    if (isspace((unsigned char)*s) || end == s || *end != '\0')
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "window '%s': %s '%s' is not a number", spec,
                            t->param_name, s);
    if (errno == ERANGE && fabs(v) == HUGE_VAL)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "window '%s': %s '%s' is out of range", spec,
                            t->param_name, s);
    if (!isfinite(v))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "window '%s': %s '%s' is not a finite number",
                            spec, t->param_name, s);
    if (!param_in_range(t, v)) {
        char why[128];
        range_text(t, why, sizeof why);
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "window '%s': %s", spec, why);
    }
    w->type = t;
    w->param = v == 0.0 ? 0.0 : v; /* "-0" is 0 */
    return CS_OK;
}

char *cs_window_format(const cs_window *w, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    buf[0] = '\0';
    if (check_window(w) != CS_OK)
        return buf;
    if (!w->type->param_name) {
        snprintf(buf, n, "%s", w->type->name);
        return buf;
    }
    /* Shortest %.*g that reads back as the same double (17 digits always do). */
    char num[40];
    for (int prec = 1; prec <= 17; prec++) {
        snprintf(num, sizeof num, "%.*g", prec, w->param);
        if (strtod(num, NULL) == w->param)
            break;
    }
    snprintf(buf, n, "%s:%s", w->type->name, num);
    return buf;
}

/* ---------------------------------------------------------------- sampling */

/* Fill out[0..n-1] for a checked window (see the top of the file). */
static void fill_checked(const cs_window *w, size_t n, int periodic, double *out)
{
    if (n == 1) {
        out[0] = 1.0;
        return;
    }
    const cs_window_type *t = w->type;
    if (t->shape == shape_rect) {   /* all ones: no call per sample */
        for (size_t k = 0; k < n; k++)
            out[k] = 1.0;
        return;
    }
    size_t m = periodic ? n : n - 1;
    for (size_t k = 0; k <= m / 2; k++) {
        double x = (double)(m - 2 * k) / (double)m;
        double v = t->shape(t, x, w->param);
        out[k] = v;
        if (m - k < n)
            out[m - k] = v;
    }
}

int cs_window_fill(const cs_window *w, size_t n, int periodic, double *out)
{
    if (!out || n == 0 || n > SIZE_MAX / 2)
        return CS_EINVAL;
    int rc = check_window(w);
    if (rc != CS_OK)
        return rc;
    fill_checked(w, n, periodic, out);
    return CS_OK;
}

/* ---------------------------------------------------------------- figures of merit */

#define DTFT_BLOCK 64
#define MAX_CANDIDATES 16
#define GRID_PER_BIN 16 /* P: spectrum grid points per bin */
#define GOLDEN 0.38196601125010515180 /* (3 - sqrt 5) / 2 */

/* |W(f)|^2 by direct summation, f in bins of n. */
static double dtft_power(const double *w, size_t n, double f)
{
    double th = -2.0 * PI * f / (double)n;
    double cb[DTFT_BLOCK], sb[DTFT_BLOCK];
    size_t nb = n < DTFT_BLOCK ? n : DTFT_BLOCK;
    for (size_t b = 0; b < nb; b++) {
        cb[b] = cos(th * (double)b);
        sb[b] = sin(th * (double)b);
    }
    double re = 0.0, im = 0.0;
    for (size_t a = 0; a < n; a += DTFT_BLOCK) {
        size_t len = n - a < DTFT_BLOCK ? n - a : DTFT_BLOCK;
        double sr = 0.0, si = 0.0;
        for (size_t b = 0; b < len; b++) {
            sr += w[a + b] * cb[b];
            si += w[a + b] * sb[b];
        }
        double ph = th * (double)a;
        double c = cos(ph), s = sin(ph);
        re += c * sr - s * si;
        im += s * sr + c * si;
    }
    return re * re + im * im;
}

/* First f in [lo, hi] where |W|^2 / W(0)^2 falls to `level`, given ratio(lo) >= level > ratio(hi). */
static double bisect_level(const double *w, size_t n, double s1sq, double lo, double hi, double level)
{
    for (int it = 0; it < 200 && hi - lo > 1e-12 * (hi > 1.0 ? hi : 1.0); it++) {
        double mid = 0.5 * (lo + hi);
        if (dtft_power(w, n, mid) / s1sq >= level)
            lo = mid;
        else
            hi = mid;
    }
    return 0.5 * (lo + hi);
}

/* Golden-section search for the maximum (sign = 1) or minimum (sign = -1) of |W(f)|^2 on [a, b];
 * writes the abscissa to *fbest and returns |W|^2 there. */
static double golden(const double *w, size_t n, double a, double b, int sign, double *fbest)
{
    double x1 = a + GOLDEN * (b - a), x2 = b - GOLDEN * (b - a);
    double f1 = sign * dtft_power(w, n, x1), f2 = sign * dtft_power(w, n, x2);
    for (int it = 0; it < 200 && b - a > 1e-10; it++) {
        if (f1 > f2) {
            b = x2;
            x2 = x1;
            f2 = f1;
            x1 = a + GOLDEN * (b - a);
            f1 = sign * dtft_power(w, n, x1);
        } else {
            a = x1;
            x1 = x2;
            f1 = f2;
            x2 = b - GOLDEN * (b - a);
            f2 = sign * dtft_power(w, n, x2);
        }
    }
    double f = 0.5 * (a + b);
    *fbest = f;
    return dtft_power(w, n, f);
}

/* Refined position of the minimum of |W| next to grid point `edge` (a grid local minimum). The
 * left interval is searched first, so that of two minima within a grid step (as Blackman's exact
 * zero at 3 bins and a second one 0.06 bin further) the first is found; values below
 * 1e-28 W(0)^2 (-280 dB) count as zero, where the smaller frequency wins. */
static double first_minimum(const double *w, size_t n, double s1sq, size_t edge, double dp)
{
    double fe = (double)edge / dp, fl, fr;
    golden(w, n, (double)(edge - 1) / dp, fe, -1, &fl);
    if (fe - fl > 1e-6) /* not pushed against fe (rounding decides the last 1e-9 bin or so) */
        return fl;
    double vr = golden(w, n, fe, (double)(edge + 1) / dp, -1, &fr);
    double ve = dtft_power(w, n, fe), tiny = 1e-28 * s1sq;
    if (ve <= vr || ve <= tiny)
        return fe;
    return fr;
}

/* Neumaier-compensated sums of w and w^2; returns 0 when a sample is not finite. */
static int sums(const double *w, size_t n, double *s1, double *s2)
{
    double a = 0.0, ca = 0.0, b = 0.0, cb = 0.0;
    for (size_t k = 0; k < n; k++) {
        double x = w[k];
        if (!isfinite(x))
            return 0;
        double t = a + x;
        ca += fabs(a) >= fabs(x) ? (a - t) + x : (x - t) + a;
        a = t;
        double x2 = x * x;
        t = b + x2;
        cb += fabs(b) >= x2 ? (b - t) + x2 : (x2 - t) + b;
        b = t;
    }
    *s1 = a + ca;
    *s2 = b + cb;
    return 1;
}

static void merit_nan(cs_window_merits *m, size_t n)
{
    m->n = n;
    m->sum = m->sum_sq = m->coherent_gain = m->enbw_bins = NAN;
    m->scallop_loss_db = m->worst_case_loss_db = m->bw3_bins = m->bw6_bins = NAN;
    m->mainlobe_bins = m->sidelobe_db = m->sidelobe_bins = NAN;
}

/* |W(j/P)|^2 / W(0)^2 for j = 0 .. P n / 2 into a new fftw_malloc'ed array (*grid), by one
 * zero-padded in-place real FFT of length P n. Returns CS_OK, CS_ERANGE or CS_ENOMEM. */
static int power_grid(const double *w, size_t n, size_t pad, double s1sq, double **grid, cs_error *err)
{
    *grid = NULL;
    if (n > ((size_t)INT_MAX - 2) / pad)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1,
                            "window of %zu samples is too long for a zero-padded FFT", n);
    size_t len = pad * n, half = len / 2;
    double *in = fftw_alloc_real(2 * (half + 1));
    fftw_complex *out = (fftw_complex *)in;
    fftw_plan plan = NULL;
    if (in)
        plan = fftw_plan_dft_r2c_1d((int)len, in, out, FFTW_ESTIMATE);
    if (!plan) {
        fftw_free(in);
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1,
                            "out of memory for a %zu-point FFT of the window", len);
    }
    memcpy(in, w, n * sizeof *w);
    memset(in + n, 0, (2 * (half + 1) - n) * sizeof *in);
    fftw_execute(plan);
    fftw_destroy_plan(plan);
    /* In place: element j is written after complex element j (doubles 2j, 2j+1) was read. */
    for (size_t j = 0; j <= half; j++) {
        double re = creal(out[j]), im = cimag(out[j]);
        in[j] = (re * re + im * im) / s1sq;
    }
    *grid = in;
    return CS_OK;
}

int cs_window_merit_samples(const double *w, size_t n, cs_window_merits *m, cs_error *err)
{
    if (!m)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no place for the figures of merit");
    merit_nan(m, n);
    if (!w)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no window samples given");
    if (n < 2)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "figures of merit need at least 2 window samples, got %zu", n);
    double s1, s2;
    if (!sums(w, n, &s1, &s2))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "window has a sample that is not finite");
    if (!(s1 > 0.0))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "window sum %g must be > 0", s1);
    double dn = (double)n, s1sq = s1 * s1;
    m->sum = s1;
    m->sum_sq = s2;
    m->coherent_gain = s1 / dn;
    m->enbw_bins = dn * s2 / s1sq;
    double scallop = dtft_power(w, n, 0.5) / s1sq;
    m->scallop_loss_db = -10.0 * log10(scallop);
    m->worst_case_loss_db = m->scallop_loss_db + 10.0 * log10(m->enbw_bins);

    size_t pad = GRID_PER_BIN;
    double *g;
    int rc = power_grid(w, n, pad, s1sq, &g, err);
    if (rc != CS_OK)
        return rc;
    size_t last = pad * n / 2; /* grid index of the Nyquist frequency n/2 bins */
    double dp = (double)pad, nyq = (double)last / dp;

    /* 3- and 6-dB points: first grid point below the level, then bisection. */
    size_t j3 = 1, j6;
    while (j3 <= last && g[j3] >= 0.5)
        j3++;
    j6 = j3;
    while (j6 <= last && g[j6] >= 0.25)
        j6++;
    if (j6 > last) {
        fftw_free(g);
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "window spectrum does not fall to -6 dB below the Nyquist frequency");
    }
    m->bw3_bins = 2.0 * bisect_level(w, n, s1sq, (double)(j3 - 1) / dp, (double)j3 / dp, 0.5);
    m->bw6_bins = 2.0 * bisect_level(w, n, s1sq, (double)(j6 - 1) / dp, (double)j6 / dp, 0.25);

    /* Main-lobe edge: first local minimum beyond the 6-dB point. */
    size_t edge = j6;
    while (edge < last && g[edge + 1] <= g[edge])
        edge++;
    if (edge >= last) {
        fftw_free(g);
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "window spectrum has no side lobe below the Nyquist frequency "
                            "(%zu samples are too few)", n);
    }
    m->mainlobe_bins = first_minimum(w, n, s1sq, edge, dp);

    /* Side lobes: the highest grid local maxima beyond the edge, refined. */
    size_t cand[MAX_CANDIDATES];
    size_t ncand = 0;
    for (size_t j = edge + 1; j <= last; j++) {
        if (g[j] < g[j - 1] || (j < last && g[j] < g[j + 1]))
            continue;
        size_t pos = ncand < MAX_CANDIDATES ? ncand : MAX_CANDIDATES;
        while (pos > 0 && g[cand[pos - 1]] < g[j])
            pos--;
        if (pos >= MAX_CANDIDATES)
            continue;
        size_t stop = ncand < MAX_CANDIDATES ? ncand : MAX_CANDIDATES - 1;
        memmove(cand + pos + 1, cand + pos, (stop - pos) * sizeof *cand);
        cand[pos] = j;
        if (ncand < MAX_CANDIDATES)
            ncand++;
    }
    double best = -1.0, fbest = NAN;
    if (ncand > 0) {
        double c = cos(PI / dp), floor_level = g[cand[0]] * c * c;
        for (size_t i = 0; i < ncand && g[cand[i]] >= floor_level; i++) {
            size_t j = cand[i];
            double a = (double)(j - 1) / dp, b = (double)(j + 1) / dp, f;
            if (a < m->mainlobe_bins)
                a = m->mainlobe_bins;
            if (b > nyq)
                b = nyq;
            double v = golden(w, n, a, b, 1, &f) / s1sq;
            if (g[j] > v) {
                v = g[j];
                f = (double)j / dp;
            }
            if (v > best) {
                best = v;
                fbest = f;
            }
        }
    }
    fftw_free(g);
    if (!(best >= 0.0))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "window spectrum has no side lobe");
    m->sidelobe_db = 10.0 * log10(best);
    m->sidelobe_bins = fbest;
    return CS_OK;
}

int cs_window_merit(const cs_window *w, size_t n, int periodic, cs_window_merits *m, cs_error *err)
{
    if (m)
        merit_nan(m, n);
    int rc = check_window(w);
    if (rc != CS_OK)
        return window_error(w, rc, err);
    if (!m)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no place for the figures of merit");
    if (n < 2)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "figures of merit need at least 2 window samples, got %zu", n);
    if (n > SIZE_MAX / sizeof(double))
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "window of %zu samples is too long", n);
    double *buf = malloc(n * sizeof *buf);
    if (!buf)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for %zu window samples", n);
    fill_checked(w, n, periodic, buf);
    rc = cs_window_merit_samples(buf, n, m, err);
    free(buf);
    return rc;
}
