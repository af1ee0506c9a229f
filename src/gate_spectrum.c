/* Gated spectra: windowing, padding and transforming a gate; power spectra, shot averages. */
/*
 * One pass to window and pad. The forward plans are out-of-place with FFTW_PRESERVE_INPUT, so
 * the zeros of the padding survive a transform: the workspace remembers from where its input
 * buffer is known to be zero and only clears what the previous gate dirtied. The windowing pass
 * reads the gate once and writes x_j w_j dt (-1)^j: the factor dt makes X the Riemann sum of
 * the continuous transform, and (-1)^j = exp(i pi j) shifts the output by N/2 bins, so for even
 * N the transform's output is already in ascending (fftshifted) frequency order and goes straight
 * into the caller's array (X_k' = X_{k - N/2}, exactly, no extra pass). Odd N takes one extra
 * rotating copy. The same pass multiplies each sample by 0 into an accumulator, which stays 0
 * unless a sample is NaN or infinite, so non-finite input is caught without a second pass.
 * Windows are sampled once per (window, length, form) and kept in a small cache, since a
 * 2^20-point Hann window costs several times a memory pass in cos() calls.
 *
 * Normalisation (see gate.h for the formulas and their checks): S = |X|^2 / (dt sum w^2), two-
 * sided for complex input, doubled except at DC and Nyquist for real input (one-sided), so that
 * sum S df equals the window-weighted mean power (Parseval's theorem). The gated spectrum's
 * frequency axis is only rewritten when its length, dt, LO or side changed.
 *
 * Transform length: the smallest even 2^a 3^b 5^c 7^d at or above pad * m. FFTW handles every
 * length, but lengths with large prime factors are several times slower; the factors up to 7
 * have FFTW codelets. Evenness keeps the (-1)^j shift exact and gives one-sided spectra a
 * Nyquist bin.
 */
#include <collshift/gate.h>
#include <collshift/units.h>

#include "gate_impl.h"

#include <limits.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Two doubles in one vector register where the compiler has them (GCC and Clang vector
 * extension): two bins per instruction in the per-bin loops below, with the operations of the
 * scalar loop on each lane (the same bits). */
#if defined(__GNUC__)
typedef double gs_v2 __attribute__((vector_size(16)));
#define GS_LANES 2
#else
#define GS_LANES 1
#endif

/* ---------------------------------------------------------------- windowed transforms */

static const struct win_entry *get_window(cs_gate_workspace *ws, const cs_window *w, int periodic,
                                          size_t m, cs_error *err)
{
    periodic = periodic ? CS_WINDOW_PERIODIC : CS_WINDOW_SYMMETRIC;
    ws->tick++;
    struct win_entry *victim = &ws->win[0];
    for (int i = 0; i < WIN_CACHE; i++) {
        struct win_entry *e = &ws->win[i];
        if (e->type == w->type && e->param == w->param && e->periodic == periodic && e->m == m &&
            e->w) {
            e->used = ws->tick;
            return e;
        }
        if (e->used < victim->used)
            victim = e;
    }
    double *buf = victim->m >= m && victim->w ? victim->w : malloc(m * sizeof(double));
    if (!buf) {
        cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a window of %zu samples", m);
        return NULL;
    }
    if (buf != victim->w) {
        free(victim->w);
        victim->w = buf;
    }
    victim->type = NULL;
    int rc = cs_window_fill(w, m, periodic, buf);
    if (rc != CS_OK) {
        cs_error_set(err, rc, NULL, -1, -1, "invalid window");
        return NULL;
    }
    double s = 0, s2 = 0;
    if (w->type == &cs_window_rect && m < ((size_t)1 << 53)) {
        s = s2 = (double)m;   /* m ones: the sums below, exactly */
    } else {
        for (size_t j = 0; j < m; j++) {
            s += buf[j];
            s2 += buf[j] * buf[j];
        }
    }
    if (!(s2 > 0)) {
        cs_error_set(err, CS_EDATA, NULL, -1, -1, "window of %zu samples is zero", m);
        return NULL;
    }
    victim->type = w->type;
    victim->param = w->param;
    victim->periodic = periodic;
    victim->m = m;
    victim->sum = s;
    victim->sum2 = s2;
    victim->used = ws->tick;
    return victim;
}

