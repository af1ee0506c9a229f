/* The built-in table of atomic lines, user-specified lines, dipole parsing and derived line data.
 *
 * Each entry names the published source of its vacuum wavelength and natural width, and how sure
 * the value is, with the marks of ../shared/guide/physics.md:
 *   "confirmed in stored source"  read in a public copy of the document cited;
 *   "from memory"                 recalled, not re-read (check against the source before relying
 *                                 on the last digits);
 * plus "(corroborated)" where public secondary notes that quote the primary source agree.
 * Widths are stored as Gamma0 = 1/tau in s^-1, written as 2 pi x (natural FWHM in Hz) where the
 * source prints Gamma/2pi, and as 1/tau or Gamma in s^-1 where it prints those.
 *
 * Caesium: Steck's Cs sheet changed the 6P lifetimes between revisions. The names cs-d1/cs-d2 carry
 * the current revision (rev. 2.3.4: tau = 34.791 ns, 30.405 ns), cs-d1-old/cs-d2-old the older one
 * (rev. 2.1.x: Gamma/2pi = 4.5612 MHz, 5.2227 MHz). Atomic masses (only used for Doppler widths)
 * are the atomic-mass-evaluation values, from memory. */
#include <collshift/theory.h>

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PI 3.14159265358979323846264338327950288
#define TWO_PI (2.0 * PI)
/* Gamma0 in s^-1 from a natural FWHM in Hz. */
#define FWHM(hz) (TWO_PI * (hz))

#define STECK_RB85 "D. A. Steck, \"Rubidium 85 D Line Data\", rev. 2.2.3 (2021), http://steck.us/alkalidata, Tables 3-4"
#define STECK_RB87                                                                                 \
    "D. A. Steck, \"Rubidium 87 D Line Data\", http://steck.us/alkalidata (wavelength); width from "  \
    "Steck Rb85 rev. 2.2.3, Table 3 (same 5P lifetimes for both isotopes)"
#define STECK_CS_NEW "D. A. Steck, \"Cesium D Line Data\", rev. 2.3.4 (2025), http://steck.us/alkalidata"
#define STECK_CS_OLD "D. A. Steck, \"Cesium D Line Data\", rev. 2.1.x, http://steck.us/alkalidata"
#define TIECKE_K "T. G. Tiecke, \"Properties of Potassium\" (2010, rev. 2019)"
#define STECK_NA "D. A. Steck, \"Sodium D Line Data\", http://steck.us/alkalidata"

