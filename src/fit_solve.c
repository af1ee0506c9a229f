/* The solver core of the fit: internal variables and bound transforms, residuals (Gaussian and
 * Poisson deviance), GSL trust-region callbacks, convergence tests.
 *
 * Internal variables. The solver never sees the physical parameters (centres near 1e14 Hz, widths
 * of 1e6 Hz, areas of any size). Each free parameter p has an internal variable t of order one:
 *   no bound:      p = c + s t                  c = the starting value, s = a typical size
 *   lower bound:   p = lo + s (sqrt(1 + t^2) - 1)
 *   upper bound:   p = hi - s (sqrt(1 + t^2) - 1)
 *   both bounds:   p = lo + (hi - lo) (1 + sin t) / 2
 * The two last forms are those of MINUIT (F. James and M. Roos, Comput. Phys. Commun. 10, 343
 * (1975); F. James, MINUIT user's guide, CERN Program Library D506, "parameter limits"). They are
 * smooth, reach the bound exactly (t = 0, t = -pi/2) and their derivative vanishes only there.
 * They are evaluated without cancellation: sqrt(1 + t^2) - 1 = t^2 / (sqrt(1 + t^2) + 1) and
 * (1 + sin t) / 2 = sin^2(t/2 + pi/4) (or 1 - cos^2 near the upper bound). A starting value on or
 * beyond a bound is moved 1e-4 (relative to s, or to the range) inside. The typical sizes s are
 * chosen in fit.c (setup_scales) so that every column of the Jacobian has a comparable size and
 * the step test below means "relative to the parameter's own scale"; GSL's More scaling
 * (gsl_multifit_nlinear_scale_more) is used on top.
 *
 * Ties. After every update cs_model_apply_ties sets the tied parameters; in the Jacobian the
 * column of a master receives factor x the column of each parameter tied to it (chain rule for
 * p_tied = factor p_master + offset): cs_model_eval_jac gives the derivatives with respect to all
 * parameters, and d r_i / d t_j = w_i (dm_i/dp_j + sum_tied factor dm_i/dp_tied) dp_j/dt_j.
 *
 * Step solver. GSL's Levenberg-Marquardt trust region (gsl_multifit_nlinear_trs_lm; trs_lmaccel
 * with geodesic acceleration, M. K. Transtrum, B. B. Machta and J. P. Sethna, Phys. Rev. E 83,
 * 036701 (2011)) solves its subproblem through the normal equations with GSL's modified Cholesky
 * (gsl_linalg_mcholesky_decomp, which stays usable when J^T J is singular): a step only has to
 * lower the cost, the accuracy of the solution is set by the residuals and the Jacobian. It is
 * about a third faster than the QR solver on 2048 x 9 Jacobians and gives the NIST StRD results
 * to the same digits (tests/test_fit.c). The covariance is formed by QR (fit_covar.c). Measured
 * on 100 spectra of bench/bench_fit.c (GSL 2.7): the plain Cholesky solver gives the same
 * iterations; Levenberg scaling (D = I) about 40 % more; dogleg, double dogleg and the 2D
 * subspace method the same iterations but 15-25 % of the fits ending without progress near the
 * minimum (their trial steps come from the undamped Gauss-Newton step).
 *
 * Normal equations formed once. GSL's own solver (gsl_multifit_nlinear_solver_mcholesky) forms
 * J^T J with gsl_blas_dsyrk at every iteration and -J^T f with a gsl_blas_dgemv at every trial,
 * and More's scaling (gsl_multifit_nlinear_scale_more) takes one strided gsl_blas_dnrm2 per
 * column; with GSL's reference CBLAS these were a third of a fit's instructions. GSL lets a
 * caller supply both pieces (gsl_multifit_nlinear_parameters.solver and .scale), so the
 * trust region here gets its own: the Jacobian callback writes J for GSL and, in the same pass,
 * a copy by columns from which J^T J is summed in registers (3 x 3 blocks, two rows at a time);
 * the solver copies that matrix, adds mu D^2 and calls the same gsl_linalg_mcholesky_decomp and
 * _solve, with -J^T f = -g (the trust region's gradient, which GSL computes right after each
 * Jacobian) whenever the right-hand side is the current residual vector; the scaling takes the
 * column norms from the diagonal of J^T J (both pieces in lsq_normal.c, shared with the
 * gate-aware fits). The Gauss-Newton step of the convergence test below
 * uses the same J^T J and g. Where the callback's matrix is not at hand (another workspace's J)
 * both fall back to the BLAS calls. The trust region itself, its step acceptance and its damping
 * (Nielsen's update) are GSL's unchanged. What remains of BLAS (J dx and the norms of f inside
 * the trust region, g) is about a sixth of a fit's instructions with GSL's reference CBLAS.
 *
 * One model evaluation per iteration. The residual callback evaluates model and Jacobian
 * together (a Voigt value and all its derivatives come from one Faddeeva evaluation) and keeps
 * them with the internal variables they belong to; the Jacobian callback, which GSL calls at the
 * point whose residuals it has just accepted, reuses them. A point where the model is invalid or
 * not finite gets a huge residual (1e100 in norm), so the trust region rejects it and shrinks.
 *
 * Weights and residuals. r_i = (m_i - y_i) / sigma_i with sigma_i given (SIGMA), 1 (NOISE) or
 * sqrt(max(y_i, 1)) (POISSON, Neyman's chi2). Cash: the Poisson deviance residual
 *   r_i = sign(m_i - y_i) sqrt(2 (m_i - y_i - y_i ln(m_i / y_i))),  (y_i ln(..) = 0 for y_i = 0)
 * whose squares sum to the deviance 2 sum(m_i - y_i ln m_i) - (its value at m = y), i.e. the Cash
 * statistic (W. Cash, ApJ 228, 939 (1979)) up to a constant of the data (S. Baker and
 * R. D. Cousins, Nucl. Instrum. Meth. 221, 437 (1984)), so least squares on r is maximum
 * likelihood. From r^2 = 2 D, D = m - y - y ln(m/y), dD/dm = 1 - y/m: d r_i / d m_i =
 * (1 - y_i/m_i) / r_i, whose limit as m_i -> y_i is 1/sqrt(m_i) (and 1/r = 1/sqrt(2 m) for y = 0).
 * D = y (u - ln(1 + u)), u = (m - y)/y, is summed as a series for |u| < 0.05 so that r keeps its
 * full relative accuracy near the minimum. m_i <= 0 counts as an invalid model.
 *
 * Convergence. Small step: |dt_j| <= xtol (1 + |t_j|) for every j (GSL's own test uses
 * xtol (xtol + |t_j|), too strict for variables that pass through 0), a change below 8 ulps of
 * the parameter itself counting as none (a centre near 4e14 Hz is resolved to 0.06 Hz only,
 * 2e-9 of a 40 MHz width, so xtol = 1e-10 could not be met otherwise). Once the accepted steps
 * are below 1e-3 (relative, as in that test), the undamped Gauss-Newton step d from the current
 * point is computed too (normal equations, k x k Cholesky: cheap next to a model evaluation).
 * The fit has converged when d is below xtol, or when the decrease of the cost it predicts,
 * d^T J^T J d, is below 16 eps times the cost (no trust-region trial could show a decrease any
 * more: the solver would reject 15 steps and give up) or below 0.01 xtol cost/dof. d^T J^T J d
 * is the squared length of d in standard errors (J^T J is the inverse covariance, scaled by
 * cost/dof when the errors are), so the last test stops within 1e-6 standard errors of the
 * minimum at the default xtol. d is then applied as the last step: it comes from the gradient,
 * which stays accurate far below the rounding level of the cost; the driver checks that the
 * cost did not rise and otherwise keeps the point before it. Why the length of d is not
 * required to be below 1e4 xtol as well: with noise-sized residuals and a weakly determined
 * parameter (a Voigt's Gaussian width next to a larger Lorentzian width) the neglected
 * second-order term sum r_i d2r_i makes Gauss-Newton and Levenberg-Marquardt converge only
 * linearly (each step about 0.36 of the previous one on the spectra of bench/bench_fit.c), so
 * the steps can still be above 1e4 xtol when the cost is already flat to rounding; the trust
 * region then rejected every trial, and about 1 % of those fits ended as "no progress" at the
 * minimum (their cost equal to that of the converged fit to 1e-15). The final step saves a
 * third of the model evaluations of a typical fit and most of those of a poorly matching model,
 * and gives the NIST StRD Gauss1-3 values to 8-11 digits. Linear convergence is also put to
 * use: when the last two accepted steps and d lie on one line (squared sines <= 1e-3) and shrink
 * by one factor r (0 < r <= 0.7, or -0.95 <= r < 0 when they alternate in sign; the two
 * estimates within 5 %), the steps still to come sum to d / (1 - r) (the geometric series;
 * Aitken's extrapolation), which is applied as the last step
 * instead of d once d^T J^T J d is below 1e6 times the bound above (1e-3 standard errors at the
 * default xtol; the extrapolated point is within about 1e-5 of them on the bench_fit spectra).
 * Alternating steps are the overshoot of a misfit (large residuals: the neglected term makes
 * J^T J too small a Hessian); e.g. split's weighted whole-record passes (r about -0.73, chi2/dof
 * 4-8), which this shortened by a tenth in all over 16 synthetic records, and test_fit's Gaussian
 * fitted with a Lorentzian (17 -> 10 evaluations). For r < 0, 1/(1 - r) < 1: the extrapolated
 * step is shorter than d and an error in r hardly matters, hence the wider bound.
 * Steps damped by the trust region shrink by changing factors, so they are not extrapolated
 * (the test of two factors keeps a linear problem's single damped step from being stretched).
 * Small gradient and small change: gsl_multifit_nlinear_test. If the solver still reports no
 * progress (15 rejected steps in a row, GSL_ENOPROG) and the rejected trials were not model
 * failures, the fit counts as converged when the last accepted step was below 1e4 xtol or the
 * Gauss-Newton step from the last accepted point is within 1e-3 standard errors (d^T J^T J d
 * below 1e6 times the bound above; it is applied as the last step), and as not converged
 * otherwise. The rounding errors of the model (w_of_z, the series) and of the sum of 2048
 * squares make the cost noisy at about 1e-15 of its value, a little above 16 eps, so a fit
 * restarted at its own solution can end this way after a few steps. The same situation can
 * also show as accepted steps: an accepted step below 1e4 xtol whose decrease of the cost is
 * below 16 eps times the cost was accepted on the rounding noise of the cost, not on a real
 * decrease, and the fit has converged too (stop: small change). Without this test such a fit
 * walks on in steps of 1e-9 relative until the iteration limit, and whether it ends as
 * "converged" by a step that happens to fall below xtol, or as "not converged" at the limit,
 * is decided by the rounding of J^T J (GSL's reference CBLAS or OpenBLAS): seen on the
 * whole-record fits of `collshift split` (sech2+lorentz on a 2^17-sample record's PSD band,
 * first reweighted pass, which crawled along a valley where the Lorentzian narrows and grows for
 * ~190 steps; tests/cli/split_whole.sh). (GSL's gradient test is absolute when the cost is below
 * 1: unweighted fits therefore scale their residuals by a noise scale of the data,
 * cs_fit_impl_noise_scale, so that data in any unit, PSD values of 1e-20 included, are fitted
 * alike.) */
