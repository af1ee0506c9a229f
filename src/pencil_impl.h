/* Private interface of the matrix-pencil sources: Hankel products, the subspace, small solvers. */
#ifndef CS_PENCIL_IMPL_H
#define CS_PENCIL_IMPL_H

#include <collshift/pencil.h>

/* gsl_complex stays GSL's struct whatever the compiler (GSL would otherwise make it the C99
 * type when <complex.h> is seen, depending on the compiler); values cross by to_gsl/from_gsl.
 * Every pencil source includes this header before any GSL header. */
#define GSL_COMPLEX_LEGACY 1
#include <complex.h>
#include <gsl/gsl_complex.h>

#include <collshift/gate.h>
#include <fftw3.h>   /* after <complex.h>: fftw_complex is then double complex */

#include <stddef.h>

/* Functions shared between the pencil sources but not part of the library's interface. */
#if defined(__GNUC__)
#define CS_PENCIL_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_PENCIL_INTERNAL
#endif

#define PI 3.14159265358979323846264338327950288

typedef double complex cplx;

static inline gsl_complex to_gsl(cplx z)
{
    gsl_complex g;
    GSL_SET_COMPLEX(&g, creal(z), cimag(z));
    return g;
}

static inline cplx from_gsl(gsl_complex g)
{
    return GSL_REAL(g) + I * GSL_IMAG(g);
}

/* ---------------------------------------------------------------- pencil_subspace.c */

/* The record and what the products X v, X^H w need. X = Y^T is n x m, X[j][i] = y[i + j]. */
typedef struct hankel {
    size_t N, n, m, P;       /* samples, columns of Y (L + 1), rows of Y (N - L), FFT length */
    cplx *y;                 /* N samples (owned by the caller of pencil_hankel_init) */
    cplx *yhat;              /* FFT of y padded to P (fftw_malloc) */
    cplx *buf, *buf2;        /* P scratch each (fftw_malloc, so FFTW's alignment) */
    fftw_plan fwd;           /* in-place forward transform of length P, owned by the gate
                                workspace's plan cache (valid while it keeps it: the pencil makes
                                no other plans on it meanwhile) */
} hankel;

/* What the order rule needs and produces. */
typedef struct order_ctl {
    size_t fixed;          /* fixed order, or 0 */
    size_t mcap;           /* largest automatic order */
    cs_pencil_order_rule rule;
    double noise_threshold, rel_threshold;
    double trace;          /* trace of G */
} order_ctl;

/* The Krylov iteration's output. */
typedef struct ritz {
    size_t K;              /* eigenpairs computed */
    double *theta;         /* K eigenvalues, descending */
    cplx *S;               /* n x K: the M eigenvectors used, vector i at S + i n (the others 0) */
    size_t M;              /* the order chosen from theta */
    double floor;          /* noise floor (singular-value units) */
    size_t dim;            /* final basis size */
    double worst;          /* largest relative residual of the M vectors */
    int converged;
} ritz;

/* Prepare the products with the Hankel matrix of y (N samples, borrowed, kept by h) for the pencil
 * parameter L: the FFT of y padded to an FFTW-friendly length P >= N (cs_gate_fast_size,
 * 2^a 3^b 5^c 7^d), with the forward plan of length P taken from (or made in) gws's plan cache.
 * CS_OK, CS_ENOMEM, or as gate planning fails (CS_ERANGE, CS_EUNSUP; then *err says why). */
CS_PENCIL_INTERNAL int pencil_hankel_init(hankel *h, cs_gate_workspace *gws, cplx *y, size_t N,
                                          size_t L, cs_error *err);
CS_PENCIL_INTERNAL void pencil_hankel_release(hankel *h);

/* X^H v (length m) for v of length n. */
CS_PENCIL_INTERNAL void pencil_hankel_xh(hankel *h, const cplx *v, cplx *out);

/* Linear convolution c[t] = sum_j u[j] g[t - j] of u (n) and g (m), t < N. */
CS_PENCIL_INTERNAL void pencil_hankel_conv(hankel *h, const cplx *u, const cplx *g, cplx *c);

/* The K leading eigenpairs of G = X X^H by block Krylov iteration, and the order they imply
 * (oc); out->theta and out->S are allocated here and freed by the caller. CS_OK, CS_ENOMEM or
 * CS_ENOCONV (GSL failed); out->converged says whether the tolerances were met. */
CS_PENCIL_INTERNAL int pencil_subspace(hankel *h, size_t K, const order_ctl *oc, ritz *out);

/* ---------------------------------------------------------------- pencil_linalg.c */

/* Eigenvalues z (M) of the complex M x M matrix Phi (row-major) and unit right eigenvectors
 * (column k of Rv, row-major M x M). CS_OK, CS_ENOMEM or CS_ENOCONV. */
CS_PENCIL_INTERNAL int pencil_poles(const cplx *Phi, size_t M, cplx *z, cplx *Rv);

/* Inverse of the complex M x M matrix A (row-major) into Ainv. CS_EDATA when singular. */
CS_PENCIL_INTERNAL int pencil_complex_inverse(const cplx *A, size_t M, cplx *Ainv);

/* 1-norm condition number of the M x M matrix A given its inverse. */
CS_PENCIL_INTERNAL double pencil_cond1(const cplx *A, const cplx *Ainv, size_t M);

/* Least-squares amplitudes a (M) of y (N) on the Vandermonde columns Zc (N x M, row-major), the
 * pseudo-inverse Zp (M x N) and the residual sum of squares *rss. CS_OK, CS_ENOMEM or CS_EDATA. */
CS_PENCIL_INTERNAL int pencil_amplitudes(const cplx *Zc, const cplx *y, size_t N, size_t M,
                                         cplx *a, cplx *Zp, double *rss);

#endif /* CS_PENCIL_IMPL_H */
