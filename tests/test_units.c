/* Check suite for units: lookup, parsing, formatting, air wavelengths and spectral-axis conversion. */
#include <check.h>
#include <collshift/units.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "testutil.h"

/* Speed of light, typed in from the source: c = 299 792 458 m/s exactly, by the definition of
 * the metre (BIPM SI Brochure, 9th ed. (2019), sect. 2.3.1; CODATA 2018). */
#define C_SI 299792458.0
#define TWO_PI_T 6.283185307179586476925286766559

/* ---- constants and exact conversions ---------------------------------------------------- */

START_TEST(test_speed_of_light)
{
    /* Source: SI Brochure 9th ed., sect. 2.3.1 (exact value of c). */
    ck_assert(CS_SPEED_OF_LIGHT == C_SI);
}
END_TEST

START_TEST(test_rb87_d2_frequency)
{
    /* Rb87 D2 vacuum wavelength 780.241 209 686 nm and frequency 384.230 484 468 5 THz:
     * D. A. Steck, "Rubidium 87 D Line Data" (from memory; the wavelength is also in
     * shared/guide/physics.md, sect. 7). The frequency must equal c / lambda from c above. */
    double si;
    const cs_unit *u = NULL;
    cs_error err;
    ck_assert_int_eq(cs_quantity_parse("780.241209686 nm", CS_DIM_LENGTH, NULL, &si, &u, NULL,
                                       &err), CS_OK);
    double x[1] = {780.241209686};
    ck_assert_int_eq(cs_axis_to_hz(x, NULL, NULL, 1, u, NULL, &err), CS_OK);
    double expect = C_SI / 780.241209686e-9;
    ck_assert_msg(tu_close(x[0], expect, 1e-15), "nu = %.17g, c/lambda = %.17g", x[0], expect);
    ck_assert_msg(tu_close(x[0], 384.2304844685e12, 1e-9), "nu = %.17g", x[0]);
}
END_TEST

START_TEST(test_wavenumber_in_ghz)
{
    /* 1 cm^-1 corresponds to c * 100 m^-1 = 29.979 245 8 GHz exactly (follows from the exact c,
     * SI Brochure 9th ed., sect. 2.3.1). */
    double x[1] = {1.0};
    cs_error err;
    const cs_unit *u = cs_unit_find("cm^-1");
    ck_assert_ptr_nonnull(u);
    ck_assert_int_eq(cs_axis_to_hz(x, NULL, NULL, 1, u, NULL, &err), CS_OK);
    ck_assert_msg(tu_close(x[0], 29.9792458e9, 1e-15), "1 cm^-1 = %.17g Hz", x[0]);
}
END_TEST

/* Exact conversions. Sources: NIST SP 811 (2008), App. B.8 (1 Torr = 101325/760 Pa,
 * 1 atm = 101325 Pa, 1 bar = 1e5 Pa, 1 angstrom = 1e-10 m); SI Brochure 9th ed., sect. 2.3.1
 * (T/degC = T/K - 273.15) and Table 7 (prefixes); rad/s -> Hz by 1/(2 pi) (ISO 80000-3). */
static const struct conversion_case {
    const char *text;
    cs_dim want;
    double si;
} conversion_cases[] = {
    {"1 Torr", CS_DIM_PRESSURE, 101325.0 / 760.0},
    {"1 Torr", CS_DIM_PRESSURE, 133.32236842105263},
    {"760 Torr", CS_DIM_PRESSURE, 101325.0},
    {"1 atm", CS_DIM_PRESSURE, 101325.0},
    {"1 mTorr", CS_DIM_PRESSURE, 101325.0 / 760.0 / 1000.0},
    {"1 bar", CS_DIM_PRESSURE, 1e5},
    {"1 mbar", CS_DIM_PRESSURE, 100.0},
    {"1 hPa", CS_DIM_PRESSURE, 100.0},
    {"2 kPa", CS_DIM_PRESSURE, 2000.0},
    {"0 degC", CS_DIM_TEMPERATURE, 273.15},
    {"0 \xC2\xB0" "C", CS_DIM_TEMPERATURE, 273.15},
    {"0 C", CS_DIM_TEMPERATURE, 273.15},
    {"100 degC", CS_DIM_TEMPERATURE, 373.15},
    {"-273.15 degC", CS_DIM_TEMPERATURE, 0.0},
    {"1 rad/s", CS_DIM_FREQUENCY, 1.0 / TWO_PI_T},
    {"1 A", CS_DIM_LENGTH, 1e-10},
    {"1 \xC3\x85", CS_DIM_LENGTH, 1e-10},
    {"1 angstrom", CS_DIM_LENGTH, 1e-10},
    {"1 \xC2\xB5m", CS_DIM_LENGTH, 1e-6},
    {"1 \xCE\xBCm", CS_DIM_LENGTH, 1e-6},
    {"3 mm", CS_DIM_LENGTH, 3e-3},
    {"1 cm", CS_DIM_LENGTH, 1e-2},
    {"5 pm", CS_DIM_LENGTH, 5e-12},
    {"100 cm^-1", CS_DIM_WAVENUMBER, 1e4},
    {"1 cm^-3", CS_DIM_DENSITY, 1e6},
    {"1e13 /cm3", CS_DIM_DENSITY, 1e19},
    {"2 m^-3", CS_DIM_DENSITY, 2.0},
    {"2 us^-1", CS_DIM_RATE, 2e6},
    {"3 1/s", CS_DIM_RATE, 3.0},
    {"50 %", CS_DIM_DIMENSIONLESS, 0.5},
    {"7 ps", CS_DIM_TIME, 7e-12},
    {"2 THz", CS_DIM_FREQUENCY, 2e12},
};