#include <collshift/fit.h>

#include "fit_impl.h"
#include "lsq_normal_impl.h"

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>

#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PI_ 3.14159265358979323846
#define FIT_CLAMP 1e-4        /* starting values are kept this far (relative) inside a bound */
#define FIT_PENALTY 1e100     /* norm of the residual vector at an invalid point */
#define FIT_NOPROG_XTOL 1e4   /* no progress after steps below this * xtol: converged */
#define FIT_GN_CHECK 1e-3     /* accepted steps below this (relative): look at the Gauss-Newton step */
#define FIT_ROUNDING 16.0     /* a predicted cost decrease below this * eps * cost is invisible */
#define FIT_EDM_XTOL 0.01     /* estimated distance to the minimum: below this * xtol * cost/dof */
#define FIT_EXTRAP_EDM 1e6    /* ... or below this times that, when the steps contract along a line */
#define FIT_EXTRAP_RMAX 0.7   /* largest contraction factor extrapolated */
#define FIT_EXTRAP_RALT 0.95  /* ... and largest alternating one (steps of changing sign) */
#define FIT_EXTRAP_SIN2 1e-3  /* largest squared sine between successive steps */
#define FIT_EXTRAP_RTOL 0.05  /* largest relative difference of successive contraction factors */

/* ---------------------------------------------------------------- GSL workspace */

