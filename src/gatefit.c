/* Gate-aware fits of decays and bursts to a gate's samples: names and options, set-up and the
 * driver, results, model evaluation and the model's gated spectrum (the likelihood is explained
 * in gatefit.h).
 *
 * The burst's spectrum. For a > 0 take the rectangle -R, R, R + i pi, -R + i pi around the only
 * pole of e^{-iau} / cosh u inside it, u = i pi/2 (cosh has a simple zero there with derivative
 * sinh(i pi/2) = i, so the residue is e^{a pi/2} / i). Since cosh(u + i pi) = -cosh u, the top
 * edge contributes e^{a pi} times the integral J along the real axis, the vertical edges vanish
 * as R -> infinity, and (1 + e^{a pi}) J = 2 pi i e^{a pi/2} / i, so
 *     J = int sech(u) e^{-iau} du = pi sech(pi a / 2)       (also for a <= 0, J being even in a):
 * sech is its own Fourier transform up to scaling, the pair listed in tables of Fourier
 * transforms (e.g. I. S. Gradshteyn and I. M. Ryzhik, Table of Integrals, Series, and Products,
 * 3.981.3: int_0^inf cos(ax)/cosh(bx) dx = (pi/(2b)) sech(pi a/(2b)); entry number from memory,
 * the derivation above stands on its own). With u = t/tau and a = 2 pi nu tau:
 *     int sech(t/tau) e^{-2 pi i nu t} dt = pi tau sech(pi^2 tau nu),
 * so a burst's power spectrum is proportional to sech^2(pi^2 tau (f - f0)), which falls to half
 * where cosh = sqrt 2, pi^2 tau |f - f0| = ln(1 + sqrt 2): FWHM = 2 ln(1 + sqrt 2)/(pi^2 tau)
 * (CS_GATEFIT_SECH_FWHM_TAU / tau). By Parseval its integral over f is int A^2 sech^2 dt
 * = 2 A^2 tau. tests/test_gatefit.c checks both against the model's gated spectrum.
 *
 * The solver, its internal variables and the covariance are in gatefit_solve.c, the starting
 * values in gatefit_start.c. */
#include "gatefit_impl.h"

#include <collshift/window.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>

#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define PI_ 3.14159265358979323846
/* Decay rates (burst widths) of the starting model are taken this much smaller (1/this larger)
 * when choosing the samples the solver evaluates (cs_gatefit_impl_active). */
#define GF_ACTIVE_MARGIN 0.75

/* ---------------------------------------------------------------- names, parsing, options */

static const char *const decay_names[CS_GATEFIT_DECAY_NPARAMS] = {"center_hz", "gamma_per_s",
                                                                  "amplitude", "phase_rad"};
static const char *const burst_names[CS_GATEFIT_BURST_NPARAMS] = {"center_hz", "tau_s", "t_peak_s",
                                                                  "amplitude", "phase_rad"};

/* The component registry: what the model text may name. */
static const struct {
    cs_gatefit_kind kind;
    const char *name;
    size_t nparams;
    const char *const *param_names;
} components[] = {
    {CS_GATEFIT_DECAY, "decay", CS_GATEFIT_DECAY_NPARAMS, decay_names},
    {CS_GATEFIT_BURST, "burst", CS_GATEFIT_BURST_NPARAMS, burst_names},
};
#define NCOMPONENTS (sizeof components / sizeof components[0])

const char *cs_gatefit_kind_name(cs_gatefit_kind k)
{
    for (size_t i = 0; i < NCOMPONENTS; i++)
        if (components[i].kind == k)
            return components[i].name;
    return "unknown";
}

size_t cs_gatefit_kind_nparams(cs_gatefit_kind k)
{
    for (size_t i = 0; i < NCOMPONENTS; i++)
        if (components[i].kind == k)
            return components[i].nparams;
    return 0;
}

const char *cs_gatefit_noise_name(cs_gatefit_noise n)
{
    switch (n) {
    case CS_GATEFIT_NOISE_RESIDUALS: return "residuals";
    case CS_GATEFIT_NOISE_GIVEN: return "given";
    case CS_GATEFIT_NOISE_RECORD: return "record";
    case CS_GATEFIT_NOISE_ENVELOPE: return "envelope";
    }
    return "unknown";
}

