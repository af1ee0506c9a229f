/* The solver of the gate-aware fit: internal variables, residuals and analytic Jacobian, GSL's
 * trust region with its convergence tests, and the covariance of the reported parameters.
 *
 * Internal variables (u, all of order one; K components, 4 or 5 each in the order of the
 * reported parameters; start values f0, tau0, t0, a below):
 *     decay:  f - lo = f0 + u0 / T,              Gamma = e^{u1} / T,
 *             c_r = a (u2 + i u3)
 *     burst:  f - lo = f0 + u0 / (pi tau0),      tau = T e^{u1},   t_p - t_g = t0 + tau0 u2,
 *             c_r = a (u3 + i u4)
 * with T the gate length and a the largest starting amplitude. c_r is the complex amplitude
 * with its phase referred to t_g + s_r, s_r the centroid of the component's starting intensity
 * over the gate (the peak of a burst, about 1/Gamma for a decay starting at the gate):
 * c = c_r exp(-2 pi i (f - lo) s_r). Referred to t_g instead, a burst 1.6 us into the gate turns
 * its phase by 2 rad for a 200 kHz change of f, so f and the phase form a curved valley that
 * took the solver 20+ damped steps in tests; referred to the centroid they are uncorrelated
 * and the fit takes a handful. The residuals are
 * (model - data) / s per real component, s a fixed normalisation (sigma when given, else a
 * robust noise estimate of the gate: 1.4826 MAD of the first differences / sqrt 2 pooled over
 * I and Q, or the rms of the gate when that is 0), which leaves the minimum unchanged.
 * Jacobian (analytic): with v = c E the component's value at s = t - t_g,
 *     dv/du0 = 2 pi i (s - s_r) v x (scale of u0),  decay dv/du1 = -(s/2) Gamma v,
 *     burst  dv/du1 = z tanh(z) v,  dv/du2 = tanh(z) (tau0/tau) v,  z = (s - (t_p - t_g))/tau,
 *     dv/d(Re c_r part) = a E_r,  dv/d(Im c_r part) = i a E_r,  E_r = E exp(-2 pi i (f - lo) s_r),
 * split into real and imaginary rows (real records: real rows only). The basis comes from the
 * recurrences of gf_basis_next (gatefit_impl.h): a few multiplications per sample and component,
 * an exp and a sincos only every GF_ANCHOR samples.
 *
 * Only the residuals of the first P.nact used samples are evaluated (gatefit_impl.h): after
 * them the model is below e^-20 of its peak, so those residuals are constants to that precision
 * that change neither J, the steps nor the trust region's ratios (actual over predicted
 * reduction, both relative to the same |f|^2); the gradient test adds their sum of squares to
 * |f|^2 so that it is the test over all samples.
 *
 * Solver: gsl_multifit_nlinear_trust with the Levenberg-Marquardt subproblem (trs_lm), More's
 * scaling and, for one component, the Cholesky linear solver: the LM system J^T J + mu D^T D
 * (4 or 5 columns) from one pass over J. The QR solver, which works on J itself, cost two
 * thirds of the iterations' instructions once the model became cheap (a pivoted QR and a copy
 * of the thousands x 4 Jacobian per iteration); one component's J is well conditioned in the
 * scaled variables u (order one, amplitude and phase referred to the centroid), and the fitted
 * values on the 16-record test campaign agreed with the QR solver's to 1e-12 of their errors.
 * Sums of components keep the QR solver (accurate when J is ill-conditioned): they can be
 * nearly degenerate (two decays for one line), and there the Cholesky solver's path ended at a
 * different point with a singular covariance. Undetermined directions are found by the
 * covariance's pivoted QR (below). A point where the model is not finite (e^{u1}
 * overflowing) gets huge residuals, so the trust region rejects it. J^T J is formed once per
 * Jacobian, by the Jacobian callback right after it wrote J (one pass over the rows, each entry
 * summed in gsl_blas_dsyrk's order); the one-component solver (GSL's modified Cholesky) and the
 * More scaling (column norms from its diagonal), both in lsq_normal.c and shared with the
 * spectrum fits, and the Gauss-Newton test below take it from there, and -J^T f is
 * the trust region's own gradient g, instead of a gsl_blas_dsyrk per iteration, a gsl_blas_dgemv
 * per trial step and a strided gsl_blas_dnrm2 per column (GSL lets a caller supply the solver
 * and the scaling; the pattern of src/fit_solve.c). Convergence: an accepted
 * step with |du_j| <= xtol (1 + |u_j|) for every j; or GSL's gradient test (gtol). Near the
 * minimum of a noisy gate the damped steps shrink only linearly (by ~30 per iteration in the
 * tests), and with thousands of residuals the cost stops changing visibly (rounding of a sum of
 * ~4000 terms) while the steps are still ~1e-6: so once a step is below 1e4 xtol, the undamped
 * Gauss-Newton step d from the current point is computed (truncated SVD of J) and the fit has
 * converged when d passes the xtol test; and when GSL gives up (GSL_ENOPROG: 15 rejected trial
 * steps) the fit has converged if d is below 1e4 xtol, i.e. the minimum is within 1e-6 of a
 * variable of order one, or if every component of d is below 1e-3 of its standard error (a
 * variable scaled by the long gate, such as u0 = (f - f0) T, can sit 1e-6 from the minimum of a
 * 10^5-sample gate with the cost flat to rounding, while its error is of order one), and not
 * converged otherwise. d is then applied as a last step unless the cost rises beyond rounding (the same scheme as the
 * spectrum fitter's, src/fit_solve.c).
 *
 * Covariance. At the solution J (in u) has its columns equilibrated to unit norm and
 * gsl_multifit_nlinear_covar forms (J^T J)^-1 by QR with column pivoting, dropping columns with
 * |R_kk| <= 1e-10 |R_11|; a dropped column (GSL returns a zero row) marks its variable
 * undetermined (status SINGULAR, NaN errors for every reported parameter that depends on it; the
 * others keep theirs). When the equilibrated J^T J (k x k) shows that no column can be dropped
 * (small_covariance: smallest singular value provably above 1e-4) its Cholesky inverse is taken
 * instead; both give the same matrix to rounding, and the QR of the whole Jacobian was most of
 * the covariance's cost. Times sigma^2 / s^2 it is the covariance of u, and the reported covariance
 * is G C G^T with G = d(reported)/du (block diagonal: center, Gamma or tau, t_peak depend on one
 * variable each; the amplitude A = |c_r| on the two amplitude variables, dA = (cr dcr + ci dci)/A,
 * and the phase phi = arg(c_r) - 2 pi (f - lo) s_r on those and u0,
 * dphi = (cr dci - ci dcr)/A^2 - 2 pi s_r df). First-order, as any least-squares covariance. */
