/* Check suite for pencil: matrix-pencil estimates of damped exponentials and their errors. */
#include <check.h>
#include <collshift/gate.h>
#include <collshift/pencil.h>

#include <complex.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

#define PI_T 3.14159265358979323846264338327950288
#define N_OF(a) ((int)(sizeof(a) / sizeof((a)[0])))
#define MAXC 4

/* One damped exponential A exp(i phi) exp((-gamma + 2 pi i f) t). */
typedef struct line {
    double f, gamma, amp, phase;
} line;

/* Samples of a sum of lines at t = k dt, k < n, plus Gaussian noise of SD sigma in each real
 * component (rng may be NULL: no noise). Complex: interleaved re, im; real: the real part. */
static void synth(double *y, size_t n, int is_complex, double dt, const line *c, int nc,
                  double sigma, gsl_rng *rng)
{
    for (size_t k = 0; k < n; k++) {
        double complex s = 0;
        double t = (double)k * dt;
        for (int j = 0; j < nc; j++)
            s += c[j].amp * cexp(I * c[j].phase)
                 * cexp((-c[j].gamma + 2.0 * PI_T * I * c[j].f) * t);
        if (is_complex) {
            y[2 * k] = creal(s) + (rng ? gsl_ran_gaussian(rng, sigma) : 0.0);
            y[2 * k + 1] = cimag(s) + (rng ? gsl_ran_gaussian(rng, sigma) : 0.0);
        } else {
            y[k] = creal(s) + (rng ? gsl_ran_gaussian(rng, sigma) : 0.0);
        }
    }
}

/* |a - b| <= rtol |b| + atol */
static int near(double a, double b, double rtol, double atol)
{
    return fabs(a - b) <= rtol * fabs(b) + atol;
}

/* Phase difference wrapped to (-pi, pi]. */
static double dphase(double a, double b)
{
    double d = fmod(a - b, 2.0 * PI_T);
    if (d > PI_T)
        d -= 2.0 * PI_T;
    if (d <= -PI_T)
        d += 2.0 * PI_T;
    return d;
}

/* The component of r closest (in frequency and rate, relative to scale) to l, or NULL. */
static const cs_pencil_component *match(const cs_pencil_result *r, const line *l, double scale)
{
    const cs_pencil_component *best = NULL;
    double bd = INFINITY;
    for (size_t k = 0; k < r->order; k++) {
        double d = hypot(r->comp[k].freq_hz - l->f,
                         (r->comp[k].gamma_per_s - 2.0 * l->gamma) / (2 * PI_T));
        if (d < bd) {
            bd = d;
            best = &r->comp[k];
        }
    }
    return bd < scale ? best : NULL;
}

/* ---- exact recovery -------------------------------------------------------------------------- */

/* Reference problems: noise-free sums of exponentials whose parameters are the expected values
 * (the data are made from them, so the expected values are exact by construction). A sum of M
 * distinct exponentials is recovered exactly by the matrix pencil in exact arithmetic (Hua and
 * Sarkar 1990); 1e-8 relative is the requirement, leaving room for rounding. */
static const struct exact_case {
    const char *what;
    size_t n;
    double dt;
    int nc;
    line c[MAXC];
} exact_cases[] = {
    {"one damped, GHz sampling", 600, 2e-9, 1, {{3.1e6, 2.0e6, 0.8, 0.3}}},
    {"two damped", 1000, 1e-6, 2, {{12345.0, 3000.0, 1.0, 0.3}, {-40000.0, 8000.0, 0.5, -1.2}}},
    {"three damped", 1000, 1e-6, 3,
     {{12345.0, 3000.0, 1.0, 0.3}, {-40000.0, 8000.0, 0.5, -1.2}, {150000.0, 1000.0, 0.2, 2.0}}},
    /* a superradiant burst and a slow tail 500 Hz apart, 25 times slower */
    {"burst and tail", 2000, 1e-6, 2, {{1000.0, 50000.0, 2.0, -2.5}, {1500.0, 2000.0, 0.3, 1.0}}},
    /* two undamped tones 1 kHz apart in a 0.5 ms record: half the Fourier resolution 1/(n dt) */
    {"undamped tones below the Fourier resolution", 500, 1e-6, 2,
     {{25000.0, 0.0, 1.0, 0.0}, {26000.0, 0.0, 0.7, 1.0}}},
    {"undamped tone near -Nyquist", 256, 1e-7, 1, {{-4.6e6, 0.0, 1.5, -3.0}}},
    /* lines placed symmetrically about the LO: the pencil has both z and conj(z) as eigenvalues */
    {"mirror pair", 400, 1e-6, 2, {{30000.0, 4000.0, 1.0, 0.5}, {-30000.0, 4000.0, 0.6, -0.2}}},
};

