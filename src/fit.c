/* Fitting a model to a spectrum: workspace, set-up of the free parameters and their scales,
 * goodness of fit, and the driver cs_fit_run (guess, solve, multistart, errors, resampling).
 *
 * The module's parts: fit_solve.c (internal variables, bound transforms, residuals, Cash
 * statistic, the GSL trust-region solver and its convergence tests), fit_covar.c (parameters at
 * bounds, covariance and singular directions), fit_errors.c (multistart, bootstrap, Monte Carlo,
 * F test). Each explains its numerical choices at its top.
 *
 * Free parameters. A parameter is free when it is neither fixed nor tied and its bounds do not
 * coincide (lo == hi pins it to that value). A tie to a fixed or pinned master makes the tied
 * parameter fixed in effect.
 *
 * Typical sizes (the scale s of each internal variable, see fit_solve.c), from the starting
 * values and the data: a centre, the largest starting width of its component (so its internal
 * variable counts widths from the start); a width, area or other component parameter, its
 * starting magnitude (or, when that is 0, the component width, max|y| x that width, or 1); a
 * baseline coefficient c_k of (x - x_ref)^k, max(|c_k|, max|y| / h^k) with h the largest
 * |x - x_ref|; an exponential baseline, max(|amp|, max|y|) and max(|rate|, 1/h).
 *
 * Goodness of fit. chi2 = sum r_i^2 (Cash: the deviance), dof = n - nfree, rms = unweighted
 * residual rms. AIC = -2 ln L + 2k (H. Akaike, IEEE Trans. Autom. Control 19, 716 (1974)) and
 * BIC = -2 ln L + k ln n (G. Schwarz, Ann. Stat. 6, 461 (1978)), k = nfree, with -2 ln L up to a
 * constant shared by models of the same data: chi2 for SIGMA and POISSON (Gaussian likelihood
 * with the stated sigma), the deviance for Cash, and n ln(RSS/n) for NOISE (Gaussian likelihood
 * with the noise level estimated by maximum likelihood). A fit that did not converge reports its
 * chi2 at the last point but NaN errors. */
#include <collshift/fit.h>

#include "fit_impl.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- names, defaults */

cs_fit_parameters cs_fit_default_parameters(void)
{
    cs_fit_parameters p;
    memset(&p, 0, sizeof p);
    p.weighting = CS_WEIGHT_AUTO;
    p.geodesic = 0;
    p.max_iter = 200;
    p.xtol = 1e-10;
    p.gtol = 1e-10;
    p.ftol = 0.0;
    p.guess = 1;
    p.multistart = 0;
    p.bootstrap = 0;
    p.montecarlo = 0;
    p.seed = 1;
    p.bin_width = 0.0;
    return p;
}

const char *cs_fit_stop_name(cs_fit_stop s)
{
    switch (s) {
    case CS_FIT_STOP_NONE: return "none";
    case CS_FIT_STOP_SMALL_STEP: return "small step";
    case CS_FIT_STOP_SMALL_GRADIENT: return "small gradient";
    case CS_FIT_STOP_SMALL_CHANGE: return "small change";
    case CS_FIT_STOP_MAX_ITER: return "iteration limit";
    case CS_FIT_STOP_NO_PROGRESS: return "no progress";
    case CS_FIT_STOP_MODEL_NAN: return "model not finite";
    }
    return "unknown";
}

const char *cs_fit_status_name(cs_fit_status s)
{
    switch (s) {
    case CS_FIT_CONVERGED: return "converged";
    case CS_FIT_NOT_CONVERGED: return "not converged";
    case CS_FIT_SINGULAR: return "singular covariance";
    case CS_FIT_MODEL_NAN: return "model not finite";
    case CS_FIT_BAD_INPUT: return "bad input";
    }
    return "unknown";
}

/* ---------------------------------------------------------------- workspace */

