/* Private interface of the automatic starting values: the guess, its peaks and its refinement. */
#ifndef CS_MODEL_GUESS_IMPL_H
#define CS_MODEL_GUESS_IMPL_H

#include <collshift/model.h>

#include <stddef.h>
#include <string.h>

/* Functions shared between the guess sources but not part of the library's interface. */
#if defined(__GNUC__)
#define CS_GUESS_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_GUESS_INTERNAL
#endif

/* ---------------------------------------------------------------- parameter names */

static inline int is_width(const char *pname)
{
    return strncmp(pname, "fwhm", 4) == 0;
}

static inline size_t pindex(const cs_profile_type *t, const char *name)
{
    return cs_profile_param_index(t, name);
}

/* ---------------------------------------------------------------- peak candidates */

typedef struct cand {
    double xc;    /* position */
    double w;     /* full width at half prominence */
    double ws;    /* twice the smaller half width at half prominence: a line on another's flank
                     is measured on its free side */
    double wc;    /* curvature width sqrt(8 P / -s''), at most ws */
    double prom;  /* prominence (shoulders: height estimate) */
    size_t i;     /* index of the point */
} cand;

/* ---------------------------------------------------------------- the refinement workspace */

typedef struct lin_src {
    size_t param;          /* the linear parameter (area, od, baseline coefficient) */
    const double *col;     /* its column */
    long comp;             /* the component whose shape it is, -1 for a baseline column */
} lin_src;

typedef struct gw {
    cs_model *m;
    const double *x;
    size_t n;
    int trans;
    double xr, hs, span, wmin, wmax;
    const double *tgt;      /* what is fitted: y (SUM) or the weighted absorbance (TRANSMISSION) */
    const double *wt;       /* row weights (transmission), or NULL */
    double *p;              /* the parameter vector being refined */
    unsigned char *guess;   /* 1: the guess sets this parameter */
    long *uidx;             /* unknown index of a free linear parameter, else -1 */
    double *shape;          /* ncomp columns of n */
    double *shape_q;        /* parameters each column was made with (area zeroed) */
    unsigned char *shape_ok;
    double *bcol;           /* baseline columns (SUM): u^j, or exp(-rate u) */
    double bcol_rate;       /* rate bcol[0] was made with (exp) */
    lin_src *src;
    size_t nsrc;
    double *ucol;           /* nu columns of n; the last ndelta are fixed (1 and u/hs) */
    size_t nu, ndelta;
    double *tt, *G, *coef;
    double *pold, *ptry;    /* pattern moves: p before the sweep, p after it */
    /* cache of the normal equations: raw Gram matrix, C'tt, tt'tt; columns that did not
     * change since the last call keep their entries */
    double *Gr, *rhs, ttt;
    unsigned char *chg;     /* per component: shape changed in this call */
    unsigned char *udirty;  /* per unknown: column changed */
    signed char *sgn;       /* per unknown: sign the coefficient must have (0: any) */
    int cache_ok;
} gw;

enum { CO_WIDTH, CO_CENTER, CO_RATE };

/* ---------------------------------------------------------------- the state of a guess */

/* Everything the guess works with. */
typedef struct gctx {
    cs_model *m;
    const double *x, *y;
    size_t n;
    int trans, base_known, flip;
    double xr, span, dx, wmin, wmax;
    double *p, *p0, *pbest, *r, *s, *a, *scratch, *t0w, *xs, *ts, *wt, *wts, *tw;
    unsigned char *guess;
    cand *cd;
    size_t ncd, npk;        /* candidates: all, and the true maxima among them (the first) */
    size_t *order, *rank, *ac;
    gw g;
    void *blocks[40];
    size_t nblocks;
    int failed;
} gctx;

/* ---------------------------------------------------------------- model_guess.c */

/* Median of v[0..n) using scratch (n doubles). */
CS_GUESS_INTERNAL double guess_median(const double *v, size_t n, double *scratch);

/* ---------------------------------------------------------------- model_peaks.c */

/* Step 2: noise, smoothing and the candidate peaks (most prominent first) into c->cd, c->ncd,
 * c->npk; c->flip when the main feature is a dip. */
CS_GUESS_INTERNAL void guess_step_peaks(gctx *c, const double *sigma);

/* ---------------------------------------------------------------- model_refine.c */

/* Least squares t ~ sum_u c_u col_u (nu <= 8 columns of n points, col[u*n + i]); coef gets c;
 * returns the residual sum of squares (INFINITY on failure). */
CS_GUESS_INTERNAL double guess_lsq(const double *col, size_t nu, const double *t, size_t n,
                                   double *coef);

/* Total FWHM of a component's line (Voigt: Olivero-Longbothum; fano: about its maximum). */
CS_GUESS_INTERNAL double guess_comp_width(const cs_profile_type *t, const double *q);

/* Set the free widths of a component so that its total FWHM is W (free[j]: may be set). */
CS_GUESS_INTERNAL void guess_comp_set_width(const cs_profile_type *t, double *q,
                                            const unsigned char *free_, double W);

/* Residual sum of squares at the current g->p; the linear unknowns go to g->coef. */
CS_GUESS_INTERNAL double guess_objective(gw *g);

/* A component's width or centre (kind CO_WIDTH, CO_CENTER), or the exponential baseline's rate
 * (CO_RATE), in g->p. */
CS_GUESS_INTERNAL double guess_coord_get(const gw *g, int kind, size_t k);
CS_GUESS_INTERNAL void guess_coord_set(gw *g, int kind, size_t k, double v);

/* Point the workspace at n points x with target tgt (row weights wt or NULL): baseline and offset
 * columns, the linear sources, and an empty shape cache. */
CS_GUESS_INTERNAL void guess_gw_bind(gw *g, const double *x, const double *tgt, const double *wt,
                                     size_t n);

/* Cyclic coordinate descent over widths, centres and an exponential baseline's rate, components
 * in order[] broadest last; polish: at most two sweeps of small steps. */
CS_GUESS_INTERNAL void guess_refine(gw *g, const size_t *order, double wmin, int polish);

#endif /* CS_MODEL_GUESS_IMPL_H */
