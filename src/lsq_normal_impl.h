/* Private interface of lsq_normal.c: a linear solver and More's scaling for GSL's nonlinear
 * least-squares trust region that take J^T J from the caller's Jacobian callback (used by the
 * spectrum fits, fit_solve.c, and the gate-aware fits, gatefit_solve.c). */
#ifndef CS_LSQ_NORMAL_IMPL_H
#define CS_LSQ_NORMAL_IMPL_H

#include <gsl/gsl_matrix.h>
#include <gsl/gsl_multifit_nlinear.h>

#if defined(__GNUC__)
#define CS_LSQ_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_LSQ_INTERNAL
#endif

/* J^T J (k x k, row-major, at least its lower triangle) that the caller's Jacobian callback
 * formed while writing this very J (k = J->size2), or NULL when it has none for J. */
typedef const double *cs_lsq_normal_fn(const void *owner, const gsl_matrix *J);

/* The source of J^T J for the solves that run in this thread from now on (the solver and the
 * scaling below ask it; GSL hands the scaling J alone); fn NULL: none (they then form the sums
 * themselves). Bind before gsl_multifit_nlinear_winit, unbind (NULL) when the solve is over. */
CS_LSQ_INTERNAL void cs_lsq_normal_bind(cs_lsq_normal_fn *fn, const void *owner);

/* What the bound source has for J (NULL: nothing). */
CS_LSQ_INTERNAL const double *cs_lsq_normal_for(const gsl_matrix *J);

/* The trust region's linear solver (gsl_multifit_nlinear_parameters.solver) and scaling
 * (.scale); see lsq_normal.c. */
CS_LSQ_INTERNAL extern const gsl_multifit_nlinear_solver cs_lsq_solver_mcholesky;
CS_LSQ_INTERNAL extern const gsl_multifit_nlinear_scale cs_lsq_scale_more;

#endif /* CS_LSQ_NORMAL_IMPL_H */
