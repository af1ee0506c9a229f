/* Automatic starting values for a model from the data alone: baseline, peak finding, refinement.
 *
 * The strategy (deterministic; nothing random, no true answer anywhere):
 *
 * 1. Baseline from the wings. The outer 12 % of the points on each side (at least 3) give one
 *    anchor (median x, median y) per side, robust to noise and to a stray line: a constant
 *    baseline is the median of both wings, a sloped one the line through the anchors (higher
 *    coefficients start at 0), an exponential one the line through the logarithms of the anchors
 *    when both are positive (else a constant). In transmission this is T0, and the signal is the
 *    absorbance A = -ln(y/T0) (y clipped at 1e-3 T0), whose peaks have height OD.
 *
 * 2. Peaks. The noise sigma_n is the median absolute deviation of first differences (times
 *    1.4826/sqrt 2), or the median of the given sigma. The signal is smoothed with a Gaussian
 *    kernel of 0 to 3 points chosen from sigma_n relative to the largest excursion; its sign is
 *    that of the larger excursion (emission or absorption). Peaks are local maxima whose
 *    topographic prominence exceeds max(8 sigma_smooth, 2 % of the maximum) (in transmission
 *    the noise of A grows as 1/T, so each dip must pass 8 sigma_smooth T0/y at its own bottom).
 *    Each gets a position (parabolic vertex), its full width at half prominence, a sharpness
 *    width (twice the smaller half width: a line on another line's flank is measured on its free
 *    side) and a curvature width sqrt(8 P / -s'') (exact for a Lorentzian of height P). With
 *    fewer peaks than components, shoulders are looked for as minima of s'' (a shoulder has no
 *    maximum but a clear curvature extremum), at the scale of the main peak and four times it,
 *    against the noise of s'' computed from the filters.
 *
 * 3. Assignment. Components whose centre the user gave take the nearest peak. The others are
 *    ranked by expected sharpness: Lorentzian-like profiles (lorentz, fano) before the others (a
 *    Voigt, Gaussian or pseudo-Voigt usually carries Doppler broadening), later components before
 *    earlier ones; the most prominent peaks, sorted by sharpness width, go to them sharpest
 *    first. So "lorentz+lorentz" and "voigt+lorentz" make component 2 the narrow line. A
 *    component without a peak shares the most prominent one (a narrow line on top of a broad
 *    one): the sharper of the two starts at the curvature width, the broader at 1.5 times the
 *    half-prominence width. A centre tied to another component's centre places that one.
 *
 * 4. Refinement by variable projection. Amplitudes (areas, optical depths, linear baseline
 *    coefficients) enter linearly, so for any trial centres and widths they follow from a small
 *    least-squares problem: normal equations of unit-norm columns, Cholesky with a 1e-10 ridge
 *    for coincident columns, and every component amplitude kept to the sign of the data's main
 *    feature (a greedy active set after Lawson and Hanson's NNLS; without it a broad positive
 *    and a broad negative line can mimic a narrow one). The fit is to y (sum) or to A weighted
 *    by y/T0 (transmission, with a constant and a slope added to ln T0). Columns that did not
 *    change keep their Gram entries. Cyclic coordinate descent, broadest component first,
 *    minimises the residual over each total FWHM (first a 24-point logarithmic grid from 2
 *    sample spacings to twice the span, later from half to twice the current value, then
 *    8 golden-section steps in the best bracket), each centre (17 points within one FWHM, then
 *    golden section) and an exponential baseline's rate; each sweep ends with a pattern move
 *    along its own displacement (Hooke and Jeeves), and at most 8 sweeps are made. Every step
 *    keeps the best value seen, so the residual never grows. When the lines are wide compared
 *    with the sampling this runs on every k-th point (at least 4 points per FWHM and 256
 *    points), followed by a short polish on all points (3-point grids, 4 golden steps, at most
 *    two sweeps). A Voigt is represented here by the pseudo-Voigt of the same
 *    Olivero-Longbothum width and the mixing of Thompson, Cox and Hastings (P. Thompson,
 *    D. E. Cox, J. B. Hastings, J. Appl. Cryst. 20, 79-83 (1987), eq. 4), within about 1 % of
 *    it; it and the Lorentzian are evaluated inline (the Gaussian part with a short exp
 *    polynomial, and only within 3.7 FWHM), and the normal equations are updated in fused
 *    passes, so one trial costs a few instructions per point.
 *
 * 5. Ranking kept. If a component ranked sharper ends up wider than one ranked broader (and both
 *    may move), they exchange centres and widths and a polish follows. When shoulders took part
 *    in the assignment, steps 3 to 5 run once more without them and the better fit is kept.
 *
 * Shape choices: Voigt widths equal (f_G = f_L = f/1.6376, the Olivero-Longbothum inverse at
 * equal widths) unless one is given; eta = 0.5; q = 5 (close to a Lorentzian, its position
 * shifted by fwhm/(2q) to put the maximum on the peak). A component that the sign constraint
 * switched off starts at 1 % of the largest amplitude. Mixed emission and absorption lines in
 * one spectrum are not separated. Values are finally moved inside their bounds. Multiple starts
 * are the fitter's job. Typical cost: 2 to 3 ms (about 22 million instructions) for a Voigt, a
 * Lorentzian and a linear baseline on 2048 points.
 *
 * Steps 6 and 7 take the amplitudes and baseline from the final linear solution (in transmission
 * T0 times exp(-offset - slope u), refitted by the model's baseline) and store the values.
 *
 * This file drives the steps; step 2 lives in model_peaks.c, step 4 in model_refine.c. */
