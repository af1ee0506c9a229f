/* Check suite for gatefit: gate-aware fits of decays and bursts, the model's gated spectrum, and
 * the calibration of their errors against a plain Lorentzian fit of the same gated spectra.
 *
 * Every synthetic record is made here from its own formula (not through the library's model),
 * with GSL's MT19937 and fixed seeds:
 *   decay  x(t) = A exp(i phi) exp[(2 pi i (f - lo) - Gamma/2)(t - t_ref)]   (complex)
 *               = A cos(2 pi (f - lo)(t - t_ref) + phi) exp(-Gamma (t - t_ref)/2)   (real)
 *   burst  x(t) = A exp(i phi) sech((t - t_p)/tau) exp[2 pi i (f - lo)(t - t_ref)]
 * plus white Gaussian noise of standard deviation sigma in each real component. */
#include <collshift/fit.h>
#include <collshift/gatefit.h>
#include <collshift/profile.h>

#include "testutil.h"

#include <check.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define PI_T 3.14159265358979323846
#define LN1SQRT2_T 0.88137358701954302   /* ln(1 + sqrt 2) */
#define N_OF(a) ((int)(sizeof(a) / sizeof((a)[0])))

/* ---- helpers ----------------------------------------------------------------------------- */

typedef struct comp_truth {
    int burst;          /* 0 decay, 1 burst */
    double f;           /* absolute centre, Hz */
    double rate;        /* decay: Gamma (intensity rate), s^-1; burst: tau, s */
    double tp;          /* burst: peak time, s (absolute) */
    double A, phi;      /* amplitude and phase at t_ref (decay) / carrier phase at t_ref (burst) */
} comp_truth;

static double sech_t(double u) { return 1.0 / cosh(u); }

/* Add the components (all referred to time t_ref) to record r. */
static void add_model(cs_record *r, const comp_truth *c, size_t nc, double lo, double t_ref)
{
    for (size_t j = 0; j < r->n; j++) {
        double t = r->t0_s + (double)j * r->dt_s, s = t - t_ref;
        double re = 0, im = 0;
        for (size_t k = 0; k < nc; k++) {
            double env = c[k].burst ? c[k].A * sech_t((t - c[k].tp) / c[k].rate)
                                    : c[k].A * exp(-0.5 * c[k].rate * s);
            double ph = 2 * PI_T * (c[k].f - lo) * s + c[k].phi;
            re += env * cos(ph);
            im += env * sin(ph);
        }
        if (r->is_complex) {
            r->data[2 * j] += re;
            r->data[2 * j + 1] += im;
        } else {
            r->data[j] += re;
        }
    }
}

static cs_record *new_record(size_t n, int cplx, double dt, double t0)
{
    cs_record *r = cs_record_alloc(n, cplx);
    ck_assert_ptr_nonnull(r);
    r->dt_s = dt;
    r->t0_s = t0;
    return r;
}

static void add_noise(cs_record *r, gsl_rng *g, double sigma)
{
    for (size_t i = 0; i < (r->is_complex ? 2 * r->n : r->n); i++)
        r->data[i] += gsl_ran_gaussian(g, sigma);
}

static cs_gate make_gate(const char *win, double start, double length)
{
    cs_window w;
    ck_assert_int_eq(cs_window_parse(win, &w, NULL), CS_OK);
    cs_gate g;
    ck_assert_int_eq(cs_gate_init(&g, "g", start, length, &w, CS_WINDOW_PERIODIC, NULL), CS_OK);
    return g;
}

/* |a - b| <= tol * scale */
#define CHECK_ABS(a, b, tol, scale, what)                                                         \
    ck_assert_msg(fabs((a) - (b)) <= (tol) * (scale), "%s: %.15g vs %.15g (tol %g x %g)", what,   \
                  (double)(a), (double)(b), (double)(tol), (double)(scale))

static double wrap_pi(double a)
{
    while (a > PI_T)
        a -= 2 * PI_T;
    while (a <= -PI_T)
        a += 2 * PI_T;
    return a;
}

/* ---- parsing ------------------------------------------------------------------------------ */

static const struct {
    const char *text;
    int rc;
    size_t n;
    cs_gatefit_kind k0, k1;
} parse_cases[] = {
    {"decay", CS_OK, 1, CS_GATEFIT_DECAY, 0},
    {"burst", CS_OK, 1, CS_GATEFIT_BURST, 0},
    {"burst+decay", CS_OK, 2, CS_GATEFIT_BURST, CS_GATEFIT_DECAY},
    {" decay + decay ", CS_OK, 2, CS_GATEFIT_DECAY, CS_GATEFIT_DECAY},
    {"decay+lorentz", CS_EINVAL, 0, 0, 0},
    {"Decay", CS_EINVAL, 0, 0, 0},
    {"", CS_EINVAL, 0, 0, 0},
    {"decay+", CS_EINVAL, 0, 0, 0},
    {"+burst", CS_EINVAL, 0, 0, 0},
    {"decay+decay+decay+decay+decay+decay+decay+decay+decay", CS_EINVAL, 0, 0, 0},
};

START_TEST(test_parse)
{
    cs_gatefit_kind k[CS_GATEFIT_MAX_COMP];
    size_t n = 99;
    cs_error err;
    int rc = cs_gatefit_parse(parse_cases[_i].text, k, CS_GATEFIT_MAX_COMP, &n, &err);
    ck_assert_msg(rc == parse_cases[_i].rc, "'%s': rc %d", parse_cases[_i].text, rc);
    if (rc == CS_OK) {
        ck_assert_uint_eq(n, parse_cases[_i].n);
        ck_assert_int_eq(k[0], parse_cases[_i].k0);
        if (n > 1)
            ck_assert_int_eq(k[1], parse_cases[_i].k1);
    } else {
        ck_assert_uint_eq(n, 0);
        ck_assert_msg(strlen(err.msg) > 0, "no message");
    }
}
END_TEST

START_TEST(test_parse_message)
{
    cs_gatefit_kind k[2];
    size_t n;
    cs_error err;
    ck_assert_int_eq(cs_gatefit_parse("decay+lorentz", k, 2, &n, &err), CS_EINVAL);
    ck_assert_msg(strstr(err.msg, "'lorentz'") && strstr(err.msg, "decay, burst"), "%s", err.msg);
    ck_assert_int_eq(cs_gatefit_parse("decay+decay+decay", k, 2, &n, &err), CS_EINVAL);
    ck_assert_str_eq(cs_gatefit_kind_name(CS_GATEFIT_BURST), "burst");
    ck_assert_uint_eq(cs_gatefit_kind_nparams(CS_GATEFIT_DECAY), 4);
    ck_assert_uint_eq(cs_gatefit_kind_nparams(CS_GATEFIT_BURST), 5);
}
END_TEST

/* ---- noise-free exact recovery ------------------------------------------------------------ */

/* The true reported parameters of component c in a gate starting at t_g (records made with
 * t_ref = 0). */
static void expected(const comp_truth *c, double lo, double t_g, double *amp, double *phase)
{
    if (c->burst) {
        *amp = c->A;
        *phase = wrap_pi(c->phi + 2 * PI_T * (c->f - lo) * t_g);
    } else {
        *amp = c->A * exp(-0.5 * c->rate * t_g);
        *phase = wrap_pi(c->phi + 2 * PI_T * (c->f - lo) * t_g);
    }
}

static void check_exact(const cs_gatefit_result *r, const comp_truth *c, size_t nc, double lo, double tol)
{
    ck_assert_uint_eq(r->ncomp, nc);
    for (size_t k = 0; k < nc; k++) {
        const cs_gatefit_component *q = &r->comp[k];
        double amp, ph;
        expected(&c[k], lo, r->t_gate_s, &amp, &ph);
        double fw = c[k].burst ? CS_GATEFIT_SECH_FWHM_TAU / c[k].rate : c[k].rate / (2 * PI_T);
        CHECK_ABS(q->offset_hz, c[k].f - lo, tol, fw, "centre");
        CHECK_ABS(q->center_hz, c[k].f, tol, fw + 1e-15 * fabs(c[k].f), "absolute centre");
        CHECK_ABS(q->fwhm_hz, fw, tol, fw, "fwhm");
        if (c[k].burst) {
            ck_assert_int_eq(q->kind, CS_GATEFIT_BURST);
            CHECK_ABS(q->tau_s, c[k].rate, tol, c[k].rate, "tau");
            CHECK_ABS(q->t_peak_s, c[k].tp, tol, c[k].rate, "t_peak");
            ck_assert(isnan(q->gamma_per_s));
        } else {
            ck_assert_int_eq(q->kind, CS_GATEFIT_DECAY);
            CHECK_ABS(q->gamma_per_s, c[k].rate, tol, c[k].rate, "gamma");
            ck_assert(isnan(q->tau_s) && isnan(q->t_peak_s));
        }
        CHECK_ABS(q->amplitude, amp, tol, amp, "amplitude");
        CHECK_ABS(wrap_pi(q->phase_rad - ph), 0.0, tol, 1.0, "phase");
    }
}

