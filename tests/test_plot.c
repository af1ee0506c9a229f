/* Check suite for the plot module: every figure as PNG, SVG and PDF, sizes, errors, silence. */
#include <check.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <collshift/plot.h>
#include "testutil.h"

/* ---------------------------------------------------------------- synthetic figure data */

#define NS 241
static double fq[NS], yv[NS], sg[NS], c1[NS], c2[NS], tot[NS];

static void make_spectrum(void)
{
    const double f0 = 384.2304844685e12;  /* a line near 780 nm, Hz */
    for (int i = 0; i < NS; i++) {
        double d = (i - 120) * 2.5e6;     /* +- 300 MHz */
        fq[i] = f0 + d;
        double a = 1.0 / (1 + pow((d + 40e6) / 30e6, 2)), b = 0.45 / (1 + pow((d - 80e6) / 45e6, 2));
        c1[i] = 2.0e-3 * a;
        c2[i] = 2.0e-3 * b;
        tot[i] = c1[i] + c2[i];
        sg[i] = 4e-5;
        yv[i] = tot[i] + 4e-5 * sin(1.7 * i + 0.3 * i * i);
    }
}

#define NE 20000
static double te[NE], ie[NE];
static const cs_plot_gate gates[] = {{"early", 2e-6, 3e-6}, {"late", 12e-6, 8e-6}};

static void make_envelope(void)
{
    for (int i = 0; i < NE; i++) {
        te[i] = -5e-6 + i * 2e-9;         /* 500 MHz sampling, 40 us */
        double t = te[i];
        ie[i] = (t < 0 ? 0 : 3.0 * exp(-t / 4e-6)) + 1e-4 * (1.2 + sin(0.37 * i));
    }
}

#define NT 120
#define NF 128
static double ts[NT], fs[NF], psd[NT * NF];

static void make_spectrogram(void)
{
    for (int i = 0; i < NT; i++)
        ts[i] = i * 0.25e-6;
    for (int k = 0; k < NF; k++)
        fs[k] = (k - NF / 2) * 1e6;
    for (int i = 0; i < NT; i++)
        for (int k = 0; k < NF; k++) {
            double fc = -5e6 - 15e6 * exp(-ts[i] / 8e-6), w = 3e6 + 4e6 * exp(-ts[i] / 8e-6);
            psd[i * NF + k] = 1e-9 * exp(-ts[i] / 10e-6) / (1 + pow((fs[k] - fc) / w, 2)) + 1e-15;
        }
}

#define ND 7
static double dn[ND], sh[ND], she[ND], fw[ND], fwe[ND];

static void make_density(void)
{
    for (int i = 0; i < ND; i++) {
        dn[i] = (0.5 + 0.8 * i) * 1e13 * 1e6;     /* m^-3 */
        sh[i] = -2e6 - 1.1e-13 * dn[i] + 3e5 * sin(i * 2.1);
        she[i] = 4e5 + 5e4 * i;
        fw[i] = 6e6 + 2.3e-13 * dn[i] + 4e5 * cos(i * 1.3);
        fwe[i] = 5e5;
    }
}

static cs_plot_spectrum_data spectrum_data(void)
{
    static const double *comps[2] = {c1, c2};
    static const char *labels[2] = {"line A", "line B"};
    make_spectrum();
    cs_plot_spectrum_data d = {NS, fq, yv, sg, tot, 2, comps, labels, "signal", "V"};
    return d;
}

static cs_plot_envelope_data envelope_data(int log_y)
{
    make_envelope();
    cs_plot_envelope_data d = {NE, te, ie, log_y, 2, gates, "intensity", NULL};
    return d;
}

static cs_plot_spectrogram_data spectrogram_data(void)
{
    make_spectrogram();
    cs_plot_spectrogram_data d = {NT, NF, ts, fs, psd, 50, 2, gates};
    return d;
}

static const cs_plot_line theory[] = {{"Lorentz-Lorenz", -1.2e-13, 0}, {"dipole estimate", -0.8e-13, 0}};
static const cs_plot_line theory_w[] = {{"self-broadening", 2.1e-13, 6e6}};

static cs_plot_density_data shift_data(void)
{
    make_density();
    cs_plot_density_data d = {ND, dn, sh, she, NULL, NULL, 1, {NULL, -1.1e-13, -2e6}, 2, theory};
    return d;
}

static cs_plot_density_data fwhm_data(void)
{
    make_density();
    cs_plot_density_data d = {ND, dn, fw, fwe, NULL, NULL, 1, {NULL, 2.3e-13, 6e6}, 1, theory_w};
    return d;
}

/* ---------------------------------------------------------------- file checks */

enum { FIG_SPECTRUM, FIG_ENVELOPE, FIG_ENVELOPE_LOG, FIG_SPECTROGRAM, FIG_SHIFT, FIG_FWHM, FIG_N };
static const char *const fig_name[FIG_N] = {"spectrum", "envelope", "envelope_log", "spectrogram",
                                            "shift", "fwhm"};

