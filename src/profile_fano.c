/* Fano line shape (asymmetric resonance) with analytic derivatives and its derived quantities.
 *
 * Fano's shape (U. Fano, Phys. Rev. 124, 1866 (1961); from memory) is (q + e)^2/(1 + e^2) with
 * e = 2(x - center)/fwhm. Removing the constant background and dividing by q^2 gives
 *     f = area (2/(pi fwhm)) ((q + e)^2/(1 + e^2) - 1)/q^2
 *       = area (2/(pi fwhm)) R(e),   R = (1 - r^2 + 2 r e)/(1 + e^2),  r = 1/q,
 * which tends to the Lorentzian of the same area and FWHM as |q| -> infinity. Properties used
 * below (elementary calculus on R; derived here):
 *   - max R = 1 at e = r, min R = -r^2 at e = -q;
 *   - R = 1/2 at e = r +- sqrt(1 + 2 r^2), so the width at half maximum is fwhm sqrt(1 + 2/q^2);
 *   - the principal-value integral is area (1 - 1/q^2) (the 2re/(1+e^2) part integrates to 0).
 * The reasons for this normalisation are in include/collshift/profile.h.
 *
 * Derivatives, with g = 1/(1 + e^2) and dR/de = 2 g (r - e R):
 *   df/dcenter = -(2/fwhm) area P dR/de,   df/dfwhm = -(area P/fwhm)(R + e dR/de),
 *   df/dq = 2 area P g r^2 (r - e),        df/darea = P R,   P = 2/(pi fwhm). */
#include <collshift/profile.h>

#include "profile_impl.h"

#include <math.h>

static const char *const fano_names[] = {"center", "fwhm", "q", "area"};
static const char *const fano_units[] = {"Hz", "Hz", "1", "area"};

static int fano_check(const double *p, size_t *bad, const char **why)
{
    int rc = prof_check_finite(p, 4, bad, why);
    if (!rc)
        rc = prof_check_positive(p, 1, bad, why);
    if (!rc && p[2] == 0.0) {
        if (bad)
            *bad = 2;
        if (why)
            *why = "must not be 0";
        rc = CS_ERANGE;
    }
    return rc;
}

static void fano_point(const double *p, double x, double *v, double *d)
{
    double fw = p[1], r = 1.0 / p[2], a = p[3];
    double e = 2.0 * (x - p[0]) / fw;
    double g = 1.0 / (1.0 + e * e);
    double R = (1.0 - r * r) * g + 2.0 * r * (e * g);
    double P = 2.0 / (PI_ * fw);
    *v = a * P * R;
    if (d) {
        double dR = 2.0 * g * (r - e * R);
        d[0] = -(2.0 / fw) * a * P * dR;
        d[1] = -(a * P / fw) * (R + e * dR);
        d[2] = 2.0 * a * P * g * r * r * (r - e);
        d[3] = P * R;
    }
}

static void fano_eval(const double *p, const double *x, size_t n, double *y)
{
    prof_drive_eval(4, fano_check, fano_point, p, x, n, y);
}

static void fano_eval_jac(const double *p, const double *x, size_t n, double *y, const cs_profile_jac *jac)
{
    prof_drive_jac(4, fano_check, fano_point, p, x, n, y, jac);
}

static int fano_quantity(cs_profile_qty q, const double *p, double *value, double *grad)
{
    int rc = fano_check(p, NULL, NULL);
    if (rc)
        return prof_qty_fail(rc, 4, value, grad);
    prof_grad_zero(grad, 4);
    double fw = p[1], r = 1.0 / p[2], a = p[3];
    switch (q) {
    case CS_PROFILE_HEIGHT:
        *value = 2.0 * a / (PI_ * fw);
        if (grad) {
            grad[1] = -*value / fw;
            grad[3] = 2.0 / (PI_ * fw);
        }
        return CS_OK;
    case CS_PROFILE_POSITION:
        /* maximum at e = 1/q */
        *value = p[0] + 0.5 * fw * r;
        if (grad) {
            grad[0] = 1.0;
            grad[1] = 0.5 * r;
            grad[2] = -0.5 * fw * r * r;
        }
        return CS_OK;
    case CS_PROFILE_FWHM:
    case CS_PROFILE_HWHM: {
        double m = (q == CS_PROFILE_HWHM) ? 0.5 : 1.0;
        double k = sqrt(1.0 + 2.0 * r * r);
        *value = m * fw * k;
        if (grad) {
            grad[1] = m * k;
            grad[2] = -m * 2.0 * fw * r * r * r / k;
        }
        return CS_OK;
    }
    case CS_PROFILE_GAMMA:
        *value = 2.0 * PI_ * fw;
        if (grad)
            grad[1] = 2.0 * PI_;
        return CS_OK;
    case CS_PROFILE_INTEGRAL:
        *value = a * (1.0 - r * r);
        if (grad) {
            grad[2] = 2.0 * a * r * r * r;
            grad[3] = 1.0 - r * r;
        }
        return CS_OK;
    default:
        return prof_qty_fail(CS_EUNSUP, 4, value, grad);
    }
}

const cs_profile_type cs_profile_fano = {
    "fano", "Fano resonance: asymmetric line, tends to the Lorentzian of equal area as |q| -> infinity",
    4, fano_names, fano_units,
    fano_check, fano_eval, fano_eval_jac, fano_quantity};
