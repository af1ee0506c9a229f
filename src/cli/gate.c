/* `collshift gate`: envelope, burst detection, decay diagnostics and gated spectra of time records. */
#include "cli.h"
#include "plotcli.h"

#include <collshift/fit.h>
#include <collshift/gate.h>
#include <collshift/gatefit.h>
#include <collshift/model.h>
#include <collshift/pencil.h>
#include <collshift/plot.h>
#include <collshift/report.h>

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

const char *const cmd_gate_usage[] = {
    "usage: collshift gate RECORD... [--gate NAME=START:LENGTH[:WINDOW]]... [options] [file options]\n"
    "\n"
    "Finds the burst in each time record (envelope: |I+iQ|^2, or the analytic signal of a real\n"
    "record), analyses how the emission decays, and computes the power spectral density of each\n"
    "gate: the samples in the gate times the window stretched over it, zero-padded, transformed.\n"
    "Without --gate the gates are automatic: early = burst peak +- 2 burst widths (Hann), late =\n"
    "from 3 widths after the burst's end to the end of the record (rectangular: the decaying tail\n"
    "sits at the gate's start, where a tapered window would suppress it).\n"
    "\n"
    "Gates:\n"
    "  --gate NAME=START:LENGTH[:WINDOW]   START and LENGTH are times from the first sample (20us),\n"
    "                        or relative to the burst: START = onset|peak|end|tail|fade|zero [+-OFFSET],\n"
    "                        LENGTH = TIME | Kw (K burst widths) | rest | ANCHOR[+-OFFSET] (gate ends\n"
    "                        there); OFFSET = TIME or Kw. Examples: early=peak-2w:4w:hann,\n"
    "                        late=end+3w:rest:rect, late=20us:200us:tukey:0.25 (repeatable)\n"
    "  --window NAME         window for gates that name none: rect hann hamming blackman\n"
    "                        exact-blackman blackman-harris flattop tukey[:a] gauss[:s] kaiser[:b]\n"
    "                        (default hann; with --window the automatic late gate uses it too)\n"
    "  --pad K               zero-padding factor (default 2)\n"
    "  --lo FREQ             local-oscillator frequency added back to the axis (default: the\n"
    "                        record's 'lo' metadata, else 0)\n"
    "  --average KIND        several shots in a file: power (default) or coherent (phase-locked)\n"
    "  --fit LIST            fit each gate: gate-aware components 'decay' (damped exponential) and\n"
    "                        'burst' (sech pulse) joined by '+' are fitted to the gate's samples\n"
    "                        with the exact likelihood (unbiased by the gate's truncation and\n"
    "                        window); plain profiles (lorentz, gauss, ...) are fitted to the gated\n"
    "                        PSD plus a constant floor, for a quick look\n"
    "\n"
    "Output:\n"
    "  --out PREFIX          write PREFIX_GATE.csv per gate (PREFIX_FILE_GATE.csv for several files):\n"
    "                        frequency_hz, psd (and psd_err when shots are averaged)\n"
    "  --spectrogram FILE    short-time spectra as CSV (time_s, frequency_hz, psd)\n"
    "  --segment N, --hop N  spectrogram segment length and hop in samples (default 256, 64)\n"
    "  --json FILE           everything as JSON ('-' for standard output)\n"
    "  --plot-envelope FILE  figure of the smoothed envelope (intensity against time, logarithmic\n"
    "                        axis) with the gates shaded; PNG, SVG or PDF from the extension\n"
    "  --plot-spectrogram FILE  figure of the spectrogram with the gates (computed with --segment,\n"
    "                        --hop or their defaults when --spectrogram is not given)\n"
    "                        With several records the figures are FILE_STEM.EXT per record; a\n"
    "                        figure that cannot be drawn (e.g. an unknown extension) gives exit 3\n"
    "                        after the other outputs are written\n"
    "  --measure             plan transforms with FFTW_MEASURE and keep the wisdom in the cache\n"
    "  --quiet               no summary on standard output\n"
    "\n",
    CLI_LOAD_OPTIONS_HELP,
    "\n"
    "PSD conventions: complex (I/Q) records give a two-sided PSD with negative frequencies kept;\n"
    "real records a one-sided PSD; units are (signal unit)^2/Hz; the window is compensated so that\n"
    "the PSD integrates to the mean power in the gate.\n",
    NULL,
};

#define MAX_GATES 16

typedef struct gate_opts {
    const char *gate_text[MAX_GATES];
    size_t ngates;
    cs_window window;
    size_t pad;
    int have_lo;
    double lo_hz;
    cs_gate_average average;
    const char *fit;
    const char *out, *spectrogram, *json, *plot_env, *plot_sg;
    size_t segment, hop;
    int measure, quiet;
    int window_given;
} gate_opts;

enum {
    G_GATE = 1, G_WINDOW, G_PAD, G_LO, G_AVERAGE, G_FIT, G_OUT, G_SPECTRO, G_SEGMENT, G_HOP, G_JSON,
    G_MEASURE, G_QUIET, G_PLOT_ENV, G_PLOT_SG
};

