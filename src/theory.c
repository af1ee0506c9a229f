/* Collective-shift, broadening, superradiance and radiation-trapping estimates for one line and one
 * sample (cs_theory_predict), and the formulas behind them.
 *
 * Units: the formulas below are written in angular frequency (rad/s) where their sources write them
 * so; every value leaves this file as a cyclic frequency in Hz (value / 2 pi), a rate in s^-1, a
 * time in s, or a coefficient per unit density in Hz m^3 (Hz cm^3 in the estimates table).
 * Symbols: N number density, k = 2 pi / lambda (vacuum), Gamma0 = 1/tau, g = 2J + 1.
 *
 * 1. Lorentz-Lorenz shift (local field), hyperfine-unresolved line with the total oscillator strength:
 *      Delta_LL = -(1/3)(g_e/g_g) pi N Gamma0 / k^3
 *    two-level form (factor 1) from F. Andreoli et al., Phys. Rev. X 11, 011026 (2021), Eq. (5),
 *    where the resonance sits at (w - w0)/Gamma0 = -pi N/k^3; the general factor from the
 *    Clausius-Mossotti resonance w_res^2 = w0^2 - N e^2 f/(3 eps0 m_e) with Steck's Gamma0-f relation.
 *    It survives Doppler broadening: J. Guo, A. Gallagher, J. Cooper, Opt. Commun. 131, 219 (1996).
 * 2. Cooperative Lamb shift of a slab of thickness L (R. Friedberg, S. R. Hartmann, J. T. Manassah,
 *    Phys. Rep. 7, 101 (1973), as used by J. Keaveney et al., Phys. Rev. Lett. 108, 173601 (2012)):
 *      Delta_CLS = -(3/4) Delta_LL [1 - sin(2kL)/(2kL)],  total = Delta_LL [1/4 + (3/4) sin(2kL)/(2kL)]
 * 3. Resonant self-broadening, impact theory (A. W. Ali, H. R. Griem, Phys. Rev. 140, A1044 (1965);
 *    E. L. Lewis, Phys. Rep. 58, 1 (1980)), FWHM in rad/s:
 *      Gamma_self = beta N,  beta = sqrt(g_e/g_g) Gamma0 lambda^3 / (4 pi^2) = sqrt(g_e/g_g) 2 pi Gamma0/k^3
 * 4. Superradiance of a pencil (length L, area A = pi R^2, Fresnel number ~ 1, N inverted atoms;
 *    M. Gross, S. Haroche, Phys. Rep. 93, 301 (1982); N. E. Rehler, J. H. Eberly, Phys. Rev. A 3,
 *    1735 (1971)):
 *      mu = 3 lambda^2/(8 pi A),  T_R = tau/(N mu),  Gamma_N = Gamma0 (1 + N mu),
 *      I(t) = (N hbar w0/(4 T_R)) sech^2((t - t_D)/(2 T_R)): FWHM 4 arccosh(sqrt 2) T_R, peak N hbar w0/(4 T_R),
 *      t_D = T_R ln N (quantum initiation);  with propagation t_D = (T_R/4) [ln sqrt(2 pi N)]^2
 *      (J. C. MacGillivray, M. S. Feld, Phys. Rev. A 14, 1169 (1976)).
 * 5. Radiation trapping: Holstein's escape factors (cs_theory_holstein_escape), with the line-centre
 *    absorption coefficient k0 = N sigma_peak of the line shape used:
 *      Doppler (T. Holstein, Phys. Rev. 72, 1212 (1947)):  sigma_D = (g_e/g_g) lambda^3 Gamma0 / (8 pi^1.5 u),
 *          u = sqrt(2 k_B T/m);
 *      Lorentz (homogeneous FWHM Gamma_h = Gamma0 + Gamma_self, rad/s): sigma_L = (g_e/g_g) lambda^2 Gamma0/(2 pi Gamma_h).
 *    Both follow from the integrated cross-section (g_e/g_g) lambda^2 Gamma0/(8 pi) (per Hz).
 * 6. Resonant optical depth of a slab N sigma L with sigma0 = (g_e/g_g) lambda^2/(2 pi) (atoms at
 *    rest, natural line), sigma_D (Doppler line) or the Voigt peak (homogeneous Lorentzian convolved
 *    with the Doppler Gaussian, libcerf's voigt()). */
#include <collshift/theory.h>

#include <cerf.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#define PI 3.14159265358979323846264338327950288
#define TWO_PI (2.0 * PI)
/* Hz m^3 -> Hz cm^3 */
#define PER_M3_TO_PER_CM3 1e6

/* ---- sources ------------------------------------------------------------------------------ */