START_TEST(test_conversion)
{
    const struct conversion_case *c = &conversion_cases[_i];
    double si = NAN;
    cs_error err;
    int rc = cs_quantity_parse(c->text, c->want, NULL, &si, NULL, NULL, &err);
    ck_assert_msg(rc == CS_OK, "'%s': %s", c->text, err.msg);
    ck_assert_msg(tu_close(si, c->si, 1e-15), "'%s' -> %.17g, expected %.17g", c->text, si,
                  c->si);
}
END_TEST

/* ---- lookup ------------------------------------------------------------------------------ */

/* Sources: unit symbols and the meaning of prefix case (m = 1e-3, M = 1e6): SI Brochure 9th ed.,
 * sect. 5.2 and Table 7; accepted spellings and the case rule: include/collshift/units.h. */
static const struct lookup_case {
    const char *spelling;
    cs_dim want;
    const char *canonical; /* NULL: must not be found */
} lookup_cases[] = {
    {"MHz", CS_DIM_UNKNOWN, "MHz"},
    {"mhz", CS_DIM_UNKNOWN, "MHz"},     /* no millihertz in the table */
    {"MHZ", CS_DIM_UNKNOWN, "MHz"},
    {"mHz", CS_DIM_UNKNOWN, NULL},      /* mixed case: millihertz meant, never MHz */
    {"ms", CS_DIM_UNKNOWN, "ms"},
    {"MS", CS_DIM_UNKNOWN, "ms"},
    {"Ms", CS_DIM_UNKNOWN, NULL},       /* megasecond */
    {"US", CS_DIM_UNKNOWN, "us"},
    {"\xC2\xB5s", CS_DIM_UNKNOWN, "us"},
    {"\xCE\xBCs", CS_DIM_UNKNOWN, "us"},
    {"A", CS_DIM_UNKNOWN, "A"},
    {"a", CS_DIM_UNKNOWN, NULL},        /* single letters are case-sensitive */
    {"S", CS_DIM_UNKNOWN, NULL},
    {"k", CS_DIM_UNKNOWN, NULL},
    {"\xE2\x84\xAB", CS_DIM_UNKNOWN, "A"},
    {"ANGSTROM", CS_DIM_UNKNOWN, "A"},
    {"cm-1", CS_DIM_UNKNOWN, "cm^-1"},
    {"1/cm", CS_DIM_UNKNOWN, "cm^-1"},
    {"cm\xE2\x81\xBB\xC2\xB9", CS_DIM_UNKNOWN, "cm^-1"},
    {"cm-3", CS_DIM_UNKNOWN, "cm^-3"},
    {"/cm3", CS_DIM_UNKNOWN, "cm^-3"},
    {"/cm^3", CS_DIM_UNKNOWN, "cm^-3"},
    {"1/cm3", CS_DIM_UNKNOWN, "cm^-3"},
    {"cm\xE2\x81\xBB\xC2\xB3", CS_DIM_UNKNOWN, "cm^-3"},
    {"m-3", CS_DIM_UNKNOWN, "m^-3"},
    {"CM^-3", CS_DIM_UNKNOWN, "cm^-3"},
    {"degC", CS_DIM_UNKNOWN, "degC"},
    {"\xE2\x84\x83", CS_DIM_UNKNOWN, "degC"},
    {"C", CS_DIM_UNKNOWN, NULL},        /* coulomb? only a temperature makes it Celsius */
    {"C", CS_DIM_TEMPERATURE, "degC"},
    {"C", CS_DIM_FREQUENCY, NULL},
    {"mpa", CS_DIM_UNKNOWN, NULL},      /* mPa or MPa: ambiguous */
    {"mpa", CS_DIM_PRESSURE, NULL},
    {"MPa", CS_DIM_UNKNOWN, "MPa"},
    {"mPa", CS_DIM_UNKNOWN, "mPa"},
    {"torr", CS_DIM_UNKNOWN, "Torr"},
    {"KHz", CS_DIM_UNKNOWN, "kHz"},
    {"rad/s", CS_DIM_UNKNOWN, "rad/s"},
    {"Mbar", CS_DIM_UNKNOWN, NULL},     /* megabar */
    {"nM", CS_DIM_UNKNOWN, NULL},       /* nanomolar, not nm */
    {"", CS_DIM_UNKNOWN, NULL},
    {"XYZ", CS_DIM_UNKNOWN, NULL},
};

