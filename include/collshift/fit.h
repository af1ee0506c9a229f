/* Fitting a cs_model to a spectrum: GSL's trust-region solver with analytic Jacobians, bounds by
 * transformation, weights, Poisson maximum likelihood, honest covariances and goodness of fit.
 * (The numerical choices are explained at the top of src/fit.c.)
 *
 * Errors. When per-point sigma are given (CS_WEIGHT_SIGMA) the covariance is (J^T W J)^-1 as it
 * stands: the errors are what the stated sigma imply, and chi2/dof tells whether those sigma were
 * right; the same holds for counts (CS_WEIGHT_POISSON, CS_WEIGHT_CASH), whose noise is known.
 * When the noise level is not known (CS_WEIGHT_NOISE) the covariance is scaled by chi2/dof
 * (errors_scaled = 1), so the errors follow from the scatter of the residuals. A result always
 * says which. Fixed parameters have error 0 and no covariance; tied parameters get errors
 * propagated from their master (|factor| times its error).
 *
 * Failure is explicit: every result carries a status (converged / iteration limit / singular
 * covariance / model produced NaN ...) and a parameter sitting at a bound is flagged. Numbers that
 * could not be computed are NaN and their status says why, never a made-up error bar:
 *   - a fit that did not converge (NOT_CONVERGED, MODEL_NAN) has NaN errors for every parameter
 *     that is not fixed (its values and chi2 are those of the last point reached);
 *   - SINGULAR: a parameter that the data do not determine (it does not change the model, or it
 *     trades off exactly against others, like the areas of two identical components) has NaN
 *     error and covariances; the others keep their errors, which are then still well defined;
 *   - a parameter within 1e-6 (relative) of a bound is flagged in at_bound, its error and
 *     covariances are NaN, and the other errors are computed with it held at the bound. (A fit
 *     that reaches its iteration limit with parameters at bounds is solved once more with them
 *     held there; when that converges, the status is CONVERGED and they stay flagged.)
 * In outputs (the command line's summary, JSON and CSV) a status is a word from
 * cs_fit_status_name, a parameter at a bound is named with "lower"/"upper", and an undefined
 * number is JSON null, an empty CSV cell or "undefined" in text: never "nan" or "inf".
 * Derived quantities (cs_profile_derived) get NaN errors exactly when they depend on a parameter
 * whose error is NaN.
 *
 * Ownership: cs_fit_workspace by cs_fit_alloc / cs_fit_free (reusable for many fits, so hot loops
 * do not allocate); cs_fit_result by cs_fit_run / cs_fit_result_free. */
#ifndef CS_FIT_H
#define CS_FIT_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/model.h>
#include <collshift/profile.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef enum cs_fit_weighting {
    CS_WEIGHT_AUTO = 0,  /* SIGMA when sigma are given, else NOISE */
    CS_WEIGHT_SIGMA,     /* w_i = 1/sigma_i^2, errors unscaled */
    CS_WEIGHT_NOISE,     /* equal weights; errors scaled by chi2/dof */
    CS_WEIGHT_POISSON,   /* counts: sigma_i^2 = max(y_i, 1) (Neyman), errors unscaled */
    CS_WEIGHT_CASH       /* counts: maximum-likelihood Poisson fit minimising the Cash statistic
                            C = 2 sum(m_i - y_i ln m_i) (W. Cash, ApJ 228, 939 (1979)); errors
                            from the Fisher information J^T diag(1/m) J, unscaled. The result's
                            chi2 is the Poisson deviance, C minus its value at m = y, which is
                            about chi2-distributed with dof degrees of freedom (S. Baker and
                            R. D. Cousins, Nucl. Instrum. Meth. 221, 437 (1984)). */
} cs_fit_weighting;