/* J^T J of the workspace's Jacobian callback for the solver and scaling of lsq_normal.c, when
 * it was formed for this very J. */
static const double *fit_normal(const void *owner, const gsl_matrix *J)
{
    const cs_fit_workspace *w = owner;
    return w->jtj_of == J->data && w->nfree == J->size2 ? w->jtj : NULL;
}

/* GSL's workspace is tied to (n, p, method): keep it while they stay the same. */
static int ensure_gsl(cs_fit_workspace *w, size_t n, size_t k, int accel)
{
    if (w->gw && w->gw_n == n && w->gw_p == k && w->gw_accel == accel)
        return CS_OK;
    if (w->gw)
        gsl_multifit_nlinear_free(w->gw);
    gsl_multifit_nlinear_parameters fp = gsl_multifit_nlinear_default_parameters();
    fp.trs = accel ? gsl_multifit_nlinear_trs_lmaccel : gsl_multifit_nlinear_trs_lm;
    fp.scale = &cs_lsq_scale_more;
    fp.solver = &cs_lsq_solver_mcholesky;
    w->gw = gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &fp, n, k);
    if (!w->gw)
        return CS_ENOMEM;
    w->gw_n = n;
    w->gw_p = k;
    w->gw_accel = accel;
    return CS_OK;
}

/* ---------------------------------------------------------------- transforms */

static double tr_value(const fit_free *f, double t)
{
    switch (f->kind) {
    case FIT_TR_LOWER:
        return f->lo + f->s * (t * (t / (hypot(1.0, t) + 1.0)));
    case FIT_TR_UPPER:
        return f->hi - f->s * (t * (t / (hypot(1.0, t) + 1.0)));
    case FIT_TR_BOTH: {
        double a = 0.5 * t + 0.25 * PI_, sa = sin(a), ca = cos(a);
        return sa * sa <= 0.5 ? f->lo + (f->hi - f->lo) * sa * sa : f->hi - (f->hi - f->lo) * ca * ca;
    }
    default:
        return f->c + f->s * t;
    }
}

static double tr_deriv(const fit_free *f, double t)
{
    switch (f->kind) {
    case FIT_TR_LOWER:
        return f->s * t / hypot(1.0, t);
    case FIT_TR_UPPER:
        return -f->s * t / hypot(1.0, t);
    case FIT_TR_BOTH:
        return 0.5 * (f->hi - f->lo) * cos(t);
    default:
        return f->s;
    }
}

/* Internal variable of value p; values on or beyond a bound are moved FIT_CLAMP inside. */
static double tr_inverse(const fit_free *f, double p)
{
    switch (f->kind) {
    case FIT_TR_LOWER:
    case FIT_TR_UPPER: {
        double u = (f->kind == FIT_TR_LOWER ? p - f->lo : f->hi - p) / f->s;
        if (!(u >= FIT_CLAMP))
            u = FIT_CLAMP;
        return sqrt(u * (u + 2.0));
    }
    case FIT_TR_BOTH: {
        double a = (p - f->lo) / (f->hi - f->lo);
        if (!(a >= FIT_CLAMP))
            a = FIT_CLAMP;
        if (a > 1.0 - FIT_CLAMP)
            a = 1.0 - FIT_CLAMP;
        return 2.0 * asin(sqrt(a)) - 0.5 * PI_;
    }
    default:
        return (p - f->c) / f->s;
    }
}

double cs_fit_impl_clamp(const fit_free *f, double p)
{
    if (f->kind == FIT_TR_NONE)
        return p;
    return tr_value(f, tr_inverse(f, p));
}

/* ---------------------------------------------------------------- residuals and evaluation */