START_TEST(test_lookup)
{
    const struct lookup_case *c = &lookup_cases[_i];
    const cs_unit *u = cs_unit_find_dim(c->spelling, c->want);
    if (!c->canonical) {
        ck_assert_msg(u == NULL, "'%s' (%s) found as '%s'", c->spelling, cs_dim_name(c->want),
                      u ? u->name : "");
        return;
    }
    ck_assert_msg(u != NULL, "'%s' (%s) not found", c->spelling, cs_dim_name(c->want));
    ck_assert_str_eq(u->name, c->canonical);
    if (c->want == CS_DIM_UNKNOWN)
        ck_assert_ptr_eq(cs_unit_find(c->spelling), u);
}
END_TEST

START_TEST(test_si_round_trip)
{
    /* T/K = t/degC + 273.15 (SI Brochure 9th ed., sect. 2.3.1); NULL unit gives NaN (units.h). */
    const cs_unit *c = cs_unit_find("degC");
    ck_assert_ptr_nonnull(c);
    ck_assert(cs_unit_to_si(c, 25.0) == 298.15);
    ck_assert(fabs(cs_unit_from_si(c, 298.15) - 25.0) < 1e-12);
    const cs_unit *g = cs_unit_find("GHz");
    ck_assert(cs_unit_from_si(g, cs_unit_to_si(g, 9.2)) == 9.2);
    ck_assert(isnan(cs_unit_to_si(NULL, 1.0)));
    ck_assert(isnan(cs_unit_from_si(NULL, 1.0)));
    ck_assert_str_eq(cs_dim_name(CS_DIM_FREQUENCY), "frequency");
    ck_assert_str_eq(cs_dim_si_symbol(CS_DIM_DENSITY), "m^-3");
    ck_assert_str_eq(cs_dim_si_symbol(CS_DIM_FREQUENCY), "Hz");
}
END_TEST

/* ---- parsing ----------------------------------------------------------------------------- */

/* Sources: examples in include/collshift/units.h and shared/guide/architecture.md ("9.2GHz",
 * "3e13cm^-3", "20us", "250nm"); prefix values from SI Brochure 9th ed., Table 7. */
static const struct parse_case {
    const char *text;
    cs_dim want;
    const char *default_unit;
    double si;
    const char *unit;
} parse_good[] = {
    {"9.2GHz", CS_DIM_FREQUENCY, NULL, 9.2e9, "GHz"},
    {"9.2 GHz", CS_DIM_FREQUENCY, NULL, 9.2e9, "GHz"},
    {"  9.2\tGHz  ", CS_DIM_FREQUENCY, NULL, 9.2e9, "GHz"},
    {"9.2 ghz", CS_DIM_FREQUENCY, NULL, 9.2e9, "GHz"},
    {"3e13cm^-3", CS_DIM_DENSITY, NULL, 3e19, "cm^-3"},
    {"1e13 cm\xE2\x81\xBB\xC2\xB3", CS_DIM_DENSITY, NULL, 1e19, "cm^-3"},
    {"20us", CS_DIM_TIME, NULL, 20e-6, "us"},
    {"20 \xC2\xB5s", CS_DIM_TIME, NULL, 20e-6, "us"},
    {"20 \xCE\xBCs", CS_DIM_TIME, NULL, 20e-6, "us"},
    {"1.5e-3s", CS_DIM_TIME, NULL, 1.5e-3, "s"},
    {"-1.5 MHz", CS_DIM_FREQUENCY, NULL, -1.5e6, "MHz"},
    {"+5 kHz", CS_DIM_FREQUENCY, NULL, 5e3, "kHz"},
    {".5 MHz", CS_DIM_FREQUENCY, NULL, 0.5e6, "MHz"},
    {"250nm", CS_DIM_LENGTH, NULL, 250e-9, "nm"},
    {"300 K", CS_DIM_TEMPERATURE, NULL, 300.0, "K"},
    {"25 degC", CS_DIM_TEMPERATURE, NULL, 298.15, "degC"},
    {"9.2 GHz", CS_DIM_UNKNOWN, NULL, 9.2e9, "GHz"},
    /* default units */
    {"9.2", CS_DIM_FREQUENCY, "MHz", 9.2e6, "MHz"},
    {"9.2 GHz", CS_DIM_FREQUENCY, "MHz", 9.2e9, "GHz"}, /* a unit in the text wins */
    {"25", CS_DIM_TEMPERATURE, "C", 298.15, "degC"},
    {"0.5", CS_DIM_DIMENSIONLESS, NULL, 0.5, "1"},
    {"12", CS_DIM_UNKNOWN, "ns", 12e-9, "ns"},
};

START_TEST(test_parse_good)
{
    const struct parse_case *c = &parse_good[_i];
    double si = NAN;
    const cs_unit *u = NULL;
    cs_dim dim = CS_DIM_UNKNOWN;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_quantity_parse(c->text, c->want, c->default_unit, &si, &u, &dim, &err);
    ck_assert_msg(rc == CS_OK, "'%s': rc %d, %s", c->text, rc, err.msg);
    ck_assert_msg(tu_close(si, c->si, 1e-15), "'%s' -> %.17g, expected %.17g", c->text, si,
                  c->si);
    ck_assert_ptr_nonnull(u);
    ck_assert_str_eq(u->name, c->unit);
    ck_assert_int_eq(dim, u->dim);
    if (c->want != CS_DIM_UNKNOWN)
        ck_assert_int_eq(dim, c->want);
}
END_TEST