int cs_gatefit_parse(const char *text, cs_gatefit_kind *kinds, size_t max, size_t *ncomp, cs_error *err)
{
    if (!text || !kinds || !ncomp)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate-aware model: NULL argument");
    *ncomp = 0;
    size_t n = 0;
    const char *p = text;
    for (;;) {
        while (*p == ' ' || *p == '\t')
            p++;
        const char *q = p;
        while (*q && *q != '+')
            q++;
        const char *e = q;
        while (e > p && (e[-1] == ' ' || e[-1] == '\t'))
            e--;
        size_t len = (size_t)(e - p);
        if (len == 0)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "gate-aware model '%s': empty component (expected decay or burst)", text);
        size_t c = 0;
        while (c < NCOMPONENTS &&
               !(strlen(components[c].name) == len && strncmp(p, components[c].name, len) == 0))
            c++;
        if (c == NCOMPONENTS)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "gate-aware model '%s': unknown component '%.*s': known components are "
                                "decay, burst", text, (int)(len > 64 ? 64 : len), p);
        if (n >= max || n >= CS_GATEFIT_MAX_COMP)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "gate-aware model '%s': more than %zu components", text,
                                max < CS_GATEFIT_MAX_COMP ? max : (size_t)CS_GATEFIT_MAX_COMP);
        kinds[n++] = components[c].kind;
        if (*q == '\0')
            break;
        p = q + 1;
    }
    *ncomp = n;
    return CS_OK;
}

void cs_gatefit_start_init(cs_gatefit_start *s)
{
    if (!s)
        return;
    s->center_hz = s->gamma_per_s = s->tau_s = s->t_peak_s = NAN;
}

void cs_gatefit_options_default(cs_gatefit_options *o)
{
    if (!o)
        return;
    memset(o, 0, sizeof *o);
    o->noise = CS_GATEFIT_NOISE_RESIDUALS;
    o->noise_sd = 0.0;
    o->max_iter = 200;
    o->xtol = 1e-10;
    o->gtol = 1e-10;
    o->start = NULL;
    o->nstart = 0;
}

void cs_gatefit_result_free(cs_gatefit_result *r)
{
    if (!r)
        return;
    free(r->model);
    free(r->comp);
    free(r->value);
    free(r->err);
    free(r->cov);
    free(r);
}

char *cs_gatefit_param_name(const cs_gatefit_result *r, size_t i, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    buf[0] = '\0';
    if (!r || i >= r->nparams)
        return buf;
    for (size_t k = 0; k < r->ncomp; k++) {
        size_t np = cs_gatefit_kind_nparams(r->comp[k].kind);
        if (i >= r->comp[k].first && i < r->comp[k].first + np) {
            for (size_t c = 0; c < NCOMPONENTS; c++)
                if (components[c].kind == r->comp[k].kind)
                    snprintf(buf, n, "%zu.%s", k + 1, components[c].param_names[i - r->comp[k].first]);
            break;
        }
    }
    return buf;
}

static void fill_components(const gf_fit *F, const double *u, cs_gatefit_result *r,
                            const gf_theta *start)
{
    const double nan = NAN;
    for (size_t k = 0; k < F->P.ncomp; k++) {
        cs_gatefit_component *c = &r->comp[k];
        const double *v = r->value + F->first[k], *e = r->err + F->first[k];
        c->kind = F->P.kind[k];
        c->first = F->first[k];
        c->center_hz = v[0];
        c->center_hz_err = e[0];
        c->offset_hz = F->f0[k] + F->sf[k] * u[F->first[k]];
        cs_gatefit_start_init(&c->start);
        c->start.center_hz = F->lo + start->f[k];
        c->gamma_per_s = c->gamma_per_s_err = c->tau_s = c->tau_s_err = nan;
        c->t_peak_s = c->t_peak_s_err = nan;
        size_t ia = 2;
        if (c->kind == CS_GATEFIT_DECAY) {
            c->gamma_per_s = v[1];
            c->gamma_per_s_err = e[1];
            c->fwhm_hz = v[1] / (2.0 * PI_);
            c->fwhm_hz_err = e[1] / (2.0 * PI_);
            c->start.gamma_per_s = start->rate[k];
        } else {
            c->tau_s = v[1];
            c->tau_s_err = e[1];
            c->t_peak_s = v[2];
            c->t_peak_s_err = e[2];
            c->fwhm_hz = CS_GATEFIT_SECH_FWHM_TAU / v[1];
            c->fwhm_hz_err = CS_GATEFIT_SECH_FWHM_TAU * e[1] / (v[1] * v[1]);
            c->start.tau_s = start->rate[k];
            c->start.t_peak_s = F->t_g + start->tp[k];
            ia = 3;
        }
        c->amplitude = v[ia];
        c->amplitude_err = e[ia];
        c->phase_rad = v[ia + 1];
        c->phase_rad_err = e[ia + 1];
    }
}

/* ---------------------------------------------------------------- set-up */

/* The k-th smallest of d[0..n) (k < n), reordering d: selection by repeated partitioning
 * around d[k] (Hoare's FIND), linear time on average instead of a full sort's n log n. */
