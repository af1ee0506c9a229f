/* `collshift predict`: the standard collective-shift, broadening, superradiance and trapping
 * estimates for a line and a sample, as a table on stdout and optionally as JSON. */
#include "cli.h"

#include <collshift/theory.h>
#include <collshift/units.h>

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

const char *const cmd_predict_usage[] = {
    "usage: collshift predict --line NAME --density VALUE [--thickness LENGTH] [--json FILE]\n"
    "       collshift predict --line NAME --temperature T [options]    (density from the vapour pressure)\n"
    "       collshift predict --wavelength LENGTH --gamma RATE --jg J --je J --density VALUE [options]\n"
    "       collshift predict --list-lines\n"
    "\n"
    "Prints the standard estimates for a line in a dense sample, each with its formula's published\n"
    "source: the Lorentz-Lorenz (local-field) shift, the cooperative Lamb shift and the total shift of\n"
    "a slab of thickness L (Friedberg, Hartmann & Manassah 1973), resonant self-broadening (Ali &\n"
    "Griem 1965; Lewis 1980), natural, homogeneous and Doppler widths, resonant optical depths,\n"
    "Holstein's radiation-trapping decay rates for a slab and a cylinder, the single-atom and\n"
    "collective decay rates and the superradiant burst delay, duration and peak power (Dicke; Gross &\n"
    "Haroche 1982), and the coefficients per unit density (Hz cm^3) that 'series' compares measured\n"
    "slopes with. An estimate whose inputs are missing is listed with what it needs, never with a\n"
    "number.\n"
    "\n"
    "Conventions: shift = measured minus unperturbed, negative = red; widths are FWHM in Hz; rates\n"
    "in s^-1 (a Lorentzian of rate Gamma has FWHM Gamma/2pi); coefficients per unit density are\n"
    "cyclic (shift/2pi/N) in Hz cm^3. Lines are hyperfine-unresolved, with degeneracies g = 2J+1.\n"
    "\n"
    "Sample:\n"
    "  --density VALUE       number density with its unit, e.g. 3e13cm^-3 (all atoms of the species)\n"
    "  --temperature T       temperature, e.g. 450K or 150degC: gives the Doppler width, and the density\n"
    "                        from the alkali vapour pressure when --density is not given (Alcock,\n"
    "                        Itkin & Horrigan 1984, as in Steck's data; Rb, Cs, K, Na lines only)\n"
    "  --phase auto|solid|liquid  phase of the metal for the vapour pressure (default: from the\n"
    "                        melting point)\n"
    "  --thickness LENGTH    slab (cell) thickness L, e.g. 250nm: cooperative Lamb shift, slab optical\n"
    "                        depth and slab trapping\n"
    "  --length LENGTH       length of a pencil-shaped sample (superradiance)\n"
    "  --radius LENGTH       radius of the pencil or cylinder (superradiance, cylinder trapping)\n"
    "  --atoms N             number of atoms in the pencil (default: density x pi R^2 x length)\n"
    "\n",
    "Line:\n"
    "  --line NAME           a built-in line (below, case-insensitive); with the options below, they\n"
    "                        replace the table's values\n"
    "  --wavelength LENGTH   vacuum wavelength, e.g. 780.241nm\n"
    "  --frequency FREQ      or the transition frequency, e.g. 384.2305THz (or a wavenumber in cm^-1)\n"
    "  --gamma RATE          natural decay rate Gamma0 = 1/tau: a rate (3.8117e7s^-1), a natural FWHM\n"
    "                        Gamma0/2pi (6.0666MHz) or a lifetime (26.24ns)\n"
    "  --dipole D            or the reduced dipole <J_g||er||J_e> in Steck's convention, e.g. 4.2275ea0\n"
    "                        (also C m, D)\n"
    "  --jg J, --je J        J of the lower and upper level (0, 1/2, 1, 3/2, ...)\n"
    "  --mass M              atomic mass in u (Doppler quantities)\n"
    "  --list-lines          list the built-in lines with their data and sources\n"
    "\n"
    "Built-in lines:\n"
    "  rb87-d1 rb87-d2 rb85-d1 rb85-d2   Rb D lines (Steck; aliases rb-d1 rb-d2 = 87Rb)\n"
    "  cs-d1 cs-d2                       Cs D lines, current Steck revision (tau 34.791, 30.405 ns)\n"
    "  cs-d1-old cs-d2-old               Cs D lines, older Steck revision (4.5612, 5.2227 MHz)\n"
    "  k39-d1 k39-d2                     39K D lines (Tiecke; aliases k-d1 k-d2)\n"
    "  na-d1 na-d2                       23Na D lines (Steck)\n"
    "  sr-461 sr-689                     88Sr 1S0-1P1 and 1S0-3P1 (intercombination) lines\n"
    "  ca-423                            40Ca 1S0-1P1 line\n"
    "\n"
    "Output:\n"
    "  --json FILE           also write every estimate as JSON ('-': to standard output, instead of\n"
    "                        the table): one field per estimate named with its unit\n"
    "                        (lorentz_lorenz_shift_hz, cooperative_lamb_shift_hz,\n"
    "                        self_broadening_fwhm_hz, ...; null when it could not be computed), the\n"
    "                        line data and inputs used with their sources, and an 'estimates' list\n"
    "                        with status, formula, source and notes\n"
    "\n"
    "Caveats: a cooperative Lamb shift fitted to cw transmission is model-dependent (Friedberg &\n"
    "Manassah 2022), and a nanocell is a low-finesse cavity (Peyrot et al. 2018). Holstein's rates are\n"
    "asymptotic and given for k0 L (k0 R) >= 10 only. The superradiance block assumes a pencil with\n"
    "Fresnel number ~ 1, all atoms inverted, and two-level formulas.\n",
    NULL,
};

