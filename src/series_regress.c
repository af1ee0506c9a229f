/* Straight lines of centre (shift) and FWHM against density, and their comparison with theory. */
#include <collshift/series.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_fit.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

const char *cs_series_quantity_name(cs_series_quantity q)
{
    return q == CS_SERIES_Q_FWHM ? "fwhm" : "center";
}

static void linear_nan(cs_series_linear *o)
{
    o->slope = o->slope_err = o->intercept = o->intercept_err = NAN;
    o->cov = o->chi2 = o->redchi2 = NAN;
}

int cs_series_linfit(const double *x, const double *y, const double *sigma, size_t n,
                     unsigned flags, cs_series_linear *out, cs_error *err)
{
    if (!x || !y || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "linear fit: NULL x, y or output");
    memset(out, 0, sizeof *out);
    linear_nan(out);
    out->through_origin = (flags & CS_SERIES_FIT_ORIGIN) != 0;
    out->weighted = sigma != NULL;
    double *buf = malloc(3 * (n ? n : 1) * sizeof *buf);
    if (!buf)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "linear fit: out of memory");
    double *xs = buf, *ys = buf + n, *ws = buf + 2 * n;
    size_t m = 0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(y[i]))
            continue;
        if (sigma && !(isfinite(sigma[i]) && sigma[i] > 0))
            continue;
        xs[m] = x[i];
        ys[m] = y[i];
        ws[m] = sigma ? 1.0 / (sigma[i] * sigma[i]) : 1.0;
        m++;
    }
    out->n = m;
    size_t npar = out->through_origin ? 1 : 2;
    int vary = 0;
    for (size_t i = 1; i < m; i++)
        if (xs[i] != xs[0])
            vary = 1;
    if (m < npar || (!out->through_origin && !vary) || (out->through_origin && m && xs[0] == 0 && !vary)) {
        free(buf);
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "linear fit: %zu usable points%s", m, m >= npar ? " and the density does not vary" : "");
    }
    out->dof = m - npar;
    double c0 = 0, c1 = 0, cov00 = 0, cov01 = 0, cov11 = 0, chi2 = 0;
    int grc;
    if (out->through_origin) {
        grc = gsl_fit_wmul(xs, 1, ws, 1, ys, 1, m, &c1, &cov11, &chi2);
    } else {
        grc = gsl_fit_wlinear(xs, 1, ws, 1, ys, 1, m, &c0, &c1, &cov00, &cov01, &cov11, &chi2);
    }
    free(buf);
    if (grc != GSL_SUCCESS)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "linear fit: %s", gsl_strerror(grc));
    out->slope = c1;
    out->intercept = c0;
    out->chi2 = chi2;
    out->redchi2 = out->dof ? chi2 / (double)out->dof : NAN;
    double scale = 1.0;
    if (!sigma)
        scale = out->dof ? out->redchi2 : NAN;   /* errors from the scatter */
    else if ((flags & CS_SERIES_FIT_INFLATE) && out->redchi2 > 1) {
        scale = out->redchi2;
        out->inflated = 1;
    }
    out->slope_err = sqrt(cov11 * scale);
    out->intercept_err = out->through_origin ? 0.0 : sqrt(cov00 * scale);
    out->cov = out->through_origin ? 0.0 : cov01 * scale;
    return CS_OK;
}

int cs_series_regress(const cs_series *s, unsigned flags, cs_series_regression *out)
{
    if (!s || !out)
        return CS_EINVAL;
    size_t n = s->n ? s->n : 1;
    double *x = malloc(3 * n * sizeof *x);
    if (!x)
        return CS_ENOMEM;
    double *y = x + n, *sg = x + 2 * n;
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        for (int q = 0; q < CS_SERIES_NQ; q++) {
            cs_series_regression *r = &out[k * CS_SERIES_NQ + q];
            memset(r, 0, sizeof *r);
            r->era = (cs_split_era)k;
            r->quantity = (cs_series_quantity)q;
            int relative = q == CS_SERIES_Q_CENTER;
            size_t m = 0;
            for (size_t i = 0; i < s->n; i++) {
                const cs_series_line *l = &s->e[i].era_line[k];
                if (l->ok && isfinite(s->e[i].density_used_m3) && !isfinite(l->shift_hz))
                    relative = 0;
            }
            for (size_t i = 0; i < s->n; i++) {
                const cs_series_entry *e = &s->e[i];
                const cs_series_line *l = &e->era_line[k];
                if (!l->ok || !isfinite(e->density_used_m3))
                    continue;
                x[m] = e->density_used_m3 * 1e-6;   /* cm^-3: slopes in Hz cm^3 */
                if (q == CS_SERIES_Q_FWHM) {
                    y[m] = l->fwhm_hz;
                    sg[m] = l->fwhm_hz_err;
                } else {
                    y[m] = relative ? l->shift_hz : l->center_hz;
                    sg[m] = relative ? l->shift_hz_err : l->center_hz_err;
                }
                m++;
            }
            r->relative = relative;
            r->status = cs_series_linfit(x, y, sg, m, flags, &r->fit, NULL);
            /* points whose error is undefined get no weight at all (never a made-up one) */
            for (size_t i = 0; i < m; i++)
                r->left_out += !(isfinite(sg[i]) && sg[i] > 0);
        }
    }
    free(x);
    return CS_OK;
}

static size_t add_row(cs_series_compare *out, size_t n, const cs_series_regression *r,
                      const cs_theory_estimates *est, cs_theory_quantity q)
{
    const cs_estimate *e = &est->e[q];
    if (r->status != CS_OK || e->status != CS_EST_OK || !isfinite(e->value) || e->value == 0)
        return n;
    cs_series_compare *c = &out[n];
    c->era = r->era;
    c->quantity = r->quantity;
    c->estimate = q;
    c->name = e->name;
    c->theory_hz_cm3 = e->value;
    c->measured_hz_cm3 = r->fit.slope;
    c->measured_hz_cm3_err = r->fit.slope_err;
    c->ratio = r->fit.slope / e->value;
    c->nsigma = r->fit.slope_err > 0 ? (r->fit.slope - e->value) / r->fit.slope_err : NAN;
    return n + 1;
}

size_t cs_series_compare_theory(const cs_series_regression *reg, const cs_theory_estimates *est,
                                cs_series_compare *out)
{
    if (!reg || !est || !out)
        return 0;
    size_t n = 0;
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        const cs_series_regression *rc = &reg[k * CS_SERIES_NQ + CS_SERIES_Q_CENTER];
        const cs_series_regression *rw = &reg[k * CS_SERIES_NQ + CS_SERIES_Q_FWHM];
        n = add_row(out, n, rc, est, CS_TH_LL_COEF);
        n = add_row(out, n, rc, est, CS_TH_SLAB_COEF);
        n = add_row(out, n, rw, est, CS_TH_SELF_COEF);
    }
    return n;
}
