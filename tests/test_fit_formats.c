/* Fitting spectra that arrive in each loader format that can hold a spectrum (text, .npy, HDF5):
 * the same synthetic line must come out the same, within its errors, whatever the container. */
#include <check.h>
#include <hdf5.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <collshift/fit.h>
#include <collshift/io.h>
#include <collshift/model.h>
#include "testutil.h"

#define N 400
static double fx[N], fy[N];
/* truth: one Lorentzian (handbook form, area-normalised) on a constant baseline */
static const double C0 = 6.8e9, W0 = 20e6, A0 = 5e8, B0 = 3.0, SIG = 0.5;

static void make_data(void)
{
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 7);
    for (int i = 0; i < N; i++) {
        fx[i] = C0 - 200e6 + 400e6 * i / (N - 1);
        double u = fx[i] - C0, h = W0 / 2;
        fy[i] = B0 + A0 * (h / 3.14159265358979323846) / (u * u + h * h) + gsl_ran_gaussian(r, SIG);
    }
    gsl_rng_free(r);
}

static void fit_and_check(const char *path, const cs_load_options *o)
{
    cs_loaded l;
    cs_error err;
    cs_error_clear(&err);
    ck_assert_msg(cs_io_load(path, o, &l, &err) == CS_OK, "%s: %s", path, err.msg);
    ck_assert_int_eq(l.kind, CS_KIND_SPECTRUM);
    cs_spectrum *s = l.spectrum;
    ck_assert_uint_eq(s->n, N);
    cs_model *m = cs_model_alloc("lorentz", CS_BASELINE_CONST, CS_MODEL_SUM, &err);
    ck_assert_ptr_nonnull(m);
    cs_fit_parameters par = cs_fit_default_parameters();
    par.weighting = CS_WEIGHT_NOISE;
    cs_fit_result *res = NULL;
    ck_assert_int_eq(cs_fit_run(NULL, m, s->freq_hz, s->y, NULL, NULL, s->n, &par, &res, &err), CS_OK);
    /* within 5 standard errors of the truth used to make the data */
    ck_assert_msg(fabs(res->value[0] - C0) < 5 * res->err[0], "%s: center %g +- %g", path, res->value[0], res->err[0]);
    ck_assert_msg(fabs(res->value[1] - W0) < 5 * res->err[1], "%s: fwhm %g +- %g", path, res->value[1], res->err[1]);
    ck_assert_msg(fabs(res->value[2] - A0) < 5 * res->err[2], "%s: area %g +- %g", path, res->value[2], res->err[2]);
    ck_assert(res->err[0] > 0 && res->err[0] < 1e6);
    cs_fit_result_free(res);
    cs_model_free(m);
    cs_loaded_release(&l);
}

START_TEST(test_text)
{
    char buf[64];
    static char text[N * 64 + 64];
    size_t k = (size_t)snprintf(text, sizeof text, "frequency_ghz,y\n");
    for (int i = 0; i < N; i++) {
        snprintf(buf, sizeof buf, "%.15g,%.17g\n", fx[i] / 1e9, fy[i]);
        memcpy(text + k, buf, strlen(buf) + 1);
        k += strlen(buf);
    }
    fit_and_check(tu_write_text("s.csv", text), NULL);
}
END_TEST

START_TEST(test_npy)
{
    /* .npy version 1.0, '<f8', shape (N, 2): NumPy format specification (numpy.lib.format) */
    static unsigned char buf[128 + N * 16];
    char hdr[128];
    int hl = snprintf(hdr, sizeof hdr, "{'descr': '<f8', 'fortran_order': False, 'shape': (%d, 2), }", N);
    while ((10 + hl + 1) % 64)
        hdr[hl++] = ' ';
    hdr[hl++] = '\n';
    memcpy(buf, "\x93NUMPY\x01\x00", 8);
    buf[8] = (unsigned char)(hl & 0xff);
    buf[9] = (unsigned char)(hl >> 8);
    memcpy(buf + 10, hdr, (size_t)hl);
    for (int i = 0; i < N; i++) {
        memcpy(buf + 10 + hl + 16 * i, &fx[i], 8);   /* little-endian host (x86-64) */
        memcpy(buf + 10 + hl + 16 * i + 8, &fy[i], 8);
    }
    cs_load_options o;
    cs_load_options_init(&o);
    o.kind = CS_KIND_SPECTRUM;
    fit_and_check(tu_write_file("s.npy", buf, (size_t)(10 + hl + 16 * N)), &o);
}
END_TEST

START_TEST(test_hdf5)
{
    const char *p = tu_tmp_path("s.h5");
    hid_t f = H5Fcreate(p, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
    hsize_t dims[1] = {N};
    hid_t sp = H5Screate_simple(1, dims, NULL);
    hid_t dx = H5Dcreate2(f, "/freq", H5T_IEEE_F64LE, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    hid_t dy = H5Dcreate2(f, "/power", H5T_IEEE_F64LE, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    ck_assert(H5Dwrite(dx, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, fx) >= 0);
    ck_assert(H5Dwrite(dy, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, fy) >= 0);
    H5Dclose(dx);
    H5Dclose(dy);
    H5Sclose(sp);
    H5Fclose(f);
    cs_load_options o;
    cs_load_options_init(&o);
    o.x_dataset = "/freq";
    o.dataset = "/power";
    fit_and_check(p, &o);
}
END_TEST

int main(void)
{
    make_data();
    Suite *s = suite_create("fit_formats");
    TCase *t = tcase_create("formats");
    tcase_add_test(t, test_text);
    tcase_add_test(t, test_npy);
    tcase_add_test(t, test_hdf5);
    suite_add_tcase(s, t);
    SRunner *r = srunner_create(s);
    srunner_run_all(r, CK_NORMAL);
    int failed = srunner_ntests_failed(r);
    srunner_free(r);
    return failed ? 1 : 0;
}