#include <collshift/model.h>

#include "model_guess_impl.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define WING_FRACTION 0.12

/* ---------------------------------------------------------------- small helpers */

/* The k-th smallest of a[0..n) (k < n), partly reordering a (Hoare's selection). */
static double select_kth(double *a, size_t n, size_t k)
{
    size_t lo = 0, hi = n - 1;
    while (lo < hi) {
        double piv = a[lo + (hi - lo) / 2];
        size_t i = lo, j = hi;
        while (i <= j) {
            while (a[i] < piv)
                i++;
            while (piv < a[j])
                j--;
            if (i <= j) {
                double t = a[i];
                a[i] = a[j];
                a[j] = t;
                i++;
                if (j == 0)
                    break;
                j--;
            }
        }
        if (k <= j)
            hi = j;
        else if (k >= i)
            lo = i;
        else
            break;
    }
    return a[k];
}

/* Median of v[0..n) using scratch (n doubles): the same value as sorting, in linear time. */
double guess_median(const double *v, size_t n, double *scratch)
{
    if (n == 0)
        return 0.0;
    memcpy(scratch, v, n * sizeof *v);
    double hi = select_kth(scratch, n, n / 2);
    if (n % 2)
        return hi;
    /* after the selection every element before n/2 is <= hi: the largest of them is the other */
    double lo = scratch[0];
    for (size_t i = 1; i < n / 2; i++)
        lo = scratch[i] > lo ? scratch[i] : lo;
    return 0.5 * (lo + hi);
}

/* Expected sharpness class: 1 for Lorentzian-like profiles, 0 for the others. */
static int sharp_class(const cs_profile_type *t)
{
    return strcmp(t->name, "lorentz") == 0 || strcmp(t->name, "fano") == 0;
}

/* ---------------------------------------------------------------- the guess */

static double base_value(cs_baseline_kind kind, const double *c, double u)
{
    switch (kind) {
    case CS_BASELINE_CONST: return c[0];
    case CS_BASELINE_LINEAR: return c[0] + c[1] * u;
    case CS_BASELINE_QUAD: return c[0] + u * (c[1] + u * c[2]);
    case CS_BASELINE_CUBIC: return c[0] + u * (c[1] + u * (c[2] + u * c[3]));
    case CS_BASELINE_EXP: return c[0] * exp(-c[1] * u);
    default: return 0.0;
    }
}