/* Window, pad and transform samples [first, first + m) of rec into length N. The ascending
 * spectrum (cs_gate_nfreq(N) complex values, already multiplied by dt) ends up in dest when
 * dest is not NULL, else in workspace scratch; *res points to it. */
static int transform_gate(cs_gate_workspace *ws, const cs_record *rec, size_t first, size_t m,
                          const struct win_entry *we, size_t N, int remove_mean, double *dest,
                          double **res, cs_error *err)
{
    const int cplx = rec->is_complex != 0;
    const int kind = cplx ? CS_GATE_FFT_FORWARD : CS_GATE_FFT_R2C;
    fftw_plan p = gate_get_plan(ws, N, kind, 0, err);
    if (!p)
        return err ? err->code : CS_EUNSUP;
    size_t nin = cplx ? 2 * N : N, nfq = cs_gate_nfreq(N, cplx);
    if (gate_grow_in(ws, nin) != CS_OK || gate_grow(&ws->out, &ws->out_cap, 2 * nfq) != CS_OK)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a transform of %zu points", N);
    const double *w = we->w;
    const double dt = rec->dt_s;
    double *in = ws->in;
    double bad = 0.0;
    const int shift = cplx && N % 2 == 0;
    if (cplx) {
        const double *x = rec->data + 2 * first;
        double mr = 0, mi = 0;
        if (remove_mean) {
            for (size_t j = 0; j < m; j++) {
                mr += w[j] * x[2 * j];
                mi += w[j] * x[2 * j + 1];
            }
            mr /= we->sum;
            mi /= we->sum;
        }
        const double c1 = dt, c2 = shift ? -dt : dt;
        size_t j = 0;
#if GS_LANES == 2
        /* (re, im) of a sample in the two lanes of a vector: the same operations per lane */
        const gs_v2 mean = {mr, mi}, zero = {0.0, 0.0};
        gs_v2 badv = {0.0, 0.0};
        for (; j + 1 < m; j += 2) {
            double a0 = w[j] * c1, a1 = w[j + 1] * c2;
            gs_v2 s0, s1;
            memcpy(&s0, x + 2 * j, sizeof s0);
            memcpy(&s1, x + 2 * j + 2, sizeof s1);
            s0 -= mean;
            s1 -= mean;
            gs_v2 o0 = s0 * (gs_v2){a0, a0}, o1 = s1 * (gs_v2){a1, a1};
            memcpy(in + 2 * j, &o0, sizeof o0);
            memcpy(in + 2 * j + 2, &o1, sizeof o1);
            badv += (s0 + s1) * zero;
        }
        bad += badv[0] + badv[1];
#endif
        for (; j + 1 < m; j += 2) {
            double a0 = w[j] * c1, a1 = w[j + 1] * c2;
            double r0 = x[2 * j] - mr, i0 = x[2 * j + 1] - mi;
            double r1 = x[2 * j + 2] - mr, i1 = x[2 * j + 3] - mi;
            in[2 * j] = r0 * a0;
            in[2 * j + 1] = i0 * a0;
            in[2 * j + 2] = r1 * a1;
            in[2 * j + 3] = i1 * a1;
            bad += (r0 + i0 + r1 + i1) * 0.0;
        }
        if (j < m) {
            double a0 = w[j] * c1;
            double r0 = x[2 * j] - mr, i0 = x[2 * j + 1] - mi;
            in[2 * j] = r0 * a0;
            in[2 * j + 1] = i0 * a0;
            bad += (r0 + i0) * 0.0;
        }
    } else {
        const double *x = rec->data + first;
        double mr = 0;
        if (remove_mean) {
            for (size_t j = 0; j < m; j++)
                mr += w[j] * x[j];
            mr /= we->sum;
        }
        for (size_t j = 0; j < m; j++) {
            double r = x[j] - mr;
            in[j] = r * (w[j] * dt);
            bad += r * 0.0;
        }
    }
    size_t used = cplx ? 2 * m : m;
    if (ws->in_zero_from > used)
        memset(in + used, 0, ((ws->in_zero_from < nin ? ws->in_zero_from : nin) - used) * sizeof(double));
    ws->in_zero_from = ws->in_zero_from > nin ? ws->in_zero_from : used;
    if (bad != 0.0 || isnan(bad))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1,
                            "non-finite sample between samples %zu and %zu", first, first + m - 1);
    if (cplx && !shift) {
        /* odd N: transform to scratch, rotate into ascending order */
        double *o = dest ? dest : ws->in;
        gate_execute(p, kind, in, ws->out);
        size_t h = (N + 1) / 2;   /* output index 0 is DFT bin ceil(N/2) */
        memcpy(o, ws->out + 2 * h, 2 * (N - h) * sizeof(double));
        memcpy(o + 2 * (N - h), ws->out, 2 * h * sizeof(double));
        if (o == ws->in)
            ws->in_zero_from = ws->in_cap;
        *res = o;
        return CS_OK;
    }
    if (dest && gate_aligned(dest)) {
        gate_execute(p, kind, in, dest);
        *res = dest;
    } else {
        gate_execute(p, kind, in, ws->out);
        if (dest)
            memcpy(dest, ws->out, 2 * nfq * sizeof(double));
        *res = dest ? dest : ws->out;
    }
    return CS_OK;
}

