/* Private interface shared by the gate-aware fit sources (gatefit.c, gatefit_solve.c,
 * gatefit_start.c). */
#ifndef CS_GATEFIT_IMPL_H
#define CS_GATEFIT_IMPL_H

#include <collshift/gatefit.h>

#include <gsl/gsl_matrix.h>
#include <gsl/gsl_vector.h>

#include <complex.h>
#include <stddef.h>

#if defined(__GNUC__)
#define CS_GATEFIT_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_GATEFIT_INTERNAL
#endif

/* The natural (physical, record-frame) parameters of the model:
 *   f[k]    frequency in the record, f - lo, Hz
 *   rate[k] decay: Gamma (intensity rate, s^-1); burst: tau (s)
 *   tp[k]   burst: t_peak - t_g (s); unused for a decay
 *   c[k]    complex amplitude A exp(i phi) */
typedef struct gf_theta {
    double f[CS_GATEFIT_MAX_COMP];
    double rate[CS_GATEFIT_MAX_COMP];
    double tp[CS_GATEFIT_MAX_COMP];
    double complex c[CS_GATEFIT_MAX_COMP];
} gf_theta;

/* The data of one fit: the gate's samples and what the model needs. */
typedef struct gf_problem {
    size_t ncomp;
    cs_gatefit_kind kind[CS_GATEFIT_MAX_COMP];
    int cplx;                /* complex record */
    const double *x;         /* the gate's samples (borrowed from the record): m pairs or m reals */
    size_t m;                /* samples in the gate */
    double dt;               /* sample interval, s */
    double T;                /* gate length m dt, s */
    const size_t *idx;       /* the nused sample indices j (< m) with window > 0, increasing */
    size_t nused;
    /* The model is evaluated on the first nact used samples only: beyond them every component's
     * basis is below e^-GF_NEGLIGIBLE of its peak (cs_gatefit_impl_active), so the model and its
     * derivatives there are zero to rounding and those residuals are the constant -x. Their sum
     * of squares is ss_after[nact] (ss_after[i]: sum of the squared samples, both parts, of used
     * samples i..nused-1; nused + 1 values, ss_after[nused] = 0). */
    size_t nact;
    const double *ss_after;
} gf_problem;

/* A basis below e^-GF_NEGLIGIBLE of its peak counts as zero (e^-40 = 4e-18: its square and its
 * products with the data are far below the rounding of the sums it would enter). */
#define GF_NEGLIGIBLE 40.0

/* The component's value without its amplitude at time s = j dt from the gate start (basis
 * function E: the model is sum_k c_k E_k). */
CS_GATEFIT_INTERNAL double complex cs_gatefit_impl_basis(cs_gatefit_kind kind, double f, double rate,
                                                        double tp, double s);

/* How many of the used samples (a prefix of idx) the model th needs: the first sample after
 * which every component's basis stays below e^-GF_NEGLIGIBLE of its peak, with the decay rates
 * taken `margin` (<= 1) times smaller and the burst widths 1/margin times larger, so that the
 * set still holds while a fit moves them. P->nused when that is not finite. */
CS_GATEFIT_INTERNAL size_t cs_gatefit_impl_active(const gf_problem *P, const gf_theta *th, double margin);

/* Complex amplitudes of all components for fixed nonlinear parameters th->f, rate, tp, by linear
 * least squares over the used samples (real data: real part of the model); written to th->c.
 * Returns CS_OK, CS_ENOMEM, or CS_EDATA when the basis is not finite. */
CS_GATEFIT_INTERNAL int cs_gatefit_impl_amplitudes(const gf_problem *P, gf_theta *th, cs_error *err);

/* Starting values of every component (nonlinear ones from the data or the user's start,
 * amplitudes by cs_gatefit_impl_amplitudes) into *th. ws borrowed. Returns CS_OK, CS_ENOMEM,
 * CS_EUNSUP (FFTW), CS_EDATA. */
CS_GATEFIT_INTERNAL int cs_gatefit_impl_start(cs_gate_workspace *ws, const gf_problem *P,
                                              const cs_gatefit_start *user, double t_g,
                                              double lo_hz, gf_theta *th, cs_error *err);

/* One fit: the data, the layout and scales of the solver's internal variables u (see the top of
 * gatefit_solve.c), and counters. */
typedef struct gf_fit {
    gf_problem P;
    double lo, t_g;                      /* LO frequency, time of the gate's first sample */
    size_t np, nres;                     /* parameters (= internal variables), residuals evaluated
                                            (those of the first P.nact used samples) */
    size_t nres_all;                     /* residuals of every used sample */
    double rest_ss;                      /* sum of the squared constant residuals of the used
                                            samples after P.nact, in units of s_fit^2 */
    size_t first[CS_GATEFIT_MAX_COMP];   /* first internal variable of each component */
    double f0[CS_GATEFIT_MAX_COMP];      /* starting frequency in the record, Hz */
    double sf[CS_GATEFIT_MAX_COMP];      /* frequency per unit of u0, Hz */
    double tau0[CS_GATEFIT_MAX_COMP];    /* burst: starting tau, s */
    double tp0[CS_GATEFIT_MAX_COMP];     /* burst: starting t_peak - t_g, s */
    double sref[CS_GATEFIT_MAX_COMP];    /* phase reference of the internal amplitude, s from t_g */
    double a_ref;                        /* amplitude scale */
    double s_fit;                        /* residual normalisation (signal units) */
    size_t nfev, njev;
    int last_nan;                        /* the last residual evaluation was not finite */
} gf_fit;

/* Natural parameters from the internal variables u; 0 when an exponential overflows. */
CS_GATEFIT_INTERNAL int cs_gatefit_impl_theta(const gf_fit *F, const double *u, gf_theta *th);

/* Residuals (model - data)/s_fit into res (nres; may be NULL) and their Jacobian d res/du into J
 * (nres x np; may be NULL) at u. Returns 1 when everything is finite; otherwise res holds a huge
 * penalty and J zeros. */
CS_GATEFIT_INTERNAL int cs_gatefit_impl_evaluate(gf_fit *F, const double *u, gsl_vector *res,
                                                 gsl_matrix *J);

/* Run the trust-region solver from u (np values; receives the last point reached). Sets
 * r->status (CONVERGED, NOT_CONVERGED, MODEL_NAN), r->stop and r->niter. Returns CS_OK or
 * CS_ENOMEM. */
CS_GATEFIT_INTERNAL int cs_gatefit_impl_solve(gf_fit *F, const cs_gatefit_options *o, double *u,
                                              cs_gatefit_result *r, cs_error *err);

/* The reported parameters (layout of cs_gatefit_result.value) of th. */
CS_GATEFIT_INTERNAL void cs_gatefit_impl_values(const gf_fit *F, const gf_theta *th, double *val);

/* Covariance of the reported parameters at u into r->cov (NaN rows for undetermined ones;
 * *singular set when there are any); factor = sigma^2 / s_fit^2. CS_OK or CS_ENOMEM. */
CS_GATEFIT_INTERNAL int cs_gatefit_impl_covariance(gf_fit *F, const double *u, const gf_theta *th,
                                                   double factor, cs_gatefit_result *r, int *singular,
                                                   cs_error *err);

#endif