static void check_exact(const struct exact_case *c, const cs_pencil_result *r,
                        size_t order_expected)
{
    ck_assert_msg(r->order == order_expected, "%s: order %zu, expected %zu", c->what, r->order,
                  order_expected);
    for (int j = 0; j < c->nc; j++) {
        const line *l = &c->c[j];
        const cs_pencil_component *p = match(r, l, 0.01 / (c->n * c->dt));
        ck_assert_msg(p != NULL, "%s: line %d not found", c->what, j);
        /* frequencies and rates: 1e-8 relative to the value, or to the Fourier resolution
           1/(n dt) for the undamped ones (gamma = 0) */
        double res = 1.0 / ((double)c->n * c->dt);
        ck_assert_msg(near(p->freq_hz, l->f, 1e-8, 1e-10 * res), "%s: f %.15g vs %.15g", c->what,
                      p->freq_hz, l->f);
        /* reported Gamma is the intensity rate, twice the amplitude rate of the synthetic signal;
           the Lorentzian FWHM of exp(-g t) is g / pi (handbook Fourier pair) */
        ck_assert_msg(near(p->gamma_per_s, 2.0 * l->gamma, 1e-8, 2e-9 * res), "%s: gamma %.15g vs %.15g",
                      c->what, p->gamma_per_s, 2.0 * l->gamma);
        ck_assert(near(p->fwhm_hz, l->gamma / PI_T, 1e-8, 1e-9 * res));
        ck_assert_msg(near(p->amplitude, l->amp, 1e-8, 0.0), "%s: amplitude %.15g vs %.15g",
                      c->what, p->amplitude, l->amp);
        ck_assert_msg(fabs(dphase(p->phase_rad, l->phase)) < 1e-8, "%s: phase %.15g vs %.15g",
                      c->what, p->phase_rad, l->phase);
        /* the pole is exp((-gamma + 2 pi i f) dt) */
        double complex z = cexp((-l->gamma + 2.0 * PI_T * I * l->f) * c->dt);
        ck_assert(cabs(p->pole_re + I * p->pole_im - z) < 1e-10);
    }
    /* sorted by decreasing amplitude */
    for (size_t k = 1; k < r->order; k++)
        ck_assert(r->comp[k - 1].amplitude >= r->comp[k].amplitude);
}

START_TEST(test_exact_auto)
{
    const struct exact_case *c = &exact_cases[_i];
    double *y = malloc(2 * c->n * sizeof *y);
    synth(y, c->n, 1, c->dt, c->c, c->nc, 0.0, NULL);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    cs_error err;
    int st = cs_pencil_estimate(y, c->n, 1, c->dt, NULL, &r, &err);
    ck_assert_msg(st == CS_OK, "%s: %s", c->what, err.msg);
    check_exact(c, &r, (size_t)c->nc);
    ck_assert_uint_eq(r.n_input, c->n);
    ck_assert_uint_eq(r.n_used, c->n);
    ck_assert_uint_eq(r.decimation, 1);
    ck_assert_int_eq(r.is_complex, 1);
    /* default pencil parameter: L = n/3 (Hua and Sarkar's recommended range n/3 .. n/2) */
    ck_assert(r.pencil_param + 1 >= c->n / 3 && r.pencil_param <= c->n / 3 + 1);
    /* noise-free: the residual is at the rounding level */
    ck_assert(r.rms_residual < 1e-10);
    cs_pencil_result_release(&r);
    free(y);
}
END_TEST

START_TEST(test_exact_fixed)
{
    const struct exact_case *c = &exact_cases[_i];
    double *y = malloc(2 * c->n * sizeof *y);
    synth(y, c->n, 1, c->dt, c->c, c->nc, 0.0, NULL);
    cs_pencil_parameters p = cs_pencil_default_parameters();
    p.order = (size_t)c->nc;
    p.pencil_fraction = 0.5; /* the other end of the recommended range */
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    ck_assert_int_eq(cs_pencil_estimate(y, c->n, 1, c->dt, &p, &r, NULL), CS_OK);
    check_exact(c, &r, (size_t)c->nc);
    ck_assert_uint_eq(r.nsingular, (size_t)c->nc + 1);
    /* exactly rank M: the next singular value is at the rounding level (numerical floor) */
    ck_assert(r.singular[c->nc] < 1e-6 * r.singular[0]);
    cs_pencil_result_release(&r);
    free(y);
}
END_TEST

/* The leading singular value of the Hankel matrix of one exponential: Y = a u v^T with
 * u_i = z^i (i < N - L), v_j = z^j (j <= L) has rank one and sigma_1 = |a| ||u|| ||v||
 * (an outer product; common practice). With r = |z|, ||u||^2 = (1 - r^(2m)) / (1 - r^2). */
START_TEST(test_singular_value)
{
    const double dt = 1e-6;
    const size_t n = 900;
    const line cases[2] = {{5000.0, 0.0, 0.7, 0.2}, {-7000.0, 3000.0, 1.3, -1.0}};
    double *y = malloc(2 * n * sizeof *y);
    for (int q = 0; q < 2; q++) {
        synth(y, n, 1, dt, &cases[q], 1, 0.0, NULL);
        cs_pencil_result r;
        cs_pencil_result_init(&r);
        ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, NULL, &r, NULL), CS_OK);
        size_t m = n - r.pencil_param, nc = r.pencil_param + 1;
        double r2 = exp(-2.0 * cases[q].gamma * dt);
        double su = cases[q].gamma > 0 ? (1.0 - pow(r2, (double)m)) / (1.0 - r2) : (double)m;
        double sv = cases[q].gamma > 0 ? (1.0 - pow(r2, (double)nc)) / (1.0 - r2) : (double)nc;
        double expect = cases[q].amp * sqrt(su * sv);
        ck_assert_msg(near(r.singular[0], expect, 1e-10, 0.0), "%.15g vs %.15g", r.singular[0],
                      expect);
        ck_assert_uint_eq(r.order, 1);
        cs_pencil_result_release(&r);
    }
    free(y);
}
END_TEST