/* Poisson deviance residual and d r / d m (see the essay); NaN when m <= 0 or not finite. */
static double cash_resid(double m, double y, double *drdm)
{
    if (!(m > 0.0) || !isfinite(m)) {
        *drdm = NAN;
        return NAN;
    }
    if (y == 0.0) {
        double r = sqrt(2.0 * m);
        *drdm = 1.0 / r;
        return r;
    }
    double u = (m - y) / y, h;
    if (fabs(u) < 0.05) {
        /* u - ln(1 + u) = sum_{k>=2} (-u)^k / k, to k = 14 (truncation < 1e-17 relative) */
        double s = 0.0;
        for (int k = 14; k >= 2; k--)
            s = s * u + ((k % 2) ? -1.0 : 1.0) / k;
        h = u * u * s;
    } else {
        h = u - log1p(u);
    }
    double r = sqrt(2.0 * y * (h > 0.0 ? h : 0.0));
    if (u < 0.0)
        r = -r;
    *drdm = r != 0.0 ? ((m - y) / m) / r : 1.0 / sqrt(m);
    return r;
}

/* Robust scale of the data for NOISE weighting: the median absolute difference of neighbouring
 * points / (sqrt(2) x 0.6745), which is the standard deviation of white Gaussian noise (median
 * absolute deviation, common practice) and is hardly moved by lines that span several points;
 * else the RMS about the mean, else the largest |y|, else 1. Only a constant factor of the
 * residuals: the minimum, chi2 (reported as the plain sum of squares), the covariance and every
 * error are the same for any positive value (fit.c); it only keeps GSL's tolerances, which are
 * relative for a cost above 1 and absolute below, meaningful for data in any unit (a power
 * spectral density of 1e-20 W/Hz stopped after one step before). */
double cs_fit_impl_noise_scale(const double *y, size_t n, double *work)
{
    double s = 0.0;
    if (n >= 3) {
        for (size_t i = 0; i + 1 < n; i++)
            work[i] = fabs(y[i + 1] - y[i]);
        gsl_sort(work, 1, n - 1);
        s = gsl_stats_median_from_sorted_data(work, 1, n - 1) / (M_SQRT2 * 0.6744897501960817);
    }
    if (!(s > 0.0 && isfinite(s))) {
        double mean = 0.0, ss = 0.0, top = 0.0;
        for (size_t i = 0; i < n; i++)
            mean += y[i] / (double)n;
        for (size_t i = 0; i < n; i++) {
            ss += (y[i] - mean) * (y[i] - mean);
            top = fmax(top, fabs(y[i]));
        }
        s = n > 1 ? sqrt(ss / (double)(n - 1)) : 0.0;
        if (!(s > 0.0 && isfinite(s)))
            s = top > 0.0 && isfinite(top) ? top : 1.0;
    }
    return s;
}

void cs_fit_impl_weights(cs_fit_workspace *w)
{
    const size_t n = w->n;
    w->p_evaluated = 0;
    /* NOISE: 1/noise_scale, set once per data set by the driver (replicas keep it) */
    const double inv = w->weighting == CS_WEIGHT_NOISE ? 1.0 / w->noise_scale : 1.0;
    for (size_t i = 0; i < n; i++) {
        switch (w->weighting) {
        case CS_WEIGHT_SIGMA: w->sw[i] = 1.0 / w->sig[i]; break;
        case CS_WEIGHT_POISSON: w->sw[i] = 1.0 / sqrt(w->ycur[i] > 1.0 ? w->ycur[i] : 1.0); break;
        default: w->sw[i] = inv; break;
        }
    }
}

int cs_fit_impl_bins(cs_fit_workspace *w, double width)
{
    const size_t n = w->n, np = w->np, nq = 2 * n;
    w->bin_hw = 0.0;
    if (!(width > 0.0))
        return CS_OK;
    if (nq > w->qmax || np > w->pmax) {
        size_t pp = w->pmax;
        if (nq > ((size_t)-1) / sizeof(double) / pp)
            return CS_ENOMEM;
        double **q[] = {&w->xq, &w->mq, &w->wq, &w->Jq};
        for (size_t i = 0; i < sizeof q / sizeof q[0]; i++) {
            free(*q[i]);
            *q[i] = malloc(nq * (i == 3 ? pp : 1) * sizeof(double));
        }
        w->qmax = w->xq && w->mq && w->wq && w->Jq ? nq : 0;
        if (!w->qmax)
            return CS_ENOMEM;
    }
    /* two-point Gauss-Legendre nodes of [x - width/2, x + width/2]: x -+ (width/2)/sqrt(3) */
    w->bin_hw = 0.5 * width / sqrt(3.0);
    for (size_t i = 0; i < n; i++) {
        w->xq[2 * i] = w->x[i] - w->bin_hw;
        w->xq[2 * i + 1] = w->x[i] + w->bin_hw;
    }
    w->cache_ok = 0;
    w->p_evaluated = 0;
    return CS_OK;
}

/* The model and its Jacobian at w->p for every point: at x, or for binned data the mean of the
 * two nodes' values (the Gauss-Legendre weights are equal). */
static int eval_model(cs_fit_workspace *w)
{
    const size_t n = w->n, np = w->np;
    if (!(w->bin_hw > 0.0))
        return cs_model_eval_jac(w->m, w->p, w->x, n, w->mval, w->Jfull, np, w->work) == CS_OK;
    if (cs_model_eval_jac(w->m, w->p, w->xq, 2 * n, w->mq, w->Jq, np, w->wq) != CS_OK)
        return 0;
    for (size_t i = 0; i < n; i++) {
        w->mval[i] = 0.5 * (w->mq[2 * i] + w->mq[2 * i + 1]);
        const double *a = w->Jq + 2 * i * np, *b = a + np;
        double *row = w->Jfull + i * np;
        for (size_t j = 0; j < np; j++)
            row[j] = 0.5 * (a[j] + b[j]);
    }
    return 1;
}