static void ws_release(cs_fit_workspace *w)
{
    double **d[] = {&w->x, &w->y, &w->sig, &w->ysim, &w->sw, &w->mval, &w->dfac, &w->res,
                    &w->work, &w->mfit, &w->efit, &w->Jfull, &w->Jc, &w->tiefac, &w->tie_fac,
                    &w->scale, &w->pbase, &w->p, &w->theta, &w->thcache, &w->dpdt, &w->cwork,
                    &w->gram, &w->cfree, &w->jtj, &w->colnorm, &w->nrm, &w->und, &w->pwork, &w->pstart,
                    &w->psol, &w->ptry, &w->pbest, &w->prep, &w->acc_mean, &w->acc_m2, &w->ppre};
    for (size_t i = 0; i < sizeof d / sizeof d[0]; i++) {
        free(*d[i]);
        *d[i] = NULL;
    }
    double **q[] = {&w->xq, &w->mq, &w->wq, &w->Jq};
    for (size_t i = 0; i < sizeof q / sizeof q[0]; i++) {
        free(*q[i]);
        *q[i] = NULL;
    }
    w->qmax = 0;
    w->bin_hw = 0.0;
    free(w->fr);
    free(w->freeof);
    free(w->tie_idx);
    free(w->act);
    free(w->keep);
    w->fr = NULL;
    w->freeof = NULL;
    w->tie_idx = NULL;
    w->act = NULL;
    w->keep = NULL;
    w->nmax = w->pmax = 0;
    w->cache_ok = 0;
}

int cs_fit_impl_reserve(cs_fit_workspace *w, size_t n, size_t np)
{
    if (n < 1)
        n = 1;
    if (np < 1)
        np = 1;
    if (w->x && n <= w->nmax && np <= w->pmax)
        return CS_OK;
    size_t nn = n > w->nmax ? n : w->nmax, pp = np > w->pmax ? np : w->pmax;
    if (nn > ((size_t)-1) / sizeof(double) / pp || pp > ((size_t)-1) / sizeof(double) / pp)
        return CS_ENOMEM;
    ws_release(w);
    double **vn[] = {&w->x, &w->y, &w->sig, &w->ysim, &w->sw, &w->mval, &w->dfac, &w->res,
                     &w->work, &w->mfit, &w->efit};
    double **vp[] = {&w->tiefac, &w->tie_fac, &w->scale, &w->pbase, &w->p, &w->theta,
                     &w->thcache, &w->dpdt, &w->colnorm, &w->nrm, &w->und, &w->pwork, &w->pstart,
                     &w->psol, &w->ptry, &w->pbest, &w->prep, &w->acc_mean, &w->acc_m2, &w->ppre};
    int bad = 0;
    for (size_t i = 0; i < sizeof vn / sizeof vn[0]; i++)
        bad |= !(*vn[i] = malloc(nn * sizeof(double)));
    for (size_t i = 0; i < sizeof vp / sizeof vp[0]; i++)
        bad |= !(*vp[i] = malloc(pp * sizeof(double)));
    bad |= !(w->Jfull = malloc(nn * pp * sizeof(double)));
    bad |= !(w->Jc = malloc((nn + 16) * pp * sizeof(double))); /* FIT_JC_LD(nn) <= nn + 15 */
    bad |= !(w->cwork = malloc(pp * pp * sizeof(double)));
    bad |= !(w->gram = malloc(pp * pp * sizeof(double)));
    bad |= !(w->cfree = malloc(pp * pp * sizeof(double)));
    bad |= !(w->jtj = malloc(pp * pp * sizeof(double)));
    bad |= !(w->keep = malloc(pp * sizeof *w->keep));
    bad |= !(w->fr = malloc(pp * sizeof *w->fr));
    bad |= !(w->freeof = malloc(pp * sizeof *w->freeof));
    bad |= !(w->tie_idx = malloc(pp * sizeof *w->tie_idx));
    bad |= !(w->act = malloc(pp * sizeof *w->act));
    if (bad) {
        ws_release(w);
        return CS_ENOMEM;
    }
    w->nmax = nn;
    w->pmax = pp;
    return CS_OK;
}

cs_fit_workspace *cs_fit_alloc(size_t nmax, size_t pmax)
{
    gsl_set_error_handler_off();
    cs_fit_workspace *w = calloc(1, sizeof *w);
    if (!w)
        return NULL;
    w->rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!w->rng || cs_fit_impl_reserve(w, nmax, pmax) != CS_OK) {
        cs_fit_free(w);
        return NULL;
    }
    return w;
}

void cs_fit_free(cs_fit_workspace *w)
{
    if (!w)
        return;
    ws_release(w);
    if (w->gw)
        gsl_multifit_nlinear_free(w->gw);
    if (w->rng)
        gsl_rng_free(w->rng);
    free(w);
}

/* ---------------------------------------------------------------- set-up */

