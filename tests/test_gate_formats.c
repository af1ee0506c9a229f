/* `collshift gate` on an HDF5 record (the format the shell tests cannot write): a complex tone in
 * an h5py-style compound dataset with a sample_rate attribute must come out at its frequency. */
#include <check.h>
#include <hdf5.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

#define N 4096
typedef struct { double r, i; } cplx;

START_TEST(test_hdf5_record_through_cli)
{
    const char *bin = getenv("CS_BIN");
    if (!bin) {
        printf("skipped: CS_BIN not set (run through ctest)\n");
        return;
    }
    static cplx z[N];
    const double rate = 100e6, f0 = 12.5e6;   /* a tone exactly on a bin of the 4096-point gate */
    for (int k = 0; k < N; k++) {
        z[k].r = cos(2 * 3.14159265358979323846 * f0 * k / rate);
        z[k].i = sin(2 * 3.14159265358979323846 * f0 * k / rate);
    }
    const char *p = tu_tmp_path("shot.h5");
    hid_t f = H5Fcreate(p, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
    hid_t ct = H5Tcreate(H5T_COMPOUND, sizeof(cplx));
    H5Tinsert(ct, "r", HOFFSET(cplx, r), H5T_NATIVE_DOUBLE);
    H5Tinsert(ct, "i", HOFFSET(cplx, i), H5T_NATIVE_DOUBLE);
    hsize_t dims[1] = {N};
    hid_t sp = H5Screate_simple(1, dims, NULL);
    hid_t d = H5Dcreate2(f, "/ch1", ct, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    ck_assert(H5Dwrite(d, ct, H5S_ALL, H5S_ALL, H5P_DEFAULT, z) >= 0);
    hid_t as = H5Screate(H5S_SCALAR);
    hid_t a = H5Acreate2(d, "sample_rate", H5T_NATIVE_DOUBLE, as, H5P_DEFAULT, H5P_DEFAULT);
    H5Awrite(a, H5T_NATIVE_DOUBLE, &rate);
    H5Aclose(a);
    H5Sclose(as);
    H5Dclose(d);
    H5Sclose(sp);
    H5Tclose(ct);
    H5Fclose(f);

    const char *json = tu_tmp_path("g.json");
    char cmd[2048];
    snprintf(cmd, sizeof cmd, "'%s' gate '%s' --dataset /ch1 --gate 'all=0s:40.96us:rect' --pad 1 --json '%s' --quiet",
             bin, p, json);
    ck_assert_int_eq(system(cmd), 0);
    FILE *jf = fopen(json, "r");
    ck_assert_ptr_nonnull(jf);
    static char text[1 << 16];
    size_t len = fread(text, 1, sizeof text - 1, jf);
    fclose(jf);
    text[len] = '\0';
    const char *pk = strstr(text, "\"peak_hz\":");
    ck_assert_ptr_nonnull(pk);
    double peak = strtod(pk + 10, NULL);
    /* a tone on a bin peaks exactly there (DFT of a complex exponential: common practice) */
    ck_assert_msg(fabs(peak - f0) < 1.0, "peak at %.17g Hz, tone at %.17g Hz", peak, f0);
    ck_assert_ptr_nonnull(strstr(text, "\"samples\": 4096"));
}
END_TEST

int main(void)
{
    Suite *s = suite_create("gate_formats");
    TCase *t = tcase_create("hdf5");
    tcase_set_timeout(t, 60);
    tcase_add_test(t, test_hdf5_record_through_cli);
    suite_add_tcase(s, t);
    SRunner *r = srunner_create(s);
    srunner_run_all(r, CK_NORMAL);
    int failed = srunner_ntests_failed(r);
    srunner_free(r);
    return failed ? 1 : 0;
}
