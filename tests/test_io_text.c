/* Check suite for the delimited-text loader and writers (src/io_text.c and src/io_text_*.c). */
/*
 * Inputs are written by each test (tu_write_text) so that the bytes under test sit next to the
 * expectations; one fixture in tests/data/text/ checks the loader on a file as it lies on disk.
 * Facts used, with their sources:
 *   - c = 299 792 458 m/s exactly (SI 2019 definition of the metre; CODATA 2018), so a vacuum
 *     wavelength of 500 nm is nu = c / 500 nm = 599 584 916 000 000 Hz and a wavenumber of
 *     10 000 cm^-1 (1e6 m^-1) is nu = c * 1e6 m^-1 = 299 792 458 000 000 Hz (both exact decimals);
 *   - SI prefixes: 1 MHz = 1e6 Hz, 1 GHz = 1e9 Hz, 1 us = 1e-6 s, 1 ns = 1e-9 s; 1 cm^-3 = 1e6 m^-3
 *     (definition of the centimetre); 1 angstrom = 1e-10 m (SI Brochure, 9th ed., Table 8);
 *   - the refractive index of standard air by B. Edlen, Metrologia 2, 71 (1966), in the form
 *     quoted in include/collshift/units.h: (n - 1) 1e8 = 8342.13 + 2406030/(130 - s^2) +
 *     15997/(38.9 - s^2), s = 1/lambda_vac in um^-1 (the test evaluates it itself);
 *   - for a density per unit wavelength, |d lambda / d nu| = lambda^2 / c (differentiate
 *     lambda = c / nu); in nm per Hz that is lambda_m^2 / c * 1e9;
 *   - "%.17g" prints every double so that strtod reads back the same double: 17 significant
 *     digits suffice for IEEE 754 binary64 (C11 5.2.4.2.2, DBL_DECIMAL_DIG = 17).
 */
#include <collshift/io.h>

#include <check.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

#define C_LIGHT 299792458.0 /* m/s, exact (SI 2019, CODATA 2018) */

/* ---------------------------------------------------------------- helpers */

static int load(const char *text, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    const char *p = tu_write_text("in.csv", text);
    cs_loaded_init(out);
    cs_error_clear(err);
    return cs_io_text_load(p, o, out, err);
}

/* Load text that must give a spectrum of n points. */
static const cs_spectrum *load_spectrum(const char *text, const cs_load_options *o, size_t n,
                                        cs_loaded *out)
{
    cs_error err;
    int rc = load(text, o, out, &err);
    ck_assert_msg(rc == CS_OK, "load failed (%d): line %ld: %s", rc, err.line, err.msg);
    ck_assert_int_eq(out->kind, CS_KIND_SPECTRUM);
    ck_assert_ptr_nonnull(out->spectrum);
    ck_assert_uint_eq(out->spectrum->n, n);
    return out->spectrum;
}

static const cs_record *load_record(const char *text, const cs_load_options *o, size_t n,
                                    cs_loaded *out)
{
    cs_error err;
    int rc = load(text, o, out, &err);
    ck_assert_msg(rc == CS_OK, "load failed (%d): line %ld: %s", rc, err.line, err.msg);
    ck_assert_int_eq(out->kind, CS_KIND_RECORD);
    ck_assert_uint_eq(out->nrecords, 1);
    ck_assert_uint_eq(out->records[0]->n, n);
    return out->records[0];
}

/* ---------------------------------------------------------------- delimiters */

static const struct delim_case {
    const char *what, *text;
    char force;
} delim_cases[] = {
    {"comma", "1,10\n2,20\n3,30\n", 0},
    {"comma with blanks", " 1 , 10\n2 ,20 \n3,  30\n", 0},
    {"comma, trailing delimiter", "1,10,\n2,20,\n3,30,\n", 0},
    {"tab", "1\t10\n2\t20\n3\t30\n", 0},
    {"semicolon", "1;10\n2;20\n3;30\n", 0},
    {"blanks", "1 10\n  2     20\n3\t \t30   \n", 0},
    {"forced '|'", "1|10\n2|20\n3|30\n", '|'},
    {"forced blanks", "1 10\n2 20\n3 30\n", ' '},
    {"quoted numbers", "\"1\",\"10\"\n\"2\",\"20\"\n\"3\",\"30\"\n", 0},
};

