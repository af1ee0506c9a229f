/* Check suite: the fit's error bars are honest: pulls of a broad and a narrow overlapping line.
 *
 * Synthetic spectra (generated here with GSL's MT19937, fixed seeds): a broad Lorentzian (FWHM
 * 400 MHz) and a narrow one (FWHM 40 MHz) 100 MHz apart near 384.23 THz, on a sloped baseline,
 * 500 points over 4 GHz, Gaussian noise of known sigma. Each spectrum is fitted with automatic
 * starting values. For every centre, FWHM and area the pull (fit - truth) / error must have mean
 * 0 and standard deviation 1 if the estimates are unbiased and the errors right (the usual
 * check of an estimator's error model, e.g. L. Demortier and L. Lyons, CDF note 5776 (2002));
 * the bars, mean within +-0.15 and standard deviation within [0.85, 1.15], allow for the
 * statistical scatter of 300-500 replicas (standard error 0.045-0.058 of the mean and
 * 0.032-0.041 of the standard deviation) and for the small nonlinearity bias of a fit at
 * this signal-to-noise ratio. */
#include <collshift/fit.h>

#include "testutil.h"

#include <check.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#define PI 3.14159265358979323846
#define NPTS 500

static const double NU0 = 384.230484468e12; /* an optical line frequency (Rb D2 region), Hz */
static const double SIGMA = 0.05;

/* truth: 1.center 1.fwhm 1.area 2.center 2.fwhm 2.area; heights 1.0 (broad) and 2.0 (narrow) */
static double truth[6];

static void set_truth(void)
{
    truth[0] = NU0;
    truth[1] = 400e6;
    truth[2] = PI * 400e6 / 2.0 * 1.0;
    truth[3] = NU0 + 100e6;
    truth[4] = 40e6;
    truth[5] = PI * 40e6 / 2.0 * 2.0;
}

static double lorentz(double x, double c, double fwhm, double area)
{
    double h = 0.5 * fwhm, u = x - c;
    return area * (h / PI) / (u * u + h * h);
}

typedef struct pull_stats {
    double sum[6], sum2[6], chi2;
    size_t n, failed;
} pull_stats;

static void run_pulls(cs_fit_weighting wt, size_t nrep, unsigned long seed, pull_stats *ps)
{
    static double x[NPTS], y0[NPTS], y[NPTS], s[NPTS];
    set_truth();
    const double xm = NU0;
    for (size_t i = 0; i < NPTS; i++) {
        x[i] = NU0 - 2e9 + 4e9 * (double)i / (NPTS - 1);
        s[i] = SIGMA;
        y0[i] = 0.2 + 5e-11 * (x[i] - xm) + lorentz(x[i], truth[0], truth[1], truth[2]) +
                lorentz(x[i], truth[3], truth[4], truth[5]);
    }
    gsl_rng *g = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(g, seed);
    cs_fit_workspace *ws = cs_fit_alloc(NPTS, 8);
    ck_assert_ptr_nonnull(ws);
    memset(ps, 0, sizeof *ps);
    for (size_t k = 0; k < nrep; k++) {
        for (size_t i = 0; i < NPTS; i++)
            y[i] = y0[i] + gsl_ran_gaussian(g, SIGMA);
        cs_error err;
        cs_model *m = cs_model_alloc("lorentz+lorentz", CS_BASELINE_LINEAR, CS_MODEL_SUM, &err);
        ck_assert_msg(m != NULL, "%s", err.msg);
        cs_fit_parameters par = cs_fit_default_parameters();
        par.weighting = wt;
        cs_fit_result *r = NULL;
        int rc = cs_fit_run(ws, m, x, y, wt == CS_WEIGHT_SIGMA ? s : NULL, NULL, NPTS, &par, &r, &err);
        if (rc != CS_OK || r->status != CS_FIT_CONVERGED) {
            printf("replica %zu: %s (%s)\n", k, err.msg, r ? cs_fit_status_name(r->status) : "no result");
            ps->failed++;
        } else {
            ps->n++;
            ps->chi2 += r->redchi2;
            for (int j = 0; j < 6; j++) {
                double pull = (r->value[j] - truth[j]) / r->err[j];
                ps->sum[j] += pull;
                ps->sum2[j] += pull * pull;
            }
        }
        cs_fit_result_free(r);
        cs_model_free(m);
    }
    cs_fit_free(ws);
    gsl_rng_free(g);
}

static void check_pulls(const char *what, const pull_stats *ps)
{
    static const char *names[6] = {"broad centre", "broad fwhm", "broad area", "narrow centre", "narrow fwhm",
                                   "narrow area"};
    ck_assert_msg(ps->failed == 0, "%s: %zu fits failed", what, ps->failed);
    double n = (double)ps->n;
    printf("%s, %zu spectra, mean chi2/dof %.4f:\n", what, ps->n, ps->chi2 / n);
    for (int j = 0; j < 6; j++) {
        double mean = ps->sum[j] / n, sd = sqrt((ps->sum2[j] - n * mean * mean) / (n - 1.0));
        printf("  %-14s pull mean %+.3f  sd %.3f\n", names[j], mean, sd);
        ck_assert_msg(fabs(mean) <= 0.15, "%s %s: pull mean %.3f", what, names[j], mean);
        ck_assert_msg(sd >= 0.85 && sd <= 1.15, "%s %s: pull sd %.3f", what, names[j], sd);
    }
}

START_TEST(test_pulls_sigma)
{
    pull_stats ps;
    run_pulls(CS_WEIGHT_SIGMA, 500, 20240611UL, &ps);
    check_pulls("given sigma", &ps);
    /* with the right sigma, chi2/dof averages 1 (sd of one value sqrt(2/dof) = 0.064) */
    ck_assert_msg(fabs(ps.chi2 / (double)ps.n - 1.0) < 0.02, "mean chi2/dof %g", ps.chi2 / (double)ps.n);
}
END_TEST

START_TEST(test_pulls_noise)
{
    pull_stats ps;
    run_pulls(CS_WEIGHT_NOISE, 300, 777UL, &ps);
    check_pulls("noise estimated from the residuals", &ps);
    /* chi2/dof is then the residual variance: sigma^2 on average */
    ck_assert_msg(fabs(ps.chi2 / (double)ps.n / (SIGMA * SIGMA) - 1.0) < 0.02, "mean variance %g",
                  ps.chi2 / (double)ps.n);
}
END_TEST

static Suite *pulls_suite(void)
{
    Suite *s = suite_create("fit_pulls");
    TCase *tc = tcase_create("pulls");
    tcase_add_test(tc, test_pulls_sigma);
    tcase_add_test(tc, test_pulls_noise);
    tcase_set_timeout(tc, 120);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(pulls_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
