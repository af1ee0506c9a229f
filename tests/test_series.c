/* Tests of the series module: manifest parsing, straight-line fits, a synthetic campaign. */
#include <check.h>
#include <collshift/series.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

/* ---- straight lines ----------------------------------------------------------------------- */

/* NIST StRD, linear regression dataset Norris (../shared/reference/nist-strd/Norris.dat,
 * "Certified Regression Statistics" in the file's header): y = B0 + B1 x, 36 observations. */
static const double norris_b0 = -0.262323073774029, norris_b0_sd = 0.232818234301152;
static const double norris_b1 = 1.00211681802045, norris_b1_sd = 0.429796848199937e-03;
static const double norris_resid_sd = 0.884796396144373;

START_TEST(test_norris)
{
    const char *path = tu_reference_path("nist-strd/Norris.dat");
    if (!path) {
        fprintf(stderr, "test_norris: ../shared/reference absent, skipped\n");
        return;
    }
    FILE *f = fopen(path, "r");
    if (!f) {
        fprintf(stderr, "test_norris: %s not readable, skipped\n", path);
        return;
    }
    char line[256];
    double x[64], y[64], one[64];
    size_t n = 0;
    for (int ln = 1; fgets(line, sizeof line, f); ln++) {
        if (ln < 61 || n >= 64)
            continue;
        if (sscanf(line, "%lf %lf", &y[n], &x[n]) == 2) {
            one[n] = 1.0;
            n++;
        }
    }
    fclose(f);
    ck_assert_uint_eq(n, 36);
    /* unweighted: errors from the residual scatter */
    cs_series_linear r;
    ck_assert_int_eq(cs_series_linfit(x, y, NULL, n, 0, &r, NULL), CS_OK);
    ck_assert_msg(tu_close(r.intercept, norris_b0, 1e-9), "B0 %.15g", r.intercept);
    ck_assert_msg(tu_close(r.slope, norris_b1, 1e-9), "B1 %.15g", r.slope);
    ck_assert_msg(tu_close(r.intercept_err, norris_b0_sd, 1e-9), "sd B0 %.15g", r.intercept_err);
    ck_assert_msg(tu_close(r.slope_err, norris_b1_sd, 1e-9), "sd B1 %.15g", r.slope_err);
    ck_assert_msg(tu_close(sqrt(r.redchi2), norris_resid_sd, 1e-9), "resid sd %.15g", sqrt(r.redchi2));
    ck_assert_uint_eq(r.dof, 34);
    /* equal weights with sigma = the residual SD give the same numbers through gsl_fit_wlinear */
    for (size_t i = 0; i < n; i++)
        one[i] = norris_resid_sd;
    ck_assert_int_eq(cs_series_linfit(x, y, one, n, 0, &r, NULL), CS_OK);
    ck_assert(r.weighted && !r.inflated);
    ck_assert_msg(tu_close(r.intercept, norris_b0, 1e-9), "B0 %.15g", r.intercept);
    ck_assert_msg(tu_close(r.slope, norris_b1, 1e-9), "B1 %.15g", r.slope);
    ck_assert_msg(tu_close(r.intercept_err, norris_b0_sd, 1e-9), "sd B0 %.15g", r.intercept_err);
    ck_assert_msg(tu_close(r.slope_err, norris_b1_sd, 1e-9), "sd B1 %.15g", r.slope_err);
    ck_assert_msg(tu_close(r.redchi2, 1.0, 1e-9), "chi2/dof %.15g", r.redchi2);
}
END_TEST

/* Weighted straight line against the closed-form normal equations (e.g. P. R. Bevington,
 * D. K. Robinson, "Data Reduction and Error Analysis", ch. 6): with S = sum w, Sx, Sy, Sxx, Sxy
 * and D = S Sxx - Sx^2, b = (S Sxy - Sx Sy)/D, a = (Sxx Sy - Sx Sxy)/D, var b = S/D,
 * var a = Sxx/D, cov(a, b) = -Sx/D; through the origin b = sum wxy / sum wx^2, var b = 1/sum wx^2. */
