/* Check suite for the simulate module: true values, reproducibility, metadata, the burst peak and
 * tail decay recovered from generated records by simple independent means, spectrum noise, and
 * the files, manifest and truth table of a campaign. */
#include <check.h>
#include <collshift/gatefit.h>
#include <collshift/simulate.h>

#include <gsl/gsl_fit.h>

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "testutil.h"

#define PI_T 3.14159265358979323846264338327950288

static const double dens_cm3[] = {1e13, 3e13, 1e14, 3e14};
static double dens_m3[4];

static cs_simulate_params params(void)
{
    cs_simulate_params p = cs_simulate_default_params();
    for (size_t i = 0; i < 4; i++)
        dens_m3[i] = dens_cm3[i] * 1e6;
    p.densities_m3 = dens_m3;
    p.ndensities = 4;
    return p;
}

static char *slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    char *s = malloc((size_t)n + 1);
    ck_assert_ptr_nonnull(s);
    ck_assert_uint_eq(fread(s, 1, (size_t)n, f), (size_t)n);
    s[n] = '\0';
    fclose(f);
    if (len)
        *len = (size_t)n;
    return s;
}

/* ---------------------------------------------------------------- true values */

START_TEST(test_truth)
{
    cs_simulate_params p = params();
    cs_error err;
    ck_assert_int_eq(cs_simulate_check(&p, &err), CS_OK);
    for (size_t i = 0; i < 4; i++) {
        cs_simulate_truth t;
        cs_simulate_truth_at(&p, dens_m3[i], &t);
        /* the defaults: slopes -6e-7, 1.2e-7, -1.5e-7, 1e-8 Hz cm^3; zero-density widths */
        ck_assert(tu_close(t.burst_shift_hz, -6e-7 * dens_cm3[i], 1e-12));
        ck_assert(tu_close(t.tail_shift_hz, -1.5e-7 * dens_cm3[i], 1e-12));
        ck_assert(tu_close(t.burst_fwhm_hz, 4e6 + 1.2e-7 * dens_cm3[i], 1e-12));
        ck_assert(tu_close(t.tail_fwhm_hz, 1.1e6 + 1e-8 * dens_cm3[i], 1e-12));
        ck_assert(tu_close(t.burst_center_hz - p.reference_hz, t.burst_shift_hz, 1e-6));
        ck_assert(tu_close(t.tail_gamma_per_s, 2 * PI_T * t.tail_fwhm_hz, 1e-12));
        ck_assert(tu_close(t.burst_tau_s * t.burst_fwhm_hz, CS_GATEFIT_SECH_FWHM_TAU, 1e-12));
        ck_assert(tu_close(t.era_shift_hz, t.burst_shift_hz - t.tail_shift_hz, 1e-12));
    }
}
END_TEST

START_TEST(test_bad_params)
{
    cs_simulate_params p = params();
    cs_error err;
    p.lo_hz = p.reference_hz - 600e6;   /* the zero-density burst line at +600 MHz > 500 MHz */
    ck_assert_int_eq(cs_simulate_check(&p, &err), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(err.msg, "outside the band"));
    p = params();
    p.is_complex = 0;
    p.lo_hz = p.reference_hz + 10e6;    /* real records need lines above the LO */
    ck_assert_int_eq(cs_simulate_check(&p, &err), CS_EINVAL);
    p = params();
    p.kind = CS_SIMULATE_SPECTRUM;
    p.format = CS_SIMULATE_NPY;
    ck_assert_int_eq(cs_simulate_check(&p, &err), CS_EINVAL);
    p = params();
    p.burst_fwhm_slope_hz_m3 = -1e-12;  /* negative width at the highest density */
    ck_assert_int_eq(cs_simulate_check(&p, &err), CS_EINVAL);
    p = params();
    ck_assert_int_eq(cs_simulate_campaign("", &p, NULL, &err), CS_EINVAL);
    p.ndensities = 0;
    ck_assert_int_eq(cs_simulate_campaign(tu_tmp_path("none"), &p, NULL, &err), CS_EINVAL);
}
END_TEST

/* ---------------------------------------------------------------- records */