#define SRC_LL                                                                                     \
    "F. Andreoli, M. J. Gullans, A. A. High, A. Browaeys, D. E. Chang, Phys. Rev. X 11, 011026 "   \
    "(2021), Eq. (5) (two-level -pi N Gamma0/k^3), times (1/3)(g_e/g_g) for a J_g -> J_e line "      \
    "(Clausius-Mossotti resonance with the total oscillator strength)"
#define SRC_CLS                                                                                    \
    "R. Friedberg, S. R. Hartmann, J. T. Manassah, Phys. Rep. 7, 101 (1973); slab form as used by " \
    "J. Keaveney et al., Phys. Rev. Lett. 108, 173601 (2012)"
#define SRC_SELF                                                                                   \
    "A. W. Ali, H. R. Griem, Phys. Rev. 140, A1044 (1965) and 144, 366 (1966); E. L. Lewis, Phys. " \
    "Rep. 58, 1 (1980)"
#define SRC_LINE "line data (see the line's source)"
#define SRC_DOPPLER "Maxwell-Boltzmann velocity distribution (common practice)"
#define SRC_XS                                                                                     \
    "integrated cross-section (g_e/g_g) lambda^2 Gamma0/(8 pi) of a hyperfine-unresolved line "      \
    "(common practice); Doppler peak as in T. Holstein, Phys. Rev. 72, 1212 (1947)"
#define SRC_HOLSTEIN                                                                               \
    "T. Holstein, Phys. Rev. 72, 1212 (1947) and 83, 1159 (1951); coefficients as tabulated by "    \
    "A. F. Molisch, B. P. Oehry, Radiation Trapping in Atomic Vapours (Oxford, 1998)"
#define SRC_GH                                                                                     \
    "M. Gross, S. Haroche, Phys. Rep. 93, 301 (1982); N. E. Rehler, J. H. Eberly, Phys. Rev. A 3, " \
    "1735 (1971); R. H. Dicke, Phys. Rev. 93, 99 (1954)"
#define SRC_MF "J. C. MacGillivray, M. S. Feld, Phys. Rev. A 14, 1169 (1976)"

typedef struct est_info {
    const char *name, *label, *unit;
    cs_dim dim;
    const char *formula, *cite, *source;
} est_info;