/* Tunables (GSL-style: start from cs_fit_default_parameters()). */
typedef struct cs_fit_parameters {
    cs_fit_weighting weighting;
    int geodesic;            /* 1: Levenberg-Marquardt with geodesic acceleration */
    size_t max_iter;         /* default 200 (iterations = accepted steps) */
    double xtol, gtol, ftol; /* GSL test tolerances; defaults 1e-10, 1e-10, 0. xtol applies to the
                                internal variables, scaled to each parameter's size (src/fit.c) */
    int guess;               /* 1 (default): cs_model_guess before fitting */
    size_t multistart;       /* 0: off; N: N extra starts (widths and centres perturbed
                                deterministically from `seed`), the best chi2 wins */
    size_t bootstrap;        /* 0: off; N residual-bootstrap replicas for errors */
    size_t montecarlo;       /* 0: off; N Monte-Carlo replicas for errors: the fitted model plus
                                Gaussian noise of the given sigma (SIGMA) or of sqrt(chi2/dof)
                                (NOISE), or Poisson deviates of the model (POISSON, CASH) */
    unsigned long seed;      /* for multistart, bootstrap, Monte Carlo (default 1) */
    double bin_width;        /* 0 (default): y_i is the spectrum AT x_i. > 0: y_i is the MEAN of
                                the spectrum over the bin [x_i - bin_width/2, x_i + bin_width/2]
                                (blocks of a fine spectrum averaged, detector pixels), and the
                                model is averaged over each bin by two-point Gauss-Legendre
                                quadrature (nodes x_i +- bin_width / (2 sqrt 3); exact for cubics,
                                relative error (bin_width / FWHM)^4 / 11 at a Lorentzian's
                                peak; Abramowitz & Stegun 25.4.29-30). Same units as x. */
} cs_fit_parameters;

cs_fit_parameters cs_fit_default_parameters(void);

/* Why the solver stopped (GSL's info), separately from success. */
typedef enum cs_fit_stop {
    CS_FIT_STOP_NONE = 0,
    CS_FIT_STOP_SMALL_STEP,      /* xtol */
    CS_FIT_STOP_SMALL_GRADIENT,  /* gtol */
    CS_FIT_STOP_SMALL_CHANGE,    /* ftol */
    CS_FIT_STOP_MAX_ITER,
    CS_FIT_STOP_NO_PROGRESS,     /* the trust region could not reduce the cost (with status
                                    CONVERGED when the steps had already become negligible:
                                    the cost is then flat to rounding) */
    CS_FIT_STOP_MODEL_NAN        /* the model produced NaN or Inf */
} cs_fit_stop;
const char *cs_fit_stop_name(cs_fit_stop s);

/* Outcome of a fit; "status" as a word for outputs: cs_fit_status_name(result->status). */
typedef enum cs_fit_status {
    CS_FIT_CONVERGED = 0,
    CS_FIT_NOT_CONVERGED,        /* iteration limit or no progress */
    CS_FIT_SINGULAR,             /* converged, but J^T W J is singular: some errors are NaN */
    CS_FIT_MODEL_NAN,            /* the model produced NaN/Inf */
    CS_FIT_BAD_INPUT             /* too few points for the free parameters, invalid data (not
                                    returned by cs_fit_run at present: it reports such input
                                    with CS_EDATA / CS_EINVAL and no result) */
} cs_fit_status;
const char *cs_fit_status_name(cs_fit_status s);  /* "converged", "not converged", "singular covariance", ... */

