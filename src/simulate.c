/* Synthetic records and spectra of the invented scenario: parameters, true values, generation. */
#include <collshift/simulate.h>
#include <collshift/gatefit.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define SIM_PI 3.14159265358979323846264338327950288
/* ln(1 + sqrt 2) = asech(1/sqrt 2): sech^2 falls to 1/2 there. */
#define SIM_LN1P_SQRT2 0.88137358701954302523

cs_simulate_params cs_simulate_default_params(void)
{
    cs_simulate_params p;
    memset(&p, 0, sizeof p);
    p.kind = CS_SIMULATE_RECORD;
    p.format = CS_SIMULATE_TEXT;
    p.densities_m3 = NULL;
    p.ndensities = 0;
    p.shots = 1;
    p.seed = 1;
    p.reference_hz = 384.2304844685e12;
    p.burst_shift0_hz = 0;
    p.burst_shift_slope_hz_m3 = -6e-7 * 1e-6;
    p.burst_fwhm0_hz = 4e6;
    p.burst_fwhm_slope_hz_m3 = 1.2e-7 * 1e-6;
    p.tail_shift0_hz = 0;
    p.tail_shift_slope_hz_m3 = -1.5e-7 * 1e-6;
    p.tail_fwhm0_hz = 1.1e6;
    p.tail_fwhm_slope_hz_m3 = 1e-8 * 1e-6;
    p.is_complex = 1;
    p.lo_hz = p.reference_hz - 250e6;
    p.sample_rate_hz = 1e9;
    p.samples = 4096;
    p.burst_peak_s = 0.6e-6;
    p.tail_delay_s = 0;
    p.burst_amplitude = 1.0;
    p.tail_amplitude = 0.3;
    p.noise_sigma = 0.01;
    p.points = 4096;
    p.span_hz = 800e6;
    p.spectrum_offset_hz = -100e6;
    p.broad_shape = CS_SIMULATE_LORENTZ;
    p.burst_height = 100;
    p.tail_height = 50;
    p.baseline0 = 10;
    p.baseline_slope_per_hz = 0;
    p.spectrum_sigma = 1;
    p.temperature_k = NAN;
    p.thickness_m = NAN;
    p.force = 0;
    return p;
}

void cs_simulate_truth_at(const cs_simulate_params *p, double n, cs_simulate_truth *t)
{
    memset(t, 0, sizeof *t);
    t->density_m3 = n;
    t->burst_shift_hz = p->burst_shift0_hz + p->burst_shift_slope_hz_m3 * n;
    t->tail_shift_hz = p->tail_shift0_hz + p->tail_shift_slope_hz_m3 * n;
    t->burst_center_hz = p->reference_hz + t->burst_shift_hz;
    t->tail_center_hz = p->reference_hz + t->tail_shift_hz;
    t->burst_fwhm_hz = p->burst_fwhm0_hz + p->burst_fwhm_slope_hz_m3 * n;
    t->tail_fwhm_hz = p->tail_fwhm0_hz + p->tail_fwhm_slope_hz_m3 * n;
    t->era_shift_hz = t->burst_shift_hz - t->tail_shift_hz;
    t->burst_tau_s = CS_GATEFIT_SECH_FWHM_TAU / t->burst_fwhm_hz;
    t->burst_peak_s = p->burst_peak_s;
    t->tail_start_s = p->burst_peak_s + p->tail_delay_s;
    t->tail_gamma_per_s = 2 * SIM_PI * t->tail_fwhm_hz;
    t->burst_offset_hz = t->burst_center_hz - p->lo_hz;
    t->tail_offset_hz = t->tail_center_hz - p->lo_hz;
    /* areas of peak-1 profiles times the heights: Lorentzian pi w / 2; sech^2(a u) with
     * a = 2 ln(1 + sqrt 2) / w integrates to 2 / a = w / ln(1 + sqrt 2) */
    t->burst_area = p->burst_height * (p->broad_shape == CS_SIMULATE_SECH2
                                           ? t->burst_fwhm_hz / SIM_LN1P_SQRT2
                                           : SIM_PI * t->burst_fwhm_hz / 2);
    t->tail_area = p->tail_height * SIM_PI * t->tail_fwhm_hz / 2;
}