/* A real damped cosine A cos(2 pi f t + phi) exp(-gamma t) = (A/2) e^{i phi} z^t + (A/2)
 * e^{-i phi} conj(z)^t: two components at +-f, amplitude A/2, phases +-phi (Euler's formula). */
START_TEST(test_real_cosine)
{
    const double dt = 1e-6, A = 1.4, f = 50000.0, g = 2000.0, phi = 0.7;
    const size_t n = 800;
    double *y = malloc(n * sizeof *y);
    for (size_t k = 0; k < n; k++) {
        double t = (double)k * dt;
        y[k] = A * cos(2.0 * PI_T * f * t + phi) * exp(-g * t);
    }
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    cs_error err;
    ck_assert_msg(cs_pencil_estimate(y, n, 0, dt, NULL, &r, &err) == CS_OK, "%s", err.msg);
    ck_assert_uint_eq(r.order, 2);
    ck_assert_int_eq(r.is_complex, 0);
    /* equal amplitudes: the positive frequency first */
    ck_assert(near(r.comp[0].freq_hz, f, 1e-8, 0.0));
    ck_assert(near(r.comp[1].freq_hz, -f, 1e-8, 0.0));
    for (int k = 0; k < 2; k++) {
        ck_assert(near(r.comp[k].gamma_per_s, 2.0 * g, 1e-8, 0.0));
        ck_assert(near(r.comp[k].amplitude, A / 2.0, 1e-8, 0.0));
    }
    ck_assert(fabs(dphase(r.comp[0].phase_rad, phi)) < 1e-8);
    ck_assert(fabs(dphase(r.comp[1].phase_rad, -phi)) < 1e-8);
    /* the model evaluates back to the samples */
    double *m = malloc(n * sizeof *m);
    ck_assert_int_eq(cs_pencil_eval(&r, n, 0, m), CS_OK);
    for (size_t k = 0; k < n; k++)
        ck_assert(fabs(m[k] - y[k]) < 1e-9);
    cs_pencil_result_release(&r);
    free(m);
    free(y);
}
END_TEST

/* Two real cosines need order 4; the automatic order finds it. */
START_TEST(test_real_two_cosines)
{
    const double dt = 1e-6;
    const size_t n = 1200;
    double *y = malloc(n * sizeof *y);
    for (size_t k = 0; k < n; k++) {
        double t = (double)k * dt;
        y[k] = cos(2.0 * PI_T * 30000.0 * t + 0.1) * exp(-1500.0 * t)
               + 0.4 * cos(2.0 * PI_T * 110000.0 * t - 2.0) * exp(-6000.0 * t);
    }
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 0, dt, NULL, &r, NULL), CS_OK);
    ck_assert_uint_eq(r.order, 4);
    ck_assert(near(r.comp[0].freq_hz, 30000.0, 1e-8, 0.0));
    ck_assert(near(r.comp[1].freq_hz, -30000.0, 1e-8, 0.0));
    ck_assert(near(r.comp[2].freq_hz, 110000.0, 1e-8, 0.0));
    ck_assert(near(r.comp[3].gamma_per_s, 2.0 * 6000.0, 1e-8, 0.0));
    ck_assert(near(r.comp[2].amplitude, 0.2, 1e-8, 0.0));
    cs_pencil_result_release(&r);
    free(y);
}
END_TEST

/* ---- long records -------------------------------------------------------------------------- */

/* Block averaging by D: mean_{i<D} a z^(jD+i) = a (1 + z + ... + z^(D-1))/D (z^D)^j, still one
 * exponential (a geometric sum); the estimator undoes the factor, so the recovery stays exact. */
START_TEST(test_reduce_average)
{
    const double dt = 1e-6;
    const size_t n = 3001; /* D = 3, one sample dropped */
    const line c[2] = {{21000.0, 2500.0, 1.0, 0.4}, {-9000.0, 900.0, 0.35, 2.2}};
    double *y = malloc(2 * n * sizeof *y);
    synth(y, n, 1, dt, c, 2, 0.0, NULL);
    cs_pencil_parameters p = cs_pencil_default_parameters();
    p.max_samples = 1000;
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, &p, &r, NULL), CS_OK);
    ck_assert_uint_eq(r.decimation, 3);
    ck_assert_uint_eq(r.n_used, 1000);
    ck_assert_uint_eq(r.n_input, n);
    ck_assert_uint_eq(r.order, 2);
    for (int j = 0; j < 2; j++) {
        const cs_pencil_component *q = match(&r, &c[j], 10.0);
        ck_assert_ptr_nonnull(q);
        ck_assert(near(q->freq_hz, c[j].f, 1e-8, 0.0));
        ck_assert(near(q->gamma_per_s, 2.0 * c[j].gamma, 1e-8, 0.0));
        ck_assert(near(q->amplitude, c[j].amp, 1e-8, 0.0));
        ck_assert(fabs(dphase(q->phase_rad, c[j].phase)) < 1e-8);
        /* the pole refers to the input sampling interval */
        double complex z = cexp((-c[j].gamma + 2.0 * PI_T * I * c[j].f) * dt);
        ck_assert(cabs(q->pole_re + I * q->pole_im - z) < 1e-10);
    }
    cs_pencil_result_release(&r);
    free(y);
}
END_TEST

