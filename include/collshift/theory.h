/* Theory module: a table of atomic lines and the standard estimates of collective shifts, widths,
 * superradiance and radiation trapping in dense samples, with the alkali vapour-pressure formula.
 *
 * Conventions (CS_THEORY_CONVENTIONS, printed with every output):
 *   - a shift is measured minus unperturbed frequency: negative = red;
 *   - shifts and widths are cyclic frequencies in Hz, and every width is a FWHM;
 *   - decay rates are in s^-1 (a Lorentzian of rate Gamma has FWHM Gamma/2pi in Hz);
 *   - coefficients per unit density are cyclic, in Hz cm^3 in the estimates table (value/N/2pi)
 *     and in Hz m^3 from the plain functions (SI);
 *   - densities are number densities, m^-3 inside (cm^-3 = 1e6 m^-3).
 * Formulas written in angular units are evaluated in rad/s and converted at the output.
 *
 * Lines are hyperfine-unresolved: a J_g -> J_e line is treated as one line carrying the total
 * oscillator strength, with degeneracies g = 2J + 1. Gamma0 = 1/tau is the natural decay rate of
 * the upper level on this line. Formulas and their published sources (and how sure we are of each:
 * see ../shared/guide/physics.md) are listed with each function below and in src/theory.c.
 *
 * Thread safety: everything here is reentrant; the line table is immutable. */
#ifndef CS_THEORY_H
#define CS_THEORY_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/units.h>