/* Model, Jacobian and residuals at w->p. Returns 1 when everything is finite. */
static int eval_core(cs_fit_workspace *w)
{
    const size_t n = w->n;
    int ok = eval_model(w);
    const double *y = w->ycur;
    const int cash = w->weighting == CS_WEIGHT_CASH;
    for (size_t i = 0; ok && i < n; i++) {
        double mi = w->mval[i], r, d;
        if (cash) {
            r = cash_resid(mi, y[i], &d);
        } else {
            d = w->sw[i];
            r = (mi - y[i]) * d;
        }
        if (!isfinite(r)) {
            ok = 0;
            break;
        }
        w->res[i] = r;
        w->dfac[i] = d;
    }
    w->last_nan = !ok;
    return ok;
}

int cs_fit_impl_eval(cs_fit_workspace *w, const double *p)
{
    /* right after a solve that ended on its last evaluated point, the driver asks for that
     * point again: the arrays already hold it (one model evaluation per fit saved) */
    int same = w->p_evaluated && w->ycur == w->y && memcmp(w->p, p, w->np * sizeof *p) == 0;
    w->p_evaluated = 0;
    w->cache_ok = 0;
    if (same)
        return 1;
    memcpy(w->p, p, w->np * sizeof *p);
    w->cache_ok = 0;
    return eval_core(w);
}

/* w->p from internal variables t (free values transformed, ties applied). */
static void params_from_theta(cs_fit_workspace *w, const double *t)
{
    w->p_evaluated = 0;
    memcpy(w->p, w->pbase, w->np * sizeof *w->p);
    for (size_t j = 0; j < w->nfree; j++)
        w->p[w->fr[j].idx] = tr_value(&w->fr[j], t[j]);
    cs_model_apply_ties(w->m, w->p);
}

static int eval_theta(cs_fit_workspace *w, const gsl_vector *th)
{
    for (size_t j = 0; j < w->nfree; j++)
        w->thcache[j] = gsl_vector_get(th, j);
    params_from_theta(w, w->thcache);
    w->cache_ok = eval_core(w);
    return w->cache_ok;
}

static int cb_f(const gsl_vector *th, void *params, gsl_vector *f)
{
    cs_fit_workspace *w = params;
    const size_t n = w->n;
    w->nfev++;
    if (!eval_theta(w, th)) {
        double v = FIT_PENALTY / sqrt((double)n);
        for (size_t i = 0; i < n; i++)
            f->data[i * f->stride] = v;
        return GSL_SUCCESS;
    }
    for (size_t i = 0; i < n; i++)
        f->data[i * f->stride] = w->res[i];
    return GSL_SUCCESS;
}

/* Lower triangle of a = B^T B (row-major k x k) for the n x k matrix B stored by columns
 * (column j at b + j ld). Blocks of up to 3 x 3 entries are summed in registers over the rows, two
 * rows at a time (even and odd rows in the two lanes of a vector where the compiler has them,
 * added at the end): about 1.5 instructions per product instead of the 7 of a plain loop over a
 * row-major matrix (gsl_blas_dsyrk with GSL's reference CBLAS). */
#if defined(__GNUC__)
typedef double fit_v2 __attribute__((vector_size(16)));
#define GRAM_LANES 2
#else
typedef double fit_v2;
#define GRAM_LANES 1
#endif

static inline fit_v2 v2_load(const double *p)
{
    fit_v2 v;
    memcpy(&v, p, sizeof v);
    return v;
}

static inline double v2_sum(fit_v2 v)
{
#if GRAM_LANES == 2
    return v[0] + v[1];
#else
    return v;
#endif
}

/* Entries (r0 + i, c0 + j), i, j < 3, of B^T B, stored where c0 + j <= r0 + i < k (columns past
 * k - 1 are computed as copies of the last one and not stored). */
static void gram_block(const double *b, size_t n, size_t ld, size_t k, double *a, size_t r0, size_t c0)
{
    const double *x0 = b + r0 * ld, *x1 = b + (r0 + 1 < k ? r0 + 1 : k - 1) * ld,
                 *x2 = b + (r0 + 2 < k ? r0 + 2 : k - 1) * ld;
    const double *y0 = b + c0 * ld, *y1 = b + (c0 + 1 < k ? c0 + 1 : k - 1) * ld,
                 *y2 = b + (c0 + 2 < k ? c0 + 2 : k - 1) * ld;
    fit_v2 s00 = {0}, s01 = {0}, s02 = {0}, s10 = {0}, s11 = {0}, s12 = {0}, s20 = {0}, s21 = {0},
           s22 = {0};
    size_t t = 0;
    for (; t + GRAM_LANES <= n; t += GRAM_LANES) {
        fit_v2 u0 = v2_load(x0 + t), u1 = v2_load(x1 + t), u2 = v2_load(x2 + t);
        fit_v2 v0 = v2_load(y0 + t), v1 = v2_load(y1 + t), v2 = v2_load(y2 + t);
        s00 += u0 * v0;
        s01 += u0 * v1;
        s02 += u0 * v2;
        s10 += u1 * v0;
        s11 += u1 * v1;
        s12 += u1 * v2;
        s20 += u2 * v0;
        s21 += u2 * v1;
        s22 += u2 * v2;
    }
    double r[3][3] = {{v2_sum(s00), v2_sum(s01), v2_sum(s02)},
                      {v2_sum(s10), v2_sum(s11), v2_sum(s12)},
                      {v2_sum(s20), v2_sum(s21), v2_sum(s22)}};
    const double *xs[3] = {x0, x1, x2}, *ys[3] = {y0, y1, y2};
    for (size_t i = 0; i < 3 && r0 + i < k; i++)
        for (size_t j = 0; j < 3 && c0 + j <= r0 + i; j++) {
            double v = r[i][j];
            for (size_t u = t; u < n; u++)
                v += xs[i][u] * ys[j][u];
            a[(r0 + i) * k + c0 + j] = v;
        }
}