START_TEST(test_weighted)
{
    const double x[] = {1.0, 2.0, 3.5, 4.0, 5.5, 7.0, 8.0, 9.5};
    const double y[] = {2.9, 5.2, 7.9, 9.3, 11.9, 15.2, 16.8, 20.3};
    const double s[] = {0.2, 0.3, 0.2, 0.5, 0.4, 0.3, 0.6, 0.4};
    size_t n = sizeof x / sizeof x[0];
    double S = 0, Sx = 0, Sy = 0, Sxx = 0, Sxy = 0;
    for (size_t i = 0; i < n; i++) {
        double w = 1 / (s[i] * s[i]);
        S += w; Sx += w * x[i]; Sy += w * y[i]; Sxx += w * x[i] * x[i]; Sxy += w * x[i] * y[i];
    }
    double D = S * Sxx - Sx * Sx;
    double b = (S * Sxy - Sx * Sy) / D, a = (Sxx * Sy - Sx * Sxy) / D;
    double chi2 = 0;
    for (size_t i = 0; i < n; i++)
        chi2 += pow((y[i] - a - b * x[i]) / s[i], 2);
    cs_series_linear r;
    ck_assert_int_eq(cs_series_linfit(x, y, s, n, 0, &r, NULL), CS_OK);
    ck_assert(tu_close(r.slope, b, 1e-12));
    ck_assert(tu_close(r.intercept, a, 1e-12));
    ck_assert(tu_close(r.slope_err, sqrt(S / D), 1e-12));
    ck_assert(tu_close(r.intercept_err, sqrt(Sxx / D), 1e-12));
    ck_assert(tu_close(r.cov, -Sx / D, 1e-12));
    ck_assert(tu_close(r.chi2, chi2, 1e-10));
    ck_assert(tu_close(r.redchi2, chi2 / 6, 1e-10));
    /* inflation only when chi2/dof > 1, and then by sqrt(chi2/dof) */
    cs_series_linear ri;
    ck_assert_int_eq(cs_series_linfit(x, y, s, n, CS_SERIES_FIT_INFLATE, &ri, NULL), CS_OK);
    double k = r.redchi2 > 1 ? sqrt(r.redchi2) : 1.0;
    ck_assert_int_eq(ri.inflated, r.redchi2 > 1);
    ck_assert(tu_close(ri.slope_err, r.slope_err * k, 1e-12));
    double s_small[8];
    for (size_t i = 0; i < n; i++)
        s_small[i] = s[i] / 10;   /* chi2/dof x 100: surely > 1 */
    ck_assert_int_eq(cs_series_linfit(x, y, s_small, n, CS_SERIES_FIT_INFLATE, &ri, NULL), CS_OK);
    ck_assert(ri.inflated && ri.redchi2 > 1);
    ck_assert(tu_close(ri.slope_err, sqrt(S / D) / 10 * sqrt(ri.redchi2), 1e-10));
    /* through the origin */
    double Swxy = 0, Swxx = 0;
    for (size_t i = 0; i < n; i++) {
        Swxy += x[i] * y[i] / (s[i] * s[i]);
        Swxx += x[i] * x[i] / (s[i] * s[i]);
    }
    ck_assert_int_eq(cs_series_linfit(x, y, s, n, CS_SERIES_FIT_ORIGIN, &r, NULL), CS_OK);
    ck_assert(r.through_origin && r.dof == n - 1 && r.intercept == 0);
    ck_assert(tu_close(r.slope, Swxy / Swxx, 1e-12));
    ck_assert(tu_close(r.slope_err, 1 / sqrt(Swxx), 1e-12));
    /* too few points, no variation, bad sigma left out */
    ck_assert_int_eq(cs_series_linfit(x, y, s, 1, 0, &r, NULL), CS_EDATA);
    const double xc[] = {2, 2, 2};
    ck_assert_int_eq(cs_series_linfit(xc, y, s, 3, 0, &r, NULL), CS_EDATA);
    const double sb[] = {0.2, -1, NAN, 0.5, 0.4, 0.3, 0.6, 0.4};
    ck_assert_int_eq(cs_series_linfit(x, y, sb, n, 0, &r, NULL), CS_OK);
    ck_assert_uint_eq(r.n, n - 2);
}
END_TEST

/* ---- manifest ----------------------------------------------------------------------------- */

START_TEST(test_manifest_ok)
{
    const char *text =
        "# campaign A\n"
        "file, density_cm^-3, temperature, thickness_um, shot, era, reference, comment\n"
        "a.csv, 3e13, 180 degC, 250, 2, burst, 9.1 GHz, first\n"
        "\n"
        "sub/b.csv, 4e13 cm^-3,,,,tail,,\n"
        "/abs/c.csv, 5e19 m^-3\n";
    cs_series *s = NULL;
    cs_error err;
    ck_assert_int_eq(cs_series_manifest_parse(text, "m.csv", "/data/run", &s, &err), CS_OK);
    ck_assert_uint_eq(s->n, 3);
    ck_assert_str_eq(s->e[0].path, "/data/run/a.csv");
    ck_assert_str_eq(s->e[1].path, "/data/run/sub/b.csv");
    ck_assert_str_eq(s->e[2].path, "/abs/c.csv");
    ck_assert_int_eq(s->e[0].line, 3);
    ck_assert_int_eq(s->e[1].line, 5);
    ck_assert(tu_close(s->e[0].density_m3, 3e19, 1e-12));
    ck_assert(tu_close(s->e[0].temperature_K, 453.15, 1e-12));
    ck_assert(tu_close(s->e[0].thickness_m, 250e-6, 1e-12));
    ck_assert(tu_close(s->e[0].ref_hz, 9.1e9, 1e-12));
    ck_assert_int_eq(s->e[0].shot, 2);
    ck_assert_int_eq(s->e[0].era, CS_SPLIT_BURST);
    ck_assert(tu_close(s->e[1].density_m3, 4e19, 1e-12));
    ck_assert(isnan(s->e[1].temperature_K) && isnan(s->e[1].ref_hz));
    ck_assert_int_eq(s->e[1].shot, -1);
    ck_assert_int_eq(s->e[1].era, CS_SPLIT_TAIL);
    ck_assert(tu_close(s->e[2].density_m3, 5e19, 1e-12));
    ck_assert_int_eq(s->e[2].era, -1);
    cs_series_free(s);
}
END_TEST