enum {
    OPT_LINE = 1, OPT_DENSITY, OPT_TEMPERATURE, OPT_PHASE, OPT_THICKNESS, OPT_LENGTH, OPT_RADIUS,
    OPT_ATOMS, OPT_WAVELENGTH, OPT_FREQUENCY, OPT_GAMMA, OPT_DIPOLE, OPT_JG, OPT_JE, OPT_MASS,
    OPT_LIST, OPT_JSON
};

static int bad_value(const char *opt, const char *arg, const char *why)
{
    cli_errorf("predict: --%s '%s': %s", opt, arg, why);
    return CLI_EXIT_USAGE;
}

/* A quantity of dimension `dim` that must be positive (or non-negative when zero_ok). */
static int parse_positive(const char *opt, const char *arg, cs_dim dim, int zero_ok, double *out)
{
    cs_error err;
    cs_error_clear(&err);
    if (cs_quantity_parse(arg, dim, NULL, out, NULL, NULL, &err) != CS_OK)
        return bad_value(opt, arg, err.msg);
    if (!(*out > 0.0 || (zero_ok && *out == 0.0)))
        return bad_value(opt, arg, zero_ok ? "must not be negative" : "must be positive");
    return 0;
}

static int parse_number(const char *opt, const char *arg, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(arg, &end);
    if (end == arg || *end || errno == ERANGE || !isfinite(v) || !(v > 0.0))
        return bad_value(opt, arg, "expected a positive number");
    *out = v;
    return 0;
}

/* J as a number or a fraction with denominator 2 ("3/2"). */
static int parse_j(const char *opt, const char *arg, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(arg, &end);
    if (end != arg && *end == '/' && end[1] == '2' && end[2] == '\0')
        v /= 2.0, end += 2;
    if (end == arg || *end || errno == ERANGE || !isfinite(v) || v < 0.0)
        return bad_value(opt, arg, "expected J >= 0, e.g. 0, 1/2, 1, 3/2");
    *out = v;
    return 0;
}