typedef struct exact_case {
    const char *name, *model, *window;
    int cplx;
    size_t n;
    double dt, t0, lo, gstart, glen;
    size_t nc;
    comp_truth c[2];
} exact_case;

/* SI units; dt 4 ns (250 MS/s); records made with t_ref = 0 (so a record starting at t0 < 0
 * holds the decay growing backwards before t = 0, which the model allows as well). */
static const exact_case exact_cases[] = {
    {"decay, rect, LO 384 THz", "decay", "rect", 1, 3000, 4e-9, 0.0, 384.230484468e12, 1e-6, 8e-6, 1,
     {{0, 384.230484468e12 + 3e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.3}}},
    {"decay, hann, t0 -2 us", "decay", "hann", 1, 3000, 4e-9, -2e-6, 80e6, 1.2e-6, 10e-6, 1,
     {{0, 80e6 - 7.5e6, 2 * PI_T * 0.8e6, 0, 2.0, -2.0}}},
    {"burst, hann", "burst", "hann", 1, 2000, 4e-9, 0.0, 0.0, 0.0, 8e-6, 1,
     {{1, 12e6, 60e-9, 3.1e-6, 5.0, 1.0}}},
    {"burst+decay, rect", "burst+decay", "rect", 1, 3000, 4e-9, 0.0, 1e9, 0.4e-6, 11e-6, 2,
     {{1, 1e9 + 15e6, 40e-9, 2.0e-6, 5.0, 0.5}, {0, 1e9 - 4e6, 2 * PI_T * 0.4e6, 0, 0.5, 2.5}}},
    {"decay+decay, rect", "decay+decay", "rect", 1, 3000, 4e-9, 0.0, 0.0, 0.2e-6, 11e-6, 2,
     {{0, 5e6, 2 * PI_T * 0.3e6, 0, 1.0, 0.5}, {0, -9e6, 2 * PI_T * 1.5e6, 0, 0.6, -1.0}}},
    {"real cosine decay, hann", "decay", "hann", 0, 3000, 4e-9, 0.0, 0.0, 0.6e-6, 10e-6, 1,
     {{0, 21e6, 2 * PI_T * 0.6e6, 0, 1.5, 0.7}}},
    {"real burst, rect", "burst", "rect", 0, 2000, 4e-9, 0.0, 0.0, 0.0, 8e-6, 1,
     {{1, 30e6, 50e-9, 4.0e-6, 3.0, -0.4}}},
    /* long walks of the solver's basis recurrences (gatefit_impl.h, GF_ANCHOR): a slow decay
       over 40000 samples (all of them active) and a wide burst over 20000, its peak mid-gate */
    {"slow decay, 40000 samples", "decay", "rect", 1, 40000, 1e-9, 0.0, 0.0, 0.0, 40e-6, 1,
     {{0, 2.1e6, 2 * PI_T * 20e3, 0, 1.0, 0.9}}},
    {"wide burst, 20000 samples", "burst", "hann", 1, 20000, 1e-9, 0.0, 0.0, 0.0, 20e-6, 1,
     {{1, -1.3e6, 1e-6, 9.3e-6, 2.0, -2.2}}},
};

START_TEST(test_exact)
{
    const exact_case *e = &exact_cases[_i];
    cs_record *rec = new_record(e->n, e->cplx, e->dt, e->t0);
    add_model(rec, e->c, e->nc, e->lo, 0.0);
    cs_gate g = make_gate(e->window, e->gstart, e->glen);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gatefit_result *r = NULL;
    cs_error err;
    int rc = cs_gatefit_run(ws, rec, &g, e->model, e->lo, NULL, &r, &err);
    ck_assert_msg(rc == CS_OK, "%s: %s", e->name, err.msg);
    ck_assert_int_eq(r->status, CS_FIT_CONVERGED);
    printf("exact %-26s niter %2zu  rss %.3g  stop %s\n", e->name, r->niter, r->rss,
           cs_fit_stop_name(r->stop));
    check_exact(r, e->c, e->nc, e->lo, 1e-8);
    /* noise-free data and the exact model: the residuals are rounding (common practice), so
       their sum of squares is below 1e-20 of the data's over the gate (relative rms 1e-10) */
    double ssx = 0.0;
    for (size_t i = 0; i < (e->cplx ? 2 : 1) * r->m; i++)
        ssx += rec->data[(e->cplx ? 2 : 1) * r->first + i] * rec->data[(e->cplx ? 2 : 1) * r->first + i];
    ck_assert_msg(r->rss <= 1e-20 * ssx, "%s: rss %g of %g", e->name, r->rss, ssx);
    size_t np = 0;
    for (size_t k = 0; k < e->nc; k++)
        np += e->c[k].burst ? CS_GATEFIT_BURST_NPARAMS : CS_GATEFIT_DECAY_NPARAMS;
    ck_assert_uint_eq(r->nparams, np);
    ck_assert_int_eq(r->errors_scaled, 1);
    ck_assert_uint_eq(r->dof, r->n - r->nparams);
    ck_assert_uint_eq(r->n, (e->cplx ? 2 : 1) * r->nused);
    /* the model evaluator reproduces the record over the gate */
    double *mv = malloc((e->cplx ? 2 : 1) * r->m * sizeof *mv);
    ck_assert_int_eq(cs_gatefit_model_eval(r, r->first, r->m, mv), CS_OK);
    double maxd = 0, maxv = 0;
    for (size_t i = 0; i < (e->cplx ? 2 : 1) * r->m; i++) {
        maxd = fmax(maxd, fabs(mv[i] - rec->data[(e->cplx ? 2 : 1) * r->first + i]));
        maxv = fmax(maxv, fabs(rec->data[(e->cplx ? 2 : 1) * r->first + i]));
    }
    ck_assert_msg(maxd <= 1e-8 * maxv, "%s: model differs by %g", e->name, maxd);
    free(mv);
    cs_gatefit_result_free(r);
    cs_gate_free(ws);
    cs_record_free(rec);
}
END_TEST

START_TEST(test_param_names)
{
    comp_truth c[2] = {{1, 15e6, 40e-9, 2.0e-6, 5.0, 0.5}, {0, -4e6, 2 * PI_T * 0.4e6, 0, 0.5, 2.5}};
    cs_record *rec = new_record(3000, 1, 4e-9, 0.0);
    add_model(rec, c, 2, 0.0, 0.0);
    cs_gate g = make_gate("rect", 0.4e-6, 11e-6);
    cs_gatefit_result *r = NULL;
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "burst+decay", 0.0, NULL, &r, NULL), CS_OK);
    static const char *names[9] = {"1.center_hz", "1.tau_s", "1.t_peak_s", "1.amplitude", "1.phase_rad",
                                   "2.center_hz", "2.gamma_per_s", "2.amplitude", "2.phase_rad"};
    char buf[32];
    for (size_t i = 0; i < 9; i++)
        ck_assert_str_eq(cs_gatefit_param_name(r, i, buf, sizeof buf), names[i]);
    ck_assert_str_eq(cs_gatefit_param_name(r, 9, buf, sizeof buf), "");
    ck_assert_uint_eq(r->comp[1].first, 5);
    ck_assert_double_eq(r->value[6], r->comp[1].gamma_per_s);
    ck_assert_double_eq(r->value[2], r->comp[0].t_peak_s);
    /* the starting values are reported and are not the answer */
    ck_assert(isfinite(r->comp[0].start.tau_s) && isfinite(r->comp[1].start.gamma_per_s));
    ck_assert(isnan(r->comp[0].start.gamma_per_s) && isnan(r->comp[1].start.tau_s));
    ck_assert(r->comp[0].start.tau_s != r->comp[0].tau_s);
    cs_gatefit_result_free(r);
    cs_record_free(rec);
}
END_TEST

/* ---- the burst's spectrum: the sech <-> sech pair and Parseval ----------------------------- */

/* Source: Fourier transform pair sech <-> sech (handbook table; derived at the top of
 * src/gatefit.c): int sech(t/tau) exp(-2 pi i nu t) dt = pi tau sech(pi^2 tau nu), so the PSD of a
 * burst wholly inside a long rect gate is S(f) = A^2 pi^2 tau^2 sech^2(pi^2 tau (f - f0)) / T
 * (S = |X|^2 / (dt sum w^2), sum w^2 = m, m dt = T) and its FWHM is 2 ln(1 + sqrt 2)/(pi^2 tau).
 * Parseval: sum_k S df = mean |x|^2 over the gate = 2 A^2 tau / T. */
