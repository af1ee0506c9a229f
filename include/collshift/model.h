/* Composite line models: a sum of profiles plus a baseline (or a Beer-Lambert transmission model),
 * with a named parameter table, fixed parameters, bounds and ties, and the model syntax.
 *
 * Model syntax (our own). A model is written as profile names joined by '+', e.g.
 *     "voigt+lorentz"        (component 1 is the Voigt, component 2 the Lorentzian)
 * with the baseline chosen separately (none, const, linear, quad, cubic, exp). Parameters are
 * named "<component>.<parameter>": "1.center", "1.fwhm_g", "2.area"; baseline parameters are
 * "base.c0" .. "base.c3" (polynomial coefficients of powers of (x - x_ref)) or "base.amp",
 * "base.rate" (exponential amp * exp(-rate * (x - x_ref))). Constraints, as given on the command
 * line (values accept units, e.g. 38MHz; an area has no unit):
 *     fix    "2.fwhm=38MHz"     or "2.fwhm" (fixed at its starting value: the user's start,
 *                                 else the automatic guess)
 *     bound  "1.fwhm=10MHz:2GHz", "2.area=0:" (either side may be empty)
 *     tie    "2.center=1.center", "2.fwhm_g=1.fwhm_g", "2.fwhm=0.1*1.fwhm", "2.center=1.center+50MHz"
 *     start  "1.center=384.2304THz"
 * A tie makes a parameter follow another: p_tied = factor * p_master + offset. Chains are resolved
 * to the final master (factors and offsets composed); a cycle is refused. A parameter tied to a
 * fixed one is, in effect, fixed too. A tied parameter cannot be fixed or bounded itself.
 *
 * Modes.
 *   CS_MODEL_SUM:          y(x) = baseline(x) + sum_k f_k(x)              (emission or absorption:
 *                          negative areas are dips)
 *   CS_MODEL_TRANSMISSION: y(x) = baseline(x) * exp(-sum_k OD_k g_k(x))   (Beer-Lambert; the
 *                          baseline is the unabsorbed transmission T0(x)). Each component's last
 *                          parameter is then "od", its PEAK optical depth: g_k is the profile
 *                          normalised to unit peak (unit value at its maximum).
 *
 * Ownership: a cs_model is created by cs_model_alloc and released by cs_model_free. Nothing here
 * prints. Evaluation functions are reentrant (the model is read-only during evaluation). */
#ifndef CS_MODEL_H
#define CS_MODEL_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/profile.h>
#include <collshift/units.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef enum cs_baseline_kind {
    CS_BASELINE_NONE = 0,
    CS_BASELINE_CONST,    /* c0 */
    CS_BASELINE_LINEAR,   /* c0 + c1 u */
    CS_BASELINE_QUAD,     /* c0 + c1 u + c2 u^2 */
    CS_BASELINE_CUBIC,    /* c0 + c1 u + c2 u^2 + c3 u^3 */
    CS_BASELINE_EXP       /* amp * exp(-rate * u) */
} cs_baseline_kind;       /* u = x - x_ref (Hz) */

/* "none" "const" "linear" "quad" "cubic" "exp" <-> kind. parse returns CS_OK or CS_EINVAL. */
int cs_baseline_parse(const char *name, cs_baseline_kind *kind);
const char *cs_baseline_name(cs_baseline_kind kind);
size_t cs_baseline_nparams(cs_baseline_kind kind);

typedef enum cs_model_mode {
    CS_MODEL_SUM = 0,
    CS_MODEL_TRANSMISSION
} cs_model_mode;

/* What a parameter measures, for parsing values with units and for output column names. */
typedef enum cs_param_kind {
    CS_PARAM_FREQUENCY = 0,  /* Hz: centres, widths */
    CS_PARAM_AREA,           /* area (y units x Hz) */
    CS_PARAM_DIMENSIONLESS,  /* eta, q, optical depth */
    CS_PARAM_BASELINE,       /* baseline coefficient (y units / Hz^k), rate (Hz^-1) */
} cs_param_kind;

typedef struct cs_param {
    char name[32];       /* "2.center", "base.c1" */
    cs_param_kind kind;
    double value;        /* starting value before a fit; the fitted value after */
    int user_start;      /* 1 when the value was given by the user (automatic guesses keep it) */
    int fixed;           /* 1: not varied */
    double lo, hi;       /* bounds; -INFINITY / +INFINITY when absent. Widths default to lo = 0 */
    long tie;            /* -1, or the index of the master parameter (always a free or fixed
                            parameter that is itself untied, after chain resolution) */
    double tie_factor, tie_offset;
} cs_param;

