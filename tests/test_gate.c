/* Check suite for gate: gated spectra and their normalisation, gates and their specifications,
 * plan cache, wisdom, transforms, averaging over shots, spectrogram. */
#include <check.h>
#include <collshift/gate.h>

#include <complex.h>
#include <fftw3.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

#define PI_T 3.14159265358979323846264338327950288
#define N_OF(a) ((int)(sizeof(a) / sizeof((a)[0])))

/* ---- helpers ----------------------------------------------------------------------------- */

static gsl_rng *rng_new(unsigned long seed)
{
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    ck_assert_ptr_nonnull(r);
    gsl_rng_set(r, seed);
    return r;
}

/* Complex white noise with E|x|^2 = var (each part var/2), plus nothing else. */
static cs_record *noise_record(size_t n, int cplx, double dt, double var, unsigned long seed)
{
    cs_record *r = cs_record_alloc(n, cplx);
    ck_assert_ptr_nonnull(r);
    r->dt_s = dt;
    gsl_rng *g = rng_new(seed);
    double s = cplx ? sqrt(var / 2) : sqrt(var);
    for (size_t j = 0; j < (cplx ? 2 * n : n); j++)
        r->data[j] = gsl_ran_gaussian(g, s);
    gsl_rng_free(g);
    return r;
}

/* Add A exp(i (2 pi f t + phi)) (complex) or A cos(2 pi f t + phi) (real), t = t0 + j dt. */
static void add_tone(cs_record *r, double A, double f, double phi)
{
    for (size_t j = 0; j < r->n; j++) {
        double t = r->t0_s + (double)j * r->dt_s, ph = 2 * PI_T * f * t + phi;
        if (r->is_complex) {
            r->data[2 * j] += A * cos(ph);
            r->data[2 * j + 1] += A * sin(ph);
        } else {
            r->data[j] += A * cos(ph);
        }
    }
}

static cs_window win(const char *spec)
{
    cs_window w;
    ck_assert_int_eq(cs_window_parse(spec, &w, NULL), CS_OK);
    return w;
}

static double psd_integral(const cs_gated_spectrum *s)
{
    double sum = 0;
    for (size_t k = 0; k < s->psd->n; k++)
        sum += s->psd->y[k];
    return sum * s->df_hz;
}

static size_t argmax_psd(const cs_gated_spectrum *s)
{
    size_t k = 0;
    for (size_t i = 1; i < s->psd->n; i++)
        if (s->psd->y[i] > s->psd->y[k])
            k = i;
    return k;
}

/* Peak frequency by a parabola through the logarithms of the three highest bins (a Gaussian
 * fits a Hann main lobe closely near its top). */
static double peak_freq(const cs_gated_spectrum *s)
{
    size_t k = argmax_psd(s);
    ck_assert(k > 0 && k + 1 < s->psd->n);
    double a = log(s->psd->y[k - 1]), b = log(s->psd->y[k]), c = log(s->psd->y[k + 1]);
    double d = 0.5 * (a - c) / (a - 2 * b + c);
    return s->psd->freq_hz[k] + d * s->df_hz;
}

/* ---- Parseval's theorem -------------------------------------------------------------------- */

/* Parseval's theorem: sum_k S_k df = sum_j w_j^2 |x_j|^2 / sum_j w_j^2 for every window, pad,
 * input kind and form; the right side is computed here directly from cs_window_fill. */
static const struct parseval_case {
    const char *window;
    size_t pad;
    int cplx;
    int periodic;
    int exact;
} parseval_cases[] = {
    {"rect", 1, 1, 1, 0},    {"hann", 1, 1, 1, 0},    {"hann", 2, 1, 1, 0},
    {"hann", 4, 1, 0, 0},    {"blackman-harris", 2, 1, 1, 0},
    {"kaiser:8", 3, 1, 1, 1},  /* odd transform length: the rotating path */
    {"rect", 1, 0, 1, 0},    {"hann", 2, 0, 1, 0},    {"flattop", 4, 0, 0, 0},
    {"tukey:0.3", 3, 0, 1, 1}, /* odd real transform: no Nyquist bin */
};

START_TEST(test_parseval)
{
    const struct parseval_case *c = &parseval_cases[_i];
    cs_record *r = noise_record(5000, c->cplx, 1e-7, 2.0, 11 + (unsigned long)_i);
    add_tone(r, 3.0, 1.234e6, 0.3);
    cs_window w = win(c->window);
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", 37e-7, 1001e-7, &w, c->periodic, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = c->pad;
    o.exact_length = c->exact;
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gated_spectrum *s = NULL;
    cs_error e;
    ck_assert_msg(cs_gate_spectrum(ws, r, &g, &o, &s, &e) == CS_OK, "%s", e.msg);
    ck_assert_uint_eq(s->first, 37);
    ck_assert_uint_eq(s->m, 1001);
    if (c->exact)
        ck_assert_uint_eq(s->nfft, 1001 * c->pad);
    else
        ck_assert(s->nfft >= 1001 * c->pad && s->nfft % 2 == 0);
    double *wv = malloc(1001 * sizeof(double));
    ck_assert_int_eq(cs_window_fill(&w, 1001, c->periodic, wv), CS_OK);
    double num = 0, den = 0;
    for (size_t j = 0; j < 1001; j++) {
        const double *x = c->cplx ? r->data + 2 * (37 + j) : r->data + 37 + j;
        double p = c->cplx ? x[0] * x[0] + x[1] * x[1] : x[0] * x[0];
        num += wv[j] * wv[j] * p;
        den += wv[j] * wv[j];
    }
    ck_assert_msg(tu_close(psd_integral(s), num / den, 1e-10), "integral %.15g, mean power %.15g",
                  psd_integral(s), num / den);
    ck_assert(tu_close(s->sum_w2, den, 1e-12));
    /* the axis ascends with the documented spacing */
    for (size_t k = 1; k < s->psd->n; k++)
        ck_assert(tu_close(s->psd->freq_hz[k] - s->psd->freq_hz[k - 1], s->df_hz, 1e-6));
    ck_assert(tu_close(s->df_hz, 1.0 / ((double)s->nfft * 1e-7), 1e-12));
    ck_assert_str_eq(cs_meta_find(&s->psd->meta, "psd_convention")->text,
                     c->cplx ? "two-sided" : "one-sided");
    free(wv);
    cs_gated_spectrum_free(s);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* ---- tones of known amplitude ------------------------------------------------------------- */

/* A complex tone A exp(2 pi i f0 t) exactly on a bin through a rect window: all its power in one
 * bin, |X| = A m dt (the DFT of a constant), S_peak = A^2 m dt = A^2 / enbw (definition of the
 * equivalent noise bandwidth, Harris 1978). Off the bin, through Hann with padding: the
 * integrated PSD is the tone's power A^2 (Parseval's theorem) and the peak sits at f0 within a
 * small fraction of a bin. */
START_TEST(test_complex_tone)
{
    const double dt = 1e-8, A = 0.7;
    const size_t m = 1000;
    cs_record *r = cs_record_alloc(4000, 1);
    r->dt_s = dt;
    r->t0_s = -5e-6;
    double f0 = 37.0 / ((double)m * dt);   /* bin 37 of a 1000-point transform */
    add_tone(r, A, f0, 0.0);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_window w = win("rect");
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", 100 * dt, (double)m * dt, &w, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.exact_length = 1;
    cs_gated_spectrum *s = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, NULL), CS_OK);
    size_t k = argmax_psd(s);
    ck_assert(tu_close(s->psd->freq_hz[k], f0, 1e-9));
    ck_assert(tu_close(s->psd->y[k], A * A * (double)m * dt, 1e-9));
    ck_assert(tu_close(s->psd->y[k], A * A / s->enbw_hz, 1e-9));
    ck_assert(tu_close(hypot(s->X[2 * k], s->X[2 * k + 1]), A * (double)m * dt, 1e-9));
    /* the phase of X refers to the gate's first sample: the tone's phase there */
    double ph = 2 * PI_T * f0 * s->t_gate_s;
    double complex Xk = s->X[2 * k] + I * s->X[2 * k + 1];
    ck_assert(cabs(Xk - A * (double)m * dt * cexp(I * ph)) < 1e-9 * A * (double)m * dt);
    ck_assert(s->psd->y[k + 3] < 1e-20 * s->psd->y[k]);

    /* off-bin, Hann, pad 4 */
    double f1 = 12.37e6;
    for (size_t j = 0; j < 2 * r->n; j++)
        r->data[j] = 0;
    add_tone(r, A, f1, 1.0);
    g.window = win("hann");
    o.pad = 4;
    o.exact_length = 0;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, NULL), CS_OK);
    ck_assert(tu_close(psd_integral(s), A * A, 1e-9));
    ck_assert_msg(fabs(peak_freq(s) - f1) < 0.05 * s->df_hz * (double)s->nfft / (double)m,
                  "peak %.6g Hz, tone %.6g Hz", peak_freq(s), f1);
    /* a negative frequency stays negative: complex input keeps both sides */
    for (size_t j = 0; j < 2 * r->n; j++)
        r->data[j] = 0;
    add_tone(r, A, -f1, 0.0);
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, NULL), CS_OK);
    ck_assert(s->psd->freq_hz[0] < 0);
    ck_assert(tu_close(s->psd->freq_hz[0], -0.5 / dt, 1e-12));
    ck_assert(fabs(peak_freq(s) + f1) < 0.05 / ((double)m * dt));
    cs_gated_spectrum_free(s);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* The local-oscillator frequency is added back: the same tone with lo_hz = 9.2 GHz appears at
 * 9.2 GHz + f0, and every frequency moves by exactly lo_hz. */