static const cs_line line_table[] = {
    {"rb87-d2", "87Rb D2 5S1/2 -> 5P3/2", "Rb", 780.241209686e-9, FWHM(6.0666e6), 0.5, 1.5,
     86.909180531, STECK_RB87,
     "width confirmed in stored source (Steck Rb85 rev. 2.2.3); wavelength from memory, consistent "
     "with the confirmed 85Rb frequency plus the isotope shift",
     0u},
    {"rb87-d1", "87Rb D1 5S1/2 -> 5P1/2", "Rb", 794.978851156e-9, FWHM(5.7500e6), 0.5, 0.5,
     86.909180531, STECK_RB87,
     "width confirmed in stored source (Steck Rb85 rev. 2.2.3); wavelength from memory, consistent "
     "with the confirmed 85Rb frequency plus the isotope shift",
     0u},
    {"rb85-d2", "85Rb D2 5S1/2 -> 5P3/2", "Rb", 780.241368271e-9, FWHM(6.0666e6), 0.5, 1.5,
     84.911789737, STECK_RB85, "confirmed in stored source", 0u},
    {"rb85-d1", "85Rb D1 5S1/2 -> 5P1/2", "Rb", 794.979014933e-9, FWHM(5.7500e6), 0.5, 0.5,
     84.911789737, STECK_RB85, "confirmed in stored source", 0u},
    {"cs-d2", "133Cs D2 6S1/2 -> 6P3/2 (current Steck revision: tau = 30.405 ns)", "Cs",
     852.34727582e-9, 32.889e6, 0.5, 1.5, 132.905451961, STECK_CS_NEW,
     "from memory (corroborated by secondary notes quoting rev. 2.3.4)", 0u},
    {"cs-d1", "133Cs D1 6S1/2 -> 6P1/2 (current Steck revision: tau = 34.791 ns)", "Cs",
     894.59295986e-9, 28.743e6, 0.5, 0.5, 132.905451961, STECK_CS_NEW,
     "from memory (corroborated by secondary notes quoting rev. 2.3.4)", 0u},
    {"cs-d2-old", "133Cs D2 6S1/2 -> 6P3/2 (older Steck revision: Gamma/2pi = 5.2227 MHz)", "Cs",
     852.34727582e-9, FWHM(5.2227e6), 0.5, 1.5, 132.905451961, STECK_CS_OLD, "from memory", 0u},
    {"cs-d1-old", "133Cs D1 6S1/2 -> 6P1/2 (older Steck revision: Gamma/2pi = 4.5612 MHz)", "Cs",
     894.59295986e-9, FWHM(4.5612e6), 0.5, 0.5, 132.905451961, STECK_CS_OLD, "from memory", 0u},
    {"k39-d2", "39K D2 4S1/2 -> 4P3/2", "K", 766.700921822e-9, FWHM(6.035e6), 0.5, 1.5,
     38.963706486, TIECKE_K, "from memory", 0u},
    {"k39-d1", "39K D1 4S1/2 -> 4P1/2", "K", 770.108385049e-9, FWHM(5.956e6), 0.5, 0.5,
     38.963706486, TIECKE_K, "from memory", 0u},
    {"na-d2", "23Na D2 3S1/2 -> 3P3/2", "Na", 589.1583264e-9, FWHM(9.7946e6), 0.5, 1.5,
     22.989769282, STECK_NA, "from memory", 0u},
    {"na-d1", "23Na D1 3S1/2 -> 3P1/2", "Na", 589.7558147e-9, FWHM(9.7646e6), 0.5, 0.5,
     22.989769282, STECK_NA, "from memory", 0u},
    /* 88Sr 5s2 1S0 -> 5s5p 1P1. Lifetime 5.216(6)(13) ns: I. Puljic et al., "Lifetime measurement
     * of the 5s5p 1P1 state in strontium", arXiv:2501.07395 (2025), abstract; agrees with
     * 5.22(3) ns of S. B. Nagel et al., Phys. Rev. Lett. 94 (2005), abstract (both read in stored
     * copies). Gamma/2pi = 30.51 MHz; values of 30.2 MHz (tau = 5.263 ns) and 2pi x 32 MHz are also
     * quoted. Wavelength from the 1P1 level 21 698.452 cm^-1 (NIST ASD, from memory). */
    {"sr-461", "88Sr 5s2 1S0 -> 5s5p 1P1 (461 nm)", NULL, 460.8622e-9, 1.0 / 5.216e-9, 0.0, 1.0,
     87.9056125,
     "tau = 5.216 ns: I. Puljic et al., arXiv:2501.07395 (2025); lambda from the NIST ASD 1P1 level "
     "21698.452 cm^-1",
     "lifetime confirmed in stored source (abstract); wavelength from memory", 0u},
    /* 88Sr 5s2 1S0 -> 5s5p 3P1. Frequency 434 829 121 311(10) kHz: G. Ferrari et al., Phys. Rev.
     * Lett. 91, 243002 (2003) (abstract read in a stored copy). Width 7.4 kHz from memory (7.5 kHz
     * is also quoted, e.g. arXiv:2403.18796). */
    {"sr-689", "88Sr 5s2 1S0 -> 5s5p 3P1 (689 nm intercombination line)", NULL,
     CS_SPEED_OF_LIGHT / 434829121311e3, FWHM(7.4e3), 0.0, 1.0, 87.9056125,
     "nu0 = 434 829 121 311 kHz: G. Ferrari et al., Phys. Rev. Lett. 91, 243002 (2003); "
     "Gamma/2pi = 7.4 kHz (commonly quoted)",
     "frequency confirmed in stored source (abstract); width from memory", 0u},
    /* 40Ca 4s2 1S0 -> 4s4p 1P1. Level 23 652.304 cm^-1 and Gamma/2pi = 34.6 MHz, from memory
     * (NIST ASD A = 2.18e8 s^-1 would give 34.7 MHz). */
    {"ca-423", "40Ca 4s2 1S0 -> 4s4p 1P1 (423 nm)", NULL, 422.7918e-9, FWHM(34.6e6), 0.0, 1.0,
     39.962590863,
     "lambda from the NIST ASD 1P1 level 23652.304 cm^-1; Gamma/2pi = 34.6 MHz (commonly quoted; "
     "NIST ASD A = 2.18e8 s^-1 gives 34.7 MHz)",
     "from memory", 0u},
};
#define NLINES (sizeof line_table / sizeof line_table[0])