static int bad(cs_error *err, const char *what)
{
    return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "%s", what);
}

/* Checks that hold at one density. */
static int check_density(const cs_simulate_params *p, double n, cs_error *err)
{
    cs_simulate_truth t;
    if (!isfinite(n) || n < 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "density %g m^-3 is not a finite number >= 0", n);
    cs_simulate_truth_at(p, n, &t);
    if (!(t.burst_fwhm_hz > 0) || !(t.tail_fwhm_hz > 0) || !isfinite(t.burst_fwhm_hz) ||
        !isfinite(t.tail_fwhm_hz))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "at density %g cm^-3 a line width is not positive (burst FWHM %g Hz, "
                            "tail FWHM %g Hz)", n * 1e-6, t.burst_fwhm_hz, t.tail_fwhm_hz);
    if (!isfinite(t.burst_center_hz) || !isfinite(t.tail_center_hz))
        return bad(err, "a line centre is not finite");
    if (p->kind == CS_SIMULATE_RECORD) {
        double nyq = 0.5 * p->sample_rate_hz;
        double offs[2] = {t.burst_offset_hz, t.tail_offset_hz};
        for (int k = 0; k < 2; k++) {
            int ok = p->is_complex ? fabs(offs[k]) < nyq : (offs[k] > 0 && offs[k] < nyq);
            if (!ok)
                return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                    "at density %g cm^-3 the %s line lies %g MHz from the LO, "
                                    "outside the band %s%g MHz that a %s record at %g MHz holds: "
                                    "move the LO or raise the sample rate",
                                    n * 1e-6, k ? "tail" : "burst", offs[k] * 1e-6,
                                    p->is_complex ? "+-" : "0 .. ", nyq * 1e-6,
                                    p->is_complex ? "complex" : "real", p->sample_rate_hz * 1e-6);
        }
    }
    return CS_OK;
}

static int finite_all(const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(v[i]))
            return 0;
    return 1;
}

int cs_simulate_check(const cs_simulate_params *p, cs_error *err)
{
    cs_error_clear(err);
    if (!p)
        return bad(err, "no parameters");
    const double all[] = {p->reference_hz, p->burst_shift0_hz, p->burst_shift_slope_hz_m3,
                          p->burst_fwhm0_hz, p->burst_fwhm_slope_hz_m3, p->tail_shift0_hz,
                          p->tail_shift_slope_hz_m3, p->tail_fwhm0_hz, p->tail_fwhm_slope_hz_m3,
                          p->lo_hz, p->sample_rate_hz, p->burst_peak_s, p->tail_delay_s,
                          p->burst_amplitude, p->tail_amplitude, p->noise_sigma, p->span_hz,
                          p->spectrum_offset_hz, p->burst_height, p->tail_height, p->baseline0,
                          p->baseline_slope_per_hz, p->spectrum_sigma};
    if (!finite_all(all, sizeof all / sizeof all[0]))
        return bad(err, "a parameter is NaN or infinite");
    if (p->kind != CS_SIMULATE_RECORD && p->kind != CS_SIMULATE_SPECTRUM)
        return bad(err, "unknown kind");
    if (p->format != CS_SIMULATE_TEXT && p->format != CS_SIMULATE_NPY)
        return bad(err, "unknown format");
    if (p->kind == CS_SIMULATE_SPECTRUM && p->format == CS_SIMULATE_NPY)
        return bad(err, "spectra are written as text only (.npy holds records)");
    if (!(p->reference_hz > 0))
        return bad(err, "the reference frequency must be positive");
    if (p->shots < 1 || p->shots > 100000)
        return bad(err, "shots must be 1 .. 100000");
    if (p->kind == CS_SIMULATE_RECORD) {
        if (!(p->sample_rate_hz > 0))
            return bad(err, "the sample rate must be positive");
        if (p->samples < 16 || p->samples > ((size_t)1 << 26))
            return bad(err, "a record needs 16 .. 2^26 samples");
        if (p->burst_peak_s < 0 || p->tail_delay_s < 0)
            return bad(err, "the burst peak time and the tail delay must be >= 0");
        if (p->noise_sigma < 0 || p->burst_amplitude < 0 || p->tail_amplitude < 0)
            return bad(err, "amplitudes and the noise level must be >= 0");
    } else {
        if (p->points < 16 || p->points > ((size_t)1 << 26))
            return bad(err, "a spectrum needs 16 .. 2^26 points");
        if (!(p->span_hz > 0))
            return bad(err, "the spectrum span must be positive");
        if (p->reference_hz + p->spectrum_offset_hz - 0.5 * p->span_hz <= 0)
            return bad(err, "the spectrum axis reaches zero or negative frequencies");
        if (p->broad_shape != CS_SIMULATE_LORENTZ && p->broad_shape != CS_SIMULATE_SECH2)
            return bad(err, "unknown broad-line shape");
        if (!(p->spectrum_sigma > 0))
            return bad(err, "the spectrum's noise sigma must be positive (it is written as the "
                            "sigma column)");
    }
    if (!(isnan(p->temperature_k) || p->temperature_k > 0))
        return bad(err, "the temperature must be positive");
    if (!(isnan(p->thickness_m) || p->thickness_m > 0))
        return bad(err, "the thickness must be positive");
    if (p->ndensities && !p->densities_m3)
        return bad(err, "densities missing");
    for (size_t i = 0; i < p->ndensities; i++) {
        int rc = check_density(p, p->densities_m3[i], err);
        if (rc)
            return rc;
    }
    return CS_OK;
}

