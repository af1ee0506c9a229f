/* `collshift info`: describe what each file holds, as text on stdout and optionally as JSON. */
#include "cli.h"

#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

const char *const cmd_info_usage[] = {
    "usage: collshift info FILE... [--json FILE] [file options]\n"
    "\n"
    "Loads each file and prints what was loaded: format and kind (spectrum or record), number of\n"
    "points, axis range and step (uniform or not), the unit the axis was given in, metadata\n"
    "('# key = value unit' lines or HDF5 attributes), what the loader converted, and a robust noise\n"
    "estimate (1.4826 x median absolute deviation of first differences / sqrt 2).\n"
    "\n"
    "Options:\n"
    "  --json FILE      also write the description as JSON ('-' for standard output)\n"
    "\n",
    CLI_LOAD_OPTIONS_HELP,
    "\n"
    "A file that cannot be loaded is reported on stderr as 'collshift: FILE: line N: problem'; the\n"
    "other files are still described and the exit code is 3.\n",
    NULL,
};

/* Relative spread of the steps of an axis: max |step - mean| / |mean|. */
static double step_spread(const double *x, size_t n, double *mean_out)
{
    if (n < 2) {
        *mean_out = NAN;
        return NAN;
    }
    double mean = (x[n - 1] - x[0]) / (double)(n - 1);
    double worst = 0.0;
    for (size_t i = 0; i + 1 < n; i++) {
        double d = fabs((x[i + 1] - x[i]) - mean);
        if (d > worst)
            worst = d;
    }
    *mean_out = mean;
    return worst / fabs(mean);
}

static json_t *meta_json(const cs_meta *m)
{
    json_t *o = json_object();
    for (size_t i = 0; i < m->n; i++) {
        const cs_meta_entry *e = &m->e[i];
        json_t *v = json_object();
        json_object_set_new(v, "text", cli_jstring(e->text ? e->text : ""));
        json_object_set_new(v, "unit", cli_jstring(e->unit ? e->unit : ""));
        if (e->has_number) {
            json_object_set_new(v, "value", cli_jnum(e->value));
            if (e->dim != CS_DIM_UNKNOWN) {
                json_object_set_new(v, "si", cli_jnum(e->si));
                json_object_set_new(v, "si_unit", json_string(cs_dim_si_symbol(e->dim)));
            }
        }
        if (e->line > 0)
            json_object_set_new(v, "line", json_integer(e->line));
        json_object_set_new(o, e->key, v);
    }
    return o;
}

static void print_meta(const cs_meta *m)
{
    if (m->n == 0)
        return;
    printf("  metadata:\n");
    for (size_t i = 0; i < m->n; i++) {
        const cs_meta_entry *e = &m->e[i];
        char q[64] = "";
        if (e->has_number && e->dim != CS_DIM_UNKNOWN && e->dim != CS_DIM_DIMENSIONLESS) {
            char b[48];
            snprintf(q, sizeof q, "  (= %s)", cs_quantity_format(e->si, e->dim, 6, b, sizeof b));
        }
        printf("    %-18s %s%s%s%s\n", e->key, e->text ? e->text : "", e->unit && *e->unit ? " " : "",
               e->unit ? e->unit : "", q);
    }
}

static json_t *notes_json(const char *notes)
{
    json_t *a = json_array();
    const char *p = notes;
    while (*p) {
        const char *nl = strchr(p, '\n');
        size_t len = nl ? (size_t)(nl - p) : strlen(p);
        if (len)
            json_array_append_new(a, json_stringn(p, len));
        p += len + (nl ? 1 : 0);
    }
    return a;
}

