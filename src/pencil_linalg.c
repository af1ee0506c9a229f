/* Matrix pencil: poles of the reduced pencil, small complex inverses, Vandermonde amplitudes. */
/*
 * See items 2 and 3 at the top of pencil.c: the poles are the eigenvalues of the complex M x M
 * matrix Phi, found through the real embedding of Phi + i h I with GSL's real non-symmetric
 * eigensolver; the amplitudes are the least-squares solution of the Vandermonde system by
 * complex Householder QR.
 */
#include <collshift/pencil.h>

#include "pencil_impl.h"

#include <gsl/gsl_blas.h>
#include <gsl/gsl_eigen.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_permutation.h>
#include <gsl/gsl_vector.h>

#include <math.h>
#include <stdlib.h>

/* ---------------------------------------------------------------- the reduced pencil */

/* Eigenvalues z (M) of the complex M x M matrix Phi (row-major) and unit right eigenvectors
 * (column k of Rv, row-major M x M), through the real embedding of Phi + i h I (see the top). */
int pencil_poles(const cplx *Phi, size_t M, cplx *z, cplx *Rv)
{
    size_t M2 = 2 * M;
    double h = 1.0;
    for (size_t i = 0; i < M * M; i++)
        h += cabs(Phi[i]) * cabs(Phi[i]);
    h = sqrt(h - 1.0) + 1.0;
    int status = CS_ENOMEM;
    gsl_matrix *R = gsl_matrix_alloc(M2, M2);
    gsl_vector_complex *ev = gsl_vector_complex_alloc(M2);
    gsl_matrix_complex *V = gsl_matrix_complex_alloc(M2, M2);
    gsl_eigen_nonsymmv_workspace *w = gsl_eigen_nonsymmv_alloc(M2);
    if (!R || !ev || !V || !w)
        goto done;
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++) {
            cplx a = Phi[i * M + j] + (i == j ? I * h : 0);
            gsl_matrix_set(R, i, j, creal(a));
            gsl_matrix_set(R, i, j + M, -cimag(a));
            gsl_matrix_set(R, i + M, j, cimag(a));
            gsl_matrix_set(R, i + M, j + M, creal(a));
        }
    status = CS_ENOCONV;
    if (gsl_eigen_nonsymmv(R, ev, V, w) != GSL_SUCCESS)
        goto done;
    size_t cnt = 0;
    for (size_t c = 0; c < M2; c++) {
        cplx mu = from_gsl(gsl_vector_complex_get(ev, c));
        if (!(cimag(mu) > 0.0))
            continue;
        if (cnt == M)
            goto done;
        z[cnt] = mu - I * h;
        double nrm = 0.0;
        for (size_t i = 0; i < M; i++) {
            cplx w1 = from_gsl(gsl_matrix_complex_get(V, i, c));
            cplx w2 = from_gsl(gsl_matrix_complex_get(V, i + M, c));
            cplx x = 0.5 * (w1 + I * w2);
            Rv[i * M + cnt] = x;
            nrm += creal(x) * creal(x) + cimag(x) * cimag(x);
        }
        nrm = sqrt(nrm);
        if (!(nrm > 0.0))
            goto done;
        for (size_t i = 0; i < M; i++)
            Rv[i * M + cnt] /= nrm;
        cnt++;
    }
    status = cnt == M ? CS_OK : CS_ENOCONV;
done:
    gsl_matrix_free(R);
    gsl_vector_complex_free(ev);
    gsl_matrix_complex_free(V);
    if (w)
        gsl_eigen_nonsymmv_free(w);
    return status;
}

/* Inverse of the complex M x M matrix A (row-major) into Ainv. CS_EDATA when singular. */
int pencil_complex_inverse(const cplx *A, size_t M, cplx *Ainv)
{
    int status = CS_ENOMEM, signum;
    gsl_matrix_complex *LU = gsl_matrix_complex_alloc(M, M);
    gsl_matrix_complex *inv = gsl_matrix_complex_alloc(M, M);
    gsl_permutation *perm = gsl_permutation_alloc(M);
    if (!LU || !inv || !perm)
        goto done;
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++)
            gsl_matrix_complex_set(LU, i, j, to_gsl(A[i * M + j]));
    status = CS_EDATA;
    if (gsl_linalg_complex_LU_decomp(LU, perm, &signum) != GSL_SUCCESS)
        goto done;
    for (size_t i = 0; i < M; i++)
        if (cabs(from_gsl(gsl_matrix_complex_get(LU, i, i))) == 0.0)
            goto done;
    if (gsl_linalg_complex_LU_invert(LU, perm, inv) != GSL_SUCCESS)
        goto done;
    for (size_t i = 0; i < M; i++)
        for (size_t j = 0; j < M; j++) {
            Ainv[i * M + j] = from_gsl(gsl_matrix_complex_get(inv, i, j));
            if (!isfinite(creal(Ainv[i * M + j])) || !isfinite(cimag(Ainv[i * M + j])))
                goto done;
        }
    status = CS_OK;