static int parse_count(const char *opt, const char *arg, size_t lo, size_t hi, size_t *out)
{
    char *end;
    errno = 0;
    long long v = strtoll(arg, &end, 10);
    if (end == arg || *end || errno == ERANGE || v < (long long)lo || v > (long long)hi) {
        cli_errorf("--%s '%s': expected a whole number from %zu to %zu", opt, arg, lo, hi);
        return CLI_EXIT_USAGE;
    }
    *out = (size_t)v;
    return 0;
}

static int parse_args(int argc, char **argv, gate_opts *go, cs_load_options *lo)
{
    static const struct option own[] = {
        {"gate", required_argument, NULL, G_GATE},
        {"window", required_argument, NULL, G_WINDOW},
        {"pad", required_argument, NULL, G_PAD},
        {"lo", required_argument, NULL, G_LO},
        {"average", required_argument, NULL, G_AVERAGE},
        {"fit", required_argument, NULL, G_FIT},
        {"out", required_argument, NULL, G_OUT},
        {"spectrogram", required_argument, NULL, G_SPECTRO},
        {"segment", required_argument, NULL, G_SEGMENT},
        {"hop", required_argument, NULL, G_HOP},
        {"json", required_argument, NULL, G_JSON},
        {"measure", no_argument, NULL, G_MEASURE},
        {"quiet", no_argument, NULL, G_QUIET},
        {"plot-envelope", required_argument, NULL, G_PLOT_ENV},
        {"plot-spectrogram", required_argument, NULL, G_PLOT_SG},
        {NULL, 0, NULL, 0},
    };
    struct option longopts[64];
    cli_merge_options(own, longopts, 64);
    cs_error err;
    int c, rc = 0;
    optind = 1;
    opterr = 0;
    while (rc == 0 && (c = getopt_long(argc, argv, ":", longopts, NULL)) != -1) {
        cs_error_clear(&err);
        switch (c) {
        case G_GATE:
            if (go->ngates >= MAX_GATES) {
                cli_errorf("--gate: at most %d gates", MAX_GATES);
                rc = CLI_EXIT_USAGE;
            } else {
                go->gate_text[go->ngates++] = optarg;
            }
            break;
        case G_WINDOW:
            if (cs_window_parse(optarg, &go->window, &err) != CS_OK) {
                cli_errorf("--window '%s': %s", optarg, err.msg);
                rc = CLI_EXIT_USAGE;
            }
            go->window_given = 1;
            break;
        case G_PAD: rc = parse_count("pad", optarg, 1, 64, &go->pad); break;
        case G_LO:
            if (cs_quantity_parse(optarg, CS_DIM_FREQUENCY, NULL, &go->lo_hz, NULL, NULL, &err) != CS_OK) {
                cli_errorf("--lo '%s': %s", optarg, err.msg);
                rc = CLI_EXIT_USAGE;
            }
            go->have_lo = 1;
            break;
        case G_AVERAGE:
            if (strcmp(optarg, "power") == 0)
                go->average = CS_GATE_AVERAGE_POWER;
            else if (strcmp(optarg, "coherent") == 0)
                go->average = CS_GATE_AVERAGE_COHERENT;
            else {
                cli_errorf("--average '%s': expected power or coherent", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case G_FIT: go->fit = optarg; break;
        case G_OUT: go->out = optarg; break;
        case G_SPECTRO: go->spectrogram = optarg; break;
        case G_SEGMENT: rc = parse_count("segment", optarg, 8, (size_t)1 << 24, &go->segment); break;
        case G_HOP: rc = parse_count("hop", optarg, 1, (size_t)1 << 24, &go->hop); break;
        case G_JSON: go->json = optarg; break;
        case G_MEASURE: go->measure = 1; break;
        case G_QUIET: go->quiet = 1; break;
        case G_PLOT_ENV: go->plot_env = optarg; break;
        case G_PLOT_SG: go->plot_sg = optarg; break;
        case ':':
            cli_errorf("gate: option '%s' needs a value", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        case '?':
            cli_errorf("gate: unknown option '%s'; see 'collshift gate --help'", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        default: rc = cli_load_option(c, optarg, lo); break;
        }
    }
    if (rc)
        return rc;
    if (optind >= argc) {
        cli_errorf("gate: no record given; see 'collshift gate --help'");
        return CLI_EXIT_USAGE;
    }
    return 0;
}

static json_t *burst_json(const cs_burst *b)
{
    json_t *o = json_object();
    json_object_set_new(o, "found", json_boolean(b->status == CS_BURST_FOUND));
    json_object_set_new(o, "snr", cli_jnum(b->snr));
    json_object_set_new(o, "floor", cli_jnum(b->floor));
    if (b->status == CS_BURST_FOUND) {
        json_object_set_new(o, "peak_time_s", cli_jnum(b->peak_time_s));
        json_object_set_new(o, "peak", cli_jnum(b->peak));
        json_object_set_new(o, "fwhm_s", cli_jnum(b->fwhm_s));
        json_object_set_new(o, "onset_s", cli_jnum(b->onset_s));
        json_object_set_new(o, "end_s", cli_jnum(b->end_s));
        json_object_set_new(o, "tail_start_s", cli_jnum(b->tail_start_s));
        json_object_set_new(o, "fade_s", cli_jnum(b->fade_s));
        json_object_set_new(o, "onset_clipped", json_boolean(b->onset_clipped));
        json_object_set_new(o, "end_clipped", json_boolean(b->end_clipped));
    }
    return o;
}

static json_t *burst_fit_json(const cs_burst_fit *f)
{
    json_t *o = json_object();
    json_object_set_new(o, "status", json_string(f->status == CS_OK ? "ok" : cs_strerror(f->status)));
    json_object_set_new(o, "t_from_s", cli_jnum(f->t_from_s));
    json_object_set_new(o, "t_to_s", cli_jnum(f->t_to_s));
    if (f->law == CS_BURST_LAW_EXP) {
        json_object_set_new(o, "rate_per_s", cli_jnum(f->rate_per_s));
        json_object_set_new(o, "rate_per_s_err", cli_jnum(f->rate_err_per_s));
    } else {
        json_object_set_new(o, "t_origin_s", cli_jnum(f->t_origin_s));
        json_object_set_new(o, "exponent", cli_jnum(f->exponent));
        json_object_set_new(o, "exponent_err", cli_jnum(f->exponent_err));
    }
    json_object_set_new(o, "chi2", cli_jnum(f->chi2));
    json_object_set_new(o, "dof", json_integer((json_int_t)f->dof));
    return o;
}


/* PREFIX_GATE.csv, or PREFIX_STEM_GATE.csv with several files. */
static void out_name(char *buf, size_t n, const char *prefix, const char *path, int several, const char *gate)
{
    if (!several) {
        snprintf(buf, n, "%s_%s.csv", prefix, gate);
        return;
    }
    const char *base = strrchr(path, '/');
    base = base ? base + 1 : path;
    char stem[256];
    snprintf(stem, sizeof stem, "%s", base);
    char *dot = strrchr(stem, '.');
    if (dot && dot != stem)
        *dot = '\0';
    snprintf(buf, n, "%s_%s_%s.csv", prefix, stem, gate);
}

static int write_gated_csv(const char *path, const cs_gated_spectrum *gs, const char *source)
{
    cli_buf b = {0};
    char wbuf[CS_WINDOW_SPEC_MAX];
    cli_bprintf(&b, "# source = %s\n# gate = %s\n# gate_start = %.17g s\n# gate_length = %.17g s\n", source,
              gs->gate.name, gs->gate.start_s, gs->gate.length_s);
    cli_bprintf(&b, "# window = %s\n# pad = %zu\n# nfft = %zu\n# enbw = %.17g Hz\n# lo = %.17g Hz\n# nshots = %zu\n",
              cs_window_format(&gs->gate.window, wbuf, sizeof wbuf), gs->pad, gs->nfft, gs->enbw_hz, gs->lo_hz,
              gs->nshots);
    cli_bprintf(&b, "# psd_convention = %s\n", gs->one_sided ? "one-sided" : "two-sided");
    const cs_spectrum *s = gs->psd;
    cli_bprintf(&b, s->sigma ? "frequency_hz,psd,psd_err\n" : "frequency_hz,psd\n");
    for (size_t i = 0; i < s->n; i++) {
        if (s->sigma)
            cli_bprintf(&b, "%.17g,%.10g,%.10g\n", s->freq_hz[i], s->y[i], s->sigma[i]);
        else
            cli_bprintf(&b, "%.17g,%.10g\n", s->freq_hz[i], s->y[i]);
    }
    int rc = b.p ? cli_write_text(path, b.p) : CLI_EXIT_DATA;
    free(b.p);
    return rc;
}

/* Fit plain profiles plus a constant floor to a gated PSD; returns a JSON summary. */
static json_t *fit_gated(const char *list, const cs_gated_spectrum *gs, int quiet, int *worst)
{
    cs_error err;
    cs_error_clear(&err);
    cs_model *m = cs_model_alloc(list, CS_BASELINE_CONST, CS_MODEL_SUM, &err);
    json_t *o = json_object();
    if (!m) {
        json_object_set_new(o, "status", json_string("failed"));
        json_object_set_new(o, "message", cli_jstring(err.msg));
        return o;
    }
    cs_fit_parameters par = cs_fit_default_parameters();
    par.weighting = gs->psd->sigma ? CS_WEIGHT_SIGMA : CS_WEIGHT_NOISE;
    cs_fit_result *r = NULL;
    int rc = cs_fit_run(NULL, m, gs->psd->freq_hz, gs->psd->y, gs->psd->sigma, NULL, gs->psd->n, &par, &r, &err);
    if (!r) {
        json_object_set_new(o, "status", json_string("failed"));
        json_object_set_new(o, "message", cli_jstring(err.msg));
        if (!quiet)
            printf("      fit %s: failed: %s\n", list, err.msg);
        if (*worst == CLI_EXIT_OK)
            *worst = CLI_EXIT_ANALYSIS;
        cs_model_free(m);
        return o;
    }
    if (rc != CS_OK && *worst == CLI_EXIT_OK)
        *worst = CLI_EXIT_ANALYSIS;
    json_object_set_new(o, "status", json_string(cs_fit_status_name(r->status)));
    json_object_set_new(o, "stop_reason", json_string(cs_fit_stop_name(r->stop)));
    json_object_set_new(o, "model", json_string(list));
    json_object_set_new(o, "redchi2", cli_jnum(r->redchi2));
    json_object_set_new(o, "errors_scaled", json_boolean(r->errors_scaled));
    json_t *comps = json_array();
    char b1[96], b2[96];
    for (size_t c = 0; c < m->ncomp; c++) {
        const cs_model_component *mc = &m->comp[c];
        json_t *jc = json_object();
        json_object_set_new(jc, "profile", json_string(mc->type->name));
        double center = r->value[mc->first], center_err = r->err[mc->first];
        const cs_profile_derived *d = &r->derived[c];
        double fw = d->value[CS_PROFILE_FWHM], fwe = d->err[CS_PROFILE_FWHM];
        json_object_set_new(jc, "center_hz", cli_jnum(center));
        json_object_set_new(jc, "center_hz_err", cli_jnum(center_err));
        json_object_set_new(jc, "fwhm_hz", cli_jnum(fw));
        json_object_set_new(jc, "fwhm_hz_err", cli_jnum(fwe));
        size_t ai = mc->first + mc->type->nparams - 1;
        json_object_set_new(jc, "area", cli_jnum(r->value[ai]));
        json_object_set_new(jc, "area_err", cli_jnum(r->err[ai]));
        json_array_append_new(comps, jc);
        if (!quiet)
            printf("      fit %zu %-8s center %s, fwhm %s\n", c + 1, mc->type->name,
                   cs_format_value_err(center, center_err, CS_DIM_FREQUENCY, b1, sizeof b1),
                   cs_format_value_err(fw, fwe, CS_DIM_FREQUENCY, b2, sizeof b2));
    }
    json_object_set_new(o, "components", comps);
    if (!quiet && r->status != CS_FIT_CONVERGED)
        printf("      fit status: %s (%s)\n", cs_fit_status_name(r->status), cs_fit_stop_name(r->stop));
    if (!quiet)
        printf("      (plain profiles on a periodogram: the line is convolved with the gate and the\n"
               "       bins are not Gaussian; prefer the gate-aware profiles for published widths)\n");
    cs_fit_result_free(r);
    cs_model_free(m);
    return o;
}

/* Gate-aware fit of decay/burst components to the gate's samples; returns a JSON summary. */
static json_t *gatefit_gate(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *g, const char *list,
                            double lo_hz, int quiet, int *worst)
{
    cs_error err;
    cs_error_clear(&err);
    cs_gatefit_options o;
    cs_gatefit_options_default(&o);
    cs_gatefit_result *r = NULL;
    int rc = cs_gatefit_run(ws, rec, g, list, lo_hz, &o, &r, &err);
    json_t *jo = json_object();
    json_object_set_new(jo, "model", json_string(list));
    json_object_set_new(jo, "method", json_string("gate-aware: least squares on the gate's samples"));
    if (!r) {
        json_object_set_new(jo, "status", json_string("failed"));
        json_object_set_new(jo, "message", cli_jstring(err.msg));
        if (!quiet)
            printf("      fit %s: failed: %s\n", list, err.msg);
        if (*worst == CLI_EXIT_OK)
            *worst = CLI_EXIT_ANALYSIS;
        return jo;
    }
    if (rc != CS_OK && *worst == CLI_EXIT_OK)
        *worst = CLI_EXIT_ANALYSIS;
    json_object_set_new(jo, "status", json_string(cs_fit_status_name(r->status)));
    json_object_set_new(jo, "stop_reason", json_string(cs_fit_stop_name(r->stop)));
    json_object_set_new(jo, "redchi2", cli_jnum(r->redchi2));
    json_object_set_new(jo, "noise_sd", cli_jnum(r->noise_sd));
    json_object_set_new(jo, "errors_scaled", json_boolean(r->errors_scaled));
    json_t *comps = json_array();
    char b1[96], b2[96];
    for (size_t c = 0; c < r->ncomp; c++) {
        const cs_gatefit_component *k = &r->comp[c];
        json_t *jc = json_object();
        cli_gatefit_component_json(k, jc);
        json_array_append_new(comps, jc);
        if (!quiet)
            printf("      fit %zu %-6s center %s, fwhm %s  (gate-aware)\n", c + 1, cs_gatefit_kind_name(k->kind),
                   cs_format_value_err(k->center_hz, k->center_hz_err, CS_DIM_FREQUENCY, b1, sizeof b1),
                   cs_format_value_err(k->fwhm_hz, k->fwhm_hz_err, CS_DIM_FREQUENCY, b2, sizeof b2));
    }
    json_object_set_new(jo, "components", comps);
    if (!quiet && r->status != CS_FIT_CONVERGED)
        printf("      fit status: %s\n", cs_fit_status_name(r->status));
    cs_gatefit_result_free(r);
    return jo;
}

/* 1 when every component of list is gate-aware (decay, burst). */
static int is_gate_aware(const char *list)
{
    cs_gatefit_kind kinds[CS_GATEFIT_MAX_COMP];
    size_t n;
    return cs_gatefit_parse(list, kinds, CS_GATEFIT_MAX_COMP, &n, NULL) == CS_OK;
}

/* Matrix-pencil estimate of the damped exponentials in a gate (time domain, no window): an
 * independent cross-check of the Fourier fits. Returns a JSON array of components. */
static json_t *pencil_gate(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *g, const cs_burst *b,
                           double lo_hz, int quiet)
{
    json_t *a = json_array();
    size_t first, count;
    cs_error err;
    if (cs_gate_samples(g, rec, &first, &count, &err) != CS_OK)
        return a;
    /* only the stretch with signal: samples after the envelope has faded into the noise add
       nothing but noise to the pencil's data matrix */
    if (b->status == CS_BURST_FOUND && isfinite(b->fade_s)) {
        double tf = (b->fade_s - rec->t0_s) / rec->dt_s;
        if (tf > (double)first && tf < (double)(first + count))
            count = (size_t)tf - first + 1;
    }
    if (count < 16)
        return a;
    cs_pencil_parameters pp = cs_pencil_default_parameters();
    cs_pencil_result pr;
    cs_pencil_result_init(&pr);
    const double *x = rec->data + (rec->is_complex ? 2 * first : first);
    int rc = cs_pencil_estimate_ws(ws, x, count, rec->is_complex, rec->dt_s, &pp, &pr, &err);
    if (rc == CS_OK || rc == CS_ENOCONV) {
        char b1[96], b2[96];
        size_t shown = 0;
        for (size_t k = 0; k < pr.order && shown < 3; k++) {
            const cs_pencil_component *c = &pr.comp[k];
            if (!rec->is_complex && c->freq_hz < 0)
                continue;  /* a real record's components come in +- pairs: keep the positive one */
            if (!(c->gamma_per_s > 0))
                continue;  /* a growing exponential is part of a burst's shape, not a line */
            json_t *o = json_object();
            json_object_set_new(o, "center_hz", cli_jnum(c->freq_hz + lo_hz));
            json_object_set_new(o, "center_hz_err", cli_jnum(c->freq_hz_err));
            json_object_set_new(o, "fwhm_hz", cli_jnum(c->fwhm_hz));
            json_object_set_new(o, "fwhm_hz_err", cli_jnum(c->fwhm_hz_err));
            json_object_set_new(o, "gamma_per_s", cli_jnum(c->gamma_per_s));
            json_object_set_new(o, "gamma_per_s_err", cli_jnum(c->gamma_per_s_err));
            json_object_set_new(o, "amplitude", cli_jnum(c->amplitude));
            json_array_append_new(a, o);
            if (!quiet)
                printf("      pencil %zu: center %s, fwhm %s\n", shown + 1,
                       cs_format_value_err(c->freq_hz + lo_hz, c->freq_hz_err, CS_DIM_FREQUENCY, b1, sizeof b1),
                       cs_format_value_err(c->fwhm_hz, c->fwhm_hz_err, CS_DIM_FREQUENCY, b2, sizeof b2));
            shown++;
        }
    }
    cs_pencil_result_release(&pr);
    return a;
}

/* Analyse one file; returns its JSON object. */
/* The gates as the figures name them (absolute times). */
static size_t plot_gates(const cs_gate *gates, size_t ng, cs_plot_gate *pg)
{
    for (size_t k = 0; k < ng; k++) {
        pg[k].name = gates[k].name;
        pg[k].start_s = gates[k].t_start_s;
        pg[k].length_s = gates[k].length_s;
    }
    return ng;
}


static json_t *gate_file(cs_gate_workspace *ws, const char *path, const gate_opts *go, const cs_load_options *lo,
                         int several, int *worst, json_t *figures)
{
    char b1[64], b2[64], b3[64], b4[64], b5[64];
    cs_error err;
    cs_error_clear(&err);
    cs_loaded l;
    json_t *jf = json_object();
    cli_json_set_path(jf, "file", path);
    if (cs_io_load(path, lo, &l, &err) != CS_OK) {
        int code = cli_report(&err);
        if (*worst == CLI_EXIT_OK || code > *worst)
            *worst = code;
        json_object_set_new(jf, "status", json_string("error"));
        json_object_set_new(jf, "error", cli_jstring(err.msg));
        return jf;
    }
    if (l.kind != CS_KIND_RECORD) {
        cli_errorf("'%s': holds a spectrum, not a time record; fit spectra with 'collshift fit'", path);
        cs_loaded_release(&l);
        *worst = CLI_EXIT_DATA;
        json_object_set_new(jf, "status", json_string("error"));
        return jf;
    }
    cs_record *rec = l.records[0];
    double lo_hz = go->lo_hz;
    if (!go->have_lo && cs_meta_get_si(&rec->meta, "lo", CS_DIM_FREQUENCY, &lo_hz, NULL) != CS_OK)
        lo_hz = 0.0;
    json_object_set_new(jf, "shots", json_integer((json_int_t)l.nrecords));
    json_object_set_new(jf, "lo_hz", json_real(lo_hz));
    if (!go->quiet)
        printf("%s: %zu shot%s of %zu %s samples, dt %s, LO %s\n", path, l.nrecords, l.nrecords == 1 ? "" : "s",
               rec->n, rec->is_complex ? "complex" : "real", cs_quantity_format(rec->dt_s, CS_DIM_TIME, 6, b1, sizeof b1),
               cs_quantity_format(lo_hz, CS_DIM_FREQUENCY, 12, b2, sizeof b2));

    /* envelope and burst of the first shot (or of the power average of the shots' envelopes
       would blur jitter; the first shot is what the gates are placed on) */
    cs_envelope *env = NULL;
    cs_burst burst;
    memset(&burst, 0, sizeof burst);
    burst.status = CS_BURST_NONE;
    cs_burst_decay *decay = NULL;
    if (cs_envelope_compute(ws, rec, NULL, &env, &err) == CS_OK) {
        if (cs_burst_detect(env, NULL, &burst, &err) == CS_OK && burst.status == CS_BURST_FOUND)
            cs_burst_decay_analyse(env, &burst, &decay, &err);
    } else {
        cli_report(&err);
        *worst = CLI_EXIT_DATA;
    }
    json_object_set_new(jf, "burst_detect", burst_json(&burst));
    if (!go->quiet) {
        if (burst.status == CS_BURST_FOUND)
            printf("  burst: peak at %s, FWHM %s, onset %s, end %s, tail from %s (SNR %.3g)\n",
                   cs_quantity_format(burst.peak_time_s, CS_DIM_TIME, 6, b1, sizeof b1),
                   cs_quantity_format(burst.fwhm_s, CS_DIM_TIME, 4, b2, sizeof b2),
                   cs_quantity_format(burst.onset_s, CS_DIM_TIME, 6, b3, sizeof b3),
                   cs_quantity_format(burst.end_s, CS_DIM_TIME, 6, b4, sizeof b4),
                   cs_quantity_format(burst.tail_start_s, CS_DIM_TIME, 6, b5, sizeof b5), burst.snr);
        else
            printf("  burst: none found (peak not significantly above the noise floor)\n");
    }
    if (decay) {
        json_t *jd = json_object();
        json_object_set_new(jd, "exp_start_s", cli_jnum(decay->exp_start_s));
        json_object_set_new(jd, "exp_end_s", cli_jnum(decay->exp_end_s));
        json_object_set_new(jd, "nonexp_start_s", cli_jnum(decay->nonexp_start_s));
        json_object_set_new(jd, "nonexp_end_s", cli_jnum(decay->nonexp_end_s));
        json_object_set_new(jd, "exp_fit", burst_fit_json(&decay->exp_fit));
        json_object_set_new(jd, "power_fit", burst_fit_json(&decay->power_fit));
        json_t *lr = json_array();
        for (size_t i = 0; i < decay->n; i++) {
            json_t *p = json_array();
            json_array_append_new(p, cli_jnum(decay->t_s[i]));
            json_array_append_new(p, cli_jnum(decay->rate_per_s[i]));
            json_array_append_new(p, cli_jnum(decay->rate_err_per_s[i]));
            json_array_append_new(lr, p);
        }
        json_object_set_new(jd, "local_rate", lr);
        json_object_set_new(jd, "local_rate_columns", json_string("t_s, rate_per_s, rate_per_s_err"));
        json_object_set_new(jf, "decay", jd);
        if (!go->quiet) {
            if (decay->exp_fit.status == CS_OK)
                printf("  decay: exponential from %s, intensity rate %s\n",
                       cs_quantity_format(decay->exp_start_s, CS_DIM_TIME, 6, b1, sizeof b1),
                       cs_format_value_err(decay->exp_fit.rate_per_s, decay->exp_fit.rate_err_per_s, CS_DIM_RATE, b2, sizeof b2));
            if (decay->power_fit.status == CS_OK)
                printf("  decay: non-exponential stretch %s .. %s, power law exponent %.4g +- %.2g\n",
                       cs_quantity_format(decay->nonexp_start_s, CS_DIM_TIME, 6, b1, sizeof b1),
                       cs_quantity_format(decay->nonexp_end_s, CS_DIM_TIME, 6, b2, sizeof b2),
                       decay->power_fit.exponent, decay->power_fit.exponent_err);
        }
    }

    /* gates */
    cs_gate gates[MAX_GATES];
    size_t ng = 0;
    int ok = 1;
    if (go->ngates == 0) {
        if (burst.status != CS_BURST_FOUND || cs_gate_auto(rec, &burst, &go->window, gates, &ng, &err) != CS_OK) {
            cli_errorf("'%s': no burst found, so no automatic gates; give them with --gate NAME=START:LENGTH", path);
            *worst = CLI_EXIT_ANALYSIS > *worst ? CLI_EXIT_ANALYSIS : *worst;
            ok = 0;
        } else if (!go->window_given && ng == 2) {
            /* a decaying tail sits at the start of the late gate, where a tapered window would
               weight it down to nothing: the late gate is rectangular unless --window says */
            cs_window_parse("rect", &gates[1].window, NULL);
        }
    } else {
        for (size_t k = 0; k < go->ngates && ok; k++) {
            cs_gate_spec spec;
            if (cs_gate_spec_parse(go->gate_text[k], &go->window, &spec, &err) != CS_OK ||
                cs_gate_resolve(&spec, rec, burst.status == CS_BURST_FOUND ? &burst : NULL, &gates[ng], &err) != CS_OK) {
                cli_errorf("'%s': --gate '%s': %s", path, go->gate_text[k], err.msg);
                *worst = cli_exit_code(err.code) > *worst ? cli_exit_code(err.code) : *worst;
                ok = 0;
            } else {
                ng++;
            }
        }
    }
    json_t *jg = json_array();
    cs_gate_options gopt;
    cs_gate_options_default(&gopt);
    gopt.pad = go->pad;
    gopt.lo_hz = lo_hz;
    gopt.average = go->average;
    for (size_t k = 0; ok && k < ng; k++) {
        cs_gated_spectrum *gs = NULL;
        int rc = l.nrecords > 1 ? cs_gate_spectrum_shots(ws, l.records, l.nrecords, &gates[k], &gopt, &gs, &err)
                                : cs_gate_spectrum(ws, rec, &gates[k], &gopt, &gs, &err);
        json_t *o = json_object();
        char wbuf[CS_WINDOW_SPEC_MAX];
        json_object_set_new(o, "name", json_string(gates[k].name));
        json_object_set_new(o, "start_s", json_real(gates[k].start_s));
        json_object_set_new(o, "length_s", json_real(gates[k].length_s));
        json_object_set_new(o, "window", json_string(cs_window_format(&gates[k].window, wbuf, sizeof wbuf)));
        json_object_set_new(o, "clipped", json_boolean(gates[k].clipped));
        if (rc != CS_OK) {
            cli_errorf("'%s': gate '%s': %s", path, gates[k].name, err.msg);
            *worst = cli_exit_code(rc) > *worst ? cli_exit_code(rc) : *worst;
            json_object_set_new(o, "status", cli_jstring(err.msg));
            json_array_append_new(jg, o);
            continue;
        }
        json_object_set_new(o, "samples", json_integer((json_int_t)gs->m));
        json_object_set_new(o, "pad", json_integer((json_int_t)gs->pad));
        json_object_set_new(o, "nfft", json_integer((json_int_t)gs->nfft));
        json_object_set_new(o, "df_hz", json_real(gs->df_hz));
        json_object_set_new(o, "enbw_hz", json_real(gs->enbw_hz));
        json_object_set_new(o, "lo_hz", json_real(gs->lo_hz));
        json_object_set_new(o, "nshots", json_integer((json_int_t)gs->nshots));
        json_object_set_new(o, "average", json_string(gs->average == CS_GATE_AVERAGE_COHERENT ? "coherent" : "power"));
        json_object_set_new(o, "psd_convention", json_string(gs->one_sided ? "one-sided" : "two-sided"));
        /* the strongest bin, a first look at where the line is */
        size_t imax = 0;
        for (size_t i = 1; i < gs->psd->n; i++)
            if (gs->psd->y[i] > gs->psd->y[imax])
                imax = i;
        json_object_set_new(o, "peak_hz", json_real(gs->psd->freq_hz[imax]));
        if (!go->quiet)
            printf("  gate %-8s %s .. %s (%zu samples, %s%s), nfft %zu, bin %s, peak at %s\n", gates[k].name,
                   cs_quantity_format(gates[k].start_s, CS_DIM_TIME, 6, b1, sizeof b1),
                   cs_quantity_format(gates[k].start_s + gates[k].length_s, CS_DIM_TIME, 6, b2, sizeof b2), gs->m,
                   wbuf, gates[k].clipped ? ", clipped" : "", gs->nfft,
                   cs_quantity_format(gs->df_hz, CS_DIM_FREQUENCY, 4, b3, sizeof b3),
                   cs_quantity_format(gs->psd->freq_hz[imax], CS_DIM_FREQUENCY, 10, b4, sizeof b4));
        if (go->out) {
            char name[1024];
            out_name(name, sizeof name, go->out, path, several, gates[k].name);
            int w = write_gated_csv(name, gs, path);
            if (w) {
                if (*worst == CLI_EXIT_OK)
                    *worst = w;
            } else {
                cli_json_set_path(o, "output", name);
            }
        }
        if (go->fit)
            json_object_set_new(o, "fit", is_gate_aware(go->fit)
                                              ? gatefit_gate(ws, rec, &gates[k], go->fit, lo_hz, go->quiet, worst)
                                              : fit_gated(go->fit, gs, go->quiet, worst));
        json_object_set_new(o, "pencil", pencil_gate(ws, rec, &gates[k], &burst, lo_hz, go->quiet));
        json_array_append_new(jg, o);
        cs_gated_spectrum_free(gs);
    }
    json_object_set_new(jf, "gates", jg);

    cs_plot_gate pg[MAX_GATES];
    size_t npg = ok ? plot_gates(gates, ng, pg) : 0;
    if (go->plot_env && env) {
        char name[1024];
        cli_plot_name_for(name, sizeof name, go->plot_env, path, several);
        int w = cli_plot_envelope(name, env, pg, npg, figures);
        if (w > *worst)
            *worst = w;
    }
    if (go->spectrogram || go->plot_sg) {
        cs_spectrogram_params sp;
        cs_spectrogram_params_default(&sp);
        if (go->segment)
            sp.segment = go->segment;
        if (go->hop)
            sp.hop = go->hop;
        sp.window = go->window;
        sp.lo_hz = lo_hz;
        cs_spectrogram *sg = NULL;
        char name[1024] = "";
        if (go->spectrogram && several) {
            out_name(name, sizeof name, go->spectrogram, path, 1, "spectrogram");
        } else if (go->spectrogram) {
            snprintf(name, sizeof name, "%s", go->spectrogram);
        }
        if (cs_spectrogram_compute(ws, rec, &sp, &sg, &err) != CS_OK ||
            (go->spectrogram && cs_spectrogram_write_csv(name, sg, &err) != CS_OK)) {
            cli_errorf("'%s': spectrogram: %s", path, err.msg);
            *worst = cli_exit_code(err.code) > *worst ? cli_exit_code(err.code) : *worst;
        } else if (go->spectrogram) {
            cli_json_set_path(jf, "spectrogram", name);
        }
        if (go->plot_sg && sg) {
            char fig[1024];
            cli_plot_name_for(fig, sizeof fig, go->plot_sg, path, several);
            cs_plot_spectrogram_data d;
            memset(&d, 0, sizeof d);
            d.ntime = sg->ntime;
            d.nfreq = sg->nfreq;
            d.time_s = sg->time_s;
            d.freq_hz = sg->freq_hz;
            d.psd = sg->psd;
            d.ngates = npg;
            d.gates = npg ? pg : NULL;
            cs_plot_options o;
            cs_plot_options_init(&o);
            cs_error perr;
            cs_error_clear(&perr);
            if (cs_plot_spectrogram(fig, &d, &o, &perr) != CS_OK) {
                int w = cli_plot_failed(fig, &perr);
                if (w > *worst)
                    *worst = w;
            } else {
                json_array_append_new(figures, cli_jstring(fig));
            }
        }
        cs_spectrogram_free(sg);
    }
    json_object_set_new(jf, "status", json_string("ok"));
    cs_burst_decay_free(decay);
    cs_envelope_free(env);
    cs_loaded_release(&l);
    return jf;
}

int cmd_gate(int argc, char **argv)
{
    gate_opts go;
    memset(&go, 0, sizeof go);
    go.pad = 2;
    go.average = CS_GATE_AVERAGE_POWER;
    cs_window_parse("hann", &go.window, NULL);
    cs_load_options lo;
    cs_load_options_init(&lo);
    int rc = parse_args(argc, argv, &go, &lo);
    if (rc)
        return rc;
    /* check the gate texts once before touching files */
    for (size_t k = 0; k < go.ngates; k++) {
        cs_gate_spec spec;
        cs_error err;
        if (cs_gate_spec_parse(go.gate_text[k], &go.window, &spec, &err) != CS_OK) {
            cli_errorf("--gate '%s': %s", go.gate_text[k], err.msg);
            return CLI_EXIT_USAGE;
        }
    }
    if (go.fit && !is_gate_aware(go.fit)) {
        cs_error err;
        cs_model *m = cs_model_alloc(go.fit, CS_BASELINE_CONST, CS_MODEL_SUM, &err);
        if (!m) {
            cli_errorf("--fit '%s': %s (gate-aware components are 'decay' and 'burst'; they cannot be "
                       "mixed with plain profiles)", go.fit, err.msg);
            return CLI_EXIT_USAGE;
        }
        cs_model_free(m);
    }
    cs_gate_wisdom_load(NULL, NULL);   /* cached wisdom, if any; a missing file is normal */
    cs_gate_workspace *ws = cs_gate_alloc();
    if (!ws) {
        cli_errorf("out of memory");
        return CLI_EXIT_DATA;
    }
    if (go.measure)
        cs_gate_set_effort(ws, CS_GATE_EFFORT_MEASURE);
    int worst = CLI_EXIT_OK;
    json_t *files = json_array(), *figures = json_array();
    int several = argc - optind > 1;
    for (int a = optind; a < argc; a++)
        json_array_append_new(files, gate_file(ws, argv[a], &go, &lo, several, &worst, figures));
    cs_gate_free(ws);
    if (go.measure)
        cs_gate_wisdom_save(NULL, NULL);
    if (go.json) {
        json_t *root = json_object();
        json_object_set_new(root, "command", json_string("gate"));
        json_object_set_new(root, "conventions", json_string("times in s on the record's axis (gate start_s from the "
                                                             "first sample); frequencies in cyclic Hz with the LO added; "
                                                             "PSD in signal^2/Hz"));
        json_object_set_new(root, "files", files);
        json_object_set_new(root, "figures", figures);
        figures = NULL;
        char *text = json_dumps(root, JSON_INDENT(2) | JSON_REAL_PRECISION(15));
        json_decref(root);
        if (text) {
            int w = cli_write_text(go.json, text);
            if (w == 0 && strcmp(go.json, "-") == 0)
                fputc('\n', stdout);
            if (w && worst == CLI_EXIT_OK)
                worst = w;
            free(text);
        }
    } else {
        json_decref(files);
    }
    json_decref(figures);
    return worst;
}