START_TEST(test_lo_added)
{
    cs_record *r = cs_record_alloc(2048, 1);
    r->dt_s = 1e-8;
    add_tone(r, 1.0, -3.1e6, 0.0);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "all", 0, 2048e-8, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    cs_gated_spectrum *a = NULL, *b = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &a, NULL), CS_OK);
    o.lo_hz = 9.2e9;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &b, NULL), CS_OK);
    ck_assert_uint_eq(a->psd->n, b->psd->n);
    for (size_t k = 0; k < a->psd->n; k++) {
        ck_assert(fabs(b->psd->freq_hz[k] - (a->psd->freq_hz[k] + 9.2e9)) < 1e-6);
        ck_assert(b->psd->y[k] == a->psd->y[k]);
    }
    ck_assert(fabs(peak_freq(b) - (9.2e9 - 3.1e6)) < 0.05 / (2048e-8));
    ck_assert(tu_close(cs_meta_find(&b->psd->meta, "lo")->si, 9.2e9, 1e-15));
    ck_assert_double_eq(b->lo_hz, 9.2e9);
    cs_gated_spectrum_free(a);
    cs_gated_spectrum_free(b);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* A real sine A cos(2 pi f0 t): one-sided axis from 0 to the Nyquist frequency, and the power
 * within +-8 bins of the line is the sine's mean power A^2/2 (Parseval's theorem; Hann's
 * leakage beyond 8 bins is below 1e-6). */