/* --frequency: a frequency (cyclic Hz) or a wavenumber. */
static int parse_frequency(const char *arg, double *hz)
{
    cs_error err;
    cs_error_clear(&err);
    double v;
    cs_dim dim;
    if (cs_quantity_parse(arg, CS_DIM_UNKNOWN, NULL, &v, NULL, &dim, &err) != CS_OK)
        return bad_value("frequency", arg, err.msg);
    if (dim == CS_DIM_WAVENUMBER)
        v *= CS_SPEED_OF_LIGHT;
    else if (dim != CS_DIM_FREQUENCY)
        return bad_value("frequency", arg, "expected a frequency (THz) or a wavenumber (cm^-1)");
    if (!(v > 0.0))
        return bad_value("frequency", arg, "must be positive");
    *hz = v;
    return 0;
}

/* --gamma: a rate in s^-1, a natural FWHM Gamma0/2pi in Hz, or a lifetime. */
static int parse_gamma(const char *arg, double *gamma0)
{
    cs_error err;
    cs_error_clear(&err);
    double v;
    cs_dim dim;
    if (cs_quantity_parse(arg, CS_DIM_UNKNOWN, NULL, &v, NULL, &dim, &err) != CS_OK)
        return bad_value("gamma", arg, err.msg);
    if (!(v > 0.0))
        return bad_value("gamma", arg, "must be positive");
    if (dim == CS_DIM_RATE)
        *gamma0 = v;
    else if (dim == CS_DIM_FREQUENCY)
        *gamma0 = 2.0 * 3.14159265358979323846 * v;
    else if (dim == CS_DIM_TIME)
        *gamma0 = 1.0 / v;
    else
        return bad_value("gamma", arg, "expected a rate (s^-1), a natural FWHM (MHz) or a lifetime (ns)");
    return 0;
}

/* "1/2", "3/2", "0", "1". */
static const char *fmt_j(double j, char *buf, size_t n)
{
    if (fabs(j - floor(j)) > 0.25)
        snprintf(buf, n, "%d/2", (int)lround(2.0 * j));
    else
        snprintf(buf, n, "%d", (int)lround(j));
    return buf;
}

static const char *phase_name(cs_phase p)
{
    return p == CS_PHASE_SOLID ? "solid" : p == CS_PHASE_LIQUID ? "liquid" : "auto";
}

static void list_lines(void)
{
    printf("%-10s %-15s %-12s %-8s %s\n", "name", "wavelength", "Gamma0/2pi", "J_g-J_e",
           "label; source [how sure]");
    for (size_t i = 0; i < cs_line_count(); i++) {
        const cs_line *l = cs_line_get(i);
        char w[48], g[48], a[16], b[16], jj[40];
        snprintf(jj, sizeof jj, "%s-%s", fmt_j(l->jg, a, sizeof a), fmt_j(l->je, b, sizeof b));
        printf("%-10s %-15s %-12s %-8s %s; %s [%s]\n", l->name,
               cs_quantity_format(l->wavelength_m, CS_DIM_LENGTH, 10, w, sizeof w),
               cs_quantity_format(l->gamma0 / (2.0 * 3.14159265358979323846), CS_DIM_FREQUENCY, 5, g,
                                  sizeof g),
               jj, l->label, l->source, l->mark);
    }
    printf("aliases: rb-d1 rb-d2 (87Rb), k-d1 k-d2 (39K), cs133-d1 cs133-d2, na23-d1 na23-d2\n");
}

/* The value of an estimate as text with its unit. */
static const char *fmt_estimate(const cs_estimate *e, char *buf, size_t n)
{
    if (e->status == CS_EST_NEEDS_INPUT) {
        snprintf(buf, n, "(%s)", e->note);
        return buf;
    }
    if (e->status != CS_EST_OK) {
        snprintf(buf, n, "not applicable");
        return buf;
    }
    if (e->dim == CS_DIM_FREQUENCY || e->dim == CS_DIM_TIME || e->dim == CS_DIM_RATE)
        return cs_quantity_format(e->value, e->dim, 5, buf, n);
    snprintf(buf, n, "%.5g%s%s", e->value, e->unit[0] ? " " : "", e->unit);
    return buf;
}

