/* Multistart, residual-bootstrap and Monte-Carlo errors of a fit, and the F test for nested models.
 *
 * Multistart. From the starting point p0 (after the automatic guess), each extra start moves
 * every free centre by u W (W = the largest starting width of its component, u uniform in
 * [-1, 1]) and multiplies every free width by 2^u (u drawn afresh), the values being clamped
 * inside their bounds; areas and baselines are kept. The random numbers come from GSL's MT19937
 * seeded with `seed`, so a run is reproducible. The solution with the smallest cost among the
 * converged ones wins (if none converged, the smallest cost).
 *
 * Residual bootstrap (B. Efron and R. J. Tibshirani, An Introduction to the Bootstrap, Chapman &
 * Hall 1993, ch. 9, "bootstrapping residuals"). The standardised residuals e_i = (y_i - m_i) c_i
 * of the fit (c_i = 1/sigma_i, 1 for NOISE, 1/sqrt(max(y_i,1)) for POISSON, 1/sqrt(m_i) for
 * Cash) are centred and inflated by sqrt(n / (n - k)) (k free parameters), which makes their
 * variance that of the noise rather than of the fit residuals (Davison and Hinkley, Bootstrap
 * Methods and their Application, Cambridge 1997, ch. 6, in its simplest form without
 * leverages). A replica is y*_i = m_i + e*_i / c_i with e* drawn with replacement; for counts
 * (POISSON, Cash) y* is clipped at 0 and Neyman weights are recomputed from y*.
 *
 * Monte Carlo. A replica is the fitted model plus noise of the stated size: Gaussian with the
 * given sigma_i (SIGMA) or with sqrt(chi2/dof) (NOISE, the estimated noise level); Poisson
 * deviates of mean m_i (POISSON, Cash).
 *
 * Each replica is refitted from the fitted values (no guess, no multistart) in the same
 * workspace, so no memory is allocated per replica; the error of each parameter is the sample
 * standard deviation (Welford's running update, B. P. Welford, Technometrics 4, 419 (1962)) over
 * the replicas that converged, NaN when fewer than two did. Fixed parameters come out 0. */
#include <collshift/fit.h>

#include "fit_impl.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>

#include <math.h>
#include <string.h>

/* Is outcome a better than b? Converged beats not converged, then the lower cost. */
static int better(const fit_outcome *a, const fit_outcome *b)
{
    int ca = a->status == CS_FIT_CONVERGED, cb = b->status == CS_FIT_CONVERGED;
    if (ca != cb)
        return ca;
    return isfinite(a->cost) && !(a->cost >= b->cost);
}

int cs_fit_impl_multistart(cs_fit_workspace *w, const cs_fit_parameters *par, const double *p0,
                           double *p, fit_outcome *o)
{
    const cs_model *m = w->m;
    const size_t np = w->np, n = w->n;
    double *pt = w->ptry, *pb = w->pbest;
    cs_fit_impl_check_polish(w, p, o); /* its ws->ppre is overwritten by the next solve */
    memcpy(pb, p, np * sizeof *p);
    fit_outcome best = *o;
    double span = w->x[n - 1] - w->x[0];
    for (size_t i = 0; i < n; i++)
        span = fmax(span, fabs(w->x[i] - w->x[0]));
    if (!(span > 0.0))
        span = 1.0;
    gsl_rng_set(w->rng, par->seed);
    for (size_t s = 0; s < par->multistart; s++) {
        memcpy(pt, p0, np * sizeof *pt);
        for (size_t c = 0; c < m->ncomp; c++) {
            const cs_model_component *mc = &m->comp[c];
            size_t npc = mc->type->nparams;
            double wid = 0.0;
            for (size_t k = 1; k < npc; k++)
                if (m->par[mc->first + k].kind == CS_PARAM_FREQUENCY)
                    wid = fmax(wid, fabs(p0[mc->first + k]));
            if (!(wid > 0.0) || !isfinite(wid))
                wid = span / 10.0;
            for (size_t k = 0; k < npc; k++) {
                size_t i = mc->first + k;
                double u = 2.0 * gsl_rng_uniform(w->rng) - 1.0;
                long j = w->freeof[i];
                if (j < 0 || m->par[i].tie >= 0)
                    continue; /* fixed or tied */
                if (k == CS_PROFILE_CENTER)
                    pt[i] += u * wid;
                else if (m->par[i].kind == CS_PARAM_FREQUENCY)
                    pt[i] *= exp2(u);
                else
                    continue;
                pt[i] = cs_fit_impl_clamp(&w->fr[j], pt[i]);
            }
        }
        cs_model_apply_ties(m, pt);
        fit_outcome oc;
        int rc = cs_fit_impl_solve(w, par, pt, &oc);
        if (rc != CS_OK)
            return rc;
        cs_fit_impl_check_polish(w, pt, &oc);
        if (better(&oc, &best)) {
            best = oc;
            memcpy(pb, pt, np * sizeof *pb);
        }
    }
    memcpy(p, pb, np * sizeof *p);
    *o = best;
    return CS_OK;
}