/* Sources: error codes from include/collshift/units.h; overflow and underflow set ERANGE in strtod
 * (ISO C11, 7.22.1.3p10); NaN and infinity spellings accepted by strtod (C11 7.22.1.3p3). The
 * message form "unknown unit 'MHZZ' in '9 MHZZ'" is the project's convention (error.h). */
static const struct bad_case {
    const char *text;
    cs_dim want;
    const char *default_unit;
    int code;
    const char *in_msg;
} parse_bad[] = {
    {"", CS_DIM_FREQUENCY, NULL, CS_EINVAL, "empty"},
    {"   ", CS_DIM_FREQUENCY, "MHz", CS_EINVAL, "empty"},
    {"GHz", CS_DIM_FREQUENCY, NULL, CS_EINVAL, "'GHz'"},
    {"9.2 XYZ", CS_DIM_FREQUENCY, NULL, CS_EUNIT, "unknown unit 'XYZ' in '9.2 XYZ'"},
    {"9 MHZZ", CS_DIM_FREQUENCY, NULL, CS_EUNIT, "unknown unit 'MHZZ' in '9 MHZZ'"},
    {"9.2GHz extra", CS_DIM_FREQUENCY, NULL, CS_EINVAL, "'extra'"},
    {"9.2 GHz 3", CS_DIM_FREQUENCY, NULL, CS_EINVAL, "'3'"},
    {"nan Hz", CS_DIM_FREQUENCY, NULL, CS_ERANGE, "'nan Hz'"},
    {"inf Hz", CS_DIM_FREQUENCY, NULL, CS_ERANGE, "'inf Hz'"},
    {"-infinity", CS_DIM_FREQUENCY, "Hz", CS_ERANGE, "'-infinity'"},
    {"1e999 Hz", CS_DIM_FREQUENCY, NULL, CS_ERANGE, "'1e999 Hz'"},
    {"1e-999 Hz", CS_DIM_FREQUENCY, NULL, CS_ERANGE, "'1e-999 Hz'"},
    {"1e300 THz", CS_DIM_FREQUENCY, NULL, CS_ERANGE, "'1e300 THz'"},
    {"0x10 Hz", CS_DIM_FREQUENCY, NULL, CS_EINVAL, "hexadecimal"},
    {"9.2 s", CS_DIM_FREQUENCY, NULL, CS_EUNIT, "measures time, not frequency"},
    {"9.2 s^-1", CS_DIM_FREQUENCY, NULL, CS_EUNIT, "measures rate"},
    {"9.2 mHz", CS_DIM_FREQUENCY, NULL, CS_EUNIT, "'mHz'"},
    {"5 C", CS_DIM_FREQUENCY, NULL, CS_EUNIT, "'C'"},
    {"9.2", CS_DIM_FREQUENCY, NULL, CS_EUNIT, "missing unit in '9.2'"},
    {"9.2", CS_DIM_UNKNOWN, NULL, CS_EUNIT, "missing unit"},
    {"20", CS_DIM_TIME, "XYZ", CS_EUNIT, "default unit 'XYZ'"},
    {"20", CS_DIM_TIME, "MHz", CS_EUNIT, "measures frequency, not time"},
};

START_TEST(test_parse_bad)
{
    const struct bad_case *c = &parse_bad[_i];
    double si = -12345.0;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_quantity_parse(c->text, c->want, c->default_unit, &si, NULL, NULL, &err);
    ck_assert_msg(rc == c->code, "'%s': rc %d, expected %d (%s)", c->text, rc, c->code, err.msg);
    ck_assert_int_eq(err.code, c->code);
    ck_assert_msg(strstr(err.msg, c->in_msg) != NULL, "'%s': message '%s' lacks '%s'", c->text,
                  err.msg, c->in_msg);
    ck_assert_msg(si == -12345.0, "'%s': *si changed on error", c->text);
    /* err may be NULL (units.h) */
    ck_assert_int_eq(cs_quantity_parse(c->text, c->want, c->default_unit, &si, NULL, NULL, NULL),
                     c->code);
}
END_TEST

/* ---- column names ------------------------------------------------------------------------ */

/* Sources: header forms in shared/guide/architecture.md ("frequency_mhz", "time_us",
 * "wavelength_nm") and include/collshift/units.h; plain data columns (i, q, y, counts) carry
 * no unit. */
static const struct column_case {
    const char *header;
    const char *base;
    const char *unit; /* NULL: no unit */
} column_cases[] = {
    {"frequency_mhz", "frequency", "MHz"},
    {"time_us", "time", "us"},
    {"wavelength_nm", "wavelength", "nm"},
    {"wavenumber_cm^-1", "wavenumber", "cm^-1"},
    {"wavenumber_cm-1", "wavenumber", "cm^-1"},
    {"density_cm^-3", "density", "cm^-3"},
    {"frequency [MHz]", "frequency", "MHz"},
    {"frequency (MHz)", "frequency", "MHz"},
    {"frequency(GHz)", "frequency", "GHz"},
    {"delay_time_ns", "delay_time", "ns"},
    {"time_MS", "time", "ms"},
    {"wavelength_A", "wavelength", "A"},
    {"pressure_torr", "pressure", "Torr"},
    {"i", "i", NULL},
    {"q", "q", NULL},
    {"y", "y", NULL},
    {"counts", "counts", NULL},
    {"signal_1", "signal_1", NULL},
    {"signal_a", "signal_a", NULL},
    {"counts_per_bin", "counts_per_bin", NULL},
    {"x (a.u.)", "x (a.u.)", NULL},
    {"", "", NULL},
};