/* psd[k] = c_k |X_k|^2 / (dt sum w^2), c_k = 2 inside a one-sided spectrum, else 1. */
static void power_from_X(const double *X, size_t nfq, size_t N, int cplx, double scale, double *psd)
{
    size_t k = 0;
#if GS_LANES == 2
    const gs_v2 sc = {scale, scale};
    for (; k + 2 <= nfq; k += 2) {
        gs_v2 a, b;   /* (re, im) of bins k and k + 1 */
        memcpy(&a, X + 2 * k, sizeof a);
        memcpy(&b, X + 2 * k + 2, sizeof b);
        gs_v2 aa = a * a, bb = b * b;
        gs_v2 re2 = {aa[0], bb[0]}, im2 = {aa[1], bb[1]};
        gs_v2 p = (re2 + im2) * sc;
        memcpy(psd + k, &p, sizeof p);
    }
#endif
    for (; k < nfq; k++)
        psd[k] = (X[2 * k] * X[2 * k] + X[2 * k + 1] * X[2 * k + 1]) * scale;
    if (!cplx) {
        size_t last = N % 2 == 0 ? nfq - 1 : nfq;   /* Nyquist bin stays single */
        for (k = 1; k < last; k++)
            psd[k] *= 2.0;
    }
}

size_t cs_gate_nfreq(size_t nfft, int is_complex) { return is_complex ? nfft : nfft / 2 + 1; }

void cs_gate_freq_axis(size_t nfft, double dt_s, int is_complex, double lo_hz, double *freq_hz)
{
    if (!freq_hz || nfft == 0)
        return;
    double df = 1.0 / ((double)nfft * dt_s);
    size_t nfq = cs_gate_nfreq(nfft, is_complex);
    /* k0 + k counted in a double (integers, exact: the same values as k0 + (double)k without
       a conversion from size_t per bin) */
    double kk = is_complex ? -(double)(nfft / 2) : 0.0;
    size_t k = 0;
#if GS_LANES == 2
    gs_v2 kv = {kk, kk + 1.0};
    const gs_v2 lo = {lo_hz, lo_hz}, dv = {df, df}, two = {2.0, 2.0};
    for (; k + 2 <= nfq; k += 2, kv += two) {
        gs_v2 f = lo + kv * dv;
        memcpy(freq_hz + k, &f, sizeof f);
    }
    kk = kv[0];
#endif
    for (; k < nfq; k++, kk += 1.0)
        freq_hz[k] = lo_hz + kk * df;
}

static int check_record(const cs_record *rec, cs_error *err)
{
    if (!rec || !rec->data)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no record");
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "sample interval must be > 0");
    return CS_OK;
}

int cs_gate_psd_samples(cs_gate_workspace *ws, const cs_record *rec, size_t first, size_t m,
                        const cs_window *w, int periodic, size_t nfft, int remove_mean,
                        double *psd, double *X, double *sum_w, double *sum_w2, cs_error *err)
{
    if (!ws)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no workspace");
    int rc = check_record(rec, err);
    if (rc != CS_OK)
        return rc;
    if (m < 2 || first > rec->n || m > rec->n - first)
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "samples %zu + %zu outside the record (%zu samples) or fewer than 2",
                            first, m, rec->n);
    if (nfft < m)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "transform length %zu below the %zu samples",
                            nfft, m);
    cs_window win;
    rc = gate_window_or_hann(w, &win, err);
    if (rc != CS_OK)
        return rc;
    const struct win_entry *we = get_window(ws, &win, periodic, m, err);
    if (!we)
        return err ? err->code : CS_ENOMEM;
    double *res;
    rc = transform_gate(ws, rec, first, m, we, nfft, remove_mean, X, &res, err);
    if (rc != CS_OK)
        return rc;
    if (psd)
        power_from_X(res, cs_gate_nfreq(nfft, rec->is_complex), nfft, rec->is_complex,
                     1.0 / (rec->dt_s * we->sum2), psd);
    if (sum_w)
        *sum_w = we->sum;
    if (sum_w2)
        *sum_w2 = we->sum2;
    return CS_OK;
}

