/* Line shapes (Lorentzian, Gaussian, Voigt, pseudo-Voigt, Fano, sech²) with analytic derivatives.
 *
 * Conventions. The abscissa x is a cyclic frequency in Hz. Every profile is
 *     f(x) = area * g(x - center; widths...)
 * with g a unit-area shape (Fano: see below), so `area` is the integral of the line and a
 * negative area is an absorption dip. Widths are full widths at half maximum (FWHM) in Hz.
 * Decay rates are in s^-1: a Lorentzian of FWHM f_L belongs to a decay rate Gamma = 2*pi*f_L.
 *
 * Parameter vectors. Each profile has `nparams` parameters in the order of its `param_names`.
 * For every profile the centre is parameter 0 (CS_PROFILE_CENTER) and the area is the last
 * parameter (cs_profile_area_index); f is linear in the area.
 *
 *   name     parameters                          shape g(u), u = x - center
 *   lorentz  center, fwhm, area                  (h/pi) / (u^2 + h^2),  h = fwhm/2
 *   gauss    center, fwhm, area                  exp(-u^2/(2 s^2)) / (s sqrt(2 pi)),  s = fwhm/(2 sqrt(2 ln 2))
 *   voigt    center, fwhm_g, fwhm_l, area        Gaussian (FWHM fwhm_g) convolved with Lorentzian (FWHM fwhm_l)
 *   pvoigt   center, fwhm, eta, area             eta*lorentz + (1-eta)*gauss, both with the same fwhm; eta in [0,1]
 *   fano     center, fwhm, q, area               (2/(pi fwhm)) ((q+e)^2/(1+e^2) - 1)/q^2,  e = 2u/fwhm
 *   sech2    center, fwhm, area                  sech^2(u/b) / (2b),  fwhm = 2 b ln(1+sqrt 2)
 *
 * Fano normalisation. ((q+e)^2/(1+e^2) - 1)/q^2 = (1 - 1/q^2 + 2e/q)/(1+e^2): a Lorentzian of
 * weight 1 - 1/q^2 plus a dispersive part 2e/(q(1+e^2)). So, with this choice,
 *   - as |q| -> infinity the profile tends to the Lorentzian of the same area and fwhm;
 *   - its maximum is always 2*area/(pi*fwhm) (at e = 1/q), the height of that Lorentzian,
 *     and its other extremum is -2*area/(pi*fwhm*q^2) (at e = -q);
 *   - its integral exists only as a principal value (the dispersive part falls as 1/u) and
 *     equals area*(1 - 1/q^2) (the quantity CS_PROFILE_INTEGRAL);
 *   - the half-maximum width around the maximum is fwhm*sqrt(1 + 2/q^2).
 * The profile is a polynomial in 1/q, smooth for all q != 0; q = 0 (a pure window dip of
 * unbounded depth at fixed area) is rejected. Normalising by q^2 - 1 instead (integral = area)
 * would be singular at |q| = 1, where the line is purely dispersive and its integral vanishes,
 * so a fit passing through |q| = 1 would break: hence area is the Lorentzian-limit area.
 *
 * Voigt. V(u) = Re w(z) / (s sqrt(pi)), z = (u + i gamma)/s, s = fwhm_g/(2 sqrt(ln 2))
 * (= sqrt(2) times the Gaussian standard deviation), gamma = fwhm_l/2, w the Faddeeva
 * function (libcerf's w_of_z). Both widths may be 0, not both: fwhm_g = 0 is the Lorentzian,
 * fwhm_l = 0 the Gaussian, and values and derivatives are finite and continuous up to both
 * limits (d f/d fwhm_g -> 0 as fwhm_g -> 0; d f/d fwhm_l stays finite as fwhm_l -> 0).
 * Details of the numerics are at the top of src/profile_voigt.c.
 *
 * Thread safety: every function here is reentrant; the descriptors are immutable. */
#ifndef CS_PROFILE_H
#define CS_PROFILE_H

#include <stddef.h>
#include <collshift/error.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Largest nparams of any profile (room for callers' fixed-size arrays). */
#define CS_PROFILE_MAX_PARAMS 8
/* Index of the centre in every parameter vector. */
#define CS_PROFILE_CENTER 0
/* Column map entry meaning "do not write this parameter's derivative" (see cs_profile_jac). */
#define CS_PROFILE_SKIP ((size_t)-1)

/* Where eval_jac writes derivatives. With k the index of a parameter of this profile and c its
 * column (c = k when `cols` is NULL, else c = cols[k]; CS_PROFILE_SKIP skips it), the
 * derivative at point i is ADDED to
 *     data[i * row_stride + c * col_stride].
 * - row-major n x p matrix (a gsl_matrix J, whose leading dimension is J->tda), this
 *   component's parameters starting at column c0:  {J->data + c0, J->tda, 1, NULL};
 * - column-major with leading dimension ld:          {J + c0 * ld, 1, ld, NULL};
 * - fixed parameters: cols[k] = CS_PROFILE_SKIP; tied parameters: give them the same column and
 *   the derivatives add up (d f/d p_shared = sum of the partial derivatives). */
