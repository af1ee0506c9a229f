/* Units: unit table and lookup, quantity parsing and formatting, air wavelengths, spectral axes. */
#include <collshift/units.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/*
 * Notes on three choices made here.
 *
 * Letter case. Unit symbols are case-sensitive (SI Brochure, 9th ed., sect. 5.2): mHz is
 * millihertz, MHz megahertz. Column headers and hand-typed options are often all-lower or
 * all-upper case ("frequency_mhz", "TIME_US"), so a spelling that does not match exactly is
 * matched ignoring case, under two conditions:
 *   1. the spelling is in a single case: all its ASCII letters are lower case, or all are upper
 *      case. A mixed-case spelling ("mHz", "Ms", "Mbar", "nM") is taken as a deliberate choice
 *      of prefix and must match exactly; it is never turned into a unit 10^6 or 10^9 away;
 *   2. it has at least two ASCII letters: single-letter symbols (m/M, s/S, k/K, a/A) are always
 *      case-sensitive, so "a" is not an angstrom and "S" is not a second.
 * When the folded spelling fits more than one unit ("mpa": mPa or MPa) the lookup fails. So
 * "mhz" and "MHZ" give MHz (the table has no millihertz), "ms" is milliseconds by exact match,
 * "MS" is milliseconds (the only unit that folds to "ms"), "Ms" and "mHz" are unknown.
 *
 * Air wavelengths. Edlen's 1966 formula for standard air has poles at 87.7 nm and 160.3 nm and
 * was fitted for 200 nm .. 2 um; below about 185 nm air absorbs and wavelengths are always quoted
 * in vacuum. cs_air_index_edlen1966 therefore returns NaN outside 185 nm .. 20 um.
 *
 * Spectral densities. With x the axis value in unit u and nu in Hz, a density per unit of x
 * becomes a density per Hz when multiplied by |dx/dnu|, so that the integral over a line keeps
 * its value. For an air wavelength axis, lambda_air = lambda_vac / n(lambda_vac) and the
 * derivative dlambda_air/dlambda_vac = (1 + sigma * (dn/dsigma) / n) / n is included exactly
 * (the dispersion term is about 1e-5 of the result in the visible; it costs one more line).
 */

#define TWO_PI 6.283185307179586476925286766559

enum {
    U_HZ, U_KHZ, U_MHZ, U_GHZ, U_THZ, U_RAD_S,
    U_PER_M, U_PER_CM,
    U_M, U_CM, U_MM, U_UM, U_NM, U_PM, U_ANGSTROM,
    U_S, U_MS, U_US, U_NS, U_PS, U_FS,
    U_PER_M3, U_PER_CM3,
    U_K, U_MK, U_UK, U_DEGC,
    U_MPA_MILLI, U_PA, U_HPA, U_KPA, U_MPA_MEGA, U_MBAR, U_BAR, U_MTORR, U_TORR, U_ATM,
    U_PER_S, U_PER_US, U_PER_NS,
    U_ONE, U_PERCENT,
    U_COUNT
};

