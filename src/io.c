/* Spectrum and record objects, metadata lists, format detection and the loader dispatcher. */
#include <collshift/io.h>

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

/* ---------------------------------------------------------------- small string helpers */

static char *dup_range(const char *b, const char *e)
{
    while (b < e && isspace((unsigned char)*b))
        b++;
    while (e > b && isspace((unsigned char)e[-1]))
        e--;
    size_t n = (size_t)(e - b);
    char *s = malloc(n + 1);
    if (!s)
        return NULL;
    memcpy(s, b, n);
    s[n] = '\0';
    return s;
}

static char *dup_str(const char *s)
{
    return dup_range(s, s + strlen(s));
}

/* ---------------------------------------------------------------- metadata */

void cs_meta_init(cs_meta *m)
{
    m->n = m->cap = 0;
    m->e = NULL;
}

static void entry_release(cs_meta_entry *e)
{
    free(e->key);
    free(e->text);
    free(e->unit);
    memset(e, 0, sizeof *e);
}

void cs_meta_release(cs_meta *m)
{
    if (!m)
        return;
    for (size_t i = 0; i < m->n; i++)
        entry_release(&m->e[i]);
    free(m->e);
    cs_meta_init(m);
}

static long find_index(const cs_meta *m, const char *key)
{
    for (size_t i = 0; i < m->n; i++)
        if (strcasecmp(m->e[i].key, key) == 0)
            return (long)i;
    return -1;
}

/* Slot for key: the existing entry (released, key kept) or a new one at the end; NULL when out
 * of memory or when m already holds CS_META_MAX_KEYS keys. */
static cs_meta_entry *slot_for(cs_meta *m, const char *key)
{
    long i = find_index(m, key);
    if (i >= 0) {
        cs_meta_entry *e = &m->e[i];
        free(e->text);
        free(e->unit);
        e->text = e->unit = NULL;
        return e;
    }
    if (m->n >= CS_META_MAX_KEYS)
        return NULL;
    if (m->n == m->cap) {
        size_t cap = m->cap ? 2 * m->cap : 8;
        cs_meta_entry *ne = realloc(m->e, cap * sizeof *ne);
        if (!ne)
            return NULL;
        m->e = ne;
        m->cap = cap;
    }
    cs_meta_entry *e = &m->e[m->n];
    memset(e, 0, sizeof *e);
    e->key = dup_str(key);
    if (!e->key)
        return NULL;
    m->n++;
    return e;
}

const cs_meta_entry *cs_meta_find(const cs_meta *m, const char *key)
{
    if (!m || !key)
        return NULL;
    long i = find_index(m, key);
    return i >= 0 ? &m->e[i] : NULL;
}

/* Parse "number [unit]" from text into the entry's numeric fields. */
static void parse_value(cs_meta_entry *e, const char *value)
{
    e->has_number = 0;
    e->dim = CS_DIM_UNKNOWN;
    char *end;
    errno = 0;
    double v = strtod(value, &end);
    if (end == value || errno == ERANGE || !isfinite(v))
        return;
    while (isspace((unsigned char)*end))
        end++;
    if (*end == '\0') {
        e->has_number = 1;
        e->value = v;
        e->si = v;
        return;
    }
    const cs_unit *u = cs_unit_find(end);
    if (!u)
        return; /* text such as "12 cells": kept as text */
    e->has_number = 1;
    e->value = v;
    e->dim = u->dim;
    e->si = cs_unit_to_si(u, v);
    free(e->unit);
    e->unit = dup_str(end);
    /* the text keeps only the number */
    size_t n = (size_t)(end - value);
    char *t = dup_range(value, value + n);
    if (t) {
        free(e->text);
        e->text = t;
    }
}

