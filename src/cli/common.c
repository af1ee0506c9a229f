/* Helpers shared by the subcommands: the file-loading options and atomic output files. */
#include "cli.h"

#include <collshift/report.h>

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <limits.h>
#include <stdlib.h>
#include <string.h>

enum {
    OPT_X = CLI_LOAD_OPT_BASE, OPT_Y, OPT_SIGMA, OPT_T, OPT_I, OPT_Q, OPT_X_UNIT, OPT_T_UNIT,
    OPT_AIR, OPT_Y_DENSITY, OPT_KIND, OPT_FORMAT, OPT_DELIM, OPT_RAW, OPT_RATE, OPT_BIG,
    OPT_OFFSET, OPT_SCALE, OPT_RECORDS, OPT_T0, OPT_DATASET, OPT_X_DATASET
};

const struct option cli_load_longopts[] = {
    {"x", required_argument, NULL, OPT_X},
    {"y", required_argument, NULL, OPT_Y},
    {"sigma", required_argument, NULL, OPT_SIGMA},
    {"t", required_argument, NULL, OPT_T},
    {"i", required_argument, NULL, OPT_I},
    {"q", required_argument, NULL, OPT_Q},
    {"x-unit", required_argument, NULL, OPT_X_UNIT},
    {"t-unit", required_argument, NULL, OPT_T_UNIT},
    {"air", no_argument, NULL, OPT_AIR},
    {"y-density", no_argument, NULL, OPT_Y_DENSITY},
    {"kind", required_argument, NULL, OPT_KIND},
    {"format", required_argument, NULL, OPT_FORMAT},
    {"delimiter", required_argument, NULL, OPT_DELIM},
    {"raw", required_argument, NULL, OPT_RAW},
    {"sample-rate", required_argument, NULL, OPT_RATE},
    {"big-endian", no_argument, NULL, OPT_BIG},
    {"offset-bytes", required_argument, NULL, OPT_OFFSET},
    {"scale", required_argument, NULL, OPT_SCALE},
    {"records", required_argument, NULL, OPT_RECORDS},
    {"t0", required_argument, NULL, OPT_T0},
    {"dataset", required_argument, NULL, OPT_DATASET},
    {"x-dataset", required_argument, NULL, OPT_X_DATASET},
    {NULL, 0, NULL, 0},
};

int cli_merge_options(const struct option *own, struct option *out, size_t cap)
{
    size_t k = 0;
    for (const struct option *p = own; p && p->name; p++) {
        if (k + 1 >= cap)
            return -1;
        out[k++] = *p;
    }
    for (const struct option *p = cli_load_longopts; p->name; p++) {
        if (k + 1 >= cap)
            return -1;
        out[k++] = *p;
    }
    memset(&out[k], 0, sizeof out[k]);
    return 0;
}

static int bad_value(const char *opt, const char *arg, const char *why)
{
    cli_errorf("--%s '%s': %s", opt, arg, why);
    return CLI_EXIT_USAGE;
}

static int parse_quantity_opt(const char *opt, const char *arg, cs_dim dim, double *out)
{
    cs_error err;
    cs_error_clear(&err);
    if (cs_quantity_parse(arg, dim, NULL, out, NULL, NULL, &err) != CS_OK)
        return bad_value(opt, arg, err.msg);
    return 0;
}

static int parse_count(const char *opt, const char *arg, long long lo, long long *out)
{
    char *end;
    errno = 0;
    long long v = strtoll(arg, &end, 10);
    if (end == arg || *end || errno == ERANGE || v < lo)
        return bad_value(opt, arg, "expected a whole number");
    *out = v;
    return 0;
}