static double select_kth(double *d, size_t n, size_t k)
{
    ptrdiff_t l = 0, h = (ptrdiff_t)n - 1, kk = (ptrdiff_t)k;
    while (l < h) {
        double x = d[kk];
        ptrdiff_t i = l, j = h;
        do {
            while (d[i] < x)
                i++;
            while (x < d[j])
                j--;
            if (i <= j) {
                double t = d[i];
                d[i] = d[j];
                d[j] = t;
                i++;
                j--;
            }
        } while (i <= j);
        if (j < kk)
            l = i;
        if (kk < i)
            h = j;
    }
    return d[kk];
}

/* The k-th smallest of the n non-negative finite doubles d[0..n) (k < n), reordering d. Such
 * doubles sort as their bit patterns do (IEEE 754), so one counting pass over the top 16 bits
 * (sign, exponent and 4 bits of the mantissa) finds the bucket that holds rank k; the values of
 * that bucket, a small fraction of d, are moved to the front and select_kth finishes there. The
 * value is the same as select_kth on the whole array, for a few operations per element instead
 * of a partition's dozens. counts: how many of d fall in each bucket (the caller counts them as it
 * fills d). */
static double select_kth_nonneg(double *d, size_t n, size_t k, const uint32_t *counts)
{
    if (n > UINT32_MAX)
        return select_kth(d, n, k);
    size_t below = 0, bucket = 0;
    while (below + counts[bucket] <= k)
        below += counts[bucket++];
    size_t nb = 0;
    for (size_t i = 0; i < n; i++) {
        uint64_t b;
        memcpy(&b, &d[i], sizeof b);
        if ((size_t)(b >> 48) == bucket)
            d[nb++] = d[i];
    }
    return select_kth(d, nb, k - below);
}

/* Robust noise of the gate per real component: 1.4826 MAD(first differences) / sqrt 2; the rms
 * of the gate when that is 0; 1 for an all-zero gate. */
static double gate_noise(const double *x, size_t m, int cplx)
{
    size_t nv = cplx ? 2 * m : m, nd = 0;
    double *d = malloc(nv * sizeof *d);
    uint32_t *counts = malloc(65536 * sizeof *counts);
    if (!d || !counts) {
        free(d);
        free(counts);
        return NAN;
    }
    memset(counts, 0, 65536 * sizeof *counts);
    /* the k-th smallest does not depend on the order of d: I and Q differences side by side */
    if (cplx) {
        size_t j = 0;
#if defined(__GNUC__)
        /* (I, Q) differences of one step in the two lanes of a vector; |.| clears the sign bit */
        typedef double v2d __attribute__((vector_size(16)));
        typedef long long v2l __attribute__((vector_size(16)));
        const v2l nosign = {0x7fffffffffffffffLL, 0x7fffffffffffffffLL};
        for (; j + 1 < m; j++) {
            v2d a, b;
            memcpy(&a, x + 2 * j + 2, sizeof a);
            memcpy(&b, x + 2 * j, sizeof b);
            v2l bits = (v2l)(a - b) & nosign;
            memcpy(d + nd, &bits, sizeof bits);
            counts[(uint64_t)bits[0] >> 48]++;
            counts[(uint64_t)bits[1] >> 48]++;
            nd += 2;
        }
#endif
        for (; j + 1 < m; j++) {
            double vr = fabs(x[2 * j + 2] - x[2 * j]), vi = fabs(x[2 * j + 3] - x[2 * j + 1]);
            uint64_t br, bi;
            memcpy(&br, &vr, sizeof br);
            memcpy(&bi, &vi, sizeof bi);
            counts[br >> 48]++;
            counts[bi >> 48]++;
            d[nd] = vr;
            d[nd + 1] = vi;
            nd += 2;
        }
    } else {
        for (size_t j = 0; j + 1 < m; j++) {
            double v = fabs(x[j + 1] - x[j]);
            uint64_t bits;
            memcpy(&bits, &v, sizeof bits);
            counts[bits >> 48]++;
            d[nd++] = v;
        }
    }
    double med = nd > 0 ? select_kth_nonneg(d, nd, nd / 2, counts) : 0.0;
    free(counts);
    free(d);
    double s = 1.482602218505602 * med / sqrt(2.0);
    if (s > 0 && isfinite(s))
        return s;
    double ss = 0.0;
    for (size_t i = 0; i < nv; i++)
        ss += x[i] * x[i];
    s = sqrt(ss / (double)nv);
    return s > 0 ? s : 1.0;
}

