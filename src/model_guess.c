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
 *    golden-section search in the best bracket), each centre (17 points within one FWHM, then
 *    golden section) and an exponential baseline's rate; each sweep ends with a pattern move
 *    along its own displacement (Hooke and Jeeves), and at most 8 sweeps are made. Every step
 *    keeps the best value seen, so the residual never grows. When the lines are wide compared
 *    with the sampling this runs on every k-th point (at least 10 points per FWHM and 256
 *    points), followed by a short polish on all points. A Voigt is represented here by the
 *    pseudo-Voigt of the same Olivero-Longbothum width and the mixing of Thompson, Cox and
 *    Hastings (P. Thompson, D. E. Cox, J. B. Hastings, J. Appl. Cryst. 20, 79-83 (1987), eq. 4),
 *    within about 1 % of it.
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
 * are the fitter's job. Typical cost: a few ms for two lines on 2048 points.
 *
 * Steps 6 and 7 take the amplitudes and baseline from the final linear solution (in transmission
 * T0 times exp(-offset - slope u), refitted by the model's baseline) and store the values. */
#include <collshift/model.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define WING_FRACTION 0.12
#define WIDTH_GRID 24
#define CENTER_GRID 17
#define GOLDEN_ITERS 12
#define MAX_SWEEPS 8
#define RIDGE 1e-10
#define OL_EQUAL 1.6376 /* Olivero-Longbothum FWHM / f at f_G = f_L = f: 0.5346 + sqrt(1.2166) */

/* ---------------------------------------------------------------- small helpers */

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Median of v[0..n) using scratch (n doubles). */
static double median(const double *v, size_t n, double *scratch)
{
    if (n == 0)
        return 0.0;
    memcpy(scratch, v, n * sizeof *v);
    qsort(scratch, n, sizeof *scratch, cmp_double);
    return n % 2 ? scratch[n / 2] : 0.5 * (scratch[n / 2 - 1] + scratch[n / 2]);
}

/* Solve the symmetric positive definite system G b = r (order k, G row-major, overwritten) by
 * Cholesky. Returns 0, or -1 when G is not positive definite. */
static int chol_solve(double *G, double *r, size_t k)
{
    for (size_t j = 0; j < k; j++) {
        double d = G[j * k + j];
        for (size_t l = 0; l < j; l++)
            d -= G[j * k + l] * G[j * k + l];
        if (!(d > 0.0))
            return -1;
        d = sqrt(d);
        G[j * k + j] = d;
        for (size_t i = j + 1; i < k; i++) {
            double s = G[i * k + j];
            for (size_t l = 0; l < j; l++)
                s -= G[i * k + l] * G[j * k + l];
            G[i * k + j] = s / d;
        }
    }
    for (size_t i = 0; i < k; i++) {
        double s = r[i];
        for (size_t l = 0; l < i; l++)
            s -= G[i * k + l] * r[l];
        r[i] = s / G[i * k + i];
    }
    for (size_t i = k; i-- > 0;) {
        double s = r[i];
        for (size_t l = i + 1; l < k; l++)
            s -= G[l * k + i] * r[l];
        r[i] = s / G[i * k + i];
    }
    return 0;
}

/* Sum of a[i] b[i], four partial sums side by side. */
static double dot(const double *a, const double *b, size_t n)
{
    double s0 = 0.0, s1 = 0.0, s2 = 0.0, s3 = 0.0;
    size_t i = 0;
    for (; i + 4 <= n; i += 4) {
        s0 += a[i] * b[i];
        s1 += a[i + 1] * b[i + 1];
        s2 += a[i + 2] * b[i + 2];
        s3 += a[i + 3] * b[i + 3];
    }
    for (; i < n; i++)
        s0 += a[i] * b[i];
    return (s0 + s1) + (s2 + s3);
}

/* Solve the normal equations of a least-squares problem t ~ sum_u c_u col_u from its raw
 * Gram matrix Gr (nu x nu), right-hand side rhs = C't and tt = t't: columns are scaled to unit
 * norm and a tiny ridge keeps coincident columns solvable. Sign constraints sgn[u] (+1: c_u >= 0,
 * -1: c_u <= 0, 0: free; sgn may be NULL) are kept by dropping, one at a time, the column whose
 * coefficient is most on the wrong side and solving again (a greedy active set in the spirit of
 * Lawson and Hanson's NNLS; dropped coefficients are 0). coef gets c; G is nu*nu scratch.
 * Returns the residual sum of squares t't - c'C't (INFINITY on failure). */
static double lsq_solve(const double *Gr, const double *rhs, double tt, size_t nu, double *coef,
                        double *G, const signed char *sgn)
{
    double nrm[64], b[64], c[64];
    size_t act[64];
    unsigned char on[64];
    if (nu > 64)
        return INFINITY;
    for (size_t u = 0; u < nu; u++) {
        nrm[u] = Gr[u * nu + u] > 0.0 ? 1.0 / sqrt(Gr[u * nu + u]) : 0.0;
        on[u] = 1;
        coef[u] = 0.0;
    }
    for (;;) {
        size_t na = 0;
        for (size_t u = 0; u < nu; u++)
            if (on[u])
                act[na++] = u;
        for (size_t i = 0; i < na; i++) {
            size_t u = act[i];
            for (size_t j = 0; j < na; j++)
                G[i * na + j] = Gr[u * nu + act[j]] * nrm[u] * nrm[act[j]];
            G[i * na + i] += RIDGE + (nrm[u] == 0.0 ? 1.0 : 0.0);
            b[i] = c[i] = rhs[u] * nrm[u];
        }
        if (na > 0 && chol_solve(G, c, na) != 0)
            return INFINITY;
        size_t worst = nu;
        double wv = 0.0;
        for (size_t i = 0; sgn && i < na; i++) {
            double v = sgn[act[i]] * c[i];
            if (v < wv) {
                wv = v;
                worst = act[i];
            }
        }
        if (worst < nu) {
            on[worst] = 0;
            continue;
        }
        double ssr = tt;
        for (size_t i = 0; i < na; i++) {
            ssr -= c[i] * b[i];
            coef[act[i]] = c[i] * nrm[act[i]];
        }
        if (ssr < 0.0)
            ssr = 0.0;
        return isfinite(ssr) ? ssr : INFINITY;
    }
}

/* Least squares t ~ sum_u c_u col_u (nu <= 8 columns of n points, col[u*n + i]); coef gets c;
 * returns the residual sum of squares. */
static double lsq(const double *col, size_t nu, const double *t, size_t n, double *coef)
{
    double Gr[64], rhs[8], G[64];
    if (nu > 8)
        return INFINITY;
    for (size_t u = 0; u < nu; u++) {
        for (size_t v = u; v < nu; v++)
            Gr[u * nu + v] = Gr[v * nu + u] = dot(col + u * n, col + v * n, n);
        rhs[u] = dot(col + u * n, t, n);
    }
    return lsq_solve(Gr, rhs, dot(t, t, n), nu, coef, G, NULL);
}

/* ---------------------------------------------------------------- component shapes */

static int is_width(const char *pname)
{
    return strncmp(pname, "fwhm", 4) == 0;
}

static int is_voigt(const cs_profile_type *t)
{
    return strcmp(t->name, "voigt") == 0;
}

/* Expected sharpness class: 1 for Lorentzian-like profiles, 0 for the others. */
static int sharp_class(const cs_profile_type *t)
{
    return strcmp(t->name, "lorentz") == 0 || strcmp(t->name, "fano") == 0;
}

static size_t pindex(const cs_profile_type *t, const char *name)
{
    return cs_profile_param_index(t, name);
}

/* Total FWHM of a component's line (Voigt: Olivero-Longbothum; fano: about its maximum). */
static double comp_width(const cs_profile_type *t, const double *q)
{
    if (is_voigt(t))
        return cs_profile_voigt_fwhm_ol(q[1], q[2]);
    size_t iq = pindex(t, "q");
    for (size_t j = 0; j < t->nparams; j++)
        if (is_width(t->param_names[j])) {
            double w = q[j];
            if (iq != CS_PROFILE_SKIP && q[iq] != 0.0)
                w *= sqrt(1.0 + 2.0 / (q[iq] * q[iq]));
            return w;
        }
    return NAN;
}

/* Set the free widths of a component so that its total FWHM is W (free[j]: may be set). */
static void comp_set_width(const cs_profile_type *t, double *q, const unsigned char *free_,
                           double W)
{
    if (is_voigt(t)) {
        const double a = 0.5346, b = 0.2166;
        if (free_[1] && free_[2]) {
            q[1] = q[2] = W / OL_EQUAL;
        } else if (free_[2]) { /* f_G given: solve OL for f_L */
            double fg = q[1], A = a * a - b, disc = a * a * W * W - A * (W * W - fg * fg);
            double fl = (W > fg && disc >= 0.0) ? (a * W - sqrt(disc)) / A : 0.0;
            q[2] = fl > 1e-3 * W ? fl : 1e-3 * W;
        } else if (free_[1]) { /* f_L given: solve OL for f_G */
            double fl = q[2], d = (W - a * fl) * (W - a * fl) - b * fl * fl;
            q[1] = d > 1e-6 * W * W ? sqrt(d) : 1e-3 * W;
        }
        return;
    }
    size_t iq = pindex(t, "q");
    double f = W;
    if (iq != CS_PROFILE_SKIP && q[iq] != 0.0)
        f = W / sqrt(1.0 + 2.0 / (q[iq] * q[iq]));
    for (size_t j = 0; j < t->nparams; j++)
        if (is_width(t->param_names[j]) && free_[j])
            q[j] = f;
}

/* Shape of a component with unit area (or unit peak when unit_peak) at the n points, into out.
 * A Voigt is replaced by the pseudo-Voigt of Thompson, Cox and Hastings. Returns CS_OK or the
 * profile's check code. */
static int comp_shape(const cs_profile_type *t, const double *q, const double *x, size_t n,
                      int unit_peak, double *out)
{
    double r[CS_PROFILE_MAX_PARAMS];
    const cs_profile_type *use = t;
    memcpy(r, q, t->nparams * sizeof *r);
    if (is_voigt(t)) {
        double fv = cs_profile_voigt_fwhm_ol(q[1], q[2]);
        double e = fv > 0.0 ? q[2] / fv : 0.0;
        double eta = 1.36603 * e - 0.47719 * e * e + 0.11116 * e * e * e;
        use = &cs_profile_pvoigt;
        r[0] = q[0];
        r[1] = fv;
        r[2] = eta < 0.0 ? 0.0 : eta > 1.0 ? 1.0 : eta;
    }
    size_t ai = cs_profile_area_index(use);
    r[ai] = 1.0;
    int rc = cs_profile_check_params(use, r, NULL);
    if (rc != CS_OK)
        return rc;
    double scale = 1.0;
    if (unit_peak) {
        double h;
        rc = cs_profile_quantity(use, CS_PROFILE_HEIGHT, r, &h, NULL);
        if (rc != CS_OK || !(h > 0.0))
            return rc != CS_OK ? rc : CS_ERANGE;
        scale = 1.0 / h;
    }
    for (size_t i = 0; i < n; i++)
        out[i] = 0.0;
    use->eval(r, x, n, out);
    if (scale != 1.0)
        for (size_t i = 0; i < n; i++)
            out[i] *= scale;
    return CS_OK;
}

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

/* Residual sum of squares at the current p; the linear unknowns go to g->coef. Only the
 * columns whose shape changed are rebuilt and only their Gram entries recomputed. */
static double objective(gw *g)
{
    const cs_model *m = g->m;
    const size_t n = g->n, nu = g->nu, nlin = g->nu - g->ndelta;
    int all = !g->cache_ok, chg_base = 0, tt_dirty = all;
    cs_model_apply_ties(m, g->p);
    for (size_t k = 0; k < m->ncomp; k++) {
        const cs_profile_type *t = m->comp[k].type;
        double q[CS_PROFILE_MAX_PARAMS];
        memcpy(q, g->p + m->comp[k].first, t->nparams * sizeof *q);
        q[cs_profile_area_index(t)] = 0.0;
        double *cache = g->shape_q + k * CS_PROFILE_MAX_PARAMS;
        g->chg[k] = 0;
        if (g->shape_ok[k] && memcmp(q, cache, t->nparams * sizeof *q) == 0) {
            if (g->shape_ok[k] == 2)
                return INFINITY;
            continue;
        }
        memcpy(cache, q, t->nparams * sizeof *q);
        double *col = g->shape + k * n;
        int rc = comp_shape(t, q, g->x, n, g->trans, col);
        for (size_t i = 0; g->wt && rc == CS_OK && i < n; i++)
            col[i] *= g->wt[i];
        g->shape_ok[k] = rc == CS_OK ? 1 : 2;
        g->chg[k] = 1;
        if (rc != CS_OK) {
            g->cache_ok = 0;
            return INFINITY;
        }
    }
    if (!g->trans && m->baseline == CS_BASELINE_EXP) {
        double rate = g->p[m->base_first + 1];
        if (!(rate == g->bcol_rate)) {
            for (size_t i = 0; i < n; i++)
                g->bcol[i] = exp(-rate * (g->x[i] - g->xr));
            g->bcol_rate = rate;
            chg_base = 1;
        }
    }
    for (size_t u = 0; u < nu; u++)
        g->udirty[u] = (unsigned char)all;
    for (size_t s = 0; s < g->nsrc; s++) {
        const lin_src *src = &g->src[s];
        if (!(src->comp >= 0 ? g->chg[src->comp] : chg_base))
            continue;
        const cs_param *pi = &m->par[src->param];
        if (g->uidx[src->param] >= 0) {
            g->udirty[g->uidx[src->param]] = 1;
        } else if (pi->tie >= 0 && g->uidx[pi->tie] >= 0) {
            g->udirty[g->uidx[pi->tie]] = 1;
            tt_dirty = 1;
        } else {
            tt_dirty = 1;
        }
    }
    for (size_t u = 0; u < nlin; u++)
        if (g->udirty[u])
            memset(g->ucol + u * n, 0, n * sizeof *g->ucol);
    if (tt_dirty)
        memcpy(g->tt, g->tgt, n * sizeof *g->tt);
    for (size_t s = 0; s < g->nsrc; s++) {
        const size_t i = g->src[s].param;
        const double *v = g->src[s].col;
        const cs_param *pi = &m->par[i];
        double *dst = NULL, f = 0.0, fixed_part;
        if (g->uidx[i] >= 0) {
            if (g->udirty[g->uidx[i]])
                dst = g->ucol + (size_t)g->uidx[i] * n;
            f = 1.0;
            fixed_part = 0.0;
        } else if (pi->tie >= 0 && g->uidx[pi->tie] >= 0) {
            if (g->udirty[g->uidx[pi->tie]])
                dst = g->ucol + (size_t)g->uidx[pi->tie] * n;
            f = pi->tie_factor;
            fixed_part = pi->tie_offset;
        } else {
            fixed_part = g->p[i];
        }
        if (!tt_dirty)
            fixed_part = 0.0;
        if (!dst && fixed_part == 0.0)
            continue;
        for (size_t j = 0; j < n; j++) {
            if (dst)
                dst[j] += f * v[j];
            g->tt[j] -= fixed_part * v[j];
        }
    }
    if (tt_dirty)
        g->ttt = dot(g->tt, g->tt, n);
    for (size_t u = 0; u < nu; u++) {
        const double *a = g->ucol + u * n;
        if (g->udirty[u])
            for (size_t v = 0; v < nu; v++)
                if (v == u || !g->udirty[v] || v > u)
                    g->Gr[u * nu + v] = g->Gr[v * nu + u] = dot(a, g->ucol + v * n, n);
        if (g->udirty[u] || tt_dirty)
            g->rhs[u] = dot(a, g->tt, n);
    }
    g->cache_ok = 1;
    return lsq_solve(g->Gr, g->rhs, g->ttt, nu, g->coef, g->G, g->sgn);
}

enum { CO_WIDTH, CO_CENTER, CO_RATE };

static double coord_get(const gw *g, int kind, size_t k)
{
    const cs_model *m = g->m;
    if (kind == CO_RATE)
        return g->p[m->base_first + 1];
    const double *q = g->p + m->comp[k].first;
    return kind == CO_CENTER ? q[0] : comp_width(m->comp[k].type, q);
}

static void coord_set(gw *g, int kind, size_t k, double v)
{
    const cs_model *m = g->m;
    if (kind == CO_RATE)
        g->p[m->base_first + 1] = v;
    else if (kind == CO_CENTER)
        g->p[m->comp[k].first] = v;
    else
        comp_set_width(m->comp[k].type, g->p + m->comp[k].first, g->guess + m->comp[k].first, v);
}

/* Minimise the residual along one coordinate: a grid of ng values from a to b (logarithmic
 * when logscale), then iters steps of golden-section search in the best grid bracket. Keeps
 * the best value seen (the current one included, whose residual is *ssr), updates *ssr. */
static void coord_min(gw *g, int kind, size_t k, double a, double b, size_t ng, int logscale,
                      int iters, double *ssr)
{
    double best_v = coord_get(g, kind, k), best = *ssr;
    if (!(a < b) || !isfinite(a) || !isfinite(b) || (logscale && !(a > 0.0)))
        return;
    double ta = logscale ? log(a) : a, tb = logscale ? log(b) : b;
    double step = (tb - ta) / (double)(ng - 1);
    size_t bi = ng;
    double grid_best = INFINITY;
    for (size_t j = 0; j < ng; j++) {
        double tv = ta + step * (double)j;
        coord_set(g, kind, k, logscale ? exp(tv) : tv);
        double s = objective(g);
        if (s < grid_best) {
            grid_best = s;
            bi = j;
        }
        if (s < best) {
            best = s;
            best_v = coord_get(g, kind, k);
        }
    }
    if (bi < ng) {
        const double gr = 0.61803398874989484820;
        double lo = ta + step * (double)(bi > 0 ? bi - 1 : 0);
        double hi = ta + step * (double)(bi + 1 < ng ? bi + 1 : ng - 1);
        double c1 = hi - gr * (hi - lo), c2 = lo + gr * (hi - lo), f1, f2;
        coord_set(g, kind, k, logscale ? exp(c1) : c1);
        f1 = objective(g);
        coord_set(g, kind, k, logscale ? exp(c2) : c2);
        f2 = objective(g);
        for (int it = 0; it < iters; it++) {
            if (f1 < best) {
                best = f1;
                best_v = logscale ? exp(c1) : c1;
            }
            if (f2 < best) {
                best = f2;
                best_v = logscale ? exp(c2) : c2;
            }
            if (f1 <= f2) {
                hi = c2;
                c2 = c1;
                f2 = f1;
                c1 = hi - gr * (hi - lo);
                coord_set(g, kind, k, logscale ? exp(c1) : c1);
                f1 = objective(g);
            } else {
                lo = c1;
                c1 = c2;
                f1 = f2;
                c2 = lo + gr * (hi - lo);
                coord_set(g, kind, k, logscale ? exp(c2) : c2);
                f2 = objective(g);
            }
        }
        if (f1 < best) {
            best = f1;
            best_v = logscale ? exp(c1) : c1;
        }
        if (f2 < best) {
            best = f2;
            best_v = logscale ? exp(c2) : c2;
        }
    }
    coord_set(g, kind, k, best_v);
    *ssr = best;
}

/* ---------------------------------------------------------------- peaks */

typedef struct cand {
    double xc;    /* position */
    double w;     /* full width at half prominence */
    double ws;    /* twice the smaller half width at half prominence: a line on another's flank
                     is measured on its free side */
    double wc;    /* curvature width sqrt(8 P / -s''), at most ws */
    double prom;  /* prominence (shoulders: height estimate) */
    size_t i;     /* index of the point */
} cand;

static int cmp_cand_prom(const void *a, const void *b)
{
    double x = ((const cand *)a)->prom, y = ((const cand *)b)->prom;
    return (x < y) - (x > y);
}

/* Second derivative of s at i by divided differences over +-h points (0 near the ends). */
static double second_diff(const double *x, const double *s, size_t n, size_t i, size_t h)
{
    if (i < h || i + h >= n)
        return 0.0;
    double dl = (s[i] - s[i - h]) / (x[i] - x[i - h]);
    double dr = (s[i + h] - s[i]) / (x[i + h] - x[i]);
    return 2.0 * (dr - dl) / (x[i + h] - x[i - h]);
}

/* Peaks of s with prominence >= thr, into out (room for n/2 + 1); returns their number. */
static size_t find_peaks(const double *x, const double *s, size_t n, double thr, size_t h,
                         cand *out)
{
    size_t nc = 0;
    for (size_t i = 1; i + 1 < n; i++) {
        if (!(s[i] > s[i - 1]))
            continue;
        size_t j = i;
        while (j + 1 < n && s[j + 1] == s[i])
            j++;
        if (j + 1 >= n || !(s[j + 1] < s[i])) {
            i = j;
            continue;
        }
        size_t pk = (i + j) / 2;
        double minl = s[pk], minr = s[pk];
        size_t l = pk, r = j;
        while (l > 0 && s[l - 1] <= s[pk])
            if (s[--l] < minl)
                minl = s[l];
        while (r + 1 < n && s[r + 1] <= s[pk])
            if (s[++r] < minr)
                minr = s[r];
        double prom = s[pk] - (minl > minr ? minl : minr);
        i = j;
        if (!(prom >= thr))
            continue;
        double level = s[pk] - 0.5 * prom, xl = x[0], xr = x[n - 1];
        for (size_t a = pk; a > 0; a--)
            if (s[a - 1] <= level) {
                xl = x[a - 1] + (level - s[a - 1]) * (x[a] - x[a - 1]) / (s[a] - s[a - 1]);
                break;
            }
        for (size_t b = pk; b + 1 < n; b++)
            if (s[b + 1] <= level) {
                xr = x[b] + (s[b] - level) * (x[b + 1] - x[b]) / (s[b] - s[b + 1]);
                break;
            }
        /* vertex of the parabola through the three points around the maximum */
        double x0 = x[pk - 1], x1 = x[pk], x2 = x[pk + 1];
        double d1 = (s[pk] - s[pk - 1]) / (x1 - x0), d2 = (s[pk + 1] - s[pk]) / (x2 - x1);
        double c2 = (d2 - d1) / (x2 - x0), xc = x1;
        if (c2 < 0.0) {
            xc = 0.5 * (x0 + x1) - d1 / (2.0 * c2);
            if (xc < x0 || xc > x2)
                xc = x1;
        }
        double curv = -second_diff(x, s, n, pk, h);
        double ws = 2.0 * (xc - xl < xr - xc ? xc - xl : xr - xc);
        cand c = {xc, xr - xl, ws, ws, prom, pk};
        if (curv > 0.0) {
            double wc = sqrt(8.0 * prom / curv);
            if (wc < c.wc)
                c.wc = wc;
        }
        out[nc++] = c;
    }
    return nc;
}

/* Shoulders: minima of s'' (inside the signal, clear of the peaks already found) deeper than
 * thr2 (five standard deviations of s'' from noise alone). Appends to c (room for n/2 more);
 * d2: n doubles of scratch. */
static size_t find_shoulders(const double *x, const double *s, size_t n, double thr, size_t h,
                             double thr2, cand *c, size_t nc, double *d2)
{
    for (size_t i = 0; i < n; i++)
        d2[i] = second_diff(x, s, n, i, h);
    size_t n0 = nc;
    for (size_t i = h + 1; i + h + 1 < n; i++) {
        if (!(d2[i] < d2[i - 1] && d2[i] <= d2[i + 1] && -d2[i] > thr2 && s[i] > thr))
            continue;
        int near = 0;
        for (size_t k = 0; k < n0; k++)
            if (fabs(x[i] - c[k].xc) < 0.25 * c[k].ws)
                near = 1;
        if (near)
            continue;
        size_t l = i, r = i;
        while (l > 0 && d2[l - 1] < 0.0)
            l--;
        while (r + 1 < n && d2[r + 1] < 0.0)
            r++;
        double w = 1.5 * (x[r] - x[l]);
        if (!(w > 0.0))
            continue;
        cand sh = {x[i], w, w, w, -d2[i] * w * w / 8.0, i};
        c[nc++] = sh;
    }
    return nc;
}

/* Gaussian smoothing weights w[0..K] (w[j] for offsets +-j, normalised) of a kernel of sk
 * points; returns K. */
static size_t kernel(double sk, double w[64])
{
    if (sk <= 0.0) {
        w[0] = 1.0;
        return 0;
    }
    size_t K = (size_t)ceil(3.0 * sk);
    if (K > 63)
        K = 63;
    double sum = 0.0;
    for (size_t j = 0; j <= K; j++) {
        w[j] = exp(-0.5 * (double)(j * j) / (sk * sk));
        sum += j ? 2.0 * w[j] : w[j];
    }
    for (size_t j = 0; j <= K; j++)
        w[j] /= sum;
    return K;
}

/* Standard deviations, per unit white-noise sigma, of the smoothed signal (*nf) and of its
 * second difference s[i+h] - 2 s[i] + s[i-h] (*nf2, when not NULL): norms of the filters. */
static void noise_factors(double sk, size_t h, double *nf, double *nf2)
{
    double w[64];
    long K = (long)kernel(sk, w), H = (long)h;
    double a = 0.0, b = 0.0;
    for (long j = -K - H; j <= K + H; j++) {
        long aj = j < 0 ? -j : j, ap = labs(j + H), am = labs(j - H);
        double wj = aj <= K ? w[aj] : 0.0;
        double f = (am <= K ? w[am] : 0.0) - 2.0 * wj + (ap <= K ? w[ap] : 0.0);
        a += wj * wj;
        b += f * f;
    }
    *nf = sqrt(a);
    if (nf2)
        *nf2 = sqrt(b);
}

/* Gaussian smoothing of r with a kernel of sk points (0: copy) into s; near the ends the
 * weights are renormalised. */
static void smooth(const double *r, size_t n, double sk, double *s)
{
    double w[64];
    size_t K = kernel(sk, w);
    for (size_t i = 0; i < n; i++) {
        double a = w[0] * r[i], ws = w[0];
        for (size_t j = 1; j <= K; j++) {
            if (i >= j) {
                a += w[j] * r[i - j];
                ws += w[j];
            }
            if (i + j < n) {
                a += w[j] * r[i + j];
                ws += w[j];
            }
        }
        s[i] = a / ws;
    }
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
    double xl = median(x, nw, scratch), yl = median(v, nw, scratch);
    double xh = median(x + n - nw, nw, scratch), yh = median(v + n - nw, nw, scratch);
    for (size_t j = 0; j < 4; j++)
        c[j] = 0.0;
    if (kind == CS_BASELINE_CONST) {
        memcpy(scratch + n, v, nw * sizeof *v);
        memcpy(scratch + n + nw, v + n - nw, nw * sizeof *v);
        c[0] = median(scratch + n, 2 * nw, scratch);
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

/* Point the workspace at n points x with target tgt: baseline and offset columns, the linear
 * sources, and an empty shape cache. */
static void gw_bind(gw *g, const double *x, const double *tgt, const double *wt, size_t n)
{
    const cs_model *m = g->m;
    const size_t bf = m->base_first, nb = m->nparams - bf;
    g->x = x;
    g->tgt = tgt;
    g->wt = wt;
    g->n = n;
    g->nsrc = 0;
    g->bcol_rate = NAN;
    memset(g->shape_ok, 0, m->ncomp ? m->ncomp : 1);
    for (size_t k = 0; k < m->ncomp; k++) {
        g->src[g->nsrc].param = m->comp[k].first + cs_profile_area_index(m->comp[k].type);
        g->src[g->nsrc].comp = (long)k;
        g->src[g->nsrc++].col = g->shape + k * n;
    }
    g->cache_ok = 0;
    if (!g->trans && nb > 0) {
        for (size_t j = 0; j < (m->baseline == CS_BASELINE_EXP ? 1 : nb); j++) {
            if (m->baseline != CS_BASELINE_EXP)
                for (size_t i = 0; i < n; i++)
                    g->bcol[j * n + i] = pow(x[i] - g->xr, (double)j);
            g->src[g->nsrc].param = bf + j;
            g->src[g->nsrc].comp = -1;
            g->src[g->nsrc++].col = g->bcol + j * n;
        }
    }
    for (size_t j = 0; j < g->ndelta; j++)
        for (size_t i = 0; i < n; i++)
            g->ucol[(g->nu - g->ndelta + j) * n + i] =
                (j == 0 ? 1.0 : (x[i] - g->xr) / g->hs) * (wt ? wt[i] : 1.0);
}

/* Cyclic coordinate descent over the components' widths and centres (broadest first) and an
 * exponential baseline's rate; the first sweep scans widths over the whole range, later ones
 * from half to twice the current width. A polish makes at most two sweeps of small steps
 * (widths within 25 %, centres within a quarter width). */
static void refine(gw *g, const size_t *order, double wmin, int polish)
{
    const cs_model *m = g->m;
    const size_t bf = m->base_first;
    const double *x = g->x;
    const size_t np = m->nparams;
    const int iters = polish ? 6 : GOLDEN_ITERS;
    double ssr = objective(g);
    for (int sweep = 0; sweep < (polish ? 2 : MAX_SWEEPS); sweep++) {
        double prev = ssr;
        memcpy(g->pold, g->p, np * sizeof *g->p);
        for (size_t o = m->ncomp; o-- > 0;) { /* broadest first */
            const size_t k = order[o], first = m->comp[k].first;
            const cs_profile_type *t = m->comp[k].type;
            int wfree = 0;
            for (size_t j = 0; j < t->nparams; j++)
                wfree |= is_width(t->param_names[j]) && g->guess[first + j];
            if (wfree) {
                double w = comp_width(t, g->p + first), a = wmin, b = g->wmax;
                size_t ng = WIDTH_GRID;
                if ((sweep > 0 || polish) && w > 0.0 && isfinite(w)) {
                    double f = polish ? 1.25 : 2.0;
                    a = w / f > wmin ? w / f : wmin;
                    b = f * w < g->wmax ? f * w : g->wmax;
                    ng = polish ? 5 : 9;
                }
                coord_min(g, CO_WIDTH, k, a, b, ng, 1, iters, &ssr);
            }
            if (g->guess[first]) {
                double c = g->p[first], w = comp_width(t, g->p + first);
                if (!(w > 0.0) || !isfinite(w))
                    w = g->span / 10.0;
                if (polish)
                    w *= 0.25;
                double lo = c - w > x[0] ? c - w : x[0];
                double hi = c + w < x[g->n - 1] ? c + w : x[g->n - 1];
                coord_min(g, CO_CENTER, k, lo, hi, polish ? 5 : CENTER_GRID, 0, iters, &ssr);
            }
        }
        if (!g->trans && m->baseline == CS_BASELINE_EXP && g->guess[bf + 1]) {
            double r0 = g->p[bf + 1], half = fabs(r0) * (polish ? 0.1 : 0.5);
            if (half < (polish ? 0.1 : 1.0) / g->span)
                half = (polish ? 0.1 : 1.0) / g->span;
            coord_min(g, CO_RATE, 0, r0 - half, r0 + half, polish ? 5 : CENTER_GRID, 0, iters,
                      &ssr);
        }
        /* pattern move (Hooke and Jeeves): go on along this sweep's displacement d, to
         * p + a d for a = 1, 2, 4, 8, while that lowers the residual; it crosses the long
         * valleys of overlapping lines that coordinate steps zig-zag through */
        memcpy(g->ptry, g->p, np * sizeof *g->p);
        double best_a = 0.0;
        for (double a = 1.0; a <= 8.0 && sweep > 0; a *= 2.0) {
            for (size_t i = 0; i < np; i++)
                if (g->guess[i] && g->uidx[i] < 0)
                    g->p[i] = g->ptry[i] + a * (g->ptry[i] - g->pold[i]);
            double st = objective(g);
            if (!(st < ssr))
                break;
            ssr = st;
            best_a = a;
        }
        for (size_t i = 0; i < np; i++)
            if (g->guess[i] && g->uidx[i] < 0)
                g->p[i] = g->ptry[i] + best_a * (g->ptry[i] - g->pold[i]);
        if (!(prev - ssr > 1e-4 * prev))
            break;
    }
}

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

/* Step 2: noise, smoothing and the candidate peaks (most prominent first). */
static void step_peaks(gctx *c, const double *sigma)
{
    const size_t n = c->n;
    double *r = c->r, *s = c->s, *a = c->a;
    for (size_t i = 0; i + 1 < n; i++)
        a[i] = r[i + 1] - r[i];
    double md = median(a, n - 1, c->scratch);
    for (size_t i = 0; i + 1 < n; i++)
        a[i] = fabs(a[i] - md);
    double sn = 1.4826 * median(a, n - 1, c->scratch) / sqrt(2.0);
    if (sigma && !c->trans) {
        size_t k = 0;
        for (size_t i = 0; i < n; i++)
            if (isfinite(sigma[i]) && sigma[i] > 0.0)
                a[k++] = sigma[i];
        if (k > 0)
            sn = median(a, k, c->scratch);
    }
    double amp = 0.0;
    for (size_t i = 0; i < n; i++)
        amp = fabs(r[i]) > amp ? fabs(r[i]) : amp;
    double rho = amp > 0.0 ? sn / amp : 0.0;
    double sk = rho < 0.002 ? 0.0 : (1.0 + 40.0 * rho < 3.0 ? 1.0 + 40.0 * rho : 3.0);
    if (sk > (double)n / 60.0)
        sk = (double)n / 60.0 < 0.5 ? 0.0 : (double)n / 60.0;
    smooth(r, n, sk, s);
    double smax = s[0], smin = s[0];
    for (size_t i = 1; i < n; i++) {
        smax = s[i] > smax ? s[i] : smax;
        smin = s[i] < smin ? s[i] : smin;
    }
    const int flip = smax < -smin;
    c->flip = flip;
    if (flip) { /* dips: look for peaks of -r */
        for (size_t i = 0; i < n; i++)
            s[i] = -s[i];
        smax = -smin;
    }
    size_t h = sk >= 1.5 ? (size_t)lround(sk) : 1;
    double nf;
    noise_factors(sk, h, &nf, NULL);
    double thr = 8.0 * sn * nf > 0.02 * smax ? 8.0 * sn * nf : 0.02 * smax;
    size_t npk = find_peaks(c->x, s, n, thr, h, c->cd);
    if (c->trans) { /* the absorbance's noise grows as 1/T: a dip must stand out of its own */
        size_t keep = 0;
        for (size_t k = 0; k < npk; k++) {
            size_t i = c->cd[k].i;
            double t = c->y[i] / c->t0w[i];
            if (c->cd[k].prom * (t > 0.03 ? t : 0.03) >= 8.0 * sn * nf)
                c->cd[keep++] = c->cd[k];
        }
        npk = keep;
    }
    qsort(c->cd, npk, sizeof *c->cd, cmp_cand_prom);
    c->ncd = c->npk = npk;
    if (npk < c->m->ncomp) {
        /* shoulders, at the scale of the main peak (a sixth of its width) and four times it */
        double sk0 = npk > 0 ? c->cd[0].w / c->dx / 6.0 : sk, prev = -1.0;
        double *s2 = c->scratch + n;
        for (int sc = 0; sc < 2; sc++) {
            double sk2 = (sk0 > sk ? sk0 : sk) * (sc ? 4.0 : 1.0);
            sk2 = sk2 > 21.0 ? 21.0 : sk2;
            sk2 = sk2 > (double)n / 20.0 ? (double)n / 20.0 : sk2;
            size_t h2 = sk2 >= 1.5 ? (size_t)lround(sk2) : 1;
            if (!(sk2 > prev) || n < 2 * h2 + 3)
                break;
            prev = sk2;
            smooth(r, n, sk2, s2);
            for (size_t i = 0; flip && i < n; i++)
                s2[i] = -s2[i];
            double nfa, nfb;
            noise_factors(sk2, h2, &nfa, &nfb);
            double thr2b = 5.0 * sn * nfb / ((double)(h2 * h2) * c->dx * c->dx);
            c->ncd = find_shoulders(c->x, s2, n, thr, h2, thr2b, c->cd, c->ncd, a);
        }
        qsort(c->cd + npk, c->ncd - npk, sizeof *c->cd, cmp_cand_prom);
    }
    for (size_t k = 0; k < c->ncd; k++) {
        cand *d = &c->cd[k];
        d->w = d->w < c->wmin ? c->wmin : d->w > c->wmax ? c->wmax : d->w;
        d->ws = d->ws < c->wmin ? c->wmin : d->ws > d->w ? d->w : d->ws;
        d->wc = d->wc < c->wmin ? c->wmin : d->wc > d->ws ? d->ws : d->wc;
    }
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
        comp_set_width(t, q, gq, W0[k] < c->wmin ? c->wmin : W0[k] > c->wmax ? c->wmax : W0[k]);
        if (gq[0]) {
            q[0] = C0[k];
            size_t iq = pindex(t, "q");
            if (iq != CS_PROFILE_SKIP && q[iq] != 0.0)
                q[0] -= q[1] / (2.0 * q[iq]); /* fano: its maximum lies at center + fwhm/(2q) */
        }
    }
}

/* Step 4: set up the linear problem and refine (on every stride-th point when the lines are
 * much wider than the sampling, keeping at least 10 points per FWHM and 256 points, then a
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
    gw_bind(g, c->x, tgt, wt, n);
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
    gw_bind(g, c->x, tgt, wt, n); /* now with the offset columns */

    double wn = INFINITY;
    for (size_t k = 0; k < m->ncomp; k++) {
        double w = comp_width(m->comp[k].type, c->p + m->comp[k].first);
        wn = w < wn ? w : wn;
    }
    size_t stride = isfinite(wn) ? (size_t)(wn / (10.0 * c->dx)) : 1;
    if (stride > n / 256)
        stride = n / 256;
    if (stride >= 2) {
        size_t ns = 0;
        for (size_t i = 0; i < n; i += stride, ns++) {
            c->xs[ns] = c->x[i];
            c->ts[ns] = tgt[i];
            c->wts[ns] = wt ? wt[i] : 1.0;
        }
        gw_bind(g, c->xs, c->ts, wt ? c->wts : NULL, ns);
        refine(g, c->order, 2.0 * c->dx * (double)stride, 0);
        gw_bind(g, c->x, tgt, wt, n);
        refine(g, c->order, c->wmin, 1);
    } else {
        refine(g, c->order, c->wmin, 0);
    }
    return objective(g);
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
            double wa = coord_get(g, CO_WIDTH, a), wb = coord_get(g, CO_WIDTH, b);
            if (!(wa > wb))
                continue;
            double ca = coord_get(g, CO_CENTER, a), cb = coord_get(g, CO_CENTER, b);
            coord_set(g, CO_WIDTH, a, wb);
            coord_set(g, CO_CENTER, a, cb);
            coord_set(g, CO_WIDTH, b, wa);
            coord_set(g, CO_CENTER, b, ca);
            swapped = 1;
        }
    if (swapped) {
        refine(g, c->order, c->wmin, 1);
        ssr = objective(g);
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
    if (nfree > 0 && isfinite(lsq(cols, nfree, tc, n, cf)))
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
    c.dx = median(c.a, n - 1, c.scratch);
    c.wmin = 2.0 * c.dx;
    c.wmax = 2.0 * c.span;

    if (step_baseline(&c) != CS_OK) {
        ctx_free(&c);
        return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                            "guess: the transmission baseline must be positive");
    }
    step_peaks(&c, sigma);
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
            ssr = objective(&c.g);
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