int cli_load_option(int code, const char *arg, cs_load_options *o)
{
    long long n;
    switch (code) {
    case OPT_X: o->x_col = arg; return 0;
    case OPT_Y: o->y_col = arg; return 0;
    case OPT_SIGMA: o->sigma_col = arg; return 0;
    case OPT_T: o->t_col = arg; return 0;
    case OPT_I: o->i_col = arg; return 0;
    case OPT_Q: o->q_col = arg; return 0;
    case OPT_X_UNIT: {
        const cs_unit *u = cs_unit_find(arg);
        if (!u || !(u->dim == CS_DIM_FREQUENCY || u->dim == CS_DIM_WAVENUMBER || u->dim == CS_DIM_LENGTH))
            return bad_value("x-unit", arg, "not a frequency, wavenumber or wavelength unit");
        o->x_unit = arg;
        return 0;
    }
    case OPT_T_UNIT: {
        const cs_unit *u = cs_unit_find_dim(arg, CS_DIM_TIME);
        if (!u || u->dim != CS_DIM_TIME)
            return bad_value("t-unit", arg, "not a time unit (s ms us ns ps)");
        o->t_unit = arg;
        return 0;
    }
    case OPT_AIR: o->air = 1; return 0;
    case OPT_Y_DENSITY: o->y_is_density = 1; return 0;
    case OPT_KIND:
        if (strcmp(arg, "spectrum") == 0)
            o->kind = CS_KIND_SPECTRUM;
        else if (strcmp(arg, "record") == 0)
            o->kind = CS_KIND_RECORD;
        else
            return bad_value("kind", arg, "expected 'spectrum' or 'record'");
        return 0;
    case OPT_FORMAT:
        if (strcmp(arg, "text") == 0)
            o->format = CS_FORMAT_TEXT;
        else if (strcmp(arg, "raw") == 0)
            o->format = CS_FORMAT_RAW;
        else if (strcmp(arg, "npy") == 0)
            o->format = CS_FORMAT_NPY;
        else if (strcmp(arg, "hdf5") == 0)
            o->format = CS_FORMAT_HDF5;
        else
            return bad_value("format", arg, "expected text, raw, npy or hdf5");
        return 0;
    case OPT_DELIM:
        if (strcmp(arg, "tab") == 0 || strcmp(arg, "\\t") == 0)
            o->delimiter = '\t';
        else if (strcmp(arg, "space") == 0 || strcmp(arg, "whitespace") == 0)
            o->delimiter = ' ';
        else if (strlen(arg) == 1 && strchr(",;\t ", arg[0]))
            o->delimiter = arg[0];
        else
            return bad_value("delimiter", arg, "expected ',', ';', tab or space");
        return 0;
    case OPT_RAW:
        o->raw_type = cs_raw_type_parse(arg);
        if (o->raw_type == CS_RAW_NONE)
            return bad_value("raw", arg, "expected i8 i16 i32 f32 f64 ci8 ci16 ci32 cf32 cf64");
        o->format = CS_FORMAT_RAW;
        return 0;
    case OPT_RATE: {
        int rc = parse_quantity_opt("sample-rate", arg, CS_DIM_FREQUENCY, &o->sample_rate_hz);
        if (rc == 0 && !(o->sample_rate_hz > 0))
            return bad_value("sample-rate", arg, "must be positive");
        return rc;
    }
    case OPT_BIG: o->big_endian = 1; return 0;
    case OPT_OFFSET:
        if (parse_count("offset-bytes", arg, 0, &n))
            return CLI_EXIT_USAGE;
        o->offset_bytes = n;
        return 0;
    case OPT_SCALE: {
        char *end;
        errno = 0;
        double v = strtod(arg, &end);
        if (end == arg || *end || errno == ERANGE || !(v == v) || v == 0.0)
            return bad_value("scale", arg, "expected a non-zero number");
        o->scale = v;
        return 0;
    }
    case OPT_RECORDS:
        if (parse_count("records", arg, 1, &n))
            return CLI_EXIT_USAGE;
        o->records = (size_t)n;
        return 0;
    case OPT_T0: return parse_quantity_opt("t0", arg, CS_DIM_TIME, &o->t0_s);
    case OPT_DATASET: o->dataset = arg; return 0;
    case OPT_X_DATASET: o->x_dataset = arg; return 0;
    default:
        cli_errorf("internal: unknown option code %d", code);
        return CLI_EXIT_USAGE;
    }
}