START_TEST(test_column_name)
{
    const struct column_case *c = &column_cases[_i];
    char base[64] = "junk";
    const cs_unit *u = cs_unit_from_column_name(c->header, base, sizeof base);
    if (c->unit) {
        ck_assert_msg(u != NULL, "'%s': no unit found", c->header);
        ck_assert_str_eq(u->name, c->unit);
    } else {
        ck_assert_msg(u == NULL, "'%s': unit '%s' found", c->header, u ? u->name : "");
    }
    ck_assert_str_eq(base, c->base);
    ck_assert_ptr_eq(cs_unit_from_column_name(c->header, NULL, 0), u);
}
END_TEST

START_TEST(test_column_name_truncates)
{
    /* units.h: base is truncated to fit its buffer and always terminated. */
    char base[4];
    const cs_unit *u = cs_unit_from_column_name("frequency_mhz", base, sizeof base);
    ck_assert_ptr_nonnull(u);
    ck_assert_str_eq(base, "fre");
}
END_TEST

/* ---- air wavelengths --------------------------------------------------------------------- */

START_TEST(test_edlen_formula)
{
    /* B. Edlen, Metrologia 2, 71-80 (1966), dispersion of standard air:
     * (n - 1) 1e8 = 8342.13 + 2406030 / (130 - s^2) + 15997 / (38.9 - s^2), s in um^-1.
     * By hand at lambda_vac = 600 nm: s^2 = 25/9; 2406030 * 9 / 1145 = 18912.0262009;
     * 15997 * 9 / 325.1 = 442.8575823; sum with 8342.13 = 27697.0137832. */
    double s2 = 25.0 / 9.0;
    double formula = 1e-8 * (8342.13 + 2406030.0 / (130.0 - s2) + 15997.0 / (38.9 - s2));
    ck_assert(tu_close(formula, 2.76970137832e-4, 1e-11));
    double nm1 = cs_air_index_edlen1966(600e-9) - 1.0;
    ck_assert_msg(tu_close(nm1, 2.76970137832e-4, 1e-10), "n - 1 = %.12g", nm1);
    /* Normal dispersion (Edlen 1966): n - 1 falls from 400 nm to 800 nm. */
    ck_assert(cs_air_index_edlen1966(400e-9) > cs_air_index_edlen1966(800e-9));
}
END_TEST

START_TEST(test_air_sodium_rubidium)
{
    /* Na D2: vacuum 589.158 326 4 nm (Steck, "Sodium D Line Data", from memory; also in
     * shared/guide/physics.md sect. 7), air 588.995 095 nm (NIST Atomic Spectra Database, from
     * memory). Rb87 D2: vacuum 780.241 209 686 nm (Steck), air about 780.027 nm (from memory).
     * Tolerance 2e-3 nm: the printed air values use other air-index formulas and rounding. */
    double na_air = cs_vacuum_to_air_wavelength(589.1583264e-9);
    ck_assert_msg(fabs(na_air - 588.995095e-9) < 2e-12, "Na D2 air %.9f nm", na_air * 1e9);
    double na_vac = cs_air_to_vacuum_wavelength(588.995095e-9);
    ck_assert_msg(fabs(na_vac - 589.1583264e-9) < 2e-12, "Na D2 vac %.9f nm", na_vac * 1e9);
    double rb_air = cs_vacuum_to_air_wavelength(780.241209686e-9);
    ck_assert_msg(fabs(rb_air - 780.027e-9) < 2e-12, "Rb D2 air %.9f nm", rb_air * 1e9);
    /* shared/guide/physics.md sect. 7: air wavelengths about 0.21 nm shorter at 780 nm. */
    ck_assert(fabs((780.241209686e-9 - rb_air) - 0.21e-9) < 0.01e-9);
}
END_TEST

/* Round trips over the formula's range (Edlen 1966: fitted for about 200 nm .. 2 um). */
static const double round_trip_nm[] = {186.0, 200.0, 400.0, 589.0, 780.0, 1064.0, 1550.0, 2000.0,
                                       10000.0};

START_TEST(test_air_round_trip)
{
    /* Inverse functions by construction (units.h): air -> vac -> air to 1e-12 relative. */
    double lam = round_trip_nm[_i] * 1e-9;
    double vac = cs_air_to_vacuum_wavelength(lam);
    ck_assert(vac > lam);
    double back = cs_vacuum_to_air_wavelength(vac);
    ck_assert_msg(tu_close(back, lam, 1e-12), "%.17g -> %.17g -> %.17g", lam, vac, back);
    double air = cs_vacuum_to_air_wavelength(lam);
    ck_assert(tu_close(cs_air_to_vacuum_wavelength(air), lam, 1e-12));
}
END_TEST