START_TEST(test_burst_spectrum)
{
    const double dt = 2e-9, tau = 80e-9, A = 2.0, f0 = 10e6, lo = 0.0;
    const size_t n = 4000;
    comp_truth c = {1, f0, tau, 4.0e-6, A, 0.2};
    cs_record *rec = new_record(n, 1, dt, 0.0);
    add_model(rec, &c, 1, lo, 0.0);
    cs_gate g = make_gate("rect", 0.0, (double)n * dt);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gatefit_result *r = NULL;
    cs_error err;
    ck_assert_msg(cs_gatefit_run(ws, rec, &g, "burst", lo, NULL, &r, &err) == CS_OK, "%s", err.msg);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = 16;
    cs_gated_spectrum *s = NULL;
    ck_assert_int_eq(cs_gatefit_model_psd(ws, r, &o, 0, &s, &err), CS_OK);
    const double T = (double)n * dt;
    size_t kmax = 0;
    double integral = 0;
    for (size_t k = 0; k < s->psd->n; k++) {
        if (s->psd->y[k] > s->psd->y[kmax])
            kmax = k;
        integral += s->psd->y[k] * s->df_hz;
        double nu = s->psd->freq_hz[k] - f0;
        double expect = A * A * PI_T * PI_T * tau * tau * pow(sech_t(PI_T * PI_T * tau * nu), 2) / T;
        /* the sampled transform differs from the continuous one by aliasing, far below 1e-6 here */
        CHECK_ABS(s->psd->y[k], expect, 1e-6, A * A * PI_T * PI_T * tau * tau / T, "sech^2 spectrum");
    }
    CHECK_ABS(integral, 2 * A * A * tau / T, 1e-9, 2 * A * A * tau / T, "Parseval");
    /* half-maximum width by linear interpolation on the fine (16x padded) grid */
    double half = 0.5 * s->psd->y[kmax], fl = 0, fr = 0;
    for (size_t k = kmax; k > 0; k--)
        if (s->psd->y[k - 1] < half) {
            fl = s->psd->freq_hz[k - 1] +
                 (half - s->psd->y[k - 1]) / (s->psd->y[k] - s->psd->y[k - 1]) * s->df_hz;
            break;
        }
    for (size_t k = kmax; k + 1 < s->psd->n; k++)
        if (s->psd->y[k + 1] < half) {
            fr = s->psd->freq_hz[k] + (s->psd->y[k] - half) / (s->psd->y[k] - s->psd->y[k + 1]) * s->df_hz;
            break;
        }
    double fwhm = 2 * LN1SQRT2_T / (PI_T * PI_T * tau);
    CHECK_ABS(fr - fl, fwhm, 1e-3, fwhm, "measured FWHM");
    CHECK_ABS(r->comp[0].fwhm_hz, fwhm, 1e-8, fwhm, "reported FWHM");
    CHECK_ABS(CS_GATEFIT_SECH_FWHM_TAU, 2 * log(1 + sqrt(2.0)) / (PI_T * PI_T), 1e-15, 1.0, "constant");
    /* the same shape as the sech2 profile (area = integral, fwhm) of profile.h */
    double p[3] = {f0, fwhm, integral}, y = 0, xk = s->psd->freq_hz[kmax];
    ck_assert_int_eq(cs_profile_eval(&cs_profile_sech2, p, &xk, 1, &y), CS_OK);
    CHECK_ABS(s->psd->y[kmax], y, 1e-4, y, "sech2 profile height");
    cs_gated_spectrum_free(s);
    cs_gatefit_result_free(r);
    cs_gate_free(ws);
    cs_record_free(rec);
}
END_TEST

/* ---- the model's gated spectrum ----------------------------------------------------------- */

typedef struct psd_case {
    const char *name, *model, *window;
    int cplx;
    size_t pad;
    int exact_length, remove_mean;
    double lo;
    size_t nc;
    comp_truth c[2];
} psd_case;

static const psd_case psd_cases[] = {
    {"decay rect pad 2", "decay", "rect", 1, 2, 0, 0, 100e6, 1, {{0, 103e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.4}}},
    {"decay hann pad 3 exact", "decay", "hann", 1, 3, 1, 0, 100e6, 1, {{0, 95e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.4}}},
    {"burst+decay hann pad 4", "burst+decay", "hann", 1, 4, 0, 0, 2e9, 2,
     {{1, 2e9 + 12e6, 50e-9, 3.0e-6, 4.0, 1.0}, {0, 2e9 - 3e6, 2 * PI_T * 0.7e6, 0, 0.7, -0.5}}},
    {"real decay hann pad 2", "decay", "hann", 0, 2, 0, 0, 0.0, 1, {{0, 17e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.4}}},
    {"real decay rect pad 1 odd", "decay", "rect", 0, 1, 1, 0, 0.0, 1, {{0, 17e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.4}}},
    {"decay kaiser remove mean", "decay", "kaiser", 1, 2, 0, 1, 50e6, 1, {{0, 51e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.4}}},
};

/* Fit a noise-free record (so the result is close to the truth), then compare the model's gated
 * spectrum with the gated spectrum of a record made by the test's own formula from the FITTED
 * parameters: the transform conventions (gate start as phase reference, LO, window, padding,
 * one/two-sided) must agree to rounding: 1e-12 relative in every bin, plus the rounding floor
 * of the transforms themselves, which is absolute: an error of ~1e-15 |X_peak| in X_k moves
 * S_k by ~1e-15 sqrt(S_k S_peak), far more than 1e-12 S_k in bins 1e-6 below the peak (tol
 * below: 1e-12 S_k + 1e-13 sqrt(S_k S_peak), i.e. 1e-12 relative within 1e-2 of the peak). */
START_TEST(test_model_psd)
{
    const psd_case *e = &psd_cases[_i];
    const double dt = 4e-9;
    const size_t n = 3001;
    cs_record *rec = new_record(n, e->cplx, dt, -1e-6);
    add_model(rec, e->c, e->nc, e->lo, 0.0);
    cs_gate g = make_gate(e->window, 0.3e-6, 9.0e-6);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_gatefit_result *r = NULL;
    cs_error err;
    cs_gatefit_options fo;
    cs_gatefit_options_default(&fo);
    fo.noise = CS_GATEFIT_NOISE_GIVEN;   /* for the noise floor below */
    fo.noise_sd = 0.05;
    ck_assert_msg(cs_gatefit_run(ws, rec, &g, e->model, e->lo, &fo, &r, &err) == CS_OK, "%s: %s", e->name,
                  err.msg);
    /* the record of the fitted parameters, t_ref = the gate start */
    comp_truth fitted[2];
    for (size_t k = 0; k < e->nc; k++) {
        const cs_gatefit_component *q = &r->comp[k];
        fitted[k].burst = q->kind == CS_GATEFIT_BURST;
        fitted[k].f = e->lo + q->offset_hz;
        fitted[k].rate = fitted[k].burst ? q->tau_s : q->gamma_per_s;
        fitted[k].tp = q->t_peak_s;
        fitted[k].A = q->amplitude;
        fitted[k].phi = q->phase_rad;
    }
    cs_record *ref = new_record(n, e->cplx, dt, -1e-6);
    add_model(ref, fitted, e->nc, e->lo, r->t_gate_s);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = e->pad;
    o.exact_length = e->exact_length;
    o.remove_mean = e->remove_mean;
    o.lo_hz = e->lo;
    cs_gated_spectrum *sd = NULL, *sm = NULL, *sn = NULL;
    ck_assert_int_eq(cs_gate_spectrum(ws, ref, &g, &o, &sd, &err), CS_OK);
    ck_assert_int_eq(cs_gatefit_model_psd(ws, r, &o, 0, &sm, &err), CS_OK);
    ck_assert_uint_eq(sm->psd->n, sd->psd->n);
    ck_assert_uint_eq(sm->nfft, sd->nfft);
    ck_assert_uint_eq(sm->first, sd->first);
    ck_assert_double_eq(sm->t_gate_s, sd->t_gate_s);
    ck_assert_str_eq(sm->psd->source, "gatefit model");
    double peak = 0, worst = 0;
    for (size_t k = 0; k < sd->psd->n; k++)
        peak = fmax(peak, sd->psd->y[k]);
    for (size_t k = 0; k < sd->psd->n; k++) {
        ck_assert_double_eq(sm->psd->freq_hz[k], sd->psd->freq_hz[k]);
        double y = sd->psd->y[k];
        CHECK_ABS(sm->psd->y[k], y, 1e-12, y + 0.1 * sqrt(y * peak), "model psd");
        if (y >= 1e-2 * peak)
            worst = fmax(worst, fabs(sm->psd->y[k] / y - 1));
    }
    printf("model psd %-26s: largest relative difference within 1e-2 of the peak %.2g\n", e->name, worst);
    /* with noise: the floor is added (2 sigma^2 dt two-sided; one-sided 2 sigma^2 dt inside,
     * sigma^2 dt at 0 Hz); with the mean removed, lower near 0 Hz only */
    ck_assert_int_eq(cs_gatefit_model_psd(ws, r, &o, 1, &sn, &err), CS_OK);
    const double sig2 = 0.05 * 0.05;
    ck_assert_double_eq(r->noise_sd, 0.05);
    size_t mid = sd->psd->n / 3;
    CHECK_ABS(sn->psd->y[mid] - sm->psd->y[mid], 2 * sig2 * dt, 1e-9, sn->psd->y[mid], "noise floor");
    if (!e->cplx && !e->remove_mean)
        CHECK_ABS(sn->psd->y[0] - sm->psd->y[0], sig2 * dt, 1e-9, sn->psd->y[0], "noise floor at 0 Hz");
    ck_assert_double_eq(sn->X[2 * mid], sm->X[2 * mid]);   /* X stays the model's transform */
    cs_gated_spectrum_free(sn);
    cs_gated_spectrum_free(sm);
    cs_gated_spectrum_free(sd);
    cs_record_free(ref);
    cs_gatefit_result_free(r);
    cs_gate_free(ws);
    cs_record_free(rec);
}
END_TEST