int cli_write_text(const char *path, const char *text)
{
    size_t len = strlen(text);
    if (strcmp(path, "-") == 0) {
        if (fwrite(text, 1, len, stdout) != len) {
            cli_errorf("error writing to standard output");
            return CLI_EXIT_DATA;
        }
        return 0;
    }
    cs_error err;
    cs_error_clear(&err);
    if (cs_write_atomic(path, text, len, &err) != CS_OK)
        return cli_report(&err);
    return 0;
}

void cli_bprintf(cli_buf *b, const char *fmt, ...)
{
    for (;;) {
        va_list ap;
        va_start(ap, fmt);
        int k = vsnprintf(b->p ? b->p + b->len : NULL, b->p ? b->cap - b->len : 0, fmt, ap);
        va_end(ap);
        if (k < 0)
            return;
        if (b->p && b->len + (size_t)k < b->cap) {
            b->len += (size_t)k;
            return;
        }
        size_t cap = 2 * b->cap + (size_t)k + 4096;
        char *np = realloc(b->p, cap);
        if (!np)
            return;
        b->p = np;
        b->cap = cap;
    }
}

json_t *cli_jnum(double v)
{
    return isfinite(v) ? json_real(v) : json_null();
}

/* Length of the well-formed UTF-8 sequence at p (Unicode Standard, chapter 3, Table 3-7:
 * well-formed byte sequences; no overlong forms, no surrogates, nothing above U+10FFFF), or 0
 * when it is ill-formed; *sub then gets the length of its maximal subpart (at least 1): the
 * longest start of a well-formed sequence, which one U+FFFD replaces (section 3.9). */
static size_t utf8_seq(const unsigned char *p, size_t *sub)
{
    unsigned char c = p[0];
    size_t need;
    unsigned char lo = 0x80, hi = 0xBF;   /* range of the second byte */
    if (c < 0x80) {
        return 1;
    } else if (c >= 0xC2 && c <= 0xDF) {
        need = 2;
    } else if (c >= 0xE0 && c <= 0xEF) {
        need = 3;
        if (c == 0xE0)
            lo = 0xA0;
        else if (c == 0xED)
            hi = 0x9F;
    } else if (c >= 0xF0 && c <= 0xF4) {
        need = 4;
        if (c == 0xF0)
            lo = 0x90;
        else if (c == 0xF4)
            hi = 0x8F;
    } else {
        *sub = 1;
        return 0;
    }
    for (size_t k = 1; k < need; k++) {
        unsigned char b = p[k];
        int good = k == 1 ? (b >= lo && b <= hi) : (b >= 0x80 && b <= 0xBF);
        if (!good) {
            *sub = k;
            return 0;
        }
    }
    return need;
}

int cli_utf8_valid(const char *bytes)
{
    const unsigned char *p = (const unsigned char *)bytes;
    while (p && *p) {
        size_t sub, k = utf8_seq(p, &sub);
        if (!k)
            return 0;
        p += k;
    }
    return 1;
}

/* bytes as text: valid UTF-8 kept; each maximal subpart of an ill-formed sequence as `bad`
 * (pct: %XX of its bytes instead); pct also writes '%' as %25. Returns a malloc'd string. */
static char *utf8_clean(const char *bytes, int pct)
{
    const unsigned char *p = (const unsigned char *)bytes;
    size_t n = strlen(bytes);
    char *out = malloc(3 * n + 1);   /* U+FFFD (3 bytes) or %XX per bad byte at most */
    if (!out)
        return NULL;
    size_t o = 0;
    while (*p) {
        size_t sub, k = utf8_seq(p, &sub);
        if (k && !(pct && *p == '%')) {
            memcpy(out + o, p, k);
            o += k;
            p += k;
        } else if (pct) {
            size_t m = k ? k : sub;
            for (size_t i = 0; i < m; i++)
                o += (size_t)snprintf(out + o, 4, "%%%02X", p[i]);
            p += m;
        } else {
            memcpy(out + o, "\xEF\xBF\xBD", 3);   /* U+FFFD REPLACEMENT CHARACTER */
            o += 3;
            p += sub;
        }
    }
    out[o] = '\0';
    return out;
}