START_TEST(test_record_reproducible)
{
    cs_simulate_params p = params();
    cs_error err;
    cs_record *a = NULL, *b = NULL, *c = NULL, *d = NULL;
    ck_assert_int_eq(cs_simulate_record(&p, dens_m3[1], 3, &a, NULL, &err), CS_OK);
    ck_assert_int_eq(cs_simulate_record(&p, dens_m3[1], 3, &b, NULL, &err), CS_OK);
    ck_assert_int_eq(cs_simulate_record(&p, dens_m3[1], 4, &c, NULL, &err), CS_OK);
    p.seed = 2;
    ck_assert_int_eq(cs_simulate_record(&p, dens_m3[1], 3, &d, NULL, &err), CS_OK);
    size_t bytes = 2 * p.samples * sizeof(double);
    ck_assert_int_eq(memcmp(a->data, b->data, bytes), 0);
    ck_assert_int_ne(memcmp(a->data, c->data, bytes), 0);
    ck_assert_int_ne(memcmp(a->data, d->data, bytes), 0);
    char *ta, *tb;
    size_t la, lb;
    ck_assert_int_eq(cs_simulate_format_record(a, &ta, &la, &err), CS_OK);
    ck_assert_int_eq(cs_simulate_format_record(b, &tb, &lb, &err), CS_OK);
    ck_assert_uint_eq(la, lb);
    ck_assert_int_eq(memcmp(ta, tb, la), 0);
    ck_assert_ptr_nonnull(strstr(ta, "# synthetic = yes"));
    ck_assert_ptr_nonnull(strstr(ta, "\ntime_us,i,q\n"));
    free(ta);
    free(tb);
    cs_record_free(a);
    cs_record_free(b);
    cs_record_free(c);
    cs_record_free(d);
}
END_TEST

START_TEST(test_record_metadata)
{
    cs_simulate_params p = params();
    cs_error err;
    cs_record *r = NULL;
    cs_simulate_truth t;
    ck_assert_int_eq(cs_simulate_record(&p, dens_m3[2], 0, &r, &t, &err), CS_OK);
    const cs_meta_entry *e = cs_meta_find(&r->meta, "synthetic");
    ck_assert_ptr_nonnull(e);
    ck_assert(strncmp(e->text, "yes", 3) == 0);
    struct { const char *key; cs_dim dim; double want; } rows[] = {
        {"density", CS_DIM_DENSITY, dens_m3[2]},
        {"sample_rate", CS_DIM_FREQUENCY, p.sample_rate_hz},
        {"lo", CS_DIM_FREQUENCY, p.lo_hz},
        {"reference", CS_DIM_FREQUENCY, p.reference_hz},
        {"true_burst_center", CS_DIM_FREQUENCY, t.burst_center_hz},
        {"true_tail_center", CS_DIM_FREQUENCY, t.tail_center_hz},
        {"true_tail_fwhm", CS_DIM_FREQUENCY, t.tail_fwhm_hz},
        {"true_burst_tau", CS_DIM_TIME, t.burst_tau_s},
        {"true_tail_gamma", CS_DIM_RATE, t.tail_gamma_per_s},
    };
    for (size_t k = 0; k < sizeof rows / sizeof rows[0]; k++) {
        double v;
        ck_assert_msg(cs_meta_get_si(&r->meta, rows[k].key, rows[k].dim, &v, &err) == CS_OK,
                      "%s: %s", rows[k].key, err.msg);
        ck_assert_msg(tu_close(v, rows[k].want, 1e-12), "%s: %.17g vs %.17g", rows[k].key, v,
                      rows[k].want);
    }
    ck_assert(tu_close(r->dt_s, 1.0 / p.sample_rate_hz, 1e-15));
    cs_record_free(r);
}
END_TEST

/* The burst's peak time from the argmax of |z|^2, and the tail's intensity decay rate from a
 * straight-line fit of ln|z|^2 against t (gsl_fit_linear, common practice) over three 1/Gamma
 * once the burst has died away. */