/* Typical sizes of all parameters (see the essay). */
static void setup_scales(cs_fit_workspace *w, const cs_model *m, const double *p)
{
    const size_t n = w->n;
    double xmin = w->x[0], xmax = w->x[0], ymax = 0.0;
    for (size_t i = 0; i < n; i++) {
        if (w->x[i] < xmin)
            xmin = w->x[i];
        if (w->x[i] > xmax)
            xmax = w->x[i];
        if (fabs(w->y[i]) > ymax)
            ymax = fabs(w->y[i]);
    }
    double span = xmax - xmin;
    if (!(span > 0.0))
        span = fabs(xmax) > 0.0 ? 1e-6 * fabs(xmax) : 1.0;
    if (!(ymax > 0.0))
        ymax = 1.0;
    double h = fmax(fabs(xmin - m->x_ref), fabs(xmax - m->x_ref));
    if (!(h > 0.0) || !isfinite(h))
        h = span;
    for (size_t i = 0; i < m->nparams; i++)
        w->scale[i] = fmax(fabs(p[i]), 1.0);
    for (size_t c = 0; c < m->ncomp; c++) {
        const cs_model_component *mc = &m->comp[c];
        size_t npc = mc->type->nparams;
        double wid = 0.0;
        for (size_t k = 1; k < npc; k++)
            if (m->par[mc->first + k].kind == CS_PARAM_FREQUENCY)
                wid = fmax(wid, fabs(p[mc->first + k]));
        if (!(wid > 0.0) || !isfinite(wid))
            wid = span / 10.0;
        for (size_t k = 0; k < npc; k++) {
            size_t i = mc->first + k;
            double a = fabs(p[i]);
            if (k == CS_PROFILE_CENTER)
                w->scale[i] = wid;
            else if (m->par[i].kind == CS_PARAM_FREQUENCY)
                w->scale[i] = a > 0.0 ? a : wid;
            else if (m->par[i].kind == CS_PARAM_AREA)
                w->scale[i] = a > 0.0 ? a : ymax * wid;
            else
                w->scale[i] = fmax(a, 1.0);
        }
    }
    for (size_t i = m->base_first; i < m->nparams; i++) {
        const char *name = strchr(m->par[i].name, '.');
        name = name ? name + 1 : m->par[i].name;
        double a = fabs(p[i]);
        if (name[0] == 'c' && name[1] >= '0' && name[1] <= '9')
            w->scale[i] = fmax(a, ymax / pow(h, (double)(name[1] - '0')));
        else if (strcmp(name, "amp") == 0)
            w->scale[i] = fmax(a, ymax);
        else if (strcmp(name, "rate") == 0)
            w->scale[i] = fmax(a, 1.0 / h);
        else
            w->scale[i] = fmax(a, 1.0);
    }
    for (size_t i = 0; i < m->nparams; i++)
        if (!(w->scale[i] > 0.0) || !isfinite(w->scale[i]))
            w->scale[i] = 1.0;
}

/* Free parameters, transforms and the tie lists; pins lo == hi parameters in p. */
static int setup_params(cs_fit_workspace *w, const cs_model *m, double *p, cs_error *err)
{
    const size_t np = m->nparams;
    size_t k = 0;
    for (size_t i = 0; i < np; i++) {
        const cs_param *q = &m->par[i];
        w->freeof[i] = -1;
        w->tiefac[i] = 0.0;
        if (q->tie >= 0) {
            if ((size_t)q->tie >= np || m->par[q->tie].tie >= 0 || (size_t)q->tie == i)
                return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                    "parameter '%s': tie to an invalid or tied master", q->name);
            continue;
        }
        double lo = isnan(q->lo) ? -INFINITY : q->lo, hi = isnan(q->hi) ? INFINITY : q->hi;
        if (lo > hi)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "parameter '%s': lower bound %g > upper bound %g",
                                q->name, lo, hi);
        if (q->fixed)
            continue;
        if (lo == hi) {
            p[i] = lo;
            continue;
        }
        fit_free *f = &w->fr[k];
        f->idx = i;
        f->lo = lo;
        f->hi = hi;
        f->kind = isfinite(lo) ? (isfinite(hi) ? FIT_TR_BOTH : FIT_TR_LOWER)
                               : (isfinite(hi) ? FIT_TR_UPPER : FIT_TR_NONE);
        f->c = p[i];
        f->tie0 = f->tie1 = 0;
        w->freeof[i] = (long)k;
        w->tiefac[i] = 1.0;
        k++;
    }
    w->nfree = k;
    /* ties grouped by master: count, prefix sums, fill */
    for (size_t j = 0; j < k; j++)
        w->act[j] = 0;
    for (size_t i = 0; i < np; i++) {
        const cs_param *q = &m->par[i];
        if (q->tie >= 0 && w->freeof[q->tie] >= 0)
            w->act[w->freeof[q->tie]]++;
    }
    size_t pos = 0;
    for (size_t j = 0; j < k; j++) {
        w->fr[j].tie0 = w->fr[j].tie1 = pos;
        pos += w->act[j];
    }
    for (size_t i = 0; i < np; i++) {
        const cs_param *q = &m->par[i];
        if (q->tie < 0)
            continue;
        long jm = w->freeof[q->tie];
        if (jm < 0)
            continue; /* tied to a fixed or pinned master: fixed in effect */
        size_t t = w->fr[jm].tie1++;
        w->tie_idx[t] = i;
        w->tie_fac[t] = q->tie_factor;
        w->freeof[i] = jm;
        w->tiefac[i] = q->tie_factor;
    }
    cs_model_apply_ties(m, p);
    setup_scales(w, m, p);
    for (size_t j = 0; j < k; j++)
        w->fr[j].s = w->scale[w->fr[j].idx];
    return CS_OK;
}