START_TEST(test_delimiters)
{
    const struct delim_case *t = &delim_cases[_i];
    cs_load_options o;
    cs_load_options_init(&o);
    o.delimiter = t->force;
    cs_loaded L;
    const cs_spectrum *s = load_spectrum(t->text, &o, 3, &L);
    for (size_t i = 0; i < 3; i++) {
        ck_assert_msg(s->freq_hz[i] == (double)(i + 1), "%s: x[%zu] = %g", t->what, i,
                      s->freq_hz[i]);
        ck_assert_msg(s->y[i] == 10.0 * (double)(i + 1), "%s: y[%zu] = %g", t->what, i, s->y[i]);
    }
    ck_assert_ptr_null(s->sigma);
    ck_assert_int_eq(s->x_unit_assumed, 1);
    ck_assert_str_eq(s->x_unit, "Hz");
    ck_assert_ptr_nonnull(strstr(L.notes, "no axis unit given: Hz assumed"));
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- lines: comments, CRLF, BOM */

START_TEST(test_lines)
{
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("\xEF\xBB\xBF# title line\r\n\r\nfrequency_hz,y\r\n"
                                         "# between header and data\r\n1,10\r\n\r\n   \t\r\n"
                                         "2,20\r\n   # indented comment\r\n3,30",
                                         NULL, 3, &L);
    ck_assert(s->freq_hz[0] == 1 && s->freq_hz[1] == 2 && s->freq_hz[2] == 3);
    ck_assert(s->y[0] == 10 && s->y[1] == 20 && s->y[2] == 30);
    ck_assert_int_eq(s->x_unit_assumed, 0);
    ck_assert_str_eq(s->x_unit, "Hz");
    ck_assert_str_eq(s->y_name, "y");
    ck_assert_ptr_nonnull(s->source);
    ck_assert_ptr_nonnull(strstr(s->source, "in.csv"));
    ck_assert_int_eq(L.format, CS_FORMAT_TEXT);
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- header and columns */

START_TEST(test_columns_by_name)
{
    static const char text[] = "index,frequency_mhz,counts,sigma\n"
                               "0,1,100,10\n1,2,200,20\n2,3,300,30\n";
    cs_load_options o;
    cs_load_options_init(&o);
    o.x_col = "frequency"; /* matches frequency_mhz without its unit */
    o.y_col = "COUNTS";    /* names are case-insensitive */
    cs_loaded L;
    const cs_spectrum *s = load_spectrum(text, &o, 3, &L);
    ck_assert(s->freq_hz[0] == 1e6 && s->freq_hz[2] == 3e6); /* 1 MHz = 1e6 Hz */
    ck_assert(s->y[1] == 200);
    ck_assert_ptr_nonnull(s->sigma); /* found by its name */
    ck_assert(s->sigma[2] == 30);
    ck_assert_str_eq(s->y_name, "counts");
    ck_assert_str_eq(s->x_unit, "MHz");
    cs_loaded_release(&L);

    o.x_col = "frequency_MHZ"; /* the full name works too */
    s = load_spectrum(text, &o, 3, &L);
    ck_assert(s->freq_hz[1] == 2e6);
    cs_loaded_release(&L);
}
END_TEST

/* Data rows after the first one are read straight from the read buffer when they are plain
 * (io_text.c, fast_line); these rows test its edges, with the values as written in the text:
 * blanks and tabs around fields, CRLF, unused columns (empty, or holding words), and comment and
 * blank lines between rows while the first column is unused (they must stay comments and blank
 * lines, not become rows). */
START_TEST(test_rows_plain_and_not)
{
    static const struct {
        const char *what, *text, *x_col, *y_col;
    } cases[] = {
        {"comments and blank lines, first column unused",
         "name,x,y\na,1,10\nb,2,20\n#c,3,30\n\n  \t\n  # d,3,30\nd,4,40\n", "2", "3"},
        {"blanks, unused middle column, CRLF",
         "f n y\r\n1 x 10\r\n2\ty\t20 \r\n  3 z 30\t\r\n4 w 40", "1", "3"},
        {"commas with blanks, empty unused field",
         "f,n,y\r\n1, u ,10\r\n2 ,,20\r\n3,v, 30 \r\n4,w,40\n", "1", "3"},
        {"tabs with blanks", "1\t 10\n 2 \t20\n\t3\t30 \n4\t40\n", "1", "2"},
    };
    static const double x[] = {1, 2, 4}, x4[] = {1, 2, 3, 4};
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        cs_load_options o;
        cs_load_options_init(&o);
        o.x_col = cases[k].x_col;
        o.y_col = cases[k].y_col;
        size_t n = k == 0 ? 3 : 4;
        const double *want = k == 0 ? x : x4;
        cs_loaded L;
        const cs_spectrum *s = load_spectrum(cases[k].text, &o, n, &L);
        for (size_t i = 0; i < n; i++)
            ck_assert_msg(s->freq_hz[i] == want[i] && s->y[i] == 10 * want[i],
                          "%s: row %zu is (%g, %g)", cases[k].what, i, s->freq_hz[i], s->y[i]);
        cs_loaded_release(&L);
    }
}
END_TEST

START_TEST(test_columns_by_index)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.x_col = "3";
    o.y_col = "1";
    o.sigma_col = "2";
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("5 0.5 10\n6 0.6 20\n7 0.7 30\n", &o, 3, &L);
    ck_assert(s->freq_hz[0] == 10 && s->freq_hz[2] == 30);
    ck_assert(s->y[0] == 5 && s->y[2] == 7);
    ck_assert(s->sigma[0] == 0.5 && s->sigma[2] == 0.7);
    ck_assert_str_eq(s->y_name, "");
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_header_quoted_and_unused)
{
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("\"Frequency (GHz)\",\"signal\",\"extra\"\n"
                                         "9.1,1,7\n9.2,2,7\n9.3,3,7\n", NULL, 3, &L);
    ck_assert(tu_close(s->freq_hz[0], 9.1e9, 1e-15)); /* 1 GHz = 1e9 Hz */
    ck_assert_str_eq(s->y_name, "signal");
    ck_assert_str_eq(s->x_unit, "GHz");
    ck_assert_ptr_nonnull(strstr(L.notes, "1 other column not used"));
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- units */

START_TEST(test_unit_mhz)
{
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("frequency_mhz,y\n1.5,1\n2.5,2\n3.5,3\n", NULL, 3, &L);
    ck_assert(s->freq_hz[0] == 1.5e6 && s->freq_hz[1] == 2.5e6 && s->freq_hz[2] == 3.5e6);
    ck_assert_int_eq(s->conv.reversed, 0);
    ck_assert_ptr_nonnull(strstr(L.notes, "axis in MHz converted to Hz"));
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_unit_nm_reversed)
{
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("wavelength_nm,y\n500,1\n600,2\n700,3\n", NULL, 3, &L);
    /* c / lambda, c exact (SI 2019); ascending frequency = descending wavelength */
    ck_assert(tu_close(s->freq_hz[0], C_LIGHT / 700e-9, 1e-15));
    ck_assert(tu_close(s->freq_hz[1], C_LIGHT / 600e-9, 1e-15));
    ck_assert(tu_close(s->freq_hz[2], 599584916000000.0, 1e-15)); /* c / 500 nm */
    ck_assert(s->y[0] == 3 && s->y[1] == 2 && s->y[2] == 1);       /* reversed with the axis */
    ck_assert_int_eq(s->conv.reversed, 1);
    ck_assert_int_eq(s->conv.jacobian_applied, 0);
    ck_assert_str_eq(s->x_unit, "nm");
    ck_assert_ptr_nonnull(strstr(L.notes, "vacuum"));
    ck_assert_ptr_nonnull(strstr(L.notes, "reversed"));
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_unit_nm_with_sigma_reversed)
{
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("wavelength [nm]\ty\terr\n500\t1\t0.1\n600\t2\t0.2\n"
                                         "700\t3\t0.3\n", NULL, 3, &L);
    ck_assert(s->sigma[0] == 0.3 && s->sigma[2] == 0.1);
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_unit_angstrom)
{
    cs_loaded L;
    /* 5000 angstrom = 500 nm (1 A = 1e-10 m) */
    const cs_spectrum *s = load_spectrum("wavelength_\xC3\x85;y\n5000;1\n5001;1\n5002;1\n", NULL, 3,
                                         &L);
    ck_assert(tu_close(s->freq_hz[2], 599584916000000.0, 1e-15));
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_unit_wavenumber)
{
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("wavenumber_cm^-1 y\n10000 1\n10001 2\n10002 3\n", NULL,
                                         3, &L);
    /* nu = c * 1e6 m^-1, exact decimal (c exact, SI 2019) */
    ck_assert(tu_close(s->freq_hz[0], 299792458000000.0, 1e-15));
    ck_assert_int_eq(s->conv.reversed, 0);
    ck_assert_str_eq(s->x_unit, "cm^-1");
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_unit_time_us)
{
    cs_loaded L;
    const cs_record *r = load_record("time_us,y\n-1,5\n-0.98,6\n-0.96,7\n-0.94,8\n", NULL, 4, &L);
    ck_assert(tu_close(r->t0_s, -1e-6, 1e-15)); /* 1 us = 1e-6 s */
    ck_assert(tu_close(r->dt_s, 2e-8, 1e-9));
    ck_assert_int_eq(r->is_complex, 0);
    ck_assert(r->data[0] == 5 && r->data[3] == 8);
    ck_assert_str_eq(r->t_unit, "us");
    cs_loaded_release(&L);
}
END_TEST

/* Header suffixes of every spectral and time unit the interface names: one value each, with
 * its SI value (SI prefixes; 1 rad/s = 1/(2 pi) Hz; c exact, SI 2019). */
static const struct unit_case {
    const char *header;
    double value, si; /* a value in the unit, and the expected Hz or s */
} unit_cases[] = {
    {"frequency_hz", 5.0, 5.0},
    {"frequency_khz", 5.0, 5e3},
    {"frequency_MHz", 5.0, 5e6},
    {"frequency_ghz", 5.0, 5e9},
    {"frequency_THz", 5.0, 5e12},
    {"omega_rad/s", 6.283185307179586, 1.0},
    {"wavenumber_cm-1", 1.0, 29979245800.0},
    {"wavelength_um", 0.5, 599584916000000.0},
    {"wavelength_nm", 500.0, 599584916000000.0},
    {"wavelength [A]", 5000.0, 599584916000000.0},
    {"time_s", 2.0, 2.0},
    {"time_ms", 2.0, 2e-3},
    {"time_us", 2.0, 2e-6},
    {"time_ns", 2.0, 2e-9},
    {"time_ps", 2.0, 2e-12},
};

START_TEST(test_unit_table)
{
    const struct unit_case *t = &unit_cases[_i];
    char text[256];
    /* the value of interest is the first of two rows: x0 = value, x1 = 2 value */
    snprintf(text, sizeof text, "%s,y\n%.17g,1\n%.17g,2\n", t->header, t->value, 2 * t->value);
    cs_load_options o;
    cs_load_options_init(&o);
    o.min_points = 2;
    cs_loaded L;
    cs_error err;
    int rc = load(text, &o, &L, &err);
    ck_assert_msg(rc == CS_OK, "%s: %s", t->header, err.msg);
    if (L.kind == CS_KIND_RECORD) {
        ck_assert_msg(tu_close(L.records[0]->t0_s, t->si, 1e-15), "%s: t0 %g", t->header,
                      L.records[0]->t0_s);
        ck_assert_msg(tu_close(L.records[0]->dt_s, t->si, 1e-15), "%s: dt", t->header);
    } else {
        const cs_spectrum *s = L.spectrum;
        /* a wavelength axis is reversed: its first row comes last */
        double got = s->conv.reversed ? s->freq_hz[1] : s->freq_hz[0];
        ck_assert_msg(tu_close(got, t->si, 1e-15), "%s: %.17g Hz", t->header, got);
        ck_assert_int_eq(s->x_unit_assumed, 0);
    }
    ck_assert_msg((L.kind == CS_KIND_RECORD) == (strncmp(t->header, "time", 4) == 0), "%s: kind",
                  t->header);
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_unit_option_wins)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.x_unit = "GHz";
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("frequency_mhz,y\n1,1\n2,2\n3,3\n", &o, 3, &L);
    ck_assert(s->freq_hz[0] == 1e9);
    ck_assert_str_eq(s->x_unit, "GHz");
    ck_assert_ptr_nonnull(strstr(L.notes, "overrides"));
    cs_loaded_release(&L);

    /* the same unit spelt twice: no note */
    o.x_unit = "MHz";
    s = load_spectrum("frequency_mhz,y\n1,1\n2,2\n3,3\n", &o, 3, &L);
    ck_assert(s->freq_hz[0] == 1e6);
    ck_assert_ptr_null(strstr(L.notes, "overrides"));
    cs_loaded_release(&L);

    /* the option alone gives the unit (and the kind) of a file without header */
    o.x_unit = "nm";
    s = load_spectrum("500 1\n600 2\n700 3\n", &o, 3, &L);
    ck_assert(tu_close(s->freq_hz[2], 599584916000000.0, 1e-15));
    ck_assert_int_eq(s->x_unit_assumed, 0);
    cs_loaded_release(&L);

    cs_load_options_init(&o);
    o.t_unit = "ns";
    const cs_record *r = load_record("0 1\n1 2\n2 3\n", &o, 3, &L);
    ck_assert(tu_close(r->dt_s, 1e-9, 1e-12));
    ck_assert_str_eq(r->t_unit, "ns");
    cs_loaded_release(&L);
}
END_TEST

