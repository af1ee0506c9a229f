/* Saturated vapour pressure and number density of the alkali metals Rb, Cs, K and Na.
 *
 * Form of C. B. Alcock, V. P. Itkin, M. K. Horrigan, "Vapour pressure equations for the metallic
 * elements: 298-2500 K", Canadian Metallurgical Quarterly 23, 309-313 (1984), as printed in
 * D. A. Steck's alkali D-line data sheets (http://steck.us/alkalidata):
 *     log10(P / Torr) = 2.881 + A + B / T          (2.881 = log10 760 converts atm to Torr)
 * and n = P / (k_B T). Coefficients (A, B in K) and melting points, with the marks of
 * ../shared/guide/physics.md, sect. 6:
 *   Rb  solid 4.857 -4215, liquid 4.312 -4040, melts at 39.30 degC: confirmed in stored source
 *       (Steck, "Rubidium 85 D Line Data", rev. 2.2.3, Eq. (1) and Table 2), where Steck quotes
 *       the fit as better than +-5 % from 298 to 550 K;
 *   Cs  solid 4.711 -3999, liquid 4.165 -3830, melts at 28.44 degC: from memory, corroborated by
 *       secondary notes quoting Steck's Cs sheet rev. 2.3.4;
 *   K   solid 4.961 -4646, liquid 4.402 -4453, melts at 63.5 degC: from memory;
 *   Na  solid 5.298 -5603, liquid 4.704 -5377, melts at 97.8 degC: from memory. */
#include <collshift/theory.h>

#include <ctype.h>
#include <math.h>
#include <string.h>

#define SOURCE_ALCOCK                                                                              \
    "C. B. Alcock, V. P. Itkin, M. K. Horrigan, Can. Metall. Q. 23, 309 (1984), as in D. A. "      \
    "Steck's alkali D-line data: log10(P/Torr) = 2.881 + A + B/T"

static const struct alkali {
    const char *symbol;
    double a_solid, b_solid;
    double a_liquid, b_liquid;
    double melting_K;
} alkalis[] = {
    {"Rb", 4.857, -4215.0, 4.312, -4040.0, 273.15 + 39.30},
    {"Cs", 4.711, -3999.0, 4.165, -3830.0, 273.15 + 28.44},
    {"K", 4.961, -4646.0, 4.402, -4453.0, 273.15 + 63.5},
    {"Na", 5.298, -5603.0, 4.704, -5377.0, 273.15 + 97.8},
};

/* Steck's stated range of +-5 % accuracy (Rb sheet), used as the range of every fit here. */
#define RANGE_LO_K 298.0
#define RANGE_HI_K 550.0

static const struct alkali *find_alkali(const char *element)
{
    if (!element)
        return NULL;
    for (size_t i = 0; i < sizeof alkalis / sizeof alkalis[0]; i++) {
        const char *a = alkalis[i].symbol, *b = element;
        while (*a && *b && tolower((unsigned char)*a) == tolower((unsigned char)*b))
            a++, b++;
        if (*a == '\0' && *b == '\0')
            return &alkalis[i];
    }
    return NULL;
}

int cs_vapour_eval(const char *element, double T_K, cs_phase phase, cs_vapour *out, cs_error *err)
{
    if (!element || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "vapour pressure: NULL argument");
    const struct alkali *a = find_alkali(element);
    if (!a)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "no vapour-pressure formula for '%s' (known: Rb, Cs, K, Na)", element);
    if (!isfinite(T_K) || T_K <= 0.0)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1,
                            "temperature %g K: must be positive and finite", T_K);
    if (phase != CS_PHASE_SOLID && phase != CS_PHASE_LIQUID)
        phase = T_K < a->melting_K ? CS_PHASE_SOLID : CS_PHASE_LIQUID;
    double A = phase == CS_PHASE_SOLID ? a->a_solid : a->a_liquid;
    double B = phase == CS_PHASE_SOLID ? a->b_solid : a->b_liquid;
    double p_torr = pow(10.0, 2.881 + A + B / T_K);
    out->element = a->symbol;
    out->T_K = T_K;
    out->pressure_pa = p_torr * CS_THEORY_TORR;
    out->density_m3 = out->pressure_pa / (CS_THEORY_BOLTZMANN * T_K);
    out->phase = phase;
    out->melting_K = a->melting_K;
    out->outside_range = T_K < RANGE_LO_K || T_K > RANGE_HI_K;
    out->source = SOURCE_ALCOCK;
    return CS_OK;
}

double cs_vapour_pressure(const char *element, double T_K)
{
    cs_vapour v;
    return cs_vapour_eval(element, T_K, CS_PHASE_AUTO, &v, NULL) == CS_OK ? v.pressure_pa : NAN;
}

double cs_vapour_density(const char *element, double T_K)
{
    cs_vapour v;
    return cs_vapour_eval(element, T_K, CS_PHASE_AUTO, &v, NULL) == CS_OK ? v.density_m3 : NAN;
}