/* Source: the expected periodogram of signal plus independent zero-mean noise is the signal's
 * periodogram plus the noise's expected periodogram (the cross terms average to zero; common
 * practice), and E|X_k|^2 = dt^2 E|x|^2 sum w^2 for white noise. The mean of 400 gated PSDs of
 * noisy records must match the model PSD with noise, bin by bin within 5 standard errors of
 * the mean and on average within 1 %; with remove_mean the floor is the exact mean-removed one. */
START_TEST(test_model_psd_expectation)
{
    const double dt = 4e-9, lo = 0.0, sigma = 0.3;
    const size_t n = 600, nrep = 400;
    static const struct {
        int cplx, remove_mean;
        const char *win;
    } cases[] = {{1, 0, "hann"}, {0, 0, "hann"}, {1, 1, "rect"}, {0, 1, "hann"}};
    comp_truth c = {0, 11e6, 2 * PI_T * 1e6, 0, 1.0, 0.3};
    cs_gate_workspace *ws = cs_gate_alloc();
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 4242);
    for (int q = 0; q < N_OF(cases); q++) {
        cs_record *clean = new_record(n, cases[q].cplx, dt, 0.0);
        add_model(clean, &c, 1, lo, 0.0);
        cs_gate g = make_gate(cases[q].win, 0.2e-6, 1.8e-6);
        cs_gatefit_options fo;
        cs_gatefit_options_default(&fo);
        fo.noise = CS_GATEFIT_NOISE_GIVEN;
        fo.noise_sd = sigma;
        cs_gatefit_result *r = NULL;
        cs_error err;
        ck_assert_msg(cs_gatefit_run(ws, clean, &g, "decay", lo, &fo, &r, &err) == CS_OK, "%s", err.msg);
        ck_assert_double_eq(r->noise_sd, sigma);
        ck_assert_int_eq(r->errors_scaled, 0);
        cs_gate_options o;
        cs_gate_options_default(&o);
        o.pad = 2;
        o.remove_mean = cases[q].remove_mean;
        cs_gated_spectrum *sm = NULL, *sd = NULL;
        ck_assert_int_eq(cs_gatefit_model_psd(ws, r, &o, 1, &sm, &err), CS_OK);
        size_t nf = sm->psd->n;
        double *sum = calloc(nf, sizeof *sum), *sum2 = calloc(nf, sizeof *sum2);
        cs_record *noisy = new_record(n, cases[q].cplx, dt, 0.0);
        for (size_t rep = 0; rep < nrep; rep++) {
            memcpy(noisy->data, clean->data, (cases[q].cplx ? 2 : 1) * n * sizeof(double));
            add_noise(noisy, rng, sigma);
            ck_assert_int_eq(cs_gate_spectrum(ws, noisy, &g, &o, &sd, &err), CS_OK);
            for (size_t k = 0; k < nf; k++) {
                sum[k] += sd->psd->y[k];
                sum2[k] += sd->psd->y[k] * sd->psd->y[k];
            }
        }
        double ratio = 0, worst = 0, tiny = 1e-6 * (cases[q].cplx ? 2 : 1) * sigma * sigma * dt;
        size_t used = 0;
        for (size_t k = 0; k < nf; k++) {
            if (sm->psd->y[k] < tiny)   /* 0 Hz of a rect gate with the mean removed: both 0 */
                continue;
            used++;
            double mean = sum[k] / (double)nrep;
            double se = sqrt(fmax(sum2[k] / (double)nrep - mean * mean, 0) / (double)(nrep - 1));
            double z = (mean - sm->psd->y[k]) / se;
            if (se > 0)
                worst = fmax(worst, fabs(z));
            ratio += mean / sm->psd->y[k];
        }
        ratio /= (double)used;
        ck_assert_uint_ge(used, nf - 1);
        printf("expected PSD (%s, %s%s): mean ratio data/model %.4f, worst |z| %.2f over %zu bins\n",
               cases[q].cplx ? "complex" : "real", cases[q].win, cases[q].remove_mean ? ", mean removed" : "",
               ratio, worst, used);
        ck_assert_msg(fabs(ratio - 1) < 0.01, "mean ratio %g", ratio);
        ck_assert_msg(worst < 5.0, "worst bin %g standard errors off", worst);
        free(sum);
        free(sum2);
        cs_record_free(noisy);
        cs_gated_spectrum_free(sd);
        cs_gated_spectrum_free(sm);
        cs_gatefit_result_free(r);
        cs_record_free(clean);
    }
    gsl_rng_free(rng);
    cs_gate_free(ws);
}
END_TEST

/* ---- real input ----------------------------------------------------------------------------- */

/* A real cosine decay in noise: centre and Gamma within 4 standard errors, amplitude and phase
 * too, and the noise level from the residuals within 5 % of the truth. */
START_TEST(test_real_noisy)
{
    const double dt = 4e-9, sigma = 0.05;
    comp_truth c = {0, 23e6, 2 * PI_T * 0.5e6, 0, 1.0, 1.1};
    cs_record *rec = new_record(2400, 0, dt, 0.0);
    add_model(rec, &c, 1, 0.0, 0.0);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 99);
    add_noise(rec, rng, sigma);
    gsl_rng_free(rng);
    cs_gate g = make_gate("hann", 3.0 / c.rate, 2000 * dt);
    cs_gatefit_result *r = NULL;
    cs_error err;
    ck_assert_msg(cs_gatefit_run(NULL, rec, &g, "decay", 0.0, NULL, &r, &err) == CS_OK, "%s", err.msg);
    const cs_gatefit_component *q = &r->comp[0];
    double amp, ph;
    expected(&c, 0.0, r->t_gate_s, &amp, &ph);
    printf("real decay: centre %+.2f sd, gamma %+.2f sd, amplitude %+.2f sd; sigma %.4f\n",
           (q->center_hz - c.f) / q->center_hz_err, (q->gamma_per_s - c.rate) / q->gamma_per_s_err,
           (q->amplitude - amp) / q->amplitude_err, r->noise_sd);
    CHECK_ABS(q->center_hz, c.f, 4.0, q->center_hz_err, "centre");
    CHECK_ABS(q->gamma_per_s, c.rate, 4.0, q->gamma_per_s_err, "gamma");
    CHECK_ABS(q->amplitude, amp, 4.0, q->amplitude_err, "amplitude");
    CHECK_ABS(wrap_pi(q->phase_rad - ph), 0.0, 4.0, q->phase_rad_err, "phase");
    CHECK_ABS(r->noise_sd, sigma, 0.05, sigma, "noise");
    ck_assert_uint_eq(r->n, r->nused);   /* one real residual per sample */
    cs_gatefit_result_free(r);
    cs_record_free(rec);
}
END_TEST