/* Baseline coefficients c (nb) from the wings of v: see step 1 at the top. */
static void wing_baseline(cs_baseline_kind kind, const double *x, const double *v, size_t n,
                          double xr, double *c, double *scratch)
{
    size_t nw = (size_t)(WING_FRACTION * (double)n);
    if (nw < 3)
        nw = 3;
    if (2 * nw > n)
        nw = n / 2 > 0 ? n / 2 : 1;
    double xl = guess_median(x, nw, scratch), yl = guess_median(v, nw, scratch);
    double xh = guess_median(x + n - nw, nw, scratch), yh = guess_median(v + n - nw, nw, scratch);
    for (size_t j = 0; j < 4; j++)
        c[j] = 0.0;
    if (kind == CS_BASELINE_CONST) {
        memcpy(scratch + n, v, nw * sizeof *v);
        memcpy(scratch + n + nw, v + n - nw, nw * sizeof *v);
        c[0] = guess_median(scratch + n, 2 * nw, scratch);
    } else if (kind == CS_BASELINE_EXP) {
        if (yl > 0.0 && yh > 0.0 && xh > xl) {
            c[1] = -(log(yh) - log(yl)) / (xh - xl);
            c[0] = exp(log(yl) + c[1] * (xl - xr));
        } else {
            c[0] = 0.5 * (yl + yh);
        }
    } else if (kind != CS_BASELINE_NONE) {
        c[1] = xh > xl ? (yh - yl) / (xh - xl) : 0.0;
        c[0] = yl + c[1] * (xr - xl);
    }
}

/* Move v into [lo, hi]: a value outside lands just inside the bound it crossed (by 1e-3 of
 * its distance outside, at most 1e-3 of the range), never exactly on it. */
static double clamp_inside(double v, double lo, double hi)
{
    if (!(v < lo || v > hi))
        return v;
    double bound = v < lo ? lo : hi, d = 1e-3 * fabs(v - bound);
    if (isfinite(lo) && isfinite(hi) && d > 1e-3 * (hi - lo))
        d = 1e-3 * (hi - lo);
    return v < lo ? lo + d : hi - d;
}

/* Rank of each component by expected sharpness (0 = sharpest), see step 3. */
static void sharp_order(const cs_model *m, size_t *order, size_t *rank)
{
    size_t nc = m->ncomp;
    for (size_t k = 0; k < nc; k++)
        order[k] = k;
    for (size_t a = 1; a < nc; a++)
        for (size_t b = a; b > 0; b--) {
            size_t u = order[b - 1], v = order[b];
            int cu = sharp_class(m->comp[u].type), cv = sharp_class(m->comp[v].type);
            if (cv > cu || (cv == cu && v > u)) {
                order[b - 1] = v;
                order[b] = u;
            }
        }
    for (size_t k = 0; k < nc; k++)
        rank[order[k]] = k;
}

static void *ctx_alloc(gctx *c, size_t bytes)
{
    void *b = calloc(1, bytes ? bytes : 1);
    if (b && c->nblocks < sizeof c->blocks / sizeof c->blocks[0])
        c->blocks[c->nblocks++] = b;
    else {
        free(b);
        c->failed = 1;
        b = NULL;
    }
    return b;
}

static void ctx_free(gctx *c)
{
    for (size_t i = 0; i < c->nblocks; i++)
        free(c->blocks[i]);
}

