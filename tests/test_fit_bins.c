/* Check suite: fits of binned data (cs_fit_parameters.bin_width). Each point is the exact mean of
 * a spectrum over its bin, computed from the profiles' closed-form integrals (handbook formulas,
 * below); the fit, which averages the model over each bin by two-point Gauss-Legendre quadrature,
 * must recover the true parameters, while a fit that takes the points as values AT the bin centres
 * must not (so the test sees whether the bins are used at all). */
#include <collshift/fit.h>

#include "testutil.h"

#include <check.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* The sech^2 line of profile.h, area-normalised: sech^2((x - c)/b) / (2 b) with
 * b = fwhm / (2 ln(1 + sqrt 2)) (half maximum where cosh t = sqrt 2, t = ln(1 + sqrt 2)). Its
 * integral is tanh((x - c)/b) / 2 (d tanh t / dt = sech^2 t; Abramowitz & Stegun 4.5.79). */
static double sech2_cdf(double x, double c, double fwhm)
{
    double b = fwhm / (2.0 * log(1.0 + sqrt(2.0)));
    return 0.5 * tanh((x - c) / b);
}

/* The Lorentzian (Cauchy density): its integral is atan((x - c) / h) / pi, h = fwhm / 2
 * (common practice). */
static double lorentz_cdf(double x, double c, double fwhm)
{
    return atan((x - c) / (0.5 * fwhm)) / 3.14159265358979323846;
}

/* Truth: a broad sech^2 line and a narrow Lorentzian 3 MHz to its blue, on a floor of 2. */
enum { NB = 400 };
static const double BIN = 25e3;                          /* Hz */
static const double C1 = 4.0e6, W1 = 1.6e6, A1 = 4e6;   /* sech2: centre, FWHM, area */
static const double C2 = 7.0e6, W2 = 8.0 * 25e3, A2 = 1e6;  /* lorentz: FWHM = 8 bins */
static const double FLOOR = 2.0;

/* Exact bin means at x[i] = (i + 1/2) BIN, bins [i BIN, (i + 1) BIN). */
static void binned_truth(double *x, double *y, double *s)
{
    for (int i = 0; i < NB; i++) {
        double lo = i * BIN, hi = (i + 1) * BIN;
        x[i] = 0.5 * (lo + hi);
        y[i] = FLOOR + (A1 * (sech2_cdf(hi, C1, W1) - sech2_cdf(lo, C1, W1)) +
                        A2 * (lorentz_cdf(hi, C2, W2) - lorentz_cdf(lo, C2, W2))) / BIN;
        s[i] = 1e-3;
    }
}

static cs_model *start_model(void)
{
    cs_model *m = tu_model("sech2+lorentz", CS_BASELINE_CONST, CS_MODEL_SUM);
    /* starts 2-10 % off the truth */
    tu_start(m, "1.center", C1 + 0.05 * W1);
    tu_start(m, "1.fwhm", 1.1 * W1);
    tu_start(m, "1.area", 0.9 * A1);
    tu_start(m, "2.center", C2 - 0.1 * W2);
    tu_start(m, "2.fwhm", 0.9 * W2);
    tu_start(m, "2.area", 1.1 * A2);
    tu_start(m, "base.c0", 0.98 * FLOOR);
    return m;
}

/* The model from start_model() fitted to x, y, s (weights 1/s^2) with bins of `width` (0: point
 * values), in workspace ws (NULL: its own); the fit must converge. */
static cs_fit_result *fit_data(cs_fit_workspace *ws, const double *x, const double *y, const double *s,
                               double width)
{
    cs_model *m = start_model();
    cs_fit_parameters par = cs_fit_default_parameters();
    par.weighting = CS_WEIGHT_SIGMA;
    par.guess = 0;
    par.bin_width = width;
    cs_fit_result *r = NULL;
    cs_error err;
    int rc = cs_fit_run(ws, m, x, y, s, NULL, NB, &par, &r, &err);
    ck_assert_msg(rc == CS_OK && r, "fit failed: %s", err.msg);
    ck_assert_int_eq(r->status, CS_FIT_CONVERGED);
    cs_model_free(m);
    return r;
}

/* The noise-free binned truth fitted with bins of `width`. */
static cs_fit_result *fit_bins(double width)
{
    static double x[NB], y[NB], s[NB];
    binned_truth(x, y, s);
    return fit_data(NULL, x, y, s, width);
}

/* The bins used: every parameter back to the truth. The quadrature's relative error at the narrow
 * line's peak is (BIN / FWHM)^4 / 270 * 24 ~ 2e-5 (Abramowitz & Stegun 25.4.30 with the
 * Lorentzian's fourth derivative at its centre, 24 / h^4); the tolerances leave room for that. */
START_TEST(test_bins_recover_truth)
{
    cs_fit_result *r = fit_bins(BIN);
    /* parameter order: sech2 centre, fwhm, area; lorentz centre, fwhm, area; c0 */
    ck_assert_msg(fabs(r->value[0] - C1) < 1e-4 * W1, "sech2 centre %.6g", r->value[0]);
    ck_assert_msg(tu_close(r->value[1], W1, 1e-4), "sech2 fwhm %.8g", r->value[1]);
    ck_assert_msg(tu_close(r->value[2], A1, 1e-4), "sech2 area %.8g", r->value[2]);
    ck_assert_msg(fabs(r->value[3] - C2) < 1e-4 * W2, "lorentz centre %.8g", r->value[3]);
    ck_assert_msg(tu_close(r->value[4], W2, 2e-4), "lorentz fwhm %.8g (true %.8g)", r->value[4], W2);
    ck_assert_msg(tu_close(r->value[5], A2, 2e-4), "lorentz area %.8g", r->value[5]);
    ck_assert_msg(tu_close(r->value[6], FLOOR, 1e-5), "floor %.8g", r->value[6]);
    cs_fit_result_free(r);
}
END_TEST