int cs_fit_impl_resample(cs_fit_workspace *w, const cs_fit_parameters *par, const double *pfit, int mc,
                         size_t nrep, double redchi2, double *err)
{
    const size_t n = w->n, np = w->np;
    const cs_fit_weighting wt = w->weighting;
    const int counts = wt == CS_WEIGHT_POISSON || wt == CS_WEIGHT_CASH;
    cs_fit_parameters rp = *par;
    rp.multistart = 0;
    /* independent, reproducible streams for the two kinds of replicas */
    gsl_rng_set(w->rng, par->seed + (mc ? 0x5bd1e995UL : 0x9e3779b9UL));
    if (!mc) {
        double mean = 0.0;
        for (size_t i = 0; i < n; i++)
            mean += w->efit[i];
        mean /= (double)n;
        double infl = sqrt((double)n / (double)(n - w->nfree));
        for (size_t i = 0; i < n; i++)
            w->efit[i] = (w->efit[i] - mean) * infl;
    }
    double noise = sqrt(redchi2);
    for (size_t i = 0; i < np; i++)
        w->acc_mean[i] = w->acc_m2[i] = 0.0;
    size_t cnt = 0;
    for (size_t rep = 0; rep < nrep; rep++) {
        for (size_t i = 0; i < n; i++) {
            double mi = w->mfit[i], v;
            if (!mc) {
                double inv = wt == CS_WEIGHT_SIGMA     ? w->sig[i]
                             : wt == CS_WEIGHT_POISSON ? sqrt(w->y[i] > 1.0 ? w->y[i] : 1.0)
                             : wt == CS_WEIGHT_CASH    ? sqrt(mi)
                                                       : w->noise_scale;   /* efit = (y - m)/noise_scale */
                v = mi + w->efit[gsl_rng_uniform_int(w->rng, n)] * inv;
            } else if (counts) {
                v = (double)gsl_ran_poisson(w->rng, mi > 0.0 ? mi : 0.0);
            } else {
                v = mi + gsl_ran_gaussian_ziggurat(w->rng, wt == CS_WEIGHT_SIGMA ? w->sig[i] : noise);
            }
            if (counts && v < 0.0)
                v = 0.0;
            w->ysim[i] = v;
        }
        w->ycur = w->ysim;
        if (wt == CS_WEIGHT_POISSON)
            cs_fit_impl_weights(w);
        memcpy(w->prep, pfit, np * sizeof *w->prep);
        fit_outcome o;
        int rc = cs_fit_impl_solve(w, &rp, w->prep, &o);
        if (rc != CS_OK) {
            w->ycur = w->y;
            cs_fit_impl_weights(w);
            return rc;
        }
        /* keep a final Gauss-Newton (or extrapolated) step only if it did not raise the cost on
           this simulated data set, as the fit itself does */
        cs_fit_impl_check_polish(w, w->prep, &o);
        if (o.status != CS_FIT_CONVERGED)
            continue;
        cnt++;
        for (size_t i = 0; i < np; i++) {
            double d = w->prep[i] - w->acc_mean[i];
            w->acc_mean[i] += d / (double)cnt;
            w->acc_m2[i] += d * (w->prep[i] - w->acc_mean[i]);
        }
    }
    w->ycur = w->y;
    cs_fit_impl_weights(w);
    for (size_t i = 0; i < np; i++)
        err[i] = cnt >= 2 ? sqrt(w->acc_m2[i] / (double)(cnt - 1)) : NAN;
    return CS_OK;
}

/* Extra-sum-of-squares F test for nested models (e.g. D. M. Bates and D. G. Watts, Nonlinear
 * Regression Analysis and Its Applications, Wiley 1988): F has (k_f - k_s, dof_f) degrees of
 * freedom under the simpler model. */
int cs_fit_ftest(const cs_fit_result *simple, const cs_fit_result *full, double *F, double *p_value)
{
    if (F)
        *F = NAN;
    if (p_value)
        *p_value = NAN;
    if (!simple || !full || !F || !p_value)
        return CS_EINVAL;
    if (simple->n != full->n || full->nfree <= simple->nfree || full->dof == 0 ||
        simple->weighting != full->weighting)
        return CS_EINVAL;
    if (!isfinite(simple->chi2) || !isfinite(full->chi2) || !(full->chi2 > 0.0))
        return CS_EINVAL;
    /* a fit that stopped short of its minimum has a chi2 that means nothing for the test */
    if (simple->status == CS_FIT_NOT_CONVERGED || simple->status == CS_FIT_MODEL_NAN ||
        full->status == CS_FIT_NOT_CONVERGED || full->status == CS_FIT_MODEL_NAN)
        return CS_EINVAL;
    double d1 = (double)(full->nfree - simple->nfree), d2 = (double)full->dof;
    double f = ((simple->chi2 - full->chi2) / d1) / (full->chi2 / d2);
    *F = f;
    *p_value = f > 0.0 ? gsl_cdf_fdist_Q(f, d1, d2) : 1.0;
    return CS_OK;
}