/* Edlen (1966) n - 1 of standard air at vacuum wavenumber s (um^-1), as quoted in units.h. */
static double edlen_nm1(double s)
{
    double s2 = s * s;
    return 1e-8 * (8342.13 + 2406030.0 / (130.0 - s2) + 15997.0 / (38.9 - s2));
}

START_TEST(test_unit_air)
{
    const char text[] = "wavelength_nm,y\n499.9,1\n500,2\n500.1,3\n";
    cs_load_options o;
    cs_load_options_init(&o);
    cs_loaded Lv, La;
    const cs_spectrum *vac = load_spectrum(text, &o, 3, &Lv);
    o.air = 1;
    const cs_spectrum *air = load_spectrum(text, &o, 3, &La);
    /* lambda_vac = n lambda_air, so nu_air / nu_vac = 1 / n; at 500 nm, s = 2 um^-1 (the 3e-4
     * difference between air and vacuum wavelength moves n by ~1e-9, below the tolerance) */
    double n = 1.0 + edlen_nm1(2.0);
    ck_assert(tu_close(air->freq_hz[1] / vac->freq_hz[1], 1.0 / n, 1e-8));
    ck_assert(n > 1.000278 && n < 1.000281); /* sanity: n - 1 = 2.79e-4 in the visible */
    ck_assert_ptr_nonnull(strstr(La.notes, "standard air"));
    ck_assert_ptr_null(strstr(Lv.notes, "standard air"));
    ck_assert_int_eq(air->conv.air, 1);
    cs_loaded_release(&Lv);
    cs_loaded_release(&La);
}
END_TEST

START_TEST(test_unit_jacobian)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.y_is_density = 1;
    cs_loaded L;
    const cs_spectrum *s = load_spectrum("wavelength_nm,y,sigma\n500,1,0.5\n600,1,0.5\n700,1,0.5\n",
                                         &o, 3, &L);
    /* per nm -> per Hz: times |d lambda/d nu| = lambda^2 / c, in nm/Hz = lambda_m^2 / c * 1e9 */
    double j500 = 500e-9 * 500e-9 / C_LIGHT * 1e9, j700 = 700e-9 * 700e-9 / C_LIGHT * 1e9;
    ck_assert(tu_close(s->y[2], j500, 1e-12));
    ck_assert(tu_close(s->y[0], j700, 1e-12));
    ck_assert(tu_close(s->sigma[2], 0.5 * j500, 1e-12));
    ck_assert_int_eq(s->conv.jacobian_applied, 1);
    ck_assert_int_eq(s->conv.y_is_density, 1);
    ck_assert_ptr_nonnull(strstr(L.notes, "Jacobian"));
    cs_loaded_release(&L);

    o.y_is_density = 0;
    s = load_spectrum("wavelength_nm,y\n500,1\n600,1\n700,1\n", &o, 3, &L);
    ck_assert(s->y[0] == 1.0);
    ck_assert_ptr_null(strstr(L.notes, "Jacobian"));
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- metadata */