static json_t *describe_spectrum(const cs_spectrum *s)
{
    char b1[48], b2[48], b3[48];
    double step;
    double spread = step_spread(s->freq_hz, s->n, &step);
    int uniform = spread < 1e-3;
    double noise = cs_spectrum_noise(s);
    printf("  points: %zu\n", s->n);
    printf("  axis: %s .. %s, step %s (%s)\n", cs_quantity_format(s->freq_hz[0], CS_DIM_FREQUENCY, 10, b1, sizeof b1),
           cs_quantity_format(s->freq_hz[s->n - 1], CS_DIM_FREQUENCY, 10, b2, sizeof b2),
           isfinite(step) ? cs_quantity_format(step, CS_DIM_FREQUENCY, 6, b3, sizeof b3) : "undefined",
           !isfinite(step) ? "one point" : uniform ? "uniform" : "non-uniform");
    printf("  axis given in: %s%s%s\n", s->x_unit, s->x_unit_assumed ? " (assumed)" : "",
           s->conv.air ? ", standard air" : "");
    printf("  values: column '%s'%s\n", s->y_name[0] ? s->y_name : "y", s->sigma ? ", with sigma" : "");
    if (isfinite(noise))
        printf("  noise (robust): %.6g\n", noise);
    else
        printf("  noise (robust): undefined\n");

    json_t *o = json_object();
    json_object_set_new(o, "n", json_integer((json_int_t)s->n));
    json_object_set_new(o, "freq_min_hz", json_real(s->freq_hz[0]));
    json_object_set_new(o, "freq_max_hz", json_real(s->freq_hz[s->n - 1]));
    json_object_set_new(o, "step_hz", cli_jnum(step));
    json_object_set_new(o, "uniform", json_boolean(uniform));
    json_object_set_new(o, "x_unit", json_string(s->x_unit));
    json_object_set_new(o, "x_unit_assumed", json_boolean(s->x_unit_assumed));
    json_object_set_new(o, "air", json_boolean(s->conv.air));
    json_object_set_new(o, "jacobian_applied", json_boolean(s->conv.jacobian_applied));
    json_object_set_new(o, "y_name", cli_jstring(s->y_name));
    json_object_set_new(o, "has_sigma", json_boolean(s->sigma != NULL));
    json_object_set_new(o, "noise", isfinite(noise) ? json_real(noise) : json_null());
    print_meta(&s->meta);
    json_object_set_new(o, "metadata", meta_json(&s->meta));
    return o;
}

static json_t *describe_record(const cs_record *r, size_t nrec)
{
    char b1[48], b2[48], b3[48], b4[48];
    double noise = cs_record_noise(r);
    double dur = r->dt_s * (double)(r->n ? r->n - 1 : 0);
    if (nrec > 1)
        printf("  shot %zu:\n", r->shot);
    printf("  samples: %zu %s\n", r->n, r->is_complex ? "complex (I/Q)" : "real");
    printf("  time: %s .. %s, step %s (sample rate %s, uniform)\n",
           cs_quantity_format(r->t0_s, CS_DIM_TIME, 8, b1, sizeof b1),
           cs_quantity_format(r->t0_s + dur, CS_DIM_TIME, 8, b2, sizeof b2),
           cs_quantity_format(r->dt_s, CS_DIM_TIME, 8, b3, sizeof b3),
           cs_quantity_format(1.0 / r->dt_s, CS_DIM_FREQUENCY, 8, b4, sizeof b4));
    printf("  time given in: %s\n", r->t_unit);
    if (isfinite(noise))
        printf("  noise (robust): %.6g\n", noise);
    else
        printf("  noise (robust): undefined\n");
    json_t *o = json_object();
    json_object_set_new(o, "shot", json_integer((json_int_t)r->shot));
    json_object_set_new(o, "n", json_integer((json_int_t)r->n));
    json_object_set_new(o, "complex", json_boolean(r->is_complex));
    json_object_set_new(o, "t0_s", json_real(r->t0_s));
    json_object_set_new(o, "dt_s", json_real(r->dt_s));
    json_object_set_new(o, "sample_rate_hz", json_real(1.0 / r->dt_s));
    json_object_set_new(o, "duration_s", json_real(dur));
    json_object_set_new(o, "t_unit", json_string(r->t_unit));
    json_object_set_new(o, "noise", isfinite(noise) ? json_real(noise) : json_null());
    if (r->shot == 0)
        print_meta(&r->meta);
    json_object_set_new(o, "metadata", meta_json(&r->meta));
    return o;
}