/* A tone beyond the reduced band (|f| > 1/(2 D dt)) aliases by multiples of 1/(D dt) (sampling
 * theorem; the documented limitation of block averaging). */
START_TEST(test_reduce_alias)
{
    const double dt = 1e-6;
    const size_t n = 4000;
    const line c = {150000.0, 1000.0, 1.0, 0.0};
    double *y = malloc(2 * n * sizeof *y);
    synth(y, n, 1, dt, &c, 1, 0.0, NULL);
    cs_pencil_parameters p = cs_pencil_default_parameters();
    p.max_samples = 1000; /* D = 4: band +-125 kHz */
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, &p, &r, NULL), CS_OK);
    ck_assert_uint_eq(r.decimation, 4);
    ck_assert(near(r.comp[0].freq_hz, 150000.0 - 250000.0, 1e-8, 0.0));
    cs_pencil_result_release(&r);
    free(y);
}
END_TEST

START_TEST(test_reduce_truncate)
{
    const double dt = 1e-6;
    const size_t n = 5000;
    const line c = {-33000.0, 4000.0, 0.9, -0.4};
    double *y = malloc(2 * n * sizeof *y);
    synth(y, n, 1, dt, &c, 1, 0.0, NULL);
    cs_pencil_parameters p = cs_pencil_default_parameters();
    p.max_samples = 700;
    p.reduce = CS_PENCIL_REDUCE_TRUNCATE;
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, &p, &r, NULL), CS_OK);
    ck_assert_uint_eq(r.decimation, 1);
    ck_assert_uint_eq(r.n_used, 700);
    ck_assert(near(r.comp[0].freq_hz, c.f, 1e-8, 0.0));
    ck_assert(near(r.comp[0].gamma_per_s, 2.0 * c.gamma, 1e-8, 0.0));
    ck_assert(near(r.comp[0].amplitude, c.amp, 1e-8, 0.0));
    cs_pencil_result_release(&r);
    free(y);
}
END_TEST

/* ---- order selection with noise ---------------------------------------------------------- */

/* Three lines, the weakest 0.15 with noise SD 0.02: its singular value is about
 * 0.15 sqrt(m n) e^(...) against a noise floor near 0.02 sqrt(2 m) (white-noise Hankel
 * matrix, common practice), far above the threshold; every one of 30 records must give M = 3. */
START_TEST(test_order_noise_rule)
{
    const double dt = 1e-6, sigma = 0.02;
    const size_t n = 900;
    const line c[3] = {{10000.0, 3000.0, 1.0, 0.1}, {-25000.0, 1500.0, 0.5, 1.0},
                       {60000.0, 800.0, 0.15, -2.0}};
    double *y = malloc(2 * n * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 4242);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    for (int k = 0; k < 30; k++) {
        synth(y, n, 1, dt, c, 3, sigma, rng);
        ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, NULL, &r, NULL), CS_OK);
        ck_assert_uint_eq(r.order, 3);
        ck_assert_uint_eq(r.nsingular, 9); /* max_order + 1 */
        ck_assert(r.singular[3] < 3.5 * r.noise_floor);
        ck_assert(r.singular[2] >= 3.5 * r.noise_floor);
        for (int j = 0; j < 3; j++)
            ck_assert_ptr_nonnull(match(&r, &c[j], 500.0));
    }
    /* the same with the largest-gap rule, for the two strong lines alone */
    cs_pencil_parameters p = cs_pencil_default_parameters();
    p.order_rule = CS_PENCIL_ORDER_GAP;
    for (int k = 0; k < 30; k++) {
        synth(y, n, 1, dt, c, 2, sigma, rng);
        ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, &p, &r, NULL), CS_OK);
        ck_assert_uint_eq(r.order, 2);
    }
    cs_pencil_result_release(&r);
    gsl_rng_free(rng);
    free(y);
}
END_TEST

/* Noise only: no singular value may pass the default threshold. From simulation of white noise
 * the largest singular value of records of 100..3000 samples stays below 3.3 noise floors in
 * 999 of 1000 cases (measured while choosing the default 3.5; documented in the header). */
START_TEST(test_order_noise_only)
{
    const size_t n = 500;
    double *y = malloc(2 * n * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 77);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    cs_error err;
    for (int k = 0; k < 20; k++) {
        for (size_t i = 0; i < 2 * n; i++)
            y[i] = gsl_ran_gaussian(rng, 1.0);
        ck_assert_int_eq(cs_pencil_estimate(y, n, 1, 1e-6, NULL, &r, &err), CS_EDATA);
        ck_assert(strstr(err.msg, "noise threshold") != NULL);
        /* the singular values are still reported, with the floor they were compared with */
        ck_assert_uint_eq(r.order, 0);
        ck_assert_ptr_null(r.comp);
        ck_assert_uint_eq(r.nsingular, 9);
        ck_assert(r.singular[0] < 3.5 * r.noise_floor && r.singular[0] > r.noise_floor);
        /* white noise of unit variance per component: mean eigenvalue of Y^H Y is 2 (N - L),
           so the floor is close to sqrt(2 (N - L)) (common practice) */
        double expect = sqrt(2.0 * (double)(n - r.pencil_param));
        ck_assert(near(r.noise_floor, expect, 0.1, 0.0));
    }
    cs_pencil_result_release(&r);
    gsl_rng_free(rng);
    free(y);
}
END_TEST