int cs_meta_parse_line(cs_meta *m, const char *content, const char *file, long line, cs_error *err)
{
    const char *eq = strchr(content, '=');
    if (!eq)
        return cs_error_set(err, CS_EFORMAT, file, line, -1,
                            "metadata line has no '=': expected 'key = value [unit]'");
    char *key = dup_range(content, eq);
    if (!key)
        return cs_error_set(err, CS_ENOMEM, file, line, -1, "out of memory");
    if (!*key) {
        free(key);
        return cs_error_set(err, CS_EFORMAT, file, line, -1, "metadata line has an empty key");
    }
    for (const char *k = key; *k; k++) {
        if (!(isalnum((unsigned char)*k) || *k == '_' || *k == '-' || *k == '.' || *k == ' ')) {
            int c = (unsigned char)*k;
            free(key);
            return cs_error_set(err, CS_EFORMAT, file, line, -1,
                                "metadata key has character '%c': use letters, digits, '_', '-', '.'", c);
        }
    }
    if (m->n >= CS_META_MAX_KEYS && find_index(m, key) < 0) {
        free(key);
        return cs_error_set(err, CS_ERANGE, file, line, -1,
                            "more than %d different metadata keys", CS_META_MAX_KEYS);
    }
    cs_meta_entry *e = slot_for(m, key);
    free(key);
    if (!e)
        return cs_error_set(err, CS_ENOMEM, file, line, -1, "out of memory");
    e->line = line;
    e->text = dup_str(eq + 1);
    e->unit = dup_str("");
    if (!e->text || !e->unit)
        return cs_error_set(err, CS_ENOMEM, file, line, -1, "out of memory");
    parse_value(e, e->text);
    return CS_OK;
}

int cs_meta_set_si(cs_meta *m, const char *key, double si, cs_dim dim)
{
    if (m->n >= CS_META_MAX_KEYS && find_index(m, key) < 0)
        return CS_ERANGE;
    cs_meta_entry *e = slot_for(m, key);
    if (!e)
        return CS_ENOMEM;
    char buf[64];
    snprintf(buf, sizeof buf, "%.17g", si);
    e->text = dup_str(buf);
    e->unit = dup_str(cs_dim_si_symbol(dim));
    if (!e->text || !e->unit)
        return CS_ENOMEM;
    e->has_number = isfinite(si);
    e->value = e->si = si;
    e->dim = dim;
    e->line = -1;
    return CS_OK;
}

int cs_meta_set_text(cs_meta *m, const char *key, const char *text)
{
    if (m->n >= CS_META_MAX_KEYS && find_index(m, key) < 0)
        return CS_ERANGE;
    cs_meta_entry *e = slot_for(m, key);
    if (!e)
        return CS_ENOMEM;
    e->text = dup_str(text);
    e->unit = dup_str("");
    if (!e->text || !e->unit)
        return CS_ENOMEM;
    e->line = -1;
    parse_value(e, e->text);
    return CS_OK;
}

int cs_meta_get_si(const cs_meta *m, const char *key, cs_dim dim, double *si, cs_error *err)
{
    const cs_meta_entry *e = cs_meta_find(m, key);
    if (!e)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "no metadata '%s'", key);
    if (!e->has_number)
        return cs_error_set(err, CS_EDATA, NULL, e->line, -1,
                            "metadata '%s' is not a number with a unit: '%s'", key, e->text);
    if (e->dim == CS_DIM_UNKNOWN && dim != CS_DIM_DIMENSIONLESS)
        return cs_error_set(err, CS_EUNIT, NULL, e->line, -1,
                            "metadata '%s' = '%s' has no unit; a %s is expected", key, e->text,
                            cs_dim_name(dim));
    if (e->dim != CS_DIM_UNKNOWN && e->dim != dim)
        return cs_error_set(err, CS_EUNIT, NULL, e->line, -1,
                            "metadata '%s' has unit '%s' (a %s); a %s is expected", key, e->unit,
                            cs_dim_name(e->dim), cs_dim_name(dim));
    *si = e->si;
    return CS_OK;
}

int cs_meta_copy(cs_meta *dst, const cs_meta *src)
{
    for (size_t i = 0; i < src->n; i++) {
        const cs_meta_entry *s = &src->e[i];
        cs_meta_entry *d = slot_for(dst, s->key);
        if (!d)
            return CS_ENOMEM;
        char *k = d->key;
        *d = *s;
        d->key = k;
        d->text = dup_str(s->text ? s->text : "");
        d->unit = dup_str(s->unit ? s->unit : "");
        if (!d->text || !d->unit)
            return CS_ENOMEM;
    }
    return CS_OK;
}

/* ---------------------------------------------------------------- objects */

