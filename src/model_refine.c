/* Automatic starting values, step 4: refinement by variable projection and coordinate descent. */
/*
 * See the top of model_guess.c for the whole strategy. Amplitudes (areas, optical depths, linear
 * baseline coefficients) enter the model linearly, so for trial centres and widths they follow
 * from a small sign-constrained least-squares problem (guess_objective); the nonlinear
 * coordinates are then minimised one at a time on a grid followed by golden-section search
 * (coord_min), sweep after sweep with a pattern move at the end of each (guess_refine). A Voigt
 * is represented by the pseudo-Voigt of Thompson, Cox and Hastings (comp_shape).
 */
#include <collshift/model.h>

#include "model_guess_impl.h"

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* The grids below decide which local minimum the fits that start from the guess end in: the
 * whole-record fits of `collshift split` (sech2+lorentz, src/split_fit.c) move by up to 130
 * standard errors, or fail, on 3 to 8 of 16 synthetic records when any one of them is reduced
 * (width 24 -> 12, centre 17 -> 9, golden 8 -> 7 or 5, sweeps 8 -> 5 or 3, polish 2 sweeps / 4
 * golden -> 1 / 2; measured while trying a cheaper guess). Keep them. */
#define WIDTH_GRID 24
#define CENTER_GRID 17
#define GOLDEN_ITERS 8
#define MAX_SWEEPS 8
#define POLISH_SWEEPS 2
#define POLISH_GOLDEN 4
#define RIDGE 1e-10
#define OL_EQUAL 1.6376 /* Olivero-Longbothum FWHM / f at f_G = f_L = f: 0.5346 + sqrt(1.2166) */

/* ---------------------------------------------------------------- least squares */

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