typedef struct predict_ctx {
    cs_theory_estimates est;
    int have_vapour;
    cs_vapour vapour;
    const char *density_origin; /* "given", "vapour_pressure" */
} predict_ctx;

static void print_text(const predict_ctx *c)
{
    const cs_line *l = &c->est.line;
    const cs_theory_inputs *in = &c->est.in;
    char b1[64], b2[64], b3[64], a[16], b[16];
    const double two_pi = 2.0 * 3.14159265358979323846, ea0 = CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS;
    printf("collshift predict: %s (%s)\n", l->name, l->label);
    printf("conventions: %s\n", CS_THEORY_CONVENTIONS);
    printf("\nline\n");
    printf("  %-22s %s (frequency %s)%s\n", "vacuum wavelength",
           cs_quantity_format(l->wavelength_m, CS_DIM_LENGTH, 10, b1, sizeof b1),
           cs_quantity_format(cs_line_frequency(l), CS_DIM_FREQUENCY, 10, b2, sizeof b2),
           (l->user & CS_LINE_USER_WAVELENGTH) ? " [user-specified]" : "");
    printf("  %-22s %s -> %s (g_e/g_g = %.4g)%s\n", "J_g -> J_e", fmt_j(l->jg, a, sizeof a),
           fmt_j(l->je, b, sizeof b), cs_line_degeneracy_ratio(l),
           (l->user & CS_LINE_USER_J) ? " [user-specified]" : "");
    printf("  %-22s %s (Gamma0/2pi = %s, tau = %s)%s\n", "decay rate Gamma0",
           cs_quantity_format(l->gamma0, CS_DIM_RATE, 6, b1, sizeof b1),
           cs_quantity_format(l->gamma0 / two_pi, CS_DIM_FREQUENCY, 6, b2, sizeof b2),
           cs_quantity_format(1.0 / l->gamma0, CS_DIM_TIME, 6, b3, sizeof b3),
           (l->user & CS_LINE_USER_GAMMA) ? " [user-specified]" : "");
    printf("  %-22s %.6g\n", "oscillator strength f", cs_line_oscillator_strength(l));
    printf("  %-22s <J_g||er||J_e> = %.6g e a0; two-level d = %.6g e a0\n", "dipole",
           cs_line_dipole_reduced(l) / ea0, cs_line_dipole_two_level(l) / ea0);
    if (isfinite(l->mass_u))
        printf("  %-22s %.10g u%s\n", "atomic mass", l->mass_u,
               (l->user & CS_LINE_USER_MASS) ? " [user-specified]" : "");
    printf("  %-22s %s\n", "source", l->source);
    printf("  %-22s %s\n", "how sure", l->mark);

    printf("\nsample\n");
    if (!isnan(in->density_m3))
        printf("  %-22s %s (%s)\n", "density", cs_quantity_format(in->density_m3, CS_DIM_DENSITY, 6, b1, sizeof b1),
               strcmp(c->density_origin, "given") == 0 ? "given" : "from the vapour pressure");
    if (c->have_vapour) {
        const cs_vapour *v = &c->vapour;
        printf("  %-22s %s at %s: %.4g Torr = %s, %s phase%s\n", "vapour pressure", v->element,
               cs_quantity_format(v->T_K, CS_DIM_TEMPERATURE, 6, b1, sizeof b1),
               v->pressure_pa / CS_THEORY_TORR,
               cs_quantity_format(v->pressure_pa, CS_DIM_PRESSURE, 4, b2, sizeof b2), phase_name(v->phase),
               v->outside_range ? " (outside 298-550 K, where the fit is quoted to +-5 %)" : "");
        printf("  %-22s %s\n", "", v->source);
    }
    if (!isnan(in->temperature_K))
        printf("  %-22s %s\n", "temperature", cs_quantity_format(in->temperature_K, CS_DIM_TEMPERATURE, 6, b1, sizeof b1));
    if (!isnan(in->thickness_m))
        printf("  %-22s %s\n", "slab thickness", cs_quantity_format(in->thickness_m, CS_DIM_LENGTH, 6, b1, sizeof b1));
    if (!isnan(in->length_m))
        printf("  %-22s %s\n", "sample length", cs_quantity_format(in->length_m, CS_DIM_LENGTH, 6, b1, sizeof b1));
    if (!isnan(in->radius_m))
        printf("  %-22s %s\n", "sample radius", cs_quantity_format(in->radius_m, CS_DIM_LENGTH, 6, b1, sizeof b1));
    if (!isnan(in->atoms))
        printf("  %-22s %.6g\n", "atoms", in->atoms);

    static const struct {
        cs_theory_quantity first;
        const char *title;
    } groups[] = {
        {CS_TH_LL_COEF, "shifts"},
        {CS_TH_SELF_COEF, "widths and rates"},
        {CS_TH_CROSS_SECTION, "optical depth and radiation trapping"},
        {CS_TH_SR_ATOMS, "superradiance (pencil, Fresnel number ~ 1, all atoms inverted)"},
    };
    const char *sources[CS_TH_COUNT];
    size_t nsources = 0;
    const char *notes[CS_TH_COUNT];
    size_t nnotes = 0;
    size_t g = 0;
    for (int q = 0; q < CS_TH_COUNT; q++) {
        const cs_estimate *e = &c->est.e[q];
        if (g < sizeof groups / sizeof groups[0] && (int)groups[g].first == q)
            printf("\n%s\n", groups[g++].title);
        char v[CS_ESTIMATE_NOTE_MAX + 8];
        fmt_estimate(e, v, sizeof v);
        if (e->status == CS_EST_NEEDS_INPUT)
            printf("  %-46s %s\n", e->label, v);
        else
            printf("  %-46s %-20s %s\n", e->label, v, e->cite);
        int seen = e->status == CS_EST_NEEDS_INPUT || e->note[0] == '\0';
        for (size_t i = 0; i < nnotes && !seen; i++)
            seen = strcmp(notes[i], e->note) == 0;
        if (!seen) {
            printf("      %s\n", e->note);
            notes[nnotes++] = e->note;
        }
        int known = 0;
        for (size_t i = 0; i < nsources && !known; i++)
            known = strcmp(sources[i], e->source) == 0;
        if (!known)
            sources[nsources++] = e->source;
    }
    printf("\nsources\n");
    for (size_t i = 0; i < nsources; i++)
        printf("  - %s\n", sources[i]);
}

