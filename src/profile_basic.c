/* Lorentzian, Gaussian, pseudo-Voigt and sech² line shapes with analytic derivatives.
 *
 * Formulas (u = x - center, all shapes of unit area; handbook forms, e.g. the Voigt-profile
 * article cited in guide/physics.md section 9 for the Lorentzian and Gaussian):
 *   Lorentzian  L = (1/(pi h)) / (1 + e^2),  h = fwhm/2, e = u/h
 *               dL/dcenter = 2e/(pi h^2 (1+e^2)^2),  dL/dh = (e^2 - 1)/(pi h^2 (1+e^2)^2)
 *   Gaussian    G = exp(-t^2/2)/(sigma sqrt(2 pi)),  sigma = fwhm/(2 sqrt(2 ln 2)), t = u/sigma
 *               dG/dcenter = G t/sigma,  dG/dfwhm = G (t^2 - 1)/fwhm
 *   pseudo-Voigt eta L + (1 - eta) G with the same fwhm (eta = Lorentzian fraction)
 *   sech²       S = sech^2(t)/(2b),  t = u/b, b = fwhm/(2 ln(1+sqrt 2)), since sech^2 t = 1/2 at
 *               cosh t = sqrt 2 and the integral of sech^2 is 2 (common practice)
 *               dS/dcenter = S' = sech^2(t) tanh(t)/b^2,  dS/dfwhm = sech^2(t)(2t tanh t - 1)/(2 b fwhm)
 * Each is computed in a form that neither overflows nor divides by zero for large |u|. */
#include <collshift/profile.h>

#include "profile_impl.h"

#include <math.h>

/* ---------------------------------------------------------------- unit shapes */

/* Unit-area Lorentzian of FWHM fw at u; derivatives with respect to center and fw. */
static inline void lor_unit(double u, double fw, double *v, double *dc, double *dw)
{
    double h = 0.5 * fw, e = u / h, g = 1.0 / (1.0 + e * e), eg = e * g;
    *v = g / (PI_ * h);
    if (dc) {
        double c = 1.0 / (PI_ * h * h);
        *dc = 2.0 * eg * g * c;
        *dw = 0.5 * (eg * eg - g * g) * c;
    }
}

/* Unit-area Gaussian of FWHM fw at u; derivatives with respect to center and fw. */
static inline void gau_unit(double u, double fw, double *v, double *dc, double *dw)
{
    double sigma = fw / (2.0 * SQRT_2LN2_), t = u / sigma;
    double g = exp(-0.5 * t * t) / (sigma * SQRT_PI_ * 1.41421356237309504880);
    *v = g;
    if (dc) {
        if (g == 0.0) {
            *dc = *dw = 0.0;
        } else {
            *dc = g * t / sigma;
            *dw = g * (t * t - 1.0) / fw;
        }
    }
}

/* ---------------------------------------------------------------- lorentz */

static const char *const three_names[] = {"center", "fwhm", "area"};
static const char *const three_units[] = {"Hz", "Hz", "area"};

static int width_check(const double *p, size_t *bad, const char **why)
{
    int rc = prof_check_finite(p, 3, bad, why);
    return rc ? rc : prof_check_positive(p, 1, bad, why);
}

static void lorentz_point(const double *p, double x, double *v, double *d)
{
    double g, dc, dw;
    lor_unit(x - p[0], p[1], &g, d ? &dc : NULL, &dw);
    *v = p[2] * g;
    if (d) {
        d[0] = p[2] * dc;
        d[1] = p[2] * dw;
        d[2] = g;
    }
}

static void lorentz_eval(const double *p, const double *x, size_t n, double *y)
{
    prof_drive_eval(3, width_check, lorentz_point, p, x, n, y);
}

static void lorentz_eval_jac(const double *p, const double *x, size_t n, double *y, const cs_profile_jac *jac)
{
    prof_drive_jac(3, width_check, lorentz_point, p, x, n, y, jac);
}

/* Quantities every symmetric single-width profile shares: position, fwhm, hwhm, integral. */
static int symmetric_quantity(cs_profile_qty q, const double *p, size_t np, double *value, double *grad)
{
    prof_grad_zero(grad, np);
    switch (q) {
    case CS_PROFILE_POSITION:
        *value = p[0];
        if (grad)
            grad[0] = 1.0;
        return CS_OK;
    case CS_PROFILE_FWHM:
    case CS_PROFILE_HWHM: {
        double m = (q == CS_PROFILE_HWHM) ? 0.5 : 1.0;
        *value = m * p[1];
        if (grad)
            grad[1] = m;
        return CS_OK;
    }
    case CS_PROFILE_INTEGRAL:
        *value = p[np - 1];
        if (grad)
            grad[np - 1] = 1.0;
        return CS_OK;
    default:
        return prof_qty_fail(CS_EUNSUP, np, value, grad);
    }
}