static void gram_cols(const double *b, size_t n, size_t ld, size_t k, double *a)
{
    for (size_t r0 = 0; r0 < k; r0 += 3)
        for (size_t c0 = 0; c0 <= r0; c0 += 3)
            gram_block(b, n, ld, k, a, r0, c0);
}

static int cb_df(const gsl_vector *th, void *params, gsl_matrix *J)
{
    cs_fit_workspace *w = params;
    const size_t n = w->n, k = w->nfree, np = w->np;
    w->njev++;
    w->jtj_of = NULL;
    int same = w->cache_ok;
    for (size_t j = 0; same && j < k; j++)
        same = gsl_vector_get(th, j) == w->thcache[j];
    if (!same && !eval_theta(w, th))
        return GSL_EDOM;
    int ties = 0;
    for (size_t j = 0; j < k; j++) {
        w->dpdt[j] = tr_deriv(&w->fr[j], w->thcache[j]);
        ties |= w->fr[j].tie1 > w->fr[j].tie0;
    }
    /* the same Jacobian by columns, for J^T J (w->Jc: scratch until the covariance); the columns
       lie a whole number of cache lines plus one apart, so that the k stores of a row do not all
       fall into one cache set as they would with a power-of-two stride */
    double *jc = w->Jc;
    const size_t ldc = FIT_JC_LD(n);
    enum { FAST_K = 32 };
    if (!ties && k <= FAST_K) {
        /* no ties (the usual case): each column is one column of the model's Jacobian */
        size_t idx[FAST_K];
        double dp[FAST_K];
        for (size_t j = 0; j < k; j++) {
            idx[j] = w->fr[j].idx;
            dp[j] = w->dpdt[j];
        }
        const double *row = w->Jfull, *dfac = w->dfac;
        double *out = J->data;
        const size_t tda = J->tda;
        for (size_t i = 0; i < n; i++, row += np, out += tda) {
            const double d = dfac[i];
            for (size_t j = 0; j < k; j++) {
                double v = row[idx[j]] * d * dp[j];
                out[j] = v;
                jc[j * ldc + i] = v;
            }
        }
    } else {
        for (size_t i = 0; i < n; i++) {
            const double *row = w->Jfull + i * np;
            double *out = J->data + i * J->tda, d = w->dfac[i];
            for (size_t j = 0; j < k; j++) {
                double v = cs_fit_impl_column(w, row, &w->fr[j]) * d * w->dpdt[j];
                out[j] = v;
                jc[j * ldc + i] = v;
            }
        }
    }
    gram_cols(jc, n, ldc, k, w->jtj);
    /* an Inf or NaN in column j makes (J^T J)_jj Inf or NaN; only then is the column scanned
       (entries so large that their squares overflow are still finite) */
    for (size_t j = 0; j < k; j++)
        if (!isfinite(w->jtj[j * k + j]))
            for (size_t i = 0; i < n; i++)
                if (!isfinite(jc[j * ldc + i]))
                    return GSL_EDOM;
    w->jtj_of = J->data;
    return GSL_SUCCESS;
}

/* ---------------------------------------------------------------- the solver */

/* |dt_j| <= tol (1 + |t_j|) for all j, where a step below 8 ulps of the parameter itself counts
 * as zero: a centre near 4e14 Hz is only resolved to 0.06 Hz, 2e-9 of a 40 MHz width. */
static int small_step(const cs_fit_workspace *w, const gsl_vector *x, const gsl_vector *dx, double tol)
{
    for (size_t j = 0; j < x->size; j++) {
        double t = gsl_vector_get(x, j), d = fabs(tr_deriv(&w->fr[j], t));
        double ulps = d > 0.0 ? 8.0 * DBL_EPSILON * fabs(tr_value(&w->fr[j], t)) / d : 0.0;
        if (!(fabs(gsl_vector_get(dx, j)) <= tol * (1.0 + fabs(t)) + ulps))
            return 0;
    }
    return 1;
}

/* f^T f, in four interleaved partial sums (a single pass without gsl_blas_dnrm2's division per
 * element; the residuals are never near the overflow range: an invalid point has a norm of
 * 1e100, whose square 1e200 is still finite). */
static double sum_squares(const gsl_vector *f)
{
    const size_t n = f->size, st = f->stride;
    const double *d = f->data;
    double s0 = 0.0, s1 = 0.0, s2 = 0.0, s3 = 0.0;
    size_t i = 0;
    for (; i + 4 <= n; i += 4) {
        s0 += d[i * st] * d[i * st];
        s1 += d[(i + 1) * st] * d[(i + 1) * st];
        s2 += d[(i + 2) * st] * d[(i + 2) * st];
        s3 += d[(i + 3) * st] * d[(i + 3) * st];
    }
    for (; i < n; i++)
        s0 += d[i * st] * d[i * st];
    return (s0 + s1) + (s2 + s3);
}

/* b = r a along one line (squared sine between them <= FIT_EXTRAP_SIN2, 0 < r <= RMAX or
 * -RALT <= r < 0)? sb and sa are the strides of b and a (k elements each). */
static int contraction(const double *b, size_t sb, const double *a, size_t sa, size_t k, double *r)
{
    double bb = 0.0, aa = 0.0, ab = 0.0;
    for (size_t j = 0; j < k; j++) {
        double aj = a[j * sa], bj = b[j * sb];
        bb += bj * bj;
        aa += aj * aj;
        ab += aj * bj;
    }
    if (!(aa > 0.0 && bb > 0.0))
        return 0;
    *r = ab / aa;
    return ((*r > 0.0 && *r <= FIT_EXTRAP_RMAX) || (*r < 0.0 && *r >= -FIT_EXTRAP_RALT)) &&
           (ab / aa) * (ab / bb) >= 1.0 - FIT_EXTRAP_SIN2;
}