/* With w NULL: the first of the gate's m samples (pairs for a complex record) that is not
 * finite, m when all are. With w given (all samples finite): the indices j with w_j > 0 into
 * idx (*nused of them) and *allzero = whether every such sample is zero. Loops specialised per
 * kind of record (the test of the kind inside them cost as much as the work). */
static size_t first_nonfinite(const double *x, size_t m, int cplx, const double *w, size_t *idx, size_t *nused,
                              int *allzero)
{
    if (!w) {
        /* x * 0 summed stays 0 unless some x is Inf or NaN: one multiply-add per value (two per
           vector operation), the scan for the first bad sample only when it is not */
        size_t nv = cplx ? 2 * m : m, i = 0;
        double acc = 0.0;
#if defined(__GNUC__)
        typedef double v2 __attribute__((vector_size(16)));
        v2 a2 = {0.0, 0.0};
        const v2 z2 = {0.0, 0.0};
        for (; i + 2 <= nv; i += 2) {
            v2 v;
            memcpy(&v, x + i, sizeof v);
            a2 += v * z2;
        }
        acc = a2[0] + a2[1];
#endif
        for (; i < nv; i++)
            acc += x[i] * 0.0;
        if (acc == 0.0)
            return m;
        if (cplx) {
            for (size_t j = 0; j < m; j++)
                if (!isfinite(x[2 * j]) || !isfinite(x[2 * j + 1]))
                    return j;
        } else {
            for (size_t j = 0; j < m; j++)
                if (!isfinite(x[j]))
                    return j;
        }
        return m;
    }
    size_t n = 0;
    int zero = 1;
    if (cplx) {
        for (size_t j = 0; j < m; j++)
            if (w[j] > 0) {
                idx[n++] = j;
                zero &= x[2 * j] == 0 && x[2 * j + 1] == 0;
            }
    } else {
        for (size_t j = 0; j < m; j++)
            if (w[j] > 0) {
                idx[n++] = j;
                zero &= x[j] == 0;
            }
    }
    *nused = n;
    *allzero = zero;
    return m;
}