/* ---------------------------------------------------------------- results */

void cs_fit_result_free(cs_fit_result *r)
{
    if (!r)
        return;
    free(r->value);
    free(r->err);
    free(r->at_bound);
    free(r->cov);
    free(r->corr);
    free(r->derived);
    free(r->boot_err);
    free(r->mc_err);
    free(r);
}

static cs_fit_result *result_alloc(size_t np, size_t ncomp, int boot, int mc)
{
    cs_fit_result *r = calloc(1, sizeof *r);
    if (!r)
        return NULL;
    r->value = calloc(np, sizeof *r->value);
    r->err = calloc(np, sizeof *r->err);
    r->at_bound = calloc(np, sizeof *r->at_bound);
    r->cov = calloc(np * np, sizeof *r->cov);
    r->corr = calloc(np * np, sizeof *r->corr);
    r->derived = calloc(ncomp ? ncomp : 1, sizeof *r->derived);
    if (boot)
        r->boot_err = calloc(np, sizeof *r->boot_err);
    if (mc)
        r->mc_err = calloc(np, sizeof *r->mc_err);
    if (!r->value || !r->err || !r->at_bound || !r->cov || !r->corr || !r->derived ||
        (boot && !r->boot_err) || (mc && !r->mc_err)) {
        cs_fit_result_free(r);
        return NULL;
    }
    r->nparams = np;
    r->ncomp = ncomp;
    return r;
}

/* chi2, dof, AIC, BIC, rms from the evaluation at the fitted parameters. */
static void fit_stats(const cs_fit_workspace *w, cs_fit_result *r, int ok)
{
    const size_t n = w->n, k = w->nfree;
    double chi2 = 0.0, rss = 0.0;
    for (size_t i = 0; i < n; i++) {
        double d = w->mval[i] - w->y[i];
        chi2 += w->res[i] * w->res[i];
        rss += d * d;
    }
    if (!ok)
        chi2 = rss = NAN;
    if (w->weighting == CS_WEIGHT_NOISE)
        chi2 = rss;   /* the residuals were scaled by 1/noise_scale only for the solver */
    r->chi2 = chi2;
    r->dof = n - k;
    r->redchi2 = r->dof > 0 ? chi2 / (double)r->dof : NAN;
    double m2ll = w->weighting == CS_WEIGHT_NOISE ? (rss > 0.0 ? (double)n * log(rss / (double)n) : NAN) : chi2;
    r->aic = m2ll + 2.0 * (double)k;
    r->bic = m2ll + (double)k * log((double)n);
    r->rms = sqrt(rss / (double)n);
}

/* ---------------------------------------------------------------- the driver */