static const est_info infos[CS_TH_COUNT] = {
    [CS_TH_LL_COEF] = {"lorentz_lorenz_coefficient_hz_cm3", "Lorentz-Lorenz shift per density", "Hz cm^3",
                       CS_DIM_DIMENSIONLESS, "-(g_e/g_g) Gamma0/(6 k^3)",
                       "Andreoli et al. 2021, Eq. (5)", SRC_LL},
    [CS_TH_LL_SHIFT] = {"lorentz_lorenz_shift_hz", "Lorentz-Lorenz shift", "Hz", CS_DIM_FREQUENCY,
                        "-(1/3)(g_e/g_g) pi N Gamma0/k^3 / 2pi", "Andreoli et al. 2021, Eq. (5)",
                        SRC_LL},
    [CS_TH_CLS_COEF] = {"cooperative_lamb_coefficient_hz_cm3", "cooperative Lamb shift per density",
                        "Hz cm^3", CS_DIM_DIMENSIONLESS,
                        "-(3/4) (Delta_LL/N) [1 - sin(2kL)/(2kL)]",
                        "Friedberg, Hartmann & Manassah 1973", SRC_CLS},
    [CS_TH_CLS_SHIFT] = {"cooperative_lamb_shift_hz", "cooperative Lamb shift (slab)", "Hz",
                         CS_DIM_FREQUENCY, "-(3/4) Delta_LL [1 - sin(2kL)/(2kL)]",
                         "Friedberg, Hartmann & Manassah 1973", SRC_CLS},
    [CS_TH_SLAB_COEF] = {"slab_shift_coefficient_hz_cm3", "slab shift LL + CLS per density", "Hz cm^3",
                         CS_DIM_DIMENSIONLESS, "(Delta_LL/N) [1/4 + (3/4) sin(2kL)/(2kL)]",
                         "Friedberg, Hartmann & Manassah 1973", SRC_CLS},
    [CS_TH_SLAB_SHIFT] = {"slab_shift_hz", "slab shift LL + CLS", "Hz", CS_DIM_FREQUENCY,
                          "Delta_LL [1/4 + (3/4) sin(2kL)/(2kL)]",
                          "Friedberg, Hartmann & Manassah 1973", SRC_CLS},
    [CS_TH_SELF_COEF] = {"self_broadening_coefficient_hz_cm3", "self-broadening FWHM per density",
                         "Hz cm^3", CS_DIM_DIMENSIONLESS, "sqrt(g_e/g_g) Gamma0/k^3",
                         "Ali & Griem 1965; Lewis 1980", SRC_SELF},
    [CS_TH_SELF_FWHM] = {"self_broadening_fwhm_hz", "self-broadening FWHM", "Hz", CS_DIM_FREQUENCY,
                         "sqrt(g_e/g_g) Gamma0 lambda^3 N/(4 pi^2) / 2pi",
                         "Ali & Griem 1965; Lewis 1980", SRC_SELF},
    [CS_TH_NATURAL_FWHM] = {"natural_fwhm_hz", "natural FWHM", "Hz", CS_DIM_FREQUENCY,
                            "Gamma0/2pi", "line data", SRC_LINE},
    [CS_TH_HOMOGENEOUS_FWHM] = {"homogeneous_fwhm_hz", "homogeneous FWHM (natural + self)", "Hz",
                                CS_DIM_FREQUENCY, "(Gamma0 + beta N)/2pi",
                                "Ali & Griem 1965; Lewis 1980", SRC_SELF},
    [CS_TH_DOPPLER_FWHM] = {"doppler_fwhm_hz", "Doppler FWHM", "Hz", CS_DIM_FREQUENCY,
                            "sqrt(8 ln2 k_B T/m)/lambda", "Maxwell-Boltzmann", SRC_DOPPLER},
    [CS_TH_GAMMA0] = {"single_atom_decay_rate_per_s", "single-atom decay rate Gamma0", "s^-1",
                      CS_DIM_RATE, "1/tau", "line data", SRC_LINE},
    [CS_TH_LIFETIME] = {"natural_lifetime_s", "natural lifetime tau", "s", CS_DIM_TIME, "1/Gamma0",
                        "line data", SRC_LINE},
    [CS_TH_CROSS_SECTION] = {"resonant_cross_section_m2", "resonant cross-section sigma0", "m^2",
                             CS_DIM_DIMENSIONLESS, "(g_e/g_g) lambda^2/(2 pi)",
                             "resonant cross-section", SRC_XS},
    [CS_TH_OD] = {"optical_depth", "optical depth of the slab (natural line)", "",
                  CS_DIM_DIMENSIONLESS, "N sigma0 L", "resonant cross-section", SRC_XS},
    [CS_TH_OD_DOPPLER] = {"optical_depth_doppler", "optical depth of the slab (Doppler line)", "",
                          CS_DIM_DIMENSIONLESS,
                          "N (g_e/g_g) lambda^3 Gamma0 L/(8 pi^1.5 u), u = sqrt(2 k_B T/m)",
                          "Holstein 1947", SRC_XS},
    [CS_TH_OD_VOIGT] = {"optical_depth_voigt", "optical depth of the slab (Voigt line)", "",
                        CS_DIM_DIMENSIONLESS,
                        "N (g_e/g_g) lambda^2 Gamma0 L/(8 pi) V(0; Doppler, homogeneous)",
                        "resonant cross-section", SRC_XS},
    [CS_TH_TRAP_SLAB_DOPPLER] = {"trapping_rate_slab_doppler_per_s",
                                 "trapped decay rate, slab, Doppler line", "s^-1", CS_DIM_RATE,
                                 "Gamma0 1.875/(k0 L sqrt(pi ln(k0 L/2)))", "Holstein 1947/1951",
                                 SRC_HOLSTEIN},
    [CS_TH_TRAP_SLAB_LORENTZ] = {"trapping_rate_slab_lorentz_per_s",
                                 "trapped decay rate, slab, Lorentz line", "s^-1", CS_DIM_RATE,
                                 "Gamma0 1.150/sqrt(pi k0 L)", "Holstein 1947/1951", SRC_HOLSTEIN},
    [CS_TH_TRAP_CYL_DOPPLER] = {"trapping_rate_cylinder_doppler_per_s",
                                "trapped decay rate, cylinder, Doppler line", "s^-1", CS_DIM_RATE,
                                "Gamma0 1.60/(k0 R sqrt(pi ln(k0 R)))", "Holstein 1947/1951",
                                SRC_HOLSTEIN},
    [CS_TH_TRAP_CYL_LORENTZ] = {"trapping_rate_cylinder_lorentz_per_s",
                                "trapped decay rate, cylinder, Lorentz line", "s^-1", CS_DIM_RATE,
                                "Gamma0 1.115/sqrt(pi k0 R)", "Holstein 1947/1951", SRC_HOLSTEIN},
    [CS_TH_SR_ATOMS] = {"superradiance_atoms", "atoms in the pencil N", "", CS_DIM_DIMENSIONLESS,
                        "N = n pi R^2 L, or given", "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_FRESNEL] = {"fresnel_number", "Fresnel number of the pencil", "",
                          CS_DIM_DIMENSIONLESS, "pi R^2/(lambda L)", "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_MU] = {"geometric_factor_mu", "geometric factor mu", "", CS_DIM_DIMENSIONLESS,
                     "3 lambda^2/(8 pi A)", "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_ENHANCEMENT] = {"collective_enhancement", "collective enhancement N mu", "",
                              CS_DIM_DIMENSIONLESS, "N mu = OD/4 (two-level pencil)",
                              "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_OD] = {"pencil_optical_depth", "optical depth along the pencil (natural line)", "",
                     CS_DIM_DIMENSIONLESS, "N sigma0/A = n sigma0 L", "resonant cross-section",
                     SRC_XS},
    [CS_TH_SR_RATE] = {"collective_decay_rate_per_s", "collective decay rate Gamma_N", "s^-1",
                       CS_DIM_RATE, "Gamma0 (1 + N mu)", "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_TIME] = {"superradiance_time_s", "superradiance time T_R", "s", CS_DIM_TIME,
                       "tau/(N mu)", "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_DELAY] = {"burst_delay_s", "burst delay t_D (quantum start)", "s", CS_DIM_TIME,
                        "T_R ln N", "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_DELAY_PROP] = {"burst_delay_propagation_s", "burst delay t_D (with propagation)", "s",
                             CS_DIM_TIME, "(T_R/4) [ln sqrt(2 pi N)]^2", "MacGillivray & Feld 1976",
                             SRC_MF},
    [CS_TH_SR_WIDTH] = {"burst_fwhm_s", "burst duration (FWHM)", "s", CS_DIM_TIME,
                        "4 arccosh(sqrt 2) T_R = 3.525 T_R", "Gross & Haroche 1982", SRC_GH},
    [CS_TH_SR_PEAK_POWER] = {"burst_peak_power_w", "burst peak power", "W", CS_DIM_DIMENSIONLESS,
                             "N hbar w0/(4 T_R)", "Gross & Haroche 1982", SRC_GH},
};