static int check_options(const cs_gatefit_options *o, size_t ncomp, cs_error *err)
{
    if (o->max_iter == 0 || !(o->xtol > 0) || !(o->gtol >= 0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate-aware fit: max_iter must be >= 1, xtol > 0 and gtol >= 0");
    if (o->noise != CS_GATEFIT_NOISE_RESIDUALS && o->noise != CS_GATEFIT_NOISE_GIVEN &&
        o->noise != CS_GATEFIT_NOISE_RECORD && o->noise != CS_GATEFIT_NOISE_ENVELOPE)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate-aware fit: unknown noise source");
    if (o->noise == CS_GATEFIT_NOISE_GIVEN && !(o->noise_sd > 0 && isfinite(o->noise_sd)))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate-aware fit: a given noise level must be finite and > 0");
    if (o->nstart != 0 && (o->nstart != ncomp || !o->start))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate-aware fit: %zu starting values for %zu components", o->nstart, ncomp);
    for (size_t k = 0; k < o->nstart; k++) {
        const cs_gatefit_start *s = &o->start[k];
        if (isinf(s->center_hz) || isinf(s->t_peak_s) || s->gamma_per_s <= 0 || isinf(s->gamma_per_s) ||
            s->tau_s <= 0 || isinf(s->tau_s))
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "gate-aware fit: starting values of component %zu out of range", k + 1);
    }
    return CS_OK;
}

static cs_gatefit_result *result_alloc(const char *model, size_t ncomp, size_t np)
{
    cs_gatefit_result *r = calloc(1, sizeof *r);
    if (!r)
        return NULL;
    r->model = malloc(strlen(model) + 1);
    r->comp = calloc(ncomp, sizeof *r->comp);
    r->value = malloc(np * sizeof *r->value);
    r->err = malloc(np * sizeof *r->err);
    r->cov = malloc(np * np * sizeof *r->cov);
    if (!r->model || !r->comp || !r->value || !r->err || !r->cov) {
        cs_gatefit_result_free(r);
        return NULL;
    }
    strcpy(r->model, model);
    r->ncomp = ncomp;
    r->nparams = np;
    return r;
}

/* Scales and phase references of the internal variables from the starting values, and the
 * starting u (layout and meaning at the top of gatefit_solve.c). */
static void initial_variables(gf_fit *F, const gf_theta *th0, double *u)
{
    F->a_ref = 0.0;
    for (size_t k = 0; k < F->P.ncomp; k++)
        F->a_ref = fmax(F->a_ref, cabs(th0->c[k]));
    if (!(F->a_ref > 0) || !isfinite(F->a_ref))
        F->a_ref = F->s_fit;
    for (size_t k = 0; k < F->P.ncomp; k++) {
        double *v = u + F->first[k];
        F->f0[k] = th0->f[k];
        v[0] = 0.0;
        size_t ia = 2;
        if (F->P.kind[k] == CS_GATEFIT_DECAY) {
            F->sf[k] = 1.0 / F->P.T;
            v[1] = log(th0->rate[k] * F->P.T);
        } else {
            F->tau0[k] = th0->rate[k];
            F->tp0[k] = th0->tp[k];
            F->sf[k] = 1.0 / (PI_ * th0->rate[k]);
            v[1] = log(th0->rate[k] / F->P.T);
            v[2] = 0.0;
            ia = 3;
        }
        /* the phase reference: the centroid of the starting intensity over the used samples
           (after the active ones it is negligible) */
        double sw = 0.0, sws = 0.0;
        gf_basis_it it;
        cs_gatefit_impl_basis_init(&it, F->P.kind[k], th0->f[k], th0->rate[k], th0->tp[k], F->P.dt);
        for (size_t i = 0; i < F->P.nact; i++) {
            double s = (double)F->P.idx[i] * F->P.dt;
            double complex E = gf_basis_next(&it, F->P.idx[i], NULL);
            double e2 = creal(E) * creal(E) + cimag(E) * cimag(E);
            sw += e2;
            sws += e2 * s;
        }
        F->sref[k] = sw > 0 && isfinite(sws / sw) ? sws / sw : 0.0;
        double ph = 2.0 * PI_ * th0->f[k] * F->sref[k];
        double complex c_r = th0->c[k] * (cos(ph) + I * sin(ph));
        v[ia] = creal(c_r) / F->a_ref;
        v[ia + 1] = cimag(c_r) / F->a_ref;
    }
}

/* ---------------------------------------------------------------- the driver */

int cs_gatefit_run(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *g, const char *model,
                   double lo_hz, const cs_gatefit_options *o, cs_gatefit_result **out, cs_error *err)
{
    if (out)
        *out = NULL;
    if (!rec || !rec->data || !g || !model || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate-aware fit: NULL argument");
    gsl_set_error_handler_off();
    cs_gatefit_options def;
    if (!o) {
        cs_gatefit_options_default(&def);
        o = &def;
    }
    if (!isfinite(lo_hz))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate-aware fit: LO frequency not finite");
    gf_fit F;
    memset(&F, 0, sizeof F);
    int rc = cs_gatefit_parse(model, F.P.kind, CS_GATEFIT_MAX_COMP, &F.P.ncomp, err);
    if (rc != CS_OK)
        return rc;
    rc = check_options(o, F.P.ncomp, err);
    if (rc != CS_OK)
        return rc;
    size_t first, m;
    rc = cs_gate_samples(g, rec, &first, &m, err);
    if (rc != CS_OK)
        return rc;
    const int cplx = rec->is_complex != 0;
    const double *x = rec->data + (cplx ? 2 * first : first);
    double *w = malloc(m * sizeof *w), *ss_after = malloc((m + 1) * sizeof *ss_after);
    size_t *idx = malloc(m * sizeof *idx);
    cs_gatefit_result *r = NULL;
    cs_gate_workspace *own = NULL;
    size_t bad = first_nonfinite(x, m, cplx, NULL, NULL, NULL, NULL);
    if (bad < m) {
        rc = cs_error_set(err, CS_EDATA, rec->source, -1, -1, "gate '%s': non-finite sample %zu", g->name,
                          first + bad);
        goto done;
    }
    if (!w || !idx || !ss_after) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a gate of %zu samples", m);
        goto done;
    }
    /* a rectangular window uses every sample (no window to sample and test) */
    const int all_used = g->window.type == &cs_window_rect;
    size_t nused = 0;
    int allzero = 1;
    if (all_used) {
        for (size_t j = 0; j < m; j++)
            idx[j] = j;
        nused = m;
        for (size_t i = 0; i < (cplx ? 2 * m : m) && allzero; i++)
            allzero = x[i] == 0;
    } else {
        rc = cs_window_fill(&g->window, m, g->periodic ? CS_WINDOW_PERIODIC : CS_WINDOW_SYMMETRIC, w);
        if (rc != CS_OK) {
            rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': invalid window", g->name);
            goto done;
        }
        first_nonfinite(x, m, cplx, w, idx, &nused, &allzero);
    }
    F.P.cplx = cplx;
    F.P.x = x;
    F.P.m = m;
    F.P.dt = rec->dt_s;
    F.P.T = (double)m * rec->dt_s;
    F.P.idx = idx;
    F.P.nused = nused;
    F.P.nact = nused;
    ss_after[nused] = 0.0;
    if (cplx && nused == m) {   /* every sample used: idx[i] = i */
        for (size_t i = nused; i-- > 0;)
            ss_after[i] = ss_after[i + 1] + (x[2 * i] * x[2 * i] + x[2 * i + 1] * x[2 * i + 1]);
    } else if (cplx) {
        for (size_t i = nused; i-- > 0;) {
            size_t j = idx[i];
            ss_after[i] = ss_after[i + 1] + (x[2 * j] * x[2 * j] + x[2 * j + 1] * x[2 * j + 1]);
        }
    } else {
        for (size_t i = nused; i-- > 0;) {
            size_t j = idx[i];
            ss_after[i] = ss_after[i + 1] + x[j] * x[j];
        }
    }
    F.P.ss_after = ss_after;
    F.lo = lo_hz;
    F.t_g = rec->t0_s + (double)first * rec->dt_s;
    F.np = 0;
    for (size_t k = 0; k < F.P.ncomp; k++) {
        F.first[k] = F.np;
        F.np += cs_gatefit_kind_nparams(F.P.kind[k]);
    }
    const size_t nres_all = cplx ? 2 * nused : nused;
    F.nres = nres_all;
    F.nres_all = nres_all;
    if (F.nres <= F.np) {
        rc = cs_error_set(err, CS_EDATA, rec->source, -1, -1,
                          "gate '%s': %zu samples with window > 0 give %zu residuals, not more than the "
                          "%zu parameters of '%s'", g->name, nused, F.nres, F.np, model);
        goto done;
    }
    if (allzero) {
        rc = cs_error_set(err, CS_EDATA, rec->source, -1, -1, "gate '%s': every sample is zero", g->name);
        goto done;
    }
    if (!ws) {
        own = cs_gate_alloc();
        if (!own) {
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a gate workspace");
            goto done;
        }
        ws = own;
    }
    double sigma = NAN;
    if (o->noise == CS_GATEFIT_NOISE_GIVEN) {
        sigma = o->noise_sd;
    } else if (o->noise == CS_GATEFIT_NOISE_RECORD) {
        sigma = cs_record_noise(rec);
    } else if (o->noise == CS_GATEFIT_NOISE_ENVELOPE) {
        cs_envelope *env = NULL;
        rc = cs_envelope_compute(ws, rec, NULL, &env, err);
        if (rc != CS_OK)
            goto done;
        sigma = sqrt(env->floor_raw / 2.0);
        cs_envelope_free(env);
    }
    if (o->noise != CS_GATEFIT_NOISE_RESIDUALS && (!(sigma > 0) || !isfinite(sigma))) {
        rc = cs_error_set(err, CS_EDATA, rec->source, -1, -1, "noise level of the record unknown (%g)", sigma);
        goto done;
    }
    F.s_fit = isfinite(sigma) ? sigma : gate_noise(x, m, cplx);
    if (!isfinite(F.s_fit)) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the noise estimate");
        goto done;
    }
    gf_theta th0, th;
    rc = cs_gatefit_impl_start(ws, &F.P, o->nstart ? o->start : NULL, F.t_g, lo_hz, &th0, err);
    if (rc != CS_OK)
        goto done;
    /* the active stretch: where the starting model, its rates 0.75 times smaller (its widths
       4/3 times larger), is not negligible; after the solve it must still cover the solution's
       model, else the fit goes on from there over a longer stretch */
    double u[CS_GATEFIT_MAX_COMP * CS_GATEFIT_BURST_NPARAMS];
    F.P.nact = cs_gatefit_impl_active(&F.P, &th0, GF_ACTIVE_MARGIN);
    initial_variables(&F, &th0, u);
    r = result_alloc(model, F.P.ncomp, F.np);
    if (!r) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a fit result");
        goto done;
    }
    size_t niter = 0;
    for (;;) {
        F.nres = cplx ? 2 * F.P.nact : F.P.nact;
        F.rest_ss = ss_after[F.P.nact] / (F.s_fit * F.s_fit);
        rc = cs_gatefit_impl_solve(&F, o, u, r, err);
        niter += r->niter;
        if (rc != CS_OK)
            goto done;
        cs_gatefit_impl_theta(&F, u, &th);
        if (F.P.nact == nused || cs_gatefit_impl_active(&F.P, &th, 1.0) <= F.P.nact)
            break;
        F.P.nact = cs_gatefit_impl_active(&F.P, &th, GF_ACTIVE_MARGIN);
    }
    r->niter = niter;
    gsl_vector *res = gsl_vector_alloc(F.nres);
    if (!res) {
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the residuals");
        goto done;
    }
    int finite = cs_gatefit_impl_evaluate(&F, u, res, NULL);
    double nrm = gsl_blas_dnrm2(res);
    gsl_vector_free(res);
    if (!finite)
        r->status = CS_FIT_MODEL_NAN;
    r->rss = finite ? nrm * nrm * F.s_fit * F.s_fit + ss_after[F.P.nact] : NAN;
    r->n = nres_all;
    r->dof = nres_all - F.np;
    r->noise = o->noise;
    r->errors_scaled = o->noise == CS_GATEFIT_NOISE_RESIDUALS;
    r->noise_sd = r->errors_scaled ? sqrt(r->rss / (double)r->dof) : sigma;
    r->chi2 = r->errors_scaled ? r->rss : r->rss / (sigma * sigma);
    r->redchi2 = r->chi2 / (double)r->dof;
    r->nfev = F.nfev;
    r->njev = F.njev;
    r->gate = *g;
    r->gate.t_start_s = F.t_g;
    r->is_complex = cplx;
    r->first = first;
    r->m = m;
    r->nused = nused;
    r->t0_s = rec->t0_s;
    r->dt_s = rec->dt_s;
    r->t_gate_s = F.t_g;
    r->lo_hz = lo_hz;
    cs_gatefit_impl_values(&F, &th, r->value);
    if (r->status == CS_FIT_CONVERGED) {
        int singular = 0;
        double factor = r->noise_sd * r->noise_sd / (F.s_fit * F.s_fit);
        rc = cs_gatefit_impl_covariance(&F, u, &th, factor, r, &singular, err);
        if (rc != CS_OK)
            goto done;
        if (singular)
            r->status = CS_FIT_SINGULAR;
    } else {
        for (size_t i = 0; i < F.np * F.np; i++)
            r->cov[i] = NAN;
    }
    for (size_t i = 0; i < F.np; i++) {
        double v = r->cov[i * F.np + i];
        r->err[i] = v >= 0 ? sqrt(v) : NAN;
    }
    fill_components(&F, u, r, &th0);
    if (r->status == CS_FIT_NOT_CONVERGED || r->status == CS_FIT_MODEL_NAN)
        rc = cs_error_set(err, CS_ENOCONV, rec->source, -1, -1, "gate '%s': fit of '%s' %s (%s)", g->name,
                          model, cs_fit_status_name(r->status), cs_fit_stop_name(r->stop));