int cmd_info(int argc, char **argv)
{
    static const struct option own[] = {
        {"json", required_argument, NULL, 'j'},
        {NULL, 0, NULL, 0},
    };
    struct option longopts[64];
    cli_merge_options(own, longopts, 64);
    cs_load_options lo;
    cs_load_options_init(&lo);
    const char *json_path = NULL;
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":", longopts, NULL)) != -1) {
        if (c == 'j') {
            json_path = optarg;
        } else if (c >= CLI_LOAD_OPT_BASE) {
            int rc = cli_load_option(c, optarg, &lo);
            if (rc)
                return rc;
        } else if (c == ':') {
            cli_errorf("info: option '%s' needs a value", argv[optind - 1]);
            return CLI_EXIT_USAGE;
        } else {
            cli_errorf("info: unknown option '%s'; see 'collshift info --help'", argv[optind - 1]);
            return CLI_EXIT_USAGE;
        }
    }
    if (optind >= argc) {
        cli_errorf("info: no file given; see 'collshift info --help'");
        return CLI_EXIT_USAGE;
    }

    int worst = CLI_EXIT_OK;
    json_t *files = json_array();
    for (int k = optind; k < argc; k++) {
        const char *path = argv[k];
        cs_loaded l;
        cs_error err;
        cs_error_clear(&err);
        int rc = cs_io_load(path, &lo, &l, &err);
        if (rc != CS_OK) {
            int code = cli_report(&err);
            if (code > worst || worst == CLI_EXIT_OK)
                worst = code;
            json_t *f = json_object();
            cli_json_set_path(f, "path", path);
            json_object_set_new(f, "status", json_string("error"));
            json_object_set_new(f, "error", cli_jstring(err.msg));
            if (err.line > 0)
                json_object_set_new(f, "line", json_integer(err.line));
            if (err.offset >= 0)
                json_object_set_new(f, "offset", json_integer(err.offset));
            json_array_append_new(files, f);
            continue;
        }
        printf("%s\n", path);
        printf("  format: %s, kind: %s\n", cs_format_name(l.format), cs_kind_name(l.kind));
        json_t *f = json_object();
        cli_json_set_path(f, "path", path);
        json_object_set_new(f, "status", json_string("ok"));
        json_object_set_new(f, "format", json_string(cs_format_name(l.format)));
        json_object_set_new(f, "kind", json_string(cs_kind_name(l.kind)));
        if (l.kind == CS_KIND_SPECTRUM) {
            json_object_set_new(f, "spectrum", describe_spectrum(l.spectrum));
        } else {
            printf("  shots: %zu\n", l.nrecords);
            json_t *recs = json_array();
            for (size_t i = 0; i < l.nrecords; i++)
                json_array_append_new(recs, describe_record(l.records[i], l.nrecords));
            json_object_set_new(f, "records", recs);
        }
        if (l.notes[0]) {
            printf("  notes:\n");
            const char *p = l.notes;
            while (*p) {
                const char *nl = strchr(p, '\n');
                int len = nl ? (int)(nl - p) : (int)strlen(p);
                printf("    %.*s\n", len, p);
                p += len + (nl ? 1 : 0);
            }
        }
        json_object_set_new(f, "notes", notes_json(l.notes));
        json_array_append_new(files, f);
        cs_loaded_release(&l);
    }
    if (json_path) {
        json_t *root = json_object();
        json_object_set_new(root, "command", json_string("info"));
        json_object_set_new(root, "files", files);
        char *text = json_dumps(root, JSON_INDENT(2) | JSON_REAL_PRECISION(17));
        json_decref(root);
        if (!text) {
            cli_errorf("out of memory");
            return CLI_EXIT_DATA;
        }
        size_t len = strlen(text);
        char *withnl = realloc(text, len + 2);
        if (withnl) {
            text = withnl;
            text[len] = '\n';
            text[len + 1] = '\0';
        }
        int rc = cli_write_text(json_path, text);
        free(text);
        if (rc && worst == CLI_EXIT_OK)
            worst = rc;
    } else {
        json_decref(files);
    }
    return worst;
}