static int ctx_init(gctx *c)
{
    const size_t n = c->n, np = c->m->nparams, nc = c->m->ncomp ? c->m->ncomp : 1;
    const size_t maxsrc = c->m->ncomp + 4, maxu = maxsrc + 2;
    const size_t D = sizeof(double);
    c->p = ctx_alloc(c, np * D);
    c->p0 = ctx_alloc(c, np * D);
    c->pbest = ctx_alloc(c, np * D);
    c->r = ctx_alloc(c, n * D);
    c->s = ctx_alloc(c, n * D);
    c->a = ctx_alloc(c, n * D);
    c->scratch = ctx_alloc(c, 3 * n * D);
    c->t0w = ctx_alloc(c, n * D);
    c->xs = ctx_alloc(c, n * D);
    c->ts = ctx_alloc(c, n * D);
    c->wt = ctx_alloc(c, n * D);
    c->wts = ctx_alloc(c, n * D);
    c->tw = ctx_alloc(c, n * D);
    c->guess = ctx_alloc(c, np);
    c->cd = ctx_alloc(c, (n + c->m->ncomp + 4) * sizeof(cand));
    c->order = ctx_alloc(c, nc * sizeof(size_t));
    c->rank = ctx_alloc(c, nc * sizeof(size_t));
    c->ac = ctx_alloc(c, nc * sizeof(size_t));
    gw *g = &c->g;
    g->shape = ctx_alloc(c, nc * n * D);
    g->shape_q = ctx_alloc(c, nc * CS_PROFILE_MAX_PARAMS * D);
    g->shape_ok = ctx_alloc(c, nc);
    g->bcol = ctx_alloc(c, 4 * n * D);
    g->ucol = ctx_alloc(c, maxu * n * D);
    g->tt = ctx_alloc(c, n * D);
    g->G = ctx_alloc(c, maxu * maxu * D);
    g->coef = ctx_alloc(c, maxu * D);
    g->uidx = ctx_alloc(c, np * sizeof(long));
    g->src = ctx_alloc(c, maxsrc * sizeof(lin_src));
    g->Gr = ctx_alloc(c, maxu * maxu * D);
    g->rhs = ctx_alloc(c, maxu * D);
    g->chg = ctx_alloc(c, nc);
    g->udirty = ctx_alloc(c, maxu);
    g->sgn = ctx_alloc(c, maxu);
    g->pold = ctx_alloc(c, np * D);
    g->ptry = ctx_alloc(c, np * D);
    return c->failed ? CS_ENOMEM : CS_OK;
}

/* Step 1: the wing baseline (initial baseline parameters) and the signal r. */
static int step_baseline(gctx *c)
{
    cs_model *m = c->m;
    const size_t bf = m->base_first, nb = m->nparams - bf, n = c->n;
    double bw[4];
    wing_baseline(m->baseline, c->x, c->y, n, c->xr, bw, c->scratch);
    for (size_t j = 0; j < nb; j++)
        if (c->guess[bf + j])
            c->p[bf + j] = bw[j];
    if (c->base_known || c->trans) /* transmission: known coefficients take part in T0 */
        for (size_t j = 0; j < nb; j++)
            bw[j] = c->p[bf + j];
    for (size_t i = 0; i < n; i++) {
        double b = nb ? base_value(m->baseline, bw, c->x[i] - c->xr) : (c->trans ? 1.0 : 0.0);
        if (c->trans) {
            if (!(b > 0.0) || !isfinite(b))
                return CS_EDATA;
            c->t0w[i] = b;
            double yy = c->y[i] > 1e-3 * b ? c->y[i] : 1e-3 * b;
            c->r[i] = -log(yy / b);
        } else {
            c->r[i] = c->y[i] - b;
        }
    }
    return CS_OK;
}

