/* A linear solver and More's scaling for GSL's nonlinear least-squares trust region
 * (gsl_multifit_nlinear_parameters.solver and .scale) that take J^T J from the caller's Jacobian
 * callback, which forms it while it writes J: one pass over the data per Jacobian instead of a
 * gsl_blas_dsyrk per iteration and a strided gsl_blas_dnrm2 per column. GSL's own
 * Levenberg-Marquardt logic (trust region, damping, acceptance) is unchanged; only these two
 * pluggable pieces, which GSL lets its caller supply, are ours. Used by the spectrum fits
 * (fit_solve.c) and the gate-aware fits (gatefit_solve.c), each binding its workspace's J^T J for
 * the solve (cs_lsq_normal_bind). */
#include "lsq_normal_impl.h"

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_permutation.h>

#include <math.h>
#include <stdlib.h>

/* The source of J^T J for the solve running in this thread. */
static _Thread_local cs_lsq_normal_fn *normal_fn;
static _Thread_local const void *normal_owner;

void cs_lsq_normal_bind(cs_lsq_normal_fn *fn, const void *owner)
{
    normal_fn = fn;
    normal_owner = fn ? owner : NULL;
}

const double *cs_lsq_normal_for(const gsl_matrix *J)
{
    return normal_fn ? normal_fn(normal_owner, J) : NULL;
}

/* The trust region's linear solver: (J^T J + mu D^2) v = -J^T f by GSL's modified Cholesky
 * decomposition (gsl_linalg_mcholesky_*), as gsl_multifit_nlinear_solver_mcholesky solves it,
 * but with J^T J taken from the Jacobian callback, which forms it while it writes J (one pass
 * over the data instead of a second one through gsl_blas_dsyrk), and with -J^T f taken from the
 * trust region's gradient g = J^T f whenever f is the current residual vector (GSL computes g
 * right after each Jacobian; only the geodesic acceleration's right-hand side needs a product).
 * Without the callback's matrix (no source bound, or another J) it forms J^T J itself. */
typedef struct lsq_chol {
    gsl_matrix *jtj;    /* J^T J (lower triangle) */
    gsl_matrix *work;   /* J^T J + mu D^2, then its factor */
    gsl_vector *rhs;
    gsl_vector *work3;  /* 3k: condition estimate */
    gsl_permutation *perm;
    double mu;          /* the damping of the factor in work; -1: none */
} lsq_chol;

static void chol_free(void *vs)
{
    lsq_chol *s = vs;
    if (!s)
        return;
    gsl_matrix_free(s->jtj);
    gsl_matrix_free(s->work);
    gsl_vector_free(s->rhs);
    gsl_vector_free(s->work3);
    gsl_permutation_free(s->perm);
    free(s);
}

static void *chol_alloc(const size_t n, const size_t k)
{
    (void)n;
    lsq_chol *s = calloc(1, sizeof *s);
    if (!s)
        return NULL;
    s->jtj = gsl_matrix_alloc(k, k);
    s->work = gsl_matrix_alloc(k, k);
    s->rhs = gsl_vector_alloc(k);
    s->work3 = gsl_vector_alloc(3 * k);
    s->perm = gsl_permutation_alloc(k);
    s->mu = -1.0;
    if (!s->jtj || !s->work || !s->rhs || !s->work3 || !s->perm) {
        chol_free(s);
        return NULL;
    }
    return s;
}

static int chol_init(const void *vts, void *vs)
{
    const gsl_multifit_nlinear_trust_state *ts = vts;
    lsq_chol *s = vs;
    const size_t k = s->jtj->size1;
    const double *a = ts->J->size2 == k ? cs_lsq_normal_for(ts->J) : NULL;
    if (a) {
        for (size_t r = 0; r < k; r++)
            for (size_t c = 0; c <= r; c++)
                gsl_matrix_set(s->jtj, r, c, a[r * k + c]);
    } else {
        gsl_blas_dsyrk(CblasLower, CblasTrans, 1.0, ts->J, 0.0, s->jtj);
    }
    s->mu = -1.0;
    return GSL_SUCCESS;
}

/* Factor the lower triangle of jtj + mu D^2 into s->work. */
static int chol_factor(lsq_chol *s, double mu, const gsl_vector *diag)
{
    const size_t k = s->jtj->size1;
    for (size_t r = 0; r < k; r++)
        for (size_t c = 0; c <= r; c++)
            gsl_matrix_set(s->work, r, c, gsl_matrix_get(s->jtj, r, c));
    if (mu != 0.0)
        for (size_t r = 0; r < k; r++) {
            double d = gsl_vector_get(diag, r);
            *gsl_matrix_ptr(s->work, r, r) += mu * d * d;
        }
    int st = gsl_linalg_mcholesky_decomp(s->work, s->perm, NULL);
    s->mu = st == GSL_SUCCESS ? mu : -1.0;
    return st;
}

