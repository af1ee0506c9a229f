/* Private interface shared by the fit sources (fit.c, fit_solve.c, fit_covar.c, fit_errors.c). */
#ifndef CS_FIT_IMPL_H
#define CS_FIT_IMPL_H

#include <collshift/fit.h>

#include <gsl/gsl_multifit_nlinear.h>
#include <gsl/gsl_rng.h>
#include <stddef.h>

/* Functions shared between the fit sources but not part of the library's interface. */
#if defined(__GNUC__)
#define CS_FIT_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_FIT_INTERNAL
#endif

/* How a free parameter p maps to its internal variable t (see the essay at the top of fit.c). */
enum {
    FIT_TR_NONE = 0,  /* p = c + s t */
    FIT_TR_LOWER,     /* p = lo + s (sqrt(1 + t^2) - 1) */
    FIT_TR_UPPER,     /* p = hi - s (sqrt(1 + t^2) - 1) */
    FIT_TR_BOTH       /* p = lo + (hi - lo) (1 + sin t) / 2 */
};

typedef struct fit_free {
    size_t idx;        /* index of the parameter in the model's table */
    int kind;          /* FIT_TR_* */
    double lo, hi;     /* bounds (only those the kind uses are finite) */
    double c;          /* FIT_TR_NONE: the value at t = 0 (the start of the current solve) */
    double s;          /* typical size of the parameter (or of its distance from the bound) */
    size_t tie0, tie1; /* parameters tied to this one: tie_idx[tie0 .. tie1 - 1] */
} fit_free;

/* Outcome of one solve (no errors computed). */
typedef struct fit_outcome {
    cs_fit_status status;  /* CONVERGED, NOT_CONVERGED or MODEL_NAN */
    cs_fit_stop stop;
    size_t niter, nfev, njev;
    double cost;           /* sum of squared residuals (Cash: deviance) at the last accepted point;
                              NaN if unknown */
    int polished;          /* the final Gauss-Newton step was applied after that point (its
                              parameters are in ws->ppre) */
} fit_outcome;

struct cs_fit_workspace {
    size_t nmax, pmax;      /* sizes of the arrays below */

    /* the data of the current fit, masked points removed: n <= nmax */
    size_t n;
    double *x, *y, *sig;    /* abscissae, measured data, sigma (when given) */
    const double *ycur;     /* the data being fitted now: y, or ysim during resampling */
    double *ysim;           /* replica data for bootstrap / Monte Carlo */
    double *sw;             /* residual weights 1/sigma_i (unused with Cash) */
    double *mval;           /* model at the last evaluation */
    double *dfac;           /* d r_i / d m_i at the last evaluation */
    double noise_scale;     /* NOISE weighting: the residuals are (m - y) / noise_scale, a robust
                               scale of the data (cs_fit_impl_noise_scale), so that the solver's
                               tolerances see a cost of order n whatever the data's units */
    double *res;            /* residuals r_i at the last evaluation */
    double *work;           /* model scratch (transmission mode) */
    double *mfit;           /* model at the fitted parameters (resampling) */
    double *efit;           /* standardised residuals at the fit (bootstrap) */
    double *Jfull;          /* n x nparams Jacobian of the model, row-major, leading dim np */
    double *Jc;             /* n x k scratch: Jacobian for the covariance; during a solve the
                               Jacobian by columns, FIT_JC_LD(n) apart ((nmax + 16) x pmax) */

    /* the model and its free parameters */
    const cs_model *m;
    cs_fit_weighting weighting;  /* resolved */
    size_t np, nfree;
    fit_free *fr;           /* nfree entries (pmax allocated) */
    long *freeof;           /* np: free index of the parameter itself or its master, -1 if fixed */
    double *tiefac;         /* np: d p_i / d p_master (1 for a free parameter, 0 fixed) */
    size_t *tie_idx;        /* tied parameters grouped by master (see fit_free.tie0/tie1) */
    double *tie_fac;
    double *scale;          /* np: typical size of every parameter */
    double *pbase;          /* np: the vector free values are written into (fixed values kept) */
    double *p;              /* np: parameters of the last evaluation */
    double *theta;          /* pmax: internal variables (start of a solve) */
    double *thcache;        /* pmax: internal variables of the last evaluation */
    double *dpdt;           /* pmax: transform derivatives */
    double *jtj;            /* pmax x pmax: J^T J of the solver's Jacobian (k x k, lower triangle,
                               row-major), formed by the Jacobian callback while it writes J */
    const double *jtj_of;   /* the data of the GSL matrix that jtj belongs to, NULL if none */
    int cache_ok;           /* thcache/mval/Jfull valid and finite */
    int p_evaluated;        /* mval/res/dfac/Jfull are those at p and the data y (set by a solve
                               that ended on its last evaluated point; see cs_fit_impl_eval) */
    int last_nan;           /* the last evaluation produced NaN/Inf or an invalid model */
    size_t nfev, njev;

    /* binned data (cs_fit_parameters.bin_width > 0): the model is evaluated at two
       Gauss-Legendre nodes per point and averaged (eval_core); qmax nodes allocated */
    double bin_hw;          /* half the distance between a point's two nodes; 0: no bins */
    size_t qmax;
    double *xq, *mq, *wq;   /* 2n nodes, the model there, model scratch */
    double *Jq;             /* 2n x nparams Jacobian at the nodes */