/* SplitMix64 finaliser (Steele, Lea and Flood, "Fast splittable pseudorandom number
 * generators", OOPSLA 2014): decorrelates neighbouring (seed, stream) pairs. */
static uint64_t mix64(uint64_t z)
{
    z += 0x9E3779B97F4A7C15ULL;
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
    return z ^ (z >> 31);
}

/* A new mt19937 generator seeded from (seed, stream); NULL when out of memory. */
static gsl_rng *cs_simulate_rng(unsigned long seed, unsigned long stream)
{
    gsl_rng *g = gsl_rng_alloc(gsl_rng_mt19937);
    if (!g)
        return NULL;
    uint64_t s = mix64(mix64((uint64_t)seed) ^ (uint64_t)stream);
    gsl_rng_set(g, (unsigned long)(s & 0xFFFFFFFFUL));
    return g;
}

/* Append "key = value" (already formatted) to m. */
static int meta_add(cs_meta *m, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

static int meta_add(cs_meta *m, const char *fmt, ...)
{
    char line[512];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(line, sizeof line, fmt, ap);
    va_end(ap);
    int rc = cs_meta_parse_line(m, line, NULL, -1, NULL);
    return rc == CS_OK ? CS_OK : CS_ENOMEM;
}

/* The metadata every file carries. */
static int common_meta(cs_meta *m, const cs_simulate_params *p, const cs_simulate_truth *t,
                       unsigned long stream, const char *scenario)
{
    int rc = 0;
    rc |= meta_add(m, "synthetic = yes: invented scenario made by collshift simulate, not a measurement");
    rc |= meta_add(m, "scenario = %s", scenario);
    rc |= meta_add(m, "density = %.17g cm^-3", t->density_m3 * 1e-6);
    rc |= meta_add(m, "reference = %.17g Hz", p->reference_hz);
    if (!isnan(p->temperature_k))
        rc |= meta_add(m, "temperature = %.17g K", p->temperature_k);
    if (!isnan(p->thickness_m))
        rc |= meta_add(m, "thickness = %.17g m", p->thickness_m);
    rc |= meta_add(m, "seed = %lu", p->seed);
    rc |= meta_add(m, "stream = %lu", stream);
    rc |= meta_add(m, "true_burst_center = %.17g Hz", t->burst_center_hz);
    rc |= meta_add(m, "true_burst_fwhm = %.17g Hz", t->burst_fwhm_hz);
    rc |= meta_add(m, "true_burst_shift = %.17g Hz", t->burst_shift_hz);
    rc |= meta_add(m, "true_tail_center = %.17g Hz", t->tail_center_hz);
    rc |= meta_add(m, "true_tail_fwhm = %.17g Hz", t->tail_fwhm_hz);
    rc |= meta_add(m, "true_tail_shift = %.17g Hz", t->tail_shift_hz);
    rc |= meta_add(m, "true_era_shift = %.17g Hz", t->era_shift_hz);
    return rc ? CS_ENOMEM : CS_OK;
}

int cs_simulate_record(const cs_simulate_params *p, double density_m3, unsigned long stream,
                       cs_record **out, cs_simulate_truth *truth, cs_error *err)
{
    *out = NULL;
    if (!p)
        return bad(err, "no parameters");
    cs_simulate_params q = *p;
    q.kind = CS_SIMULATE_RECORD;
    q.format = CS_SIMULATE_TEXT;
    q.densities_m3 = &density_m3;
    q.ndensities = 1;
    int rc = cs_simulate_check(&q, err);
    if (rc)
        return rc;
    cs_simulate_truth t;
    cs_simulate_truth_at(p, density_m3, &t);
    cs_record *r = cs_record_alloc(p->samples, p->is_complex ? 1 : 0);
    gsl_rng *g = cs_simulate_rng(p->seed, stream);
    if (!r || !g)
        goto nomem;
    r->dt_s = 1.0 / p->sample_rate_hz;
    r->t0_s = 0;
    double phib = 2 * SIM_PI * gsl_rng_uniform(g);
    double phit = 2 * SIM_PI * gsl_rng_uniform(g);
    for (size_t j = 0; j < p->samples; j++) {
        double tj = (double)j * r->dt_s;
        double ab = p->burst_amplitude / cosh((tj - t.burst_peak_s) / t.burst_tau_s);
        double pb = 2 * SIM_PI * t.burst_offset_hz * tj + phib;
        double re = ab * cos(pb), im = ab * sin(pb);
        if (tj >= t.tail_start_s) {
            double at = p->tail_amplitude * exp(-0.5 * t.tail_gamma_per_s * (tj - t.tail_start_s));
            double pt = 2 * SIM_PI * t.tail_offset_hz * tj + phit;
            re += at * cos(pt);
            im += at * sin(pt);
        }
        if (p->is_complex) {
            r->data[2 * j] = re + gsl_ran_gaussian_ziggurat(g, p->noise_sigma);
            r->data[2 * j + 1] = im + gsl_ran_gaussian_ziggurat(g, p->noise_sigma);
        } else {
            r->data[j] = re + gsl_ran_gaussian_ziggurat(g, p->noise_sigma);
        }
    }
    gsl_rng_free(g);
    g = NULL;
    cs_meta *m = &r->meta;
    rc = common_meta(m, p, &t, stream,
                     p->is_complex ? "heterodyne I/Q record of a superradiant burst and its tail "
                                     "from a dense vapour of an alkali-like emitter (invented)"
                                   : "real heterodyne record of a superradiant burst and its tail "
                                     "from a dense vapour of an alkali-like emitter (invented)");
    rc |= meta_add(m, "sample_rate = %.17g Hz", p->sample_rate_hz);
    rc |= meta_add(m, "lo = %.17g Hz", p->lo_hz);
    rc |= meta_add(m, "true_burst_offset = %.17g Hz", t.burst_offset_hz);
    rc |= meta_add(m, "true_tail_offset = %.17g Hz", t.tail_offset_hz);
    rc |= meta_add(m, "true_burst_tau = %.17g s", t.burst_tau_s);
    rc |= meta_add(m, "true_burst_peak = %.17g s", t.burst_peak_s);
    rc |= meta_add(m, "true_burst_amplitude = %.17g", p->burst_amplitude);
    rc |= meta_add(m, "true_tail_start = %.17g s", t.tail_start_s);
    rc |= meta_add(m, "true_tail_gamma = %.17g s^-1", t.tail_gamma_per_s);
    rc |= meta_add(m, "true_tail_amplitude = %.17g", p->tail_amplitude);
    rc |= meta_add(m, "true_noise_sigma = %.17g", p->noise_sigma);
    if (rc)
        goto nomem;
    r->source = malloc(32);
    if (!r->source)
        goto nomem;
    snprintf(r->source, 32, "synthetic stream %lu", stream);
    if (truth)
        *truth = t;
    *out = r;
    return CS_OK;
nomem:
    gsl_rng_free(g);
    cs_record_free(r);
    return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
}

int cs_simulate_spectrum(const cs_simulate_params *p, double density_m3, unsigned long stream,
                         cs_spectrum **out, cs_simulate_truth *truth, cs_error *err)
{
    *out = NULL;
    if (!p)
        return bad(err, "no parameters");
    cs_simulate_params q = *p;
    q.kind = CS_SIMULATE_SPECTRUM;
    q.format = CS_SIMULATE_TEXT;
    q.densities_m3 = &density_m3;
    q.ndensities = 1;
    int rc = cs_simulate_check(&q, err);
    if (rc)
        return rc;
    cs_simulate_truth t;
    cs_simulate_truth_at(p, density_m3, &t);
    size_t n = p->points;
    cs_spectrum *s = cs_spectrum_alloc(n, 1);
    gsl_rng *g = cs_simulate_rng(p->seed, stream);
    if (!s || !g)
        goto nomem;
    double lo = p->reference_hz + p->spectrum_offset_hz - 0.5 * p->span_hz;
    double step = p->span_hz / (double)(n - 1);
    double hb = 0.5 * t.burst_fwhm_hz, ht = 0.5 * t.tail_fwhm_hz;
    for (size_t i = 0; i < n; i++) {
        double nu = lo + (double)i * step;
        double ub = (nu - t.burst_center_hz) / hb, ut = (nu - t.tail_center_hz) / ht;
        double pb;
        if (p->broad_shape == CS_SIMULATE_SECH2) {
            double c = cosh(SIM_LN1P_SQRT2 * ub);
            pb = 1.0 / (c * c);
        } else {
            pb = 1.0 / (1.0 + ub * ub);
        }
        double y = p->baseline0 + p->baseline_slope_per_hz * (nu - p->reference_hz) +
                   p->burst_height * pb + p->tail_height / (1.0 + ut * ut);
        s->freq_hz[i] = nu;
        s->y[i] = y + gsl_ran_gaussian_ziggurat(g, p->spectrum_sigma);
        s->sigma[i] = p->spectrum_sigma;
    }
    gsl_rng_free(g);
    g = NULL;
    s->x_unit_assumed = 0;
    snprintf(s->x_unit, sizeof s->x_unit, "Hz");
    snprintf(s->y_name, sizeof s->y_name, "y");
    cs_meta *m = &s->meta;
    rc = common_meta(m, p, &t, stream,
                     "emission spectrum of a dense vapour of an alkali-like emitter: broad burst-"
                     "era line plus narrow tail-era line on a baseline (invented)");
    rc |= meta_add(m, "true_burst_shape = %s",
                   p->broad_shape == CS_SIMULATE_SECH2 ? "sech2" : "lorentz");
    rc |= meta_add(m, "true_burst_height = %.17g", p->burst_height);
    rc |= meta_add(m, "true_burst_area = %.17g", t.burst_area);
    rc |= meta_add(m, "true_tail_shape = lorentz");
    rc |= meta_add(m, "true_tail_height = %.17g", p->tail_height);
    rc |= meta_add(m, "true_tail_area = %.17g", t.tail_area);
    rc |= meta_add(m, "true_baseline = %.17g", p->baseline0);
    rc |= meta_add(m, "true_baseline_slope_per_hz = %.17g", p->baseline_slope_per_hz);
    rc |= meta_add(m, "true_noise_sigma = %.17g", p->spectrum_sigma);
    if (rc)
        goto nomem;
    s->source = malloc(32);
    if (!s->source)
        goto nomem;
    snprintf(s->source, 32, "synthetic stream %lu", stream);
    if (truth)
        *truth = t;
    *out = s;
    return CS_OK;
nomem:
    gsl_rng_free(g);
    cs_spectrum_free(s);
    return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
}
