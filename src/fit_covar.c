/* Errors of a fit: parameters at bounds, the covariance matrix with its singular directions,
 * expanded to fixed and tied parameters; correlations.
 *
 * Covariance. At the solution the Jacobian with respect to the user parameters is used (the bound
 * transform is left out: for interior points (T^-1)^T (J_t^T W J_t)^-1 T^-1, T = diag(dp/dt), is
 * the same matrix, and at a bound T is singular). Its rows are weighted by 1/sigma_i (Cash: by
 * 1/sqrt(m_i), giving the Fisher information J^T diag(1/m) J), its columns equilibrated to unit
 * norm (so the rank test below does not depend on units), and gsl_multifit_nlinear_covar forms
 * (J^T W J)^-1 by QR with column pivoting, dropping columns with |R_kk| <= 1e-10 |R_11|.
 *
 * Singular problems. A parameter whose column is zero (it does not change the model) or was
 * dropped, and every kept parameter that takes part in the null vector expressing a dropped
 * column through the kept ones (coefficient beta = C_KK J_K^T J_d above 1e-8), is undetermined:
 * its error and covariances are NaN and the status is CS_FIT_SINGULAR. For the other parameters
 * the padded inverse is a generalised inverse of J^T W J, and the variance of a parameter outside
 * the null space is the same for every generalised inverse (an estimable function: e.g. S. R.
 * Searle, Linear Models, Wiley 1971, ch. 5), so their errors are still correct. Two identical
 * components thus get NaN area errors but correct errors for their common centre and width.
 *
 * Bounds. A parameter within 1e-6 of a bound (relative to the bound range, or to max(s, |bound|)
 * with one bound) is flagged at_bound (1 lower, 2 upper). It is held there while the covariance
 * is formed, so the others' errors are conditional on it, and its own error and covariances are
 * NaN: the curvature at a bound says nothing about how far the parameter could move.
 *
 * Expansion. Fixed parameters get zero rows (error 0); a tied parameter p_t = f p_m + o gets
 * cov(p_t, p_x) = f cov(p_m, p_x). NOISE weighting multiplies everything by chi2/dof; SIGMA,
 * POISSON and Cash use it unscaled. Correlations are cov_ab / sqrt(var_a var_b), NaN unless both
 * variances are positive. */
#include <collshift/fit.h>

#include "fit_impl.h"

#include <gsl/gsl_errno.h>

#include <math.h>

#define FIT_RANK_RTOL 1e-10   /* column dropped when |R_kk| <= this * |R_11| (equilibrated) */
#define FIT_NULL_TOL 1e-8     /* null-vector coefficient that makes a parameter undetermined */
#define FIT_BOUND_RTOL 1e-6   /* at_bound distance, relative */

void cs_fit_impl_flag_bounds(const cs_fit_workspace *w, cs_fit_result *r)
{
    for (size_t j = 0; j < w->nfree; j++) {
        const fit_free *f = &w->fr[j];
        double v = r->value[f->idx];
        int at = 0;
        if (f->kind == FIT_TR_BOTH) {
            double tol = FIT_BOUND_RTOL * (f->hi - f->lo);
            at = v - f->lo <= tol ? 1 : (f->hi - v <= tol ? 2 : 0);
        } else if (f->kind == FIT_TR_LOWER) {
            at = v - f->lo <= FIT_BOUND_RTOL * fmax(f->s, fabs(f->lo)) ? 1 : 0;
        } else if (f->kind == FIT_TR_UPPER) {
            at = f->hi - v <= FIT_BOUND_RTOL * fmax(f->s, fabs(f->hi)) ? 2 : 0;
        }
        r->at_bound[f->idx] = at;
    }
}

/* Covariance of the free parameters not at a bound, in cf (nfree x nfree, NaN where undefined),
 * from the evaluation at the fitted parameters; *singular set when some are undetermined. */