/* ---- errors calibrated against the scatter of many noise realisations ------------------------ */

/* Cramer-Rao bound of (f, gamma, Re a, Im a) for one damped exponential in complex white noise of
 * SD sigma per component: Fisher matrix F_jk = Re sum_t conj(d mu_t/d p_j) d mu_t/d p_k / sigma^2
 * (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory (1993), the
 * complex Gaussian form of the Fisher information; from memory). Written here independently of
 * the library. crb gets the SDs of f and gamma. */
static void crb_single(const line *l, size_t n, double dt, double sigma, double crb[2])
{
    double F[16] = {0};
    for (size_t k = 0; k < n; k++) {
        double t = (double)k * dt;
        double complex z = cexp((-l->gamma + 2.0 * PI_T * I * l->f) * t);
        double complex mu = l->amp * cexp(I * l->phase) * z;
        double complex d[4] = {2.0 * PI_T * I * t * mu, -t * mu, z, I * z};
        for (int a = 0; a < 4; a++)
            for (int b = 0; b < 4; b++)
                F[a * 4 + b] += creal(conj(d[a]) * d[b]) / (sigma * sigma);
    }
    gsl_matrix_view Fm = gsl_matrix_view_array(F, 4, 4);
    ck_assert_int_eq(gsl_linalg_cholesky_decomp1(&Fm.matrix), GSL_SUCCESS);
    ck_assert_int_eq(gsl_linalg_cholesky_invert(&Fm.matrix), GSL_SUCCESS);
    crb[0] = sqrt(F[0]);
    crb[1] = sqrt(F[5]);
}

struct pulls {
    int count;
    double sum[4], sum2[4], dev[4], dev2[4], err[4];
};

static void pulls_add(struct pulls *s, const double *dev, const double *err)
{
    for (int j = 0; j < 4; j++) {
        s->sum[j] += dev[j] / err[j];
        s->sum2[j] += dev[j] * dev[j] / (err[j] * err[j]);
        s->dev[j] += dev[j];
        s->dev2[j] += dev[j] * dev[j];
        s->err[j] += err[j];
    }
    s->count++;
}

/* The tail of a record: amplitude 1, noise SD 0.05 per component, 1000 samples, gamma n dt = 5.
 * Over 200 realisations (fixed seed) the pulls (estimate - truth) / reported error of f, gamma,
 * amplitude and phase must have mean within +-0.25 and SD within 0.7 .. 1.3; the observed scatter
 * of f and gamma must lie between 0.85 and 1.3 times the Cramer-Rao bound (Hua and Sarkar find the
 * pencil close to it; it cannot beat it beyond the 5 % sampling error of an SD from 200 values),
 * the mean reported error within 30 % of the observed scatter, and the bias below a quarter of
 * the scatter. */
START_TEST(test_error_calibration)
{
    const double dt = 1e-6, sigma = 0.05;
    const size_t n = 1000;
    const line l = {20000.0, 5.0 / ((double)n * dt), 1.0, 0.4};
    const int R = 200;
    double *y = malloc(2 * n * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 20240601);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    cs_error err;
    struct pulls s;
    memset(&s, 0, sizeof s);
    double sd_noise = 0.0;
    for (int k = 0; k < R; k++) {
        synth(y, n, 1, dt, &l, 1, sigma, rng);
        int st = cs_pencil_estimate(y, n, 1, dt, NULL, &r, &err);
        ck_assert_msg(st == CS_OK, "%s", err.msg);
        ck_assert_uint_eq(r.order, 1);
        ck_assert_int_eq(r.error_status, CS_OK);
        const cs_pencil_component *c = &r.comp[0];
        double dev[4] = {c->freq_hz - l.f, c->gamma_per_s - 2.0 * l.gamma, c->amplitude - l.amp,
                         dphase(c->phase_rad, l.phase)};
        double e[4] = {c->freq_hz_err, c->gamma_per_s_err, c->amplitude_err, c->phase_rad_err};
        for (int j = 0; j < 4; j++)
            ck_assert(isfinite(e[j]) && e[j] > 0.0);
        ck_assert(near(c->fwhm_hz_err, c->gamma_per_s_err / (2.0 * PI_T), 1e-12, 0.0));
        pulls_add(&s, dev, e);
        sd_noise += r.noise_sd;
        ck_assert_int_eq(r.noise_sd_estimated, 1);
    }
    /* the noise level from the residuals: 2n - 4 degrees of freedom, so within 2 % on average */
    ck_assert(near(sd_noise / R, sigma, 0.02, 0.0));
    double crb[2];
    crb_single(&l, n, dt, sigma, crb);
    crb[1] *= 2.0;   /* the bound is for the amplitude rate; Gamma (intensity rate) is twice it */
    const char *name[4] = {"f", "gamma", "amplitude", "phase"};
    for (int j = 0; j < 4; j++) {
        double mean = s.sum[j] / s.count;
        double sd = sqrt(s.sum2[j] / s.count - mean * mean);
        ck_assert_msg(fabs(mean) <= 0.25, "%s: pull mean %g", name[j], mean);
        ck_assert_msg(sd >= 0.7 && sd <= 1.3, "%s: pull SD %g", name[j], sd);
        double bias = s.dev[j] / s.count;
        double scatter = sqrt(s.dev2[j] / s.count - bias * bias);
        ck_assert_msg(fabs(bias) <= 0.25 * scatter, "%s: bias %g, scatter %g", name[j], bias,
                      scatter);
        double merr = s.err[j] / s.count;
        ck_assert_msg(fabs(merr / scatter - 1.0) <= 0.3, "%s: error %g, scatter %g", name[j], merr,
                      scatter);
        if (j < 2)
            ck_assert_msg(scatter >= 0.85 * crb[j] && scatter <= 1.3 * crb[j],
                          "%s: scatter %g, Cramer-Rao %g", name[j], scatter, crb[j]);
    }
    cs_pencil_result_release(&r);
    gsl_rng_free(rng);
    free(y);
}
END_TEST