done:
    if (rc != CS_OK && rc != CS_ENOCONV) {
        cs_gatefit_result_free(r);
        r = NULL;
    }
    *out = r;
    cs_gate_free(own);
    free(idx);
    free(ss_after);
    free(w);
    return rc;
}

/* ---------------------------------------------------------------- the fitted model */

int cs_gatefit_model_eval(const cs_gatefit_result *r, size_t first, size_t n, double *out)
{
    if (!r || (!out && n > 0))
        return CS_EINVAL;
    for (size_t i = 0; i < n; i++) {
        double s = ((double)(first + i) - (double)r->first) * r->dt_s;
        double complex M = 0.0;
        for (size_t k = 0; k < r->ncomp; k++) {
            const cs_gatefit_component *c = &r->comp[k];
            double f = c->offset_hz;
            double rate = c->kind == CS_GATEFIT_DECAY ? c->gamma_per_s : c->tau_s;
            double tp = c->kind == CS_GATEFIT_BURST ? c->t_peak_s - r->t_gate_s : 0.0;
            double complex a = c->amplitude * (cos(c->phase_rad) + I * sin(c->phase_rad));
            M += a * cs_gatefit_impl_basis(c->kind, f, rate, tp, s);
        }
        if (r->is_complex) {
            out[2 * i] = creal(M);
            out[2 * i + 1] = cimag(M);
        } else {
            out[i] = creal(M);
        }
    }
    return CS_OK;
}

