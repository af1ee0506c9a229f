/* Quantities with units: parsing "9.2 GHz", column-name suffixes, spectral-axis conversion to Hz.
 *
 * Inside collshift every quantity is SI: frequency in cyclic Hz, time in s, length in m,
 * wavenumber in m^-1, number density in m^-3, temperature in K, pressure in Pa, rate in s^-1.
 * A unit converts to SI as  si = value * scale + offset  (offset is non-zero only for degC).
 * Physical constants are the exact SI-2019 values (CODATA 2018): c = 299 792 458 m/s. */
#ifndef CS_UNITS_H
#define CS_UNITS_H

#include <stddef.h>
#include <collshift/error.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Speed of light in vacuum, m/s: exact by the definition of the metre (SI 2019, CODATA 2018). */
#define CS_SPEED_OF_LIGHT 299792458.0

/* What a unit measures. */
typedef enum cs_dim {
    CS_DIM_UNKNOWN = 0,
    CS_DIM_FREQUENCY,     /* Hz; rad/s is accepted with scale 1/(2 pi) */
    CS_DIM_WAVENUMBER,    /* m^-1 (cm^-1 has scale 100) */
    CS_DIM_LENGTH,        /* m: wavelengths, thicknesses */
    CS_DIM_TIME,          /* s */
    CS_DIM_DENSITY,       /* m^-3 (cm^-3 has scale 1e6) */
    CS_DIM_TEMPERATURE,   /* K (degC has offset 273.15) */
    CS_DIM_PRESSURE,      /* Pa */
    CS_DIM_RATE,          /* s^-1: decay rates Gamma */
    CS_DIM_DIMENSIONLESS  /* plain numbers: "1", "" where allowed, "%" with scale 0.01 */
} cs_dim;

/* One entry of the unit table. `name` is the canonical spelling shown to users. */
typedef struct cs_unit {
    const char *name;
    cs_dim dim;
    double scale;
    double offset;
} cs_unit;

/* Name of a dimension, e.g. "frequency"; never NULL. */
const char *cs_dim_name(cs_dim dim);

/* SI unit symbol of a dimension as used in output ("Hz", "s", "m^-3", ...); never NULL. */
const char *cs_dim_si_symbol(cs_dim dim);

/* Look a unit up by spelling. Exact (case-sensitive) matches win; otherwise a case-insensitive
 * match is accepted when it is unambiguous ("mhz" -> MHz, "US" -> us, "MS" -> ms) and the
 * spelling has at least two ASCII letters, all in the same case: mixed-case spellings ("mHz",
 * "Ms") and single letters ("a", "S") must match exactly, and "mpa" (mPa or MPa) fails.
 * Accepts the usual alternative spellings: "us", "µs", "μs"; "A", "Å", "angstrom";
 * "cm^-1", "cm-1", "1/cm", "cm⁻¹"; "cm^-3", "cm-3", "/cm3", "cm⁻³"; "rad/s"; "degC", "°C",
 * "C" (as temperature only when want == CS_DIM_TEMPERATURE, see cs_unit_find_dim).
 * Returns NULL when unknown. */
const cs_unit *cs_unit_find(const char *name);

/* Like cs_unit_find but resolves spellings whose meaning depends on the dimension wanted
 * (e.g. "C" is degC only for temperature). want == CS_DIM_UNKNOWN behaves as cs_unit_find. */
const cs_unit *cs_unit_find_dim(const char *name, cs_dim want);

/* Convert value in `u` to SI. */
double cs_unit_to_si(const cs_unit *u, double value);
/* Convert an SI value to `u`. */
double cs_unit_from_si(const cs_unit *u, double si);

/* Parse a quantity such as "9.2GHz", "9.2 GHz", "3e13cm^-3", "20us", "-1.5 MHz".
 * want: the dimension required (CS_DIM_UNKNOWN accepts any and reports it in *dim_out).
 * default_unit: used when the text carries no unit; NULL means a unit is required.
 * On success writes the SI value to *si (and the unit used to *unit_out, the dimension to
 * *dim_out; both optional) and returns CS_OK; on error *si is unchanged. When want is
 * CS_DIM_DIMENSIONLESS a bare number needs no default_unit. Errors: CS_EINVAL (not a number,
 * hexadecimal, trailing garbage, empty), CS_EUNIT (unknown or missing unit, or a unit of another
 * dimension), CS_ERANGE (overflow or underflow, NaN or Inf). The message quotes the text.
 * `err` may be NULL. */
