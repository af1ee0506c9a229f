/* Spectrogram: short-time power spectral densities of a record on a time x frequency grid.
 *
 * Every segment is a gate: samples [s0 + i hop, s0 + i hop + L), windowed with the window
 * stretched over the segment, zero-padded to the even FFT-friendly length N >= pad L, and
 * normalised exactly like a gated spectrum (cs_gate_psd_samples), so a row of the spectrogram
 * and a gated spectrum of the same stretch agree to rounding, and each row integrates to the
 * window-weighted mean power of its segment (Parseval's theorem). The time of a row is the centre
 * of its segment, t0 + (first + (L - 1)/2) dt. The transform, its plan and the sampled window
 * come from the workspace's caches: one plan and one window for the whole spectrogram, no
 * allocation per segment; each row is written straight into the output matrix.
 *
 * Resolution: a segment of L samples resolves about enbw = (sum w^2 / (sum w)^2) / dt
 * (1.5 / (L dt) for Hann) in frequency and L dt in time; hop L/4 with Hann oversamples in time
 * (common practice: Hann segments overlapping by 75 % weight every sample nearly equally).
 *
 * CSV. Long format (one row per time and frequency: "time_s,frequency_hz,psd") rather than a
 * wide matrix: any plotting tool or data frame reads it without knowing the grid, the header
 * never grows with the number of frequencies, and the metadata comment lines follow the "# key =
 * value unit" convention the loaders read. Values have 17 significant digits, so they read back
 * exactly. The text is built in memory and written with cs_write_atomic. */
#include <collshift/gate.h>
#include <collshift/report.h>

#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void cs_spectrogram_params_default(cs_spectrogram_params *p)
{
    if (!p)
        return;
    memset(p, 0, sizeof *p);
    p->pad = 1;
    cs_window_init(&p->window, &cs_window_hann, 0.0, NULL);
    p->periodic = CS_WINDOW_DEFAULT_FORM;
}

void cs_spectrogram_free(cs_spectrogram *s)
{
    if (!s)
        return;
    free(s->time_s);
    free(s->freq_hz);
    free(s->psd);
    free(s);
}

int cs_spectrogram_compute(cs_gate_workspace *ws, const cs_record *rec,
                           const cs_spectrogram_params *p, cs_spectrogram **out, cs_error *err)
{
    cs_spectrogram_params def;
    if (!p) {
        cs_spectrogram_params_default(&def);
        p = &def;
    }
    if (!ws || !rec || !out || !rec->data)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "spectrogram: NULL argument");
    *out = NULL;
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "sample interval must be > 0");
    if (p->pad == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "spectrogram: padding factor must be >= 1");
    if (!(p->start_s >= 0) || !(p->length_s >= 0) || !isfinite(p->start_s + p->length_s))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "spectrogram: invalid start or length");
    /* analysed stretch [s0, s1) */
    double a = ceil(p->start_s / rec->dt_s - 1e-6);
    double b = p->length_s > 0 ? ceil((p->start_s + p->length_s) / rec->dt_s - 1e-6) : (double)rec->n;
    if (b > (double)rec->n || !(b > a))
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "spectrogram: stretch %g s + %g s lies outside the record", p->start_s,
                            p->length_s);
    size_t s0 = (size_t)a, s1 = (size_t)b, avail = s1 - s0;
    size_t L = p->segment ? p->segment : (avail < 256 ? avail : 256);
    if (L < 2 || L > avail)
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "spectrogram: segment of %zu samples does not fit the %zu samples analysed",
                            L, avail);
    size_t hop = p->hop ? p->hop : (L / 4 ? L / 4 : 1);
    if (L > SIZE_MAX / p->pad)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "spectrogram: padded segment too long");
    size_t N = cs_gate_fast_size(L * p->pad);
    if (N == 0 || N > INT32_MAX)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "spectrogram: transform too long");
    const cs_window *w = p->window.type ? &p->window : NULL;
    int cplx = rec->is_complex != 0;
    size_t nt = (avail - L) / hop + 1, nf = cs_gate_nfreq(N, cplx);
    if (nf > SIZE_MAX / sizeof(double) / nt)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "spectrogram too large");
    cs_spectrogram *s = calloc(1, sizeof *s);
    if (!s)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    s->time_s = malloc(nt * sizeof(double));
    s->freq_hz = malloc(nf * sizeof(double));
    s->psd = malloc(nt * nf * sizeof(double));
    if (!s->time_s || !s->freq_hz || !s->psd) {
        cs_spectrogram_free(s);
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1,
                            "out of memory for a spectrogram of %zu x %zu", nt, nf);
    }
    s->ntime = nt;
    s->nfreq = nf;
    s->segment = L;
    s->hop = hop;
    s->nfft = N;
    s->one_sided = !cplx;
    s->lo_hz = p->lo_hz;
    cs_gate_freq_axis(N, rec->dt_s, cplx, p->lo_hz, s->freq_hz);
    double sw = 0, sw2 = 0;
    for (size_t i = 0; i < nt; i++) {
        size_t first = s0 + i * hop;
        int rc = cs_gate_psd_samples(ws, rec, first, L, w, p->periodic, N, 0, s->psd + i * nf,
                                     NULL, &sw, &sw2, err);
        if (rc != CS_OK) {
            cs_spectrogram_free(s);
            return rc;
        }
        s->time_s[i] = rec->t0_s + ((double)first + 0.5 * (double)(L - 1)) * rec->dt_s;
    }
    s->enbw_hz = sw2 / (sw * sw * rec->dt_s);
    if (w)
        s->window = *w;
    else
        cs_window_init(&s->window, &cs_window_hann, 0.0, NULL);
    *out = s;
    return CS_OK;
}