/* Expected noise PSD per bin for white noise through the gate's window (see gatefit.h). */
static int add_noise_floor(cs_gate_workspace *ws, const cs_gatefit_result *r, const cs_gate_options *o,
                           cs_gated_spectrum *s, cs_error *err)
{
    const double sig = r->noise_sd, dt = r->dt_s;
    if (!(sig >= 0) || !isfinite(sig))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "noise level of the fit is not finite");
    const size_t nfq = s->psd->n, N = s->nfft, m = r->m;
    const double var = r->is_complex ? 2.0 * sig * sig : sig * sig;   /* E|noise|^2 per sample */
    double *q = malloc(nfq * sizeof *q);
    if (!q)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the noise floor");
    for (size_t k = 0; k < nfq; k++)
        q[k] = 1.0;
    int rc = CS_OK;
    if (o->remove_mean) {
        /* a_l = w_l (e_l - W/S): sum |a|^2 = S2 - 2 Re(conj(W) V)/S + |W|^2 S2/S^2 with
         * W = sum w e, V = sum w^2 e, both through the same transform (rect window). */
        cs_record *tw = cs_record_alloc(m, r->is_complex), *tv = cs_record_alloc(m, r->is_complex);
        double *XW = malloc(2 * nfq * sizeof *XW), *XV = malloc(2 * nfq * sizeof *XV);
        double *w = malloc(m * sizeof *w);
        cs_window rect;
        if (!tw || !tv || !XW || !XV || !w) {
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the noise floor");
        } else if ((rc = cs_window_fill(&r->gate.window, m, r->gate.periodic, w)) != CS_OK ||
                   (rc = cs_window_init(&rect, &cs_window_rect, 0.0, err)) != CS_OK) {
            rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1, "invalid window");
        } else {
            double S = 0, S2 = 0;
            for (size_t j = 0; j < m; j++) {
                S += w[j];
                S2 += w[j] * w[j];
                tw->data[r->is_complex ? 2 * j : j] = w[j];
                tv->data[r->is_complex ? 2 * j : j] = w[j] * w[j];
            }
            tw->dt_s = tv->dt_s = dt;
            rc = cs_gate_psd_samples(ws, tw, 0, m, &rect, 1, N, 0, NULL, XW, NULL, NULL, err);
            if (rc == CS_OK)
                rc = cs_gate_psd_samples(ws, tv, 0, m, &rect, 1, N, 0, NULL, XV, NULL, NULL, err);
            for (size_t k = 0; rc == CS_OK && k < nfq; k++) {
                double wr = XW[2 * k] / dt, wi = XW[2 * k + 1] / dt;
                double vr = XV[2 * k] / dt, vi = XV[2 * k + 1] / dt;
                double a2 = S2 - 2.0 * (wr * vr + wi * vi) / S + (wr * wr + wi * wi) * S2 / (S * S);
                q[k] = fmax(a2, 0.0) / S2;
            }
        }
        free(w);
        free(XV);
        free(XW);
        cs_record_free(tv);
        cs_record_free(tw);
    }
    if (rc == CS_OK)
        for (size_t k = 0; k < nfq; k++) {
            double ck = 1.0;
            if (!r->is_complex && k > 0 && !(N % 2 == 0 && k == nfq - 1))
                ck = 2.0;
            s->psd->y[k] += ck * var * dt * q[k];
        }
    free(q);
    return rc;
}