static const struct {
    const char *text;
    int code;
    long line;
    const char *words;
} bad_manifests[] = {
    {"file,density\na.csv,3e13\n", CS_EUNIT, 2, "no unit"},
    {"file,density_cm^-3\na.csv,3e13\n# c\n\nb.csv,2e13\nc.csv,abc\n", CS_EINVAL, 6, "density"},
    {"file,density_cm^-3,era\na.csv,3e13,burst\nb.csv,3e13,middle\n", CS_EINVAL, 3, "era 'middle'"},
    {"path,density_cm^-3\na.csv,3e13\n", CS_EFORMAT, 1, "no 'file' column"},
    {"file,density_cm^-3\na.csv,3e13,7\n", CS_EFORMAT, 2, "header has 2"},
    {"file,density_cm^-3\na.csv,-3e13\n", CS_ERANGE, 2, "positive"},
    {"file,density_GHz\na.csv,3\n", CS_EUNIT, 1, "density"},
    {"file,density_cm^-3\n,3e13\n", CS_EFORMAT, 2, "file name is empty"},
    {"file,density_cm^-3,shot\na.csv,3e13,x\n", CS_EINVAL, 2, "shot 'x'"},
    {"file,density_cm^-3\n", CS_EFORMAT, -1, "lists no files"},
    {"# only a comment\n", CS_EFORMAT, -1, "no header"},
    /* RFC 4180, section 2: a quoted field ends at a quote that is not doubled; one that never
       ends on its line would hold a line break (refused: no file name holds one) */
    {"file,density_cm^-3\n\"a.csv,3e13\n", CS_EFORMAT, 2, "not closed on this line"},
    {"file,density_cm^-3\n\"a\nb.csv\",3e13\n", CS_EFORMAT, 2, "line break inside a quoted field"},
    {"file,density_cm^-3\nb.csv,1e13\n\"a\"b.csv,3e13\n", CS_EFORMAT, 3, "text after the closing quote"},
    /* RFC 4180, rule 5: a field holding a double quote must be enclosed in double quotes */
    {"file,density_cm^-3\na\"b.csv,3e13\n", CS_EFORMAT, 2, "inside an unquoted field"},
    {"\"file,density_cm^-3\na.csv,3e13\n", CS_EFORMAT, 1, "not closed"},
};

START_TEST(test_manifest_errors)
{
    cs_series *s = (cs_series *)1;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_series_manifest_parse(bad_manifests[_i].text, "m.csv", NULL, &s, &err);
    ck_assert_msg(rc == bad_manifests[_i].code, "case %d: code %d, message '%s'", _i, rc, err.msg);
    ck_assert_ptr_null(s);
    ck_assert_int_eq(err.line, bad_manifests[_i].line);
    ck_assert_str_eq(err.file, "m.csv");
    ck_assert_msg(strstr(err.msg, bad_manifests[_i].words), "case %d: '%s'", _i, err.msg);
}
END_TEST

/* RFC 4180 fields: quoted fields hold commas and doubled quotes (section 2, rules 6 and 7);
 * spaces inside quotes are part of the field (rule 4); a header cell may be quoted too. */
START_TEST(test_manifest_quoted)
{
    const char *text =
        "\"file\",\"density_cm^-3\",era\n"
        "\"a,b.csv\",3e13,tail\n"
        "\"say \"\"hi\"\".csv\" , 4e13 ,\"burst\"\r\n"
        "\" sp ace.csv \",5e13\n"
        "\"\"\"\",6e13\n"
        "plain.csv,\"7e13\"\n"
        "\"x.csv\",\"8e13\",\"\"\n";
    cs_series *s = NULL;
    cs_error err;
    cs_error_clear(&err);
    ck_assert_msg(cs_series_manifest_parse(text, "m.csv", "/d", &s, &err) == CS_OK, "%s", err.msg);
    ck_assert_uint_eq(s->n, 6);
    ck_assert_str_eq(s->e[0].file, "a,b.csv");
    ck_assert_str_eq(s->e[0].path, "/d/a,b.csv");
    ck_assert_int_eq(s->e[0].era, CS_SPLIT_TAIL);
    ck_assert_str_eq(s->e[1].file, "say \"hi\".csv");
    ck_assert_int_eq(s->e[1].era, CS_SPLIT_BURST);
    ck_assert(tu_close(s->e[1].density_m3, 4e19, 1e-12));
    ck_assert_str_eq(s->e[2].file, " sp ace.csv ");
    ck_assert_str_eq(s->e[3].file, "\"");
    ck_assert_str_eq(s->e[4].file, "plain.csv");
    ck_assert(tu_close(s->e[4].density_m3, 7e19, 1e-12));
    ck_assert_str_eq(s->e[5].file, "x.csv");
    ck_assert_int_eq(s->e[5].era, -1);   /* "" is an empty cell: not given */
    ck_assert_int_eq(s->e[2].line, 4);
    cs_series_free(s);

    /* the message of a quote that is not closed names its line and the byte offset of the quote
       in the manifest (common practice: point at where the problem starts) */
    cs_error_clear(&err);
    s = NULL;
    ck_assert_int_eq(cs_series_manifest_parse("file,density_cm^-3\nok.csv,1e13\nb.csv,\"2e13\n", "m.csv", NULL,
                                              &s, &err), CS_EFORMAT);
    ck_assert_ptr_null(s);
    ck_assert_int_eq(err.line, 3);
    ck_assert_int_eq(err.offset, 19 + 12 + 6);
    ck_assert_msg(strstr(err.msg, "field 2") && strstr(err.msg, "column 7"), "%s", err.msg);
}
END_TEST

