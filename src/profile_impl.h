/* Private helpers shared by the profile sources: Jacobian scattering, NaN fill, checks, constants. */
#ifndef CS_PROFILE_IMPL_H
#define CS_PROFILE_IMPL_H

#include <collshift/profile.h>

#include <math.h>
#include <stddef.h>

/* Mathematical constants, to double precision. */
#define PI_ 3.14159265358979323846
#define SQRT_PI_ 1.77245385090551602730          /* sqrt(pi) */
#define LN2_ 0.69314718055994530942              /* ln 2 */
#define SQRT_LN2_ 0.83255461115769775635         /* sqrt(ln 2) */
#define SQRT_2LN2_ 1.17741002251547469101        /* sqrt(2 ln 2) */
#define SQRT_LN2_OVER_PI_ 0.46971863934982566689 /* sqrt(ln 2 / pi) */
#define LN_1P_SQRT2_ 0.88137358701954302523      /* ln(1 + sqrt 2) = arcosh(sqrt 2) */

/* A cs_profile_jac resolved once per call: the element offset of each parameter's column. */
typedef struct prof_jw {
    double *data;                       /* NULL: no Jacobian wanted */
    size_t row_stride;
    size_t np;
    size_t off[CS_PROFILE_MAX_PARAMS];
    unsigned char on[CS_PROFILE_MAX_PARAMS];
    int contig;                         /* every column wanted, at offsets 0, 1, ..., np - 1 */
} prof_jw;

static inline void prof_jw_init(prof_jw *w, const cs_profile_jac *jac, size_t np)
{
    w->data = jac ? jac->data : NULL;
    w->row_stride = jac ? jac->row_stride : 0;
    w->np = np;
    w->contig = 1;
    for (size_t k = 0; k < np; k++) {
        size_t c = (jac && jac->cols) ? jac->cols[k] : k;
        w->on[k] = (unsigned char)(c != CS_PROFILE_SKIP);
        w->off[k] = w->on[k] ? c * (jac ? jac->col_stride : 0) : 0;
        w->contig &= w->on[k] && w->off[k] == k;
    }
}

/* Add the np derivatives d[] of point i. */
static inline void prof_jw_add(const prof_jw *w, size_t i, const double *d)
{
    if (!w->data)
        return;
    double *row = w->data + i * w->row_stride;
    if (w->contig) { /* the model's own layout: one row of its Jacobian */
        for (size_t k = 0; k < w->np; k++)
            row[k] += d[k];
        return;
    }
    for (size_t k = 0; k < w->np; k++)
        if (w->on[k])
            row[w->off[k]] += d[k];
}

/* Invalid parameters: add NaN to every y[i] and every addressed Jacobian element. */
static inline void prof_fill_nan(double *y, const prof_jw *w, size_t n)
{
    double d[CS_PROFILE_MAX_PARAMS];
    for (size_t k = 0; k < CS_PROFILE_MAX_PARAMS; k++)
        d[k] = NAN;
    for (size_t i = 0; i < n; i++) {
        if (y)
            y[i] += NAN;
        prof_jw_add(w, i, d);
    }
}

/* Failure of a quantity: NaN value and gradient, the code returned. */
static inline int prof_qty_fail(int code, size_t np, double *value, double *grad)
{
    *value = NAN;
    if (grad)
        for (size_t k = 0; k < np; k++)
            grad[k] = NAN;
    return code;
}

/* Gradient helper: zero all np entries (when grad is not NULL). */
static inline void prof_grad_zero(double *grad, size_t np)
{
    if (grad)
        for (size_t k = 0; k < np; k++)
            grad[k] = 0.0;
}

/* Common checks: every parameter finite, then p[k] > 0 for the listed width indices. */
static inline int prof_check_finite(const double *p, size_t np, size_t *bad, const char **why)
{
    for (size_t k = 0; k < np; k++)
        if (!isfinite(p[k])) {
            if (bad)
                *bad = k;
            if (why)
                *why = "must be finite";
            return CS_EINVAL;
        }
    return CS_OK;
}

static inline int prof_check_positive(const double *p, size_t k, size_t *bad, const char **why)
{
    if (!(p[k] > 0.0)) {
        if (bad)
            *bad = k;
        if (why)
            *why = "must be > 0";
        return CS_ERANGE;
    }
    return CS_OK;
}

/* A point kernel: *v = f(x) for parameters p and, when d is not NULL, d[k] = df/dp_k. */
typedef void prof_point_fn(const double *p, double x, double *v, double *d);
typedef int prof_check_fn(const double *p, size_t *bad, const char **why);

/* The array loops behind every descriptor's eval and eval_jac (inlined with the kernel). */
static inline void prof_drive_eval(size_t np, prof_check_fn *check, prof_point_fn *point,
                                   const double *p, const double *x, size_t n, double *y)
{
    if (check(p, NULL, NULL) != CS_OK) {
        prof_jw w;
        prof_jw_init(&w, NULL, np);
        prof_fill_nan(y, &w, n);
        return;
    }
    for (size_t i = 0; i < n; i++) {
        double v;
        point(p, x[i], &v, NULL);
        y[i] += v;
    }
}

static inline void prof_drive_jac(size_t np, prof_check_fn *check, prof_point_fn *point,
                                  const double *p, const double *x, size_t n, double *y,
                                  const cs_profile_jac *jac)
{
    prof_jw w;
    prof_jw_init(&w, jac, np);
    if (check(p, NULL, NULL) != CS_OK) {
        prof_fill_nan(y, &w, n);
        return;
    }
    for (size_t i = 0; i < n; i++) {
        double v, d[CS_PROFILE_MAX_PARAMS];
        point(p, x[i], &v, d);
        if (y)
            y[i] += v;
        prof_jw_add(&w, i, d);
    }
}

#endif /* CS_PROFILE_IMPL_H */