/* 1 Torr = 101325/760 Pa and 1 atm = 101325 Pa exactly (ISO 80000-4; NIST SP 811, App. B). */
static const cs_unit units[U_COUNT] = {
    [U_HZ] = {"Hz", CS_DIM_FREQUENCY, 1.0, 0.0},
    [U_KHZ] = {"kHz", CS_DIM_FREQUENCY, 1e3, 0.0},
    [U_MHZ] = {"MHz", CS_DIM_FREQUENCY, 1e6, 0.0},
    [U_GHZ] = {"GHz", CS_DIM_FREQUENCY, 1e9, 0.0},
    [U_THZ] = {"THz", CS_DIM_FREQUENCY, 1e12, 0.0},
    [U_RAD_S] = {"rad/s", CS_DIM_FREQUENCY, 1.0 / TWO_PI, 0.0},
    [U_PER_M] = {"m^-1", CS_DIM_WAVENUMBER, 1.0, 0.0},
    [U_PER_CM] = {"cm^-1", CS_DIM_WAVENUMBER, 1e2, 0.0},
    [U_M] = {"m", CS_DIM_LENGTH, 1.0, 0.0},
    [U_CM] = {"cm", CS_DIM_LENGTH, 1e-2, 0.0},
    [U_MM] = {"mm", CS_DIM_LENGTH, 1e-3, 0.0},
    [U_UM] = {"um", CS_DIM_LENGTH, 1e-6, 0.0},
    [U_NM] = {"nm", CS_DIM_LENGTH, 1e-9, 0.0},
    [U_PM] = {"pm", CS_DIM_LENGTH, 1e-12, 0.0},
    [U_ANGSTROM] = {"A", CS_DIM_LENGTH, 1e-10, 0.0},
    [U_S] = {"s", CS_DIM_TIME, 1.0, 0.0},
    [U_MS] = {"ms", CS_DIM_TIME, 1e-3, 0.0},
    [U_US] = {"us", CS_DIM_TIME, 1e-6, 0.0},
    [U_NS] = {"ns", CS_DIM_TIME, 1e-9, 0.0},
    [U_PS] = {"ps", CS_DIM_TIME, 1e-12, 0.0},
    [U_FS] = {"fs", CS_DIM_TIME, 1e-15, 0.0},
    [U_PER_M3] = {"m^-3", CS_DIM_DENSITY, 1.0, 0.0},
    [U_PER_CM3] = {"cm^-3", CS_DIM_DENSITY, 1e6, 0.0},
    [U_K] = {"K", CS_DIM_TEMPERATURE, 1.0, 0.0},
    [U_MK] = {"mK", CS_DIM_TEMPERATURE, 1e-3, 0.0},
    [U_UK] = {"uK", CS_DIM_TEMPERATURE, 1e-6, 0.0},
    [U_DEGC] = {"degC", CS_DIM_TEMPERATURE, 1.0, 273.15},
    [U_MPA_MILLI] = {"mPa", CS_DIM_PRESSURE, 1e-3, 0.0},
    [U_PA] = {"Pa", CS_DIM_PRESSURE, 1.0, 0.0},
    [U_HPA] = {"hPa", CS_DIM_PRESSURE, 1e2, 0.0},
    [U_KPA] = {"kPa", CS_DIM_PRESSURE, 1e3, 0.0},
    [U_MPA_MEGA] = {"MPa", CS_DIM_PRESSURE, 1e6, 0.0},
    [U_MBAR] = {"mbar", CS_DIM_PRESSURE, 1e2, 0.0},
    [U_BAR] = {"bar", CS_DIM_PRESSURE, 1e5, 0.0},
    [U_MTORR] = {"mTorr", CS_DIM_PRESSURE, 101325.0 / 760.0 * 1e-3, 0.0},
    [U_TORR] = {"Torr", CS_DIM_PRESSURE, 101325.0 / 760.0, 0.0},
    [U_ATM] = {"atm", CS_DIM_PRESSURE, 101325.0, 0.0},
    [U_PER_S] = {"s^-1", CS_DIM_RATE, 1.0, 0.0},
    [U_PER_US] = {"us^-1", CS_DIM_RATE, 1e6, 0.0},
    [U_PER_NS] = {"ns^-1", CS_DIM_RATE, 1e9, 0.0},
    [U_ONE] = {"1", CS_DIM_DIMENSIONLESS, 1.0, 0.0},
    [U_PERCENT] = {"%", CS_DIM_DIMENSIONLESS, 1e-2, 0.0},
};

/* Other spellings. UTF-8: "\xC2\xB5" micro sign, "\xCE\xBC" Greek mu, "\xC3\x85" A-ring,
 * "\xE2\x84\xAB" angstrom sign, "\xC2\xB0" degree, "\xE2\x84\x83" degree Celsius,
 * "\xE2\x81\xBB" superscript minus, "\xC2\xB9" superscript one, "\xC2\xB3" superscript three. */