/* Regressions never weigh a point whose error is undefined (common practice: a weighted
 * least-squares point has weight 1/sigma^2, which does not exist without sigma): it is left
 * out and counted; a fit of the two other points has dof 0 and an undefined chi2/dof. */
START_TEST(test_regress_undefined_error)
{
    cs_series *s = NULL;
    cs_error err;
    ck_assert_int_eq(cs_series_manifest_parse("file,density_cm^-3\na,1e13\nb,2e13\nc,3e13\n", "m", NULL, &s, &err),
                     CS_OK);
    for (size_t i = 0; i < 3; i++) {
        cs_series_entry *e = &s->e[i];
        e->status = CS_SERIES_OK;
        e->density_used_m3 = e->density_m3;
        for (int k = 0; k < CS_SPLIT_NERA; k++) {
            cs_series_line *l = &e->era_line[k];
            l->ok = 1;
            l->center_hz = 1e9 + 100.0 * (double)i;
            l->center_hz_err = 1.0;
            l->shift_hz = l->shift_hz_err = NAN;
            l->fwhm_hz = 1e6 + 10.0 * (double)i;
            l->fwhm_hz_err = i == 1 ? NAN : 2.0;   /* the middle point: error undefined */
            l->area = l->area_err = NAN;
        }
    }
    cs_series_regression reg[CS_SPLIT_NERA * CS_SERIES_NQ];
    ck_assert_int_eq(cs_series_regress(s, 0, reg), CS_OK);
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        const cs_series_regression *rc_ = &reg[k * CS_SERIES_NQ + CS_SERIES_Q_CENTER];
        const cs_series_regression *rw = &reg[k * CS_SERIES_NQ + CS_SERIES_Q_FWHM];
        ck_assert_uint_eq(rc_->fit.n, 3);
        ck_assert_uint_eq(rc_->left_out, 0);
        ck_assert_int_eq(rw->status, CS_OK);
        ck_assert_uint_eq(rw->fit.n, 2);
        ck_assert_uint_eq(rw->left_out, 1);
        ck_assert_uint_eq(rw->fit.dof, 0);
        ck_assert(isnan(rw->fit.redchi2));
        /* two points: the line through them, 10 Hz per 1e13 cm^-3 */
        ck_assert(tu_close(rw->fit.slope, 10.0 / 1e13, 1e-9));
    }
    cs_series_free(s);
}
END_TEST

/* Spectra whose fits end at a bound or with a singular covariance: the era lines say so. A
 * Gaussian line fitted by a pseudo-Voigt has its best eta at 0, the lower end of [0, 1] (the
 * pseudo-Voigt is eta L + (1 - eta) G; common practice); two identical Lorentzians fitted to one
 * noise-free Lorentzian share its area in any proportion (singular covariance; common practice). */
static double lorentz(double x, double c, double w, double a);

static const char *write_line(const char *name, int gauss, double floor_ripple)
{
    size_t n = 600;
    cs_spectrum *sp = cs_spectrum_alloc(n, 1);
    ck_assert_ptr_nonnull(sp);
    for (size_t i = 0; i < n; i++) {
        double x = 0.7e9 + 1e6 * (double)i, u = x - 1e9, w = 30e6;
        double sg = w / 2.3548200450309493;
        double y = gauss ? 1e7 / (sg * sqrt(2 * 3.14159265358979323846)) * exp(-u * u / (2 * sg * sg))
                         : lorentz(x, 1e9, w, 1e7);
        sp->freq_hz[i] = x;
        sp->y[i] = y + floor_ripple * (1.0 + sin(0.77 * (double)i));
        sp->sigma[i] = 0.001;
    }
    const char *path = tu_tmp_path(name);
    cs_error err;
    ck_assert_int_eq(cs_io_text_write_spectrum(path, sp, &err), CS_OK);
    cs_spectrum_free(sp);
    return path;
}