typedef struct cs_profile_jac {
    double *data;        /* borrowed; must hold every addressed element */
    size_t row_stride;   /* distance between points (rows) */
    size_t col_stride;   /* distance between parameters (columns) */
    const size_t *cols;  /* nparams column numbers, or NULL for 0..nparams-1; borrowed */
} cs_profile_jac;

/* Derived quantities: properties of a line computed from its parameters, never fitted. */
typedef enum cs_profile_qty {
    CS_PROFILE_HEIGHT = 0, /* value at the maximum for area > 0 (minimum for area < 0), area/Hz */
    CS_PROFILE_POSITION,   /* frequency of that extremum, Hz (the centre, except fano: center + fwhm/(2q)) */
    CS_PROFILE_FWHM,       /* full width at half of that extremum, Hz (voigt: exact, numerical; fano: fwhm*sqrt(1+2/q^2)) */
    CS_PROFILE_HWHM,       /* half of CS_PROFILE_FWHM, Hz */
    CS_PROFILE_SIGMA,      /* standard deviation of the Gaussian part, Hz (gauss, voigt, pvoigt) */
    CS_PROFILE_GAMMA,      /* decay rate 2*pi*(FWHM of the Lorentzian part), s^-1 (lorentz, voigt, pvoigt, fano) */
    CS_PROFILE_FWHM_OL,    /* Olivero-Longbothum approximation of the Voigt FWHM, Hz (voigt only) */
    CS_PROFILE_INTEGRAL,   /* integral over all frequencies: the area (fano: area*(1 - 1/q^2), principal value) */
    CS_PROFILE_NQTY        /* number of quantities */
} cs_profile_qty;

/* A profile: a static const descriptor. Adding a profile = one descriptor + one registry row
 * (src/profile.c). The function pointers never allocate, print or fail loudly: parameters
 * rejected by `check` make them write NaN (into every y[i] and every addressed J element). */
typedef struct cs_profile_type {
    const char *name;                /* registry key, e.g. "voigt" */
    const char *summary;             /* one line for help texts */
    size_t nparams;                  /* <= CS_PROFILE_MAX_PARAMS */
    const char *const *param_names;  /* nparams names, e.g. "center", "fwhm_g", "fwhm_l", "area" */
    const char *const *param_units;  /* nparams units: "Hz", "1" (dimensionless) or "area" */
    /* CS_OK, or CS_EINVAL (a non-finite parameter) or CS_ERANGE (a finite value outside the
     * domain, e.g. fwhm <= 0); then *bad (if not NULL) is the offending index and *why (if not
     * NULL) a static phrase such as "must be > 0". */
    int (*check)(const double *p, size_t *bad, const char **why);
    /* y[i] += f(x[i]) for i < n. */
    void (*eval)(const double *p, const double *x, size_t n, double *y);
    /* y[i] += f(x[i]) (skipped when y is NULL) and adds d f(x[i])/d p_k as `jac` describes
     * (skipped when jac is NULL); one pass, one special-function evaluation per point. */
    void (*eval_jac)(const double *p, const double *x, size_t n, double *y, const cs_profile_jac *jac);
    /* *value = quantity q; grad (if not NULL, nparams entries) = its gradient d q/d p.
     * Returns CS_OK, CS_EUNSUP when q is not defined for this profile, the `check` code, or
     * CS_ENOCONV; *value and grad are NaN on failure. */
    int (*quantity)(cs_profile_qty q, const double *p, double *value, double *grad);
} cs_profile_type;

/* The built-in profiles (also reachable through the registry). */
extern const cs_profile_type cs_profile_lorentz;
extern const cs_profile_type cs_profile_gauss;
extern const cs_profile_type cs_profile_voigt;
extern const cs_profile_type cs_profile_pvoigt;
extern const cs_profile_type cs_profile_fano;
extern const cs_profile_type cs_profile_sech2;

/* ---------------------------------------------------------------- registry */

/* Profile named `name` (exact, case-sensitive), or NULL when unknown or name is NULL. */
const cs_profile_type *cs_profile_find(const char *name);
/* Number of registered profiles, and the i-th (NULL when i >= count), in a stable order. */
size_t cs_profile_count(void);
const cs_profile_type *cs_profile_get(size_t i);
/* Index of the area parameter (nparams - 1). */
size_t cs_profile_area_index(const cs_profile_type *t);
/* Index of the parameter called `name`, or CS_PROFILE_SKIP when there is none. */
size_t cs_profile_param_index(const cs_profile_type *t, const char *name);

/* ---------------------------------------------------------------- checking and evaluation */