static json_t *num_or_null(double v)
{
    return isfinite(v) ? json_real(v) : json_null();
}

static json_t *line_json(const cs_line *l)
{
    const double two_pi = 2.0 * 3.14159265358979323846, ea0 = CS_THEORY_ELEMENTARY_CHARGE * CS_THEORY_BOHR_RADIUS;
    json_t *o = json_object();
    json_object_set_new(o, "name", json_string(l->name));
    json_object_set_new(o, "label", json_string(l->label));
    json_object_set_new(o, "element", l->element ? json_string(l->element) : json_null());
    json_object_set_new(o, "wavelength_m", json_real(l->wavelength_m));
    json_object_set_new(o, "frequency_hz", json_real(cs_line_frequency(l)));
    json_object_set_new(o, "gamma0_per_s", json_real(l->gamma0));
    json_object_set_new(o, "natural_fwhm_hz", json_real(l->gamma0 / two_pi));
    json_object_set_new(o, "lifetime_s", json_real(1.0 / l->gamma0));
    json_object_set_new(o, "jg", json_real(l->jg));
    json_object_set_new(o, "je", json_real(l->je));
    json_object_set_new(o, "degeneracy_ratio", json_real(cs_line_degeneracy_ratio(l)));
    json_object_set_new(o, "oscillator_strength", json_real(cs_line_oscillator_strength(l)));
    json_object_set_new(o, "dipole_reduced_c_m", json_real(cs_line_dipole_reduced(l)));
    json_object_set_new(o, "dipole_reduced_ea0", json_real(cs_line_dipole_reduced(l) / ea0));
    json_object_set_new(o, "dipole_two_level_ea0", json_real(cs_line_dipole_two_level(l) / ea0));
    json_object_set_new(o, "mass_u", num_or_null(l->mass_u));
    json_object_set_new(o, "source", json_string(l->source));
    json_object_set_new(o, "mark", json_string(l->mark));
    json_t *u = json_array();
    if (l->user & CS_LINE_USER_WAVELENGTH)
        json_array_append_new(u, json_string("wavelength"));
    if (l->user & CS_LINE_USER_GAMMA)
        json_array_append_new(u, json_string("gamma0"));
    if (l->user & CS_LINE_USER_J)
        json_array_append_new(u, json_string("j"));
    if (l->user & CS_LINE_USER_MASS)
        json_array_append_new(u, json_string("mass"));
    json_object_set_new(o, "user_specified", u);
    return o;
}