/* ---- plain formulas ----------------------------------------------------------------------- */

static int line_ok(const cs_line *l)
{
    return l && isfinite(l->wavelength_m) && l->wavelength_m > 0.0 && isfinite(l->gamma0) &&
           l->gamma0 > 0.0 && isfinite(l->jg) && isfinite(l->je) && l->jg >= 0.0 && l->je >= 0.0;
}

double cs_theory_ll_coefficient(const cs_line *l)
{
    if (!line_ok(l))
        return NAN;
    double k = TWO_PI / l->wavelength_m;
    /* Delta_LL/(2 pi N) = -(1/3)(g_e/g_g) pi Gamma0/k^3 / (2 pi) */
    return -cs_line_degeneracy_ratio(l) * l->gamma0 / (6.0 * k * k * k);
}

/* 1 - sin(x)/x without cancellation near x = 0. */
static double one_minus_sinc(double x)
{
    if (fabs(x) < 0.1) {
        double x2 = x * x;
        /* x^2/3! - x^4/5! + x^6/7! - x^8/9!; the next term is below 1e-17 relative */
        return x2 * (1.0 / 6.0 - x2 * (1.0 / 120.0 - x2 * (1.0 / 5040.0 - x2 / 362880.0)));
    }
    return 1.0 - sin(x) / x;
}

double cs_theory_cls_factor(double kL)
{
    if (!isfinite(kL) || kL < 0.0)
        return NAN;
    return -0.75 * one_minus_sinc(2.0 * kL);
}

double cs_theory_slab_factor(double kL)
{
    if (!isfinite(kL) || kL < 0.0)
        return NAN;
    return 1.0 - 0.75 * one_minus_sinc(2.0 * kL);
}

double cs_theory_self_broadening_coefficient(const cs_line *l)
{
    if (!line_ok(l))
        return NAN;
    double k = TWO_PI / l->wavelength_m;
    return sqrt(cs_line_degeneracy_ratio(l)) * l->gamma0 / (k * k * k);
}

/* Most probable speed sqrt(2 k_B T/m), m/s. */
static double thermal_speed(const cs_line *l, double T_K)
{
    return sqrt(2.0 * CS_THEORY_BOLTZMANN * T_K / (l->mass_u * CS_THEORY_ATOMIC_MASS_UNIT));
}

double cs_theory_doppler_fwhm(const cs_line *l, double T_K)
{
    if (!line_ok(l) || !isfinite(l->mass_u) || l->mass_u <= 0.0 || !isfinite(T_K) || T_K <= 0.0)
        return NAN;
    /* FWHM = 2 sqrt(ln 2) u / lambda */
    return 2.0 * sqrt(log(2.0)) * thermal_speed(l, T_K) / l->wavelength_m;
}