/* Validate a parameter vector. Returns CS_OK; CS_EINVAL when t or p is NULL or a parameter is
 * not finite; CS_ERANGE when a width is <= 0 (voigt: < 0, or both 0), eta is outside [0,1] or
 * q == 0. On failure *err (NULL-safe) gets e.g. "voigt: parameter 'fwhm_g' = -1 must be >= 0". */
int cs_profile_check_params(const cs_profile_type *t, const double *p, cs_error *err);

/* y[i] += f(x[i]), i < n. Returns the cs_profile_check_params code (NaN is added on failure);
 * CS_EINVAL also when t is NULL or x, y are NULL with n > 0 (then nothing is written). */
int cs_profile_eval(const cs_profile_type *t, const double *p, const double *x, size_t n, double *y);

/* Values and derivatives in one pass: y[i] += f(x[i]) (y may be NULL) and the derivatives are
 * added where `jac` says (jac may be NULL). Returns as cs_profile_eval. Neither y nor J is
 * cleared: a model zeroes them once and lets each component add its part. */
int cs_profile_eval_jac(const cs_profile_type *t, const double *p, const double *x, size_t n,
                        double *y, const cs_profile_jac *jac);

/* Single point, GSL-style pair. _e writes f(x) to *value and, when grad is not NULL, the
 * nparams derivatives to grad (overwritten, not added); returns CS_OK or the check code (then
 * *value and grad are NaN), CS_EINVAL for NULL t, p or value. The plain form returns f(x) or NaN. */
int cs_profile_value_e(const cs_profile_type *t, const double *p, double x, double *value, double *grad);
double cs_profile_value(const cs_profile_type *t, const double *p, double x);

/* ---------------------------------------------------------------- derived quantities */

/* Name ("height", "position", "fwhm", "hwhm", "sigma", "gamma", "fwhm_ol", "integral") and
 * unit ("area/Hz", "Hz", "s^-1", "area") of a quantity; "" for an unknown q. Never NULL. */
const char *cs_profile_qty_name(cs_profile_qty q);
const char *cs_profile_qty_unit(cs_profile_qty q);

/* One derived quantity and its gradient (grad: nparams entries, may be NULL). Returns as
 * cs_profile_type.quantity, plus CS_EINVAL for NULL t, p or value or an unknown q. */
int cs_profile_quantity(const cs_profile_type *t, cs_profile_qty q, const double *p,
                        double *value, double *grad);

/* All derived quantities with standard errors. */
typedef struct cs_profile_derived {
    double value[CS_PROFILE_NQTY];                        /* NaN where status != CS_OK */
    double err[CS_PROFILE_NQTY];                          /* sqrt(g^T C g); NaN without cov or where status != CS_OK */
    double grad[CS_PROFILE_NQTY][CS_PROFILE_MAX_PARAMS];  /* d value / d p_k, k < nparams */
    int status[CS_PROFILE_NQTY];                          /* CS_OK, CS_EUNSUP (not defined here), or a failure */
} cs_profile_derived;

/* Fill *out for parameters p with covariance cov: the nparams x nparams block with element
 * (j,k) at cov[j * ldcov + k] (symmetric, so row- or column-major alike; pass a block of a
 * whole model covariance with its leading dimension). cov may be NULL (errors NaN); ldcov is
 * then ignored, otherwise it must be >= nparams. Returns CS_OK when every quantity defined for
 * the profile was computed, else the first failure code (the other entries are still filled);
 * CS_EINVAL for NULL t, p, out or ldcov < nparams. An error whose variance comes out negative
 * (covariance not positive semi-definite) is NaN. */
int cs_profile_derive(const cs_profile_type *t, const double *p, const double *cov, size_t ldcov,
                      cs_profile_derived *out);

/* ---------------------------------------------------------------- Voigt widths */

/* Exact FWHM of a Voigt profile (Hz) from its Gaussian and Lorentzian FWHM (Hz, >= 0, not both
 * 0), by safeguarded Newton iteration on half maximum (relative accuracy about 1e-14). grad (may
 * be NULL) gets {d fwhm/d fwhm_g, d fwhm/d fwhm_l}. Returns CS_OK, CS_EINVAL (NULL fwhm,
 * non-finite input), CS_ERANGE (negative or both 0) or CS_ENOCONV; *fwhm is NaN on failure. */
int cs_profile_voigt_fwhm(double fwhm_g, double fwhm_l, double *fwhm, double grad[2]);

/* Olivero-Longbothum approximation 0.5346 f_L + sqrt(0.2166 f_L^2 + f_G^2) (J. J. Olivero and
 * R. L. Longbothum, J. Quant. Spectrosc. Radiat. Transfer 17, 233-236 (1977)); about 0.02 %
 * accurate. NaN for invalid widths. */
double cs_profile_voigt_fwhm_ol(double fwhm_g, double fwhm_l);

#ifdef __cplusplus
}
#endif
#endif /* CS_PROFILE_H */