START_TEST(test_real_sine)
{
    const double dt = 2e-9, A = 1.5;
    cs_record *r = cs_record_alloc(3000, 0);
    r->dt_s = dt;
    add_tone(r, A, 31.7e6, 0.4);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", 0, 2000 * dt, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = 2;
    cs_gated_spectrum *s = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, NULL), CS_OK);
    ck_assert(s->one_sided);
    ck_assert_uint_eq(s->psd->n, s->nfft / 2 + 1);
    ck_assert_double_eq(s->psd->freq_hz[0], 0.0);
    ck_assert(tu_close(s->psd->freq_hz[s->psd->n - 1], 0.5 / dt, 1e-12));
    double fp = peak_freq(s);
    ck_assert(fabs(fp - 31.7e6) < 0.05 / (2000 * dt));
    size_t k = argmax_psd(s), span = 8 * s->nfft / 2000;
    double p = 0;
    for (size_t i = k - span; i <= k + span; i++)
        p += s->psd->y[i];
    ck_assert_msg(tu_close(p * s->df_hz, A * A / 2, 1e-5), "line power %.9g", p * s->df_hz);
    cs_gated_spectrum_free(s);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* White noise: the two-sided PSD of complex noise with E|x|^2 = sigma^2 is sigma^2 dt per Hz,
 * the one-sided PSD of real noise of variance sigma^2 is 2 sigma^2 dt (definition of the PSD;
 * Parseval's theorem). Averaged over 4 shots x ~4000 bins the estimate has a relative standard
 * deviation near 1/sqrt(4 m / ENBW) < 2 %; the tolerance is 6 %. */
START_TEST(test_white_noise_level)
{
    const double dt = 5e-9, var = 0.3;
    for (int cplx = 0; cplx <= 1; cplx++) {
        cs_record *shots[4];
        for (int i = 0; i < 4; i++)
            shots[i] = noise_record(8192, cplx, dt, var, 100 + (unsigned long)(10 * cplx + i));
        cs_gate_workspace *ws = cs_gate_alloc();
        cs_gate g;
        ck_assert_int_eq(cs_gate_init(&g, "g", 0, 8000 * dt, NULL, 1, NULL), CS_OK);
        cs_gate_options o;
        cs_gate_options_default(&o);
        cs_gated_spectrum *s = NULL;
        ck_assert_int_eq(cs_gate_spectrum_shots(ws, shots, 4, &g, &o, &s, NULL), CS_OK);
        ck_assert_uint_eq(s->nshots, 4);
        ck_assert_ptr_nonnull(s->psd->sigma);
        double mean = 0;
        size_t cnt = 0;
        for (size_t k = 1; k + 1 < s->psd->n; k++) {
            mean += s->psd->y[k];
            cnt++;
        }
        mean /= (double)cnt;
        double expect = cplx ? var * dt : 2 * var * dt;
        ck_assert_msg(fabs(mean / expect - 1) < 0.06, "%s noise: level %.4g, expected %.4g",
                      cplx ? "complex" : "real", mean, expect);
        /* the standard error of the 4-shot mean is about level / sqrt(4) per bin */
        double se = 0;
        for (size_t k = 1; k + 1 < s->psd->n; k++)
            se += s->psd->sigma[k];
        se /= (double)cnt;
        ck_assert_msg(se > 0.3 * expect && se < 0.7 * expect, "sem %.4g", se);
        cs_gated_spectrum_free(s);
        cs_gate_free(ws);
        for (int i = 0; i < 4; i++)
            cs_record_free(shots[i]);
    }
}
END_TEST

/* Phase-locked tones in independent noise: the coherent average keeps the tone and divides the
 * noise power by the number of shots (averaging independent complex Gaussians); the power
 * average keeps both. */
START_TEST(test_coherent_vs_power)
{
    const size_t ns = 16, n = 2048;
    const double dt = 1e-8, var = 1.0, A = 0.5, f0 = 40.0 / (1024 * dt);
    cs_record *shots[16];
    for (size_t i = 0; i < ns; i++) {
        shots[i] = noise_record(n, 1, dt, var, 500 + i);
        add_tone(shots[i], A, f0, 0.7);   /* same phase in every shot */
    }
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", 0, 1024 * dt, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    cs_gated_spectrum *pw = NULL, *co = NULL;
    ck_assert_int_eq(cs_gate_spectrum_shots(ws, shots, ns, &g, &o, &pw, NULL), CS_OK);
    o.average = CS_GATE_AVERAGE_COHERENT;
    ck_assert_int_eq(cs_gate_spectrum_shots(ws, shots, ns, &g, &o, &co, NULL), CS_OK);
    ck_assert_ptr_null(co->psd->sigma);
    ck_assert_str_eq(cs_meta_find(&co->psd->meta, "average")->text, "coherent");
    size_t kp = argmax_psd(pw), kc = argmax_psd(co);
    ck_assert_uint_eq(kp, kc);
    ck_assert(tu_close(pw->psd->freq_hz[kp], f0, 1e-9));
    /* tone: S = A^2 / enbw, plus noise (4 % of it in the power average) */
    double tone = A * A / pw->enbw_hz;
    ck_assert_msg(fabs(co->psd->y[kc] / tone - 1) < 0.1, "coherent peak %.4g vs %.4g", co->psd->y[kc], tone);
    ck_assert_msg(fabs(pw->psd->y[kp] / tone - 1) < 0.15, "power peak %.4g vs %.4g", pw->psd->y[kp], tone);
    /* noise far from the tone */
    double np = 0, nc = 0;
    size_t cnt = 0;
    for (size_t k = 0; k < pw->psd->n; k++) {
        if (k + 20 > kp && k < kp + 20)
            continue;
        np += pw->psd->y[k];
        nc += co->psd->y[k];
        cnt++;
    }
    np /= (double)cnt;
    nc /= (double)cnt;
    ck_assert_msg(fabs(np / (var * dt) - 1) < 0.05, "power-average noise %.4g", np);
    ck_assert_msg(fabs(nc / (var * dt / (double)ns) - 1) < 0.1, "coherent-average noise %.4g", nc);
    /* X is the mean complex spectrum in both */
    for (size_t k = 0; k < 2 * pw->psd->n; k++)
        ck_assert(pw->X[k] == co->X[k]);
    cs_gated_spectrum_free(pw);
    cs_gated_spectrum_free(co);
    cs_gate_free(ws);
    for (size_t i = 0; i < ns; i++)
        cs_record_free(shots[i]);
}
END_TEST

/* The mean of the gate can be removed first: a constant offset then leaves no DC line. */
START_TEST(test_remove_mean)
{
    cs_record *r = cs_record_alloc(512, 0);
    r->dt_s = 1e-6;
    for (size_t j = 0; j < r->n; j++)
        r->data[j] = 4.0;
    add_tone(r, 1.0, 50e3, 0.0);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", 0, 400e-6, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    cs_gated_spectrum *s = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, NULL), CS_OK);
    double with = s->psd->y[0];
    o.remove_mean = 1;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, NULL), CS_OK);
    ck_assert(s->psd->y[0] < 1e-6 * with);
    cs_gated_spectrum_free(s);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* A failed call on a reused spectrum whose PSD has to be made anew (a power average of shots
 * has a sigma array, one shot has none) leaves the new arrays zeroed, as freshly allocated ones
 * were (not uninitialised; common practice for a documented "unchanged or zero" result). */
START_TEST(test_spectrum_failure_zeroes)
{
    cs_record *shots[2] = {noise_record(100, 1, 1e-6, 1.0, 5), noise_record(100, 1, 1e-6, 1.0, 6)};
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", 0, 80e-6, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    cs_gated_spectrum *s = NULL;
    ck_assert_int_eq(cs_gate_spectrum_shots(ws, shots, 2, &g, &o, &s, NULL), CS_OK);
    ck_assert_ptr_nonnull(s->psd->sigma);
    const size_t n = s->psd->n;
    /* scribble on the heap blocks the new arrays may come from */
    double *junk[8];
    for (int k = 0; k < 8; k++) {
        junk[k] = malloc(n * sizeof *junk[k]);
        ck_assert_ptr_nonnull(junk[k]);
        for (size_t i = 0; i < n; i++)
            junk[k][i] = 12345.0;
    }
    for (int k = 0; k < 8; k++)
        free(junk[k]);
    shots[0]->data[2 * 40] = NAN;
    cs_error e;
    ck_assert_int_eq(cs_gate_spectrum(ws, shots[0], &g, &o, &s, &e), CS_EDATA);
    ck_assert_ptr_nonnull(s);
    ck_assert_ptr_null(s->psd->sigma);
    ck_assert_uint_eq(s->psd->n, n);
    for (size_t i = 0; i < n; i++)
        ck_assert_msg(s->psd->y[i] == 0.0, "psd[%zu] = %g after a failed call", i, s->psd->y[i]);
    cs_gated_spectrum_free(s);
    cs_gate_free(ws);
    cs_record_free(shots[0]);
    cs_record_free(shots[1]);
}
END_TEST

/* Errors: a gate beyond the record, a NaN sample, padding 0; a failed call leaves *out NULL. */
START_TEST(test_spectrum_errors)
{
    cs_record *r = noise_record(100, 1, 1e-6, 1.0, 3);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gate g;
    cs_error e;
    ck_assert_int_eq(cs_gate_init(&g, "g", 50e-6, 60e-6, NULL, 1, NULL), CS_OK);
    cs_gated_spectrum *s = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, NULL, &s, &e), CS_ERANGE);
    ck_assert_ptr_null(s);
    ck_assert_ptr_nonnull(strstr(e.msg, "beyond the record"));
    g.length_s = 40e-6;
    r->data[2 * 60 + 1] = NAN;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, NULL, &s, &e), CS_EDATA);
    ck_assert_ptr_null(s);
    ck_assert_ptr_nonnull(strstr(e.msg, "non-finite"));
    r->data[2 * 60 + 1] = 0;
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = 0;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, &e), CS_EINVAL);
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, NULL, &s, &e), CS_OK);
    /* a gate holding one sample */
    g.length_s = 1e-6;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, NULL, &s, &e), CS_ERANGE);
    ck_assert_ptr_nonnull(s);   /* a reused spectrum stays allocated */
    cs_gated_spectrum_free(s);
    ck_assert_int_eq(cs_gate_init(&g, "bad name", 0, 1, NULL, 1, &e), CS_EINVAL);
    ck_assert_int_eq(cs_gate_init(&g, "g", -1e-6, 1, NULL, 1, &e), CS_EINVAL);
    ck_assert_int_eq(cs_gate_init(&g, "g", 0, 0, NULL, 1, &e), CS_EINVAL);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* Reusing a result: same numbers as a fresh one, arrays kept when the size is unchanged, and a
 * different gate length reallocates. */