/* Copy the used points, check them, set the weighting. */
static int load_data(cs_fit_workspace *w, const double *x, const double *y, const double *sigma,
                     const unsigned char *mask, size_t n, cs_error *err)
{
    size_t j = 0;
    for (size_t i = 0; i < n; i++) {
        if (mask && !mask[i])
            continue;
        if (!isfinite(x[i]) || !isfinite(y[i]))
            return cs_error_set(err, CS_EDATA, NULL, -1, -1, "point %zu: x or y is not finite", i);
        if (w->weighting == CS_WEIGHT_SIGMA && !(sigma[i] > 0.0 && isfinite(sigma[i])))
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "point %zu: sigma = %g must be finite and > 0", i,
                                sigma[i]);
        if ((w->weighting == CS_WEIGHT_CASH || w->weighting == CS_WEIGHT_POISSON) && y[i] < 0.0)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "point %zu: negative count %g for %s weighting",
                                i, y[i], w->weighting == CS_WEIGHT_CASH ? "Cash" : "Poisson");
        w->x[j] = x[i];
        w->y[j] = y[i];
        w->sig[j] = sigma ? sigma[i] : 1.0;
        j++;
    }
    w->n = j;
    w->ycur = w->y;
    if (j == 0)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "no data points to fit");
    w->noise_scale = w->weighting == CS_WEIGHT_NOISE ? cs_fit_impl_noise_scale(w->y, j, w->ysim) : 1.0;
    cs_fit_impl_weights(w);
    return CS_OK;
}

/* A fit that runs into a bound can crawl along it: the bound transform flattens the cost there,
 * and the solver may end at its iteration limit with the parameter at the bound and the others
 * still moving. When a fit did not converge and some free parameters sit at a bound (the
 * criterion of fit_covar.c), they are pinned there (held fixed at the bound) and the others are
 * solved again from the point reached. If that converges, the fit has converged with those
 * parameters at their bounds (they are flagged at_bound and get NaN errors afterwards, the
 * others' errors being conditional on them); if not, the first outcome stands. The free set of
 * the workspace is restored either way. Returns CS_OK, CS_ENOMEM, or an error of setup_params. */
static int resolve_at_bounds(cs_fit_workspace *ws, cs_model *m, const cs_fit_parameters *par, double *p,
                             fit_outcome *o, cs_error *err)
{
    const size_t np = ws->np;
    cs_fit_impl_check_polish(ws, p, o);
    cs_fit_result tmp;
    memset(&tmp, 0, sizeof tmp);
    tmp.value = p;
    tmp.at_bound = calloc(np, sizeof *tmp.at_bound);
    int *was_fixed = malloc(np * sizeof *was_fixed);
    double *was_value = malloc(np * sizeof *was_value), *pkeep = malloc(np * sizeof *pkeep);
    int rc = CS_OK;
    if (!tmp.at_bound || !was_fixed || !was_value || !pkeep) {
        rc = CS_ENOMEM;
        goto done;
    }
    cs_fit_impl_flag_bounds(ws, &tmp);
    size_t nat = 0;
    for (size_t i = 0; i < np; i++)
        nat += tmp.at_bound[i] != 0;
    if (nat == 0 || nat >= ws->nfree)
        goto done;
    memcpy(pkeep, p, np * sizeof *p);
    for (size_t i = 0; i < np; i++) {
        was_fixed[i] = m->par[i].fixed;
        was_value[i] = m->par[i].value;
        if (tmp.at_bound[i]) {
            double lo = isnan(m->par[i].lo) ? -INFINITY : m->par[i].lo;
            double hi = isnan(m->par[i].hi) ? INFINITY : m->par[i].hi;
            p[i] = tmp.at_bound[i] == 1 ? lo : hi;
            m->par[i].value = p[i];
            m->par[i].fixed = 1;
        }
    }
    fit_outcome o2;
    rc = setup_params(ws, m, p, err);
    if (rc == CS_OK)
        rc = cs_fit_impl_solve(ws, par, p, &o2);
    if (rc == CS_OK)
        cs_fit_impl_check_polish(ws, p, &o2);
    for (size_t i = 0; i < np; i++) {
        m->par[i].fixed = was_fixed[i];
        m->par[i].value = was_value[i];
    }
    int better = rc == CS_OK && o2.status == CS_FIT_CONVERGED;
    if (better) {
        o->status = o2.status;
        o->stop = o2.stop;
        o->cost = o2.cost;
        o->niter += o2.niter;
        o->nfev += o2.nfev;
        o->njev += o2.njev;
    } else {
        memcpy(p, pkeep, np * sizeof *p);
    }
    /* the free set of the fit as the user gave it (the pinned parameters free again, at their
       bounds) */
    int rs = setup_params(ws, m, p, err);
    if (rc == CS_OK)
        rc = rs;
done:
    free(tmp.at_bound);
    free(was_fixed);
    free(was_value);
    free(pkeep);
    return rc;
}