int cs_quantity_parse(const char *text, cs_dim want, const char *default_unit, double *si,
                      const cs_unit **unit_out, cs_dim *dim_out, cs_error *err);

/* Split a column header such as "frequency_mhz", "time_us", "wavelength_nm", "density_cm^-3"
 * into base name and unit: the part after the last '_' is looked up as a unit; if it is one,
 * the base name, as written, is copied to base (size n, may be NULL; truncated to fit) and the
 * unit returned. Also accepts "frequency [MHz]" and "frequency (MHz)". A suffix "_1" is taken as
 * a column number, not as the unit 1. Returns NULL (and copies the whole name to base) when
 * there is no recognisable unit suffix. */
const cs_unit *cs_unit_from_column_name(const char *header, char *base, size_t n);

/* Refractive index of standard dry air (15 degC, 101 325 Pa, 0.03 % CO2) at a vacuum
 * wavelength (m), by Edlen's 1966 dispersion formula:
 *   (n - 1) * 1e8 = 8342.13 + 2406030 / (130 - s^2) + 15997 / (38.9 - s^2),  s = 1 / lambda_vac[um]
 * B. Edlen, "The refractive index of air", Metrologia 2, 71-80 (1966).
 * Valid roughly 200 nm .. 2 um; returns NaN outside 185 nm .. 20 um (the formula has a pole at
 * 160.3 nm, and below about 185 nm air absorbs and wavelengths are quoted in vacuum). */
double cs_air_index_edlen1966(double lambda_vac_m);

/* Vacuum wavelength (m) from a wavelength measured in standard air (m), inverting
 * lambda_air = lambda_vac / n(lambda_vac) by fixed-point iteration (converges to 1e-15 rel.).
 * NaN when the vacuum wavelength falls outside the range of cs_air_index_edlen1966. */
double cs_air_to_vacuum_wavelength(double lambda_air_m);
/* Air wavelength (m) from a vacuum wavelength (m); NaN outside 185 nm .. 20 um. */
double cs_vacuum_to_air_wavelength(double lambda_vac_m);

/* Options and outcome of converting a spectral axis to frequency. */
typedef struct cs_axis_conversion {
    int air;            /* in: wavelengths were measured in standard air (default 0: vacuum) */
    int y_is_density;   /* in: y (and sigma) are spectral densities per unit of the axis, so the
                           Jacobian |dx/dnu| is applied */
    int jacobian_applied; /* out: 1 when y and sigma were multiplied by |dx/dnu| */
    int reversed;       /* out: 1 when the conversion reverses the order of the points (wavelength
                           axes: nu falls as lambda grows); the points are not reordered */
} cs_axis_conversion;

/* Convert an axis in unit `u` (frequency, angular frequency, wavenumber or wavelength) to
 * cyclic Hz in place: x[i] <- nu(x[i]). Wavelength -> nu = c / lambda_vac; wavenumber ->
 * nu = c * sigma. When conv->y_is_density, y[i] and sigma[i] (either may be NULL) are
 * multiplied by |dx/dnu| (for wavelength: lambda^2 / c, in the axis unit per Hz; for air
 * wavelengths times dlambda_air/dlambda_vac), so that the integral over the line is preserved.
 * Does not reorder; the caller sorts if needed. conv may be NULL (vacuum, no Jacobian).
 * Returns CS_EUNIT if u is not a spectral-axis unit, CS_EINVAL if conv->air is set for a
 * non-wavelength unit, CS_EDATA (message names the 0-based index) for a zero or negative
 * wavelength or wavenumber, an air wavelength outside 185 nm .. 20 um, or a non-finite value or
 * result. On any error x, y and sigma are left unchanged. */
int cs_axis_to_hz(double *x, double *y, double *sigma, size_t n, const cs_unit *u,
                  cs_axis_conversion *conv, cs_error *err);

/* Format an SI value with an automatically chosen SI prefix and the dimension's symbol,
 * e.g. 9.2e9 Hz -> "9.2 GHz", 2e-5 s -> "20 us", 3.2e19 m^-3 -> "3.2e+13 cm^-3" (densities are
 * shown in cm^-3, wavenumbers in cm^-1, temperatures in K, rates in s^-1). Zero and values
 * below the smallest prefix are shown in the SI unit ("0.5 Hz"). `digits` significant digits
 * (%g-style, clamped to 1..17). Every unit shown parses back with cs_unit_find. Returns buf. */
char *cs_quantity_format(double si, cs_dim dim, int digits, char *buf, size_t n);

#ifdef __cplusplus
}
#endif
#endif /* CS_UNITS_H */