START_TEST(test_reuse)
{
    cs_record *r = noise_record(4096, 1, 1e-8, 1.0, 77);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gate g[2];
    ck_assert_int_eq(cs_gate_init(&g[0], "a", 0, 1000e-8, NULL, 1, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_init(&g[1], "b", 1500e-8, 2000e-8, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = 2;
    cs_gated_spectrum *out[2] = {NULL, NULL}, *fresh = NULL;
    ck_assert_int_eq(cs_gate_spectra(ws, r, g, 2, &o, out, NULL), CS_OK);
    double *y = out[1]->psd->y, *X = out[1]->X;
    ck_assert_int_eq(cs_gate_spectra(ws, r, g, 2, &o, out, NULL), CS_OK);
    ck_assert_ptr_eq(out[1]->psd->y, y);
    ck_assert_ptr_eq(out[1]->X, X);
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g[0], &o, &out[1], NULL), CS_OK);
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g[0], &o, &fresh, NULL), CS_OK);
    ck_assert_uint_eq(out[1]->psd->n, fresh->psd->n);
    for (size_t k = 0; k < fresh->psd->n; k++) {
        ck_assert(out[1]->psd->y[k] == fresh->psd->y[k]);
        ck_assert(out[1]->psd->freq_hz[k] == fresh->psd->freq_hz[k]);
        ck_assert(out[1]->X[2 * k] == fresh->X[2 * k]);
    }
    ck_assert_str_eq(out[1]->gate.name, "a");
    /* the same gate in a new workspace (no padding left over from the longer gate b) */
    cs_gate_workspace *ws2 = cs_gate_alloc();
    cs_gated_spectrum *clean = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws2, r, &g[0], &o, &clean, NULL), CS_OK);
    for (size_t k = 0; k < clean->psd->n; k++)
        ck_assert(clean->psd->y[k] == fresh->psd->y[k]);
    cs_gated_spectrum_free(clean);
    cs_gate_free(ws2);
    o.keep_complex = 0;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g[0], &o, &fresh, NULL), CS_OK);
    ck_assert_ptr_null(fresh->X);
    for (size_t k = 0; k < fresh->psd->n; k++)
        ck_assert(out[1]->psd->y[k] == fresh->psd->y[k]);
    cs_gated_spectrum_free(out[0]);
    cs_gated_spectrum_free(out[1]);
    cs_gated_spectrum_free(fresh);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* ---- transforms and the plan cache ---------------------------------------------------------- */

/* The cache is bounded: transforms of ever new lengths (a campaign whose gates differ from
 * record to record) keep at most CS_GATE_PLAN_MAX plans, the least recently used one making
 * room, and a transform whose plan was evicted still gives the right answer. Check: the DFT of
 * a unit impulse at sample 1 is exp(-2 pi i k / n) (the definition of the DFT; common practice). */
START_TEST(test_plan_cache_bounded)
{
    cs_gate_workspace *ws = cs_gate_alloc();
    const void *keep = cs_gate_plan(ws, 96, CS_GATE_FFT_FORWARD, 0, NULL);
    ck_assert_ptr_nonnull(keep);
    for (size_t n = 100; n < 100 + 2 * CS_GATE_PLAN_MAX; n++) {
        ck_assert_ptr_nonnull(cs_gate_plan(ws, n, CS_GATE_FFT_FORWARD, 0, NULL));
        /* used again and again: the most recently used plan is never the one evicted */
        ck_assert_ptr_eq(cs_gate_plan(ws, 96, CS_GATE_FFT_FORWARD, 0, NULL), keep);
        ck_assert_uint_le(cs_gate_plan_count(ws), CS_GATE_PLAN_MAX);
    }
    ck_assert_uint_eq(cs_gate_plan_count(ws), CS_GATE_PLAN_MAX);
    const size_t n = 100;   /* its plan was evicted long ago */
    double in[2 * 100], out[2 * 100];
    for (size_t j = 0; j < 2 * n; j++)
        in[j] = 0.0;
    in[2] = 1.0;
    ck_assert_int_eq(cs_gate_fft(ws, CS_GATE_FFT_FORWARD, n, in, out, NULL), CS_OK);
    for (size_t k = 0; k < n; k++) {
        double ph = -2.0 * 3.14159265358979323846 * (double)k / (double)n;
        ck_assert_double_eq_tol(out[2 * k], cos(ph), 1e-12);
        ck_assert_double_eq_tol(out[2 * k + 1], sin(ph), 1e-12);
    }
    ck_assert_uint_eq(cs_gate_plan_count(ws), CS_GATE_PLAN_MAX);
    cs_gate_free(ws);
}
END_TEST

/* The same (length, kind, in-place) gives the same cached plan; others give new ones. */
START_TEST(test_plan_cache)
{
    cs_gate_workspace *ws = cs_gate_alloc();
    ck_assert_uint_eq(cs_gate_plan_count(ws), 0);
    const void *a = cs_gate_plan(ws, 1000, CS_GATE_FFT_FORWARD, 0, NULL);
    ck_assert_ptr_nonnull(a);
    ck_assert_ptr_eq(cs_gate_plan(ws, 1000, CS_GATE_FFT_FORWARD, 0, NULL), a);
    ck_assert_uint_eq(cs_gate_plan_count(ws), 1);
    const void *b = cs_gate_plan(ws, 1000, CS_GATE_FFT_BACKWARD, 0, NULL);
    const void *c = cs_gate_plan(ws, 1000, CS_GATE_FFT_FORWARD, 1, NULL);
    const void *d = cs_gate_plan(ws, 1024, CS_GATE_FFT_R2C, 0, NULL);
    ck_assert(b && c && d && b != a && c != a && d != a);
    ck_assert_uint_eq(cs_gate_plan_count(ws), 4);
    /* gated spectra reuse the plan of their length */
    cs_record *r = noise_record(3000, 1, 1e-6, 1.0, 5);
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", 0, 1000e-6, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    cs_gated_spectrum *s = NULL;
    for (int i = 0; i < 3; i++) {
        g.start_s = (double)i * 700e-6;
        ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &s, NULL), CS_OK);
    }
    ck_assert_uint_eq(s->nfft, 1000);
    ck_assert_uint_eq(cs_gate_plan_count(ws), 4);
    ck_assert_ptr_eq(cs_gate_plan(ws, 1000, CS_GATE_FFT_FORWARD, 0, NULL), a);
    cs_error e;
    ck_assert_ptr_null(cs_gate_plan(ws, 0, CS_GATE_FFT_FORWARD, 0, &e));
    ck_assert_int_eq(e.code, CS_EINVAL);
    ck_assert_ptr_null(cs_gate_plan(ws, (size_t)1 << 40, CS_GATE_FFT_FORWARD, 0, &e));
    ck_assert_int_eq(e.code, CS_ERANGE);
    cs_gated_spectrum_free(s);
    cs_record_free(r);
    cs_gate_free(ws);
}
END_TEST