static int lorentz_quantity(cs_profile_qty q, const double *p, double *value, double *grad)
{
    int rc = width_check(p, NULL, NULL);
    if (rc)
        return prof_qty_fail(rc, 3, value, grad);
    prof_grad_zero(grad, 3);
    double fw = p[1], a = p[2];
    switch (q) {
    case CS_PROFILE_HEIGHT:
        /* 2A/(pi fwhm): handbook peak of the area-normalised Lorentzian */
        *value = 2.0 * a / (PI_ * fw);
        if (grad) {
            grad[1] = -*value / fw;
            grad[2] = 2.0 / (PI_ * fw);
        }
        return CS_OK;
    case CS_PROFILE_GAMMA:
        *value = 2.0 * PI_ * fw;
        if (grad)
            grad[1] = 2.0 * PI_;
        return CS_OK;
    default:
        return symmetric_quantity(q, p, 3, value, grad);
    }
}

const cs_profile_type cs_profile_lorentz = {
    "lorentz", "Lorentzian (Cauchy) line; Gamma = 2 pi fwhm is the decay rate",
    3, three_names, three_units,
    width_check, lorentz_eval, lorentz_eval_jac, lorentz_quantity};

/* ---------------------------------------------------------------- gauss */

static void gauss_point(const double *p, double x, double *v, double *d)
{
    double g, dc, dw;
    gau_unit(x - p[0], p[1], &g, d ? &dc : NULL, &dw);
    *v = p[2] * g;
    if (d) {
        d[0] = p[2] * dc;
        d[1] = p[2] * dw;
        d[2] = g;
    }
}

static void gauss_eval(const double *p, const double *x, size_t n, double *y)
{
    prof_drive_eval(3, width_check, gauss_point, p, x, n, y);
}

static void gauss_eval_jac(const double *p, const double *x, size_t n, double *y, const cs_profile_jac *jac)
{
    prof_drive_jac(3, width_check, gauss_point, p, x, n, y, jac);
}

static int gauss_quantity(cs_profile_qty q, const double *p, double *value, double *grad)
{
    int rc = width_check(p, NULL, NULL);
    if (rc)
        return prof_qty_fail(rc, 3, value, grad);
    prof_grad_zero(grad, 3);
    double fw = p[1], a = p[2];
    switch (q) {
    case CS_PROFILE_HEIGHT: {
        /* A/(sigma sqrt(2 pi)) = 2 A sqrt(ln 2/pi)/fwhm */
        double k = 2.0 * SQRT_LN2_OVER_PI_ / fw;
        *value = a * k;
        if (grad) {
            grad[1] = -a * k / fw;
            grad[2] = k;
        }
        return CS_OK;
    }
    case CS_PROFILE_SIGMA:
        *value = fw / (2.0 * SQRT_2LN2_);
        if (grad)
            grad[1] = 1.0 / (2.0 * SQRT_2LN2_);
        return CS_OK;
    default:
        return symmetric_quantity(q, p, 3, value, grad);
    }
}

const cs_profile_type cs_profile_gauss = {
    "gauss", "Gaussian line (Doppler or inhomogeneous broadening)",
    3, three_names, three_units,
    width_check, gauss_eval, gauss_eval_jac, gauss_quantity};

/* ---------------------------------------------------------------- pvoigt */

static const char *const pv_names[] = {"center", "fwhm", "eta", "area"};
static const char *const pv_units[] = {"Hz", "Hz", "1", "area"};

static int pvoigt_check(const double *p, size_t *bad, const char **why)
{
    int rc = prof_check_finite(p, 4, bad, why);
    if (!rc)
        rc = prof_check_positive(p, 1, bad, why);
    if (!rc && !(p[2] >= 0.0 && p[2] <= 1.0)) {
        if (bad)
            *bad = 2;
        if (why)
            *why = "must lie in [0, 1]";
        rc = CS_ERANGE;
    }
    return rc;
}

static void pvoigt_point(const double *p, double x, double *v, double *d)
{
    double u = x - p[0], eta = p[2], a = p[3];
    double l, lc, lw, g, gc, gw;
    lor_unit(u, p[1], &l, d ? &lc : NULL, &lw);
    gau_unit(u, p[1], &g, d ? &gc : NULL, &gw);
    double shape = eta * l + (1.0 - eta) * g;
    *v = a * shape;
    if (d) {
        d[0] = a * (eta * lc + (1.0 - eta) * gc);
        d[1] = a * (eta * lw + (1.0 - eta) * gw);
        d[2] = a * (l - g);
        d[3] = shape;
    }
}