static char *build_json(const predict_ctx *c)
{
    const cs_theory_inputs *in = &c->est.in;
    json_t *root = json_object();
    json_object_set_new(root, "command", json_string("predict"));
    json_object_set_new(root, "conventions", json_string(CS_THEORY_CONVENTIONS));
    json_object_set_new(root, "line", line_json(&c->est.line));
    json_t *i = json_object();
    json_object_set_new(i, "density_per_cm3", num_or_null(in->density_m3 / 1e6));
    json_object_set_new(i, "density_per_m3", num_or_null(in->density_m3));
    json_object_set_new(i, "density_origin", isnan(in->density_m3) ? json_null() : json_string(c->density_origin));
    json_object_set_new(i, "temperature_k", num_or_null(in->temperature_K));
    json_object_set_new(i, "thickness_m", num_or_null(in->thickness_m));
    json_object_set_new(i, "length_m", num_or_null(in->length_m));
    json_object_set_new(i, "radius_m", num_or_null(in->radius_m));
    json_object_set_new(i, "atoms", num_or_null(in->atoms));
    if (c->have_vapour) {
        const cs_vapour *v = &c->vapour;
        json_t *o = json_object();
        json_object_set_new(o, "element", json_string(v->element));
        json_object_set_new(o, "temperature_k", json_real(v->T_K));
        json_object_set_new(o, "pressure_pa", json_real(v->pressure_pa));
        json_object_set_new(o, "pressure_torr", json_real(v->pressure_pa / CS_THEORY_TORR));
        json_object_set_new(o, "density_per_cm3", json_real(v->density_m3 / 1e6));
        json_object_set_new(o, "phase", json_string(phase_name(v->phase)));
        json_object_set_new(o, "melting_point_k", json_real(v->melting_K));
        json_object_set_new(o, "outside_fit_range", json_boolean(v->outside_range));
        json_object_set_new(o, "source", json_string(v->source));
        json_object_set_new(i, "vapour", o);
    }
    json_object_set_new(root, "inputs", i);
    json_t *list = json_array();
    for (int q = 0; q < CS_TH_COUNT; q++) {
        const cs_estimate *e = &c->est.e[q];
        double v = e->status == CS_EST_OK ? e->value : NAN;
        json_object_set_new(root, e->name, num_or_null(v));
        json_t *o = json_object();
        json_object_set_new(o, "name", json_string(e->name));
        json_object_set_new(o, "label", json_string(e->label));
        json_object_set_new(o, "unit", json_string(e->unit));
        json_object_set_new(o, "value", num_or_null(v));
        json_object_set_new(o, "status", json_string(cs_estimate_status_name(e->status)));
        json_object_set_new(o, "note", json_string(e->note));
        json_object_set_new(o, "formula", json_string(e->formula));
        json_object_set_new(o, "cite", json_string(e->cite));
        json_object_set_new(o, "source", json_string(e->source));
        json_array_append_new(list, o);
    }
    json_object_set_new(root, "estimates", list);
    char *text = json_dumps(root, JSON_INDENT(2) | JSON_REAL_PRECISION(17));
    json_decref(root);
    if (!text)
        return NULL;
    size_t len = strlen(text);
    char *withnl = realloc(text, len + 2);
    if (!withnl) {
        free(text);
        return NULL;
    }
    withnl[len] = '\n';
    withnl[len + 1] = '\0';
    return withnl;
}