typedef struct cs_model_component {
    const cs_profile_type *type;
    size_t first;        /* index of the component's first parameter in the parameter table */
} cs_model_component;

typedef struct cs_model {
    cs_model_mode mode;
    size_t ncomp;
    cs_model_component *comp;
    cs_baseline_kind baseline;
    size_t base_first;   /* index of the first baseline parameter (== total of component params) */
    size_t nparams;      /* components' parameters then the baseline's */
    cs_param *par;
    double x_ref;        /* Hz; the baseline's origin. Default 0; the fit sets it to the middle of
                            the data when the model is guessed (so coefficients are well scaled) */
    char *text;          /* the model as written, e.g. "voigt+lorentz" */
} cs_model;

/* Build a model from its text ("voigt+lorentz", spaces allowed around '+'; an empty text or
 * "none" means no components — a baseline-only model). Returns NULL on failure with err naming
 * the unknown profile and listing the known ones, or CS_ENOMEM. A model needs at least one
 * parameter (components or baseline). Starting values are 0 (widths 1 Hz, eta 0.5, q 5; in
 * transmission base.c0 or base.amp 1) until set or guessed. */
cs_model *cs_model_alloc(const char *text, cs_baseline_kind baseline, cs_model_mode mode, cs_error *err);
void cs_model_free(cs_model *m);

/* Index of the parameter called name ("2.center", "base.c0"; case-sensitive), or -1. */
long cs_model_param_index(const cs_model *m, const char *name);

/* Apply one constraint in the syntax above. Return CS_OK, or CS_EINVAL with a message quoting the
 * text (unknown parameter, bad number or unit, lo > hi, a starting value outside its bounds,
 * tie to itself, a tie cycle). */
int cs_model_fix(cs_model *m, const char *text, cs_error *err);
int cs_model_bound(cs_model *m, const char *text, cs_error *err);
int cs_model_tie(cs_model *m, const char *text, cs_error *err);
int cs_model_start(cs_model *m, const char *text, cs_error *err);

/* Apply the ties to a full parameter vector p (nparams): p[i] = factor * p[master] + offset for
 * every tied i. */
void cs_model_apply_ties(const cs_model *m, double *p);

/* y[i] = model(x[i]) for the full parameter vector p (nparams values; ties must already hold).
 * work: n doubles of scratch for CS_MODEL_TRANSMISSION (may be NULL in CS_MODEL_SUM).
 * Returns CS_OK, or the profile check code when a component's parameters are invalid (then y
 * holds NaN; in transmission also the code of a failed CS_PROFILE_HEIGHT), CS_EINVAL for NULL
 * arguments. */
int cs_model_eval(const cs_model *m, const double *p, const double *x, size_t n, double *y, double *work);

/* Values and the Jacobian with respect to ALL nparams parameters (fixed and tied ones included;
 * the fitter maps columns to its free parameters): J is row-major n x nparams with leading
 * dimension ldj >= nparams, J[i * ldj + k] = d y_i / d p_k, overwritten. y may be NULL.
 * work: as for cs_model_eval. Returns as cs_model_eval. */
int cs_model_eval_jac(const cs_model *m, const double *p, const double *x, size_t n, double *y,
                      double *J, size_t ldj, double *work);

/* Current parameter values (par[i].value) gathered into p (nparams), and back. */
void cs_model_get_values(const cs_model *m, double *p);
void cs_model_set_values(cs_model *m, const double *p);

/* Automatic starting values from the data alone (x strictly ascending, n points; sigma may be
 * NULL and only sets the noise level): every parameter that is neither user-set (a start, or a
 * fix with a value) nor tied gets a guess, so a parameter fixed without a value is fixed at its
 * guess; tied parameters then follow their masters, and guesses are moved inside the bounds.
 * The baseline comes from the wings; components are matched to peaks (maxima of the smoothed
 * data, and shoulders from its curvature), then centres and widths are refined with the
 * amplitudes solved by linear least squares. With a broad and a narrow component the narrow one
 * takes the sharpest peak: components are ranked by expected sharpness (Lorentzian and Fano
 * before the others, later ones before earlier ones), so in "voigt+lorentz" and
 * "lorentz+lorentz" component 2 is the narrow line. Details at the top of src/model_guess.c.
 * Sets m->x_ref to the middle of the data (unless a baseline parameter is user-set).
 * Deterministic. Returns CS_OK, CS_EINVAL (NULL m, x or y), CS_EDATA (fewer than 5 points or
 * fewer points than parameters, a non-finite value, x not increasing, flat data, transmission
 * data whose baseline is not positive), CS_EUNSUP (more than 58 components), CS_ENOMEM. */
int cs_model_guess(cs_model *m, const double *x, const double *y, const double *sigma, size_t n, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_MODEL_H */