START_TEST(test_record_recover)
{
    cs_simulate_params p = params();
    p.noise_sigma = 1e-3;
    p.tail_delay_s = 250e-9;   /* a tail under the burst would beat with it and move the argmax */
    cs_error err;
    for (size_t i = 0; i < 4; i++) {
        cs_record *r = NULL;
        cs_simulate_truth t;
        ck_assert_int_eq(cs_simulate_record(&p, dens_m3[i], (unsigned long)i, &r, &t, &err), CS_OK);
        size_t jmax = 0;
        double pmax = -1;
        for (size_t j = 0; j < r->n; j++) {
            double pw = r->data[2 * j] * r->data[2 * j] + r->data[2 * j + 1] * r->data[2 * j + 1];
            if (pw > pmax)
                pmax = pw, jmax = j;
        }
        ck_assert_msg(fabs((double)jmax * r->dt_s - t.burst_peak_s) <= 1.5 * r->dt_s,
                      "peak at %g s, true %g s", (double)jmax * r->dt_s, t.burst_peak_s);
        /* from where the burst has fallen to sech(10) = 9e-5 of its peak */
        double ta = fmax(t.tail_start_s, t.burst_peak_s + 10 * t.burst_tau_s);
        size_t j0 = (size_t)ceil(ta / r->dt_s);
        size_t j1 = (size_t)((ta + 3.0 / t.tail_gamma_per_s) / r->dt_s);
        ck_assert_uint_lt(j1, r->n);
        size_t m = j1 - j0;
        double *x = malloc(m * sizeof *x), *y = malloc(m * sizeof *y);
        ck_assert_ptr_nonnull(x);
        ck_assert_ptr_nonnull(y);
        for (size_t k = 0; k < m; k++) {
            size_t j = j0 + k;
            x[k] = (double)j * r->dt_s;
            y[k] = log(r->data[2 * j] * r->data[2 * j] + r->data[2 * j + 1] * r->data[2 * j + 1]);
        }
        double c0, c1, cov00, cov01, cov11, sumsq;
        ck_assert_int_eq(gsl_fit_linear(x, 1, y, 1, m, &c0, &c1, &cov00, &cov01, &cov11, &sumsq), 0);
        ck_assert_msg(tu_close(-c1, t.tail_gamma_per_s, 0.02), "decay rate %g /s, true %g /s", -c1,
                      t.tail_gamma_per_s);
        /* and the tail's intensity at its start is A_t^2 */
        ck_assert(tu_close(exp(c0 + c1 * t.tail_start_s), p.tail_amplitude * p.tail_amplitude, 0.05));
        free(x);
        free(y);
        cs_record_free(r);
    }
}
END_TEST

START_TEST(test_record_real)
{
    cs_simulate_params p = params();
    p.is_complex = 0;
    cs_error err;
    cs_record *r = NULL;
    ck_assert_int_eq(cs_simulate_record(&p, dens_m3[0], 0, &r, NULL, &err), CS_OK);
    ck_assert_int_eq(r->is_complex, 0);
    char *txt;
    size_t len;
    ck_assert_int_eq(cs_simulate_format_record(r, &txt, &len, &err), CS_OK);
    ck_assert_ptr_nonnull(strstr(txt, "\ntime_us,y\n"));
    free(txt);
    cs_record_free(r);
}
END_TEST

/* ---------------------------------------------------------------- spectra */

START_TEST(test_spectrum_noise)
{
    const cs_simulate_shape shapes[] = {CS_SIMULATE_LORENTZ, CS_SIMULATE_SECH2};
    for (size_t s = 0; s < 2; s++) {
        cs_simulate_params p = params();
        p.kind = CS_SIMULATE_SPECTRUM;
        p.spectrum_sigma = 2.5;
        p.broad_shape = shapes[s];
        p.baseline_slope_per_hz = 1e-8;
        cs_error err;
        cs_spectrum *sp = NULL;
        cs_simulate_truth t;
        ck_assert_int_eq(cs_simulate_spectrum(&p, dens_m3[3], 7, &sp, &t, &err), CS_OK);
        ck_assert_uint_eq(sp->n, p.points);
        /* the model, written out here independently: Lorentzian of peak 1 is
         * 1/(1 + (2 d / w)^2); sech^2 of FWHM w is sech^2(2 ln(1 + sqrt 2) d / w) */
        double ss = 0, sum = 0;
        for (size_t i = 0; i < sp->n; i++) {
            double nu = sp->freq_hz[i];
            double db = 2 * (nu - t.burst_center_hz) / t.burst_fwhm_hz;
            double dt = 2 * (nu - t.tail_center_hz) / t.tail_fwhm_hz;
            double pb = shapes[s] == CS_SIMULATE_SECH2 ? pow(1 / cosh(log(1 + sqrt(2.0)) * db), 2)
                                                       : 1 / (1 + db * db);
            double model = p.baseline0 + p.baseline_slope_per_hz * (nu - p.reference_hz) +
                           p.burst_height * pb + p.tail_height / (1 + dt * dt);
            double res = sp->y[i] - model;
            sum += res;
            ss += res * res;
            ck_assert(sp->sigma[i] == 2.5);
        }
        double n = (double)sp->n;
        double sd = sqrt((ss - sum * sum / n) / (n - 1));
        /* the standard error of an SD from 4096 normal values is sigma / sqrt(2 n) = 1.1 % */
        ck_assert_msg(tu_close(sd, 2.5, 0.05), "SD %g, wanted 2.5", sd);
        ck_assert(fabs(sum / n) < 5 * 2.5 / sqrt(n));
        ck_assert(tu_close(cs_spectrum_noise(sp), 2.5, 0.1));
        ck_assert_ptr_nonnull(cs_meta_find(&sp->meta, "true_burst_area"));
        cs_spectrum_free(sp);
    }
}
END_TEST