/* A long gate that is mostly noise: a complex decay (Gamma = 2 pi x 1 MHz, amplitude e-folding
 * in 320 ns) gated over 40 us at 1 ns, so that after ~6.4 us the model is below e^-20 of its
 * start (GF_NEGLIGIBLE) and after ~13 us below e^-40: only noise is left. The fit recovers the truth (4 standard errors), counts every
 * sample (n = 2 x nused, dof = n - 4) and its noise from the residuals, sqrt(rss / dof) (common
 * practice), matches the sigma the noise was drawn with to 2 % (its standard error is
 * 1/sqrt(2 x 80000) = 0.25 %): the samples after the decay enter the residual sum although the
 * solver need not evaluate the model there. */
START_TEST(test_long_gate)
{
    const double dt = 1e-9, sigma = 0.02, lo = 384.2e12;
    comp_truth c = {0, lo + 2.5e6, 2 * PI_T * 1e6, 0, 1.0, 0.4};
    cs_record *rec = new_record(40000, 1, dt, 0.0);
    add_model(rec, &c, 1, lo, 0.0);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 7);
    add_noise(rec, rng, sigma);
    gsl_rng_free(rng);
    cs_gate g = make_gate("rect", 0.0, 40000 * dt);
    cs_gatefit_result *r = NULL;
    cs_error err;
    ck_assert_msg(cs_gatefit_run(NULL, rec, &g, "decay", lo, NULL, &r, &err) == CS_OK, "%s", err.msg);
    const cs_gatefit_component *q = &r->comp[0];
    CHECK_ABS(q->center_hz, c.f, 4.0, q->center_hz_err, "centre");
    CHECK_ABS(q->gamma_per_s, c.rate, 4.0, q->gamma_per_s_err, "gamma");
    CHECK_ABS(r->noise_sd, sigma, 0.02, sigma, "noise from the residuals");
    ck_assert_uint_eq(r->nused, 40000);
    ck_assert_uint_eq(r->n, 2 * r->nused);
    ck_assert_uint_eq(r->dof, r->n - 4);
    cs_gatefit_result_free(r);
    cs_record_free(rec);
}
END_TEST

/* ---- the test: pulls of the gate-aware fit vs a plain Lorentzian ------------------ */

/* 100 records of 2239 samples at 250 MS/s (dt = 4 ns), complex, LO 384.230484468 THz: a decay
 * of amplitude 1 starting at t = 0, 3 MHz above the LO, Gamma = 2 pi x 0.5 MHz (FWHM 0.5 MHz),
 * in complex white noise of sigma = 0.02 per component (amplitude 0.22 at the gate start, so an
 * SNR of 11 per sample there; with 0.05 most plain fits of the hann-gated PSD lock onto noise
 * peaks, the windowed line being that weak). Gate: from 3/Gamma (0.955 us, sample
 * 239) to the end, 2000 samples (8 us), rect or hann. The gate-aware fit ("decay", noise from
 * the residuals) and a plain Lorentzian (model "lorentz" + const baseline, CS_WEIGHT_NOISE) of
 * the gated PSD (x2 padding) over LO +- 50 MHz, are compared by their pulls
 * (fit - truth) / error. Bars for the gate-aware fit: mean within +-0.2 (standard error of
 * the mean of 100 pulls: 0.1) and standard deviation in [0.8, 1.2] (standard error 0.07).
 * Off-line, three runs of 1000 records each per window (other seeds) gave gate-aware pull means
 * within -0.09 .. +0.02 and standard deviations 0.97 .. 1.04 for centre and Gamma through both
 * gates, and for the plain fit centre-pull sd ~10, FWHM-pull sd 8.3 .. 8.8 (rect), a hann FWHM
 * bias of -0.53 to -0.54 and FWHM pulls averaging -26 .. -27. */
#define PULL_NREP 100
#define PULL_DT 4e-9
#define PULL_LO 384.230484468e12
#define PULL_DF 3e6
#define PULL_GAMMA (2 * PI_T * 0.5e6)
#define PULL_SIGMA 0.02
#define PULL_GATE 2000

typedef struct stat_acc {
    double s, s2;
    size_t n;
} stat_acc;

static void acc_add(stat_acc *a, double v)
{
    a->s += v;
    a->s2 += v * v;
    a->n++;
}
static double acc_mean(const stat_acc *a) { return a->s / (double)a->n; }
static double acc_sd(const stat_acc *a)
{
    double m = acc_mean(a);
    return sqrt((a->s2 - (double)a->n * m * m) / ((double)a->n - 1));
}

typedef struct pull_result {
    stat_acc ga_c, ga_g, ga_relw;          /* gate-aware: centre pull, Gamma pull, rel. FWHM bias */
    stat_acc pl_c, pl_w, pl_relw;          /* plain: centre pull, FWHM pull, rel. FWHM bias */
    size_t ga_fail, pl_fail;
    double seconds_ga;
} pull_result;

static void run_pulls(const char *window, double gamma, unsigned long seed, pull_result *pr)
{
    memset(pr, 0, sizeof *pr);
    const double t_start = 3.0 / PULL_GAMMA;
    const size_t first = (size_t)ceil(t_start / PULL_DT - 1e-6), n = first + PULL_GATE;
    const double fwhm = gamma / (2 * PI_T), fc = PULL_LO + PULL_DF;
    comp_truth c = {0, fc, gamma, 0, 1.0, 0.0};
    cs_record *clean = new_record(n, 1, PULL_DT, 0.0), *rec = new_record(n, 1, PULL_DT, 0.0);
    add_model(clean, &c, 1, PULL_LO, 0.0);
    cs_gate g = make_gate(window, t_start, (double)PULL_GATE * PULL_DT);
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_fit_workspace *fw = cs_fit_alloc(2 * PULL_GATE, 4);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    cs_gate_options go;
    cs_gate_options_default(&go);
    go.pad = 2;
    go.lo_hz = PULL_LO;
    cs_gated_spectrum *spec = NULL;
    unsigned char *mask = NULL;
    for (size_t rep = 0; rep < PULL_NREP; rep++) {
        memcpy(rec->data, clean->data, 2 * n * sizeof(double));
        add_noise(rec, rng, PULL_SIGMA);
        cs_error err;
        /* gate-aware */
        cs_gatefit_result *r = NULL;
        clock_t t0 = clock();
        int rc = cs_gatefit_run(ws, rec, &g, "decay", PULL_LO, NULL, &r, &err);
        pr->seconds_ga += (double)(clock() - t0) / CLOCKS_PER_SEC;
        if (rc != CS_OK || r->status != CS_FIT_CONVERGED) {
            printf("gate-aware fit %zu failed: %s\n", rep, err.msg);
            pr->ga_fail++;
        } else {
            const cs_gatefit_component *q = &r->comp[0];
            acc_add(&pr->ga_c, (q->center_hz - fc) / q->center_hz_err);
            acc_add(&pr->ga_g, (q->gamma_per_s - gamma) / q->gamma_per_s_err);
            acc_add(&pr->ga_relw, q->fwhm_hz / fwhm - 1);
        }
        cs_gatefit_result_free(r);
        /* plain Lorentzian of the gated PSD */
        ck_assert_int_eq(cs_gate_spectrum(ws, rec, &g, &go, &spec, &err), CS_OK);
        size_t nf = spec->psd->n;
        if (!mask) {
            mask = malloc(nf);
            for (size_t k = 0; k < nf; k++)
                mask[k] = fabs(spec->psd->freq_hz[k] - PULL_LO) <= 50e6;
        }
        cs_model *m = cs_model_alloc("lorentz", CS_BASELINE_CONST, CS_MODEL_SUM, &err);
        ck_assert_ptr_nonnull(m);
        cs_fit_parameters par = cs_fit_default_parameters();
        par.weighting = CS_WEIGHT_NOISE;
        cs_fit_result *fr = NULL;
        rc = cs_fit_run(fw, m, spec->psd->freq_hz, spec->psd->y, NULL, mask, nf, &par, &fr, &err);
        if (rc != CS_OK || fr->status != CS_FIT_CONVERGED) {
            pr->pl_fail++;
        } else {
            acc_add(&pr->pl_c, (fr->value[0] - fc) / fr->err[0]);
            acc_add(&pr->pl_w, (fr->value[1] - fwhm) / fr->err[1]);
            acc_add(&pr->pl_relw, fr->value[1] / fwhm - 1);
        }
        cs_fit_result_free(fr);
        cs_model_free(m);
    }
    free(mask);
    cs_gated_spectrum_free(spec);
    gsl_rng_free(rng);
    cs_fit_free(fw);
    cs_gate_free(ws);
    cs_record_free(rec);
    cs_record_free(clean);
}