static int chol_presolve(const double mu, const void *vts, void *vs)
{
    const gsl_multifit_nlinear_trust_state *ts = vts;
    return chol_factor(vs, mu, ts->diag);
}

static int chol_solve(const gsl_vector *f, gsl_vector *x, const void *vts, void *vs)
{
    const gsl_multifit_nlinear_trust_state *ts = vts;
    lsq_chol *s = vs;
    if (f == ts->f) {
        /* -J^T f = -g, exactly as the product would give it */
        for (size_t j = 0; j < x->size; j++)
            gsl_vector_set(s->rhs, j, -gsl_vector_get(ts->g, j));
    } else {
        gsl_blas_dgemv(CblasTrans, -1.0, ts->J, f, 0.0, s->rhs);
    }
    return gsl_linalg_mcholesky_solve(s->work, s->perm, s->rhs, x);
}

static int chol_rcond(double *rcond, void *vs)
{
    lsq_chol *s = vs;
    if (s->mu != 0.0) {
        int st = chol_factor(s, 0.0, NULL);
        if (st != GSL_SUCCESS)
            return st;
    }
    double rc;
    int st = gsl_linalg_mcholesky_rcond(s->work, s->perm, &rc, s->work3);
    if (st == GSL_SUCCESS)
        *rcond = sqrt(rc);
    return st;
}

/* More's scaling (J. J. More, "The Levenberg-Marquardt algorithm: implementation and theory",
 * Numerical Analysis, Springer LNM 630, 105-116 (1978)): D_jj = the largest norm
 * column j of the Jacobian has had in this solve (1 for a zero column), as
 * gsl_multifit_nlinear_scale_more keeps it, with the norms summed in one pass over the rows
 * instead of one strided gsl_blas_dnrm2 per column (the Jacobian's entries are of order one, so
 * the plain sum of squares neither overflows nor underflows; a column where it did gets
 * gsl_blas_dnrm2). */
static int scale_update(const gsl_matrix *J, gsl_vector *diag)
{
    enum { MAXK = 64 };
    const size_t n = J->size1, k = J->size2;
    const double *a = cs_lsq_normal_for(J);
    double ss[MAXK];
    if (a) {
        /* the Jacobian callback has just formed J^T J for this J: its diagonal */
        for (size_t j = 0; j < k; j++) {
            double nr = sqrt(a[j * k + j]);
            double *d = gsl_vector_ptr(diag, j);
            *d = fmax(*d, nr == 0.0 ? 1.0 : nr);
        }
        return GSL_SUCCESS;
    }
    if (k > MAXK) {
        for (size_t j = 0; j < k; j++) {
            gsl_vector_const_view c = gsl_matrix_const_column(J, j);
            double nr = gsl_blas_dnrm2(&c.vector);
            double *d = gsl_vector_ptr(diag, j);
            *d = fmax(*d, nr == 0.0 ? 1.0 : nr);
        }
        return GSL_SUCCESS;
    }
    for (size_t j = 0; j < k; j++)
        ss[j] = 0.0;
    for (size_t i = 0; i < n; i++) {
        const double *row = J->data + i * J->tda;
        for (size_t j = 0; j < k; j++)
            ss[j] += row[j] * row[j];
    }
    for (size_t j = 0; j < k; j++) {
        double nr = sqrt(ss[j]);
        if (!(ss[j] >= 1e-280 && ss[j] <= 1e280)) {
            gsl_vector_const_view c = gsl_matrix_const_column(J, j);
            nr = gsl_blas_dnrm2(&c.vector);
        }
        double *d = gsl_vector_ptr(diag, j);
        *d = fmax(*d, nr == 0.0 ? 1.0 : nr);
    }
    return GSL_SUCCESS;
}

static int scale_init(const gsl_matrix *J, gsl_vector *diag)
{
    gsl_vector_set_zero(diag);
    return scale_update(J, diag);
}

const gsl_multifit_nlinear_scale cs_lsq_scale_more = {"collshift-more", scale_init, scale_update};

const gsl_multifit_nlinear_solver cs_lsq_solver_mcholesky = {"collshift-mcholesky", chol_alloc, chol_init,
                                                              chol_presolve, chol_solve, chol_rcond,
                                                              chol_free};