/* Step 3: components to peaks; initial centres, widths and shape parameters into p. */
static void step_assign(gctx *c, size_t ncd)
{
    cs_model *m = c->m;
    const size_t nc = m->ncomp, NONE = (size_t)-1;
    size_t *order = c->order, *rank = c->rank, *ac = c->ac;
    cand *cd = c->cd;
    double *p = c->p;
    sharp_order(m, order, rank);
    unsigned char used[64];
    size_t nuse = ncd < 64 ? ncd : 64, pick[64], npick = 0, nrem = 0;
    memset(used, 0, sizeof used);
    for (size_t k = 0; k < nc; k++) { /* user-given centres take the nearest peak */
        size_t c0 = m->comp[k].first;
        ac[k] = NONE;
        double bd = INFINITY;
        for (size_t j = 0; m->par[c0].user_start && j < nuse; j++)
            if (!used[j] && fabs(cd[j].xc - p[c0]) < bd) {
                bd = fabs(cd[j].xc - p[c0]);
                ac[k] = j;
            }
        if (ac[k] != NONE)
            used[ac[k]] = 1;
        nrem += ac[k] == NONE;
    }
    for (size_t j = 0; j < nuse && npick < nrem; j++)
        if (!used[j])
            pick[npick++] = j;
    for (size_t a = 1; a < npick; a++) /* by width, narrowest first */
        for (size_t b = a; b > 0 && cd[pick[b]].ws < cd[pick[b - 1]].ws; b--) {
            size_t t = pick[b];
            pick[b] = pick[b - 1];
            pick[b - 1] = t;
        }
    for (size_t o = 0, j = 0; o < nc && j < npick; o++)
        if (ac[order[o]] == NONE) {
            ac[order[o]] = pick[j];
            used[pick[j++]] = 1;
        }
    double *W0 = c->a, *C0 = c->a + nc;
    for (size_t k = 0; k < nc; k++)
        if (ac[k] != NONE) {
            C0[k] = cd[ac[k]].xc;
            W0[k] = cd[ac[k]].ws;
        }
    size_t owner = NONE, extra = 0;
    for (size_t j = 0; j < nc; j++)
        if (ac[j] == 0)
            owner = j;
    for (size_t o = 0; o < nc; o++) { /* the rest share the most prominent peak */
        size_t k = order[o];
        if (ac[k] != NONE)
            continue;
        if (ncd == 0) {
            size_t im = 0;
            for (size_t i = 1; i < c->n; i++)
                im = c->s[i] > c->s[im] ? i : im;
            C0[k] = c->x[im];
            W0[k] = c->span / 10.0 * pow(2.0, (double)extra++);
            continue;
        }
        C0[k] = cd[0].xc;
        double wsharp = cd[0].wc;
        if (owner != NONE && rank[k] < rank[owner]) {
            W0[k] = wsharp;
        } else {
            W0[k] = 1.5 * cd[0].w * pow(1.5, (double)extra);
            if (owner != NONE && rank[owner] < rank[k])
                W0[owner] = wsharp;
        }
        extra++;
    }
    /* a component whose centre follows another's puts that one where the tie says */
    for (size_t k = 0; k < nc; k++) {
        const cs_param *pc = &m->par[m->comp[k].first];
        if (ac[k] == NONE || pc->tie < 0)
            continue;
        for (size_t j = 0; j < nc; j++)
            if (m->comp[j].first == (size_t)pc->tie && ac[j] == NONE && c->guess[pc->tie])
                C0[j] = (C0[k] - pc->tie_offset) / pc->tie_factor;
    }
    for (size_t k = 0; k < nc; k++) {
        const cs_profile_type *t = m->comp[k].type;
        const size_t first = m->comp[k].first;
        double *q = p + first;
        const unsigned char *gq = c->guess + first;
        for (size_t j = 0; j < t->nparams; j++) {
            if (gq[j] && strcmp(t->param_names[j], "eta") == 0)
                q[j] = clamp_inside(0.5, m->par[first + j].lo, m->par[first + j].hi);
            if (gq[j] && strcmp(t->param_names[j], "q") == 0)
                q[j] = 5.0;
        }
        guess_comp_set_width(t, q, gq,
                             W0[k] < c->wmin ? c->wmin : W0[k] > c->wmax ? c->wmax : W0[k]);
        if (gq[0]) {
            q[0] = C0[k];
            size_t iq = pindex(t, "q");
            if (iq != CS_PROFILE_SKIP && q[iq] != 0.0)
                q[0] -= q[1] / (2.0 * q[iq]); /* fano: its maximum lies at center + fwhm/(2q) */
        }
    }
}