double cs_theory_holstein_escape(cs_holstein_geometry geom, cs_holstein_shape shape, double kx)
{
    if (!isfinite(kx) || kx <= 0.0)
        return NAN;
    if (shape == CS_HOLSTEIN_LORENTZ) {
        double c = geom == CS_HOLSTEIN_SLAB ? 1.150 : 1.115;
        return c / sqrt(PI * kx);
    }
    double arg = geom == CS_HOLSTEIN_SLAB ? kx / 2.0 : kx;
    if (arg <= 1.0)
        return NAN;
    double c = geom == CS_HOLSTEIN_SLAB ? 1.875 : 1.60;
    return c / (kx * sqrt(PI * log(arg)));
}

/* ---- estimates ---------------------------------------------------------------------------- */

void cs_theory_inputs_init(cs_theory_inputs *in)
{
    if (!in)
        return;
    in->density_m3 = NAN;
    in->thickness_m = NAN;
    in->temperature_K = NAN;
    in->length_m = NAN;
    in->radius_m = NAN;
    in->atoms = NAN;
}

const char *cs_estimate_status_name(cs_estimate_status s)
{
    switch (s) {
    case CS_EST_OK: return "ok";
    case CS_EST_NEEDS_INPUT: return "needs_input";
    case CS_EST_NOT_APPLICABLE: return "not_applicable";
    }
    return "unknown";
}

double cs_theory_value(const cs_theory_estimates *est, cs_theory_quantity q)
{
    if (!est || (int)q < 0 || q >= CS_TH_COUNT || est->e[q].status != CS_EST_OK)
        return NAN;
    return est->e[q].value;
}

/* Inputs an estimate needs, collected before the value is computed. */
typedef struct needs {
    const char *what[8];
    int n;
} needs;

static void need(needs *nd, int missing, const char *what)
{
    if (missing && nd->n < 8)
        nd->what[nd->n++] = what;
}

/* Mark e as needing the inputs in nd; returns 1 when something is missing. */
static int lacks(cs_estimate *e, const needs *nd)
{
    if (nd->n == 0)
        return 0;
    e->status = CS_EST_NEEDS_INPUT;
    size_t used = (size_t)snprintf(e->note, sizeof e->note, "needs ");
    for (int i = 0; i < nd->n && used < sizeof e->note; i++)
        used += (size_t)snprintf(e->note + used, sizeof e->note - used, "%s%s",
                                 i == 0 ? "" : (i == nd->n - 1 ? " and " : ", "), nd->what[i]);
    return 1;
}

static void set_value(cs_estimate *e, double v)
{
    e->status = CS_EST_OK;
    e->value = v;
}

static int bad_input(cs_error *err, const char *what, double v, const char *why)
{
    return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "%s = %g: %s", what, v, why);
}

static int check_inputs(const cs_theory_inputs *in, cs_error *err)
{
    const struct {
        double v;
        const char *what;
        int zero_ok;
    } items[] = {
        {in->density_m3, "density", 1},       {in->thickness_m, "thickness", 0},
        {in->temperature_K, "temperature", 0}, {in->length_m, "sample length", 0},
        {in->radius_m, "sample radius", 0},    {in->atoms, "number of atoms", 0},
    };
    for (size_t i = 0; i < sizeof items / sizeof items[0]; i++) {
        double v = items[i].v;
        if (isnan(v))
            continue;
        if (!isfinite(v))
            return bad_input(err, items[i].what, v, "must be finite");
        if (v < 0.0 || (v == 0.0 && !items[i].zero_ok))
            return bad_input(err, items[i].what, v, items[i].zero_ok ? "must not be negative"
                                                                     : "must be positive");
    }
    return CS_OK;
}

/* Trapped rate from Holstein's escape factor for one geometry and line shape. */
static void trapping(cs_estimate *e, const needs *nd, cs_holstein_geometry geom,
                     cs_holstein_shape shape, double k0, double x, double gamma0)
{
    if (lacks(e, nd))
        return;
    double kx = k0 * x;
    const char *sym = geom == CS_HOLSTEIN_SLAB ? "k0 L" : "k0 R";
    if (!(kx >= CS_THEORY_HOLSTEIN_MIN)) {
        e->status = CS_EST_NOT_APPLICABLE;
        snprintf(e->note, sizeof e->note,
                 "%s = %.3g < %g: not optically thick enough for Holstein's asymptotic form (see the "
                 "Milne/Post theory, T. Colbert, J. Huennekens, Phys. Rev. A 41, 6145 (1990))",
                 sym, kx, CS_THEORY_HOLSTEIN_MIN);
        return;
    }
    double g = cs_theory_holstein_escape(geom, shape, kx);
    set_value(e, g * gamma0);
    snprintf(e->note, sizeof e->note, "%s = %.4g, escape factor g = %.4g%s", sym, kx, g,
             kx < 100.0 ? "; asymptotic form, approximate below k0 x ~ 100" : "");
}

