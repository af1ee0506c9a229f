/* Profile registry, checked evaluation wrappers, and derived quantities with propagated errors.
 *
 * Errors of derived quantities: a quantity Q(p) with gradient g = dQ/dp has, to first order,
 * variance g^T C g for a parameter covariance C (the usual linear error propagation). Every
 * descriptor supplies Q and g analytically; this file does the propagation. */
#include <collshift/profile.h>

#include "profile_impl.h"

#include <math.h>
#include <string.h>

/* The registry: adding a profile is one descriptor (its own file) and one row here. */
static const cs_profile_type *const registry[] = {
    &cs_profile_lorentz,
    &cs_profile_gauss,
    &cs_profile_voigt,
    &cs_profile_pvoigt,
    &cs_profile_fano,
    &cs_profile_sech2,
};

#define REGISTRY_SIZE (sizeof registry / sizeof registry[0])

const cs_profile_type *cs_profile_find(const char *name)
{
    if (!name)
        return NULL;
    for (size_t i = 0; i < REGISTRY_SIZE; i++)
        if (strcmp(registry[i]->name, name) == 0)
            return registry[i];
    return NULL;
}

size_t cs_profile_count(void)
{
    return REGISTRY_SIZE;
}

const cs_profile_type *cs_profile_get(size_t i)
{
    return i < REGISTRY_SIZE ? registry[i] : NULL;
}

size_t cs_profile_area_index(const cs_profile_type *t)
{
    return (t && t->nparams > 0) ? t->nparams - 1 : CS_PROFILE_SKIP;
}

size_t cs_profile_param_index(const cs_profile_type *t, const char *name)
{
    if (!t || !name)
        return CS_PROFILE_SKIP;
    for (size_t k = 0; k < t->nparams; k++)
        if (strcmp(t->param_names[k], name) == 0)
            return k;
    return CS_PROFILE_SKIP;
}

/* ---------------------------------------------------------------- checking and evaluation */

int cs_profile_check_params(const cs_profile_type *t, const double *p, cs_error *err)
{
    if (!t)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no profile given");
    if (!p)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "%s: no parameters given", t->name);
    size_t bad = 0;
    const char *why = "is invalid";
    int rc = t->check(p, &bad, &why);
    if (rc == CS_OK)
        return CS_OK;
    if (bad >= t->nparams)
        bad = 0;
    return cs_error_set(err, rc, NULL, -1, -1, "%s: parameter '%s' = %g %s", t->name,
                        t->param_names[bad], p[bad], why);
}

int cs_profile_eval(const cs_profile_type *t, const double *p, const double *x, size_t n, double *y)
{
    if (!t || !p || (n > 0 && (!x || !y)))
        return CS_EINVAL;
    t->eval(p, x, n, y);
    return t->check(p, NULL, NULL);
}

int cs_profile_eval_jac(const cs_profile_type *t, const double *p, const double *x, size_t n,
                        double *y, const cs_profile_jac *jac)
{
    if (!t || !p || (n > 0 && !x) || (jac && n > 0 && !jac->data))
        return CS_EINVAL;
    t->eval_jac(p, x, n, y, jac);
    return t->check(p, NULL, NULL);
}

int cs_profile_value_e(const cs_profile_type *t, const double *p, double x, double *value, double *grad)
{
    if (!value)
        return CS_EINVAL;
    *value = NAN;
    if (!t || !p) {
        if (grad && t)
            for (size_t k = 0; k < t->nparams; k++)
                grad[k] = NAN;
        return CS_EINVAL;
    }
    double v = 0.0;
    if (grad) {
        for (size_t k = 0; k < t->nparams; k++)
            grad[k] = 0.0;
        cs_profile_jac jac = {grad, 0, 1, NULL};
        t->eval_jac(p, &x, 1, &v, &jac);
    } else {
        t->eval(p, &x, 1, &v);
    }
    *value = v;
    return t->check(p, NULL, NULL);
}

double cs_profile_value(const cs_profile_type *t, const double *p, double x)
{
    double v;
    return cs_profile_value_e(t, p, x, &v, NULL) == CS_OK ? v : NAN;
}

/* ---------------------------------------------------------------- derived quantities */

static const struct {
    const char *name;
    const char *unit;
} qty_info[CS_PROFILE_NQTY] = {
    [CS_PROFILE_HEIGHT] = {"height", "area/Hz"},
    [CS_PROFILE_POSITION] = {"position", "Hz"},
    [CS_PROFILE_FWHM] = {"fwhm", "Hz"},
    [CS_PROFILE_HWHM] = {"hwhm", "Hz"},
    [CS_PROFILE_SIGMA] = {"sigma", "Hz"},
    [CS_PROFILE_GAMMA] = {"gamma", "s^-1"},
    [CS_PROFILE_FWHM_OL] = {"fwhm_ol", "Hz"},
    [CS_PROFILE_INTEGRAL] = {"integral", "area"},
};

const char *cs_profile_qty_name(cs_profile_qty q)
{
    return ((unsigned)q < CS_PROFILE_NQTY) ? qty_info[q].name : "";
}

const char *cs_profile_qty_unit(cs_profile_qty q)
{
    return ((unsigned)q < CS_PROFILE_NQTY) ? qty_info[q].unit : "";
}

int cs_profile_quantity(const cs_profile_type *t, cs_profile_qty q, const double *p,
                        double *value, double *grad)
{
    if (!value)
        return CS_EINVAL;
    if (!t || !p || (unsigned)q >= CS_PROFILE_NQTY) {
        *value = NAN;
        if (grad && t)
            for (size_t k = 0; k < t->nparams; k++)
                grad[k] = NAN;
        return CS_EINVAL;
    }
    return t->quantity(q, p, value, grad);
}

int cs_profile_derive(const cs_profile_type *t, const double *p, const double *cov, size_t ldcov,
                      cs_profile_derived *out)
{
    if (!out)
        return CS_EINVAL;
    for (int q = 0; q < CS_PROFILE_NQTY; q++) {
        out->value[q] = out->err[q] = NAN;
        out->status[q] = CS_EINVAL;
        for (size_t k = 0; k < CS_PROFILE_MAX_PARAMS; k++)
            out->grad[q][k] = NAN;
    }
    if (!t || !p || (cov && ldcov < t->nparams))
        return CS_EINVAL;
    size_t np = t->nparams;
    int first = CS_OK;
    for (int q = 0; q < CS_PROFILE_NQTY; q++) {
        double *g = out->grad[q];
        int rc = t->quantity((cs_profile_qty)q, p, &out->value[q], g);
        out->status[q] = rc;
        if (rc != CS_OK) {
            out->value[q] = NAN;
            if (rc != CS_EUNSUP && first == CS_OK)
                first = rc;
            continue;
        }
        if (!cov)
            continue;
        double var = 0.0;
        for (size_t j = 0; j < np; j++) {
            if (g[j] == 0.0)
                continue;                 /* also keeps an unused parameter's NaN variance out */
            double row = 0.0;
            for (size_t k = 0; k < np; k++)
                if (g[k] != 0.0)
                    row += cov[j * ldcov + k] * g[k];
            var += g[j] * row;
        }
        out->err[q] = var >= 0.0 ? sqrt(var) : NAN;
    }
    return first;
}