START_TEST(test_fit_status_entries)
{
    write_line("fs_gauss.csv", 1, 0.001);
    write_line("fs_single.csv", 0, 0.0);
    const char *m = tu_write_text("fs_manifest.csv", "file,density_cm^-3\nfs_gauss.csv,1e13\n");
    cs_series *s = NULL;
    cs_error err;
    ck_assert_int_eq(cs_series_manifest_load(m, &s, &err), CS_OK);
    cs_series_params p;
    cs_series_params_default(&p);
    p.model = "pvoigt";
    p.baseline = CS_BASELINE_CONST;
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_OK);
    const cs_series_line *t = &s->e[0].era_line[CS_SPLIT_TAIL];
    ck_assert(t->ok);
    ck_assert_uint_eq(t->nfits, 1);
    ck_assert_int_eq(t->fit_status, CS_FIT_CONVERGED);
    ck_assert_str_eq(t->at_bound, "1.eta:lower");
    ck_assert_uint_eq(s->e[0].era_line[CS_SPLIT_BURST].nfits, 0);   /* one component: no burst era */
    cs_series_free(s);

    m = tu_write_text("fs_manifest2.csv", "file,density_cm^-3\nfs_single.csv,1e13\nnot_there.csv,2e13\n");
    ck_assert_int_eq(cs_series_manifest_load(m, &s, &err), CS_OK);
    p.model = "lorentz+lorentz";
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_ENOCONV);
    ck_assert_int_eq(s->e[0].status, CS_SERIES_FAILED);
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        const cs_series_line *l = &s->e[0].era_line[k];
        ck_assert(!l->ok && isnan(l->center_hz));
        ck_assert_uint_eq(l->nfits, 1);
        ck_assert_int_eq(l->fit_status, CS_FIT_SINGULAR);
        ck_assert_uint_eq(s->e[1].era_line[k].nfits, 0);   /* no file: no fit */
    }
    ck_assert_msg(strstr(s->e[0].message, "singular covariance"), "%s", s->e[0].message);
    cs_series_free(s);
}
END_TEST

START_TEST(test_manifest_load_missing)
{
    cs_series *s = NULL;
    cs_error err;
    ck_assert_int_eq(cs_series_manifest_load("/nonexistent/manifest.csv", &s, &err), CS_EIO);
    ck_assert_ptr_null(s);
}
END_TEST

/* ---- a synthetic campaign ----------------------------------------------------------------- */

/* Truth: centres and FWHM linear in density N (cm^-3). */
#define REF_HZ 1.0e9
static const double slope_c[2] = {-3.0e-6, -1.0e-6};     /* burst (broad), tail (narrow); Hz cm^3 */
static const double slope_w[2] = {2.0e-6, 0.5e-6};
static const double w0[2] = {200e6, 20e6};
static const double area[2] = {5e7, 1e7};
#define NOISE 0.004
#define NSPEC 6

static double lorentz(double x, double c, double w, double a)
{
    double h = w / 2;
    return a / 3.14159265358979323846 * h / ((x - c) * (x - c) + h * h);
}

/* Write NSPEC spectra and a manifest (plus extra rows); returns the manifest's path. */
static const char *make_campaign(const char *tag, const char *extra_rows)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 12345);
    static char mtext[4096];
    size_t off = (size_t)snprintf(mtext, sizeof mtext, "file,density_cm^-3\n");
    const char *dir = NULL;
    for (int k = 0; k < NSPEC; k++) {
        double N = 1e13 * (1 + k);
        size_t n = 2001;
        cs_spectrum *sp = cs_spectrum_alloc(n, 1);
        ck_assert_ptr_nonnull(sp);
        for (size_t i = 0; i < n; i++) {
            double x = 0.5e9 + 0.5e6 * (double)i;
            double v = 0.01;
            for (int e = 0; e < 2; e++)
                v += lorentz(x, REF_HZ + slope_c[e] * N, w0[e] + slope_w[e] * N, area[e]);
            sp->freq_hz[i] = x;
            sp->y[i] = v + gsl_ran_gaussian(rng, NOISE);
            sp->sigma[i] = NOISE;
        }
        ck_assert_int_eq(cs_meta_set_si(&sp->meta, "reference", REF_HZ, CS_DIM_FREQUENCY), CS_OK);
        char name[64];
        snprintf(name, sizeof name, "%s_%d.csv", tag, k);
        const char *path = tu_tmp_path(name);
        cs_error err;
        ck_assert_int_eq(cs_io_text_write_spectrum(path, sp, &err), CS_OK);
        cs_spectrum_free(sp);
        dir = path;
        off += (size_t)snprintf(mtext + off, sizeof mtext - off, "%s,%g\n", name, N);
    }
    (void)dir;
    if (extra_rows)
        snprintf(mtext + off, sizeof mtext - off, "%s", extra_rows);
    gsl_rng_free(rng);
    char mname[64];
    snprintf(mname, sizeof mname, "%s_manifest.csv", tag);
    return tu_write_text(mname, mtext);
}