START_TEST(test_air_range)
{
    /* units.h: NaN outside 185 nm .. 20 um; the formula has a pole at 1/sqrt(38.9) um = 160.3 nm
     * (Edlen 1966). */
    ck_assert(isnan(cs_air_index_edlen1966(150e-9)));
    ck_assert(isnan(cs_air_index_edlen1966(1e-6 / sqrt(38.9))));
    ck_assert(isnan(cs_air_index_edlen1966(30e-6)));
    ck_assert(isnan(cs_air_index_edlen1966(0.0)));
    ck_assert(isnan(cs_air_index_edlen1966(-600e-9)));
    ck_assert(isnan(cs_air_index_edlen1966(NAN)));
    ck_assert(isfinite(cs_air_index_edlen1966(185e-9)));
    ck_assert(isfinite(cs_air_index_edlen1966(20e-6)));
    ck_assert(isnan(cs_air_to_vacuum_wavelength(0.0)));
    ck_assert(isnan(cs_air_to_vacuum_wavelength(100e-9)));
    ck_assert(isnan(cs_vacuum_to_air_wavelength(-1.0)));
}
END_TEST

/* ---- spectral axes ----------------------------------------------------------------------- */

START_TEST(test_axis_wavelength_descends)
{
    /* nu = c / lambda (exact c, SI Brochure 9th ed.): an ascending wavelength axis gives a
     * descending frequency axis; units.h says the points are not reordered. */
    double x[3] = {770.0, 780.0, 790.0};
    cs_axis_conversion conv = {0, 0, -1, -1};
    cs_error err;
    ck_assert_int_eq(cs_axis_to_hz(x, NULL, NULL, 3, cs_unit_find("nm"), &conv, &err), CS_OK);
    ck_assert(x[0] > x[1] && x[1] > x[2]);
    ck_assert(tu_close(x[0], C_SI / 770e-9, 1e-15));
    ck_assert(tu_close(x[2], C_SI / 790e-9, 1e-15));
    ck_assert_int_eq(conv.reversed, 1);
    ck_assert_int_eq(conv.jacobian_applied, 0);
}
END_TEST

START_TEST(test_axis_jacobian_value)
{
    /* |dlambda/dnu| = lambda^2 / c: 1 per nm at 780 nm is (780e-9)^2 / c / 1e-9 per Hz
     * (change of variables with the exact c). */
    double x[1] = {780.0}, y[1] = {1.0}, s[1] = {0.5};
    cs_axis_conversion conv = {0, 1, 0, 0};
    cs_error err;
    ck_assert_int_eq(cs_axis_to_hz(x, y, s, 1, cs_unit_find("nm"), &conv, &err), CS_OK);
    double expect = 780e-9 * 780e-9 / C_SI / 1e-9;
    ck_assert_msg(tu_close(y[0], expect, 1e-14), "y = %.17g, expected %.17g", y[0], expect);
    ck_assert(tu_close(s[0], 0.5 * expect, 1e-14));
    ck_assert_int_eq(conv.jacobian_applied, 1);
    ck_assert_int_eq(conv.reversed, 1);
}
END_TEST

/* Line area under a change of variables: integral of S_x dx equals integral of S_nu dnu with
 * S_nu = S_x |dx/dnu| (any calculus text); both integrals by the trapezoid rule on a fine grid
 * of a narrow Gaussian, whose discretisation error is far below the tolerance. Centres: Rb D2
 * (shared/guide/physics.md sect. 7) in the axis unit, and some plain detuning axes. */
static const struct area_case {
    const char *unit;
    int air;
    double centre, width;
} area_cases[] = {
    {"nm", 0, 780.241209686, 0.01},
    {"nm", 1, 780.027, 0.01},
    {"A", 0, 7802.41209686, 0.1},
    {"um", 1, 0.589, 2e-5},
    {"cm^-1", 0, 12816.5, 0.2},
    {"THz", 0, 384.2304844685, 0.001},
    {"kHz", 0, 0.0, 50.0},
    {"MHz", 0, -20.0, 3.0},
    {"rad/s", 0, 0.0, 1e6},
};

static double trapezoid(const double *x, const double *y, size_t n)
{
    double sum = 0.0;
    for (size_t i = 0; i + 1 < n; i++)
        sum += 0.5 * (x[i + 1] - x[i]) * (y[i] + y[i + 1]);
    return fabs(sum);
}

START_TEST(test_axis_area)
{
    const struct area_case *c = &area_cases[_i];
    enum { N = 20001 };
    double *x = malloc(N * sizeof *x), *y = malloc(N * sizeof *y), *s = malloc(N * sizeof *s);
    ck_assert(x && y && s);
    for (size_t i = 0; i < N; i++) {
        x[i] = c->centre + c->width * (-12.0 + 24.0 * (double)i / (N - 1));
        double z = (x[i] - c->centre) / c->width;
        y[i] = exp(-0.5 * z * z);
        s[i] = 0.1 * y[i];
    }
    double before = trapezoid(x, y, N);
    cs_axis_conversion conv = {c->air, 1, 0, 0};
    cs_error err;
    int rc = cs_axis_to_hz(x, y, s, N, cs_unit_find(c->unit), &conv, &err);
    ck_assert_msg(rc == CS_OK, "%s: %s", c->unit, err.msg);
    ck_assert_int_eq(conv.jacobian_applied, 1);
    double after = trapezoid(x, y, N);
    ck_assert_msg(tu_close(after, before, 1e-9), "%s air=%d: area %.15g before, %.15g after",
                  c->unit, c->air, before, after);
    ck_assert(tu_close(s[N / 2], 0.1 * y[N / 2], 1e-15));
    free(x);
    free(y);
    free(s);
}
END_TEST