/* cs_gate_fft against the defining sum X_k = sum_j x_j exp(-+2 pi i jk/n) (direct evaluation),
 * for every kind, out of place, in place, and on arrays misaligned for SIMD. */
START_TEST(test_fft_kinds)
{
    const size_t n = 30;
    cs_gate_workspace *ws = cs_gate_alloc();
    gsl_rng *g = rng_new(9);
    double *buf = malloc((4 * n + 8) * sizeof(double)), *out = malloc((4 * n + 8) * sizeof(double));
    double x[60], ref[62];
    for (size_t j = 0; j < 2 * n; j++)
        x[j] = gsl_ran_gaussian(g, 1.0);
    for (int kind = 0; kind < 4; kind++)
        for (int variant = 0; variant < 3; variant++) {
            /* reference */
            size_t nin = kind == CS_GATE_FFT_R2C ? n : kind == CS_GATE_FFT_C2R ? n / 2 + 1 : n;
            double sign = kind == CS_GATE_FFT_FORWARD || kind == CS_GATE_FFT_R2C ? -1 : 1;
            double xin[60];
            memcpy(xin, x, sizeof xin);
            if (kind == CS_GATE_FFT_C2R) {   /* Hermitian input: DC and Nyquist real */
                xin[1] = 0;
                xin[2 * (n / 2) + 1] = 0;
            }
            size_t nref = kind == CS_GATE_FFT_R2C ? n / 2 + 1 : n;
            for (size_t k = 0; k < nref; k++) {
                double complex s = 0;
                for (size_t j = 0; j < n; j++) {
                    double complex v;
                    if (kind == CS_GATE_FFT_R2C)
                        v = xin[j];
                    else if (kind == CS_GATE_FFT_C2R)
                        v = j <= n / 2 ? xin[2 * j] + I * xin[2 * j + 1]
                                       : xin[2 * (n - j)] - I * xin[2 * (n - j) + 1];
                    else
                        v = xin[2 * j] + I * xin[2 * j + 1];
                    s += v * cexp(sign * 2 * PI_T * I * (double)(j * k) / (double)n);
                }
                if (kind == CS_GATE_FFT_C2R) {
                    ref[k] = creal(s);
                } else {
                    ref[2 * k] = creal(s);
                    ref[2 * k + 1] = cimag(s);
                }
            }
            size_t nval = kind == CS_GATE_FFT_C2R ? n : 2 * nref;
            double *in = buf + (variant == 2 ? 1 : 0);   /* 8-byte offset: misaligned */
            double *o = variant == 1 ? in : out + (variant == 2 ? 1 : 0);
            memcpy(in, xin, 2 * nin * sizeof(double));
            ck_assert_int_eq(cs_gate_fft(ws, (cs_gate_fft_kind)kind, n, in, o, NULL), CS_OK);
            for (size_t k = 0; k < nval; k++)
                ck_assert_msg(fabs(o[k] - ref[k]) < 1e-12 * n, "kind %d variant %d value %zu: %g vs %g",
                              kind, variant, k, o[k], ref[k]);
            if (variant != 1)   /* input untouched */
                for (size_t k = 0; k < (kind == CS_GATE_FFT_R2C ? n : 2 * nin); k++)
                    ck_assert(in[k] == xin[k]);
        }
    gsl_rng_free(g);
    free(buf);
    free(out);
    cs_gate_free(ws);
}
END_TEST

/* Fast sizes: even, only factors 2, 3, 5, 7, and the smallest such (brute force). */
static int smooth7(size_t v)
{
    static const size_t p[] = {2, 3, 5, 7};
    for (int i = 0; i < 4; i++)
        while (v % p[i] == 0)
            v /= p[i];
    return v == 1;
}

START_TEST(test_fast_size)
{
    for (size_t n = 1; n < 3000; n++) {
        size_t f = cs_gate_fast_size(n), b = n;
        while (b % 2 || !smooth7(b))
            b++;
        ck_assert_msg(f == b, "fast size of %zu: %zu, expected %zu", n, f, b);
    }
    ck_assert_uint_eq(cs_gate_fast_size(0), 0);
    ck_assert_uint_eq(cs_gate_fast_size(1 << 20), 1 << 20);
    size_t big = cs_gate_fast_size(2000002), b = 2000002;
    while (b % 2 || !smooth7(b))
        b++;
    ck_assert_uint_eq(big, b);
    ck_assert_uint_eq(big, 2000376);   /* 2^3 3^6 7^3 */
}
END_TEST

/* Wisdom: plans measured for a length are exported to a file, forgotten, and imported again;
 * FFTW_WISDOM_ONLY planning (FFTW manual, "Wisdom") succeeds exactly when the wisdom is known. */
static int have_wisdom(int n)
{
    fftw_complex *a = fftw_malloc((size_t)n * sizeof *a), *b = fftw_malloc((size_t)n * sizeof *b);
    cs_gate_planner_lock();
    fftw_plan p = fftw_plan_dft_1d(n, a, b, FFTW_FORWARD, FFTW_MEASURE | FFTW_WISDOM_ONLY | FFTW_PRESERVE_INPUT);
    int ok = p != NULL;
    if (p)
        fftw_destroy_plan(p);
    cs_gate_planner_unlock();
    fftw_free(a);
    fftw_free(b);
    return ok;
}