static const struct alias {
    const char *alias;
    const char *name;
} aliases[] = {
    {"rb-d1", "rb87-d1"},     {"rb-d2", "rb87-d2"},     {"k-d1", "k39-d1"},
    {"k-d2", "k39-d2"},       {"cs133-d1", "cs-d1"},    {"cs133-d2", "cs-d2"},
    {"na23-d1", "na-d1"},     {"na23-d2", "na-d2"},
};

/* ASCII case-insensitive equality. */
static int same_name(const char *a, const char *b)
{
    for (; *a && *b; a++, b++)
        if (tolower((unsigned char)*a) != tolower((unsigned char)*b))
            return 0;
    return *a == *b;
}

size_t cs_line_count(void)
{
    return NLINES;
}

const cs_line *cs_line_get(size_t i)
{
    return i < NLINES ? &line_table[i] : NULL;
}

const cs_line *cs_line_find(const char *name)
{
    if (!name)
        return NULL;
    for (size_t i = 0; i < sizeof aliases / sizeof aliases[0]; i++)
        if (same_name(name, aliases[i].alias)) {
            name = aliases[i].name;
            break;
        }
    for (size_t i = 0; i < NLINES; i++)
        if (same_name(name, line_table[i].name))
            return &line_table[i];
    return NULL;
}

void cs_line_spec_init(cs_line_spec *spec)
{
    if (!spec)
        return;
    spec->wavelength_m = NAN;
    spec->frequency_hz = NAN;
    spec->gamma0 = NAN;
    spec->dipole_cm = NAN;
    spec->jg = NAN;
    spec->je = NAN;
    spec->mass_u = NAN;
}

/* w0^3 / (3 pi eps0 hbar c^3): Gamma0 = this * d^2 for the two-level dipole d (C m). */
static double rate_per_dipole2(double lambda)
{
    double w0 = TWO_PI * CS_SPEED_OF_LIGHT / lambda;
    double c = CS_SPEED_OF_LIGHT;
    return w0 * w0 * w0 / (3.0 * PI * CS_THEORY_EPSILON0 * CS_THEORY_HBAR * c * c * c);
}

static int check_j(double j, const char *what, cs_error *err)
{
    if (!isfinite(j) || j < 0.0 || j > 100.0 || fabs(2.0 * j - nearbyint(2.0 * j)) > 1e-9)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "%s = %g: expected a non-negative multiple of 1/2", what, j);
    return CS_OK;
}

static int positive(double v, const char *what, cs_error *err)
{
    if (!isfinite(v) || v <= 0.0)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "%s = %g: must be positive and finite",
                            what, v);
    return CS_OK;
}