/* The undamped Gauss-Newton step d from the current point, (J^T J) d = -J^T f by Cholesky (k x k,
 * cheap next to a model evaluation), into w->nrm. Returns 1 when the fit has converged (see the
 * essay): d is below xtol, or the decrease of the cost it predicts, -g.d = d^T J^T J d, is
 * below FIT_ROUNDING eps cost or FIT_EDM_XTOL xtol cost/dof, or below FIT_EXTRAP_EDM times that
 * while last (the accepted step that led here), prev (the one before, contiguous) and d contract
 * by one factor r along one line; w->nrm then holds d / (1 - r). last or prev NULL: no
 * extrapolation. noprog (the trust region found no lower cost here): below FIT_EXTRAP_EDM
 * times the bound suffices. */
static int gauss_newton_final(cs_fit_workspace *w, double xtol, const gsl_vector *last, const double *prev,
                              int noprog)
{
    const size_t k = w->nfree;
    gsl_multifit_nlinear_workspace *gw = w->gw;
    const gsl_matrix *J = gsl_multifit_nlinear_jac(gw);
    const gsl_vector *f = gsl_multifit_nlinear_residual(gw);
    gsl_matrix_view A = gsl_matrix_view_array(w->gram, k, k);
    gsl_vector_view g = gsl_vector_view_array(w->colnorm, k), d = gsl_vector_view_array(w->nrm, k);
    if (w->jtj_of == J->data) {
        /* J^T J from the Jacobian callback, -J^T f from the solver's gradient (the same sums) */
        const gsl_vector *gg = gw->g;
        for (size_t r = 0; r < k; r++) {
            for (size_t c = 0; c <= r; c++)
                w->gram[r * k + c] = w->jtj[r * k + c];
            w->colnorm[r] = -gsl_vector_get(gg, r);
        }
    } else {
        gsl_blas_dsyrk(CblasLower, CblasTrans, 1.0, J, 0.0, &A.matrix);
        gsl_blas_dgemv(CblasTrans, -1.0, J, f, 0.0, &g.vector);
    }
    if (gsl_linalg_cholesky_decomp1(&A.matrix) != GSL_SUCCESS ||
        gsl_linalg_cholesky_solve(&A.matrix, &g.vector, &d.vector) != GSL_SUCCESS)
        return 0;
    if (small_step(w, gw->x, &d.vector, xtol))
        return 1;
    double dec, cost = sum_squares(f);
    gsl_blas_ddot(&g.vector, &d.vector, &dec);
    double dof = w->n > k ? (double)(w->n - k) : 1.0;
    double thr = fmax(FIT_ROUNDING * DBL_EPSILON * cost, FIT_EDM_XTOL * xtol * cost / dof);
    if (dec <= thr || (noprog && dec <= FIT_EXTRAP_EDM * thr))
        return 1;
    if (!last || !prev || !(dec <= FIT_EXTRAP_EDM * thr))
        return 0;
    /* linear convergence: the last steps and d shrink by one factor r along one line; the
     * steps still to come then sum to d / (1 - r) */
    double r1, r2;
    if (!contraction(w->nrm, 1, last->data, last->stride, k, &r2) ||
        !contraction(last->data, last->stride, prev, 1, k, &r1) || !(fabs(r2 - r1) <= FIT_EXTRAP_RTOL * fabs(r2)))
        return 0;
    for (size_t j = 0; j < k; j++)
        w->nrm[j] /= 1.0 - r2;
    return 1;
}