START_TEST(test_wisdom)
{
    cs_error e;
    const char *path = tu_tmp_path("wisdom.txt");
    cs_gate_wisdom_forget();
    ck_assert(!have_wisdom(96));
    cs_gate_workspace *ws = cs_gate_alloc();
    ck_assert_int_eq(cs_gate_set_effort(ws, CS_GATE_EFFORT_MEASURE), CS_OK);
    ck_assert_ptr_nonnull(cs_gate_plan(ws, 96, CS_GATE_FFT_FORWARD, 0, NULL));
    ck_assert(have_wisdom(96));
    ck_assert_int_eq(cs_gate_wisdom_save(path, &e), CS_OK);
    cs_gate_wisdom_forget();
    ck_assert(!have_wisdom(96));
    ck_assert_msg(cs_gate_wisdom_load(path, &e) == CS_OK, "%s", e.msg);
    ck_assert(have_wisdom(96));
    /* a workspace planning that length now takes the wisdom's plan */
    cs_gate_workspace *ws2 = cs_gate_alloc();
    ck_assert_ptr_nonnull(cs_gate_plan(ws2, 96, CS_GATE_FFT_FORWARD, 0, NULL));
    cs_gate_free(ws2);
    /* failures are reported, not fatal */
    ck_assert_int_eq(cs_gate_wisdom_load(tu_tmp_path("no-such-wisdom"), &e), CS_EIO);
    ck_assert_int_eq(cs_gate_wisdom_load(tu_write_text("junk.txt", "not wisdom at all\n"), &e), CS_EFORMAT);
    ck_assert_int_eq(cs_gate_set_effort(ws, (cs_gate_effort)7), CS_EINVAL);
    /* default path: $XDG_CACHE_HOME/collshift/fftw-wisdom, folder created on save */
    char buf[1024], dir[600];
    snprintf(dir, sizeof dir, "%s", tu_tmp_path("xdg"));
    setenv("XDG_CACHE_HOME", dir, 1);
    ck_assert_int_eq(cs_gate_wisdom_default_path(buf, sizeof buf, NULL), CS_OK);
    char want[700];
    snprintf(want, sizeof want, "%s/collshift/fftw-wisdom", dir);
    ck_assert_str_eq(buf, want);
    ck_assert_int_eq(cs_gate_wisdom_save(NULL, &e), CS_OK);
    cs_gate_wisdom_forget();
    ck_assert_int_eq(cs_gate_wisdom_load(NULL, &e), CS_OK);
    ck_assert(have_wisdom(96));
    setenv("XDG_CACHE_HOME", "", 1);
    setenv("HOME", "/home/someone", 1);
    ck_assert_int_eq(cs_gate_wisdom_default_path(buf, sizeof buf, NULL), CS_OK);
    ck_assert_str_eq(buf, "/home/someone/.cache/collshift/fftw-wisdom");
    ck_assert_int_eq(cs_gate_wisdom_default_path(buf, 10, NULL), CS_ERANGE);
    cs_gate_free(ws);
}
END_TEST

/* ---- gate specifications ------------------------------------------------------------------ */

static const struct spec_good {
    const char *text;
    const char *name;
    cs_gate_anchor start_anchor;
    double start_s, start_w;
    int until;
    double length_s, length_w;
    cs_gate_anchor stop_anchor;
    double stop_s, stop_w;
    const char *window;   /* as cs_window_format writes it */
    int periodic;
} spec_good[] = {
    /* the stable form: times with units from the first sample */
    {"early=0us:2us", "early", CS_GATE_ANCHOR_FIRST, 0, 0, 0, 2e-6, 0, 0, 0, 0, "hann", 1},
    {"late=20us:200us:rect", "late", CS_GATE_ANCHOR_FIRST, 20e-6, 0, 0, 200e-6, 0, 0, 0, 0, "rect", 1},
    {"g1=1.5 ms:3e-6s:tukey:0.25", "g1", CS_GATE_ANCHOR_FIRST, 1.5e-3, 0, 0, 3e-6, 0, 0, 0, 0, "tukey:0.25", 1},
    {"x.y-z_2=100ns:1us:kaiser:8,symmetric", "x.y-z_2", CS_GATE_ANCHOR_FIRST, 100e-9, 0, 0, 1e-6, 0,
     0, 0, 0, "kaiser:8", 0},
    /* relative to the burst */
    {"early=peak-2w:4w:hann", "early", CS_GATE_ANCHOR_PEAK, 0, -2, 0, 0, 4, 0, 0, 0, "hann", 1},
    {"late=end+3w:rest:rect", "late", CS_GATE_ANCHOR_END, 0, 3, 1, 0, 0, CS_GATE_ANCHOR_REST, 0, 0, "rect", 1},
    {"b=onset:end+1w:blackman,periodic", "b", CS_GATE_ANCHOR_ONSET, 0, 0, 1, 0, 0, CS_GATE_ANCHOR_END, 0,
     1, "blackman", 1},
    {"pre=zero-5us:5us", "pre", CS_GATE_ANCHOR_ZERO, -5e-6, 0, 0, 5e-6, 0, 0, 0, 0, "hann", 1},
    {"t=tail+0.5us:fade", "t", CS_GATE_ANCHOR_TAIL, 0.5e-6, 0, 1, 0, 0, CS_GATE_ANCHOR_FADE, 0, 0, "hann", 1},
    {" p = peak : 2.5w ", "p", CS_GATE_ANCHOR_PEAK, 0, 0, 0, 0, 2.5, 0, 0, 0, "hann", 1},
};

START_TEST(test_spec_parse)
{
    const struct spec_good *c = &spec_good[_i];
    cs_gate_spec s;
    cs_error e;
    ck_assert_msg(cs_gate_spec_parse(c->text, NULL, &s, &e) == CS_OK, "'%s': %s", c->text, e.msg);
    ck_assert_str_eq(s.name, c->name);
    ck_assert_int_eq(s.start.anchor, c->start_anchor);
    ck_assert(tu_close(s.start.offset_s, c->start_s, 1e-12));
    ck_assert(tu_close(s.start.offset_w, c->start_w, 1e-12));
    ck_assert_int_eq(s.until, c->until);
    if (c->until) {
        ck_assert_int_eq(s.stop.anchor, c->stop_anchor);
        ck_assert(tu_close(s.stop.offset_s, c->stop_s, 1e-12));
        ck_assert(tu_close(s.stop.offset_w, c->stop_w, 1e-12));
    } else {
        ck_assert(tu_close(s.length_s, c->length_s, 1e-12));
        ck_assert(tu_close(s.length_w, c->length_w, 1e-12));
    }
    char w[CS_WINDOW_SPEC_MAX];
    ck_assert_str_eq(cs_window_format(&s.window, w, sizeof w), c->window);
    ck_assert_int_eq(s.periodic, c->periodic);
    int needs = c->start_anchor >= CS_GATE_ANCHOR_ONSET || c->start_w != 0 || c->length_w != 0 ||
                (c->until && c->stop_anchor >= CS_GATE_ANCHOR_ONSET && c->stop_anchor != CS_GATE_ANCHOR_REST) ||
                c->stop_w != 0;
    ck_assert_int_eq(cs_gate_spec_needs_burst(&s), needs);
    /* formatting reads back as the same specification */
    char buf[256];
    cs_gate_spec t;
    cs_gate_spec_format(&s, buf, sizeof buf);
    ck_assert_msg(cs_gate_spec_parse(buf, NULL, &t, &e) == CS_OK, "'%s': %s", buf, e.msg);
    ck_assert(memcmp(&s.start, &t.start, sizeof s.start) == 0);
    ck_assert(s.length_s == t.length_s && s.length_w == t.length_w && s.until == t.until);
    ck_assert_int_eq(t.periodic, s.periodic);
}
END_TEST