START_TEST(test_campaign)
{
    const char *mpath = make_campaign("camp", "missing.csv,7e13\n");
    cs_series *s = NULL;
    cs_error err;
    ck_assert_int_eq(cs_series_manifest_load(mpath, &s, &err), CS_OK);
    ck_assert_uint_eq(s->n, NSPEC + 1);
    cs_series_params p;
    cs_series_params_default(&p);
    int rc = cs_series_run(s, &p, &err);
    ck_assert_int_eq(rc, CS_ENOCONV);   /* the missing file */
    for (int k = 0; k < NSPEC; k++)
        ck_assert_msg(s->e[k].status == CS_SERIES_OK, "entry %d: %s", k, s->e[k].message);
    ck_assert_int_eq(s->e[NSPEC].status, CS_SERIES_FAILED);
    ck_assert_int_eq(s->e[NSPEC].error_code, CS_EIO);
    ck_assert_ptr_nonnull(strstr(s->e[NSPEC].message, "missing.csv"));
    ck_assert(!s->e[NSPEC].era_line[0].ok && !s->e[NSPEC].era_line[1].ok);
    ck_assert_int_eq(s->e[0].density_source, CS_SERIES_DENSITY_MANIFEST);
    ck_assert(tu_close(s->e[0].ref_used_hz, REF_HZ, 1e-12));
    for (int k = 0; k < CS_SPLIT_NERA; k++) {   /* one fit per spectrum behind each era */
        ck_assert_uint_eq(s->e[0].era_line[k].nfits, 1);
        ck_assert_int_eq(s->e[0].era_line[k].fit_status, CS_FIT_CONVERGED);
        ck_assert_uint_eq(s->e[NSPEC].era_line[k].nfits, 0);
    }

    cs_series_regression reg[CS_SPLIT_NERA * CS_SERIES_NQ];
    ck_assert_int_eq(cs_series_regress(s, 0, reg), CS_OK);
    for (int e = 0; e < 2; e++) {
        const cs_series_regression *rc_ = &reg[e * CS_SERIES_NQ + CS_SERIES_Q_CENTER];
        const cs_series_regression *rw = &reg[e * CS_SERIES_NQ + CS_SERIES_Q_FWHM];
        ck_assert_int_eq(rc_->status, CS_OK);
        ck_assert(rc_->relative);
        ck_assert_uint_eq(rc_->fit.n, NSPEC);
        ck_assert_msg(fabs(rc_->fit.slope - slope_c[e]) < 3 * rc_->fit.slope_err,
                      "era %d centre slope %g +- %g, truth %g", e, rc_->fit.slope, rc_->fit.slope_err, slope_c[e]);
        ck_assert_msg(fabs(rc_->fit.intercept) < 3 * rc_->fit.intercept_err, "era %d intercept %g +- %g", e,
                      rc_->fit.intercept, rc_->fit.intercept_err);
        ck_assert_msg(fabs(rw->fit.slope - slope_w[e]) < 3 * rw->fit.slope_err,
                      "era %d fwhm slope %g +- %g, truth %g", e, rw->fit.slope, rw->fit.slope_err, slope_w[e]);
        ck_assert_msg(fabs(rw->fit.intercept - w0[e]) < 3 * rw->fit.intercept_err, "era %d fwhm intercept %g", e,
                      rw->fit.intercept);
        ck_assert(rc_->fit.slope_err > 0 && rc_->fit.slope_err < 0.1 * fabs(slope_c[e]));
    }

    /* theory comparison: rows for both eras, ratio and nsigma consistent */
    cs_theory_estimates est;
    cs_theory_inputs in;
    cs_theory_inputs_init(&in);
    in.density_m3 = 3e19;
    in.thickness_m = 1e-6;
    ck_assert_int_eq(cs_theory_predict(cs_line_find("rb87-d2"), &in, &est, NULL), CS_OK);
    cs_series_compare cmp[CS_SERIES_COMPARE_MAX];
    size_t nc = cs_series_compare_theory(reg, &est, cmp);
    ck_assert_uint_eq(nc, 6);
    for (size_t i = 0; i < nc; i++) {
        ck_assert(tu_close(cmp[i].ratio * cmp[i].theory_hz_cm3, cmp[i].measured_hz_cm3, 1e-12));
        ck_assert(tu_close(cmp[i].nsigma * cmp[i].measured_hz_cm3_err,
                           cmp[i].measured_hz_cm3 - cmp[i].theory_hz_cm3, 1e-9));
    }

    /* two threads: identical numbers */
    cs_series *s2 = NULL;
    ck_assert_int_eq(cs_series_manifest_load(mpath, &s2, &err), CS_OK);
    p.threads = 2;
    ck_assert_int_eq(cs_series_run(s2, &p, &err), CS_ENOCONV);
    for (size_t i = 0; i < s->n; i++) {
        ck_assert_int_eq(s2->e[i].status, s->e[i].status);
        ck_assert_int_eq(memcmp(s2->e[i].era_line, s->e[i].era_line, sizeof s->e[i].era_line), 0);
    }
    cs_series_free(s2);
    cs_series_free(s);
}
END_TEST