#include "gatefit_impl.h"
#include "lsq_normal_impl.h"

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_multifit.h>
#include <gsl/gsl_multifit_nlinear.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PI_ 3.14159265358979323846
#define GF_PENALTY 1e100        /* norm of the residual vector at a non-finite model */
#define GF_NOPROG_XTOL 1e4      /* steps below this * xtol: "no progress" means converged */
#define GF_NOPROG_NSE 1e-3      /* ... and so do steps below this many standard errors */
#define GF_RANK_RTOL 1e-10      /* covariance: column dropped when |R_kk| <= this * |R_11| */
#define GF_EXP_MAX 700.0        /* e^u beyond this is treated as overflow */

/* ---------------------------------------------------------------- model and Jacobian */
/* Natural parameters from the internal variables; 0 when an exponential overflows. */
int cs_gatefit_impl_theta(const gf_fit *F, const double *u, gf_theta *th)
{
    int ok = 1;
    for (size_t k = 0; k < F->P.ncomp; k++) {
        const double *v = u + F->first[k];
        th->f[k] = F->f0[k] + F->sf[k] * v[0];
        if (fabs(v[1]) > GF_EXP_MAX)
            ok = 0;
        size_t ia = 2;
        if (F->P.kind[k] == CS_GATEFIT_DECAY) {
            th->rate[k] = exp(v[1]) / F->P.T;
            th->tp[k] = 0.0;
        } else {
            th->rate[k] = F->P.T * exp(v[1]);
            th->tp[k] = F->tp0[k] + F->tau0[k] * v[2];
            ia = 3;
        }
        double ph = -2.0 * PI_ * th->f[k] * F->sref[k];   /* c at t_g from c at t_g + sref */
        th->c[k] = F->a_ref * (v[ia] + I * v[ia + 1]) * (cos(ph) + I * sin(ph));
    }
    return ok;
}

/* A point where the model is not finite: huge residuals (the trust region rejects it) and a zero
 * Jacobian; returns 0. */
static int gf_penalty(const gf_fit *F, gsl_vector *res, gsl_matrix *J)
{
    if (res)
        gsl_vector_set_all(res, GF_PENALTY / sqrt((double)F->nres));
    if (J)
        gsl_matrix_set_zero(J);
    return 0;
}

/* cs_gatefit_impl_evaluate for the commonest fit, one decay (the tail's, over the longest gates),
 * with the same operations in the same order as the general loop below (the same values, up to
 * the sign of a residual that is exactly 0): the recurrence of gf_basis_next kept in registers,
 * the complex products written out in real arithmetic (C's complex product checks every result
 * for NaN), no loop over components, the time s = j dt from j counted in a double, and the
 * residuals' finite test as one sum of r * 0 (Inf or NaN make it NaN) checked at the end. th:
 * the natural parameters at u (ok: finite). */