static const struct spec_bad {
    const char *text;
    int code;
    const char *msg;   /* a part of the message */
} spec_bad[] = {
    {"early", CS_EINVAL, "NAME=START:LENGTH"},
    {"=0us:1us", CS_EINVAL, "name"},
    {"bad name=0us:1us", CS_EINVAL, "name"},
    {"abcdefghijabcdefghijabcdefghijabc=0us:1us", CS_EINVAL, "name"},
    {"g=0us", CS_EINVAL, "START:LENGTH"},
    {"g=:1us", CS_EINVAL, "empty start"},
    {"g=0us:", CS_EINVAL, "empty length"},
    {"g=20:1us", CS_EUNIT, "start '20'"},
    {"g=20 MHz:1us", CS_EUNIT, "start '20 MHz'"},
    {"g=2w:1us", CS_EINVAL, "peak-2w"},
    {"g=-3us:1us", CS_ERANGE, "before the record"},
    {"g=0us:-1us", CS_ERANGE, "must be > 0"},
    {"g=0us:0w", CS_ERANGE, "must be > 0"},
    {"g=pek-2w:4w", CS_EINVAL, "unknown start 'pek'"},
    {"g=peak*2w:4w", CS_EINVAL, "expected '+' or '-'"},
    {"g=peak-2x:4w", CS_EUNIT, "offset '2x'"},
    {"g=peak--2w:4w", CS_EINVAL, "two signs"},
    {"g=0us:1us:hanning", CS_EINVAL, "unknown window"},
    {"g=0us:1us:tukey:1.5", CS_ERANGE, "tukey"},
    {"g=0us:1us:hann,sideways", CS_EINVAL, "periodic or symmetric"},
};

START_TEST(test_spec_errors)
{
    const struct spec_bad *c = &spec_bad[_i];
    cs_gate_spec s;
    cs_error e;
    cs_error_clear(&e);
    int rc = cs_gate_spec_parse(c->text, NULL, &s, &e);
    ck_assert_msg(rc == c->code, "'%s': code %d, expected %d (%s)", c->text, rc, c->code, e.msg);
    ck_assert_msg(strstr(e.msg, c->msg) != NULL, "'%s': message '%s' lacks '%s'", c->text, e.msg, c->msg);
    ck_assert_msg(strstr(e.msg, c->text) != NULL || c->text[0] == '\0', "message '%s' does not quote the spec", e.msg);
}
END_TEST

/* Resolving against a record (1 MHz, t0 = -10 us, 100 samples) and a burst written by hand. */
START_TEST(test_resolve)
{
    cs_record *r = cs_record_alloc(100, 1);
    r->dt_s = 1e-6;
    r->t0_s = -10e-6;
    cs_burst b;
    memset(&b, 0, sizeof b);
    b.status = CS_BURST_FOUND;
    b.peak_time_s = 20e-6;   /* sample 30 */
    b.fwhm_s = 4e-6;
    b.onset_s = 15e-6;
    b.end_s = 30e-6;
    b.tail_start_s = 40e-6;
    b.fade_s = 70e-6;
    cs_gate_spec s;
    cs_gate g;
    cs_error e;
    size_t first, count;

    ck_assert_int_eq(cs_gate_spec_parse("early=peak-2w:4w", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, &b, &g, &e), CS_OK);
    ck_assert(tu_close(g.start_s, 22e-6, 1e-12));   /* 20 - 8 us from t0 = -10 us */
    ck_assert(tu_close(g.length_s, 16e-6, 1e-12));
    ck_assert(tu_close(g.t_start_s, 12e-6, 1e-12));
    ck_assert(!g.clipped);
    ck_assert_int_eq(cs_gate_samples(&g, r, &first, &count, NULL), CS_OK);
    ck_assert_uint_eq(first, 22);
    ck_assert_uint_eq(count, 16);

    ck_assert_int_eq(cs_gate_spec_parse("late=end+3w:rest:rect", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, &b, &g, &e), CS_OK);
    ck_assert(tu_close(g.start_s, 52e-6, 1e-12));
    ck_assert(tu_close(g.length_s, 48e-6, 1e-12));
    ck_assert_int_eq(cs_gate_samples(&g, r, &first, &count, NULL), CS_OK);
    ck_assert_uint_eq(first + count, 100);
    ck_assert_ptr_eq(g.window.type, &cs_window_rect);

    ck_assert_int_eq(cs_gate_spec_parse("t=tail:fade+1us", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, &b, &g, &e), CS_OK);
    ck_assert(tu_close(g.start_s, 50e-6, 1e-12));
    ck_assert(tu_close(g.length_s, 31e-6, 1e-12));

    /* clipped at both ends */
    ck_assert_int_eq(cs_gate_spec_parse("w=zero-20us:200us", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, NULL, &g, &e), CS_OK);
    ck_assert(g.clipped);
    ck_assert_double_eq(g.start_s, 0);
    ck_assert(tu_close(g.length_s, 100e-6, 1e-12));

    /* the stable form needs no burst */
    ck_assert_int_eq(cs_gate_spec_parse("a=5us:10us", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, NULL, &g, &e), CS_OK);
    ck_assert(tu_close(g.start_s, 5e-6, 1e-12));
    ck_assert_int_eq(cs_gate_samples(&g, r, &first, &count, NULL), CS_OK);
    ck_assert_uint_eq(first, 5);
    ck_assert_uint_eq(count, 10);

    /* errors */
    ck_assert_int_eq(cs_gate_spec_parse("early=peak-2w:4w", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, NULL, &g, &e), CS_EDATA);
    ck_assert_ptr_nonnull(strstr(e.msg, "needs a detected burst"));
    cs_burst none = b;
    none.status = CS_BURST_NONE;
    ck_assert_int_eq(cs_gate_resolve(&s, r, &none, &g, &e), CS_EDATA);
    ck_assert_int_eq(cs_gate_spec_parse("x=end:onset", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, &b, &g, &e), CS_ERANGE);
    ck_assert_ptr_nonnull(strstr(e.msg, "before it starts"));
    ck_assert_int_eq(cs_gate_spec_parse("x=200us:1us", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, &b, &g, &e), CS_ERANGE);
    ck_assert_ptr_nonnull(strstr(e.msg, "outside the record"));
    ck_assert_int_eq(cs_gate_spec_parse("x=10us:0.5us", NULL, &s, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_resolve(&s, r, &b, &g, &e), CS_ERANGE);

    /* automatic gates: early = peak +- 2 FWHM, late = end + 3 FWHM .. end of record */
    cs_gate ag[2];
    size_t ng;
    ck_assert_int_eq(cs_gate_auto(r, &b, NULL, ag, &ng, &e), CS_OK);
    ck_assert_uint_eq(ng, 2);
    ck_assert_str_eq(ag[0].name, "early");
    ck_assert_str_eq(ag[1].name, "late");
    ck_assert(tu_close(ag[0].start_s, 30e-6 - CS_GATE_AUTO_EARLY_K * 4e-6, 1e-12));
    ck_assert(tu_close(ag[0].length_s, 2 * CS_GATE_AUTO_EARLY_K * 4e-6, 1e-12));
    ck_assert(tu_close(ag[1].start_s, 40e-6 + CS_GATE_AUTO_LATE_M * 4e-6, 1e-12));
    ck_assert(tu_close(ag[1].start_s + ag[1].length_s, 100e-6, 1e-12));
    ck_assert_ptr_eq(ag[0].window.type, &cs_window_hann);
    b.end_s = 85e-6;   /* late gate would start beyond the record */
    ck_assert_int_eq(cs_gate_auto(r, &b, NULL, ag, &ng, &e), CS_OK);
    ck_assert_uint_eq(ng, 1);
    ck_assert_int_eq(cs_gate_auto(r, &none, NULL, ag, &ng, &e), CS_EDATA);
    cs_record_free(r);
}
END_TEST

/* ---- spectrogram -------------------------------------------------------------------------- */

/* A linear chirp exp(i pi k t^2) has the instantaneous frequency k t (definition); each row's
 * peak must follow it within a bin, and each row integrates to the tone's power 1 (Parseval). */
START_TEST(test_spectrogram_chirp)
{
    const size_t n = 16384;
    const double dt = 1e-8, k = 1e11;   /* 0 .. 16.4 MHz over 164 us (Nyquist: 50 MHz) */
    cs_record *r = cs_record_alloc(n, 1);
    r->dt_s = dt;
    for (size_t j = 0; j < n; j++) {
        double t = (double)j * dt, ph = PI_T * k * t * t;
        r->data[2 * j] = cos(ph);
        r->data[2 * j + 1] = sin(ph);
    }
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_spectrogram_params p;
    cs_spectrogram_params_default(&p);
    p.segment = 512;
    p.hop = 256;
    p.pad = 2;
    p.lo_hz = 1e6;
    cs_spectrogram *s = NULL;
    cs_error e;
    ck_assert_msg(cs_spectrogram_compute(ws, r, &p, &s, &e) == CS_OK, "%s", e.msg);
    ck_assert_uint_eq(s->ntime, (n - 512) / 256 + 1);
    ck_assert_uint_eq(s->nfreq, s->nfft);
    ck_assert_uint_eq(s->nfft, 1024);
    double df = 1.0 / (1024 * dt);
    for (size_t i = 0; i < s->ntime; i++) {
        const double *row = s->psd + i * s->nfreq;
        size_t kmax = 0;
        double sum = 0;
        for (size_t q = 0; q < s->nfreq; q++) {
            if (row[q] > row[kmax])
                kmax = q;
            sum += row[q];
        }
        double t = s->time_s[i], fi = k * t;   /* time of the segment centre */
        ck_assert(tu_close(t, ((double)i * 256 + 255.5) * dt, 1e-12));
        ck_assert_msg(fabs(s->freq_hz[kmax] - 1e6 - fi) <= 2 * df, "row %zu: peak %.4g Hz, chirp %.4g Hz",
                      i, s->freq_hz[kmax] - 1e6, fi);
        ck_assert(tu_close(sum * df, 1.0, 1e-9));
    }
    /* CSV, long format */
    const char *path = tu_tmp_path("spec.csv");
    ck_assert_int_eq(cs_spectrogram_write_csv(path, s, &e), CS_OK);
    FILE *f = fopen(path, "r");
    ck_assert_ptr_nonnull(f);
    char line[256];
    size_t rows = 0, comments = 0;
    int header = 0;
    double t0 = 0, f0 = 0, p0 = 0;
    while (fgets(line, sizeof line, f)) {
        if (line[0] == '#') {
            comments++;
            if (strncmp(line, "# psd_convention", 16) == 0)
                ck_assert_ptr_nonnull(strstr(line, "two-sided"));
        } else if (!header) {
            ck_assert_str_eq(line, "time_s,frequency_hz,psd\n");
            header = 1;
        } else {
            if (rows == 0)
                ck_assert_int_eq(sscanf(line, "%lf,%lf,%lf", &t0, &f0, &p0), 3);
            rows++;
        }
    }
    fclose(f);
    ck_assert(comments >= 5);
    ck_assert_uint_eq(rows, s->ntime * s->nfreq);
    ck_assert(t0 == s->time_s[0] && f0 == s->freq_hz[0] && p0 == s->psd[0]);
    /* a row equals the gated spectrum of the same stretch */
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "seg", 512 * dt, 512 * dt, NULL, 1, NULL), CS_OK);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = 2;
    o.lo_hz = 1e6;
    cs_gated_spectrum *gs = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws, r, &g, &o, &gs, NULL), CS_OK);
    for (size_t q = 0; q < s->nfreq; q++) {
        ck_assert(gs->psd->y[q] == s->psd[2 * s->nfreq + q]);
        ck_assert(gs->psd->freq_hz[q] == s->freq_hz[q]);
    }
    cs_gated_spectrum_free(gs);
    /* errors */
    cs_spectrogram_free(s);
    p.segment = n + 1;
    ck_assert_int_eq(cs_spectrogram_compute(ws, r, &p, &s, &e), CS_ERANGE);
    ck_assert_ptr_null(s);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