int cs_line_custom(const cs_line *base, const cs_line_spec *spec, cs_line *out, cs_error *err)
{
    if (!spec || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "custom line: NULL argument");
    int has_wl = !isnan(spec->wavelength_m), has_nu = !isnan(spec->frequency_hz);
    int has_g = !isnan(spec->gamma0), has_d = !isnan(spec->dipole_cm);
    int has_jg = !isnan(spec->jg), has_je = !isnan(spec->je);
    if (has_wl && has_nu)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "custom line: give the wavelength or the frequency, not both");
    if (has_g && has_d)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "custom line: give the decay rate Gamma0 or the dipole, not both");
    if (has_jg != has_je)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "custom line: give both J_g and J_e");
    if (!base) {
        if (!has_wl && !has_nu)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "custom line: the wavelength or the frequency is missing");
        if (!has_g && !has_d)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "custom line: the decay rate Gamma0 or the dipole is missing");
        if (!has_jg)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "custom line: J_g and J_e are missing");
    }
    int rc;
    if (has_wl && (rc = positive(spec->wavelength_m, "wavelength", err)) != CS_OK)
        return rc;
    if (has_nu && (rc = positive(spec->frequency_hz, "frequency", err)) != CS_OK)
        return rc;
    if (has_g && (rc = positive(spec->gamma0, "decay rate Gamma0", err)) != CS_OK)
        return rc;
    if (has_d && (rc = positive(spec->dipole_cm, "dipole", err)) != CS_OK)
        return rc;
    if (!isnan(spec->mass_u) && (rc = positive(spec->mass_u, "mass", err)) != CS_OK)
        return rc;

    cs_line l;
    if (base) {
        l = *base;
    } else {
        memset(&l, 0, sizeof l);
        l.name = "custom";
        l.label = "user-specified line";
        l.element = NULL;
        l.mass_u = NAN;
        l.source = "user-specified";
        l.mark = "user-specified";
    }
    if (has_jg) {
        if ((rc = check_j(spec->jg, "J_g", err)) != CS_OK || (rc = check_j(spec->je, "J_e", err)) != CS_OK)
            return rc;
        double dj = spec->je - spec->jg;
        if (fabs(dj) > 1.0 + 1e-9 || fabs(dj - nearbyint(dj)) > 1e-9)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "J_g = %g, J_e = %g: not an electric-dipole line (|J_e - J_g| must "
                                "be 0 or 1)", spec->jg, spec->je);
        if (spec->jg == 0.0 && spec->je == 0.0)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "J_g = 0, J_e = 0: not an electric-dipole line");
        l.jg = spec->jg;
        l.je = spec->je;
        l.user |= CS_LINE_USER_J;
    }
    if (has_wl || has_nu) {
        l.wavelength_m = has_wl ? spec->wavelength_m : CS_SPEED_OF_LIGHT / spec->frequency_hz;
        l.user |= CS_LINE_USER_WAVELENGTH;
    }
    if (has_g) {
        l.gamma0 = spec->gamma0;
        l.user |= CS_LINE_USER_GAMMA;
    } else if (has_d) {
        /* Steck's convention: the two-level d^2 = (2J_g+1)/(2J_e+1) |<J_g||er||J_e>|^2. */
        double d2 = (2.0 * l.jg + 1.0) / (2.0 * l.je + 1.0) * spec->dipole_cm * spec->dipole_cm;
        l.gamma0 = rate_per_dipole2(l.wavelength_m) * d2;
        l.user |= CS_LINE_USER_GAMMA;
    }
    if (!isnan(spec->mass_u)) {
        l.mass_u = spec->mass_u;
        l.user |= CS_LINE_USER_MASS;
    }
    if (!isfinite(l.gamma0) || l.gamma0 <= 0.0)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "custom line: decay rate out of range");
    *out = l;
    return CS_OK;
}

/* ---- dipole parsing ----------------------------------------------------------------------- */