static int free_covariance(cs_fit_workspace *w, const cs_fit_result *r, double factor, double *cf,
                           int *singular)
{
    const size_t n = w->n, np = w->np, k = w->nfree;
    const int cash = w->weighting == CS_WEIGHT_CASH;
    *singular = 0;
    for (size_t j = 0; j < k * k; j++)
        cf[j] = NAN;
    size_t ka = 0;
    for (size_t j = 0; j < k; j++)
        if (!r->at_bound[w->fr[j].idx])
            w->act[ka++] = j;
    if (ka == 0)
        return CS_OK;
    /* weighted Jacobian of the active parameters and its column norms */
    for (size_t a = 0; a < ka; a++)
        w->colnorm[a] = 0.0;
    for (size_t i = 0; i < n; i++) {
        const double *row = w->Jfull + i * np;
        double cw = cash ? 1.0 / sqrt(w->mval[i]) : w->sw[i];
        double *out = w->Jc + i * ka;
        for (size_t a = 0; a < ka; a++) {
            double v = cw * cs_fit_impl_column(w, row, &w->fr[w->act[a]]);
            out[a] = v;
            w->colnorm[a] += v * v;
        }
    }
    /* columns that are zero: parameters without effect on the model */
    size_t kb = 0;
    double *nrm = w->nrm;
    size_t *keep = w->keep;
    for (size_t a = 0; a < ka; a++) {
        double c = sqrt(w->colnorm[a]);
        if (c > 0.0 && isfinite(c)) {
            keep[kb] = a;
            nrm[kb] = c;
            kb++;
        } else {
            *singular = 1;
        }
    }
    if (kb == 0)
        return CS_OK;
    /* compact and equilibrate in place (row-major n x kb) */
    for (size_t i = 0; i < n; i++) {
        const double *src = w->Jc + i * ka;
        double *dst = w->Jc + i * kb;
        for (size_t b = 0; b < kb; b++)
            dst[b] = src[keep[b]] / nrm[b];
    }
    gsl_matrix_view Jv = gsl_matrix_view_array(w->Jc, n, kb);
    gsl_matrix_view Cv = gsl_matrix_view_array(w->cwork, kb, kb);
    int s = gsl_multifit_nlinear_covar(&Jv.matrix, FIT_RANK_RTOL, &Cv.matrix);
    if (s == GSL_ENOMEM)
        return CS_ENOMEM;
    if (s != GSL_SUCCESS) { /* not expected: report nothing rather than something wrong */
        *singular = 1;
        return CS_OK;
    }
    const double *C = w->cwork;
    /* undetermined: dropped columns (zero variance) and the kept ones in their null vectors */
    double *und = w->und; /* 1: undetermined, per kept column */
    for (size_t b = 0; b < kb; b++)
        und[b] = !(C[b * kb + b] > 0.0);
    for (size_t d = 0; d < kb; d++) {
        if (C[d * kb + d] > 0.0)
            continue;
        *singular = 1;
        /* g = J_K^T J_d over kept columns; beta = C_KK g */
        double *g = w->gram;
        for (size_t b = 0; b < kb; b++)
            g[b] = 0.0;
        for (size_t i = 0; i < n; i++) {
            const double *row = w->Jc + i * kb;
            for (size_t b = 0; b < kb; b++)
                g[b] += row[b] * row[d];
        }
        for (size_t a = 0; a < kb; a++) {
            if (!(C[a * kb + a] > 0.0))
                continue;
            double beta = 0.0;
            for (size_t b = 0; b < kb; b++)
                if (C[b * kb + b] > 0.0)
                    beta += C[a * kb + b] * g[b];
            if (!(fabs(beta) <= FIT_NULL_TOL))
                und[a] = 1.0;
        }
    }
    for (size_t a = 0; a < kb; a++) {
        if (und[a] != 0.0) {
            *singular = 1;
            continue;
        }
        size_t ja = w->act[keep[a]];
        for (size_t b = 0; b < kb; b++) {
            if (und[b] != 0.0)
                continue;
            size_t jb = w->act[keep[b]];
            cf[ja * k + jb] = factor * C[a * kb + b] / (nrm[a] * nrm[b]);
        }
    }
    return CS_OK;
}

/* Expand a free-parameter covariance (NaN where undefined) to all parameters; errors, corr. */
static void expand_covariance(const cs_fit_workspace *w, const double *cf, cs_fit_result *r)
{
    const size_t np = w->np, k = w->nfree;
    for (size_t a = 0; a < np; a++) {
        long ja = w->freeof[a];
        for (size_t b = 0; b < np; b++) {
            long jb = w->freeof[b];
            double v = 0.0;
            if (ja >= 0 && jb >= 0)
                v = w->tiefac[a] * w->tiefac[b] * cf[(size_t)ja * k + (size_t)jb];
            r->cov[a * np + b] = v;
        }
    }
    for (size_t a = 0; a < np; a++) {
        double v = r->cov[a * np + a];
        r->err[a] = w->freeof[a] < 0 ? 0.0 : (v >= 0.0 ? sqrt(v) : NAN);
    }
    for (size_t a = 0; a < np; a++)
        for (size_t b = 0; b < np; b++) {
            double va = r->cov[a * np + a], vb = r->cov[b * np + b];
            r->corr[a * np + b] = (va > 0.0 && vb > 0.0) ? r->cov[a * np + b] / sqrt(va * vb) : NAN;
        }
}


int cs_fit_impl_covariance(cs_fit_workspace *w, cs_fit_result *r, int converged, double factor, int *singular)
{
    double *cf = w->cfree;
    *singular = 0;
    if (converged) {
        int rc = free_covariance(w, r, factor, cf, singular);
        if (rc != CS_OK)
            return rc;
    } else {
        for (size_t j = 0; j < w->nfree * w->nfree; j++)
            cf[j] = NAN;
    }
    expand_covariance(w, cf, r);
    return CS_OK;
}