static void pvoigt_eval(const double *p, const double *x, size_t n, double *y)
{
    prof_drive_eval(4, pvoigt_check, pvoigt_point, p, x, n, y);
}

static void pvoigt_eval_jac(const double *p, const double *x, size_t n, double *y, const cs_profile_jac *jac)
{
    prof_drive_jac(4, pvoigt_check, pvoigt_point, p, x, n, y, jac);
}

static int pvoigt_quantity(cs_profile_qty q, const double *p, double *value, double *grad)
{
    int rc = pvoigt_check(p, NULL, NULL);
    if (rc)
        return prof_qty_fail(rc, 4, value, grad);
    prof_grad_zero(grad, 4);
    double fw = p[1], eta = p[2], a = p[3];
    switch (q) {
    case CS_PROFILE_HEIGHT: {
        /* both parts peak at the centre: eta 2/(pi fwhm) + (1 - eta) 2 sqrt(ln 2/pi)/fwhm */
        double kl = 2.0 / (PI_ * fw), kg = 2.0 * SQRT_LN2_OVER_PI_ / fw;
        double k = eta * kl + (1.0 - eta) * kg;
        *value = a * k;
        if (grad) {
            grad[1] = -a * k / fw;
            grad[2] = a * (kl - kg);
            grad[3] = k;
        }
        return CS_OK;
    }
    case CS_PROFILE_SIGMA:
        *value = fw / (2.0 * SQRT_2LN2_);
        if (grad)
            grad[1] = 1.0 / (2.0 * SQRT_2LN2_);
        return CS_OK;
    case CS_PROFILE_GAMMA:
        *value = 2.0 * PI_ * fw;
        if (grad)
            grad[1] = 2.0 * PI_;
        return CS_OK;
    default:
        /* at u = fwhm/2 both parts are at half their peaks, so the FWHM is fwhm for eta in [0,1] */
        return symmetric_quantity(q, p, 4, value, grad);
    }
}

const cs_profile_type cs_profile_pvoigt = {
    "pvoigt", "pseudo-Voigt: eta Lorentzian + (1-eta) Gaussian sharing one fwhm",
    4, pv_names, pv_units,
    pvoigt_check, pvoigt_eval, pvoigt_eval_jac, pvoigt_quantity};

/* ---------------------------------------------------------------- sech2 */

static void sech2_point(const double *p, double x, double *v, double *d)
{
    double fw = p[1], a = p[2];
    double b = fw / (2.0 * LN_1P_SQRT2_), t = (x - p[0]) / b;
    /* sech^2 t = 4 e^{-2|t|}/(1 + e^{-2|t|})^2 and tanh t = sign(t)(1 - e^{-2|t|})/(1 + e^{-2|t|}):
     * no overflow for any t */
    double m = exp(-2.0 * fabs(t)), den = 1.0 + m;
    double s2 = 4.0 * m / (den * den);
    double g = s2 / (2.0 * b);
    *v = a * g;
    if (d) {
        double th = copysign((1.0 - m) / den, t);
        double dc = s2 == 0.0 ? 0.0 : s2 * th / (b * b);
        double dw = s2 == 0.0 ? 0.0 : s2 * (2.0 * t * th - 1.0) / (2.0 * b * fw);
        d[0] = a * dc;
        d[1] = a * dw;
        d[2] = g;
    }
}

static void sech2_eval(const double *p, const double *x, size_t n, double *y)
{
    prof_drive_eval(3, width_check, sech2_point, p, x, n, y);
}

static void sech2_eval_jac(const double *p, const double *x, size_t n, double *y, const cs_profile_jac *jac)
{
    prof_drive_jac(3, width_check, sech2_point, p, x, n, y, jac);
}

static int sech2_quantity(cs_profile_qty q, const double *p, double *value, double *grad)
{
    int rc = width_check(p, NULL, NULL);
    if (rc)
        return prof_qty_fail(rc, 3, value, grad);
    prof_grad_zero(grad, 3);
    double fw = p[1], a = p[2];
    if (q == CS_PROFILE_HEIGHT) {
        /* A/(2b) = A ln(1 + sqrt 2)/fwhm */
        double k = LN_1P_SQRT2_ / fw;
        *value = a * k;
        if (grad) {
            grad[1] = -a * k / fw;
            grad[2] = k;
        }
        return CS_OK;
    }
    return symmetric_quantity(q, p, 3, value, grad);
}

const cs_profile_type cs_profile_sech2 = {
    "sech2", "sech^2 line: power spectrum of a hyperbolic-secant pulse",
    3, three_names, three_units,
    width_check, sech2_eval, sech2_eval_jac, sech2_quantity};