/* Step 4: set up the linear problem and refine (on every stride-th point when the lines are
 * much wider than the sampling, keeping at least 4 points per FWHM and 256 points, then a
 * polish on all points). Returns the final residual sum of squares. */
static double step_refine(gctx *c)
{
    cs_model *m = c->m;
    gw *g = &c->g;
    const size_t n = c->n, np = m->nparams, nb = np - m->base_first;
    g->m = m;
    g->trans = c->trans;
    g->xr = c->xr;
    g->hs = 0.5 * c->span;
    g->span = c->span;
    g->wmin = c->wmin;
    g->wmax = c->wmax;
    g->p = c->p;
    g->guess = c->guess;
    /* transmission: the absorbance A = -ln(y/T0) has noise sigma_y/y, so rows are weighted by
     * y/T0 (at least 0.03: saturated points still count a little) */
    const double *tgt = c->y, *wt = NULL;
    if (c->trans) {
        for (size_t i = 0; i < n; i++) {
            double w = c->y[i] / c->t0w[i];
            c->wt[i] = w > 0.03 ? w : 0.03;
            c->tw[i] = c->wt[i] * c->r[i];
        }
        tgt = c->tw;
        wt = c->wt;
    }
    guess_gw_bind(g, c->x, tgt, wt, n);
    for (size_t i = 0; i < np; i++)
        g->uidx[i] = -1;
    g->nu = 0;
    for (size_t s = 0; s < g->nsrc; s++)
        if (c->guess[g->src[s].param]) {
            /* areas and optical depths share the sign of the data's main feature */
            g->sgn[g->nu] = (signed char)(g->src[s].comp >= 0 ? (c->flip ? -1 : 1) : 0);
            g->uidx[g->src[s].param] = (long)g->nu++;
        }
    g->ndelta = 0;
    if (c->trans && nb > 0 && !c->base_known)
        g->ndelta = m->baseline == CS_BASELINE_CONST ? 1 : 2;
    g->nu += g->ndelta;
    guess_gw_bind(g, c->x, tgt, wt, n); /* now with the offset columns */

    double wn = INFINITY;
    for (size_t k = 0; k < m->ncomp; k++) {
        double w = guess_comp_width(m->comp[k].type, c->p + m->comp[k].first);
        wn = w < wn ? w : wn;
    }
    size_t stride = isfinite(wn) ? (size_t)(wn / (4.0 * c->dx)) : 1;
    if (stride > n / 256)
        stride = n / 256;
    if (stride >= 2) {
        size_t ns = 0;
        for (size_t i = 0; i < n; i += stride, ns++) {
            c->xs[ns] = c->x[i];
            c->ts[ns] = tgt[i];
            c->wts[ns] = wt ? wt[i] : 1.0;
        }
        guess_gw_bind(g, c->xs, c->ts, wt ? c->wts : NULL, ns);
        guess_refine(g, c->order, 2.0 * c->dx * (double)stride, 0);
        guess_gw_bind(g, c->x, tgt, wt, n);
        guess_refine(g, c->order, c->wmin, 1);
    } else {
        guess_refine(g, c->order, c->wmin, 0);
    }
    return guess_objective(g);
}

/* Whether the guess may move component k: its centre and widths are all free. */
static int movable(const gctx *c, size_t k)
{
    const cs_model_component *mc = &c->m->comp[k];
    if (!c->guess[mc->first])
        return 0;
    for (size_t j = 0; j < mc->type->nparams; j++)
        if (is_width(mc->type->param_names[j]) && !c->guess[mc->first + j])
            return 0;
    return 1;
}

/* Step 5: the sharpness ranking is a promise (model.h): when a component ranked sharper ended
 * up wider than one ranked broader, and both may move, they exchange centres and total widths
 * and a polish follows. Returns the final residual sum of squares. */