int cs_fit_run(cs_fit_workspace *ws, cs_model *m, const double *x, const double *y,
               const double *sigma, const unsigned char *mask, size_t n,
               const cs_fit_parameters *par, cs_fit_result **out, cs_error *err)
{
    gsl_set_error_handler_off();
    cs_error_clear(err);
    if (!out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "fit: no place for the result");
    *out = NULL;
    if (!m || !x || !y || !m->par || m->nparams == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "fit: missing model or data");
    cs_fit_parameters defaults = cs_fit_default_parameters();
    if (!par)
        par = &defaults;
    if (!(par->xtol >= 0.0) || !(par->gtol >= 0.0) || !(par->ftol >= 0.0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "fit: tolerances must be >= 0");
    cs_fit_weighting wt = par->weighting;
    if (wt == CS_WEIGHT_AUTO)
        wt = sigma ? CS_WEIGHT_SIGMA : CS_WEIGHT_NOISE;
    if (wt < CS_WEIGHT_SIGMA || wt > CS_WEIGHT_CASH)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "fit: unknown weighting %d", (int)wt);
    if (wt == CS_WEIGHT_SIGMA && !sigma)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "fit: sigma weighting needs sigma values");

    cs_fit_workspace *own = NULL;
    size_t nused = 0;
    for (size_t i = 0; i < n; i++)
        nused += !mask || mask[i];
    if (!ws && !(ws = own = cs_fit_alloc(nused, m->nparams)))
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "fit: out of memory");
    cs_fit_result *r = NULL;
    int rc = cs_fit_impl_reserve(ws, nused, m->nparams);
    if (rc != CS_OK) {
        cs_error_set(err, rc, NULL, -1, -1, "fit: out of memory");
        goto done;
    }
    ws->m = m;
    ws->np = m->nparams;
    ws->weighting = wt;
    if ((rc = load_data(ws, x, y, sigma, mask, n, err)) != CS_OK)
        goto done;
    if (!(par->bin_width >= 0.0 && isfinite(par->bin_width))) {
        rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1, "fit: bin width %g must be finite and >= 0",
                          par->bin_width);
        goto done;
    }
    if ((rc = cs_fit_impl_bins(ws, par->bin_width)) != CS_OK) {
        cs_error_set(err, rc, NULL, -1, -1, "fit: out of memory");
        goto done;
    }
    if (par->guess &&
        (rc = cs_model_guess(m, ws->x, ws->y, sigma ? ws->sig : NULL, ws->n, err)) != CS_OK)
        goto done;
    double *p0 = ws->pstart, *p = ws->psol;
    cs_model_get_values(m, p0);
    if ((rc = setup_params(ws, m, p0, err)) != CS_OK)
        goto done;
    if (ws->n <= ws->nfree) {
        rc = cs_error_set(err, CS_EDATA, NULL, -1, -1, "fit: %zu points for %zu free parameters", ws->n,
                          ws->nfree);
        goto done;
    }
    if (!(r = result_alloc(ws->np, m->ncomp, par->bootstrap > 0, par->montecarlo > 0))) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "fit: out of memory");
        goto done;
    }

    fit_outcome o;
    memcpy(p, p0, ws->np * sizeof *p);
    if ((rc = cs_fit_impl_solve(ws, par, p, &o)) != CS_OK)
        goto nomem;
    if (par->multistart > 0 && (rc = cs_fit_impl_multistart(ws, par, p0, p, &o)) != CS_OK)
        goto nomem;
    if (o.status == CS_FIT_NOT_CONVERGED && (rc = resolve_at_bounds(ws, m, par, p, &o, err)) != CS_OK) {
        if (rc == CS_ENOMEM)
            goto nomem;
        goto done;
    }

    int ok = cs_fit_impl_eval(ws, p);
    if (o.polished) { /* keep the final Gauss-Newton step only if the cost did not rise */
        double c = 0.0;
        for (size_t i = 0; ok && i < ws->n; i++)
            c += ws->res[i] * ws->res[i];
        if (!ok || !(c <= o.cost * (1.0 + 1e-9))) {
            memcpy(p, ws->ppre, ws->np * sizeof *p);
            ok = cs_fit_impl_eval(ws, p);
        }
    }
    memcpy(r->value, p, ws->np * sizeof *p);
    r->status = o.status;
    r->stop = o.stop;
    if (!ok && r->status != CS_FIT_MODEL_NAN) {
        r->status = CS_FIT_MODEL_NAN;
        r->stop = CS_FIT_STOP_MODEL_NAN;
    }
    r->weighting = wt;
    r->errors_scaled = wt == CS_WEIGHT_NOISE;
    r->n = ws->n;
    r->nfree = ws->nfree;
    r->niter = o.niter;
    r->nfev = o.nfev;
    r->njev = o.njev;
    r->x_ref = m->x_ref;
    fit_stats(ws, r, ok);
    if (ok && !(isfinite(r->chi2) && isfinite(r->rms))) {
        /* the model is finite but its residuals' sum of squares is beyond the double range
           (data spanning hundreds of decades): nothing after this can be trusted */
        ok = 0;
        r->chi2 = r->redchi2 = r->aic = r->bic = r->rms = NAN;
        r->status = CS_FIT_MODEL_NAN;
        r->stop = CS_FIT_STOP_MODEL_NAN;
    }
    cs_fit_impl_flag_bounds(ws, r);

    int singular = 0;
    /* NOISE: the weighted Jacobian is J/noise_scale, so (J_w^T J_w)^-1 = noise_scale^2 (J^T J)^-1;
       chi2/dof (plain sum of squares) / noise_scale^2 makes the covariance chi2/dof (J^T J)^-1 */
    double factor = !r->errors_scaled              ? 1.0
                    : ws->weighting == CS_WEIGHT_NOISE ? r->redchi2 / (ws->noise_scale * ws->noise_scale)
                                                       : r->redchi2;
    if ((rc = cs_fit_impl_covariance(ws, r, r->status == CS_FIT_CONVERGED, factor, &singular)) != CS_OK)
        goto nomem;
    if (singular)
        r->status = CS_FIT_SINGULAR;
    for (size_t c = 0; c < m->ncomp; c++) {
        const cs_model_component *mc = &m->comp[c];
        cs_profile_derive(mc->type, r->value + mc->first, r->cov + mc->first * ws->np + mc->first, ws->np,
                          &r->derived[c]);
    }
    cs_model_set_values(m, p);

    /* resampled errors (they clobber the evaluation state, so they come last) */
    int usable = r->status == CS_FIT_CONVERGED || r->status == CS_FIT_SINGULAR;
    if (usable && (par->bootstrap > 0 || par->montecarlo > 0)) {
        memcpy(ws->mfit, ws->mval, ws->n * sizeof *ws->mfit);
        for (size_t i = 0; i < ws->n; i++) {
            double cw = wt == CS_WEIGHT_CASH ? 1.0 / sqrt(ws->mval[i]) : ws->sw[i];
            ws->efit[i] = (ws->y[i] - ws->mval[i]) * cw;
        }
    }
    double *pfit = r->value;
    if (par->bootstrap > 0) {
        if (!usable)
            for (size_t i = 0; i < ws->np; i++)
                r->boot_err[i] = NAN;
        else if ((rc = cs_fit_impl_resample(ws, par, pfit, 0, par->bootstrap, r->redchi2, r->boot_err)) != CS_OK)
            goto nomem;
    }
    if (par->montecarlo > 0) {
        if (!usable)
            for (size_t i = 0; i < ws->np; i++)
                r->mc_err[i] = NAN;
        else if ((rc = cs_fit_impl_resample(ws, par, pfit, 1, par->montecarlo, r->redchi2, r->mc_err)) != CS_OK)
            goto nomem;
    }

    *out = r;
    r = NULL;
    switch ((*out)->status) {
    case CS_FIT_CONVERGED:
    case CS_FIT_SINGULAR:
        rc = CS_OK;
        break;
    case CS_FIT_MODEL_NAN:
        rc = cs_error_set(err, CS_ENOCONV, NULL, -1, -1, "fit: the model is not finite (%s)",
                          cs_fit_stop_name((*out)->stop));
        break;
    default:
        rc = cs_error_set(err, CS_ENOCONV, NULL, -1, -1, "fit: did not converge (%s after %zu iterations)",
                          cs_fit_stop_name((*out)->stop), (*out)->niter);
        break;
    }
    goto done;
nomem:
    rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "fit: out of memory");
done:
    cs_fit_result_free(r);
    cs_fit_free(own);
    return rc;
}