/* The same for a real record (a damped cosine, order 2) where the noise is real: the pull SDs of
 * f and gamma of the positive-frequency component must lie within 0.7 .. 1.3, the means within
 * +-0.25 (100 realisations). */
START_TEST(test_error_calibration_real)
{
    const double dt = 1e-6, sigma = 0.05, A = 2.0, f = 20000.0, phi = 0.4;
    const size_t n = 1000;
    const double g = 5.0 / ((double)n * dt);
    const int R = 100;
    double *y = malloc(n * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 99);
    cs_pencil_parameters p = cs_pencil_default_parameters();
    p.order = 2;
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    struct pulls s;
    memset(&s, 0, sizeof s);
    for (int k = 0; k < R; k++) {
        for (size_t i = 0; i < n; i++) {
            double t = (double)i * dt;
            y[i] = A * cos(2.0 * PI_T * f * t + phi) * exp(-g * t) + gsl_ran_gaussian(rng, sigma);
        }
        ck_assert_int_eq(cs_pencil_estimate(y, n, 0, dt, &p, &r, NULL), CS_OK);
        const cs_pencil_component *c = r.comp[0].freq_hz > 0 ? &r.comp[0] : &r.comp[1];
        double dev[4] = {c->freq_hz - f, c->gamma_per_s - 2.0 * g, c->amplitude - A / 2,
                         dphase(c->phase_rad, phi)};
        double e[4] = {c->freq_hz_err, c->gamma_per_s_err, c->amplitude_err, c->phase_rad_err};
        pulls_add(&s, dev, e);
    }
    for (int j = 0; j < 2; j++) {
        double mean = s.sum[j] / s.count;
        double sd = sqrt(s.sum2[j] / s.count - mean * mean);
        ck_assert_msg(fabs(mean) <= 0.25 && sd >= 0.7 && sd <= 1.3, "%d: pull mean %g SD %g", j,
                      mean, sd);
    }
    cs_pencil_result_release(&r);
    gsl_rng_free(rng);
    free(y);
}
END_TEST

/* A given noise SD is used as given (and the errors scale with it). */
START_TEST(test_noise_sd_given)
{
    const double dt = 1e-6;
    const size_t n = 600;
    const line l = {15000.0, 4000.0, 1.0, 0.0};
    double *y = malloc(2 * n * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 5);
    synth(y, n, 1, dt, &l, 1, 0.01, rng);
    cs_pencil_parameters p = cs_pencil_default_parameters();
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    p.noise_sd = 0.01;
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, &p, &r, NULL), CS_OK);
    ck_assert_int_eq(r.noise_sd_estimated, 0);
    ck_assert(r.noise_sd == 0.01);
    double e1 = r.comp[0].freq_hz_err;
    p.noise_sd = 0.03;
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, &p, &r, NULL), CS_OK);
    ck_assert(near(r.comp[0].freq_hz_err, 3.0 * e1, 1e-12, 0.0));
    cs_pencil_result_release(&r);
    gsl_rng_free(rng);
    free(y);
}
END_TEST

/* ---- argument and data errors ---------------------------------------------------------------- */