static int evaluate_decay1(gf_fit *F, const gf_theta *th, int ok, gsl_vector *res, gsl_matrix *J)
{
    const gf_problem *P = &F->P;
    const double is = 1.0 / F->s_fit;
    const double ph = -2.0 * PI_ * th->f[0] * F->sref[0];
    const double complex rot = cos(ph) + I * sin(ph);
    const double rtr = creal(rot), rti = cimag(rot);
    gf_basis_it it;
    cs_gatefit_impl_basis_init(&it, CS_GATEFIT_DECAY, th->f[0], th->rate[0], th->tp[0], P->dt);
    const double qr = creal(it.q), qi = cimag(it.q);
    const double cr = creal(th->c[0]), ci = cimag(th->c[0]);
    const double c0 = 2.0 * PI_ * F->sf[0], sref = F->sref[0], rate = th->rate[0], aref = F->a_ref;
    const double dt = P->dt;
    const size_t tda = J ? J->tda : 0, rstride = res ? res->stride : 0;
    double *rd = res ? res->data : NULL;
    const double *x = P->x;
    const int cplx = P->cplx;
    double er = 0.0, ei = 0.0, sd = 0.0;   /* the basis at the last sample, its index as a double */
    double bad = 0.0;
    size_t jl = 0, left = 0;
    int started = 0;
    for (size_t i = 0; ok && i < P->nact; i++) {
        size_t j = P->idx[i];
        if (started && j == jl + 1 && left > 0) {
            double nr = er * qr - ei * qi, ni = er * qi + ei * qr;   /* E *= q */
            er = nr;
            ei = ni;
            left--;
            sd += 1.0;
        } else {
            cs_gatefit_impl_basis_anchor(&it, j);
            er = creal(it.E);
            ei = cimag(it.E);
            left = it.left;
            started = 1;
            sd = (double)j;
        }
        jl = j;
        const double s = sd * dt;
        const double vr = cr * er - ci * ei, vi = cr * ei + ci * er;   /* v = c E, the model */
        if (J) {
            double *Jr = J->data + (cplx ? 2 * i : i) * tda;
            const double Err = rtr * er - rti * ei, Eri = rtr * ei + rti * er;   /* rot E */
            const double jr = aref * Err * is, ji = aref * Eri * is;
            const double a0 = c0 * (s - sref) * is;
            const double a1 = -0.5 * s * rate * is;
            Jr[0] = -a0 * vi;
            Jr[1] = a1 * vr;
            Jr[2] = jr;
            Jr[3] = -ji;
            if (cplx) {
                double *Ji = Jr + tda;
                Ji[0] = a0 * vr;
                Ji[1] = a1 * vi;
                Ji[2] = ji;
                Ji[3] = jr;
            }
        }
        /* residuals; bad stays 0 unless one is Inf or NaN (then the whole evaluation is
           replaced by the penalty below, as the general loop's early stop leads to) */
        if (cplx) {
            double rr = (vr - x[2 * j]) * is, ri = (vi - x[2 * j + 1]) * is;
            bad += rr * 0.0 + ri * 0.0;
            if (rd) {
                rd[2 * i * rstride] = rr;
                rd[(2 * i + 1) * rstride] = ri;
            }
        } else {
            double rr = (vr - x[j]) * is;
            bad += rr * 0.0;
            if (rd)
                rd[i * rstride] = rr;
        }
    }
    if (bad != 0.0 || isnan(bad))
        ok = 0;
    return ok ? 1 : gf_penalty(F, res, J);
}

/* Residuals (res, nres values; may be NULL) and Jacobian (J, nres x np; may be NULL) at u.
 * Returns 1 when everything is finite. The basis comes from gf_basis_next (no exp or sincos
 * per sample) and J is written through its row pointers. */
int cs_gatefit_impl_evaluate(gf_fit *F, const double *u, gsl_vector *res, gsl_matrix *J)
{
    const gf_problem *P = &F->P;
    gf_theta th;
    int ok = cs_gatefit_impl_theta(F, u, &th);
    if (P->ncomp == 1 && P->kind[0] == CS_GATEFIT_DECAY)
        return evaluate_decay1(F, &th, ok, res, J);
    const double is = 1.0 / F->s_fit;
    double complex rot[CS_GATEFIT_MAX_COMP];
    gf_basis_it it[CS_GATEFIT_MAX_COMP];
    double c0[CS_GATEFIT_MAX_COMP], c1[CS_GATEFIT_MAX_COMP];
    for (size_t k = 0; k < P->ncomp; k++) {
        double ph = -2.0 * PI_ * th.f[k] * F->sref[k];
        rot[k] = cos(ph) + I * sin(ph);
        cs_gatefit_impl_basis_init(&it[k], P->kind[k], th.f[k], th.rate[k], th.tp[k], P->dt);
        c0[k] = 2.0 * PI_ * F->sf[k];          /* dv/du0 = i c0 (s - sref) v */
        c1[k] = P->kind[k] == CS_GATEFIT_BURST ? F->tau0[k] / th.rate[k] : 0.0;   /* tau0 / tau */
    }
    const size_t tda = J ? J->tda : 0, rstride = res ? res->stride : 0;
    double *rd = res ? res->data : NULL;
    for (size_t i = 0; ok && i < P->nact; i++) {
        size_t j = P->idx[i];
        double s = (double)j * P->dt;
        double complex M = 0.0;
        double *Jr = NULL, *Ji = NULL;
        if (J) {
            Jr = J->data + (P->cplx ? 2 * i : i) * tda;
            Ji = P->cplx ? Jr + tda : NULL;
        }
        for (size_t k = 0; k < P->ncomp; k++) {
            double t;
            double complex E = gf_basis_next(&it[k], j, J ? &t : NULL);
            double complex v = th.c[k] * E;
            M += v;
            if (!J)
                continue;
            double vr = creal(v), vi = cimag(v);
            double complex Er = rot[k] * E;   /* the basis with the phase at t_g + sref */
            double er = F->a_ref * creal(Er) * is, ei = F->a_ref * cimag(Er) * is;
            size_t b = F->first[k];
            double a0 = c0[k] * (s - F->sref[k]) * is;   /* d/du0 = i a0 v */
            double a1, a2 = 0.0;
            size_t ia;
            if (P->kind[k] == CS_GATEFIT_DECAY) {
                a1 = -0.5 * s * th.rate[k] * is;
                ia = 2;
            } else {
                double z = (s - th.tp[k]) / th.rate[k];
                a1 = z * t * is;
                a2 = t * c1[k] * is;
                ia = 3;
            }
            Jr[b] = -a0 * vi;
            Jr[b + 1] = a1 * vr;
            if (ia == 3)
                Jr[b + 2] = a2 * vr;
            Jr[b + ia] = er;
            Jr[b + ia + 1] = -ei;
            if (Ji) {
                Ji[b] = a0 * vr;
                Ji[b + 1] = a1 * vi;
                if (ia == 3)
                    Ji[b + 2] = a2 * vi;
                Ji[b + ia] = ei;
                Ji[b + ia + 1] = er;
            }
        }
        if (P->cplx) {
            double rr = (creal(M) - P->x[2 * j]) * is, ri = (cimag(M) - P->x[2 * j + 1]) * is;
            if (!isfinite(rr) || !isfinite(ri))
                ok = 0;
            if (rd) {
                rd[2 * i * rstride] = rr;
                rd[(2 * i + 1) * rstride] = ri;
            }
        } else {
            double rr = (creal(M) - P->x[j]) * is;
            if (!isfinite(rr))
                ok = 0;
            if (rd)
                rd[i * rstride] = rr;
        }
    }
    return ok ? 1 : gf_penalty(F, res, J);
}