START_TEST(test_metadata)
{
    static const char text[] = "# density = 3.2e13 cm^-3\n"
                               "# reference = 9.1 GHz\n"
                               "# a plain comment, no equals sign\n"
                               "frequency_hz,y\n"
                               "# t0 = -2 us\n"
                               "1,1\n"
                               "# shot = 7\n"
                               "2,2\n"
                               "# note = cell B, 2nd fill\n"
                               "3,3\n"
                               "# fit: y = a x + b\n";
    cs_loaded L;
    const cs_spectrum *s = load_spectrum(text, NULL, 3, &L);
    cs_error err;
    double v;
    ck_assert_int_eq(cs_meta_get_si(&s->meta, "density", CS_DIM_DENSITY, &v, &err), CS_OK);
    ck_assert(tu_close(v, 3.2e19, 1e-15)); /* 1 cm^-3 = 1e6 m^-3 */
    ck_assert_int_eq(cs_meta_get_si(&s->meta, "reference", CS_DIM_FREQUENCY, &v, &err), CS_OK);
    ck_assert(tu_close(v, 9.1e9, 1e-15));
    ck_assert_int_eq(cs_meta_get_si(&s->meta, "t0", CS_DIM_TIME, &v, &err), CS_OK);
    ck_assert(tu_close(v, -2e-6, 1e-15));
    const cs_meta_entry *e = cs_meta_find(&s->meta, "shot");
    ck_assert_ptr_nonnull(e);
    ck_assert(e->has_number && e->value == 7);
    ck_assert_int_eq(e->line, 7); /* physical line of the metadata */
    e = cs_meta_find(&s->meta, "note");
    ck_assert_ptr_nonnull(e);
    ck_assert_str_eq(e->text, "cell B, 2nd fill");
    ck_assert_uint_eq(s->meta.n, 5); /* the plain comments are not metadata */
    ck_assert_ptr_nonnull(strstr(L.notes, "not read as metadata"));
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- the kind decision */

enum { O_NONE, O_KIND_REC, O_T1, O_X1, O_XUNIT_NM, O_TUNIT_US, O_XUNIT_US };

static const struct kind_case {
    const char *what, *text;
    int opt;
    cs_kind kind;
    int is_complex;     /* records */
    const char *note;   /* expected in the notes, or NULL */
} kind_cases[] = {
    {"default: spectrum in Hz", "1,2\n2,3\n3,4\n", O_NONE, CS_KIND_SPECTRUM, 0, "Hz assumed"},
    {"option kind", "1,2\n2,3\n3,4\n", O_KIND_REC, CS_KIND_RECORD, 0, "s assumed"},
    {"option t column", "1,2\n2,3\n3,4\n", O_T1, CS_KIND_RECORD, 0, NULL},
    {"option x column", "1,2\n2,3\n3,4\n", O_X1, CS_KIND_SPECTRUM, 0, NULL},
    {"header time", "time,y\n0,1\n1,2\n2,3\n", O_NONE, CS_KIND_RECORD, 0, "s assumed"},
    {"header t", "t,y\n0,1\n1,2\n2,3\n", O_NONE, CS_KIND_RECORD, 0, NULL},
    {"header time unit", "delay_ns,y\n0,1\n1,2\n2,3\n", O_NONE, CS_KIND_RECORD, 0, NULL},
    {"header frequency", "frequency,y\n0,1\n1,2\n2,3\n", O_NONE, CS_KIND_SPECTRUM, 0, "Hz assumed"},
    {"header detuning", "Detuning,y\n0,1\n1,2\n2,3\n", O_NONE, CS_KIND_SPECTRUM, 0, NULL},
    {"header spectral unit", "x_thz,y\n1,1\n2,2\n3,3\n", O_NONE, CS_KIND_SPECTRUM, 0, NULL},
    {"header beats metadata", "# kind = spectrum\ntime_s,y\n0,1\n1,2\n2,3\n", O_NONE,
     CS_KIND_RECORD, 0, NULL},
    {"metadata kind", "# kind = record\n0,1\n1,2\n2,3\n", O_NONE, CS_KIND_RECORD, 0, NULL},
    {"metadata sample rate, 1 column", "# sample_rate = 1 kHz\n1\n2\n3\n", O_NONE,
     CS_KIND_RECORD, 0, NULL},
    {"metadata sample rate, 2 columns", "# sample_rate = 1 kHz\n1,2\n2,3\n3,4\n", O_NONE,
     CS_KIND_RECORD, 1, "read as I and Q"},
    {"metadata sample rate, 3 columns", "# sample_rate = 1 kHz\n1,2,0\n2,3,0\n3,4,0\n", O_NONE,
     CS_KIND_SPECTRUM, 0, "Hz assumed"},
    {"option x unit", "1,2\n2,3\n3,4\n", O_XUNIT_NM, CS_KIND_SPECTRUM, 0, NULL},
    {"option t unit", "1,2\n2,3\n3,4\n", O_TUNIT_US, CS_KIND_RECORD, 0, NULL},
    {"option x unit is a time", "1,2\n2,3\n3,4\n", O_XUNIT_US, CS_KIND_RECORD, 0, NULL},
    {"one column", "# dt = 1 ns\n1\n2\n3\n", O_NONE, CS_KIND_RECORD, 0, NULL},
    {"metadata dt, 2 columns", "# dt = 1 ns\n1,2\n2,3\n3,4\n", O_NONE, CS_KIND_RECORD, 1, NULL},
    {"header with a trailing delimiter", "frequency_hz,y,\n1,1,\n2,2,\n3,3,\n", O_NONE,
     CS_KIND_SPECTRUM, 0, "1 other column not used"},
    {"complex by names", "time_s,I,Q\n0,1,2\n1,2,3\n2,3,4\n", O_NONE, CS_KIND_RECORD, 1, NULL},
};

static void kind_options(int opt, cs_load_options *o)
{
    cs_load_options_init(o);
    switch (opt) {
    case O_KIND_REC: o->kind = CS_KIND_RECORD; break;
    case O_T1: o->t_col = "1"; break;
    case O_X1: o->x_col = "1"; break;
    case O_XUNIT_NM: o->x_unit = "nm"; break;
    case O_TUNIT_US: o->t_unit = "us"; break;
    case O_XUNIT_US: o->x_unit = "us"; break;
    default: break;
    }
}

START_TEST(test_kind)
{
    const struct kind_case *t = &kind_cases[_i];
    cs_load_options o;
    kind_options(t->opt, &o);
    cs_loaded L;
    cs_error err;
    int rc = load(t->text, &o, &L, &err);
    ck_assert_msg(rc == CS_OK, "%s: %d: %s", t->what, rc, err.msg);
    ck_assert_msg(L.kind == t->kind, "%s: kind %s", t->what, cs_kind_name(L.kind));
    if (t->kind == CS_KIND_RECORD)
        ck_assert_msg(L.records[0]->is_complex == t->is_complex, "%s: is_complex", t->what);
    if (t->note)
        ck_assert_msg(strstr(L.notes, t->note) != NULL, "%s: notes '%s'", t->what, L.notes);
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- records */

START_TEST(test_record_complex)
{
    cs_loaded L;
    const cs_record *r = load_record("time_ns,i,q\n0,1,-1\n1,2,-2\n2,3,-3\n", NULL, 3, &L);
    static const double want[] = {1, -1, 2, -2, 3, -3}; /* interleaved (re, im) */
    ck_assert_int_eq(r->is_complex, 1);
    for (size_t k = 0; k < 6; k++)
        ck_assert(r->data[k] == want[k]);
    ck_assert(r->t0_s == 0);
    ck_assert(tu_close(r->dt_s, 1e-9, 1e-12)); /* 1 ns */
    cs_loaded_release(&L);

    r = load_record("Time (us);Re;Im\n0;1;-1\n0.5;2;-2\n1;3;-3\n", NULL, 3, &L);
    ck_assert_int_eq(r->is_complex, 1);
    ck_assert(r->data[4] == 3 && r->data[5] == -3);
    ck_assert(tu_close(r->dt_s, 0.5e-6, 1e-12));
    cs_loaded_release(&L);

    cs_load_options o;
    cs_load_options_init(&o);
    o.i_col = "3";
    o.q_col = "2";
    r = load_record("0 10 20\n1 11 21\n2 12 22\n", &o, 3, &L); /* time: column 1 */
    ck_assert(r->data[0] == 20 && r->data[1] == 10 && r->data[5] == 12);
    ck_assert(tu_close(r->dt_s, 1.0, 1e-12));
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_record_real_columns)
{
    cs_loaded L;
    const cs_record *r = load_record("time_us,ch1,ch2\n0,1,9\n1,2,9\n2,3,9\n", NULL, 3, &L);
    ck_assert(r->data[0] == 1 && r->data[2] == 3);
    ck_assert_ptr_nonnull(strstr(L.notes, "1 of 3 columns not used"));
    cs_loaded_release(&L);

    cs_load_options o;
    cs_load_options_init(&o);
    o.y_col = "ch2";
    r = load_record("time_us,ch1,ch2\n0,1,9\n1,2,8\n2,3,7\n", &o, 3, &L);
    ck_assert(r->data[0] == 9 && r->data[2] == 7);
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_record_sample_rate)
{
    cs_loaded L;
    const cs_record *r = load_record("# sample_rate = 50 MHz\n# t0 = -2 us\n0.5\n0.25\n-0.5\n",
                                     NULL, 3, &L);
    ck_assert(tu_close(r->dt_s, 1.0 / 50e6, 1e-15)); /* 50 MHz -> 20 ns */
    ck_assert(tu_close(r->t0_s, -2e-6, 1e-15));
    ck_assert(r->data[0] == 0.5 && r->data[1] == 0.25 && r->data[2] == -0.5);
    cs_loaded_release(&L);

    r = load_record("# sample_interval = 20 ns\n1\n2\n3\n", NULL, 3, &L);
    ck_assert(tu_close(r->dt_s, 2e-8, 1e-15));
    ck_assert(r->t0_s == 0);
    cs_loaded_release(&L);

    r = load_record("1\n2\n3\n# dt = 4 ns\n", NULL, 3, &L); /* values: anywhere in the file */
    ck_assert(tu_close(r->dt_s, 4e-9, 1e-15));
    cs_loaded_release(&L);

    cs_load_options o;
    cs_load_options_init(&o);
    o.sample_rate_hz = 1e6;
    o.t0_s = 5e-6;
    r = load_record("# sample_rate = 50 MHz\n# t0 = -2 us\n1\n2\n3\n", &o, 3, &L); /* options win */
    ck_assert(tu_close(r->dt_s, 1e-6, 1e-15));
    ck_assert(tu_close(r->t0_s, 5e-6, 1e-15));
    cs_loaded_release(&L);

    r = load_record("# sample_rate = 2 Hz\ntime_s,y\n0,1\n1,2\n2,3\n", NULL, 3, &L);
    ck_assert(tu_close(r->dt_s, 1.0, 1e-12)); /* the time column wins ... */
    ck_assert_ptr_nonnull(strstr(L.notes, "disagrees"));   /* ... and a note says so */
    cs_loaded_release(&L);
}
END_TEST

/* Steps within 1 % of the first step, but the smallest 1.8 % below the mean (or the largest
 * 1.8 % above it): refused at the end, at the line of that step. */
START_TEST(test_record_uniform_mean_rule)
{
    char text[2048];
    size_t k = (size_t)snprintf(text, sizeof text, "time_s,y\n0,0\n1,0\n1.991,0\n");
    double t = 1.991;
    for (int i = 0; i < 20; i++) {
        t += 1.0099;
        k += (size_t)snprintf(text + k, sizeof text - k, "%.17g,0\n", t);
    }
    cs_loaded L;
    cs_error err;
    ck_assert_int_eq(load(text, NULL, &L, &err), CS_EDATA);
    ck_assert_int_eq(err.line, 4);
    ck_assert_ptr_nonnull(strstr(err.msg, "non-uniform sampling at line 4"));
    ck_assert_ptr_nonnull(strstr(err.msg, "mean step"));

    /* the mirror case: the largest step is 1.8 % above the mean */
    k = (size_t)snprintf(text, sizeof text, "time_s,y\n0,0\n1,0\n2.009,0\n");
    t = 2.009;
    for (int i = 0; i < 20; i++) {
        t += 0.9901;
        k += (size_t)snprintf(text + k, sizeof text - k, "%.17g,0\n", t);
    }
    ck_assert_int_eq(load(text, NULL, &L, &err), CS_EDATA);
    ck_assert_int_eq(err.line, 4);
    ck_assert_ptr_nonnull(strstr(err.msg, "step 1.009 s"));

    /* jitter of 0.5 % around the step is accepted, and dt is the mean step */
    k = (size_t)snprintf(text, sizeof text, "time_s,y\n");
    for (int i = 0; i < 11; i++)
        k += (size_t)snprintf(text + k, sizeof text - k, "%.17g,1\n",
                              (double)i + (i % 2 ? 0.005 : 0.0));
    const cs_record *r = load_record(text, NULL, 11, &L);
    ck_assert(tu_close(r->dt_s, 1.0, 1e-12));
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- round trips */

START_TEST(test_roundtrip_spectrum)
{
    cs_spectrum *s = cs_spectrum_alloc(50, 1);
    ck_assert_ptr_nonnull(s);
    for (size_t i = 0; i < s->n; i++) {
        s->freq_hz[i] = 9.1e9 + (double)i * (1e6 / 3.0);
        s->y[i] = sin((double)i / 7.0) / 3.0;
        s->sigma[i] = 0.01 + 1e-3 * cos((double)i);
    }
    cs_error err;
    ck_assert_int_eq(cs_meta_parse_line(&s->meta, "density = 3.2e13 cm^-3", NULL, -1, &err), CS_OK);
    ck_assert_int_eq(cs_meta_set_text(&s->meta, "note", "cell B, 2nd fill"), CS_OK);
    const char *p = tu_tmp_path("rt_spectrum.csv");
    ck_assert_int_eq(cs_io_text_write_spectrum(p, s, &err), CS_OK);

    cs_loaded L;
    cs_loaded_init(&L);
    ck_assert_int_eq(cs_io_text_load(p, NULL, &L, &err), CS_OK);
    const cs_spectrum *b = L.spectrum;
    ck_assert_ptr_nonnull(b);
    ck_assert_uint_eq(b->n, s->n);
    ck_assert_ptr_nonnull(b->sigma);
    for (size_t i = 0; i < s->n; i++) {
        ck_assert(b->freq_hz[i] == s->freq_hz[i]); /* exact: %.17g */
        ck_assert(b->y[i] == s->y[i]);
        ck_assert(b->sigma[i] == s->sigma[i]);
    }
    double v;
    ck_assert_int_eq(cs_meta_get_si(&b->meta, "density", CS_DIM_DENSITY, &v, &err), CS_OK);
    ck_assert(tu_close(v, 3.2e19, 1e-15));
    ck_assert_str_eq(cs_meta_find(&b->meta, "note")->text, "cell B, 2nd fill");
    ck_assert_str_eq(b->y_name, "y");
    ck_assert_int_eq(b->x_unit_assumed, 0);
    cs_loaded_release(&L);

    /* without sigma */
    free(s->sigma);
    s->sigma = NULL;
    ck_assert_int_eq(cs_io_text_write_spectrum(p, s, &err), CS_OK);
    cs_loaded_init(&L);
    ck_assert_int_eq(cs_io_text_load(p, NULL, &L, &err), CS_OK);
    ck_assert_ptr_null(L.spectrum->sigma);
    ck_assert(L.spectrum->y[49] == s->y[49]);
    cs_loaded_release(&L);
    cs_spectrum_free(s);
}
END_TEST

START_TEST(test_roundtrip_record)
{
    for (int cplx = 0; cplx <= 1; cplx++) {
        cs_record *r = cs_record_alloc(1000, cplx);
        ck_assert_ptr_nonnull(r);
        r->t0_s = -1.5e-6;
        r->dt_s = 1e-9 / 3.0;
        for (size_t i = 0; i < r->n * (cplx ? 2u : 1u); i++)
            r->data[i] = cos(0.1 * (double)i) * exp(-1e-3 * (double)i) / 7.0;
        cs_error err;
        ck_assert_int_eq(cs_meta_parse_line(&r->meta, "sample_rate = 3 GHz", NULL, -1, &err),
                         CS_OK);
        const char *p = tu_tmp_path(cplx ? "rt_iq.csv" : "rt_y.csv");
        ck_assert_int_eq(cs_io_text_write_record(p, r, &err), CS_OK);
        cs_loaded L;
        cs_loaded_init(&L);
        int rc = cs_io_text_load(p, NULL, &L, &err);
        ck_assert_msg(rc == CS_OK, "%d %s", rc, err.msg);
        ck_assert_int_eq(L.kind, CS_KIND_RECORD);
        const cs_record *b = L.records[0];
        ck_assert_int_eq(b->is_complex, cplx);
        ck_assert_uint_eq(b->n, r->n);
        ck_assert(memcmp(b->data, r->data, r->n * (cplx ? 2u : 1u) * sizeof(double)) == 0);
        ck_assert(b->t0_s == r->t0_s);
        /* dt comes back as (t_last - t0)/(n - 1) from rounded times: equal to ~1e-15 */
        ck_assert(tu_close(b->dt_s, r->dt_s, 1e-12));
        ck_assert_str_eq(b->t_unit, "s");
        ck_assert_ptr_nonnull(cs_meta_find(&b->meta, "sample_rate"));
        cs_loaded_release(&L);
        cs_record_free(r);
    }
}
END_TEST

START_TEST(test_writer_errors)
{
    cs_spectrum *s = cs_spectrum_alloc(3, 0);
    cs_record *r = cs_record_alloc(3, 0);
    ck_assert_ptr_nonnull(s);
    ck_assert_ptr_nonnull(r);
    s->freq_hz[0] = 1, s->freq_hz[1] = 2, s->freq_hz[2] = 3;
    const char *bad = "/nonexistent-collshift-dir/out.csv";
    cs_error err;
    ck_assert_int_eq(cs_io_text_write_spectrum(bad, s, &err), CS_EIO);
    ck_assert_str_eq(err.file, bad);
    ck_assert_int_eq(cs_io_text_write_record(bad, r, &err), CS_EIO);
    ck_assert_str_eq(err.file, bad);
    s->y[1] = NAN;
    ck_assert_int_eq(cs_io_text_write_spectrum(tu_tmp_path("nan.csv"), s, &err), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(err.msg, "point 1"));
    ck_assert_int_eq(cs_io_text_write_spectrum(NULL, s, &err), CS_EINVAL);
    cs_spectrum_free(s);
    cs_record_free(r);
}
END_TEST

/* ---------------------------------------------------------------- through cs_io_load */

START_TEST(test_via_io_load)
{
    const char *p = tu_write_text("auto.csv", "frequency_mhz,y\n1,1\n2,2\n3,3\n");
    cs_loaded L;
    cs_error err;
    ck_assert_int_eq(cs_io_detect_format(p, NULL), CS_FORMAT_TEXT);
    ck_assert_int_eq(cs_io_load(p, NULL, &L, &err), CS_OK);
    ck_assert_int_eq(L.format, CS_FORMAT_TEXT);
    ck_assert_int_eq(L.kind, CS_KIND_SPECTRUM);
    ck_assert(L.spectrum->freq_hz[2] == 3e6);
    cs_loaded_release(&L);

    ck_assert_int_eq(cs_io_load(tu_write_text("bad.txt", "1,2\n3\n"), NULL, &L, &err), CS_EFORMAT);
    ck_assert_int_eq(err.line, 2);
}
END_TEST

START_TEST(test_fixture)
{
    cs_loaded L;
    cs_error err;
    int rc = cs_io_load(tu_data_path("text/emission_nm.tsv"), NULL, &L, &err);
    ck_assert_msg(rc == CS_OK, "%d: %s", rc, err.msg);
    ck_assert_int_eq(L.kind, CS_KIND_SPECTRUM);
    const cs_spectrum *s = L.spectrum;
    ck_assert_uint_eq(s->n, 9);
    ck_assert_ptr_nonnull(s->sigma);
    ck_assert_str_eq(s->x_unit, "nm");
    ck_assert_int_eq(s->conv.reversed, 1);
    for (size_t i = 1; i < s->n; i++)
        ck_assert(s->freq_hz[i] > s->freq_hz[i - 1]);
    double v;
    ck_assert_int_eq(cs_meta_get_si(&s->meta, "density", CS_DIM_DENSITY, &v, &err), CS_OK);
    ck_assert(tu_close(v, 1.5e20, 1e-15)); /* 1.5e14 cm^-3 = 1.5e20 m^-3 */
    /* the peak row (780.24 nm, y = 1.00) is the 5th of 9 either way round */
    ck_assert(s->y[4] == 1.0);
    ck_assert(tu_close(s->freq_hz[4], C_LIGHT / 780.24e-9, 1e-15));
    cs_loaded_release(&L);
}
END_TEST

/* ---------------------------------------------------------------- bad input */

#define NO_OPTIONS .kind = CS_KIND_AUTO

static const struct bad_case {
    const char *what, *text;
    int code;
    long line;
    const char *msg;
    /* options */
    cs_kind kind;
    const char *x_col, *x_unit;
    size_t min_points;
    int air;
} bad_cases[] = {
    /* rows and fields */
    {"ragged short", "1,2,3\n4,5,6\n7,8\n", CS_EFORMAT, 3, "expected 3 columns, found 2",
     NO_OPTIONS},
    {"ragged long", "x,y\n1,2\n3,4,5\n", CS_EFORMAT, 3, "expected 2 columns, found 3", NO_OPTIONS},
    {"ragged blanks", "1 2\n3 4 5\n6 7\n", CS_EFORMAT, 2, "expected 2 columns, found 3",
     NO_OPTIONS},
    {"ragged, lines counted through BOM, CRLF, comments, blanks",
     "\xEF\xBB\xBF# c\r\n\r\nf_hz,y\r\n1,2\r\n# m = 1\r\n3\r\n", CS_EFORMAT, 6,
     "expected 2 columns, found 1", NO_OPTIONS},
    {"header names with blanks in a blank-separated file", "Time (s)  Signal\n0 1\n1 2\n2 3\n",
     CS_EFORMAT, 2, "found 2 (the header row, line 1, has 3 names)", NO_OPTIONS},
    {"word", "x,y\n1,2\n3,abc\n4,5\n", CS_EFORMAT, 3, "column 2: 'abc' is not a number",
     NO_OPTIONS},
    {"word in the first row", "1.0,abc\n2,3\n4,5\n", CS_EFORMAT, 1, "'abc' is not a number",
     NO_OPTIONS},
    {"trailing garbage", "1,2\n2,3x\n3,4\n", CS_EFORMAT, 2, "'3x' is not a number", NO_OPTIONS},
    {"NaN", "1,2\n2,nan\n3,4\n", CS_EDATA, 2, "'nan' is NaN", NO_OPTIONS},
    {"NaN in the first row", "NaN,1\n2,2\n3,3\n", CS_EDATA, 1, "NaN", NO_OPTIONS},
    {"infinity", "1,2\n2,3\n3,-inf\n", CS_EDATA, 3, "'-inf' is infinite", NO_OPTIONS},
    {"overflow", "1,2\n2,1e999\n3,4\n", CS_EDATA, 2, "too large", NO_OPTIONS},
    {"hexadecimal", "1,2\n2,0x10\n3,4\n", CS_EFORMAT, 2, "hexadecimal", NO_OPTIONS},
    {"empty field", "1,,3\n4,5,6\n7,8,9\n", CS_EFORMAT, 1, "column 2 is empty", NO_OPTIONS},
    {"only delimiters", ",,\n1,2,3\n", CS_EFORMAT, 1, "only empty fields", NO_OPTIONS},
    {"lone CR line endings", "1,2\r2,3\r3,4\r", CS_EFORMAT, 1, "carriage return", NO_OPTIONS},
    /* after the first data row, as the loader's fast way meets them */
    {"trailing delimiter, later row", "1,10\n2,20\n3,30,\n", CS_EFORMAT, 3,
     "expected 2 columns, found 3", NO_OPTIONS},
    {"one field, later row", "1,10\n2,20\n3\n4,40\n", CS_EFORMAT, 3, "expected 2 columns, found 1",
     NO_OPTIONS},
    {"two CRs at a later line end", "1,10\r\n2,20\r\r\n3,30\r\n", CS_EFORMAT, 2,
     "carriage return", NO_OPTIONS},
    {"CR inside a later row", "1 10\n2\r 20\n3 30\n", CS_EFORMAT, 2, "carriage return",
     NO_OPTIONS},
    {"UTF-16", "\xFF\xFE" "1,2\n", CS_EFORMAT, 1, "UTF-16", NO_OPTIONS},

    /* too little data */
    {"empty file", "", CS_EDATA, -1, "empty", NO_OPTIONS},
    {"blank lines only", "\n\n  \n", CS_EDATA, 3, "no data rows", NO_OPTIONS},
    {"comments only", "# a\n# b = 1\n", CS_EDATA, 2, "no data rows", NO_OPTIONS},
    {"header only", "frequency_hz,y\n", CS_EDATA, 1, "header row but no data rows", NO_OPTIONS},
    {"header and comments only", "# k = 1\nfrequency_hz,y\n# end\n\n", CS_EDATA, 2,
     "header row but no data rows", NO_OPTIONS},
    {"too few points", "1,2\n2,3\n", CS_EDATA, 2, "2 data rows: at least 3 are needed",
     NO_OPTIONS},
    {"too few points (min_points)", "1,2\n2,3\n3,4\n# end\n4,5\n", CS_EDATA, 5, "at least 5",
     .min_points = 5},

    /* decimal commas */
    {"decimal comma, ';'", "1,5;2,3\n2,5;3,3\n3,5;4,1\n", CS_EFORMAT, 1, "decimal comma",
     NO_OPTIONS},
    {"decimal comma, tab", "x\ty\n1,5\t2,3\n", CS_EFORMAT, 2,
     "'1,5' has a decimal comma: decimal commas are not accepted; convert them to '.'",
     NO_OPTIONS},
    {"decimal comma, blanks", "# c\n1,5 2,3\n2,5 3,3\n", CS_EFORMAT, 2, "decimal comma",
     NO_OPTIONS},
    {"decimal comma, later row", "1.5;2.3\n2.5;3,3\n", CS_EFORMAT, 2,
     "column 2: '3,3' has a decimal comma", NO_OPTIONS},
    {"decimal comma, ','", "x,y\n1,5,2,3\n", CS_EFORMAT, 2, "found 4 (decimal commas?",
     NO_OPTIONS},

    /* units */
    {"unknown unit in header", "frequency [furlong],y\n1,2\n2,3\n3,4\n", CS_EUNIT, 1,
     "unknown unit 'furlong'", NO_OPTIONS},
    {"unknown unit option", "1,2\n2,3\n3,4\n", CS_EUNIT, -1, "unknown unit 'furlong'",
     .x_unit = "furlong"},
    {"wavelength without unit", "wavelength,y\n500,1\n501,1\n502,1\n", CS_EUNIT, 1,
     "has no unit", NO_OPTIONS},
    {"time axis as a spectrum", "time_us,y\n0,1\n1,2\n2,3\n", CS_EUNIT, 1, "measures time",
     .kind = CS_KIND_SPECTRUM},
    {"air on a frequency axis", "frequency_mhz,y\n1,1\n2,2\n3,3\n", CS_EINVAL, -1,
     "not a wavelength", .air = 1},
    {"sample rate without unit", "# sample_rate = 50\n1\n2\n3\n", CS_EUNIT, 1, "has no unit",
     NO_OPTIONS},

    /* axis */
    {"one column as a spectrum", "1\n2\n3\n", CS_EFORMAT, 1, "needs 2 columns",
     .kind = CS_KIND_SPECTRUM},
    {"zero wavelength", "wavelength_nm,y\n0,1\n1,2\n2,3\n", CS_EDATA, 2, "not positive",
     NO_OPTIONS},
    {"negative wavenumber", "wavenumber_cm^-1,y\n-1,1\n1,2\n2,3\n", CS_EDATA, 2,
     "not positive", NO_OPTIONS},
    {"not monotonic", "1,1\n2,1\n3,1\n2.5,1\n", CS_EDATA, 4,
     "not monotonic: it increases up to line 3 and decreases at line 4", NO_OPTIONS},
    {"not monotonic, decreasing wavelengths", "wavelength_nm,y\n700,1\n600,1\n650,1\n", CS_EDATA,
     4, "decreases up to line 3 and increases at line 4", NO_OPTIONS},
    {"duplicated axis value", "1,1\n# c\n2,1\n2,1\n3,1\n", CS_EDATA, 4, "at lines 3 and 4",
     NO_OPTIONS},
    {"sigma zero", "x,y,sigma\n1,1,0.1\n2,1,0\n3,1,0.1\n", CS_EDATA, 3,
     "sigma 0 is not positive", NO_OPTIONS},
    {"sigma negative", "x,y,err\n1,1,0.1\n2,1,0.1\n3,1,-0.1\n", CS_EDATA, 4, "is not positive",
     NO_OPTIONS},
    {"sigma NaN", "x,y,uncertainty\n1,1,0.1\n2,1,nan\n3,1,0.1\n", CS_EDATA, 3, "NaN",
     NO_OPTIONS},

    /* time axis */
    {"non-uniform sampling", "time_s,y\n0,1\n1,1\n2,1\n3.5,1\n4.5,1\n", CS_EDATA, 5,
     "non-uniform sampling at line 5: step 1.5 s, expected 1 s", NO_OPTIONS},
    {"time not increasing", "time_s,y\n0,1\n1,1\n1,1\n", CS_EDATA, 4, "time does not increase",
     NO_OPTIONS},
    {"no time axis, no sample rate", "1\n2\n3\n", CS_EINVAL, -1,
     "no time axis and no sample rate: give --sample-rate or a '# sample_rate = ...' line",
     NO_OPTIONS},

    /* metadata */
    {"kind neither record nor spectrum", "# kind = banana\n1,2\n2,3\n3,4\n", CS_EFORMAT, 1,
     "'record' or 'spectrum'", NO_OPTIONS},
    {"kind after the data", "1,2\n2,3\n3,4\n# kind = record\n", CS_EFORMAT, 4,
     "after the first data row (line 1)", NO_OPTIONS},
    {"sample rate after the data", "1,2\n2,3\n3,4\n# sample_rate = 1 MHz\n", CS_EFORMAT, 4,
     "after the first data row", NO_OPTIONS},

    /* columns */
    {"unknown column name", "frequency_mhz,y,sigma\n1,1,1\n2,2,1\n3,3,1\n", CS_EINVAL, 1,
     "no column 'nope' (x): the header has 'frequency_mhz', 'y', 'sigma'", .x_col = "nope"},
    {"column index out of range", "frequency_mhz,y,sigma\n1,1,1\n2,2,1\n3,3,1\n", CS_EINVAL, 1,
     "column 4 (x) does not exist: the file has 3 columns", .x_col = "4"},
    {"column 0", "1,1\n2,2\n3,3\n", CS_EINVAL, -1, "column 0 (x) does not exist", .x_col = "0"},
    {"column name without header", "1,1\n2,2\n3,3\n", CS_EINVAL, -1, "no header row",
     .x_col = "frequency"},
    {"ambiguous column name", "a_mhz,a_ghz,y\n1,1,1\n2,2,2\n3,3,3\n", CS_EINVAL, 1, "ambiguous",
     .x_col = "a"},
};

START_TEST(test_bad_input)
{
    const struct bad_case *t = &bad_cases[_i];
    cs_load_options o;
    cs_load_options_init(&o);
    o.kind = t->kind;
    o.x_col = t->x_col;
    o.x_unit = t->x_unit;
    o.air = t->air;
    if (t->min_points)
        o.min_points = t->min_points;
    cs_loaded L;
    cs_error err;
    int rc = load(t->text, &o, &L, &err);
    ck_assert_msg(rc == t->code, "%s: code %d, expected %d (%s)", t->what, rc, t->code, err.msg);
    ck_assert_msg(err.line == t->line, "%s: line %ld, expected %ld (%s)", t->what, err.line,
                  t->line, err.msg);
    ck_assert_msg(strstr(err.msg, t->msg) != NULL, "%s: message '%s' lacks '%s'", t->what,
                  err.msg, t->msg);
    ck_assert_msg(strstr(err.file, "in.csv") != NULL, "%s: file '%s'", t->what, err.file);
    ck_assert_ptr_null(L.spectrum);
    ck_assert_uint_eq(L.nrecords, 0);
    cs_loaded_release(&L);
}
END_TEST

START_TEST(test_options_contradict)
{
    cs_load_options o;
    cs_load_options_init(&o);
    o.t_col = "1";
    o.x_col = "2";
    cs_loaded L;
    cs_error err;
    ck_assert_int_eq(load("1,2\n2,3\n3,4\n", &o, &L, &err), CS_EINVAL);
    cs_load_options_init(&o);
    o.kind = CS_KIND_SPECTRUM;
    o.i_col = "1";
    o.q_col = "2";
    ck_assert_int_eq(load("1,2\n2,3\n3,4\n", &o, &L, &err), CS_EINVAL);
    cs_load_options_init(&o);
    o.i_col = "1";
    ck_assert_int_eq(load("1,2\n2,3\n3,4\n", &o, &L, &err), CS_EINVAL);
    ck_assert_ptr_nonnull(strstr(err.msg, "both the I and the Q"));
    cs_load_options_init(&o);
    o.delimiter = '.';
    ck_assert_int_eq(load("1,2\n2,3\n3,4\n", &o, &L, &err), CS_EINVAL);
    ck_assert_int_eq(cs_io_text_load(tu_tmp_path("does-not-exist.csv"), NULL, &L, &err), CS_EIO);
}
END_TEST

/* ---------------------------------------------------------------- sizes and limits */

static char *repeat(char ch, size_t n)
{
    char *s = malloc(n + 1);
    ck_assert_ptr_nonnull(s);
    memset(s, ch, n);
    s[n] = '\0';
    return s;
}

START_TEST(test_long_field)
{
    char *digits = repeat('1', 1100);
    size_t n = strlen(digits) + 64;
    char *text = malloc(n);
    ck_assert_ptr_nonnull(text);
    snprintf(text, n, "1,2\n2,%s\n3,4\n", digits);
    cs_loaded L;
    cs_error err;
    ck_assert_int_eq(load(text, NULL, &L, &err), CS_EFORMAT);
    ck_assert_int_eq(err.line, 2);
    ck_assert_ptr_nonnull(strstr(err.msg, "longer than 1024 bytes"));
    /* in an unused column too: every field is bounded */
    snprintf(text, n, "1,2,3\n2,3,%s\n", digits);
    ck_assert_int_eq(load(text, NULL, &L, &err), CS_EFORMAT);
    ck_assert_int_eq(err.line, 2);
    free(digits);
    free(text);
}
END_TEST

START_TEST(test_long_line)
{
    /* a comment line just over 1 MiB is refused (bounded memory), one just under is read */
    char *comment = repeat('c', (1u << 20) + 10);
    comment[0] = '#';
    size_t n = strlen(comment) + 64;
    char *text = malloc(n);
    ck_assert_ptr_nonnull(text);
    snprintf(text, n, "1,2\n2,3\n%s\n3,4\n", comment);
    cs_loaded L;
    cs_error err;
    ck_assert_int_eq(load(text, NULL, &L, &err), CS_EFORMAT);
    ck_assert_int_eq(err.line, 3);
    ck_assert_ptr_nonnull(strstr(err.msg, "line longer than"));
    /* a long last line without newline */
    snprintf(text, n, "1,2\n2,3\n3,4\n%s", comment);
    ck_assert_int_eq(load(text, NULL, &L, &err), CS_EFORMAT);
    ck_assert_int_eq(err.line, 4);
    /* just under the limit is fine */
    comment[(1u << 20) - 10] = '\0';
    snprintf(text, n, "1,2\n%s\n2,3\n3,4\n", comment);
    cs_loaded_init(&L);
    int rc = load(text, NULL, &L, &err);
    ck_assert_msg(rc == CS_OK, "%s", err.msg);
    ck_assert_uint_eq(L.spectrum->n, 3);
    cs_loaded_release(&L);
    free(comment);
    free(text);
}
END_TEST

/* A metadata key given 100000 times: one entry, the last value wins, a note names the key
 * (io.h: cs_meta_parse_line; issue 9, section 5: repeated keys are defined and bounded). */
START_TEST(test_repeated_key)
{
    enum { K = 100000 };
    size_t cap = (size_t)K * 32 + 64, len = 0;
    char *text = malloc(cap);
    ck_assert_ptr_nonnull(text);
    for (int k = 1; k <= K; k++)
        len += (size_t)snprintf(text + len, cap - len, "# Density = %d cm^-3\n", k);
    snprintf(text + len, cap - len, "1,2\n2,3\n3,4\n");
    cs_loaded L;
    cs_error err;
    int rc = load(text, NULL, &L, &err);
    ck_assert_msg(rc == CS_OK, "%s", err.msg);
    ck_assert_uint_eq(L.spectrum->meta.n, 1);
    const cs_meta_entry *e = cs_meta_find(&L.spectrum->meta, "density"); /* keys ignore case */
    ck_assert_ptr_nonnull(e);
    ck_assert(e->value == (double)K); /* the last line's value */
    ck_assert_int_eq(e->line, K);
    ck_assert_msg(strstr(L.notes, "metadata 'Density' given again: the last value wins") != NULL, "notes: %s", L.notes);
    ck_assert_msg(strstr(L.notes, "line 2:") != NULL, "the first repetition is named: %s", L.notes);
    cs_loaded_release(&L);
    free(text);
}
END_TEST

/* More than 10000 different keys: refused at the first one too many, with its line; exactly
 * 10000 load (io.h: CS_META_MAX_KEYS). The same limit through the API. */
START_TEST(test_too_many_keys)
{
    enum { K = 10001 };
    size_t cap = (size_t)K * 32 + 64, len = 0;
    char *text = malloc(cap);
    ck_assert_ptr_nonnull(text);
    for (int k = 0; k < K; k++)
        len += (size_t)snprintf(text + len, cap - len, "# key%d = %d\n", k, k);
    snprintf(text + len, cap - len, "1,2\n2,3\n3,4\n");
    cs_loaded L;
    cs_error err;
    ck_assert_int_eq(load(text, NULL, &L, &err), CS_EFORMAT);
    ck_assert_int_eq(err.line, K);
    ck_assert_msg(strstr(err.msg, "more than 10000 different metadata keys") != NULL, "%s", err.msg);
    /* drop the last key line: 10000 keys are fine */
    char *last = strstr(text, "# key10000 =");
    ck_assert_ptr_nonnull(last);
    memcpy(last, "#               ", 16);
    int rc = load(text, NULL, &L, &err);
    ck_assert_msg(rc == CS_OK, "%s", err.msg);
    ck_assert_uint_eq(L.spectrum->meta.n, CS_META_MAX_KEYS);
    cs_loaded_release(&L);
    free(text);

    cs_meta m;
    cs_meta_init(&m);
    char line[64];
    for (int k = 0; k < CS_META_MAX_KEYS; k++) {
        snprintf(line, sizeof line, "k%d = %d", k, k);
        ck_assert_int_eq(cs_meta_parse_line(&m, line, NULL, k + 1, NULL), CS_OK);
    }
    ck_assert_int_eq(cs_meta_parse_line(&m, "one_more = 1", "f.csv", 7, &err), CS_ERANGE);
    ck_assert_int_eq(err.line, 7);
    ck_assert_int_eq(cs_meta_parse_line(&m, "k5 = 6", NULL, 8, NULL), CS_OK); /* replacing is fine */
    ck_assert_int_eq(cs_meta_set_text(&m, "another", "x"), CS_ERANGE);
    ck_assert_int_eq(cs_meta_set_si(&m, "k7", 1.0, CS_DIM_TIME), CS_OK);
    ck_assert_uint_eq(m.n, CS_META_MAX_KEYS);
    cs_meta_release(&m);
}
END_TEST

/* More than one read buffer (4 MiB): lines cross chunk boundaries and must come out whole. */
START_TEST(test_many_rows)
{
    const size_t rows = 400000;
    const char *p = tu_tmp_path("big.csv");
    FILE *f = fopen(p, "wb");
    ck_assert_ptr_nonnull(f);
    fputs("# big file\nfrequency_hz,y,sigma\n", f);
    for (size_t i = 0; i < rows; i++)
        fprintf(f, "%zu,%.17g,0.5\n", i + 1, 0.25 * (double)i - 7.0 / 3.0);
    ck_assert_int_eq(fclose(f), 0);
    cs_loaded L;
    cs_error err;
    cs_loaded_init(&L);
    int rc = cs_io_text_load(p, NULL, &L, &err);
    ck_assert_msg(rc == CS_OK, "%s", err.msg);
    const cs_spectrum *s = L.spectrum;
    ck_assert_uint_eq(s->n, rows);
    for (size_t i = 0; i < rows; i++) {
        if (s->freq_hz[i] != (double)(i + 1) || s->y[i] != 0.25 * (double)i - 7.0 / 3.0 ||
            s->sigma[i] != 0.5)
            ck_abort_msg("row %zu read wrong", i);
    }
    cs_loaded_release(&L);

    cs_load_options o;
    cs_load_options_init(&o);
    o.max_samples = 1000;
    ck_assert_int_eq(cs_io_text_load(p, &o, &L, &err), CS_EDATA);
    ck_assert_int_eq(err.line, 1003); /* row 1001 is on line 1003 */
    ck_assert_ptr_nonnull(strstr(err.msg, "max_samples"));
}
END_TEST

/* ---------------------------------------------------------------- suite */

static Suite *io_text_suite(void)
{
    Suite *s = suite_create("io_text");
    TCase *tc;

    tc = tcase_create("delimiters");
    tcase_add_loop_test(tc, test_delimiters, 0, (int)(sizeof delim_cases / sizeof delim_cases[0]));
    suite_add_tcase(s, tc);

    tc = tcase_create("lines");
    tcase_add_test(tc, test_lines);
    suite_add_tcase(s, tc);

    tc = tcase_create("columns");
    tcase_add_test(tc, test_columns_by_name);
    tcase_add_test(tc, test_columns_by_index);
    tcase_add_test(tc, test_rows_plain_and_not);
    tcase_add_test(tc, test_header_quoted_and_unused);
    suite_add_tcase(s, tc);

    tc = tcase_create("units");
    tcase_add_loop_test(tc, test_unit_table, 0, (int)(sizeof unit_cases / sizeof unit_cases[0]));
    tcase_add_test(tc, test_unit_mhz);
    tcase_add_test(tc, test_unit_nm_reversed);
    tcase_add_test(tc, test_unit_nm_with_sigma_reversed);
    tcase_add_test(tc, test_unit_angstrom);
    tcase_add_test(tc, test_unit_wavenumber);
    tcase_add_test(tc, test_unit_time_us);
    tcase_add_test(tc, test_unit_option_wins);
    tcase_add_test(tc, test_unit_air);
    tcase_add_test(tc, test_unit_jacobian);
    suite_add_tcase(s, tc);

    tc = tcase_create("metadata");
    tcase_add_test(tc, test_metadata);
    suite_add_tcase(s, tc);

    tc = tcase_create("kind");
    tcase_add_loop_test(tc, test_kind, 0, (int)(sizeof kind_cases / sizeof kind_cases[0]));
    tcase_add_test(tc, test_options_contradict);
    suite_add_tcase(s, tc);

    tc = tcase_create("records");
    tcase_add_test(tc, test_record_complex);
    tcase_add_test(tc, test_record_real_columns);
    tcase_add_test(tc, test_record_sample_rate);
    tcase_add_test(tc, test_record_uniform_mean_rule);
    suite_add_tcase(s, tc);

    tc = tcase_create("round_trips");
    tcase_add_test(tc, test_roundtrip_spectrum);
    tcase_add_test(tc, test_roundtrip_record);
    tcase_add_test(tc, test_writer_errors);
    suite_add_tcase(s, tc);

    tc = tcase_create("io_load");
    tcase_add_test(tc, test_via_io_load);
    tcase_add_test(tc, test_fixture);
    suite_add_tcase(s, tc);

    tc = tcase_create("bad_input");
    tcase_add_loop_test(tc, test_bad_input, 0, (int)(sizeof bad_cases / sizeof bad_cases[0]));
    suite_add_tcase(s, tc);

    tc = tcase_create("limits");
    tcase_set_timeout(tc, 60);
    tcase_add_test(tc, test_long_field);
    tcase_add_test(tc, test_long_line);
    tcase_add_test(tc, test_many_rows);
    tcase_add_test(tc, test_repeated_key);
    tcase_add_test(tc, test_too_many_keys);
    suite_add_tcase(s, tc);

    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(io_text_suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed == 0 ? EXIT_SUCCESS : EXIT_FAILURE;
}