    /* covariance scratch (pmax x pmax) and per-parameter scratch */
    double *cwork, *gram, *cfree;      /* pmax x pmax */
    double *colnorm, *nrm, *und;       /* pmax: covariance (during a solve: the Gauss-Newton
                                          gradient and step, and the step before last) */
    double *pwork;                     /* pmax: solver */
    double *pstart, *psol;             /* pmax: driver (start, solution) */
    double *ptry, *pbest;              /* pmax: multistart */
    double *prep, *acc_mean, *acc_m2;  /* pmax: resampling */
    double *ppre;                      /* pmax: the point before a final Gauss-Newton step */
    size_t *act, *keep;                /* pmax */

    /* GSL solver, reallocated only when (n, nfree, method) change */
    gsl_multifit_nlinear_workspace *gw;
    size_t gw_n, gw_p;
    int gw_accel;
    gsl_multifit_nlinear_fdf fdf;
    gsl_rng *rng;
};

/* Column stride of the Jacobian by columns in Jc: n rounded up to whole cache lines, plus one. */
#define FIT_JC_LD(n) ((((n) + 7) & ~(size_t)7) + 8)

/* fit.c */
/* Resize the arrays for n points and np parameters (kept when big enough). CS_OK or CS_ENOMEM. */
CS_FIT_INTERNAL int cs_fit_impl_reserve(cs_fit_workspace *w, size_t n, size_t np);

/* fit_solve.c */
/* Run the trust-region solver from the full parameter vector p (ties holding); on return p holds
 * the final parameters (the start when the model was NaN there). Returns CS_OK or CS_ENOMEM. */
CS_FIT_INTERNAL int cs_fit_impl_solve(cs_fit_workspace *w, const cs_fit_parameters *par, double *p,
                                      fit_outcome *o);
/* After a solve that ended with a Gauss-Newton step (o->polished), check at p that the cost did
 * not rise, else put back the point before it (ws->ppre, valid until the next solve); clears
 * o->polished. Clobbers the evaluation state. */
CS_FIT_INTERNAL void cs_fit_impl_check_polish(cs_fit_workspace *w, double *p, fit_outcome *o);
/* Evaluate the model, residuals and Jacobian at the full vector p. Returns 1 when finite. */
CS_FIT_INTERNAL int cs_fit_impl_eval(cs_fit_workspace *w, const double *p);
/* Residual weights for the current data (recomputed per replica for Neyman weights). */
CS_FIT_INTERNAL void cs_fit_impl_weights(cs_fit_workspace *w);
/* Nodes of binned data for the points w->x[0..n) with bin width `width` (0: point values); the
 * node arrays are reserved here. Returns CS_OK or CS_ENOMEM. */
CS_FIT_INTERNAL int cs_fit_impl_bins(cs_fit_workspace *w, double width);

/* Robust scale of y[0..n) for NOISE weighting (work: n scratch values). */
CS_FIT_INTERNAL double cs_fit_impl_noise_scale(const double *y, size_t n, double *work);
/* Clamp p into [lo, hi] of free parameter f, keeping a small margin inside a bound. */
CS_FIT_INTERNAL double cs_fit_impl_clamp(const fit_free *f, double p);

/* Derivative of the model at one point (row: that point's row of the full Jacobian) with respect
 * to free parameter f, the columns of the parameters tied to it added with their factors. */
static inline double cs_fit_impl_column(const cs_fit_workspace *w, const double *row, const fit_free *f)
{
    double v = row[f->idx];
    for (size_t t = f->tie0; t < f->tie1; t++)
        v += w->tie_fac[t] * row[w->tie_idx[t]];
    return v;
}

/* fit_covar.c */
/* r->at_bound for the free parameters at r->value. */
CS_FIT_INTERNAL void cs_fit_impl_flag_bounds(const cs_fit_workspace *w, cs_fit_result *r);
/* r->cov, r->err, r->corr from the evaluation at r->value (the last cs_fit_impl_eval): the
 * covariance when `converged` (times factor), else NaN for everything not fixed. *singular is
 * set when some parameters are undetermined. Returns CS_OK or CS_ENOMEM. */
CS_FIT_INTERNAL int cs_fit_impl_covariance(cs_fit_workspace *w, cs_fit_result *r, int converged, double factor,
                                           int *singular);

/* fit_errors.c */
/* Multistart: nstart extra solves from perturbations of p0; p/o receive the best solution. */
CS_FIT_INTERNAL int cs_fit_impl_multistart(cs_fit_workspace *w, const cs_fit_parameters *par,
                                           const double *p0, double *p, fit_outcome *o);
/* Standard deviations over replicas refitted from pfit (bootstrap when mc == 0, else Monte
 * Carlo): err[np]; redchi2 is the reduced chi2 of the fit (noise level for NOISE weighting).
 * Returns CS_OK or CS_ENOMEM. The model evaluation state is clobbered. */
CS_FIT_INTERNAL int cs_fit_impl_resample(cs_fit_workspace *w, const cs_fit_parameters *par,
                                         const double *pfit, int mc, size_t nrep, double redchi2,
                                         double *err);

#endif /* CS_FIT_IMPL_H */