static double step_relabel(gctx *c, double ssr)
{
    const cs_model *m = c->m;
    gw *g = &c->g;
    int swapped = 0;
    for (size_t o = 0; o + 1 < m->ncomp; o++)
        for (size_t o2 = o + 1; o2 < m->ncomp; o2++) {
            size_t a = c->order[o], b = c->order[o2];
            if (!movable(c, a) || !movable(c, b))
                continue;
            double wa = guess_coord_get(g, CO_WIDTH, a), wb = guess_coord_get(g, CO_WIDTH, b);
            if (!(wa > wb))
                continue;
            double ca = guess_coord_get(g, CO_CENTER, a), cb = guess_coord_get(g, CO_CENTER, b);
            guess_coord_set(g, CO_WIDTH, a, wb);
            guess_coord_set(g, CO_CENTER, a, cb);
            guess_coord_set(g, CO_WIDTH, b, wa);
            guess_coord_set(g, CO_CENTER, b, ca);
            swapped = 1;
        }
    if (swapped) {
        guess_refine(g, c->order, c->wmin, 1);
        ssr = guess_objective(g);
    }
    return ssr;
}

/* Step 6: amplitudes and baseline from the final linear solution. */
static void step_extract(gctx *c)
{
    cs_model *m = c->m;
    gw *g = &c->g;
    const size_t n = c->n, bf = m->base_first, nb = m->nparams - bf;
    double *p = c->p;
    double amax = 0.0;
    for (size_t s = 0; s < g->nsrc; s++) {
        size_t i = g->src[s].param;
        if (g->uidx[i] >= 0)
            p[i] = g->coef[g->uidx[i]];
        if (g->src[s].comp >= 0)
            amax = fabs(p[i]) > amax ? fabs(p[i]) : amax;
    }
    /* a component the sign constraint switched off starts small, not at 0 (where its other
     * parameters would have no effect at all) */
    for (size_t s = 0; s < g->nsrc; s++) {
        size_t i = g->src[s].param;
        if (g->src[s].comp >= 0 && g->uidx[i] >= 0 && p[i] == 0.0)
            p[i] = (c->flip ? -0.01 : 0.01) * amax;
    }
    if (g->ndelta == 0)
        return;
    /* transmission: ln T0 gained a + b u/hs */
    double d0 = g->coef[g->nu - g->ndelta], d1 = g->ndelta > 1 ? g->coef[g->nu - 1] / g->hs : 0.0;
    if (m->baseline == CS_BASELINE_EXP) {
        if (c->guess[bf])
            p[bf] *= exp(-d0);
        if (c->guess[bf + 1])
            p[bf + 1] += d1;
        return;
    }
    double *tc = c->scratch, *cols = g->ucol, cf[4];
    size_t nfree = 0;
    for (size_t i = 0; i < n; i++) {
        double u = c->x[i] - c->xr;
        tc[i] = c->t0w[i] * exp(-d0 - d1 * u);
        for (size_t j = 0; j < nb; j++)
            if (!c->guess[bf + j])
                tc[i] -= p[bf + j] * pow(u, (double)j);
    }
    for (size_t j = 0; j < nb; j++)
        if (c->guess[bf + j]) {
            for (size_t i = 0; i < n; i++)
                cols[nfree * n + i] = pow(c->x[i] - c->xr, (double)j);
            nfree++;
        }
    if (nfree > 0 && isfinite(guess_lsq(cols, nfree, tc, n, cf)))
        for (size_t j = 0, f = 0; j < nb; j++)
            if (c->guess[bf + j])
                p[bf + j] = cf[f++];
}