static int cb_f(const gsl_vector *x, void *params, gsl_vector *f)
{
    gf_fit *F = params;
    F->nfev++;
    if (!cs_gatefit_impl_evaluate(F, x->data, f, NULL))
        F->last_nan = 1;
    return GSL_SUCCESS;
}

/* Lower triangle of J^T J (row-major k x k into G) for the row-major J (n rows, row stride tda,
 * k columns). Each entry is summed over the rows in order from 0.0, as gsl_blas_dsyrk sums it
 * (the same bits with GSL's reference CBLAS), but all entries in one pass over the rows: the
 * matrix is read once instead of k (k + 1) / 2 times with a stride. One decay (k = 4), the fit
 * with the longest gates, keeps its ten sums in registers. */
static void gram_rows(const double *J, size_t n, size_t tda, size_t k, double *G)
{
#if defined(__GNUC__)
    if (k == 4) {
        /* the ten sums in the lanes of five vectors, each lane still summed over the rows in
           order (the same bits): (g00, g10) += a0 (a0, a1), (g20, g30) += a0 (a2, a3),
           (g11, g21) += a1 (a1, a2), (g31, g22) += (a1, a2)(a3, a2), (g32, g33) += a3 (a2, a3) */
        typedef double v2 __attribute__((vector_size(16)));
        v2 s0 = {0, 0}, s1 = {0, 0}, s2 = {0, 0}, s3 = {0, 0}, s4 = {0, 0};
        for (size_t i = 0; i < n; i++, J += tda) {
            v2 a01, a23;
            memcpy(&a01, J, sizeof a01);
            memcpy(&a23, J + 2, sizeof a23);
            v2 b0 = {a01[0], a01[0]}, b1 = {a01[1], a01[1]}, b3 = {a23[1], a23[1]};
            v2 a12 = {a01[1], a23[0]}, a32 = {a23[1], a23[0]};
            s0 += b0 * a01;
            s1 += b0 * a23;
            s2 += b1 * a12;
            s3 += a12 * a32;
            s4 += b3 * a23;
        }
        G[0] = s0[0];
        G[4] = s0[1];
        G[5] = s2[0];
        G[8] = s1[0];
        G[9] = s2[1];
        G[10] = s3[1];
        G[12] = s1[1];
        G[13] = s3[0];
        G[14] = s4[0];
        G[15] = s4[1];
        return;
    }
#endif
    if (k == 4) {
        double g00 = 0, g10 = 0, g11 = 0, g20 = 0, g21 = 0, g22 = 0, g30 = 0, g31 = 0, g32 = 0, g33 = 0;
        for (size_t i = 0; i < n; i++, J += tda) {
            const double a0 = J[0], a1 = J[1], a2 = J[2], a3 = J[3];
            g00 += a0 * a0;
            g10 += a1 * a0;
            g11 += a1 * a1;
            g20 += a2 * a0;
            g21 += a2 * a1;
            g22 += a2 * a2;
            g30 += a3 * a0;
            g31 += a3 * a1;
            g32 += a3 * a2;
            g33 += a3 * a3;
        }
        G[0] = g00;
        G[4] = g10;
        G[5] = g11;
        G[8] = g20;
        G[9] = g21;
        G[10] = g22;
        G[12] = g30;
        G[13] = g31;
        G[14] = g32;
        G[15] = g33;
        return;
    }
    double acc[GF_MAXNP * (GF_MAXNP + 1) / 2];
    const size_t nt = k * (k + 1) / 2;
    for (size_t t = 0; t < nt; t++)
        acc[t] = 0.0;
    for (size_t i = 0; i < n; i++, J += tda)
        for (size_t a = 0, t = 0; a < k; a++)
            for (size_t b = 0; b <= a; b++, t++)
                acc[t] += J[a] * J[b];
    for (size_t a = 0, t = 0; a < k; a++)
        for (size_t b = 0; b <= a; b++, t++)
            G[a * k + b] = acc[t];
}