/* An 'era' column keeps one era; a one-component model gives the tail era. */
START_TEST(test_campaign_era)
{
    const char *mpath = make_campaign("era", NULL);
    cs_series *s = NULL;
    cs_error err;
    ck_assert_int_eq(cs_series_manifest_load(mpath, &s, &err), CS_OK);
    s->e[0].era = CS_SPLIT_BURST;
    cs_series_params p;
    cs_series_params_default(&p);
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_OK);
    ck_assert(s->e[0].era_line[CS_SPLIT_BURST].ok && !s->e[0].era_line[CS_SPLIT_TAIL].ok);
    ck_assert(s->e[1].era_line[CS_SPLIT_BURST].ok && s->e[1].era_line[CS_SPLIT_TAIL].ok);
    ck_assert(s->e[1].era_line[CS_SPLIT_BURST].fwhm_hz > s->e[1].era_line[CS_SPLIT_TAIL].fwhm_hz);
    /* density from the file's metadata is absent and there is no manifest density: failed */
    s->e[2].density_m3 = NAN;
    p.threads = 3;
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_ENOCONV);
    ck_assert_int_eq(s->e[2].status, CS_SERIES_FAILED);
    ck_assert_ptr_nonnull(strstr(s->e[2].message, "no density"));
    /* ... or from a temperature with the element */
    s->e[2].temperature_K = 400;
    p.element = "Rb";
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_OK);
    ck_assert_int_eq(s->e[2].density_source, CS_SERIES_DENSITY_TEMPERATURE);
    ck_assert(tu_close(s->e[2].density_used_m3, cs_vapour_density("Rb", 400), 1e-12));
    cs_series_free(s);
}
END_TEST

/* Stopping and resuming: the stop callback leaves the rest pending, on_entry sees each finished
 * entry once, keep_finished analyses only the pending ones, and the result is that of one run. */
typedef struct stop_state {
    size_t seen, limit;
    size_t idx[16];
} stop_state;

static void count_entry(const cs_series_entry *e, void *ctx)
{
    stop_state *st = ctx;
    if (st->seen < 16)
        st->idx[st->seen] = e->index;
    st->seen++;
}

static int stop_after(void *ctx)
{
    const stop_state *st = ctx;
    return st->limit && st->seen >= st->limit;
}

static int stop_now(void *ctx)
{
    (void)ctx;
    return 1;
}

START_TEST(test_stop_resume)
{
    const char *mpath = make_campaign("stop", "missing.csv,7e13\n");
    cs_series *s = NULL, *ref = NULL;
    cs_error err;
    ck_assert_int_eq(cs_series_manifest_load(mpath, &s, &err), CS_OK);
    ck_assert_int_eq(cs_series_manifest_load(mpath, &ref, &err), CS_OK);
    cs_series_params p;
    cs_series_params_default(&p);
    ck_assert_int_eq(cs_series_run(ref, &p, &err), CS_ENOCONV);   /* one uninterrupted run */
    ck_assert_uint_eq(cs_series_count(ref, CS_SERIES_OK), NSPEC);
    ck_assert_uint_eq(cs_series_count(ref, CS_SERIES_FAILED), 1);
    ck_assert_uint_eq(cs_series_count(NULL, CS_SERIES_OK), 0);

    /* stop once two entries are finished (one thread: exactly two, in manifest order) */
    stop_state st = {0, 2, {0}};
    p.on_entry = count_entry;
    p.entry_ctx = &st;
    p.stop = stop_after;
    p.stop_ctx = &st;
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_ENOCONV);
    ck_assert_ptr_nonnull(strstr(err.msg, "stopped: 5 of 7 entries not analysed"));
    ck_assert_uint_eq(st.seen, 2);
    ck_assert_uint_eq(st.idx[0], 0);
    ck_assert_uint_eq(st.idx[1], 1);
    ck_assert_uint_eq(cs_series_count(s, CS_SERIES_OK), 2);
    ck_assert_uint_eq(cs_series_count(s, CS_SERIES_PENDING), 5);
    for (size_t i = 2; i < s->n; i++) {
        ck_assert(isnan(s->e[i].density_used_m3));
        ck_assert(!s->e[i].era_line[0].ok && !s->e[i].era_line[1].ok);
    }

    /* resume: the finished entries are kept, not analysed again (entry 0's file is made
       unreadable to prove it), the others are analysed; the numbers equal the single run's */
    char *path0 = s->e[0].path;
    s->e[0].path = (char *)"/nonexistent/kept.csv";
    st.seen = 0;
    st.limit = 0;
    p.keep_finished = 1;
    p.threads = 2;
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_ENOCONV);   /* the missing file */
    s->e[0].path = path0;
    ck_assert_uint_eq(st.seen, 5);
    ck_assert_uint_eq(cs_series_count(s, CS_SERIES_PENDING), 0);
    for (size_t i = 0; i < s->n; i++) {
        ck_assert_int_eq(s->e[i].status, ref->e[i].status);
        ck_assert_int_eq(memcmp(s->e[i].era_line, ref->e[i].era_line, sizeof s->e[i].era_line), 0);
        ck_assert(s->e[i].density_used_m3 == ref->e[i].density_used_m3 ||
                  (isnan(s->e[i].density_used_m3) && isnan(ref->e[i].density_used_m3)));
    }

    /* without keep_finished every entry is analysed again; a stop before the first leaves all
       of them pending, with any number of threads */
    p.keep_finished = 0;
    p.stop = stop_now;
    st.seen = 0;
    ck_assert_int_eq(cs_series_run(s, &p, &err), CS_ENOCONV);
    ck_assert_uint_eq(st.seen, 0);
    ck_assert_uint_eq(cs_series_count(s, CS_SERIES_PENDING), s->n);
    cs_series_free(ref);
    cs_series_free(s);
}
END_TEST