START_TEST(test_axis_errors)
{
    /* Error contract of cs_axis_to_hz in units.h: CS_EDATA naming the 0-based index, arrays left
     * unchanged; CS_EUNIT for a non-spectral unit. A wavelength must be positive (nu = c/lambda). */
    cs_error err;
    double x[4] = {780.0, 779.0, 0.0, 781.0}, y[4] = {1, 2, 3, 4};
    cs_axis_conversion conv = {0, 1, 0, 0};
    ck_assert_int_eq(cs_axis_to_hz(x, y, NULL, 4, cs_unit_find("nm"), &conv, &err), CS_EDATA);
    ck_assert_msg(strstr(err.msg, "index 2") != NULL, "message: %s", err.msg);
    ck_assert(x[0] == 780.0 && x[1] == 779.0 && y[0] == 1.0 && y[3] == 4.0);

    double neg[2] = {780.0, -1.0};
    ck_assert_int_eq(cs_axis_to_hz(neg, NULL, NULL, 2, cs_unit_find("nm"), NULL, &err), CS_EDATA);
    ck_assert_msg(strstr(err.msg, "index 1") != NULL, "message: %s", err.msg);
    ck_assert(neg[0] == 780.0);

    double wn[2] = {12816.5, 0.0};
    ck_assert_int_eq(cs_axis_to_hz(wn, NULL, NULL, 2, cs_unit_find("cm^-1"), NULL, &err),
                     CS_EDATA);
    ck_assert(strstr(err.msg, "index 1") != NULL);

    double fr[3] = {-5.0, NAN, 5.0};
    ck_assert_int_eq(cs_axis_to_hz(fr, NULL, NULL, 3, cs_unit_find("MHz"), NULL, &err), CS_EDATA);
    ck_assert(strstr(err.msg, "index 1") != NULL);

    double t[1] = {1.0};
    ck_assert_int_eq(cs_axis_to_hz(t, NULL, NULL, 1, cs_unit_find("us"), NULL, &err), CS_EUNIT);
    ck_assert(strstr(err.msg, "'us'") != NULL);
    ck_assert_int_eq(cs_axis_to_hz(t, NULL, NULL, 1, NULL, NULL, &err), CS_EUNIT);

    cs_axis_conversion air = {1, 0, 0, 0};
    ck_assert_int_eq(cs_axis_to_hz(t, NULL, NULL, 1, cs_unit_find("cm^-1"), &air, &err),
                     CS_EINVAL);
    double uv[2] = {589.0, 100.0};
    ck_assert_int_eq(cs_axis_to_hz(uv, NULL, NULL, 2, cs_unit_find("nm"), &air, &err), CS_EDATA);
    ck_assert(strstr(err.msg, "index 1") != NULL);
    ck_assert(t[0] == 1.0 && uv[0] == 589.0);
}
END_TEST

START_TEST(test_axis_frequency_plain)
{
    /* Detuning axes may be negative; rad/s -> Hz by 1/(2 pi) and densities per (rad/s) become
     * per Hz by 2 pi (ISO 80000-3, omega = 2 pi f). Without y_is_density y is untouched. */
    double x[2] = {-1.5, 2.0}, y[2] = {1.0, 1.0};
    cs_error err;
    ck_assert_int_eq(cs_axis_to_hz(x, y, NULL, 2, cs_unit_find("MHz"), NULL, &err), CS_OK);
    ck_assert(x[0] == -1.5e6 && x[1] == 2e6 && y[0] == 1.0);
    double w[1] = {TWO_PI_T * 1e6}, yw[1] = {1.0};
    cs_axis_conversion conv = {0, 1, 0, 0};
    ck_assert_int_eq(cs_axis_to_hz(w, yw, NULL, 1, cs_unit_find("rad/s"), &conv, &err), CS_OK);
    ck_assert(tu_close(w[0], 1e6, 1e-15));
    ck_assert(tu_close(yw[0], TWO_PI_T, 1e-15));
    ck_assert_int_eq(conv.reversed, 0);
}
END_TEST

/* ---- formatting -------------------------------------------------------------------------- */

/* Sources: examples in include/collshift/units.h ("9.2 GHz", "20 us", "3.2e+13 cm^-3"); prefix
 * choice per SI Brochure 9th ed., Table 7; %g-style significant digits per C11 7.21.6.1. */