/* ---------------------------------------------------------------- gated spectra */

void cs_gate_options_default(cs_gate_options *o)
{
    if (!o)
        return;
    memset(o, 0, sizeof *o);
    o->pad = 1;
    o->keep_complex = 1;
    o->average = CS_GATE_AVERAGE_POWER;
}

void cs_gated_spectrum_free(cs_gated_spectrum *s)
{
    if (!s)
        return;
    cs_spectrum_free(s->psd);
    fftw_free(s->X);
    free(s);
}

/* A spectrum of n points as cs_spectrum_alloc makes it, but with the frequency, value and sigma
 * arrays left unset instead of zeroed (calloc wrote 2^18 zeros twice for a padded 2^17-sample
 * gate): every caller here writes all of them before the spectrum is used (the axis, and the
 * values by power_from_X or the shot sums, whose sigma is cleared there). */
static cs_spectrum *spectrum_alloc_unset(size_t n, int with_sigma)
{
    cs_spectrum *p = cs_spectrum_alloc(0, 0);
    if (!p)
        return NULL;
    double *f = malloc(n * sizeof *f), *y = malloc(n * sizeof *y);
    double *q = with_sigma ? malloc(n * sizeof *q) : NULL;
    if (!f || !y || (with_sigma && !q)) {
        free(f);
        free(y);
        free(q);
        cs_spectrum_free(p);
        return NULL;
    }
    free(p->freq_hz);
    free(p->y);
    p->freq_hz = f;
    p->y = y;
    p->sigma = q;
    p->n = n;
    return p;
}

/* Make *out fit nfq frequencies (reusing arrays when possible). *fresh_axis = 1 when the axis
 * must be written, *new_psd = 1 when the PSD's arrays are new (not zeroed: the caller writes them,
 * or zeroes them when it fails). On failure a new object is freed and *out restored to NULL. */
static int prepare_result(cs_gated_spectrum **out, size_t nfq, int with_sigma, int keep_complex,
                          int *fresh_axis, int *new_psd, int *created, cs_error *err)
{
    cs_gated_spectrum *s = *out;
    *created = 0;
    *new_psd = 0;
    if (!s) {
        s = calloc(1, sizeof *s);
        if (!s)
            return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a gated spectrum");
        *created = 1;
        *out = s;
    }
    *fresh_axis = 0;
    if (!s->psd || s->psd->n != nfq || (s->psd->sigma != NULL) != (with_sigma != 0)) {
        cs_spectrum *p = spectrum_alloc_unset(nfq, with_sigma);
        if (!p)
            goto nomem;
        if (s->psd && s->psd->n == nfq) {   /* keep the axis, only the sigma changed */
            memcpy(p->freq_hz, s->psd->freq_hz, nfq * sizeof(double));
        } else {
            *fresh_axis = 1;
        }
        cs_spectrum_free(s->psd);
        s->psd = p;
        *new_psd = 1;
        snprintf(p->y_name, sizeof p->y_name, "psd");
    }
    if (keep_complex) {
        if (!s->X || s->psd->n != nfq || *fresh_axis) {
            fftw_free(s->X);
            s->X = fftw_malloc(2 * nfq * sizeof(double));
            if (!s->X)
                goto nomem;
        }
    } else {
        fftw_free(s->X);
        s->X = NULL;
    }
    return CS_OK;
nomem:
    if (*created) {
        cs_gated_spectrum_free(s);
        *out = NULL;
    }
    return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a gated spectrum of %zu points", nfq);
}