static const struct alias {
    const char *spelling;
    int unit;
} aliases[] = {
    {"KHz", U_KHZ}, {"rad s^-1", U_RAD_S},
    {"m-1", U_PER_M}, {"1/m", U_PER_M}, {"/m", U_PER_M}, {"m\xE2\x81\xBB\xC2\xB9", U_PER_M},
    {"cm-1", U_PER_CM}, {"1/cm", U_PER_CM}, {"/cm", U_PER_CM},
    {"cm\xE2\x81\xBB\xC2\xB9", U_PER_CM},
    {"\xC2\xB5m", U_UM}, {"\xCE\xBCm", U_UM}, {"micron", U_UM},
    {"\xC3\x85", U_ANGSTROM}, {"\xE2\x84\xAB", U_ANGSTROM}, {"angstrom", U_ANGSTROM},
    {"Angstrom", U_ANGSTROM},
    {"\xC2\xB5s", U_US}, {"\xCE\xBCs", U_US},
    {"m-3", U_PER_M3}, {"/m3", U_PER_M3}, {"/m^3", U_PER_M3}, {"1/m3", U_PER_M3},
    {"1/m^3", U_PER_M3}, {"m\xE2\x81\xBB\xC2\xB3", U_PER_M3},
    {"cm-3", U_PER_CM3}, {"/cm3", U_PER_CM3}, {"/cm^3", U_PER_CM3}, {"1/cm3", U_PER_CM3},
    {"1/cm^3", U_PER_CM3}, {"cm\xE2\x81\xBB\xC2\xB3", U_PER_CM3},
    {"\xC2\xB5K", U_UK}, {"\xCE\xBCK", U_UK},
    {"\xC2\xB0" "C", U_DEGC}, {"\xE2\x84\x83", U_DEGC},
    {"1/s", U_PER_S}, {"/s", U_PER_S}, {"s-1", U_PER_S}, {"s\xE2\x81\xBB\xC2\xB9", U_PER_S},
    {"1/us", U_PER_US}, {"us-1", U_PER_US}, {"1/\xC2\xB5s", U_PER_US}, {"\xC2\xB5s^-1", U_PER_US},
    {"1/\xCE\xBCs", U_PER_US}, {"\xCE\xBCs^-1", U_PER_US},
    {"1/ns", U_PER_NS}, {"ns-1", U_PER_NS},
};

#define N_ALIASES (sizeof aliases / sizeof aliases[0])
#define N_SPELLINGS ((size_t)U_COUNT + N_ALIASES)

/* Spelling number i (canonical names first, then aliases) and the unit it denotes. */
static const char *spelling_at(size_t i, const cs_unit **u)
{
    if (i < (size_t)U_COUNT) {
        *u = &units[i];
        return units[i].name;
    }
    *u = &units[aliases[i - U_COUNT].unit];
    return aliases[i - U_COUNT].spelling;
}

static int is_space(char c)
{
    return c == ' ' || c == '\t' || c == '\n' || c == '\r' || c == '\f' || c == '\v';
}

static char ascii_lower(char c)
{
    return (c >= 'A' && c <= 'Z') ? (char)(c - 'A' + 'a') : c;
}

static int ascii_equal_nocase(const char *a, const char *b)
{
    for (; *a && *b; a++, b++)
        if (ascii_lower(*a) != ascii_lower(*b))
            return 0;
    return *a == *b;
}

/* Rule of the file comment: at least two ASCII letters, all in one case. */
static int single_case_word(const char *s)
{
    int letters = 0, upper = 0, lower = 0;
    for (; *s; s++) {
        if (*s >= 'A' && *s <= 'Z')
            upper = 1, letters++;
        else if (*s >= 'a' && *s <= 'z')
            lower = 1, letters++;
    }
    return letters >= 2 && !(upper && lower);
}

const char *cs_dim_name(cs_dim dim)
{
    switch (dim) {
    case CS_DIM_FREQUENCY: return "frequency";
    case CS_DIM_WAVENUMBER: return "wavenumber";
    case CS_DIM_LENGTH: return "length";
    case CS_DIM_TIME: return "time";
    case CS_DIM_DENSITY: return "density";
    case CS_DIM_TEMPERATURE: return "temperature";
    case CS_DIM_PRESSURE: return "pressure";
    case CS_DIM_RATE: return "rate";
    case CS_DIM_DIMENSIONLESS: return "dimensionless";
    case CS_DIM_UNKNOWN: break;
    }
    return "unknown";
}

const char *cs_dim_si_symbol(cs_dim dim)
{
    switch (dim) {
    case CS_DIM_FREQUENCY: return "Hz";
    case CS_DIM_WAVENUMBER: return "m^-1";
    case CS_DIM_LENGTH: return "m";
    case CS_DIM_TIME: return "s";
    case CS_DIM_DENSITY: return "m^-3";
    case CS_DIM_TEMPERATURE: return "K";
    case CS_DIM_PRESSURE: return "Pa";
    case CS_DIM_RATE: return "s^-1";
    case CS_DIM_DIMENSIONLESS:
    case CS_DIM_UNKNOWN: break;
    }
    return "";
}