/* Shards: K/N syntax, every N-th entry from the K-th, and merging back into manifest order. */
START_TEST(test_shard_merge)
{
    size_t k = 0, n = 0;
    cs_error err;
    ck_assert_int_eq(cs_series_shard_parse("2/3", &k, &n, &err), CS_OK);
    ck_assert_uint_eq(k, 2);
    ck_assert_uint_eq(n, 3);
    static const char *const bad[] = {"0/3", "4/3", "3", "x/3", "1/0", "1/", "/2", "-1/3", "1/3 ", ""};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++)
        ck_assert_int_eq(cs_series_shard_parse(bad[i], &k, &n, NULL), CS_EINVAL);
    const char *text = "file,density_cm^-3\na,1e13\nb,2e13\nc,3e13\nd,4e13\ne,5e13\n";
    cs_series *part[3];
    for (size_t i = 0; i < 3; i++) {
        ck_assert_int_eq(cs_series_manifest_parse(text, "m.csv", NULL, &part[i], &err), CS_OK);
        ck_assert_int_eq(cs_series_shard(part[i], i + 1, 3, &err), CS_OK);
        ck_assert_uint_eq(part[i]->total, 5);
    }
    ck_assert_uint_eq(part[0]->n, 2);
    ck_assert_str_eq(part[0]->e[1].file, "d");
    ck_assert_uint_eq(part[2]->n, 1);
    ck_assert_str_eq(part[2]->e[0].file, "c");
    const cs_series *order[3] = {part[2], part[0], part[1]};
    cs_series *m = NULL;
    ck_assert_int_eq(cs_series_merge(order, 3, &m, &err), CS_OK);
    ck_assert_uint_eq(m->n, 5);
    for (size_t i = 0; i < 5; i++) {
        ck_assert_uint_eq(m->e[i].index, i);
        ck_assert_int_eq(m->e[i].file[0], (int)('a' + i));
    }
    cs_series_free(m);
    const cs_series *two[2] = {part[0], part[2]};
    ck_assert_int_eq(cs_series_merge(two, 2, &m, &err), CS_EDATA);
    ck_assert_ptr_null(m);
    ck_assert_ptr_nonnull(strstr(err.msg, "entries 2, 5"));
    const cs_series *dup[4] = {part[0], part[1], part[2], part[1]};
    ck_assert_int_eq(cs_series_merge(dup, 4, &m, &err), CS_EDATA);
    ck_assert_ptr_nonnull(strstr(err.msg, "two shards"));
    part[1]->total = 6;
    ck_assert_int_eq(cs_series_merge(order, 3, &m, &err), CS_EDATA);
    for (size_t i = 0; i < 3; i++)
        cs_series_free(part[i]);
}
END_TEST

static Suite *series_suite(void)
{
    Suite *s = suite_create("series");
    TCase *t = tcase_create("linear");
    tcase_add_test(t, test_norris);
    tcase_add_test(t, test_weighted);
    suite_add_tcase(s, t);
    t = tcase_create("manifest");
    tcase_add_test(t, test_manifest_ok);
    tcase_add_loop_test(t, test_manifest_errors, 0, (int)(sizeof bad_manifests / sizeof bad_manifests[0]));
    tcase_add_test(t, test_manifest_load_missing);
    tcase_add_test(t, test_manifest_quoted);
    tcase_add_test(t, test_regress_undefined_error);
    tcase_add_test(t, test_shard_merge);
    suite_add_tcase(s, t);
    t = tcase_create("campaign");
    tcase_set_timeout(t, 300);
    tcase_add_test(t, test_campaign);
    tcase_add_test(t, test_campaign_era);
    tcase_add_test(t, test_stop_resume);
    tcase_add_test(t, test_fit_status_entries);
    suite_add_tcase(s, t);
    return s;
}

int main(void)
{
    SRunner *r = srunner_create(series_suite());
    srunner_run_all(r, CK_NORMAL);
    int failed = srunner_ntests_failed(r);
    srunner_free(r);
    return failed ? 1 : 0;
}