static int set_meta(cs_gated_spectrum *s, const cs_record *rec)
{
    cs_meta *m = &s->psd->meta;
    char win[CS_WINDOW_SPEC_MAX], buf[64];
    cs_window_format(&s->gate.window, win, sizeof win);
    int rc = cs_meta_set_text(m, "psd_convention", s->one_sided ? "one-sided" : "two-sided");
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "psd_unit", "signal^2/Hz");
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "gate", s->gate.name);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "gate_start", s->gate.start_s, CS_DIM_TIME);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "gate_length", s->gate.length_s, CS_DIM_TIME);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "window", win);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "window_form", s->gate.periodic ? "periodic" : "symmetric");
    snprintf(buf, sizeof buf, "%zu", s->pad);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "pad", buf);
    snprintf(buf, sizeof buf, "%zu", s->nfft);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "nfft", buf);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "enbw", s->enbw_hz, CS_DIM_FREQUENCY);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "lo", s->lo_hz, CS_DIM_FREQUENCY);
    snprintf(buf, sizeof buf, "%zu", s->nshots);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "nshots", buf);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "average", s->average == CS_GATE_AVERAGE_COHERENT ? "coherent" : "power");
    if (rc == CS_OK && rec->source && (!s->psd->source || strcmp(s->psd->source, rec->source) != 0)) {
        char *src = malloc(strlen(rec->source) + 1);
        if (!src)
            return CS_ENOMEM;
        strcpy(src, rec->source);
        free(s->psd->source);
        s->psd->source = src;
    }
    return rc;
}

/* Common checks and sizes of a gated spectrum. */
static int plan_gate(const cs_record *rec, const cs_gate *g, const cs_gate_options *o,
                     size_t *first, size_t *m, size_t *N, cs_error *err)
{
    int rc = check_record(rec, err);
    if (rc != CS_OK)
        return rc;
    if (!g)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no gate");
    if (o->pad == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "padding factor must be >= 1");
    rc = cs_gate_samples(g, rec, first, m, err);
    if (rc != CS_OK)
        return rc;
    if (*m > SIZE_MAX / o->pad)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "padded gate too long");
    size_t want = *m * o->pad;
    *N = o->exact_length ? want : cs_gate_fast_size(want);
    if (*N == 0 || *N > INT_MAX)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1,
                            "gate '%s': transform of %zu points exceeds FFTW's limit", g->name, want);
    return CS_OK;
}

static void fill_header(cs_gated_spectrum *s, const cs_record *rec, const cs_gate *g,
                        const cs_gate_options *o, size_t first, size_t m, size_t N,
                        const struct win_entry *we, size_t nshots, int fresh_axis)
{
    int cplx = rec->is_complex != 0;
    if (fresh_axis || s->nfft != N || s->dt_s != rec->dt_s || s->lo_hz != o->lo_hz ||
        s->one_sided != !cplx)
        cs_gate_freq_axis(N, rec->dt_s, cplx, o->lo_hz, s->psd->freq_hz);
    s->gate = *g;
    s->gate.t_start_s = rec->t0_s + (double)first * rec->dt_s;
    s->first = first;
    s->m = m;
    s->nfft = N;
    s->pad = o->pad;
    s->dt_s = rec->dt_s;
    s->t_gate_s = rec->t0_s + (double)first * rec->dt_s;
    s->df_hz = 1.0 / ((double)N * rec->dt_s);
    s->sum_w = we->sum;
    s->sum_w2 = we->sum2;
    s->enbw_hz = we->sum2 / (we->sum * we->sum * rec->dt_s);
    s->lo_hz = o->lo_hz;
    s->one_sided = !cplx;
    s->nshots = nshots;
    s->average = o->average;
}