START_TEST(test_errors)
{
    const size_t n = 64;
    double y[2 * 64];
    const line l = {1000.0, 100.0, 1.0, 0.0};
    synth(y, n, 1, 1e-5, &l, 1, 0.0, NULL);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    cs_error err;
    cs_pencil_parameters p = cs_pencil_default_parameters();

    ck_assert_int_eq(cs_pencil_estimate(NULL, n, 1, 1e-5, NULL, &r, &err), CS_EINVAL);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, 1e-5, NULL, NULL, &err), CS_EINVAL);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, 0.0, NULL, &r, &err), CS_EINVAL);
    ck_assert(strstr(err.msg, "sampling interval") != NULL);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, -1e-5, NULL, &r, &err), CS_EINVAL);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, NAN, NULL, &r, &err), CS_EINVAL);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, INFINITY, NULL, &r, &err), CS_EINVAL);

    /* too few samples */
    ck_assert_int_eq(cs_pencil_estimate(y, 3, 1, 1e-5, NULL, &r, &err), CS_EDATA);
    ck_assert_str_eq(err.msg, "pencil: too few samples: 3, need at least 4");
    ck_assert_int_eq(cs_pencil_estimate(y, 0, 0, 1e-5, NULL, &r, &err), CS_EDATA);
    ck_assert_int_eq(cs_pencil_estimate(y, 4, 1, 1e-5, NULL, &r, &err), CS_OK); /* the minimum */

    /* order too large: beyond the supported maximum, or for this record (n >= 2M + 2) */
    p.order = CS_PENCIL_MAX_ORDER + 1;
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, 1e-5, &p, &r, &err), CS_EINVAL);
    ck_assert(strstr(err.msg, "order") != NULL);
    p.order = 10;
    ck_assert_int_eq(cs_pencil_estimate(y, 21, 1, 1e-5, &p, &r, &err), CS_EINVAL);
    ck_assert_str_eq(err.msg, "pencil: order 10 needs at least 22 samples, the record has 21");
    ck_assert_int_eq(cs_pencil_estimate(y, 22, 1, 1e-5, &p, &r, &err), CS_OK);
    ck_assert_uint_eq(r.order, 10);

    /* samples that are not numbers */
    double bad[2 * 64];
    memcpy(bad, y, sizeof bad);
    bad[2 * 17 + 1] = NAN;
    ck_assert_int_eq(cs_pencil_estimate(bad, n, 1, 1e-5, NULL, &r, &err), CS_EDATA);
    ck_assert_str_eq(err.msg, "pencil: sample 17 is not finite");
    ck_assert_uint_eq(r.order, 0);
    ck_assert_ptr_null(r.comp);
    ck_assert_ptr_null(r.singular);
    bad[2 * 17 + 1] = 0.0;
    bad[40] = -INFINITY;
    ck_assert_int_eq(cs_pencil_estimate(bad, 64, 0, 1e-5, NULL, &r, &err), CS_EDATA);
    ck_assert_str_eq(err.msg, "pencil: sample 40 is not finite");
    memset(bad, 0, sizeof bad);
    ck_assert_int_eq(cs_pencil_estimate(bad, n, 1, 1e-5, NULL, &r, &err), CS_EDATA);
    ck_assert_str_eq(err.msg, "pencil: the record is all zero");

    /* an error report is optional */
    ck_assert_int_eq(cs_pencil_estimate(y, 2, 1, 1e-5, NULL, &r, NULL), CS_EDATA);
    ck_assert_int_eq(cs_pencil_eval(NULL, 3, 1, y), CS_EINVAL);
    cs_pencil_result_release(&r);
    cs_pencil_result_release(NULL);
    cs_pencil_result_init(NULL);
}
END_TEST

/* Parameters out of range: each must give CS_EINVAL with a message naming it, and no result. */
static const struct bad_param {
    const char *name; /* in the message */
    int field;
    double value;
} bad_params[] = {
    {"max_order", 0, 0.0},
    {"max_order", 0, CS_PENCIL_MAX_ORDER + 1},
    {"noise_threshold", 1, 1.0},
    {"noise_threshold", 1, INFINITY},
    {"rel_threshold", 2, 1e-9},
    {"rel_threshold", 2, 1.0},
    {"pencil_fraction", 3, 0.05},
    {"pencil_fraction", 3, 0.95},
    {"pencil_fraction", 3, NAN},
    {"max_samples", 4, 15},
    {"noise_sd", 5, -1.0},
    {"noise_sd", 5, NAN},
    {"order rule", 6, 7},
    {"reduction", 7, 7},
};

START_TEST(test_bad_parameters)
{
    const struct bad_param *b = &bad_params[_i];
    cs_pencil_parameters q = cs_pencil_default_parameters();
    switch (b->field) {
    case 0: q.max_order = (size_t)b->value; break;
    case 1: q.noise_threshold = b->value; break;
    case 2: q.rel_threshold = b->value; break;
    case 3: q.pencil_fraction = b->value; break;
    case 4: q.max_samples = (size_t)b->value; break;
    case 5: q.noise_sd = b->value; break;
    case 6: q.order_rule = (cs_pencil_order_rule)b->value; break;
    default: q.reduce = (cs_pencil_reduce)b->value; break;
    }
    double y[2 * 64];
    const line l = {1000.0, 100.0, 1.0, 0.0};
    synth(y, 64, 1, 1e-5, &l, 1, 0.0, NULL);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    cs_error err;
    ck_assert_int_eq(cs_pencil_estimate(y, 64, 1, 1e-5, &q, &r, &err), CS_EINVAL);
    ck_assert_msg(strncmp(err.msg, "pencil: ", 8) == 0 && strstr(err.msg, b->name) != NULL, "%s",
                  err.msg);
    ck_assert_uint_eq(r.order, 0);
    ck_assert_ptr_null(r.singular);
}
END_TEST

/* A result can be reused: a second estimate releases the first one's arrays (checked by the
 * sanitizer build for leaks) and the content is the new one. */
START_TEST(test_reuse)
{
    const double dt = 1e-6;
    const size_t n = 300;
    const line a = {10000.0, 500.0, 1.0, 0.0};
    const line b[2] = {{-5000.0, 700.0, 1.0, 1.0}, {20000.0, 900.0, 0.5, 0.0}};
    double *y = malloc(2 * n * sizeof *y);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    ck_assert_double_nan(r.noise_floor);
    synth(y, n, 1, dt, &a, 1, 0.0, NULL);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, NULL, &r, NULL), CS_OK);
    ck_assert_uint_eq(r.order, 1);
    synth(y, n, 1, dt, b, 2, 0.0, NULL);
    ck_assert_int_eq(cs_pencil_estimate(y, n, 1, dt, NULL, &r, NULL), CS_OK);
    ck_assert_uint_eq(r.order, 2);
    ck_assert(near(r.comp[0].freq_hz, -5000.0, 1e-8, 0.0));
    double *m = malloc(2 * n * sizeof *m);
    ck_assert_int_eq(cs_pencil_eval(&r, n, 1, m), CS_OK);
    for (size_t i = 0; i < 2 * n; i++)
        ck_assert(fabs(m[i] - y[i]) < 1e-9);
    cs_pencil_result_release(&r);
    ck_assert_ptr_null(r.comp);
    ck_assert_uint_eq(r.order, 0);
    free(m);
    free(y);
}
END_TEST