static void report_pulls(const char *window, const pull_result *p)
{
    printf("pulls, %s, %d records (failed: gate-aware %zu, plain %zu); %.2f ms per gate-aware fit\n",
           window, PULL_NREP, p->ga_fail, p->pl_fail, 1e3 * p->seconds_ga / PULL_NREP);
    printf("  gate-aware  centre pull %+.3f sd %.3f | gamma pull %+.3f sd %.3f | FWHM bias %+.4f\n",
           acc_mean(&p->ga_c), acc_sd(&p->ga_c), acc_mean(&p->ga_g), acc_sd(&p->ga_g), acc_mean(&p->ga_relw));
    printf("  plain       centre pull %+.3f sd %.3f | fwhm  pull %+.3f sd %.3f | FWHM bias %+.4f\n",
           acc_mean(&p->pl_c), acc_sd(&p->pl_c), acc_mean(&p->pl_w), acc_sd(&p->pl_w), acc_mean(&p->pl_relw));
}

static void check_gate_aware(const char *window, const pull_result *p)
{
    ck_assert_msg(p->ga_fail == 0, "%s: %zu gate-aware fits failed", window, p->ga_fail);
    const stat_acc *s[2] = {&p->ga_c, &p->ga_g};
    const char *nm[2] = {"centre", "gamma"};
    for (int i = 0; i < 2; i++) {
        ck_assert_msg(fabs(acc_mean(s[i])) <= 0.2, "%s %s: pull mean %g", window, nm[i], acc_mean(s[i]));
        ck_assert_msg(acc_sd(s[i]) >= 0.8 && acc_sd(s[i]) <= 1.2, "%s %s: pull sd %g", window, nm[i],
                      acc_sd(s[i]));
    }
}

/* The plain fit's error bars are far too small (pull sd ~ 10 here): most of the fitted bins are
 * floor, whose scatter sets chi2/dof, while the bins on the line scatter as much as their mean
 * (a periodogram bin is exponentially distributed), and the x2 padding correlates neighbours. */
static void check_plain_miscalibrated(const char *window, const pull_result *p)
{
    ck_assert_msg(p->pl_fail < PULL_NREP / 10, "%s: plain fits failed: %zu", window, p->pl_fail);
    ck_assert_msg(acc_sd(&p->pl_c) > 3.0 && acc_sd(&p->pl_w) > 2.0, "%s: plain pull sd %g, %g", window,
                  acc_sd(&p->pl_c), acc_sd(&p->pl_w));
    /* the brief's criterion: a larger |mean pull| of the width, or a larger mean bias */
    ck_assert_msg(fabs(acc_mean(&p->pl_w)) > fabs(acc_mean(&p->ga_g)) ||
                      fabs(acc_mean(&p->pl_relw)) > fabs(acc_mean(&p->ga_relw)),
                  "%s: plain fit not worse", window);
}

/* The gate from 3/Gamma to the end holds 25 decay times: a rect gate does not truncate the decay,
 * so the plain Lorentzian is not biased, only its errors are wrong. */
START_TEST(test_pulls_rect)
{
    pull_result p;
    run_pulls("rect", PULL_GAMMA, 20240611UL, &p);
    report_pulls("rect gate", &p);
    check_gate_aware("rect", &p);
    check_plain_miscalibrated("rect", &p);
}
END_TEST

/* A hann gate suppresses the decay's sharp leading edge: near the gate start the windowed signal
 * is ~ s^2 exp(-Gamma s/2), whose line is the cube of the Lorentzian, of half its width
 * (sqrt(2^(1/3) - 1) = 0.51). The gate-aware fit is unaffected: same likelihood as rect. */
START_TEST(test_pulls_hann)
{
    pull_result p;
    run_pulls("hann", PULL_GAMMA, 777UL, &p);
    report_pulls("hann gate", &p);
    check_gate_aware("hann", &p);
    check_plain_miscalibrated("hann", &p);
    /* why the gate-aware profile exists: the hann gate NARROWS the plain Lorentzian */
    ck_assert_msg(acc_mean(&p.pl_relw) < -0.3, "plain hann FWHM bias %g not < -0.3", acc_mean(&p.pl_relw));
    ck_assert_msg(fabs(acc_mean(&p.ga_relw)) < 0.01, "gate-aware FWHM bias %g", acc_mean(&p.ga_relw));
}
END_TEST

/* Truncation: a 5 times narrower line (FWHM 0.1 MHz, 1/Gamma = 1.6 us) outlasts the same 8 us
 * gate (5 decay times), so the plain fit sees the line convolved with the gate's transform and
 * comes out BROADER (about +20 % rect, +50 % hann, whose main lobe is twice as wide); the
 * gate-aware fit stays unbiased and calibrated. */
START_TEST(test_pulls_truncated)
{
    static const char *windows[2] = {"rect", "hann"};
    for (int w = 0; w < 2; w++) {
        pull_result p;
        char what[64];
        snprintf(what, sizeof what, "%s gate, FWHM 0.1 MHz (truncated)", windows[w]);
        run_pulls(windows[w], PULL_GAMMA / 5, 31337UL + (unsigned long)w, &p);
        report_pulls(what, &p);
        check_gate_aware(windows[w], &p);
        ck_assert_msg(p.pl_fail < PULL_NREP / 10, "plain fits failed: %zu", p.pl_fail);
        ck_assert_msg(acc_mean(&p.pl_relw) > 0.1, "%s: plain FWHM bias %g not > 0.1", windows[w],
                      acc_mean(&p.pl_relw));
        ck_assert_msg(fabs(acc_mean(&p.ga_relw)) < 0.01, "gate-aware FWHM bias %g", acc_mean(&p.ga_relw));
        ck_assert_msg(fabs(acc_mean(&p.pl_w)) > 5.0, "%s: plain FWHM mean pull %g", windows[w],
                      acc_mean(&p.pl_w));
    }
}
END_TEST

/* Burst + decay in noise: a sech burst (amplitude 2, tau 40 ns, 15 MHz above the LO, peak 1.6 us
 * into the gate) on a decay (amplitude 0.5 at t = 0, FWHM 0.4 MHz, 4 MHz below), sigma 0.1, gate
 * 0.4 .. 11.4 us. 40 records; bars for the pulls of every centre, tau, t_peak and Gamma: mean
 * within +-0.45 and sd in [0.7, 1.3] (3 standard errors of 40 pulls). Off-line, 400 records per
 * window gave means within 0.1 and sd 0.91 .. 1.08 (rect and hann). */
START_TEST(test_pulls_burst_decay)
{
    const double dt = 4e-9, lo = 1e9, sigma = 0.1;
    const size_t n = 3000, nrep = 40;
    comp_truth c[2] = {{1, lo + 15e6, 40e-9, 2.0e-6, 2.0, 0.5}, {0, lo - 4e6, 2 * PI_T * 0.4e6, 0, 0.5, 2.5}};
    cs_record *clean = new_record(n, 1, dt, 0.0), *rec = new_record(n, 1, dt, 0.0);
    add_model(clean, c, 2, lo, 0.0);
    cs_gate g = make_gate("rect", 0.4e-6, 11e-6);
    cs_gate_workspace *ws = cs_gate_alloc();
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 8080);
    stat_acc a[5];
    memset(a, 0, sizeof a);
    size_t fails = 0;
    clock_t t0 = clock();
    for (size_t rep = 0; rep < nrep; rep++) {
        memcpy(rec->data, clean->data, 2 * n * sizeof(double));
        add_noise(rec, rng, sigma);
        cs_gatefit_result *r = NULL;
        cs_error err;
        if (cs_gatefit_run(ws, rec, &g, "burst+decay", lo, NULL, &r, &err) != CS_OK) {
            printf("burst+decay fit %zu failed: %s\n", rep, err.msg);
            fails++;
        } else {
            const cs_gatefit_component *b = &r->comp[0], *d = &r->comp[1];
            acc_add(&a[0], (b->center_hz - c[0].f) / b->center_hz_err);
            acc_add(&a[1], (b->tau_s - c[0].rate) / b->tau_s_err);
            acc_add(&a[2], (b->t_peak_s - c[0].tp) / b->t_peak_s_err);
            acc_add(&a[3], (d->center_hz - c[1].f) / d->center_hz_err);
            acc_add(&a[4], (d->gamma_per_s - c[1].rate) / d->gamma_per_s_err);
        }
        cs_gatefit_result_free(r);
    }
    double ms = 1e3 * (double)(clock() - t0) / CLOCKS_PER_SEC / (double)nrep;
    static const char *names[5] = {"burst centre", "burst tau", "burst t_peak", "decay centre", "decay gamma"};
    printf("pulls, burst+decay, rect gate, %zu records (%zu failed), %.1f ms per fit:\n", nrep, fails, ms);
    for (int i = 0; i < 5; i++)
        printf("  %-13s pull %+.3f sd %.3f\n", names[i], acc_mean(&a[i]), acc_sd(&a[i]));
    ck_assert_uint_eq(fails, 0);
    for (int i = 0; i < 5; i++) {
        ck_assert_msg(fabs(acc_mean(&a[i])) <= 0.45, "%s: pull mean %g", names[i], acc_mean(&a[i]));
        ck_assert_msg(acc_sd(&a[i]) >= 0.7 && acc_sd(&a[i]) <= 1.3, "%s: pull sd %g", names[i], acc_sd(&a[i]));
    }
    gsl_rng_free(rng);
    cs_gate_free(ws);
    cs_record_free(rec);
    cs_record_free(clean);
}
END_TEST