int cs_gatefit_model_psd(cs_gate_workspace *ws, const cs_gatefit_result *r, const cs_gate_options *o,
                         int with_noise, cs_gated_spectrum **out, cs_error *err)
{
    cs_gate_options def;
    if (!o) {
        cs_gate_options_default(&def);
        o = &def;
    }
    if (!ws || !r || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate-aware model spectrum: NULL argument");
    cs_record *tmp = cs_record_alloc(r->m, r->is_complex);
    if (!tmp)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a model record");
    tmp->dt_s = r->dt_s;
    tmp->t0_s = r->t_gate_s;
    cs_gatefit_model_eval(r, r->first, r->m, tmp->data);
    cs_gate gg = r->gate;
    gg.start_s = 0.0;
    gg.length_s = (double)r->m * r->dt_s;
    int created = *out == NULL;
    int rc = cs_gate_spectrum(ws, tmp, &gg, o, out, err);
    cs_gated_spectrum *s = *out;
    if (rc == CS_OK && s->m != r->m)
        rc = cs_error_set(err, CS_ERANGE, NULL, -1, -1, "model gate of %zu samples instead of %zu", s->m, r->m);
    if (rc == CS_OK) {
        s->gate = r->gate;
        s->first = r->first;
        s->t_gate_s = r->t_gate_s;
        if (cs_meta_set_si(&s->psd->meta, "gate_start", r->gate.start_s, CS_DIM_TIME) != CS_OK ||
            cs_meta_set_text(&s->psd->meta, "gatefit_model", r->model) != CS_OK)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for metadata");
        const char *src = "gatefit model";
        char *copy = rc == CS_OK ? malloc(strlen(src) + 1) : NULL;
        if (copy) {
            strcpy(copy, src);
            free(s->psd->source);
            s->psd->source = copy;
        } else if (rc == CS_OK) {
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for metadata");
        }
    }
    if (rc == CS_OK && with_noise)
        rc = add_noise_floor(ws, r, o, s, err);
    if (rc != CS_OK && created && *out) {
        cs_gated_spectrum_free(*out);
        *out = NULL;
    }
    cs_record_free(tmp);
    return rc;
}