static int cb_df(const gsl_vector *x, void *params, gsl_matrix *J)
{
    gf_fit *F = params;
    F->njev++;
    cs_gatefit_impl_evaluate(F, x->data, NULL, J);
    gram_rows(J->data, J->size1, J->tda, F->np, F->jtj);
    F->jtj_of = J->data;
    return GSL_SUCCESS;
}

/* ---------------------------------------------------------------- linear solver and scaling */

/* J^T J of the fit's Jacobian callback for the solver and the More scaling of lsq_normal.c (the
 * one-component solver there is GSL's modified Cholesky, as gsl_multifit_nlinear_solver_mcholesky
 * solves it), when it was formed for this very J. */
static const double *gf_normal(const void *owner, const gsl_matrix *J)
{
    const gf_fit *F = owner;
    return F->jtj_of == J->data && F->np == J->size2 ? F->jtj : NULL;
}

/* |dx_j| <= xtol (1 + |x_j|) for every j. */
static int small_step(const gsl_vector *x, const gsl_vector *dx, double xtol)
{
    for (size_t j = 0; j < x->size; j++)
        if (!(fabs(gsl_vector_get(dx, j)) <= xtol * (1.0 + fabs(gsl_vector_get(x, j)))))
            return 0;
    return 1;
}

/* The undamped Gauss-Newton step d from u (np values) by least squares on the Jacobian
 * (truncated SVD, so undetermined directions get no step). Returns 0 when it cannot be formed. */
static int gauss_newton_step(gf_fit *F, const double *u, gsl_matrix *J, gsl_vector *r, gsl_vector *d,
                             gsl_matrix *C, gsl_multifit_linear_workspace *lw)
{
    if (!cs_gatefit_impl_evaluate(F, u, r, J))
        return 0;
    double chisq;
    size_t rank;
    if (gsl_multifit_linear_tsvd(J, r, 1e-12, d, C, &chisq, &rank, lw) != GSL_SUCCESS)
        return 0;
    gsl_vector_scale(d, -1.0);
    for (size_t j = 0; j < d->size; j++)
        if (!isfinite(gsl_vector_get(d, j)))
            return 0;
    return 1;
}

/* Every component of the Gauss-Newton step d below GF_NOPROG_NSE standard errors (C: the
 * covariance gsl_multifit_linear_tsvd returns, scaled by the residuals' variance). */
static int within_errors(const gsl_vector *d, const gsl_matrix *C)
{
    for (size_t j = 0; j < d->size; j++) {
        double v = gsl_matrix_get(C, j, j);
        if (!(v > 0) || !(fabs(gsl_vector_get(d, j)) <= GF_NOPROG_NSE * sqrt(v)))
            return 0;
    }
    return 1;
}

/* The Gauss-Newton step d = -(J^T J)^-1 J^T f at the workspace's current point from its J and
 * f (normal equations, equilibrated, Cholesky), and whether every component of d is below
 * GF_NOPROG_NSE standard errors, the errors from (J^T J)^-1 times chi2/dof over all used
 * samples. Returns 0 when J^T J is not positive definite. A (np x np) and g (np) are scratch. */
static int gn_normal(const gf_fit *F, const gsl_multifit_nlinear_workspace *gw, double fn, gsl_matrix *A,
                     gsl_vector *d, int *within)
{
    const size_t np = F->np;
    *within = 0;
    /* J^T J from the Jacobian callback; g = J^T f is the trust region's own (GSL forms it after
       every Jacobian, by the product this would compute) */
    if (F->jtj_of == gw->J->data) {
        for (size_t a = 0; a < np; a++)
            for (size_t b = 0; b <= a; b++)
                gsl_matrix_set(A, a, b, F->jtj[a * np + b]);
    } else {
        gsl_blas_dsyrk(CblasLower, CblasTrans, 1.0, gw->J, 0.0, A);
    }
    const gsl_vector *g = gw->g;
    double D[CS_GATEFIT_MAX_COMP * CS_GATEFIT_BURST_NPARAMS];
    for (size_t a = 0; a < np; a++) {
        double v = gsl_matrix_get(A, a, a);
        if (!(v > 0) || !isfinite(v))
            return 0;
        D[a] = sqrt(v);
    }
    for (size_t a = 0; a < np; a++)
        for (size_t b = 0; b <= a; b++) {
            double v = gsl_matrix_get(A, a, b) / (D[a] * D[b]);
            gsl_matrix_set(A, a, b, v);
            gsl_matrix_set(A, b, a, v);
        }
    if (gsl_linalg_cholesky_decomp1(A) != GSL_SUCCESS)
        return 0;
    for (size_t a = 0; a < np; a++)
        gsl_vector_set(d, a, -gsl_vector_get(g, a) / D[a]);
    if (gsl_linalg_cholesky_svx(A, d) != GSL_SUCCESS || gsl_linalg_cholesky_invert(A) != GSL_SUCCESS)
        return 0;
    double s2 = (fn * fn + F->rest_ss) / (double)(F->nres_all > np ? F->nres_all - np : 1);
    int ok = 1;
    for (size_t a = 0; a < np; a++) {
        double da = gsl_vector_get(d, a) / D[a], va = gsl_matrix_get(A, a, a) / (D[a] * D[a]) * s2;
        gsl_vector_set(d, a, da);
        if (!isfinite(da) || !(va > 0))
            return 0;
        if (!(fabs(da) <= GF_NOPROG_NSE * sqrt(va)))
            ok = 0;
    }
    *within = ok;
    return 1;
}