typedef struct cs_fit_result {
    cs_fit_status status;
    cs_fit_stop stop;
    cs_fit_weighting weighting;  /* the weighting actually used (AUTO resolved) */
    int errors_scaled;           /* 1 when errors were scaled by sqrt(chi2/dof) */
    size_t n;                    /* points used */
    size_t nparams, nfree;       /* nfree: neither fixed nor tied (parameters at a bound count) */
    double *value;               /* nparams fitted values (fixed and tied included) */
    double *err;                 /* nparams standard errors (0 for fixed; NaN when not computable) */
    int *at_bound;               /* nparams flags: 1 at the lower, 2 at the upper bound, 0 free */
    double *cov;                 /* nparams x nparams covariance, row-major (zero rows for fixed,
                                    NaN rows for parameters whose error is NaN) */
    double *corr;                /* nparams x nparams correlation (NaN where undefined, e.g. for
                                    fixed parameters) */
    double chi2;                 /* weighted sum of squared residuals (Cash: the deviance, see
                                    CS_WEIGHT_CASH) */
    size_t dof;                  /* n - nfree */
    double redchi2;              /* chi2 / dof */
    double aic, bic;             /* -2 ln L + 2k, -2 ln L + k ln n, k = nfree, with -2 ln L up to a
                                    constant shared by models of the same data: chi2 (SIGMA,
                                    POISSON: Gaussian likelihood with the stated sigma), the
                                    deviance (CASH), n ln(RSS/n) (NOISE: Gaussian likelihood
                                    with the noise level estimated by maximum likelihood) */
    double rms;                  /* root-mean-square residual (unweighted), y units */
    size_t niter, nfev, njev;
    size_t ncomp;
    cs_profile_derived *derived; /* ncomp derived quantities with errors */
    double *boot_err;            /* nparams bootstrap errors, or NULL when not asked for (NaN when
                                    the fit itself failed or fewer than 2 replicas converged) */
    double *mc_err;              /* nparams Monte-Carlo errors, or NULL (likewise) */
    double x_ref;                /* the model's baseline origin at the end of the fit */
} cs_fit_result;

void cs_fit_result_free(cs_fit_result *r);

/* Workspace for fits of nmax points and pmax parameters (reusable; not shared between threads).
 * Fits of the same size reuse everything; a larger fit makes it grow (freeing and reallocating
 * its arrays), and a change of (points used, free parameters, geodesic) reallocates GSL's
 * solver. Returns NULL on allocation failure. cs_fit_free is NULL-safe. */
typedef struct cs_fit_workspace cs_fit_workspace;
cs_fit_workspace *cs_fit_alloc(size_t nmax, size_t pmax);
void cs_fit_free(cs_fit_workspace *w);

/* Fit model m to (x, y[, sigma]) — n points, x ascending in Hz; mask (may be NULL): points with
 * mask[i] == 0 are left out (fit ranges and excluded windows). The model's parameter values are
 * the starting point (after cs_model_guess when par->guess) and receive the fitted values (also
 * when the fit did not converge: the last point reached). A starting value on or outside a bound
 * is moved just inside it. ws may be NULL (a temporary workspace is made); par may be NULL
 * (defaults). All arrays are borrowed. On return *out is a result even when the fit failed (its
 * status says how), except for CS_EINVAL/CS_ENOMEM/CS_EDATA (and errors of cs_model_guess)
 * where *out is NULL; the caller frees it with cs_fit_result_free.
 * Returns CS_OK when status is CS_FIT_CONVERGED, CS_ENOCONV for NOT_CONVERGED or MODEL_NAN,
 * CS_OK for SINGULAR too (the status says it), CS_EDATA for too few points (not more than the
 * free parameters) or non-finite x or y among the points used, CS_EINVAL for bad arguments (NULL
 * model, data or out; negative tolerances; SIGMA weighting without sigma or with a sigma that is
 * not finite and > 0; POISSON or CASH weighting with negative counts; contradictory bounds),
 * CS_ENOMEM, or what cs_model_guess returned. */
int cs_fit_run(cs_fit_workspace *ws, cs_model *m, const double *x, const double *y,
               const double *sigma, const unsigned char *mask, size_t n,
               const cs_fit_parameters *par, cs_fit_result **out, cs_error *err);

/* Model comparison of two fits of the same data where `simple` is nested in `full`:
 * F = ((chi2_s - chi2_f)/(k_f - k_s)) / (chi2_f / dof_f) and its p-value, the upper tail of the
 * F(k_f - k_s, dof_f) distribution (GSL gsl_cdf_fdist_Q; 1 when F <= 0). k = nfree.
 * Returns CS_OK or CS_EINVAL (a NULL argument, not nested by parameter count, different numbers
 * of points or weightings, dof_f 0, chi2 not finite or chi2_f <= 0, either fit NOT_CONVERGED or
 * MODEL_NAN: its chi2 is not a minimum); *F and *p_value are NaN then. */
int cs_fit_ftest(const cs_fit_result *simple, const cs_fit_result *full, double *F, double *p_value);

#ifdef __cplusplus
}
#endif
#endif /* CS_FIT_H */