/* Real input: one-sided rows; defaults (256-sample Hann segments, hop 64). */
START_TEST(test_spectrogram_real)
{
    cs_record *r = cs_record_alloc(2000, 0);
    r->dt_s = 1e-6;
    add_tone(r, 2.0, 100e3, 0.0);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_spectrogram *s = NULL;
    ck_assert_int_eq(cs_spectrogram_compute(ws, r, NULL, &s, NULL), CS_OK);
    ck_assert_uint_eq(s->segment, 256);
    ck_assert_uint_eq(s->hop, 64);
    ck_assert(s->one_sided);
    ck_assert_uint_eq(s->nfreq, 129);
    ck_assert_double_eq(s->freq_hz[0], 0.0);
    double df = s->freq_hz[1] - s->freq_hz[0];
    for (size_t i = 0; i < s->ntime; i++) {
        double sum = 0;
        for (size_t q = 0; q < s->nfreq; q++)
            sum += s->psd[i * s->nfreq + q];
        ck_assert(fabs(sum * df / 2.0 - 1) < 1e-3);   /* A^2/2 = 2 */
    }
    cs_spectrogram_free(s);
    cs_gate_free(ws);
    cs_record_free(r);
}
END_TEST

static Suite *gate_suite(void)
{
    Suite *s = suite_create("gate");
    TCase *tc = tcase_create("normalisation");
    tcase_add_loop_test(tc, test_parseval, 0, N_OF(parseval_cases));
    tcase_add_test(tc, test_complex_tone);
    tcase_add_test(tc, test_lo_added);
    tcase_add_test(tc, test_real_sine);
    tcase_add_test(tc, test_white_noise_level);
    tcase_add_test(tc, test_coherent_vs_power);
    tcase_add_test(tc, test_remove_mean);
    suite_add_tcase(s, tc);
    tc = tcase_create("api");
    tcase_add_test(tc, test_spectrum_errors);
    tcase_add_test(tc, test_spectrum_failure_zeroes);
    tcase_add_test(tc, test_reuse);
    suite_add_tcase(s, tc);
    tc = tcase_create("fftw");
    tcase_add_test(tc, test_plan_cache);
    tcase_add_test(tc, test_plan_cache_bounded);
    tcase_add_test(tc, test_fft_kinds);
    tcase_add_test(tc, test_fast_size);
    tcase_add_test(tc, test_wisdom);
    suite_add_tcase(s, tc);
    tc = tcase_create("gates");
    tcase_add_loop_test(tc, test_spec_parse, 0, N_OF(spec_good));
    tcase_add_loop_test(tc, test_spec_errors, 0, N_OF(spec_bad));
    tcase_add_test(tc, test_resolve);
    suite_add_tcase(s, tc);
    tc = tcase_create("spectrogram");
    tcase_add_test(tc, test_spectrogram_chirp);
    tcase_add_test(tc, test_spectrogram_real);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(gate_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