/* Run the trust-region solver from u (np values, updated to the last point reached). */
int cs_gatefit_impl_solve(gf_fit *F, const cs_gatefit_options *o, double *u, cs_gatefit_result *r,
                          cs_error *err)
{
    gsl_multifit_nlinear_parameters fp = gsl_multifit_nlinear_default_parameters();
    fp.trs = gsl_multifit_nlinear_trs_lm;
    fp.scale = &cs_lsq_scale_more;
    /* one component: Cholesky (its J is well conditioned in u); sums of components: QR (they
       can be nearly degenerate, e.g. two decays for one line, where the normal equations
       square the condition number) */
    fp.solver = F->P.ncomp == 1 ? &cs_lsq_solver_mcholesky : gsl_multifit_nlinear_solver_qr;
    F->jtj_of = NULL;
    cs_lsq_normal_bind(gf_normal, F);
    gsl_multifit_nlinear_workspace *gw =
        gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &fp, F->nres, F->np);
    gsl_matrix *Jg = gsl_matrix_alloc(F->nres, F->np), *Cg = gsl_matrix_alloc(F->np, F->np);
    gsl_vector *rg = gsl_vector_alloc(F->nres), *dg = gsl_vector_alloc(F->np);
    gsl_vector *ug = gsl_vector_alloc(F->np);
    gsl_multifit_linear_workspace *lw = gsl_multifit_linear_alloc(F->nres, F->np);
    int rc = CS_OK;
    if (!gw || !Jg || !Cg || !rg || !dg || !ug || !lw) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the solver");
        goto done;
    }
    gsl_multifit_nlinear_fdf fdf;
    memset(&fdf, 0, sizeof fdf);
    fdf.f = cb_f;
    fdf.df = cb_df;
    fdf.fvv = NULL;
    fdf.n = F->nres;
    fdf.p = F->np;
    fdf.params = F;
    gsl_vector_view u0 = gsl_vector_view_array(u, F->np);
    r->status = CS_FIT_NOT_CONVERGED;
    r->stop = CS_FIT_STOP_NONE;
    int s = gsl_multifit_nlinear_winit(&u0.vector, NULL, &fdf, gw);
    size_t iter = 0;
    if (s != GSL_SUCCESS || F->last_nan) {
        r->status = CS_FIT_MODEL_NAN;
        r->stop = CS_FIT_STOP_MODEL_NAN;
        if (s == GSL_ENOMEM)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        goto done;
    }
    int polish = 0;   /* end with the Gauss-Newton step dg */
    for (;;) {
        if (iter >= o->max_iter) {
            r->stop = CS_FIT_STOP_MAX_ITER;
            break;
        }
        F->last_nan = 0;
        s = gsl_multifit_nlinear_iterate(gw);
        iter++;
        if (s == GSL_ENOPROG) {
            /* the trust region saw no decrease: converged when the Gauss-Newton step that is
             * left is below 1e4 xtol (far below any statistical error), else stuck */
            r->stop = CS_FIT_STOP_NO_PROGRESS;
            if (!F->last_nan && gauss_newton_step(F, gw->x->data, Jg, rg, dg, Cg, lw) &&
                (small_step(gw->x, dg, GF_NOPROG_XTOL * o->xtol) || within_errors(dg, Cg))) {
                r->status = CS_FIT_CONVERGED;
                polish = 1;
            } else if (F->last_nan) {
                r->status = CS_FIT_MODEL_NAN;
                r->stop = CS_FIT_STOP_MODEL_NAN;
            }
            break;
        }
        if (s != GSL_SUCCESS) {
            r->stop = CS_FIT_STOP_NO_PROGRESS;
            break;
        }
        if (small_step(gw->x, gw->dx, o->xtol)) {
            r->status = CS_FIT_CONVERGED;
            r->stop = CS_FIT_STOP_SMALL_STEP;
            break;
        }
        /* near the end the damped steps shrink only linearly: look at the full step */
        if (small_step(gw->x, gw->dx, GF_NOPROG_XTOL * o->xtol) &&
            gauss_newton_step(F, gw->x->data, Jg, rg, dg, Cg, lw) && small_step(gw->x, dg, o->xtol)) {
            r->status = CS_FIT_CONVERGED;
            r->stop = CS_FIT_STOP_SMALL_STEP;
            polish = 1;
            break;
        }
        /* GSL's gradient test, max_j |g_j| max(u_j, 1) <= gtol max(|f|^2 / 2, 1), with |f|^2 over
           every used sample (the constant residuals after the active stretch included); gw->g
           = J^T f is kept by the trust region */
        double gnorm = 0.0, fn = gsl_blas_dnrm2(gw->f);
        for (size_t j = 0; j < F->np; j++)
            gnorm = fmax(gnorm, fabs(fmax(gsl_vector_get(gw->x, j), 1.0) * gsl_vector_get(gw->g, j)));
        if (gnorm <= o->gtol * fmax(0.5 * (fn * fn + F->rest_ss), 1.0)) {
            r->status = CS_FIT_CONVERGED;
            r->stop = CS_FIT_STOP_SMALL_GRADIENT;
            break;
        }
        /* the minimum (the Gauss-Newton step from here) within GF_NOPROG_NSE standard errors:
           converged; the step is applied as the last one */
        int within = 0;
        if (gn_normal(F, gw, fn, Cg, dg, &within) && within) {
            r->status = CS_FIT_CONVERGED;
            r->stop = CS_FIT_STOP_SMALL_STEP;
            polish = 1;
            break;
        }
    }
    memcpy(u, gw->x->data, F->np * sizeof *u);
    if (polish) {
        /* apply the Gauss-Newton step unless the cost rises beyond rounding */
        double c0 = gsl_blas_dnrm2(gw->f), c1;
        for (size_t j = 0; j < F->np; j++)
            gsl_vector_set(ug, j, u[j] + gsl_vector_get(dg, j));
        if (cs_gatefit_impl_evaluate(F, ug->data, rg, NULL) && (c1 = gsl_blas_dnrm2(rg)) <= c0 * (1.0 + 1e-12))
            memcpy(u, ug->data, F->np * sizeof *u);
    }
    r->niter = iter;