/* dot(a, b) and dot(a, c) in one pass, each summed exactly as dot() sums it. */
static void dot2(const double *a, const double *b, const double *c, size_t n, double *ab,
                 double *ac)
{
    double s0 = 0.0, s1 = 0.0, s2 = 0.0, s3 = 0.0, t0 = 0.0, t1 = 0.0, t2 = 0.0, t3 = 0.0;
    size_t i = 0;
    for (; i + 4 <= n; i += 4) {
        s0 += a[i] * b[i];
        s1 += a[i + 1] * b[i + 1];
        s2 += a[i + 2] * b[i + 2];
        s3 += a[i + 3] * b[i + 3];
        t0 += a[i] * c[i];
        t1 += a[i + 1] * c[i + 1];
        t2 += a[i + 2] * c[i + 2];
        t3 += a[i + 3] * c[i + 3];
    }
    for (; i < n; i++) {
        s0 += a[i] * b[i];
        t0 += a[i] * c[i];
    }
    *ab = (s0 + s1) + (s2 + s3);
    *ac = (t0 + t1) + (t2 + t3);
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
double guess_lsq(const double *col, size_t nu, const double *t, size_t n, double *coef)
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

static int is_voigt(const cs_profile_type *t)
{
    return strcmp(t->name, "voigt") == 0;
}

/* Total FWHM of a component's line (Voigt: Olivero-Longbothum; fano: about its maximum). */
double guess_comp_width(const cs_profile_type *t, const double *q)
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
void guess_comp_set_width(const cs_profile_type *t, double *q, const unsigned char *free_,
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

/* exp(-t) for 0 <= t <= 700, to a few units in the last place: 2^-k times a degree-12 Taylor
 * polynomial of exp(r), |r| <= ln(2)/2 (truncation 2e-16), without a library call. */
static inline double exp_neg(double t)
{
    const double log2e = 1.44269504088896340736, ln2_hi = 6.93147180369123816490e-01,
                 ln2_lo = 1.90821492927058770002e-10;
    int k = (int)(t * log2e + 0.5);
    double r = ((double)k * ln2_hi - t) + (double)k * ln2_lo;
    double p = 1.0 / 479001600.0;
    p = p * r + 1.0 / 39916800.0;
    p = p * r + 1.0 / 3628800.0;
    p = p * r + 1.0 / 362880.0;
    p = p * r + 1.0 / 40320.0;
    p = p * r + 1.0 / 5040.0;
    p = p * r + 1.0 / 720.0;
    p = p * r + 1.0 / 120.0;
    p = p * r + 1.0 / 24.0;
    p = p * r + 1.0 / 6.0;
    p = p * r + 0.5;
    p = p * r + 1.0;
    p = p * r + 1.0;
    uint64_t bits = (uint64_t)(1023 - k) << 52;
    double scale;
    memcpy(&scale, &bits, sizeof scale);
    return p * scale;
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
    if (use == &cs_profile_pvoigt || use == &cs_profile_lorentz) {
        /* the two shapes the refinement evaluates most: inline, at unit area or unit peak, and
         * the Gaussian part only where it exceeds about 1e-16 of its peak */
        const double c0 = r[0], fw = r[1], eta = use == &cs_profile_lorentz ? 1.0 : r[2];
        const double h = 0.5 * fw, ih = 1.0 / h;
        const double kg = 4.0 * 0.69314718055994530942 / (fw * fw);
        const double ul = 3.7 * fw; /* kg ul^2 = 38: exp(-38) = 3e-17 */
        double al = 1.0 / (3.14159265358979323846 * h), ag = sqrt(kg / 3.14159265358979323846);
        if (unit_peak) {
            double hp = eta * al + (1.0 - eta) * ag;
            if (!(hp > 0.0))
                return CS_ERANGE;
            al /= hp;
            ag /= hp;
        }
        al *= eta;
        ag *= 1.0 - eta;
        size_t i0 = 0;
#if defined(__GNUC__)
        {
            /* two points per vector operation where the compiler has them (each lane is the
               scalar expression below, so the values are the same bits) */
            typedef double v2 __attribute__((vector_size(16)));
            const v2 c2 = {c0, c0}, ih2 = {ih, ih}, al2 = {al, al}, one = {1.0, 1.0};
            for (; i0 + 2 <= n; i0 += 2) {
                v2 xv, e;
                memcpy(&xv, x + i0, sizeof xv);
                e = (xv - c2) * ih2;
                e = al2 / (one + e * e);
                memcpy(out + i0, &e, sizeof e);
            }
        }
#endif
        for (size_t i = i0; i < n; i++) {
            double e = (x[i] - c0) * ih;
            out[i] = al / (1.0 + e * e);
        }
        if (ag != 0.0) {
            /* x ascends (cs_model_guess checks it): |u| < ul is one run of points, found by
               bisection */
            size_t lo = 0, hi = n;
            while (lo < hi) {
                size_t mid = lo + (hi - lo) / 2;
                if (x[mid] - c0 <= -ul)
                    lo = mid + 1;
                else
                    hi = mid;
            }
            for (size_t i = lo; i < n && x[i] - c0 < ul; i++) {
                double u = x[i] - c0;
                out[i] += ag * exp_neg(kg * u * u);
            }
        }
        return CS_OK;
    }
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

/* Residual sum of squares at the current p; the linear unknowns go to g->coef. Only the
 * columns whose shape changed are rebuilt and only their Gram entries recomputed. */
double guess_objective(gw *g)
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
    unsigned char fresh[64]; /* dirty columns not yet written: the first source assigns */
    for (size_t u = 0; u < nlin && u < 64; u++)
        fresh[u] = g->udirty[u];
    if (tt_dirty)
        memcpy(g->tt, g->tgt, n * sizeof *g->tt);
    for (size_t s = 0; s < g->nsrc; s++) {
        const size_t i = g->src[s].param;
        const double *v = g->src[s].col;
        const cs_param *pi = &m->par[i];
        double *dst = NULL, f = 0.0, fixed_part;
        long ud = -1;
        if (g->uidx[i] >= 0) {
            ud = g->uidx[i];
            f = 1.0;
            fixed_part = 0.0;
        } else if (pi->tie >= 0 && g->uidx[pi->tie] >= 0) {
            ud = g->uidx[pi->tie];
            f = pi->tie_factor;
            fixed_part = pi->tie_offset;
        } else {
            fixed_part = g->p[i];
        }
        if (ud >= 0 && g->udirty[ud])
            dst = g->ucol + (size_t)ud * n;
        if (!tt_dirty)
            fixed_part = 0.0;
        if (dst && fresh[ud]) {
            fresh[ud] = 0;
            for (size_t j = 0; j < n; j++)
                dst[j] = f * v[j];
        } else if (dst) {
            for (size_t j = 0; j < n; j++)
                dst[j] += f * v[j];
        }
        if (fixed_part != 0.0)
            for (size_t j = 0; j < n; j++)
                g->tt[j] -= fixed_part * v[j];
    }
    for (size_t u = 0; u < nlin; u++)
        if (fresh[u])
            memset(g->ucol + u * n, 0, n * sizeof *g->ucol);
    if (tt_dirty)
        g->ttt = dot(g->tt, g->tt, n);
    for (size_t u = 0; u < nu; u++) {
        /* the products this column needs, two per pass over the data */
        const double *a = g->ucol + u * n, *b[65];
        double *dst[65][2];
        size_t nb = 0;
        if (g->udirty[u])
            for (size_t v = 0; v < nu; v++)
                if (v == u || !g->udirty[v] || v > u) {
                    b[nb] = g->ucol + v * n;
                    dst[nb][0] = &g->Gr[u * nu + v];
                    dst[nb++][1] = &g->Gr[v * nu + u];
                }
        if (g->udirty[u] || tt_dirty) {
            b[nb] = g->tt;
            dst[nb][0] = dst[nb][1] = &g->rhs[u];
            nb++;
        }
        size_t j = 0;
        for (; j + 2 <= nb; j += 2) {
            double p0, p1;
            dot2(a, b[j], b[j + 1], n, &p0, &p1);
            *dst[j][0] = *dst[j][1] = p0;
            *dst[j + 1][0] = *dst[j + 1][1] = p1;
        }
        if (j < nb)
            *dst[j][0] = *dst[j][1] = dot(a, b[j], n);
    }
    g->cache_ok = 1;
    return lsq_solve(g->Gr, g->rhs, g->ttt, nu, g->coef, g->G, g->sgn);
}

double guess_coord_get(const gw *g, int kind, size_t k)
{
    const cs_model *m = g->m;
    if (kind == CO_RATE)
        return g->p[m->base_first + 1];
    const double *q = g->p + m->comp[k].first;
    return kind == CO_CENTER ? q[0] : guess_comp_width(m->comp[k].type, q);
}

void guess_coord_set(gw *g, int kind, size_t k, double v)
{
    const cs_model *m = g->m;
    if (kind == CO_RATE)
        g->p[m->base_first + 1] = v;
    else if (kind == CO_CENTER)
        g->p[m->comp[k].first] = v;
    else
        guess_comp_set_width(m->comp[k].type, g->p + m->comp[k].first,
                             g->guess + m->comp[k].first, v);
}

/* Minimise the residual along one coordinate: a grid of ng values from a to b (logarithmic
 * when logscale), then iters steps of golden-section search in the best grid bracket. Keeps
 * the best value seen (the current one included, whose residual is *ssr), updates *ssr. */
static void coord_min(gw *g, int kind, size_t k, double a, double b, size_t ng, int logscale,
                      int iters, double *ssr)
{
    double best_v = guess_coord_get(g, kind, k), best = *ssr;
    if (!(a < b) || !isfinite(a) || !isfinite(b) || (logscale && !(a > 0.0)))
        return;
    double ta = logscale ? log(a) : a, tb = logscale ? log(b) : b;
    double step = (tb - ta) / (double)(ng - 1);
    size_t bi = ng;
    double grid_best = INFINITY;
    for (size_t j = 0; j < ng; j++) {
        double tv = ta + step * (double)j;
        guess_coord_set(g, kind, k, logscale ? exp(tv) : tv);
        double s = guess_objective(g);
        if (s < grid_best) {
            grid_best = s;
            bi = j;
        }
        if (s < best) {
            best = s;
            best_v = guess_coord_get(g, kind, k);
        }
    }
    if (bi < ng) {
        const double gr = 0.61803398874989484820;
        double lo = ta + step * (double)(bi > 0 ? bi - 1 : 0);
        double hi = ta + step * (double)(bi + 1 < ng ? bi + 1 : ng - 1);
        double c1 = hi - gr * (hi - lo), c2 = lo + gr * (hi - lo), f1, f2;
        guess_coord_set(g, kind, k, logscale ? exp(c1) : c1);
        f1 = guess_objective(g);
        guess_coord_set(g, kind, k, logscale ? exp(c2) : c2);
        f2 = guess_objective(g);
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
                guess_coord_set(g, kind, k, logscale ? exp(c1) : c1);
                f1 = guess_objective(g);
            } else {
                lo = c1;
                c1 = c2;
                f1 = f2;
                c2 = lo + gr * (hi - lo);
                guess_coord_set(g, kind, k, logscale ? exp(c2) : c2);
                f2 = guess_objective(g);
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
    guess_coord_set(g, kind, k, best_v);
    *ssr = best;
}

/* ---------------------------------------------------------------- coordinate descent */

/* Point the workspace at n points x with target tgt: baseline and offset columns, the linear
 * sources, and an empty shape cache. */
void guess_gw_bind(gw *g, const double *x, const double *tgt, const double *wt, size_t n)
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
                for (size_t i = 0; i < n; i++) /* u^0 and u^1 exactly, without pow */
                    g->bcol[j * n + i] = j == 0   ? 1.0
                                         : j == 1 ? x[i] - g->xr
                                                  : pow(x[i] - g->xr, (double)j);
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
 * (3-point grids: widths within 25 %, centres within a quarter width). */
void guess_refine(gw *g, const size_t *order, double wmin, int polish)
{
    const cs_model *m = g->m;
    const size_t bf = m->base_first;
    const double *x = g->x;
    const size_t np = m->nparams;
    const int iters = polish ? POLISH_GOLDEN : GOLDEN_ITERS;
    double ssr = guess_objective(g);
    for (int sweep = 0; sweep < (polish ? POLISH_SWEEPS : MAX_SWEEPS); sweep++) {
        double prev = ssr;
        memcpy(g->pold, g->p, np * sizeof *g->p);
        for (size_t o = m->ncomp; o-- > 0;) { /* broadest first */
            const size_t k = order[o], first = m->comp[k].first;
            const cs_profile_type *t = m->comp[k].type;
            int wfree = 0;
            for (size_t j = 0; j < t->nparams; j++)
                wfree |= is_width(t->param_names[j]) && g->guess[first + j];
            if (wfree) {
                double w = guess_comp_width(t, g->p + first), a = wmin, b = g->wmax;
                size_t ng = WIDTH_GRID;
                if ((sweep > 0 || polish) && w > 0.0 && isfinite(w)) {
                    double f = polish ? 1.25 : 2.0;
                    a = w / f > wmin ? w / f : wmin;
                    b = f * w < g->wmax ? f * w : g->wmax;
                    ng = polish ? 3 : 9;
                }
                coord_min(g, CO_WIDTH, k, a, b, ng, 1, iters, &ssr);
            }
            if (g->guess[first]) {
                double c = g->p[first], w = guess_comp_width(t, g->p + first);
                if (!(w > 0.0) || !isfinite(w))
                    w = g->span / 10.0;
                if (polish)
                    w *= 0.25;
                double lo = c - w > x[0] ? c - w : x[0];
                double hi = c + w < x[g->n - 1] ? c + w : x[g->n - 1];
                coord_min(g, CO_CENTER, k, lo, hi, polish ? 3 : CENTER_GRID, 0, iters, &ssr);
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
            double st = guess_objective(g);
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