done:
    gsl_matrix_complex_free(LU);
    gsl_matrix_complex_free(inv);
    gsl_permutation_free(perm);
    return status;
}

/* 1-norm condition number of the M x M matrix A given its inverse. */
double pencil_cond1(const cplx *A, const cplx *Ainv, size_t M)
{
    double na = 0.0, ni = 0.0;
    for (size_t j = 0; j < M; j++) {
        double sa = 0.0, si = 0.0;
        for (size_t i = 0; i < M; i++) {
            sa += cabs(A[i * M + j]);
            si += cabs(Ainv[i * M + j]);
        }
        na = fmax(na, sa);
        ni = fmax(ni, si);
    }
    return na * ni;
}

/* ---------------------------------------------------------------- amplitudes */

/* Least-squares amplitudes a (M) of y (N) on the Vandermonde columns Z[t][k] = z_k^t (given
 * row-major in Zc, N x M) and the pseudo-inverse Zp (M x N, row-major). *rss gets the residual
 * sum of squares. */
int pencil_amplitudes(const cplx *Zc, const cplx *y, size_t N, size_t M, cplx *a, cplx *Zp,
                      double *rss)
{
    int status = CS_ENOMEM;
    gsl_matrix_complex *QR = gsl_matrix_complex_alloc(N, M);
    gsl_matrix_complex *B = gsl_matrix_complex_alloc(M, N);
    gsl_vector_complex *tau = gsl_vector_complex_alloc(M);
    gsl_vector_complex *b = gsl_vector_complex_alloc(N), *res = gsl_vector_complex_alloc(N);
    gsl_vector_complex *x = gsl_vector_complex_alloc(M), *e = gsl_vector_complex_alloc(N);
    if (!QR || !B || !tau || !b || !res || !x || !e)
        goto done;
    for (size_t t = 0; t < N; t++) {
        for (size_t k = 0; k < M; k++)
            gsl_matrix_complex_set(QR, t, k, to_gsl(Zc[t * M + k]));
        gsl_vector_complex_set(b, t, to_gsl(y[t]));
    }
    status = CS_EDATA;
    if (gsl_linalg_complex_QR_decomp(QR, tau) != GSL_SUCCESS)
        goto done;
    for (size_t k = 0; k < M; k++)
        if (cabs(from_gsl(gsl_matrix_complex_get(QR, k, k))) == 0.0)
            goto done;
    if (gsl_linalg_complex_QR_lssolve(QR, tau, b, x, res) != GSL_SUCCESS)
        goto done;
    double s = 0.0;
    for (size_t t = 0; t < N; t++) {
        cplx r = from_gsl(gsl_vector_complex_get(res, t));
        s += creal(r) * creal(r) + cimag(r) * cimag(r);
    }
    *rss = s;
    for (size_t k = 0; k < M; k++) {
        a[k] = from_gsl(gsl_vector_complex_get(x, k));
        if (!isfinite(creal(a[k])) || !isfinite(cimag(a[k])))
            goto done;
    }
    /* pinv(Z) = R^-1 Q1^H, Q1 the first M columns of Q */
    for (size_t k = 0; k < M; k++) {
        gsl_vector_complex_set_zero(e);
        gsl_vector_complex_set(e, k, to_gsl(1.0));
        if (gsl_linalg_complex_QR_Qvec(QR, tau, e) != GSL_SUCCESS)
            goto done;
        for (size_t t = 0; t < N; t++)
            gsl_matrix_complex_set(B, k, t, to_gsl(conj(from_gsl(gsl_vector_complex_get(e, t)))));
    }
    gsl_matrix_complex_const_view R = gsl_matrix_complex_const_submatrix(QR, 0, 0, M, M);
    if (gsl_blas_ztrsm(CblasLeft, CblasUpper, CblasNoTrans, CblasNonUnit, to_gsl(1.0),
                       &R.matrix, B) != GSL_SUCCESS)
        goto done;
    for (size_t k = 0; k < M; k++)
        for (size_t t = 0; t < N; t++)
            Zp[k * N + t] = from_gsl(gsl_matrix_complex_get(B, k, t));
    status = CS_OK;
done:
    gsl_matrix_complex_free(QR);
    gsl_matrix_complex_free(B);
    gsl_vector_complex_free(tau);
    gsl_vector_complex_free(b);
    gsl_vector_complex_free(res);
    gsl_vector_complex_free(x);
    gsl_vector_complex_free(e);
    return status;
}