done:
    cs_lsq_normal_bind(NULL, NULL);
    F->jtj_of = NULL;
    gsl_multifit_linear_free(lw);
    gsl_vector_free(ug);
    gsl_vector_free(dg);
    gsl_vector_free(rg);
    gsl_matrix_free(Cg);
    gsl_matrix_free(Jg);
    gsl_multifit_nlinear_free(gw);
    return rc;
}

/* ---------------------------------------------------------------- results */

/* d(reported parameter)/du: up to three (variable, coefficient) pairs per reported parameter. */
typedef struct gf_grad {
    size_t n;
    size_t var[3];
    double g[3];
} gf_grad;

static void reported_gradients(const gf_fit *F, const gf_theta *th, gf_grad *G)
{
    for (size_t k = 0; k < F->P.ncomp; k++) {
        size_t b = F->first[k];
        gf_grad *g = G + b;
        /* c_r: the amplitude at t_g + sref, the one the variables hold */
        double ph = 2.0 * PI_ * th->f[k] * F->sref[k];
        double complex c_r = th->c[k] * (cos(ph) + I * sin(ph));
        double cr = creal(c_r), ci = cimag(c_r), A2 = cr * cr + ci * ci, A = sqrt(A2);
        size_t ia = F->P.kind[k] == CS_GATEFIT_DECAY ? 2 : 3;   /* amplitude / phase slots */
        g[0] = (gf_grad){1, {b, 0, 0}, {F->sf[k], 0, 0}};
        g[1] = (gf_grad){1, {b + 1, 0, 0}, {th->rate[k], 0, 0}};   /* Gamma or tau: d e^u = e^u du */
        if (F->P.kind[k] == CS_GATEFIT_BURST)
            g[2] = (gf_grad){1, {b + 2, 0, 0}, {F->tau0[k], 0, 0}};
        g[ia] = (gf_grad){2, {b + ia, b + ia + 1, 0}, {F->a_ref * cr / A, F->a_ref * ci / A, 0}};
        /* phi = arg(c_r) - 2 pi f sref */
        g[ia + 1] = (gf_grad){3, {b + ia, b + ia + 1, b},
                              {-F->a_ref * ci / A2, F->a_ref * cr / A2, -2.0 * PI_ * F->sref[k] * F->sf[k]}};
    }
}

void cs_gatefit_impl_values(const gf_fit *F, const gf_theta *th, double *val)
{
    for (size_t k = 0; k < F->P.ncomp; k++) {
        double *v = val + F->first[k];
        v[0] = F->lo + th->f[k];
        v[1] = th->rate[k];
        size_t ia = 2;
        if (F->P.kind[k] == CS_GATEFIT_BURST) {
            v[2] = F->t_g + th->tp[k];
            ia = 3;
        }
        v[ia] = cabs(th->c[k]);
        v[ia + 1] = carg(th->c[k]);
    }
}