const cs_unit *cs_unit_find_dim(const char *name, cs_dim want)
{
    const cs_unit *u;
    if (!name || !*name)
        return NULL;
    for (size_t i = 0; i < N_SPELLINGS; i++)
        if (strcmp(spelling_at(i, &u), name) == 0)
            return u;
    if (want == CS_DIM_TEMPERATURE && strcmp(name, "C") == 0)
        return &units[U_DEGC];
    if (!single_case_word(name))
        return NULL;

    /* Case-insensitive: unique among all units, or unique among those of the wanted dimension. */
    const cs_unit *any = NULL, *of_dim = NULL;
    int any_ambiguous = 0, dim_ambiguous = 0;
    for (size_t i = 0; i < N_SPELLINGS; i++) {
        if (!ascii_equal_nocase(spelling_at(i, &u), name))
            continue;
        if (any && any != u)
            any_ambiguous = 1;
        any = u;
        if (want != CS_DIM_UNKNOWN && u->dim == want) {
            if (of_dim && of_dim != u)
                dim_ambiguous = 1;
            of_dim = u;
        }
    }
    if (of_dim)
        return dim_ambiguous ? NULL : of_dim;
    return any_ambiguous ? NULL : any;
}

const cs_unit *cs_unit_find(const char *name)
{
    return cs_unit_find_dim(name, CS_DIM_UNKNOWN);
}

double cs_unit_to_si(const cs_unit *u, double value)
{
    return u ? value * u->scale + u->offset : NAN;
}

double cs_unit_from_si(const cs_unit *u, double si)
{
    return u ? (si - u->offset) / u->scale : NAN;
}

/* Strings of decimal digits only: strtod would also take hexadecimal ("0x1p3"). */
static int has_hex_marker(const char *s, const char *end)
{
    for (; s < end; s++)
        if (*s == 'x' || *s == 'X')
            return 1;
    return 0;
}

int cs_quantity_parse(const char *text, cs_dim want, const char *default_unit, double *si,
                      const cs_unit **unit_out, cs_dim *dim_out, cs_error *err)
{
    if (!text || !si)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no quantity given");
    const char *p = text;
    while (is_space(*p))
        p++;
    if (!*p)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "empty quantity '%s'", text);

    /* strtod follows LC_NUMERIC; collshift keeps the "C" locale, where the point is '.'. */
    char *end;
    errno = 0;
    double v = strtod(p, &end);
    int range_error = errno == ERANGE;
    if (end == p)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "expected a number in '%s'", text);
    if (has_hex_marker(p, end))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "hexadecimal numbers are not accepted: '%s'", text);
    if (range_error)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "number out of range in '%s'", text);
    if (!isfinite(v))
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "not a finite number in '%s'", text);

    /* The unit is the next word; anything after it is an error. */
    const char *q = end;
    while (is_space(*q))
        q++;
    const char *ustart = q;
    while (*q && !is_space(*q))
        q++;
    size_t ulen = (size_t)(q - ustart);
    while (is_space(*q))
        q++;
    if (*q)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "unexpected text '%s' in '%s'", q,
                            text);

    const cs_unit *u;
    char ubuf[64];
    if (ulen >= sizeof ubuf)
        return cs_error_set(err, CS_EUNIT, NULL, -1, -1, "unknown unit '%.*s' in '%s'",
                            (int)ulen, ustart, text);
    if (ulen > 0) {
        memcpy(ubuf, ustart, ulen);
        ubuf[ulen] = '\0';
        u = cs_unit_find_dim(ubuf, want);
        if (!u)
            return cs_error_set(err, CS_EUNIT, NULL, -1, -1, "unknown unit '%s' in '%s'", ubuf,
                                text);
    } else if (default_unit) {
        u = cs_unit_find_dim(default_unit, want);
        if (!u)
            return cs_error_set(err, CS_EUNIT, NULL, -1, -1,
                                "unknown default unit '%s' for '%s'", default_unit, text);
    } else if (want == CS_DIM_DIMENSIONLESS) {
        u = &units[U_ONE]; /* a bare number is its own unit */
    } else if (want != CS_DIM_UNKNOWN) {
        return cs_error_set(err, CS_EUNIT, NULL, -1, -1,
                            "missing unit in '%s' (a %s such as '%s')", text, cs_dim_name(want),
                            cs_dim_si_symbol(want));
    } else {
        return cs_error_set(err, CS_EUNIT, NULL, -1, -1, "missing unit in '%s'", text);
    }
    if (want != CS_DIM_UNKNOWN && u->dim != want)
        return cs_error_set(err, CS_EUNIT, NULL, -1, -1, "unit '%s' in '%s' measures %s, not %s",
                            u->name, text, cs_dim_name(u->dim), cs_dim_name(want));

    double s = cs_unit_to_si(u, v);
    if (!isfinite(s))
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "'%s' is out of range in %s", text,
                            cs_dim_si_symbol(u->dim));
    *si = s;
    if (unit_out)
        *unit_out = u;
    if (dim_out)
        *dim_out = u->dim;
    return CS_OK;
}