int cs_fit_impl_solve(cs_fit_workspace *w, const cs_fit_parameters *par, double *p, fit_outcome *o)
{
    const size_t k = w->nfree, n = w->n, np = w->np;
    o->status = CS_FIT_NOT_CONVERGED;
    o->stop = CS_FIT_STOP_NONE;
    o->niter = o->nfev = o->njev = 0;
    o->cost = NAN;
    o->polished = 0;
    w->nfev = w->njev = 0;
    w->cache_ok = 0;
    w->p_evaluated = 0;
    for (size_t i = 0; i < np; i++)
        if (!isfinite(p[i])) {
            o->status = CS_FIT_MODEL_NAN;
            o->stop = CS_FIT_STOP_MODEL_NAN;
            return CS_OK;
        }
    memcpy(w->pbase, p, np * sizeof *p);
    for (size_t j = 0; j < k; j++) {
        fit_free *f = &w->fr[j];
        if (f->kind == FIT_TR_NONE)
            f->c = p[f->idx];
        w->theta[j] = tr_inverse(f, p[f->idx]);
    }
    if (k == 0) {
        o->nfev = 1;
        if (!cs_fit_impl_eval(w, p)) {
            o->status = CS_FIT_MODEL_NAN;
            o->stop = CS_FIT_STOP_MODEL_NAN;
            return CS_OK;
        }
        double c = 0.0;
        for (size_t i = 0; i < n; i++)
            c += w->res[i] * w->res[i];
        o->cost = c;
        o->status = CS_FIT_CONVERGED;
        return CS_OK;
    }
    int rc = ensure_gsl(w, n, k, par->geodesic != 0);
    if (rc != CS_OK)
        return rc;
    w->fdf.f = cb_f;
    w->fdf.df = cb_df;
    w->fdf.fvv = NULL;
    w->fdf.n = n;
    w->fdf.p = k;
    w->fdf.params = w;
    w->last_nan = 0;
    gsl_vector_view th0 = gsl_vector_view_array(w->theta, k);
    cs_lsq_normal_bind(fit_normal, w);
    int s = gsl_multifit_nlinear_winit(&th0.vector, NULL, &w->fdf, w->gw);
    if (s != GSL_SUCCESS || w->last_nan) {
        cs_lsq_normal_bind(NULL, NULL);
        o->status = CS_FIT_MODEL_NAN;
        o->stop = CS_FIT_STOP_MODEL_NAN;
        o->nfev = w->nfev;
        o->njev = w->njev;
        return s == GSL_ENOMEM ? CS_ENOMEM : CS_OK;
    }
    gsl_multifit_nlinear_workspace *gw = w->gw;
    size_t iter = 0;
    int prev_small = 0; /* the last accepted step was below FIT_NOPROG_XTOL * xtol */
    int have_prev = 0;  /* w->und holds the accepted step before the last one */
    int polish = 0;     /* end with the Gauss-Newton step in w->nrm */
    double cost_prev = sum_squares(gsl_multifit_nlinear_residual(gw)); /* at the accepted point */
    for (;;) {
        if (iter >= par->max_iter) {
            o->stop = CS_FIT_STOP_MAX_ITER;
            break;
        }
        s = gsl_multifit_nlinear_iterate(gw);
        iter++;
        if (s == GSL_ENOPROG) {
            if (w->last_nan) {
                o->status = CS_FIT_MODEL_NAN;
                o->stop = CS_FIT_STOP_MODEL_NAN;
            } else {
                o->stop = CS_FIT_STOP_NO_PROGRESS;
                if (prev_small)
                    o->status = CS_FIT_CONVERGED;
                else if (gauss_newton_final(w, par->xtol, NULL, NULL, 1)) {
                    o->status = CS_FIT_CONVERGED;
                    polish = 1;
                }
            }
            break;
        }
        if (s != GSL_SUCCESS) {
            if (s == GSL_EDOM || w->last_nan) {
                o->status = CS_FIT_MODEL_NAN;
                o->stop = CS_FIT_STOP_MODEL_NAN;
            } else {
                o->stop = CS_FIT_STOP_NO_PROGRESS;
            }
            break;
        }
        if (small_step(w, gw->x, gw->dx, par->xtol)) {
            o->status = CS_FIT_CONVERGED;
            o->stop = CS_FIT_STOP_SMALL_STEP;
            break;
        }
        prev_small = small_step(w, gw->x, gw->dx, FIT_NOPROG_XTOL * par->xtol);
        int gn = small_step(w, gw->x, gw->dx, FIT_GN_CHECK) &&
                 gauss_newton_final(w, par->xtol, gw->dx, have_prev ? w->und : NULL, 0);
        for (size_t j = 0; j < k; j++) /* this step, for the next test of a constant contraction */
            w->und[j] = gsl_vector_get(gw->dx, j);
        have_prev = 1;
        if (gn) {
            o->status = CS_FIT_CONVERGED;
            o->stop = CS_FIT_STOP_SMALL_STEP;
            polish = 1;
            break;
        }
        double cost_now = sum_squares(gsl_multifit_nlinear_residual(gw));
        if (prev_small && cost_prev - cost_now <= FIT_ROUNDING * DBL_EPSILON * cost_now) {
            /* a small step accepted on rounding noise: the cost is flat here (see the essay) */
            o->status = CS_FIT_CONVERGED;
            o->stop = CS_FIT_STOP_SMALL_CHANGE;
            break;
        }
        cost_prev = cost_now;
        int info = 0;
        if (gsl_multifit_nlinear_test(0.0, par->gtol, par->ftol, &info, gw) == GSL_SUCCESS && info >= 2) {
            o->status = CS_FIT_CONVERGED;
            o->stop = info == 2 ? CS_FIT_STOP_SMALL_GRADIENT : CS_FIT_STOP_SMALL_CHANGE;
            break;
        }
    }
    cs_lsq_normal_bind(NULL, NULL);
    const gsl_vector *x = gsl_multifit_nlinear_position(gw);
    for (size_t j = 0; j < k; j++)
        w->pwork[j] = gsl_vector_get(x, j);
    params_from_theta(w, w->pwork);
    o->polished = polish;
    if (polish) {
        memcpy(w->ppre, w->p, np * sizeof *p);
        for (size_t j = 0; j < k; j++)
            w->pwork[j] += w->nrm[j];
        params_from_theta(w, w->pwork);
    }
    /* the last evaluation was at this very point (not a rejected trial, no final step) */
    int last = !polish && w->cache_ok && w->ycur == w->y;
    for (size_t j = 0; last && j < k; j++)
        last = w->thcache[j] == w->pwork[j];
    w->cache_ok = 0;
    w->p_evaluated = last;
    memcpy(p, w->p, np * sizeof *p);
    o->cost = sum_squares(gsl_multifit_nlinear_residual(gw));
    o->niter = iter;
    o->nfev = w->nfev;
    o->njev = w->njev;
    return CS_OK;
}

void cs_fit_impl_check_polish(cs_fit_workspace *w, double *p, fit_outcome *o)
{
    if (!o->polished)
        return;
    o->polished = 0;
    double c = 0.0;
    int ok = cs_fit_impl_eval(w, p);
    for (size_t i = 0; ok && i < w->n; i++)
        c += w->res[i] * w->res[i];
    if (!ok || !(c <= o->cost * (1.0 + 1e-9)))
        memcpy(p, w->ppre, w->np * sizeof *p);
}
