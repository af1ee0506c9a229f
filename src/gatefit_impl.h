/* Private interface shared by the gate-aware fit sources (gatefit.c, gatefit_solve.c,
 * gatefit_start.c). */
#ifndef CS_GATEFIT_IMPL_H
#define CS_GATEFIT_IMPL_H

#include <collshift/gatefit.h>

#include <gsl/gsl_matrix.h>
#include <gsl/gsl_vector.h>

#include <complex.h>
#include <math.h>
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

/* A basis below e^-GF_NEGLIGIBLE of its peak counts as zero. What the samples after the cut
 * carry is the Fisher information of |dM/dtheta|^2 there: for a decay cut at Gamma s_c = 40,
 * (Gamma s_c)^2/2 e^{-Gamma s_c} = 3e-15 of the total even for the centre (the slowest-falling
 * derivative, s M), so leaving them out moves an estimate by ~sqrt(3e-15) = 6e-8 of its
 * standard error and its error by less; the model's own square there (e^-40 = 4e-18 of the
 * peak's) is below rounding. The cut was e^-40 before: that doubled the samples evaluated for
 * no measurable change (the 16-record test campaign moved by 2e-10 standard errors). */
#define GF_NEGLIGIBLE 20.0

/* The component's value without its amplitude at time s = j dt from the gate start (basis
 * function E: the model is sum_k c_k E_k). */
CS_GATEFIT_INTERNAL double complex cs_gatefit_impl_basis(cs_gatefit_kind kind, double f, double rate,
                                                        double tp, double s);

/* Basis values along increasing sample indices without an exp and a sincos per sample (they
 * were most of a fit's cost): on consecutive samples the decay's basis is multiplied by the
 * constant step e^{(2 pi i f - rate/2) dt}, and the burst's phase by e^{2 pi i f dt} and its
 * e^{-|z|} by e^{-+dt/tau}; every GF_ANCHOR samples, after a gap in the indices, when the burst
 * passes its peak or when e^{-|z|} is tiny, the value is computed afresh from its formula. The
 * products drift by about one rounding each, so the values agree with cs_gatefit_impl_basis to
 * ~1e-14 of the component's size (tests/test_gatefit.c checks it). */
#define GF_ANCHOR 64

typedef struct gf_basis_it {
    cs_gatefit_kind kind;
    double f, rate, tp, dt;
    double complex w;     /* e^{2 pi i f dt} */
    double complex q;     /* decay: the whole step e^{(2 pi i f - rate/2) dt} */
    double up, down, dz;  /* burst: e^{dt/tau}, e^{-dt/tau}, dt/tau */
    double complex E;     /* the last value */
    double complex ph;    /* burst: the last phase factor */
    double z, e;          /* burst: the last (s - tp)/tau and e^{-|z|} */
    size_t j, left;       /* the last sample index; steps left before the next anchor */
    int started;
} gf_basis_it;

/* Start a walk along the samples of one component (parameters as cs_gatefit_impl_basis). */
CS_GATEFIT_INTERNAL void cs_gatefit_impl_basis_init(gf_basis_it *it, cs_gatefit_kind kind, double f,
                                                   double rate, double tp, double dt);
/* The basis at sample index j (s = j dt) from its formula, and the walk's state there. */
CS_GATEFIT_INTERNAL void cs_gatefit_impl_basis_anchor(gf_basis_it *it, size_t j);

/* The basis at sample index j, which must exceed the index of the previous call; tanh_z (may
 * be NULL) receives tanh((s - tp)/tau) for a burst (0 for a decay). */
static inline double complex gf_basis_next(gf_basis_it *it, size_t j, double *tanh_z)
{
    if (it->started && j == it->j + 1 && it->left > 0) {
        if (it->kind == CS_GATEFIT_DECAY) {
            it->E *= it->q;
            it->j = j;
            it->left--;
            if (tanh_z)
                *tanh_z = 0.0;
            return it->E;
        }
        double z = it->z + it->dz;
        if ((z < 0) == (it->z < 0) && it->e > 1e-250) {
            it->e *= z < 0 ? it->up : it->down;
            it->z = z;
            it->ph *= it->w;
            double e2 = it->e * it->e, den = 1.0 / (1.0 + e2);
            double sech = 2.0 * it->e * den;
            it->E = sech * it->ph;
            if (tanh_z)
                *tanh_z = z < 0 ? -(1.0 - e2) * den : (1.0 - e2) * den;
            it->j = j;
            it->left--;
            return it->E;
        }
    }
    cs_gatefit_impl_basis_anchor(it, j);
    if (tanh_z)
        *tanh_z = it->kind == CS_GATEFIT_DECAY ? 0.0 : tanh(it->z);
    return it->E;
}

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

/* Internal variables of a fit at most. */
#define GF_MAXNP (CS_GATEFIT_MAX_COMP * CS_GATEFIT_BURST_NPARAMS)

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
    /* J^T J of the solver's Jacobian, formed by the Jacobian callback right after it wrote J
     * (lower triangle, row-major np x np), and the J->data it belongs to (NULL: none): the
     * solver's linear solver, scaling and Gauss-Newton test take it from here instead of
     * forming it again from the thousands of rows of J (gatefit_solve.c) */
    double jtj[GF_MAXNP * GF_MAXNP];
    const double *jtj_of;
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