/* ---- errors ---------------------------------------------------------------------------------- */

START_TEST(test_errors)
{
    comp_truth c = {0, 3e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.0};
    cs_record *rec = new_record(1000, 1, 4e-9, 0.0);
    add_model(rec, &c, 1, 0.0, 0.0);
    cs_gate g = make_gate("rect", 0.0, 3e-6);
    cs_gatefit_result *r = (cs_gatefit_result *)&c;   /* must be reset to NULL */
    cs_error err;
    /* NULL arguments */
    ck_assert_int_eq(cs_gatefit_run(NULL, NULL, &g, "decay", 0, NULL, &r, &err), CS_EINVAL);
    ck_assert_ptr_null(r);
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, NULL, "decay", 0, NULL, &r, &err), CS_EINVAL);
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, NULL, 0, NULL, &r, &err), CS_EINVAL);
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0, NULL, NULL, &err), CS_EINVAL);
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", NAN, NULL, &r, &err), CS_EINVAL);
    /* unknown component */
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay+voigt", 0, NULL, &r, &err), CS_EINVAL);
    ck_assert_msg(strstr(err.msg, "'voigt'") != NULL, "%s", err.msg);
    ck_assert_ptr_null(r);
    /* a gate beyond the record, and an empty one (fewer than 2 samples) */
    cs_gate far = make_gate("rect", 5e-6, 3e-6);
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &far, "decay", 0, NULL, &r, &err), CS_ERANGE);
    ck_assert_ptr_null(r);
    cs_gate tiny = make_gate("rect", 1e-6, 4e-9);
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &tiny, "decay", 0, NULL, &r, &err), CS_ERANGE);
    /* a gate whose window leaves too few samples: hann over 3 samples keeps 2 (4 residuals) */
    cs_gate three = make_gate("hann", 1e-6, 12e-9);
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &three, "decay", 0, NULL, &r, &err), CS_EDATA);
    ck_assert_ptr_null(r);
    /* a gate too short for the matrix pencil of three decays (7 samples: it needs 8): the
     * starting values fall back on the periodogram, and the fit still ends with a status */
    cs_gate seven = make_gate("rect", 1e-6, 28e-9);
    int rc7 = cs_gatefit_run(NULL, rec, &seven, "decay+decay+decay", 0, NULL, &r, &err);
    ck_assert_msg(rc7 == CS_OK || rc7 == CS_ENOCONV, "rc %d: %s", rc7, err.msg);
    ck_assert_ptr_nonnull(r);
    ck_assert_uint_eq(r->m, 7);
    ck_assert_uint_eq(r->dof, 2);
    printf("3 decays on 7 samples: %s\n", cs_fit_status_name(r->status));
    cs_gatefit_result_free(r);
    r = NULL;
    /* invalid options */
    cs_gatefit_options o;
    cs_gatefit_options_default(&o);
    o.max_iter = 0;
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0, &o, &r, &err), CS_EINVAL);
    cs_gatefit_options_default(&o);
    o.noise = CS_GATEFIT_NOISE_GIVEN;
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0, &o, &r, &err), CS_EINVAL);
    cs_gatefit_options_default(&o);
    cs_gatefit_start st[2];
    cs_gatefit_start_init(&st[0]);
    cs_gatefit_start_init(&st[1]);
    o.start = st;
    o.nstart = 2;
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0, &o, &r, &err), CS_EINVAL);
    o.nstart = 1;
    st[0].gamma_per_s = -1;
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0, &o, &r, &err), CS_EINVAL);
    /* noise from the record: fine here, and unscaled */
    cs_gatefit_options_default(&o);
    o.noise = CS_GATEFIT_NOISE_RECORD;
    cs_record *noisy = new_record(1000, 1, 4e-9, 0.0);
    add_model(noisy, &c, 1, 0.0, 0.0);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 5);
    add_noise(noisy, rng, 0.1);
    gsl_rng_free(rng);
    ck_assert_int_eq(cs_gatefit_run(NULL, noisy, &g, "decay", 0, &o, &r, &err), CS_OK);
    ck_assert_int_eq(r->errors_scaled, 0);
    ck_assert_int_eq(r->noise, CS_GATEFIT_NOISE_RECORD);
    CHECK_ABS(r->noise_sd, 0.1, 0.1, 0.1, "record noise");
    CHECK_ABS(r->chi2 / (double)r->dof, 1.0, 0.1, 1.0, "chi2/dof with the record's noise");
    cs_gatefit_result_free(r);
    /* ... and from the envelope's quiet stretch (the last tenth: the decay is 1/300 there) */
    o.noise = CS_GATEFIT_NOISE_ENVELOPE;
    ck_assert_int_eq(cs_gatefit_run(NULL, noisy, &g, "decay", 0, &o, &r, &err), CS_OK);
    ck_assert_int_eq(r->errors_scaled, 0);
    ck_assert_str_eq(cs_gatefit_noise_name(r->noise), "envelope");
    CHECK_ABS(r->noise_sd, 0.1, 0.15, 0.1, "envelope noise");
    cs_gatefit_result_free(r);
    o.noise = CS_GATEFIT_NOISE_RECORD;
    cs_record_free(noisy);
    /* ... but not for a record whose noise estimate is 0 (a decay in the first 750 of 4000
     * samples, exact zeros elsewhere: most first differences vanish) */
    cs_record *quiet = new_record(4000, 1, 4e-9, 0.0);
    add_model(quiet, &c, 1, 0.0, 0.0);
    memset(quiet->data + 2 * 750, 0, 2 * (4000 - 750) * sizeof(double));
    ck_assert_int_eq(cs_gatefit_run(NULL, quiet, &g, "decay", 0, &o, &r, &err), CS_EDATA);
    ck_assert_ptr_null(r);
    cs_record_free(quiet);
    /* NaN samples */
    rec->data[2 * 100 + 1] = NAN;
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0, NULL, &r, &err), CS_EDATA);
    ck_assert_msg(strstr(err.msg, "100") != NULL, "%s", err.msg);
    ck_assert_ptr_null(r);
    /* an all-zero gate */
    memset(rec->data, 0, 2 * rec->n * sizeof(double));
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0, NULL, &r, &err), CS_EDATA);
    cs_record_free(rec);
    /* NULL-safe frees and bad arguments of the model functions */
    cs_gatefit_result_free(NULL);
    ck_assert_int_eq(cs_gatefit_model_eval(NULL, 0, 1, NULL), CS_EINVAL);
    cs_gated_spectrum *s = NULL;
    ck_assert_int_eq(cs_gatefit_model_psd(NULL, NULL, NULL, 0, &s, &err), CS_EINVAL);
}
END_TEST

/* Non-convergence is a status, not a silent number: one iteration from a start 8 linewidths
 * off (user starting values) stops at the iteration limit with NaN errors. */
START_TEST(test_not_converged)
{
    comp_truth c = {0, 3e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.0};
    cs_record *rec = new_record(2000, 1, 4e-9, 0.0);
    add_model(rec, &c, 1, 0.0, 0.0);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 17);
    add_noise(rec, rng, 0.05);
    gsl_rng_free(rng);
    cs_gate g = make_gate("rect", 1e-6, 6e-6);
    cs_gatefit_options o;
    cs_gatefit_options_default(&o);
    cs_gatefit_start st;
    cs_gatefit_start_init(&st);
    st.center_hz = 7e6;
    st.gamma_per_s = 2 * PI_T * 0.2e6;
    o.start = &st;
    o.nstart = 1;
    o.max_iter = 1;
    cs_gatefit_result *r = NULL;
    cs_error err;
    int rc = cs_gatefit_run(NULL, rec, &g, "decay", 0.0, &o, &r, &err);
    ck_assert_int_eq(rc, CS_ENOCONV);
    ck_assert_ptr_nonnull(r);
    ck_assert_int_eq(r->status, CS_FIT_NOT_CONVERGED);
    ck_assert_int_eq(r->stop, CS_FIT_STOP_MAX_ITER);
    ck_assert_str_eq(cs_fit_status_name(r->status), "not converged");
    ck_assert(isnan(r->comp[0].center_hz_err) && isnan(r->comp[0].gamma_per_s_err));
    ck_assert(isnan(r->cov[0]));
    ck_assert(isfinite(r->comp[0].center_hz) && isfinite(r->chi2));
    ck_assert_msg(strstr(err.msg, "not converged") != NULL, "%s", err.msg);
    ck_assert_double_eq(r->comp[0].start.center_hz, 7e6);
    cs_gatefit_result_free(r);
    /* the same start with the default iteration limit converges */
    o.max_iter = 200;
    ck_assert_int_eq(cs_gatefit_run(NULL, rec, &g, "decay", 0.0, &o, &r, &err), CS_OK);
    CHECK_ABS(r->comp[0].center_hz, 3e6, 5.0, r->comp[0].center_hz_err, "centre after a far start");
    cs_gatefit_result_free(r);
    cs_record_free(rec);
}
END_TEST

