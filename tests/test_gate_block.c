/* Check suite: cs_gate_block_variance, the variance of the mean of K neighbouring bins of a
 * windowed, zero-padded power spectrum of white noise. Checked against a Monte Carlo of the
 * thing itself (GSL's Gaussian deviates, FFTW's transform: general-purpose reference libraries)
 * and against the Hann window's moments in closed form. */
#include <collshift/gate.h>
#include <collshift/window.h>

#include <check.h>
#include <fftw3.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdlib.h>

enum { M = 256, N = 512, REPS = 600 };

/* Monte Carlo of K * var(mean of K adjacent bins) / var(one bin): REPS records of M complex
 * white Gaussian samples through the window, padded to N, |FFT|^2, blocks of K bins. */
static void monte_carlo(const char *window, const size_t *Ks, size_t nk, double *out)
{
    cs_window w;
    ck_assert_int_eq(cs_window_parse(window, &w, NULL), CS_OK);
    double wv[M];
    ck_assert_int_eq(cs_window_fill(&w, M, CS_WINDOW_PERIODIC, wv), CS_OK);
    fftw_complex *a = fftw_malloc(N * sizeof *a);
    ck_assert_ptr_nonnull(a);
    fftw_plan p = fftw_plan_dft_1d(N, a, a, FFTW_FORWARD, FFTW_ESTIMATE);
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 7);
    double s1[8] = {0}, s2[8] = {0}, c[8] = {0};
    double pw[N];
    for (int rep = 0; rep < REPS; rep++) {
        for (int t = 0; t < N; t++) {
            a[t][0] = t < M ? wv[t] * gsl_ran_gaussian_ziggurat(r, 1.0) : 0.0;
            a[t][1] = t < M ? wv[t] * gsl_ran_gaussian_ziggurat(r, 1.0) : 0.0;
        }
        fftw_execute(p);
        for (int k = 0; k < N; k++)
            pw[k] = a[k][0] * a[k][0] + a[k][1] * a[k][1];
        for (size_t j = 0; j < nk; j++)
            for (size_t b = 0; b + Ks[j] <= N; b += Ks[j]) {
                double m = 0.0;
                for (size_t k = b; k < b + Ks[j]; k++)
                    m += pw[k];
                m /= (double)Ks[j];
                s1[j] += m;
                s2[j] += m * m;
                c[j] += 1.0;
            }
    }
    /* every bin has the same mean and variance (white noise, circular transform) */
    double v1 = s2[0] / c[0] - (s1[0] / c[0]) * (s1[0] / c[0]);
    for (size_t j = 0; j < nk; j++) {
        double v = s2[j] / c[j] - (s1[j] / c[j]) * (s1[j] / c[j]);
        out[j] = (double)Ks[j] * v / v1;
    }
    gsl_rng_free(r);
    fftw_destroy_plan(p);
    fftw_free(a);
}

static void check_window(const char *window)
{
    static const size_t Ks[] = {1, 2, 3, 5, 8, 16, 32};
    const size_t nk = sizeof Ks / sizeof Ks[0];
    double mc[8];
    monte_carlo(window, Ks, nk, mc);
    cs_window w;
    ck_assert_int_eq(cs_window_parse(window, &w, NULL), CS_OK);
    for (size_t j = 0; j < nk; j++) {
        double g = NAN;
        ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, M, N, Ks[j], &g, NULL), CS_OK);
        /* the Monte Carlo's relative scatter is about sqrt(2 K / (REPS N)) < 2 % here; 6 % */
        ck_assert_msg(fabs(g - mc[j]) <= 0.06 * mc[j], "%s, K = %zu: g %.4f, Monte Carlo %.4f", window, Ks[j], g,
                      mc[j]);
    }
    /* single bins are not averaged */
    double g1 = NAN;
    ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, M, N, 1, &g1, NULL), CS_OK);
    ck_assert_double_eq(g1, 1.0);
}

START_TEST(test_rect_monte_carlo)
{
    check_window("rect");
}
END_TEST

START_TEST(test_hann_monte_carlo)
{
    check_window("hann");
}
END_TEST

/* Long blocks: ginf = N sum w^4 / (sum w^2)^2. For the rectangular window N/m; for the periodic
 * Hann window sum w^2 = 3m/8 and sum w^4 = 35m/128 (moments of sin^2; F. J. Harris, Proc. IEEE
 * 66, 51 (1978), and the integrals of sin^4, sin^8 over a period), so ginf = 35 N / (18 m). Two
 * neighbours of a rectangular gate padded twice: g(2) = 1 + rho(1)^2 with
 * rho(1) = 1 / (m sin(pi / (2 m))) -> 2/pi (Dirichlet kernel; common practice). */
START_TEST(test_closed_forms)
{
    cs_window w;
    double g = NAN, gi = NAN;
    ck_assert_int_eq(cs_window_parse("rect", &w, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, 1000, 2000, 2, &g, &gi), CS_OK);
    double r1 = 1.0 / (1000.0 * sin(3.14159265358979323846 / 2000.0));
    ck_assert_double_eq_tol(g, 1.0 + r1 * r1, 1e-12);
    ck_assert_double_eq_tol(g, 1.0 + 4.0 / (3.14159265358979323846 * 3.14159265358979323846), 1e-5);
    ck_assert_double_eq_tol(gi, 2.0, 1e-12);
    ck_assert_int_eq(cs_window_parse("hann", &w, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, 4096, 12288, 1, &g, &gi), CS_OK);
    ck_assert_double_eq_tol(gi, 35.0 * 12288.0 / (18.0 * 4096.0), 1e-9);
    /* g(K) climbs towards ginf */
    double prev = 1.0;
    for (size_t K = 2; K <= 64; K *= 2) {
        ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, 4096, 12288, K, &g, NULL), CS_OK);
        ck_assert_msg(g > prev && g < gi, "K = %zu: g %.5f not between %.5f and ginf %.5f", K, g, prev, gi);
        prev = g;
    }
    ck_assert_msg(prev > 0.9 * gi, "g(64) %.4f far from ginf %.4f", prev, gi);
}
END_TEST

START_TEST(test_bad_arguments)
{
    cs_window w;
    double g;
    ck_assert_int_eq(cs_window_parse("rect", &w, NULL), CS_OK);
    ck_assert_int_eq(cs_gate_block_variance(NULL, CS_WINDOW_PERIODIC, 10, 20, 2, &g, NULL), CS_EINVAL);
    ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, 0, 20, 2, &g, NULL), CS_EINVAL);
    ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, 30, 20, 2, &g, NULL), CS_EINVAL);
    ck_assert_int_eq(cs_gate_block_variance(&w, CS_WINDOW_PERIODIC, 10, 20, 0, &g, NULL), CS_EINVAL);
    ck_assert(isnan(g));
}
END_TEST

static Suite *suite(void)
{
    Suite *s = suite_create("gate_block");
    TCase *tc = tcase_create("block");
    tcase_set_timeout(tc, 60);
    tcase_add_test(tc, test_rect_monte_carlo);
    tcase_add_test(tc, test_hann_monte_carlo);
    tcase_add_test(tc, test_closed_forms);
    tcase_add_test(tc, test_bad_arguments);
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