/* (J_e^T J_e)^-1 of the equilibrated Jacobian J_e (columns of unit norm; cn: the norms) from the
 * k x k matrix J^T J alone, when that is certain to give what the pivoted QR of J_e would: the
 * QR route (gsl_multifit_nlinear_covar) drops a column when |R_jj| <= GF_RANK_RTOL |R_11|, and
 * for any order of the columns |R_jj| >= sigma_min(J_e) while |R_11| = 1 (unit columns), so no
 * column is dropped when sigma_min(J_e) > GF_RANK_RTOL; and sigma_min^2 >= 1 / trace((J_e^T
 * J_e)^-1). This route is taken only when that bound exceeds GF_SMALL_SMIN2 = 1e-8
 * (sigma_min > 1e-4): far from the rank threshold, and with the inverse's condition number at
 * most k 1e8, so the normal equations' rounding (about k eps relative in J^T J) moves the
 * covariance by at most ~1e-7 relative in the worst case and typically by 1e-15 (one
 * well-determined component: condition numbers of order 10). Otherwise (0 returned) the caller
 * takes the QR route. The QR of the thousands x 4 Jacobian and its copy were most of the
 * covariance's cost. Returns 1 with C (k x k, full) and cn filled. */
#define GF_SMALL_SMIN2 1e-8

static int small_covariance(const gsl_matrix *J, size_t k, double *cn, gsl_matrix *C)
{
    double G[GF_MAXNP * GF_MAXNP];
    gram_rows(J->data, J->size1, J->tda, k, G);
    for (size_t a = 0; a < k; a++) {
        double v = G[a * k + a];
        if (!(v >= 1e-280 && v <= 1e280))
            return 0;
        cn[a] = sqrt(v);
    }
    for (size_t a = 0; a < k; a++)
        for (size_t b = 0; b <= a; b++)
            gsl_matrix_set(C, a, b, G[a * k + b] / (cn[a] * cn[b]));
    gsl_error_handler_t *old = gsl_set_error_handler_off();
    int st = gsl_linalg_cholesky_decomp1(C);
    if (st == GSL_SUCCESS)
        st = gsl_linalg_cholesky_invert(C);
    gsl_set_error_handler(old);
    if (st != GSL_SUCCESS)
        return 0;
    double tr = 0.0;
    for (size_t a = 0; a < k; a++) {
        double v = gsl_matrix_get(C, a, a);
        if (!(v > 0) || !isfinite(v))
            return 0;
        tr += v;
    }
    if (!(1.0 / tr > GF_SMALL_SMIN2))
        return 0;
    for (size_t a = 0; a < k; a++)   /* symmetric: the lower triangle is the reference */
        for (size_t b = a + 1; b < k; b++)
            gsl_matrix_set(C, a, b, gsl_matrix_get(C, b, a));
    return 1;
}

/* Covariance of the reported parameters into r->cov (NaN rows when undetermined); sets
 * *singular. factor = sigma^2 / s_fit^2. */
int cs_gatefit_impl_covariance(gf_fit *F, const double *u, const gf_theta *th, double factor,
                               cs_gatefit_result *r, int *singular, cs_error *err)
{
    const size_t np = F->np;
    gsl_matrix *J = gsl_matrix_alloc(F->nres, np), *C = gsl_matrix_alloc(np, np);
    double *cn = malloc(np * sizeof *cn);
    gf_grad *G = malloc(np * sizeof *G);
    int rc = CS_OK;
    *singular = 0;
    if (!J || !C || !cn || !G) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the covariance");
        goto done;
    }
    cs_gatefit_impl_evaluate(F, u, NULL, J);
    if (!small_covariance(J, np, cn, C)) {
        for (size_t q = 0; q < np; q++) {
            gsl_vector_view col = gsl_matrix_column(J, q);
            cn[q] = gsl_blas_dnrm2(&col.vector);
            if (cn[q] > 0)
                gsl_vector_scale(&col.vector, 1.0 / cn[q]);
        }
        if (gsl_multifit_nlinear_covar(J, GF_RANK_RTOL, C) != GSL_SUCCESS) {
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "covariance failed");
            goto done;
        }
    }
    for (size_t a = 0; a < np; a++) {   /* undo the equilibration; mark undetermined variables */
        int und = !(cn[a] > 0) || !(gsl_matrix_get(C, a, a) > 0);
        *singular |= und;
        for (size_t b = 0; b < np; b++) {
            double v = gsl_matrix_get(C, a, b) / (cn[a] * cn[b]) * factor;
            gsl_matrix_set(C, a, b, v);
        }
        if (und)
            for (size_t b = 0; b < np; b++) {
                gsl_matrix_set(C, a, b, NAN);
                gsl_matrix_set(C, b, a, NAN);
            }
    }
    reported_gradients(F, th, G);
    for (size_t a = 0; a < np; a++)
        for (size_t b = 0; b < np; b++) {
            double s = 0.0;
            for (size_t i = 0; i < G[a].n; i++)
                for (size_t j = 0; j < G[b].n; j++)
                    if (G[a].g[i] != 0 && G[b].g[j] != 0)   /* 0 x NaN: no dependence */
                        s += G[a].g[i] * G[b].g[j] * gsl_matrix_get(C, G[a].var[i], G[b].var[j]);
            r->cov[a * np + b] = s;
        }
done:
    free(G);
    free(cn);
    gsl_matrix_free(C);
    gsl_matrix_free(J);
    return rc;
}