json_t *cli_jstring(const char *bytes)
{
    if (!bytes)
        return json_null();
    json_t *j = json_string(bytes);
    if (j)
        return j;
    char *t = utf8_clean(bytes, 0);
    j = t ? json_string(t) : NULL;
    free(t);
    return j ? j : json_string("");
}

void cli_json_set_path(json_t *obj, const char *key, const char *bytes)
{
    json_object_set_new(obj, key, cli_jstring(bytes));
    if (!bytes || cli_utf8_valid(bytes))
        return;
    char *t = utf8_clean(bytes, 1);
    char k2[128];
    snprintf(k2, sizeof k2, "%s_bytes", key);
    if (t)
        json_object_set_new(obj, k2, json_string(t));
    free(t);
}

static int hexval(int c)
{
    return c >= '0' && c <= '9' ? c - '0' : c >= 'A' && c <= 'F' ? c - 'A' + 10
         : c >= 'a' && c <= 'f' ? c - 'a' + 10 : -1;
}

char *cli_json_get_path(const json_t *obj, const char *key)
{
    char k2[128];
    snprintf(k2, sizeof k2, "%s_bytes", key);
    const char *raw = json_string_value(json_object_get(obj, k2));
    const char *t = raw ? raw : json_string_value(json_object_get(obj, key));
    if (!t)
        return NULL;
    size_t n = strlen(t);
    char *out = malloc(n + 1);
    if (!out)
        return NULL;
    size_t o = 0;
    for (size_t i = 0; i < n; i++) {
        int h1, h2;
        if (raw && t[i] == '%' && i + 2 < n && (h1 = hexval(t[i + 1])) >= 0 &&
            (h2 = hexval(t[i + 2])) >= 0 && (h1 || h2)) {
            out[o++] = (char)(h1 * 16 + h2);
            i += 2;
        } else {
            out[o++] = t[i];
        }
    }
    out[o] = '\0';
    return out;
}

void cli_gatefit_component_json(const cs_gatefit_component *c, json_t *jc)
{
    json_object_set_new(jc, "profile", json_string(cs_gatefit_kind_name(c->kind)));
    json_object_set_new(jc, "center_hz", cli_jnum(c->center_hz));
    json_object_set_new(jc, "center_hz_err", cli_jnum(c->center_hz_err));
    json_object_set_new(jc, "fwhm_hz", cli_jnum(c->fwhm_hz));
    json_object_set_new(jc, "fwhm_hz_err", cli_jnum(c->fwhm_hz_err));
    if (c->kind == CS_GATEFIT_DECAY) {
        json_object_set_new(jc, "gamma_per_s", cli_jnum(c->gamma_per_s));
        json_object_set_new(jc, "gamma_per_s_err", cli_jnum(c->gamma_per_s_err));
    } else {
        json_object_set_new(jc, "tau_s", cli_jnum(c->tau_s));
        json_object_set_new(jc, "tau_s_err", cli_jnum(c->tau_s_err));
        json_object_set_new(jc, "t_peak_s", cli_jnum(c->t_peak_s));
        json_object_set_new(jc, "t_peak_s_err", cli_jnum(c->t_peak_s_err));
    }
    json_object_set_new(jc, "amplitude", cli_jnum(c->amplitude));
    json_object_set_new(jc, "amplitude_err", cli_jnum(c->amplitude_err));
    json_object_set_new(jc, "phase_rad", cli_jnum(c->phase_rad));
    json_object_set_new(jc, "phase_rad_err", cli_jnum(c->phase_rad_err));
}