cs_spectrum *cs_spectrum_alloc(size_t n, int with_sigma)
{
    cs_spectrum *s = calloc(1, sizeof *s);
    if (!s)
        return NULL;
    cs_meta_init(&s->meta);
    s->n = n;
    size_t m = n ? n : 1;
    s->freq_hz = calloc(m, sizeof(double));
    s->y = calloc(m, sizeof(double));
    s->sigma = with_sigma ? calloc(m, sizeof(double)) : NULL;
    if (!s->freq_hz || !s->y || (with_sigma && !s->sigma)) {
        cs_spectrum_free(s);
        return NULL;
    }
    snprintf(s->x_unit, sizeof s->x_unit, "Hz");
    return s;
}

void cs_spectrum_free(cs_spectrum *s)
{
    if (!s)
        return;
    free(s->freq_hz);
    free(s->y);
    free(s->sigma);
    free(s->source);
    cs_meta_release(&s->meta);
    free(s);
}

cs_record *cs_record_alloc(size_t n, int is_complex)
{
    cs_record *r = calloc(1, sizeof *r);
    if (!r)
        return NULL;
    cs_meta_init(&r->meta);
    r->n = n;
    r->is_complex = is_complex ? 1 : 0;
    r->dt_s = 1.0;
    size_t m = (n ? n : 1) * (is_complex ? 2u : 1u);
    r->data = calloc(m, sizeof(double));
    if (!r->data) {
        cs_record_free(r);
        return NULL;
    }
    snprintf(r->t_unit, sizeof r->t_unit, "s");
    return r;
}

void cs_record_free(cs_record *r)
{
    if (!r)
        return;
    free(r->data);
    free(r->source);
    cs_meta_release(&r->meta);
    free(r);
}