/* ---------------------------------------------------------------- CSV */

struct sbuf {
    char *p;
    size_t len, cap;
    int failed;
};

static void sb_printf(struct sbuf *b, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

static void sb_printf(struct sbuf *b, const char *fmt, ...)
{
    if (b->failed)
        return;
    for (;;) {
        va_list ap;
        va_start(ap, fmt);
        int w = vsnprintf(b->p + b->len, b->cap - b->len, fmt, ap);
        va_end(ap);
        if (w < 0) {
            b->failed = 1;
            return;
        }
        if ((size_t)w < b->cap - b->len) {
            b->len += (size_t)w;
            return;
        }
        size_t cap = b->cap * 2 + (size_t)w + 1;
        char *q = realloc(b->p, cap);
        if (!q) {
            b->failed = 1;
            return;
        }
        b->p = q;
        b->cap = cap;
    }
}

int cs_spectrogram_write_csv(const char *path, const cs_spectrogram *s, cs_error *err)
{
    if (!path || !s || !s->time_s || !s->freq_hz || !s->psd)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "spectrogram csv: NULL argument");
    struct sbuf b = {NULL, 0, 0, 0};
    size_t guess = 128 + s->ntime * s->nfreq * 64;
    b.cap = guess < ((size_t)1 << 30) ? guess : ((size_t)1 << 30);
    b.p = malloc(b.cap);
    if (!b.p)
        return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
    char win[CS_WINDOW_SPEC_MAX];
    cs_window_format(&s->window, win, sizeof win);
    sb_printf(&b, "# psd_convention = %s\n", s->one_sided ? "one-sided" : "two-sided");
    sb_printf(&b, "# psd_unit = signal^2/Hz\n");
    sb_printf(&b, "# window = %s\n", win[0] ? win : "hann");
    sb_printf(&b, "# segment = %zu\n# hop = %zu\n# nfft = %zu\n", s->segment, s->hop, s->nfft);
    sb_printf(&b, "# enbw = %.17g Hz\n# lo = %.17g Hz\n", s->enbw_hz, s->lo_hz);
    sb_printf(&b, "time_s,frequency_hz,psd\n");
    for (size_t i = 0; i < s->ntime && !b.failed; i++)
        for (size_t k = 0; k < s->nfreq; k++)
            sb_printf(&b, "%.17g,%.17g,%.17g\n", s->time_s[i], s->freq_hz[k], s->psd[i * s->nfreq + k]);
    if (b.failed) {
        free(b.p);
        return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory writing the spectrogram");
    }
    int rc = cs_write_atomic(path, b.p, b.len, err);
    free(b.p);
    return rc;
}