int cs_model_guess(cs_model *m, const double *x, const double *y, const double *sigma, size_t n,
                   cs_error *err)
{
    if (!m || !x || !y)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "guess: no model or no data given");
    const size_t np = m->nparams, bf = m->base_first;
    if (n < np || n < 5)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "%zu points are too few to guess the %zu parameters of model '%s'",
                            n, np, m->text);
    double ymin = y[0], ymax = y[0];
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(y[i]))
            return cs_error_set(err, CS_EDATA, NULL, -1, -1, "guess: point %zu is not finite", i);
        if (i > 0 && !(x[i] > x[i - 1]))
            return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                "guess: x must increase strictly (point %zu)", i);
        ymin = y[i] < ymin ? y[i] : ymin;
        ymax = y[i] > ymax ? y[i] : ymax;
    }
    if (m->ncomp > 0 && !(ymax > ymin))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "guess: the data are flat");
    if (m->ncomp + 6 > 64)
        return cs_error_set(err, CS_EUNSUP, NULL, -1, -1,
                            "guess: model '%s' has too many components", m->text);

    gctx c;
    memset(&c, 0, sizeof c);
    c.m = m;
    c.x = x;
    c.y = y;
    c.n = n;
    c.trans = m->mode == CS_MODEL_TRANSMISSION;
    if (ctx_init(&c) != CS_OK) {
        ctx_free(&c);
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "guess: out of memory");
    }
    int base_user = 0;
    c.base_known = np > bf;
    for (size_t i = 0; i < np; i++) {
        c.p[i] = m->par[i].value;
        c.guess[i] = !m->par[i].user_start && m->par[i].tie < 0;
        if (i >= bf) {
            base_user |= m->par[i].user_start;
            c.base_known = c.base_known && m->par[i].user_start;
        }
    }
    c.xr = base_user ? m->x_ref : 0.5 * (x[0] + x[n - 1]);
    c.span = x[n - 1] - x[0];
    for (size_t i = 0; i + 1 < n; i++)
        c.a[i] = x[i + 1] - x[i];
    c.dx = guess_median(c.a, n - 1, c.scratch);
    c.wmin = 2.0 * c.dx;
    c.wmax = 2.0 * c.span;

    if (step_baseline(&c) != CS_OK) {
        ctx_free(&c);
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "guess: the transmission baseline must be positive");
    }
    guess_step_peaks(&c, sigma);
    /* steps 3 to 5; when shoulders were used, once more without them (a shoulder can be a noise
     * feature that misleads the assignment), keeping the start that fits better */
    memcpy(c.p0, c.p, np * sizeof *c.p);
    step_assign(&c, c.ncd);
    double ssr = step_relabel(&c, step_refine(&c));
    if (c.npk < c.ncd) {
        memcpy(c.pbest, c.p, np * sizeof *c.p);
        memcpy(c.p, c.p0, np * sizeof *c.p);
        step_assign(&c, c.npk);
        double ssr2 = step_relabel(&c, step_refine(&c));
        if (!(ssr2 < ssr)) {
            memcpy(c.p, c.pbest, np * sizeof *c.p);
            ssr = guess_objective(&c.g);
        } else {
            ssr = ssr2;
        }
    }
    if (isfinite(ssr))
        step_extract(&c);
    cs_model_apply_ties(m, c.p);

    /* Step 7: store the guessed values, inside their bounds */
    for (size_t i = 0; i < np; i++) {
        if (!c.guess[i] || !isfinite(c.p[i]))
            continue;
        double v = c.p[i];
        const char *dot = strchr(m->par[i].name, '.');
        if (i < bf && dot && is_width(dot + 1) && !(v > 0.0))
            v = c.wmin;
        m->par[i].value = clamp_inside(v, m->par[i].lo, m->par[i].hi);
    }
    for (size_t i = 0; i < np; i++)
        if (m->par[i].tie >= 0)
            m->par[i].value =
                m->par[i].tie_factor * m->par[m->par[i].tie].value + m->par[i].tie_offset;
    m->x_ref = c.xr;
    ctx_free(&c);
    cs_error_clear(err);
    return CS_OK;
}