/* ---------------------------------------------------------------- robust noise */

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median_inplace(double *v, size_t n)
{
    qsort(v, n, sizeof *v, cmp_double);
    return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

/* sigma = 1.4826 * median|d - median(d)| / sqrt(2) over first differences d of x[0], x[stride], ...
 * for `parts` interleaved series (1 real, 2 for I/Q), pooled. 1.4826 = 1/Phi^-1(3/4) makes the MAD a
 * consistent estimator of a Gaussian standard deviation (common practice); differencing doubles the
 * variance, hence sqrt(2). */
static double mad_noise(const double *x, size_t n, size_t parts)
{
    if (n < 3)
        return NAN;
    size_t m = (n - 1) * parts;
    double *d = malloc(m * sizeof *d);
    if (!d)
        return NAN;
    size_t k = 0;
    for (size_t p = 0; p < parts; p++)
        for (size_t i = 0; i + 1 < n; i++)
            d[k++] = x[(i + 1) * parts + p] - x[i * parts + p];
    double med = median_inplace(d, m);
    for (size_t i = 0; i < m; i++)
        d[i] = fabs(d[i] - med);
    double mad = median_inplace(d, m);
    free(d);
    return 1.482602218505602 * mad / sqrt(2.0);
}

double cs_spectrum_noise(const cs_spectrum *s)
{
    return s ? mad_noise(s->y, s->n, 1) : NAN;
}

double cs_record_noise(const cs_record *r)
{
    return r ? mad_noise(r->data, r->n, r->is_complex ? 2 : 1) : NAN;
}

/* ---------------------------------------------------------------- raw sample types */

static const struct {
    const char *name;
    cs_raw_type type;
    size_t size;
} raw_types[] = {
    {"i8", CS_RAW_I8, 1},    {"i16", CS_RAW_I16, 2},   {"i32", CS_RAW_I32, 4},
    {"f32", CS_RAW_F32, 4},  {"f64", CS_RAW_F64, 8},   {"ci8", CS_RAW_CI8, 2},
    {"ci16", CS_RAW_CI16, 4}, {"ci32", CS_RAW_CI32, 8}, {"cf32", CS_RAW_CF32, 8},
    {"cf64", CS_RAW_CF64, 16},
};

cs_raw_type cs_raw_type_parse(const char *name)
{
    if (!name)
        return CS_RAW_NONE;
    for (size_t i = 0; i < sizeof raw_types / sizeof raw_types[0]; i++)
        if (strcasecmp(name, raw_types[i].name) == 0)
            return raw_types[i].type;
    return CS_RAW_NONE;
}

const char *cs_raw_type_name(cs_raw_type t)
{
    for (size_t i = 0; i < sizeof raw_types / sizeof raw_types[0]; i++)
        if (raw_types[i].type == t)
            return raw_types[i].name;
    return "none";
}

size_t cs_raw_type_size(cs_raw_type t)
{
    for (size_t i = 0; i < sizeof raw_types / sizeof raw_types[0]; i++)
        if (raw_types[i].type == t)
            return raw_types[i].size;
    return 0;
}

/* ---------------------------------------------------------------- options, results */

void cs_load_options_init(cs_load_options *o)
{
    memset(o, 0, sizeof *o);
    o->scale = 1.0;
    o->min_points = 3;
    o->max_samples = (size_t)1 << 31;
}

void cs_loaded_init(cs_loaded *l)
{
    memset(l, 0, sizeof *l);
}

void cs_loaded_release(cs_loaded *l)
{
    if (!l)
        return;
    cs_spectrum_free(l->spectrum);
    for (size_t i = 0; i < l->nrecords; i++)
        cs_record_free(l->records[i]);
    free(l->records);
    cs_loaded_init(l);
}

void cs_loaded_note(cs_loaded *l, const char *fmt, ...)
{
    size_t used = strlen(l->notes);
    if (used + 2 >= sizeof l->notes)
        return;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(l->notes + used, sizeof l->notes - used - 1, fmt, ap);
    va_end(ap);
    used = strlen(l->notes);
    if (used + 1 < sizeof l->notes) {
        l->notes[used] = '\n';
        l->notes[used + 1] = '\0';
    }
}

const char *cs_format_name(cs_format f)
{
    switch (f) {
    case CS_FORMAT_TEXT: return "text";
    case CS_FORMAT_RAW: return "raw";
    case CS_FORMAT_NPY: return "npy";
    case CS_FORMAT_HDF5: return "hdf5";
    default: return "auto";
    }
}

const char *cs_kind_name(cs_kind k)
{
    switch (k) {
    case CS_KIND_SPECTRUM: return "spectrum";
    case CS_KIND_RECORD: return "record";
    default: return "auto";
    }
}

static int has_ext(const char *path, const char *ext)
{
    size_t n = strlen(path), m = strlen(ext);
    return n >= m && strcasecmp(path + n - m, ext) == 0;
}

cs_format cs_io_detect_format(const char *path, const cs_load_options *o)
{
    if (o && o->format != CS_FORMAT_AUTO)
        return o->format;
    if (o && o->raw_type != CS_RAW_NONE)
        return CS_FORMAT_RAW;
    unsigned char magic[8] = {0};
    size_t got = 0;
    FILE *f = fopen(path, "rb");
    if (f) {
        got = fread(magic, 1, sizeof magic, f);
        fclose(f);
    }
    static const unsigned char npy_magic[6] = {0x93, 'N', 'U', 'M', 'P', 'Y'};
    static const unsigned char h5_magic[8] = {0x89, 'H', 'D', 'F', '\r', '\n', 0x1a, '\n'};
    if (got >= 6 && memcmp(magic, npy_magic, 6) == 0)
        return CS_FORMAT_NPY;
    if (got >= 8 && memcmp(magic, h5_magic, 8) == 0)
        return CS_FORMAT_HDF5;
    if (has_ext(path, ".npy"))
        return CS_FORMAT_NPY;
    if (has_ext(path, ".h5") || has_ext(path, ".hdf5") || has_ext(path, ".he5"))
        return CS_FORMAT_HDF5;
    return CS_FORMAT_TEXT;
}

int cs_io_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    cs_load_options defaults;
    if (!o) {
        cs_load_options_init(&defaults);
        o = &defaults;
    }
    if (!path || !out)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no file given");
    cs_loaded_init(out);
    cs_format fmt = cs_io_detect_format(path, o);
    int rc;
    switch (fmt) {
    case CS_FORMAT_RAW: rc = cs_io_raw_load(path, o, out, err); break;
    case CS_FORMAT_NPY: rc = cs_io_npy_load(path, o, out, err); break;
    case CS_FORMAT_HDF5: rc = cs_io_hdf5_load(path, o, out, err); break;
    default: rc = cs_io_text_load(path, o, out, err); break;
    }
    if (rc != CS_OK) {
        cs_loaded_release(out);
        return rc;
    }
    out->format = fmt;
    return CS_OK;
}