int cmd_predict(int argc, char **argv)
{
    static const struct option longopts[] = {
        {"line", required_argument, NULL, OPT_LINE},
        {"density", required_argument, NULL, OPT_DENSITY},
        {"temperature", required_argument, NULL, OPT_TEMPERATURE},
        {"phase", required_argument, NULL, OPT_PHASE},
        {"thickness", required_argument, NULL, OPT_THICKNESS},
        {"length", required_argument, NULL, OPT_LENGTH},
        {"radius", required_argument, NULL, OPT_RADIUS},
        {"atoms", required_argument, NULL, OPT_ATOMS},
        {"wavelength", required_argument, NULL, OPT_WAVELENGTH},
        {"frequency", required_argument, NULL, OPT_FREQUENCY},
        {"gamma", required_argument, NULL, OPT_GAMMA},
        {"dipole", required_argument, NULL, OPT_DIPOLE},
        {"jg", required_argument, NULL, OPT_JG},
        {"je", required_argument, NULL, OPT_JE},
        {"mass", required_argument, NULL, OPT_MASS},
        {"list-lines", no_argument, NULL, OPT_LIST},
        {"json", required_argument, NULL, OPT_JSON},
        {NULL, 0, NULL, 0},
    };
    const char *line_name = NULL, *json_path = NULL;
    cs_theory_inputs in;
    cs_theory_inputs_init(&in);
    cs_line_spec spec;
    cs_line_spec_init(&spec);
    cs_phase phase = CS_PHASE_AUTO;
    int list = 0, custom = 0, rc = 0, c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":", longopts, NULL)) != -1) {
        switch (c) {
        case OPT_LINE: line_name = optarg; break;
        case OPT_DENSITY: rc = parse_positive("density", optarg, CS_DIM_DENSITY, 1, &in.density_m3); break;
        case OPT_TEMPERATURE:
            rc = parse_positive("temperature", optarg, CS_DIM_TEMPERATURE, 0, &in.temperature_K);
            break;
        case OPT_PHASE:
            if (strcmp(optarg, "auto") == 0)
                phase = CS_PHASE_AUTO;
            else if (strcmp(optarg, "solid") == 0)
                phase = CS_PHASE_SOLID;
            else if (strcmp(optarg, "liquid") == 0)
                phase = CS_PHASE_LIQUID;
            else
                rc = bad_value("phase", optarg, "expected auto, solid or liquid");
            break;
        case OPT_THICKNESS: rc = parse_positive("thickness", optarg, CS_DIM_LENGTH, 0, &in.thickness_m); break;
        case OPT_LENGTH: rc = parse_positive("length", optarg, CS_DIM_LENGTH, 0, &in.length_m); break;
        case OPT_RADIUS: rc = parse_positive("radius", optarg, CS_DIM_LENGTH, 0, &in.radius_m); break;
        case OPT_ATOMS: rc = parse_number("atoms", optarg, &in.atoms); break;
        case OPT_WAVELENGTH:
            rc = parse_positive("wavelength", optarg, CS_DIM_LENGTH, 0, &spec.wavelength_m), custom = 1;
            break;
        case OPT_FREQUENCY: rc = parse_frequency(optarg, &spec.frequency_hz), custom = 1; break;
        case OPT_GAMMA: rc = parse_gamma(optarg, &spec.gamma0), custom = 1; break;
        case OPT_DIPOLE: {
            cs_error err;
            cs_error_clear(&err);
            if (cs_dipole_parse(optarg, &spec.dipole_cm, &err) != CS_OK)
                rc = bad_value("dipole", optarg, err.msg);
            else if (!(spec.dipole_cm > 0.0))
                rc = bad_value("dipole", optarg, "must be positive");
            custom = 1;
            break;
        }
        case OPT_JG: rc = parse_j("jg", optarg, &spec.jg), custom = 1; break;
        case OPT_JE: rc = parse_j("je", optarg, &spec.je), custom = 1; break;
        case OPT_MASS: rc = parse_number("mass", optarg, &spec.mass_u), custom = 1; break;
        case OPT_LIST: list = 1; break;
        case OPT_JSON: json_path = optarg; break;
        case ':':
            cli_errorf("predict: option '%s' needs a value", argv[optind - 1]);
            return CLI_EXIT_USAGE;
        default:
            cli_errorf("predict: unknown option '%s'; see 'collshift predict --help'", argv[optind - 1]);
            return CLI_EXIT_USAGE;
        }
        if (rc)
            return rc;
    }
    if (optind < argc) {
        cli_errorf("predict: unexpected argument '%s'; see 'collshift predict --help'", argv[optind]);
        return CLI_EXIT_USAGE;
    }
    if (list) {
        list_lines();
        return CLI_EXIT_OK;
    }

    const cs_line *base = NULL;
    if (line_name) {
        base = cs_line_find(line_name);
        if (!base) {
            cli_errorf("predict: unknown line '%s'; see 'collshift predict --list-lines'", line_name);
            return CLI_EXIT_USAGE;
        }
    } else if (!custom) {
        cli_errorf("predict: no line given: use --line NAME or --wavelength/--gamma/--jg/--je; "
                   "see 'collshift predict --help'");
        return CLI_EXIT_USAGE;
    }
    cs_line line;
    cs_error err;
    cs_error_clear(&err);
    if (custom) {
        if (cs_line_custom(base, &spec, &line, &err) != CS_OK) {
            cli_errorf("predict: %s", err.msg);
            return CLI_EXIT_USAGE;
        }
    } else {
        line = *base;
    }

    predict_ctx ctx;
    memset(&ctx, 0, sizeof ctx);
    ctx.density_origin = "given";
    if (isnan(in.density_m3)) {
        if (isnan(in.temperature_K)) {
            cli_errorf("predict: give --density, or --temperature for the density from the vapour "
                       "pressure; see 'collshift predict --help'");
            return CLI_EXIT_USAGE;
        }
        if (!line.element) {
            cli_errorf("predict: line '%s' has no vapour-pressure formula (Rb, Cs, K and Na lines "
                       "only); give --density", line.name);
            return CLI_EXIT_USAGE;
        }
        if (cs_vapour_eval(line.element, in.temperature_K, phase, &ctx.vapour, &err) != CS_OK) {
            cli_errorf("predict: %s", err.msg);
            return CLI_EXIT_USAGE;
        }
        ctx.have_vapour = 1;
        in.density_m3 = ctx.vapour.density_m3;
        ctx.density_origin = "vapour_pressure";
    }
    if (cs_theory_predict(&line, &in, &ctx.est, &err) != CS_OK) {
        cli_errorf("predict: %s", err.msg);
        return cli_exit_code(err.code);
    }
    if (!json_path || strcmp(json_path, "-") != 0)
        print_text(&ctx);
    if (json_path) {
        char *text = build_json(&ctx);
        if (!text) {
            cli_errorf("out of memory");
            return CLI_EXIT_DATA;
        }
        rc = cli_write_text(json_path, text);
        free(text);
        if (rc)
            return rc;
    }
    return CLI_EXIT_OK;
}