/* The errors of a well-determined fit are the inverse Fisher information (common practice: the
 * Cramer-Rao bound of a Gaussian likelihood, which the least-squares covariance equals at the
 * truth). A noiseless complex decay M(s) = A e^{i phi} e^{(2 pi i f - Gamma/2) s} with the noise
 * level given (sigma per real component) is fitted exactly, and with |M|^2 = A^2 e^{-Gamma s},
 * dM/df = 2 pi i s M, dM/dGamma = -(s/2) M, dM/dA = M/A, dM/dphi = i M, the information
 * I_ab = sum_j Re(dM/da conj(dM/db)) / sigma^2 splits into the blocks (f, phi) and (Gamma, A):
 *     I_ff = sum (2 pi s)^2 |M|^2, I_fphi = sum 2 pi s |M|^2, I_phiphi = sum |M|^2,
 *     I_GG = sum (s/2)^2 |M|^2, I_GA = -sum (s/2) |M|^2 / A, I_AA = sum |M|^2 / A^2,
 * all over s = j dt, j = 0 .. m-1, divided by sigma^2; the errors are the square roots of the
 * diagonal of the blocks' inverses. The whole gate is above the solver's e^-20 cut (Gamma s
 * <= 25 here), so the sums are over every sample. */
START_TEST(test_errors_fisher)
{
    const double dt = 4e-9, sigma = 0.01;
    const size_t m = 2000;
    comp_truth c = {0, 3e6, 2 * PI_T * 0.5e6, 0, 1.0, 0.7};
    cs_record *rec = new_record(m, 1, dt, 0.0);
    add_model(rec, &c, 1, 0.0, 0.0);
    cs_gate g = make_gate("rect", 0.0, (double)m * dt);
    cs_gatefit_options o;
    cs_gatefit_options_default(&o);
    o.noise = CS_GATEFIT_NOISE_GIVEN;
    o.noise_sd = sigma;
    cs_gatefit_result *r = NULL;
    cs_error err;
    ck_assert_msg(cs_gatefit_run(NULL, rec, &g, "decay", 0.0, &o, &r, &err) == CS_OK, "%s", err.msg);
    ck_assert_int_eq(r->status, CS_FIT_CONVERGED);
    double Iff = 0, Ifp = 0, Ipp = 0, IGG = 0, IGA = 0, IAA = 0;
    for (size_t j = 0; j < m; j++) {
        double s = (double)j * dt, M2 = c.A * c.A * exp(-c.rate * s);
        Iff += 4 * PI_T * PI_T * s * s * M2;
        Ifp += 2 * PI_T * s * M2;
        Ipp += M2;
        IGG += 0.25 * s * s * M2;
        IGA -= 0.5 * s * M2 / c.A;
        IAA += M2 / (c.A * c.A);
    }
    double d1 = Iff * Ipp - Ifp * Ifp, d2 = IGG * IAA - IGA * IGA, s2 = sigma * sigma;
    const cs_gatefit_component *q = &r->comp[0];
    CHECK_ABS(q->center_hz_err, sqrt(s2 * Ipp / d1), 1e-6, sqrt(s2 * Ipp / d1), "centre error");
    CHECK_ABS(q->phase_rad_err, sqrt(s2 * Iff / d1), 1e-6, sqrt(s2 * Iff / d1), "phase error");
    CHECK_ABS(q->gamma_per_s_err, sqrt(s2 * IAA / d2), 1e-6, sqrt(s2 * IAA / d2), "gamma error");
    CHECK_ABS(q->amplitude_err, sqrt(s2 * IGG / d2), 1e-6, sqrt(s2 * IGG / d2), "amplitude error");
    CHECK_ABS(q->center_hz, c.f, 1e-6, q->center_hz_err, "centre");
    cs_gatefit_result_free(r);
    cs_record_free(rec);
}
END_TEST

/* Parameters the data do not determine make the status SINGULAR, with NaN errors for exactly
 * the parameters that depend on them. A real record with a line exactly at 0 Hz: the model
 * A cos(2 pi f s + phi) env is even in f and, at phi = 0, flat in phi to first order, so the
 * centre and phase are undetermined while Gamma and the amplitude are not. */
START_TEST(test_singular)
{
    comp_truth c = {0, 0.0, 2 * PI_T * 0.5e6, 0, 1.0, 0.0};
    cs_record *rec = new_record(1500, 0, 4e-9, 0.0);
    add_model(rec, &c, 1, 0.0, 0.0);
    cs_gate g = make_gate("rect", 0.0, 6e-6);
    cs_gatefit_options o;
    cs_gatefit_options_default(&o);
    cs_gatefit_start st[1];
    cs_gatefit_start_init(&st[0]);
    st[0].center_hz = 0.0;
    o.start = st;
    o.nstart = 1;
    cs_gatefit_result *r = NULL;
    cs_error err;
    ck_assert_msg(cs_gatefit_run(NULL, rec, &g, "decay", 0.0, &o, &r, &err) == CS_OK, "%s", err.msg);
    const cs_gatefit_component *q = &r->comp[0];
    printf("real line at 0 Hz: status %s; errors: centre %g, gamma %g, amplitude %g, phase %g\n",
           cs_fit_status_name(r->status), q->center_hz_err, q->gamma_per_s_err, q->amplitude_err,
           q->phase_rad_err);
    ck_assert_int_eq(r->status, CS_FIT_SINGULAR);
    ck_assert(isnan(q->center_hz_err) && isnan(q->phase_rad_err));
    ck_assert(isfinite(q->fwhm_hz_err));   /* the width is Gamma/(2 pi): determined */
    ck_assert(isfinite(q->gamma_per_s_err) && isfinite(q->amplitude_err));
    CHECK_ABS(q->gamma_per_s, c.rate, 1e-8, c.rate, "gamma of the line at 0 Hz");
    CHECK_ABS(q->amplitude, 1.0, 1e-8, 1.0, "amplitude of the line at 0 Hz");
    cs_gatefit_result_free(r);
    cs_record_free(rec);
}
END_TEST

static Suite *gatefit_suite(void)
{
    Suite *s = suite_create("gatefit");
    TCase *tc = tcase_create("parse");
    tcase_add_loop_test(tc, test_parse, 0, N_OF(parse_cases));
    tcase_add_test(tc, test_parse_message);
    suite_add_tcase(s, tc);

    tc = tcase_create("exact");
    tcase_add_loop_test(tc, test_exact, 0, N_OF(exact_cases));
    tcase_add_test(tc, test_param_names);
    tcase_add_test(tc, test_long_gate);
    suite_add_tcase(s, tc);

    tc = tcase_create("spectrum");
    tcase_add_test(tc, test_burst_spectrum);
    tcase_add_loop_test(tc, test_model_psd, 0, N_OF(psd_cases));
    tcase_add_test(tc, test_model_psd_expectation);
    tcase_set_timeout(tc, 120);
    suite_add_tcase(s, tc);

    tc = tcase_create("real");
    tcase_add_test(tc, test_real_noisy);
    suite_add_tcase(s, tc);

    tc = tcase_create("pulls");
    tcase_add_test(tc, test_pulls_rect);
    tcase_add_test(tc, test_pulls_hann);
    tcase_add_test(tc, test_pulls_truncated);
    tcase_add_test(tc, test_pulls_burst_decay);
    tcase_set_timeout(tc, 300);
    suite_add_tcase(s, tc);

    tc = tcase_create("errors");
    tcase_add_test(tc, test_errors);
    tcase_add_test(tc, test_not_converged);
    tcase_add_test(tc, test_singular);
    tcase_add_test(tc, test_errors_fisher);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(gatefit_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