int cs_theory_predict(const cs_line *line, const cs_theory_inputs *in, cs_theory_estimates *out,
                      cs_error *err)
{
    if (!line || !in || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "theory: NULL argument");
    if (!line_ok(line))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "line '%s': wavelength, decay rate and J must be positive and finite",
                            line->name ? line->name : "?");
    int rc = check_inputs(in, err);
    if (rc != CS_OK)
        return rc;

    out->line = *line;
    out->in = *in;
    for (int q = 0; q < CS_TH_COUNT; q++) {
        cs_estimate *e = &out->e[q];
        e->name = infos[q].name;
        e->label = infos[q].label;
        e->unit = infos[q].unit;
        e->dim = infos[q].dim;
        e->formula = infos[q].formula;
        e->cite = infos[q].cite;
        e->source = infos[q].source;
        e->status = CS_EST_NEEDS_INPUT;
        e->value = NAN;
        e->note[0] = '\0';
    }
    cs_estimate *E = out->e;

    const double lambda = line->wavelength_m, k = TWO_PI / lambda, G0 = line->gamma0;
    const double w0 = TWO_PI * CS_SPEED_OF_LIGHT / lambda;
    const double ratio = cs_line_degeneracy_ratio(line); /* g_e/g_g */
    const double n = in->density_m3, L = in->thickness_m, T = in->temperature_K;
    const double Ls = in->length_m, R = in->radius_m;
    const int no_n = isnan(n), no_L = isnan(L), no_T = isnan(T), no_R = isnan(R), no_Ls = isnan(Ls);
    const int no_mass = !(isfinite(line->mass_u) && line->mass_u > 0.0);
    static const char *DENSITY = "the density", *THICK = "the slab thickness",
                      *TEMP = "the temperature", *MASS = "the atomic mass",
                      *RADIUS = "the sample radius", *LENGTH = "the sample length";
    needs nd;

    /* 1-2. Lorentz-Lorenz shift and the slab's cooperative Lamb shift. */
    const double c_ll = cs_theory_ll_coefficient(line); /* Hz m^3 */
    set_value(&E[CS_TH_LL_COEF], c_ll * PER_M3_TO_PER_CM3);
    snprintf(E[CS_TH_LL_COEF].note, CS_ESTIMATE_NOTE_MAX,
             "hyperfine-unresolved line with the total oscillator strength");
    nd = (needs){{0}, 0};
    need(&nd, no_n, DENSITY);
    if (!lacks(&E[CS_TH_LL_SHIFT], &nd)) {
        set_value(&E[CS_TH_LL_SHIFT], c_ll * n);
        strcpy(E[CS_TH_LL_SHIFT].note, E[CS_TH_LL_COEF].note);
    }
    static const char cls_note[] =
        "model-dependent when fitted to cw transmission (Friedberg & Manassah, Atoms 10, 49 "
        "(2022)); a nanocell is also a low-finesse cavity (Peyrot et al., PRL 120, 243401 (2018))";
    const double cls = no_L ? NAN : cs_theory_cls_factor(k * L);
    const double slab = no_L ? NAN : cs_theory_slab_factor(k * L);
    nd = (needs){{0}, 0};
    need(&nd, no_L, THICK);
    if (!lacks(&E[CS_TH_CLS_COEF], &nd)) {
        set_value(&E[CS_TH_CLS_COEF], c_ll * cls * PER_M3_TO_PER_CM3);
        set_value(&E[CS_TH_SLAB_COEF], c_ll * slab * PER_M3_TO_PER_CM3);
        snprintf(E[CS_TH_CLS_COEF].note, CS_ESTIMATE_NOTE_MAX, "kL = %.6g; %s", k * L, cls_note);
        strcpy(E[CS_TH_SLAB_COEF].note, E[CS_TH_CLS_COEF].note);
    } else {
        lacks(&E[CS_TH_SLAB_COEF], &nd);
    }
    need(&nd, no_n, DENSITY);
    if (!lacks(&E[CS_TH_CLS_SHIFT], &nd)) {
        set_value(&E[CS_TH_CLS_SHIFT], c_ll * cls * n);
        set_value(&E[CS_TH_SLAB_SHIFT], c_ll * slab * n);
        strcpy(E[CS_TH_CLS_SHIFT].note, E[CS_TH_CLS_COEF].note);
        strcpy(E[CS_TH_SLAB_SHIFT].note, E[CS_TH_CLS_COEF].note);
    } else {
        lacks(&E[CS_TH_SLAB_SHIFT], &nd);
    }

    /* 3. Self-broadening and the widths. */
    const double c_self = cs_theory_self_broadening_coefficient(line); /* Hz m^3, cyclic FWHM */
    set_value(&E[CS_TH_SELF_COEF], c_self * PER_M3_TO_PER_CM3);
    strcpy(E[CS_TH_SELF_COEF].note, "impact theory, FWHM; about 5 % accuracy");
    nd = (needs){{0}, 0};
    need(&nd, no_n, DENSITY);
    const double gamma_h = no_n ? NAN : G0 + TWO_PI * c_self * n; /* rad/s, FWHM */
    if (!lacks(&E[CS_TH_SELF_FWHM], &nd)) {
        set_value(&E[CS_TH_SELF_FWHM], c_self * n);
        strcpy(E[CS_TH_SELF_FWHM].note, E[CS_TH_SELF_COEF].note);
        set_value(&E[CS_TH_HOMOGENEOUS_FWHM], gamma_h / TWO_PI);
    } else {
        lacks(&E[CS_TH_HOMOGENEOUS_FWHM], &nd);
    }
    set_value(&E[CS_TH_NATURAL_FWHM], G0 / TWO_PI);
    set_value(&E[CS_TH_GAMMA0], G0);
    set_value(&E[CS_TH_LIFETIME], 1.0 / G0);
    nd = (needs){{0}, 0};
    need(&nd, no_T, TEMP);
    need(&nd, no_mass, MASS);
    const double u = (no_T || no_mass) ? NAN : thermal_speed(line, T);
    if (!lacks(&E[CS_TH_DOPPLER_FWHM], &nd))
        set_value(&E[CS_TH_DOPPLER_FWHM], cs_theory_doppler_fwhm(line, T));

    /* 6. Cross-sections and optical depths of the slab. */
    const double sigma0 = ratio * lambda * lambda / TWO_PI;
    const double sigma_D = ratio * lambda * lambda * lambda * G0 / (8.0 * pow(PI, 1.5) * u);
    const double sigma_L = ratio * lambda * lambda * G0 / (TWO_PI * gamma_h);
    set_value(&E[CS_TH_CROSS_SECTION], sigma0);
    strcpy(E[CS_TH_CROSS_SECTION].note, "natural line, atoms at rest");
    nd = (needs){{0}, 0};
    need(&nd, no_n, DENSITY);
    need(&nd, no_L, THICK);
    if (!lacks(&E[CS_TH_OD], &nd)) {
        set_value(&E[CS_TH_OD], n * sigma0 * L);
        strcpy(E[CS_TH_OD].note, "natural line, atoms at rest (cold atoms)");
    }
    need(&nd, no_T, TEMP);
    need(&nd, no_mass, MASS);
    if (!lacks(&E[CS_TH_OD_DOPPLER], &nd)) {
        set_value(&E[CS_TH_OD_DOPPLER], n * sigma_D * L);
        strcpy(E[CS_TH_OD_DOPPLER].note, "Doppler line, homogeneous width neglected");
        /* Voigt peak: area-normalised profile in Hz, Gaussian sigma = u/(lambda sqrt 2), Lorentzian
         * HWHM = Gamma_h/(4 pi). */
        double v0 = voigt(0.0, u / (lambda * sqrt(2.0)), gamma_h / (2.0 * TWO_PI));
        set_value(&E[CS_TH_OD_VOIGT], n * ratio * lambda * lambda * G0 / (8.0 * PI) * v0 * L);
        strcpy(E[CS_TH_OD_VOIGT].note, "line centre of the (shifted) line; natural + self-broadened "
                                       "Lorentzian convolved with the Doppler Gaussian");
    } else {
        lacks(&E[CS_TH_OD_VOIGT], &nd);
    }

    /* 5. Radiation trapping. */
    nd = (needs){{0}, 0};
    need(&nd, no_n, DENSITY);
    need(&nd, no_L, THICK);
    trapping(&E[CS_TH_TRAP_SLAB_LORENTZ], &nd, CS_HOLSTEIN_SLAB, CS_HOLSTEIN_LORENTZ, n * sigma_L, L,
             G0);
    need(&nd, no_T, TEMP);
    need(&nd, no_mass, MASS);
    trapping(&E[CS_TH_TRAP_SLAB_DOPPLER], &nd, CS_HOLSTEIN_SLAB, CS_HOLSTEIN_DOPPLER, n * sigma_D, L,
             G0);
    nd = (needs){{0}, 0};
    need(&nd, no_n, DENSITY);
    need(&nd, no_R, RADIUS);
    trapping(&E[CS_TH_TRAP_CYL_LORENTZ], &nd, CS_HOLSTEIN_CYLINDER, CS_HOLSTEIN_LORENTZ,
             n * sigma_L, R, G0);
    need(&nd, no_T, TEMP);
    need(&nd, no_mass, MASS);
    trapping(&E[CS_TH_TRAP_CYL_DOPPLER], &nd, CS_HOLSTEIN_CYLINDER, CS_HOLSTEIN_DOPPLER,
             n * sigma_D, R, G0);

    /* 4. Superradiance of a pencil. */
    static const char sr_note[] = "pencil, Fresnel number ~ 1, all atoms inverted, two-level formulas";
    const double A = no_R ? NAN : PI * R * R;
    double N = in->atoms;
    int n_given = !isnan(N);
    nd = (needs){{0}, 0};
    if (!n_given) {
        need(&nd, no_n, DENSITY);
        need(&nd, no_R, RADIUS);
        need(&nd, no_Ls, LENGTH);
        if (nd.n == 0)
            N = n * A * Ls;
    }
    const needs nd_atoms = nd;
    if (!lacks(&E[CS_TH_SR_ATOMS], &nd_atoms)) {
        set_value(&E[CS_TH_SR_ATOMS], N);
        strcpy(E[CS_TH_SR_ATOMS].note, n_given ? "given" : "N = n pi R^2 L");
    }
    nd = (needs){{0}, 0};
    need(&nd, no_R, RADIUS);
    need(&nd, no_Ls, LENGTH);
    if (!lacks(&E[CS_TH_SR_FRESNEL], &nd)) {
        double F = A / (lambda * Ls);
        set_value(&E[CS_TH_SR_FRESNEL], F);
        if (F < 0.5 || F > 2.0)
            snprintf(E[CS_TH_SR_FRESNEL].note, CS_ESTIMATE_NOTE_MAX,
                     "F = %.3g: the pencil formulas assume F ~ 1", F);
    }
    nd = (needs){{0}, 0};
    need(&nd, no_R, RADIUS);
    const double mu = no_R ? NAN : 3.0 * lambda * lambda / (8.0 * PI * A);
    if (!lacks(&E[CS_TH_SR_MU], &nd)) {
        set_value(&E[CS_TH_SR_MU], mu);
        strcpy(E[CS_TH_SR_MU].note, sr_note);
    }
    nd = nd_atoms;
    if (n_given)
        need(&nd, no_R, RADIUS); /* otherwise already among the needs of N */
    if (!lacks(&E[CS_TH_SR_OD], &nd)) {
        set_value(&E[CS_TH_SR_OD], N * sigma0 / A);
        strcpy(E[CS_TH_SR_OD].note, "natural line, atoms at rest; with (g_e/g_g), so 4 N mu "
                                    "only for J = 0 -> 1");
    }
    const cs_theory_quantity sr[] = {CS_TH_SR_ENHANCEMENT, CS_TH_SR_RATE, CS_TH_SR_TIME,
                                     CS_TH_SR_DELAY, CS_TH_SR_DELAY_PROP, CS_TH_SR_WIDTH,
                                     CS_TH_SR_PEAK_POWER};
    for (size_t i = 0; i < sizeof sr / sizeof sr[0]; i++) {
        cs_estimate *e = &E[sr[i]];
        if (lacks(e, &nd))
            continue;
        const double Nmu = N * mu, TR = 1.0 / (G0 * Nmu);
        strcpy(e->note, sr_note);
        switch (sr[i]) {
        case CS_TH_SR_ENHANCEMENT: set_value(e, Nmu); break;
        case CS_TH_SR_RATE: set_value(e, G0 * (1.0 + Nmu)); break;
        case CS_TH_SR_TIME: set_value(e, TR); break;
        case CS_TH_SR_WIDTH: set_value(e, 4.0 * acosh(sqrt(2.0)) * TR); break;
        case CS_TH_SR_PEAK_POWER: set_value(e, N * CS_THEORY_HBAR * w0 / (4.0 * TR)); break;
        case CS_TH_SR_DELAY:
        case CS_TH_SR_DELAY_PROP:
            if (!(N > 1.0)) {
                e->status = CS_EST_NOT_APPLICABLE;
                snprintf(e->note, sizeof e->note, "N = %.3g: a burst needs many atoms", N);
            } else if (sr[i] == CS_TH_SR_DELAY) {
                set_value(e, TR * log(N));
            } else {
                double l2 = log(sqrt(TWO_PI * N));
                set_value(e, TR / 4.0 * l2 * l2);
            }
            break;
        default: break;
        }
        if (e->status == CS_EST_OK && Nmu < 1.0)
            snprintf(e->note, sizeof e->note, "N mu = %.3g < 1: collective emission does not "
                     "dominate; %s", Nmu, sr_note);
        else if (sr[i] == CS_TH_SR_DELAY && e->status == CS_EST_OK && !no_n &&
                 e->value > 2.0 / gamma_h)
            /* Gross & Haroche's condition t_D << T2, with T2 = 1/(pi x homogeneous FWHM) */
            snprintf(e->note, sizeof e->note, "t_D > T2 = 1/(pi x homogeneous FWHM) = %.3g s: "
                     "dephasing competes with the burst; %s", 2.0 / gamma_h, sr_note);
    }
    return CS_OK;
}