/* Copy len bytes of s into base (size n) as a terminated string; truncates. */
static void copy_span(char *base, size_t n, const char *s, size_t len)
{
    if (!base || n == 0)
        return;
    size_t k = len < n - 1 ? len : n - 1;
    memcpy(base, s, k);
    base[k] = '\0';
}

/* The unit spelled by s[0..len), spaces around it ignored, or NULL. */
static const cs_unit *span_unit(const char *s, size_t len)
{
    char buf[64];
    while (len > 0 && is_space(*s))
        s++, len--;
    while (len > 0 && is_space(s[len - 1]))
        len--;
    if (len == 0 || len >= sizeof buf)
        return NULL;
    memcpy(buf, s, len);
    buf[len] = '\0';
    return cs_unit_find(buf);
}

const cs_unit *cs_unit_from_column_name(const char *header, char *base, size_t n)
{
    if (!header) {
        copy_span(base, n, "", 0);
        return NULL;
    }
    size_t len = strlen(header);
    while (len > 0 && is_space(header[len - 1]))
        len--;

    /* "frequency [MHz]", "frequency (MHz)" */
    if (len >= 2 && (header[len - 1] == ']' || header[len - 1] == ')')) {
        char open = header[len - 1] == ']' ? '[' : '(';
        size_t i = len - 1;
        while (i > 0 && header[i - 1] != open)
            i--;
        if (i > 0) {
            const cs_unit *u = span_unit(header + i, len - 1 - i);
            if (u) {
                size_t blen = i - 1;
                while (blen > 0 && is_space(header[blen - 1]))
                    blen--;
                copy_span(base, n, header, blen);
                return u;
            }
        }
    }
    /* "frequency_mhz": the part after the last '_' */
    for (size_t i = len; i > 0; i--) {
        if (header[i - 1] != '_')
            continue;
        const cs_unit *u = span_unit(header + i, len - i);
        if (u && u != &units[U_ONE]) { /* "signal_1" numbers a column, it is no unit */
            copy_span(base, n, header, i - 1);
            return u;
        }
        break;
    }
    copy_span(base, n, header, strlen(header));
    return NULL;
}

/* Edlen 1966, standard air: n - 1 and d(n - 1)/dsigma for sigma = 1/lambda_vac in um^-1. */
static void edlen1966(double sigma, double *nm1, double *dnm1_dsigma)
{
    double s2 = sigma * sigma, a = 130.0 - s2, b = 38.9 - s2;
    *nm1 = 1e-8 * (8342.13 + 2406030.0 / a + 15997.0 / b);
    *dnm1_dsigma = 1e-8 * (2.0 * 2406030.0 * sigma / (a * a) + 2.0 * 15997.0 * sigma / (b * b));
}

#define AIR_MIN_M 185e-9
#define AIR_MAX_M 20e-6

double cs_air_index_edlen1966(double lambda_vac_m)
{
    if (!(lambda_vac_m >= AIR_MIN_M && lambda_vac_m <= AIR_MAX_M))
        return NAN;
    double nm1, d;
    edlen1966(1e-6 / lambda_vac_m, &nm1, &d);
    return 1.0 + nm1;
}