static const struct format_case {
    double si;
    cs_dim dim;
    int digits;
    const char *text;
} format_cases[] = {
    {9.2e9, CS_DIM_FREQUENCY, 6, "9.2 GHz"},
    {2e-5, CS_DIM_TIME, 6, "20 us"},
    {3.2e19, CS_DIM_DENSITY, 6, "3.2e+13 cm^-3"},
    {-1.5e6, CS_DIM_FREQUENCY, 6, "-1.5 MHz"},
    {999.96e3, CS_DIM_FREQUENCY, 4, "1 MHz"},
    {999.96e3, CS_DIM_FREQUENCY, 6, "999.96 kHz"},
    {500e3, CS_DIM_FREQUENCY, 2, "500 kHz"},
    {384.2304844685766e12, CS_DIM_FREQUENCY, 13, "384.2304844686 THz"},
    {0.5, CS_DIM_FREQUENCY, 6, "0.5 Hz"},
    {0.0, CS_DIM_FREQUENCY, 6, "0 Hz"},
    {780.241209686e-9, CS_DIM_LENGTH, 12, "780.241209686 nm"},
    {2.5e-3, CS_DIM_LENGTH, 6, "2.5 mm"},
    {1.5e-6, CS_DIM_LENGTH, 6, "1.5 um"},
    {26.2348e-9, CS_DIM_TIME, 6, "26.2348 ns"},
    {1e-15, CS_DIM_TIME, 3, "1e-15 s"},
    {1500.0, CS_DIM_TIME, 3, "1500 s"},
    {7e17, CS_DIM_PRESSURE, 3, "7e+11 MPa"},
    {7e11, CS_DIM_PRESSURE, 3, "700000 MPa"},
    {273.15, CS_DIM_TEMPERATURE, 6, "273.15 K"},
    {101325.0, CS_DIM_PRESSURE, 6, "101.325 kPa"},
    {1.2e-3, CS_DIM_PRESSURE, 3, "1.2 mPa"},
    {100.0, CS_DIM_WAVENUMBER, 6, "1 cm^-1"},
    {3.8117e7, CS_DIM_RATE, 5, "3.8117e+07 s^-1"},
    {0.25, CS_DIM_DIMENSIONLESS, 6, "0.25"},
    {NAN, CS_DIM_FREQUENCY, 6, "nan Hz"},
};

START_TEST(test_format)
{
    const struct format_case *c = &format_cases[_i];
    char buf[64];
    ck_assert_ptr_eq(cs_quantity_format(c->si, c->dim, c->digits, buf, sizeof buf), buf);
    ck_assert_str_eq(buf, c->text);
    /* Every unit shown parses back (units.h). */
    if (isfinite(c->si) && c->dim != CS_DIM_DIMENSIONLESS) {
        double si = NAN;
        cs_error err;
        ck_assert_msg(cs_quantity_parse(buf, c->dim, NULL, &si, NULL, NULL, &err) == CS_OK,
                      "'%s': %s", buf, err.msg);
        ck_assert(tu_close(si, c->si, 0.6 * pow(10.0, 1 - c->digits)));
    }
}
END_TEST

START_TEST(test_format_small_buffer)
{
    /* snprintf semantics (C11 7.21.6.5): truncated and terminated. */
    char buf[4];
    cs_quantity_format(9.2e9, CS_DIM_FREQUENCY, 6, buf, sizeof buf);
    ck_assert_str_eq(buf, "9.2");
}
END_TEST

#define N_OF(a) ((int)(sizeof(a) / sizeof((a)[0])))

static Suite *units_suite(void)
{
    Suite *s = suite_create("units");
    TCase *tc;

    tc = tcase_create("constants");
    tcase_add_test(tc, test_speed_of_light);
    tcase_add_test(tc, test_rb87_d2_frequency);
    tcase_add_test(tc, test_wavenumber_in_ghz);
    tcase_add_loop_test(tc, test_conversion, 0, N_OF(conversion_cases));
    tcase_add_test(tc, test_si_round_trip);
    suite_add_tcase(s, tc);

    tc = tcase_create("lookup");
    tcase_add_loop_test(tc, test_lookup, 0, N_OF(lookup_cases));
    suite_add_tcase(s, tc);

    tc = tcase_create("parse");
    tcase_add_loop_test(tc, test_parse_good, 0, N_OF(parse_good));
    tcase_add_loop_test(tc, test_parse_bad, 0, N_OF(parse_bad));
    suite_add_tcase(s, tc);

    tc = tcase_create("column_names");
    tcase_add_loop_test(tc, test_column_name, 0, N_OF(column_cases));
    tcase_add_test(tc, test_column_name_truncates);
    suite_add_tcase(s, tc);

    tc = tcase_create("air");
    tcase_add_test(tc, test_edlen_formula);
    tcase_add_test(tc, test_air_sodium_rubidium);
    tcase_add_loop_test(tc, test_air_round_trip, 0, N_OF(round_trip_nm));
    tcase_add_test(tc, test_air_range);
    suite_add_tcase(s, tc);

    tc = tcase_create("axis");
    tcase_add_test(tc, test_axis_wavelength_descends);
    tcase_add_test(tc, test_axis_jacobian_value);
    tcase_add_loop_test(tc, test_axis_area, 0, N_OF(area_cases));
    tcase_add_test(tc, test_axis_errors);
    tcase_add_test(tc, test_axis_frequency_plain);
    suite_add_tcase(s, tc);

    tc = tcase_create("format");
    tcase_add_loop_test(tc, test_format, 0, N_OF(format_cases));
    tcase_add_test(tc, test_format_small_buffer);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(units_suite());
    srunner_run_all(sr, CK_ENV);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