static const struct dipole_unit {
    const char *name;
    double scale; /* C m per unit */
} dipole_units[] = {
    {"ea0", CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS},
    {"e a0", CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS},
    {"e*a0", CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS},
    {"e.a0", CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS},
    {"e\xC2\xB7" "a0", CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS},
    {"au", CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS},
    {"a.u.", CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS},
    {"C m", 1.0},
    {"Cm", 1.0},
    {"C*m", 1.0},
    {"C.m", 1.0},
    {"C\xC2\xB7m", 1.0},
    /* 1 D = 1e-21 / c C m (the debye defined as 1e-18 statC cm). */
    {"D", 1e-21 / CS_SPEED_OF_LIGHT},
    {"debye", 1e-21 / CS_SPEED_OF_LIGHT},
};

int cs_dipole_parse(const char *text, double *cm, cs_error *err)
{
    if (!text || !cm)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "dipole: NULL argument");
    const char *p = text;
    while (isspace((unsigned char)*p))
        p++;
    if (*p == '\0')
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "'%s': empty dipole", text);
    if ((p[0] == '0' && (p[1] == 'x' || p[1] == 'X')) ||
        ((p[0] == '+' || p[0] == '-') && p[1] == '0' && (p[2] == 'x' || p[2] == 'X')))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "'%s': not a decimal number", text);
    char *end;
    errno = 0;
    double v = strtod(p, &end);
    if (end == p)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "'%s': not a number", text);
    if (errno == ERANGE || !isfinite(v))
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "'%s': out of range", text);
    while (isspace((unsigned char)*end))
        end++;
    size_t n = strlen(end);
    while (n > 0 && isspace((unsigned char)end[n - 1]))
        n--;
    if (n == 0)
        return cs_error_set(err, CS_EUNIT, NULL, -1, -1,
                            "'%s': the dipole needs a unit (ea0, C m or D)", text);
    for (size_t i = 0; i < sizeof dipole_units / sizeof dipole_units[0]; i++) {
        const char *u = dipole_units[i].name;
        if (strlen(u) == n && strncmp(end, u, n) == 0) {
            *cm = v * dipole_units[i].scale;
            return CS_OK;
        }
    }
    return cs_error_set(err, CS_EUNIT, NULL, -1, -1,
                        "'%s': unknown dipole unit '%.*s' (expected ea0, C m or D)", text, (int)n,
                        end);
}

/* ---- derived line data -------------------------------------------------------------------- */

double cs_line_frequency(const cs_line *l)
{
    return l ? CS_SPEED_OF_LIGHT / l->wavelength_m : NAN;
}

double cs_line_wavenumber(const cs_line *l)
{
    return l ? TWO_PI / l->wavelength_m : NAN;
}

double cs_line_degeneracy_ratio(const cs_line *l)
{
    return l ? (2.0 * l->je + 1.0) / (2.0 * l->jg + 1.0) : NAN;
}

double cs_line_oscillator_strength(const cs_line *l)
{
    if (!l)
        return NAN;
    /* Steck, Rb85 D Line Data, Eq. (4): Gamma = e^2 w0^2 / (2 pi eps0 m_e c^3) (g_g/g_e) f. */
    double w0 = TWO_PI * CS_SPEED_OF_LIGHT / l->wavelength_m;
    double c = CS_SPEED_OF_LIGHT, e = CS_THEORY_ELEMENTARY_CHARGE;
    double k = e * e * w0 * w0 / (TWO_PI * CS_THEORY_EPSILON0 * CS_THEORY_ELECTRON_MASS * c * c * c);
    return l->gamma0 * cs_line_degeneracy_ratio(l) / k;
}

double cs_line_dipole_two_level(const cs_line *l)
{
    return l ? sqrt(l->gamma0 / rate_per_dipole2(l->wavelength_m)) : NAN;
}

double cs_line_dipole_reduced(const cs_line *l)
{
    return l ? cs_line_dipole_two_level(l) * sqrt(cs_line_degeneracy_ratio(l)) : NAN;
}