double cs_air_to_vacuum_wavelength(double lambda_air_m)
{
    if (!(lambda_air_m > 0.0) || !isfinite(lambda_air_m))
        return NAN;
    /* lambda_vac = lambda_air * n(lambda_vac); the map contracts by |lambda dn/dlambda| ~ 1e-5,
     * so each step gains about five digits. */
    double vac = lambda_air_m;
    for (int k = 0; k < 50; k++) {
        double n = cs_air_index_edlen1966(vac);
        if (isnan(n))
            return NAN;
        double next = lambda_air_m * n;
        int done = fabs(next - vac) <= 1e-15 * next;
        vac = next;
        if (done)
            break;
    }
    return vac;
}

double cs_vacuum_to_air_wavelength(double lambda_vac_m)
{
    return lambda_vac_m / cs_air_index_edlen1966(lambda_vac_m);
}

enum { PT_OK, PT_NOT_POSITIVE, PT_AIR_RANGE, PT_NOT_FINITE };

/* Frequency nu (Hz) of axis value x in unit u, and |dx/dnu| (unit of x per Hz). */
static int axis_point(const cs_unit *u, int air, double x, double *nu, double *jac)
{
    const double c = CS_SPEED_OF_LIGHT;
    if (!isfinite(x))
        return PT_NOT_FINITE;
    switch (u->dim) {
    case CS_DIM_FREQUENCY: /* nu = x s */
        *nu = x * u->scale;
        *jac = 1.0 / u->scale;
        break;
    case CS_DIM_WAVENUMBER: /* nu = c sigma = c s x */
        if (!(x > 0.0))
            return PT_NOT_POSITIVE;
        *nu = c * x * u->scale;
        *jac = 1.0 / (c * u->scale);
        break;
    default: { /* wavelength: nu = c / lambda_vac, |dx/dnu| = lambda_vac^2 / (c s) */
        if (!(x > 0.0))
            return PT_NOT_POSITIVE;
        double lam = x * u->scale, vac = lam, dair_dvac = 1.0;
        if (air) {
            vac = cs_air_to_vacuum_wavelength(lam);
            if (isnan(vac))
                return PT_AIR_RANGE;
            double sigma = 1e-6 / vac, nm1, d;
            edlen1966(sigma, &nm1, &d);
            dair_dvac = (1.0 + sigma * d / (1.0 + nm1)) / (1.0 + nm1);
        }
        *nu = c / vac;
        *jac = vac * vac / (c * u->scale) * dair_dvac;
        break;
    }
    }
    return isfinite(*nu) && isfinite(*jac) ? PT_OK : PT_NOT_FINITE;
}

int cs_axis_to_hz(double *x, double *y, double *sigma, size_t n, const cs_unit *u,
                  cs_axis_conversion *conv, cs_error *err)
{
    int air = conv ? conv->air : 0, density = conv ? conv->y_is_density : 0;
    if (!u)
        return cs_error_set(err, CS_EUNIT, NULL, -1, -1, "no unit given for the spectral axis");
    if (u->dim != CS_DIM_FREQUENCY && u->dim != CS_DIM_WAVENUMBER && u->dim != CS_DIM_LENGTH)
        return cs_error_set(err, CS_EUNIT, NULL, -1, -1,
                            "unit '%s' measures %s, not frequency, wavenumber or wavelength",
                            u->name, cs_dim_name(u->dim));
    if (air && u->dim != CS_DIM_LENGTH)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "air applies to wavelength axes only, not to '%s'", u->name);
    if (n > 0 && !x)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no axis values given");

    /* Check every point before changing any, so that a failure leaves the arrays intact. */
    const char *what = u->dim == CS_DIM_LENGTH ? "wavelength"
                       : u->dim == CS_DIM_WAVENUMBER ? "wavenumber" : "frequency";
    for (size_t i = 0; i < n; i++) {
        double nu, jac;
        switch (axis_point(u, air, x[i], &nu, &jac)) {
        case PT_OK: break;
        case PT_NOT_POSITIVE:
            return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                "%s at index %zu is not positive (%g %s)", what, i, x[i],
                                u->name);
        case PT_AIR_RANGE:
            return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                "air wavelength at index %zu (%g %s) is outside 185 nm .. 20 um",
                                i, x[i], u->name);
        default:
            return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                "%s at index %zu (%g %s) gives no finite frequency", what, i,
                                x[i], u->name);
        }
    }
    for (size_t i = 0; i < n; i++) {
        double nu = 0.0, jac = 1.0;
        axis_point(u, air, x[i], &nu, &jac);
        x[i] = nu;
        if (density) {
            if (y)
                y[i] *= jac;
            if (sigma)
                sigma[i] *= jac;
        }
    }
    if (conv) {
        conv->jacobian_applied = density && (y || sigma);
        conv->reversed = u->dim == CS_DIM_LENGTH;
    }
    return CS_OK;
}