static int render(int fig, const char *path, const cs_plot_options *o, cs_error *err)
{
    switch (fig) {
    case FIG_SPECTRUM: {
        cs_plot_spectrum_data d = spectrum_data();
        return cs_plot_spectrum(path, &d, o, err);
    }
    case FIG_ENVELOPE:
    case FIG_ENVELOPE_LOG: {
        cs_plot_envelope_data d = envelope_data(fig == FIG_ENVELOPE_LOG);
        return cs_plot_envelope(path, &d, o, err);
    }
    case FIG_SPECTROGRAM: {
        cs_plot_spectrogram_data d = spectrogram_data();
        return cs_plot_spectrogram(path, &d, o, err);
    }
    case FIG_SHIFT: {
        cs_plot_density_data d = shift_data();
        return cs_plot_shift_density(path, &d, o, err);
    }
    default: {
        cs_plot_density_data d = fwhm_data();
        return cs_plot_fwhm_density(path, &d, o, err);
    }
    }
}

static long file_size(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0 ? (long)st.st_size : -1;
}

static size_t read_head(const char *path, unsigned char *buf, size_t n)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return 0;
    size_t got = fread(buf, 1, n, f);
    fclose(f);
    return got;
}

static unsigned long be32(const unsigned char *p)
{
    return ((unsigned long)p[0] << 24) | ((unsigned long)p[1] << 16) | ((unsigned long)p[2] << 8) | p[3];
}

/* Call render with stdout and stderr sent to a file; returns the number of bytes printed. */
static long render_silently(int fig, const char *path, const cs_plot_options *o, cs_error *err,
                            int *rc)
{
    char cap[512];
    snprintf(cap, sizeof cap, "%s", tu_tmp_path("captured.txt"));
    int fd = open(cap, O_WRONLY | O_CREAT | O_TRUNC, 0600);
    ck_assert_int_ge(fd, 0);
    fflush(stdout);
    fflush(stderr);
    int so = dup(1), se = dup(2);
    dup2(fd, 1);
    dup2(fd, 2);
    *rc = render(fig, path, o, err);
    fflush(stdout);
    fflush(stderr);
    dup2(so, 1);
    dup2(se, 2);
    close(so);
    close(se);
    close(fd);
    return file_size(cap);
}

static void check_file(const char *path, cs_plot_format fmt, long want_w, long want_h)
{
    long size = file_size(path);
    ck_assert_msg(size > 2000, "%s: %ld bytes", path, size);
    unsigned char h[64] = {0};
    size_t got = read_head(path, h, sizeof h);
    ck_assert_uint_ge(got, 24);
    if (fmt == CS_PLOT_PNG) {
        ck_assert(memcmp(h, "\x89PNG\r\n\x1a\n", 8) == 0);
        ck_assert(memcmp(h + 12, "IHDR", 4) == 0);
        ck_assert_uint_eq(be32(h + 16), (unsigned long)want_w);
        ck_assert_uint_eq(be32(h + 20), (unsigned long)want_h);
    } else if (fmt == CS_PLOT_SVG) {
        ck_assert(memcmp(h, "<?xml", 5) == 0 || memcmp(h, "<svg", 4) == 0);
    } else {
        ck_assert(memcmp(h, "%PDF", 4) == 0);
    }
}

/* Each figure, each format; checked loop index = figure. */
START_TEST(test_figure_formats)
{
    static const char *const ext[] = {"png", "svg", "pdf"};
    for (int f = 0; f < 3; f++) {
        char name[64], path[512];
        snprintf(name, sizeof name, "%s.%s", fig_name[_i], ext[f]);
        snprintf(path, sizeof path, "%s", tu_tmp_path(name));
        cs_plot_options o;
        cs_plot_options_init(&o);
        o.height_cm = 6.5;
        o.dpi = 200;
        cs_error err;
        cs_error_clear(&err);
        int rc = -100;
        long printed = render_silently(_i, path, &o, &err, &rc);
        ck_assert_msg(rc == CS_OK, "%s: %s", path, err.msg);
        ck_assert_int_eq(printed, 0);
        check_file(path, (cs_plot_format)f, lround(8.5 / 2.54 * 200), lround(6.5 / 2.54 * 200));
        /* no temporary file is left beside the figure */
        char tmp[600];
        snprintf(tmp, sizeof tmp, "%s.tmp.", path);
        ck_assert_int_lt(file_size(tmp), 0);
    }
}
END_TEST