/* The same data read as point values: the narrow line's mean over a bin is below its peak value
 * by about (BIN^2 / 24) |L''| / L = (BIN / FWHM)^2 / 3 = (1/8)^2 / 3 ~ 0.5 % (Taylor expansion of
 * the mean, with L''/L = -8 / FWHM^2 at the peak; common practice), so the fitted FWHM comes out
 * wider by a clearly visible amount. This is what the option is for; if the bins were ignored
 * the first test would fail the same way. */
START_TEST(test_points_are_biased)
{
    cs_fit_result *r = fit_bins(0.0);
    double rel = (r->value[4] - W2) / W2;
    ck_assert_msg(rel > 1e-3, "point-value fit of binned data: lorentz fwhm off by only %.3g", rel);
    cs_fit_result_free(r);
}
END_TEST

/* A vanishing bin gives the point-value fit (the nodes merge with the centres). */
START_TEST(test_tiny_bins_match_points)
{
    cs_fit_result *a = fit_bins(0.0), *b = fit_bins(1e-6);
    for (size_t k = 0; k < a->nparams; k++)
        ck_assert_msg(tu_close(b->value[k], a->value[k], 1e-8), "parameter %zu: %.12g vs %.12g", k, b->value[k],
                      a->value[k]);
    cs_fit_result_free(a);
    cs_fit_result_free(b);
}
END_TEST

/* Noisy binned data: over NPULL noise draws (GSL's Gaussian deviates, sigma 0.01) the pulls
 * (fitted - true) / error of the narrow line's centre and FWHM and of the broad line's FWHM have
 * |mean| < 0.3 and an SD in 0.8 .. 1.25 (for 100 unit-normal pulls the mean has a standard
 * deviation of 0.1 and the SD of 0.07; common practice). This checks the errors, i.e. that the
 * Jacobian is averaged over the bins like the values. */
#define NPULL 100
START_TEST(test_bins_pulls)
{
    static double x[NB], y0[NB], y[NB], s[NB];
    binned_truth(x, y0, s);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 11);
    const double sd = 0.01;
    double pulls[3][NPULL];
    const int idx[3] = {3, 4, 1};
    const double truth[3] = {C2, W2, W1};
    cs_fit_workspace *ws = cs_fit_alloc(NB, 7);
    ck_assert_ptr_nonnull(ws);
    for (int k = 0; k < NPULL; k++) {
        for (int i = 0; i < NB; i++) {
            y[i] = y0[i] + gsl_ran_gaussian_ziggurat(rng, sd);
            s[i] = sd;
        }
        cs_fit_result *r = fit_data(ws, x, y, s, BIN);   /* one workspace reused */
        for (int q = 0; q < 3; q++)
            pulls[q][k] = (r->value[idx[q]] - truth[q]) / r->err[idx[q]];
        cs_fit_result_free(r);
    }
    for (int q = 0; q < 3; q++) {
        double mean = 0.0, var = 0.0;
        for (int k = 0; k < NPULL; k++)
            mean += pulls[q][k] / NPULL;
        for (int k = 0; k < NPULL; k++)
            var += (pulls[q][k] - mean) * (pulls[q][k] - mean) / (NPULL - 1);
        ck_assert_msg(fabs(mean) < 0.3 && sqrt(var) > 0.8 && sqrt(var) < 1.25,
                      "parameter %d: pulls mean %.3f, SD %.3f", idx[q], mean, sqrt(var));
    }
    cs_fit_free(ws);
    gsl_rng_free(rng);
}
END_TEST

START_TEST(test_bad_width)
{
    double x[NB], y[NB], s[NB];
    binned_truth(x, y, s);
    const double bad[] = {-1.0, NAN, INFINITY};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        cs_model *m = start_model();
        cs_fit_parameters par = cs_fit_default_parameters();
        par.guess = 0;
        par.bin_width = bad[i];
        cs_fit_result *r = NULL;
        cs_error err;
        int rc = cs_fit_run(NULL, m, x, y, s, NULL, NB, &par, &r, &err);
        ck_assert_int_eq(rc, CS_EINVAL);
        ck_assert_ptr_null(r);
        ck_assert_msg(strstr(err.msg, "bin width") != NULL, "message: %s", err.msg);
        cs_model_free(m);
    }
}
END_TEST

static Suite *suite(void)
{
    Suite *s = suite_create("fit_bins");
    TCase *tc = tcase_create("bins");
    tcase_set_timeout(tc, 60);
    tcase_add_test(tc, test_bins_recover_truth);
    tcase_add_test(tc, test_points_are_biased);
    tcase_add_test(tc, test_tiny_bins_match_points);
    tcase_add_test(tc, test_bins_pulls);
    tcase_add_test(tc, test_bad_width);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