/* Units offered by cs_quantity_format, ascending; each spelling parses back with cs_unit_find. */
typedef struct shown_unit {
    const char *sym;
    double scale;
} shown_unit;

static const shown_unit shown_freq[] = {{"Hz", 1}, {"kHz", 1e3}, {"MHz", 1e6}, {"GHz", 1e9},
                                        {"THz", 1e12}};
static const shown_unit shown_time[] = {{"ps", 1e-12}, {"ns", 1e-9}, {"us", 1e-6},
                                        {"ms", 1e-3}, {"s", 1}};
static const shown_unit shown_length[] = {{"pm", 1e-12}, {"nm", 1e-9}, {"um", 1e-6},
                                          {"mm", 1e-3}, {"m", 1}};
static const shown_unit shown_pressure[] = {{"mPa", 1e-3}, {"Pa", 1}, {"kPa", 1e3},
                                            {"MPa", 1e6}};

char *cs_quantity_format(double si, cs_dim dim, int digits, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    digits = digits < 1 ? 1 : digits > 17 ? 17 : digits;
    const shown_unit *list = NULL;
    size_t count = 0;
    switch (dim) {
    case CS_DIM_FREQUENCY: list = shown_freq, count = sizeof shown_freq / sizeof *list; break;
    case CS_DIM_TIME: list = shown_time, count = sizeof shown_time / sizeof *list; break;
    case CS_DIM_LENGTH: list = shown_length, count = sizeof shown_length / sizeof *list; break;
    case CS_DIM_PRESSURE:
        list = shown_pressure, count = sizeof shown_pressure / sizeof *list;
        break;
    case CS_DIM_WAVENUMBER: snprintf(buf, n, "%.*g cm^-1", digits, si / 1e2); return buf;
    case CS_DIM_DENSITY: snprintf(buf, n, "%.*g cm^-3", digits, si / 1e6); return buf;
    case CS_DIM_TEMPERATURE: snprintf(buf, n, "%.*g K", digits, si); return buf;
    case CS_DIM_RATE: snprintf(buf, n, "%.*g s^-1", digits, si); return buf;
    case CS_DIM_DIMENSIONLESS:
    default: snprintf(buf, n, "%.*g", digits, si); return buf;
    }
    if (!isfinite(si)) {
        snprintf(buf, n, "%g %s", si, cs_dim_si_symbol(dim));
        return buf;
    }
    /* Round to `digits` first, so that 999.96 kHz at 4 digits shows as "1 MHz". */
    char tmp[64];
    snprintf(tmp, sizeof tmp, "%.*e", digits - 1, si);
    double r = strtod(tmp, NULL);
    if (!isfinite(r)) /* rounding 1.8e308 to one digit overflows */
        r = si;
    double a = fabs(r);
    /* The largest prefix not above |r|; zero and values below the smallest prefix are shown
     * in the SI unit, %g-style ("0.5 Hz", "1e-15 s"). */
    size_t k = 0;
    while (list[k].scale != 1.0)
        k++;
    for (size_t i = 0; i < count; i++)
        if (list[i].scale <= a)
            k = i;
    double m = r == 0.0 ? 0.0 : r / list[k].scale;
    /* Enough precision for every integer digit, so that %g writes "500" rather than "5e+02"
     * (the value is already rounded); mantissas of 1e6 and more keep the exponent form. */
    int prec = digits;
    double ip = 10.0;
    for (int d = 1; d < 6 && fabs(m) >= ip; d++, ip *= 10.0)
        if (prec < d + 1)
            prec = d + 1;
    snprintf(buf, n, "%.*g %s", prec, m, list[k].sym);
    return buf;
}