START_TEST(test_default_size)
{
    char path[512];
    snprintf(path, sizeof path, "%s", tu_tmp_path("default.PNG"));
    cs_error err;
    int rc = render(FIG_SPECTRUM, path, NULL, &err);
    ck_assert_msg(rc == CS_OK, "%s", err.msg);
    check_file(path, CS_PLOT_PNG, lround(8.5 / 2.54 * 300), lround(7.5 / 2.54 * 300));
    snprintf(path, sizeof path, "%s", tu_tmp_path("default_env.png"));
    ck_assert_int_eq(render(FIG_ENVELOPE, path, NULL, &err), CS_OK);
    check_file(path, CS_PLOT_PNG, lround(8.5 / 2.54 * 300), lround(6.0 / 2.54 * 300));
}
END_TEST

START_TEST(test_unknown_extension)
{
    static const char *const bad[] = {"fig.jpg", "fig", "fig.", "dir.png/fig"};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        char path[512];
        snprintf(path, sizeof path, "%s", tu_tmp_path(bad[i]));
        cs_error err;
        cs_error_clear(&err);
        for (int fig = 0; fig < FIG_N; fig++) {
            int rc = -100;
            long printed = render_silently(fig, path, NULL, &err, &rc);
            ck_assert_int_eq(rc, CS_EINVAL);
            ck_assert_int_eq(printed, 0);
            ck_assert_int_lt(file_size(path), 0);
        }
        ck_assert_str_ne(err.msg, "");
    }
    cs_plot_format f;
    ck_assert_int_eq(cs_plot_format_from_path("a/b.Pdf", &f, NULL), CS_OK);
    ck_assert_int_eq(f, CS_PLOT_PDF);
    ck_assert_str_eq(cs_plot_format_name(CS_PLOT_SVG), "svg");
}
END_TEST

START_TEST(test_cannot_write)
{
    char path[512];
    snprintf(path, sizeof path, "%s/no/such/folder/fig.png", tu_tmp_path(""));
    cs_error err;
    cs_error_clear(&err);
    int rc = -100;
    long printed = render_silently(FIG_SHIFT, path, NULL, &err, &rc);
    ck_assert_int_eq(rc, CS_EIO);
    ck_assert_int_eq(printed, 0);
    ck_assert_ptr_nonnull(strstr(err.msg, "cannot write"));
}
END_TEST

START_TEST(test_bad_input)
{
    char path[512];
    snprintf(path, sizeof path, "%s", tu_tmp_path("bad.png"));
    cs_error err;
    ck_assert_int_eq(cs_plot_spectrum(path, NULL, NULL, &err), CS_EINVAL);
    double x[3] = {1, 1, 2}, y[3] = {NAN, NAN, NAN};
    cs_plot_spectrum_data d = {3, x, y, NULL, NULL, 0, NULL, NULL, NULL, NULL};
    ck_assert_int_eq(cs_plot_spectrum(path, &d, NULL, &err), CS_EDATA);   /* repeated frequency */
    x[1] = 1.5;
    ck_assert_int_eq(cs_plot_spectrum(path, &d, NULL, &err), CS_EDATA);   /* no finite value */
    cs_plot_options o;
    cs_plot_options_init(&o);
    o.width_cm = 0.1;
    cs_plot_density_data dd = shift_data();
    ck_assert_int_eq(cs_plot_shift_density(path, &dd, &o, &err), CS_EINVAL);
    ck_assert_int_lt(file_size(path), 0);
    /* a spectrum without a fit: one panel */
    y[0] = 1, y[1] = 2, y[2] = 1.5;
    ck_assert_int_eq(cs_plot_spectrum(path, &d, NULL, &err), CS_OK);
    check_file(path, CS_PLOT_PNG, lround(8.5 / 2.54 * 300), lround(6.0 / 2.54 * 300));
}
END_TEST

/* Example figures for a person to look at, when CS_PLOT_EXAMPLES names a folder. */
START_TEST(test_examples)
{
    const char *dir = getenv("CS_PLOT_EXAMPLES");
    if (!dir || !*dir)
        return;
    for (int fig = 0; fig < FIG_N; fig++) {
        char path[512];
        snprintf(path, sizeof path, "%s/%s.png", dir, fig_name[fig]);
        cs_error err;
        int rc = render(fig, path, NULL, &err);
        ck_assert_msg(rc == CS_OK, "%s: %s", path, err.msg);
    }
}
END_TEST

int main(void)
{
    Suite *s = suite_create("plot");
    TCase *t = tcase_create("figures");
    tcase_set_timeout(t, 120);
    tcase_add_loop_test(t, test_figure_formats, 0, FIG_N);
    tcase_add_test(t, test_default_size);
    tcase_add_test(t, test_unknown_extension);
    tcase_add_test(t, test_cannot_write);
    tcase_add_test(t, test_bad_input);
    tcase_add_test(t, test_examples);
    suite_add_tcase(s, t);
    SRunner *r = srunner_create(s);
    srunner_run_all(r, CK_NORMAL);
    int failed = srunner_ntests_failed(r);
    srunner_free(r);
    return failed ? 1 : 0;
}