int cs_gate_spectrum(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *g,
                     const cs_gate_options *o, cs_gated_spectrum **out, cs_error *err)
{
    cs_gate_options def;
    if (!o) {
        cs_gate_options_default(&def);
        o = &def;
    }
    if (!ws || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gated spectrum: NULL argument");
    size_t first, m, N;
    int rc = plan_gate(rec, g, o, &first, &m, &N, err);
    if (rc != CS_OK)
        return rc;
    const struct win_entry *we = get_window(ws, &g->window, g->periodic, m, err);
    if (!we)
        return err ? err->code : CS_EINVAL;
    int cplx = rec->is_complex != 0;
    size_t nfq = cs_gate_nfreq(N, cplx);
    int fresh, new_psd, created;
    rc = prepare_result(out, nfq, 0, o->keep_complex, &fresh, &new_psd, &created, err);
    if (rc != CS_OK)
        return rc;
    cs_gated_spectrum *s = *out;
    double *res;
    rc = transform_gate(ws, rec, first, m, we, N, o->remove_mean, s->X, &res, err);
    if (rc == CS_OK) {
        power_from_X(res, nfq, N, cplx, 1.0 / (rec->dt_s * we->sum2), s->psd->y);
        fill_header(s, rec, g, o, first, m, N, we, 1, fresh);
        s->average = CS_GATE_AVERAGE_POWER;
        if (set_meta(s, rec) != CS_OK)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for metadata");
    } else {   /* a failed transform leaves new arrays zeroed, as allocated before */
        if (fresh)
            memset(s->psd->freq_hz, 0, nfq * sizeof(double));
        if (new_psd)
            memset(s->psd->y, 0, nfq * sizeof(double));
    }
    if (rc != CS_OK && created) {
        cs_gated_spectrum_free(s);
        *out = NULL;
    }
    return rc;
}

int cs_gate_spectra(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *gates,
                    size_t ngates, const cs_gate_options *o, cs_gated_spectrum **out,
                    cs_error *err)
{
    if (!gates || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gated spectra: NULL argument");
    for (size_t i = 0; i < ngates; i++) {
        int rc = cs_gate_spectrum(ws, rec, &gates[i], o, &out[i], err);
        if (rc != CS_OK)
            return rc;
    }
    return CS_OK;
}

int cs_gate_spectrum_shots(cs_gate_workspace *ws, cs_record *const *recs, size_t nrec,
                           const cs_gate *g, const cs_gate_options *o, cs_gated_spectrum **out,
                           cs_error *err)
{
    cs_gate_options def;
    if (!o) {
        cs_gate_options_default(&def);
        o = &def;
    }
    if (!ws || !out || !recs || nrec == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gated spectrum: no shots");
    const cs_record *r0 = recs[0];
    size_t first, m, N;
    int rc = plan_gate(r0, g, o, &first, &m, &N, err);
    if (rc != CS_OK)
        return rc;
    for (size_t i = 1; i < nrec; i++) {
        const cs_record *r = recs[i];
        rc = check_record(r, err);
        if (rc != CS_OK)
            return rc;
        if ((r->is_complex != 0) != (r0->is_complex != 0) ||
            fabs(r->dt_s - r0->dt_s) > 1e-9 * r0->dt_s)
            return cs_error_set(err, CS_EDATA, r->source, -1, -1,
                                "shot %zu differs from shot 0 in kind or sample interval", i);
        size_t f2, m2;
        rc = cs_gate_samples(g, r, &f2, &m2, err);
        if (rc != CS_OK)
            return rc;
        if (f2 != first || m2 != m)
            return cs_error_set(err, CS_EDATA, r->source, -1, -1, "shot %zu: gate holds other samples", i);
    }
    const struct win_entry *we = get_window(ws, &g->window, g->periodic, m, err);
    if (!we)
        return err ? err->code : CS_EINVAL;
    int cplx = r0->is_complex != 0;
    size_t nfq = cs_gate_nfreq(N, cplx);
    int with_sigma = nrec >= 2 && o->average == CS_GATE_AVERAGE_POWER;
    int fresh, new_psd, created;
    rc = prepare_result(out, nfq, with_sigma, 1, &fresh, &new_psd, &created, err);
    if (rc != CS_OK)
        return rc;
    cs_gated_spectrum *s = *out;
    double *Xs = s->X, *y = s->psd->y, *q = s->psd->sigma;
    memset(Xs, 0, 2 * nfq * sizeof(double));
    memset(y, 0, nfq * sizeof(double));
    if (q)
        memset(q, 0, nfq * sizeof(double));
    for (size_t i = 0; i < nrec && rc == CS_OK; i++) {
        double *res;
        rc = transform_gate(ws, recs[i], first, m, we, N, o->remove_mean, NULL, &res, err);
        if (rc != CS_OK)
            break;
        for (size_t k = 0; k < nfq; k++) {
            double re = res[2 * k], im = res[2 * k + 1], p = re * re + im * im;
            Xs[2 * k] += re;
            Xs[2 * k + 1] += im;
            y[k] += p;
            if (q)
                q[k] += p * p;
        }
    }
    if (rc == CS_OK) {
        double inv_n = 1.0 / (double)nrec, scale = 1.0 / (r0->dt_s * we->sum2);
        for (size_t k = 0; k < 2 * nfq; k++)
            Xs[k] *= inv_n;
        if (o->average == CS_GATE_AVERAGE_COHERENT) {
            power_from_X(Xs, nfq, N, cplx, scale, y);
        } else {
            size_t last = N % 2 == 0 ? nfq - 1 : nfq;
            for (size_t k = 0; k < nfq; k++) {
                double c = (!cplx && k > 0 && k < last) ? 2.0 * scale : scale;
                double mean = y[k] * inv_n;
                if (q) {
                    double var = (q[k] * inv_n - mean * mean) * (double)nrec / (double)(nrec - 1);
                    q[k] = c * sqrt((var > 0 ? var : 0.0) * inv_n);
                }
                y[k] = c * mean;
            }
        }
        fill_header(s, r0, g, o, first, m, N, we, nrec, fresh);
        if (set_meta(s, r0) != CS_OK)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for metadata");
    } else {   /* new arrays left zeroed, as allocated before */
        if (fresh)
            memset(s->psd->freq_hz, 0, nfq * sizeof(double));
        if (new_psd) {
            memset(s->psd->y, 0, nfq * sizeof(double));
            if (s->psd->sigma)
                memset(s->psd->sigma, 0, nfq * sizeof(double));
        }
    }
    if (!o->keep_complex && rc == CS_OK) {
        fftw_free(s->X);
        s->X = NULL;
    }
    if (rc != CS_OK && created) {
        cs_gated_spectrum_free(s);
        *out = NULL;
    }
    return rc;
}

/* ---------------------------------------------------------------- averaged neighbouring bins */

int cs_gate_block_variance(const cs_window *w, int periodic, size_t m, size_t nfft, size_t K, double *g,
                           double *ginf)
{
    if (g)
        *g = NAN;
    if (ginf)
        *ginf = NAN;
    if (!w || !w->type || m < 1 || nfft < m || K < 1)
        return CS_EINVAL;
    const double N = (double)nfft;
    if (strcmp(w->type->name, "rect") == 0) {
        /* rho(l) = sin(pi l m / N) / (m sin(pi l / N)), the Dirichlet kernel */
        double s = 1.0;
        for (size_t l = 1; g && l < K && l < nfft; l++) {
            double th = 3.14159265358979323846 * (double)l / N, r = sin(th * (double)m) / ((double)m * sin(th));
            s += 2.0 * (1.0 - (double)l / (double)K) * r * r;
        }
        if (g)
            *g = s;
        if (ginf)
            *ginf = N / (double)m;
        return CS_OK;
    }
    double *w2 = malloc(m * sizeof *w2);
    if (!w2)
        return CS_ENOMEM;
    int rc = cs_window_fill(w, m, periodic, w2);
    if (rc != CS_OK) {
        free(w2);
        return rc;
    }
    double s2 = 0.0, s4 = 0.0;
    for (size_t t = 0; t < m; t++) {
        w2[t] *= w2[t];
        s2 += w2[t];
        s4 += w2[t] * w2[t];
    }
    if (!(s2 > 0.0)) {
        free(w2);
        return CS_EINVAL;
    }
    if (ginf)
        *ginf = N * s4 / (s2 * s2);
    double s = 1.0;
    size_t lmax = (size_t)ceil(64.0 * N / (double)m);
    for (size_t l = 1; g && l < K && l < lmax && l < nfft; l++) {
        /* sum_t w_t^2 e^{-i th t} by a rotating phasor, renormalised every 1024 steps */
        double th = 6.28318530717958647692 * (double)l / N, c = cos(th), sn = sin(th);
        double re = 0.0, im = 0.0, pr = 1.0, pi = 0.0;
        for (size_t t = 0; t < m; t++) {
            re += w2[t] * pr;
            im -= w2[t] * pi;
            double nr = pr * c - pi * sn;
            pi = pr * sn + pi * c;
            pr = nr;
            if ((t & 1023) == 1023) {
                double a = 1.0 / sqrt(pr * pr + pi * pi);
                pr *= a;
                pi *= a;
            }
        }
        double r2 = (re * re + im * im) / (s2 * s2);
        s += 2.0 * (1.0 - (double)l / (double)K) * r2;
    }
    free(w2);
    if (g)
        *g = s;
    return CS_OK;
}