/* ---------------------------------------------------------------- campaigns */

/* Count lines of text. */
static size_t count_lines(const char *s)
{
    size_t n = 0;
    for (; *s; s++)
        n += *s == '\n';
    return n;
}

START_TEST(test_campaign_text)
{
    cs_simulate_params p = params();
    p.shots = 2;
    cs_error err;
    size_t nf = 0;
    const char *dir = tu_tmp_path("camp_a/sub");
    ck_assert_int_eq(cs_simulate_campaign(dir, &p, &nf, &err), CS_OK);
    ck_assert_uint_eq(nf, 8);
    char path[1024], name[128];
    snprintf(path, sizeof path, "%s/manifest.csv", dir);
    char *man = slurp(path, NULL);
    ck_assert_ptr_nonnull(man);
    ck_assert_uint_eq(count_lines(man), 9);
    ck_assert_ptr_nonnull(strstr(man, "synthetic_record_d03_s01.csv,3"));
    ck_assert_str_eq(strtok(man, "\n"), "file,density_cm^-3,reference_hz");
    free(man);
    snprintf(path, sizeof path, "%s/truth.csv", dir);
    char *tru = slurp(path, NULL);
    ck_assert_ptr_nonnull(tru);
    const char *head = "file,shots,density_cm^-3,burst_center_hz,burst_fwhm_hz,tail_center_hz,"
                       "tail_fwhm_hz,burst_shift_hz,tail_shift_hz,era_shift_hz,reference_hz,lo_hz,";
    ck_assert(strncmp(tru, head, strlen(head)) == 0);
    ck_assert_uint_eq(count_lines(tru), 9);
    /* truth rows: shift = slope x density */
    const char *line = strchr(tru, '\n') + 1;
    for (size_t k = 0; k < 8; k++) {
        char fname[128];
        double d, bc, bw, tc, tw, bs, ts;
        size_t shots;
        ck_assert_int_eq(sscanf(line, "%127[^,],%zu,%lf,%lf,%lf,%lf,%lf,%lf,%lf", fname, &shots, &d,
                                &bc, &bw, &tc, &tw, &bs, &ts), 9);
        ck_assert(tu_close(d, dens_cm3[k / 2], 1e-15));
        ck_assert(tu_close(bs, -6e-7 * d, 1e-12));
        ck_assert(tu_close(ts, -1.5e-7 * d, 1e-12));
        ck_assert(tu_close(tw, 1.1e6 + 1e-8 * d, 1e-12));
        /* each file loads as a record whose metadata agree with the truth row */
        snprintf(path, sizeof path, "%s/%s", dir, fname);
        cs_loaded l;
        cs_loaded_init(&l);
        ck_assert_msg(cs_io_load(path, NULL, &l, &err) == CS_OK, "%s", err.msg);
        ck_assert_int_eq(l.kind, CS_KIND_RECORD);
        ck_assert_uint_eq(l.records[0]->n, p.samples);
        ck_assert(tu_close(l.records[0]->dt_s, 1e-9, 1e-9));
        double v;
        ck_assert_int_eq(cs_meta_get_si(&l.records[0]->meta, "true_tail_center", CS_DIM_FREQUENCY,
                                        &v, &err), CS_OK);
        ck_assert(tu_close(v, tc, 1e-15));
        ck_assert_int_eq(cs_meta_get_si(&l.records[0]->meta, "density", CS_DIM_DENSITY, &v, &err),
                         CS_OK);
        ck_assert(tu_close(v, d * 1e6, 1e-15));
        cs_loaded_release(&l);
        line = strchr(line, '\n') + 1;
    }
    free(tru);
    /* never overwrite: refused before anything is written, files unchanged */
    snprintf(path, sizeof path, "%s/%s", dir, cs_simulate_file_name(&p, 0, 0, name, sizeof name));
    size_t la, lb;
    char *before = slurp(path, &la);
    p.seed = 99;
    ck_assert_int_eq(cs_simulate_campaign(dir, &p, &nf, &err), CS_EIO);
    ck_assert_ptr_nonnull(strstr(err.msg, "already exists"));
    ck_assert_uint_eq(nf, 0);
    char *after = slurp(path, &lb);
    ck_assert(la == lb && memcmp(before, after, la) == 0);
    free(after);
    /* with force, a different seed replaces them */
    p.force = 1;
    ck_assert_int_eq(cs_simulate_campaign(dir, &p, &nf, &err), CS_OK);
    after = slurp(path, &lb);
    ck_assert(la != lb || memcmp(before, after, la) != 0);
    free(after);
    /* the same seed in another folder gives identical bytes */
    p.seed = 1;
    p.force = 0;
    const char *dir2 = tu_tmp_path("camp_b");
    ck_assert_int_eq(cs_simulate_campaign(dir2, &p, &nf, &err), CS_OK);
    snprintf(path, sizeof path, "%s/%s", dir2, name);
    after = slurp(path, &lb);
    ck_assert(la == lb && memcmp(before, after, la) == 0);
    free(after);
    free(before);
}
END_TEST