#ifdef __cplusplus
extern "C" {
#endif

/* The conventions of every theory output, in one line. */
#define CS_THEORY_CONVENTIONS                                                                      \
    "shift = measured minus unperturbed, negative = red; widths FWHM in Hz; rates in s^-1; "     \
    "coefficients per unit density cyclic (value/2pi/N)"

/* CODATA 2018 recommended values (E. Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)); h, e and
 * k_B are exact in the SI of 2019. c is CS_SPEED_OF_LIGHT (units.h). */
#define CS_THEORY_PLANCK 6.62607015e-34            /* h, J s (exact) */
#define CS_THEORY_HBAR (CS_THEORY_PLANCK / (2.0 * 3.14159265358979323846)) /* J s */
#define CS_THEORY_ELEMENTARY_CHARGE 1.602176634e-19 /* e, C (exact) */
#define CS_THEORY_BOLTZMANN 1.380649e-23           /* k_B, J/K (exact) */
#define CS_THEORY_EPSILON0 8.8541878128e-12        /* vacuum permittivity, F/m */
#define CS_THEORY_ELECTRON_MASS 9.1093837015e-31   /* m_e, kg */
#define CS_THEORY_BOHR_RADIUS 5.29177210903e-11    /* a_0, m */
#define CS_THEORY_ATOMIC_MASS_UNIT 1.66053906660e-27 /* u, kg */
/* 1 Torr = 101325/760 Pa exactly (NIST SP 811 (2008), App. B.8). */
#define CS_THEORY_TORR (101325.0 / 760.0)

/* ---- lines -------------------------------------------------------------------------------- */

/* Which fields of a line the user gave (cs_line.user); 0 for a line straight from the table. */
#define CS_LINE_USER_WAVELENGTH 1u
#define CS_LINE_USER_GAMMA 2u
#define CS_LINE_USER_J 4u
#define CS_LINE_USER_MASS 8u

/* An atomic line. Strings are static (the table's, or the custom line's fixed texts). */
typedef struct cs_line {
    const char *name;      /* command-line name, e.g. "rb87-d2"; "custom" for a user line */
    const char *label;     /* e.g. "87Rb D2 5S1/2 -> 5P3/2" */
    const char *element;   /* "Rb", "Cs", "K", "Na" when cs_vapour_eval knows it, else NULL */
    double wavelength_m;   /* vacuum wavelength, m */
    double gamma0;         /* natural decay rate Gamma0 = 1/tau, s^-1 (natural FWHM = Gamma0/2pi Hz) */
    double jg, je;         /* total angular momenta of the lower and upper level */
    double mass_u;         /* atomic mass in u (Doppler width); NAN when unknown */
    const char *source;    /* published source of the wavelength and the width */
    const char *mark;      /* how sure: "confirmed in stored source", "from memory", ... */
    unsigned user;         /* CS_LINE_USER_* bits */
} cs_line;

/* Number of lines in the built-in table, and line i (NULL when i >= count). */
size_t cs_line_count(void);
const cs_line *cs_line_get(size_t i);

/* Find a built-in line by name, case-insensitively. Names: rb87-d1 rb87-d2 rb85-d1 rb85-d2
 * cs-d1 cs-d2 (current Steck revision) cs-d1-old cs-d2-old (older revision) k39-d1 k39-d2
 * na-d1 na-d2 sr-461 sr-689 ca-423; aliases rb-d1 rb-d2 (= rb87-...), k-d1 k-d2 (= k39-...),
 * cs133-d1 cs133-d2, na23-d1 na23-d2. Returns NULL for NULL or an unknown name. */
const cs_line *cs_line_find(const char *name);

/* A user-specified line, or changes to a table line. NAN (or NULL) = not given. */
typedef struct cs_line_spec {
    double wavelength_m;   /* vacuum wavelength, m */
    double frequency_hz;   /* or the transition frequency nu0 = c / lambda, Hz */
    double gamma0;         /* Gamma0, s^-1 */
    double dipole_cm;      /* or the reduced dipole <J_g||e r||J_e>, C m, in the convention of
                              D. A. Steck's alkali data: Gamma0 = w0^3 (2J_g+1)/(2J_e+1) |<J_g||er||J_e>|^2
                              / (3 pi eps0 hbar c^3); for Rb D2, 4.2275 e a0 */
    double jg, je;         /* J of the lower and upper level: both or neither */
    double mass_u;         /* atomic mass in u */
} cs_line_spec;

/* Every field NAN. */
void cs_line_spec_init(cs_line_spec *spec);

/* Build a line in *out from base (a table line, or NULL) with the fields of spec replacing base's.
 * Without base, spec needs a wavelength or a frequency, Gamma0 or a dipole, and J_g, J_e. Giving
 * both wavelength and frequency, or both Gamma0 and dipole, is an error. A dipole is converted with
 * the (possibly new) wavelength and J values; a new wavelength alone keeps base's Gamma0.
 * J values must be non-negative multiples of 1/2 with |J_e - J_g| <= 1, not both 0, and J_e - J_g
 * an integer (an electric-dipole line). Without base the result has name "custom", no element, no
 * mass (unless given) and source "user-specified"; with base it keeps base's name, element and
 * source strings, and out->user says which fields the user replaced.
 * Returns CS_OK, CS_EINVAL (message names the field) or CS_ERANGE (non-positive or non-finite
 * value). *out is written only on success. err may be NULL. */
int cs_line_custom(const cs_line *base, const cs_line_spec *spec, cs_line *out, cs_error *err);

/* Parse a dipole moment with its unit: "4.2275 ea0" (also "e a0", "e*a0", "e.a0", "au", "a.u."),
 * "3.58e-29 C m" (also "Cm", "C*m", "C.m", UTF-8 "C·m"), "10.7 D" (debye, 1 D = 1e-21/c C m).
 * A unit is required. Writes C m to *cm. Returns CS_OK, CS_EINVAL (not a number) or CS_EUNIT. */
int cs_dipole_parse(const char *text, double *cm, cs_error *err);

/* Derived line data (NAN for a NULL line). */
double cs_line_frequency(const cs_line *l);      /* nu0 = c / lambda, Hz */
double cs_line_wavenumber(const cs_line *l);     /* k = 2 pi / lambda, m^-1 */
double cs_line_degeneracy_ratio(const cs_line *l); /* g_e / g_g = (2J_e+1)/(2J_g+1) */
/* Absorption oscillator strength from Gamma0 (D. A. Steck, "Rubidium 85 D Line Data", Eq. (4)):
 * Gamma0 = (e^2 w0^2 / 2 pi eps0 m_e c^3) (g_g/g_e) f. */
double cs_line_oscillator_strength(const cs_line *l);
/* Reduced dipole |<J_g||er||J_e>| (Steck's convention, see cs_line_spec), C m. */
double cs_line_dipole_reduced(const cs_line *l);
/* Dipole d of the equivalent two-level atom, Gamma0 = w0^3 d^2 / (3 pi eps0 hbar c^3), C m
 * (for an alkali D2 line, the stretched cycling-transition dipole). */
double cs_line_dipole_two_level(const cs_line *l);

/* ---- formulas ----------------------------------------------------------------------------- */

/* Lorentz-Lorenz (local-field) shift per unit density, cyclic, Hz m^3 (negative):
 *   Delta_LL / (2 pi N) = -(1/3)(g_e/g_g) Gamma0 / (2 k^3)
 * i.e. Delta_LL = -(1/3)(g_e/g_g) pi N Gamma0 / k^3 (rad/s). Two-level form -pi N Gamma0/k^3:
 * F. Andreoli et al., Phys. Rev. X 11, 011026 (2021), Eq. (5); the factor (1/3)(g_e/g_g) follows
 * from the Clausius-Mossotti resonance with the total oscillator strength. */
double cs_theory_ll_coefficient(const cs_line *l);

/* Slab of thickness L (m), x = k L: the cooperative Lamb shift relative to Delta_LL,
 *   Delta_CLS / Delta_LL = -(3/4) [1 - sin(2x)/(2x)],
 * and the total shift relative to Delta_LL, 1/4 + (3/4) sin(2x)/(2x). R. Friedberg, S. R. Hartmann,
 * J. T. Manassah, Phys. Rep. 7, 101 (1973), as used by J. Keaveney et al., Phys. Rev. Lett. 108,
 * 173601 (2012). Accurate for all x >= 0 (series near 0); NAN for x < 0 or non-finite x.
 * A "CLS" fitted to cw transmission is model-dependent: R. Friedberg, J. T. Manassah, Atoms 10, 49
 * (2022). */
double cs_theory_cls_factor(double kL);
double cs_theory_slab_factor(double kL);

/* Resonant self-broadening per unit density, FWHM, cyclic, Hz m^3:
 *   beta / 2pi = sqrt(g_e/g_g) Gamma0 / k^3,  i.e.  beta = sqrt(g_e/g_g) Gamma0 lambda^3 / (4 pi^2)
 * (rad/s m^3). A. W. Ali, H. R. Griem, Phys. Rev. 140, A1044 (1965); E. L. Lewis, Phys. Rep. 58, 1
 * (1980). */
double cs_theory_self_broadening_coefficient(const cs_line *l);

/* Doppler FWHM of the line at temperature T (K), Hz: sqrt(8 ln2 k_B T / m) / lambda.
 * NAN when the line's mass is unknown or T <= 0. */
double cs_theory_doppler_fwhm(const cs_line *l, double T_K);

/* Holstein's escape factor g (the trapped decay rate is g * Gamma0) at high optical depth.
 * kx = k0 L (slab of full thickness L) or k0 R (cylinder of radius R), with k0 the line-centre
 * absorption coefficient including the line-shape normalisation. T. Holstein, Phys. Rev. 72, 1212
 * (1947); 83, 1159 (1951); coefficients as tabulated by A. F. Molisch, B. P. Oehry, "Radiation
 * Trapping in Atomic Vapours" (1998):
 *   Doppler slab     1.875 / (kx sqrt(pi ln(kx/2)))    cylinder  1.60 / (kx sqrt(pi ln kx))
 *   Lorentz slab     1.150 / sqrt(pi kx)                cylinder  1.115 / sqrt(pi kx)
 * Asymptotic forms for kx >> 1. Returns NAN when the form is undefined (Doppler: ln argument <= 1;
 * Lorentz: kx <= 0) or kx is not finite; the caller judges validity (cs_theory_predict asks for
 * kx >= CS_THEORY_HOLSTEIN_MIN). */
typedef enum cs_holstein_geometry { CS_HOLSTEIN_SLAB = 0, CS_HOLSTEIN_CYLINDER } cs_holstein_geometry;
typedef enum cs_holstein_shape { CS_HOLSTEIN_DOPPLER = 0, CS_HOLSTEIN_LORENTZ } cs_holstein_shape;
double cs_theory_holstein_escape(cs_holstein_geometry geom, cs_holstein_shape shape, double kx);
/* Smallest k0 L (k0 R) at which cs_theory_predict reports a trapped rate. */
#define CS_THEORY_HOLSTEIN_MIN 10.0

/* ---- alkali vapour pressure --------------------------------------------------------------- */

typedef enum cs_phase { CS_PHASE_AUTO = 0, CS_PHASE_SOLID, CS_PHASE_LIQUID } cs_phase;

/* The saturated vapour above the metal. */
typedef struct cs_vapour {
    const char *element;   /* canonical symbol, e.g. "Rb" */
    double T_K;            /* temperature, K */
    double pressure_pa;    /* vapour pressure, Pa */
    double density_m3;     /* number density P / (k_B T), m^-3 */
    cs_phase phase;        /* the phase whose fit was used */
    double melting_K;      /* melting point used to choose the phase, K */
    int outside_range;     /* 1 when T is outside 298 .. 550 K, where Steck quotes +-5 % */
    const char *source;    /* the formula's source */
} cs_vapour;

/* Vapour pressure and density of an alkali metal (element "Rb", "Cs", "K" or "Na", any case) at
 * T_K (K), by the form of C. B. Alcock, V. P. Itkin, M. K. Horrigan, Canadian Metallurgical
 * Quarterly 23, 309 (1984), as in D. A. Steck's alkali D-line data:
 *   log10(P / Torr) = 2.881 + A + B / T
 * with (A, B/K) for the solid and the liquid. phase CS_PHASE_AUTO takes the solid below the melting
 * point. Returns CS_OK, CS_EINVAL (unknown element, NULL argument) or CS_ERANGE (T not finite or
 * T <= 0). err may be NULL. */
int cs_vapour_eval(const char *element, double T_K, cs_phase phase, cs_vapour *out, cs_error *err);
/* Shortcuts (automatic phase): pressure in Pa and number density in m^-3; NAN on error. */
double cs_vapour_pressure(const char *element, double T_K);
double cs_vapour_density(const char *element, double T_K);

/* ---- all estimates for one line and one sample -------------------------------------------- */

/* What the sample is. Every field NAN = not given (cs_theory_inputs_init). */
typedef struct cs_theory_inputs {
    double density_m3;     /* number density N of the atoms (all hyperfine levels), m^-3; 0 allowed */
    double thickness_m;    /* slab thickness L (cell, nanocell), m: CLS, slab trapping, slab OD */
    double temperature_K;  /* K: Doppler width and Doppler-line quantities */
    double length_m;       /* length of a pencil-shaped sample (superradiance), m */
    double radius_m;       /* radius of the pencil / cylinder, m: superradiance, cylinder trapping */
    double atoms;          /* number N of atoms in the pencil (else N = density * pi R^2 * length) */
} cs_theory_inputs;

void cs_theory_inputs_init(cs_theory_inputs *in);

/* The estimates, in this order (the JSON name of each is in cs_estimate.name). */
typedef enum cs_theory_quantity {
    CS_TH_LL_COEF = 0,       /* lorentz_lorenz_coefficient_hz_cm3 */
    CS_TH_LL_SHIFT,          /* lorentz_lorenz_shift_hz */
    CS_TH_CLS_COEF,          /* cooperative_lamb_coefficient_hz_cm3 */
    CS_TH_CLS_SHIFT,         /* cooperative_lamb_shift_hz */
    CS_TH_SLAB_COEF,         /* slab_shift_coefficient_hz_cm3 (LL + CLS) */
    CS_TH_SLAB_SHIFT,        /* slab_shift_hz */
    CS_TH_SELF_COEF,         /* self_broadening_coefficient_hz_cm3 */
    CS_TH_SELF_FWHM,         /* self_broadening_fwhm_hz */
    CS_TH_NATURAL_FWHM,      /* natural_fwhm_hz */
    CS_TH_HOMOGENEOUS_FWHM,  /* homogeneous_fwhm_hz (natural + self-broadening) */
    CS_TH_DOPPLER_FWHM,      /* doppler_fwhm_hz */
    CS_TH_GAMMA0,            /* single_atom_decay_rate_per_s */
    CS_TH_LIFETIME,          /* natural_lifetime_s */
    CS_TH_CROSS_SECTION,     /* resonant_cross_section_m2 */
    CS_TH_OD,                /* optical_depth (slab, natural line) */
    CS_TH_OD_DOPPLER,        /* optical_depth_doppler (slab, Doppler line) */
    CS_TH_OD_VOIGT,          /* optical_depth_voigt (slab, Voigt: homogeneous x Doppler) */
    CS_TH_TRAP_SLAB_DOPPLER, /* trapping_rate_slab_doppler_per_s */
    CS_TH_TRAP_SLAB_LORENTZ, /* trapping_rate_slab_lorentz_per_s */
    CS_TH_TRAP_CYL_DOPPLER,  /* trapping_rate_cylinder_doppler_per_s */
    CS_TH_TRAP_CYL_LORENTZ,  /* trapping_rate_cylinder_lorentz_per_s */
    CS_TH_SR_ATOMS,          /* superradiance_atoms */
    CS_TH_SR_FRESNEL,        /* fresnel_number */
    CS_TH_SR_MU,             /* geometric_factor_mu */
    CS_TH_SR_ENHANCEMENT,    /* collective_enhancement (N mu) */
    CS_TH_SR_OD,             /* pencil_optical_depth */
    CS_TH_SR_RATE,           /* collective_decay_rate_per_s */
    CS_TH_SR_TIME,           /* superradiance_time_s (T_R) */
    CS_TH_SR_DELAY,          /* burst_delay_s */
    CS_TH_SR_DELAY_PROP,     /* burst_delay_propagation_s */
    CS_TH_SR_WIDTH,          /* burst_fwhm_s */
    CS_TH_SR_PEAK_POWER,     /* burst_peak_power_w */
    CS_TH_COUNT
} cs_theory_quantity;

/* Status of one estimate. A value is a number only when the status is CS_EST_OK. */
typedef enum cs_estimate_status {
    CS_EST_OK = 0,           /* value computed (note may carry a caveat) */
    CS_EST_NEEDS_INPUT,      /* an input is missing; note names it */
    CS_EST_NOT_APPLICABLE    /* inputs given, but outside the formula's domain; note says why */
} cs_estimate_status;

#define CS_ESTIMATE_NOTE_MAX 240

typedef struct cs_estimate {
    const char *name;      /* JSON field name carrying the unit, e.g. "lorentz_lorenz_shift_hz" */
    const char *label;     /* e.g. "Lorentz-Lorenz shift" */
    const char *unit;      /* unit of value: "Hz", "Hz cm^3", "s^-1", "s", "m^2", "W", "" */
    cs_dim dim;            /* for cs_quantity_format (CS_DIM_DIMENSIONLESS when unit is not SI) */
    const char *formula;   /* the formula in plain text */
    const char *cite;      /* short source, e.g. "Andreoli et al. 2021, Eq. (5)" */
    const char *source;    /* full published source */
    cs_estimate_status status;
    double value;          /* in `unit`; NAN unless status == CS_EST_OK */
    char note[CS_ESTIMATE_NOTE_MAX]; /* missing input, domain, or caveat; "" when none */
} cs_estimate;

typedef struct cs_theory_estimates {
    cs_line line;          /* the line used (copy) */
    cs_theory_inputs in;   /* the inputs used (copy) */
    cs_estimate e[CS_TH_COUNT];
} cs_theory_estimates;

/* Fill *out with every estimate the inputs allow; the others get CS_EST_NEEDS_INPUT or
 * CS_EST_NOT_APPLICABLE with a note, and value NAN (never a made-up number).
 * Geometry of the superradiance block (M. Gross, S. Haroche, Phys. Rep. 93, 301 (1982)): a
 * pencil of length `length_m` and radius `radius_m`, Fresnel number F = pi R^2/(lambda L) ~ 1,
 * all N atoms inverted, two-level formulas (no degeneracy factors). Trapping: Holstein (above) with
 * k0 from the Doppler (needs T and the mass) or the homogeneous Lorentzian line (natural +
 * self-broadening) over the slab thickness or the cylinder radius.
 * Returns CS_OK, or CS_EINVAL (NULL line/in/out, or an input that is negative, zero where a
 * size is meant, or not finite; message names it) leaving *out unspecified. err may be NULL. */
int cs_theory_predict(const cs_line *line, const cs_theory_inputs *in, cs_theory_estimates *out,
                      cs_error *err);

/* Name of a status: "ok", "needs_input", "not_applicable"; never NULL. */
const char *cs_estimate_status_name(cs_estimate_status s);

/* The value of one estimate, or NAN when it is not CS_EST_OK or q is out of range. */
double cs_theory_value(const cs_theory_estimates *est, cs_theory_quantity q);

#ifdef __cplusplus
}
#endif
#endif /* CS_THEORY_H */
