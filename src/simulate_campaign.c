/* Synthetic density series on disk: text formatting, file names, manifest.csv and truth.csv. */
#include <collshift/simulate.h>
#include <collshift/report.h>

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* ---------------------------------------------------------------- a growing text buffer */

typedef struct sbuf {
    char *p;
    size_t len, cap;
    int oom;
} sbuf;

static void sb_printf(sbuf *b, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
static void sb_printf(sbuf *b, const char *fmt, ...)
{
    if (b->oom)
        return;
    for (;;) {
        va_list ap;
        va_start(ap, fmt);
        int k = vsnprintf(b->p ? b->p + b->len : NULL, b->p ? b->cap - b->len : 0, fmt, ap);
        va_end(ap);
        if (k < 0) {
            b->oom = 1;
            return;
        }
        if (b->p && b->len + (size_t)k < b->cap) {
            b->len += (size_t)k;
            return;
        }
        size_t cap = (b->cap ? 2 * b->cap : 65536) + (size_t)k + 1;
        char *np = realloc(b->p, cap);
        if (!np) {
            b->oom = 1;
            return;
        }
        b->p = np;
        b->cap = cap;
    }
}

/* Metadata text on one line: control characters become blanks. */
static void sb_clean(sbuf *b, const char *s)
{
    for (; s && *s; s++)
        sb_printf(b, "%c", (unsigned char)*s < 0x20 ? ' ' : *s);
}

static void sb_meta(sbuf *b, const cs_meta *m)
{
    for (size_t i = 0; i < m->n; i++) {
        sb_printf(b, "# ");
        sb_clean(b, m->e[i].key);
        sb_printf(b, " = ");
        sb_clean(b, m->e[i].text);
        if (m->e[i].unit && *m->e[i].unit) {
            sb_printf(b, " ");
            sb_clean(b, m->e[i].unit);
        }
        sb_printf(b, "\n");
    }
}

static int sb_finish(sbuf *b, char **text, size_t *len, cs_error *err)
{
    if (b->oom) {
        free(b->p);
        *text = NULL;
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    }
    *text = b->p;
    *len = b->len;
    return CS_OK;
}

/* ---------------------------------------------------------------- text formats */

int cs_simulate_format_record(const cs_record *r, char **text, size_t *len, cs_error *err)
{
    *text = NULL;
    if (!r || !r->data || !(r->dt_s > 0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no record to format");
    sbuf b = {NULL, 0, 0, 0};
    sb_meta(&b, &r->meta);
    sb_printf(&b, r->is_complex ? "time_us,i,q\n" : "time_us,y\n");
    for (size_t j = 0; j < r->n && !b.oom; j++) {
        double t_us = (r->t0_s + (double)j * r->dt_s) * 1e6;
        if (r->is_complex)
            sb_printf(&b, "%.12g,%.10g,%.10g\n", t_us, r->data[2 * j], r->data[2 * j + 1]);
        else
            sb_printf(&b, "%.12g,%.10g\n", t_us, r->data[j]);
    }
    return sb_finish(&b, text, len, err);
}

int cs_simulate_format_spectrum(const cs_spectrum *s, char **text, size_t *len, cs_error *err)
{
    *text = NULL;
    if (!s || !s->freq_hz || !s->y)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no spectrum to format");
    sbuf b = {NULL, 0, 0, 0};
    sb_meta(&b, &s->meta);
    sb_printf(&b, s->sigma ? "frequency_hz,y,sigma\n" : "frequency_hz,y\n");
    for (size_t i = 0; i < s->n && !b.oom; i++) {
        if (s->sigma)
            sb_printf(&b, "%.17g,%.10g,%.10g\n", s->freq_hz[i], s->y[i], s->sigma[i]);
        else
            sb_printf(&b, "%.17g,%.10g\n", s->freq_hz[i], s->y[i]);
    }
    return sb_finish(&b, text, len, err);
}

/* ---------------------------------------------------------------- names and folders */

static int digits_for(size_t n)
{
    int d = 1;
    while (n >= 10) {
        n /= 10;
        d++;
    }
    return d < 2 ? 2 : d;
}

/* v in decimal, zero-padded to at least width digits (width <= 20), into a 24-byte buffer. */
static const char *padded(size_t v, int width, char *buf)
{
    char tmp[24];
    int k = 0;
    do {
        tmp[k++] = (char)('0' + v % 10);
        v /= 10;
    } while (v && k < 23);
    while (k < width && k < 23)
        tmp[k++] = '0';
    for (int i = 0; i < k; i++)
        buf[i] = tmp[k - 1 - i];
    buf[k] = '\0';
    return buf;
}

char *cs_simulate_file_name(const cs_simulate_params *p, size_t index, size_t shot, char *buf,
                            size_t n)
{
    char a[24], b[24];
    padded(index, digits_for(p->ndensities ? p->ndensities - 1 : 0), a);
    padded(shot == SIZE_MAX ? 0 : shot, digits_for(p->shots ? p->shots - 1 : 0), b);
    if (p->kind == CS_SIMULATE_SPECTRUM)
        snprintf(buf, n, "synthetic_spectrum_d%s.csv", a);
    else if (p->format == CS_SIMULATE_NPY || p->shots <= 1 || shot == SIZE_MAX)
        snprintf(buf, n, "synthetic_record_d%s.%s", a, p->format == CS_SIMULATE_NPY ? "npy" : "csv");
    else
        snprintf(buf, n, "synthetic_record_d%s_s%s.csv", a, b);
    return buf;
}

/* mkdir -p */
static int make_dirs(const char *dir, cs_error *err)
{
    size_t n = strlen(dir);
    char *path = malloc(n + 1);
    if (!path)
        return cs_error_set(err, CS_ENOMEM, dir, -1, -1, "out of memory");
    memcpy(path, dir, n + 1);
    for (size_t i = 1; i <= n; i++) {
        if (path[i] != '/' && path[i] != '\0')
            continue;
        char c = path[i];
        path[i] = '\0';
        if (mkdir(path, 0777) != 0 && errno != EEXIST) {
            int e = errno;
            path[i] = c;
            free(path);
            return cs_error_set(err, CS_EIO, dir, -1, -1, "cannot create the folder: %s",
                                strerror(e));
        }
        path[i] = c;
    }
    free(path);
    struct stat st;
    if (stat(dir, &st) != 0 || !S_ISDIR(st.st_mode))
        return cs_error_set(err, CS_EIO, dir, -1, -1, "not a folder");
    return CS_OK;
}

static char *join(const char *dir, const char *name)
{
    size_t a = strlen(dir), b = strlen(name);
    char *s = malloc(a + b + 2);
    if (!s)
        return NULL;
    memcpy(s, dir, a);
    s[a] = '/';
    memcpy(s + a + 1, name, b + 1);
    return s;
}

/* CS_EIO when path exists and may not be replaced. */
static int refuse_existing(const char *path, int force, cs_error *err)
{
    struct stat st;
    if (!force && lstat(path, &st) == 0)
        return cs_error_set(err, CS_EIO, path, -1, -1,
                            "already exists: not overwritten (nothing was written)");
    return CS_OK;
}

/* Write records as .npy atomically: a temporary file beside path, then a rename. */
static int write_npy(const char *path, cs_record *const *recs, size_t n, cs_error *err)
{
    size_t plen = strlen(path);
    char *tmp = malloc(plen + 12);
    if (!tmp)
        return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
    memcpy(tmp, path, plen);
    memcpy(tmp + plen, ".tmp.XXXXXX", 12);
    int fd = mkstemp(tmp);
    if (fd < 0) {
        int e = errno;
        free(tmp);
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create a temporary file beside it: %s",
                            strerror(e));
    }
    mode_t um = umask(0);
    umask(um);
    (void)fchmod(fd, 0666 & ~um);
    close(fd);
    int rc = cs_io_npy_write_records(tmp, recs, n, err);
    if (rc == CS_OK && rename(tmp, path) != 0)
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot rename the temporary file: %s",
                          strerror(errno));
    if (rc != CS_OK)
        unlink(tmp);
    free(tmp);
    return rc;
}

/* ---------------------------------------------------------------- the campaign */

static void truth_header(sbuf *b, const cs_simulate_params *p)
{
    sb_printf(b, "file,shots,density_cm^-3,burst_center_hz,burst_fwhm_hz,tail_center_hz,"
                 "tail_fwhm_hz,burst_shift_hz,tail_shift_hz,era_shift_hz,reference_hz,");
    if (p->kind == CS_SIMULATE_RECORD)
        sb_printf(b, "lo_hz,burst_offset_hz,tail_offset_hz,burst_tau_s,burst_peak_s,tail_start_s,"
                     "tail_gamma_per_s,burst_amplitude,tail_amplitude,noise_sigma,sample_rate_hz,"
                     "samples,");
    else
        sb_printf(b, "burst_shape,burst_height,burst_area,tail_height,tail_area,baseline,"
                     "baseline_slope_per_hz,noise_sigma,points,");
    sb_printf(b, "seed,first_stream\n");
}

static void truth_row(sbuf *b, const cs_simulate_params *p, const char *name, size_t shots,
                      const cs_simulate_truth *t, unsigned long stream)
{
    sb_printf(b, "%s,%zu,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,", name, shots,
              t->density_m3 * 1e-6, t->burst_center_hz, t->burst_fwhm_hz, t->tail_center_hz,
              t->tail_fwhm_hz, t->burst_shift_hz, t->tail_shift_hz, t->era_shift_hz,
              p->reference_hz);
    if (p->kind == CS_SIMULATE_RECORD)
        sb_printf(b, "%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%zu,",
                  p->lo_hz, t->burst_offset_hz, t->tail_offset_hz, t->burst_tau_s,
                  t->burst_peak_s, t->tail_start_s, t->tail_gamma_per_s, p->burst_amplitude,
                  p->tail_amplitude, p->noise_sigma, p->sample_rate_hz, p->samples);
    else
        sb_printf(b, "%s,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g,%zu,",
                  p->broad_shape == CS_SIMULATE_SECH2 ? "sech2" : "lorentz", p->burst_height,
                  t->burst_area, p->tail_height, t->tail_area, p->baseline0,
                  p->baseline_slope_per_hz, p->spectrum_sigma, p->points);
    sb_printf(b, "%lu,%lu\n", p->seed, stream);
}

static void manifest_header(sbuf *b, const cs_simulate_params *p)
{
    sb_printf(b, "file,density_cm^-3,reference_hz");
    if (!isnan(p->temperature_k))
        sb_printf(b, ",temperature_K");
    if (!isnan(p->thickness_m))
        sb_printf(b, ",thickness_um");
    sb_printf(b, "\n");
}

static void manifest_row(sbuf *b, const cs_simulate_params *p, const char *name, double n_m3)
{
    sb_printf(b, "%s,%.17g,%.17g", name, n_m3 * 1e-6, p->reference_hz);
    if (!isnan(p->temperature_k))
        sb_printf(b, ",%.17g", p->temperature_k);
    if (!isnan(p->thickness_m))
        sb_printf(b, ",%.17g", p->thickness_m * 1e6);
    sb_printf(b, "\n");
}

/* Files per density and shots per file. */
static void layout(const cs_simulate_params *p, size_t *files_per_density, size_t *shots_per_file)
{
    if (p->kind == CS_SIMULATE_SPECTRUM) {
        *files_per_density = 1;
        *shots_per_file = 1;
    } else if (p->format == CS_SIMULATE_NPY) {
        *files_per_density = 1;
        *shots_per_file = p->shots;
    } else {
        *files_per_density = p->shots;
        *shots_per_file = 1;
    }
}

/* Make and write the data file(s) of density index i; rows go to the manifest and truth. */
static int write_density(const char *dir, const cs_simulate_params *p, size_t i, sbuf *man,
                         sbuf *tru, size_t *nfiles, cs_error *err)
{
    size_t fpd, spf;
    layout(p, &fpd, &spf);
    double n_m3 = p->densities_m3[i];
    int rc = CS_OK;
    for (size_t f = 0; f < fpd && rc == CS_OK; f++) {
        char name[128];
        cs_simulate_file_name(p, i, fpd > 1 ? f : SIZE_MAX, name, sizeof name);
        char *path = join(dir, name);
        if (!path)
            return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        unsigned long stream0 = (unsigned long)(i * p->shots + f * spf);
        cs_simulate_truth t;
        char *text = NULL;
        size_t len = 0;
        if (p->kind == CS_SIMULATE_SPECTRUM) {
            cs_spectrum *s = NULL;
            rc = cs_simulate_spectrum(p, n_m3, stream0, &s, &t, err);
            if (rc == CS_OK)
                rc = cs_simulate_format_spectrum(s, &text, &len, err);
            cs_spectrum_free(s);
        } else {
            cs_record **recs = calloc(spf, sizeof *recs);
            if (!recs)
                rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
            for (size_t k = 0; k < spf && rc == CS_OK; k++)
                rc = cs_simulate_record(p, n_m3, stream0 + (unsigned long)k, &recs[k], &t, err);
            if (rc == CS_OK && p->format == CS_SIMULATE_NPY)
                rc = write_npy(path, recs, spf, err);
            else if (rc == CS_OK)
                rc = cs_simulate_format_record(recs[0], &text, &len, err);
            for (size_t k = 0; recs && k < spf; k++)
                cs_record_free(recs[k]);
            free(recs);
        }
        if (rc == CS_OK && text)
            rc = cs_write_atomic(path, text, len, err);
        free(text);
        free(path);
        if (rc == CS_OK) {
            manifest_row(man, p, name, n_m3);
            truth_row(tru, p, name, spf, &t, stream0);
            (*nfiles)++;
        }
    }
    return rc;
}

int cs_simulate_campaign(const char *dir, const cs_simulate_params *p, size_t *nfiles,
                         cs_error *err)
{
    size_t written = 0;
    if (nfiles)
        *nfiles = 0;
    if (!dir || !*dir)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no output folder");
    int rc = cs_simulate_check(p, err);
    if (rc)
        return rc;
    if (p->ndensities == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no densities");
    if ((rc = make_dirs(dir, err)))
        return rc;
    /* refuse before writing anything */
    size_t fpd, spf;
    layout(p, &fpd, &spf);
    static const char *const fixed[] = {"manifest.csv", "truth.csv"};
    for (size_t k = 0; k < 2 && rc == CS_OK; k++) {
        char *path = join(dir, fixed[k]);
        if (!path)
            return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        rc = refuse_existing(path, p->force, err);
        free(path);
    }
    for (size_t i = 0; i < p->ndensities && rc == CS_OK; i++) {
        for (size_t f = 0; f < fpd && rc == CS_OK; f++) {
            char name[128];
            cs_simulate_file_name(p, i, fpd > 1 ? f : SIZE_MAX, name, sizeof name);
            char *path = join(dir, name);
            if (!path)
                return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
            rc = refuse_existing(path, p->force, err);
            free(path);
        }
    }
    if (rc)
        return rc;
    sbuf man = {NULL, 0, 0, 0}, tru = {NULL, 0, 0, 0};
    manifest_header(&man, p);
    truth_header(&tru, p);
    for (size_t i = 0; i < p->ndensities && rc == CS_OK; i++)
        rc = write_density(dir, p, i, &man, &tru, &written, err);
    if (rc == CS_OK && (man.oom || tru.oom))
        rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    for (size_t k = 0; k < 2 && rc == CS_OK; k++) {
        char *path = join(dir, fixed[k]);
        const sbuf *b = k ? &tru : &man;
        if (!path)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        else
            rc = cs_write_atomic(path, b->p, b->len, err);
        free(path);
    }
    free(man.p);
    free(tru.p);
    if (nfiles)
        *nfiles = written;
    return rc;
}