START_TEST(test_campaign_npy_and_spectra)
{
    cs_simulate_params p = params();
    p.shots = 3;
    p.format = CS_SIMULATE_NPY;
    cs_error err;
    size_t nf = 0;
    const char *dir = tu_tmp_path("camp_npy");
    ck_assert_int_eq(cs_simulate_campaign(dir, &p, &nf, &err), CS_OK);
    ck_assert_uint_eq(nf, 4);
    char path[1024], name[128];
    snprintf(path, sizeof path, "%s/%s", dir, cs_simulate_file_name(&p, 2, SIZE_MAX, name, sizeof name));
    ck_assert_str_eq(name, "synthetic_record_d02.npy");
    cs_load_options o;
    cs_load_options_init(&o);
    o.sample_rate_hz = p.sample_rate_hz;
    cs_loaded l;
    cs_loaded_init(&l);
    ck_assert_msg(cs_io_load(path, &o, &l, &err) == CS_OK, "%s", err.msg);
    ck_assert_uint_eq(l.nrecords, 3);
    ck_assert_int_eq(l.records[1]->is_complex, 1);
    /* shot 1 is stream 2 * 3 + 1 */
    cs_record *r = NULL;
    ck_assert_int_eq(cs_simulate_record(&p, dens_m3[2], 7, &r, NULL, &err), CS_OK);
    ck_assert_int_eq(memcmp(r->data, l.records[1]->data, 2 * r->n * sizeof(double)), 0);
    cs_record_free(r);
    cs_loaded_release(&l);

    p = params();
    p.kind = CS_SIMULATE_SPECTRUM;
    dir = tu_tmp_path("camp_spec");
    ck_assert_int_eq(cs_simulate_campaign(dir, &p, &nf, &err), CS_OK);
    ck_assert_uint_eq(nf, 4);
    snprintf(path, sizeof path, "%s/%s", dir, cs_simulate_file_name(&p, 3, SIZE_MAX, name, sizeof name));
    ck_assert_str_eq(name, "synthetic_spectrum_d03.csv");
    cs_loaded_init(&l);
    ck_assert_msg(cs_io_load(path, NULL, &l, &err) == CS_OK, "%s", err.msg);
    ck_assert_int_eq(l.kind, CS_KIND_SPECTRUM);
    ck_assert_ptr_nonnull(l.spectrum->sigma);
    ck_assert_ptr_nonnull(cs_meta_find(&l.spectrum->meta, "synthetic"));
    cs_loaded_release(&l);
}
END_TEST

static Suite *simulate_suite(void)
{
    Suite *su = suite_create("simulate");
    TCase *tc = tcase_create("truth");
    tcase_add_test(tc, test_truth);
    tcase_add_test(tc, test_bad_params);
    suite_add_tcase(su, tc);
    tc = tcase_create("records");
    tcase_add_test(tc, test_record_reproducible);
    tcase_add_test(tc, test_record_metadata);
    tcase_add_test(tc, test_record_recover);
    tcase_add_test(tc, test_record_real);
    suite_add_tcase(su, tc);
    tc = tcase_create("spectra");
    tcase_add_test(tc, test_spectrum_noise);
    suite_add_tcase(su, tc);
    tc = tcase_create("campaign");
    tcase_set_timeout(tc, 60);
    tcase_add_test(tc, test_campaign_text);
    tcase_add_test(tc, test_campaign_npy_and_spectra);
    suite_add_tcase(su, tc);
    return su;
}

int main(void)
{
    SRunner *sr = srunner_create(simulate_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