/* One gate workspace for many estimates (cs_pencil_estimate_ws): every exact case is still
 * recovered to the analytic values (check_exact), the FFT plans of a length are made once and
 * reused (a second pass over the same records makes no plan), and a record of a prime number of
 * samples (its FFT length then has factors other than 2) is recovered too. */
START_TEST(test_workspace)
{
    cs_gate_workspace *ws = cs_gate_alloc();
    ck_assert_ptr_nonnull(ws);
    size_t plans = 0;
    for (int pass = 0; pass < 2; pass++) {
        for (size_t k = 0; k < N_OF(exact_cases); k++) {
            const struct exact_case *c = &exact_cases[k];
            double *y = malloc(2 * c->n * sizeof *y);
            synth(y, c->n, 1, c->dt, c->c, c->nc, 0.0, NULL);
            cs_pencil_result r;
            cs_pencil_result_init(&r);
            cs_error err;
            int st = cs_pencil_estimate_ws(ws, y, c->n, 1, c->dt, NULL, &r, &err);
            ck_assert_msg(st == CS_OK, "%s: %s", c->what, err.msg);
            check_exact(c, &r, (size_t)c->nc);
            ck_assert(r.rms_residual < 1e-10);
            cs_pencil_result_release(&r);
            free(y);
        }
        if (pass == 0)
            plans = cs_gate_plan_count(ws);
    }
    ck_assert_uint_gt(plans, 0);
    ck_assert_uint_eq(cs_gate_plan_count(ws), plans);   /* second pass: plans reused */
    /* 331 samples (prime): an FFT length of 331 or more with small factors, not a power of 2 */
    const struct exact_case prime = {"331 samples", 331, 1e-6, 2,
                                     {{12000.0, 800.0, 1.0, 0.3}, {-31000.0, 1500.0, 0.6, -1.1}}};
    double *y = malloc(2 * prime.n * sizeof *y);
    synth(y, prime.n, 1, prime.dt, prime.c, prime.nc, 0.0, NULL);
    cs_pencil_result r;
    cs_pencil_result_init(&r);
    ck_assert_int_eq(cs_pencil_estimate_ws(ws, y, prime.n, 1, prime.dt, NULL, &r, NULL), CS_OK);
    check_exact(&prime, &r, 2);
    ck_assert_uint_eq(r.n_used, prime.n);
    cs_pencil_result_release(&r);
    free(y);
    cs_gate_free(ws);
}
END_TEST

START_TEST(test_defaults)
{
    cs_pencil_parameters p = cs_pencil_default_parameters();
    ck_assert_uint_eq(p.order, 0);
    ck_assert_uint_eq(p.max_order, 8);
    ck_assert_int_eq(p.order_rule, CS_PENCIL_ORDER_NOISE);
    ck_assert(p.noise_threshold == 3.5);
    ck_assert(p.rel_threshold == 1e-6);
    ck_assert(near(p.pencil_fraction, 1.0 / 3.0, 1e-15, 0.0));
    ck_assert_uint_eq(p.max_samples, 8192);
    ck_assert_int_eq(p.reduce, CS_PENCIL_REDUCE_AVERAGE);
    ck_assert(p.noise_sd == 0.0);
}
END_TEST

static Suite *pencil_suite(void)
{
    Suite *s = suite_create("pencil");
    TCase *tc = tcase_create("exact");
    tcase_add_loop_test(tc, test_exact_auto, 0, N_OF(exact_cases));
    tcase_add_loop_test(tc, test_exact_fixed, 0, N_OF(exact_cases));
    tcase_add_test(tc, test_singular_value);
    suite_add_tcase(s, tc);

    tc = tcase_create("real");
    tcase_add_test(tc, test_real_cosine);
    tcase_add_test(tc, test_real_two_cosines);
    suite_add_tcase(s, tc);

    tc = tcase_create("reduce");
    tcase_add_test(tc, test_reduce_average);
    tcase_add_test(tc, test_reduce_alias);
    tcase_add_test(tc, test_reduce_truncate);
    suite_add_tcase(s, tc);

    tc = tcase_create("order");
    tcase_set_timeout(tc, 60);
    tcase_add_test(tc, test_order_noise_rule);
    tcase_add_test(tc, test_order_noise_only);
    suite_add_tcase(s, tc);

    tc = tcase_create("errors_calibrated");
    tcase_set_timeout(tc, 120);
    tcase_add_test(tc, test_error_calibration);
    tcase_add_test(tc, test_error_calibration_real);
    tcase_add_test(tc, test_noise_sd_given);
    suite_add_tcase(s, tc);

    tc = tcase_create("api");
    tcase_add_test(tc, test_errors);
    tcase_add_loop_test(tc, test_bad_parameters, 0, N_OF(bad_params));
    tcase_add_test(tc, test_reuse);
    tcase_add_test(tc, test_workspace);
    tcase_add_test(tc, test_defaults);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(pencil_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed == 0 ? EXIT_SUCCESS : EXIT_FAILURE;
}
